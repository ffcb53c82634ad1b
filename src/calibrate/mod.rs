//! Calibration: the map from frequency to motor steps.
//!
//! Three models, all fitted from measured points `(hz, steps)`:
//!
//! - **physics**: a small loop resonates where `C = 1 / ((2πf)² L)`; with the
//!   capacitance linear in the motor's travel, `steps = a + b / f²`. If the
//!   data call for it (leave-one-out error clearly smaller), a correction
//!   `c / f⁴` is added for a capacitor that is not quite linear.
//! - **poly**: a polynomial of a chosen degree in frequency.
//! - **interpolate**: a monotone piecewise cubic through the points
//!   (Fritsch–Carlson 1980), straight beyond the end points.
//!
//! `auto` fits the candidates and keeps the one with the smallest
//! leave-one-out (LOO) error, preferring physics when it is nearly as good.
//! All least squares go through `lsq` (centred, scaled, QR).

pub mod cli;
mod lsq;
mod monotone;
pub mod outlier;
pub mod plot;
mod points;
mod profiles;
pub mod report;
pub mod resonance;
pub mod swr_curve;

use std::path::PathBuf;

use crate::error::{Located, Place};
use serde::Deserialize;

pub use points::{
    accept_candidates, append_candidate, candidates_path, parse_points_csv, read_candidates,
    read_points_csv, valid_profile_name, write_atomic,
};
pub use profiles::{CalibrationSet, ProfileMap};

use lsq::{LsqFailure, PolyFit};
use monotone::MonotoneCubic;

/// A map from frequency (Hz) to motor position (steps, fractional).
pub trait StepMap: Send + Sync {
    fn steps_at(&self, hz: f64) -> f64;

    /// How many steps the map moves per Hz at `hz`: a central difference
    /// over a millionth of `hz` (at least 1 Hz) either side, wide enough
    /// for the map's rounding, narrow against its curvature.
    fn steps_per_hz(&self, hz: f64) -> f64 {
        let h = (hz * 1e-6).max(1.0);
        (self.steps_at(hz + h) - self.steps_at(hz - h)) / (2.0 * h)
    }
}

/// Which model a calibration uses.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum ModelKind {
    /// Monotone piecewise cubic through the points (Fritsch–Carlson).
    #[default]
    Interpolate,
    /// steps = a + b / f² (+ c / f⁴ where the data call for it), least squares.
    Physics,
    /// A polynomial in frequency of a chosen degree, least squares.
    Poly,
    /// Whichever of the above predicts left-out points best.
    Auto,
}

impl ModelKind {
    pub fn name(self) -> &'static str {
        match self {
            ModelKind::Interpolate => "interpolate",
            ModelKind::Physics => "physics",
            ModelKind::Poly => "poly",
            ModelKind::Auto => "auto",
        }
    }
}

/// Polynomial degree used when none is given.
pub const DEFAULT_POLY_DEGREE: usize = 2;

/// One measured point.
#[derive(Debug, Clone, PartialEq)]
pub struct Point {
    pub hz: f64,
    pub steps: f64,
    /// `None`: the base profile.
    pub profile: Option<String>,
    /// Relative weight in least squares (1 unless given).
    pub weight: f64,
}

impl Point {
    pub fn new(hz: f64, steps: f64) -> Self {
        Point {
            hz,
            steps,
            profile: None,
            weight: 1.0,
        }
    }

    pub fn with_profile(mut self, profile: Option<&str>) -> Self {
        self.profile = profile.map(str::to_string);
        self
    }

    pub fn with_weight(mut self, weight: f64) -> Self {
        self.weight = weight;
        self
    }
}

#[derive(Debug, thiserror::Error)]
pub enum CalibrationError {
    #[error("cannot read {path}: {source}")]
    Io {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    #[error("cannot write {path}: {source}")]
    Write {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    #[error("{0}")]
    Csv(Box<CsvProblem>),
    #[error("point {index} (hz = {hz}, steps = {steps}): expected {expected}")]
    BadPoint {
        index: usize,
        hz: f64,
        steps: f64,
        expected: &'static str,
    },
    #[error("model {model} needs at least {needed} points at distinct frequencies, found {found}")]
    TooFewPoints {
        model: String,
        needed: usize,
        found: usize,
    },
    #[error("model {model}: the points do not determine it ({detail}); measure more frequencies or lower the degree")]
    Degenerate { model: String, detail: String },
    #[error("no profile `{profile}`; known: {known}")]
    UnknownProfile { profile: String, known: String },
    #[error("profile `{profile}` has too few points for its own fit and there are no base points (without a profile) to offset it from")]
    NoBase { profile: String },
}

/// Where and how a point file is wrong.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{}", Located::render(Place::Cell { file: path.clone(), line: *line, column: column.clone() }, expected, found))]
pub struct CsvProblem {
    pub path: PathBuf,
    pub line: usize,
    pub column: String,
    pub expected: String,
    pub found: String,
}

/// A model with its structure fixed (what LOO refits).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FitSpec {
    /// `a + b/f²`, with `c/f⁴` when `corrected`.
    Physics {
        corrected: bool,
    },
    Poly {
        degree: usize,
    },
    Interpolate,
}

impl FitSpec {
    pub fn kind(self) -> ModelKind {
        match self {
            FitSpec::Physics { .. } => ModelKind::Physics,
            FitSpec::Poly { .. } => ModelKind::Poly,
            FitSpec::Interpolate => ModelKind::Interpolate,
        }
    }

    /// Human name: `physics`, `physics+c/f^4`, `poly-3`, `interpolate`.
    pub fn label(self) -> String {
        match self {
            FitSpec::Physics { corrected: false } => "physics".to_string(),
            FitSpec::Physics { corrected: true } => "physics+c/f^4".to_string(),
            FitSpec::Poly { degree } => format!("poly-{degree}"),
            FitSpec::Interpolate => "interpolate".to_string(),
        }
    }

    fn min_points(self) -> usize {
        match self {
            FitSpec::Physics { corrected } => 2 + usize::from(corrected),
            FitSpec::Poly { degree } => degree + 1,
            FitSpec::Interpolate => 2,
        }
    }
}

#[derive(Debug, Clone, PartialEq)]
enum Model {
    /// Polynomial in u = 1/f².
    Physics(PolyFit),
    Poly(PolyFit),
    Interpolate(MonotoneCubic),
}

/// A fitted calibration.
#[derive(Debug, Clone, PartialEq)]
pub struct Calibration {
    spec: FitSpec,
    model: Model,
    points: Vec<Point>,
    loo_rms: Option<f64>,
    note: String,
}

/// How a fit is asked for: the model and, for `poly`, the degree.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct FitOptions {
    pub kind: ModelKind,
    pub degree: usize,
}

impl FitOptions {
    pub fn new(kind: ModelKind) -> Self {
        FitOptions {
            kind,
            degree: DEFAULT_POLY_DEGREE,
        }
    }
}

/// Finite numbers and positive weights everywhere; the physics model also
/// needs frequencies above zero (poly and interpolate take any abscissa,
/// which is what lets the NIST polynomial datasets run through them).
fn check_points(points: &[Point], spec_needs_positive: bool) -> Result<(), CalibrationError> {
    for (i, p) in points.iter().enumerate() {
        let usable =
            p.hz.is_finite() && p.steps.is_finite() && p.weight.is_finite() && p.weight > 0.0;
        let bad = |expected| CalibrationError::BadPoint {
            index: i + 1,
            hz: p.hz,
            steps: p.steps,
            expected,
        };
        if !usable {
            return Err(bad("finite frequency and steps and a positive weight"));
        }
        if spec_needs_positive && p.hz <= 0.0 {
            return Err(bad(
                "a frequency above 0 Hz (the physics model divides by f²)",
            ));
        }
    }
    Ok(())
}

fn distinct_hz(points: &[Point]) -> usize {
    let mut hz: Vec<f64> = points.iter().map(|p| p.hz).collect();
    hz.sort_by(f64::total_cmp);
    hz.dedup();
    hz.len()
}

fn lsq_error(spec: FitSpec, e: LsqFailure, found: usize) -> CalibrationError {
    match e {
        LsqFailure::TooFew { needed, .. } => CalibrationError::TooFewPoints {
            model: spec.label(),
            needed,
            found,
        },
        LsqFailure::RankDeficient => CalibrationError::Degenerate {
            model: spec.label(),
            detail: "too few distinct frequencies for its coefficients".to_string(),
        },
        LsqFailure::NotFinite => CalibrationError::Degenerate {
            model: spec.label(),
            detail: "the arithmetic left the range of numbers".to_string(),
        },
    }
}

fn fit_model(spec: FitSpec, points: &[Point]) -> Result<Model, CalibrationError> {
    let found = distinct_hz(points);
    if found < spec.min_points() {
        return Err(CalibrationError::TooFewPoints {
            model: spec.label(),
            needed: spec.min_points(),
            found,
        });
    }
    let y: Vec<f64> = points.iter().map(|p| p.steps).collect();
    let w: Vec<f64> = points.iter().map(|p| p.weight).collect();
    match spec {
        FitSpec::Physics { corrected } => {
            let u: Vec<f64> = points.iter().map(|p| 1.0 / (p.hz * p.hz)).collect();
            lsq::fit_poly(&u, &y, &w, 1 + usize::from(corrected))
                .map(Model::Physics)
                .map_err(|e| lsq_error(spec, e, found))
        }
        FitSpec::Poly { degree } => {
            let x: Vec<f64> = points.iter().map(|p| p.hz).collect();
            lsq::fit_poly(&x, &y, &w, degree)
                .map(Model::Poly)
                .map_err(|e| lsq_error(spec, e, found))
        }
        FitSpec::Interpolate => {
            // Points at the same frequency are merged into their weighted mean.
            let mut sorted: Vec<&Point> = points.iter().collect();
            sorted.sort_by(|a, b| a.hz.total_cmp(&b.hz));
            let mut xs: Vec<f64> = Vec::new();
            let mut sums: Vec<(f64, f64)> = Vec::new();
            for p in sorted {
                match (xs.last(), sums.last_mut()) {
                    (Some(x), Some(s)) if *x == p.hz => {
                        s.0 += p.weight * p.steps;
                        s.1 += p.weight;
                    }
                    _ => {
                        xs.push(p.hz);
                        sums.push((p.weight * p.steps, p.weight));
                    }
                }
            }
            let ys = sums.iter().map(|(s, w)| s / w).collect();
            MonotoneCubic::new(xs, ys).map(Model::Interpolate).ok_or(
                CalibrationError::TooFewPoints {
                    model: spec.label(),
                    needed: 2,
                    found,
                },
            )
        }
    }
}

impl Model {
    fn eval(&self, hz: f64) -> f64 {
        match self {
            Model::Physics(f) => f.eval(1.0 / (hz * hz)),
            Model::Poly(f) => f.eval(hz),
            Model::Interpolate(m) => m.eval(hz),
        }
    }

    fn slope(&self, hz: f64) -> f64 {
        match self {
            Model::Physics(f) => f.deriv(1.0 / (hz * hz)) * (-2.0 / (hz * hz * hz)),
            Model::Poly(f) => f.deriv(hz),
            Model::Interpolate(m) => m.deriv(hz),
        }
    }
}

/// Leave-one-out RMS prediction error in steps; None where some refit fails
/// (too few points left).
pub fn loo_rms(spec: FitSpec, points: &[Point]) -> Option<f64> {
    if points.len() < 3 {
        return None;
    }
    let mut sum = 0.0;
    for i in 0..points.len() {
        let rest: Vec<Point> = points
            .iter()
            .enumerate()
            .filter(|(j, _)| *j != i)
            .map(|(_, p)| p.clone())
            .collect();
        let left = points.get(i)?;
        let model = fit_model(spec, &rest).ok()?;
        let e = model.eval(left.hz) - left.steps;
        if !e.is_finite() {
            return None;
        }
        sum += e * e;
    }
    Some((sum / points.len() as f64).sqrt())
}

fn fmt_loo(v: Option<f64>) -> String {
    v.map_or("n/a".to_string(), |v| format!("{v:.2} steps"))
}

impl Calibration {
    /// Fits `kind` to the points (degree [`DEFAULT_POLY_DEGREE`] for `poly`).
    pub fn fit(kind: ModelKind, points: &[Point]) -> Result<Self, CalibrationError> {
        Self::fit_with(FitOptions::new(kind), points)
    }

    /// Fits with options; `auto` and `physics` choose their structure by
    /// leave-one-out cross-validation and say why in [`Calibration::note`].
    pub fn fit_with(options: FitOptions, points: &[Point]) -> Result<Self, CalibrationError> {
        check_points(
            points,
            matches!(options.kind, ModelKind::Physics | ModelKind::Auto),
        )?;
        match options.kind {
            ModelKind::Interpolate => Self::fit_spec(FitSpec::Interpolate, points),
            ModelKind::Poly => Self::fit_spec(
                FitSpec::Poly {
                    degree: options.degree,
                },
                points,
            ),
            ModelKind::Physics => Self::fit_physics(points),
            ModelKind::Auto => Self::fit_auto(points),
        }
    }

    /// Fits one fixed structure.
    pub fn fit_spec(spec: FitSpec, points: &[Point]) -> Result<Self, CalibrationError> {
        check_points(points, matches!(spec, FitSpec::Physics { .. }))?;
        let model = fit_model(spec, points)?;
        Ok(Calibration {
            spec,
            model,
            points: points.to_vec(),
            loo_rms: loo_rms(spec, points),
            note: format!("{} as asked", spec.label()),
        })
    }

    fn fit_physics(points: &[Point]) -> Result<Self, CalibrationError> {
        let mut plain = Self::fit_spec(FitSpec::Physics { corrected: false }, points)?;
        // The correction needs spare points: LOO on 3 parameters with at
        // least 2 points of slack.
        if distinct_hz(points) < 5 {
            plain.note = format!(
                "physics a + b/f^2 (LOO {}); too few points to test a c/f^4 correction",
                fmt_loo(plain.loo_rms)
            );
            return Ok(plain);
        }
        let corrected = Self::fit_spec(FitSpec::Physics { corrected: true }, points);
        match (plain.loo_rms, corrected) {
            (Some(lp), Ok(mut c)) if c.loo_rms.is_some_and(|lc| lc < 0.8 * lp) => {
                c.note = format!(
                    "physics with c/f^4 correction: LOO {} against {} without",
                    fmt_loo(c.loo_rms),
                    fmt_loo(Some(lp))
                );
                Ok(c)
            }
            (lp, c) => {
                let lc = c.ok().and_then(|c| c.loo_rms);
                plain.note = format!(
                    "physics a + b/f^2: LOO {}; a c/f^4 correction would give {} (kept only if 20% better)",
                    fmt_loo(lp),
                    fmt_loo(lc)
                );
                Ok(plain)
            }
        }
    }

    fn fit_auto(points: &[Point]) -> Result<Self, CalibrationError> {
        let n = distinct_hz(points);
        let physics = Self::fit_physics(points)?;
        if n < 4 {
            let mut c = physics;
            c.note = format!(
                "auto: physics, because {n} points are too few to compare models by leave-one-out"
            );
            return Ok(c);
        }
        let mut candidates: Vec<Calibration> = vec![physics];
        if let Ok(c) = Self::fit_spec(FitSpec::Interpolate, points) {
            candidates.push(c);
        }
        for degree in 1..=3 {
            if n >= degree + 3 {
                if let Ok(c) = Self::fit_spec(FitSpec::Poly { degree }, points) {
                    candidates.push(c);
                }
            }
        }
        let score = |c: &Calibration| c.loo_rms.unwrap_or(f64::INFINITY);
        let best = candidates.iter().map(score).fold(f64::INFINITY, f64::min);
        let summary = candidates
            .iter()
            .map(|c| format!("{} {}", c.spec.label(), fmt_loo(c.loo_rms)))
            .collect::<Vec<_>>()
            .join(", ");
        // Physics is preferred within 10% of the best: it extrapolates sanely.
        let chosen = candidates
            .iter()
            .position(|c| matches!(c.spec, FitSpec::Physics { .. }) && score(c) <= 1.1 * best)
            .or_else(|| candidates.iter().position(|c| score(c) <= best))
            .unwrap_or(0);
        let mut pick = candidates.swap_remove(chosen.min(candidates.len().saturating_sub(1)));
        pick.note = format!(
            "auto: chose {} by leave-one-out error (physics kept when within 10% of the best); {}",
            pick.spec.label(),
            summary
        );
        Ok(pick)
    }

    /// The structure that was fitted.
    pub fn spec(&self) -> FitSpec {
        self.spec
    }

    /// `physics`, `poly` or `interpolate`.
    pub fn kind(&self) -> ModelKind {
        self.spec.kind()
    }

    /// Why this model (and structure) was chosen.
    pub fn note(&self) -> &str {
        &self.note
    }

    /// The points it was fitted to.
    pub fn points(&self) -> &[Point] {
        &self.points
    }

    /// Coefficients in raw units: physics `[a, b(, c)]` for
    /// `a + b/f² (+ c/f⁴)`; poly `[c0, c1, …]` multiplying `f^i` (f in Hz);
    /// interpolate: none.
    pub fn coefficients(&self) -> Vec<f64> {
        match &self.model {
            Model::Physics(f) | Model::Poly(f) => f.raw.clone(),
            Model::Interpolate(_) => Vec::new(),
        }
    }

    /// Leave-one-out RMS error in steps, where defined.
    pub fn loo_rms(&self) -> Option<f64> {
        self.loo_rms
    }

    /// d steps / d Hz at `hz`.
    pub fn slope_at(&self, hz: f64) -> f64 {
        self.model.slope(hz)
    }

    /// Number of fitted parameters (for residual degrees of freedom); for
    /// interpolation, the number of knots (distinct frequencies).
    pub fn parameters(&self) -> usize {
        match &self.model {
            Model::Physics(f) | Model::Poly(f) => f.scaled.len(),
            Model::Interpolate(m) => m.knots(),
        }
    }
}

impl StepMap for Calibration {
    fn steps_at(&self, hz: f64) -> f64 {
        self.model.eval(hz)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn loop_points(freqs: &[f64]) -> Vec<Point> {
        // steps = 120 + 3.2e17 / f²  (an invented loop)
        freqs
            .iter()
            .map(|f| Point::new(*f, 120.0 + 3.2e17 / (f * f)))
            .collect()
    }

    #[test]
    fn physics_recovers_its_own_form() {
        let pts = loop_points(&[7.0e6, 7.1e6, 7.2e6, 7.3e6, 10.1e6, 14.0e6]);
        let c = Calibration::fit(ModelKind::Physics, &pts).unwrap();
        let k = c.coefficients();
        assert_eq!(k.len(), 2, "{}", c.note());
        assert!((k[0] - 120.0).abs() < 1e-6, "{k:?}");
        assert!((k[1] / 3.2e17 - 1.0).abs() < 1e-12, "{k:?}");
        assert!((c.steps_at(8e6) - (120.0 + 3.2e17 / 64e12)).abs() < 1e-6);
        let f = 9e6;
        let slope = -2.0 * 3.2e17 / (f * f * f);
        assert!((c.slope_at(f) / slope - 1.0).abs() < 1e-9);
    }

    #[test]
    fn physics_takes_the_correction_when_data_need_it() {
        let pts: Vec<Point> = (0..8)
            .map(|i| {
                let f = 3.5e6 + i as f64 * 1.5e6;
                Point::new(f, 100.0 + 2.0e17 / (f * f) - 1.0e31 / f.powi(4))
            })
            .collect();
        let c = Calibration::fit(ModelKind::Physics, &pts).unwrap();
        assert_eq!(
            c.spec(),
            FitSpec::Physics { corrected: true },
            "{}",
            c.note()
        );
        // Exact a + b/f² data: whichever structure LOO keeps (both errors
        // are rounding noise), the prediction must be exact.
        let plain = loop_points(&[3.5e6, 5e6, 7e6, 10e6, 14e6, 18e6]);
        let c = Calibration::fit(ModelKind::Physics, &plain).unwrap();
        assert!((c.steps_at(12e6) - (120.0 + 3.2e17 / 144e12)).abs() < 1e-6);
    }

    #[test]
    fn auto_prefers_physics_on_loop_data_and_says_why() {
        let pts = loop_points(&[7.0e6, 7.1e6, 7.2e6, 7.3e6, 10.1e6, 14.0e6, 14.35e6]);
        let c = Calibration::fit(ModelKind::Auto, &pts).unwrap();
        assert_eq!(c.kind(), ModelKind::Physics, "{}", c.note());
        assert!(c.note().contains("leave-one-out"), "{}", c.note());
        assert!(c.note().contains("interpolate"), "{}", c.note());
    }

    #[test]
    fn too_few_points_and_bad_points_are_errors() {
        let one = [Point::new(7e6, 100.0)];
        assert!(matches!(
            Calibration::fit(ModelKind::Physics, &one),
            Err(CalibrationError::TooFewPoints { .. })
        ));
        let same = [Point::new(7e6, 100.0), Point::new(7e6, 101.0)];
        assert!(Calibration::fit(ModelKind::Interpolate, &same).is_err());
        let bad = [Point::new(7e6, 100.0), Point::new(f64::NAN, 1.0)];
        let msg = Calibration::fit(ModelKind::Poly, &bad)
            .unwrap_err()
            .to_string();
        assert!(msg.contains("point 2"), "{msg}");
        let neg_w = [Point::new(7e6, 1.0).with_weight(-1.0), Point::new(8e6, 2.0)];
        assert!(Calibration::fit(ModelKind::Interpolate, &neg_w).is_err());
    }

    #[test]
    fn interpolate_passes_through_points_and_merges_duplicates() {
        let pts = vec![
            Point::new(7.0e6, 4000.0),
            Point::new(7.1e6, 3900.0),
            Point::new(7.1e6, 3910.0),
            Point::new(7.3e6, 3700.0),
        ];
        let c = Calibration::fit(ModelKind::Interpolate, &pts).unwrap();
        assert_eq!(c.steps_at(7.0e6), 4000.0);
        assert_eq!(c.steps_at(7.1e6), 3905.0);
        assert!(c.coefficients().is_empty());
    }
}
