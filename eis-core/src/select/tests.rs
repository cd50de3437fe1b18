use super::*;

/// The circuit texts of `members`, after checking that there are `n` members with `n` distinct texts.
fn distinct_texts(members: &[Member], n: usize) -> std::collections::BTreeSet<String> {
    assert_eq!(members.len(), n);
    let texts: std::collections::BTreeSet<String> =
        members.iter().map(|m| m.circuit_text()).collect();
    assert_eq!(texts.len(), n);
    texts
}

#[test]
fn the_physics_family_has_eight_distinct_parseable_members() {
    let f = physics_family();
    let texts = distinct_texts(&f, 8);
    assert!(family().iter().all(|m| !texts.contains(&m.circuit_text())));
    for m in &f {
        let c = m.circuit();
        assert!(c.element_index("Wd").is_some() || c.element_index("Wrd").is_some());
    }
    let porous = f.iter().find(|m| m.porous && !m.inductance).unwrap();
    assert_eq!(
        porous.circuit_text().lines().next(),
        Some("R0 + Pe1 + Pe2 + Wd")
    );
}

#[test]
fn the_family_has_eighteen_distinct_parseable_members() {
    let f = family();
    distinct_texts(&f, 18);
    for m in &f {
        let c = m.circuit();
        assert!(crate::fit::start::recognise(&c).is_some(), "{}", m.label());
        let q = c.param_index(&format!("Q{}.n", m.arcs)).unwrap();
        assert_eq!(c.bounds(q), (0.5, 1.0));
    }
    assert_eq!(
        Member {
            arcs: 2,
            diffusion: Diffusion::Transmissive,
            inductance: true,
            tail: Tail::None,
            porous: false,
        }
        .circuit_text()
        .lines()
        .next(),
        Some("L0 + R0 + R1|Q1 + (R2 + Wtd)|Q2")
    );
}

/// An arc drawn with n = 0.6 counts as distributed, one with n = 0.9 as lumped (the threshold
/// 0.7 between a double layer's n ≈ 0.8–1, common practice, and a porous electrode's 45° branch,
/// de Levie 1963, Electrochim. Acta 8, 751).
#[test]
fn an_arc_with_a_low_exponent_reads_as_distributed() {
    use crate::eval::{Plan, log_frequencies};
    use crate::simulate::simulate;
    let c = parse("R0 + R1|Q1\nQ1.n = 0.5..1").unwrap();
    for (n, distributed) in [(0.6, true), (0.9, false)] {
        let data = simulate(
            &Plan::compile(&c),
            &[1.0, 10.0, 1e-3, n],
            &log_frequencies(1e5, 1e-2, 8),
            None,
        );
        let r = crate::fit::fit(&c, &data, &FitSettings::default(), None).unwrap();
        assert_eq!(distributed_arc(&c, &r).is_some(), distributed, "n = {n}");
    }
}

#[test]
fn bad_input_is_an_error_not_a_panic() {
    let empty = Spectrum::new(vec![], vec![]);
    assert!(matches!(
        select(&empty, &SelectOptions::default()),
        Err(SelectError::Fit(FitError::Empty))
    ));
    let nan = Spectrum::new(
        vec![1.0, 2.0, 3.0],
        vec![num_complex::Complex64::new(f64::NAN, 0.0); 3],
    );
    assert!(select(&nan, &SelectOptions::default()).is_err());
}
