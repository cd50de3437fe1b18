//! One generic reader for delimited-text exports of impedance spectra.
//!
//! The reader finds the table by itself: the delimiter (comma, semicolon, tab or runs of blanks), a
//! decimal comma, comment (`#`, `%`, `!`, `//`) and preamble lines before the header, a missing
//! header, a line of units under the header, UTF-8 with or without a byte-order mark or
//! Latin-1/Windows-1252 text, and CRLF line ends. Column roles come from the header words and their
//! units (see [`Role`] and the module `columns` docs) or from explicit overrides.
//!
//! A file may hold several spectra: a new one starts where a cycle, step or sweep column changes
//! value, where the frequency sweep starts again (the frequency turns back at least half-way, on a
//! log scale, towards the first frequency of the current spectrum), where the header is repeated or
//! where a line of text interrupts the data.
//!
//! [`SpectrumReader`] is an iterator that holds one spectrum at a time (plus the first 256 non-blank
//! lines while it detects the layout), so memory does not grow with the file.
//!
//! # Hygiene
//!
//! | finding | outcome |
//! |---|---|
//! | unreadable file, no table, no frequency/impedance column, unknown unit, bad override | error, file stops |
//! | too few fields, non-numeric cell in a column in use, too few points | error for that spectrum; the next spectrum is read |
//! | NaN or infinite cell, zero or negative frequency, zero impedance | warning, point dropped |
//! | unsorted or duplicate frequencies, negative real part | warning, points kept |
//! | positive imaginary part at the high-frequency end (inductive) | warning, kept unless `drop_inductive` |
//! | points outside `fmin..fmax` | warning, points removed |
//!
//! Every error and warning names the file, and the line and column where one applies.
//!
//! ```
//! use eis_core::import::{read_bytes, ReaderOptions};
//! let text = "# exported data\nFreq (kHz);Z' (mOhm);-Z'' (mOhm)\n1;20,5;3\n0,1;25;7,5\n0,01;30;2\n";
//! let read = read_bytes("cell.csv", text.as_bytes(), &ReaderOptions::default()).unwrap();
//! let s = &read[0].spectrum;
//! assert_eq!(s.frequency_hz, [1000.0, 100.0, 10.0]);
//! assert!((s.z[0].re - 0.0205).abs() < 1e-15 && (s.z[0].im + 0.003).abs() < 1e-15);
//! ```

mod columns;
mod detect;
mod error;
mod pattern;

pub use columns::{ColumnRef, Role, parse_column_overrides};
pub use error::{DataError, DataErrorKind, DataWarning, Location, WarningKind};
pub use pattern::NamePattern;

use crate::spectrum::{MetaValue, Spectrum};
use columns::{ColumnMap, Sign, ZCols};
use detect::{Layout, decode_line, is_comment, parse_number, split};
use num_complex::Complex64;
use std::collections::VecDeque;
use std::io::{BufRead, BufReader, Read};
use std::path::Path;

/// Lines read to detect the layout (non-blank lines).
const SAMPLE_LINES: usize = 256;
/// Longest line accepted, in bytes.
const MAX_LINE: u64 = 1 << 20;

/// The sign convention of the imaginary (or phase) column.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum ImagSign {
    /// From the header (`-Z''`, `-Im`, `-Phase` are negated); without a header, guessed from the values
    /// (mostly positive values are taken as −Z″, with a warning).
    #[default]
    Auto,
    /// The column holds Z″ (or arg Z) with its true sign.
    AsIs,
    /// The column holds −Z″ (or −arg Z).
    Negated,
}

/// The unit of a phase column.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum PhaseUnit {
    /// From the header unit; if none is given, degrees when any |value| exceeds π/2, radians otherwise
    /// (with a warning).
    #[default]
    Auto,
    /// Degrees.
    Degrees,
    /// Radians.
    Radians,
}

/// How one file is divided into spectra.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Split {
    /// By a change of a cycle, step or sweep column and by the sweep restarting.
    #[default]
    Auto,
    /// Only by a change of a cycle, step or sweep column.
    Column,
    /// Only by the frequency sweep restarting.
    Restart,
    /// Never (a repeated header or a text line still ends a spectrum).
    None,
}

/// Settings of the reader. `ReaderOptions::default()` detects everything.
#[derive(Debug, Clone, PartialEq)]
pub struct ReaderOptions {
    /// Explicit columns, replacing what the header says for those roles (default: none).
    pub columns: Vec<(Role, ColumnRef)>,
    /// Sign of the imaginary or phase column (default: [`ImagSign::Auto`]).
    pub imag_sign: ImagSign,
    /// Unit of the phase column (default: [`PhaseUnit::Auto`]).
    pub phase_unit: PhaseUnit,
    /// Metadata from the file stem (default: none).
    pub name_pattern: Option<NamePattern>,
    /// Lowest frequency kept, Hz (default: none).
    pub fmin: Option<f64>,
    /// Highest frequency kept, Hz (default: none).
    pub fmax: Option<f64>,
    /// Drop the inductive points at the high-frequency end (default: false, they are kept).
    pub drop_inductive: bool,
    /// How a file is divided into spectra (default: [`Split::Auto`]).
    pub split: Split,
    /// Fewest points a spectrum may have (default: 3).
    pub min_points: usize,
    /// Sort each spectrum from high to low frequency, as canonical files are (default: true).
    pub sort: bool,
}

impl Default for ReaderOptions {
    fn default() -> Self {
        ReaderOptions {
            columns: Vec::new(),
            imag_sign: ImagSign::Auto,
            phase_unit: PhaseUnit::Auto,
            name_pattern: None,
            fmin: None,
            fmax: None,
            drop_inductive: false,
            split: Split::Auto,
            min_points: 3,
            sort: true,
        }
    }
}

/// `x` times a unit factor; a decimal submultiple divides by its inverse, so that `26` mΩ gives the
/// double nearest to 0.026 rather than `26 × 0.001`.
fn scaled(x: f64, scale: f64) -> f64 {
    let inv = 1.0 / scale.abs();
    if scale.abs() < 1.0 && (inv - inv.round()).abs() < 1e-9 * inv {
        x / (inv.round() * scale.signum())
    } else {
        x * scale
    }
}

/// A spectrum as read, with what the reader noticed on the way.
#[derive(Debug, Clone, PartialEq)]
pub struct Imported {
    /// The spectrum; its metadata hold the file, the number in the file and the per-spectrum fields.
    pub spectrum: Spectrum,
    /// Warnings about this spectrum (file-level warnings come with the first spectrum).
    pub warnings: Vec<DataWarning>,
}

/// Reads every spectrum of a file, stopping at the first error.
///
/// # Errors
///
/// The first [`DataError`]; use [`SpectrumReader`] to keep the spectra before and after a bad one.
pub fn read_file(path: &Path, options: &ReaderOptions) -> Result<Vec<Imported>, DataError> {
    SpectrumReader::open(path, options.clone())?.collect()
}

/// Reads every spectrum of in-memory bytes named `file` (for messages and the name pattern),
/// stopping at the first error.
///
/// # Errors
///
/// The first [`DataError`].
pub fn read_bytes(
    file: &str,
    bytes: &[u8],
    options: &ReaderOptions,
) -> Result<Vec<Imported>, DataError> {
    SpectrumReader::new(file, bytes, options.clone()).collect()
}

/// Streaming reader: yields each spectrum of one input as soon as it is complete. After an error that
/// belongs to one spectrum ([`DataError::spectrum`] is `Some`) it carries on with the next; after any
/// other error it ends.
pub struct SpectrumReader<R> {
    file: String,
    input: R,
    options: ReaderOptions,
    lines_read: usize,
    buf: Vec<u8>,
    table: Option<Table>,
    queue: VecDeque<(usize, String)>,
    builder: Builder,
    count: usize,
    file_warnings: Vec<DataWarning>,
    file_fields: Vec<(String, MetaValue)>,
    fields: Vec<String>,
    out: VecDeque<Result<Imported, DataError>>,
    finished: bool,
}

struct Table {
    layout: Layout,
    map: ColumnMap,
}

#[derive(Default)]
struct Builder {
    start_line: Option<usize>,
    f: Vec<f64>,
    a: Vec<f64>,
    b: Vec<f64>,
    lines: Vec<usize>,
    /// Raw cells of the splitting columns at the first row.
    index: Vec<String>,
    meta_first: Vec<String>,
    meta_sum: Vec<f64>,
    meta_numeric: Vec<bool>,
    rows: usize,
    warnings: Vec<DataWarning>,
    error: Option<DataError>,
}

impl Builder {
    fn is_restart(&self, f: f64) -> bool {
        let (Some(&first), Some(&prev)) = (self.f.first(), self.f.last()) else {
            return false;
        };
        let Some(&second) = self.f.iter().find(|&&x| x != first) else {
            return false;
        };
        // Back at least half-way (geometric mean) towards the first frequency, against the direction.
        if second < first {
            f > prev && f * f >= first * prev
        } else {
            f < prev && f * f <= first * prev
        }
    }
}

impl SpectrumReader<BufReader<std::fs::File>> {
    /// Opens a file.
    ///
    /// # Errors
    ///
    /// [`DataErrorKind::Io`] if the file cannot be opened.
    pub fn open(path: &Path, options: ReaderOptions) -> Result<Self, DataError> {
        let name = path.display().to_string();
        let f = std::fs::File::open(path)
            .map_err(|e| DataError::new(Location::file(&name), DataErrorKind::Io(e.to_string())))?;
        Ok(SpectrumReader::new(name, BufReader::new(f), options))
    }
}

impl<R: BufRead> SpectrumReader<R> {
    /// A reader over `input`, which is named `file` in messages and matched against the name pattern.
    pub fn new(file: impl Into<String>, input: R, options: ReaderOptions) -> Self {
        let file = file.into();
        let mut file_warnings = Vec::new();
        let mut file_fields = Vec::new();
        if let Some(p) = &options.name_pattern {
            let stem = Path::new(&file)
                .file_stem()
                .map(|s| s.to_string_lossy().into_owned())
                .unwrap_or_default();
            match p.matches(&stem) {
                Some(fields) => file_fields = fields,
                None => file_warnings.push(DataWarning {
                    location: Location::file(&file),
                    kind: WarningKind::NameMismatch(p.as_str().to_owned()),
                }),
            }
        }
        SpectrumReader {
            file,
            input,
            options,
            lines_read: 0,
            buf: Vec::new(),
            table: None,
            queue: VecDeque::new(),
            builder: Builder::default(),
            count: 0,
            file_warnings,
            file_fields,
            fields: Vec::new(),
            out: VecDeque::new(),
            finished: false,
        }
    }

    /// The name of the input.
    pub fn file(&self) -> &str {
        &self.file
    }

    fn fail(&mut self, e: DataError) {
        self.out.push_back(Err(e));
        self.finished = true;
    }

    /// The next raw line with its number, `None` at the end.
    fn read_line(&mut self) -> Option<Result<(usize, String), DataError>> {
        self.buf.clear();
        let r = (&mut self.input)
            .take(MAX_LINE)
            .read_until(b'\n', &mut self.buf);
        match r {
            Ok(0) => None,
            Ok(n) => {
                self.lines_read += 1;
                if n as u64 == MAX_LINE && self.buf.last() != Some(&b'\n') {
                    return Some(Err(DataError::new(
                        Location::at(&self.file, self.lines_read, None),
                        DataErrorKind::Io(format!("line longer than {MAX_LINE} bytes")),
                    )));
                }
                let bytes = self.buf.strip_suffix(b"\n").unwrap_or(&self.buf);
                Some(Ok((
                    self.lines_read,
                    decode_line(bytes, self.lines_read == 1),
                )))
            }
            Err(e) => Some(Err(DataError::new(
                Location::at(&self.file, self.lines_read + 1, None),
                DataErrorKind::Io(e.to_string()),
            ))),
        }
    }

    /// Reads the first lines, finds the layout and the columns, and queues the data lines.
    fn detect(&mut self) -> Result<(), DataError> {
        let mut sample: Vec<(usize, String)> = Vec::new();
        while sample.len() < SAMPLE_LINES {
            match self.read_line() {
                None => break,
                Some(Err(e)) => return Err(e),
                Some(Ok((n, text))) => {
                    if !text.trim().is_empty() {
                        sample.push((n, text));
                    }
                }
            }
        }
        let texts: Vec<String> = sample.iter().map(|(_, t)| t.clone()).collect();
        let layout = detect::detect(&texts)
            .ok_or_else(|| DataError::new(Location::file(&self.file), DataErrorKind::NoData))?;
        let header_line = layout
            .header
            .as_ref()
            .map(|_| sample[layout.data_start - 1].0);
        let (map, warnings) = columns::map_columns(
            layout.header.as_deref(),
            layout.fields,
            &self.options,
            &self.file,
            header_line,
        )?;
        for kind in warnings {
            self.file_warnings.push(DataWarning {
                location: Location::file(&self.file),
                kind,
            });
        }
        self.queue = sample.into_iter().skip(layout.data_start).collect();
        self.table = Some(Table { layout, map });
        Ok(())
    }

    fn warn(&mut self, line: usize, column: Option<usize>, kind: WarningKind) {
        self.builder.warnings.push(DataWarning {
            location: Location::at(&self.file, line, column),
            kind,
        });
    }

    fn row_error(&mut self, line: usize, column: Option<usize>, kind: DataErrorKind) {
        self.builder.start_line.get_or_insert(line);
        if self.builder.error.is_none() {
            self.builder.error = Some(DataError::new(Location::at(&self.file, line, column), kind));
        }
    }

    fn process(&mut self, line_no: usize, text: String) {
        let Some(table) = &self.table else { return };
        let trimmed = text.trim();
        if trimmed.is_empty() || is_comment(trimmed) {
            return;
        }
        if table.layout.header_text.iter().any(|h| h == trimmed) {
            self.finish_spectrum();
            return;
        }
        let mut fields = std::mem::take(&mut self.fields);
        split(&text, table.layout.delimiter, &mut fields);
        let comma = table.layout.decimal_comma;
        if fields.iter().all(|f| parse_number(f, comma).is_none()) {
            let shown: String = trimmed.chars().take(60).collect();
            if self.builder.start_line.is_some() {
                self.warn(line_no, None, WarningKind::SkippedLine(shown));
            } else {
                self.file_warnings.push(DataWarning {
                    location: Location::at(&self.file, line_no, None),
                    kind: WarningKind::SkippedLine(shown),
                });
            }
            self.fields = fields;
            self.finish_spectrum();
            return;
        }
        self.row(line_no, &fields);
        self.fields = fields;
    }

    fn row(&mut self, line_no: usize, fields: &[String]) {
        let Some(table) = &self.table else { return };
        let map = table.map.clone();
        let comma = table.layout.decimal_comma;
        if fields.len() < map.needed {
            self.row_error(
                line_no,
                Some(fields.len() + 1),
                DataErrorKind::TooFewFields {
                    expected: map.needed,
                    found: fields.len(),
                },
            );
            return;
        }
        let (ai, bi) = match map.z {
            ZCols::Cartesian { re, im, .. } => (re.index, im.index),
            ZCols::Polar { modulus, phase, .. } => (modulus.index, phase),
        };
        let mut vals = [0.0; 3];
        for (v, i) in vals.iter_mut().zip([map.freq.index, ai, bi]) {
            match parse_number(&fields[i], comma) {
                Some(x) => *v = x,
                None => {
                    self.row_error(
                        line_no,
                        Some(i + 1),
                        DataErrorKind::NotANumber(fields[i].chars().take(40).collect()),
                    );
                    return;
                }
            }
        }
        let f = scaled(vals[0], map.freq.scale);
        // Boundaries before this row.
        let split = self.options.split;
        let by_column = matches!(split, Split::Auto | Split::Column);
        let by_restart = matches!(split, Split::Auto | Split::Restart);
        let index: Vec<&str> = map
            .meta
            .iter()
            .filter(|(r, _)| r.splits())
            .map(|(_, i)| fields[*i].as_str())
            .collect();
        if self.builder.start_line.is_some() {
            let changed = by_column
                && self.builder.index.len() == index.len()
                && self.builder.index.iter().zip(&index).any(|(a, b)| a != b);
            let restart = by_restart && f.is_finite() && self.builder.is_restart(f);
            if changed || restart {
                self.finish_spectrum();
            }
        }
        let b = &mut self.builder;
        if b.start_line.is_none() {
            b.start_line = Some(line_no);
            b.index = index.iter().map(|s| s.to_string()).collect();
            b.meta_first = map.meta.iter().map(|(_, i)| fields[*i].clone()).collect();
            b.meta_sum = vec![0.0; map.meta.len()];
            b.meta_numeric = vec![true; map.meta.len()];
        }
        b.rows += 1;
        for (k, (_, i)) in map.meta.iter().enumerate() {
            match parse_number(&fields[*i], comma) {
                Some(x) if x.is_finite() => b.meta_sum[k] += x,
                _ => b.meta_numeric[k] = false,
            }
        }
        // Point hygiene.
        for (k, i) in [map.freq.index, ai, bi].into_iter().enumerate() {
            if !vals[k].is_finite() {
                let cell = fields[i].clone();
                self.warn(line_no, Some(i + 1), WarningKind::NonFinite(cell));
                return;
            }
        }
        if f <= 0.0 {
            self.warn(
                line_no,
                Some(map.freq.index + 1),
                WarningKind::NonPositiveFrequency(f),
            );
            return;
        }
        let b = &mut self.builder;
        b.f.push(f);
        b.a.push(vals[1]);
        b.b.push(vals[2]);
        b.lines.push(line_no);
    }

    /// Completes the spectrum in the builder, if any, and queues it.
    fn finish_spectrum(&mut self) {
        let b = std::mem::take(&mut self.builder);
        let Some(start) = b.start_line else { return };
        self.count += 1;
        let number = self.count;
        let result = self.complete(b, number, start);
        self.out.push_back(result);
    }

    fn complete(&mut self, b: Builder, number: usize, start: usize) -> Result<Imported, DataError> {
        if let Some(mut e) = b.error {
            e.spectrum = Some(number);
            return Err(e);
        }
        let Some(table) = &self.table else {
            unreachable!("rows arrive only after detection")
        };
        let map = &table.map;
        let file = self.file.clone();
        let loc = |line: usize, column: Option<usize>| Location::at(&file, line, column);
        let mut warnings = std::mem::take(&mut self.file_warnings);
        warnings.extend(b.warnings);
        let n = b.f.len();
        // Impedances.
        let mut z: Vec<Complex64> = Vec::with_capacity(n);
        match map.z {
            ZCols::Cartesian { re, im, sign } => {
                let negated = match sign {
                    Sign::Known { negated } => negated,
                    Sign::Guess => {
                        let positive = b.b.iter().filter(|&&x| x > 0.0).count();
                        let guess = 2 * positive > n;
                        if guess {
                            warnings.push(DataWarning {
                                location: loc(start, Some(im.index + 1)),
                                kind: WarningKind::ImagSignGuessed,
                            });
                        }
                        guess
                    }
                };
                let s = if negated { -im.scale } else { im.scale };
                z.extend(
                    b.a.iter()
                        .zip(&b.b)
                        .map(|(&x, &y)| Complex64::new(scaled(x, re.scale), scaled(y, s))),
                );
            }
            ZCols::Polar {
                modulus,
                phase,
                phase_scale,
                sign,
            } => {
                let scale = phase_scale.unwrap_or_else(|| {
                    let big = b.b.iter().any(|x| x.abs() > std::f64::consts::FRAC_PI_2);
                    warnings.push(DataWarning {
                        location: loc(start, Some(phase + 1)),
                        kind: WarningKind::PhaseUnitGuessed(if big {
                            "degrees"
                        } else {
                            "radians"
                        }),
                    });
                    if big {
                        std::f64::consts::PI / 180.0
                    } else {
                        1.0
                    }
                });
                let s = if sign == (Sign::Known { negated: true }) {
                    -scale
                } else {
                    scale
                };
                z.extend(
                    b.a.iter()
                        .zip(&b.b)
                        .map(|(&m, &p)| Complex64::from_polar(scaled(m, modulus.scale), p * s)),
                );
            }
        }
        let mut f = b.f;
        let mut lines = b.lines;
        // Zero impedance: dropped.
        let mut k = 0;
        while k < z.len() {
            if z[k].norm() == 0.0 {
                warnings.push(DataWarning {
                    location: loc(lines[k], None),
                    kind: WarningKind::ZeroImpedance,
                });
                z.remove(k);
                f.remove(k);
                lines.remove(k);
            } else {
                k += 1;
            }
        }
        let negative = z.iter().filter(|v| v.re < 0.0).count();
        if negative > 0 {
            warnings.push(DataWarning {
                location: loc(start, None),
                kind: WarningKind::NegativeReal(negative),
            });
        }
        // Order: the first point against the direction of the first step.
        let fcol = Some(map.freq.index + 1);
        if let Some(second) = f.iter().position(|&x| x != f[0]) {
            let down = f[second] < f[0];
            if let Some(i) = (1..f.len()).find(|&i| {
                if down {
                    f[i] > f[i - 1]
                } else {
                    f[i] < f[i - 1]
                }
            }) {
                warnings.push(DataWarning {
                    location: loc(lines[i], fcol),
                    kind: WarningKind::Unsorted,
                });
            }
        }
        let mut order: Vec<usize> = (0..f.len()).collect();
        order.sort_by(|&i, &j| f[j].total_cmp(&f[i]).then(i.cmp(&j)));
        if let Some(w) = order.windows(2).find(|w| f[w[0]] == f[w[1]]) {
            let later = w[0].max(w[1]);
            warnings.push(DataWarning {
                location: loc(lines[later], fcol),
                kind: WarningKind::Duplicate(f[later]),
            });
        }
        let mut spectrum = if self.options.sort {
            Spectrum::new(
                order.iter().map(|&i| f[i]).collect(),
                order.iter().map(|&i| z[i]).collect(),
            )
        } else {
            Spectrum::new(f, z)
        };
        // Cropping.
        let before = spectrum.len();
        spectrum.crop(self.options.fmin, self.options.fmax);
        if spectrum.len() < before {
            warnings.push(DataWarning {
                location: loc(start, None),
                kind: WarningKind::Cropped(before - spectrum.len()),
            });
        }
        // Inductive points at the high-frequency end.
        let mut by_freq: Vec<usize> = (0..spectrum.len()).collect();
        by_freq.sort_by(|&i, &j| spectrum.frequency_hz[j].total_cmp(&spectrum.frequency_hz[i]));
        let inductive: Vec<usize> = by_freq
            .iter()
            .copied()
            .take_while(|&i| spectrum.z[i].im > 0.0)
            .collect();
        if let (Some(&hi), Some(&lo)) = (inductive.first(), inductive.last()) {
            let drop = self.options.drop_inductive;
            warnings.push(DataWarning {
                location: loc(start, None),
                kind: WarningKind::Inductive {
                    count: inductive.len(),
                    low_hz: spectrum.frequency_hz[lo],
                    high_hz: spectrum.frequency_hz[hi],
                    dropped: drop,
                },
            });
            if drop {
                let mut keep = vec![true; spectrum.len()];
                for &i in &inductive {
                    keep[i] = false;
                }
                let mut it = keep.iter();
                spectrum
                    .frequency_hz
                    .retain(|_| *it.next().unwrap_or(&true));
                let mut it = keep.iter();
                spectrum.z.retain(|_| *it.next().unwrap_or(&true));
            }
        }
        if spectrum.len() < self.options.min_points {
            return Err(DataError {
                location: loc(start, None),
                spectrum: Some(number),
                kind: DataErrorKind::TooFewPoints {
                    spectrum: number,
                    points: spectrum.len(),
                    min: self.options.min_points,
                },
            });
        }
        // Metadata.
        spectrum.meta.source = Some(self.file.clone());
        spectrum.meta.spectrum = number;
        for (name, value) in &self.file_fields {
            spectrum.meta.set(name, value.clone());
        }
        for (k, (role, _)) in map.meta.iter().enumerate() {
            let first = match parse_number(&b.meta_first[k], table.layout.decimal_comma) {
                Some(x) if x.is_finite() => MetaValue::Number(x),
                _ => MetaValue::parse(&b.meta_first[k]),
            };
            let value = match role {
                columns::Role::Potential | columns::Role::Current | columns::Role::Temperature
                    if b.meta_numeric[k] && b.rows > 0 =>
                {
                    MetaValue::Number(b.meta_sum[k] / b.rows as f64)
                }
                _ => first,
            };
            spectrum.meta.set(role.key(), value);
        }
        Ok(Imported { spectrum, warnings })
    }

    fn step(&mut self) {
        if self.table.is_none() {
            if let Err(e) = self.detect() {
                self.fail(e);
            }
            return;
        }
        let next = match self.queue.pop_front() {
            Some(l) => Some(Ok(l)),
            None => self.read_line(),
        };
        match next {
            Some(Ok((n, text))) => self.process(n, text),
            Some(Err(e)) => {
                self.finish_spectrum();
                self.fail(e);
            }
            None => {
                self.finish_spectrum();
                self.finished = true;
            }
        }
    }
}

impl<R: BufRead> Iterator for SpectrumReader<R> {
    type Item = Result<Imported, DataError>;

    fn next(&mut self) -> Option<Self::Item> {
        loop {
            if let Some(x) = self.out.pop_front() {
                return Some(x);
            }
            if self.finished {
                return None;
            }
            self.step();
        }
    }
}

#[cfg(test)]
mod tests;
