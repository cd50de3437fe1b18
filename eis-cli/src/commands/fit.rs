//! `eis fit`: fit a circuit to a spectrum and report parameters, battery quantities and statistics.

use crate::format::{quantity, short, table, with_error, with_error_plain};
use crate::io::{Failure, Outcome, apply_overrides, bad, load_model, read_spectra, write_output};
use anyhow::anyhow;
use eis_core::derive::{QUANTITIES, QuantityKey, SHORT_CIRCUIT_CAUTION, derive, short_circuit};
use eis_core::fit::{FitError, FitResult, fit};
use eis_core::number::format_float;
use eis_core::report::{FitDocument, document};
use eis_core::select::{
    SELECTION_RULE, SelectError, SelectOptions, Selection, auto_document, select,
};
use eis_core::{Circuit, Spectrum};
use std::fmt::Write;
use std::path::PathBuf;
use std::process::ExitCode;

/// Fit an equivalent circuit and report resistances with uncertainties.
///
/// Fits an equivalent circuit to a spectrum by weighted complex nonlinear least squares, with automatic
/// starting values, and report parameters ± standard errors, ohmic / charge-transfer / diffusion / DC
/// resistances, arcs, fit statistics and warnings.
#[derive(clap::Args)]
#[command(
    after_help = "Examples:\n  eis fit cell.csv --model circuits/two-interfaces.circ\n  eis fit cell.csv --model 'R0 + Rct|Qdl' --fix Qdl.n=0.9 --bound Rct=1m..10 --json\n  eis fit cycle200.csv --model m.circ --start-from cycle150.json -o fitted.csv\n  eis fit cell.csv --model m.circ --ocv 1.45\n  eis fit cell.csv --model auto\n\nStandard errors come from the covariance s^2 (J^T J)^-1 at the optimum, with s^2 the reduced chi-square.\nExit status: 0 fitted, 1 not converged or failed, 2 bad input."
)]
pub struct Args {
    /// Spectrum file.
    input: PathBuf,
    /// Circuit file (.circ), inline expression, or `auto` to choose among 1-3 arcs with or without
    /// finite diffusion, diffusion tails, porous electrodes and series inductance (ranked by BIC and a
    /// residual check; implausible decompositions rejected).
    #[arg(long, short)]
    model: String,
    /// Which spectrum of the file, from 1.
    #[arg(allow_negative_numbers = true, long, value_name = "N", default_value_t = 1, value_parser = clap::value_parser!(u32).range(1..))]
    spectrum: u32,
    #[command(flatten)]
    fit: crate::args::FitArgs,
    /// Starting value, NAME=VALUE (repeatable).
    #[arg(long = "set", value_name = "NAME=VALUE")]
    set: Vec<String>,
    /// Hold a parameter fixed, NAME or NAME=VALUE (repeatable).
    #[arg(long = "fix", value_name = "NAME[=VALUE]")]
    fix: Vec<String>,
    /// Bounds, NAME=LO..HI (repeatable; either side may be left empty).
    #[arg(long = "bound", value_name = "NAME=LO..HI")]
    bound: Vec<String>,
    /// Warm start from a previous result (the JSON of `eis fit --json`).
    #[arg(long, value_name = "RESULT.json")]
    start_from: Option<PathBuf>,
    /// Open-circuit voltage (V, positive): adds estimated short-circuit current and matched-load power.
    #[arg(allow_negative_numbers = true, long, value_parser = crate::args::positive)]
    ocv: Option<f64>,
    /// Print one JSON document on stdout instead of the table.
    #[arg(long)]
    json: bool,
    /// Write the data with the fitted model beside it (CSV).
    #[arg(long, short, value_name = "FITTED.csv")]
    output: Option<PathBuf>,
    /// Write a Nyquist plot of data and fit (SVG or PNG by extension).
    #[arg(long, value_name = "FILE")]
    plot: Option<PathBuf>,
    #[command(flatten)]
    reader: crate::reader_args::ReaderArgs,
}

/// Builds the circuit with all command-line overrides applied.
fn circuit_with_overrides(args: &Args) -> Result<Circuit, Failure> {
    let mut c = load_model(&args.model)?;
    apply_overrides(&mut c, args.set.iter().map(String::as_str))?;
    apply_overrides(&mut c, args.bound.iter().map(String::as_str))?;
    let fixes: Vec<String> = args.fix.iter().map(|f| format!("{f} fixed")).collect();
    apply_overrides(&mut c, fixes.iter().map(String::as_str))?;
    Ok(c)
}

fn pick_spectrum(args: &Args) -> Result<Spectrum, Failure> {
    let mut spectra = read_spectra(&args.input, &args.reader.options()?)?;
    let n = spectra.len();
    let k = args.spectrum as usize;
    if k > n {
        return Err(bad(anyhow!(
            "{} holds {n} spectra; --spectrum {k} does not exist",
            args.input.display()
        )));
    }
    Ok(spectra.swap_remove(k - 1))
}

/// Runs the command.
pub fn run(args: Args) -> Outcome {
    if args.model == "auto" {
        return run_auto(args);
    }
    let circuit = circuit_with_overrides(&args)?;
    let spectrum = pick_spectrum(&args)?;
    let warm = match &args.start_from {
        Some(p) => {
            let text = std::fs::read_to_string(p)
                .map_err(|e| bad(anyhow!("cannot read {}: {e}", p.display())))?;
            let doc: FitDocument = serde_json::from_str(&text)
                .map_err(|e| bad(anyhow!("{} is not a fit result: {e}", p.display())))?;
            let (values, missing) = doc.warm_start_for(&circuit);
            if !missing.is_empty() {
                eprintln!(
                    "note: {} has no value for {}; using the circuit's start",
                    p.display(),
                    missing.join(", ")
                );
            }
            Some(values)
        }
        None => None,
    };
    let settings = args.fit.settings();
    let spinner = crate::io::step_for(spectrum.len(), "fitting");
    let result = fit(&circuit, &spectrum, &settings, warm.as_deref());
    spinner.finish_and_clear();
    let result = result.map_err(|e| match e {
        FitError::MissingSigma => bad(anyhow!("{}: {e}", args.input.display())),
        e => bad(anyhow!("cannot fit {}: {e}", args.input.display())),
    })?;
    finish(&args, &circuit, &spectrum, &result, None)
}

/// `--model auto`: choose a circuit of the library's family, then report as a normal fit with the
/// ranked candidates added.
fn run_auto(args: Args) -> Outcome {
    if !(args.set.is_empty()
        && args.fix.is_empty()
        && args.bound.is_empty()
        && args.start_from.is_none())
    {
        return Err(bad(anyhow!(
            "--model auto chooses its own circuits and takes no --set, --fix, --bound or --start-from"
        )));
    }
    let spectrum = pick_spectrum(&args)?;
    let options = SelectOptions::default();
    let options = options.with_fit(options.fit.with_weighting(args.fit.weight.into()));
    // Up to 18 candidate circuits are fitted: seconds on long spectra.
    let spinner = crate::io::step("choosing a model");
    let selection = select(&spectrum, &options);
    spinner.finish_and_clear();
    let selection = selection.map_err(|e| match e {
        SelectError::Fit(FitError::MissingSigma) => bad(anyhow!(
            "{}: {}",
            args.input.display(),
            FitError::MissingSigma
        )),
        e => bad(anyhow!("cannot fit {}: {e}", args.input.display())),
    })?;
    let winner = selection.winner();
    let result = winner.result.as_ref().ok_or_else(|| {
        Failure::Failed(anyhow!(
            "cannot fit {}: no candidate circuit could be fitted",
            args.input.display()
        ))
    })?;
    finish(&args, &winner.circuit, &spectrum, result, Some(&selection))
}

/// Derived quantities, outputs and the report of a fit (with the candidates of a model choice).
fn finish(
    args: &Args,
    circuit: &Circuit,
    spectrum: &Spectrum,
    result: &FitResult,
    selection: Option<&Selection>,
) -> Outcome {
    let derived = derive(circuit, result);
    let short = match (args.ocv, derived.dc_resistance) {
        (Some(v), Some(dc)) => Some(short_circuit(v, dc)),
        (Some(_), None) => {
            eprintln!("note: the model has no finite DC resistance; no short-circuit estimate");
            None
        }
        _ => None,
    };
    let mut doc = document(circuit, result, &derived, short.as_ref());
    doc.file = Some(args.input.display().to_string());
    doc.spectrum = Some(args.spectrum as usize);

    let mut inputs = vec![args.input.clone()];
    if let Some(p) = &args.start_from {
        inputs.push(p.clone());
    }
    if args.model.ends_with(".circ") {
        inputs.push(PathBuf::from(&args.model));
    }
    if let Some(out) = &args.output {
        write_output(Some(out), &fitted_csv(spectrum, result), &inputs)?;
    }
    if let Some(p) = &args.plot {
        crate::commands::plot::write_plot(
            &crate::plot::build::fit(circuit, spectrum, result),
            p,
            None,
            (900, 650),
            &inputs,
        )?;
    }
    let text = if args.json {
        let encoded = match selection {
            Some(sel) => serde_json::to_string_pretty(&auto_document(sel, doc)),
            None => serde_json::to_string_pretty(&doc),
        };
        let mut s =
            encoded.map_err(|e| Failure::Failed(anyhow!("cannot encode the result: {e}")))?;
        s.push('\n');
        s
    } else {
        let mut s = human(&doc, spectrum);
        if let Some(sel) = selection {
            s.push_str(&candidates_table(sel));
        }
        s
    };
    write_output(None, &text, &inputs)?;
    Ok(if result.converged {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(1)
    })
}

/// The ranked candidates of `--model auto`.
fn candidates_table(sel: &Selection) -> String {
    let entries = sel.entries();
    let rows: Vec<Vec<String>> = entries
        .iter()
        .filter(|e| e.fitted)
        .map(|e| {
            let num = |v: Option<f64>| v.map_or("-".to_owned(), |v| format!("{v:.1}"));
            vec![
                e.rank.map_or("-".to_owned(), |r| r.to_string()),
                e.label.clone(),
                num(e.bic),
                num(e.delta_bic),
                e.reduced_chi_square.map_or("-".to_owned(), short),
                match e.systematic_residuals {
                    Some(true) => "trend".to_owned(),
                    Some(false) => "random".to_owned(),
                    None => "-".to_owned(),
                },
                e.reason.clone(),
            ]
        })
        .collect();
    let mut out = format!(
        "\ncandidates (DRT peaks: {}; {})\n",
        sel.drt_peaks.map_or("-".to_owned(), |p| p.to_string()),
        SELECTION_RULE
    );
    for line in table(
        &[
            "rank",
            "model",
            "BIC",
            "dBIC",
            "red. chi2",
            "residuals",
            "why",
        ],
        &rows,
    )
    .lines()
    {
        let _ = writeln!(out, "  {line}");
    }
    // Skipped candidates on one line per reason.
    let mut reasons: Vec<(&str, usize)> = Vec::new();
    for e in entries.iter().filter(|e| !e.fitted) {
        match reasons.iter_mut().find(|(r, _)| *r == e.reason) {
            Some((_, n)) => *n += 1,
            None => reasons.push((&e.reason, 1)),
        }
    }
    for (reason, n) in reasons {
        let _ = writeln!(
            out,
            "  {n} candidate{} {reason}",
            if n == 1 { "" } else { "s" }
        );
    }
    out
}

/// Data and model side by side.
fn fitted_csv(s: &Spectrum, r: &FitResult) -> String {
    let mut out = String::from(
        "frequency_hz,z_real_ohm,z_imag_ohm,model_real_ohm,model_imag_ohm,residual_real_rel,residual_imag_rel\n",
    );
    let rows = s
        .frequency_hz
        .iter()
        .zip(&s.z)
        .zip(r.model.iter().zip(&r.relative_residuals));
    for ((f, z), (m, e)) in rows {
        let _ = writeln!(
            out,
            "{},{},{},{},{},{},{}",
            format_float(*f),
            format_float(z.re),
            format_float(z.im),
            format_float(m.re),
            format_float(m.im),
            format_float(e.re),
            format_float(e.im)
        );
    }
    out
}

/// A relative error in percent, `> 1000 %` above ten (a parameter collapsing to 1e-261 would print
/// hundreds of digits).
fn relative_percent(r: f64) -> String {
    if r > 10.0 || !r.is_finite() {
        "> 1000 %".to_owned()
    } else {
        format!("{:.2} %", 100.0 * r)
    }
}

/// The readable report.
fn human(doc: &FitDocument, s: &Spectrum) -> String {
    let mut out = String::new();
    let (lo, hi) = s
        .frequency_hz
        .iter()
        .fold((f64::INFINITY, 0.0f64), |(a, b), &f| (a.min(f), b.max(f)));
    let _ = writeln!(out, "model     {}", doc.model.replace('\n', "; "));
    let _ = writeln!(
        out,
        "spectrum  {} #{} ({} points, {} to {})\n",
        doc.file.as_deref().unwrap_or("-"),
        doc.spectrum.unwrap_or(1),
        s.len(),
        quantity(hi, 4, "Hz"),
        quantity(lo, 4, "Hz")
    );
    parameter_table(&mut out, doc);
    battery_quantities(&mut out, doc);
    arc_table(&mut out, &doc.derived.arcs);
    let st = &doc.statistics;
    let _ = writeln!(
        out,
        "\nfit       chi-square {} ({} weighting), reduced {}, AIC {:.1}, BIC {:.1}",
        short(st.chi_square),
        st.weighting.as_str(),
        short(st.reduced_chi_square),
        st.aic,
        st.bic
    );
    let _ = writeln!(
        out,
        "          {} points, {} iterations, {} evaluations over {} starts; {}",
        st.points, st.iterations, st.evaluations, st.starts, st.termination
    );
    out.push_str(
        "          standard errors from s^2 (J^T J)^-1 at the optimum, s^2 = reduced chi-square\n",
    );
    if !doc.warnings.is_empty() {
        out.push_str("\nwarnings\n");
        for w in &doc.warnings {
            let _ = writeln!(out, "  - {w}");
        }
    }
    if doc.short_circuit.is_some() {
        let _ = writeln!(out, "\ncaution: {SHORT_CIRCUIT_CAUTION}");
    }
    out
}

/// The parameters with their standard errors, relative errors, units and bounds.
fn parameter_table(out: &mut String, doc: &FitDocument) {
    let rows: Vec<Vec<String>> = doc
        .parameters
        .iter()
        .map(|p| {
            vec![
                p.name.clone(),
                if p.fixed {
                    format!("{} (fixed)", short(p.value))
                } else if p.unit == eis_core::element::DIMENSIONLESS {
                    with_error_plain(p.value, p.stderr)
                } else {
                    with_error(p.value, p.stderr)
                },
                p.relative_error
                    .map(relative_percent)
                    .unwrap_or_else(|| "-".into()),
                p.unit.clone(),
                if p.at_bound {
                    "at bound".into()
                } else {
                    String::new()
                },
            ]
        })
        .collect();
    out.push_str(&table(
        &["parameter", "value ± SE", "rel. error", "unit", ""],
        &rows,
    ));
}

/// The battery quantities of the quantity table, the still-rising tails' lower bounds and the
/// short-circuit estimate, then what the data do not tell: no DC resistance, undetermined tails,
/// processes beyond the window.
fn battery_quantities(out: &mut String, doc: &FitDocument) {
    let d = &doc.derived;
    out.push_str("\nbattery quantities\n");
    let mut q = Vec::new();
    let mut push = |name: &str, v: Option<f64>, se: Option<f64>, unit: &str| {
        if let Some(v) = v {
            q.push(vec![name.to_owned(), with_error(v, se), unit.to_owned()]);
        }
    };
    for row in QUANTITIES {
        let v = d.get(row.key);
        push(
            row.label,
            v.map(|v| v.value),
            v.and_then(|v| v.stderr),
            row.unit_ascii,
        );
    }
    for t in &d.diffusion_tails {
        push(
            &format!("diffusion resistance of {}, at least", t.element),
            t.resistance_at_least_ohm,
            t.resistance_at_least_ohm_stderr,
            "Ohm",
        );
    }
    if let Some(sc) = &doc.short_circuit {
        push(
            "short-circuit current (estimate)",
            Some(sc.short_circuit_current_a),
            sc.short_circuit_current_a_stderr,
            "A",
        );
        push(
            "matched-load power (estimate)",
            Some(sc.matched_load_power_w),
            sc.matched_load_power_w_stderr,
            "W",
        );
    }
    for line in table(&["quantity", "value ± SE", "unit"], &q)
        .lines()
        .skip(1)
    {
        let _ = writeln!(out, "  {line}");
    }
    if d.value(QuantityKey::Dc).is_none() {
        out.push_str("  (no finite DC resistance: the model blocks direct current)\n");
    }
    for t in &d.diffusion_tails {
        let _ = writeln!(
            out,
            "  ({} still rises at the lowest frequency: its resistance and time constant are not \
             determined, only its Warburg coefficient and a lower bound)",
            t.element
        );
    }
    if !d.beyond_data.is_empty() {
        let names: Vec<String> = d
            .beyond_data
            .iter()
            .map(|b| {
                let side = if b.placement == eis_core::roles::Placement::BelowWindow {
                    "below"
                } else {
                    "above"
                };
                match b.frequency_hz {
                    Some(f) => format!(
                        "{} ({}, {side} the window)",
                        b.process,
                        quantity(f, 3, "Hz")
                    ),
                    None => format!("{} ({side} the window)", b.process),
                }
            })
            .collect();
        let _ = writeln!(
            out,
            "  beyond the data, summed into no resistance above: {}",
            names.join(", ")
        );
    }
}

/// The arcs: role, resistance, time constant, peak frequency and effective capacitance, and whether
/// the data determine them.
fn arc_table(out: &mut String, arcs: &[eis_core::report::ArcEntry]) {
    if arcs.is_empty() {
        return;
    }
    out.push_str("\narcs\n");
    let rows: Vec<Vec<String>> = arcs
        .iter()
        .map(|a| {
            vec![
                format!("{}|{}", a.resistor, a.capacitor),
                a.role.as_str().to_owned(),
                with_error(a.resistance_ohm, a.resistance_ohm_stderr),
                with_error(a.time_constant_s, a.time_constant_s_stderr),
                with_error(a.peak_frequency_hz, a.peak_frequency_hz_stderr),
                with_error(a.capacitance_f, a.capacitance_f_stderr),
                if a.beyond_data {
                    "beyond the data".into()
                } else if a.determined {
                    String::new()
                } else {
                    "NOT DETERMINED by the data".into()
                },
            ]
        })
        .collect();
    for line in table(
        &[
            "arc",
            "role",
            "R (Ohm)",
            "tau (s)",
            "f (Hz)",
            "C_eff (F)",
            "",
        ],
        &rows,
    )
    .lines()
    {
        let _ = writeln!(out, "  {line}");
    }
}
