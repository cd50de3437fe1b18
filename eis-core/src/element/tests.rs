use super::diffusion::{Boundary, EXP_LIMIT, SERIES_LIMIT, diffusion_point};
use super::*;
use std::f64::consts::FRAC_1_SQRT_2;

/// Log-spaced angular frequencies from 1 µHz to 100 MHz.
fn omegas() -> Vec<f64> {
    (0..=140)
        .map(|k| 2.0 * std::f64::consts::PI * 10f64.powf(-6.0 + k as f64 * 0.1))
        .collect()
}

fn eval(kind: &ElementKind, p: &[f64], w: f64) -> (Complex64, Vec<Complex64>) {
    kind.eval_at(p, w)
}

/// The kind's defaults, with 0.7 for interval-bounded parameters (inside, away from the ends).
fn typical(kind: &ElementKind) -> Vec<f64> {
    kind.params
        .iter()
        .map(|q| match q.domain {
            Domain::Positive => q.default,
            Domain::Interval(..) => 0.7,
        })
        .collect()
}

/// The physics column points at parameters of the right meaning: resistances in Ohm, time
/// constants in s, a porous interface as [Rct, Q, n]; and it agrees with the class.
#[test]
fn every_kind_physics_points_at_its_parameters() {
    let unit = |kind: &ElementKind, k: usize| kind.params.get(k).map(|p| p.unit);
    for kind in KINDS {
        let s = kind.symbol;
        match kind.physics {
            Physics::Plain => {}
            Physics::SemiInfiniteDiffusion { sigma } => {
                assert_eq!(kind.class, Class::Diffusive, "{s}");
                assert_eq!(unit(kind, sigma), Some("Ohm s^-1/2"), "{s}");
            }
            Physics::FiniteDiffusion { resistance, tau } => {
                assert_eq!(kind.class, Class::Diffusive, "{s}");
                assert_eq!(unit(kind, resistance), Some("Ohm"), "{s}");
                assert_eq!(unit(kind, tau), Some("s"), "{s}");
            }
            Physics::PorousLine { rail, interface } => {
                assert_eq!(kind.class, Class::Porous, "{s}");
                assert_eq!(unit(kind, rail), Some("Ohm"), "{s}");
                assert_eq!(kind.params.get(interface), Some(&LINE_RCT), "{s}");
                assert_eq!(kind.params.get(interface + 1), Some(&LINE_Q), "{s}");
                assert_eq!(kind.exponent(), Some(interface + 2), "{s}");
            }
        }
    }
}

/// Evaluating a whole grid at once gives, point by point, exactly what one-point grids give
/// (nothing in an element may depend on the neighbouring frequencies).
#[test]
fn grid_evaluation_is_pointwise() {
    let ws = omegas();
    let g = Grid::new(&ws);
    for kind in KINDS {
        let p = typical(kind);
        let n = ws.len();
        let mut z = vec![ZERO; n];
        let mut dz = vec![ZERO; n * p.len()];
        (kind.impedance)(&p, &g, &mut z, &mut dz);
        for (i, &w) in ws.iter().enumerate() {
            let (zi, di) = eval(kind, &p, w);
            assert_eq!(z[i], zi, "{} at {w}", kind.symbol);
            for k in 0..p.len() {
                assert_eq!(dz[k * n + i], di[k], "{} d{k} at {w}", kind.symbol);
            }
        }
    }
}

#[test]
fn symbols_are_unique_and_matched_longest_first() {
    for (i, a) in KINDS.iter().enumerate() {
        for b in &KINDS[i + 1..] {
            assert_ne!(a.symbol, b.symbol);
        }
    }
    assert_eq!(kind_for_name("Wtd").unwrap().symbol, "Wt");
    assert_eq!(kind_for_name("Wr1").unwrap().symbol, "Wr");
    assert_eq!(kind_for_name("W1").unwrap().symbol, "W");
    assert!(kind_for_name("X1").is_none());
}

/// Central differences in log-parameter space (relative step) against the analytic derivatives, for
/// every kind, at frequencies spanning 1 µHz–100 MHz. Method: common practice for checking Jacobians.
#[test]
fn every_kind_matches_finite_differences() {
    for kind in KINDS {
        let base = typical(kind);
        for &w in &omegas() {
            let (_, dz) = eval(kind, &base, w);
            for k in 0..base.len() {
                let h = 1e-6 * base[k];
                let mut up = base.clone();
                up[k] += h;
                let mut dn = base.clone();
                dn[k] -= h;
                let fd = (eval(kind, &up, w).0 - eval(kind, &dn, w).0) / (2.0 * h);
                let scale = eval(kind, &base, w).0.norm() / base[k];
                let err = (fd - dz[k]).norm() / (dz[k].norm().max(scale * 1e-3));
                assert!(
                    err < 1e-5,
                    "{} d/d{} at w={w}: analytic {} vs fd {}",
                    kind.symbol,
                    kind.params[k].name,
                    dz[k],
                    fd
                );
            }
        }
    }
}

/// Every kind's limit function agrees with its impedance evaluated far out, at ω = 1e-12 and
/// 1e16 rad/s (a consistency check of the table; the limits themselves are the closed forms'
/// ω → 0 and ω → ∞ limits, derived from the formulas in the table).
#[test]
fn every_kind_limit_matches_its_impedance() {
    for kind in KINDS {
        let p = typical(kind);
        for (w, high) in [(1e-12, false), (1e16, true)] {
            let (z, _) = eval(kind, &p, w);
            let l = (kind.limit)(&p, high);
            let scale = 1.0
                + if l.real.is_finite() {
                    l.real.abs()
                } else {
                    0.0
                };
            if l.open {
                assert!(
                    z.norm() > 1e3 * scale,
                    "{} at w={w}: {z} should diverge",
                    kind.symbol
                );
            }
            if l.real.is_finite() {
                assert!(
                    (z.re - l.real).abs() < 1e-3 * scale,
                    "{} at w={w}: Re Z = {} vs limit {}",
                    kind.symbol,
                    z.re,
                    l.real
                );
                if !l.open {
                    assert!(z.im.abs() < 1e-3 * scale, "{} at w={w}: {z}", kind.symbol);
                }
            } else {
                assert!(
                    z.re > 1e3,
                    "{} at w={w}: {z} should have a diverging real part",
                    kind.symbol
                );
            }
        }
    }
}

/// No NaN or infinity for any kind over 1 µHz–100 MHz at parameters spread over many decades
/// (a requirement of the evaluation, not an outside value).
#[test]
fn finite_everywhere() {
    for kind in KINDS {
        for scale in [1e-12, 1e-6, 1.0, 1e6, 1e12] {
            let p: Vec<f64> = kind
                .params
                .iter()
                .map(|p| match p.domain {
                    Domain::Positive => scale,
                    Domain::Interval(..) => 0.5,
                })
                .collect();
            for &w in &omegas() {
                let (z, dz) = eval(kind, &p, w);
                assert!(
                    z.re.is_finite() && z.im.is_finite(),
                    "{} p={p:?} w={w}",
                    kind.symbol
                );
                for d in dz {
                    assert!(
                        d.re.is_finite() && d.im.is_finite(),
                        "{} d p={p:?} w={w}",
                        kind.symbol
                    );
                }
            }
        }
    }
}

/// Series and closed-form branches agree at the switch-over |s| = 0.1 (continuity); slightly above
/// the switch the closed form loses digits to cancellation, so the bound is 1e-13 for Z and 1e-12 for
/// the derivatives.
#[test]
fn series_and_closed_forms_agree_at_the_switch() {
    for boundary in [Boundary::Transmissive, Boundary::Reflective] {
        for tau in [1e-3, 1.0, 1e3] {
            let w = SERIES_LIMIT * SERIES_LIMIT / tau;
            let (r, wt) = (3.0, w * tau);
            let (zs, ds0, ds1) = diffusion_point(boundary, r, tau, wt, wt.sqrt(), true);
            let (zc, dc0, dc1) = diffusion_point(boundary, r, tau, wt, wt.sqrt(), false);
            assert!((zs - zc).norm() / zc.norm() < 1e-13, "{zs} vs {zc}");
            for (a, b) in [(ds0, dc0), (ds1, dc1)] {
                assert!((a - b).norm() / b.norm() < 1e-12, "{a} vs {b}");
            }
        }
    }
}

/// Where e^{−2s} is dropped (Re 2s > 50) the closed forms equal their limits tanh = coth = 1 to
/// round-off, so the cut is invisible: compare just below and just above it.
#[test]
fn dropping_the_exponential_is_invisible() {
    for boundary in [Boundary::Transmissive, Boundary::Reflective] {
        let a: f64 = EXP_LIMIT / 2.0;
        let tau = 2.0;
        for sqrt_wt in [
            a * 2f64.sqrt() * (1.0 - 1e-9),
            a * 2f64.sqrt() * (1.0 + 1e-9),
        ] {
            let wt = sqrt_wt * sqrt_wt;
            let (z, f, d) = diffusion_point(boundary, 1.0, tau, wt, sqrt_wt, false);
            let s = Complex64::new(sqrt_wt * FRAC_1_SQRT_2, sqrt_wt * FRAC_1_SQRT_2);
            let limit = 1.0 / s;
            assert!((z - limit).norm() <= 1e-15 * limit.norm(), "{z} vs {limit}");
            assert!((f - limit).norm() <= 1e-15 * limit.norm());
            let d_limit = -1.0 / (2.0 * tau * s);
            assert!(
                (d - d_limit).norm() <= 1e-14 * d_limit.norm(),
                "{d} vs {d_limit}"
            );
        }
    }
}
