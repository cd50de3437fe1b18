//! Z and Jacobian of a ten-parameter circuit at 61 frequencies.

use criterion::{Criterion, criterion_group, criterion_main};
use eis_core::circuit::parse;
use eis_core::eval::{Grid, Plan, angular, log_frequencies};
use num_complex::Complex64;
use std::hint::black_box;

/// Two arcs, transmissive finite diffusion and a series inductance: 10 parameters.
const CIRCUIT: &str = "L0 + R0 + Rsei|Qsei + (Rct + Wd)|Qdl";
const PARAMS: [f64; 10] = [1e-7, 0.05, 0.02, 1e-3, 0.85, 0.1, 2.0, 50.0, 0.05, 0.9];

fn bench(c: &mut Criterion) {
    let circuit = parse(&CIRCUIT.replace("Wd", "Wtd")).unwrap();
    let plan = Plan::compile(&circuit);
    assert_eq!(plan.n_params(), PARAMS.len());
    let omegas: Vec<f64> = log_frequencies(1e5, 1e-1, 10)
        .into_iter()
        .map(angular)
        .collect();
    assert_eq!(omegas.len(), 61);
    let grid = Grid::new(&omegas);
    let mut ws = plan.workspace();
    let mut z = vec![Complex64::new(0.0, 0.0); omegas.len()];
    let mut jac = vec![Complex64::new(0.0, 0.0); omegas.len() * PARAMS.len()];
    c.bench_function("impedance_61", |b| {
        b.iter(|| plan.eval(black_box(&PARAMS), &grid, &mut z, None, &mut ws))
    });
    c.bench_function("impedance_and_jacobian_61x10", |b| {
        b.iter(|| plan.eval(black_box(&PARAMS), &grid, &mut z, Some(&mut jac), &mut ws))
    });
}

criterion_group!(benches, bench);
criterion_main!(benches);
