//! Weighted polynomial least squares, well conditioned.
//!
//! The variable is centred and scaled to `t = (x - centre) / scale` in
//! [-1, 1] before the design matrix is built, and the system is solved by
//! Householder QR (`nalgebra`), never through the normal equations: with raw
//! columns `1, x, x², …` the condition number of the design squares and the
//! certified digits of the NIST StRD polynomial problems are lost. The fit is
//! kept in the scaled form for evaluation; the coefficients of the raw
//! variable (`x^i`) are derived from it by composing with `t = αx + β` and then
//! polished by iterative refinement against residuals computed in the raw
//! basis, so that what a report prints is as good as the data allow.

use nalgebra::{DMatrix, DVector};

/// Why a least-squares problem could not be solved.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum LsqFailure {
    /// Fewer observations than unknowns.
    TooFew { needed: usize, found: usize },
    /// The columns are (numerically) dependent: too few distinct x values.
    RankDeficient,
    /// A non-finite value appeared.
    NotFinite,
}

/// A polynomial fitted in a centred, scaled variable.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct PolyFit {
    pub centre: f64,
    pub scale: f64,
    /// Coefficients of `t^k`, `t = (x - centre) / scale`.
    pub scaled: Vec<f64>,
    /// Coefficients of `x^k` in raw units.
    pub raw: Vec<f64>,
}

impl PolyFit {
    pub fn eval(&self, x: f64) -> f64 {
        horner(&self.scaled, (x - self.centre) / self.scale)
    }

    /// d/dx of the polynomial.
    pub fn deriv(&self, x: f64) -> f64 {
        let t = (x - self.centre) / self.scale;
        let mut acc = 0.0;
        for (k, d) in self.scaled.iter().enumerate().skip(1).rev() {
            acc = acc * t + (k as f64) * d;
        }
        acc / self.scale
    }
}

pub(crate) fn horner(coeffs: &[f64], x: f64) -> f64 {
    coeffs.iter().rev().fold(0.0, |acc, c| acc * x + c)
}

/// Coefficients of `p(αx + β)` in powers of x, where `p` has coefficients `d`.
fn compose_linear(d: &[f64], alpha: f64, beta: f64) -> Vec<f64> {
    let mut out: Vec<f64> = Vec::with_capacity(d.len());
    for dk in d.iter().rev() {
        // out = out * (αx + β) + dk
        let mut next = vec![0.0; out.len() + 1];
        for (j, o) in out.iter().enumerate() {
            if let Some(slot) = next.get_mut(j) {
                *slot += o * beta;
            }
            if let Some(slot) = next.get_mut(j + 1) {
                *slot += o * alpha;
            }
        }
        if let Some(first) = next.first_mut() {
            *first += dk;
        }
        out = next;
    }
    out.truncate(d.len());
    out
}

/// Solves the weighted least-squares problem min ‖√w (y − A c)‖ through QR.
struct Solver {
    design: DMatrix<f64>,
    q: DMatrix<f64>,
    r: DMatrix<f64>,
    sqrt_w: Vec<f64>,
}

impl Solver {
    fn new(design: DMatrix<f64>, sqrt_w: Vec<f64>) -> Result<Solver, LsqFailure> {
        if design.iter().any(|v| !v.is_finite()) {
            return Err(LsqFailure::NotFinite);
        }
        let qr = design.clone().qr();
        let q = qr.q();
        let r = qr.r();
        let diag: Vec<f64> = r.diagonal().iter().map(|v| v.abs()).collect();
        let largest = diag.iter().cloned().fold(0.0, f64::max);
        if largest == 0.0 || diag.iter().any(|d| *d <= largest * 1e-13) {
            return Err(LsqFailure::RankDeficient);
        }
        Ok(Solver {
            design,
            q,
            r,
            sqrt_w,
        })
    }

    /// Solves `[I A; Aᵀ 0][δr; δd] = [f; g]` for the scaled design A = QR:
    /// `h = R⁻ᵀ g`, `δd = R⁻¹(Qᵀ f − h)`, `δr = f − A δd`.
    fn solve_augmented(
        &self,
        f: &DVector<f64>,
        g: &DVector<f64>,
    ) -> Result<(DVector<f64>, DVector<f64>), LsqFailure> {
        let h = self
            .r
            .transpose()
            .solve_lower_triangular(g)
            .ok_or(LsqFailure::RankDeficient)?;
        let qtf = self.q.transpose() * f;
        let dd = self
            .r
            .solve_upper_triangular(&(qtf - h))
            .ok_or(LsqFailure::RankDeficient)?;
        let dr = f - &self.design * &dd;
        Ok((dr, dd))
    }

    /// Coefficients for right-hand side `y` (unweighted values).
    fn solve(&self, y: &[f64]) -> Result<Vec<f64>, LsqFailure> {
        let b = DVector::from_iterator(y.len(), y.iter().zip(&self.sqrt_w).map(|(yi, sw)| yi * sw));
        let qtb = self.q.transpose() * b;
        let c = self
            .r
            .solve_upper_triangular(&qtb)
            .ok_or(LsqFailure::RankDeficient)?;
        if c.iter().any(|v| !v.is_finite()) {
            return Err(LsqFailure::NotFinite);
        }
        Ok(c.iter().cloned().collect())
    }
}

/// Compensated dot product: error-free transformations of each product
/// (fused multiply-add) and each sum, so the result is as accurate as if
/// computed in twice the working precision. Source: T. Ogita, S. M. Rump and
/// S. Oishi, "Accurate sum and dot product", SIAM J. Sci. Comput. 26(6),
/// 2005, algorithm Dot2.
fn dot2(pairs: impl Iterator<Item = (f64, f64)>) -> f64 {
    let (mut s, mut c) = (0.0f64, 0.0f64);
    for (a, b) in pairs {
        let p = a * b;
        let e = a.mul_add(b, -p);
        let t = s + p;
        let z = t - s;
        let q = (s - (t - z)) + (p - z);
        s = t;
        c += q + e;
    }
    s + c
}

/// The matrix C with raw = C · scaled: column k holds the coefficients of
/// `(αx + β)^k` in powers of x.
fn compose_matrix(p: usize, alpha: f64, beta: f64) -> DMatrix<f64> {
    let mut c = DMatrix::zeros(p, p);
    for k in 0..p {
        let mut unit = vec![0.0; p];
        if let Some(u) = unit.get_mut(k) {
            *u = 1.0;
        }
        let col = compose_linear(&unit, alpha, beta);
        for (j, v) in col.iter().enumerate() {
            if let Some(slot) = c.get_mut((j, k)) {
                *slot = *v;
            }
        }
    }
    c
}

/// Raw-basis coefficients by iterative refinement of the augmented system
/// `[I A; Aᵀ 0][r; a] = [b; 0]` (Å. Björck, "Iterative refinement of linear
/// least squares solutions I", BIT 7, 1967), with the residuals `f = b − r −
/// A a` and `g = −Aᵀ r` accumulated by [`dot2`] and the corrections solved
/// through the QR of the scaled design. Carrying `r` separately is what
/// keeps large-residual problems (NIST Wampler4/5) accurate: a plain
/// refinement would project the whole residual, whose rounding error alone
/// is eps·‖r‖. The iterate with the smallest scaled gradient `Cᵀ Aᵀ r` wins.
fn refine_raw(
    solver: &Solver,
    x: &[f64],
    y: &[f64],
    c: &DMatrix<f64>,
    scaled: &[f64],
) -> Result<Vec<f64>, LsqFailure> {
    let n = x.len();
    let p = scaled.len();
    let sw = &solver.sqrt_w;
    let a_raw = DMatrix::from_fn(n, p, |i, k| {
        sw.get(i).copied().unwrap_or(0.0) * x.get(i).copied().unwrap_or(0.0).powi(k as i32)
    });
    let b: Vec<f64> = y.iter().zip(sw).map(|(yi, s)| yi * s).collect();
    let residual = |a: &DVector<f64>| -> DVector<f64> {
        DVector::from_fn(n, |i, _| {
            let row = a_raw.row(i);
            let bi = b.get(i).copied().unwrap_or(0.0);
            dot2(
                std::iter::once((1.0, bi)).chain(row.iter().zip(a.iter()).map(|(v, ak)| (-v, *ak))),
            )
        })
    };
    let gradient = |r: &DVector<f64>| -> DVector<f64> {
        let g_raw = DVector::from_fn(p, |k, _| {
            -dot2(a_raw.column(k).iter().copied().zip(r.iter().copied()))
        });
        c.transpose() * g_raw
    };
    let mut a = c * DVector::from_column_slice(scaled);
    let mut r = residual(&a);
    let mut best = (a.clone(), gradient(&r).norm());
    for _ in 0..10 {
        let f = DVector::from_fn(n, |i, _| {
            let row = a_raw.row(i);
            let bi = b.get(i).copied().unwrap_or(0.0);
            let ri = r.get(i).copied().unwrap_or(0.0);
            dot2(
                [(1.0, bi), (-1.0, ri)]
                    .into_iter()
                    .chain(row.iter().zip(a.iter()).map(|(v, ak)| (-v, *ak))),
            )
        });
        let g = gradient(&r);
        let (dr, dd) = solver.solve_augmented(&f, &g)?;
        let da = c * dd;
        a += &da;
        r += dr;
        if a.iter().any(|v| !v.is_finite()) {
            break;
        }
        let score = gradient(&residual(&a)).norm();
        if score < best.1 {
            best = (a.clone(), score);
        }
        if da
            .iter()
            .zip(a.iter())
            .all(|(d, v)| d.abs() <= 1e-17 * v.abs())
        {
            break;
        }
    }
    Ok(best.0.iter().copied().collect())
}

/// Fits `y ≈ Σ c_k x^k`, k = 0..=degree, with weights `w` (> 0).
pub(crate) fn fit_poly(
    x: &[f64],
    y: &[f64],
    w: &[f64],
    degree: usize,
) -> Result<PolyFit, LsqFailure> {
    let n = x.len();
    let p = degree + 1;
    if n < p || y.len() != n || w.len() != n {
        return Err(LsqFailure::TooFew {
            needed: p,
            found: n,
        });
    }
    if x.iter().chain(y).chain(w).any(|v| !v.is_finite()) {
        return Err(LsqFailure::NotFinite);
    }
    let lo = x.iter().cloned().fold(f64::INFINITY, f64::min);
    let hi = x.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
    let centre = (lo + hi) / 2.0;
    let mut scale = (hi - lo) / 2.0;
    if scale <= 0.0 {
        if degree > 0 {
            return Err(LsqFailure::RankDeficient);
        }
        scale = 1.0;
    }
    let sqrt_w: Vec<f64> = w.iter().map(|v| v.sqrt()).collect();
    let t: Vec<f64> = x.iter().map(|xi| (xi - centre) / scale).collect();
    let design = DMatrix::from_fn(n, p, |i, k| {
        let ti = t.get(i).copied().unwrap_or(0.0);
        let swi = sqrt_w.get(i).copied().unwrap_or(0.0);
        swi * ti.powi(k as i32)
    });
    let solver = Solver::new(design, sqrt_w)?;

    // Scaled form, with one step of iterative refinement.
    let mut scaled = solver.solve(y)?;
    let resid: Vec<f64> = t
        .iter()
        .zip(y)
        .map(|(ti, yi)| yi - horner(&scaled, *ti))
        .collect();
    let delta = solver.solve(&resid)?;
    for (s, d) in scaled.iter_mut().zip(&delta) {
        *s += d;
    }

    // Raw form: composed from the scaled one, then polished.
    let raw = refine_raw(
        &solver,
        x,
        y,
        &compose_matrix(p, 1.0 / scale, -centre / scale),
        &scaled,
    )?;
    Ok(PolyFit {
        centre,
        scale,
        scaled,
        raw,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn compose_linear_matches_direct_evaluation() {
        let d = [1.5, -2.0, 0.25, 3.0];
        let (alpha, beta) = (0.1, -1.0);
        let raw = compose_linear(&d, alpha, beta);
        for x in [0.0, 3.0, 7.5, 20.0] {
            let direct = horner(&d, alpha * x + beta);
            assert!((horner(&raw, x) - direct).abs() < 1e-12 * (1.0 + direct.abs()));
        }
    }

    #[test]
    fn exact_quadratic_is_recovered() {
        let x: Vec<f64> = (0..10).map(|i| i as f64 * 0.7 + 3.0).collect();
        let y: Vec<f64> = x.iter().map(|v| 2.0 - 0.5 * v + 0.125 * v * v).collect();
        let w = vec![1.0; x.len()];
        let fit = fit_poly(&x, &y, &w, 2).unwrap();
        for (got, want) in fit.raw.iter().zip([2.0, -0.5, 0.125]) {
            assert!((got - want).abs() < 1e-12, "{got} vs {want}");
        }
        let dx = 1e-4;
        let num = (fit.eval(5.0 + dx) - fit.eval(5.0 - dx)) / (2.0 * dx);
        assert!((fit.deriv(5.0) - num).abs() < 1e-6);
    }

    #[test]
    fn too_few_distinct_x_is_rank_deficient() {
        let x = [1.0, 1.0, 2.0, 2.0];
        let y = [1.0, 1.1, 2.0, 2.1];
        let w = [1.0; 4];
        assert_eq!(fit_poly(&x, &y, &w, 2), Err(LsqFailure::RankDeficient));
        assert!(matches!(
            fit_poly(&x[..2], &y[..2], &w[..2], 2),
            Err(LsqFailure::TooFew {
                needed: 3,
                found: 2
            })
        ));
    }

    #[test]
    fn weights_pull_the_fit() {
        // A constant fit is the weighted mean.
        let x = [1.0, 2.0, 3.0];
        let y = [0.0, 0.0, 3.0];
        let fit = fit_poly(&x, &y, &[1.0, 1.0, 4.0], 0).unwrap();
        assert!((fit.raw[0] - 2.0).abs() < 1e-12);
    }
}
