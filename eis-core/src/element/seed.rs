//! What the rest of the crate needs to know about an element besides its impedance: its [`Class`]
//! (what it does in a cell's spectrum) and its [`Seed`] (how automatic starting values are built for it
//! from a feature the data show). Both are columns of the element table, so a new element brings them
//! along and no other module matches symbols or units.

use std::f64::consts::PI;
use std::fmt;

/// What an element does in a cell's spectrum.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Class {
    /// A frequency-independent resistance (ohmic losses, the resistor of an arc).
    Resistive,
    /// Stores charge; with a resistor in parallel it forms an arc (capacitor, CPE).
    Capacitive,
    /// Grows with frequency (leads, windings).
    Inductive,
    /// Transport of a species to or from the interface (Warburg, finite diffusion, Gerischer).
    Diffusive,
    /// A distributed (porous) electrode: pore resistance along a line of interfaces.
    Porous,
}

impl fmt::Display for Class {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Class::Resistive => "resistive",
            Class::Capacitive => "capacitive",
            Class::Inductive => "inductive",
            Class::Diffusive => "diffusive",
            Class::Porous => "porous",
        })
    }
}

/// What a cell's physics reads from an element when resistances are sorted by role (charge transfer,
/// diffusion, pore resistance: see [`crate::roles`]), with the places of the parameters it reads.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Physics {
    /// Nothing of its own: a resistor, capacitor or CPE counts through the arcs it forms; an inductor
    /// or a Gerischer element is summed into no role.
    Plain,
    /// Semi-infinite diffusion: it has no finite resistance and is reported by its Warburg coefficient
    /// σ, parameter `sigma`.
    SemiInfiniteDiffusion {
        /// Index of σ among the element's parameters.
        sigma: usize,
    },
    /// Finite diffusion (transmissive or reflective boundary): a diffusion resistance and a time
    /// constant whose frequency 1/(2πτ) places it against the data.
    FiniteDiffusion {
        /// Index of the diffusion resistance among the element's parameters.
        resistance: usize,
        /// Index of the diffusion time constant.
        tau: usize,
    },
    /// A porous line: the pore (ionic) resistance of its rail and an interface of charge-transfer
    /// resistance, CPE coefficient and exponent (three consecutive parameters).
    PorousLine {
        /// Index of the ionic rail's resistance.
        rail: usize,
        /// Index of the interface's charge-transfer resistance; its CPE coefficient and exponent follow.
        interface: usize,
    },
}

/// A seed function for one coefficient `v`: `(v, fixed, out)`. `out` holds the element's current
/// values on entry (fixed parameters at their fixed values) and receives the seeded ones; `fixed` says
/// which parameters are fixed, whose values a seed keeps (see [`set`]).
pub type SeedOne = fn(f64, &[bool], &mut [f64]);

/// A seed function for a resistance `r` and a time constant `tau`: `(r, tau, fixed, out)`, with `out`
/// and `fixed` as for [`SeedOne`].
pub type SeedTwo = fn(f64, f64, &[bool], &mut [f64]);

/// How the automatic starts build an element's parameter values from the data.
#[derive(Debug, Clone, Copy)]
pub enum Seed {
    /// The impedance is one coefficient `v` times a shape that depends on no other free value (a
    /// resistor, an inductor, a semi-infinite Warburg element): `of` writes the values for `v`. The
    /// shape is the impedance at `v = 1`.
    Linear {
        /// The element's values for coefficient `v`.
        of: SeedOne,
    },
    /// A capacitor-like element. In series it is linear in `series`; in parallel with a resistance `r`
    /// it forms an arc whose time constant `parallel` sets and `tau` reads back.
    Capacitive {
        /// The element's values for a series coefficient `v` (the shape at `v = 1`).
        series: SeedOne,
        /// Its values in parallel with resistance `r` for an arc of time constant `tau`.
        parallel: SeedTwo,
        /// The time constant of an arc of resistance `r` with these values.
        tau: fn(f64, &[f64]) -> f64,
    },
    /// A feature with a resistance `r` and a time constant `tau`; the impedance is linear in `r` at
    /// fixed `tau`.
    Feature {
        /// The element's values for resistance `r` and time constant `tau`.
        of: SeedTwo,
        /// Its time constant at given values (the inverse of `of` in τ).
        tau: fn(&[f64]) -> f64,
        /// Where its time constant may lie, as factors of 1/ω_max and 1/ω_min of the data.
        window: (f64, f64),
        /// The largest peak of its distribution of relaxation times, as fractions (R₁/r, τ₁/τ) of its
        /// resistance and time constant: a DRT peak (R₁, τ₁) seeds it as r = R₁/(R₁/r), τ = τ₁/(τ₁/τ).
        peak: (f64, f64),
    },
}

/// Writes `v` into parameter `i` unless it is fixed, and returns the parameter's value.
pub fn set(out: &mut [f64], fixed: &[bool], i: usize, v: f64) -> f64 {
    if !fixed[i] {
        out[i] = v;
    }
    out[i]
}

/// CPE exponent of a seed (a common depressed arc; the fit moves it).
pub const SEED_EXPONENT: f64 = 0.9;

/// Time-constant window of arc-like features (kinetic processes: the apex inside the data, with a
/// half-decade margin either side), as factors of 1/ω_max and 1/ω_min.
pub const ARC_WINDOW: (f64, f64) = (0.3, 3.0);

/// Time-constant window of diffusion: its characteristic time may lie a decade beyond the lowest
/// frequency, where its tail is still seen.
pub const DIFFUSION_WINDOW: (f64, f64) = (3.0, 30.0);

/// Pore (ionic) resistance of a porous-electrode seed as a fraction of its charge-transfer resistance:
/// between a line that is nearly an arc (Rion ≪ Rct) and one dominated by its 45° branch.
pub const PORE_FRACTION: f64 = 0.5;

/// Electronic-rail resistance of a two-rail seed as a fraction of its ionic rail (composite electrodes
/// conduct electrons far better than their pore electrolyte conducts ions).
pub const SOLID_FRACTION: f64 = 0.1;

pub(super) fn scale(v: f64, fixed: &[bool], out: &mut [f64]) {
    set(out, fixed, 0, v);
}

pub(super) fn inverse(v: f64, fixed: &[bool], out: &mut [f64]) {
    set(out, fixed, 0, 1.0 / v);
}

pub(super) fn cpe_series(v: f64, fixed: &[bool], out: &mut [f64]) {
    set(out, fixed, 0, 1.0 / v);
    set(out, fixed, 1, SEED_EXPONENT);
}

pub(super) fn capacitor_parallel(r: f64, tau: f64, fixed: &[bool], out: &mut [f64]) {
    set(out, fixed, 0, tau / r);
}

pub(super) fn capacitor_tau(r: f64, p: &[f64]) -> f64 {
    r * p[0]
}

/// Values of a CPE for an arc of time constant τ with resistance r: (rQ)^(1/n) = τ, at the seed's
/// exponent unless the exponent is fixed.
pub(super) fn cpe_parallel(r: f64, tau: f64, fixed: &[bool], out: &mut [f64]) {
    let n = set(out, fixed, 1, SEED_EXPONENT);
    set(out, fixed, 0, tau.powf(n) / r);
}

pub(super) fn cpe_tau(r: f64, p: &[f64]) -> f64 {
    (r * p[0]).powf(1.0 / p[1])
}

pub(super) fn resistance_time(r: f64, tau: f64, fixed: &[bool], out: &mut [f64]) {
    set(out, fixed, 0, r);
    set(out, fixed, 1, tau);
}

/// The time constant of a (resistance, time constant) pair.
pub(super) fn second(p: &[f64]) -> f64 {
    p[1]
}

/// The interface time constant (Rct·Q)^(1/n) of a one-rail line.
pub(super) fn one_rail_tau(p: &[f64]) -> f64 {
    (p[1] * p[2]).powf(1.0 / p[3])
}

/// The interface time constant (Rct·Q)^(1/n) of a two-rail line.
pub(super) fn two_rails_tau(p: &[f64]) -> f64 {
    (p[2] * p[3]).powf(1.0 / p[4])
}

/// First term of the exact Voigt expansion of transmissive finite diffusion, R·tanh√(jωτ)/√(jωτ):
/// τ₁ = 4τ/π², R₁ = 8R/π² (poles of tanh at s = jπ/2).
pub(super) const TRANSMISSIVE_PEAK: (f64, f64) = (8.0 / (PI * PI), 4.0 / (PI * PI));

/// First term of the expansion of reflective finite diffusion, R·coth√(jωτ)/√(jωτ), after its
/// capacitive pole: τ₁ = τ/π², R₁ = 2R/π² (poles of coth at s = jπ).
pub(super) const REFLECTIVE_PEAK: (f64, f64) = (2.0 / (PI * PI), 1.0 / (PI * PI));

/// The interface of a porous electrode (charge-transfer resistance `ct`, CPE `q`, exponent `n`
/// parameter indices) as an arc of resistance r and time constant τ, with the pore resistance `ion` a
/// fixed fraction of it; returns the charge-transfer resistance used.
fn line(
    r: f64,
    tau: f64,
    (ion, ct, q, n): (usize, usize, usize, usize),
    fixed: &[bool],
    out: &mut [f64],
) -> f64 {
    let rct = set(out, fixed, ct, r);
    set(out, fixed, ion, PORE_FRACTION * rct);
    let n = set(out, fixed, n, SEED_EXPONENT);
    set(out, fixed, q, tau.powf(n) / rct);
    rct
}

/// A porous electrode of one rail (Rion, Rct, Q, n) whose interface arc has resistance r and time
/// constant τ; Rion a fraction [`PORE_FRACTION`] of Rct.
pub(super) fn one_rail(r: f64, tau: f64, fixed: &[bool], out: &mut [f64]) {
    line(r, tau, (0, 1, 2, 3), fixed, out);
}

/// A porous electrode of two rails (Rion, Rel, Rct, Q, n) as [`one_rail`], with Rel a fraction
/// [`SOLID_FRACTION`] of Rion.
pub(super) fn two_rails(r: f64, tau: f64, fixed: &[bool], out: &mut [f64]) {
    line(r, tau, (0, 2, 3, 4), fixed, out);
    let rion = out[0];
    set(out, fixed, 1, SOLID_FRACTION * rion);
}

impl Seed {
    /// The time-constant window of a feature (None for other seeds).
    pub fn window(&self) -> Option<(f64, f64)> {
        match self {
            Seed::Feature { window, .. } => Some(*window),
            _ => None,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::element::{KINDS, kind_by_symbol};

    /// Every seed of the table builds what it says: a feature's time-constant read-back returns the τ
    /// it was seeded with, a capacitive element in parallel with r gives an arc of the asked τ (R·C,
    /// and (R·Q)^(1/n) for a CPE: the time constant of an R|CPE arc, common practice), and a linear
    /// seed is proportional to its coefficient.
    #[test]
    fn every_seed_is_inverted_by_its_time_constant() {
        let (r, tau) = (2.0, 0.01);
        for kind in KINDS {
            let fixed = vec![false; kind.params.len()];
            let mut v: Vec<f64> = kind.params.iter().map(|p| p.default).collect();
            match kind.seed {
                Seed::Feature { of, tau: back, .. } => {
                    of(r, tau, &fixed, &mut v);
                    assert!((back(&v) / tau - 1.0).abs() < 1e-12, "{}", kind.symbol);
                }
                Seed::Capacitive {
                    parallel,
                    tau: back,
                    ..
                } => {
                    parallel(r, tau, &fixed, &mut v);
                    assert!((back(r, &v) / tau - 1.0).abs() < 1e-12, "{}", kind.symbol);
                }
                Seed::Linear { of } => {
                    let mut w = v.clone();
                    of(1.0, &fixed, &mut v);
                    of(3.0, &fixed, &mut w);
                    let (z1, _) = kind.eval_at(&v, 10.0);
                    let (z3, _) = kind.eval_at(&w, 10.0);
                    assert!(
                        (z3 - 3.0 * z1).norm() < 1e-12 * z3.norm(),
                        "{}",
                        kind.symbol
                    );
                }
            }
        }
    }

    /// A porous-electrode seed for an arc of resistance r: Rct = r and Rion = PORE_FRACTION·r, so its
    /// DC limit is that of de Levie's line, √(Rion·Rct)·coth√(Rion/Rct) (de Levie 1963, Electrochim.
    /// Acta 8, 751), about Rct + Rion/3; a fixed exponent is kept and Q follows it.
    #[test]
    fn porous_seeds_put_the_arc_on_the_interface() {
        let pe = kind_by_symbol("Pe").unwrap();
        let Seed::Feature { of, tau: back, .. } = pe.seed else {
            panic!("Pe is a feature");
        };
        let (r, tau) = (0.02, 1e-3);
        let mut v = vec![0.0, 0.0, 0.0, 0.7];
        of(r, tau, &[false, false, false, true], &mut v);
        assert_eq!(v[1], r);
        assert_eq!(v[0], PORE_FRACTION * r);
        assert_eq!(v[3], 0.7);
        assert!((back(&v) / tau - 1.0).abs() < 1e-12);
        let x = (v[0] / v[1]).sqrt();
        let de_levie = (v[0] * v[1]).sqrt() / x.tanh();
        let dc = (pe.limit)(&v, false).real;
        assert!((dc / de_levie - 1.0).abs() < 1e-12, "{dc} vs {de_levie}");
    }
}
