//! Derived battery quantities: published check values, limits of the circuit, and the delta-method
//! gradients against finite differences.

use eis_core::circuit::{Role, parse};
use eis_core::derive::{Quantity, derive, short_circuit};
use eis_core::eval::{Plan, log_frequencies};
use eis_core::fit::{FitResult, FitSettings, fit};
use eis_core::simulate::{Noise, simulate};

fn fitted(model: &str, truth: &[f64], noise: Option<Noise>) -> (eis_core::Circuit, FitResult) {
    let c = parse(model).unwrap();
    let data = simulate(
        &Plan::compile(&c),
        truth,
        &log_frequencies(1e5, 1e-3, 10),
        noise,
    );
    let r = fit(&c, &data, &FitSettings::default(), None).unwrap();
    (c, r)
}

/// Brug et al. 1984 (J. Electroanal. Chem. 176, 275), faradaic case: Q = 1e-5 S·s^n, n = 0.8,
/// R_s = 10 Ω, R_ct = 100 Ω gives C = 9.76454e-7 F (value derived from Brug's formula
/// C = Q^(1/n)·(1/R_s + 1/R_ct)^((n−1)/n)).
#[test]
fn brug_effective_capacitance() {
    let (c, r) = fitted("R0 + Rct|Qdl", &[10.0, 100.0, 1e-5, 0.8], None);
    let d = derive(&c, &r);
    assert_eq!(d.arcs.len(), 1);
    let cap = d.arcs[0].capacitance.value;
    assert!((cap - 9.76454e-7).abs() < 1e-5 * 9.76454e-7, "{cap}");
    // Its time constant is (RQ)^(1/n) and the apex frequency 1/(2πτ) (Cole & Cole 1941, J. Chem. Phys. 9, 341, from
    // memory).
    let tau = (100.0f64 * 1e-5).powf(1.0 / 0.8);
    assert!((d.arcs[0].time_constant.value - tau).abs() < 1e-8 * tau);
    assert_eq!(d.arcs[0].role, Role::ChargeTransfer);
}

/// Ohmic resistance is the high-frequency intercept and DC resistance the sum of resistances on the
/// DC path (common practice); a reflective boundary blocks DC; an R|C arc has C as its capacitance.
#[test]
fn limits_of_the_circuit() {
    let truth = [5e-7, 0.05, 0.02, 5e-3, 0.85, 0.1, 0.2, 20.0, 0.5, 0.93];
    let (c, r) = fitted("L0 + R0 + Rf|Qf + (Rct + Wtd)|Qdl", &truth, None);
    let d = derive(&c, &r);
    assert!((d.ohmic_resistance.unwrap().value - 0.05).abs() < 1e-8);
    assert!((d.dc_resistance.unwrap().value - (0.05 + 0.02 + 0.1 + 0.2)).abs() < 1e-8);
    // Charge transfer is the kinetic arc only; the film arc (effective capacitance two orders below
    // the double layer's: common practice) is not summed into it.
    assert!((d.charge_transfer_resistance.unwrap().value - 0.1).abs() < 1e-8);
    assert!((d.diffusion_resistance.unwrap().value - 0.2).abs() < 1e-8);
    assert!(d.warburg_sigma.is_none());
    // Rule: the faster arc with a far smaller capacitance is the film, the other the charge transfer.
    assert_eq!(d.arcs[0].role, Role::Film);
    assert_eq!(d.arcs[1].role, Role::ChargeTransfer);

    let (c, r) = fitted("R0 + (Rct + Wrd)|Cdl", &[1.0, 10.0, 20.0, 50.0, 1e-4], None);
    let d = derive(&c, &r);
    assert!(d.dc_resistance.is_none(), "reflective diffusion blocks DC");
    assert!((d.arcs[0].capacitance.value - 1e-4).abs() < 1e-10);
    let (c, r) = fitted("R0 + (Rct + W1)|Qdl", &[1.0, 10.0, 5.0, 1e-4, 0.9], None);
    let d = derive(&c, &r);
    assert!(d.dc_resistance.is_none() && d.diffusion_resistance.is_none());
    assert!((d.warburg_sigma.unwrap().value - 5.0).abs() < 1e-8);
}

/// Roles written in the circuit win over the ordering rule.
#[test]
fn roles_from_the_circuit() {
    let text = "R0 + Ra|Qa + Rb|Qb\nrole Ra = contact\nrole Rb = charge-transfer";
    let c = parse(text).unwrap();
    let truth = [1.0, 3.0, 1e-5, 0.9, 10.0, 1e-3, 0.9];
    let data = simulate(
        &Plan::compile(&c),
        &truth,
        &log_frequencies(1e5, 1e-2, 10),
        None,
    );
    let d = derive(&c, &fit(&c, &data, &FitSettings::default(), None).unwrap());
    assert_eq!(
        (d.arcs[0].role, d.arcs[1].role),
        (Role::Contact, Role::ChargeTransfer)
    );
    assert!(d.arcs.iter().all(|a| a.role_from_circuit));
}

/// Delta-method standard errors of the arc quantities use analytic gradients; compare them with
/// gradients by central differences of the same quantities (common practice for checking derivatives).
#[test]
fn delta_method_gradients_match_finite_differences() {
    let truth = [0.05, 0.02, 5e-3, 0.85, 0.1, 0.5, 0.93];
    let (c, r) = fitted(
        "R0 + Rf|Qf + Rct|Qdl",
        &truth,
        Some(Noise {
            relative: 0.003,
            seed: 11,
        }),
    );
    let d = derive(&c, &r);
    let quantities = |v: &[f64]| -> Vec<f64> {
        let mut rr = r.clone();
        rr.values = v.to_vec();
        let dd = derive(&c, &rr);
        dd.arcs
            .iter()
            .flat_map(|a| [a.time_constant.value, a.capacitance.value])
            .collect()
    };
    let analytic: Vec<Quantity> = d
        .arcs
        .iter()
        .flat_map(|a| [a.time_constant, a.capacitance])
        .collect();
    let nf = r.free.len();
    let mut grads = vec![vec![0.0; nf]; analytic.len()];
    for (k, &i) in r.free.iter().enumerate() {
        let h = 1e-6 * r.values[i];
        let mut up = r.values.clone();
        up[i] += h;
        let mut dn = r.values.clone();
        dn[i] -= h;
        let (qu, qd) = (quantities(&up), quantities(&dn));
        for q in 0..analytic.len() {
            grads[q][k] = (qu[q] - qd[q]) / (2.0 * h);
        }
    }
    for (q, a) in analytic.iter().enumerate() {
        let mut var = 0.0;
        for x in 0..nf {
            for y in 0..nf {
                var += grads[q][x] * grads[q][y] * r.covariance[x * nf + y];
            }
        }
        let se = a.stderr.unwrap();
        assert!(
            (se - var.sqrt()).abs() < 1e-4 * se,
            "quantity {q}: {se} vs {}",
            var.sqrt()
        );
    }
}

/// V/R and V²/(4R) with first-order errors (simple algebra).
#[test]
fn short_circuit_estimates() {
    let e = short_circuit(
        1.5,
        Quantity {
            value: 0.3,
            stderr: Some(0.01),
        },
    );
    assert!((e.short_circuit_current.value - 5.0).abs() < 1e-12);
    assert!((e.matched_load_power.value - 1.875).abs() < 1e-12);
    assert!((e.short_circuit_current.stderr.unwrap() - 1.5 * 0.01 / 0.09).abs() < 1e-12);
}
