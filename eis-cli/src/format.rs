//! Human-readable numbers: values with their uncertainty, and aligned tables.

use eis_core::number::format_si;

/// Relative standard error above which only "> 1000 %" is shown: the value is not determined, and
/// printing the error in full could take a hundred digits.
const MAX_RELATIVE_ERROR: f64 = 10.0;

/// Most significant digits any number is printed with.
const MAX_DIGITS: i32 = 15;

/// Prefix groups (powers of ten) that have an SI prefix; outside them numbers go to exponent form.
const GROUPS: std::ops::RangeInclusive<i32> = -15..=12;

/// The uncertainty too large to print in full, if it is: `> 1000 %` of the value.
fn undetermined(value: f64, se: f64) -> bool {
    se > MAX_RELATIVE_ERROR * value.abs()
}

/// `value ± se` in exponent form, the value to the uncertainty's second significant digit (at most
/// [`MAX_DIGITS`]): `1.2346e200 ± 5.6e195`.
fn exponent_form(value: f64, se: f64) -> String {
    let digits = (value.abs().log10().floor() - se.log10().floor()) as i32 + 2;
    let decimals = (digits - 1).clamp(1, MAX_DIGITS - 1) as usize;
    format!("{value:.decimals$e} ± {se:.1e}")
}

/// As [`with_error`], but without SI prefixes (for dimensionless values such as CPE exponents).
/// A relative error above 1000 % is shown as `> 1000 %`; values of 10¹⁵ and more, or below 10⁻¹⁵,
/// in exponent form.
pub fn with_error_plain(value: f64, se: Option<f64>) -> String {
    match se {
        Some(se) if se > 0.0 && se.is_finite() && value.is_finite() => {
            if undetermined(value, se) {
                return format!("{} ± > 1000 %", short(value));
            }
            if value.abs() >= 1e15 || (value != 0.0 && value.abs() < 1e-15) {
                return exponent_form(value, se);
            }
            let decimals = (1 - se.log10().floor() as i32).clamp(0, MAX_DIGITS) as usize;
            format!("{value:.decimals$} ± {se:.decimals$}")
        }
        _ if !value.is_finite() || value.abs() >= 1e15 => format!("{} ± n/a", short(value)),
        _ => format!("{} ± n/a", format!("{value:.6}").trim_end_matches('0')),
    }
}

/// `value ± se` with the value rounded to the uncertainty's second significant digit, in SI-prefixed
/// form: `10.03 ± 0.12`, `4.71u ± 0.05u`. Without an uncertainty, the value and `± n/a`. An
/// uncertainty above 1000 % of the value is shown as `> 1000 %`; values beyond the SI prefixes go to
/// exponent form, so no number has more than 15 significant digits.
pub fn with_error(value: f64, se: Option<f64>) -> String {
    match se {
        Some(se) if se > 0.0 && se.is_finite() && value != 0.0 && value.is_finite() => {
            if undetermined(value, se) {
                return format!("{} ± > 1000 %", short(value));
            }
            let group = (value.abs().log10().floor() as i32).div_euclid(3) * 3;
            if !GROUPS.contains(&group) {
                return exponent_form(value, se);
            }
            let unit = 10f64.powi(group);
            let (v, e) = (value / unit, se / unit);
            let decimals = (1 - e.log10().floor() as i32).clamp(0, 12) as usize;
            let prefix = prefix(group);
            format!("{v:.decimals$}{prefix} ± {e:.decimals$}{prefix}")
        }
        Some(0.0) => format!("{} ± 0", short(value)),
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
    let group = (value.abs().log10().floor() as i32).div_euclid(3) * 3;
    if !GROUPS.contains(&group) {
        let decimals = (digits as i32 - 1).clamp(0, MAX_DIGITS - 1) as usize;
        return format!("{value:.decimals$e} {unit}");
    }
    let scaled = value / 10f64.powi(group);
    let decimals =
        (digits as i32 - 1 - scaled.abs().log10().floor() as i32).clamp(0, MAX_DIGITS) as usize;
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

    /// Issue 13: a 4-point fit printed a standard error of 140 digits. Relative errors above 1000 %
    /// read "> 1000 %", and no number, however large or small, prints more than 15 significant
    /// digits.
    #[test]
    fn numbers_have_a_bounded_number_of_digits() {
        assert_eq!(with_error(10.0, Some(1e140)), "10 ± > 1000 %");
        assert_eq!(with_error(10.0, Some(99.0)), "10 ± 99");
        assert_eq!(with_error_plain(0.8, Some(1e140)), "0.8 ± > 1000 %");
        assert_eq!(
            with_error(1.23456e200, Some(5.6e195)),
            "1.234560e200 ± 5.6e195"
        );
        assert_eq!(quantity(1.5e200, 3, "Ohm"), "1.50e200 Ohm");
        let extremes = [1e-300, 1e-160, 1e-20, 1.0, 1e20, 1e160, 1e300, f64::MAX];
        for &v in &extremes {
            for &e in &extremes {
                for v in [v, -v] {
                    let texts = [
                        with_error(v, Some(e)),
                        with_error_plain(v, Some(e)),
                        with_error(v, None),
                        with_error_plain(v, None),
                        quantity(v, 4, "Ohm"),
                        short(v),
                    ];
                    for t in texts {
                        let digits = t.chars().filter(|c| c.is_ascii_digit()).count();
                        assert!(digits <= 40, "{v:e} ± {e:e}: {t}");
                    }
                }
            }
        }
    }
}
