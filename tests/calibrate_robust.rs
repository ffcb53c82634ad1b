//! Outside input never panics: arbitrary point-file text and arbitrary
//! points give a result or a located error.

use std::path::Path;

use proptest::prelude::*;
use tuneward::calibrate::{parse_points_csv, Calibration, FitOptions, ModelKind, Point, StepMap};

fn kinds() -> impl Strategy<Value = ModelKind> {
    prop_oneof![
        Just(ModelKind::Physics),
        Just(ModelKind::Poly),
        Just(ModelKind::Interpolate),
        Just(ModelKind::Auto),
    ]
}

fn any_f64() -> impl Strategy<Value = f64> {
    prop_oneof![
        -1e12f64..1e12,
        Just(0.0),
        Just(f64::NAN),
        Just(f64::INFINITY),
        Just(1e300),
        Just(-1e-300),
    ]
}

proptest! {
    #[test]
    fn any_text_parses_or_names_a_line(text in "[-0-9a-z,.#e \n]{0,200}") {
        match parse_points_csv(&text, Path::new("x.csv")) {
            Ok(points) => for p in points {
                prop_assert!(p.hz.is_finite() && p.steps.is_finite());
            },
            Err(e) => prop_assert!(e.to_string().starts_with("x.csv:"), "{}", e),
        }
    }

    #[test]
    fn any_points_fit_or_fail_cleanly(
        raw in prop::collection::vec((any_f64(), any_f64()), 0..12),
        kind in kinds(),
        degree in 0usize..40,
    ) {
        let points: Vec<Point> = raw.iter().map(|(h, s)| Point::new(*h, *s)).collect();
        if let Ok(cal) = Calibration::fit_with(FitOptions { kind, degree }, &points) {
            // Evaluating anywhere must not panic either.
            let _ = cal.steps_at(7.1e6);
            let _ = cal.steps_at(-1.0);
            let _ = cal.slope_at(f64::NAN);
        }
    }
}
