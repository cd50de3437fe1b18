//! Replaying saved inputs: every file of `fuzz/regressions/<target>/` (inputs that once failed and
//! must pass now) and of `fuzz/regressions/<target>/pending/` (inputs that still fail, waiting for a
//! fix). Files ending in `.txt` or `.md` are notes (the finding in words); a file `<name>.truth`
//! holds what input `<name>` is known to contain, for findings of a round-trip oracle.

use crate::engine::{Outcome, Target, run_one};
use std::path::{Path, PathBuf};
use std::sync::mpsc;
use std::time::Duration;

/// The folder of a target's regression inputs (`pending` for those still failing).
pub fn folder(target: &str, pending: bool) -> PathBuf {
    let base = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("regressions")
        .join(target);
    if pending { base.join("pending") } else { base }
}

/// The input files of a folder, sorted by name (none if the folder does not exist).
pub fn inputs(dir: &Path) -> Vec<PathBuf> {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return Vec::new();
    };
    let mut files: Vec<PathBuf> = entries
        .filter_map(Result::ok)
        .map(|e| e.path())
        .filter(|p| p.is_file())
        .filter(|p| {
            !matches!(
                p.extension().and_then(|e| e.to_str()),
                Some("txt" | "md" | "truth")
            )
        })
        .collect();
    files.sort();
    files
}

/// Runs one saved input (with its truth, if a `.truth` file is beside it) on a thread of its own and
/// waits at most `limit`; a run that takes longer is reported as [`Outcome::Slow`] and left running.
pub fn replay_file<T>(target: &T, path: &Path, limit: Duration) -> Outcome
where
    T: Target + Clone + Send + 'static,
    T::Truth: Send + 'static,
{
    let bytes = match std::fs::read(path) {
        Ok(b) => b,
        Err(e) => {
            return Outcome::Panic {
                location: path.display().to_string(),
                message: format!("cannot read: {e}"),
            };
        }
    };
    let mut truth_path = path.as_os_str().to_owned();
    truth_path.push(".truth");
    let truth = std::fs::read_to_string(PathBuf::from(truth_path))
        .ok()
        .and_then(|t| target.truth_from_text(&t));
    let (tx, rx) = mpsc::channel();
    let t = target.clone();
    std::thread::spawn(move || {
        let _ = tx.send(run_one(&t, &bytes, truth.as_ref()));
    });
    rx.recv_timeout(limit).unwrap_or(Outcome::Slow(limit))
}

/// Runs every input of the target's folder; returns the number of inputs and those that do not pass,
/// with what happened.
pub fn replay<T>(target: &T, pending: bool, limit: Duration) -> (usize, Vec<(PathBuf, Outcome)>)
where
    T: Target + Clone + Send + 'static,
    T::Truth: Send + 'static,
{
    let files = inputs(&folder(target.name(), pending));
    let failing = files
        .iter()
        .map(|p| (p.clone(), replay_file(target, p, limit)))
        .filter(|(_, o)| *o != Outcome::Pass)
        .collect();
    (files.len(), failing)
}
