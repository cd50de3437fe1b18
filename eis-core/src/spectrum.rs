//! An impedance spectrum with its metadata, and the canonical CSV form
//! (`frequency_hz,z_real_ohm,z_imag_ohm`, one row per frequency, high to low, imaginary part with its
//! true sign).

use crate::number::format_float;
use num_complex::Complex64;
use std::fmt;

/// A value of a metadata field: a number where the text reads as one, text otherwise.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
#[serde(untagged)]
pub enum MetaValue {
    /// A number (cycle 150, SOC 50, temperature 25).
    Number(f64),
    /// Anything else (cell "A3").
    Text(String),
}

impl MetaValue {
    /// Reads a value: a number if `text` parses as one, else text.
    pub fn parse(text: &str) -> MetaValue {
        match text.trim().parse::<f64>() {
            Ok(v) if v.is_finite() => MetaValue::Number(v),
            _ => MetaValue::Text(text.trim().to_owned()),
        }
    }

    /// The number, if this is one.
    pub fn as_f64(&self) -> Option<f64> {
        match self {
            MetaValue::Number(v) => Some(*v),
            MetaValue::Text(_) => None,
        }
    }
}

impl fmt::Display for MetaValue {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            MetaValue::Number(v) => write!(f, "{}", format_float(*v)),
            MetaValue::Text(s) => write!(f, "{s}"),
        }
    }
}

/// Where a spectrum came from and what is known about it.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Metadata {
    /// The file it was read from, if any.
    pub source: Option<String>,
    /// Its number within that file, from 1.
    pub spectrum: usize,
    /// Further fields (cell, cycle, soc, temperature, ...) in the order found.
    pub fields: Vec<(String, MetaValue)>,
}

impl Metadata {
    /// The value of field `name`, if present.
    pub fn get(&self, name: &str) -> Option<&MetaValue> {
        self.fields.iter().find(|(n, _)| n == name).map(|(_, v)| v)
    }

    /// Sets field `name`, replacing an earlier value.
    pub fn set(&mut self, name: &str, value: MetaValue) {
        match self.fields.iter_mut().find(|(n, _)| n == name) {
            Some(slot) => slot.1 = value,
            None => self.fields.push((name.to_owned(), value)),
        }
    }
}

/// A point of a spectrum as messages name it: "point 3 (line 14)".
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct PointRef {
    /// Position in the spectrum, counted from 1.
    pub number: usize,
    /// Line of the file it was read from, when known.
    pub line: Option<usize>,
}

impl std::fmt::Display for PointRef {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self.line {
            Some(line) => write!(f, "point {} (line {line})", self.number),
            None => write!(f, "point {}", self.number),
        }
    }
}

/// An impedance spectrum: Z at each frequency, optionally with per-point standard deviations.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Spectrum {
    /// Frequencies in Hz (any order; canonical files are high to low).
    pub frequency_hz: Vec<f64>,
    /// Impedance in Ω at each frequency; capacitive points have a negative imaginary part.
    pub z: Vec<Complex64>,
    /// Standard deviation of the real and of the imaginary part at each point (Ω), when known.
    pub sigma: Option<Vec<f64>>,
    /// The line of the source file each point was read from (from 1), when read from a file; lets
    /// messages about a point name its line.
    pub source_lines: Option<Vec<usize>>,
    /// Where it came from.
    pub meta: Metadata,
}

/// The header of canonical spectrum files.
pub const CANONICAL_HEADER: &str = "frequency_hz,z_real_ohm,z_imag_ohm";

/// Applies the generic function `apply` with argument `arg` to every per-point array of spectrum
/// `s` (frequencies, impedances, and the uncertainties and source lines where present), so that a
/// new per-point array is kept in step in one place.
macro_rules! per_point {
    ($s:expr, $apply:ident, $arg:expr) => {
        $apply(&mut $s.frequency_hz, $arg);
        $apply(&mut $s.z, $arg);
        if let Some(v) = &mut $s.sigma {
            $apply(v, $arg);
        }
        if let Some(v) = &mut $s.source_lines {
            $apply(v, $arg);
        }
    };
}

impl Spectrum {
    /// A spectrum from frequencies and impedances.
    pub fn new(frequency_hz: Vec<f64>, z: Vec<Complex64>) -> Spectrum {
        Spectrum {
            frequency_hz,
            z,
            sigma: None,
            source_lines: None,
            meta: Metadata::default(),
        }
    }

    /// Number of points.
    pub fn len(&self) -> usize {
        self.frequency_hz.len()
    }

    /// Whether the spectrum has no points.
    pub fn is_empty(&self) -> bool {
        self.frequency_hz.is_empty()
    }

    /// Angular frequencies ω = 2πf.
    pub fn omegas(&self) -> Vec<f64> {
        self.frequency_hz
            .iter()
            .map(|&f| crate::eval::angular(f))
            .collect()
    }

    /// The canonical CSV text: header, then one row per point in the stored order, numbers printed so
    /// that they read back bit-exact.
    pub fn to_canonical_csv(&self) -> String {
        let mut out = String::with_capacity(40 * (self.len() + 1));
        out.push_str(CANONICAL_HEADER);
        out.push('\n');
        for (f, z) in self.frequency_hz.iter().zip(&self.z) {
            out.push_str(&format_float(*f));
            out.push(',');
            out.push_str(&format_float(z.re));
            out.push(',');
            out.push_str(&format_float(z.im));
            out.push('\n');
        }
        out
    }

    /// The source line of point `i` (from 0), when the spectrum was read from a file.
    pub fn source_line(&self, i: usize) -> Option<usize> {
        self.source_lines.as_ref()?.get(i).copied()
    }

    /// How messages name point `i` (from 0): its number from 1 and, when known, its source line.
    pub fn point_ref(&self, i: usize) -> PointRef {
        PointRef {
            number: i + 1,
            line: self.source_line(i),
        }
    }

    /// Keeps only the points with `fmin <= f <= fmax`.
    pub fn crop(&mut self, fmin: Option<f64>, fmax: Option<f64>) {
        let keep: Vec<bool> = self
            .frequency_hz
            .iter()
            .map(|&f| fmin.is_none_or(|lo| f >= lo) && fmax.is_none_or(|hi| f <= hi))
            .collect();
        self.retain(&keep);
    }

    /// Puts the points in the order `order` (indices of the current points; indices out of range are
    /// skipped), keeping every per-point array in step.
    pub fn reorder(&mut self, order: &[usize]) {
        fn apply<T: Clone>(v: &mut Vec<T>, order: &[usize]) {
            *v = order.iter().filter_map(|&i| v.get(i).cloned()).collect();
        }
        per_point!(self, apply, order);
    }

    /// Keeps the points `i` with `keep[i]` true (points beyond `keep` are kept), in one pass over
    /// each per-point array, so that removing most points of a long spectrum stays linear.
    pub fn retain(&mut self, keep: &[bool]) {
        fn apply<T>(v: &mut Vec<T>, keep: &[bool]) {
            let mut k = keep.iter();
            v.retain(|_| k.next().copied().unwrap_or(true));
        }
        per_point!(self, apply, keep);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn retain_and_crop_keep_every_per_point_array_in_step() {
        let mut s = Spectrum::new(
            vec![100.0, 10.0, 1.0, 0.1],
            (0..4).map(|k| Complex64::new(k as f64, -1.0)).collect(),
        );
        s.sigma = Some(vec![0.1, 0.2, 0.3, 0.4]);
        s.source_lines = Some(vec![5, 6, 8, 9]);
        s.crop(Some(0.5), Some(50.0));
        assert_eq!(s.frequency_hz, [10.0, 1.0]);
        assert_eq!(s.z, [Complex64::new(1.0, -1.0), Complex64::new(2.0, -1.0)]);
        assert_eq!(s.sigma.as_deref(), Some(&[0.2, 0.3][..]));
        assert_eq!(
            (s.source_line(0), s.source_line(1), s.source_line(2)),
            (Some(6), Some(8), None)
        );
        // A mask shorter than the spectrum keeps the points it does not cover.
        s.retain(&[false]);
        assert_eq!(s.frequency_hz, [1.0]);
        assert_eq!(s.source_lines.as_deref(), Some(&[8][..]));
    }
}
