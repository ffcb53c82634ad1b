//! Profiles: the same loop under different conditions (dry, wet, iced…).
//!
//! Points without a profile form the base calibration. A profile with enough
//! points of its own (at least as many as the model needs, and never fewer
//! than three) gets its own fit; one with fewer is the base shifted by a
//! constant number of steps, the weighted mean of its points' differences
//! from the base curve.

use std::collections::BTreeMap;
use std::sync::Arc;

use super::{Calibration, CalibrationError, FitOptions, ModelKind, Point, StepMap};

/// How one profile maps frequency to steps.
#[derive(Debug, Clone)]
pub enum ProfileMap {
    /// Fitted from its own points.
    Own(Arc<Calibration>),
    /// The base plus a constant, from `points` points.
    Offset {
        base: Arc<Calibration>,
        offset_steps: f64,
        points: usize,
    },
}

impl StepMap for ProfileMap {
    fn steps_at(&self, hz: f64) -> f64 {
        match self {
            ProfileMap::Own(c) => c.steps_at(hz),
            ProfileMap::Offset {
                base, offset_steps, ..
            } => base.steps_at(hz) + offset_steps,
        }
    }
}

/// A base calibration and its profiles.
#[derive(Debug, Clone)]
pub struct CalibrationSet {
    base: Option<Arc<Calibration>>,
    profiles: BTreeMap<String, ProfileMap>,
}

fn needed_points(options: FitOptions) -> usize {
    let model = match options.kind {
        ModelKind::Poly => options.degree + 1,
        _ => 2,
    };
    model.max(3)
}

impl CalibrationSet {
    /// Fits the base and every profile with `kind` (poly: default degree).
    pub fn fit(kind: ModelKind, points: &[Point]) -> Result<CalibrationSet, CalibrationError> {
        Self::fit_with(FitOptions::new(kind), points)
    }

    pub fn fit_with(
        options: FitOptions,
        points: &[Point],
    ) -> Result<CalibrationSet, CalibrationError> {
        let base_points: Vec<Point> = points
            .iter()
            .filter(|p| p.profile.is_none())
            .cloned()
            .collect();
        let base = if base_points.is_empty() {
            None
        } else {
            Some(Arc::new(Calibration::fit_with(options, &base_points)?))
        };
        let mut grouped: BTreeMap<String, Vec<Point>> = BTreeMap::new();
        for p in points {
            if let Some(name) = &p.profile {
                grouped.entry(name.clone()).or_default().push(p.clone());
            }
        }
        let mut profiles = BTreeMap::new();
        for (name, pts) in grouped {
            let distinct = {
                let mut hz: Vec<f64> = pts.iter().map(|p| p.hz).collect();
                hz.sort_by(f64::total_cmp);
                hz.dedup();
                hz.len()
            };
            let map = if distinct >= needed_points(options) {
                ProfileMap::Own(Arc::new(Calibration::fit_with(options, &pts)?))
            } else {
                let Some(base) = &base else {
                    return Err(CalibrationError::NoBase { profile: name });
                };
                let (sum, wsum) = pts.iter().fold((0.0, 0.0), |(s, w), p| {
                    (s + p.weight * (p.steps - base.steps_at(p.hz)), w + p.weight)
                });
                ProfileMap::Offset {
                    base: Arc::clone(base),
                    offset_steps: sum / wsum,
                    points: pts.len(),
                }
            };
            profiles.insert(name, map);
        }
        Ok(CalibrationSet { base, profiles })
    }

    /// Profile names, sorted.
    pub fn profiles(&self) -> Vec<String> {
        self.profiles.keys().cloned().collect()
    }

    /// The base calibration (points without a profile), if there are any.
    pub fn base(&self) -> Option<&Arc<Calibration>> {
        self.base.as_ref()
    }

    /// How a profile is mapped (own fit or offset).
    pub fn profile(&self, name: &str) -> Option<&ProfileMap> {
        self.profiles.get(name)
    }

    /// The map for a profile; `None` is the base.
    pub fn map(&self, profile: Option<&str>) -> Result<Arc<dyn StepMap>, CalibrationError> {
        match profile {
            None => match &self.base {
                Some(b) => Ok(Arc::clone(b) as Arc<dyn StepMap>),
                None => Err(CalibrationError::UnknownProfile {
                    profile: "(base: points without a profile)".to_string(),
                    known: self.known(),
                }),
            },
            Some(name) => match self.profiles.get(name) {
                Some(ProfileMap::Own(c)) => Ok(Arc::clone(c) as Arc<dyn StepMap>),
                Some(m) => Ok(Arc::new(m.clone()) as Arc<dyn StepMap>),
                None => Err(CalibrationError::UnknownProfile {
                    profile: name.to_string(),
                    known: self.known(),
                }),
            },
        }
    }

    fn known(&self) -> String {
        let mut names: Vec<String> = Vec::new();
        if self.base.is_some() {
            names.push("(base)".to_string());
        }
        names.extend(self.profiles.keys().cloned());
        if names.is_empty() {
            "none".to_string()
        } else {
            names.join(", ")
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn base_at(f: f64) -> f64 {
        150.0 + 3.0e17 / (f * f)
    }

    fn points() -> Vec<Point> {
        let mut pts: Vec<Point> = [7.0e6, 7.1e6, 7.2e6, 7.3e6]
            .iter()
            .map(|f| Point::new(*f, base_at(*f)))
            .collect();
        // wet: two points 12 steps lower than the base.
        pts.push(Point::new(7.05e6, base_at(7.05e6) - 12.0).with_profile(Some("wet")));
        pts.push(Point::new(7.25e6, base_at(7.25e6) - 12.0).with_profile(Some("wet")));
        // iced: its own curve.
        for f in [7.0e6, 7.1e6, 7.2e6, 7.3e6] {
            pts.push(Point::new(f, 90.0 + 3.1e17 / (f * f)).with_profile(Some("iced")));
        }
        pts
    }

    #[test]
    fn offset_and_own_profiles() {
        let set = CalibrationSet::fit(ModelKind::Physics, &points()).unwrap();
        assert_eq!(set.profiles(), vec!["iced".to_string(), "wet".to_string()]);
        let f = 7.15e6;
        let base = set.map(None).unwrap();
        assert!((base.steps_at(f) - base_at(f)).abs() < 1e-6);
        let wet = set.map(Some("wet")).unwrap();
        assert!((wet.steps_at(f) - (base_at(f) - 12.0)).abs() < 1e-6);
        assert!(matches!(
            set.profile("wet"),
            Some(ProfileMap::Offset { points: 2, .. })
        ));
        let iced = set.map(Some("iced")).unwrap();
        assert!((iced.steps_at(f) - (90.0 + 3.1e17 / (f * f))).abs() < 1e-6);
        let msg = set.map(Some("snow")).err().unwrap().to_string();
        assert!(msg.contains("snow") && msg.contains("wet"), "{msg}");
    }

    #[test]
    fn offset_profile_without_base_is_refused() {
        let pts = vec![Point::new(7e6, 1.0).with_profile(Some("wet"))];
        assert!(matches!(
            CalibrationSet::fit(ModelKind::Physics, &pts),
            Err(CalibrationError::NoBase { .. })
        ));
    }
}
