//! Distribution of relaxation times (DRT) by Tikhonov regularisation with a non-negativity constraint.
//!
//! # Model
//!
//! Z(ω) = R∞ + jωL + ∫ γ(ln τ) / (1 + jωτ) d ln τ, with γ ≥ 0 in Ω per unit of ln τ (not per second: a
//! density g(τ) per unit τ relates as γ = τ·g). The inductance term is optional
//! ([`DrtOptions::with_inductance`]).
//!
//! γ is expanded in Gaussian radial basis functions φ_m(y) = exp(−(ε(y − y_m))²), y = ln τ, one centred
//! at τ_m = 1/ω_m for each distinct measured frequency (Wan, Saccoccio, Chen & Ciucci 2015, Electrochim.
//! Acta 184, 483), or, above [`MAX_BASIS`] distinct frequencies, that many evenly spaced in ln τ over
//! the same range. The shape factor ε follows from the full width at half maximum, FWHM = 2√(ln 2)/ε,
//! chosen as a multiple of the mean centre spacing ([`DrtOptions::with_rbf_width`]).
//!
//! # Problem solved
//!
//! min ‖W(Z − A x)‖² + λ·xᵀMx subject to x ≥ 0, over x = (R∞, L, coefficients), real and imaginary
//! parts stacked (or one part only, [`Part`]). M is the Gram matrix of the first or second derivatives
//! of the basis functions ([`Penalty`]); it does not touch R∞ or L. The solver is the Lawson–Hanson
//! active-set method on the normal equations ([`crate::nnls`]).
//!
//! The problem is made scale-free before solving, so that one λ means the same for a 10 mΩ cell and a
//! 10 kΩ coating: the residual of each point is divided by |Z_i| ([`Weighting::Modulus`], the default)
//! or by max|Z| ([`Weighting::Unit`]), and the unknowns are expressed in units of R_ref = max|Z| (L in
//! units of R_ref/ω_max). λ is reported in these units.
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
//! the peak resistances add up to the area of γ); R∞, L, the polarisation resistance ∫γ d ln τ (exact,
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

use crate::nnls::{NnlsWorkspace, Termination, solve_normal};
use crate::spectrum::Spectrum;
use nalgebra::{DMatrix, DVector};
use num_complex::Complex64;
use std::f64::consts::{LN_10, PI};
use std::fmt;

/// How λ is chosen.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum LambdaMethod {
    /// Generalised cross-validation (the default).
    Gcv,
    /// The corner of the L-curve.
    LCurve,
    /// This value, in the scale-free units described in the [module docs](self).
    Fixed(f64),
}

impl LambdaMethod {
    /// Short name: `gcv`, `lcurve` or `fixed`.
    pub fn name(&self) -> &'static str {
        match self {
            LambdaMethod::Gcv => "gcv",
            LambdaMethod::LCurve => "lcurve",
            LambdaMethod::Fixed(_) => "fixed",
        }
    }
}

/// Which derivative of γ the penalty measures.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Penalty {
    /// ∫(dγ/d ln τ)² d ln τ: penalises slope, favours flat γ.
    First,
    /// ∫(d²γ/d ln τ²)² d ln τ: penalises curvature, favours smooth peaks (the default).
    Second,
}

impl Penalty {
    /// The derivative order, 1 or 2.
    pub fn order(&self) -> u8 {
        match self {
            Penalty::First => 1,
            Penalty::Second => 2,
        }
    }
}

/// Which part of the impedance is fitted.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Part {
    /// Real and imaginary parts together (the default).
    Both,
    /// The real part only; L, if asked for, is estimated afterwards from the imaginary residual.
    Real,
    /// The imaginary part only; R∞ is estimated afterwards from the real residual (its weighted mean).
    Imaginary,
}

impl Part {
    /// Short name: `both`, `real` or `imag`.
    pub fn name(&self) -> &'static str {
        match self {
            Part::Both => "both",
            Part::Real => "real",
            Part::Imaginary => "imag",
        }
    }
}

/// How the residual of each point is scaled.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Weighting {
    /// Divided by |Z_i|: every point counts by its relative error (the default).
    Modulus,
    /// Divided by max|Z| for all points: large impedances dominate.
    Unit,
}

/// Settings of a DRT computation: a small `Copy` value with `with_*` setters. Each setter documents
/// its default.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DrtOptions {
    lambda: LambdaMethod,
    penalty: Penalty,
    part: Part,
    inductance: bool,
    weighting: Weighting,
    rbf_width: f64,
    grid_per_decade: usize,
    lambda_range: (f64, f64),
    scan_per_decade: usize,
    peak_threshold: f64,
}

impl Default for DrtOptions {
    fn default() -> Self {
        DrtOptions {
            lambda: LambdaMethod::Gcv,
            penalty: Penalty::Second,
            part: Part::Both,
            inductance: false,
            weighting: Weighting::Modulus,
            rbf_width: 2.0,
            grid_per_decade: 40,
            lambda_range: (1e-9, 1e1),
            scan_per_decade: 3,
            peak_threshold: 0.05,
        }
    }
}

impl DrtOptions {
    /// How λ is chosen. Default: [`LambdaMethod::Gcv`].
    pub fn with_lambda(mut self, method: LambdaMethod) -> Self {
        self.lambda = method;
        self
    }

    /// Which derivative is penalised. Default: [`Penalty::Second`].
    pub fn with_penalty(mut self, penalty: Penalty) -> Self {
        self.penalty = penalty;
        self
    }

    /// Which part is fitted. Default: [`Part::Both`].
    pub fn with_part(mut self, part: Part) -> Self {
        self.part = part;
        self
    }

    /// Whether a series inductance L ≥ 0 is part of the model. Default: false.
    pub fn with_inductance(mut self, inductance: bool) -> Self {
        self.inductance = inductance;
        self
    }

    /// How residuals are scaled. Default: [`Weighting::Modulus`].
    pub fn with_weighting(mut self, weighting: Weighting) -> Self {
        self.weighting = weighting;
        self
    }

    /// Full width at half maximum of each Gaussian basis function, as a multiple of the mean spacing of
    /// the centres in ln τ. Default: 2 (neighbouring functions overlap enough that a constant γ is
    /// represented without visible ripple). Must be positive.
    pub fn with_rbf_width(mut self, width: f64) -> Self {
        self.rbf_width = width;
        self
    }

    /// Points per decade of the output τ grid. Default: 40. At least 2.
    pub fn with_grid_per_decade(mut self, points: usize) -> Self {
        self.grid_per_decade = points;
        self
    }

    /// The interval searched by GCV and the L-curve, in scale-free units. Default: 1e-9 to 10.
    pub fn with_lambda_range(mut self, min: f64, max: f64) -> Self {
        self.lambda_range = (min, max);
        self
    }

    /// Scan points per decade of λ for GCV and the L-curve. Default: 3. At least 1.
    pub fn with_scan_per_decade(mut self, points: usize) -> Self {
        self.scan_per_decade = points;
        self
    }

    /// A local maximum of γ counts as a peak when its height, and its rise above the higher of the
    /// valleys that separate it from its neighbours, are both at least this fraction of the largest γ.
    /// Default: 0.05 (small bumps that noise or the truncation of γ's tails at the ends of the measured
    /// range produce stay below it). In [0, 1).
    pub fn with_peak_threshold(mut self, fraction: f64) -> Self {
        self.peak_threshold = fraction;
        self
    }

    /// How λ is chosen.
    pub fn lambda(&self) -> LambdaMethod {
        self.lambda
    }

    /// Which derivative is penalised.
    pub fn penalty(&self) -> Penalty {
        self.penalty
    }

    /// Which part is fitted.
    pub fn part(&self) -> Part {
        self.part
    }

    /// Whether a series inductance is modelled.
    pub fn inductance(&self) -> bool {
        self.inductance
    }

    fn validate(&self) -> Result<(), DrtError> {
        let bad = |name, value, expected| {
            Err(DrtError::new(DrtErrorKind::BadOption {
                name,
                value,
                expected,
            }))
        };
        if let LambdaMethod::Fixed(l) = self.lambda {
            if !(l.is_finite() && l >= 0.0) {
                return bad("lambda", l, "a finite number ≥ 0");
            }
        }
        if !(self.rbf_width.is_finite() && self.rbf_width > 0.0) {
            return bad("rbf width", self.rbf_width, "a positive number");
        }
        if self.grid_per_decade < 2 || self.grid_per_decade > 10_000 {
            return bad(
                "grid points per decade",
                self.grid_per_decade as f64,
                "2 to 10000",
            );
        }
        let (lo, hi) = self.lambda_range;
        if !(lo.is_finite() && hi.is_finite() && lo > 0.0 && hi > lo) {
            return bad(
                "lambda range",
                if lo > 0.0 { hi } else { lo },
                "0 < min < max, finite",
            );
        }
        if self.scan_per_decade < 1 || self.scan_per_decade > 100 {
            return bad(
                "scan points per decade",
                self.scan_per_decade as f64,
                "1 to 100",
            );
        }
        if !(0.0..1.0).contains(&self.peak_threshold) {
            return bad(
                "peak threshold",
                self.peak_threshold,
                "a fraction in [0, 1)",
            );
        }
        Ok(())
    }
}

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
    /// How it was chosen: `gcv`, `lcurve` or `fixed`.
    pub lambda_method: &'static str,
    /// The penalised derivative order, 1 or 2.
    pub penalty_order: u8,
    /// The fitted part: `both`, `real` or `imag`.
    pub part: &'static str,
    /// High-frequency resistance R∞ (Ω).
    pub r_inf_ohm: f64,
    /// Series inductance (H), when modelled.
    pub inductance_h: Option<f64>,
    /// Polarisation resistance ∫γ d ln τ (Ω).
    pub r_pol_ohm: f64,
    /// The output τ grid (s), ascending.
    pub tau_s: Vec<f64>,
    /// γ on that grid (Ω per unit ln τ).
    pub gamma_ohm: Vec<f64>,
    /// Peaks of γ, ascending in τ.
    pub peaks: Vec<DrtPeak>,
    /// Frequencies of the input points (Hz), in input order.
    pub frequency_hz: Vec<f64>,
    /// (Z′ − Ẑ′)/|Z| at each input point.
    pub residual_real: Vec<f64>,
    /// (Z″ − Ẑ″)/|Z| at each input point.
    pub residual_imag: Vec<f64>,
    /// Root mean square of both relative residuals over all points.
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

/// The fewest distinct frequencies a DRT accepts.
pub const MIN_POINTS: usize = 5;

/// Most basis functions. A spectrum with more distinct frequencies gets this many centres, evenly
/// spaced in ln τ over the same range, instead of one per frequency: every point is still fitted,
/// but the work is O(N·M) in memory and O(N·M² + M³) in time rather than O(N²) and O(N³) (2,000
/// points took over a minute, 100,000 could not be held). A hundred centres over seven decades are
/// fourteen per decade, finer than the resolution the regularisation leaves; spectra of up to a
/// hundred distinct frequencies are treated exactly as before.
pub const MAX_BASIS: usize = 100;

/// Everything of a DRT that depends only on the frequencies and the options, computed once and reused
/// for every spectrum measured at those frequencies (in the same order).
#[derive(Debug, Clone)]
pub struct DrtSetup {
    options: DrtOptions,
    frequency_hz: Vec<f64>,
    omega: Vec<f64>,
    omega_max: f64,
    /// ln τ_m of the basis centres, ascending.
    centres: Vec<f64>,
    epsilon: f64,
    /// ∫φ_m/(1 + jω_iτ) d ln τ: real parts (N × M) and imaginary parts.
    kernel_re: DMatrix<f64>,
    kernel_im: DMatrix<f64>,
    /// Penalty over all unknowns (R∞ and L rows and columns are zero).
    penalty: DMatrix<f64>,
    /// ln τ of the output grid, ascending.
    grid: Vec<f64>,
    /// φ_m at each grid point (G × M).
    grid_basis: DMatrix<f64>,
    has_r_inf: bool,
    has_l: bool,
}

/// Gram entry ∫φ_i^(k) φ_j^(k) d ln τ of the Gaussians exp(−ε²(y − y_i)²) for derivative order k = 0,
/// 1, 2, with d = y_i − y_j. Orders 0 and 1 are the closed forms listed for the Gaussian basis (Wan et
/// al. 2015); order 2 follows from ∫φ_i^(k)φ_j^(k) = (−1)^k G₀^(2k)(d) with G₀ the order-0 entry, which
/// gives √(π/2)·ε³·(t⁴ − 6t² + 3)·e^(−t²/2), t = εd (a fourth Hermite polynomial).
pub fn gaussian_gram(order: u8, epsilon: f64, d: f64) -> f64 {
    let t2 = (epsilon * d).powi(2);
    let e = (-t2 / 2.0).exp();
    let c = (PI / 2.0).sqrt();
    match order {
        0 => c / epsilon * e,
        1 => c * epsilon * (1.0 - t2) * e,
        _ => c * epsilon.powi(3) * (t2 * t2 - 6.0 * t2 + 3.0) * e,
    }
}

/// The real and imaginary parts of ∫ exp(−ε²u²)/(1 + j·e^(u+s)) du, i.e. the response at ω of a basis
/// function centred at τ_m when s = ln(ωτ_m), by the trapezoidal rule on a fixed set of nodes. The
/// integrand is smooth and decays like a Gaussian, so the rule converges geometrically: the nodes are
/// spaced ≤ 0.2/ε and ≤ 0.1 and reach ±7/ε, for errors near round-off (checked against adaptive
/// quadrature from SciPy in the tests).
#[derive(Debug, Clone)]
struct KernelRule {
    /// h·exp(−ε²u_k²).
    weight: Vec<f64>,
    /// e^(u_k).
    exp_u: Vec<f64>,
}

impl KernelRule {
    fn new(epsilon: f64) -> KernelRule {
        let h = (0.2 / epsilon).min(0.1);
        let half = (7.0 / epsilon / h).ceil() as i64;
        let (mut weight, mut exp_u) = (Vec::new(), Vec::new());
        for k in -half..=half {
            let u = k as f64 * h;
            weight.push(h * (-(epsilon * u).powi(2)).exp());
            exp_u.push(u.exp());
        }
        KernelRule { weight, exp_u }
    }

    fn eval(&self, s: f64) -> (f64, f64) {
        let es = s.exp();
        let (mut re, mut im) = (0.0, 0.0);
        for (w, e) in self.weight.iter().zip(&self.exp_u) {
            let x = es * e;
            re += w / (1.0 + x * x);
            // x/(1 + x²) written so that x → 0 and x → ∞ both give 0 without NaN.
            im -= w / (x + 1.0 / x);
        }
        (re, im)
    }
}

impl DrtSetup {
    /// Prepares a DRT for spectra measured at `frequency_hz` (any order, repeats allowed).
    ///
    /// # Errors
    ///
    /// [`DrtErrorKind::Empty`], [`DrtErrorKind::BadFrequency`], [`DrtErrorKind::TooFewPoints`] (fewer
    /// than [`MIN_POINTS`] distinct frequencies) and [`DrtErrorKind::BadOption`].
    pub fn new(frequency_hz: &[f64], options: DrtOptions) -> Result<DrtSetup, DrtError> {
        options.validate()?;
        if frequency_hz.is_empty() {
            return Err(DrtError::new(DrtErrorKind::Empty));
        }
        if let Some((i, &f)) = frequency_hz
            .iter()
            .enumerate()
            .find(|(_, f)| !(f.is_finite() && **f > 0.0))
        {
            return Err(DrtError::new(DrtErrorKind::BadFrequency {
                point: i + 1,
                value: f,
            }));
        }
        let omega: Vec<f64> = frequency_hz.iter().map(|&f| 2.0 * PI * f).collect();
        // 2πf can overflow for f near f64::MAX, and the time constant 1/(2πf) for subnormal f.
        if let Some(i) = omega
            .iter()
            .position(|w| !(w.is_finite() && w.recip().is_finite()))
        {
            return Err(DrtError::new(DrtErrorKind::BadFrequency {
                point: i + 1,
                value: frequency_hz[i],
            }));
        }
        let mut centres: Vec<f64> = omega.iter().map(|w| -w.ln()).collect();
        centres.sort_by(f64::total_cmp);
        centres.dedup_by(|a, b| (*a - *b).abs() <= 1e-9);
        let m = centres.len();
        if m < MIN_POINTS {
            return Err(DrtError::new(DrtErrorKind::TooFewPoints {
                found: m,
                needed: MIN_POINTS,
            }));
        }
        if m > MAX_BASIS {
            // Evenly spaced in ln τ over the same range: the basis, not the data, is thinned.
            let (lo, hi) = (centres[0], centres[m - 1]);
            centres = (0..MAX_BASIS)
                .map(|k| lo + (hi - lo) * k as f64 / (MAX_BASIS - 1) as f64)
                .collect();
        }
        let m = centres.len();
        let spacing = (centres[m - 1] - centres[0]) / (m - 1) as f64;
        let fwhm = options.rbf_width * spacing;
        let epsilon = 2.0 * 2f64.ln().sqrt() / fwhm;

        let n = omega.len();
        let rule = KernelRule::new(epsilon);
        let mut kernel_re = DMatrix::zeros(n, m);
        let mut kernel_im = DMatrix::zeros(n, m);
        for (i, w) in omega.iter().enumerate() {
            let ln_w = w.ln();
            for (k, y) in centres.iter().enumerate() {
                let (re, im) = rule.eval(ln_w + y);
                kernel_re[(i, k)] = re;
                kernel_im[(i, k)] = im;
            }
        }

        let has_r_inf = options.part != Part::Imaginary;
        let has_l = options.inductance && options.part != Part::Real;
        let extra = has_r_inf as usize + has_l as usize;
        let order = options.penalty.order();
        let mut penalty = DMatrix::zeros(extra + m, extra + m);
        for a in 0..m {
            for b in 0..m {
                penalty[(extra + a, extra + b)] =
                    gaussian_gram(order, epsilon, centres[a] - centres[b]);
            }
        }

        // Output grid: the centres plus three FWHM each side (beyond 3 FWHM ≈ 7σ a Gaussian holds
        // nothing measurable), evenly spaced in ln τ.
        let lo = centres[0] - 3.0 * fwhm;
        let hi = centres[m - 1] + 3.0 * fwhm;
        let g = (((hi - lo) / LN_10) * options.grid_per_decade as f64).ceil() as usize + 1;
        let grid: Vec<f64> = (0..g)
            .map(|k| lo + (hi - lo) * k as f64 / (g - 1) as f64)
            .collect();
        let grid_basis = DMatrix::from_fn(g, m, |r, c| {
            (-(epsilon * (grid[r] - centres[c])).powi(2)).exp()
        });

        let omega_max = omega.iter().fold(0.0f64, |a, &b| a.max(b));
        Ok(DrtSetup {
            options,
            frequency_hz: frequency_hz.to_vec(),
            omega,
            omega_max,
            centres,
            epsilon,
            kernel_re,
            kernel_im,
            penalty,
            grid,
            grid_basis,
            has_r_inf,
            has_l,
        })
    }

    /// The options this setup was made with.
    pub fn options(&self) -> DrtOptions {
        self.options
    }

    /// The frequencies this setup was made for (Hz), in the given order.
    pub fn frequency_hz(&self) -> &[f64] {
        &self.frequency_hz
    }

    /// The shape factor ε of the basis functions.
    pub fn epsilon(&self) -> f64 {
        self.epsilon
    }

    /// The basis centres τ_m (s), ascending.
    pub fn basis_tau_s(&self) -> Vec<f64> {
        self.centres.iter().map(|y| y.exp()).collect()
    }

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

    /// The weighted, scale-free design matrix and data vector for the fitted part(s).
    fn design(&self, z: &[Complex64], weights: &[f64], r_ref: f64) -> (DMatrix<f64>, DVector<f64>) {
        let n = self.omega.len();
        let m = self.centres.len();
        let extra = self.has_r_inf as usize + self.has_l as usize;
        let parts: &[bool] = match self.options.part {
            Part::Both => &[false, true],
            Part::Real => &[false],
            Part::Imaginary => &[true],
        };
        let rows = n * parts.len();
        let mut a = DMatrix::zeros(rows, extra + m);
        let mut b = DVector::zeros(rows);
        for (block, &imag) in parts.iter().enumerate() {
            for i in 0..n {
                let r = block * n + i;
                let w = weights[i];
                let s = w * r_ref;
                let mut col = 0;
                if self.has_r_inf {
                    a[(r, col)] = if imag { 0.0 } else { s };
                    col += 1;
                }
                if self.has_l {
                    a[(r, col)] = if imag {
                        s * self.omega[i] / self.omega_max
                    } else {
                        0.0
                    };
                    col += 1;
                }
                let kernel = if imag {
                    &self.kernel_im
                } else {
                    &self.kernel_re
                };
                for k in 0..m {
                    a[(r, col + k)] = s * kernel[(i, k)];
                }
                b[r] = w * if imag { z[i].im } else { z[i].re };
            }
        }
        (a, b)
    }

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

    fn choose_gcv(
        &self,
        problem: &mut Problem,
        warnings: &mut Vec<String>,
    ) -> Result<(f64, Vec<LambdaPoint>), DrtError> {
        let lambdas = self.scan_lambdas();
        let mut scan = Vec::with_capacity(lambdas.len());
        for &l in &lambdas {
            scan.push(problem.gcv(l));
        }
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

    fn choose_lcurve(
        &self,
        problem: &mut Problem,
        warnings: &mut Vec<String>,
    ) -> Result<(f64, Vec<LambdaPoint>), DrtError> {
        let lambdas = self.scan_lambdas();
        let mut scan = Vec::with_capacity(lambdas.len());
        for &l in &lambdas {
            scan.push(problem.eval(l)?.point);
        }
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
        let mut residual_real = Vec::with_capacity(n);
        let mut residual_imag = Vec::with_capacity(n);
        let mut sum_sq = 0.0;
        for i in 0..n {
            let rr = (z[i].re - r_inf - model_re[i]) / modulus[i];
            let ri = (z[i].im - self.omega[i] * l - model_im[i]) / modulus[i];
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
                "the DRT model fits poorly (rms residual {:.1} % of |Z|); a capacitive or diffusion \
                 tail at low frequency cannot be represented by a distribution of relaxation times",
                100.0 * residual_rms
            ));
        }

        let gamma: Vec<f64> = (&self.grid_basis * &coef_v).iter().copied().collect();
        let r_pol = coef.iter().sum::<f64>() * PI.sqrt() / self.epsilon;
        let peaks = find_peaks(&self.grid, &gamma, self.options.peak_threshold);
        if ![r_inf, r_pol, l].iter().all(|v| v.is_finite()) || gamma.iter().any(|g| !g.is_finite())
        {
            return Err(DrtError::new(DrtErrorKind::Numerical(
                "the DRT result is not finite",
            )));
        }
        Ok(DrtResult {
            lambda,
            lambda_method: self.options.lambda.name(),
            penalty_order: self.options.penalty.order(),
            part: self.options.part.name(),
            r_inf_ohm: r_inf,
            inductance_h: inductance,
            r_pol_ohm: r_pol,
            tau_s: self.grid.iter().map(|y| y.exp()).collect(),
            gamma_ohm: gamma,
            peaks,
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

fn argmin(values: impl Iterator<Item = f64>) -> usize {
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
struct Eval {
    point: LambdaPoint,
    termination: Termination,
}

/// The per-spectrum normal equations with buffers reused across λ.
struct Problem<'a> {
    a: &'a DMatrix<f64>,
    b: &'a DVector<f64>,
    penalty: &'a DMatrix<f64>,
    g: DMatrix<f64>,
    c: DVector<f64>,
    q: DMatrix<f64>,
    x: DVector<f64>,
    ax: DVector<f64>,
    mx: DVector<f64>,
    ws: NnlsWorkspace,
    warm: bool,
}

impl<'a> Problem<'a> {
    fn new(a: &'a DMatrix<f64>, b: &'a DVector<f64>, penalty: &'a DMatrix<f64>) -> Problem<'a> {
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
    fn eval(&mut self, lambda: f64) -> Result<Eval, DrtError> {
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
    fn gcv(&mut self, lambda: f64) -> LambdaPoint {
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

/// Peaks of γ on an evenly spaced ln τ grid; see [`DrtOptions::with_peak_threshold`].
fn find_peaks(grid: &[f64], gamma: &[f64], threshold: f64) -> Vec<DrtPeak> {
    let g = gamma.len();
    let gmax = gamma.iter().fold(0.0f64, |a, &b| a.max(b));
    if g < 3 || gmax <= 0.0 {
        return Vec::new();
    }
    let floor = threshold * gmax;
    // Local maxima (a plateau counts once, at its first point).
    let mut cand: Vec<usize> = (1..g - 1)
        .filter(|&k| gamma[k] > gamma[k - 1] && gamma[k] >= gamma[k + 1] && gamma[k] >= floor)
        .collect();
    // Drop the least prominent candidate until all rise enough above their separating valleys.
    loop {
        if cand.is_empty() {
            break;
        }
        let valley =
            |lo: usize, hi: usize| gamma[lo..=hi].iter().fold(f64::INFINITY, |a, &b| a.min(b));
        let mut worst = None;
        let mut worst_prom = floor;
        for (i, &k) in cand.iter().enumerate() {
            let left = if i == 0 {
                valley(0, k)
            } else {
                valley(cand[i - 1], k)
            };
            let right = if i + 1 == cand.len() {
                valley(k, g - 1)
            } else {
                valley(k, cand[i + 1])
            };
            let prom = gamma[k] - left.max(right);
            if prom < worst_prom {
                worst_prom = prom;
                worst = Some(i);
            }
        }
        match worst {
            Some(i) => {
                cand.remove(i);
            }
            None => break,
        }
    }
    // Boundaries: the grid ends and the lowest point between consecutive peaks.
    let mut bounds = vec![0];
    for w in cand.windows(2) {
        let (lo, hi) = (w[0], w[1]);
        let k = lo + argmin(gamma[lo..=hi].iter().copied());
        bounds.push(k);
    }
    bounds.push(g - 1);
    let h = grid[1] - grid[0];
    cand.iter()
        .enumerate()
        .map(|(i, &k)| {
            let (lo, hi) = (bounds[i], bounds[i + 1]);
            let area: f64 = (lo..hi).map(|j| 0.5 * h * (gamma[j] + gamma[j + 1])).sum();
            let (gm, g0, gp) = (gamma[k - 1], gamma[k], gamma[k + 1]);
            let curv = gm - 2.0 * g0 + gp;
            let shift = if curv < 0.0 {
                (0.5 * (gm - gp) / curv).clamp(-0.5, 0.5)
            } else {
                0.0
            };
            let y = grid[k] + shift * h;
            let height = g0 - 0.25 * (gm - gp) * shift;
            let half = 0.5 * height;
            let mut left = grid[lo];
            for j in (lo..k).rev() {
                if gamma[j] < half {
                    left = grid[j] + h * (half - gamma[j]) / (gamma[j + 1] - gamma[j]);
                    break;
                }
            }
            let mut right = grid[hi];
            for j in k + 1..=hi {
                if gamma[j] < half {
                    right = grid[j] - h * (half - gamma[j]) / (gamma[j - 1] - gamma[j]);
                    break;
                }
            }
            let tau = y.exp();
            DrtPeak {
                tau_s: tau,
                frequency_hz: 1.0 / (2.0 * PI * tau),
                resistance_ohm: area,
                gamma_ohm: height,
                width_decades: (right - left) / LN_10,
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::circuit::parse;
    use crate::eval::{Plan, log_frequencies};
    use crate::simulate::{Noise, simulate};
    use serde_json::Value;

    /// Relative closeness with a message naming the quantity.
    macro_rules! assert_rel {
        ($got:expr, $want:expr, $tol:expr, $what:expr) => {{
            let (g, w): (f64, f64) = ($got, $want);
            assert!(
                ((g - w) / w).abs() <= $tol,
                "{}: got {g}, want {w} (relative tolerance {})",
                $what,
                $tol
            );
        }};
    }

    const FIXTURE: &str = include_str!("../../tests/reference/drt_fixture.json");

    fn fixture() -> Value {
        serde_json::from_str(FIXTURE).unwrap()
    }

    fn vector(v: &Value) -> Vec<f64> {
        v.as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_f64().unwrap())
            .collect()
    }

    fn matrix(v: &Value) -> DMatrix<f64> {
        let rows: Vec<Vec<f64>> = v.as_array().unwrap().iter().map(vector).collect();
        DMatrix::from_fn(rows.len(), rows[0].len(), |r, c| rows[r][c])
    }

    /// 1 kHz … 0.1 Hz would be too narrow for the circuits below: use 100 kHz … 0.1 Hz, 10 per decade
    /// (61 points), the range of the benchmark.
    fn spectrum(circuit: &str, params: &[f64], noise: Option<Noise>) -> Spectrum {
        let plan = Plan::compile(&parse(circuit).unwrap());
        simulate(&plan, params, &log_frequencies(1e5, 0.1, 10), noise)
    }

    /// Cole & Cole 1941 (J. Chem. Phys. 9, 341) distribution of a ZARC R/(1 + (jωτ₀)^φ), as written in
    /// REFERENCES.md §5.
    fn cole_cole(r: f64, tau0: f64, phi: f64, tau: f64) -> f64 {
        let y = (tau / tau0).ln();
        r / (2.0 * PI) * ((1.0 - phi) * PI).sin() / ((phi * y).cosh() - ((1.0 - phi) * PI).cos())
    }

    #[test]
    fn drt_kernel_matches_scipy_quadrature() {
        // Reference: scipy.integrate.quad through tests/reference/drt_reference.py.
        let fx = fixture();
        let f = vector(&fx["frequency_hz"]);
        let setup = DrtSetup::new(&f, DrtOptions::default()).unwrap();
        assert_rel!(
            setup.epsilon(),
            fx["epsilon"].as_f64().unwrap(),
            1e-14,
            "epsilon"
        );
        for (k, c) in vector(&fx["centres_ln_tau"]).iter().enumerate() {
            assert!((setup.centres[k] - c).abs() < 1e-12, "centre {k}");
        }
        let (re, im) = (matrix(&fx["kernel_re"]), matrix(&fx["kernel_im"]));
        let dev_re = (&setup.kernel_re - &re).amax();
        let dev_im = (&setup.kernel_im - &im).amax();
        eprintln!(
            "kernel: max deviation from quadrature {dev_re:.1e} (real), {dev_im:.1e} (imaginary)"
        );
        assert!(
            dev_re < 1e-12 && dev_im < 1e-12,
            "kernel deviates by {dev_re:e} / {dev_im:e}"
        );
    }

    #[test]
    fn drt_gram_matches_quadrature() {
        // Reference: quadrature of products of derivatives (SciPy, drt_reference.py); order 1 is the
        // closed form given for Gaussian RBFs (Wan, Saccoccio, Chen & Ciucci 2015, Electrochim. Acta
        // 184, 483), order 2 the one derived in `gaussian_gram`.
        let fx = fixture();
        let eps = fx["epsilon"].as_f64().unwrap();
        let y = vector(&fx["centres_ln_tau"]);
        for (order, key) in [(1u8, "gram1_quad"), (2, "gram2_quad")] {
            let q = matrix(&fx[key]);
            let scale = q.amax();
            for i in 0..y.len() {
                for j in 0..y.len() {
                    let d = gaussian_gram(order, eps, y[i] - y[j]) - q[(i, j)];
                    assert!(
                        d.abs() < 1e-12 * scale,
                        "order {order} entry ({i},{j}) off by {d:e}"
                    );
                }
            }
        }
        // Hand check at d = 0: ∫φ′² = ε√(π/2), ∫φ″² = 3ε³√(π/2).
        let c = (PI / 2.0).sqrt();
        assert_rel!(
            gaussian_gram(1, 2.0, 0.0),
            2.0 * c,
            1e-15,
            "order 1 at d = 0"
        );
        assert_rel!(
            gaussian_gram(2, 2.0, 0.0),
            24.0 * c,
            1e-15,
            "order 2 at d = 0"
        );
    }

    #[test]
    fn drt_design_matches_reference_recipe() {
        let fx = fixture();
        let f = vector(&fx["frequency_hz"]);
        let z: Vec<Complex64> = vector(&fx["z_re"])
            .into_iter()
            .zip(vector(&fx["z_im"]))
            .map(|(re, im)| Complex64::new(re, im))
            .collect();
        let setup = DrtSetup::new(&f, DrtOptions::default()).unwrap();
        let w: Vec<f64> = z.iter().map(|v| 1.0 / v.norm()).collect();
        let r_ref = z.iter().fold(0.0f64, |a, v| a.max(v.norm()));
        let (a, b) = setup.design(&z, &w, r_ref);
        assert!((&a - matrix(&fx["design"])).amax() < 1e-11);
        assert!((&b - DVector::from_vec(vector(&fx["data"]))).amax() < 1e-14);
        assert!((&setup.penalty - matrix(&fx["penalty"])).amax() < 1e-9);
    }

    #[test]
    fn drt_regularised_nnls_matches_scipy() {
        // Reference: scipy.optimize.nnls on the augmented system of the same problem (drt_reference.py).
        let fx = fixture();
        let c_mat = matrix(&fx["design"]);
        let b = DVector::from_vec(vector(&fx["data"]));
        let pen = matrix(&fx["penalty"]);
        let mut problem = Problem::new(&c_mat, &b, &pen);
        for case in fx["cases"].as_array().unwrap() {
            let lambda = case["lambda"].as_f64().unwrap();
            let want = DVector::from_vec(vector(&case["x"]));
            problem.warm = false;
            problem.eval(lambda).unwrap();
            let dev = (&problem.x - &want).amax() / want.amax();
            eprintln!("λ = {lambda}: max |x − x_scipy| / max x_scipy = {dev:.1e}");
            assert!(
                dev < 1e-9,
                "λ = {lambda}: x deviates by {dev:e} relative to max x"
            );
            let r = &c_mat * &problem.x - &b;
            let obj = r.norm_squared() + lambda * problem.x.dot(&(&pen * &problem.x));
            let want_obj = case["objective"].as_f64().unwrap();
            assert!(
                obj <= want_obj * (1.0 + 1e-9),
                "λ = {lambda}: objective {obj} vs SciPy {want_obj}"
            );
            eprintln!("λ = {lambda}: objective {obj:.12e}, SciPy {want_obj:.12e}");
            assert_rel!(obj, want_obj, 1e-8, "objective");
            let free = problem.x.iter().filter(|v| **v > 0.0).count() as u64;
            assert_eq!(
                free,
                case["free"].as_u64().unwrap(),
                "λ = {lambda}: free variables"
            );
        }
    }

    #[test]
    fn drt_zarc_matches_cole_cole_distribution() {
        // ZARC R/(1 + (jωτ₀)^φ) written as R1|Q1 with Q = τ₀^φ/R, n = φ (REFERENCES.md §1); its DRT is
        // the Cole–Cole distribution (Cole & Cole 1941), peaked at τ₀ with area R and height
        // (R/2π)·tan(φπ/2).
        let (r0, r, tau0, phi): (f64, f64, f64, f64) = (10.0, 100.0, 1e-3, 0.8);
        let s = spectrum("R0 + R1|Q1", &[r0, r, tau0.powf(phi) / r, phi], None);
        let res = drt(&s, DrtOptions::default()).unwrap();
        assert_eq!(res.peaks.len(), 1, "{:?}", res.peaks);
        let p = res.peaks[0];
        // Stated tolerance: the peak within 2 % of τ₀ (0.009 decades), the area within 2 % of R.
        assert_rel!(p.tau_s, tau0, 0.02, "peak τ");
        assert_rel!(p.resistance_ohm, r, 0.02, "peak area");
        assert_rel!(res.r_pol_ohm, r, 0.02, "polarisation resistance");
        assert_rel!(
            p.gamma_ohm,
            r / (2.0 * PI) * (phi * PI / 2.0).tan(),
            0.05,
            "peak height"
        );
        assert_rel!(res.r_inf_ohm, r0, 0.01, "R∞");
        // Shape: within the measured τ range, γ follows the analytic distribution to 3 % of its peak.
        let peak = cole_cole(r, tau0, phi, tau0);
        let (tmin, tmax) = (1.0 / (2.0 * PI * 1e5), 1.0 / (2.0 * PI * 0.1));
        for (t, g) in res.tau_s.iter().zip(&res.gamma_ohm) {
            if (tmin..=tmax).contains(t) {
                let want = cole_cole(r, tau0, phi, *t);
                assert!(
                    (g - want).abs() < 0.03 * peak,
                    "γ({t:e}) = {g}, Cole–Cole {want}"
                );
            }
        }
        assert!(res.residual_rms < 1e-3, "rms residual {}", res.residual_rms);
    }

    #[test]
    fn drt_single_rc_gives_one_peak_at_rc() {
        // An RC element's DRT is R·δ(ln τ − ln RC) (REFERENCES.md §5): one peak at τ = RC with area R.
        let (r, c) = (50.0, 20e-6);
        for noise in [
            None,
            Some(Noise {
                relative: 0.002,
                seed: 11,
            }),
        ] {
            let s = spectrum("R0 + R1|C1", &[5.0, r, c], noise);
            let res = drt(&s, DrtOptions::default()).unwrap();
            assert_eq!(res.peaks.len(), 1, "noise {noise:?}: {:?}", res.peaks);
            assert_rel!(res.peaks[0].tau_s, r * c, 0.02, "τ");
            assert_rel!(
                res.peaks[0].frequency_hz,
                1.0 / (2.0 * PI * r * c),
                0.02,
                "frequency"
            );
            assert_rel!(res.peaks[0].resistance_ohm, r, 0.02, "area");
            assert_rel!(res.r_inf_ohm, 5.0, 0.02, "R∞");
        }
    }

    #[test]
    fn drt_two_arcs_a_decade_apart_give_two_peaks() {
        // Two RC arcs: two δ functions, at R1·C1 and R2·C2 (REFERENCES.md §5).
        for (c2, noise) in [
            (5e-6, None), // one decade apart
            (
                5e-5,
                Some(Noise {
                    relative: 0.002,
                    seed: 5,
                }),
            ), // two decades, noisy
        ] {
            let (r1, c1, r2) = (40.0, 2.5e-7, 20.0);
            let s = spectrum("R0 + R1|C1 + R2|C2", &[2.0, r1, c1, r2, c2], noise);
            let res = drt(&s, DrtOptions::default()).unwrap();
            assert_eq!(res.peaks.len(), 2, "C2 = {c2}: {:?}", res.peaks);
            assert_rel!(res.peaks[0].tau_s, r1 * c1, 0.05, "τ1");
            assert_rel!(res.peaks[1].tau_s, r2 * c2, 0.05, "τ2");
            assert_rel!(res.peaks[0].resistance_ohm, r1, 0.03, "R1");
            assert_rel!(res.peaks[1].resistance_ohm, r2, 0.03, "R2");
            let sum: f64 = res.peaks.iter().map(|p| p.resistance_ohm).sum();
            assert_rel!(sum, res.r_pol_ohm, 0.005, "peak areas add up to ∫γ");
        }
    }

    #[test]
    fn drt_options_all_run_and_agree_on_an_rc() {
        let s = spectrum(
            "R0 + R1|C1",
            &[5.0, 50.0, 20e-6],
            Some(Noise {
                relative: 0.002,
                seed: 2,
            }),
        );
        let variants = [
            DrtOptions::default().with_lambda(LambdaMethod::LCurve),
            DrtOptions::default().with_lambda(LambdaMethod::Fixed(1e-4)),
            DrtOptions::default().with_penalty(Penalty::First),
            DrtOptions::default().with_weighting(Weighting::Unit),
            DrtOptions::default().with_part(Part::Real),
            DrtOptions::default().with_part(Part::Imaginary),
        ];
        for o in variants {
            let res = drt(&s, o).unwrap();
            assert_eq!(res.peaks.len(), 1, "{o:?}: {:?}", res.peaks);
            assert_rel!(res.peaks[0].tau_s, 1e-3, 0.05, "τ");
            assert_rel!(res.peaks[0].resistance_ohm, 50.0, 0.03, "R");
            assert_rel!(res.r_inf_ohm, 5.0, 0.05, "R∞");
            assert_eq!(
                res.lambda_scan.is_empty(),
                matches!(o.lambda(), LambdaMethod::Fixed(_))
            );
        }
    }

    #[test]
    fn drt_recovers_a_series_inductance() {
        let s = spectrum("L0 + R0 + R1|C1", &[2e-6, 5.0, 50.0, 20e-6], None);
        for part in [Part::Both, Part::Real] {
            let res = drt(
                &s,
                DrtOptions::default().with_inductance(true).with_part(part),
            )
            .unwrap();
            assert_rel!(res.inductance_h.unwrap(), 2e-6, 0.02, "L");
            assert_eq!(res.peaks.len(), 1);
            assert_rel!(res.peaks[0].resistance_ohm, 50.0, 0.02, "R");
        }
        let res = drt(&s, DrtOptions::default()).unwrap();
        assert_eq!(res.inductance_h, None);
    }

    #[test]
    fn drt_setup_reuse_gives_the_same_result() {
        let s = spectrum(
            "R0 + R1|C1",
            &[5.0, 50.0, 20e-6],
            Some(Noise {
                relative: 0.002,
                seed: 9,
            }),
        );
        let setup = DrtSetup::new(&s.frequency_hz, DrtOptions::default()).unwrap();
        let a = setup.solve(&s.z).unwrap();
        let b = setup.solve(&s.z).unwrap();
        assert_eq!(a, b);
        assert_eq!(a, drt(&s, DrtOptions::default()).unwrap());
    }

    #[test]
    fn drt_rejects_bad_input() {
        let good = spectrum("R0 + R1|C1", &[5.0, 50.0, 20e-6], None);
        let kind = |s: &Spectrum| drt(s, DrtOptions::default()).unwrap_err().kind().clone();
        assert_eq!(kind(&Spectrum::default()), DrtErrorKind::Empty);
        let mut few = good.clone();
        few.frequency_hz.truncate(4);
        few.z.truncate(4);
        assert_eq!(
            kind(&few),
            DrtErrorKind::TooFewPoints {
                found: 4,
                needed: 5
            }
        );
        let mut repeated = good.clone();
        repeated.frequency_hz = vec![10.0; good.len()];
        assert!(matches!(
            kind(&repeated),
            DrtErrorKind::TooFewPoints { found: 1, .. }
        ));
        for bad in [f64::NAN, -1.0, 0.0, f64::INFINITY] {
            let mut s = good.clone();
            s.frequency_hz[3] = bad;
            assert!(
                matches!(kind(&s), DrtErrorKind::BadFrequency { point: 4, .. }),
                "{bad}"
            );
        }
        let mut s = good.clone();
        s.z[7].im = f64::NAN;
        assert_eq!(kind(&s), DrtErrorKind::NonFiniteImpedance { point: 8 });
        let mut s = good.clone();
        s.z[0] = Complex64::new(0.0, 0.0);
        assert_eq!(kind(&s), DrtErrorKind::ZeroImpedance { point: 1 });
        let mut s = good.clone();
        s.z.pop();
        assert!(matches!(kind(&s), DrtErrorKind::LengthMismatch { .. }));
        let setup = DrtSetup::new(&good.frequency_hz, DrtOptions::default()).unwrap();
        assert!(matches!(
            setup.solve(&good.z[1..]).unwrap_err().kind(),
            DrtErrorKind::SetupMismatch { .. }
        ));
        let bad_options = [
            DrtOptions::default().with_rbf_width(0.0),
            DrtOptions::default().with_rbf_width(f64::NAN),
            DrtOptions::default().with_lambda(LambdaMethod::Fixed(-1.0)),
            DrtOptions::default().with_lambda(LambdaMethod::Fixed(f64::NAN)),
            DrtOptions::default().with_lambda_range(1.0, 1e-3),
            DrtOptions::default().with_lambda_range(0.0, 1.0),
            DrtOptions::default().with_grid_per_decade(1),
            DrtOptions::default().with_scan_per_decade(0),
            DrtOptions::default().with_peak_threshold(1.0),
        ];
        for o in bad_options {
            let e = drt(&good, o).unwrap_err();
            assert!(matches!(e.kind(), DrtErrorKind::BadOption { .. }), "{o:?}");
            assert!(e.is_input_error());
            let text = e.to_string();
            assert!(
                text.contains("out of range") && !text.ends_with('.'),
                "{text}"
            );
        }
        // Messages name the offending point.
        let mut s = good.clone();
        s.frequency_hz[3] = -1.0;
        assert_eq!(
            drt(&s, DrtOptions::default()).unwrap_err().to_string(),
            "point 4: frequency -1 Hz is not usable (it must be positive, with 2πf and 1/(2πf) finite)"
        );
    }

    /// Issue 13: the basis had one function per distinct frequency, so memory grew as N² and time as
    /// N³ (2,000 points took over a minute). It is bounded by MAX_BASIS whatever N; the times are in
    /// `benches/drt.rs`.
    #[test]
    fn the_basis_is_bounded_whatever_the_number_of_points() {
        let f: Vec<f64> = (0..1500)
            .map(|i| 1e5 * 10f64.powf(-7.0 * i as f64 / 1499.0))
            .collect();
        let setup = DrtSetup::new(&f, DrtOptions::default()).unwrap();
        assert_eq!(setup.centres.len(), MAX_BASIS);
        assert_eq!(setup.kernel_re.shape(), (1500, MAX_BASIS));
        assert_eq!(setup.penalty.shape(), (MAX_BASIS + 1, MAX_BASIS + 1));
        // The centres still span the measured range, evenly.
        let (lo, hi) = (-(2.0 * PI * 1e5f64).ln(), -(2.0 * PI * 1e-2f64).ln());
        assert!((setup.centres[0] - lo).abs() < 1e-9);
        assert!((setup.centres[MAX_BASIS - 1] - hi).abs() < 1e-9);
        // At and below the cap: one centre per distinct frequency, as before.
        let setup = DrtSetup::new(&f[..MAX_BASIS], DrtOptions::default()).unwrap();
        assert_eq!(setup.centres.len(), MAX_BASIS);
        assert!((setup.centres[1] + (2.0 * PI * f[1]).ln()).abs() < 1e-12);
        // A thinned basis still recovers a known arc: R0 + R1|C1 gives one peak at τ = R1·C1 holding
        // R1 (common practice for an ideal RC element).
        let plan = Plan::compile(&parse("R0 + R1|C1").unwrap());
        let every_fourth: Vec<f64> = f.iter().step_by(4).copied().collect();
        let s = simulate(&plan, &[5.0, 50.0, 20e-6], &every_fourth, None);
        let r = drt(&s, DrtOptions::default()).unwrap();
        assert_eq!(r.peaks.len(), 1, "{:?}", r.peaks);
        assert_rel!(r.peaks[0].tau_s, 1e-3, 0.05, "τ of the peak");
        assert_rel!(r.peaks[0].resistance_ohm, 50.0, 0.02, "R of the peak");
    }

    /// Issue 13: impedances from 1e-300 to 1e300 Ω give the same DRT up to the scale (γ, R∞ and the
    /// peak resistances scale with Z, τ does not; the model is linear in them).
    #[test]
    fn the_drt_does_not_depend_on_the_scale_of_z() {
        let base = spectrum(
            "R0 + R1|Q1",
            &[5.0, 50.0, 1e-4, 0.85],
            Some(Noise {
                relative: 0.002,
                seed: 9,
            }),
        );
        let reference = drt(&base, DrtOptions::default()).unwrap();
        for scale in [1e-250, 1e-160, 1e200, 1e250] {
            let mut s = base.clone();
            s.z.iter_mut().for_each(|z| *z *= scale);
            for weighting in [Weighting::Modulus, Weighting::Unit] {
                let o = DrtOptions::default().with_weighting(weighting);
                let r = drt(&s, o).unwrap();
                let r0 = drt(&base, o).unwrap();
                let what = format!("× {scale:e}, {weighting:?}");
                assert_rel!(r.lambda, r0.lambda, 1e-9, format!("λ {what}"));
                assert_rel!(
                    r.r_inf_ohm / scale,
                    r0.r_inf_ohm,
                    1e-6,
                    format!("R∞ {what}")
                );
                assert_rel!(
                    r.r_pol_ohm / scale,
                    r0.r_pol_ohm,
                    1e-6,
                    format!("Rpol {what}")
                );
                assert_eq!(r.peaks.len(), r0.peaks.len(), "{what}");
                assert_rel!(r.residual_rms, r0.residual_rms, 1e-6, format!("rms {what}"));
            }
        }
        assert!(reference.r_pol_ohm > 0.0);
    }

    /// Issue 13: degenerate spectra give a result or a typed error, never a panic.
    #[test]
    fn degenerate_spectra_give_results_or_typed_errors() {
        let good = spectrum("R0 + R1|C1", &[5.0, 50.0, 20e-6], None);
        // All impedances equal: a pure resistance, no polarisation.
        let flat = Spectrum::new(
            good.frequency_hz.clone(),
            vec![Complex64::new(3.0, 0.0); good.len()],
        );
        let r = drt(&flat, DrtOptions::default()).unwrap();
        assert_rel!(r.r_inf_ohm, 3.0, 1e-3, "R∞ of a resistor");
        assert!(r.r_pol_ohm.abs() < 1e-3 * 3.0, "Rpol {}", r.r_pol_ohm);
        // Every frequency twice.
        let mut twice = good.clone();
        twice.frequency_hz.extend(good.frequency_hz.clone());
        twice.z.extend(good.z.clone());
        assert!(drt(&twice, DrtOptions::default()).is_ok());
        // 1 to 4 points: too few.
        for k in 1..5 {
            let s = Spectrum::new(good.frequency_hz[..k].to_vec(), good.z[..k].to_vec());
            assert!(matches!(
                drt(&s, DrtOptions::default()).unwrap_err().kind(),
                DrtErrorKind::TooFewPoints { .. }
            ));
        }
        // ω = 2πf overflows.
        let mut s = good.clone();
        s.frequency_hz[2] = f64::MAX;
        assert!(matches!(
            drt(&s, DrtOptions::default()).unwrap_err().kind(),
            DrtErrorKind::BadFrequency { point: 3, .. }
        ));
        // An infinite impedance, and a modulus too small to weight next to the others.
        let mut s = good.clone();
        s.z[1] = Complex64::new(f64::INFINITY, 0.0);
        assert!(drt(&s, DrtOptions::default()).is_err());
        let mut s = good.clone();
        s.z[0] = Complex64::new(1e300, 0.0);
        s.z[1] = Complex64::new(1e-300, 0.0);
        assert!(matches!(
            drt(&s, DrtOptions::default()).unwrap_err().kind(),
            DrtErrorKind::ZeroImpedance { point: 2 }
        ));
        // Frequencies over the whole range of f64.
        let f: Vec<f64> = (0..12).map(|i| 10f64.powi(-300 + 50 * i)).collect();
        let s = Spectrum::new(f, vec![Complex64::new(1.0, -0.1); 12]);
        if let Ok(r) = drt(&s, DrtOptions::default()) {
            assert!(r.r_inf_ohm.is_finite());
        }
    }
}
