//! Unit tests of the operator commands in the core. The calibration is the
//! invented straight line of `tests.rs` (100 Hz a step, 7 MHz at step
//! 10 000); the rules checked are the core's own, and every action stream
//! is also checked by `check`, written apart from the core: no `Goto`
//! outside the limits, none while the rig transmits, none without the
//! inhibit asserted.

use super::test_support::{ms, policy, Line};
use super::*;
use crate::error::IoFailure;

struct Shifted(f64);
impl StepMap for Shifted {
    fn steps_at(&self, hz: f64) -> f64 {
        Line.steps_at(hz) + self.0
    }
}

fn presets() -> Vec<Preset> {
    vec![
        Preset {
            name: "ssb-40".into(),
            goal: PresetGoal::Hz(7_150_000),
        },
        Preset {
            name: "parked".into(),
            goal: PresetGoal::Steps(11_000),
        },
        // 30 m through the 40 m line lies far below step 0.
        Preset {
            name: "digital-30".into(),
            goal: PresetGoal::Hz(10_136_000),
        },
        Preset {
            name: "past-the-end".into(),
            goal: PresetGoal::Steps(12_001),
        },
    ]
}

fn calibrations() -> Calibrations {
    let mut profiles: std::collections::BTreeMap<String, Arc<dyn StepMap>> = Default::default();
    profiles.insert("wet".into(), Arc::new(Shifted(40.0)));
    Calibrations {
        base: Some(Arc::new(Line)),
        profiles,
    }
}

fn core(position: Option<i64>) -> Follower {
    Follower::new(policy(), Arc::new(Line), position).with_operator(presets(), calibrations(), None)
}

/// Everything the core has to say, checked against the rules on the way.
struct Run {
    f: Follower,
    /// Actions so far (`Settled` notes left out), for assertions.
    seen: Vec<Action>,
    inhibit: bool,
    transmitting: bool,
    /// A `Goto` was sent and its arrival not yet reported.
    moving: bool,
}

impl Run {
    fn new(position: Option<i64>) -> Run {
        let f = core(position);
        let inhibit = f.inhibit();
        Run {
            f,
            seen: Vec::new(),
            inhibit,
            transmitting: false,
            moving: false,
        }
    }

    /// Drains the core's actions, checking each against the rules, and
    /// returns the new ones.
    fn take(&mut self) -> Vec<Action> {
        let mut new = Vec::new();
        while let Some(a) = self.f.poll_action() {
            match a {
                Action::Inhibit { on } => {
                    assert!(on || !self.moving, "inhibit released during a move");
                    self.inhibit = on;
                }
                Action::Goto { steps } => {
                    self.moving = true;
                    assert!((0..=12_000).contains(&steps), "GOTO {steps} beyond limits");
                    assert!(!self.transmitting, "GOTO {steps} while transmitting");
                    assert!(self.inhibit, "GOTO {steps} without the inhibit");
                }
                _ => {}
            }
            if !matches!(a, Action::Settled { .. }) {
                new.push(a.clone());
            }
        }
        self.seen.extend(new.iter().cloned());
        new
    }

    fn cmd(&mut self, t: u64, cmd: Command) -> (Reply, Vec<Action>) {
        let r = self.f.handle_command(ms(t), cmd);
        (r, self.take())
    }

    fn tick(&mut self, t: u64) -> Vec<Action> {
        self.f.handle_timeout(ms(t));
        self.take()
    }

    fn transmit(&mut self, t: u64, on: bool) -> Vec<Action> {
        self.transmitting = on;
        self.f.handle_transmit(ms(t), on);
        self.take()
    }

    fn report(&mut self, t: u64, hz: u64) -> Vec<Action> {
        self.f.handle_frequency(ms(t), hz);
        self.take()
    }

    fn arrive(&mut self, t: u64, steps: i64) -> Vec<Action> {
        self.moving = false;
        self.f.handle_arrived(ms(t), steps);
        self.take()
    }

    /// Settles on `hz` at `t`, runs the lead and lets every leg arrive.
    fn settle_and_arrive(&mut self, t: u64, hz: u64) {
        self.report(t, hz);
        self.tick(t + 300);
        let a = self.tick(t + 320);
        for (i, g) in gotos(&a).into_iter().enumerate() {
            let more = self.arrive(t + 400 + i as u64 * 100, g);
            for g2 in gotos(&more) {
                self.arrive(t + 450 + i as u64 * 100, g2);
            }
        }
        self.tick(t + 1_000);
    }
}

fn gotos(actions: &[Action]) -> Vec<i64> {
    actions
        .iter()
        .filter_map(|a| match a {
            Action::Goto { steps } => Some(*steps),
            _ => None,
        })
        .collect()
}

fn moves(actions: &[Action]) -> Vec<(i64, i64)> {
    actions
        .iter()
        .filter_map(|a| match a {
            Action::Move { from, to, .. } => Some((*from, *to)),
            _ => None,
        })
        .collect()
}

#[test]
fn goto_moves_like_a_settled_frequency_inhibit_lead_and_all() {
    let mut r = Run::new(Some(9_500));
    let (reply, a) = r.cmd(0, Command::Goto { steps: 9_800 });
    assert_eq!(reply, Reply::Done);
    // Inhibit first; the first step waits the lead.
    assert_eq!(a, vec![Action::Inhibit { on: true }]);
    let a = r.tick(20);
    assert_eq!(moves(&a), vec![(9_500, 9_800)]);
    assert_eq!(gotos(&a), vec![9_800]);
    r.arrive(100, 9_800);
    // Released only after the tail.
    assert!(r.tick(150).is_empty());
    assert_eq!(r.tick(200), vec![Action::Inhibit { on: false }]);
    assert_eq!(r.f.position(), Some(9_800));
}

#[test]
fn goto_beyond_the_limits_is_refused_and_nothing_happens() {
    let mut r = Run::new(Some(9_500));
    for steps in [-1, 12_001, i64::MAX, i64::MIN] {
        let (reply, a) = r.cmd(0, Command::Goto { steps });
        assert_eq!(
            reply,
            Reply::Refused(Refusal::OutsideLimits {
                wanted: steps,
                min: 0,
                max: 12_000
            })
        );
        assert!(a.is_empty(), "{a:?}");
    }
    assert!(r.tick(1_000).is_empty());
}

#[test]
fn presets_by_frequency_and_by_steps_and_refusals() {
    let mut r = Run::new(Some(9_500));
    // By frequency: through the calibration (7.15 MHz -> step 8 500).
    let (reply, _) = r.cmd(
        0,
        Command::Preset {
            name: "ssb-40".into(),
        },
    );
    assert_eq!(reply, Reply::Done);
    let a = r.tick(20);
    assert_eq!(moves(&a), vec![(9_500, 8_500)]);
    // Approached from below: the overshoot, then the final leg.
    assert_eq!(gotos(&a), vec![8_470]);
    assert_eq!(gotos(&r.arrive(60, 8_470)), vec![8_500]);
    r.arrive(100, 8_500);
    assert_eq!(r.f.tuned_hz(), Some(7_150_000));
    // A preset beyond the limits, by steps or through the calibration.
    let (reply, a) = r.cmd(
        150,
        Command::Preset {
            name: "past-the-end".into(),
        },
    );
    assert!(matches!(
        reply,
        Reply::Refused(Refusal::OutsideLimits { wanted: 12_001, .. })
    ));
    assert!(a.is_empty());
    let (reply, _) = r.cmd(
        200,
        Command::Preset {
            name: "digital-30".into(),
        },
    );
    assert!(
        matches!(reply, Reply::Refused(Refusal::OutsideLimits { wanted, .. }) if wanted < 0),
        "{reply:?}"
    );
    // Unknown: the known names are listed.
    let (reply, _) = r.cmd(
        200,
        Command::Preset {
            name: "nope".into(),
        },
    );
    match reply {
        Reply::Refused(Refusal::UnknownPreset { known, .. }) => {
            assert_eq!(known.len(), 4);
            assert!(known.contains(&"parked".to_string()));
        }
        other => panic!("{other:?}"),
    }
    // By steps.
    let (reply, _) = r.cmd(
        300,
        Command::Preset {
            name: "parked".into(),
        },
    );
    assert_eq!(reply, Reply::Done);
    let a = r.tick(500);
    assert_eq!(gotos(&a).last(), Some(&11_000));
    assert_eq!(r.f.position(), Some(8_500));
}

#[test]
fn a_nudge_during_a_transmission_waits_for_receive() {
    let mut r = Run::new(Some(9_500));
    r.settle_and_arrive(0, 7_050_000);
    assert_eq!(r.f.position(), Some(9_500));
    r.transmit(2_000, true);
    let (reply, a) = r.cmd(2_100, Command::Nudge { steps: 20 });
    assert_eq!(
        reply,
        Reply::Queued {
            until: Wait::Receive
        }
    );
    assert!(gotos(&a).is_empty());
    assert!(a.contains(&Action::Hold {
        hz: 7_050_000,
        reason: HoldReason::Transmitting
    }));
    assert!(gotos(&r.tick(5_000)).is_empty());
    // Receive: the inhibit goes on and the lead runs before the first step.
    assert_eq!(r.transmit(6_000, false), vec![Action::Inhibit { on: true }]);
    let a = r.tick(6_020);
    assert_eq!(moves(&a), vec![(9_500, 9_520)]);
}

#[test]
fn a_nudge_beyond_the_limits_is_refused() {
    let mut r = Run::new(Some(11_990));
    let (reply, a) = r.cmd(0, Command::Nudge { steps: 20 });
    assert!(matches!(
        reply,
        Reply::Refused(Refusal::OutsideLimits { wanted: 12_010, .. })
    ));
    assert!(a.is_empty());
    let (reply, _) = r.cmd(0, Command::Nudge { steps: -5 });
    assert_eq!(reply, Reply::Done);
}

#[test]
fn nudges_add_up_from_where_the_motor_is_heading() {
    let mut r = Run::new(Some(9_500));
    r.cmd(0, Command::Nudge { steps: 10 });
    r.tick(20);
    // Under way to 9 510: the next nudge counts from there.
    let (reply, _) = r.cmd(30, Command::Nudge { steps: 10 });
    assert_eq!(reply, Reply::Queued { until: Wait::Rest });
    let a = r.arrive(100, 9_510);
    assert_eq!(gotos(&a).last(), Some(&9_520));
}

#[test]
fn with_the_position_unknown_moves_are_refused() {
    let mut r = Run::new(None);
    for cmd in [
        Command::Nudge { steps: 5 },
        Command::Goto { steps: 100 },
        Command::Preset {
            name: "parked".into(),
        },
        Command::Mark,
    ] {
        let (reply, a) = r.cmd(0, cmd);
        assert_eq!(reply, Reply::Refused(Refusal::PositionUnknown));
        assert!(gotos(&a).is_empty());
    }
    r.f.handle_fault(ms(10));
    r.take();
    let (reply, _) = r.cmd(20, Command::Goto { steps: 100 });
    assert_eq!(reply, Reply::Refused(Refusal::Fault));
}

#[test]
fn paused_follows_nothing_but_the_operator_still_moves() {
    let mut r = Run::new(Some(9_500));
    let (reply, _) = r.cmd(0, Command::Pause);
    assert_eq!(reply, Reply::Done);
    r.report(100, 7_080_000);
    let a = r.tick(400);
    assert!(a.contains(&Action::Hold {
        hz: 7_080_000,
        reason: HoldReason::Paused
    }));
    assert!(gotos(&r.tick(1_000)).is_empty());
    // A nudge to peak the noise goes while paused.
    r.cmd(1_000, Command::Nudge { steps: -6 });
    let a = r.tick(1_020);
    assert_eq!(moves(&a), vec![(9_500, 9_494)]);
    r.arrive(1_100, 9_464);
    r.arrive(1_150, 9_494);
    r.tick(2_000);
    // Resume: the rig's frequency (7.08 MHz -> 9 200) is decided at once.
    let (reply, _) = r.cmd(3_000, Command::Resume);
    assert_eq!(reply, Reply::Done);
    let a = r.tick(3_020);
    assert_eq!(moves(&a), vec![(9_494, 9_200)]);
    assert!(!r.f.status().paused);
}

#[test]
fn switching_profile_retunes_and_unknown_profiles_are_named() {
    let mut r = Run::new(Some(9_500));
    r.settle_and_arrive(0, 7_050_000);
    let (reply, _) = r.cmd(2_000, Command::Profile { name: "wet".into() });
    assert_eq!(reply, Reply::Done);
    let a = r.tick(2_020);
    assert_eq!(moves(&a), vec![(9_500, 9_540)]);
    assert_eq!(r.f.profile(), Some("wet"));
    r.arrive(2_100, 9_540);
    let (reply, _) = r.cmd(
        3_000,
        Command::Profile {
            name: "base".into(),
        },
    );
    assert_eq!(reply, Reply::Done);
    assert_eq!(r.f.profile(), None);
    let (reply, _) = r.cmd(3_000, Command::Profile { name: "icy".into() });
    assert_eq!(
        reply,
        Reply::Refused(Refusal::UnknownProfile {
            name: "icy".into(),
            known: vec!["base".into(), "wet".into()]
        })
    );
}

#[test]
fn a_profile_switch_while_paused_waits_for_resume() {
    let mut r = Run::new(Some(9_500));
    r.settle_and_arrive(0, 7_050_000);
    r.cmd(1_500, Command::Pause);
    let (reply, a) = r.cmd(2_000, Command::Profile { name: "wet".into() });
    assert_eq!(
        reply,
        Reply::Queued {
            until: Wait::Resume
        }
    );
    assert!(gotos(&a).is_empty());
}

#[test]
fn mark_offers_the_rigs_frequency_at_the_position_with_the_profile() {
    let mut r = Run::new(Some(9_500));
    let (reply, _) = r.cmd(0, Command::Mark);
    assert_eq!(reply, Reply::Refused(Refusal::NoFrequency));
    r.settle_and_arrive(0, 7_050_000);
    r.cmd(2_000, Command::Profile { name: "wet".into() });
    r.tick(2_020);
    // Moving to 9 540: no mark until at rest.
    let (reply, _) = r.cmd(2_030, Command::Mark);
    assert_eq!(reply, Reply::Refused(Refusal::Moving));
    r.arrive(2_100, 9_540);
    let (reply, a) = r.cmd(2_200, Command::Mark);
    assert_eq!(reply, Reply::Done);
    assert!(a.contains(&Action::Candidate {
        hz: 7_050_000,
        steps: 9_540,
        profile: Some("wet".into()),
        fit: None
    }));
}

#[test]
fn reload_retunes_through_the_new_file_or_keeps_the_old() {
    let mut r = Run::new(Some(9_500));
    r.settle_and_arrive(0, 7_050_000);
    let (reply, a) = r.cmd(
        2_000,
        Command::Reload {
            calibrations: Err(IoFailure::new(
                "the station's config",
                "points.csv, line 3: expected a number, found x",
            )),
        },
    );
    assert!(
        matches!(&reply, Reply::Refused(Refusal::Reload { error }) if error.contains("points.csv, line 3")),
        "{reply:?}"
    );
    assert!(a.is_empty());
    let mut fresh = calibrations();
    fresh.base = Some(Arc::new(Shifted(-25.0)));
    let (reply, _) = r.cmd(
        3_000,
        Command::Reload {
            calibrations: Ok(fresh),
        },
    );
    assert_eq!(reply, Reply::Done);
    let a = r.tick(3_020);
    assert_eq!(moves(&a), vec![(9_500, 9_475)]);
    // A file that lost the profile in use is refused.
    r.cmd(4_000, Command::Profile { name: "wet".into() });
    let (reply, _) = r.cmd(
        5_000,
        Command::Reload {
            calibrations: Ok(Calibrations {
                base: Some(Arc::new(Line)),
                profiles: Default::default(),
            }),
        },
    );
    assert!(
        matches!(reply, Reply::Refused(Refusal::Reload { .. })),
        "{reply:?}"
    );
}

/// A reload while the motor is on its way to a target of the old
/// calibration: once at rest, the settled frequency is decided again
/// through the new one (before, the loop counted as tuned for it at the
/// old calibration's position).
#[test]
fn a_reload_during_a_move_retunes_through_the_new_file_at_rest() {
    let mut r = Run::new(Some(9_500));
    r.settle_and_arrive(0, 7_050_000);
    let (reply, a) = r.cmd(2_000, Command::Goto { steps: 9_800 });
    assert_eq!(reply, Reply::Done);
    r.tick(2_020);
    let mut fresh = calibrations();
    fresh.base = Some(Arc::new(Shifted(-25.0)));
    let (reply, during) = r.cmd(
        2_030,
        Command::Reload {
            calibrations: Ok(fresh),
        },
    );
    assert_eq!(reply, Reply::Done);
    assert!(gotos(&during).is_empty(), "{a:?} {during:?}");
    let a = r.arrive(2_100, 9_800);
    assert_eq!(moves(&a), vec![(9_800, 9_475)], "{:?}", r.seen);
    // The approach from below: over 9 445, then up to 9 475.
    assert_eq!(gotos(&a), vec![9_445]);
    r.arrive(2_200, 9_445);
    let a = r.arrive(2_300, 9_475);
    assert!(gotos(&a).is_empty(), "{a:?}");
    r.tick(2_500);
    assert!(!r.inhibit);
}

/// The same, the move stopped short by a transmission after the reload:
/// once the rig receives, the loop goes where the new file says, not to
/// the old target.
#[test]
fn a_reload_during_a_move_stopped_by_a_transmission_retunes_through_the_new_file() {
    let mut r = Run::new(Some(9_500));
    r.settle_and_arrive(0, 7_050_000);
    // The rig moves to 7.080 MHz: 9 200 on the old line, 9 175 on the new.
    r.report(2_000, 7_080_000);
    r.tick(2_300);
    let a = r.tick(2_320);
    assert_eq!(gotos(&a), vec![9_170], "{a:?}");
    let mut fresh = calibrations();
    fresh.base = Some(Arc::new(Shifted(-25.0)));
    r.cmd(
        2_330,
        Command::Reload {
            calibrations: Ok(fresh),
        },
    );
    r.transmit(2_340, true);
    r.arrive(2_360, 9_300);
    r.tick(2_500);
    let a = r.transmit(3_000, false);
    let a = [a, r.tick(3_020)].concat();
    assert_eq!(moves(&a), vec![(9_300, 9_175)], "{:?}", r.seen);
}

#[test]
fn closing_refuses_moves_and_drops_a_queued_one() {
    let mut r = Run::new(Some(9_500));
    r.transmit(0, true);
    let (reply, _) = r.cmd(10, Command::Goto { steps: 9_000 });
    assert_eq!(
        reply,
        Reply::Queued {
            until: Wait::Receive
        }
    );
    r.f.handle_closing(ms(20));
    r.take();
    let (reply, _) = r.cmd(30, Command::Nudge { steps: 1 });
    assert_eq!(reply, Reply::Refused(Refusal::ShuttingDown));
    r.transmit(100, false);
    assert!(gotos(&r.tick(1_000)).is_empty());
    assert!(r.seen.iter().all(|a| !matches!(a, Action::Move { .. })));
}

#[test]
fn status_shows_what_the_core_knows() {
    let mut r = Run::new(Some(9_500));
    r.report(0, 7_205_000);
    let Reply::Status(s) = r.f.handle_command(ms(10), Command::Status) else {
        panic!("no status");
    };
    assert_eq!(s.position, Some(9_500));
    assert_eq!(s.rig_hz, Some(7_205_000));
    // In the guard above 40 m: still 40 m.
    assert_eq!(s.band.as_deref(), Some("40m"));
    assert_eq!((s.min_steps, s.max_steps), (0, 12_000));
    assert_eq!(s.profiles, vec!["base".to_string(), "wet".to_string()]);
    assert_eq!(s.presets.len(), 4);
    assert!(!s.moving && !s.paused && !s.transmitting);
    r.report(100, 14_000_000);
    assert_eq!(r.f.status().band, None);
}

/// The shared table of operator actions (`fixtures/control/actions.toml`),
/// read by the same file the end-to-end tests read it with.
#[path = "../../tests/common/actions_table.rs"]
mod actions_table;

/// A straight calibration through two points of the table.
struct Through([(u64, i64); 2]);
impl StepMap for Through {
    fn steps_at(&self, hz: f64) -> f64 {
        let [(h0, s0), (h1, s1)] = self.0;
        s0 as f64 + (hz - h0 as f64) * (s1 - s0) as f64 / (h1 as f64 - h0 as f64)
    }
}

fn two_points(points: &[(u64, i64)]) -> [(u64, i64); 2] {
    match points {
        [a, b] => [*a, *b],
        other => panic!("the table's calibration is two points, found {other:?}"),
    }
}

#[test]
fn the_shared_action_table_holds_in_the_core() {
    use crate::control::protocol::{parse_request, Answer, Ask};
    use actions_table::RigSays;

    let table = actions_table::table();
    let st = &table.station;
    let base = Arc::new(Through(two_points(&st.base_points)));
    let wet = Arc::new(Through(two_points(&st.wet_points)));
    let calibrations = || {
        let mut profiles: std::collections::BTreeMap<String, Arc<dyn StepMap>> = Default::default();
        profiles.insert("wet".into(), wet.clone());
        Calibrations {
            base: Some(base.clone()),
            profiles,
        }
    };
    // The end-to-end station's policy (tests/common/mod.rs: debounce 30 ms,
    // dead band 100 Hz, lead 5 ms, tail 20 ms, no backlash).
    let mut p = policy();
    p.bands = vec![Band {
        name: st.band.name.clone(),
        low_hz: st.band.low_hz,
        high_hz: st.band.high_hz,
        guard_hz: 0,
        hysteresis_hz: 100,
        debounce: ms(30),
    }];
    p.min_steps = st.min_steps;
    p.max_steps = st.max_steps;
    p.backlash_steps = 0;
    p.debounce = ms(30);
    p.min_move_steps = 1;
    p.inhibit_lead = ms(5);
    p.inhibit_tail = ms(20);
    p.inhibit_until_tuned = true;
    p.inhibit_while_detuned = true;
    let presets = st
        .presets
        .iter()
        .map(|q| Preset {
            name: q.name.clone(),
            goal: match (q.hz, q.steps) {
                (Some(hz), None) => PresetGoal::Hz(hz),
                (None, Some(s)) => PresetGoal::Steps(s),
                other => panic!("preset {}: {other:?}", q.name),
            },
        })
        .collect();
    let mut f = Follower::new(p, base.clone(), Some(st.start_steps)).with_operator(
        presets,
        calibrations(),
        None,
    );
    let (min, max) = (st.min_steps, st.max_steps);
    let (mut t, mut transmitting, mut inhibit) = (ms(0), false, f.inhibit());
    for (i, step) in table.steps.iter().enumerate() {
        let label = step.label(i);
        if let Some(line) = &step.ask {
            let request = parse_request(line).unwrap_or_else(|e| panic!("{label}: {e}"));
            let cmd = match request.ask() {
                Some(Ask::Command(c)) => c.into_command(),
                Some(Ask::Reload) => Command::Reload {
                    calibrations: Ok(calibrations()),
                },
                None => panic!("{label}: not a command"),
            };
            let answer = Answer::from_reply(&f.handle_command(t, cmd));
            assert_eq!(Some(&answer.outcome), step.outcome.as_ref(), "{label}");
            assert_eq!(answer.waits_for, step.waits_for, "{label}");
            assert_eq!(answer.refused, step.refused, "{label}: {answer:?}");
        }
        match (step.rig, step.rig_hz) {
            (Some(RigSays::Frequency), Some(hz)) => f.handle_frequency(t, hz),
            (Some(RigSays::Transmit), _) => {
                transmitting = true;
                f.handle_transmit(t, true)
            }
            (Some(RigSays::Receive), _) => {
                transmitting = false;
                f.handle_transmit(t, false)
            }
            _ => {}
        }
        // Two seconds of virtual time: deadlines met, every leg arriving
        // 10 ms after its GOTO; the GOTOs are checked against the rules.
        let end = t + ms(2_000);
        let mut gotos = Vec::new();
        let mut arriving: Option<(Duration, i64)> = None;
        while t < end {
            while let Some(a) = f.poll_action() {
                match a {
                    Action::Inhibit { on } => inhibit = on,
                    Action::Goto { steps } => {
                        assert!((min..=max).contains(&steps), "{label}: GOTO {steps}");
                        assert!(!transmitting, "{label}: GOTO {steps} while transmitting");
                        assert!(inhibit, "{label}: GOTO {steps} without the inhibit");
                        gotos.push(steps);
                        arriving = Some((t + ms(10), steps));
                    }
                    _ => {}
                }
            }
            t += ms(1);
            if let Some((at, steps)) = arriving {
                if t >= at {
                    arriving = None;
                    f.handle_arrived(t, steps);
                    continue;
                }
            }
            if f.poll_timeout().is_some_and(|d| d <= t) {
                f.handle_timeout(t);
            }
        }
        let want: Vec<i64> = step.moves_to.into_iter().collect();
        assert_eq!(gotos, want, "{label}: the controller's GOTOs");
        if let Some(n) = step.moves_to {
            assert_eq!(f.position(), Some(n), "{label}");
        }
    }
}

#[test]
fn status_estimates_the_swr_where_the_capacitor_rests() {
    // The invented 1 m loop of 22 mm copper tube of the demo station.
    let small_loop = crate::antenna::SmallLoop::from_config(&crate::antenna::LoopDescription {
        loop_diameter_m: Some(1.0),
        conductor_diameter_m: Some(0.022),
        ..Default::default()
    });
    let mut r = Run::new(Some(9_500));
    assert_eq!(r.f.status().swr, None, "no loop described: no estimate");
    r.f = core(Some(9_500)).with_loop(small_loop);
    // Step 9500 is 7.050 MHz on the test calibration; the rig 2 kHz above.
    r.report(0, 7_052_000);
    let s = r.f.status();
    assert_eq!((s.rx_hz, s.tx_hz), (Some(7_052_000), Some(7_052_000)));
    let swr = s.swr.expect("an estimate at rest");
    assert!((swr.resonance_hz - 7_050_000.0).abs() < 0.2, "{swr:?}");
    let q = small_loop.unwrap().at(swr.resonance_hz).q_unloaded;
    assert_eq!(swr.q_unloaded, q);
    let at = swr.at.unwrap();
    assert_eq!(at.hz, 7_052_000.0);
    assert!((at.swr - crate::antenna::swr_at(7_052_000.0, 7_050_000.0, q)).abs() < 1e-3);
    assert!(at.swr > 1.0);
    // Moving: no estimate until it is at rest again.
    assert_eq!(
        r.f.handle_command(ms(5_000), Command::Goto { steps: 9_000 }),
        Reply::Done
    );
    r.take();
    r.f.handle_timeout(ms(6_000));
    r.take();
    assert!(r.f.status().moving);
    assert_eq!(r.f.status().swr, None);
}
