//! `eis`: the command-line tool of the EIS toolkit. It translates arguments into settings, calls
//! `eis-core`, writes files and maps outcomes to exit codes: 0 success, 1 a computation failed or a
//! result is suspect, 2 bad input or usage.

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
#[command(name = "eis", version, about, long_about = None, propagate_version = true)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    Simulate(commands::simulate::Args),
    Inspect(commands::inspect::Args),
    Plot(commands::plot::Args),
    Drt(commands::drt::Args),
    Fit(commands::fit::Args),
    Convert(commands::convert::Args),
    Check(commands::check::Args),
    Batch(commands::batch::Args),
    Trend(commands::trend::Args),
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    let outcome = match cli.command {
        Command::Simulate(a) => commands::simulate::run(a),
        Command::Inspect(a) => commands::inspect::run(a),
        Command::Plot(a) => commands::plot::run(a),
        Command::Drt(a) => commands::drt::run(a),
        Command::Fit(a) => commands::fit::run(a),
        Command::Convert(a) => commands::convert::run(a),
        Command::Check(a) => commands::check::run(a),
        Command::Batch(a) => commands::batch::run(a),
        Command::Trend(a) => commands::trend::run(a),
    };
    match outcome {
        Ok(code) => code,
        Err(failure) => failure.report(),
    }
}
