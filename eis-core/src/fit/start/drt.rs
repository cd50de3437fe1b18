//! Starts built from the peaks of a DRT of the data.

use super::{Context, Slot, Term, set_arc_tau, set_feature};
use crate::element::{Class, ElementKind, Seed};

/// At most this many DRT peaks (the largest) take part in the assignment.
const MAX_DRT_PEAKS: usize = 8;

/// Starting points built from a DRT: its peaks (ascending τ) are assigned to the circuit's
/// time-constant slots in τ order, arcs and porous electrodes first in circuit order (the first in
/// the text is taken as the fastest), then diffusion elements (the slowest). Each arc gets its
/// peak's resistance and τ; a feature element gets its R and τ from the peak through the peak
/// fractions of its seed (for finite diffusion the first term of its exact Voigt expansion). Peaks
/// left over add their resistance to the nearest assigned peak in ln τ, so that the total
/// polarisation resistance is kept; slots left over (fewer peaks than slots) get a small resistance
/// half a decade beyond their neighbours. R₀ comes from R∞ and a series inductance from the DRT's
/// L. Everything else (CPE exponents at 0.9, series capacitors, semi-infinite Warburg) is taken
/// from `template`, normally the best grid start.
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
    let layout = Layout::of(terms);
    let mut peaks: Vec<(f64, f64)> = drt
        .peaks
        .iter()
        .filter(|p| p.tau_s.is_finite() && p.tau_s > 0.0 && p.resistance_ohm.is_finite())
        .map(|p| (p.tau_s, p.resistance_ohm.max(0.0)))
        .collect();
    if layout.slots.is_empty() || peaks.is_empty() || template.len() != ctx.base.len() {
        return Vec::new();
    }
    if peaks.len() > MAX_DRT_PEAKS {
        peaks.sort_by(|a, b| b.1.total_cmp(&a.1));
        peaks.truncate(MAX_DRT_PEAKS);
        peaks.sort_by(|a, b| a.0.total_cmp(&b.0));
    }
    let total: f64 = peaks.iter().map(|p| p.1).sum::<f64>().max(1e-300);
    assignments(&peaks, layout.slots.len(), count)
        .iter()
        .map(|a| {
            let (r_slot, tau_slot) = slot_values(&peaks, a);
            let mut p = template.to_vec();
            if let Some(r0) = layout.offset {
                if drt.r_inf_ohm > 0.0 {
                    ctx.put(&mut p, r0, drt.r_inf_ohm);
                }
            }
            if let (Some(l), Some(lv)) = (layout.inductance, drt.inductance_h) {
                if lv > 0.0 {
                    ctx.put(&mut p, l, lv);
                }
            }
            for (s, slot) in layout.slots.iter().enumerate() {
                let r = if r_slot[s] > 0.0 {
                    r_slot[s]
                } else {
                    0.05 * total
                };
                let tau = tau_slot[s];
                match *slot {
                    Slot::Arc { r: ri, cap } => {
                        ctx.put(&mut p, ri, r);
                        set_arc_tau(ctx, &mut p, ri, cap, tau);
                    }
                    Slot::Feature { kind, first } => {
                        // The peak is the feature's largest Voigt term: scale it back to the
                        // element's own resistance and time constant.
                        let (rf, tf) = match kind.seed {
                            Seed::Feature { peak, .. } => peak,
                            _ => (1.0, 1.0),
                        };
                        set_feature(ctx, &mut p, kind, first, r / rf, tau / tf);
                    }
                }
            }
            p
        })
        .collect()
}

/// The time-constant slots of a recognised circuit with its series resistance and inductance.
struct Layout {
    /// Arcs and porous electrodes (interfaces) in circuit order, then the other features (diffusion,
    /// the slowest).
    slots: Vec<Slot>,
    /// First parameter of the series resistance.
    offset: Option<usize>,
    /// First parameter of the series inductance.
    inductance: Option<usize>,
}

impl Layout {
    fn of(terms: &[Term]) -> Layout {
        let mut arcs = Vec::new();
        let mut diffusions = Vec::new();
        let mut offset = None;
        let mut inductance = None;
        let mut feature = |kind: &'static ElementKind, first: usize, arcs: &mut Vec<Slot>| {
            let slot = Slot::Feature { kind, first };
            if kind.class == Class::Porous {
                arcs.push(slot);
            } else {
                diffusions.push(slot);
            }
        };
        for t in terms {
            match t {
                Term::Linear { kind, first } => match kind.class {
                    Class::Resistive => offset = offset.or(Some(*first)),
                    Class::Inductive => inductance = inductance.or(Some(*first)),
                    _ => {}
                },
                Term::Feature { kind, first } => feature(kind, *first, &mut arcs),
                Term::Arc { r, cap, inner } => {
                    arcs.push(Slot::Arc { r: *r, cap: *cap });
                    for it in inner {
                        if let Term::Feature { kind, first } = it {
                            feature(kind, *first, &mut arcs);
                        }
                    }
                }
            }
        }
        Layout {
            slots: arcs.into_iter().chain(diffusions).collect(),
            offset,
            inductance,
        }
    }
}

/// The `count` best assignments of `peaks` (τ, R; ascending τ) to `k` slots: for every slot,
/// Some(peak) or None, increasing in peak index; ranked by the resistance of the peaks they leave
/// unassigned (least first).
fn assignments(peaks: &[(f64, f64)], k: usize, count: usize) -> Vec<Vec<Option<usize>>> {
    let m = peaks.len();
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
    assignments.into_iter().map(|(_, a)| a).collect()
}

/// Resistance and τ of every slot under the assignment `a`: a slot's peak plus the leftover peaks
/// nearest to it in ln τ; an empty slot's τ half a decade beyond the previous slot (or before the
/// next one when first), its resistance zero.
fn slot_values(peaks: &[(f64, f64)], a: &[Option<usize>]) -> (Vec<f64>, Vec<f64>) {
    let k = a.len();
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
    let tau_slot = tau_slot.into_iter().map(|t| t.unwrap_or(1.0)).collect();
    (r_slot, tau_slot)
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

#[cfg(test)]
mod tests {
    use super::*;

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
}
