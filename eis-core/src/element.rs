//! The element library: every circuit element the language knows, with its impedance and the analytic
//! derivatives of that impedance with respect to each parameter.
//!
//! # Adding an element
//!
//! Write one `fn(params, omega, dz) -> Z` that returns Z(ω) and fills `dz[k] = ∂Z/∂params[k]`, then add one
//! [`ElementKind`] entry to [`KINDS`] with its symbol, parameter table and that function. The parser, the
//! printer, the compiled evaluator, the fitter and the CLI pick it up from the table; the test
//! `every_kind_matches_finite_differences` checks the new derivatives automatically.
//!
//! # Conventions
//!
//! SI units, ω in rad/s, j² = −1, and the imaginary part carries its own sign (a capacitor has Z″ < 0).

use num_complex::Complex64;
use std::f64::consts::{FRAC_PI_2, FRAC_PI_4};

/// What values a parameter may take before any user bounds are applied.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Domain {
    /// Strictly positive, unbounded above (resistances, capacitances, time constants).
    Positive,
    /// A closed interval `[lo, hi]`, such as a CPE exponent in `[0, 1]`.
    Interval(f64, f64),
}

/// Description of one parameter of an element kind.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ParamInfo {
    /// Short name used after the dot in `name.param` (`Q`, `n`, `R`, `tau`, `sigma`, ...).
    pub name: &'static str,
    /// SI unit as printed in tables.
    pub unit: &'static str,
    /// Value used when neither the circuit nor the user gives one (documented in `eis inspect`).
    pub default: f64,
    /// Admissible values.
    pub domain: Domain,
    /// A short human description.
    pub description: &'static str,
}

/// Signature of an element's impedance function: `(params, omega, dz) -> Z`, writing `∂Z/∂params[k]` into
/// `dz[k]`. `params` and `dz` have the length of the kind's parameter table.
pub type ImpedanceFn = fn(&[f64], f64, &mut [Complex64]) -> Complex64;

/// One kind of circuit element.
#[derive(Debug, Clone, Copy)]
pub struct ElementKind {
    /// The symbol that starts an element name in the circuit language (`R`, `Wt`, ...).
    pub symbol: &'static str,
    /// Human name of the element.
    pub name: &'static str,
    /// Closed form as shown in documentation.
    pub formula: &'static str,
    /// Parameters, in the order the impedance function takes them.
    pub params: &'static [ParamInfo],
    /// Impedance and analytic derivatives.
    pub impedance: ImpedanceFn,
    /// Whether the element behaves like a capacitor in parallel with a resistor to form an arc
    /// (used to recognise arcs for derived battery quantities).
    pub capacitive: bool,
}

impl PartialEq for ElementKind {
    fn eq(&self, other: &Self) -> bool {
        self.symbol == other.symbol
    }
}

const fn positive(
    name: &'static str,
    unit: &'static str,
    default: f64,
    description: &'static str,
) -> ParamInfo {
    ParamInfo {
        name,
        unit,
        default,
        domain: Domain::Positive,
        description,
    }
}

const EXPONENT: ParamInfo = ParamInfo {
    name: "n",
    unit: "1",
    default: 0.9,
    domain: Domain::Interval(0.0, 1.0),
    description: "CPE exponent (1 = ideal capacitor, 0 = resistor)",
};

/// Every element kind of the language. Symbols are matched longest first by the parser.
pub static KINDS: &[ElementKind] = &[
    ElementKind {
        symbol: "R",
        name: "resistor",
        formula: "R",
        params: &[positive("R", "Ohm", 10.0, "resistance")],
        impedance: resistor,
        capacitive: false,
    },
    ElementKind {
        symbol: "C",
        name: "capacitor",
        formula: "1/(jwC)",
        params: &[positive("C", "F", 1e-5, "capacitance")],
        impedance: capacitor,
        capacitive: true,
    },
    ElementKind {
        symbol: "L",
        name: "inductor",
        formula: "jwL",
        params: &[positive("L", "H", 1e-6, "inductance")],
        impedance: inductor,
        capacitive: false,
    },
    ElementKind {
        symbol: "Q",
        name: "constant-phase element",
        formula: "1/(Q (jw)^n)",
        params: &[
            positive("Q", "F s^(n-1)", 1e-5, "CPE coefficient"),
            EXPONENT,
        ],
        impedance: cpe,
        capacitive: true,
    },
    ElementKind {
        symbol: "W",
        name: "semi-infinite Warburg",
        formula: "sigma (1-j)/sqrt(w)",
        params: &[positive("sigma", "Ohm s^-1/2", 10.0, "Warburg coefficient")],
        impedance: warburg,
        capacitive: false,
    },
    ElementKind {
        symbol: "Wt",
        name: "finite-length diffusion, transmissive boundary",
        formula: "R tanh(sqrt(jw tau))/sqrt(jw tau)",
        params: &[
            positive("R", "Ohm", 10.0, "diffusion resistance"),
            positive("tau", "s", 1.0, "diffusion time constant L^2/D"),
        ],
        impedance: diffusion_transmissive,
        capacitive: false,
    },
    ElementKind {
        symbol: "Wr",
        name: "finite-space diffusion, reflective boundary",
        formula: "R coth(sqrt(jw tau))/sqrt(jw tau)",
        params: &[
            positive("R", "Ohm", 10.0, "diffusion resistance"),
            positive("tau", "s", 1.0, "diffusion time constant L^2/D"),
        ],
        impedance: diffusion_reflective,
        capacitive: false,
    },
    ElementKind {
        symbol: "G",
        name: "Gerischer",
        formula: "R/sqrt(1 + jw tau)",
        params: &[
            positive("R", "Ohm", 10.0, "Gerischer resistance"),
            positive("tau", "s", 1e-3, "Gerischer time constant"),
        ],
        impedance: gerischer,
        capacitive: false,
    },
];

/// Looks up a kind by its exact symbol.
pub fn kind_by_symbol(symbol: &str) -> Option<&'static ElementKind> {
    KINDS.iter().find(|k| k.symbol == symbol)
}

/// The kind whose symbol is the longest prefix of `name`, if any.
pub fn kind_for_name(name: &str) -> Option<&'static ElementKind> {
    KINDS
        .iter()
        .filter(|k| name.starts_with(k.symbol))
        .max_by_key(|k| k.symbol.len())
}

const J: Complex64 = Complex64::new(0.0, 1.0);

fn resistor(p: &[f64], _w: f64, dz: &mut [Complex64]) -> Complex64 {
    dz[0] = Complex64::new(1.0, 0.0);
    Complex64::new(p[0], 0.0)
}

fn capacitor(p: &[f64], w: f64, dz: &mut [Complex64]) -> Complex64 {
    let z = Complex64::new(0.0, -1.0 / (w * p[0]));
    dz[0] = -z / p[0];
    z
}

fn inductor(p: &[f64], w: f64, dz: &mut [Complex64]) -> Complex64 {
    dz[0] = Complex64::new(0.0, w);
    Complex64::new(0.0, w * p[0])
}

fn cpe(p: &[f64], w: f64, dz: &mut [Complex64]) -> Complex64 {
    let (q, n) = (p[0], p[1]);
    // Polar form avoids overflow in (jw)^n: |Z| = exp(-ln Q - n ln w), arg Z = -n pi/2.
    let ln_w = w.ln();
    let z = Complex64::from_polar((-q.ln() - n * ln_w).exp(), -n * FRAC_PI_2);
    dz[0] = -z / q;
    dz[1] = -z * Complex64::new(ln_w, FRAC_PI_2);
    z
}

fn warburg(p: &[f64], w: f64, dz: &mut [Complex64]) -> Complex64 {
    let unit = Complex64::new(1.0, -1.0) / w.sqrt();
    dz[0] = unit;
    unit * p[0]
}

/// √(jωτ) = √(ωτ)·e^{jπ/4}, formed without a complex square root.
fn sqrt_j_omega_tau(w: f64, tau: f64) -> Complex64 {
    Complex64::from_polar((w * tau).sqrt(), FRAC_PI_4)
}

/// Below this |√(jωτ)| the finite-diffusion functions use their Taylor series in u = jωτ: the next term
/// is below 1e-16 relative, while the closed forms would lose digits to cancellation.
const SERIES_LIMIT: f64 = 0.1;

/// tanh(s)/s = Σ a_k u^k with u = s²; coefficients from the Bernoulli-number series of tanh.
const TANH_OVER_S: [f64; 7] = [
    1.0,
    -1.0 / 3.0,
    2.0 / 15.0,
    -17.0 / 315.0,
    62.0 / 2835.0,
    -1382.0 / 155925.0,
    21844.0 / 6081075.0,
];

/// coth(s)/s − 1/u = Σ b_k u^k with u = s².
const COTH_OVER_S: [f64; 7] = [
    1.0 / 3.0,
    -1.0 / 45.0,
    2.0 / 945.0,
    -1.0 / 4725.0,
    2.0 / 93555.0,
    -1382.0 / 638512875.0,
    4.0 / 18243225.0,
];

/// Evaluates Σ c_k u^k and Σ k c_k u^k (the latter is u·d/du of the former).
fn series(c: &[f64], u: Complex64) -> (Complex64, Complex64) {
    let mut f = Complex64::new(0.0, 0.0);
    let mut uf = Complex64::new(0.0, 0.0);
    for (k, &ck) in c.iter().enumerate().rev() {
        f = f * u + ck;
        if k > 0 {
            uf = uf * u + ck * k as f64;
        }
    }
    // uf was accumulated as Σ k c_k u^(k-1); multiply by u once.
    (f, uf * u)
}

/// tanh(s) and sech²(s) for Re s > 0, through e^{-2s} so that neither overflows.
fn tanh_sech2(s: Complex64) -> (Complex64, Complex64) {
    let e = (-2.0 * s).exp();
    let one = Complex64::new(1.0, 0.0);
    let d = one + e;
    ((one - e) / d, 4.0 * e / (d * d))
}

/// coth(s) and csch²(s) for Re s > 0, through e^{-2s}.
fn coth_csch2(s: Complex64) -> (Complex64, Complex64) {
    let e = (-2.0 * s).exp();
    let one = Complex64::new(1.0, 0.0);
    let d = one - e;
    ((one + e) / d, 4.0 * e / (d * d))
}

fn diffusion_transmissive(p: &[f64], w: f64, dz: &mut [Complex64]) -> Complex64 {
    transmissive_branch(p, w, dz, (w * p[1]).sqrt() < SERIES_LIMIT)
}

fn transmissive_branch(p: &[f64], w: f64, dz: &mut [Complex64], use_series: bool) -> Complex64 {
    let (r, tau) = (p[0], p[1]);
    let s = sqrt_j_omega_tau(w, tau);
    if use_series {
        let u = J * (w * tau);
        let (f, uf) = series(&TANH_OVER_S, u);
        dz[0] = f;
        // dZ/dτ = R f'(u) du/dτ = R·u f'(u)/τ.
        dz[1] = r * uf / tau;
        return r * f;
    }
    let (th, sech2) = tanh_sech2(s);
    let f = th / s;
    dz[0] = f;
    // d/ds[tanh s / s] = (s sech² s − tanh s)/s², ds/dτ = s/(2τ).
    dz[1] = r * (s * sech2 - th) / (2.0 * tau * s);
    r * f
}

fn diffusion_reflective(p: &[f64], w: f64, dz: &mut [Complex64]) -> Complex64 {
    reflective_branch(p, w, dz, (w * p[1]).sqrt() < SERIES_LIMIT)
}

fn reflective_branch(p: &[f64], w: f64, dz: &mut [Complex64], use_series: bool) -> Complex64 {
    let (r, tau) = (p[0], p[1]);
    let s = sqrt_j_omega_tau(w, tau);
    if use_series {
        let u = J * (w * tau);
        let (g, ug) = series(&COTH_OVER_S, u);
        let inv_u = 1.0 / u;
        let f = inv_u + g;
        dz[0] = f;
        // u d/du (1/u) = −1/u.
        dz[1] = r * (ug - inv_u) / tau;
        return r * f;
    }
    let (ch, csch2) = coth_csch2(s);
    let f = ch / s;
    dz[0] = f;
    // d/ds[coth s / s] = −(s csch² s + coth s)/s², ds/dτ = s/(2τ).
    dz[1] = -r * (s * csch2 + ch) / (2.0 * tau * s);
    r * f
}

fn gerischer(p: &[f64], w: f64, dz: &mut [Complex64]) -> Complex64 {
    let (r, tau) = (p[0], p[1]);
    let a = Complex64::new(1.0, w * tau);
    let f = 1.0 / a.sqrt();
    dz[0] = f;
    let z = r * f;
    dz[1] = -z * J * w / (2.0 * a);
    z
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Log-spaced angular frequencies from 1 µHz to 100 MHz.
    fn omegas() -> Vec<f64> {
        (0..=140)
            .map(|k| 2.0 * std::f64::consts::PI * 10f64.powf(-6.0 + k as f64 * 0.1))
            .collect()
    }

    fn eval(kind: &ElementKind, p: &[f64], w: f64) -> (Complex64, Vec<Complex64>) {
        let mut dz = vec![Complex64::new(0.0, 0.0); p.len()];
        let z = (kind.impedance)(p, w, &mut dz);
        (z, dz)
    }

    #[test]
    fn symbols_are_unique_and_matched_longest_first() {
        for (i, a) in KINDS.iter().enumerate() {
            for b in &KINDS[i + 1..] {
                assert_ne!(a.symbol, b.symbol);
            }
        }
        assert_eq!(kind_for_name("Wtd").unwrap().symbol, "Wt");
        assert_eq!(kind_for_name("Wr1").unwrap().symbol, "Wr");
        assert_eq!(kind_for_name("W1").unwrap().symbol, "W");
        assert!(kind_for_name("X1").is_none());
    }

    /// Central differences in log-parameter space (relative step) against the analytic derivatives, for
    /// every kind, at frequencies spanning 1 µHz–100 MHz. Method: common practice for checking Jacobians.
    #[test]
    fn every_kind_matches_finite_differences() {
        for kind in KINDS {
            let base: Vec<f64> = kind
                .params
                .iter()
                .map(|p| match p.domain {
                    Domain::Positive => p.default,
                    Domain::Interval(..) => 0.7,
                })
                .collect();
            for &w in &omegas() {
                let (_, dz) = eval(kind, &base, w);
                for k in 0..base.len() {
                    let h = 1e-6 * base[k];
                    let mut up = base.clone();
                    up[k] += h;
                    let mut dn = base.clone();
                    dn[k] -= h;
                    let fd = (eval(kind, &up, w).0 - eval(kind, &dn, w).0) / (2.0 * h);
                    let scale = eval(kind, &base, w).0.norm() / base[k];
                    let err = (fd - dz[k]).norm() / (dz[k].norm().max(scale * 1e-3));
                    assert!(
                        err < 1e-5,
                        "{} d/d{} at w={w}: analytic {} vs fd {}",
                        kind.symbol,
                        kind.params[k].name,
                        dz[k],
                        fd
                    );
                }
            }
        }
    }

    /// No NaN or infinity for any kind over 1 µHz–100 MHz at parameters spread over many decades
    /// (a requirement of the evaluation, not an outside value).
    #[test]
    fn finite_everywhere() {
        for kind in KINDS {
            for scale in [1e-12, 1e-6, 1.0, 1e6, 1e12] {
                let p: Vec<f64> = kind
                    .params
                    .iter()
                    .map(|p| match p.domain {
                        Domain::Positive => scale,
                        Domain::Interval(..) => 0.5,
                    })
                    .collect();
                for &w in &omegas() {
                    let (z, dz) = eval(kind, &p, w);
                    assert!(
                        z.re.is_finite() && z.im.is_finite(),
                        "{} p={p:?} w={w}",
                        kind.symbol
                    );
                    for d in dz {
                        assert!(
                            d.re.is_finite() && d.im.is_finite(),
                            "{} d p={p:?} w={w}",
                            kind.symbol
                        );
                    }
                }
            }
        }
    }

    /// Series and closed-form branches agree at the switch-over |s| = 0.1 (continuity); slightly above
    /// the switch the closed form loses digits to cancellation, so the bound is 1e-13 for Z and 1e-12 for
    /// the derivatives.
    #[test]
    fn series_and_closed_forms_agree_at_the_switch() {
        type Branch = fn(&[f64], f64, &mut [Complex64], bool) -> Complex64;
        for branch in [transmissive_branch as Branch, reflective_branch as Branch] {
            for tau in [1e-3, 1.0, 1e3] {
                let w = SERIES_LIMIT * SERIES_LIMIT / tau;
                let mut ds = [Complex64::new(0.0, 0.0); 2];
                let mut dc = ds;
                let zs = branch(&[3.0, tau], w, &mut ds, true);
                let zc = branch(&[3.0, tau], w, &mut dc, false);
                assert!((zs - zc).norm() / zc.norm() < 1e-13, "{zs} vs {zc}");
                for k in 0..2 {
                    assert!(
                        (ds[k] - dc[k]).norm() / dc[k].norm() < 1e-12,
                        "{} vs {}",
                        ds[k],
                        dc[k]
                    );
                }
            }
        }
    }
}
