//! Axes: data ranges, SI-prefixed units, tick positions and tick labels.
//!
//! Linear axes get ticks at 1, 2 or 5 × 10ᵏ in the displayed unit, as many as fit without labels
//! touching. Logarithmic axes get ticks at decades (labelled 10ⁿ) with minor ticks between, or
//! 1-2-5 ticks when the range spans less than about two decades.

/// Values beyond this magnitude are treated like NaN: their differences would overflow.
pub const MAX_MAGNITUDE: f64 = 1e300;

/// Whether `v` can be placed on a linear axis.
pub fn usable(v: f64) -> bool {
    v.is_finite() && v.abs() <= MAX_MAGNITUDE
}

/// Whether `v` can be placed on a logarithmic axis.
pub fn usable_log(v: f64) -> bool {
    usable(v) && v > 0.0 && v >= 1e-300
}

/// A closed interval of data values.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Range {
    /// Lower end.
    pub lo: f64,
    /// Upper end.
    pub hi: f64,
}

impl Range {
    /// The smallest range holding every usable value, or `None` when there is none.
    pub fn of(values: impl IntoIterator<Item = f64>, log: bool) -> Option<Range> {
        let mut r: Option<Range> = None;
        for v in values {
            if !(if log { usable_log(v) } else { usable(v) }) {
                continue;
            }
            r = Some(match r {
                None => Range { lo: v, hi: v },
                Some(r) => Range {
                    lo: r.lo.min(v),
                    hi: r.hi.max(v),
                },
            });
        }
        r
    }

    /// The union of two optional ranges.
    pub fn union(a: Option<Range>, b: Option<Range>) -> Option<Range> {
        match (a, b) {
            (Some(a), Some(b)) => Some(Range {
                lo: a.lo.min(b.lo),
                hi: a.hi.max(b.hi),
            }),
            (a, None) => a,
            (None, b) => b,
        }
    }

    /// Widened to include `v`.
    pub fn including(self, v: f64) -> Range {
        Range {
            lo: self.lo.min(v),
            hi: self.hi.max(v),
        }
    }

    /// Width of the range.
    pub fn span(&self) -> f64 {
        self.hi - self.lo
    }

    /// Padded by `fraction` of its span on each side; a range of zero width gets a width of its own.
    pub fn padded(self, fraction: f64, log: bool) -> Range {
        if log {
            let (a, b) = (self.lo.log10(), self.hi.log10());
            let (a, b) = if b - a < 1e-9 {
                (a - 0.5, b + 0.5)
            } else {
                let p = (b - a) * fraction;
                (a - p, b + p)
            };
            return Range {
                lo: 10f64.powf(a.max(-300.0)),
                hi: 10f64.powf(b.min(300.0)),
            };
        }
        let span = self.span();
        let scale = self.lo.abs().max(self.hi.abs());
        if span <= scale * 1e-12 || span == 0.0 {
            let half = if scale > 0.0 { scale * 0.1 } else { 1.0 };
            return Range {
                lo: self.lo - half,
                hi: self.hi + half,
            };
        }
        Range {
            lo: self.lo - span * fraction,
            hi: self.hi + span * fraction,
        }
    }
}

/// The unit of an axis with an SI prefix: values are shown divided by `scale`.
#[derive(Debug, Clone, PartialEq)]
pub struct Unit {
    /// Factor the values are divided by for display (1e-3 for m).
    pub scale: f64,
    /// The unit text as shown in the axis title (`mΩ`, `kHz`, `10¹⁵ Ω`).
    pub text: String,
}

/// The SI-prefixed unit for values up to `max_abs` in magnitude.
pub fn si_unit(max_abs: f64, unit: &str) -> Unit {
    if unit.is_empty() || unit == "%" || unit == "°" || !max_abs.is_finite() || max_abs <= 0.0 {
        return Unit {
            scale: 1.0,
            text: unit.to_owned(),
        };
    }
    // A little headroom so that 999.7 stays in the lower group rather than showing 1.0 k.
    let e = (max_abs * (1.0 + 1e-9)).log10().floor() as i32;
    let g = e.div_euclid(3) * 3;
    // Plots show the micro sign; files and tables use ASCII `u`.
    let prefix = match eis_core::number::si_prefix(g) {
        Some("u") => "µ",
        Some(p) => p,
        None => {
            return Unit {
                scale: 10f64.powi(g),
                text: format!("10{} {unit}", superscript(g)),
            };
        }
    };
    Unit {
        scale: 10f64.powi(g),
        text: format!("{prefix}{unit}"),
    }
}

/// An axis title with its unit: `Z′ / mΩ`.
pub fn title(quantity: &str, unit: &Unit) -> String {
    if unit.text.is_empty() {
        quantity.to_owned()
    } else {
        format!("{quantity} / {}", unit.text)
    }
}

/// `n` written with superscript digits (and a superscript minus).
pub fn superscript(n: i32) -> String {
    const DIGITS: [char; 10] = ['⁰', '¹', '²', '³', '⁴', '⁵', '⁶', '⁷', '⁸', '⁹'];
    let mut s = String::new();
    if n < 0 {
        s.push('⁻');
    }
    for c in n.unsigned_abs().to_string().chars() {
        s.push(DIGITS[c.to_digit(10).unwrap_or(0) as usize]);
    }
    s
}

/// A tick: position in data units and its label.
#[derive(Debug, Clone, PartialEq)]
pub struct Tick {
    /// Position in data units.
    pub value: f64,
    /// Text shown.
    pub label: String,
}

/// A finished axis: range, scale, ticks and title.
#[derive(Debug, Clone)]
pub struct Axis {
    /// Shown range in data units.
    pub range: Range,
    /// Logarithmic scale.
    pub log: bool,
    /// Labelled ticks.
    pub ticks: Vec<Tick>,
    /// Unlabelled minor ticks (log axes).
    pub minor: Vec<f64>,
    /// Title with unit.
    pub title: String,
}

impl Axis {
    /// Fraction 0..=1 of the way from the low to the high end.
    pub fn frac(&self, v: f64) -> f64 {
        if self.log {
            let (a, b) = (self.range.lo.log10(), self.range.hi.log10());
            (v.log10() - a) / (b - a)
        } else {
            (v - self.range.lo) / self.range.span()
        }
    }
}

/// Formats a displayed tick value with `decimals` decimals and a true minus sign.
pub fn format_tick(v: f64, decimals: usize) -> String {
    let s = format!("{v:.decimals$}");
    let zero = s
        .trim_start_matches('-')
        .chars()
        .all(|c| c == '0' || c == '.');
    if zero {
        return s.trim_start_matches('-').to_owned();
    }
    s.replace('-', "\u{2212}")
}

/// Nice steps 1, 2, 5 × 10ᵏ at or above `raw`.
fn nice_step(raw: f64) -> f64 {
    let e = raw.log10().floor();
    let base = 10f64.powf(e);
    for m in [1.0, 2.0, 5.0, 10.0] {
        if m * base >= raw * (1.0 - 1e-9) {
            return m * base;
        }
    }
    10.0 * base
}

/// Linear ticks over `range` (data units) shown in `unit`, at most `max_count` of them.
pub fn linear_ticks(range: Range, unit: &Unit, max_count: usize) -> Vec<Tick> {
    let (lo, hi) = (range.lo / unit.scale, range.hi / unit.scale);
    let span = hi - lo;
    if !span.is_finite() || span <= 0.0 {
        return Vec::new();
    }
    let step = nice_step(span / max_count.max(1) as f64);
    let decimals = (-step.log10().floor()).max(0.0) as usize;
    let first = (lo / step).ceil();
    let last = (hi / step).floor();
    if !(last - first).is_finite() || last - first >= 1000.0 {
        return Vec::new();
    }
    let mut out = Vec::new();
    let mut k = first;
    while k <= last {
        let v = k * step;
        out.push(Tick {
            value: v * unit.scale,
            label: format_tick(v, decimals.min(12)),
        });
        k += 1.0;
    }
    out
}

/// Log ticks over `range` with at most `max_count` labels; returns labelled and minor ticks.
pub fn log_ticks(range: Range, max_count: usize) -> (Vec<Tick>, Vec<f64>) {
    let (a, b) = (range.lo.log10(), range.hi.log10());
    if !a.is_finite() || !b.is_finite() || b <= a {
        return (Vec::new(), Vec::new());
    }
    let (d0, d1) = (a.ceil() as i32, b.floor() as i32);
    let decades = d1 - d0 + 1;
    if decades >= 2 {
        let step = (decades as usize).div_ceil(max_count.max(1)).max(1) as i32;
        let mut ticks = Vec::new();
        let mut minor = Vec::new();
        for d in (a.floor() as i32)..=(b.ceil() as i32) {
            let v = 10f64.powi(d);
            let labelled = d.rem_euclid(step) == 0;
            if labelled && (d0..=d1).contains(&d) {
                ticks.push(Tick {
                    value: v,
                    label: format!("10{}", superscript(d)),
                });
            } else if (d0..=d1).contains(&d) {
                minor.push(v);
            }
            if step == 1 {
                for m in 2..=9 {
                    let w = m as f64 * v;
                    if w >= range.lo && w <= range.hi {
                        minor.push(w);
                    }
                }
            }
        }
        return (ticks, minor);
    }
    // Narrow range: the densest set of mantissas whose ticks number at most `max_count`, plain
    // labels; the other mantissas become minor ticks.
    const SETS: [&[f64]; 6] = [
        &[1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0],
        &[1.0, 2.0, 3.0, 5.0, 7.0],
        &[1.0, 2.0, 3.0, 5.0],
        &[1.0, 2.0, 5.0],
        &[1.0, 3.0],
        &[1.0],
    ];
    let inside = |v: f64| v >= range.lo * (1.0 - 1e-12) && v <= range.hi * (1.0 + 1e-12);
    let at = |set: &[f64]| -> Vec<f64> {
        ((a.floor() as i32)..=(b.ceil() as i32))
            .flat_map(|d| set.iter().map(move |m| m * 10f64.powi(d)))
            .filter(|&v| inside(v))
            .collect()
    };
    for set in SETS {
        let values = at(set);
        if values.len() >= 2 && values.len() <= max_count.max(2) {
            let minor = at(SETS[0])
                .into_iter()
                .filter(|v| !values.contains(v))
                .collect();
            let ticks = values
                .into_iter()
                .map(|v| Tick {
                    value: v,
                    label: plain_number(v),
                })
                .collect();
            return (ticks, minor);
        }
    }
    // Narrower than one mantissa step: fall back to linear ticks.
    (
        linear_ticks(range, &si_unit(0.0, ""), max_count),
        Vec::new(),
    )
}

/// A short plain number: `0.02`, `500`, `2×10⁶`.
pub fn plain_number(v: f64) -> String {
    if v == 0.0 {
        return "0".to_owned();
    }
    let e = v.abs().log10().floor() as i32;
    if (-3..5).contains(&e) {
        let decimals = (-e).max(0) as usize + 1;
        let s = format!("{v:.decimals$}");
        let s = if s.contains('.') {
            s.trim_end_matches('0').trim_end_matches('.').to_owned()
        } else {
            s
        };
        return s.replace('-', "\u{2212}");
    }
    let m = v / 10f64.powi(e);
    let m = format!("{m:.1}");
    let m = m.trim_end_matches('0').trim_end_matches('.');
    if m == "1" {
        format!("10{}", superscript(e))
    } else {
        format!("{m}×10{}", superscript(e)).replace('-', "\u{2212}")
    }
}

/// A value with an SI prefix and unit at 2 significant digits: `1.2 kHz`, `35 ms`.
pub fn quantity(v: f64, unit: &str) -> String {
    if !v.is_finite() {
        return format!("? {unit}");
    }
    let u = si_unit(v.abs(), unit);
    let shown = v / u.scale;
    // Two significant digits, or all the integer digits of larger values.
    let digits = if shown.abs() >= 10.0 { 0 } else { 1 };
    let s = format!("{shown:.digits$}");
    let s = if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_owned()
    } else {
        s
    };
    format!("{} {}", s.replace('-', "\u{2212}"), u.text)
}

#[cfg(test)]
mod tests {
    use super::*;

    macro_rules! si {
        ($max:expr, $unit:expr => $text:expr, $scale:expr) => {{
            let u = si_unit($max, $unit);
            assert_eq!(u.text, $text, "unit for {}", $max);
            assert!((u.scale / $scale - 1.0).abs() < 1e-12, "scale for {}", $max);
        }};
    }

    #[test]
    fn si_prefixes() {
        si!(0.05, "Ω" => "mΩ", 1e-3);
        si!(0.0009, "Ω" => "µΩ", 1e-6);
        si!(500.0, "Ω" => "Ω", 1.0);
        si!(1500.0, "Ω" => "kΩ", 1e3);
        si!(1e20, "Ω" => "10¹⁸ Ω", 1e18);
        si!(0.0, "Ω" => "Ω", 1.0);
        si!(50.0, "%" => "%", 1.0);
    }

    #[test]
    fn linear_ticks_are_nice_and_inside() {
        let u = si_unit(0.05, "Ω");
        let t = linear_ticks(
            Range {
                lo: -0.003,
                hi: 0.05,
            },
            &u,
            6,
        );
        let labels: Vec<&str> = t.iter().map(|t| t.label.as_str()).collect();
        assert_eq!(labels, ["0", "10", "20", "30", "40", "50"]);
        let t = linear_ticks(Range { lo: -1.5, hi: 1.5 }, &si_unit(1.5, "Ω"), 8);
        assert_eq!(t.first().map(|t| t.label.as_str()), Some("\u{2212}1.5"));
        assert!(t.iter().any(|t| t.label == "0.0"));
    }

    #[test]
    fn log_ticks_at_decades() {
        let (t, minor) = log_ticks(
            Range {
                lo: 0.008,
                hi: 1.2e5,
            },
            10,
        );
        let labels: Vec<&str> = t.iter().map(|t| t.label.as_str()).collect();
        assert_eq!(
            labels,
            ["10⁻²", "10⁻¹", "10⁰", "10¹", "10²", "10³", "10⁴", "10⁵"]
        );
        assert!(minor.contains(&0.02));
        let (t, _) = log_ticks(Range { lo: 1e-9, hi: 1e9 }, 6);
        assert!(t.len() <= 6 && t.len() >= 4, "{t:?}");
        let (t, _) = log_ticks(
            Range {
                lo: 150.0,
                hi: 900.0,
            },
            8,
        );
        let labels: Vec<&str> = t.iter().map(|t| t.label.as_str()).collect();
        assert_eq!(
            labels,
            ["200", "300", "400", "500", "600", "700", "800", "900"]
        );
        let (t, minor) = log_ticks(
            Range {
                lo: 55.0,
                hi: 340.0,
            },
            3,
        );
        let labels: Vec<&str> = t.iter().map(|t| t.label.as_str()).collect();
        assert_eq!(labels, ["100", "200", "300"]);
        assert!(minor.contains(&60.0));
        let (t, _) = log_ticks(
            Range {
                lo: 100.0,
                hi: 101.0,
            },
            8,
        );
        assert!(!t.is_empty());
    }

    #[test]
    fn degenerate_ranges_get_width() {
        let r = Range { lo: 5.0, hi: 5.0 }.padded(0.05, false);
        assert!(r.lo < 5.0 && r.hi > 5.0);
        let r = Range { lo: 0.0, hi: 0.0 }.padded(0.05, false);
        assert!(r.span() > 0.0);
        let r = Range { lo: 10.0, hi: 10.0 }.padded(0.05, true);
        assert!(r.lo < 10.0 && r.hi > 10.0);
        let r = Range {
            lo: -1e300,
            hi: 1e300,
        }
        .padded(0.05, false);
        assert!(r.span().is_finite());
    }

    #[test]
    fn quantities_and_numbers() {
        assert_eq!(quantity(1234.0, "Hz"), "1.2 kHz");
        assert_eq!(quantity(0.035, "s"), "35 ms");
        assert_eq!(quantity(2.0e-6, "s"), "2 µs");
        assert_eq!(plain_number(0.02), "0.02");
        assert_eq!(plain_number(2e6), "2×10⁶");
        assert_eq!(format_tick(-0.0, 1), "0.0");
        assert_eq!(format_tick(-2.0, 0), "\u{2212}2");
    }
}
