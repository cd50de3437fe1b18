//! Reader options shared by every command that takes spectra (`#[command(flatten)]` them).

use crate::io::{Failure, bad};
use anyhow::anyhow;
use eis_core::import::{
    ColumnRef, ImagSign, NamePattern, PhaseUnit, ReaderOptions, Role, Split, parse_column_overrides,
};

/// How input files are read.
#[derive(clap::Args, Debug, Clone)]
#[command(next_help_heading = "Reading input files")]
pub struct ReaderArgs {
    /// Column roles, by number from 1 or by header word, e.g. freq=1,re=2,im=3 or
    /// freq=Frequency,mod=|Z|,phase=Phase. Keys: freq, re, im, mod, phase, time, cycle, step, sweep,
    /// potential, current, temperature.
    #[arg(long, value_name = "KEY=COLUMN,...", value_parser = parse_columns)]
    columns: Option<Columns>,
    /// What the imaginary (or phase) column holds: auto (from the header), z (Z'' with its sign),
    /// minus-z (-Z'').
    #[arg(long, value_enum, default_value = "auto")]
    imag_sign: ImagSignArg,
    /// Unit of a phase column when the header does not say: auto, deg, rad.
    #[arg(long, value_enum, default_value = "auto")]
    phase_unit: PhaseUnitArg,
    /// Metadata from file names, e.g. "cell{cell}_c{cycle}_soc{soc}" (matched against the name
    /// without folder and extension; numbers become numbers).
    #[arg(long, value_name = "PATTERN", value_parser = NamePattern::parse)]
    name_pattern: Option<NamePattern>,
    /// Drop points below this frequency (Hz).
    #[arg(allow_negative_numbers = true, long, value_parser = parse_positive)]
    fmin: Option<f64>,
    /// Drop points above this frequency (Hz).
    #[arg(allow_negative_numbers = true, long, value_parser = parse_positive)]
    fmax: Option<f64>,
    /// Drop the inductive points (positive imaginary part) at the high-frequency end.
    #[arg(long)]
    drop_inductive: bool,
    /// How one file is divided into spectra: auto (cycle/step/sweep column or sweep restart),
    /// column, restart, none.
    #[arg(long, value_enum, default_value = "auto")]
    split: SplitArg,
    /// Fewest points a spectrum may have.
    #[arg(allow_negative_numbers = true, long, default_value_t = 3, value_parser = clap::value_parser!(u32).range(1..))]
    min_points: u32,
}

#[derive(clap::ValueEnum, Clone, Copy, Debug)]
enum ImagSignArg {
    Auto,
    Z,
    MinusZ,
}

#[derive(clap::ValueEnum, Clone, Copy, Debug)]
enum PhaseUnitArg {
    Auto,
    Deg,
    Rad,
}

#[derive(clap::ValueEnum, Clone, Copy, Debug)]
enum SplitArg {
    Auto,
    Column,
    Restart,
    None,
}

/// The column roles of one `--columns` value. A type of its own: clap reads an `Option<Vec<_>>`
/// field as a list of single values, which did not match what this parser returns (issue 13: every
/// `--columns` panicked).
#[derive(Debug, Clone)]
struct Columns(Vec<(Role, ColumnRef)>);

fn parse_columns(s: &str) -> Result<Columns, String> {
    parse_column_overrides(s).map(Columns)
}

fn parse_positive(s: &str) -> Result<f64, String> {
    match eis_core::number::parse_si(s) {
        Some(v) if v > 0.0 => Ok(v),
        _ => Err(format!("`{s}` is not a positive number")),
    }
}

impl ReaderArgs {
    /// The library's reader settings.
    ///
    /// # Errors
    ///
    /// A bad-usage failure when `--fmin` is not below `--fmax`.
    pub fn options(&self) -> Result<ReaderOptions, Failure> {
        if let (Some(lo), Some(hi)) = (self.fmin, self.fmax) {
            if lo >= hi {
                return Err(bad(anyhow!("--fmin {lo} must be below --fmax {hi}")));
            }
        }
        Ok(ReaderOptions {
            columns: self.columns.clone().map(|c| c.0).unwrap_or_default(),
            imag_sign: match self.imag_sign {
                ImagSignArg::Auto => ImagSign::Auto,
                ImagSignArg::Z => ImagSign::AsIs,
                ImagSignArg::MinusZ => ImagSign::Negated,
            },
            phase_unit: match self.phase_unit {
                PhaseUnitArg::Auto => PhaseUnit::Auto,
                PhaseUnitArg::Deg => PhaseUnit::Degrees,
                PhaseUnitArg::Rad => PhaseUnit::Radians,
            },
            name_pattern: self.name_pattern.clone(),
            fmin: self.fmin,
            fmax: self.fmax,
            drop_inductive: self.drop_inductive,
            split: match self.split {
                SplitArg::Auto => Split::Auto,
                SplitArg::Column => Split::Column,
                SplitArg::Restart => Split::Restart,
                SplitArg::None => Split::None,
            },
            min_points: self.min_points as usize,
            sort: true,
        })
    }
}
