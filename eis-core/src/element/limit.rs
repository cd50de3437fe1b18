//! Limits of a whole circuit at direct current and infinite frequency, combined from the limit
//! functions of its elements' table rows.

use super::Limit;
use crate::circuit::{Circuit, Node};

/// The [`Limit`] of a whole circuit at parameter values `p` (circuit order) as ω → ∞ (`high`) or
/// ω → 0, combined from its elements' limit functions: series limits add; a parallel group is open
/// when every branch is, is shorted by a branch of zero limit, and otherwise combines its finite
/// branches' real parts as parallel resistances (open branches carry no current). The real part of an
/// all-open parallel group is undetermined (NaN).
///
/// ```
/// use eis_core::{circuit::parse, element::circuit_limit};
/// let c = parse("R0 + Rct|Qdl + Wd").unwrap();
/// let p = c.default_values();
/// assert_eq!(circuit_limit(&c, &p, true).real, p[0]);
/// assert!(circuit_limit(&c, &p, false).open);
/// ```
pub fn circuit_limit(c: &Circuit, p: &[f64], high: bool) -> Limit {
    node_limit(c, &c.root, p, high)
}

fn node_limit(c: &Circuit, node: &Node, p: &[f64], high: bool) -> Limit {
    use Node;
    match node {
        Node::Element(i) => {
            let e = &c.elements[*i];
            let q = p
                .get(e.first_param..e.first_param + e.kind.params.len())
                .unwrap_or(&[]);
            if q.len() != e.kind.params.len() {
                return Limit::finite(f64::NAN);
            }
            (e.kind.limit)(q, high)
        }
        Node::Series(ch) => {
            let mut out = Limit::finite(0.0);
            for n in ch {
                let l = node_limit(c, n, p, high);
                out.real += l.real;
                out.open |= l.open;
            }
            out
        }
        Node::Parallel(ch) => {
            let mut closed = 0;
            let mut conductance = 0.0;
            for n in ch {
                let l = node_limit(c, n, p, high);
                if l.open {
                    continue;
                }
                if l.real == 0.0 {
                    return Limit::finite(0.0);
                }
                closed += 1;
                conductance += 1.0 / l.real;
            }
            if closed == 0 {
                Limit::open(f64::NAN)
            } else {
                Limit::finite(1.0 / conductance)
            }
        }
    }
}
