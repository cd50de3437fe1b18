//! `eis batch`: check and fit every spectrum of a campaign.

use crate::commands::fit::WeightArg;
use crate::io::{Failure, Outcome, bad, load_model};
use anyhow::anyhow;
use eis_core::campaign::{BatchError, BatchSettings, run_batch};
use eis_core::fit::{FitSettings, Weighting};
use indicatif::{ProgressBar, ProgressStyle};
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// Check and fit every spectrum of a campaign (many files, in parallel).
///
/// Checks (Kramers-Kronig) and fits every spectrum of many files in parallel, warm-starting each fit
/// from the previous spectrum of the same cell and SOC; write DIR/results.csv and DIR/results.jsonl.
#[derive(clap::Args)]
#[command(
    after_help = "Examples:\n  eis batch data/ --model circuits/two-interfaces.circ --out results --name-pattern 'cell{cell}_c{cycle}_soc{soc}'\n  eis batch 'runs/*.csv' --model m.circ --out results --jobs 2 --resume\n  eis trend results/results.csv --x cycle\n\nInputs are files, folders (searched recursively for .csv, .txt, .tsv, .dat) and globs.\nStatus per spectrum: ok, suspect (failed the Kramers-Kronig check, or fit warnings that matter), failed.\nExit status: 0 none failed, 1 any failed, 2 bad usage."
)]
pub struct Args {
    /// Input files, folders or globs.
    #[arg(required = true, value_name = "INPUT")]
    inputs: Vec<String>,
    /// Circuit file (.circ) or inline expression.
    #[arg(long, short)]
    model: String,
    /// Output folder.
    #[arg(long)]
    out: PathBuf,
    /// Worker threads (default: all cores).
    #[arg(long, value_parser = clap::value_parser!(u32).range(1..=256))]
    jobs: Option<u32>,
    /// Skip spectra already in the results (after an interrupted run).
    #[arg(long)]
    resume: bool,
    /// Fit every spectrum from automatic starting values (no warm start from its neighbour).
    #[arg(long)]
    no_warm_start: bool,
    /// Residual weighting.
    #[arg(long, value_enum, default_value_t = WeightArg::Modulus)]
    weight: WeightArg,
    /// Also write DIR/report.html (campaign summary, trends and flags).
    #[arg(long)]
    report: bool,
    /// Also write trend plots (one per battery quantity, at the SOC level nearest 50 %) into this
    /// folder, as PNG.
    #[arg(long, value_name = "DIR")]
    plot: Option<PathBuf>,
    #[command(flatten)]
    reader: crate::reader_args::ReaderArgs,
}

/// Files under `dir` with a data extension, recursively, sorted; hidden entries are skipped.
fn walk(dir: &Path, out: &mut Vec<PathBuf>) {
    let Ok(rd) = std::fs::read_dir(dir) else {
        return;
    };
    let mut entries: Vec<PathBuf> = rd.flatten().map(|e| e.path()).collect();
    entries.sort();
    for p in entries {
        let hidden = p
            .file_name()
            .is_some_and(|n| n.to_string_lossy().starts_with('.'));
        if hidden {
            continue;
        }
        if p.is_dir() {
            walk(&p, out);
        } else if p.extension().is_some_and(|e| {
            matches!(
                e.to_string_lossy().to_ascii_lowercase().as_str(),
                "csv" | "txt" | "tsv" | "dat"
            )
        }) {
            out.push(p);
        }
    }
}

/// `*` and `?` in the last path component.
fn glob_match(pattern: &[char], name: &[char]) -> bool {
    match (pattern.first(), name.first()) {
        (None, None) => true,
        (Some('*'), _) => {
            glob_match(&pattern[1..], name) || (!name.is_empty() && glob_match(pattern, &name[1..]))
        }
        (Some('?'), Some(_)) => glob_match(&pattern[1..], &name[1..]),
        (Some(p), Some(n)) if p == n => glob_match(&pattern[1..], &name[1..]),
        _ => false,
    }
}

/// Expands inputs: globs, folders, files (missing files are kept so they are reported as failed).
pub fn expand(inputs: &[String]) -> Result<Vec<PathBuf>, Failure> {
    let mut out = Vec::new();
    for arg in inputs {
        let path = PathBuf::from(arg);
        let name = path
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        if name.contains(['*', '?']) {
            let dir = path
                .parent()
                .filter(|d| !d.as_os_str().is_empty())
                .unwrap_or(Path::new("."));
            let pat: Vec<char> = name.chars().collect();
            let mut found: Vec<PathBuf> = std::fs::read_dir(dir)
                .map_err(|e| bad(anyhow!("cannot list {}: {e}", dir.display())))?
                .flatten()
                .map(|e| e.path())
                .filter(|p| {
                    p.is_file()
                        && p.file_name().is_some_and(|n| {
                            glob_match(&pat, &n.to_string_lossy().chars().collect::<Vec<_>>())
                        })
                })
                .collect();
            found.sort();
            if found.is_empty() {
                return Err(bad(anyhow!("no file matches {arg}")));
            }
            out.extend(found);
        } else if path.is_dir() {
            walk(&path, &mut out);
        } else {
            out.push(path);
        }
    }
    // First occurrence wins, order kept (a set, not a scan of what came before: inputs run to tens
    // of thousands of files).
    let mut seen = std::collections::HashSet::with_capacity(out.len());
    out.retain(|p| seen.insert(p.clone()));
    if out.is_empty() {
        return Err(bad(anyhow!("no input files found")));
    }
    Ok(out)
}

/// Trend plots of a results table, one PNG per default quantity, at the SOC level nearest 50 %.
fn write_trend_plots(results: &Path, dir: &Path) -> Result<(), Failure> {
    use crate::commands::trend::{analyse_file, default_quantities, trend_plot};
    std::fs::create_dir_all(dir)
        .map_err(|e| Failure::Failed(anyhow!("cannot create {}: {e}", dir.display())))?;
    let settings = eis_core::trend::TrendSettings::default();
    let text = std::fs::read_to_string(results)
        .map_err(|e| Failure::Failed(anyhow!("cannot read {}: {e}", results.display())))?;
    let table = eis_core::trend::read_results_csv(&text, "cycle", None)
        .map_err(|e| Failure::Failed(anyhow!("{}, {e}", results.display())))?;
    let soc = table
        .records
        .iter()
        .filter_map(|r| r.soc)
        .min_by(|a, b| (a - 50.0).abs().total_cmp(&(b - 50.0).abs()));
    let report = analyse_file(results, "cycle", &[], soc, &settings)?;
    for q in default_quantities(&table.quantities) {
        let path = dir.join(format!("trend_{q}.png"));
        crate::commands::plot::write_plot(&trend_plot(&report, &q), &path, None, (1000, 620), &[])?;
    }
    Ok(())
}

/// Runs the command.
pub fn run(args: Args) -> Outcome {
    let circuit = load_model(&args.model)?;
    let inputs = expand(&args.inputs)?;
    let settings = BatchSettings {
        fit: FitSettings::default().with_weighting(Weighting::from(args.weight)),
        warm_start: !args.no_warm_start,
        reader: args.reader.options()?,
        ..BatchSettings::default()
    };
    if let Some(j) = args.jobs {
        // Only the first call in a process can set the global pool; a second one is harmless.
        let _ = rayon::ThreadPoolBuilder::new()
            .num_threads(j as usize)
            .build_global();
    }
    let bar = ProgressBar::new(0);
    bar.set_style(
        ProgressStyle::with_template(
            "{spinner} {pos}/{len} spectra [{elapsed_precise}] {per_sec} eta {eta}",
        )
        .unwrap_or_else(|_| ProgressStyle::default_bar()),
    );
    let progress = |done: usize, total: usize| {
        if bar.length() != Some(total as u64) {
            bar.set_length(total as u64);
        }
        bar.set_position(done as u64);
    };
    let summary = run_batch(
        &inputs,
        &circuit,
        &settings,
        &args.out,
        args.resume,
        &progress,
    )
    .map_err(|e| match e {
        BatchError::OverwritesInput(_) => bad(anyhow!("{e}")),
        e => Failure::Failed(anyhow!("{e}")),
    })?;
    bar.finish_and_clear();
    eprintln!(
        "{} spectra: {} ok, {} suspect, {} failed{}",
        summary.total,
        summary.ok,
        summary.suspect,
        summary.failed,
        if summary.skipped > 0 {
            format!(" ({} already done, skipped)", summary.skipped)
        } else {
            String::new()
        }
    );
    eprintln!(
        "results: {} and {}",
        args.out.join("results.csv").display(),
        args.out.join("results.jsonl").display()
    );
    if let Some(dir) = &args.plot {
        write_trend_plots(&args.out.join("results.csv"), dir)?;
        eprintln!("plots:   {}", dir.display());
    }
    if args.report {
        crate::commands::report::write_report(&args.out, Some(&circuit), &settings.reader)?;
        eprintln!("report:  {}", args.out.join("report.html").display());
    }
    Ok(if summary.failed > 0 {
        ExitCode::from(1)
    } else {
        ExitCode::SUCCESS
    })
}

#[cfg(test)]
mod tests {
    use super::expand;

    /// A file named twice, directly and through its folder or a glob, is fitted once, in the place it
    /// was first named.
    #[test]
    fn inputs_named_twice_are_kept_once_in_first_order() {
        let dir = std::env::temp_dir().join(format!("eis-expand-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        for name in ["a.csv", "b.csv", "c.csv"] {
            std::fs::write(dir.join(name), "1,2,3\n").unwrap();
        }
        let d = dir.display().to_string();
        let args = [
            format!("{d}/b.csv"),
            d.clone(),
            format!("{d}/*.csv"),
            format!("{d}/b.csv"),
        ];
        let got = expand(&args).unwrap();
        let names: Vec<String> = got
            .iter()
            .map(|p| p.file_name().unwrap().to_string_lossy().into_owned())
            .collect();
        assert_eq!(names, ["b.csv", "a.csv", "c.csv"]);
        std::fs::remove_dir_all(&dir).unwrap();
    }
}
