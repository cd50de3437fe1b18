//! `eis simulate`: a synthetic spectrum of a circuit as canonical CSV.

use crate::io::{Failure, Outcome, apply_overrides, bad, load_model, write_output};
use anyhow::anyhow;
use eis_core::eval::{Plan, log_frequencies};
use eis_core::number::format_si;
use eis_core::simulate::{Noise, simulate};
use std::path::PathBuf;
use std::process::ExitCode;

/// Simulate the spectrum of a circuit as CSV.
///
/// Simulates the impedance spectrum of a circuit and writes it as CSV
/// (frequency_hz,z_real_ohm,z_imag_ohm; high to low frequency; capacitive Z'' negative).
#[derive(clap::Args)]
#[command(
    after_help = "Examples:\n  eis simulate --model 'R0 + Rct|Qdl' --set R0=0.2 --set Rct=1.5 --set Qdl.Q=2m -o cell.csv\n  eis simulate --model circuits/randles-semi-infinite.circ --fmin 0.01 --fmax 1e5 --ppd 10 --noise 0.005 --seed 7"
)]
pub struct Args {
    /// Circuit file (.circ) or inline expression.
    #[arg(long, short)]
    model: String,
    /// Parameter value, NAME=VALUE (repeatable), e.g. --set Rct=50 --set Qdl.n=0.85.
    #[arg(long = "set", value_name = "NAME=VALUE")]
    set: Vec<String>,
    /// Lowest frequency in Hz.
    #[arg(allow_negative_numbers = true, long, default_value = "0.01", value_parser = crate::args::positive)]
    fmin: f64,
    /// Highest frequency in Hz.
    #[arg(allow_negative_numbers = true, long, default_value = "100000", value_parser = crate::args::positive)]
    fmax: f64,
    /// Points per decade.
    #[arg(allow_negative_numbers = true, long, default_value_t = 10, value_parser = clap::value_parser!(u32).range(1..=1000))]
    ppd: u32,
    /// File of frequencies in Hz (one per line, or the first column of a CSV), instead of --fmin/--fmax/--ppd.
    #[arg(long, conflicts_with_all = ["fmin", "fmax", "ppd"])]
    freq_file: Option<PathBuf>,
    /// Gaussian noise relative to |Z| on real and imaginary parts independently (0.01 = 1 %).
    #[arg(allow_negative_numbers = true, long, value_parser = crate::args::nonnegative)]
    noise: Option<f64>,
    /// Seed of the noise generator.
    #[arg(
        allow_negative_numbers = true,
        long,
        default_value_t = 1,
        requires = "noise"
    )]
    seed: u64,
    /// Output file (default: stdout).
    #[arg(long, short)]
    output: Option<PathBuf>,
}

/// Reads frequencies: one per line or the first field of delimited lines; blank lines, `#` comments
/// and a header line are skipped.
fn read_freq_file(path: &PathBuf) -> Result<Vec<f64>, Failure> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| bad(anyhow!("cannot read {}: {e}", path.display())))?;
    let mut out = Vec::new();
    for (n, line) in text.lines().enumerate() {
        let line = line.split('#').next().unwrap_or("").trim();
        if line.is_empty() {
            continue;
        }
        let field = line
            .split([',', ';', '\t', ' '])
            .next()
            .unwrap_or("")
            .trim();
        match eis_core::number::parse_si(field) {
            Some(f) if f > 0.0 => out.push(f),
            Some(_) => {
                return Err(bad(anyhow!(
                    "{}, line {}, column 1: frequency `{field}` is not positive",
                    path.display(),
                    n + 1
                )));
            }
            None if out.is_empty() => {} // a header
            None => {
                return Err(bad(anyhow!(
                    "{}, line {}, column 1: `{field}` is not a frequency",
                    path.display(),
                    n + 1
                )));
            }
        }
    }
    if out.is_empty() {
        return Err(bad(anyhow!("{} holds no frequencies", path.display())));
    }
    Ok(out)
}

/// Runs the command.
pub fn run(args: Args) -> Outcome {
    let mut circuit = load_model(&args.model)?;
    apply_overrides(&mut circuit, args.set.iter().map(String::as_str))?;
    let mut inputs = Vec::new();
    let freqs = match &args.freq_file {
        Some(p) => {
            inputs.push(p.clone());
            read_freq_file(p)?
        }
        None => {
            if args.fmin >= args.fmax {
                return Err(bad(anyhow!(
                    "--fmin {} must be below --fmax {}",
                    format_si(args.fmin),
                    format_si(args.fmax)
                )));
            }
            log_frequencies(args.fmax, args.fmin, args.ppd as usize)
        }
    };
    if args.model.ends_with(".circ") {
        inputs.push(PathBuf::from(&args.model));
    }
    let defaulted: Vec<String> = circuit
        .params
        .iter()
        .enumerate()
        .filter(|(_, p)| p.initial.is_none())
        .map(|(i, p)| {
            format!(
                "{} = {} {}",
                p.name,
                format_si(circuit.initial_or_default(i)),
                circuit.unit(i)
            )
        })
        .collect();
    if !defaulted.is_empty() {
        eprintln!("parameters without a value use library defaults:");
        for d in &defaulted {
            eprintln!("  {d}");
        }
    }
    let params = circuit.default_values();
    let plan = Plan::compile(&circuit);
    let noise = args.noise.filter(|&r| r > 0.0).map(|relative| Noise {
        relative,
        seed: args.seed,
    });
    let spectrum = simulate(&plan, &params, &freqs, noise);
    write_output(
        args.output.as_deref(),
        &spectrum.to_canonical_csv(),
        &inputs,
    )?;
    Ok(ExitCode::SUCCESS)
}
