//! One module per subcommand: arguments (clap) and a `run` that calls the library.

pub mod batch;
pub mod check;
pub mod convert;
pub mod demo;
pub mod drt;
pub mod fit;
pub mod inspect;
pub mod plot;
pub mod report;
pub mod simulate;
pub mod trend;
