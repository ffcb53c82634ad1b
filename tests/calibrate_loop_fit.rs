//! A physics fit of points "measured" on a loop predicts frequencies that
//! were not measured. The points come from the loop's physics: L from
//! μ0 b (ln(8b/a) − 2) (Grover; Terman), the resonating capacitance
//! C(f) = 1/((2πf)² L), a capacitor whose capacitance is linear in the
//! motor's travel, and a little reading noise. The model has to find its way
//! back from the points alone.

use tuneward::antenna::{loop_inductance_h, resonating_capacitance_f};
use tuneward::calibrate::{Calibration, CalibrationSet, FitSpec, ModelKind, Point, StepMap};

/// Small deterministic noise in [-amp, amp] (a fixed LCG, so the test is
/// reproducible).
fn noise(seed: &mut u64, amp: f64) -> f64 {
    *seed = seed
        .wrapping_mul(6364136223846793005)
        .wrapping_add(1442695040888963407);
    let u = (*seed >> 11) as f64 / (1u64 << 53) as f64;
    (2.0 * u - 1.0) * amp
}

struct Loop {
    l: f64,
    c_stray: f64,
    pf_per_step: f64,
}

impl Loop {
    fn steps(&self, hz: f64) -> f64 {
        (resonating_capacitance_f(hz, self.l) - self.c_stray) / (self.pf_per_step * 1e-12)
    }
}

#[test]
fn physics_fit_predicts_held_out_frequencies_within_a_step() {
    // 0.8 m loop of 15 mm copper; 12 pF stray + 8 pF minimum, 0.01 pF/step.
    let lp = Loop {
        l: loop_inductance_h(0.8, 0.015),
        c_stray: 20e-12,
        pf_per_step: 0.01,
    };
    let mut seed = 42;
    let measured = [7.0e6, 7.2e6, 10.12e6, 14.0e6, 14.3e6, 18.1e6];
    let pts: Vec<Point> = measured
        .iter()
        .map(|f| Point::new(*f, (lp.steps(*f) + noise(&mut seed, 0.5)).round()))
        .collect();
    let cal = Calibration::fit(ModelKind::Physics, &pts).unwrap();
    for f in [
        7.1e6, 7.3e6, 10.1e6, 10.15e6, 14.175e6, 14.35e6, 18.168e6, 21.2e6,
    ] {
        let err = cal.steps_at(f) - lp.steps(f);
        assert!(err.abs() < 1.5, "{f} Hz: off by {err:.2} steps");
    }
    // It recovers the loop: b = 1/((2π)² L k), a = −C_stray/k.
    let k = cal.coefficients();
    let b = 1.0 / ((2.0 * std::f64::consts::PI).powi(2) * lp.l * lp.pf_per_step * 1e-12);
    assert!(((k[1] - b) / b).abs() < 1e-3, "{k:?} vs b = {b}");
    assert!((k[0] + 2000.0).abs() < 5.0, "{k:?}");
}

#[test]
fn auto_prefers_physics_and_interpolation_does_worse_between_bands() {
    let lp = Loop {
        l: loop_inductance_h(1.0, 0.022),
        c_stray: 15e-12,
        pf_per_step: 0.02,
    };
    let mut seed = 7;
    let measured = [
        7.0e6, 7.15e6, 7.3e6, 10.1e6, 10.15e6, 14.0e6, 14.175e6, 14.35e6,
    ];
    let pts: Vec<Point> = measured
        .iter()
        .map(|f| Point::new(*f, lp.steps(*f) + noise(&mut seed, 0.3)))
        .collect();
    let auto = Calibration::fit(ModelKind::Auto, &pts).unwrap();
    assert_eq!(auto.kind(), ModelKind::Physics, "{}", auto.note());
    let interp = Calibration::fit(ModelKind::Interpolate, &pts).unwrap();
    let f = 12.0e6; // between bands, never measured
    let e_phys = (auto.steps_at(f) - lp.steps(f)).abs();
    let e_interp = (interp.steps_at(f) - lp.steps(f)).abs();
    assert!(e_phys < 1.0, "{e_phys}");
    assert!(e_interp > e_phys, "{e_interp} vs {e_phys}");
    assert!(auto.loo_rms().unwrap() < interp.loo_rms().unwrap());
}

#[test]
fn non_linear_capacitor_earns_the_correction_term() {
    // Capacitance with a small quadratic term in travel: steps is then no
    // longer exactly a + b/f², and c/f⁴ should be chosen by leave-one-out.
    let l = loop_inductance_h(1.0, 0.022);
    let steps = |hz: f64| {
        let c = resonating_capacitance_f(hz, l) * 1e12; // pF
                                                        // c = 20 + 0.02 s + 2e-6 s² → solve for s.
        let (qa, qb, qc) = (2e-6, 0.02, 20.0 - c);
        (-qb + (qb * qb - 4.0 * qa * qc).sqrt()) / (2.0 * qa)
    };
    let pts: Vec<Point> = (0..10)
        .map(|i| {
            let f = 5.0e6 + i as f64 * 1.5e6;
            Point::new(f, steps(f))
        })
        .collect();
    let cal = Calibration::fit(ModelKind::Physics, &pts).unwrap();
    assert_eq!(
        cal.spec(),
        FitSpec::Physics { corrected: true },
        "{}",
        cal.note()
    );
    assert!(cal.note().contains("LOO"), "{}", cal.note());
    let plain = Calibration::fit_spec(FitSpec::Physics { corrected: false }, &pts).unwrap();
    assert!(cal.loo_rms().unwrap() < plain.loo_rms().unwrap());
}

#[test]
fn wet_profile_offsets_the_dry_curve() {
    let lp = Loop {
        l: loop_inductance_h(1.0, 0.022),
        c_stray: 20e-12,
        pf_per_step: 0.025,
    };
    // Rain adds about 0.3 pF: 12 steps at 0.025 pF/step.
    let mut pts: Vec<Point> = [7.0e6, 7.1e6, 7.2e6, 7.3e6]
        .iter()
        .map(|f| Point::new(*f, lp.steps(*f)))
        .collect();
    pts.push(Point::new(7.15e6, lp.steps(7.15e6) - 12.0).with_profile(Some("wet")));
    let set = CalibrationSet::fit(ModelKind::Physics, &pts).unwrap();
    let wet = set.map(Some("wet")).unwrap();
    let dry = set.map(None).unwrap();
    for f in [7.0e6, 7.25e6] {
        assert!((dry.steps_at(f) - wet.steps_at(f) - 12.0).abs() < 1e-6);
    }
}

#[test]
fn physics_refuses_non_positive_frequencies() {
    let pts = [Point::new(0.0, 10.0), Point::new(7e6, 5.0)];
    let msg = Calibration::fit(ModelKind::Physics, &pts)
        .unwrap_err()
        .to_string();
    assert!(
        msg.contains("point 1") && msg.contains("above 0 Hz"),
        "{msg}"
    );
    // Poly and interpolate take any abscissa.
    assert!(Calibration::fit(ModelKind::Interpolate, &pts).is_ok());
}
