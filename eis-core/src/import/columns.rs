//! Column roles: which field holds the frequency, the impedance and the per-spectrum quantities, read
//! from header words and their units, or given explicitly.
//!
//! Header words are compared after lower-casing and removing blanks, `_`, `.`, `#` and `:`; primes may
//! be written `'`, `′`, `’` (one) or `''`, `″`, `"` (two); a leading `-` or `−` marks a negated column.
//! Units come in brackets (`Freq (kHz)`, `Z' [mOhm]`), after a slash (`f/Hz`), after the last blank
//! (`Z' Ohm`) or on a line of their own under the names.

use super::error::{DataError, DataErrorKind, Location, WarningKind};
use super::{ImagSign, PhaseUnit, ReaderOptions};
use std::f64::consts::PI;

/// What a column holds.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[non_exhaustive]
pub enum Role {
    /// Frequency (Hz, or the unit of its header).
    Frequency,
    /// Real part Z′.
    Real,
    /// Imaginary part Z″ (or −Z″ when the header says so).
    Imaginary,
    /// Modulus |Z|.
    Modulus,
    /// Phase of Z.
    Phase,
    /// Time; a spectrum's metadata takes the time of its first point.
    Time,
    /// Cycle number; splits spectra.
    Cycle,
    /// Step number; splits spectra.
    Step,
    /// Sweep, scan or spectrum number; splits spectra.
    Sweep,
    /// Potential or voltage; a spectrum's metadata takes the mean.
    Potential,
    /// Current; a spectrum's metadata takes the mean.
    Current,
    /// Temperature; a spectrum's metadata takes the mean.
    Temperature,
}

impl Role {
    /// Every role, in the order keys are listed in messages.
    pub const ALL: [Role; 12] = [
        Role::Frequency,
        Role::Real,
        Role::Imaginary,
        Role::Modulus,
        Role::Phase,
        Role::Time,
        Role::Cycle,
        Role::Step,
        Role::Sweep,
        Role::Potential,
        Role::Current,
        Role::Temperature,
    ];

    /// The key of the role in column overrides (`freq`, `re`, `im`, `mod`, `phase`, `time`, `cycle`,
    /// `step`, `sweep`, `potential`, `current`, `temperature`), which is also the metadata field name
    /// for the per-spectrum roles.
    pub fn key(self) -> &'static str {
        match self {
            Role::Frequency => "freq",
            Role::Real => "re",
            Role::Imaginary => "im",
            Role::Modulus => "mod",
            Role::Phase => "phase",
            Role::Time => "time",
            Role::Cycle => "cycle",
            Role::Step => "step",
            Role::Sweep => "sweep",
            Role::Potential => "potential",
            Role::Current => "current",
            Role::Temperature => "temperature",
        }
    }

    /// The role of an override key.
    pub fn from_key(key: &str) -> Option<Role> {
        Role::ALL.into_iter().find(|r| r.key() == key)
    }

    /// The quantity in words, for messages.
    pub fn describe(self) -> &'static str {
        match self {
            Role::Frequency => "frequency",
            Role::Real => "real part",
            Role::Imaginary => "imaginary part",
            Role::Modulus => "modulus",
            Role::Phase => "phase",
            Role::Time => "time",
            Role::Cycle => "cycle number",
            Role::Step => "step number",
            Role::Sweep => "sweep number",
            Role::Potential => "potential",
            Role::Current => "current",
            Role::Temperature => "temperature",
        }
    }

    /// Whether a change of this column's value starts a new spectrum.
    pub fn splits(self) -> bool {
        matches!(self, Role::Cycle | Role::Step | Role::Sweep)
    }

    fn is_meta(self) -> bool {
        !matches!(
            self,
            Role::Frequency | Role::Real | Role::Imaginary | Role::Modulus | Role::Phase
        )
    }
}

/// A column named in an override: by number from 1 or by its header word.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ColumnRef {
    /// Field number, from 1.
    Number(usize),
    /// Header word as written (compared without case and surrounding blanks, with or without its
    /// unit).
    Name(String),
}

/// Parses column overrides written `freq=1,re=2,im=3` or `freq=Frequency,im="-Z''"`.
///
/// # Errors
///
/// A message naming the faulty item: a missing `=`, an unknown key, a column number 0, a key given
/// twice.
///
/// ```
/// use eis_core::import::{parse_column_overrides, ColumnRef, Role};
/// let o = parse_column_overrides("freq=1, re=Zreal, im=3").unwrap();
/// assert_eq!(o[1], (Role::Real, ColumnRef::Name("Zreal".into())));
/// assert!(parse_column_overrides("foo=1").is_err());
/// ```
pub fn parse_column_overrides(text: &str) -> Result<Vec<(Role, ColumnRef)>, String> {
    let mut out: Vec<(Role, ColumnRef)> = Vec::new();
    for item in text.split(',').map(str::trim).filter(|i| !i.is_empty()) {
        let (key, value) = item
            .split_once('=')
            .ok_or_else(|| format!("`{item}` is not KEY=COLUMN"))?;
        let key = key.trim();
        let role = Role::from_key(key).ok_or_else(|| {
            let keys: Vec<&str> = Role::ALL.iter().map(|r| r.key()).collect();
            format!("unknown column key `{key}` (known: {})", keys.join(", "))
        })?;
        if out.iter().any(|(r, _)| *r == role) {
            return Err(format!("column key `{key}` given twice"));
        }
        let value = value.trim().trim_matches('"').trim();
        let column = match value.parse::<usize>() {
            Ok(0) => return Err(format!("in `{item}`: columns are numbered from 1")),
            Ok(n) => ColumnRef::Number(n),
            Err(_) if value.is_empty() => return Err(format!("in `{item}`: no column given")),
            Err(_) => ColumnRef::Name(value.to_owned()),
        };
        out.push((role, column));
    }
    Ok(out)
}

/// A unit read from a header.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Unit {
    /// Frequency; the factor to Hz.
    Frequency(f64),
    /// Impedance; the factor to Ω.
    Impedance(f64),
    /// Angle; the factor to radians.
    Angle(f64),
    /// Temperature (°C, K).
    Temperature,
    /// Another known unit (s, V, A, ...), of metadata columns.
    Other,
}

/// Reads a unit, or `None` if it is not one the reader knows.
pub(crate) fn parse_unit(text: &str) -> Option<Unit> {
    let t = text.trim();
    let t = t
        .strip_prefix(['(', '['])
        .and_then(|x| x.strip_suffix([')', ']']))
        .unwrap_or(t)
        .trim();
    let freq = match t {
        "Hz" | "hz" | "HZ" => Some(1.0),
        "kHz" | "khz" | "KHz" | "KHZ" => Some(1e3),
        "MHz" => Some(1e6),
        "mHz" => Some(1e-3),
        "rad/s"
        | "rad s-1"
        | "rad s^-1"
        | "rad/sec"
        | "rad\u{b7}s\u{207b}\u{b9}"
        | "rad s\u{207b}\u{b9}" => Some(1.0 / (2.0 * PI)),
        _ => None,
    };
    if let Some(s) = freq {
        return Some(Unit::Frequency(s));
    }
    match t {
        "deg" | "Deg" | "DEG" | "\u{b0}" | "degree" | "degrees" | "Degree" | "Degrees" => {
            return Some(Unit::Angle(PI / 180.0));
        }
        "rad" | "Rad" | "RAD" | "radian" | "radians" => return Some(Unit::Angle(1.0)),
        "\u{b0}C" | "degC" | "C" | "K" | "\u{b0}F" | "\u{2103}" => return Some(Unit::Temperature),
        "s" | "ms" | "min" | "h" | "V" | "mV" | "A" | "mA" | "\u{b5}A" | "uA" | "%" => {
            return Some(Unit::Other);
        }
        _ => {}
    }
    impedance_scale(t).map(Unit::Impedance)
}

fn impedance_scale(t: &str) -> Option<f64> {
    // Area-normalised impedance (Ω·cm²) keeps its numbers.
    let mut t = t;
    for area in ["cm\u{b2}", "cm2", "cm^2"] {
        if let Some(rest) = t.strip_suffix(area) {
            t = rest.trim_end_matches([' ', '\u{b7}', '*', '.', '\u{22c5}']);
            break;
        }
    }
    for base in [
        "\u{3a9}", "\u{2126}", "ohms", "ohm", "Ohms", "Ohm", "OHMS", "OHM",
    ] {
        if let Some(prefix) = t.strip_suffix(base) {
            return match prefix {
                "" => Some(1.0),
                "m" => Some(1e-3),
                "k" | "K" => Some(1e3),
                "M" => Some(1e6),
                "G" => Some(1e9),
                "\u{b5}" | "\u{3bc}" | "u" => Some(1e-6),
                _ => None,
            };
        }
    }
    None
}

/// Whether a word is a unit the reader knows (for recognising a line of units under the header).
pub(crate) fn is_unit_word(w: &str) -> bool {
    parse_unit(w).is_some()
}

/// Whether a header cell names a column the reader knows (`Freq (kHz)`, `-Z''`, `cycle`).
pub(crate) fn is_role_word(w: &str) -> bool {
    analyse(w).recognised.is_some()
}

/// A header word recognised as a role.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Recognised {
    role: Role,
    /// The column holds the negative of the quantity (`-Z''`, `-phase`).
    negated: bool,
    /// An angular frequency (ω, omega) whose default unit is rad/s.
    angular: bool,
}

fn normalize(name: &str) -> String {
    let mut s = String::with_capacity(name.len());
    for c in name.chars() {
        match c {
            ' ' | '_' | '.' | '#' | ':' | '\t' => {}
            '\u{2032}' | '\u{2019}' | '\u{2018}' | '`' | '\u{b4}' => s.push('\''),
            '\u{2033}' | '\u{201c}' | '\u{201d}' | '"' => s.push_str("''"),
            '\u{2212}' | '\u{2013}' | '\u{2014}' => s.push('-'),
            c => s.extend(c.to_lowercase()),
        }
    }
    s
}

fn recognise(name: &str, unit: Option<Unit>) -> Option<Recognised> {
    let n = normalize(name);
    let (negated, base) = match n.strip_prefix('-') {
        Some(b) => (true, b),
        None => (false, n.as_str()),
    };
    let mut angular = false;
    let role = match base {
        "frequency" | "freq" | "f" | "frq" | "frequencies" => Role::Frequency,
        "omega" | "\u{3c9}" | "angularfrequency" => {
            angular = true;
            Role::Frequency
        }
        "real" | "re" | "zre" | "zreal" | "z'" | "re(z)" | "rez" | "realz" | "realpart" | "zr" => {
            Role::Real
        }
        "imaginary" | "imag" | "im" | "zim" | "zimag" | "z''" | "im(z)" | "imz" | "imagz"
        | "imaginarypart" | "zi" => Role::Imaginary,
        "modulus" | "mod" | "|z|" | "magnitude" | "mag" | "zmod" | "zmag" | "abs(z)" | "z"
        | "impedance" | "zabs" => Role::Modulus,
        "phase" | "phi" | "\u{3c6}" | "\u{3d5}" | "\u{3b8}" | "theta" | "phaseangle"
        | "phase(z)" | "zphase" | "arg(z)" | "angle" | "zphi" => Role::Phase,
        "t" if unit == Some(Unit::Temperature) => Role::Temperature,
        "time" | "t" | "elapsedtime" => Role::Time,
        "cycle" | "cyclenumber" | "cycleno" | "cyc" | "cycleindex" => Role::Cycle,
        "step" | "stepnumber" | "stepno" | "stepindex" => Role::Step,
        "sweep" | "sweepnumber" | "sweepno" | "sweepindex" | "scan" | "scannumber" | "spectrum"
        | "spectrumnumber" => Role::Sweep,
        "potential" | "voltage" | "e" | "u" | "v" | "ecell" | "ucell" | "vcell" => Role::Potential,
        "current" | "i" | "icell" => Role::Current,
        "temperature" | "temp" => Role::Temperature,
        _ => return None,
    };
    if negated && !matches!(role, Role::Imaginary | Role::Phase) {
        return None;
    }
    Some(Recognised {
        role,
        negated,
        angular,
    })
}

/// A header cell taken apart: the name, the unit text if any, and the recognised role.
#[derive(Debug, Clone)]
struct Cell {
    raw: String,
    name: String,
    unit_text: Option<String>,
    unit: Option<Unit>,
    recognised: Option<Recognised>,
}

fn analyse(raw: &str) -> Cell {
    let raw = raw.trim();
    let whole = |unit_text: Option<String>, name: &str, unit: Option<Unit>| Cell {
        raw: raw.to_owned(),
        name: name.trim().to_owned(),
        unit_text,
        unit,
        recognised: recognise(name, unit),
    };
    // The whole word as a role name: `Re(Z)`, `|Z|`.
    if recognise(raw, None).is_some() {
        return whole(None, raw, None);
    }
    // A bracketed unit at the end.
    if let Some(close) = raw.strip_suffix([')', ']']) {
        let open = close.rfind(['(', '[']);
        if let Some(i) = open {
            let name = &raw[..i];
            let unit_text = &close[i + 1..];
            let unit = parse_unit(unit_text);
            if unit.is_some() || recognise(name, None).is_some() {
                return whole(Some(unit_text.trim().to_owned()), name, unit);
            }
        }
    }
    // A unit after a slash or an underscore (`f/Hz`, `omega/rad/s`, `frequency_hz`): the first whose
    // remainder is a unit. When the name before it is no role (`Frequency rad` of `Frequency rad/s`),
    // a unit after the last blank is tried before settling for it.
    let mut slashed = None;
    for (i, _) in raw.match_indices(['/', '_']) {
        let unit = parse_unit(&raw[i + 1..]);
        if unit.is_some() {
            let cell = whole(Some(raw[i + 1..].trim().to_owned()), &raw[..i], unit);
            if cell.recognised.is_some() {
                return cell;
            }
            slashed = Some(cell);
            break;
        }
    }
    // A unit after the last blank (`Z' Ohm`, `Frequency rad/s`).
    if let Some(i) = raw.rfind(' ') {
        let unit = parse_unit(&raw[i + 1..]);
        if unit.is_some() && recognise(&raw[..i], unit).is_some() {
            return whole(Some(raw[i + 1..].to_owned()), &raw[..i], unit);
        }
    }
    slashed.unwrap_or_else(|| whole(None, raw, None))
}

/// A column in use and the factor from its unit to SI.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Col {
    pub index: usize,
    pub scale: f64,
}

/// Whether a column holds the negative of its quantity, or whether that must be guessed from the data.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Sign {
    Known { negated: bool },
    Guess,
}

/// How the impedance is stored.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum ZCols {
    Cartesian {
        re: Col,
        im: Col,
        sign: Sign,
    },
    Polar {
        modulus: Col,
        phase: usize,
        /// Factor to radians, `None` to guess from the values.
        phase_scale: Option<f64>,
        sign: Sign,
    },
}

/// The columns in use.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct ColumnMap {
    pub freq: Col,
    pub z: ZCols,
    /// Per-spectrum columns.
    pub meta: Vec<(Role, usize)>,
    /// Fields a data line must have.
    pub needed: usize,
}

/// Decides the columns from the header (if any), the overrides and the number of fields.
pub(crate) fn map_columns(
    header: Option<&[String]>,
    fields: usize,
    options: &ReaderOptions,
    file: &str,
    header_line: Option<usize>,
) -> Result<(ColumnMap, Vec<WarningKind>), DataError> {
    let h = Header {
        cells: header
            .map(|h| h.iter().map(|w| analyse(w)).collect())
            .unwrap_or_default(),
        options,
        file,
        header_line,
    };
    let mut warnings = Vec::new();
    let chosen = h.choose(header.is_none(), fields, &mut warnings)?;
    let find = |role: Role| chosen.iter().find(|(r, _)| *r == role).map(|(_, i)| *i);
    let fi = find(Role::Frequency).ok_or_else(|| h.missing(Role::Frequency))?;
    let freq = Col {
        index: fi,
        scale: h.scale(Role::Frequency, fi)?,
    };
    let z = match find(Role::Real).zip(find(Role::Imaginary)) {
        Some((ri, ii)) if !h.polar_asked() || h.overridden(Role::Real) => ZCols::Cartesian {
            re: Col {
                index: ri,
                scale: h.scale(Role::Real, ri)?,
            },
            im: Col {
                index: ii,
                scale: h.scale(Role::Imaginary, ii)?,
            },
            sign: h.sign_of(ii),
        },
        _ => {
            let (Some(mi), Some(pi)) = (find(Role::Modulus), find(Role::Phase)) else {
                let role = if find(Role::Real).is_none() {
                    Role::Real
                } else {
                    Role::Imaginary
                };
                return Err(h.missing(role));
            };
            // The phase column's unit is judged before the modulus column's (the first error wins).
            let phase_scale = h.phase_scale(pi)?;
            ZCols::Polar {
                modulus: Col {
                    index: mi,
                    scale: h.scale(Role::Modulus, mi)?,
                },
                phase: pi,
                phase_scale,
                sign: h.sign_of(pi),
            }
        }
    };
    let mut meta: Vec<(Role, usize)> = chosen
        .iter()
        .filter(|(r, _)| r.is_meta())
        .copied()
        .collect();
    meta.sort_by_key(|(_, i)| *i);
    let in_use = match z {
        ZCols::Cartesian { re, im, .. } => [re.index, im.index],
        ZCols::Polar { modulus, phase, .. } => [modulus.index, phase],
    };
    let needed = in_use
        .into_iter()
        .chain(meta.iter().map(|(_, i)| *i))
        .fold(freq.index + 1, |n, i| n.max(i + 1));
    if needed > fields {
        return Err(DataError::new(
            h.at(None),
            DataErrorKind::ColumnOutOfRange {
                column: needed,
                fields,
            },
        ));
    }
    Ok((
        ColumnMap {
            freq,
            z,
            meta,
            needed,
        },
        warnings,
    ))
}

/// A file's header cells with the reader's options, for deciding its columns.
struct Header<'a> {
    cells: Vec<Cell>,
    options: &'a ReaderOptions,
    file: &'a str,
    header_line: Option<usize>,
}

impl Header<'_> {
    /// Where an error about the header (and column `column`, from 1) points.
    fn at(&self, column: Option<usize>) -> Location {
        match self.header_line {
            Some(l) => Location::at(self.file, l, column),
            None => Location::file(self.file),
        }
    }

    /// Whether the options name the column of `role`.
    fn overridden(&self, role: Role) -> bool {
        self.options.columns.iter().any(|(r, _)| *r == role)
    }

    /// Whether the options ask for modulus and phase.
    fn polar_asked(&self) -> bool {
        self.overridden(Role::Modulus) || self.overridden(Role::Phase)
    }

    /// The column of each role: an override, else the first header word recognised as it; without a
    /// header, columns 1, 2, 3 are frequency, real and imaginary part unless overridden (a
    /// [`WarningKind::NoHeader`] when nothing is overridden).
    fn choose(
        &self,
        no_header: bool,
        fields: usize,
        warnings: &mut Vec<WarningKind>,
    ) -> Result<Vec<(Role, usize)>, DataError> {
        let mut chosen: Vec<(Role, usize)> = Vec::new();
        for (role, r) in &self.options.columns {
            let index = match r {
                ColumnRef::Number(n) => {
                    if *n == 0 || *n > fields {
                        return Err(DataError::new(
                            self.at(None),
                            DataErrorKind::ColumnOutOfRange { column: *n, fields },
                        ));
                    }
                    n - 1
                }
                ColumnRef::Name(name) => {
                    let want = name.trim().to_lowercase();
                    self.cells
                        .iter()
                        .position(|c| c.raw.to_lowercase() == want || c.name.to_lowercase() == want)
                        .ok_or_else(|| {
                            DataError::new(
                                self.at(None),
                                DataErrorKind::ColumnNotFound(name.clone()),
                            )
                        })?
                }
            };
            chosen.push((*role, index));
        }
        for (i, c) in self.cells.iter().enumerate() {
            if let Some(rec) = c.recognised {
                if !self.overridden(rec.role) && !chosen.iter().any(|(r, _)| *r == rec.role) {
                    chosen.push((rec.role, i));
                }
            }
        }
        if no_header && !self.polar_asked() {
            let defaults = [(Role::Frequency, 0), (Role::Real, 1), (Role::Imaginary, 2)];
            if self.options.columns.is_empty() {
                warnings.push(WarningKind::NoHeader);
            }
            for (role, i) in defaults {
                if !chosen.iter().any(|(r, _)| *r == role) {
                    chosen.push((role, i));
                }
            }
        } else if no_header && !chosen.iter().any(|(r, _)| *r == Role::Frequency) {
            chosen.push((Role::Frequency, 0));
        }
        Ok(chosen)
    }

    /// The error for a role no column holds, listing the header.
    fn missing(&self, role: Role) -> DataError {
        let header = self
            .cells
            .iter()
            .map(|c| format!("`{}`", c.raw))
            .collect::<Vec<_>>()
            .join(", ");
        DataError::new(
            self.at(None),
            DataErrorKind::MissingColumn {
                role: role.describe(),
                header,
            },
        )
    }

    /// The unit text of column `i` and the unit it names, when its header gives one.
    fn unit_of(&self, i: usize) -> Option<(String, Option<Unit>)> {
        self.cells
            .get(i)
            .and_then(|c| c.unit_text.clone().map(|t| (t, c.unit)))
    }

    /// The factor to SI of column `i` holding `role` (from rad/s for an angular frequency).
    fn scale(&self, role: Role, i: usize) -> Result<f64, DataError> {
        let angular = self
            .cells
            .get(i)
            .and_then(|c| c.recognised)
            .is_some_and(|r| r.angular);
        match (role, self.unit_of(i)) {
            (Role::Frequency, None) if angular => Ok(1.0 / (2.0 * PI)),
            (_, None) => Ok(1.0),
            (Role::Frequency, Some((_, Some(Unit::Frequency(s))))) => Ok(s),
            (Role::Real | Role::Imaginary | Role::Modulus, Some((_, Some(Unit::Impedance(s))))) => {
                Ok(s)
            }
            (_, Some((unit, _))) => Err(self.unknown_unit(i, unit, role)),
        }
    }

    /// The error for a unit of column `i` that does not fit `role`.
    fn unknown_unit(&self, i: usize, unit: String, role: Role) -> DataError {
        DataError::new(
            self.at(Some(i + 1)),
            DataErrorKind::UnknownUnit {
                unit,
                role: role.describe(),
            },
        )
    }

    /// The factor to radians of the phase column `i`: from the options, else its unit; `None` to
    /// guess from the values.
    fn phase_scale(&self, i: usize) -> Result<Option<f64>, DataError> {
        Ok(match self.options.phase_unit {
            PhaseUnit::Degrees => Some(PI / 180.0),
            PhaseUnit::Radians => Some(1.0),
            PhaseUnit::Auto => match self.unit_of(i) {
                Some((_, Some(Unit::Angle(s)))) => Some(s),
                Some((unit, _)) => return Err(self.unknown_unit(i, unit, Role::Phase)),
                None => None,
            },
        })
    }

    /// The sign convention of the imaginary (or phase) column `i`.
    fn sign_of(&self, i: usize) -> Sign {
        match self.options.imag_sign {
            ImagSign::AsIs => Sign::Known { negated: false },
            ImagSign::Negated => Sign::Known { negated: true },
            ImagSign::Auto => match self.cells.get(i) {
                Some(c) => Sign::Known {
                    negated: c.recognised.is_some_and(|r| r.negated)
                        || normalize(&c.name).starts_with('-'),
                },
                None => Sign::Guess,
            },
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// (header word, role, negated, unit scale)
    #[test]
    fn recognises_header_words() {
        let cases: &[(&str, Role, bool, Option<Unit>)] = &[
            (
                "Frequency (Hz)",
                Role::Frequency,
                false,
                Some(Unit::Frequency(1.0)),
            ),
            (
                "freq/kHz",
                Role::Frequency,
                false,
                Some(Unit::Frequency(1e3)),
            ),
            (
                "f [MHz]",
                Role::Frequency,
                false,
                Some(Unit::Frequency(1e6)),
            ),
            (
                "omega (rad/s)",
                Role::Frequency,
                false,
                Some(Unit::Frequency(1.0 / (2.0 * PI))),
            ),
            (
                "Z' (\u{3a9})",
                Role::Real,
                false,
                Some(Unit::Impedance(1.0)),
            ),
            (
                "Z\u{2032} / m\u{3a9}",
                Role::Real,
                false,
                Some(Unit::Impedance(1e-3)),
            ),
            ("Zre [kOhm]", Role::Real, false, Some(Unit::Impedance(1e3))),
            ("Re(Z)", Role::Real, false, None),
            (
                "Re(Z) (MOhm)",
                Role::Real,
                false,
                Some(Unit::Impedance(1e6)),
            ),
            (
                "Z'' (ohm)",
                Role::Imaginary,
                false,
                None.or(Some(Unit::Impedance(1.0))),
            ),
            (
                "-Z\u{2033} (\u{3a9})",
                Role::Imaginary,
                true,
                Some(Unit::Impedance(1.0)),
            ),
            ("\u{2212}Im", Role::Imaginary, true, None),
            (
                "-Zim/Ohm",
                Role::Imaginary,
                true,
                Some(Unit::Impedance(1.0)),
            ),
            ("Z\"", Role::Imaginary, false, None),
            (
                "|Z| (Ohm)",
                Role::Modulus,
                false,
                Some(Unit::Impedance(1.0)),
            ),
            ("Magnitude", Role::Modulus, false, None),
            (
                "Phase (\u{b0})",
                Role::Phase,
                false,
                Some(Unit::Angle(PI / 180.0)),
            ),
            (
                "-Phase (deg)",
                Role::Phase,
                true,
                Some(Unit::Angle(PI / 180.0)),
            ),
            ("phase / rad", Role::Phase, false, Some(Unit::Angle(1.0))),
            ("Time (s)", Role::Time, false, Some(Unit::Other)),
            ("Cycle number", Role::Cycle, false, None),
            ("Step", Role::Step, false, None),
            ("Sweep #", Role::Sweep, false, None),
            ("Potential (V)", Role::Potential, false, Some(Unit::Other)),
            ("I (mA)", Role::Current, false, Some(Unit::Other)),
            (
                "T (\u{b0}C)",
                Role::Temperature,
                false,
                Some(Unit::Temperature),
            ),
            (
                "Temperature/K",
                Role::Temperature,
                false,
                Some(Unit::Temperature),
            ),
            (
                "Z' (Ohm cm\u{b2})",
                Role::Real,
                false,
                Some(Unit::Impedance(1.0)),
            ),
            (
                "frequency_hz",
                Role::Frequency,
                false,
                Some(Unit::Frequency(1.0)),
            ),
            (
                "z_imag_ohm",
                Role::Imaginary,
                false,
                Some(Unit::Impedance(1.0)),
            ),
        ];
        for &(word, role, negated, unit) in cases {
            let c = analyse(word);
            let r = c
                .recognised
                .unwrap_or_else(|| panic!("{word:?} not recognised: {c:?}"));
            assert_eq!(
                (r.role, r.negated, c.unit),
                (role, negated, unit),
                "{word:?}"
            );
        }
        for word in ["Voltage drop", "-Z'", "Z' (Hz^2)", "comment"] {
            let c = analyse(word);
            assert!(
                c.recognised.is_none() || c.unit.is_none(),
                "{word:?} gave {c:?}"
            );
        }
    }

    #[test]
    fn override_syntax_errors() {
        for (text, msg) in [
            ("freq", "`freq` is not KEY=COLUMN"),
            ("x=1", "unknown column key `x`"),
            ("re=0", "columns are numbered from 1"),
            ("re=1,re=2", "column key `re` given twice"),
            ("re=", "no column given"),
        ] {
            let e = parse_column_overrides(text).unwrap_err();
            assert!(e.contains(msg), "{text}: {e}");
        }
    }
}
