//! Weighted complex nonlinear least squares (CNLS) fitting of a circuit to a spectrum.
//!
//! # Method
//!
//! - Residuals: `w ∘ (Z_model − Z_data)`, the real and the imaginary part of each point (2N
//!   residuals). The weights are computed from the **data** (see [`Weighting`]); χ² is the sum of
//!   squared weighted residuals.
//! - Levenberg–Marquardt (Moré's trust-region algorithm of MINPACK's `lmder`; Moré 1978, Springer LNM
//!   630, 105), run on the square core of the problem (R with RᵀR = JᵀJ), on internal coordinates
//!   that keep every bound: log for positive quantities, a logistic map for bounded ones. The Jacobian
//!   comes from the compiled plan through the chain rule of the transforms. A trial step that evaluates
//!   to non-finite numbers is rejected (large residuals), never fatal.
//! - Starting values: see [`start`](self) — a time-constant grid with resistances by non-negative least
//!   squares for circuits of the usual battery blocks, the best distinct grid points as starts (each
//!   run briefly, the most promising carried on to convergence), then moves that swap arcs or shift
//!   one elsewhere; a deterministic spread of starts otherwise. A warm start (a previous result) is
//!   tried first when given.
//! - Uncertainties: covariance `s²·(JᵀJ)⁻¹` with J the weighted Jacobian with respect to the parameters
//!   at the optimum and `s² = χ²/(2N − P)` the reduced χ² (the covariance is always scaled by the
//!   reduced χ², whatever the weighting). Standard errors are the square roots of its diagonal.
//! - Model comparison: AIC = n·ln(χ²/n) + 2P and BIC = n·ln(χ²/n) + P·ln n with n = 2N residuals and P
//!   free parameters (Akaike 1974; Schwarz 1978).
//!
//! ```
//! use eis_core::{circuit::parse, fit::{fit, FitSettings}, simulate::simulate, eval::{Plan, log_frequencies}};
//! let c = parse("R0 + Rct|Qdl").unwrap();
//! let truth = [2.0, 40.0, 5e-5, 0.85];
//! let data = simulate(&Plan::compile(&c), &truth, &log_frequencies(1e5, 1e-2, 10), None);
//! let r = fit(&c, &data, &FitSettings::default(), None).unwrap();
//! assert!(r.converged);
//! for (got, want) in r.values.iter().zip(truth) {
//!     assert!((got - want).abs() < 1e-6 * want);
//! }
//! ```

pub mod chain;
pub mod joint;
mod lm;
mod problem;
mod reduce;
pub(crate) mod start;
mod stats;

use crate::circuit::Circuit;
use crate::dense::modulus;
use crate::eval::{Grid, Plan};
use crate::spectrum::{PointRef, Spectrum};
use lm::Solver;
pub use lm::Termination;
use num_complex::Complex64;
use problem::{Point, Problem, Transform};
pub use stats::{BoundSide, FitWarning, Part};

/// How residuals are weighted. Weights are computed from the data values.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Weighting {
    /// w′ = w″ = 1/|Z| (Boukamp 1986, Solid State Ionics 20, 31). The default.
    #[default]
    Modulus,
    /// w′ = 1/|Z′|, w″ = 1/|Z″| (Macdonald & Garber 1977, J. Electrochem. Soc. 124, 1022). Each is
    /// floored at 10⁻³·|Z| so that points where a part crosses zero do not get infinite weight.
    Proportional,
    /// w = 1.
    Unit,
    /// w = 1/σ from the spectrum's per-point standard deviations.
    Sigma,
}

impl Weighting {
    /// The word used on the command line and in outputs.
    pub fn as_str(self) -> &'static str {
        match self {
            Weighting::Modulus => "modulus",
            Weighting::Proportional => "proportional",
            Weighting::Unit => "unit",
            Weighting::Sigma => "sigma",
        }
    }
}

/// Settings of a fit. Build with [`FitSettings::default`] and the `with_*` setters.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FitSettings {
    /// Residual weighting. Default: [`Weighting::Modulus`].
    pub weighting: Weighting,
    /// Number of grid starting points tried. Default 24 (each gets a brief run; 16 missed the optimum
    /// of one spectrum in 500 of the held-out benchmark of `bench/heldout.py`).
    pub starts: usize,
    /// Relative tolerance on χ² and on the step (ftol, xtol, gtol of the solver) for each start.
    /// Default 1e-10.
    pub tolerance: f64,
    /// Solver patience: at most `patience·(P + 1)` evaluations per start. Default 100.
    pub patience: usize,
    /// Try moving each arc to other time constants after the best start. Default true.
    pub arc_moves: bool,
    /// Reduced χ² of the fit the warm start came from (the neighbouring spectrum of the same cell). A
    /// warm-started run whose reduced χ² exceeds 1.5 times this value (about three standard deviations
    /// of χ² for 80 degrees of freedom) is taken to have fallen into another
    /// basin, and the automatic starts are tried as well. Default none.
    pub warm_reference: Option<f64>,
    /// Also start from the peaks of a DRT of the data when the caller supplies one (see
    /// [`fit_seeded`]). Default true.
    pub drt_starts: bool,
}

impl Default for FitSettings {
    fn default() -> Self {
        FitSettings {
            weighting: Weighting::Modulus,
            starts: 24,
            tolerance: 1e-10,
            patience: 100,
            arc_moves: true,
            warm_reference: None,
            drt_starts: true,
        }
    }
}

impl FitSettings {
    /// Sets the weighting.
    pub fn with_weighting(mut self, w: Weighting) -> Self {
        self.weighting = w;
        self
    }
    /// Sets the number of grid starts (at least 1).
    pub fn with_starts(mut self, n: usize) -> Self {
        self.starts = n.max(1);
        self
    }
    /// Sets the solver tolerance.
    pub fn with_tolerance(mut self, t: f64) -> Self {
        self.tolerance = t;
        self
    }
    /// Sets the solver patience.
    pub fn with_patience(mut self, p: usize) -> Self {
        self.patience = p.max(1);
        self
    }
    /// Sets the reduced χ² of the fit a warm start comes from.
    pub fn with_warm_reference(mut self, reduced_chi_square: Option<f64>) -> Self {
        self.warm_reference = reduced_chi_square;
        self
    }
    /// Enables or disables the arc moves.
    pub fn with_arc_moves(mut self, on: bool) -> Self {
        self.arc_moves = on;
        self
    }
    /// Enables or disables the starts built from DRT peaks.
    pub fn with_drt_starts(mut self, on: bool) -> Self {
        self.drt_starts = on;
        self
    }
}

/// Number of starts built from DRT peaks (the best peak-to-slot assignments).
const DRT_STARTS: usize = 3;

/// Why a fit could not be attempted.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum FitError {
    /// The spectrum holds no points.
    #[error("the spectrum is empty")]
    Empty,
    /// Frequencies and impedances differ in number.
    #[error("the spectrum has {frequencies} frequencies but {impedances} impedances")]
    LengthMismatch {
        /// Number of frequencies.
        frequencies: usize,
        /// Number of impedances.
        impedances: usize,
    },
    /// A frequency or impedance is NaN, infinite, or a frequency is not positive.
    #[error("{point} at {frequency} Hz is not a finite value with positive frequency")]
    BadPoint {
        /// The point, numbered from 1, with its source line when known.
        point: PointRef,
        /// Its frequency.
        frequency: f64,
    },
    /// Fewer residuals than free parameters plus one.
    #[error(
        "{points} points give {residuals} residuals, too few for {free} free parameters (need more than {free})"
    )]
    TooFewPoints {
        /// Points in the spectrum.
        points: usize,
        /// 2 × points.
        residuals: usize,
        /// Free parameters.
        free: usize,
    },
    /// Every parameter is fixed.
    #[error("every parameter is fixed; nothing to fit")]
    NothingFree,
    /// An impedance outside [`MODULUS_RANGE`]: the analytic derivatives of the elements (1/(ωC²) and
    /// the like) would overflow or underflow, and the fit would stop short without saying so.
    #[error(
        "{point} at {frequency} Hz has |Z| = {modulus:e} Ohm, outside the range the fit handles (1e-100 to 1e100 Ohm); express the data in other units"
    )]
    ModulusOutOfRange {
        /// The point, numbered from 1, with its source line when known.
        point: PointRef,
        /// Its frequency.
        frequency: f64,
        /// |Z| of the point, Ω.
        modulus: f64,
    },
    /// A frequency outside [`FREQUENCY_RANGE`].
    #[error(
        "{point} has the frequency {frequency:e} Hz, outside the range the fit handles (1e-30 to 1e30 Hz)"
    )]
    FrequencyOutOfRange {
        /// The point, numbered from 1, with its source line when known.
        point: PointRef,
        /// Its frequency, Hz.
        frequency: f64,
    },
    /// A starting value lies outside its bounds.
    #[error("starting value {value} of `{name}` lies outside its bounds {lower}..{upper}")]
    StartOutsideBounds {
        /// Parameter name.
        name: String,
        /// The value.
        value: f64,
        /// Lower bound.
        lower: f64,
        /// Upper bound.
        upper: f64,
    },
    /// σ weighting without usable σ values.
    #[error("sigma weighting needs a positive standard deviation at every point")]
    MissingSigma,
    /// No start gave a finite χ²: the model cannot be evaluated on these data (impedances or
    /// frequencies near the ends of the floating-point range, or points the weights cannot scale).
    #[error(
        "no start gives a finite chi-square on these data: check for extreme impedances or frequencies"
    )]
    NoFiniteStart,
    /// A warm start of the wrong length.
    #[error("the warm start has {got} values but the circuit has {want} parameters")]
    WarmStartLength {
        /// Values given.
        got: usize,
        /// Parameters of the circuit.
        want: usize,
    },
}

/// The outcome of a fit: parameters with uncertainties, statistics and warnings. "Did not converge" is
/// reported here (`converged == false`, a warning), not as an error.
#[derive(Debug, Clone, PartialEq)]
pub struct FitResult {
    /// Values of every parameter, in circuit order (fixed ones at their fixed value).
    pub values: Vec<f64>,
    /// Standard errors (None for fixed parameters and for those the data cannot determine).
    pub stderr: Vec<Option<f64>>,
    /// Whether each parameter was fixed.
    pub fixed: Vec<bool>,
    /// Whether each free parameter ended on (or practically on) one of its bounds.
    pub at_bound: Vec<bool>,
    /// Indices of the free parameters; `correlation` and `covariance` are over these.
    pub free: Vec<usize>,
    /// Covariance matrix of the free parameters (row-major, free × free), scaled by the reduced χ².
    pub covariance: Vec<f64>,
    /// Correlation matrix of the free parameters (row-major, free × free).
    pub correlation: Vec<f64>,
    /// Sum of squared weighted residuals.
    pub chi_square: f64,
    /// χ²/(2N − P).
    pub reduced_chi_square: f64,
    /// Akaike information criterion, n·ln(χ²/n) + 2P with n = 2N.
    pub aic: f64,
    /// Bayesian information criterion, n·ln(χ²/n) + P·ln n.
    pub bic: f64,
    /// Number of points N.
    pub points: usize,
    /// Degrees of freedom 2N − P.
    pub dof: usize,
    /// Solver iterations (Jacobian evaluations) of the winning run, summed with its polish.
    pub iterations: usize,
    /// Residual evaluations over every start tried.
    pub evaluations: usize,
    /// Number of starting points tried.
    pub starts_tried: usize,
    /// Why the winning run stopped.
    pub termination: Termination,
    /// Whether the winning run met a convergence criterion.
    pub converged: bool,
    /// The model at each data point.
    pub model: Vec<Complex64>,
    /// Residuals relative to |Z_data|: (Z_model − Z_data)/|Z_data|.
    pub relative_residuals: Vec<Complex64>,
    /// Weighting used.
    pub weighting: Weighting,
    /// Whether a runs test found a trend in the residuals (the model misses a feature).
    pub systematic_residuals: bool,
    /// Warnings, typed; their `Display` gives the words.
    pub warnings: Vec<FitWarning>,
    /// The measured frequency window (lowest, highest) in Hz: what the data can tell about a process
    /// depends on where its characteristic frequency lies against it.
    pub window_hz: (f64, f64),
}

impl FitResult {
    /// The value of parameter `name` in `circuit`.
    pub fn value(&self, circuit: &Circuit, name: &str) -> Option<f64> {
        circuit.param_index(name).map(|i| self.values[i])
    }

    /// Relative standard error of parameter `i` (None where the SE is unknown).
    pub fn relative_error(&self, i: usize) -> Option<f64> {
        self.stderr[i].map(|s| s / self.values[i].abs())
    }

    /// Covariance between parameters `i` and `j` (circuit indices); 0 if either is fixed.
    pub fn covariance_of(&self, i: usize, j: usize) -> f64 {
        let (Some(a), Some(b)) = (
            self.free.iter().position(|&k| k == i),
            self.free.iter().position(|&k| k == j),
        ) else {
            return 0.0;
        };
        self.covariance[a * self.free.len() + b]
    }
}

/// Prepared data of one fit: angular frequencies, data and weights.
struct Prepared {
    omegas: Vec<f64>,
    grid: Grid,
    data: Vec<Complex64>,
    w_re: Vec<f64>,
    w_im: Vec<f64>,
    /// The same weights in the order of the solver's residuals: `w_re[i]`, `w_im[i]` side by side.
    w_rows: Vec<f64>,
    /// Point indices in increasing frequency, for tests that look at neighbouring residuals.
    by_frequency: Vec<usize>,
}

/// Moduli of the impedances the fit accepts, Ω. Within it a spectrum scaled by any factor is fitted
/// to the same relative parameters (tested from 1e-100 to 1e100); beyond it products such as ωC² in
/// the elements' derivatives leave the range of f64 and the fit would stop short, so such data are
/// an error ([`FitError::ModulusOutOfRange`]) rather than a quietly wrong result.
pub const MODULUS_RANGE: std::ops::RangeInclusive<f64> = 1e-100..=1e100;

/// Frequencies the fit accepts, Hz: far beyond any measurement (common practice puts impedance
/// spectra between about 1 µHz and 10 GHz), and narrow enough that time constants and products such
/// as ωτ stay well inside the range of f64. Spectra spanning hundreds of decades made the automatic
/// starts take tens of seconds before they were refused ([`FitError::FrequencyOutOfRange`]).
pub const FREQUENCY_RANGE: std::ops::RangeInclusive<f64> = 1e-30..=1e30;

fn prepare(spectrum: &Spectrum, weighting: Weighting) -> Result<Prepared, FitError> {
    let n = spectrum.frequency_hz.len();
    if n == 0 {
        return Err(FitError::Empty);
    }
    if spectrum.z.len() != n {
        return Err(FitError::LengthMismatch {
            frequencies: n,
            impedances: spectrum.z.len(),
        });
    }
    for (i, (&f, z)) in spectrum.frequency_hz.iter().zip(&spectrum.z).enumerate() {
        if !(f.is_finite() && f > 0.0 && z.re.is_finite() && z.im.is_finite()) || modulus(*z) == 0.0
        {
            return Err(FitError::BadPoint {
                point: spectrum.point_ref(i),
                frequency: f,
            });
        }
    }
    if let Some(i) = spectrum
        .frequency_hz
        .iter()
        .position(|f| !FREQUENCY_RANGE.contains(f))
    {
        return Err(FitError::FrequencyOutOfRange {
            point: spectrum.point_ref(i),
            frequency: spectrum.frequency_hz[i],
        });
    }
    if let Some(i) = spectrum
        .z
        .iter()
        .position(|z| !MODULUS_RANGE.contains(&modulus(*z)))
    {
        return Err(FitError::ModulusOutOfRange {
            point: spectrum.point_ref(i),
            frequency: spectrum.frequency_hz[i],
            modulus: modulus(spectrum.z[i]),
        });
    }
    let (w_re, w_im): (Vec<f64>, Vec<f64>) = match weighting {
        Weighting::Modulus => spectrum
            .z
            .iter()
            .map(|z| {
                let w = 1.0 / modulus(*z);
                (w, w)
            })
            .unzip(),
        Weighting::Proportional => spectrum
            .z
            .iter()
            .map(|z| {
                let floor = 1e-3 * modulus(*z);
                (1.0 / z.re.abs().max(floor), 1.0 / z.im.abs().max(floor))
            })
            .unzip(),
        Weighting::Unit => (vec![1.0; n], vec![1.0; n]),
        Weighting::Sigma => {
            let s = spectrum.sigma.as_ref().ok_or(FitError::MissingSigma)?;
            if s.len() != n || s.iter().any(|&v| !(v.is_finite() && v > 0.0)) {
                return Err(FitError::MissingSigma);
            }
            s.iter().map(|&v| (1.0 / v, 1.0 / v)).unzip()
        }
    };
    let omegas = spectrum.omegas();
    // 2πf overflows for f near f64::MAX.
    if let Some(i) = omegas.iter().position(|w| !w.is_finite()) {
        return Err(FitError::BadPoint {
            point: spectrum.point_ref(i),
            frequency: spectrum.frequency_hz[i],
        });
    }
    let mut by_frequency: Vec<usize> = (0..n).collect();
    by_frequency.sort_by(|&a, &b| omegas[a].total_cmp(&omegas[b]));
    Ok(Prepared {
        by_frequency,
        grid: Grid::new(&omegas),
        omegas,
        data: spectrum.z.clone(),
        w_rows: w_re.iter().zip(&w_im).flat_map(|(&a, &b)| [a, b]).collect(),
        w_re,
        w_im,
    })
}

/// Tolerance of the final polish of the winner, so that noise-free data are met to round-off.
const POLISH_TOLERANCE: f64 = 1e-15;

/// Tolerance of the runs of the full search, which only rank basins before the winner is polished.
/// Measured on the held-out benchmark (three seeds): 1e-4 instead of 1e-6 saves 8 % of the model
/// evaluations and reaches the same optima; runs that end in one basin then agree in χ² to about
/// [`start::AGREE`].
const SCREEN_TOLERANCE: f64 = 1e-4;

/// Budget of the brief run from every grid start, in units of P + 1 evaluations. Runs that reach the
/// global optimum mostly converge within it (about 2(P + 1) evaluations on the held-out benchmark of
/// `bench/heldout.py`), while runs bound for other basins wander for several times as long; their χ²
/// after it ranks the starts far better than the surrogate's.
const BRIEF_PATIENCE: usize = 2;

/// How far above the best χ² so far a brief run from a grid start may still be after P + 1
/// evaluations before it is given up. Not for the arc moves, which start far from any optimum by design
/// and still reach the best one (on the held-out benchmark, one spectrum's optimum was reached only
/// from a move whose χ² was far above the best at that point).
const GIVE_UP: f64 = 10.0;

/// Brief runs carried on to convergence, lowest χ² first.
const CARRIED_ON: usize = 3;

/// Budget of the brief run from every arc move, in units of P + 1 evaluations.
const MOVE_PATIENCE: usize = 2;

/// Runs that reached the best χ² from different starts, from which on the arc moves are skipped. Two
/// or three agreeing runs were not enough: on the held-out benchmark three or four grid starts
/// sometimes agreed on a basin 1.6 to 4 times above the optimum that only an arc move left.
const AGREEING: usize = 5;

/// Relative χ² improvement over a warm-started run below which the second try is taken to confirm it.
const CONFIRM: f64 = 1e-6;

/// How far above the reference reduced χ² a confirmed warm run may lie and still be taken without the
/// full search. Measured on the demo campaign: warm runs confirmed by the second try were the global
/// optimum up to 2× the chain's median, and runs 3× to 10× above it were local minima.
const CONFIRM_RATIO: f64 = 2.5;

/// Von Neumann ratio below which residuals do not look like noise. The ratio of the mean squared
/// successive difference to the mean square, η = Σ(r_{k+1} − r_k)² / Σ r_k² over the real and the
/// imaginary residuals in frequency order, is about 2 for independent noise (its standard deviation
/// about 2/√m for m residuals) and far below 1 where a model misses a feature, whose residuals are
/// smooth in frequency (von Neumann, 1941, Annals of Mathematical Statistics 12, 367).
const NOISE_LIKE: f64 = 1.5;

/// The von Neumann ratio of interleaved residuals (`r[2i]` real, `r[2i + 1]` imaginary part of point
/// `i`), taken along `order` for each part; 0 for fewer than two points or zero residuals.
fn von_neumann_ratio(r: &[f64], order: &[usize]) -> f64 {
    let (mut diff, mut sum) = (0.0, 0.0);
    for part in 0..2 {
        let mut prev: Option<f64> = None;
        for &i in order {
            let v = r[2 * i + part];
            sum += v * v;
            if let Some(p) = prev {
                diff += (v - p) * (v - p);
            }
            prev = Some(v);
        }
    }
    if sum > 0.0 && diff.is_finite() {
        diff / sum
    } else {
        0.0
    }
}

/// One Levenberg–Marquardt run from `start`.
struct Run {
    params: Vec<f64>,
    chi_square: f64,
    iterations: usize,
    evaluations: usize,
    termination: Termination,
    /// The problem's state at `params` when the run ended there (not after `params` were reordered).
    point: Option<problem::Evaluated>,
    /// Whether its residuals look like noise ([`NOISE_LIKE`]).
    white: bool,
    /// Whether the data determine every free parameter (a basin in which an element shrank out of
    /// the model can fit almost as well as the optimum, with noise-like residuals); judged only for a
    /// white run that becomes the best of a search (see [`Run::noise_like`]), None before.
    determined: Option<bool>,
}

impl Run {
    /// Whether its residuals look like noise and the data determine every free parameter, as far as
    /// judged: false until [`start::Search::consider`] has judged a white run.
    fn noise_like(&self) -> bool {
        self.white && self.determined == Some(true)
    }
}

/// What the local runs of one fit share: the compiled circuit, the prepared data, the free
/// parameters and their internal transforms.
struct Local<'a> {
    plan: &'a Plan,
    prep: &'a Prepared,
    free: &'a [usize],
    transforms: &'a [Transform],
}

impl Local<'_> {
    /// A run from `start` to `tolerance` (on the reduction, the step and the cosine) within
    /// `patience`·(P + 1) evaluations.
    fn run(&self, start: &[f64], tolerance: f64, patience: usize) -> Run {
        self.run_with(
            start,
            Solver::default()
                .with_tolerance(tolerance)
                .with_patience(patience),
        )
    }

    /// A Levenberg–Marquardt run from `start` with `solver`.
    fn run_with(&self, start: &[f64], solver: Solver) -> Run {
        let Local {
            plan,
            prep,
            free,
            transforms,
        } = *self;
        let mut problem = Problem::new(
            plan,
            &prep.grid,
            &prep.data,
            &prep.w_rows,
            Point::Params(start.to_vec()),
            free,
            transforms,
        );
        let report = solver.minimize(&mut problem);
        let chi = if problem.is_finite() {
            problem.chi_square()
        } else {
            f64::INFINITY
        };
        Run {
            white: von_neumann_ratio(problem.residuals(), &prep.by_frequency) >= NOISE_LIKE,
            determined: None,
            chi_square: chi,
            iterations: problem.jacobian_calls.get().max(1),
            evaluations: report.evaluations,
            params: problem.params.clone(),
            termination: report.termination,
            point: Some(problem.into_evaluated()),
        }
    }
}

/// Fits `circuit` to `spectrum`; the same as [`fit_seeded`] without a DRT (so without DRT starts).
///
/// # Errors
///
/// As [`fit_seeded`].
pub fn fit(
    circuit: &Circuit,
    spectrum: &Spectrum,
    settings: &FitSettings,
    warm: Option<&[f64]>,
) -> Result<FitResult, FitError> {
    fit_seeded(circuit, spectrum, settings, warm, None)
}

/// Fits `circuit` to `spectrum`, with `seed` as the DRT of the same spectrum when the caller has one
/// (model selection computes it once for every candidate circuit).
///
/// Starting points: `warm` (a previous result's values, e.g. the neighbouring spectrum of the same cell)
/// is tried first; if that run converges with no parameter on a bound and no trend in its residuals it is
/// taken as it is (correlations and poorly determined parameters belong to the model and data, not to
/// the start, so they do not count against it). Otherwise the
/// circuit's own initial values (when every free parameter has one) and the automatic starts are tried
/// as well, and the lowest χ² wins.
///
/// The automatic starts of a circuit of recognised blocks: the best distinct points of the
/// time-constant grid are each given a brief run, best first; runs that converge within it are done,
/// and the three lowest of the others are carried on to convergence. The grid stops early once the
/// search is settled: three runs and every run so far ended at the same χ², with residuals that look
/// like noise and every parameter determined. Then the best run's arcs are swapped pairwise and,
/// unless five runs agree on the best χ² or three agree on such an optimum, moved along τ (again brief
/// runs, the best carried on). The winner is polished with tight tolerances.
///
/// With [`FitSettings::drt_starts`] on and a `seed`, a circuit of recognised blocks also gets starts
/// built from the peaks of that DRT: peaks are assigned to arcs and diffusion elements in τ order, with
/// resistances from the peak areas and R₀ from R∞. Without a seed no DRT is computed: on the held-out
/// benchmark of `bench/heldout.py` computing one cost more than ten times the rest of the search and
/// changed no outcome once the grid's surrogate shunts diffusion inside its arc.
///
/// # Errors
///
/// [`FitError`] for input that cannot be fitted at all: an empty spectrum, non-finite values, fewer
/// residuals than free parameters, nothing free, a start outside the bounds, σ weighting without σ.
pub fn fit_seeded(
    circuit: &Circuit,
    spectrum: &Spectrum,
    settings: &FitSettings,
    warm: Option<&[f64]>,
    seed: Option<&crate::drt::DrtResult>,
) -> Result<FitResult, FitError> {
    finite(fit_impl(circuit, spectrum, settings, warm, seed, false)?)
}

/// A fit whose χ² is not finite is no result: every number in it would be meaningless.
fn finite(r: FitResult) -> Result<FitResult, FitError> {
    if r.chi_square.is_finite() {
        Ok(r)
    } else {
        Err(FitError::NoFiniteStart)
    }
}

/// Fits `circuit` to `spectrum` by one Levenberg–Marquardt run from `start` (values of every parameter,
/// circuit order; fixed parameters keep their circuit values, and a free value outside its bounds is
/// replaced by the circuit's default). No automatic starts, no arc moves and no polish are tried,
/// whatever the outcome: this is the single local fit, for comparing solvers from the same start and for
/// callers that supply their own start strategy. Prefer [`fit`] otherwise.
///
/// # Errors
///
/// As [`fit`], and [`FitError::WarmStartLength`] if `start` does not hold one value per parameter.
pub fn fit_from(
    circuit: &Circuit,
    spectrum: &Spectrum,
    settings: &FitSettings,
    start: &[f64],
) -> Result<FitResult, FitError> {
    finite(fit_impl(
        circuit,
        spectrum,
        settings,
        Some(start),
        None,
        true,
    )?)
}

/// What a fit's runs and start search need of the circuit besides the prepared data: its defaults,
/// fixed flags, free parameters and their internal transforms.
struct Setup {
    /// The circuit's initial or default values.
    base: Vec<f64>,
    /// Which parameters are held fixed.
    fixed: Vec<bool>,
    /// Indices of the free parameters.
    free: Vec<usize>,
    /// Internal transform of each free parameter.
    transforms: Vec<Transform>,
}

impl Setup {
    /// The defaults, fixed flags, free parameters and their transforms of `circuit`.
    fn new(circuit: &Circuit) -> Setup {
        let fixed: Vec<bool> = circuit.params.iter().map(|p| p.fixed).collect();
        let free: Vec<usize> = (0..fixed.len()).filter(|&i| !fixed[i]).collect();
        Setup {
            base: circuit.default_values(),
            transforms: start::transforms(circuit, &free),
            fixed,
            free,
        }
    }

    /// What the local runs on the data `prep` share, with the compiled circuit `plan`.
    fn local<'a>(&'a self, plan: &'a Plan, prep: &'a Prepared) -> Local<'a> {
        Local {
            plan,
            prep,
            free: &self.free,
            transforms: &self.transforms,
        }
    }

    /// The start search's view of `circuit` on the data `prep`.
    fn context<'a>(&'a self, circuit: &'a Circuit, prep: &'a Prepared) -> start::Context<'a> {
        start::Context {
            circuit,
            omegas: &prep.omegas,
            grid: &prep.grid,
            data: &prep.data,
            w_re: &prep.w_re,
            w_im: &prep.w_im,
            base: &self.base,
            fixed: &self.fixed,
        }
    }
}

/// [`fit`], or with `single` the warm-start run alone ([`fit_from`]).
fn fit_impl(
    circuit: &Circuit,
    spectrum: &Spectrum,
    settings: &FitSettings,
    warm: Option<&[f64]>,
    seed: Option<&crate::drt::DrtResult>,
    single: bool,
) -> Result<FitResult, FitError> {
    let prep = prepare(spectrum, settings.weighting)?;
    let plan = Plan::compile(circuit);
    let np = circuit.params.len();
    let setup = Setup::new(circuit);
    let free = &setup.free;
    if free.is_empty() {
        return Err(FitError::NothingFree);
    }
    let n = prep.omegas.len();
    if 2 * n <= free.len() {
        return Err(FitError::TooFewPoints {
            points: n,
            residuals: 2 * n,
            free: free.len(),
        });
    }
    let base = &setup.base;
    for (i, &v) in base.iter().enumerate() {
        let (lo, hi) = circuit.bounds(i);
        if !(v >= lo && v <= hi) {
            return Err(FitError::StartOutsideBounds {
                name: circuit.params[i].name.clone(),
                value: v,
                lower: lo,
                upper: hi,
            });
        }
    }
    let transforms = &setup.transforms;
    let ctx = setup.context(circuit, &prep);
    let local = setup.local(&plan, &prep);
    let run = |s: &[f64], tolerance: f64| local.run(s, tolerance, settings.patience);
    let lm = |s: &[f64]| run(s, settings.tolerance);
    // The many runs of the full search only have to rank basins: they stop at a looser tolerance,
    // and the winner is polished tightly below.
    let screen = |s: &[f64]| run(s, settings.tolerance.max(SCREEN_TOLERANCE));

    let conclude = |run: &Run, evaluations: usize, tried: usize| {
        finish(
            circuit,
            &plan,
            &prep,
            free,
            transforms,
            run,
            settings,
            evaluations,
            tried,
        )
    };

    // Whether the data determine every parameter at a run's end: judged only for the white runs that
    // become the best of the search, as only the best run's verdict is read.
    let determined = |r: &Run| {
        r.point
            .as_ref()
            .is_some_and(|p| p.determines_every_parameter(free, &prep.w_rows, transforms))
    };
    let mut search = start::Search::new(&determined);

    // A warm-started result is taken as it is unless it sits on a bound, its residuals trend, or its
    // reduced χ² is well above that of the fit it came from.
    let acceptable = |r: &FitResult| {
        settings
            .warm_reference
            .is_none_or(|reference| r.reduced_chi_square <= 1.5 * reference)
            && !r.systematic_residuals
            && !r.at_bound.iter().any(|b| *b)
    };
    if let Some(w) = warm {
        if w.len() != np {
            return Err(FitError::WarmStartLength {
                got: w.len(),
                want: np,
            });
        }
        let mut s = base.clone();
        for &i in free {
            s[i] = w[i];
            let (lo, hi) = circuit.bounds(i);
            if !(s[i] > lo && s[i] < hi && s[i].is_finite()) {
                s[i] = base[i];
            }
        }
        search.consider(lm(&s));
        if let Some(b) = search
            .best
            .as_ref()
            .filter(|b| single || b.termination.was_successful())
        {
            let result = conclude(b, search.evaluations, search.tried);
            if single || acceptable(&result) {
                return Ok(result);
            }
        }
        // Before the full search, a cheap second try: the three best grid points. A series that
        // stepped into another basin is usually caught here at a fraction of the full cost. When none
        // of them beats the warm run and its reduced χ² is within CONFIRM_RATIO of the reference, they
        // confirm it: that χ² is what this spectrum gives (a noisier spectrum), not the mark of a wrong
        // basin. Further above the reference only the full search is trusted.
        if let Some(t) = start::recognise(circuit) {
            let warm_chi = search.chi_square();
            let warm_ok = search
                .best
                .as_ref()
                .is_some_and(|b| b.termination.was_successful());
            for s in start::grid_starts(&ctx, &t, 3) {
                search.consider(lm(&s));
            }
            let Some(mut b) = search.best.take() else {
                return Err(FitError::NoFiniteStart);
            };
            start::order_identical_arcs(&ctx, &t, &mut b.params);
            let confirmed = warm_ok && b.chi_square >= warm_chi * (1.0 - CONFIRM);
            if b.termination.was_successful() {
                let result = conclude(&b, search.evaluations, search.tried);
                let near = settings
                    .warm_reference
                    .is_none_or(|reference| result.reduced_chi_square <= CONFIRM_RATIO * reference);
                if (confirmed && near) || acceptable(&result) {
                    return Ok(result);
                }
            }
            search.best = Some(b);
        }
    }

    if circuit
        .params
        .iter()
        .all(|p| p.fixed || p.initial.is_some())
    {
        search.consider(lm(base));
    }
    let terms = start::recognise(circuit);
    // A brief run: at most `patience` × (P + 1) evaluations, and given up after P + 1 of them while
    // its χ² is still above `limit`.
    let brief = |s: &[f64], patience: usize, limit: f64| {
        let mut solver = Solver::default()
            .with_tolerance(settings.tolerance.max(SCREEN_TOLERANCE))
            .with_patience(patience);
        if limit.is_finite() {
            solver = solver.with_give_up(limit, free.len() + 1);
        }
        local.run_with(s, solver)
    };
    // The unfinished brief runs: the `keep` lowest in χ² carried on to convergence (from where they
    // stopped), the others counted as they are.
    let carry_on = |search: &mut start::Search, pending: &mut Vec<Run>, keep: usize| {
        pending.sort_by(|a, b| a.chi_square.total_cmp(&b.chi_square));
        for (i, r) in pending.drain(..).enumerate() {
            if i < keep {
                search.evaluations += r.evaluations;
                search.consider(screen(&r.params));
            } else {
                search.consider(r);
            }
        }
    };
    // Every start briefly; a run that converges within its brief budget is done, one still above
    // `give_up` times the best χ² after P + 1 evaluations is abandoned, and the others are carried on
    // as above. Starts are taken best first, and the rest are skipped once the search has settled
    // (`Search::settled`).
    let staged = |search: &mut start::Search,
                  starts: &[Vec<f64>],
                  patience: usize,
                  keep: usize,
                  give_up: f64| {
        let mut pending = Vec::new();
        for s in starts {
            if search.settled(pending.len()) {
                break;
            }
            // When only unfinished runs keep the search from settling, they are carried on now.
            if !pending.is_empty() && search.settled(0) {
                carry_on(search, &mut pending, keep);
                if search.settled(0) {
                    break;
                }
            }
            let limit = give_up * search.chi_square();
            let r = brief(s, patience, limit);
            if r.termination.was_successful() {
                search.consider(r);
            } else if r.evaluations < patience * (free.len() + 1) && r.chi_square > limit {
                search.abandon(r);
            } else {
                pending.push(r);
            }
        }
        carry_on(search, &mut pending, keep);
    };
    match &terms {
        Some(t) => {
            let starts = start::grid_starts(&ctx, t, settings.starts);
            staged(&mut search, &starts, BRIEF_PATIENCE, CARRIED_ON, GIVE_UP);
            if settings.drt_starts {
                if let Some(d) = seed {
                    let template = starts.first().cloned().unwrap_or_else(|| base.clone());
                    for s in &start::drt_starts(&ctx, t, d, &template, DRT_STARTS) {
                        search.consider(screen(s));
                    }
                }
            }
            if settings.arc_moves {
                if let Some(b) = &search.best {
                    let before = b.chi_square;
                    let swaps = start::arc_swaps(&ctx, t, &b.params);
                    for s in &swaps {
                        search.consider(screen(s));
                    }
                    let b = search.best.as_ref().expect("a run was considered");
                    // Independent starts that agree on the optimum make moving arcs elsewhere
                    // pointless.
                    if search.agreeing < AGREEING && !search.noise_like_consensus() {
                        let moves = start::arc_relocations(&ctx, t, &b.params);
                        staged(
                            &mut search,
                            &moves,
                            MOVE_PATIENCE,
                            CARRIED_ON,
                            f64::INFINITY,
                        );
                    }
                    // A move may have reached a new basin whose arcs are misassigned: swap once more.
                    if let Some(b) = search.best.as_ref().filter(|b| b.chi_square < before) {
                        let swaps = start::arc_swaps(&ctx, t, &b.params);
                        for s in &swaps {
                            search.consider(screen(s));
                        }
                    }
                }
            }
        }
        None => {
            for s in &start::spread_starts(&ctx, 2 * settings.starts) {
                search.consider(screen(s));
            }
        }
    }
    let Some(mut b) = search.best.take() else {
        return Err(FitError::NoFiniteStart);
    };
    if let Some(t) = &terms {
        start::order_identical_arcs(&ctx, t, &mut b.params);
    }
    // Polish the winner with tight tolerances so that noise-free data are met to round-off.
    let polish = run(&b.params, POLISH_TOLERANCE);
    search.evaluations += polish.evaluations;
    if polish.chi_square <= b.chi_square {
        let iterations = b.iterations + polish.iterations;
        b = Run {
            iterations,
            ..polish
        };
    }
    Ok(conclude(&b, search.evaluations, search.tried))
}

#[allow(clippy::too_many_arguments)]
fn finish(
    circuit: &Circuit,
    plan: &Plan,
    prep: &Prepared,
    free: &[usize],
    transforms: &[Transform],
    run: &Run,
    settings: &FitSettings,
    evaluations: usize,
    tried: usize,
) -> FitResult {
    // The run's last evaluation is reused when it is at the reported parameters.
    let at = match run.point.as_ref().filter(|e| e.params() == run.params) {
        Some(e) => Point::Evaluated(e.clone()),
        None => Point::Params(run.params.clone()),
    };
    let problem = Problem::new(
        plan,
        &prep.grid,
        &prep.data,
        &prep.w_rows,
        at,
        free,
        transforms,
    );
    stats::summarise(stats::Summary {
        circuit,
        problem: &problem,
        prep_data: &prep.data,
        free,
        transforms,
        run_iterations: run.iterations,
        evaluations,
        tried,
        termination: &run.termination,
        weighting: settings.weighting,
    })
}

#[cfg(test)]
mod tests {
    use super::von_neumann_ratio;
    use rand::rngs::Xoshiro256PlusPlus;
    use rand::{RngExt, SeedableRng};
    use rand_distr::StandardNormal;

    /// Interleaved residuals (real, imaginary) from two series.
    fn interleave(re: &[f64], im: &[f64]) -> Vec<f64> {
        re.iter().zip(im).flat_map(|(&a, &b)| [a, b]).collect()
    }

    /// Von Neumann (1941, "Distribution of the ratio of the mean square successive difference to the
    /// variance", Annals of Mathematical Statistics 12, 367): for m independent N(0, σ²) values the
    /// successive differences have E Σ(x_{k+1} − x_k)² = 2(m − 1)σ² against E Σ x² = mσ², so the ratio
    /// is near 2(m − 1)/m, with a standard deviation near 2/√m; a smooth trend gives nearly 0.
    #[test]
    fn von_neumann_ratio_tells_noise_from_a_trend() {
        let m = 2000;
        let mut rng = Xoshiro256PlusPlus::seed_from_u64(7);
        let mut normal = || -> f64 { rng.sample(StandardNormal) };
        let re: Vec<f64> = (0..m).map(|_| normal()).collect();
        let im: Vec<f64> = (0..m).map(|_| normal()).collect();
        let order: Vec<usize> = (0..m).collect();
        let eta = von_neumann_ratio(&interleave(&re, &im), &order);
        let expected = 2.0 * (m as f64 - 1.0) / m as f64;
        assert!(
            (eta - expected).abs() < 4.0 * 2.0 / (2.0 * m as f64).sqrt(),
            "{eta}"
        );

        // A residual that follows a trend over the spectrum: far below 1.
        let x = |k: usize| k as f64 / m as f64 * std::f64::consts::PI;
        let trend_re: Vec<f64> = (0..m).map(|k| (3.0 * x(k)).sin()).collect();
        let trend_im: Vec<f64> = (0..m).map(|k| (2.0 * x(k)).cos()).collect();
        let smooth = von_neumann_ratio(&interleave(&trend_re, &trend_im), &order);
        assert!(smooth < 0.01, "{smooth}");

        // The points are taken in frequency order, not storage order: a trend stored with every
        // other point swapped is still a trend.
        let mut shuffled_re = trend_re.clone();
        let mut shuffled_im = trend_im.clone();
        let mut by_frequency = order.clone();
        for k in (0..m - 1).step_by(2) {
            shuffled_re.swap(k, k + 1);
            shuffled_im.swap(k, k + 1);
            by_frequency.swap(k, k + 1);
        }
        let reordered = von_neumann_ratio(&interleave(&shuffled_re, &shuffled_im), &by_frequency);
        assert!(
            (reordered - smooth).abs() < 1e-12,
            "{reordered} vs {smooth}"
        );
        assert_eq!(von_neumann_ratio(&[0.0, 0.0, 0.0, 0.0], &[0, 1]), 0.0);
    }
}
