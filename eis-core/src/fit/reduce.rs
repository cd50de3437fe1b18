//! The square core of a tall least-squares problem: at a point with residuals r (m of them) and
//! Jacobian J (m × n, m > n), the n × n upper-triangular R with RᵀR = JᵀJ and the n-vector c with
//! Rᵀc = Jᵀr, so that ‖Jp − r‖² = ‖Rp − c‖² + (‖r‖² − ‖c‖²) for every step p.
//!
//! Everything a trust-region Levenberg–Marquardt step uses lives in (R, c, ‖r‖): the damped steps
//! (the least-squares solutions of [R; √λ·D]p ≈ [c; 0], [`super::lm`]), the gradient Jᵀr = Rᵀc,
//! the predicted reduction ‖Jp‖ = ‖Rp‖ and the column norms ‖Jeₖ‖ that scale the variables. So the
//! solver never touches the m × n matrix again, and a trial point costs one evaluation of the model.
//! R comes from the Gram matrix by Cholesky when every column is safely independent of the others,
//! which is the cheaper route, and from Householder QR of J otherwise, so that a badly conditioned J
//! is never squared (Golub & Van Loan, *Matrix Computations*, 4th ed. 2013, §4.2 and §5.2–5.3).

use crate::dense::{arch, axpy, dot, dots4};

/// The square core of one point: see the module documentation.
#[derive(Debug, Clone, Default)]
pub(crate) struct Core {
    /// Number of parameters n.
    pub n: usize,
    /// R, n × n upper triangular, column by column: entry (i, k) at `k * n + i`.
    pub r: Vec<f64>,
    /// c with Rᵀc = Jᵀr (the first n entries of Qᵀr).
    pub qtb: Vec<f64>,
    /// ‖Jeₖ‖, the column norms of J.
    pub col_norms: Vec<f64>,
    /// Scratch: Qᵀr on the Householder route (m entries), one row of products on the Gram route.
    work: Vec<f64>,
}

impl Core {
    /// A core for `n` parameters, all zero (no slope: what a failed point reports).
    pub(crate) fn new(n: usize) -> Core {
        Core {
            n,
            r: vec![0.0; n * n],
            qtb: vec![0.0; n],
            col_norms: vec![0.0; n],
            work: Vec::new(),
        }
    }

    /// Sets everything to zero.
    pub(crate) fn clear(&mut self) {
        self.r.fill(0.0);
        self.qtb.fill(0.0);
        self.col_norms.fill(0.0);
    }

    /// Whether every entry is finite.
    pub(crate) fn is_finite(&self) -> bool {
        self.r
            .iter()
            .chain(&self.qtb)
            .chain(&self.col_norms)
            .all(|v| v.is_finite())
    }
}

/// ‖a‖: a plain sum of squares ([`dot`]), redone scaled by the largest entry only when
/// that sum left the range where it is exact to round-off (squares of huge entries overflowing, of tiny
/// ones underflowing).
#[inline]
pub(crate) fn norm(a: &[f64]) -> f64 {
    let plain = dot(a, a);
    if plain.is_finite() && plain > 1e-280 {
        return plain.sqrt();
    }
    if plain.is_nan() {
        return plain;
    }
    let big = a.iter().fold(0.0_f64, |m, x| m.max(x.abs()));
    if big == 0.0 || !big.is_finite() {
        return big;
    }
    let s = 1.0 / big;
    let scaled: f64 = a.iter().map(|x| (x * s) * (x * s)).sum();
    big * scaled.sqrt()
}

/// Writes the core of the point with Jacobian `a` (m rows, n columns, column by column; may be
/// overwritten) and residuals `r` (m) into `core`. See the module documentation: R comes from the Gram
/// matrix when the columns are safely independent, from Householder QR otherwise.
///
/// # Panics
///
/// If the lengths do not match m, n, or m ≤ n.
/// With `try_gram` false the Gram route is not attempted (a caller that just saw it decline on a
/// similar Jacobian saves the wasted attempt). Returns whether the Gram route was taken.
pub(crate) fn factor(
    a: &mut [f64],
    m: usize,
    n: usize,
    r: &[f64],
    core: &mut Core,
    try_gram: bool,
) -> bool {
    assert!(m > n && a.len() == m * n && r.len() == m, "shapes");
    assert!(core.n == n && core.r.len() == n * n, "core shape");
    if try_gram && gram_cholesky(a, m, n, r, core) {
        return true;
    }
    householder(a, m, n, r, core);
    false
}

/// Smallest pivot of the Gram route, relative to the squared column norm: below it a column lies
/// within 1e-4 (relative) of the span of the others and the factorisation goes through Householder.
const PIVOT: f64 = 1e-8;

/// The core through the Gram matrix: RᵀR = JᵀJ by Cholesky and c = R⁻ᵀ(Jᵀr), the cheaper route (about
/// half the arithmetic of Householder QR, in independent dot products). Squaring the conditioning is
/// harmless here because a column that is nearly dependent on the others (pivot below [`PIVOT`] of its
/// squared norm) sends the factorisation to Householder instead: what is taken has step errors of order
/// n·ε/PIVOT ≈ 1e-7 relative, and the gradient Jᵀr = Rᵀc is formed from exact dot products either way,
/// so the solver's fixed point is unchanged. Returns false, with `core` to be overwritten, when it
/// declines.
fn gram_cholesky(a: &[f64], m: usize, n: usize, r: &[f64], core: &mut Core) -> bool {
    arch().dispatch(GramCholesky { a, m, n, r, core })
}

/// [`gram_cholesky`]'s arguments, for [`pulp::Arch::dispatch`] to run it compiled for the widest
/// vectors the processor has.
struct GramCholesky<'a> {
    a: &'a [f64],
    m: usize,
    n: usize,
    r: &'a [f64],
    core: &'a mut Core,
}

impl pulp::WithSimd for GramCholesky<'_> {
    type Output = bool;

    #[inline(always)]
    fn with_simd<S: pulp::Simd>(self, simd: S) -> bool {
        let GramCholesky { a, m, n, r, core } = self;
        let col = |k: usize| if k < n { &a[k * m..(k + 1) * m] } else { r };
        // Products of column j with columns j..n and with r, four at a time, in `prod`.
        let prod = &mut core.work;
        prod.clear();
        prod.resize(n + 1, 0.0);
        let out = &mut core.r;
        // Row j of R is finished before row j + 1 starts (the "up-looking" order), so each entry
        // needs only rows above it.
        for j in 0..n {
            let cj = col(j);
            for k in (j..=n).step_by(4) {
                let hi = (k + 4).min(n + 1);
                let mut others: [&[f64]; 4] = [&[]; 4];
                for (o, c) in others.iter_mut().zip(k..hi) {
                    *o = col(c);
                }
                dots4(simd, cj, &others[..hi - k], &mut prod[k..hi]);
            }
            let gjj = prod[j];
            core.col_norms[j] = gjj.sqrt();
            let mut d = gjj;
            for i in 0..j {
                d -= out[j * n + i] * out[j * n + i];
            }
            if !(d > PIVOT * gjj && d.is_finite()) {
                return false;
            }
            let rjj = d.sqrt();
            out[j * n + j] = rjj;
            for i in j + 1..n {
                out[j * n + i] = 0.0;
            }
            for k in j + 1..n {
                let mut v = prod[k];
                for i in 0..j {
                    v -= out[j * n + i] * out[k * n + i];
                }
                out[k * n + j] = v / rjj;
            }
            // c_j from Rᵀc = Jᵀr, by forward substitution.
            let mut v = prod[n];
            for i in 0..j {
                v -= out[j * n + i] * core.qtb[i];
            }
            core.qtb[j] = v / rjj;
        }
        true
    }
}

/// The core through Householder QR of J without pivoting (Golub & Van Loan 2013, algorithm 5.2.1), the
/// reflectors applied to r as they are made; a zero column leaves a zero on the diagonal of R, which
/// the solver handles.
fn householder(a: &mut [f64], m: usize, n: usize, r: &[f64], core: &mut Core) {
    arch().dispatch(Householder { a, m, n, r, core });
}

/// [`householder`]'s arguments, for [`pulp::Arch::dispatch`].
struct Householder<'a> {
    a: &'a mut [f64],
    m: usize,
    n: usize,
    r: &'a [f64],
    core: &'a mut Core,
}

impl pulp::WithSimd for Householder<'_> {
    type Output = ();

    #[inline(always)]
    fn with_simd<S: pulp::Simd>(self, simd: S) {
        let Householder { a, m, n, r, core } = self;
        core.r.fill(0.0);
        for k in 0..n {
            core.col_norms[k] = norm(&a[k * m..(k + 1) * m]);
        }
        // Qᵀr is built in a copy of r, kept with the core so that no call allocates once it is sized.
        let w = &mut core.work;
        w.clear();
        w.extend_from_slice(r);
        let out = &mut core.r;
        let mut s = [0.0; 4];
        for j in 0..n {
            let (done, rest) = a.split_at_mut((j + 1) * m);
            let v = &mut done[j * m + j..];
            let nv = norm(v);
            // A column this small (or nothing left of it) carries no information: leave it as it is.
            if !(nv > 1e-300 && nv.is_finite()) {
                for k in j + 1..n {
                    out[k * n + j] = rest[(k - j - 1) * m + j];
                }
                continue;
            }
            // H = I − τ v vᵀ with v = (x − β e₁)/(x₀ − β), so v₀ = 1, β = −sign(x₀)‖x‖ and
            // τ = (β − x₀)/β ∈ [1, 2]: no product of two small or two large numbers is formed
            // (LAPACK's dlarfg).
            let x0 = v[0];
            let beta = if x0 > 0.0 { -nv } else { nv };
            let scale = 1.0 / (x0 - beta);
            for vi in v[1..].iter_mut() {
                *vi *= scale;
            }
            v[0] = 1.0;
            let v = &*v;
            let tau = (beta - x0) / beta;
            out[j * n + j] = beta;
            // The remaining columns and then r (as column n), four products vᵀcₖ per pass over v.
            for k in (j + 1..=n).step_by(4) {
                let hi = (k + 4).min(n + 1);
                {
                    let mut cols: [&[f64]; 4] = [&[]; 4];
                    for (c, kk) in cols.iter_mut().zip(k..hi) {
                        *c = if kk < n {
                            &rest[(kk - j - 1) * m + j..(kk - j) * m]
                        } else {
                            &w[j..]
                        };
                    }
                    dots4(simd, v, &cols[..hi - k], &mut s);
                }
                for (kk, &sk) in (k..hi).zip(&s) {
                    let col = if kk < n {
                        &mut rest[(kk - j - 1) * m + j..(kk - j) * m]
                    } else {
                        &mut w[j..]
                    };
                    axpy(simd, -tau * sk, v, col);
                    if kk < n {
                        out[kk * n + j] = col[0];
                    }
                }
            }
        }
        core.qtb.copy_from_slice(&w[..n]);
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use nalgebra::DMatrix;

    /// A deterministic, badly scaled tall matrix and vector.
    fn case(m: usize, n: usize) -> (Vec<f64>, Vec<f64>) {
        let mut state = 0x2545_f491_4f6c_dd1d_u64;
        let mut next = || {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            (state >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        };
        let a: Vec<f64> = (0..m * n)
            .map(|k| next() * 10f64.powi((k / m) as i32 - 3))
            .collect();
        let r: Vec<f64> = (0..m).map(|_| next()).collect();
        (a, r)
    }

    /// R (n × n, column by column) of a core as a matrix, and c.
    fn parts(core: &Core) -> (DMatrix<f64>, nalgebra::DVector<f64>) {
        (
            DMatrix::from_column_slice(core.n, core.n, &core.r),
            nalgebra::DVector::from_column_slice(&core.qtb),
        )
    }

    /// The identities the solver relies on: RᵀR = JᵀJ, Rᵀc = Jᵀr, the column norms of J, and R upper
    /// triangular (Golub & Van Loan 2013, §5.3: the normal equations of a least-squares problem and
    /// their QR form).
    fn assert_core(core: &Core, a: &[f64], m: usize, n: usize, r: &[f64], what: &str) {
        let full_j = DMatrix::from_column_slice(m, n, a);
        let full_r = nalgebra::DVector::from_column_slice(r);
        let (rm, c) = parts(core);
        let gram = full_j.transpose() * &full_j;
        let diff = (rm.transpose() * &rm - &gram).norm();
        assert!(diff <= 1e-12 * gram.norm(), "{what}: RᵀR {diff}");
        let g = full_j.transpose() * &full_r;
        let gt = rm.transpose() * &c;
        assert!(
            (gt - &g).norm() <= 1e-12 * g.norm().max(1e-300),
            "{what}: Rᵀc"
        );
        for k in 0..n {
            let (got, want) = (core.col_norms[k], full_j.column(k).norm());
            assert!(
                (got - want).abs() <= 1e-13 * want,
                "{what}: column norm {k}"
            );
        }
        for col in 0..n {
            for row in col + 1..n {
                assert_eq!(rm[(row, col)], 0.0, "{what}: not triangular");
            }
        }
    }

    #[test]
    fn core_keeps_normal_equations_gradient_and_column_norms() {
        for (m, n) in [(142, 10), (9, 4), (5, 4), (60, 1), (143, 7)] {
            let (a, r) = case(m, n);
            for try_gram in [true, false] {
                let mut core = Core::new(n);
                factor(&mut a.clone(), m, n, &r, &mut core, try_gram);
                assert_core(&core, &a, m, n, &r, &format!("{m}×{n} gram {try_gram}"));
            }
        }
    }

    /// Both routes give the same core up to the signs of R's rows (R is unique up to them); the Gram
    /// route declines a column that is nearly a combination of the others (Golub & Van Loan 2013,
    /// §4.2: Cholesky of the normal equations squares the conditioning).
    #[test]
    fn both_routes_agree_and_the_gram_route_declines_near_dependence() {
        let (m, n) = (142, 10);
        let (a, r) = case(m, n);
        let mut via_gram = Core::new(n);
        assert!(gram_cholesky(&a, m, n, &r, &mut via_gram));
        let mut via_qr = Core::new(n);
        householder(&mut a.clone(), m, n, &r, &mut via_qr);
        for i in 0..n {
            let sign = via_gram.r[i * n + i].signum() * via_qr.r[i * n + i].signum();
            for k in i..n {
                let (g, q) = (via_gram.r[k * n + i], sign * via_qr.r[k * n + i]);
                assert!((g - q).abs() <= 1e-9 * via_gram.col_norms[k], "R {i},{k}");
            }
            let (g, q) = (via_gram.qtb[i], sign * via_qr.qtb[i]);
            assert!((g - q).abs() <= 1e-9 * norm(&r), "c {i}");
        }
        // Column 3 = column 2 + 1e-6 × noise: cond(J) ~ 1e6, too much for the Gram route.
        let mut near = a.clone();
        for i in 0..m {
            near[3 * m + i] = near[2 * m + i] * (1.0 + 1e-6 * a[5 * m + i]);
        }
        let mut core = Core::new(n);
        assert!(!gram_cholesky(&near, m, n, &r, &mut core));
        assert!(!factor(&mut near.clone(), m, n, &r, &mut core, true));
        assert_core(&core, &near, m, n, &r, "nearly dependent");
    }

    /// Residuals exactly zero: c = 0.
    #[test]
    fn zero_residuals_give_zero_c() {
        let (m, n) = (12, 3);
        let (a, _) = case(m, n);
        let zero = vec![0.0; m];
        for try_gram in [true, false] {
            let mut core = Core::new(n);
            factor(&mut a.clone(), m, n, &zero, &mut core, try_gram);
            assert!(core.qtb.iter().all(|g| *g == 0.0));
            assert_core(&core, &a, m, n, &zero, "zero residuals");
        }
    }

    /// A zero column (a parameter with no effect) gives a zero diagonal entry and no NaN; so does a
    /// column of 1e-170s, whose squares underflow.
    #[test]
    fn a_zero_or_vanishing_column_is_kept_finite() {
        for tiny in [0.0, 1e-170] {
            let (m, n) = (20, 3);
            let (mut a, r) = case(m, n);
            a[m..2 * m].fill(tiny);
            let mut core = Core::new(n);
            factor(&mut a.clone(), m, n, &r, &mut core, true);
            assert!(core.is_finite(), "{tiny}: {core:?}");
            assert!(core.r[n + 1].abs() <= 1e-169, "{tiny}");
            let full_j = DMatrix::from_column_slice(m, n, &a);
            let (rm, _) = parts(&core);
            let gram = full_j.transpose() * &full_j;
            assert!((rm.transpose() * &rm - &gram).norm() <= 1e-13 * gram.norm());
        }
    }

    #[test]
    fn dot_and_norm_match_plain_sums() {
        let (a, r) = case(23, 1);
        let plain: f64 = a.iter().zip(&r).map(|(x, y)| x * y).sum();
        assert!((dot(&a, &r) - plain).abs() <= 1e-15 * plain.abs().max(1.0));
        let n2: f64 = r.iter().map(|x| x * x).sum::<f64>().sqrt();
        assert!((norm(&r) - n2).abs() <= 1e-15 * n2);
        // Squares of these would underflow to zero or overflow to infinity without the scaling.
        let tiny = norm(&[1e-200, 1e-200]);
        assert!(
            (tiny / (1e-200 * 2f64.sqrt()) - 1.0).abs() < 1e-15,
            "{tiny}"
        );
        let huge = norm(&[3e200, 4e200]);
        assert!((huge / 5e200 - 1.0).abs() < 1e-15, "{huge}");
    }
}
