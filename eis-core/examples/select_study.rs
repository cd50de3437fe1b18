//! How often does automatic model choice give a simulated spectrum its own circuit, and how long does
//! it take? For every member of the family, spectra at 0.3 % noise (seeds 11, 12, ...; the same true
//! parameters as `tests/select.rs`) are put through `select` under a few settings.
//!
//! Run: `cargo run --release -p eis-core --example select_study [seeds]`.

use eis_core::eval::{Plan, log_frequencies};
use eis_core::fit::FitSettings;
use eis_core::select::{Diffusion, Member, SelectOptions, family, select};
use eis_core::simulate::{Noise, simulate};
use std::time::Instant;

const ARCS: [(f64, f64, f64); 3] = [(3.0, 2e-5, 0.9), (10.0, 1e-3, 0.85), (6.0, 3e-2, 0.9)];

fn truth(m: &Member) -> Vec<f64> {
    let c = m.circuit();
    let mut v = c.default_values();
    let mut set = |name: &str, x: f64| v[c.param_index(name).unwrap()] = x;
    set("R0", 1.0);
    if m.inductance {
        set("L0", 2e-6);
    }
    let arcs: &[(f64, f64, f64)] = match m.arcs {
        1 => &ARCS[1..2],
        2 => &ARCS[..2],
        _ => &ARCS,
    };
    for (k, &(r, tau, n)) in arcs.iter().enumerate() {
        set(&format!("R{}", k + 1), r);
        set(&format!("Q{}.Q", k + 1), tau.powf(n) / r);
        set(&format!("Q{}.n", k + 1), n);
    }
    match m.diffusion {
        Diffusion::None => {}
        Diffusion::Transmissive => {
            set("Wtd.R", 15.0);
            set("Wtd.tau", 5.0);
        }
        Diffusion::Reflective => {
            set("Wrd.R", 20.0);
            set("Wrd.tau", 20.0);
        }
    }
    v
}

fn main() {
    let seeds: u64 = std::env::args()
        .nth(1)
        .and_then(|a| a.parse().ok())
        .unwrap_or(2);
    let freqs = log_frequencies(1e5, 1e-2, 10);
    let variants = [
        (
            "default (3 grid starts, no arc moves)",
            SelectOptions::default(),
        ),
        (
            "3 grid starts, arc moves",
            SelectOptions::default().with_fit(FitSettings::default().with_starts(3)),
        ),
        (
            "1 grid start, arc moves",
            SelectOptions::default().with_fit(FitSettings::default().with_starts(1)),
        ),
        (
            "1 grid start, no arc moves",
            SelectOptions::default()
                .with_fit(FitSettings::default().with_starts(1).with_arc_moves(false)),
        ),
        (
            "3 grid starts, no arc moves, no DRT starts",
            SelectOptions::default().with_fit(
                FitSettings::default()
                    .with_starts(3)
                    .with_arc_moves(false)
                    .with_drt_starts(false),
            ),
        ),
    ];
    for (name, opts) in variants {
        let (mut right, mut more_arcs, mut total) = (0, 0, 0);
        let mut wrong = Vec::new();
        let t0 = Instant::now();
        for m in family() {
            let plan = Plan::compile(&m.circuit());
            for seed in 11..11 + seeds {
                let data = simulate(
                    &plan,
                    &truth(&m),
                    &freqs,
                    Some(Noise {
                        relative: 0.003,
                        seed,
                    }),
                );
                let s = select(&data, &opts).unwrap();
                let w = s.winner().member;
                total += 1;
                if w == m {
                    right += 1;
                } else {
                    wrong.push(format!("{} -> {}", m.label(), w.label()));
                }
                if w.arcs > m.arcs {
                    more_arcs += 1;
                }
            }
        }
        let ms = t0.elapsed().as_secs_f64() * 1e3 / total as f64;
        println!(
            "{name}: {right}/{total} own circuit, {more_arcs} with too many arcs, {ms:.0} ms per spectrum"
        );
        for w in wrong {
            println!("    {w}");
        }
    }
}
