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
use std::f64::consts::{FRAC_1_SQRT_2, FRAC_PI_2};

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

mod limit;
mod porous;
mod seed;

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

/// Below this |√(jωτ)| the finite-diffusion functions use their Taylor series in u = jωτ: the next term
/// is below 1e-16 relative, while the closed forms would lose digits to cancellation.
const SERIES_LIMIT: f64 = 0.1;

/// Above this Re(2√(jωτ)), e^{−2s} < 2e−22 and is taken as zero: tanh s = coth s = 1 and sech² s =
/// csch² s = 0 to well below round-off, even after multiplication by |s| in the derivatives.
const EXP_LIMIT: f64 = 50.0;

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
    let mut f = ZERO;
    let mut uf = ZERO;
    for (k, &ck) in c.iter().enumerate().rev() {
        f = f * u + ck;
        if k > 0 {
            uf = uf * u + ck * k as f64;
        }
    }
    // uf was accumulated as Σ k c_k u^(k-1); multiply by u once.
    (f, uf * u)
}

/// e^{−2s} for s = a(1 + j), a ≥ 0, given `decay` = e^{−2a}, `sin` = sin 2a and `cos` = cos 2a; zero
/// where it is below round-off of anything it is added to.
#[inline(always)]
fn exp_minus_2s(a: f64, decay: f64, sin: f64, cos: f64) -> Complex64 {
    // Both computed, one chosen: no branch in a vector loop.
    let e = Complex64::new(cos, -sin) * decay;
    if 2.0 * a > EXP_LIMIT { ZERO } else { e }
}

/// 2a = √2·√(ωτ), the angle and decay rate of e^{−2s} = e^{−2a}(cos 2a − j sin 2a) in
/// [`diffusion_closed`].
fn decay_angle(sqrt_wt: f64) -> f64 {
    2.0 * (sqrt_wt * FRAC_1_SQRT_2)
}

/// The two boundary conditions of finite-length diffusion.
#[derive(Clone, Copy, PartialEq)]
enum Boundary {
    /// tanh: the far boundary passes the species on (transmissive).
    Transmissive,
    /// coth: the far boundary blocks it (reflective).
    Reflective,
}

/// Z and ∂Z/∂(R, τ) at one frequency, `use_series` choosing the Taylor branch; `sqrt_wt` = √(ωτ).
#[cfg(test)]
fn diffusion_point(
    boundary: Boundary,
    r: f64,
    tau: f64,
    wt: f64,
    sqrt_wt: f64,
    use_series: bool,
) -> (Complex64, Complex64, Complex64) {
    if use_series {
        return diffusion_series(boundary, r, tau, wt);
    }
    let y = decay_angle(sqrt_wt);
    let (sin, cos) = y.sin_cos();
    diffusion_closed(boundary, r, tau, sqrt_wt, ((-y).exp(), sin, cos))
}

/// Z and ∂Z/∂(R, τ) by the Taylor series in u = jωτ (`wt` = ωτ), for √(ωτ) below [`SERIES_LIMIT`].
fn diffusion_series(
    boundary: Boundary,
    r: f64,
    tau: f64,
    wt: f64,
) -> (Complex64, Complex64, Complex64) {
    let u = J * wt;
    let (f, ufp) = match boundary {
        Boundary::Transmissive => series(&TANH_OVER_S, u),
        // coth(s)/s = 1/u + g(u), and u d/du (1/u) = −1/u.
        Boundary::Reflective => {
            let (g, ug) = series(&COTH_OVER_S, u);
            let inv_u = 1.0 / u;
            (inv_u + g, ug - inv_u)
        }
    };
    // dZ/dτ = R f'(u) du/dτ = R·u f'(u)/τ.
    (r * f, f, r * ufp / tau)
}

/// Z and ∂Z/∂(R, τ) in closed form, given `decay` = (e^{−2a}, sin 2a, cos 2a) of 2a = [`decay_angle`]
/// of `sqrt_wt` = √(ωτ); branch-free, so that a loop of it runs in vectors. Meant for √(ωτ) from
/// [`SERIES_LIMIT`] on (below, it loses digits to cancellation, and at zero it is not a number).
#[inline(always)]
fn diffusion_closed(
    boundary: Boundary,
    r: f64,
    tau: f64,
    sqrt_wt: f64,
    decay: (f64, f64, f64),
) -> (Complex64, Complex64, Complex64) {
    let one = Complex64::new(1.0, 0.0);
    // √(jωτ) = √(ωτ)·e^{jπ/4} = a(1 + j), without a complex square root; 1/s = (1 − j)/(2a).
    let a = sqrt_wt * FRAC_1_SQRT_2;
    let s = Complex64::new(a, a);
    let half_inv_a = 0.5 / a;
    let inv_s = Complex64::new(half_inv_a, -half_inv_a);
    let e = exp_minus_2s(a, decay.0, decay.1, decay.2);
    // tanh, sech² (or coth, csch²) through e^{−2s}, so that nothing overflows for Re s > 0. The
    // denominator 1 ± e^{−2s} is inverted once: |e^{−2s}| ≤ e^{−2a} with 2a > 0.14 here, so |1 ± e| lies
    // between 0.13 and 2 and d̄/|d|² is exact to round-off.
    let (num, d, sign) = match boundary {
        Boundary::Transmissive => (one - e, one + e, 1.0),
        Boundary::Reflective => (one + e, one - e, -1.0),
    };
    let inv_d = d.conj() * (1.0 / d.norm_sqr());
    let t = num * inv_d;
    let h2 = 4.0 * e * (inv_d * inv_d);
    let f = t * inv_s;
    // d/ds[tanh s / s] = (s sech² s − tanh s)/s²; d/ds[coth s / s] = −(s csch² s + coth s)/s²;
    // ds/dτ = s/(2τ).
    let d_tau = (sign * s * h2 - t) * inv_s * (r / (2.0 * tau));
    (r * f, f, d_tau)
}

fn diffusion(boundary: Boundary, p: &[f64], g: &Grid, z: &mut [Complex64], dz: &mut [Complex64]) {
    let (r, tau) = (p[0], p[1]);
    let sqrt_tau = tau.sqrt();
    let (dr, dt) = dz.split_at_mut(g.len());
    with_decays(
        g.len(),
        |i| decay_angle(g.sqrt_omega[i] * sqrt_tau),
        |start, e, sin, cos| {
            let end = start + e.len();
            let (z, dr, dt) = (&mut z[start..end], &mut dr[start..end], &mut dt[start..end]);
            let sqrt_omega = &g.sqrt_omega[start..end];
            // The closed form at every point, in vectors; then the series where √(ωτ) is small.
            crate::dense::arch().dispatch(
                #[inline(always)]
                || {
                    for k in 0..z.len() {
                        let decay = (e[k], sin[k], cos[k]);
                        (z[k], dr[k], dt[k]) =
                            diffusion_closed(boundary, r, tau, sqrt_omega[k] * sqrt_tau, decay);
                    }
                },
            );
            for k in 0..z.len() {
                if sqrt_omega[k] * sqrt_tau < SERIES_LIMIT {
                    let wt = g.omega[start + k] * tau;
                    (z[k], dr[k], dt[k]) = diffusion_series(boundary, r, tau, wt);
                }
            }
        },
    );
}

fn diffusion_transmissive(p: &[f64], g: &Grid, z: &mut [Complex64], dz: &mut [Complex64]) {
    diffusion(Boundary::Transmissive, p, g, z, dz);
}

fn diffusion_reflective(p: &[f64], g: &Grid, z: &mut [Complex64], dz: &mut [Complex64]) {
    diffusion(Boundary::Reflective, p, g, z, dz);
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
mod tests {
    use super::*;

    /// Log-spaced angular frequencies from 1 µHz to 100 MHz.
    fn omegas() -> Vec<f64> {
        (0..=140)
            .map(|k| 2.0 * std::f64::consts::PI * 10f64.powf(-6.0 + k as f64 * 0.1))
            .collect()
    }

    fn eval(kind: &ElementKind, p: &[f64], w: f64) -> (Complex64, Vec<Complex64>) {
        kind.eval_at(p, w)
    }

    /// The kind's defaults, with 0.7 for interval-bounded parameters (inside, away from the ends).
    fn typical(kind: &ElementKind) -> Vec<f64> {
        kind.params
            .iter()
            .map(|q| match q.domain {
                Domain::Positive => q.default,
                Domain::Interval(..) => 0.7,
            })
            .collect()
    }

    /// The physics column points at parameters of the right meaning: resistances in Ohm, time
    /// constants in s, a porous interface as [Rct, Q, n]; and it agrees with the class.
    #[test]
    fn every_kind_physics_points_at_its_parameters() {
        let unit = |kind: &ElementKind, k: usize| kind.params.get(k).map(|p| p.unit);
        for kind in KINDS {
            let s = kind.symbol;
            match kind.physics {
                Physics::Plain => {}
                Physics::SemiInfiniteDiffusion { sigma } => {
                    assert_eq!(kind.class, Class::Diffusive, "{s}");
                    assert_eq!(unit(kind, sigma), Some("Ohm s^-1/2"), "{s}");
                }
                Physics::FiniteDiffusion { resistance, tau } => {
                    assert_eq!(kind.class, Class::Diffusive, "{s}");
                    assert_eq!(unit(kind, resistance), Some("Ohm"), "{s}");
                    assert_eq!(unit(kind, tau), Some("s"), "{s}");
                }
                Physics::PorousLine { rail, interface } => {
                    assert_eq!(kind.class, Class::Porous, "{s}");
                    assert_eq!(unit(kind, rail), Some("Ohm"), "{s}");
                    assert_eq!(kind.params.get(interface), Some(&LINE_RCT), "{s}");
                    assert_eq!(kind.params.get(interface + 1), Some(&LINE_Q), "{s}");
                    assert_eq!(kind.exponent(), Some(interface + 2), "{s}");
                }
            }
        }
    }

    /// Evaluating a whole grid at once gives, point by point, exactly what one-point grids give
    /// (nothing in an element may depend on the neighbouring frequencies).
    #[test]
    fn grid_evaluation_is_pointwise() {
        let ws = omegas();
        let g = Grid::new(&ws);
        for kind in KINDS {
            let p = typical(kind);
            let n = ws.len();
            let mut z = vec![ZERO; n];
            let mut dz = vec![ZERO; n * p.len()];
            (kind.impedance)(&p, &g, &mut z, &mut dz);
            for (i, &w) in ws.iter().enumerate() {
                let (zi, di) = eval(kind, &p, w);
                assert_eq!(z[i], zi, "{} at {w}", kind.symbol);
                for k in 0..p.len() {
                    assert_eq!(dz[k * n + i], di[k], "{} d{k} at {w}", kind.symbol);
                }
            }
        }
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
            let base = typical(kind);
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

    /// Every kind's limit function agrees with its impedance evaluated far out, at ω = 1e-12 and
    /// 1e16 rad/s (a consistency check of the table; the limits themselves are the closed forms'
    /// ω → 0 and ω → ∞ limits, derived from the formulas in the table).
    #[test]
    fn every_kind_limit_matches_its_impedance() {
        for kind in KINDS {
            let p = typical(kind);
            for (w, high) in [(1e-12, false), (1e16, true)] {
                let (z, _) = eval(kind, &p, w);
                let l = (kind.limit)(&p, high);
                let scale = 1.0
                    + if l.real.is_finite() {
                        l.real.abs()
                    } else {
                        0.0
                    };
                if l.open {
                    assert!(
                        z.norm() > 1e3 * scale,
                        "{} at w={w}: {z} should diverge",
                        kind.symbol
                    );
                }
                if l.real.is_finite() {
                    assert!(
                        (z.re - l.real).abs() < 1e-3 * scale,
                        "{} at w={w}: Re Z = {} vs limit {}",
                        kind.symbol,
                        z.re,
                        l.real
                    );
                    if !l.open {
                        assert!(z.im.abs() < 1e-3 * scale, "{} at w={w}: {z}", kind.symbol);
                    }
                } else {
                    assert!(
                        z.re > 1e3,
                        "{} at w={w}: {z} should have a diverging real part",
                        kind.symbol
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
        for boundary in [Boundary::Transmissive, Boundary::Reflective] {
            for tau in [1e-3, 1.0, 1e3] {
                let w = SERIES_LIMIT * SERIES_LIMIT / tau;
                let (r, wt) = (3.0, w * tau);
                let (zs, ds0, ds1) = diffusion_point(boundary, r, tau, wt, wt.sqrt(), true);
                let (zc, dc0, dc1) = diffusion_point(boundary, r, tau, wt, wt.sqrt(), false);
                assert!((zs - zc).norm() / zc.norm() < 1e-13, "{zs} vs {zc}");
                for (a, b) in [(ds0, dc0), (ds1, dc1)] {
                    assert!((a - b).norm() / b.norm() < 1e-12, "{a} vs {b}");
                }
            }
        }
    }

    /// Where e^{−2s} is dropped (Re 2s > 50) the closed forms equal their limits tanh = coth = 1 to
    /// round-off, so the cut is invisible: compare just below and just above it.
    #[test]
    fn dropping_the_exponential_is_invisible() {
        for boundary in [Boundary::Transmissive, Boundary::Reflective] {
            let a: f64 = EXP_LIMIT / 2.0;
            let tau = 2.0;
            for sqrt_wt in [
                a * 2f64.sqrt() * (1.0 - 1e-9),
                a * 2f64.sqrt() * (1.0 + 1e-9),
            ] {
                let wt = sqrt_wt * sqrt_wt;
                let (z, f, d) = diffusion_point(boundary, 1.0, tau, wt, sqrt_wt, false);
                let s = Complex64::new(sqrt_wt * FRAC_1_SQRT_2, sqrt_wt * FRAC_1_SQRT_2);
                let limit = 1.0 / s;
                assert!((z - limit).norm() <= 1e-15 * limit.norm(), "{z} vs {limit}");
                assert!((f - limit).norm() <= 1e-15 * limit.norm());
                let d_limit = -1.0 / (2.0 * tau * s);
                assert!(
                    (d - d_limit).norm() <= 1e-14 * d_limit.norm(),
                    "{d} vs {d_limit}"
                );
            }
        }
    }
}
