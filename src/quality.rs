//! How well a follow policy keeps the loop tuned, measured: `tuneward
//! bench-follow`.
//!
//! A station's invented evenings ([`crate::scenario::random_evening`]) are
//! replayed through the follow core against the simulated tuner, and at
//! every moment the rig transmits the SWR is worked out from where the
//! capacitor really is ([`SimTuner::capacitor_at`], backlash included) and a
//! simulated loop:
//!
//! - **Resonance.** The calibration says which motor position resonates at
//!   which frequency; the simulated loop differs from it by a small smooth
//!   hidden error (a sine in motor position, a few steps in amplitude), as a
//!   real calibration does. The calibration is taken as measured with the
//!   configured approach, so the backlash offset of that approach is part of
//!   it; a capacitor that came to rest from the other side is off by the
//!   whole backlash.
//! - **Q and SWR.** The loop's unloaded Q at the resonance comes from its
//!   physics ([`crate::antenna::SmallLoop`], from `[antenna]`), and the SWR
//!   at the operator's frequency from the matched-resonator model
//!   ([`crate::antenna::swr_at`]).
//! - **The inhibit is wired.** While the core asserts the transmit inhibit
//!   the rig cannot transmit: an over keyed under it is held off, the rig
//!   stays in receive (so the core hears no transmission) and goes on the
//!   air when the inhibit is released, if the operator still holds the key
//!   (assumed: the rig honours a key held through the release; no source).
//!   Keyed time under the inhibit is reported as `inhibited_s` (held off)
//!   and does not count as radiated.
//! - **The wait.** For every retune followed by a call before the next
//!   retune, the wait is the time from the report of the new frequency to
//!   the inhibit being off (the loop tuned for it, or already in its
//!   window); jumps and sweeps apart. The **floor** of a jump is what the
//!   fewest-moves plan needs there at the motor's speed: the inhibit lead,
//!   each leg's travel ([`crate::tuner::travel_time`], the simulated
//!   mechanics' rule; they have no acceleration ramp) and settle, and the
//!   inhibit tail; 0 where the plan does not move (it may have tuned for
//!   the jump beforehand, knowing it would come, so it is compared as a
//!   distribution: p95 against p95). Per jump, the wait is compared with
//!   **the move's own time**: one move, timed the same way, straight from
//!   the previous frequency's position to the new one's.
//! - **Two scenario families**: [`random_evening`] (`classic`: dwells,
//!   sweeps, band changes) and [`spotting_evening`] (`spotting`: band-map
//!   clicks and memory recalls with calls right after them).
//!
//! Three policies are compared: the station's own (`follow`), a naive one
//! that moves on every report (no debounce, no dead band, the same core and
//! safety rules otherwise), and the offline optimum that knows the whole
//! evening in advance (the fewest repositionings keeping every dwell inside
//! the 1.5:1 window, [`crate::scenario::fewest_moves_plan`]; instantaneous,
//! so its SWR shares are 100 % by construction).
//!
//! [`SimTuner::capacitor_at`]: crate::tuner::sim::SimTuner::capacitor_at

use std::io::Write;
use std::path::Path;
use std::time::Duration;

use serde::Serialize;

use crate::antenna::{swr_at, SmallLoop};
use crate::calibrate::StepMap;
use crate::config::{Approach, Config};
use crate::follow::{Placement, Policy};
use crate::replay::{Chunk, Replay};
use crate::rig::Direction;
use crate::rig::StationMessage;
use crate::scenario::{
    fewest_moves_groups, programs_evening, random_evening, split_evening, spotting_evening,
    Happening, Retune, RetuneKind, RigTruth, Scenario,
};
use crate::station::{DialectWire, Station, StationError};

/// The station `bench-follow` measures unless given another, compiled in.
pub const QUALITY_CONFIG: &str = include_str!("../fixtures/quality/station.toml");

/// Time step for integrating SWR over transmit time.
const STEP: Duration = Duration::from_millis(50);

/// A scenario generator.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Family {
    /// [`random_evening`]: dwells, knob sweeps, band changes, broadcast visits.
    Classic,
    /// [`spotting_evening`]: band-map clicks and memory recalls with calls.
    Spotting,
    /// [`split_evening`]: split set by another program, VFO swaps.
    Split,
    /// [`programs_evening`]: frequency sets and CAT-keyed overs from other
    /// programs, data-mode cycles.
    Programs,
}

impl Family {
    pub fn name(self) -> &'static str {
        match self {
            Family::Classic => "classic",
            Family::Spotting => "spotting",
            Family::Split => "split",
            Family::Programs => "programs",
        }
    }

    /// The family named `name`.
    pub fn from_name(name: &str) -> Option<Family> {
        Family::ALL.into_iter().find(|f| f.name() == name)
    }

    /// Every family, in the order bench-follow runs them.
    pub const ALL: [Family; 4] = [
        Family::Classic,
        Family::Spotting,
        Family::Split,
        Family::Programs,
    ];

    pub fn evening(self, seed: u64, hours: f64, bands: &[(u64, u64)]) -> Scenario {
        match self {
            Family::Classic => random_evening(seed, hours, bands),
            Family::Spotting => spotting_evening(seed, hours, bands),
            Family::Split => split_evening(seed, hours, bands),
            Family::Programs => programs_evening(seed, hours, bands),
        }
    }
}

/// The seeds the policy's settings were chosen on (1 to 5 of each
/// family). Seeds from [`JUDGING_SEEDS`] on are for judging only: nothing
/// is tuned on them (`bench-follow --first-seed 101`).
pub const JUDGING_SEEDS: u64 = 101;

/// What to measure.
#[derive(Debug, Clone, PartialEq)]
pub struct BenchOptions {
    /// The scenario families, each run on every seed.
    pub families: Vec<Family>,
    /// One invented evening per seed.
    pub seeds: Vec<u64>,
    /// Length of each evening.
    pub hours: f64,
    /// Amplitude of the hidden calibration error, in motor steps.
    pub error_steps: f64,
    /// Its period along the travel, in motor steps.
    pub error_period_steps: f64,
}

impl Default for BenchOptions {
    fn default() -> Self {
        BenchOptions {
            // Issue 15's families; `--family` adds issue 10's (split,
            // programs), whose CAT-keyed calls are held off by design.
            families: vec![Family::Classic, Family::Spotting],
            seeds: (1..=5).collect(),
            hours: 4.0,
            error_steps: 3.0,
            error_period_steps: 20_000.0,
        }
    }
}

/// One policy's result over all evenings.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Row {
    pub policy: &'static str,
    /// Repositionings.
    pub moves: u64,
    /// Motor travel in steps, backlash overshoots included.
    pub travel_steps: u64,
    /// Time the operator keyed the rig.
    pub transmit_s: f64,
    /// Of that, time the inhibit held the rig off the air.
    pub inhibited_s: f64,
    /// Share of the time on the air at SWR ≤ 1.5, in percent.
    pub swr_1_5_pct: f64,
    /// Share of the time on the air at SWR ≤ 2, in percent.
    pub swr_2_pct: f64,
    /// Time on the air above SWR 1.5, in seconds.
    pub over_1_5_s: f64,
    /// Highest SWR seen on the air (`null` in JSON when unbounded).
    pub worst_swr: f64,
    /// Jumps followed by a call, and the wait after them, in seconds
    /// (p50, p95, max; the floor for the optimum).
    pub jump_calls: usize,
    pub jump_wait_p50_s: f64,
    pub jump_wait_p95_s: f64,
    pub jump_wait_max_s: f64,
    /// The 95th percentile of each jump's wait less its floor (the
    /// fewest-moves plan's wait there, which knows what comes next).
    pub jump_excess_p95_s: f64,
    /// The 95th percentile of each jump's wait less one move's time
    /// straight from the previous frequency to the new one (0 for the
    /// optimum's row).
    pub jump_over_travel_p95_s: f64,
    /// Sweeps followed by a call, and the wait after them.
    pub sweep_calls: usize,
    pub sweep_wait_p50_s: f64,
    pub sweep_wait_p95_s: f64,
    pub sweep_wait_max_s: f64,
    /// Starts of a leg while the rig was on the air, or with the inhibit
    /// off, or outside the limits (the replay's own count; always 0).
    pub violations: u64,
    /// Time the capacitor was moving while the rig was on the air (keyed
    /// and not held off by the inhibit, by the operator or by another
    /// program's command), in s (the bench's own count from the simulated
    /// motor; always 0).
    pub moved_keyed_s: f64,
}

/// A dwell where the station's policy left the loop above 1.5:1 while the
/// rig was on the air: when the operator arrived, where, for how long on
/// the air above 1.5:1, the worst SWR, and why (the core's last hold from
/// the dwell's arrival on, else "at rest outside the window").
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ShortDwell {
    pub family: &'static str,
    pub seed: u64,
    /// When the operator arrived on the frequency, s from the evening's start.
    pub at_s: f64,
    pub hz: u64,
    /// Time on the air above 1.5:1 in this dwell, in s.
    pub over_1_5_s: f64,
    pub worst_swr: f64,
    pub why: String,
}

/// A jump followed by a call where `follow` kept the operator waiting more
/// than 50 ms over the jump's floor: where and when, the waits (`follow`'s,
/// the floor, the naive policy's on the same jump), what the core did in
/// between (when it first settled on a frequency, how many moves it
/// started, its holds in order) and what the operator had done just
/// before (the previous report, how far and how long before).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SlowJump {
    pub family: &'static str,
    pub seed: u64,
    /// When the report of the new frequency came, s from the evening's start.
    pub at_s: f64,
    pub hz: u64,
    pub wait_s: f64,
    /// The fewest-moves plan's wait there.
    pub floor_s: f64,
    /// One move's time straight from the previous frequency to this one.
    pub travel_s: f64,
    pub naive_wait_s: f64,
    /// From the report to the core's first settle on any frequency, in s
    /// (`null` when it never settled within the wait).
    pub settled_after_s: Option<f64>,
    /// Moves the core started within the wait.
    pub moves: usize,
    /// The core's holds within the wait, in order, repeats left out.
    pub holds: Vec<&'static str>,
    /// The previous frequency reported and how long before, in s.
    pub previous_hz: Option<u64>,
    pub previous_gap_s: Option<f64>,
}

impl SlowJump {
    /// The wait beyond the move's own time.
    pub fn excess_s(&self) -> f64 {
        self.wait_s - self.travel_s
    }
}

/// One jump's details from one policy's run.
#[derive(Debug, Clone, Default)]
struct JumpDetail {
    at: Duration,
    hz: u64,
    settled_after_s: Option<f64>,
    moves: usize,
    holds: Vec<&'static str>,
    previous: Option<(u64, f64)>,
}

/// One family's rows.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FamilyReport {
    pub family: &'static str,
    pub dwells: usize,
    pub rows: Vec<Row>,
}

/// What `bench-follow` reports.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BenchReport {
    pub station: String,
    pub evenings: usize,
    pub hours: f64,
    pub error_steps: f64,
    /// Places the operator stayed, over all evenings.
    pub dwells: usize,
    /// All families together.
    pub rows: Vec<Row>,
    /// Each family on its own.
    pub families: Vec<FamilyReport>,
    /// Every dwell where the station's policy (`follow`) fell short of
    /// 1.5:1 on the air, in the order met.
    pub short_dwells: Vec<ShortDwell>,
    /// Every jump followed by a call where `follow` waited more than 50 ms
    /// over the floor, in the order met.
    pub slow_jumps: Vec<SlowJump>,
}

fn find_row<'a>(rows: &'a [Row], policy: &str) -> Option<&'a Row> {
    rows.iter().find(|r| r.policy == policy)
}

/// All the time on the air at SWR ≤ 1.5, with at most 1.3 times the
/// optimum's moves, judged on `rows`.
fn swr_target_met(rows: &[Row]) -> bool {
    match (find_row(rows, "follow"), find_row(rows, "optimum")) {
        (Some(f), Some(o)) => {
            f.over_1_5_s == 0.0
                && f.moves as f64 <= 1.3 * o.moves as f64
                && f.violations == 0
                && f.moved_keyed_s == 0.0
        }
        _ => false,
    }
}

/// The wait targets, judged on `rows`: held off at most 1.1 times the
/// naive policy; the 95th percentile of the wait after a jump within 50 ms
/// of the floor's (the fewest-moves plan's waits, the optimum's row); and
/// per jump, the 95th percentile of the wait beyond the move's own time
/// (straight from the previous frequency) within 50 ms.
fn waits_target_met(rows: &[Row]) -> bool {
    match (
        find_row(rows, "follow"),
        find_row(rows, "naive"),
        find_row(rows, "optimum"),
    ) {
        (Some(f), Some(n), Some(o)) => {
            f.inhibited_s <= 1.1 * n.inhibited_s
                && f.jump_wait_p95_s <= o.jump_wait_p95_s + 0.050
                && f.jump_over_travel_p95_s <= 0.050
        }
        _ => false,
    }
}

impl FamilyReport {
    /// The SWR and moves target on this family alone.
    pub fn target_met(&self) -> bool {
        swr_target_met(&self.rows)
    }

    /// The wait targets on this family alone.
    pub fn wait_target_met(&self) -> bool {
        waits_target_met(&self.rows)
    }
}

impl BenchReport {
    pub fn row(&self, policy: &str) -> Option<&Row> {
        find_row(&self.rows, policy)
    }

    /// The target: all the time on the air at SWR ≤ 1.5, with at most 1.3
    /// times the optimum's moves (all families together).
    pub fn target_met(&self) -> bool {
        swr_target_met(&self.rows)
    }

    /// The wait targets: held off at most 1.1 times the naive policy, and
    /// the 95th percentile of a jump's wait within 50 ms of its floor (all
    /// families together).
    pub fn wait_target_met(&self) -> bool {
        waits_target_met(&self.rows)
    }

    /// Whether every target holds on every family separately, as well as
    /// together: no target may be met on one family alone.
    pub fn every_family_met(&self) -> bool {
        self.target_met()
            && self.wait_target_met()
            && self
                .families
                .iter()
                .all(|f| f.target_met() && f.wait_target_met())
    }
}

/// The simulated loop: the calibration plus a hidden error, the loop's Q
/// from its physics.
pub struct SimLoop<'a> {
    map: &'a dyn StepMap,
    physics: SmallLoop,
    /// Steps from capacitor to calibrated motor position at rest after the
    /// configured approach (+B/2 approaching up, −B/2 approaching down).
    approach_offset: f64,
    error_steps: f64,
    error_period_steps: f64,
}

impl<'a> SimLoop<'a> {
    pub fn new(
        map: &'a dyn StepMap,
        physics: SmallLoop,
        policy: &Policy,
        error_steps: f64,
        error_period_steps: f64,
    ) -> Self {
        let half = policy.backlash_steps as f64 / 2.0;
        SimLoop {
            map,
            physics,
            approach_offset: match policy.approach {
                Approach::Up => half,
                Approach::Down => -half,
            },
            error_steps,
            error_period_steps,
        }
    }

    /// The hidden error at capacitor position `c`, in steps.
    pub fn hidden_error(&self, c: f64) -> f64 {
        if self.error_period_steps <= 0.0 {
            return 0.0;
        }
        self.error_steps * (std::f64::consts::TAU * c / self.error_period_steps).sin()
    }

    /// Where the capacitor at `c` resonates, found by Newton's method on the
    /// calibration from `guess_hz`; `None` if it does not converge.
    pub fn resonance_hz(&self, c: f64, guess_hz: f64) -> Option<f64> {
        let target = c + self.approach_offset + self.hidden_error(c);
        let mut f = guess_hz;
        for _ in 0..50 {
            let g = self.map.steps_at(f) - target;
            let h = (f * 1e-6).max(1.0);
            let slope = (self.map.steps_at(f + h) - self.map.steps_at(f - h)) / (2.0 * h);
            if !(g.is_finite() && slope.is_finite()) || slope == 0.0 {
                return None;
            }
            // A step of at most a tenth of the frequency keeps far guesses
            // from leaving the model's domain.
            let step = (g / slope).clamp(-0.1 * f, 0.1 * f);
            f -= step;
            if !(f.is_finite() && f > 0.0) {
                return None;
            }
            if step.abs() < 1e-3 {
                return Some(f);
            }
        }
        None
    }

    /// SWR at `hz` with the capacitor at `c`.
    pub fn swr(&self, hz: f64, c: f64) -> f64 {
        match self.resonance_hz(c, hz) {
            Some(f0) => swr_at(hz, f0, self.physics.at(f0).q_unloaded),
            None => f64::INFINITY,
        }
    }
}

/// The naive policy: the station's, without debounce or dead band.
pub fn naive(policy: &Policy) -> Policy {
    let mut p = policy.clone();
    p.debounce = Duration::ZERO;
    // With no debounce there is nothing for a jump to skip.
    p.jump = None;
    p.sweep_settle = None;
    p.min_move_steps = 1;
    for b in &mut p.bands {
        b.debounce = Duration::ZERO;
        b.hysteresis_hz = 0;
    }
    p
}

#[derive(Default)]
struct Tally {
    moves: u64,
    travel: u64,
    transmit: f64,
    inhibited: f64,
    radiated: f64,
    ok_1_5: f64,
    ok_2: f64,
    worst: f64,
    jump_waits: Vec<f64>,
    jump_excess: Vec<f64>,
    /// Each jump's wait less its `Floors::travel`.
    jump_over_travel: Vec<f64>,
    sweep_waits: Vec<f64>,
    violations: u64,
    moved_keyed: f64,
    short: Vec<ShortDwell>,
    jump_detail: Vec<JumpDetail>,
}

/// The nearest-rank percentile `p` (0 to 1) of `xs`; 0 for none.
fn percentile(xs: &[f64], p: f64) -> f64 {
    let mut v: Vec<f64> = xs.to_vec();
    v.sort_by(f64::total_cmp);
    let rank = ((p * v.len() as f64).ceil() as usize).clamp(1, v.len().max(1));
    v.get(rank - 1).copied().unwrap_or(0.0)
}

impl Tally {
    fn row(&self, policy: &'static str) -> Row {
        let pct = |x: f64| {
            if self.radiated > 0.0 {
                // x is a part of the radiated time; rounding may not know.
                (100.0 * x / self.radiated).min(100.0)
            } else {
                100.0
            }
        };
        Row {
            policy,
            moves: self.moves,
            travel_steps: self.travel,
            transmit_s: self.transmit,
            inhibited_s: self.inhibited,
            swr_1_5_pct: pct(self.ok_1_5),
            swr_2_pct: pct(self.ok_2),
            over_1_5_s: self.radiated - self.ok_1_5,
            worst_swr: self.worst,
            jump_calls: self.jump_waits.len(),
            jump_wait_p50_s: percentile(&self.jump_waits, 0.5),
            jump_wait_p95_s: percentile(&self.jump_waits, 0.95),
            jump_wait_max_s: percentile(&self.jump_waits, 1.0),
            jump_excess_p95_s: percentile(&self.jump_excess, 0.95),
            jump_over_travel_p95_s: percentile(&self.jump_over_travel, 0.95),
            sweep_calls: self.sweep_waits.len(),
            sweep_wait_p50_s: percentile(&self.sweep_waits, 0.5),
            sweep_wait_p95_s: percentile(&self.sweep_waits, 0.95),
            sweep_wait_max_s: percentile(&self.sweep_waits, 1.0),
            violations: self.violations,
            moved_keyed_s: self.moved_keyed,
        }
    }

    fn add(&mut self, o: &Tally) {
        self.moves += o.moves;
        self.travel += o.travel;
        self.transmit += o.transmit;
        self.inhibited += o.inhibited;
        self.radiated += o.radiated;
        self.ok_1_5 += o.ok_1_5;
        self.ok_2 += o.ok_2;
        self.worst = self.worst.max(o.worst);
        self.jump_waits.extend(&o.jump_waits);
        self.jump_excess.extend(&o.jump_excess);
        self.jump_over_travel.extend(&o.jump_over_travel);
        self.sweep_waits.extend(&o.sweep_waits);
        self.violations += o.violations;
        self.moved_keyed += o.moved_keyed;
        self.short.extend(o.short.iter().cloned());
    }
}

/// Where every evening starts: two backlash widths below the first
/// frequency's position, so the first move (counted, as the optimum counts
/// its first tuning) arrives from the approach side.
fn start_steps(station: &Station, policy: &Policy, sc: &Scenario) -> i64 {
    let first = sc
        .steps
        .iter()
        .find_map(|(_, h)| match h {
            Happening::Report { hz } => Some(*hz),
            _ => None,
        })
        .unwrap_or(7_000_000);
    let at = station.map.steps_at(first as f64).round() as i64;
    let off = 2 * policy.backlash_steps;
    policy.clamp(match policy.approach {
        Approach::Up => at - off,
        Approach::Down => at + off,
    })
}

/// The retunes of `sc` followed by a call before the next retune.
fn retunes_with_calls(sc: &Scenario) -> Vec<Retune> {
    sc.retunes
        .iter()
        .enumerate()
        .filter(|(i, r)| {
            let next = sc.retunes.get(i + 1).map_or(sc.end, |n| n.at);
            sc.transmit.iter().any(|(on, _)| *on >= r.at && *on < next)
        })
        .map(|(_, r)| *r)
        .collect()
}

/// Records when the inhibit went on and off, the core's holds, and when
/// it settled and started moves (for the slow jumps' details).
struct InhibitLog(
    Vec<(Duration, bool)>,
    Vec<(Duration, &'static str)>,
    Vec<Duration>,
    Vec<Duration>,
);

impl crate::timeline::Timeline for InhibitLog {
    fn entry(&mut self, t: Duration, entry: &crate::timeline::Entry) -> std::io::Result<()> {
        match entry {
            crate::timeline::Entry::Inhibit { on } => self.0.push((t, *on)),
            crate::timeline::Entry::Hold { reason, .. } => self.1.push((t, reason)),
            crate::timeline::Entry::Settle { .. } => self.2.push(t),
            crate::timeline::Entry::Move { .. } => self.3.push(t),
            _ => {}
        }
        Ok(())
    }
}

impl InhibitLog {
    /// What the core did from `at` for `wait`.
    fn detail(&self, at: Duration, wait: Duration) -> (Option<f64>, usize, Vec<&'static str>) {
        let end = at + wait;
        let settled = self
            .2
            .iter()
            .find(|t| **t >= at && **t <= end)
            .map(|t| (*t - at).as_secs_f64());
        let moves = self.3.iter().filter(|t| **t >= at && **t <= end).count();
        let mut holds: Vec<&'static str> = Vec::new();
        for (_, r) in self.1.iter().filter(|(t, _)| *t >= at && *t <= end) {
            if holds.last() != Some(r) {
                holds.push(r);
            }
        }
        (settled, moves, holds)
    }

    /// The core's last hold at or after `since`, if any.
    fn hold_since(&self, since: Duration) -> Option<&'static str> {
        self.1
            .iter()
            .rev()
            .find(|(t, _)| *t >= since)
            .map(|(_, r)| *r)
    }

    /// How long after `at` the inhibit was first off (counting what
    /// happened at `at` itself); to `end` if it never was.
    fn wait_from(&self, at: Duration, end: Duration) -> Duration {
        let on_at = self
            .0
            .iter()
            .take_while(|(t, _)| *t <= at)
            .last()
            .is_some_and(|(_, on)| *on);
        if !on_at {
            return Duration::ZERO;
        }
        self.0
            .iter()
            .find(|(t, on)| *t > at && !on)
            .map_or(end, |(t, _)| *t)
            .saturating_sub(at)
    }
}

/// One evening through one policy.
fn run_policy(
    station: &Station,
    policy: &Policy,
    sc: &Scenario,
    chunks: &[(Duration, Direction, Vec<u8>)],
    sim_loop: &SimLoop<'_>,
    tally: &mut Tally,
) -> std::io::Result<()> {
    let mut setup = station.replay_setup(Some(start_steps(station, policy, sc)));
    setup.policy = policy.clone();
    // The bench counts the inhibit as wired (transmit time under it is
    // reported apart), so a move may go ahead under it while the rig's
    // transmit state is unknown, as at a station with its line wired.
    setup.policy.while_unknown = crate::follow::WhileUnknown::MoveUnderInhibit;
    // And it holds the rig itself off, also against a CAT-keyed
    // transmission (`[inhibit] holds_cat_keying = true`): the model above.
    setup.policy.line_holds_commands = true;
    let mut log = InhibitLog(Vec::new(), Vec::new(), Vec::new(), Vec::new());
    // A polled-only family's reads go to the rig just before each answer.
    let asks = DialectWire {
        dialect: &station.dialect,
        address: station.config.rig.address.unwrap_or(0x94),
    };
    let request = |what: &Happening| crate::scenario::Wire::request(&asks, what);
    // Where the rig transmits (the scenario's truth), scored there.
    let mut truth = RigTruth::new(0);
    let mut hz = 0u64;
    // When the operator arrived on `hz`.
    let mut dwell_at = Duration::ZERO;
    let mut short: Vec<ShortDwell> = Vec::new();
    let mut replay = Replay::new(setup, &mut log);
    // The operator holds the key.
    let mut keyed = false;
    // Keyed under the inhibit: the rig is held off in receive; its
    // transmit report, kept here, goes out when the inhibit is released
    // (`None` inside: keyed by a command the core has already seen).
    let mut held: Option<Option<(&Happening, &[u8])>> = None;
    // The capacitor moved while the rig was on the air (keyed and not held
    // off by the inhibit, whoever keyed it), in s.
    let mut moved_keyed = 0.0;
    let mut prev = Duration::ZERO;
    // The last SWR worked out, by capacitor position and frequency.
    let mut cache: Option<(f64, u64, f64)> = None;
    for ((t, what), (_, dir, bytes)) in sc.steps.iter().zip(chunks) {
        if keyed {
            let mut ts = prev;
            while ts < *t {
                replay.advance(ts)?;
                if let Some(kept) = held {
                    if !replay.core().inhibit() {
                        // Released: the rig goes on the air now.
                        held = None;
                    }
                    if let (None, Some((what, report))) = (held, kept) {
                        let asked = request(what);
                        if !asked.is_empty() {
                            replay.feed(Chunk {
                                t: ts,
                                dir: Direction::Tx,
                                bytes: &asked,
                            })?;
                        }
                        replay.feed(Chunk {
                            t: ts,
                            dir: *dir,
                            bytes: report,
                        })?;
                    }
                }
                // Held off, the release is looked for every millisecond.
                let step = if held.is_some() {
                    Duration::from_millis(1)
                } else {
                    STEP
                };
                let te = (ts + step).min(*t);
                let dur = (te - ts).as_secs_f64();
                // The motor's plan over the step: moving on the air.
                if held.is_none()
                    && replay.tuner().capacitor_at(ts) != replay.tuner().capacitor_at(te)
                {
                    moved_keyed += dur;
                }
                tally.transmit += dur;
                if held.is_some() {
                    tally.inhibited += dur;
                } else {
                    let c = replay.tuner().capacitor_at(ts);
                    let swr = match cache {
                        Some((cc, ch, s)) if cc == c && ch == hz => s,
                        _ => {
                            let s = sim_loop.swr(hz as f64, c);
                            cache = Some((c, hz, s));
                            s
                        }
                    };
                    tally.radiated += dur;
                    if swr <= 1.5 {
                        tally.ok_1_5 += dur;
                    } else {
                        let at_s = dwell_at.as_secs_f64();
                        match short.last_mut() {
                            Some(d) if d.at_s == at_s && d.hz == hz => {
                                d.over_1_5_s += dur;
                                d.worst_swr = d.worst_swr.max(swr);
                            }
                            _ => short.push(ShortDwell {
                                family: "",
                                seed: 0,
                                at_s,
                                hz,
                                over_1_5_s: dur,
                                worst_swr: swr,
                                why: String::new(),
                            }),
                        }
                    }
                    if swr <= 2.0 {
                        tally.ok_2 += dur;
                    }
                    tally.worst = tally.worst.max(swr);
                }
                ts = te;
            }
        }
        let mut feed = true;
        truth.apply(what);
        if truth.transmit_hz() != hz {
            dwell_at = *t;
            hz = truth.transmit_hz();
        }
        match what {
            Happening::Report { .. } => {}
            Happening::Station(StationMessage::Transmit { on: true }) => {
                // Keyed by another program: the core sees the command at
                // once (fed below); the rig is held off under the inhibit.
                keyed = true;
                replay.advance(*t)?;
                if replay.core().inhibit() {
                    held = Some(None);
                }
            }
            Happening::Station(StationMessage::Transmit { on: false }) => {
                keyed = false;
                held = None;
            }
            Happening::Station(_) => {}
            Happening::Transmit { on: true } => {
                keyed = true;
                replay.advance(*t)?;
                if replay.core().inhibit() {
                    held = Some(Some((what, bytes)));
                    feed = false;
                }
            }
            Happening::Transmit { on: false } => {
                keyed = false;
                // Held off to the end: the rig never went on the air.
                feed = held.take().is_none();
            }
            Happening::Noise { .. } => {}
        }
        if feed {
            let asked = request(what);
            if !asked.is_empty() {
                replay.feed(Chunk {
                    t: *t,
                    dir: Direction::Tx,
                    bytes: &asked,
                })?;
            }
            replay.feed(Chunk {
                t: *t,
                dir: *dir,
                bytes,
            })?;
        }
        prev = *t;
    }
    let summary = replay.finish()?;
    // Why each fell short: a hold of the core during the dwell, else the
    // loop was left where it was (the dead band or the calibration's error
    // kept it outside the window).
    for d in &mut short {
        let since = Duration::from_secs_f64(d.at_s);
        d.why = match log.hold_since(since) {
            Some(reason) => format!("held ({reason})"),
            None => "at rest outside the 1.5:1 window (dead band or calibration error)".to_string(),
        };
    }
    tally.short.extend(short);
    tally.moved_keyed += moved_keyed;
    tally.moves += summary.moves;
    tally.travel += summary.steps;
    tally.violations += summary.violations;
    for r in retunes_with_calls(sc) {
        let waited = log.wait_from(r.at, sc.end);
        let wait = waited.as_secs_f64();
        match r.kind {
            RetuneKind::Jump => {
                tally.jump_waits.push(wait);
                let (settled_after_s, moves, holds) = log.detail(r.at, waited);
                let previous = sc
                    .steps
                    .iter()
                    .take_while(|(t, _)| *t < r.at)
                    .filter_map(|(t, h)| match h {
                        Happening::Report { hz } if *hz != r.hz => Some((*hz, *t)),
                        _ => None,
                    })
                    .last()
                    .map(|(hz, t)| (hz, (r.at - t).as_secs_f64()));
                tally.jump_detail.push(JumpDetail {
                    at: r.at,
                    hz: r.hz,
                    settled_after_s,
                    moves,
                    holds,
                    previous,
                });
            }
            RetuneKind::Sweep => tally.sweep_waits.push(wait),
        }
    }
    Ok(())
}

/// A jump's two floors, in s: the fewest-moves plan's wait there
/// (`plan`), and the wait of one move straight from the previous
/// frequency's position to the new one's (`travel`): lead, legs and
/// settle, tail; 0 where both are the same position.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Floors {
    plan: f64,
    travel: f64,
}

/// The optimum's moves and travel for one evening, and the floors of each
/// jump followed by a call, in the order of [`retunes_with_calls`].
fn optimum(
    station: &Station,
    physics: &SmallLoop,
    sc: &Scenario,
    tally: &mut Tally,
) -> Vec<Floors> {
    let policy = &station.policy;
    let groups = fewest_moves_groups(&sc.dwells, |hz| match policy.place(hz) {
        Placement::Outside => None,
        Placement::Inside { .. } | Placement::Guard { .. } => {
            Some(physics.at(hz as f64).bandwidth_1_5_hz)
        }
    });
    let mech = station.sim_params();
    let settle = Duration::from_millis(mech.settle_ms);
    let leg = |from: i64, to: i64| {
        crate::tuner::travel_time(from.abs_diff(to), mech.steps_per_second, Duration::MAX) + settle
    };
    let move_time = |from: i64, to: i64| {
        let legs = policy.legs(from, to);
        let mut time = policy.inhibit_lead + leg(from, legs.first) + policy.inhibit_tail;
        if let Some(then) = legs.then {
            time += leg(legs.first, then);
        }
        (legs, time)
    };
    let start = start_steps(station, policy, sc);
    let mut at = start;
    // The time each repositioning of the plan takes, by its first dwell.
    let mut floor_at: Vec<(Duration, f64)> = Vec::new();
    for (lo, hi, first) in groups {
        let to = policy.clamp(station.map.steps_at((lo + hi) / 2.0).round() as i64);
        let (legs, time) = move_time(at, to);
        tally.travel += legs.distance(at);
        tally.moves += 1;
        if let Some(d) = sc.dwells.get(first) {
            floor_at.push((d.from, time.as_secs_f64()));
        }
        at = to;
    }
    for (on, off) in &sc.transmit {
        let d = off.saturating_sub(*on).as_secs_f64();
        tally.transmit += d;
        tally.radiated += d;
        tally.ok_1_5 += d;
        tally.ok_2 += d;
    }
    tally.worst = tally.worst.max(1.5);
    let followed = |hz: u64| !matches!(policy.place(hz), Placement::Outside);
    let position = |hz: u64| policy.clamp(station.map.steps_at(hz as f64).round() as i64);
    let mut floors = Vec::new();
    for r in retunes_with_calls(sc) {
        let floor = floor_at
            .iter()
            .find(|(from, _)| *from == r.at)
            .map_or(0.0, |(_, f)| *f);
        match r.kind {
            RetuneKind::Jump => {
                // The dwell the jump starts, and the last followed one
                // before it (the start position when there is none).
                let new = sc.dwells.iter().position(|d| d.from >= r.at);
                let travel = new
                    .and_then(|n| {
                        let to = sc.dwells.get(n).filter(|d| followed(d.hz))?;
                        let from = sc
                            .dwells
                            .get(..n)?
                            .iter()
                            .rev()
                            .find(|d| followed(d.hz))
                            .map_or(start, |d| position(d.hz));
                        let to = position(to.hz);
                        Some(if from == to {
                            0.0
                        } else {
                            move_time(from, to).1.as_secs_f64()
                        })
                    })
                    .unwrap_or(0.0);
                floors.push(Floors {
                    plan: floor,
                    travel,
                });
                tally.jump_waits.push(floor);
                tally.jump_excess.push(0.0);
                tally.jump_over_travel.push(0.0);
            }
            RetuneKind::Sweep => tally.sweep_waits.push(floor),
        }
    }
    floors
}

/// What the simulated loop really is, when it is not the station's own
/// calibration plus the hidden error: where the loop resonates (the motor
/// position at rest after the approach, for each frequency) and its
/// physics (its Q).
pub struct Truth<'a> {
    pub map: &'a dyn StepMap,
    pub physics: SmallLoop,
}

/// Measures the station's policy, the naive one and the optimum.
pub fn bench_follow(
    station: &Station,
    name: &str,
    options: &BenchOptions,
) -> Result<BenchReport, StationError> {
    let physics = SmallLoop::from_config(&station.config.antenna).ok_or_else(|| {
        crate::config::ConfigError::Invalid(crate::error::Located::new(
            crate::error::Place::key(station.config.path_for_errors(), "antenna"),
            "loop_diameter_m and conductor_diameter_m describing the loop (bench-follow needs its Q)",
            "no loop described",
        ))
    })?;
    let truth = Truth {
        map: station.map.as_ref(),
        physics,
    };
    bench_follow_against(station, name, options, &truth)
}

/// [`bench_follow`] against a loop that is `truth` (plus the options'
/// hidden error), not the station's calibration: a calibration measured on
/// the loop (by a sweep, say) judged on the loop itself.
pub fn bench_follow_against(
    station: &Station,
    name: &str,
    options: &BenchOptions,
    truth: &Truth<'_>,
) -> Result<BenchReport, StationError> {
    let physics = truth.physics;
    let bands = station.policy.band_ranges();
    let wire = DialectWire {
        dialect: &station.dialect,
        address: station.config.rig.address.unwrap_or(0x94),
    };
    let ours = station.policy.clone();
    let plain = naive(&ours);
    let sim_loop = SimLoop::new(
        truth.map,
        physics,
        &ours,
        options.error_steps,
        options.error_period_steps,
    );
    let mut all = [Tally::default(), Tally::default(), Tally::default()];
    let mut dwells = 0;
    let mut families = Vec::new();
    let mut slow_jumps = Vec::new();
    for &family in &options.families {
        let mut t = [Tally::default(), Tally::default(), Tally::default()];
        let mut family_dwells = 0;
        for &seed in &options.seeds {
            let sc = family.evening(seed, options.hours, &bands);
            family_dwells += sc.dwells.len();
            let chunks = sc.answers(&wire);
            let floors = optimum(station, &physics, &sc, &mut t[2]);
            let mut ours_jumps: Vec<(JumpDetail, f64)> = Vec::new();
            for (i, policy) in [&ours, &plain].into_iter().enumerate() {
                let mut one = Tally::default();
                run_policy(station, policy, &sc, &chunks, &sim_loop, &mut one)?;
                let details = std::mem::take(&mut one.jump_detail);
                if i == 0 {
                    ours_jumps = details.into_iter().zip(one.jump_waits.clone()).collect();
                } else {
                    for (((d, wait), floor), naive_wait) in
                        ours_jumps.iter().zip(&floors).zip(&one.jump_waits)
                    {
                        if wait - floor.travel > 0.050 {
                            slow_jumps.push(SlowJump {
                                family: family.name(),
                                seed,
                                at_s: d.at.as_secs_f64(),
                                hz: d.hz,
                                wait_s: *wait,
                                floor_s: floor.plan,
                                travel_s: floor.travel,
                                naive_wait_s: *naive_wait,
                                settled_after_s: d.settled_after_s,
                                moves: d.moves,
                                holds: d.holds.clone(),
                                previous_hz: d.previous.map(|p| p.0),
                                previous_gap_s: d.previous.map(|p| p.1),
                            });
                        }
                    }
                }
                if i == 0 {
                    for d in &mut one.short {
                        d.family = family.name();
                        d.seed = seed;
                    }
                } else {
                    one.short.clear();
                }
                one.jump_excess = one
                    .jump_waits
                    .iter()
                    .zip(&floors)
                    .map(|(w, f)| w - f.plan)
                    .collect();
                one.jump_over_travel = one
                    .jump_waits
                    .iter()
                    .zip(&floors)
                    .map(|(w, f)| w - f.travel)
                    .collect();
                if let Some(slot) = t.get_mut(i) {
                    slot.add(&one);
                }
            }
        }
        for (a, b) in all.iter_mut().zip(&t) {
            a.add(b);
        }
        dwells += family_dwells;
        families.push(FamilyReport {
            family: family.name(),
            dwells: family_dwells,
            rows: rows(&t),
        });
    }
    Ok(BenchReport {
        station: name.to_string(),
        evenings: options.seeds.len(),
        hours: options.hours,
        error_steps: options.error_steps,
        dwells,
        rows: rows(&all),
        families,
        short_dwells: std::mem::take(&mut all[0].short),
        slow_jumps,
    })
}

fn rows(t: &[Tally; 3]) -> Vec<Row> {
    let [f, n, o] = t;
    vec![f.row("follow"), n.row("naive"), o.row("optimum")]
}

/// `tuneward bench-follow`: measures the station at `config` (the bundled
/// quality station when `None`) and writes a table, or JSON.
pub fn run_bench(
    config: Option<&Path>,
    options: &BenchOptions,
    json: bool,
    out: &mut dyn Write,
) -> Result<BenchReport, StationError> {
    let (station, name) = match config {
        Some(path) => (Station::load(path)?, path.display().to_string()),
        None => {
            let path = Path::new("fixtures/quality/station.toml");
            let config = Config::parse(QUALITY_CONFIG, path)?;
            config.validate()?;
            (Station::from_config(config)?, path.display().to_string())
        }
    };
    let report = bench_follow(&station, &name, options)?;
    if json {
        serde_json::to_writer(&mut *out, &report).map_err(std::io::Error::from)?;
        writeln!(out)?;
    } else {
        write_table(&report, out)?;
    }
    Ok(report)
}

/// The waits after retunes followed by a call, one line per policy (the
/// optimum's are the floors).
fn write_waits(rows: &[Row], what: &str, out: &mut dyn Write) -> std::io::Result<()> {
    writeln!(
        out,
        "waits after a retune followed by a call, in s ({what}; optimum: the floor)"
    )?;
    writeln!(
        out,
        "{:<8} {:>6} {:>8} {:>8} {:>8} {:>10} {:>10} {:>7} {:>8} {:>8} {:>8} {:>10}",
        "policy",
        "jumps",
        "jump_p50",
        "jump_p95",
        "jump_max",
        "over_plan",
        "over_move",
        "sweeps",
        "swp_p50",
        "swp_p95",
        "swp_max",
        "violations"
    )?;
    for r in rows {
        writeln!(
            out,
            "{:<8} {:>6} {:>8.3} {:>8.3} {:>8.3} {:>10.3} {:>10.3} {:>7} {:>8.3} {:>8.3} {:>8.3} {:>10}",
            r.policy,
            r.jump_calls,
            r.jump_wait_p50_s,
            r.jump_wait_p95_s,
            r.jump_wait_max_s,
            r.jump_excess_p95_s,
            r.jump_over_travel_p95_s,
            r.sweep_calls,
            r.sweep_wait_p50_s,
            r.sweep_wait_p95_s,
            r.sweep_wait_max_s,
            r.violations
        )?;
    }
    Ok(())
}

/// The report as a table.
pub fn write_table(report: &BenchReport, out: &mut dyn Write) -> std::io::Result<()> {
    writeln!(
        out,
        "{}: {} invented evenings of {} h, {} dwells; hidden calibration error ±{} steps",
        report.station, report.evenings, report.hours, report.dwells, report.error_steps
    )?;
    writeln!(
        out,
        "{:<8} {:>7} {:>13} {:>11} {:>12} {:>9} {:>9} {:>10}",
        "policy",
        "moves",
        "travel_steps",
        "transmit_s",
        "inhibited_s",
        "swr<=1.5",
        "swr<=2",
        "worst_swr"
    )?;
    for r in &report.rows {
        writeln!(
            out,
            "{:<8} {:>7} {:>13} {:>11.0} {:>12.1} {:>8.2}% {:>8.2}% {:>10.2}",
            r.policy,
            r.moves,
            r.travel_steps,
            r.transmit_s,
            r.inhibited_s,
            r.swr_1_5_pct,
            r.swr_2_pct,
            r.worst_swr
        )?;
    }
    write_waits(&report.rows, "all families", out)?;
    for fam in &report.families {
        writeln!(out, "{} ({} dwells):", fam.family, fam.dwells)?;
        for r in &fam.rows {
            writeln!(
                out,
                "  {:<8} moves {:>6}  held off {:>7.1} s  swr<=1.5 {:>6.2}%  jump wait p95 {:>6.3} s  sweep wait p95 {:>6.3} s",
                r.policy, r.moves, r.inhibited_s, r.swr_1_5_pct, r.jump_wait_p95_s, r.sweep_wait_p95_s
            )?;
        }
        let rows = &fam.rows;
        if let (Some(f), Some(n), Some(o)) = (
            find_row(rows, "follow"),
            find_row(rows, "naive"),
            find_row(rows, "optimum"),
        ) {
            writeln!(
                out,
                "  targets on {}: held off {:.2}x naive, jump p95 {:+.0} ms on the floor's, {:.0} ms over the move per jump, {:.2}x optimum's moves, swr<=1.5 {:.2}%, moving while keyed {:.1} s: waits {}, swr/moves {}",
                fam.family,
                f.inhibited_s / n.inhibited_s.max(1e-9),
                1000.0 * (f.jump_wait_p95_s - o.jump_wait_p95_s),
                1000.0 * f.jump_over_travel_p95_s,
                f.moves as f64 / (o.moves.max(1)) as f64,
                f.swr_1_5_pct,
                f.moved_keyed_s,
                if fam.wait_target_met() { "met" } else { "missed" },
                if fam.target_met() { "met" } else { "missed" }
            )?;
        }
    }
    if let (Some(f), Some(n), Some(o)) = (
        report.row("follow"),
        report.row("naive"),
        report.row("optimum"),
    ) {
        writeln!(
            out,
            "follow: held off {:.2}x the naive policy's (target: at most 1.1x); jump wait p95 {:.3} s against the floor's {:.3} s, and {:.0} ms over the move's own time per jump at p95 (targets: at most 50 ms each): {}",
            f.inhibited_s / n.inhibited_s.max(1e-9),
            f.jump_wait_p95_s,
            o.jump_wait_p95_s,
            1000.0 * f.jump_over_travel_p95_s,
            if report.wait_target_met() { "met" } else { "missed" }
        )?;
    }
    if let (Some(f), Some(o)) = (report.row("follow"), report.row("optimum")) {
        writeln!(
            out,
            "follow: {:.2}% of the time on the air at SWR <= 1.5 with {:.2}x the optimum's moves (target: 100% with at most 1.3x): {}",
            f.swr_1_5_pct,
            f.moves as f64 / (o.moves.max(1)) as f64,
            if report.target_met() { "met" } else { "missed" }
        )?;
    }
    write_short_dwells(&report.short_dwells, out)?;
    write_slow_jumps(&report.slow_jumps, out)
}

/// How many slow jumps the table names (the slowest); JSON has them all.
const SLOW_SHOWN: usize = 12;

/// The jumps where `follow` waited more than 50 ms beyond the move's own
/// time.
fn write_slow_jumps(slow: &[SlowJump], out: &mut dyn Write) -> std::io::Result<()> {
    if slow.is_empty() {
        return writeln!(
            out,
            "follow: no jump waited more than 50 ms beyond the move's own time"
        );
    }
    writeln!(
        out,
        "follow waited more than 50 ms beyond the move's own time after {} jumps; the slowest (family, seed, report, frequency, previous report and how long before, wait, the move's time, the plan's floor, naive's wait, first settle after, moves, holds):",
        slow.len()
    )?;
    let mut v: Vec<&SlowJump> = slow.iter().collect();
    v.sort_by(|a, b| b.excess_s().total_cmp(&a.excess_s()));
    for j in v.into_iter().take(SLOW_SHOWN) {
        let prev = match (j.previous_hz, j.previous_gap_s) {
            (Some(hz), Some(gap)) => format!(
                "{:+.1} kHz {:.3} s before",
                (j.hz as f64 - hz as f64) / 1e3,
                gap
            ),
            _ => "no report before".to_string(),
        };
        writeln!(
            out,
            "  {:<8} seed {:<4} {:>8.1} s  {:>10.6} MHz  {}  wait {:.3} s  move {:.3} s  floor {:.3} s  naive {:.3} s  settled {}  moves {}  holds [{}]",
            j.family,
            j.seed,
            j.at_s,
            j.hz as f64 / 1e6,
            prev,
            j.wait_s,
            j.travel_s,
            j.floor_s,
            j.naive_wait_s,
            j.settled_after_s
                .map_or("never".to_string(), |s| format!("{s:.3} s")),
            j.moves,
            j.holds.join(", ")
        )?;
    }
    if slow.len() > SLOW_SHOWN {
        writeln!(
            out,
            "  ... and {} more (--json lists them all)",
            slow.len() - SLOW_SHOWN
        )?;
    }
    Ok(())
}

/// How many short dwells the table names; JSON has them all.
const SHORT_SHOWN: usize = 20;

/// Each dwell where `follow` fell short of 1.5:1 on the air.
fn write_short_dwells(short: &[ShortDwell], out: &mut dyn Write) -> std::io::Result<()> {
    if short.is_empty() {
        return writeln!(out, "follow: no dwell fell short of 1.5:1 on the air");
    }
    writeln!(
        out,
        "follow fell short of 1.5:1 on the air in {} dwells (family, seed, arrival, frequency, time above 1.5:1, worst SWR, why):",
        short.len()
    )?;
    for d in short.iter().take(SHORT_SHOWN) {
        writeln!(
            out,
            "  {:<8} seed {:<4} {:>8.1} s  {:>10.6} MHz  {:>6.2} s  SWR {:>8.2}  {}",
            d.family,
            d.seed,
            d.at_s,
            d.hz as f64 / 1e6,
            d.over_1_5_s,
            d.worst_swr,
            d.why
        )?;
    }
    if short.len() > SHORT_SHOWN {
        writeln!(
            out,
            "  ... and {} more (--json lists them all)",
            short.len() - SHORT_SHOWN
        )?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn station() -> Station {
        let config = Config::parse(QUALITY_CONFIG, Path::new("station.toml")).unwrap();
        config.validate().unwrap();
        Station::from_config(config).unwrap()
    }

    #[test]
    fn resonance_inverts_the_calibration_plus_the_hidden_error() {
        let st = station();
        let physics = SmallLoop::from_config(&st.config.antenna).unwrap();
        let exact = SimLoop::new(st.map.as_ref(), physics, &st.policy, 0.0, 20_000.0);
        for hz in [7_074_000.0, 10_120_000.0, 14_200_000.0] {
            // The motor at the calibrated position, at rest after an upward
            // approach: the capacitor lags by half the backlash.
            let c = st.map.steps_at(hz) - st.policy.backlash_steps as f64 / 2.0;
            let f0 = exact.resonance_hz(c, hz + 20_000.0).unwrap();
            assert!((f0 - hz).abs() < 0.01, "{f0} for {hz}");
            assert!((exact.swr(hz, c) - 1.0).abs() < 1e-6);
            // Resting from the wrong side, the loop is off by the backlash.
            let wrong = c + st.policy.backlash_steps as f64;
            assert!(exact.swr(hz, wrong) > 2.0, "{}", exact.swr(hz, wrong));
        }
        // With the hidden error the resonance moves by the error in steps.
        let off = SimLoop::new(st.map.as_ref(), physics, &st.policy, 3.0, 20_000.0);
        let hz = 7_074_000.0;
        let c = st.map.steps_at(hz) - st.policy.backlash_steps as f64 / 2.0;
        let e = off.hidden_error(c);
        assert!(e.abs() <= 3.0 && e != 0.0);
        let f0 = off.resonance_hz(c, hz).unwrap();
        let slope = (st.map.steps_at(hz + 10.0) - st.map.steps_at(hz - 10.0)) / 20.0;
        assert!(
            ((f0 - hz) - e / slope).abs() < 0.5,
            "{} vs {}",
            f0 - hz,
            e / slope
        );
    }

    #[test]
    fn split_and_other_programs_are_scored_at_the_transmit_frequency() {
        // Seeds 1 and 2 (tuning seeds), two hours of each new family.
        let st = station();
        let options = BenchOptions {
            families: vec![Family::Split, Family::Programs],
            seeds: vec![1, 2],
            hours: 2.0,
            ..BenchOptions::default()
        };
        let r = bench_follow(&st, "test", &options).unwrap();
        for fam in &r.families {
            let f = find_row(&fam.rows, "follow").unwrap();
            assert_eq!(f.over_1_5_s, 0.0, "{}: {f:?}", fam.family);
            assert_eq!(f.violations, 0, "{}", fam.family);
            assert_eq!(f.moved_keyed_s, 0.0, "{}", fam.family);
            assert!(fam.target_met(), "{}: {:?}", fam.family, fam.rows);
        }
        // The score is at the transmit frequency: a policy tuning for the
        // receive VFO falls short on the split family.
        let mut rx = st.policy.clone();
        rx.tune_for = crate::follow::TuneFor::Receive;
        let physics = SmallLoop::from_config(&st.config.antenna).unwrap();
        let sim_loop = SimLoop::new(st.map.as_ref(), physics, &rx, 3.0, 20_000.0);
        let sc = Family::Split.evening(1, 2.0, &rx.band_ranges());
        let wire = DialectWire {
            dialect: &st.dialect,
            address: 0x94,
        };
        let mut tally = Tally::default();
        run_policy(&st, &rx, &sc, &sc.answers(&wire), &sim_loop, &mut tally).unwrap();
        assert!(
            tally.radiated - tally.ok_1_5 > 60.0,
            "{}",
            tally.radiated - tally.ok_1_5
        );
    }

    #[test]
    fn the_default_policy_keeps_the_loop_within_1_5_with_few_moves() {
        // The quality station leaves [follow] at its defaults; the dead band
        // is then "auto". With a fixed 2000 Hz dead band this fails (the
        // README gives the figures).
        let st = station();
        let options = BenchOptions {
            seeds: vec![3, 4],
            hours: 2.0,
            ..BenchOptions::default()
        };
        let r = bench_follow(&st, "test", &options).unwrap();
        let (f, o) = (r.row("follow").unwrap(), r.row("optimum").unwrap());
        assert_eq!(f.over_1_5_s, 0.0, "{f:?}");
        assert!(
            f.moves as f64 <= 1.3 * o.moves as f64,
            "{} vs {}",
            f.moves,
            o.moves
        );
        assert!(r.target_met());
        // And the same evenings with the old fixed default do not.
        let mut fixed = st.policy.clone();
        for b in &mut fixed.bands {
            b.hysteresis_hz = crate::config::DEFAULT_HYSTERESIS_HZ;
        }
        let mut tally = Tally::default();
        let physics = SmallLoop::from_config(&st.config.antenna).unwrap();
        let sim_loop = SimLoop::new(st.map.as_ref(), physics, &fixed, 3.0, 20_000.0);
        let bands = fixed.band_ranges();
        let wire = DialectWire {
            dialect: &st.dialect,
            address: 0x94,
        };
        for seed in [3, 4] {
            let sc = random_evening(seed, 2.0, &bands);
            let chunks = sc.answers(&wire);
            run_policy(&st, &fixed, &sc, &chunks, &sim_loop, &mut tally).unwrap();
        }
        let over = tally.radiated - tally.ok_1_5;
        assert!(over > 0.0);
        // Each short dwell is named, and together they are all the time
        // above 1.5:1 (counted step by step apart from the total).
        assert!(!tally.short.is_empty());
        let named: f64 = tally.short.iter().map(|d| d.over_1_5_s).sum();
        assert!((named - over).abs() < 1e-6, "{named} vs {over}");
        for d in &tally.short {
            assert!(d.worst_swr > 1.5 && d.over_1_5_s > 0.0, "{d:?}");
            assert!(
                bands
                    .iter()
                    .any(|(lo, hi)| (lo - 5_000..=hi + 5_000).contains(&d.hz)),
                "{d:?}"
            );
            assert!(!d.why.is_empty());
        }
        // The default policy's evenings above had none to name.
        assert!(r.short_dwells.is_empty(), "{:?}", r.short_dwells);
    }

    /// A hand-built evening: 60 s on 7.050 MHz, a memory recall to 14.200
    /// MHz and a call 100 ms after it, held for 10 s.
    fn recall_and_call() -> Scenario {
        let s = &mut crate::scenario::Script::new(1, 7_050_000);
        s.wait(Duration::from_secs(60)).jump(14_200_000);
        s.wait(Duration::from_millis(100));
        s.overs(1, Duration::from_secs(10), Duration::from_secs(5));
        s.clone().finish()
    }

    fn one_run(st: &Station, policy: &Policy, sc: &Scenario) -> Tally {
        let physics = SmallLoop::from_config(&st.config.antenna).unwrap();
        let sim_loop = SimLoop::new(st.map.as_ref(), physics, policy, 0.0, 20_000.0);
        let wire = DialectWire {
            dialect: &st.dialect,
            address: 0x94,
        };
        let mut tally = Tally::default();
        run_policy(st, policy, sc, &sc.answers(&wire), &sim_loop, &mut tally).unwrap();
        tally
    }

    #[test]
    fn a_call_after_a_jump_waits_for_the_travel_and_is_held_off_not_stopped() {
        let st = station();
        let sc = recall_and_call();
        let physics = SmallLoop::from_config(&st.config.antenna).unwrap();
        let mut opt = Tally::default();
        let floors = optimum(&st, &physics, &sc, &mut opt);
        // The floor by hand: the plan first tunes 7.050 MHz, then goes to
        // 14.200 MHz, about 250 000 steps down: one leg past the target by
        // the backlash and one back (the approach is up), each at 32 000
        // steps/s with an 80 ms settle, plus the 20 ms lead and the 150 ms
        // tail.
        let at = st.map.steps_at(7_050_000.0).round() as i64;
        let to = st.map.steps_at(14_200_000.0).round() as i64;
        let far = (at - (to - 320)) as f64 / 32_000.0;
        let back = 320.0 / 32_000.0;
        let by_hand = 0.020 + far + 0.080 + back + 0.080 + 0.150;
        assert_eq!(floors.len(), 1);
        // The plan's move is the one straight from 7.050 MHz: both floors.
        for floor in [floors[0].plan, floors[0].travel] {
            assert!((floor - by_hand).abs() < 0.01, "{floor} vs {by_hand}");
        }
        let floors: Vec<f64> = floors.iter().map(|f| f.plan).collect();
        // Ours acts on the recall at once: the wait is the floor (to the
        // millisecond the simulated tuner rounds to), the call is held off
        // for all of it but the 100 ms before it, and nothing moved while
        // the rig was on the air.
        let ours = one_run(&st, &st.policy, &sc);
        assert_eq!(ours.jump_waits.len(), 1);
        let wait = ours.jump_waits[0];
        assert!((wait - floors[0]).abs() < 0.005, "{wait} vs {}", floors[0]);
        assert!(
            (ours.inhibited - (wait - 0.1)).abs() < 0.002,
            "{}",
            ours.inhibited
        );
        assert_eq!(ours.violations, 0);
        assert_eq!(ours.radiated - ours.ok_1_5, 0.0);
        // The first tuning of 7.050 and the recall, each once: the held-off
        // call did not stop the motor (a stopped move counts again).
        assert_eq!(ours.moves, 2);
        // Without jumps the 400 ms debounce comes first (the 20 ms lead
        // runs inside it: the inhibit went on with the report).
        let mut slow = st.policy.clone();
        slow.jump = None;
        let slow = one_run(&st, &slow, &sc);
        let late = slow.jump_waits[0] - wait;
        assert!((late - 0.380).abs() < 0.002, "{:?}", slow.jump_waits);
    }

    /// A recall 500 Hz up, inside the 1.5:1 window (about 990 Hz wide on
    /// 40 m) of the first frequency: the plan, knowing it would come,
    /// tunes once for both (floor 0), while the move straight from 7.050
    /// MHz to 7.0505 MHz takes its lead, legs, settles and tail.
    #[test]
    fn a_recall_inside_the_window_has_no_plan_floor_but_a_move_of_its_own() {
        let st = station();
        let s = &mut crate::scenario::Script::new(1, 7_050_000);
        s.wait(Duration::from_secs(60)).jump(7_050_500);
        s.wait(Duration::from_millis(100));
        s.overs(1, Duration::from_secs(10), Duration::from_secs(5));
        let sc = s.clone().finish();
        let physics = SmallLoop::from_config(&st.config.antenna).unwrap();
        let floors = optimum(&st, &physics, &sc, &mut Tally::default());
        assert_eq!(floors.len(), 1);
        assert_eq!(floors[0].plan, 0.0);
        // Higher up is fewer steps, so the approach from below overshoots
        // by the 320-step backlash and comes back: by hand.
        let from = st.map.steps_at(7_050_000.0).round();
        let to = st.map.steps_at(7_050_500.0).round();
        assert!(to < from);
        let by_hand =
            0.020 + (from - (to - 320.0)) / 32_000.0 + 0.080 + 320.0 / 32_000.0 + 0.080 + 0.150;
        assert!(
            (floors[0].travel - by_hand).abs() < 0.002,
            "{:?} vs {by_hand}",
            floors[0]
        );
    }

    #[test]
    fn the_wait_targets_need_the_floors_p95_and_each_jumps_move_both() {
        let row = |policy: &'static str, p95: f64, over_move: f64| Row {
            jump_wait_p95_s: p95,
            jump_over_travel_p95_s: over_move,
            ..Tally::default().row(policy)
        };
        let rows = |p95: f64, over_move: f64| {
            vec![
                row("follow", p95, over_move),
                row("naive", 1.0, 0.0),
                row("optimum", 1.0, 0.0),
            ]
        };
        assert!(waits_target_met(&rows(1.05, 0.05)));
        // 60 ms over the floor's p95, or 60 ms over the move at p95.
        assert!(!waits_target_met(&rows(1.06, 0.0)));
        assert!(!waits_target_met(&rows(1.0, 0.06)));
    }

    #[test]
    fn a_target_met_together_but_missed_by_one_family_is_not_met_on_every_family() {
        let tally = |moves: u64, inhibited: f64| Tally {
            moves,
            inhibited,
            ..Default::default()
        };
        let good = vec![
            tally(10, 1.0).row("follow"),
            tally(20, 1.0).row("naive"),
            tally(10, 0.0).row("optimum"),
        ];
        // Held off 1.5x the naive policy on this family alone.
        let slow = vec![
            tally(10, 1.5).row("follow"),
            tally(20, 1.0).row("naive"),
            tally(10, 0.0).row("optimum"),
        ];
        let fam = |family, rows| FamilyReport {
            family,
            dwells: 1,
            rows,
        };
        let report = BenchReport {
            station: "s".into(),
            evenings: 1,
            hours: 1.0,
            error_steps: 0.0,
            dwells: 2,
            rows: good.clone(),
            families: vec![fam("classic", good.clone()), fam("spotting", slow)],
            short_dwells: vec![ShortDwell {
                family: "spotting",
                seed: 7,
                at_s: 12.5,
                hz: 7_074_000,
                over_1_5_s: 0.25,
                worst_swr: 2.5,
                why: "held (transmitting)".into(),
            }],
            slow_jumps: vec![SlowJump {
                family: "spotting",
                seed: 7,
                at_s: 40.0,
                hz: 7_080_000,
                wait_s: 0.9,
                floor_s: 0.0,
                travel_s: 0.3,
                naive_wait_s: 0.35,
                settled_after_s: Some(0.4),
                moves: 1,
                holds: vec!["dead-band"],
                previous_hz: Some(7_078_500),
                previous_gap_s: Some(12.0),
            }],
        };
        assert!(report.target_met() && report.wait_target_met());
        assert!(report.families[0].wait_target_met());
        assert!(!report.families[1].wait_target_met());
        assert!(report.families[1].target_met());
        assert!(!report.every_family_met());
        let mut out = Vec::new();
        write_table(&report, &mut out).unwrap();
        let text = String::from_utf8(out).unwrap();
        assert!(
            text.contains("targets on spotting: held off 1.50x naive")
                && text.contains("waits missed"),
            "{text}"
        );
        assert!(
            text.contains("in 1 dwells")
                && text.contains("spotting seed 7")
                && text.contains("7.074000 MHz")
                && text.contains("held (transmitting)"),
            "{text}"
        );
        // The slow jump, with what came before and what the core did.
        assert!(
            text.contains("after 1 jumps")
                && text.contains("7.080000 MHz  +1.5 kHz 12.000 s before  wait 0.900 s  move 0.300 s  floor 0.000 s  naive 0.350 s  settled 0.400 s  moves 1  holds [dead-band]"),
            "{text}"
        );
    }

    #[test]
    fn percentiles_are_nearest_rank() {
        let xs = [5.0, 1.0, 4.0, 2.0, 3.0];
        assert_eq!(percentile(&xs, 0.5), 3.0);
        assert_eq!(percentile(&xs, 0.95), 5.0);
        assert_eq!(percentile(&xs, 0.2), 1.0);
        assert_eq!(percentile(&[], 0.95), 0.0);
    }

    #[test]
    fn naive_moves_more_than_ours_and_the_optimum_fewest() {
        let st = station();
        let options = BenchOptions {
            seeds: vec![1, 2],
            hours: 1.0,
            ..BenchOptions::default()
        };
        let r = bench_follow(&st, "test", &options).unwrap();
        let (f, n, o) = (
            r.row("follow").unwrap(),
            r.row("naive").unwrap(),
            r.row("optimum").unwrap(),
        );
        assert!(n.moves > f.moves, "naive {} vs ours {}", n.moves, f.moves);
        assert!(
            o.moves <= f.moves,
            "optimum {} vs ours {}",
            o.moves,
            f.moves
        );
        assert!(o.moves > 0);
        assert!(f.transmit_s > 0.0);
        // Both simulated policies see the same keyed time.
        assert!((f.transmit_s - n.transmit_s).abs() < 1e-6);
        assert!((f.transmit_s - o.transmit_s).abs() < 0.1);
        for row in &r.rows {
            assert!((0.0..=100.0).contains(&row.swr_1_5_pct), "{row:?}");
            assert!(row.swr_2_pct >= row.swr_1_5_pct);
        }
    }
}
