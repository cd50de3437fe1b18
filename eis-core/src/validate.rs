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
//! squares problem solved by SVD). The number of elements M is raised from 1 until
//!
//! ```text
//! μ = 1 − Σ_{Rₖ<0} |Rₖ| / Σ_{Rₖ≥0} |Rₖ|
//! ```
//!
//! falls below the threshold c (0.85 in the paper): alternating signs of Rₖ show that the model starts
//! to fit noise.
//!
//! **Departure from the paper**, which keeps the first M with μ < c: with a coarse grid of τₖ,
//! negative Rₖ also appear while the model still under-fits (a sharp time constant between two grid
//! points is interpolated with both signs), so an early dip of μ is not a reliable sign of
//! over-fitting; noise-free test spectra of an ideal RC arc, depressed arcs and diffusion stopped at
//! residuals of 1–5 %. Here M is raised until μ has stayed below c for five successive M (the
//! over-fitting regime) and some fit with μ ≥ c already meets the residual limits below, or until M
//! reaches its cap; the fit kept is the one with the smallest weighted residual among those with
//! μ ≥ c, i.e. the best fit that μ does not mark as over-fitted. A spectrum is therefore called
//! suspect only after every M up to the cap has been tried.
//!
//! The residuals relative to |Z|, Δ′ᵢ = (Z′ᵢ − Ẑ′ᵢ)/|Zᵢ| and Δ″ᵢ = (Z″ᵢ − Ẑ″ᵢ)/|Zᵢ|, then
//! decide the verdict.
//!
//! # Verdict
//!
//! A spectrum is *valid* when no point has |Δ′| or |Δ″| above [`KkOptions::max_residual_percent`]
//! (default 1 %) and the root mean square of all Δ is at most [`KkOptions::rms_residual_percent`]
//! (default 0.5 %). These defaults follow the rule of thumb that residuals of a good measurement stay
//! within about ±1 % without trend; they are not a standard, so both are settable. Otherwise it is
//! *suspect*, and the report gives the frequency range of the points above the limit.
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
use crate::spectrum::Spectrum;
use nalgebra::{DMatrix, DVector};

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

/// Settings of the test.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct KkOptions {
    /// μ threshold c: fits with μ below it count as over-fitted (default 0.85, from the paper).
    pub mu_threshold: f64,
    /// A fixed number of elements instead of the μ search (default: none).
    pub elements: Option<usize>,
    /// Most elements the μ search tries (default: the number of points).
    pub max_elements: Option<usize>,
    /// Series capacitance (default [`Tail::Auto`]).
    pub capacitance: Tail,
    /// Series inductance (default [`Tail::Auto`]).
    pub inductance: Tail,
    /// Largest |Δ′| or |Δ″| of any point, in % of |Z|, for a valid spectrum (default 1).
    pub max_residual_percent: f64,
    /// Largest root-mean-square residual, in % of |Z|, for a valid spectrum (default 0.5).
    pub rms_residual_percent: f64,
}

impl Default for KkOptions {
    fn default() -> Self {
        KkOptions {
            mu_threshold: 0.85,
            elements: None,
            max_elements: None,
            capacitance: Tail::Auto,
            inductance: Tail::Auto,
            max_residual_percent: 1.0,
            rms_residual_percent: 0.5,
        }
    }
}

/// Why the test could not run.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum KkError {
    /// Fewer than three points.
    #[error("Kramers-Kronig test needs at least 3 points, the spectrum has {0}")]
    TooFewPoints(usize),
    /// A frequency that is not finite and positive, or an impedance that is not finite and non-zero.
    #[error("point {0} has a non-positive or non-finite frequency or impedance")]
    BadPoint(usize),
    /// All frequencies are equal, so no range of time constants can be spread.
    #[error("all frequencies are equal")]
    NoRange,
}

/// The outcome of the test.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct KkReport {
    /// No point above the residual limit and the rms residual within its limit.
    pub valid: bool,
    /// μ of the chosen fit.
    pub mu: f64,
    /// Whether the search ended in the over-fitting regime (μ below c for five successive M, with a
    /// fit within the limits found) rather than at the largest M allowed.
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
    /// Lowest and highest frequency (Hz) of the points whose residual exceeds the limit, if any.
    pub suspect_frequency_range_hz: Option<(f64, f64)>,
    /// The per-point limit used, %.
    pub max_residual_percent: f64,
    /// The rms limit used, %.
    pub rms_residual_percent: f64,
}

struct Fit {
    x: DVector<f64>,
    taus: Vec<f64>,
    mu: f64,
    /// Weighted sum of squared residuals.
    chi2: f64,
    /// Largest weighted residual (a Δ′ or Δ″).
    max_abs: f64,
}

impl Fit {
    /// Whether the fit meets both residual limits.
    fn passes(&self, n: usize, o: &KkOptions) -> bool {
        100.0 * self.max_abs <= o.max_residual_percent
            && 100.0 * (self.chi2 / (2 * n) as f64).sqrt() <= o.rms_residual_percent
    }
}

/// Successive M with μ below c that end the search.
const PATIENCE: usize = 5;

/// The design of the linear problem: which columns exist besides R₀ and the Rₖ.
#[derive(Clone, Copy)]
struct Design {
    inductance: bool,
    capacitance: bool,
}

/// Log-spaced time constants from 1/ω_max to 1/ω_min (one at the geometric centre when M = 1).
fn time_constants(m: usize, w_min: f64, w_max: f64) -> Vec<f64> {
    let (t1, tm) = (1.0 / w_max, 1.0 / w_min);
    if m == 1 {
        return vec![(t1 * tm).sqrt()];
    }
    let (l1, lm) = (t1.log10(), tm.log10());
    (0..m)
        .map(|k| 10f64.powf(l1 + k as f64 / (m - 1) as f64 * (lm - l1)))
        .collect()
}

fn fit(w: &[f64], z: &[num_complex::Complex64], m: usize, d: Design) -> Fit {
    let n = w.len();
    let (w_min, w_max) = w.iter().fold((f64::INFINITY, 0.0f64), |(lo, hi), &x| {
        (lo.min(x), hi.max(x))
    });
    let taus = time_constants(m, w_min, w_max);
    let cols = 1 + m + d.inductance as usize + d.capacitance as usize;
    let mut a = DMatrix::<f64>::zeros(2 * n, cols);
    let mut b = DVector::<f64>::zeros(2 * n);
    for i in 0..n {
        let weight = 1.0 / z[i].norm();
        let (re, im) = (i, n + i);
        b[re] = z[i].re * weight;
        b[im] = z[i].im * weight;
        a[(re, 0)] = weight;
        for (k, &tau) in taus.iter().enumerate() {
            let x = w[i] * tau;
            let den = 1.0 + x * x;
            a[(re, 1 + k)] = weight / den;
            a[(im, 1 + k)] = -weight * x / den;
        }
        let mut c = 1 + m;
        if d.inductance {
            a[(im, c)] = weight * w[i];
            c += 1;
        }
        if d.capacitance {
            a[(im, c)] = -weight / w[i];
        }
    }
    // Columns scaled to unit length so that ωL and 1/(ωC) columns do not dominate the conditioning.
    let norms: Vec<f64> = (0..cols)
        .map(|j| {
            let v = a.column(j).norm();
            if v > 0.0 { v } else { 1.0 }
        })
        .collect();
    for (j, &s) in norms.iter().enumerate() {
        a.column_mut(j).scale_mut(1.0 / s);
    }
    let svd = a.clone().svd(true, true);
    let smax = svd.singular_values.max();
    let mut x = svd
        .solve(&b, 1e-13 * smax)
        .unwrap_or_else(|_| DVector::zeros(cols));
    let r = &a * &x - &b;
    let chi2 = r.norm_squared();
    let max_abs = r.amax();
    for (j, &s) in norms.iter().enumerate() {
        x[j] /= s;
    }
    let (mut pos, mut neg) = (0.0, 0.0);
    for k in 0..m {
        let r = x[1 + k];
        if r >= 0.0 {
            pos += r;
        } else {
            neg -= r;
        }
    }
    let mu = if pos > 0.0 {
        1.0 - neg / pos
    } else if neg > 0.0 {
        f64::NEG_INFINITY
    } else {
        1.0
    };
    Fit {
        x,
        taus,
        mu,
        chi2,
        max_abs,
    }
}

fn model(f: &Fit, w: f64, d: Design) -> num_complex::Complex64 {
    let m = f.taus.len();
    let mut z = num_complex::Complex64::new(f.x[0], 0.0);
    for (k, &tau) in f.taus.iter().enumerate() {
        z += f.x[1 + k] / num_complex::Complex64::new(1.0, w * tau);
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
/// [`KkError`] for fewer than three points, a bad point or a single frequency; a spectrum that fails
/// the test is an `Ok` report with `valid == false`.
pub fn kramers_kronig(s: &Spectrum, options: &KkOptions) -> Result<KkReport, KkError> {
    let n = s.len();
    if n < 3 {
        return Err(KkError::TooFewPoints(n));
    }
    for (i, (f, z)) in s.frequency_hz.iter().zip(&s.z).enumerate() {
        if !(f.is_finite() && *f > 0.0 && z.re.is_finite() && z.im.is_finite() && z.norm() > 0.0) {
            return Err(KkError::BadPoint(i + 1));
        }
    }
    let w: Vec<f64> = s.frequency_hz.iter().map(|&f| angular(f)).collect();
    let (lo, hi) = extremes(&s.frequency_hz);
    if s.frequency_hz[lo] == s.frequency_hz[hi] {
        return Err(KkError::NoRange);
    }
    let design = Design {
        inductance: match options.inductance {
            Tail::On => true,
            Tail::Off => false,
            Tail::Auto => s.z[hi].im > 0.0,
        },
        capacitance: match options.capacitance {
            Tail::On => true,
            Tail::Off => false,
            Tail::Auto => capacitive_tail(s),
        },
    };
    let extra = design.inductance as usize + design.capacitance as usize;
    // At most as many unknowns as equations.
    let m_cap = (2 * n).saturating_sub(1 + extra).max(1);
    let (chosen, mu_reached) = match options.elements {
        Some(m) => (fit(&w, &s.z, m.clamp(1, m_cap), design), true),
        None => {
            let m_max = options.max_elements.unwrap_or(n).clamp(1, m_cap);
            // Raise M until μ has stayed below c for PATIENCE successive M and a fit with μ ≥ c meets
            // the limits (or M is at its cap); keep the best fit among those with μ ≥ c.
            let mut best: Option<Fit> = None;
            let mut first: Option<Fit> = None;
            let mut run = 0;
            let mut reached = false;
            for m in 1..=m_max {
                let f = fit(&w, &s.z, m, design);
                if f.mu >= options.mu_threshold {
                    run = 0;
                    if best.as_ref().is_none_or(|b| f.chi2 < b.chi2) {
                        best = Some(f);
                    }
                } else {
                    run += 1;
                    if first.is_none() {
                        first = Some(f);
                    }
                    let good = best.as_ref().is_some_and(|b| b.passes(n, options));
                    if run >= PATIENCE && good {
                        reached = true;
                        break;
                    }
                }
            }
            match (best, first) {
                (Some(b), _) => (b, reached),
                (None, Some(f)) => (f, reached),
                (None, None) => unreachable!("m_max >= 1"),
            }
        }
    };
    let m = chosen.taus.len();
    let mut residual_re = Vec::with_capacity(n);
    let mut residual_im = Vec::with_capacity(n);
    for (zi, &wi) in s.z.iter().zip(&w) {
        let d = (zi - model(&chosen, wi, design)) / zi.norm();
        residual_re.push(d.re);
        residual_im.push(d.im);
    }
    let sq: f64 = residual_re.iter().chain(&residual_im).map(|d| d * d).sum();
    let rms = 100.0 * (sq / (2 * n) as f64).sqrt();
    let worst = |i: usize| residual_re[i].abs().max(residual_im[i].abs()) * 100.0;
    let max = (0..n).map(worst).fold(0.0, f64::max);
    let over = |limit: f64| -> Option<(f64, f64)> {
        let flagged: Vec<f64> = (0..n)
            .filter(|&i| worst(i) > limit)
            .map(|i| s.frequency_hz[i])
            .collect();
        let (a, b) = flagged
            .iter()
            .fold((f64::INFINITY, 0.0f64), |(a, b), &f| (a.min(f), b.max(f)));
        (!flagged.is_empty()).then_some((a, b))
    };
    let by_point = over(options.max_residual_percent);
    let rms_ok = rms <= options.rms_residual_percent;
    let suspect = match by_point {
        Some(r) => Some(r),
        None if !rms_ok => over(options.rms_residual_percent),
        None => None,
    };
    let mut c = 1 + m;
    let inductance = design.inductance.then(|| {
        c += 1;
        chosen.x[c - 1]
    });
    let capacitance = design.capacitance.then(|| 1.0 / chosen.x[c]);
    Ok(KkReport {
        valid: by_point.is_none() && rms_ok,
        mu: chosen.mu,
        mu_reached,
        elements: m,
        r0: chosen.x[0],
        resistances: (0..m).map(|k| chosen.x[1 + k]).collect(),
        time_constants: chosen.taus.clone(),
        capacitance,
        inductance,
        frequency_hz: s.frequency_hz.clone(),
        residual_re,
        residual_im,
        residual_rms_percent: rms,
        residual_max_percent: max,
        suspect_frequency_range_hz: suspect,
        max_residual_percent: options.max_residual_percent,
        rms_residual_percent: options.rms_residual_percent,
    })
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
fn capacitive_tail(s: &Spectrum) -> bool {
    let mut idx: Vec<usize> = (0..s.len()).collect();
    idx.sort_by(|&i, &j| s.frequency_hz[i].total_cmp(&s.frequency_hz[j]));
    let (a, b) = (idx[0], idx[1]);
    -s.z[a].im > 0.0 && -s.z[a].im > -s.z[b].im
}

#[cfg(test)]
mod tests;
