//! Loop physics (src/antenna.rs) against published values, hand
//! computations and limiting cases. Each check names its source; values
//! recalled from memory say so.

use tuneward::antenna::*;
use tuneward::calibrate::{Calibration, ModelKind, Point, StepMap};
use tuneward::config::{AntennaConfig, BandConfig, Conductor};

fn close(got: f64, want: f64, rel: f64) -> bool {
    ((got - want) / want).abs() <= rel
}

/// C. A. Balanis, Antenna Theory, 3rd ed., Example 5.1 (recalled): a
/// single-turn circular loop of radius λ/25 has R_r ≈ 0.788 Ω; eight turns
/// (N² times) ≈ 50.4 Ω.
#[test]
fn radiation_resistance_matches_balanis_example() {
    let hz = 10e6;
    let lambda = C0 / hz;
    let b = lambda / 25.0;
    let area = std::f64::consts::PI * b * b;
    let r = radiation_resistance_ohm(area, hz);
    assert!(close(r, 0.788, 0.002), "{r}");
    assert!(close(64.0 * r, 50.4, 0.002), "{}", 64.0 * r);
}

/// ARRL Antenna Book, small loop chapter (recalled): R_rad = 31171 A²/λ⁴.
#[test]
fn radiation_resistance_constant_matches_arrl_form() {
    // λ = 1 m, A = 1 m²: the constant itself.
    let r = radiation_resistance_ohm(1.0, C0);
    assert!(close(r, 31171.0, 1e-4), "{r}");
}

/// Limiting case: R_rad grows with the square of the area and the fourth
/// power of frequency.
#[test]
fn doubling_area_quadruples_radiation_resistance() {
    let r1 = radiation_resistance_ohm(0.5, 7e6);
    let r2 = radiation_resistance_ohm(1.0, 7e6);
    assert!(close(r2 / r1, 4.0, 1e-12));
    let r3 = radiation_resistance_ohm(0.5, 14e6);
    assert!(close(r3 / r1, 16.0, 1e-12));
}

/// ARRL Antenna Book (recalled): loss resistance of a copper conductor
/// R_L = 9.96e-4 √f(MHz) · S/d, S in feet, d in inches, which follows from
/// R_s = √(π f μ0 ρ) with annealed copper ρ = 1.72e-8 Ω·m.
#[test]
fn loss_resistance_matches_arrl_constant() {
    let foot = 0.3048;
    let inch = 0.0254;
    let r = loss_resistance_ohm(foot, inch, 1.72e-8, 1e6);
    assert!(close(r, 9.96e-4, 0.002), "{r}");
    // √f scaling.
    let r4 = loss_resistance_ohm(foot, inch, 1.72e-8, 4e6);
    assert!(close(r4 / r, 2.0, 1e-12));
}

/// Skin depth of copper at 1 MHz ≈ 65 µm (handbook tables, e.g. the ARRL
/// Handbook's skin-depth table; recalled), with ρ = 1.68e-8 Ω·m (CRC
/// Handbook, recalled).
#[test]
fn skin_depth_of_copper_at_1_mhz() {
    let d = skin_depth_m(resistivity_ohm_m(Conductor::Copper), 1e6);
    assert!((d - 65.2e-6).abs() < 1.0e-6, "{d}");
    assert_eq!(resistivity_ohm_m(Conductor::Aluminium), 2.65e-8);
}

/// L = μ0 b (ln(8b/a) − 2) (Grover; Terman), by hand for a 1.0 m loop of
/// 22 mm tube: b = 0.5, a = 0.011, ln(363.636) = 5.89615, so
/// L = 6.28319e-7 × 3.89615 = 2.44801e-6 H.
#[test]
fn inductance_by_hand() {
    let l = loop_inductance_h(1.0, 0.022);
    assert!(close(l, 2.44801e-6, 1e-5), "{l}");
    // A thicker conductor lowers the inductance; a bigger loop raises it.
    assert!(loop_inductance_h(1.0, 0.044) < l);
    assert!(loop_inductance_h(2.0, 0.022) > 2.0 * l);
}

/// f = 1/(2π√(LC)) by hand: L = 1 µH, C = 100 pF gives √(LC) = 1e-8 s and
/// f = 1/(2π·1e-8) = 15.9155 MHz. And C = 1/(ω²L) by hand: L = 2.448 µH at
/// 7.1 MHz, ω = 4.46106e7, ω²L = 4.87178e9, C = 205.26 pF.
#[test]
fn resonance_by_hand() {
    let f = resonant_frequency_hz(1e-6, 100e-12);
    assert!(close(f, 15.9155e6, 1e-5), "{f}");
    let c = resonating_capacitance_f(7.1e6, 2.448e-6);
    assert!(close(c, 205.26e-12, 1e-4), "{c}");
    assert!(close(resonant_frequency_hz(2.448e-6, c), 7.1e6, 1e-12));
}

/// SWR bandwidth of a matched resonator (derivation beside
/// `swr_bandwidth_hz`; Yaghjian & Best 2005, recalled): the half-power
/// point of a matched system is |Γ|² = ½, i.e. S = 3 + 2√2, where the full
/// bandwidth must be the loaded half-power bandwidth f/Q_L = 2f/Q_u. At 2:1
/// the factor is 1/√2.
#[test]
fn swr_bandwidth_limits() {
    let (f, q) = (7.1e6, 1000.0);
    let s_half_power = 3.0 + 2.0 * 2f64.sqrt();
    assert!(close(
        swr_bandwidth_hz(f, q, s_half_power),
        2.0 * f / q,
        1e-12
    ));
    assert!(close(
        swr_bandwidth_hz(f, q, 2.0),
        f / q / 2f64.sqrt(),
        1e-12
    ));
    assert_eq!(swr_bandwidth_hz(f, q, 1.0), 0.0);
    // Bandwidth rises as Q falls.
    assert!(swr_bandwidth_hz(f, 500.0, 1.5) > swr_bandwidth_hz(f, 1000.0, 1.5));
}

/// Q falls as loss rises: aluminium (higher resistivity) against copper,
/// and a thinner conductor against a thicker one.
#[test]
fn q_falls_as_loss_rises() {
    let make = |d: f64, c: Conductor| SmallLoop {
        loop_diameter_m: 1.0,
        conductor_diameter_m: d,
        conductor: c,
    };
    let cu = make(0.022, Conductor::Copper).at(7.1e6);
    let al = make(0.022, Conductor::Aluminium).at(7.1e6);
    let thin = make(0.010, Conductor::Copper).at(7.1e6);
    assert!(al.q_unloaded < cu.q_unloaded);
    assert!(thin.q_unloaded < cu.q_unloaded);
    assert!(al.bandwidth_1_5_hz > cu.bandwidth_1_5_hz);
    assert!(close(
        cu.q_unloaded,
        unloaded_q(
            cu.reactance_ohm,
            cu.radiation_resistance_ohm + cu.loss_resistance_ohm
        ),
        1e-12
    ));
    // By hand for this loop at 7.1 MHz: X_L = 2π·7.1e6·2.448e-6 = 109.2 Ω,
    // R_rad = 31171·0.7854²/42.224⁴ = 0.00605 Ω, R_loss = 45.47·6.862e-4 =
    // 0.0312 Ω, Q ≈ 2930.
    assert!(close(cu.reactance_ohm, 109.2, 1e-3), "{}", cu.reactance_ohm);
    assert!(close(cu.radiation_resistance_ohm, 0.00605, 3e-3));
    assert!(close(cu.loss_resistance_ohm, 0.0312, 3e-3));
    assert!(close(cu.q_unloaded, 2930.0, 5e-3), "{}", cu.q_unloaded);
}

/// V = √(P · X_L · Q) (derivation beside `capacitor_voltage_rms`): by hand,
/// 100 W, 100 Ω, Q 1000 → √1e7 = 3162 V RMS; four times the power doubles it.
#[test]
fn capacitor_voltage_by_hand() {
    let v = capacitor_voltage_rms(100.0, 100.0, 1000.0);
    assert!(close(v, 3162.28, 1e-5), "{v}");
    assert!(close(
        capacitor_voltage_rms(400.0, 100.0, 1000.0),
        2.0 * v,
        1e-12
    ));
}

fn antenna(power: f64, rating: f64) -> AntennaConfig {
    AntennaConfig {
        loop_diameter_m: Some(1.0),
        conductor_diameter_m: Some(0.022),
        conductor: Conductor::Copper,
        power_w: Some(power),
        capacitor_rating_v: Some(rating),
    }
}

fn band40() -> BandConfig {
    BandConfig {
        name: "40m".to_string(),
        low_hz: 7_000_000,
        high_hz: 7_300_000,
        guard_hz: 0,
        hysteresis_hz: None,
        debounce_ms: None,
    }
}

fn loop_calibration() -> Calibration {
    // Capacitance 20 pF + 0.025 pF/step on the 2.448 µH loop (invented).
    let l = loop_inductance_h(1.0, 0.022);
    let pts: Vec<Point> = [7.0e6, 7.1e6, 7.2e6, 7.3e6]
        .iter()
        .map(|f| Point::new(*f, (resonating_capacitance_f(*f, l) - 20e-12) / 0.025e-12))
        .collect();
    Calibration::fit(ModelKind::Physics, &pts).unwrap()
}

#[test]
fn band_check_reports_bandwidth_and_hz_per_step() {
    let cal = loop_calibration();
    let c = check_band(&antenna(100.0, 15_000.0), &band40(), &cal).unwrap();
    assert_eq!(c.center_hz, 7.15e6);
    // steps = (1/(ω²L) − C0)/k: d steps/d f = −2/(k (2π)² L f³).
    let l = loop_inductance_h(1.0, 0.022);
    let f: f64 = 7.15e6;
    let slope = 2.0 / (0.025e-12 * (2.0 * std::f64::consts::PI).powi(2) * l * f.powi(3));
    assert!(close(c.hz_per_step, 1.0 / slope, 1e-6), "{}", c.hz_per_step);
    let e = c.estimate.unwrap();
    assert!(close(
        c.bandwidth_1_5_steps.unwrap(),
        e.bandwidth_1_5_hz / c.hz_per_step,
        1e-12
    ));
    let peak = c.capacitor_v_peak.unwrap();
    assert!(close(peak, c.capacitor_v_rms.unwrap() * 2f64.sqrt(), 1e-12));
    assert!(peak < 15_000.0 && peak > 5_000.0, "{peak}");
    // The check reports the highest voltage across the band. With loss
    // dominating, V² = P X²/R grows as f^1.5 (X ∝ f, R_loss ∝ √f), so on
    // this loop the high edge is the worst.
    let lp = SmallLoop::from_config(&antenna(100.0, 1.0)).unwrap();
    let v = |f: f64| {
        let e = lp.at(f);
        capacitor_voltage_rms(100.0, e.reactance_ohm, e.q_unloaded)
    };
    assert!(v(7.3e6) > v(7.0e6));
    assert!(close(c.capacitor_v_rms.unwrap(), v(7.3e6), 1e-12));
}

#[test]
fn high_voltage_is_refused_in_plain_words() {
    let cal = loop_calibration();
    let err = check_band(&antenna(1500.0, 5_000.0), &band40(), &cal).unwrap_err();
    let msg = err.to_string();
    assert!(msg.starts_with("HIGH VOLTAGE"), "{msg}");
    assert!(
        msg.contains("40m") && msg.contains("1500 W") && msg.contains("5000 V"),
        "{msg}"
    );
    assert!(matches!(err, AntennaError::HighVoltage { .. }));
    // Without a rating or power there is nothing to refuse.
    let mut a = antenna(1500.0, 5_000.0);
    a.capacitor_rating_v = None;
    assert!(check_band(&a, &band40(), &cal).is_ok());
}

#[test]
fn band_check_without_antenna_still_gives_hz_per_step() {
    let cal = loop_calibration();
    let c = check_band(&AntennaConfig::default(), &band40(), &cal).unwrap();
    assert!(c.estimate.is_none() && c.capacitor_v_peak.is_none());
    assert!(c.hz_per_step > 0.0);
    struct Flat;
    impl StepMap for Flat {
        fn steps_at(&self, _hz: f64) -> f64 {
            100.0
        }
    }
    assert!(matches!(
        check_band(&AntennaConfig::default(), &band40(), &Flat),
        Err(AntennaError::FlatCalibration { .. })
    ));
}

/// SWR of the matched loop detuned by `df`: z = 1 + j·2Q_u·df/f (series
/// resonator with R = Z0), |Γ| = |x|/√(4 + x²).
fn swr_detuned(q: f64, f: f64, df: f64) -> f64 {
    let x = 2.0 * q * df / f;
    let g = x.abs() / (4.0 + x * x).sqrt();
    (1.0 + g) / (1.0 - g)
}

/// The bandwidth formula and the impedance model agree: half the 1.5:1
/// bandwidth away the SWR is 1.5; at the automatic dead band (a quarter of
/// the width) it is about 1.23:1.
#[test]
fn auto_dead_band_edge_swr() {
    let a = antenna(100.0, 15_000.0);
    let f = 7.1e6;
    let e = SmallLoop::from_config(&a).unwrap().at(f);
    assert!((swr_detuned(e.q_unloaded, f, e.bandwidth_1_5_hz / 2.0) - 1.5).abs() < 1e-9);
    assert!((swr_detuned(e.q_unloaded, f, e.bandwidth_2_hz / 2.0) - 2.0).abs() < 1e-9);
    let h = auto_hysteresis_hz(&a, f).unwrap() as f64;
    let s = swr_detuned(e.q_unloaded, f, h);
    assert!((s - 1.226).abs() < 0.005, "{s}");
}
