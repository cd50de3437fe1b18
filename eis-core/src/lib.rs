//! Computation core of the EIS toolkit: a circuit language of our own, compiled impedance evaluation with
//! analytic derivatives, simulation, fitting, validation, DRT and campaign trends.
//!
//! # Conventions
//!
//! - SI units throughout: Ω, F, H, s, Hz. Angular frequency ω = 2πf in rad/s.
//! - j² = −1 and Z = Z′ + jZ″; the imaginary part carries its own sign, so a capacitive response has
//!   Z″ < 0 (Nyquist plots show −Z″ upwards).
//! - Frequencies may come in any order; canonical files list them from high to low.
//! - Parameters are numbered in the order their elements appear in the circuit text.
//!
//! # Example
//!
//! ```
//! use eis_core::{circuit::parse, eval::{Plan, angular}};
//! let circuit = parse("R0 + Rct|Qdl").unwrap();
//! let plan = Plan::compile(&circuit);
//! let p = [10.0, 100.0, 1e-5, 0.8];
//! // Apex of an R|Q arc at ω = (RQ)^(-1/n), where −Z″ = (R/2)·tan(nπ/4).
//! let w = (100.0f64 * 1e-5).powf(-1.0 / 0.8);
//! let z = plan.impedance(&p, w);
//! assert!((-z.im - 50.0 * (0.8 * std::f64::consts::FRAC_PI_4).tan()).abs() < 1e-9);
//! # let _ = angular(1.0);
//! ```

#![forbid(unsafe_code)]
#![warn(missing_docs)]

pub mod campaign;
pub mod circuit;
mod dense;
pub mod derive;
pub mod drt;
pub mod element;
pub mod eval;
pub mod fit;
pub mod import;
pub mod nnls;
pub mod number;
pub mod output;
pub mod report;
pub mod roles;
pub mod scenario;
pub mod select;
pub mod simulate;
pub mod spectrum;
pub mod trend;
pub mod validate;

pub use circuit::{Circuit, CircuitError};
pub use eval::Plan;
pub use spectrum::Spectrum;
