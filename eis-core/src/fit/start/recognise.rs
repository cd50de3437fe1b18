//! Reading a circuit as a list of the usual battery blocks in series.

use super::{Cap, Term};
use crate::circuit::{Circuit, Node};

/// Reads the circuit as a list of building blocks in series, if it is made of them.
pub(crate) fn recognise(c: &Circuit) -> Option<Vec<Term>> {
    let top: Vec<&Node> = match &c.root {
        Node::Series(ch) => ch.iter().collect(),
        other => vec![other],
    };
    top.into_iter().map(|n| block(c, n, true)).collect()
}

fn block(c: &Circuit, node: &Node, top: bool) -> Option<Term> {
    match node {
        Node::Element(i) => {
            let e = &c.elements[*i];
            let p = e.first_param;
            Some(match e.kind.symbol {
                "R" if top => Term::Offset(p),
                "L" if top => Term::Inductance(p),
                "C" if top => Term::SeriesCap(p),
                "Q" if top => Term::SeriesCpe { q: p, n: p + 1 },
                "W" => Term::Warburg(p),
                "Wt" | "Wr" | "G" => Term::Diffusion {
                    kind: e.kind,
                    r: p,
                    tau: p + 1,
                },
                _ => return None,
            })
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
            let cap = match ce.kind.symbol {
                "C" => Cap::C(ce.first_param),
                _ => Cap::Q {
                    q: ce.first_param,
                    n: ce.first_param + 1,
                },
            };
            let parts: Vec<&Node> = match branch {
                Node::Series(s) => s.iter().collect(),
                other => vec![other],
            };
            let mut r = None;
            let mut inner = Vec::new();
            for part in parts {
                match part {
                    Node::Element(i) if c.elements[*i].kind.symbol == "R" && r.is_none() => {
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

fn is_cap(c: &Circuit, n: &Node) -> bool {
    matches!(n, Node::Element(i) if matches!(c.elements[*i].kind.symbol, "C" | "Q"))
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
