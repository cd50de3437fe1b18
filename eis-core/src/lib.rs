//! Computation core of the EIS toolkit: a circuit language of our own, compiled impedance evaluation with
//! analytic derivatives, simulation, fitting, validation, DRT and campaign trends.
//!
//! # Where to start
//!
//! | to … | read |
//! |---|---|
//! | write a circuit (`R0 + Rct\|Qdl`) and evaluate it | [`circuit::parse`], [`eval::Plan`], [`simulate::simulate`] |
//! | read measured spectra from files | [`import::SpectrumReader`] |
//! | fit a circuit, with standard errors and typed warnings | [`fit::fit`] → [`fit::FitResult`], [`fit::FitWarning`] |
//! | turn a fit into battery quantities (ohmic, charge-transfer, DC resistance …) | [`derive::derive()`], the table [`derive::QUANTITIES`] |
//! | check that a spectrum is linear and stable (Kramers–Kronig) | [`validate::kramers_kronig`] |
//! | a distribution of relaxation times (DRT) | [`drt::drt`] |
//! | choose a model automatically | [`select::select`] |
//! | check and fit a whole campaign of files, resumable | [`campaign::run_batch`] → `results.csv`, `results.jsonl` |
//! | follow quantities over cycles and raise flags | [`trend::read_results_csv`], [`trend::analyse`] |
//!
//! A fit from simulated data, its derived quantities and its Kramers–Kronig check:
//!
//! ```
//! use eis_core::derive::{QuantityKey, derive};
//! use eis_core::eval::{Plan, log_frequencies};
//! use eis_core::fit::{FitSettings, fit};
//! use eis_core::validate::{KkOptions, kramers_kronig};
//!
//! let circuit = eis_core::circuit::parse("R0 + Rct|Cdl").unwrap();
//! let truth = [0.02, 0.05, 1e-3]; // Ω, Ω, F
//! let f = log_frequencies(1e5, 1e-2, 8);
//! let spectrum = eis_core::simulate::simulate(&Plan::compile(&circuit), &truth, &f, None);
//!
//! let result = fit(&circuit, &spectrum, &FitSettings::default(), None).unwrap();
//! assert!(result.termination.was_successful() && result.warnings.is_empty());
//! let derived = derive(&circuit, &result);
//! let dc = (QuantityKey::Dc.row().get)(&derived).unwrap();
//! assert!((dc.value - 0.07).abs() < 1e-9); // R0 + Rct
//! assert!(kramers_kronig(&spectrum, &KkOptions::default()).unwrap().valid);
//! ```
//!
//! # Conventions
//!
//! - SI units throughout: Ω, F, H, s, Hz. Angular frequency ω = 2πf in rad/s.
//! - j² = −1 and Z = Z′ + jZ″; the imaginary part carries its own sign, so a capacitive response has
//!   Z″ < 0 (Nyquist plots show −Z″ upwards).
//! - Frequencies may come in any order; canonical files list them from high to low.
//! - Parameters are numbered in the order their elements appear in the circuit text.
//!
//! # Evaluating a circuit
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
pub(crate) mod nnls;
pub mod number;
pub mod output;
pub mod report;
pub mod roles;
pub mod scenario;
pub mod select;
pub mod simulate;
pub mod spectrum;
#[doc(hidden)]
pub mod testing;
pub mod trend;
pub mod validate;

pub use circuit::{Circuit, CircuitError};
pub use eval::Plan;
pub use spectrum::Spectrum;
