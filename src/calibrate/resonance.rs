//! The resonance-curve fit of a noise peak: signal-meter readings in dB at
//! several motor positions in, the loop's peak (position, height, width) and
//! a verdict out.
//!
//! The model is the universal resonance curve of a resonator near resonance:
//! the power a matched resonator passes falls off as `1 / (1 + (2 Q δ)²)`
//! with `δ = (f − f0)/f0` the fractional detuning and `Q` the loaded Q (F. E.
//! Terman, *Radio Engineers' Handbook*, 1943, §3 "the universal resonance
//! curve"; recalled). Near the peak the loop's resonance moves linearly with
//! the motor, so in motor steps the curve is `1 / (1 + ((p − p0)/w)²)`, `w`
//! the half-width at half power in steps. What the receiver's meter reads is
//! that band noise on top of its own noise floor, both as power:
//!
//! `reading_dB(p) = 10 log10( 10^(F/10) + 10^(H/10) / (1 + ((p − p0)/w)²) )`
//!
//! with `F` the receiver's floor and `H` the band noise at resonance, both in
//! dB. The four parameters `(p0, w, F, H)` are fitted by least squares on
//! this model in dB (Levenberg–Marquardt, analytic Jacobian, `nalgebra`),
//! started from the best of a grid of `(p0, w)` for which `F` and `H` follow
//! by linear least squares in power. A parabola through three points is not
//! used: it has no floor, and it pulls the peak toward the largest reading.
//!
//! **"No clear peak"** is decided from the fit, not from the raw readings:
//! the peak's rise over the floor, `10 log10(1 + 10^((H−F)/10))`, must be at
//! least [`MIN_RISE_DB`] (the band noise at least doubling the noise the
//! receiver hears on its own; common practice, no source) and at least
//! [`RISE_OVER_SCATTER`] times the rms residual of the fit; the fitted peak
//! must lie inside the positions read (not at or beyond an end), and the
//! width must not sit at a bound of the allowed range. A quiet band (the
//! receiver's own noise dominates) fails the rise; a strong carrier on the
//! frequency spoils the curve's shape and fails the residual or the width.

use nalgebra::{Matrix2, Matrix4, Vector2, Vector4};

/// Least rise of the fitted peak over the fitted floor for a clear peak (dB).
pub const MIN_RISE_DB: f64 = 3.0;
/// The fitted rise must be at least this many times the fit's rms residual.
pub const RISE_OVER_SCATTER: f64 = 4.0;
/// Fewest distinct positions a fit is tried on (four parameters and slack).
pub const MIN_POINTS: usize = 7;

/// Robust average of several reads at one point: the mean after dropping
/// the lowest and the highest quarter (a trimmed mean). It resists a single
/// burst of interference like a median, and unlike a median it averages
/// between the quantisation steps of a coarse meter when the reads scatter.
/// Non-finite reads are ignored; `None` when none is left.
pub fn robust_average(reads: &[f64]) -> Option<f64> {
    let mut v: Vec<f64> = reads.iter().copied().filter(|x| x.is_finite()).collect();
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let cut = v.len() / 4;
    let kept = v.get(cut..v.len() - cut)?;
    Some(kept.iter().sum::<f64>() / kept.len() as f64)
}

/// One averaged point: a motor position, the reading there (dB) and its
/// weight in the fit (the number of reads averaged: the variance of an
/// average falls as one over that number).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Reading {
    pub steps: f64,
    pub db: f64,
    pub weight: f64,
}

/// The fitted curve.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ResonanceFit {
    /// Position of the peak (steps, fractional).
    pub peak_steps: f64,
    /// Half-width at half power (steps).
    pub half_width_steps: f64,
    /// The receiver's floor under the band noise (dB, meter scale).
    pub floor_db: f64,
    /// The band noise at resonance alone (dB).
    pub band_db: f64,
    /// The peak's rise over the floor (dB).
    pub rise_db: f64,
    /// Rms residual of the fit (dB) for a point of mean weight, with four
    /// parameters taken off.
    pub rms_residual_db: f64,
    /// Number of points fitted.
    pub points: usize,
}

impl ResonanceFit {
    /// The model's reading at `steps` (dB).
    pub fn model_db(&self, steps: f64) -> f64 {
        model(
            &Vector4::new(
                self.peak_steps,
                self.half_width_steps.ln(),
                self.floor_db,
                self.band_db,
            ),
            steps,
        )
    }
}

/// What the fit says.
#[derive(Debug, Clone, PartialEq)]
pub enum Verdict {
    /// A peak standing clear of the scatter.
    Clear(ResonanceFit),
    /// No peak to trust, with the fit (when one was made) and why.
    NoClearPeak {
        fit: Option<ResonanceFit>,
        why: &'static str,
    },
}

/// Range of half-widths the fit may use (steps): from the loop physics, a
/// prediction and a factor either side.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WidthRange {
    pub min_steps: f64,
    pub max_steps: f64,
}

impl WidthRange {
    /// `predicted / factor ..= predicted * factor` (factor at least 1).
    pub fn around(predicted_steps: f64, factor: f64) -> WidthRange {
        let f = if factor.is_finite() && factor >= 1.0 {
            factor
        } else {
            1.0
        };
        WidthRange {
            min_steps: predicted_steps / f,
            max_steps: predicted_steps * f,
        }
    }
}

const DB: f64 = 10.0 / std::f64::consts::LN_10;

fn db_to_power(db: f64) -> f64 {
    10f64.powf(db / 10.0)
}

/// The model at `p` for parameters `(p0, ln w, F, H)`.
fn model(t: &Vector4<f64>, p: f64) -> f64 {
    let u = (p - t[0]) / t[1].exp();
    let l = 1.0 / (1.0 + u * u);
    DB * (db_to_power(t[2]) + db_to_power(t[3]) * l).ln()
}

/// Value and gradient of the model at `p`.
fn model_grad(t: &Vector4<f64>, p: f64) -> (f64, Vector4<f64>) {
    let w = t[1].exp();
    let u = (p - t[0]) / w;
    let l = 1.0 / (1.0 + u * u);
    let a = db_to_power(t[2]);
    let b = db_to_power(t[3]);
    let pw = a + b * l;
    let y = DB * pw.ln();
    let g = Vector4::new(
        DB * b * 2.0 * u / w * l * l / pw,
        DB * b * 2.0 * u * u * l * l / pw,
        a / pw,
        b * l / pw,
    );
    (y, g)
}

fn ssr(t: &Vector4<f64>, pts: &[Reading]) -> f64 {
    pts.iter()
        .map(|r| {
            let e = r.db - model(t, r.steps);
            r.weight * e * e
        })
        .sum()
}

/// Floor and band power for a fixed `(p0, w)` by linear least squares in
/// power, each kept at least a thousandth of the largest reading.
fn linear_start(pts: &[Reading], p0: f64, w: f64) -> Option<Vector4<f64>> {
    let mut m = Matrix2::zeros();
    let mut rhs = Vector2::zeros();
    let mut top: f64 = 0.0;
    for r in pts {
        let u = (r.steps - p0) / w;
        let l = 1.0 / (1.0 + u * u);
        let y = db_to_power(r.db);
        top = top.max(y);
        let x = Vector2::new(1.0, l);
        m += x * x.transpose() * r.weight;
        rhs += x * y * r.weight;
    }
    let s = m.lu().solve(&rhs)?;
    let least = top * 1e-3;
    let a = s[0].max(least);
    let b = s[1].max(least);
    let v = Vector4::new(p0, w.ln(), DB * a.ln(), DB * b.ln());
    v.iter().all(|x| x.is_finite()).then_some(v)
}

/// Fits the curve to averaged points and gives the verdict. Points with a
/// non-finite position or reading are ignored.
pub fn fit_peak(points: &[Reading], widths: WidthRange) -> Verdict {
    let pts: Vec<Reading> = points
        .iter()
        .copied()
        .filter(|r| {
            r.steps.is_finite() && r.db.is_finite() && r.weight.is_finite() && r.weight > 0.0
        })
        .collect();
    if pts.len() < MIN_POINTS {
        return Verdict::NoClearPeak {
            fit: None,
            why: "too few points read",
        };
    }
    if !(widths.min_steps.is_finite()
        && widths.max_steps.is_finite()
        && widths.min_steps > 0.0
        && widths.max_steps >= widths.min_steps)
    {
        return Verdict::NoClearPeak {
            fit: None,
            why: "no usable width range",
        };
    }
    let lo = pts.iter().map(|r| r.steps).fold(f64::INFINITY, f64::min);
    let hi = pts
        .iter()
        .map(|r| r.steps)
        .fold(f64::NEG_INFINITY, f64::max);
    if hi <= lo {
        return Verdict::NoClearPeak {
            fit: None,
            why: "all points at one position",
        };
    }
    let (wl, wh) = (widths.min_steps.ln(), widths.max_steps.ln());

    // Grid start: peak positions across the span, widths across the range.
    let mut best: Option<(f64, Vector4<f64>)> = None;
    const P_GRID: usize = 41;
    const W_GRID: usize = 9;
    for i in 0..P_GRID {
        let p0 = lo + (hi - lo) * i as f64 / (P_GRID - 1) as f64;
        for j in 0..W_GRID {
            let lw = wl + (wh - wl) * j as f64 / (W_GRID - 1) as f64;
            if let Some(t) = linear_start(&pts, p0, lw.exp()) {
                let s = ssr(&t, &pts);
                if s.is_finite() && best.as_ref().is_none_or(|(b, _)| s < *b) {
                    best = Some((s, t));
                }
            }
        }
    }
    let Some((mut cost, mut t)) = best else {
        return Verdict::NoClearPeak {
            fit: None,
            why: "no start for the fit",
        };
    };

    // Levenberg–Marquardt, the peak kept a little beyond the span and the
    // width inside its range (clamped after each step).
    let margin = (hi - lo) * 0.25;
    let clamp = |mut v: Vector4<f64>| {
        v[0] = v[0].clamp(lo - margin, hi + margin);
        v[1] = v[1].clamp(wl, wh);
        v
    };
    let mut lambda = 1e-3;
    for _ in 0..200 {
        let mut jtj = Matrix4::zeros();
        let mut jte = Vector4::zeros();
        for r in &pts {
            let (y, g) = model_grad(&t, r.steps);
            let e = r.db - y;
            jtj += g * g.transpose() * r.weight;
            jte += g * e * r.weight;
        }
        let mut improved = false;
        for _ in 0..20 {
            let mut a = jtj;
            for k in 0..4 {
                a[(k, k)] += lambda * (jtj[(k, k)] + 1e-12);
            }
            let Some(step) = a.lu().solve(&jte) else {
                lambda *= 10.0;
                continue;
            };
            let cand = clamp(t + step);
            let c = ssr(&cand, &pts);
            if c.is_finite() && c < cost {
                let gain = cost - c;
                t = cand;
                cost = c;
                lambda = (lambda / 3.0).max(1e-12);
                improved = gain > 1e-12 * (1.0 + cost);
                break;
            }
            lambda *= 10.0;
        }
        if !improved {
            break;
        }
    }

    // Weighted rms residual, scaled to a mean weight of one and with four
    // parameters taken off (the plain rms when the weights are equal).
    let n = pts.len() as f64;
    let mean_w = pts.iter().map(|r| r.weight).sum::<f64>() / n;
    let dof = pts.len().saturating_sub(4).max(1);
    let rms = (cost / mean_w / dof as f64).sqrt();
    let rise = DB * (1.0 + db_to_power(t[3] - t[2])).ln();
    let fit = ResonanceFit {
        peak_steps: t[0],
        half_width_steps: t[1].exp(),
        floor_db: t[2],
        band_db: t[3],
        rise_db: rise,
        rms_residual_db: rms,
        points: pts.len(),
    };
    let step = (hi - lo) / (pts.len() - 1) as f64;
    let why = if rise < MIN_RISE_DB {
        Some("the peak rises less than 3 dB over the floor")
    } else if rise < RISE_OVER_SCATTER * rms {
        Some("the peak does not stand clear of the scatter")
    } else if t[0] < lo + step / 2.0 || t[0] > hi - step / 2.0 {
        Some("the peak is at or beyond an end of the positions read")
    } else if (t[1] - wl).abs() < 1e-6 || (t[1] - wh).abs() < 1e-6 {
        Some("the width sits at a bound of the range the loop allows")
    } else {
        None
    };
    match why {
        None => Verdict::Clear(fit),
        Some(why) => Verdict::NoClearPeak {
            fit: Some(fit),
            why,
        },
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn curve(p0: f64, w: f64, floor: f64, band: f64) -> ResonanceFit {
        ResonanceFit {
            peak_steps: p0,
            half_width_steps: w,
            floor_db: floor,
            band_db: band,
            rise_db: 0.0,
            rms_residual_db: 0.0,
            points: 0,
        }
    }

    fn sample(c: &ResonanceFit, from: f64, to: f64, n: usize) -> Vec<Reading> {
        (0..n)
            .map(|i| {
                let s = from + (to - from) * i as f64 / (n - 1) as f64;
                Reading {
                    steps: s,
                    db: c.model_db(s),
                    weight: 1.0,
                }
            })
            .collect()
    }

    #[test]
    fn the_model_has_the_universal_curve_worked_values() {
        // Universal resonance curve (Terman, Radio Engineers' Handbook, §3;
        // recalled): at one half-width off the peak the resonator passes
        // half the power (−3.01 dB), at two half-widths a fifth (−6.99 dB).
        // With a floor far below, the reading follows the curve alone.
        let c = curve(1000.0, 30.0, -200.0, -100.0);
        assert!((c.model_db(1000.0) - -100.0).abs() < 1e-9);
        assert!((c.model_db(1030.0) - (-100.0 - 3.0103)).abs() < 1e-3);
        assert!((c.model_db(940.0) - (-100.0 - 6.9897)).abs() < 1e-3);
        // Floor and band noise equal: the peak reads 3.01 dB over the floor,
        // far off it reads the floor.
        let d = curve(0.0, 10.0, -120.0, -120.0);
        assert!((d.model_db(0.0) - (-120.0 + 3.0103)).abs() < 1e-3);
        assert!((d.model_db(1e6) - -120.0).abs() < 1e-3);
    }

    #[test]
    fn exact_readings_give_back_the_curve() {
        let truth = curve(8301.4, 14.0, -115.0, -105.0);
        let pts = sample(&truth, 8240.0, 8360.0, 13);
        let Verdict::Clear(f) = fit_peak(&pts, WidthRange::around(10.0, 3.0)) else {
            panic!("expected a clear peak");
        };
        assert!((f.peak_steps - 8301.4).abs() < 1e-3, "{f:?}");
        assert!((f.half_width_steps - 14.0).abs() < 1e-3, "{f:?}");
        assert!((f.floor_db - -115.0).abs() < 1e-3, "{f:?}");
        assert!((f.band_db - -105.0).abs() < 1e-3, "{f:?}");
        // Rise of band noise 10 dB over the floor: 10 log10(1 + 10) dB.
        assert!((f.rise_db - 10.4139).abs() < 1e-3, "{f:?}");
        assert!(f.rms_residual_db < 1e-6);
    }

    #[test]
    fn the_peak_is_found_off_the_grid_of_positions_and_off_centre() {
        // Not the largest reading: the peak lies between two points read,
        // nearer one end of the window.
        let truth = curve(517.3, 22.0, -110.0, -98.0);
        let pts = sample(&truth, 450.0, 650.0, 11);
        let Verdict::Clear(f) = fit_peak(&pts, WidthRange::around(20.0, 3.0)) else {
            panic!("expected a clear peak");
        };
        assert!((f.peak_steps - 517.3).abs() < 1e-3, "{f:?}");
    }

    #[test]
    fn a_quiet_band_has_no_clear_peak() {
        // Band noise 6 dB under the receiver's floor: the peak rises
        // 10 log10(1.25) = 0.97 dB, under the 3 dB rule.
        let truth = curve(100.0, 10.0, -120.0, -126.0);
        let pts = sample(&truth, 60.0, 140.0, 13);
        match fit_peak(&pts, WidthRange::around(10.0, 3.0)) {
            Verdict::NoClearPeak { fit: Some(f), why } => {
                assert!((f.rise_db - 0.9691).abs() < 0.05, "{f:?}");
                assert!(why.contains("3 dB"), "{why}");
            }
            other => panic!("expected no clear peak, found {other:?}"),
        }
    }

    #[test]
    fn a_flat_band_with_scatter_has_no_clear_peak() {
        let mut rng = fastrand::Rng::with_seed(7);
        let pts: Vec<Reading> = (0..13)
            .map(|i| Reading {
                steps: i as f64 * 10.0,
                db: -110.0 + (rng.f64() - 0.5) * 2.0,
                weight: 1.0,
            })
            .collect();
        assert!(matches!(
            fit_peak(&pts, WidthRange::around(15.0, 3.0)),
            Verdict::NoClearPeak { .. }
        ));
    }

    #[test]
    fn a_strong_carrier_on_one_point_is_not_a_peak() {
        // A quiet band and one point 20 dB up (a carrier during that read):
        // the curve cannot take a one-point spike at the allowed widths.
        let truth = curve(100.0, 10.0, -120.0, -130.0);
        let mut pts = sample(&truth, 40.0, 160.0, 13);
        pts[6].db += 20.0;
        assert!(matches!(
            fit_peak(&pts, WidthRange::around(20.0, 2.0)),
            Verdict::NoClearPeak { .. }
        ));
    }

    #[test]
    fn a_peak_beyond_the_window_is_not_trusted() {
        let truth = curve(300.0, 10.0, -120.0, -100.0);
        let pts = sample(&truth, 100.0, 220.0, 13);
        assert!(matches!(
            fit_peak(&pts, WidthRange::around(10.0, 3.0)),
            Verdict::NoClearPeak { .. }
        ));
    }

    #[test]
    fn too_few_or_broken_points_give_a_verdict_not_a_panic() {
        let pts = [Reading {
            steps: f64::NAN,
            db: 1.0,
            weight: 1.0,
        }; 9];
        assert!(matches!(
            fit_peak(&pts, WidthRange::around(10.0, 2.0)),
            Verdict::NoClearPeak { fit: None, .. }
        ));
        assert!(matches!(
            fit_peak(&[], WidthRange::around(10.0, 2.0)),
            Verdict::NoClearPeak { fit: None, .. }
        ));
    }

    #[test]
    fn the_robust_average_drops_a_burst_and_averages_steps() {
        assert_eq!(robust_average(&[]), None);
        assert_eq!(robust_average(&[f64::NAN]), None);
        assert_eq!(robust_average(&[2.0]), Some(2.0));
        // One burst of 30 dB among five: dropped with the lowest.
        let a = robust_average(&[-100.0, -101.0, -70.0, -100.0, -99.0]).unwrap();
        assert!((a - -99.666_666).abs() < 1e-3, "{a}");
        // Reads dithering between two meter steps average between them.
        let b =
            robust_average(&[-100.0, -96.0, -100.0, -96.0, -100.0, -96.0, -100.0, -96.0]).unwrap();
        assert!((b - -98.0).abs() < 1e-9, "{b}");
    }
}
