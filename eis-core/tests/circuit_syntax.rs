//! The circuit language: valid inputs and their canonical forms, invalid inputs with their messages
//! pinned as snapshots, and property tests (print/parse round trip; arbitrary text never panics).

use eis_core::circuit::{Node, parse, print};
use proptest::prelude::*;

/// (input, canonical form)
const VALID: &[(&str, &str)] = &[
    ("R0", "R0"),
    ("R", "R"),
    ("R0+R1", "R0 + R1"),
    ("  R0   +\n\tR1  ", "R0 + R1"),
    ("R0 + Rct|Qdl", "R0 + Rct|Qdl"),
    ("(R0 + R1) + R2", "R0 + R1 + R2"),
    ("R0 + (R1 + R2)", "R0 + R1 + R2"),
    ("((R0))", "R0"),
    ("R1|(R2|C3)", "R1|R2|C3"),
    ("(R1+R2)|C3", "(R1 + R2)|C3"),
    ("R0 + (Rct + Wd)|Qdl", "R0 + (Rct + Wd)|Qdl"),
    ("R0 + (Rct + Wtd)|Qdl", "R0 + (Rct + Wtd)|Qdl"),
    (
        "L0 + R0 + Rsei|Qsei + (Rct + Wrd)|Cdl",
        "L0 + R0 + Rsei|Qsei + (Rct + Wrd)|Cdl",
    ),
    ("G1 | R2", "G1|R2"),
    ("Rct{50}", "Rct{50}"),
    ("Rct{50, 1m..1k}", "Rct{50 1m..1k}"),
    ("Rct{ 50 1m..1k fixed }", "Rct{50 1m..1k fixed}"),
    ("Rct {2k}", "Rct{2k}"),
    ("Rct{..1k}", "Rct{..1k}"),
    ("Rct{1m..}", "Rct{1m..}"),
    ("Rct{R=5}", "Rct{5}"),
    ("Qdl{n=0.9 fixed}", "Qdl{n=0.9 fixed}"),
    ("Qdl{Q=4.7u, n=0.8 0.5..1}", "Qdl{Q=4.7u, n=0.8 0.5..1}"),
    ("Qdl{Q=4.7\u{b5}}", "Qdl{Q=4.7u}"),
    ("Qdl{Q=1e-5, 1e-7..1e-3}", "Qdl{Q=10u 100n..1m}"),
    ("Qdl{n=0.9, Q=3u}", "Qdl{Q=3u, n=0.9}"),
    ("Wtd{tau=2, R=10}", "Wtd{R=10, tau=2}"),
    ("R0 # the ohmic part\n+ R1", "R0 + R1"),
    (
        "R0 + R1|C1\nR1 = 10 1..100\nC1 = 1u fixed",
        "R0 + R1{10 1..100}|C1{1u fixed}",
    ),
    (
        "R0 + R1|Q1\nQ1.n = 0.8\nrole R1 = charge-transfer",
        "R0 + R1|Q1{n=0.8}\nrole R1 = charge-transfer",
    ),
    ("R0 + R_a|C_b", "R0 + R_a|C_b"),
];

#[test]
fn valid_inputs_print_canonically_and_round_trip() {
    for (input, canonical) in VALID {
        let c = parse(input).unwrap_or_else(|e| panic!("{input:?} should parse:\n{e}"));
        let printed = print(&c);
        assert_eq!(&printed, canonical, "canonical form of {input:?}");
        assert_eq!(parse(&printed).unwrap(), c, "round trip of {input:?}");
    }
}

#[test]
fn parallel_binds_tighter_than_series() {
    let c = parse("R0 + R1|R2 + R3").unwrap();
    match &c.root {
        Node::Series(parts) => {
            assert_eq!(parts.len(), 3);
            assert!(matches!(&parts[1], Node::Parallel(p) if p.len() == 2));
        }
        other => panic!("expected a series, got {other:?}"),
    }
}

#[test]
fn parameter_names_follow_the_convention() {
    let c = parse("R0 + Qdl + W1 + Wtd + Cdl + L1 + G2 + Wrx").unwrap();
    let names: Vec<&str> = c.params.iter().map(|p| p.name.as_str()).collect();
    assert_eq!(
        names,
        [
            "R0", "Qdl.Q", "Qdl.n", "W1", "Wtd.R", "Wtd.tau", "Cdl", "L1", "G2.R", "G2.tau",
            "Wrx.R", "Wrx.tau"
        ]
    );
}

#[test]
fn overrides_replace_and_are_checked() {
    let mut c = parse("R0 + Rct{50 1..100}|Qdl").unwrap();
    c.apply_override("Rct=20").unwrap();
    assert_eq!(c.params[1].initial, Some(20.0));
    c.apply_override("Qdl.n=0.8 fixed").unwrap();
    assert!(c.params[3].fixed);
    let err = c.apply_override("Rct=500").unwrap_err();
    assert_eq!(
        err.to_string(),
        "circuit error: initial value 500 lies outside its bounds 1..100\n --> line 1, column 5\n  | Rct=500\n  |     ^^^"
    );
    let err = c.apply_override("Rtc=5").unwrap_err();
    assert!(err.to_string().contains("did you mean `Rct`?"), "{err}");
}

const SNAPSHOT: &str = "tests/snapshots/invalid_circuits.txt";

/// Invalid inputs, one per failure class; the messages (with caret lines) are pinned in
/// `tests/snapshots/invalid_circuits.txt`. Run with `UPDATE_SNAPSHOTS=1` to rewrite the file after an
/// intended change, then review the diff.
const INVALID: &[&str] = &[
    "",
    "# only a comment",
    "R0 + X1",
    "r0",
    "R0 * R1",
    "R0 +",
    "| R1",
    "R0 + | R1",
    "R0 ++ R1",
    "(R0 + R1",
    "R0 + R1)",
    "R0 + ()",
    "R0 R1",
    "R0 (R1)",
    "R1 + R1",
    "R0{1.2.3}",
    "R0{1e3k}",
    "Qdl{m=1}",
    "Qdl{1u}",
    "R0{1, 2}",
    "R0{10..1}",
    "R0{50 1..10}",
    "R0{-5}",
    "Q1{n=1.5}",
    "R0{50",
    "R0{big}",
    "R0{}",
    "R0 + R1\nRx = 5",
    "R0 + R1|C1\nrole C1 = film",
    "R0 + R1|C1\nrole R1 = catalyst",
    "R0 + R1|C1\nrole R9 = film",
    "R0 +\n  (R1 + µ)",
    "R0 + Ω1",
    // One level deeper than MAX_NESTING (issue 13).
    "(((((((((((((((((((((((((((((((((((((((((((((((((((((((((((((((((R0)))))))))))))))))))))))))))))))))))))))))))))))))))))))))))))))))",
];

fn render_snapshot() -> String {
    let mut out = String::new();
    for input in INVALID {
        let err = parse(input).expect_err(input);
        out.push_str("=== input\n");
        out.push_str(input);
        out.push_str("\n--- message\n");
        out.push_str(&err.to_string());
        out.push_str("\n\n");
    }
    out
}

#[test]
fn invalid_inputs_give_their_pinned_messages() {
    let got = render_snapshot();
    if std::env::var_os("UPDATE_SNAPSHOTS").is_some() {
        std::fs::write(SNAPSHOT, &got).unwrap();
        return;
    }
    let want =
        std::fs::read_to_string(SNAPSHOT).expect("snapshot file; run with UPDATE_SNAPSHOTS=1");
    if got != want {
        for (g, w) in got.split("=== input\n").zip(want.split("=== input\n")) {
            assert_eq!(
                g, w,
                "message changed; rerun with UPDATE_SNAPSHOTS=1 if intended"
            );
        }
        assert_eq!(
            got.len(),
            want.len(),
            "snapshot has a different number of cases"
        );
    }
}

/// A strategy for random valid circuits with random annotations.
fn circuit_text() -> impl Strategy<Value = String> {
    let leaf = (
        prop::sample::select(vec!["R", "C", "L", "Q", "W", "Wt", "Wr", "G"]),
        proptest::option::of((1e-9f64..1e9, proptest::bool::ANY)),
    )
        .prop_map(|(k, ann)| {
            let ann = match (k, ann) {
                (_, None) => String::new(),
                ("Q", Some((v, fixed))) => {
                    format!("{{Q={v:e}, n=0.75{}}}", if fixed { " fixed" } else { "" })
                }
                ("Wt" | "Wr" | "G", Some((v, fixed))) => {
                    format!(
                        "{{tau={v:e} 1e-12..1e12{}}}",
                        if fixed { " fixed" } else { "" }
                    )
                }
                (_, Some((v, fixed))) => format!("{{{v:e}{}}}", if fixed { " fixed" } else { "" }),
            };
            (k.to_owned(), ann)
        });
    let tree = leaf.prop_map(|(k, a)| vec![(k, a)]).prop_map(|v| {
        v.into_iter()
            .map(|(k, a)| format!("{k}#{a}"))
            .collect::<String>()
    });
    tree.prop_recursive(4, 24, 4, |inner| {
        (prop::collection::vec(inner, 2..4), proptest::bool::ANY).prop_map(|(parts, series)| {
            let sep = if series { " + " } else { "|" };
            format!("({})", parts.join(sep))
        })
    })
    .prop_map(|t| {
        // Give every element a unique label where the tree left a `#`.
        let mut labelled = String::new();
        for (i, piece) in t.split('#').enumerate() {
            if i > 0 {
                labelled.push_str(&format!("x{i}"));
            }
            labelled.push_str(piece);
        }
        labelled
    })
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]

    #[test]
    fn print_then_parse_is_identity(text in circuit_text()) {
        let c = parse(&text).map_err(|e| TestCaseError::fail(format!("{text}\n{e}")))?;
        let printed = print(&c);
        let again = parse(&printed).map_err(|e| TestCaseError::fail(format!("{printed}\n{e}")))?;
        prop_assert_eq!(again, c);
    }

    #[test]
    fn arbitrary_text_never_panics(text in ".{0,60}") {
        if let Err(e) = parse(&text) {
            let shown = e.to_string();
            prop_assert!(shown.contains('^'));
        }
    }

    #[test]
    fn circuit_like_text_never_panics(text in "[RCLQWtrG0-9 +|(){}=,.#\\-a-z\n]{0,40}") {
        if let Err(e) = parse(&text) {
            prop_assert!(e.to_string().contains('^'));
        }
    }
}

/// Runs `f` on a thread with a 2 MiB stack (the size of a spawned thread's default), so that a
/// recursion that would overflow there fails this test on every machine.
fn on_small_stack<T: Send + 'static>(f: impl FnOnce() -> T + Send + 'static) -> T {
    std::thread::Builder::new()
        .stack_size(2 << 20)
        .spawn(f)
        .unwrap()
        .join()
        .unwrap()
}

/// Issue 13: 20,000 nested parentheses overflowed the stack (the process aborted). Nesting beyond
/// MAX_NESTING is a caret error at the first `(` too many.
#[test]
fn nesting_is_bounded_with_a_caret_error() {
    use eis_core::circuit::{CircuitErrorKind, MAX_NESTING};
    let text = format!("R9 + {}R0{}", "(".repeat(20_000), ")".repeat(20_000));
    let err = on_small_stack(move || parse(&text).unwrap_err());
    assert_eq!(err.kind(), &CircuitErrorKind::TooDeep(MAX_NESTING));
    let shown = err.to_string();
    assert!(shown.contains("nesting deeper than 64 levels"), "{shown}");
    // The caret sits under the 65th `(`, column 5 + 65.
    assert!(shown.contains(" --> line 1, column 70"), "{shown}");
    // Unclosed ones as well, and inside annotations nothing counts.
    let err = on_small_stack(|| parse(&"(".repeat(100_000)).unwrap_err());
    assert_eq!(err.kind(), &CircuitErrorKind::TooDeep(MAX_NESTING));
    let ok = format!("{}R0{}", "(".repeat(MAX_NESTING), ")".repeat(MAX_NESTING));
    assert!(parse(&ok).is_ok());
}

/// A tree as deep as the limit allows (alternating parallel and series at every level, so that
/// nothing flattens) parses, prints, round-trips, compiles and evaluates on a 2 MiB stack.
#[test]
fn the_deepest_allowed_tree_fits_a_small_stack() {
    use eis_core::circuit::MAX_NESTING;
    use eis_core::eval::Plan;
    on_small_stack(|| {
        let mut text = String::new();
        for k in 0..MAX_NESTING {
            text.push_str(&format!("R{k}|(C{k} + "));
        }
        text.push_str("Rend");
        text.push_str(&")".repeat(MAX_NESTING));
        let c = parse(&text).unwrap();
        let depth = |n: &Node| -> usize {
            // Iterative, so that the test itself does not recurse.
            let mut stack = vec![(n, 1)];
            let mut max = 0;
            while let Some((n, d)) = stack.pop() {
                max = max.max(d);
                if let Node::Series(ch) | Node::Parallel(ch) = n {
                    stack.extend(ch.iter().map(|c| (c, d + 1)));
                }
            }
            max
        };
        assert!(depth(&c.root) > 2 * MAX_NESTING, "depth {}", depth(&c.root));
        let printed = print(&c);
        assert_eq!(parse(&printed).unwrap(), c);
        let plan = Plan::compile(&c);
        let z = plan.impedance(&c.default_values(), 1.0);
        assert!(z.re.is_finite() && z.im.is_finite(), "{z}");
    });
}
