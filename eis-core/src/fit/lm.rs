//! Trust-region Levenberg–Marquardt on the square core of the problem.
//!
//! The algorithm is Moré's (J. J. Moré, "The Levenberg–Marquardt algorithm: implementation and
//! theory", Numerical Analysis, Springer LNM 630, 1978, 105–116), as in MINPACK's `lmder`, `lmpar` and
//! `qrsolv` (Moré, Garbow & Hillstrom, *User Guide for MINPACK-1*, Argonne ANL-80-74, 1980): a trust
//! region in variables scaled by the running maximum of the Jacobian's column norms, the damping
//! parameter λ found by a safeguarded Newton iteration so that the scaled step just fits the region,
//! each damped step solved from [R; √λ·D], and the termination tests on the relative reduction of ‖r‖²
//! (ftol), the step (xtol) and the gradient's angle with the residuals (gtol). The damped steps come
//! from Cholesky of the normal equations (RᵀR + λD²)p = Rᵀc where that loses nothing that matters (every
//! pivot above 1e-8 of its diagonal entry) and from MINPACK's Givens rotations otherwise: the rotations
//! take a square root and a division for each of n(n+1)/2 entries, and with 8 parameters they were
//! about 40 % of the solver's time (perf, two-arc model: about 23 damped solves per fit, 1.5 per step).
//!
//! What differs from a textbook `lmder` is what it works on: not the m × n Jacobian but its square core
//! (R, c, ‖r‖) from [`super::reduce`], made once per accepted point. Every quantity the algorithm uses
//! is a function of the core (see that module), so the iterates are those of the full problem up to
//! rounding, while each iteration's linear algebra is on n × n matrices held in one workspace: no
//! allocation within a run. The `levenberg-marquardt` crate (a port of the same MINPACK routines) did
//! this job before: on the (n + 1) × n compressed problem its column-pivoted QR and generic matrix code
//! took about 60,000 instructions per iteration against about 13,000 here (callgrind, two-arc model of
//! 8 parameters). The tests below run both from the same starts and require the same result.

use super::reduce::{Core, norm};
use crate::dense::dot;

/// Why a run stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub enum Termination {
    /// The residuals are zero (to the smallest positive number).
    ResidualsZero,
    /// The gradient's cosine with the residuals fell to gtol or below.
    Orthogonal,
    /// The relative reduction of the sum of squares (`ftol`) or the relative step (`xtol`) fell below
    /// the tolerance.
    Converged {
        /// The sum-of-squares test was met.
        ftol: bool,
        /// The step test was met.
        xtol: bool,
    },
    /// The evaluation budget ran out.
    LostPatience,
    /// The named test reached machine precision before its tolerance: nothing more can be gained.
    NoImprovementPossible(&'static str),
    /// A non-finite number appeared in the named quantity.
    Numerical(&'static str),
}

impl Termination {
    /// Whether the run reached a minimum (zero residuals, a vanishing gradient or convergence).
    pub fn was_successful(&self) -> bool {
        matches!(
            self,
            Termination::ResidualsZero | Termination::Orthogonal | Termination::Converged { .. }
        )
    }
}

/// The words of fit documents and reports.
impl std::fmt::Display for Termination {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Termination::ResidualsZero => f.write_str("residuals are zero"),
            Termination::Orthogonal => f.write_str("gradient vanished (gtol)"),
            Termination::Converged { ftol, xtol } => f.write_str(match (ftol, xtol) {
                (true, true) => "converged (chi-square and step tolerances)",
                (true, false) => "converged (chi-square tolerance)",
                _ => "converged (step tolerance)",
            }),
            Termination::LostPatience => f.write_str("stopped: evaluation limit reached"),
            Termination::NoImprovementPossible(what) => write!(
                f,
                "stopped: no further improvement possible ({what} at machine precision)"
            ),
            Termination::Numerical(what) => write!(f, "stopped: numerical failure in {what}"),
        }
    }
}

/// A least-squares problem seen through its square core.
pub(crate) trait CoreProblem {
    /// Number of parameters.
    fn dim(&self) -> usize;
    /// The current parameters.
    fn x(&self) -> &[f64];
    /// ‖r‖ at the current point: finite, and large for a point that failed to evaluate.
    fn residual_norm(&self) -> f64;
    /// Moves to `x` and evaluates the residuals there.
    fn set_x(&mut self, x: &[f64]);
    /// The core at the current point; a point whose core cannot be computed leaves it zero (no slope,
    /// so the run stops there rather than step on garbage).
    fn factor(&mut self, core: &mut Core);
}

/// The solver's settings: a small `Copy` value with `with_*` setters.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Solver {
    ftol: f64,
    xtol: f64,
    gtol: f64,
    stepbound: f64,
    patience: usize,
    /// Stop a run whose sum of squares is still above `.0` after `.1` evaluations.
    give_up: Option<(f64, usize)>,
}

impl Default for Solver {
    fn default() -> Self {
        Solver {
            ftol: 30.0 * f64::EPSILON,
            xtol: 30.0 * f64::EPSILON,
            gtol: 30.0 * f64::EPSILON,
            stepbound: 100.0,
            patience: 100,
            give_up: None,
        }
    }
}

/// How a run ended.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Report {
    /// Why it stopped.
    pub termination: Termination,
    /// Evaluations of the residuals, the start included.
    pub evaluations: usize,
}

impl Solver {
    /// The same relative tolerance on the reduction of the sum of squares, the scaled step and the
    /// cosine between the residuals and the Jacobian's columns (default 30ε each).
    pub(crate) fn with_tolerance(self, tolerance: f64) -> Self {
        Solver {
            ftol: tolerance,
            xtol: tolerance,
            gtol: tolerance,
            ..self
        }
    }

    /// Relative tolerance on the reduction of the sum of squares (default 30ε).
    #[cfg(test)]
    pub(crate) fn with_ftol(self, ftol: f64) -> Self {
        Solver { ftol, ..self }
    }

    /// Relative tolerance on the scaled step (default 30ε).
    #[cfg(test)]
    pub(crate) fn with_xtol(self, xtol: f64) -> Self {
        Solver { xtol, ..self }
    }

    /// Tolerance on the cosine between the residuals and any column of the Jacobian (default 30ε).
    #[cfg(test)]
    pub(crate) fn with_gtol(self, gtol: f64) -> Self {
        Solver { gtol, ..self }
    }

    /// The run stops, as out of patience, once it has made `after` evaluations with its sum of squares
    /// still above `chi_square` (default never): a run bound for a basin far worse than one already
    /// found need not be followed to its end.
    pub(crate) fn with_give_up(self, chi_square: f64, after: usize) -> Self {
        Solver {
            give_up: Some((chi_square, after)),
            ..self
        }
    }

    /// The run stops after `patience`·(n + 1) evaluations (default 100).
    pub(crate) fn with_patience(self, patience: usize) -> Self {
        Solver {
            patience: patience.max(1),
            ..self
        }
    }

    /// Minimises ‖r(x)‖² from the problem's current point, leaving it at the best point found.
    pub(crate) fn minimize<P: CoreProblem>(&self, problem: &mut P) -> Report {
        let n = problem.dim();
        let mut report = Report {
            termination: Termination::ResidualsZero,
            evaluations: 1,
        };
        if n == 0 {
            report.termination = Termination::Numerical("no parameters");
            return report;
        }
        let mut fnorm = problem.residual_norm();
        if !fnorm.is_finite() {
            report.termination = Termination::Numerical("residuals norm");
            return report;
        }
        if fnorm <= f64::MIN_POSITIVE {
            return report;
        }
        let mut ws = Workspace::new(n);
        let mut core = Core::new(n);
        let mut x = problem.x().to_vec();
        let mut trial = vec![0.0; n];
        let mut delta = 0.0;
        let mut lambda = 0.0;
        let mut xnorm = 0.0;
        let mut first_update = true;
        let mut first_step = true;
        let max_fev = self.patience * (n + 1);

        loop {
            problem.factor(&mut core);
            // The largest cosine between the residuals and a column of J: |(Jᵀr)ⱼ|/(‖Jeⱼ‖·‖r‖).
            let mut gnorm: f64 = 0.0;
            for j in 0..n {
                let scale = core.col_norms[j];
                if scale == 0.0 {
                    continue;
                }
                let col = &core.r[j * n..j * n + j + 1];
                let s = dot(col, &core.qtb[..j + 1]) / fnorm;
                let t = (s / scale).abs();
                if t.is_nan() {
                    report.termination = Termination::Numerical("jacobian");
                    return report;
                }
                gnorm = gnorm.max(t);
            }
            if gnorm <= self.gtol {
                report.termination = Termination::Orthogonal;
                return report;
            }
            if first_update {
                for (d, &c) in ws.diag.iter_mut().zip(&core.col_norms) {
                    *d = if c == 0.0 { 1.0 } else { c };
                }
                xnorm = scaled_norm(&ws.diag, &x);
                if !xnorm.is_finite() {
                    report.termination = Termination::Numerical("subproblem x");
                    return report;
                }
                delta = if xnorm == 0.0 {
                    self.stepbound
                } else {
                    self.stepbound * xnorm
                };
                first_update = false;
            } else {
                for (d, &c) in ws.diag.iter_mut().zip(&core.col_norms) {
                    *d = d.max(c);
                }
            }

            // Trial steps from this core until one is accepted or a test stops the run.
            loop {
                lambda = ws.lmpar(&core, delta, lambda);
                let pnorm = ws.dxnorm;
                if !pnorm.is_finite() {
                    report.termination = Termination::Numerical("subproblem ||Dp||");
                    return report;
                }
                let temp1 = (r_times(&core, &ws.step, &mut ws.wa2) / fnorm).powi(2);
                let temp2 = (lambda.sqrt() * pnorm / fnorm).powi(2);
                if !temp1.is_finite() || !temp2.is_finite() {
                    report.termination = Termination::Numerical("trust-region reduction");
                    return report;
                }
                let predicted = temp1 + temp2 / 0.5;
                let dir_der = -(temp1 + temp2);
                if first_step && pnorm < delta {
                    delta = pnorm;
                }
                first_step = false;

                for ((t, xi), p) in trial.iter_mut().zip(&x).zip(&ws.step) {
                    *t = xi - p;
                }
                problem.set_x(&trial);
                report.evaluations += 1;
                // A point that failed to evaluate counts as infinitely bad: the step is rejected and the
                // region shrinks tenfold.
                let new_norm = match problem.residual_norm() {
                    v if v.is_finite() => v,
                    _ => f64::INFINITY,
                };
                let actual = if 0.1 * new_norm < fnorm {
                    1.0 - (new_norm / fnorm).powi(2)
                } else {
                    -1.0
                };
                let ratio = if predicted == 0.0 {
                    0.0
                } else {
                    actual / predicted
                };
                if ratio <= 0.25 {
                    let mut temp = if actual >= 0.0 {
                        0.5
                    } else {
                        0.5 * dir_der / (dir_der + 0.5 * actual)
                    };
                    if 0.1 * new_norm >= fnorm || temp < 0.1 {
                        temp = 0.1;
                    }
                    delta = temp * delta.min(10.0 * pnorm);
                    lambda /= temp;
                } else if lambda == 0.0 || ratio >= 0.75 {
                    delta = pnorm / 0.5;
                    lambda *= 0.5;
                }

                let good = ratio >= 1e-4;
                if good {
                    std::mem::swap(&mut x, &mut trial);
                    xnorm = scaled_norm(&ws.diag, &x);
                    if !xnorm.is_finite() {
                        report.termination = Termination::Numerical("new x");
                        return report;
                    }
                    fnorm = new_norm;
                }
                let stop = if fnorm <= f64::MIN_POSITIVE {
                    Some(Termination::ResidualsZero)
                } else {
                    let ftol = actual.abs() <= self.ftol && predicted <= self.ftol && ratio <= 2.0;
                    let xtol = delta <= self.xtol * xnorm;
                    if ftol || xtol {
                        Some(Termination::Converged { ftol, xtol })
                    } else if report.evaluations >= max_fev
                        || self.give_up.is_some_and(|(chi, after)| {
                            report.evaluations >= after && fnorm * fnorm > chi
                        })
                    {
                        Some(Termination::LostPatience)
                    } else if actual.abs() <= f64::EPSILON
                        && predicted <= f64::EPSILON
                        && ratio <= 2.0
                    {
                        Some(Termination::NoImprovementPossible("ftol"))
                    } else if delta <= f64::EPSILON * xnorm {
                        Some(Termination::NoImprovementPossible("xtol"))
                    } else if gnorm <= f64::EPSILON {
                        Some(Termination::NoImprovementPossible("gtol"))
                    } else {
                        None
                    }
                };
                if let Some(t) = stop {
                    if !good {
                        problem.set_x(&x);
                    }
                    report.termination = t;
                    return report;
                }
                if good {
                    break;
                }
            }
        }
    }
}

/// ‖D·x‖.
fn scaled_norm(d: &[f64], x: &[f64]) -> f64 {
    let mut sum = 0.0;
    for (a, b) in d.iter().zip(x) {
        sum += (a * b) * (a * b);
    }
    if sum.is_finite() && sum > 1e-280 {
        return sum.sqrt();
    }
    // Squares out of range: scale by the largest entry.
    let big = d
        .iter()
        .zip(x)
        .fold(0.0_f64, |m, (a, b)| m.max((a * b).abs()));
    if big == 0.0 || !big.is_finite() {
        return big;
    }
    let s = 1.0 / big;
    let scaled: f64 = d.iter().zip(x).map(|(a, b)| (a * b * s).powi(2)).sum();
    big * scaled.sqrt()
}

/// ‖R·p‖ (= ‖J·p‖), with `w` as scratch.
fn r_times(core: &Core, p: &[f64], w: &mut [f64]) -> f64 {
    let n = core.n;
    w.fill(0.0);
    for (k, &pk) in p.iter().enumerate() {
        for (wi, rik) in w[..=k].iter_mut().zip(&core.r[k * n..k * n + k + 1]) {
            *wi += rik * pk;
        }
    }
    norm(w)
}

/// Smallest pivot of the Cholesky route to the damped step, relative to its diagonal entry.
const DAMPED_PIVOT: f64 = 1e-8;

/// Everything one run's λ iterations need, sized once.
struct Workspace {
    n: usize,
    /// The scaling D: running maximum of the column norms.
    diag: Vec<f64>,
    /// The last step p (the solver moves to x − p).
    step: Vec<f64>,
    /// ‖D·p‖ of the last step.
    dxnorm: f64,
    /// The triangular factor S of [R; √λ·D] (upper, column by column) and its diagonal.
    s: Vec<f64>,
    sdiag: Vec<f64>,
    wa1: Vec<f64>,
    wa2: Vec<f64>,
    /// Qᵀc rotated along with S.
    wa: Vec<f64>,
    /// RᵀR (upper triangle, column by column) and Rᵀc = Jᵀr, for the damped solves.
    rtr: Vec<f64>,
    rtc: Vec<f64>,
}

impl Workspace {
    fn new(n: usize) -> Workspace {
        Workspace {
            n,
            diag: vec![1.0; n],
            step: vec![0.0; n],
            dxnorm: 0.0,
            s: vec![0.0; n * n],
            sdiag: vec![0.0; n],
            wa1: vec![0.0; n],
            wa2: vec![0.0; n],
            wa: vec![0.0; n],
            rtr: vec![0.0; n * n],
            rtc: vec![0.0; n],
        }
    }

    /// MINPACK's `lmpar`: the λ ≥ 0 whose step p = argmin ‖Jp − r‖² + λ‖Dp‖² has ‖Dp‖ within 10 % of
    /// `delta` (or λ = 0 when the Gauss–Newton step already fits), starting the search from `lambda`.
    /// Leaves the step in `self.step` and ‖Dp‖ in `self.dxnorm`; returns λ.
    fn lmpar(&mut self, core: &Core, delta: f64, lambda: f64) -> f64 {
        let n = self.n;
        let r = &core.r;
        // Gauss–Newton step; with a zero on R's diagonal, the least-squares solution of the leading
        // nonsingular block (MINPACK's choice, without its column pivoting).
        let nsing = (0..n).find(|&j| r[j * n + j] == 0.0).unwrap_or(n);
        self.wa1.copy_from_slice(&core.qtb);
        self.wa1[nsing..].fill(0.0);
        for j in (0..nsing).rev() {
            self.wa1[j] /= r[j * n + j];
            let t = self.wa1[j];
            for i in 0..j {
                self.wa1[i] -= r[j * n + i] * t;
            }
        }
        self.step.copy_from_slice(&self.wa1);
        let mut dxnorm = scaled_norm(&self.diag, &self.step);
        let mut fp = dxnorm - delta;
        if fp <= 0.1 * delta {
            self.dxnorm = dxnorm;
            return 0.0;
        }

        // Lower bound from the Newton step at λ = 0 (only with full rank).
        let mut parl = 0.0;
        if nsing == n {
            for j in 0..n {
                self.wa1[j] = self.diag[j] * (self.diag[j] * self.step[j] / dxnorm);
            }
            forward_transposed(r, None, n, &mut self.wa1);
            let t = norm(&self.wa1);
            parl = fp / delta / t / t;
        }
        // Upper bound ‖D⁻¹Jᵀr‖/Δ.
        self.normal_equations(core);
        for j in 0..n {
            self.wa1[j] = self.rtc[j] / self.diag[j];
        }
        let gnorm = norm(&self.wa1);
        let mut paru = gnorm / delta;
        if paru == 0.0 {
            paru = f64::MIN_POSITIVE / delta.min(0.1);
        }
        let mut par = lambda.max(parl).min(paru);
        if par == 0.0 {
            par = gnorm / dxnorm;
        }

        for iteration in 1.. {
            if par == 0.0 {
                par = f64::MIN_POSITIVE.max(0.001 * paru);
            }
            if !self.cholesky_solve(par) {
                self.qrsolv(core, par.sqrt());
            }
            dxnorm = scaled_norm(&self.diag, &self.step);
            if iteration == 10 {
                break;
            }
            let fp_old = fp;
            fp = dxnorm - delta;
            if fp.abs() <= 0.1 * delta || (parl == 0.0 && fp <= fp_old && fp_old < 0.0) {
                break;
            }
            // Newton correction.
            for j in 0..n {
                self.wa1[j] = self.diag[j] * (self.diag[j] * self.step[j] / dxnorm);
            }
            forward_transposed(&self.s, Some(&self.sdiag), n, &mut self.wa1);
            let t = norm(&self.wa1);
            let parc = fp / delta / t / t;
            if fp > 0.0 {
                parl = parl.max(par);
            } else {
                paru = paru.min(par);
            }
            par = parl.max(par + parc);
        }
        self.dxnorm = dxnorm;
        par
    }

    /// RᵀR (upper triangle, column by column) and Rᵀc = Jᵀr, for the damped solves.
    fn normal_equations(&mut self, core: &Core) {
        let (n, r) = (self.n, &core.r);
        for j in 0..n {
            for i in 0..=j {
                self.rtr[j * n + i] = dot(&r[i * n..i * n + i + 1], &r[j * n..j * n + i + 1]);
            }
            self.rtc[j] = dot(&r[j * n..j * n + j + 1], &core.qtb[..j + 1]);
        }
    }

    /// The damped step from the normal equations (RᵀR + λD²)p = Rᵀc by Cholesky, SᵀS = RᵀR + λD², the
    /// same S (up to the signs of its rows) as [`qrsolv`](Self::qrsolv)'s rotations give, in n square
    /// roots instead of n(n+1)/2 square roots and divisions. Squaring R's conditioning is harmless while
    /// every pivot keeps at least [`DAMPED_PIVOT`] of its diagonal entry (step errors of order
    /// n·ε/DAMPED_PIVOT ≈ 1e-7 relative, and the trust-region test only needs ‖Dp‖ to 10 %); below
    /// it, or on a non-finite entry, it returns false with the workspace to be overwritten, and the
    /// caller uses the rotations. Leaves p in `self.step` and S in `self.s` and `self.sdiag`.
    fn cholesky_solve(&mut self, lambda: f64) -> bool {
        let n = self.n;
        let s = &mut self.s;
        for j in 0..n {
            let ajj = self.rtr[j * n + j] + lambda * self.diag[j] * self.diag[j];
            let d = ajj - dot(&s[j * n..j * n + j], &s[j * n..j * n + j]);
            if !(d > DAMPED_PIVOT * ajj && d.is_finite()) {
                return false;
            }
            let sjj = d.sqrt();
            self.sdiag[j] = sjj;
            s[j * n + j] = sjj;
            for i in j + 1..n {
                let v = self.rtr[i * n + j] - dot(&s[j * n..j * n + j], &s[i * n..i * n + j]);
                s[i * n + j] = v / sjj;
            }
        }
        // Sᵀy = Rᵀc, then Sp = y.
        self.step.copy_from_slice(&self.rtc);
        forward_transposed(s, None, n, &mut self.step);
        for j in (0..n).rev() {
            self.step[j] /= s[j * n + j];
            let t = self.step[j];
            for i in 0..j {
                self.step[i] -= s[j * n + i] * t;
            }
        }
        true
    }

    /// MINPACK's `qrsolv` without pivoting: the least-squares solution of [R; s·D]·p = [c; 0] by Givens
    /// rotations that fold each row of s·D into R. Leaves p in `self.step` and the triangular factor S
    /// in `self.s` (strictly upper part) and `self.sdiag` (diagonal).
    fn qrsolv(&mut self, core: &Core, sq: f64) {
        let n = self.n;
        let s = &mut self.s;
        s.copy_from_slice(&core.r);
        self.wa.copy_from_slice(&core.qtb);
        let sdiag = &mut self.sdiag;
        for j in 0..n {
            let dj = sq * self.diag[j];
            if dj != 0.0 {
                sdiag[j..].fill(0.0);
                sdiag[j] = dj;
                let mut qtbpj = 0.0;
                for k in j..n {
                    if sdiag[k] == 0.0 {
                        continue;
                    }
                    let skk = s[k * n + k];
                    let (sin, cos) = if skk.abs() < sdiag[k].abs() {
                        let cotan = skk / sdiag[k];
                        let sin = 0.5 / (0.25 + 0.25 * cotan * cotan).sqrt();
                        (sin, sin * cotan)
                    } else {
                        let tan = sdiag[k] / skk;
                        let cos = 0.5 / (0.25 + 0.25 * tan * tan).sqrt();
                        (cos * tan, cos)
                    };
                    s[k * n + k] = cos * skk + sin * sdiag[k];
                    let t = cos * self.wa[k] + sin * qtbpj;
                    qtbpj = -sin * self.wa[k] + cos * qtbpj;
                    self.wa[k] = t;
                    for i in k + 1..n {
                        let ski = s[i * n + k];
                        let t = cos * ski + sin * sdiag[i];
                        sdiag[i] = -sin * ski + cos * sdiag[i];
                        s[i * n + k] = t;
                    }
                }
            }
            sdiag[j] = s[j * n + j];
        }
        // Back substitution; a zero on the diagonal (rank deficiency) zeroes the rest.
        let nsing = (0..n).find(|&j| sdiag[j] == 0.0).unwrap_or(n);
        self.wa[nsing..].fill(0.0);
        for j in (0..nsing).rev() {
            let mut sum = 0.0;
            for i in j + 1..nsing {
                sum += s[i * n + j] * self.wa[i];
            }
            self.wa[j] = (self.wa[j] - sum) / sdiag[j];
        }
        self.step.copy_from_slice(&self.wa);
    }
}

/// Solves Tᵀy = b in place for an upper-triangular T (column by column, n × n), with its diagonal taken
/// from `diag` when given.
fn forward_transposed(t: &[f64], diag: Option<&[f64]>, n: usize, b: &mut [f64]) {
    for j in 0..n {
        let mut v = b[j];
        for i in 0..j {
            v -= t[j * n + i] * b[i];
        }
        b[j] = v / diag.map_or(t[j * n + j], |d| d[j]);
    }
}

#[cfg(test)]
mod tests;
