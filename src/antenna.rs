//! Physics of a small single-turn transmitting loop: inductance, radiation
//! and loss resistance, Q, SWR bandwidth, capacitor voltage.
//!
//! These are estimates for the `check` command and for `hysteresis_hz =
//! "auto"`; they assume a single circular turn of round conductor, uniform
//! current (circumference well below λ/4), skin-effect loss only (no
//! proximity effect, no capacitor or joint losses, no ground). Real loops
//! have more loss than this, so the real Q is lower, the real bandwidth wider
//! and the real capacitor voltage lower: the voltage estimate errs on the
//! safe side.
//!
//! Sources, beside each formula:
//! - F. W. Grover, *Inductance Calculations* (1946), circular ring of round
//!   wire at high frequency; also F. E. Terman, *Radio Engineers' Handbook*
//!   (1943), section on inductance of a circular loop:
//!   `L = μ0 b (ln(8b/a) − 2)`.
//! - C. A. Balanis, *Antenna Theory*, 3rd ed., §5.2 (small circular loop):
//!   `R_rad = 20 π² (C/λ)⁴ = 320 π⁴ A²/λ⁴ ≈ 31171 A²/λ⁴`; the same form is in
//!   the ARRL Antenna Book's chapter on loop antennas.
//! - Skin effect: `R_s = √(π f μ0 ρ)`, resistance of a round conductor of
//!   length ℓ and diameter d at high frequency `ℓ R_s / (π d)` (Ramo,
//!   Whinnery & Van Duzer, *Fields and Waves in Communication Electronics*,
//!   skin effect in round wires; recalled).
//! - Resistivities at 20 °C: copper 1.68e-8 Ω·m, aluminium 2.65e-8 Ω·m
//!   (CRC Handbook of Chemistry and Physics, "Electrical resistivity of pure
//!   metals"; recalled).
//! - SWR bandwidth of a matched resonator: derived in [`swr_bandwidth_hz`];
//!   the same result is A. D. Yaghjian and S. R. Best, "Impedance, bandwidth,
//!   and Q of antennas", IEEE Trans. Antennas Propag. 53(4), 2005, eq. for
//!   the matched VSWR bandwidth `FBW = (s − 1)/(Q √s)` (recalled).
//! - μ0 = 1.25663706212e-6 H/m (CODATA 2018).

use crate::calibrate::StepMap;

/// Conductor material of the loop.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Conductor {
    #[default]
    Copper,
    Aluminium,
}

/// An optional description of a small loop, for physics estimates (the
/// config's `[antenna]`; any field may be missing).
#[derive(Debug, Clone, Default, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LoopDescription {
    pub loop_diameter_m: Option<f64>,
    pub conductor_diameter_m: Option<f64>,
    #[serde(default)]
    pub conductor: Conductor,
    pub power_w: Option<f64>,
    pub capacitor_rating_v: Option<f64>,
}

/// A band's name and edges, for the per-band checks.
pub trait BandEdges {
    fn name(&self) -> &str;
    fn low_hz(&self) -> u64;
    fn high_hz(&self) -> u64;
}

/// A band's name and edges as plain values.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct BandSpan {
    pub name: String,
    pub low_hz: u64,
    pub high_hz: u64,
}

impl BandEdges for BandSpan {
    fn name(&self) -> &str {
        &self.name
    }
    fn low_hz(&self) -> u64 {
        self.low_hz
    }
    fn high_hz(&self) -> u64 {
        self.high_hz
    }
}

/// Vacuum permeability, H/m (CODATA 2018 recommended value).
pub const MU0: f64 = 1.256_637_062_12e-6;
/// Speed of light in vacuum, m/s (exact by definition of the metre).
pub const C0: f64 = 299_792_458.0;

/// Share of the 1.5:1 SWR bandwidth used as the automatic dead band (the
/// distance from the tuned frequency within which nothing moves). A quarter
/// of the full 1.5:1 width is half the way to a 1.5:1 edge, where the same
/// resonator model gives x = 0.204, |Γ| = 0.10, SWR ≈ 1.23:1. The share
/// itself is common practice, no source.
pub const AUTO_HYSTERESIS_SHARE: f64 = 0.25;

/// Resistivity at 20 °C in Ω·m (CRC Handbook of Chemistry and Physics;
/// recalled).
pub fn resistivity_ohm_m(conductor: Conductor) -> f64 {
    match conductor {
        Conductor::Copper => 1.68e-8,
        Conductor::Aluminium => 2.65e-8,
    }
}

/// Inductance (H) of a single circular turn of round conductor at high
/// frequency: `L = μ0 b (ln(8b/a) − 2)`, b the loop radius, a the conductor
/// radius (Grover 1946; Terman 1943).
pub fn loop_inductance_h(loop_diameter_m: f64, conductor_diameter_m: f64) -> f64 {
    let b = loop_diameter_m / 2.0;
    let a = conductor_diameter_m / 2.0;
    MU0 * b * ((8.0 * b / a).ln() - 2.0)
}

/// Radiation resistance (Ω) of a small loop of area `area_m2`:
/// `320 π⁴ A² / λ⁴` (Balanis, Antenna Theory, 3rd ed., eq. 5-24).
pub fn radiation_resistance_ohm(area_m2: f64, hz: f64) -> f64 {
    let lambda = C0 / hz;
    320.0 * std::f64::consts::PI.powi(4) * area_m2 * area_m2 / lambda.powi(4)
}

/// Skin depth (m): `δ = √(ρ / (π f μ0))`.
pub fn skin_depth_m(resistivity_ohm_m: f64, hz: f64) -> f64 {
    (resistivity_ohm_m / (std::f64::consts::PI * hz * MU0)).sqrt()
}

/// High-frequency resistance (Ω) of a round conductor of `length_m` and
/// `diameter_m`: `ℓ R_s / (π d)`, `R_s = √(π f μ0 ρ)` (skin effect only).
pub fn loss_resistance_ohm(length_m: f64, diameter_m: f64, resistivity_ohm_m: f64, hz: f64) -> f64 {
    let rs = (std::f64::consts::PI * hz * MU0 * resistivity_ohm_m).sqrt();
    length_m * rs / (std::f64::consts::PI * diameter_m)
}

/// Unloaded Q: `X_L / (R_rad + R_loss)`.
pub fn unloaded_q(reactance_ohm: f64, resistance_ohm: f64) -> f64 {
    reactance_ohm / resistance_ohm
}

/// Full bandwidth (Hz) between the two frequencies where the SWR reaches
/// `swr`, for a resonator of unloaded Q `q_unloaded` matched at `hz`
/// (critical coupling, so the loaded Q is `q_unloaded / 2`).
///
/// Derivation: near resonance the matched loop looks like a series RLC with
/// R = Z0, so its normalised impedance is `z = 1 + j x` with
/// `x = 2 Q_u Δf/f`. For `z = 1 + jx`, `|Γ|² = x²/(4 + x²)`; setting
/// `|Γ| = (S−1)/(S+1)` gives `x = (S−1)/√S`. Hence
/// `BW = 2Δf = (f/Q_u)(S−1)/√S = (f/(2 Q_L))(S−1)/√S`. Check: S = 3+2√2
/// (|Γ|² = ½) gives `f/Q_L`, the loaded half-power bandwidth. Yaghjian & Best
/// (2005) give the same `(s−1)/(Q√s)` with Q the antenna's own Q (recalled).
pub fn swr_bandwidth_hz(hz: f64, q_unloaded: f64, swr: f64) -> f64 {
    hz / q_unloaded * (swr - 1.0) / swr.sqrt()
}

/// SWR of a loop resonant at `resonance_hz`, matched there (critical
/// coupling), seen at `hz`, for unloaded Q `q_unloaded`.
///
/// Derivation (the same model as [`swr_bandwidth_hz`]): near resonance a
/// series RLC has `Z = R (1 + j 2 Q Δf/f0)` (D. M. Pozar, *Microwave
/// Engineering*, 4th ed., §6.1, series resonant circuit near resonance;
/// recalled). The loop is coupled so that at resonance it presents `Z0`,
/// and the Q of the loop itself in that form is `Q_u`, so the normalised
/// impedance is `z = 1 + j x`, `x = 2 Q_u δ`, `δ = (f − f0)/f0`. The
/// reflection coefficient is `Γ = (z − 1)/(z + 1)` (Pozar §2.3), so
/// `|Γ| = |x| / √(4 + x²)`, and `SWR = (1 + |Γ|)/(1 − |Γ|)`. At `x = 1`,
/// `|Γ| = 1/√5` and SWR = (3 + √5)/2 ≈ 2.618; at `x = 2`, `|Γ|² = ½` (the
/// loaded half-power points) and SWR = 3 + 2√2 ≈ 5.83. Infinite for a
/// non-finite detuning or Q.
pub fn swr_at(hz: f64, resonance_hz: f64, q_unloaded: f64) -> f64 {
    let delta = (hz - resonance_hz) / resonance_hz;
    let x = 2.0 * q_unloaded * delta;
    if !x.is_finite() {
        return f64::INFINITY;
    }
    let gamma = x.abs() / (4.0 + x * x).sqrt();
    if gamma >= 1.0 {
        return f64::INFINITY;
    }
    (1.0 + gamma) / (1.0 - gamma)
}

/// RMS voltage across the tuning capacitor with `power_w` delivered to the
/// matched loop: all the power is dissipated in `R = X_L/Q_u`, so the
/// circulating current is `I = √(P/R)` and `V = I X_C = I X_L = √(P X_L Q_u)`
/// (at resonance `X_C = X_L`). This is the common practice form
/// `V = √(P · X_L · Q)` with Q the unloaded Q; using the loaded Q there would
/// understate the voltage by √2. Peak voltage is √2 times this.
pub fn capacitor_voltage_rms(power_w: f64, reactance_ohm: f64, q_unloaded: f64) -> f64 {
    (power_w * reactance_ohm * q_unloaded).sqrt()
}

/// Capacitance (F) that resonates `inductance_h` at `hz`: `C = 1/(ω² L)`.
pub fn resonating_capacitance_f(hz: f64, inductance_h: f64) -> f64 {
    let w = 2.0 * std::f64::consts::PI * hz;
    1.0 / (w * w * inductance_h)
}

/// Resonant frequency (Hz) of L and C: `f = 1/(2π√(LC))`.
pub fn resonant_frequency_hz(inductance_h: f64, capacitance_f: f64) -> f64 {
    1.0 / (2.0 * std::f64::consts::PI * (inductance_h * capacitance_f).sqrt())
}

/// A described loop.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SmallLoop {
    pub loop_diameter_m: f64,
    pub conductor_diameter_m: f64,
    pub conductor: Conductor,
}

/// What the physics says about the loop at one frequency.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LoopEstimate {
    pub hz: f64,
    pub inductance_h: f64,
    pub reactance_ohm: f64,
    pub radiation_resistance_ohm: f64,
    pub loss_resistance_ohm: f64,
    pub q_unloaded: f64,
    pub capacitance_f: f64,
    /// Full bandwidth between the 1.5:1 SWR points.
    pub bandwidth_1_5_hz: f64,
    /// Full bandwidth between the 2:1 SWR points.
    pub bandwidth_2_hz: f64,
    /// Circumference over wavelength; the formulas assume well below 0.25.
    pub circumference_wavelengths: f64,
}

impl SmallLoop {
    /// The loop `[antenna]` describes, if it gives both diameters (positive,
    /// conductor thinner than the loop).
    pub fn from_config(antenna: &LoopDescription) -> Option<SmallLoop> {
        let d = antenna.loop_diameter_m?;
        let c = antenna.conductor_diameter_m?;
        if !(d.is_finite() && c.is_finite() && d > 0.0 && c > 0.0 && c < d / 2.0) {
            return None;
        }
        Some(SmallLoop {
            loop_diameter_m: d,
            conductor_diameter_m: c,
            conductor: antenna.conductor,
        })
    }

    pub fn area_m2(&self) -> f64 {
        std::f64::consts::PI * self.loop_diameter_m * self.loop_diameter_m / 4.0
    }

    pub fn circumference_m(&self) -> f64 {
        std::f64::consts::PI * self.loop_diameter_m
    }

    pub fn at(&self, hz: f64) -> LoopEstimate {
        let l = loop_inductance_h(self.loop_diameter_m, self.conductor_diameter_m);
        let x = 2.0 * std::f64::consts::PI * hz * l;
        let r_rad = radiation_resistance_ohm(self.area_m2(), hz);
        let r_loss = loss_resistance_ohm(
            self.circumference_m(),
            self.conductor_diameter_m,
            resistivity_ohm_m(self.conductor),
            hz,
        );
        let q = unloaded_q(x, r_rad + r_loss);
        LoopEstimate {
            hz,
            inductance_h: l,
            reactance_ohm: x,
            radiation_resistance_ohm: r_rad,
            loss_resistance_ohm: r_loss,
            q_unloaded: q,
            capacitance_f: resonating_capacitance_f(hz, l),
            bandwidth_1_5_hz: swr_bandwidth_hz(hz, q, 1.5),
            bandwidth_2_hz: swr_bandwidth_hz(hz, q, 2.0),
            circumference_wavelengths: self.circumference_m() * hz / C0,
        }
    }
}

/// Full 1.5:1 SWR bandwidth at `hz`, if the antenna is described.
pub fn bandwidth_1_5_hz(antenna: &LoopDescription, hz: f64) -> Option<f64> {
    let est = SmallLoop::from_config(antenna)?.at(hz);
    est.bandwidth_1_5_hz
        .is_finite()
        .then_some(est.bandwidth_1_5_hz)
}

/// The dead band for `hysteresis_hz = "auto"`: a quarter of the 1.5:1 SWR
/// bandwidth at `center_hz` (at least 1 Hz); `None` if `[antenna]` does not
/// describe the loop.
pub fn auto_hysteresis_hz(antenna: &LoopDescription, center_hz: f64) -> Option<u64> {
    if !(center_hz.is_finite() && center_hz > 0.0) {
        return None;
    }
    let bw = bandwidth_1_5_hz(antenna, center_hz)?;
    let h = (bw * AUTO_HYSTERESIS_SHARE).round();
    (h.is_finite() && h >= 0.0).then_some(h.max(1.0) as u64)
}

/// The result of checking one band.
#[derive(Debug, Clone, PartialEq)]
pub struct BandCheck {
    pub band: String,
    pub center_hz: f64,
    /// |Hz per motor step| at the centre, from the calibration.
    pub hz_per_step: f64,
    /// Physics at the centre, if the antenna is described.
    pub estimate: Option<LoopEstimate>,
    /// 1.5:1 bandwidth in motor steps at the centre.
    pub bandwidth_1_5_steps: Option<f64>,
    /// Highest capacitor voltage estimate across the band (low edge,
    /// centre, high edge), RMS and peak, if power is given.
    pub capacitor_v_rms: Option<f64>,
    pub capacitor_v_peak: Option<f64>,
    pub capacitor_rating_v: Option<f64>,
    /// Things worth knowing that are not refusals.
    pub warnings: Vec<String>,
}

/// Why a band is refused.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum AntennaError {
    #[error("HIGH VOLTAGE: band {band}: at {power_w} W the tuning capacitor would see about {peak_v:.0} V peak ({rms_v:.0} V RMS) at {at_hz} Hz, above its {rating_v:.0} V rating. Lower `antenna.power_w`, or fit a capacitor rated above {peak_v:.0} V. (Estimate for a lossless capacitor; real loops have more loss and a little less voltage.)")]
    HighVoltage {
        band: String,
        power_w: f64,
        at_hz: f64,
        rms_v: f64,
        peak_v: f64,
        rating_v: f64,
    },
    #[error("band {band}: the calibration gives no usable slope at {center_hz} Hz (found {slope} steps/Hz); expected a curve that changes with frequency")]
    FlatCalibration {
        band: String,
        center_hz: f64,
        slope: f64,
    },
}

/// Checks one band: bandwidth and Hz per step at its centre, and the
/// capacitor voltage against its rating. Refuses with a HIGH VOLTAGE error
/// when the estimate (peak) exceeds `antenna.capacitor_rating_v`.
pub fn check_band(
    antenna: &LoopDescription,
    band: &impl BandEdges,
    map: &dyn StepMap,
) -> Result<BandCheck, AntennaError> {
    let low = band.low_hz() as f64;
    let high = band.high_hz() as f64;
    let center = (low + high) / 2.0;
    let dh = (high - low).abs().max(2.0) * 1e-3;
    let slope = (map.steps_at(center + dh) - map.steps_at(center - dh)) / (2.0 * dh);
    if !(slope.is_finite() && slope != 0.0) {
        return Err(AntennaError::FlatCalibration {
            band: band.name().to_string(),
            center_hz: center,
            slope,
        });
    }
    let hz_per_step = 1.0 / slope.abs();
    let mut warnings = Vec::new();
    let lp = SmallLoop::from_config(antenna);
    let estimate = lp.map(|l| l.at(center));
    if let Some(e) = &estimate {
        let at_high = lp.map(|l| l.at(high).circumference_wavelengths);
        if at_high.is_some_and(|c| c > 0.25) {
            warnings.push(format!(
                "band {}: the loop's circumference is {:.2} λ at {} Hz; the small-loop formulas assume well below 0.25 λ (common practice, no source)",
                band.name(),
                at_high.unwrap_or(e.circumference_wavelengths),
                band.high_hz()
            ));
        }
        if e.bandwidth_1_5_hz < 2.0 * hz_per_step {
            warnings.push(format!(
                "band {}: one motor step moves the resonance {:.0} Hz, more than half the 1.5:1 bandwidth ({:.0} Hz); the loop cannot be tuned finely enough",
                band.name(), hz_per_step, e.bandwidth_1_5_hz
            ));
        }
    }
    let bandwidth_1_5_steps = estimate.map(|e| e.bandwidth_1_5_hz / hz_per_step);
    let mut v_rms: Option<(f64, f64)> = None;
    if let (Some(l), Some(p)) = (lp, antenna.power_w) {
        for f in [low, center, high] {
            let e = l.at(f);
            let v = capacitor_voltage_rms(p, e.reactance_ohm, e.q_unloaded);
            if v_rms.is_none_or(|(best, _)| v > best) {
                v_rms = Some((v, f));
            }
        }
    }
    let capacitor_v_rms = v_rms.map(|(v, _)| v);
    let capacitor_v_peak = capacitor_v_rms.map(|v| v * std::f64::consts::SQRT_2);
    if let (Some((rms, at)), Some(rating), Some(power)) =
        (v_rms, antenna.capacitor_rating_v, antenna.power_w)
    {
        let peak = rms * std::f64::consts::SQRT_2;
        if peak > rating {
            return Err(AntennaError::HighVoltage {
                band: band.name().to_string(),
                power_w: power,
                at_hz: at,
                rms_v: rms,
                peak_v: peak,
                rating_v: rating,
            });
        }
    }
    Ok(BandCheck {
        band: band.name().to_string(),
        center_hz: center,
        hz_per_step,
        estimate,
        bandwidth_1_5_steps,
        capacitor_v_rms,
        capacitor_v_peak,
        capacitor_rating_v: antenna.capacitor_rating_v,
        warnings,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn described() -> LoopDescription {
        LoopDescription {
            loop_diameter_m: Some(1.0),
            conductor_diameter_m: Some(0.022),
            conductor: Conductor::Copper,
            power_w: Some(100.0),
            capacitor_rating_v: Some(15_000.0),
        }
    }

    #[test]
    fn swr_at_an_offset_matches_hand_computed_values() {
        // Hand computations from Γ = (z − 1)/(z + 1), z = 1 + jx (Pozar,
        // Microwave Engineering, §2.3 and §6.1; recalled):
        // x = 0: matched, SWR 1.
        assert_eq!(swr_at(7e6, 7e6, 1000.0), 1.0);
        // x = 1: |Γ| = 1/√5, SWR = (1 + 1/√5)/(1 − 1/√5) = (3 + √5)/2.
        // With Q_u = 1000, x = 1 at δ = 1/2000: 3500 Hz above 7 MHz.
        let s = swr_at(7_003_500.0, 7e6, 1000.0);
        assert!((s - (3.0 + 5f64.sqrt()) / 2.0).abs() < 1e-9, "{s}");
        // x = −2 (below resonance): |Γ|² = 1/2, SWR = 3 + 2√2.
        let s = swr_at(6_993_000.0, 7e6, 1000.0);
        assert!((s - (3.0 + 2.0 * 2f64.sqrt())).abs() < 1e-9, "{s}");
        // Consistent with the bandwidth: half the 1.5:1 (2:1) width off
        // resonance the SWR is 1.5 (2).
        for (swr, f0, q) in [(1.5, 7.1e6, 2900.0), (2.0, 14.2e6, 1550.0)] {
            let half = swr_bandwidth_hz(f0, q, swr) / 2.0;
            assert!((swr_at(f0 + half, f0, q) - swr).abs() < 1e-9);
            assert!((swr_at(f0 - half, f0, q) - swr).abs() < 1e-6);
        }
        assert_eq!(swr_at(7.1e6, 7e6, f64::INFINITY), f64::INFINITY);
    }

    #[test]
    fn auto_hysteresis_is_a_quarter_of_the_1_5_bandwidth() {
        let a = described();
        let bw = SmallLoop::from_config(&a)
            .unwrap()
            .at(7.1e6)
            .bandwidth_1_5_hz;
        let h = auto_hysteresis_hz(&a, 7.1e6).unwrap();
        assert!(((h as f64) - bw / 4.0).abs() <= 0.5, "{h} vs {bw}");
        assert_eq!(auto_hysteresis_hz(&LoopDescription::default(), 7.1e6), None);
        let no_conductor = LoopDescription {
            conductor_diameter_m: None,
            ..described()
        };
        assert_eq!(auto_hysteresis_hz(&no_conductor, 7.1e6), None);
        assert_eq!(auto_hysteresis_hz(&a, f64::NAN), None);
    }
}
