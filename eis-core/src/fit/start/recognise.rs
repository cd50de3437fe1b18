//! Reading a circuit as a list of the usual battery blocks in series.

use super::{Cap, Term};
use crate::circuit::{Circuit, Node};
use crate::element::{Class, Seed};

/// Reads the circuit as a list of building blocks in series, if it is made of them.
pub(crate) fn recognise(c: &Circuit) -> Option<Vec<Term>> {
    let top: Vec<&Node> = match &c.root {
        Node::Series(ch) => ch.iter().collect(),
        other => vec![other],
    };
    top.into_iter().map(|n| block(c, n, true)).collect()
}

/// One block. At the top level: any element the seeds know (linear elements, capacitors and CPEs in
/// series, features) and arcs; in an arc's resistive branch, beside its resistor, only diffusive and
/// feature elements (diffusion hung on the charge-transfer resistance).
fn block(c: &Circuit, node: &Node, top: bool) -> Option<Term> {
    match node {
        Node::Element(i) => {
            let e = &c.elements[*i];
            let (kind, first) = (e.kind, e.first_param);
            match kind.seed {
                Seed::Feature { .. } => Some(Term::Feature { kind, first }),
                Seed::Linear { .. } | Seed::Capacitive { .. }
                    if top || kind.class == Class::Diffusive =>
                {
                    Some(Term::Linear { kind, first })
                }
                _ => None,
            }
        }
        Node::Parallel(ch) if top && ch.len() == 2 => {
            let (cap_node, branch) = if is_cap(c, &ch[0]) {
                (&ch[0], &ch[1])
            } else if is_cap(c, &ch[1]) {
                (&ch[1], &ch[0])
            } else {
                return None;
            };
            let Node::Element(ci) = cap_node else {
                return None;
            };
            let ce = &c.elements[*ci];
            let cap = Cap {
                kind: ce.kind,
                first: ce.first_param,
            };
            let parts: Vec<&Node> = match branch {
                Node::Series(s) => s.iter().collect(),
                other => vec![other],
            };
            let mut r = None;
            let mut inner = Vec::new();
            for part in parts {
                match part {
                    Node::Element(i)
                        if c.elements[*i].kind.class == Class::Resistive && r.is_none() =>
                    {
                        r = Some(c.elements[*i].first_param);
                    }
                    other => inner.push(block(c, other, false)?),
                }
            }
            Some(Term::Arc { r: r?, cap, inner })
        }
        _ => None,
    }
}

/// Whether a node is a single capacitive element with a seed for arcs.
fn is_cap(c: &Circuit, n: &Node) -> bool {
    matches!(n, Node::Element(i) if matches!(c.elements[*i].kind.seed, Seed::Capacitive { .. }))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn recognises_the_library_shapes() {
        let c = crate::circuit::parse("L0 + R0 + Rf|Qf + (Rct + Wtd)|Qdl").unwrap();
        let t = recognise(&c).unwrap();
        assert_eq!(t.len(), 4);
        assert!(matches!(&t[3], Term::Arc { r: 5, inner, .. } if inner.len() == 1));
        assert!(recognise(&crate::circuit::parse("R1|(R2 + C2|(R3 + G3))|Q4").unwrap()).is_none());
    }
}
