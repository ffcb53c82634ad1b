//! The rules the follow core applies, resolved from the config once: bands
//! and their guard margins, the dead band, debounce, limits and approach.

use std::time::Duration;

use crate::config::{Approach, Config, ConfigError, Hysteresis, DEFAULT_HYSTERESIS_HZ};

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
}

impl Policy {
    /// Each band's edges, low and high, in Hz, in the config's order.
    pub fn band_ranges(&self) -> Vec<(u64, u64)> {
        self.bands.iter().map(|b| (b.low_hz, b.high_hz)).collect()
    }

    /// Resolves the policy from a validated config. `"auto"` dead bands are
    /// resolved through `auto_hysteresis`, which is given a band's centre in
    /// Hz and answers with a dead band in Hz, or `None` if it cannot estimate
    /// one (no antenna described).
    pub fn from_config(
        config: &Config,
        auto_hysteresis: impl Fn(f64) -> Option<u64>,
    ) -> Result<Policy, ConfigError> {
        let path = config.path_for_errors();
        let f = &config.follow;
        let mut bands = Vec::with_capacity(config.bands.len());
        for (i, b) in config.bands.iter().enumerate() {
            let centre = (b.low_hz as f64 + b.high_hz as f64) / 2.0;
            let (key, setting) = match b.hysteresis_hz {
                Some(h) => (format!("band[{i}] ({}).hysteresis_hz", b.name), h),
                None => ("follow.hysteresis_hz".to_string(), f.hysteresis_hz),
            };
            let hysteresis_hz = match setting {
                Hysteresis::Hz(hz) => hz,
                Hysteresis::Unset => auto_hysteresis(centre).unwrap_or(DEFAULT_HYSTERESIS_HZ),
                Hysteresis::Auto(_) => {
                    auto_hysteresis(centre).ok_or_else(|| ConfigError::Invalid {
                        path: path.clone(),
                        key,
                        expected: "a number of Hz, or \"auto\" with [antenna] loop_diameter_m and conductor_diameter_m set".to_string(),
                        found: "\"auto\" without an antenna description".to_string(),
                    })?
                }
            };
            bands.push(Band {
                name: b.name.clone(),
                low_hz: b.low_hz,
                high_hz: b.high_hz,
                guard_hz: b.guard_hz,
                hysteresis_hz,
                debounce: Duration::from_millis(b.debounce_ms.unwrap_or(f.debounce_ms)),
            });
        }
        let t = &config.tuner;
        Ok(Policy {
            bands,
            min_steps: t.min_steps,
            max_steps: t.max_steps,
            backlash_steps: t.backlash_steps,
            approach: t.approach,
            debounce: Duration::from_millis(f.debounce_ms),
            min_move_steps: f.min_move_steps,
            inhibit_lead: Duration::from_millis(f.inhibit_lead_ms),
            inhibit_while_detuned: f.inhibit_while_detuned,
            inhibit_tail: Duration::from_millis(f.inhibit_tail_ms),
            candidate_dwell: Duration::from_millis(f.candidate_dwell_ms),
        })
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
            inhibit_tail: Duration::from_millis(100),
            candidate_dwell: Duration::from_secs(10),
        }
    }

    #[test]
    fn unset_dead_band_is_auto_for_a_described_loop_else_the_fixed_default() {
        let text = "[calibration]\npoints = [{ hz = 7000000, steps = 4000 }, { hz = 7200000, steps = 3000 }]\n\
                    [[band]]\nname = \"40m\"\nlow_hz = 7000000\nhigh_hz = 7200000\n\
                    [[band]]\nname = \"30m\"\nlow_hz = 10100000\nhigh_hz = 10150000\nhysteresis_hz = 700\n";
        let config = Config::parse(text, std::path::Path::new("t.toml")).unwrap();
        // No loop described: the fixed default; a band's own value wins.
        let p = Policy::from_config(&config, |_| None).unwrap();
        assert_eq!(p.bands[0].hysteresis_hz, DEFAULT_HYSTERESIS_HZ);
        assert_eq!(p.bands[1].hysteresis_hz, 700);
        // A described loop: whatever "auto" gives at the band's centre.
        let p = Policy::from_config(&config, |centre| Some(centre as u64 / 10_000)).unwrap();
        assert_eq!(p.bands[0].hysteresis_hz, 710);
        assert_eq!(p.bands[1].hysteresis_hz, 700);
        // Set explicitly, a number stays a number.
        let fixed = format!("[follow]\nhysteresis_hz = 1500\n{text}");
        let config = Config::parse(&fixed, std::path::Path::new("t.toml")).unwrap();
        let p = Policy::from_config(&config, |_| Some(1)).unwrap();
        assert_eq!(p.bands[0].hysteresis_hz, 1500);
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
