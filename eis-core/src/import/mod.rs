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
//! | too few fields, non-numeric cell in a column in use, a value out of range once its unit is applied, too few points | error for that spectrum; the next spectrum is read |
//! | NaN or infinite cell, zero or negative frequency, zero impedance | row dropped; the dropped rows of a spectrum make one warning ([`WarningKind::DroppedRows`], each a [`DroppedRow`]) |
//! | unsorted or duplicate frequencies, negative real part | warning, points kept |
//! | positive imaginary part at the high-frequency end (inductive) | warning, kept unless `drop_inductive` |
//! | points outside `fmin..fmax` | warning, points removed |
//!
//! Every error and warning names the file, and the line and column where one applies; each point of
//! a spectrum keeps its source line ([`Spectrum::source_lines`]).
//!
//! The header is the nearest line above the data whose cells are column names the reader knows,
//! found past comments and bad rows; a line of units may follow it (an empty cell is a column without
//! unit). Rows between the header and the first clean data row are data, so a bad one is reported,
//! never skipped. A comment is a header only if all its words are column names. A row error belongs
//! to the spectrum of that row: when its frequency is unreadable, the next row tells whether the
//! sweep restarted there. What no header states (the sign of the imaginary column, the phase unit) is
//! decided once per file, from the first data lines.
//!
//! ```
//! use eis_core::import::{read_bytes, ReaderOptions};
//! let text = "# exported data\nFreq (kHz);Z' (mOhm);-Z'' (mOhm)\n1;20,5;3\n0,1;25;7,5\n0,01;30;2\n";
//! let read = read_bytes("cell.csv", text.as_bytes(), &ReaderOptions::default()).unwrap();
//! let s = &read[0].spectrum;
//! assert_eq!(s.frequency_hz, [1000.0, 100.0, 10.0]);
//! assert!((s.z[0].re - 0.0205).abs() < 1e-15 && (s.z[0].im + 0.003).abs() < 1e-15);
//! ```

mod builder;
mod columns;
mod detect;
mod error;
mod pattern;
mod values;

use builder::{Boundary, Builder, splitting};
use values::read_values;

pub use columns::{ColumnRef, Role, parse_column_overrides};
pub use error::{
    DROPPED_SHOWN, DataError, DataErrorKind, DataWarning, DropReason, DroppedRow, DroppedSummary,
    FileWarnings, Location, WarningKind,
};
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

/// Largest |phase| still read as radians when the unit must be guessed: π/2 with 1 % to spare for
/// values rounded when printed (π/2 to four digits is 1.571).
const RADIANS_AT_MOST: f64 = 1.01 * std::f64::consts::FRAC_PI_2;

/// The unit of a phase column.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum PhaseUnit {
    /// From the header unit; if none is given, degrees when any |value| exceeds π/2 by more than 1 %
    /// (so that a phase of π/2 printed as `1.571` still reads as radians), radians otherwise (with a
    /// warning).
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
    /// An error of a row whose spectrum is not known yet (its frequency is unreadable, so whether
    /// the sweep restarted there is told by the next row).
    pending: Option<DataError>,
    finished: bool,
}

struct Table {
    layout: Layout,
    map: ColumnMap,
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
            pending: None,
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
            .header_index
            .and_then(|i| sample.get(i))
            .map(|(n, _)| *n);
        let (mut map, warnings) = columns::map_columns(
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
        for (n, text) in layout.skipped.iter().filter_map(|&i| sample.get(i)) {
            self.file_warnings.push(DataWarning {
                location: Location::at(&self.file, *n, None),
                kind: WarningKind::SkippedAboveTable(text.trim().chars().take(60).collect()),
            });
        }
        self.queue = sample.into_iter().skip(layout.data_start).collect();
        self.guess_once(&layout, &mut map);
        self.table = Some(Table { layout, map });
        Ok(())
    }

    /// Decides, once for the whole file and from the data lines of the sample, what no header said:
    /// the sign of the imaginary column and the unit of the phase, so that every spectrum of a file is
    /// read the same way.
    fn guess_once(&mut self, layout: &Layout, map: &mut ColumnMap) {
        let column = match map.z {
            ZCols::Cartesian {
                im,
                sign: Sign::Guess,
                ..
            } => im.index,
            ZCols::Polar {
                phase,
                phase_scale: None,
                ..
            } => phase,
            _ => return,
        };
        let mut fields = Vec::new();
        let (mut positive, mut finite, mut big) = (0usize, 0usize, false);
        for (_, text) in &self.queue {
            if is_comment(text) {
                continue;
            }
            split(text, layout.delimiter, &mut fields);
            let value = fields
                .get(column)
                .and_then(|c| parse_number(c, layout.decimal_comma));
            if let Some(x) = value.filter(|x| x.is_finite()) {
                finite += 1;
                positive += usize::from(x > 0.0);
                big |= x.abs() > RADIANS_AT_MOST;
            }
        }
        let first_line = self.queue.front().map(|(n, _)| *n);
        let location = match first_line {
            Some(n) => Location::at(&self.file, n, Some(column + 1)),
            None => Location::file(&self.file),
        };
        match &mut map.z {
            ZCols::Cartesian { sign, .. } => {
                let negated = 2 * positive > finite;
                *sign = Sign::Known { negated };
                if negated {
                    self.file_warnings.push(DataWarning {
                        location,
                        kind: WarningKind::ImagSignGuessed,
                    });
                }
            }
            ZCols::Polar { phase_scale, .. } => {
                *phase_scale = Some(if big {
                    std::f64::consts::PI / 180.0
                } else {
                    1.0
                });
                self.file_warnings.push(DataWarning {
                    location,
                    kind: WarningKind::PhaseUnitGuessed(if big { "degrees" } else { "radians" }),
                });
            }
        }
    }

    fn warn(&mut self, line: usize, column: Option<usize>, kind: WarningKind) {
        self.builder.warnings.push(DataWarning {
            location: Location::at(&self.file, line, column),
            kind,
        });
    }

    fn process(&mut self, t: &Table, line_no: usize, text: &str) {
        let trimmed = text.trim();
        if trimmed.is_empty() || is_comment(trimmed) {
            return;
        }
        if t.layout.header_text.iter().any(|h| h == trimmed) {
            self.close(t);
            return;
        }
        let mut fields = std::mem::take(&mut self.fields);
        split(text, t.layout.delimiter, &mut fields);
        let comma = t.layout.decimal_comma;
        if fields.iter().all(|f| parse_number(f, comma).is_none()) {
            let shown: String = trimmed.chars().take(60).collect();
            if self.builder.start_line.is_some() || self.pending.is_some() {
                self.warn(line_no, None, WarningKind::SkippedLine(shown));
            } else {
                self.file_warnings.push(DataWarning {
                    location: Location::at(&self.file, line_no, None),
                    kind: WarningKind::SkippedLine(shown),
                });
            }
            self.fields = fields;
            self.close(t);
            return;
        }
        self.row(t, line_no, &fields);
        self.fields = fields;
    }

    /// One data row. A row that cannot be read is an error of its spectrum; when its frequency is
    /// unreadable too, whether it starts a new spectrum is decided by the next row (see
    /// [`Self::pending`]), so that a bad first row of one spectrum never fails the one before.
    fn row(&mut self, t: &Table, line_no: usize, fields: &[String]) {
        let comma = t.layout.decimal_comma;
        let at = self.boundary(t, fields);
        let vals = match read_values(&t.map, fields, comma) {
            Ok(vals) => vals,
            Err((i, kind)) => {
                let e = DataError::new(Location::at(&self.file, line_no, Some(i + 1)), kind);
                if at.decided {
                    if at.new_spectrum {
                        self.finish_spectrum(t);
                    }
                    self.attach_pending();
                    self.builder.error(e);
                } else if self.pending.is_none() {
                    self.pending = Some(e);
                }
                return;
            }
        };
        if at.new_spectrum {
            self.finish_spectrum(t);
        }
        self.attach_pending();
        let b = &mut self.builder;
        b.start_line.get_or_insert(line_no);
        b.tally(&t.map, fields, comma);
        b.push_point(&t.map, fields, &vals, line_no);
    }

    /// Whether the data row `fields` starts a new spectrum: a splitting cell changed, or the sweep
    /// restarted (as the split option allows).
    fn boundary(&self, t: &Table, fields: &[String]) -> Boundary {
        let map = &t.map;
        let split = self.options.split;
        let by_column = matches!(split, Split::Auto | Split::Column);
        let by_restart = matches!(split, Split::Auto | Split::Restart);
        let f = fields
            .get(map.freq.index)
            .and_then(|c| parse_number(c, t.layout.decimal_comma))
            .map(|x| scaled(x, map.freq.scale))
            .filter(|x| x.is_finite());
        let index_known = splitting(map).all(|i| i < fields.len());
        let b = &self.builder;
        let started = b.start_line.is_some();
        let changed = by_column
            && started
            && b.begun
            && splitting(map)
                .zip(&b.index)
                .any(|(i, old)| fields.get(i).is_some_and(|c| c != old));
        let restart = by_restart && started && f.is_some_and(|f| b.is_restart(f));
        let new_spectrum = changed || restart;
        Boundary {
            new_spectrum,
            decided: new_spectrum
                || ((!by_column || index_known || !b.begun) && (!by_restart || f.is_some())),
        }
    }

    /// Gives a pending row error to the spectrum being built.
    fn attach_pending(&mut self) {
        if let Some(e) = self.pending.take() {
            self.builder.error(e);
        }
    }

    /// Ends the spectrum at a text line, a repeated header or the end of the input: a pending row
    /// error belongs to it.
    fn close(&mut self, t: &Table) {
        self.attach_pending();
        self.finish_spectrum(t);
    }

    /// Completes the spectrum in the builder, if any, and queues it.
    fn finish_spectrum(&mut self, t: &Table) {
        let b = std::mem::take(&mut self.builder);
        let Some(start) = b.start_line else { return };
        self.count += 1;
        let number = self.count;
        let result = self.complete(t, b, number, start);
        self.out.push_back(result);
    }

    fn complete(
        &mut self,
        t: &Table,
        b: Builder,
        number: usize,
        start: usize,
    ) -> Result<Imported, DataError> {
        if let Some(mut e) = b.error {
            e.spectrum = Some(number);
            return Err(e);
        }
        let meta = metadata(t, &b);
        let map = &t.map;
        let file = self.file.clone();
        let loc = |line: usize, column: Option<usize>| Location::at(&file, line, column);
        let mut warnings = std::mem::take(&mut self.file_warnings);
        warnings.extend(b.warnings);
        // Impedances (the file-wide guesses were made at detection).
        let mut spectrum = Spectrum::new(b.f, impedances(map.z, &b.a, &b.b));
        spectrum.source_lines = Some(b.lines);
        let mut dropped = b.dropped;
        drop_zero_impedance(&mut spectrum, &mut dropped);
        if !dropped.is_empty() {
            dropped.sort_by_key(|d| d.line);
            warnings.push(DataWarning {
                location: Location::file(&self.file),
                kind: WarningKind::DroppedRows(dropped),
            });
        }
        let negative = spectrum.z.iter().filter(|v| v.re < 0.0).count();
        if negative > 0 {
            warnings.push(DataWarning {
                location: loc(start, None),
                kind: WarningKind::NegativeReal(negative),
            });
        }
        let fcol = Some(map.freq.index + 1);
        let (order_warnings, order) = frequency_order(&spectrum);
        for (i, kind) in order_warnings {
            warnings.push(DataWarning {
                location: loc(spectrum.source_line(i).unwrap_or(start), fcol),
                kind,
            });
        }
        if self.options.sort {
            spectrum.reorder(&order);
        }
        // Cropping.
        let before = spectrum.len();
        spectrum.crop(self.options.fmin, self.options.fmax);
        if spectrum.len() < before {
            warnings.push(DataWarning {
                location: loc(start, None),
                kind: WarningKind::Cropped(before - spectrum.len()),
            });
        }
        if let Some(kind) = inductive_end(&mut spectrum, self.options.drop_inductive) {
            warnings.push(DataWarning {
                location: loc(start, None),
                kind,
            });
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
        spectrum.meta.source = Some(self.file.clone());
        spectrum.meta.spectrum = number;
        for (name, value) in &self.file_fields {
            spectrum.meta.set(name, value.clone());
        }
        for (key, value) in meta {
            spectrum.meta.set(key, value);
        }
        Ok(Imported { spectrum, warnings })
    }

    fn step(&mut self) {
        let Some(table) = self.table.take() else {
            if let Err(e) = self.detect() {
                self.fail(e);
            }
            return;
        };
        let next = match self.queue.pop_front() {
            Some(l) => Some(Ok(l)),
            None => self.read_line(),
        };
        match next {
            Some(Ok((n, text))) => self.process(&table, n, &text),
            Some(Err(e)) => {
                self.close(&table);
                self.fail(e);
            }
            None => {
                self.close(&table);
                self.finished = true;
            }
        }
        self.table = Some(table);
    }
}

/// The impedances of the rows' two value columns `a`, `b`, stored as `z` (scaled, signs applied).
fn impedances(z: ZCols, a: &[f64], b: &[f64]) -> Vec<Complex64> {
    match z {
        ZCols::Cartesian { re, im, sign } => {
            let negated = sign == (Sign::Known { negated: true });
            let s = if negated { -im.scale } else { im.scale };
            a.iter()
                .zip(b)
                .map(|(&x, &y)| Complex64::new(scaled(x, re.scale), scaled(y, s)))
                .collect()
        }
        ZCols::Polar {
            modulus,
            phase_scale,
            sign,
            ..
        } => {
            let scale = phase_scale.unwrap_or(1.0);
            let s = if sign == (Sign::Known { negated: true }) {
                -scale
            } else {
                scale
            };
            a.iter()
                .zip(b)
                .map(|(&m, &p)| Complex64::from_polar(scaled(m, modulus.scale), p * s))
                .collect()
        }
    }
}

/// Drops the points of zero impedance, in one pass, recording each in `dropped`.
fn drop_zero_impedance(spectrum: &mut Spectrum, dropped: &mut Vec<DroppedRow>) {
    let zero: Vec<bool> = spectrum.z.iter().map(|v| v.norm() == 0.0).collect();
    if !zero.contains(&true) {
        return;
    }
    let lines = spectrum.source_lines.iter().flatten();
    for (&line, _) in lines.zip(&zero).filter(|(_, z)| **z) {
        dropped.push(DroppedRow {
            line,
            column: None,
            reason: DropReason::ZeroImpedance,
        });
    }
    let keep: Vec<bool> = zero.iter().map(|z| !z).collect();
    spectrum.retain(&keep);
}

/// The warnings about the frequencies' order (each with the index of the point it points at): the
/// first point against the direction of the first step, and the later of two equal frequencies;
/// with the order of the points from high to low frequency (stable).
fn frequency_order(spectrum: &Spectrum) -> (Vec<(usize, WarningKind)>, Vec<usize>) {
    let mut warnings = Vec::new();
    let f = &spectrum.frequency_hz;
    if let Some(&f0) = f.first() {
        if let Some(&second) = f.iter().find(|&&x| x != f0) {
            let down = second < f0;
            let out_of_order = f.windows(2).position(|w| match w {
                [a, b] => (down && b > a) || (!down && b < a),
                _ => false,
            });
            if let Some(i) = out_of_order {
                warnings.push((i + 1, WarningKind::Unsorted));
            }
        }
    }
    let mut order: Vec<usize> = (0..f.len()).collect();
    let at = |i: usize| f.get(i).copied().unwrap_or(f64::NAN);
    order.sort_by(|&i, &j| at(j).total_cmp(&at(i)).then(i.cmp(&j)));
    let same = order.windows(2).find_map(|w| match *w {
        [i, j] if at(i) == at(j) => Some(i.max(j)),
        _ => None,
    });
    if let Some(later) = same {
        warnings.push((later, WarningKind::Duplicate(at(later))));
    }
    (warnings, order)
}

/// The warning about inductive points (positive imaginary part) at the high-frequency end, dropped
/// with `drop`.
fn inductive_end(spectrum: &mut Spectrum, drop: bool) -> Option<WarningKind> {
    let fs = &spectrum.frequency_hz;
    let freq = |i: usize| fs.get(i).copied().unwrap_or(f64::NAN);
    let mut by_freq: Vec<usize> = (0..fs.len()).collect();
    by_freq.sort_by(|&i, &j| freq(j).total_cmp(&freq(i)));
    let inductive: Vec<usize> = by_freq
        .iter()
        .copied()
        .take_while(|&i| spectrum.z.get(i).is_some_and(|z| z.im > 0.0))
        .collect();
    let (&hi, &lo) = inductive.first().zip(inductive.last())?;
    let kind = WarningKind::Inductive {
        count: inductive.len(),
        low_hz: freq(lo),
        high_hz: freq(hi),
        dropped: drop,
    };
    if drop {
        let mut keep = vec![true; spectrum.len()];
        for &i in &inductive {
            if let Some(k) = keep.get_mut(i) {
                *k = false;
            }
        }
        spectrum.retain(&keep);
    }
    Some(kind)
}

/// The metadata of a spectrum's per-spectrum columns: the first row's cell, or the mean over the
/// rows for potential, current and temperature.
fn metadata(t: &Table, b: &Builder) -> Vec<(&'static str, MetaValue)> {
    t.map
        .meta
        .iter()
        .enumerate()
        .map(|(k, (role, _))| {
            let raw = b.meta_first.get(k).map(String::as_str).unwrap_or("");
            let first = match parse_number(raw, t.layout.decimal_comma) {
                Some(x) if x.is_finite() => MetaValue::Number(x),
                _ => MetaValue::parse(raw),
            };
            let mean = match (b.meta_numeric.get(k), b.meta_sum.get(k)) {
                (Some(true), Some(sum)) if b.rows > 0 => Some(sum / b.rows as f64),
                _ => None,
            };
            let value = match (role, mean) {
                (
                    columns::Role::Potential | columns::Role::Current | columns::Role::Temperature,
                    Some(m),
                ) => MetaValue::Number(m),
                _ => first,
            };
            (role.key(), value)
        })
        .collect()
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
