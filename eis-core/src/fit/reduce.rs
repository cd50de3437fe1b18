//! Compression of a tall least-squares problem to its square core, so that the Levenberg–Marquardt
//! solver factors an (n + 1) × n matrix per iteration instead of the m × n Jacobian.
//!
//! At a point with residuals r (m of them) and Jacobian J (m × n), let u = r/‖r‖, g = Jᵀu and
//! P = I − uuᵀ. The solver is handed
//!
//! ```text
//! r̃ = [0, …, 0, ‖r‖]ᵀ   and   J̃ = [R; gᵀ],   R the triangular factor of P·J = J − u·gᵀ.
//! ```
//!
//! Every quantity a trust-region Levenberg–Marquardt step uses is unchanged: J̃ᵀJ̃ = JᵀPJ + ggᵀ = JᵀJ
//! (P is a projector and JᵀPJ = JᵀJ − ggᵀ), J̃ᵀr̃ = ‖r‖g = Jᵀr, ‖J̃p‖ = ‖Jp‖ for every step p, the column
//! norms ‖J̃eₖ‖ = ‖Jeₖ‖ that scale the variables, and ‖r̃‖ = ‖r‖. So the iterates are those of the full
//! problem up to rounding. Because a point's compressed residuals depend only on ‖r‖, a trial point
//! costs one evaluation of the model; the factorisation is made only where the solver asks for a
//! Jacobian (accepted points). The triangular factor comes from the Gram matrix by Cholesky when every
//! column is safely independent of the others, which is the cheaper route, and from Householder QR of
//! P·J otherwise, so that a badly conditioned J is never squared (Golub & Van Loan, *Matrix
//! Computations*, 4th ed. 2013, §4.2 and §5.2–5.3).

use crate::dense::dot;

/// ‖a‖: a plain sum of squares ([`dot`]), redone scaled by the largest entry only when
/// that sum left the range where it is exact to round-off (squares of huge entries overflowing, of tiny
/// ones underflowing).
#[inline]
fn norm(a: &[f64]) -> f64 {
    let plain = dot(a, a);
    if plain.is_finite() && plain > 1e-280 {
        return plain.sqrt();
    }
    let big = a.iter().fold(0.0_f64, |m, x| m.max(x.abs()));
    if big == 0.0 || !big.is_finite() {
        return big;
    }
    let s = 1.0 / big;
    let scaled: f64 = a.iter().map(|x| (x * s) * (x * s)).sum();
    big * scaled.sqrt()
}

/// Writes J̃ = [R; gᵀ] for the point with Jacobian `a` (m rows, n columns, column by column; may be
/// overwritten) and residuals `r` (m) into `out` ((n + 1) × n, column by column, so entry (i, k) at
/// `k * (n + 1) + i`). See the module documentation: R comes from the Gram matrix when the columns are
/// safely independent, from Householder QR otherwise.
///
/// # Panics
///
/// If the lengths do not match m, n, or m ≤ n.
/// With `try_gram` false the Gram route is not attempted (a caller that just saw it decline on a
/// similar Jacobian saves the wasted attempt). Returns whether the Gram route was taken.
pub(crate) fn compress(
    a: &mut [f64],
    m: usize,
    n: usize,
    r: &[f64],
    out: &mut [f64],
    try_gram: bool,
) -> bool {
    assert!(m > n && a.len() == m * n && r.len() == m, "shapes");
    assert!(out.len() == (n + 1) * n, "output shape");
    if try_gram && gram_cholesky(a, m, n, r, out) {
        return true;
    }
    householder(a, m, n, r, out);
    false
}

/// Smallest pivot of the Gram route, relative to the squared column norm: below it a column lies
/// within 1e-4 (relative) of the span of the others and the factorisation goes through Householder.
const PIVOT: f64 = 1e-8;

/// J̃ through the Gram matrix: RᵀR = JᵀJ − ggᵀ by Cholesky, the cheaper route (about half the
/// arithmetic of Householder QR, in independent dot products). Squaring the conditioning is harmless
/// here because a column that is nearly dependent on the others (pivot below [`PIVOT`] of its squared
/// norm) sends the factorisation to Householder instead: what is taken has step errors of order
/// n·ε/PIVOT ≈ 1e-7 relative, and the gradient row gᵀ is exact either way, so the solver's fixed point
/// is unchanged. Returns false, with `out` to be overwritten, when it declines.
fn gram_cholesky(a: &[f64], m: usize, n: usize, r: &[f64], out: &mut [f64]) -> bool {
    let ld = n + 1;
    let rn = norm(r);
    let inv = if rn > 0.0 && rn.is_finite() {
        1.0 / rn
    } else {
        0.0
    };
    let col = |k: usize| &a[k * m..(k + 1) * m];
    for k in 0..n {
        out[k * ld + n] = dot(col(k), r) * inv;
    }
    for j in 0..n {
        let gj = out[j * ld + n];
        let gjj = dot(col(j), col(j));
        let mut d = gjj - gj * gj;
        for i in 0..j {
            d -= out[j * ld + i] * out[j * ld + i];
        }
        if !(d > PIVOT * gjj && d.is_finite()) {
            return false;
        }
        let rjj = d.sqrt();
        out[j * ld + j] = rjj;
        for i in j + 1..n {
            out[j * ld + i] = 0.0;
        }
        for k in j + 1..n {
            let mut v = dot(col(j), col(k)) - gj * out[k * ld + n];
            for i in 0..j {
                v -= out[j * ld + i] * out[k * ld + i];
            }
            out[k * ld + j] = v / rjj;
        }
    }
    true
}

/// J̃ through the projection P·J and Householder QR without pivoting (Golub & Van Loan 2013,
/// algorithm 5.2.1); a zero column leaves a zero on the diagonal of R, which the solver's own pivoted
/// factorisation handles.
fn householder(a: &mut [f64], m: usize, n: usize, r: &[f64], out: &mut [f64]) {
    out.fill(0.0);
    let ld = n + 1;
    let mut at = |i: usize, k: usize, v: f64| out[k * ld + i] = v;
    // g = Jᵀu and P·J = J − u gᵀ, column by column.
    let rn = norm(r);
    if rn > 0.0 && rn.is_finite() {
        let inv = 1.0 / rn;
        for k in 0..n {
            let col = &mut a[k * m..(k + 1) * m];
            let g = dot(col, r) * inv;
            at(n, k, g);
            let s = g * inv;
            for (c, ri) in col.iter_mut().zip(r) {
                *c -= s * ri;
            }
        }
    }
    for j in 0..n {
        let (done, rest) = a.split_at_mut((j + 1) * m);
        let v = &mut done[j * m + j..];
        let nv = norm(v);
        // A column this small (or nothing left of it) carries no information: leave it as it is.
        if !(nv > 1e-300 && nv.is_finite()) {
            for k in j + 1..n {
                at(j, k, rest[(k - j - 1) * m + j]);
            }
            continue;
        }
        // H = I − τ v vᵀ with v = (x − β e₁)/(x₀ − β), so v₀ = 1, β = −sign(x₀)‖x‖ and τ = (β − x₀)/β ∈
        // [1, 2]: no product of two small or two large numbers is formed (LAPACK's dlarfg).
        let x0 = v[0];
        let beta = if x0 > 0.0 { -nv } else { nv };
        let scale = 1.0 / (x0 - beta);
        for vi in v[1..].iter_mut() {
            *vi *= scale;
        }
        v[0] = 1.0;
        let tau = (beta - x0) / beta;
        at(j, j, beta);
        for k in j + 1..n {
            let col = &mut rest[(k - j - 1) * m + j..(k - j) * m];
            let s = tau * dot(v, col);
            for (c, vi) in col.iter_mut().zip(v.iter()) {
                *c -= s * vi;
            }
            at(j, k, col[0]);
        }
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

    /// The compressed problem keeps the normal equations, the gradient, the column norms and the
    /// residual norm of the full one (the identities the module relies on; Golub & Van Loan 2013, §5.3).
    #[test]
    fn compression_keeps_normal_equations_gradient_and_norm() {
        for (m, n) in [(142, 10), (9, 4), (5, 4), (60, 1)] {
            let (a, r) = case(m, n);
            let full_j = DMatrix::from_column_slice(m, n, &a);
            let full_r = nalgebra::DVector::from_column_slice(&r);
            let mut a2 = a.clone();
            let mut j = DMatrix::zeros(n + 1, n);
            compress(&mut a2, m, n, &r, j.as_mut_slice(), true);
            let mut rr = nalgebra::DVector::zeros(n + 1);
            rr[n] = full_r.norm();
            let gram = full_j.transpose() * &full_j;
            let diff = (j.transpose() * &j - &gram).norm();
            assert!(diff <= 1e-13 * gram.norm(), "JᵀJ {m}×{n}: {diff}");
            let g = full_j.transpose() * &full_r;
            let gt = j.transpose() * &rr;
            assert!((gt - &g).norm() <= 1e-13 * g.norm(), "Jᵀr {m}×{n}");
            for k in 0..n {
                let (a, b) = (j.column(k).norm(), full_j.column(k).norm());
                assert!((a - b).abs() <= 1e-13 * b, "column norm {k}");
            }
            // The first n rows are upper triangular.
            for c in 0..n {
                for row in c + 1..n {
                    assert_eq!(j[(row, c)], 0.0);
                }
            }
        }
    }

    /// Both routes give a factor of the same normal equations with the same gradient row; the Gram
    /// route declines a column that is nearly a combination of the others (Golub & Van Loan 2013,
    /// §4.2: Cholesky of the normal equations squares the conditioning).
    #[test]
    fn both_routes_agree_and_the_gram_route_declines_near_dependence() {
        let (m, n) = (142, 10);
        let (a, r) = case(m, n);
        let full = DMatrix::from_column_slice(m, n, &a);
        let gram = full.transpose() * &full;
        let mut via_gram = DMatrix::zeros(n + 1, n);
        assert!(gram_cholesky(&a, m, n, &r, via_gram.as_mut_slice()));
        let mut via_qr = DMatrix::zeros(n + 1, n);
        householder(&mut a.clone(), m, n, &r, via_qr.as_mut_slice());
        for j in [&via_gram, &via_qr] {
            assert!((j.transpose() * j - &gram).norm() <= 1e-12 * gram.norm());
        }
        assert!((via_gram.row(n) - via_qr.row(n)).norm() <= 1e-14 * via_qr.row(n).norm());
        // Column 3 = column 2 + 1e-6 × noise: cond(J) ~ 1e6, too much for the Gram route.
        let mut near = a.clone();
        for i in 0..m {
            near[3 * m + i] = near[2 * m + i] * (1.0 + 1e-6 * a[5 * m + i]);
        }
        let mut out = DMatrix::zeros(n + 1, n);
        assert!(!gram_cholesky(&near, m, n, &r, out.as_mut_slice()));
        let full = DMatrix::from_column_slice(m, n, &near);
        compress(&mut near.clone(), m, n, &r, out.as_mut_slice(), true);
        let gram = full.transpose() * &full;
        assert!((out.transpose() * &out - &gram).norm() <= 1e-12 * gram.norm());
    }

    /// Residuals exactly zero: nothing to project out, J̃ = [R; 0].
    #[test]
    fn zero_residuals_leave_the_gradient_row_zero() {
        let (m, n) = (12, 3);
        let (mut a, _) = case(m, n);
        let full_j = DMatrix::from_column_slice(m, n, &a);
        let mut j = DMatrix::zeros(n + 1, n);
        compress(&mut a, m, n, &vec![0.0; m], j.as_mut_slice(), true);
        assert!(j.row(n).iter().all(|g| *g == 0.0));
        let gram = full_j.transpose() * &full_j;
        assert!((j.transpose() * &j - &gram).norm() <= 1e-13 * gram.norm());
    }

    /// A zero column (a parameter with no effect) gives a zero diagonal entry and no NaN; so does a
    /// column of 1e-170s, whose squares underflow.
    #[test]
    fn a_zero_or_vanishing_column_is_kept_finite() {
        for tiny in [0.0, 1e-170] {
            let (m, n) = (20, 3);
            let (mut a, r) = case(m, n);
            a[m..2 * m].fill(tiny);
            let full_j = DMatrix::from_column_slice(m, n, &a);
            let mut j = DMatrix::zeros(n + 1, n);
            compress(&mut a, m, n, &r, j.as_mut_slice(), true);
            assert!(j.iter().all(|x| x.is_finite()), "{tiny}: {j}");
            assert!(j[(1, 1)].abs() <= 1e-169, "{tiny}");
            let gram = full_j.transpose() * &full_j;
            assert!((j.transpose() * &j - &gram).norm() <= 1e-13 * gram.norm());
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
