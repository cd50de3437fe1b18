//! Campaigns: every spectrum of many files checked (Kramers–Kronig) and fitted, in parallel, with warm
//! starts along each cell's series, resumable, with outputs written atomically.
//!
//! # How a run goes
//!
//! 1. **Index.** Every input is read once with the streaming reader; only the file, the spectrum
//!    number and the few fields that order the series (cell, SOC, cycle, time) are kept.
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

use crate::circuit::Circuit;
use crate::derive::derive;
use crate::fit::{FitSettings, fit};
use crate::import::{ReaderOptions, SpectrumReader, WarningKind};
use crate::number::format_float;
use crate::output::{OutputError, OutputFile};
use crate::report::{FitDocument, document};
use crate::spectrum::{MetaValue, Spectrum};
use crate::validate::{KkOptions, kramers_kronig};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::collections::{BTreeMap, BTreeSet, HashMap, HashSet};
use std::fs::File;
use std::io::{self, BufRead, BufReader, Read, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};

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
    /// Whether the fit was warm-started from the previous spectrum of the series.
    pub warm_started: bool,
    /// Kramers–Kronig summary.
    pub kk: Option<KkSummary>,
    /// The fit document.
    pub fit: Option<FitDocument>,
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

/// The journal of finished spectra inside the output folder.
pub const JOURNAL: &str = ".results.journal.jsonl";

/// Names stored once each (file names, cell names) and referred to by number.
#[derive(Debug, Default)]
struct Names {
    list: Vec<Arc<str>>,
    ids: HashMap<Arc<str>, u32>,
}

impl Names {
    /// The number of `name`, adding it when new.
    fn id(&mut self, name: &str) -> u32 {
        if let Some(&i) = self.ids.get(name) {
            return i;
        }
        // More than 2^32 names would need more memory than any machine has for the names alone.
        let i = u32::try_from(self.list.len()).unwrap_or(u32::MAX);
        let name: Arc<str> = Arc::from(name);
        self.list.push(name.clone());
        self.ids.insert(name, i);
        i
    }

    fn get(&self, id: u32) -> &str {
        self.list.get(id as usize).map_or("", |n| n)
    }
}

/// A spectrum's key: file (a number in [`Names`]) and spectrum number in the file.
type Key = (u32, usize);

/// Where a series entry sits: its group (cell, SOC level) and its place in the group.
#[derive(Debug, Clone, Copy)]
struct Series {
    cell: u32,
    soc: Option<i64>,
    cycle: f64,
    time: f64,
}

/// One indexed spectrum.
#[derive(Debug, Clone)]
struct Entry {
    /// Index into the inputs.
    input: usize,
    /// The file's name (as written in the results), a number in [`Names`].
    file: u32,
    spectrum: usize,
    /// Where it goes in the series; None for spectra that could not be read.
    series: Option<Series>,
    error: Option<String>,
}

impl Entry {
    fn key(&self) -> Key {
        (self.file, self.spectrum)
    }
}

/// The value of metadata field `name`; the last one wins, as when the fields are collected into a map.
fn meta_field<'a>(fields: &'a [(String, MetaValue)], name: &str) -> Option<&'a MetaValue> {
    fields.iter().rev().find(|(n, _)| n == name).map(|(_, v)| v)
}

/// Builds the index of every spectrum in `inputs`. Unreadable files and bad spectra become entries
/// with their error, so that they are reported and the rest carries on.
fn index(
    inputs: &[PathBuf],
    reader: &ReaderOptions,
    files: &mut Names,
    cells: &mut Names,
    unmatched: &mut Vec<String>,
    progress: &(dyn Fn(Stage, usize, usize) + Sync),
) -> Vec<Entry> {
    // Files are read in parallel; names are then numbered in input order, so ids do not depend on
    // which thread finished first.
    let read = std::sync::atomic::AtomicUsize::new(0);
    let scanned: Vec<Vec<Found>> = inputs
        .par_iter()
        .map(|p| {
            let found = guarded(|| scan(p, reader)).unwrap_or_else(|error| {
                vec![Found::Failed {
                    spectrum: 1,
                    error: format!("{}: {error}", p.display()),
                }]
            });
            let n = read.fetch_add(1, std::sync::atomic::Ordering::Relaxed) + 1;
            progress(Stage::Reading, n, inputs.len());
            found
        })
        .collect();
    let mut out = Vec::new();
    for (input, (path, found)) in inputs.iter().zip(scanned).enumerate() {
        let name = path.display().to_string();
        let file = files.id(&name);
        if found.iter().any(|f| matches!(f, Found::UnmatchedName)) {
            unmatched.push(name);
        }
        for f in found {
            out.push(match f {
                Found::UnmatchedName => continue,
                Found::Spectrum {
                    spectrum,
                    cell,
                    soc,
                    cycle,
                    time,
                } => Entry {
                    input,
                    file,
                    spectrum,
                    series: Some(Series {
                        cell: cells.id(&cell),
                        soc,
                        cycle,
                        time,
                    }),
                    error: None,
                },
                Found::Failed { spectrum, error } => Entry {
                    input,
                    file,
                    spectrum,
                    series: None,
                    error: Some(error),
                },
            });
        }
    }
    out
}

/// What the index learns about one spectrum of a file, before names are numbered.
enum Found {
    Spectrum {
        spectrum: usize,
        cell: String,
        soc: Option<i64>,
        cycle: f64,
        time: f64,
    },
    Failed {
        spectrum: usize,
        error: String,
    },
    /// The file name does not match the name pattern.
    UnmatchedName,
}

/// Reads one file for the index: the series keys of each spectrum, or the error.
fn scan(path: &Path, reader: &ReaderOptions) -> Vec<Found> {
    let failed = |spectrum: usize, error: String| Found::Failed { spectrum, error };
    let r = match SpectrumReader::open(path, reader.clone()) {
        Err(e) => return vec![failed(1, e.to_string())],
        Ok(r) => r,
    };
    let mut out = Vec::new();
    for (k, item) in r.enumerate() {
        match item {
            Ok(imp) => {
                if imp
                    .warnings
                    .iter()
                    .any(|w| matches!(w.kind, WarningKind::NameMismatch(_)))
                {
                    out.push(Found::UnmatchedName);
                }
                let fields = &imp.spectrum.meta.fields;
                let num = |k: &str| meta_field(fields, k).and_then(MetaValue::as_f64);
                let cell = match meta_field(fields, "cell") {
                    Some(v) => v.to_string(),
                    None => path
                        .file_stem()
                        .map(|s| s.to_string_lossy().into_owned())
                        .unwrap_or_default(),
                };
                out.push(Found::Spectrum {
                    spectrum: imp.spectrum.meta.spectrum,
                    cell,
                    soc: num("soc").map(|s| (s * 1e6).round() as i64),
                    cycle: num("cycle").unwrap_or(f64::NEG_INFINITY),
                    time: num("time").unwrap_or(f64::NEG_INFINITY),
                });
            }
            Err(e) => out.push(failed(e.spectrum.unwrap_or(k + 1), e.to_string())),
        }
    }
    if !out.iter().any(|f| !matches!(f, Found::UnmatchedName)) {
        out.push(failed(1, format!("{}: no spectrum found", path.display())));
    }
    out
}

/// Groups and orders entries into warm-start chains (indices into `entries`), cut into chunks.
fn chains(entries: &[Entry], inputs: &[PathBuf], cells: &Names, chunk: usize) -> Vec<Vec<usize>> {
    let mut groups: BTreeMap<(&str, Option<i64>), Vec<usize>> = BTreeMap::new();
    for (i, e) in entries.iter().enumerate() {
        if let (None, Some(s)) = (&e.error, &e.series) {
            groups
                .entry((cells.get(s.cell), s.soc))
                .or_default()
                .push(i);
        }
    }
    let mut out = Vec::new();
    for (_, mut idx) in groups {
        idx.sort_by(|&a, &b| {
            let (ea, eb) = (&entries[a], &entries[b]);
            let (sa, sb) = (ea.series.as_ref(), eb.series.as_ref());
            let num = |s: Option<&Series>, f: fn(&Series) -> f64| s.map_or(f64::NEG_INFINITY, f);
            num(sa, |s| s.cycle)
                .total_cmp(&num(sb, |s| s.cycle))
                .then(num(sa, |s| s.time).total_cmp(&num(sb, |s| s.time)))
                .then(inputs[ea.input].cmp(&inputs[eb.input]))
                .then(ea.spectrum.cmp(&eb.spectrum))
        });
        for c in idx.chunks(chunk.max(1)) {
            out.push(c.to_vec());
        }
    }
    out
}

/// The spectra one chain still needs. Reading a file keeps only those of its spectra the chain has yet
/// to fit, and each is dropped once handed out, so a worker never holds more than one chain's spectra
/// and never reads a file twice for one chain.
struct ChainCache {
    /// (input, spectrum) → how many more times it is wanted.
    needed: HashMap<(usize, usize), usize>,
    spectra: HashMap<(usize, usize), Spectrum>,
}

impl ChainCache {
    fn new(wanted: impl IntoIterator<Item = (usize, usize)>) -> ChainCache {
        let mut needed = HashMap::new();
        for k in wanted {
            *needed.entry(k).or_insert(0) += 1;
        }
        ChainCache {
            needed,
            spectra: HashMap::new(),
        }
    }

    /// Spectrum `n` of input `input` (at `path`), read again.
    fn take(
        &mut self,
        path: &Path,
        input: usize,
        n: usize,
        reader: &ReaderOptions,
    ) -> Result<Spectrum, String> {
        let key = (input, n);
        if !self.spectra.contains_key(&key) {
            let r = SpectrumReader::open(path, reader.clone()).map_err(|e| e.to_string())?;
            for imp in r.flatten() {
                let k = (input, imp.spectrum.meta.spectrum);
                if k == key || self.needed.contains_key(&k) {
                    self.spectra.insert(k, imp.spectrum);
                }
            }
        }
        let left = match self.needed.get_mut(&key) {
            Some(c) => {
                *c = c.saturating_sub(1);
                *c
            }
            None => 0,
        };
        let s = if left == 0 {
            self.needed.remove(&key);
            self.spectra.remove(&key)
        } else {
            self.spectra.get(&key).cloned()
        };
        s.ok_or_else(|| format!("{}: spectrum {n} could not be read again", path.display()))
    }
}

/// Checks and fits one spectrum.
fn process(
    circuit: &Circuit,
    file: &str,
    n: usize,
    spectrum: &Spectrum,
    settings: &BatchSettings,
    warm: Option<&(Vec<f64>, f64)>,
) -> SpectrumResult {
    // The last line of defence is tested with a planted fault.
    #[cfg(test)]
    if file.ends_with("panics-in-test.csv") {
        panic!("planted fault");
    }
    let mut result = SpectrumResult {
        file: file.to_owned(),
        spectrum: n,
        metadata: spectrum.meta.fields.iter().cloned().collect(),
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
            doc.file = Some(file.to_owned());
            doc.spectrum = Some(n);
            result.fit = Some(doc);
        }
    }
    if !problems.is_empty() {
        result.status = Status::Suspect;
        result.message = problems.join("; ");
    }
    result
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
    }
}

/// The two files finished results are read from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Source {
    /// A previous `results.jsonl`.
    Results = 0,
    /// The journal.
    Journal = 1,
}

/// Where one finished result's line lies, and the little the finish needs to know about it before
/// reading it back.
#[derive(Debug, Clone, Copy)]
struct Loc {
    source: Source,
    offset: u64,
    len: u64,
    /// Its set of metadata field names, a number in [`MetaSets`].
    meta: u32,
    has_fit: bool,
}

/// The distinct sets of metadata field names among the results (usually one), each stored once.
#[derive(Debug, Default)]
struct MetaSets {
    list: Vec<Vec<String>>,
    ids: HashMap<Vec<String>, u32>,
}

impl MetaSets {
    fn id(&mut self, metadata: &BTreeMap<String, MetaValue>) -> u32 {
        let names: Vec<String> = metadata.keys().cloned().collect();
        if let Some(&i) = self.ids.get(&names) {
            return i;
        }
        let i = u32::try_from(self.list.len()).unwrap_or(u32::MAX);
        self.list.push(names.clone());
        self.ids.insert(names, i);
        i
    }
}

/// Calls `f(result, offset, length)` for every line of a JSON-lines file of results, the length
/// without the line end, and returns the run settings recorded in it. Lines that are neither a result
/// nor settings (a truncated last line from an interrupted write, say) are skipped; a missing file has
/// no lines.
fn scan_jsonl(path: &Path, mut f: impl FnMut(SpectrumResult, u64, u64)) -> Vec<RunSettings> {
    let mut recorded = Vec::new();
    let Ok(file) = File::open(path) else {
        return recorded;
    };
    let mut r = BufReader::with_capacity(1 << 16, file);
    let mut line = Vec::new();
    let mut offset = 0u64;
    loop {
        line.clear();
        let n = match r.read_until(b'\n', &mut line) {
            Ok(0) | Err(_) => break,
            Ok(n) => n,
        };
        let start = offset;
        offset += n as u64;
        if line.last() == Some(&b'\n') {
            line.pop();
        }
        if let Ok(result) = serde_json::from_slice(&line) {
            f(result, start, line.len() as u64);
        } else if let Ok(s) = serde_json::from_slice::<SettingsLine>(&line) {
            recorded.push(s.settings);
        }
    }
    recorded
}

/// Reads finished results back from their lines, one at a time.
struct Store {
    paths: [PathBuf; 2],
    files: [Option<File>; 2],
    buf: Vec<u8>,
}

impl Store {
    fn new(results: &Path, journal: &Path) -> Store {
        Store {
            paths: [results.to_path_buf(), journal.to_path_buf()],
            files: [None, None],
            buf: Vec::new(),
        }
    }

    /// The result at `loc`; an [`io::ErrorKind::InvalidData`] error when the line is not a result.
    fn load(&mut self, loc: &Loc) -> io::Result<SpectrumResult> {
        let i = loc.source as usize;
        let mut f = match self.files[i].take() {
            Some(f) => f,
            None => File::open(&self.paths[i])?,
        };
        let len = usize::try_from(loc.len).map_err(io::Error::other)?;
        self.buf.resize(len, 0);
        let read = f
            .seek(SeekFrom::Start(loc.offset))
            .and_then(|_| f.read_exact(&mut self.buf));
        self.files[i] = Some(f);
        read?;
        serde_json::from_slice(&self.buf).map_err(|e| io::Error::new(io::ErrorKind::InvalidData, e))
    }

    /// The warm start (values, reduced χ²) a stored result offers its successor.
    fn warm_start(&mut self, loc: &Loc, circuit: &Circuit) -> Option<(Vec<f64>, f64)> {
        self.load(loc)
            .ok()?
            .fit
            .map(|d| (d.warm_start_for(circuit).0, d.statistics.reduced_chi_square))
    }
}

/// The journal being written: the file, its length, and where each new result went.
struct Journal {
    file: File,
    len: u64,
    added: Vec<(Key, Loc)>,
    meta_sets: MetaSets,
    error: Option<io::Error>,
}

impl Journal {
    /// Opens the journal for appending; a last line cut short by an interrupted write is closed with a
    /// line end, so that it stays a line of its own (and is skipped) instead of spoiling the next one.
    fn open(path: &Path, meta_sets: MetaSets) -> io::Result<Journal> {
        let mut file = std::fs::OpenOptions::new()
            .create(true)
            .append(true)
            .open(path)?;
        let mut len = file.metadata()?.len();
        if len > 0 {
            let mut last = [0u8];
            let mut r = File::open(path)?;
            r.seek(SeekFrom::Start(len - 1))?;
            r.read_exact(&mut last)?;
            if last[0] != b'\n' {
                file.write_all(b"\n")?;
                len += 1;
            }
        }
        Ok(Journal {
            file,
            len,
            added: Vec::new(),
            meta_sets,
            error: None,
        })
    }

    /// Appends the settings of the run, as a line of its own (not a result, so readers of results
    /// pass over it).
    fn note_settings(&mut self, settings: &RunSettings) -> io::Result<()> {
        let line = serde_json::to_string(&SettingsLine {
            settings: settings.clone(),
        })
        .map_err(io::Error::other)?;
        self.file.write_all(format!("{line}\n").as_bytes())?;
        self.len += line.len() as u64 + 1;
        Ok(())
    }

    /// Appends one result. A result that cannot be written as JSON (it cannot happen: non-finite
    /// numbers are written as null) is recorded as failed, so that its spectrum still has a row.
    fn record(&mut self, key: Key, r: &SpectrumResult) {
        let mut line = match serde_json::to_string(r) {
            Ok(line) => line,
            Err(e) => {
                let f = failed(&r.file, r.spectrum, format!("internal error: {e}"));
                serde_json::to_string(&f).unwrap_or_default()
            }
        };
        line.push('\n');
        let offset = self.len;
        match self.file.write_all(line.as_bytes()) {
            Ok(()) => {
                self.len += line.len() as u64;
                let loc = Loc {
                    source: Source::Journal,
                    offset,
                    len: line.len() as u64 - 1,
                    meta: self.meta_sets.id(&r.metadata),
                    has_fit: r.fit.is_some(),
                };
                self.added.push((key, loc));
            }
            Err(e) => {
                // Cut off whatever part was written, so later lines stay where they are counted.
                let _ = self.file.set_len(offset);
                self.error.get_or_insert(e);
            }
        }
    }
}

/// The settings a run's results depend on, in words. They are recorded as the first line of the
/// journal and in [`SETTINGS`] beside the results, so that a resumed run never mixes results made
/// with other settings.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct RunSettings {
    /// Canonical text of the model.
    pub model: String,
    /// Residual weighting.
    pub weighting: String,
    /// The other fit settings.
    pub fit: String,
    /// Whether fits are warm-started along each series.
    pub warm_start: bool,
    /// Reader settings.
    pub reader: String,
    /// Kramers–Kronig settings.
    pub kk: String,
}

impl RunSettings {
    /// The record of a run of `circuit` with `settings`.
    pub fn new(circuit: &Circuit, settings: &BatchSettings) -> RunSettings {
        RunSettings {
            model: crate::circuit::print(circuit),
            weighting: settings.fit.weighting.as_str().to_owned(),
            fit: format!("{:?}", settings.fit.with_warm_reference(None)),
            warm_start: settings.warm_start,
            reader: format!("{:?}", settings.reader),
            kk: format!("{:?}", settings.kk),
        }
    }

    /// The first setting in which `self` (an earlier run) differs from `now`: its name, the earlier
    /// value and the value now.
    pub fn difference(&self, now: &RunSettings) -> Option<(&'static str, String, String)> {
        let pairs = [
            ("model", &self.model, &now.model),
            ("weighting", &self.weighting, &now.weighting),
            ("fit settings", &self.fit, &now.fit),
            ("reader settings", &self.reader, &now.reader),
            ("Kramers-Kronig settings", &self.kk, &now.kk),
        ];
        if let Some((name, a, b)) = pairs.into_iter().find(|(_, a, b)| a != b) {
            let (a, b) = first_difference(a, b);
            return Some((name, a, b));
        }
        (self.warm_start != now.warm_start).then(|| {
            (
                "warm start",
                self.warm_start.to_string(),
                now.warm_start.to_string(),
            )
        })
    }
}

/// The first differing `field: value` item of two settings written as `Name { a: 1, b: 2 }`, so that
/// a message names the setting that changed rather than repeating both in full; the whole texts when
/// they do not split that way.
fn first_difference(a: &str, b: &str) -> (String, String) {
    let items = |s: &str| -> Vec<String> {
        let inner = s
            .split_once('{')
            .and_then(|(_, rest)| rest.strip_suffix('}'))
            .unwrap_or(s);
        inner.split(", ").map(|t| t.trim().to_owned()).collect()
    };
    let (ia, ib) = (items(a), items(b));
    if ia.len() == ib.len() {
        if let Some((x, y)) = ia.into_iter().zip(ib).find(|(x, y)| x != y) {
            return (x, y);
        }
    }
    (a.to_owned(), b.to_owned())
}

/// A line of the journal (or the file [`SETTINGS`]) holding the run's settings.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
struct SettingsLine {
    settings: RunSettings,
}

/// The settings of the run that wrote the results, beside them in the output folder.
pub const SETTINGS: &str = ".results.settings.json";

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
    let io_err = |path: &Path| {
        let path = path.display().to_string();
        move |source| BatchError::Output { path, source }
    };
    if out.exists() && !out.is_dir() {
        return Err(BatchError::NotAFolder(out.display().to_string()));
    }
    std::fs::create_dir_all(out).map_err(io_err(out))?;
    let results_jsonl = out.join("results.jsonl");
    let results_csv = out.join("results.csv");
    let settings_path = out.join(SETTINGS);
    for target in [&results_jsonl, &results_csv] {
        if inputs.iter().any(|i| crate::output::same_file(target, i)) {
            return Err(BatchError::OverwritesInput(target.display().to_string()));
        }
    }
    let journal_path = out.join(JOURNAL);
    let now = RunSettings::new(circuit, settings);

    // Results already there, and whether they were made with these settings.
    let mut resume = resume;
    if resume != Resume::No {
        let mut recorded: Vec<RunSettings> = std::fs::read(&settings_path)
            .ok()
            .and_then(|b| serde_json::from_slice::<SettingsLine>(&b).ok())
            .map(|l| l.settings)
            .into_iter()
            .collect();
        let mut models = BTreeSet::new();
        for path in [&results_jsonl, &journal_path] {
            recorded.extend(scan_jsonl(path, |r, _, _| {
                if let Some(d) = r.fit {
                    models.insert(d.model);
                }
            }));
        }
        // Results of a run that recorded no settings still name their model.
        let model_differs = models
            .into_iter()
            .find(|m| *m != now.model)
            .map(|m| ("model", m, now.model.clone()));
        let differs = recorded
            .iter()
            .find_map(|r| r.difference(&now))
            .or(model_differs);
        match (differs, resume) {
            (None, _) => {}
            (Some(_), Resume::YesOrRestart) => resume = Resume::No,
            (Some((setting, was, now)), _) => {
                return Err(BatchError::SettingsDiffer {
                    folder: out.display().to_string(),
                    setting,
                    was,
                    now,
                });
            }
        }
    }
    let resume = resume != Resume::No;
    let mut files = Names::default();
    let mut cells = Names::default();
    let mut unmatched_names = Vec::new();
    let entries = index(
        inputs,
        &settings.reader,
        &mut files,
        &mut cells,
        &mut unmatched_names,
        progress,
    );
    let total = entries.len();

    // What is already done: where each result's line is (a later line for the same key wins).
    let mut done: HashMap<Key, Loc> = HashMap::new();
    let mut meta_sets = MetaSets::default();
    if resume {
        for (path, source) in [
            (&results_jsonl, Source::Results),
            (&journal_path, Source::Journal),
        ] {
            scan_jsonl(path, |r, offset, len| {
                let loc = Loc {
                    source,
                    offset,
                    len,
                    meta: meta_sets.id(&r.metadata),
                    has_fit: r.fit.is_some(),
                };
                done.insert((files.id(&r.file), r.spectrum), loc);
            });
        }
    } else {
        let _ = std::fs::remove_file(&journal_path);
    }
    let files = files;
    let skipped = entries
        .iter()
        .filter(|e| done.contains_key(&e.key()))
        .count();

    let mut journal = Journal::open(&journal_path, meta_sets).map_err(io_err(&journal_path))?;
    journal.note_settings(&now).map_err(io_err(&journal_path))?;
    let journal = Mutex::new(journal);
    let record = |key: Key, r: &SpectrumResult| {
        journal
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
            .record(key, r);
    };
    let counter = std::sync::atomic::AtomicUsize::new(skipped);
    let tick = || {
        let n = counter.fetch_add(1, std::sync::atomic::Ordering::Relaxed) + 1;
        progress(Stage::Fitting, n, total);
    };

    for e in entries.iter().filter(|e| e.error.is_some()) {
        if !done.contains_key(&e.key()) {
            let r = failed(
                files.get(e.file),
                e.spectrum,
                e.error.clone().unwrap_or_default(),
            );
            record(e.key(), &r);
            tick();
        }
    }
    let work = chains(&entries, inputs, &cells, settings.chunk);
    drop(cells);
    // Fits one spectrum of a chain (or records why it could not be read again, or what went wrong).
    let fit_one = |e: &Entry, cache: &mut ChainCache, warm: Option<&(Vec<f64>, f64)>| {
        let file = files.get(e.file);
        let result =
            guarded(
                || match cache.take(&inputs[e.input], e.input, e.spectrum, &settings.reader) {
                    Err(msg) => failed(file, e.spectrum, msg),
                    Ok(s) => process(circuit, file, e.spectrum, &s, settings, warm),
                },
            )
            .unwrap_or_else(|msg| failed(file, e.spectrum, msg));
        record(e.key(), &result);
        tick();
        result
    };
    // A template for the first spectrum of every chain: the first spectrum of the first chain, fitted
    // from automatic starts. Chains start warm from it (and fall back to automatic starts when that is
    // worse), so a campaign of many short series does not pay a cold fit per series.
    let first = work
        .first()
        .and_then(|c| c.first())
        .copied()
        .filter(|_| settings.warm_start);
    let template_key = first.map(|i| entries[i].key());
    let template: Option<(Vec<f64>, f64)> = first.and_then(|i| {
        let e = &entries[i];
        match done.get(&e.key()) {
            Some(loc) => Store::new(&results_jsonl, &journal_path)
                .load(loc)
                .ok()
                .filter(|r| r.status == Status::Ok)
                .and_then(|r| r.fit)
                .map(|d| (d.warm_start_for(circuit).0, d.statistics.reduced_chi_square)),
            None => {
                let mut cache = ChainCache::new([(e.input, e.spectrum)]);
                let r = fit_one(e, &mut cache, None);
                r.fit
                    .filter(|_| r.status == Status::Ok)
                    .map(|d| (d.warm_start_for(circuit).0, d.statistics.reduced_chi_square))
            }
        }
    });
    work.par_iter().for_each(|chain| {
        let mut store = Store::new(&results_jsonl, &journal_path);
        let todo = |i: &&usize| {
            let k = entries[**i].key();
            !done.contains_key(&k) && Some(k) != template_key
        };
        let mut cache = ChainCache::new(
            chain
                .iter()
                .filter(todo)
                .map(|&i| (entries[i].input, entries[i].spectrum)),
        );
        let mut previous: Option<(Vec<f64>, f64)> = template.clone();
        // Reduced χ² of the chain so far: their median is the reference a warm start is judged by
        // (single values scatter by ±30 % with the noise, so the last one alone is a poor yardstick).
        let mut history: Vec<f64> = template.iter().map(|t| t.1).collect();
        for &i in chain {
            let e = &entries[i];
            let key = e.key();
            if Some(key) == template_key && !done.contains_key(&key) {
                // Fitted above as the template.
                previous = template.clone();
                continue;
            }
            if let Some(loc) = done.get(&key) {
                // Continue the chain from the stored result.
                previous = store.warm_start(loc, circuit);
                if let Some(p) = &previous {
                    history.push(p.1);
                }
                continue;
            }
            let warm = previous
                .as_ref()
                .filter(|_| settings.warm_start)
                .map(|(v, chi)| (v.clone(), median(&history).unwrap_or(*chi)));
            let result = fit_one(e, &mut cache, warm.as_ref());
            previous = match &result.fit {
                Some(d) if result.status != Status::Failed => {
                    Some((d.warm_start_for(circuit).0, d.statistics.reduced_chi_square))
                }
                _ => None,
            };
            if let Some(p) = &previous {
                history.push(p.1);
            }
        }
    });
    drop(entries);
    let journal = journal
        .into_inner()
        .unwrap_or_else(std::sync::PoisonError::into_inner);
    if let Some(e) = journal.error {
        return Err(io_err(&journal_path)(e));
    }
    drop(journal.file);

    // Finish: every result, sorted, streamed into temporary files renamed over the targets.
    let mut all = done;
    all.extend(journal.added);
    let mut order: Vec<(Key, Loc)> = all.into_iter().collect();
    order.sort_unstable_by(|a, b| {
        files
            .get(a.0.0)
            .cmp(files.get(b.0.0))
            .then(a.0.1.cmp(&b.0.1))
    });
    let meta_sets = journal.meta_sets;
    let used: BTreeSet<u32> = order.iter().map(|(_, l)| l.meta).collect();
    let meta = used
        .iter()
        .filter_map(|&i| meta_sets.list.get(i as usize))
        .flat_map(|names| names.iter().cloned());
    // The result at `loc`, read back; a line that is not a result (it cannot happen: every line was
    // read or written as one) is a failed row, never a spectrum lost without a word.
    let mut store = Store::new(&results_jsonl, &journal_path);
    let mut load = |key: &Key, loc: &Loc| match store.load(loc) {
        Ok(r) => Ok(Some(r)),
        // A line cut short since it was first read (the file changed under the run) likewise.
        Err(e)
            if matches!(
                e.kind(),
                io::ErrorKind::InvalidData | io::ErrorKind::UnexpectedEof
            ) =>
        {
            Ok(Some(failed(
                files.get(key.0),
                key.1,
                format!("internal error: its result cannot be read back: {e}"),
            )))
        }
        Err(e) => Err(io_err(&store.paths[loc.source as usize])(e)),
    };
    let mut arcs = Vec::new();
    for (key, loc) in order.iter().filter(|(_, l)| l.has_fit) {
        if let Some(d) = load(key, loc)?.and_then(|r| r.fit) {
            arcs = d.derived.arcs.into_iter().map(|a| a.resistor).collect();
            break;
        }
    }
    let table = Table::new(circuit, meta, arcs);
    let mut jsonl = OutputFile::create(&results_jsonl, inputs)?;
    let mut csv = OutputFile::create(&results_csv, inputs)?;
    csv.write_all(table.header().as_bytes())
        .map_err(io_err(&results_csv))?;
    let mut summary = Summary {
        skipped,
        unmatched_names,
        ..Summary::default()
    };
    let rows = order.len();
    for (k, (key, loc)) in order.iter().enumerate() {
        let Some(r) = load(key, loc)? else {
            continue;
        };
        let mut l = serde_json::to_string(&r).map_err(|e| io_err(&results_jsonl)(e.into()))?;
        l.push('\n');
        jsonl
            .write_all(l.as_bytes())
            .map_err(io_err(&results_jsonl))?;
        csv.write_all(table.row(&r).as_bytes())
            .map_err(io_err(&results_csv))?;
        if k % 256 == 255 || k + 1 == rows {
            progress(Stage::Writing, k + 1, rows);
        }
        summary.total += 1;
        match r.status {
            Status::Ok => summary.ok += 1,
            Status::Suspect => summary.suspect += 1,
            Status::Failed => summary.failed += 1,
        }
    }
    // Close what was read before renaming over it (some systems refuse to replace an open file).
    drop(store);
    jsonl.commit()?;
    csv.commit()?;
    let line = serde_json::to_string(&SettingsLine { settings: now })
        .map_err(|e| io_err(&settings_path)(e.into()))?;
    crate::output::write(&settings_path, format!("{line}\n").as_bytes(), inputs)?;
    let _ = std::fs::remove_file(&journal_path);
    summary.metadata_columns = table.meta;
    Ok(summary)
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

/// A number cell: empty when there is no value or it is not finite (an infinite time constant), so
/// that every reader of the table sees a missing number, never a word it cannot parse.
fn num(v: Option<f64>) -> String {
    v.filter(|x| x.is_finite())
        .map(format_float)
        .unwrap_or_default()
}

/// The quantity columns of `results.csv`, in order, each followed by its `_stderr` column.
pub const QUANTITY_COLUMNS: [&str; 4] = [
    "ohmic_resistance_ohm",
    "charge_transfer_resistance_ohm",
    "diffusion_resistance_ohm",
    "dc_resistance_ohm",
];

/// The columns of `results.csv`, known before the first row is written.
struct Table<'a> {
    circuit: &'a Circuit,
    /// Metadata columns, in order.
    meta: Vec<String>,
    /// The resistor of each arc.
    arcs: Vec<String>,
}

impl<'a> Table<'a> {
    /// The table for results with metadata fields `meta` (in any order, repeats allowed) and the arcs
    /// of the first fitted result.
    fn new(
        circuit: &'a Circuit,
        meta: impl IntoIterator<Item = String>,
        arcs: Vec<String>,
    ) -> Self {
        let mut meta: Vec<String> = meta
            .into_iter()
            .collect::<BTreeSet<_>>()
            .into_iter()
            .collect();
        // Conventional fields first, then the rest alphabetically.
        let order = ["cell", "cycle", "soc", "temperature", "time"];
        meta.sort_by_key(|k| {
            (
                order.iter().position(|o| o == k).unwrap_or(order.len()),
                k.clone(),
            )
        });
        Table {
            circuit,
            meta,
            arcs,
        }
    }

    /// The header line, with its line end.
    fn header(&self) -> String {
        let mut header: Vec<String> = vec!["file".into(), "spectrum".into()];
        header.extend(self.meta.iter().cloned());
        header.extend(["status", "message", "kk_valid"].map(String::from));
        for q in QUANTITY_COLUMNS {
            header.push(q.into());
            header.push(format!("{q}_stderr"));
        }
        for a in &self.arcs {
            header.push(format!("arc_{a}_resistance_ohm"));
            header.push(format!("arc_{a}_resistance_ohm_stderr"));
        }
        for p in &self.circuit.params {
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
        out
    }

    /// The row of one result, with its line end.
    fn row(&self, r: &SpectrumResult) -> String {
        let mut row: Vec<String> = vec![csv_field(&r.file), r.spectrum.to_string()];
        for k in &self.meta {
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
        for a in &self.arcs {
            let arc = d.and_then(|d| d.arcs.iter().find(|x| &x.resistor == a));
            row.push(num(arc.map(|x| x.resistance_ohm)));
            row.push(num(arc.and_then(|x| x.resistance_ohm_stderr)));
        }
        for p in &self.circuit.params {
            let e = r
                .fit
                .as_ref()
                .and_then(|f| f.parameters.iter().find(|q| q.name == p.name));
            row.push(num(e.map(|e| e.value)));
            row.push(num(e.and_then(|e| e.stderr)));
        }
        row.push(num(r.fit.as_ref().map(|f| f.statistics.reduced_chi_square)));
        let mut out = row.join(",");
        out.push('\n');
        out
    }
}

/// `results.csv`: `file`, `spectrum`, the metadata columns, `status`, `message`, `kk_valid`, the
/// battery quantities with their `_stderr`, each arc's resistance (`arc_<resistor>_resistance_ohm`)
/// with its `_stderr`, every parameter with its `_stderr`, `reduced_chi_square`. Returns the text and
/// the metadata columns.
pub fn results_table(circuit: &Circuit, results: &[SpectrumResult]) -> (String, Vec<String>) {
    let arcs: Vec<String> = results
        .iter()
        .find_map(|r| r.fit.as_ref())
        .map(|d| d.derived.arcs.iter().map(|a| a.resistor.clone()).collect())
        .unwrap_or_default();
    let table = Table::new(
        circuit,
        results.iter().flat_map(|r| r.metadata.keys().cloned()),
        arcs,
    );
    let mut out = table.header();
    for r in results {
        out.push_str(&table.row(r));
    }
    (out, table.meta)
}

/// Keys (file, spectrum) already present in a results folder, for callers that want to know what a
/// resume would skip.
pub fn finished(out: &Path) -> HashSet<(String, usize)> {
    let mut keys = HashSet::new();
    for path in [out.join("results.jsonl"), out.join(JOURNAL)] {
        scan_jsonl(&path, |r, _, _| {
            keys.insert((r.file, r.spectrum));
        });
    }
    keys
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::import::NamePattern;
    use crate::scenario;
    use std::sync::OnceLock;

    /// An empty scratch folder for one test.
    fn scratch(name: &str) -> PathBuf {
        let d =
            std::env::temp_dir().join(format!("eis-core-campaign-{name}-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&d);
        std::fs::create_dir_all(&d).unwrap();
        d
    }

    fn settings() -> BatchSettings {
        BatchSettings {
            reader: ReaderOptions {
                name_pattern: Some(NamePattern::parse(scenario::NAME_PATTERN).unwrap()),
                ..ReaderOptions::default()
            },
            ..BatchSettings::default()
        }
    }

    fn circuit() -> Circuit {
        crate::circuit::parse(scenario::MODEL_FILE).unwrap()
    }

    /// An uninterrupted run over part of the demo campaign: the 50 % SOC series of a healthy cell and
    /// of the cell with the corrupt file (26 files, one spectrum each).
    struct Reference {
        inputs: Vec<PathBuf>,
        jsonl: String,
        csv: String,
        summary: Summary,
        journal_left: bool,
    }

    fn reference() -> &'static Reference {
        static REFERENCE: OnceLock<Reference> = OnceLock::new();
        REFERENCE.get_or_init(|| {
            let dir = scratch("input");
            let mut inputs = Vec::new();
            for f in scenario::files() {
                if (f.name.starts_with("Z1_") || f.name.starts_with("Z5_"))
                    && f.name.contains("soc50")
                {
                    let p = dir.join(&f.name);
                    std::fs::write(&p, &f.bytes).unwrap();
                    inputs.push(p);
                }
            }
            let out = scratch("reference");
            let summary = run_batch(
                &inputs,
                &circuit(),
                &settings(),
                &out,
                Resume::No,
                &|_, _, _| {},
            )
            .unwrap();
            Reference {
                inputs,
                jsonl: std::fs::read_to_string(out.join("results.jsonl")).unwrap(),
                csv: std::fs::read_to_string(out.join("results.csv")).unwrap(),
                summary,
                journal_left: out.join(JOURNAL).exists(),
            }
        })
    }

    fn key_of(line: &str) -> (String, usize) {
        let r: SpectrumResult = serde_json::from_str(line).unwrap();
        (r.file, r.spectrum)
    }

    /// Resumes into `out` and checks the files equal the uninterrupted run's, byte for byte.
    fn resume_matches_reference(out: &Path, expect_skipped: usize) {
        let reference = reference();
        let summary = run_batch(
            &reference.inputs,
            &circuit(),
            &settings(),
            out,
            Resume::Yes,
            &|_, _, _| {},
        )
        .unwrap();
        assert_eq!(summary.skipped, expect_skipped);
        assert_eq!(
            Summary {
                skipped: 0,
                ..summary
            },
            reference.summary
        );
        let jsonl = std::fs::read_to_string(out.join("results.jsonl")).unwrap();
        assert!(
            jsonl == reference.jsonl,
            "resumed results.jsonl differs from the uninterrupted run"
        );
        assert_eq!(
            std::fs::read_to_string(out.join("results.csv")).unwrap(),
            reference.csv
        );
        assert!(!out.join(JOURNAL).exists());
    }

    #[test]
    fn campaign_results_are_sorted_by_file_and_spectrum() {
        let reference = reference();
        let keys: Vec<(String, usize)> = reference.jsonl.lines().map(key_of).collect();
        assert_eq!(keys.len(), 26);
        assert!(keys.windows(2).all(|w| w[0] < w[1]), "{keys:?}");
        // The CSV has the same rows in the same order, after its header.
        let rows: Vec<&str> = reference.csv.lines().collect();
        assert_eq!(rows.len(), 27);
        assert!(rows[0].starts_with("file,spectrum,cell,cycle,soc,status,"));
        for (row, (file, n)) in rows[1..].iter().zip(&keys) {
            assert!(row.starts_with(&format!("{file},{n},")), "{row}");
        }
        // The corrupt file is the one failure, reported with its place in the file.
        assert_eq!(reference.summary.failed, 1);
        assert_eq!(reference.summary.total, 26);
        let failed: Vec<&str> = rows
            .iter()
            .filter(|r| r.contains(",failed,"))
            .copied()
            .collect();
        assert_eq!(failed.len(), 1);
        assert!(failed[0].contains("Z5_c175_soc50.csv"), "{}", failed[0]);
        assert!(!reference.journal_left, "the journal is removed at the end");
    }

    /// A journal in any order (parallel chains finish in any order) with a last line cut short by a
    /// kill: the resumed run skips the complete lines, ignores the cut one, and writes the same files.
    #[test]
    fn campaign_resume_after_shuffled_journal_with_cut_last_line() {
        let reference = reference();
        let lines: Vec<&str> = reference.jsonl.lines().collect();
        // Every other finished spectrum, newest first; failures left out, so the first result the
        // resumed run records (the corrupt file) comes straight after the cut line.
        let mut kept: Vec<&str> = lines
            .iter()
            .step_by(2)
            .filter(|l| !l.contains("\"status\":\"failed\""))
            .copied()
            .collect();
        kept.reverse();
        let cut = &lines[1][..lines[1].len() / 2];
        let out = scratch("cut");
        let mut journal = kept.join("\n");
        journal.push('\n');
        journal.push_str(cut);
        std::fs::write(out.join(JOURNAL), journal).unwrap();
        assert_eq!(finished(&out).len(), kept.len());
        resume_matches_reference(&out, kept.len());
    }

    /// A previous `results.jsonl` holding part of the results (unsorted) and a journal holding others,
    /// one of them twice: both are read back, and the output is the same.
    #[test]
    fn campaign_resume_from_results_file_and_journal() {
        let reference = reference();
        let lines: Vec<&str> = reference.jsonl.lines().collect();
        let out = scratch("both");
        let mut previous: Vec<&str> = lines[..9].to_vec();
        previous.swap(0, 8);
        let mut journal: Vec<&str> = lines[15..20].iter().rev().copied().collect();
        journal.push(lines[3]);
        std::fs::write(out.join("results.jsonl"), previous.join("\n") + "\n").unwrap();
        std::fs::write(out.join(JOURNAL), journal.join("\n") + "\n").unwrap();
        assert_eq!(finished(&out).len(), 9 + 5);
        resume_matches_reference(&out, 9 + 5);
    }

    /// Results appended after a line cut short stay lines of their own, readable by a later resume.
    #[test]
    fn campaign_journal_appends_after_a_cut_line_stay_readable() {
        let reference = reference();
        let lines: Vec<&str> = reference.jsonl.lines().collect();
        let dir = scratch("journal");
        let path = dir.join(JOURNAL);
        std::fs::write(&path, format!("{}\n{}", lines[0], &lines[1][..100])).unwrap();
        let mut journal = Journal::open(&path, MetaSets::default()).unwrap();
        let r: SpectrumResult = serde_json::from_str(lines[2]).unwrap();
        journal.record((0, r.spectrum), &r);
        assert!(journal.error.is_none());
        drop(journal);
        let mut found = Vec::new();
        scan_jsonl(&path, |r, _, _| found.push(r));
        assert_eq!(found.len(), 2);
        assert_eq!(serde_json::to_string(&found[1]).unwrap(), lines[2]);
    }

    /// A chain keeps only the spectra it still needs from a file it has read, and drops each once
    /// handed out.
    #[test]
    fn campaign_chain_cache_holds_only_what_is_still_needed() {
        let dir = scratch("cache");
        let path = dir.join("four.csv");
        let mut text = String::new();
        for k in 1..=4 {
            text.push_str(&format!("f,re,im\n3,{k},-1\n2,{k},-2\n1,{k},-3\n"));
        }
        std::fs::write(&path, text).unwrap();
        let reader = ReaderOptions {
            split: crate::import::Split::None,
            ..ReaderOptions::default()
        };
        let mut cache = ChainCache::new([(0, 1), (0, 3), (0, 4)]);
        let s = cache.take(&path, 0, 1, &reader).unwrap();
        assert_eq!((s.meta.spectrum, s.z[0].re), (1, 1.0));
        let mut held: Vec<_> = cache.spectra.keys().copied().collect();
        held.sort_unstable();
        assert_eq!(held, [(0, 3), (0, 4)], "spectrum 2 is not needed");
        // The rest come from memory: the file is not read again.
        std::fs::remove_file(&path).unwrap();
        assert_eq!(cache.take(&path, 0, 3, &reader).unwrap().z[0].re, 3.0);
        assert_eq!(cache.take(&path, 0, 4, &reader).unwrap().z[0].re, 4.0);
        assert!(cache.spectra.is_empty() && cache.needed.is_empty());
        // A spectrum that cannot be read again is an error, not a panic.
        let e = cache.take(&path, 0, 2, &reader).unwrap_err();
        assert!(e.contains("four.csv"), "{e}");
    }

    /// A spectrum in a folder of its own, batched alone with an arc model.
    fn batch_alone(
        name: &str,
        file: &str,
        text: &str,
        resume: Resume,
    ) -> (PathBuf, Result<Summary, BatchError>) {
        let dir = scratch(name);
        let p = dir.join(file);
        std::fs::write(&p, text).unwrap();
        let c = crate::circuit::parse("R0 + Rct|Qdl").unwrap();
        let out = dir.join("out");
        let r = run_batch(
            &[p],
            &c,
            &BatchSettings::default(),
            &out,
            resume,
            &|_, _, _| {},
        );
        (out, r)
    }

    /// Two points at each of two frequencies: the fit runs Rct off to about 1e260 Ω, the arc's time
    /// constant is infinite. Issue 13: the spectrum vanished from both results files without a word.
    const UNBOUNDED_ARC: &str = "f,re,im\n100,10,-1\n100,12,-5\n10,12,-5\n10,20,-2\n";

    #[test]
    fn campaign_keeps_a_fit_with_non_finite_derived_numbers() {
        let (out, r) = batch_alone("nonfinite", "dup.csv", UNBOUNDED_ARC, Resume::No);
        let summary = r.unwrap();
        assert_eq!(summary.total, 1, "{summary:?}");
        let csv = std::fs::read_to_string(out.join("results.csv")).unwrap();
        let rows: Vec<&str> = csv.lines().collect();
        assert_eq!(rows.len(), 2, "{csv}");
        assert!(rows[1].starts_with(&format!(
            "{},1,",
            out.parent().unwrap().join("dup.csv").display()
        )));
        for word in ["NaN", "inf", "null"] {
            assert!(!rows[1].contains(word), "{}", rows[1]);
        }
        let jsonl = std::fs::read_to_string(out.join("results.jsonl")).unwrap();
        let back: SpectrumResult = serde_json::from_str(jsonl.trim_end()).unwrap();
        let fit = back.fit.expect("the fit is kept");
        assert!(
            fit.derived.arcs[0].time_constant_s.is_nan(),
            "written null, read back as NaN"
        );
    }

    #[test]
    fn campaign_turns_a_panic_into_a_failed_row() {
        let (out, r) = batch_alone("panic", "panics-in-test.csv", UNBOUNDED_ARC, Resume::No);
        let summary = r.unwrap();
        assert_eq!((summary.total, summary.failed), (1, 1));
        let csv = std::fs::read_to_string(out.join("results.csv")).unwrap();
        assert!(
            csv.contains(",failed,internal error: planted fault,"),
            "{csv}"
        );
    }

    #[test]
    fn campaign_resume_refuses_results_of_another_model_unless_told() {
        let text = "f,re,im\n1000,10.1,-1\n100,12,-5\n10,16,-4\n1,18,-1\n";
        let (out, r) = batch_alone("settings", "a.csv", text, Resume::No);
        assert_eq!(r.unwrap().total, 1);
        let p = out.parent().unwrap().join("a.csv");
        let other = crate::circuit::parse("R0 + Rct|Cdl").unwrap();
        let run = |resume| {
            run_batch(
                std::slice::from_ref(&p),
                &other,
                &BatchSettings::default(),
                &out,
                resume,
                &|_, _, _| {},
            )
        };
        let e = run(Resume::Yes).unwrap_err();
        assert!(
            matches!(
                e,
                BatchError::SettingsDiffer {
                    setting: "model",
                    ..
                }
            ),
            "{e}"
        );
        assert!(e.to_string().contains("was `R0 + Rct|Qdl`"), "{e}");
        // Nothing was touched.
        assert!(
            std::fs::read_to_string(out.join("results.csv"))
                .unwrap()
                .contains("Qdl.n")
        );
        // Told to, the run discards the old results and fits again.
        let s = run(Resume::YesOrRestart).unwrap();
        assert_eq!((s.total, s.skipped), (1, 0));
        let csv = std::fs::read_to_string(out.join("results.csv")).unwrap();
        assert!(csv.contains(",Cdl,") && !csv.contains("Qdl"), "{csv}");
        // Same settings: resumed, nothing to do.
        assert_eq!(run(Resume::Yes).unwrap().skipped, 1);
        // Another weighting is refused too, named.
        let s = BatchSettings {
            fit: FitSettings::default().with_weighting(crate::fit::Weighting::Unit),
            ..BatchSettings::default()
        };
        let e = run_batch(
            std::slice::from_ref(&p),
            &other,
            &s,
            &out,
            Resume::Yes,
            &|_, _, _| {},
        )
        .unwrap_err();
        assert!(
            matches!(
                e,
                BatchError::SettingsDiffer {
                    setting: "weighting",
                    ..
                }
            ),
            "{e}"
        );
        // A reader setting is named by its field.
        let s = BatchSettings {
            reader: ReaderOptions {
                fmin: Some(2.0),
                ..ReaderOptions::default()
            },
            ..BatchSettings::default()
        };
        let e = run_batch(&[p], &other, &s, &out, Resume::Yes, &|_, _, _| {}).unwrap_err();
        let want = "another reader settings (was `fmin: None`, now `fmin: Some(2.0)`)";
        assert!(e.to_string().contains(want), "{e}");
    }
}
