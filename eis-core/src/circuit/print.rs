//! The canonical printer: single spaces around `+`, none around `|`, parentheses only where needed,
//! annotations inline, numbers in their shortest exact form with SI prefixes. Role lines follow the
//! expression. `parse(print(c)) == c` for every circuit.

use super::ast::{Circuit, Node};
use crate::number::format_si;
use std::fmt::Write;

/// The canonical text of a circuit, with role lines after the expression.
pub fn print(c: &Circuit) -> String {
    let mut out = print_expression(c);
    for (name, role) in &c.roles {
        let _ = write!(out, "\nrole {name} = {}", role.as_str());
    }
    out
}

/// The canonical expression alone (no role lines).
pub fn print_expression(c: &Circuit) -> String {
    let mut out = String::new();
    node(c, &c.root, &mut out);
    out
}

fn node(c: &Circuit, n: &Node, out: &mut String) {
    match n {
        Node::Element(i) => element(c, *i, out),
        Node::Series(children) => {
            for (k, ch) in children.iter().enumerate() {
                if k > 0 {
                    out.push_str(" + ");
                }
                node(c, ch, out);
            }
        }
        Node::Parallel(children) => {
            for (k, ch) in children.iter().enumerate() {
                if k > 0 {
                    out.push('|');
                }
                let paren = matches!(ch, Node::Series(_));
                if paren {
                    out.push('(');
                }
                node(c, ch, out);
                if paren {
                    out.push(')');
                }
            }
        }
    }
}

fn element(c: &Circuit, i: usize, out: &mut String) {
    let e = &c.elements[i];
    out.push_str(&e.name);
    let n = e.kind.params.len();
    let mut clauses = Vec::new();
    for k in 0..n {
        let p = &c.params[e.first_param + k];
        let mut items = Vec::new();
        if let Some(v) = p.initial {
            items.push(format_si(v));
        }
        if p.lower.is_some() || p.upper.is_some() {
            items.push(format!(
                "{}..{}",
                p.lower.map(format_si).unwrap_or_default(),
                p.upper.map(format_si).unwrap_or_default()
            ));
        }
        if p.fixed {
            items.push("fixed".to_owned());
        }
        if items.is_empty() {
            continue;
        }
        let body = items.join(" ");
        if n == 1 {
            clauses.push(body);
        } else {
            clauses.push(format!("{}={body}", e.kind.params[k].name));
        }
    }
    if !clauses.is_empty() {
        let _ = write!(out, "{{{}}}", clauses.join(", "));
    }
}
