//! Peaks of γ: local maxima that rise enough above the valleys separating them from their neighbours,
//! each with its resistance (the area between those valleys).

use super::DrtPeak;
use super::lambda::argmin;
use std::f64::consts::{LN_10, PI};

/// Peaks of γ on an evenly spaced ln τ grid; see [`DrtOptions::with_peak_threshold`].
pub(super) fn find_peaks(grid: &[f64], gamma: &[f64], threshold: f64) -> Vec<DrtPeak> {
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
            }
        })
        .collect()
}
