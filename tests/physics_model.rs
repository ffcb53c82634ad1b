//! The `physics` calibration model against the resonance formula.
//!
//! A loop of inductance L resonates where f = 1/(2π√(LC)) (the LC resonance
//! formula, any circuit-theory text). With a capacitor whose capacitance is
//! linear in travel, C = C0 + k·steps, the motor position for resonance at f
//! is steps = (1/((2πf)²L) − C0)/k = a + b/f² with a = −C0/k and
//! b = 1/(4π²Lk). Values below were computed by hand (calculator) for
//! L = 2.000 µH, C0 = 10.00 pF, k = 0.0100 pF per step:
//!   f =  5 MHz: C = 506.606 pF -> 49 660.6 steps
//!   f =  7 MHz: C = 258.472 pF -> 24 847.2 steps
//!   f = 10 MHz: C = 126.651 pF -> 11 665.1 steps
//!   f = 14 MHz: C =  64.618 pF ->  5 461.8 steps
//!   a = −1 000, b = 1.266 515e18

use tuneward::calibrate::{Calibration, ModelKind, Point, StepMap};

#[test]
fn physics_fit_recovers_the_lc_resonance_by_hand() {
    let points = [
        Point::new(5e6, 49_660.6),
        Point::new(7e6, 24_847.2),
        Point::new(14e6, 5_461.8),
    ];
    let cal = Calibration::fit(ModelKind::Physics, &points).unwrap();
    // An unmeasured frequency, by hand above: 10 MHz -> 11 665.1 steps.
    assert!(
        (cal.steps_at(10e6) - 11_665.1).abs() < 0.2,
        "{}",
        cal.steps_at(10e6)
    );
    let c = cal.coefficients();
    assert!((c[0] - -1_000.0).abs() < 0.2, "a = {}", c[0]);
    assert!((c[1] / 1.266_515e18 - 1.0).abs() < 1e-5, "b = {}", c[1]);
}

#[test]
fn physics_map_inverts_to_the_resonant_frequency() {
    // From the fitted steps back through C = C0 + k·steps to f = 1/(2π√(LC)):
    // the round trip lands on the frequency asked for.
    let points = [
        Point::new(5e6, 49_660.6),
        Point::new(7e6, 24_847.2),
        Point::new(14e6, 5_461.8),
    ];
    let cal = Calibration::fit(ModelKind::Physics, &points).unwrap();
    for f in [6e6, 8.5e6, 12e6] {
        let c = 10e-12 + 0.01e-12 * cal.steps_at(f);
        let back = 1.0 / (2.0 * std::f64::consts::PI * (2e-6 * c).sqrt());
        assert!((back - f).abs() / f < 1e-5, "{f} -> {back}");
    }
}
