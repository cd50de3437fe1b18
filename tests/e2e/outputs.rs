//! Outputs end to end (issue 13): what `-o` does to links, FIFOs and devices, a failed or closed
//! standard output, `--columns` in every reading command, folder loops, resuming with other settings,
//! and the progress line.

use eis_tests::{eis, eis_bin, scratch, write_file};
use std::path::Path;
use std::process::{Command, Stdio};

/// A small spectrum of one arc, written as a plain three-column CSV with a header.
fn write_arc(path: &Path) {
    let mut text = String::from("frequency_hz,z_real_ohm,z_imag_ohm\n");
    for k in 0..21 {
        let f = 10f64.powf(5.0 - 0.35 * f64::from(k));
        let w = 2.0 * std::f64::consts::PI * f;
        // R0 + R|C with R0 = 10 Ω, R = 100 Ω, C = 10 µF: Z = R0 + R / (1 + jωRC) (common practice).
        let d = 1.0 + (w * 1e-3).powi(2);
        let (re, im) = (10.0 + 100.0 / d, -100.0 * w * 1e-3 / d);
        text.push_str(&format!("{f},{re},{im}\n"));
    }
    std::fs::write(path, text).unwrap();
}

/// Which standard stream of a run goes to `/dev/full`.
#[cfg(target_os = "linux")]
enum Stream {
    Stdout,
    Stderr,
}

/// Runs `eis args` in `dir` with `stream` going to `/dev/full` (every write fails: the disk is full).
#[cfg(target_os = "linux")]
fn on_full_device(dir: &std::path::Path, args: &[&str], stream: Stream) -> std::process::Output {
    let full = std::fs::OpenOptions::new()
        .write(true)
        .open("/dev/full")
        .unwrap();
    let mut command = Command::new(eis_bin());
    command.args(args).current_dir(dir);
    match stream {
        Stream::Stdout => command.stdout(full),
        Stream::Stderr => command.stderr(full),
    };
    command.output().unwrap()
}
#[track_caller]
fn no_panic(run: &eis_tests::Run) {
    assert!(
        run.code != 101 && !run.stderr.contains("panicked"),
        "eis panicked\n{}",
        run.stderr
    );
}

#[cfg(unix)]
#[test]
fn output_to_a_symlink_writes_its_target_and_keeps_the_link() {
    let dir = scratch("out_symlink");
    std::fs::create_dir_all(dir.join("real")).unwrap();
    write_file(&dir, "real/target.csv", "old");
    std::os::unix::fs::symlink("real/target.csv", dir.join("link.csv")).unwrap();
    eis(&dir, &["simulate", "--model", "R0", "-o", "link.csv"]).expect_code(0);
    let link = std::fs::symlink_metadata(dir.join("link.csv")).unwrap();
    assert!(
        link.file_type().is_symlink(),
        "the link was replaced by a file"
    );
    let text = std::fs::read_to_string(dir.join("real/target.csv")).unwrap();
    assert!(text.starts_with("frequency_hz,"), "{text}");
    // No temporary file left beside the target or the link.
    for d in [dir.clone(), dir.join("real")] {
        for e in std::fs::read_dir(d).unwrap().flatten() {
            assert!(!e.file_name().to_string_lossy().contains(".tmp"), "{e:?}");
        }
    }
    // A link to an input is still the input.
    write_arc(&dir.join("in.csv"));
    std::os::unix::fs::symlink("in.csv", dir.join("in-link.csv")).unwrap();
    let run = eis(
        &dir,
        &["fit", "in.csv", "--model", "R0+R1|C1", "-o", "in-link.csv"],
    )
    .expect_code(2);
    run.expect_stderr("it is an input file");
    assert!(
        std::fs::read_to_string(dir.join("in.csv"))
            .unwrap()
            .starts_with("frequency_hz")
    );
}

#[cfg(unix)]
#[test]
fn output_to_a_fifo_writes_into_it_and_keeps_it() {
    use std::os::unix::fs::FileTypeExt;
    let dir = scratch("out_fifo");
    let fifo = dir.join("pipe");
    let made = Command::new("mkfifo").arg(&fifo).status().unwrap();
    assert!(made.success());
    let reader = {
        let fifo = fifo.clone();
        std::thread::spawn(move || std::fs::read_to_string(fifo).unwrap())
    };
    eis(&dir, &["simulate", "--model", "R0", "-o", "pipe"]).expect_code(0);
    // Checked before waiting for the reader: had the FIFO been replaced, the reader would wait on the
    // old one for ever.
    let m = std::fs::symlink_metadata(&fifo).unwrap();
    assert!(m.file_type().is_fifo(), "the FIFO was replaced");
    let text = reader.join().unwrap();
    assert!(text.starts_with("frequency_hz,"), "{text}");
}

#[cfg(unix)]
#[test]
fn output_to_dev_null_keeps_the_device() {
    use std::os::unix::fs::FileTypeExt;
    let dir = scratch("out_devnull");
    eis(&dir, &["simulate", "--model", "R0", "-o", "/dev/null"]).expect_code(0);
    write_arc(&dir.join("in.csv"));
    eis(
        &dir,
        &["fit", "in.csv", "--model", "R0+R1|C1", "-o", "/dev/null"],
    )
    .expect_code(0);
    let m = std::fs::symlink_metadata("/dev/null").unwrap();
    assert!(
        m.file_type().is_char_device(),
        "/dev/null is no longer a device"
    );
}

/// Every command that writes to standard output: a full device is an error with exit status 1, not a
/// panic.
#[cfg(target_os = "linux")]
#[test]
fn stdout_to_dev_full_is_an_error_not_a_panic() {
    let dir = scratch("stdout_full");
    write_arc(&dir.join("in.csv"));
    let commands: [&[&str]; 6] = [
        &["inspect", "--model", "R0+R1|C1"],
        &["simulate", "--model", "R0"],
        &["check", "in.csv"],
        &["check", "in.csv", "--json"],
        &["fit", "in.csv", "--model", "R0+R1|C1"],
        &["drt", "in.csv"],
    ];
    for args in commands {
        let out = on_full_device(&dir, args, Stream::Stdout);
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(1), "{args:?}: {stderr}");
        assert!(!stderr.contains("panicked"), "{args:?}: {stderr}");
        assert!(
            stderr.contains("cannot write to standard output"),
            "{args:?}: {stderr}"
        );
    }
}

/// A reader that stops early (`eis simulate ... | head -1`) ends the command quietly.
#[cfg(unix)]
#[test]
fn closed_stdout_pipe_ends_quietly() {
    let dir = scratch("stdout_pipe");
    let mut child = Command::new(eis_bin())
        .args([
            "simulate", "--model", "R0", "--fmin", "1m", "--fmax", "1M", "--ppd", "1000",
        ])
        .current_dir(&dir)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    // Far more than a pipe holds; the reader goes away at once.
    drop(child.stdout.take());
    let out = child.wait_with_output().unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{stderr}");
    assert!(
        !stderr.contains("error") && !stderr.contains("panicked"),
        "{stderr}"
    );
}

/// `--columns` panicked in every reading command, even with the plainest value.
#[test]
fn columns_option_works_in_every_reading_command() {
    let dir = scratch("columns");
    write_arc(&dir.join("in.csv"));
    let m = "R0+R1|C1";
    let c = "freq=1,re=2,im=3";
    let commands: [&[&str]; 6] = [
        &["check", "in.csv", "--columns", c],
        &["fit", "in.csv", "--model", m, "--columns", c],
        &["convert", "in.csv", "--out", "conv", "--columns", c],
        &["drt", "in.csv", "--columns", c],
        &["plot", "in.csv", "-o", "p.svg", "--columns", c],
        &[
            "batch",
            "in.csv",
            "--model",
            m,
            "--out",
            "b",
            "--columns",
            c,
        ],
    ];
    for args in commands {
        let run = eis(&dir, args);
        no_panic(&run);
        assert_eq!(run.code, 0, "{args:?}\n{}", run.stderr);
    }
    // The roles are applied: columns swapped by the option change the result.
    let run = eis(&dir, &["check", "in.csv", "--columns", "freq=1,re=3,im=2"]);
    no_panic(&run);
    assert_ne!(run.code, 0, "{}", run.stdout);
}

/// A link from a folder back to its parent was followed 40 levels deep (3 files became 123 spectra).
#[cfg(unix)]
#[test]
fn batch_walks_a_folder_loop_once() {
    let dir = scratch("folder_loop");
    std::fs::create_dir_all(dir.join("data/sub")).unwrap();
    for name in ["data/a.csv", "data/b.csv", "data/sub/c.csv"] {
        write_arc(&dir.join(name));
    }
    std::os::unix::fs::symlink("..", dir.join("data/sub/up")).unwrap();
    std::os::unix::fs::symlink("sub", dir.join("data/again")).unwrap();
    let run = eis(
        &dir,
        &["batch", "data", "--model", "R0+R1|C1", "--out", "out"],
    );
    no_panic(&run);
    run.expect_stderr("3 spectra:");
}

/// `--resume` with another model reused the old results under the new model's columns.
#[test]
fn batch_resume_refuses_other_settings_unless_forced() {
    let dir = scratch("resume_settings");
    write_arc(&dir.join("a.csv"));
    let batch = |model: &str, extra: &[&str]| {
        let mut a = vec!["batch", "a.csv", "--model", model, "--out", "out"];
        a.extend(extra);
        eis(&dir, &a)
    };
    batch("R0+R1|C1", &[]).expect_code(0);
    let run = batch("R0+R1|Q1", &["--resume"]).expect_code(2);
    run.expect_stderr("made with another model (was `R0 + R1|C1`, now `R0 + R1|Q1`)");
    run.expect_stderr("--force");
    let run = batch("R0+R1|C1", &["--resume", "--weight", "unit"]).expect_code(2);
    run.expect_stderr("another weighting");
    // Same settings: everything is already done.
    let run = batch("R0+R1|C1", &["--resume"]).expect_code(0);
    run.expect_stderr("1 already done");
    // Forced: the old results are discarded and the new model fitted.
    batch("R0+R1|Q1", &["--resume", "--force"]).expect_code(0);
    let csv = std::fs::read_to_string(dir.join("out/results.csv")).unwrap();
    let header = csv.lines().next().unwrap();
    assert!(
        header.contains("Q1.n") && !header.contains(",C1,"),
        "{header}"
    );
    assert_eq!(csv.lines().count(), 2);
}

/// Progress lines are for terminals; a pipe or a log file gets the summary alone.
#[test]
fn batch_prints_no_progress_when_stderr_is_not_a_terminal() {
    let dir = scratch("no_progress");
    write_arc(&dir.join("a.csv"));
    let run = eis(
        &dir,
        &["batch", "a.csv", "--model", "R0+R1|C1", "--out", "out"],
    )
    .expect_code(0);
    assert!(
        !run.stderr.contains('\r') && !run.stderr.contains("eta"),
        "{:?}",
        run.stderr
    );
    assert!(
        run.stderr.starts_with("1 spectra: 1 ok"),
        "{:?}",
        run.stderr
    );
}

/// Every table the commands write ends with a line end.
#[test]
fn index_and_results_end_with_a_newline() {
    let dir = scratch("final_newline");
    write_arc(&dir.join("a.csv"));
    write_file(&dir, "bad.csv", "no table here\n");
    eis(&dir, &["convert", "a.csv", "bad.csv", "--out", "conv"]);
    let index = std::fs::read_to_string(dir.join("conv/index.csv")).unwrap();
    assert_eq!(index.lines().count(), 3, "{index}");
    assert!(index.ends_with('\n'), "{index:?}");
    eis(
        &dir,
        &[
            "batch", "a.csv", "bad.csv", "--model", "R0+R1|C1", "--out", "out",
        ],
    );
    for f in ["out/results.csv", "out/results.jsonl"] {
        let text = std::fs::read_to_string(dir.join(f)).unwrap();
        assert!(text.ends_with('\n'), "{f}: {text:?}");
    }
}

/// Messages on a full standard error are dropped: there is nowhere left to report, but no panic.
#[cfg(target_os = "linux")]
#[test]
fn stderr_to_dev_full_does_not_panic() {
    let dir = scratch("stderr_full");
    for (args, code) in [
        (&["simulate", "--model", "R0"][..], 0),
        (&["fit", "missing.csv", "--model", "R0"][..], 2),
    ] {
        let out = on_full_device(&dir, args, Stream::Stderr);
        assert_eq!(out.status.code(), Some(code), "{args:?}");
    }
}

/// `-o /dev/stdout` on a pipe: the link names no file, so it is written directly.
#[cfg(target_os = "linux")]
#[test]
fn output_to_dev_stdout_on_a_pipe_writes_to_stdout() {
    let dir = scratch("out_dev_stdout");
    let run = eis(&dir, &["simulate", "--model", "R0", "-o", "/dev/stdout"]).expect_code(0);
    assert!(run.stdout.starts_with("frequency_hz,"), "{}", run.stdout);
}
