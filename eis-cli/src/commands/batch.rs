//! `eis batch`: check and fit every spectrum of a campaign.

use crate::io::{Failure, Outcome, bad, load_model, step};
use anyhow::anyhow;
use eis_core::campaign::{BatchError, BatchSettings, ChainBy, Resume, Share, Stage, run_batch};
use eis_core::fit::joint::shared_indices;

use indicatif::{ProgressBar, ProgressStyle};
use std::collections::HashSet;
use std::io::IsTerminal;
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
    #[arg(allow_negative_numbers = true, long, value_parser = clap::value_parser!(u32).range(1..=256))]
    jobs: Option<u32>,
    /// Skip spectra already in the results (after an interrupted run). Refused when those results
    /// were made with another model, weighting, reader or check settings.
    #[arg(long)]
    resume: bool,
    /// With --resume: discard earlier results made with other settings and start afresh.
    #[arg(long, requires = "resume")]
    force: bool,
    /// Fit every spectrum from automatic starting values (no warm start from its neighbour).
    #[arg(long)]
    no_warm_start: bool,
    #[command(flatten)]
    fit: crate::args::FitArgs,
    /// Fit each chain at once with these parameters common to all its spectra (comma-separated names,
    /// e.g. Q1.n,Q2.n,Wt1.tau) and the others per spectrum. A chain is the spectra of one cell at one
    /// SOC level, ordered by cycle (see --share-by). Rows stay one per spectrum; the shared values are
    /// repeated and named in a last column `shared`.
    #[arg(long, value_name = "NAMES", value_delimiter = ',')]
    share: Vec<String>,
    /// How chains are formed for --share: one per cell and SOC level, or one per cell.
    #[arg(long, value_enum, default_value_t = ShareBy::CellSoc, requires = "share")]
    share_by: ShareBy,
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

/// How chains are formed for `--share`.
#[derive(Clone, Copy, clap::ValueEnum)]
enum ShareBy {
    /// One chain per cell and SOC level.
    CellSoc,
    /// One chain per cell, whatever the SOC level.
    Cell,
}

/// What identifies a folder however it is reached (through links, `..`, another spelling).
#[cfg(unix)]
type DirId = (u64, u64);
#[cfg(not(unix))]
type DirId = PathBuf;

/// The identity of folder `dir`: device and inode on Unix, the canonical path elsewhere.
fn dir_id(dir: &Path) -> Option<DirId> {
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt;
        std::fs::metadata(dir).ok().map(|m| (m.dev(), m.ino()))
    }
    #[cfg(not(unix))]
    {
        dir.canonicalize().ok()
    }
}

/// Files under `dir` with a data extension, recursively, sorted; hidden entries are skipped. Each real
/// folder is walked once, so a link back to a parent (a loop) or two links to one folder do not
/// repeat its files.
fn walk(dir: &Path, out: &mut Vec<PathBuf>, seen: &mut HashSet<DirId>) {
    if let Some(id) = dir_id(dir) {
        if !seen.insert(id) {
            return;
        }
    }
    let rd = match std::fs::read_dir(dir) {
        Ok(rd) => rd,
        Err(e) => {
            eprintln!("warning: cannot list {}: {e}", dir.display());
            return;
        }
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
            walk(&p, out, seen);
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
    let mut seen = HashSet::new();
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
            walk(&path, &mut out, &mut seen);
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
    use crate::commands::trend::{analyse_file, default_quantities};
    use crate::plot::build::trend as trend_plot;
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

/// Checks and fits every spectrum of `inputs` into `out` with a progress line on a terminal, and
/// prints the summary (what `eis batch` does before its trend plots and report; the demo calls it
/// directly). A usage problem (output folder, settings of earlier results) is `Failure::BadInput`.
pub fn execute(
    inputs: &[PathBuf],
    circuit: &eis_core::Circuit,
    settings: &BatchSettings,
    out: &Path,
    resume: Resume,
) -> Result<eis_core::campaign::Summary, Failure> {
    // A progress line on a terminal only: a log file or a pipe gets the summary alone.
    let bar = if std::io::stderr().is_terminal() {
        ProgressBar::new(0)
    } else {
        ProgressBar::hidden()
    };
    bar.set_style(
        ProgressStyle::with_template("{msg} {pos}/{len} [{elapsed_precise}] eta {eta}")
            .unwrap_or_else(|_| ProgressStyle::default_bar()),
    );
    let stage_now = std::sync::Mutex::new(None::<Stage>);
    let progress = |stage: Stage, done: usize, total: usize| {
        if let Ok(mut now) = stage_now.lock() {
            if *now != Some(stage) {
                *now = Some(stage);
                bar.reset();
                bar.set_length(total as u64);
                bar.set_message(match stage {
                    Stage::Reading => "reading files",
                    Stage::Fitting => "checking and fitting spectra",
                    _ => "writing results",
                });
            }
        }
        if bar.length() != Some(total as u64) {
            bar.set_length(total as u64);
        }
        bar.set_position(done as u64);
    };
    let summary = run_batch(inputs, circuit, settings, out, resume, &progress);
    bar.finish_and_clear();
    let summary = summary.map_err(|e| match e {
        BatchError::OverwritesInput(_) | BatchError::NotAFolder(_) => bad(anyhow!("{e}")),
        BatchError::SettingsDiffer { .. } => bad(anyhow!(
            "{e}; use --force to discard them and start afresh, or another --out folder"
        )),
        e => Failure::Failed(anyhow!("{e}")),
    })?;
    if let (Some(p), [first, rest @ ..]) =
        (&settings.reader.name_pattern, &summary.unmatched_names[..])
    {
        let more = if rest.is_empty() {
            String::new()
        } else {
            format!(" and {} more", rest.len())
        };
        eprintln!(
            "warning: {first}{more}: the file name does not match the name pattern `{}` (no metadata from the name)",
            p.as_str()
        );
    }
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
        out.join("results.csv").display(),
        out.join("results.jsonl").display()
    );
    Ok(summary)
}

/// Runs the command.
pub fn run(args: Args) -> Outcome {
    let circuit = load_model(&args.model)?;
    let inputs = expand(&args.inputs)?;
    let share = if args.share.is_empty() {
        None
    } else {
        // Names checked here, so that a typo is a usage error before any work.
        shared_indices(&circuit, &args.share).map_err(bad)?;
        Some(Share {
            names: args.share.iter().map(|n| n.trim().to_owned()).collect(),
            by: match args.share_by {
                ShareBy::CellSoc => ChainBy::CellAndSoc,
                ShareBy::Cell => ChainBy::Cell,
            },
        })
    };
    let settings = BatchSettings {
        fit: args.fit.settings(),
        warm_start: !args.no_warm_start,
        reader: args.reader.options()?,
        share,
        ..BatchSettings::default()
    };
    if let Some(j) = args.jobs {
        // Only the first call in a process can set the global pool; a second one is harmless.
        let _ = rayon::ThreadPoolBuilder::new()
            .num_threads(j as usize)
            .build_global();
    }
    let resume = match (args.resume, args.force) {
        (false, _) => Resume::No,
        (true, false) => Resume::Yes,
        (true, true) => Resume::YesOrRestart,
    };
    let summary = execute(&inputs, &circuit, &settings, &args.out, resume)?;
    if let Some(dir) = &args.plot {
        let spinner = step("writing trend plots");
        let written = write_trend_plots(&args.out.join("results.csv"), dir);
        spinner.finish_and_clear();
        written?;
        eprintln!("plots:   {}", dir.display());
    }
    if args.report {
        let spinner = step("writing the report");
        let written =
            crate::commands::report::write_report(&args.out, Some(&circuit), &settings.reader);
        spinner.finish_and_clear();
        written?;
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
