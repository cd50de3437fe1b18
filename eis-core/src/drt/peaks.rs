//! Peaks of γ: local maxima that rise enough above the valleys separating them from their neighbours,
//! each with its resistance (the area between those valleys), and whether it sits at the edge of the
//! measured window.
//!
//! One rule serves the library, `eis drt` and the DRT plot ([`find_peaks`]), and the same selection of
//! maxima ([`peak_indices`]) marks the arc apexes of a Nyquist plot.
//!
//! # Which maxima count
//!
//! A local maximum of γ counts as a peak when its height, and its rise above the higher of the valleys
//! that separate it from its neighbouring peaks (or from the ends of the grid), are both at least a
//! fraction of the largest γ ([`DEFAULT_PEAK_THRESHOLD`], 3 %). The least prominent candidate is
//! dropped first, and the test repeated, so a bump on the flank of a larger peak merges into it
//! (its area is added to that peak's resistance) while a small process well separated from the others
//! stays: two lumped arcs with resistances 1 : 0.04 a decade and a half apart are both reported.
//!
//! # Peaks at the window edge
//!
//! The measured frequencies see time constants from 1/(2πf_max) to 1/(2πf_min). A peak whose maximum
//! lies within [`EDGE_MARGIN_DECADES`] of either end of that window, or beyond it, is marked
//! [`DrtPeak::at_window_edge`]: its position and area are set by a process whose own time constant the
//! data do not reach (typically a diffusion tail still rising at the lowest frequency), not by a
//! process the data resolve.

use super::DrtPeak;
use super::lambda::argmin;
use std::f64::consts::{LN_10, PI};

/// The default smallest peak, as a fraction of the largest γ (see the [module docs](self)). A lumped
/// process of 4 % of the resistance of the largest, a decade and a half from it, stays above it; the
/// ripple that regularisation leaves on the tails of a broad (Cole–Cole, φ = 0.8) distribution, up to
/// about 2.5 % of its height in our tests, stays below it, as do the bumps of 0.2–1 % noise on a
/// single arc. Lower it to look for smaller processes, at the risk of reporting ripple.
pub const DEFAULT_PEAK_THRESHOLD: f64 = 0.03;

/// How near (in decades of τ) to an end of the measured window a peak's maximum may lie before it is
/// marked as being at the window edge. A lumped arc whose time constant is this far inside the window
/// shows its apex in −Z″ and its DRT peak inside; a peak nearer the end, or beyond it, is the rising
/// part of a process that the data do not reach.
pub const EDGE_MARGIN_DECADES: f64 = 0.25;

/// Indices of the peaks of `values` (samples of a curve along an ascending axis), by the rule in the
/// [module docs](self) with `threshold` the fraction of the largest value. Non-finite values are
/// never peaks. Empty when nothing is positive.
pub fn peak_indices(values: &[f64], threshold: f64) -> Vec<usize> {
    let gamma = values;
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
    cand
}

/// Peaks of a DRT given as γ (Ω per unit ln τ) against τ (s): the same rule as the DRT itself uses,
/// for a curve read back from a file. Points with a non-finite or non-positive τ or a non-finite γ are
/// left out; the rest are sorted by τ, and, if they are not evenly spaced in ln τ, interpolated
/// linearly onto an even grid of the same number of points. `window_s`, the (shortest, longest) time
/// constants the measurement saw, marks the peaks at its edge; without it none is marked.
pub fn find_peaks(
    tau_s: &[f64],
    gamma: &[f64],
    threshold: f64,
    window_s: Option<(f64, f64)>,
) -> Vec<DrtPeak> {
    let mut pts: Vec<(f64, f64)> = tau_s
        .iter()
        .zip(gamma)
        .filter(|(t, g)| t.is_finite() && **t > 0.0 && g.is_finite())
        .map(|(t, g)| (t.ln(), *g))
        .collect();
    pts.sort_by(|a, b| a.0.total_cmp(&b.0));
    pts.dedup_by(|a, b| a.0 == b.0);
    let n = pts.len();
    if n < 3 {
        return Vec::new();
    }
    let (lo, hi) = (pts[0].0, pts[n - 1].0);
    let h = (hi - lo) / (n - 1) as f64;
    let even = pts
        .iter()
        .enumerate()
        .all(|(k, p)| (p.0 - (lo + k as f64 * h)).abs() <= 1e-6 * h);
    let (grid, values): (Vec<f64>, Vec<f64>) = if even {
        pts.into_iter().unzip()
    } else {
        let grid: Vec<f64> = (0..n).map(|k| lo + k as f64 * h).collect();
        let mut j = 0;
        let values = grid
            .iter()
            .map(|&y| {
                while j + 2 < n && pts[j + 1].0 < y {
                    j += 1;
                }
                let (a, b) = (pts[j], pts[j + 1]);
                let t = ((y - a.0) / (b.0 - a.0)).clamp(0.0, 1.0);
                a.1 + t * (b.1 - a.1)
            })
            .collect();
        (grid, values)
    };
    let window = window_s
        .filter(|(a, b)| a.is_finite() && b.is_finite() && *a > 0.0 && b >= a)
        .map(|(a, b)| (a.ln(), b.ln()));
    peaks_on_grid(&grid, &values, threshold, window)
}

/// Peaks of γ on an evenly spaced ln τ grid, with `window` the measured (ln τ_min, ln τ_max).
pub(super) fn peaks_on_grid(
    grid: &[f64],
    gamma: &[f64],
    threshold: f64,
    window: Option<(f64, f64)>,
) -> Vec<DrtPeak> {
    let g = gamma.len();
    let cand = peak_indices(gamma, threshold);
    if cand.is_empty() {
        return Vec::new();
    }
    let margin = EDGE_MARGIN_DECADES * LN_10;
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
                at_window_edge: window.is_some_and(|(a, b)| y < a + margin || y > b - margin),
            }
        })
        .collect()
}
