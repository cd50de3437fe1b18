//! `eis-fuzz`: runs the fuzz targets from the command line.
//!
//! ```text
//! eis-fuzz <circuit|reader|numerics|all> [--seconds S] [--iterations N] [--seed N] [--save DIR]
//!          [--max-failures N] [--slow S] [--hang S] [--quiet]
//! eis-fuzz replay <circuit|reader|numerics> FILE...
//! ```

use eis_fuzz::engine::{Config, Report, Target, escape, fuzz};
use eis_fuzz::regress::replay_file;
use eis_fuzz::targets::{CircuitTarget, NumericsTarget, ReaderTarget};
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::time::Duration;

const USAGE: &str = "usage: eis-fuzz <circuit|reader|numerics|all> [--seconds S] [--iterations N] \
[--seed N] [--save DIR] [--max-failures N] [--slow S] [--hang S] [--quiet]
       eis-fuzz replay <circuit|reader|numerics> FILE...

Runs each target on generated and mutated inputs (seeded, so a run can be repeated), prints
executions, executions per second and each distinct failure with its minimised input, and saves
the failing inputs under DIR/<target>/ (default target/eis-fuzz). An execution longer than --slow
seconds (default 10) is a failure; one longer than --hang seconds (default 60) is written to
DIR/<target>/hang and ends the run with status 3. Failures that match a known issue (waiting for a
fix, see fuzz/regressions/<target>/pending/) are reported apart; exit status 1 if anything new
failed.
Without --seconds or --iterations a target runs 1000 executions.";

struct Args {
    targets: Vec<String>,
    hang: Duration,
    config: Config,
    save: PathBuf,
}

/// The value `v` of option `name` as a whole number.
fn whole<T: std::str::FromStr>(name: &str, v: &str) -> Result<T, String> {
    v.parse()
        .map_err(|_| format!("{name}: `{v}` is not a whole number"))
}

/// The value `v` of option `name` as a positive, finite number of seconds.
fn seconds(name: &str, v: &str) -> Result<Duration, String> {
    v.parse()
        .ok()
        .filter(|s: &f64| s.is_finite() && *s > 0.0)
        .map(Duration::from_secs_f64)
        .ok_or_else(|| format!("{name}: `{v}` is not a positive number"))
}

fn parse_args(args: &[String]) -> Result<Args, String> {
    let mut targets = Vec::new();
    let mut config = Config::new().with_progress(Duration::from_secs(30));
    let mut save = PathBuf::from("target/eis-fuzz");
    let mut hang = Duration::from_secs(60);
    let mut it = args.iter();
    while let Some(a) = it.next() {
        let mut value = |name: &str| {
            it.next()
                .cloned()
                .ok_or_else(|| format!("{name} needs a value"))
        };
        match a.as_str() {
            "--seconds" => config = config.with_duration(seconds(a, &value(a)?)?),
            "--iterations" => config = config.with_iterations(whole(a, &value(a)?)?),
            "--seed" => config = config.with_seed(whole(a, &value(a)?)?),
            "--max-failures" => config = config.with_max_failures(whole(a, &value(a)?)?),
            "--slow" => config = config.with_slow(seconds(a, &value(a)?)?),
            "--hang" => hang = seconds(a, &value(a)?)?,
            "--save" => save = PathBuf::from(value(a)?),
            "--quiet" => config.progress = None,
            "-h" | "--help" => return Err(String::new()),
            t if !t.starts_with('-') => targets.push(t.to_owned()),
            other => return Err(format!("unknown option `{other}`")),
        }
    }
    if targets.is_empty() {
        return Err("no target given".to_owned());
    }
    Ok(Args {
        targets,
        hang,
        config: config.with_verbose(true),
        save,
    })
}

fn save<T: Target>(target: &T, report: &Report, dir: &Path, seed: u64) {
    let dir = dir.join(target.name());
    if report.failures.is_empty() {
        return;
    }
    if let Err(e) = std::fs::create_dir_all(&dir) {
        eprintln!("cannot create {}: {e}", dir.display());
        return;
    }
    for (k, f) in report.failures.iter().enumerate() {
        let path = dir.join(format!("seed{seed}-{}", k + 1));
        let mut note = f.outcome.summary();
        note.push('\n');
        let mut written = std::fs::write(&path, &f.input)
            .and_then(|()| std::fs::write(path.with_extension("txt"), note));
        if let Some(t) = &f.truth {
            written = written.and_then(|()| std::fs::write(path.with_extension("truth"), t));
        }
        match written {
            Ok(()) => eprintln!("  saved {}", path.display()),
            Err(e) => eprintln!("cannot write {}: {e}", path.display()),
        }
    }
}

fn run<T: Target>(target: &T, args: &Args) -> bool {
    eprintln!("fuzzing {} (seed {})", target.name(), args.config.seed);
    let report = fuzz(target, &args.config);
    println!("{}", report.summary());
    for f in &report.failures {
        match f.known {
            Some(k) => println!("  known ({k}): {}", f.outcome.summary()),
            None => println!("  NEW: {}", f.outcome.summary()),
        }
        println!(
            "    minimised input ({} bytes, {} as found): {}",
            f.input.len(),
            f.original_len,
            escape(&f.input)
        );
    }
    save(target, &report, &args.save, args.config.seed);
    report.new_failures().count() == 0
}

fn replay<T>(target: &T, files: &[String]) -> bool
where
    T: Target + Clone + Send + 'static,
    T::Truth: Send + 'static,
{
    let mut ok = true;
    for file in files {
        let outcome = replay_file(target, Path::new(file), Duration::from_secs(60));
        println!("{file}: {}", outcome.summary());
        ok &= outcome.key().is_none();
    }
    ok
}

fn main() -> ExitCode {
    let argv: Vec<String> = std::env::args().skip(1).collect();
    if argv.first().map(String::as_str) == Some("replay") {
        let ok = match argv.get(1).map(String::as_str) {
            Some("circuit") => replay(&CircuitTarget, &argv[2..]),
            Some("reader") => replay(&ReaderTarget, &argv[2..]),
            Some("numerics") => replay(&NumericsTarget, &argv[2..]),
            _ => {
                eprintln!("{USAGE}");
                return ExitCode::from(2);
            }
        };
        return if ok {
            ExitCode::SUCCESS
        } else {
            ExitCode::FAILURE
        };
    }
    let args = match parse_args(&argv) {
        Ok(a) => a,
        Err(e) => {
            if !e.is_empty() {
                eprintln!("eis-fuzz: {e}");
            }
            eprintln!("{USAGE}");
            return ExitCode::from(2);
        }
    };
    eis_fuzz::engine::watch_for_hangs(args.hang, args.save.clone());
    let numerics = NumericsTarget;
    let mut ok = true;
    for t in args.targets.clone() {
        ok &= match t.as_str() {
            "circuit" => run(&CircuitTarget, &args),
            "reader" => run(&ReaderTarget, &args),
            "numerics" => run(&numerics, &args),
            "all" => run(&CircuitTarget, &args) & run(&ReaderTarget, &args) & run(&numerics, &args),
            other => {
                eprintln!("eis-fuzz: unknown target `{other}`\n{USAGE}");
                return ExitCode::from(2);
            }
        };
    }
    if ok {
        ExitCode::SUCCESS
    } else {
        ExitCode::FAILURE
    }
}
