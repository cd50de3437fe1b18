//! `eis simulate` and `eis inspect` on the circuit library, including bad input.

use eis_core::circuit::parse;
use eis_core::eval::{Plan, angular};
use eis_tests::{eis, read_canonical, root, scratch, write_file};

fn circuit_files() -> Vec<std::path::PathBuf> {
    let mut files: Vec<_> = std::fs::read_dir(root().join("circuits"))
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|e| e == "circ"))
        .collect();
    files.sort();
    assert!(files.len() >= 6, "the starter library has six circuits");
    files
}

#[test]
fn inspect_prints_a_canonical_form_that_parses_back() {
    let dir = scratch("inspect_library");
    for file in circuit_files() {
        let run = eis(&dir, &["inspect", "--model", file.to_str().unwrap()]).expect_code(0);
        let text = std::fs::read_to_string(&file).unwrap();
        let from_file = parse(&text).unwrap();
        // The canonical expression plus role lines come first, then a blank line and the table.
        let canonical = run.stdout.split("\n\n").next().unwrap();
        assert_eq!(parse(canonical).unwrap(), from_file, "{}", file.display());
        for p in &from_file.params {
            assert!(
                run.stdout.contains(&p.name),
                "{} lists {}",
                file.display(),
                p.name
            );
        }
        // Every library file explains itself in its header comment.
        assert!(text.starts_with('#') && text.lines().filter(|l| l.starts_with('#')).count() >= 4);
    }
}

#[test]
fn simulate_writes_exact_canonical_csv_for_every_library_circuit() {
    let dir = scratch("simulate_library");
    for file in circuit_files() {
        let out = dir.join("out.csv");
        eis(
            &dir,
            &[
                "simulate",
                "--model",
                file.to_str().unwrap(),
                "-o",
                out.to_str().unwrap(),
            ],
        )
        .expect_code(0);
        let rows = read_canonical(&std::fs::read_to_string(&out).unwrap());
        // Defaults: 100 kHz to 10 mHz at 10 points per decade, high to low.
        assert_eq!(rows.len(), 71);
        assert_eq!(rows[0].0, 1e5);
        assert_eq!(rows[70].0, 1e-2);
        assert!(rows.windows(2).all(|w| w[0].0 > w[1].0));
        // Values read back bit-exact against the library's own evaluation.
        let c = parse(&std::fs::read_to_string(&file).unwrap()).unwrap();
        let plan = Plan::compile(&c);
        let p = c.default_values();
        for (f, re, im) in rows {
            let z = plan.impedance(&p, angular(f));
            assert_eq!((re, im), (z.re, z.im), "{} at {f} Hz", file.display());
        }
    }
}

#[test]
fn simulate_sets_values_and_reports_defaults() {
    let dir = scratch("simulate_set");
    let run = eis(
        &dir,
        &[
            "simulate",
            "--model",
            "Rs + Rct|Cdl",
            "--set",
            "Rs=10",
            "--set",
            "Rct=100",
            "--fmin",
            "1",
            "--fmax",
            "1k",
            "--ppd",
            "1",
        ],
    )
    .expect_code(0);
    run.expect_stderr("Cdl = 10u F");
    let rows = read_canonical(&run.stdout);
    assert_eq!(rows.len(), 4);
    // Capacitive: imaginary part negative.
    assert!(rows.iter().all(|r| r.2 < 0.0));
}

#[test]
fn noise_is_reproducible_from_the_seed() {
    let dir = scratch("simulate_noise");
    let run = |seed: &str| {
        eis(
            &dir,
            &[
                "simulate",
                "--model",
                "R0 + R1|C1",
                "--noise",
                "0.01",
                "--seed",
                seed,
            ],
        )
        .expect_code(0)
        .stdout
    };
    let a = run("7");
    assert_eq!(a, run("7"));
    assert_ne!(a, run("8"));
    let clean = read_canonical(
        &eis(&dir, &["simulate", "--model", "R0 + R1|C1"])
            .expect_code(0)
            .stdout,
    );
    let noisy = read_canonical(&a);
    let rel: Vec<f64> = clean
        .iter()
        .zip(&noisy)
        .map(|(c, n)| (n.1 - c.1) / (c.1.hypot(c.2)))
        .collect();
    let rms = (rel.iter().map(|x| x * x).sum::<f64>() / rel.len() as f64).sqrt();
    // 71 draws of a 1 % Gaussian: the sample rms lies within 0.6–1.4 % with overwhelming probability.
    assert!((0.006..0.014).contains(&rms), "rms {rms}");
}

#[test]
fn frequency_file_is_used_in_its_order() {
    let dir = scratch("simulate_freqfile");
    write_file(&dir, "f.txt", "frequency_hz\n1000\n# comment\n10\n0.1\n");
    let run = eis(&dir, &["simulate", "--model", "R0", "--freq-file", "f.txt"]).expect_code(0);
    let f: Vec<f64> = read_canonical(&run.stdout).iter().map(|r| r.0).collect();
    assert_eq!(f, [1000.0, 10.0, 0.1]);
    write_file(&dir, "bad.txt", "10\nten\n");
    let run = eis(
        &dir,
        &["simulate", "--model", "R0", "--freq-file", "bad.txt"],
    )
    .expect_code(2);
    run.expect_stderr("bad.txt, line 2, column 1");
}

#[test]
fn bad_input_exits_2_with_a_clear_message() {
    let dir = scratch("simulate_bad");
    let run = eis(&dir, &["simulate", "--model", "R0 + (R1|C1"]).expect_code(2);
    run.expect_stderr("never closed");
    run.expect_stderr("^");
    let run = eis(&dir, &["simulate", "--model", "R0", "--set", "R1=5"]).expect_code(2);
    run.expect_stderr("no parameter `R1`");
    let run = eis(
        &dir,
        &["simulate", "--model", "R0", "--fmin", "10", "--fmax", "1"],
    )
    .expect_code(2);
    run.expect_stderr("--fmin");
    let run = eis(&dir, &["simulate", "--model", "missing.circ"]).expect_code(2);
    run.expect_stderr("missing.circ");
    let run = eis(&dir, &["inspect", "--model", "R0 + X1"]).expect_code(2);
    run.expect_stderr("unknown element kind");
    // An input is never written over.
    write_file(&dir, "m.circ", "R0 + R1|C1\n");
    let run = eis(&dir, &["simulate", "--model", "m.circ", "-o", "m.circ"]).expect_code(2);
    run.expect_stderr("input file");
    assert_eq!(
        std::fs::read_to_string(dir.join("m.circ")).unwrap(),
        "R0 + R1|C1\n"
    );
    // Help for every command shows an example.
    for cmd in ["simulate", "inspect"] {
        let run = eis(&dir, &[cmd, "--help"]).expect_code(0);
        assert!(run.stdout.contains("Example"), "{cmd} --help");
    }
}
