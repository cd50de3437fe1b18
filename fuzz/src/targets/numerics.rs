//! Target `numerics`: the fit (`R0 + Rct|Qdl`), Kramers–Kronig validation and the DRT on degenerate
//! spectra.
//!
//! An input is text: the first line names the analysis (`fit`, `kk` or `drt`; anything else runs `kk`
//! and `drt`), then one point per line, `frequency real imaginary`, each read by `str::parse::<f64>`
//! (so `NaN`, `inf` and overflowing numbers arrive as such; lines that do not read are skipped; at most
//! 400 points). Generated spectra start from a simulated arc and are then made degenerate: one to five
//! points, duplicated or all-equal frequencies, all-equal impedances, magnitudes scaled by up to
//! 10^±300, subnormals, NaN, infinities, zeros, negative frequencies, shuffled or repeated points, pure
//! real or pure imaginary values.
//!
//! Property: no panic, and every result is either a typed error (whose message displays) or holds
//! finite numbers: fitted values, their standard errors and χ²; the Kramers–Kronig series, residuals
//! and statistics; the DRT's R∞, polarisation resistance, γ, coefficients, peaks and residuals.

use crate::engine::{KnownIssue, Rng, Target, Violation};
use eis_core::circuit::{Circuit, parse};
use eis_core::drt::{DrtOptions, drt};
use eis_core::eval::{Plan, log_frequencies};
use eis_core::fit::{FitSettings, fit};
use eis_core::simulate::simulate;
use eis_core::spectrum::Spectrum;
use eis_core::validate::{KkOptions, kramers_kronig};
use num_complex::Complex64;
use rand::RngExt;
use std::fmt::Write;
use std::sync::OnceLock;

/// Fit, Kramers–Kronig and DRT on degenerate spectra (the whole input space: the regions that used to
/// hang, 2πf overflowing and impedances beyond 1e±150, are fixed and fuzzed like the rest).
#[derive(Debug, Clone, Copy, Default)]
pub struct NumericsTarget;

/// Known failures waiting for a fix (none: every finding so far is fixed and replayed from
/// `fuzz/regressions/numerics/`).
const KNOWN: &[KnownIssue] = &[];

/// Most points read from one input.
const MAX_POINTS: usize = 400;

/// The fitted model.
pub const MODEL: &str = "R0 + Rct|Qdl";

fn model() -> Option<&'static Circuit> {
    static C: OnceLock<Option<Circuit>> = OnceLock::new();
    C.get_or_init(|| parse(MODEL).ok()).as_ref()
}

const DICTIONARY: &[&[u8]] = &[
    b"fit\n",
    b"kk\n",
    b"drt\n",
    b"\n",
    b" ",
    b"NaN",
    b"inf",
    b"-inf",
    b"0",
    b"-0",
    b"1e300",
    b"1e-300",
    b"5e-324",
    b"1e308",
    b"-1",
    b"1000 10 -5\n",
    b"1000 10 -5\n1000 10 -5\n",
];

const SEEDS: &[&str] = &[
    "kk\n1000 10 -1\n100 12 -4\n10 15 -3\n1 16 -1\n",
    "drt\n1e5 1 -0.1\n1e4 1.2 -0.5\n1e3 2 -2\n1e2 5 -3\n10 8 -2\n1 9 -0.5\n",
    "fit\n1e4 10 -1\n1e3 15 -10\n1e2 40 -30\n10 90 -20\n1 105 -5\n0.1 110 -1\n",
];

impl Target for NumericsTarget {
    type Truth = ();

    fn name(&self) -> &'static str {
        "numerics"
    }

    fn generate(&self, rng: &mut Rng) -> (Vec<u8>, Option<()>) {
        (random_case(rng).into_bytes(), None)
    }

    fn seeds(&self) -> Vec<Vec<u8>> {
        SEEDS.iter().map(|s| s.as_bytes().to_vec()).collect()
    }

    fn dictionary(&self) -> &'static [&'static [u8]] {
        DICTIONARY
    }

    fn max_len(&self) -> usize {
        16_384
    }

    fn execute(&self, input: &[u8], _truth: Option<&()>) -> Result<(), Violation> {
        let text = String::from_utf8_lossy(input);
        let mut lines = text.lines();
        let analysis = lines.next().unwrap_or("").trim().to_owned();
        let s = spectrum(lines);
        let (kk, drt) = (true, true);
        match analysis.as_str() {
            "fit" => check_fit(&s),
            "kk" if kk => check_kk(&s),
            "drt" if drt => check_drt(&s),
            "kk" | "drt" => Ok(()),
            _ => {
                if kk {
                    check_kk(&s)?;
                }
                if drt {
                    check_drt(&s)?;
                }
                Ok(())
            }
        }
    }

    fn known_issues(&self) -> &'static [KnownIssue] {
        KNOWN
    }

    fn minimise_budget(&self) -> usize {
        400
    }

    fn describe_truth(&self, _truth: &()) -> String {
        String::new()
    }
}

fn spectrum<'a>(lines: impl Iterator<Item = &'a str>) -> Spectrum {
    let mut f = Vec::new();
    let mut z = Vec::new();
    for line in lines {
        let v: Vec<f64> = line
            .split_whitespace()
            .filter_map(|t| t.parse().ok())
            .collect();
        if let [a, b, c] = v[..] {
            f.push(a);
            z.push(Complex64::new(b, c));
            if f.len() == MAX_POINTS {
                break;
            }
        }
    }
    Spectrum::new(f, z)
}

fn finite(what: &str, values: impl IntoIterator<Item = f64>) -> Result<(), Violation> {
    match values.into_iter().enumerate().find(|(_, v)| !v.is_finite()) {
        None => Ok(()),
        Some((i, v)) => Err(Violation::new(
            format!("non-finite output: {what}"),
            format!("{what}[{i}] = {v}"),
        )),
    }
}

fn check_fit(s: &Spectrum) -> Result<(), Violation> {
    let Some(c) = model() else {
        return Err(Violation::new("the model does not parse", MODEL));
    };
    match fit(c, s, &FitSettings::default(), None) {
        Err(e) => {
            let _ = e.to_string();
            Ok(())
        }
        Ok(r) => {
            finite("fit values", r.values.iter().copied())?;
            finite("fit standard errors", r.stderr.iter().flatten().copied())?;
            finite("fit chi-square", [r.chi_square])?;
            Ok(())
        }
    }
}

fn check_kk(s: &Spectrum) -> Result<(), Violation> {
    match kramers_kronig(s, &KkOptions::default()) {
        Err(e) => {
            let _ = e.to_string();
            Ok(())
        }
        Ok(r) => {
            finite("kk r0", [r.r0])?;
            finite("kk resistances", r.resistances.iter().copied())?;
            finite("kk time constants", r.time_constants.iter().copied())?;
            finite("kk inductance", r.inductance)?;
            finite("kk residuals (real)", r.residual_re.iter().copied())?;
            finite("kk residuals (imaginary)", r.residual_im.iter().copied())?;
            finite(
                "kk statistics",
                [
                    r.mu,
                    r.residual_rms_percent,
                    r.residual_max_percent,
                    r.residual_scatter_percent,
                    r.residual_systematic_percent,
                    r.point_limit_percent,
                ],
            )?;
            if r.capacitance.is_some_and(f64::is_nan) {
                return Err(Violation::new(
                    "non-finite output: kk capacitance",
                    "capacitance NaN",
                ));
            }
            Ok(())
        }
    }
}

fn check_drt(s: &Spectrum) -> Result<(), Violation> {
    match drt(s, DrtOptions::default()) {
        Err(e) => {
            let _ = e.to_string();
            Ok(())
        }
        Ok(r) => {
            finite("drt r_inf", [r.r_inf_ohm])?;
            finite("drt r_pol", [r.r_pol_ohm])?;
            finite("drt lambda", [r.lambda])?;
            finite("drt inductance", r.inductance_h)?;
            finite("drt gamma", r.gamma_ohm.iter().copied())?;
            finite("drt coefficients", r.coefficients_ohm.iter().copied())?;
            finite("drt residuals (real)", r.residual_real.iter().copied())?;
            finite("drt residuals (imaginary)", r.residual_imag.iter().copied())?;
            finite("drt residual rms", [r.residual_rms])?;
            finite(
                "drt peaks",
                r.peaks
                    .iter()
                    .flat_map(|p| [p.tau_s, p.frequency_hz, p.resistance_ohm, p.gamma_ohm]),
            )?;
            Ok(())
        }
    }
}

/// A random degenerate case: the analysis, then the points.
pub fn random_case(rng: &mut Rng) -> String {
    let analysis = ["fit", "kk", "drt"][rng.random_range(0..3)];
    let mut f = log_frequencies(
        10f64.powf(rng.random_range(2.0..6.0)),
        10f64.powf(rng.random_range(-3.0..1.0)),
        rng.random_range(1..8),
    );
    let mut z = match model() {
        Some(c) => {
            let p = [
                10f64.powf(rng.random_range(-2.0..2.0)),
                10f64.powf(rng.random_range(-1.0..3.0)),
                10f64.powf(rng.random_range(-6.0..-2.0)),
                rng.random_range(0.5..1.0),
            ];
            simulate(&Plan::compile(c), &p, &f, None).z
        }
        None => vec![Complex64::new(1.0, -1.0); f.len()],
    };
    let ops = 1 + rng.random_range(0..3);
    for _ in 0..ops {
        degrade(rng, &mut f, &mut z);
    }
    let mut out = format!("{analysis}\n");
    for (fi, zi) in f.iter().zip(&z) {
        let _ = writeln!(out, "{fi:e} {:e} {:e}", zi.re, zi.im);
    }
    out
}

fn awkward(rng: &mut Rng) -> f64 {
    [
        f64::NAN,
        f64::INFINITY,
        f64::NEG_INFINITY,
        0.0,
        -0.0,
        -1.0,
        5e-324,
        1e-300,
        1e300,
        f64::MAX,
        f64::MIN_POSITIVE,
    ][rng.random_range(0..11)]
}

/// One degeneration of a spectrum.
fn degrade(rng: &mut Rng, f: &mut Vec<f64>, z: &mut Vec<Complex64>) {
    let n = f.len();
    if n == 0 {
        return;
    }
    match rng.random_range(0..11) {
        // One to five points.
        0 => {
            let k = 1 + rng.random_range(0..5);
            f.truncate(k);
            z.truncate(k);
        }
        // Some frequencies repeated.
        1 => {
            for _ in 0..1 + rng.random_range(0..n) {
                let (i, j) = (rng.random_range(0..n), rng.random_range(0..n));
                f[i] = f[j];
            }
        }
        // All frequencies equal.
        2 => {
            let v = f[rng.random_range(0..n)];
            f.iter_mut().for_each(|x| *x = v);
        }
        // All impedances equal.
        3 => {
            let v = z[rng.random_range(0..n)];
            z.iter_mut().for_each(|x| *x = v);
        }
        // Huge or tiny magnitudes.
        4 => {
            let k = 10f64.powi(rng.random_range(-300..=300));
            z.iter_mut().for_each(|x| *x *= k);
        }
        // Huge or tiny frequencies.
        5 => {
            let k = 10f64.powi(rng.random_range(-300..=300));
            f.iter_mut().for_each(|x| *x *= k);
        }
        // An awkward value somewhere.
        6 => {
            let i = rng.random_range(0..n);
            let v = awkward(rng);
            match rng.random_range(0..3) {
                0 => f[i] = v,
                1 => z[i].re = v,
                _ => z[i].im = v,
            }
        }
        // Shuffled or reversed.
        7 => {
            if rng.random_ratio(1, 2) {
                f.reverse();
                z.reverse();
            } else {
                for i in (1..n).rev() {
                    let j = rng.random_range(0..=i);
                    f.swap(i, j);
                    z.swap(i, j);
                }
            }
        }
        // Pure real or pure imaginary.
        8 => {
            let real = rng.random_ratio(1, 2);
            for x in z.iter_mut() {
                if real {
                    x.im = 0.0;
                } else {
                    x.re = 0.0;
                }
            }
        }
        // Every point twice.
        9 => {
            let (f2, z2) = (f.clone(), z.clone());
            f.extend(f2);
            z.extend(z2);
        }
        // Wild values: random signs and magnitudes.
        _ => {
            for x in z.iter_mut() {
                *x = Complex64::new(
                    rng.random_range(-1.0..1.0) * 10f64.powi(rng.random_range(-20..20)),
                    rng.random_range(-1.0..1.0) * 10f64.powi(rng.random_range(-20..20)),
                );
            }
        }
    }
}
