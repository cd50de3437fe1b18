//! The engine: runs a target on generated and mutated inputs with a seeded generator, turns panics into
//! findings (first line of the message and where it happened), minimises each new finding and counts
//! executions.
//!
//! A panic is caught with [`std::panic::catch_unwind`]; while an input runs, a process-wide panic hook
//! (installed once) records the message for the engine instead of printing it. Outside a run the hook
//! hands over to the hook that was there before, so other tests in the same process still print theirs.
//! A hang cannot be interrupted in-process either: with [`watch_for_hangs`] on, a watchdog thread
//! writes the input that has run longer than the limit to a file, prints it and ends the process with
//! status 3. An abort (stack overflow, out of memory) ends the process too; the seed and the number of
//! executions reproduce the run.

use crate::minimise::minimise;
use crate::mutate::mutate;
use rand::rngs::Xoshiro256PlusPlus;
use rand::{RngExt, SeedableRng};
use std::cell::{Cell, RefCell};
use std::collections::BTreeSet;
use std::collections::HashMap;
use std::panic::{self, AssertUnwindSafe};
use std::path::PathBuf;
use std::sync::{Mutex, Once, OnceLock};
use std::thread::ThreadId;
use std::time::{Duration, Instant};

/// The generator of every random choice: xoshiro256++, stable across platforms and `rand` versions,
/// so a seed reproduces a run.
pub type Rng = Xoshiro256PlusPlus;

/// A generator from a seed.
pub fn rng(seed: u64) -> Rng {
    Rng::seed_from_u64(seed)
}

/// A property of the target that an input broke without a panic (an oracle failure).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Violation {
    /// What kind of failure, fixed text without values; findings with the same class count as one.
    pub class: String,
    /// The particulars: values, the text that failed to read back, ...
    pub detail: String,
}

impl Violation {
    /// A violation of `class` with `detail`.
    pub fn new(class: impl Into<String>, detail: impl Into<String>) -> Violation {
        Violation {
            class: class.into(),
            detail: detail.into(),
        }
    }
}

/// Something to fuzz.
pub trait Target {
    /// What a generated input is known to hold, for oracles that compare the output with it (the
    /// reader's round trip). Mutated inputs have none.
    type Truth;

    /// The name used on the command line and for the regression folder.
    fn name(&self) -> &'static str;

    /// A fresh well-formed (or deliberately almost well-formed) input, with its truth when the target
    /// checks one.
    fn generate(&self, rng: &mut Rng) -> (Vec<u8>, Option<Self::Truth>);

    /// Inputs the pool starts with (for example the repository's own files).
    fn seeds(&self) -> Vec<Vec<u8>> {
        Vec::new()
    }

    /// Tokens the mutator inserts: grammar words, delimiters, awkward numbers.
    fn dictionary(&self) -> &'static [&'static [u8]];

    /// Longest input the mutator makes.
    fn max_len(&self) -> usize {
        4096
    }

    /// Runs one input. Returns the broken property, if any; a panic is caught by the engine.
    ///
    /// # Errors
    ///
    /// The [`Violation`] of a property the target checks.
    fn execute(&self, input: &[u8], truth: Option<&Self::Truth>) -> Result<(), Violation>;

    /// The truth in words, saved beside an input whose finding needs it (a `.truth` file).
    fn describe_truth(&self, truth: &Self::Truth) -> String;

    /// The truth back from the words of [`Target::describe_truth`], for replaying a saved finding.
    fn truth_from_text(&self, _text: &str) -> Option<Self::Truth> {
        None
    }

    /// Most executions spent minimising one finding (default 4000; slow targets take fewer).
    fn minimise_budget(&self) -> usize {
        4000
    }

    /// Failures already known and waiting for a fix elsewhere (their inputs are in
    /// `fuzz/regressions/<target>/pending/`). They are still looked for and reported, but apart from
    /// new ones.
    fn known_issues(&self) -> &'static [KnownIssue] {
        &[]
    }
}

/// A failure known to be waiting for a fix: it matches when every pattern occurs in the summary line
/// of the outcome ([`Outcome::summary`]).
#[derive(Debug, Clone, Copy)]
pub struct KnownIssue {
    /// Short name, as in the pending regression file.
    pub name: &'static str,
    /// Texts that must all occur in the summary.
    pub patterns: &'static [&'static str],
}

impl KnownIssue {
    /// Whether `outcome` is this issue.
    pub fn matches(&self, outcome: &Outcome) -> bool {
        let s = outcome.summary();
        self.patterns.iter().all(|p| s.contains(p))
    }
}

/// What one execution did.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Outcome {
    /// Nothing wrong.
    Pass,
    /// A panic: where (`file:line:column`) and the first line of its message.
    Panic {
        /// `file:line:column` of the panic.
        location: String,
        /// First line of the panic message.
        message: String,
    },
    /// A property failed without a panic.
    Violation(Violation),
    /// The execution took longer than the configured limit.
    Slow(Duration),
}

impl Outcome {
    /// The key that decides whether two findings are the same (panic location, violation class), or
    /// `None` for a pass.
    pub fn key(&self) -> Option<String> {
        match self {
            Outcome::Pass => None,
            Outcome::Panic { location, .. } => Some(format!("panic at {location}")),
            Outcome::Violation(v) => Some(format!("violation: {}", v.class)),
            Outcome::Slow(_) => Some("slow".to_owned()),
        }
    }

    /// One line for reports.
    pub fn summary(&self) -> String {
        match self {
            Outcome::Pass => "pass".to_owned(),
            Outcome::Panic { location, message } => format!("panic at {location}: {message}"),
            Outcome::Violation(v) => {
                let first = v.detail.lines().next().unwrap_or("");
                format!("{}: {first}", v.class)
            }
            Outcome::Slow(d) => format!("slow: one execution took {:.3} s", d.as_secs_f64()),
        }
    }
}

thread_local! {
    static CAPTURING: Cell<bool> = const { Cell::new(false) };
    static CAPTURED: RefCell<Option<(String, String)>> = const { RefCell::new(None) };
}

fn payload_text(payload: &(dyn std::any::Any + Send)) -> String {
    if let Some(s) = payload.downcast_ref::<&str>() {
        (*s).to_owned()
    } else if let Some(s) = payload.downcast_ref::<String>() {
        s.clone()
    } else {
        "(panic payload is not text)".to_owned()
    }
}

fn first_line(s: &str) -> String {
    s.lines().next().unwrap_or("").to_owned()
}

/// Installs (once per process) the hook that records panics of the current thread while it runs an
/// input and passes every other panic to the previous hook.
fn install_hook() {
    static ONCE: Once = Once::new();
    ONCE.call_once(|| {
        let previous = panic::take_hook();
        panic::set_hook(Box::new(move |info| {
            if CAPTURING.with(Cell::get) {
                let mut location = info
                    .location()
                    .map(|l| format!("{}:{}:{}", l.file(), l.line(), l.column()))
                    .unwrap_or_else(|| "unknown location".to_owned());
                // A panic inside the standard library (capacity overflow, ...) is placed at the
                // innermost frame of our own code, from a backtrace taken only in that case.
                if !location.starts_with("eis-") && !location.contains("/eis-") {
                    let trace = std::backtrace::Backtrace::force_capture().to_string();
                    if let Some(ours) = trace
                        .lines()
                        .filter_map(|l| l.trim().strip_prefix("at "))
                        .find(|l| l.contains("eis-core/src/") || l.contains("eis-cli/src/"))
                    {
                        let ours = ["eis-core/src/", "eis-cli/src/"]
                            .iter()
                            .find_map(|k| ours.find(k).map(|i| &ours[i..]))
                            .unwrap_or(ours);
                        location = format!("{ours} (in {location})");
                    }
                }
                let message = first_line(&payload_text(info.payload()));
                CAPTURED.with(|c| *c.borrow_mut() = Some((location, message)));
            } else {
                previous(info);
            }
        }));
    });
}

/// Inputs running now, per thread: when they started, the target and the bytes.
type Running = Mutex<HashMap<ThreadId, (Instant, &'static str, Vec<u8>)>>;

struct Watch {
    limit: Duration,
    dir: PathBuf,
    running: Running,
}

static WATCH: OnceLock<Watch> = OnceLock::new();

/// Starts (once per process) a watchdog: an input that runs longer than `limit` is written to
/// `dir/<target>/hang`, printed with its target, and the process exits with status 3. A second call
/// changes nothing.
pub fn watch_for_hangs(limit: Duration, dir: PathBuf) {
    let mut started = false;
    WATCH.get_or_init(|| {
        started = true;
        Watch {
            limit,
            dir,
            running: Mutex::new(HashMap::new()),
        }
    });
    if !started {
        return;
    }
    std::thread::spawn(|| {
        let Some(w) = WATCH.get() else { return };
        loop {
            std::thread::sleep(Duration::from_millis(200).min(w.limit));
            let hung = w.running.lock().ok().and_then(|m| {
                m.values()
                    .find(|(t0, _, _)| t0.elapsed() > w.limit)
                    .map(|(t0, name, input)| (t0.elapsed(), *name, input.clone()))
            });
            if let Some((elapsed, name, input)) = hung {
                let dir = w.dir.join(name);
                let path = dir.join("hang");
                let saved =
                    std::fs::create_dir_all(&dir).and_then(|()| std::fs::write(&path, &input));
                eprintln!(
                    "hang: one execution of target {name} has run {:.1} s (limit {:.1} s); input ({} bytes): {}",
                    elapsed.as_secs_f64(),
                    w.limit.as_secs_f64(),
                    input.len(),
                    escape(&input)
                );
                match saved {
                    Ok(()) => eprintln!("hang: input saved to {}", path.display()),
                    Err(e) => eprintln!("hang: cannot save the input to {}: {e}", path.display()),
                }
                std::process::exit(3);
            }
        }
    });
}

/// Runs `input` once, catching a panic.
pub fn run_one<T: Target>(target: &T, input: &[u8], truth: Option<&T::Truth>) -> Outcome {
    install_hook();
    let watch = WATCH.get();
    if let Some(w) = watch {
        if let Ok(mut m) = w.running.lock() {
            m.insert(
                std::thread::current().id(),
                (Instant::now(), target.name(), input.to_vec()),
            );
        }
    }
    CAPTURED.with(|c| c.borrow_mut().take());
    CAPTURING.with(|c| c.set(true));
    let result = panic::catch_unwind(AssertUnwindSafe(|| target.execute(input, truth)));
    CAPTURING.with(|c| c.set(false));
    if let Some(w) = watch {
        if let Ok(mut m) = w.running.lock() {
            m.remove(&std::thread::current().id());
        }
    }
    match result {
        Ok(Ok(())) => Outcome::Pass,
        Ok(Err(v)) => Outcome::Violation(v),
        Err(payload) => {
            let (location, message) = CAPTURED
                .with(|c| c.borrow_mut().take())
                .unwrap_or_else(|| ("unknown location".to_owned(), payload_text(&*payload)));
            Outcome::Panic { location, message }
        }
    }
}

/// Settings of a run. Build with [`Config::new`] and the `with_*` setters.
#[derive(Debug, Clone)]
pub struct Config {
    /// Seed of the generator (default 1).
    pub seed: u64,
    /// Stop after this many executions (default 1000 when no duration is given).
    pub iterations: Option<u64>,
    /// Stop after this long (default none).
    pub duration: Option<Duration>,
    /// Stop after this many distinct findings (default 20).
    pub max_failures: usize,
    /// Most executions spent minimising one finding (default 4000).
    pub minimise_budget: usize,
    /// One execution longer than this is a finding (default 10 s).
    pub slow: Duration,
    /// Print progress to standard error every this often (default none).
    pub progress: Option<Duration>,
    /// Print each new finding to standard error as it is found (default false).
    pub verbose: bool,
}

impl Config {
    /// Defaults: seed 1, 1000 executions, at most 20 findings.
    pub fn new() -> Config {
        Config {
            seed: 1,
            iterations: None,
            duration: None,
            max_failures: 20,
            minimise_budget: 4000,
            slow: Duration::from_secs(10),
            progress: None,
            verbose: false,
        }
    }
    /// Sets the seed.
    pub fn with_seed(mut self, seed: u64) -> Config {
        self.seed = seed;
        self
    }
    /// Sets the number of executions.
    pub fn with_iterations(mut self, n: u64) -> Config {
        self.iterations = Some(n);
        self
    }
    /// Sets the duration.
    pub fn with_duration(mut self, d: Duration) -> Config {
        self.duration = Some(d);
        self
    }
    /// Sets the most distinct findings before the run stops.
    pub fn with_max_failures(mut self, n: usize) -> Config {
        self.max_failures = n.max(1);
        self
    }
    /// Sets the minimiser's budget of executions per finding.
    pub fn with_minimise_budget(mut self, n: usize) -> Config {
        self.minimise_budget = n;
        self
    }
    /// Sets the time above which one execution is a finding.
    pub fn with_slow(mut self, d: Duration) -> Config {
        self.slow = d;
        self
    }
    /// Prints progress every `d`.
    pub fn with_progress(mut self, d: Duration) -> Config {
        self.progress = Some(d);
        self
    }
    /// Prints findings as they come.
    pub fn with_verbose(mut self, on: bool) -> Config {
        self.verbose = on;
        self
    }
}

impl Default for Config {
    fn default() -> Self {
        Config::new()
    }
}

/// One distinct finding.
#[derive(Debug, Clone)]
pub struct Failure {
    /// What happened on the minimised input.
    pub outcome: Outcome,
    /// The minimised input (the original when the finding needs the truth or is a slow run).
    pub input: Vec<u8>,
    /// Length of the input as found.
    pub original_len: usize,
    /// The truth in words, when the finding depends on it.
    pub truth: Option<String>,
    /// Execution number at which it was found, from 1.
    pub execution: u64,
    /// The name of the known issue it matches, if any.
    pub known: Option<&'static str>,
}

/// The outcome of a run.
#[derive(Debug, Clone)]
pub struct Report {
    /// The target's name.
    pub target: &'static str,
    /// Executions, not counting those of the minimiser.
    pub executions: u64,
    /// Of which on freshly generated inputs (the rest are mutations).
    pub generated: u64,
    /// Wall time of the run, minimising included.
    pub elapsed: Duration,
    /// Distinct findings, in the order found.
    pub failures: Vec<Failure>,
    /// The slowest execution and its input.
    pub slowest: (Duration, Vec<u8>),
}

impl Report {
    /// The failures that match no known issue.
    pub fn new_failures(&self) -> impl Iterator<Item = &Failure> {
        self.failures.iter().filter(|f| f.known.is_none())
    }

    /// Executions per second.
    pub fn per_second(&self) -> f64 {
        self.executions as f64 / self.elapsed.as_secs_f64().max(1e-9)
    }

    /// The summary line: executions, rate, findings.
    pub fn summary(&self) -> String {
        format!(
            "{}: {} executions ({} generated, {} mutated) in {:.1} s, {:.0}/s, {} new failures, {} known; slowest execution {:.1} ms",
            self.target,
            self.executions,
            self.generated,
            self.executions - self.generated,
            self.elapsed.as_secs_f64(),
            self.per_second(),
            self.new_failures().count(),
            self.failures.len() - self.new_failures().count(),
            self.slowest.0.as_secs_f64() * 1e3
        )
    }
}

/// Pool of inputs that mutations start from.
const POOL: usize = 512;

/// Runs `target` as `config` says and reports what it found.
pub fn fuzz<T: Target>(target: &T, config: &Config) -> Report {
    let start = Instant::now();
    let mut rng = rng(config.seed);
    let dict = target.dictionary();
    let max_len = target.max_len();
    let mut pool: Vec<Vec<u8>> = target.seeds();
    let limit = match (config.iterations, config.duration) {
        (None, None) => Some(1000),
        (n, _) => n,
    };
    let mut report = Report {
        target: target.name(),
        executions: 0,
        generated: 0,
        elapsed: Duration::ZERO,
        failures: Vec::new(),
        slowest: (Duration::ZERO, Vec::new()),
    };
    let mut seen: BTreeSet<String> = BTreeSet::new();
    let mut last_progress = Instant::now();
    loop {
        if limit.is_some_and(|n| report.executions >= n) {
            break;
        }
        if report.executions % 64 == 0 {
            if config.duration.is_some_and(|d| start.elapsed() >= d) {
                break;
            }
            if let Some(every) = config.progress {
                if last_progress.elapsed() >= every {
                    last_progress = Instant::now();
                    report.elapsed = start.elapsed();
                    eprintln!("  {}", report.summary());
                }
            }
        }
        let fresh = pool.is_empty() || rng.random_ratio(1, 4);
        let (input, truth) = if fresh {
            let (input, truth) = target.generate(&mut rng);
            if pool.len() < POOL {
                pool.push(input.clone());
            } else {
                let k = rng.random_range(0..POOL);
                pool[k] = input.clone();
            }
            report.generated += 1;
            (input, truth)
        } else {
            let mut input = pool[rng.random_range(0..pool.len())].clone();
            let other = &pool[rng.random_range(0..pool.len())];
            mutate(&mut input, other, dict, max_len, &mut rng);
            (input, None)
        };
        let t0 = Instant::now();
        let mut outcome = run_one(target, &input, truth.as_ref());
        let dt = t0.elapsed();
        report.executions += 1;
        if dt > report.slowest.0 {
            report.slowest = (dt, input.clone());
        }
        if outcome == Outcome::Pass && dt > config.slow {
            outcome = Outcome::Slow(dt);
        }
        let Some(key) = outcome.key() else {
            if !fresh && pool.len() < POOL && rng.random_ratio(1, 16) {
                pool.push(input);
            }
            continue;
        };
        if !seen.insert(key.clone()) {
            continue;
        }
        let mut failure = settle(
            target,
            config,
            outcome,
            input,
            truth,
            &key,
            report.executions,
        );
        failure.known = target
            .known_issues()
            .iter()
            .find(|k| k.matches(&failure.outcome))
            .map(|k| k.name);
        if config.verbose {
            eprintln!(
                "  finding {}{} after {} executions: {}\n    input ({} bytes, {} as found): {}",
                seen.len(),
                failure
                    .known
                    .map(|k| format!(" (known: {k})"))
                    .unwrap_or_default(),
                failure.execution,
                failure.outcome.summary(),
                failure.input.len(),
                failure.original_len,
                escape(&failure.input)
            );
        }
        report.failures.push(failure);
        if report.failures.len() >= config.max_failures {
            break;
        }
    }
    report.elapsed = start.elapsed();
    report
}

/// Minimises a new finding when it reproduces without the truth; otherwise keeps it as found.
fn settle<T: Target>(
    target: &T,
    config: &Config,
    outcome: Outcome,
    input: Vec<u8>,
    truth: Option<T::Truth>,
    key: &str,
    execution: u64,
) -> Failure {
    let original_len = input.len();
    let alone = run_one(target, &input, None);
    if matches!(outcome, Outcome::Slow(_)) || alone.key().as_deref() != Some(key) {
        return Failure {
            outcome,
            truth: truth.as_ref().map(|t| target.describe_truth(t)),
            input,
            original_len,
            execution,
            known: None,
        };
    }
    let small = minimise(
        &input,
        |candidate| run_one(target, candidate, None).key().as_deref() == Some(key),
        config.minimise_budget.min(target.minimise_budget()),
    );
    Failure {
        outcome: run_one(target, &small, None),
        input: small,
        original_len,
        truth: None,
        execution,
        known: None,
    }
}

/// The input as a Rust-like byte string: printable ASCII as is, the rest as escapes.
pub fn escape(input: &[u8]) -> String {
    let mut s = String::with_capacity(input.len() + 2);
    s.push('"');
    for &b in input {
        match b {
            b'\n' => s.push_str("\\n"),
            b'\r' => s.push_str("\\r"),
            b'\t' => s.push_str("\\t"),
            b'"' => s.push_str("\\\""),
            b'\\' => s.push_str("\\\\"),
            0x20..=0x7e => s.push(b as char),
            _ => s.push_str(&format!("\\x{b:02x}")),
        }
    }
    s.push('"');
    s
}
