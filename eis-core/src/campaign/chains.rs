//! Stage 3 of a run: the warm-start chains. Spectra are grouped by cell and SOC level, ordered by
//! cycle, then time, then file and spectrum number, and cut into chunks; a template fitted from
//! automatic starts opens every chunk, the chunks run in parallel, and within a chunk each fit starts
//! from its predecessor's result. Every result goes to the journal the moment it is done.

use super::index::{Entry, Key, Names, Series};
use super::journal::{Journal, Loc, Store};
use super::{BatchSettings, Paths, SpectrumResult, Stage, Status, failed, guarded, process};
use crate::circuit::Circuit;
use crate::import::{ReaderOptions, SpectrumReader};
use crate::report::FitDocument;
use crate::spectrum::Spectrum;
use rayon::prelude::*;
use std::collections::{BTreeMap, HashMap};
use std::path::{Path, PathBuf};
use std::sync::Mutex;
use std::sync::atomic::{AtomicUsize, Ordering};

/// A warm start: parameter values, and the reduced χ² a warm-started fit is judged by.
pub(super) type WarmStart = (Vec<f64>, f64);

/// The warm start a finished fit offers its successor.
pub(super) fn warm_start(doc: &FitDocument, circuit: &Circuit) -> WarmStart {
    (
        doc.warm_start_for(circuit).0,
        doc.statistics.reduced_chi_square,
    )
}

/// The fitting stage of a run: what every chain reads, and the journal they all write.
pub(super) struct Work<'a> {
    pub(super) inputs: &'a [PathBuf],
    pub(super) circuit: &'a Circuit,
    pub(super) settings: &'a BatchSettings,
    pub(super) entries: &'a [Entry],
    pub(super) files: &'a Names,
    /// Results finished by an earlier run.
    pub(super) done: &'a HashMap<Key, Loc>,
    pub(super) paths: &'a Paths,
    pub(super) journal: Mutex<Journal>,
    /// Spectra finished so far (those skipped included), for the progress report.
    pub(super) counter: AtomicUsize,
    pub(super) progress: &'a (dyn Fn(Stage, usize, usize) + Sync),
}

impl Work<'_> {
    /// Fits every spectrum not yet done: unreadable ones recorded as failed, then the template, then
    /// the chains in parallel. Returns the journal, which records where each new result went.
    pub(super) fn run(self, cells: Names) -> Journal {
        self.record_unreadable();
        let work = chains(self.entries, self.inputs, &cells, self.settings.chunk);
        drop(cells);
        // A template for the first spectrum of every chain: the first spectrum of the first chain,
        // fitted from automatic starts. Chains start warm from it (and fall back to automatic starts
        // when that is worse), so a campaign of many short series does not pay a cold fit per series.
        let first = work
            .first()
            .and_then(|c| c.first())
            .copied()
            .filter(|_| self.settings.warm_start);
        let template_key = first.map(|i| self.entries[i].key());
        let template = first.and_then(|i| self.template(&self.entries[i]));
        work.par_iter()
            .for_each(|chain| self.run_chain(chain, template.as_ref(), template_key));
        self.journal
            .into_inner()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
    }

    /// Appends one result to the journal and advances the progress count.
    fn record(&self, key: Key, r: &SpectrumResult) {
        self.journal
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
            .record(key, r);
        let n = self.counter.fetch_add(1, Ordering::Relaxed) + 1;
        (self.progress)(Stage::Fitting, n, self.entries.len());
    }

    /// Records every spectrum that could not be read, and is not yet done, as failed.
    fn record_unreadable(&self) {
        for e in self.entries.iter().filter(|e| e.error.is_some()) {
            if !self.done.contains_key(&e.key()) {
                let r = failed(
                    self.files.get(e.file),
                    e.spectrum,
                    e.error.clone().unwrap_or_default(),
                );
                self.record(e.key(), &r);
            }
        }
    }

    /// Fits one spectrum of a chain (or records why it could not be read again, or what went wrong).
    fn fit_one(
        &self,
        e: &Entry,
        cache: &mut ChainCache,
        warm: Option<&WarmStart>,
    ) -> SpectrumResult {
        let file = self.files.get(e.file);
        let (reader, input) = (&self.settings.reader, &self.inputs[e.input]);
        let result = guarded(|| match cache.take(input, e.input, e.spectrum, reader) {
            Err(msg) => failed(file, e.spectrum, msg),
            Ok(s) => process(self.circuit, file, e.spectrum, &s, self.settings, warm),
        })
        .unwrap_or_else(|msg| failed(file, e.spectrum, msg));
        self.record(e.key(), &result);
        result
    }

    /// The template: the stored result of `e` when an earlier run finished it, else `e` fitted from
    /// automatic starts; None unless it is ok.
    fn template(&self, e: &Entry) -> Option<WarmStart> {
        let doc = match self.done.get(&e.key()) {
            Some(loc) => Store::new(self.paths)
                .load(loc)
                .ok()
                .filter(|r| r.status == Status::Ok)
                .and_then(|r| r.fit),
            None => {
                let mut cache = ChainCache::new([(e.input, e.spectrum)]);
                let r = self.fit_one(e, &mut cache, None);
                r.fit.filter(|_| r.status == Status::Ok)
            }
        };
        doc.map(|d| warm_start(&d, self.circuit))
    }

    /// Fits one chain in order, each fit warm-started from its predecessor.
    fn run_chain(&self, chain: &[usize], template: Option<&WarmStart>, template_key: Option<Key>) {
        let entries = self.entries;
        let mut store = Store::new(self.paths);
        let todo = |i: &&usize| {
            let k = entries[**i].key();
            !self.done.contains_key(&k) && Some(k) != template_key
        };
        let mut cache = ChainCache::new(
            chain
                .iter()
                .filter(todo)
                .map(|&i| (entries[i].input, entries[i].spectrum)),
        );
        let mut previous: Option<WarmStart> = template.cloned();
        // Reduced χ² of the chain so far: their median is the reference a warm start is judged by
        // (single values scatter by ±30 % with the noise, so the last one alone is a poor yardstick).
        let mut history: Vec<f64> = template.iter().map(|t| t.1).collect();
        for &i in chain {
            let e = &entries[i];
            let key = e.key();
            if Some(key) == template_key && !self.done.contains_key(&key) {
                // Fitted as the template.
                previous = template.cloned();
                continue;
            }
            if let Some(loc) = self.done.get(&key) {
                // Continue the chain from the stored result.
                previous = store.warm_start(loc, self.circuit);
                if let Some(p) = &previous {
                    history.push(p.1);
                }
                continue;
            }
            let warm = previous
                .as_ref()
                .filter(|_| self.settings.warm_start)
                .map(|(v, chi)| (v.clone(), median(&history).unwrap_or(*chi)));
            let result = self.fit_one(e, &mut cache, warm.as_ref());
            previous = match &result.fit {
                Some(d) if result.status != Status::Failed => Some(warm_start(d, self.circuit)),
                _ => None,
            };
            if let Some(p) = &previous {
                history.push(p.1);
            }
        }
    }
}

/// Groups and orders entries into warm-start chains (indices into `entries`), cut into chunks.
pub(super) fn chains(
    entries: &[Entry],
    inputs: &[PathBuf],
    cells: &Names,
    chunk: usize,
) -> Vec<Vec<usize>> {
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
pub(super) struct ChainCache {
    /// (input, spectrum) → how many more times it is wanted.
    pub(super) needed: HashMap<(usize, usize), usize>,
    pub(super) spectra: HashMap<(usize, usize), Spectrum>,
}

impl ChainCache {
    /// A cache for a chain that will ask for each of `wanted` (input, spectrum) once per mention.
    pub(super) fn new(wanted: impl IntoIterator<Item = (usize, usize)>) -> ChainCache {
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
    pub(super) fn take(
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

/// Median of a list (None when empty).
fn median(v: &[f64]) -> Option<f64> {
    let mut s: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
    if s.is_empty() {
        return None;
    }
    s.sort_by(f64::total_cmp);
    Some(s[s.len() / 2])
}
