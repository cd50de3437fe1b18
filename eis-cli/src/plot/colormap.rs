//! Colours: the project's own perceptually uniform sequential colour map (for values such as SOC or
//! cycle number) and a small qualitative palette (for distinct series).
//!
//! # Construction of the sequential map
//!
//! 1. Five anchor colours chosen for this project, written in OKLCh (lightness, chroma, hue in
//!    degrees): a deep blue, a mid blue, a sea green, an olive and a warm gold. Their lightness rises
//!    strictly from 0.30 to 0.82, so the darkest end stays distinct from black text and the lightest
//!    end stays visible on a white page.
//! 2. Between anchors the colour is interpolated linearly in OKLab (L, a, b), so lightness is
//!    piecewise linear and increasing.
//! 3. A colour outside the sRGB gamut keeps its lightness and hue and loses chroma (bisection on the
//!    chroma scale) until it fits; lightness therefore stays monotonic.
//! 4. The curve is re-parametrised by arc length in OKLab, so equal steps of the input value give
//!    equal perceived colour differences.
//!
//! The tests check that lightness rises monotonically and that the steps are uniform.

use std::sync::OnceLock;

/// An sRGB colour with components in 0..=255.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Rgb(pub u8, pub u8, pub u8);

/// Anchors of the sequential map in OKLCh: (L, C, hue in degrees).
const ANCHORS: [(f64, f64, f64); 5] = [
    (0.30, 0.10, 268.0),
    (0.45, 0.12, 245.0),
    (0.60, 0.10, 180.0),
    (0.72, 0.12, 125.0),
    (0.82, 0.15, 85.0),
];

/// Entries of the lookup table the map is sampled from.
const LUT_SIZE: usize = 256;

/// Qualitative palette for distinct series (data, fit, cells), chosen for this project: distinct in
/// hue and lightness, none of them pure red (red marks flagged points).
pub const PALETTE: [Rgb; 8] = [
    Rgb(0x1d, 0x4f, 0x91), // ink blue
    Rgb(0xd9, 0x7a, 0x1e), // amber
    Rgb(0x2e, 0x8b, 0x57), // green
    Rgb(0x7b, 0x3f, 0x98), // violet
    Rgb(0x5a, 0x5a, 0x5a), // graphite
    Rgb(0x1f, 0x9e, 0xa8), // teal
    Rgb(0xa8, 0x6a, 0x3d), // clay
    Rgb(0xc0, 0x3b, 0x7a), // raspberry
];

/// The colour marking flagged (suspect) points.
pub const FLAG: Rgb = Rgb(0xd1, 0x1f, 0x1f);

/// Series colour number `i` (cycling through [`PALETTE`]).
pub fn series(i: usize) -> Rgb {
    PALETTE[i % PALETTE.len()]
}

/// The sequential map at `t` in 0..=1 (clamped); NaN gives a neutral grey.
pub fn sequential(t: f64) -> Rgb {
    if t.is_nan() {
        return Rgb(0x99, 0x99, 0x99);
    }
    let lut = lut();
    let x = t.clamp(0.0, 1.0) * (LUT_SIZE - 1) as f64;
    let i = (x.floor() as usize).min(LUT_SIZE - 2);
    let f = x - i as f64;
    let (a, b) = (lut[i], lut[i + 1]);
    let lab = [0, 1, 2].map(|k| a[k] + (b[k] - a[k]) * f);
    to_rgb8(oklab_to_linear_srgb(lab))
}

/// The map as OKLab colours at equal arc-length steps (built once).
fn lut() -> &'static [[f64; 3]; LUT_SIZE] {
    static LUT: OnceLock<[[f64; 3]; LUT_SIZE]> = OnceLock::new();
    LUT.get_or_init(build_lut)
}

fn build_lut() -> [[f64; 3]; LUT_SIZE] {
    const FINE: usize = 2048;
    let anchors: Vec<[f64; 3]> = ANCHORS
        .iter()
        .map(|&(l, c, h)| {
            let h = h.to_radians();
            [l, c * h.cos(), c * h.sin()]
        })
        .collect();
    let segments = anchors.len() - 1;
    let fine: Vec<[f64; 3]> = (0..FINE)
        .map(|k| {
            let u = k as f64 / (FINE - 1) as f64 * segments as f64;
            let s = (u.floor() as usize).min(segments - 1);
            let f = u - s as f64;
            let (p, q) = (anchors[s], anchors[s + 1]);
            into_gamut([0, 1, 2].map(|i| p[i] + (q[i] - p[i]) * f))
        })
        .collect();
    let mut arc = vec![0.0; FINE];
    for k in 1..FINE {
        arc[k] = arc[k - 1] + distance(fine[k - 1], fine[k]);
    }
    let total = arc[FINE - 1];
    let mut out = [[0.0; 3]; LUT_SIZE];
    let mut k = 0;
    for (j, slot) in out.iter_mut().enumerate() {
        let target = total * j as f64 / (LUT_SIZE - 1) as f64;
        while k + 2 < FINE && arc[k + 1] < target {
            k += 1;
        }
        let span = arc[k + 1] - arc[k];
        let f = if span > 0.0 {
            ((target - arc[k]) / span).clamp(0.0, 1.0)
        } else {
            0.0
        };
        *slot = [0, 1, 2].map(|i| fine[k][i] + (fine[k + 1][i] - fine[k][i]) * f);
    }
    out
}

fn distance(p: [f64; 3], q: [f64; 3]) -> f64 {
    ((p[0] - q[0]).powi(2) + (p[1] - q[1]).powi(2) + (p[2] - q[2]).powi(2)).sqrt()
}

/// Reduces chroma (keeping L and hue) until the colour fits in sRGB.
fn into_gamut(lab: [f64; 3]) -> [f64; 3] {
    let fits = |s: f64| {
        let rgb = oklab_to_linear_srgb([lab[0], lab[1] * s, lab[2] * s]);
        rgb.iter().all(|&c| (-1e-9..=1.0 + 1e-9).contains(&c))
    };
    if fits(1.0) {
        return lab;
    }
    let (mut lo, mut hi) = (0.0, 1.0);
    for _ in 0..40 {
        let mid = 0.5 * (lo + hi);
        if fits(mid) { lo = mid } else { hi = mid }
    }
    [lab[0], lab[1] * lo, lab[2] * lo]
}

/// OKLab to linear-light sRGB (the published OKLab matrices).
pub(crate) fn oklab_to_linear_srgb([l, a, b]: [f64; 3]) -> [f64; 3] {
    let l_ = l + 0.396_337_777_4 * a + 0.215_803_757_3 * b;
    let m_ = l - 0.105_561_345_8 * a - 0.063_854_172_8 * b;
    let s_ = l - 0.089_484_177_5 * a - 1.291_485_548_0 * b;
    let (l3, m3, s3) = (l_ * l_ * l_, m_ * m_ * m_, s_ * s_ * s_);
    [
        4.076_741_662_1 * l3 - 3.307_711_591_3 * m3 + 0.230_969_929_2 * s3,
        -1.268_438_004_6 * l3 + 2.609_757_401_1 * m3 - 0.341_319_396_5 * s3,
        -0.004_196_086_3 * l3 - 0.703_418_614_7 * m3 + 1.707_614_701_0 * s3,
    ]
}

/// Linear-light sRGB to OKLab.
#[cfg(test)]
fn linear_srgb_to_oklab([r, g, b]: [f64; 3]) -> [f64; 3] {
    let l = 0.412_221_470_8 * r + 0.536_332_536_3 * g + 0.051_445_992_9 * b;
    let m = 0.211_903_498_2 * r + 0.680_699_545_1 * g + 0.107_396_956_6 * b;
    let s = 0.088_302_461_9 * r + 0.281_718_837_6 * g + 0.629_978_700_5 * b;
    let (l_, m_, s_) = (l.cbrt(), m.cbrt(), s.cbrt());
    [
        0.210_454_255_3 * l_ + 0.793_617_785_0 * m_ - 0.004_072_046_8 * s_,
        1.977_998_495_1 * l_ - 2.428_592_205_0 * m_ + 0.450_593_709_9 * s_,
        0.025_904_037_1 * l_ + 0.782_771_766_2 * m_ - 0.808_675_766_0 * s_,
    ]
}

fn encode(c: f64) -> f64 {
    let c = c.clamp(0.0, 1.0);
    if c <= 0.003_130_8 {
        12.92 * c
    } else {
        1.055 * c.powf(1.0 / 2.4) - 0.055
    }
}

#[cfg(test)]
fn decode(c: f64) -> f64 {
    if c <= 0.040_45 {
        c / 12.92
    } else {
        ((c + 0.055) / 1.055).powf(2.4)
    }
}

fn to_rgb8(lin: [f64; 3]) -> Rgb {
    let q = |c: f64| (encode(c) * 255.0).round() as u8;
    Rgb(q(lin[0]), q(lin[1]), q(lin[2]))
}

/// OKLab of an 8-bit sRGB colour.
#[cfg(test)]
fn oklab_of(c: Rgb) -> [f64; 3] {
    let d = |v: u8| decode(v as f64 / 255.0);
    linear_srgb_to_oklab([d(c.0), d(c.1), d(c.2)])
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn oklab_round_trip_and_white_point() {
        let w = linear_srgb_to_oklab([1.0, 1.0, 1.0]);
        assert!((w[0] - 1.0).abs() < 1e-6 && w[1].abs() < 1e-6 && w[2].abs() < 1e-6);
        for rgb in [[0.2, 0.5, 0.9], [0.9, 0.1, 0.0], [0.05, 0.6, 0.3]] {
            let back = oklab_to_linear_srgb(linear_srgb_to_oklab(rgb));
            for k in 0..3 {
                assert!((back[k] - rgb[k]).abs() < 1e-6, "{rgb:?} -> {back:?}");
            }
        }
    }

    #[test]
    fn anchor_lightness_rises() {
        assert!(ANCHORS.windows(2).all(|w| w[1].0 > w[0].0));
    }

    #[test]
    fn lightness_is_monotonic_along_the_map() {
        let l: Vec<f64> = lut().iter().map(|c| c[0]).collect();
        assert!(l.windows(2).all(|w| w[1] > w[0]), "lookup table lightness");
        // After 8-bit rounding, at the resolution a colour bar shows.
        let shown: Vec<f64> = (0..=32)
            .map(|k| oklab_of(sequential(k as f64 / 32.0))[0])
            .collect();
        assert!(shown.windows(2).all(|w| w[1] > w[0]), "{shown:?}");
        assert!(shown[0] < 0.32 && shown[32] > 0.80);
    }

    #[test]
    fn steps_are_perceptually_uniform() {
        let steps: Vec<f64> = lut().windows(2).map(|w| distance(w[0], w[1])).collect();
        let (lo, hi) = steps
            .iter()
            .fold((f64::MAX, 0.0f64), |(a, b), &s| (a.min(s), b.max(s)));
        assert!(hi / lo < 1.05, "steps from {lo} to {hi}");
    }

    #[test]
    fn map_is_in_gamut_and_handles_odd_input() {
        assert_eq!(sequential(-3.0), sequential(0.0));
        assert_eq!(sequential(7.0), sequential(1.0));
        assert_eq!(sequential(f64::NAN), Rgb(0x99, 0x99, 0x99));
        for c in lut() {
            let rgb = oklab_to_linear_srgb(*c);
            assert!(
                rgb.iter().all(|v| (-1e-6..=1.0 + 1e-6).contains(v)),
                "{rgb:?}"
            );
        }
    }
}
