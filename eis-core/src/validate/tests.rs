//! Kramers–Kronig tests. Outside sources: the Lin-KK method and its μ criterion (Schönleber, Klotz &
//! Ivers-Tiffée 2014, Electrochim. Acta 131, 20–27); the exact Voigt-series expansions of the finite
//! diffusion elements, partial fractions of tanh and coth (Abramowitz & Stegun 1964, Handbook of
//! Mathematical Functions, 4.5.69–4.5.70; derived here and checked by summation against the closed forms);
//! drifting parameters during a sweep as a cause of Kramers–Kronig violations (common practice).

use super::solve::time_constants;
use super::*;
use crate::circuit::parse;
use crate::eval::{Plan, log_frequencies};
use crate::simulate::{Noise, simulate};
use num_complex::Complex64;
use std::f64::consts::PI;

/// The error for point `number` (from 1) of a spectrum made here, with no source line.
fn bad_point(number: usize) -> KkError {
    KkError::BadPoint(PointRef { number, line: None })
}

/// Seed of every noisy test spectrum.
const SEED: u64 = 20240514;

fn freqs() -> Vec<f64> {
    log_frequencies(1e5, 1e-2, 10)
}

fn circuit_spectrum(text: &str, noise: Option<f64>) -> Spectrum {
    let c = parse(text).unwrap();
    let plan = Plan::compile(&c);
    let noise = noise.map(|relative| Noise {
        relative,
        seed: SEED,
    });
    simulate(&plan, &c.default_values(), &freqs(), noise)
}

/// The circuit files of the repository's `circuits/` folder: (file name, text).
fn circuit_library() -> Vec<(String, String)> {
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../circuits");
    std::fs::read_dir(&dir)
        .unwrap()
        .map(|entry| entry.unwrap().path())
        .filter(|path| path.extension().is_some_and(|e| e == "circ"))
        .map(|path| {
            let name = path.file_name().unwrap().to_string_lossy().into_owned();
            (name, std::fs::read_to_string(&path).unwrap())
        })
        .collect()
}

#[test]
fn circuit_library_spectra_pass_at_the_noise_level() {
    let library = circuit_library();
    for (name, text) in &library {
        // 0.2 % noise on each part: the rms residual should be about that, less the fitted share.
        let s = circuit_spectrum(text, Some(0.002));
        let r = kramers_kronig(&s, &KkOptions::default()).unwrap();
        assert!(r.valid, "{name}: {r:#?}");
        assert!(
            (0.12..0.3).contains(&r.residual_rms_percent),
            "{name}: rms {} % for 0.2 % noise",
            r.residual_rms_percent
        );
        assert!(
            r.mu_reached && r.elements < s.len() / 2,
            "{name}: M = {}",
            r.elements
        );
        // Noise-free, the same spectra fit far below the noise level.
        let clean = circuit_spectrum(text, None);
        let r = kramers_kronig(&clean, &KkOptions::default()).unwrap();
        // A semi-infinite Warburg tail goes on below the lowest measured frequency, beyond the τ range
        // of the test, so it is only approximated (the paper's reason for optional series elements).
        let limit = if name.contains("semi-infinite") {
            0.6
        } else {
            0.2
        };
        assert!(
            r.residual_max_percent < limit,
            "{name}: noise-free max {} %",
            r.residual_max_percent
        );
    }
    assert!(library.len() >= 6, "circuit library: {library:?}");
}

/// Σ R_k/(1 + jωτ_k) of the exact expansions (partial fractions of tanh/coth, Abramowitz & Stegun 1964,
/// 4.5.69–4.5.70, from memory).
fn voigt_transmissive(r: f64, tau: f64, terms: usize, w: f64) -> Complex64 {
    (1..=terms)
        .map(|k| {
            let odd = (2 * k - 1) as f64;
            let rk = 8.0 * r / (odd * odd * PI * PI);
            let tk = 4.0 * tau / (odd * odd * PI * PI);
            rk / Complex64::new(1.0, w * tk)
        })
        .sum()
}

fn voigt_reflective(r: f64, tau: f64, terms: usize, w: f64) -> Complex64 {
    let series: Complex64 = (1..=terms)
        .map(|k| {
            let kk = (k * k) as f64;
            let rk = 2.0 * r / (kk * PI * PI);
            let tk = tau / (kk * PI * PI);
            rk / Complex64::new(1.0, w * tk)
        })
        .sum();
    // C_L = τ/R in series.
    series + 1.0 / Complex64::new(0.0, w * tau / r)
}

#[test]
fn voigt_expansions_match_the_closed_form_elements() {
    let (r, tau) = (20.0, 5.0);
    let wt = Plan::compile(&parse("Wt1").unwrap());
    let wr = Plan::compile(&parse("Wr1").unwrap());
    for f in [1e-3, 0.1, 1.0, 10.0, 1e3] {
        let w = angular(f);
        let exact_t = wt.impedance(&[r, tau], w);
        let exact_r = wr.impedance(&[r, tau], w);
        // The Rₖ left out sum to at most 2R/(π²(K−1)) in both forms, which bounds the difference.
        let k = 20_000;
        let bound = 2.0 * r / (PI * PI * (k - 1) as f64);
        let t = voigt_transmissive(r, tau, k, w);
        let rr = voigt_reflective(r, tau, k, w);
        assert!(
            (t - exact_t).norm() < bound,
            "tanh at {f} Hz: {t} vs {exact_t}"
        );
        assert!(
            (rr - exact_r).norm() < bound,
            "coth at {f} Hz: {rr} vs {exact_r}"
        );
        // And the bound is not loose by orders of magnitude: at low frequency it is nearly reached.
        if f == 1e-3 {
            assert!((t - exact_t).norm() > 0.1 * bound);
        }
    }
}

#[test]
fn exact_voigt_series_give_residuals_near_zero() {
    let f = freqs();
    let (r0, r, tau) = (1.0, 20.0, 5.0);
    for (name, reflective) in [("transmissive", false), ("reflective", true)] {
        let z: Vec<Complex64> = f
            .iter()
            .map(|&fi| {
                let w = angular(fi);
                r0 + if reflective {
                    voigt_reflective(r, tau, 400, w)
                } else {
                    voigt_transmissive(r, tau, 400, w)
                }
            })
            .collect();
        let s = Spectrum::new(f.clone(), z);
        let report = kramers_kronig(&s, &KkOptions::default()).unwrap();
        assert!(report.valid, "{name}: {report:#?}");
        assert_eq!(
            report.capacitance.is_some(),
            reflective,
            "{name}: series C chosen automatically"
        );
        assert!(
            report.residual_max_percent < 0.05,
            "{name}: max residual {} %",
            report.residual_max_percent
        );
        if reflective {
            // The fitted series capacitance is C_L = τ/R.
            let c = report.capacitance.unwrap();
            assert!((c - tau / r).abs() < 0.02 * tau / r, "C = {c}");
        }
    }
}

/// Time at which each point is measured, for a sweep from high to low frequency: each point takes
/// three periods plus half a second of settling (a typical single-sine procedure; common practice).
fn sweep_times(f: &[f64]) -> Vec<f64> {
    let mut t = 0.0;
    f.iter()
        .map(|&fi| {
            let start = t;
            t += 3.0 / fi + 0.5;
            start
        })
        .collect()
}

#[test]
fn drifting_parameters_are_flagged_at_low_frequency() {
    let c = parse("R0 + Rct|Qdl").unwrap();
    let plan = Plan::compile(&c);
    let f = freqs();
    let t = sweep_times(&f);
    let total = *t.last().unwrap();
    // Rct grows by 30 % over the sweep (e.g. a cell relaxing after a current pulse).
    let z: Vec<Complex64> = f
        .iter()
        .zip(&t)
        .map(|(&fi, &ti)| {
            let rct = 10.0 * (1.0 + 0.3 * ti / total);
            plan.impedance(&[1.0, rct, 1e-2, 0.9], angular(fi))
        })
        .collect();
    let s = Spectrum::new(f, z);
    let r = kramers_kronig(&s, &KkOptions::default()).unwrap();
    assert!(!r.valid, "{r:#?}");
    let (lo, hi) = r.suspect_frequency_range_hz.unwrap();
    // Most of the sweep time, and so most of the drift, is spent below 1 Hz.
    // The fit spreads the misfit over the arc (apex near 2 Hz), but the upper four decades stay clean.
    assert!(lo < 0.05 && hi < 50.0, "suspect range {lo}..{hi} Hz");
    // The same cell without drift passes.
    let steady = simulate(&plan, &[1.0, 10.0, 1e-2, 0.9], &s.frequency_hz, None);
    assert!(
        kramers_kronig(&steady, &KkOptions::default())
            .unwrap()
            .valid
    );
}

#[test]
fn corrupted_points_are_flagged_where_they_are() {
    let mut s = circuit_spectrum(
        "R0{1} + Rct{10}|Qdl{Q=1m, n=0.9} + Rf{3}|Qf{Q=10u, n=0.9}",
        Some(0.001),
    );
    // Two neighbouring points near 100 Hz read 4 % high in the real part (a contact glitch).
    let near: Vec<usize> = (0..s.len())
        .filter(|&i| (80.0..130.0).contains(&s.frequency_hz[i]))
        .collect();
    assert_eq!(near.len(), 2);
    for &i in &near {
        s.z[i].re *= 1.04;
    }
    let r = kramers_kronig(&s, &KkOptions::default()).unwrap();
    assert!(!r.valid);
    let (lo, hi) = r.suspect_frequency_range_hz.unwrap();
    assert!(lo >= 30.0 && hi <= 300.0, "suspect range {lo}..{hi} Hz");
}

#[test]
fn mu_keeps_the_fit_from_following_the_noise() {
    let s = circuit_spectrum("R0{1} + Rct{10}|Qdl{Q=1m, n=0.85}", Some(0.01));
    // Limits suited to 1 % noise (about 3.5 σ per point, 1.5 σ rms), so that the search can end in the
    // over-fitting regime rather than at the cap.
    let loose = KkOptions {
        max_residual_percent: 3.5,
        rms_residual_percent: 1.5,
        ..KkOptions::default()
    };
    let auto = kramers_kronig(&s, &loose).unwrap();
    assert!(auto.valid);
    assert!(auto.mu_reached, "the search saw the over-fitting regime");
    assert!(auto.mu >= 0.85, "the kept fit is not marked as over-fitted");
    assert!(auto.elements < s.len() / 3, "M = {}", auto.elements);
    // As many elements as points: alternating signs, and residuals well below the 1 % noise, i.e. noise
    // being fitted; μ flags it.
    let all = kramers_kronig(
        &s,
        &KkOptions {
            elements: Some(s.len()),
            ..KkOptions::default()
        },
    )
    .unwrap();
    assert!(all.mu < 0.5, "mu {} with M = N", all.mu);
    assert!(
        all.residual_rms_percent < 0.95 * auto.residual_rms_percent,
        "rms {} with M = N, {} automatic",
        all.residual_rms_percent,
        auto.residual_rms_percent
    );
    // The automatic fit sits at the noise level (1 % per part, less the share the fit absorbs).
    assert!(
        (0.6..1.1).contains(&auto.residual_rms_percent),
        "rms {}",
        auto.residual_rms_percent
    );
    // A stricter c keeps fewer elements.
    let strict = kramers_kronig(
        &s,
        &KkOptions {
            mu_threshold: 0.99,
            ..KkOptions::default()
        },
    )
    .unwrap();
    assert!(strict.elements <= auto.elements);
}

#[test]
fn an_ideal_rc_arc_passes_with_or_without_noise() {
    // A dummy cell R0 + R|C: a single time constant that falls between grid points for most M.
    for noise in [None, Some(0.002)] {
        let s = circuit_spectrum("R0{10} + Rct{100}|Cdl{20u}", noise);
        let r = kramers_kronig(&s, &KkOptions::default()).unwrap();
        assert!(
            r.valid,
            "noise {noise:?}: max {} %, M = {}",
            r.residual_max_percent, r.elements
        );
        assert!(r.mu >= KkOptions::default().mu_threshold);
    }
}

#[test]
fn time_constants_span_the_measured_range_and_half_a_decade_above() {
    // 0.1 Hz to 100 kHz with M = 14: two per decade, log-spaced as in the paper (Schönleber et al.
    // 2014), from 1/(√10 ω_max), half a decade beyond the highest frequency, to 1/ω_min.
    let t = time_constants(14, angular(0.1), angular(1e5));
    assert!(
        (t[0] - 5.03292e-7).abs() < 1e-11 && (t[13] - 1.59155).abs() < 1e-5,
        "{t:?}"
    );
    for k in 1..14 {
        assert!((t[k] / t[k - 1] - 10f64.sqrt()).abs() < 1e-9);
    }
}

#[test]
fn bad_inputs_are_errors_not_panics() {
    let two = Spectrum::new(vec![1.0, 2.0], vec![Complex64::new(1.0, 0.0); 2]);
    assert_eq!(
        kramers_kronig(&two, &KkOptions::default()).unwrap_err(),
        KkError::TooFewPoints(2)
    );
    let f: Vec<f64> = (1..=12).map(|k| k as f64).collect();
    let mut bad = Spectrum::new(f.clone(), vec![Complex64::new(1.0, -0.1); 12]);
    bad.frequency_hz[1] = 0.0;
    assert_eq!(
        kramers_kronig(&bad, &KkOptions::default()).unwrap_err(),
        bad_point(2)
    );
    let same = Spectrum::new(vec![1.0; 12], vec![Complex64::new(1.0, 0.0); 12]);
    assert_eq!(
        kramers_kronig(&same, &KkOptions::default()).unwrap_err(),
        KkError::NoRange
    );
    assert_eq!(
        KkError::TooFewPoints(2).to_string(),
        "too few points to test: the Kramers-Kronig check needs at least 10 points, the spectrum has 2"
    );
}

/// Issue 13: a spectrum of three points, perfectly consistent, was called valid; it is too short to
/// test, and says so.
#[test]
fn three_points_are_too_few_to_test_not_valid() {
    let plan = Plan::compile(&parse("R0 + Rct|Cdl").unwrap());
    let s = simulate(&plan, &[10.0, 100.0, 2e-5], &[1e3, 10.0, 0.1], None);
    let e = kramers_kronig(&s, &KkOptions::default()).unwrap_err();
    assert_eq!(e, KkError::TooFewPoints(3));
    assert!(e.to_string().starts_with("too few points to test"), "{e}");
    // Nine points: still too few; ten: tested.
    let nine = simulate(
        &plan,
        &[10.0, 100.0, 2e-5],
        &log_frequencies(1e5, 1e-3, 1)[..9],
        None,
    );
    assert_eq!(
        kramers_kronig(&nine, &KkOptions::default()).unwrap_err(),
        KkError::TooFewPoints(9)
    );
    let ten = simulate(
        &plan,
        &[10.0, 100.0, 2e-5],
        &log_frequencies(1e5, 1e-4, 1),
        None,
    );
    assert_eq!(ten.len(), 10);
    assert!(kramers_kronig(&ten, &KkOptions::default()).is_ok());
}

/// Issue 13: a flat spectrum (a pure resistance) gave μ = −∞ (all Voigt resistances round-off, the
/// first of them negative). μ must be finite, and the spectrum is consistent.
#[test]
fn a_flat_spectrum_has_a_finite_mu_and_is_valid() {
    let f = freqs();
    for r in [1e-3, 1.0, 47.0, 1e6] {
        let s = Spectrum::new(f.clone(), vec![Complex64::new(r, 0.0); f.len()]);
        let k = kramers_kronig(&s, &KkOptions::default()).unwrap();
        assert!(k.mu.is_finite() && k.mu >= MU_FLOOR, "R = {r}: mu {}", k.mu);
        assert!(k.valid, "R = {r}: {k:#?}");
        // R₀ carries it all (exact: common practice for a resistor).
        assert!((k.r0 / r - 1.0).abs() < 1e-9, "R = {r}: r0 {}", k.r0);
        // A fixed, large M too.
        let k = kramers_kronig(
            &s,
            &KkOptions {
                elements: Some(60),
                ..KkOptions::default()
            },
        )
        .unwrap();
        assert!(k.mu.is_finite(), "R = {r}, M = 60: mu {}", k.mu);
    }
    // All resistances negative and not negligible: the floor, not −∞.
    assert_eq!(solve::mu(&[-1.0, -2.0]), MU_FLOOR);
    assert_eq!(solve::mu(&[1e-15, -1e-15]), 1.0);
    assert!((solve::mu(&[2.0, -1.0]) - 0.5).abs() < 1e-15);
}

/// Issue 13: at |Z| ≈ 1e200 Ω the SVD fallback panicked ("singular value was NaN") and at 1e-160 Ω a
/// perfect spectrum was "suspect, 100 %". The same spectrum scaled by any factor from 1e-250 to
/// 1e250 gives the same verdict and the same relative results (linearity of the test: R₀, Rₖ and L
/// scale with Z, C inversely; Schönleber et al. 2014).
#[test]
fn verdict_and_relative_results_do_not_depend_on_the_scale_of_z() {
    let cases = [
        ("R0 + Rct|Cdl", None),
        ("R0 + Rct|Qdl{Q=1m, n=0.85}", Some(0.002)),
        ("R0 + Rct|Qdl{Q=1m, n=0.85} + C1", None),
    ];
    for (text, noise) in cases {
        let base = circuit_spectrum(text, noise);
        let reference = kramers_kronig(&base, &KkOptions::default()).unwrap();
        for scale in [1e-250, 1e-160, 1.0, 1e200, 1e250] {
            let mut s = base.clone();
            s.z.iter_mut().for_each(|z| *z *= scale);
            let k = kramers_kronig(&s, &KkOptions::default()).unwrap();
            let at = format!("{text} × {scale:e}");
            assert_eq!(k.valid, reference.valid, "{at}");
            assert_eq!(k.elements, reference.elements, "{at}");
            assert!(
                // μ is a ratio of sums of Rₖ of both signs, and the split of a fit between nearly
                // dependent Voigt columns moves with round-off: it agrees to 1e-3, the fit itself
                // (residuals, R₀ + ΣRₖ) far closer.
                (k.mu - reference.mu).abs() < 1e-3,
                "{at}: mu {} vs {}",
                k.mu,
                reference.mu
            );
            let close = |a: f64, b: f64, what: &str| {
                assert!(
                    // Relative, or absolute far below anything reported (1e-10 of |Z| or %).
                    (a - b).abs() <= (1e-9 * b.abs()).max(1e-10),
                    "{at}: {what} {a} vs {b}"
                )
            };
            close(
                k.residual_rms_percent,
                reference.residual_rms_percent,
                "rms",
            );
            // R₀ and the Rₖ are less well determined than the fit (the fastest Voigt element, half a
            // decade above the highest frequency, is nearly a resistance too, and the slowest trades
            // with a series C): 1e-5.
            let rsum: f64 = k.resistances.iter().sum();
            let rsum0: f64 = reference.resistances.iter().sum();
            for (a, b, what) in [
                (k.r0, reference.r0, "R0"),
                (k.r0 + rsum, reference.r0 + rsum0, "R0 + ΣRk"),
            ] {
                assert!(
                    (a / scale - b).abs() <= 1e-5 * b.abs(),
                    "{at}: {what} {} vs {b}",
                    a / scale
                );
            }
            if let (Some(c), Some(c0)) = (k.capacitance, reference.capacitance) {
                assert!(
                    (c * scale - c0).abs() <= 1e-5 * c0.abs(),
                    "{at}: C {c} vs {c0}"
                );
            }
            for (a, b) in k.residual_re.iter().zip(&reference.residual_re) {
                assert!((a - b).abs() < 1e-11, "{at}: residual {a} vs {b}");
            }
        }
    }
}

/// Issue 13: 100,000 points made the test allocate a 2N × N/2 matrix (80 GB) and abort. The number of
/// elements, and with it every buffer (2N rows × M columns), is bounded by MAX_ELEMENTS whatever the
/// options ask for; the times are in `benches/kk.rs`.
#[test]
fn the_number_of_elements_is_bounded_whatever_the_size() {
    let plan = Plan::compile(&parse("R0 + Rct|Qdl{Q=1m, n=0.85}").unwrap());
    // 400 points: the old default cap N/2 = 200 lies above MAX_ELEMENTS.
    let f: Vec<f64> = (0..400)
        .map(|i| 1e5 * 10f64.powf(-7.0 * i as f64 / 399.0))
        .collect();
    let s = simulate(
        &plan,
        &[1.0, 10.0, 1e-3, 0.85],
        &f,
        Some(Noise {
            relative: 0.002,
            seed: SEED,
        }),
    );
    for options in [
        KkOptions {
            elements: Some(usize::MAX),
            ..KkOptions::default()
        },
        KkOptions {
            max_elements: Some(usize::MAX),
            // Limits that nothing passes, so that the search runs to its cap.
            max_residual_percent: 0.0,
            outlier_factor: 0.0,
            ..KkOptions::default()
        },
    ] {
        let k = kramers_kronig(&s, &options).unwrap();
        assert_eq!(k.elements, MAX_ELEMENTS.min(k.elements.max(1)));
        assert!(k.elements <= MAX_ELEMENTS, "M = {}", k.elements);
    }
    // The workspace's matrix is 2N × (M + fixed columns), never 2N × N/2.
    let w: Vec<f64> = f.iter().map(|&f| angular(f)).collect();
    let d = Design {
        inductance: true,
        capacitance: true,
    };
    let ws = solve::Workspace::new(&w, &s.z, d, MAX_ELEMENTS);
    assert_eq!(ws.matrix_len(), 2 * f.len() * (MAX_ELEMENTS + 3));
}

/// Issue 13: degenerate spectra end in a report or a typed error, never a panic: repeated frequencies,
/// equal impedances, NaN, a mismatch of lengths, the smallest and largest finite values.
#[test]
fn degenerate_spectra_give_reports_or_typed_errors() {
    let o = KkOptions::default();
    let base = circuit_spectrum("R0 + Rct|Cdl", Some(0.002));
    // Every frequency twice.
    let mut twice = base.clone();
    twice.frequency_hz.extend(base.frequency_hz.clone());
    twice.z.extend(base.z.clone());
    assert!(kramers_kronig(&twice, &o).is_ok());
    // Two frequencies only, many points.
    let two_f: Vec<f64> = (0..20)
        .map(|i| if i % 2 == 0 { 1.0 } else { 10.0 })
        .collect();
    let s = Spectrum::new(two_f, vec![Complex64::new(1.0, -0.5); 20]);
    assert!(kramers_kronig(&s, &o).is_ok());
    // NaN and infinite values are typed errors naming the point.
    for bad in [f64::NAN, f64::INFINITY] {
        let mut s = base.clone();
        s.z[4].im = bad;
        assert_eq!(kramers_kronig(&s, &o).unwrap_err(), bad_point(5));
        let mut s = base.clone();
        s.frequency_hz[6] = bad;
        assert_eq!(kramers_kronig(&s, &o).unwrap_err(), bad_point(7));
    }
    let mut s = base.clone();
    s.frequency_hz[0] = -1.0;
    assert_eq!(kramers_kronig(&s, &o).unwrap_err(), bad_point(1));
    // A frequency so large that ω = 2πf overflows.
    let mut s = base.clone();
    s.frequency_hz[0] = f64::MAX;
    assert_eq!(kramers_kronig(&s, &o).unwrap_err(), bad_point(1));
    let mut s = base.clone();
    s.z.pop();
    assert!(matches!(
        kramers_kronig(&s, &o).unwrap_err(),
        KkError::LengthMismatch { .. }
    ));
    // Frequencies and impedances at the ends of the finite range.
    let f: Vec<f64> = (0..12).map(|i| 10f64.powi(-300 + 50 * i)).collect();
    for z in [f64::MIN_POSITIVE, 1e-300, 1e300, f64::MAX / 4.0] {
        let s = Spectrum::new(f.clone(), vec![Complex64::new(z, -z / 3.0); 12]);
        let r = kramers_kronig(&s, &o);
        if let Ok(k) = r {
            assert!(
                k.mu.is_finite() && k.residual_rms_percent.is_finite(),
                "{z}: {} {} {:?}",
                k.mu,
                k.residual_rms_percent,
                k.resistances
            );
        }
    }
}

/// The slow, plainly written reference: the scaled design matrix solved by SVD (the method used
/// before the normal equations), returning the unknowns in the report's order and χ².
fn reference_fit(w: &[f64], z: &[Complex64], m: usize, d: Design) -> (Vec<f64>, f64) {
    use nalgebra::{DMatrix, DVector};
    let n = w.len();
    let w_min = w.iter().cloned().fold(f64::INFINITY, f64::min);
    let w_max = w.iter().cloned().fold(0.0, f64::max);
    let taus = time_constants(m, w_min, w_max);
    let cols = d.fixed() + m;
    let mut a = DMatrix::<f64>::zeros(2 * n, cols);
    let mut b = DVector::<f64>::zeros(2 * n);
    for i in 0..n {
        let weight = 1.0 / z[i].norm();
        b[i] = z[i].re * weight;
        b[n + i] = z[i].im * weight;
        a[(i, 0)] = weight;
        for (k, &tau) in taus.iter().enumerate() {
            let v = weight / Complex64::new(1.0, w[i] * tau);
            a[(i, 1 + k)] = v.re;
            a[(n + i, 1 + k)] = v.im;
        }
        let mut c = 1 + m;
        if d.inductance {
            a[(n + i, c)] = weight * w[i];
            c += 1;
        }
        if d.capacitance {
            a[(n + i, c)] = -weight / w[i];
        }
    }
    let norms: Vec<f64> = (0..cols).map(|j| a.column(j).norm()).collect();
    for (j, &s) in norms.iter().enumerate() {
        a.column_mut(j).scale_mut(1.0 / s);
    }
    let svd = a.clone().svd(true, true);
    let x = svd.solve(&b, 1e-13 * svd.singular_values.max()).unwrap();
    let chi2 = (&a * &x - &b).norm_squared();
    ((0..cols).map(|j| x[j] / norms[j]).collect(), chi2)
}

#[test]
fn normal_equations_agree_with_the_svd_reference() {
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../circuits");
    let (mut fast, mut total) = (0, 0);
    for entry in std::fs::read_dir(&dir).unwrap() {
        let path = entry.unwrap().path();
        let text = std::fs::read_to_string(&path).unwrap();
        let name = path.file_name().unwrap().to_string_lossy().into_owned();
        for noise in [None, Some(0.005)] {
            let s = circuit_spectrum(&text, noise);
            let w: Vec<f64> = s.frequency_hz.iter().map(|&f| angular(f)).collect();
            for d in [
                Design {
                    inductance: false,
                    capacitance: false,
                },
                Design {
                    inductance: true,
                    capacitance: true,
                },
            ] {
                let m_max = s.len() / 2;
                let mut ws = Workspace::new(&w, &s.z, d, m_max);
                for m in 1..=m_max {
                    let f = ws.fit(m);
                    let (x, chi2) = reference_fit(&w, &s.z, m, d);
                    total += 1;
                    // Same minimum of the least-squares problem (χ² to 10⁻⁶ relative or 10⁻¹⁴
                    // absolute, i.e. residuals of 10⁻⁷ of |Z|).
                    assert!(
                        (f.chi2 - chi2).abs() <= 1e-6 * chi2 + 1e-14,
                        "{name} {noise:?} M = {m}: χ² {} vs {chi2}",
                        f.chi2
                    );
                    if f.svd {
                        continue;
                    }
                    fast += 1;
                    // Where the normal equations are used, the unknowns and μ agree too (10⁻⁴ of the
                    // largest |x|: the Cholesky pivots stay above 10⁻¹⁰, a condition number of
                    // up to about 10¹⁰, and the fastest time constants, half a decade above the
                    // highest frequency, are close to R₀'s column).
                    let scale = x.iter().fold(0.0f64, |a, v| a.max(v.abs()));
                    for (a, b) in f.x.iter().zip(&x) {
                        assert!(
                            (a - b).abs() <= 1e-4 * scale,
                            "{name} {noise:?} M = {m}: {:?} vs {x:?}",
                            f.x
                        );
                    }
                    let mu_ref = solve::mu(&x[1..=m]);
                    // μ divides sums of Rₖ that nearly cancel, so it agrees less closely than x.
                    assert!(
                        (f.mu - mu_ref).abs() < 1e-4,
                        "{name} M = {m}: μ {} vs {mu_ref}",
                        f.mu
                    );
                }
            }
        }
    }
    // The fallback is the exception, not the rule.
    assert!(
        4 * fast > 3 * total,
        "normal equations in {fast} of {total} fits"
    );
}

#[test]
fn runs_and_scatter_statistics() {
    let order: Vec<usize> = (0..40).collect();
    // Alternating signs: more runs than chance, z > 0; two blocks: very few runs, z ≪ 0.
    let alternating: Vec<f64> = (0..40)
        .map(|i| if i % 2 == 0 { 1.0 } else { -1.0 })
        .collect();
    let blocks: Vec<f64> = (0..40).map(|i| if i < 20 { 1.0 } else { -1.0 }).collect();
    assert!(verdict::runs_z(&alternating, &alternating, &order) > 5.0);
    assert!(verdict::runs_z(&blocks, &blocks, &order) < -5.0);
    // A straight-line trend has equal neighbouring differences: σ̂ is that difference/√2, far below
    // the rms of the trend itself.
    let line: Vec<f64> = (0..40).map(|i| (i as f64 - 19.5) * 1e-4).collect();
    let mut buf = Vec::new();
    let sc = verdict::scatter(&line, &line, &order, &mut buf);
    assert!((sc - 1e-4 / (0.674_489_750_196_081_7 * 2f64.sqrt())).abs() < 1e-12);
    // Gaussian noise: σ̂ recovers σ within 15 % from 2 × 199 differences (seeded).
    let mut z = vec![Complex64::new(1.0, 0.0); 200];
    crate::simulate::add_noise(
        &mut z,
        Noise {
            relative: 0.01,
            seed: SEED,
        },
    );
    let re: Vec<f64> = z.iter().map(|v| v.re - 1.0).collect();
    let im: Vec<f64> = z.iter().map(|v| v.im).collect();
    let order: Vec<usize> = (0..200).collect();
    let sc = verdict::scatter(&re, &im, &order, &mut buf);
    assert!((sc / 0.01 - 1.0).abs() < 0.15, "σ̂ = {sc}");
    assert!(verdict::runs_z(&re, &im, &order).abs() < 3.0);
}

/// Seeds of the noise-level tests: three spectra per circuit and level.
const SEEDS: [u64; 3] = [SEED, SEED + 1, SEED + 2];

#[test]
fn library_spectra_pass_at_ordinary_noise_with_the_defaults() {
    // 0.1, 0.5 and 1 % of |Z| on each part: the largest of 142 residuals is about 3σ, i.e. up to 3 %
    // at 1 % noise, which the old fixed 1 % per-point limit called suspect.
    let mut seen = 0;
    for (name, text) in circuit_library() {
        let c = parse(&text).unwrap();
        let plan = Plan::compile(&c);
        for relative in [0.001, 0.005, 0.01] {
            for seed in SEEDS {
                let s = simulate(
                    &plan,
                    &c.default_values(),
                    &freqs(),
                    Some(Noise { relative, seed }),
                );
                let r = kramers_kronig(&s, &KkOptions::default()).unwrap();
                assert!(r.valid, "{name}, {relative} noise, seed {seed}: {r:#?}");
                assert!(r.suspect_frequency_range_hz.is_none());
                // The scatter estimate tracks the noise (less the share the fit absorbs, more a
                // smooth misfit left under the limits: up to 1.32 for the inductive full cell at
                // 0.1 %, whose lowest point the kept fit does not quite reach).
                let ratio = r.residual_scatter_percent / (100.0 * relative);
                assert!(
                    (0.7..1.35).contains(&ratio),
                    "{name}, {relative}: σ̂/σ = {ratio}"
                );
                seen += 1;
            }
        }
    }
    assert!(seen >= 6 * 9);
}

/// Rct of R0 + Rct|Qdl growing by `growth` over the sweep (see [`sweep_times`]), with seeded noise.
fn drifting_spectrum(growth: f64, noise: f64) -> Spectrum {
    let plan = Plan::compile(&parse("R0 + Rct|Qdl").unwrap());
    let f = freqs();
    let t = sweep_times(&f);
    let total = *t.last().unwrap();
    let mut z: Vec<Complex64> = f
        .iter()
        .zip(&t)
        .map(|(&fi, &ti)| {
            let rct = 10.0 * (1.0 + growth * ti / total);
            plan.impedance(&[1.0, rct, 1e-2, 0.9], angular(fi))
        })
        .collect();
    crate::simulate::add_noise(
        &mut z,
        Noise {
            relative: noise,
            seed: SEED,
        },
    );
    Spectrum::new(f, z)
}

#[test]
fn drift_of_ten_to_thirty_percent_is_flagged_at_low_frequency() {
    for growth in [0.1, 0.2, 0.3] {
        for noise in [0.001, 0.005] {
            let r =
                kramers_kronig(&drifting_spectrum(growth, noise), &KkOptions::default()).unwrap();
            assert!(!r.valid, "{growth} drift, {noise} noise: {r:#?}");
            let (lo, hi) = r.suspect_frequency_range_hz.unwrap();
            // Most of the sweep time, and so most of the drift, is spent below 1 Hz; the lowest
            // frequency (10 mHz) is in the range and the upper four decades stay clean.
            assert!(
                lo <= 0.0101 && hi < 10.0,
                "{growth} drift, {noise} noise: suspect range {lo}..{hi} Hz"
            );
        }
    }
    // The limit of detection: 10 % drift hidden in 1 % noise leaves a systematic residual of about
    // half the noise, which no test here can tell from chance; documented in the module docs.
    let r = kramers_kronig(&drifting_spectrum(0.1, 0.01), &KkOptions::default()).unwrap();
    assert!(r.residual_systematic_percent < r.residual_scatter_percent);
}

#[test]
fn corrupted_points_are_flagged_at_ordinary_noise() {
    for noise in [0.001, 0.005] {
        let mut s = circuit_spectrum(
            "R0{1} + Rct{10}|Qdl{Q=1m, n=0.9} + Rf{3}|Qf{Q=10u, n=0.9}",
            Some(noise),
        );
        // Two neighbouring points near 100 Hz read 4 % high in the real part.
        for i in 0..s.len() {
            if (80.0..130.0).contains(&s.frequency_hz[i]) {
                s.z[i].re *= 1.04;
            }
        }
        let r = kramers_kronig(&s, &KkOptions::default()).unwrap();
        assert!(!r.valid && r.failed.points, "{noise}: {r:#?}");
        let (lo, hi) = r.suspect_frequency_range_hz.unwrap();
        assert!(
            lo >= 30.0 && hi <= 300.0,
            "{noise}: suspect range {lo}..{hi} Hz"
        );
    }
}

/// Issue 13: above SVD_MAX_ROWS the fallback for nearly dependent columns uses the Gram matrix's
/// eigen-decomposition (a failing 100,000-point spectrum took 159 s with the SVD of the 2N × p
/// matrix, 5 s now). It cannot resolve directions below about 10⁻⁶ of the largest singular value,
/// so deep in the over-fitting regime its χ² lies a little above the SVD's minimum: the rms
/// residuals differ by less than 0.05 % of |Z|, a sixth of the smallest limit of the verdict (the
/// 0.3 % trend floor).
#[test]
fn the_gram_fallback_reaches_the_svd_minimum() {
    for (text, noise) in [
        ("R0 + Rct|Qdl{Q=1m, n=0.85}", Some(0.002)),
        ("R0 + Rct|Cdl", None),
    ] {
        let s = circuit_spectrum(text, noise);
        let w: Vec<f64> = s.frequency_hz.iter().map(|&f| angular(f)).collect();
        let d = Design {
            inductance: false,
            capacitance: false,
        };
        let mut svd = solve::Workspace::new(&w, &s.z, d, 70);
        let mut gram = solve::Workspace::new(&w, &s.z, d, 70);
        gram.svd_max_rows = 0;
        let mut compared = 0;
        for m in 20..=70 {
            let a = svd.fit(m);
            let b = gram.fit(m);
            if !a.svd {
                continue;
            }
            compared += 1;
            let rows = 2.0 * s.len() as f64;
            let (rms_a, rms_b) = ((a.chi2 / rows).sqrt(), (b.chi2 / rows).sqrt());
            assert!(
                (rms_a - rms_b).abs() < 5e-4 && b.chi2 >= a.chi2 * (1.0 - 1e-9),
                "{text} M = {m}: rms {rms_b} (Gram) vs {rms_a} (SVD)"
            );
            assert!(b.x.iter().all(|v| v.is_finite()) && b.mu.is_finite());
        }
        assert!(compared >= 1, "{text}: fallback used for {compared} M");
    }
}

mod false_alarms;
