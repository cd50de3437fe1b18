//! Automatic starting values.
//!
//! For circuits built from the usual battery blocks (series resistance and inductance, arcs `R|C` or
//! `R|Q` whose resistive branch may hold diffusion elements, diffusion elements in series), the circuit is
//! read as a *surrogate* that is linear in its resistances once the time constants are chosen:
//!
//! ```text
//! Z(ω) ≈ R₀ + jωL + Σ_k R_k/(1 + (jωτ_k)^n₀) + Σ_d R_d·f_d(ωτ_d) + σ(1−j)/√ω + ...
//! ```
//!
//! A diffusion or Warburg element inside an arc's resistive branch enters shunted by that arc,
//! f_d(ωτ_d)/(1 + (jωτ_k)^n₀)² (the first-order share of the branch element in (R + Z_d)|Y): a series
//! column would give it a 45° tail at high frequencies that the circuit does not have, which ranked the
//! grid points of such circuits poorly.
//!
//! A grid of time constants (one per decade over the measured window, then a local refinement at half
//! decades around the best points) is searched; for each grid point the resistances are solved by
//! non-negative least squares on the same weights as the fit, from a Gram matrix computed once. The best
//! distinct grid points become starting points. Arcs that are structurally identical are kept in
//! increasing τ order so that the search does not visit permutations of one solution.
//!
//! Circuits outside that family get a deterministic spread of starts scaled to the data.
//!
//! The stages live in their own files: [`recognise`] reads the circuit as blocks, [`grid`] searches the
//! time-constant grid, [`drt`] turns DRT peaks into starts, [`moves`] varies a fitted point; [`Search`]
//! keeps the best run over all of them.

mod drt;
mod grid;
mod moves;
mod recognise;

pub(crate) use drt::drt_starts;
pub(crate) use grid::grid_starts;
pub(crate) use moves::{arc_relocations, arc_swaps, order_identical_arcs};
pub(crate) use recognise::recognise;

use super::problem::Transform;
use crate::circuit::Circuit;
use crate::element::ElementKind;
use num_complex::Complex64;
use rand::rngs::Xoshiro256PlusPlus;
use rand::{RngExt, SeedableRng};

/// The capacitive element of an arc.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Cap {
    C(usize),
    Q { q: usize, n: usize },
}

/// A recognised building block, by parameter indices.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum Term {
    Offset(usize),
    Inductance(usize),
    SeriesCap(usize),
    SeriesCpe {
        q: usize,
        n: usize,
    },
    Warburg(usize),
    Diffusion {
        kind: &'static ElementKind,
        r: usize,
        tau: usize,
    },
    Arc {
        r: usize,
        cap: Cap,
        inner: Vec<Term>,
    },
}

/// What the start search needs to know about the data and the parameters.
pub(crate) struct Context<'a> {
    pub circuit: &'a Circuit,
    pub omegas: &'a [f64],
    /// The same frequencies prepared for element evaluation.
    pub grid: &'a crate::eval::Grid,
    pub data: &'a [Complex64],
    pub w_re: &'a [f64],
    pub w_im: &'a [f64],
    /// Values of the fixed parameters (and defaults for the rest).
    pub base: &'a [f64],
    pub fixed: &'a [bool],
}

impl Context<'_> {
    fn omega_range(&self) -> (f64, f64) {
        let lo = self.omegas.iter().copied().fold(f64::INFINITY, f64::min);
        let hi = self.omegas.iter().copied().fold(0.0, f64::max);
        (lo, hi)
    }

    /// A typical impedance magnitude of the data (median |Z|).
    fn scale(&self) -> f64 {
        let mut m: Vec<f64> = self.data.iter().map(|z| z.norm()).collect();
        m.sort_by(f64::total_cmp);
        m.get(m.len() / 2).copied().unwrap_or(1.0).max(1e-300)
    }

    /// Puts `value` into parameter `i` unless it is fixed, moved inside its bounds.
    fn put(&self, p: &mut [f64], i: usize, value: f64) {
        if self.fixed[i] {
            return;
        }
        let (lo, hi) = self.circuit.bounds(i);
        let v = if value.is_finite() {
            value
        } else {
            self.base[i]
        };
        p[i] = inside(v, lo, hi);
    }
}

/// Moves v strictly inside (lo, hi).
fn inside(v: f64, lo: f64, hi: f64) -> f64 {
    let span = if hi.is_finite() {
        hi - lo
    } else {
        v.abs().max(1.0)
    };
    let eps = 1e-6 * span;
    let mut v = v;
    if v <= lo {
        v = if lo > 0.0 && hi.is_finite() {
            (lo * (hi / lo).powf(1e-3)).min(lo + eps)
        } else if lo > 0.0 {
            lo * 1.001
        } else {
            lo + eps
        };
    }
    if v >= hi {
        v = hi - eps;
    }
    v.max(if lo == 0.0 { f64::MIN_POSITIVE } else { lo })
}

/// Exponent used for CPEs while searching.
pub(super) const N0: f64 = 0.9;

/// Log-spaced values from lo to hi (inclusive) at `per_decade` points per decade.
pub(super) fn log_grid(lo: f64, hi: f64, per_decade: f64) -> Vec<f64> {
    if !(lo > 0.0 && hi >= lo && hi.is_finite()) {
        return vec![lo];
    }
    // At most the range of f64 (about 630 decades) times the density: bounded.
    let n = ((hi / lo).log10() * per_decade)
        .round()
        .clamp(1.0, 10_000.0) as usize;
    (0..=n)
        .map(|k| lo * (hi / lo).powf(k as f64 / n as f64))
        .collect()
}

/// Sets an arc's capacitive element so that its time constant is `tau` with the current resistance.
pub(crate) fn set_arc_tau(ctx: &Context<'_>, p: &mut [f64], r: usize, cap: Cap, tau: f64) {
    match cap {
        Cap::C(c) => ctx.put(p, c, tau / p[r]),
        Cap::Q { q, n } => {
            ctx.put(p, n, if ctx.fixed[n] { p[n] } else { N0 });
            ctx.put(p, q, tau.powf(p[n]) / p[r]);
        }
    }
}

/// Time constant of an arc at the given parameters.
pub(crate) fn arc_tau(p: &[f64], r: usize, cap: Cap) -> f64 {
    match cap {
        Cap::C(c) => p[r] * p[c],
        Cap::Q { q, n } => (p[r] * p[q]).powf(1.0 / p[n]),
    }
}

/// The arcs among recognised terms (resistance index, capacitive element).
pub(crate) fn arcs(terms: &[Term]) -> Vec<(usize, Cap)> {
    terms
        .iter()
        .filter_map(|t| match t {
            Term::Arc { r, cap, .. } => Some((*r, *cap)),
            _ => None,
        })
        .collect()
}

/// Deterministic starts for circuits outside the recognised family: the circuit's own values, then
/// points drawn log-uniformly over ranges set by the data (resistances up to the largest |Z|, time
/// constants across the measured window).
pub(crate) fn spread_starts(ctx: &Context<'_>, count: usize) -> Vec<Vec<f64>> {
    let (wmin, wmax) = ctx.omega_range();
    let zmax = ctx
        .data
        .iter()
        .map(|z| z.norm())
        .fold(0.0, f64::max)
        .max(1e-300);
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(0x5eed_1e15);
    let mut out = vec![ctx.base.to_vec()];
    let c = ctx.circuit;
    for _ in 1..count {
        let mut p = ctx.base.to_vec();
        // One time constant per start, shared by the capacitive elements so that arcs are visible.
        for i in 0..p.len() {
            let u: f64 = rng.random();
            let log_between = |lo: f64, hi: f64| lo * (hi / lo).powf(u);
            let info = c.info(i);
            let v = match (info.unit, info.name) {
                ("Ohm", _) => log_between(1e-3 * zmax, zmax),
                ("F", _) | ("F s^(n-1)", _) => {
                    log_between(1.0 / (wmax * zmax), 1.0 / (wmin * 1e-3 * zmax))
                }
                ("H", _) => log_between(1e-4 * zmax / wmax, zmax / wmax),
                ("s", _) => log_between(1.0 / wmax, 1.0 / wmin),
                ("1", "n") => 0.6 + 0.4 * u,
                ("Ohm s^-1/2", _) => log_between(1e-3 * zmax * wmin.sqrt(), zmax * wmin.sqrt()),
                _ => p[i],
            };
            ctx.put(&mut p, i, v);
        }
        out.push(p);
    }
    out
}

/// Internal transform for each free parameter.
pub(crate) fn transforms(c: &Circuit, free: &[usize]) -> Vec<Transform> {
    free.iter()
        .map(|&i| {
            let (lo, hi) = c.bounds(i);
            let positive = matches!(c.info(i).domain, crate::element::Domain::Positive);
            Transform::for_bounds(lo, hi, positive)
        })
        .collect()
}

/// The bookkeeping of a multi-start search: the best run so far (lowest χ²), and the residual
/// evaluations and starts spent over every run considered.
#[derive(Default)]
pub(super) struct Search {
    /// The run with the lowest χ² so far (the first of equals).
    pub best: Option<super::Run>,
    /// Residual evaluations over every run considered.
    pub evaluations: usize,
    /// Number of runs considered.
    pub tried: usize,
    /// Runs that ended at the best χ² so far (within [`AGREE`] relative): independent starts that
    /// agree on the optimum.
    pub agreeing: usize,
}

/// Relative χ² difference within which two runs are taken to have reached the same optimum.
pub(super) const AGREE: f64 = 1e-6;

impl Search {
    /// Counts `run` and keeps it if its χ² is below the best so far (a NaN χ² never is).
    pub fn consider(&mut self, run: super::Run) {
        self.evaluations += run.evaluations;
        self.tried += 1;
        let best = self.chi_square();
        if run.chi_square < best * (1.0 - AGREE) || (best.is_infinite() && run.chi_square < best) {
            self.agreeing = 1;
        } else if run.chi_square <= best * (1.0 + AGREE) {
            self.agreeing += 1;
        }
        if self
            .best
            .as_ref()
            .is_none_or(|b| run.chi_square < b.chi_square)
        {
            self.best = Some(run);
        }
    }

    /// χ² of the best run so far (infinite before any).
    pub fn chi_square(&self) -> f64 {
        self.best.as_ref().map_or(f64::INFINITY, |b| b.chi_square)
    }
}
