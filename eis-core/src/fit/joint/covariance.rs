//! The joint covariance of a chain fit, (JᵀJ)⁻¹·s², by the same Schur-complement reduction as the
//! solver's step: per-spectrum blocks, their coupling to the shared parameters and the shared block,
//! and the standard errors and warnings each spectrum's result gets from it.

use super::solve::{cholesky, cholesky_solve_columns};
use super::*;
use crate::fit::FitWarning;

/// The blocks of the joint covariance, in parameters (not internal coordinates).
pub(super) struct JointCovariance {
    /// Per spectrum: C_kk (nl × nl) and C_ks (nl × ns), None where U_k is singular.
    blocks: Vec<Option<(Vec<f64>, Vec<f64>)>>,
    /// C_ss (ns × ns), None where the Schur complement is singular.
    shared: Option<Vec<f64>>,
}

impl JointCovariance {
    pub(super) fn new(
        members: &[Member],
        lay: &Layout<'_>,
        xs: &[f64],
        reduced: f64,
    ) -> JointCovariance {
        let (nl, ns) = (lay.nl(), lay.ns());
        // dp/dx of the shared parameters, and the Jacobi scaling of each block (its diagonal).
        let ps: Vec<f64> = lay
            .t_shared
            .iter()
            .zip(xs)
            .map(|(t, &x)| t.derivative(x))
            .collect();
        let mut v = vec![0.0; ns * ns];
        for m in members {
            for (a, b) in v.iter_mut().zip(&m.v) {
                *a += b;
            }
        }
        let sc_s: Vec<f64> = (0..ns).map(|a| scale_of(v[a * ns + a])).collect();
        let mut s = vec![0.0; ns * ns];
        for a in 0..ns {
            for b in 0..ns {
                s[a * ns + b] = v[a * ns + b] * sc_s[a] * sc_s[b];
            }
        }
        // Per spectrum: Ũ⁻¹ and Ũ⁻¹W̃ (scaled), and S̃ −= W̃ᵀŨ⁻¹W̃.
        let mut inv_u: Vec<Option<LocalInverse>> = Vec::new();
        let mut schur_ok = true;
        for m in members {
            let sc: Vec<f64> = (0..nl).map(|a| scale_of(m.u[a * nl + a])).collect();
            let mut l = vec![0.0; nl * nl];
            for a in 0..nl {
                for b in 0..nl {
                    l[a * nl + b] = m.u[a * nl + b] * sc[a] * sc[b];
                }
            }
            if !cholesky(&mut l, nl) || !well_conditioned(&l, nl) {
                schur_ok = false;
                inv_u.push(None);
                continue;
            }
            let mut inv = vec![0.0; nl * nl];
            for a in 0..nl {
                inv[a * nl + a] = 1.0;
            }
            let mut scratch = vec![0.0; nl];
            cholesky_solve_columns(&l, nl, &mut inv, nl, &mut scratch);
            let mut w = vec![0.0; nl * ns];
            for a in 0..nl {
                for b in 0..ns {
                    w[a * ns + b] = m.w[a * ns + b] * sc[a] * sc_s[b];
                }
            }
            // Y = Ũ⁻¹W̃.
            let mut y = vec![0.0; nl * ns];
            for a in 0..nl {
                for b in 0..ns {
                    y[a * ns + b] = (0..nl).map(|c| inv[a * nl + c] * w[c * ns + b]).sum();
                }
            }
            for a in 0..ns {
                for b in 0..ns {
                    s[a * ns + b] -= (0..nl).map(|c| w[c * ns + a] * y[c * ns + b]).sum::<f64>();
                }
            }
            inv_u.push(Some((inv, y, sc)));
        }
        let c_ss = if schur_ok && ns > 0 {
            let mut l = s.clone();
            if cholesky(&mut l, ns) && well_conditioned(&l, ns) {
                let mut inv = vec![0.0; ns * ns];
                for a in 0..ns {
                    inv[a * ns + a] = 1.0;
                }
                let mut scratch = vec![0.0; ns];
                cholesky_solve_columns(&l, ns, &mut inv, ns, &mut scratch);
                Some(inv)
            } else {
                None
            }
        } else if ns == 0 {
            Some(Vec::new())
        } else {
            None
        };
        let blocks = members
            .iter()
            .zip(&inv_u)
            .map(|(m, iu)| {
                let (inv, y, sc) = iu.as_ref()?;
                let c_ss = c_ss.as_ref()?;
                // C_ks = −Y C_ss; C_kk = Ũ⁻¹ − C_ks Yᵀ (scaled coordinates).
                let mut c_ks = vec![0.0; nl * ns];
                for a in 0..nl {
                    for b in 0..ns {
                        c_ks[a * ns + b] = -(0..ns)
                            .map(|c| y[a * ns + c] * c_ss[c * ns + b])
                            .sum::<f64>();
                    }
                }
                let mut c_kk = inv.clone();
                for a in 0..nl {
                    for b in 0..nl {
                        c_kk[a * nl + b] -= (0..ns)
                            .map(|c| c_ks[a * ns + c] * y[b * ns + c])
                            .sum::<f64>();
                    }
                }
                // Back to parameters: unscale, times dp/dx, times the reduced χ².
                let pl: Vec<f64> = lay
                    .t_local
                    .iter()
                    .zip(&m.xl)
                    .zip(sc)
                    .map(|((t, &x), &s)| t.derivative(x) * s)
                    .collect();
                let pss: Vec<f64> = ps.iter().zip(&sc_s).map(|(p, s)| p * s).collect();
                for a in 0..nl {
                    for b in 0..nl {
                        c_kk[a * nl + b] *= reduced * pl[a] * pl[b];
                    }
                    for b in 0..ns {
                        c_ks[a * ns + b] *= reduced * pl[a] * pss[b];
                    }
                }
                Some((c_kk, c_ks))
            })
            .collect();
        let shared = c_ss.map(|mut c| {
            for a in 0..ns {
                for b in 0..ns {
                    c[a * ns + b] *= reduced * ps[a] * sc_s[a] * ps[b] * sc_s[b];
                }
            }
            c
        });
        JointCovariance { blocks, shared }
    }

    /// Puts spectrum `k`'s block into its result: covariance and correlation over `free`, standard
    /// errors, and the warnings that depend on them.
    pub(super) fn apply(
        &self,
        k: usize,
        circuit: &Circuit,
        free: &[usize],
        lay: &Layout<'_>,
        r: &mut FitResult,
    ) {
        let nf = free.len();
        let (nl, ns) = (lay.nl(), lay.ns());
        // Position of each free parameter among locals (Ok) or shared (Err).
        let place = |i: usize| match lay.locals.iter().position(|&l| l == i) {
            Some(a) => Ok(a),
            None => Err(lay.shared.iter().position(|&s| s == i).unwrap_or(0)),
        };
        r.warnings.retain(|w| !w.is_about_covariance());
        let (Some((c_kk, c_ks)), Some(c_ss)) = (&self.blocks[k], &self.shared) else {
            r.covariance = vec![0.0; nf * nf];
            r.correlation = vec![0.0; nf * nf];
            for &i in free {
                r.stderr[i] = None;
            }
            r.warnings.push(FitWarning::SingularJointCovariance);
            return;
        };
        let entry = |i: usize, j: usize| match (place(i), place(j)) {
            (Ok(a), Ok(b)) => c_kk[a * nl + b],
            (Ok(a), Err(b)) | (Err(b), Ok(a)) => c_ks[a * ns + b],
            (Err(a), Err(b)) => c_ss[a * ns + b],
        };
        let mut cov = vec![0.0; nf * nf];
        for (a, &i) in free.iter().enumerate() {
            for (b, &j) in free.iter().enumerate() {
                cov[a * nf + b] = entry(i, j);
            }
        }
        let corr = stats::correlation(&cov, nf);
        for (a, &i) in free.iter().enumerate() {
            let v = cov[a * nf + a];
            r.stderr[i] = (v.is_finite() && v >= 0.0).then(|| v.sqrt());
            if let Some(se) = r.stderr[i] {
                if se > r.values[i].abs() {
                    r.warnings.push(FitWarning::UndeterminedInChain {
                        parameter: circuit.params[i].name.clone(),
                        relative_error: se / r.values[i].abs(),
                    });
                }
            }
        }
        for a in 0..nf {
            for b in a + 1..nf {
                let rho = corr[a * nf + b];
                if rho.abs() > 0.98 {
                    r.warnings.push(FitWarning::Correlated {
                        a: circuit.params[free[a]].name.clone(),
                        b: circuit.params[free[b]].name.clone(),
                        rho,
                    });
                }
            }
        }
        r.covariance = cov;
        r.correlation = corr;
    }
}

/// 1/√d for a diagonal entry d (1 where d is not positive).
fn scale_of(d: f64) -> f64 {
    if d > 0.0 && d.is_finite() {
        1.0 / d.sqrt()
    } else {
        1.0
    }
}

/// Whether a Cholesky factor of a unit-diagonal matrix is far enough from singular to invert: the
/// smallest pivot squared above 1e-13 (the threshold of a single fit's covariance).
fn well_conditioned(l: &[f64], n: usize) -> bool {
    (0..n).all(|i| l[i * n + i] * l[i * n + i] > 1e-13)
}
