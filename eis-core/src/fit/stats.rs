//! Statistics of a finished fit: covariance, standard errors, correlations, information criteria and the
//! warnings a user must see.

use super::lm::Termination;
use super::problem::{Problem, Transform};
use super::{FitResult, Weighting};
use crate::circuit::Circuit;
use crate::dense::modulus;
use crate::number::format_si;
use nalgebra::DMatrix;
use num_complex::Complex64;

pub(super) struct Summary<'a> {
    pub circuit: &'a Circuit,
    pub problem: &'a Problem<'a>,
    pub prep_data: &'a [Complex64],
    pub free: &'a [usize],
    pub transforms: &'a [Transform],
    pub run_iterations: usize,
    pub evaluations: usize,
    pub tried: usize,
    pub termination: &'a Termination,
    pub weighting: Weighting,
}

/// Relative standard error above which a parameter is reported as not determined.
const UNDETERMINED: f64 = 1.0;
/// |ρ| above which two parameters are reported as strongly correlated.
const STRONG_CORRELATION: f64 = 0.98;
/// Runs-test z below which residuals are reported as systematic.
const RUNS_Z: f64 = -3.0;
/// Eigenvalue ratio (of the column-scaled JᵀJ) below which the covariance is treated as singular.
const SINGULAR: f64 = 1e-13;

/// Which side of its range a parameter ended on.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum BoundSide {
    /// The lower bound.
    Lower,
    /// The upper bound.
    Upper,
}

/// Which part of the residuals.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Part {
    /// The real part.
    Real,
    /// The imaginary part.
    Imaginary,
}

/// A warning a fit raises: typed, with its data; [`Display`](std::fmt::Display) gives the words of fit
/// documents, `results.csv` messages and the terminal.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub enum FitWarning {
    /// The winning run did not reach a minimum.
    NotConverged(Termination),
    /// A free parameter ended on one of its bounds: the optimum may lie beyond it.
    AtBound {
        /// The parameter.
        parameter: String,
        /// Which bound.
        side: BoundSide,
        /// The bound's value.
        bound: f64,
        /// The parameter's unit (`1` or empty when it has none).
        unit: String,
    },
    /// A parameter's relative standard error exceeds 100 %.
    Undetermined {
        /// The parameter.
        parameter: String,
        /// Standard error over |value|.
        relative_error: f64,
    },
    /// The covariance is singular: these parameters have no standard error.
    SingularCovariance {
        /// The parameters without a standard error (empty when the solver cannot name them).
        parameters: Vec<String>,
    },
    /// Two free parameters are strongly correlated.
    Correlated {
        /// The first parameter, in circuit order.
        a: String,
        /// The second.
        b: String,
        /// Their correlation coefficient ρ.
        rho: f64,
    },
    /// The residuals of one part follow a trend (runs test): the model misses a feature.
    SystematicResiduals {
        /// Which part.
        part: Part,
        /// The runs-test z.
        z: f64,
    },
    /// Along a chain, the arcs change order against the previous spectrum: keeping the order costs
    /// this many times the χ², so the data force the jump.
    ArcOrderJump {
        /// χ² of the best optimum keeping the neighbour's order over the chosen one's.
        chi_square_ratio: f64,
    },
    /// A joint fit of a chain: the parameter is not determined by the whole chain.
    UndeterminedInChain {
        /// The parameter.
        parameter: String,
        /// Standard error over |value|.
        relative_error: f64,
    },
    /// A joint fit of a chain: the joint covariance is singular (no standard errors).
    SingularJointCovariance,
}

impl FitWarning {
    /// Whether the warning makes a batch result suspect: a parameter on a bound or residuals that
    /// follow a trend (a fit that did not converge is judged by [`FitResult::converged`]).
    pub fn marks_suspect(&self) -> bool {
        matches!(
            self,
            FitWarning::AtBound { .. }
                | FitWarning::SystematicResiduals { .. }
                | FitWarning::ArcOrderJump { .. }
        )
    }

    /// Whether the warning is about the covariance of the parameters (undetermined, singular,
    /// correlated): a joint fit replaces these by its own.
    pub fn is_about_covariance(&self) -> bool {
        matches!(
            self,
            FitWarning::Undetermined { .. }
                | FitWarning::SingularCovariance { .. }
                | FitWarning::Correlated { .. }
                | FitWarning::UndeterminedInChain { .. }
                | FitWarning::SingularJointCovariance
        )
    }
}

impl std::fmt::Display for FitWarning {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            FitWarning::NotConverged(t) => write!(
                f,
                "the fit did not converge ({t}); treat the values with suspicion"
            ),
            FitWarning::AtBound {
                parameter,
                side,
                bound,
                unit,
            } => {
                let side = match side {
                    BoundSide::Lower => "lower",
                    BoundSide::Upper => "upper",
                };
                // The value equals the bound to round-off: print the bound once, with its unit unless
                // the parameter has none.
                let unit = match unit.as_str() {
                    "1" | "" => String::new(),
                    u => format!(" {u}"),
                };
                write!(
                    f,
                    "{parameter} sits at its {side} bound {}{unit}: the optimum may lie beyond it",
                    format_si(*bound)
                )
            }
            FitWarning::Undetermined {
                parameter,
                relative_error,
            } => write!(
                f,
                "{parameter} is not determined by these data (relative error {})",
                percent_capped(*relative_error)
            ),
            FitWarning::SingularCovariance { parameters } => write!(
                f,
                "singular covariance: {} cannot be determined from these data (no standard error)",
                if parameters.is_empty() {
                    "some parameters".to_owned()
                } else {
                    parameters.join(", ")
                }
            ),
            FitWarning::Correlated { a, b, rho } => {
                write!(f, "{a} and {b} are strongly correlated (rho = {rho:.3})")
            }
            FitWarning::SystematicResiduals { part, z } => {
                let part = match part {
                    Part::Real => "real",
                    Part::Imaginary => "imaginary",
                };
                write!(
                    f,
                    "residuals of the {part} part follow a trend (runs test z = {z:.1}): the model misses a feature of the spectrum"
                )
            }
            FitWarning::ArcOrderJump { chi_square_ratio } => write!(
                f,
                "the arcs change order against the previous spectrum of the chain: keeping the order costs {chi_square_ratio:.2} times the chi-square, so the data force the jump"
            ),
            FitWarning::UndeterminedInChain {
                parameter,
                relative_error,
            } => write!(
                f,
                "{parameter} is not determined by the chain (relative error {})",
                percent_capped(*relative_error)
            ),
            FitWarning::SingularJointCovariance => write!(
                f,
                "singular joint covariance: the chain cannot determine every parameter (no standard errors)"
            ),
        }
    }
}

/// Wald–Wolfowitz runs test on the signs of a sequence (Wald & Wolfowitz 1940, Ann. Math. Stat. 11, 147):
/// z = (R − μ)/σ with R the number of runs, μ = 2n₊n₋/n + 1 and σ² = 2n₊n₋(2n₊n₋ − n)/(n²(n − 1)).
/// Strongly negative z means too few sign changes: residuals that follow a trend. None when the test
/// has too little to work with (fewer than 10 values or all of one sign).
pub fn runs_test_z(values: &[f64]) -> Option<f64> {
    let signs: Vec<bool> = values
        .iter()
        .filter(|v| **v != 0.0)
        .map(|v| *v > 0.0)
        .collect();
    let n = signs.len() as f64;
    if signs.len() < 10 {
        return None;
    }
    let np = signs.iter().filter(|s| **s).count() as f64;
    let nm = n - np;
    if np == 0.0 || nm == 0.0 {
        return Some(f64::NEG_INFINITY);
    }
    let runs = 1.0 + signs.windows(2).filter(|w| w[0] != w[1]).count() as f64;
    let mu = 2.0 * np * nm / n + 1.0;
    let var = 2.0 * np * nm * (2.0 * np * nm - n) / (n * n * (n - 1.0));
    if var <= 0.0 {
        return None;
    }
    Some((runs - mu) / var.sqrt())
}

/// Covariance of least-squares estimates, from [`covariance`].
#[derive(Debug, Clone, PartialEq)]
pub struct Covariance {
    /// Covariance matrix (row-major, P × P), scaled by the reduced χ².
    pub matrix: Vec<f64>,
    /// Correlation matrix (row-major, P × P).
    pub correlation: Vec<f64>,
    /// Parameters lying in the numerical null space of JᵀJ (no standard error can be given).
    pub undetermined: Vec<bool>,
}

/// Covariance `s²·(JᵀJ)⁻¹` of least-squares estimates from the (weighted) Jacobian `j` of the residuals
/// at the optimum, with `s² = chi_square/dof` (Press et al., Numerical Recipes, 3rd ed. 2007, §15.5,
/// from memory). JᵀJ is formed on column-scaled J and inverted through its eigen-decomposition:
/// directions with an eigenvalue below 1e-13 of the largest are dropped and the parameters that take
/// part in them reported as undetermined. Where trace bounds prove that no direction would be
/// dropped, the same inverse is taken by Cholesky, which is cheaper.
pub fn covariance(j: &DMatrix<f64>, chi_square: f64, dof: usize) -> Covariance {
    let nf = j.ncols();
    let reduced = chi_square / dof.max(1) as f64;
    let scale: Vec<f64> = (0..nf)
        .map(|k| {
            let v = j.column(k).norm();
            if v > 0.0 { v } else { 1.0 }
        })
        .collect();
    let mut a = j.clone();
    for (k, sc) in scale.iter().enumerate() {
        a.column_mut(k).scale_mut(1.0 / sc);
    }
    let ata = a.tr_mul(&a);
    let (inv, undetermined) = match certified_inverse(&ata) {
        Some(inv) => (inv, vec![false; nf]),
        None => eigen_inverse(ata),
    };
    let mut cov = vec![0.0; nf * nf];
    for a_ in 0..nf {
        for b in 0..nf {
            cov[a_ * nf + b] = reduced * inv[(a_, b)] / (scale[a_] * scale[b]);
        }
    }
    let corr = correlation(&cov, nf);
    Covariance {
        matrix: cov,
        correlation: corr,
        undetermined,
    }
}

/// The correlation matrix (row-major, nf × nf) of a covariance matrix; 0 where a variance is zero.
pub(super) fn correlation(cov: &[f64], nf: usize) -> Vec<f64> {
    let mut corr = vec![0.0; nf * nf];
    for a in 0..nf {
        for b in 0..nf {
            let d = (cov[a * nf + a] * cov[b * nf + b]).sqrt();
            corr[a * nf + b] = if a == b {
                1.0
            } else if d > 0.0 {
                cov[a * nf + b] / d
            } else {
                0.0
            };
        }
    }
    corr
}

/// A⁻¹ by Cholesky when that is provably what [`eigen_inverse`] gives: every eigenvalue of the
/// symmetric A then lies above [`SINGULAR`] times the largest, so none is dropped. The bounds are
/// λ_max ≤ tr A and λ_min ≥ 1/tr A⁻¹ (the eigenvalues of A⁻¹ are positive and sum to its trace);
/// a factor of ten is kept in hand for rounding. None when they do not certify it (or A is not
/// positive definite).
fn certified_inverse(ata: &DMatrix<f64>) -> Option<DMatrix<f64>> {
    let inv = ata.clone().cholesky()?.inverse();
    let trace_inv = inv.trace();
    let certified =
        trace_inv.is_finite() && trace_inv > 0.0 && 1.0 / trace_inv > 10.0 * SINGULAR * ata.trace();
    certified.then_some(inv)
}

/// The pseudo-inverse of the symmetric A through its eigen-decomposition: directions with an
/// eigenvalue at or below [`SINGULAR`] times the largest are dropped, and the parameters that take
/// part in them (component above 0.1) are marked undetermined.
fn eigen_inverse(ata: DMatrix<f64>) -> (DMatrix<f64>, Vec<bool>) {
    let nf = ata.ncols();
    // Bounded: the iteration need not end on non-finite or wildly scaled entries; then nothing is
    // determined.
    let Some(eig) = ata.try_symmetric_eigen(f64::EPSILON, 10_000) else {
        return (DMatrix::zeros(nf, nf), vec![true; nf]);
    };
    let lmax = eig.eigenvalues.iter().copied().fold(0.0, f64::max);
    let mut undetermined = vec![false; nf];
    let mut inv = DMatrix::<f64>::zeros(nf, nf);
    for (e, &lambda) in eig.eigenvalues.iter().enumerate() {
        let v = eig.eigenvectors.column(e);
        if lambda <= SINGULAR * lmax || lambda <= 0.0 {
            for k in 0..nf {
                if v[k].abs() > 0.1 {
                    undetermined[k] = true;
                }
            }
            continue;
        }
        inv += (v * v.transpose()) / lambda;
    }
    (inv, undetermined)
}

/// A relative error as a percentage, `> 1000 %` above ten: a parameter collapsing towards zero can
/// have a relative error of 1e250, which printed in full is 250 digits.
fn percent_capped(rel: f64) -> String {
    if rel > 10.0 || !rel.is_finite() {
        "> 1000 %".to_owned()
    } else {
        format!("{:.0} %", 100.0 * rel)
    }
}

/// The (lowest, highest) frequency in Hz of a grid of angular frequencies; NaN when it is empty.
fn window_hz(omega: &[f64]) -> (f64, f64) {
    let to_hz = |w: f64| w / (2.0 * std::f64::consts::PI);
    let lo = omega.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = omega.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if omega.is_empty() {
        (f64::NAN, f64::NAN)
    } else {
        (to_hz(lo), to_hz(hi))
    }
}

pub(super) fn summarise(s: Summary<'_>) -> FitResult {
    let c = s.circuit;
    let p = s.problem;
    let np = c.params.len();
    let nf = s.free.len();
    let n = p.grid.len();
    let m = 2 * n;
    let chi = p.chi_square();
    let dof = m - nf;
    let reduced = chi / dof as f64;
    let mut warnings = Vec::new();

    let j = p.jacobian_in_params();
    let Covariance {
        matrix: cov,
        correlation: corr,
        undetermined,
    } = covariance(&j, chi, dof);
    let singular = undetermined.iter().any(|u| *u);

    let values = p.params.clone();
    let mut stderr = vec![None; np];
    let mut at_bound = vec![false; np];
    let fixed: Vec<bool> = c.params.iter().map(|q| q.fixed).collect();
    let x = p.params_internal();
    for (k, &i) in s.free.iter().enumerate() {
        if !undetermined[k] {
            let v = cov[k * nf + k];
            if v.is_finite() && v >= 0.0 {
                stderr[i] = Some(v.sqrt());
            }
        }
        at_bound[i] = s.transforms[k].at_bound(x[k]);
    }

    let exact = chi <= 1e-20 * m as f64;
    if !s.termination.was_successful() {
        warnings.push(FitWarning::NotConverged(*s.termination));
    }
    for (k, &i) in s.free.iter().enumerate() {
        let name = &c.params[i].name;
        if at_bound[i] {
            let (lo, hi) = c.bounds(i);
            let (side, bound) = if (values[i] - lo).abs() <= (hi - values[i]).abs() {
                (BoundSide::Lower, lo)
            } else {
                (BoundSide::Upper, hi)
            };
            warnings.push(FitWarning::AtBound {
                parameter: name.clone(),
                side,
                bound,
                unit: c.unit(i).to_owned(),
            });
        }
        if undetermined[k] {
            continue;
        }
        if let Some(se) = stderr[i] {
            let rel = se / values[i].abs();
            if rel > UNDETERMINED && !exact {
                warnings.push(FitWarning::Undetermined {
                    parameter: name.clone(),
                    relative_error: rel,
                });
            }
        }
    }
    if singular {
        let parameters: Vec<String> = s
            .free
            .iter()
            .zip(&undetermined)
            .filter(|(_, u)| **u)
            .map(|(&i, _)| c.params[i].name.clone())
            .collect();
        warnings.push(FitWarning::SingularCovariance { parameters });
    }
    if !exact {
        warnings.extend(correlated_pairs(c, s.free, &corr, &undetermined));
    }

    let model = p.model().to_vec();
    let relative: Vec<Complex64> = model
        .iter()
        .zip(s.prep_data)
        .map(|(zm, zd)| (zm - zd) / modulus(*zd))
        .collect();
    let trends = residual_trends(&relative);
    let systematic = !trends.is_empty();
    warnings.extend(trends);

    let chi_for_ic = chi.max(f64::MIN_POSITIVE * m as f64);
    let mf = m as f64;
    let aic = mf * (chi_for_ic / mf).ln() + 2.0 * nf as f64;
    let bic = mf * (chi_for_ic / mf).ln() + nf as f64 * mf.ln();

    FitResult {
        values,
        stderr,
        fixed,
        at_bound,
        free: s.free.to_vec(),
        covariance: cov,
        correlation: corr,
        chi_square: chi,
        reduced_chi_square: reduced,
        aic,
        bic,
        points: n,
        dof,
        iterations: s.run_iterations,
        evaluations: s.evaluations,
        starts_tried: s.tried,
        termination: *s.termination,
        converged: s.termination.was_successful(),
        model,
        relative_residuals: relative,
        weighting: s.weighting,
        systematic_residuals: systematic,
        warnings,
        window_hz: window_hz(p.grid.omega()),
    }
}

/// The pairs of determined free parameters (`free`, circuit indices) whose correlation in `corr`
/// (free × free) exceeds [`STRONG_CORRELATION`] in magnitude.
fn correlated_pairs(
    c: &Circuit,
    free: &[usize],
    corr: &[f64],
    undetermined: &[bool],
) -> Vec<FitWarning> {
    let nf = free.len();
    let mut warnings = Vec::new();
    for a in 0..nf {
        for b in a + 1..nf {
            let r = corr[a * nf + b];
            if r.abs() > STRONG_CORRELATION && !undetermined[a] && !undetermined[b] {
                warnings.push(FitWarning::Correlated {
                    a: c.params[free[a]].name.clone(),
                    b: c.params[free[b]].name.clone(),
                    rho: r,
                });
            }
        }
    }
    warnings
}

/// The parts of the relative residuals whose signs follow a trend (runs test below [`RUNS_Z`]);
/// none for residuals at round-off (below 1e-9), whose signs mean nothing.
fn residual_trends(relative: &[Complex64]) -> Vec<FitWarning> {
    // Never NaN: f64::max passes over NaN, and the fold starts at zero.
    let max_rel = relative.iter().map(|r| modulus(*r)).fold(0.0, f64::max);
    if max_rel <= 1e-9 {
        return Vec::new();
    }
    let re: Vec<f64> = relative.iter().map(|r| r.re).collect();
    let im: Vec<f64> = relative.iter().map(|r| r.im).collect();
    [(Part::Real, &re), (Part::Imaginary, &im)]
        .into_iter()
        .filter_map(|(part, v)| {
            runs_test_z(v)
                .filter(|&z| z < RUNS_Z)
                .map(|z| FitWarning::SystematicResiduals { part, z })
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::{SINGULAR, certified_inverse, eigen_inverse, runs_test_z};

    /// The words of each warning kind, as fit documents and `results.csv` messages carry them, and
    /// which kinds mark a batch result suspect (the wording is our own; these pin it).
    #[test]
    fn fit_warnings_keep_their_words_and_suspect_classes() {
        use super::{BoundSide, FitWarning, Part, Termination};
        let cases = [
            (
                FitWarning::NotConverged(Termination::LostPatience),
                "the fit did not converge (stopped: evaluation limit reached); treat the values with suspicion",
                false,
            ),
            (
                FitWarning::AtBound {
                    parameter: "Rct".into(),
                    side: BoundSide::Lower,
                    bound: 1e-6,
                    unit: "Ω".into(),
                },
                "Rct sits at its lower bound 1u Ω: the optimum may lie beyond it",
                true,
            ),
            (
                FitWarning::Undetermined {
                    parameter: "W.sigma".into(),
                    relative_error: 2.5,
                },
                "W.sigma is not determined by these data (relative error 250 %)",
                false,
            ),
            (
                FitWarning::SingularCovariance { parameters: vec![] },
                "singular covariance: some parameters cannot be determined from these data (no standard error)",
                false,
            ),
            (
                FitWarning::Correlated {
                    a: "R0".into(),
                    b: "Rf".into(),
                    rho: -0.9912,
                },
                "R0 and Rf are strongly correlated (rho = -0.991)",
                false,
            ),
            (
                FitWarning::SystematicResiduals {
                    part: Part::Imaginary,
                    z: -4.26,
                },
                "residuals of the imaginary part follow a trend (runs test z = -4.3): the model misses a feature of the spectrum",
                true,
            ),
        ];
        for (w, words, suspect) in cases {
            assert_eq!(w.to_string(), words);
            assert_eq!(w.marks_suspect(), suspect, "{words}");
        }
    }
    use nalgebra::DMatrix;

    /// Where the Cholesky route certifies itself it gives the eigen route's inverse; near singularity
    /// it declines, and the eigen route drops the direction and marks its parameters.
    #[test]
    fn cholesky_covariance_agrees_with_the_eigen_route_or_declines() {
        let j = DMatrix::from_fn(12, 3, |i, k| {
            ((i * 7 + k * 5) % 11) as f64 - 4.0 + 0.3 * k as f64
        });
        let ata = j.tr_mul(&j);
        let fast = certified_inverse(&ata).expect("well conditioned");
        let (slow, undetermined) = eigen_inverse(ata.clone());
        assert!(undetermined.iter().all(|u| !u));
        assert!((&fast - &slow).norm() <= 1e-12 * slow.norm());

        // Third column = first + second up to 1e-8: eigenvalue ratio about 1e-16 < SINGULAR.
        let near = DMatrix::from_fn(12, 3, |i, k| match k {
            2 => j[(i, 0)] + j[(i, 1)] + 1e-8 * (i % 3) as f64,
            _ => j[(i, k)],
        });
        let ata = near.tr_mul(&near);
        assert!(certified_inverse(&ata).is_none());
        let (_, undetermined) = eigen_inverse(ata.clone());
        assert!(undetermined.iter().all(|u| *u), "{undetermined:?}");
        let e = ata.symmetric_eigen().eigenvalues;
        assert!(e.min() <= SINGULAR * e.max());
    }

    #[test]
    fn runs_test_separates_trends_from_noise() {
        // Alternating signs: as many runs as values, z strongly positive.
        let alt: Vec<f64> = (0..20)
            .map(|i| if i % 2 == 0 { 1.0 } else { -1.0 })
            .collect();
        assert!(runs_test_z(&alt).unwrap() > 3.0);
        // Ten positive then ten negative: two runs, z strongly negative.
        let trend: Vec<f64> = (0..20).map(|i| if i < 10 { 1.0 } else { -1.0 }).collect();
        let z = runs_test_z(&trend).unwrap();
        // μ = 11, σ² = 2·100·(200 − 20)/(400·19) = 4.7368: z = (2 − 11)/2.1764 = −4.135 (hand computed).
        assert!((z + 4.135).abs() < 1e-3, "{z}");
        assert!(runs_test_z(&[1.0; 5]).is_none());
    }
}

/// The least-squares core on a certified problem: NIST StRD Misra1a, y = b₁(1 − e^(−b₂x)), 14 points,
/// start 1 (500, 1e-4). Certified values b₁ = 2.3894212918E+02 (SD 2.7070075241E+00),
/// b₂ = 5.5015643181E−04 (SD 7.2668688436E−06), RSS = 1.2455138894E−01 (NIST Statistical Reference
/// Datasets, nonlinear regression, Misra 1978; data and certified values as listed on the NIST page).
#[cfg(test)]
mod misra1a {
    use super::super::lm::{CoreProblem, Solver};
    use super::super::reduce::{Core, factor};
    use super::covariance;
    use nalgebra::DMatrix;

    const X: [f64; 14] = [
        77.6, 114.9, 141.1, 190.8, 239.9, 289.0, 332.8, 378.4, 434.8, 477.3, 536.8, 593.1, 689.1,
        760.0,
    ];
    const Y: [f64; 14] = [
        10.07, 14.73, 17.94, 23.93, 29.61, 35.18, 40.02, 44.82, 50.76, 55.05, 61.01, 66.40, 75.47,
        81.78,
    ];

    struct Misra {
        b: Vec<f64>,
        r: Vec<f64>,
    }

    impl Misra {
        fn at(b: [f64; 2]) -> Misra {
            let mut m = Misra {
                b: b.to_vec(),
                r: vec![0.0; 14],
            };
            m.set_x(&b);
            m
        }

        fn jacobian(&self) -> Vec<f64> {
            let mut j = vec![0.0; 28];
            for (i, &x) in X.iter().enumerate() {
                let e = (-self.b[1] * x).exp();
                j[i] = 1.0 - e;
                j[14 + i] = self.b[0] * x * e;
            }
            j
        }
    }

    impl CoreProblem for Misra {
        fn dim(&self) -> usize {
            2
        }
        fn x(&self) -> &[f64] {
            &self.b
        }
        fn residual_norm(&self) -> f64 {
            self.r.iter().map(|v| v * v).sum::<f64>().sqrt()
        }
        fn set_x(&mut self, b: &[f64]) {
            self.b.copy_from_slice(b);
            for (ri, (&x, y)) in self.r.iter_mut().zip(X.iter().zip(Y)) {
                *ri = b[0] * (1.0 - (-b[1] * x).exp()) - y;
            }
        }
        fn factor(&mut self, core: &mut Core) {
            factor(&mut self.jacobian(), 14, 2, &self.r, core, true);
        }
    }

    #[test]
    fn certified_values_and_standard_deviations() {
        let mut p = Misra::at([500.0, 1e-4]);
        let report = Solver::default()
            .with_ftol(1e-15)
            .with_xtol(1e-15)
            .minimize(&mut p);
        assert!(
            report.termination.was_successful(),
            "{:?}",
            report.termination
        );
        let rss = p.residual_norm().powi(2);
        assert!(
            (rss - 1.2455138894e-1).abs() < 1e-9 * 1.2455138894e-1,
            "RSS {rss}"
        );
        assert!((p.b[0] - 2.3894212918e2).abs() < 1e-8 * 2.3894212918e2);
        assert!((p.b[1] - 5.5015643181e-4).abs() < 1e-8 * 5.5015643181e-4);
        let cov = covariance(&DMatrix::from_column_slice(14, 2, &p.jacobian()), rss, 12);
        let sd = |k: usize| cov.matrix[k * 2 + k].sqrt();
        assert!(
            (sd(0) - 2.7070075241).abs() < 1e-6 * 2.7070075241,
            "SD b1 {}",
            sd(0)
        );
        assert!(
            (sd(1) - 7.2668688436e-6).abs() < 1e-6 * 7.2668688436e-6,
            "SD b2 {}",
            sd(1)
        );
    }
}
