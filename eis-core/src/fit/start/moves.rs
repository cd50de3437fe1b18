//! Variants of a fitted point: identical arcs put in order, arcs swapped or moved along τ.

use super::{Context, Term, arc_tau, arcs, log_grid, set_arc_tau};
use crate::element::{ElementKind, Seed};

/// A block that can trade places with another of the same form: its element kind (the capacitive
/// kind for an arc), its parameter indices and its time constant at `p`.
fn unit(t: &Term, p: &[f64]) -> Option<(&'static ElementKind, Vec<usize>, f64)> {
    match t {
        Term::Arc { r, cap, inner } if inner.is_empty() => Some((
            cap.kind,
            std::iter::once(*r).chain(cap.range()).collect(),
            arc_tau(p, *r, *cap),
        )),
        Term::Feature { kind, first } => {
            let range = *first..*first + kind.params.len();
            let tau = match kind.seed {
                Seed::Feature { tau, .. } => tau(&p[range.clone()]),
                _ => f64::NAN,
            };
            Some((kind, range.collect(), tau))
        }
        _ => None,
    }
}

/// Puts structurally identical blocks in increasing time-constant order along the circuit text: plain
/// arcs (same capacitive kind, nothing in their resistive branch) among themselves, and feature
/// elements of the same kind in series (two porous electrodes, say). Series impedances commute, so
/// this only fixes the labelling of an exact symmetry: the first such block in the text is the fastest
/// (highest frequency). Blocks whose swap would break a bound or a fixed value are left alone.
pub(crate) fn order_identical_arcs(ctx: &Context<'_>, terms: &[Term], p: &mut [f64]) {
    let arcs: Vec<&Term> = terms
        .iter()
        .filter(|t| matches!(t, Term::Arc { inner, .. } if inner.is_empty()))
        .collect();
    let features: Vec<&Term> = terms
        .iter()
        .filter(|t| matches!(t, Term::Feature { .. }))
        .collect();
    for group in [arcs, features] {
        order_group(ctx, &group, p);
    }
}

/// Bubble-sorts neighbouring blocks of one group by time constant where they are identical in form.
fn order_group(ctx: &Context<'_>, group: &[&Term], p: &mut [f64]) {
    for _ in 0..group.len() {
        for w in 0..group.len().saturating_sub(1) {
            let (Some(a), Some(b)) = (unit(group[w], p), unit(group[w + 1], p)) else {
                continue;
            };
            if a.0 != b.0 || a.2 <= b.2 {
                continue;
            }
            let (ia, ib) = (a.1, b.1);
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

/// Variants of a fitted point in which one arc is moved to other time constants (one per decade across
/// the window), with its resistance raised to a tenth of the arcs' total if it had shrunk: this lets a
/// small arc hidden beside a large one be found, and an arc that merged into its neighbour be
/// re-inserted. None for fewer than two arcs.
pub(crate) fn arc_relocations(ctx: &Context<'_>, terms: &[Term], best: &[f64]) -> Vec<Vec<f64>> {
    let arcs = arcs(terms);
    if arcs.len() < 2 {
        return Vec::new();
    }
    let (wmin, wmax) = ctx.omega_range();
    let total: f64 = arcs.iter().map(|(r, _)| best[*r]).sum();
    let grid = log_grid(0.3 / wmax, 3.0 / wmin, 1.0);
    let mut out = Vec::new();
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
