//! Choosing λ (generalised cross-validation, the L-curve) and the regularised non-negative problem
//! solved at each λ.

use super::{DrtError, DrtErrorKind, DrtSetup, LambdaPoint};
use crate::nnls::{NnlsWorkspace, Termination, solve_normal};
use nalgebra::{DMatrix, DVector};

impl DrtSetup {
    fn scan_lambdas(&self) -> Vec<f64> {
        let (lo, hi) = self.options.lambda_range;
        let (l0, l1) = (lo.log10(), hi.log10());
        let k = ((l1 - l0) * self.options.scan_per_decade as f64)
            .ceil()
            .max(2.0) as usize;
        (0..=k)
            .map(|i| 10f64.powf(l0 + (l1 - l0) * i as f64 / k as f64))
            .collect()
    }

    /// The scanned λ and the point `at` gives at each.
    fn scan(
        &self,
        mut at: impl FnMut(f64) -> Result<LambdaPoint, DrtError>,
    ) -> Result<(Vec<f64>, Vec<LambdaPoint>), DrtError> {
        let lambdas = self.scan_lambdas();
        let scan = lambdas.iter().map(|&l| at(l)).collect::<Result<_, _>>()?;
        Ok((lambdas, scan))
    }

    pub(super) fn choose_gcv(
        &self,
        problem: &mut Problem,
        warnings: &mut Vec<String>,
    ) -> Result<(f64, Vec<LambdaPoint>), DrtError> {
        let (lambdas, scan) = self.scan(|l| Ok(problem.gcv(l)))?;
        let best = argmin(scan.iter().map(|p| p.gcv));
        let last = lambdas.len() - 1;
        if best == 0 || best == last {
            warnings.push(format!(
                "GCV chose λ = {:.3e} at the {} end of the searched range{}",
                lambdas[best],
                if best == 0 { "lower" } else { "upper" },
                if best == 0 {
                    " (usual for noise-free, synthetic data)"
                } else {
                    ""
                }
            ));
            return Ok((lambdas[best], scan));
        }
        // Golden-section search in log λ between the neighbours of the best scan point.
        let (mut a, mut b) = (lambdas[best - 1].log10(), lambdas[best + 1].log10());
        let g = (5f64.sqrt() - 1.0) / 2.0;
        let mut c = b - g * (b - a);
        let mut d = a + g * (b - a);
        let mut fc = problem.gcv(10f64.powf(c)).gcv;
        let mut fd = problem.gcv(10f64.powf(d)).gcv;
        for _ in 0..10 {
            if fc <= fd {
                b = d;
                d = c;
                fd = fc;
                c = b - g * (b - a);
                fc = problem.gcv(10f64.powf(c)).gcv;
            } else {
                a = c;
                c = d;
                fc = fd;
                d = a + g * (b - a);
                fd = problem.gcv(10f64.powf(d)).gcv;
            }
        }
        let (x, fx) = if fc <= fd { (c, fc) } else { (d, fd) };
        // The scan point stays the answer if the refinement found nothing better (GCV of a constrained
        // solution is only piecewise smooth).
        if fx < scan[best].gcv {
            Ok((10f64.powf(x), scan))
        } else {
            Ok((lambdas[best], scan))
        }
    }

    pub(super) fn choose_lcurve(
        &self,
        problem: &mut Problem,
        warnings: &mut Vec<String>,
    ) -> Result<(f64, Vec<LambdaPoint>), DrtError> {
        let (lambdas, scan) = self.scan(|l| Ok(problem.eval(l)?.point))?;
        let pts: Vec<(f64, f64)> = scan
            .iter()
            .map(|p| {
                (
                    p.residual_norm.max(1e-300).ln(),
                    p.penalty_norm.max(1e-300).ln(),
                )
            })
            .collect();
        // Curvature of the curve parametrised by t = ln λ (uniform steps), by central differences.
        let mut best = None;
        let mut best_k = f64::NEG_INFINITY;
        for i in 1..pts.len() - 1 {
            let (r0, e0) = pts[i - 1];
            let (r1, e1) = pts[i];
            let (r2, e2) = pts[i + 1];
            let (dr, de) = ((r2 - r0) / 2.0, (e2 - e0) / 2.0);
            let (ddr, dde) = (r2 - 2.0 * r1 + r0, e2 - 2.0 * e1 + e0);
            let denom = (dr * dr + de * de).powf(1.5);
            if denom <= 0.0 || !denom.is_finite() {
                continue;
            }
            let kappa = (dr * dde - de * ddr) / denom;
            if kappa > best_k {
                best_k = kappa;
                best = Some(i);
            }
        }
        match best {
            Some(i) => Ok((lambdas[i], scan)),
            None => {
                warnings.push("the L-curve has no corner; λ is the middle of the range".to_owned());
                Ok((lambdas[lambdas.len() / 2], scan))
            }
        }
    }
}

pub(super) fn argmin(values: impl Iterator<Item = f64>) -> usize {
    let mut best = 0;
    let mut best_v = f64::INFINITY;
    for (i, v) in values.enumerate() {
        if v < best_v {
            best_v = v;
            best = i;
        }
    }
    best
}

/// One evaluation of the regularised problem at a given λ.
pub(super) struct Eval {
    pub(super) point: LambdaPoint,
    pub(super) termination: Termination,
}

/// The per-spectrum normal equations with buffers reused across λ.
pub(super) struct Problem<'a> {
    a: &'a DMatrix<f64>,
    b: &'a DVector<f64>,
    penalty: &'a DMatrix<f64>,
    g: DMatrix<f64>,
    c: DVector<f64>,
    q: DMatrix<f64>,
    pub(super) x: DVector<f64>,
    ax: DVector<f64>,
    mx: DVector<f64>,
    ws: NnlsWorkspace,
    pub(super) warm: bool,
}

impl<'a> Problem<'a> {
    pub(super) fn new(
        a: &'a DMatrix<f64>,
        b: &'a DVector<f64>,
        penalty: &'a DMatrix<f64>,
    ) -> Problem<'a> {
        let p = a.ncols();
        let g = a.transpose() * a;
        let c = a.transpose() * b;
        Problem {
            a,
            b,
            penalty,
            q: g.clone(),
            g,
            c,
            x: DVector::zeros(p),
            ax: DVector::zeros(a.nrows()),
            mx: DVector::zeros(p),
            ws: NnlsWorkspace::new(p),
            warm: false,
        }
    }

    /// Q = AᵀA + λM into `self.q`.
    fn form(&mut self, lambda: f64) {
        self.q.copy_from(&self.g);
        for (q, p) in self.q.iter_mut().zip(self.penalty.iter()) {
            *q += lambda * p;
        }
    }

    /// The non-negative solution at `lambda`, left in `self.x`.
    pub(super) fn eval(&mut self, lambda: f64) -> Result<Eval, DrtError> {
        self.form(lambda);
        let report = solve_normal(
            &self.q,
            self.c.as_slice(),
            self.x.as_mut_slice(),
            &mut self.ws,
            self.warm,
        )
        .map_err(|_| {
            DrtError::new(DrtErrorKind::Numerical(
                "the regularised problem is not finite",
            ))
        })?;
        self.warm = true;
        self.a.mul_to(&self.x, &mut self.ax);
        let mut rss = 0.0;
        for (bi, ai) in self.b.iter().zip(self.ax.iter()) {
            rss += (bi - ai) * (bi - ai);
        }
        self.penalty.mul_to(&self.x, &mut self.mx);
        let pen = self.x.dot(&self.mx).max(0.0);
        Ok(Eval {
            point: LambdaPoint {
                lambda,
                residual_norm: rss.sqrt(),
                penalty_norm: pen.sqrt(),
                gcv: f64::NAN,
            },
            termination: report.termination,
        })
    }
}

impl Problem<'_> {
    /// GCV(λ) = n‖b − A x_λ‖² / (n − tr H_λ)² for the unconstrained regularised solution
    /// x_λ = (AᵀA + λM)⁻¹Aᵀb, H_λ = A(AᵀA + λM)⁻¹Aᵀ, so tr H_λ = tr((AᵀA + λM)⁻¹AᵀA) (Golub, Heath &
    /// Wahba 1979). The constraint is left out on purpose: with it the free set, and with it the
    /// trace, changes with λ, which makes the score jump and favoured far too small a λ on noisy data in
    /// our trials. The score is +∞ where the matrix is not positive definite. The norms reported are
    /// those of the unconstrained solution.
    pub(super) fn gcv(&mut self, lambda: f64) -> LambdaPoint {
        self.form(lambda);
        let mut point = LambdaPoint {
            lambda,
            residual_norm: f64::NAN,
            penalty_norm: f64::NAN,
            gcv: f64::INFINITY,
        };
        let Some(chol) = nalgebra::Cholesky::new(self.q.clone()) else {
            return point;
        };
        let xu = chol.solve(&self.c);
        let trace = chol.solve(&self.g).trace();
        self.a.mul_to(&xu, &mut self.ax);
        let mut rss = 0.0;
        for (bi, ai) in self.b.iter().zip(self.ax.iter()) {
            rss += (bi - ai) * (bi - ai);
        }
        self.penalty.mul_to(&xu, &mut self.mx);
        point.residual_norm = rss.sqrt();
        point.penalty_norm = xu.dot(&self.mx).max(0.0).sqrt();
        let rows = self.a.nrows() as f64;
        let dof = rows - trace;
        if dof > 0.0 && rss.is_finite() {
            point.gcv = rows * rss / (dof * dof);
        }
        point
    }
}
