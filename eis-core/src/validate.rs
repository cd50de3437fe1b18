//! Kramers–Kronig validation by the linear Voigt-series test of Schönleber, Klotz & Ivers-Tiffée
//! (2014, Electrochim. Acta 131, 20–27, "A Method for Improving the Robustness of linear
//! Kramers-Kronig Validity Tests").
//!
//! The spectrum is fitted by a model that satisfies the Kramers–Kronig relations by construction,
//!
//! ```text
//! Ẑ(ω) = R₀ + Σₖ Rₖ/(1 + jωτₖ)  [+ jωL]  [+ 1/(jωC)]
//! ```
//!
//! with the τₖ fixed and log-spaced from 1/ω_max to 1/ω_min, so that the fit is linear in R₀, Rₖ, L
//! and 1/C. Real and imaginary parts are fitted together with weight 1/|Zᵢ|² (a weighted linear least
//! squares problem, solved by Cholesky on the normal equations with a closed form of the Gram matrix
//! and an SVD fallback for nearly dependent columns; see `validate/solve.rs`). The number of elements
//! M is raised from 1 until
//!
//! ```text
//! μ = 1 − Σ_{Rₖ<0} |Rₖ| / Σ_{Rₖ≥0} |Rₖ|
//! ```
//!
//! falls below the threshold c (0.85 in the paper): alternating signs of Rₖ show that the model starts
//! to fit noise.
//!
//! # Choice of M: how it differs from the paper
//!
//! The paper keeps the first M with μ < c. On smooth consistent spectra that stops too early: with a
//! coarse grid of τₖ, negative Rₖ also appear while the model still under-fits (a sharp time constant
//! between two grid points is interpolated with both signs), so μ dips at 7–13 elements over six
//! decades and leaves residuals of 0.4–3 % on physics-model spectra, ideal RC arcs and depressed arcs.
//! The question of the linear test is whether *some* Kramers–Kronig-consistent model fits the data
//! within their noise (Boukamp 1995, J. Electrochem. Soc. 142, 1885–1894); μ is kept as the guard
//! against reaching the data only by over-fitting. Here:
//!
//! - **Smallest passing M.** M is raised from 1; the first fit with μ ≥ c that passes the verdict
//!   below is kept. A fit that needs alternating signs (μ < c) is never kept.
//! - **Improvement beyond the noise.** Larger M then replace it only when they pass too and lower the
//!   weighted sum of squares by more than fitting noise would, (q + 3√(2q))·σ̂² for q more elements
//!   (σ̂ the scatter below); the search ends ten elements after the last such gain. Noisy
//!   spectra stay near their first passing M; noise-free ones are fitted far below the limits.
//! - **c = 0.5** by default (the paper's 0.85 is for its own stopping rule): consistent spectra pass
//!   at μ between 0.5 and 1 (physics-model spectra, RC arcs at 6–7 points per decade), while the fits
//!   that would absorb a drift or corrupted points have μ below 0.4 in the tests.
//! - **Grid.** The τₖ are log-spaced from 1/ω_max lowered by half a decade (a process faster than the
//!   highest frequency still shapes the highest points) to 1/ω_min, as in the paper at that end (an open
//!   tail there is the series capacitance's job, and slower τₖ would let the fit follow a drift that
//!   builds up at the end of a sweep from high to low frequency).
//! - **Leverage.** A point's residual is judged standardised by its leverage h (e/√(1 − h), the hat
//!   matrix of the linear fit), so that edge points, which the fit can follow more closely, are judged
//!   like interior ones.
//! - **Failing spectra.** When no M up to the cap passes, the report shows the best fit (smallest χ²)
//!   with μ ≥ c, whose residuals locate the fault.
//! - **Cap.** M ≤ N/2 by default ([`KkOptions::max_elements`]), and whatever the options,
//!   M ≤ [`MAX_ELEMENTS`]: the work is O(N·M) in memory and O(N·M²) in time for the whole search, so a
//!   spectrum of 100,000 points needs tens of megabytes.
//! - **Scale.** The problem is solved on Z divided by the geometric mean of |Zᵢ|, so spectra from
//!   10⁻³⁰⁰ to 10³⁰⁰ Ω give the same verdict and the same relative results.
//! - **Too short.** Spectra of fewer than [`MIN_POINTS`] points are an error
//!   ([`KkError::TooFewPoints`]), not a verdict.
//!
//! The residuals relative to |Z|, Δ′ᵢ = (Z′ᵢ − Ẑ′ᵢ)/|Zᵢ| and Δ″ᵢ = (Z″ᵢ − Ẑ″ᵢ)/|Zᵢ|, then
//! decide the verdict.
//!
//! # Verdict
//!
//! The rule of thumb that residuals of a good measurement are random and stay within about ±1 %, with
//! no trend, is common practice, not a standard. Taken literally as a limit on every point it fails
//! honest data: with noise of σ = 0.5 % of |Z| on each part, the largest of 142 residuals is about
//! 3σ = 1.5 %. So the limits here are set against the residuals' own scatter, with fixed floors taken
//! from the rule of thumb. Three tests, each of which makes a spectrum *suspect*:
//!
//! 1. **Points** (outliers, corrupted points): a point fails when its |Δ′| or |Δ″| exceeds the
//!    floor [`KkOptions::max_residual_percent`] (default 1 %) and, divided by √(1 − h), also
//!    [`KkOptions::outlier_factor`] (default 5) times the scatter σ̂. σ̂ is estimated from differences of neighbouring residuals
//!    in frequency order, median |Δᵢ₊₁ − Δᵢ|/(0.6745·√2), so that neither a smooth misfit nor a few
//!    bad points inflate it (the successive-difference estimate of von Neumann et al. 1941 in a
//!    median form; common practice). For Gaussian noise the chance that any of 142 residuals exceeds
//!    5σ is about 10⁻⁴; a point within ±1 % is never called an outlier.
//! 2. **Trend** (drift, non-stationarity): the Wald–Wolfowitz runs test on the signs of Δ′ and Δ″ in
//!    frequency order (Wald & Wolfowitz 1940) gives fewer runs than chance by more than
//!    [`KkOptions::runs_z`] (default 3.5) standard deviations (false alarm about 2·10⁻⁴), *and* the
//!    systematic part of the residuals, √max(0, rms² − σ̂²), exceeds [`KkOptions::trend_percent`]
//!    (default 0.3 %). The floor keeps the small, smooth interpolation error of noise-free spectra
//!    (up to about 0.25 % rms for an ideal RC arc) from counting as a trend.
//! 3. **Rms**: the root mean square of all Δ exceeds [`KkOptions::rms_residual_percent`] (default 2 %,
//!    twice the rule of thumb): data this noisy cannot show a violation of a few per cent at all.
//!
//! Checked on the circuit library (tests in `validate/tests.rs`, seeded noise): clean spectra at 0.1,
//! 0.5 and 1 % noise pass; Rct growing 10–30 % over the sweep is flagged at 0.1 and 0.5 % noise;
//! two points 4 % high are flagged at 0.1 and 0.5 % noise. **Limit of detection:** a violation is
//! only seen when it stands out of the noise; 10 % drift under 1 % noise leaves a systematic residual
//! of about half the noise and passes, which is the honest answer for such data.
//!
//! **Suspect range.** For failing points, the frequencies of those points; for a trend, the points
//! whose residual exceeds the systematic part (or σ̂, if larger), which for drift are the late,
//! low-frequency points; for the rms test, the points above the rms limit; all points when none
//! stands out. The old fixed rule (every point within 1 %, rms within 0.5 %) is
//! `KkOptions { outlier_factor: 0.0, rms_residual_percent: 0.5, runs_z: f64::INFINITY, .. }`.
//!
//! ```
//! use eis_core::{circuit::parse, eval::{Plan, log_frequencies}, simulate::simulate};
//! use eis_core::validate::{kramers_kronig, KkOptions};
//! let plan = Plan::compile(&parse("R0 + Rct|Cdl").unwrap());
//! let s = simulate(&plan, &[10.0, 100.0, 2e-5], &log_frequencies(1e5, 0.1, 10), None);
//! let r = kramers_kronig(&s, &KkOptions::default()).unwrap();
//! assert!(r.valid && r.residual_max_percent < 0.1);
//! ```

use crate::eval::angular;
use crate::spectrum::{PointRef, Spectrum};
use num_complex::Complex64;
pub use solve::MU_FLOOR;
use solve::{Design, Fit, Workspace};
use verdict::judge;

mod solve;
mod verdict;

/// Whether to add a series element for a capacitive or inductive tail.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Tail {
    /// Capacitance when −Z″ still rises at the lowest frequency; inductance when Z″ > 0 at the highest.
    #[default]
    Auto,
    /// Always.
    On,
    /// Never.
    Off,
}

impl Tail {
    /// Whether the element is added: with [`Tail::Auto`], as the data tell (`auto`).
    fn decide(self, auto: impl FnOnce() -> bool) -> bool {
        match self {
            Tail::On => true,
            Tail::Off => false,
            Tail::Auto => auto(),
        }
    }
}

/// Settings of the test.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct KkOptions {
    /// μ threshold c: fits with μ below it count as over-fitted and are never kept (default 0.5; the
    /// paper's 0.85 belongs to its own stopping rule, see the module docs).
    pub mu_threshold: f64,
    /// A fixed number of elements instead of the μ search (default: none; capped at [`MAX_ELEMENTS`]).
    pub elements: Option<usize>,
    /// Most elements the μ search tries (default: half the number of points, at most
    /// [`MAX_ELEMENTS`]; larger values are capped there too).
    pub max_elements: Option<usize>,
    /// Series capacitance (default [`Tail::Auto`]).
    pub capacitance: Tail,
    /// Series inductance (default [`Tail::Auto`]).
    pub inductance: Tail,
    /// Per-point floor, % of |Z| (default 1): a point is flagged only when its |Δ′| or |Δ″| exceeds
    /// both this and [`KkOptions::outlier_factor`] times the residual scatter.
    pub max_residual_percent: f64,
    /// Multiple of the residual scatter σ̂ above which a point is an outlier (default 5).
    pub outlier_factor: f64,
    /// Largest root-mean-square residual, in % of |Z|, for a valid spectrum (default 2).
    pub rms_residual_percent: f64,
    /// Critical standard score of the runs test: fewer sign runs than expected by more than this many
    /// standard deviations mean a trend (default 3.5).
    pub runs_z: f64,
    /// Smallest systematic residual, % of |Z|, that a trend must reach to be flagged (default 0.3).
    pub trend_percent: f64,
}

impl Default for KkOptions {
    fn default() -> Self {
        KkOptions {
            mu_threshold: 0.5,
            elements: None,
            max_elements: None,
            capacitance: Tail::Auto,
            inductance: Tail::Auto,
            max_residual_percent: 1.0,
            outlier_factor: 5.0,
            rms_residual_percent: 2.0,
            runs_z: 3.5,
            trend_percent: 0.3,
        }
    }
}

/// Fewest points the test accepts. With fewer, the cap of half the number of points leaves fewer
/// Voigt elements than the μ search needs to see over-fitting (five successive M), and the scatter
/// and runs test of the verdict have too few residuals to tell noise from a trend: such a spectrum
/// is reported as too short to test, never as valid.
pub const MIN_POINTS: usize = 10;

/// Most Voigt elements the test ever uses, whatever the number of points or
/// [`KkOptions::elements`]. Memory and time per M grow as N·M, so this bounds the test of a spectrum
/// of N points to about 16·N·`MAX_ELEMENTS` bytes (160 MB for 100,000 points). A hundred elements
/// over seven decades are fourteen per decade, far past the density where μ drops for measured
/// spectra (M ≈ 15–30, module docs), and spectra of up to 200 points are tested as before the cap.
/// A spectrum over a much wider range is better tested in parts (`--fmin`/`--fmax` in the CLI).
pub const MAX_ELEMENTS: usize = 100;

/// Why the test could not run.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum KkError {
    /// Fewer than [`MIN_POINTS`] points: too few to test, which is not the same as valid.
    #[error(
        "too few points to test: the Kramers-Kronig check needs at least {MIN_POINTS} points, the spectrum has {0}"
    )]
    TooFewPoints(usize),
    /// Frequencies and impedances differ in number.
    #[error("{frequencies} frequencies but {impedances} impedance values")]
    LengthMismatch {
        /// Number of frequencies.
        frequencies: usize,
        /// Number of impedances.
        impedances: usize,
    },
    /// A frequency that is not finite and positive, or an impedance that is not finite and non-zero.
    #[error("{0} has a non-positive or non-finite frequency or impedance")]
    BadPoint(PointRef),
    /// All frequencies are equal, so no range of time constants can be spread.
    #[error("all frequencies are equal")]
    NoRange,
    /// The computation ran out of the range of floating-point numbers: frequencies or impedances that
    /// span hundreds of decades within one spectrum.
    #[error(
        "the check cannot be computed on these data: the frequencies or impedances span too many decades"
    )]
    OutOfRange,
}

/// Which parts of the verdict failed (all false for a valid spectrum).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize)]
pub struct KkFailures {
    /// Some point's residual exceeds the per-point limit ([`KkReport::point_limit_percent`]).
    pub points: bool,
    /// The rms residual exceeds [`KkOptions::rms_residual_percent`].
    pub rms: bool,
    /// The residuals follow a trend: the runs test fails and the systematic part exceeds
    /// [`KkOptions::trend_percent`].
    pub trend: bool,
}

/// The outcome of the test.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct KkReport {
    /// None of the three tests failed (see the module docs).
    pub valid: bool,
    /// Which tests failed.
    pub failed: KkFailures,
    /// μ of the chosen fit, finite: at least [`MU_FLOOR`].
    pub mu: f64,
    /// Whether the automatic search found a fit with μ ≥ c that passes (always true for a fixed M);
    /// false for a suspect spectrum, whose report shows the best fit with μ ≥ c.
    pub mu_reached: bool,
    /// Number of Voigt elements M.
    pub elements: usize,
    /// Series resistance R₀, Ω.
    pub r0: f64,
    /// Rₖ, Ω.
    pub resistances: Vec<f64>,
    /// τₖ, s.
    pub time_constants: Vec<f64>,
    /// Series capacitance, F, if one was fitted (infinite when its fitted 1/C is zero).
    pub capacitance: Option<f64>,
    /// Series inductance, H, if one was fitted.
    pub inductance: Option<f64>,
    /// Frequencies of the residuals, Hz, in the spectrum's order.
    pub frequency_hz: Vec<f64>,
    /// Δ′ᵢ as a fraction of |Zᵢ|.
    pub residual_re: Vec<f64>,
    /// Δ″ᵢ as a fraction of |Zᵢ|.
    pub residual_im: Vec<f64>,
    /// Root mean square of all Δ′ and Δ″, %.
    pub residual_rms_percent: f64,
    /// Largest |Δ′| or |Δ″|, %.
    pub residual_max_percent: f64,
    /// Point-to-point scatter σ̂ of the residuals, from successive differences, %.
    pub residual_scatter_percent: f64,
    /// Part of the rms residual not explained by the scatter, √max(0, rms² − σ̂²), %.
    pub residual_systematic_percent: f64,
    /// Standard score of the number of sign runs of the residuals (about N(0, 1) when random).
    pub runs_z: f64,
    /// Per-point limit in force, max(max_residual_percent, outlier_factor·σ̂), %.
    pub point_limit_percent: f64,
    /// Lowest and highest frequency (Hz) of the points that make the spectrum suspect, if any (see
    /// the module docs).
    pub suspect_frequency_range_hz: Option<(f64, f64)>,
    /// The per-point floor used, %.
    pub max_residual_percent: f64,
    /// The rms limit used, %.
    pub rms_residual_percent: f64,
}

/// Points whose residual exceeds this multiple of the systematic part (or of the scatter, if larger)
/// make up the suspect range of a trend.
const TREND_RANGE_FACTOR: f64 = 1.0;

/// Elements tried beyond the kept fit without a significant improvement before the search ends.
const PATIENCE: usize = 10;

/// Rows (2N) above which the leverages are not computed (see [`kramers_kronig`]).
const LEVERAGE_MAX_ROWS: usize = 20_000;

/// The automatic choice of M (module docs): the smallest M whose fit has μ ≥ c and passes the
/// verdict (judged first without leverages, which is cheap and never stricter, then with them),
/// replaced by larger passing M that improve χ² beyond the noise. Returns that M and true; when no
/// M up to `m_max` passes, the M of the best fit (smallest χ²) among those with μ ≥ c, or 1 if none
/// has, and false.
fn search(
    ws: &mut Workspace,
    h: &mut [f64],
    n: usize,
    m_max: usize,
    order: &[usize],
    options: &KkOptions,
    buf: &mut Vec<f64>,
) -> (usize, bool) {
    // The passing fit kept so far (M, χ²), and the best fit with μ ≥ c for a failing spectrum.
    let mut kept: Option<(usize, f64)> = None;
    let mut best: Option<(usize, f64)> = None;
    let fixed = ws.fixed();
    for m in 1..=m_max {
        if kept.is_some_and(|(k, _)| m > k + PATIENCE) {
            break;
        }
        let f = ws.fit(m);
        if f.mu < options.mu_threshold {
            continue;
        }
        if best.is_none_or(|(_, chi2)| f.chi2 < chi2) {
            best = Some((m, f.chi2));
        }
        let (re, im) = ws.r.split_at(n);
        let (stats, failures) = judge(re, im, &[], order, options, buf);
        if failures.any() {
            continue;
        }
        // Beyond the first passing fit, a larger M must improve on the kept one by more than fitting
        // noise would: q more unknowns lower χ² by about q·σ² on noise alone (χ² with q degrees of
        // freedom, mean q, standard deviation √(2q)), so the gain must exceed (q + 3√(2q))·σ̂²
        // (the χ² test of an added term in linear least squares; Bevington & Robinson 2003, "Data
        // Reduction and Error Analysis for the Physical Sciences", ch. 11, from memory).
        if let Some((k, chi2)) = kept {
            let q = (m - k) as f64;
            let noise = (q + 3.0 * (2.0 * q).sqrt()) * stats.scatter * stats.scatter;
            if chi2 - f.chi2 <= noise {
                continue;
            }
        }
        ws.leverage(fixed + m, h);
        let (re, im) = ws.r.split_at(n);
        if !judge(re, im, h, order, options, buf).1.any() {
            kept = Some((m, f.chi2));
        }
    }
    match kept {
        Some((m, _)) => (m, true),
        None => (best.map_or(1, |(m, _)| m), false),
    }
}

/// Default cap of the μ search: half the number of points (see the module docs).
fn default_max_elements(n: usize) -> usize {
    (n / 2).max(1)
}

fn model(f: &Fit, w: f64, d: Design) -> num_complex::Complex64 {
    let m = f.taus.len();
    let mut z = num_complex::Complex64::new(f.x[0], 0.0);
    for (k, &tau) in f.taus.iter().enumerate() {
        // R/(1 + jx) in parts, finite for x → 0 and x → ∞ (complex division would give NaN there).
        let x = w * tau;
        z += num_complex::Complex64::new(f.x[1 + k] / (1.0 + x * x), -f.x[1 + k] / (x + 1.0 / x));
    }
    let mut c = 1 + m;
    if d.inductance {
        z += num_complex::Complex64::new(0.0, w * f.x[c]);
        c += 1;
    }
    if d.capacitance {
        z += num_complex::Complex64::new(0.0, -f.x[c] / w);
    }
    z
}

/// Runs the test on a spectrum (frequencies in any order).
///
/// # Errors
///
/// [`KkError`] for fewer than [`MIN_POINTS`] points, a bad point or a single frequency; a spectrum that fails
/// the test is an `Ok` report with `valid == false`.
pub fn kramers_kronig(s: &Spectrum, options: &KkOptions) -> Result<KkReport, KkError> {
    let n = s.len();
    if s.z.len() != n {
        return Err(KkError::LengthMismatch {
            frequencies: n,
            impedances: s.z.len(),
        });
    }
    if n < MIN_POINTS {
        return Err(KkError::TooFewPoints(n));
    }
    let w = angular_frequencies(s)?;
    // Solve on data divided by their typical modulus (geometric mean of |Zᵢ|), so that nothing
    // underflows or overflows for impedances anywhere from 1e-300 to 1e300 Ω; the residuals are
    // relative anyway, and the unknowns are scaled back at the end.
    let scale = typical_modulus(&s.z);
    let z: Vec<Complex64> = s.z.iter().map(|zi| zi / scale).collect();
    let (lo, hi) = extremes(&s.frequency_hz);
    if s.frequency_hz[lo] == s.frequency_hz[hi] {
        return Err(KkError::NoRange);
    }
    let design = Design {
        inductance: options.inductance.decide(|| z[hi].im > 0.0),
        capacitance: options
            .capacitance
            .decide(|| capacitive_tail(&s.frequency_hz, &z)),
    };
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&i, &j| s.frequency_hz[i].total_cmp(&s.frequency_hz[j]));
    // At most as many unknowns as equations, and at most MAX_ELEMENTS (memory and time O(N·M)).
    let m_cap = (2 * n)
        .saturating_sub(design.fixed())
        .clamp(1, MAX_ELEMENTS);
    let mut buf = Vec::with_capacity(2 * n);
    let m_max = match options.elements {
        Some(m) => m.clamp(1, m_cap),
        None => options
            .max_elements
            .unwrap_or(default_max_elements(n))
            .clamp(1, m_cap),
    };
    let mut ws = Workspace::new(&w, &z, design, m_max);
    // Leverages of the 2N rows; left at zero (no correction) for very long spectra, where they are
    // all tiny (p/2N on average) and computing them for each candidate M would cost O(N·M²).
    let mut h = vec![0.0; if 2 * n <= LEVERAGE_MAX_ROWS { 2 * n } else { 0 }];
    let (m, mu_reached) = match options.elements {
        Some(_) => (m_max, true),
        None => search(&mut ws, &mut h, n, m_max, &order, options, &mut buf),
    };
    let chosen = ws.fit(m);
    ws.leverage(design.fixed() + m, &mut h);
    let m = chosen.taus.len();
    let mut residual_re = Vec::with_capacity(n);
    let mut residual_im = Vec::with_capacity(n);
    for (zi, &wi) in z.iter().zip(&w) {
        let d = (zi - model(&chosen, wi, design)) / zi.norm();
        residual_re.push(d.re);
        residual_im.push(d.im);
    }
    let (stats, failures) = judge(&residual_re, &residual_im, &h, &order, options, &mut buf);
    let max = (0..n)
        .map(|i| residual_re[i].abs().max(residual_im[i].abs()))
        .fold(0.0, f64::max);
    let suspect = suspect_range(
        &s.frequency_hz,
        (&residual_re, &residual_im),
        &h,
        options,
        (&stats, failures),
    );
    // A failed test always names a range: all points when no single point stands out.
    let suspect = match suspect {
        None if failures.any() => Some((s.frequency_hz[lo], s.frequency_hz[hi])),
        r => r,
    };
    let mut c = 1 + m;
    let inductance = design.inductance.then(|| {
        c += 1;
        chosen.x[c - 1] * scale
    });
    // The scaled unknown is 1/(C·scale).
    let capacitance = design.capacitance.then(|| 1.0 / (chosen.x[c] * scale));
    let report = KkReport {
        valid: !failures.any(),
        failed: KkFailures {
            points: failures.points,
            rms: failures.rms,
            trend: failures.trend,
        },
        mu: chosen.mu,
        mu_reached,
        elements: m,
        r0: chosen.x[0] * scale,
        resistances: chosen.x[1..=m].iter().map(|r| r * scale).collect(),
        time_constants: chosen.taus.clone(),
        capacitance,
        inductance,
        frequency_hz: s.frequency_hz.clone(),
        residual_re,
        residual_im,
        residual_rms_percent: 100.0 * stats.rms,
        residual_max_percent: 100.0 * max,
        residual_scatter_percent: 100.0 * stats.scatter,
        residual_systematic_percent: 100.0 * stats.systematic,
        runs_z: stats.runs_z,
        point_limit_percent: 100.0 * stats.point_limit,
        suspect_frequency_range_hz: suspect,
        max_residual_percent: options.max_residual_percent,
        rms_residual_percent: options.rms_residual_percent,
    };
    if report.is_finite() {
        Ok(report)
    } else {
        Err(KkError::OutOfRange)
    }
}

/// The angular frequencies of `s`, after checking that every point is usable: finite positive
/// frequencies and finite non-zero impedances, and angular frequencies whose time constants 1/ω are
/// finite (2πf overflows for f near f64::MAX, and 1/(2πf) for subnormal f).
fn angular_frequencies(s: &Spectrum) -> Result<Vec<f64>, KkError> {
    for (i, (f, z)) in s.frequency_hz.iter().zip(&s.z).enumerate() {
        if !(f.is_finite() && *f > 0.0 && z.re.is_finite() && z.im.is_finite() && z.norm() > 0.0) {
            return Err(KkError::BadPoint(s.point_ref(i)));
        }
    }
    let w: Vec<f64> = s.frequency_hz.iter().map(|&f| angular(f)).collect();
    if let Some(i) = w
        .iter()
        .position(|w| !(w.is_finite() && *w > 0.0 && w.recip().is_finite()))
    {
        return Err(KkError::BadPoint(s.point_ref(i)));
    }
    Ok(w)
}

/// The frequency range of the points behind the failed test: the outliers when points failed, else
/// the points above the trend's or the rms limit; None when no test failed (or no point stands out).
fn suspect_range(
    frequency_hz: &[f64],
    (re, im): (&[f64], &[f64]),
    h: &[f64],
    options: &KkOptions,
    (stats, failures): (&verdict::Stats, verdict::Failures),
) -> Option<(f64, f64)> {
    let n = frequency_hz.len();
    let worst = |i: usize| re[i].abs().max(im[i].abs());
    let range = |points: &mut dyn Iterator<Item = usize>| -> Option<(f64, f64)> {
        points.fold(None, |range, i| {
            let f = frequency_hz[i];
            Some(range.map_or((f, f), |(a, b): (f64, f64)| (a.min(f), b.max(f))))
        })
    };
    let over = |limit: f64| range(&mut (0..n).filter(|&i| worst(i) > limit));
    if failures.points {
        range(&mut (0..n).filter(|&i| verdict::outlier(re, im, h, i, options, stats.scatter)))
    } else if failures.trend {
        over(TREND_RANGE_FACTOR * stats.systematic.max(stats.scatter))
    } else if failures.rms {
        over(options.rms_residual_percent / 100.0)
    } else {
        None
    }
}

impl KkReport {
    /// Whether every number of the report is finite (false only for data spanning hundreds of
    /// decades, where the scaled solve leaves the range of f64).
    fn is_finite(&self) -> bool {
        let scalars = [
            self.mu,
            self.r0,
            self.residual_rms_percent,
            self.residual_max_percent,
            self.residual_scatter_percent,
            self.residual_systematic_percent,
            self.runs_z,
            self.point_limit_percent,
        ];
        scalars
            .iter()
            .chain(&self.resistances)
            .chain(&self.time_constants)
            .chain(&self.residual_re)
            .chain(&self.residual_im)
            .chain(self.capacitance.iter())
            .chain(self.inductance.iter())
            .all(|v| v.is_finite())
    }
}

/// Indices of the lowest and highest frequency.
fn extremes(f: &[f64]) -> (usize, usize) {
    let mut lo = 0;
    let mut hi = 0;
    for (i, &x) in f.iter().enumerate() {
        if x < f[lo] {
            lo = i;
        }
        if x > f[hi] {
            hi = i;
        }
    }
    (lo, hi)
}

/// −Z″ still rising towards the lowest frequency: compares the two lowest frequencies.
fn capacitive_tail(f: &[f64], z: &[Complex64]) -> bool {
    let mut idx: Vec<usize> = (0..f.len()).collect();
    idx.sort_by(|&i, &j| f[i].total_cmp(&f[j]));
    match idx[..] {
        [a, b, ..] => -z[a].im > 0.0 && -z[a].im > -z[b].im,
        _ => false,
    }
}

/// The geometric mean of |Zᵢ| (all finite and non-zero), computed in logarithms so that it neither
/// overflows nor underflows; 1 if that fails.
fn typical_modulus(z: &[Complex64]) -> f64 {
    let mean_ln = z.iter().map(|zi| zi.norm().ln()).sum::<f64>() / z.len().max(1) as f64;
    let t = mean_ln.exp();
    if t.is_finite() && t > 0.0 { t } else { 1.0 }
}

#[cfg(test)]
mod tests;
