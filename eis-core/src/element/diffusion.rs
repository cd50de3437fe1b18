//! Finite-length diffusion (transmissive `tanh` and reflective `coth` boundaries): a closed form
//! through e^{−2s} that runs in vectors, and Taylor series in jωτ where √(ωτ) is small.

use super::{Grid, J, ZERO, with_decays};
use num_complex::Complex64;
use std::f64::consts::FRAC_1_SQRT_2;

/// Below this |√(jωτ)| the finite-diffusion functions use their Taylor series in u = jωτ: the next term
/// is below 1e-16 relative, while the closed forms would lose digits to cancellation.
pub(super) const SERIES_LIMIT: f64 = 0.1;

/// Above this Re(2√(jωτ)), e^{−2s} < 2e−22 and is taken as zero: tanh s = coth s = 1 and sech² s =
/// csch² s = 0 to well below round-off, even after multiplication by |s| in the derivatives.
pub(super) const EXP_LIMIT: f64 = 50.0;

/// tanh(s)/s = Σ a_k u^k with u = s²; coefficients from the Bernoulli-number series of tanh.
pub(super) const TANH_OVER_S: [f64; 7] = [
    1.0,
    -1.0 / 3.0,
    2.0 / 15.0,
    -17.0 / 315.0,
    62.0 / 2835.0,
    -1382.0 / 155925.0,
    21844.0 / 6081075.0,
];

/// coth(s)/s − 1/u = Σ b_k u^k with u = s².
pub(super) const COTH_OVER_S: [f64; 7] = [
    1.0 / 3.0,
    -1.0 / 45.0,
    2.0 / 945.0,
    -1.0 / 4725.0,
    2.0 / 93555.0,
    -1382.0 / 638512875.0,
    4.0 / 18243225.0,
];

/// Evaluates Σ c_k u^k and Σ k c_k u^k (the latter is u·d/du of the former).
pub(super) fn series(c: &[f64], u: Complex64) -> (Complex64, Complex64) {
    let mut f = ZERO;
    let mut uf = ZERO;
    for (k, &ck) in c.iter().enumerate().rev() {
        f = f * u + ck;
        if k > 0 {
            uf = uf * u + ck * k as f64;
        }
    }
    // uf was accumulated as Σ k c_k u^(k-1); multiply by u once.
    (f, uf * u)
}

/// e^{−2s} for s = a(1 + j), a ≥ 0, given `decay` = e^{−2a}, `sin` = sin 2a and `cos` = cos 2a; zero
/// where it is below round-off of anything it is added to.
#[inline(always)]
fn exp_minus_2s(a: f64, decay: f64, sin: f64, cos: f64) -> Complex64 {
    // Both computed, one chosen: no branch in a vector loop.
    let e = Complex64::new(cos, -sin) * decay;
    if 2.0 * a > EXP_LIMIT { ZERO } else { e }
}

/// 2a = √2·√(ωτ), the angle and decay rate of e^{−2s} = e^{−2a}(cos 2a − j sin 2a) in
/// [`diffusion_closed`].
fn decay_angle(sqrt_wt: f64) -> f64 {
    2.0 * (sqrt_wt * FRAC_1_SQRT_2)
}

/// The two boundary conditions of finite-length diffusion.
#[derive(Clone, Copy, PartialEq)]
pub(super) enum Boundary {
    /// tanh: the far boundary passes the species on (transmissive).
    Transmissive,
    /// coth: the far boundary blocks it (reflective).
    Reflective,
}

/// Z and ∂Z/∂(R, τ) at one frequency, `use_series` choosing the Taylor branch; `sqrt_wt` = √(ωτ).
#[cfg(test)]
pub(super) fn diffusion_point(
    boundary: Boundary,
    r: f64,
    tau: f64,
    wt: f64,
    sqrt_wt: f64,
    use_series: bool,
) -> (Complex64, Complex64, Complex64) {
    if use_series {
        return diffusion_series(boundary, r, tau, wt);
    }
    let y = decay_angle(sqrt_wt);
    let (sin, cos) = y.sin_cos();
    diffusion_closed(boundary, r, tau, sqrt_wt, ((-y).exp(), sin, cos))
}

/// Z and ∂Z/∂(R, τ) by the Taylor series in u = jωτ (`wt` = ωτ), for √(ωτ) below [`SERIES_LIMIT`].
fn diffusion_series(
    boundary: Boundary,
    r: f64,
    tau: f64,
    wt: f64,
) -> (Complex64, Complex64, Complex64) {
    let u = J * wt;
    let (f, ufp) = match boundary {
        Boundary::Transmissive => series(&TANH_OVER_S, u),
        // coth(s)/s = 1/u + g(u), and u d/du (1/u) = −1/u.
        Boundary::Reflective => {
            let (g, ug) = series(&COTH_OVER_S, u);
            let inv_u = 1.0 / u;
            (inv_u + g, ug - inv_u)
        }
    };
    // dZ/dτ = R f'(u) du/dτ = R·u f'(u)/τ.
    (r * f, f, r * ufp / tau)
}

/// Z and ∂Z/∂(R, τ) in closed form, given `decay` = (e^{−2a}, sin 2a, cos 2a) of 2a = [`decay_angle`]
/// of `sqrt_wt` = √(ωτ); branch-free, so that a loop of it runs in vectors. Meant for √(ωτ) from
/// [`SERIES_LIMIT`] on (below, it loses digits to cancellation, and at zero it is not a number).
#[inline(always)]
fn diffusion_closed(
    boundary: Boundary,
    r: f64,
    tau: f64,
    sqrt_wt: f64,
    decay: (f64, f64, f64),
) -> (Complex64, Complex64, Complex64) {
    let one = Complex64::new(1.0, 0.0);
    // √(jωτ) = √(ωτ)·e^{jπ/4} = a(1 + j), without a complex square root; 1/s = (1 − j)/(2a).
    let a = sqrt_wt * FRAC_1_SQRT_2;
    let s = Complex64::new(a, a);
    let half_inv_a = 0.5 / a;
    let inv_s = Complex64::new(half_inv_a, -half_inv_a);
    let e = exp_minus_2s(a, decay.0, decay.1, decay.2);
    // tanh, sech² (or coth, csch²) through e^{−2s}, so that nothing overflows for Re s > 0. The
    // denominator 1 ± e^{−2s} is inverted once: |e^{−2s}| ≤ e^{−2a} with 2a > 0.14 here, so |1 ± e| lies
    // between 0.13 and 2 and d̄/|d|² is exact to round-off.
    let (num, d, sign) = match boundary {
        Boundary::Transmissive => (one - e, one + e, 1.0),
        Boundary::Reflective => (one + e, one - e, -1.0),
    };
    let inv_d = d.conj() * (1.0 / d.norm_sqr());
    let t = num * inv_d;
    let h2 = 4.0 * e * (inv_d * inv_d);
    let f = t * inv_s;
    // d/ds[tanh s / s] = (s sech² s − tanh s)/s²; d/ds[coth s / s] = −(s csch² s + coth s)/s²;
    // ds/dτ = s/(2τ).
    let d_tau = (sign * s * h2 - t) * inv_s * (r / (2.0 * tau));
    (r * f, f, d_tau)
}

fn diffusion(boundary: Boundary, p: &[f64], g: &Grid, z: &mut [Complex64], dz: &mut [Complex64]) {
    let (r, tau) = (p[0], p[1]);
    let sqrt_tau = tau.sqrt();
    let (dr, dt) = dz.split_at_mut(g.len());
    with_decays(
        g.len(),
        |i| decay_angle(g.sqrt_omega[i] * sqrt_tau),
        |start, e, sin, cos| {
            let end = start + e.len();
            let (z, dr, dt) = (&mut z[start..end], &mut dr[start..end], &mut dt[start..end]);
            let sqrt_omega = &g.sqrt_omega[start..end];
            // The closed form at every point, in vectors; then the series where √(ωτ) is small.
            crate::dense::arch().dispatch(
                #[inline(always)]
                || {
                    for k in 0..z.len() {
                        let decay = (e[k], sin[k], cos[k]);
                        (z[k], dr[k], dt[k]) =
                            diffusion_closed(boundary, r, tau, sqrt_omega[k] * sqrt_tau, decay);
                    }
                },
            );
            for k in 0..z.len() {
                if sqrt_omega[k] * sqrt_tau < SERIES_LIMIT {
                    let wt = g.omega[start + k] * tau;
                    (z[k], dr[k], dt[k]) = diffusion_series(boundary, r, tau, wt);
                }
            }
        },
    );
}

pub(super) fn diffusion_transmissive(
    p: &[f64],
    g: &Grid,
    z: &mut [Complex64],
    dz: &mut [Complex64],
) {
    diffusion(Boundary::Transmissive, p, g, z, dz);
}

pub(super) fn diffusion_reflective(p: &[f64], g: &Grid, z: &mut [Complex64], dz: &mut [Complex64]) {
    diffusion(Boundary::Reflective, p, g, z, dz);
}
