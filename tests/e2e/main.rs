//! End-to-end tests: the real `eis` binary on the files in `circuits/` and `test-spectra/`.

mod check;
mod convert;
mod simulate;
