//! DRT of a 61-point spectrum: automatic λ (GCV, the CLI's default path), and the cached fast path
//! with a fixed λ that a fitter would call per spectrum.

use criterion::{Criterion, criterion_group, criterion_main};
use eis_core::circuit::parse;
use eis_core::drt::{DrtOptions, DrtSetup, LambdaMethod, drt};
use eis_core::eval::{Plan, log_frequencies};
use eis_core::simulate::{Noise, simulate};
use std::hint::black_box;

/// Ohmic resistance and two depressed arcs (SEI-like and charge-transfer-like).
const CIRCUIT: &str = "R0 + R1|Q1 + R2|Q2";
const PARAMS: [f64; 7] = [0.05, 0.02, 1e-3, 0.85, 0.1, 2.0, 0.9];
/// 100 kHz to 0.1 Hz, 10 per decade: 61 points.
const FMAX: f64 = 1e5;
const FMIN: f64 = 0.1;
const NOISE: Noise = Noise {
    relative: 0.002,
    seed: 7,
};

fn bench(c: &mut Criterion) {
    let plan = Plan::compile(&parse(CIRCUIT).unwrap());
    let freqs = log_frequencies(FMAX, FMIN, 10);
    assert_eq!(freqs.len(), 61);
    let spectrum = simulate(&plan, &PARAMS, &freqs, Some(NOISE));
    c.bench_function("drt_gcv_61", |b| {
        b.iter(|| drt(black_box(&spectrum), DrtOptions::default()).unwrap())
    });
    let setup = DrtSetup::new(
        &freqs,
        DrtOptions::default().with_lambda(LambdaMethod::Fixed(1e-4)),
    )
    .unwrap();
    c.bench_function("drt_setup_solve_fixed_lambda_61", |b| {
        b.iter(|| setup.solve(black_box(&spectrum.z)).unwrap())
    });
}

criterion_group!(benches, bench);
criterion_main!(benches);
