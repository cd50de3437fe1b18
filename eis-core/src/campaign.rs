//! Campaigns: every spectrum of many files checked (Kramers–Kronig) and fitted, in parallel, with warm
//! starts along each cell's series, resumable, with outputs written atomically.
//!
//! # How a run goes
//!
//! 1. **Index.** Every input is read once with the streaming reader; only file, spectrum number, point
//!    count and metadata are kept (memory does not grow with the spectra).
//! 2. **Series.** Spectra are grouped by cell (the `cell` field, else the file stem) and SOC level (the
//!    `soc` field, when present), and each group is ordered by cycle, then time, then file and spectrum
//!    number. A group is cut into chunks of [`BatchSettings::chunk`] spectra.
//! 3. **Work.** The first spectrum of the first chunk is fitted from automatic starts and serves as the
//!    starting point of every chunk. Chunks then run in parallel (rayon). Within a chunk each spectrum is
//!    checked and fitted, the fit warm-started from its predecessor's result; [`crate::fit::fit`] falls back to the automatic
//!    start when the warm start ends on a bound or with trending residuals. Each result is appended, as
//!    one JSON line, to a journal in the output folder the moment it is done.
//! 4. **Finish.** `results.jsonl` and `results.csv` are written from the journal, sorted by file and
//!    spectrum, each through a temporary file renamed over the target: a reader sees the old or the new
//!    file, never half of one. The journal is then removed.
//!
//! An interrupted run leaves its journal; a run with `resume` skips every spectrum found in the
//! journal or in an existing `results.jsonl` and continues the warm-start chains from their results, so
//! that the final files equal those of an uninterrupted run. Input files are only ever read.

use crate::circuit::Circuit;
use crate::derive::derive;
use crate::fit::{FitSettings, fit};
use crate::import::{ReaderOptions, SpectrumReader};
use crate::number::format_float;
use crate::report::{FitDocument, document};
use crate::spectrum::{MetaValue, Spectrum};
use crate::validate::{KkOptions, kramers_kronig};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::collections::{BTreeMap, HashMap, HashSet};
use std::io::{BufRead, BufReader, Write};
use std::path::{Path, PathBuf};
use std::sync::Mutex;

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
}

impl Default for BatchSettings {
    fn default() -> Self {
        BatchSettings {
            fit: FitSettings::default(),
            kk: KkOptions::default(),
            warm_start: true,
            chunk: 64,
            reader: ReaderOptions::default(),
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
    pub mu: f64,
    /// Voigt elements used.
    pub elements: usize,
    /// RMS residual, %.
    pub residual_rms_percent: f64,
    /// Largest residual, %.
    pub residual_max_percent: f64,
    /// Frequency range of residuals above the limit.
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
    /// Whether the fit was warm-started from the previous spectrum of the series.
    pub warm_started: bool,
    /// Kramers–Kronig summary.
    pub kk: Option<KkSummary>,
    /// The fit document.
    pub fit: Option<FitDocument>,
}

impl SpectrumResult {
    fn key(&self) -> (String, usize) {
        (self.file.clone(), self.spectrum)
    }
}

/// One indexed spectrum.
#[derive(Debug, Clone)]
struct Entry {
    file: PathBuf,
    spectrum: usize,
    metadata: BTreeMap<String, MetaValue>,
    error: Option<String>,
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
}

/// The journal of finished spectra inside the output folder.
pub const JOURNAL: &str = ".results.journal.jsonl";

/// Builds the index of every spectrum in `inputs`. Unreadable files and bad spectra become entries
/// with their error, so that they are reported and the rest carries on.
fn index(inputs: &[PathBuf], reader: &ReaderOptions) -> Vec<Entry> {
    let mut out = Vec::new();
    for path in inputs {
        let name = path.display().to_string();
        match SpectrumReader::open(path, reader.clone()) {
            Err(e) => out.push(Entry {
                file: path.clone(),
                spectrum: 1,
                metadata: BTreeMap::new(),
                error: Some(e.to_string()),
            }),
            Ok(r) => {
                let mut n = 0;
                for item in r {
                    n += 1;
                    match item {
                        Ok(imp) => out.push(Entry {
                            file: path.clone(),
                            spectrum: imp.spectrum.meta.spectrum,
                            metadata: imp.spectrum.meta.fields.into_iter().collect(),
                            error: None,
                        }),
                        Err(e) => out.push(Entry {
                            file: path.clone(),
                            spectrum: e.spectrum.unwrap_or(n),
                            metadata: BTreeMap::new(),
                            error: Some(e.to_string()),
                        }),
                    }
                }
                if n == 0 {
                    out.push(Entry {
                        file: path.clone(),
                        spectrum: 1,
                        metadata: BTreeMap::new(),
                        error: Some(format!("{name}: no spectrum found")),
                    });
                }
            }
        }
    }
    out
}

fn field(m: &BTreeMap<String, MetaValue>, name: &str) -> Option<f64> {
    m.get(name).and_then(MetaValue::as_f64)
}

/// The series key of an entry: cell, and SOC level when present.
fn series_key(e: &Entry) -> (String, Option<i64>) {
    let cell = match e.metadata.get("cell") {
        Some(v) => v.to_string(),
        None => e
            .file
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_default(),
    };
    let soc = field(&e.metadata, "soc").map(|s| (s * 1e6).round() as i64);
    (cell, soc)
}

/// Groups and orders entries into warm-start chains (indices into `entries`), cut into chunks.
fn chains(entries: &[Entry], chunk: usize) -> Vec<Vec<usize>> {
    let mut groups: BTreeMap<(String, Option<i64>), Vec<usize>> = BTreeMap::new();
    for (i, e) in entries.iter().enumerate() {
        if e.error.is_none() {
            groups.entry(series_key(e)).or_default().push(i);
        }
    }
    let mut out = Vec::new();
    for (_, mut idx) in groups {
        idx.sort_by(|&a, &b| {
            let (ea, eb) = (&entries[a], &entries[b]);
            let num = |e: &Entry, k: &str| field(&e.metadata, k).unwrap_or(f64::NEG_INFINITY);
            num(ea, "cycle")
                .total_cmp(&num(eb, "cycle"))
                .then(num(ea, "time").total_cmp(&num(eb, "time")))
                .then(ea.file.cmp(&eb.file))
                .then(ea.spectrum.cmp(&eb.spectrum))
        });
        for c in idx.chunks(chunk.max(1)) {
            out.push(c.to_vec());
        }
    }
    out
}

/// Reads one spectrum again (the last file read is cached per worker).
struct FileCache {
    path: Option<PathBuf>,
    spectra: HashMap<usize, Spectrum>,
}

impl FileCache {
    fn get(&mut self, path: &Path, n: usize, reader: &ReaderOptions) -> Result<Spectrum, String> {
        if self.path.as_deref() != Some(path) {
            self.spectra.clear();
            let r = SpectrumReader::open(path, reader.clone()).map_err(|e| e.to_string())?;
            for imp in r.flatten() {
                self.spectra
                    .insert(imp.spectrum.meta.spectrum, imp.spectrum);
            }
            self.path = Some(path.to_path_buf());
        }
        self.spectra
            .get(&n)
            .cloned()
            .ok_or_else(|| format!("{}: spectrum {n} could not be read again", path.display()))
    }
}

/// Checks and fits one spectrum.
fn process(
    circuit: &Circuit,
    entry: &Entry,
    spectrum: &Spectrum,
    settings: &BatchSettings,
    warm: Option<&(Vec<f64>, f64)>,
) -> SpectrumResult {
    let file = entry.file.display().to_string();
    let mut result = SpectrumResult {
        file: file.clone(),
        spectrum: entry.spectrum,
        metadata: entry.metadata.clone(),
        status: Status::Ok,
        message: String::new(),
        warm_started: false,
        kk: None,
        fit: None,
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
    let fit_settings = settings.fit.with_warm_reference(warm.map(|w| w.1));
    match fit(
        circuit,
        spectrum,
        &fit_settings,
        warm.map(|w| w.0.as_slice()),
    ) {
        Err(e) => {
            result.status = Status::Failed;
            result.message = format!("cannot fit: {e}");
            return result;
        }
        Ok(r) => {
            result.warm_started = warm.is_some();
            if !r.converged {
                problems.push(format!("fit did not converge ({})", r.termination));
            }
            for w in &r.warnings {
                if w.contains("bound") || w.contains("trend") {
                    problems.push(w.clone());
                }
            }
            let d = derive(circuit, &r);
            let mut doc = document(circuit, &r, &d, None);
            doc.file = Some(file);
            doc.spectrum = Some(entry.spectrum);
            result.fit = Some(doc);
        }
    }
    if !problems.is_empty() {
        result.status = Status::Suspect;
        result.message = problems.join("; ");
    }
    result
}

fn failed_entry(e: &Entry) -> SpectrumResult {
    SpectrumResult {
        file: e.file.display().to_string(),
        spectrum: e.spectrum,
        metadata: e.metadata.clone(),
        status: Status::Failed,
        message: e.error.clone().unwrap_or_default(),
        warm_started: false,
        kk: None,
        fit: None,
    }
}

/// Reads finished results from a JSON-lines file; a truncated last line (an interrupted write) is
/// ignored.
fn read_jsonl(path: &Path) -> Vec<SpectrumResult> {
    let Ok(f) = std::fs::File::open(path) else {
        return Vec::new();
    };
    BufReader::new(f)
        .lines()
        .map_while(Result::ok)
        .filter_map(|l| serde_json::from_str(&l).ok())
        .collect()
}

/// Writes `bytes` to `path` through a temporary file in the same folder and a rename.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> std::io::Result<()> {
    let dir = path
        .parent()
        .filter(|d| !d.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "out".into());
    let tmp = dir.join(format!(".{name}.tmp{}", std::process::id()));
    let r = (|| {
        let mut f = std::fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        std::fs::rename(&tmp, path)
    })();
    if r.is_err() {
        let _ = std::fs::remove_file(&tmp);
    }
    r
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
}

/// Runs a campaign: reads `inputs`, checks and fits every spectrum, writes `out/results.csv` and
/// `out/results.jsonl`. `progress(done, total)` is called after each spectrum (from worker threads).
///
/// # Errors
///
/// [`BatchError`] when the output folder cannot be used; problems with single spectra are results
/// (status failed), not errors.
pub fn run_batch(
    inputs: &[PathBuf],
    circuit: &Circuit,
    settings: &BatchSettings,
    out: &Path,
    resume: bool,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Result<Summary, BatchError> {
    let io_err = |path: &Path| {
        let path = path.display().to_string();
        move |source| BatchError::Output { path, source }
    };
    std::fs::create_dir_all(out).map_err(io_err(out))?;
    let results_jsonl = out.join("results.jsonl");
    let results_csv = out.join("results.csv");
    for target in [&results_jsonl, &results_csv] {
        if let Ok(t) = target.canonicalize() {
            if inputs
                .iter()
                .any(|i| i.canonicalize().is_ok_and(|c| c == t))
            {
                return Err(BatchError::OverwritesInput(target.display().to_string()));
            }
        }
    }
    let journal_path = out.join(JOURNAL);
    let entries = index(inputs, &settings.reader);
    let total = entries.len();

    // What is already done.
    let mut done: HashMap<(String, usize), SpectrumResult> = HashMap::new();
    if resume {
        for r in read_jsonl(&results_jsonl)
            .into_iter()
            .chain(read_jsonl(&journal_path))
        {
            done.insert(r.key(), r);
        }
    } else {
        let _ = std::fs::remove_file(&journal_path);
    }
    let skipped = entries
        .iter()
        .filter(|e| done.contains_key(&(e.file.display().to_string(), e.spectrum)))
        .count();

    let journal = Mutex::new(
        std::fs::OpenOptions::new()
            .create(true)
            .append(true)
            .open(&journal_path)
            .map_err(io_err(&journal_path))?,
    );
    let record = |r: &SpectrumResult| {
        if let Ok(mut line) = serde_json::to_string(r) {
            line.push('\n');
            let mut j = journal.lock().expect("journal lock");
            let _ = j.write_all(line.as_bytes());
            let _ = j.flush();
        }
    };
    let counter = std::sync::atomic::AtomicUsize::new(skipped);
    let tick = || {
        let n = counter.fetch_add(1, std::sync::atomic::Ordering::Relaxed) + 1;
        progress(n, total);
    };

    for e in entries.iter().filter(|e| e.error.is_some()) {
        if !done.contains_key(&(e.file.display().to_string(), e.spectrum)) {
            record(&failed_entry(e));
            tick();
        }
    }
    let work = chains(&entries, settings.chunk);
    // A template for the first spectrum of every chain: the first spectrum of the first chain, fitted
    // from automatic starts. Chains start warm from it (and fall back to automatic starts when that is
    // worse), so a campaign of many short series does not pay a cold fit per series.
    let template: Option<(Vec<f64>, f64)> = match work.first().and_then(|c| c.first()) {
        Some(&i) if settings.warm_start => {
            let e = &entries[i];
            let key = (e.file.display().to_string(), e.spectrum);
            let result = match done.get(&key) {
                Some(r) => Some(r.clone()),
                None => {
                    let mut cache = FileCache {
                        path: None,
                        spectra: HashMap::new(),
                    };
                    cache
                        .get(&e.file, e.spectrum, &settings.reader)
                        .ok()
                        .map(|s| {
                            let r = process(circuit, e, &s, settings, None);
                            record(&r);
                            tick();
                            r
                        })
                }
            };
            result.and_then(|r| {
                r.fit
                    .filter(|_| r.status == Status::Ok)
                    .map(|d| (d.warm_start_for(circuit).0, d.statistics.reduced_chi_square))
            })
        }
        _ => None,
    };
    let template_key = work
        .first()
        .and_then(|c| c.first())
        .filter(|_| settings.warm_start)
        .map(|&i| (entries[i].file.display().to_string(), entries[i].spectrum));
    work.par_iter().for_each(|chain| {
        let mut cache = FileCache {
            path: None,
            spectra: HashMap::new(),
        };
        let mut previous: Option<(Vec<f64>, f64)> = template.clone();
        // Reduced χ² of the chain so far: their median is the reference a warm start is judged by
        // (single values scatter by ±30 % with the noise, so the last one alone is a poor yardstick).
        let mut history: Vec<f64> = template.iter().map(|t| t.1).collect();
        for &i in chain {
            let e = &entries[i];
            let key = (e.file.display().to_string(), e.spectrum);
            if Some(&key) == template_key.as_ref() && !done.contains_key(&key) {
                // Fitted above as the template.
                previous = template.clone();
                continue;
            }
            if let Some(r) = done.get(&key) {
                // Continue the chain from the stored result.
                previous = r
                    .fit
                    .as_ref()
                    .map(|d| (d.warm_start_for(circuit).0, d.statistics.reduced_chi_square));
                if let Some(p) = &previous {
                    history.push(p.1);
                }
                continue;
            }
            let result = match cache.get(&e.file, e.spectrum, &settings.reader) {
                Err(msg) => SpectrumResult {
                    message: msg,
                    ..failed_entry(e)
                },
                Ok(s) => {
                    let warm = previous
                        .as_ref()
                        .filter(|_| settings.warm_start)
                        .map(|(v, chi)| (v.clone(), median(&history).unwrap_or(*chi)));
                    process(circuit, e, &s, settings, warm.as_ref())
                }
            };
            previous = match &result.fit {
                Some(d) if result.status != Status::Failed => {
                    Some((d.warm_start_for(circuit).0, d.statistics.reduced_chi_square))
                }
                _ => None,
            };
            if let Some(p) = &previous {
                history.push(p.1);
            }
            record(&result);
            tick();
        }
    });
    drop(journal);

    // Finish: every result, sorted, written atomically.
    let mut all: HashMap<(String, usize), SpectrumResult> = done;
    for r in read_jsonl(&journal_path) {
        all.insert(r.key(), r);
    }
    let mut results: Vec<SpectrumResult> = all.into_values().collect();
    results.sort_by(|a, b| a.file.cmp(&b.file).then(a.spectrum.cmp(&b.spectrum)));
    let mut jsonl = String::new();
    for r in &results {
        if let Ok(l) = serde_json::to_string(r) {
            jsonl.push_str(&l);
            jsonl.push('\n');
        }
    }
    let (csv, columns) = results_table(circuit, &results);
    write_atomic(&results_jsonl, jsonl.as_bytes()).map_err(io_err(&results_jsonl))?;
    write_atomic(&results_csv, csv.as_bytes()).map_err(io_err(&results_csv))?;
    let _ = std::fs::remove_file(&journal_path);

    let count = |s: Status| results.iter().filter(|r| r.status == s).count();
    Ok(Summary {
        total: results.len(),
        ok: count(Status::Ok),
        suspect: count(Status::Suspect),
        failed: count(Status::Failed),
        skipped,
        metadata_columns: columns,
    })
}

/// Median of a list (None when empty).
fn median(v: &[f64]) -> Option<f64> {
    let mut s: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
    if s.is_empty() {
        return None;
    }
    s.sort_by(f64::total_cmp);
    Some(s[s.len() / 2])
}

/// Quotes a CSV field when needed.
fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_owned()
    }
}

fn num(v: Option<f64>) -> String {
    v.map(format_float).unwrap_or_default()
}

/// The quantity columns of `results.csv`, in order, each followed by its `_stderr` column.
pub const QUANTITY_COLUMNS: [&str; 4] = [
    "ohmic_resistance_ohm",
    "charge_transfer_resistance_ohm",
    "diffusion_resistance_ohm",
    "dc_resistance_ohm",
];

/// `results.csv`: `file`, `spectrum`, the metadata columns, `status`, `message`, `kk_valid`, the
/// battery quantities with their `_stderr`, each arc's resistance (`arc_<resistor>_resistance_ohm`)
/// with its `_stderr`, every parameter with its `_stderr`, `reduced_chi_square`. Returns the text and
/// the metadata columns.
pub fn results_table(circuit: &Circuit, results: &[SpectrumResult]) -> (String, Vec<String>) {
    let mut meta: Vec<String> = Vec::new();
    for r in results {
        for k in r.metadata.keys() {
            if !meta.contains(k) {
                meta.push(k.clone());
            }
        }
    }
    // Conventional fields first, then the rest alphabetically.
    let order = ["cell", "cycle", "soc", "temperature", "time"];
    meta.sort_by_key(|k| {
        (
            order.iter().position(|o| o == k).unwrap_or(order.len()),
            k.clone(),
        )
    });
    let arcs: Vec<String> = results
        .iter()
        .find_map(|r| r.fit.as_ref())
        .map(|d| d.derived.arcs.iter().map(|a| a.resistor.clone()).collect())
        .unwrap_or_default();
    let mut header: Vec<String> = vec!["file".into(), "spectrum".into()];
    header.extend(meta.iter().cloned());
    header.extend(["status", "message", "kk_valid"].map(String::from));
    for q in QUANTITY_COLUMNS {
        header.push(q.into());
        header.push(format!("{q}_stderr"));
    }
    for a in &arcs {
        header.push(format!("arc_{a}_resistance_ohm"));
        header.push(format!("arc_{a}_resistance_ohm_stderr"));
    }
    for p in &circuit.params {
        header.push(p.name.clone());
        header.push(format!("{}_stderr", p.name));
    }
    header.push("reduced_chi_square".into());
    let mut out = header
        .iter()
        .map(|h| csv_field(h))
        .collect::<Vec<_>>()
        .join(",");
    out.push('\n');
    for r in results {
        let mut row: Vec<String> = vec![csv_field(&r.file), r.spectrum.to_string()];
        for k in &meta {
            row.push(csv_field(
                &r.metadata.get(k).map(|v| v.to_string()).unwrap_or_default(),
            ));
        }
        row.push(r.status.as_str().into());
        row.push(csv_field(&r.message));
        row.push(
            r.kk.as_ref()
                .map(|k| k.valid.to_string())
                .unwrap_or_default(),
        );
        let d = r.fit.as_ref().map(|f| &f.derived);
        let pairs = [
            d.map(|d| (d.ohmic_resistance_ohm, d.ohmic_resistance_ohm_stderr)),
            d.map(|d| {
                (
                    d.charge_transfer_resistance_ohm,
                    d.charge_transfer_resistance_ohm_stderr,
                )
            }),
            d.map(|d| {
                (
                    d.diffusion_resistance_ohm,
                    d.diffusion_resistance_ohm_stderr,
                )
            }),
            d.map(|d| (d.dc_resistance_ohm, d.dc_resistance_ohm_stderr)),
        ];
        for p in pairs {
            let (v, s) = p.unwrap_or((None, None));
            row.push(num(v));
            row.push(num(s));
        }
        for a in &arcs {
            let arc = d.and_then(|d| d.arcs.iter().find(|x| &x.resistor == a));
            row.push(num(arc.map(|x| x.resistance_ohm)));
            row.push(num(arc.and_then(|x| x.resistance_ohm_stderr)));
        }
        for p in &circuit.params {
            let e = r
                .fit
                .as_ref()
                .and_then(|f| f.parameters.iter().find(|q| q.name == p.name));
            row.push(num(e.map(|e| e.value)));
            row.push(num(e.and_then(|e| e.stderr)));
        }
        row.push(num(r.fit.as_ref().map(|f| f.statistics.reduced_chi_square)));
        out.push_str(&row.join(","));
        out.push('\n');
    }
    (out, meta)
}

/// Keys (file, spectrum) already present in a results folder, for callers that want to know what a
/// resume would skip.
pub fn finished(out: &Path) -> HashSet<(String, usize)> {
    read_jsonl(&out.join("results.jsonl"))
        .into_iter()
        .chain(read_jsonl(&out.join(JOURNAL)))
        .map(|r| r.key())
        .collect()
}
