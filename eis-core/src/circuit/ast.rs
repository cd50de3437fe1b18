//! The parsed form of a circuit: a tree of series and parallel groups over named elements, plus the
//! parameter table with initial values, bounds and fixed flags.

use crate::element::{Domain, ElementKind};
use std::ops::Range;

/// A byte range into the circuit text.
pub type Span = Range<usize>;

/// A node of the circuit tree.
///
/// Groups are flattened while parsing: `(R1 + R2) + R3` and `R1 + (R2 + R3)` are both one `Series` of three
/// children, and a parenthesised single node is that node.
#[derive(Debug, Clone, PartialEq)]
pub enum Node {
    /// One element, by index into [`Circuit::elements`]. Example: `Rct`.
    Element(usize),
    /// Impedances add. Example: `R0 + Rct|Qdl`.
    Series(Vec<Node>),
    /// Admittances add. Example: `Rct|Qdl`.
    Parallel(Vec<Node>),
}

/// One element of a circuit.
#[derive(Debug, Clone, PartialEq)]
pub struct Element {
    /// Its kind from the element library.
    pub kind: &'static ElementKind,
    /// Full name: kind symbol followed by the label (`Rct`, `Wtd`, `Q1`).
    pub name: String,
    /// Index of its first parameter in [`Circuit::params`]; its parameters follow contiguously.
    pub first_param: usize,
}

/// One parameter of a circuit with its annotations.
#[derive(Debug, Clone, PartialEq)]
pub struct Param {
    /// Full name: `R0` for one-parameter elements, `Qdl.n` otherwise.
    pub name: String,
    /// Index of the element in [`Circuit::elements`].
    pub element: usize,
    /// Index of the parameter within its kind's parameter table.
    pub index: usize,
    /// Initial value, if the circuit gives one.
    pub initial: Option<f64>,
    /// Lower bound, if given.
    pub lower: Option<f64>,
    /// Upper bound, if given.
    pub upper: Option<f64>,
    /// Held at its initial value during fits.
    pub fixed: bool,
}

/// Physical role of an arc (a resistance in parallel with a capacitive element), used to name derived
/// quantities. Written in circuit files as `role Rct = charge-transfer`.
#[derive(
    Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, serde::Serialize, serde::Deserialize,
)]
#[serde(rename_all = "kebab-case")]
pub enum Role {
    /// A surface film or solid-electrolyte interphase in front of the reaction (`film`).
    Film,
    /// The charge-transfer reaction across the double layer (`charge-transfer`).
    ChargeTransfer,
    /// A contact between active material and current collector (`contact`).
    Contact,
    /// Diffusion or chemical storage seen as an arc (`diffusion`): its resistance counts as diffusion
    /// resistance, not as charge transfer.
    Diffusion,
    /// Any other process (`other`).
    Other,
}

impl Role {
    /// The word used in circuit files and outputs.
    pub fn as_str(self) -> &'static str {
        match self {
            Role::Film => "film",
            Role::ChargeTransfer => "charge-transfer",
            Role::Contact => "contact",
            Role::Diffusion => "diffusion",
            Role::Other => "other",
        }
    }

    /// Parses the word used in circuit files.
    pub fn from_word(word: &str) -> Option<Role> {
        Some(match word {
            "film" => Role::Film,
            "charge-transfer" => Role::ChargeTransfer,
            "contact" => Role::Contact,
            "diffusion" => Role::Diffusion,
            "other" => Role::Other,
            _ => return None,
        })
    }
}

/// A parsed circuit.
#[derive(Debug, Clone, PartialEq)]
pub struct Circuit {
    /// The tree.
    pub root: Node,
    /// Elements in order of appearance.
    pub elements: Vec<Element>,
    /// Parameters in order of appearance (element by element, in each kind's parameter order).
    pub params: Vec<Param>,
    /// Roles given to arcs, by the name of the arc's resistor.
    pub roles: Vec<(String, Role)>,
}

impl Circuit {
    /// The index of the parameter called `name` (`Rct`, `Qdl.n`).
    pub fn param_index(&self, name: &str) -> Option<usize> {
        self.params.iter().position(|p| p.name == name)
    }

    /// The index of the element called `name`.
    pub fn element_index(&self, name: &str) -> Option<usize> {
        self.elements.iter().position(|e| e.name == name)
    }

    /// The unit of parameter `i`.
    pub fn unit(&self, i: usize) -> &'static str {
        let p = &self.params[i];
        self.elements[p.element].kind.params[p.index].unit
    }

    /// Library information about parameter `i`.
    pub fn info(&self, i: usize) -> &'static crate::element::ParamInfo {
        let p = &self.params[i];
        &self.elements[p.element].kind.params[p.index]
    }

    /// The bounds that apply to parameter `i`: the annotation's, else the domain's.
    pub fn bounds(&self, i: usize) -> (f64, f64) {
        let p = &self.params[i];
        let (lo, hi) = match self.info(i).domain {
            Domain::Positive => (0.0, f64::INFINITY),
            Domain::Interval(lo, hi) => (lo, hi),
        };
        (p.lower.unwrap_or(lo), p.upper.unwrap_or(hi))
    }

    /// Value to use for parameter `i` when none is set: the annotation's initial value, else the library
    /// default, moved inside the bounds if the default lies outside them.
    pub fn initial_or_default(&self, i: usize) -> f64 {
        if let Some(v) = self.params[i].initial {
            return v;
        }
        let d = self.info(i).default;
        let (lo, hi) = self.bounds(i);
        if d < lo || d > hi {
            if hi.is_finite() && lo > 0.0 {
                (lo * hi).sqrt()
            } else if hi.is_finite() {
                0.5 * (lo + hi)
            } else {
                lo * 10.0
            }
        } else {
            d
        }
    }

    /// Initial-or-default values of every parameter.
    pub fn default_values(&self) -> Vec<f64> {
        (0..self.params.len())
            .map(|i| self.initial_or_default(i))
            .collect()
    }

    /// The role given to the arc whose resistor is `resistor_name`, if any.
    pub fn role_of(&self, resistor_name: &str) -> Option<Role> {
        self.roles
            .iter()
            .find(|(n, _)| n == resistor_name)
            .map(|&(_, r)| r)
    }
}
