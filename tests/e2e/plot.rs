//! `eis plot`: valid SVG and PNG, equal Nyquist scaling read back from the drawn SVG, colour bars on
//! overlays, JSON inputs, odd data and exit codes. Inputs come from `eis simulate`.

use eis_core::testing::slope;
use eis_tests::{eis, read_canonical, scratch, write_file};
use std::path::Path;

/// A text element of the SVG: position, anchor, vertical shift and content.
#[derive(Debug)]
struct SvgText {
    x: f64,
    y: f64,
    anchor: String,
    dy: String,
    transform: Option<String>,
    text: String,
}

fn attr(tag: &str, name: &str) -> Option<String> {
    let key = format!(" {name}=\"");
    let i = tag.find(&key)? + key.len();
    let j = tag[i..].find('"')? + i;
    Some(tag[i..j].to_owned())
}

/// Every element `<name ...>` (opening tag text, without `<` and `>`).
fn tags<'a>(svg: &'a str, name: &str) -> Vec<&'a str> {
    let open = format!("<{name} ");
    svg.match_indices(&open)
        .map(|(i, _)| {
            let j = svg[i..].find('>').expect("closed tag") + i;
            &svg[i + 1..j]
        })
        .collect()
}

fn texts(svg: &str) -> Vec<SvgText> {
    let mut out = Vec::new();
    for (i, _) in svg.match_indices("<text ") {
        let j = svg[i..].find('>').unwrap() + i;
        let k = svg[j..].find("</text>").unwrap() + j;
        let tag = &svg[i..j];
        out.push(SvgText {
            x: attr(tag, "x").unwrap().parse().unwrap(),
            y: attr(tag, "y").unwrap().parse().unwrap(),
            anchor: attr(tag, "text-anchor").unwrap_or_default(),
            dy: attr(tag, "dy").unwrap_or_default(),
            transform: attr(tag, "transform"),
            text: svg[j + 1..k].trim().to_owned(),
        });
    }
    out
}

/// A tick label as a number (true minus signs allowed).
fn number(text: &str) -> Option<f64> {
    text.replace('\u{2212}', "-").parse().ok()
}

/// Ω (in the displayed unit) per pixel along x and y, from the tick labels' positions and values.
fn units_per_pixel_from_ticks(svg: &str) -> (f64, f64) {
    let t = texts(svg);
    // x tick labels hang below the axis, centred; the lowest row of numbers is the x axis.
    let xt: Vec<&SvgText> = t
        .iter()
        .filter(|t| t.anchor == "middle" && t.dy == "0.76em" && number(&t.text).is_some())
        .collect();
    let bottom = xt.iter().map(|t| t.y).fold(f64::MIN, f64::max);
    let xt: Vec<&SvgText> = xt.into_iter().filter(|t| t.y == bottom).collect();
    // y tick labels are right-aligned and vertically centred on their tick.
    let yt: Vec<&SvgText> = t
        .iter()
        .filter(|t| t.anchor == "end" && t.dy == "0.5ex" && number(&t.text).is_some())
        .collect();
    assert!(xt.len() >= 3 && yt.len() >= 3, "ticks: {xt:?} {yt:?}");
    let kx = slope(
        &xt.iter().map(|t| t.x).collect::<Vec<_>>(),
        &xt.iter()
            .map(|t| number(&t.text).unwrap())
            .collect::<Vec<_>>(),
    );
    let ky = slope(
        &yt.iter().map(|t| t.y).collect::<Vec<_>>(),
        &yt.iter()
            .map(|t| number(&t.text).unwrap())
            .collect::<Vec<_>>(),
    );
    (kx, ky)
}

fn simulate_cell(dir: &Path, name: &str, rct: &str) {
    let rct = format!("Rct={rct}");
    eis(
        dir,
        &[
            "simulate",
            "--model",
            "R0 + Rf|Qf + Rct|Qdl",
            "--set",
            "R0=20m",
            "--set",
            "Rf=8m",
            "--set",
            "Qf.Q=100m",
            "--set",
            &rct,
            "--set",
            "Qdl.Q=20",
            "--fmin",
            "0.01",
            "--fmax",
            "10k",
            "-o",
            name,
        ],
    )
    .expect_code(0);
}

fn read(dir: &Path, name: &str) -> String {
    std::fs::read_to_string(dir.join(name)).unwrap()
}

/// The texts of the SVG `name` in `dir`, in document order.
fn words(dir: &Path, name: &str) -> Vec<String> {
    texts(&read(dir, name))
        .into_iter()
        .map(|t| t.text)
        .collect()
}

fn assert_png(path: &Path, width: u32, height: u32) {
    let b = std::fs::read(path).unwrap();
    assert_eq!(&b[..8], b"\x89PNG\r\n\x1a\n", "png signature");
    assert_eq!(&b[12..16], b"IHDR");
    let w = u32::from_be_bytes(b[16..20].try_into().unwrap());
    let h = u32::from_be_bytes(b[20..24].try_into().unwrap());
    assert_eq!((w, h), (width, height));
}

fn assert_svg(text: &str) {
    assert!(
        text.starts_with("<svg "),
        "{}",
        &text[..text.len().min(200)]
    );
    assert!(text.trim_end().ends_with("</svg>"));
    assert_eq!(
        text.matches("<text ").count(),
        text.matches("</text>").count()
    );
}

#[test]
fn nyquist_svg_axes_have_equal_scaling() {
    let dir = scratch("plot-equal");
    simulate_cell(&dir, "cell.csv", "30m");
    for (w, h) in [("900", "650"), ("500", "900"), ("1400", "500")] {
        eis(
            &dir,
            &[
                "plot", "cell.csv", "--width", w, "--height", h, "-o", "n.svg",
            ],
        )
        .expect_code(0);
        let svg = read(&dir, "n.svg");
        assert_svg(&svg);
        let t = texts(&svg);
        assert!(
            t.iter().any(|t| t.text == "Z′ / mΩ"),
            "x title with SI prefix"
        );
        assert!(
            t.iter().any(|t| t.text == "−Z″ / mΩ"),
            "y title with the same unit"
        );
        // From the tick labels: mΩ per pixel rightwards and upwards.
        let (kx, ky) = units_per_pixel_from_ticks(&svg);
        assert!(
            kx > 0.0 && ky < 0.0,
            "Z′ grows rightwards, −Z″ upwards: {kx} {ky}"
        );
        assert!(
            (kx / -ky - 1.0).abs() < 0.01,
            "{w}×{h}: {kx} vs {ky} mΩ per pixel"
        );
        // From the drawn data points against the simulated values.
        let data = read_canonical(&read(&dir, "cell.csv"));
        let dots: Vec<(f64, f64)> = tags(&svg, "circle")
            .into_iter()
            .filter(|c| attr(c, "fill").is_some_and(|f| f != "none"))
            .map(|c| {
                (
                    attr(c, "cx").unwrap().parse().unwrap(),
                    attr(c, "cy").unwrap().parse().unwrap(),
                )
            })
            .collect();
        assert_eq!(dots.len(), data.len(), "one marker per point");
        let re: Vec<f64> = data.iter().map(|d| d.1).collect();
        let im: Vec<f64> = data.iter().map(|d| -d.2).collect();
        let px = slope(&re, &dots.iter().map(|d| d.0).collect::<Vec<_>>());
        let py = slope(&im, &dots.iter().map(|d| d.1).collect::<Vec<_>>());
        assert!(
            (px / -py - 1.0).abs() < 0.01,
            "{w}×{h}: {px} vs {py} pixels per Ω"
        );
        assert!((px * kx * 1e-3 - 1.0).abs() < 0.01, "ticks and data agree");
    }
}

#[test]
fn nyquist_marks_characteristic_frequencies() {
    let dir = scratch("plot-marks");
    simulate_cell(&dir, "cell.csv", "30m");
    eis(&dir, &["plot", "cell.csv", "-o", "n.svg"]).expect_code(0);
    let marks: Vec<String> = words(&dir, "n.svg")
        .into_iter()
        .filter(|t| t.ends_with("Hz"))
        .collect();
    assert_eq!(marks.len(), 2, "{marks:?}");
    eis(&dir, &["plot", "cell.csv", "--no-marks", "-o", "n2.svg"]).expect_code(0);
    assert!(
        !texts(&read(&dir, "n2.svg"))
            .iter()
            .any(|t| t.text.ends_with(" Hz"))
    );
}

#[test]
fn png_by_flag_and_by_extension() {
    let dir = scratch("plot-png");
    simulate_cell(&dir, "cell.csv", "30m");
    eis(&dir, &["plot", "cell.csv", "-o", "n.png"]).expect_code(0);
    assert_png(&dir.join("n.png"), 900, 650);
    eis(
        &dir,
        &[
            "plot", "cell.csv", "--kind", "bode", "--format", "png", "--width", "640", "--height",
            "480", "-o", "b.img",
        ],
    )
    .expect_code(0);
    assert_png(&dir.join("b.img"), 640, 480);
}

#[test]
fn bode_has_both_panels_with_units() {
    let dir = scratch("plot-bode");
    simulate_cell(&dir, "cell.csv", "30m");
    eis(&dir, &["plot", "cell.csv", "--kind", "bode", "-o", "b.svg"]).expect_code(0);
    let t = words(&dir, "b.svg");
    for want in [
        "|Z| / mΩ",
        "−φ / °",
        "frequency / Hz",
        "10⁰",
        "Bode plot: cell",
    ] {
        assert!(t.iter().any(|x| x == want), "{want} in {t:?}");
    }
}

#[test]
fn overlay_has_a_colour_bar() {
    let dir = scratch("plot-overlay");
    let names: Vec<String> = (0..6).map(|k| format!("s{k}.csv")).collect();
    for (k, n) in names.iter().enumerate() {
        simulate_cell(&dir, n, &format!("{}m", 20 + 5 * k));
    }
    let mut args = vec!["plot", "--kind", "overlay", "-o", "o.svg"];
    args.extend(names.iter().map(String::as_str));
    eis(&dir, &args).expect_code(0);
    let svg = read(&dir, "o.svg");
    assert_svg(&svg);
    // The bar: a column of filled swatches of many colours, right of the axes.
    let swatches: Vec<(String, String)> = tags(&svg, "rect")
        .into_iter()
        .filter_map(|r| {
            let fill = attr(r, "fill")?;
            (fill != "none" && fill != "#FFFFFF").then(|| (attr(r, "x").unwrap(), fill))
        })
        .collect();
    assert!(swatches.len() >= 50, "{} swatches", swatches.len());
    assert!(swatches.iter().all(|s| s.0 == swatches[0].0), "one column");
    let colours: std::collections::HashSet<&String> = swatches.iter().map(|s| &s.1).collect();
    assert!(colours.len() >= 30, "{} colours", colours.len());
    let t = texts(&svg);
    let label = t
        .iter()
        .find(|t| t.text == "spectrum (file order)")
        .expect("bar title");
    assert!(
        label
            .transform
            .as_deref()
            .is_some_and(|r| r.starts_with("rotate(270"))
    );
    assert!(label.x > swatches[0].0.parse::<f64>().unwrap());
    // Each spectrum drawn in its own colour of the map.
    let lines: std::collections::HashSet<String> = tags(&svg, "polyline")
        .into_iter()
        .filter_map(|p| attr(p, "stroke"))
        .collect();
    assert!(lines.len() >= 6 + 2, "{lines:?}");
}

#[test]
fn colour_by_a_missing_field_falls_back_to_file_order() {
    let dir = scratch("plot-colour-by");
    simulate_cell(&dir, "a.csv", "20m");
    simulate_cell(&dir, "b.csv", "40m");
    let run = eis(
        &dir,
        &[
            "plot",
            "a.csv",
            "b.csv",
            "--kind",
            "overlay",
            "--color-by",
            "soc",
            "-o",
            "o.svg",
        ],
    )
    .expect_code(0);
    run.expect_stderr("colouring by file order");
    eis(&dir, &["plot", "a.csv", "--color-by", "soc", "-o", "n.svg"]).expect_code(2);
}

#[test]
fn residuals_against_a_fit_curve() {
    let dir = scratch("plot-residuals");
    let model = [
        "simulate",
        "--model",
        "R0 + Rct|Qdl",
        "--set",
        "R0=20m",
        "--set",
        "Rct=30m",
        "--set",
        "Qdl.Q=2",
    ];
    eis(
        &dir,
        &[&model[..], &["--noise", "0.004", "-o", "data.csv"]].concat(),
    )
    .expect_code(0);
    eis(&dir, &[&model[..], &["-o", "model.csv"]].concat()).expect_code(0);
    let m = read_canonical(&read(&dir, "model.csv"));
    let fit = serde_json::json!({
        "label": "fit: R0 + Rct|Qdl",
        "frequency_hz": m.iter().map(|r| r.0).collect::<Vec<_>>(),
        "z_real_ohm": m.iter().map(|r| r.1).collect::<Vec<_>>(),
        "z_imag_ohm": m.iter().map(|r| r.2).collect::<Vec<_>>(),
    });
    write_file(&dir, "fit.json", fit.to_string());
    eis(
        &dir,
        &[
            "plot",
            "data.csv",
            "--fit",
            "fit.json",
            "--kind",
            "residuals",
            "-o",
            "r.svg",
        ],
    )
    .expect_code(0);
    let t = words(&dir, "r.svg");
    assert!(t.iter().any(|x| x == "relative residual / %"), "{t:?}");
    // The fit as a line over the data, with a legend below the axes.
    eis(
        &dir,
        &["plot", "data.csv", "--fit", "fit.json", "-o", "n.svg"],
    )
    .expect_code(0);
    let svg = read(&dir, "n.svg");
    assert!(texts(&svg).iter().any(|x| x.text == "fit: R0 + Rct|Qdl"));
    // Residuals written as JSON, with a band.
    write_file(
        &dir,
        "res.json",
        r#"{"frequency_hz": [1000, 100, 10, 1], "re_rel": [0.001, -0.002, null, 0.003], "im_rel": [0.0, 0.001, 0.002, -0.001], "band": 0.005}"#,
    );
    eis(
        &dir,
        &["plot", "res.json", "--kind", "residuals", "-o", "r2.png"],
    )
    .expect_code(0);
    eis(
        &dir,
        &["plot", "res.json", "--kind", "residuals", "-o", "r2.svg"],
    )
    .expect_code(0);
    assert!(read(&dir, "r2.svg").contains("Kramers–Kronig band ±0.5 %"));
    // A curve at other frequencies cannot give residuals.
    write_file(
        &dir,
        "short.json",
        r#"{"frequency_hz": [1], "z_real_ohm": [1], "z_imag_ohm": [0]}"#,
    );
    eis(
        &dir,
        &[
            "plot",
            "data.csv",
            "--fit",
            "short.json",
            "--kind",
            "residuals",
            "-o",
            "x.svg",
        ],
    )
    .expect_code(2);
}

#[test]
fn drt_and_trend_from_json() {
    let dir = scratch("plot-drt-trend");
    let tau: Vec<f64> = (0..81).map(|k| 10f64.powf(-6.0 + 0.1 * k as f64)).collect();
    let gamma: Vec<f64> = tau
        .iter()
        .map(|t| {
            0.004 * (-4.0 * (t.log10() + 4.0).powi(2)).exp()
                + 0.012 * (-3.0 * (t.log10() + 1.0).powi(2)).exp()
        })
        .collect();
    write_file(
        &dir,
        "drt.json",
        serde_json::json!({"tau_s": tau, "gamma_ohm": gamma}).to_string(),
    );
    eis(&dir, &["plot", "drt.json", "--kind", "drt", "-o", "d.svg"]).expect_code(0);
    let t = words(&dir, "d.svg");
    assert!(
        t.iter().any(|x| x == "γ / mΩ") && t.iter().any(|x| x == "τ / s"),
        "{t:?}"
    );
    assert!(
        t.iter().any(|x| x == "τ = 100 µs") && t.iter().any(|x| x == "τ = 100 ms"),
        "{t:?}"
    );
    std::fs::write(
        dir.join("trend.json"),
        // The shape of `eis trend --json`.
        r#"{"x_name": "cycle", "flags": [], "series": [
            {"cell": "A1", "quantity": "charge_transfer_resistance_ohm", "x": [0, 100, 200],
             "y": [0.012, 0.014, 0.016], "y_stderr": [0.0002, 0.0002, null], "flagged": [1]},
            {"cell": "A2", "quantity": "charge_transfer_resistance_ohm", "x": [0, 100, 200],
             "y": [0.011, 0.0125, null], "y_stderr": [null, null, null], "flagged": []}]}"#,
    )
    .unwrap();
    eis(
        &dir,
        &["plot", "trend.json", "--kind", "trend", "-o", "t.svg"],
    )
    .expect_code(0);
    let t = words(&dir, "t.svg");
    for want in [
        "charge transfer resistance / mΩ",
        "cycle",
        "A1",
        "A2",
        "flagged",
        "±1 standard error",
    ] {
        assert!(t.iter().any(|x| x == want), "{want} in {t:?}");
    }
    eis(
        &dir,
        &["plot", "trend.json", "--kind", "trend", "-o", "t.png"],
    )
    .expect_code(0);
}

#[test]
fn odd_spectra_plot_without_panicking() {
    let dir = scratch("plot-odd");
    let head = "frequency_hz,z_real_ohm,z_imag_ohm\n";
    write_file(&dir, "one.csv", format!("{head}1000,0.01,-0.002\n"));
    write_file(
        &dir,
        "nan.csv",
        format!("{head}1000,NaN,-0.002\n100,0.02,inf\n10,0.03,-0.01\n-5,0.04,-0.02\n"),
    );
    write_file(&dir, "same.csv", format!("{head}1000,1,0\n100,1,0\n"));
    eis(
        &dir,
        &[
            "simulate",
            "--model",
            "R0 + L0",
            "--set",
            "R0=1m",
            "--set",
            "L0=1u",
            "-o",
            "inductive.csv",
        ],
    )
    .expect_code(0);
    eis(
        &dir,
        &[
            "simulate",
            "--model",
            "R0 + Rct|C",
            "--set",
            "R0=1m",
            "--set",
            "Rct=1G",
            "--set",
            "C=1p",
            "--fmin",
            "1e-6",
            "--fmax",
            "1e9",
            "-o",
            "huge.csv",
        ],
    )
    .expect_code(0);
    for input in [
        "one.csv",
        "nan.csv",
        "same.csv",
        "inductive.csv",
        "huge.csv",
    ] {
        for kind in ["nyquist", "bode", "overlay"] {
            eis(&dir, &["plot", input, "--kind", kind, "-o", "x.svg"]).expect_code(0);
            assert_svg(&read(&dir, "x.svg"));
            eis(
                &dir,
                &[
                    "plot", input, "--kind", kind, "-o", "x.png", "--width", "300", "--height",
                    "200",
                ],
            )
            .expect_code(0);
            assert_png(&dir.join("x.png"), 300, 200);
        }
    }
    eis(
        &dir,
        &[
            "plot",
            "one.csv",
            "inductive.csv",
            "huge.csv",
            "--kind",
            "overlay",
            "-o",
            "all.svg",
        ],
    )
    .expect_code(0);
    write_file(&dir, "empty-drt.json", r#"{"tau_s": [], "gamma_ohm": []}"#);
    eis(
        &dir,
        &["plot", "empty-drt.json", "--kind", "drt", "-o", "d.svg"],
    )
    .expect_code(0);
    assert!(read(&dir, "d.svg").contains("no finite DRT values to show"));
}

#[test]
fn bad_input_exits_2_and_never_overwrites_an_input() {
    let dir = scratch("plot-bad");
    write_file(&dir, "empty.csv", "frequency_hz,z_real_ohm,z_imag_ohm\n");
    eis(&dir, &["plot", "empty.csv", "-o", "x.svg"]).expect_code(2);
    eis(&dir, &["plot", "missing.csv", "-o", "x.svg"]).expect_code(2);
    write_file(&dir, "bad.json", r#"{"tau_s": [1, 2], "gamma_ohm": [1]}"#);
    let run = eis(&dir, &["plot", "bad.json", "--kind", "drt", "-o", "x.svg"]).expect_code(2);
    run.expect_stderr("`gamma_ohm` has 1 values");
    eis(
        &dir,
        &[
            "plot", "bad.json", "bad.json", "--kind", "drt", "-o", "x.svg",
        ],
    )
    .expect_code(2);
    eis(&dir, &["plot", "bad.json", "--kind", "pie", "-o", "x.svg"]).expect_code(2);
    eis(&dir, &["plot", "empty.csv", "--width", "5", "-o", "x.svg"]).expect_code(2);
    simulate_cell(&dir, "cell.csv", "30m");
    let before = read(&dir, "cell.csv");
    eis(&dir, &["plot", "cell.csv", "-o", "cell.csv"]).expect_code(2);
    assert_eq!(read(&dir, "cell.csv"), before, "input untouched");
    assert!(!dir.join("x.svg").exists(), "nothing written on bad input");
}

#[test]
fn help_shows_an_example() {
    let dir = scratch("plot-help");
    let run = eis(&dir, &["plot", "--help"]).expect_code(0);
    assert!(
        run.stdout.contains("Examples:") && run.stdout.contains("eis plot cell.csv"),
        "{}",
        run.stdout
    );
}

/// `eis plot` reads exactly the documents `eis drt --json` and `eis trend --json` write (issue 14): no
/// hand-made intermediate shape, and the DRT plot marks the peaks the DRT reported.
#[test]
fn plot_reads_what_drt_and_trend_write() {
    let dir = scratch("plot-reads-json");
    eis(&dir, &["demo", "--out", "d"]).expect_code(0);
    let spectrum = "d/converted/Z1_c000_soc50_1.csv";
    let drt = eis(&dir, &["drt", spectrum, "--json"]).expect_code(0);
    write_file(&dir, "drt.json", &drt.stdout);
    eis(
        &dir,
        &["plot", "drt.json", "--kind", "drt", "-o", "drt.svg"],
    )
    .expect_code(0);
    let svg = std::fs::read_to_string(dir.join("drt.svg")).unwrap();
    let doc: serde_json::Value = serde_json::from_str(&drt.stdout).unwrap();
    let edge = doc["edge_peaks"].as_array().map_or(0, Vec::len);
    assert_eq!(
        svg.matches("window edge").count(),
        edge,
        "every edge peak of the document marked, no other"
    );

    let trend = eis(
        &dir,
        &["trend", "d/results/results.csv", "--x", "cycle", "--json"],
    );
    assert!(trend.code == 0 || trend.code == 1, "{}", trend.stderr);
    write_file(&dir, "trend.json", &trend.stdout);
    // More than one quantity: the plot asks which.
    let run = eis(
        &dir,
        &["plot", "trend.json", "--kind", "trend", "-o", "t.svg"],
    )
    .expect_code(2);
    run.expect_stderr("--quantity");
    eis(
        &dir,
        &[
            "plot",
            "trend.json",
            "--kind",
            "trend",
            "--quantity",
            "ohmic_resistance_ohm",
            "-o",
            "t.svg",
        ],
    )
    .expect_code(0);
    let svg = std::fs::read_to_string(dir.join("t.svg")).unwrap();
    // One legend entry per series of that quantity in the document (cell and SOC level).
    let series = doc_series(&trend.stdout, "ohmic_resistance_ohm");
    assert!(series > 1);
    assert!(
        svg.contains("Z1 @ SOC 50"),
        "legend names cell and SOC level"
    );
}

fn doc_series(text: &str, q: &str) -> usize {
    let doc: serde_json::Value = serde_json::from_str(text).unwrap();
    doc["series"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|s| s["quantity"] == q)
        .count()
}
