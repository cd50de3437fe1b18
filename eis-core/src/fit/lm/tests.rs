//! Tests of the Levenberg–Marquardt solver.

use super::*;
use crate::fit::reduce::factor;

/// The core of a small dense problem, for the λ search alone.
fn core_of(j: &[f64], m: usize, n: usize, r: &[f64]) -> Core {
    let mut core = Core::new(n);
    // Householder on purpose: these tests also pin the route that keeps the conditioning.
    factor(&mut j.to_vec(), m, n, r, &mut core, false);
    core
}

/// λ and the step of MINPACK's `lmpar` on three 4 × 3 problems of full rank. Expected values from
/// the test suite of the `levenberg-marquardt` crate 0.15 (src/trust_region.rs, computed there with
/// MINPACK); the problems are column-pivoted there and not here, which must not change λ or the step
/// when J has full rank.
#[test]
#[allow(clippy::excessive_precision)] // the reference values as published
fn lmpar_matches_minpack_reference_cases() {
    type Case = ([f64; 12], [f64; 4], [f64; 3], f64, [f64; 3]);
    let cases: [Case; 3] = [
        (
            [
                33., -40., 44., -43., -37., -1., -40., 48., 43., -11., -40., 43.,
            ],
            [7., -1., 0., -1.],
            [18.2, 18.2, 3.2],
            34.628643558156341,
            [0.017591648698939, -0.020395135814051, 0.059285196018896],
        ),
        (
            [
                -7., 28., -40., 29., 7., -49., -39., 43., -25., -47., -11., 34.,
            ],
            [-7., -8., -8., -10.],
            [10.2, 13.2, 1.2],
            0.0,
            [-0.048474221517806, -0.007207732068190, 0.083138659283539],
        ),
        (
            [
                8., -42., -34., -31., -30., -15., -36., -1., 27., 22., 44., 6.,
            ],
            [1., -5., 2., 7.],
            [4.2, 8.2, 11.2],
            0.017646940861467262,
            [-0.008462374169585, 0.033658082419054, 0.037230479167632],
        ),
    ];
    for (k, (j, r, diag, lambda, step)) in cases.iter().enumerate() {
        let core = core_of(j, 4, 3, r);
        let mut ws = Workspace::new(3);
        ws.diag.copy_from_slice(diag);
        let got = ws.lmpar(&core, 0.5, 0.2);
        assert!(
            (got - lambda).abs() <= 1e-12 * lambda.abs(),
            "case {}: λ {got} vs {lambda}",
            k + 1
        );
        for (a, b) in ws.step.iter().zip(step) {
            assert!((a - b).abs() <= 1e-13, "case {}: step {a} vs {b}", k + 1);
        }
    }
}

/// The crate's fourth case has a rank-deficient J (column 3 = −column 1). Without column pivoting
/// the least-squares solution picked is another one than MINPACK's, so what is checked is what any
/// must satisfy: the step is finite, fits the trust region, and solves the damped normal equations
/// (JᵀJ + λD²)p = Jᵀr.
#[test]
fn rank_deficient_jacobian_gives_a_damped_least_squares_step() {
    let j = [
        14., -12., 20., -11., 19., 38., -4., -11., -14., 12., -20., 11.,
    ];
    let r = [-5., 3., -2., 7.];
    let core = core_of(&j, 4, 3, &r);
    let mut ws = Workspace::new(3);
    ws.diag.copy_from_slice(&[6.2, 1.2, 0.2]);
    let delta = 0.5;
    let lambda = ws.lmpar(&core, delta, 0.2);
    assert!(ws.step.iter().all(|p| p.is_finite()));
    assert!(ws.dxnorm <= 1.1 * delta, "{}", ws.dxnorm);
    let jm = nalgebra::DMatrix::from_column_slice(4, 3, &j);
    let d = nalgebra::DMatrix::from_diagonal(&nalgebra::DVector::from_column_slice(&ws.diag));
    let p = nalgebra::DVector::from_column_slice(&ws.step);
    let lhs = (jm.transpose() * &jm + &d * &d * lambda) * p;
    let rhs = jm.transpose() * nalgebra::DVector::from_column_slice(&r);
    assert!((lhs - &rhs).norm() <= 1e-9 * rhs.norm(), "λ {lambda}");
}

/// qrsolv's step is the solution of the damped normal equations (RᵀR + s²D²)p = Rᵀc.
#[test]
fn damped_step_solves_the_normal_equations() {
    let j = [
        33., -40., 44., -43., -37., -1., -40., 48., 43., -11., -40., 43.,
    ];
    let r = [7., -1., 0., -1.];
    let core = core_of(&j, 4, 3, &r);
    let mut ws = Workspace::new(3);
    ws.diag.copy_from_slice(&[18.2, 1.0, 3.2]);
    let sq: f64 = 0.7;
    ws.qrsolv(&core, sq);
    let jm = nalgebra::DMatrix::from_column_slice(4, 3, &j);
    let d = nalgebra::DMatrix::from_diagonal(&nalgebra::DVector::from_column_slice(&ws.diag));
    let lhs = jm.transpose() * &jm + &d * &d * (sq * sq);
    let p = nalgebra::DVector::from_column_slice(&ws.step);
    let rhs = jm.transpose() * nalgebra::DVector::from_column_slice(&r);
    assert!((lhs * p - &rhs).norm() <= 1e-12 * rhs.norm());
}

/// The Cholesky route to the damped step gives qrsolv's step and, up to signs, its S.
#[test]
fn cholesky_and_rotations_give_the_same_damped_step() {
    let j = [
        8., -42., -34., -31., -30., -15., -36., -1., 27., 22., 44., 6.,
    ];
    let r = [1., -5., 2., 7.];
    let core = core_of(&j, 4, 3, &r);
    for lambda in [1e-6, 0.3, 40.0] {
        let mut ws = Workspace::new(3);
        ws.diag.copy_from_slice(&[4.2, 8.2, 11.2]);
        ws.normal_equations(&core);
        assert!(ws.cholesky_solve(lambda));
        let (step, sdiag) = (ws.step.clone(), ws.sdiag.clone());
        ws.qrsolv(&core, lambda.sqrt());
        for (a, b) in step.iter().zip(&ws.step) {
            assert!(
                (a - b).abs() <= 1e-12 * b.abs().max(1e-3),
                "λ {lambda}: {a} vs {b}"
            );
        }
        for (a, b) in sdiag.iter().zip(&ws.sdiag) {
            assert!(
                (a.abs() - b.abs()).abs() <= 1e-12 * b.abs(),
                "λ {lambda}: {a} vs {b}"
            );
        }
    }
}

/// With a nearly dependent column and almost no damping, the Cholesky route declines (its pivot
/// would keep less than 1e-8 of the diagonal) and lmpar's step comes from the rotations: it
/// still solves the damped normal equations.
#[test]
fn nearly_singular_damped_systems_go_through_the_rotations() {
    let e = 1e-7;
    let j = [1., 2., 3., 4., 1. + e, 2., 3. - e, 4., 0., 1., 0., 1.];
    let r = [1., 0., -1., 2.];
    let core = core_of(&j, 4, 3, &r);
    let mut ws = Workspace::new(3);
    ws.diag.copy_from_slice(&[1.0, 1.0, 1.0]);
    ws.normal_equations(&core);
    let lambda = 1e-12;
    assert!(!ws.cholesky_solve(lambda));
    let step = {
        ws.qrsolv(&core, lambda.sqrt());
        ws.step.clone()
    };
    let jm = nalgebra::DMatrix::from_column_slice(4, 3, &j);
    let lhs = (jm.transpose() * &jm + nalgebra::DMatrix::identity(3, 3) * lambda)
        * nalgebra::DVector::from_column_slice(&step);
    let rhs = jm.transpose() * nalgebra::DVector::from_column_slice(&r);
    assert!((lhs - &rhs).norm() <= 1e-6 * rhs.norm());
}

/// A dense problem given by a function returning residuals and Jacobian (column by column), seen
/// both through its core (this solver) and whole (the `levenberg-marquardt` crate).
struct Dense<F: Fn(&[f64]) -> (Vec<f64>, Vec<f64>)> {
    f: F,
    m: usize,
    x: Vec<f64>,
    r: Vec<f64>,
    j: Vec<f64>,
}

impl<F: Fn(&[f64]) -> (Vec<f64>, Vec<f64>)> Dense<F> {
    fn new(f: F, x: &[f64]) -> Self {
        let (r, j) = f(x);
        Dense {
            m: r.len(),
            f,
            x: x.to_vec(),
            r,
            j,
        }
    }
}

impl<F: Fn(&[f64]) -> (Vec<f64>, Vec<f64>)> CoreProblem for Dense<F> {
    fn dim(&self) -> usize {
        self.x.len()
    }
    fn x(&self) -> &[f64] {
        &self.x
    }
    fn residual_norm(&self) -> f64 {
        norm(&self.r)
    }
    fn set_x(&mut self, x: &[f64]) {
        (self.r, self.j) = (self.f)(x);
        self.x = x.to_vec();
    }
    fn factor(&mut self, core: &mut Core) {
        factor(
            &mut self.j.clone(),
            self.m,
            self.x.len(),
            &self.r,
            core,
            true,
        );
    }
}

use nalgebra::{DMatrix, DVector, Dyn, Owned};
impl<F: Fn(&[f64]) -> (Vec<f64>, Vec<f64>)> levenberg_marquardt::LeastSquaresProblem<f64, Dyn, Dyn>
    for Dense<F>
{
    type ResidualStorage = Owned<f64, Dyn>;
    type JacobianStorage = Owned<f64, Dyn, Dyn>;
    type ParameterStorage = Owned<f64, Dyn>;
    fn set_params(&mut self, x: &DVector<f64>) {
        self.set_x(x.as_slice());
    }
    fn params(&self) -> DVector<f64> {
        DVector::from_column_slice(&self.x)
    }
    fn residuals(&self) -> Option<DVector<f64>> {
        Some(DVector::from_column_slice(&self.r))
    }
    fn jacobian(&self) -> Option<DMatrix<f64>> {
        Some(DMatrix::from_column_slice(self.m, self.x.len(), &self.j))
    }
}

/// Residuals and Jacobian of a weighted complex fit of `model` in log parameters to `data` (the
/// model at `truth` with a deterministic ±0.5 % ripple).
fn impedance_problem(
    model: &str,
    truth: &[f64],
) -> impl Fn(&[f64]) -> (Vec<f64>, Vec<f64>) + use<> {
    let c = crate::circuit::parse(model).unwrap();
    let plan = crate::eval::Plan::compile(&c);
    let omegas: Vec<f64> = crate::eval::log_frequencies(1e5, 1e-2, 8)
        .iter()
        .map(|f| crate::eval::angular(*f))
        .collect();
    let grid = crate::eval::Grid::new(&omegas);
    let data: Vec<_> = plan
        .impedances(truth, &omegas)
        .iter()
        .enumerate()
        .map(|(i, z)| z * (1.0 + 0.005 * ((i * 7 % 5) as f64 - 2.0) / 2.0))
        .collect();
    move |x: &[f64]| {
        let n = omegas.len();
        let np = x.len();
        let p: Vec<f64> = x.iter().map(|v| v.exp()).collect();
        let mut z = vec![num_complex::Complex64::new(0.0, 0.0); n];
        let mut d = vec![num_complex::Complex64::new(0.0, 0.0); n * np];
        let mut ws = plan.workspace();
        plan.eval(&p, &grid, &mut z, Some(&mut d), &mut ws);
        let mut r = vec![0.0; 2 * n];
        let mut j = vec![0.0; 2 * n * np];
        for i in 0..n {
            let w = 1.0 / data[i].norm();
            r[i] = w * (z[i].re - data[i].re);
            r[n + i] = w * (z[i].im - data[i].im);
            for k in 0..np {
                j[k * 2 * n + i] = w * p[k] * d[k * n + i].re;
                j[k * 2 * n + n + i] = w * p[k] * d[k * n + i].im;
            }
        }
        (r, j)
    }
}

/// Cross-check against an independent implementation of the same algorithm: the
/// `levenberg-marquardt` crate 0.15 (a port of MINPACK's lmder working on the whole Jacobian with
/// column pivoting), from the same starts with the same tolerances. The iterates agree up to
/// rounding, so both converge after nearly the same number of evaluations, at the same point.
#[test]
fn runs_match_the_levenberg_marquardt_crate() {
    let cases: [(&str, Vec<f64>, Vec<f64>); 3] = [
        (
            "R0 + Rct|Qdl",
            vec![2.0, 40.0, 5e-5, 0.85],
            vec![1.0, 100.0, 1e-4, 0.7],
        ),
        (
            "L0 + R0 + Rf|Qf + Rct|Qdl",
            vec![2e-7, 0.05, 0.02, 1e-2, 0.9, 0.2, 0.5, 0.85],
            vec![3e-7, 0.04, 0.03, 2e-2, 0.8, 0.15, 0.8, 0.8],
        ),
        (
            "R0 + (Rct + Wtd)|Qdl",
            vec![0.1, 1.0, 2.0, 30.0, 1e-3, 0.9],
            vec![0.2, 0.5, 1.0, 10.0, 3e-3, 0.8],
        ),
    ];
    for (model, truth, start) in cases {
        let x0: Vec<f64> = start.iter().map(|v| v.ln()).collect();
        let tol = 1e-12;
        let mut ours = Dense::new(impedance_problem(model, &truth), &x0);
        let report = Solver::default()
            .with_ftol(tol)
            .with_xtol(tol)
            .with_gtol(tol)
            .minimize(&mut ours);
        let (theirs, their_report) = levenberg_marquardt::LevenbergMarquardt::new()
            .with_ftol(tol)
            .with_xtol(tol)
            .with_gtol(tol)
            .minimize(Dense::new(impedance_problem(model, &truth), &x0));
        assert!(report.termination.was_successful(), "{model}: {report:?}");
        assert!(their_report.termination.was_successful(), "{model}");
        // Rounding differs (Gram or Householder core here, pivoted QR of the whole Jacobian there),
        // which can move the last step across the ftol test: one or two evaluations either way.
        let (a, b) = (report.evaluations, their_report.number_of_evaluations);
        assert!(a.abs_diff(b) <= 2, "{model}: {a} vs {b} evaluations");
        let (a, b) = (ours.residual_norm(), norm(&theirs.r));
        assert!((a - b).abs() <= 1e-10 * b, "{model}: ‖r‖ {a} vs {b}");
        for (p, q) in ours.x.iter().zip(&theirs.x) {
            assert!(
                (p - q).abs() <= 1e-7 * (1.0 + q.abs()),
                "{model}: {p} vs {q}"
            );
        }
    }
}

/// Rosenbrock's valley as residuals r = (10(x₂ − x₁²), 1 − x₁) (Rosenbrock 1960, The Computer
/// Journal 3, 175), whose minimum r = 0 lies at (1, 1) (derived), from the customary start (−1.2, 1),
/// where Σr² = 24.2 and the solver needs many steps along the curved valley. A third residual, zero
/// everywhere, makes the problem taller than wide, as the solver's core requires.
fn rosenbrock(x: &[f64]) -> (Vec<f64>, Vec<f64>) {
    let r = vec![10.0 * (x[1] - x[0] * x[0]), 1.0 - x[0], 0.0];
    // Column-major 3 × 2: ∂r/∂x₁, then ∂r/∂x₂.
    let j = vec![-20.0 * x[0], -1.0, 0.0, 10.0, 0.0, 0.0];
    (r, j)
}

/// A run told to give up stops as out of patience at the evaluation named while its sum of squares is
/// still above the limit; a limit it is already below changes nothing.
#[test]
fn a_run_gives_up_only_while_above_its_limit() {
    let start = [-1.2, 1.0];
    let mut p = Dense::new(rosenbrock, &start);
    let report = Solver::default().with_give_up(1e-20, 3).minimize(&mut p);
    assert_eq!(report.termination, Termination::LostPatience);
    assert_eq!(report.evaluations, 3);

    let mut free = Dense::new(rosenbrock, &start);
    let plain = Solver::default().minimize(&mut free);
    let mut loose = Dense::new(rosenbrock, &start);
    let report = Solver::default().with_give_up(1e6, 3).minimize(&mut loose);
    assert!(report.termination.was_successful(), "{report:?}");
    assert_eq!(report, plain);
    for x in &loose.x {
        assert!((x - 1.0).abs() < 1e-8, "{:?}", loose.x);
    }
}
