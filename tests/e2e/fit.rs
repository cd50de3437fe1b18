//! `eis fit` end to end: readable report, JSON keys, fitted CSV, warm start, bad input.

use eis_tests::{eis, scratch, write_file, write_spectra};
use serde_json::Value;

/// Simulates `model` with `sets` at 0.2 % noise (seed 3) into `out`.
fn simulate(dir: &std::path::Path, model: &str, sets: &[&str], out: &str) {
    eis_tests::simulate(dir, model, sets, &["--noise", "0.002", "--seed", "3"], out);
}

/// Simulates the one-arc spectrum `R0 + Rct|Qdl` (R0 = 2 Ω, Rct = 40 Ω, Qdl = 50 µF·s^(n−1),
/// n = 0.85) in a fresh folder `name`, fits it with `--json` and `extra`, and returns the exit status
/// and the JSON document.
fn fit_arc_json(name: &str, extra: &[&str]) -> (i32, Value) {
    let dir = scratch(name);
    let model = "R0 + Rct|Qdl";
    let sets = ["R0=2", "Rct=40", "Qdl.Q=50u", "Qdl.n=0.85"];
    simulate(&dir, model, &sets, "s.csv");
    let mut args = vec!["fit", "s.csv", "--model", model, "--json"];
    args.extend_from_slice(extra);
    let run = eis(&dir, &args);
    (run.code, serde_json::from_str(&run.stdout).unwrap())
}

#[test]
fn json_document_has_the_documented_keys() {
    let (code, doc) = fit_arc_json("fit_json", &["--ocv", "1.5"]);
    assert_eq!(code, 0);
    assert_eq!(doc["model"], "R0 + Rct|Qdl");
    let params = doc["parameters"].as_array().unwrap();
    assert_eq!(params.len(), 4);
    for p in params {
        for key in ["name", "value", "stderr", "unit", "fixed", "at_bound"] {
            assert!(p.get(key).is_some(), "parameter key {key}");
        }
    }
    let rct = params.iter().find(|p| p["name"] == "Rct").unwrap();
    let (v, se) = (
        rct["value"].as_f64().unwrap(),
        rct["stderr"].as_f64().unwrap(),
    );
    assert!((v - 40.0).abs() < 4.0 * se, "Rct {v} ± {se}");
    let d = &doc["derived"];
    for key in [
        "ohmic_resistance_ohm",
        "charge_transfer_resistance_ohm",
        "diffusion_resistance_ohm",
        "dc_resistance_ohm",
    ] {
        assert!(
            d.get(key).is_some() && d.get(format!("{key}_stderr")).is_some(),
            "{key}"
        );
    }
    assert!(
        d["diffusion_resistance_ohm"].is_null(),
        "no diffusion element"
    );
    let arc = &d["arcs"][0];
    for key in [
        "resistance_ohm",
        "time_constant_s",
        "peak_frequency_hz",
        "capacitance_f",
        "role",
    ] {
        assert!(arc.get(key).is_some(), "arc key {key}");
    }
    assert_eq!(arc["role"], "charge-transfer");
    let st = &doc["statistics"];
    for key in [
        "chi_square",
        "reduced_chi_square",
        "aic",
        "bic",
        "points",
        "iterations",
        "converged",
    ] {
        assert!(st.get(key).is_some(), "statistics key {key}");
    }
    assert_eq!(st["points"], 71);
    assert!(doc["warnings"].is_array());
    // Short-circuit estimate with its caution: V/R_dc.
    let sc = &doc["short_circuit"];
    let dc = d["dc_resistance_ohm"].as_f64().unwrap();
    assert!((sc["short_circuit_current_a"].as_f64().unwrap() - 1.5 / dc).abs() < 1e-9);
    assert!(sc["caution"].as_str().unwrap().contains("dangerous"));
}

#[test]
fn table_fitted_csv_and_warm_start() {
    let dir = scratch("fit_table");
    let model = "R0 + Rf|Qf + (Rct + Wtd)|Qdl";
    simulate(
        &dir,
        model,
        &[
            "R0=0.5",
            "Rf=1",
            "Qf.Q=20u",
            "Qf.n=0.9",
            "Rct=5",
            "Wtd.R=8",
            "Wtd.tau=3",
            "Qdl.Q=2m",
            "Qdl.n=0.9",
        ],
        "s.csv",
    );
    let run = eis(
        &dir,
        &[
            "fit",
            "s.csv",
            "--model",
            model,
            "-o",
            "fitted.csv",
            "--plot",
            "fit.svg",
        ],
    )
    .expect_code(0);
    for word in [
        "ohmic resistance",
        "diffusion resistance",
        "charge-transfer",
        "reduced",
        "Rct|Qdl",
    ] {
        assert!(
            run.stdout.contains(word),
            "report mentions {word}:\n{}",
            run.stdout
        );
    }
    let csv = std::fs::read_to_string(dir.join("fitted.csv")).unwrap();
    let mut lines = csv.lines();
    assert_eq!(
        lines.next().unwrap(),
        "frequency_hz,z_real_ohm,z_imag_ohm,model_real_ohm,model_imag_ohm,residual_real_rel,residual_imag_rel"
    );
    assert_eq!(lines.count(), 71);
    assert!(
        std::fs::read_to_string(dir.join("fit.svg"))
            .unwrap()
            .starts_with("<svg")
    );
    // A saved result warm-starts the next fit, which then needs fewer evaluations.
    let cold = eis(&dir, &["fit", "s.csv", "--model", model, "--json"]).expect_code(0);
    write_file(&dir, "prev.json", &cold.stdout);
    let warm = eis(
        &dir,
        &[
            "fit",
            "s.csv",
            "--model",
            model,
            "--json",
            "--start-from",
            "prev.json",
        ],
    )
    .expect_code(0);
    let (c, w): (Value, Value) = (
        serde_json::from_str(&cold.stdout).unwrap(),
        serde_json::from_str(&warm.stdout).unwrap(),
    );
    let chi = |d: &Value| d["statistics"]["chi_square"].as_f64().unwrap();
    assert!((chi(&c) - chi(&w)).abs() <= 1e-9 * chi(&c));
    let evals = |d: &Value| d["statistics"]["evaluations"].as_u64().unwrap();
    assert!(
        evals(&w) < evals(&c),
        "warm {} vs cold {}",
        evals(&w),
        evals(&c)
    );
}

#[test]
fn fixed_and_bounded_parameters_are_respected() {
    let (_, doc) = fit_arc_json("fit_fix", &["--fix", "Qdl.n=0.8", "--bound", "Rct=1..30"]);
    let p = |n: &str| {
        doc["parameters"]
            .as_array()
            .unwrap()
            .iter()
            .find(|p| p["name"] == n)
            .unwrap()
            .clone()
    };
    assert_eq!(p("Qdl.n")["value"], 0.8);
    assert_eq!(p("Qdl.n")["fixed"], true);
    assert!(p("Qdl.n")["stderr"].is_null());
    assert!(p("Rct")["value"].as_f64().unwrap() <= 30.0);
    assert_eq!(p("Rct")["at_bound"], true, "truth 40 lies beyond the bound");
    assert!(
        doc["warnings"]
            .as_array()
            .unwrap()
            .iter()
            .any(|w| w.as_str().unwrap().contains("bound"))
    );
}

#[test]
fn bad_input_exits_2_with_a_clear_message() {
    let dir = scratch("fit_bad");
    write_spectra(
        &dir,
        &[
            ("empty.csv", ""),
            ("two.csv", "100,1,-1\n10,2,-1\n"),
            ("three.csv", "100,1,-1\n10,2,-1\n1,3,-1\n"),
            ("nan.csv", "100,NaN,-1\n10,2,-1\n1,3,-1\n"),
        ],
    );
    simulate(&dir, "R0 + R1|C1", &[], "ok.csv");
    let fixed_all = [
        "fit",
        "ok.csv",
        "--model",
        "R0 + R1|C1",
        "--fix",
        "R0",
        "--fix",
        "R1",
        "--fix",
        "C1",
    ];
    // (arguments, what the message on stderr says; empty: only the exit status is checked)
    let cases: [(&[&str], &str); 9] = [
        (&["fit", "empty.csv", "--model", "R0 + R1|C1"], "empty"),
        (
            &["fit", "two.csv", "--model", "R0 + R1|Q1"],
            "fewer than the minimum",
        ),
        (
            &["fit", "three.csv", "--model", "R0 + R1|Q1 + R2|Q2"],
            "too few for 7 free parameters",
        ),
        (&["fit", "nan.csv", "--model", "R0"], ""),
        (&fixed_all, "every parameter is fixed"),
        (
            &["fit", "ok.csv", "--model", "R0{50 1..10} + R1|C1"],
            "outside its bounds",
        ),
        (
            &[
                "fit",
                "ok.csv",
                "--model",
                "R0 + R1|C1",
                "--bound",
                "R1=5..1",
            ],
            "not below",
        ),
        (&["fit", "missing.csv", "--model", "R0"], "missing.csv"),
        (
            &["fit", "ok.csv", "--model", "R0 + R1|C1", "-o", "ok.csv"],
            "input file",
        ),
    ];
    for (args, message) in cases {
        let run = eis(&dir, args).expect_code(2);
        assert!(run.stderr.contains(message), "{args:?}: {}", run.stderr);
    }
    let run = eis(&dir, &["fit", "--help"]).expect_code(0);
    assert!(run.stdout.contains("Example"));
}
