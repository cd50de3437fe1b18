//! Campaigns: every spectrum of many files checked (Kramers–Kronig) and fitted, in parallel, with warm
//! starts along each cell's series, resumable, with outputs written atomically.
//!
//! # How a run goes
//!
//! Each stage is a module: `index` (1), `chains` (2 and 3), `journal` (the journal and the recorded
//! settings, read back by a resume) and `results` (4, and the one owner of `results.csv`).
//!
//! 1. **Index.** Every input is read once with the streaming reader; only the file, the spectrum
//!    number and the few fields that order the series (cell, SOC, cycle, time) are kept.
//! 2. **Series.** Spectra are grouped by cell (the `cell` field, else the file stem) and SOC level (the
//!    `soc` field, when present), and each group is ordered by cycle, then time, then file and spectrum
//!    number. A group is cut into chunks of [`BatchSettings::chunk`] spectra.
//! 3. **Work.** The first spectrum of the first chunk is fitted from automatic starts and serves as the
//!    starting point of every chunk. Chunks then run in parallel (rayon). Within a chunk each spectrum is
//!    checked and fitted along the chain ([`crate::fit::chain::fit_in_chain`]): warm-started from its
//!    predecessor's result when a screening of fresh candidates finds nothing better (else the full
//!    automatic search), and among optima of comparable χ² the one whose arcs keep the predecessor's
//!    order. With shared parameters ([`Share`]) each chain is fitted at once instead
//!    ([`crate::fit::joint`]). Each result is appended, as one JSON line, to a journal in the output
//!    folder the moment it is done.
//! 4. **Finish.** `results.jsonl` and `results.csv` are written from the journal, sorted by file and
//!    spectrum, each through a temporary file renamed over the target: a reader sees the old or the new
//!    file, never half of one. The journal is then removed.
//!
//! An interrupted run leaves its journal; a run with `resume` skips every spectrum found in the
//! journal or in an existing `results.jsonl` and continues the warm-start chains from their results, so
//! that the final files equal those of an uninterrupted run. The settings the results depend on
//! ([`RunSettings`]: model, weighting, fit, reader and Kramers–Kronig settings) open the journal and are
//! kept beside the results ([`SETTINGS`]); a resume with other settings is refused
//! ([`BatchError::SettingsDiffer`]) unless told to start afresh ([`Resume::YesOrRestart`]). Input
//! files are only ever read.
//!
//! Every spectrum found is a row of the results: one that cannot be read, checked or fitted, or whose
//! processing panics, is a row with status failed and the reason. Numbers that are not finite (an
//! infinite time constant) are `null` in `results.jsonl` (read back as NaN) and empty cells in
//! `results.csv`. The output files go through [`crate::output`].
//!
//! # Memory
//!
//! Memory does not grow with the size of the results. Finished results live only in the journal (or a
//! previous `results.jsonl`); the run keeps, per spectrum, its key (file, spectrum number) and where its
//! line lies in that file. The finish reads the lines back one at a time in sorted order and streams
//! both output files. A worker holds the spectra of the chunk it is working on at most, each dropped
//! once fitted. What remains proportional to the number of spectra is a few hundred bytes each: keys,
//! line positions, series order and each input file's name.

mod advice;
mod chains;
mod index;
mod journal;
mod results;
#[cfg(test)]
mod tests;

pub use advice::{Advice, AdviceKind, advice};
pub use chains::{ChainBy, Share};
pub use journal::{JOURNAL, RunSettings, SETTINGS};
pub use results::{finished, results_quantities, results_table};

use crate::circuit::Circuit;
use crate::derive::derive;
use crate::fit::chain::{Identity, WarmVerdict, fit_in_chain};
use crate::fit::{FitResult, FitSettings};
use crate::import::ReaderOptions;
use crate::number::format_float;
use crate::output::OutputError;
use crate::report::{FitDocument, document};
use crate::spectrum::{MetaValue, Spectrum};
use crate::validate::{KkOptions, kramers_kronig};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::Mutex;
use std::sync::atomic::AtomicUsize;

/// The cell a spectrum belongs to: its `cell` field when it has a non-empty one, else the name of its
/// file without folder and extension. Series, trends and the report group spectra by it.
pub fn cell_name(cell: Option<&str>, file: &Path) -> String {
    match cell.filter(|c| !c.is_empty()) {
        Some(c) => c.to_owned(),
        None => file
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_default(),
    }
}

/// Settings of a batch.
#[derive(Debug, Clone)]
pub struct BatchSettings {
    /// Fit settings.
    pub fit: FitSettings,
    /// Kramers–Kronig settings.
    pub kk: KkOptions,
    /// Warm-start each fit from its predecessor in the series. Default true.
    pub warm_start: bool,
    /// Longest warm-start chain; longer series are cut so they can run in parallel. Default 64.
    pub chunk: usize,
    /// Reader settings.
    pub reader: ReaderOptions,
    /// Parameters fitted jointly along each chain, and how chains are formed. Default none: every
    /// spectrum is fitted on its own.
    pub share: Option<Share>,
}

impl Default for BatchSettings {
    fn default() -> Self {
        BatchSettings {
            fit: FitSettings::default(),
            kk: KkOptions::default(),
            warm_start: true,
            chunk: 64,
            reader: ReaderOptions::default(),
            share: None,
        }
    }
}

/// Outcome class of one spectrum.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Status {
    /// Checked and fitted without a warning sign.
    Ok,
    /// Fitted, but the spectrum failed the Kramers–Kronig check or the fit has warnings that matter
    /// (not converged, a parameter on a bound, trending residuals).
    Suspect,
    /// Could not be read or fitted.
    Failed,
}

impl Status {
    /// The word in results files.
    pub fn as_str(self) -> &'static str {
        match self {
            Status::Ok => "ok",
            Status::Suspect => "suspect",
            Status::Failed => "failed",
        }
    }
}

/// Summary of the Kramers–Kronig check of one spectrum.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct KkSummary {
    /// Verdict.
    pub valid: bool,
    /// μ of the chosen fit.
    #[serde(with = "crate::report::nullable")]
    pub mu: f64,
    /// Voigt elements used.
    pub elements: usize,
    /// RMS residual, %.
    #[serde(with = "crate::report::nullable")]
    pub residual_rms_percent: f64,
    /// Largest residual, %.
    #[serde(with = "crate::report::nullable")]
    pub residual_max_percent: f64,
    /// Frequency range of residuals above the limit.
    #[serde(with = "crate::report::nullable::pair")]
    pub suspect_frequency_range_hz: Option<(f64, f64)>,
}

/// One line of `results.jsonl`: the spectrum, its check and its fit document.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SpectrumResult {
    /// Input file.
    pub file: String,
    /// Spectrum number in the file, from 1.
    pub spectrum: usize,
    /// Metadata fields.
    pub metadata: BTreeMap<String, MetaValue>,
    /// Outcome class.
    pub status: Status,
    /// The first problem, or empty.
    pub message: String,
    /// Whether the fit came from a warm start (the previous spectrum's result), accepted because a
    /// screening of fresh candidates found nothing better.
    pub warm_started: bool,
    /// Kramers–Kronig summary.
    pub kk: Option<KkSummary>,
    /// The fit document.
    pub fit: Option<FitDocument>,
    /// Parameters fitted jointly with the rest of the chain (their values are the chain's), empty for
    /// a fit of its own.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub shared: Vec<String>,
    /// Spectra in the joint fit this result comes from.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub chain_spectra: Option<usize>,
}

/// What a run did.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Summary {
    /// Spectra in the results.
    pub total: usize,
    /// Of these: ok.
    pub ok: usize,
    /// Suspect.
    pub suspect: usize,
    /// Failed.
    pub failed: usize,
    /// Skipped because already in the results (resume).
    pub skipped: usize,
    /// Metadata columns found, in results order.
    pub metadata_columns: Vec<String>,
    /// Inputs whose names do not match the reader's name pattern (so no metadata came from their
    /// names), in input order.
    pub unmatched_names: Vec<String>,
}

/// What to do with results already in the output folder.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub enum Resume {
    /// Start afresh; earlier results are replaced.
    No,
    /// Skip every spectrum already in the results; refuse ([`BatchError::SettingsDiffer`]) when they
    /// were made with other settings.
    Yes,
    /// As [`Resume::Yes`], but results made with other settings are discarded (the run starts afresh).
    YesOrRestart,
}

/// The steps of a run, as reported to the progress callback.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub enum Stage {
    /// Reading every input to index its spectra (counts files).
    Reading,
    /// Checking and fitting (counts spectra).
    Fitting,
    /// Writing the results files (counts rows).
    Writing,
}

/// Why a batch could not run at all.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum BatchError {
    /// The output folder cannot be made or written.
    #[error("output folder {path}: {source}")]
    Output {
        /// The folder or file.
        path: String,
        /// The cause.
        source: std::io::Error,
    },
    /// An output would overwrite an input.
    #[error("refusing to write into {0}: it is an input file")]
    OverwritesInput(String),
    /// The output folder names something that is not a folder (a file, a device).
    #[error("output folder {0} is not a folder")]
    NotAFolder(String),
    /// An output file cannot be written (a folder in its place, a loop of links).
    #[error("{0}")]
    OutputFile(OutputError),
    /// A resumed run whose settings differ from those of the results already in the folder.
    #[error(
        "cannot resume in {folder}: its results were made with another {setting} (was `{was}`, now `{now}`)"
    )]
    SettingsDiffer {
        /// The output folder.
        folder: String,
        /// Which setting differs.
        setting: &'static str,
        /// Its value in the earlier run.
        was: String,
        /// Its value now.
        now: String,
    },
}

impl From<OutputError> for BatchError {
    fn from(e: OutputError) -> Self {
        match e {
            OutputError::OverwritesInput(p) => BatchError::OverwritesInput(p),
            e => BatchError::OutputFile(e),
        }
    }
}

/// The message of a caught panic.
fn panic_message(payload: &(dyn std::any::Any + Send)) -> String {
    if let Some(s) = payload.downcast_ref::<&str>() {
        (*s).to_owned()
    } else if let Some(s) = payload.downcast_ref::<String>() {
        s.clone()
    } else {
        "unknown panic".to_owned()
    }
}

/// Runs `f`, turning a panic into an error message: one spectrum's fault must not stop a batch.
fn guarded<T>(f: impl FnOnce() -> T) -> Result<T, String> {
    std::panic::catch_unwind(std::panic::AssertUnwindSafe(f))
        .map_err(|p| format!("internal error: {}", panic_message(p.as_ref())))
}
/// Checks and fits one spectrum of a chain: the fit warm-started from `warm` and keeping the arc
/// identity of `neighbour` (the previous spectrum's values), see [`crate::fit::chain`].
fn process(
    circuit: &Circuit,
    file: &str,
    n: usize,
    spectrum: &Spectrum,
    settings: &BatchSettings,
    warm: Option<&(Vec<f64>, f64)>,
    neighbour: Option<&[f64]>,
) -> SpectrumResult {
    // The last line of defence is tested with a planted fault.
    #[cfg(test)]
    if file.ends_with("panics-in-test.csv") {
        panic!("planted fault");
    }
    let (mut result, mut problems) = check(file, n, spectrum, settings);
    let fit_settings = settings.fit.with_warm_reference(warm.map(|w| w.1));
    match fit_in_chain(
        circuit,
        spectrum,
        &fit_settings,
        warm.map(|w| w.0.as_slice()),
        neighbour,
    ) {
        Err(e) => {
            result.status = Status::Failed;
            result.message = format!("cannot fit: {e}");
            return result;
        }
        Ok(r) => {
            result.warm_started = r.warm == WarmVerdict::Accepted;
            if let Identity::ForcedJump { .. } = r.identity {
                problems.push(r.identity.to_string());
            }
            conclude(circuit, file, n, &r.result, &mut result, &mut problems);
        }
    }
    finish_status(&mut result, problems);
    result
}

/// The Kramers–Kronig check of one spectrum: a result holding its summary, and the problems found.
fn check(
    file: &str,
    n: usize,
    spectrum: &Spectrum,
    settings: &BatchSettings,
) -> (SpectrumResult, Vec<String>) {
    let mut result = SpectrumResult {
        file: file.to_owned(),
        spectrum: n,
        metadata: spectrum.meta.fields.iter().cloned().collect(),
        status: Status::Ok,
        message: String::new(),
        warm_started: false,
        kk: None,
        fit: None,
        shared: Vec::new(),
        chain_spectra: None,
    };
    let mut problems: Vec<String> = Vec::new();
    match kramers_kronig(spectrum, &settings.kk) {
        Ok(k) => {
            if !k.valid {
                let range = k
                    .suspect_frequency_range_hz
                    .map(|(lo, hi)| {
                        format!(" between {} and {} Hz", format_float(lo), format_float(hi))
                    })
                    .unwrap_or_default();
                problems.push(format!(
                    "failed the Kramers-Kronig check (max residual {:.2} %{range})",
                    k.residual_max_percent
                ));
            }
            result.kk = Some(KkSummary {
                valid: k.valid,
                mu: k.mu,
                elements: k.elements,
                residual_rms_percent: k.residual_rms_percent,
                residual_max_percent: k.residual_max_percent,
                suspect_frequency_range_hz: k.suspect_frequency_range_hz,
            });
        }
        Err(e) => problems.push(format!("Kramers-Kronig check not possible: {e}")),
    }
    (result, problems)
}

/// Puts a fit into `result`: its document, and the warnings that matter among the problems.
fn conclude(
    circuit: &Circuit,
    file: &str,
    n: usize,
    r: &FitResult,
    result: &mut SpectrumResult,
    problems: &mut Vec<String>,
) {
    if !r.converged {
        problems.push(format!("fit did not converge ({})", r.termination));
    }
    for w in r.warnings.iter().filter(|w| w.marks_suspect()) {
        problems.push(w.to_string());
    }
    let d = derive(circuit, r);
    let mut doc = document(circuit, r, &d, None);
    doc.file = Some(file.to_owned());
    doc.spectrum = Some(n);
    result.fit = Some(doc);
}

/// Status and message from the problems found.
fn finish_status(result: &mut SpectrumResult, problems: Vec<String>) {
    if !problems.is_empty() {
        result.status = Status::Suspect;
        result.message = problems.join("; ");
    }
}

/// The result of a spectrum that could not be read.
fn failed(file: &str, spectrum: usize, message: String) -> SpectrumResult {
    SpectrumResult {
        file: file.to_owned(),
        spectrum,
        metadata: BTreeMap::new(),
        status: Status::Failed,
        message,
        warm_started: false,
        kk: None,
        fit: None,
        shared: Vec::new(),
        chain_spectra: None,
    }
}

/// The files of an output folder.
#[derive(Debug)]
struct Paths {
    folder: PathBuf,
    results_jsonl: PathBuf,
    results_csv: PathBuf,
    /// The settings beside the results ([`SETTINGS`]).
    settings: PathBuf,
    /// The journal ([`JOURNAL`]).
    journal: PathBuf,
}

impl Paths {
    /// Makes the output folder `out` if needed and names its files.
    ///
    /// # Errors
    ///
    /// When `out` is not a folder or cannot be made, or a results file would overwrite an input.
    fn prepare(out: &Path, inputs: &[PathBuf]) -> Result<Paths, BatchError> {
        if out.exists() && !out.is_dir() {
            return Err(BatchError::NotAFolder(out.display().to_string()));
        }
        std::fs::create_dir_all(out).map_err(io_err(out))?;
        let paths = Paths {
            folder: out.to_path_buf(),
            results_jsonl: out.join("results.jsonl"),
            results_csv: out.join("results.csv"),
            settings: out.join(SETTINGS),
            journal: out.join(JOURNAL),
        };
        for target in [&paths.results_jsonl, &paths.results_csv] {
            if inputs.iter().any(|i| crate::output::same_file(target, i)) {
                return Err(BatchError::OverwritesInput(target.display().to_string()));
            }
        }
        Ok(paths)
    }
}

/// The error of an output file or folder that cannot be used.
fn io_err(path: &Path) -> impl FnOnce(std::io::Error) -> BatchError {
    let path = path.display().to_string();
    move |source| BatchError::Output { path, source }
}

/// Runs a campaign: reads `inputs`, checks and fits every spectrum, writes `out/results.csv` and
/// `out/results.jsonl`. `progress(stage, done, total)` is called as the work advances (from worker
/// threads).
///
/// Every spectrum found, and every input that could not be read, is a row of the results: a spectrum
/// that cannot be read, checked or fitted (or whose processing fails in an unforeseen way) is a row
/// with status failed and the reason.
///
/// # Errors
///
/// [`BatchError`] when the output folder cannot be used (including a journal that cannot be
/// written, in which case the journal is left for a later `resume`), or when a resumed run's settings
/// differ from the earlier run's; problems with single spectra are results (status failed), not
/// errors.
pub fn run_batch(
    inputs: &[PathBuf],
    circuit: &Circuit,
    settings: &BatchSettings,
    out: &Path,
    resume: Resume,
    progress: &(dyn Fn(Stage, usize, usize) + Sync),
) -> Result<Summary, BatchError> {
    let paths = Paths::prepare(out, inputs)?;
    let now = RunSettings::new(circuit, settings);
    let resume = journal::may_resume(&paths, &now, resume)?;
    let index::Index {
        entries,
        mut files,
        cells,
        unmatched,
    } = index::Index::build(inputs, &settings.reader, progress);
    let done = if resume {
        journal::Finished::read(&paths, &mut files)
    } else {
        let _ = std::fs::remove_file(&paths.journal);
        journal::Finished::default()
    };
    let skipped = entries
        .iter()
        .filter(|e| done.locs.contains_key(&e.key()))
        .count();
    let mut journal =
        journal::Journal::open(&paths.journal, done.meta_sets).map_err(io_err(&paths.journal))?;
    journal
        .note_settings(&now)
        .map_err(io_err(&paths.journal))?;
    let journal = chains::Work {
        inputs,
        circuit,
        settings,
        entries: &entries,
        files: &files,
        done: &done.locs,
        paths: &paths,
        journal: Mutex::new(journal),
        counter: AtomicUsize::new(skipped),
        progress,
    }
    .run(cells);
    drop(entries);
    if let Some(e) = journal.error {
        return Err(io_err(&paths.journal)(e));
    }
    drop(journal.file);
    let summary = Summary {
        skipped,
        unmatched_names: unmatched,
        ..Summary::default()
    };
    results::Finish {
        inputs,
        circuit,
        paths: &paths,
        files: &files,
        progress,
    }
    .write(
        done.locs,
        journal.added,
        journal.meta_sets,
        journal::SettingsLine { settings: now },
        summary,
    )
}
