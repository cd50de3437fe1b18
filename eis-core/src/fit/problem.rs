//! The weighted complex least-squares problem handed to Levenberg–Marquardt, in transformed parameters
//! that keep every bound.

use super::lm::CoreProblem;
use super::reduce::Core;
use crate::eval::{Grid, Plan, Workspace};
use nalgebra::DMatrix;
use num_complex::Complex64;
use std::cell::RefCell;

/// How a free parameter p is mapped to an unbounded internal coordinate x.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Transform {
    /// p = exp(x): positive, unbounded above.
    Log,
    /// p = lo + exp(x): above a positive lower bound.
    LogShift { lo: f64 },
    /// ln p = ln lo + (ln hi − ln lo)·σ(x): positive with both bounds, spread over decades.
    LogLogistic {
        ln_lo: f64,
        ln_hi: f64,
        lo: f64,
        hi: f64,
    },
    /// p = lo + (hi − lo)·σ(x): bounded, may reach zero (CPE exponents).
    Logistic { lo: f64, hi: f64 },
    /// p = hi·σ(x): positive with only an upper bound.
    UpperLogistic { hi: f64 },
}

/// Internal coordinates are clamped to this magnitude so exp and σ never overflow.
const X_LIMIT: f64 = 600.0;

fn sigmoid(x: f64) -> f64 {
    1.0 / (1.0 + (-x).exp())
}

/// ln(s/(1−s)), with s pulled strictly inside (0, 1).
fn logit(s: f64) -> f64 {
    let s = s.clamp(1e-15, 1.0 - 1e-15);
    (s / (1.0 - s)).ln()
}

impl Transform {
    /// Chooses the transform for bounds (lo, hi) of a parameter whose domain is positive (`positive`)
    /// or an interval.
    pub(crate) fn for_bounds(lo: f64, hi: f64, positive: bool) -> Transform {
        match (lo > 0.0, hi.is_finite()) {
            (true, true) if positive => Transform::LogLogistic {
                ln_lo: lo.ln(),
                ln_hi: hi.ln(),
                lo,
                hi,
            },
            (_, true) if positive && lo == 0.0 => Transform::UpperLogistic { hi },
            (_, true) => Transform::Logistic { lo, hi },
            (true, false) => Transform::LogShift { lo },
            (false, false) => Transform::Log,
        }
    }

    /// p(x).
    pub(crate) fn to_param(self, x: f64) -> f64 {
        let x = x.clamp(-X_LIMIT, X_LIMIT);
        match self {
            Transform::Log => x.exp(),
            Transform::LogShift { lo } => lo + x.exp(),
            // exp(ln hi) and lo + (hi − lo) may round past a bound by an ulp: clamp, so that the
            // bounds hold exactly.
            Transform::LogLogistic {
                ln_lo,
                ln_hi,
                lo,
                hi,
            } => (ln_lo + (ln_hi - ln_lo) * sigmoid(x)).exp().clamp(lo, hi),
            Transform::Logistic { lo, hi } => (lo + (hi - lo) * sigmoid(x)).clamp(lo, hi),
            Transform::UpperLogistic { hi } => (hi * sigmoid(x)).min(hi),
        }
    }

    /// dp/dx at x.
    pub(crate) fn derivative(self, x: f64) -> f64 {
        if x.abs() > X_LIMIT {
            return 0.0;
        }
        match self {
            Transform::Log => x.exp(),
            Transform::LogShift { .. } => x.exp(),
            Transform::LogLogistic { ln_lo, ln_hi, .. } => {
                let s = sigmoid(x);
                self.to_param(x) * (ln_hi - ln_lo) * s * (1.0 - s)
            }
            Transform::Logistic { lo, hi } => {
                let s = sigmoid(x);
                (hi - lo) * s * (1.0 - s)
            }
            Transform::UpperLogistic { hi } => {
                let s = sigmoid(x);
                hi * s * (1.0 - s)
            }
        }
    }

    /// x(p), for p inside the bounds (values on a bound are moved just inside).
    pub(crate) fn to_internal(self, p: f64) -> f64 {
        match self {
            Transform::Log => p.max(f64::MIN_POSITIVE).ln(),
            Transform::LogShift { lo } => (p - lo).max(lo * 1e-12).ln(),
            Transform::LogLogistic { ln_lo, ln_hi, .. } => {
                logit((p.ln() - ln_lo) / (ln_hi - ln_lo))
            }
            Transform::Logistic { lo, hi } => logit((p - lo) / (hi - lo)),
            Transform::UpperLogistic { hi } => logit(p / hi),
        }
    }

    /// Whether x sits so far out that p is on its bound for practical purposes.
    pub(crate) fn at_bound(self, x: f64) -> bool {
        match self {
            Transform::Log => false,
            Transform::LogShift { .. } => x < -25.0,
            _ => x.abs() > 14.0,
        }
    }
}

/// Residuals r = w ∘ (Z_model − Z_data), real and imaginary parts, and their Jacobian with respect to
/// the internal coordinates of the free parameters.
///
/// The solver sees the problem through its square core ([`super::reduce`]): R (n × n), c and ‖r‖ for n
/// free parameters, with the same steps, gradient and residual norm as the full 2·points × n problem;
/// the factorisation is made only when the solver asks for it (accepted points). The full residuals
/// stay available here for the statistics.
pub(crate) struct Problem<'a> {
    pub plan: &'a Plan,
    pub grid: &'a Grid,
    pub data: &'a [Complex64],
    /// Weight (square root of the statistical weight) of each residual, in their order: real and
    /// imaginary part of each point side by side.
    pub w_rows: &'a [f64],
    /// Full parameter vector; the free entries are overwritten from x.
    pub params: Vec<f64>,
    pub free: &'a [usize],
    pub transforms: &'a [Transform],
    x: Vec<f64>,
    z: Vec<Complex64>,
    /// ∂Z(ωᵢ)/∂p_k at `k * points + i`, all parameters.
    jac: Vec<Complex64>,
    ws: Workspace,
    /// Full weighted residuals, 2·points: real and imaginary part of each point side by side (the order
    /// of the rows of the core's Jacobian; nothing outside the problem reads them).
    residuals: Vec<f64>,
    chi_square: f64,
    /// Scratch for the compression: the weighted real Jacobian in x, column by column.
    scratch_j: RefCell<Vec<f64>>,
    ok: bool,
    pub jacobian_calls: std::cell::Cell<usize>,
    /// Jacobians still to factor by Householder directly, after the Gram route declined: successive
    /// Jacobians of one run are alike, so the next few would most likely decline too.
    skip_gram: std::cell::Cell<u8>,
}

/// How many Jacobians go straight to Householder after the Gram route declined.
const GRAM_PAUSE: u8 = 3;

/// Residual used in place of a non-finite one, so that a bad trial step is rejected, not fatal.
const PENALTY: f64 = 1e10;

/// Where a new [`Problem`] starts.
pub(crate) enum Point {
    /// At these full parameters, evaluated there.
    Params(Vec<f64>),
    /// At a point evaluated before on the same data, plan and free parameters, taken as it is.
    Evaluated(Evaluated),
}

impl<'a> Problem<'a> {
    /// The problem at `at`.
    pub(crate) fn new(
        plan: &'a Plan,
        grid: &'a Grid,
        data: &'a [Complex64],
        w_rows: &'a [f64],
        at: Point,
        free: &'a [usize],
        transforms: &'a [Transform],
    ) -> Problem<'a> {
        let n = grid.len();
        let (e, evaluate) = match at {
            Point::Evaluated(e) => (e, false),
            Point::Params(params) => {
                let x = free
                    .iter()
                    .zip(transforms)
                    .map(|(&i, t)| t.to_internal(params[i]))
                    .collect();
                let e = Evaluated {
                    params,
                    x,
                    z: vec![Complex64::new(0.0, 0.0); n],
                    jac: vec![Complex64::new(0.0, 0.0); n * plan.n_params()],
                    residuals: vec![0.0; 2 * n],
                    chi_square: 0.0,
                    ok: false,
                };
                (e, true)
            }
        };
        let mut p = Problem {
            plan,
            grid,
            data,
            w_rows,
            params: e.params,
            free,
            transforms,
            x: e.x,
            z: e.z,
            jac: e.jac,
            ws: plan.workspace(),
            residuals: e.residuals,
            chi_square: e.chi_square,
            // Allocated on the first request for a Jacobian: only the solver asks for one.
            scratch_j: RefCell::new(Vec::new()),
            ok: e.ok,
            jacobian_calls: std::cell::Cell::new(0),
            skip_gram: std::cell::Cell::new(0),
        };
        if evaluate {
            let x = p.x.clone();
            p.move_to(&x);
        }
        p
    }

    /// Internal coordinates of the current point.
    pub(crate) fn params_internal(&self) -> &[f64] {
        &self.x
    }

    /// Sum of squared residuals at the current point.
    pub(crate) fn chi_square(&self) -> f64 {
        self.chi_square
    }

    /// Weighted residuals at the current point: real and imaginary part of each point side by side.
    pub(crate) fn residuals(&self) -> &[f64] {
        &self.residuals
    }

    /// The model impedance at the current point.
    pub(crate) fn model(&self) -> &[Complex64] {
        &self.z
    }

    /// Whether the current point evaluated to finite numbers.
    pub(crate) fn is_finite(&self) -> bool {
        self.ok
    }

    /// Jacobian of the full residuals with respect to the free parameters themselves (not x), for the
    /// covariance.
    pub(crate) fn jacobian_in_params(&self) -> DMatrix<f64> {
        let n = self.grid.len();
        // Filled in place, column by column, without zeroing first.
        DMatrix::from_fn(2 * n, self.free.len(), |i, c| {
            let d = &self.jac[self.free[c] * n..];
            if i < n {
                self.w_rows[2 * i] * d[i].re
            } else {
                self.w_rows[2 * (i - n) + 1] * d[i - n].im
            }
        })
    }
}

/// Whether the data determine every free parameter at a point: the covariance of the internal
/// coordinates (logarithms of positive parameters) has no null direction and no standard error above
/// 1, an e-fold change. An element that shrank out of the model (a finite diffusion whose R and τ went
/// to zero together, leaving only their ratio) fails it. `jac` holds ∂Z/∂p_k of all parameters at
/// `k * n + i` for `n` points, `x` the internal coordinates of the free ones.
#[allow(clippy::too_many_arguments)]
fn determines_every_parameter(
    ok: bool,
    n: usize,
    free: &[usize],
    jac: &[Complex64],
    w_rows: &[f64],
    transforms: &[Transform],
    x: &[f64],
    chi_square: f64,
) -> bool {
    let nf = free.len();
    if !ok || 2 * n <= nf {
        return false;
    }
    let j = nalgebra::DMatrix::from_fn(2 * n, nf, |row, c| {
        let k = free[c];
        let d: &[f64] = bytemuck::cast_slice(&jac[k * n..(k + 1) * n]);
        d[row] * w_rows[row] * transforms[c].derivative(x[c])
    });
    let cov = super::stats::covariance(&j, chi_square, 2 * n - nf);
    !cov.undetermined.iter().any(|&u| u) && (0..nf).all(|c| cov.matrix[c * nf + c] <= 1.0)
}

/// A problem's state at its current point (coordinates, model, derivatives, residuals), kept after a
/// run so that the result can be summarised without evaluating the model again.
#[derive(Debug, Clone)]
pub(crate) struct Evaluated {
    params: Vec<f64>,
    x: Vec<f64>,
    z: Vec<Complex64>,
    jac: Vec<Complex64>,
    residuals: Vec<f64>,
    chi_square: f64,
    ok: bool,
}

impl Evaluated {
    /// The full parameter vector of the point.
    pub(crate) fn params(&self) -> &[f64] {
        &self.params
    }

    /// Whether the data determine every free parameter at this point (see the function of that
    /// name), for the problem's `free` parameters, weights `w_rows` and `transforms`.
    pub(crate) fn determines_every_parameter(
        &self,
        free: &[usize],
        w_rows: &[f64],
        transforms: &[Transform],
    ) -> bool {
        determines_every_parameter(
            self.ok,
            self.z.len(),
            free,
            &self.jac,
            w_rows,
            transforms,
            &self.x,
            self.chi_square,
        )
    }
}

impl<'a> Problem<'a> {
    /// The state at the current point, giving up the problem.
    pub(crate) fn into_evaluated(self) -> Evaluated {
        Evaluated {
            params: self.params,
            x: self.x,
            z: self.z,
            jac: self.jac,
            residuals: self.residuals,
            chi_square: self.chi_square,
            ok: self.ok,
        }
    }
}

impl Problem<'_> {
    /// Moves to internal coordinates `x`: model, residuals and derivatives there.
    fn move_to(&mut self, x: &[f64]) {
        self.x.copy_from_slice(x);
        for ((&i, t), &xi) in self.free.iter().zip(self.transforms).zip(x) {
            self.params[i] = t.to_param(xi);
        }
        self.plan.eval(
            &self.params,
            self.grid,
            &mut self.z,
            Some(&mut self.jac),
            &mut self.ws,
        );
        let n = self.grid.len();
        let mut ok = true;
        let rows = self
            .residuals
            .chunks_exact_mut(2)
            .zip(self.w_rows.chunks_exact(2));
        for (i, (r, w)) in rows.enumerate().take(n) {
            let d = self.z[i] - self.data[i];
            let (a, b) = (w[0] * d.re, w[1] * d.im);
            ok &= a.is_finite() && b.is_finite();
            r[0] = a;
            r[1] = b;
        }
        self.chi_square = if ok {
            self.residuals.iter().map(|r| r * r).sum()
        } else {
            f64::INFINITY
        };
        // Squares that overflow count as a failed evaluation too.
        self.ok = self.chi_square.is_finite();
    }

    /// ‖r‖, or a huge but finite norm for a failed evaluation, so that the step that led there is
    /// rejected.
    fn residual_norm(&self) -> f64 {
        if self.ok {
            self.chi_square.sqrt()
        } else {
            PENALTY * ((2 * self.grid.len()) as f64).sqrt()
        }
    }

    /// Writes the square core of the current point into `core`; zeros where the point failed or a
    /// derivative is not finite (no slope: the solver stops rather than step on garbage).
    fn core(&self, core: &mut Core) {
        self.jacobian_calls.set(self.jacobian_calls.get() + 1);
        if !self.ok {
            core.clear();
            return;
        }
        let n = self.grid.len();
        let nf = self.free.len();
        let mut scratch = self.scratch_j.borrow_mut();
        scratch.resize(2 * n * nf, 0.0);
        for (c, (&k, t)) in self.free.iter().zip(self.transforms).enumerate() {
            let dp = t.derivative(self.x[c]);
            let d = &self.jac[k * n..(k + 1) * n];
            // Rows in the residuals' order: real and imaginary part of each point side by side, as
            // the derivatives are stored.
            let d: &[f64] = bytemuck::cast_slice(d);
            let rows = &mut scratch[2 * n * c..2 * n * (c + 1)];
            crate::dense::scaled_product(rows, self.w_rows, d, dp);
        }
        let skip = self.skip_gram.get();
        let gram = super::reduce::factor(&mut scratch, 2 * n, nf, &self.residuals, core, skip == 0);
        self.skip_gram.set(match (gram, skip) {
            (true, _) => 0,
            (false, 0) => GRAM_PAUSE,
            (false, s) => s - 1,
        });
        // A non-finite derivative spreads through the factorisation; checking the small result is
        // cheaper than checking the Jacobian.
        if !core.is_finite() {
            core.clear();
        }
    }
}

impl CoreProblem for Problem<'_> {
    fn dim(&self) -> usize {
        self.free.len()
    }

    fn x(&self) -> &[f64] {
        &self.x
    }

    fn residual_norm(&self) -> f64 {
        Problem::residual_norm(self)
    }

    fn set_x(&mut self, x: &[f64]) {
        self.move_to(x);
    }

    fn factor(&mut self, core: &mut Core) {
        self.core(core);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn transforms_invert_and_differentiate() {
        let cases = [
            (Transform::for_bounds(0.0, f64::INFINITY, true), 3.7),
            (Transform::for_bounds(1e-3, f64::INFINITY, true), 0.5),
            (Transform::for_bounds(1e-3, 1e3, true), 42.0),
            (Transform::for_bounds(0.0, 1.0, false), 0.83),
            (Transform::for_bounds(0.5, 1.0, false), 0.93),
            (Transform::for_bounds(0.0, 5.0, true), 0.01),
        ];
        for (t, p) in cases {
            let x = t.to_internal(p);
            assert!((t.to_param(x) - p).abs() <= 1e-12 * p, "{t:?}");
            let h = 1e-6;
            let fd = (t.to_param(x + h) - t.to_param(x - h)) / (2.0 * h);
            assert!((fd - t.derivative(x)).abs() <= 1e-6 * fd.abs(), "{t:?}");
        }
    }

    #[test]
    fn transforms_keep_bounds_for_any_x() {
        let t = Transform::for_bounds(1e-3, 1e3, true);
        for x in [-1e308, -700.0, 0.0, 700.0, 1e308] {
            let p = t.to_param(x);
            assert!((1e-3..=1e3).contains(&p), "{x} -> {p}");
        }
        let t = Transform::for_bounds(0.0, 1.0, false);
        for x in [-1e308, 0.0, 1e308] {
            assert!((0.0..=1.0).contains(&t.to_param(x)));
        }
        // Bounds met exactly, also where exp(ln hi) or lo + (hi − lo) rounds past them and σ(x)
        // rounds to 0 or 1 (|x| above about 37).
        for (lo, hi, positive) in [
            (1.0, 30.0, true),
            (0.7, 0.9, false),
            (0.3, 0.7, true),
            (1e-9, 3.3e-3, true),
            (0.0, 0.3, true),
        ] {
            let t = Transform::for_bounds(lo, hi, positive);
            for x in [-1e3, -40.0, -37.0, 37.0, 40.0, 1e3] {
                let p = t.to_param(x);
                assert!((lo..=hi).contains(&p), "{t:?}: {x} -> {p}");
            }
        }
    }
}
