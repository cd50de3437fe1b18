//! The Kramers–Kronig check alone (`kramers_kronig`, the function `eis check` calls), one spectrum per
//! iteration: valid spectra of 61 and 71 points and two that fail (drift during the sweep and corrupted
//! points), since a failing spectrum makes the search for M run longest.

use criterion::{Criterion, criterion_group, criterion_main};
use eis_core::Spectrum;
use eis_core::circuit::parse;
use eis_core::eval::{Plan, angular, log_frequencies};
use eis_core::simulate::{Noise, simulate};
use eis_core::validate::{KkOptions, kramers_kronig};
use std::hint::black_box;

/// Two arcs (the library's `two-interfaces` circuit).
const CIRCUIT: &str = "R0 + Rfilm|Qfilm + Rct|Qdl";
const PARAMS: [f64; 7] = [1.0, 3.0, 10e-6, 0.9, 10.0, 1e-3, 0.9];
/// Relative noise of the simulated spectra (0.2 % of |Z| on each part) and its seed.
const NOISE: Noise = Noise {
    relative: 0.002,
    seed: 5,
};
/// Growth of Rct over the sweep in the drifting spectrum (30 %).
const DRIFT: f64 = 0.3;
/// Factor on the real part of the corrupted points near 100 Hz (4 % high).
const GLITCH: f64 = 1.04;

fn spectrum(points_per_decade: usize) -> Spectrum {
    let plan = Plan::compile(&parse(CIRCUIT).unwrap());
    simulate(
        &plan,
        &PARAMS,
        &log_frequencies(1e5, 1e-2, points_per_decade),
        Some(NOISE),
    )
}

/// Rct grows linearly in sweep time (high to low frequency, three periods plus 0.5 s per point).
fn drifting() -> Spectrum {
    let plan = Plan::compile(&parse(CIRCUIT).unwrap());
    let f = log_frequencies(1e5, 1e-2, 10);
    let mut t = 0.0;
    let times: Vec<f64> = f
        .iter()
        .map(|&fi| {
            let start = t;
            t += 3.0 / fi + 0.5;
            start
        })
        .collect();
    let z = f
        .iter()
        .zip(&times)
        .map(|(&fi, &ti)| {
            let mut p = PARAMS;
            p[4] *= 1.0 + DRIFT * ti / t;
            plan.impedance(&p, angular(fi))
        })
        .collect();
    Spectrum::new(f, z)
}

fn corrupted() -> Spectrum {
    let mut s = spectrum(10);
    for i in 0..s.len() {
        if (80.0..130.0).contains(&s.frequency_hz[i]) {
            s.z[i].re *= GLITCH;
        }
    }
    s
}

fn bench(c: &mut Criterion) {
    let mut g = c.benchmark_group("kk");
    let cases = [
        ("valid_71_points", spectrum(10), true),
        (
            "valid_61_points",
            {
                let plan = Plan::compile(&parse(CIRCUIT).unwrap());
                simulate(&plan, &PARAMS, &log_frequencies(1e5, 1e-1, 10), Some(NOISE))
            },
            true,
        ),
        ("drifting_71_points", drifting(), false),
        ("corrupted_71_points", corrupted(), false),
    ];
    for (name, s, valid) in cases {
        assert_eq!(
            kramers_kronig(&s, &KkOptions::default()).unwrap().valid,
            valid,
            "{name}"
        );
        g.bench_function(name, |b| {
            b.iter(|| kramers_kronig(black_box(&s), &KkOptions::default()).unwrap())
        });
    }
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
