//! Stage 1 of a run: every input read once with the streaming reader, keeping per spectrum only the
//! file, the spectrum number and the few fields that order the series (cell, SOC, cycle, time).

use super::{Stage, guarded};
use crate::import::{ReaderOptions, SpectrumReader, WarningKind};
use crate::spectrum::MetaValue;
use rayon::prelude::*;
use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// The index of a run: every spectrum found, and the names it refers to by number.
pub(super) struct Index {
    /// Every spectrum found (and every input that could not be read), in input order.
    pub(super) entries: Vec<Entry>,
    /// File names as written in the results.
    pub(super) files: Names,
    /// Cell names.
    pub(super) cells: Names,
    /// Inputs whose names do not match the reader's name pattern, in input order.
    pub(super) unmatched: Vec<String>,
}

impl Index {
    /// Reads every input; unreadable files and bad spectra become entries with their error, so that
    /// they are reported and the rest carries on.
    pub(super) fn build(
        inputs: &[PathBuf],
        reader: &ReaderOptions,
        progress: &(dyn Fn(Stage, usize, usize) + Sync),
    ) -> Index {
        let mut files = Names::default();
        let mut cells = Names::default();
        let mut unmatched = Vec::new();
        let entries = index(
            inputs,
            reader,
            &mut files,
            &mut cells,
            &mut unmatched,
            progress,
        );
        Index {
            entries,
            files,
            cells,
            unmatched,
        }
    }
}

/// Names stored once each (file names, cell names) and referred to by number.
#[derive(Debug, Default)]
pub(super) struct Names {
    list: Vec<Arc<str>>,
    ids: HashMap<Arc<str>, u32>,
}

impl Names {
    /// The number of `name`, adding it when new.
    pub(super) fn id(&mut self, name: &str) -> u32 {
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

    /// The name numbered `id`; empty for a number never given out.
    pub(super) fn get(&self, id: u32) -> &str {
        self.list.get(id as usize).map_or("", |n| n)
    }
}

/// A spectrum's key: file (a number in [`Names`]) and spectrum number in the file.
pub(super) type Key = (u32, usize);

/// Where a series entry sits: its group (cell, SOC level) and its place in the group.
#[derive(Debug, Clone, Copy)]
pub(super) struct Series {
    pub(super) cell: u32,
    pub(super) soc: Option<i64>,
    pub(super) cycle: f64,
    pub(super) time: f64,
}

/// One indexed spectrum.
#[derive(Debug, Clone)]
pub(super) struct Entry {
    /// Index into the inputs.
    pub(super) input: usize,
    /// The file's name (as written in the results), a number in [`Names`].
    pub(super) file: u32,
    pub(super) spectrum: usize,
    /// Where it goes in the series; None for spectra that could not be read.
    pub(super) series: Option<Series>,
    pub(super) error: Option<String>,
}

impl Entry {
    pub(super) fn key(&self) -> Key {
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
