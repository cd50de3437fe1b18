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
//! A grid of time constants (one per decade over the measured window, then a local refinement at half
//! decades around the best points) is searched; for each grid point the resistances are solved by
//! non-negative least squares on the same weights as the fit, from a Gram matrix computed once. The best
//! distinct grid points become starting points. Arcs that are structurally identical are kept in
//! increasing τ order so that the search does not visit permutations of one solution.
//!
//! Circuits outside that family get a deterministic spread of starts scaled to the data.

use super::problem::Transform;
use crate::circuit::{Circuit, Node};
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

/// Reads the circuit as a list of building blocks in series, if it is made of them.
pub(crate) fn recognise(c: &Circuit) -> Option<Vec<Term>> {
    let top: Vec<&Node> = match &c.root {
        Node::Series(ch) => ch.iter().collect(),
        other => vec![other],
    };
    top.into_iter().map(|n| block(c, n, true)).collect()
}

fn block(c: &Circuit, node: &Node, top: bool) -> Option<Term> {
    match node {
        Node::Element(i) => {
            let e = &c.elements[*i];
            let p = e.first_param;
            Some(match e.kind.symbol {
                "R" if top => Term::Offset(p),
                "L" if top => Term::Inductance(p),
                "C" if top => Term::SeriesCap(p),
                "Q" if top => Term::SeriesCpe { q: p, n: p + 1 },
                "W" => Term::Warburg(p),
                "Wt" | "Wr" | "G" => Term::Diffusion {
                    kind: e.kind,
                    r: p,
                    tau: p + 1,
                },
                _ => return None,
            })
        }
        Node::Parallel(ch) if top && ch.len() == 2 => {
            let (cap_node, branch) = if is_cap(c, &ch[0]) {
                (&ch[0], &ch[1])
            } else if is_cap(c, &ch[1]) {
                (&ch[1], &ch[0])
            } else {
                return None;
            };
            let Node::Element(ci) = cap_node else {
                return None;
            };
            let ce = &c.elements[*ci];
            let cap = match ce.kind.symbol {
                "C" => Cap::C(ce.first_param),
                _ => Cap::Q {
                    q: ce.first_param,
                    n: ce.first_param + 1,
                },
            };
            let parts: Vec<&Node> = match branch {
                Node::Series(s) => s.iter().collect(),
                other => vec![other],
            };
            let mut r = None;
            let mut inner = Vec::new();
            for part in parts {
                match part {
                    Node::Element(i) if c.elements[*i].kind.symbol == "R" && r.is_none() => {
                        r = Some(c.elements[*i].first_param);
                    }
                    other => inner.push(block(c, other, false)?),
                }
            }
            Some(Term::Arc { r: r?, cap, inner })
        }
        _ => None,
    }
}

fn is_cap(c: &Circuit, n: &Node) -> bool {
    matches!(n, Node::Element(i) if matches!(c.elements[*i].kind.symbol, "C" | "Q"))
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
const N0: f64 = 0.9;

/// Which time-constant slot a grid column belongs to.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Slot {
    ArcC,
    ArcQ(f64),
    Diffusion(&'static ElementKind),
}

/// One column of the surrogate over the grid (given the slot's τ).
fn column(slot: Slot, tau: f64, grid: &crate::eval::Grid) -> Vec<Complex64> {
    let one = Complex64::new(1.0, 0.0);
    match slot {
        Slot::ArcC => grid
            .omega()
            .iter()
            .map(|&w| one / Complex64::new(1.0, w * tau))
            .collect(),
        Slot::ArcQ(n) => grid
            .omega()
            .iter()
            .map(|&w| {
                one / (one
                    + Complex64::from_polar((w * tau).powf(n), n * std::f64::consts::FRAC_PI_2))
            })
            .collect(),
        Slot::Diffusion(kind) => {
            let mut z = vec![Complex64::new(0.0, 0.0); grid.len()];
            let mut dz = vec![Complex64::new(0.0, 0.0); 2 * grid.len()];
            (kind.impedance)(&[1.0, tau], grid, &mut z, &mut dz);
            z
        }
    }
}

/// A free linear coefficient of the surrogate and how it maps back to parameters.
#[derive(Debug, Clone)]
enum Coef {
    Offset(usize),
    Inductance(usize),
    SeriesCapInverse(usize),
    SeriesCpeInverse { q: usize, n: usize },
    Warburg(usize),
}

/// A time-constant slot of the recognised circuit.
#[derive(Debug, Clone)]
struct SlotInfo {
    slot: Slot,
    /// For arcs: resistance parameter and capacitive element; for diffusion: R and tau parameters.
    target: Target,
    /// Grid index range of allowed τ (coarse grid).
    grid: Vec<f64>,
    /// An earlier slot that must have a smaller τ than this one (identical plain arcs).
    before: Option<usize>,
    /// A plain arc (resistor and capacitive element only).
    plain: bool,
}

#[derive(Debug, Clone, Copy)]
enum Target {
    Arc { r: usize, cap: Cap },
    Diffusion { r: usize, tau: usize },
}

/// Log-spaced values from lo to hi (inclusive) at `per_decade` points per decade.
fn log_grid(lo: f64, hi: f64, per_decade: f64) -> Vec<f64> {
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

/// Starting points for a recognised circuit, best first.
pub(crate) fn grid_starts(ctx: &Context<'_>, terms: &[Term], count: usize) -> Vec<Vec<f64>> {
    let (wmin, wmax) = ctx.omega_range();
    let mut fixed_cols: Vec<(Coef, Vec<Complex64>)> = Vec::new();
    let mut slots: Vec<SlotInfo> = Vec::new();
    let arc_grid = log_grid(0.3 / wmax, 3.0 / wmin, 1.0);
    let diff_grid = log_grid(3.0 / wmax, 30.0 / wmin, 1.0);
    let col = |f: &dyn Fn(f64) -> Complex64| ctx.omegas.iter().map(|&w| f(w)).collect::<Vec<_>>();
    let push_term = |t: &Term,
                     fixed_cols: &mut Vec<(Coef, Vec<Complex64>)>,
                     slots: &mut Vec<SlotInfo>| {
        match *t {
            Term::Offset(r) => {
                fixed_cols.push((Coef::Offset(r), col(&|_| Complex64::new(1.0, 0.0))))
            }
            Term::Inductance(l) => {
                fixed_cols.push((Coef::Inductance(l), col(&|w| Complex64::new(0.0, w))))
            }
            Term::SeriesCap(c) => fixed_cols.push((
                Coef::SeriesCapInverse(c),
                col(&|w| Complex64::new(0.0, -1.0 / w)),
            )),
            Term::SeriesCpe { q, n } => {
                let nv = if ctx.fixed[n] { ctx.base[n] } else { N0 };
                fixed_cols.push((
                    Coef::SeriesCpeInverse { q, n },
                    col(&|w| Complex64::from_polar(w.powf(-nv), -nv * std::f64::consts::FRAC_PI_2)),
                ))
            }
            Term::Warburg(s) => fixed_cols.push((
                Coef::Warburg(s),
                col(&|w| Complex64::new(1.0, -1.0) / w.sqrt()),
            )),
            Term::Diffusion { kind, r, tau } => slots.push(SlotInfo {
                slot: Slot::Diffusion(kind),
                target: Target::Diffusion { r, tau },
                grid: diff_grid.clone(),
                before: None,
                plain: false,
            }),
            Term::Arc { .. } => unreachable!("arcs handled by the caller"),
        }
    };
    for t in terms {
        match t {
            Term::Arc { r, cap, inner } => {
                let slot = match *cap {
                    Cap::C(_) => Slot::ArcC,
                    Cap::Q { n, .. } => Slot::ArcQ(if ctx.fixed[n] { ctx.base[n] } else { N0 }),
                };
                // A plain arc identical in form to an earlier plain arc must come after it in τ.
                let plain = inner.is_empty();
                let before = if plain {
                    slots.iter().rposition(|s| s.plain && s.slot == slot)
                } else {
                    None
                };
                slots.push(SlotInfo {
                    slot,
                    target: Target::Arc { r: *r, cap: *cap },
                    grid: arc_grid.clone(),
                    before,
                    plain,
                });
                for it in inner {
                    push_term(it, &mut fixed_cols, &mut slots);
                }
            }
            other => push_term(other, &mut fixed_cols, &mut slots),
        }
    }

    let n = ctx.omegas.len();
    let weigh = |v: &[Complex64]| -> Vec<f64> {
        let mut out = Vec::with_capacity(2 * n);
        out.extend((0..n).map(|i| ctx.w_re[i] * v[i].re));
        out.extend((0..n).map(|i| ctx.w_im[i] * v[i].im));
        out
    };
    let y = weigh(ctx.data);
    let yy: f64 = y.iter().map(|v| v * v).sum();

    // Fine grids: the coarse grid plus half-decade midpoints, so refinement can use the same columns.
    let fine: Vec<Vec<f64>> = slots
        .iter()
        .map(|s| {
            let g = &s.grid;
            let mut f = Vec::with_capacity(2 * g.len());
            for k in 0..g.len() {
                f.push(g[k]);
                if k + 1 < g.len() {
                    f.push((g[k] * g[k + 1]).sqrt());
                }
            }
            f
        })
        .collect();

    // All candidate columns, weighted: fixed columns first, then each slot's fine grid.
    let mut cols: Vec<Vec<f64>> = fixed_cols.iter().map(|(_, c)| weigh(c)).collect();
    let mut slot_offset = Vec::with_capacity(slots.len());
    for (s, f) in slots.iter().zip(&fine) {
        slot_offset.push(cols.len());
        for &tau in f {
            let c = column(s.slot, tau, ctx.grid);
            cols.push(weigh(&c));
        }
    }
    let m = cols.len();
    let mut gram = vec![0.0; m * m];
    let mut rhs = vec![0.0; m];
    for a in 0..m {
        rhs[a] = dot(&cols[a], &y);
        for b in a..m {
            let g = dot(&cols[a], &cols[b]);
            gram[a * m + b] = g;
            gram[b * m + a] = g;
        }
    }
    let nf = fixed_cols.len();
    let k = nf + slots.len();
    let mut solver = SmallNnls::new(k);

    // Evaluate one assignment of fine-grid indices to slots.
    let evaluate = |assign: &[usize], solver: &mut SmallNnls| -> (f64, Vec<f64>) {
        let idx: Vec<usize> = (0..nf)
            .chain(assign.iter().enumerate().map(|(s, &g)| slot_offset[s] + g))
            .collect();
        for (i, &a) in idx.iter().enumerate() {
            solver.b[i] = rhs[a];
            for (j, &b) in idx.iter().enumerate() {
                solver.g[i * k + j] = gram[a * m + b];
            }
        }
        solver.solve();
        let x = solver.x[..k].to_vec();
        let mut sse = yy;
        for i in 0..k {
            sse -= 2.0 * x[i] * solver.b[i];
            for j in 0..k {
                sse += x[i] * solver.g[i * k + j] * x[j];
            }
        }
        (sse.max(0.0), x)
    };

    // Coarse search: every slot on its coarse points (even fine indices), respecting arc order.
    let coarse_len: Vec<usize> = slots.iter().map(|s| s.grid.len()).collect();
    let mut results: Vec<(f64, Vec<usize>, Vec<f64>)> = Vec::new();
    let mut assign = vec![0usize; slots.len()];
    let total: usize = coarse_len.iter().product::<usize>().max(1);
    for combo in 0..total {
        let mut rem = combo;
        for (s, &len) in coarse_len.iter().enumerate() {
            assign[s] = 2 * (rem % len);
            rem /= len;
        }
        if slots
            .iter()
            .enumerate()
            .any(|(s, info)| info.before.is_some_and(|b| assign[s] <= assign[b]))
        {
            continue;
        }
        let (sse, x) = evaluate(&assign, &mut solver);
        results.push((sse, assign.clone(), x));
    }
    results.sort_by(|a, b| a.0.total_cmp(&b.0));
    results.truncate(4 * count.max(1));

    // Refinement: move each slot by one half decade around the best coarse points.
    let mut refined = results.clone();
    for (_, base_assign, _) in &results {
        let neighbours = 3usize.pow(slots.len() as u32);
        for code in 0..neighbours {
            let mut rem = code;
            let mut a = base_assign.clone();
            let mut ok = true;
            for (s, f) in fine.iter().enumerate() {
                let step = (rem % 3) as isize - 1;
                rem /= 3;
                let v = a[s] as isize + step;
                if v < 0 || v >= f.len() as isize {
                    ok = false;
                    break;
                }
                a[s] = v as usize;
            }
            if !ok
                || slots
                    .iter()
                    .enumerate()
                    .any(|(s, info)| info.before.is_some_and(|b| a[s] <= a[b]))
            {
                continue;
            }
            let (sse, x) = evaluate(&a, &mut solver);
            refined.push((sse, a, x));
        }
    }
    refined.sort_by(|a, b| a.0.total_cmp(&b.0));

    // Keep the best distinct points: at least one slot a whole decade (two fine steps) away.
    let mut chosen: Vec<(Vec<usize>, Vec<f64>)> = Vec::new();
    for (_, a, x) in refined {
        if chosen.len() >= count {
            break;
        }
        let distinct = chosen
            .iter()
            .all(|(c, _)| c.iter().zip(&a).any(|(u, v)| u.abs_diff(*v) >= 2));
        if distinct {
            chosen.push((a, x));
        }
    }

    let scale = ctx.scale();
    chosen
        .into_iter()
        .map(|(a, x)| {
            let mut p = ctx.base.to_vec();
            for (c, (coef, _)) in fixed_cols.iter().enumerate() {
                let v = x[c];
                match *coef {
                    Coef::Offset(r) => ctx.put(&mut p, r, if v > 0.0 { v } else { 1e-3 * scale }),
                    Coef::Inductance(l) => {
                        ctx.put(&mut p, l, if v > 0.0 { v } else { 1e-3 * scale / wmax })
                    }
                    Coef::SeriesCapInverse(ci) => ctx.put(
                        &mut p,
                        ci,
                        if v > 0.0 {
                            1.0 / v
                        } else {
                            1e3 / (wmin * scale)
                        },
                    ),
                    Coef::SeriesCpeInverse { q, n } => {
                        ctx.put(
                            &mut p,
                            q,
                            if v > 0.0 {
                                1.0 / v
                            } else {
                                1e3 / (wmin * scale)
                            },
                        );
                        ctx.put(&mut p, n, N0);
                    }
                    Coef::Warburg(s) => ctx.put(
                        &mut p,
                        s,
                        if v > 0.0 {
                            v
                        } else {
                            1e-3 * scale * wmin.sqrt()
                        },
                    ),
                }
            }
            for (s, info) in slots.iter().enumerate() {
                let tau = fine[s][a[s]];
                let v = x[nf + s];
                let r = if v > 0.0 { v } else { 1e-3 * scale };
                match info.target {
                    Target::Arc { r: ri, cap } => {
                        ctx.put(&mut p, ri, r);
                        set_arc_tau(ctx, &mut p, ri, cap, tau);
                    }
                    Target::Diffusion { r: ri, tau: ti } => {
                        ctx.put(&mut p, ri, r);
                        ctx.put(&mut p, ti, tau);
                    }
                }
            }
            p
        })
        .collect()
}

/// A time-constant slot as the DRT starts see it, in the order its peak is expected along τ.
#[derive(Debug, Clone, Copy)]
enum DrtSlot {
    Arc {
        r: usize,
        cap: Cap,
    },
    Diffusion {
        kind: &'static ElementKind,
        r: usize,
        tau: usize,
    },
}

/// At most this many DRT peaks (the largest) take part in the assignment.
const MAX_DRT_PEAKS: usize = 8;

/// Starting points built from a DRT: its peaks (ascending τ) are assigned to the circuit's
/// time-constant slots in τ order, arcs first in circuit order (the first arc in the text is taken as the
/// fastest), then diffusion elements (the slowest). Each arc gets its peak's resistance and τ; a
/// diffusion element gets its τ and R from the peak through the element's exact Voigt expansion (first
/// term: τ₁ = 4τ/π², R₁ = 8R/π² for the transmissive form; τ₁ = τ/π², R₁ = 2R/π² for the reflective
/// form; the Gerischer peak is taken at τ). Peaks left over add their resistance to the nearest assigned
/// peak in ln τ, so that the total polarisation resistance is kept; slots left over (fewer peaks than
/// slots) get a small resistance half a decade beyond their neighbours. R₀ comes from R∞ and a series
/// inductance from the DRT's L. Everything else (CPE exponents at 0.9, series capacitors, semi-infinite
/// Warburg) is taken from `template`, normally the best grid start.
///
/// Assignments are ranked by the resistance of the peaks they leave unassigned (least first); the best
/// `count` are returned.
pub(crate) fn drt_starts(
    ctx: &Context<'_>,
    terms: &[Term],
    drt: &crate::drt::DrtResult,
    template: &[f64],
    count: usize,
) -> Vec<Vec<f64>> {
    let mut arcs_ = Vec::new();
    let mut diffusions = Vec::new();
    let mut offset = None;
    let mut inductance = None;
    for t in terms {
        match t {
            Term::Offset(r) => offset = offset.or(Some(*r)),
            Term::Inductance(l) => inductance = inductance.or(Some(*l)),
            Term::Arc { r, cap, inner } => {
                arcs_.push(DrtSlot::Arc { r: *r, cap: *cap });
                for it in inner {
                    if let Term::Diffusion { kind, r, tau } = it {
                        diffusions.push(DrtSlot::Diffusion {
                            kind,
                            r: *r,
                            tau: *tau,
                        });
                    }
                }
            }
            Term::Diffusion { kind, r, tau } => diffusions.push(DrtSlot::Diffusion {
                kind,
                r: *r,
                tau: *tau,
            }),
            _ => {}
        }
    }
    let slots: Vec<DrtSlot> = arcs_.into_iter().chain(diffusions).collect();
    let mut peaks: Vec<(f64, f64)> = drt
        .peaks
        .iter()
        .filter(|p| p.tau_s.is_finite() && p.tau_s > 0.0 && p.resistance_ohm.is_finite())
        .map(|p| (p.tau_s, p.resistance_ohm.max(0.0)))
        .collect();
    if slots.is_empty() || peaks.is_empty() || template.len() != ctx.base.len() {
        return Vec::new();
    }
    if peaks.len() > MAX_DRT_PEAKS {
        peaks.sort_by(|a, b| b.1.total_cmp(&a.1));
        peaks.truncate(MAX_DRT_PEAKS);
        peaks.sort_by(|a, b| a.0.total_cmp(&b.0));
    }
    let total: f64 = peaks.iter().map(|p| p.1).sum::<f64>().max(1e-300);
    let (k, m) = (slots.len(), peaks.len());

    // Each assignment: for every slot, Some(peak) or None, increasing in peak index.
    let mut assignments: Vec<(f64, Vec<Option<usize>>)> = Vec::new();
    if m >= k {
        for chosen in combinations(m, k) {
            let left: f64 = (0..m)
                .filter(|i| !chosen.contains(i))
                .map(|i| peaks[i].1)
                .sum();
            assignments.push((left, chosen.into_iter().map(Some).collect()));
        }
    } else {
        for used in combinations(k, m) {
            let mut a = vec![None; k];
            for (pi, &si) in used.iter().enumerate() {
                a[si] = Some(pi);
            }
            assignments.push((0.0, a));
        }
    }
    assignments.sort_by(|a, b| a.0.total_cmp(&b.0));
    assignments.truncate(count);

    assignments
        .into_iter()
        .map(|(_, a)| {
            // Resistance per slot: its peak plus leftover peaks nearest to it in ln τ.
            let mut r_slot: Vec<f64> = a.iter().map(|p| p.map_or(0.0, |i| peaks[i].1)).collect();
            let assigned: Vec<(usize, usize)> = a
                .iter()
                .enumerate()
                .filter_map(|(s, p)| p.map(|i| (s, i)))
                .collect();
            for (i, &(tau, r)) in peaks.iter().enumerate() {
                if a.contains(&Some(i)) {
                    continue;
                }
                if let Some(&(s, _)) = assigned.iter().min_by(|x, y| {
                    let dx = (peaks[x.1].0 / tau).ln().abs();
                    let dy = (peaks[y.1].0 / tau).ln().abs();
                    dx.total_cmp(&dy)
                }) {
                    r_slot[s] += r;
                }
            }
            // Peak τ per slot; empty slots half a decade beyond the previous slot (or before the
            // next one when first).
            let mut tau_slot: Vec<Option<f64>> = a.iter().map(|p| p.map(|i| peaks[i].0)).collect();
            for s in 0..k {
                if tau_slot[s].is_none() {
                    let prev = tau_slot[..s].iter().rev().flatten().next().copied();
                    let next = tau_slot[s + 1..].iter().flatten().next().copied();
                    tau_slot[s] = Some(match (prev, next) {
                        (Some(p), Some(n)) => (p * n).sqrt(),
                        (Some(p), None) => p * 10f64.sqrt(),
                        (None, Some(n)) => n / 10f64.sqrt(),
                        (None, None) => 1.0,
                    });
                }
            }
            let mut p = template.to_vec();
            if let Some(r0) = offset {
                if drt.r_inf_ohm > 0.0 {
                    ctx.put(&mut p, r0, drt.r_inf_ohm);
                }
            }
            if let (Some(l), Some(lv)) = (inductance, drt.inductance_h) {
                if lv > 0.0 {
                    ctx.put(&mut p, l, lv);
                }
            }
            for (s, slot) in slots.iter().enumerate() {
                let r = if r_slot[s] > 0.0 {
                    r_slot[s]
                } else {
                    0.05 * total
                };
                let tau = tau_slot[s].unwrap_or(1.0);
                match *slot {
                    DrtSlot::Arc { r: ri, cap } => {
                        ctx.put(&mut p, ri, r);
                        set_arc_tau(ctx, &mut p, ri, cap, tau);
                    }
                    DrtSlot::Diffusion {
                        kind,
                        r: ri,
                        tau: ti,
                    } => {
                        let pi2 = std::f64::consts::PI * std::f64::consts::PI;
                        let (rv, tv) = match kind.symbol {
                            "Wt" => (r * pi2 / 8.0, tau * pi2 / 4.0),
                            "Wr" => (r * pi2 / 2.0, tau * pi2),
                            _ => (r, tau),
                        };
                        ctx.put(&mut p, ri, rv);
                        ctx.put(&mut p, ti, tv);
                    }
                }
            }
            p
        })
        .collect()
}

/// All increasing k-subsets of 0..n, in lexicographic order.
fn combinations(n: usize, k: usize) -> Vec<Vec<usize>> {
    let mut out = Vec::new();
    if k > n {
        return out;
    }
    let mut c: Vec<usize> = (0..k).collect();
    loop {
        out.push(c.clone());
        let Some(i) = (0..k).rev().find(|&i| c[i] != i + n - k) else {
            return out;
        };
        c[i] += 1;
        for j in i + 1..k {
            c[j] = c[j - 1] + 1;
        }
    }
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

/// Puts structurally identical plain arcs (same capacitive kind, nothing in their resistive branch) in
/// increasing time-constant order along the circuit text. Series impedances commute, so this only fixes
/// the labelling of an exact symmetry: the first such arc in the text is the fastest (highest frequency).
/// Arcs whose swap would break a bound or a fixed value are left alone.
pub(crate) fn order_identical_arcs(ctx: &Context<'_>, terms: &[Term], p: &mut [f64]) {
    let plain: Vec<(usize, Cap)> = terms
        .iter()
        .filter_map(|t| match t {
            Term::Arc { r, cap, inner } if inner.is_empty() => Some((*r, *cap)),
            _ => None,
        })
        .collect();
    let indices = |r: usize, cap: Cap| -> Vec<usize> {
        match cap {
            Cap::C(c) => vec![r, c],
            Cap::Q { q, n } => vec![r, q, n],
        }
    };
    for _ in 0..plain.len() {
        for w in 0..plain.len().saturating_sub(1) {
            let (a, b) = (plain[w], plain[w + 1]);
            if std::mem::discriminant(&a.1) != std::mem::discriminant(&b.1)
                || arc_tau(p, a.0, a.1) <= arc_tau(p, b.0, b.1)
            {
                continue;
            }
            let (ia, ib) = (indices(a.0, a.1), indices(b.0, b.1));
            let swappable = ia.iter().zip(&ib).all(|(&i, &j)| {
                let (lo_i, hi_i) = ctx.circuit.bounds(i);
                let (lo_j, hi_j) = ctx.circuit.bounds(j);
                !ctx.fixed[i]
                    && !ctx.fixed[j]
                    && p[j] >= lo_i
                    && p[j] <= hi_i
                    && p[i] >= lo_j
                    && p[i] <= hi_j
            });
            if swappable {
                for (&i, &j) in ia.iter().zip(&ib) {
                    p.swap(i, j);
                }
            }
        }
    }
}

/// Variants of a fitted point: every pair of arcs swapped (resistance and time constant exchanged), then
/// each arc moved to other time constants (one per decade across the window), with its resistance raised
/// to a tenth of the arcs' total if it had shrunk: this lets a small arc hidden beside a large one be
/// found, and an arc that merged into its neighbour be re-inserted.
pub(crate) fn arc_moves(ctx: &Context<'_>, terms: &[Term], best: &[f64]) -> Vec<Vec<f64>> {
    let arcs = arcs(terms);
    if arcs.len() < 2 {
        return Vec::new();
    }
    let (wmin, wmax) = ctx.omega_range();
    let total: f64 = arcs.iter().map(|(r, _)| best[*r]).sum();
    let grid = log_grid(0.3 / wmax, 3.0 / wmin, 1.0);
    let mut out = Vec::new();
    out.extend(arc_swaps(ctx, terms, best));
    for &(r, cap) in &arcs {
        let current = arc_tau(best, r, cap);
        for &tau in &grid {
            if (tau / current).log10().abs() < 0.5 {
                continue;
            }
            let mut p = best.to_vec();
            ctx.put(&mut p, r, best[r].max(0.1 * total));
            set_arc_tau(ctx, &mut p, r, cap, tau);
            out.push(p);
        }
    }
    out
}

/// Variants of a fitted point in which two arcs exchange resistance and time constant, one per pair of
/// arcs. The grid surrogate puts diffusion in series, so it cannot tell which arc's branch holds it; a
/// fit that hung the diffusion on the wrong arc sits in a local minimum that moving one arc at a time
/// does not leave.
pub(crate) fn arc_swaps(ctx: &Context<'_>, terms: &[Term], best: &[f64]) -> Vec<Vec<f64>> {
    let arcs = arcs(terms);
    let mut out = Vec::new();
    for (a, &(ra, ca)) in arcs.iter().enumerate() {
        for &(rb, cb) in &arcs[a + 1..] {
            let (ta, tb) = (arc_tau(best, ra, ca), arc_tau(best, rb, cb));
            let mut p = best.to_vec();
            ctx.put(&mut p, ra, best[rb]);
            ctx.put(&mut p, rb, best[ra]);
            set_arc_tau(ctx, &mut p, ra, ca, tb);
            set_arc_tau(ctx, &mut p, rb, cb, ta);
            out.push(p);
        }
    }
    out
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

fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

/// Lawson–Hanson active-set NNLS on normal equations G x = b (G = AᵀA, b = Aᵀy) for the handful of
/// coefficients of a surrogate; buffers are allocated once and reused for every grid point.
/// Lawson & Hanson 1974, Solving Least Squares Problems, ch. 23.
struct SmallNnls {
    k: usize,
    g: Vec<f64>,
    b: Vec<f64>,
    x: Vec<f64>,
    s: Vec<f64>,
    passive: Vec<bool>,
    work: Vec<f64>,
}

impl SmallNnls {
    fn new(k: usize) -> SmallNnls {
        SmallNnls {
            k,
            g: vec![0.0; k * k],
            b: vec![0.0; k],
            x: vec![0.0; k],
            s: vec![0.0; k],
            passive: vec![false; k],
            work: vec![0.0; k * (k + 1)],
        }
    }

    fn solve(&mut self) {
        let k = self.k;
        self.x.fill(0.0);
        self.passive.fill(false);
        let tol = 1e-12
            * self
                .b
                .iter()
                .map(|v| v.abs())
                .fold(0.0, f64::max)
                .max(1e-300);
        for _outer in 0..3 * k + 3 {
            // Gradient w = b − G x; pick the most positive among the active set.
            let mut best = None;
            let mut best_w = tol;
            for j in 0..k {
                if self.passive[j] {
                    continue;
                }
                let w = self.b[j] - (0..k).map(|i| self.g[j * k + i] * self.x[i]).sum::<f64>();
                if w > best_w {
                    best_w = w;
                    best = Some(j);
                }
            }
            let Some(j) = best else { return };
            self.passive[j] = true;
            for _inner in 0..3 * k + 3 {
                if !self.solve_passive() {
                    self.passive[j] = false;
                    return;
                }
                if (0..k).all(|i| !self.passive[i] || self.s[i] > 0.0) {
                    self.x.copy_from_slice(&self.s);
                    break;
                }
                let mut alpha = 1.0f64;
                for i in 0..k {
                    if self.passive[i] && self.s[i] <= 0.0 {
                        alpha = alpha.min(self.x[i] / (self.x[i] - self.s[i]));
                    }
                }
                for i in 0..k {
                    self.x[i] += alpha * (self.s[i] - self.x[i]);
                    if self.passive[i]
                        && self.x[i] <= 1e-15 * self.x.iter().fold(0.0f64, |m, v| m.max(v.abs()))
                    {
                        self.passive[i] = false;
                        self.x[i] = 0.0;
                    }
                }
            }
        }
    }

    /// Solves the passive subsystem into `s` (zeros elsewhere) by Gaussian elimination with partial
    /// pivoting; false if it is singular.
    fn solve_passive(&mut self) -> bool {
        let k = self.k;
        let idx: Vec<usize> = (0..k).filter(|&i| self.passive[i]).collect();
        let m = idx.len();
        let w = &mut self.work;
        for (r, &i) in idx.iter().enumerate() {
            for (c, &j) in idx.iter().enumerate() {
                w[r * (m + 1) + c] = self.g[i * k + j];
            }
            w[r * (m + 1) + m] = self.b[i];
        }
        for col in 0..m {
            let piv = (col..m)
                .max_by(|&a, &b| {
                    w[a * (m + 1) + col]
                        .abs()
                        .total_cmp(&w[b * (m + 1) + col].abs())
                })
                .expect("non-empty");
            let diag = w[piv * (m + 1) + col];
            if diag.abs() <= 1e-14 * w[col * (m + 1) + col].abs().max(1e-300) || diag == 0.0 {
                return false;
            }
            if piv != col {
                for c in 0..=m {
                    w.swap(piv * (m + 1) + c, col * (m + 1) + c);
                }
            }
            for r in col + 1..m {
                let f = w[r * (m + 1) + col] / w[col * (m + 1) + col];
                for c in col..=m {
                    w[r * (m + 1) + c] -= f * w[col * (m + 1) + c];
                }
            }
        }
        self.s.fill(0.0);
        for r in (0..m).rev() {
            let mut v = w[r * (m + 1) + m];
            for c in r + 1..m {
                v -= w[r * (m + 1) + c] * self.s[idx[c]];
            }
            self.s[idx[r]] = v / w[r * (m + 1) + r];
        }
        true
    }
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn small_nnls_matches_hand_solutions() {
        // min |A x − y|², A = I₂, y = (1, −1) → x = (1, 0).
        let mut s = SmallNnls::new(2);
        s.g.copy_from_slice(&[1.0, 0.0, 0.0, 1.0]);
        s.b.copy_from_slice(&[1.0, -1.0]);
        s.solve();
        assert_eq!(s.x, [1.0, 0.0]);
        // A = [[1, 1], [0, 1]], y = (2, 1): unconstrained x = (1, 1) is feasible.
        let mut s = SmallNnls::new(2);
        s.g.copy_from_slice(&[1.0, 1.0, 1.0, 2.0]);
        s.b.copy_from_slice(&[2.0, 3.0]);
        s.solve();
        assert!((s.x[0] - 1.0).abs() < 1e-12 && (s.x[1] - 1.0).abs() < 1e-12);
        // A = [[1, 2], [1, 2.1]] nearly collinear, y = (−1, 3): unconstrained solution has a negative
        // entry; the constrained one uses column 2 only: x₂ = (2·−1 + 2.1·3)/(4 + 4.41).
        let a = [[1.0, 2.0], [1.0, 2.1]];
        let y = [-1.0, 3.0];
        let mut s = SmallNnls::new(2);
        for i in 0..2 {
            for j in 0..2 {
                s.g[i * 2 + j] = a[0][i] * a[0][j] + a[1][i] * a[1][j];
            }
            s.b[i] = a[0][i] * y[0] + a[1][i] * y[1];
        }
        s.solve();
        assert_eq!(s.x[0], 0.0);
        assert!((s.x[1] - (-2.0 + 2.1 * 3.0) / (4.0 + 4.41)).abs() < 1e-12);
    }

    #[test]
    fn combinations_are_increasing_subsets() {
        assert_eq!(
            combinations(4, 2),
            vec![
                vec![0, 1],
                vec![0, 2],
                vec![0, 3],
                vec![1, 2],
                vec![1, 3],
                vec![2, 3]
            ]
        );
        assert_eq!(combinations(3, 0), vec![Vec::<usize>::new()]);
        assert!(combinations(2, 3).is_empty());
    }

    #[test]
    fn recognises_the_library_shapes() {
        let c = crate::circuit::parse("L0 + R0 + Rf|Qf + (Rct + Wtd)|Qdl").unwrap();
        let t = recognise(&c).unwrap();
        assert_eq!(t.len(), 4);
        assert!(matches!(&t[3], Term::Arc { r: 5, inner, .. } if inner.len() == 1));
        assert!(recognise(&crate::circuit::parse("R1|(R2 + C2|(R3 + G3))|Q4").unwrap()).is_none());
    }
}
