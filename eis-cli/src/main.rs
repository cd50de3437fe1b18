//! `eis`: the command-line tool of the EIS toolkit. It translates arguments into settings, calls
//! `eis-core`, writes files and maps outcomes to exit codes: 0 success, 1 a computation failed or a
//! result is suspect, 2 bad input or usage.

/// `eprintln!` that never panics: the standard one panics when standard error is closed or full
/// (`2>/dev/full`), and then there is nowhere left to report anything, so the message is dropped.
/// Defined before the modules so that it shadows the standard macro in all of them.
macro_rules! eprintln {
    ($($arg:tt)*) => {{
        use std::io::Write as _;
        let _ = writeln!(std::io::stderr(), $($arg)*);
    }};
}

mod args;
mod commands;
mod format;
mod io;
mod plot;
mod reader_args;

use clap::{Parser, Subcommand};
use std::process::ExitCode;

/// Impedance spectroscopy for battery and electrochemistry labs: simulate, validate, fit and track cells.
#[derive(Parser)]
#[command(
    name = "eis",
    version,
    propagate_version = true,
    after_help = "Start with `eis demo`. Every command has --help with an example.\n\nCaution: cells can deliver large currents into a short and electrolytes can be corrosive; follow your\nlab's safety rules and local codes. Results and flags are engineering hints, not safety verdicts."
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    Demo(commands::demo::Args),
    Simulate(commands::simulate::Args),
    Inspect(commands::inspect::Args),
    Convert(commands::convert::Args),
    Check(commands::check::Args),
    Fit(commands::fit::Args),
    Drt(commands::drt::Args),
    Batch(commands::batch::Args),
    Trend(commands::trend::Args),
    Report(commands::report::Args),
    Plot(commands::plot::Args),
}

fn run(command: Command) -> io::Outcome {
    match command {
        Command::Demo(a) => commands::demo::run(a),
        Command::Simulate(a) => commands::simulate::run(a),
        Command::Inspect(a) => commands::inspect::run(a),
        Command::Convert(a) => commands::convert::run(a),
        Command::Check(a) => commands::check::run(a),
        Command::Fit(a) => commands::fit::run(a),
        Command::Drt(a) => commands::drt::run(a),
        Command::Batch(a) => commands::batch::run(a),
        Command::Trend(a) => commands::trend::run(a),
        Command::Report(a) => commands::report::run(a),
        Command::Plot(a) => commands::plot::run(a),
    }
}

fn main() -> ExitCode {
    match run(Cli::parse().command) {
        Ok(code) => code,
        Err(failure) => failure.report(),
    }
}
