//! Target `reader`: the export reader with a round-trip oracle.
//!
//! A generated input is a known spectrum (or several) written in a random, well-formed export shape:
//! comma, semicolon, tab or blank delimiters, decimal commas, a byte-order mark, Latin-1 bytes, CRLF,
//! preambles, header words in many spellings with units in brackets, after a slash or on a line of
//! their own (Hz, kHz, mHz, MHz, rad/s; Ω, mΩ, kΩ), −Z″ or Z″, |Z| with phase in degrees or radians,
//! metadata columns (time, potential, current, temperature, cycle), several spectra split by a cycle
//! column, a restarted sweep, a repeated header or a line of text, rising or falling sweeps, quoted
//! fields, full or limited precision. Reading it back must give every spectrum with the same
//! frequencies and impedances (relative 1e-12 for full precision, else 20 units of the last printed
//! digit, on the frequency and on |ΔZ|/|Z|) and the cycle numbers.
//!
//! Every input, generated or mutated, must read without a panic, and every spectrum read must keep
//! the reader's promises: as many impedances as frequencies, at least `min_points` points, finite
//! positive frequencies, finite impedances, sorted from high to low when sorting is on, inside
//! `fmin..fmax`. Besides the default options, each input is read with one more set of options chosen
//! by its length (no splitting, no sorting, column overrides, forced signs and phase units, cropping,
//! dropped inductive points, `min_points` 0 or 1).

use crate::engine::{KnownIssue, Rng, Target, Violation};
use eis_core::circuit::parse;
use eis_core::eval::{Plan, log_frequencies};
use eis_core::import::{
    ColumnRef, ImagSign, PhaseUnit, ReaderOptions, Role, SpectrumReader, Split,
};
use eis_core::simulate::simulate;
use eis_core::spectrum::{MetaValue, Spectrum};

use rand::RngExt;
use std::f64::consts::PI;

/// The export-reader target.
#[derive(Debug, Default, Clone, Copy)]
pub struct ReaderTarget;

/// What a generated export holds.
#[derive(Debug, Clone)]
pub struct Truth {
    /// The spectra, high to low frequency.
    pub spectra: Vec<Spectrum>,
    /// Largest |ΔZ|/|Z| and relative frequency error accepted.
    pub tolerance: f64,
    /// Whether a cycle column numbers the spectra from 1.
    pub cycles: bool,
}

const DICTIONARY: &[&[u8]] = &[
    b",",
    b";",
    b"\t",
    b"  ",
    b"\r\n",
    b"\n",
    b"\n\n",
    b"\"",
    b"\xef\xbb\xbf",
    b"#",
    b"%",
    b"//",
    b"Freq (kHz)",
    b"Frequency/Hz",
    b"omega",
    b"rad/s",
    b"Z' (Ohm)",
    b"-Z'' (Ohm)",
    b"Z''",
    b"Im(Z)",
    b"|Z|",
    b"Phase",
    b"Phase (deg)",
    b"(rad)",
    b"(\xb0)",
    b"\xc2\xb0",
    b"mOhm",
    b"k\xce\xa9",
    b"\xb5",
    b"Cycle",
    b"cycle",
    b"step",
    b"sweep",
    b"Time/s",
    b"E (V)",
    b"I (mA)",
    b"T (\xb0C)",
    b"Temperature",
    b"e-",
    b"E+",
    b",5",
    b".5",
    b"1,5e-3",
    b"--- next sweep ---",
];

const SEEDS: &[&str] = &[
    "frequency_hz,z_real_ohm,z_imag_ohm\n100000,1.5,-0.1\n1000,2,-1\n10,5,-3\n0.1,7,-1\n",
    "# exported data\nFreq (kHz);Z' (mOhm);-Z'' (mOhm)\n1;20,5;3\n0,1;25;7,5\n0,01;30;2\n",
    "Cycle\tFreq/Hz\t|Z|/Ohm\tPhase/deg\n1\t1000\t2.5\t-10\n1\t100\t3\t-30\n1\t10\t4\t-20\n2\t1000\t2.6\t-11\n2\t100\t3.1\t-31\n2\t10\t4.2\t-21\n",
    "1e5  0.05  0.01\n1e4  0.06  -0.02\n1e3  0.08  -0.05\n1e2  0.1  -0.03\n",
];

/// Known failures waiting for a fix (none: every finding so far is fixed and replayed from
/// `fuzz/regressions/reader/`).
const KNOWN: &[KnownIssue] = &[];

impl Target for ReaderTarget {
    type Truth = Truth;

    fn name(&self) -> &'static str {
        "reader"
    }

    fn generate(&self, rng: &mut Rng) -> (Vec<u8>, Option<Truth>) {
        let (bytes, truth) = random_export(rng);
        (bytes, Some(truth))
    }

    fn seeds(&self) -> Vec<Vec<u8>> {
        SEEDS.iter().map(|s| s.as_bytes().to_vec()).collect()
    }

    fn dictionary(&self) -> &'static [&'static [u8]] {
        DICTIONARY
    }

    fn max_len(&self) -> usize {
        1 << 15
    }

    fn execute(&self, input: &[u8], truth: Option<&Truth>) -> Result<(), Violation> {
        let default = ReaderOptions::default();
        let read = read_checked(input, &default)?;
        if let Some(t) = truth {
            compare(&read, t)?;
        } else {
            read_checked(input, &variant(input.len()))?;
        }
        Ok(())
    }

    fn known_issues(&self) -> &'static [KnownIssue] {
        KNOWN
    }

    /// `tolerance T cycles B`, then each spectrum in canonical CSV, a blank line after each.
    fn describe_truth(&self, t: &Truth) -> String {
        let mut s = format!("tolerance {:e} cycles {}\n", t.tolerance, t.cycles);
        for sp in &t.spectra {
            s.push_str(&sp.to_canonical_csv());
            s.push('\n');
        }
        s
    }

    fn truth_from_text(&self, text: &str) -> Option<Truth> {
        let mut blocks = text.split("\n\n");
        let head: Vec<&str> = blocks.next()?.lines().collect();
        let first: Vec<&str> = head.first()?.split_whitespace().collect();
        let (tolerance, cycles) = match first[..] {
            ["tolerance", t, "cycles", c] => (t.parse().ok()?, c.parse().ok()?),
            _ => return None,
        };
        let mut spectra = Vec::new();
        let mut add = |lines: &[&str]| -> Option<()> {
            let mut f = Vec::new();
            let mut z = Vec::new();
            for l in lines.iter().skip(1).filter(|l| !l.trim().is_empty()) {
                let v: Vec<f64> = l
                    .split(',')
                    .map(|x| x.trim().parse().ok())
                    .collect::<Option<_>>()?;
                let [a, b, c] = v[..] else { return None };
                f.push(a);
                z.push(num_complex::Complex64::new(b, c));
            }
            spectra.push(Spectrum::new(f, z));
            Some(())
        };
        add(&head[1..])?;
        for b in blocks.filter(|b| !b.trim().is_empty()) {
            let lines: Vec<&str> = b.lines().collect();
            add(&lines)?;
        }
        Some(Truth {
            spectra,
            tolerance,
            cycles,
        })
    }
}

/// One more set of options for an input, chosen by its length.
fn variant(len: usize) -> ReaderOptions {
    let mut o = ReaderOptions::default();
    match len % 4 {
        0 => {
            o.split = Split::None;
            o.sort = false;
            o.min_points = 1;
        }
        1 => {
            o.split = Split::Column;
            o.drop_inductive = true;
            o.fmin = Some(1e-2);
            o.fmax = Some(1e4);
        }
        2 => {
            o.split = Split::Restart;
            o.imag_sign = ImagSign::Negated;
            o.phase_unit = PhaseUnit::Radians;
            o.min_points = 0;
        }
        _ => {
            o.imag_sign = ImagSign::AsIs;
            o.phase_unit = PhaseUnit::Degrees;
            o.columns = vec![
                (Role::Frequency, ColumnRef::Number(1)),
                (Role::Real, ColumnRef::Number(2)),
                (Role::Imaginary, ColumnRef::Number(3)),
            ];
        }
    }
    o
}

/// Reads `input` and checks what every spectrum read must satisfy. Returns the outcome per spectrum.
fn read_checked(
    input: &[u8],
    options: &ReaderOptions,
) -> Result<Vec<Result<Spectrum, String>>, Violation> {
    let mut out = Vec::new();
    for item in SpectrumReader::new("fuzz.csv", input, options.clone()) {
        match item {
            Ok(imp) => {
                for w in &imp.warnings {
                    let _ = w.to_string();
                }
                promises(&imp.spectrum, options)?;
                out.push(Ok(imp.spectrum));
            }
            Err(e) => {
                let text = e.to_string();
                if text.is_empty() {
                    return Err(Violation::new("error with empty message", format!("{e:?}")));
                }
                out.push(Err(text));
            }
        }
    }
    Ok(out)
}

/// The promises of the reader's hygiene table for one spectrum read.
fn promises(s: &Spectrum, o: &ReaderOptions) -> Result<(), Violation> {
    let detail = || {
        let n = s.len().min(8);
        format!(
            "first points: f {:?}, z {:?}",
            &s.frequency_hz[..n],
            &s.z[..n.min(s.z.len())]
        )
    };
    if s.frequency_hz.len() != s.z.len() {
        return Err(Violation::new(
            "spectrum with different numbers of frequencies and impedances",
            format!(
                "{} frequencies, {} impedances",
                s.frequency_hz.len(),
                s.z.len()
            ),
        ));
    }
    if s.len() < o.min_points {
        return Err(Violation::new(
            "spectrum with fewer points than min_points",
            format!("{} points, min_points {}", s.len(), o.min_points),
        ));
    }
    if let Some(i) = s
        .frequency_hz
        .iter()
        .position(|f| !(f.is_finite() && *f > 0.0))
    {
        return Err(Violation::new(
            "spectrum with a non-finite or non-positive frequency",
            format!("point {i}: {}\n{}", s.frequency_hz[i], detail()),
        ));
    }
    if let Some(i) =
        s.z.iter()
            .position(|z| !(z.re.is_finite() && z.im.is_finite()))
    {
        return Err(Violation::new(
            "spectrum with a non-finite impedance",
            format!("point {i}: {}\n{}", s.z[i], detail()),
        ));
    }
    if o.sort && s.frequency_hz.windows(2).any(|w| w[0] < w[1]) {
        return Err(Violation::new(
            "sorted spectrum not from high to low frequency",
            detail(),
        ));
    }
    let inside = |f: &f64| o.fmin.is_none_or(|lo| *f >= lo) && o.fmax.is_none_or(|hi| *f <= hi);
    if !s.frequency_hz.iter().all(inside) {
        return Err(Violation::new(
            "spectrum with a frequency outside fmin..fmax",
            detail(),
        ));
    }
    Ok(())
}

/// The round-trip oracle: every spectrum back, equal within the tolerance.
fn compare(read: &[Result<Spectrum, String>], t: &Truth) -> Result<(), Violation> {
    if let Some(e) = read.iter().find_map(|r| r.as_ref().err()) {
        return Err(Violation::new(
            "round trip: a well-formed export gives an error",
            e.clone(),
        ));
    }
    if read.len() != t.spectra.len() {
        return Err(Violation::new(
            "round trip: wrong number of spectra",
            format!("read {}, wrote {}", read.len(), t.spectra.len()),
        ));
    }
    for (k, (r, want)) in read.iter().zip(&t.spectra).enumerate() {
        let Ok(got) = r else { continue };
        if got.len() != want.len() {
            return Err(Violation::new(
                "round trip: wrong number of points",
                format!(
                    "spectrum {}: read {}, wrote {}",
                    k + 1,
                    got.len(),
                    want.len()
                ),
            ));
        }
        for i in 0..got.len() {
            let (f, g) = (got.frequency_hz[i], want.frequency_hz[i]);
            let dz = (got.z[i] - want.z[i]).norm() / want.z[i].norm();
            if (f - g).abs() > t.tolerance * g || dz.is_nan() || dz > t.tolerance {
                return Err(Violation::new(
                    "round trip: values differ",
                    format!(
                        "spectrum {}, point {}: read f {f:e} z {}, wrote f {g:e} z {} (tolerance {:e})",
                        k + 1,
                        i + 1,
                        got.z[i],
                        want.z[i],
                        t.tolerance
                    ),
                ));
            }
        }
        if t.cycles {
            let cycle = got.meta.get("cycle");
            if cycle != Some(&MetaValue::Number((k + 1) as f64)) {
                return Err(Violation::new(
                    "round trip: wrong cycle number",
                    format!("spectrum {}: cycle {cycle:?}", k + 1),
                ));
            }
        }
    }
    Ok(())
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Delim {
    Comma,
    Semicolon,
    Tab,
    Blanks,
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Form {
    ReIm { negated: bool },
    Polar { degrees: bool, negated: bool },
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Meta {
    Time,
    Potential,
    Current,
    Temperature,
    Cycle,
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Separation {
    /// The cycle column (or the restarted sweep alone).
    Column,
    /// The header again before each spectrum.
    Header,
    /// A line of words between spectra.
    Text,
}

/// One column of the export: its header name and unit, and what it holds.
struct Column {
    name: String,
    unit: Option<String>,
    what: What,
}

#[derive(Clone, Copy, PartialEq)]
enum What {
    Freq(f64),
    A(f64),
    B(f64),
    Meta(Meta),
}

fn pick<'a, T>(rng: &mut Rng, items: &'a [T]) -> &'a T {
    &items[rng.random_range(0..items.len())]
}

/// Known spectra from small battery circuits with random values, all on one frequency grid.
fn spectra(rng: &mut Rng, count: usize) -> Vec<Spectrum> {
    // 5 to about 40 points: real sweeps have more, but the reader's cost grows with the rows and
    // short files give ten times the executions.
    let fmax = 10f64.powf(rng.random_range(2.0..5.5));
    let fmin = 10f64.powf(rng.random_range(-2.5..0.5));
    let grid = log_frequencies(fmax, fmin, rng.random_range(2..6));
    let model = rng.random_range(0..3);
    let text = [
        "R0 + Rct|Qdl",
        "L0 + R0 + (Rct + Wtd)|Qdl",
        "R0 + Rfilm|Qfilm + Rct|Qdl",
    ][model];
    let Ok(circuit) = parse(text) else {
        return Vec::new();
    };
    let plan = Plan::compile(&circuit);
    let scale = 10f64.powf(rng.random_range(-3.0..4.0));
    let mut lu = |lo: f64, hi: f64| 10f64.powf(rng.random_range(lo..hi));
    (0..count)
        .map(|_| {
            let p: Vec<f64> = match model {
                0 => vec![
                    scale * lu(-1.0, 1.0),
                    scale * lu(-1.0, 2.0),
                    lu(-6.0, -2.0) / scale,
                    lu(-0.3, 0.0).min(1.0),
                ],
                1 => vec![
                    lu(-9.0, -6.0),
                    scale * lu(-1.0, 1.0),
                    scale * lu(-1.0, 1.0),
                    scale * lu(-1.0, 1.0),
                    lu(-1.0, 2.0),
                    lu(-4.0, 0.0) / scale,
                    lu(-0.3, 0.0).min(1.0),
                ],
                _ => vec![
                    scale * lu(-1.0, 1.0),
                    scale * lu(-1.0, 1.0),
                    lu(-7.0, -4.0) / scale,
                    lu(-0.2, 0.0).min(1.0),
                    scale * lu(-1.0, 2.0),
                    lu(-4.0, -1.0) / scale,
                    lu(-0.2, 0.0).min(1.0),
                ],
            };
            simulate(&plan, &p, &grid, None)
        })
        .collect()
}

/// A random well-formed export of random known spectra.
pub fn random_export(rng: &mut Rng) -> (Vec<u8>, Truth) {
    let count = if rng.random_ratio(2, 3) {
        1
    } else {
        rng.random_range(2..4)
    };
    let truth_spectra = spectra(rng, count);
    let delim = *pick(
        rng,
        &[Delim::Comma, Delim::Semicolon, Delim::Tab, Delim::Blanks],
    );
    let decimal_comma = matches!(delim, Delim::Semicolon | Delim::Tab) && rng.random_ratio(1, 3);
    let latin1 = rng.random_ratio(1, 5);
    let bom = !latin1 && rng.random_ratio(1, 5);
    let crlf = rng.random_ratio(1, 3);
    let blanks = delim == Delim::Blanks;
    let quoted = !blanks && rng.random_ratio(1, 8);
    let trailing = !blanks && rng.random_ratio(1, 8);
    let precision: Option<usize> = if rng.random_ratio(1, 2) {
        None
    } else {
        Some(rng.random_range(4..12))
    };
    let tolerance = match precision {
        None => 1e-12,
        // d significant digits: each number is within 5·10^-d of itself; a phase of up to π/2 adds
        // 8·10^-d to |ΔZ|/|Z|.
        Some(d) => 20.0 * 10f64.powi(-(d as i32)),
    };
    let ascending = rng.random_ratio(1, 4);
    // A header is needed unless the columns are frequency, Z′, Z″ and the sign can be guessed: fewer
    // than half of the points of every spectrum have a positive Z″ (see `ImagSign::Auto`).
    let guessable = truth_spectra.iter().all(|s| {
        let positive = s.z.iter().filter(|z| z.im > 0.0).count();
        2 * positive < s.len()
    });
    let header = !guessable || rng.random_ratio(4, 5);
    let unit_line = header && rng.random_ratio(1, 5);
    // Without a header the columns are frequency, Z′, Z″.
    let form = if !header || rng.random_ratio(2, 3) {
        Form::ReIm {
            negated: rng.random_ratio(1, 2),
        }
    } else {
        Form::Polar {
            degrees: rng.random_ratio(2, 3),
            negated: rng.random_ratio(1, 4),
        }
    };

    // Columns.
    let (fname, funit, ffactor): (&str, Option<&str>, f64) = {
        let angular = rng.random_ratio(1, 8);
        if angular {
            if rng.random_ratio(1, 2) && !unit_line {
                ("omega", None, 1.0 / (2.0 * PI))
            } else {
                (
                    *pick(rng, &["omega", "Freq", "Frequency"]),
                    Some("rad/s"),
                    1.0 / (2.0 * PI),
                )
            }
        } else {
            let (u, k) = *pick(
                rng,
                &[
                    (Some("Hz"), 1.0),
                    (Some("kHz"), 1e3),
                    (Some("mHz"), 1e-3),
                    (Some("MHz"), 1e6),
                    (Some("Hz"), 1.0),
                    (None, 1.0),
                ],
            );
            let u = if unit_line && u.is_none() {
                Some("Hz")
            } else {
                u
            };
            (
                *pick(rng, &["Freq", "Frequency", "f", "freq", "Frequency"]),
                u,
                k,
            )
        }
    };
    let ohm_units: &[(Option<&str>, f64)] = if latin1 {
        &[
            (Some("Ohm"), 1.0),
            (Some("mOhm"), 1e-3),
            (Some("kOhm"), 1e3),
            (Some("ohm"), 1.0),
            (None, 1.0),
        ]
    } else {
        &[
            (Some("Ohm"), 1.0),
            (Some("\u{3a9}"), 1.0),
            (Some("m\u{3a9}"), 1e-3),
            (Some("mOhm"), 1e-3),
            (Some("k\u{3a9}"), 1e3),
            (Some("kOhm"), 1e3),
            (None, 1.0),
        ]
    };
    let (zunit, zfactor) = *pick(rng, ohm_units);
    let zunit = if unit_line && zunit.is_none() {
        Some("Ohm")
    } else {
        zunit
    };
    // Without a header the reader takes Hz and Ω.
    let (ffactor, zfactor) = if header {
        (ffactor, zfactor)
    } else {
        (1.0, 1.0)
    };
    let primes = !latin1 && !quoted;
    let mut columns = vec![Column {
        name: fname.to_owned(),
        unit: funit.map(str::to_owned),
        what: What::Freq(ffactor),
    }];
    match form {
        Form::ReIm { negated } => {
            let re: &[&str] = if primes {
                &["Z'", "Re(Z)", "Zre", "Zreal", "Real", "Z\u{2032}"]
            } else {
                &["Z'", "Re(Z)", "Zre", "Zreal", "Real"]
            };
            let im: &[&str] = match (negated, primes) {
                (false, true) => &["Z''", "Im(Z)", "Zim", "Imag", "Z\u{2033}", "Z\""],
                (false, false) => &["Z''", "Im(Z)", "Zim", "Imag"],
                (true, true) => &[
                    "-Z''",
                    "-Im(Z)",
                    "\u{2212}Z''",
                    "-Zim",
                    "-Imag",
                    "-Z\u{2033}",
                ],
                (true, false) => &["-Z''", "-Im(Z)", "-Zim", "-Imag"],
            };
            columns.push(Column {
                name: pick(rng, re).to_string(),
                unit: zunit.map(str::to_owned),
                what: What::A(zfactor),
            });
            columns.push(Column {
                name: pick(rng, im).to_string(),
                unit: zunit.map(str::to_owned),
                what: What::B(if negated { -zfactor } else { zfactor }),
            });
        }
        Form::Polar { degrees, negated } => {
            columns.push(Column {
                name: pick(rng, &["|Z|", "Zmod", "Modulus", "Mag"]).to_string(),
                unit: zunit.map(str::to_owned),
                what: What::A(zfactor),
            });
            let names: &[&str] = if negated {
                &["-Phase", "-phi", "-Phase(Z)"]
            } else {
                &["Phase", "Phase(Z)", "phi", "Theta"]
            };
            // Without a unit the reader guesses degrees when some |value| exceeds π/2: leave the
            // unit out only where that guess is right.
            let guess_ok = if degrees {
                truth_spectra.iter().all(|s| {
                    s.z.iter()
                        .any(|z| z.arg().to_degrees().abs() > PI / 2.0 * 1.01)
                })
            } else {
                true
            };
            let unit = if !unit_line && guess_ok && rng.random_ratio(1, 3) {
                None
            } else if degrees {
                Some(pick(rng, &["deg", "\u{b0}", "degrees", "Deg"]).to_string())
            } else {
                Some(pick(rng, &["rad", "radians"]).to_string())
            };
            let factor = if degrees { 180.0 / PI } else { 1.0 };
            columns.push(Column {
                name: pick(rng, names).to_string(),
                unit,
                what: What::B(if negated { -factor } else { factor }),
            });
        }
    }
    let mut cycles = false;
    if header {
        for m in [
            Meta::Time,
            Meta::Potential,
            Meta::Current,
            Meta::Temperature,
            Meta::Cycle,
        ] {
            if !rng.random_ratio(1, 4) {
                continue;
            }
            if m == Meta::Cycle && unit_line {
                continue;
            }
            let (name, unit): (&str, Option<&str>) = match m {
                Meta::Time => (*pick(rng, &["Time", "time"]), Some("s")),
                Meta::Potential => (*pick(rng, &["E", "Voltage", "Ecell"]), Some("V")),
                Meta::Current => (*pick(rng, &["I", "Current"]), Some("mA")),
                Meta::Temperature => {
                    if rng.random_ratio(1, 2) {
                        ("T", Some("\u{b0}C"))
                    } else {
                        ("Temperature", Some("K"))
                    }
                }
                Meta::Cycle => {
                    cycles = true;
                    (*pick(rng, &["Cycle", "cycle", "Cyc"]), None)
                }
            };
            let at = rng.random_range(0..=columns.len());
            columns.insert(
                at,
                Column {
                    name: name.to_owned(),
                    unit: unit.map(str::to_owned),
                    what: What::Meta(m),
                },
            );
        }
    }
    let separation = if count == 1 {
        Separation::Column
    } else {
        *pick(
            rng,
            &[
                Separation::Column,
                Separation::Text,
                if header {
                    Separation::Header
                } else {
                    Separation::Column
                },
            ],
        )
    };

    // Text.
    let sep: String = match delim {
        Delim::Comma => ",".into(),
        Delim::Semicolon => ";".into(),
        Delim::Tab => "\t".into(),
        Delim::Blanks => pick(rng, &[" ", "  ", "   ", "\t", " \t "]).to_string(),
    };
    let nl = if crlf { "\r\n" } else { "\n" };
    let field = |s: String| if quoted { format!("\"{s}\"") } else { s };
    let style = rng.random_range(0..4);
    let mut header_lines: Vec<String> = Vec::new();
    if header {
        if unit_line {
            let names: Vec<String> = columns.iter().map(|c| field(c.name.clone())).collect();
            let units: Vec<String> = columns
                .iter()
                .map(|c| field(c.unit.clone().unwrap_or_default()))
                .collect();
            header_lines.push(names.join(&sep));
            header_lines.push(units.join(&sep));
        } else {
            let words: Vec<String> = columns
                .iter()
                .map(|c| {
                    let w = match &c.unit {
                        None => c.name.clone(),
                        Some(u) => match (style, blanks) {
                            (0, false) => format!("{} ({u})", c.name),
                            (1, false) => format!("{} [{u}]", c.name),
                            (0 | 1, true) => format!("{}({u})", c.name),
                            (2, _) => format!("{}/{u}", c.name),
                            (_, false) => format!("{} {u}", c.name),
                            (_, true) => format!("{}[{u}]", c.name),
                        },
                    };
                    field(w)
                })
                .collect();
            header_lines.push(words.join(&sep));
        }
    }
    let mut text = String::new();
    let preamble: &[&str] = if header {
        &[
            "# exported data",
            "% amplitude 10 mV",
            "Cell test export",
            "Operator: lab 3",
            "// instrument settings",
            "! zinc cell A3",
        ]
    } else {
        &["# raw data", "% no header"]
    };
    for _ in 0..rng.random_range(0..3) {
        let line: &&str = pick(rng, preamble);
        text.push_str(line);
        text.push_str(nl);
    }
    let number = |x: f64| -> String {
        let s = match precision {
            None => format!("{x:e}"),
            Some(d) => format!("{x:.*e}", d - 1),
        };
        let s = if decimal_comma {
            s.replace('.', ",")
        } else {
            s
        };
        field(s)
    };
    for (k, s) in truth_spectra.iter().enumerate() {
        if k == 0 || separation == Separation::Header {
            for h in &header_lines {
                text.push_str(h);
                text.push_str(nl);
            }
        } else if separation == Separation::Text {
            text.push_str("--- next sweep ---");
            text.push_str(nl);
        }
        let order: Vec<usize> = if ascending {
            (0..s.len()).rev().collect()
        } else {
            (0..s.len()).collect()
        };
        for (row, &i) in order.iter().enumerate() {
            let (f, z) = (s.frequency_hz[i], s.z[i]);
            let cells: Vec<String> = columns
                .iter()
                .map(|c| match (c.what, form) {
                    (What::Freq(k), _) => number(f / k),
                    (What::A(k), Form::ReIm { .. }) => number(z.re / k),
                    (What::B(k), Form::ReIm { .. }) => number(z.im / k),
                    (What::A(k), Form::Polar { .. }) => number(z.norm() / k),
                    (What::B(k), Form::Polar { .. }) => number(z.arg() * k),
                    (What::Meta(Meta::Time), _) => number((1000 * k + 10 * row) as f64 + 0.5),
                    (What::Meta(Meta::Potential), _) => number(1.45 - 0.01 * k as f64),
                    (What::Meta(Meta::Current), _) => number(0.001 * row as f64),
                    (What::Meta(Meta::Temperature), _) => number(25.0),
                    (What::Meta(Meta::Cycle), _) => field(format!("{}", k + 1)),
                })
                .collect();
            text.push_str(&cells.join(&sep));
            if trailing {
                text.push_str(&sep);
            }
            text.push_str(nl);
        }
    }
    let mut bytes = Vec::with_capacity(text.len() + 3);
    if bom {
        bytes.extend_from_slice(b"\xEF\xBB\xBF");
    }
    if latin1 {
        bytes.extend(
            text.chars()
                .map(|c| u8::try_from(u32::from(c)).unwrap_or(b'?')),
        );
    } else {
        bytes.extend_from_slice(text.as_bytes());
    }
    (
        bytes,
        Truth {
            spectra: truth_spectra,
            tolerance,
            cycles,
        },
    )
}

/// Complex helper for the tests: |a − b| / |b|.
#[cfg(test)]
fn rel(a: num_complex::Complex64, b: num_complex::Complex64) -> f64 {
    (a - b).norm() / b.norm()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::rng;

    #[test]
    fn generated_exports_read_back() {
        let mut r = rng(11);
        for _ in 0..300 {
            let (bytes, truth) = random_export(&mut r);
            let result = ReaderTarget.execute(&bytes, Some(&truth));
            assert!(
                result.is_ok(),
                "{result:?}\n{}",
                String::from_utf8_lossy(&bytes)
            );
        }
    }

    #[test]
    fn the_oracle_sees_a_changed_value() {
        // A truth that differs from the file by one part in a million must be caught.
        let mut r = rng(12);
        let (bytes, mut truth) = random_export(&mut r);
        truth.tolerance = 1e-12;
        let z = truth.spectra[0].z[1];
        truth.spectra[0].z[1] = z * (1.0 + 1e-6);
        assert!(rel(truth.spectra[0].z[1], z) > 1e-7);
        let v = ReaderTarget.execute(&bytes, Some(&truth)).unwrap_err();
        assert_eq!(v.class, "round trip: values differ");
    }
}
