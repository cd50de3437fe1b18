//! One fit from automatic starting values, on the code path `eis fit` uses: a one-arc cell and a full
//! cell (inductance, two arcs, finite diffusion), 61 points from 100 kHz to 0.1 Hz, 0.5 % noise.

use criterion::{Criterion, criterion_group, criterion_main};
use eis_core::circuit::{Circuit, parse};
use eis_core::eval::{Plan, log_frequencies};
use eis_core::fit::{FitSettings, fit};
use eis_core::simulate::{Noise, simulate};
use std::hint::black_box;

/// One depressed arc: R0, Rct, Qdl.Q, Qdl.n.
const ONE_ARC: &str = "R0 + Rct|Qdl";
const ONE_ARC_PARAMS: [f64; 4] = [0.02, 0.05, 2.0, 0.9];
/// Inductance, film arc, charge-transfer arc with transmissive diffusion: 10 parameters.
const FULL_CELL: &str = "L0 + R0 + Rf|Qf + (Rct + Wtd)|Qdl";
const FULL_CELL_PARAMS: [f64; 10] = [5e-8, 0.02, 0.01, 0.01, 0.85, 0.03, 0.05, 5.0, 2.0, 0.9];
/// Relative noise and its seed.
const NOISE: Noise = Noise {
    relative: 0.005,
    seed: 7,
};

fn case(text: &str, params: &[f64]) -> (Circuit, eis_core::spectrum::Spectrum) {
    let c = parse(text).unwrap();
    let freqs = log_frequencies(1e5, 1e-1, 10);
    assert_eq!(freqs.len(), 61);
    let data = simulate(&Plan::compile(&c), params, &freqs, Some(NOISE));
    (c, data)
}

fn bench(cr: &mut Criterion) {
    let settings = FitSettings::default();
    for (name, text, params) in [
        ("fit_one_arc_61", ONE_ARC, &ONE_ARC_PARAMS[..]),
        ("fit_full_cell_61", FULL_CELL, &FULL_CELL_PARAMS[..]),
    ] {
        let (c, data) = case(text, params);
        assert!(fit(&c, &data, &settings, None).unwrap().converged);
        cr.bench_function(name, |b| {
            b.iter(|| fit(black_box(&c), black_box(&data), &settings, None).unwrap())
        });
    }
}

criterion_group!(benches, bench);
criterion_main!(benches);
