//! The fit report: per-point residuals, summary statistics, band coverage,
//! warnings; as text for people and as JSON for programs.
//!
//! Residuals are `measured − fitted` in steps, and in Hz through the local
//! slope of the fitted curve (`residual_steps / (d steps / d Hz)`): how far
//! off in frequency the loop would be tuned at that point. Where `[antenna]`
//! describes the loop, the Hz residual is also given as a share of the
//! loop's 1.5:1 SWR bandwidth there.

use std::fmt::Write as _;

use super::outlier::{self, Outlier};
use super::{Calibration, FitSpec, Point, StepMap};
use crate::antenna::{bandwidth_1_5_hz, BandSpan, LoopDescription};

/// A residual above this share of the 1.5:1 bandwidth gets a warning in the
/// fit report (common practice, no source).
pub const RESIDUAL_WARN_SHARE: f64 = 0.25;

/// One row of the per-point table.
#[derive(Debug, Clone, PartialEq)]
pub struct PointRow {
    pub hz: f64,
    pub steps: f64,
    pub fitted: f64,
    pub residual_steps: f64,
    pub residual_hz: f64,
    /// |residual_hz| over the 1.5:1 bandwidth, where the antenna is described.
    pub bandwidth_share: Option<f64>,
    pub profile: Option<String>,
}

/// Coverage of one band by the points.
#[derive(Debug, Clone, PartialEq)]
pub struct BandCoverage {
    pub name: String,
    pub low_hz: f64,
    pub high_hz: f64,
    pub points: usize,
    /// Largest gap between neighbouring points, counting the band edges as
    /// neighbours (a stretch near an edge without points is a gap too):
    /// (from Hz, to Hz).
    pub largest_gap: Option<(f64, f64)>,
}

/// Everything `tuneward fit` says about a calibration.
#[derive(Debug, Clone, PartialEq)]
pub struct Report {
    pub model: String,
    pub structure: String,
    pub note: String,
    pub coefficients: Vec<f64>,
    pub residual_sd: f64,
    pub r_squared: f64,
    pub loo_rms: Option<f64>,
    pub rows: Vec<PointRow>,
    pub candidates: Vec<PointRow>,
    pub bands: Vec<BandCoverage>,
    pub profiles: Vec<String>,
    pub warnings: Vec<String>,
    /// The point that dominates the error, where one does
    /// ([`super::outlier::find`]).
    pub outlier: Option<Outlier>,
}

fn row(cal: &Calibration, p: &Point, antenna: Option<&LoopDescription>) -> PointRow {
    let fitted = cal.steps_at(p.hz);
    let residual_steps = p.steps - fitted;
    let slope = cal.slope_at(p.hz);
    let residual_hz = if slope != 0.0 && slope.is_finite() {
        residual_steps / slope
    } else {
        f64::NAN
    };
    let bandwidth_share = antenna
        .and_then(|a| bandwidth_1_5_hz(a, p.hz))
        .map(|bw| residual_hz.abs() / bw);
    PointRow {
        hz: p.hz,
        steps: p.steps,
        fitted,
        residual_steps,
        residual_hz,
        bandwidth_share,
        profile: p.profile.clone(),
    }
}

fn coverage(name: &str, low: f64, high: f64, hz: &[f64]) -> BandCoverage {
    let mut inside: Vec<f64> = hz
        .iter()
        .copied()
        .filter(|f| *f >= low && *f <= high)
        .collect();
    inside.sort_by(f64::total_cmp);
    let points = inside.len();
    let mut edges = vec![low];
    edges.extend(inside);
    edges.push(high);
    let largest_gap = edges
        .windows(2)
        .filter_map(|w| match w {
            [a, b] if b > a => Some((*a, *b)),
            _ => None,
        })
        .max_by(|x, y| (x.1 - x.0).total_cmp(&(y.1 - y.0)));
    BandCoverage {
        name: name.to_string(),
        low_hz: low,
        high_hz: high,
        points,
        largest_gap,
    }
}

/// Builds the report for a calibration fitted to its points; `candidates`
/// are shown beside them but take no part in the fit.
pub fn build(
    cal: &Calibration,
    antenna: Option<&LoopDescription>,
    bands: &[BandSpan],
    candidates: &[Point],
) -> Report {
    let rows: Vec<PointRow> = cal.points().iter().map(|p| row(cal, p, antenna)).collect();
    let cands = candidates.iter().map(|p| row(cal, p, antenna)).collect();

    let w: Vec<f64> = cal.points().iter().map(|p| p.weight).collect();
    let wsum: f64 = w.iter().sum();
    let sse: f64 = rows
        .iter()
        .zip(&w)
        .map(|(r, wi)| wi * r.residual_steps * r.residual_steps)
        .sum();
    let mean = rows.iter().zip(&w).map(|(r, wi)| wi * r.steps).sum::<f64>() / wsum;
    let sst: f64 = rows
        .iter()
        .zip(&w)
        .map(|(r, wi)| wi * (r.steps - mean) * (r.steps - mean))
        .sum();
    let dof = rows.len().saturating_sub(cal.parameters());
    let residual_sd = if dof > 0 {
        (sse / dof as f64).sqrt()
    } else if sse == 0.0 {
        0.0
    } else {
        f64::NAN
    };
    let r_squared = if sst > 0.0 { 1.0 - sse / sst } else { f64::NAN };

    let hz: Vec<f64> = cal.points().iter().map(|p| p.hz).collect();
    let coverages: Vec<BandCoverage> = if bands.is_empty() {
        let lo = hz.iter().copied().fold(f64::INFINITY, f64::min);
        let hi = hz.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        if lo.is_finite() && hi.is_finite() {
            vec![coverage("all points", lo, hi, &hz)]
        } else {
            Vec::new()
        }
    } else {
        bands
            .iter()
            .map(|b| coverage(&b.name, b.low_hz as f64, b.high_hz as f64, &hz))
            .collect()
    };

    let outlier = outlier::find(cal);
    let mut warnings = Vec::new();
    for c in &coverages {
        if c.points < 3 {
            warnings.push(format!(
                "{}: only {} point(s) between {} and {}; measure at least three (ends and middle)",
                c.name,
                c.points,
                mhz(c.low_hz),
                mhz(c.high_hz)
            ));
        }
    }
    // A wrong point pulls the whole curve: the others' residuals are then
    // its doing, and one line says so instead of a warning per point.
    let mut pulled = 0;
    for (i, r) in rows.iter().enumerate() {
        if let Some(share) = r.bandwidth_share {
            if share > RESIDUAL_WARN_SHARE && outlier.as_ref().is_some_and(|o| o.index != i) {
                pulled += 1;
            } else if share > RESIDUAL_WARN_SHARE {
                warnings.push(format!(
                    "point at {}: residual {:+.1} steps = {:+.0} Hz, {:.0}% of the 1.5:1 bandwidth (more than {:.0}%); remeasure it or choose another model",
                    mhz(r.hz),
                    r.residual_steps,
                    r.residual_hz,
                    share * 100.0,
                    RESIDUAL_WARN_SHARE * 100.0
                ));
            }
        }
    }
    if pulled > 0 {
        warnings.push(format!(
            "{pulled} more {} over {:.0}% of the 1.5:1 bandwidth, most likely pulled by the point named above; fix it and fit again",
            if pulled == 1 { "point" } else { "points" },
            RESIDUAL_WARN_SHARE * 100.0
        ));
    }

    let structure = match cal.spec() {
        FitSpec::Physics { corrected: false } => "steps = a + b/f^2".to_string(),
        FitSpec::Physics { corrected: true } => "steps = a + b/f^2 + c/f^4".to_string(),
        FitSpec::Poly { degree } => format!("steps = sum of c_i f^i, i = 0..{degree}"),
        FitSpec::Interpolate => "monotone piecewise cubic (Fritsch-Carlson)".to_string(),
    };
    Report {
        model: cal.kind().name().to_string(),
        structure,
        note: cal.note().to_string(),
        coefficients: cal.coefficients(),
        residual_sd,
        r_squared,
        loo_rms: cal.loo_rms(),
        rows,
        candidates: cands,
        bands: coverages,
        profiles: Vec::new(),
        warnings,
        outlier,
    }
}

fn mhz(hz: f64) -> String {
    format!("{:.4} MHz", hz / 1e6)
}

fn num(v: f64) -> serde_json::Value {
    serde_json::Number::from_f64(v).map_or(serde_json::Value::Null, serde_json::Value::Number)
}

impl Report {
    /// The `--json` contract: always `model`, `coefficients`,
    /// `residual_sd`, `r_squared`, `points` (each `hz`, `steps`, `fitted`,
    /// `residual_steps`, `residual_hz`); `outlier` only where a point is
    /// named (`index` into `points`, `hz`, `measured`, `expected`,
    /// `modified_z`, `loo_rms_with`, `loo_rms_without`, `likely_typed_for`
    /// or `null`, and `message`). Non-finite numbers are `null`.
    pub fn to_json(&self) -> serde_json::Value {
        let points: Vec<serde_json::Value> = self
            .rows
            .iter()
            .map(|r| {
                serde_json::json!({
                    "hz": num(r.hz),
                    "steps": num(r.steps),
                    "fitted": num(r.fitted),
                    "residual_steps": num(r.residual_steps),
                    "residual_hz": num(r.residual_hz),
                })
            })
            .collect();
        let mut v = serde_json::json!({
            "model": self.model,
            "coefficients": self.coefficients.iter().map(|c| num(*c)).collect::<Vec<_>>(),
            "residual_sd": num(self.residual_sd),
            "r_squared": num(self.r_squared),
            "points": points,
        });
        if let (Some(o), Some(obj)) = (&self.outlier, v.as_object_mut()) {
            obj.insert(
                "outlier".to_string(),
                serde_json::json!({
                    "index": o.index,
                    "hz": num(o.hz),
                    "measured": num(o.measured),
                    "expected": num(o.expected),
                    "modified_z": num(o.modified_z),
                    "loo_rms_with": num(o.loo_rms_with),
                    "loo_rms_without": num(o.loo_rms_without),
                    "likely_typed_for": o.likely_typed_for,
                    "message": o.message(),
                }),
            );
        }
        v
    }

    /// The report for people.
    pub fn to_text(&self) -> String {
        let mut s = String::new();
        let _ = writeln!(s, "model: {} ({})", self.model, self.structure);
        let _ = writeln!(s, "why:   {}", self.note);
        if !self.coefficients.is_empty() {
            let names: Vec<String> = match self.structure.as_str() {
                x if x.starts_with("steps = a") => ["a", "b", "c"]
                    .iter()
                    .take(self.coefficients.len())
                    .map(|n| n.to_string())
                    .collect(),
                _ => (0..self.coefficients.len())
                    .map(|i| format!("c{i}"))
                    .collect(),
            };
            let parts: Vec<String> = names
                .iter()
                .zip(&self.coefficients)
                .map(|(n, c)| format!("{n} = {c:.15e}"))
                .collect();
            let _ = writeln!(s, "coefficients (f in Hz): {}", parts.join(", "));
        }
        let _ = writeln!(s);
        let _ = writeln!(
            s,
            "  {:>14} {:>11} {:>11} {:>12} {:>11} {:>9}  profile",
            "Hz", "steps", "fitted", "resid steps", "resid Hz", "of 1.5 BW"
        );
        let line = |s: &mut String, mark: &str, r: &PointRow| {
            let share = r
                .bandwidth_share
                .map_or("-".to_string(), |v| format!("{:.1}%", v * 100.0));
            let _ = writeln!(
                s,
                "{mark} {:>14.0} {:>11.2} {:>11.2} {:>+12.2} {:>+11.0} {:>9}  {}",
                r.hz,
                r.steps,
                r.fitted,
                r.residual_steps,
                r.residual_hz,
                share,
                r.profile.as_deref().unwrap_or("")
            );
        };
        for r in &self.rows {
            line(&mut s, " ", r);
        }
        if !self.candidates.is_empty() {
            let _ = writeln!(
                s,
                "candidates (marked *; not in the fit; `--accept` adds them to the points file):"
            );
            for r in &self.candidates {
                line(&mut s, "*", r);
            }
        }
        let _ = writeln!(s);
        let _ = writeln!(
            s,
            "residual SD: {:.4} steps   R²: {:.9}   leave-one-out RMS: {}",
            self.residual_sd,
            self.r_squared,
            self.loo_rms
                .map_or("n/a (too few points)".to_string(), |v| format!(
                    "{v:.3} steps"
                ))
        );
        for b in &self.bands {
            let gap = b.largest_gap.map_or("-".to_string(), |(a, z)| {
                format!("{:.1} kHz ({} to {})", (z - a) / 1e3, mhz(a), mhz(z))
            });
            let _ = writeln!(
                s,
                "band {}: {} point(s), largest gap {}",
                b.name, b.points, gap
            );
        }
        for p in &self.profiles {
            let _ = writeln!(s, "{p}");
        }
        if let Some(o) = &self.outlier {
            let _ = writeln!(s, "likely wrong: {}", o.message());
        }
        for w in &self.warnings {
            let _ = writeln!(s, "warning: {w}");
        }
        s
    }
}
