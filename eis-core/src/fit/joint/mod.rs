//! Joint fits of a chain: several spectra of one cell fitted at once, some parameters common to all of
//! them (*shared*) and the rest their own (*local*).
//!
//! # Method
//!
//! The residuals of every spectrum are stacked (each weighted as in a single fit, see
//! [`super::Weighting`]); the unknowns are the local parameters of each spectrum and the shared ones,
//! in the internal coordinates that keep every bound. The Jacobian of the stack has a block
//! structure: spectrum k's residuals depend on its own local columns `A_k` and on the shared columns
//! `B_k`, nothing else. The normal equations of a Levenberg–Marquardt step,
//!
//! ```text
//! (U_k + μD_k) δ_k + W_k δ_s             = −g_k        U_k = A_kᵀA_k, W_k = A_kᵀB_k, g_k = A_kᵀr_k
//! Σ_k W_kᵀ δ_k + (V + μD_s) δ_s          = −h          V = Σ B_kᵀB_k, h = Σ B_kᵀr_k
//! ```
//!
//! are reduced by the Schur complement on the shared block,
//! `S = V + μD_s − Σ W_kᵀ(U_k + μD_k)⁻¹W_k`, solved for δ_s, and each δ_k follows from its own small
//! system: one iteration costs a constant amount per spectrum, so the cost grows linearly with the
//! length of the chain (the reduction of bundle adjustment: Triggs, McLauchlan, Hartley & Fitzgibbon
//! 2000, "Bundle adjustment — a modern synthesis", Vision Algorithms, Springer LNCS 1883, §6.1). The
//! damping follows Nielsen (1999, "Damping parameter in Marquardt's method", IMM-REP-1999-05, DTU):
//! D the running maximum of diag(JᵀJ), μ updated from the gain ratio.
//!
//! The derivatives are the analytic ones of the compiled circuit ([`crate::eval::Plan::eval`]), through
//! the chain rule of the transforms.
//!
//! # Uncertainties
//!
//! The covariance of all parameters of the chain is `s²·(JᵀJ)⁻¹` with J the stacked weighted Jacobian
//! with respect to the parameters and `s² = χ²/(Σ 2N_k − P)`, P the number of free unknowns of the
//! chain (local ones of every spectrum plus the shared ones). Its blocks come from the same reduction:
//! `C_ss = S⁻¹`, `C_ks = −U_k⁻¹W_k C_ss`, `C_kk = U_k⁻¹ − C_ks W_kᵀU_k⁻¹` (the inverse of a block
//! matrix through its Schur complement). Each spectrum's [`FitResult`] carries the block of its own
//! parameters (local and shared): the marginal covariance of what it reports.

pub use super::lm::Termination;
use super::problem::{Point, Problem, Transform};
use super::{FitError, FitResult, Prepared, Weighting, prepare, start, stats};
use crate::circuit::Circuit;
use crate::eval::{Plan, Workspace};
use crate::spectrum::Spectrum;
use num_complex::Complex64;

mod covariance;
use covariance::JointCovariance;

/// Settings of a joint fit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct JointSettings {
    /// Residual weighting, as in a single fit. Default [`Weighting::Modulus`].
    pub weighting: Weighting,
    /// Relative tolerance on χ², on the step and on the gradient. Default 1e-10.
    pub tolerance: f64,
    /// Most iterations (Jacobian evaluations of the chain). Default 200.
    pub max_iterations: usize,
}

impl Default for JointSettings {
    fn default() -> Self {
        JointSettings {
            weighting: Weighting::Modulus,
            tolerance: 1e-10,
            max_iterations: 200,
        }
    }
}

/// Why a joint fit could not be attempted.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum JointError {
    /// No spectra were given.
    #[error("a joint fit needs at least one spectrum")]
    NoSpectra,
    /// A shared name is not a parameter of the circuit.
    #[error("`{name}` is not a parameter of the circuit (parameters: {known})")]
    UnknownParameter {
        /// The name asked for.
        name: String,
        /// The circuit's parameter names, comma-separated.
        known: String,
    },
    /// A shared name is a fixed parameter.
    #[error("`{name}` is fixed in the circuit; only free parameters can be shared")]
    FixedParameter {
        /// The name asked for.
        name: String,
    },
    /// Starts and spectra differ in number, or a start has the wrong length.
    #[error("start {index} has {got} values but the circuit has {want} parameters")]
    StartLength {
        /// The start, numbered from 1.
        index: usize,
        /// Values given.
        got: usize,
        /// Parameters of the circuit.
        want: usize,
    },
    /// There are fewer starts than spectra.
    #[error("{spectra} spectra but {starts} starts")]
    StartCount {
        /// Spectra given.
        spectra: usize,
        /// Starts given.
        starts: usize,
    },
    /// A spectrum cannot be fitted at all.
    #[error("spectrum {index} of the chain: {error}")]
    Spectrum {
        /// The spectrum, numbered from 1.
        index: usize,
        /// What is wrong with it.
        error: FitError,
    },
    /// The chain has no more residuals than unknowns.
    #[error("the chain gives {residuals} residuals, too few for {unknowns} unknowns")]
    TooFewPoints {
        /// Residuals of all spectra.
        residuals: usize,
        /// Free unknowns of the chain.
        unknowns: usize,
    },
    /// The start gives no finite χ².
    #[error("the start gives no finite chi-square on spectrum {index} of the chain")]
    NoFiniteStart {
        /// The spectrum, numbered from 1.
        index: usize,
    },
}

/// The outcome of a joint fit.
#[derive(Debug, Clone, PartialEq)]
pub struct JointResult {
    /// One result per spectrum, in the order given: the shared parameters hold the same value in
    /// each; standard errors and the covariance are the spectrum's block of the joint covariance.
    /// χ², its reduced value, AIC, BIC, residuals and warnings are the spectrum's own (computed as if
    /// all its free parameters were its own).
    pub fits: Vec<FitResult>,
    /// Indices (circuit order) of the shared parameters.
    pub shared: Vec<usize>,
    /// χ² of the whole chain.
    pub chi_square: f64,
    /// Degrees of freedom of the chain: residuals minus free unknowns.
    pub dof: usize,
    /// χ²/dof.
    pub reduced_chi_square: f64,
    /// Iterations (Jacobian evaluations of the chain).
    pub iterations: usize,
    /// Why the solver stopped.
    pub termination: Termination,
}

impl JointResult {
    /// Whether the solver met a convergence criterion.
    pub fn converged(&self) -> bool {
        self.termination.was_successful()
    }
}

/// The indices of the parameters named in `names`, for sharing.
///
/// # Errors
///
/// [`JointError::UnknownParameter`] or [`JointError::FixedParameter`] for the first bad name.
pub fn shared_indices<S: AsRef<str>>(
    circuit: &Circuit,
    names: &[S],
) -> Result<Vec<usize>, JointError> {
    let mut out = Vec::new();
    for name in names {
        let name = name.as_ref().trim();
        let Some(i) = circuit.param_index(name) else {
            return Err(JointError::UnknownParameter {
                name: name.to_owned(),
                known: circuit
                    .params
                    .iter()
                    .map(|p| p.name.as_str())
                    .collect::<Vec<_>>()
                    .join(", "),
            });
        };
        if circuit.params[i].fixed {
            return Err(JointError::FixedParameter {
                name: name.to_owned(),
            });
        }
        if !out.contains(&i) {
            out.push(i);
        }
    }
    out.sort_unstable();
    Ok(out)
}

/// One spectrum of the chain: data, its state and its blocks of the normal equations.
struct Member {
    prep: Prepared,
    ws: Workspace,
    /// Parameters, residuals, model and derivatives at the current point, and at the trial point.
    cur: State,
    trial: State,
    /// Internal coordinates of the local parameters (current and trial).
    xl: Vec<f64>,
    xl_trial: Vec<f64>,
    /// Weighted Jacobian columns in x: local ones, then shared ones (2N rows each).
    cols: Vec<f64>,
    /// U (nl × nl), W (nl × ns), V_k (ns × ns), g (nl), h_k (ns), row-major.
    u: Vec<f64>,
    w: Vec<f64>,
    v: Vec<f64>,
    g: Vec<f64>,
    h: Vec<f64>,
    /// Running maximum of diag(U): the damping scale.
    d: Vec<f64>,
    /// Scratch of a step: the factor of U + μD, (U + μD)⁻¹W, (U + μD)⁻¹g, δ.
    m: Vec<f64>,
    y: Vec<f64>,
    yg: Vec<f64>,
    step: Vec<f64>,
}

#[derive(Clone)]
struct State {
    params: Vec<f64>,
    z: Vec<Complex64>,
    jac: Vec<Complex64>,
    residuals: Vec<f64>,
    chi_square: f64,
}

impl State {
    fn new(params: Vec<f64>, n: usize, np: usize) -> State {
        State {
            params,
            z: vec![Complex64::new(0.0, 0.0); n],
            jac: vec![Complex64::new(0.0, 0.0); n * np],
            residuals: vec![0.0; 2 * n],
            chi_square: f64::INFINITY,
        }
    }

    /// Evaluates the model at `self.params`: residuals, χ² (infinite when not finite), derivatives.
    fn evaluate(&mut self, plan: &Plan, prep: &Prepared, ws: &mut Workspace) {
        plan.eval(
            &self.params,
            &prep.grid,
            &mut self.z,
            Some(&mut self.jac),
            ws,
        );
        let mut chi = 0.0;
        for (i, (r, w)) in self
            .residuals
            .chunks_exact_mut(2)
            .zip(prep.w_rows.chunks_exact(2))
            .enumerate()
        {
            let d = self.z[i] - prep.data[i];
            r[0] = w[0] * d.re;
            r[1] = w[1] * d.im;
            chi += r[0] * r[0] + r[1] * r[1];
        }
        self.chi_square = if chi.is_finite() { chi } else { f64::INFINITY };
    }
}

/// Parameter layout of the chain.
struct Layout<'a> {
    locals: &'a [usize],
    shared: &'a [usize],
    t_local: &'a [Transform],
    t_shared: &'a [Transform],
}

impl Layout<'_> {
    fn nl(&self) -> usize {
        self.locals.len()
    }
    fn ns(&self) -> usize {
        self.shared.len()
    }
}

impl Member {
    /// Writes the parameters of the trial state from local and shared internal coordinates.
    fn set_trial(&mut self, lay: &Layout<'_>, xs: &[f64]) {
        for ((&i, t), &x) in lay.locals.iter().zip(lay.t_local).zip(&self.xl_trial) {
            self.trial.params[i] = t.to_param(x);
        }
        for ((&i, t), &x) in lay.shared.iter().zip(lay.t_shared).zip(xs) {
            self.trial.params[i] = t.to_param(x);
        }
    }

    /// The blocks of the normal equations at the current point (internal coordinates `xs` shared).
    fn normal_blocks(&mut self, lay: &Layout<'_>, xs: &[f64]) {
        let n = self.prep.grid.len();
        let (nl, ns) = (lay.nl(), lay.ns());
        let rows = 2 * n;
        let columns = lay
            .locals
            .iter()
            .zip(lay.t_local.iter().zip(&self.xl))
            .chain(lay.shared.iter().zip(lay.t_shared.iter().zip(xs)));
        for (c, (&k, (t, &x))) in columns.enumerate() {
            let dp = t.derivative(x);
            let d: &[f64] = bytemuck::cast_slice(&self.cur.jac[k * n..(k + 1) * n]);
            let col = &mut self.cols[rows * c..rows * (c + 1)];
            for ((o, &w), &dv) in col.iter_mut().zip(&self.prep.w_rows).zip(d) {
                *o = w * dv * dp;
            }
        }
        let col = |c: usize| &self.cols[rows * c..rows * (c + 1)];
        let dot = |a: &[f64], b: &[f64]| a.iter().zip(b).map(|(x, y)| x * y).sum::<f64>();
        for a in 0..nl {
            for b in a..nl {
                let v = dot(col(a), col(b));
                self.u[a * nl + b] = v;
                self.u[b * nl + a] = v;
            }
            for b in 0..ns {
                self.w[a * ns + b] = dot(col(a), col(nl + b));
            }
            self.g[a] = dot(col(a), &self.cur.residuals);
            self.d[a] = self.d[a].max(self.u[a * nl + a]);
        }
        for a in 0..ns {
            for b in a..ns {
                let v = dot(col(nl + a), col(nl + b));
                self.v[a * ns + b] = v;
                self.v[b * ns + a] = v;
            }
            self.h[a] = dot(col(nl + a), &self.cur.residuals);
        }
    }
}

/// Cholesky factor (lower, in place, row-major n × n); false when not positive definite.
fn cholesky(a: &mut [f64], n: usize) -> bool {
    for j in 0..n {
        let mut s = a[j * n + j];
        for k in 0..j {
            s -= a[j * n + k] * a[j * n + k];
        }
        if !(s > 0.0 && s.is_finite()) {
            return false;
        }
        let l = s.sqrt();
        a[j * n + j] = l;
        for i in j + 1..n {
            let mut s = a[i * n + j];
            for k in 0..j {
                s -= a[i * n + k] * a[j * n + k];
            }
            a[i * n + j] = s / l;
        }
    }
    true
}

/// Solves L Lᵀ x = b in place with the factor from [`cholesky`].
fn cholesky_solve(l: &[f64], n: usize, b: &mut [f64]) {
    crate::nnls::chol_solve(l, n, n, b);
}

/// Solves L Lᵀ X = B in place for B of `cols` columns (row-major n × cols).
fn cholesky_solve_columns(l: &[f64], n: usize, b: &mut [f64], cols: usize, scratch: &mut [f64]) {
    for c in 0..cols {
        for i in 0..n {
            scratch[i] = b[i * cols + c];
        }
        cholesky_solve(l, n, &mut scratch[..n]);
        for i in 0..n {
            b[i * cols + c] = scratch[i];
        }
    }
}

/// Fits `circuit` to every spectrum of `spectra` at once, the parameters `shared` (indices, see
/// [`shared_indices`]) common to all of them and the other free parameters each spectrum's own.
///
/// `starts` holds one full parameter vector per spectrum (e.g. the spectra's own fits); the shared
/// parameters start at the median of their starting values. A start outside the bounds is moved to the
/// circuit's default. The run is a single local Levenberg–Marquardt descent from there: give it good
/// starts.
///
/// # Errors
///
/// [`JointError`] when the spectra cannot be fitted at all (as [`super::fit`] would refuse them), the
/// starts do not match, or the chain has too few residuals.
pub fn fit_joint(
    circuit: &Circuit,
    spectra: &[&Spectrum],
    shared: &[usize],
    starts: &[Vec<f64>],
    settings: &JointSettings,
) -> Result<JointResult, JointError> {
    if spectra.is_empty() {
        return Err(JointError::NoSpectra);
    }
    if starts.len() != spectra.len() {
        return Err(JointError::StartCount {
            spectra: spectra.len(),
            starts: starts.len(),
        });
    }
    let np = circuit.params.len();
    for (k, s) in starts.iter().enumerate() {
        if s.len() != np {
            return Err(JointError::StartLength {
                index: k + 1,
                got: s.len(),
                want: np,
            });
        }
    }
    let mut shared: Vec<usize> = shared.iter().copied().filter(|&i| i < np).collect();
    shared.sort_unstable();
    shared.dedup();
    if let Some(&i) = shared.iter().find(|&&i| circuit.params[i].fixed) {
        return Err(JointError::FixedParameter {
            name: circuit.params[i].name.clone(),
        });
    }
    let free: Vec<usize> = (0..np).filter(|&i| !circuit.params[i].fixed).collect();
    if free.is_empty() {
        return Err(JointError::Spectrum {
            index: 1,
            error: FitError::NothingFree,
        });
    }
    let locals: Vec<usize> = free
        .iter()
        .copied()
        .filter(|i| !shared.contains(i))
        .collect();
    let t_local = start::transforms(circuit, &locals);
    let t_shared = start::transforms(circuit, &shared);
    let t_free = start::transforms(circuit, &free);
    let lay = Layout {
        locals: &locals,
        shared: &shared,
        t_local: &t_local,
        t_shared: &t_shared,
    };
    let (nl, ns) = (lay.nl(), lay.ns());
    let plan = Plan::compile(circuit);
    let base = circuit.default_values();
    let inside = |i: usize, v: f64| {
        let (lo, hi) = circuit.bounds(i);
        if v.is_finite() && v > lo && v < hi {
            v
        } else {
            base[i]
        }
    };

    // Shared starting values: the median over the chain, in internal coordinates.
    let xs0: Vec<f64> = shared
        .iter()
        .zip(&t_shared)
        .map(|(&i, t)| {
            let mut v: Vec<f64> = starts
                .iter()
                .map(|s| t.to_internal(inside(i, s[i])))
                .collect();
            v.sort_by(f64::total_cmp);
            v[v.len() / 2]
        })
        .collect();

    let mut members = Vec::with_capacity(spectra.len());
    let mut residuals = 0usize;
    for (k, (spectrum, s)) in spectra.iter().zip(starts).enumerate() {
        let prep = prepare(spectrum, settings.weighting).map_err(|error| JointError::Spectrum {
            index: k + 1,
            error,
        })?;
        let n = prep.grid.len();
        residuals += 2 * n;
        let mut params = base.clone();
        for &i in &free {
            params[i] = inside(i, s[i]);
        }
        let xl: Vec<f64> = locals
            .iter()
            .zip(&t_local)
            .map(|(&i, t)| t.to_internal(params[i]))
            .collect();
        let state = State::new(params, n, np);
        members.push(Member {
            ws: plan.workspace(),
            cur: state.clone(),
            trial: state,
            xl_trial: xl.clone(),
            xl,
            cols: vec![0.0; 2 * n * (nl + ns)],
            u: vec![0.0; nl * nl],
            w: vec![0.0; nl * ns],
            v: vec![0.0; ns * ns],
            g: vec![0.0; nl],
            h: vec![0.0; ns],
            d: vec![0.0; nl],
            m: vec![0.0; nl * nl],
            y: vec![0.0; nl * ns],
            yg: vec![0.0; nl],
            step: vec![0.0; nl],
            prep,
        });
    }
    let unknowns = nl * spectra.len() + ns;
    if residuals <= unknowns {
        return Err(JointError::TooFewPoints {
            residuals,
            unknowns,
        });
    }

    let mut xs = xs0;
    let mut xs_trial = xs.clone();
    for (k, m) in members.iter_mut().enumerate() {
        m.set_trial(&lay, &xs);
        m.trial.evaluate(&plan, &m.prep, &mut m.ws);
        if !m.trial.chi_square.is_finite() {
            return Err(JointError::NoFiniteStart { index: k + 1 });
        }
        std::mem::swap(&mut m.cur, &mut m.trial);
    }
    let tol = settings.tolerance;
    let mut chi: f64 = members.iter().map(|m| m.cur.chi_square).sum();
    // Shared blocks summed over the chain, the damping scale of the shared block, and scratch.
    let mut v = vec![0.0; ns * ns];
    let mut h = vec![0.0; ns];
    let mut ds = vec![0.0; ns];
    let mut s = vec![0.0; ns * ns];
    let mut rhs = vec![0.0; ns];
    let mut scratch = vec![0.0; nl.max(ns)];
    let mut mu = 0.0;
    let mut nu = 2.0;
    let mut iterations = 0;
    let termination;
    'outer: loop {
        // Blocks at the current point.
        v.iter_mut().for_each(|x| *x = 0.0);
        h.iter_mut().for_each(|x| *x = 0.0);
        for m in &mut members {
            m.normal_blocks(&lay, &xs);
            for (a, b) in v.iter_mut().zip(&m.v) {
                *a += b;
            }
            for (a, b) in h.iter_mut().zip(&m.h) {
                *a += b;
            }
        }
        for a in 0..ns {
            ds[a] = f64::max(ds[a], v[a * ns + a]);
        }
        iterations += 1;
        if chi == 0.0 {
            termination = Termination::ResidualsZero;
            break;
        }
        // Gradient test: the largest cosine between a column and the residuals.
        let mut cosine: f64 = 0.0;
        for m in &members {
            for a in 0..nl {
                let d = m.u[a * nl + a];
                if d > 0.0 {
                    cosine = cosine.max(m.g[a].abs() / (d * chi).sqrt());
                }
            }
        }
        for a in 0..ns {
            let d = v[a * ns + a];
            if d > 0.0 {
                cosine = cosine.max(h[a].abs() / (d * chi).sqrt());
            }
        }
        if cosine <= tol {
            termination = Termination::Orthogonal;
            break;
        }
        if iterations > settings.max_iterations {
            termination = Termination::LostPatience;
            break;
        }
        if mu == 0.0 {
            // Relative to D = diag(JᵀJ): Nielsen's τ = 1e-3.
            mu = 1e-3;
        }
        // Inner loop: damped steps until one is accepted.
        loop {
            let mut ok = true;
            s.copy_from_slice(&v);
            rhs.iter_mut().zip(&h).for_each(|(r, &hv)| *r = -hv);
            for a in 0..ns {
                s[a * ns + a] += mu * ds[a].max(f64::MIN_POSITIVE);
            }
            for m in &mut members {
                m.m.copy_from_slice(&m.u);
                for a in 0..nl {
                    m.m[a * nl + a] += mu * m.d[a].max(f64::MIN_POSITIVE);
                }
                if !cholesky(&mut m.m, nl) {
                    ok = false;
                    break;
                }
                m.y.copy_from_slice(&m.w);
                cholesky_solve_columns(&m.m, nl, &mut m.y, ns, &mut scratch);
                m.yg.copy_from_slice(&m.g);
                cholesky_solve(&m.m, nl, &mut m.yg);
                // S −= Wᵀ Y, rhs += Wᵀ y_g.
                for a in 0..ns {
                    for b in 0..ns {
                        let mut t = 0.0;
                        for c in 0..nl {
                            t += m.w[c * ns + a] * m.y[c * ns + b];
                        }
                        s[a * ns + b] -= t;
                    }
                    let mut t = 0.0;
                    for c in 0..nl {
                        t += m.w[c * ns + a] * m.yg[c];
                    }
                    rhs[a] += t;
                }
            }
            if ok && !cholesky(&mut s, ns) {
                ok = false;
            }
            if !ok {
                mu *= nu;
                nu *= 2.0;
                if !mu.is_finite() || mu > 1e30 {
                    termination = Termination::Numerical("the damped normal equations");
                    break 'outer;
                }
                continue;
            }
            cholesky_solve(&s, ns, &mut rhs);
            let delta_s = &rhs;
            // Predicted reduction −δᵀg + μ δᵀDδ, and the step's size.
            let mut predicted = 0.0;
            let mut step_norm = 0.0;
            let mut x_norm = 0.0;
            for a in 0..ns {
                predicted += -delta_s[a] * h[a] + mu * ds[a] * delta_s[a] * delta_s[a];
                step_norm += delta_s[a] * delta_s[a];
                x_norm += xs[a] * xs[a];
                xs_trial[a] = xs[a] + delta_s[a];
            }
            for m in &mut members {
                for a in 0..nl {
                    let row = &m.y[a * ns..(a + 1) * ns];
                    let t: f64 = row.iter().zip(delta_s).map(|(y, d)| y * d).sum();
                    m.step[a] = -(m.yg[a] + t);
                    predicted += -m.step[a] * m.g[a] + mu * m.d[a] * m.step[a] * m.step[a];
                    step_norm += m.step[a] * m.step[a];
                    x_norm += m.xl[a] * m.xl[a];
                    m.xl_trial[a] = m.xl[a] + m.step[a];
                }
            }
            let mut chi_trial = 0.0;
            for m in &mut members {
                m.set_trial(&lay, &xs_trial);
                m.trial.evaluate(&plan, &m.prep, &mut m.ws);
                chi_trial += m.trial.chi_square;
            }
            let actual = chi - chi_trial;
            let rho = if predicted > 0.0 {
                actual / predicted
            } else {
                -1.0
            };
            let small_step = step_norm.sqrt() <= tol * (x_norm.sqrt() + tol);
            if chi_trial.is_finite() && actual > 0.0 && rho > 0.0 {
                for m in &mut members {
                    std::mem::swap(&mut m.cur, &mut m.trial);
                    std::mem::swap(&mut m.xl, &mut m.xl_trial);
                }
                std::mem::swap(&mut xs, &mut xs_trial);
                let before = chi;
                chi = chi_trial;
                mu *= f64::max(1.0 / 3.0, 1.0 - (2.0 * rho - 1.0).powi(3));
                nu = 2.0;
                let ftol = actual <= tol * before && predicted <= tol * before;
                if ftol || small_step {
                    // Blocks at the final point, for the covariance.
                    for m in &mut members {
                        m.normal_blocks(&lay, &xs);
                    }
                    termination = Termination::Converged {
                        ftol,
                        xtol: small_step,
                    };
                    break 'outer;
                }
                break;
            }
            if small_step || predicted <= f64::EPSILON * chi {
                termination = Termination::Converged {
                    ftol: predicted <= f64::EPSILON * chi,
                    xtol: small_step,
                };
                break 'outer;
            }
            mu *= nu;
            nu *= 2.0;
            if !mu.is_finite() || mu > 1e30 {
                termination = Termination::NoImprovementPossible("chi-square");
                break 'outer;
            }
        }
    }

    let dof = residuals - unknowns;
    let reduced = chi / dof as f64;
    let cov = JointCovariance::new(&members, &lay, &xs, reduced);

    let mut fits = Vec::with_capacity(members.len());
    for (k, m) in members.iter().enumerate() {
        let problem = Problem::new(
            &plan,
            &m.prep.grid,
            &m.prep.data,
            &m.prep.w_rows,
            Point::Params(m.cur.params.clone()),
            &free,
            &t_free,
        );
        let mut r = stats::summarise(stats::Summary {
            circuit,
            problem: &problem,
            prep_data: &m.prep.data,
            free: &free,
            transforms: &t_free,
            run_iterations: iterations,
            evaluations: iterations,
            tried: 1,
            termination: &termination,
            weighting: settings.weighting,
        });
        cov.apply(k, circuit, &free, &lay, &mut r);
        fits.push(r);
    }
    Ok(JointResult {
        fits,
        shared,
        chi_square: chi,
        dof,
        reduced_chi_square: reduced,
        iterations,
        termination,
    })
}

/// Of one spectrum's local block in scaled coordinates: Ũ⁻¹, Ũ⁻¹W̃ and the scaling.
type LocalInverse = (Vec<f64>, Vec<f64>, Vec<f64>);

#[cfg(test)]
mod tests {
    use super::*;
    use crate::circuit::parse;
    use crate::eval::log_frequencies;
    use crate::simulate::simulate;

    #[test]
    fn small_cholesky_solves() {
        // A = [[4, 2], [2, 3]], b = (2, 1): x = (0.5, 0).
        let mut a = [4.0, 2.0, 2.0, 3.0];
        assert!(cholesky(&mut a, 2));
        let mut b = [2.0, 1.0];
        cholesky_solve(&a, 2, &mut b);
        assert!((b[0] - 0.5).abs() < 1e-15 && b[1].abs() < 1e-15);
        let mut not_pd = [1.0, 2.0, 2.0, 1.0];
        assert!(!cholesky(&mut not_pd, 2));
    }

    /// Noise-free spectra that share their exponent: the joint fit meets every truth from perturbed
    /// starts (exact data have the truth as their only zero-χ² point; common practice).
    #[test]
    fn joint_fit_recovers_exact_chain() {
        let c = parse("R0 + Rct|Qdl").unwrap();
        let plan = Plan::compile(&c);
        let f = log_frequencies(1e5, 1e-2, 8);
        let truths: Vec<Vec<f64>> = (0..5)
            .map(|k| vec![1.0 + 0.1 * k as f64, 20.0 + 3.0 * k as f64, 2e-4, 0.85])
            .collect();
        let spectra: Vec<Spectrum> = truths
            .iter()
            .map(|t| simulate(&plan, t, &f, None))
            .collect();
        let refs: Vec<&Spectrum> = spectra.iter().collect();
        let starts: Vec<Vec<f64>> = truths
            .iter()
            .enumerate()
            .map(|(k, t)| vec![t[0] * 1.2, t[1] * 0.8, t[2] * 1.5, 0.8 + 0.02 * k as f64])
            .collect();
        let shared = shared_indices(&c, &["Qdl.n"]).unwrap();
        let r = fit_joint(&c, &refs, &shared, &starts, &JointSettings::default()).unwrap();
        assert!(r.converged(), "{:?}", r.termination);
        for (fit, t) in r.fits.iter().zip(&truths) {
            for (got, want) in fit.values.iter().zip(t) {
                assert!((got - want).abs() <= 1e-7 * want, "{got} vs {want}");
            }
        }
    }

    #[test]
    fn shared_names_are_checked() {
        let c = parse("R0 + Rct|Qdl").unwrap();
        assert!(matches!(
            shared_indices(&c, &["Qx.n"]),
            Err(JointError::UnknownParameter { .. })
        ));
        assert_eq!(
            shared_indices(&c, &["Qdl.n", "R0", "Qdl.n"]).unwrap(),
            [0, 3]
        );
    }
}
