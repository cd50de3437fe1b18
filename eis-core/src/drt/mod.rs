//! Distribution of relaxation times (DRT) by Tikhonov regularisation with a non-negativity constraint.
//!
//! # Model
//!
//! Z(ω) = R∞ + jωL + 1/(jωC) + ∫ γ(ln τ) / (1 + jωτ) d ln τ, with γ ≥ 0 in Ω per unit of ln τ (not
//! per second: a density g(τ) per unit τ relates as γ = τ·g). The inductance term is optional
//! ([`DrtOptions::with_inductance`]); the series capacitance, on by default
//! ([`DrtOptions::with_capacitance`]), takes up an open capacitive tail at low frequency, which a
//! distribution of relaxation times alone can only imitate by piling γ against the end of the window.
//!
//! γ is expanded in Gaussian radial basis functions φ_m(y) = exp(−(ε(y − y_m))²), y = ln τ, one centred
//! at τ_m = 1/ω_m for each distinct measured frequency (Wan, Saccoccio, Chen & Ciucci 2015, Electrochim.
//! Acta 184, 483), or, above [`MAX_BASIS`] distinct frequencies, that many evenly spaced in ln τ over
//! the same range. The shape factor ε follows from the full width at half maximum, FWHM = 2√(ln 2)/ε,
//! chosen as a multiple of the mean centre spacing ([`DrtOptions::with_rbf_width`]).
//!
//! # Problem solved
//!
//! min ‖W(Z − A x)‖² + λ·xᵀMx subject to x ≥ 0, over x = (R∞, L, 1/C, coefficients), real and
//! imaginary parts stacked (or one part only, [`Part`]). M is the Gram matrix of the first or second
//! derivatives of the basis functions ([`Penalty`]); it does not touch R∞, L or 1/C. The solver is the Lawson–Hanson
//! active-set method on the normal equations (the crate's `nnls` module; Lawson & Hanson 1974).
//!
//! The problem is made scale-free before solving, so that one λ means the same for a 10 mΩ cell and a
//! 10 kΩ coating: the residual of each point is divided by |Z_i| ([`Weighting::Modulus`], the default)
//! or by max|Z| ([`Weighting::Unit`]), and the unknowns are expressed in units of R_ref = max|Z| (L in
//! units of R_ref/ω_max, 1/C in units of R_ref·ω_min). λ is reported in these units.
//!
//! # Choosing λ
//!
//! - generalised cross-validation (Golub, Heath & Wahba 1979, Technometrics 21, 215), the default:
//!   GCV(λ) = n‖r_λ‖² / (n − tr H_λ)², with the influence matrix H_λ taken over the variables the
//!   non-negative solution leaves free; minimised over a log-spaced scan, then refined by golden-section
//!   search between the neighbours of the best scan point;
//! - the L-curve (Hansen 1992, SIAM Rev. 34, 561): the point of largest curvature of
//!   (log‖r_λ‖, log √(xᵀMx)) over the scan;
//! - a fixed value, the fast path when many spectra share settings.
//!
//! # Output
//!
//! γ on a fine log-spaced τ grid that covers the basis centres plus three basis widths on each side (so
//! the grid holds practically all of γ's area); its peaks, each with τ, frequency 1/(2πτ), height, width
//! and resistance (the area under γ between the valleys that separate it from its neighbours, so that
//! the peak resistances add up to the area of γ), those inside the measured window apart from those at
//! its edge (the rule is in [`find_peaks`]); R∞, L, C, the polarisation resistance ∫γ d ln τ (exact,
//! from the coefficients), and residuals relative to |Z|.
//!
//! # Reuse
//!
//! [`DrtSetup`] holds everything that depends only on the frequencies and options (kernel matrices,
//! penalty matrix, fine-grid basis); [`DrtSetup::solve`] then costs only the per-spectrum work, which is
//! what a fitter calling the DRT for starting values of many spectra wants.
//!
//! ```
//! use eis_core::{circuit::parse, drt::{drt, DrtOptions}, eval::{log_frequencies, Plan}};
//! use eis_core::simulate::simulate;
//! // R0 + R1|C1: one relaxation at τ = R1·C1 = 1 ms holding R1 = 50 Ω.
//! let plan = Plan::compile(&parse("R0 + R1|C1").unwrap());
//! let spectrum = simulate(&plan, &[5.0, 50.0, 20e-6], &log_frequencies(1e5, 0.1, 10), None);
//! let result = drt(&spectrum, DrtOptions::default()).unwrap();
//! assert_eq!(result.peaks.len(), 1);
//! assert!((result.peaks[0].tau_s / 1e-3 - 1.0).abs() < 0.05);
//! assert!((result.peaks[0].resistance_ohm / 50.0 - 1.0).abs() < 0.02);
//! assert!((result.r_inf_ohm - 5.0).abs() < 0.1);
//! ```

mod basis;
mod lambda;
mod options;
pub mod peaks;
#[cfg(test)]
mod tests;

pub use basis::DrtSetup;
#[cfg(test)]
pub(crate) use basis::gaussian_gram;
pub use options::{DrtOptions, LambdaMethod, Part, Penalty, Weighting};
pub use peaks::{DEFAULT_PEAK_THRESHOLD, EDGE_MARGIN_DECADES, find_peaks, peak_indices};

use crate::nnls::Termination;
use crate::spectrum::Spectrum;
use lambda::Problem;
use nalgebra::DVector;
use num_complex::Complex64;
use peaks::peaks_on_grid;
use std::f64::consts::PI;
use std::fmt;

/// What is wrong with the input of a DRT, or why it failed. Each variant's doc says when it happens.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub enum DrtErrorKind {
    /// The spectrum has no points.
    Empty,
    /// Fewer distinct frequencies than the DRT needs.
    TooFewPoints {
        /// Distinct frequencies found.
        found: usize,
        /// The minimum.
        needed: usize,
    },
    /// Frequencies and impedances differ in number.
    LengthMismatch {
        /// Number of frequencies.
        frequencies: usize,
        /// Number of impedances.
        impedances: usize,
    },
    /// A frequency that is NaN, infinite, zero or negative, or so large or small that 2πf or 1/(2πf)
    /// is not finite.
    BadFrequency {
        /// Its point number, from 1.
        point: usize,
        /// The value.
        value: f64,
    },
    /// An impedance with a NaN or infinite part.
    NonFiniteImpedance {
        /// Its point number, from 1.
        point: usize,
    },
    /// An impedance of exactly zero, which modulus weighting cannot scale.
    ZeroImpedance {
        /// Its point number, from 1.
        point: usize,
    },
    /// The spectrum has a different number of points than the frequencies a [`DrtSetup`] was made for.
    SetupMismatch {
        /// Points the setup expects.
        expected: usize,
        /// Points given.
        found: usize,
    },
    /// An option outside its range: `with_rbf_width(0.0)`.
    BadOption {
        /// The option.
        name: &'static str,
        /// The value given.
        value: f64,
        /// What is allowed.
        expected: &'static str,
    },
    /// The computation produced a non-finite number (an ill-posed problem beyond repair).
    Numerical(&'static str),
}

/// An error of a DRT computation.
#[derive(Debug, Clone, PartialEq)]
pub struct DrtError {
    kind: DrtErrorKind,
}

impl DrtError {
    fn new(kind: DrtErrorKind) -> DrtError {
        DrtError { kind }
    }

    /// What went wrong.
    pub fn kind(&self) -> &DrtErrorKind {
        &self.kind
    }

    /// Whether the input (data or options) is at fault, as opposed to the computation.
    pub fn is_input_error(&self) -> bool {
        !matches!(self.kind, DrtErrorKind::Numerical(_))
    }
}

impl fmt::Display for DrtError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        use DrtErrorKind::*;
        match &self.kind {
            Empty => write!(f, "the spectrum has no points"),
            TooFewPoints { found, needed } => write!(
                f,
                "the spectrum has {found} distinct frequencies; the DRT needs at least {needed}"
            ),
            LengthMismatch {
                frequencies,
                impedances,
            } => write!(
                f,
                "{frequencies} frequencies but {impedances} impedance values"
            ),
            BadFrequency { point, value } => {
                write!(
                    f,
                    "point {point}: frequency {value} Hz is not usable (it must be positive, with 2πf \
                     and 1/(2πf) finite)"
                )
            }
            NonFiniteImpedance { point } => {
                write!(f, "point {point}: the impedance is not a finite number")
            }
            ZeroImpedance { point } => write!(
                f,
                "point {point}: the impedance is zero, which modulus weighting cannot scale"
            ),
            SetupMismatch { expected, found } => write!(
                f,
                "the spectrum has {found} points but the DRT setup was made for {expected}"
            ),
            BadOption {
                name,
                value,
                expected,
            } => write!(f, "{name} {value} is out of range; expected {expected}"),
            Numerical(what) => write!(f, "numerical failure: {what}"),
        }
    }
}

impl std::error::Error for DrtError {}

/// One peak of γ.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct DrtPeak {
    /// Time constant at the maximum (s), refined between grid points by a parabola in ln τ.
    pub tau_s: f64,
    /// The matching frequency 1/(2πτ) (Hz).
    pub frequency_hz: f64,
    /// Area under γ between the valleys on either side (Ω).
    pub resistance_ohm: f64,
    /// Height of γ at the maximum (Ω per unit ln τ).
    pub gamma_ohm: f64,
    /// Full width at half maximum in decades of τ; where γ does not fall to half before a valley, the
    /// valley bounds the width.
    pub width_decades: f64,
    /// Whether the maximum lies at the edge of the measured window or beyond it (see
    /// [`EDGE_MARGIN_DECADES`]): such a peak is produced by a process beyond the data, and its τ and
    /// resistance are not those of a resolved process.
    pub at_window_edge: bool,
}

/// One point of the λ scan.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct LambdaPoint {
    /// λ (scale-free units).
    pub lambda: f64,
    /// ‖W(Z − Ẑ)‖ of the fitted part(s), in the scale-free units.
    pub residual_norm: f64,
    /// √(xᵀMx), the size of the penalised derivative, in the scale-free units.
    pub penalty_norm: f64,
    /// The GCV score (NaN for the L-curve). For GCV the two norms are those of the unconstrained
    /// solution that GCV scores; for the L-curve, those of the non-negative solution.
    pub gcv: f64,
}

/// The result of a DRT.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct DrtResult {
    /// The regularisation strength used (scale-free units).
    pub lambda: f64,
    /// How it was chosen (written `gcv`, `lcurve` or `fixed` in text and JSON).
    pub lambda_method: LambdaMethod,
    /// The penalised derivative order, 1 or 2.
    pub penalty_order: u8,
    /// The fitted part (written `both`, `real` or `imag` in text and JSON).
    pub part: Part,
    /// High-frequency resistance R∞ (Ω).
    pub r_inf_ohm: f64,
    /// Series inductance (H), when modelled.
    pub inductance_h: Option<f64>,
    /// Series capacitance (F), when modelled and the data show an open capacitive tail: None when not
    /// modelled, or when its reactance at the lowest frequency is below 1 % of |Z| there (no tail the
    /// data can tell from the rest; the fit, residuals included, still uses it).
    pub capacitance_f: Option<f64>,
    /// Polarisation resistance ∫γ d ln τ (Ω).
    pub r_pol_ohm: f64,
    /// The output τ grid (s), ascending.
    pub tau_s: Vec<f64>,
    /// γ on that grid (Ω per unit ln τ).
    pub gamma_ohm: Vec<f64>,
    /// Peaks of γ, ascending in τ.
    pub peaks: Vec<DrtPeak>,
    /// Peaks at the edge of the measured window or beyond it, ascending in τ: produced by a process
    /// beyond the data (typically a diffusion tail still rising at the lowest frequency), so their τ
    /// and resistance are not those of a resolved process. Kept apart from [`DrtResult::peaks`].
    pub edge_peaks: Vec<DrtPeak>,
    /// Frequencies of the input points (Hz), in input order.
    pub frequency_hz: Vec<f64>,
    /// (Z′ − Ẑ′)/|Z| at each input point, a fraction (JSON: `residual_real_percent`, in percent as
    /// the text output shows residuals).
    #[serde(rename = "residual_real_percent", serialize_with = "percents")]
    pub residual_real: Vec<f64>,
    /// (Z″ − Ẑ″)/|Z| at each input point, a fraction (JSON: `residual_imag_percent`, in percent).
    #[serde(rename = "residual_imag_percent", serialize_with = "percents")]
    pub residual_imag: Vec<f64>,
    /// Root mean square of both relative residuals over all points, a fraction (JSON:
    /// `residual_rms_percent`, in percent, as the text output).
    #[serde(rename = "residual_rms_percent", serialize_with = "percent")]
    pub residual_rms: f64,
    /// Centres of the basis functions (s), ascending.
    pub basis_tau_s: Vec<f64>,
    /// Coefficients of the basis functions (Ω): γ(ln τ) = Σ c_m·exp(−(ε·ln(τ/τ_m))²).
    pub coefficients_ohm: Vec<f64>,
    /// The shape factor ε of the basis functions.
    pub epsilon: f64,
    /// The λ scan (empty for a fixed λ).
    pub lambda_scan: Vec<LambdaPoint>,
    /// Things the user should know (λ at the end of its range, a poor fit, ...).
    pub warnings: Vec<String>,
}

/// A fraction written in percent.
fn percent<S: serde::Serializer>(fraction: &f64, serializer: S) -> Result<S::Ok, S::Error> {
    serializer.serialize_f64(100.0 * fraction)
}

/// Fractions written in percent.
fn percents<S: serde::Serializer>(fractions: &[f64], serializer: S) -> Result<S::Ok, S::Error> {
    serializer.collect_seq(fractions.iter().map(|f| 100.0 * f))
}

/// The smallest reactance of the series capacitance at the lowest frequency, relative to |Z| there,
/// for which [`DrtResult::capacitance_f`] reports it.
const CAPACITANCE_SHOWN: f64 = 0.01;

/// The fewest distinct frequencies a DRT accepts.
pub const MIN_POINTS: usize = 5;

/// Most basis functions. A spectrum with more distinct frequencies gets this many centres, evenly
/// spaced in ln τ over the same range, instead of one per frequency: every point is still fitted,
/// but the work is O(N·M) in memory and O(N·M² + M³) in time rather than O(N²) and O(N³) (2,000
/// points took over a minute, 100,000 could not be held). A hundred centres over seven decades are
/// fourteen per decade, finer than the resolution the regularisation leaves; spectra of up to a
/// hundred distinct frequencies are treated exactly as before.
pub const MAX_BASIS: usize = 100;

impl DrtSetup {
    /// Computes the DRT of `z`, measured at this setup's frequencies in the same order.
    ///
    /// # Errors
    ///
    /// [`DrtErrorKind::SetupMismatch`], [`DrtErrorKind::NonFiniteImpedance`],
    /// [`DrtErrorKind::ZeroImpedance`] for bad data; [`DrtErrorKind::Numerical`] if the solution is not
    /// finite.
    pub fn solve(&self, z: &[Complex64]) -> Result<DrtResult, DrtError> {
        let n = self.omega.len();
        if z.len() != n {
            return Err(DrtError::new(DrtErrorKind::SetupMismatch {
                expected: n,
                found: z.len(),
            }));
        }
        if let Some(i) = z
            .iter()
            .position(|v| !(v.re.is_finite() && v.im.is_finite()))
        {
            return Err(DrtError::new(DrtErrorKind::NonFiniteImpedance {
                point: i + 1,
            }));
        }
        let r_ref = z.iter().fold(0.0f64, |a, v| a.max(v.norm()));
        if let Some(i) = z.iter().position(|v| v.norm().is_infinite()) {
            return Err(DrtError::new(DrtErrorKind::NonFiniteImpedance {
                point: i + 1,
            }));
        }
        if r_ref == 0.0 {
            return Err(DrtError::new(DrtErrorKind::ZeroImpedance { point: 1 }));
        }
        // Everything is solved on Z/R_ref (|Z/R_ref| ≤ 1), so that impedances anywhere from 1e-300 to
        // 1e300 Ω neither overflow nor underflow; the unknowns are in units of R_ref anyway.
        let zs: Vec<Complex64> = z.iter().map(|v| v / r_ref).collect();
        let weights: Vec<f64> = match self.options.weighting {
            Weighting::Modulus => {
                if let Some(i) = z.iter().position(|v| v.norm() == 0.0) {
                    return Err(DrtError::new(DrtErrorKind::ZeroImpedance { point: i + 1 }));
                }
                let w: Vec<f64> = zs.iter().map(|v| 1.0 / v.norm()).collect();
                // |Zᵢ| more than ~1e308 times below max|Z| cannot be weighted by its modulus.
                if let Some(i) = w.iter().position(|w| !w.is_finite()) {
                    return Err(DrtError::new(DrtErrorKind::ZeroImpedance { point: i + 1 }));
                }
                w
            }
            Weighting::Unit => vec![1.0; n],
        };

        let (a, b) = self.design(&zs, &weights, 1.0);
        let mut problem = Problem::new(&a, &b, &self.penalty);
        let mut warnings = Vec::new();
        let (lambda, scan) = match self.options.lambda {
            LambdaMethod::Fixed(l) => (l, Vec::new()),
            LambdaMethod::Gcv => self.choose_gcv(&mut problem, &mut warnings)?,
            LambdaMethod::LCurve => self.choose_lcurve(&mut problem, &mut warnings)?,
        };
        let last = problem.eval(lambda)?;
        if last.termination == Termination::IterationLimit {
            warnings.push("the non-negative solver reached its iteration limit".to_owned());
        }
        let x = &problem.x;
        if x.iter().any(|v| !v.is_finite()) {
            return Err(DrtError::new(DrtErrorKind::Numerical(
                "the DRT solution is not finite",
            )));
        }
        self.finish(z, r_ref, x.as_slice(), lambda, scan, warnings)
    }

    /// Unscales the solution and computes everything the result reports.
    fn finish(
        &self,
        z: &[Complex64],
        r_ref: f64,
        x: &[f64],
        lambda: f64,
        lambda_scan: Vec<LambdaPoint>,
        mut warnings: Vec<String>,
    ) -> Result<DrtResult, DrtError> {
        let n = self.omega.len();
        let mut col = 0;
        let mut r_inf = 0.0;
        if self.has_r_inf {
            r_inf = x[col] * r_ref;
            col += 1;
        }
        let mut inductance = None;
        if self.has_l {
            inductance = Some(x[col] * r_ref / self.omega_max);
            col += 1;
        }
        // The elastance 1/C (F⁻¹), unscaled; 0 means no capacitance in series.
        let mut elastance = 0.0;
        if self.has_c {
            elastance = x[col] * r_ref * self.omega_min;
            col += 1;
        }
        let coef: Vec<f64> = x[col..].iter().map(|v| v * r_ref).collect();
        let coef_v = DVector::from_column_slice(&coef);
        let model_re = &self.kernel_re * &coef_v;
        let model_im = &self.kernel_im * &coef_v;
        // Estimate what the fitted part cannot see, by weighted least squares on the other part.
        let modulus: Vec<f64> = z.iter().map(|v| v.norm().max(f64::MIN_POSITIVE)).collect();
        // Weights 1/|Zᵢ|² divided by the largest of them, so that they stay in (0, 1] for any scale.
        let m_min = modulus.iter().fold(f64::INFINITY, |a, &b| a.min(b));
        if !self.has_r_inf {
            let (mut num, mut den) = (0.0, 0.0);
            for i in 0..n {
                let w2 = (m_min / modulus[i]).powi(2);
                num += w2 * (z[i].re - model_re[i]);
                den += w2;
            }
            r_inf = (num / den).max(0.0);
        }
        if self.options.inductance && !self.has_l {
            let (mut num, mut den) = (0.0, 0.0);
            for i in 0..n {
                let w2 = (m_min / modulus[i]).powi(2);
                num += w2 * self.omega[i] * (z[i].im - model_im[i]);
                den += w2 * self.omega[i] * self.omega[i];
            }
            inductance = Some((num / den).max(0.0));
        }
        let l = inductance.unwrap_or(0.0);
        let i_min = (0..n)
            .min_by(|&a, &b| self.omega[a].total_cmp(&self.omega[b]))
            .unwrap_or(0);
        let mut residual_real = Vec::with_capacity(n);
        let mut residual_imag = Vec::with_capacity(n);
        let mut sum_sq = 0.0;
        for i in 0..n {
            let rr = (z[i].re - r_inf - model_re[i]) / modulus[i];
            let ri = (z[i].im - self.omega[i] * l + elastance / self.omega[i] - model_im[i])
                / modulus[i];
            sum_sq += rr * rr + ri * ri;
            residual_real.push(rr);
            residual_imag.push(ri);
        }
        let residual_rms = (sum_sq / (2 * n) as f64).sqrt();
        // Impedances near the largest float overflow in the differences above.
        if !residual_rms.is_finite() {
            return Err(DrtError::new(DrtErrorKind::Numerical(
                "the residuals overflow: the impedances are too large for the DRT",
            )));
        }
        if residual_rms > 0.05 {
            warnings.push(format!(
                "the DRT model fits poorly (rms residual {:.1} % of |Z|); a diffusion tail at low \
                 frequency is represented only roughly by a distribution of relaxation times",
                100.0 * residual_rms
            ));
        }

        let gamma: Vec<f64> = (&self.grid_basis * &coef_v).iter().copied().collect();
        let r_pol = coef.iter().sum::<f64>() * PI.sqrt() / self.epsilon;
        let window = (self.centres[0], self.centres[self.centres.len() - 1]);
        let (edge_peaks, peaks): (Vec<DrtPeak>, Vec<DrtPeak>) = peaks_on_grid(
            &self.grid,
            &gamma,
            self.options.peak_threshold,
            Some(window),
        )
        .into_iter()
        .partition(|p| p.at_window_edge);
        if ![r_inf, r_pol, l, elastance].iter().all(|v| v.is_finite())
            || gamma.iter().any(|g| !g.is_finite())
        {
            return Err(DrtError::new(DrtErrorKind::Numerical(
                "the DRT result is not finite",
            )));
        }
        Ok(DrtResult {
            lambda,
            lambda_method: self.options.lambda,
            penalty_order: self.options.penalty.order(),
            part: self.options.part,
            r_inf_ohm: r_inf,
            inductance_h: inductance,
            capacitance_f: (elastance / self.omega_min > CAPACITANCE_SHOWN * modulus[i_min])
                .then(|| 1.0 / elastance),
            r_pol_ohm: r_pol,
            tau_s: self.grid.iter().map(|y| y.exp()).collect(),
            gamma_ohm: gamma,
            peaks,
            edge_peaks,
            frequency_hz: self.frequency_hz.clone(),
            residual_real,
            residual_imag,
            residual_rms,
            basis_tau_s: self.basis_tau_s(),
            coefficients_ohm: coef,
            epsilon: self.epsilon,
            lambda_scan,
            warnings,
        })
    }
}

/// Computes the DRT of a spectrum (a [`DrtSetup`] made and used once).
///
/// # Errors
///
/// As [`DrtSetup::new`] and [`DrtSetup::solve`], plus [`DrtErrorKind::LengthMismatch`].
pub fn drt(spectrum: &Spectrum, options: DrtOptions) -> Result<DrtResult, DrtError> {
    if spectrum.frequency_hz.len() != spectrum.z.len() {
        return Err(DrtError::new(DrtErrorKind::LengthMismatch {
            frequencies: spectrum.frequency_hz.len(),
            impedances: spectrum.z.len(),
        }));
    }
    DrtSetup::new(&spectrum.frequency_hz, options)?.solve(&spectrum.z)
}
