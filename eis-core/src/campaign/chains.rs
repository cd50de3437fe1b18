//! Stage 3 of a run: the chains. Spectra are grouped by cell and SOC level (or by cell alone, see
//! [`ChainBy`]), ordered by cycle, then time, then file and spectrum number, and cut into chunks; a
//! template fitted from automatic starts opens every chunk, the chunks run in parallel, and within a
//! chunk each fit starts from its predecessor's result and keeps its predecessor's arc identity
//! ([`crate::fit::chain`]: a warm start is accepted only when a screening of fresh candidates finds
//! nothing better, and among optima of comparable χ² the one continuous with the neighbour is
//! taken). Every result goes to the journal the moment it is done.
//!
//! With shared parameters ([`Share`]) a chain is not cut: its spectra are read, checked and seeded
//! one after the other (the first by a chain fit from the template, each next one by a warm run from
//! its predecessor, or by a chain fit when that run fails or changes the arc order), then fitted at
//! once ([`crate::fit::joint::fit_joint`]), and their results go to the journal together.

use super::index::{Entry, Key, Names, Series};
use super::journal::{Journal, Loc, Store};
use super::{
    BatchSettings, Paths, SpectrumResult, Stage, Status, check, conclude, failed, finish_status,
    guarded, process,
};
use crate::circuit::Circuit;
use crate::fit::chain::{arc_order, fit_in_chain, seed_run, tame};
use crate::fit::joint::{JointResult, JointSettings, fit_joint, shared_indices};
use crate::fit::{FitResult, fit_from};
use crate::import::{ReaderOptions, SpectrumReader};
use crate::report::FitDocument;
use crate::spectrum::Spectrum;
use rayon::prelude::*;
use std::collections::{BTreeMap, HashMap};
use std::path::{Path, PathBuf};
use std::sync::Mutex;
use std::sync::atomic::{AtomicUsize, Ordering};

/// How the spectra of a campaign form chains.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
#[non_exhaustive]
pub enum ChainBy {
    /// One chain per cell and SOC level (the `cell` and `soc` fields), ordered by cycle. The default.
    #[default]
    CellAndSoc,
    /// One chain per cell, whatever the SOC level, ordered by cycle (then time).
    Cell,
}

impl ChainBy {
    /// The word used on the command line and in the recorded settings.
    pub fn as_str(self) -> &'static str {
        match self {
            ChainBy::CellAndSoc => "cell-soc",
            ChainBy::Cell => "cell",
        }
    }
}

/// Parameters common to every spectrum of a chain, fitted jointly (see the module documentation).
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct Share {
    /// Names of the shared parameters (free parameters of the circuit).
    pub names: Vec<String>,
    /// How chains are formed.
    pub by: ChainBy,
}

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
        if let Some(share) = &self.settings.share {
            return self.run_shared(cells, share);
        }
        let work = chains(
            self.entries,
            self.inputs,
            &cells,
            self.settings.chunk,
            ChainBy::CellAndSoc,
        );
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
        neighbour: Option<&[f64]>,
    ) -> SpectrumResult {
        let file = self.files.get(e.file);
        let (reader, input) = (&self.settings.reader, &self.inputs[e.input]);
        let result = guarded(|| match cache.take(input, e.input, e.spectrum, reader) {
            Err(msg) => failed(file, e.spectrum, msg),
            Ok(s) => process(
                self.circuit,
                file,
                e.spectrum,
                &s,
                self.settings,
                warm,
                neighbour,
            ),
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
                let r = self.fit_one(e, &mut cache, None, None);
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
            let neighbour = previous.as_ref().map(|p| p.0.as_slice());
            let result = self.fit_one(e, &mut cache, warm.as_ref(), neighbour);
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

impl Work<'_> {
    /// Shared mode: every chain whole, fitted jointly. The template (the first spectrum of the first
    /// chain, fitted from automatic starts) only seeds the first spectrum of each chain; it is fitted
    /// again with its chain.
    fn run_shared(self, cells: Names, share: &Share) -> Journal {
        let work = chains(self.entries, self.inputs, &cells, usize::MAX, share.by);
        drop(cells);
        let shared = match shared_indices(self.circuit, &share.names) {
            Ok(s) => s,
            Err(e) => {
                // The binary checks the names before it starts; a library caller that did not gets
                // every spectrum failed with the reason.
                for chain in &work {
                    for &i in chain {
                        let en = &self.entries[i];
                        if !self.done.contains_key(&en.key()) {
                            let msg = format!("cannot fit jointly: {e}");
                            self.record(
                                en.key(),
                                &failed(self.files.get(en.file), en.spectrum, msg),
                            );
                        }
                    }
                }
                return self.into_journal();
            }
        };
        let template = work
            .first()
            .and_then(|c| c.first())
            .filter(|_| self.settings.warm_start)
            .and_then(|&i| {
                let e = &self.entries[i];
                let mut cache = ChainCache::new([(e.input, e.spectrum)]);
                let s = cache
                    .take(
                        &self.inputs[e.input],
                        e.input,
                        e.spectrum,
                        &self.settings.reader,
                    )
                    .ok()?;
                guarded(|| fit_in_chain(self.circuit, &s, &self.settings.fit, None, None))
                    .ok()?
                    .ok()
                    .filter(|f| f.result.converged)
                    .map(|f| f.result.values)
            });
        work.par_iter()
            .for_each(|chain| self.run_chain_shared(chain, template.as_deref(), &shared));
        self.into_journal()
    }

    fn into_journal(self) -> Journal {
        self.journal
            .into_inner()
            .unwrap_or_else(std::sync::PoisonError::into_inner)
    }

    /// One chain of the shared mode: read, check and seed each spectrum, fit them jointly, record.
    /// Spectra an earlier run finished are left out (their chain is refitted without them).
    fn run_chain_shared(&self, chain: &[usize], template: Option<&[f64]>, shared: &[usize]) {
        let items = self.seed_chain(chain, template);
        let seeded: Vec<&Item> = items.iter().filter(|it| it.seed.is_ok()).collect();
        let spectra: Vec<&Spectrum> = seeded.iter().map(|it| &it.spectrum).collect();
        let starts: Vec<Vec<f64>> = seeded
            .iter()
            .filter_map(|it| it.seed.as_ref().ok().cloned())
            .collect();
        let settings = JointSettings {
            weighting: self.settings.fit.weighting,
            ..JointSettings::default()
        };
        let joint = guarded(|| fit_joint(self.circuit, &spectra, shared, &starts, &settings))
            .and_then(|r| r.map_err(|e| e.to_string()));
        let chain_len = spectra.len();
        drop(spectra);
        drop(seeded);
        let names: Vec<String> = shared
            .iter()
            .map(|&i| self.circuit.params[i].name.clone())
            .collect();
        let mut k = 0;
        for item in items {
            let joint_fit = match (&item.seed, &joint) {
                (Ok(_), Ok(j)) => {
                    k += 1;
                    Ok((j, j.fits.get(k - 1)))
                }
                (Ok(_), Err(msg)) => Err(msg.as_str()),
                // Not seeded: recorded as failed below, whatever the joint fit did.
                (Err(_), _) => Err(""),
            };
            self.record_shared(item, joint_fit, &names, chain_len);
        }
    }

    /// The spectra of a shared chain not done yet, read, checked and seeded in order (each seed warm
    /// from the previous one's); a spectrum that cannot be read or checked is recorded as failed.
    fn seed_chain(&self, chain: &[usize], template: Option<&[f64]>) -> Vec<Item> {
        let entries = self.entries;
        let todo: Vec<usize> = chain
            .iter()
            .copied()
            .filter(|&i| !self.done.contains_key(&entries[i].key()))
            .collect();
        let mut cache = ChainCache::new(
            todo.iter()
                .map(|&i| (entries[i].input, entries[i].spectrum)),
        );
        let mut items: Vec<Item> = Vec::with_capacity(todo.len());
        let mut previous: Option<Vec<f64>> = None;
        for &i in &todo {
            let e = &entries[i];
            let file = self.files.get(e.file);
            let input = &self.inputs[e.input];
            let item = guarded(|| {
                let s = cache.take(input, e.input, e.spectrum, &self.settings.reader)?;
                let (result, problems) = check(file, e.spectrum, &s, self.settings);
                let seed = self.seed(&s, previous.as_deref(), template);
                Ok::<_, String>(Item {
                    index: i,
                    spectrum: s,
                    result,
                    problems,
                    seed,
                })
            })
            .and_then(|r| r);
            match item {
                Ok(item) => {
                    if let Ok(v) = &item.seed {
                        previous = Some(v.clone());
                    }
                    items.push(item);
                }
                Err(msg) => self.record(e.key(), &failed(file, e.spectrum, msg)),
            }
        }
        items
    }

    /// Records one spectrum of a shared chain: failed when it has no seed; else its fit from the
    /// joint fit `joint` (the chain's result and this spectrum's fit in it), which names the shared
    /// parameters `names` over `chain_len` spectra; or, when the joint fit was not possible (its
    /// message), a fit of its own from its seed.
    fn record_shared(
        &self,
        mut item: Item,
        joint: Result<(&JointResult, Option<&FitResult>), &str>,
        names: &[String],
        chain_len: usize,
    ) {
        let e = &self.entries[item.index];
        let file = self.files.get(e.file);
        let seed = match &item.seed {
            Ok(seed) => seed,
            Err(msg) => {
                item.result.status = Status::Failed;
                item.result.message = format!("cannot fit: {msg}");
                self.record(e.key(), &item.result);
                return;
            }
        };
        let own;
        let fit = match joint {
            Ok((j, Some(f))) => {
                if !j.converged() {
                    item.problems.push(format!(
                        "the joint fit of the chain did not converge ({:?})",
                        j.termination
                    ));
                }
                item.result.shared = names.to_vec();
                item.result.chain_spectra = Some(chain_len);
                f
            }
            Err(msg) => {
                item.problems
                    .push(format!("joint fit not possible ({msg}); fitted on its own"));
                own = fit_from(self.circuit, &item.spectrum, &self.settings.fit, seed);
                match &own {
                    Ok(f) => f,
                    Err(e) => {
                        item.result.status = Status::Failed;
                        item.result.message = format!("cannot fit: {e}");
                        self.record(self.entries[item.index].key(), &item.result);
                        return;
                    }
                }
            }
            Ok((_, None)) => {
                // Cannot happen: the joint fit returns one result per seeded spectrum.
                item.result.status = Status::Failed;
                item.result.message = "internal error: the joint fit lost a spectrum".into();
                self.record(e.key(), &item.result);
                return;
            }
        };
        let (mut result, mut problems) = (item.result, item.problems);
        conclude(
            self.circuit,
            file,
            e.spectrum,
            fit,
            &mut result,
            &mut problems,
        );
        finish_status(&mut result, problems);
        self.record(e.key(), &result);
    }

    /// The seed of one spectrum of a shared chain (values): a loose warm run from its predecessor when
    /// it converges with the arcs in the same order and nothing on a bound, else a chain fit (warm from
    /// the predecessor or the template).
    fn seed(
        &self,
        s: &Spectrum,
        previous: Option<&[f64]>,
        template: Option<&[f64]>,
    ) -> Result<Vec<f64>, String> {
        let settings = &self.settings.fit;
        if let Some(p) = previous.filter(|_| self.settings.warm_start) {
            if let Some((v, good)) = seed_run(self.circuit, s, settings, &tame(self.circuit, p)) {
                if good && arc_order(self.circuit, &v) == arc_order(self.circuit, p) {
                    return Ok(v);
                }
            }
        }
        let warm = previous.or(template).filter(|_| self.settings.warm_start);
        fit_in_chain(self.circuit, s, settings, warm, previous)
            .map(|f| f.result.values)
            .map_err(|e| e.to_string())
    }
}

/// One spectrum of a shared chain on its way through.
struct Item {
    index: usize,
    spectrum: Spectrum,
    result: SpectrumResult,
    problems: Vec<String>,
    seed: Result<Vec<f64>, String>,
}

/// Groups and orders entries into chains (indices into `entries`), cut into chunks.
pub(super) fn chains(
    entries: &[Entry],
    inputs: &[PathBuf],
    cells: &Names,
    chunk: usize,
    by: ChainBy,
) -> Vec<Vec<usize>> {
    let mut groups: BTreeMap<(&str, Option<i64>), Vec<usize>> = BTreeMap::new();
    for (i, e) in entries.iter().enumerate() {
        if let (None, Some(s)) = (&e.error, &e.series) {
            let soc = match by {
                ChainBy::CellAndSoc => s.soc,
                ChainBy::Cell => None,
            };
            groups.entry((cells.get(s.cell), soc)).or_default().push(i);
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
