//! The session's decisions on virtual time, without sockets: a bench plays
//! the controller, the inhibit line and the journal, keeping its own record
//! of what was written and sent, and the tests check that record (not the
//! session's own view). The calibration is an invented straight line:
//! steps = (hz - 7 000 000) / 100, so 7.1 MHz is 1000 steps.

use crate::follow::{TuneFor, WhileUnknown};
use std::sync::Arc;
use std::time::Duration;

use super::*;
use crate::calibrate::StepMap;
use crate::follow::{Band, Policy};
use crate::rig::dialect::Dialect;

struct Line;
impl StepMap for Line {
    fn steps_at(&self, hz: f64) -> f64 {
        (hz - 7_000_000.0) / 100.0
    }
}

/// The policy's inhibit tail.
const TAIL: Duration = Duration::from_millis(50);

fn ms(v: u64) -> Duration {
    Duration::from_millis(v)
}

fn policy(backlash: i64) -> Policy {
    Policy {
        bands: vec![Band {
            name: "40m".into(),
            low_hz: 7_000_000,
            high_hz: 7_300_000,
            guard_hz: 0,
            hysteresis_hz: 500,
            debounce: ms(30),
        }],
        min_steps: 0,
        max_steps: 3000,
        backlash_steps: backlash,
        approach: Approach::Up,
        debounce: ms(30),
        min_move_steps: 3,
        inhibit_lead: ms(5),
        inhibit_tail: TAIL,
        candidate_dwell: ms(5_000),
        // These rules model a station with an inhibit line wired; the
        // start-up hold until tuned has tests of its own.
        tune_for: TuneFor::Transmit,
        while_unknown: WhileUnknown::MoveUnderInhibit,
        line_holds_commands: true,
        inhibit_until_tuned: false,
        cover_alternate: false,
        burst_gap: std::time::Duration::from_millis(100),
        inhibit_while_detuned: false,
        jump: None,
        sweep_settle: None,
    }
}

struct Bench {
    s: Session,
    dialect: Dialect,
    now: Duration,
    journal: Option<Recorded>,
    fail_journal: bool,
    fail_inhibit: bool,
    /// Every level written to the inhibit line, in order.
    levels: Vec<bool>,
    /// Every command sent to the controller, in order.
    commands: Vec<TunerCommand>,
    transmit: Vec<bool>,
    /// How long the inhibit line takes to set (the bench's clock moves on
    /// by this before the write returns).
    inhibit_delay: Duration,
    /// Every command with when it went, and every inhibit level with when
    /// its write returned, in order.
    timed: Vec<(Duration, Wire)>,
    /// Every record written to the journal, in order.
    written: Vec<Recorded>,
}

/// What the bench saw on its wires, with [`Bench::timed`].
#[derive(Debug, Clone, Copy, PartialEq)]
enum Wire {
    Command(TunerCommand),
    Level(bool),
}

impl Bench {
    fn new(journal: Option<Recorded>, backlash: i64, relax: bool) -> Bench {
        Bench::with_home(journal, backlash, relax, None)
    }

    fn with_home(
        journal: Option<Recorded>,
        backlash: i64,
        relax: bool,
        home: Option<HomeSettings>,
    ) -> Bench {
        Bench::built(journal, backlash, relax, home, None, false)
    }

    /// With `station`, the decoder also reads the station's messages (the
    /// other program's commands going to the rig, as in proxy mode).
    fn with_decoder(
        journal: Option<Recorded>,
        backlash: i64,
        relax: bool,
        home: Option<HomeSettings>,
        station: bool,
    ) -> Bench {
        Bench::built(journal, backlash, relax, home, None, station)
    }

    fn built(
        journal: Option<Recorded>,
        backlash: i64,
        relax: bool,
        home: Option<HomeSettings>,
        small_loop: Option<crate::antenna::SmallLoop>,
        station: bool,
    ) -> Bench {
        let dialect = Dialect::builtin("text-semicolon").expect("built-in dialect");
        let settings = SessionSettings {
            steps_per_second: 20_000.0,
            settle: ms(10),
            reply_margin: ms(500),
            relax_on_exit: relax,
            // A controller board counts from 0 after power-on.
            restart_counts: [0, 0, 0],
            home,
        };
        let core = Follower::new(policy(backlash), Arc::new(Line), None).with_loop(small_loop);
        let decoder = if station {
            dialect.station_decoder(None)
        } else {
            dialect.decoder(None)
        };
        let s = Session::new(core, decoder, journal, settings);
        let mut b = Bench {
            s,
            dialect,
            now: Duration::ZERO,
            journal,
            fail_journal: false,
            fail_inhibit: false,
            levels: Vec::new(),
            commands: Vec::new(),
            transmit: Vec::new(),
            inhibit_delay: Duration::ZERO,
            timed: Vec::new(),
            written: Vec::new(),
        };
        b.pump();
        b
    }

    /// A bench whose controller link came up reporting `controller`.
    fn linked(journal: Option<Recorded>, controller: i64) -> Bench {
        let mut b = Bench::new(journal, 0, false);
        b.tuner(TunerEvent::LinkUp);
        b.tuner(TunerEvent::At { steps: controller });
        // Past the inhibit tail of the start-up.
        b.wait(ms(100));
        b
    }

    /// Runs every deadline for `d` from now.
    fn wait(&mut self, d: Duration) {
        self.run_until(self.now + d);
    }

    fn pump(&mut self) {
        while let Some(o) = self.s.poll_output() {
            match o {
                Output::Command(c) => {
                    self.timed.push((self.now, Wire::Command(c)));
                    self.commands.push(c)
                }
                Output::Inhibit { on } => {
                    self.now += self.inhibit_delay;
                    self.timed.push((self.now, Wire::Level(on)));
                    self.levels.push(on);
                    let r = if self.fail_inhibit {
                        Err(IoFailure::new("inhibit line", "line stuck"))
                    } else {
                        Ok(())
                    };
                    self.s.handle_inhibit_result(self.now, r);
                }
                Output::JournalIntent(intent) => {
                    let r = self.write(intent);
                    self.s.handle_journal_result(self.now, r);
                }
                Output::JournalPosition { steps } => {
                    let r = self.write(Recorded::Known(steps));
                    self.s.handle_journal_result(self.now, r);
                }
                Output::Transmit { on } => self.transmit.push(on),
                Output::Candidate { .. }
                | Output::Log(_)
                | Output::RigWrite { .. }
                | Output::ControllerBoot { .. } => {}
            }
        }
    }

    fn write(&mut self, r: Recorded) -> Result<(), IoFailure> {
        if self.fail_journal {
            return Err(IoFailure::new("position journal", "disk full"));
        }
        self.written.push(r);
        self.journal = Some(r);
        Ok(())
    }

    fn tuner(&mut self, ev: TunerEvent) {
        self.s.handle_tuner(self.now, ev);
        self.pump();
    }

    fn frequency(&mut self, hz: u64) {
        let bytes = self.dialect.encode_frequency(hz, 0);
        self.s.handle_rig_bytes(self.now, Direction::Rx, &bytes);
        self.pump();
    }

    /// Runs every deadline up to `t` (virtual time).
    fn run_until(&mut self, t: Duration) {
        while let Some(d) = self.s.poll_timeout().filter(|d| *d <= t) {
            self.now = d.max(self.now);
            self.s.handle_timeout(self.now);
            self.pump();
        }
        self.now = self.now.max(t);
    }

    fn shutdown(&mut self) {
        self.s.handle_shutdown(self.now);
        self.pump();
    }

    fn gotos(&self) -> Vec<i64> {
        self.commands
            .iter()
            .filter_map(|c| match c {
                TunerCommand::Goto(n) => Some(*n),
                _ => None,
            })
            .collect()
    }
}

#[test]
fn a_first_start_takes_the_controllers_count_and_follows() {
    let mut b = Bench::linked(None, 0);
    assert_eq!(b.journal, Some(Recorded::Known(0)));
    b.frequency(7_100_000);
    b.wait(ms(100));
    assert_eq!(b.gotos(), vec![1000]);
    assert_eq!(b.journal, Some(Recorded::Unknown { from: 0, to: 1000 }));
    b.tuner(TunerEvent::At { steps: 1000 });
    b.wait(ms(1000));
    assert_eq!(b.journal, Some(Recorded::Known(1000)));
    // On while unknown at start, off once known, on for the move, off after.
    assert_eq!(b.levels, vec![true, false, true, false]);
}

#[test]
fn a_clean_journal_and_a_differing_count_send_zero() {
    let mut b = Bench::linked(Some(Recorded::Known(2000)), 0);
    assert_eq!(b.commands, vec![TunerCommand::Zero(2000)]);
    assert_eq!(b.s.core().position(), None);
    b.tuner(TunerEvent::At { steps: 2000 });
    assert_eq!(b.s.core().position(), Some(2000));
    b.frequency(7_250_000);
    b.wait(ms(100));
    assert_eq!(b.gotos(), vec![2500]);
}

#[test]
fn a_controller_that_does_not_take_zero_is_a_fault_and_asked_again() {
    let mut b = Bench::linked(Some(Recorded::Known(2000)), 0);
    b.tuner(TunerEvent::At { steps: 5 });
    assert_eq!(b.s.outcome().faults, 1);
    b.wait(RETRY_AFTER + ms(1));
    assert_eq!(b.commands.last(), Some(&TunerCommand::Where));
    b.tuner(TunerEvent::At { steps: 0 });
    assert_eq!(b.commands.last(), Some(&TunerCommand::Zero(2000)));
}

#[test]
fn an_unfinished_move_blocks_everything_unless_the_controller_reports_its_target() {
    let unfinished = Some(Recorded::Unknown { from: 100, to: 900 });
    let mut b = Bench::linked(unfinished, 0);
    b.frequency(7_100_000);
    b.wait(ms(400));
    b.tuner(TunerEvent::At { steps: 0 });
    assert!(b.commands.is_empty(), "{:?}", b.commands);
    assert_eq!(b.s.core().position(), None);
    assert_eq!(b.journal, unfinished);
    assert_eq!(b.levels, vec![true]);
    b.shutdown();
    assert!(b.s.is_finished());
    assert_eq!(b.levels, vec![true, false]);
    assert_eq!(b.journal, unfinished);

    let b = Bench::linked(unfinished, 900);
    assert_eq!(b.s.core().position(), Some(900));
    assert_eq!(b.journal, Some(Recorded::Known(900)));
}

#[test]
fn a_failed_intent_write_sends_no_goto_and_asks_where_again() {
    let mut b = Bench::linked(None, 0);
    b.fail_journal = true;
    b.frequency(7_100_000);
    b.wait(ms(200));
    assert!(b.gotos().is_empty(), "{:?}", b.commands);
    assert_eq!(b.s.outcome().faults, 1);
    assert_eq!(b.journal, Some(Recorded::Known(0)));
    // The inhibit stays on after the fault.
    assert_eq!(b.levels.last(), Some(&true));
    b.wait(RETRY_AFTER);
    assert_eq!(b.commands, vec![TunerCommand::Where]);
}

#[test]
fn a_failed_inhibit_sends_no_goto() {
    let mut b = Bench::linked(None, 0);
    b.fail_inhibit = true;
    b.frequency(7_100_000);
    b.wait(ms(400));
    assert!(b.gotos().is_empty(), "{:?}", b.commands);
    assert!(b.s.outcome().faults >= 1);
    assert_eq!(b.journal, Some(Recorded::Known(0)));
}

#[test]
fn shutdown_mid_move_waits_for_the_leg_then_stops_and_records() {
    let mut b = Bench::linked(None, 0);
    let t0 = b.now;
    b.frequency(7_100_000);
    b.wait(ms(40));
    assert_eq!(b.gotos(), vec![1000]);
    // Debounce 30 ms, lead 5 ms.
    let sent = t0 + ms(35);
    b.shutdown();
    assert!(!b.s.is_finished());
    // The leg needs 50 ms + 10 ms settle + 500 ms margin; STOP goes at half
    // the margin before that.
    let deadline = sent + ms(50 + 10 + 250);
    b.run_until(deadline - ms(1));
    assert!(!b.commands.contains(&TunerCommand::Stop));
    b.run_until(deadline);
    assert_eq!(b.commands.last(), Some(&TunerCommand::Stop));
    // A frequency now is not acted on.
    b.frequency(7_200_000);
    b.tuner(TunerEvent::At { steps: 321 });
    // The tail after the motor came to rest is honoured before the release.
    assert!(!b.s.is_finished());
    assert_eq!(b.levels.last(), Some(&true));
    b.wait(TAIL);
    assert!(b.s.is_finished());
    assert_eq!(b.journal, Some(Recorded::Known(321)));
    assert_eq!(b.levels.last(), Some(&false));
    assert_eq!(b.gotos(), vec![1000]);
}

#[test]
fn shutdown_without_an_answer_to_stop_keeps_the_unfinished_move() {
    let mut b = Bench::linked(None, 0);
    b.frequency(7_100_000);
    b.wait(ms(40));
    b.shutdown();
    b.wait(ms(310) + STOP_WAIT);
    assert!(b.s.is_finished());
    assert_eq!(b.journal, Some(Recorded::Unknown { from: 0, to: 1000 }));
    // Changed by issue 11: the motor was never confirmed at rest, so the
    // inhibit stays asserted at exit (it was released here before).
    assert_eq!(b.levels.last(), Some(&true));
    assert!(b.s.outcome().unconfirmed);
}

#[test]
fn relax_on_exit_backs_off_half_the_backlash_under_the_inhibit() {
    let mut b = Bench::new(None, 40, true);
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::At { steps: 0 });
    b.wait(ms(100));
    b.frequency(7_100_000);
    b.wait(ms(40));
    b.tuner(TunerEvent::At { steps: 1000 });
    b.wait(ms(500));
    assert_eq!(b.levels, vec![true, false, true, false]);
    b.shutdown();
    // The inhibit first, then the lead, then intent and GOTO.
    assert_eq!(b.levels.last(), Some(&true));
    assert_eq!(b.gotos(), vec![1000]);
    b.wait(ms(5));
    assert_eq!(
        b.journal,
        Some(Recorded::Unknown {
            from: 1000,
            to: 980
        })
    );
    assert_eq!(b.gotos(), vec![1000, 980]);
    b.tuner(TunerEvent::At { steps: 980 });
    // The tail after the motor came to rest is honoured before the release.
    assert!(!b.s.is_finished());
    assert_eq!(b.levels.last(), Some(&true));
    b.wait(TAIL);
    assert!(b.s.is_finished());
    assert_eq!(b.journal, Some(Recorded::Known(980)));
    assert_eq!(b.levels.last(), Some(&false));
}

#[test]
fn relax_on_exit_only_after_an_approach() {
    let mut b = Bench::new(Some(Recorded::Known(1000)), 40, true);
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::At { steps: 1000 });
    b.shutdown();
    assert!(b.s.is_finished());
    assert!(b.commands.is_empty(), "{:?}", b.commands);
    assert_eq!(b.journal, Some(Recorded::Known(1000)));
}

#[test]
fn a_refused_leg_is_a_fault_and_the_position_comes_back_by_where() {
    let mut b = Bench::linked(None, 0);
    b.frequency(7_200_000);
    b.wait(ms(40));
    b.tuner(TunerEvent::Error {
        text: "refused".into(),
    });
    assert_eq!(b.s.outcome().faults, 1);
    b.wait(RETRY_AFTER);
    assert_eq!(b.commands.last(), Some(&TunerCommand::Where));
    // The recovery decides the settled frequency again: the leg is asked
    // for once more; refused a second time, it waits for a new frequency.
    b.tuner(TunerEvent::At { steps: 0 });
    assert_eq!(b.s.core().position(), Some(0));
    b.wait(ms(40));
    assert_eq!(b.gotos(), vec![2000, 2000]);
    b.tuner(TunerEvent::Error {
        text: "refused".into(),
    });
    b.wait(RETRY_AFTER);
    assert_eq!(b.commands.last(), Some(&TunerCommand::Where));
    b.tuner(TunerEvent::At { steps: 0 });
    b.wait(ms(500));
    assert_eq!(b.gotos(), vec![2000, 2000]);
    assert_eq!(b.journal, Some(Recorded::Known(0)));
}

#[test]
fn a_deaf_rig_stops_the_move_and_it_finishes_when_heard_again() {
    let mut b = Bench::linked(None, 0);
    b.frequency(7_100_000);
    b.wait(ms(40));
    b.s.handle_rig_down(b.now);
    b.pump();
    assert_eq!(b.transmit.last(), Some(&true));
    assert_eq!(b.commands.last(), Some(&TunerCommand::Stop));
    b.tuner(TunerEvent::At { steps: 400 });
    assert_eq!(b.journal, Some(Recorded::Known(400)));
    b.s.handle_rig_up(b.now);
    b.pump();
    b.wait(ms(200));
    assert_eq!(b.transmit.last(), Some(&false));
    assert_eq!(b.gotos(), vec![1000, 1000]);
}

// ---------------------------------------------------------------------
// The decisions `tests/live_service.rs` used to check on tokio's wall
// clock, here on virtual time with the same names. The bench plays the
// controller, so "the motor stopped part way" is an `At` the test chooses;
// what is checked is the session's answer to it, read from the bench's
// own record of commands, inhibit levels and journal writes.
// ---------------------------------------------------------------------

impl Bench {
    fn transmit(&mut self, on: bool) {
        let bytes = self.dialect.encode_transmit(on, 0);
        self.s.handle_rig_bytes(self.now, Direction::Rx, &bytes);
        self.pump();
    }

    fn stops(&self) -> usize {
        self.commands
            .iter()
            .filter(|c| **c == TunerCommand::Stop)
            .count()
    }

    /// A linked bench at 0 told 7.1 MHz: once its one `GOTO 1000` has gone
    /// and the move is journalled as unfinished.
    fn move_under_way() -> Bench {
        let mut b = Bench::linked(None, 0);
        b.frequency(7_100_000);
        // Debounce 30 ms, lead 5 ms.
        b.wait(ms(40));
        assert_eq!(b.gotos(), vec![1000]);
        assert_eq!(b.journal, Some(Recorded::Unknown { from: 0, to: 1000 }));
        b
    }
}

#[test]
fn follows_the_vfo_with_the_inhibit_around_the_move_and_journals_it() {
    let mut b = Bench::linked(None, 0);
    b.frequency(7_100_000);
    b.wait(ms(40));
    b.tuner(TunerEvent::At { steps: 1000 });
    b.wait(ms(100));
    b.shutdown();
    // Shutdown honours the inhibit tail after the arrival (issue 11).
    b.wait(TAIL);
    assert!(b.s.is_finished());
    let out = b.s.outcome();
    assert_eq!(out.position, Some(1000));
    assert_eq!(out.moves, 1);
    assert_eq!(out.faults, 0);
    assert_eq!(b.gotos(), vec![1000]);
    assert_eq!(b.journal, Some(Recorded::Known(1000)));
    assert_eq!(b.levels, vec![true, false, true, false]);
}

#[test]
fn no_move_while_transmitting_then_the_move_on_receive() {
    let mut b = Bench::linked(None, 0);
    b.transmit(true);
    b.frequency(7_050_000);
    b.wait(ms(300));
    assert!(b.gotos().is_empty(), "{:?}", b.commands);
    assert_eq!(b.journal, Some(Recorded::Known(0)));
    // Never asserted against a transmission in progress.
    assert_eq!(b.levels, vec![true, false]);
    b.transmit(false);
    b.wait(ms(40));
    assert_eq!(b.gotos(), vec![500]);
    assert_eq!(b.journal, Some(Recorded::Unknown { from: 0, to: 500 }));
    b.tuner(TunerEvent::At { steps: 500 });
    assert_eq!(b.journal, Some(Recorded::Known(500)));
    b.shutdown();
    // Shutdown honours the inhibit tail after the arrival (issue 11).
    b.wait(TAIL);
    assert!(b.s.is_finished());
    assert_eq!(b.s.outcome().position, Some(500));
}

#[test]
fn transmitting_mid_move_stops_the_motor_and_receive_finishes_the_move() {
    let mut b = Bench::move_under_way();
    b.transmit(true);
    assert_eq!(b.commands.last(), Some(&TunerCommand::Stop));
    // The motor stopped part way: that position is on record, and it
    // stays still for longer than the rest of the move would take.
    b.tuner(TunerEvent::At { steps: 400 });
    assert_eq!(b.journal, Some(Recorded::Known(400)));
    b.wait(ms(600));
    assert_eq!(b.journal, Some(Recorded::Known(400)));
    assert_eq!(b.gotos(), vec![1000]);
    assert_eq!(b.stops(), 1);
    // Without `inhibit_while_detuned` the motor at rest ends the window.
    assert_eq!(b.levels, vec![true, false, true, false]);
    b.transmit(false);
    b.wait(ms(40));
    assert_eq!(b.gotos(), vec![1000, 1000]);
    // The rest of the move goes under the inhibit again.
    assert_eq!(b.levels, vec![true, false, true, false, true]);
    assert_eq!(
        b.journal,
        Some(Recorded::Unknown {
            from: 400,
            to: 1000
        })
    );
    b.tuner(TunerEvent::At { steps: 1000 });
    assert_eq!(b.journal, Some(Recorded::Known(1000)));
    b.shutdown();
    // Shutdown honours the inhibit tail after the arrival (issue 11).
    b.wait(TAIL);
    assert!(b.s.is_finished());
    let out = b.s.outcome();
    assert_eq!(out.position, Some(1000));
    assert_eq!(out.faults, 0);
    assert_eq!(b.levels.last(), Some(&false));
}

#[test]
fn a_restarted_controller_is_given_the_journal_position() {
    // The journal says 2000 at rest; the controller restarted and counts 0.
    let mut b = Bench::linked(Some(Recorded::Known(2000)), 0);
    assert_eq!(b.commands, vec![TunerCommand::Zero(2000)]);
    b.tuner(TunerEvent::At { steps: 2000 });
    // Following from 2000: 7.25 MHz is 2500.
    b.frequency(7_250_000);
    b.wait(ms(100));
    assert_eq!(b.gotos(), vec![2500]);
    assert_eq!(
        b.journal,
        Some(Recorded::Unknown {
            from: 2000,
            to: 2500
        })
    );
    b.tuner(TunerEvent::At { steps: 2500 });
    assert_eq!(b.journal, Some(Recorded::Known(2500)));
    b.shutdown();
    // Shutdown honours the inhibit tail after the arrival (issue 11).
    b.wait(TAIL);
    assert!(b.s.is_finished());
    let out = b.s.outcome();
    assert_eq!(out.position, Some(2500));
    assert_eq!(out.moves, 1);
}

#[test]
fn an_unfinished_move_in_the_journal_keeps_everything_still() {
    let unfinished = Some(Recorded::Unknown { from: 100, to: 900 });
    let mut b = Bench::linked(unfinished, 0);
    b.frequency(7_100_000);
    b.wait(ms(400));
    b.shutdown();
    assert!(b.s.is_finished());
    assert!(b.commands.is_empty(), "{:?}", b.commands);
    let out = b.s.outcome();
    assert_eq!(out.position, None);
    assert_eq!(out.moves, 0);
    assert_eq!(b.journal, unfinished);
    // Asserted at start and held until shutdown releases it.
    assert_eq!(b.levels, vec![true, false]);
}

#[test]
fn the_controller_finishing_the_journalled_move_is_trusted() {
    let mut b = Bench::linked(Some(Recorded::Unknown { from: 100, to: 900 }), 900);
    assert_eq!(b.journal, Some(Recorded::Known(900)));
    b.shutdown();
    assert!(b.s.is_finished());
    assert_eq!(b.s.outcome().position, Some(900));
}

#[test]
fn a_failing_inhibit_output_means_no_move() {
    let mut b = Bench::linked(None, 0);
    b.fail_inhibit = true;
    b.frequency(7_100_000);
    b.wait(ms(400));
    b.shutdown();
    b.wait(STOP_WAIT);
    assert!(b.s.is_finished());
    assert!(b.gotos().is_empty(), "{:?}", b.commands);
    assert_eq!(b.journal, Some(Recorded::Known(0)));
    let out = b.s.outcome();
    assert_eq!(out.moves, 0);
    assert!(out.faults >= 1);
}

#[test]
fn a_refused_leg_is_a_fault_and_the_position_comes_back() {
    let mut b = Bench::linked(None, 0);
    b.frequency(7_200_000);
    b.wait(ms(40));
    assert_eq!(b.gotos(), vec![2000]);
    assert_eq!(b.journal, Some(Recorded::Unknown { from: 0, to: 2000 }));
    // A controller whose limits are narrower than ours refuses the leg.
    b.tuner(TunerEvent::Error {
        text: "ERR outside limits".into(),
    });
    assert!(b.s.outcome().faults >= 1);
    // Nothing is asked before the retry is due, then WHERE.
    b.run_until(b.now + RETRY_AFTER - ms(1));
    assert_eq!(b.commands.last(), Some(&TunerCommand::Goto(2000)));
    b.wait(ms(1));
    assert_eq!(b.commands.last(), Some(&TunerCommand::Where));
    // The link stayed up: its count is trusted again without a restart,
    // and the recovery asks for the leg once more; refused again, it waits
    // for a new frequency with the position confirmed.
    b.tuner(TunerEvent::At { steps: 0 });
    b.wait(ms(40));
    assert_eq!(b.gotos(), vec![2000, 2000]);
    b.tuner(TunerEvent::Error {
        text: "ERR outside limits".into(),
    });
    b.wait(RETRY_AFTER);
    assert_eq!(b.commands.last(), Some(&TunerCommand::Where));
    b.tuner(TunerEvent::At { steps: 0 });
    b.wait(ms(500));
    assert_eq!(b.gotos(), vec![2000, 2000]);
    assert_eq!(b.journal, Some(Recorded::Known(0)));
    b.shutdown();
    // Shutdown honours the inhibit tail after the arrival (issue 11).
    b.wait(TAIL);
    assert!(b.s.is_finished());
    let out = b.s.outcome();
    assert_eq!(out.position, Some(0));
    assert!(out.faults >= 1);
}

#[test]
fn relax_on_exit_backs_off_half_the_backlash_toward_the_approach_side() {
    let mut b = Bench::new(None, 40, true);
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::At { steps: 0 });
    b.wait(ms(100));
    b.frequency(7_100_000);
    b.wait(ms(40));
    b.tuner(TunerEvent::At { steps: 1000 });
    b.wait(ms(500));
    b.shutdown();
    b.wait(ms(5));
    // The approach was upward: half the backlash (20) back down.
    assert_eq!(b.gotos(), vec![1000, 980]);
    b.tuner(TunerEvent::At { steps: 980 });
    // The tail after the motor came to rest is honoured before the release.
    assert!(!b.s.is_finished());
    assert_eq!(b.levels.last(), Some(&true));
    b.wait(TAIL);
    assert!(b.s.is_finished());
    assert_eq!(b.s.outcome().position, Some(980));
    assert_eq!(b.journal, Some(Recorded::Known(980)));
    // The last level is the release, after the relaxing move.
    assert_eq!(b.levels.last(), Some(&false));
}

#[test]
fn relax_on_exit_only_after_an_approach_and_only_when_asked() {
    // Nothing moved this run (the last run may have relaxed already).
    let mut b = Bench::new(Some(Recorded::Known(1000)), 40, true);
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::At { steps: 1000 });
    // The controller's answer releases the inhibit asserted at start.
    b.wait(ms(100));
    assert_eq!(b.levels, vec![true, false]);
    b.shutdown();
    assert!(b.s.is_finished());
    assert!(b.commands.is_empty(), "{:?}", b.commands);
    assert_eq!(b.s.outcome().position, Some(1000));
    assert_eq!(b.journal, Some(Recorded::Known(1000)));
    assert_eq!(b.levels, vec![true, false]);

    // An approach, but relax-on-exit not asked for.
    let mut b = Bench::new(None, 40, false);
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::At { steps: 0 });
    b.wait(ms(100));
    b.frequency(7_100_000);
    b.wait(ms(40));
    b.tuner(TunerEvent::At { steps: 1000 });
    b.wait(ms(500));
    b.shutdown();
    b.wait(STOP_WAIT);
    assert!(b.s.is_finished());
    assert_eq!(b.gotos(), vec![1000]);
    assert_eq!(b.s.outcome().position, Some(1000));
    assert_eq!(b.journal, Some(Recorded::Known(1000)));
}

#[test]
fn shutdown_stops_a_move_that_does_not_end_in_time() {
    let mut b = Bench::move_under_way();
    b.shutdown();
    // The controller accepted the leg and never arrives.
    b.wait(ms(50 + 10 + 500));
    assert_eq!(
        b.commands,
        vec![TunerCommand::Goto(1000), TunerCommand::Stop]
    );
    b.tuner(TunerEvent::At { steps: 321 });
    // The tail after the motor came to rest is honoured before the release.
    assert!(!b.s.is_finished());
    assert_eq!(b.levels.last(), Some(&true));
    b.wait(TAIL);
    assert!(b.s.is_finished());
    assert_eq!(b.s.outcome().position, Some(321));
    assert_eq!(b.journal, Some(Recorded::Known(321)));
    assert_eq!(b.levels.last(), Some(&false));
    assert_eq!(
        b.commands,
        vec![TunerCommand::Goto(1000), TunerCommand::Stop]
    );
}

#[test]
fn rig_port_down_mid_move_stops_it_and_the_move_finishes_when_back() {
    let mut b = Bench::move_under_way();
    b.s.handle_rig_down(b.now);
    b.pump();
    // The controller link is told to treat the rig as transmitting.
    assert_eq!(b.transmit.last(), Some(&true));
    assert_eq!(b.commands.last(), Some(&TunerCommand::Stop));
    b.tuner(TunerEvent::At { steps: 400 });
    assert_eq!(b.journal, Some(Recorded::Known(400)));
    // Nothing moves while the port is down.
    b.wait(ms(600));
    assert_eq!(b.gotos(), vec![1000]);
    assert_eq!(b.journal, Some(Recorded::Known(400)));
    b.s.handle_rig_up(b.now);
    b.pump();
    assert_eq!(b.transmit.last(), Some(&false));
    b.wait(ms(40));
    assert_eq!(b.gotos(), vec![1000, 1000]);
    b.tuner(TunerEvent::At { steps: 1000 });
    assert_eq!(b.journal, Some(Recorded::Known(1000)));
    b.shutdown();
    // Shutdown honours the inhibit tail after the arrival (issue 11).
    b.wait(TAIL);
    assert!(b.s.is_finished());
    let out = b.s.outcome();
    assert_eq!(out.position, Some(1000));
    assert_eq!(out.faults, 0);
}

/// The warnings a session gives for `chunks` of rig bytes fed at their
/// times (everything else it says is left aside).
fn only_rejects_notes(chunks: &[(u64, &[u8])]) -> Vec<Note> {
    let dialect = Dialect::builtin("text-semicolon").expect("built-in dialect");
    let settings = SessionSettings {
        steps_per_second: 20_000.0,
        settle: ms(10),
        reply_margin: ms(500),
        relax_on_exit: false,
        restart_counts: [0, 0, 0],
        home: None,
    };
    let core = Follower::new(policy(0), Arc::new(Line), None);
    let mut s = Session::new(core, dialect.decoder(None), None, settings);
    let mut notes = Vec::new();
    for &(t, bytes) in chunks {
        s.handle_rig_bytes(ms(t), Direction::Rx, bytes);
        while let Some(o) = s.poll_output() {
            match o {
                Output::Log(n @ Note::OnlyRejects { .. }) => notes.push(n),
                Output::Inhibit { .. } => s.handle_inhibit_result(ms(t), Ok(())),
                Output::JournalIntent { .. } | Output::JournalPosition { .. } => {
                    s.handle_journal_result(ms(t), Ok(()))
                }
                _ => {}
            }
        }
    }
    notes
}

#[test]
fn rejects_alone_for_seconds_are_warned_of_once_with_the_counts() {
    // What a port at the wrong speed hears: bytes, never a message.
    let noise: &[u8] = b"\x8f\x03\xe7x;\x91\x7f;";
    let chunks: Vec<(u64, &[u8])> = (0..20).map(|i| (i * 250, noise)).collect();
    let notes = only_rejects_notes(&chunks);
    assert_eq!(notes.len(), 1, "{notes:?}");
    let Note::OnlyRejects { hint } = &notes[0] else {
        unreachable!()
    };
    assert!(hint.lasted >= super::super::quiet::QUIET_AFTER);
    // Every byte up to the warning is counted (13 chunks: 0 s to 3 s).
    assert_eq!(hint.bytes, 13 * noise.len());
    // A report among the noise: the port works; nothing to warn of.
    let mut mixed = chunks.clone();
    mixed.insert(8, (1_900, b"FA00007100000;"));
    mixed.insert(16, (3_900, b"FA00007100000;"));
    assert!(only_rejects_notes(&mixed).is_empty());
}

// ---------------------------------------------------------------------
// Issue 11: every leg journalled, nothing trusted unconfirmed, the inhibit
// honest at the edges. Invariants are read from the bench's own records.
// ---------------------------------------------------------------------

/// A bench with a backlash approach upward (`backlash` steps), linked with
/// the controller reporting `controller`.
fn approach_bench(journal: Option<Recorded>, backlash: i64, controller: i64) -> Bench {
    let mut b = Bench::new(journal, backlash, false);
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::At { steps: controller });
    b.wait(ms(100));
    b
}

#[test]
fn each_leg_of_an_approach_is_journalled_before_its_goto() {
    // Approach up, backlash 60: 2000 -> 1000 goes 2000 -> 940 -> 1000.
    let mut b = approach_bench(Some(Recorded::Known(2000)), 60, 2000);
    b.frequency(7_100_000);
    b.wait(ms(40));
    assert_eq!(b.gotos(), vec![940]);
    let first = Recorded::Approach {
        from: 2000,
        via: 940,
        to: 1000,
        final_leg: false,
    };
    assert_eq!(b.journal, Some(first));
    b.tuner(TunerEvent::At { steps: 940 });
    assert_eq!(b.gotos(), vec![940, 1000]);
    assert_eq!(
        b.journal,
        Some(Recorded::Approach {
            from: 2000,
            via: 940,
            to: 1000,
            final_leg: true,
        })
    );
    b.tuner(TunerEvent::At { steps: 1000 });
    assert_eq!(b.journal, Some(Recorded::Known(1000)));
}

#[test]
fn a_failed_final_leg_intent_sends_no_final_goto() {
    let mut b = approach_bench(Some(Recorded::Known(2000)), 60, 2000);
    b.frequency(7_100_000);
    b.wait(ms(40));
    b.fail_journal = true;
    b.tuner(TunerEvent::At { steps: 940 });
    assert_eq!(b.gotos(), vec![940]);
    assert!(b.s.outcome().faults >= 1);
}

#[test]
fn at_start_a_leg_target_is_trusted_and_nothing_is_zeroed() {
    let first = Recorded::Approach {
        from: 2000,
        via: 940,
        to: 1000,
        final_leg: false,
    };
    for controller in [940, 1000] {
        let b = approach_bench(Some(first), 60, controller);
        assert_eq!(b.s.core().position(), Some(controller));
        assert_eq!(b.journal, Some(Recorded::Known(controller)));
        assert!(
            !b.commands
                .iter()
                .any(|c| matches!(c, TunerCommand::Zero(_))),
            "{:?}",
            b.commands
        );
    }
}

#[test]
fn at_start_a_point_on_the_legs_path_is_trusted_only_after_the_motor_was_seen_moving_along_it() {
    let first = Recorded::Approach {
        from: 2000,
        via: 940,
        to: 1000,
        final_leg: false,
    };
    // Seen moving along the leg (`MOVING 940` answers the `WHERE`), then
    // stopped part way (the link's interlock STOP): on the path, trusted.
    let mut b = Bench::new(Some(first), 60, false);
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::Accepted { target: 940 });
    assert_eq!(b.s.core().position(), None);
    b.tuner(TunerEvent::At { steps: 1480 });
    assert_eq!(b.s.core().position(), Some(1480));
    assert_eq!(b.journal, Some(Recorded::Known(1480)));
    b.wait(ms(100));
    assert_eq!(b.levels.last(), Some(&false));
}

/// The soak's violation (journal 986 while the motor stood at 517): the
/// controller restarted mid-leg with a count of its own that happened to
/// lie on the unfinished leg's path. Found at rest there at link-up, with
/// no `MOVING` since, it is no proof of where the motor is: unknown, and
/// nothing is zeroed or moved.
#[test]
fn at_start_a_point_on_the_legs_path_found_already_at_rest_is_unknown() {
    let first = Recorded::Approach {
        from: 200,
        via: 1880,
        to: 1940,
        final_leg: false,
    };
    let mut b = approach_bench(Some(first), 60, 986);
    b.frequency(7_200_000);
    b.wait(ms(400));
    assert_eq!(b.s.core().position(), None);
    assert!(b.commands.is_empty(), "{:?}", b.commands);
    assert_eq!(b.journal, Some(first));
    assert_eq!(b.levels, vec![true]);
    // Moving toward another target than the leg's, then stopped on the
    // path: no proof either.
    let mut b = Bench::new(Some(first), 60, false);
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::Accepted { target: 2500 });
    b.tuner(TunerEvent::At { steps: 986 });
    assert_eq!(b.s.core().position(), None);
    assert_eq!(b.journal, Some(first));
}

/// A bench whose journal was written in the controller's power-on
/// `journal_boot` and whose controller, at link-up, answers `BOOT` with
/// `controller_boot` and is at rest at `controller`.
fn boot_bench(
    journal: Recorded,
    journal_boot: Option<i64>,
    controller_boot: Option<i64>,
    controller: i64,
) -> Bench {
    let mut b = Bench::new(Some(journal), 60, false);
    b.s.st.journal_boot = journal_boot;
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::Boot {
        id: controller_boot,
    });
    b.tuner(TunerEvent::At { steps: controller });
    b.wait(ms(100));
    b
}

/// Issue 11's rule for a controller at rest on an unfinished leg's path
/// (stopped there by a STOP it did not confirm): trusted when the
/// controller says (`BOOT`, protocol version 3) it is in the same power-on
/// as when the journal was written, so its count went on from the move's
/// start; a restarted controller's count on the path (the soak's
/// violation) and a controller that cannot say stay unknown.
#[test]
fn at_start_a_point_on_the_legs_path_is_trusted_in_the_same_power_on_only() {
    let first = Recorded::Approach {
        from: 200,
        via: 1880,
        to: 1940,
        final_leg: false,
    };
    let b = boot_bench(first, Some(7), Some(7), 986);
    assert_eq!(b.s.core().position(), Some(986));
    assert_eq!(b.journal, Some(Recorded::Known(986)));
    assert!(b.commands.is_empty(), "{:?}", b.commands);
    for (journal, controller) in [(Some(7), Some(8)), (Some(7), None), (None, Some(7))] {
        let b = boot_bench(first, journal, controller, 986);
        assert_eq!(b.s.core().position(), None, "{journal:?} {controller:?}");
        assert_eq!(b.journal, Some(first));
        assert!(b.commands.is_empty(), "{:?}", b.commands);
    }
    // Off every leg's path: unknown whatever the controller says.
    let b = boot_bench(first, Some(7), Some(7), 1990);
    assert_eq!(b.s.core().position(), None);
    // A leg target that is also a power-on count is the motor's place in
    // the same power-on.
    let to_zero = Recorded::Approach {
        from: 2000,
        via: 0,
        to: 60,
        final_leg: false,
    };
    assert_eq!(
        boot_bench(to_zero, Some(3), Some(3), 0).s.core().position(),
        Some(0)
    );
    assert_eq!(
        boot_bench(to_zero, Some(3), Some(4), 0).s.core().position(),
        None
    );
}

/// `ZERO` only with proof of a restart: a clean journal, the controller in
/// the same power-on (`BOOT`) yet at a count it would have after one: it
/// did not restart, so the count is evidence (steps lost, the motor moved
/// by someone else), and nothing is zeroed. Restarted (another `BOOT`), it
/// is given the journal's count as before.
#[test]
fn a_power_on_count_in_the_same_power_on_is_not_zeroed() {
    let b = boot_bench(Recorded::Known(500), Some(7), Some(7), 0);
    assert!(b.commands.is_empty(), "{:?}", b.commands);
    assert_eq!(b.s.core().position(), None);
    let b = boot_bench(Recorded::Known(500), Some(7), Some(9), 0);
    assert_eq!(b.commands, vec![TunerCommand::Zero(500)]);
    // Same power-on, same count: the journal is rewritten only to carry
    // the number on to the next start when it differs.
    let b = boot_bench(Recorded::Known(500), None, Some(9), 500);
    assert_eq!(b.s.core().position(), Some(500));
    assert_eq!(b.s.st.journal_boot, Some(9), "written with the new number");
}

/// A move to the lower limit (0) was under way when everything stopped. A
/// controller board restarted mid-move also says 0 (protocols/tuner-line.md:
/// it counts from 0 after power-on), so a 0 found at rest is no proof the
/// motor arrived: unknown, nothing zeroed or moved. Seen moving to 0 since
/// the link came up and then at rest there, it is.
#[test]
fn at_start_a_leg_target_that_is_also_a_power_on_count_is_no_proof() {
    let to_zero = Recorded::Approach {
        from: 2000,
        via: 0,
        to: 60,
        final_leg: false,
    };
    let mut b = approach_bench(Some(to_zero), 60, 0);
    b.frequency(7_200_000);
    b.wait(ms(400));
    assert_eq!(b.s.core().position(), None);
    assert!(b.commands.is_empty(), "{:?}", b.commands);
    assert_eq!(b.journal, Some(to_zero));
    assert_eq!(b.levels, vec![true]);
    // A leg target that no controller restarts from is trusted as before.
    let b = approach_bench(Some(to_zero), 60, 60);
    assert_eq!(b.s.core().position(), Some(60));
    // Seen on its way to 0 after link-up, then at rest there: arrived.
    let mut b = Bench::new(Some(to_zero), 60, false);
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::Accepted { target: 0 });
    b.tuner(TunerEvent::At { steps: 0 });
    b.wait(ms(100));
    assert_eq!(b.s.core().position(), Some(0));
}

#[test]
fn at_start_a_position_off_every_legs_path_is_unknown_and_never_zeroed() {
    // The final leg (940 -> 1000) was under way: the move's start (2000)
    // is off its path, and so is a restarted controller's 0.
    let last = Recorded::Approach {
        from: 2000,
        via: 940,
        to: 1000,
        final_leg: true,
    };
    for controller in [0, 2000, 900, 1001] {
        let mut b = approach_bench(Some(last), 60, controller);
        b.frequency(7_200_000);
        b.wait(ms(400));
        assert_eq!(b.s.core().position(), None, "controller {controller}");
        assert!(b.commands.is_empty(), "{:?}", b.commands);
        assert_eq!(b.journal, Some(last));
        assert_eq!(b.levels, vec![true]);
    }
    // Seen moving along the leg, then at rest off its path: unknown too.
    let mut b = Bench::new(Some(last), 60, false);
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::Accepted { target: 1000 });
    b.tuner(TunerEvent::At { steps: 1200 });
    assert_eq!(b.s.core().position(), None);
    assert_eq!(b.journal, Some(last));
}

#[test]
fn a_format_1_intent_is_checked_along_its_one_leg() {
    let old = Recorded::Unknown {
        from: 498,
        to: 2900,
    };
    let b = approach_bench(Some(old), 0, 2900);
    assert_eq!(b.s.core().position(), Some(2900));
    // Seen moving along the one leg, stopped part way: on its path.
    let mut b = Bench::new(Some(old), 0, false);
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::Accepted { target: 2900 });
    b.tuner(TunerEvent::At { steps: 1600 });
    assert_eq!(b.s.core().position(), Some(1600));
}

#[test]
fn a_controller_at_the_legs_start_or_a_power_on_count_is_no_proof() {
    // Killed mid-move from 0 and the controller power-cycled: it counts 0
    // again, the move's start. That is no evidence of where the motor is.
    let from_zero = Recorded::Unknown { from: 0, to: 1500 };
    let mut b = approach_bench(Some(from_zero), 0, 0);
    assert!(b.commands.is_empty(), "{:?}", b.commands);
    assert_eq!(b.s.core().position(), None);
    b.shutdown();
    assert!(b.s.outcome().unconfirmed);
    // The same for a move that started elsewhere.
    let b = approach_bench(
        Some(Recorded::Unknown {
            from: 700,
            to: 1500,
        }),
        0,
        700,
    );
    assert_eq!(b.s.core().position(), None);
    assert!(b.commands.is_empty(), "{:?}", b.commands);
}

#[test]
fn shutdown_waits_the_legs_remaining_travel_for_a_controller_that_ignores_stop() {
    // A slow leg: 2000 steps at 20 000 steps/s is 100 ms; shutdown at once.
    let mut b = Bench::linked(None, 0);
    b.frequency(7_200_000);
    b.wait(ms(40));
    assert_eq!(b.gotos(), vec![2000]);
    let sent = b
        .timed
        .iter()
        .find(|(_, w)| *w == Wire::Command(TunerCommand::Goto(2000)))
        .map(|(t, _)| *t)
        .unwrap();
    b.shutdown();
    // The controller says nothing, STOP included, past STOP_WAIT ...
    b.run_until(sent + ms(100 + 10 + 250) + STOP_WAIT - ms(1));
    assert_eq!(b.commands.last(), Some(&TunerCommand::Stop));
    assert!(!b.s.is_finished());
    // ... then reports where the motor is (it finished the move).
    b.tuner(TunerEvent::At { steps: 2000 });
    b.wait(TAIL);
    assert!(b.s.is_finished());
    assert_eq!(b.journal, Some(Recorded::Known(2000)));
    assert!(!b.s.outcome().unconfirmed);
}

#[test]
fn shutdown_with_a_silent_controller_keeps_the_move_and_the_inhibit() {
    let mut b = Bench::linked(None, 0);
    b.frequency(7_200_000);
    b.wait(ms(40));
    b.tuner(TunerEvent::Accepted { target: 2000 });
    b.shutdown();
    b.wait(Duration::from_secs(10));
    assert!(b.s.is_finished());
    assert_eq!(b.journal, Some(Recorded::Unknown { from: 0, to: 2000 }));
    assert_eq!(b.levels.last(), Some(&true), "released while it may move");
    let out = b.s.outcome();
    assert!(out.unconfirmed);
    assert_eq!(out.position, None);
}

#[test]
fn a_link_that_drops_in_shutdown_keeps_the_move_and_the_inhibit() {
    let mut b = Bench::linked(None, 0);
    b.frequency(7_200_000);
    b.wait(ms(40));
    b.shutdown();
    b.tuner(TunerEvent::LinkDown {
        reason: "gone".into(),
    });
    b.s.handle_tuner_gone(b.now);
    b.pump();
    b.wait(Duration::from_secs(10));
    assert!(b.s.is_finished());
    assert!(b.s.outcome().unconfirmed);
    assert_eq!(b.levels.last(), Some(&true));
    assert_eq!(b.journal, Some(Recorded::Unknown { from: 0, to: 2000 }));
}

#[test]
fn shutdown_releases_the_inhibit_no_earlier_than_the_tail_after_the_arrival() {
    let mut b = Bench::linked(None, 0);
    b.frequency(7_100_000);
    b.wait(ms(40));
    b.tuner(TunerEvent::At { steps: 1000 });
    let arrived = b.now;
    b.wait(ms(10));
    b.shutdown();
    b.wait(ms(200));
    assert!(b.s.is_finished());
    let released = b
        .timed
        .iter()
        .rev()
        .find(|(_, w)| *w == Wire::Level(false))
        .map(|(t, _)| *t)
        .unwrap();
    assert!(released >= arrived + TAIL, "{released:?} vs {arrived:?}");
}

#[test]
fn a_goto_never_leaves_before_the_lead_after_the_line_was_set() {
    // The line takes 4 ms to set (a slow relay driver); the lead is 5 ms.
    let mut b = Bench::linked(None, 0);
    b.inhibit_delay = ms(4);
    b.frequency(7_100_000);
    b.wait(ms(60));
    b.tuner(TunerEvent::At { steps: 1000 });
    b.wait(ms(100));
    // Twice: from a settle, and after a transmission deferred the move.
    b.transmit(true);
    b.frequency(7_200_000);
    b.wait(ms(100));
    b.transmit(false);
    b.wait(ms(60));
    assert_eq!(b.gotos(), vec![1000, 2000]);
    let mut set_on = None;
    for (t, w) in &b.timed {
        match w {
            Wire::Level(true) => set_on = Some(*t),
            Wire::Level(false) => set_on = None,
            Wire::Command(TunerCommand::Goto(n)) => {
                let on = set_on.unwrap_or_else(|| panic!("GOTO {n} without the inhibit"));
                assert!(*t >= on + ms(5), "GOTO {n} at {t:?}, line set at {on:?}");
            }
            Wire::Command(_) => {}
        }
    }
}

#[test]
fn a_retune_in_the_tail_keeps_the_inhibit_on_until_the_new_target() {
    let mut b = Bench::linked(None, 0);
    b.frequency(7_100_000);
    b.wait(ms(40));
    b.tuner(TunerEvent::At { steps: 1000 });
    let arrived = b.now;
    // 30 ms after the arrival, inside the 50 ms tail: another frequency.
    b.wait(ms(30));
    b.frequency(7_250_000);
    b.wait(ms(100));
    // A call now (130 ms after the arrival) must find the inhibit on: the
    // loop is not tuned for the new frequency yet (checked below: one
    // release after the arrival, once the new target is reached).
    assert_eq!(b.gotos(), vec![1000, 2500]);
    b.tuner(TunerEvent::At { steps: 2500 });
    let reached = b.now;
    b.wait(ms(200));
    let released: Vec<Duration> = b
        .timed
        .iter()
        .filter(|(t, w)| *w == Wire::Level(false) && *t > arrived)
        .map(|(t, _)| *t)
        .collect();
    assert_eq!(released.len(), 1, "{:?}", b.timed);
    assert!(released[0] >= reached + TAIL, "{:?}", b.timed);
}

#[test]
fn a_differing_count_that_is_no_restart_count_is_unknown_not_zeroed() {
    // The journal says 2000; the controller says 1234, not its power-on 0:
    // it lost steps or was moved by hand, and ZERO would hide that.
    let mut b = Bench::linked(Some(Recorded::Known(2000)), 1234);
    assert!(b.commands.is_empty(), "{:?}", b.commands);
    assert_eq!(b.s.core().position(), None);
    b.frequency(7_100_000);
    b.wait(ms(400));
    assert!(b.gotos().is_empty(), "{:?}", b.commands);
    assert_eq!(b.levels, vec![true]);
    assert_eq!(b.journal, Some(Recorded::Known(2000)));
    b.shutdown();
    assert!(b.s.outcome().unconfirmed);
}

// ---------------------------------------------------------------------
// Homing (issue 11, item 4): with a home switch, "position unknown" is
// recovered by a slow run to the switch, the inhibit held, the journal
// saying `lost` until the controller's `HOMED`.
// ---------------------------------------------------------------------

const HOME: HomeSettings = HomeSettings {
    side: HomeSide::Low,
    position: 0,
    speed: 200,
};

fn home_command() -> TunerCommand {
    TunerCommand::Home {
        side: HomeSide::Low,
        position: 0,
        speed: 200,
    }
}

/// A bench with a home switch whose link came up reporting `controller`.
fn homed_bench(journal: Option<Recorded>, controller: i64) -> Bench {
    let mut b = Bench::with_home(journal, 0, false, Some(HOME));
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::At { steps: controller });
    b.wait(ms(100));
    b
}

impl Bench {
    /// The inhibit level the bench's line had when `cmd` first went (the
    /// line opens asserted).
    fn level_when(&self, cmd: TunerCommand) -> Option<bool> {
        let mut level = true;
        for (_, w) in &self.timed {
            match *w {
                Wire::Level(on) => level = on,
                Wire::Command(c) if c == cmd => return Some(level),
                Wire::Command(_) => {}
            }
        }
        None
    }

    fn homes(&self) -> usize {
        self.commands
            .iter()
            .filter(|c| matches!(c, TunerCommand::Home { .. }))
            .count()
    }
}

#[test]
fn unknown_at_start_with_a_home_switch_homes_under_the_inhibit_then_follows() {
    // Off the unfinished leg's path: position unknown.
    let unfinished = Recorded::Unknown { from: 100, to: 900 };
    let mut b = homed_bench(Some(unfinished), 2500);
    assert_eq!(b.commands, vec![home_command()]);
    // The journal says `lost` before the HOME left, and the inhibit is on.
    assert_eq!(b.journal, Some(Recorded::Lost));
    assert_eq!(b.level_when(home_command()), Some(true));
    assert!(b.levels.iter().all(|on| *on), "{:?}", b.levels);
    // Nothing moves for a frequency while homing.
    b.tuner(TunerEvent::Homing);
    b.frequency(7_100_000);
    b.wait(ms(400));
    assert!(b.gotos().is_empty(), "{:?}", b.commands);
    assert_eq!(b.s.core().position(), None);
    // HOMED: the switch's position, confirmed, is journalled; then the
    // frequency that settled meanwhile is followed from it.
    b.tuner(TunerEvent::Homed { steps: 0 });
    b.wait(ms(100));
    assert_eq!(
        b.written,
        vec![
            Recorded::Lost,
            Recorded::Known(0),
            Recorded::Unknown { from: 0, to: 1000 }
        ]
    );
    assert_eq!(b.gotos(), vec![1000]);
    assert_eq!(b.level_when(TunerCommand::Goto(1000)), Some(true));
    b.tuner(TunerEvent::At { steps: 1000 });
    b.wait(ms(200));
    assert_eq!(b.journal, Some(Recorded::Known(1000)));
    assert_eq!(b.homes(), 1);
    assert!(!b.s.outcome().unconfirmed);
}

#[test]
fn a_foreign_count_or_a_lost_journal_homes_too() {
    // A clean journal, a count no controller restarts from.
    let b = homed_bench(Some(Recorded::Known(2000)), 1234);
    assert_eq!(b.commands, vec![home_command()]);
    assert_eq!(b.journal, Some(Recorded::Lost));
    // Killed while homing: the next start finds `lost` and homes again,
    // whatever the controller's count (it may have finished the run).
    for controller in [0, 700, 3000] {
        let b = homed_bench(Some(Recorded::Lost), controller);
        assert_eq!(b.commands, vec![home_command()], "{controller}");
    }
    // A restart count over a clean journal is still given ZERO, not homed.
    let b = homed_bench(Some(Recorded::Known(2000)), 0);
    assert_eq!(b.commands, vec![TunerCommand::Zero(2000)]);
}

#[test]
fn without_a_switch_a_lost_journal_stays_unknown() {
    let mut b = Bench::linked(Some(Recorded::Lost), 0);
    b.frequency(7_100_000);
    b.wait(ms(400));
    assert!(b.commands.is_empty(), "{:?}", b.commands);
    assert_eq!(b.s.core().position(), None);
    assert_eq!(b.journal, Some(Recorded::Lost));
    assert!(b.s.outcome().unconfirmed);
}

#[test]
fn a_controller_answering_err_to_home_has_no_switch_and_is_not_asked_again() {
    let mut b = homed_bench(Some(Recorded::Known(2000)), 1234);
    assert_eq!(b.homes(), 1);
    b.tuner(TunerEvent::Error {
        text: "controller refused: unknown keyword HOME".into(),
    });
    // The link drops and comes back: still unknown, no second HOME.
    b.tuner(TunerEvent::LinkDown {
        reason: "test".into(),
    });
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::At { steps: 1234 });
    b.frequency(7_100_000);
    b.wait(ms(400));
    assert_eq!(b.homes(), 1);
    assert!(b.gotos().is_empty(), "{:?}", b.commands);
    assert_eq!(b.s.core().position(), None);
}

#[test]
fn homing_waits_for_receive() {
    let mut b = Bench::with_home(Some(Recorded::Lost), 0, false, Some(HOME));
    b.transmit(true);
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::At { steps: 500 });
    b.wait(ms(500));
    assert_eq!(b.homes(), 0, "{:?}", b.commands);
    b.transmit(false);
    b.wait(ms(10));
    assert_eq!(b.homes(), 1, "{:?}", b.commands);
    assert_eq!(b.level_when(home_command()), Some(true));
}

#[test]
fn homing_cut_short_is_tried_again_a_bounded_number_of_times() {
    let mut b = homed_bench(Some(Recorded::Lost), 500);
    for attempt in 1..=HOME_ATTEMPTS {
        assert_eq!(b.homes() as u32, attempt);
        b.tuner(TunerEvent::Homing);
        b.tuner(TunerEvent::Error {
            text: "controller fault: homing did not end in time; reconnecting".into(),
        });
        b.tuner(TunerEvent::LinkDown {
            reason: "fault".into(),
        });
        b.tuner(TunerEvent::LinkUp);
        b.tuner(TunerEvent::At { steps: 500 });
        b.wait(ms(100));
    }
    assert_eq!(b.homes() as u32, HOME_ATTEMPTS);
    assert_eq!(b.journal, Some(Recorded::Lost));
    assert!(b.gotos().is_empty());
}

#[test]
fn an_end_stop_faults_the_link_journals_lost_and_homes() {
    let mut b = Bench::with_home(None, 0, false, Some(HOME));
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::At { steps: 0 });
    b.wait(ms(100));
    b.frequency(7_250_000);
    b.wait(ms(40));
    assert_eq!(b.gotos(), vec![2500]);
    b.tuner(TunerEvent::Accepted { target: 2500 });
    // The end stop closes at a count inside the limits: the count is off.
    b.tuner(TunerEvent::Limit {
        side: HomeSide::High,
        steps: 2100,
    });
    assert_eq!(b.s.core().position(), None);
    assert_eq!(b.journal, Some(Recorded::Lost));
    b.wait(ms(50));
    assert_eq!(b.homes(), 1, "{:?}", b.commands);
    assert_eq!(b.level_when(home_command()), Some(true));
    // An AT now (a stray answer) is not trusted; HOMED is.
    b.tuner(TunerEvent::At { steps: 2100 });
    assert_eq!(b.s.core().position(), None);
    b.tuner(TunerEvent::Homed { steps: 0 });
    // From the homed count the settled frequency is decided again at once,
    // as after any fault: the move is asked for once more.
    b.wait(ms(40));
    assert_eq!(b.gotos(), vec![2500, 2500]);
    b.tuner(TunerEvent::Accepted { target: 2500 });
    b.tuner(TunerEvent::At { steps: 2500 });
    assert_eq!(b.journal, Some(Recorded::Known(2500)));
    // The rig's next retune is followed from the confirmed position.
    b.frequency(7_200_000);
    b.wait(ms(100));
    assert_eq!(b.gotos(), vec![2500, 2500, 2000]);
}

#[test]
fn shutdown_while_homing_keeps_the_inhibit_and_says_unconfirmed() {
    let mut b = homed_bench(Some(Recorded::Lost), 500);
    b.tuner(TunerEvent::Homing);
    b.shutdown();
    b.wait(ms(5000));
    assert!(b.s.is_finished());
    assert_eq!(b.journal, Some(Recorded::Lost));
    assert!(b.levels.iter().all(|on| *on), "{:?}", b.levels);
    assert!(b.s.outcome().unconfirmed);
}

#[test]
fn an_unasked_at_with_another_count_at_rest_is_not_taken() {
    // Without a switch: nothing moves, the journal keeps the last
    // confirmed position.
    let mut b = Bench::linked(Some(Recorded::Known(1500)), 1500);
    b.tuner(TunerEvent::At { steps: 0 });
    assert_eq!(b.s.core().position(), None);
    assert_eq!(b.journal, Some(Recorded::Known(1500)));
    b.frequency(7_100_000);
    b.wait(ms(400));
    assert!(b.gotos().is_empty(), "{:?}", b.commands);
    // The same count again is no news.
    let mut b = Bench::linked(Some(Recorded::Known(1500)), 1500);
    b.tuner(TunerEvent::At { steps: 1500 });
    assert_eq!(b.s.core().position(), Some(1500));
    // With a switch: homed.
    let mut b = homed_bench(Some(Recorded::Known(1500)), 1500);
    b.tuner(TunerEvent::At { steps: 0 });
    b.wait(ms(20));
    assert_eq!(b.commands.last(), Some(&home_command()));
}

// ---- the SWR watch ([swr_watch]) ----

/// A bench at rest on 7.1 MHz with the inhibit released, decoding with the
/// station decoder (meter answers are station events) and watching the
/// SWR: alarm 2.0 held 1 s, `action`, `wired`.
fn swr_bench(action: super::super::swr_watch::SwrAction, wired: bool) -> Bench {
    swr_bench_with(action, wired, None)
}

/// [`swr_bench`] with the loop described (for the model's prediction).
fn swr_bench_with(
    action: super::super::swr_watch::SwrAction,
    wired: bool,
    small_loop: Option<crate::antenna::SmallLoop>,
) -> Bench {
    use super::super::swr_watch::SwrWatchSettings;
    let mut b = Bench::built(None, 0, false, None, small_loop, false);
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::At { steps: 0 });
    b.wait(ms(100));
    b.s.decoder = b.dialect.station_decoder(None);
    let scale = b
        .dialect
        .meter_scale(crate::rig::meter::MeterKind::Swr)
        .cloned()
        .expect("the text dialect reads SWR");
    let s = std::mem::replace(
        &mut b.s,
        Session::new(
            Follower::new(policy(0), Arc::new(Line), None),
            b.dialect.decoder(None),
            None,
            SessionSettings {
                steps_per_second: 1.0,
                settle: ms(1),
                reply_margin: ms(1),
                relax_on_exit: false,
                restart_counts: [0, 0, 0],
                home: None,
            },
        ),
    );
    b.s = s.with_swr_watch(
        SwrWatchSettings {
            alarm: 2.0,
            hold: ms(1000),
            action,
            inhibit_wired: wired,
            drift_margin: 0.3,
            drift_overs: 3,
        },
        scale,
    );
    b.frequency(7_100_000);
    b.wait(ms(100));
    b.tuner(TunerEvent::At { steps: 1000 });
    b.wait(ms(1000));
    assert_eq!(b.levels.last(), Some(&false), "released at rest");
    b
}

impl Bench {
    fn rig_says(&mut self, msg: &[u8]) {
        self.s.handle_rig_bytes(self.now, Direction::Rx, msg);
        self.pump();
    }

    /// The rig transmits; from `fault` on its SWR meter reads 3.0 (`RM1`
    /// and 0015 on the text family's recalled scale), 1.2 before, one
    /// reading every 200 ms (the poll), until `until`.
    fn over(&mut self, fault: Duration, until: Duration) {
        self.rig_says(b"TX;");
        assert!(
            self.s.poll_swr_meter(),
            "the SWR meter is read while transmitting"
        );
        while self.now < until {
            let msg: &[u8] = if self.now >= fault {
                b"RM10015;"
            } else {
                b"RM10001;"
            };
            self.rig_says(msg);
            let next = self.now + ms(200);
            self.run_until(next);
        }
    }
}

/// Issue 16's target: an injected fault (SWR 3 from t) asserts the inhibit
/// within the configured time plus one meter period, and the inhibit holds
/// for the rest of the over; it is released once the rig receives.
#[test]
fn an_swr_fault_asserts_the_inhibit_within_the_hold_and_one_meter_period() {
    let mut b = swr_bench(super::super::swr_watch::SwrAction::Inhibit, true);
    assert!(!b.s.poll_swr_meter(), "not read on receive");
    let t = b.now + ms(500);
    b.over(t, t + ms(3000));
    let asserted = b
        .timed
        .iter()
        .find(|(at, w)| *at >= t && *w == Wire::Level(true))
        .map(|(at, _)| *at)
        .expect("the inhibit was asserted");
    assert!(
        asserted <= t + ms(1000) + ms(200),
        "{asserted:?} after the fault at {t:?}"
    );
    assert!(
        asserted >= t + ms(1000),
        "not before the hold: {asserted:?}"
    );
    assert_eq!(
        b.levels.last(),
        Some(&true),
        "held for the rest of the over"
    );
    let status = b.s.status();
    assert_eq!(status.swr_read, Some(3.0));
    assert_eq!(status.swr_alarm, Some(3.0));
    b.rig_says(b"RX;");
    b.wait(ms(10));
    assert_eq!(
        b.levels.last(),
        Some(&false),
        "released once the rig receives"
    );
    assert!(!b.s.poll_swr_meter());
    assert!(b.gotos() == vec![1000], "nothing moved: {:?}", b.gotos());
}

#[test]
fn an_swr_alarm_with_action_log_or_no_line_wired_only_logs() {
    use super::super::swr_watch::SwrAction;
    for (action, wired) in [(SwrAction::Log, true), (SwrAction::Inhibit, false)] {
        let mut b = swr_bench(action, wired);
        let levels = b.levels.len();
        let t = b.now;
        b.over(t, t + ms(3000));
        assert_eq!(
            b.levels.len(),
            levels,
            "{action:?} wired {wired}: {:?}",
            b.levels
        );
        assert_eq!(b.s.status().swr_alarm, Some(3.0));
    }
}

/// Drift reaches the state (and with it the socket, MQTT and the page):
/// three overs reading SWR 3.0 where the model, the loop tuned for the
/// frequency, predicts about 1.0; an over reading within the margin ends
/// it. The model's SWR is the matched resonator's (`antenna::swr_at`).
#[test]
fn drift_is_shown_in_the_state_until_an_over_reads_as_predicted() {
    use super::super::swr_watch::SwrAction;
    let small_loop = crate::antenna::SmallLoop {
        loop_diameter_m: 1.0,
        conductor_diameter_m: 0.022,
        conductor: crate::antenna::Conductor::Copper,
    };
    let mut b = swr_bench_with(SwrAction::Log, false, Some(small_loop));
    for over in 0..3 {
        assert_eq!(b.s.status().swr_drift, None, "before over {over}");
        let t = b.now;
        b.over(t, t + ms(1000));
        b.rig_says(b"RX;");
        b.wait(ms(200));
    }
    let (seen, predicted) = b.s.status().swr_drift.expect("drift after three overs");
    assert_eq!(seen, 3.0);
    assert!((1.0..1.1).contains(&predicted), "{predicted}");
    // An over as the model says: drift over.
    let t = b.now;
    b.over(t + ms(10_000), t + ms(1000));
    b.rig_says(b"RX;");
    b.wait(ms(200));
    assert_eq!(b.s.status().swr_drift, None);
}

#[test]
fn readings_at_or_below_the_alarm_raise_nothing() {
    let mut b = swr_bench(super::super::swr_watch::SwrAction::Inhibit, true);
    let levels = b.levels.len();
    let t = b.now;
    // The fault never comes within the over.
    b.over(t + ms(10_000), t + ms(3000));
    assert_eq!(b.levels.len(), levels);
    assert_eq!(b.s.status().swr_alarm, None);
    assert_eq!(b.s.status().swr_read, Some(1.1));
}

impl Bench {
    /// Another program's message to the rig (proxy mode): bytes going *to*
    /// the rig.
    fn program_sends(&mut self, m: crate::rig::StationMessage) {
        let bytes = self.dialect.encode_station(&m, 0);
        self.s.handle_rig_bytes(self.now, Direction::Tx, &bytes);
        self.pump();
    }
}

#[test]
fn a_transmit_command_under_the_set_line_is_in_force_at_the_release() {
    use crate::rig::StationMessage as M;
    let mut b = Bench::with_decoder(None, 0, false, None, true);
    b.tuner(TunerEvent::LinkUp);
    b.tuner(TunerEvent::At { steps: 0 });
    b.wait(ms(100));
    b.transmit(false);
    let start = b.now;
    // A program's set at 7.1 MHz (1000 steps): with a line that holds CAT
    // keying it settles after the 5 ms lead, the line is set, the `GOTO`
    // follows its lead.
    b.program_sends(M::SetFrequency {
        vfo: crate::rig::Vfo::A,
        selected: true,
        hz: 7_100_000,
    });
    b.wait(ms(40));
    assert_eq!(b.gotos(), vec![1000]);
    assert_eq!(b.levels.last(), Some(&true));
    // The program keys the rig 45 ms after its set, the line set for 10 ms:
    // held off, the move goes on and the link's interlock is told receive.
    b.program_sends(M::Transmit { on: true });
    assert!(b.s.core().command_held_off());
    assert_eq!(b.stops(), 0);
    assert_eq!(b.transmit.last(), Some(&false));
    b.tuner(TunerEvent::At { steps: 1000 });
    b.wait(ms(20));
    assert_eq!(b.transmit.last(), Some(&false), "told before the release");
    b.wait(TAIL);
    // Released after the tail: the command's transmission is in force,
    // and the controller link's interlock is told so.
    assert_eq!(b.levels.last(), Some(&false));
    assert_eq!(b.transmit.last(), Some(&true));
    assert!(b.s.core().transmitting());
    assert_eq!(b.stops(), 0);
    let gotos: Vec<Duration> = b
        .timed
        .iter()
        .filter(|(_, w)| matches!(w, Wire::Command(TunerCommand::Goto(_))))
        .map(|(t, _)| t.saturating_sub(start))
        .collect();
    assert_eq!(gotos, vec![ms(10)]);
}
