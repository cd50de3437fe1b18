//! Human-readable numbers: values with their uncertainty, and aligned tables.

use eis_core::number::format_si;

/// As [`with_error`], but without SI prefixes (for dimensionless values such as CPE exponents).
pub fn with_error_plain(value: f64, se: Option<f64>) -> String {
    match se {
        Some(se) if se > 0.0 && se.is_finite() => {
            let decimals = (1 - se.log10().floor() as i32).clamp(0, 15) as usize;
            format!("{value:.decimals$} ± {se:.decimals$}")
        }
        _ => format!("{} ± n/a", format!("{value:.6}").trim_end_matches('0')),
    }
}

/// `value ± se` with the value rounded to the uncertainty's second significant digit, in SI-prefixed
/// form: `10.03 ± 0.12`, `4.71u ± 0.05u`. Without an uncertainty, the value and `± n/a`.
pub fn with_error(value: f64, se: Option<f64>) -> String {
    match se {
        Some(se) if se > 0.0 && se.is_finite() && value != 0.0 => {
            let group = (value.abs().log10().floor() as i32).div_euclid(3) * 3;
            let group = group.clamp(-15, 12);
            let unit = 10f64.powi(group);
            let (v, e) = (value / unit, se / unit);
            let decimals = (1 - e.log10().floor() as i32).clamp(0, 12) as usize;
            let prefix = prefix(group);
            format!("{v:.decimals$}{prefix} ± {e:.decimals$}{prefix}")
        }
        Some(0.0) => format!("{} ± 0", format_si(value)),
        _ => format!("{} ± n/a", short(value)),
    }
}

/// A value to 6 significant digits with an SI prefix.
pub fn short(value: f64) -> String {
    if value == 0.0 || !value.is_finite() {
        return format!("{value}");
    }
    let rounded: f64 = format!("{value:.5e}").parse().unwrap_or(value);
    format_si(rounded)
}

/// A value rounded to `digits` significant digits with an SI prefix joined to its unit: `4.51 kHz`,
/// `20.2 mOhm`.
pub fn quantity(value: f64, digits: usize, unit: &str) -> String {
    if value == 0.0 || !value.is_finite() {
        return format!("{value} {unit}");
    }
    let group = ((value.abs().log10().floor() as i32).div_euclid(3) * 3).clamp(-15, 12);
    let scaled = value / 10f64.powi(group);
    let decimals = (digits as i32 - 1 - scaled.abs().log10().floor() as i32).max(0) as usize;
    format!("{scaled:.decimals$} {}{unit}", prefix(group))
}

fn prefix(group: i32) -> &'static str {
    eis_core::number::si_prefix(group).unwrap_or("")
}

/// Left-aligned columns separated by two spaces.
pub fn table(header: &[&str], rows: &[Vec<String>]) -> String {
    let mut widths: Vec<usize> = header.iter().map(|h| h.chars().count()).collect();
    for r in rows {
        for (w, c) in widths.iter_mut().zip(r) {
            *w = (*w).max(c.chars().count());
        }
    }
    let line = |cells: Vec<&str>| {
        let mut s = String::new();
        let last = cells.len().saturating_sub(1);
        for (k, c) in cells.iter().enumerate() {
            s.push_str(c);
            if k < last {
                s.push_str(&" ".repeat(widths[k] - c.chars().count() + 2));
            }
        }
        let trimmed = s.trim_end().len();
        s.truncate(trimmed);
        s.push('\n');
        s
    };
    let mut out = line(header.to_vec());
    for r in rows {
        out.push_str(&line(r.iter().map(String::as_str).collect()));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn values_are_rounded_to_their_uncertainty() {
        assert_eq!(with_error(10.0312, Some(0.1234)), "10.03 ± 0.12");
        assert_eq!(with_error(4.7123e-6, Some(5.2e-8)), "4.712u ± 0.052u");
        assert_eq!(with_error(1234.6, Some(56.0)), "1.235k ± 0.056k");
        assert_eq!(with_error(2.0, None), "2 ± n/a");
        assert_eq!(with_error_plain(0.89612, Some(0.0071)), "0.8961 ± 0.0071");
        assert_eq!(quantity(4510.29, 3, "Hz"), "4.51 kHz");
        assert_eq!(quantity(4.42394, 3, "Hz"), "4.42 Hz");
        assert_eq!(quantity(0.0202, 3, "Ohm"), "20.2 mOhm");
    }
}
