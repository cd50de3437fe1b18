//! The weighted linear least-squares problem of the test for one M, solved on buffers allocated once
//! per spectrum.
//!
//! The design matrix A has 2N rows (real parts, then imaginary parts, each divided by |Zᵢ|) and one
//! column per unknown. Columns are scaled to unit length, so the Gram matrix AᵀA has a unit diagonal,
//! and the normal equations AᵀA x = Aᵀb are solved by Cholesky on buffers allocated once per
//! spectrum. The columns of R₀, L and 1/C and the weighted data are shared by every M; the Voigt
//! columns, their norms and their products with b are built in one pass over the points.
//!
//! The Gram entries of two Voigt columns need no sum over the points. With aᵢ = ωᵢτₖ, bᵢ = ωᵢτₗ
//! and the partial fractions 1/((1 + ja)(1 − jb)) = [τₖ/(1 + ja) + τₗ/(1 − jb)]/(τₖ + τₗ),
//!
//! ```text
//! Σᵢ wᵢ² (1 + aᵢbᵢ)/((1 + aᵢ²)(1 + bᵢ²)) = (τₖ Pₖ + τₗ Pₗ)/(τₖ + τₗ),   Pₖ = Σᵢ wᵢ²/(1 + ωᵢ²τₖ²),
//! ```
//!
//! and Pₖ is the squared norm of column k, computed anyway for the scaling. The right-hand side is a
//! weighted mean of positive numbers, so it is also free of cancellation. Building the normal
//! equations for M elements therefore costs O(N·M) for the columns and O(M²) for the Gram matrix.
//!
//! Normal equations square the condition number. Agreement with the SVD solution used before (same
//! χ², same unknowns and μ to 10⁻⁶) is checked for every M up to N/2 on the circuit library, with and
//! without noise and series elements (`normal_equations_agree_with_the_svd_reference`). When a Cholesky pivot falls below
//! [`PIVOT_FLOOR`] (the scaled Gram matrix has a condition number of roughly 10¹⁰ or more, so the
//! columns are nearly dependent and x is poorly determined) the same scaled problem is solved by SVD
//! with singular values below 10⁻¹³·σ_max dropped, as before. That happens only for dense τ grids,
//! far into the over-fitting regime, or for a fixed M close to N. Above [`SVD_MAX_ROWS`] rows the
//! fallback is the eigen-decomposition of the same Gram matrix instead ([`GRAM_EIGEN_FLOOR`]), which
//! keeps the whole test O(N·M) in memory and time.

use crate::dense::dot;
use nalgebra::{DMatrix, DVector};
use num_complex::Complex64;

/// Smallest Cholesky pivot, relative to the unit diagonal, accepted before falling back to SVD.
pub(super) const PIVOT_FLOOR: f64 = 1e-10;

/// Rows (2N) above which the fallback for nearly dependent columns works on the p × p Gram matrix
/// instead of an SVD of the 2N × p matrix: that SVD costs O(N·p²) time and a second 2N × p matrix
/// for each M that needs it, which for 100,000 points made a failing spectrum (whose search runs to
/// the cap, mostly in the fallback) take minutes. Spectra of up to 10,000 points keep the SVD.
pub(super) const SVD_MAX_ROWS: usize = 20_000;

/// Most sweeps of the SVD and eigen iterations (they converge in tens on any sane matrix; unbounded,
/// they ran for minutes on spectra spanning hundreds of decades). A solve that does not converge gives
/// the zero solution, which the verdict then rejects.
const MAX_ITERATIONS: usize = 10_000;

/// Eigenvalues of the scaled Gram matrix at or below this fraction of the largest are dropped by
/// the Gram fallback (singular values below about 10⁻⁶ of the largest: what the Gram matrix, whose
/// entries carry rounding of 10⁻¹⁶, can still resolve).
pub(super) const GRAM_EIGEN_FLOOR: f64 = 1e-12;

/// Which series elements the model has besides R₀ and the Voigt elements.
#[derive(Clone, Copy, Debug)]
pub(super) struct Design {
    pub inductance: bool,
    pub capacitance: bool,
}

impl Design {
    /// Unknowns besides the Voigt elements: R₀, then L, then 1/C.
    pub fn fixed(self) -> usize {
        1 + self.inductance as usize + self.capacitance as usize
    }
}

/// One solved M. `x` is in the report's order: R₀, R₁ … R_M, then L, then 1/C.
pub(super) struct Fit {
    pub x: Vec<f64>,
    pub taus: Vec<f64>,
    pub mu: f64,
    /// Weighted sum of squared residuals.
    pub chi2: f64,
    /// Whether the SVD fallback was used: what the tests compare the two paths by (kept out of other
    /// builds, which do not need it).
    #[cfg(test)]
    pub svd: bool,
}

/// Decades by which the grid of τ reaches below 1/ω_max (half a decade). A process faster than the highest measured
/// frequency (a film arc, the 45° branch of a porous electrode) still shapes the highest points; with
/// the grid stopped at 1/ω_max the fit can only mimic it with alternating signs, which left
/// systematic residuals on the highest points of noisy two-arc spectra. At the low-frequency end the
/// grid stops at 1/ω_min as in the paper: an open tail there is the series capacitance's job, and time
/// constants beyond the lowest frequency would give the fit the freedom to follow a drift, which in a
/// sweep from high to low frequency builds up at that end.
pub(super) const HIGH_MARGIN_DECADES: f64 = 0.5;

/// Log-spaced time constants from 1/ω_max, lowered by [`HIGH_MARGIN_DECADES`], to 1/ω_min (one at
/// the geometric centre when M = 1).
#[cfg(test)]
pub(super) fn time_constants(m: usize, w_min: f64, w_max: f64) -> Vec<f64> {
    let mut t = vec![0.0; m];
    fill_time_constants(&mut t, w_min, w_max);
    t
}

fn fill_time_constants(t: &mut [f64], w_min: f64, w_max: f64) {
    let m = t.len();
    let (t1, tm) = (10f64.powf(-HIGH_MARGIN_DECADES) / w_max, 1.0 / w_min);
    if m == 1 {
        t[0] = (t1 * tm).sqrt();
        return;
    }
    let (l1, lm) = (t1.log10(), tm.log10());
    for (k, tk) in t.iter_mut().enumerate() {
        *tk = 10f64.powf(l1 + k as f64 / (m - 1) as f64 * (lm - l1));
    }
}

/// Voigt resistances at or below this size, in units of the spectrum's typical |Z| (the problem is
/// solved on data divided by it, see [`super::kramers_kronig`]), are round-off and count as zero in μ.
pub(super) const NEGLIGIBLE_RESISTANCE: f64 = 1e-10;

/// Lowest value μ takes: a fit whose Voigt resistances are all negative (and not negligible) gets this
/// instead of −∞, so that μ stays a finite number in every report.
pub const MU_FLOOR: f64 = -1e6;

/// μ = 1 − Σ_{Rₖ<0}|Rₖ| / Σ_{Rₖ≥0}|Rₖ| over the Voigt resistances only, with resistances below
/// [`NEGLIGIBLE_RESISTANCE`] left out (a flat, purely resistive spectrum has only round-off there
/// and gets μ = 1) and the result floored at [`MU_FLOOR`].
pub(super) fn mu(resistances: &[f64]) -> f64 {
    let (mut pos, mut neg) = (0.0, 0.0);
    for &r in resistances {
        if r.abs() <= NEGLIGIBLE_RESISTANCE {
            continue;
        }
        if r > 0.0 {
            pos += r;
        } else {
            neg -= r;
        }
    }
    if neg == 0.0 {
        1.0
    } else if pos > 0.0 {
        (1.0 - neg / pos).max(MU_FLOOR)
    } else {
        MU_FLOOR
    }
}

/// Buffers and the parts of the problem shared by every M: weights, right-hand side and the columns
/// of R₀, L and 1/C with their Gram entries.
pub(super) struct Workspace {
    n: usize,
    w: Vec<f64>,
    /// 1/|Zᵢ|.
    weight: Vec<f64>,
    /// Weighted data, 2N.
    b: Vec<f64>,
    w_min: f64,
    w_max: f64,
    design: Design,
    /// Column-major, 2N rows; the fixed columns first, then the Voigt columns. Scaled to unit length.
    cols: Vec<f64>,
    /// The column norms divided out.
    norms: Vec<f64>,
    /// Cholesky factor of the Gram matrix, row-major p×p (lower triangle used).
    chol: Vec<f64>,
    /// Aᵀb, then the solution (internal order, scaled).
    sol: Vec<f64>,
    /// Residual A x − b, 2N: the fit minus the data over |Z|.
    pub r: Vec<f64>,
    taus: Vec<f64>,
    /// [`SVD_MAX_ROWS`]; the tests lower it to compare the two fallbacks.
    pub svd_max_rows: usize,
    /// Scratch of 2N for the leverages.
    scratch: Vec<f64>,
}

impl Workspace {
    /// Prepares the problem for up to `m_max` Voigt elements.
    pub fn new(w: &[f64], z: &[Complex64], design: Design, m_max: usize) -> Self {
        let n = w.len();
        let (w_min, w_max) = w.iter().fold((f64::INFINITY, 0.0f64), |(lo, hi), &x| {
            (lo.min(x), hi.max(x))
        });
        let weight: Vec<f64> = z.iter().map(|zi| 1.0 / zi.norm()).collect();
        let mut b = vec![0.0; 2 * n];
        for i in 0..n {
            b[i] = z[i].re * weight[i];
            b[n + i] = z[i].im * weight[i];
        }
        let p_max = design.fixed() + m_max;
        let mut ws = Workspace {
            n,
            w: w.to_vec(),
            weight,
            b,
            w_min,
            w_max,
            design,
            cols: vec![0.0; 2 * n * p_max],
            norms: vec![1.0; p_max],
            chol: vec![0.0; p_max * p_max],
            sol: vec![0.0; p_max],
            r: vec![0.0; 2 * n],
            taus: Vec::with_capacity(m_max),
            svd_max_rows: SVD_MAX_ROWS,
            scratch: Vec::new(),
        };
        // Fixed columns: R₀ (real rows), ωL and −1/(ωC) (imaginary rows).
        let weight = ws.weight.clone();
        ws.column_mut(0)[..n].copy_from_slice(&weight);
        let mut j = 1;
        if design.inductance {
            for ((c, &wt), &wi) in ws.column_mut(j)[n..].iter_mut().zip(&weight).zip(w) {
                *c = wt * wi;
            }
            j += 1;
        }
        if design.capacitance {
            for ((c, &wt), &wi) in ws.column_mut(j)[n..].iter_mut().zip(&weight).zip(w) {
                *c = -wt / wi;
            }
        }
        for j in 0..design.fixed() {
            ws.scale_column(j);
        }
        ws
    }

    /// Unknowns besides the Voigt elements.
    pub fn fixed(&self) -> usize {
        self.design.fixed()
    }

    /// Length of the design matrix buffer (2N rows × all columns), read by the tests.
    #[cfg(test)]
    pub fn matrix_len(&self) -> usize {
        self.cols.len()
    }

    fn column_mut(&mut self, j: usize) -> &mut [f64] {
        let len = 2 * self.n;
        &mut self.cols[j * len..(j + 1) * len]
    }

    fn column(&self, j: usize) -> &[f64] {
        let len = 2 * self.n;
        &self.cols[j * len..(j + 1) * len]
    }

    /// Scales column j to unit length. The norm is taken on the column divided by its largest
    /// entry, so that squares neither overflow nor underflow; a column with a non-finite entry (ωL
    /// or 1/(ωC) beyond the range of f64) is set to zero, which leaves that unknown at zero.
    fn scale_column(&mut self, j: usize) {
        let c = self.column_mut(j);
        let big = c.iter().fold(0.0f64, |a, v| a.max(v.abs()));
        if !big.is_finite() || big == 0.0 {
            c.iter_mut().for_each(|v| *v = 0.0);
            self.norms[j] = 1.0;
            return;
        }
        c.iter_mut().for_each(|v| *v /= big);
        let unit = dot(c, c).sqrt();
        let inv = 1.0 / unit;
        c.iter_mut().for_each(|v| *v *= inv);
        self.norms[j] = big * unit;
    }

    /// Solves the problem with M Voigt elements; afterwards `self.r` holds its residuals.
    pub fn fit(&mut self, m: usize) -> Fit {
        let n = self.n;
        let fixed = self.design.fixed();
        let p = fixed + m;
        self.taus.resize(m, 0.0);
        fill_time_constants(&mut self.taus, self.w_min, self.w_max);
        let len = 2 * n;
        let mut all_scaled = true;
        for k in 0..m {
            let tau = self.taus[k];
            let j = fixed + k;
            let col = &mut self.cols[j * len..(j + 1) * len];
            let (re, im) = col.split_at_mut(n);
            let (b_re, b_im) = self.b.split_at(n);
            // Column, its squared norm and its product with b in one pass.
            let (mut norm2, mut q) = (0.0, 0.0);
            for ((((re, im), &w), &weight), (&br, &bi)) in re
                .iter_mut()
                .zip(im.iter_mut())
                .zip(&self.w)
                .zip(&self.weight)
                .zip(b_re.iter().zip(b_im))
            {
                let x = w * tau;
                let u = weight / (1.0 + x * x);
                // −x·u written so that x → 0 and x → ∞ (ωτ beyond the range of f64) both give 0,
                // not NaN.
                let v = -weight / (x + 1.0 / x);
                *re = u;
                *im = v;
                norm2 += weight * u;
                q += br * u + bi * v;
            }
            let norm = norm2.sqrt();
            // A column that vanishes at every point (a τ so far from 1/ω that ωτ under- or
            // overflows) is left at zero; the closed-form Gram entries assume non-zero norms, so such
            // a problem goes to SVD, which drops the column.
            let ok = norm.is_finite() && norm > 0.0;
            all_scaled &= ok;
            let inv = if ok { 1.0 / norm } else { 0.0 };
            col.iter_mut().for_each(|v| *v *= inv);
            self.norms[j] = if ok { norm } else { 1.0 };
            self.sol[j] = q * inv;
        }
        let svd = !(all_scaled && self.cholesky(p));
        if svd && len > self.svd_max_rows {
            self.solve_gram_eigen(p);
        } else if svd {
            self.solve_svd(p);
        } else {
            for j in 0..fixed {
                self.sol[j] = dot(self.column(j), &self.b);
            }
            self.substitute(p);
        }
        self.residual(p);
        let chi2 = dot(&self.r, &self.r);
        // Back to the report's order and to unscaled values.
        let mut x = Vec::with_capacity(p);
        x.push(self.sol[0] / self.norms[0]);
        for k in 0..m {
            x.push(self.sol[fixed + k] / self.norms[fixed + k]);
        }
        for j in 1..fixed {
            x.push(self.sol[j] / self.norms[j]);
        }
        Fit {
            mu: mu(&x[1..=m]),
            x,
            taus: self.taus.clone(),
            chi2,
            #[cfg(test)]
            svd,
        }
    }

    /// Builds and factors the Gram matrix of the first `p` columns in place; false when a pivot
    /// falls below [`PIVOT_FLOOR`].
    fn cholesky(&mut self, p: usize) -> bool {
        let len = 2 * self.n;
        let fixed = self.design.fixed();
        for i in 0..p {
            for j in 0..=i {
                self.chol[i * p + j] = if j >= fixed {
                    // Both Voigt columns: the closed form (module docs), O(1) instead of O(N).
                    let (ti, tj) = (self.taus[i - fixed], self.taus[j - fixed]);
                    let (ni, nj) = (self.norms[i], self.norms[j]);
                    (ti * ni * ni + tj * nj * nj) / ((ti + tj) * ni * nj)
                } else {
                    dot(
                        &self.cols[i * len..(i + 1) * len],
                        &self.cols[j * len..(j + 1) * len],
                    )
                };
            }
        }
        // Cholesky–Banachiewicz, row by row, overwriting the lower triangle.
        for i in 0..p {
            let (before, after) = self.chol.split_at_mut(i * p);
            let ri = &mut after[..p];
            for j in 0..i {
                let lj = &before[j * p..j * p + j];
                ri[j] = (ri[j] - dot(&ri[..j], lj)) / before[j * p + j];
            }
            let d = ri[i] - dot(&ri[..i], &ri[..i]);
            // Also false for NaN.
            if d.partial_cmp(&PIVOT_FLOOR) != Some(std::cmp::Ordering::Greater) {
                return false;
            }
            ri[i] = d.sqrt();
        }
        true
    }

    /// Solves L Lᵀ y = rhs in place on `sol`.
    fn substitute(&mut self, p: usize) {
        let v = &mut self.sol;
        let l = &self.chol;
        for i in 0..p {
            let s = v[i] - dot(&l[i * p..i * p + i], &v[..i]);
            v[i] = s / l[i * p + i];
        }
        crate::nnls::back_substitute(l, p, p, v);
    }

    /// r = A x − b for the first `p` columns.
    fn residual(&mut self, p: usize) {
        let len = 2 * self.n;
        for (r, b) in self.r.iter_mut().zip(&self.b) {
            *r = -b;
        }
        for j in 0..p {
            let xj = self.sol[j];
            let c = &self.cols[j * len..(j + 1) * len];
            for (r, a) in self.r.iter_mut().zip(c) {
                *r += xj * a;
            }
        }
    }

    /// The Gram matrix AᵀA of the first `p` (unit) columns, Voigt entries in closed form; `empty[j]`
    /// marks a column left at zero.
    fn gram(&self, p: usize) -> DMatrix<f64> {
        let len = 2 * self.n;
        let fixed = self.design.fixed();
        let empty: Vec<bool> = (0..p)
            .map(|j| self.column(j).iter().all(|v| *v == 0.0))
            .collect();
        let mut g = DMatrix::<f64>::zeros(p, p);
        for i in 0..p {
            for j in 0..=i {
                let v = if j >= fixed {
                    let (ti, tj) = (self.taus[i - fixed], self.taus[j - fixed]);
                    let (ni, nj) = (self.norms[i], self.norms[j]);
                    if empty[i] || empty[j] {
                        0.0
                    } else {
                        (ti * ni * ni + tj * nj * nj) / ((ti + tj) * ni * nj)
                    }
                } else {
                    dot(
                        &self.cols[i * len..(i + 1) * len],
                        &self.cols[j * len..(j + 1) * len],
                    )
                };
                g[(i, j)] = v;
                g[(j, i)] = v;
            }
        }
        g
    }

    /// The leverages hᵢ (diagonal of the hat matrix A A⁺) of the 2N rows of the last fit with `p`
    /// unknowns, written to `h` (real rows, then imaginary rows): hᵢ = Σₖ (aᵢ·vₖ)²/λₖ over the
    /// eigenpairs of AᵀA kept by the solve ([`GRAM_EIGEN_FLOOR`]). A residual of a row with leverage
    /// h has variance (1 − h)σ² under independent noise of variance σ², so e/√(1 − h) puts every
    /// point, edge or interior, on the same scale (Cook & Weisberg 1982, "Residuals and Influence in
    /// Regression", ch. 2; common practice in regression diagnostics). O(N·p²). Leaves `h` at zero
    /// when the decomposition fails.
    pub fn leverage(&mut self, p: usize, h: &mut [f64]) {
        if h.is_empty() {
            return;
        }
        let len = 2 * self.n;
        h.iter_mut().for_each(|v| *v = 0.0);
        let g = self.gram(p);
        if g.iter().any(|v| !v.is_finite()) {
            return;
        }
        let Some(eig) = g.try_symmetric_eigen(f64::EPSILON, MAX_ITERATIONS) else {
            return;
        };
        let lmax = eig.eigenvalues.iter().copied().fold(0.0, f64::max);
        self.scratch.resize(len, 0.0);
        for (k, &lambda) in eig.eigenvalues.iter().enumerate() {
            if !(lambda > GRAM_EIGEN_FLOOR * lmax && lambda > 0.0) {
                continue;
            }
            let t = &mut self.scratch;
            t.iter_mut().for_each(|v| *v = 0.0);
            for j in 0..p {
                let vj = eig.eigenvectors[(j, k)];
                let c = &self.cols[j * len..(j + 1) * len];
                for (t, a) in t.iter_mut().zip(c) {
                    *t += vj * a;
                }
            }
            let inv = 1.0 / lambda;
            for (h, t) in h.iter_mut().zip(t.iter()) {
                *h += t * t * inv;
            }
        }
    }

    /// The scaled problem through the eigen-decomposition of its Gram matrix, dropping eigenvalues
    /// at or below [`GRAM_EIGEN_FLOOR`] of the largest: a pseudo-inverse in O(p³) with no 2N × p
    /// copy, used above [`SVD_MAX_ROWS`] rows. Expects the Voigt entries of `sol` to hold Aᵀb.
    fn solve_gram_eigen(&mut self, p: usize) {
        let fixed = self.design.fixed();
        for j in 0..fixed {
            self.sol[j] = dot(self.column(j), &self.b);
        }
        let zero = |ws: &mut Self| ws.sol[..p].iter_mut().for_each(|v| *v = 0.0);
        let g = self.gram(p);
        let c = DVector::from_column_slice(&self.sol[..p]);
        // The eigen iteration need not end on non-finite input.
        if g.iter().chain(c.iter()).any(|v| !v.is_finite()) {
            zero(self);
            return;
        }
        // Bounded: on badly scaled (subnormal) entries the iteration can take very long.
        let Some(eig) = g.try_symmetric_eigen(f64::EPSILON, MAX_ITERATIONS) else {
            zero(self);
            return;
        };
        let lmax = eig.eigenvalues.iter().copied().fold(0.0, f64::max);
        let mut x = DVector::<f64>::zeros(p);
        for (k, &lambda) in eig.eigenvalues.iter().enumerate() {
            if lambda > GRAM_EIGEN_FLOOR * lmax && lambda > 0.0 {
                let v = eig.eigenvectors.column(k);
                x += v * (v.dot(&c) / lambda);
            }
        }
        self.sol[..p].copy_from_slice(x.as_slice());
    }

    /// The scaled problem by SVD, dropping singular values below 10⁻¹³·σ_max.
    fn solve_svd(&mut self, p: usize) {
        let len = 2 * self.n;
        let a = DMatrix::from_column_slice(len, p, &self.cols[..len * p]);
        let b = DVector::from_column_slice(&self.b);
        // The SVD's iteration need not end on non-finite input; the columns are scaled and finite
        // by construction, but a guard costs one pass.
        if a.iter().chain(b.iter()).any(|v| !v.is_finite()) {
            self.sol[..p].iter_mut().for_each(|v| *v = 0.0);
            return;
        }
        // Scaled to entries of at most 1, so that the iteration's products cannot overflow into a NaN
        // singular value (nalgebra panics on one while sorting); x = A⁺b scales back as sb/sa.
        let sa = a.amax();
        let sb = b.amax();
        if !(sa > 0.0 && sb > 0.0) {
            self.sol[..p].iter_mut().for_each(|v| *v = 0.0);
            return;
        }
        // Subnormal entries (far below anything that counts against entries of order one) are
        // flushed to zero: they too can turn the iteration's rotations into NaN.
        let flush = |v: f64| if v.abs() < 1e-200 { 0.0 } else { v };
        let (a, b) = ((a / sa).map(flush), (b / sb).map(flush));
        // Last line of defence: on some matrices of such data nalgebra's SVD still ends with a NaN
        // singular value and panics while sorting them (found by the fuzz harness); that is no
        // solution here, not a crash of the whole check.
        let svd =
            std::panic::catch_unwind(move || a.try_svd(true, true, f64::EPSILON, MAX_ITERATIONS));
        let Ok(Some(svd)) = svd else {
            self.sol[..p].iter_mut().for_each(|v| *v = 0.0);
            return;
        };
        // nalgebra's solve panics on a NaN singular value (entries near the ends of f64's range).
        if svd.singular_values.iter().any(|v| !v.is_finite()) {
            self.sol[..p].iter_mut().for_each(|v| *v = 0.0);
            return;
        }
        let smax = svd.singular_values.max();
        let x = svd
            .solve(&b, 1e-13 * smax)
            .map(|x| x * (sb / sa))
            .unwrap_or_else(|_| DVector::zeros(p));
        self.sol[..p].copy_from_slice(x.as_slice());
    }
}
