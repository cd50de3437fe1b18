//! Fits a batch of spectra and reports each fit's result and wall time, for `bench/compare_scipy.py`.
//!
//! Build and run:
//!
//! ```text
//! cargo build --release --example fit_batch
//! target/release/examples/fit_batch < batch.json > results.json
//! ```
//!
//! Input (JSON on stdin):
//!
//! ```text
//! {"tolerance": 1e-10,                       // optional, solver tolerance (default: FitSettings's)
//!  "repeat": 3,                              // optional, runs per fit; the shortest time is reported
//!  "auto": false,                            // optional, skip the fits from automatic starts
//!  "starts": 16, "arc_moves": true, "drt_starts": true,   // optional FitSettings of the automatic fit
//!  "cases": [{"model": "R0 + Rct|Qdl",        // circuit text; initial values in it are ignored
//!             "frequency_hz": [...], "z_real_ohm": [...], "z_imag_ohm": [...],
//!             "starts": {"name": [p0, p1, ...], ...}}]}   // optional named starts
//! ```
//!
//! Output (JSON on stdout): for each case, `"auto"` — [`fit`] from automatic starting values, unless
//! skipped — and one
//! entry per named start — [`fit_from`], the single local fit from that start. Each entry holds
//! `params`, `chi_square`, `converged`, `starts_tried`, `evaluations` and `seconds`, the wall time of
//! that one call measured with `std::time::Instant` around it (parsing and output excluded; with
//! `repeat`, the shortest of that many identical calls).

use eis_core::circuit::parse;
use eis_core::fit::{FitResult, FitSettings, fit, fit_from};
use eis_core::spectrum::Spectrum;
use num_complex::Complex64;
use serde_json::{Map, Value, json};
use std::io::Read;
use std::time::Instant;

fn floats(v: &Value, what: &str) -> Vec<f64> {
    v.as_array()
        .unwrap_or_else(|| panic!("{what} is not an array"))
        .iter()
        .map(|x| {
            x.as_f64()
                .unwrap_or_else(|| panic!("{what} holds a non-number"))
        })
        .collect()
}

fn entry(r: &FitResult, seconds: f64) -> Value {
    json!({
        "params": r.values,
        "chi_square": r.chi_square,
        "converged": r.converged,
        "starts_tried": r.starts_tried,
        "evaluations": r.evaluations,
        "iterations": r.iterations,
        "seconds": seconds,
    })
}

/// Runs `f` `repeat` times; its (deterministic) result and the shortest wall time of one run, the
/// usual estimate of a run's cost free of interference from other processes.
fn timed<T>(repeat: usize, mut f: impl FnMut() -> T) -> (T, f64) {
    let mut best = f64::INFINITY;
    let mut out = None;
    for _ in 0..repeat {
        let t = Instant::now();
        let r = f();
        best = best.min(t.elapsed().as_secs_f64());
        out = Some(r);
    }
    (out.expect("repeat >= 1"), best)
}

fn main() {
    let mut text = String::new();
    std::io::stdin()
        .read_to_string(&mut text)
        .expect("reading stdin");
    let doc: Value = serde_json::from_str(&text).expect("input is not JSON");
    let mut settings = FitSettings::default();
    if let Some(t) = doc["tolerance"].as_f64() {
        settings = settings.with_tolerance(t);
    }
    if let Some(n) = doc["starts"].as_u64() {
        settings = settings.with_starts(n as usize);
    }
    if let Some(on) = doc["arc_moves"].as_bool() {
        settings = settings.with_arc_moves(on);
    }
    if let Some(on) = doc["drt_starts"].as_bool() {
        settings = settings.with_drt_starts(on);
    }
    let repeat = doc["repeat"].as_u64().unwrap_or(1).max(1) as usize;
    let mut out = Vec::new();
    for (k, case) in doc["cases"]
        .as_array()
        .expect("no `cases` array")
        .iter()
        .enumerate()
    {
        let mut circuit = parse(case["model"].as_str().expect("no model text")).expect("bad model");
        for p in &mut circuit.params {
            p.initial = None;
        }
        let z: Vec<Complex64> = floats(&case["z_real_ohm"], "z_real_ohm")
            .into_iter()
            .zip(floats(&case["z_imag_ohm"], "z_imag_ohm"))
            .map(|(re, im)| Complex64::new(re, im))
            .collect();
        let spectrum = Spectrum::new(floats(&case["frequency_hz"], "frequency_hz"), z);
        let mut res = Map::new();
        if doc["auto"].as_bool().unwrap_or(true) {
            let (r, seconds) = timed(repeat, || {
                fit(&circuit, &spectrum, &settings, None)
                    .unwrap_or_else(|e| panic!("case {k}: {e}"))
            });
            res.insert("auto".into(), entry(&r, seconds));
        }
        if let Some(starts) = case["starts"].as_object() {
            for (name, s) in starts {
                let s = floats(s, name);
                let (r, seconds) = timed(repeat, || {
                    fit_from(&circuit, &spectrum, &settings, &s)
                        .unwrap_or_else(|e| panic!("case {k}, start {name}: {e}"))
                });
                res.insert(name.clone(), entry(&r, seconds));
            }
        }
        out.push(Value::Object(res));
    }
    println!("{}", json!({ "results": out }));
}
