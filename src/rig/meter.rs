//! Rig meters as data: which meter, and the scale from a meter's raw
//! reading to what it measures (dBm for the signal meter, the ratio for the
//! SWR meter, watts for forward power).
//!
//! A scale is a table of `(raw, value)` points, raw strictly rising, read by
//! straight lines between them and held at the end values beyond them. The
//! signal meter's value is in dBm at the antenna input, by IARU Region 1
//! Technical Recommendation R.1 (S9 = −73 dBm below 30 MHz, 6 dB per S
//! unit): a rig's scale in S units and "dB over S9" maps onto dBm through it.

/// Which meter a reading is from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum MeterKind {
    /// Received signal (the S-meter), value in dBm.
    Signal,
    /// SWR while transmitting, value the ratio (1 or more).
    Swr,
    /// Forward power while transmitting, value in watts.
    Power,
}

impl MeterKind {
    /// Every kind, in the order dialects list them.
    pub const ALL: [MeterKind; 3] = [MeterKind::Signal, MeterKind::Swr, MeterKind::Power];

    /// The kind's name in dialect files, logs and the truth log.
    pub fn as_str(self) -> &'static str {
        match self {
            MeterKind::Signal => "signal",
            MeterKind::Swr => "swr",
            MeterKind::Power => "power",
        }
    }
}

/// S9 below 30 MHz, in dBm (IARU Region 1 Technical Recommendation R.1).
pub const S9_DBM: f64 = -73.0;
/// One S unit, in dB (IARU Region 1 Technical Recommendation R.1).
pub const S_UNIT_DB: f64 = 6.0;

/// dBm of an S reading `s` (0..=9) plus `over_s9_db` (for S9+).
pub fn s_to_dbm(s: f64, over_s9_db: f64) -> f64 {
    S9_DBM + (s - 9.0) * S_UNIT_DB + over_s9_db
}

/// Why a scale table is not usable.
#[derive(Debug, Clone, PartialEq)]
pub struct ScaleError {
    pub expected: &'static str,
    pub found: String,
}

/// A meter's scale: raw reading to value.
#[derive(Debug, Clone, PartialEq)]
pub struct MeterScale {
    points: Vec<(u16, f64)>,
}

// Every value is finite (`MeterScale::new` refuses anything else, and the
// built-in tables are finite), so equality is reflexive: dialects holding a
// scale can be `Eq`.
impl Eq for MeterScale {}

impl MeterScale {
    /// A scale through `points` (at least two, raw strictly rising, values
    /// finite and rising: every meter here reads more for more).
    pub fn new(points: Vec<(u16, f64)>) -> Result<MeterScale, ScaleError> {
        if points.len() < 2 {
            return Err(ScaleError {
                expected: "at least two (raw, value) points",
                found: format!("{} point(s)", points.len()),
            });
        }
        for w in points.windows(2) {
            let [(r0, v0), (r1, v1)] = [w[0], w[1]];
            if r1 <= r0 || !(v0.is_finite() && v1.is_finite()) || v1 <= v0 {
                return Err(ScaleError {
                    expected: "raw readings and values both rising, values finite",
                    found: format!("({r0}, {v0}) then ({r1}, {v1})"),
                });
            }
        }
        Ok(MeterScale { points })
    }

    /// The table's points, raw rising.
    pub fn points(&self) -> &[(u16, f64)] {
        &self.points
    }

    /// The highest raw reading of the table (a meter's full scale).
    pub fn full_scale(&self) -> u16 {
        self.points.last().map_or(0, |p| p.0)
    }

    /// The value of raw reading `raw`.
    pub fn value(&self, raw: u16) -> f64 {
        let p = &self.points;
        let (Some(&(r_lo, v_lo)), Some(&(r_hi, v_hi))) = (p.first(), p.last()) else {
            return f64::NAN;
        };
        if raw <= r_lo {
            return v_lo;
        }
        if raw >= r_hi {
            return v_hi;
        }
        for w in p.windows(2) {
            let [(r0, v0), (r1, v1)] = [w[0], w[1]];
            if raw <= r1 {
                let t = f64::from(raw - r0) / f64::from(r1 - r0);
                return v0 + t * (v1 - v0);
            }
        }
        v_hi
    }

    /// The raw reading a meter with this scale shows for `value`: the
    /// nearest raw step (as a meter quantises), clamped to the table.
    pub fn raw(&self, value: f64) -> u16 {
        let p = &self.points;
        let (Some(&(r_lo, v_lo)), Some(&(r_hi, v_hi))) = (p.first(), p.last()) else {
            return 0;
        };
        if value.is_nan() || value <= v_lo {
            return r_lo;
        }
        if value >= v_hi {
            return r_hi;
        }
        for w in p.windows(2) {
            let [(r0, v0), (r1, v1)] = [w[0], w[1]];
            if value <= v1 {
                let t = (value - v0) / (v1 - v0);
                let r = f64::from(r0) + t * f64::from(r1 - r0);
                return r.round().clamp(f64::from(r0), f64::from(r1)) as u16;
            }
        }
        r_hi
    }

    /// The value change of one raw step near `value` (the quantisation).
    pub fn step_near(&self, value: f64) -> f64 {
        let r = self.raw(value);
        let up = self.value(r.saturating_add(1));
        let here = self.value(r);
        if up > here {
            up - here
        } else {
            here - self.value(r.saturating_sub(1))
        }
    }
}

/// Binary family signal meter (recalled, check against the rig's published
/// command reference): raw 0 is S0, 120 is S9, 241 is S9+60 dB.
pub fn binary_signal_scale() -> MeterScale {
    MeterScale {
        points: vec![
            (0, s_to_dbm(0.0, 0.0)),
            (120, s_to_dbm(9.0, 0.0)),
            (241, s_to_dbm(9.0, 60.0)),
        ],
    }
}

/// Binary family SWR meter (recalled): raw 0 is 1.0, 48 is 1.5, 80 is 2.0,
/// 120 is 3.0.
pub fn binary_swr_scale() -> MeterScale {
    MeterScale {
        points: vec![(0, 1.0), (48, 1.5), (80, 2.0), (120, 3.0)],
    }
}

/// Text family signal meter (recalled): raw 0 is S0, 15 is S9, 30 is
/// S9+60 dB.
pub fn text_signal_scale() -> MeterScale {
    MeterScale {
        points: vec![
            (0, s_to_dbm(0.0, 0.0)),
            (15, s_to_dbm(9.0, 0.0)),
            (30, s_to_dbm(9.0, 60.0)),
        ],
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn s_units_follow_iaru_region_1_r1() {
        // IARU Region 1 Technical Recommendation R.1: S9 = −73 dBm below
        // 30 MHz, 6 dB per S unit, so S1 = −121 dBm and S9+20 = −53 dBm.
        assert_eq!(s_to_dbm(9.0, 0.0), -73.0);
        assert_eq!(s_to_dbm(1.0, 0.0), -121.0);
        assert_eq!(s_to_dbm(9.0, 20.0), -53.0);
        let s = binary_signal_scale();
        assert_eq!(s.value(120), -73.0);
        assert_eq!(s.value(0), -127.0);
        assert!((s.value(241) - -13.0).abs() < 1e-12);
        // S5 is 24 dB under S9: raw 120 · 5/9 ≈ 66.7, the nearest step 67.
        assert_eq!(s.raw(s_to_dbm(5.0, 0.0)), 67);
        let t = text_signal_scale();
        assert_eq!(t.value(15), -73.0);
        assert_eq!(t.raw(-73.0), 15);
    }

    #[test]
    fn the_scale_reads_between_points_and_holds_beyond_them() {
        let w = binary_swr_scale();
        assert_eq!(w.value(0), 1.0);
        assert_eq!(w.value(64), 1.75);
        assert_eq!(w.value(500), 3.0);
        assert_eq!(w.raw(2.0), 80);
        assert_eq!(w.raw(0.5), 0);
        assert_eq!(w.raw(f64::INFINITY), 120);
        assert_eq!(w.raw(f64::NAN), 0);
        // Round trip at every raw step.
        for r in 0..=120u16 {
            assert_eq!(w.raw(w.value(r)), r);
        }
        assert!((binary_signal_scale().step_near(-100.0) - 0.45).abs() < 1e-9);
    }

    #[test]
    fn a_bad_table_is_refused_with_what_was_found() {
        let e = MeterScale::new(vec![(0, 1.0)]).unwrap_err();
        assert_eq!(e.found, "1 point(s)");
        let e = MeterScale::new(vec![(10, 1.0), (5, 2.0)]).unwrap_err();
        assert!(e.found.contains("(10, 1)"), "{e:?}");
        assert!(MeterScale::new(vec![(0, 1.0), (5, f64::NAN)]).is_err());
        assert!(MeterScale::new(vec![(0, 1.0), (5, 3.0)]).is_ok());
    }
}
