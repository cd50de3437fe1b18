//! `eis check`: Kramers–Kronig validation of every spectrum of the inputs.

use crate::io::{Failure, Outcome};
use crate::reader_args::ReaderArgs;
use anyhow::anyhow;
use eis_core::spectrum::MetaValue;
use eis_core::validate::{KkFailures, KkOptions, KkReport, Tail, kramers_kronig};
use std::collections::BTreeMap;
use std::path::PathBuf;
use std::process::ExitCode;

/// Check spectra for Kramers-Kronig consistency (valid / suspect).
///
/// Checks spectra for Kramers-Kronig consistency (linear Voigt-series test, Schönleber, Klotz &
/// Ivers-Tiffée 2014). A spectrum is suspect when a point's residual exceeds both --max-residual and
/// --outlier-factor times the residuals' own scatter, when the residual signs follow a trend (runs
/// test beyond --runs-z with a systematic part above --trend), or when the rms residual exceeds
/// --rms-residual (all in % of |Z|); the frequency range of the offending points is given. Exit
/// status 0 all valid, 1 any suspect or unreadable, 2 bad usage.
#[derive(clap::Args)]
#[command(
    after_help = "Examples:\n  eis check cell.csv\n  eis check run*.txt --json --max-residual 2 --capacitance on"
)]
pub struct Args {
    /// Input files.
    #[arg(required = true, value_name = "INPUT")]
    inputs: Vec<PathBuf>,
    /// One JSON document per spectrum (an array for several) on stdout.
    #[arg(long)]
    json: bool,
    /// μ threshold: fits with μ below it count as over-fitted.
    #[arg(allow_negative_numbers = true, long, default_value_t = 0.5, value_parser = parse_fraction)]
    mu: f64,
    /// Per-point floor, % of |Z|: a point within it is never flagged.
    #[arg(allow_negative_numbers = true, long, default_value_t = 1.0, value_parser = parse_percent)]
    max_residual: f64,
    /// A point is flagged above this multiple of the residual scatter (and the floor); 0 for a
    /// fixed per-point limit.
    #[arg(allow_negative_numbers = true, long, default_value_t = 5.0, value_parser = parse_non_negative)]
    outlier_factor: f64,
    /// Largest rms residual, % of |Z|, for a valid spectrum.
    #[arg(allow_negative_numbers = true, long, default_value_t = 2.0, value_parser = parse_percent)]
    rms_residual: f64,
    /// Critical z of the runs test on residual signs (fewer runs than chance by this many standard
    /// deviations is a trend).
    #[arg(allow_negative_numbers = true, long, default_value_t = 3.5, value_parser = parse_percent)]
    runs_z: f64,
    /// Smallest systematic residual, % of |Z|, that counts as a trend.
    #[arg(allow_negative_numbers = true, long, default_value_t = 0.3, value_parser = parse_percent)]
    trend: f64,
    /// Fixed number of Voigt elements instead of the automatic choice.
    #[arg(allow_negative_numbers = true, long, value_parser = clap::value_parser!(u32).range(1..))]
    elements: Option<u32>,
    /// Series capacitance for a capacitive low-frequency tail: auto, on, off.
    #[arg(long, value_enum, default_value = "auto")]
    capacitance: TailArg,
    /// Series inductance for an inductive high-frequency tail: auto, on, off.
    #[arg(long, value_enum, default_value = "auto")]
    inductance: TailArg,
    #[command(flatten)]
    reader: ReaderArgs,
}

#[derive(clap::ValueEnum, Clone, Copy, Debug)]
enum TailArg {
    Auto,
    On,
    Off,
}

impl From<TailArg> for Tail {
    fn from(t: TailArg) -> Tail {
        match t {
            TailArg::Auto => Tail::Auto,
            TailArg::On => Tail::On,
            TailArg::Off => Tail::Off,
        }
    }
}

fn parse_fraction(s: &str) -> Result<f64, String> {
    match s.parse::<f64>() {
        Ok(v) if v > 0.0 && v <= 1.0 => Ok(v),
        _ => Err(format!("`{s}` is not a number in (0, 1]")),
    }
}

fn parse_non_negative(s: &str) -> Result<f64, String> {
    match s.parse::<f64>() {
        Ok(v) if v >= 0.0 && v.is_finite() => Ok(v),
        _ => Err(format!("`{s}` is not a non-negative number")),
    }
}

fn parse_percent(s: &str) -> Result<f64, String> {
    match s.parse::<f64>() {
        Ok(v) if v > 0.0 && v.is_finite() => Ok(v),
        _ => Err(format!("`{s}` is not a positive percentage")),
    }
}

/// Four significant digits, for messages.
fn short(x: f64) -> String {
    if x == 0.0 || !x.is_finite() {
        return format!("{x}");
    }
    let digits = 3 - x.abs().log10().floor() as i32;
    if (0..=12).contains(&digits) {
        let s = format!("{x:.*}", digits as usize);
        if s.contains('.') {
            s.trim_end_matches('0').trim_end_matches('.').to_owned()
        } else {
            s
        }
    } else {
        format!("{x:.3e}")
    }
}

/// JSON documents written as they come: one document alone, several as an array, so memory does not
/// grow with the number of spectra.
struct JsonOut {
    first: Option<String>,
    count: usize,
}

impl JsonOut {
    fn push(&mut self, doc: &Document) -> Result<(), Failure> {
        let v = pretty(doc)?;
        self.count += 1;
        match self.count {
            1 => self.first = Some(v),
            2 => {
                let first = self.first.take().unwrap_or_default();
                emit(&format!("[\n{first},\n{v}"))?;
            }
            _ => emit(&format!(",\n{v}"))?,
        }
        Ok(())
    }

    fn finish(self) -> Result<(), Failure> {
        match (self.count, self.first) {
            (0, _) => emit("[]\n"),
            (1, Some(v)) => emit(&format!("{v}\n")),
            _ => emit("\n]\n"),
        }
    }
}

fn pretty(v: &Document) -> Result<String, Failure> {
    serde_json::to_string_pretty(v).map_err(|e| Failure::Failed(anyhow!("cannot write JSON: {e}")))
}

fn emit(text: &str) -> Result<(), Failure> {
    crate::io::print(text)
}

/// The JSON document of one spectrum: its report, or why it could not be checked. Keys in
/// alphabetical order, as the documents have always been written.
#[derive(serde::Serialize)]
#[serde(untagged)]
enum Document<'a> {
    Report(ReportDocument<'a>),
    Error {
        error: String,
        file: &'a str,
        spectrum: Option<usize>,
        valid: bool,
    },
}

/// The checked spectrum: the [`KkReport`] fields a reader needs, named with their units.
#[derive(serde::Serialize)]
struct ReportDocument<'a> {
    elements: usize,
    failed: KkFailures,
    file: &'a str,
    max_residual_percent_limit: f64,
    metadata: BTreeMap<&'a str, &'a MetaValue>,
    mu: f64,
    point_limit_percent: f64,
    points: usize,
    residual_max_percent: f64,
    residual_rms_percent: f64,
    residual_scatter_percent: f64,
    residual_systematic_percent: f64,
    rms_residual_percent_limit: f64,
    runs_z: f64,
    series_capacitance_f: Option<f64>,
    series_inductance_h: Option<f64>,
    spectrum: usize,
    suspect_frequency_range_hz: Option<[f64; 2]>,
    valid: bool,
}

fn document<'a>(file: &'a str, s: &'a eis_core::Spectrum, r: &KkReport) -> Document<'a> {
    Document::Report(ReportDocument {
        elements: r.elements,
        failed: r.failed,
        file,
        max_residual_percent_limit: r.max_residual_percent,
        // A repeated key keeps its last value, as the documents always did.
        metadata: s.meta.fields.iter().map(|(k, v)| (k.as_str(), v)).collect(),
        mu: r.mu,
        point_limit_percent: r.point_limit_percent,
        points: s.len(),
        residual_max_percent: r.residual_max_percent,
        residual_rms_percent: r.residual_rms_percent,
        residual_scatter_percent: r.residual_scatter_percent,
        residual_systematic_percent: r.residual_systematic_percent,
        rms_residual_percent_limit: r.rms_residual_percent,
        runs_z: r.runs_z,
        series_capacitance_f: r.capacitance,
        series_inductance_h: r.inductance,
        spectrum: s.meta.spectrum,
        suspect_frequency_range_hz: r.suspect_frequency_range_hz.map(|(a, b)| [a, b]),
        valid: r.valid,
    })
}

/// Runs the command.
pub fn run(args: Args) -> Outcome {
    let reader_options = args.reader.options()?;
    let kk = KkOptions {
        mu_threshold: args.mu,
        elements: args.elements.map(|m| m as usize),
        max_elements: None,
        capacitance: args.capacitance.into(),
        inductance: args.inductance.into(),
        max_residual_percent: args.max_residual,
        outlier_factor: args.outlier_factor,
        rms_residual_percent: args.rms_residual,
        runs_z: args.runs_z,
        trend_percent: args.trend,
    };
    let mut docs = JsonOut {
        first: None,
        count: 0,
    };
    let json = args.json;
    let mut all_valid = true;
    let report_error = |docs: &mut JsonOut, file: &str, spectrum: Option<usize>, msg: String| {
        eprintln!("error: {msg}");
        if json {
            docs.push(&Document::Error {
                error: msg,
                file,
                spectrum,
                valid: false,
            })
        } else {
            Ok(())
        }
    };
    for input in &args.inputs {
        let file = input.display().to_string();
        crate::io::each_spectrum(input, &reader_options, |item| {
            let s = match item {
                Ok(s) => s,
                Err(e) => {
                    all_valid = false;
                    return report_error(&mut docs, &file, e.spectrum, e.to_string());
                }
            };
            crate::io::note_size(&file, s.meta.spectrum, s.len());
            match kramers_kronig(&s, &kk) {
                Err(e) => {
                    all_valid = false;
                    report_error(
                        &mut docs,
                        &file,
                        Some(s.meta.spectrum),
                        format!("{file}, spectrum {}: {e}", s.meta.spectrum),
                    )?;
                }
                Ok(r) => {
                    all_valid &= r.valid;
                    if !args.json {
                        emit(&verdict_line(&file, s.meta.spectrum, &r))?;
                    } else {
                        docs.push(&document(&file, &s, &r))?;
                    }
                }
            }
            Ok(())
        })?;
    }
    if json {
        docs.finish()?;
    }
    Ok(if all_valid {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(1)
    })
}

/// The one-line verdict of spectrum `spectrum` of `file`, with the failed tests and the suspect
/// frequency range when there is one.
fn verdict_line(file: &str, spectrum: usize, r: &KkReport) -> String {
    let verdict = if r.valid { "valid" } else { "suspect" };
    let mut line = format!(
        "{file} #{spectrum}: {verdict} (mu {:.2}, {} elements, residual rms {} %, max {} %)",
        r.mu,
        r.elements,
        short(r.residual_rms_percent),
        short(r.residual_max_percent)
    );
    if let Some((lo, hi)) = r.suspect_frequency_range_hz {
        let why: Vec<&str> = [
            (r.failed.points, "points"),
            (r.failed.trend, "trend"),
            (r.failed.rms, "rms"),
        ]
        .iter()
        .filter(|(f, _)| *f)
        .map(|(_, w)| *w)
        .collect();
        line.push_str(&format!(
            "; failed: {}; residuals above the limit from {} to {} Hz",
            why.join(", "),
            short(lo),
            short(hi)
        ));
    }
    line.push('\n');
    line
}
