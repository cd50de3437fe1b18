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

/// An impedance spectrum: Z at each frequency, optionally with per-point standard deviations.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Spectrum {
    /// Frequencies in Hz (any order; canonical files are high to low).
    pub frequency_hz: Vec<f64>,
    /// Impedance in Ω at each frequency; capacitive points have a negative imaginary part.
    pub z: Vec<Complex64>,
    /// Standard deviation of the real and of the imaginary part at each point (Ω), when known.
    pub sigma: Option<Vec<f64>>,
    /// Where it came from.
    pub meta: Metadata,
}

/// The header of canonical spectrum files.
pub const CANONICAL_HEADER: &str = "frequency_hz,z_real_ohm,z_imag_ohm";

impl Spectrum {
    /// A spectrum from frequencies and impedances.
    pub fn new(frequency_hz: Vec<f64>, z: Vec<Complex64>) -> Spectrum {
        Spectrum {
            frequency_hz,
            z,
            sigma: None,
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

    /// Keeps only the points with `fmin <= f <= fmax`.
    pub fn crop(&mut self, fmin: Option<f64>, fmax: Option<f64>) {
        let keep: Vec<bool> = self
            .frequency_hz
            .iter()
            .map(|&f| fmin.is_none_or(|lo| f >= lo) && fmax.is_none_or(|hi| f <= hi))
            .collect();
        let mut k = keep.iter();
        self.frequency_hz
            .retain(|_| *k.next().expect("same length"));
        let mut k = keep.iter();
        self.z.retain(|_| *k.next().expect("same length"));
        if let Some(s) = &mut self.sigma {
            let mut k = keep.iter();
            s.retain(|_| *k.next().expect("same length"));
        }
    }
}
