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
use super::{FitError, FitResult, Weighting, prepare, start, stats};
use crate::circuit::Circuit;
use crate::eval::Plan;
use crate::spectrum::Spectrum;

mod covariance;
mod solve;
use covariance::JointCovariance;
use solve::{Layout, Member};

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

/// The parameters of a chain: the free ones, the shared ones, each spectrum's own (local), and the
/// transforms to their internal coordinates.
struct Split {
    free: Vec<usize>,
    shared: Vec<usize>,
    locals: Vec<usize>,
    t_free: Vec<Transform>,
    t_local: Vec<Transform>,
    t_shared: Vec<Transform>,
}

impl Split {
    /// Checks the inputs of [`fit_joint`] and splits the circuit's parameters.
    fn new(
        circuit: &Circuit,
        spectra: &[&Spectrum],
        shared: &[usize],
        starts: &[Vec<f64>],
    ) -> Result<Split, JointError> {
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
        Ok(Split {
            t_free: start::transforms(circuit, &free),
            t_local: start::transforms(circuit, &locals),
            t_shared: start::transforms(circuit, &shared),
            free,
            shared,
            locals,
        })
    }

    fn layout(&self) -> Layout<'_> {
        Layout {
            locals: &self.locals,
            shared: &self.shared,
            t_local: &self.t_local,
            t_shared: &self.t_shared,
        }
    }
}

/// The members of the chain at their starts (each spectrum's free parameters from its start, moved to
/// the circuit's default where outside the bounds), the shared starting coordinates (the median over
/// the chain) and the number of residuals.
fn set_up(
    circuit: &Circuit,
    plan: &Plan,
    spectra: &[&Spectrum],
    starts: &[Vec<f64>],
    split: &Split,
    weighting: Weighting,
) -> Result<(Vec<Member>, Vec<f64>, usize), JointError> {
    let (nl, ns) = (split.locals.len(), split.shared.len());
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
    let xs0: Vec<f64> = split
        .shared
        .iter()
        .zip(&split.t_shared)
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
        let prep = prepare(spectrum, weighting).map_err(|error| JointError::Spectrum {
            index: k + 1,
            error,
        })?;
        let n = prep.grid.len();
        residuals += 2 * n;
        let mut params = base.clone();
        for &i in &split.free {
            params[i] = inside(i, s[i]);
        }
        let xl: Vec<f64> = split
            .locals
            .iter()
            .zip(&split.t_local)
            .map(|(&i, t)| t.to_internal(params[i]))
            .collect();
        members.push(Member::new(plan, prep, params, xl, (nl, ns)));
    }
    Ok((members, xs0, residuals))
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
    let split = Split::new(circuit, spectra, shared, starts)?;
    let lay = split.layout();
    let plan = Plan::compile(circuit);
    let (mut members, xs0, residuals) =
        set_up(circuit, &plan, spectra, starts, &split, settings.weighting)?;
    let unknowns = lay.nl() * spectra.len() + lay.ns();
    if residuals <= unknowns {
        return Err(JointError::TooFewPoints {
            residuals,
            unknowns,
        });
    }
    let run = solve::iterate(&plan, &mut members, &lay, xs0, settings)?;
    Ok(assemble(
        circuit,
        &plan,
        &members,
        &split,
        run,
        residuals - unknowns,
        settings.weighting,
    ))
}

/// The result of a finished descent with `dof` degrees of freedom: each spectrum's summary with its
/// block of the joint covariance, and the chain's totals.
fn assemble(
    circuit: &Circuit,
    plan: &Plan,
    members: &[Member],
    split: &Split,
    run: solve::Run,
    dof: usize,
    weighting: Weighting,
) -> JointResult {
    let lay = split.layout();
    let (free, t_free) = (&split.free, &split.t_free);
    let reduced = run.chi / dof as f64;
    let cov = JointCovariance::new(members, &lay, &run.xs, reduced);

    let mut fits = Vec::with_capacity(members.len());
    for (k, m) in members.iter().enumerate() {
        let problem = Problem::new(
            plan,
            &m.prep.grid,
            &m.prep.data,
            &m.prep.w_rows,
            Point::Params(m.cur.params.clone()),
            free,
            t_free,
        );
        let mut r = stats::summarise(stats::Summary {
            circuit,
            problem: &problem,
            prep_data: &m.prep.data,
            free,
            transforms: t_free,
            run_iterations: run.iterations,
            evaluations: run.iterations,
            tried: 1,
            termination: &run.termination,
            weighting,
        });
        cov.apply(k, circuit, free, &lay, &mut r);
        fits.push(r);
    }
    JointResult {
        fits,
        shared: split.shared.clone(),
        chi_square: run.chi,
        dof,
        reduced_chi_square: reduced,
        iterations: run.iterations,
        termination: run.termination,
    }
}

/// Of one spectrum's local block in scaled coordinates: Ũ⁻¹, Ũ⁻¹W̃ and the scaling.
type LocalInverse = (Vec<f64>, Vec<f64>, Vec<f64>);

#[cfg(test)]
mod tests {
    use super::*;
    use crate::circuit::parse;
    use crate::eval::log_frequencies;
    use crate::simulate::simulate;

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
