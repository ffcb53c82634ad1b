//! Naming the point that spoils a fit.
//!
//! A calibration point typed wrong (2448 for 24448) pulls a least-squares
//! curve towards it, so every residual grows and a per-point warning fires
//! everywhere. What the operator needs is the one line to fix. We find it
//! from the leave-one-out (LOO) prediction errors: point *i* is predicted by
//! the same structure fitted to all the other points, so a wrong point
//! cannot hide its own error by pulling the curve.
//!
//! # How a point is named, and why
//!
//! A point is named only when all of these hold:
//!
//! 1. **It stands out on a robust scale.** Its modified z-score,
//!    `M = 0.6745 · |e − median(e)| / MAD(e)` over the LOO errors `e`,
//!    exceeds [`MODIFIED_Z_LIMIT`] = 3.5. Formula and limit are those of
//!    Iglewicz and Hoaglin, *How to Detect and Handle Outliers* (ASQC
//!    Quality Press, 1993), section 3.3; the NIST/SEMATECH e-Handbook of
//!    Statistical Methods (section 1.3.5.17) recommends the same (recalled).
//!    The median and MAD are not moved by the wrong point itself, which is
//!    why they are used rather than the mean and standard deviation. The MAD
//!    is floored at [`READING_RESOLUTION_STEPS`] (half a step: the rounding
//!    of a reading), so exact or nearly exact data never make a half-step
//!    difference look like an outlier (common practice, no source).
//!    It is the point with the largest LOO error.
//! 2. **It dominates the error.** Refitted without it, the LOO RMS of the
//!    other points is at most half of the LOO RMS with it ([`IMPROVEMENT`];
//!    common practice, no source). A wrong point spoils its neighbours'
//!    predictions too, so their errors fall once it is gone; where the
//!    model is poor everywhere, removing one point changes little and
//!    nobody is named.
//!
//! An interpolation's two end points take no part (they are neither named
//! nor counted): left out, they are extrapolated, which says nothing about
//! them.
//!
//! At least [`MIN_POINTS`] points are needed: with fewer, the median of the
//! others says too little.
//!
//! The message suggests a typing error when changing one digit of the
//! measured value (one digit dropped, added, changed, or two neighbours
//! swapped) gives a value close to the expected one.

use super::{fit_model, Calibration, FitSpec, Point};

/// Modified z-score above which a LOO error is called an outlier
/// (Iglewicz and Hoaglin 1993, section 3.3).
pub const MODIFIED_Z_LIMIT: f64 = 3.5;
/// The consistency constant of the modified z-score: the 0.75 quantile of
/// the standard normal distribution (Iglewicz and Hoaglin 1993).
pub const MAD_TO_Z: f64 = 0.6745;
/// Smallest MAD used, in steps: readings are rounded to whole steps
/// (common practice, no source).
pub const READING_RESOLUTION_STEPS: f64 = 0.5;
/// Largest ratio LOO RMS without / with the point for it to be named.
pub const IMPROVEMENT: f64 = 0.5;
/// Fewest points for the test.
pub const MIN_POINTS: usize = 5;

/// A point that one would fix first.
#[derive(Debug, Clone, PartialEq)]
pub struct Outlier {
    /// Index into the calibration's points.
    pub index: usize,
    pub hz: f64,
    pub measured: f64,
    /// What the other points predict here.
    pub expected: f64,
    /// Its modified z-score among the LOO errors.
    pub modified_z: f64,
    /// LOO RMS of the fit with all points and with this one left out.
    pub loo_rms_with: f64,
    pub loo_rms_without: f64,
    /// A value one digit edit away from `measured` that lies close to
    /// `expected`, where there is one.
    pub likely_typed_for: Option<i64>,
}

impl Outlier {
    /// "measured 2448 steps at 14.200 MHz: expected about 24 450 — a typing
    /// error (24 448)? Without it the leave-one-out error falls from … to …".
    pub fn message(&self) -> String {
        let hint = match self.likely_typed_for {
            Some(v) => format!(" — a typing error (for {})?", group_digits(v)),
            None => "; remeasure it".to_string(),
        };
        format!(
            "measured {} steps at {:.3} MHz: expected about {}{hint} Without it the leave-one-out error falls from {} to {} steps.",
            readable(self.measured),
            self.hz / 1e6,
            group_digits(round_to_significant(self.expected, 4)),
            readable(self.loo_rms_with),
            readable(self.loo_rms_without),
        )
    }
}

/// Median of finite values (sorted copy); `None` when empty.
fn median(v: &[f64]) -> Option<f64> {
    let mut s: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
    if s.is_empty() {
        return None;
    }
    s.sort_by(f64::total_cmp);
    let n = s.len();
    let mid = n / 2;
    if n % 2 == 1 {
        s.get(mid).copied()
    } else {
        Some((s.get(mid - 1)? + s.get(mid)?) / 2.0)
    }
}

/// Modified z-scores `0.6745 · |x − median| / max(MAD, floor)`.
pub fn modified_z_scores(values: &[f64], mad_floor: f64) -> Option<Vec<f64>> {
    let m = median(values)?;
    let dev: Vec<f64> = values.iter().map(|x| (x - m).abs()).collect();
    let mad = median(&dev)?.max(mad_floor);
    if mad <= 0.0 {
        return None;
    }
    Some(dev.iter().map(|d| MAD_TO_Z * d / mad).collect())
}

/// LOO prediction errors `measured − predicted from the others` of `spec`,
/// in steps, one per point in order; `None` where some refit fails.
pub fn loo_errors(spec: FitSpec, points: &[Point]) -> Option<Vec<f64>> {
    (0..points.len())
        .map(|i| {
            let rest: Vec<Point> = points
                .iter()
                .enumerate()
                .filter(|(j, _)| *j != i)
                .map(|(_, p)| p.clone())
                .collect();
            let left = points.get(i)?;
            let e = left.steps - fit_model(spec, &rest).ok()?.eval(left.hz);
            e.is_finite().then_some(e)
        })
        .collect()
}

fn rms(v: &[f64]) -> f64 {
    (v.iter().map(|e| e * e).sum::<f64>() / v.len().max(1) as f64).sqrt()
}

/// The LOO errors that take part in the test, with their point's index:
/// all of them, except an interpolation's two end points (their LOO
/// prediction is an extrapolation).
fn judged_errors(spec: FitSpec, points: &[Point]) -> Option<Vec<(usize, f64)>> {
    let errors = loo_errors(spec, points)?;
    let lowest = points.iter().map(|p| p.hz).fold(f64::INFINITY, f64::min);
    let highest = points
        .iter()
        .map(|p| p.hz)
        .fold(f64::NEG_INFINITY, f64::max);
    Some(
        errors
            .into_iter()
            .enumerate()
            .filter(|(i, _)| {
                !matches!(spec, FitSpec::Interpolate)
                    || points
                        .get(*i)
                        .is_some_and(|p| p.hz > lowest && p.hz < highest)
            })
            .collect(),
    )
}

/// The point whose removal most improves the fit, if one dominates its
/// error (see the module documentation for the rule).
pub fn find(cal: &Calibration) -> Option<Outlier> {
    let points = cal.points();
    if points.len() < MIN_POINTS {
        return None;
    }
    let spec = cal.spec();
    let judged = judged_errors(spec, points)?;
    let errors: Vec<f64> = judged.iter().map(|(_, e)| *e).collect();
    let z = modified_z_scores(&errors, READING_RESOLUTION_STEPS)?;
    let (at, &(index, _)) = judged
        .iter()
        .enumerate()
        .max_by(|a, b| a.1 .1.abs().total_cmp(&b.1 .1.abs()))?;
    let modified_z = *z.get(at)?;
    if modified_z <= MODIFIED_Z_LIMIT {
        return None;
    }
    let rest: Vec<Point> = points
        .iter()
        .enumerate()
        .filter(|(j, _)| *j != index)
        .map(|(_, p)| p.clone())
        .collect();
    let with = rms(&errors);
    let rest_errors: Vec<f64> = judged_errors(spec, &rest)?
        .into_iter()
        .map(|(_, e)| e)
        .collect();
    let without = rms(&rest_errors);
    if without > IMPROVEMENT * with {
        return None;
    }
    let p = points.get(index)?;
    let expected = fit_model(spec, &rest).ok()?.eval(p.hz);
    // "Close": within a few robust scales of the others' errors, and never
    // tighter than 1% of the value (the fit itself is no better than that
    // far from its neighbours).
    let scale = median(&rest_errors.iter().map(|e| e.abs()).collect::<Vec<_>>())
        .unwrap_or(0.0)
        .max(READING_RESOLUTION_STEPS);
    let tolerance = (5.0 * scale).max(expected.abs() * 0.01);
    Some(Outlier {
        index,
        hz: p.hz,
        measured: p.steps,
        expected,
        modified_z,
        loo_rms_with: with,
        loo_rms_without: without,
        likely_typed_for: one_digit_edit_near(p.steps, expected, tolerance),
    })
}

/// The value one digit edit away from `measured` (an integer reading)
/// nearest to `expected`, if it lies within `tolerance`.
pub fn one_digit_edit_near(measured: f64, expected: f64, tolerance: f64) -> Option<i64> {
    if !(measured.is_finite() && expected.is_finite()) || measured.fract() != 0.0 {
        return None;
    }
    if measured.abs() >= 1e15 {
        return None;
    }
    let negative = measured < 0.0;
    let digits: Vec<u8> = format!("{}", measured.abs() as i64).into_bytes();
    let mut edits: Vec<Vec<u8>> = Vec::new();
    for i in 0..=digits.len() {
        for d in b'0'..=b'9' {
            let mut v = digits.clone();
            v.insert(i, d);
            edits.push(v);
        }
    }
    for i in 0..digits.len() {
        let mut v = digits.clone();
        v.remove(i);
        edits.push(v);
        for d in b'0'..=b'9' {
            let mut v = digits.clone();
            if let Some(c) = v.get_mut(i) {
                *c = d;
            }
            edits.push(v);
        }
        if i + 1 < digits.len() {
            let mut v = digits.clone();
            v.swap(i, i + 1);
            edits.push(v);
        }
    }
    edits
        .into_iter()
        .filter(|v| !v.is_empty() && v != &digits)
        .filter_map(|v| std::str::from_utf8(&v).ok()?.parse::<i64>().ok())
        .map(|v| if negative { -v } else { v })
        .filter(|v| (*v as f64 - expected).abs() <= tolerance)
        .min_by(|a, b| {
            (*a as f64 - expected)
                .abs()
                .total_cmp(&(*b as f64 - expected).abs())
        })
}

/// Rounds to `n` significant digits (for "about 24 450").
fn round_to_significant(v: f64, n: i32) -> i64 {
    if !v.is_finite() || v == 0.0 {
        return 0;
    }
    let magnitude = v.abs().log10().floor() as i32;
    let unit = 10f64.powi((magnitude + 1 - n).max(0));
    ((v / unit).round() * unit) as i64
}

/// An integer with its thousands grouped by spaces from five digits on:
/// `24 450`, `-1200` (four digits stay together, as the SI style allows;
/// recalled).
pub fn group_digits(v: i64) -> String {
    let digits = v.unsigned_abs().to_string();
    if digits.len() <= 4 {
        return if v < 0 { format!("-{digits}") } else { digits };
    }
    let mut out = String::new();
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i) % 3 == 0 {
            out.push(' ');
        }
        out.push(c);
    }
    if v < 0 {
        format!("-{out}")
    } else {
        out
    }
}

/// A step count for people: whole numbers grouped, others to two decimals.
fn readable(v: f64) -> String {
    if v.is_finite() && v.fract() == 0.0 && v.abs() < 1e15 {
        group_digits(v as i64)
    } else if v.is_finite() && v.abs() >= 100.0 {
        group_digits(v.round() as i64)
    } else {
        format!("{v:.2}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::calibrate::ModelKind;

    #[test]
    fn modified_z_by_hand() {
        // Hand calculation from the published formula (Iglewicz and
        // Hoaglin 1993, section 3.3): x = 1, 2, 3, 4, 100 has median 3,
        // absolute deviations 2, 1, 0, 1, 97, MAD 1, so M(100) =
        // 0.6745 · 97 = 65.4265 and M(1) = 1.349.
        let z = modified_z_scores(&[1.0, 2.0, 3.0, 4.0, 100.0], 0.0).unwrap();
        assert!((z[4] - 65.4265).abs() < 1e-9, "{z:?}");
        assert!((z[0] - 1.349).abs() < 1e-9, "{z:?}");
        assert!(z[4] > MODIFIED_Z_LIMIT && z[0] < MODIFIED_Z_LIMIT);
        // Even count: median of 1, 2, 3, 10 is 2.5, deviations 1.5, 0.5,
        // 0.5, 7.5, MAD 1.0.
        let z = modified_z_scores(&[1.0, 2.0, 3.0, 10.0], 0.0).unwrap();
        assert!((z[3] - 0.6745 * 7.5).abs() < 1e-9, "{z:?}");
        assert!(modified_z_scores(&[], 0.0).is_none());
    }

    #[test]
    fn digit_edits() {
        assert_eq!(one_digit_edit_near(2448.0, 24450.0, 50.0), Some(24448));
        // A swap: 7164 typed for 7146.
        assert_eq!(one_digit_edit_near(7164.0, 7147.0, 5.0), Some(7146));
        // Nothing close: no hint.
        assert_eq!(one_digit_edit_near(5000.0, 24450.0, 50.0), None);
        assert_eq!(one_digit_edit_near(2448.5, 24450.0, 50.0), None);
        assert_eq!(one_digit_edit_near(f64::NAN, 1.0, 1.0), None);
    }

    #[test]
    fn numbers_read_well() {
        assert_eq!(group_digits(24450), "24 450");
        assert_eq!(group_digits(-1200), "-1200");
        assert_eq!(group_digits(-12000), "-12 000");
        assert_eq!(group_digits(999), "999");
        assert_eq!(group_digits(1_000_000), "1 000 000");
        assert_eq!(round_to_significant(24451.7, 4), 24450);
        assert_eq!(round_to_significant(812.4, 4), 812);
    }

    /// An invented loop: 30 pF + 0.004 pF per step, 1.1 µH (from
    /// f = 1/(2π√(LC))), readings rounded to whole steps.
    fn invented_loop(freqs: &[f64]) -> Vec<Point> {
        let l = 1.1e-6;
        freqs
            .iter()
            .map(|f| {
                let c = 1.0 / ((2.0 * std::f64::consts::PI * f).powi(2) * l);
                Point::new(*f, ((c - 30e-12) / 0.004e-12).round())
            })
            .collect()
    }

    const FREQS: [f64; 11] = [
        7.0e6, 7.1e6, 7.2e6, 7.3e6, 10.1e6, 10.15e6, 14.0e6, 14.1e6, 14.2e6, 14.35e6, 18.1e6,
    ];

    #[test]
    fn clean_sets_name_nobody() {
        let pts = invented_loop(&FREQS);
        for kind in [ModelKind::Physics, ModelKind::Interpolate, ModelKind::Auto] {
            let cal = Calibration::fit(kind, &pts).unwrap();
            assert_eq!(find(&cal), None, "{kind:?}: {}", cal.note());
        }
        // A straight line through a 1/f² curve is poor everywhere: no one
        // point is to blame.
        let line = Calibration::fit_with(
            crate::calibrate::FitOptions {
                kind: ModelKind::Poly,
                degree: 1,
            },
            &pts,
        )
        .unwrap();
        assert_eq!(find(&line), None);
    }

    #[test]
    fn a_dropped_digit_is_named() {
        let mut pts = invented_loop(&FREQS);
        let i = FREQS.iter().position(|f| *f == 14.2e6).unwrap();
        let truth = pts[i].steps;
        // Drop the second digit, as a hand typing in a hurry does.
        let typed: String = {
            let mut s = format!("{}", truth as i64);
            s.remove(1);
            s
        };
        pts[i].steps = typed.parse().unwrap();
        for kind in [ModelKind::Physics, ModelKind::Interpolate] {
            let cal = Calibration::fit(kind, &pts).unwrap();
            let o = find(&cal).unwrap_or_else(|| panic!("{kind:?}: nobody named"));
            assert_eq!(o.index, i, "{kind:?}");
            assert_eq!(o.likely_typed_for, Some(truth as i64), "{kind:?}");
            assert!(o.loo_rms_without < o.loo_rms_with / 10.0, "{o:?}");
            let msg = o.message();
            assert!(msg.contains("at 14.200 MHz"), "{msg}");
            assert!(msg.contains("typing error"), "{msg}");
        }
    }
}
