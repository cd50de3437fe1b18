//! Automatic model choice (`eis fit --model auto`, the same library call) on a 61-point spectrum.

use criterion::{Criterion, criterion_group, criterion_main};
use eis_core::circuit::parse;
use eis_core::eval::{Plan, log_frequencies};
use eis_core::select::{SelectOptions, select};
use eis_core::simulate::{Noise, simulate};
use std::hint::black_box;

/// Ohmic resistance, a film arc and a charge-transfer arc with transmissive diffusion.
const CIRCUIT: &str = "R0 + R1|Q1 + (R2 + Wtd)|Q2";
const PARAMS: [f64; 9] = [1.0, 3.0, 2e-5, 0.9, 10.0, 15.0, 5.0, 3e-4, 0.85];
/// 100 kHz to 0.1 Hz, 10 per decade: 61 points.
const FMAX: f64 = 1e5;
const FMIN: f64 = 0.1;
const NOISE: Noise = Noise {
    relative: 0.003,
    seed: 5,
};

fn bench(c: &mut Criterion) {
    let plan = Plan::compile(&parse(CIRCUIT).unwrap());
    let freqs = log_frequencies(FMAX, FMIN, 10);
    assert_eq!(freqs.len(), 61);
    let spectrum = simulate(&plan, &PARAMS, &freqs, Some(NOISE));
    let mut group = c.benchmark_group("select");
    group.sample_size(10);
    group.bench_function("model_auto_61", |b| {
        b.iter(|| select(black_box(&spectrum), &SelectOptions::default()).unwrap())
    });
    group.bench_function("model_auto_61_one_thread", |b| {
        b.iter(|| {
            select(
                black_box(&spectrum),
                &SelectOptions::default().with_parallel(false),
            )
            .unwrap()
        })
    });
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
