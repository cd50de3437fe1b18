//! Roles by physics: which processes of a fitted circuit count as charge transfer, as diffusion, as
//! pore (ionic) resistance, and which lie beyond the data. [`crate::derive`] sums by these roles.
//!
//! # The rule
//!
//! 1. **Window.** Each process has a characteristic frequency f_c = 1/(2πτ): an arc's τ = RC or
//!    (RQ)^(1/n); a porous line's is that of its interface, (Rct·Q)^(1/n); a finite diffusion element's
//!    is its own τ. A process whose f_c lies below f_lo/[`WINDOW_MARGIN`] or above
//!    f_hi·[`WINDOW_MARGIN`] (f_lo, f_hi the lowest and highest measured frequency) is **beyond the
//!    data**: the spectrum shows at most one flank of it, so its resistance is an extrapolation. It is
//!    listed as such and not summed into the charge-transfer, diffusion or DC resistance.
//! 2. **Still-rising diffusion tail.** A finite diffusion element (`Wt`, `Wr`) below the window is a
//!    tail that still rises at the lowest frequency: over the data it is the semi-infinite Warburg
//!    R/√(jωτ), so it is reported by its Warburg coefficient σ = R/√(2τ) (the same σ as in
//!    σ(1−j)/√ω) and by the lower bound Re Z(ω_lo) on its resistance, never by R itself (R and τ then
//!    run off together, e.g. to τ = 1e25 s). A semi-infinite Warburg `W` is reported by σ as before.
//! 3. **Role lines win.** A `role` line of the circuit file sets an arc's role; the window test of
//!    rule 1 still applies (it is about what the data show, not about physics).
//! 4. **Physics from the element table** ([`crate::element::Physics`]). A porous line (`Pe`, `Pm`) is kinetic through its interface
//!    (its `Rct` is charge transfer, unless rule 5 finds its interface capacitance storage-sized) and
//!    ionic through its rail (`Rion` is pore resistance). An arc
//!    whose resistive branch holds a diffusion element (a Randles arc) is read like any other arc by
//!    rule 5 (a fit can hang a diffusion pseudo-capacitance there). `Wt`, `Wr` inside the window are
//!    diffusion resistances.
//! 5. **Arcs by their effective capacitance**, measured against a double-layer reference C_dl:
//!    the largest capacitance among the arcs and porous interfaces in the window once those above a
//!    gap of [`STORAGE_RATIO`] are set aside. A double layer stores far less charge than the bulk of an electrode, and a dielectric
//!    film less than a double layer (common practice: chemical or intercalation capacitances are
//!    thousands of times a double layer's, film capacitances one to two orders below it). So an arc with
//!    C_eff > [`STORAGE_RATIO`]·C_dl is diffusion (chemical storage, e.g. the pseudo-arc of solid
//!    diffusion); an arc faster than the reference with C_eff < C_dl/[`FILM_RATIO`] is a film; every
//!    other arc is charge transfer. This uses neither the arc's place in the formula nor its size.
//!
//! Charge-transfer resistance = the in-window arcs of role charge-transfer plus the in-window porous
//! `Rct`s of double-layer size. Diffusion resistance = the in-window `Wt`/`Wr` resistances plus the
//! in-window arcs of role diffusion and storage-sized porous `Rct`s. Pore resistance = the porous `Rion`s.

use crate::circuit::{Circuit, Role};
use crate::element::{Class, ElementKind, Grid, Physics};
use crate::fit::FitResult;
use num_complex::Complex64;
use std::f64::consts::PI;

/// A process counts as beyond the data when its characteristic frequency lies more than this factor
/// outside the measured window (an arc's apex then lies beyond the last point by more than a factor 2,
/// so at most one flank of it is measured).
pub const WINDOW_MARGIN: f64 = 2.0;

/// Effective capacitance above the double-layer reference by this factor marks chemical storage
/// (a diffusion pseudo-arc).
pub const STORAGE_RATIO: f64 = 1000.0;

/// Effective capacitance below the double-layer reference by this factor (and a faster arc) marks a
/// surface film.
pub const FILM_RATIO: f64 = 30.0;

/// Where a characteristic frequency lies against the measured window.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Placement {
    /// Inside the window (with its margin).
    InWindow,
    /// Below the lowest frequency by more than the margin: slower than the data reach.
    BelowWindow,
    /// Above the highest frequency by more than the margin: faster than the data reach.
    AboveWindow,
}

impl Placement {
    /// Placement of a characteristic frequency `f_hz` against `window` (lowest, highest) in Hz.
    /// A NaN window (no data) places everything inside.
    pub fn of(f_hz: f64, window: (f64, f64)) -> Placement {
        if f_hz < window.0 / WINDOW_MARGIN {
            Placement::BelowWindow
        } else if f_hz > window.1 * WINDOW_MARGIN {
            Placement::AboveWindow
        } else {
            Placement::InWindow
        }
    }

    /// Words for outputs: `below the lowest measured frequency`, ...
    pub fn as_str(self) -> &'static str {
        match self {
            Placement::InWindow => "inside the measured window",
            Placement::BelowWindow => "below the lowest measured frequency",
            Placement::AboveWindow => "above the highest measured frequency",
        }
    }
}

/// A process the data do not reach: not summed into charge-transfer, diffusion or DC resistance.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct BeyondData {
    /// The arc (`R2|Q2`) or element (`Pe1`, `Wt1`).
    pub process: String,
    /// Its characteristic frequency (Hz).
    pub frequency_hz: f64,
    /// Which side of the window.
    pub placement: Placement,
}

/// A finite diffusion element whose characteristic frequency lies below the window: a tail still
/// rising at the lowest measured frequency.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct DiffusionTail {
    /// The element (`Wt3`).
    pub element: String,
    /// Warburg coefficient σ = R/√(2τ) (Ω·s^−½), what the data determine.
    pub sigma: crate::derive::Quantity,
    /// Re Z of the element at the lowest measured frequency (Ω): its resistance is at least this.
    pub resistance_at_least: crate::derive::Quantity,
}

/// What derive needs to know about one arc.
#[derive(Debug, Clone)]
pub struct ArcFacts {
    /// Name of the arc's resistor.
    pub resistor: String,
    /// Index of the resistor's parameter.
    pub resistance_param: usize,
    /// Whether the resistive branch holds a diffusion element (a Randles arc).
    pub with_diffusion: bool,
    /// Time constant (s).
    pub tau: f64,
    /// Effective capacitance (F).
    pub capacitance: f64,
}

/// The classification of a fitted circuit's processes.
#[derive(Debug, Clone, Default)]
pub struct Classified {
    /// Per arc (in the order given): role, whether it came from the circuit file, placement.
    pub arcs: Vec<(Role, bool, Placement)>,
    /// Parameters summed into the charge-transfer resistance.
    pub charge_transfer: Vec<usize>,
    /// Parameters summed into the diffusion resistance.
    pub diffusion: Vec<usize>,
    /// Parameters summed into the pore (ionic) resistance.
    pub pore: Vec<usize>,
    /// Semi-infinite Warburg σ parameters.
    pub sigma: Vec<usize>,
    /// Resistance parameters left out of the DC resistance (processes beyond the data).
    pub left_out_of_dc: Vec<usize>,
    /// Processes beyond the data.
    pub beyond: Vec<BeyondData>,
    /// Finite diffusion elements seen only as a rising tail (element index).
    pub tails: Vec<usize>,
}

fn hz(tau: f64) -> f64 {
    1.0 / (2.0 * PI * tau)
}

/// Interface time constant and effective capacitance of a porous line's interface parameters
/// `[Rct, Q, n]`: τ = (Rct·Q)^(1/n), C = Q^(1/n)·Rct^((1−n)/n).
fn line_interface(q: &[f64]) -> (f64, f64) {
    let (rct, cq, n) = (q[0], q[1], q[2]);
    (
        (rct * cq).powf(1.0 / n),
        cq.powf(1.0 / n) * rct.powf((1.0 - n) / n),
    )
}

/// Classifies the processes of circuit `c` fitted as `r`; `arcs` as found by derive.
pub fn classify(c: &Circuit, r: &FitResult, arcs: &[ArcFacts]) -> Classified {
    let p = &r.values;
    let window = r.window_hz;
    let mut out = Classified::default();

    // Rule 4: porous lines and finite diffusion elements, by their kind.
    let mut lines: Vec<(usize, f64, f64)> = Vec::new(); // (Rct parameter, τ, C) of in-window lines
    for (index, e) in c.elements.iter().enumerate() {
        let at = |k: usize| e.first_param + k;
        match e.kind.physics {
            Physics::PorousLine { rail, interface } => {
                let rct = at(interface);
                let (tau, cap) = line_interface(&p[rct..rct + 3]);
                out.pore.push(at(rail));
                match Placement::of(hz(tau), window) {
                    Placement::InWindow => lines.push((rct, tau, cap)),
                    placement => {
                        out.left_out_of_dc.push(rct);
                        out.beyond.push(BeyondData {
                            process: e.name.clone(),
                            frequency_hz: hz(tau),
                            placement,
                        });
                    }
                }
            }
            Physics::FiniteDiffusion { resistance, tau } => {
                let f = hz(p[at(tau)]);
                match Placement::of(f, window) {
                    Placement::InWindow => out.diffusion.push(at(resistance)),
                    placement => {
                        out.left_out_of_dc.push(at(resistance));
                        if placement == Placement::BelowWindow {
                            out.tails.push(index);
                        }
                        out.beyond.push(BeyondData {
                            process: e.name.clone(),
                            frequency_hz: f,
                            placement,
                        });
                    }
                }
            }
            Physics::SemiInfiniteDiffusion { sigma } => out.sigma.push(at(sigma)),
            Physics::Plain => {}
        }
    }

    let placements: Vec<Placement> = arcs
        .iter()
        .map(|a| Placement::of(hz(a.tau), window))
        .collect();
    // Rule 5: the double-layer reference, over the in-window arcs and porous interfaces.
    let mut caps: Vec<(f64, f64)> = arcs
        .iter()
        .zip(&placements)
        .filter(|(_, pl)| **pl == Placement::InWindow)
        .map(|(a, _)| (a.capacitance, a.tau))
        .chain(lines.iter().map(|&(_, tau, cap)| (cap, tau)))
        .filter(|(cap, _)| cap.is_finite())
        .collect();
    caps.sort_by(|x, y| x.0.total_cmp(&y.0));
    let cut = caps
        .windows(2)
        .position(|w| w[1].0 > STORAGE_RATIO * w[0].0)
        .map_or(caps.len(), |k| k + 1);
    let reference: Option<(f64, f64)> = caps[..cut].last().copied();
    for &(rct, _, cap) in &lines {
        match reference {
            Some((c_ref, _)) if cap > STORAGE_RATIO * c_ref => out.diffusion.push(rct),
            _ => out.charge_transfer.push(rct),
        }
    }

    for (a, pl) in arcs.iter().zip(&placements) {
        let (role, from_circuit) = match c.role_of(&a.resistor) {
            Some(role) => (role, true),
            None => {
                let role = match reference {
                    Some((c_ref, _)) if a.capacitance > STORAGE_RATIO * c_ref => Role::Diffusion,
                    Some((c_ref, tau_ref))
                        if a.capacitance * FILM_RATIO < c_ref && a.tau < tau_ref =>
                    {
                        Role::Film
                    }
                    _ => Role::ChargeTransfer,
                };
                (role, false)
            }
        };
        out.arcs.push((role, from_circuit, *pl));
        if *pl == Placement::InWindow {
            match role {
                Role::ChargeTransfer => out.charge_transfer.push(a.resistance_param),
                Role::Diffusion => out.diffusion.push(a.resistance_param),
                _ => {}
            }
        } else {
            out.left_out_of_dc.push(a.resistance_param);
            out.beyond.push(BeyondData {
                process: a.resistor.clone(),
                frequency_hz: hz(a.tau),
                placement: *pl,
            });
        }
    }
    out
}

/// σ = R/√(2τ) and Re Z(ω_lo) with their gradients, for the finite diffusion element `element` of `c`.
/// Returns ((σ, ∇σ), (Re Z(ω_lo), ∇Re Z)) as (value, [(parameter, ∂/∂p)]), or `None` when the element
/// is not a finite diffusion element.
#[allow(clippy::type_complexity)]
pub fn tail_values(
    c: &Circuit,
    r: &FitResult,
    element: usize,
) -> Option<((f64, Vec<(usize, f64)>), (f64, Vec<(usize, f64)>))> {
    let e = c.elements.get(element)?;
    let Physics::FiniteDiffusion { resistance, tau } = e.kind.physics else {
        return None;
    };
    let (ri, ti) = (e.first_param + resistance, e.first_param + tau);
    let (rv, tau_v) = (r.values[ri], r.values[ti]);
    let sigma = rv / (2.0 * tau_v).sqrt();
    let grad_sigma = vec![(ri, 1.0 / (2.0 * tau_v).sqrt()), (ti, -0.5 * sigma / tau_v)];
    let grid = Grid::new(&[2.0 * PI * r.window_hz.0]);
    let count = e.kind.params.len();
    let mut z = [Complex64::new(0.0, 0.0)];
    let mut dz = vec![Complex64::new(0.0, 0.0); count];
    let q = &r.values[e.first_param..e.first_param + count];
    (e.kind.impedance)(q, &grid, &mut z, &mut dz);
    let at_least = (z[0].re, vec![(ri, dz[resistance].re), (ti, dz[tau].re)]);
    Some(((sigma, grad_sigma), at_least))
}

/// Why a fitted decomposition is physically implausible, if it is: an arc or porous electrode whose
/// characteristic frequency lies beyond the data, or a finite diffusion element inside the window whose
/// capacitance τ/R is that of a double layer (less than [`FILM_RATIO`] times the largest
/// charge-transfer process's), i.e. a kinetic arc fitted by a diffusion element.
pub fn implausible(c: &Circuit, r: &FitResult) -> Option<String> {
    let d = crate::derive::derive(c, r);
    let tails: Vec<&str> = d
        .diffusion_tails
        .iter()
        .map(|t| t.element.as_str())
        .collect();
    if let Some(b) = d.beyond_data.iter().find(|b| {
        !tails.contains(&b.process.as_str())
            && c.element_index(&b.process)
                .is_none_or(|i| !finite_diffusion(c.elements[i].kind))
    }) {
        return Some(format!(
            "it puts {} beyond the data ({:.3e} Hz)",
            b.process, b.frequency_hz
        ));
    }
    // The double-layer reference: the largest in-window charge-transfer process.
    let mut reference: Option<(f64, f64)> = d
        .arcs
        .iter()
        .filter(|a| a.placement == Placement::InWindow && a.role == Role::ChargeTransfer)
        .map(|a| (a.resistance.value, a.capacitance.value))
        .max_by(|x, y| x.0.total_cmp(&y.0));
    for e in &c.elements {
        let Physics::PorousLine { interface, .. } = e.kind.physics else {
            continue;
        };
        let at = e.first_param + interface;
        let (_, cap) = line_interface(&r.values[at..at + 3]);
        let rct = r.values[at];
        if reference.is_none_or(|(rr, _)| rct > rr) {
            reference = Some((rct, cap));
        }
    }
    if let Some(a) = d
        .arcs
        .iter()
        .find(|a| a.role == Role::Diffusion && randles(c, &a.resistor))
    {
        return Some(format!(
            "it puts a diffusion pseudo-capacitance in the Randles arc of {}",
            a.resistor
        ));
    }
    let (_, c_dl) = reference?;
    for e in &c.elements {
        let Physics::FiniteDiffusion { resistance, tau } = e.kind.physics else {
            continue;
        };
        let (rd, tau) = (
            r.values[e.first_param + resistance],
            r.values[e.first_param + tau],
        );
        if Placement::of(hz(tau), r.window_hz) == Placement::InWindow
            && tau / rd < FILM_RATIO * c_dl
        {
            return Some(format!(
                "its diffusion element {} holds a double-layer-sized capacitance (tau/R = {:.3e} F), a kinetic arc",
                e.name,
                tau / rd
            ));
        }
    }
    None
}

/// Whether `kind` is a finite diffusion element (one that a fit can push below the window as a tail).
fn finite_diffusion(kind: &ElementKind) -> bool {
    matches!(kind.physics, Physics::FiniteDiffusion { .. })
}

/// Whether the arc of resistor `name` has a diffusion element beside the resistor in its branch.
fn randles(c: &Circuit, name: &str) -> bool {
    fn walk(c: &Circuit, node: &crate::circuit::Node, name: &str) -> bool {
        use crate::circuit::Node;
        match node {
            Node::Element(_) => false,
            Node::Series(ch) => {
                let has_r = ch
                    .iter()
                    .any(|n| matches!(n, Node::Element(i) if c.elements[*i].name == name));
                let has_d = ch.iter().any(|n| {
                    matches!(n, Node::Element(i) if c.elements[*i].kind.class == Class::Diffusive)
                });
                (has_r && has_d) || ch.iter().any(|n| walk(c, n, name))
            }
            Node::Parallel(ch) => ch.iter().any(|n| walk(c, n, name)),
        }
    }
    walk(c, &c.root, name)
}
