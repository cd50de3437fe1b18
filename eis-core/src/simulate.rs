//! Synthetic spectra from a circuit, with optional reproducible noise.

use crate::eval::{Plan, angular};
use crate::spectrum::Spectrum;
use num_complex::Complex64;
use rand::rngs::Xoshiro256PlusPlus;
use rand::{RngExt, SeedableRng};
use rand_distr::StandardNormal;

/// Gaussian noise relative to |Z|, added to the real and imaginary parts independently.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Noise {
    /// Standard deviation as a fraction of |Z| (0.01 = 1 %).
    pub relative: f64,
    /// Seed of the generator (xoshiro256++, stable across platforms and versions).
    pub seed: u64,
}

/// Simulates the circuit's spectrum at `frequency_hz` (kept in the given order).
///
/// # Panics
///
/// If `params.len() != plan.n_params()`.
pub fn simulate(
    plan: &Plan,
    params: &[f64],
    frequency_hz: &[f64],
    noise: Option<Noise>,
) -> Spectrum {
    let omegas: Vec<f64> = frequency_hz.iter().map(|&f| angular(f)).collect();
    let mut z = plan.impedances(params, &omegas);
    if let Some(n) = noise {
        add_noise(&mut z, n);
    }
    Spectrum::new(frequency_hz.to_vec(), z)
}

/// Adds noise to impedances in place.
pub fn add_noise(z: &mut [Complex64], noise: Noise) {
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(noise.seed);
    for zi in z {
        let scale = noise.relative * zi.norm();
        let a: f64 = rng.sample(StandardNormal);
        let b: f64 = rng.sample(StandardNormal);
        *zi += Complex64::new(scale * a, scale * b);
    }
}
