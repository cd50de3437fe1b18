//! `eis plot`: Nyquist, Bode, overlay, residual, DRT and trend plots as SVG or PNG.
//!
//! Spectra are read with [`crate::io::read_spectra`]. Residuals, DRT, trends and `--fit` curves are
//! read from JSON in the shapes below (each parsed by one small function, so the shapes can follow the
//! fit, DRT and trend outputs when those land). Numbers may be `null` for a missing value.
//!
//! ```text
//! curve (--fit):  {"label": "fit", "frequency_hz": [..], "z_real_ohm": [..], "z_imag_ohm": [..]}
//! residuals:      {"frequency_hz": [..], "re_rel": [..], "im_rel": [..], "band": 0.01}
//! drt:            {"tau_s": [..], "gamma_ohm": [..], "peaks": [{"tau_s": 1e-3, "gamma_ohm": 0.02, "label": "SEI"}]}
//! trend:          {"x_label": "cycle", "x_unit": "", "y_label": "Rct", "y_unit": "Ω",
//!                  "cells": [{"cell": "A1", "points": [{"x": 1, "y": 0.012, "y_err": 0.0004, "flagged": false}]}]}
//! ```
//! `label`, `band`, `peaks` (found automatically when absent), `x_unit`, `y_err` and `flagged` are
//! optional; relative residuals are fractions (0.01 = 1 %).

use crate::io::{Failure, Outcome, bad, read_spectra, write_atomic};
use crate::plot::{
    self, BodePlot, DrtPlot, Format, NyquistPlot, OverlayPlot, OverlaySpectrum, Plot, ResidualPlot,
    SeriesData, TrendPlot,
};
use anyhow::anyhow;
use eis_core::Spectrum;
use num_complex::Complex64;
use serde::Deserialize;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// What to draw.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Kind {
    /// Z′ against −Z″, equal scaling, arc frequencies marked.
    Nyquist,
    /// |Z| and phase against frequency.
    Bode,
    /// Relative residuals against frequency.
    Residuals,
    /// γ against τ.
    Drt,
    /// Many spectra in one Nyquist plot, coloured by a metadata field.
    Overlay,
    /// A quantity against cycle or SOC per cell.
    Trend,
}

/// Output format.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum FormatArg {
    /// Scalable vector graphics.
    Svg,
    /// Portable network graphics.
    Png,
}

/// Draw plots of spectra, fits, residuals, DRTs and trends as SVG or PNG.
#[derive(clap::Args)]
#[command(
    after_help = "JSON inputs (residuals, drt, trend, --fit) are described in `eis plot` docs:
  curve:     {\"label\", \"frequency_hz\", \"z_real_ohm\", \"z_imag_ohm\"}
  residuals: {\"frequency_hz\", \"re_rel\", \"im_rel\", \"band\"?}
  drt:       {\"tau_s\", \"gamma_ohm\", \"peaks\"?: [{\"tau_s\", \"gamma_ohm\", \"label\"?}]}
  trend:     {\"x_label\", \"x_unit\"?, \"y_label\", \"y_unit\", \"cells\": [{\"cell\", \"points\": [{\"x\", \"y\", \"y_err\"?, \"flagged\"?}]}]}

Examples:
  eis simulate --model 'R0 + Rct|Qdl' --set R0=20m --set Rct=15m --set Qdl.Q=2 -o cell.csv
  eis plot cell.csv -o cell-nyquist.svg
  eis plot cell.csv --kind bode --format png -o cell-bode.png
  eis plot soc-*.csv --kind overlay --color-by soc -o overlay.png
  eis plot drt.json --kind drt -o drt.svg"
)]
pub struct Args {
    /// Input files: spectra for nyquist, bode and overlay; one JSON file for residuals, drt and trend
    /// (or a spectrum with --fit for residuals).
    #[arg(required = true, value_name = "INPUT")]
    inputs: Vec<PathBuf>,
    /// Kind of plot.
    #[arg(long, value_enum, default_value = "nyquist")]
    kind: Kind,
    /// Model curve (JSON) drawn as a line over the data; with --kind residuals the residuals of the
    /// spectrum against it (same frequencies) are drawn.
    #[arg(long, value_name = "RESULT.json")]
    fit: Option<PathBuf>,
    /// Metadata field that colours an overlay (soc, cycle, temperature, ...); default: file order.
    #[arg(long, value_name = "FIELD")]
    color_by: Option<String>,
    /// Output format (default: from the extension of --output, else svg).
    #[arg(long, value_enum)]
    format: Option<FormatArg>,
    /// Output file.
    #[arg(long, short)]
    output: PathBuf,
    /// Title on top (default: from the kind and input; "" for none).
    #[arg(long)]
    title: Option<String>,
    /// Width in pixels.
    #[arg(allow_negative_numbers = true, long, default_value_t = plot::DEFAULT_SIZE.0, value_parser = clap::value_parser!(u32).range(100..=10000))]
    width: u32,
    /// Height in pixels.
    #[arg(allow_negative_numbers = true, long, default_value_t = plot::DEFAULT_SIZE.1, value_parser = clap::value_parser!(u32).range(100..=10000))]
    height: u32,
    /// With --kind trend: the quantity to draw (a results column, e.g. ohmic_resistance_ohm), needed
    /// when the report of `eis trend --json` holds more than one.
    #[arg(long, value_name = "NAME")]
    quantity: Option<String>,
    /// Do not mark the characteristic frequencies of arcs (Nyquist) or peaks (DRT).
    #[arg(long)]
    no_marks: bool,
    #[command(flatten)]
    reader: crate::reader_args::ReaderArgs,
}

/// Runs the command.
pub fn run(args: Args) -> Outcome {
    if args.color_by.is_some() && args.kind != Kind::Overlay {
        return Err(bad(anyhow!("--color-by applies to --kind overlay")));
    }
    let mut inputs = args.inputs.clone();
    if let Some(f) = &args.fit {
        inputs.push(f.clone());
    }
    let plot = build(&args)?;
    let format = match args.format {
        Some(FormatArg::Svg) => Some(Format::Svg),
        Some(FormatArg::Png) => Some(Format::Png),
        None => None,
    };
    if let (Some(asked), Some(by_name)) = (format, Format::from_extension(&args.output)) {
        if asked != by_name {
            eprintln!(
                "warning: writing {asked:?} to {}, whose extension says {by_name:?}",
                args.output.display()
            );
        }
    }
    write_plot(
        &plot,
        &args.output,
        format,
        (args.width, args.height),
        &inputs,
    )?;
    Ok(ExitCode::SUCCESS)
}

/// Renders `plot` and writes it atomically to `path` (never over one of `inputs`). The format is
/// `format`, else the extension of `path`, else SVG. Other commands' `--plot` options call this.
pub fn write_plot(
    plot: &Plot,
    path: &Path,
    format: Option<Format>,
    (width, height): (u32, u32),
    inputs: &[PathBuf],
) -> Result<(), Failure> {
    let format = format
        .or_else(|| Format::from_extension(path))
        .unwrap_or(Format::Svg);
    let bytes = plot::render(plot, format, width, height).map_err(|e| match e {
        plot::PlotError::Size { .. } => bad(anyhow!("{e}")),
        _ => Failure::Failed(anyhow!("cannot draw {}: {e}", path.display())),
    })?;
    write_atomic(path, &bytes, inputs)
}

fn build(args: &Args) -> Result<Plot, Failure> {
    let title = |default: String| args.title.clone().unwrap_or(default);
    match args.kind {
        Kind::Nyquist | Kind::Bode => {
            let spectra = read_all(&args.inputs, &args.reader.options()?)?;
            let fit = args.fit.as_deref().map(read_curve).transpose()?;
            let single = spectra.len() == 1;
            let mut series: Vec<SeriesData> = spectra
                .iter()
                .map(|(name, s)| {
                    let label = if single && fit.is_none() {
                        String::new()
                    } else {
                        name.clone()
                    };
                    SeriesData::markers(label, s.frequency_hz.clone(), s.z.clone())
                })
                .collect();
            let subject = if single {
                spectra[0].0.clone()
            } else {
                format!("{} spectra", spectra.len())
            };
            if args.kind == Kind::Bode {
                series.extend(fit);
                return Ok(Plot::Bode(BodePlot {
                    title: title(format!("Bode plot: {subject}")),
                    series,
                }));
            }
            let annotations = if args.no_marks {
                Vec::new()
            } else if let Some(f) = &fit {
                plot::arc_apexes(&f.freq, &f.z)
            } else if single {
                plot::arc_apexes(&spectra[0].1.frequency_hz, &spectra[0].1.z)
            } else {
                Vec::new()
            };
            series.extend(fit);
            Ok(Plot::Nyquist(NyquistPlot {
                title: title(format!("Nyquist plot: {subject}")),
                series,
                annotations,
            }))
        }
        Kind::Overlay => {
            let spectra = read_all(&args.inputs, &args.reader.options()?)?;
            let (values, label) = colour_values(&spectra, args.color_by.as_deref());
            let by = args
                .color_by
                .as_deref()
                .map_or("file order".to_owned(), str::to_owned);
            Ok(Plot::Overlay(OverlayPlot {
                title: title(format!(
                    "Nyquist overlay: {} spectra by {by}",
                    spectra.len()
                )),
                spectra: spectra
                    .into_iter()
                    .zip(values)
                    .map(|((name, s), value)| OverlaySpectrum {
                        label: name,
                        freq: s.frequency_hz,
                        z: s.z,
                        value,
                    })
                    .collect(),
                colorbar_label: label,
            }))
        }
        Kind::Residuals => {
            let input = one_input(args)?;
            let mut r = match &args.fit {
                Some(fit) => residuals_against(input, fit, &args.reader.options()?)?,
                None => parse_residuals(&read_text(input)?).map_err(|e| json_error(input, e))?,
            };
            if r.title.is_empty() {
                r.title = format!("Residuals: {}", stem(input));
            }
            r.title = title(r.title);
            Ok(Plot::Residuals(r))
        }
        Kind::Drt => {
            let input = one_input(args)?;
            let mut d = parse_drt(&read_text(input)?).map_err(|e| json_error(input, e))?;
            if args.no_marks {
                d.peaks.clear();
            }
            d.title = title(format!("Distribution of relaxation times: {}", stem(input)));
            Ok(Plot::Drt(d))
        }
        Kind::Trend => {
            let input = one_input(args)?;
            let mut t = parse_trend(&read_text(input)?, args.quantity.as_deref())
                .map_err(|e| json_error(input, e))?;
            t.title = title(std::mem::take(&mut t.title));
            Ok(Plot::Trend(t))
        }
    }
}

fn one_input(args: &Args) -> Result<&Path, Failure> {
    match args.inputs.as_slice() {
        [one] => Ok(one),
        _ => Err(bad(anyhow!(
            "--kind {:?} takes one input file, got {}",
            args.kind,
            args.inputs.len()
        ))),
    }
}

fn stem(path: &Path) -> String {
    path.file_stem().map_or_else(
        || path.display().to_string(),
        |s| s.to_string_lossy().into_owned(),
    )
}

fn read_text(path: &Path) -> Result<String, Failure> {
    std::fs::read_to_string(path).map_err(|e| bad(anyhow!("cannot read {}: {e}", path.display())))
}

fn json_error(path: &Path, e: anyhow::Error) -> Failure {
    bad(anyhow!("{}: {e:#}", path.display()))
}

/// Reads every spectrum of every input, named by file stem (and number within the file).
fn read_all(
    inputs: &[PathBuf],
    options: &eis_core::import::ReaderOptions,
) -> Result<Vec<(String, Spectrum)>, Failure> {
    let mut out = Vec::new();
    // A plot can show even a single point.
    let options = &eis_core::import::ReaderOptions {
        min_points: 1,
        ..options.clone()
    };
    for path in inputs {
        let spectra = read_spectra(path, options)?;
        let many = spectra.len() > 1;
        for s in spectra {
            let name = if many {
                format!("{} #{}", stem(path), s.meta.spectrum)
            } else {
                stem(path)
            };
            if s.is_empty() {
                eprintln!("warning: {name} holds no points");
            }
            out.push((name, s));
        }
    }
    if out.iter().all(|(_, s)| s.is_empty()) {
        return Err(bad(anyhow!("the input holds no impedance points to plot")));
    }
    Ok(out)
}

/// Colour values for an overlay from metadata field `field`, falling back to file order (1, 2, ...)
/// when it is not given or not a number in every spectrum. Returns the values and the bar title.
fn colour_values(spectra: &[(String, Spectrum)], field: Option<&str>) -> (Vec<f64>, String) {
    let order = || {
        (
            (1..=spectra.len()).map(|i| i as f64).collect(),
            "spectrum (file order)".to_owned(),
        )
    };
    let Some(field) = field else { return order() };
    let values: Option<Vec<f64>> = spectra
        .iter()
        .map(|(_, s)| s.meta.get(field).and_then(|v| v.as_f64()))
        .collect();
    match values {
        Some(v) => (v, field_label(field)),
        None => {
            let missing: Vec<&str> = spectra
                .iter()
                .filter(|(_, s)| s.meta.get(field).and_then(|v| v.as_f64()).is_none())
                .map(|(n, _)| n.as_str())
                .collect();
            eprintln!(
                "warning: field `{field}` is missing or not a number in {}; colouring by file order",
                missing.join(", ")
            );
            order()
        }
    }
}

/// The colour-bar title for a metadata field, with the unit the trade uses for the common ones.
fn field_label(field: &str) -> String {
    match field.to_ascii_lowercase().as_str() {
        "soc" => "SOC / %".into(),
        "temperature" | "temp" | "temperature_c" => "temperature / °C".into(),
        "cycle" => "cycle".into(),
        _ => field.to_owned(),
    }
}

/// A JSON number array where `null` stands for a missing value (NaN).
fn numbers(v: Vec<Option<f64>>) -> Vec<f64> {
    v.into_iter().map(|x| x.unwrap_or(f64::NAN)).collect()
}

fn same_len(what: &str, lens: &[(&str, usize)]) -> anyhow::Result<()> {
    let Some(&(first_name, first)) = lens.first() else {
        return Ok(());
    };
    for (name, n) in lens {
        if *n != first {
            return Err(anyhow!(
                "{what}: `{name}` has {n} values but `{first_name}` has {first}"
            ));
        }
    }
    Ok(())
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct CurveJson {
    #[serde(default)]
    label: Option<String>,
    frequency_hz: Vec<Option<f64>>,
    z_real_ohm: Vec<Option<f64>>,
    z_imag_ohm: Vec<Option<f64>>,
}

/// Parses a model curve: `{"label", "frequency_hz", "z_real_ohm", "z_imag_ohm"}`.
fn parse_curve(text: &str) -> anyhow::Result<SeriesData> {
    let c: CurveJson = serde_json::from_str(text)?;
    same_len(
        "curve",
        &[
            ("frequency_hz", c.frequency_hz.len()),
            ("z_real_ohm", c.z_real_ohm.len()),
            ("z_imag_ohm", c.z_imag_ohm.len()),
        ],
    )?;
    let z = numbers(c.z_real_ohm)
        .into_iter()
        .zip(numbers(c.z_imag_ohm))
        .map(|(re, im)| Complex64::new(re, im))
        .collect();
    Ok(SeriesData::line(
        c.label.unwrap_or_else(|| "fit".into()),
        numbers(c.frequency_hz),
        z,
    ))
}

fn read_curve(path: &Path) -> Result<SeriesData, Failure> {
    parse_curve(&read_text(path)?).map_err(|e| json_error(path, e))
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct ResidualJson {
    #[serde(default)]
    title: Option<String>,
    frequency_hz: Vec<Option<f64>>,
    re_rel: Vec<Option<f64>>,
    im_rel: Vec<Option<f64>>,
    #[serde(default)]
    band: Option<f64>,
}

/// Parses residuals: `{"frequency_hz", "re_rel", "im_rel", "band"?}` (fractions).
fn parse_residuals(text: &str) -> anyhow::Result<ResidualPlot> {
    let r: ResidualJson = serde_json::from_str(text)?;
    same_len(
        "residuals",
        &[
            ("frequency_hz", r.frequency_hz.len()),
            ("re_rel", r.re_rel.len()),
            ("im_rel", r.im_rel.len()),
        ],
    )?;
    Ok(ResidualPlot {
        title: r.title.unwrap_or_default(),
        freq: numbers(r.frequency_hz),
        re_rel: numbers(r.re_rel),
        im_rel: numbers(r.im_rel),
        band: r.band,
    })
}

/// Relative residuals (data − model) / |model| of the spectrum in `data` against the curve in
/// `fit`, which must list the same frequencies.
fn residuals_against(
    data: &Path,
    fit: &Path,
    options: &eis_core::import::ReaderOptions,
) -> Result<ResidualPlot, Failure> {
    let spectra = read_spectra(data, options)?;
    let [s] = spectra.as_slice() else {
        return Err(bad(anyhow!(
            "{}: residuals need exactly one spectrum",
            data.display()
        )));
    };
    let model = read_curve(fit)?;
    let matches = model.freq.len() == s.len()
        && model
            .freq
            .iter()
            .zip(&s.frequency_hz)
            .all(|(a, b)| (a - b).abs() <= 1e-6 * a.abs().max(b.abs()));
    if !matches {
        return Err(bad(anyhow!(
            "{} is not evaluated at the {} frequencies of {}",
            fit.display(),
            s.len(),
            data.display()
        )));
    }
    let (re, im) =
        s.z.iter()
            .zip(&model.z)
            .map(|(d, m)| {
                let scale = m.norm();
                ((d.re - m.re) / scale, (d.im - m.im) / scale)
            })
            .unzip();
    Ok(ResidualPlot {
        title: String::new(),
        freq: s.frequency_hz.clone(),
        re_rel: re,
        im_rel: im,
        band: None,
    })
}

/// A DRT peak as `eis drt --json` writes it (other fields are read past).
#[derive(Deserialize)]
struct DrtPeakJson {
    tau_s: f64,
    gamma_ohm: f64,
    #[serde(default)]
    resistance_ohm: Option<f64>,
}

/// The parts of `eis drt --json` a plot needs (other fields are read past): the curve, the peak table
/// and the peaks at the window edge.
#[derive(Deserialize)]
struct DrtJson {
    tau_s: Vec<Option<f64>>,
    gamma_ohm: Vec<Option<f64>>,
    #[serde(default)]
    peaks: Option<Vec<DrtPeakJson>>,
    #[serde(default)]
    edge_peaks: Vec<DrtPeakJson>,
}

/// Parses what `eis drt --json` writes; without a `peaks` list the peaks are found by the library's
/// rule ([`eis_core::drt::find_peaks`]).
fn parse_drt(text: &str) -> anyhow::Result<DrtPlot> {
    let d: DrtJson = serde_json::from_str(text)?;
    same_len(
        "drt",
        &[("tau_s", d.tau_s.len()), ("gamma_ohm", d.gamma_ohm.len())],
    )?;
    let (tau, gamma) = (numbers(d.tau_s), numbers(d.gamma_ohm));
    Ok(match d.peaks {
        Some(p) => plot::build::drt_curve(
            String::new(),
            tau,
            gamma,
            p.iter()
                .map(|p| (p.tau_s, p.gamma_ohm, p.resistance_ohm.unwrap_or(f64::NAN))),
            d.edge_peaks.iter().map(|p| (p.tau_s, p.gamma_ohm)),
        ),
        None => {
            let peaks = plot::drt_peaks(&tau, &gamma);
            DrtPlot {
                title: String::new(),
                tau,
                gamma,
                peaks,
            }
        }
    })
}

/// One series of `eis trend --json` (other fields are read past).
#[derive(Deserialize)]
struct TrendSeriesJson {
    cell: String,
    #[serde(default)]
    soc: Option<f64>,
    quantity: String,
    x: Vec<Option<f64>>,
    y: Vec<Option<f64>>,
    #[serde(default)]
    y_stderr: Vec<Option<f64>>,
    #[serde(default)]
    flagged: Vec<usize>,
}

/// The parts of `eis trend --json` a plot needs.
#[derive(Deserialize)]
struct TrendJson {
    x_name: String,
    series: Vec<TrendSeriesJson>,
}

/// Parses what `eis trend --json` writes and draws quantity `q` (needed when the report holds more
/// than one).
fn parse_trend(text: &str, q: Option<&str>) -> anyhow::Result<TrendPlot> {
    let t: TrendJson = serde_json::from_str(text)?;
    let mut names: Vec<&str> = Vec::new();
    for s in &t.series {
        if !names.contains(&s.quantity.as_str()) {
            names.push(&s.quantity);
        }
    }
    let q = match (q, names.as_slice()) {
        (Some(q), _) if names.contains(&q) => q.to_owned(),
        (Some(q), _) => anyhow::bail!("no trend of `{q}` here; it holds {}", names.join(", ")),
        (None, [one]) => (*one).to_owned(),
        (None, []) => anyhow::bail!("the trend report holds no series"),
        (None, _) => anyhow::bail!(
            "the trend report holds {} quantities; choose one with --quantity ({})",
            names.len(),
            names.join(", ")
        ),
    };
    let series = t
        .series
        .iter()
        .filter(|s| s.quantity == q)
        .map(|s| {
            same_len("trend", &[("x", s.x.len()), ("y", s.y.len())])?;
            Ok(plot::build::trend_series(
                eis_core::trend::series_label(&s.cell, s.soc),
                &numbers(s.x.clone()),
                &numbers(s.y.clone()),
                &s.y_stderr,
                &s.flagged,
            ))
        })
        .collect::<anyhow::Result<Vec<_>>>()?;
    Ok(plot::build::trend_of(&t.x_name, &q, series))
}

#[cfg(test)]
mod tests {
    use super::*;
    use eis_core::spectrum::MetaValue;

    #[test]
    fn curve_json_with_nulls_and_length_check() {
        let c = parse_curve(
            r#"{"frequency_hz": [10, 1], "z_real_ohm": [1, null], "z_imag_ohm": [-1, -2]}"#,
        )
        .unwrap();
        assert_eq!(c.label, "fit");
        assert!(c.z[1].re.is_nan());
        let e = parse_curve(r#"{"frequency_hz": [10], "z_real_ohm": [1, 2], "z_imag_ohm": [1]}"#)
            .unwrap_err()
            .to_string();
        assert!(e.contains("`z_real_ohm` has 2 values"), "{e}");
        assert!(parse_curve(r#"{"frequency_hz": [], "z_real_ohm": [], "z_imag": []}"#).is_err());
    }

    #[test]
    fn drt_peaks_found_when_absent() {
        let tau: Vec<f64> = (0..41)
            .map(|k| 10f64.powf(-5.0 + k as f64 * 0.15))
            .collect();
        let gamma: Vec<f64> = tau
            .iter()
            .map(|t| {
                (-(t.log10() + 3.0).powi(2) * 4.0).exp()
                    + 0.5 * (-(t.log10() + 0.5).powi(2) * 4.0).exp()
            })
            .collect();
        let text = serde_json::json!({"tau_s": tau, "gamma_ohm": gamma}).to_string();
        let d = parse_drt(&text).unwrap();
        assert_eq!(d.peaks.len(), 2, "{:?}", d.peaks);
        assert!((d.peaks[0].tau.log10() + 3.0).abs() < 0.1);
    }

    #[test]
    fn trend_json() {
        // The shape `eis trend --json` writes (series with cell, soc, quantity, x, y, y_stderr,
        // flagged; other fields read past).
        let text = r#"{"x_name": "cycle", "flags": [], "series": [
            {"cell": "A1", "soc": 50, "quantity": "charge_transfer_resistance_ohm", "x": [1, 2],
             "y": [0.01, null], "y_stderr": [0.001, null], "slope": null, "flagged": [1]},
            {"cell": "A1", "soc": 50, "quantity": "ohmic_resistance_ohm", "x": [1], "y": [0.02],
             "y_stderr": [null], "flagged": []}]}"#;
        let t = parse_trend(text, Some("charge_transfer_resistance_ohm")).unwrap();
        assert_eq!(t.series.len(), 1);
        assert_eq!(t.series[0].label, "A1 @ SOC 50");
        assert_eq!(t.series[0].points.len(), 2);
        assert!(t.series[0].points[1].flagged && t.series[0].points[1].y.is_nan());
        assert_eq!(t.series[0].points[0].y_err, Some(0.001));
        let e = parse_trend(text, None).unwrap_err().to_string();
        assert!(e.contains("--quantity"), "{e}");
        let e = parse_trend(text, Some("nope")).unwrap_err().to_string();
        assert!(e.contains("no trend of `nope`"), "{e}");
    }

    #[test]
    fn colour_by_field_and_fallback() {
        let mk = |soc: Option<f64>| {
            let mut s = Spectrum::new(vec![1.0], vec![Complex64::new(1.0, -1.0)]);
            if let Some(v) = soc {
                s.meta.set("soc", MetaValue::Number(v));
            }
            ("x".to_owned(), s)
        };
        let (v, label) = colour_values(&[mk(Some(20.0)), mk(Some(80.0))], Some("soc"));
        assert_eq!(v, [20.0, 80.0]);
        assert_eq!(label, "SOC / %");
        let (v, label) = colour_values(&[mk(Some(20.0)), mk(None)], Some("soc"));
        assert_eq!(v, [1.0, 2.0]);
        assert!(label.contains("file order"));
    }
}
