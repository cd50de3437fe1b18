//! DRT of a 61-point spectrum: automatic λ (GCV, the CLI's default path), and the cached fast path
//! with a fixed λ that a fitter would call per spectrum.

use criterion::{Criterion, criterion_group, criterion_main};
use eis_core::drt::{DrtOptions, DrtSetup, LambdaMethod, drt};
use eis_core::simulate::Noise;
use std::hint::black_box;

#[path = "common/spectrum.rs"]
mod common;
use common::spectrum_61;

/// Ohmic resistance and two depressed arcs (SEI-like and charge-transfer-like).
const CIRCUIT: &str = "R0 + R1|Q1 + R2|Q2";
const PARAMS: [f64; 7] = [0.05, 0.02, 1e-3, 0.85, 0.1, 2.0, 0.9];
const NOISE: Noise = Noise {
    relative: 0.002,
    seed: 7,
};

fn bench(c: &mut Criterion) {
    let spectrum = spectrum_61(CIRCUIT, &PARAMS, NOISE);
    c.bench_function("drt_gcv_61", |b| {
        b.iter(|| drt(black_box(&spectrum), DrtOptions::default()).unwrap())
    });
    let setup = DrtSetup::new(
        &spectrum.frequency_hz,
        DrtOptions::default().with_lambda(LambdaMethod::Fixed(1e-4)),
    )
    .unwrap();
    c.bench_function("drt_setup_solve_fixed_lambda_61", |b| {
        b.iter(|| setup.solve(black_box(&spectrum.z)).unwrap())
    });
}

criterion_group!(benches, bench);
criterion_main!(benches);
