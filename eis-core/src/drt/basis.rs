//! The basis of the DRT: Gaussian radial basis functions in ln τ, their impedance response (the kernel)
//! and the Gram matrix of their derivatives (the penalty), prepared once per set of frequencies.

use super::options::{DrtOptions, Part};
use super::{DrtError, DrtErrorKind, MAX_BASIS, MIN_POINTS};
use nalgebra::{DMatrix, DVector};
use num_complex::Complex64;
use std::f64::consts::{LN_10, PI};

/// Everything of a DRT that depends only on the frequencies and the options, computed once and reused
/// for every spectrum measured at those frequencies (in the same order).
#[derive(Debug, Clone)]
pub struct DrtSetup {
    pub(super) options: DrtOptions,
    pub(super) frequency_hz: Vec<f64>,
    pub(super) omega: Vec<f64>,
    pub(super) omega_max: f64,
    pub(super) omega_min: f64,
    /// ln τ_m of the basis centres, ascending.
    pub(super) centres: Vec<f64>,
    pub(super) epsilon: f64,
    /// ∫φ_m/(1 + jω_iτ) d ln τ: real parts (N × M) and imaginary parts.
    pub(super) kernel_re: DMatrix<f64>,
    pub(super) kernel_im: DMatrix<f64>,
    /// Penalty over all unknowns (R∞ and L rows and columns are zero).
    pub(super) penalty: DMatrix<f64>,
    /// ln τ of the output grid, ascending.
    pub(super) grid: Vec<f64>,
    /// φ_m at each grid point (G × M).
    pub(super) grid_basis: DMatrix<f64>,
    pub(super) has_r_inf: bool,
    pub(super) has_l: bool,
    pub(super) has_c: bool,
}

/// Gram entry ∫φ_i^(k) φ_j^(k) d ln τ of the Gaussians exp(−ε²(y − y_i)²) for derivative order k = 0,
/// 1, 2, with d = y_i − y_j. Orders 0 and 1 are the closed forms listed for the Gaussian basis (Wan et
/// al. 2015); order 2 follows from ∫φ_i^(k)φ_j^(k) = (−1)^k G₀^(2k)(d) with G₀ the order-0 entry, which
/// gives √(π/2)·ε³·(t⁴ − 6t² + 3)·e^(−t²/2), t = εd (a fourth Hermite polynomial).
pub fn gaussian_gram(order: u8, epsilon: f64, d: f64) -> f64 {
    let t2 = (epsilon * d).powi(2);
    let e = (-t2 / 2.0).exp();
    let c = (PI / 2.0).sqrt();
    match order {
        0 => c / epsilon * e,
        1 => c * epsilon * (1.0 - t2) * e,
        _ => c * epsilon.powi(3) * (t2 * t2 - 6.0 * t2 + 3.0) * e,
    }
}

/// The real and imaginary parts of ∫ exp(−ε²u²)/(1 + j·e^(u+s)) du, i.e. the response at ω of a basis
/// function centred at τ_m when s = ln(ωτ_m), by the trapezoidal rule on a fixed set of nodes. The
/// integrand is smooth and decays like a Gaussian, so the rule converges geometrically: the nodes are
/// spaced ≤ 0.2/ε and ≤ 0.1 and reach ±7/ε, for errors near round-off (checked against adaptive
/// quadrature from SciPy in the tests).
#[derive(Debug, Clone)]
struct KernelRule {
    /// h·exp(−ε²u_k²).
    weight: Vec<f64>,
    /// e^(u_k).
    exp_u: Vec<f64>,
}

impl KernelRule {
    fn new(epsilon: f64) -> KernelRule {
        let h = (0.2 / epsilon).min(0.1);
        let half = (7.0 / epsilon / h).ceil() as i64;
        let (mut weight, mut exp_u) = (Vec::new(), Vec::new());
        for k in -half..=half {
            let u = k as f64 * h;
            weight.push(h * (-(epsilon * u).powi(2)).exp());
            exp_u.push(u.exp());
        }
        KernelRule { weight, exp_u }
    }

    fn eval(&self, s: f64) -> (f64, f64) {
        let es = s.exp();
        let (mut re, mut im) = (0.0, 0.0);
        for (w, e) in self.weight.iter().zip(&self.exp_u) {
            let x = es * e;
            re += w / (1.0 + x * x);
            // x/(1 + x²) written so that x → 0 and x → ∞ both give 0 without NaN.
            im -= w / (x + 1.0 / x);
        }
        (re, im)
    }
}

impl DrtSetup {
    /// Prepares a DRT for spectra measured at `frequency_hz` (any order, repeats allowed).
    ///
    /// # Errors
    ///
    /// [`DrtErrorKind::Empty`], [`DrtErrorKind::BadFrequency`], [`DrtErrorKind::TooFewPoints`] (fewer
    /// than [`MIN_POINTS`] distinct frequencies) and [`DrtErrorKind::BadOption`].
    pub fn new(frequency_hz: &[f64], options: DrtOptions) -> Result<DrtSetup, DrtError> {
        options.validate()?;
        if frequency_hz.is_empty() {
            return Err(DrtError::new(DrtErrorKind::Empty));
        }
        if let Some((i, &f)) = frequency_hz
            .iter()
            .enumerate()
            .find(|(_, f)| !(f.is_finite() && **f > 0.0))
        {
            return Err(DrtError::new(DrtErrorKind::BadFrequency {
                point: i + 1,
                value: f,
            }));
        }
        let omega: Vec<f64> = frequency_hz.iter().map(|&f| 2.0 * PI * f).collect();
        // 2πf can overflow for f near f64::MAX, and the time constant 1/(2πf) for subnormal f.
        if let Some(i) = omega
            .iter()
            .position(|w| !(w.is_finite() && w.recip().is_finite()))
        {
            return Err(DrtError::new(DrtErrorKind::BadFrequency {
                point: i + 1,
                value: frequency_hz[i],
            }));
        }
        let mut centres: Vec<f64> = omega.iter().map(|w| -w.ln()).collect();
        centres.sort_by(f64::total_cmp);
        centres.dedup_by(|a, b| (*a - *b).abs() <= 1e-9);
        let m = centres.len();
        if m < MIN_POINTS {
            return Err(DrtError::new(DrtErrorKind::TooFewPoints {
                found: m,
                needed: MIN_POINTS,
            }));
        }
        if m > MAX_BASIS {
            // Evenly spaced in ln τ over the same range: the basis, not the data, is thinned.
            let (lo, hi) = (centres[0], centres[m - 1]);
            centres = (0..MAX_BASIS)
                .map(|k| lo + (hi - lo) * k as f64 / (MAX_BASIS - 1) as f64)
                .collect();
        }
        let m = centres.len();
        let spacing = (centres[m - 1] - centres[0]) / (m - 1) as f64;
        let fwhm = options.rbf_width * spacing;
        let epsilon = 2.0 * 2f64.ln().sqrt() / fwhm;

        let n = omega.len();
        let rule = KernelRule::new(epsilon);
        let mut kernel_re = DMatrix::zeros(n, m);
        let mut kernel_im = DMatrix::zeros(n, m);
        for (i, w) in omega.iter().enumerate() {
            let ln_w = w.ln();
            for (k, y) in centres.iter().enumerate() {
                let (re, im) = rule.eval(ln_w + y);
                kernel_re[(i, k)] = re;
                kernel_im[(i, k)] = im;
            }
        }

        let has_r_inf = options.part != Part::Imaginary;
        let has_l = options.inductance && options.part != Part::Real;
        let has_c = options.capacitance && options.part != Part::Real;
        let extra = has_r_inf as usize + has_l as usize + has_c as usize;
        let order = options.penalty.order();
        let mut penalty = DMatrix::zeros(extra + m, extra + m);
        for a in 0..m {
            for b in 0..m {
                penalty[(extra + a, extra + b)] =
                    gaussian_gram(order, epsilon, centres[a] - centres[b]);
            }
        }

        // Output grid: the centres plus three FWHM each side (beyond 3 FWHM ≈ 7σ a Gaussian holds
        // nothing measurable), evenly spaced in ln τ.
        let lo = centres[0] - 3.0 * fwhm;
        let hi = centres[m - 1] + 3.0 * fwhm;
        let g = (((hi - lo) / LN_10) * options.grid_per_decade as f64).ceil() as usize + 1;
        let grid: Vec<f64> = (0..g)
            .map(|k| lo + (hi - lo) * k as f64 / (g - 1) as f64)
            .collect();
        let grid_basis = DMatrix::from_fn(g, m, |r, c| {
            (-(epsilon * (grid[r] - centres[c])).powi(2)).exp()
        });

        let omega_max = omega.iter().fold(0.0f64, |a, &b| a.max(b));
        let omega_min = omega.iter().fold(f64::INFINITY, |a, &b| a.min(b));
        Ok(DrtSetup {
            options,
            frequency_hz: frequency_hz.to_vec(),
            omega,
            omega_max,
            omega_min,
            centres,
            epsilon,
            kernel_re,
            kernel_im,
            penalty,
            grid,
            grid_basis,
            has_r_inf,
            has_l,
            has_c,
        })
    }

    /// The shape factor ε of the basis functions.
    #[cfg(test)]
    pub fn epsilon(&self) -> f64 {
        self.epsilon
    }

    /// The basis centres τ_m (s), ascending.
    pub fn basis_tau_s(&self) -> Vec<f64> {
        self.centres.iter().map(|y| y.exp()).collect()
    }

    /// The weighted, scale-free design matrix and data vector for the fitted part(s).
    pub(super) fn design(
        &self,
        z: &[Complex64],
        weights: &[f64],
        r_ref: f64,
    ) -> (DMatrix<f64>, DVector<f64>) {
        let n = self.omega.len();
        let m = self.centres.len();
        let extra = self.has_r_inf as usize + self.has_l as usize + self.has_c as usize;
        let parts: &[bool] = match self.options.part {
            Part::Both => &[false, true],
            Part::Real => &[false],
            Part::Imaginary => &[true],
        };
        let rows = n * parts.len();
        let mut a = DMatrix::zeros(rows, extra + m);
        let mut b = DVector::zeros(rows);
        for (block, &imag) in parts.iter().enumerate() {
            for i in 0..n {
                let r = block * n + i;
                let w = weights[i];
                let s = w * r_ref;
                let mut col = 0;
                if self.has_r_inf {
                    a[(r, col)] = if imag { 0.0 } else { s };
                    col += 1;
                }
                if self.has_l {
                    a[(r, col)] = if imag {
                        s * self.omega[i] / self.omega_max
                    } else {
                        0.0
                    };
                    col += 1;
                }
                if self.has_c {
                    // −1/(ωC), with the elastance 1/C in units of R_ref·ω_min.
                    a[(r, col)] = if imag {
                        -s * self.omega_min / self.omega[i]
                    } else {
                        0.0
                    };
                    col += 1;
                }
                let kernel = if imag {
                    &self.kernel_im
                } else {
                    &self.kernel_re
                };
                for k in 0..m {
                    a[(r, col + k)] = s * kernel[(i, k)];
                }
                b[r] = w * if imag { z[i].im } else { z[i].re };
            }
        }
        (a, b)
    }
}
