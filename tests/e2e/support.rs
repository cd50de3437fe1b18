//! Shared helpers for the end-to-end tests: the real `eis` binary (built by cargo for this test target),
//! scratch directories, and a runner that shows stdout and stderr when an expectation fails.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// The workspace root.
pub fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .parent()
        .expect("eis-cli/ sits in the workspace")
        .to_path_buf()
}

/// Path of the `eis` binary cargo built for this test target.
pub fn eis_bin() -> &'static Path {
    Path::new(env!("CARGO_BIN_EXE_eis"))
}

/// A fresh scratch directory for one test, removed and re-created.
pub fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir()
        .join(format!("eis-e2e-{}", std::process::id()))
        .join(name);
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).expect("create scratch dir");
    dir
}

/// The spectra of the physics-model fixture (`tests/reference/physics_impedance_fixture.json`).
pub fn physics_spectra() -> Vec<serde_json::Value> {
    let text =
        std::fs::read_to_string(root().join("tests/reference/physics_impedance_fixture.json"))
            .expect("the physics fixture is committed");
    let doc: serde_json::Value = serde_json::from_str(&text).expect("the physics fixture is JSON");
    doc["spectra"].as_array().cloned().unwrap_or_default()
}

/// Writes spectrum `s` of the physics-model fixture to `dir/file` as a three-column CSV.
pub fn write_physics_csv(s: &serde_json::Value, dir: &Path, file: &str) {
    let mut csv = String::from("frequency_hz,z_real_ohm,z_imag_ohm\n");
    let col = |k: &str| s[k].as_array().cloned().unwrap_or_default();
    for ((f, re), im) in col("frequency_hz")
        .iter()
        .zip(col("z_real_ohm"))
        .zip(col("z_imag_ohm"))
    {
        csv.push_str(&format!("{f},{re},{im}\n"));
    }
    std::fs::write(dir.join(file), csv).expect("write the CSV");
}

/// The result of one run of `eis`.
#[derive(Debug)]
pub struct Run {
    /// Exit status code (-1 if killed by a signal).
    pub code: i32,
    /// Standard output as text.
    pub stdout: String,
    /// Standard error as text.
    pub stderr: String,
}

impl Run {
    fn from(out: Output) -> Run {
        Run {
            code: out.status.code().unwrap_or(-1),
            stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
            stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
        }
    }

    /// Asserts that standard error contains `part`, showing it when it does not.
    #[track_caller]
    pub fn expect_stderr(&self, part: &str) {
        assert!(self.stderr.contains(part), "{}", self.stderr);
    }

    /// Asserts the exit status, showing both streams when it differs.
    #[track_caller]
    pub fn expect_code(self, code: i32) -> Run {
        assert_eq!(
            self.code, code,
            "exit status {} (wanted {code})\n--- stdout ---\n{}\n--- stderr ---\n{}",
            self.code, self.stdout, self.stderr
        );
        self
    }
}

/// Runs `eis simulate --model model` in `dir` with a `--set` for each of `sets`, then `options`,
/// writing `out`; the run must succeed.
pub fn simulate(dir: &Path, model: &str, sets: &[&str], options: &[&str], out: &str) {
    let mut args = vec!["simulate", "--model", model];
    for s in sets {
        args.extend(["--set", s]);
    }
    args.extend_from_slice(options);
    args.extend(["-o", out]);
    eis(dir, &args).expect_code(0);
}

/// Writes canonical spectrum files in `dir`: each `(name, rows)` as the header line
/// `frequency_hz,z_real_ohm,z_imag_ohm` followed by `rows`.
pub fn write_spectra(dir: &Path, files: &[(&str, &str)]) {
    for (name, rows) in files {
        write_file(
            dir,
            name,
            format!("frequency_hz,z_real_ohm,z_imag_ohm\n{rows}"),
        );
    }
}

/// Writes `text` to the file `name` in `dir`.
pub fn write_file(dir: &Path, name: &str, text: impl AsRef<[u8]>) {
    std::fs::write(dir.join(name), text).unwrap();
}

/// Runs `eis` with `args` in `dir`.
pub fn eis(dir: &Path, args: &[&str]) -> Run {
    let out = Command::new(eis_bin())
        .args(args)
        .current_dir(dir)
        .output()
        .expect("start eis");
    Run::from(out)
}

/// Reads a canonical spectrum CSV into (frequency, real, imaginary) rows.
pub fn read_canonical(text: &str) -> Vec<(f64, f64, f64)> {
    let mut lines = text.lines();
    assert_eq!(
        lines.next(),
        Some("frequency_hz,z_real_ohm,z_imag_ohm"),
        "canonical header"
    );
    lines
        .map(|l| {
            let v: Vec<f64> = l.split(',').map(|x| x.parse().expect("number")).collect();
            assert_eq!(v.len(), 3, "three columns in {l:?}");
            (v[0], v[1], v[2])
        })
        .collect()
}
