//! The loop's estimated SWR around where the capacitor is: the frequency
//! the calibration maps a step position to (its resonance), and
//! [`crate::antenna::swr_at`] sampled around it with the loop's unloaded Q.
//!
//! Pure: a calibration ([`StepMap`]), a position and a Q in, numbers out.
//! The core builds its status from it and the web page draws it; nothing
//! here knows of either.

use super::StepMap;
use crate::antenna::swr_at;

/// One frequency and the SWR estimated there.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SwrPoint {
    pub hz: f64,
    pub swr: f64,
}

/// The estimated SWR curve of the loop at one capacitor position.
#[derive(Debug, Clone, PartialEq)]
pub struct SwrCurve {
    /// Where the calibration says the loop is resonant at this position.
    pub resonance_hz: f64,
    /// The loop's unloaded Q used for the curve.
    pub q_unloaded: f64,
    /// Samples from low to high frequency, evenly spaced, the resonance
    /// in the middle.
    pub points: Vec<SwrPoint>,
    /// The asked-for frequency (the rig's) and its estimated SWR.
    pub at: Option<SwrPoint>,
}

/// Where the calibration puts resonance for the capacitor at `steps`: the
/// frequency `f` with `map.steps_at(f) == steps`, searched outward from
/// `guess_hz` (up to a factor of two either way) and then bisected to
/// 0.1 Hz. `None` when no such frequency lies in that range or the map
/// gives no finite numbers there.
pub fn resonance_at_steps(map: &dyn StepMap, steps: f64, guess_hz: f64) -> Option<f64> {
    if !(steps.is_finite() && guess_hz.is_finite() && guess_hz > 0.0) {
        return None;
    }
    let off = |hz: f64| {
        let d = map.steps_at(hz) - steps;
        d.is_finite().then_some(d)
    };
    let at_guess = off(guess_hz)?;
    if at_guess == 0.0 {
        return Some(guess_hz);
    }
    // Widen a bracket around the guess until the sign changes.
    let mut bracket = None;
    let mut width = 0.001;
    while width <= 1.0 {
        let lo = guess_hz / (1.0 + width);
        let hi = guess_hz * (1.0 + width);
        let (l, h) = (off(lo)?, off(hi)?);
        if l.signum() != at_guess.signum() || l == 0.0 {
            bracket = Some((lo, guess_hz, l));
            break;
        }
        if h.signum() != at_guess.signum() || h == 0.0 {
            bracket = Some((guess_hz, hi, at_guess));
            break;
        }
        width *= 2.0;
    }
    let (mut lo, mut hi, mut at_lo) = bracket?;
    for _ in 0..200 {
        if hi - lo <= 0.1 {
            break;
        }
        let mid = 0.5 * (lo + hi);
        let m = off(mid)?;
        if m == 0.0 {
            return Some(mid);
        }
        if m.signum() == at_lo.signum() {
            lo = mid;
            at_lo = m;
        } else {
            hi = mid;
        }
    }
    Some(0.5 * (lo + hi))
}

/// `n` samples of [`swr_at`] evenly spaced over `resonance_hz ±
/// half_span_hz` (the ends included; an odd `n` puts one at resonance).
/// Fewer than two samples, or a span or Q that is not a positive number,
/// give none.
pub fn sample_swr(
    resonance_hz: f64,
    q_unloaded: f64,
    half_span_hz: f64,
    n: usize,
) -> Vec<SwrPoint> {
    let valid = |x: f64| x.is_finite() && x > 0.0;
    if n < 2 || !(valid(resonance_hz) && valid(q_unloaded) && valid(half_span_hz)) {
        return Vec::new();
    }
    let low = resonance_hz - half_span_hz;
    let step = 2.0 * half_span_hz / (n - 1) as f64;
    (0..n)
        .map(|i| {
            let hz = low + step * i as f64;
            SwrPoint {
                hz,
                swr: swr_at(hz, resonance_hz, q_unloaded),
            }
        })
        .collect()
}

/// How wide the curve is drawn: out to `x = ±2` (`f0/Q_u` either side, SWR
/// 3 + 2√2 at the ends, the loaded half-power points), widened to show
/// the rig's frequency with a quarter to spare, but never beyond four
/// times that.
pub fn curve_half_span_hz(resonance_hz: f64, q_unloaded: f64, rig_hz: Option<f64>) -> f64 {
    let base = resonance_hz / q_unloaded;
    let wanted = rig_hz.map_or(0.0, |hz| (hz - resonance_hz).abs() * 1.25);
    wanted.clamp(base, 4.0 * base)
}

/// The loop's estimated SWR curve with the capacitor at `steps`: the
/// resonance from `map` ([`resonance_at_steps`], searched from `rig_hz`
/// or else `guess_hz`), the unloaded Q there from `q_at` (the loop
/// physics), `n` samples ([`sample_swr`] over [`curve_half_span_hz`]) and
/// the SWR at `rig_hz`. `None` when the calibration gives no resonance
/// near or the Q is not a positive number.
pub fn swr_curve(
    map: &dyn StepMap,
    steps: f64,
    rig_hz: Option<f64>,
    guess_hz: f64,
    q_at: impl Fn(f64) -> f64,
    n: usize,
) -> Option<SwrCurve> {
    let f0 = resonance_at_steps(map, steps, rig_hz.unwrap_or(guess_hz))?;
    let q = q_at(f0);
    if !(q.is_finite() && q > 0.0) {
        return None;
    }
    let points = sample_swr(f0, q, curve_half_span_hz(f0, q, rig_hz), n);
    Some(SwrCurve {
        resonance_hz: f0,
        q_unloaded: q,
        points,
        at: rig_hz.map(|hz| SwrPoint {
            hz,
            swr: swr_at(hz, f0, q),
        }),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Invented test calibration: 7.000 MHz at step 0, 100 Hz per step.
    struct Linear;
    impl StepMap for Linear {
        fn steps_at(&self, hz: f64) -> f64 {
            (hz - 7_000_000.0) / 100.0
        }
    }

    /// A physics-shaped map, steps = a + b/f² (falling with frequency).
    struct Physics;
    impl StepMap for Physics {
        fn steps_at(&self, hz: f64) -> f64 {
            -5000.0 + 4.9e17 / (hz * hz)
        }
    }

    #[test]
    fn the_resonance_is_where_the_calibration_maps_the_position() {
        let f = resonance_at_steps(&Linear, 35.0, 7_100_000.0).unwrap();
        assert!((f - 7_003_500.0).abs() < 0.1, "{f}");
        // Either slope, guess on either side.
        for guess in [6.0e6, 7.2e6, 9.0e6] {
            let f = resonance_at_steps(&Physics, 5000.0, guess).unwrap();
            assert!((Physics.steps_at(f) - 5000.0).abs() < 1e-3, "{f}");
        }
        // Nowhere near: no resonance rather than a wrong one.
        assert_eq!(resonance_at_steps(&Linear, 1e9, 7.0e6), None);
        assert_eq!(resonance_at_steps(&Linear, f64::NAN, 7.0e6), None);
        assert_eq!(resonance_at_steps(&Linear, 0.0, -1.0), None);
    }

    #[test]
    fn the_curve_matches_the_hand_computed_swr_reference_points() {
        // The reference points of antenna's
        // `swr_at_an_offset_matches_hand_computed_values`: from
        // Γ = (z − 1)/(z + 1), z = 1 + jx, x = 2 Q_u δ (Pozar, Microwave
        // Engineering, §2.3 and §6.1; recalled). With Q_u = 1000 around
        // 7 MHz, x = ±1 at ±3500 Hz (SWR (3 + √5)/2) and x = ±2 at
        // ±7000 Hz (|Γ|² = ½, SWR 3 + 2√2).
        let x1 = (3.0 + 5f64.sqrt()) / 2.0;
        let x2 = 3.0 + 2.0 * 2f64.sqrt();
        // Step 0 is 7 MHz on this calibration; the rig 3500 Hz above.
        let c = swr_curve(&Linear, 0.0, Some(7_003_500.0), 7.1e6, |_| 1000.0, 5).unwrap();
        assert!((c.resonance_hz - 7e6).abs() < 0.1, "{}", c.resonance_hz);
        assert_eq!(c.q_unloaded, 1000.0);
        // The default span is x = ±2: five samples at x = −2, −1, 0, 1, 2.
        let want = [
            (6_993_000.0, x2),
            (6_996_500.0, x1),
            (7_000_000.0, 1.0),
            (7_003_500.0, x1),
            (7_007_000.0, x2),
        ];
        assert_eq!(c.points.len(), 5);
        for (p, (hz, swr)) in c.points.iter().zip(want) {
            assert!((p.hz - hz).abs() < 0.2, "{p:?} vs {hz}");
            assert!((p.swr - swr).abs() < 1e-4, "{p:?} vs {swr}");
        }
        let at = c.at.unwrap();
        assert_eq!(at.hz, 7_003_500.0);
        assert!((at.swr - x1).abs() < 1e-4, "{at:?}");
        // Lowest at resonance, rising both ways.
        let swrs: Vec<f64> = c.points.iter().map(|p| p.swr).collect();
        assert!(swrs[0] > swrs[1] && swrs[1] > swrs[2] && swrs[2] < swrs[3] && swrs[3] < swrs[4]);
    }

    #[test]
    fn the_span_widens_to_show_the_rig_but_not_without_bound() {
        let f0 = 7e6;
        assert_eq!(curve_half_span_hz(f0, 1000.0, None), 7000.0);
        assert_eq!(curve_half_span_hz(f0, 1000.0, Some(7_001_000.0)), 7000.0);
        assert_eq!(curve_half_span_hz(f0, 1000.0, Some(7_010_000.0)), 12_500.0);
        assert_eq!(curve_half_span_hz(f0, 1000.0, Some(8_000_000.0)), 28_000.0);
        let c = swr_curve(&Linear, 0.0, Some(7_010_000.0), 7e6, |_| 1000.0, 11).unwrap();
        assert!(c.points.first().unwrap().hz < 6_990_000.0);
        assert!(c.points.last().unwrap().hz > 7_010_000.0);
    }

    #[test]
    fn nonsense_gives_no_curve_rather_than_a_panic() {
        assert!(sample_swr(7e6, 1000.0, 7000.0, 1).is_empty());
        assert!(sample_swr(7e6, f64::NAN, 7000.0, 9).is_empty());
        assert!(sample_swr(7e6, 1000.0, 0.0, 9).is_empty());
        assert_eq!(swr_curve(&Linear, 0.0, None, 7e6, |_| 0.0, 9), None);
        assert_eq!(swr_curve(&Linear, 0.0, None, 7e6, |_| f64::NAN, 9), None);
        let c = swr_curve(&Linear, 0.0, None, 7e6, |_| 1000.0, 9).unwrap();
        assert_eq!(c.at, None);
        assert_eq!(c.points.len(), 9);
    }
}
