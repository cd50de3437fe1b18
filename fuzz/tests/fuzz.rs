//! The fuzz harness inside `cargo test`: a short fixed-seed pass of each target, the replay of every
//! regression input, and (ignored) the replay of the inputs still waiting for a fix.
//!
//! Saved inputs are replayed by the `eis-fuzz replay` binary in a child process each, so that an
//! abort or a hang fails one input instead of the whole test run.
//!
//! A short pass fails on any failure that is not a known issue of its target (see
//! `Target::known_issues` and `fuzz/regressions/<target>/pending/`); known ones are printed.

use eis_fuzz::engine::{Config, Outcome, Report, Target, fuzz, watch_for_hangs};
use eis_fuzz::regress::{folder, inputs};
use eis_fuzz::targets::{CircuitTarget, NumericsTarget, ReaderTarget};
use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

/// The seed of the short passes (any fixed value; changing it explores other inputs).
const SEED: u64 = 0x00E1_5F0A;

fn short_pass<T: Target>(target: &T, iterations: u64) -> Report {
    // A hang would stop `cargo test` for good: end the process with the input printed instead.
    watch_for_hangs(
        Duration::from_secs(120),
        std::env::temp_dir().join("eis-fuzz-hangs"),
    );
    let report = fuzz(
        target,
        &Config::new()
            .with_seed(SEED)
            .with_iterations(iterations)
            .with_minimise_budget(300),
    );
    println!("{}", report.summary());
    for f in &report.failures {
        println!(
            "  {}: {} on {}",
            f.known.unwrap_or("NEW"),
            f.outcome.summary(),
            eis_fuzz::engine::escape(&f.input)
        );
    }
    let new: Vec<String> = report.new_failures().map(|f| f.outcome.summary()).collect();
    assert!(new.is_empty(), "new failures: {new:#?}");
    assert_eq!(report.executions, iterations);
    report
}

#[test]
fn circuit_short_pass() {
    short_pass(&CircuitTarget, 60_000);
}

#[test]
fn reader_short_pass() {
    let r = short_pass(&ReaderTarget, 6_000);
    // A quarter of the inputs are fresh exports checked by the round trip.
    assert!(r.generated > 1_000, "{}", r.summary());
}

#[test]
fn numerics_short_pass() {
    short_pass(&NumericsTarget, 800);
}

/// Replays one saved input in a child process (`eis-fuzz replay`), so that an abort (stack
/// overflow) or a hang fails this input alone; a child still running after `limit` is killed.
fn replay_in_child(target: &str, path: &Path, limit: Duration) -> Result<(), String> {
    let mut child = Command::new(env!("CARGO_BIN_EXE_eis-fuzz"))
        .arg("replay")
        .arg(target)
        .arg(path)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .map_err(|e| format!("cannot start eis-fuzz: {e}"))?;
    let start = Instant::now();
    loop {
        match child.try_wait() {
            Ok(Some(_)) => break,
            Ok(None) if start.elapsed() > limit => {
                let _ = child.kill();
                let _ = child.wait();
                return Err(format!("still running after {} s", limit.as_secs()));
            }
            Ok(None) => std::thread::sleep(Duration::from_millis(20)),
            Err(e) => return Err(e.to_string()),
        }
    }
    let out = child
        .wait_with_output()
        .map_err(|e| format!("cannot read the output: {e}"))?;
    if out.status.success() {
        Ok(())
    } else {
        let text = String::from_utf8_lossy(&out.stdout).to_string()
            + &String::from_utf8_lossy(&out.stderr);
        let last: Vec<&str> = text.lines().rev().take(2).collect();
        Err(format!("{}: {}", out.status, last.join(" / ")))
    }
}

/// Replays a folder; returns how many inputs it holds and the failures.
fn replay_folder(target: &str, pending: bool, limit: Duration) -> (usize, Vec<String>) {
    let files = inputs(&folder(target, pending));
    let failing = files
        .iter()
        .filter_map(|p| {
            replay_in_child(target, p, limit)
                .err()
                .map(|e| format!("{}: {e}", p.display()))
        })
        .collect();
    (files.len(), failing)
}

#[test]
fn regressions_pass() {
    for target in ["circuit", "reader", "numerics"] {
        let (n, failing) = replay_folder(target, false, Duration::from_secs(120));
        println!("{target}: {n} regression inputs replayed");
        assert!(
            failing.is_empty(),
            "regression inputs that fail again: {failing:#?}"
        );
    }
}

/// The inputs of the `pending/` folders, which fail on this branch: run with `--ignored` after a
/// fix, and move each input that passes (with its `.txt` and `.truth` files) up to its target's
/// regression folder.
#[test]
#[ignore = "inputs waiting for fixes elsewhere; run with --ignored to see which still fail"]
fn pending_inputs_pass() {
    let mut all = Vec::new();
    for target in ["circuit", "reader", "numerics"] {
        let (n, failing) = replay_folder(target, true, Duration::from_secs(20));
        println!(
            "{target}: {n} pending inputs, {} still failing",
            failing.len()
        );
        all.extend(failing);
    }
    assert!(all.is_empty(), "still failing: {all:#?}");
}

/// The engine on a target made to fail: a panic and an oracle failure are caught, told apart,
/// minimised and counted once each.
#[test]
fn the_engine_catches_minimises_and_deduplicates() {
    #[derive(Clone, Copy)]
    struct Toy;
    impl Target for Toy {
        type Truth = ();
        fn name(&self) -> &'static str {
            "toy"
        }
        fn generate(&self, _rng: &mut eis_fuzz::engine::Rng) -> (Vec<u8>, Option<()>) {
            (
                b"a harmless line\nanother line with XY inside\nlast\n".to_vec(),
                None,
            )
        }
        fn dictionary(&self) -> &'static [&'static [u8]] {
            &[b"XY", b"!"]
        }
        fn execute(
            &self,
            input: &[u8],
            _t: Option<&()>,
        ) -> Result<(), eis_fuzz::engine::Violation> {
            if input.windows(2).any(|w| w == b"XY") {
                let v: Vec<u8> = Vec::new();
                let _ = v[input.len()]; // an index panic, on purpose
            }
            if input.contains(&b'!') {
                return Err(eis_fuzz::engine::Violation::new(
                    "bang",
                    "an exclamation mark",
                ));
            }
            Ok(())
        }
        fn describe_truth(&self, _t: &()) -> String {
            String::new()
        }
    }
    let report = fuzz(&Toy, &Config::new().with_seed(3).with_iterations(2000));
    assert_eq!(report.failures.len(), 2, "{:#?}", report.failures);
    let panic = report
        .failures
        .iter()
        .find(|f| matches!(f.outcome, Outcome::Panic { .. }))
        .expect("the panic is found");
    assert_eq!(panic.input, b"XY");
    assert!(panic.outcome.summary().contains("index out of bounds"));
    assert!(panic.outcome.summary().contains("fuzz/tests/fuzz.rs"));
    let bang = report
        .failures
        .iter()
        .find(|f| matches!(f.outcome, Outcome::Violation(_)))
        .expect("the violation is found");
    assert_eq!(bang.input, b"!");
}
