//! Monotone piecewise cubic Hermite interpolation.
//!
//! Source: F. N. Fritsch and R. E. Carlson, "Monotone Piecewise Cubic
//! Interpolation", SIAM J. Numer. Anal. 17(2), 1980, pp. 238–246. Slopes
//! start as the mean of the neighbouring secants (zero where the secants
//! differ in sign or one is zero), end slopes are the end secants, and where
//! α² + β² > 9 (α, β the slopes over the secant) both are scaled by 3/√(α²+β²),
//! which keeps every piece monotone (their region of sufficient conditions).
//! Outside the end points the curve continues as a straight line with the
//! end slope.

/// A monotone cubic through sorted, distinct knots.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct MonotoneCubic {
    xs: Vec<f64>,
    ys: Vec<f64>,
    slopes: Vec<f64>,
}

impl MonotoneCubic {
    /// `xs` strictly increasing, same length as `ys`, at least two knots
    /// (checked by the caller; returns None otherwise).
    pub fn new(xs: Vec<f64>, ys: Vec<f64>) -> Option<MonotoneCubic> {
        let n = xs.len();
        if n < 2 || ys.len() != n || xs.windows(2).any(|w| w[1] <= w[0]) {
            return None;
        }
        let secants: Vec<f64> = xs
            .windows(2)
            .zip(ys.windows(2))
            .map(|(x, y)| (y[1] - y[0]) / (x[1] - x[0]))
            .collect();
        let mut slopes = vec![0.0; n];
        slopes[0] = secants[0];
        slopes[n - 1] = secants[n - 2];
        for k in 1..n - 1 {
            let (a, b) = (secants[k - 1], secants[k]);
            slopes[k] = if a * b <= 0.0 { 0.0 } else { (a + b) / 2.0 };
        }
        for k in 0..n - 1 {
            let d = secants[k];
            if d == 0.0 {
                slopes[k] = 0.0;
                slopes[k + 1] = 0.0;
                continue;
            }
            let alpha = slopes[k] / d;
            let beta = slopes[k + 1] / d;
            let s = alpha * alpha + beta * beta;
            if s > 9.0 {
                let tau = 3.0 / s.sqrt();
                slopes[k] = tau * alpha * d;
                slopes[k + 1] = tau * beta * d;
            }
        }
        Some(MonotoneCubic { xs, ys, slopes })
    }

    /// Number of knots.
    pub fn knots(&self) -> usize {
        self.xs.len()
    }

    /// Index of the interval holding x (clamped to the first/last).
    fn interval(&self, x: f64) -> usize {
        let n = self.xs.len();
        let i = self.xs.partition_point(|v| *v <= x);
        i.saturating_sub(1).min(n.saturating_sub(2))
    }

    pub fn eval(&self, x: f64) -> f64 {
        let (first, last) = (0, self.xs.len() - 1);
        if x <= self.xs[first] {
            return self.ys[first] + self.slopes[first] * (x - self.xs[first]);
        }
        if x >= self.xs[last] {
            return self.ys[last] + self.slopes[last] * (x - self.xs[last]);
        }
        let k = self.interval(x);
        let h = self.xs[k + 1] - self.xs[k];
        let t = (x - self.xs[k]) / h;
        let (t2, t3) = (t * t, t * t * t);
        let h00 = 2.0 * t3 - 3.0 * t2 + 1.0;
        let h10 = t3 - 2.0 * t2 + t;
        let h01 = -2.0 * t3 + 3.0 * t2;
        let h11 = t3 - t2;
        h00 * self.ys[k]
            + h10 * h * self.slopes[k]
            + h01 * self.ys[k + 1]
            + h11 * h * self.slopes[k + 1]
    }

    pub fn deriv(&self, x: f64) -> f64 {
        let last = self.xs.len() - 1;
        if x <= self.xs[0] {
            return self.slopes[0];
        }
        if x >= self.xs[last] {
            return self.slopes[last];
        }
        let k = self.interval(x);
        let h = self.xs[k + 1] - self.xs[k];
        let t = (x - self.xs[k]) / h;
        let t2 = t * t;
        let d00 = (6.0 * t2 - 6.0 * t) / h;
        let d10 = 3.0 * t2 - 4.0 * t + 1.0;
        let d01 = (-6.0 * t2 + 6.0 * t) / h;
        let d11 = 3.0 * t2 - 2.0 * t;
        d00 * self.ys[k] + d10 * self.slopes[k] + d01 * self.ys[k + 1] + d11 * self.slopes[k + 1]
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    #[test]
    fn linear_data_are_reproduced_exactly() {
        // Fritsch–Carlson 1980: on collinear data every slope equals the
        // common secant (α = β = 1), so the interpolant is the line itself.
        let xs = vec![1.0, 2.5, 4.0, 7.0, 7.5];
        let ys: Vec<f64> = xs.iter().map(|x| 3.0 - 2.0 * x).collect();
        let m = MonotoneCubic::new(xs, ys).unwrap();
        for i in 0..=100 {
            let x = -1.0 + i as f64 * 0.1;
            assert!((m.eval(x) - (3.0 - 2.0 * x)).abs() < 1e-12, "at {x}");
            assert!((m.deriv(x) + 2.0).abs() < 1e-12);
        }
    }

    #[test]
    fn passes_through_knots_and_extrapolates_linearly() {
        let xs = vec![0.0, 1.0, 2.0, 3.0];
        let ys = vec![0.0, 1.0, 4.0, 9.0];
        let m = MonotoneCubic::new(xs.clone(), ys.clone()).unwrap();
        for (x, y) in xs.iter().zip(&ys) {
            assert!((m.eval(*x) - y).abs() < 1e-12);
        }
        let s = m.deriv(3.0);
        assert!((m.eval(5.0) - (9.0 + 2.0 * s)).abs() < 1e-12);
    }

    #[test]
    fn flat_stretch_stays_flat() {
        let m = MonotoneCubic::new(vec![0.0, 1.0, 2.0, 3.0], vec![0.0, 1.0, 1.0, 2.0]).unwrap();
        for i in 0..=10 {
            let x = 1.0 + i as f64 * 0.1;
            assert!((m.eval(x) - 1.0).abs() < 1e-12);
        }
    }

    proptest! {
        /// Fritsch–Carlson 1980, Theorem: with the slopes restricted as above
        /// the interpolant of monotone data is monotone.
        #[test]
        fn monotone_data_stay_monotone(
            steps in prop::collection::vec((0.01f64..5.0, 0.0f64..100.0), 2..12),
            decreasing in any::<bool>(),
        ) {
            let mut xs = vec![0.0];
            let mut ys = vec![0.0];
            for (dx, dy) in &steps {
                xs.push(xs.last().unwrap() + dx);
                let dy = if decreasing { -dy } else { *dy };
                ys.push(ys.last().unwrap() + dy);
            }
            let (lo, hi) = (xs[0] - 1.0, xs[xs.len() - 1] + 1.0);
            let m = MonotoneCubic::new(xs, ys).unwrap();
            let mut prev = m.eval(lo);
            for i in 1..=2000 {
                let x = lo + (hi - lo) * i as f64 / 2000.0;
                let v = m.eval(x);
                let tol = 1e-9 * (1.0 + v.abs());
                if decreasing {
                    prop_assert!(v <= prev + tol, "rises at {}: {} -> {}", x, prev, v);
                } else {
                    prop_assert!(v >= prev - tol, "falls at {}: {} -> {}", x, prev, v);
                }
                prev = v;
            }
        }
    }
}
