//! Starts built from the peaks of a DRT of the data.

use super::{Cap, Context, Term, set_arc_tau};
use crate::element::ElementKind;

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
