//! The journal of finished spectra and the settings beside the results: each result appended as one
//! JSON line the moment it is done, read back by a resumed run and by the finish; the settings a run's
//! results depend on, recorded so that a resume never mixes results made with other settings.

use super::index::{Key, Names};
use super::{BatchError, BatchSettings, Paths, Resume, SpectrumResult, failed};
use crate::circuit::Circuit;
use crate::spectrum::MetaValue;
use serde::{Deserialize, Serialize};
use std::collections::{BTreeMap, BTreeSet, HashMap};
use std::fs::File;
use std::io::{self, BufRead, BufReader, Read, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};

/// The journal of finished spectra inside the output folder.
pub const JOURNAL: &str = ".results.journal.jsonl";

/// The two files finished results are read from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(super) enum Source {
    /// A previous `results.jsonl`.
    Results = 0,
    /// The journal.
    Journal = 1,
}

/// Where one finished result's line lies, and the little the finish needs to know about it before
/// reading it back.
#[derive(Debug, Clone, Copy)]
pub(super) struct Loc {
    pub(super) source: Source,
    pub(super) offset: u64,
    pub(super) len: u64,
    /// Its set of metadata field names, a number in [`MetaSets`].
    pub(super) meta: u32,
    pub(super) has_fit: bool,
}

/// The distinct sets of metadata field names among the results (usually one), each stored once.
#[derive(Debug, Default)]
pub(super) struct MetaSets {
    pub(super) list: Vec<Vec<String>>,
    ids: HashMap<Vec<String>, u32>,
}

impl MetaSets {
    /// The number of the set of field names of `metadata`, adding it when new.
    pub(super) fn id(&mut self, metadata: &BTreeMap<String, MetaValue>) -> u32 {
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
pub(super) fn scan_jsonl(
    path: &Path,
    mut f: impl FnMut(SpectrumResult, u64, u64),
) -> Vec<RunSettings> {
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
pub(super) struct Store {
    pub(super) paths: [PathBuf; 2],
    files: [Option<File>; 2],
    buf: Vec<u8>,
}

impl Store {
    /// A reader of the results file and the journal of `paths`.
    pub(super) fn new(paths: &Paths) -> Store {
        Store {
            paths: [paths.results_jsonl.clone(), paths.journal.clone()],
            files: [None, None],
            buf: Vec::new(),
        }
    }

    /// The result at `loc`; an [`io::ErrorKind::InvalidData`] error when the line is not a result.
    pub(super) fn load(&mut self, loc: &Loc) -> io::Result<SpectrumResult> {
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
    pub(super) fn warm_start(&mut self, loc: &Loc, circuit: &Circuit) -> Option<(Vec<f64>, f64)> {
        self.load(loc)
            .ok()?
            .fit
            .map(|d| super::chains::warm_start(&d, circuit))
    }
}

/// The journal being written: the file, its length, and where each new result went.
pub(super) struct Journal {
    pub(super) file: File,
    len: u64,
    pub(super) added: Vec<(Key, Loc)>,
    pub(super) meta_sets: MetaSets,
    pub(super) error: Option<io::Error>,
}

impl Journal {
    /// Opens the journal for appending; a last line cut short by an interrupted write is closed with a
    /// line end, so that it stays a line of its own (and is skipped) instead of spoiling the next one.
    pub(super) fn open(path: &Path, meta_sets: MetaSets) -> io::Result<Journal> {
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
    pub(super) fn note_settings(&mut self, settings: &RunSettings) -> io::Result<()> {
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
    pub(super) fn record(&mut self, key: Key, r: &SpectrumResult) {
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
    /// Shared parameters and the chain grouping (empty when every spectrum is fitted on its own).
    #[serde(default)]
    pub share: String,
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
            share: settings
                .share
                .as_ref()
                .map(|s| format!("{} by {}", s.names.join(","), s.by.as_str()))
                .unwrap_or_default(),
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
            ("shared parameters", &self.share, &now.share),
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
pub(super) struct SettingsLine {
    pub(super) settings: RunSettings,
}

/// The settings of the run that wrote the results, beside them in the output folder.
pub const SETTINGS: &str = ".results.settings.json";

/// Whether a run may continue from the results already in the folder: `Ok(true)` to resume, `Ok(false)`
/// to start afresh (asked to, or told to restart when the settings differ).
///
/// # Errors
///
/// [`BatchError::SettingsDiffer`] when asked to resume results made with other settings.
pub(super) fn may_resume(
    paths: &Paths,
    now: &RunSettings,
    resume: Resume,
) -> Result<bool, BatchError> {
    if resume == Resume::No {
        return Ok(false);
    }
    let mut recorded: Vec<RunSettings> = std::fs::read(&paths.settings)
        .ok()
        .and_then(|b| serde_json::from_slice::<SettingsLine>(&b).ok())
        .map(|l| l.settings)
        .into_iter()
        .collect();
    let mut models = BTreeSet::new();
    for path in [&paths.results_jsonl, &paths.journal] {
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
        .find_map(|r| r.difference(now))
        .or(model_differs);
    match (differs, resume) {
        (None, _) => Ok(true),
        (Some(_), Resume::YesOrRestart) => Ok(false),
        (Some((setting, was, now)), _) => Err(BatchError::SettingsDiffer {
            folder: paths.folder.display().to_string(),
            setting,
            was,
            now,
        }),
    }
}

/// The results already finished: where each result's line is (a later line for the same key wins),
/// and the sets of metadata names among them.
#[derive(Debug, Default)]
pub(super) struct Finished {
    /// Each finished spectrum's line.
    pub(super) locs: HashMap<Key, Loc>,
    /// The metadata name sets of those results.
    pub(super) meta_sets: MetaSets,
}

impl Finished {
    /// Reads the results file and the journal of `paths`, numbering their file names in `files`.
    pub(super) fn read(paths: &Paths, files: &mut Names) -> Finished {
        let mut done = Finished::default();
        for (path, source) in [
            (&paths.results_jsonl, Source::Results),
            (&paths.journal, Source::Journal),
        ] {
            scan_jsonl(path, |r, offset, len| {
                let loc = Loc {
                    source,
                    offset,
                    len,
                    meta: done.meta_sets.id(&r.metadata),
                    has_fit: r.fit.is_some(),
                };
                done.locs.insert((files.id(&r.file), r.spectrum), loc);
            });
        }
        done
    }
}
