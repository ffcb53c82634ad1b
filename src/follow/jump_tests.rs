//! The core tells a jump (a band change, a memory recall, a band-map click)
//! from a knob sweep, and acts on a jump at once: unit tests driven event by
//! event. The calibration is the invented straight line of `tests.rs`
//! (100 Hz is one step), for the rules only.

use super::test_support::{self, band_40m, ms, Line};
use super::*;

/// One 40 m band with a 300 ms debounce and a 1 kHz dead band; jumps are
/// 10 kHz or more after 300 ms without another frequency.
fn policy() -> Policy {
    Policy {
        bands: vec![band_40m()],
        backlash_steps: 0,
        inhibit_while_detuned: true,
        jump: Some(Jump {
            min_hz: 10_000,
            quiet: ms(300),
        }),
        ..test_support::policy()
    }
}

/// A core tuned for 7.050 MHz (position 9 500), settled there at 0 ms,
/// with the settle's actions drained.
fn tuned() -> Follower {
    tuned_with(policy())
}

/// [`tuned`] under `policy`.
fn tuned_with(policy: Policy) -> Follower {
    let mut f = Follower::new(policy, Arc::new(Line), Some(9_500));
    f.handle_frequency(ms(0), 7_050_000);
    f.handle_timeout(ms(300));
    drain(&mut f);
    f
}

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

#[test]
fn a_jump_after_a_quiet_spell_moves_after_the_lead_not_the_debounce() {
    let mut f = tuned();
    // 10 s on 7.050, then a memory recall to 7.150 (100 kHz away).
    f.handle_frequency(ms(10_000), 7_150_000);
    assert_eq!(drain(&mut f), vec![Action::Inhibit { on: true }]);
    // The inhibit went on with the report: the first step waits its lead.
    assert_eq!(f.poll_timeout(), Some(ms(10_020)));
    f.handle_timeout(ms(10_019));
    assert!(drain(&mut f).is_empty());
    f.handle_timeout(ms(10_020));
    assert_eq!(
        drain(&mut f),
        vec![
            Action::Move {
                from: 9_500,
                to: 8_500,
                hz: 7_150_000,
                tune_hz: 7_150_000,
            },
            Action::Goto { steps: 8_500 },
        ]
    );
    assert_eq!(f.stats().jumps, 1);
}

#[test]
fn a_sweep_is_no_jump_and_waits_for_the_settle() {
    let mut f = tuned();
    // A knob sweep after a quiet spell: 2 kHz every 50 ms up to 7.090,
    // and then, still turning, a step of 20 kHz (a fast spin): neither the
    // first step (too close) nor the later ones (too soon) is a jump.
    let mut t = 10_000;
    let mut hz = 7_050_000;
    while hz < 7_090_000 {
        hz += 2_000;
        f.handle_frequency(ms(t), hz);
        f.handle_timeout(ms(t + 49));
        assert!(
            gotos(&drain(&mut f)).is_empty(),
            "moved at {hz} while turning"
        );
        t += 50;
    }
    f.handle_frequency(ms(t), 7_110_000);
    f.handle_timeout(ms(t + 299));
    assert!(
        gotos(&drain(&mut f)).is_empty(),
        "a fast step taken for a jump"
    );
    f.handle_timeout(ms(t + 300));
    f.handle_timeout(ms(t + 320));
    // 10 000 - 110 000 / 100 steps.
    assert_eq!(gotos(&drain(&mut f)), vec![8_900]);
    assert_eq!(f.stats().jumps, 0);
}

#[test]
fn another_band_or_leaving_the_bands_is_a_jump_at_any_distance() {
    let mut f = tuned();
    // 7.050 to 7.205 MHz is in the guard margin, still 40 m: a jump by
    // distance. Out to a broadcast station at 7.250 (outside every band
    // and guard): a jump by band, held at once as out of band.
    f.handle_frequency(ms(10_000), 7_250_000);
    assert_eq!(
        drain(&mut f),
        vec![Action::Hold {
            hz: 7_250_000,
            reason: HoldReason::OutOfBand
        }]
    );
    // Back 5 kHz below where it was before (less than jump_hz, but from
    // outside the bands into one): a jump, and a move after the lead.
    f.handle_frequency(ms(20_000), 7_045_000);
    f.handle_timeout(ms(20_020));
    assert_eq!(gotos(&drain(&mut f)), vec![9_550]);
    assert_eq!(f.stats().jumps, 2);
}

#[test]
fn a_jump_while_the_rig_transmits_waits_for_receive() {
    let mut f = tuned();
    f.handle_transmit(ms(5_000), true);
    f.handle_frequency(ms(10_000), 7_150_000);
    f.handle_timeout(ms(10_500));
    let a = drain(&mut f);
    assert!(gotos(&a).is_empty(), "{a:?}");
    assert!(a.contains(&Action::Hold {
        hz: 7_150_000,
        reason: HoldReason::Transmitting
    }));
    // Receive: the move goes after the inhibit lead.
    f.handle_transmit(ms(11_000), false);
    let a = drain(&mut f);
    assert_eq!(a.first(), Some(&Action::Inhibit { on: true }), "{a:?}");
    assert!(gotos(&a).is_empty());
    f.handle_timeout(ms(11_020));
    assert_eq!(gotos(&drain(&mut f)), vec![8_500]);
}

#[test]
fn a_transmission_during_the_lead_of_a_jump_keeps_the_loop_inhibited() {
    let mut f = tuned();
    f.handle_frequency(ms(10_000), 7_150_000);
    f.handle_transmit(ms(10_010), true);
    f.handle_timeout(ms(10_100));
    let a = drain(&mut f);
    assert!(gotos(&a).is_empty(), "{a:?}");
    // The loop is wrong for 7.150: the inhibit stays on through the over.
    assert!(f.inhibit());
    assert!(!a.contains(&Action::Inhibit { on: false }), "{a:?}");
    f.handle_transmit(ms(12_000), false);
    assert_eq!(gotos(&drain(&mut f)), vec![8_500]);
}

#[test]
fn a_frequency_set_is_acted_on_at_once_even_close_by() {
    let mut f = tuned();
    // 3 kHz away and 100 ms after the last report: no jump by the rules,
    // but a set seen going to the rig says where the operator is going.
    f.handle_frequency(ms(10_000), 7_051_000);
    f.handle_frequency_set(ms(10_100), 7_053_000);
    f.handle_timeout(ms(10_120));
    assert_eq!(gotos(&drain(&mut f)), vec![9_470]);
    // A set inside the dead band of where the loop is moves nothing.
    f.handle_arrived(ms(10_300), 9_470);
    f.handle_timeout(ms(10_500));
    drain(&mut f);
    f.handle_frequency_set(ms(20_000), 7_053_500);
    let a = drain(&mut f);
    assert!(gotos(&a).is_empty(), "{a:?}");
    assert!(a.contains(&Action::Hold {
        hz: 7_053_500,
        reason: HoldReason::DeadBand
    }));
}

#[test]
fn without_jumps_in_the_policy_every_report_waits_for_the_debounce() {
    let mut p = policy();
    p.jump = None;
    let mut f = Follower::new(p, Arc::new(Line), Some(9_500));
    f.handle_frequency(ms(0), 7_050_000);
    f.handle_timeout(ms(300));
    drain(&mut f);
    f.handle_frequency(ms(10_000), 7_150_000);
    f.handle_timeout(ms(10_299));
    assert!(gotos(&drain(&mut f)).is_empty());
    f.handle_timeout(ms(10_300));
    f.handle_timeout(ms(10_300));
    assert_eq!(gotos(&drain(&mut f)), vec![8_500]);
    assert_eq!(f.stats().jumps, 0);
}

#[test]
fn a_jump_during_a_move_retargets_when_the_motor_rests() {
    let mut f = tuned();
    f.handle_frequency(ms(10_000), 7_150_000);
    f.handle_timeout(ms(10_020));
    assert_eq!(gotos(&drain(&mut f)), vec![8_500]);
    // Another recall before the motor has arrived: it waits for the rest,
    // then goes at once (the inhibit is still on, its lead long past).
    f.handle_frequency(ms(10_400), 7_020_000);
    assert!(gotos(&drain(&mut f)).is_empty());
    f.handle_arrived(ms(11_000), 8_500);
    assert_eq!(gotos(&drain(&mut f)), vec![9_800]);
}

/// [`tuned`] with sweeps settling after four of their report intervals.
fn tuned_settling_by_rate() -> Follower {
    tuned_with(Policy {
        sweep_settle: Some(4.0),
        ..policy()
    })
}

/// A knob turned from `from` Hz by `step` Hz every `every` ms, `n` steps,
/// starting at `t` ms; the time of its last report.
fn turn(f: &mut Follower, t: u64, from: u64, step: u64, every: u64, n: u64) -> u64 {
    let mut at = t;
    for i in 1..=n {
        f.handle_frequency(ms(at), from + i * step);
        f.handle_timeout(ms(at + every - 1));
        assert!(gotos(&drain(f)).is_empty(), "moved while turning");
        at += every;
    }
    at - every
}

#[test]
fn a_sweep_settles_after_four_of_its_own_intervals_not_the_whole_debounce() {
    let mut f = tuned_settling_by_rate();
    // 500 Hz every 50 ms to 7.060 MHz: settled 4 x 50 = 200 ms after the
    // last report, not the 300 ms debounce.
    let last = turn(&mut f, 10_000, 7_050_000, 500, 50, 20);
    f.handle_timeout(ms(last + 199));
    assert!(gotos(&drain(&mut f)).is_empty(), "settled too soon");
    f.handle_timeout(ms(last + 200));
    f.handle_timeout(ms(last + 220));
    // 10 000 - 60 000 / 100 steps.
    assert_eq!(gotos(&drain(&mut f)), vec![9_400]);
}

#[test]
fn a_slow_knob_or_a_single_report_still_waits_the_debounce() {
    let mut f = tuned_settling_by_rate();
    // 100 ms between reports: four intervals are longer than the debounce,
    // which wins.
    let last = turn(&mut f, 10_000, 7_050_000, 1_000, 100, 5);
    f.handle_timeout(ms(last + 299));
    assert!(
        gotos(&drain(&mut f)).is_empty(),
        "settled before the debounce"
    );
    f.handle_timeout(ms(last + 300));
    f.handle_timeout(ms(last + 320));
    assert_eq!(gotos(&drain(&mut f)), vec![9_450]);
    f.handle_arrived(ms(last + 400), 9_450);
    drain(&mut f);
    // A single 2 kHz report after a quiet spell (not a jump: under 10 kHz)
    // shows no interval: the whole debounce.
    f.handle_frequency(ms(20_000), 7_057_000);
    f.handle_timeout(ms(20_299));
    assert!(
        gotos(&drain(&mut f)).is_empty(),
        "settled before the debounce"
    );
    f.handle_timeout(ms(20_300));
    f.handle_timeout(ms(20_320));
    assert_eq!(gotos(&drain(&mut f)), vec![9_430]);
}

#[test]
fn a_pause_of_more_than_four_intervals_mid_sweep_costs_a_move() {
    // What the rule trades: the knob stops for 250 ms (five intervals,
    // under the debounce) and turns on; the pause settled, and the end
    // settles again.
    let mut f = tuned_settling_by_rate();
    let last = turn(&mut f, 10_000, 7_050_000, 500, 50, 10);
    f.handle_timeout(ms(last + 200));
    f.handle_timeout(ms(last + 220));
    assert_eq!(gotos(&drain(&mut f)), vec![9_450]);
    f.handle_arrived(ms(last + 240), 9_450);
    drain(&mut f);
    let last = turn(&mut f, last + 250, 7_055_000, 500, 50, 10);
    f.handle_timeout(ms(last + 200));
    f.handle_timeout(ms(last + 220));
    assert_eq!(gotos(&drain(&mut f)), vec![9_400]);
}

/// Another program's command going to the rig.
fn command(f: &mut Follower, t: u64, ev: StationEvent) {
    f.handle_station(ms(t), ev);
}

/// A set of VFO B seen going to the rig (the VFO not in use: nothing to
/// follow yet).
fn set_b(f: &mut Follower, t: u64, hz: u64) {
    command(
        f,
        t,
        StationEvent::Frequency {
            which: Which::Vfo(Vfo::B),
            hz,
            source: Source::CommandSeen,
        },
    );
}

fn split_cmd(f: &mut Follower, t: u64, on: bool) {
    command(
        f,
        t,
        StationEvent::Split {
            on,
            source: Source::CommandSeen,
        },
    );
}

#[test]
fn split_to_a_vfo_set_just_before_settles_after_the_grace_not_the_debounce() {
    let mut f = tuned();
    // A logging program sets VFO B 1.5 kHz up (under the 10 kHz a jump
    // needs, past the 1 kHz dead band) and turns split on 20 ms later:
    // where the rig will transmit is known, and no knob turned.
    set_b(&mut f, 10_000, 7_051_500);
    assert!(gotos(&drain(&mut f)).is_empty());
    split_cmd(&mut f, 10_020, true);
    f.handle_timeout(ms(10_020 + SET_GRACE.as_millis() as u64 - 1));
    assert!(gotos(&drain(&mut f)).is_empty(), "settled inside the grace");
    // After SET_GRACE, well before the band's 300 ms debounce.
    f.handle_timeout(ms(10_020 + SET_GRACE.as_millis() as u64));
    assert_eq!(gotos(&drain(&mut f)), vec![9_485]);
    assert_eq!(f.stats().jumps, 0);
}

/// Where the wired line holds CAT keying, a burst's split waits only the
/// program's gap between two commands at the port's speed
/// (`policy.burst_gap`, 50 ms here); where it does not, the whole
/// `SET_GRACE`, so that a keying right after it finds no move under way.
#[test]
fn a_programs_split_waits_its_burst_gap_where_the_line_holds_cat_keying() {
    for (holds, wait) in [(true, 50), (false, SET_GRACE.as_millis() as u64)] {
        let mut f = tuned_with(Policy {
            burst_gap: ms(50),
            line_holds_commands: holds,
            ..policy()
        });
        set_b(&mut f, 10_000, 7_051_500);
        split_cmd(&mut f, 10_020, true);
        f.handle_timeout(ms(10_020 + wait - 1));
        assert!(gotos(&drain(&mut f)).is_empty(), "holds {holds}: too soon");
        f.handle_timeout(ms(10_020 + wait));
        // 7.0515 MHz: 9 485 steps, by hand.
        assert_eq!(gotos(&drain(&mut f)), vec![9_485], "holds {holds}");
    }
}

#[test]
fn a_vfo_select_to_a_known_vfo_settles_after_the_grace() {
    let mut f = tuned();
    set_b(&mut f, 10_000, 7_052_000);
    drain(&mut f);
    // The program selects VFO B: the rig will work on 7.052 MHz.
    command(
        &mut f,
        20_000,
        StationEvent::ReceiveVfo {
            vfo: Vfo::B,
            source: Source::CommandSeen,
        },
    );
    f.handle_timeout(ms(20_099));
    assert!(gotos(&drain(&mut f)).is_empty());
    f.handle_timeout(ms(20_100));
    assert_eq!(gotos(&drain(&mut f)), vec![9_480]);
}

#[test]
fn split_off_then_a_band_change_on_the_rig_is_one_move_at_once() {
    let mut f = tuned();
    set_b(&mut f, 10_000, 7_051_500);
    split_cmd(&mut f, 10_020, true);
    f.handle_timeout(ms(10_120));
    assert_eq!(gotos(&drain(&mut f)), vec![9_485]);
    f.handle_arrived(ms(10_200), 9_485);
    f.handle_timeout(ms(10_400));
    drain(&mut f);
    // 20 s later the program turns split off (the loop would go back to
    // VFO A, 7.050) and 50 ms after it the rig reports a memory recall to
    // 7.150: a jump (the split command is no knob step that would make the
    // report part of a sweep), acted on at once, and the split off, still
    // in its grace, costs no move of its own.
    split_cmd(&mut f, 30_000, false);
    f.handle_timeout(ms(30_049));
    assert!(gotos(&drain(&mut f)).is_empty(), "moved for the split off");
    f.handle_frequency(ms(30_050), 7_150_000);
    f.handle_timeout(ms(30_050));
    assert_eq!(gotos(&drain(&mut f)), vec![8_500]);
    assert_eq!(f.stats().jumps, 1);
}
