//! Kramers–Kronig check, DRT and fit of one spectrum of 400, 2,000, 20,000 and 100,000 points (two
//! depressed arcs, 100 kHz to 10 mHz, 0.2 % noise), the functions `eis check`, `eis drt` and
//! `eis fit` call. Before issue 13 the KK check of 100,000 points tried to allocate 80 GB and the DRT
//! (and with it the fit's starts) grew as N³: these cases show that time now grows about linearly in
//! N. Criterion's minimum of ten samples makes the 100,000-point cases take a few minutes; pass a
//! filter (`cargo bench -p eis-core --bench large -- 2000`) to run some.

use criterion::{Criterion, criterion_group, criterion_main};
use eis_core::Spectrum;
use eis_core::circuit::parse;
use eis_core::drt::{DrtOptions, drt};
use eis_core::eval::Plan;
use eis_core::fit::{FitSettings, fit};
use eis_core::simulate::{Noise, simulate};
use eis_core::validate::{KkOptions, kramers_kronig};
use std::hint::black_box;

/// Ohmic resistance and two depressed arcs.
const CIRCUIT: &str = "R0 + R1|Q1 + R2|Q2";
const PARAMS: [f64; 7] = [0.05, 0.02, 1e-3, 0.85, 0.1, 2.0, 0.9];
const FMAX: f64 = 1e5;
const FMIN: f64 = 1e-2;
const SIZES: [usize; 4] = [400, 2_000, 20_000, 100_000];
const NOISE: Noise = Noise {
    relative: 0.002,
    seed: 13,
};

/// `n` log-spaced frequencies from FMAX down to FMIN.
fn spectrum(n: usize) -> Spectrum {
    let decades = (FMAX / FMIN).log10();
    let f: Vec<f64> = (0..n)
        .map(|i| FMAX * 10f64.powf(-decades * i as f64 / (n - 1) as f64))
        .collect();
    simulate(
        &Plan::compile(&parse(CIRCUIT).unwrap()),
        &PARAMS,
        &f,
        Some(NOISE),
    )
}

fn bench(c: &mut Criterion) {
    let circuit = parse(CIRCUIT).unwrap();
    let mut g = c.benchmark_group("large");
    g.sample_size(10);
    for n in SIZES {
        let s = spectrum(n);
        g.bench_function(format!("kk_{n}"), |b| {
            b.iter(|| kramers_kronig(black_box(&s), &KkOptions::default()).unwrap())
        });
        g.bench_function(format!("drt_{n}"), |b| {
            b.iter(|| drt(black_box(&s), DrtOptions::default()).unwrap())
        });
        g.bench_function(format!("fit_{n}"), |b| {
            b.iter(|| fit(&circuit, black_box(&s), &FitSettings::default(), None).unwrap())
        });
    }
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
