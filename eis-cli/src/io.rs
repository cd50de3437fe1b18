//! Files: loading models, atomic writes that never touch an input, and the failure type that maps to
//! exit codes.

use anyhow::Context;
use eis_core::Circuit;
use eis_core::output::OutputError;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// Why a command stopped; decides the exit status.
#[derive(Debug)]
pub enum Failure {
    /// Bad input or usage: exit status 2.
    BadInput(anyhow::Error),
    /// A computation failed or a result is not to be trusted: exit status 1.
    Failed(anyhow::Error),
    /// Standard output was closed by its reader (`eis ... | head`): the command ends quietly with
    /// exit status 0, as Unix filters do.
    BrokenPipe,
}

impl Failure {
    /// Prints the error to stderr and returns the exit code.
    pub fn report(self) -> ExitCode {
        let (err, code) = match self {
            Failure::BadInput(e) => (e, 2),
            Failure::Failed(e) => (e, 1),
            Failure::BrokenPipe => return ExitCode::SUCCESS,
        };
        // Standard error may be closed or full too; then there is nowhere left to say so.
        let _ = writeln!(std::io::stderr(), "error: {err:#}");
        ExitCode::from(code)
    }
}

/// Shorthand for a bad-input failure.
pub fn bad(e: impl Into<anyhow::Error>) -> Failure {
    Failure::BadInput(e.into())
}

/// Result of a command.
pub type Outcome = Result<ExitCode, Failure>;

/// A model argument: a circuit file path if such a file exists (or the text ends in `.circ`), else an
/// inline expression.
pub fn load_model(arg: &str) -> Result<Circuit, Failure> {
    let path = Path::new(arg);
    if path.is_file() || arg.ends_with(".circ") {
        let text = std::fs::read_to_string(path)
            .with_context(|| format!("cannot read circuit file {}", path.display()))
            .map_err(Failure::BadInput)?;
        eis_core::circuit::parse(&text).map_err(|e| {
            bad(anyhow::anyhow!(
                "{}",
                e.with_origin(path.display().to_string())
            ))
        })
    } else {
        eis_core::circuit::parse(arg).map_err(|e| bad(anyhow::anyhow!("{e}")))
    }
}

/// Applies `--set`, `--fix` and `--bound` style overrides, each written `NAME=...`.
pub fn apply_overrides<'a>(
    circuit: &mut Circuit,
    args: impl IntoIterator<Item = &'a str>,
) -> Result<(), Failure> {
    for a in args {
        circuit
            .apply_override(a)
            .map_err(|e| bad(anyhow::anyhow!("in option value `{a}`:\n{e}")))?;
    }
    Ok(())
}

/// Writes `bytes` to `path` with the one output writer of the toolkit ([`eis_core::output`]): a
/// regular file (or a new one) atomically, through a temporary file renamed over it; through symbolic
/// links to their target; straight into a FIFO or device, which stay what they are. Refuses to write
/// over any of `inputs`, also through a link.
pub fn write_atomic(path: &Path, bytes: &[u8], inputs: &[PathBuf]) -> Result<(), Failure> {
    eis_core::output::write(path, bytes, inputs).map_err(|e| match e {
        OutputError::OverwritesInput(_) | OutputError::NotAFile { .. } => bad(e),
        e => Failure::Failed(e.into()),
    })
}

/// Writes `text` to standard output. A closed pipe ends the command quietly ([`Failure::BrokenPipe`]);
/// any other failure (a full disk, `> /dev/full`) is an error with exit status 1.
pub fn print(text: &str) -> Result<(), Failure> {
    let mut out = std::io::stdout().lock();
    out.write_all(text.as_bytes())
        .and_then(|_| out.flush())
        .map_err(|e| match e.kind() {
            std::io::ErrorKind::BrokenPipe => Failure::BrokenPipe,
            _ => Failure::Failed(anyhow::anyhow!("cannot write to standard output: {e}")),
        })
}

/// Writes to `path`, or to stdout when `path` is `None` or `-`.
pub fn write_output(path: Option<&Path>, text: &str, inputs: &[PathBuf]) -> Result<(), Failure> {
    match path {
        Some(p) if p != Path::new("-") => write_atomic(p, text.as_bytes(), inputs),
        _ => print(text),
    }
}

/// Reads the spectra of one input file with the generic reader, printing its warnings on stderr.
/// For commands that take one file (`fit`, `drt`, `plot`), where an unreadable file is bad input.
///
/// # Errors
///
/// The first error of the file (unreadable, no table, a bad spectrum) as a [`Failure::BadInput`]
/// (exit status 2).
pub fn read_spectra(
    path: &Path,
    options: &eis_core::import::ReaderOptions,
) -> Result<Vec<eis_core::Spectrum>, Failure> {
    let file = read_one(path, options);
    match file.errors.into_iter().next() {
        Some(e) => Err(Failure::BadInput(anyhow::anyhow!("{e}"))),
        None => Ok(file.spectra),
    }
}

/// The outcome of reading one input: the spectra read and the errors met (an unreadable file gives
/// one error and no spectra; a bad spectrum gives one error and the others are kept).
#[derive(Debug)]
pub struct FileSpectra {
    /// Spectra read, in file order.
    pub spectra: Vec<eis_core::Spectrum>,
    /// Errors, in file order.
    pub errors: Vec<eis_core::import::DataError>,
}

/// Points above which a spectrum gets a note on its cost (a two-arc fit of 20,000 points takes about
/// 1.4 s, of 100,000 about 9 s, on one core of the reference machine).
const LARGE_SPECTRUM: usize = 20_000;

/// A spinner for a step that can take more than a second, on a terminal only (hidden otherwise).
pub fn step(what: &'static str) -> indicatif::ProgressBar {
    use std::io::IsTerminal;
    if !std::io::stderr().is_terminal() {
        return indicatif::ProgressBar::hidden();
    }
    let s = indicatif::ProgressBar::new_spinner().with_message(what);
    s.enable_steady_tick(std::time::Duration::from_millis(120));
    s
}

/// Points above which a single fit or DRT shows a spinner on a terminal (a two-arc fit of 2,000
/// points takes about 0.1 s, of 20,000 about 1.4 s).
const SPINNER_POINTS: usize = 2_000;

/// [`step`] for an analysis of a spectrum of `points` points: only when it can take a while.
pub fn step_for(points: usize, what: &'static str) -> indicatif::ProgressBar {
    if points > SPINNER_POINTS {
        step(what)
    } else {
        indicatif::ProgressBar::hidden()
    }
}

/// A note on stderr when a spectrum is long enough for its analyses to take seconds.
pub fn note_size(file: &str, spectrum: usize, points: usize) {
    if points > LARGE_SPECTRUM {
        eprintln!(
            "{file}, spectrum {spectrum}: note: {points} points; fitting, checking or a DRT of that \
             many points takes seconds (crop with --fmin/--fmax, or average repeated sweeps)"
        );
    }
}

/// Reads one input, keeping the good spectra of a partly bad file; warnings go to stderr.
pub fn read_one(path: &Path, options: &eis_core::import::ReaderOptions) -> FileSpectra {
    let mut out = FileSpectra {
        spectra: Vec::new(),
        errors: Vec::new(),
    };
    let file = path.display().to_string();
    let read = each_spectrum(path, options, |item| {
        match item {
            Ok(s) => {
                note_size(&file, out.spectra.len() + 1, s.len());
                out.spectra.push(s);
            }
            Err(e) => out.errors.push(e),
        }
        Ok::<(), std::convert::Infallible>(())
    });
    if let Err(never) = read {
        match never {}
    }
    out
}

/// Reads the spectra of `path` one at a time with the generic reader and hands each to `each`, in file
/// order, as a spectrum or as the error of that spectrum (or of the whole file, which then gives only
/// that error). Warnings go to stderr, the rows dropped anywhere in the file as one summary after its
/// other messages. Stops at the first error `each` returns.
pub fn each_spectrum<E>(
    path: &Path,
    options: &eis_core::import::ReaderOptions,
    mut each: impl FnMut(Result<eis_core::Spectrum, eis_core::import::DataError>) -> Result<(), E>,
) -> Result<(), E> {
    let reader = match eis_core::import::SpectrumReader::open(path, options.clone()) {
        Ok(reader) => reader,
        Err(e) => return each(Err(e)),
    };
    let mut gathered = eis_core::import::FileWarnings::new(reader.file());
    for item in reader {
        match item {
            Ok(imported) => {
                for w in gathered.pass(&imported.warnings) {
                    eprintln!("{w}");
                }
                each(Ok(imported.spectrum))?;
            }
            Err(e) => each(Err(e))?,
        }
    }
    if let Some(w) = gathered.finish() {
        eprintln!("{w}");
    }
    Ok(())
}
