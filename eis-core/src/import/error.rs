//! Errors and warnings of the reader. Each names the file and, where one applies, the line and column
//! (both from 1, columns counted in fields of the delimited table).

use std::fmt;

/// Where in an input a problem was found.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct Location {
    /// The file, as the caller named it.
    pub file: String,
    /// Line number from 1, when the problem belongs to one line.
    pub line: Option<usize>,
    /// Field number from 1 within that line, when the problem belongs to one cell.
    pub column: Option<usize>,
}

impl Location {
    pub(crate) fn file(file: &str) -> Location {
        Location {
            file: file.to_owned(),
            line: None,
            column: None,
        }
    }

    pub(crate) fn at(file: &str, line: usize, column: Option<usize>) -> Location {
        Location {
            file: file.to_owned(),
            line: Some(line),
            column,
        }
    }
}

impl fmt::Display for Location {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file)?;
        if let Some(l) = self.line {
            write!(f, ", line {l}")?;
        }
        if let Some(c) = self.column {
            write!(f, ", column {c}")?;
        }
        Ok(())
    }
}

/// What is wrong with an input. Each variant's doc gives an input that triggers it.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum DataErrorKind {
    /// The file cannot be opened or read (missing file, permission, I/O failure).
    #[error("cannot read the file: {0}")]
    Io(String),
    /// No line holds three or more numbers: an empty file, or text only.
    #[error("found no table of numbers (no line holds three or more numeric fields)")]
    NoData,
    /// A column the reader needs is not among the header words: `time,current,voltage`.
    #[error("no {role} column among the header words {header}")]
    MissingColumn {
        /// What was looked for ("frequency", "real part", ...).
        role: &'static str,
        /// The header words found, quoted and comma-separated.
        header: String,
    },
    /// A header states a unit the reader does not know for that quantity: `freq (Hz^2)`.
    #[error("unknown unit `{unit}` for the {role}")]
    UnknownUnit {
        /// The unit as written.
        unit: String,
        /// The quantity of the column.
        role: &'static str,
    },
    /// A column override names a header word that is not there: `freq=Frequency` with no such header.
    #[error("column `{0}` named in the column overrides is not in the header")]
    ColumnNotFound(String),
    /// A column override gives a column number beyond the table: `im=9` in a 3-column file.
    #[error(
        "column {column} named in the column overrides is beyond the {fields} columns of the table"
    )]
    ColumnOutOfRange {
        /// The number asked for, from 1.
        column: usize,
        /// How many fields the data lines have.
        fields: usize,
    },
    /// A data line holds fewer fields than the columns in use: `100;5` in a 3-column file.
    #[error("expected at least {expected} fields, found {found}")]
    TooFewFields {
        /// Fields needed.
        expected: usize,
        /// Fields present.
        found: usize,
    },
    /// A cell of a column in use does not read as a number: `1.2.3`, `abc`, `12 Ohm`.
    #[error("`{0}` is not a number")]
    NotANumber(String),
    /// A finite cell becomes infinite once its unit is applied: `1e306` in a `Z' (kOhm)` column.
    #[error("`{cell}` is out of range once scaled to SI units (×{scale})")]
    OutOfRange {
        /// The cell as written.
        cell: String,
        /// The factor of its unit to SI.
        scale: f64,
    },
    /// A spectrum has fewer usable points than the minimum, after dropping bad points and cropping.
    #[error("spectrum {spectrum} has {points} usable points, fewer than the minimum of {min}")]
    TooFewPoints {
        /// Its number in the file, from 1.
        spectrum: usize,
        /// Usable points.
        points: usize,
        /// The minimum asked for.
        min: usize,
    },
}

/// An error of the reader: where, and what.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{location}: {kind}")]
pub struct DataError {
    /// Where.
    pub location: Location,
    /// The spectrum it belongs to (number in the file, from 1), when it belongs to one; the reader
    /// carries on with the next spectrum after such an error.
    pub spectrum: Option<usize>,
    /// What.
    pub kind: DataErrorKind,
}

impl DataError {
    pub(crate) fn new(location: Location, kind: DataErrorKind) -> DataError {
        DataError {
            location,
            spectrum: None,
            kind,
        }
    }
}

/// Something the reader noticed and dealt with; the data were kept or the drop is stated.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum WarningKind {
    /// Frequencies go up and down within one spectrum (points kept, sorted high to low if sorting is
    /// on); the location is the first point out of order.
    #[error("frequencies are not monotonic within the spectrum (first out of order here)")]
    Unsorted,
    /// The same frequency appears more than once in one spectrum (points kept).
    #[error("frequency {0} Hz appears more than once in the spectrum (points kept)")]
    Duplicate(f64),
    /// Rows that hold no usable point were dropped; each is named with its line, column and reason
    /// (all of them here, the first few when displayed).
    #[error("{}", DroppedSummary(.0))]
    DroppedRows(Vec<DroppedRow>),
    /// Points with a negative real part (kept).
    #[error("{0} points have a negative real part (kept)")]
    NegativeReal(usize),
    /// Points with a positive imaginary part at the high-frequency end (inductive).
    #[error(
        "{count} points with positive imaginary part (inductive) between {low_hz} and {high_hz} Hz; {}",
        if *dropped { "dropped" } else { "kept" }
    )]
    Inductive {
        /// How many.
        count: usize,
        /// Lowest of their frequencies.
        low_hz: f64,
        /// Highest of their frequencies.
        high_hz: f64,
        /// Whether they were removed.
        dropped: bool,
    },
    /// Points outside the frequency window were removed.
    #[error("{0} points outside the frequency window removed")]
    Cropped(usize),
    /// A line of text inside the data was skipped and taken as the end of a spectrum.
    #[error("skipped a line of text inside the data: `{0}`")]
    SkippedLine(String),
    /// A line above a table without header looks like a damaged data row (the data's number of
    /// fields, two or more numbers, but not all numbers) or a preamble line: it was not read.
    #[error("skipped a line above the table that may be a damaged data row: `{0}`")]
    SkippedAboveTable(String),
    /// No header said which sign the imaginary column has; most values were positive, so the column
    /// was taken as −Z″.
    #[error(
        "the sign of the imaginary column is not stated; most values are positive, so it was taken as -Z''"
    )]
    ImagSignGuessed,
    /// No header said the unit of the phase; it was taken from the size of the values.
    #[error("the phase unit is not stated; taken as {0} from the size of the values")]
    PhaseUnitGuessed(&'static str),
    /// The file has no header; the first three columns were taken as frequency, real and imaginary part.
    #[error("no header; columns 1, 2 and 3 taken as frequency (Hz), real and imaginary part (Ohm)")]
    NoHeader,
    /// The file name does not match the name pattern, so no metadata came from it.
    #[error("the file name does not match the name pattern `{0}`")]
    NameMismatch(String),
}

/// A warning of the reader: where, and what.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{location}: warning: {kind}")]
pub struct DataWarning {
    /// Where.
    pub location: Location,
    /// What.
    pub kind: WarningKind,
}

/// Why a data row gave no point.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum DropReason {
    /// A cell reads as NaN or infinity: `nan`, `-inf`.
    #[error("`{0}` is not a finite number")]
    NonFinite(String),
    /// The frequency is zero or negative.
    #[error("frequency {0} Hz is not positive")]
    NonPositiveFrequency(f64),
    /// |Z| is zero (relative residuals would be undefined).
    #[error("impedance is zero")]
    ZeroImpedance,
}

/// A data row the reader dropped: where, and why.
#[derive(Debug, Clone, PartialEq)]
pub struct DroppedRow {
    /// Line number from 1.
    pub line: usize,
    /// Field number from 1 of the offending cell, when one cell is to blame.
    pub column: Option<usize>,
    /// Why.
    pub reason: DropReason,
}

impl fmt::Display for DroppedRow {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "line {}", self.line)?;
        if let Some(c) = self.column {
            write!(f, ", column {c}")?;
        }
        write!(f, ": {}", self.reason)
    }
}

/// Rows named in full in a summary of dropped rows; the rest are counted.
pub const DROPPED_SHOWN: usize = 3;

/// Displays dropped rows as one summary: the count, the first [`DROPPED_SHOWN`] rows and how many
/// more, as in `dropped 37 rows: line 12, column 3: ...; line 13, ...; and 34 more`.
#[derive(Debug, Clone, Copy)]
pub struct DroppedSummary<'a>(pub &'a [DroppedRow]);

impl fmt::Display for DroppedSummary<'_> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let rows = self.0;
        let plural = if rows.len() == 1 { "" } else { "s" };
        write!(f, "dropped {} row{plural}", rows.len())?;
        for (k, r) in rows.iter().take(DROPPED_SHOWN).enumerate() {
            write!(f, "{} {r}", if k == 0 { ":" } else { ";" })?;
        }
        if rows.len() > DROPPED_SHOWN {
            write!(f, "; and {} more", rows.len() - DROPPED_SHOWN)?;
        }
        Ok(())
    }
}

/// Gathers the warnings of the spectra of one file for display, so that the rows dropped anywhere in
/// the file make one summary rather than one line per spectrum (or per row).
///
/// ```
/// use eis_core::import::{read_bytes, FileWarnings, ReaderOptions};
/// let text = "f,re,im,cycle\n3,1,-1,1\n2,nan,-2,1\n1,1,-3,1\n0.5,1,-3,1\n3,1,-1,2\n2,1,-2,2\n1,1,-3,2\n0,1,-3,2\n";
/// let mut gathered = FileWarnings::new("m.csv");
/// let mut shown = Vec::new();
/// for r in read_bytes("m.csv", text.as_bytes(), &ReaderOptions::default()).unwrap() {
///     shown.extend(gathered.pass(&r.warnings).map(|w| w.to_string()));
/// }
/// assert!(shown.is_empty());
/// assert_eq!(
///     gathered.finish().unwrap().to_string(),
///     "m.csv: warning: dropped 2 rows: line 3, column 2: `nan` is not a finite number; \
///      line 9, column 1: frequency 0 Hz is not positive"
/// );
/// ```
#[derive(Debug, Clone)]
pub struct FileWarnings {
    file: String,
    dropped: Vec<DroppedRow>,
}

impl FileWarnings {
    /// Gathers for the file named `file` in messages.
    pub fn new(file: impl Into<String>) -> FileWarnings {
        FileWarnings {
            file: file.into(),
            dropped: Vec::new(),
        }
    }

    /// Keeps the dropped rows of one spectrum's warnings and yields the other warnings, to be shown
    /// now.
    pub fn pass<'a>(
        &mut self,
        warnings: &'a [DataWarning],
    ) -> impl Iterator<Item = &'a DataWarning> + use<'a> {
        for w in warnings {
            if let WarningKind::DroppedRows(rows) = &w.kind {
                self.dropped.extend(rows.iter().cloned());
            }
        }
        warnings
            .iter()
            .filter(|w| !matches!(w.kind, WarningKind::DroppedRows(_)))
    }

    /// One warning for every row dropped in the file, if any was.
    pub fn finish(self) -> Option<DataWarning> {
        (!self.dropped.is_empty()).then(|| DataWarning {
            location: Location::file(&self.file),
            kind: WarningKind::DroppedRows(self.dropped),
        })
    }
}
