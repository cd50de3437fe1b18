//! Element impedances against their closed forms and published limits, and Jacobians of nested circuits
//! against central finite differences.

use eis_core::circuit::parse;
use eis_core::eval::{Grid, Plan, angular};
use num_complex::Complex64;
use std::f64::consts::{FRAC_PI_4, PI, SQRT_2};

const J: Complex64 = Complex64::new(0.0, 1.0);

fn z_of(model: &str, params: &[f64], w: f64) -> Complex64 {
    Plan::compile(&parse(model).unwrap()).impedance(params, w)
}

fn omegas() -> impl Iterator<Item = f64> {
    (0..=70).map(|k| angular(10f64.powf(-3.0 + k as f64 * 0.1)))
}

/// Each element against its defining formula (Bard & Faulkner 2001, Electrochemical Methods, 2nd ed., §10.3–10.4,
/// and Gerischer 1951, Z. Phys. Chem. 198, 286, both from memory; the element table of the circuit language),
/// evaluated directly with num-complex, over 1 mHz–10 kHz where the direct formulas are safe.
#[test]
fn elements_match_their_closed_forms() {
    for w in omegas() {
        eis_core::assert_close!(z_of("R1", &[7.0], w), Complex64::new(7.0, 0.0), 1e-15);
        eis_core::assert_close!(z_of("C1", &[3e-6], w), 1.0 / (J * w * 3e-6), 1e-15);
        eis_core::assert_close!(z_of("L1", &[2e-6], w), J * w * 2e-6, 1e-15);
        eis_core::assert_close!(
            z_of("Q1", &[2e-5, 0.83], w),
            1.0 / (2e-5 * (J * w).powf(0.83)),
            1e-13,
        );
        eis_core::assert_close!(
            z_of("W1", &[12.0], w),
            12.0 * Complex64::new(1.0, -1.0) / w.sqrt(),
            1e-15,
        );
        let s = (J * w * 0.7).sqrt();
        if s.norm() < 300.0 {
            eis_core::assert_close!(z_of("Wt1", &[5.0, 0.7], w), 5.0 * s.tanh() / s, 1e-13);
            eis_core::assert_close!(
                z_of("Wr1", &[5.0, 0.7], w),
                5.0 * s.cosh() / s.sinh() / s,
                1e-13,
            );
        }
        eis_core::assert_close!(
            z_of("G1", &[9.0, 2e-3], w),
            9.0 / (1.0 + J * w * 2e-3).sqrt(),
            1e-15,
        );
    }
}

/// Limits of the finite diffusion elements (derived from the closed forms, tanh s/s → 1 and coth s/s →
/// 1/s² + 1/3 as s → 0):
/// transmissive → R as ω → 0; reflective → R/3 + 1/(jωC_L) with C_L = τ/R as ω → 0;
/// both → R/√(jωτ) as ω → ∞.
#[test]
fn finite_diffusion_limits() {
    let (r, tau) = (20.0, 5.0);
    let w_low = 1e-8 / tau;
    eis_core::assert_close!(z_of("Wt", &[r, tau], w_low), Complex64::new(r, 0.0), 1e-8);
    let c_l = tau / r;
    // The first neglected term is R·jωτ/45, relative size ~ (ωτ)²/15 here.
    let w_low = 1e-4 / tau;
    eis_core::assert_close!(
        z_of("Wr", &[r, tau], w_low),
        r / 3.0 + 1.0 / (J * w_low * c_l),
        1e-8,
    );
    for w_high in [1e4 / tau, 1e8 / tau, 1e14 / tau] {
        let want = r / (J * w_high * tau).sqrt();
        eis_core::assert_close!(z_of("Wt", &[r, tau], w_high), want, 1e-12);
        eis_core::assert_close!(z_of("Wr", &[r, tau], w_high), want, 1e-12);
    }
}

/// Semi-infinite Warburg: σ(1−j)/√ω ≡ A_W/√(jω) with A_W = √2·σ (derived: (1 − j)/√ω = √2/√(jω)), and the
/// high-frequency limit of the transmissive element with σ = R/√(2τ).
#[test]
fn warburg_conventions() {
    let sigma = 3.0;
    for w in omegas() {
        eis_core::assert_close!(
            z_of("W", &[sigma], w),
            SQRT_2 * sigma / (J * w).sqrt(),
            1e-15,
        );
    }
    let (r, tau) = (20.0, 5.0);
    let w = 1e6 / tau;
    eis_core::assert_close!(
        z_of("Wt", &[r, tau], w),
        z_of("W", &[r / (2.0 * tau).sqrt()], w),
        1e-12,
    );
}

/// Gerischer element: the −Z″ peak lies at ωτ = √3, where Z = R(√6/4 − j/(2√2))
/// (Boukamp & Bouwmeester 2003, Solid State Ionics 157, 29, from memory; value derived from the closed form).
#[test]
fn gerischer_peak() {
    let (r, tau) = (8.0, 1e-3);
    let w_peak = 3f64.sqrt() / tau;
    let z = z_of("G", &[r, tau], w_peak);
    eis_core::assert_close!(
        z,
        r * Complex64::new(6f64.sqrt() / 4.0, -1.0 / (2.0 * SQRT_2)),
        1e-14,
    );
    for f in [0.99, 1.01] {
        assert!(
            -z_of("G", &[r, tau], w_peak * f).im < -z.im,
            "peak at ωτ = √3"
        );
    }
}

/// CPE with n = 1 is a capacitor and with n = 0 a resistor of 1/Q (common practice).
#[test]
fn cpe_limits() {
    for w in omegas() {
        eis_core::assert_close!(z_of("Q", &[4e-6, 1.0], w), z_of("C", &[4e-6], w), 1e-14);
        eis_core::assert_close!(z_of("Q", &[0.25, 0.0], w), Complex64::new(4.0, 0.0), 1e-15);
    }
}

/// R|Q arc apex at ω = (RQ)^(−1/n), where Z = R/2 − j(R/2)·tan(nπ/4); check R = 100 Ω, Q = 1e-5,
/// n = 0.8 gives ω = 5623.413 rad/s and −Z″ = 36.32713 Ω (derived from the closed form; Cole & Cole 1941,
/// J. Chem. Phys. 9, 341, from memory, for the ZARC form).
#[test]
fn rq_apex() {
    let (r, q, n): (f64, f64, f64) = (100.0, 1e-5, 0.8);
    let w = (r * q).powf(-1.0 / n);
    assert!((w - 5623.413).abs() < 1e-3);
    let z = z_of("R|Q", &[r, q, n], w);
    assert!((z.re - 50.0).abs() < 1e-12);
    assert!((-z.im - (r / 2.0) * (n * FRAC_PI_4).tan()).abs() < 1e-12);
    assert!((-z.im - 36.32713).abs() < 1e-5);
}

/// Randles circuit without diffusion, R_s = 10 Ω, R_ct = 100 Ω, C_dl = 20 µF: apex at ω = 1/(R_ct C_dl),
/// f = 79.5775 Hz, with Z = 60 − 50j Ω (derived from the closed form; Bard & Faulkner 2001, Electrochemical
/// Methods, §10.4, from memory).
#[test]
fn randles_apex() {
    let f = 1.0 / (2.0 * PI * 100.0 * 20e-6);
    assert!((f - 79.5775).abs() < 1e-4);
    let z = z_of("Rs + Rct|Cdl", &[10.0, 100.0, 20e-6], angular(f));
    eis_core::assert_close!(z, Complex64::new(60.0, -50.0), 1e-14);
}

/// Randles with a σ-Warburg: at low frequency the 45° line extrapolates to R_s + R_ct − 2σ²C_dl on the
/// real axis (Sluyters 1960, via Bard & Faulkner 2001 §10.4, from memory); check σ = 50 Ω·s^−½ gives
/// 109.9 Ω for R_s = 10, R_ct = 100, C_dl = 20 µF (derived from the closed form).
#[test]
fn randles_warburg_intercept() {
    let (rs, rct, sigma, c) = (10.0, 100.0, 50.0, 20e-6);
    let w = 1e-6;
    let z = z_of("Rs + (Rct + W)|Cdl", &[rs, rct, sigma, c], w);
    // Z′ − (−Z″) = (R_s + R_ct + σω^−½) − (σω^−½ + 2σ²C) at low ω.
    let intercept = z.re + z.im;
    assert!((intercept - 109.9).abs() < 1e-2, "{intercept}");
}

/// Analytic Jacobians of nested circuits against central differences (relative step 1e-6); the method
/// is the usual check of analytic derivatives (common practice).
#[test]
fn nested_jacobians_match_finite_differences() {
    let cases: &[(&str, &[f64])] = &[
        ("R0 + Rct|Qdl", &[10.0, 100.0, 1e-5, 0.8]),
        (
            "L0 + R0 + Rf|Qf + (Rct + Wtd)|Qdl",
            &[5e-7, 0.05, 0.02, 5e-3, 0.85, 0.1, 0.2, 20.0, 0.5, 0.93],
        ),
        (
            "R1|(R2 + C2|(R3 + G3))|Q4",
            &[50.0, 5.0, 1e-6, 2.0, 8.0, 1e-3, 1e-5, 0.7],
        ),
        (
            "(R1 + L1)|C1 + Wr2|R2 + W3",
            &[2.0, 1e-3, 1e-6, 30.0, 0.01, 100.0, 4.0],
        ),
    ];
    for (model, p) in cases {
        let plan = Plan::compile(&parse(model).unwrap());
        let np = p.len();
        let ws: Vec<f64> = (0..=56)
            .map(|k| angular(10f64.powf(-4.0 + k as f64 * 0.2)))
            .collect();
        let mut z = vec![Complex64::new(0.0, 0.0); ws.len()];
        let mut jac = vec![Complex64::new(0.0, 0.0); ws.len() * np];
        let mut work = plan.workspace();
        plan.eval(p, &Grid::new(&ws), &mut z, Some(&mut jac), &mut work);
        for k in 0..np {
            let h = 1e-6 * p[k];
            let mut up = p.to_vec();
            up[k] += h;
            let mut dn = p.to_vec();
            dn[k] -= h;
            let zu = plan.impedances(&up, &ws);
            let zd = plan.impedances(&dn, &ws);
            for i in 0..ws.len() {
                let fd = (zu[i] - zd[i]) / (2.0 * h);
                let an = jac[k * ws.len() + i];
                // Compare on the scale of |Z|/p so that derivatives that vanish at some frequency do not
                // blow the relative error up.
                let scale = an.norm().max(1e-4 * z[i].norm() / p[k]);
                assert!(
                    (fd - an).norm() / scale < 1e-5,
                    "{model} d/dp{k} at w={}: analytic {an}, numeric {fd}",
                    ws[i]
                );
            }
        }
    }
}
