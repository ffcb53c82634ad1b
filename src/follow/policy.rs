//! The rules the follow core applies, as plain settings: bands and their
//! guard margins, the dead band, debounce, limits and approach. The station
//! layer (`crate::station::policy_from_config`) resolves them from a config
//! once; nothing here knows of config files.

use std::time::Duration;

use super::station::TuneFor;

/// Which side the final approach to a position comes from (`tuner.approach`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Deserialize, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Approach {
    Up,
    Down,
}

/// A band the tuner follows in, with the margins around it.
#[derive(Debug, Clone, PartialEq)]
pub struct Band {
    pub name: String,
    pub low_hz: u64,
    pub high_hz: u64,
    pub guard_hz: u64,
    pub hysteresis_hz: u64,
    pub debounce: Duration,
}

/// Where a frequency falls among the configured bands.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Placement {
    /// Inside band `band`: follow the frequency itself.
    Inside { band: usize },
    /// In the guard margin of band `band`: tune for its nearest edge, `edge_hz`.
    Guard { band: usize, edge_hz: u64 },
    /// Outside every band and guard: hold.
    Outside,
}

/// Everything the core needs to decide, with units resolved.
#[derive(Debug, Clone)]
pub struct Policy {
    pub bands: Vec<Band>,
    pub min_steps: i64,
    pub max_steps: i64,
    pub backlash_steps: i64,
    pub approach: Approach,
    /// Debounce for a frequency outside every band (bands may set their own).
    pub debounce: Duration,
    pub min_move_steps: i64,
    pub inhibit_lead: Duration,
    /// Assert the inhibit from the first report of a frequency the loop is
    /// not tuned for, until it has been tuned (or the report falls back into
    /// the dead band).
    pub inhibit_while_detuned: bool,
    pub inhibit_tail: Duration,
    /// How long the operator must stay after a hand touch-up before the
    /// touched-up position is offered as a calibration candidate.
    pub candidate_dwell: Duration,
    /// Reports that are jumps, not part of a knob sweep, are acted on at
    /// once instead of after the debounce; `None`: every report waits.
    pub jump: Option<Jump>,
    /// A report of a sweep settles after this many of the sweep's own
    /// report intervals (the gap between its last two reports), when that
    /// is shorter than the debounce; `None`: always the debounce.
    pub sweep_settle: Option<f64>,
    /// Which frequency the loop is tuned for (`[follow] tune_for`).
    pub tune_for: TuneFor,
    /// Whether a move may go ahead while the transmit state is unknown.
    pub while_unknown: WhileUnknown,
    /// The wired inhibit line keeps the rig itself off the air, also when
    /// it is keyed by a CAT command (`[inhibit] holds_cat_keying`): a
    /// transmit command seen while the line is set is then held off by it
    /// (`Follower::transmit_state`). `false` (the default): the line may
    /// hold only an amplifier or the rig's PTT input, and every transmit
    /// command is a transmission.
    pub line_holds_commands: bool,
    /// Keep the inhibit asserted from start (and from a rig-port
    /// reconnect) until the loop is known to be tuned for the rig's
    /// frequency; the live service and replays of a station turn it on.
    pub inhibit_until_tuned: bool,
    /// Aim between the tuned-for frequency and the one a split toggle or
    /// a VFO swap would bring (`Station::alternate_hz`) when both fit in
    /// the band's dead band around one point (`[follow] cover_other_vfo`):
    /// the toggle then needs no move, and the tuned-for frequency is still
    /// within the dead band the loop is allowed to drift by.
    pub cover_alternate: bool,
    /// The longest a program leaves between two commands of one burst
    /// (the other VFO set, then split on; split off, then a set), from the
    /// rig port's speed (`crate::station::burst_gap`). Where the wired line
    /// holds CAT keying, a burst's step that moves the tuned-for frequency
    /// waits this long for the rest of the burst (never longer than
    /// `SET_GRACE`); elsewhere the whole `SET_GRACE`.
    pub burst_gap: Duration,
}

/// When a report counts as a jump (a band change, a memory recall, a
/// band-map click): it comes after `quiet` without another frequency
/// reported, and lies in another band than the report before it (or
/// outside every band when that one was inside, or the other way round),
/// or at least `min_hz` away from it. A knob reports every few tens of
/// milliseconds, a few Hz to a few kHz at a time, so neither holds for the
/// reports of a sweep after its first.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Jump {
    pub min_hz: u64,
    pub quiet: Duration,
}

/// What a move may do while nothing says whether the rig transmits.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum WhileUnknown {
    /// An inhibit line is wired: the move goes ahead under it.
    MoveUnderInhibit,
    /// No line is wired, and the station has written down that moves may
    /// go ahead unprotected (`[inhibit] unprotected_ok = true`).
    MoveUnprotected,
    /// Nothing protects the rig: the move waits until the state is known.
    Hold,
}

impl WhileUnknown {
    /// Whether a move may start while the transmit state is unknown.
    pub fn moves(self) -> bool {
        !matches!(self, WhileUnknown::Hold)
    }
}

impl Policy {
    /// A wired inhibit line holds the rig itself off, CAT keying included:
    /// a line is wired (moves go ahead under it while the transmit state
    /// is unknown) and the station said it holds CAT keying
    /// (`line_holds_commands`).
    pub fn line_holds_cat_keying(&self) -> bool {
        self.while_unknown == WhileUnknown::MoveUnderInhibit && self.line_holds_commands
    }

    /// Each band's edges, low and high, in Hz, in the config's order.
    pub fn band_ranges(&self) -> Vec<(u64, u64)> {
        self.bands.iter().map(|b| (b.low_hz, b.high_hz)).collect()
    }

    /// Where `hz` falls. Bands do not overlap (the config validation refuses
    /// that), so the first match is the only one.
    pub fn place(&self, hz: u64) -> Placement {
        for (band, b) in self.bands.iter().enumerate() {
            if (b.low_hz..=b.high_hz).contains(&hz) {
                return Placement::Inside { band };
            }
            if hz < b.low_hz && hz >= b.low_hz.saturating_sub(b.guard_hz) {
                return Placement::Guard {
                    band,
                    edge_hz: b.low_hz,
                };
            }
            if hz > b.high_hz && hz <= b.high_hz.saturating_add(b.guard_hz) {
                return Placement::Guard {
                    band,
                    edge_hz: b.high_hz,
                };
            }
        }
        Placement::Outside
    }

    /// The debounce that applies to a report of `hz`.
    pub fn debounce_for(&self, hz: u64) -> Duration {
        match self.place(hz) {
            Placement::Inside { band } | Placement::Guard { band, .. } => {
                self.bands.get(band).map_or(self.debounce, |b| b.debounce)
            }
            Placement::Outside => self.debounce,
        }
    }

    /// Whether a report of `hz` at `now` is a jump, given the report of
    /// another frequency before it, `last` (its frequency and when it came).
    /// See [`Jump`].
    pub fn is_jump(&self, now: Duration, hz: u64, last: Option<(u64, Duration)>) -> bool {
        let (Some(jump), Some((last_hz, at))) = (self.jump, last) else {
            return false;
        };
        if now.saturating_sub(at) < jump.quiet || last_hz == hz {
            return false;
        }
        let band = |f: u64| match self.place(f) {
            Placement::Inside { band } | Placement::Guard { band, .. } => Some(band),
            Placement::Outside => None,
        };
        band(hz) != band(last_hz) || hz.abs_diff(last_hz) >= jump.min_hz
    }

    /// Clamps a position into the safe travel.
    pub fn clamp(&self, steps: i64) -> i64 {
        steps.clamp(self.min_steps, self.max_steps)
    }

    /// The legs of a move from `from` to `to`: one leg when the move already
    /// arrives from the approach side, else an overshoot past `to` by the
    /// backlash and a return, so that the last leg always comes from the
    /// configured side. Every leg lies within the limits.
    pub fn legs(&self, from: i64, to: i64) -> Legs {
        let to = self.clamp(to);
        let overshoot = match self.approach {
            Approach::Up if to < from => self.clamp(to - self.backlash_steps),
            Approach::Down if to > from => self.clamp(to + self.backlash_steps),
            _ => to,
        };
        if overshoot == to {
            Legs {
                first: to,
                then: None,
            }
        } else {
            Legs {
                first: overshoot,
                then: Some(to),
            }
        }
    }
}

/// One or two `GOTO`s that make up a move.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Legs {
    pub first: i64,
    pub then: Option<i64>,
}

impl Legs {
    /// Steps travelled from `from` along these legs.
    pub fn distance(&self, from: i64) -> u64 {
        let mut d = from.abs_diff(self.first);
        if let Some(t) = self.then {
            d += self.first.abs_diff(t);
        }
        d
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    pub(crate) fn sample() -> Policy {
        Policy {
            bands: vec![Band {
                name: "40m".into(),
                low_hz: 7_000_000,
                high_hz: 7_200_000,
                guard_hz: 10_000,
                hysteresis_hz: 1_000,
                debounce: Duration::from_millis(300),
            }],
            min_steps: 0,
            max_steps: 5_000,
            backlash_steps: 30,
            approach: Approach::Up,
            debounce: Duration::from_millis(500),
            min_move_steps: 2,
            inhibit_lead: Duration::from_millis(20),
            inhibit_while_detuned: false,
            jump: None,
            sweep_settle: None,
            inhibit_tail: Duration::from_millis(100),
            candidate_dwell: Duration::from_secs(10),
            tune_for: TuneFor::Transmit,
            while_unknown: WhileUnknown::MoveUnderInhibit,
            line_holds_commands: false,
            inhibit_until_tuned: false,
            cover_alternate: false,
            burst_gap: Duration::from_millis(100),
        }
    }

    #[test]
    fn placement_inside_guard_outside() {
        let p = sample();
        assert_eq!(p.place(7_100_000), Placement::Inside { band: 0 });
        assert_eq!(p.place(7_000_000), Placement::Inside { band: 0 });
        assert_eq!(
            p.place(6_995_000),
            Placement::Guard {
                band: 0,
                edge_hz: 7_000_000
            }
        );
        assert_eq!(
            p.place(7_210_000),
            Placement::Guard {
                band: 0,
                edge_hz: 7_200_000
            }
        );
        assert_eq!(p.place(7_210_001), Placement::Outside);
        assert_eq!(p.place(6_989_999), Placement::Outside);
    }

    #[test]
    fn band_debounce_applies_inside_and_in_guard() {
        let p = sample();
        assert_eq!(p.debounce_for(7_100_000), Duration::from_millis(300));
        assert_eq!(p.debounce_for(6_995_000), Duration::from_millis(300));
        assert_eq!(p.debounce_for(9_000_000), Duration::from_millis(500));
    }

    #[test]
    fn legs_approach_up() {
        let p = sample();
        assert_eq!(
            p.legs(100, 200),
            Legs {
                first: 200,
                then: None
            }
        );
        assert_eq!(
            p.legs(200, 100),
            Legs {
                first: 70,
                then: Some(100)
            }
        );
        assert_eq!(p.legs(200, 100).distance(200), 130 + 30);
        // Near the lower limit the overshoot is cut short, never past it.
        assert_eq!(
            p.legs(200, 10),
            Legs {
                first: 0,
                then: Some(10)
            }
        );
        // At the limit itself there is no room to approach from below.
        assert_eq!(
            p.legs(200, 0),
            Legs {
                first: 0,
                then: None
            }
        );
    }

    #[test]
    fn legs_approach_down() {
        let mut p = sample();
        p.approach = Approach::Down;
        assert_eq!(
            p.legs(100, 200),
            Legs {
                first: 230,
                then: Some(200)
            }
        );
        assert_eq!(
            p.legs(200, 100),
            Legs {
                first: 100,
                then: None
            }
        );
        assert_eq!(
            p.legs(100, 4_990),
            Legs {
                first: 5_000,
                then: Some(4_990)
            }
        );
    }

    #[test]
    fn legs_never_leave_limits() {
        let p = sample();
        let l = p.legs(100, 9_999);
        assert_eq!(l.first, 5_000);
        let l = p.legs(100, -50);
        assert_eq!(l.first, 0);
    }
}
