//! Battery quantities derived from a fitted circuit, each with a standard error by the delta method
//! (first-order propagation through the fit covariance: var f = ∇fᵀ·Cov·∇f).
//!
//! - **Ohmic resistance**: Re Z(ω → ∞), the series resistance seen at high frequency (electrolyte,
//!   separator, contacts, leads). Computed exactly from the circuit tree: capacitive elements, CPEs and
//!   diffusion elements short, inductors open (their series reactance does not change the real part).
//! - **Arcs**: every resistance in parallel with a capacitive element (C or CPE), also when the
//!   resistive branch holds diffusion elements (a Randles arc). For each: resistance R, time constant
//!   τ (RC, or (RQ)^(1/n) for a CPE), characteristic frequency 1/(2πτ), effective capacitance (C itself,
//!   or for a CPE the Brug et al. 1984 formula C = Q^(1/n)·(1/R_s + 1/R)^((n−1)/n) with R_s the ohmic
//!   resistance; Brug, van den Eeden, Sluyters-Rehbach & Sluyters 1984, J. Electroanal. Chem. 176, 275),
//!   and a role.
//! - **Roles, charge-transfer, diffusion and pore resistance**: by physics, not by position in the
//!   formula: the rule is in [`crate::roles`] (class from the element table, time constant against the
//!   measured window, effective capacitance against the double layer's; `role` lines of the circuit
//!   file win). Charge-transfer resistance sums the interfacial (kinetic) processes inside the window
//!   only (arcs of role charge-transfer, porous-line `Rct`); diffusion resistance the diffusive ones
//!   (`Wt`, `Wr`, arcs of role diffusion); pore resistance the porous lines' `Rion`. A semi-infinite
//!   Warburg, and a finite diffusion element whose τ lies below the window (a tail still rising at the
//!   lowest frequency), are reported by their Warburg coefficient σ; such a tail also by the lower
//!   bound Re Z(ω_lo) on its resistance. Processes beyond the data are listed and summed nowhere.
//! - **DC resistance**: Re Z(ω → 0) when the circuit passes direct current (no blocking capacitor,
//!   CPE, reflective diffusion or semi-infinite Warburg on every path), with the resistances of the
//!   processes beyond the data left out (set to zero).
//!
//! Gradients are analytic for arc quantities; for the two limits they are central differences of the
//! exact limit function (a rational function of the resistances).

use crate::circuit::{Circuit, Node, Role};
use crate::element::{Class, circuit_limit};
use crate::fit::FitResult;
use crate::roles::{ArcFacts, BeyondData, DiffusionTail, Placement, classify, tail_values};
use crate::trend::FlagKind;
use std::f64::consts::PI;

/// A derived value with its standard error (None where the fit cannot give one).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Quantity {
    /// The value.
    pub value: f64,
    /// Its standard error.
    pub stderr: Option<f64>,
}

/// One arc of the circuit.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Arc {
    /// Name of the arc's resistor.
    pub resistor: String,
    /// Name of its capacitive element.
    pub capacitor: String,
    /// Resistance (Ω).
    pub resistance: Quantity,
    /// Time constant (s).
    pub time_constant: Quantity,
    /// Characteristic frequency 1/(2πτ) (Hz).
    pub peak_frequency: Quantity,
    /// Effective capacitance (F).
    pub capacitance: Quantity,
    /// Physical role.
    pub role: Role,
    /// Whether the role came from the circuit file (else from the rule of [`crate::roles`]).
    pub role_from_circuit: bool,
    /// Where its characteristic frequency lies against the measured window; outside it the arc is
    /// beyond the data and summed nowhere.
    pub placement: Placement,
    /// Whether the data determine the arc (resistance with a relative error of at most 100 %).
    pub determined: bool,
}

/// All derived quantities of a fit.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct Derived {
    /// High-frequency real resistance (Ω).
    pub ohmic_resistance: Option<Quantity>,
    /// Sum of the interfacial (kinetic) resistances inside the measured window (Ω).
    pub charge_transfer_resistance: Option<Quantity>,
    /// Sum of the diffusive resistances inside the measured window (Ω).
    pub diffusion_resistance: Option<Quantity>,
    /// Sum of the Warburg coefficients σ (Ω·s^−½) of semi-infinite Warburgs and of still-rising
    /// diffusion tails, when the circuit has any.
    pub warburg_sigma: Option<Quantity>,
    /// Real resistance at zero frequency, where finite, without the processes beyond the data (Ω).
    pub dc_resistance: Option<Quantity>,
    /// Sum of the porous lines' ionic (pore) resistances (Ω), when the circuit has porous lines.
    pub pore_resistance: Option<Quantity>,
    /// The arcs, in circuit order.
    pub arcs: Vec<Arc>,
    /// Finite diffusion elements seen only as a tail still rising at the lowest frequency.
    pub diffusion_tails: Vec<DiffusionTail>,
    /// Processes whose characteristic frequency lies outside the measured window: summed nowhere.
    pub beyond_data: Vec<BeyondData>,
}

/// Which battery quantity: the key of a row of [`QUANTITIES`].
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
#[non_exhaustive]
pub enum QuantityKey {
    /// High-frequency real resistance.
    Ohmic,
    /// Sum of the arc resistances.
    ChargeTransfer,
    /// Sum of the finite diffusion resistances.
    Diffusion,
    /// Real resistance at zero frequency.
    Dc,
    /// Sum of the semi-infinite Warburg coefficients.
    WarburgSigma,
    /// Sum of the porous lines' ionic (pore) resistances.
    Pore,
}

impl QuantityKey {
    /// Its row of [`QUANTITIES`].
    pub fn row(self) -> &'static QuantityKind {
        // Every key has a row (checked by a test); the first row is the fallback that keeps this total.
        QUANTITIES
            .iter()
            .find(|q| q.key == self)
            .unwrap_or(&QUANTITIES[0])
    }

    /// Its column in `results.csv` and field in the fit document.
    pub fn column(self) -> &'static str {
        self.row().column
    }
}

/// A battery quantity: everything the fit document, `results.csv`, trends, flags, the fit table,
/// the campaign report and plots need to know about it. One row of [`QUANTITIES`].
#[derive(Debug, Clone, Copy)]
pub struct QuantityKind {
    /// The key.
    pub key: QuantityKey,
    /// Column in `results.csv` (followed by `<column>_stderr`) and field of the fit document.
    pub column: &'static str,
    /// Name in the fit table.
    pub label: &'static str,
    /// Short name, for table headers.
    pub short: &'static str,
    /// Axis label of plots.
    pub axis: &'static str,
    /// SI unit as printed in files and plots.
    pub unit: &'static str,
    /// The same unit in plain ASCII, for the terminal.
    pub unit_ascii: &'static str,
    /// A column of `results.csv` (and of the campaign report) and followed by default in trends.
    pub in_results: bool,
    /// What a significant growth of this quantity along a series is flagged as; None: never flagged.
    pub flag: Option<FlagKind>,
    /// How it is read from a fit's derived quantities; None where the model has no such quantity.
    pub get: fn(&Derived) -> Option<Quantity>,
}

/// The battery quantities, in the order of the fit document and `results.csv`. Adding a quantity is
/// one row here (and its computation in [`derive()`]).
pub const QUANTITIES: &[QuantityKind] = &[
    QuantityKind {
        key: QuantityKey::Ohmic,
        column: "ohmic_resistance_ohm",
        label: "ohmic resistance",
        short: "ohmic",
        axis: "ohmic resistance",
        unit: "Ω",
        unit_ascii: "Ohm",
        in_results: true,
        flag: Some(FlagKind::OhmicGrowth),
        get: |d| d.ohmic_resistance,
    },
    QuantityKind {
        key: QuantityKey::ChargeTransfer,
        column: "charge_transfer_resistance_ohm",
        label: "charge-transfer (interface) resistance",
        short: "interface",
        axis: "charge transfer resistance",
        unit: "Ω",
        unit_ascii: "Ohm",
        in_results: true,
        flag: Some(FlagKind::InterfaceGrowth),
        get: |d| d.charge_transfer_resistance,
    },
    QuantityKind {
        key: QuantityKey::Diffusion,
        column: "diffusion_resistance_ohm",
        label: "diffusion resistance",
        short: "diffusion",
        axis: "diffusion resistance",
        unit: "Ω",
        unit_ascii: "Ohm",
        in_results: true,
        flag: Some(FlagKind::TransportGrowth),
        get: |d| d.diffusion_resistance,
    },
    QuantityKind {
        key: QuantityKey::Dc,
        column: "dc_resistance_ohm",
        label: "DC resistance",
        short: "DC",
        axis: "dc resistance",
        unit: "Ω",
        unit_ascii: "Ohm",
        in_results: true,
        flag: None,
        get: |d| d.dc_resistance,
    },
    QuantityKind {
        key: QuantityKey::WarburgSigma,
        column: "warburg_sigma_ohm_s_half",
        label: "Warburg coefficient",
        short: "Warburg σ",
        axis: "Warburg coefficient",
        unit: "Ω s^-1/2",
        unit_ascii: "Ohm s^-1/2",
        in_results: false,
        flag: None,
        get: |d| d.warburg_sigma,
    },
    QuantityKind {
        key: QuantityKey::Pore,
        column: "pore_resistance_ohm",
        label: "pore (ionic) resistance",
        short: "pore",
        axis: "pore resistance",
        unit: "Ω",
        unit_ascii: "Ohm",
        in_results: false,
        flag: None,
        get: |d| d.pore_resistance,
    },
];

/// The row of a `results.csv` column, if it is a battery quantity.
pub fn quantity_of_column(column: &str) -> Option<&'static QuantityKind> {
    QUANTITIES.iter().find(|q| q.column == column)
}

/// The `results.csv` column of the resistance of the arc whose resistor is `resistor`.
pub fn arc_column(resistor: &str) -> String {
    format!("arc_{resistor}_resistance_ohm")
}

/// Whether `column` is an arc's resistance column (see [`arc_column`]).
pub fn is_arc_column(column: &str) -> bool {
    column.starts_with("arc_") && column.ends_with("_resistance_ohm")
}

/// Estimates from the DC resistance and an open-circuit voltage.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct ShortCircuitEstimate {
    /// Open-circuit voltage used (V).
    pub ocv: f64,
    /// V/R_dc (A): the current a dead short would draw if the cell stayed linear. An estimate only.
    pub short_circuit_current: Quantity,
    /// V²/(4R_dc) (W): power into a matched load.
    pub matched_load_power: Quantity,
}

/// The caution printed beside short-circuit estimates.
pub const SHORT_CIRCUIT_CAUTION: &str = "estimates from a linear small-signal model, not ratings: a real \
cell departs from them at high current, and shorting a cell is dangerous (heat, fire, venting). Never test \
them by shorting a cell; follow your lab's safety rules";

/// Pairs of circuit parameter index and partial derivative.
type Gradient = Vec<(usize, f64)>;

/// Propagates a gradient (pairs of circuit parameter index and ∂f/∂p) through the fit covariance.
/// None if a free parameter involved has no standard error.
fn delta(r: &FitResult, grad: &[(usize, f64)]) -> Option<f64> {
    let mut var = 0.0;
    for &(i, gi) in grad {
        if gi == 0.0 || r.fixed[i] {
            continue;
        }
        r.stderr[i]?;
        for &(j, gj) in grad {
            if gj != 0.0 && !r.fixed[j] {
                var += gi * gj * r.covariance_of(i, j);
            }
        }
    }
    Some(var.max(0.0).sqrt())
}

/// Value and central-difference gradient of a limit (only over resistances that matter).
fn limit_quantity(c: &Circuit, r: &FitResult, high: bool, zero: &[usize]) -> Option<Quantity> {
    let mut values = r.values.clone();
    for &i in zero {
        values[i] = 0.0;
    }
    let base = circuit_limit(c, &values, high);
    if (!high && base.open) || !base.real.is_finite() {
        return None;
    }
    let mut grad = Vec::new();
    for &i in r.free.iter().filter(|i| !zero.contains(i)) {
        let h = 1e-6 * values[i].abs().max(1e-300);
        let mut up = values.clone();
        up[i] += h;
        let mut dn = values.clone();
        dn[i] -= h;
        let g = (circuit_limit(c, &up, high).real - circuit_limit(c, &dn, high).real) / (2.0 * h);
        if g.is_finite() && g != 0.0 {
            grad.push((i, g));
        }
    }
    Some(Quantity {
        value: base.real,
        stderr: delta(r, &grad),
    })
}

/// An arc found in the tree: resistor and capacitive element (element indices), and whether its
/// branch holds a diffusion element.
struct ArcShape {
    resistor: usize,
    capacitor: usize,
    with_diffusion: bool,
}

fn find_arcs(c: &Circuit, node: &Node, out: &mut Vec<ArcShape>) {
    match node {
        Node::Element(_) => {}
        Node::Series(ch) => ch.iter().for_each(|n| find_arcs(c, n, out)),
        Node::Parallel(ch) => {
            let caps: Vec<usize> = ch
                .iter()
                .filter_map(|n| match n {
                    Node::Element(i) if c.elements[*i].kind.is_capacitive() => Some(*i),
                    _ => None,
                })
                .collect();
            let others: Vec<&Node> = ch
                .iter()
                .filter(|n| !matches!(n, Node::Element(i) if c.elements[*i].kind.is_capacitive()))
                .collect();
            if caps.len() == 1 && others.len() == 1 {
                let parts: Vec<&Node> = match others[0] {
                    Node::Series(s) => s.iter().collect(),
                    n => vec![n],
                };
                let resistors: Vec<usize> = parts
                    .iter()
                    .filter_map(|n| match n {
                        Node::Element(i) if c.elements[*i].kind.class == Class::Resistive => {
                            Some(*i)
                        }
                        _ => None,
                    })
                    .collect();
                let with_diffusion = parts.iter().any(|n| {
                    matches!(n, Node::Element(i) if c.elements[*i].kind.class == Class::Diffusive)
                });
                if resistors.len() == 1 {
                    out.push(ArcShape {
                        resistor: resistors[0],
                        capacitor: caps[0],
                        with_diffusion,
                    });
                }
            }
            ch.iter().for_each(|n| find_arcs(c, n, out));
        }
    }
}

/// Derives the battery quantities of a fitted circuit.
pub fn derive(c: &Circuit, r: &FitResult) -> Derived {
    let p = &r.values;
    let ohmic = limit_quantity(c, r, true, &[]);
    let rs = ohmic.map(|q| q.value).unwrap_or(0.0);
    let ohmic_grad = ohmic_gradient(c, r);
    let mut shapes = Vec::new();
    find_arcs(c, &c.root, &mut shapes);
    let mut arcs: Vec<Arc> = shapes
        .iter()
        .map(|s| arc(c, r, s, rs, &ohmic_grad))
        .collect();
    let facts: Vec<ArcFacts> = shapes
        .iter()
        .zip(&arcs)
        .map(|(s, a)| ArcFacts {
            resistor: a.resistor.clone(),
            resistance_param: c.elements[s.resistor].first_param,
            with_diffusion: s.with_diffusion,
            tau: a.time_constant.value,
            capacitance: a.capacitance.value,
        })
        .collect();
    let classes = classify(c, r, &facts);
    for (a, &(role, from_circuit, placement)) in arcs.iter_mut().zip(&classes.arcs) {
        a.role = role;
        a.role_from_circuit = from_circuit;
        a.placement = placement;
    }
    let dc = limit_quantity(c, r, false, &classes.left_out_of_dc);

    let sum_of = |idx: &[usize]| -> Option<Quantity> {
        if idx.is_empty() {
            return None;
        }
        let grad: Vec<(usize, f64)> = idx.iter().map(|&i| (i, 1.0)).collect();
        Some(Quantity {
            value: idx.iter().map(|&i| p[i]).sum(),
            stderr: delta(r, &grad),
        })
    };
    let (diffusion_tails, warburg_sigma) = tails(c, r, &classes.sigma, &classes.tails);
    Derived {
        ohmic_resistance: ohmic,
        charge_transfer_resistance: sum_of(&classes.charge_transfer),
        diffusion_resistance: sum_of(&classes.diffusion),
        warburg_sigma,
        dc_resistance: dc,
        pore_resistance: sum_of(&classes.pore),
        arcs,
        diffusion_tails,
        beyond_data: classes.beyond,
    }
}

/// Gradient of the ohmic resistance over the free parameters (central differences), for Brug
/// capacitances that depend on it.
fn ohmic_gradient(c: &Circuit, r: &FitResult) -> Gradient {
    let p = &r.values;
    r.free
        .iter()
        .filter_map(|&i| {
            let h = 1e-6 * p[i].abs().max(1e-300);
            let mut up = p.clone();
            up[i] += h;
            let mut dn = p.clone();
            dn[i] -= h;
            let g =
                (circuit_limit(c, &up, true).real - circuit_limit(c, &dn, true).real) / (2.0 * h);
            (g.is_finite() && g != 0.0).then_some((i, g))
        })
        .collect()
}

/// The arc `s` of the fit `r`: its resistance, time constant, peak frequency and effective
/// capacitance with their standard errors; `rs` is the ohmic resistance and `ohmic_grad` its
/// gradient. Its role and placement are set later, from the whole circuit.
fn arc(c: &Circuit, r: &FitResult, s: &ArcShape, rs: f64, ohmic_grad: &[(usize, f64)]) -> Arc {
    let p = &r.values;
    let ri = c.elements[s.resistor].first_param;
    let ce = &c.elements[s.capacitor];
    let ci = ce.first_param;
    let rv = p[ri];
    let resistance = Quantity {
        value: rv,
        stderr: delta(r, &[(ri, 1.0)]),
    };
    let (tau, tau_grad, cap, cap_grad): (f64, Gradient, f64, Gradient) =
        // A capacitive element of one parameter is an ideal capacitor; a CPE has two (Q, n).
        if ce.kind.params.len() == 1 {
            let cv = p[ci];
            (rv * cv, vec![(ri, cv), (ci, rv)], cv, vec![(ci, 1.0)])
        } else {
            let (q, n) = (p[ci], p[ci + 1]);
            let tau = (rv * q).powf(1.0 / n);
            let tg = vec![
                (ri, tau / (n * rv)),
                (ci, tau / (n * q)),
                (ci + 1, -tau * (rv * q).ln() / (n * n)),
            ];
            let (cap, cg) = brug((ri, rv), (ci, q, n), rs, ohmic_grad);
            (tau, tg, cap, merge(cg))
        };
    let tau_se = delta(r, &tau_grad);
    let determined = resistance.stderr.is_some_and(|se| se <= rv.abs()) && r.free.contains(&ri);
    Arc {
        resistor: c.elements[s.resistor].name.clone(),
        capacitor: ce.name.clone(),
        resistance,
        time_constant: Quantity {
            value: tau,
            stderr: tau_se,
        },
        peak_frequency: Quantity {
            value: 1.0 / (2.0 * PI * tau),
            stderr: tau_se.map(|se| se / (2.0 * PI * tau * tau)),
        },
        capacitance: Quantity {
            value: cap,
            stderr: delta(r, &cap_grad),
        },
        role: Role::Other,
        role_from_circuit: false,
        placement: Placement::InWindow,
        determined: determined || (r.fixed[ri]),
    }
}

/// Brug's effective capacitance of an arc of resistance `rv` (parameter `ri`) and CPE (Q, n)
/// (parameters `ci`, `ci + 1`) in series with the ohmic resistance `rs` (gradient `ohmic_grad`),
/// with its gradient (unmerged): ln C = (1/n) ln Q + ((n−1)/n) ln S, S = 1/R_s + 1/R.
fn brug(
    (ri, rv): (usize, f64),
    (ci, q, n): (usize, f64, f64),
    rs: f64,
    ohmic_grad: &[(usize, f64)],
) -> (f64, Gradient) {
    if rs > 0.0 {
        let sum = 1.0 / rs + 1.0 / rv;
        let cap = q.powf(1.0 / n) * sum.powf((n - 1.0) / n);
        let dln_ds = (n - 1.0) / n / sum;
        let mut g = vec![
            (ci, cap / (n * q)),
            (ci + 1, cap * (-q.ln() / (n * n) + sum.ln() / (n * n))),
            (ri, cap * dln_ds * (-1.0 / (rv * rv))),
        ];
        for &(i, gi) in ohmic_grad {
            g.push((i, cap * dln_ds * (-1.0 / (rs * rs)) * gi));
        }
        (cap, g)
    } else {
        // No series resistance: the R_s → ∞ limit, C = Q^(1/n)·R^((1−n)/n).
        let cap = q.powf(1.0 / n) * rv.powf((1.0 - n) / n);
        (
            cap,
            vec![
                (ci, cap / (n * q)),
                (ci + 1, cap * (-q.ln() / (n * n) - rv.ln() / (n * n))),
                (ri, cap * (1.0 - n) / (n * rv)),
            ],
        )
    }
}

/// The still-rising diffusion tails (elements `tails`) with their Warburg coefficients and lower
/// bounds of resistance, and the Warburg coefficient of the circuit: the σ parameters `sigma` plus
/// every tail's.
fn tails(
    c: &Circuit,
    r: &FitResult,
    sigma: &[usize],
    tails: &[usize],
) -> (Vec<DiffusionTail>, Option<Quantity>) {
    let p = &r.values;
    let mut diffusion_tails = Vec::new();
    let mut sigma_value: f64 = sigma.iter().map(|&i| p[i]).sum();
    let mut sigma_grad: Vec<(usize, f64)> = sigma.iter().map(|&i| (i, 1.0)).collect();
    for &k in tails {
        let Some(((sigma, gs), (at_least, gl))) = tail_values(c, r, k) else {
            continue;
        };
        sigma_value += sigma;
        sigma_grad.extend(gs.iter().copied());
        diffusion_tails.push(DiffusionTail {
            element: c.elements[k].name.clone(),
            sigma: Quantity {
                value: sigma,
                stderr: delta(r, &gs),
            },
            resistance_at_least: Quantity {
                value: at_least,
                stderr: delta(r, &gl),
            },
        });
    }
    let warburg_sigma = (!sigma_grad.is_empty()).then(|| Quantity {
        value: sigma_value,
        stderr: delta(r, &sigma_grad),
    });
    (diffusion_tails, warburg_sigma)
}

/// Adds up repeated indices of a gradient.
fn merge(mut g: Vec<(usize, f64)>) -> Vec<(usize, f64)> {
    g.sort_by_key(|x| x.0);
    let mut out: Vec<(usize, f64)> = Vec::with_capacity(g.len());
    for (i, v) in g {
        match out.last_mut() {
            Some(last) if last.0 == i => last.1 += v,
            _ => out.push((i, v)),
        }
    }
    out
}

/// Short-circuit current V/R_dc and matched-load power V²/(4R_dc) with their standard errors.
/// Read [`SHORT_CIRCUIT_CAUTION`] before using them.
pub fn short_circuit(ocv: f64, dc: Quantity) -> ShortCircuitEstimate {
    let r = dc.value;
    ShortCircuitEstimate {
        ocv,
        short_circuit_current: Quantity {
            value: ocv / r,
            stderr: dc.stderr.map(|se| ocv.abs() * se / (r * r)),
        },
        matched_load_power: Quantity {
            value: ocv * ocv / (4.0 * r),
            stderr: dc.stderr.map(|se| ocv * ocv * se / (4.0 * r * r)),
        },
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Every key has its own row, and no two rows share a column: the fit document and `results.csv`
    /// are written from the table alone.
    #[test]
    fn quantity_table_has_one_row_per_key_and_distinct_columns() {
        let keys = [
            QuantityKey::Ohmic,
            QuantityKey::ChargeTransfer,
            QuantityKey::Diffusion,
            QuantityKey::Dc,
            QuantityKey::WarburgSigma,
            QuantityKey::Pore,
        ];
        assert_eq!(keys.len(), QUANTITIES.len());
        for k in keys {
            assert_eq!(k.row().key, k);
            assert_eq!(quantity_of_column(k.column()).map(|q| q.key), Some(k));
        }
        for (i, a) in QUANTITIES.iter().enumerate() {
            for b in &QUANTITIES[i + 1..] {
                assert_ne!(a.column, b.column);
            }
            assert!(!is_arc_column(a.column), "{} reads as an arc", a.column);
        }
        assert!(is_arc_column(&arc_column("Rf")));
    }

    /// Each row reads its own quantity from a fit: the ohmic resistance of R0 + Rct|Cdl is R0 and its
    /// DC resistance R0 + Rct (Ohm's law for resistors in series, common practice).
    #[test]
    fn quantity_rows_read_their_own_value_from_a_fit() {
        let c = crate::circuit::parse("R0 + Rct|Cdl").unwrap();
        let f: Vec<f64> = (0..30).map(|k| 10f64.powf(5.0 - 0.25 * k as f64)).collect();
        let truth = [0.02, 0.05, 1e-3];
        let s = crate::simulate::simulate(&crate::eval::Plan::compile(&c), &truth, &f, None);
        let r = crate::fit::fit(&c, &s, &crate::fit::FitSettings::default(), Some(&truth)).unwrap();
        let d = derive(&c, &r);
        let value = |k: QuantityKey| (k.row().get)(&d).map(|q| q.value);
        let close = |v: Option<f64>, want: f64| v.is_some_and(|v| (v - want).abs() < 1e-7);
        assert!(close(value(QuantityKey::Ohmic), 0.02));
        assert!(close(value(QuantityKey::ChargeTransfer), 0.05));
        assert!(close(value(QuantityKey::Dc), 0.07));
        assert_eq!(value(QuantityKey::Diffusion), None);
        assert_eq!(value(QuantityKey::WarburgSigma), None);
    }
}
