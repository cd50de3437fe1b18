//! `eis fit --model auto` end to end on a spectrum from `eis simulate` (two arcs and transmissive
//! diffusion, 0.3 % noise, seed 5): the winner, the candidates list in the JSON, the readable table, and
//! bad input; and on a spectrum of a physics-based cell model written as CSV.

use eis_tests::{eis, physics_spectra, scratch, write_physics_csv};
use serde_json::Value;

const MODEL: &str = "R0 + R1|Q1 + (R2 + Wtd)|Q2";
const SETS: [&str; 9] = [
    "R0=1",
    "R1=3",
    "Q1.Q=2e-5",
    "Q1.n=0.9",
    "R2=10",
    "Q2.Q=3e-4",
    "Q2.n=0.85",
    "Wtd.R=15",
    "Wtd.tau=5",
];

fn simulated(name: &str) -> std::path::PathBuf {
    let dir = scratch(name);
    let mut args = vec![
        "simulate", "--model", MODEL, "--noise", "0.003", "--seed", "5", "-o", "s.csv",
    ];
    for s in SETS {
        args.extend(["--set", s]);
    }
    eis(&dir, &args).expect_code(0);
    dir
}

#[test]
fn auto_picks_the_simulated_circuit_and_lists_the_candidates() {
    let dir = simulated("fit_auto_json");
    let run = eis(&dir, &["fit", "s.csv", "--model", "auto", "--json"]).expect_code(0);
    let doc: Value = serde_json::from_str(&run.stdout).unwrap();
    // Same keys as a normal fit document.
    for key in ["model", "parameters", "derived", "statistics", "warnings"] {
        assert!(doc.get(key).is_some(), "key {key}");
    }
    assert_eq!(
        doc["model"].as_str().unwrap().lines().next(),
        Some("R0 + R1|Q1{n=0.5..1} + (R2 + Wtd)|Q2{n=0.5..1}")
    );
    let cands = doc["candidates"].as_array().unwrap();
    // The 18 circuits of the classic family and the 8 porous-electrode and diffusion-tail members.
    assert_eq!(cands.len(), 26, "the whole family is listed");
    let first = &cands[0];
    assert_eq!(first["rank"], 1);
    assert_eq!(first["arcs"], 2);
    assert_eq!(first["diffusion"], "transmissive");
    assert_eq!(first["inductance"], false);
    assert_eq!(first["systematic_residuals"], false);
    assert_eq!(first["delta_bic"], 0.0);
    assert_eq!(first["bic"], doc["statistics"]["bic"]);
    for c in cands {
        for key in [
            "model",
            "bic",
            "aic",
            "reduced_chi_square",
            "systematic_residuals",
            "rank",
            "reason",
        ] {
            assert!(c.get(key).is_some(), "candidate key {key}");
        }
    }
    // Ranked: BIC rises within the fitted candidates of the winner's tier.
    let bics: Vec<f64> = cands
        .iter()
        .filter(|c| c["tier"] == first["tier"])
        .map(|c| c["bic"].as_f64().unwrap())
        .collect();
    assert!(bics.windows(2).all(|w| w[0] <= w[1]), "{bics:?}");
    // No point is inductive, so the inductive members are skipped with a reason.
    assert!(
        cands
            .iter()
            .filter(|c| c["inductance"] == true)
            .all(|c| c["fitted"] == false && c["reason"].as_str().unwrap().starts_with("skipped"))
    );
}

#[test]
fn readable_report_shows_the_candidates_table() {
    let dir = simulated("fit_auto_human");
    let run = eis(&dir, &["fit", "s.csv", "--model", "auto"]).expect_code(0);
    assert!(
        run.stdout.contains("candidates (DRT peaks:"),
        "{}",
        run.stdout
    );
    assert!(run.stdout.contains("2 arcs + transmissive diffusion"));
    assert!(run.stdout.contains("winner"));
    // Skipped candidates take one line per reason, not one row each.
    assert!(
        run.stdout.contains(
            "candidates skipped: no point has a positive imaginary part, so no inductance"
        ),
        "{}",
        run.stdout
    );
    assert!(
        !run.stdout.contains("2 arcs + inductance "),
        "{}",
        run.stdout
    );
}

#[test]
fn auto_with_parameter_overrides_is_bad_input() {
    let dir = simulated("fit_auto_bad");
    let run = eis(&dir, &["fit", "s.csv", "--model", "auto", "--fix", "R0=1"]).expect_code(2);
    run.expect_stderr("--model auto");
}

/// Issue 15: on the Doyle–Fuller–Newman spectrum of the Chen et al. 2020 cell (J. Electrochem. Soc.
/// 167, 080534) with a 5 mΩ contact resistance, computed with PyBaMM (Sulzer et al. 2021, J. Open
/// Research Software 9, 14), `--model auto` reads the charge-transfer resistance within 20 % of the
/// model's RT/(F·i0·a·L·A) summed over both electrodes and the high-frequency resistance above the
/// 5 mΩ contact; the decompositions that put the kinetic arc into a diffusion element beyond the data
/// are listed as rejected with their reason, after the plausible ones.
#[test]
fn auto_reads_a_physics_model_spectrum_with_a_contact_resistance() {
    let dir = scratch("fit_auto_physics");
    let spectra = physics_spectra();
    let s = spectra
        .iter()
        .find(|s| s["name"] == "dfn-chen2020-soc50-contact5m")
        .unwrap();
    write_physics_csv(s, &dir, "cell.csv");
    let run = eis(&dir, &["fit", "cell.csv", "--model", "auto", "--json"]).expect_code(0);
    let doc: Value = serde_json::from_str(&run.stdout).unwrap();
    let model = s["reference"]["charge_transfer_resistance_ohm"]
        .as_f64()
        .unwrap();
    let ct = doc["derived"]["charge_transfer_resistance_ohm"]
        .as_f64()
        .unwrap();
    assert!((ct / model - 1.0).abs() <= 0.2, "{ct} vs {model}");
    let ohmic = doc["derived"]["ohmic_resistance_ohm"].as_f64().unwrap();
    assert!(ohmic > 5e-3, "{ohmic}");
    let cands = doc["candidates"].as_array().unwrap();
    assert_eq!(cands[0]["rejected"], false);
    let rejected: Vec<&Value> = cands.iter().filter(|c| c["rejected"] == true).collect();
    assert!(
        rejected.iter().any(|c| c["diffusion"] == "transmissive"
            && c["reason"].as_str().unwrap().contains("beyond the data")),
        "{rejected:?}"
    );
    // Rejected candidates come after every plausible fitted one.
    let first_rejected = cands.iter().position(|c| c["rejected"] == true).unwrap();
    assert!(
        cands[first_rejected..]
            .iter()
            .all(|c| c["rejected"] == true || c["fitted"] == false)
    );
}
