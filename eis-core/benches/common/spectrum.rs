//! Shared by the DRT and model-choice benches (each includes this file with `#[path]`): the 61-point
//! spectrum they run on.

use eis_core::circuit::parse;
use eis_core::eval::{Plan, log_frequencies};
use eis_core::simulate::{Noise, simulate};
use eis_core::spectrum::Spectrum;

/// `params` of `circuit` from 100 kHz to 0.1 Hz, 10 per decade (61 points), with `noise`.
pub fn spectrum_61(circuit: &str, params: &[f64], noise: Noise) -> Spectrum {
    let plan = Plan::compile(&parse(circuit).unwrap());
    let freqs = log_frequencies(1e5, 0.1, 10);
    assert_eq!(freqs.len(), 61);
    simulate(&plan, params, &freqs, Some(noise))
}
