//! The circuit language: parsing, the parsed tree, the canonical printer and parameter overrides.
//!
//! ```text
//! R0 + Rsei|Qsei + (Rct + Wd)|Qdl      series with `+`, parallel with `|` (binds tighter), parentheses
//! Rct{50, 1m..1k}                      initial value 50 Ω, bounds 1 mΩ..1 kΩ
//! Qdl{Q=20u, n=0.9 0.5..1}             per-parameter annotations for multi-parameter elements
//! Wd{tau=1 fixed}                      held fixed during fits
//! ```
//!
//! Parameter names are the element name for one-parameter elements (`R0`, `Cdl`) and `name.param`
//! otherwise (`Qdl.Q`, `Qdl.n`, `Wd.R`, `Wd.tau`, `W1.sigma`).
//!
//! A circuit file (`.circ`) holds the expression (over one or more lines), `#` comments, parameter lines
//! such as `Qdl.n = 0.9 0.5..1` and role lines such as `role Rct = charge-transfer`.
//!
//! ```
//! use eis_core::circuit::{parse, print};
//! let c = parse("R0 + (Rct{50, 1..1k} + Wd) | Qdl{n=0.9 fixed}").unwrap();
//! assert_eq!(c.params.len(), 5);
//! assert_eq!(print(&c), "R0 + (Rct{50 1..1k} + Wd)|Qdl{n=0.9 fixed}");
//! assert_eq!(parse(&print(&c)).unwrap(), c);
//! ```

mod ast;
mod error;
mod parse;
mod print;

pub use ast::{Circuit, Element, Node, Param, Role, Span};
pub use error::{CircuitError, CircuitErrorKind};
pub use parse::{MAX_NESTING, parse};
pub use print::{print, print_expression};

use crate::element::KINDS;

/// The kind symbols, for messages: `R, C, L, Q, W, Wt, Wr, G`.
pub(crate) fn kind_list() -> String {
    KINDS
        .iter()
        .map(|k| k.symbol)
        .collect::<Vec<_>>()
        .join(", ")
}

impl Circuit {
    /// Applies an override written like an annotation on one parameter: `Rct=50`, `Rct=1..100`,
    /// `Qdl.n=0.9 fixed`, or a bare name with `fixed` added by the caller. Each property given replaces
    /// the circuit's own (an override, not a repetition); the result is checked like an annotation.
    ///
    /// # Errors
    ///
    /// A [`CircuitError`] whose text is `arg` itself, with the caret under the fault: unknown name (with
    /// a suggestion), bad number, value outside the parameter's domain, crossed bounds, initial value
    /// outside the bounds.
    pub fn apply_override(&mut self, arg: &str) -> Result<(), CircuitError> {
        parse::apply_override(self, arg)
    }
}
