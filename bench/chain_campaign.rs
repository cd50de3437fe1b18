//! The chain benchmark: a campaign of cells whose spectra hold a fast film arc and a slower
//! charge-transfer arc with finite (transmissive) diffusion, the arcs 1 to 1.6 decades apart, every
//! parameter drifting smoothly with the cycles, 0.3–0.8 % noise: 6 cells × 3 SOC levels × 13
//! check-ups = 234 spectra. Invented numbers of battery magnitude, for measuring only.
//!
//! ```sh
//! cargo run --release -p eis-core --example chain_campaign -- gen DIR        # DIR/in/*.csv, DIR/truth.csv
//! cargo run --release -p eis-core --example chain_campaign -- ceiling DIR    # fits from the true values
//! cargo run --release -p eis-core --example chain_campaign -- score DIR RESULTS.csv
//! ```
//!
//! A spectrum counts as right when R0 is within 5 % of the truth and both arc resistances (Rf, Rct)
//! within 10 %. `bench/chain_campaign.sh` runs the whole comparison (default warm starts,
//! `--no-warm-start`, `--share`) with the `eis` binary.

use eis_core::circuit::{Circuit, parse};
use eis_core::eval::{Plan, log_frequencies};
use eis_core::fit::{FitSettings, fit_from};
use eis_core::simulate::{Noise, simulate};
use eis_core::spectrum::Spectrum;
use std::path::Path;

/// The model: ohmic resistance, film arc, charge-transfer arc with transmissive diffusion.
pub const MODEL: &str = "R0 + Rf|Q1 + (Rct + Wt1)|Q2";
const CELLS: usize = 6;
const SOCS: [u32; 3] = [20, 50, 80];
const CYCLES: usize = 13;
const CYCLE_STEP: f64 = 50.0;

/// A small deterministic generator (SplitMix64; Steele, Lea & Flood 2014, OOPSLA) for the campaign's
/// draws, so that the campaign is the same on every machine.
struct Draw(u64);

impl Draw {
    fn next(&mut self) -> f64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^= z >> 31;
        (z >> 11) as f64 / (1u64 << 53) as f64
    }
    fn within(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * self.next()
    }
}

/// One spectrum of the campaign: its name, metadata and true parameters (circuit order: R0, Rf,
/// Q1.Q, Q1.n, Rct, Wt1.R, Wt1.tau, Q2.Q, Q2.n), and its noise.
struct Planned {
    name: String,
    truth: [f64; 9],
    noise: f64,
    seed: u64,
}

fn plan_campaign() -> Vec<Planned> {
    let mut out = Vec::new();
    for c in 0..CELLS {
        let mut d = Draw(0x00C4_A105 + c as u64);
        let r0 = d.within(0.020, 0.035);
        let r0_growth = d.within(0.2, 0.5);
        let rf = d.within(0.008, 0.020);
        let rf_growth = d.within(0.5, 1.5);
        let nf = d.within(0.86, 0.92);
        let tau_f = d.within(2e-4, 8e-4);
        let sep = d.within(1.05, 1.45);
        let sep_drift = d.within(-0.05, 0.15);
        let rct = d.within(0.015, 0.040);
        let rct_growth = d.within(0.4, 1.0);
        let ndl = d.within(0.80, 0.88);
        let rw = d.within(0.010, 0.030);
        let tau_d = d.within(20.0, 60.0);
        for (s, &soc) in SOCS.iter().enumerate() {
            let soc_factor = [1.6, 1.0, 1.2][s];
            let diff_factor = [1.3, 1.0, 1.1][s];
            for k in 0..CYCLES {
                let cycle = k as f64 * CYCLE_STEP;
                let x = cycle / (CYCLE_STEP * (CYCLES - 1) as f64);
                let smooth = |growth: f64| 1.0 + growth * (0.7 * x + 0.3 * x * x);
                let rf_k = rf * smooth(rf_growth);
                let nf_k = nf - 0.01 * x;
                let tau_f_k = tau_f * (1.0 + 0.3 * x);
                let rct_k = rct * soc_factor * smooth(rct_growth);
                let ndl_k = ndl - 0.01 * x;
                let tau_ct_k = tau_f_k * 10f64.powf((sep + sep_drift * x).clamp(1.0, 1.6));
                let truth = [
                    r0 * smooth(r0_growth),
                    rf_k,
                    tau_f_k.powf(nf_k) / rf_k,
                    nf_k,
                    rct_k,
                    rw * diff_factor * smooth(0.3),
                    tau_d * diff_factor * (1.0 + 0.1 * x),
                    tau_ct_k.powf(ndl_k) / rct_k,
                    ndl_k,
                ];
                out.push(Planned {
                    name: format!("K{}_c{}_soc{soc}", c + 1, cycle as u32),
                    truth,
                    noise: d.within(0.003, 0.008),
                    seed: 1000 * c as u64 + 100 * s as u64 + k as u64,
                });
            }
        }
    }
    out
}

fn frequencies() -> Vec<f64> {
    log_frequencies(1e4, 1e-2, 7)
}

fn circuit() -> Circuit {
    parse(MODEL).expect("the benchmark model parses")
}

fn spectrum(plan: &Plan, p: &Planned) -> Spectrum {
    simulate(
        plan,
        &p.truth,
        &frequencies(),
        Some(Noise {
            relative: p.noise,
            seed: p.seed,
        }),
    )
}

/// Whether fitted values are right: R0 within 5 %, Rf and Rct within 10 %.
fn right(truth: &[f64], r0: f64, rf: f64, rct: f64) -> bool {
    let rel = |got: f64, want: f64| ((got - want) / want).abs();
    rel(r0, truth[0]) <= 0.05 && rel(rf, truth[1]) <= 0.10 && rel(rct, truth[4]) <= 0.10
}

fn generate(dir: &Path) -> std::io::Result<()> {
    let c = circuit();
    let plan = Plan::compile(&c);
    std::fs::create_dir_all(dir.join("in"))?;
    let mut truth = String::from("name,");
    truth.push_str(
        &c.params
            .iter()
            .map(|p| p.name.as_str())
            .collect::<Vec<_>>()
            .join(","),
    );
    truth.push_str(",noise\n");
    for p in plan_campaign() {
        let s = spectrum(&plan, &p);
        std::fs::write(
            dir.join("in").join(format!("{}.csv", p.name)),
            s.to_canonical_csv(),
        )?;
        truth.push_str(&p.name);
        for v in p.truth {
            truth.push_str(&format!(",{v:e}"));
        }
        truth.push_str(&format!(",{}\n", p.noise));
    }
    std::fs::write(dir.join("truth.csv"), truth)?;
    std::fs::write(dir.join("model.circ"), format!("{MODEL}\n"))?;
    println!(
        "wrote {} spectra to {}",
        CELLS * SOCS.len() * CYCLES,
        dir.display()
    );
    Ok(())
}

fn ceiling() {
    let c = circuit();
    let plan = Plan::compile(&c);
    let (mut ok, mut total) = (0, 0);
    for p in plan_campaign() {
        let s = spectrum(&plan, &p);
        total += 1;
        if let Ok(r) = fit_from(&c, &s, &FitSettings::default(), &p.truth) {
            if right(&p.truth, r.values[0], r.values[1], r.values[4]) {
                ok += 1;
            }
        }
    }
    println!("fits from the true values: {ok} of {total} right");
}

fn score(results: &Path) -> Result<(), String> {
    let truth: std::collections::HashMap<String, [f64; 9]> = plan_campaign()
        .into_iter()
        .map(|p| (p.name, p.truth))
        .collect();
    let mut rd = csv::Reader::from_path(results).map_err(|e| e.to_string())?;
    let head = rd.headers().map_err(|e| e.to_string())?.clone();
    let col = |n: &str| {
        head.iter()
            .position(|h| h == n)
            .ok_or(format!("no column {n}"))
    };
    let (fi, r0, rf, rct) = (col("file")?, col("R0")?, col("Rf")?, col("Rct")?);
    let chi = col("reduced_chi_square")?;
    let c = circuit();
    let plan = Plan::compile(&c);
    let planned: std::collections::HashMap<String, Planned> = plan_campaign()
        .into_iter()
        .map(|p| (p.name.clone(), p))
        .collect();
    // Misses whose χ² lies above that of the fit from the true values: the search settled for a
    // worse basin (the rest are not identifiable from the one spectrum).
    let mut worse = 0;
    let (mut ok, mut total) = (0, 0);
    let mut wrong = Vec::new();
    for row in rd.records() {
        let row = row.map_err(|e| e.to_string())?;
        let stem = Path::new(&row[fi])
            .file_stem()
            .and_then(|s| s.to_str())
            .unwrap_or("")
            .to_owned();
        let Some(t) = truth.get(&stem) else { continue };
        total += 1;
        let v = |i: usize| row[i].parse::<f64>().unwrap_or(f64::NAN);
        if right(t, v(r0), v(rf), v(rct)) {
            ok += 1;
        } else {
            let from_truth = planned
                .get(&stem)
                .and_then(|p| {
                    fit_from(&c, &spectrum(&plan, p), &FitSettings::default(), &p.truth).ok()
                })
                .map_or(f64::NAN, |r| r.reduced_chi_square);
            if v(chi) > from_truth * (1.0 + 1e-6) {
                worse += 1;
            }
            wrong.push(format!(
                "{stem}: R0 {:.4}/{:.4} Rf {:.4}/{:.4} Rct {:.4}/{:.4} chi2 {:.3e} (from truth {:.3e})",
                v(r0),
                t[0],
                v(rf),
                t[1],
                v(rct),
                t[4],
                v(chi),
                from_truth
            ));
        }
    }
    for w in &wrong {
        eprintln!("{w}");
    }
    println!(
        "{ok} of {total} right; {worse} misses with chi-square above the fit from the true values"
    );
    Ok(())
}

/// Each chain (cell, SOC) fitted in cycle order by the library's chain fit, warm or cold; prints how
/// many are right, how many warm starts were replaced, how many identities were kept or jumped.
fn chains(warm_starts: bool) {
    use eis_core::fit::chain::{Identity, WarmVerdict, fit_in_chain};
    let c = circuit();
    let plan = Plan::compile(&c);
    let all = plan_campaign();
    let t0 = std::time::Instant::now();
    let (mut ok, mut replaced, mut kept, mut jumps) = (0, 0, 0, 0);
    for chain in all.chunks(CYCLES) {
        let mut previous: Option<Vec<f64>> = None;
        for p in chain {
            let s = spectrum(&plan, p);
            let warm = previous.as_deref().filter(|_| warm_starts);
            let Ok(f) = fit_in_chain(&c, &s, &FitSettings::default(), warm, previous.as_deref())
            else {
                previous = None;
                continue;
            };
            replaced += usize::from(matches!(f.warm, WarmVerdict::Replaced { .. }));
            kept += usize::from(matches!(f.identity, Identity::Kept { .. }));
            jumps += usize::from(matches!(f.identity, Identity::ForcedJump { .. }));
            let v = &f.result.values;
            if right(&p.truth, v[0], v[1], v[4]) {
                ok += 1;
            } else {
                eprintln!("{}: {:?} {} {}", p.name, v, f.warm, f.identity);
            }
            previous = Some(v.clone());
        }
    }
    println!(
        "chain fits ({}): {ok} of {} right; {replaced} warm starts replaced, {kept} identities kept, {jumps} forced jumps; {:.2} s on one core",
        if warm_starts { "warm" } else { "cold" },
        all.len(),
        t0.elapsed().as_secs_f64()
    );
}

/// Each chain fitted jointly with the CPE exponents and the diffusion time constant shared, from
/// per-spectrum seeds: `thorough` seeds by the chain fits, else by one warm run each after a chain fit
/// of the first spectrum.
fn share(thorough: bool) {
    use eis_core::fit::chain::fit_in_chain;
    use eis_core::fit::joint::{JointSettings, fit_joint, shared_indices};
    let c = circuit();
    let plan = Plan::compile(&c);
    let shared = shared_indices(&c, &["Q1.n", "Q2.n", "Wt1.tau"]).expect("names of the model");
    let all = plan_campaign();
    let t0 = std::time::Instant::now();
    let mut ok = 0;
    let mut joint_time = 0.0;
    for chain in all.chunks(CYCLES) {
        let spectra: Vec<Spectrum> = chain.iter().map(|p| spectrum(&plan, p)).collect();
        let mut seeds: Vec<Vec<f64>> = Vec::new();
        for (k, s) in spectra.iter().enumerate() {
            let prev = seeds.last().cloned();
            let v = if thorough || k == 0 {
                fit_in_chain(
                    &c,
                    s,
                    &FitSettings::default(),
                    prev.as_deref(),
                    prev.as_deref(),
                )
                .map(|f| f.result.values)
            } else {
                fit_from(
                    &c,
                    s,
                    &FitSettings::default(),
                    prev.as_deref().unwrap_or(&[]),
                )
                .map(|r| r.values)
            };
            seeds.push(v.unwrap_or_else(|_| prev.unwrap_or_else(|| c.default_values())));
        }
        let refs: Vec<&Spectrum> = spectra.iter().collect();
        let t1 = std::time::Instant::now();
        let r = fit_joint(&c, &refs, &shared, &seeds, &JointSettings::default());
        joint_time += t1.elapsed().as_secs_f64();
        let Ok(r) = r else { continue };
        for (p, f) in chain.iter().zip(&r.fits) {
            let v = &f.values;
            if right(&p.truth, v[0], v[1], v[4]) {
                ok += 1;
            } else {
                eprintln!("{}: {:?}", p.name, v);
            }
        }
    }
    println!(
        "joint fits ({} seeds): {ok} of {} right; {:.2} s on one core ({:.2} s in the joint fits)",
        if thorough { "chain-fit" } else { "warm-run" },
        all.len(),
        t0.elapsed().as_secs_f64(),
        joint_time
    );
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let r = match args.iter().map(String::as_str).collect::<Vec<_>>()[..] {
        ["gen", dir] => generate(Path::new(dir)).map_err(|e| e.to_string()),
        ["ceiling"] | ["ceiling", _] => {
            ceiling();
            Ok(())
        }
        ["chains"] => {
            chains(true);
            Ok(())
        }
        ["share"] => {
            share(false);
            Ok(())
        }
        ["share-thorough"] => {
            share(true);
            Ok(())
        }
        ["chains-cold"] => {
            chains(false);
            Ok(())
        }
        ["score", _, results] | ["score", results] => score(Path::new(results)),
        _ => Err("usage: chain_campaign gen DIR | ceiling | score [DIR] RESULTS.csv".into()),
    };
    if let Err(e) = r {
        eprintln!("chain_campaign: {e}");
        std::process::exit(2);
    }
}
