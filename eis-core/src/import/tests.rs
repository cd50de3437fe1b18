//! Reader tests: export variants generated here from simulated spectra read back to the same numbers;
//! bad files give their pinned messages; random input never panics.

use super::*;
use crate::circuit::parse;
use crate::eval::{Plan, log_frequencies};
use crate::simulate::simulate;
use std::f64::consts::PI;

/// A known spectrum: Randles cell with transmissive diffusion and a series inductance, so that the
/// highest frequencies are inductive; 100 kHz to 10 mHz, 7 points per decade.
fn known() -> Spectrum {
    let c = parse("L0 + R0 + (Rct + Wtd)|Qdl").unwrap();
    let plan = Plan::compile(&c);
    let p = [2e-7, 0.05, 0.1, 0.2, 20.0, 0.5, 0.9];
    simulate(&plan, &p, &log_frequencies(1e5, 1e-2, 7), None)
}

/// How a test export is written.
#[derive(Clone)]
struct Export {
    delimiter: &'static str,
    decimal_comma: bool,
    preamble: &'static str,
    /// Header words (frequency, first, second impedance column), or no header.
    header: Option<[&'static str; 3]>,
    /// Divide frequencies by this before writing (1e3 for kHz, 1/(2π) for rad/s).
    freq_unit: f64,
    /// Divide impedances by this (1e-3 for mΩ).
    z_unit: f64,
    /// What the last two columns hold.
    form: Form,
    crlf: bool,
    bom: bool,
    latin1: bool,
}

#[derive(Clone, Copy, PartialEq)]
enum Form {
    ReIm,
    ReMinusIm,
    ModPhaseDeg,
    ModPhaseRad,
}

impl Default for Export {
    fn default() -> Self {
        Export {
            delimiter: ",",
            decimal_comma: false,
            preamble: "",
            header: Some(["frequency_hz", "z_real_ohm", "z_imag_ohm"]),
            freq_unit: 1.0,
            z_unit: 1.0,
            form: Form::ReIm,
            crlf: false,
            bom: false,
            latin1: false,
        }
    }
}

fn num(x: f64, comma: bool) -> String {
    let s = format!("{x:e}");
    if comma { s.replace('.', ",") } else { s }
}

impl Export {
    fn write(&self, spectra: &[Spectrum], extra: &dyn Fn(usize, usize) -> Vec<String>) -> Vec<u8> {
        let nl = if self.crlf { "\r\n" } else { "\n" };
        let mut text = String::new();
        for l in self.preamble.lines() {
            text.push_str(l);
            text.push_str(nl);
        }
        let extra_header = extra(usize::MAX, 0);
        if let Some(h) = self.header {
            let mut words: Vec<String> = h.iter().map(|w| w.to_string()).collect();
            words.extend(extra_header);
            text.push_str(&words.join(self.delimiter));
            text.push_str(nl);
        }
        for (k, s) in spectra.iter().enumerate() {
            for (i, (f, z)) in s.frequency_hz.iter().zip(&s.z).enumerate() {
                let (a, b) = match self.form {
                    Form::ReIm => (z.re / self.z_unit, z.im / self.z_unit),
                    Form::ReMinusIm => (z.re / self.z_unit, -z.im / self.z_unit),
                    Form::ModPhaseDeg => (z.norm() / self.z_unit, z.arg() * 180.0 / PI),
                    Form::ModPhaseRad => (z.norm() / self.z_unit, z.arg()),
                };
                let mut cells = vec![
                    num(f / self.freq_unit, self.decimal_comma),
                    num(a, self.decimal_comma),
                    num(b, self.decimal_comma),
                ];
                cells.extend(extra(k, i));
                text.push_str(&cells.join(self.delimiter));
                text.push_str(nl);
            }
        }
        let mut bytes = Vec::new();
        if self.bom {
            bytes.extend_from_slice(b"\xEF\xBB\xBF");
        }
        if self.latin1 {
            bytes.extend(
                text.chars()
                    .map(|c| u8::try_from(c as u32).expect("Latin-1 text")),
            );
        } else {
            bytes.extend_from_slice(text.as_bytes());
        }
        bytes
    }
}

fn no_extra(_: usize, _: usize) -> Vec<String> {
    Vec::new()
}

fn assert_same(got: &Spectrum, want: &Spectrum, what: &str) {
    assert_eq!(got.len(), want.len(), "{what}: point count");
    for ((f, z), (f0, z0)) in got
        .frequency_hz
        .iter()
        .zip(&got.z)
        .zip(want.frequency_hz.iter().zip(&want.z))
    {
        assert!(
            (f - f0).abs() <= 1e-12 * f0,
            "{what}: frequency {f} vs {f0}"
        );
        assert!(
            (z - z0).norm() <= 1e-12 * z0.norm(),
            "{what}: Z {z} vs {z0} at {f0} Hz"
        );
    }
}

#[test]
fn export_variants_read_back_to_the_same_numbers() {
    let s = known();
    let variants: Vec<(&str, Export, ReaderOptions)> = vec![
        ("plain comma", Export::default(), ReaderOptions::default()),
        (
            "semicolon, decimal comma, preamble, -Z'' in mOhm, kHz",
            Export {
                delimiter: ";",
                decimal_comma: true,
                preamble: "Cell test export\nOperator: lab 3\nDate;12.05.2024\n\n",
                header: Some(["Freq (kHz)", "Z' (m\u{3a9})", "-Z'' (m\u{3a9})"]),
                freq_unit: 1e3,
                z_unit: 1e-3,
                form: Form::ReMinusIm,
                ..Export::default()
            },
            ReaderOptions::default(),
        ),
        (
            "tab, CRLF, BOM, |Z| and phase in degrees",
            Export {
                delimiter: "\t",
                header: Some(["Frequency/Hz", "|Z|/\u{3a9}", "Phase/\u{b0}"]),
                form: Form::ModPhaseDeg,
                crlf: true,
                bom: true,
                ..Export::default()
            },
            ReaderOptions::default(),
        ),
        (
            "spaces, rad/s, |Z| in kOhm and phase in radians",
            Export {
                delimiter: "   ",
                header: Some(["omega[rad/s]", "Modulus[kOhm]", "Phase[rad]"]),
                freq_unit: 1.0 / (2.0 * PI),
                z_unit: 1e3,
                form: Form::ModPhaseRad,
                ..Export::default()
            },
            ReaderOptions::default(),
        ),
        (
            "Latin-1 degree sign, Windows line ends, comments",
            Export {
                delimiter: ";",
                preamble: "# instrument settings\n% amplitude 10 mV\n",
                header: Some(["Freq [Hz]", "Mod [Ohm]", "Phase [\u{b0}]"]),
                form: Form::ModPhaseDeg,
                crlf: true,
                latin1: true,
                ..Export::default()
            },
            ReaderOptions::default(),
        ),
        (
            "no header, -Z'' stated by option",
            Export {
                header: None,
                form: Form::ReMinusIm,
                ..Export::default()
            },
            ReaderOptions {
                imag_sign: ImagSign::Negated,
                ..ReaderOptions::default()
            },
        ),
        (
            "no header, -Z'' guessed from the values",
            Export {
                header: None,
                delimiter: " ",
                decimal_comma: true,
                form: Form::ReMinusIm,
                ..Export::default()
            },
            ReaderOptions::default(),
        ),
        (
            "unrecognised header words, columns by name and number",
            Export {
                header: Some(["A", "B", "C"]),
                ..Export::default()
            },
            ReaderOptions {
                columns: parse_column_overrides("freq=A,re=2,im=C").unwrap(),
                ..ReaderOptions::default()
            },
        ),
        (
            "|Z| and phase by overrides, phase unit by option",
            Export {
                header: Some(["x", "y", "w"]),
                form: Form::ModPhaseRad,
                ..Export::default()
            },
            ReaderOptions {
                columns: parse_column_overrides("freq=1,mod=2,phase=3").unwrap(),
                phase_unit: PhaseUnit::Radians,
                ..ReaderOptions::default()
            },
        ),
    ];
    for (what, export, options) in variants {
        let bytes = export.write(std::slice::from_ref(&s), &no_extra);
        let read = read_bytes("variant.txt", &bytes, &options)
            .unwrap_or_else(|e| panic!("{what}: {e}\n{}", String::from_utf8_lossy(&bytes)));
        assert_eq!(read.len(), 1, "{what}: one spectrum");
        assert_same(&read[0].spectrum, &s, what);
        assert_eq!(read[0].spectrum.meta.spectrum, 1);
        assert_eq!(read[0].spectrum.meta.source.as_deref(), Some("variant.txt"));
    }
}

#[test]
fn ascending_sweeps_are_sorted_high_to_low_without_warning() {
    let s = known();
    let mut rev = s.clone();
    rev.frequency_hz.reverse();
    rev.z.reverse();
    let bytes = Export::default().write(&[rev], &no_extra);
    let read = read_bytes("up.csv", &bytes, &ReaderOptions::default()).unwrap();
    assert_same(&read[0].spectrum, &s, "ascending");
    assert!(
        !read[0]
            .warnings
            .iter()
            .any(|w| w.kind == WarningKind::Unsorted),
        "{:?}",
        read[0].warnings
    );
}

/// Three spectra whose Rct grows from one to the next.
fn three() -> Vec<Spectrum> {
    let c = parse("R0 + Rct|Qdl").unwrap();
    let plan = Plan::compile(&c);
    (0..3)
        .map(|k| {
            let p = [1.0, 10.0 + 5.0 * k as f64, 1e-4, 0.9];
            simulate(&plan, &p, &log_frequencies(1e4, 0.1, 5), None)
        })
        .collect()
}

#[test]
fn several_spectra_split_by_an_index_column() {
    let spectra = three();
    let export = Export {
        header: Some(["Freq (Hz)", "Z' (Ohm)", "Z'' (Ohm)"]),
        ..Export::default()
    };
    let extra = |k: usize, i: usize| {
        if k == usize::MAX {
            vec!["Cycle".to_string(), "Temperature (\u{b0}C)".to_string()]
        } else {
            // Temperature varies within a spectrum: the metadata carry the mean.
            vec![format!("{}", 100 + k), format!("{}", 20.0 + i as f64 % 2.0)]
        }
    };
    let bytes = export.write(&spectra, &extra);
    // Split by the cycle column only, so the column alone does the splitting.
    let options = ReaderOptions {
        split: Split::Column,
        ..ReaderOptions::default()
    };
    let read = read_bytes("cycles.csv", &bytes, &options).unwrap();
    assert_eq!(read.len(), 3);
    for (k, (r, s)) in read.iter().zip(&spectra).enumerate() {
        assert_same(&r.spectrum, s, "cycle split");
        assert_eq!(r.spectrum.meta.spectrum, k + 1);
        assert_eq!(
            r.spectrum.meta.get("cycle"),
            Some(&MetaValue::Number(100.0 + k as f64))
        );
        let n = s.len() as f64;
        let mean = 20.0 + (n / 2.0).floor() / n;
        let t = r
            .spectrum
            .meta
            .get("temperature")
            .unwrap()
            .as_f64()
            .unwrap();
        assert!((t - mean).abs() < 1e-12, "mean temperature {t} vs {mean}");
    }
}

#[test]
fn several_spectra_split_by_the_sweep_restarting() {
    let spectra = three();
    let export = Export {
        delimiter: "\t",
        ..Export::default()
    };
    let bytes = export.write(&spectra, &no_extra);
    let read = read_bytes("restarts.txt", &bytes, &ReaderOptions::default()).unwrap();
    assert_eq!(read.len(), 3);
    for (r, s) in read.iter().zip(&spectra) {
        assert_same(&r.spectrum, s, "restart split");
        assert!(r.warnings.is_empty(), "{:?}", r.warnings);
    }
    // With splitting off, the same file is one spectrum with duplicates and unsorted frequencies.
    let one = read_bytes(
        "restarts.txt",
        &bytes,
        &ReaderOptions {
            split: Split::None,
            ..ReaderOptions::default()
        },
    )
    .unwrap();
    assert_eq!(one.len(), 1);
    let kinds: Vec<&WarningKind> = one[0].warnings.iter().map(|w| &w.kind).collect();
    assert!(kinds.contains(&&WarningKind::Unsorted), "{kinds:?}");
    assert!(
        kinds.iter().any(|k| matches!(k, WarningKind::Duplicate(_))),
        "{kinds:?}"
    );
}

#[test]
fn repeated_headers_and_text_lines_separate_spectra() {
    let text = "f,re,im\n3,1,-1\n2,1,-2\n1,1,-3\nf,re,im\n3,2,-1\n2,2,-2\n1,2,-3\nEnd of spectrum\n3,3,-1\n2,3,-2\n1,3,-3\n";
    let read = read_bytes(
        "r.csv",
        text.as_bytes(),
        &ReaderOptions {
            split: Split::None,
            ..ReaderOptions::default()
        },
    )
    .unwrap();
    assert_eq!(read.len(), 3);
    assert_eq!(read[2].spectrum.z[0].re, 3.0);
    assert_eq!(
        read[1].warnings[0].to_string(),
        "r.csv, line 9: warning: skipped a line of text inside the data: `End of spectrum`"
    );
}

#[test]
fn metadata_from_the_file_name() {
    let options = ReaderOptions {
        name_pattern: Some(NamePattern::parse("cell{cell}_c{cycle}_soc{soc}").unwrap()),
        ..ReaderOptions::default()
    };
    let text = "f,re,im\n3,1,-1\n2,1,-2\n1,1,-3\n";
    let read = read_bytes("data/cellA3_c150_soc50.csv", text.as_bytes(), &options).unwrap();
    let m = &read[0].spectrum.meta;
    assert_eq!(m.get("cell"), Some(&MetaValue::Text("A3".into())));
    assert_eq!(m.get("cycle"), Some(&MetaValue::Number(150.0)));
    assert_eq!(m.get("soc"), Some(&MetaValue::Number(50.0)));
    let read = read_bytes("data/other.csv", text.as_bytes(), &options).unwrap();
    assert_eq!(
        read[0].warnings[0].to_string(),
        "data/other.csv: warning: the file name does not match the name pattern `cell{cell}_c{cycle}_soc{soc}`"
    );
}

#[test]
fn inductive_points_are_kept_or_dropped_and_cropping_is_reported() {
    let s = known();
    let bytes = Export::default().write(std::slice::from_ref(&s), &no_extra);
    let inductive = s.z.iter().filter(|z| z.im > 0.0).count();
    assert!(
        inductive > 0,
        "the test spectrum must have inductive points"
    );
    let kept = read_bytes("l.csv", &bytes, &ReaderOptions::default()).unwrap();
    assert_eq!(kept[0].spectrum.len(), s.len());
    assert!(kept[0].warnings.iter().any(|w| matches!(w.kind, WarningKind::Inductive { count, dropped: false, .. } if count == inductive)));
    let options = ReaderOptions {
        drop_inductive: true,
        fmin: Some(0.1),
        ..ReaderOptions::default()
    };
    let dropped = read_bytes("l.csv", &bytes, &options).unwrap();
    let sp = &dropped[0].spectrum;
    assert!(sp.z.iter().all(|z| z.im <= 0.0));
    assert!(sp.frequency_hz.iter().all(|&f| f >= 0.1));
    let below = s.frequency_hz.iter().filter(|&&f| f < 0.1).count();
    assert_eq!(sp.len(), s.len() - inductive - below);
    let msgs: Vec<String> = dropped[0].warnings.iter().map(|w| w.to_string()).collect();
    assert!(
        msgs.contains(&format!(
            "l.csv, line 2: warning: {below} points outside the frequency window removed"
        )),
        "{msgs:?}"
    );
}

/// Bad inputs, one per failure class, with the exact message each must give.
#[test]
fn bad_files_give_pinned_messages() {
    let cases: &[(&str, &str, &str)] = &[
        (
            "empty",
            "",
            "bad.csv: found no table of numbers (no line holds three or more numeric fields)",
        ),
        (
            "text only",
            "hello\nworld\n",
            "bad.csv: found no table of numbers (no line holds three or more numeric fields)",
        ),
        (
            "two columns",
            "1,2\n3,4\n",
            "bad.csv: found no table of numbers (no line holds three or more numeric fields)",
        ),
        (
            "no frequency column",
            "time,current,voltage\n1,2,3\n4,5,6\n",
            "bad.csv, line 1: no frequency column among the header words `time`, `current`, `voltage`",
        ),
        (
            "no imaginary column",
            "freq,Z',other\n1,2,3\n4,5,6\n",
            "bad.csv, line 1: no imaginary part column among the header words `freq`, `Z'`, `other`",
        ),
        (
            "unknown unit",
            "freq (Hz^2),re,im\n1,2,3\n4,5,6\n",
            "bad.csv, line 1, column 1: unknown unit `Hz^2` for the frequency",
        ),
        (
            "non-numeric cell",
            "f,re,im\n3,1,-1\n2,x1,-2\n1,1,-3\n",
            "bad.csv, line 3, column 2: `x1` is not a number",
        ),
        (
            "too few fields",
            "f;re;im\n3;1;-1\n2;1\n1;1;-3\n",
            "bad.csv, line 3, column 3: expected at least 3 fields, found 2",
        ),
        (
            "too few points",
            "f,re,im\n3,1,-1\n2,1,-2\n",
            "bad.csv, line 2: spectrum 1 has 2 usable points, fewer than the minimum of 3",
        ),
        (
            "too few points after dropping NaN",
            "f,re,im\n3,1,-1\n2,NaN,-2\n1,1,-3\n",
            "bad.csv, line 2: spectrum 1 has 2 usable points, fewer than the minimum of 3",
        ),
    ];
    for &(what, text, want) in cases {
        match read_bytes("bad.csv", text.as_bytes(), &ReaderOptions::default()) {
            Ok(r) => panic!("{what}: read {} spectra, wanted error {want:?}", r.len()),
            Err(e) => assert_eq!(e.to_string(), want, "{what}"),
        }
    }
    // Overrides that do not fit the file.
    let text = "f,re,im\n3,1,-1\n2,1,-2\n1,1,-3\n";
    for (columns, want) in [
        (
            "im=5",
            "bad.csv, line 1: column 5 named in the column overrides is beyond the 3 columns of the table",
        ),
        (
            "re=Zreal",
            "bad.csv, line 1: column `Zreal` named in the column overrides is not in the header",
        ),
    ] {
        let options = ReaderOptions {
            columns: parse_column_overrides(columns).unwrap(),
            ..ReaderOptions::default()
        };
        let e = read_bytes("bad.csv", text.as_bytes(), &options).unwrap_err();
        assert_eq!(e.to_string(), want, "{columns}");
    }
    // A column number 0 from a library caller (the override parser refuses it) is out of range.
    let options = ReaderOptions {
        columns: vec![(Role::Imaginary, ColumnRef::Number(0))],
        ..ReaderOptions::default()
    };
    let e = read_bytes("bad.csv", text.as_bytes(), &options).unwrap_err();
    assert!(
        matches!(e.kind, DataErrorKind::ColumnOutOfRange { column: 0, .. }),
        "{e}"
    );
    let e = read_file(Path::new("/nonexistent/x.csv"), &ReaderOptions::default()).unwrap_err();
    assert!(
        e.to_string()
            .starts_with("/nonexistent/x.csv: cannot read the file: "),
        "{e}"
    );
}

/// Warnings for points that are kept or dropped, with their exact text.
#[test]
fn hygiene_warnings_are_pinned() {
    let cases: &[(&str, &str, &[&str])] = &[
        (
            "NaN, infinity, zero and negative frequency",
            "f,re,im\n5,1,-1\n4,nan,-1\n3,1,inf\n0,1,-1\n-1,1,-1\n2,1,-2\n1,1,-3\n",
            &[
                "w.csv: warning: dropped 4 rows: line 3, column 2: `nan` is not a finite number; line 4, column 3: `inf` is not a finite number; line 5, column 1: frequency 0 Hz is not positive; and 1 more",
            ],
        ),
        (
            "unsorted and duplicate",
            "f,re,im\n100,1,-1\n10,1,-1\n20,1,-1\n10,2,-1\n1,1,-1\n",
            &[
                "w.csv, line 4, column 1: warning: frequencies are not monotonic within the spectrum (first out of order here)",
                "w.csv, line 5, column 1: warning: frequency 10 Hz appears more than once in the spectrum (points kept)",
            ],
        ),
        (
            "zero impedance and negative real part",
            "f,re,im\n5,0,0\n4,-1,-1\n3,1,-1\n2,1,-1\n",
            &[
                "w.csv: warning: dropped 1 row: line 2: impedance is zero",
                "w.csv, line 2: warning: 1 points have a negative real part (kept)",
            ],
        ),
        (
            "no header",
            "3 1 -1\n2 1 -2\n1 1 -3\n",
            &[
                "w.csv: warning: no header; columns 1, 2 and 3 taken as frequency (Hz), real and imaginary part (Ohm)",
            ],
        ),
        (
            "phase unit not stated",
            "f,|Z|,phase\n3,1,-45\n2,1,-50\n1,1,-60\n",
            &[
                "w.csv, line 2, column 3: warning: the phase unit is not stated; taken as degrees from the size of the values",
            ],
        ),
    ];
    for &(what, text, want) in cases {
        let read = read_bytes("w.csv", text.as_bytes(), &ReaderOptions::default())
            .unwrap_or_else(|e| panic!("{what}: {e}"));
        let got: Vec<String> = read
            .iter()
            .flat_map(|r| &r.warnings)
            .map(|w| w.to_string())
            .collect();
        assert_eq!(got, want, "{what}");
    }
}

#[test]
fn a_bad_spectrum_does_not_stop_the_next() {
    let text = "f,re,im,cycle\n3,1,-1,1\n2,1,-2,1\n1,1,-3,1\n3,1,-1,2\n2,oops,-2,2\n1,1,-3,2\n3,1,-1,3\n2,1,-2,3\n1,1,-3,3\n";
    let items: Vec<_> =
        SpectrumReader::new("b.csv", text.as_bytes(), ReaderOptions::default()).collect();
    assert_eq!(items.len(), 3);
    assert!(items[0].is_ok() && items[2].is_ok());
    let e = items[1].as_ref().unwrap_err();
    assert_eq!(e.spectrum, Some(2));
    assert_eq!(
        e.to_string(),
        "b.csv, line 6, column 2: `oops` is not a number"
    );
    assert_eq!(items[2].as_ref().unwrap().spectrum.meta.spectrum, 3);
}

mod properties {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(300))]

        #[test]
        fn random_bytes_never_panic(bytes in proptest::collection::vec(any::<u8>(), 0..2000)) {
            for item in SpectrumReader::new("random.bin", bytes.as_slice(), ReaderOptions::default()) {
                let _ = item.map(|r| r.spectrum.len());
            }
        }

        /// Issue 13: under a header with metadata columns and a units line, random cells (numbers,
        /// NaN, text, huge values, missing cells) never panic, and every spectrum read is finite
        /// with one source line per point.
        #[test]
        fn random_cells_under_a_header_never_panic(
            rows in proptest::collection::vec(
                proptest::collection::vec(
                    prop_oneof![
                        4 => "[1-9][0-9]{0,2}(\\.[0-9])?",
                        1 => Just("nan".to_string()),
                        1 => Just("1e306".to_string()),
                        1 => Just("".to_string()),
                        1 => "[a-z.]{1,6}",
                    ],
                    2..6,
                ),
                0..30,
            ),
            units in any::<bool>(),
        ) {
            let mut text = String::from("time (s),Freq (kHz),Z' (kOhm),-Z'' (kOhm),cycle\n");
            if units {
                text.push_str("s,kHz,kOhm,kOhm,\n");
            }
            for r in &rows {
                text.push_str(&r.join(","));
                text.push('\n');
            }
            for r in SpectrumReader::new("random.csv", text.as_bytes(), ReaderOptions::default()).flatten() {
                let s = &r.spectrum;
                prop_assert!(s.frequency_hz.iter().all(|f| f.is_finite() && *f > 0.0));
                prop_assert!(s.z.iter().all(|z| z.re.is_finite() && z.im.is_finite()));
                prop_assert_eq!(s.source_lines.as_ref().map(Vec::len), Some(s.len()));
            }
        }

        #[test]
        fn random_csv_like_text_never_panics(
            rows in proptest::collection::vec(
                proptest::collection::vec(
                    prop_oneof![
                        "-?[0-9]{1,4}([.,][0-9]{0,3})?(e-?[0-9])?",
                        Just("nan".to_string()),
                        Just("".to_string()),
                        "[a-zA-Z'\"|()\\[\\]/ -]{0,8}",
                    ],
                    0..6,
                ),
                0..40,
            ),
            delimiter in prop_oneof![Just(","), Just(";"), Just("\t"), Just("  ")],
            crlf in any::<bool>(),
        ) {
            let nl = if crlf { "\r\n" } else { "\n" };
            let text: String = rows.iter().map(|r| r.join(delimiter) + nl).collect();
            let reader = SpectrumReader::new("random.csv", text.as_bytes(), ReaderOptions::default());
            for r in reader.flatten() {
                prop_assert!(r.spectrum.frequency_hz.iter().all(|f| f.is_finite() && *f > 0.0));
                prop_assert!(r.spectrum.z.iter().all(|z| z.re.is_finite() && z.im.is_finite()));
            }
        }
    }
}

mod regressions;
