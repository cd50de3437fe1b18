//! `eis trend`: each quantity of a campaign against cycle, SOC or time, per cell, with flags.

use crate::format::quantity;
use crate::io::{Failure, Outcome, bad, write_atomic, write_output};
use anyhow::anyhow;
use eis_core::derive::{is_arc_column, quantity_of_column};
use eis_core::trend::{
    FLAG_CAUTION, TrendReport, TrendSettings, analyse, read_results_csv, trends_csv,
};
use std::fmt::Write;
use std::path::PathBuf;
use std::process::ExitCode;

/// Trends per cell against cycle, SOC or time, with flags of what changed.
///
/// Trends of the fitted quantities of a campaign (per cell, against cycle, SOC, time or any field):
/// change from the baseline, growth rate with its uncertainty, onset of a change, and flags with plain
/// explanations. Writes trends.csv beside the results.
#[derive(clap::Args)]
#[command(
    after_help = "Examples:\n  eis trend results/results.csv --x cycle\n  eis trend results/results.csv --x cycle --at-soc 50 --y ohmic_resistance_ohm --y charge_transfer_resistance_ohm --json\n  eis trend results/results.csv --x soc --plot soc.svg\n\nFlags are engineering hints, not safety verdicts; handle suspect cells by your lab's own rules.\nExit status: 0 no flag, 1 flags raised, 2 bad input."
)]
pub struct Args {
    /// results.csv of a batch.
    input: PathBuf,
    /// Horizontal quantity: cycle, soc, time or any numeric column.
    #[arg(long, default_value = "cycle")]
    x: String,
    /// Quantities to follow (repeatable; default: ohmic, charge-transfer, diffusion and DC resistance
    /// and each arc).
    #[arg(long = "y", value_name = "QUANTITY")]
    y: Vec<String>,
    /// Group series by this field (only `cell` is supported: one series per cell and SOC level).
    #[arg(long, default_value = "cell")]
    by: String,
    /// Keep only spectra at this SOC.
    #[arg(allow_negative_numbers = true, long, value_parser = crate::args::number)]
    at_soc: Option<f64>,
    /// Flag resistances whose trend grew by at least this many percent.
    #[arg(allow_negative_numbers = true, long, default_value = "20", value_parser = crate::args::positive)]
    growth_percent: f64,
    /// Flag a soft short when the polarisation resistance falls below this fraction of its level.
    #[arg(allow_negative_numbers = true, long, default_value = "0.5", value_parser = crate::args::positive)]
    short_fraction: f64,
    /// Print the analysis as JSON.
    #[arg(long)]
    json: bool,
    /// Write a trend plot of the first quantity (SVG or PNG by extension).
    #[arg(long, value_name = "FILE")]
    plot: Option<PathBuf>,
}

/// Default quantities: the four battery resistances and each arc, where present.
pub fn default_quantities(available: &[String]) -> Vec<String> {
    available
        .iter()
        .filter(|q| quantity_of_column(q).is_some_and(|row| row.in_results) || is_arc_column(q))
        .cloned()
        .collect()
}

/// Reads and analyses a results table.
pub fn analyse_file(
    path: &std::path::Path,
    x: &str,
    y: &[String],
    at_soc: Option<f64>,
    settings: &TrendSettings,
) -> Result<TrendReport, Failure> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| bad(anyhow!("cannot read {}: {e}", path.display())))?;
    let table =
        read_results_csv(&text, x, at_soc).map_err(|e| bad(anyhow!("{}, {e}", path.display())))?;
    let quantities = if y.is_empty() {
        default_quantities(&table.quantities)
    } else {
        for q in y {
            if !table.quantities.contains(q) {
                return Err(bad(anyhow!(
                    "{} has no quantity `{q}`; available: {}",
                    path.display(),
                    table.quantities.join(", ")
                )));
            }
        }
        y.to_vec()
    };
    Ok(analyse(&table.records, x, &quantities, settings))
}

/// The readable summary.
pub fn human(report: &TrendReport) -> String {
    let mut out = String::new();
    let _ = writeln!(out, "trends against {}", report.x_name);
    let rows: Vec<Vec<String>> = report
        .series
        .iter()
        .map(|s| {
            let last = s.change_percent.last().copied().unwrap_or(0.0);
            vec![
                s.label(),
                s.quantity.clone(),
                s.x.len().to_string(),
                quantity(s.y.first().copied().unwrap_or(f64::NAN), 4, ""),
                format!("{last:+.1} %"),
                match (s.slope_percent_per_100, s.slope, s.slope_stderr) {
                    (Some(p), Some(b), Some(se)) if b != 0.0 => {
                        format!("{p:+.2} % per 100 (±{:.2})", (p * se / b).abs())
                    }
                    _ => "-".into(),
                },
                s.onset_x
                    .map(|o| format!("from {}", eis_core::number::format_float(o)))
                    .unwrap_or_default(),
                if s.flagged.is_empty() {
                    String::new()
                } else {
                    "FLAG".into()
                },
            ]
        })
        .collect();
    out.push_str(&crate::format::table(
        &[
            "cell",
            "quantity",
            "points",
            "first",
            "change",
            "growth rate",
            "onset",
            "",
        ],
        &rows,
    ));
    if report.flags.is_empty() {
        out.push_str("\nno flags\n");
    } else {
        out.push_str("\nflags\n");
        for f in &report.flags {
            let _ = writeln!(
                out,
                "  [{}] {} {}: {}",
                f.kind.as_str(),
                f.label(),
                f.quantity,
                f.explanation.trim_end_matches(FLAG_CAUTION).trim()
            );
        }
        let _ = writeln!(out, "\ncaution: {FLAG_CAUTION}");
    }
    out
}

/// The grouped identifiability advice of the fits in `dir/results.jsonl` (written by `eis batch`
/// beside results.csv), as a section of the readable summary; empty when there is no such file or
/// nothing to advise. Lines that are not results are passed over.
fn advice_beside(dir: &std::path::Path) -> String {
    let Ok(text) = std::fs::read_to_string(dir.join("results.jsonl")) else {
        return String::new();
    };
    let results: Vec<eis_core::campaign::SpectrumResult> = text
        .lines()
        .filter_map(|l| serde_json::from_str(l).ok())
        .collect();
    let advice = eis_core::campaign::advice(&results);
    let mut out = String::new();
    if !advice.is_empty() {
        out.push_str("\nidentifiability (from results.jsonl)\n");
        for a in &advice {
            let _ = writeln!(out, "  {a}");
        }
    }
    out
}

/// Runs the command.
pub fn run(args: Args) -> Outcome {
    if args.by != "cell" {
        return Err(bad(anyhow!("--by supports `cell` only")));
    }
    let settings = TrendSettings::default()
        .with_growth_percent(args.growth_percent)
        .with_short_fraction(args.short_fraction);
    let report = analyse_file(&args.input, &args.x, &args.y, args.at_soc, &settings)?;
    let inputs = vec![args.input.clone()];
    let dir = args
        .input
        .parent()
        .filter(|d| !d.as_os_str().is_empty())
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from("."));
    write_atomic(
        &dir.join("trends.csv"),
        trends_csv(&report).as_bytes(),
        &inputs,
    )?;
    if let Some(p) = &args.plot {
        let q = report
            .series
            .first()
            .map(|s| s.quantity.clone())
            .ok_or_else(|| bad(anyhow!("nothing to plot")))?;
        crate::commands::plot::write_plot(
            &crate::plot::build::trend(&report, &q),
            p,
            None,
            (900, 600),
            &inputs,
        )?;
    }
    let text = if args.json {
        let mut s = serde_json::to_string_pretty(&report)
            .map_err(|e| Failure::Failed(anyhow!("cannot encode: {e}")))?;
        s.push('\n');
        s
    } else {
        let mut text = human(&report);
        text.push_str(&advice_beside(&dir));
        text
    };
    write_output(None, &text, &inputs)?;
    Ok(if report.flags.is_empty() {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(1)
    })
}
