//! Tests of the DRT.

use super::lambda::Problem;
use super::*;
use crate::circuit::parse;
use crate::eval::{Plan, log_frequencies};
use crate::simulate::{Noise, simulate};
use nalgebra::DMatrix;
use serde_json::Value;

const FIXTURE: &str = include_str!("../../../tests/reference/drt_fixture.json");

fn fixture() -> Value {
    serde_json::from_str(FIXTURE).unwrap()
}

fn matrix(v: &Value) -> DMatrix<f64> {
    let rows: Vec<Vec<f64>> = v
        .as_array()
        .unwrap()
        .iter()
        .map(crate::testing::floats)
        .collect();
    DMatrix::from_fn(rows.len(), rows[0].len(), |r, c| rows[r][c])
}

/// 1 kHz … 0.1 Hz would be too narrow for the circuits below: use 100 kHz … 0.1 Hz, 10 per decade
/// (61 points), the range of the benchmark.
fn spectrum(circuit: &str, params: &[f64], noise: Option<Noise>) -> Spectrum {
    let plan = Plan::compile(&parse(circuit).unwrap());
    simulate(&plan, params, &log_frequencies(1e5, 0.1, 10), noise)
}

/// The RC arc of the tests, R0 + R1|C1 with R0 = 5 Ω, R1 = 50 Ω, C1 = 20 µF (τ = 1 ms).
fn rc(noise: Option<Noise>) -> Spectrum {
    spectrum("R0 + R1|C1", &[5.0, 50.0, 20e-6], noise)
}

/// Cole & Cole 1941 (J. Chem. Phys. 9, 341) distribution of a ZARC R/(1 + (jωτ₀)^φ), in ln τ (the
/// DRT convention of Wan, Saccoccio, Chen & Ciucci 2015, Electrochim. Acta 184, 483).
fn cole_cole(r: f64, tau0: f64, phi: f64, tau: f64) -> f64 {
    let y = (tau / tau0).ln();
    r / (2.0 * PI) * ((1.0 - phi) * PI).sin() / ((phi * y).cosh() - ((1.0 - phi) * PI).cos())
}

#[test]
fn drt_kernel_matches_scipy_quadrature() {
    // Reference: scipy.integrate.quad through tests/reference/drt_reference.py.
    let fx = fixture();
    let f = crate::testing::floats(&fx["frequency_hz"]);
    let setup = DrtSetup::new(&f, DrtOptions::default()).unwrap();
    crate::assert_close!(
        setup.epsilon(),
        fx["epsilon"].as_f64().unwrap(),
        1e-14,
        "epsilon"
    );
    for (k, c) in crate::testing::floats(&fx["centres_ln_tau"])
        .iter()
        .enumerate()
    {
        assert!((setup.centres[k] - c).abs() < 1e-12, "centre {k}");
    }
    let (re, im) = (matrix(&fx["kernel_re"]), matrix(&fx["kernel_im"]));
    let dev_re = (&setup.kernel_re - &re).amax();
    let dev_im = (&setup.kernel_im - &im).amax();
    eprintln!(
        "kernel: max deviation from quadrature {dev_re:.1e} (real), {dev_im:.1e} (imaginary)"
    );
    assert!(
        dev_re < 1e-12 && dev_im < 1e-12,
        "kernel deviates by {dev_re:e} / {dev_im:e}"
    );
}

#[test]
fn drt_gram_matches_quadrature() {
    // Reference: quadrature of products of derivatives (SciPy, drt_reference.py); order 1 is the
    // closed form given for Gaussian RBFs (Wan, Saccoccio, Chen & Ciucci 2015, Electrochim. Acta
    // 184, 483), order 2 the one derived in `gaussian_gram`.
    let fx = fixture();
    let eps = fx["epsilon"].as_f64().unwrap();
    let y = crate::testing::floats(&fx["centres_ln_tau"]);
    for (order, key) in [(1u8, "gram1_quad"), (2, "gram2_quad")] {
        let q = matrix(&fx[key]);
        let scale = q.amax();
        for i in 0..y.len() {
            for j in 0..y.len() {
                let d = gaussian_gram(order, eps, y[i] - y[j]) - q[(i, j)];
                assert!(
                    d.abs() < 1e-12 * scale,
                    "order {order} entry ({i},{j}) off by {d:e}"
                );
            }
        }
    }
    // Hand check at d = 0: ∫φ′² = ε√(π/2), ∫φ″² = 3ε³√(π/2).
    let c = (PI / 2.0).sqrt();
    crate::assert_close!(
        gaussian_gram(1, 2.0, 0.0),
        2.0 * c,
        1e-15,
        "order 1 at d = 0"
    );
    crate::assert_close!(
        gaussian_gram(2, 2.0, 0.0),
        24.0 * c,
        1e-15,
        "order 2 at d = 0"
    );
}

#[test]
fn drt_design_matches_reference_recipe() {
    let fx = fixture();
    let f = crate::testing::floats(&fx["frequency_hz"]);
    let z = crate::testing::impedances(&fx["z_re"], &fx["z_im"]);
    let setup = DrtSetup::new(&f, DrtOptions::default().with_capacitance(false)).unwrap();
    let w: Vec<f64> = z.iter().map(|v| 1.0 / v.norm()).collect();
    let r_ref = z.iter().fold(0.0f64, |a, v| a.max(v.norm()));
    let (a, b) = setup.design(&z, &w, r_ref);
    assert!((&a - matrix(&fx["design"])).amax() < 1e-11);
    assert!((&b - DVector::from_vec(crate::testing::floats(&fx["data"]))).amax() < 1e-14);
    assert!((&setup.penalty - matrix(&fx["penalty"])).amax() < 1e-9);
}

#[test]
fn drt_regularised_nnls_matches_scipy() {
    // Reference: scipy.optimize.nnls on the augmented system of the same problem (drt_reference.py).
    let fx = fixture();
    let c_mat = matrix(&fx["design"]);
    let b = DVector::from_vec(crate::testing::floats(&fx["data"]));
    let pen = matrix(&fx["penalty"]);
    let mut problem = Problem::new(&c_mat, &b, &pen);
    for case in fx["cases"].as_array().unwrap() {
        let lambda = case["lambda"].as_f64().unwrap();
        let want = DVector::from_vec(crate::testing::floats(&case["x"]));
        problem.warm = false;
        problem.eval(lambda).unwrap();
        let dev = (&problem.x - &want).amax() / want.amax();
        eprintln!("λ = {lambda}: max |x − x_scipy| / max x_scipy = {dev:.1e}");
        assert!(
            dev < 1e-9,
            "λ = {lambda}: x deviates by {dev:e} relative to max x"
        );
        let r = &c_mat * &problem.x - &b;
        let obj = r.norm_squared() + lambda * problem.x.dot(&(&pen * &problem.x));
        let want_obj = case["objective"].as_f64().unwrap();
        assert!(
            obj <= want_obj * (1.0 + 1e-9),
            "λ = {lambda}: objective {obj} vs SciPy {want_obj}"
        );
        eprintln!("λ = {lambda}: objective {obj:.12e}, SciPy {want_obj:.12e}");
        crate::assert_close!(obj, want_obj, 1e-8, "objective");
        let free = problem.x.iter().filter(|v| **v > 0.0).count() as u64;
        assert_eq!(
            free,
            case["free"].as_u64().unwrap(),
            "λ = {lambda}: free variables"
        );
    }
}

#[test]
fn drt_zarc_matches_cole_cole_distribution() {
    // ZARC R/(1 + (jωτ₀)^φ) written as R1|Q1 with Q = τ₀^φ/R, n = φ (Cole & Cole 1941); its DRT is
    // the Cole–Cole distribution (Cole & Cole 1941), peaked at τ₀ with area R and height
    // (R/2π)·tan(φπ/2).
    let (r0, r, tau0, phi): (f64, f64, f64, f64) = (10.0, 100.0, 1e-3, 0.8);
    let s = spectrum("R0 + R1|Q1", &[r0, r, tau0.powf(phi) / r, phi], None);
    let res = drt(&s, DrtOptions::default()).unwrap();
    assert_eq!(res.peaks.len(), 1, "{:?}", res.peaks);
    let p = res.peaks[0];
    // Stated tolerance: the peak within 2 % of τ₀ (0.009 decades), the area within 2 % of R.
    crate::assert_close!(p.tau_s, tau0, 0.02, "peak τ");
    crate::assert_close!(p.resistance_ohm, r, 0.02, "peak area");
    crate::assert_close!(res.r_pol_ohm, r, 0.02, "polarisation resistance");
    crate::assert_close!(
        p.gamma_ohm,
        r / (2.0 * PI) * (phi * PI / 2.0).tan(),
        0.05,
        "peak height"
    );
    crate::assert_close!(res.r_inf_ohm, r0, 0.01, "R∞");
    // Shape: within the measured τ range, γ follows the analytic distribution to 3 % of its peak.
    let peak = cole_cole(r, tau0, phi, tau0);
    let (tmin, tmax) = (1.0 / (2.0 * PI * 1e5), 1.0 / (2.0 * PI * 0.1));
    for (t, g) in res.tau_s.iter().zip(&res.gamma_ohm) {
        if (tmin..=tmax).contains(t) {
            let want = cole_cole(r, tau0, phi, *t);
            assert!(
                (g - want).abs() < 0.03 * peak,
                "γ({t:e}) = {g}, Cole–Cole {want}"
            );
        }
    }
    assert!(res.residual_rms < 1e-3, "rms residual {}", res.residual_rms);
}

#[test]
fn drt_single_rc_gives_one_peak_at_rc() {
    // An RC element's DRT is R·δ(ln τ − ln RC) (Wan et al. 2015, the model Z = R∞ + ∫γ/(1+jωτ) d ln τ):
    // one peak at τ = RC with area R.
    let (r, c) = (50.0, 20e-6);
    for noise in [
        None,
        Some(Noise {
            relative: 0.002,
            seed: 11,
        }),
    ] {
        let s = spectrum("R0 + R1|C1", &[5.0, r, c], noise);
        let res = drt(&s, DrtOptions::default()).unwrap();
        assert_eq!(res.peaks.len(), 1, "noise {noise:?}: {:?}", res.peaks);
        crate::assert_close!(res.peaks[0].tau_s, r * c, 0.02, "τ");
        crate::assert_close!(
            res.peaks[0].frequency_hz,
            1.0 / (2.0 * PI * r * c),
            0.02,
            "frequency"
        );
        crate::assert_close!(res.peaks[0].resistance_ohm, r, 0.02, "area");
        crate::assert_close!(res.r_inf_ohm, 5.0, 0.02, "R∞");
    }
}

#[test]
fn drt_two_arcs_a_decade_apart_give_two_peaks() {
    // Two RC arcs: two δ functions, at R1·C1 and R2·C2 (Wan et al. 2015).
    for (c2, noise) in [
        (5e-6, None), // one decade apart
        (
            5e-5,
            Some(Noise {
                relative: 0.002,
                seed: 5,
            }),
        ), // two decades, noisy
    ] {
        let (r1, c1, r2) = (40.0, 2.5e-7, 20.0);
        let s = spectrum("R0 + R1|C1 + R2|C2", &[2.0, r1, c1, r2, c2], noise);
        let res = drt(&s, DrtOptions::default()).unwrap();
        assert_eq!(res.peaks.len(), 2, "C2 = {c2}: {:?}", res.peaks);
        crate::assert_close!(res.peaks[0].tau_s, r1 * c1, 0.05, "τ1");
        crate::assert_close!(res.peaks[1].tau_s, r2 * c2, 0.05, "τ2");
        crate::assert_close!(res.peaks[0].resistance_ohm, r1, 0.03, "R1");
        crate::assert_close!(res.peaks[1].resistance_ohm, r2, 0.03, "R2");
        let sum: f64 = res.peaks.iter().map(|p| p.resistance_ohm).sum();
        crate::assert_close!(sum, res.r_pol_ohm, 0.005, "peak areas add up to ∫γ");
    }
}

#[test]
fn drt_options_all_run_and_agree_on_an_rc() {
    let s = rc(Some(Noise {
        relative: 0.002,
        seed: 2,
    }));
    let variants = [
        DrtOptions::default().with_lambda(LambdaMethod::LCurve),
        DrtOptions::default().with_lambda(LambdaMethod::Fixed(1e-4)),
        DrtOptions::default().with_penalty(Penalty::First),
        DrtOptions::default().with_weighting(Weighting::Unit),
        DrtOptions::default().with_part(Part::Real),
        DrtOptions::default().with_part(Part::Imaginary),
    ];
    for o in variants {
        let res = drt(&s, o).unwrap();
        assert_eq!(res.peaks.len(), 1, "{o:?}: {:?}", res.peaks);
        crate::assert_close!(res.peaks[0].tau_s, 1e-3, 0.05, "τ");
        crate::assert_close!(res.peaks[0].resistance_ohm, 50.0, 0.03, "R");
        crate::assert_close!(res.r_inf_ohm, 5.0, 0.05, "R∞");
        assert_eq!(
            res.lambda_scan.is_empty(),
            matches!(o.lambda(), LambdaMethod::Fixed(_))
        );
        // The choices are typed in the result and keep their words in text and JSON.
        assert_eq!(res.lambda_method, o.lambda());
        assert_eq!(res.part, o.part());
        let json = serde_json::to_value(&res).unwrap();
        assert_eq!(json["lambda_method"], o.lambda().name());
        assert_eq!(json["part"], o.part().name());
        assert_eq!(res.part.to_string(), o.part().name());
        // Residuals in JSON are in percent, as the text output, and the keys say so.
        assert_eq!(json["residual_rms_percent"], 100.0 * res.residual_rms);
        assert_eq!(
            json["residual_real_percent"][3],
            100.0 * res.residual_real[3]
        );
        assert!(json.get("residual_rms").is_none());
    }
}

#[test]
fn drt_recovers_a_series_inductance() {
    let s = spectrum("L0 + R0 + R1|C1", &[2e-6, 5.0, 50.0, 20e-6], None);
    for part in [Part::Both, Part::Real] {
        let res = drt(
            &s,
            DrtOptions::default().with_inductance(true).with_part(part),
        )
        .unwrap();
        crate::assert_close!(res.inductance_h.unwrap(), 2e-6, 0.02, "L");
        assert_eq!(res.peaks.len(), 1);
        crate::assert_close!(res.peaks[0].resistance_ohm, 50.0, 0.02, "R");
    }
    let res = drt(&s, DrtOptions::default()).unwrap();
    assert_eq!(res.inductance_h, None);
}

#[test]
fn drt_setup_reuse_gives_the_same_result() {
    let s = rc(Some(Noise {
        relative: 0.002,
        seed: 9,
    }));
    let setup = DrtSetup::new(&s.frequency_hz, DrtOptions::default()).unwrap();
    let a = setup.solve(&s.z).unwrap();
    let b = setup.solve(&s.z).unwrap();
    assert_eq!(a, b);
    assert_eq!(a, drt(&s, DrtOptions::default()).unwrap());
}

#[test]
fn drt_rejects_bad_input() {
    let good = rc(None);
    let kind = |s: &Spectrum| drt(s, DrtOptions::default()).unwrap_err().kind().clone();
    assert_eq!(kind(&Spectrum::default()), DrtErrorKind::Empty);
    let mut few = good.clone();
    few.frequency_hz.truncate(4);
    few.z.truncate(4);
    assert_eq!(
        kind(&few),
        DrtErrorKind::TooFewPoints {
            found: 4,
            needed: 5
        }
    );
    let mut repeated = good.clone();
    repeated.frequency_hz = vec![10.0; good.len()];
    assert!(matches!(
        kind(&repeated),
        DrtErrorKind::TooFewPoints { found: 1, .. }
    ));
    for bad in [f64::NAN, -1.0, 0.0, f64::INFINITY] {
        let mut s = good.clone();
        s.frequency_hz[3] = bad;
        assert!(
            matches!(kind(&s), DrtErrorKind::BadFrequency { point: 4, .. }),
            "{bad}"
        );
    }
    let mut s = good.clone();
    s.z[7].im = f64::NAN;
    assert_eq!(kind(&s), DrtErrorKind::NonFiniteImpedance { point: 8 });
    let mut s = good.clone();
    s.z[0] = Complex64::new(0.0, 0.0);
    assert_eq!(kind(&s), DrtErrorKind::ZeroImpedance { point: 1 });
    let mut s = good.clone();
    s.z.pop();
    assert!(matches!(kind(&s), DrtErrorKind::LengthMismatch { .. }));
    let setup = DrtSetup::new(&good.frequency_hz, DrtOptions::default()).unwrap();
    assert!(matches!(
        setup.solve(&good.z[1..]).unwrap_err().kind(),
        DrtErrorKind::SetupMismatch { .. }
    ));
    let bad_options = [
        DrtOptions::default().with_rbf_width(0.0),
        DrtOptions::default().with_rbf_width(f64::NAN),
        DrtOptions::default().with_lambda(LambdaMethod::Fixed(-1.0)),
        DrtOptions::default().with_lambda(LambdaMethod::Fixed(f64::NAN)),
        DrtOptions::default().with_lambda_range(1.0, 1e-3),
        DrtOptions::default().with_lambda_range(0.0, 1.0),
        DrtOptions::default().with_grid_per_decade(1),
        DrtOptions::default().with_scan_per_decade(0),
        DrtOptions::default().with_peak_threshold(1.0),
    ];
    for o in bad_options {
        let e = drt(&good, o).unwrap_err();
        assert!(matches!(e.kind(), DrtErrorKind::BadOption { .. }), "{o:?}");
        assert!(e.is_input_error());
        let text = e.to_string();
        assert!(
            text.contains("out of range") && !text.ends_with('.'),
            "{text}"
        );
    }
    // Messages name the offending point.
    let mut s = good.clone();
    s.frequency_hz[3] = -1.0;
    assert_eq!(
        drt(&s, DrtOptions::default()).unwrap_err().to_string(),
        "point 4: frequency -1 Hz is not usable (it must be positive, with 2πf and 1/(2πf) finite)"
    );
}

/// Issue 13: the basis had one function per distinct frequency, so memory grew as N² and time as
/// N³ (2,000 points took over a minute). It is bounded by MAX_BASIS whatever N; the times are in
/// `benches/drt.rs`.
#[test]
fn the_basis_is_bounded_whatever_the_number_of_points() {
    let f: Vec<f64> = (0..1500)
        .map(|i| 1e5 * 10f64.powf(-7.0 * i as f64 / 1499.0))
        .collect();
    let setup = DrtSetup::new(&f, DrtOptions::default()).unwrap();
    assert_eq!(setup.centres.len(), MAX_BASIS);
    assert_eq!(setup.kernel_re.shape(), (1500, MAX_BASIS));
    // R∞ and the series capacitance's elastance beside the basis.
    assert_eq!(setup.penalty.shape(), (MAX_BASIS + 2, MAX_BASIS + 2));
    // The centres still span the measured range, evenly.
    let (lo, hi) = (-(2.0 * PI * 1e5f64).ln(), -(2.0 * PI * 1e-2f64).ln());
    assert!((setup.centres[0] - lo).abs() < 1e-9);
    assert!((setup.centres[MAX_BASIS - 1] - hi).abs() < 1e-9);
    // At and below the cap: one centre per distinct frequency, as before.
    let setup = DrtSetup::new(&f[..MAX_BASIS], DrtOptions::default()).unwrap();
    assert_eq!(setup.centres.len(), MAX_BASIS);
    assert!((setup.centres[1] + (2.0 * PI * f[1]).ln()).abs() < 1e-12);
    // A thinned basis still recovers a known arc: R0 + R1|C1 gives one peak at τ = R1·C1 holding
    // R1 (common practice for an ideal RC element).
    let plan = Plan::compile(&parse("R0 + R1|C1").unwrap());
    let every_fourth: Vec<f64> = f.iter().step_by(4).copied().collect();
    let s = simulate(&plan, &[5.0, 50.0, 20e-6], &every_fourth, None);
    let r = drt(&s, DrtOptions::default()).unwrap();
    assert_eq!(r.peaks.len(), 1, "{:?}", r.peaks);
    crate::assert_close!(r.peaks[0].tau_s, 1e-3, 0.05, "τ of the peak");
    crate::assert_close!(r.peaks[0].resistance_ohm, 50.0, 0.02, "R of the peak");
}

/// Issue 13: impedances from 1e-300 to 1e300 Ω give the same DRT up to the scale (γ, R∞ and the
/// peak resistances scale with Z, τ does not; the model is linear in them).
#[test]
fn the_drt_does_not_depend_on_the_scale_of_z() {
    let base = spectrum(
        "R0 + R1|Q1",
        &[5.0, 50.0, 1e-4, 0.85],
        Some(Noise {
            relative: 0.002,
            seed: 9,
        }),
    );
    let reference = drt(&base, DrtOptions::default()).unwrap();
    for scale in [1e-250, 1e-160, 1e200, 1e250] {
        let mut s = base.clone();
        s.z.iter_mut().for_each(|z| *z *= scale);
        for weighting in [Weighting::Modulus, Weighting::Unit] {
            let o = DrtOptions::default().with_weighting(weighting);
            let r = drt(&s, o).unwrap();
            let r0 = drt(&base, o).unwrap();
            let what = format!("× {scale:e}, {weighting:?}");
            crate::assert_close!(r.lambda, r0.lambda, 1e-9, "λ {what}");
            crate::assert_close!(r.r_inf_ohm / scale, r0.r_inf_ohm, 1e-6, "R∞ {what}");
            crate::assert_close!(r.r_pol_ohm / scale, r0.r_pol_ohm, 1e-6, "Rpol {what}");
            assert_eq!(r.peaks.len(), r0.peaks.len(), "{what}");
            crate::assert_close!(r.residual_rms, r0.residual_rms, 1e-6, "rms {what}");
        }
    }
    assert!(reference.r_pol_ohm > 0.0);
}

/// Issue 13: degenerate spectra give a result or a typed error, never a panic.
#[test]
fn degenerate_spectra_give_results_or_typed_errors() {
    let good = rc(None);
    // All impedances equal: a pure resistance, no polarisation.
    let flat = Spectrum::new(
        good.frequency_hz.clone(),
        vec![Complex64::new(3.0, 0.0); good.len()],
    );
    let r = drt(&flat, DrtOptions::default()).unwrap();
    crate::assert_close!(r.r_inf_ohm, 3.0, 1e-3, "R∞ of a resistor");
    assert!(r.r_pol_ohm.abs() < 1e-3 * 3.0, "Rpol {}", r.r_pol_ohm);
    // Every frequency twice.
    let mut twice = good.clone();
    twice.frequency_hz.extend(good.frequency_hz.clone());
    twice.z.extend(good.z.clone());
    assert!(drt(&twice, DrtOptions::default()).is_ok());
    // 1 to 4 points: too few.
    for k in 1..5 {
        let s = Spectrum::new(good.frequency_hz[..k].to_vec(), good.z[..k].to_vec());
        assert!(matches!(
            drt(&s, DrtOptions::default()).unwrap_err().kind(),
            DrtErrorKind::TooFewPoints { .. }
        ));
    }
    // ω = 2πf overflows.
    let mut s = good.clone();
    s.frequency_hz[2] = f64::MAX;
    assert!(matches!(
        drt(&s, DrtOptions::default()).unwrap_err().kind(),
        DrtErrorKind::BadFrequency { point: 3, .. }
    ));
    // An infinite impedance, and a modulus too small to weight next to the others.
    let mut s = good.clone();
    s.z[1] = Complex64::new(f64::INFINITY, 0.0);
    assert!(drt(&s, DrtOptions::default()).is_err());
    let mut s = good.clone();
    s.z[0] = Complex64::new(1e300, 0.0);
    s.z[1] = Complex64::new(1e-300, 0.0);
    assert!(matches!(
        drt(&s, DrtOptions::default()).unwrap_err().kind(),
        DrtErrorKind::ZeroImpedance { point: 2 }
    ));
    // Frequencies over the whole range of f64.
    let f: Vec<f64> = (0..12).map(|i| 10f64.powi(-300 + 50 * i)).collect();
    let s = Spectrum::new(f, vec![Complex64::new(1.0, -0.1); 12]);
    if let Ok(r) = drt(&s, DrtOptions::default()) {
        assert!(r.r_inf_ohm.is_finite());
    }
}

#[test]
fn peak_rule_ignores_noise_bumps_and_edges() {
    // A double top merges into one peak (neither top rises 0.5 above the 4.9 between them); the rise
    // at the end of the curve is an edge, not a peak.
    let y = [0.0, 1.0, 5.0, 4.9, 5.0, 3.0, 1.0, 2.0, 8.0];
    assert_eq!(peak_indices(&y, 0.5 / 8.0), vec![4]);
    assert!(peak_indices(&[], 0.1).is_empty());
    assert!(peak_indices(&[1.0], 0.1).is_empty());
    assert!(peak_indices(&[f64::NAN, 1.0, f64::NAN], 0.1).is_empty());
    assert!(peak_indices(&[f64::NAN, f64::NAN, f64::NAN], 0.1).is_empty());
}

#[test]
fn find_peaks_on_a_curve_read_back_matches_the_drt() {
    // The public finder on the result's own (τ, γ) gives the peaks the DRT reported, and an uneven,
    // shuffled copy of the curve with bad points gives the same peaks within the grid step.
    let s = spectrum("R0 + R1|C1 + R2|C2", &[5.0, 30.0, 1e-6, 50.0, 1e-4], None);
    let res = drt(&s, DrtOptions::default()).unwrap();
    let again = find_peaks(&res.tau_s, &res.gamma_ohm, DEFAULT_PEAK_THRESHOLD, None);
    assert_eq!(again.len(), res.peaks.len());
    for (a, b) in again.iter().zip(&res.peaks) {
        crate::assert_close!(a.tau_s, b.tau_s, 1e-12, "τ");
        crate::assert_close!(a.resistance_ohm, b.resistance_ohm, 1e-12, "R");
    }
    let keep = |k: &usize| k % 3 != 1;
    let mut tau: Vec<f64> = (0..res.tau_s.len())
        .filter(keep)
        .map(|k| res.tau_s[k])
        .collect();
    let mut gamma: Vec<f64> = (0..res.tau_s.len())
        .filter(keep)
        .map(|k| res.gamma_ohm[k])
        .collect();
    tau.extend([f64::NAN, -1.0, 3.0]);
    gamma.extend([1.0, 1.0, f64::INFINITY]);
    tau.reverse();
    gamma.reverse();
    let uneven = find_peaks(&tau, &gamma, DEFAULT_PEAK_THRESHOLD, None);
    assert_eq!(uneven.len(), res.peaks.len());
    for (a, b) in uneven.iter().zip(&res.peaks) {
        assert!((a.tau_s / b.tau_s).log10().abs() < 0.05, "{a:?} vs {b:?}");
    }
}

/// R1|C1 arcs: the DRT of an ideal RC is R·δ(ln τ − ln RC) (by the definition of the DRT; common
/// practice), so two arcs of 50 Ω and 2 Ω (1 : 0.04) a decade and a half apart give two peaks at their
/// RC holding their R. The small one must not be merged into the large one by the peak threshold.
#[test]
fn a_small_process_a_decade_and_a_half_away_is_kept() {
    let small_fast = [5.0, 2.0, 10f64.powf(-4.5) / 2.0, 50.0, 1e-3 / 50.0];
    let small_slow = [5.0, 50.0, 1e-3 / 50.0, 2.0, 10f64.powf(-1.5) / 2.0];
    let noisy = Some(Noise {
        relative: 0.002,
        seed: 4,
    });
    for (params, noise, small_tau) in [
        (small_fast, None, 10f64.powf(-4.5)),
        (small_fast, noisy, 10f64.powf(-4.5)),
        (small_slow, None, 10f64.powf(-1.5)),
    ] {
        let s = spectrum("R0 + R1|C1 + R2|C2", &params, noise);
        let res = drt(&s, DrtOptions::default()).unwrap();
        assert_eq!(res.peaks.len(), 2, "{:?}", res.peaks);
        assert!(res.edge_peaks.is_empty(), "{:?}", res.edge_peaks);
        let (small, large) = if res.peaks[0].resistance_ohm < res.peaks[1].resistance_ohm {
            (res.peaks[0], res.peaks[1])
        } else {
            (res.peaks[1], res.peaks[0])
        };
        // Stated tolerance: τ within 0.15 decades, R within 20 % (small) and 3 % (large).
        assert!((small.tau_s / small_tau).log10().abs() < 0.15, "{small:?}");
        crate::assert_close!(small.resistance_ohm, 2.0, 0.2, "small R");
        assert!((large.tau_s / 1e-3).log10().abs() < 0.05, "{large:?}");
        crate::assert_close!(large.resistance_ohm, 50.0, 0.03, "large R");
    }
}

/// A blocking electrode, R0 + R1|C1 + C2: Z → 1/(jωC2) at low frequency (series capacitance; common
/// practice). The series capacitance of the DRT model takes the open tail, so γ holds the arc only
/// and no peak piles up at the end of the window; without it, the tail produces an edge peak, kept
/// out of the peak table.
#[test]
fn an_open_capacitive_tail_is_taken_by_the_series_capacitance() {
    let s = spectrum("R0 + R1|C1 + C2", &[5.0, 50.0, 20e-6, 0.05], None);
    let res = drt(&s, DrtOptions::default()).unwrap();
    assert_eq!(res.peaks.len(), 1, "{:?}", res.peaks);
    assert!(res.edge_peaks.is_empty(), "{:?}", res.edge_peaks);
    crate::assert_close!(res.peaks[0].tau_s, 1e-3, 0.05, "τ");
    crate::assert_close!(res.peaks[0].resistance_ohm, 50.0, 0.03, "R");
    crate::assert_close!(res.capacitance_f.unwrap(), 0.05, 0.02, "series C");
    assert!(res.residual_rms < 0.01, "rms {}", res.residual_rms);
    let without = drt(&s, DrtOptions::default().with_capacitance(false)).unwrap();
    assert_eq!(without.capacitance_f, None);
    assert!(
        without.edge_peaks.iter().all(|p| p.at_window_edge)
            && without.peaks.iter().all(|p| !p.at_window_edge)
    );
    let tau_hi = 1.0 / (2.0 * PI * 0.1);
    assert!(
        without
            .edge_peaks
            .iter()
            .any(|p| (p.tau_s / tau_hi).log10() > -EDGE_MARGIN_DECADES),
        "the tail should pile γ at the window edge without the capacitance: {:?} / {:?}",
        without.peaks,
        without.edge_peaks
    );
    // No tail: the capacitance is not reported.
    let rc = rc(None);
    assert_eq!(drt(&rc, DrtOptions::default()).unwrap().capacitance_f, None);
}

/// An arc whose time constant (10 s) lies beyond the lowest measured frequency (0.1 Hz, τ = 1.6 s):
/// its DRT peak sits at the window edge and is reported apart, while the resolved arc stays in the
/// table (RC arcs: γ = R·δ(ln τ − ln RC), common practice).
#[test]
fn a_process_beyond_the_window_gives_an_edge_peak() {
    let s = spectrum(
        "R0 + R1|C1 + R2|C2",
        &[5.0, 50.0, 20e-6, 80.0, 10.0 / 80.0],
        None,
    );
    let res = drt(&s, DrtOptions::default()).unwrap();
    assert_eq!(res.peaks.len(), 1, "{:?}", res.peaks);
    crate::assert_close!(res.peaks[0].tau_s, 1e-3, 0.05, "τ");
    assert!(!res.peaks[0].at_window_edge);
    assert_eq!(res.edge_peaks.len(), 1, "{:?}", res.edge_peaks);
    let edge = res.edge_peaks[0];
    assert!(edge.at_window_edge);
    assert!(edge.tau_s > 1.0 / (2.0 * PI * 0.1) * 10f64.powf(-EDGE_MARGIN_DECADES));
}

/// Outside reference: impedance spectra of physics-based lithium-ion cell models (Doyle–Fuller–Newman
/// and single particle with electrolyte, double layers on) computed with PyBaMM (Sulzer, Marquis,
/// Timms, Robinson & Chapman 2021, "Python Battery Mathematical Modelling (PyBaMM)", J. Open Research
/// Software 9, 14) by tests/reference/physics_impedance.py. Their diffusion tails still rise at the
/// lowest frequency; none of them may put a peak at the window edge into the peak table, and the
/// peaks of the double-layer/charge-transfer processes, at τ_dl = R_ct·C_dl of each electrode from
/// the model's own parameters, must stay in it (within 0.2 decades).
#[test]
fn physics_model_spectra_report_no_edge_peak_and_keep_the_interfacial_peaks() {
    let fx: Value = serde_json::from_str(include_str!(
        "../../../tests/reference/physics_impedance_fixture.json"
    ))
    .unwrap();
    let spectra = fx["spectra"].as_array().unwrap();
    assert_eq!(spectra.len(), 14);
    let mut with_edge = 0;
    for s in spectra {
        let name = s["name"].as_str().unwrap();
        let f = crate::testing::floats(&s["frequency_hz"]);
        let z = crate::testing::impedances(&s["z_real_ohm"], &s["z_imag_ohm"]);
        let res = drt(&Spectrum::new(f.clone(), z), DrtOptions::default()).unwrap();
        let f_min = f.iter().copied().fold(f64::INFINITY, f64::min);
        let f_max = f.iter().copied().fold(0.0, f64::max);
        let (tau_lo, tau_hi) = (1.0 / (2.0 * PI * f_max), 1.0 / (2.0 * PI * f_min));
        for p in &res.peaks {
            assert!(
                !p.at_window_edge
                    && (p.tau_s / tau_hi).log10() < -EDGE_MARGIN_DECADES
                    && (p.tau_s / tau_lo).log10() > EDGE_MARGIN_DECADES,
                "{name}: peak at the window edge in the table: {p:?}"
            );
        }
        if res
            .edge_peaks
            .iter()
            .any(|p| (p.tau_s / tau_hi).log10().abs() < 0.05)
        {
            with_edge += 1;
        }
        let r = &s["reference"];
        for electrode in ["negative", "positive"] {
            let tau_dl = r[format!("{electrode}_double_layer_time_constant_s")]
                .as_f64()
                .unwrap();
            assert!(
                res.peaks
                    .iter()
                    .any(|p| (p.tau_s / tau_dl).log10().abs() < 0.2),
                "{name}: no peak near the {electrode} double-layer time constant {tau_dl:e} s: {:?}",
                res.peaks
            );
        }
    }
    // The tails still show, apart: at τ = 1/(2π f_min) on most spectra (13 of 14 put it in the peak
    // table before edge peaks were kept apart).
    assert!(
        with_edge >= 10,
        "{with_edge} spectra with an edge peak at τ_max"
    );
}
