//! The bad-input corpus (`tests/bad-input/`, format in its README): every class of bad input that
//! once made `eis` panic, lose data silently or touch what it must not, with its pinned message.
//! Bad input must give a clear message and the exit status the README promises (2 for bad input or
//! usage, 1 for a failed or suspect computation), never a panic.

use eis_tests::{eis, root, scratch};
use std::path::Path;

fn copy_dir(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).expect("create scratch case dir");
    for entry in std::fs::read_dir(from).expect("read case dir") {
        let entry = entry.expect("case dir entry");
        let target = to.join(entry.file_name());
        if entry.file_type().expect("file type").is_dir() {
            copy_dir(&entry.path(), &target);
        } else {
            std::fs::copy(entry.path(), &target).expect("copy case file");
        }
    }
}

/// Runs one case; returns the failures found (empty when it passes).
fn run_case(case: &Path) -> Vec<String> {
    let name = case.file_name().unwrap().to_string_lossy().into_owned();
    let dir = scratch(&format!("bad-input-{name}"));
    copy_dir(case, &dir);
    let args_text = std::fs::read_to_string(case.join("args")).expect("case has `args`");
    let args: Vec<&str> = args_text.split_whitespace().collect();
    let run = eis(&dir, &args);
    let both = format!("{}\n{}", run.stderr, run.stdout);
    let mut failures = Vec::new();
    if run.code == 101 || run.stderr.contains("panicked") {
        failures.push("eis panicked".to_string());
    }
    let expected = std::fs::read_to_string(case.join("expected")).expect("case has `expected`");
    let mut saw_exit = false;
    for line in expected.lines() {
        if line.trim().is_empty() || line.starts_with('#') {
            continue;
        }
        if let Some(code) = line.strip_prefix("exit ") {
            saw_exit = true;
            let code: i32 = code.trim().parse().expect("`exit N`");
            if run.code != code {
                failures.push(format!("exit status {} (wanted {code})", run.code));
            }
        } else if let Some(text) = line.strip_prefix("has ") {
            if !both.contains(text) {
                failures.push(format!("missing text: {text:?}"));
            }
        } else if let Some(text) = line.strip_prefix("not ") {
            if both.contains(text) {
                failures.push(format!("unwanted text: {text:?}"));
            }
        } else if let Some(rest) = line.strip_prefix("file ") {
            let (path, check) = rest
                .split_once(' ')
                .unwrap_or_else(|| panic!("{name}: bad `file` line {line:?}"));
            let content = std::fs::read_to_string(dir.join(path)).unwrap_or_default();
            if let Some(text) = check.strip_prefix("has ") {
                if !content.contains(text) {
                    failures.push(format!("file {path} lacks {text:?}"));
                }
            } else if let Some(n) = check.strip_prefix("lines ") {
                let n: usize = n.trim().parse().expect("`lines N`");
                if content.lines().count() != n {
                    failures.push(format!(
                        "file {path} has {} lines (wanted {n})",
                        content.lines().count()
                    ));
                }
            } else {
                panic!("{name}: bad `file` line {line:?}");
            }
        } else {
            panic!("{name}: unknown check {line:?}");
        }
    }
    assert!(saw_exit, "{name}: `expected` has no `exit N` line");
    failures
        .into_iter()
        .map(|f| {
            format!(
                "{name}: {f}\n--- stdout ---\n{}\n--- stderr ---\n{}",
                run.stdout, run.stderr
            )
        })
        .collect()
}

#[test]
fn bad_input_corpus_gives_pinned_messages_and_never_panics() {
    let corpus = root().join("tests").join("bad-input");
    let mut cases: Vec<_> = std::fs::read_dir(&corpus)
        .expect("tests/bad-input exists")
        .map(|e| e.expect("corpus entry").path())
        .filter(|p| p.is_dir())
        .collect();
    cases.sort();
    assert!(!cases.is_empty(), "the corpus is empty");
    let failures: Vec<String> = cases.iter().flat_map(|c| run_case(c)).collect();
    assert!(
        failures.is_empty(),
        "{} of the corpus' checks failed:\n\n{}",
        failures.len(),
        failures.join("\n\n")
    );
}
