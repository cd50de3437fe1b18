//! Variants of a fitted point: identical arcs put in order, arcs swapped or moved along τ.

use super::{Cap, Context, Term, arc_tau, arcs, log_grid, set_arc_tau};

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
