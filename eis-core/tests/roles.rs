//! Roles by physics (eis_core::roles through eis_core::derive): a still-rising diffusion tail, a process
//! beyond the data, and roles that follow the physics rather than the place in the formula.

use eis_core::circuit::{Role, parse};
use eis_core::derive::derive;
use eis_core::eval::{Plan, log_frequencies};
use eis_core::fit::{FitSettings, fit};
use eis_core::roles::Placement;
use eis_core::simulate::simulate;

fn fit_to(
    truth_model: &str,
    truth: &[f64],
    model: &str,
    hi: f64,
    lo: f64,
) -> eis_core::derive::Derived {
    let data = simulate(
        &Plan::compile(&parse(truth_model).unwrap()),
        truth,
        &log_frequencies(hi, lo, 10),
        None,
    );
    let c = parse(model).unwrap();
    let r = fit(&c, &data, &FitSettings::default(), None).unwrap();
    derive(&c, &r)
}

/// Data from a semi-infinite Warburg σ(1−j)/√ω fitted with a finite transmissive diffusion element:
/// over the data R·tanh(√(jωτ))/√(jωτ) must behave as R/√(jωτ), its high-frequency limit (common
/// practice; e.g. Jacobsen & West 1995, Electrochim. Acta 40, 255), so R and τ run off together and
/// only σ = R/√(2τ) is determined. The tail is reported by σ and by Re Z at the lowest frequency
/// (σ/√ω_lo for a pure Warburg, a lower bound), never as a diffusion resistance.
#[test]
fn a_still_rising_tail_is_a_warburg_coefficient_not_a_resistance() {
    let sigma = 0.5;
    let d = fit_to(
        "R0 + Rct|Qdl + W1",
        &[0.1, 1.0, 1e-3, 0.95, sigma],
        "R0 + Rct|Qdl + Wt1",
        1e4,
        1e-2,
    );
    assert!(d.diffusion_resistance.is_none(), "{d:?}");
    assert_eq!(d.diffusion_tails.len(), 1);
    let t = &d.diffusion_tails[0];
    assert!((t.sigma.value / sigma - 1.0).abs() < 0.02, "{t:?}");
    let omega_lo = 2.0 * std::f64::consts::PI * 1e-2;
    let bound = sigma / omega_lo.sqrt();
    assert!(
        (t.resistance_at_least.value / bound - 1.0).abs() < 0.05,
        "{t:?}"
    );
    assert!(d.beyond_data.iter().any(|b| b.process == "Wt1"));
    // Summed nowhere: the DC resistance is R0 + Rct only.
    let dc = d.dc_resistance.unwrap().value;
    assert!((dc - 1.1).abs() < 0.02, "{dc}");
    assert!((d.warburg_sigma.unwrap().value / sigma - 1.0).abs() < 0.02);
}

/// An arc whose apex lies a decade below the lowest measured frequency (τ = 16 s, 10 mHz, data down
/// to 0.1 Hz) is beyond the data: listed, not summed into charge transfer or DC resistance (its
/// resistance is an extrapolation of one flank; common practice).
#[test]
fn an_arc_below_the_window_is_beyond_the_data() {
    let tau_slow: f64 = 16.0;
    let d = fit_to(
        "R0 + R1|C1 + R2|C2",
        &[0.1, 1.0, 1e-4, 2.0, tau_slow / 2.0],
        "R0 + R1|C1 + R2|C2",
        1e4,
        1e-1,
    );
    let slow = d.arcs.iter().find(|a| a.resistor == "R2").unwrap();
    assert_eq!(slow.placement, Placement::BelowWindow);
    assert!(d.beyond_data.iter().any(|b| b.process == "R2"));
    let ct = d.charge_transfer_resistance.unwrap().value;
    assert!((ct - 1.0).abs() < 1e-3, "{ct}");
    let dc = d.dc_resistance.unwrap().value;
    assert!((dc - 1.1).abs() < 1e-3, "{dc}");
}

/// The same two processes written in either order get the same roles: the faster arc with a
/// capacitance two orders below the other's is a film (a dielectric layer stores less charge than a
/// double layer: common practice), the other the charge transfer.
#[test]
fn roles_follow_the_physics_not_the_place_in_the_formula() {
    let film = (0.5, 2e-5, 0.9); // R, Q, n: τ about 7 µs
    let ct = (3.0, 2e-3, 0.9); // τ about 4 ms
    for (model, truth) in [
        (
            "R0 + Ra|Qa + Rb|Qb",
            [1.0, film.0, film.1, film.2, ct.0, ct.1, ct.2],
        ),
        (
            "R0 + Ra|Qa + Rb|Qb",
            [1.0, ct.0, ct.1, ct.2, film.0, film.1, film.2],
        ),
    ] {
        let d = fit_to(model, &truth, model, 1e5, 1e-2);
        let by_r = |r: f64| {
            d.arcs
                .iter()
                .find(|a| (a.resistance.value / r - 1.0).abs() < 0.05)
                .map(|a| a.role)
        };
        assert_eq!(by_r(film.0), Some(Role::Film), "{d:?}");
        assert_eq!(by_r(ct.0), Some(Role::ChargeTransfer), "{d:?}");
        let sum = d.charge_transfer_resistance.unwrap().value;
        assert!((sum - ct.0).abs() < 0.05, "{sum}");
    }
}

/// The fit document names roles, placements and the weighting by the words of the circuit language
/// and the command line (`charge-transfer`, `below-window`, `modulus`), and reads them back as the
/// same values: the batch's results.jsonl is read again by the report and the trends. The case is
/// the arc a decade below the window of the test above (common practice).
#[test]
fn the_fit_document_keeps_roles_and_placements_as_words() {
    let data = simulate(
        &Plan::compile(&parse("R0 + R1|C1 + R2|C2").unwrap()),
        &[0.1, 1.0, 1e-4, 2.0, 8.0],
        &log_frequencies(1e4, 1e-1, 10),
        None,
    );
    let c = parse("R0 + R1|C1 + R2|C2").unwrap();
    let r = fit(&c, &data, &FitSettings::default(), None).unwrap();
    let doc = eis_core::report::document(&c, &r, &derive(&c, &r), None);
    let json: serde_json::Value = serde_json::to_value(&doc).unwrap();
    let beyond = &json["derived"]["beyond_data"];
    assert!(
        beyond
            .as_array()
            .unwrap()
            .iter()
            .any(|b| b["process"] == "R2" && b["placement"] == "below-window"),
        "{beyond}"
    );
    let arcs = json["derived"]["arcs"].as_array().unwrap();
    assert!(
        arcs.iter().any(|a| a["role"] == "charge-transfer"),
        "{arcs:?}"
    );
    assert_eq!(json["statistics"]["weighting"], "modulus");
    let back: eis_core::report::FitDocument = serde_json::from_value(json).unwrap();
    assert_eq!(back, doc);
    assert!(
        back.derived
            .beyond_data
            .iter()
            .any(|b| b.placement == Placement::BelowWindow)
    );
    assert!(
        back.derived
            .arcs
            .iter()
            .any(|a| a.role == Role::ChargeTransfer)
    );
}
