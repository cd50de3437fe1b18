//! Argument groups and value parsers shared by the commands.

use eis_core::fit::{FitSettings, Weighting};

/// Fit settings shared by `eis fit` and `eis batch` (flattened into both).
#[derive(clap::Args, Clone)]
pub struct FitArgs {
    /// Residual weighting.
    #[arg(long, value_enum, default_value_t = WeightArg::Modulus)]
    pub weight: WeightArg,
    /// Number of grid starting points of the automatic search (default: the library's).
    #[arg(allow_negative_numbers = true, long, value_parser = clap::value_parser!(u32).range(1..=200))]
    pub starts: Option<u32>,
}

impl FitArgs {
    /// The library's fit settings these arguments ask for.
    pub fn settings(&self) -> FitSettings {
        let s = FitSettings::default().with_weighting(self.weight.into());
        match self.starts {
            Some(n) => s.with_starts(n as usize),
            None => s,
        }
    }
}

/// Residual weighting on the command line (shared by `fit` and `batch`).
#[derive(Clone, Copy, clap::ValueEnum)]
pub enum WeightArg {
    /// 1/|Z| on both parts (default).
    Modulus,
    /// 1/|Z'| and 1/|Z''| separately.
    Proportional,
    /// No weighting.
    Unit,
    /// 1/sigma from the data's standard deviations.
    Sigma,
}

impl From<WeightArg> for Weighting {
    fn from(w: WeightArg) -> Weighting {
        match w {
            WeightArg::Modulus => Weighting::Modulus,
            WeightArg::Proportional => Weighting::Proportional,
            WeightArg::Unit => Weighting::Unit,
            WeightArg::Sigma => Weighting::Sigma,
        }
    }
}

/// A positive number with an optional SI prefix.
pub fn positive(s: &str) -> Result<f64, String> {
    match eis_core::number::parse_si(s) {
        Some(v) if v > 0.0 => Ok(v),
        _ => Err(format!("`{s}` is not a positive number")),
    }
}

/// A non-negative number with an optional SI prefix.
pub fn nonnegative(s: &str) -> Result<f64, String> {
    match eis_core::number::parse_si(s) {
        Some(v) if v >= 0.0 => Ok(v),
        _ => Err(format!("`{s}` is not a non-negative number")),
    }
}

/// Any finite number with an optional SI prefix.
pub fn number(s: &str) -> Result<f64, String> {
    eis_core::number::parse_si(s).ok_or_else(|| format!("`{s}` is not a number"))
}
