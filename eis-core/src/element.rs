//! The element library: every circuit element the language knows, with its impedance and the analytic
//! derivatives of that impedance with respect to each parameter.
//!
//! # Adding an element
//!
//! Write one [`ImpedanceFn`], `fn(params, grid, z, dz)`, that writes Z(ωᵢ) into `z[i]` and
//! ∂Z(ωᵢ)/∂params`[k]` into `dz[k * grid.len() + i]` for every frequency of the [`Grid`], then add one
//! [`ElementKind`] entry to [`KINDS`] with its symbol, parameter table and that function, its limits
//! at direct current and infinite frequency ([`LimitFn`]), its [`Class`], its [`Seed`] (how the
//! automatic starts build its values from a resistance and a time constant, or from one coefficient)
//! and its [`Physics`] (what the roles of charge transfer, diffusion and pore resistance read from it).
//! Work that does not depend on the frequency (a phase, a logarithm of a parameter) belongs before the
//! loop over the grid; ln ω and √ω come precomputed with the grid. The parser, the printer, the
//! compiled evaluator, the fitter (its starts read only the class and seed), the circuit limits
//! ([`circuit_limit`]) and the CLI pick it up from the table; the tests
//! `every_kind_matches_finite_differences` and `every_kind_limit_matches_its_impedance` check the new
//! derivatives and limits automatically.
//!
//! # Conventions
//!
//! SI units, ω in rad/s, j² = −1, and the imaginary part carries its own sign (a capacitor has Z″ < 0).

use num_complex::Complex64;
use std::f64::consts::FRAC_PI_2;

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

/// Angular frequencies together with the per-frequency quantities elements share (ln ω and √ω),
/// computed once and reused for every evaluation on the same frequencies.
///
/// ```
/// let g = eis_core::element::Grid::new(&[1.0, 100.0]);
/// assert_eq!(g.len(), 2);
/// assert_eq!(g.ln_omega()[1], 100f64.ln());
/// assert_eq!(g.sqrt_omega()[1], 10.0);
/// ```
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Grid {
    omega: Vec<f64>,
    ln_omega: Vec<f64>,
    sqrt_omega: Vec<f64>,
}

impl Grid {
    /// The grid of the angular frequencies `omegas` (rad/s).
    pub fn new(omegas: &[f64]) -> Grid {
        Grid {
            omega: omegas.to_vec(),
            ln_omega: omegas.iter().map(|w| w.ln()).collect(),
            sqrt_omega: omegas.iter().map(|w| w.sqrt()).collect(),
        }
    }

    /// Number of frequencies.
    pub fn len(&self) -> usize {
        self.omega.len()
    }

    /// Whether the grid has no frequencies.
    pub fn is_empty(&self) -> bool {
        self.omega.is_empty()
    }

    /// ω (rad/s).
    pub fn omega(&self) -> &[f64] {
        &self.omega
    }

    /// ln ω.
    pub fn ln_omega(&self) -> &[f64] {
        &self.ln_omega
    }

    /// √ω.
    pub fn sqrt_omega(&self) -> &[f64] {
        &self.sqrt_omega
    }
}

/// Signature of an element's impedance function: `(params, grid, z, dz)`, writing Z(ωᵢ) into `z[i]` and
/// ∂Z(ωᵢ)/∂params`[k]` into `dz[k * grid.len() + i]`. `params` has the length of the kind's parameter
/// table, `z` the length of the grid and `dz` their product.
pub type ImpedanceFn = fn(&[f64], &Grid, &mut [Complex64], &mut [Complex64]);

/// The impedance of an element in one frequency limit (ω → 0 or ω → ∞), as far as the real part
/// goes: `real` is the limit of Z′, and `open` says that |Z| grows without bound there (a capacitor at
/// direct current, an inductor at high frequency), so that the element blocks that limit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Limit {
    /// Limit of the real part, Ω (may be infinite, as for a CPE at direct current).
    pub real: f64,
    /// Whether |Z| diverges in this limit.
    pub open: bool,
}

impl Limit {
    /// A finite impedance with real part `real` and no diverging imaginary part.
    pub const fn finite(real: f64) -> Limit {
        Limit { real, open: false }
    }

    /// A diverging impedance whose real part tends to `real`.
    pub const fn open(real: f64) -> Limit {
        Limit { real, open: true }
    }
}

/// Signature of an element's limit function: `(params, high)` gives the [`Limit`] of Z as ω → ∞
/// (`high`) or ω → 0.
pub type LimitFn = fn(&[f64], bool) -> Limit;

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
    /// Its limits at direct current and at infinite frequency (ohmic and DC resistances of a circuit
    /// are computed from these).
    pub limit: LimitFn,
    /// What the element does in a cell's spectrum (recognising arcs, diffusion and porous electrodes).
    pub class: Class,
    /// How automatic starting values are built for it from the data.
    pub seed: Seed,
    /// What the roles of a cell's physics read from it (diffusion, porous lines).
    pub physics: Physics,
}

impl ElementKind {
    /// Whether the element forms an arc with a resistor in parallel (its class is capacitive).
    pub fn is_capacitive(&self) -> bool {
        self.class == Class::Capacitive
    }

    /// Index of the CPE exponent among the parameters, if the kind has one.
    pub fn exponent(&self) -> Option<usize> {
        self.params.iter().position(|p| *p == EXPONENT)
    }

    /// Z and ∂Z/∂params at one angular frequency (allocates; for tests and one-off use — evaluate a
    /// whole [`Grid`] through [`ElementKind::impedance`] in loops).
    ///
    /// ```
    /// let c = eis_core::element::kind_by_symbol("C").unwrap();
    /// let (z, dz) = c.eval_at(&[1e-3], 10.0);
    /// assert!((z.im + 100.0).abs() < 1e-12 && (dz[0].im - 1e5).abs() < 1e-6);
    /// ```
    ///
    /// # Panics
    ///
    /// If `params` does not have one value per entry of the kind's parameter table.
    pub fn eval_at(&self, params: &[f64], omega: f64) -> (Complex64, Vec<Complex64>) {
        assert_eq!(params.len(), self.params.len(), "parameter count");
        let mut z = [Complex64::new(0.0, 0.0)];
        let mut dz = vec![Complex64::new(0.0, 0.0); params.len()];
        (self.impedance)(params, &Grid::new(&[omega]), &mut z, &mut dz);
        (z[0], dz)
    }
}

impl PartialEq for ElementKind {
    fn eq(&self, other: &Self) -> bool {
        self.symbol == other.symbol
    }
}

/// The unit of every resistance in the table, as parameter entries and fit documents carry it: a
/// consumer that must tell a resistance by its unit compares with this, not with a string of its own.
pub const OHM: &str = "Ohm";

/// The unit of the table's dimensionless parameters (the exponents), likewise.
pub const DIMENSIONLESS: &str = "1";

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
    unit: DIMENSIONLESS,
    default: 0.9,
    domain: Domain::Interval(0.0, 1.0),
    description: "CPE exponent (1 = ideal capacitor, 0 = resistor)",
};

/// Parameters shared by the porous-electrode lines: the ionic rail and the interface, all totals for
/// the whole electrode.
const PORE_RAIL: ParamInfo = positive(
    "Rion",
    OHM,
    1.0,
    "ionic resistance of the pore electrolyte across the electrode",
);
const LINE_RCT: ParamInfo = positive(
    "Rct",
    OHM,
    10.0,
    "charge-transfer resistance of the whole electrode surface",
);
const LINE_Q: ParamInfo = positive(
    "Q",
    "F s^(n-1)",
    1e-3,
    "double-layer CPE coefficient of the whole surface",
);

/// Parameters of the finite diffusion elements.
const DIFFUSION: [ParamInfo; 2] = [
    positive("R", OHM, 10.0, "diffusion resistance"),
    positive("tau", "s", 1.0, "diffusion time constant L^2/D"),
];

/// What the roles read from a finite diffusion element ([`DIFFUSION`]'s resistance and time constant).
const FINITE_DIFFUSION: Physics = Physics::FiniteDiffusion {
    resistance: 0,
    tau: 1,
};

/// The seed of a transport element of resistance and time constant (parameters 0 and 1) whose time
/// constant may lie beyond the data, with the largest peak of its distribution at `peak`.
const fn diffusion_seed(peak: (f64, f64)) -> Seed {
    Seed::Feature {
        of: seed::resistance_time,
        tau: seed::second,
        window: seed::DIFFUSION_WINDOW,
        peak,
    }
}

/// The limit of an ideal capacitor or inductor: no real part, |Z| unbounded at high frequency for an
/// inductor (`open_high`), at direct current for a capacitor.
const fn reactive_limit(open_high: bool, high: bool) -> Limit {
    if open_high == high {
        Limit::open(0.0)
    } else {
        Limit::finite(0.0)
    }
}

/// Every element kind of the language. Symbols are matched longest first by the parser.
pub static KINDS: &[ElementKind] = &[
    ElementKind {
        symbol: "R",
        name: "resistor",
        formula: "R",
        params: &[positive("R", OHM, 10.0, "resistance")],
        impedance: resistor,
        limit: |p, _| Limit::finite(p[0]),
        class: Class::Resistive,
        seed: Seed::Linear { of: seed::scale },
        physics: Physics::Plain,
    },
    ElementKind {
        symbol: "C",
        name: "capacitor",
        formula: "1/(jwC)",
        params: &[positive("C", "F", 1e-5, "capacitance")],
        impedance: capacitor,
        limit: |_, high| reactive_limit(false, high),
        class: Class::Capacitive,
        seed: Seed::Capacitive {
            series: seed::inverse,
            parallel: seed::capacitor_parallel,
            tau: seed::capacitor_tau,
        },
        physics: Physics::Plain,
    },
    ElementKind {
        symbol: "L",
        name: "inductor",
        formula: "jwL",
        params: &[positive("L", "H", 1e-6, "inductance")],
        impedance: inductor,
        limit: |_, high| reactive_limit(true, high),
        class: Class::Inductive,
        seed: Seed::Linear { of: seed::scale },
        physics: Physics::Plain,
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
        limit: cpe_limit,
        class: Class::Capacitive,
        seed: Seed::Capacitive {
            series: seed::cpe_series,
            parallel: seed::cpe_parallel,
            tau: seed::cpe_tau,
        },
        physics: Physics::Plain,
    },
    ElementKind {
        symbol: "W",
        name: "semi-infinite Warburg",
        formula: "sigma (1-j)/sqrt(w)",
        params: &[positive("sigma", "Ohm s^-1/2", 10.0, "Warburg coefficient")],
        impedance: warburg,
        limit: |_, high| {
            if high {
                Limit::finite(0.0)
            } else {
                Limit::open(f64::INFINITY)
            }
        },
        class: Class::Diffusive,
        seed: Seed::Linear { of: seed::scale },
        physics: Physics::SemiInfiniteDiffusion { sigma: 0 },
    },
    ElementKind {
        symbol: "Wt",
        name: "finite-length diffusion, transmissive boundary",
        formula: "R tanh(sqrt(jw tau))/sqrt(jw tau)",
        params: &DIFFUSION,
        impedance: diffusion_transmissive,
        limit: |p, high| Limit::finite(if high { 0.0 } else { p[0] }),
        class: Class::Diffusive,
        seed: diffusion_seed(seed::TRANSMISSIVE_PEAK),
        physics: FINITE_DIFFUSION,
    },
    ElementKind {
        symbol: "Wr",
        name: "finite-space diffusion, reflective boundary",
        formula: "R coth(sqrt(jw tau))/sqrt(jw tau)",
        params: &DIFFUSION,
        impedance: diffusion_reflective,
        limit: |p, high| {
            if high {
                Limit::finite(0.0)
            } else {
                Limit::open(p[0] / 3.0)
            }
        },
        class: Class::Diffusive,
        seed: diffusion_seed(seed::REFLECTIVE_PEAK),
        physics: FINITE_DIFFUSION,
    },
    ElementKind {
        symbol: "G",
        name: "Gerischer",
        formula: "R/sqrt(1 + jw tau)",
        params: &[
            positive("R", OHM, 10.0, "Gerischer resistance"),
            positive("tau", "s", 1e-3, "Gerischer time constant"),
        ],
        impedance: gerischer,
        limit: |p, high| Limit::finite(if high { 0.0 } else { p[0] }),
        class: Class::Diffusive,
        seed: diffusion_seed((1.0, 1.0)),
        physics: Physics::Plain,
    },
    ElementKind {
        symbol: "Pe",
        name: "porous electrode, ionic rail (uniform transmission line)",
        formula: "sqrt(Rion z) coth(sqrt(Rion/z)), z = Rct/(1 + Rct Q (jw)^n)",
        params: &[PORE_RAIL, LINE_RCT, LINE_Q, EXPONENT],
        impedance: porous::one_rail,
        limit: porous::one_rail_limit,
        class: Class::Porous,
        seed: Seed::Feature {
            of: seed::one_rail,
            tau: seed::one_rail_tau,
            window: seed::ARC_WINDOW,
            peak: (1.0, 1.0),
        },
        physics: Physics::PorousLine {
            rail: 0,
            interface: 1,
        },
    },
    ElementKind {
        symbol: "Pm",
        name: "porous electrode, ionic and electronic rails (uniform transmission line)",
        formula: "P (1 + 2/(s sinh s)) + M coth(s)/s, P = Rion Rel/(Rion+Rel), \
                  M = (Rion^2+Rel^2)/(Rion+Rel), s = sqrt((Rion+Rel)/z), z = Rct/(1 + Rct Q (jw)^n)",
        params: &[
            PORE_RAIL,
            positive(
                "Rel",
                OHM,
                0.1,
                "electronic resistance of the solid across the electrode",
            ),
            LINE_RCT,
            LINE_Q,
            EXPONENT,
        ],
        impedance: porous::two_rails,
        limit: porous::two_rails_limit,
        class: Class::Porous,
        seed: Seed::Feature {
            of: seed::two_rails,
            tau: seed::two_rails_tau,
            window: seed::ARC_WINDOW,
            peak: (1.0, 1.0),
        },
        physics: Physics::PorousLine {
            rail: 0,
            interface: 2,
        },
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

mod diffusion;
mod limit;
mod porous;
mod seed;

use diffusion::{diffusion_reflective, diffusion_transmissive};
pub use limit::circuit_limit;

pub use seed::{
    ARC_WINDOW, Class, DIFFUSION_WINDOW, PORE_FRACTION, Physics, SEED_EXPONENT, SOLID_FRACTION,
    Seed, SeedOne, SeedTwo, set,
};

const J: Complex64 = Complex64::new(0.0, 1.0);
const ZERO: Complex64 = Complex64::new(0.0, 0.0);

fn resistor(p: &[f64], _g: &Grid, z: &mut [Complex64], dz: &mut [Complex64]) {
    z.fill(Complex64::new(p[0], 0.0));
    dz.fill(Complex64::new(1.0, 0.0));
}

fn capacitor(p: &[f64], g: &Grid, z: &mut [Complex64], dz: &mut [Complex64]) {
    let (c, minus_inv_c) = (p[0], -1.0 / p[0]);
    for ((zi, di), &w) in z.iter_mut().zip(dz.iter_mut()).zip(&g.omega) {
        let v = Complex64::new(0.0, -1.0 / (w * c));
        *zi = v;
        // ∂Z/∂C = −Z/C.
        *di = v * minus_inv_c;
    }
}

fn inductor(p: &[f64], g: &Grid, z: &mut [Complex64], dz: &mut [Complex64]) {
    for ((zi, di), &w) in z.iter_mut().zip(dz.iter_mut()).zip(&g.omega) {
        *zi = Complex64::new(0.0, w * p[0]);
        *di = Complex64::new(0.0, w);
    }
}

fn cpe(p: &[f64], g: &Grid, z: &mut [Complex64], dz: &mut [Complex64]) {
    let (q, n) = (p[0], p[1]);
    // Polar form avoids overflow in (jω)^n: |Z| = exp(−ln Q − n ln ω), arg Z = −nπ/2. The phase and
    // ln Q are the same at every frequency, so only one exp is left per point, taken in vectors a
    // block of points at a time (no allocation).
    let (sin, cos) = (n * FRAC_PI_2).sin_cos();
    let phase = Complex64::new(cos, -sin);
    // ∂Z/∂Q = −Z/Q, by one multiplication per frequency; ∂Z/∂n = −Z·(ln ω + jπ/2).
    let (ln_q, minus_inv_q) = (q.ln(), -1.0 / q);
    let (dq, dn) = dz.split_at_mut(g.len());
    with_exps(
        g.len(),
        |i| -ln_q - n * g.ln_omega[i],
        |i, m| {
            let v = phase * m;
            z[i] = v;
            dq[i] = v * minus_inv_q;
            dn[i] = v * Complex64::new(-g.ln_omega[i], -FRAC_PI_2);
        },
    );
}

/// Points per block of [`with_exps`] and [`with_decays`].
const BLOCK: usize = 64;

/// Calls `point(i, e^{exponent(i)})` for every point i < n, the exponentials taken in vectors a block
/// of points at a time on the stack (no allocation).
fn with_exps(n: usize, exponent: impl Fn(usize) -> f64, mut point: impl FnMut(usize, f64)) {
    let (mut x, mut e) = ([0.0; BLOCK], [0.0; BLOCK]);
    for start in (0..n).step_by(BLOCK) {
        let len = BLOCK.min(n - start);
        for (k, v) in x[..len].iter_mut().enumerate() {
            *v = exponent(start + k);
        }
        crate::dense::exp_into(&x[..len], &mut e[..len]);
        for (k, &v) in e[..len].iter().enumerate() {
            point(start + k, v);
        }
    }
}

/// Calls `block(start, e^{−y}, sin y, cos y)` over blocks of points from `start` on, with y =
/// `angle(i)` for every point i < n: the factors of e^{−y(1 + j)}, taken in vectors a block of points
/// at a time on the stack (no allocation).
fn with_decays(
    n: usize,
    angle: impl Fn(usize) -> f64,
    mut block: impl FnMut(usize, &[f64], &[f64], &[f64]),
) {
    let mut y = [0.0; BLOCK];
    let (mut e, mut sin, mut cos) = ([0.0; BLOCK], [0.0; BLOCK], [0.0; BLOCK]);
    for start in (0..n).step_by(BLOCK) {
        let len = BLOCK.min(n - start);
        for (k, v) in y[..len].iter_mut().enumerate() {
            *v = -angle(start + k);
        }
        crate::dense::exp_into(&y[..len], &mut e[..len]);
        for v in &mut y[..len] {
            *v = -*v;
        }
        crate::dense::sin_cos_into(&y[..len], &mut sin[..len], &mut cos[..len]);
        block(start, &e[..len], &sin[..len], &cos[..len]);
    }
}

fn cpe_limit(p: &[f64], high: bool) -> Limit {
    match (p[1] == 0.0, high) {
        // n = 0: a resistor of 1/Q at every frequency.
        (true, _) => Limit::finite(1.0 / p[0]),
        (false, true) => Limit::finite(0.0),
        (false, false) => Limit::open(f64::INFINITY),
    }
}

fn warburg(p: &[f64], g: &Grid, z: &mut [Complex64], dz: &mut [Complex64]) {
    for ((zi, di), &sw) in z.iter_mut().zip(dz.iter_mut()).zip(&g.sqrt_omega) {
        let unit = Complex64::new(1.0, -1.0) / sw;
        *di = unit;
        *zi = unit * p[0];
    }
}

fn gerischer(p: &[f64], g: &Grid, z: &mut [Complex64], dz: &mut [Complex64]) {
    let (r, tau) = (p[0], p[1]);
    let (dr, dt) = dz.split_at_mut(g.len());
    for (i, &w) in g.omega.iter().enumerate() {
        let a = Complex64::new(1.0, w * tau);
        let f = 1.0 / a.sqrt();
        let zi = r * f;
        z[i] = zi;
        dr[i] = f;
        dt[i] = -zi * J * w / (2.0 * a);
    }
}

#[cfg(test)]
mod tests;
