//! `eis drt`: the distribution of relaxation times of a spectrum.

use crate::io::{Failure, Outcome, bad, read_spectra, write_output};
use anyhow::anyhow;
use eis_core::drt::{
    DEFAULT_PEAK_THRESHOLD, DrtOptions, DrtResult, LambdaMethod, Part, Penalty, drt,
};
use eis_core::number::{format_float, format_si};
use std::path::PathBuf;
use std::process::ExitCode;

/// Distribution of relaxation times (DRT) of a spectrum, with its peaks.
///
/// Computes the distribution of relaxation times (DRT) of a spectrum by Tikhonov-regularised,
/// non-negative least squares, and report its peaks (τ, frequency, resistance), R∞ and the
/// polarisation resistance.
#[derive(clap::Args)]
#[command(
    after_help = "Examples:\n  eis simulate --model 'R0 + R1|Q1 + R2|Q2' --set R1=20 --set R2=50 --set Q2.Q=10m --noise 0.002 -o cell.csv\n  eis drt cell.csv\n  eis drt cell.csv --json -o cell-drt.csv\n  eis drt cell.csv --lambda-method lcurve --penalty 1 --part imag\n\nλ is in scale-free units (residuals relative to |Z|, γ relative to max|Z|).\nThe CSV holds tau_s,frequency_hz,gamma_ohm; γ is in Ω per unit ln τ."
)]
pub struct Args {
    /// Spectrum file (canonical CSV as written by `eis simulate`).
    input: PathBuf,
    /// Which spectrum of the file, from 1 (needed when it holds several).
    #[arg(allow_negative_numbers = true, long, value_name = "N", value_parser = clap::value_parser!(u32).range(1..))]
    spectrum: Option<u32>,
    /// Fixed regularisation strength λ (skips the automatic choice).
    #[arg(allow_negative_numbers = true, long, value_parser = crate::args::nonnegative, conflicts_with = "lambda_method")]
    lambda: Option<f64>,
    /// How λ is chosen automatically.
    #[arg(long, value_enum, default_value_t = Method::Gcv)]
    lambda_method: Method,
    /// Derivative of γ that the penalty measures: 1 (slope) or 2 (curvature).
    #[arg(allow_negative_numbers = true, long, default_value_t = 2, value_parser = clap::value_parser!(u8).range(1..=2))]
    penalty: u8,
    /// Which part of Z to fit.
    #[arg(long, value_enum, default_value_t = Fitted::Both)]
    part: Fitted,
    /// Model a series inductance (for spectra that turn inductive at high frequency).
    #[arg(long)]
    inductance: bool,
    /// Leave out the series capacitance that takes up an open capacitive tail at low frequency.
    #[arg(long)]
    no_capacitance: bool,
    /// Smallest peak reported, as a fraction of the largest γ (a separated process of 4 % of the
    /// largest stays above the default; ripple and noise bumps below it).
    #[arg(allow_negative_numbers = true, long, default_value_t = DEFAULT_PEAK_THRESHOLD, value_parser = parse_fraction)]
    peak_threshold: f64,
    /// Print the result as JSON on stdout instead of a summary.
    #[arg(long)]
    json: bool,
    /// Write γ on the fine τ grid as CSV (tau_s,frequency_hz,gamma_ohm); `-` for stdout.
    #[arg(long, short, value_name = "DRT.csv")]
    output: Option<PathBuf>,
    /// Write a plot of γ against τ with the peaks marked (SVG or PNG by extension).
    #[arg(long, value_name = "FILE")]
    plot: Option<PathBuf>,
    #[command(flatten)]
    reader: crate::reader_args::ReaderArgs,
}

#[derive(Clone, Copy, clap::ValueEnum)]
enum Method {
    /// Generalised cross-validation.
    Gcv,
    /// Corner of the L-curve.
    Lcurve,
}

#[derive(Clone, Copy, clap::ValueEnum)]
enum Fitted {
    /// Real and imaginary parts together.
    Both,
    /// Real part only.
    Real,
    /// Imaginary part only.
    Imag,
}

fn parse_fraction(s: &str) -> Result<f64, String> {
    match eis_core::number::parse_si(s) {
        Some(v) if (0.0..1.0).contains(&v) => Ok(v),
        _ => Err(format!("`{s}` is not a fraction in [0, 1)")),
    }
}

/// Runs the command.
pub fn run(args: Args) -> Outcome {
    if args.json && args.output.as_deref() == Some(std::path::Path::new("-")) {
        return Err(bad(anyhow!(
            "--json and -o - both write to stdout; write the CSV to a file"
        )));
    }
    let spectra = read_spectra(&args.input, &args.reader.options()?)?;
    let spectrum = match (args.spectrum, spectra.len()) {
        (_, 0) => return Err(bad(anyhow!("{} holds no spectrum", args.input.display()))),
        (None, 1) => &spectra[0],
        (None, n) => {
            return Err(bad(anyhow!(
                "{} holds {n} spectra; choose one with --spectrum N",
                args.input.display()
            )));
        }
        (Some(k), n) => spectra.get(k as usize - 1).ok_or_else(|| {
            bad(anyhow!(
                "--spectrum {k}: {} holds only {n} spectra",
                args.input.display()
            ))
        })?,
    };
    let lambda = match (args.lambda, args.lambda_method) {
        (Some(l), _) => LambdaMethod::Fixed(l),
        (None, Method::Gcv) => LambdaMethod::Gcv,
        (None, Method::Lcurve) => LambdaMethod::LCurve,
    };
    let options = DrtOptions::default()
        .with_lambda(lambda)
        .with_penalty(if args.penalty == 1 {
            Penalty::First
        } else {
            Penalty::Second
        })
        .with_part(match args.part {
            Fitted::Both => Part::Both,
            Fitted::Real => Part::Real,
            Fitted::Imag => Part::Imaginary,
        })
        .with_inductance(args.inductance)
        .with_capacitance(!args.no_capacitance)
        .with_peak_threshold(args.peak_threshold);
    let spinner = crate::io::step_for(spectrum.len(), "computing the DRT");
    let result = drt(spectrum, options);
    spinner.finish_and_clear();
    let result = result.map_err(|e| {
        let context = format!("DRT of {}", args.input.display());
        if e.is_input_error() {
            Failure::BadInput(anyhow!(e).context(context))
        } else {
            Failure::Failed(anyhow!(e).context(context))
        }
    })?;
    for w in &result.warnings {
        eprintln!("warning: {w}");
    }
    let inputs = [args.input.clone()];
    if let Some(path) = &args.output {
        write_output(Some(path), &grid_csv(&result), &inputs)?;
    }
    if let Some(path) = &args.plot {
        let stem = args
            .input
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_default();
        let plot =
            crate::plot::build::drt(&result, format!("Distribution of relaxation times: {stem}"));
        crate::commands::plot::write_plot(&plot, path, None, (900, 600), &inputs)?;
    }
    if args.json {
        let text = serde_json::to_string_pretty(&result)
            .map_err(|e| Failure::Failed(anyhow!("cannot encode the result as JSON: {e}")))?;
        write_output(None, &(text + "\n"), &inputs)?;
    } else if args.output.as_deref() != Some(std::path::Path::new("-")) {
        write_output(None, &summary(&result), &inputs)?;
    }
    Ok(ExitCode::SUCCESS)
}

/// γ on the fine grid: `tau_s,frequency_hz,gamma_ohm`, τ ascending.
fn grid_csv(r: &DrtResult) -> String {
    let mut out = String::from("tau_s,frequency_hz,gamma_ohm\n");
    for (t, g) in r.tau_s.iter().zip(&r.gamma_ohm) {
        let f = 1.0 / (2.0 * std::f64::consts::PI * t);
        out.push_str(&format!(
            "{},{},{}\n",
            format_float(*t),
            format_float(f),
            format_float(*g)
        ));
    }
    out
}

/// A short human-readable report.
fn summary(r: &DrtResult) -> String {
    let mut s = String::new();
    s.push_str(&format!(
        "lambda       {:.3e} ({}, penalty order {}, part {})\n",
        r.lambda, r.lambda_method, r.penalty_order, r.part
    ));
    s.push_str(&format!(
        "R_inf        {} Ohm\n",
        format_si(round(r.r_inf_ohm))
    ));
    if let Some(l) = r.inductance_h {
        s.push_str(&format!("L            {} H\n", format_si(round(l))));
    }
    if let Some(c) = r.capacitance_f {
        s.push_str(&format!(
            "C_series     {} F (an open capacitive tail at low frequency)\n",
            format_si(round(c))
        ));
    }
    s.push_str(&format!(
        "R_pol        {} Ohm\n",
        format_si(round(r.r_pol_ohm))
    ));
    s.push_str(&format!(
        "rms residual {:.3} % of |Z|\n",
        100.0 * r.residual_rms
    ));
    s.push_str(&format!("peaks        {}\n", r.peaks.len()));
    peak_table(&mut s, &r.peaks);
    if !r.edge_peaks.is_empty() {
        s.push_str(&format!(
            "at the window edge, produced by a process beyond the data ({}; not in the table \
             above, their τ and resistance are not those of a resolved process):\n",
            r.edge_peaks.len()
        ));
        peak_table(&mut s, &r.edge_peaks);
    }
    s
}

/// The rows of a peak table, with its header.
fn peak_table(s: &mut String, peaks: &[eis_core::drt::DrtPeak]) {
    if peaks.is_empty() {
        return;
    }
    s.push_str("  tau_s        frequency_hz  resistance_ohm  width_decades\n");
    for p in peaks {
        s.push_str(&format!(
            "  {:<12} {:<13} {:<15} {:.2}\n",
            format_si(round(p.tau_s)),
            format_si(round(p.frequency_hz)),
            format_si(round(p.resistance_ohm)),
            p.width_decades
        ));
    }
}

/// Four significant digits, for display only.
fn round(x: f64) -> f64 {
    if x == 0.0 || !x.is_finite() {
        return x;
    }
    let e = x.abs().log10().floor() as i32 - 3;
    let scale = 10f64.powi(e);
    let v = (x / scale).round() * scale;
    format!("{v:.prec$e}", prec = 3).parse().unwrap_or(v)
}
