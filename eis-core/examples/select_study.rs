//! How often does automatic model choice give a simulated spectrum its own circuit, and how long does
//! it take? For every member of the family, spectra at 0.3 % noise (seeds 11, 12, ...; the same true
//! parameters as `tests/select.rs`) are put through `select` under a few settings.
//!
//! Run: `cargo run --release -p eis-core --example select_study [seeds]`.

use eis_core::eval::{Plan, log_frequencies};
use eis_core::fit::FitSettings;
use eis_core::select::{SelectOptions, family, select};
use eis_core::simulate::{Noise, simulate};
use std::time::Instant;

#[path = "../tests/common/family_truth.rs"]
mod family_truth;
use family_truth::truth;

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
