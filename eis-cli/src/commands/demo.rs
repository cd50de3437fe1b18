//! `eis demo`: an invented campaign run through the whole pipeline (convert, check and fit in a batch,
//! trends, plots, report).

use crate::io::{Failure, Outcome, bad, load_model, write_atomic};
use crate::plot::{OverlayPlot, OverlaySpectrum, Plot};
use anyhow::anyhow;
use eis_core::campaign::{SpectrumResult, Status};
use eis_core::import::{NamePattern, ReaderOptions, SpectrumReader};
use eis_core::scenario;
use eis_core::trend::{FlagKind, TrendReport, TrendSettings};
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// Run the whole pipeline on an invented campaign (start here).
///
/// Builds an invented campaign of five aqueous zinc-manganese-oxide lab cells (spectra at 20, 50 and
/// 80 % SOC every 25 cycles up to cycle 300, written as export files of varied shape, one cell with a
/// contact problem, one with a growing interface film, one with a late soft short, one corrupt file and
/// one drifting spectrum) and run the whole pipeline on it.
#[derive(clap::Args)]
#[command(
    after_help = "Example:\n  eis demo --out eis-demo\n  # then open eis-demo/results/report.html"
)]
pub struct Args {
    /// Folder for everything the demo writes.
    #[arg(long, default_value = "eis-demo")]
    out: PathBuf,
}

fn step(text: &str) {
    eprintln!("\n== {text}");
}

/// The folders the demo writes into.
struct Places {
    raw: PathBuf,
    converted: PathBuf,
    results: PathBuf,
    plots: PathBuf,
    model: PathBuf,
}

impl Places {
    /// The folders under `out`, created.
    fn create(out: &Path) -> Result<Places, Failure> {
        let places = Places {
            raw: out.join("raw"),
            converted: out.join("converted"),
            results: out.join("results"),
            plots: out.join("plots"),
            model: out.join("model.circ"),
        };
        for d in [
            &places.raw,
            &places.converted,
            &places.results,
            &places.plots,
        ] {
            std::fs::create_dir_all(d)
                .map_err(|e| Failure::Failed(anyhow!("cannot create {}: {e}", d.display())))?;
        }
        Ok(places)
    }

    /// The model file as `--model` takes it.
    fn model_arg(&self) -> String {
        self.model.display().to_string()
    }
}

/// Runs the command.
pub fn run(args: Args) -> Outcome {
    let places = Places::create(&args.out)?;
    let started = std::time::Instant::now();

    step("1. writing the invented campaign (export files of five cells)");
    let exports = write_campaign(&places)?;

    step("2. converting every export to canonical CSV");
    let reader = ReaderOptions {
        name_pattern: Some(
            NamePattern::parse(scenario::NAME_PATTERN).map_err(|e| bad(anyhow!(e)))?,
        ),
        ..ReaderOptions::default()
    };
    let failed = crate::commands::convert::convert(&exports, &places.converted, &reader)?;
    // The campaign holds one corrupt file on purpose; anything else failing is a fault of the tool.
    if let Some(f) = failed
        .iter()
        .find(|f| !f.file.ends_with(scenario::CORRUPT_FILE))
    {
        return Err(Failure::Failed(anyhow!(
            "the demo could not convert {}: {}",
            f.file,
            f.error
        )));
    }

    step("3. checking (Kramers-Kronig) and fitting every spectrum");
    fit_campaign(&places, &exports, &reader)?;

    step("4. trends over cycles");
    let results_csv = places.results.join("results.csv");
    let trend = crate::commands::trend::analyse_file(
        &results_csv,
        "cycle",
        &[],
        None,
        &TrendSettings::default(),
    )?;
    write_atomic(
        &places.results.join("trends.csv"),
        eis_core::trend::trends_csv(&trend).as_bytes(),
        &[],
    )?;

    step("5. plots");
    let circuit = load_model(&places.model_arg())?;
    for p in &plots(&places, &circuit, &reader)? {
        eprintln!("  {}", p.display());
    }

    step("6. report");
    crate::commands::report::write_report(&places.results, Some(&circuit), &reader)?;

    let mut o = findings(&places, &trend);
    let _ = writeln!(
        o,
        "\nDone in {:.1} s. The data are invented; flags are engineering hints, not safety verdicts — handle real cells by your lab's rules.",
        started.elapsed().as_secs_f64()
    );
    crate::io::print(&o)?;
    Ok(ExitCode::SUCCESS)
}

/// Writes the invented campaign's export files and its model; the paths of the exports.
fn write_campaign(places: &Places) -> Result<Vec<PathBuf>, Failure> {
    let files = scenario::files();
    for f in &files {
        write_atomic(&places.raw.join(&f.name), &f.bytes, &[])?;
    }
    write_atomic(&places.model, scenario::MODEL_FILE.as_bytes(), &[])?;
    eprintln!(
        "{} files in {}; model in {}",
        files.len(),
        places.raw.display(),
        places.model.display()
    );
    Ok(files.iter().map(|f| places.raw.join(&f.name)).collect())
}

/// The batch: every spectrum checked and fitted, with the lead inductance shared per cell.
fn fit_campaign(places: &Places, exports: &[PathBuf], reader: &ReaderOptions) -> Outcome {
    // The lead inductance belongs to the cell and its fixture, not to a state of charge or a cycle: it
    // is fitted once per cell, jointly over all its spectra (`eis batch --share L0 --share-by cell`).
    let settings = eis_core::campaign::BatchSettings {
        reader: reader.clone(),
        share: Some(eis_core::campaign::Share {
            names: vec!["L0".to_owned()],
            by: eis_core::campaign::ChainBy::Cell,
        }),
        ..eis_core::campaign::BatchSettings::default()
    };
    let summary = crate::commands::batch::execute(
        exports,
        &load_model(&places.model_arg())?,
        &settings,
        &places.results,
        eis_core::campaign::Resume::No,
    )?;
    // One corrupt file and one drifting spectrum are planted; more failures are a fault of the tool.
    if summary.failed > 1 {
        return Err(Failure::Failed(anyhow!(
            "the demo batch failed on {} spectra (one is planted); see {}",
            summary.failed,
            places.results.join("results.csv").display()
        )));
    }
    Ok(ExitCode::SUCCESS)
}

/// The demo's plots: a fit, an overlay over cycles, trends at 50 % SOC and a DRT; the files written.
/// A planted spectrum that cannot be read or fitted is a fault of the tool and fails the demo.
fn plots(
    places: &Places,
    circuit: &eis_core::Circuit,
    reader: &ReaderOptions,
) -> Result<Vec<PathBuf>, Failure> {
    let mut written = Vec::new();
    let mut save = |plot: &Plot, name: &str, size| -> Result<(), Failure> {
        let p = places.plots.join(name);
        crate::commands::plot::write_plot(plot, &p, None, size, &[])?;
        written.push(p);
        Ok(())
    };
    let fault = |what: &str, path: &Path, e: &dyn std::fmt::Display| {
        Failure::Failed(anyhow!("the demo could not {what} {}: {e}", path.display()))
    };
    // A fit of a film-grown spectrum.
    let fit_file = places.raw.join("Z3_c300_soc50.csv");
    let s = read_first(&fit_file, reader)?;
    let r = eis_core::fit::fit(circuit, &s, &eis_core::fit::FitSettings::default(), None)
        .map_err(|e| fault("fit", &fit_file, &e))?;
    save(
        &crate::plot::build::fit(circuit, &s, &r),
        "Z3_c300_soc50_fit.png",
        (900, 650),
    )?;
    // Overlay of cell Z3 at 50 % SOC coloured by cycle.
    let mut spectra = Vec::new();
    for &c in &scenario::cycles() {
        let f = places.raw.join(format!("Z3_c{:03}_soc50.csv", c as u32));
        let s = read_first(&f, reader)?;
        spectra.push(OverlaySpectrum {
            label: f.display().to_string(),
            freq: s.frequency_hz,
            z: s.z,
            value: c,
        });
    }
    save(
        &Plot::Overlay(OverlayPlot {
            title: "Cell Z3 at 50 % SOC: the film arc grows with cycling".into(),
            spectra,
            colorbar_label: "cycle".into(),
        }),
        "Z3_overlay_soc50.png",
        (900, 650),
    )?;
    // Trends at 50 % SOC (one series per cell keeps the plots readable).
    let at50 = crate::commands::trend::analyse_file(
        &places.results.join("results.csv"),
        "cycle",
        &[],
        Some(50.0),
        &TrendSettings::default(),
    )?;
    for q in [
        "ohmic_resistance_ohm",
        "arc_Rf_resistance_ohm",
        "dc_resistance_ohm",
    ] {
        if at50.series.iter().any(|s| s.quantity == q) {
            let mut plot = crate::plot::build::trend(&at50, q);
            if let Plot::Trend(t) = &mut plot {
                t.title.push_str(" at 50 % SOC");
            }
            save(&plot, &format!("trend_{q}.png"), (1000, 620))?;
        }
    }
    // DRT of a healthy spectrum.
    let drt_file = places.raw.join("Z1_c000_soc50.csv");
    let s = read_first(&drt_file, reader)?;
    let d = eis_core::drt::drt(&s, eis_core::drt::DrtOptions::default())
        .map_err(|e| fault("compute the DRT of", &drt_file, &e))?;
    save(
        &crate::plot::build::drt(
            &d,
            "Distribution of relaxation times: Z1, cycle 0, 50 % SOC".into(),
        ),
        "Z1_c000_soc50_drt.png",
        (900, 600),
    )?;
    Ok(written)
}

/// What the demo found: the flagged cells by kind with each flag's change and onset, the failures,
/// the shared lead inductance per cell, the campaign's identifiability advice and where everything is.
fn findings(places: &Places, trend: &TrendReport) -> String {
    let results = &places.results;
    let docs: Vec<SpectrumResult> = std::fs::read_to_string(results.join("results.jsonl"))
        .unwrap_or_default()
        .lines()
        .filter_map(|l| serde_json::from_str(l).ok())
        .collect();
    let files = |keep: &dyn Fn(&SpectrumResult) -> bool| -> Vec<String> {
        docs.iter()
            .filter(|r| keep(r))
            .map(|r| file_name(&r.file))
            .collect()
    };
    let failed = files(&|r| r.status == Status::Failed);
    let kk = files(&|r| r.kk.as_ref().is_some_and(|k| !k.valid));
    let cells_with = |kind: FlagKind| -> Vec<String> {
        let mut v: Vec<String> = trend
            .flags
            .iter()
            .filter(|f| f.kind == kind)
            .map(|f| f.cell.clone())
            .collect();
        v.dedup();
        v
    };
    let list = |v: Vec<String>| {
        if v.is_empty() {
            "none".to_owned()
        } else {
            v.join(", ")
        }
    };
    // Written in one piece, so that a failed standard output is one error (not a panic).
    let mut o = String::new();
    let _ = writeln!(o, "What the demo found");
    let found = [
        (
            "contact or electrolyte problem (ohmic resistance growing):",
            cells_with(FlagKind::OhmicGrowth),
        ),
        (
            "interface film or passivation (arc resistance growing):",
            cells_with(FlagKind::InterfaceGrowth),
        ),
        (
            "transport limitation (diffusion resistance growing):",
            cells_with(FlagKind::TransportGrowth),
        ),
        (
            "possible soft short (total resistance collapsing):",
            cells_with(FlagKind::PossibleSoftShort),
        ),
        ("spectra failing the Kramers-Kronig check (drift):", kk),
        ("files that could not be read:", failed),
    ];
    for (what, who) in found {
        let _ = writeln!(o, "  {what:<59}{}", list(who));
    }
    for f in trend
        .flags
        .iter()
        .filter(|f| f.kind != FlagKind::InvalidMeasurement)
    {
        let _ = writeln!(
            o,
            "    {} {}: {} from cycle {}",
            f.label(),
            f.kind.as_str(),
            f.change_percent
                .map(|c| format!("{c:+.0} %"))
                .unwrap_or_default(),
            f.onset_x
                .map(eis_core::number::format_float)
                .unwrap_or_else(|| "?".into())
        );
    }
    let shared = shared_inductance(&docs);
    if !shared.is_empty() {
        let _ = writeln!(
            o,
            "\nLead inductance, fitted jointly over each cell's spectra (--share L0 --share-by cell):"
        );
        for (cell, v) in &shared {
            let _ = writeln!(o, "    {cell}: {v}");
        }
    }
    let advice = eis_core::campaign::advice(&docs);
    if !advice.is_empty() {
        let _ = writeln!(
            o,
            "\nWhat the data can and cannot tell (grouped over the campaign):"
        );
        for a in &advice {
            let _ = writeln!(o, "    {a}");
        }
    }
    let _ = writeln!(o, "\nWhere everything is");
    let where_ = [
        ("export files:", places.raw.clone()),
        ("canonical spectra:", places.converted.clone()),
        ("fit results:", results.join("results.csv")),
        ("trends:", results.join("trends.csv")),
        ("plots:", places.plots.clone()),
        ("report:", results.join("report.html")),
    ];
    for (what, path) in where_ {
        let _ = writeln!(o, "  {what:<21}{}", path.display());
    }
    o
}

/// The lead inductance fitted jointly over each cell's spectra, one value per cell (the same on every
/// row of the cell), in nH with its standard error.
fn shared_inductance(docs: &[SpectrumResult]) -> Vec<(String, String)> {
    let mut shared: Vec<(String, String)> = Vec::new();
    for r in docs {
        let cell = crate::commands::report::cell_of(r);
        let l0 = r
            .fit
            .as_ref()
            .and_then(|f| f.parameters.iter().find(|p| p.name == "L0"));
        if let (false, Some(p)) = (shared.iter().any(|(c, _)| *c == cell), l0) {
            if r.shared.iter().any(|n| n == "L0") {
                let nano = |x: f64| x * 1e9;
                let v = crate::format::with_error_plain(nano(p.value), p.stderr.map(nano));
                shared.push((cell, v + " nH"));
            }
        }
    }
    shared
}

fn file_name(p: &str) -> String {
    Path::new(p)
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| p.to_owned())
}

/// The first spectrum of a planted file; a file the demo wrote itself that cannot be read is a fault
/// of the tool.
fn read_first(path: &Path, reader: &ReaderOptions) -> Result<eis_core::Spectrum, Failure> {
    let fault = |e: &dyn std::fmt::Display| {
        Failure::Failed(anyhow!("the demo could not read {}: {e}", path.display()))
    };
    match SpectrumReader::open(path, reader.clone())
        .map_err(|e| fault(&e))?
        .next()
    {
        Some(Ok(i)) => Ok(i.spectrum),
        Some(Err(e)) => Err(fault(&e)),
        None => Err(fault(&"no spectrum")),
    }
}
