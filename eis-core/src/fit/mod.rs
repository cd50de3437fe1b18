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
mod search;
use search::fit_impl;
pub(crate) mod start;
mod stats;

use crate::circuit::Circuit;
use crate::dense::modulus;
use crate::eval::Grid;
use crate::spectrum::{PointRef, Spectrum};
pub use lm::Termination;
use num_complex::Complex64;
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
