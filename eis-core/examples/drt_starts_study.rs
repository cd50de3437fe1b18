//! Do starts built from DRT peaks help the fitter? Fits simulated two-arc + diffusion spectra from
//! automatic starts with and without the DRT starts, for several numbers of grid starts, and prints the
//! success rate (the fit reaches a χ² no worse than that of the true parameters), the mean number of
//! residual evaluations and the mean time per fit.
//!
//! Run: `cargo run --release -p eis-core --example drt_starts_study [cases]`.
//! Data: random true parameters (log-uniform, xoshiro256++ seeded with 2024 + case number), 0.3 %
//! relative noise seeded with the case number, 100 kHz to 10 mHz at 10 points per decade.

use eis_core::circuit::{Circuit, parse};
use eis_core::eval::{Plan, log_frequencies};
use eis_core::fit::{FitSettings, fit};
use eis_core::simulate::{Noise, simulate};
use rand::rngs::Xoshiro256PlusPlus;
use rand::{RngExt, SeedableRng};
use std::time::Instant;

const CIRCUITS: [&str; 3] = [
    "R0 + R1|Q1 + (R2 + Wtd)|Q2",
    "R0 + R1|Q1 + (R2 + Wrd)|Q2",
    "L0 + R0 + R1|Q1 + (R2 + Wtd)|Q2",
];

fn truth(c: &Circuit, rng: &mut Xoshiro256PlusPlus) -> Vec<f64> {
    let mut u = |lo: f64, hi: f64| lo * (hi / lo).powf(rng.random::<f64>());
    let (r1, t1, n1) = (u(1.0, 20.0), u(1e-5, 1e-3), u(0.75, 0.95));
    let (r2, t2, n2) = (u(5.0, 50.0), u(3e-3, 0.1), u(0.75, 0.95));
    let (rd, td) = (u(5.0, 50.0), u(3.0, 100.0));
    let (r0, l0) = (u(0.5, 5.0), u(1e-6, 1e-5));
    let mut v = c.default_values();
    let mut set = |name: &str, x: f64| v[c.param_index(name).unwrap()] = x;
    set("R0", r0);
    set("R1", r1);
    set("Q1.Q", t1.powf(n1) / r1);
    set("Q1.n", n1);
    set("R2", r2);
    set("Q2.Q", t2.powf(n2) / r2);
    set("Q2.n", n2);
    let w = if c.param_index("Wtd.R").is_some() {
        "Wtd"
    } else {
        "Wrd"
    };
    set(&format!("{w}.R"), rd);
    set(&format!("{w}.tau"), td);
    if c.param_index("L0").is_some() {
        set("L0", l0);
    }
    v
}

fn main() {
    let cases: u64 = std::env::args()
        .nth(1)
        .and_then(|a| a.parse().ok())
        .unwrap_or(20);
    let freqs = log_frequencies(1e5, 1e-2, 10);
    println!("circuit | grid starts | DRT starts | success | mean evaluations | mean ms");
    for text in CIRCUITS {
        let c = parse(text).unwrap();
        let plan = Plan::compile(&c);
        let data: Vec<_> = (0..cases)
            .map(|k| {
                let mut rng = Xoshiro256PlusPlus::seed_from_u64(2024 + k);
                let t = truth(&c, &mut rng);
                let s = simulate(
                    &plan,
                    &t,
                    &freqs,
                    Some(Noise {
                        relative: 0.003,
                        seed: k,
                    }),
                );
                let z = plan.impedances(&t, &s.omegas());
                let chi: f64 = z
                    .iter()
                    .zip(&s.z)
                    .map(|(m, d)| (m - d).norm_sqr() / d.norm_sqr())
                    .sum();
                (s, chi)
            })
            .collect();
        for starts in [1, 2, 8] {
            for drt in [false, true] {
                let settings = FitSettings::default()
                    .with_starts(starts)
                    .with_drt_starts(drt);
                let (mut ok, mut evals) = (0, 0);
                let t0 = Instant::now();
                for (s, chi_truth) in &data {
                    let r = fit(&c, s, &settings, None).unwrap();
                    evals += r.evaluations;
                    if r.chi_square <= chi_truth * (1.0 + 1e-6) {
                        ok += 1;
                    }
                }
                let ms = t0.elapsed().as_secs_f64() * 1e3 / cases as f64;
                println!(
                    "{text} | {starts} | {} | {ok}/{cases} | {:.0} | {ms:.1}",
                    if drt { "yes" } else { "no" },
                    evals as f64 / cases as f64
                );
            }
        }
    }
}
