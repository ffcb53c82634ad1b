//! Core tests of a transmit command held off by the wired inhibit line: a
//! logging program sets a frequency and keys the rig by command 50-100 ms
//! later, while the inhibit the core asserted for the new frequency is
//! already set. The rig cannot go on the air through a set line, so the
//! move goes ahead under it (where the station says its line holds the
//! rig against CAT keying); anything saying the rig really transmits
//! stops the move at once; without a wired line nothing changes.
//!
//! The calibration is the invented straight line of `test_support` (100 Hz
//! a step): 7.050 MHz is 10 000 - 50 000 / 100 = 9 500 steps, worked by
//! hand. The bench below plays the driver: it confirms every inhibit write
//! at once (or never, where a test says so), answers each `Goto` with an
//! arrival, and keeps its own record of the line from the actions.

use super::test_support::{self, band_40m, ms, Line};
use super::*;

/// 40 m, no guard, no backlash, the inhibit asserted from the first report
/// of a frequency the loop is not tuned for, 20 ms lead, 100 ms tail.
fn policy(while_unknown: WhileUnknown) -> Policy {
    Policy {
        bands: vec![Band {
            guard_hz: 0,
            ..band_40m()
        }],
        backlash_steps: 0,
        debounce: ms(300),
        inhibit_while_detuned: true,
        while_unknown,
        ..test_support::policy()
    }
}

/// The driver's side: line confirmations, arrivals, and its own record of
/// when the line was set (for the check that no `Goto` leaves without it).
struct Bench {
    f: Follower,
    confirm: bool,
    travel: u64,
    arrive: Option<(u64, i64)>,
    line_since: Option<u64>,
    all: Vec<(u64, Action)>,
}

impl Bench {
    /// The loop tuned for 7.000 MHz (10 000 steps), the rig known to
    /// receive (a poll answer) and reporting 7.000 MHz; settled by 1 s.
    fn new(while_unknown: WhileUnknown, confirm: bool) -> Bench {
        let mut b = Bench {
            f: Follower::new(policy(while_unknown), Arc::new(Line), Some(10_000)),
            confirm,
            travel: 200,
            arrive: None,
            line_since: None,
            all: Vec::new(),
        };
        b.tx(0, false, Source::PollAnswer);
        b.freq(0, 7_000_000, Source::RigReport);
        b.run(0, 1_000);
        assert!(!b.f.inhibit(), "tuned, the line is released");
        assert_eq!(b.f.position(), Some(10_000));
        b.all.clear();
        b
    }

    fn drain(&mut self, t: u64) {
        while let Some(a) = self.f.poll_action() {
            match a {
                Action::Inhibit { on: true } => {
                    self.line_since.get_or_insert(t);
                    if self.confirm {
                        self.f.handle_inhibit_set(ms(t));
                    }
                }
                Action::Inhibit { on: false } => self.line_since = None,
                Action::Goto { steps } => {
                    let lead = self.f.policy().inhibit_lead.as_millis() as u64;
                    assert!(
                        self.line_since.is_some_and(|s| t >= s + lead),
                        "Goto {steps} at {t} ms without the line set for its lead"
                    );
                    self.arrive = Some((t + self.travel, steps));
                }
                Action::Stop => self.arrive = Some((t + 10, -1)),
                _ => {}
            }
            self.all.push((t, a));
        }
    }

    fn freq(&mut self, t: u64, hz: u64, source: Source) {
        self.f.handle_station(
            ms(t),
            StationEvent::Frequency {
                which: Which::Receive,
                hz,
                source,
            },
        );
        self.drain(t);
    }

    fn tx(&mut self, t: u64, on: bool, source: Source) {
        self.f
            .handle_station(ms(t), StationEvent::Transmit { on, source });
        self.drain(t);
    }

    /// The clock from `from` to `to` (inclusive) in 10 ms ticks. A stopped
    /// motor comes to rest half way (steps 9 750).
    fn run(&mut self, from: u64, to: u64) {
        let mut t = from;
        while t <= to {
            if let Some((at, steps)) = self.arrive {
                if t >= at {
                    self.arrive = None;
                    let steps = if steps < 0 { 9_750 } else { steps };
                    self.f.handle_arrived(ms(t), steps);
                }
            }
            self.f.handle_timeout(ms(t));
            self.drain(t);
            t += 10;
        }
    }

    fn gotos(&self) -> Vec<(u64, i64)> {
        self.all
            .iter()
            .filter_map(|(t, a)| match a {
                Action::Goto { steps } => Some((*t, *steps)),
                _ => None,
            })
            .collect()
    }

    fn at(&self, want: &Action) -> Option<u64> {
        self.all.iter().find(|(_, a)| a == want).map(|(t, _)| *t)
    }
}

/// The program's band-map click (a set seen going to the rig) at 1 000 ms,
/// its transmit command `after` ms later.
fn click_and_key(b: &mut Bench, after: u64) {
    b.freq(1_000, 7_050_000, Source::CommandSeen);
    b.run(1_000, 1_000 + after - 10);
    b.tx(1_000 + after, true, Source::CommandSeen);
}

#[test]
fn a_transmit_command_under_the_set_line_lets_the_move_go_ahead() {
    let mut b = Bench::new(WhileUnknown::MoveUnderInhibit, true);
    click_and_key(&mut b, 60);
    // The line was set at the click (the loop detuned for 7.050 MHz) and
    // its 20 ms lead had passed: the command cannot key the rig.
    assert_eq!(b.at(&Action::Inhibit { on: true }), Some(1_000));
    assert!(b.f.command_held_off());
    assert_eq!(b.f.transmit_state(), TransmitState::Unknown);
    assert!(!b.f.transmitting());
    assert!(!b.f.rig_may_transmit(), "the link's interlock would refuse");
    // The station model still says what the command said.
    assert_eq!(b.f.transmit().state, TransmitState::Transmit);
    assert_eq!(b.f.transmit().source, Some(Source::CommandSeen));
    b.run(1_060, 3_000);
    // The set settled after the line's 20 ms lead (the line holds the
    // keying off, so no longer grace): one move to 9 500 steps, under way
    // when the command came.
    assert_eq!(b.gotos(), vec![(1_020, 9_500)]);
    assert!(b.at(&Action::Stop).is_none());
    assert_eq!(b.f.position(), Some(9_500));
    // Arrived at 1 220 ms, released after the 100 ms tail: from then the
    // command's transmission is in force.
    assert_eq!(b.at(&Action::Inhibit { on: false }), Some(1_320));
    assert!(!b.f.command_held_off());
    assert!(b.f.transmitting());
    assert!(b.f.rig_may_transmit());
    // A new frequency now waits for the end of the over, as any other.
    b.freq(3_000, 7_100_000, Source::RigReport);
    b.run(3_000, 5_000);
    assert_eq!(b.gotos().len(), 1, "moved while keyed: {:?}", b.all);
    assert!(!b.f.inhibit(), "never asserted against the over");
    b.tx(5_000, false, Source::CommandSeen);
    b.run(5_000, 6_000);
    // 7.100 MHz: 9 000 steps, once the line asserted at the end of the
    // over has been set for its lead.
    assert_eq!(b.gotos().last(), Some(&(5_020, 9_000)));
}

#[test]
fn a_command_held_off_during_the_move_does_not_stop_it() {
    let mut b = Bench::new(WhileUnknown::MoveUnderInhibit, true);
    b.freq(1_000, 7_050_000, Source::CommandSeen);
    b.run(1_000, 1_150);
    assert_eq!(b.gotos(), vec![(1_020, 9_500)]);
    b.tx(1_150, true, Source::CommandSeen);
    b.run(1_150, 2_000);
    assert!(b.at(&Action::Stop).is_none(), "{:?}", b.all);
    assert_eq!(b.f.position(), Some(9_500));
    assert!(b.f.transmitting(), "in force after the release");
}

#[test]
fn a_rig_report_of_transmit_stops_the_move_at_once() {
    for source in [Source::RigReport, Source::PollAnswer, Source::SenseLine] {
        let mut b = Bench::new(WhileUnknown::MoveUnderInhibit, true);
        if source == Source::SenseLine {
            // A wired sense line reading receive.
            b.tx(900, false, Source::SenseLine);
        }
        click_and_key(&mut b, 60);
        b.run(1_060, 1_150);
        assert_eq!(b.gotos(), vec![(1_020, 9_500)], "{source}");
        // The rig says it is on the air after all: the line did not hold.
        b.tx(1_150, true, source);
        assert!(!b.f.command_held_off(), "{source}");
        assert!(b.f.transmitting(), "{source}");
        assert_eq!(b.at(&Action::Stop), Some(1_150), "{source}");
        assert!(b.all.contains(&(
            1_150,
            Action::Hold {
                hz: 7_050_000,
                reason: HoldReason::Transmitting
            }
        )));
        b.run(1_150, 3_000);
        assert_eq!(b.gotos().len(), 1, "{source}: moved again while keyed");
    }
}

#[test]
fn without_a_wired_line_a_transmit_command_is_a_transmission() {
    for while_unknown in [WhileUnknown::Hold, WhileUnknown::MoveUnprotected] {
        let mut b = Bench::new(while_unknown, true);
        click_and_key(&mut b, 60);
        assert!(!b.f.command_held_off(), "{while_unknown:?}");
        assert_eq!(b.f.transmit_state(), TransmitState::Transmit);
        assert!(b.f.rig_may_transmit());
        b.run(1_060, 5_000);
        assert!(b.gotos().is_empty(), "{while_unknown:?}: {:?}", b.all);
        // The move waits for the end of the over.
        b.tx(5_000, false, Source::CommandSeen);
        b.run(5_000, 6_000);
        assert_eq!(b.gotos(), vec![(5_000, 9_500)], "{while_unknown:?}");
    }
}

#[test]
fn a_line_not_said_to_hold_cat_keying_holds_nothing_off() {
    // A line wired to an amplifier's interlock or the rig's PTT input may
    // leave a CAT-keyed rig on the air: unless the station says it holds
    // the rig itself (`[inhibit] holds_cat_keying`), a command is a
    // transmission.
    let mut b = Bench::new(WhileUnknown::MoveUnderInhibit, true);
    b.f.policy.line_holds_commands = false;
    click_and_key(&mut b, 60);
    assert!(!b.f.command_held_off());
    assert!(b.f.transmitting());
    b.run(1_060, 3_000);
    assert!(b.gotos().is_empty(), "{:?}", b.all);
}

#[test]
fn a_command_inside_the_lead_is_a_transmission() {
    // Keyed 10 ms after the line was set: its 20 ms lead had not passed,
    // so the rig may have gone on the air before the line took hold.
    let mut b = Bench::new(WhileUnknown::MoveUnderInhibit, true);
    click_and_key(&mut b, 10);
    assert!(!b.f.command_held_off());
    assert!(b.f.transmitting());
    b.run(1_010, 3_000);
    assert!(b.gotos().is_empty(), "{:?}", b.all);
}

#[test]
fn an_unconfirmed_line_holds_nothing_off() {
    // A driver that never confirms the line (or whose write is still out)
    // gets the fail-safe reading.
    let mut b = Bench::new(WhileUnknown::MoveUnderInhibit, false);
    click_and_key(&mut b, 60);
    assert!(!b.f.command_held_off());
    // The move under way when the command came is stopped.
    assert_eq!(b.gotos(), vec![(1_020, 9_500)]);
    assert_eq!(b.at(&Action::Stop), Some(1_060));
    b.run(1_060, 3_000);
    assert_eq!(b.gotos().len(), 1, "{:?}", b.all);
}

#[test]
fn a_command_while_the_line_is_off_is_a_transmission() {
    // No new frequency: the line is off (the loop tuned), the command keys
    // the rig, and nothing moves until the over ends.
    let mut b = Bench::new(WhileUnknown::MoveUnderInhibit, true);
    b.tx(1_000, true, Source::CommandSeen);
    assert!(!b.f.command_held_off());
    assert!(b.f.transmitting());
}

#[test]
fn after_a_fault_the_line_must_be_confirmed_again() {
    let mut b = Bench::new(WhileUnknown::MoveUnderInhibit, true);
    b.freq(1_000, 7_050_000, Source::CommandSeen);
    b.run(1_000, 1_050);
    // The fault keeps the line on without a new write, so nothing confirms
    // it afresh: a command is a transmission again.
    b.f.handle_fault(ms(1_050));
    b.drain(1_050);
    b.tx(1_080, true, Source::CommandSeen);
    assert!(!b.f.command_held_off());
    assert!(b.f.transmitting());
}
