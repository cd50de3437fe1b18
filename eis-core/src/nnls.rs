//! Non-negative least squares: minimise ‖Ax − b‖² subject to x ≥ 0, by the active-set method of
//! Lawson & Hanson (1974, *Solving Least Squares Problems*, Prentice-Hall, ch. 23), worked on the normal
//! equations.
//!
//! # Why the normal equations
//!
//! The DRT solves the same problem for many regularisation strengths λ: minimise
//! ‖Ax − b‖² + λ·xᵀMx, x ≥ 0. With Q = AᵀA + λM and c = Aᵀb this is the quadratic program
//! min ½xᵀQx − cᵀx, x ≥ 0, whose optimality (Karush–Kuhn–Tucker) conditions are those of Lawson–Hanson's
//! NNLS with the gradient w = c − Qx. AᵀA and Aᵀb are formed once per spectrum; each λ then costs one
//! matrix addition and the active-set iterations, independent of the number of data rows. The price is a
//! squared condition number, which the regularisation keeps moderate (and λ = 0 on an ill-posed problem
//! is exactly the case the DRT avoids).
//!
//! # The algorithm
//!
//! Start from x = 0 with every variable held at its bound (the "active" set). Repeatedly free the
//! variable whose gradient component w_j is largest and positive, solve the unconstrained subproblem
//! Q_PP z_P = c_P on the free ("passive") set P by Cholesky, and if some z_j ≤ 0 step from x towards z
//! only as far as feasibility allows, return the variables that hit zero to the active set and solve
//! again. Stop when no active variable has w_j above a small tolerance.
//!
//! The Cholesky factor of Q_PP is kept between subproblems: freeing a variable appends one row to it
//! (O(p²)); returning variables to the active set refactors (O(p³), rare). All scratch memory lives in
//! [`NnlsWorkspace`], so repeated solves do not allocate.
//!
//! (A worked example is the test `worked_example_with_one_variable_at_zero`.)

use nalgebra::DMatrix;
#[cfg(test)]
use nalgebra::DVector;
use std::fmt;

/// Why [`solve_normal`] stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Termination {
    /// The optimality conditions hold to the tolerance.
    Converged,
    /// The iteration limit (three times the number of variables) was reached first; the solution is
    /// feasible but may not be optimal.
    IterationLimit,
}

/// What a solve did.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct NnlsReport {
    /// Why it stopped.
    pub termination: Termination,
    /// Outer iterations (variables freed).
    pub iterations: usize,
    /// Number of variables strictly above zero at the end.
    pub free: usize,
}

/// Bad arguments to a solve.
#[derive(Debug, Clone, PartialEq, Eq)]
#[non_exhaustive]
pub enum NnlsError {
    /// Q is not square, or c, x or the workspace do not match its size: `Q` 3×3 with `c` of length 2.
    Dimension {
        /// The size Q implies.
        expected: usize,
        /// The size found.
        found: usize,
    },
    /// Q or c holds NaN or an infinity.
    NonFinite,
}

impl fmt::Display for NnlsError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            NnlsError::Dimension { expected, found } => {
                write!(f, "dimension mismatch: expected {expected}, found {found}")
            }
            NnlsError::NonFinite => write!(f, "the problem holds a non-finite number"),
        }
    }
}

impl std::error::Error for NnlsError {}

/// Scratch memory for [`solve_normal`] with `n` variables. After a solve it also holds the free set and
/// the Cholesky factor of Q restricted to it; a warm [`solve_normal`] starts from that free set.
#[derive(Debug, Clone)]
pub struct NnlsWorkspace {
    n: usize,
    /// Free (passive) variables, in the order their rows sit in `chol`.
    passive: Vec<usize>,
    is_passive: Vec<bool>,
    /// Variables that could not be freed in this solve (degenerate pivot or wrong-signed first step).
    excluded: Vec<bool>,
    /// Lower Cholesky factor of Q_PP, row-major with stride n: `chol[r * n + s]` for s ≤ r.
    chol: Vec<f64>,
    z: Vec<f64>,
    w: Vec<f64>,
    rhs: Vec<f64>,
    /// Scratch copy of the free set while refactoring.
    order: Vec<usize>,
}

impl NnlsWorkspace {
    /// Workspace for problems with `n` variables.
    pub fn new(n: usize) -> NnlsWorkspace {
        NnlsWorkspace {
            n,
            passive: Vec::with_capacity(n),
            is_passive: vec![false; n],
            excluded: vec![false; n],
            chol: vec![0.0; n * n],
            z: vec![0.0; n],
            w: vec![0.0; n],
            rhs: vec![0.0; n],
            order: Vec::with_capacity(n),
        }
    }

    /// Appends variable `j` to the free set, extending the Cholesky factor by one row. Returns false
    /// (and changes nothing) when the new pivot is not safely positive.
    fn push(&mut self, q: &DMatrix<f64>, j: usize) -> bool {
        let n = self.n;
        let p = self.passive.len();
        let row = p * n;
        let mut sum_sq = 0.0;
        for s in 0..p {
            let mut v = q[(self.passive[s], j)];
            for t in 0..s {
                v -= self.chol[row + t] * self.chol[s * n + t];
            }
            v /= self.chol[s * n + s];
            self.chol[row + s] = v;
            sum_sq += v * v;
        }
        let d = q[(j, j)] - sum_sq;
        // A pivot this small relative to the diagonal means column j is (numerically) a combination of
        // the free columns; freeing it would make the subproblem singular.
        if d.is_nan() || d <= 1e-13 * q[(j, j)].abs() || !d.is_finite() {
            return false;
        }
        self.chol[row + p] = d.sqrt();
        self.passive.push(j);
        self.is_passive[j] = true;
        true
    }

    /// Rebuilds the factor for the current free set after variables left it. A variable whose pivot
    /// fails is returned to the active set and excluded.
    fn refactor(&mut self, q: &DMatrix<f64>, x: &mut [f64]) {
        self.order.clear();
        self.order.extend_from_slice(&self.passive);
        for &j in &self.passive {
            self.is_passive[j] = false;
        }
        self.passive.clear();
        for k in 0..self.order.len() {
            let j = self.order[k];
            if !self.push(q, j) {
                self.excluded[j] = true;
                x[j] = 0.0;
            }
        }
    }

    /// z_P = Q_PP⁻¹ c_P into `self.z` (indexed by variable).
    fn solve_subproblem(&mut self, c: &[f64]) {
        let p = self.passive.len();
        for (r, &i) in self.passive.iter().enumerate() {
            self.rhs[r] = c[i];
        }
        chol_solve(&self.chol, self.n, p, &mut self.rhs[..p]);
        for (r, &i) in self.passive.iter().enumerate() {
            self.z[i] = self.rhs[r];
        }
    }
}

/// Solves L Lᵀ y = b in place for the leading p×p block of a row-major factor with stride n.
pub(crate) fn chol_solve(l: &[f64], n: usize, p: usize, b: &mut [f64]) {
    for r in 0..p {
        let mut v = b[r];
        for s in 0..r {
            v -= l[r * n + s] * b[s];
        }
        b[r] = v / l[r * n + r];
    }
    back_substitute(l, n, p, b);
}

/// Solves Lᵀ y = b in place (the second half of a Cholesky solve) for the leading p×p block of a
/// row-major lower factor with stride n.
pub(crate) fn back_substitute(l: &[f64], n: usize, p: usize, b: &mut [f64]) {
    for r in (0..p).rev() {
        let mut v = b[r];
        for s in r + 1..p {
            v -= l[s * n + r] * b[s];
        }
        b[r] = v / l[r * n + r];
    }
}

/// Minimises ½xᵀQx − cᵀx subject to x ≥ 0 for symmetric positive (semi)definite Q, writing the
/// solution into `x`. With Q = AᵀA and c = Aᵀb this is NNLS for min ‖Ax − b‖².
///
/// `warm` starts from the free set of the previous solve in `ws` (for a sequence of nearby problems,
/// such as a scan over λ); the result is the same optimum, usually in fewer iterations.
///
/// # Errors
///
/// [`NnlsError::Dimension`] when the sizes disagree, [`NnlsError::NonFinite`] for NaN or infinite input.
pub fn solve_normal(
    q: &DMatrix<f64>,
    c: &[f64],
    x: &mut [f64],
    ws: &mut NnlsWorkspace,
    warm: bool,
) -> Result<NnlsReport, NnlsError> {
    let n = q.nrows();
    for found in [q.ncols(), c.len(), x.len(), ws.n] {
        if found != n {
            return Err(NnlsError::Dimension { expected: n, found });
        }
    }
    if q.iter().chain(c).any(|v| !v.is_finite()) {
        return Err(NnlsError::NonFinite);
    }
    x.fill(0.0);
    ws.excluded.fill(false);
    if warm {
        warm_start(q, c, x, ws);
    } else {
        for &j in &ws.passive {
            ws.is_passive[j] = false;
        }
        ws.passive.clear();
    }
    let q_max = q.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let c_max = c.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let max_iter = 3 * n.max(1);
    let mut iterations = 0;
    loop {
        // Gradient of the negative objective: w = c − Qx.
        let x_sum: f64 = x.iter().sum();
        for j in 0..n {
            let mut v = c[j];
            for &i in &ws.passive {
                v -= q[(j, i)] * x[i];
            }
            ws.w[j] = v;
        }
        let tol = 16.0 * f64::EPSILON * (n as f64) * (c_max + q_max * x_sum);
        let mut best = None;
        let mut best_w = tol;
        for j in 0..n {
            if !ws.is_passive[j] && !ws.excluded[j] && ws.w[j] > best_w {
                best_w = ws.w[j];
                best = Some(j);
            }
        }
        let Some(j) = best else {
            return Ok(report(Termination::Converged, iterations, ws));
        };
        if iterations >= max_iter {
            return Ok(report(Termination::IterationLimit, iterations, ws));
        }
        iterations += 1;
        if !ws.push(q, j) {
            ws.excluded[j] = true;
            continue;
        }
        let mut first = true;
        loop {
            ws.solve_subproblem(c);
            if first && ws.z[j] <= 0.0 {
                // Round-off made the freed variable's step point the wrong way: keep it at zero.
                let p = ws.passive.len();
                ws.passive.truncate(p - 1);
                ws.is_passive[j] = false;
                ws.excluded[j] = true;
                break;
            }
            first = false;
            if ws.passive.iter().all(|&i| ws.z[i] > 0.0) {
                for &i in &ws.passive {
                    x[i] = ws.z[i];
                }
                break;
            }
            // Step from x towards z as far as the first variable reaching zero, which leaves the free
            // set together with any other that reached zero on the way.
            let mut alpha = f64::INFINITY;
            let mut limiting = j;
            for &i in &ws.passive {
                if ws.z[i] <= 0.0 {
                    let a = x[i] / (x[i] - ws.z[i]);
                    if a < alpha {
                        alpha = a;
                        limiting = i;
                    }
                }
            }
            for &i in &ws.passive {
                x[i] += alpha * (ws.z[i] - x[i]);
            }
            x[limiting] = 0.0;
            let is_passive = &mut ws.is_passive;
            ws.passive.retain(|&i| {
                let keep = x[i] > 0.0;
                if !keep {
                    x[i] = 0.0;
                    is_passive[i] = false;
                }
                keep
            });
            ws.refactor(q, x);
            if ws.passive.is_empty() {
                break;
            }
        }
    }
}

/// Frees the previous solve's free set, dropping variables until the subproblem solution is strictly
/// positive, and takes that as the starting point (feasible, optimal on its free set: the invariant the
/// Lawson–Hanson iterations keep).
fn warm_start(q: &DMatrix<f64>, c: &[f64], x: &mut [f64], ws: &mut NnlsWorkspace) {
    ws.refactor(q, x);
    while !ws.passive.is_empty() {
        ws.solve_subproblem(c);
        if ws.passive.iter().all(|&i| ws.z[i] > 0.0) {
            for &i in &ws.passive {
                x[i] = ws.z[i];
            }
            return;
        }
        let z = &ws.z;
        let is_passive = &mut ws.is_passive;
        ws.passive.retain(|&i| {
            let keep = z[i] > 0.0;
            is_passive[i] = keep;
            keep
        });
        ws.refactor(q, x);
    }
}

fn report(termination: Termination, iterations: usize, ws: &NnlsWorkspace) -> NnlsReport {
    NnlsReport {
        termination,
        iterations,
        free: ws.passive.len(),
    }
}

#[cfg(test)]
/// NNLS for min ‖Ax − b‖², x ≥ 0 (forms AᵀA and Aᵀb and calls [`solve_normal`]; allocates).
///
/// # Errors
///
/// As [`solve_normal`], plus [`NnlsError::Dimension`] when `b` does not have A's row count.
pub fn nnls(a: &DMatrix<f64>, b: &DVector<f64>) -> Result<DVector<f64>, NnlsError> {
    if b.len() != a.nrows() {
        return Err(NnlsError::Dimension {
            expected: a.nrows(),
            found: b.len(),
        });
    }
    let q = a.transpose() * a;
    let c = a.transpose() * b;
    let mut x = DVector::zeros(a.ncols());
    let mut ws = NnlsWorkspace::new(a.ncols());
    solve_normal(&q, c.as_slice(), x.as_mut_slice(), &mut ws, false)?;
    Ok(x)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Unconstrained, x = (2, −1); with x ≥ 0 the second variable sits at zero and the first takes
    /// the least-squares value for the remaining column: x₁ = (a₁·b)/(a₁·a₁) = 3/2 (Lawson & Hanson
    /// 1974, *Solving Least Squares Problems*, ch. 23: the Kuhn–Tucker conditions of the solution).
    #[test]
    fn worked_example_with_one_variable_at_zero() {
        let a = DMatrix::from_row_slice(3, 2, &[1.0, 0.0, 0.0, 1.0, 1.0, 1.0]);
        let b = DVector::from_column_slice(&[2.0, -1.0, 1.0]);
        let x = nnls(&a, &b).unwrap();
        assert!((x[0] - 1.5).abs() < 1e-12 && x[1] == 0.0);
    }

    fn solve(rows: usize, cols: usize, a: &[f64], b: &[f64]) -> DVector<f64> {
        nnls(
            &DMatrix::from_row_slice(rows, cols, a),
            &DVector::from_column_slice(b),
        )
        .unwrap()
    }

    /// The optimality conditions of NNLS (Lawson & Hanson 1974, ch. 23, the Kuhn–Tucker conditions):
    /// x ≥ 0, w = Aᵀ(b − Ax) ≤ 0 where x = 0, and w = 0 where x > 0.
    fn assert_kkt(a: &DMatrix<f64>, b: &DVector<f64>, x: &DVector<f64>) {
        let w = a.transpose() * (b - a * x);
        let scale = (a.transpose() * b).amax().max(1.0);
        for j in 0..x.len() {
            assert!(x[j] >= 0.0, "x[{j}] = {}", x[j]);
            if x[j] > 0.0 {
                assert!(
                    w[j].abs() <= 1e-9 * scale,
                    "w[{j}] = {} at a free variable",
                    w[j]
                );
            } else {
                assert!(w[j] <= 1e-9 * scale, "w[{j}] = {} at a bound", w[j]);
            }
        }
    }

    #[test]
    fn hand_checked_problems() {
        // Identity: x = max(b, 0).
        assert_eq!(
            solve(3, 3, &[1., 0., 0., 0., 1., 0., 0., 0., 1.], &[1., -2., 3.]).as_slice(),
            &[1., 0., 3.]
        );
        // All-negative data against positive columns: x = 0.
        assert_eq!(
            solve(2, 2, &[1., 1., 0., 1.], &[-1., -3.]).as_slice(),
            &[0., 0.]
        );
        // Interior solution equals ordinary least squares: diag(2, 1) x = (4, 3) gives (2, 3).
        let x = solve(2, 2, &[2., 0., 0., 1.], &[4., 3.]);
        assert!((x[0] - 2.0).abs() < 1e-14 && (x[1] - 3.0).abs() < 1e-14);
        // Unconstrained (2, −1) for A = [[1,0],[0,1],[1,1]], b = (2,−1,1); bound: x = (3/2, 0).
        let x = solve(3, 2, &[1., 0., 0., 1., 1., 1.], &[2., -1., 1.]);
        assert!((x[0] - 1.5).abs() < 1e-14 && x[1] == 0.0);
        // One column: x = max(a·b, 0)/(a·a) = 14/14.
        let x = solve(3, 1, &[1., 2., 3.], &[1., 2., 3.]);
        assert!((x[0] - 1.0).abs() < 1e-14);
    }

    #[test]
    fn kkt_holds_on_seeded_random_problems() {
        // Seeded linear congruential generator (Knuth's MMIX constants), seed 42.
        let mut state: u64 = 42;
        let mut next = move || {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (state >> 11) as f64 / (1u64 << 53) as f64 * 2.0 - 1.0
        };
        for (rows, cols) in [(10, 4), (30, 12), (8, 8), (40, 25)] {
            let a = DMatrix::from_fn(rows, cols, |_, _| next());
            let b = DVector::from_fn(rows, |_, _| next());
            let x = nnls(&a, &b).unwrap();
            assert_kkt(&a, &b, &x);
            // Warm start from the previous free set reaches the same optimum.
            let q = a.transpose() * &a;
            let c = a.transpose() * &b;
            let mut ws = NnlsWorkspace::new(cols);
            let mut x1 = vec![0.0; cols];
            solve_normal(&q, c.as_slice(), &mut x1, &mut ws, false).unwrap();
            let mut x2 = vec![0.0; cols];
            let report = solve_normal(&q, c.as_slice(), &mut x2, &mut ws, true).unwrap();
            assert_eq!(report.termination, Termination::Converged);
            for j in 0..cols {
                assert!((x1[j] - x2[j]).abs() <= 1e-12 * (1.0 + x1[j].abs()));
                assert!((x1[j] - x[j]).abs() <= 1e-12 * (1.0 + x[j].abs()));
            }
        }
    }

    #[test]
    fn duplicate_columns_do_not_break_the_solver() {
        // Rank-deficient: columns 1 and 2 equal; any split of their sum is optimal.
        let a = DMatrix::from_row_slice(3, 3, &[1., 1., 0., 1., 1., 1., 0., 0., 1.]);
        let b = DVector::from_column_slice(&[2., 3., 1.]);
        let x = nnls(&a, &b).unwrap();
        assert_kkt(&a, &b, &x);
        assert!(((x[0] + x[1]) - 2.0).abs() < 1e-12 && (x[2] - 1.0).abs() < 1e-12);
    }

    #[test]
    fn bad_arguments_are_errors() {
        let q = DMatrix::identity(3, 3);
        let mut ws = NnlsWorkspace::new(3);
        let mut x = vec![0.0; 3];
        assert_eq!(
            solve_normal(&q, &[1.0, 2.0], &mut x, &mut ws, false),
            Err(NnlsError::Dimension {
                expected: 3,
                found: 2
            })
        );
        assert_eq!(
            solve_normal(&q, &[1.0, f64::NAN, 0.0], &mut x, &mut ws, false),
            Err(NnlsError::NonFinite)
        );
        let mut small = NnlsWorkspace::new(2);
        assert!(solve_normal(&q, &[1.0, 1.0, 1.0], &mut x, &mut small, false).is_err());
        let a = DMatrix::identity(2, 2);
        assert!(nnls(&a, &DVector::zeros(3)).is_err());
        // Zero variables: nothing to do.
        let x = nnls(&DMatrix::zeros(3, 0), &DVector::zeros(3)).unwrap();
        assert_eq!(x.len(), 0);
    }
}
