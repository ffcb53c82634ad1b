//! Calibration: the map from frequency to motor steps.

use serde::Deserialize;

/// A map from frequency (Hz) to motor position (steps, fractional).
pub trait StepMap: Send + Sync {
    fn steps_at(&self, hz: f64) -> f64;
}

/// Which model a calibration uses.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum ModelKind {
    /// Monotone piecewise cubic through the points (Fritsch–Carlson).
    #[default]
    Interpolate,
    /// steps = a + b / f², fitted by least squares.
    Physics,
}

/// One measured point.
#[derive(Debug, Clone, PartialEq)]
pub struct Point {
    pub hz: f64,
    pub steps: f64,
}

impl Point {
    pub fn new(hz: f64, steps: f64) -> Self {
        Point { hz, steps }
    }
}

#[derive(Debug, thiserror::Error)]
pub enum CalibrationError {
    #[error("TODO")]
    Todo,
}

/// A fitted calibration.
#[derive(Debug, Clone)]
pub struct Calibration {}

impl Calibration {
    pub fn fit(_kind: ModelKind, _points: &[Point]) -> Result<Self, CalibrationError> {
        Err(CalibrationError::Todo)
    }
}

impl StepMap for Calibration {
    fn steps_at(&self, _hz: f64) -> f64 {
        0.0
    }
}

pub fn read_points_csv(_path: &std::path::Path) -> Result<Vec<Point>, CalibrationError> {
    Err(CalibrationError::Todo)
}
