//! The descent of a joint fit: each spectrum's state and blocks of the normal equations, the damped
//! step by the Schur complement on the shared block, and the Levenberg–Marquardt iteration (see the
//! method in the parent module).

use super::{JointError, JointSettings, Termination};
use crate::eval::{Plan, Workspace};
use crate::fit::Prepared;
use crate::fit::problem::Transform;
use num_complex::Complex64;

/// One spectrum of the chain: data, its state and its blocks of the normal equations.
pub(super) struct Member {
    pub(super) prep: Prepared,
    ws: Workspace,
    /// Parameters, residuals, model and derivatives at the current point, and at the trial point.
    pub(super) cur: State,
    trial: State,
    /// Internal coordinates of the local parameters (current and trial).
    pub(super) xl: Vec<f64>,
    xl_trial: Vec<f64>,
    /// Weighted Jacobian columns in x: local ones, then shared ones (2N rows each).
    cols: Vec<f64>,
    /// U (nl × nl), W (nl × ns), V_k (ns × ns), g (nl), h_k (ns), row-major.
    pub(super) u: Vec<f64>,
    pub(super) w: Vec<f64>,
    pub(super) v: Vec<f64>,
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
pub(super) struct State {
    pub(super) params: Vec<f64>,
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
pub(super) struct Layout<'a> {
    pub(super) locals: &'a [usize],
    pub(super) shared: &'a [usize],
    pub(super) t_local: &'a [Transform],
    pub(super) t_shared: &'a [Transform],
}

impl Layout<'_> {
    pub(super) fn nl(&self) -> usize {
        self.locals.len()
    }
    pub(super) fn ns(&self) -> usize {
        self.shared.len()
    }
}

impl Member {
    /// The member of spectrum `prep` at parameters `params` (local internal coordinates `xl`), with
    /// room for `nl` local and `ns` shared unknowns.
    pub(super) fn new(
        plan: &Plan,
        prep: Prepared,
        params: Vec<f64>,
        xl: Vec<f64>,
        (nl, ns): (usize, usize),
    ) -> Member {
        let n = prep.grid.len();
        let state = State::new(params, n, plan.n_params());
        Member {
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
        }
    }

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
    pub(super) fn normal_blocks(&mut self, lay: &Layout<'_>, xs: &[f64]) {
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
pub(super) fn cholesky(a: &mut [f64], n: usize) -> bool {
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
pub(super) fn cholesky_solve(l: &[f64], n: usize, b: &mut [f64]) {
    crate::nnls::chol_solve(l, n, n, b);
}

/// Solves L Lᵀ X = B in place for B of `cols` columns (row-major n × cols).
pub(super) fn cholesky_solve_columns(
    l: &[f64],
    n: usize,
    b: &mut [f64],
    cols: usize,
    scratch: &mut [f64],
) {
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

/// Where the descent ended: the shared coordinates and χ² of the last accepted point (every member's
/// current state and blocks are those of that point).
pub(super) struct Run {
    pub(super) xs: Vec<f64>,
    pub(super) chi: f64,
    pub(super) iterations: usize,
    pub(super) termination: Termination,
}

/// The shared blocks summed over the chain (V, h), the damping scale of the shared block, and the
/// scratch of a step: the Schur complement S and its right-hand side (δ_s once solved).
struct Normal {
    v: Vec<f64>,
    h: Vec<f64>,
    ds: Vec<f64>,
    s: Vec<f64>,
    rhs: Vec<f64>,
    scratch: Vec<f64>,
}

impl Normal {
    fn new(nl: usize, ns: usize) -> Normal {
        Normal {
            v: vec![0.0; ns * ns],
            h: vec![0.0; ns],
            ds: vec![0.0; ns],
            s: vec![0.0; ns * ns],
            rhs: vec![0.0; ns],
            scratch: vec![0.0; nl.max(ns)],
        }
    }

    /// The blocks of every member at the current point (shared coordinates `xs`), V and h summed over
    /// the chain, and the running maximum of diag(V).
    fn assemble(&mut self, members: &mut [Member], lay: &Layout<'_>, xs: &[f64]) {
        let ns = lay.ns();
        self.v.iter_mut().for_each(|x| *x = 0.0);
        self.h.iter_mut().for_each(|x| *x = 0.0);
        for m in members.iter_mut() {
            m.normal_blocks(lay, xs);
            for (a, b) in self.v.iter_mut().zip(&m.v) {
                *a += b;
            }
            for (a, b) in self.h.iter_mut().zip(&m.h) {
                *a += b;
            }
        }
        for a in 0..ns {
            self.ds[a] = f64::max(self.ds[a], self.v[a * ns + a]);
        }
    }

    /// The gradient test: the largest cosine between a column and the residuals (χ² = `chi`).
    fn cosine(&self, members: &[Member], lay: &Layout<'_>, chi: f64) -> f64 {
        let (nl, ns) = (lay.nl(), lay.ns());
        let mut cosine: f64 = 0.0;
        for m in members {
            for a in 0..nl {
                let d = m.u[a * nl + a];
                if d > 0.0 {
                    cosine = cosine.max(m.g[a].abs() / (d * chi).sqrt());
                }
            }
        }
        for a in 0..ns {
            let d = self.v[a * ns + a];
            if d > 0.0 {
                cosine = cosine.max(self.h[a].abs() / (d * chi).sqrt());
            }
        }
        cosine
    }

    /// Solves the normal equations damped by `mu` through the Schur complement: δ_s into `rhs`, and
    /// each member's factor of U + μD, Y and y_g. False when a factorisation fails.
    fn solve(&mut self, members: &mut [Member], lay: &Layout<'_>, mu: f64) -> bool {
        let (nl, ns) = (lay.nl(), lay.ns());
        let (s, rhs) = (&mut self.s, &mut self.rhs);
        s.copy_from_slice(&self.v);
        rhs.iter_mut().zip(&self.h).for_each(|(r, &hv)| *r = -hv);
        for a in 0..ns {
            s[a * ns + a] += mu * self.ds[a].max(f64::MIN_POSITIVE);
        }
        for m in members.iter_mut() {
            m.m.copy_from_slice(&m.u);
            for a in 0..nl {
                m.m[a * nl + a] += mu * m.d[a].max(f64::MIN_POSITIVE);
            }
            if !cholesky(&mut m.m, nl) {
                return false;
            }
            m.y.copy_from_slice(&m.w);
            cholesky_solve_columns(&m.m, nl, &mut m.y, ns, &mut self.scratch);
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
        if !cholesky(s, ns) {
            return false;
        }
        cholesky_solve(s, ns, rhs);
        true
    }

    /// Each member's step from the solved δ_s, the trial coordinates (`xs_trial` shared, each
    /// member's `xl_trial`), and (predicted reduction −δᵀg + μ δᵀDδ, |δ|², |x|²).
    fn propose(
        &self,
        members: &mut [Member],
        lay: &Layout<'_>,
        mu: f64,
        xs: &[f64],
        xs_trial: &mut [f64],
    ) -> (f64, f64, f64) {
        let (nl, ns) = (lay.nl(), lay.ns());
        let delta_s = &self.rhs;
        let mut predicted = 0.0;
        let mut step_norm = 0.0;
        let mut x_norm = 0.0;
        for a in 0..ns {
            predicted += -delta_s[a] * self.h[a] + mu * self.ds[a] * delta_s[a] * delta_s[a];
            step_norm += delta_s[a] * delta_s[a];
            x_norm += xs[a] * xs[a];
            xs_trial[a] = xs[a] + delta_s[a];
        }
        for m in members.iter_mut() {
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
        (predicted, step_norm, x_norm)
    }
}

/// The damped Gauss–Newton descent of the chain from its members' starts and the shared coordinates
/// `xs`, to a convergence criterion or the iteration limit.
///
/// # Errors
///
/// [`JointError::NoFiniteStart`] when a spectrum's χ² is not finite at its start.
pub(super) fn iterate(
    plan: &Plan,
    members: &mut [Member],
    lay: &Layout<'_>,
    mut xs: Vec<f64>,
    settings: &JointSettings,
) -> Result<Run, JointError> {
    let mut xs_trial = xs.clone();
    for (k, m) in members.iter_mut().enumerate() {
        m.set_trial(lay, &xs);
        m.trial.evaluate(plan, &m.prep, &mut m.ws);
        if !m.trial.chi_square.is_finite() {
            return Err(JointError::NoFiniteStart { index: k + 1 });
        }
        std::mem::swap(&mut m.cur, &mut m.trial);
    }
    let tol = settings.tolerance;
    let mut chi: f64 = members.iter().map(|m| m.cur.chi_square).sum();
    let mut normal = Normal::new(lay.nl(), lay.ns());
    let mut mu = 0.0;
    let mut nu = 2.0;
    let mut iterations = 0;
    let termination = 'outer: loop {
        // Blocks at the current point.
        normal.assemble(members, lay, &xs);
        iterations += 1;
        if chi == 0.0 {
            break Termination::ResidualsZero;
        }
        if normal.cosine(members, lay, chi) <= tol {
            break Termination::Orthogonal;
        }
        if iterations > settings.max_iterations {
            break Termination::LostPatience;
        }
        if mu == 0.0 {
            // Relative to D = diag(JᵀJ): Nielsen's τ = 1e-3.
            mu = 1e-3;
        }
        // Inner loop: damped steps until one is accepted.
        loop {
            if !normal.solve(members, lay, mu) {
                mu *= nu;
                nu *= 2.0;
                if !mu.is_finite() || mu > 1e30 {
                    break 'outer Termination::Numerical("the damped normal equations");
                }
                continue;
            }
            let (predicted, step_norm, x_norm) =
                normal.propose(members, lay, mu, &xs, &mut xs_trial);
            let mut chi_trial = 0.0;
            for m in members.iter_mut() {
                m.set_trial(lay, &xs_trial);
                m.trial.evaluate(plan, &m.prep, &mut m.ws);
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
                for m in members.iter_mut() {
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
                    for m in members.iter_mut() {
                        m.normal_blocks(lay, &xs);
                    }
                    break 'outer Termination::Converged {
                        ftol,
                        xtol: small_step,
                    };
                }
                break;
            }
            if small_step || predicted <= f64::EPSILON * chi {
                break 'outer Termination::Converged {
                    ftol: predicted <= f64::EPSILON * chi,
                    xtol: small_step,
                };
            }
            mu *= nu;
            nu *= 2.0;
            if !mu.is_finite() || mu > 1e30 {
                break 'outer Termination::NoImprovementPossible("chi-square");
            }
        }
    };
    Ok(Run {
        xs,
        chi,
        iterations,
        termination,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

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
}
