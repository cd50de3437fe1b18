//! Target `circuit`: the circuit parser with a round-trip oracle.
//!
//! Lines of the input that start with `@` are overrides, applied after parsing as `eis fit --fix`
//! applies its arguments (`@Rct=50`, `@Qdl.n=0.9 fixed`). Every text that parses (with its overrides)
//! is printed in canonical form and parsed again; the second parse must succeed and give the same
//! canonical text, the same parameter table (names, initial values, bounds, fixed flags), the same
//! elements, tree and roles. Every error must display (text, caret, line and column)
//! without panicking, and every parsed circuit must compile into an evaluation plan with one slot per
//! parameter.
//!
//! Inputs are random mutations of the repository's circuit files and of grammar-aware random circuits:
//! nested series and parallel groups, every element kind with random labels, annotations with numbers
//! in every notation the language takes, parameter lines, role lines, comments and stray whitespace.

use crate::engine::{Rng, Target, Violation};
use eis_core::circuit::{parse, print};
use eis_core::element::{Domain, KINDS};
use eis_core::eval::Plan;
use rand::RngExt;
use std::fmt::Write;

/// The circuit-parser target.
#[derive(Debug, Default, Clone, Copy)]
pub struct CircuitTarget;

const DICTIONARY: &[&[u8]] = &[
    b" + ",
    b"+",
    b"|",
    b"(",
    b")",
    b"((",
    b"))",
    b"{",
    b"}",
    b"{}",
    b"..",
    b"...",
    b"=",
    b", ",
    b"fixed",
    b" fixed",
    b"#",
    b"\n",
    b"\r\n",
    b"role ",
    b"role Rct = charge-transfer\n",
    b"film",
    b"contact",
    b"other",
    b".Q",
    b".n",
    b".tau",
    b".R",
    b".sigma",
    b"Q=",
    b"n=",
    b"tau=",
    b"R",
    b"C",
    b"L",
    b"Q",
    b"W",
    b"Wt",
    b"Wr",
    b"G",
    b"Rct",
    b"Qdl",
    b"\xc2\xb5",
    b"\xce\xbc",
    b"u",
    b"k",
    b"M",
    b"m",
    b"T",
    b"f",
    b"e-9",
    b"e+300",
    b"1e308",
    b"1e-320",
    b"\t",
    b"\xe2\x80\x8b",
    b"\xef\xbb\xbf",
    b"\xff",
    b"\n@",
    b"@Rct=",
    b"@R0=1..2 fixed",
];

const SEEDS: &[&str] = &[
    include_str!("../../../circuits/full-cell-inductive.circ"),
    include_str!("../../../circuits/randles-reflective.circ"),
    include_str!("../../../circuits/randles-semi-infinite.circ"),
    include_str!("../../../circuits/randles-transmissive.circ"),
    include_str!("../../../circuits/single-interface.circ"),
    include_str!("../../../circuits/two-interfaces.circ"),
    "R0 + Rct|Qdl",
    "R0 + (Rct{50, 1..1k} + Wd) | Qdl{n=0.9 fixed}",
    "L0 + R0 + Rfilm|Qfilm + (Rct + Wtd)|Qdl",
    "Qdl{Q=20u, n=0.9 0.5..1}",
];

impl Target for CircuitTarget {
    type Truth = ();

    fn name(&self) -> &'static str {
        "circuit"
    }

    fn generate(&self, rng: &mut Rng) -> (Vec<u8>, Option<()>) {
        (random_circuit(rng).into_bytes(), None)
    }

    fn seeds(&self) -> Vec<Vec<u8>> {
        SEEDS.iter().map(|s| s.as_bytes().to_vec()).collect()
    }

    fn dictionary(&self) -> &'static [&'static [u8]] {
        DICTIONARY
    }

    fn max_len(&self) -> usize {
        2048
    }

    fn execute(&self, input: &[u8], _truth: Option<&()>) -> Result<(), Violation> {
        let text = String::from_utf8_lossy(input);
        // Lines starting with `@` are overrides (as `eis fit --fix` passes them), not circuit text.
        let mut circuit = String::with_capacity(text.len());
        let mut overrides = Vec::new();
        for line in text.split_inclusive('\n') {
            match line.strip_prefix('@') {
                Some(o) => overrides.push(o.trim_end_matches(['\n', '\r'])),
                None => circuit.push_str(line),
            }
        }
        check(&circuit, &overrides)
    }

    fn describe_truth(&self, _truth: &()) -> String {
        String::new()
    }
}

/// The properties for one text and its overrides.
fn check(text: &str, overrides: &[&str]) -> Result<(), Violation> {
    let mut c = match parse(text) {
        Ok(c) => c,
        Err(e) => {
            // Displaying the error computes line, column and caret from the span.
            let shown = e.to_string();
            let (line, col) = e.line_col();
            if shown.is_empty() || line == 0 || col == 0 {
                return Err(Violation::new(
                    "error display: empty text or line/column 0",
                    format!("line {line}, column {col}, text {shown:?}"),
                ));
            }
            return Ok(());
        }
    };
    for o in overrides {
        if let Err(e) = c.apply_override(o) {
            let shown = e.to_string();
            if shown.is_empty() {
                return Err(Violation::new(
                    "override error with empty text",
                    format!("override {o:?}"),
                ));
            }
        }
    }
    let canonical = print(&c);
    let again = match parse(&canonical) {
        Ok(a) => a,
        Err(e) => {
            return Err(Violation::new(
                "round trip: the canonical text does not parse",
                format!("canonical {canonical:?}\n{e}"),
            ));
        }
    };
    let canonical_again = print(&again);
    if canonical_again != canonical {
        return Err(Violation::new(
            "round trip: the canonical text changes when printed again",
            format!("first {canonical:?}\nsecond {canonical_again:?}"),
        ));
    }
    if again.params != c.params {
        return Err(Violation::new(
            "round trip: the parameter table differs",
            format!(
                "canonical {canonical:?}\nfirst {:?}\nsecond {:?}",
                c.params, again.params
            ),
        ));
    }
    if again != c {
        return Err(Violation::new(
            "round trip: the elements, tree or roles differ",
            format!("canonical {canonical:?}"),
        ));
    }
    let plan = Plan::compile(&c);
    if plan.n_params() != c.params.len() {
        return Err(Violation::new(
            "compiled plan: parameter count differs from the circuit's",
            format!(
                "plan {} against circuit {} for {canonical:?}",
                plan.n_params(),
                c.params.len()
            ),
        ));
    }
    Ok(())
}

/// A random circuit text, mostly valid: an expression, then parameter and role lines.
pub fn random_circuit(rng: &mut Rng) -> String {
    let mut g = Gen {
        names: Vec::new(),
        out: String::new(),
    };
    if rng.random_ratio(1, 8) {
        g.out.push_str("# a random circuit\n");
    }
    let depth = rng.random_range(0..3);
    g.series(rng, depth);
    if rng.random_ratio(1, 6) {
        g.out.push_str("  # trailing comment");
    }
    g.out.push('\n');
    let lines = if g.names.is_empty() {
        0
    } else {
        rng.random_range(0..4)
    };
    for _ in 0..lines {
        let e = rng.random_range(0..g.names.len());
        let (name, kind, annotated) = g.names[e].clone();
        let k = &KINDS[kind];
        let p = rng.random_range(0..k.params.len());
        // A parameter annotated twice is an error; allow it now and then.
        if annotated[p] && !rng.random_ratio(1, 20) {
            continue;
        }
        g.names[e].2[p] = true;
        let full = if k.params.len() == 1 {
            name.clone()
        } else {
            format!("{name}.{}", k.params[p].name)
        };
        let items = items(rng, k.params[p].domain);
        let _ = writeln!(g.out, "{full} ={}{items}", space(rng));
    }
    if !g.names.is_empty() && rng.random_ratio(1, 4) {
        let (name, kind, _) = g.names[rng.random_range(0..g.names.len())].clone();
        let k = &KINDS[kind];
        let p = rng.random_range(0..k.params.len());
        let full = if k.params.len() == 1 {
            name
        } else {
            format!("{name}.{}", k.params[p].name)
        };
        let body = items(rng, k.params[p].domain);
        let _ = writeln!(g.out, "@{full}={body}");
    }
    if rng.random_ratio(1, 3) {
        let resistors: Vec<String> = g
            .names
            .iter()
            .filter(|(_, k, _)| KINDS[*k].symbol == "R")
            .map(|(n, _, _)| n.clone())
            .collect();
        if let Some(r) = resistors.first() {
            let role = ["film", "charge-transfer", "contact", "other"][rng.random_range(0..4)];
            let _ = writeln!(g.out, "role {r} = {role}");
        }
    }
    g.out
}

struct Gen {
    /// Element names used so far, with their kind's index and which parameters are annotated.
    names: Vec<(String, usize, Vec<bool>)>,
    out: String,
}

fn space(rng: &mut Rng) -> &'static str {
    [" ", " ", " ", "", "  ", "\t", " \n "][rng.random_range(0..7)]
}

impl Gen {
    fn series(&mut self, rng: &mut Rng, depth: u32) {
        let n = 1 + rng.random_range(0..3);
        for k in 0..n {
            if k > 0 {
                let (a, b) = (space(rng), space(rng));
                let _ = write!(self.out, "{a}+{b}");
            }
            self.parallel(rng, depth);
        }
    }

    fn parallel(&mut self, rng: &mut Rng, depth: u32) {
        let n = 1 + rng.random_range(0..2);
        for k in 0..n {
            if k > 0 {
                let s = if rng.random_ratio(1, 3) { " " } else { "" };
                let _ = write!(self.out, "{s}|{s}");
            }
            self.primary(rng, depth);
        }
    }

    fn primary(&mut self, rng: &mut Rng, depth: u32) {
        if depth > 0 && rng.random_ratio(1, 3) {
            self.out.push('(');
            self.series(rng, depth - 1);
            self.out.push(')');
            return;
        }
        let kind = rng.random_range(0..KINDS.len());
        let k = &KINDS[kind];
        let name = loop {
            let mut name = k.symbol.to_owned();
            let len = rng.random_range(0..5);
            const LABEL: &[u8] = b"abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789_";
            for _ in 0..len {
                name.push(LABEL[rng.random_range(0..LABEL.len())] as char);
            }
            // A repeated name is an error; allow it now and then.
            if !self.names.iter().any(|(n, _, _)| *n == name) || rng.random_ratio(1, 30) {
                break name;
            }
        };
        self.out.push_str(&name);
        let mut annotated = vec![false; k.params.len()];
        if rng.random_ratio(1, 3) {
            let mut clauses = Vec::new();
            for (p, info) in k.params.iter().enumerate() {
                if !rng.random_ratio(1, 2) {
                    continue;
                }
                annotated[p] = true;
                let body = items(rng, info.domain);
                if k.params.len() == 1 && rng.random_ratio(1, 2) {
                    clauses.push(body);
                } else {
                    clauses.push(format!("{}={body}", k.params[p].name));
                }
            }
            // An empty annotation is an error; write one now and then.
            if !clauses.is_empty() || rng.random_ratio(1, 20) {
                let sep = [", ", ",", " , "][rng.random_range(0..3)];
                let _ = write!(self.out, "{{{}}}", clauses.join(sep));
            }
        }
        self.names.push((name, kind, annotated));
    }
}

/// Annotation items for a parameter of `domain`: a value, bounds, `fixed`, in random order and
/// notation; now and then outside the domain, crossed or repeated, which the parser must reject.
fn items(rng: &mut Rng, domain: Domain) -> String {
    let (lo, hi) = match domain {
        Domain::Positive => (1e-12, 1e9),
        Domain::Interval(lo, hi) => (lo, hi),
    };
    let draw = |rng: &mut Rng| -> f64 {
        if rng.random_ratio(1, 30) {
            -rng.random_range(0.0..10.0)
        } else if lo > 0.0 {
            (lo.ln() + rng.random_range(0.0..1.0) * (hi / lo).ln()).exp()
        } else {
            lo + rng.random_range(0.0..1.0) * (hi - lo)
        }
    };
    let mut v = [draw(rng), draw(rng), draw(rng)];
    if !rng.random_ratio(1, 30) {
        v.sort_by(f64::total_cmp);
    }
    let mut items = Vec::new();
    let value = rng.random_ratio(2, 3);
    if value {
        items.push(number(rng, v[1]));
    }
    if rng.random_ratio(1, 2) || !value {
        let a = if rng.random_ratio(4, 5) {
            number(rng, v[0])
        } else {
            String::new()
        };
        let b = if rng.random_ratio(4, 5) {
            number(rng, v[2])
        } else {
            String::new()
        };
        let dots = if rng.random_ratio(1, 3) { " .. " } else { ".." };
        items.push(format!("{a}{dots}{b}"));
    }
    if rng.random_ratio(1, 4) {
        items.push("fixed".to_owned());
    }
    // The order of the items is free.
    if items.len() > 1 && rng.random_ratio(1, 4) {
        items.swap(0, 1);
    }
    items.join(" ")
}

/// `x` in a random notation the language reads: shortest, exponent with a random number of digits,
/// an SI prefix (`u`, `µ`, `μ`, `k`, ...), or plain decimals where that keeps the value.
fn number(rng: &mut Rng, x: f64) -> String {
    let digits = rng.random_range(1..18usize);
    match rng.random_range(0..5) {
        0 => format!("{x}"),
        1 => format!("{x:e}"),
        2 => format!("{x:.*e}", digits),
        3 => {
            const PREFIXES: [(i32, &str); 11] = [
                (-15, "f"),
                (-12, "p"),
                (-9, "n"),
                (-6, "u"),
                (-6, "\u{b5}"),
                (-6, "\u{3bc}"),
                (-3, "m"),
                (3, "k"),
                (6, "M"),
                (9, "G"),
                (12, "T"),
            ];
            // A prefix at or a little below the magnitude, so the mantissa keeps its digits.
            let mag = x.abs().log10().floor() as i32;
            let fits: Vec<&(i32, &str)> = PREFIXES
                .iter()
                .filter(|(e, _)| *e <= mag && mag - *e < 6)
                .collect();
            match fits.get(rng.random_range(0..fits.len().max(1))) {
                Some((e, p)) => format!("{:.*}{p}", digits.min(10), x / 10f64.powi(*e)),
                None => format!("{x:e}"),
            }
        }
        _ if (1e-3..1e6).contains(&x.abs()) => format!("{:.*}", digits.min(12), x),
        _ => format!("{x:e}"),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::rng;

    #[test]
    fn a_good_share_of_generated_circuits_parse() {
        let mut r = rng(3);
        let ok = (0..500)
            .filter(|_| {
                let t = random_circuit(&mut r);
                let text: String = t
                    .lines()
                    .filter(|l| !l.starts_with('@'))
                    .map(|l| format!("{l}\n"))
                    .collect();
                parse(&text).is_ok()
            })
            .count();
        // The generator is meant to reach deep into the parser: a good share of texts must be valid
        // (the rest carry one deliberate fault: a negative value, crossed bounds, a repeat, ...).
        assert!(ok > 200, "only {ok} of 500 random circuits parse");
    }

    #[test]
    fn generated_overrides_are_applied_and_some_rejected() {
        let mut r = rng(4);
        let (mut applied, mut rejected) = (0, 0);
        for _ in 0..2000 {
            let t = random_circuit(&mut r);
            let Some((circuit, o)) = t.split_once("\n@") else {
                continue;
            };
            let Ok(mut c) = parse(circuit) else { continue };
            match c.apply_override(o.lines().next().unwrap_or("")) {
                Ok(()) => applied += 1,
                Err(_) => rejected += 1,
            }
        }
        assert!(
            applied > 100 && rejected > 5,
            "{applied} applied, {rejected} rejected"
        );
    }

    #[test]
    fn the_oracle_accepts_the_repository_circuits() {
        for s in SEEDS {
            assert_eq!(check(s, &[]), Ok(()), "{s}");
        }
    }
}
