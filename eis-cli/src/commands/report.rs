//! `eis report`: the campaign report, `DIR/report.html` — one self-contained file (inline SVG, no
//! scripts, nothing fetched): summary, flags with their reasons, Kramers–Kronig failures, fits with
//! warnings, failed files, trend plots, a table per cell and Nyquist overlays per cell.

use crate::commands::trend::{analyse_file, default_quantities};
use crate::format::{quantity, with_error};
use crate::io::{Failure, Outcome, bad, write_atomic};
use crate::plot::build::{quantity_label, trend as trend_plot};
use crate::plot::{Format, OverlayPlot, OverlaySpectrum, Plot, render};
use anyhow::anyhow;
use eis_core::Circuit;
use eis_core::campaign::{SpectrumResult, Status, results_quantities};
use eis_core::import::{ReaderOptions, SpectrumReader};
use eis_core::trend::{FLAG_CAUTION, TrendReport, TrendSettings};
use std::collections::BTreeMap;
use std::fmt::Write;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// Write the campaign report (one self-contained HTML file).
///
/// Writes DIR/report.html for a batch output folder: summary, flags, Kramers-Kronig failures, fit
/// warnings, trend plots, a table per cell and Nyquist overlays. One self-contained HTML file.
#[derive(clap::Args)]
#[command(
    after_help = "Example:\n  eis batch data/ --model m.circ --out results --name-pattern 'cell{cell}_c{cycle}_soc{soc}'\n  eis report results --model m.circ"
)]
pub struct Args {
    /// Output folder of `eis batch` (holding results.csv and results.jsonl).
    dir: PathBuf,
    /// The circuit the batch fitted (for the report header).
    #[arg(long, short)]
    model: Option<String>,
    #[command(flatten)]
    reader: crate::reader_args::ReaderArgs,
}

/// Escapes text for HTML.
fn esc(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

/// An SVG of a plot, for inlining (without an XML declaration).
fn svg(plot: &Plot, size: (u32, u32)) -> String {
    match render(plot, Format::Svg, size.0, size.1) {
        Ok(bytes) => {
            let text = String::from_utf8_lossy(&bytes).into_owned();
            match text.find("<svg") {
                Some(i) => text[i..].to_owned(),
                None => text,
            }
        }
        Err(e) => format!(
            "<p class=\"note\">plot not drawn: {}</p>",
            esc(&e.to_string())
        ),
    }
}

fn read_results(dir: &Path) -> Result<Vec<SpectrumResult>, Failure> {
    let path = dir.join("results.jsonl");
    let text = std::fs::read_to_string(&path)
        .map_err(|e| bad(anyhow!("cannot read {}: {e}", path.display())))?;
    let mut out = Vec::new();
    for (n, line) in text.lines().enumerate() {
        if line.trim().is_empty() {
            continue;
        }
        out.push(
            serde_json::from_str(line)
                .map_err(|e| bad(anyhow!("{}, line {}: {e}", path.display(), n + 1)))?,
        );
    }
    Ok(out)
}

fn meta_num(r: &SpectrumResult, k: &str) -> Option<f64> {
    r.metadata.get(k).and_then(|v| v.as_f64())
}

/// The cell of a result: its `cell` metadata, else its file's stem.
pub(crate) fn cell_of(r: &SpectrumResult) -> String {
    let cell = r.metadata.get("cell").map(ToString::to_string);
    eis_core::campaign::cell_name(cell.as_deref(), Path::new(&r.file))
}

const STYLE: &str = "body{font-family:sans-serif;max-width:1100px;margin:2em auto;padding:0 1em;color:#222}\
h1{font-size:1.6em}h2{font-size:1.25em;margin-top:2em;border-bottom:1px solid #ccc}h3{font-size:1.05em}\
table{border-collapse:collapse;margin:0.5em 0;font-size:0.9em}td,th{border:1px solid #ccc;padding:3px 6px;text-align:left}\
th{background:#f0f0f0}.flag{color:#a40000}.ok{color:#1a6d1a}.suspect{color:#a06000}.failed{color:#a40000}\
.caution{border:1px solid #a06000;background:#fff7e6;padding:0.6em 1em}.note{color:#666}svg{max-width:100%;height:auto}";

/// The SOC level nearest 50 % among `socs`, if any.
fn nearest_half(socs: impl Iterator<Item = f64>) -> Option<f64> {
    socs.min_by(|a, b| (a - 50.0).abs().total_cmp(&(b - 50.0).abs()))
}

/// Writes `dir/report.html`.
pub fn write_report(
    dir: &Path,
    circuit: Option<&Circuit>,
    reader: &ReaderOptions,
) -> Result<(), Failure> {
    let results = read_results(dir)?;
    let csv = dir.join("results.csv");
    let has_cycle = results.iter().any(|r| meta_num(r, "cycle").is_some());
    let x = if has_cycle { "cycle" } else { "spectrum" };
    let trend: Option<TrendReport> = if has_cycle {
        Some(analyse_file(&csv, x, &[], None, &TrendSettings::default())?)
    } else {
        None
    };
    let mut cells: BTreeMap<String, Vec<&SpectrumResult>> = BTreeMap::new();
    for r in &results {
        cells.entry(cell_of(r)).or_default().push(r);
    }
    let mut h = String::new();
    summary(&mut h, &results, cells.len(), circuit);
    flags(&mut h, trend.as_ref(), x);
    problems(&mut h, &results);
    shared_parameters(&mut h, &results);
    // Warnings that make a fit suspect (a bound, a trend in the residuals, a forced jump of arcs) per
    // fit; the others (correlations, undetermined parameters) are grouped above.
    h.push_str("<h2>Suspect fits</h2>\n");
    let suspect: Vec<&SpectrumResult> = results
        .iter()
        .filter(|r| r.status == Status::Suspect && r.kk.as_ref().is_none_or(|k| k.valid))
        .collect();
    message_table(&mut h, &suspect, "why", "");

    // Trend plots, at the SOC level nearest 50 % when there are several.
    let plot_soc = nearest_half(results.iter().filter_map(|r| meta_num(r, "soc")));
    let plot_trend = match (has_cycle, plot_soc) {
        (true, Some(s)) => Some(analyse_file(
            &csv,
            x,
            &[],
            Some(s),
            &TrendSettings::default(),
        )?),
        _ => trend,
    };
    if let Some(t) = &plot_trend {
        trend_plots(&mut h, t, plot_soc);
    }

    h.push_str("<h2>Cells</h2>\n");
    for (cell, rs) in &cells {
        cell_section(&mut h, cell, rs, has_cycle, reader);
    }
    h.push_str("<p class=\"note\">Written by eis. Standard errors come from the fit covariance scaled by the reduced chi-square; derived quantities by first-order propagation.</p>\n</body></html>\n");
    write_atomic(&dir.join("report.html"), h.as_bytes(), &[])
}

/// The page head, the counts of spectra, cells and outcomes, the model and the caution.
fn summary(h: &mut String, results: &[SpectrumResult], cells: usize, circuit: Option<&Circuit>) {
    let _ = write!(
        h,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>Impedance campaign report</title><style>{STYLE}</style></head><body>\n<h1>Impedance campaign report</h1>\n"
    );
    let count = |s: Status| results.iter().filter(|r| r.status == s).count();
    let _ = write!(
        h,
        "<h2>Summary</h2>\n<p>{} spectra from {} cells: <span class=\"ok\">{} ok</span>, <span class=\"suspect\">{} suspect</span>, <span class=\"failed\">{} failed</span>.</p>\n",
        results.len(),
        cells,
        count(Status::Ok),
        count(Status::Suspect),
        count(Status::Failed)
    );
    if let Some(c) = circuit {
        let _ = writeln!(
            h,
            "<p>Model: <code>{}</code></p>",
            esc(&eis_core::circuit::print(c).replace('\n', "; "))
        );
    }
    let _ = writeln!(
        h,
        "<div class=\"caution\"><b>Caution.</b> The values and flags in this report are engineering hints from impedance data, not safety verdicts. Charged cells can deliver large currents into a short and many electrolytes are corrosive: handle suspect cells by your lab's own rules, local codes and the instructions of qualified staff.</div>"
    );
}

/// The trend flags of every cell and SOC level (`x` names the trend axis), or why there are none.
fn flags(h: &mut String, trend: Option<&TrendReport>, x: &str) {
    h.push_str("<h2>Flags</h2>\n");
    match trend {
        Some(t) if !t.flags.is_empty() => {
            h.push_str("<table><tr><th>cell</th><th>kind</th><th>quantity or spectrum</th><th>onset</th><th>change</th><th>explanation</th></tr>\n");
            for f in &t.flags {
                let _ = writeln!(
                    h,
                    "<tr class=\"flag\"><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
                    esc(&f.label()),
                    f.kind.as_str(),
                    esc(&f.quantity),
                    f.onset_x
                        .map(|o| format!("{x} {}", eis_core::number::format_float(o)))
                        .unwrap_or_default(),
                    f.change_percent
                        .map(|c| format!("{c:+.0} %"))
                        .unwrap_or_default(),
                    esc(f.explanation.trim_end_matches(FLAG_CAUTION).trim())
                );
            }
            h.push_str("</table>\n");
            let _ = writeln!(h, "<p class=\"note\">{}</p>", esc(FLAG_CAUTION));
        }
        Some(_) => h.push_str("<p>No trend flags.</p>\n"),
        None => h.push_str(
            "<p class=\"note\">No cycle numbers in the metadata: no trends analysed.</p>\n",
        ),
    }
}

/// The problem spectra: Kramers–Kronig failures, failed files, and the identifiability advice.
fn problems(h: &mut String, results: &[SpectrumResult]) {
    let kk_failed: Vec<(&SpectrumResult, &eis_core::campaign::KkSummary)> = results
        .iter()
        .filter_map(|r| r.kk.as_ref().filter(|k| !k.valid).map(|k| (r, k)))
        .collect();
    h.push_str("<h2>Kramers-Kronig failures</h2>\n");
    if kk_failed.is_empty() {
        h.push_str("<p>Every spectrum passed the Kramers-Kronig check.</p>\n");
    } else {
        h.push_str("<p>These spectra are not consistent with a linear, stable system: the cell probably changed during the sweep or the measurement was disturbed. Their fitted values should not be trusted.</p>\n<table><tr><th>file</th><th>cell</th><th>max residual</th><th>suspect range</th></tr>\n");
        for (r, k) in &kk_failed {
            let _ = writeln!(
                h,
                "<tr><td>{} #{}</td><td>{}</td><td>{:.2} %</td><td>{}</td></tr>",
                esc(&r.file),
                r.spectrum,
                esc(&cell_of(r)),
                k.residual_max_percent,
                k.suspect_frequency_range_hz
                    .map(|(a, b)| format!("{} to {}", quantity(a, 3, "Hz"), quantity(b, 3, "Hz")))
                    .unwrap_or_default()
            );
        }
        h.push_str("</table>\n");
    }
    h.push_str("<h2>Failed files</h2>\n");
    let failed: Vec<&SpectrumResult> = results
        .iter()
        .filter(|r| r.status == Status::Failed)
        .collect();
    message_table(h, &failed, "reason", " class=\"failed\"");
    let advice = eis_core::campaign::advice(results);
    if !advice.is_empty() {
        h.push_str("<h2>Identifiability</h2>\n<ul>\n");
        for a in &advice {
            let _ = writeln!(h, "<li>{}</li>", esc(&a.to_string()));
        }
        h.push_str("</ul>\n");
    }
}

/// Parameters fitted jointly along chains (`eis batch --share`): one value per chain.
fn shared_parameters(h: &mut String, results: &[SpectrumResult]) {
    let mut shared: Vec<(String, String, String)> = Vec::new();
    for r in results.iter().filter(|r| !r.shared.is_empty()) {
        let Some(f) = &r.fit else { continue };
        for name in &r.shared {
            if let Some(p) = f.parameters.iter().find(|p| &p.name == name) {
                let value = format!("{} {}", with_error(p.value, p.stderr), p.unit);
                let row = (cell_of(r), name.clone(), value);
                if !shared.contains(&row) {
                    shared.push(row);
                }
            }
        }
    }
    if shared.is_empty() {
        return;
    }
    h.push_str("<h2>Parameters shared along chains</h2>\n<p>Fitted jointly over all spectra of a chain (<code>eis batch --share</code>): one value per chain, with its standard error from the joint covariance.</p>\n<table><tr><th>cell</th><th>parameter</th><th>value</th></tr>\n");
    for (cell, name, value) in &shared {
        let _ = writeln!(
            h,
            "<tr><td>{}</td><td>{}</td><td>{}</td></tr>",
            esc(cell),
            esc(name),
            esc(value)
        );
    }
    h.push_str("</table>\n");
}

/// One plot per default quantity of the trends `t`, taken at the SOC level `soc` when there is one.
fn trend_plots(h: &mut String, t: &TrendReport, soc: Option<f64>) {
    let at = soc
        .map(|s| format!(" at {} % SOC", eis_core::number::format_float(s)))
        .unwrap_or_default();
    let _ = writeln!(
        h,
        "<h2>Trends{at}</h2>\n<p class=\"note\">Error bars are the standard errors of the single fits; flagged points are marked. The flags above cover every SOC level.</p>"
    );
    let mut quantities: Vec<String> = Vec::new();
    for s in &t.series {
        if !quantities.contains(&s.quantity) {
            quantities.push(s.quantity.clone());
        }
    }
    for q in default_quantities(&quantities) {
        let _ = writeln!(h, "<h3>{}</h3>", esc(&quantity_label(&q).0));
        h.push_str(&svg(&trend_plot(t, &q), (900, 520)));
        h.push('\n');
    }
}

/// A cell's table of spectra (by cycle, then SOC) with their battery quantities, and a Nyquist
/// overlay of its spectra at the SOC level nearest 50 %, coloured by cycle (or spectrum number).
fn cell_section(
    h: &mut String,
    cell: &str,
    rs: &[&SpectrumResult],
    has_cycle: bool,
    reader: &ReaderOptions,
) {
    let _ = writeln!(h, "<h3>Cell {}</h3>", esc(cell));
    h.push_str("<table><tr><th>file</th><th>cycle</th><th>SOC</th><th>status</th>");
    for q in results_quantities() {
        let _ = write!(h, "<th>{} ({})</th>", q.short, q.unit);
    }
    h.push_str("<th>note</th></tr>\n");
    let mut sorted = rs.to_vec();
    sorted.sort_by(|a, b| {
        meta_num(a, "cycle")
            .unwrap_or(0.0)
            .total_cmp(&meta_num(b, "cycle").unwrap_or(0.0))
            .then(
                meta_num(a, "soc")
                    .unwrap_or(0.0)
                    .total_cmp(&meta_num(b, "soc").unwrap_or(0.0)),
            )
    });
    for r in &sorted {
        let d = r.fit.as_ref().map(|f| &f.derived);
        let cellv = |v: Option<eis_core::derive::Quantity>| match v {
            Some(v) => crate::format::with_error(v.value, v.stderr),
            None => "-".into(),
        };
        let _ = write!(
            h,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td class=\"{}\">{}</td>",
            esc(Path::new(&r.file)
                .file_name()
                .map(|n| n.to_string_lossy().into_owned())
                .unwrap_or_default()
                .as_str()),
            meta_num(r, "cycle")
                .map(eis_core::number::format_float)
                .unwrap_or_default(),
            meta_num(r, "soc")
                .map(eis_core::number::format_float)
                .unwrap_or_default(),
            r.status.as_str(),
            r.status.as_str(),
        );
        for q in results_quantities() {
            let v = d.and_then(|d| d.get(q.key));
            let _ = write!(h, "<td>{}</td>", cellv(v));
        }
        let _ = writeln!(h, "<td>{}</td></tr>", esc(&r.message));
    }
    h.push_str("</table>\n");
    let level = nearest_half(sorted.iter().filter_map(|r| meta_num(r, "soc")));
    let mut spectra = Vec::new();
    for r in sorted.iter().filter(|r| r.status != Status::Failed) {
        if level.is_some() && meta_num(r, "soc") != level {
            continue;
        }
        let Ok(reader) = SpectrumReader::open(Path::new(&r.file), reader.clone()) else {
            continue;
        };
        if let Some(Ok(imp)) = reader.into_iter().nth(r.spectrum - 1) {
            spectra.push(OverlaySpectrum {
                label: r.file.clone(),
                freq: imp.spectrum.frequency_hz,
                z: imp.spectrum.z,
                value: meta_num(r, "cycle").unwrap_or(r.spectrum as f64),
            });
        }
    }
    if spectra.is_empty() {
        return;
    }
    let title = match level {
        Some(l) => format!("Cell {cell} at {} % SOC", eis_core::number::format_float(l)),
        None => format!("Cell {cell}"),
    };
    let plot = Plot::Overlay(OverlayPlot {
        title,
        spectra,
        colorbar_label: if has_cycle {
            "cycle".into()
        } else {
            "spectrum".into()
        },
    });
    h.push_str(&svg(&plot, (900, 600)));
    h.push('\n');
}

/// Runs the command.
pub fn run(args: Args) -> Outcome {
    let circuit = args
        .model
        .as_deref()
        .map(crate::io::load_model)
        .transpose()?;
    write_report(&args.dir, circuit.as_ref(), &args.reader.options()?)?;
    eprintln!("report: {}", args.dir.join("report.html").display());
    Ok(ExitCode::SUCCESS)
}

/// A table of spectra and their messages (`None.` when there are none): columns file and `what`, each
/// row opened as `<tr{row_attrs}>`.
fn message_table(h: &mut String, rows: &[&SpectrumResult], what: &str, row_attrs: &str) {
    if rows.is_empty() {
        h.push_str("<p>None.</p>\n");
        return;
    }
    let _ = writeln!(h, "<table><tr><th>file</th><th>{what}</th></tr>");
    for r in rows {
        let _ = writeln!(
            h,
            "<tr{row_attrs}><td>{} #{}</td><td>{}</td></tr>",
            esc(&r.file),
            r.spectrum,
            esc(&r.message)
        );
    }
    h.push_str("</table>\n");
}
