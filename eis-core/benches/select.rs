//! Automatic model choice (`eis fit --model auto`, the same library call) on a 61-point spectrum.

use criterion::{Criterion, criterion_group, criterion_main};
use eis_core::select::{SelectOptions, select};
use eis_core::simulate::Noise;
use std::hint::black_box;

#[path = "common/spectrum.rs"]
mod common;
use common::spectrum_61;

/// Ohmic resistance, a film arc and a charge-transfer arc with transmissive diffusion.
const CIRCUIT: &str = "R0 + R1|Q1 + (R2 + Wtd)|Q2";
const PARAMS: [f64; 9] = [1.0, 3.0, 2e-5, 0.9, 10.0, 15.0, 5.0, 3e-4, 0.85];
const NOISE: Noise = Noise {
    relative: 0.003,
    seed: 5,
};

fn bench(c: &mut Criterion) {
    let spectrum = spectrum_61(CIRCUIT, &PARAMS, NOISE);
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
