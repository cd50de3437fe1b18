//! Value parsers shared by the commands' arguments.

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
