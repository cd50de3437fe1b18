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

/// Rows of the one-spectrum file of the dropping benchmark, and how many in a hundred have zero
/// impedance (dropped).
const ROWS: usize = 100_000;
const ZERO_PER_HUNDRED: usize = 94;

/// One long spectrum whose rows mostly hold zero impedance: the reader drops them in one pass.
fn mostly_zero() -> Vec<u8> {
    let mut text = String::from("f,re,im\n");
    for i in 0..ROWS {
        let f = 1e5 * (1.0 - i as f64 / ROWS as f64);
        let z = if i % 100 < ZERO_PER_HUNDRED { 0.0 } else { 1.0 };
        text.push_str(&format!("{f},{z},{}\n", -z));
    }
    text.into_bytes()
}

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

/// A reader with the default options over `bytes` (hidden from the optimiser).
fn reader(bytes: &[u8]) -> SpectrumReader<&[u8]> {
    SpectrumReader::new("bench.csv", black_box(bytes), ReaderOptions::default())
}

/// The number of points read from `bytes`.
fn points(bytes: &[u8]) -> usize {
    reader(bytes).map(|r| r.unwrap().spectrum.len()).sum()
}

fn bench(c: &mut Criterion) {
    let bytes = export(SPECTRA);
    let mut g = c.benchmark_group("import");
    g.sample_size(10);
    g.throughput(Throughput::Elements(SPECTRA as u64));
    g.bench_function("read_1000_spectra", |b| {
        b.iter(|| {
            let n = points(&bytes);
            assert_eq!(n, SPECTRA * 71);
        })
    });
    let small = export(CHECKED);
    g.throughput(Throughput::Elements(CHECKED as u64));
    g.bench_function("read_and_check_50_spectra", |b| {
        b.iter(|| {
            let valid = reader(&small)
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
    let zeros = mostly_zero();
    g.throughput(Throughput::Elements(ROWS as u64));
    g.bench_function("read_100k_rows_94k_dropped", |b| {
        b.iter(|| {
            let n = points(&zeros);
            assert_eq!(n, ROWS / 100 * (100 - ZERO_PER_HUNDRED));
        })
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
