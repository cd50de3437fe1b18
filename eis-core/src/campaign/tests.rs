//! Unit tests of campaigns: resume, journal, chain cache, failed rows.

use super::chains::ChainCache;
use super::journal::{Journal, MetaSets, scan_jsonl};
use super::*;
use crate::import::NamePattern;
use crate::scenario;
use std::sync::OnceLock;

/// An empty scratch folder for one test.
fn scratch(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("eis-core-campaign-{name}-{}", std::process::id()));
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
            if (f.name.starts_with("Z1_") || f.name.starts_with("Z5_")) && f.name.contains("soc50")
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
    batch_model(name, file, text, resume, "R0 + Rct|Qdl")
}

/// [`batch_alone`] with the circuit `model`.
fn batch_model(
    name: &str,
    file: &str,
    text: &str,
    resume: Resume,
    model: &str,
) -> (PathBuf, Result<Summary, BatchError>) {
    let dir = scratch(name);
    let p = dir.join(file);
    std::fs::write(&p, text).unwrap();
    let c = crate::circuit::parse(model).unwrap();
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

/// Two points at each of two frequencies: the fit may run Rct off towards 1e260 Ω (how far depends on
/// the search's tolerances).
const UNBOUNDED_ARC: &str = "f,re,im\n100,10,-1\n100,12,-5\n10,12,-5\n10,20,-2\n";

/// An arc held at Rct = 1e300 Ω and Q = 1e20: its time constant (RQ)^(1/n) overflows to infinity
/// whatever the fit does with R0. Issue 13: such a spectrum vanished from both results files without
/// a word.
const INFINITE_TAU: &str = "R0 + Rct{1e300 fixed}|Qdl{Q=1e20 fixed, n=1 fixed}";

#[test]
fn campaign_keeps_a_fit_with_non_finite_derived_numbers() {
    let (out, r) = batch_model(
        "nonfinite",
        "dup.csv",
        UNBOUNDED_ARC,
        Resume::No,
        INFINITE_TAU,
    );
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

/// The cell is the `cell` field when given and not empty, else the file's stem (common practice for
/// exports named after their cell).
#[test]
fn campaign_cell_is_the_cell_field_else_the_file_stem() {
    let file = Path::new("runs/Z3_c100_soc50.csv");
    assert_eq!(cell_name(Some("Z3"), file), "Z3");
    assert_eq!(cell_name(Some(""), file), "Z3_c100_soc50");
    assert_eq!(cell_name(None, file), "Z3_c100_soc50");
    assert_eq!(cell_name(None, Path::new("")), "");
}

/// Grouped advice counts each problem once per fit, in agreement with the warnings the fits raised
/// themselves (the same |ρ| > 0.98 and 100 % relative-error limits), and says what would help.
#[test]
fn campaign_advice_groups_the_fits_own_warnings() {
    let reference = reference();
    let results: Vec<SpectrumResult> = reference
        .jsonl
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    let fits = results.iter().filter(|r| r.fit.is_some()).count();
    let advice = advice(&results);
    assert!(!advice.is_empty());
    assert!(advice.windows(2).all(|w| w[0].fits >= w[1].fits));
    for a in &advice {
        assert_eq!(a.of, fits);
        let words = match &a.kind {
            AdviceKind::Correlated { a, b, .. } => format!("{a} and {b} are strongly correlated"),
            AdviceKind::Undetermined { parameter } => format!("{parameter} is not determined"),
            AdviceKind::AtBound { parameter } => format!("{parameter} sits at its"),
        };
        let warned = results
            .iter()
            .filter_map(|r| r.fit.as_ref())
            .filter(|d| d.warnings.iter().any(|w| w.starts_with(&words)))
            .count();
        assert_eq!(a.fits, warned, "{a}");
        assert!(a.to_string().contains("What would help"), "{a}");
    }
}

#[test]
fn campaign_advice_rounds_the_sweep_limit_for_people() {
    let a = Advice {
        kind: AdviceKind::Correlated {
            a: "R0".into(),
            b: "Rf".into(),
            arc_frequency_hz: Some(20_792.737),
        },
        fits: 175,
        of: 194,
    };
    let text = a.to_string();
    assert!(
        text.starts_with("R0 and Rf strongly correlated in 175 of 194 fits"),
        "{text}"
    );
    assert!(text.contains("extend the sweep above 210kHz"), "{text}");
}
