//! Campaigns end to end on the invented demo scenario (eis_core::scenario): `eis batch`, `eis trend`,
//! `eis report` and `eis demo`. The scenario plants a contact problem in Z2 (ohmic resistance from
//! cycle 150), an interface film in Z3 (from cycle 100), a soft short in Z4 (from cycle 250), a corrupt
//! file and a drifting spectrum; Z1 and Z5 are healthy.

use eis_tests::{eis, scratch, write_file};
use serde_json::Value;
use std::path::Path;
use std::process::Command;

fn write_campaign(dir: &Path) {
    std::fs::create_dir_all(dir.join("raw")).unwrap();
    for f in eis_core::scenario::files() {
        std::fs::write(dir.join("raw").join(&f.name), &f.bytes).unwrap();
    }
    write_file(dir, "model.circ", eis_core::scenario::MODEL_FILE);
}

fn batch_args(out: &str) -> Vec<String> {
    [
        "batch",
        "raw",
        "--model",
        "model.circ",
        "--out",
        out,
        "--name-pattern",
        eis_core::scenario::NAME_PATTERN,
    ]
    .map(String::from)
    .to_vec()
}

fn run_batch(dir: &Path, out: &str, extra: &[&str]) -> eis_tests::Run {
    let mut a = batch_args(out);
    a.extend(extra.iter().map(|s| s.to_string()));
    let refs: Vec<&str> = a.iter().map(String::as_str).collect();
    eis(dir, &refs)
}

#[test]
fn batch_trend_and_report_find_the_planted_faults() {
    let dir = scratch("campaign_main");
    write_campaign(&dir);
    // The corrupt file makes the exit status 1; everything else is fitted.
    let run = run_batch(&dir, "out", &[]).expect_code(1);
    run.expect_stderr("195 spectra");

    // results.csv opens with a standard CSV reader and has the documented columns.
    let mut rdr = csv::Reader::from_path(dir.join("out/results.csv")).unwrap();
    let header: Vec<String> = rdr.headers().unwrap().iter().map(String::from).collect();
    for col in [
        "file",
        "spectrum",
        "cell",
        "cycle",
        "soc",
        "status",
        "message",
        "kk_valid",
        "ohmic_resistance_ohm",
        "ohmic_resistance_ohm_stderr",
        "charge_transfer_resistance_ohm",
        "charge_transfer_resistance_ohm_stderr",
        "diffusion_resistance_ohm",
        "diffusion_resistance_ohm_stderr",
        "dc_resistance_ohm",
        "dc_resistance_ohm_stderr",
        "R0",
        "R0_stderr",
        "Qdl.n",
        "Qdl.n_stderr",
        "reduced_chi_square",
    ] {
        assert!(
            header.contains(&col.to_string()),
            "column {col} in {header:?}"
        );
    }
    let rows: Vec<csv::StringRecord> = rdr.records().map(Result::unwrap).collect();
    assert_eq!(rows.len(), 195);
    let col = |name: &str| header.iter().position(|h| h == name).unwrap();
    let failed: Vec<&csv::StringRecord> = rows
        .iter()
        .filter(|r| &r[col("status")] == "failed")
        .collect();
    assert_eq!(failed.len(), 1);
    assert!(failed[0][col("file")].ends_with("Z5_c175_soc50.csv"));
    assert!(
        failed[0][col("message")].contains("line"),
        "the error names the line: {}",
        &failed[0][col("message")]
    );
    let kk_bad: Vec<&csv::StringRecord> = rows
        .iter()
        .filter(|r| &r[col("kk_valid")] == "false")
        .collect();
    assert_eq!(
        kk_bad.len(),
        1,
        "only the drifting spectrum fails the check"
    );
    assert!(kk_bad[0][col("file")].ends_with("Z1_c200_soc50.csv"));
    assert_eq!(
        rows.iter().filter(|r| &r[col("status")] == "ok").count(),
        193
    );

    // Trends: the right cell, quantity and roughly the right onset; nothing on the healthy cells.
    let run = eis(
        &dir,
        &["trend", "out/results.csv", "--x", "cycle", "--json"],
    )
    .expect_code(1);
    let t: Value = serde_json::from_str(&run.stdout).unwrap();
    let flags = t["flags"].as_array().unwrap();
    let of = |cell: &str, kind: &str| -> Vec<&Value> {
        flags
            .iter()
            .filter(|f| f["cell"].as_str().unwrap().starts_with(cell) && f["kind"] == kind)
            .collect()
    };
    let ohmic = of("Z2", "ohmic-growth");
    assert_eq!(ohmic.len(), 3, "Z2 at every SOC level");
    for f in &ohmic {
        assert_eq!(f["quantity"], "ohmic_resistance_ohm");
        let onset = f["onset_x"].as_f64().unwrap();
        assert!(
            (100.0..=175.0).contains(&onset),
            "onset {onset} near cycle 150"
        );
    }
    let film = of("Z3", "interface-growth");
    assert!(film.len() >= 3);
    assert!(
        film.iter()
            .any(|f| f["quantity"] == "arc_Rf_resistance_ohm")
    );
    for f in &film {
        let onset = f["onset_x"].as_f64().unwrap();
        assert!(
            (75.0..=125.0).contains(&onset),
            "onset {onset} near cycle 100"
        );
    }
    let short = of("Z4", "possible-soft-short");
    assert_eq!(short.len(), 3);
    for f in &short {
        assert_eq!(f["onset_x"].as_f64().unwrap(), 250.0);
    }
    for healthy in ["Z1", "Z5"] {
        let own: Vec<&Value> = flags
            .iter()
            .filter(|f| {
                f["cell"].as_str().unwrap().starts_with(healthy)
                    && f["kind"] != "invalid-measurement"
            })
            .collect();
        assert!(own.is_empty(), "healthy cell {healthy} flagged: {own:?}");
    }
    for f in flags {
        assert!(
            f["explanation"]
                .as_str()
                .unwrap()
                .contains("not a safety verdict")
        );
    }
    assert!(of("Z1", "invalid-measurement").len() == 1);
    for key in [
        "cell",
        "quantity",
        "x",
        "y",
        "y_stderr",
        "change_percent",
        "slope",
        "slope_stderr",
    ] {
        assert!(t["series"][0].get(key).is_some(), "series key {key}");
    }
    assert!(dir.join("out/trends.csv").is_file());

    // The report is one self-contained HTML file naming every cell and flagged spectrum.
    eis(
        &dir,
        &[
            "report",
            "out",
            "--model",
            "model.circ",
            "--name-pattern",
            eis_core::scenario::NAME_PATTERN,
        ],
    )
    .expect_code(0);
    let html = std::fs::read_to_string(dir.join("out/report.html")).unwrap();
    assert!(html.starts_with("<!DOCTYPE html>") && html.trim_end().ends_with("</html>"));
    for tag in ["html", "body", "table"] {
        assert_eq!(
            html.matches(&format!("<{tag}")).count(),
            html.matches(&format!("</{tag}>")).count(),
            "balanced <{tag}>"
        );
    }
    // (The SVG namespace URI is a name, not something fetched.)
    for outside in [
        "<script",
        "href=\"http",
        "url(http",
        "src=",
        "@import",
        "<link",
    ] {
        assert!(
            !html.contains(outside),
            "report must not need anything from outside ({outside})"
        );
    }
    assert!(html.contains("<svg"));
    for cell in ["Z1", "Z2", "Z3", "Z4", "Z5"] {
        assert!(
            html.contains(&format!("Cell {cell}")),
            "report mentions {cell}"
        );
    }
    for file in ["Z1_c200_soc50.csv", "Z5_c175_soc50.csv"] {
        assert!(html.contains(file), "report mentions {file}");
    }
    assert!(html.contains("not safety verdicts"));
}

#[test]
fn interrupted_batch_resumes_to_the_same_results() {
    let dir = scratch("campaign_resume");
    write_campaign(&dir);
    run_batch(&dir, "whole", &["--jobs", "2"]).expect_code(1);
    // Start a second run, kill it once its journal holds some results, then resume.
    let args = batch_args("cut");
    let mut child = Command::new(eis_tests::eis_bin())
        .args(&args)
        .args(["--jobs", "2"])
        .current_dir(&dir)
        .stderr(std::process::Stdio::null())
        .spawn()
        .unwrap();
    let journal = dir.join("cut").join(eis_core::campaign::JOURNAL);
    let t0 = std::time::Instant::now();
    loop {
        let lines = std::fs::read_to_string(&journal)
            .map(|s| s.lines().count())
            .unwrap_or(0);
        if lines >= 20 || t0.elapsed().as_secs() > 120 {
            break;
        }
        if child.try_wait().unwrap().is_some() {
            break;
        }
        std::thread::sleep(std::time::Duration::from_millis(20));
    }
    let _ = child.kill();
    let _ = child.wait();
    // The interrupted run never left a half-written results file.
    if let Ok(text) = std::fs::read_to_string(dir.join("cut/results.jsonl")) {
        assert!(text.is_empty() || text.ends_with('\n'));
    }
    let run = run_batch(&dir, "cut", &["--jobs", "2", "--resume"]).expect_code(1);
    assert!(
        run.stderr.contains("already done") || !journal.exists(),
        "{}",
        run.stderr
    );
    let a = std::fs::read_to_string(dir.join("whole/results.jsonl")).unwrap();
    let b = std::fs::read_to_string(dir.join("cut/results.jsonl")).unwrap();
    assert_eq!(a.lines().count(), 195);
    assert!(a == b, "resumed results differ from the uninterrupted run");
    assert_eq!(
        std::fs::read_to_string(dir.join("whole/results.csv")).unwrap(),
        std::fs::read_to_string(dir.join("cut/results.csv")).unwrap()
    );
    assert!(
        !journal.exists(),
        "the journal is removed once results are written"
    );
}

/// Warm starts along a smooth series reach the same optima as cold fits with fewer evaluations.
/// Measured on the demo campaign: the same χ² (to 1e-6) for about 93 % of the spectra, within 10 %
/// for nearly all the rest (flat valleys of the poorly determined film arc at the window edge), at about
/// an eighth of the evaluations.
#[test]
fn warm_starts_save_evaluations_without_changing_results() {
    let dir = scratch("campaign_warm");
    write_campaign(&dir);
    run_batch(&dir, "warm", &["--plot", "plots"]).expect_code(1);
    run_batch(&dir, "cold", &["--no-warm-start"]).expect_code(1);
    // Trend plots were written on request, as PNG.
    let png = std::fs::read(dir.join("plots/trend_ohmic_resistance_ohm.png")).unwrap();
    assert_eq!(&png[..8], b"\x89PNG\r\n\x1a\n");
    let load = |name: &str| -> Vec<Value> {
        std::fs::read_to_string(dir.join(name).join("results.jsonl"))
            .unwrap()
            .lines()
            .map(|l| serde_json::from_str(l).unwrap())
            .collect()
    };
    let (w, c) = (load("warm"), load("cold"));
    let mut evals = (0u64, 0u64);
    let mut same = 0;
    let mut close = 0;
    let mut compared = 0;
    for (a, b) in w.iter().zip(&c) {
        assert_eq!(a["file"], b["file"]);
        if a["fit"].is_null() || b["fit"].is_null() {
            continue;
        }
        compared += 1;
        let chi = |d: &Value| d["fit"]["statistics"]["chi_square"].as_f64().unwrap();
        evals.0 += a["fit"]["statistics"]["evaluations"].as_u64().unwrap();
        evals.1 += b["fit"]["statistics"]["evaluations"].as_u64().unwrap();
        if (chi(a) - chi(b)).abs() <= 1e-6 * chi(b) {
            same += 1;
        }
        if chi(a) <= 1.1 * chi(b) {
            close += 1;
        }
    }
    eprintln!(
        "warm {} vs cold {} evaluations; same optimum in {same} of {compared}",
        evals.0, evals.1
    );
    assert!(
        same as f64 >= 0.9 * compared as f64,
        "same optimum in {same} of {compared}"
    );
    assert!(
        close as f64 >= 0.97 * compared as f64,
        "within 10 % in {close} of {compared}"
    );
    assert!(
        evals.0 * 3 < evals.1,
        "warm {} vs cold {}",
        evals.0,
        evals.1
    );
}

#[test]
fn demo_runs_the_whole_pipeline() {
    let dir = scratch("campaign_demo");
    let run = eis(&dir, &["demo", "--out", "d"]).expect_code(0);
    let out = &run.stdout;
    assert!(out.contains("ohmic resistance growing): Z2"), "{out}");
    assert!(out.contains("arc resistance growing):    Z3"), "{out}");
    assert!(
        out.contains("total resistance collapsing):         Z4"),
        "{out}"
    );
    assert!(
        out.contains("Z1_c200_soc50.csv") && out.contains("Z5_c175_soc50.csv"),
        "{out}"
    );
    for f in [
        "d/results/results.csv",
        "d/results/report.html",
        "d/results/trends.csv",
        "d/plots/Z3_overlay_soc50.png",
    ] {
        assert!(dir.join(f).is_file(), "{f}");
    }
    let png = std::fs::read(dir.join("d/plots/Z3_c300_soc50_fit.png")).unwrap();
    assert_eq!(&png[..8], b"\x89PNG\r\n\x1a\n");
}

/// `--share`: every chain of a cell and SOC level fitted at once with the lead inductance and the CPE
/// exponents common to it (the scenario keeps them constant per cell). One row per spectrum; the shared
/// values are the same along each chain and named in the last column; `--share-by cell` makes one
/// chain per cell; a name the circuit does not have is a usage error.
#[test]
fn shared_parameters_are_fitted_per_chain() {
    let dir = scratch("campaign_share");
    write_campaign(&dir);
    run_batch(&dir, "plain", &[]).expect_code(1);
    run_batch(&dir, "shared", &["--share", "L0,Qf.n,Qdl.n"]).expect_code(1);
    let read = |name: &str| {
        let mut rd = csv::Reader::from_path(dir.join(name).join("results.csv")).unwrap();
        let head = rd.headers().unwrap().clone();
        let rows: Vec<csv::StringRecord> = rd.records().map(|r| r.unwrap()).collect();
        (head, rows)
    };
    let (plain_head, plain) = read("plain");
    let (head, rows) = read("shared");
    assert_eq!(rows.len(), plain.len());
    assert!(!plain_head.iter().any(|h| h == "shared"));
    assert_eq!(head.iter().next_back(), Some("shared"));
    let col = |n: &str| head.iter().position(|h| h == n).unwrap();
    let (cell, soc, status) = (col("cell"), col("soc"), col("status"));
    let mut per_chain: std::collections::BTreeMap<(String, String), Vec<f64>> = Default::default();
    let mut fitted = 0;
    for r in &rows {
        if &r[status] == "failed" {
            continue;
        }
        fitted += 1;
        assert_eq!(&r[col("shared")], "L0;Qf.n;Qdl.n");
        assert!(!r[col("Qf.n_stderr")].is_empty(), "{r:?}");
        let v: f64 = r[col("Qf.n")].parse().unwrap();
        per_chain
            .entry((r[cell].to_owned(), r[soc].to_owned()))
            .or_default()
            .push(v);
    }
    assert!(fitted >= 190, "{fitted}");
    for (k, v) in &per_chain {
        assert!(v.iter().all(|x| x == &v[0]), "{k:?}: {v:?}");
        // The scenario's film exponent is 0.9 in every cell (eis_core::scenario, invented data).
        if k.0 != "Z4" {
            assert!((v[0] - 0.9).abs() < 0.01, "{k:?}: {}", v[0]);
        }
    }
    // --share-by cell: one chain per cell across its SOC levels, one shared value per cell.
    run_batch(&dir, "bycell", &["--share", "Qf.n", "--share-by", "cell"]).expect_code(1);
    let (head, rows) = read("bycell");
    let col = |n: &str| head.iter().position(|h| h == n).unwrap();
    let mut per_cell: std::collections::BTreeMap<String, Vec<f64>> = Default::default();
    for r in rows.iter().filter(|r| &r[col("status")] != "failed") {
        let v: f64 = r[col("Qf.n")].parse().unwrap();
        per_cell
            .entry(r[col("cell")].to_owned())
            .or_default()
            .push(v);
    }
    assert_eq!(per_cell.len(), 5);
    for (k, v) in &per_cell {
        assert!(v.len() >= 38 && v.iter().all(|x| x == &v[0]), "{k}: {v:?}");
    }
    let run = run_batch(&dir, "bad", &["--share", "Qx.n"]).expect_code(2);
    run.expect_stderr("`Qx.n` is not a parameter");
}

#[test]
fn batch_bad_usage_exits_2() {
    let dir = scratch("campaign_bad");
    write_file(
        &dir,
        "a.csv",
        "frequency_hz,z_real_ohm,z_imag_ohm\n1,1,-1\n",
    );
    let run = eis(
        &dir,
        &["batch", "nothing*.csv", "--model", "R0", "--out", "o"],
    )
    .expect_code(2);
    run.expect_stderr("no file matches");
    let run = eis(
        &dir,
        &["batch", "a.csv", "--model", "R0 + X1", "--out", "o"],
    )
    .expect_code(2);
    run.expect_stderr("unknown element kind");
    let run = eis(&dir, &["trend", "missing.csv"]).expect_code(2);
    run.expect_stderr("missing.csv");
}

/// The demo fits the lead inductance once per cell (a property of the cell and its fixture, not of a
/// state of charge; common practice) and reports identifiability grouped over the campaign instead
/// of one warning row per fit (issue 16).
#[test]
fn demo_shares_the_lead_inductance_and_groups_its_advice() {
    let dir = scratch("demo-shared");
    let run = eis(&dir, &["demo", "--out", "d"]).expect_code(0);
    assert!(
        run.stdout.contains("Lead inductance, fitted jointly"),
        "{}",
        run.stdout
    );
    assert!(
        run.stdout.contains("strongly correlated in"),
        "{}",
        run.stdout
    );
    let report = std::fs::read_to_string(dir.join("d/results/report.html")).unwrap();
    assert!(report.contains("Parameters shared along chains"));
    assert!(report.contains("<h2>Identifiability</h2>"));
    assert!(
        !report.contains("Fits with warnings"),
        "no per-fit warning rows"
    );
    // One row per spectrum; within a cell, every row carries the same L0.
    let mut rdr = csv::Reader::from_path(dir.join("d/results/results.csv")).unwrap();
    let header = rdr.headers().unwrap().clone();
    let col = |name: &str| header.iter().position(|h| h == name).unwrap();
    let (cell, l0, shared) = (col("cell"), col("L0"), col("shared"));
    let mut per_cell: std::collections::BTreeMap<String, f64> = Default::default();
    for row in rdr.records().map(Result::unwrap) {
        if row[shared].is_empty() {
            continue; // the unreadable file's row
        }
        assert_eq!(&row[shared], "L0");
        let v: f64 = row[l0].parse().unwrap();
        let first = *per_cell.entry(row[cell].to_owned()).or_insert(v);
        assert_eq!(first, v, "cell {}: one L0", &row[cell]);
    }
    assert_eq!(per_cell.len(), 5);
}
