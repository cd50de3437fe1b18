//! `eis convert` on exports generated here from simulated spectra (issue 4).

use eis_tests::{eis, read_canonical, root, scratch, simulate, write_file};
use std::path::Path;

/// Simulates a spectrum with `eis simulate` and returns its rows.
fn simulated(dir: &Path, name: &str, circuit: &str) -> Vec<(f64, f64, f64)> {
    let model = root().join("circuits").join(circuit);
    simulate(dir, model.to_str().unwrap(), &[], &["--ppd", "5"], name);
    read_canonical(&std::fs::read_to_string(dir.join(name)).unwrap())
}

fn close(a: f64, b: f64) -> bool {
    eis_core::testing::close(a, b, 1e-12)
}

#[test]
fn issue_4_convert_writes_canonical_files_and_an_index_and_lists_failures() {
    let dir = scratch("convert-mixed");
    let rows = simulated(&dir, "sim.csv", "two-interfaces.circ");
    // A semicolon export with decimal commas, a preamble, kHz, mΩ and -Z'', Windows line ends.
    let mut text =
        String::from("Export of lab cell\r\nSettings: 10 mV\r\n\r\nFreq/kHz;Z'/mOhm;-Z''/mOhm\r\n");
    for (f, re, im) in &rows {
        text.push_str(
            &format!("{:e};{:e};{:e}\r\n", f / 1e3, re * 1e3, -im * 1e3).replace('.', ","),
        );
    }
    write_file(&dir, "lab.txt", &text);
    // Two cycles in one tab-separated file, with a temperature column.
    let mut multi = String::from("f (Hz)\tRe (Ohm)\tIm (Ohm)\tcycle\ttemperature\n");
    for cycle in [3, 4] {
        for (f, re, im) in &rows {
            multi.push_str(&format!("{f}\t{re}\t{im}\t{cycle}\t25\n"));
        }
    }
    write_file(&dir, "cellB_c7.tsv", &multi);
    write_file(&dir, "broken.csv", "f,re,im\n1,2,3\n2,x,3\n3,2,3\n");
    let run = eis(
        &dir,
        &[
            "convert",
            "lab.txt",
            "cellB_c7.tsv",
            "broken.csv",
            "absent.csv",
            "--out",
            "out",
            "--name-pattern",
            "cell{cell}_c{run}",
        ],
    )
    .expect_code(1);
    run.expect_stderr("broken.csv, line 3, column 2: `x` is not a number");
    for name in ["lab_1.csv", "cellB_c7_1.csv", "cellB_c7_2.csv"] {
        let got = read_canonical(&std::fs::read_to_string(dir.join("out").join(name)).unwrap());
        assert_eq!(got.len(), rows.len(), "{name}");
        for (g, w) in got.iter().zip(&rows) {
            assert!(
                close(g.0, w.0) && close(g.1, w.1) && close(g.2, w.2),
                "{name}: {g:?} vs {w:?}"
            );
        }
    }
    let index = std::fs::read_to_string(dir.join("out/index.csv")).unwrap();
    let lines: Vec<&str> = index.lines().collect();
    assert_eq!(
        lines[0],
        "file,spectrum,points,fmin_hz,fmax_hz,cell,run,cycle,temperature,error"
    );
    let n = rows.len();
    assert_eq!(lines[1], format!("lab.txt,1,{n},0.01,100000,,,,,"));
    assert_eq!(
        lines[2],
        format!("cellB_c7.tsv,1,{n},0.01,100000,B,7,3,25,")
    );
    assert_eq!(
        lines[3],
        format!("cellB_c7.tsv,2,{n},0.01,100000,B,7,4,25,")
    );
    assert_eq!(
        lines[4],
        "broken.csv,1,,,,,,,,\"broken.csv, line 3, column 2: `x` is not a number\""
    );
    assert!(
        lines[5].starts_with("absent.csv,,,,,,,,,absent.csv: cannot read the file:"),
        "{}",
        lines[5]
    );
    assert_eq!(lines.len(), 6);
}

#[test]
fn issue_4_convert_never_writes_over_an_input() {
    let dir = scratch("convert-guard");
    simulated(&dir, "x.csv", "single-interface.circ");
    write_file(&dir, "x_1.csv", "f,re,im\n3,1,-1\n2,1,-2\n1,1,-3\n");
    let before = std::fs::read(dir.join("x_1.csv")).unwrap();
    let run = eis(&dir, &["convert", "x_1.csv", "x.csv", "--out", "."]).expect_code(1);
    run.expect_stderr("refusing to write ./x_1.csv: it is an input file");
    assert_eq!(std::fs::read(dir.join("x_1.csv")).unwrap(), before);
    assert!(dir.join("x_1_1.csv").is_file());
}

#[test]
fn issue_4_convert_bad_usage_exits_2() {
    let dir = scratch("convert-usage");
    for args in [
        &[
            "convert", "a.csv", "--out", "o", "--fmin", "10", "--fmax", "1",
        ][..],
        &["convert", "a.csv", "--out", "o", "--columns", "freq"][..],
        &["convert", "a.csv", "--out", "o", "--name-pattern", "{a}{b}"][..],
        &["convert", "--out", "o"][..],
    ] {
        eis(&dir, args).expect_code(2);
    }
}
