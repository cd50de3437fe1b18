//! Porous electrodes: the uniform transmission line of de Levie (one ionic rail, the solid a perfect
//! conductor) and its two-rail form with a resistive solid (Paasch, Micka & Gersdorf 1993), both with an
//! interface of charge-transfer resistance in parallel with a double-layer CPE.
//!
//! All resistances and the CPE are totals for the whole electrode: `Rion` is the resistance of the pore
//! electrolyte across the electrode thickness (L/(κ_eff A)), `Rel` that of the solid, `Rct` the
//! charge-transfer resistance of all the internal surface in parallel, and `Q` its double-layer CPE.
//! Limits: as ω → 0, Z → Rct + (Rion + Rel)/3 when the rails are small against Rct; as ω → ∞, Z tends
//! to Rion·Rel/(Rion + Rel) (0 with one rail) along a branch at −n·45°; with vanishing rails the line
//! is the interface R_ct ∥ CPE itself. Z is symmetric in Rion and Rel, so a fit alone cannot tell the
//! two rails apart: name them from what the cell is made of.

use super::diffusion::{COTH_OVER_S, series};
use super::{Grid, Limit};
use num_complex::Complex64;
use std::f64::consts::FRAC_PI_2;

/// Below this |s| the shape functions use their Taylor series in u = s²: seven terms leave a tail
/// below 1e-15 relative (the coefficients shrink like π^−2k), while the closed forms, whose poles 1/u
/// are subtracted, would lose about 1/|u|² ulps in u h′.
const LINE_SERIES_LIMIT: f64 = 0.3;

/// (s/sinh s − 1)/u = Σ c_k u^k with u = s²: the series of s/sinh s without its constant term, shifted.
const SINH_RATIO_TAIL: [f64; 7] = [
    -1.0 / 6.0,
    7.0 / 360.0,
    -31.0 / 15120.0,
    127.0 / 604800.0,
    -73.0 / 3421440.0,
    1414477.0 / 653837184000.0,
    -8191.0 / 37362124800.0,
];

/// e^w − 1 for complex w without cancellation near w = 0.
fn expm1_complex(w: Complex64) -> Complex64 {
    let (sin, cos) = w.im.sin_cos();
    let half = (0.5 * w.im).sin();
    Complex64::new(w.re.exp_m1() * cos - 2.0 * half * half, w.re.exp() * sin)
}

/// The two shape functions of a uniform transmission line and u times their derivatives, at u = s²:
/// f(u) = coth(s)/s − 1/u and h(u) = (s/sinh s − 1)/u. Returns (f, u f′, h, u h′). Both are smooth at
/// u = 0 (the 1/u poles are taken out), so the line's impedance is assembled without cancellation.
fn line_shapes(u: Complex64) -> (Complex64, Complex64, Complex64, Complex64) {
    shapes_by(u, u.norm() < LINE_SERIES_LIMIT * LINE_SERIES_LIMIT)
}

/// [`line_shapes`] by the branch the caller chooses.
fn shapes_by(u: Complex64, use_series: bool) -> (Complex64, Complex64, Complex64, Complex64) {
    if use_series {
        let (f, uf) = series(&COTH_OVER_S, u);
        let (h, uh) = series(&SINH_RATIO_TAIL, u);
        return (f, uf, h, uh);
    }
    // Re s > 0 (u lies in the closed right half-plane), so e^{−s} and e^{−2s} never overflow.
    let s = u.sqrt();
    let em = (-s).exp();
    let one_minus_e = -expm1_complex(-2.0 * s);
    let inv = 1.0 / one_minus_e;
    let coth = (2.0 - one_minus_e) * inv;
    let csch = 2.0 * em * inv;
    let inv_s = 1.0 / s;
    let inv_u = inv_s * inv_s;
    // F = coth(s)/s, F′ = −(s csch² s + coth s)/s²; G = 2 csch(s)/s, G′ = −G (1/s + coth s).
    let big_f = coth * inv_s;
    let big_f1 = -(s * csch * csch + coth) * inv_u;
    let big_g = 2.0 * csch * inv_s;
    let big_g1 = -big_g * (inv_s + coth);
    // d/du = (1/(2s)) d/ds, so u f′ = s F′/2 + 1/u and u h′ = s G′/4 + 1/u.
    (
        big_f - inv_u,
        0.5 * s * big_f1 + inv_u,
        0.5 * big_g - inv_u,
        0.25 * s * big_g1 + inv_u,
    )
}

/// A uniform transmission line of ionic rail `ri`, electronic rail `re` (0 for a perfectly conducting
/// solid) and interface R_ct ∥ CPE, current entering the solid at the collector and leaving the pore
/// electrolyte at the separator. With S = ri + re, P = ri·re/S, M = (ri² + re²)/S, u = S/z:
/// Z = z + P(1 + 2h(u)) + M f(u), which is P(1 + 2/(s sinh s)) + M coth(s)/s written without its
/// poles. `dz` rows: ∂/∂ri, [∂/∂re,] ∂/∂Rct, ∂/∂Q, ∂/∂n.
fn porous(two_rails: bool, p: &[f64], g: &Grid, z: &mut [Complex64], dz: &mut [Complex64]) {
    let (ri, re, rest) = if two_rails {
        (p[0], p[1], &p[2..])
    } else {
        (p[0], 0.0, &p[1..])
    };
    let (rct, q, n) = (rest[0], rest[1], rest[2]);
    let sum = ri + re;
    let inv_sum2 = 1.0 / (sum * sum);
    let prod = ri * re / sum;
    let mix = (ri * ri + re * re) / sum;
    // ∂P/∂ri, ∂M/∂ri and their mirror images for re.
    let (dp_ri, dm_ri) = (
        re * re * inv_sum2,
        (ri * ri + 2.0 * ri * re - re * re) * inv_sum2,
    );
    let (dp_re, dm_re) = (
        ri * ri * inv_sum2,
        (re * re + 2.0 * ri * re - ri * ri) * inv_sum2,
    );
    let (sin, cos) = (n * FRAC_PI_2).sin_cos();
    let j_n = Complex64::new(cos, sin);
    let (ln_q, inv_q, inv_rct) = (q.ln(), 1.0 / q, 1.0 / rct);
    let len = g.len();
    let rows = if two_rails { 5 } else { 4 };
    let (d_rails, d_interface) = dz.split_at_mut((rows - 3) * len);
    for (i, &ln_w) in g.ln_omega.iter().enumerate() {
        // Interface admittance Y = Q (jω)^n in polar form (no overflow in (jω)^n), z = Rct/(1 + Rct Y).
        let y = j_n * (ln_q + n * ln_w).exp();
        let u = sum * inv_rct + sum * y;
        let zint = 1.0 / (inv_rct + y);
        let (f, uf, h, uh) = line_shapes(u);
        let one_2h = 1.0 + 2.0 * h;
        z[i] = zint + prod * one_2h + mix * f;
        // ∂Z/∂u at fixed P, M and z, times u.
        let a_u = 2.0 * prod * uh + mix * uf;
        let along_sum = a_u / sum;
        d_rails[i] = dp_ri * one_2h + dm_ri * f + along_sum;
        if two_rails {
            d_rails[len + i] = dp_re * one_2h + dm_re * f + along_sum;
        }
        // Through z (u = S/z): ∂Z/∂z = 1 − (u ∂Z/∂u)/z.
        let dz_int = 1.0 - a_u / zint;
        let z2 = zint * zint;
        d_interface[i] = dz_int * z2 * (inv_rct * inv_rct);
        let dz_dy = -dz_int * z2 * y;
        d_interface[len + i] = dz_dy * inv_q;
        d_interface[2 * len + i] = dz_dy * Complex64::new(ln_w, FRAC_PI_2);
    }
}

/// The one-rail line (`Pe`): parameters Rion, Rct, Q, n.
pub(super) fn one_rail(p: &[f64], g: &Grid, z: &mut [Complex64], dz: &mut [Complex64]) {
    porous(false, p, g, z, dz);
}

/// The two-rail line (`Pm`): parameters Rion, Rel, Rct, Q, n.
pub(super) fn two_rails(p: &[f64], g: &Grid, z: &mut [Complex64], dz: &mut [Complex64]) {
    porous(true, p, g, z, dz);
}

/// The line's impedance for a frequency-independent interface impedance `zint` (its value at ω → 0 or
/// ω → ∞), real for a real `zint`.
fn line_at(ri: f64, re: f64, zint: f64) -> f64 {
    let sum = ri + re;
    if zint == 0.0 {
        return ri * re / sum;
    }
    let u = Complex64::new(sum / zint, 0.0);
    let (f, _, h, _) = line_shapes(u);
    zint + ri * re / sum * (1.0 + 2.0 * h.re) + (ri * ri + re * re) / sum * f.re
}

/// Limits of a line: at direct current the interface is its resistance Rct (or Rct ∥ 1/Q for n = 0),
/// at infinite frequency the double layer shorts it (unless n = 0).
fn limit(ri: f64, re: f64, rct: f64, q: f64, n: f64, high: bool) -> Limit {
    let zint = match (n == 0.0, high) {
        (true, _) => rct / (1.0 + rct * q),
        (false, true) => 0.0,
        (false, false) => rct,
    };
    Limit::finite(line_at(ri, re, zint))
}

/// [`Limit`]s of the one-rail line.
pub(super) fn one_rail_limit(p: &[f64], high: bool) -> Limit {
    limit(p[0], 0.0, p[1], p[2], p[3], high)
}

/// [`Limit`]s of the two-rail line.
pub(super) fn two_rails_limit(p: &[f64], high: bool) -> Limit {
    limit(p[0], p[1], p[2], p[3], p[4], high)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::element::kind_by_symbol;

    fn at(symbol: &str, p: &[f64], w: f64) -> Complex64 {
        kind_by_symbol(symbol).unwrap().eval_at(p, w).0
    }

    fn interface(rct: f64, q: f64, n: f64, w: f64) -> Complex64 {
        let y = q * Complex64::new(0.0, w).powf(n);
        rct / (1.0 + rct * y)
    }

    /// Independent reference: a ladder of `sections` cells (midpoint rule, second order in 1/sections),
    /// ionic rail resistors ri/N, shunts N·z, the far end blocked, summed from the far end
    /// (common practice: the transmission line is the limit of this ladder; de Levie 1963,
    /// Electrochim. Acta 8, 751, from memory).
    fn ladder_one_rail(ri: f64, z: Complex64, sections: usize) -> Complex64 {
        let nf = sections as f64;
        let shunt = z * nf;
        let mut acc = shunt;
        for _ in 1..sections {
            let series = acc + ri / nf;
            acc = shunt * series / (shunt + series);
        }
        acc + ri / (2.0 * nf)
    }

    /// Independent reference for two rails: nodal analysis of the same ladder with a resistive solid,
    /// current entering the solid at the collector and leaving the electrolyte at the separator, solved
    /// by block elimination of the 2 × 2 tridiagonal system.
    fn ladder_two_rails(ri: f64, re: f64, z: Complex64, sections: usize) -> Complex64 {
        type M = [[Complex64; 2]; 2];
        let c = |x: f64| Complex64::new(x, 0.0);
        let nf = sections as f64;
        let (ge, gi, ys) = (nf / re, nf / ri, 1.0 / (z * nf));
        let diag = |k: usize| -> M {
            let e_links = if k == 0 || k == sections - 1 {
                1.0
            } else {
                2.0
            };
            let mut i_links = if k == 0 || k == sections - 1 {
                1.0
            } else {
                2.0
            };
            if k == sections - 1 {
                i_links += 2.0; // the half resistor to the grounded separator terminal, 2N/ri
            }
            [[c(ge * e_links) + ys, -ys], [-ys, c(gi * i_links) + ys]]
        };
        let inv = |m: M| -> M {
            let det = m[0][0] * m[1][1] - m[0][1] * m[1][0];
            [
                [m[1][1] / det, -m[0][1] / det],
                [-m[1][0] / det, m[0][0] / det],
            ]
        };
        // Forward elimination with the off-diagonal blocks diag(−ge, −gi).
        let off = [c(-ge), c(-gi)];
        let mut dmod: Vec<M> = Vec::with_capacity(sections);
        let mut rhs: Vec<[Complex64; 2]> = Vec::with_capacity(sections);
        for k in 0..sections {
            let mut d = diag(k);
            let mut b = if k == 0 {
                [c(1.0), c(0.0)]
            } else {
                [c(0.0), c(0.0)]
            };
            if k > 0 {
                let pinv = inv(dmod[k - 1]);
                // D_k −= L P⁻¹ U with L = U = diag(off).
                for r in 0..2 {
                    for col in 0..2 {
                        d[r][col] -= off[r] * pinv[r][col] * off[col];
                    }
                    b[r] -= off[r] * (pinv[r][0] * rhs[k - 1][0] + pinv[r][1] * rhs[k - 1][1]);
                }
            }
            dmod.push(d);
            rhs.push(b);
        }
        let mut x = vec![[c(0.0), c(0.0)]; sections];
        for k in (0..sections).rev() {
            let mut b = rhs[k];
            if k + 1 < sections {
                b[0] -= off[0] * x[k + 1][0];
                b[1] -= off[1] * x[k + 1][1];
            }
            let di = inv(dmod[k]);
            x[k] = [
                di[0][0] * b[0] + di[0][1] * b[1],
                di[1][0] * b[0] + di[1][1] * b[1],
            ];
        }
        x[0][0] + re / (2.0 * nf)
    }

    /// The closed forms against the ladders they are the limit of, from 1 mHz to 100 kHz.
    #[test]
    fn lines_match_discretised_ladders() {
        let (ri, re, rct, q, n) = (2.0, 0.5, 5.0, 1e-3, 0.85);
        for k in 0..=16 {
            let w = 2.0 * std::f64::consts::PI * 10f64.powf(-3.0 + 0.5 * k as f64);
            let zi = interface(rct, q, n, w);
            let one = at("Pe", &[ri, rct, q, n], w);
            let ladder = ladder_one_rail(ri, zi, 4000);
            assert!(
                crate::testing::close(one, ladder, 2e-6),
                "Pe at w={w}: {one} vs ladder {ladder}"
            );
            let two = at("Pm", &[ri, re, rct, q, n], w);
            let ladder = ladder_two_rails(ri, re, zi, 2000);
            assert!(
                crate::testing::close(two, ladder, 1e-5),
                "Pm at w={w}: {two} vs ladder {ladder}"
            );
        }
    }

    /// With vanishing rails the line is its interface, R_ct ∥ CPE (de Levie 1963, from memory).
    #[test]
    fn vanishing_rails_leave_the_interface() {
        let (rct, q, n) = (5.0, 1e-3, 0.9);
        for w in [1e-3, 1.0, 1e3, 1e6] {
            let zi = interface(rct, q, n, w);
            assert!(crate::testing::close(
                at("Pe", &[1e-12, rct, q, n], w),
                zi,
                1e-9
            ));
            assert!(crate::testing::close(
                at("Pm", &[1e-12, 1e-12, rct, q, n], w),
                zi,
                1e-9
            ));
        }
    }

    /// Direct-current limit: Z(0) = √(Rion Rct)·coth √(Rion/Rct) exactly for one rail, ≈ Rct + Rion/3
    /// when Rion ≪ Rct, and Rct + (Rion + Rel)/3 for two rails (de Levie 1963; Paasch, Micka &
    /// Gersdorf 1993, Electrochim. Acta 38, 2653; both from memory).
    #[test]
    fn low_frequency_limits() {
        let w = 1e-12;
        for (ri, rct) in [(0.3f64, 7.0f64), (4.0, 1.0), (50.0, 0.5)] {
            let nu = (ri / rct).sqrt();
            let exact = (ri * rct).sqrt() / nu.tanh();
            let z = at("Pe", &[ri, rct, 1e-3, 0.9], w);
            assert!(
                crate::testing::close(z, Complex64::new(exact, 0.0), 1e-6),
                "{z} vs {exact}"
            );
        }
        let z = at("Pe", &[0.01, 10.0, 1e-3, 0.9], w);
        assert!((z.re - (10.0 + 0.01 / 3.0)).abs() < 1e-5, "{z}");
        let z = at("Pm", &[0.01, 0.02, 10.0, 1e-3, 0.9], w);
        assert!((z.re - (10.0 + 0.03 / 3.0)).abs() < 1e-5, "{z}");
    }

    /// High frequencies: the one-rail line tends to √(Rion/(Q (jω)^n)), a straight branch at −n·45°
    /// (for n = 1 the classic 45° line of a porous electrode; de Levie 1963, from memory); two rails add
    /// Rion·Rel/(Rion + Rel) in series.
    #[test]
    fn high_frequency_branch() {
        let (ri, rct, q): (f64, f64, f64) = (3.0, 10.0, 1e-3);
        let w: f64 = 1e7;
        let z = at("Pe", &[ri, rct, q, 1.0], w);
        let phase = z.im.atan2(z.re).to_degrees();
        assert!((phase + 45.0).abs() < 0.01, "phase {phase}");
        assert!((z.norm() - (ri / (q * w)).sqrt()).abs() < 1e-3 * z.norm());
        let re = 0.7;
        let z2 = at("Pm", &[ri, re, rct, q, 1.0], 1e12);
        let limit = ri * re / (ri + re);
        assert!(
            (z2.re - limit).abs() < 1e-3 * limit && z2.im.abs() < 1e-3 * limit,
            "{z2}"
        );
    }

    /// Two rails: Z is symmetric in Rion and Rel, and a vanishing Rel gives the one-rail line.
    #[test]
    fn two_rails_symmetry_and_reduction() {
        for w in [1e-2, 1.0, 1e2, 1e4] {
            let a = at("Pm", &[2.0, 0.5, 5.0, 1e-3, 0.8], w);
            let b = at("Pm", &[0.5, 2.0, 5.0, 1e-3, 0.8], w);
            assert!(crate::testing::close(a, b, 1e-13), "{a} vs {b}");
            let one = at("Pe", &[2.0, 5.0, 1e-3, 0.8], w);
            let two = at("Pm", &[2.0, 1e-10, 5.0, 1e-3, 0.8], w);
            assert!(crate::testing::close(two, one, 1e-9), "{two} vs {one}");
        }
    }

    /// The series and closed-form branches of the shape functions agree where they switch, to 1e-13
    /// against 1 (they enter Z beside terms of order one, and the closed forms' subtracted poles cost a
    /// few hundred ulps in u f′ and u h′ there).
    #[test]
    fn shape_branches_agree_at_the_switch() {
        for angle in [0.0, 0.3, 0.7, 1.2, FRAC_PI_2] {
            let u = Complex64::from_polar(LINE_SERIES_LIMIT * LINE_SERIES_LIMIT, angle);
            let (a, b) = (shapes_by(u, true), shapes_by(u, false));
            for (x, y) in [(a.0, b.0), (a.1, b.1), (a.2, b.2), (a.3, b.3)] {
                assert!((x - y).norm() <= 1e-13 * y.norm().max(1.0), "{x} vs {y}");
            }
        }
    }
}
