//! End-to-end tests: the real `eis` binary on the circuit files in `circuits/`, spectra it simulates, and
//! the bad-input corpus in `tests/bad-input/`.

// The test files name their helpers `eis_tests::…`: this crate itself.
extern crate self as eis_tests;

mod support;
pub use support::*;

mod bad_input;
mod campaign;
mod check;
mod convert;
mod drt;
mod fit;
mod fit_auto;
mod outputs;
mod plot;
mod reference_impedance;
mod simulate;
