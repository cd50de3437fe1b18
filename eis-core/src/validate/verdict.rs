//! Statistics of the residuals that decide the verdict: their scatter from successive differences,
//! a runs test on their signs, and the three tests built on them (see the module docs of
//! [`crate::validate`]).

use super::KkOptions;

/// Gaussian consistency factor of the median absolute value: median |X| = 0.6745 σ for X ~ N(0, σ²).
const MEDIAN_ABS_NORMAL: f64 = 0.674_489_750_196_081_7;

/// The residual statistics of one fit. All values are fractions of |Z| unless named `_z`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(super) struct Stats {
    /// Root mean square of all Δ′ and Δ″.
    pub rms: f64,
    /// Point-to-point scatter σ̂ from successive differences (robust: median based).
    pub scatter: f64,
    /// The part of the rms not explained by the scatter, √max(0, rms² − σ̂²).
    pub systematic: f64,
    /// Standard score of the number of sign runs (both parts pooled); strongly negative for a trend.
    pub runs_z: f64,
    /// Per-point limit in force: max(max_residual, outlier_factor·σ̂).
    pub point_limit: f64,
}

/// Which tests failed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub(super) struct Failures {
    pub points: bool,
    pub rms: bool,
    pub trend: bool,
}

impl Failures {
    pub fn any(self) -> bool {
        self.points || self.rms || self.trend
    }
}

/// σ̂ from the differences of neighbouring residuals (in frequency order) of each part:
/// median |Δᵢ₊₁ − Δᵢ| / (0.6745·√2). A smooth systematic misfit barely changes neighbouring
/// differences, and a few corrupted points do not move the median, so σ̂ estimates the random part
/// alone (the mean-square-successive-difference idea of von Neumann et al. 1941, Ann. Math.
/// Statist. 12, 367–395, in a median form; common practice in quality control).
pub(super) fn scatter(re: &[f64], im: &[f64], order: &[usize], buf: &mut Vec<f64>) -> f64 {
    buf.clear();
    for part in [re, im] {
        buf.extend(order.windows(2).map(|p| (part[p[1]] - part[p[0]]).abs()));
    }
    if buf.is_empty() {
        return 0.0;
    }
    let mid = buf.len() / 2;
    let (_, m, _) = buf.select_nth_unstable_by(mid, f64::total_cmp);
    *m / (MEDIAN_ABS_NORMAL * std::f64::consts::SQRT_2)
}

/// Wald–Wolfowitz runs test on the signs of the residuals of each part in frequency order, the two
/// parts pooled: z = (R − E\[R\]) / √Var\[R\] with E\[R\] = 1 + 2n₊n₋/N and
/// Var\[R\] = 2n₊n₋(2n₊n₋ − N)/(N²(N − 1)) per part (Wald & Wolfowitz 1940, Ann. Math. Statist. 11,
/// 147–162). Residuals that follow a trend form few long runs, so z is strongly negative; random
/// residuals give z ≈ N(0, 1). Zero when the variance vanishes (all of one sign).
pub(super) fn runs_z(re: &[f64], im: &[f64], order: &[usize]) -> f64 {
    let (mut runs, mut mean, mut var) = (0.0, 0.0, 0.0);
    for part in [re, im] {
        let (mut pos, mut neg, mut r) = (0.0f64, 0.0f64, 0.0f64);
        let mut last: Option<bool> = None;
        for &i in order {
            let s = part[i] >= 0.0;
            if s {
                pos += 1.0
            } else {
                neg += 1.0
            }
            if last != Some(s) {
                r += 1.0;
            }
            last = Some(s);
        }
        let n = pos + neg;
        if pos == 0.0 || neg == 0.0 || n < 2.0 {
            continue;
        }
        let pn = 2.0 * pos * neg;
        runs += r;
        mean += 1.0 + pn / n;
        var += pn * (pn - n) / (n * n * (n - 1.0));
    }
    if var > 0.0 {
        (runs - mean) / var.sqrt()
    } else {
        0.0
    }
}

/// Smallest 1 − h used to standardise a residual: a row the fit almost interpolates (h → 1) would
/// otherwise turn round-off into a huge standardised residual.
const MIN_FREEDOM: f64 = 0.05;

/// The larger of |Δ′ᵢ| and |Δ″ᵢ|, each divided by √(1 − h) of its row (`h` holds the 2N leverages,
/// real rows first; empty for none).
pub(super) fn standardized(re: &[f64], im: &[f64], h: &[f64], i: usize) -> f64 {
    let n = re.len();
    let s = |r: f64, k: usize| match h.get(k) {
        Some(&h) => r.abs() / (1.0 - h).max(MIN_FREEDOM).sqrt(),
        None => r.abs(),
    };
    s(re[i], i).max(s(im[i], n + i))
}

/// Whether point `i` is an outlier: its residual exceeds the floor
/// [`KkOptions::max_residual_percent`] (so a point within it is never one) and, standardised by its
/// leverage, [`KkOptions::outlier_factor`] times the scatter σ̂.
pub(super) fn outlier(
    re: &[f64],
    im: &[f64],
    h: &[f64],
    i: usize,
    o: &KkOptions,
    scatter: f64,
) -> bool {
    re[i].abs().max(im[i].abs()) > o.max_residual_percent / 100.0
        && standardized(re, im, h, i) > o.outlier_factor * scatter
}

/// The statistics and the verdict of residuals `re`, `im` (fractions of |Z|), the points judged on
/// residuals standardised by the leverages `h` (see [`standardized`]).
pub(super) fn judge(
    re: &[f64],
    im: &[f64],
    h: &[f64],
    order: &[usize],
    o: &KkOptions,
    buf: &mut Vec<f64>,
) -> (Stats, Failures) {
    let n = re.len();
    let sq: f64 = re.iter().chain(im).map(|d| d * d).sum();
    let rms = (sq / (2 * n) as f64).sqrt();
    let scatter = scatter(re, im, order, buf);
    let systematic = (rms * rms - scatter * scatter).max(0.0).sqrt();
    let runs_z = runs_z(re, im, order);
    let point_limit = (o.max_residual_percent / 100.0).max(o.outlier_factor * scatter);
    let outlier = |i: usize| outlier(re, im, h, i, o, scatter);
    let stats = Stats {
        rms,
        scatter,
        systematic,
        runs_z,
        point_limit,
    };
    let failures = Failures {
        points: (0..n).any(outlier),
        rms: 100.0 * rms > o.rms_residual_percent,
        trend: runs_z < -o.runs_z && 100.0 * systematic > o.trend_percent,
    };
    (stats, failures)
}
