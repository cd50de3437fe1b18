//! `eis drt` on spectra that `eis simulate` writes.

use eis_tests::{eis, scratch, simulate, write_spectra};

/// An RC element's DRT is R·δ(ln τ − ln RC): one peak at τ = RC holding R (by the definition of the DRT,
/// Z = R∞ + ∫ γ(ln τ)/(1 + jωτ) d ln τ; common practice).
#[test]
fn drt_of_an_rc_reports_one_peak_as_json_and_csv() {
    let dir = scratch("drt-rc");
    simulate(
        &dir,
        "R0 + R1|C1",
        &["R0=5", "R1=50", "C1=20u"],
        &[
            "--fmin", "0.1", "--fmax", "100k", "--noise", "0.002", "--seed", "3",
        ],
        "rc.csv",
    );
    let run = eis(&dir, &["drt", "rc.csv", "--json", "-o", "rc-drt.csv"]).expect_code(0);
    let v: serde_json::Value = serde_json::from_str(&run.stdout).expect("JSON on stdout");
    for key in [
        "lambda",
        "r_inf_ohm",
        "r_pol_ohm",
        "tau_s",
        "gamma_ohm",
        "peaks",
    ] {
        assert!(v.get(key).is_some(), "missing `{key}` in {}", run.stdout);
    }
    let peaks = v["peaks"].as_array().unwrap();
    assert_eq!(peaks.len(), 1, "{peaks:?}");
    let tau = peaks[0]["tau_s"].as_f64().unwrap();
    let r = peaks[0]["resistance_ohm"].as_f64().unwrap();
    let f = peaks[0]["frequency_hz"].as_f64().unwrap();
    assert!((tau / 1e-3 - 1.0).abs() < 0.03, "τ = {tau}");
    assert!((r / 50.0 - 1.0).abs() < 0.02, "R = {r}");
    assert!((f * 2.0 * std::f64::consts::PI * tau - 1.0).abs() < 1e-9);
    assert!((v["r_inf_ohm"].as_f64().unwrap() / 5.0 - 1.0).abs() < 0.02);
    assert_eq!(
        v["tau_s"].as_array().unwrap().len(),
        v["gamma_ohm"].as_array().unwrap().len()
    );

    let csv = std::fs::read_to_string(dir.join("rc-drt.csv")).unwrap();
    let mut lines = csv.lines();
    assert_eq!(lines.next(), Some("tau_s,frequency_hz,gamma_ohm"));
    let rows: Vec<Vec<f64>> = lines
        .map(|l| l.split(',').map(|x| x.parse().unwrap()).collect())
        .collect();
    assert_eq!(rows.len(), v["tau_s"].as_array().unwrap().len());
    assert!(rows.iter().all(|r| r.len() == 3 && r[2] >= 0.0));
    assert!(rows.windows(2).all(|w| w[0][0] < w[1][0]), "τ ascending");
}

#[test]
fn drt_summary_and_options() {
    let dir = scratch("drt-options");
    simulate(
        &dir,
        "R0 + R1|C1 + R2|C2",
        &["R0=2", "R1=40", "C1=250n", "R2=20", "C2=50u"],
        &["--fmin", "0.1", "--fmax", "100k"],
        "two.csv",
    );
    let run = eis(&dir, &["drt", "two.csv"]).expect_code(0);
    assert!(run.stdout.contains("peaks        2"), "{}", run.stdout);
    for extra in [
        &["--lambda", "1e-4"][..],
        &["--lambda-method", "lcurve"],
        &["--penalty", "1"],
        &["--part", "imag"],
        &["--part", "real", "--inductance"],
    ] {
        let mut args = vec!["drt", "two.csv", "--json"];
        args.extend_from_slice(extra);
        let run = eis(&dir, &args).expect_code(0);
        let v: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
        assert_eq!(v["peaks"].as_array().unwrap().len(), 2, "{extra:?}");
    }
}

#[test]
fn drt_bad_input_exits_with_2() {
    let dir = scratch("drt-bad");
    write_spectra(
        &dir,
        &[
            ("short.csv", "100,1,-1\n10,2,-1\n1,3,-0.5\n"),
            (
                "zero.csv",
                "1000,1,-1\n100,1,-1\n10,0,0\n1,3,-0.5\n0.1,3,-0.1\n",
            ),
        ],
    );
    for (file, message) in [
        ("missing.csv", "missing.csv: cannot read"),
        ("short.csv", "needs at least 5"),
        // The reader drops the zero point with a warning naming its line; four points are then too
        // few.
        (
            "zero.csv",
            "zero.csv: warning: dropped 1 row: line 4: impedance is zero",
        ),
    ] {
        let run = eis(&dir, &["drt", file]).expect_code(2);
        assert!(run.stderr.contains(message), "{file}: {}", run.stderr);
    }
    eis(&dir, &["drt", "zero.csv", "--penalty", "3"]).expect_code(2);
    eis(&dir, &["drt", "zero.csv", "--lambda", "-1"]).expect_code(2);
    let run = eis(&dir, &["drt", "zero.csv", "--json", "-o", "-"]).expect_code(2);
    run.expect_stderr("stdout");
    let help = eis(&dir, &["drt", "--help"]).expect_code(0);
    assert!(help.stdout.contains("Examples:") && help.stdout.contains("eis drt"));
}

#[test]
fn drt_writes_a_plot_when_asked() {
    let dir = scratch("drt-plot");
    simulate(&dir, "R0 + R1|C1", &["R1=50", "C1=2u"], &[], "s.csv");
    eis(&dir, &["drt", "s.csv", "--plot", "drt.svg"]).expect_code(0);
    let svg = std::fs::read_to_string(dir.join("drt.svg")).unwrap();
    assert!(svg.starts_with("<svg") || svg.starts_with("<?xml"));
    assert!(svg.contains("</svg>"));
}

/// The value of a plot label such as `2.54 Ω` or `332 mΩ`, in Ω.
fn ohms(label: &str) -> Option<f64> {
    let number = label.strip_suffix("Ω")?.trim_end();
    let (digits, scale) = match number.chars().last()? {
        'm' => (&number[..number.len() - 1], 1e-3),
        'µ' | 'u' => (number.trim_end_matches(['µ', 'u']), 1e-6),
        'k' => (&number[..number.len() - 1], 1e3),
        'M' => (&number[..number.len() - 1], 1e6),
        _ => (number, 1.0),
    };
    digits.trim().parse::<f64>().ok().map(|v| v * scale)
}

/// The plot of `eis drt` marks exactly the peaks it reports: one label per peak of the table holding
/// its resistance, one "window edge" mark per peak at the edge, nothing else. Three RC arcs, the third
/// with τ = 3 s beyond the lowest frequency (0.1 Hz, τ = 1.6 s): for ideal RC arcs the DRT is
/// R·δ(ln τ − ln RC) (common practice), so the first two are resolved and the third piles γ at the
/// window edge.
#[test]
fn drt_plot_marks_exactly_the_reported_peaks() {
    let dir = scratch("drt-plot-peaks");
    simulate(
        &dir,
        "R0 + R1|C1 + R2|C2 + R3|C3",
        &[
            "R0=5", "R1=20", "C1=0.5u", "R2=50", "C2=20u", "R3=40", "C3=75m",
        ],
        &["--fmin", "0.1", "--fmax", "100k"],
        "s.csv",
    );
    let run = eis(&dir, &["drt", "s.csv", "--json", "--plot", "drt.svg"]).expect_code(0);
    let v: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
    let table: Vec<f64> = v["peaks"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| p["resistance_ohm"].as_f64().unwrap())
        .collect();
    let edge = v["edge_peaks"].as_array().unwrap();
    assert_eq!(table.len(), 2, "{}", run.stdout);
    assert_eq!(edge.len(), 1, "{}", run.stdout);
    assert_eq!(edge[0]["at_window_edge"], true);
    let svg = std::fs::read_to_string(dir.join("drt.svg")).unwrap();
    let texts: Vec<String> = svg
        .split("<text")
        .skip(1)
        .filter_map(|t| {
            let body = &t[t.find('>')? + 1..];
            Some(body[..body.find("</text>")?].trim().to_owned())
        })
        .collect();
    let labels: Vec<f64> = texts
        .iter()
        .filter(|t| t.as_str() != "γ / Ω")
        .filter_map(|t| ohms(t))
        .collect();
    assert_eq!(labels.len(), table.len(), "{texts:?}");
    for (label, r) in labels.iter().zip(&table) {
        assert!(
            (label / r - 1.0).abs() < 0.006,
            "label {label} Ω for a {r} Ω peak"
        );
    }
    assert_eq!(
        texts.iter().filter(|t| t.as_str() == "window edge").count(),
        edge.len(),
        "{texts:?}"
    );
    // The text output keeps the edge peak out of the table and says why.
    let text = eis(&dir, &["drt", "s.csv"]).expect_code(0).stdout;
    assert!(text.contains("peaks        2"), "{text}");
    // JSON and text give the residual in the same unit, named in the key.
    let rms = v["residual_rms_percent"].as_f64().unwrap();
    assert!(
        text.contains(&format!("rms residual {rms:.3} % of |Z|")),
        "{rms} vs {text}"
    );
    assert!(
        text.contains("at the window edge, produced by a process beyond the data"),
        "{text}"
    );
}
