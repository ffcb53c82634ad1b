//! Unit tests of the follow core, driven by hand event by event. The
//! calibration here is a straight line (invented, for the rules only):
//! steps = 10 000 - (hz - 7 000 000) / 100, so 100 Hz is one step.

use super::test_support::{ms, policy, Line};
use super::*;

fn detune_core(position: Option<i64>) -> Follower {
    let mut p = policy();
    p.inhibit_while_detuned = true;
    Follower::new(p, Arc::new(Line), position)
}

fn core(position: Option<i64>) -> Follower {
    Follower::new(policy(), Arc::new(Line), position)
}

/// The actions so far, less the `Settled` notes (checked on their own).
fn drain(f: &mut Follower) -> Vec<Action> {
    std::iter::from_fn(|| f.poll_action())
        .filter(|a| !matches!(a, Action::Settled { .. }))
        .collect()
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

/// Settles `hz` at `t` and runs past the debounce and the inhibit lead.
fn settle(f: &mut Follower, t: u64, hz: u64) -> Vec<Action> {
    f.handle_frequency(ms(t), hz);
    f.handle_timeout(ms(t + 300));
    f.handle_timeout(ms(t + 320));
    f.handle_timeout(ms(t + 500));
    drain(f)
}

#[test]
fn knob_turning_moves_once_after_it_stops() {
    let mut f = core(Some(10_000));
    // A sweep: a new report every 100 ms for two seconds.
    for i in 0..20u64 {
        f.handle_frequency(ms(i * 100), 7_010_000 + i * 1_000);
        f.handle_timeout(ms(i * 100 + 99));
        assert!(gotos(&drain(&mut f)).is_empty(), "moved while turning");
    }
    // The last report (7 029 000) was at 1900 ms; it settles at 2200 ms.
    assert_eq!(f.poll_timeout(), Some(ms(2_200)));
    f.handle_timeout(ms(2_199));
    assert!(drain(&mut f).is_empty());
    f.handle_timeout(ms(2_200));
    assert_eq!(drain(&mut f), vec![Action::Inhibit { on: true }]);
    f.handle_timeout(ms(2_220));
    assert_eq!(
        drain(&mut f),
        vec![
            Action::Move {
                from: 10_000,
                to: 9_710,
                hz: 7_029_000,
                tune_hz: 7_029_000,
            },
            Action::Goto { steps: 9_680 },
        ]
    );
}

#[test]
fn settling_is_announced_once_per_settled_frequency() {
    let mut f = core(Some(10_000));
    f.handle_frequency(ms(0), 7_050_000);
    f.handle_frequency(ms(100), 7_050_000);
    f.handle_timeout(ms(400));
    f.handle_frequency(ms(500), 7_050_000);
    f.handle_timeout(ms(2_000));
    let settled: Vec<Action> = std::iter::from_fn(|| f.poll_action())
        .filter(|a| matches!(a, Action::Settled { .. }))
        .collect();
    assert_eq!(settled, vec![Action::Settled { hz: 7_050_000 }]);
}

#[test]
fn repeated_reports_of_one_frequency_do_not_restart_the_debounce() {
    let mut f = core(Some(10_000));
    f.handle_frequency(ms(0), 7_050_000);
    f.handle_frequency(ms(200), 7_050_000);
    assert_eq!(f.poll_timeout(), Some(ms(300)));
}

#[test]
fn inhibit_is_asserted_before_the_first_step_and_released_after_the_tail() {
    let mut f = core(Some(9_000));
    let a = settle(&mut f, 0, 7_050_000); // steps 9 500, upward: one leg
    assert_eq!(a.first(), Some(&Action::Inhibit { on: true }));
    assert_eq!(gotos(&a), vec![9_500]);
    assert!(f.inhibit());
    f.handle_arrived(ms(1_000), 9_500);
    assert!(drain(&mut f).is_empty(), "released without the tail");
    assert_eq!(f.poll_timeout(), Some(ms(1_100)));
    f.handle_timeout(ms(1_100));
    assert_eq!(drain(&mut f), vec![Action::Inhibit { on: false }]);
    assert_eq!(f.stats().moves, 1);
    assert_eq!(f.stats().steps, 500);
}

#[test]
fn a_new_move_in_the_tail_keeps_the_inhibit_and_needs_no_lead() {
    // The next report settles at 1 050 ms, inside the tail (1 000..1 100).
    let mut f = core(Some(9_000));
    settle(&mut f, 0, 7_050_000);
    f.handle_frequency(ms(750), 7_040_000);
    f.handle_arrived(ms(1_000), 9_500);
    f.handle_timeout(ms(1_050));
    let a = drain(&mut f);
    assert!(!a.contains(&Action::Inhibit { on: false }), "{a:?}");
    assert_eq!(gotos(&a), vec![9_600]);
    assert!(f.inhibit());
}

#[test]
fn a_move_after_the_tail_asserts_the_inhibit_afresh() {
    // The report comes after the tail (1 000..1 100) has ended. (Issue 11
    // moved it here from 1 010 ms: a report inside the tail now keeps the
    // inhibit on, see the next test.)
    let mut f = core(Some(9_000));
    settle(&mut f, 0, 7_050_000);
    f.handle_arrived(ms(1_000), 9_500);
    f.handle_timeout(ms(1_100));
    assert_eq!(drain(&mut f), vec![Action::Inhibit { on: false }]);
    f.handle_frequency(ms(1_110), 7_040_000);
    f.handle_timeout(ms(1_410));
    assert_eq!(drain(&mut f), vec![Action::Inhibit { on: true }]);
    f.handle_timeout(ms(1_430));
    assert_eq!(gotos(&drain(&mut f)), vec![9_600]);
}

#[test]
fn a_detuned_report_inside_the_tail_keeps_the_inhibit_until_the_new_target() {
    let mut f = core(Some(9_000));
    settle(&mut f, 0, 7_050_000);
    f.handle_arrived(ms(1_000), 9_500);
    f.handle_frequency(ms(1_010), 7_040_000);
    f.handle_timeout(ms(1_100));
    assert_eq!(drain(&mut f), vec![]);
    assert!(f.inhibit());
    // At the settle the move goes at once (the line has been on all along).
    f.handle_timeout(ms(1_310));
    let a = drain(&mut f);
    assert_eq!(gotos(&a), vec![9_600]);
    assert!(!a.contains(&Action::Inhibit { on: false }), "{a:?}");
    f.handle_arrived(ms(1_400), 9_600);
    assert!(f.inhibit());
    f.handle_timeout(ms(1_500));
    assert_eq!(drain(&mut f), vec![Action::Inhibit { on: false }]);
}

#[test]
fn a_report_back_in_the_dead_band_inside_the_tail_lets_the_tail_end_as_usual() {
    let mut f = core(Some(9_000));
    settle(&mut f, 0, 7_050_000);
    f.handle_arrived(ms(1_000), 9_500);
    // The same frequency again: not detuned, nothing held.
    f.handle_frequency(ms(1_010), 7_050_010);
    f.handle_timeout(ms(1_100));
    assert_eq!(drain(&mut f), vec![Action::Inhibit { on: false }]);
}

#[test]
fn dead_band_holds_small_changes() {
    let mut p = policy();
    p.min_move_steps = 20;
    let mut f = Follower::new(p, Arc::new(Line), Some(9_000));
    settle(&mut f, 0, 7_050_000);
    f.handle_arrived(ms(500), 9_500);
    f.handle_timeout(ms(600));
    drain(&mut f);
    // 800 Hz away: inside the 1 000 Hz dead band.
    let a = settle(&mut f, 1_000, 7_050_800);
    assert_eq!(
        a,
        vec![Action::Hold {
            hz: 7_050_800,
            reason: HoldReason::DeadBand
        }]
    );
    // 1 200 Hz away but only 12 steps from where the motor is (min 20).
    let a = settle(&mut f, 2_000, 7_048_800);
    assert!(gotos(&a).is_empty(), "{a:?}");
    assert!(a.contains(&Action::Hold {
        hz: 7_048_800,
        reason: HoldReason::DeadBand
    }));
    // 5 000 Hz away: moves (downward, so by way of the overshoot).
    let a = settle(&mut f, 3_000, 7_055_000);
    assert_eq!(gotos(&a), vec![9_420]);
}

#[test]
fn out_of_band_holds_and_never_moves() {
    let mut f = core(Some(9_000));
    // A broadcast station in the 41 m broadcast band.
    let a = settle(&mut f, 0, 7_300_000);
    assert_eq!(
        a,
        vec![Action::Hold {
            hz: 7_300_000,
            reason: HoldReason::OutOfBand
        }]
    );
    // Reported again later: logged once, still no move.
    let a = settle(&mut f, 2_000, 9_400_000);
    assert!(gotos(&a).is_empty());
    assert_eq!(f.stats().moves, 0);
    assert!(!f.inhibit());
}

#[test]
fn guard_margin_tunes_for_the_nearest_band_edge() {
    let mut f = core(Some(9_000));
    let a = settle(&mut f, 0, 6_995_000); // 5 kHz below 40 m
    assert!(a.contains(&Action::Move {
        from: 9_000,
        to: 10_000,
        hz: 6_995_000,
        tune_hz: 7_000_000,
    }));
    assert_eq!(f.tuned_hz(), Some(7_000_000));
}

#[test]
fn targets_beyond_the_limits_are_clamped_and_reported() {
    let mut p = policy();
    p.max_steps = 9_800;
    let mut f = Follower::new(p, Arc::new(Line), Some(9_000));
    let a = settle(&mut f, 0, 7_001_000); // steps 9 990 > 9 800
    assert!(a.contains(&Action::Hold {
        hz: 7_001_000,
        reason: HoldReason::Limit
    }));
    assert!(a.contains(&Action::Move {
        from: 9_000,
        to: 9_800,
        hz: 7_001_000,
        tune_hz: 7_001_000,
    }));
    assert!(gotos(&a).iter().all(|s| (0..=9_800).contains(s)));
}

#[test]
fn backlash_overshoots_when_coming_from_the_wrong_side() {
    let mut f = core(Some(9_000));
    let a = settle(&mut f, 0, 7_150_000); // 8 500: downward, approach up
    assert!(a.contains(&Action::Move {
        from: 9_000,
        to: 8_500,
        hz: 7_150_000,
        tune_hz: 7_150_000,
    }));
    assert_eq!(gotos(&a), vec![8_470]);
    f.handle_arrived(ms(2_000), 8_470);
    assert_eq!(drain(&mut f), vec![Action::Goto { steps: 8_500 }]);
    f.handle_arrived(ms(2_100), 8_500);
    f.handle_timeout(ms(2_200));
    assert_eq!(drain(&mut f), vec![Action::Inhibit { on: false }]);
    assert_eq!(f.stats().moves, 1);
    assert_eq!(f.stats().steps, 530 + 30);
}

#[test]
fn unknown_position_keeps_inhibit_and_holds_until_reported() {
    let mut f = core(None);
    assert_eq!(drain(&mut f), vec![Action::Inhibit { on: true }]);
    let a = settle(&mut f, 0, 7_050_000);
    assert_eq!(
        a,
        vec![Action::Hold {
            hz: 7_050_000,
            reason: HoldReason::PositionUnknown
        }]
    );
    f.handle_arrived(ms(5_000), 9_100);
    let a = drain(&mut f);
    assert!(a.contains(&Action::Move {
        from: 9_100,
        to: 9_500,
        hz: 7_050_000,
        tune_hz: 7_050_000,
    }));
    assert!(!a.contains(&Action::Inhibit { on: false }));
}

#[test]
fn a_fault_holds_with_inhibit_until_the_position_is_known_again() {
    let mut f = core(Some(9_000));
    settle(&mut f, 0, 7_050_000);
    f.handle_fault(ms(400));
    let a = drain(&mut f);
    assert!(a.contains(&Action::Hold {
        hz: 7_050_000,
        reason: HoldReason::Fault
    }));
    assert!(f.inhibit());
    assert_eq!(f.position(), None);
    f.handle_timeout(ms(10_000));
    assert!(drain(&mut f).is_empty(), "inhibit released during a fault");
    // The position is confirmed part way: the interrupted move is decided
    // again at once for the settled frequency (no new report needed), with
    // the inhibit still on.
    f.handle_arrived(ms(11_000), 9_200);
    f.handle_timeout(ms(11_100));
    let a = drain(&mut f);
    assert_eq!(
        a,
        vec![
            Action::Move {
                from: 9_200,
                to: 9_500,
                hz: 7_050_000,
                tune_hz: 7_050_000,
            },
            Action::Goto { steps: 9_500 }
        ]
    );
    assert!(f.inhibit());
    f.handle_arrived(ms(11_200), 9_500);
    f.handle_timeout(ms(11_400));
    assert_eq!(drain(&mut f), vec![Action::Inhibit { on: false }]);
    // Following goes on from there.
    let a = settle(&mut f, 12_000, 7_090_000);
    assert!(a.contains(&Action::Move {
        from: 9_500,
        to: 9_100,
        hz: 7_090_000,
        tune_hz: 7_090_000,
    }));
    assert_eq!(gotos(&a), vec![9_070]);
}

/// A target faulted twice in a row (a controller that refuses it, an end
/// stop before it) is asked for once more after the first recovery, then
/// held with the inhibit on until a new frequency: no retry storm, and
/// never a release with the loop untuned.
#[test]
fn a_target_faulted_twice_in_a_row_waits_for_a_new_frequency() {
    let mut p = policy();
    p.inhibit_until_tuned = true;
    let mut f = Follower::new(p, Arc::new(Line), Some(9_000));
    let a = settle(&mut f, 0, 7_050_000);
    assert_eq!(gotos(&a), vec![9_500]);
    f.handle_fault(ms(400));
    f.handle_arrived(ms(2_400), 9_000);
    f.handle_timeout(ms(2_500));
    assert_eq!(gotos(&drain(&mut f)), vec![9_500], "asked once more");
    f.handle_fault(ms(2_600));
    drain(&mut f);
    f.handle_arrived(ms(4_600), 9_000);
    for t in (4_600..10_000).step_by(100) {
        f.handle_timeout(ms(t));
    }
    let a = drain(&mut f);
    assert!(gotos(&a).is_empty(), "asked again: {a:?}");
    assert!(f.inhibit(), "released with the loop untuned: {a:?}");
    // A new frequency is a new decision.
    let a = settle(&mut f, 10_000, 7_090_000);
    assert_eq!(gotos(&a), vec![9_100]);
}

#[test]
fn paused_core_starts_nothing_until_resumed() {
    let mut f = core(Some(9_000));
    f.handle_pause(ms(0), true);
    let a = settle(&mut f, 10, 7_050_000);
    assert!(a.contains(&Action::Hold {
        hz: 7_050_000,
        reason: HoldReason::Paused
    }));
    assert!(gotos(&a).is_empty());
    f.handle_pause(ms(1_000), false);
    f.handle_timeout(ms(1_020));
    assert_eq!(gotos(&drain(&mut f)), vec![9_500]);
}

#[test]
fn a_touch_up_that_stays_becomes_a_candidate_point() {
    let mut f = core(Some(9_000));
    settle(&mut f, 0, 7_050_000);
    f.handle_arrived(ms(1_000), 9_500);
    f.handle_timeout(ms(1_100));
    drain(&mut f);
    f.handle_nudge(ms(2_000), 12);
    f.handle_timeout(ms(2_020));
    assert_eq!(gotos(&drain(&mut f)), vec![9_512]);
    f.handle_arrived(ms(2_100), 9_512);
    assert_eq!(f.poll_timeout(), Some(ms(2_200)));
    f.handle_timeout(ms(2_200));
    drain(&mut f);
    assert_eq!(f.poll_timeout(), Some(ms(7_100)));
    f.handle_timeout(ms(7_100));
    assert_eq!(
        drain(&mut f),
        vec![Action::Candidate {
            hz: 7_050_000,
            steps: 9_512,
            profile: None,
            fit: None
        }]
    );
    // The same frequency reported again does not undo the touch-up.
    f.handle_frequency(ms(8_000), 7_050_000);
    f.handle_timeout(ms(9_000));
    assert!(gotos(&drain(&mut f)).is_empty());
}

#[test]
fn a_touch_up_abandoned_by_retuning_is_no_candidate() {
    let mut f = core(Some(9_500));
    f.handle_frequency(ms(0), 7_050_000);
    f.handle_timeout(ms(300));
    drain(&mut f);
    f.handle_nudge(ms(1_000), -8);
    f.handle_timeout(ms(1_020));
    f.handle_arrived(ms(1_100), 9_462);
    f.handle_arrived(ms(1_150), 9_492);
    drain(&mut f);
    let a = settle(&mut f, 2_000, 7_060_000);
    assert_eq!(gotos(&a), vec![9_370]);
    f.handle_arrived(ms(3_000), 9_370);
    f.handle_arrived(ms(3_100), 9_400);
    f.handle_timeout(ms(60_000));
    let a = drain(&mut f);
    assert!(
        !a.iter().any(|x| matches!(x, Action::Candidate { .. })),
        "{a:?}"
    );
}

#[test]
fn switching_calibration_retunes_the_current_frequency() {
    struct Shifted;
    impl StepMap for Shifted {
        fn steps_at(&self, hz: f64) -> f64 {
            Line.steps_at(hz) + 40.0
        }
    }
    let mut f = core(Some(9_500));
    f.handle_frequency(ms(0), 7_050_000);
    f.handle_timeout(ms(300));
    assert!(gotos(&drain(&mut f)).is_empty());
    f.handle_calibration(ms(1_000), Some("wet".into()), Arc::new(Shifted));
    f.handle_timeout(ms(1_020));
    let a = drain(&mut f);
    assert_eq!(gotos(&a), vec![9_540]);
    assert_eq!(f.profile(), Some("wet"));
}

#[test]
fn a_detuned_report_inhibits_at_once_until_the_loop_is_tuned() {
    let mut f = detune_core(Some(9_500));
    f.handle_frequency(ms(0), 7_050_000);
    f.handle_timeout(ms(300));
    f.handle_timeout(ms(320));
    drain(&mut f); // tuned for 7.050 MHz (already there)
    assert!(!f.inhibit());
    // The operator jumps 20 kHz and calls 100 ms later, before the debounce
    // has run out: the inhibit is already on.
    f.handle_frequency(ms(1_000), 7_070_000);
    assert_eq!(drain(&mut f), vec![Action::Inhibit { on: true }]);
    f.handle_transmit(ms(1_100), true);
    f.handle_timeout(ms(1_300));
    let a = drain(&mut f);
    assert!(gotos(&a).is_empty(), "{a:?}");
    assert!(a.contains(&Action::Hold {
        hz: 7_070_000,
        reason: HoldReason::Transmitting
    }));
    assert!(f.inhibit());
    // On receive the move starts at once: the inhibit has long been on.
    f.handle_transmit(ms(2_000), false);
    assert_eq!(gotos(&drain(&mut f)), vec![9_270]);
    f.handle_arrived(ms(2_300), 9_270);
    assert_eq!(drain(&mut f), vec![Action::Goto { steps: 9_300 }]);
    f.handle_arrived(ms(2_350), 9_300);
    f.handle_timeout(ms(2_450));
    assert_eq!(drain(&mut f), vec![Action::Inhibit { on: false }]);
}

#[test]
fn a_move_stopped_by_a_transmission_keeps_the_inhibit_while_detuned() {
    let mut f = detune_core(Some(9_000));
    f.handle_frequency(ms(0), 7_050_000);
    f.handle_timeout(ms(300));
    assert_eq!(gotos(&drain(&mut f)), vec![9_500]);
    f.handle_transmit(ms(400), true);
    assert_eq!(drain(&mut f).first(), Some(&Action::Stop));
    f.handle_arrived(ms(450), 9_200);
    f.handle_timeout(ms(5_000));
    let a = drain(&mut f);
    assert!(!a.contains(&Action::Inhibit { on: false }), "{a:?}");
    assert!(f.inhibit());
    f.handle_transmit(ms(6_000), false);
    assert_eq!(gotos(&drain(&mut f)), vec![9_500]);
}

#[test]
fn a_report_inside_the_dead_band_does_not_inhibit() {
    let mut f = detune_core(Some(9_500));
    f.handle_frequency(ms(0), 7_050_000);
    f.handle_timeout(ms(300));
    drain(&mut f);
    f.handle_frequency(ms(1_000), 7_050_600);
    assert!(drain(&mut f).is_empty());
    assert!(!f.inhibit());
    // Out of every band: not the loop's business either.
    f.handle_frequency(ms(2_000), 9_650_000);
    assert!(!f.inhibit());
}

#[test]
fn a_detuned_excursion_that_comes_back_releases_at_the_settle() {
    let mut f = detune_core(Some(9_500));
    f.handle_frequency(ms(0), 7_050_000);
    f.handle_timeout(ms(300));
    drain(&mut f);
    f.handle_frequency(ms(1_000), 7_060_000);
    f.handle_frequency(ms(1_100), 7_050_200);
    assert_eq!(drain(&mut f), vec![Action::Inhibit { on: true }]);
    assert_eq!(f.poll_timeout(), Some(ms(1_400)));
    f.handle_timeout(ms(1_400));
    let a = drain(&mut f);
    assert!(a.contains(&Action::Inhibit { on: false }), "{a:?}");
    assert!(gotos(&a).is_empty());
}

#[test]
fn a_detuned_report_during_the_tail_keeps_the_inhibit_without_spinning() {
    let mut f = detune_core(Some(9_000));
    f.handle_frequency(ms(0), 7_050_000);
    f.handle_timeout(ms(300));
    f.handle_timeout(ms(320));
    f.handle_arrived(ms(500), 9_500);
    drain(&mut f);
    // Tail runs to 600 ms; a detuned report at 550 holds the inhibit.
    f.handle_frequency(ms(550), 7_080_000);
    f.handle_timeout(ms(600));
    assert!(f.inhibit());
    // The stale tail deadline is not offered again while held.
    assert_eq!(f.poll_timeout(), Some(ms(850)));
    f.handle_timeout(ms(850));
    let a = drain(&mut f);
    assert!(!a.contains(&Action::Inhibit { on: false }), "{a:?}");
    assert_eq!(gotos(&a), vec![9_170]);
}

#[test]
fn paused_core_does_not_hold_the_inhibit_for_a_detuned_report() {
    let mut f = detune_core(Some(9_500));
    f.handle_pause(ms(0), true);
    f.handle_frequency(ms(100), 7_090_000);
    f.handle_timeout(ms(400));
    let a = drain(&mut f);
    assert!(a.contains(&Action::Hold {
        hz: 7_090_000,
        reason: HoldReason::Paused
    }));
    assert!(!f.inhibit(), "{a:?}");
}

#[test]
fn poll_timeout_is_the_earliest_deadline() {
    let mut f = core(Some(9_000));
    assert_eq!(f.poll_timeout(), None);
    f.handle_frequency(ms(100), 7_050_000);
    assert_eq!(f.poll_timeout(), Some(ms(400)));
    f.handle_timeout(ms(400));
    assert_eq!(f.poll_timeout(), Some(ms(420)));
    f.handle_timeout(ms(420));
    assert_eq!(f.poll_timeout(), None);
}

#[test]
fn a_calibration_that_answers_nonsense_never_moves() {
    struct Broken;
    impl StepMap for Broken {
        fn steps_at(&self, _hz: f64) -> f64 {
            f64::NAN
        }
    }
    let mut f = Follower::new(policy(), Arc::new(Broken), Some(9_000));
    let a = settle(&mut f, 0, 7_050_000);
    assert_eq!(
        a,
        vec![Action::Hold {
            hz: 7_050_000,
            reason: HoldReason::Calibration
        }]
    );
}

/// What keeps the core from starting or finishing a move: a transmission,
/// or a rig gone silent (a transmission could start unheard). Both must
/// act alike, so each test below runs with both.
#[derive(Debug, Clone, Copy)]
enum Blocker {
    Transmit,
    RigSilent,
}

impl Blocker {
    fn start(self, f: &mut Follower, at: Duration) {
        match self {
            Blocker::Transmit => f.handle_transmit(at, true),
            Blocker::RigSilent => f.handle_rig_link(at, false),
        }
    }

    fn end(self, f: &mut Follower, at: Duration) {
        match self {
            Blocker::Transmit => f.handle_transmit(at, false),
            Blocker::RigSilent => f.handle_rig_link(at, true),
        }
    }

    fn reason(self) -> HoldReason {
        match self {
            Blocker::Transmit => HoldReason::Transmitting,
            Blocker::RigSilent => HoldReason::RigSilent,
        }
    }
}

/// Blocked before the operator settles: a hold with the reason, no
/// inhibit, nothing however long it lasts; then the move once it ends.
fn no_move_starts_while(b: Blocker) {
    let mut f = core(Some(9_000));
    b.start(&mut f, ms(0));
    assert_eq!(f.rig_silent(), matches!(b, Blocker::RigSilent), "{b:?}");
    let a = settle(&mut f, 10, 7_050_000);
    assert_eq!(
        a,
        vec![Action::Hold {
            hz: 7_050_000,
            reason: b.reason()
        }],
        "{b:?}"
    );
    assert!(!f.inhibit(), "{b:?}: inhibit asserted while blocked");
    f.handle_timeout(ms(60_000));
    assert!(drain(&mut f).is_empty(), "{b:?}");
    // Being told again changes nothing.
    b.start(&mut f, ms(60_500));
    assert!(drain(&mut f).is_empty(), "{b:?}");
    b.end(&mut f, ms(61_000));
    assert_eq!(drain(&mut f), vec![Action::Inhibit { on: true }], "{b:?}");
    f.handle_timeout(ms(61_020));
    assert_eq!(gotos(&drain(&mut f)), vec![9_500], "{b:?}");
}

#[test]
fn no_move_starts_while_transmitting() {
    no_move_starts_while(Blocker::Transmit);
}

#[test]
fn no_move_while_the_rig_is_silent_then_the_move_when_it_is_back() {
    no_move_starts_while(Blocker::RigSilent);
}

/// Blocked during the inhibit lead: no `GOTO`, the inhibit released (the
/// operator may be transmitting); the move once it ends.
fn stands_down_during_the_inhibit_lead(b: Blocker) {
    let mut f = core(Some(9_000));
    f.handle_frequency(ms(0), 7_050_000);
    f.handle_timeout(ms(300));
    assert_eq!(drain(&mut f), vec![Action::Inhibit { on: true }], "{b:?}");
    b.start(&mut f, ms(310));
    f.handle_timeout(ms(320));
    let a = drain(&mut f);
    assert!(gotos(&a).is_empty(), "{b:?}: {a:?}");
    assert!(a.contains(&Action::Inhibit { on: false }), "{b:?}: {a:?}");
    b.end(&mut f, ms(5_000));
    f.handle_timeout(ms(5_020));
    assert_eq!(gotos(&drain(&mut f)), vec![9_500], "{b:?}");
}

#[test]
fn transmit_during_the_inhibit_lead_stands_down() {
    stands_down_during_the_inhibit_lead(Blocker::Transmit);
}

#[test]
fn the_rig_going_silent_during_the_inhibit_lead_stands_down() {
    stands_down_during_the_inhibit_lead(Blocker::RigSilent);
}

/// Blocked during a move: `STOP` at once, nothing more while it lasts
/// (`between` runs then), and the move taken up again from where the motor
/// stopped once it ends.
fn stops_a_move_and_resumes(b: Blocker, between: impl Fn(&mut Follower)) {
    let mut f = core(Some(9_000));
    settle(&mut f, 0, 7_150_000); // overshoot leg to 8 470 first
    b.start(&mut f, ms(500));
    let a = drain(&mut f);
    assert_eq!(a.first(), Some(&Action::Stop), "{b:?}");
    assert!(
        a.contains(&Action::Hold {
            hz: 7_150_000,
            reason: b.reason()
        }),
        "{b:?}: {a:?}"
    );
    f.handle_arrived(ms(510), 8_800);
    f.handle_timeout(ms(700));
    let a = drain(&mut f);
    assert!(gotos(&a).is_empty(), "{b:?}: {a:?}");
    assert_eq!(f.position(), Some(8_800), "{b:?}");
    between(&mut f);
    b.end(&mut f, ms(3_000));
    f.handle_timeout(ms(3_020));
    let a = drain(&mut f);
    assert!(
        a.contains(&Action::Move {
            from: 8_800,
            to: 8_500,
            hz: 7_150_000,
            tune_hz: 7_150_000,
        }),
        "{b:?}: {a:?}"
    );
    assert_eq!(gotos(&a), vec![8_470], "{b:?}");
}

#[test]
fn transmit_during_a_move_stops_it_and_resumes_on_receive() {
    stops_a_move_and_resumes(Blocker::Transmit, |_| {});
}

#[test]
fn the_rig_going_silent_during_a_move_stops_it_until_it_is_back() {
    stops_a_move_and_resumes(Blocker::RigSilent, |f| {
        // A transmission that starts and ends meanwhile does not release it.
        f.handle_transmit(ms(800), true);
        f.handle_transmit(ms(900), false);
        f.handle_timeout(ms(1_000));
        assert!(gotos(&drain(f)).is_empty());
    });
}
