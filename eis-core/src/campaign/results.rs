//! Stage 4 of a run, and the one owner of `results.csv`: the finish writes `results.jsonl` and
//! `results.csv` from every finished result, sorted by file and spectrum, each through a temporary file
//! renamed over the target; the table's columns, its writer ([`results_table`]) and the keys already
//! finished in a folder ([`finished`]).

use super::index::{Key, Names};
use super::journal::{Loc, MetaSets, SettingsLine, Store, scan_jsonl};
use super::{BatchError, Paths, SpectrumResult, Stage, Status, Summary, failed, io_err};
use crate::circuit::Circuit;
use crate::derive::{QUANTITIES, QuantityKind, arc_column};
use crate::number::format_float;
use crate::output::{OutputFile, csv_line};
use std::collections::{BTreeSet, HashMap, HashSet};
use std::io::{self, Write};
use std::path::{Path, PathBuf};

/// What the finish reads: every finished result's line, and where the run is written.
pub(super) struct Finish<'a> {
    pub(super) inputs: &'a [PathBuf],
    pub(super) circuit: &'a Circuit,
    pub(super) paths: &'a Paths,
    pub(super) files: &'a Names,
    pub(super) progress: &'a (dyn Fn(Stage, usize, usize) + Sync),
}

impl Finish<'_> {
    /// Writes both results files from the results an earlier run finished (`done`) and those this run
    /// added (`added`, with the metadata name sets of both), then the settings beside them, and removes the journal. `summary` brings
    /// what is known before (skipped spectra, unmatched names); the counts are added here.
    pub(super) fn write(
        &self,
        done: HashMap<Key, Loc>,
        added: Vec<(Key, Loc)>,
        meta_sets: MetaSets,
        settings: SettingsLine,
        mut summary: Summary,
    ) -> Result<Summary, BatchError> {
        let (paths, files) = (self.paths, self.files);
        let mut all = done;
        all.extend(added);
        let mut order: Vec<(Key, Loc)> = all.into_iter().collect();
        order.sort_unstable_by(|a, b| {
            files
                .get(a.0.0)
                .cmp(files.get(b.0.0))
                .then(a.0.1.cmp(&b.0.1))
        });
        let used: BTreeSet<u32> = order.iter().map(|(_, l)| l.meta).collect();
        let meta = used
            .iter()
            .filter_map(|&i| meta_sets.list.get(i as usize))
            .flat_map(|names| names.iter().cloned());
        // The result at `loc`, read back; a line that is not a result (it cannot happen: every line
        // was read or written as one) is a failed row, never a spectrum lost without a word.
        let mut store = Store::new(paths);
        let mut load = |key: &Key, loc: &Loc| match store.load(loc) {
            Ok(r) => Ok(r),
            // A line cut short since it was first read (the file changed under the run) likewise.
            Err(e)
                if matches!(
                    e.kind(),
                    io::ErrorKind::InvalidData | io::ErrorKind::UnexpectedEof
                ) =>
            {
                Ok(failed(
                    files.get(key.0),
                    key.1,
                    format!("internal error: its result cannot be read back: {e}"),
                ))
            }
            Err(e) => Err(io_err(&store.paths[loc.source as usize])(e)),
        };
        let mut arcs = Vec::new();
        for (key, loc) in order.iter().filter(|(_, l)| l.has_fit) {
            if let Some(d) = load(key, loc)?.fit {
                arcs = d.derived.arcs.into_iter().map(|a| a.resistor).collect();
                break;
            }
        }
        let mut table = Table::new(self.circuit, meta, arcs);
        table.shared = !settings.settings.share.is_empty();
        let (results_jsonl, results_csv) = (&paths.results_jsonl, &paths.results_csv);
        let mut jsonl = OutputFile::create(results_jsonl, self.inputs)?;
        let mut csv = OutputFile::create(results_csv, self.inputs)?;
        csv.write_all(table.header().as_bytes())
            .map_err(io_err(results_csv))?;
        let rows = order.len();
        for (k, (key, loc)) in order.iter().enumerate() {
            let r = load(key, loc)?;
            let mut l = serde_json::to_string(&r).map_err(|e| io_err(results_jsonl)(e.into()))?;
            l.push('\n');
            jsonl
                .write_all(l.as_bytes())
                .map_err(io_err(results_jsonl))?;
            csv.write_all(table.row(&r).as_bytes())
                .map_err(io_err(results_csv))?;
            if k % 256 == 255 || k + 1 == rows {
                (self.progress)(Stage::Writing, k + 1, rows);
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
        let line =
            serde_json::to_string(&settings).map_err(|e| io_err(&paths.settings)(e.into()))?;
        crate::output::write(&paths.settings, format!("{line}\n").as_bytes(), self.inputs)?;
        let _ = std::fs::remove_file(&paths.journal);
        summary.metadata_columns = table.meta;
        Ok(summary)
    }
}

/// A number cell: empty when there is no value or it is not finite (an infinite time constant), so
/// that every reader of the table sees a missing number, never a word it cannot parse.
fn num(v: Option<f64>) -> String {
    v.filter(|x| x.is_finite())
        .map(format_float)
        .unwrap_or_default()
}

/// The battery quantities that are columns of `results.csv`, in order, each followed by its
/// `_stderr` column.
pub fn results_quantities() -> impl Iterator<Item = &'static QuantityKind> {
    QUANTITIES.iter().filter(|q| q.in_results)
}

/// The columns of `results.csv`, known before the first row is written.
pub(super) struct Table<'a> {
    circuit: &'a Circuit,
    /// Metadata columns, in order.
    pub(super) meta: Vec<String>,
    /// The resistor of each arc.
    arcs: Vec<String>,
    /// Whether the results come from joint fits: a last column `shared` names the parameters each row
    /// shares with its chain (separated by `;`).
    pub(super) shared: bool,
}

impl<'a> Table<'a> {
    /// The table for results with metadata fields `meta` (in any order, repeats allowed) and the arcs
    /// of the first fitted result.
    pub(super) fn new(
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
            shared: false,
        }
    }

    /// The header line, with its line end.
    pub(super) fn header(&self) -> String {
        let mut header: Vec<String> = vec!["file".into(), "spectrum".into()];
        header.extend(self.meta.iter().cloned());
        header.extend(["status", "message", "kk_valid"].map(String::from));
        for q in results_quantities() {
            header.push(q.column.into());
            header.push(format!("{}_stderr", q.column));
        }
        for a in &self.arcs {
            let column = arc_column(a);
            let stderr = format!("{column}_stderr");
            header.extend([column, stderr]);
        }
        for p in &self.circuit.params {
            header.push(p.name.clone());
            header.push(format!("{}_stderr", p.name));
        }
        header.push("reduced_chi_square".into());
        if self.shared {
            header.push("shared".into());
        }
        csv_line(&header)
    }

    /// The row of one result, with its line end.
    pub(super) fn row(&self, r: &SpectrumResult) -> String {
        let mut row: Vec<String> = vec![r.file.clone(), r.spectrum.to_string()];
        for k in &self.meta {
            row.push(r.metadata.get(k).map(|v| v.to_string()).unwrap_or_default());
        }
        row.push(r.status.as_str().into());
        row.push(r.message.clone());
        row.push(
            r.kk.as_ref()
                .map(|k| k.valid.to_string())
                .unwrap_or_default(),
        );
        let d = r.fit.as_ref().map(|f| &f.derived);
        for q in results_quantities() {
            let v = d.and_then(|d| d.get(q.key));
            row.push(num(v.map(|v| v.value)));
            row.push(num(v.and_then(|v| v.stderr)));
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
        if self.shared {
            row.push(r.shared.join(";"));
        }
        csv_line(&row)
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
    let mut table = Table::new(
        circuit,
        results.iter().flat_map(|r| r.metadata.keys().cloned()),
        arcs,
    );
    table.shared = results.iter().any(|r| !r.shared.is_empty());
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
    for path in [out.join("results.jsonl"), out.join(super::JOURNAL)] {
        scan_jsonl(&path, |r, _, _| {
            keys.insert((r.file, r.spectrum));
        });
    }
    keys
}
