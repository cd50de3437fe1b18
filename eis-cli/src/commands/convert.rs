//! `eis convert`: every spectrum of any readable export as a canonical CSV, plus an index.

use crate::io::{Failure, Outcome, write_atomic};
use crate::reader_args::ReaderArgs;
use anyhow::anyhow;
use eis_core::import::ReaderOptions;
use eis_core::number::format_float;
use eis_core::spectrum::MetaValue;
use std::collections::HashSet;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// Convert potentiostat exports to canonical spectrum CSV files.
///
/// Converts delimited-text exports to canonical spectrum CSV files (frequency_hz,z_real_ohm,z_imag_ohm;
/// high to low frequency), one file per spectrum named STEM_N.csv (the input file stem and the spectrum number from 1), and write
/// DIR/index.csv with one row per spectrum (file, spectrum, points, fmin_hz, fmax_hz, metadata,
/// error). A file that cannot be read is listed with its error; the others are still converted.
/// Exit status 1 if anything failed.
#[derive(clap::Args)]
#[command(
    after_help = "Examples:\n  eis convert run1.txt run2.csv --out canonical/\n  eis convert cell*_c*.csv --out out/ --name-pattern 'cell{cell}_c{cycle}' --columns freq=1,re=2,im=3 --imag-sign minus-z"
)]
pub struct Args {
    /// Input files.
    #[arg(required = true, value_name = "INPUT")]
    inputs: Vec<PathBuf>,
    /// Output folder (created if missing).
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
    #[command(flatten)]
    reader: ReaderArgs,
}

struct Row {
    file: String,
    spectrum: Option<usize>,
    points: Option<usize>,
    fmin: Option<f64>,
    fmax: Option<f64>,
    meta: Vec<(String, MetaValue)>,
    error: Option<String>,
}

impl Row {
    fn failed(file: String, spectrum: Option<usize>, error: String) -> Row {
        Row {
            file,
            spectrum,
            points: None,
            fmin: None,
            fmax: None,
            meta: Vec::new(),
            error: Some(error),
        }
    }
}

/// Runs the command.
pub fn run(args: Args) -> Outcome {
    let options = args.reader.options()?;
    let failed = convert(&args.inputs, &args.out, &options)?;
    Ok(if failed.is_empty() {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(1)
    })
}

/// One input that could not be converted (whole or in part), with the reason.
pub struct FailedInput {
    /// The input file as given.
    pub file: String,
    /// What went wrong.
    pub error: String,
}

/// Converts every spectrum of `inputs` into `out` (canonical CSV files and index.csv), reporting
/// each problem on standard error as it goes; returns the inputs that failed. `Err` only when the
/// output folder or the index cannot be written.
pub fn convert(
    inputs: &[PathBuf],
    out: &Path,
    options: &ReaderOptions,
) -> Result<Vec<FailedInput>, Failure> {
    std::fs::create_dir_all(out)
        .map_err(|e| Failure::Failed(anyhow!("cannot create {}: {e}", out.display())))?;
    let mut rows: Vec<Row> = Vec::new();
    let mut written: HashSet<String> = HashSet::new();
    for input in inputs {
        let file = input.display().to_string();
        let stem = input
            .file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_else(|| "spectrum".to_owned());
        let read: Result<(), std::convert::Infallible> =
            crate::io::each_spectrum(input, options, |item| {
                let s = match item {
                    Ok(s) => s,
                    Err(e) => {
                        eprintln!("error: {e}");
                        rows.push(Row::failed(file.clone(), e.spectrum, e.to_string()));
                        return Ok(());
                    }
                };
                let n = s.meta.spectrum;
                let name = format!("{stem}_{n}.csv");
                if !written.insert(name.clone()) {
                    let msg =
                        format!("{file}: output name {name} is already used by an earlier input");
                    eprintln!("error: {msg}");
                    rows.push(Row::failed(file.clone(), Some(n), msg));
                    return Ok(());
                }
                if let Err(f) =
                    write_atomic(&out.join(&name), s.to_canonical_csv().as_bytes(), inputs)
                {
                    let msg = match f {
                        Failure::BadInput(e) | Failure::Failed(e) => format!("{e:#}"),
                        Failure::BrokenPipe => "standard output closed".to_owned(),
                    };
                    eprintln!("error: {msg}");
                    rows.push(Row::failed(file.clone(), Some(n), msg));
                    return Ok(());
                }
                let (lo, hi) = s
                    .frequency_hz
                    .iter()
                    .fold((f64::INFINITY, 0.0f64), |(a, b), &f| (a.min(f), b.max(f)));
                rows.push(Row {
                    file: file.clone(),
                    spectrum: Some(n),
                    points: Some(s.len()),
                    fmin: Some(lo),
                    fmax: Some(hi),
                    meta: s.meta.fields,
                    error: None,
                });
                Ok(())
            });
        if let Err(never) = read {
            match never {}
        }
    }
    let index = index_csv(&rows).map_err(|e| Failure::Failed(anyhow!("index: {e}")))?;
    write_atomic(&out.join("index.csv"), &index, inputs)?;
    let ok = rows.iter().filter(|r| r.error.is_none()).count();
    eprintln!(
        "converted {ok} spectra from {} files into {}",
        inputs.len(),
        out.display()
    );
    Ok(rows
        .into_iter()
        .filter_map(|r| {
            r.error.map(|error| FailedInput {
                file: r.file,
                error,
            })
        })
        .collect())
}

/// The index: file, spectrum, points, fmin_hz, fmax_hz, the metadata fields in order of first
/// appearance, error.
fn index_csv(rows: &[Row]) -> Result<Vec<u8>, csv::Error> {
    let mut keys: Vec<String> = Vec::new();
    for r in rows {
        for (k, _) in &r.meta {
            if !keys.contains(k) {
                keys.push(k.clone());
            }
        }
    }
    let mut w = csv::Writer::from_writer(Vec::new());
    let mut header: Vec<&str> = vec!["file", "spectrum", "points", "fmin_hz", "fmax_hz"];
    header.extend(keys.iter().map(String::as_str));
    header.push("error");
    w.write_record(&header)?;
    let opt = |x: Option<String>| x.unwrap_or_default();
    for r in rows {
        let mut rec = vec![
            r.file.clone(),
            opt(r.spectrum.map(|n| n.to_string())),
            opt(r.points.map(|n| n.to_string())),
            opt(r.fmin.map(format_float)),
            opt(r.fmax.map(format_float)),
        ];
        for k in &keys {
            rec.push(opt(r
                .meta
                .iter()
                .find(|(n, _)| n == k)
                .map(|(_, v)| v.to_string())));
        }
        rec.push(r.error.clone().unwrap_or_default());
        w.write_record(&rec)?;
    }
    w.into_inner().map_err(|e| e.into_error().into())
}
