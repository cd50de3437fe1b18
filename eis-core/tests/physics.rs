//! Battery quantities from `--model auto` (eis_core::select, then eis_core::derive) on impedance
//! spectra of physics-based cell models, against the models' own parameters.
//!
//! The spectra are in `tests/reference/physics_impedance_fixture.json`, computed by
//! `tests/reference/physics_impedance.py` with PyBaMM (Sulzer et al. 2021, "Python Battery Mathematical
//! Modelling (PyBaMM)", J. Open Research Software 9, 14): the Doyle–Fuller–Newman model (Doyle, Fuller &
//! Newman 1993, J. Electrochem. Soc. 140, 1526) and the single particle model with electrolyte (Marquis
//! et al. 2019, "An asymptotic derivation of a single particle model with electrolyte", J. Electrochem.
//! Soc. 166, A3693), parameter sets of Chen et al. 2020 (J. Electrochem. Soc. 167, 080534) and Marquis
//! et al. 2019. Reference charge-transfer resistance: RT/(F·i0·a·L·A) summed over both electrodes.
//!
//! Two model choices, nothing tuned per spectrum: `--model auto` with its default options (the same
//! call the CLI makes), and the ready circuit [`POROUS`] (two porous electrodes and a Warburg tail)
//! fitted with the default fit settings.

use eis_core::circuit::parse;
use eis_core::derive::derive;
use eis_core::fit::{FitSettings, fit};
use eis_core::select::{SelectOptions, select};
use eis_core::spectrum::Spectrum;
use num_complex::Complex64;
use std::sync::OnceLock;

/// One spectrum of the fixture with what auto reports.
struct Reading {
    name: String,
    model: String,
    soc: f64,
    reference_ct: f64,
    ct: f64,
    ohmic: f64,
}

fn fixture() -> serde_json::Value {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../tests/reference/physics_impedance_fixture.json"
    );
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

/// The ready circuit: two uniform transmission lines (de Levie 1963, Electrochim. Acta 8, 751, from
/// memory), one per electrode, and a semi-infinite Warburg for the solid diffusion below the window.
const POROUS: &str = "R0 + Pe1 + Pe2 + Wd\nPe1.n = 0.5..1\nPe2.n = 0.5..1";

fn readings() -> &'static [Reading] {
    static ALL: OnceLock<Vec<Reading>> = OnceLock::new();
    ALL.get_or_init(|| read_all(None))
}

fn porous_readings() -> &'static [Reading] {
    static ALL: OnceLock<Vec<Reading>> = OnceLock::new();
    ALL.get_or_init(|| read_all(Some(POROUS)))
}

/// Fits every spectrum of the fixture with `model`, or with `--model auto` when None.
fn read_all(model: Option<&str>) -> Vec<Reading> {
    {
        let fx = fixture();
        let mut out = Vec::new();
        for s in fx["spectra"].as_array().unwrap() {
            let nums = |k: &str| -> Vec<f64> {
                s[k].as_array()
                    .unwrap()
                    .iter()
                    .map(|v| v.as_f64().unwrap())
                    .collect()
            };
            let (f, re, im) = (nums("frequency_hz"), nums("z_real_ohm"), nums("z_imag_ohm"));
            let z = re
                .iter()
                .zip(&im)
                .map(|(&a, &b)| Complex64::new(a, b))
                .collect();
            let spectrum = Spectrum::new(f, z);
            let (d, label) = match model {
                None => {
                    let sel = select(&spectrum, &SelectOptions::default()).unwrap();
                    let w = sel.winner();
                    (
                        derive(&w.circuit, w.result.as_ref().unwrap()),
                        w.member.label(),
                    )
                }
                Some(text) => {
                    let c = parse(text).unwrap();
                    let r = fit(&c, &spectrum, &FitSettings::default(), None).unwrap();
                    (derive(&c, &r), text.lines().next().unwrap().to_owned())
                }
            };
            out.push(Reading {
                name: s["name"].as_str().unwrap().to_owned(),
                model: label,
                soc: s["soc"].as_f64().unwrap(),
                reference_ct: s["reference"]["charge_transfer_resistance_ohm"]
                    .as_f64()
                    .unwrap(),
                ct: d.charge_transfer_resistance.map_or(f64::NAN, |q| q.value),
                ohmic: d.ohmic_resistance.map_or(f64::NAN, |q| q.value),
            });
        }
        for r in &out {
            eprintln!(
                "{:34} R_ct {:8.2} mOhm (model {:8.2}, {:+6.1} %)  R0 {:6.2} mOhm  {}",
                r.name,
                1e3 * r.ct,
                1e3 * r.reference_ct,
                100.0 * (r.ct / r.reference_ct - 1.0),
                1e3 * r.ohmic,
                r.model
            );
        }
        out
    }
}

fn reading(name: &str) -> &'static Reading {
    readings().iter().find(|r| r.name == name).unwrap()
}

fn porous_reading(name: &str) -> &'static Reading {
    porous_readings().iter().find(|r| r.name == name).unwrap()
}

/// With the ready two-porous-electrode circuit, R_ct = the two lines' `Rct` is within 20 % of
/// RT/(F·i0·a·L·A) summed over both electrodes on every spectrum (PyBaMM, Sulzer et al. 2021; DFN,
/// Doyle, Fuller & Newman 1993; SPMe, Marquis et al. 2019; parameters of Chen et al. 2020 and Marquis
/// et al. 2019), four-fold for i0 × 0.25 within ±0.6, and in the model's order across SOC.
#[test]
fn two_porous_electrodes_read_every_spectrum() {
    assert_all_within(porous_readings(), 0.2);
    for (low, base) in [
        ("dfn-chen2020-soc50-i0x0.25", "dfn-chen2020-soc50"),
        ("dfn-marquis2019-soc50-i0x0.25", "dfn-marquis2019-soc50"),
    ] {
        let ratio = porous_reading(low).ct / porous_reading(base).ct;
        assert!((ratio - 4.0).abs() <= 0.6, "{low}: {ratio}");
    }
    for family in ["dfn-chen2020", "dfn-marquis2019", "spme-chen2020"] {
        let rs: Vec<&Reading> = [20, 50, 80]
            .iter()
            .map(|s| porous_reading(&format!("{family}-soc{s}")))
            .collect();
        for (a, b) in [(0, 1), (1, 2), (0, 2)] {
            assert_eq!(
                rs[a].ct < rs[b].ct,
                rs[a].reference_ct < rs[b].reference_ct,
                "{family}"
            );
        }
    }
}

fn within(r: &Reading, tol: f64) -> bool {
    (r.ct / r.reference_ct - 1.0).abs() <= tol
}

/// Every reading's R_ct within `tol` (relative) of the model's, naming those that are not.
fn assert_all_within<'a>(readings: impl IntoIterator<Item = &'a Reading>, tol: f64) {
    let bad: Vec<String> = readings
        .into_iter()
        .filter(|r| !within(r, tol))
        .map(|r| {
            format!(
                "{} {:.2} vs {:.2} mOhm",
                r.name,
                1e3 * r.ct,
                1e3 * r.reference_ct
            )
        })
        .collect();
    assert!(bad.is_empty(), "{bad:?}");
}

/// Reported charge-transfer resistance within 20 % of RT/(F·i0·a·L·A) summed over both electrodes
/// (PyBaMM, Sulzer et al. 2021; DFN, Doyle, Fuller & Newman 1993; SPMe, Marquis et al. 2019;
/// parameters of Chen et al. 2020 and Marquis et al. 2019), on every spectrum of the fixture.
#[test]
fn charge_transfer_within_20_percent_of_the_model() {
    assert_all_within(readings(), 0.2);
}

/// An exchange current density scaled by 0.25 raises R_ct = RT/(F·i0·a·L·A) four-fold (Butler–Volmer
/// linearised: common practice); read as 4 ± 0.6 on the parameter sets of Chen et al. 2020 and Marquis
/// et al. 2019 (PyBaMM, Sulzer et al. 2021).
#[test]
fn a_four_times_lower_exchange_current_reads_four_times_the_resistance() {
    for (low, base) in [
        ("dfn-chen2020-soc50-i0x0.25", "dfn-chen2020-soc50"),
        ("dfn-marquis2019-soc50-i0x0.25", "dfn-marquis2019-soc50"),
    ] {
        let ratio = reading(low).ct / reading(base).ct;
        assert!((ratio - 4.0).abs() <= 0.6, "{low}: {ratio}");
    }
}

/// A 5 mΩ contact resistance adds 5 mΩ to the high-frequency resistance (ohmic, in series: common
/// practice); read within 10 % (PyBaMM, Sulzer et al. 2021; Chen et al. 2020; Marquis et al. 2019).
#[test]
fn a_contact_resistance_reads_as_an_ohmic_change() {
    for (with, base) in [
        ("dfn-chen2020-soc50-contact5m", "dfn-chen2020-soc50"),
        ("dfn-marquis2019-soc50-contact5m", "dfn-marquis2019-soc50"),
    ] {
        let change = reading(with).ohmic - reading(base).ohmic;
        assert!((change - 5e-3).abs() <= 0.5e-3, "{with}: {change}");
    }
}

/// Halving the electrolyte conductivity raises the separator and pore ionic resistances (Doyle, Fuller
/// & Newman 1993): the high-frequency resistance goes up by about 1 mΩ on the Chen et al. 2020 cell
/// (separator 0.38 → 0.76 mΩ plus part of the pore resistances; PyBaMM, Sulzer et al. 2021).
#[test]
fn a_halved_conductivity_raises_the_ohmic_resistance() {
    let change =
        reading("dfn-chen2020-soc50-kappax0.5").ohmic - reading("dfn-chen2020-soc50").ohmic;
    assert!((0.5e-3..=2.5e-3).contains(&change), "{change}");
}

/// The order of R_ct across SOC 20/50/80 % matches the model's (RT/(F·i0·a·L·A) with i0 depending on
/// the surface concentrations; PyBaMM, Sulzer et al. 2021; Chen et al. 2020; Marquis et al. 2019).
#[test]
fn the_order_across_soc_matches_the_model() {
    for family in ["dfn-chen2020", "dfn-marquis2019", "spme-chen2020"] {
        let mut rs: Vec<&Reading> = [20, 50, 80]
            .iter()
            .map(|s| reading(&format!("{family}-soc{s}")))
            .collect();
        let mut by_model = rs.clone();
        by_model.sort_by(|a, b| a.reference_ct.total_cmp(&b.reference_ct));
        rs.sort_by(|a, b| a.ct.total_cmp(&b.ct));
        let socs = |v: &[&Reading]| v.iter().map(|r| r.soc).collect::<Vec<_>>();
        assert_eq!(socs(&rs), socs(&by_model), "{family}");
    }
}
