//! End-to-end tests: the real `eis` binary on the files in `circuits/` and `test-spectra/`.

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
