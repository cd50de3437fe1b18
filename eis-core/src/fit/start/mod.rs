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
//! The stages live in their own files: [`recognise`](mod@recognise) reads the circuit as blocks, [`grid`] searches the
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
use crate::element::{Domain, ElementKind, Seed, SeedOne};
use num_complex::Complex64;
use rand::rngs::Xoshiro256PlusPlus;
use rand::{RngExt, SeedableRng};

/// The capacitive element of an arc: its kind (whose seed is [`Seed::Capacitive`]) and first parameter.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Cap {
    pub kind: &'static ElementKind,
    pub first: usize,
}

impl Cap {
    /// Its parameter indices.
    fn range(&self) -> std::ops::Range<usize> {
        self.first..self.first + self.kind.params.len()
    }
}

/// A recognised building block, by element kind and parameter indices.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum Term {
    /// An element in series that is one coefficient times a fixed shape (a series resistance or
    /// inductance, a capacitor or CPE in series, a semi-infinite Warburg element).
    Linear {
        kind: &'static ElementKind,
        first: usize,
    },
    /// An element with a resistance and a time constant ([`Seed::Feature`]: finite diffusion, a
    /// Gerischer element, a porous electrode).
    Feature {
        kind: &'static ElementKind,
        first: usize,
    },
    /// A resistor `r` in parallel with a capacitive element, with more blocks in series with the
    /// resistor.
    Arc {
        r: usize,
        cap: Cap,
        inner: Vec<Term>,
    },
}

/// A time-constant slot of a recognised circuit: an arc (its resistor and capacitive element) or a
/// feature element.
#[derive(Debug, Clone, Copy)]
pub(crate) enum Slot {
    Arc {
        r: usize,
        cap: Cap,
    },
    Feature {
        kind: &'static ElementKind,
        first: usize,
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

/// Runs an element's seed function on its slice of `p` (current values in, fixed ones kept) and puts
/// the result back inside the bounds.
fn seed_into(
    ctx: &Context<'_>,
    p: &mut [f64],
    range: std::ops::Range<usize>,
    seed: impl FnOnce(&[bool], &mut [f64]),
) {
    let mut v = p[range.clone()].to_vec();
    seed(&ctx.fixed[range.clone()], &mut v);
    for (i, value) in range.zip(v) {
        ctx.put(p, i, value);
    }
}

/// Sets an arc's capacitive element so that its time constant is `tau` with the current resistance.
pub(crate) fn set_arc_tau(ctx: &Context<'_>, p: &mut [f64], r: usize, cap: Cap, tau: f64) {
    if let Seed::Capacitive { parallel, .. } = cap.kind.seed {
        let rv = p[r];
        seed_into(ctx, p, cap.range(), |fixed, v| parallel(rv, tau, fixed, v));
    }
}

/// Time constant of an arc at the given parameters.
pub(crate) fn arc_tau(p: &[f64], r: usize, cap: Cap) -> f64 {
    match cap.kind.seed {
        Seed::Capacitive { tau, .. } => tau(p[r], &p[cap.range()]),
        _ => f64::NAN,
    }
}

/// Sets a feature element (first parameter `first`) to resistance `r` and time constant `tau`.
pub(crate) fn set_feature(
    ctx: &Context<'_>,
    p: &mut [f64],
    kind: &ElementKind,
    first: usize,
    r: f64,
    tau: f64,
) {
    if let Seed::Feature { of, .. } = kind.seed {
        seed_into(ctx, p, first..first + kind.params.len(), |fixed, v| {
            of(r, tau, fixed, v)
        });
    }
}

/// Sets a linear element (first parameter `first`) to coefficient `v`.
pub(crate) fn set_linear(
    ctx: &Context<'_>,
    p: &mut [f64],
    kind: &ElementKind,
    first: usize,
    v: f64,
) {
    if let Some(of) = linear_seed(kind) {
        seed_into(ctx, p, first..first + kind.params.len(), |fixed, out| {
            of(v, fixed, out)
        });
    }
}

/// The seed of an element used as one coefficient times a shape, if it can be.
pub(crate) fn linear_seed(kind: &ElementKind) -> Option<SeedOne> {
    match kind.seed {
        Seed::Linear { of } => Some(of),
        Seed::Capacitive { series, .. } => Some(series),
        Seed::Feature { .. } => None,
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
/// points drawn log-uniformly over ranges set by the data, element by element through its seed:
/// resistances up to the largest |Z|, time constants across the measured window (a capacitive element
/// as part of an arc of such a resistance and time constant), linear elements with |Z| up to the
/// largest |Z| within the window, and bounded parameters (CPE exponents) in the upper 40 % of their
/// interval.
pub(crate) fn spread_starts(ctx: &Context<'_>, count: usize) -> Vec<Vec<f64>> {
    let (wmin, wmax) = ctx.omega_range();
    let zmax = ctx
        .data
        .iter()
        .map(|z| z.norm())
        .fold(0.0, f64::max)
        .max(1e-300);
    let c = ctx.circuit;
    // Largest |Z| over the data of each linear element at coefficient 1.
    let shape_max: Vec<f64> = c
        .elements
        .iter()
        .map(|e| {
            let first = e.first_param;
            linear_seed(e.kind).map_or(1.0, |of| {
                let z = unit_shape(ctx, e.kind, first, |fixed, v| of(1.0, fixed, v));
                z.iter().map(|v| v.norm()).fold(0.0, f64::max).max(1e-300)
            })
        })
        .collect();
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(0x5eed_1e15);
    let mut out = vec![ctx.base.to_vec()];
    for _ in 1..count {
        let mut p = ctx.base.to_vec();
        for (e, &shape) in c.elements.iter().zip(&shape_max) {
            let (u, w): (f64, f64) = (rng.random(), rng.random());
            let r = 1e-3 * zmax * 1e3f64.powf(u);
            let tau = (1.0 / wmax) * (wmax / wmin).powf(w);
            let first = e.first_param;
            match e.kind.seed {
                Seed::Linear { .. } => set_linear(ctx, &mut p, e.kind, first, r / shape),
                Seed::Capacitive { parallel, .. } => {
                    let range = first..first + e.kind.params.len();
                    seed_into(ctx, &mut p, range, |fixed, v| parallel(r, tau, fixed, v));
                }
                Seed::Feature { .. } => set_feature(ctx, &mut p, e.kind, first, r, tau),
            }
            for (k, info) in e.kind.params.iter().enumerate() {
                if let Domain::Interval(lo, hi) = info.domain {
                    let x: f64 = rng.random();
                    ctx.put(&mut p, first + k, lo + (hi - lo) * (0.6 + 0.4 * x));
                }
            }
        }
        out.push(p);
    }
    out
}

/// Z over the data's frequencies of element `kind` (first parameter `first`) at the values `seed`
/// writes over the base values.
pub(crate) fn unit_shape(
    ctx: &Context<'_>,
    kind: &ElementKind,
    first: usize,
    seed: impl FnOnce(&[bool], &mut [f64]),
) -> Vec<Complex64> {
    let range = first..first + kind.params.len();
    let mut v = ctx.base[range.clone()].to_vec();
    seed(&ctx.fixed[range], &mut v);
    let n = ctx.grid.len();
    let mut z = vec![Complex64::new(0.0, 0.0); n];
    let mut dz = vec![Complex64::new(0.0, 0.0); n * v.len()];
    (kind.impedance)(&v, ctx.grid, &mut z, &mut dz);
    z
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
pub(super) struct Search<'a> {
    /// The run with the lowest χ² so far (the first of equals).
    pub best: Option<super::search::Run>,
    /// Residual evaluations over every run considered.
    pub evaluations: usize,
    /// Number of runs considered.
    pub tried: usize,
    /// Runs that ended at the best χ² so far (within [`AGREE`] relative): independent starts that
    /// agree on the optimum.
    pub agreeing: usize,
    /// χ² at the end of every run considered.
    ends: Vec<f64>,
    /// Whether the data determine every parameter at a run's end (the costly part of
    /// [`super::search::Run::noise_like`], judged for the runs that become the best only).
    determined: &'a dyn Fn(&super::search::Run) -> bool,
}

/// Agreeing runs after which a search whose best residuals look like noise stops.
pub(super) const SETTLED: usize = 3;

/// Ratio to the best χ² up to which another optimum is a rival that keeps the search going
/// ([`Search::settled`]). Measured on the held-out benchmark (seeds 2026, 7, 11): the same spectra
/// right as when every stray run kept the search going, with 5 % fewer model evaluations.
pub(super) const RIVAL: f64 = 1.5;

/// Relative χ² difference within which two runs are taken to have reached the same optimum: that of
/// runs stopped at the search's tolerance (`SCREEN_TOLERANCE`, 1e-4) in one basin.
pub(super) const AGREE: f64 = 1e-4;

impl<'a> Search<'a> {
    /// A search with no run yet; `determined` tells whether the data determine every parameter at a
    /// run's end.
    pub fn new(determined: &'a dyn Fn(&super::search::Run) -> bool) -> Search<'a> {
        Search {
            best: None,
            evaluations: 0,
            tried: 0,
            agreeing: 0,
            ends: Vec::new(),
            determined,
        }
    }

    /// Counts `run` and keeps it if its χ² is below the best so far (a NaN χ² never is); a kept run
    /// whose residuals look like noise is judged for determinacy.
    pub fn consider(&mut self, mut run: super::search::Run) {
        self.evaluations += run.evaluations;
        self.tried += 1;
        self.ends.push(run.chi_square);
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
            if run.white && run.determined.is_none() {
                run.determined = Some((self.determined)(&run));
            }
            self.best = Some(run);
        }
    }

    /// Counts a run given up far above the best χ² (its evaluations and its start) without keeping it.
    pub fn abandon(&mut self, run: super::search::Run) {
        self.evaluations += run.evaluations;
        self.tried += 1;
    }

    /// Whether the search may stop: at least [`SETTLED`] runs reached the best χ², no run ended at a
    /// rival optimum (above the best but within [`RIVAL`] times it), none is `pending` (still to be
    /// considered), and the best run's residuals look like noise with every parameter determined (a
    /// wrong basin leaves smooth residuals or a vanished element). Near-optimal wrong basins attract
    /// some starts too, so a single rival is enough to keep searching; runs that ended far above the
    /// best (or were given up) found a wrong basin and say nothing of a better one.
    pub fn settled(&self, pending: usize) -> bool {
        let best = self.chi_square();
        let rival = self
            .ends
            .iter()
            .any(|&c| c > best * (1.0 + AGREE) && c <= RIVAL * best);
        self.noise_like_consensus() && !rival && pending == 0
    }

    /// Whether [`SETTLED`] runs reached the best χ² and its residuals look like noise, whatever other
    /// runs found: after the whole grid, the mark of an optimum that moving arcs does not improve.
    pub fn noise_like_consensus(&self) -> bool {
        self.agreeing >= SETTLED && self.best.as_ref().is_some_and(|b| b.noise_like())
    }

    /// χ² of the best run so far (infinite before any).
    pub fn chi_square(&self) -> f64 {
        self.best.as_ref().map_or(f64::INFINITY, |b| b.chi_square)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::element::{Class, Limit, ParamInfo};
    use crate::eval::{Plan, log_frequencies};
    use crate::simulate::simulate;

    /// An element outside [`crate::element::KINDS`]: a single relaxation R/(1 + jωτ) written as one
    /// element, with its limits and seed given only through its table row.
    fn relaxation(p: &[f64], g: &crate::eval::Grid, z: &mut [Complex64], dz: &mut [Complex64]) {
        let (r, tau) = (p[0], p[1]);
        let n = g.len();
        for (i, &w) in g.omega().iter().enumerate() {
            let d = Complex64::new(1.0, w * tau);
            z[i] = r / d;
            dz[i] = 1.0 / d;
            dz[n + i] = -r * Complex64::new(0.0, w) / (d * d);
        }
    }

    static TEST_TABLE: [ElementKind; 1] = [ElementKind {
        symbol: "X",
        name: "test relaxation",
        formula: "R/(1 + jw tau)",
        params: &[
            ParamInfo {
                name: "R",
                unit: "Ohm",
                default: 1.0,
                domain: Domain::Positive,
                description: "resistance",
            },
            ParamInfo {
                name: "tau",
                unit: "s",
                default: 1.0,
                domain: Domain::Positive,
                description: "time constant",
            },
        ],
        impedance: relaxation,
        limit: |p, high| Limit::finite(if high { 0.0 } else { p[0] }),
        class: Class::Diffusive,
        seed: Seed::Feature {
            of: |r, tau, fixed, out| {
                crate::element::set(out, fixed, 0, r);
                crate::element::set(out, fixed, 1, tau);
            },
            tau: |p| p[1],
            window: crate::element::ARC_WINDOW,
            peak: (1.0, 1.0),
        },
        physics: crate::element::Physics::Plain,
    }];

    /// A kind known only to a test table gets its DC and high-frequency limits, is recognised, and gets
    /// starting values near the truth from the grid (its column and values come from its seed row).
    /// Check: the limits of R0 + R/(1 + jωτ) are R0 + R at ω → 0 and R0 at ω → ∞ (Debye 1929, Polar
    /// Molecules, from memory: a single relaxation), and the fit from automatic starts recovers the
    /// simulated values.
    #[test]
    fn a_kind_outside_the_table_gets_limits_and_starts() {
        let mut c = crate::circuit::parse("R0 + Wt1").unwrap();
        c.elements[1].kind = &TEST_TABLE[0];
        let truth = [0.2, 3.0, 2e-3];
        assert_eq!(crate::element::circuit_limit(&c, &truth, false).real, 3.2);
        assert_eq!(crate::element::circuit_limit(&c, &truth, true).real, 0.2);

        let freqs = log_frequencies(1e5, 1e-2, 10);
        let data = simulate(&Plan::compile(&c), &truth, &freqs, None);
        let omegas = data.omegas();
        let grid = crate::eval::Grid::new(&omegas);
        let w: Vec<f64> = data.z.iter().map(|z| 1.0 / z.norm()).collect();
        let mut blank = c.clone();
        for p in &mut blank.params {
            p.initial = None;
        }
        let base = blank.default_values();
        let fixed = vec![false; base.len()];
        let ctx = Context {
            circuit: &blank,
            omegas: &omegas,
            grid: &grid,
            data: &data.z,
            w_re: &w,
            w_im: &w,
            base: &base,
            fixed: &fixed,
        };
        let terms = recognise(&blank).unwrap();
        assert!(matches!(terms[1], Term::Feature { first: 1, .. }));
        let starts = grid_starts(&ctx, &terms, 4);
        let best = &starts[0];
        // Within a factor 2 in R and half a decade in τ of the truth: the grid has a point per half decade.
        assert!((best[1] / truth[1]).ln().abs() < 2f64.ln(), "{best:?}");
        assert!((best[2] / truth[2]).log10().abs() <= 0.5, "{best:?}");
        let spread = spread_starts(&ctx, 4);
        assert!(
            spread
                .iter()
                .all(|p| p.iter().all(|v| v.is_finite() && *v > 0.0))
        );

        let r = crate::fit::fit(&blank, &data, &crate::fit::FitSettings::default(), None).unwrap();
        for (got, want) in r.values.iter().zip(truth) {
            assert!((got - want).abs() < 1e-6 * want, "{:?}", r.values);
        }
    }

    /// A converged run that ended at `chi_square`, its residuals white or not.
    fn ended(chi_square: f64, white: bool) -> crate::fit::search::Run {
        crate::fit::search::Run {
            params: vec![1.0],
            chi_square,
            iterations: 1,
            evaluations: 10,
            termination: crate::fit::Termination::Converged {
                ftol: true,
                xtol: false,
            },
            point: None,
            white,
            determined: None,
        }
    }

    /// The settling rule of the search (DEVELOPERS.md, "The automatic search"): three runs at the
    /// best χ² with noise-like residuals settle it unless a rival optimum within 1.5× exists, a run is
    /// still pending, or the best residuals are not white; a run far above the best (a wrong basin) or
    /// given up does not keep it going.
    #[test]
    fn a_search_settles_only_without_rivals() {
        let determined = |_: &crate::fit::search::Run| true;
        let agreeing = |search: &mut Search<'_>| {
            for chi in [1.0, 1.0 + 1e-6, 1.0 - 1e-6] {
                search.consider(ended(chi, true));
            }
        };
        let mut s = Search::new(&determined);
        agreeing(&mut s);
        assert!(s.settled(0));
        assert!(!s.settled(1), "a pending run");
        s.consider(ended(5.0, false));
        s.abandon(ended(1e3, false));
        assert!(s.settled(0), "a wrong basin far above and a given-up run");
        s.consider(ended(1.2, true));
        assert!(!s.settled(0), "a rival at 1.2x");
        assert_eq!((s.tried, s.evaluations), (6, 60));

        let mut s = Search::new(&determined);
        s.consider(ended(1.3, true));
        agreeing(&mut s);
        assert!(!s.settled(0), "a rival found before the best");

        let mut s = Search::new(&determined);
        for chi in [1.0, 1.0, 1.0] {
            s.consider(ended(chi, false));
        }
        assert!(!s.settled(0), "residuals that trend");

        let undetermined = |_: &crate::fit::search::Run| false;
        let mut s = Search::new(&undetermined);
        agreeing(&mut s);
        assert!(!s.settled(0), "a parameter the data do not determine");
    }
}
