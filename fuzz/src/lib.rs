//! A fuzz harness of the EIS toolkit that runs on the stable toolchain: a small in-process engine with
//! a seeded generator ([`engine`]), mutation operators ([`mutate`]), a delta-debugging minimiser
//! ([`minimise`]) and three targets ([`targets`]): the circuit parser, the export reader and the
//! numerics.
//!
//! A short fixed-seed pass of each target runs inside `cargo test`; a long pass runs from the command
//! line (`cargo run --release -p eis-fuzz -- reader --seconds 3600`, see `fuzz/README.md`).
//! Minimised inputs that once failed live in `fuzz/regressions/<target>/` and are replayed by a test.
//!
//! ```
//! use eis_fuzz::engine::{fuzz, Config};
//! use eis_fuzz::targets::CircuitTarget;
//! let report = fuzz(&CircuitTarget, &Config::new().with_seed(5).with_iterations(200));
//! assert_eq!(report.executions, 200);
//! assert!(report.failures.is_empty(), "{}", report.summary());
//! ```

#![forbid(unsafe_code)]
#![warn(missing_docs)]

pub mod engine;
pub mod minimise;
pub mod mutate;
pub mod regress;
pub mod targets;
