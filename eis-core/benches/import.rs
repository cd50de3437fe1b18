//! Reading a many-spectrum export, and reading plus Kramers–Kronig checking, on the code path the CLI
//! uses (`SpectrumReader`, `kramers_kronig`).

use criterion::{Criterion, Throughput, criterion_group, criterion_main};
use eis_core::circuit::parse;
use eis_core::eval::{Plan, log_frequencies};
use eis_core::import::{ReaderOptions, SpectrumReader};
use eis_core::simulate::{Noise, simulate};
use eis_core::validate::{KkOptions, kramers_kronig};
use std::hint::black_box;

/// Two arcs (the library's `two-interfaces` circuit).
const CIRCUIT: &str = "R0 + Rfilm|Qfilm + Rct|Qdl";
const PARAMS: [f64; 7] = [1.0, 3.0, 10e-6, 0.9, 10.0, 1e-3, 0.9];
/// Spectra in the file read by the read benchmark.
const SPECTRA: usize = 1000;
/// Spectra read and checked per iteration of the check benchmark.
const CHECKED: usize = 50;

/// A semicolon export with decimal commas and a cycle column: `spectra` copies of one noisy spectrum
/// (71 points, 100 kHz to 10 mHz).
fn export(spectra: usize) -> Vec<u8> {
    let plan = Plan::compile(&parse(CIRCUIT).unwrap());
    let s = simulate(
        &plan,
        &PARAMS,
        &log_frequencies(1e5, 1e-2, 10),
        Some(Noise {
            relative: 0.002,
            seed: 5,
        }),
    );
    let mut text = String::from("Freq (Hz);Z' (Ohm);Z'' (Ohm);Cycle\n");
    for c in 1..=spectra {
        for (f, z) in s.frequency_hz.iter().zip(&s.z) {
            text.push_str(&format!("{f:e};{:e};{:e};{c}\n", z.re, z.im).replace('.', ","));
        }
    }
    text.into_bytes()
}

fn bench(c: &mut Criterion) {
    let bytes = export(SPECTRA);
    let mut g = c.benchmark_group("import");
    g.sample_size(10);
    g.throughput(Throughput::Elements(SPECTRA as u64));
    g.bench_function("read_1000_spectra", |b| {
        b.iter(|| {
            let n = SpectrumReader::new(
                "bench.csv",
                black_box(bytes.as_slice()),
                ReaderOptions::default(),
            )
            .map(|r| r.unwrap().spectrum.len())
            .sum::<usize>();
            assert_eq!(n, SPECTRA * 71);
        })
    });
    let small = export(CHECKED);
    g.throughput(Throughput::Elements(CHECKED as u64));
    g.bench_function("read_and_check_50_spectra", |b| {
        b.iter(|| {
            let valid = SpectrumReader::new(
                "bench.csv",
                black_box(small.as_slice()),
                ReaderOptions::default(),
            )
            .map(|r| {
                kramers_kronig(&r.unwrap().spectrum, &KkOptions::default())
                    .unwrap()
                    .valid
            })
            .filter(|v| *v)
            .count();
            assert_eq!(valid, CHECKED);
        })
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
