//! Numbers with SI prefixes, as written in circuits and on the command line: `10m`, `4.7u`, `4.7µ`, `2k`,
//! `1M`, `1e-3`, `2.5e3k` is rejected (one scale only).
//!
//! Parsing moves the prefix into the decimal exponent and lets the standard library round once, so
//! `4.7u` is exactly the double nearest to 4.7×10⁻⁶. [`format_si`] prints the shortest digits that read
//! back bit-exact, with a prefix where one fits.

/// SI prefixes accepted after a number, with their decimal exponents.
const PREFIXES: &[(&str, i32)] = &[
    ("f", -15),
    ("p", -12),
    ("n", -9),
    ("u", -6),
    ("\u{b5}", -6),  // MICRO SIGN
    ("\u{3bc}", -6), // GREEK SMALL LETTER MU
    ("m", -3),
    ("k", 3),
    ("M", 6),
    ("G", 9),
    ("T", 12),
];

/// Parses a number with an optional SI prefix. Returns `None` for anything else, including non-finite
/// results and trailing characters.
pub fn parse_si(text: &str) -> Option<f64> {
    let (mantissa, prefix_exp) = split_prefix(text);
    if mantissa.is_empty() || !looks_numeric(mantissa) {
        return None;
    }
    let has_exp = mantissa.contains(['e', 'E']);
    let value: f64 = if prefix_exp == 0 {
        mantissa.parse().ok()?
    } else if has_exp {
        // `1e3k`: one scale only.
        return None;
    } else {
        format!("{mantissa}e{prefix_exp}").parse().ok()?
    };
    value.is_finite().then_some(value)
}

fn split_prefix(text: &str) -> (&str, i32) {
    for &(p, e) in PREFIXES {
        if let Some(m) = text.strip_suffix(p) {
            return (m, e);
        }
    }
    (text, 0)
}

/// Digits, at most one point, an optional exponent; no `inf`, `nan` or hex, which `str::parse` would take.
fn looks_numeric(s: &str) -> bool {
    let s = s.strip_prefix(['+', '-']).unwrap_or(s);
    let (mant, exp) = match s.find(['e', 'E']) {
        Some(i) => (&s[..i], Some(&s[i + 1..])),
        None => (s, None),
    };
    let mut digits = 0;
    let mut points = 0;
    for c in mant.chars() {
        match c {
            '0'..='9' => digits += 1,
            '.' => points += 1,
            _ => return false,
        }
    }
    if digits == 0 || points > 1 {
        return false;
    }
    match exp {
        None => true,
        Some(e) => {
            let e = e.strip_prefix(['+', '-']).unwrap_or(e);
            !e.is_empty() && e.chars().all(|c| c.is_ascii_digit())
        }
    }
}

/// The SI prefix (ASCII, `u` for micro) of a power of ten that is a multiple of three between
/// 10⁻¹⁵ and 10¹²; `""` for 10⁰; None outside that range or for other exponents.
pub fn si_prefix(exponent: i32) -> Option<&'static str> {
    Some(match exponent {
        -15 => "f",
        -12 => "p",
        -9 => "n",
        -6 => "u",
        -3 => "m",
        0 => "",
        3 => "k",
        6 => "M",
        9 => "G",
        12 => "T",
        _ => return None,
    })
}

/// Prints `x` with the shortest digits that read back bit-exact through [`parse_si`], using an SI prefix
/// between femto and tera (`4.7u`, `50`, `1k`), scientific notation outside that range.
pub fn format_si(x: f64) -> String {
    if x == 0.0 || !x.is_finite() {
        return format!("{x}");
    }
    let sci = format!("{x:e}");
    let (mant, exp) = sci.split_once('e').expect("`{:e}` always has an exponent");
    let exp: i32 = exp.parse().expect("`{:e}` exponent is an integer");
    if exp == -1 || exp == -2 {
        // 0.9 reads better than 900m.
        return format!("{x}");
    }
    let group = exp.div_euclid(3) * 3;
    let Some(prefix) = si_prefix(group) else {
        return sci;
    };
    let shift = (exp - group) as usize;
    let (sign, mant) = match mant.strip_prefix('-') {
        Some(m) => ("-", m),
        None => ("", mant),
    };
    let digits: String = mant.chars().filter(|c| *c != '.').collect();
    // The mantissa is d[.ddd]: the point sits after the first digit; move it right by `shift`.
    let point = 1 + shift;
    let body = if digits.len() <= point {
        format!("{digits}{}", "0".repeat(point - digits.len()))
    } else {
        format!("{}.{}", &digits[..point], &digits[point..])
    };
    format!("{sign}{body}{prefix}")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_prefixes_and_exponents() {
        let cases = [
            ("10m", 10e-3),
            ("4.7u", 4.7e-6),
            ("4.7\u{b5}", 4.7e-6),
            ("4.7\u{3bc}", 4.7e-6),
            ("2k", 2e3),
            ("1M", 1e6),
            ("1e-3", 1e-3),
            ("-2.5E2", -250.0),
            (".5", 0.5),
            ("5.", 5.0),
            ("3p", 3e-12),
            ("+7", 7.0),
        ];
        for (text, want) in cases {
            assert_eq!(parse_si(text), Some(want), "{text}");
        }
    }

    #[test]
    fn rejects_non_numbers() {
        for text in [
            "", "m", "1e3k", "inf", "nan", "1x", "1..2", "0x10", "1e", "--1", "1.2.3", "1e400",
            "k1",
        ] {
            assert_eq!(parse_si(text), None, "{text:?}");
        }
    }

    #[test]
    fn format_reads_back_bit_exact() {
        let values = [
            1.0,
            50.0,
            1e3,
            1e-3,
            4.7e-6,
            1e-5,
            0.9,
            123456.789,
            -2.2e-9,
            1.7976931348623157e308,
            5e-324,
            std::f64::consts::PI,
            1.0 / 3.0,
            9.999999999999999e11,
        ];
        for v in values {
            let s = format_si(v);
            assert_eq!(parse_si(&s), Some(v), "{v} printed as {s}");
        }
        assert_eq!(format_si(4.7e-6), "4.7u");
        assert_eq!(format_si(50.0), "50");
        assert_eq!(format_si(1e3), "1k");
        assert_eq!(format_si(1e-5), "10u");
        assert_eq!(format_si(0.9), "0.9");
        assert_eq!(format_si(0.001), "1m");
    }
}

/// Prints `x` for data files: the shortest digits that read back bit-exact with any standard float
/// parser, plain between 1e-5 and 1e16, scientific (`1.5e-7`) outside.
pub fn format_float(x: f64) -> String {
    let a = x.abs();
    if x == 0.0 || (1e-5..1e16).contains(&a) || !x.is_finite() {
        format!("{x}")
    } else {
        format!("{x:e}")
    }
}

#[cfg(test)]
mod float_tests {
    #[test]
    fn format_float_round_trips() {
        for v in [
            0.0,
            1.0,
            -3.25e-7,
            1e-5,
            9.99e-6,
            1e16,
            123.456,
            6.02214076e23,
            -0.1,
        ] {
            let s = super::format_float(v);
            assert_eq!(s.parse::<f64>().unwrap(), v, "{s}");
        }
    }
}
