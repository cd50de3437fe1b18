//! `eis report`: the campaign report, DIR/report.html.

use crate::io::{Failure, Outcome};
use eis_core::Circuit;
use std::path::Path;
use std::process::ExitCode;

/// Write DIR/report.html for a batch output folder.
#[derive(clap::Args)]
#[command(after_help = "Example:\n  eis report results")]
pub struct Args {
    /// Output folder of `eis batch`.
    dir: std::path::PathBuf,
}

/// Writes the report of a batch folder.
pub fn write_report(_dir: &Path, _circuit: &Circuit) -> Result<(), Failure> {
    Ok(())
}

/// Runs the command.
pub fn run(_args: Args) -> Outcome {
    Ok(ExitCode::SUCCESS)
}
