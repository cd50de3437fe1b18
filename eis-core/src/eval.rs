//! Compiled evaluation of a circuit: Z(ω) and ∂Z/∂p for every parameter, at many frequencies, without
//! allocating per call.
//!
//! A [`Circuit`] is compiled once into a [`Plan`]: a post-order list of element evaluations and
//! series/parallel combinations. Because parameters are numbered in tree order, the parameters of any
//! subtree are one contiguous range, so a single derivative array suffices: after a subtree is evaluated,
//! row `d[p]` holds ∂Z_subtree/∂p at every frequency for its parameters. Combining children then only
//! rescales:
//!
//! - series: Z = Σ Zᵢ, and ∂Z/∂p = ∂Zᵢ/∂p unchanged;
//! - parallel: Z = 1/Σ(1/Zᵢ), and ∂Z/∂p = (Z/Zᵢ)²·∂Zᵢ/∂p for p in child i.
//!
//! Each operation works on whole rows (one value per frequency of a [`Grid`]), so an element's
//! frequency-independent work (a phase, the logarithm of a parameter) is done once per call, not once
//! per frequency, and ln ω and √ω are computed once per grid.
//!
//! ```
//! use eis_core::{circuit::parse, eval::Plan};
//! let c = parse("Rs + Rct|Cdl").unwrap();
//! let plan = Plan::compile(&c);
//! // Randles without diffusion at its apex ω = 1/(Rct·Cdl): Z = Rs + Rct/2 − j·Rct/2.
//! let z = plan.impedance(&[10.0, 100.0, 20e-6], 500.0);
//! assert!((z.re - 60.0).abs() < 1e-12 && (z.im + 50.0).abs() < 1e-12);
//! ```

use crate::circuit::{Circuit, Node};
use crate::element::ElementKind;
pub use crate::element::Grid;
use num_complex::Complex64;

const ZERO: Complex64 = Complex64::new(0.0, 0.0);

#[derive(Debug, Clone, Copy)]
enum Op {
    /// Evaluate one element over parameters `first..first + kind.params.len()`.
    Element {
        kind: &'static ElementKind,
        first: usize,
    },
    /// Pop `count` frames and add their impedances.
    Series { count: usize },
    /// Pop `count` frames and add their admittances.
    Parallel { count: usize },
}

/// A circuit compiled for evaluation. Immutable and shareable between threads; each thread evaluates
/// with its own [`Workspace`].
#[derive(Debug, Clone)]
pub struct Plan {
    ops: Vec<Op>,
    n_params: usize,
    depth: usize,
}

/// Scratch memory for [`Plan::eval`], made once by [`Plan::workspace`] and reused for every call. It
/// grows to the largest grid it has seen and then stops allocating.
#[derive(Debug, Clone)]
pub struct Workspace {
    /// Parameter ranges of the subtrees on the evaluation stack.
    stack: Vec<(usize, usize)>,
    /// One impedance row per stack slot, `depth × n_freq`.
    slots: Vec<Complex64>,
    /// One row of the grid's length for a parallel combination.
    row: Vec<Complex64>,
    /// Derivatives when the caller wants no Jacobian, `n_params × n_freq`.
    d: Vec<Complex64>,
}

/// 1/z without overflow or underflow for any finite non-zero z (Smith's algorithm).
#[inline]
fn recip_smith(z: Complex64) -> Complex64 {
    if z.re.abs() >= z.im.abs() {
        let r = z.im / z.re;
        let den = z.re + z.im * r;
        Complex64::new(1.0 / den, -r / den)
    } else {
        let r = z.re / z.im;
        let den = z.re * r + z.im;
        Complex64::new(r / den, -1.0 / den)
    }
}

/// Replaces every value of `row` by its reciprocal: z̄/|z|² when every |z|² is a normal number below
/// 1e300 (impedances from far below µΩ to far beyond TΩ; a loop without branches the compiler can
/// vectorise), Smith's algorithm for the whole row otherwise.
fn invert(row: &mut [Complex64]) {
    let safe = row.iter().fold(true, |ok, z| {
        let n2 = z.re * z.re + z.im * z.im;
        ok & (f64::MIN_POSITIVE..1e300).contains(&n2)
    });
    if safe {
        for z in row.iter_mut() {
            let s = 1.0 / (z.re * z.re + z.im * z.im);
            *z = Complex64::new(z.re * s, -z.im * s);
        }
    } else {
        for z in row.iter_mut() {
            *z = recip_smith(*z);
        }
    }
}

impl Plan {
    /// Compiles a parsed circuit.
    pub fn compile(circuit: &Circuit) -> Plan {
        let mut ops = Vec::new();
        let depth = emit(circuit, &circuit.root, &mut ops);
        Plan {
            ops,
            n_params: circuit.params.len(),
            depth,
        }
    }

    /// Number of parameters the plan takes, in [`Circuit::params`] order.
    pub fn n_params(&self) -> usize {
        self.n_params
    }

    /// Scratch memory for [`Plan::eval`].
    pub fn workspace(&self) -> Workspace {
        Workspace {
            stack: Vec::with_capacity(self.depth),
            slots: Vec::new(),
            row: Vec::new(),
            d: Vec::new(),
        }
    }

    /// Z at one angular frequency (allocates; use [`Plan::eval`] in loops).
    ///
    /// # Panics
    ///
    /// If `params.len() != self.n_params()`.
    pub fn impedance(&self, params: &[f64], omega: f64) -> Complex64 {
        self.impedances(params, &[omega])[0]
    }

    /// Z at every angular frequency (allocates the grid, the workspace and the result).
    pub fn impedances(&self, params: &[f64], omegas: &[f64]) -> Vec<Complex64> {
        let mut ws = self.workspace();
        let mut z = vec![ZERO; omegas.len()];
        self.eval(params, &Grid::new(omegas), &mut z, None, &mut ws);
        z
    }

    /// Evaluates Z(ωᵢ) into `z[i]` and, when `jac` is given, ∂Z(ωᵢ)/∂p_k into `jac[k * grid.len() + i]`
    /// (one row of the grid's length per parameter).
    ///
    /// Elements are evaluated over the whole grid at once, children combined row by row; after the
    /// workspace has grown to the grid, nothing is allocated.
    ///
    /// # Panics
    ///
    /// If `params.len() != self.n_params()`, `z.len() != grid.len()` or `jac` has the wrong length.
    pub fn eval(
        &self,
        params: &[f64],
        grid: &Grid,
        z: &mut [Complex64],
        jac: Option<&mut [Complex64]>,
        ws: &mut Workspace,
    ) {
        let np = self.n_params;
        let nf = grid.len();
        assert_eq!(params.len(), np, "parameter count");
        assert_eq!(z.len(), nf, "output length");
        if nf == 0 {
            return;
        }
        let Workspace {
            stack,
            slots,
            row,
            d,
        } = ws;
        let want_d = jac.is_some();
        let d: &mut [Complex64] = match jac {
            Some(j) => {
                assert_eq!(j.len(), nf * np, "Jacobian length");
                j
            }
            None => {
                d.resize(nf * np, ZERO);
                d
            }
        };
        slots.resize(self.depth * nf, ZERO);
        row.resize(nf, ZERO);
        stack.clear();
        for op in &self.ops {
            match *op {
                Op::Element { kind, first } => {
                    let hi = first + kind.params.len();
                    let slot = stack.len();
                    (kind.impedance)(
                        &params[first..hi],
                        grid,
                        &mut slots[slot * nf..(slot + 1) * nf],
                        &mut d[first * nf..hi * nf],
                    );
                    stack.push((first, hi));
                }
                Op::Series { count } => {
                    let base = stack.len() - count;
                    let (head, rest) = slots[base * nf..stack.len() * nf].split_at_mut(nf);
                    for child in rest.chunks_exact(nf) {
                        for (a, b) in head.iter_mut().zip(child) {
                            *a += *b;
                        }
                    }
                    let range = (stack[base].0, stack[stack.len() - 1].1);
                    stack.truncate(base);
                    stack.push(range);
                }
                Op::Parallel { count } => {
                    let base = stack.len() - count;
                    let children = &mut slots[base * nf..stack.len() * nf];
                    // Admittances of the children, and the combined impedance in `row`.
                    row.fill(ZERO);
                    for child in children.chunks_exact_mut(nf) {
                        invert(child);
                        for (r, y) in row.iter_mut().zip(child.iter()) {
                            *r += *y;
                        }
                    }
                    invert(row);
                    if want_d {
                        // ∂Z/∂p = (Z·Yᵢ)²·∂Zᵢ/∂p for p in child i.
                        for (child, &(lo, hi)) in children.chunks_exact_mut(nf).zip(&stack[base..])
                        {
                            for (y, r) in child.iter_mut().zip(row.iter()) {
                                let ratio = *r * *y;
                                *y = ratio * ratio;
                            }
                            for dp in d[lo * nf..hi * nf].chunks_exact_mut(nf) {
                                for (a, s) in dp.iter_mut().zip(child.iter()) {
                                    *a *= *s;
                                }
                            }
                        }
                    }
                    children[..nf].copy_from_slice(row);
                    let range = (stack[base].0, stack[stack.len() - 1].1);
                    stack.truncate(base);
                    stack.push(range);
                }
            }
        }
        z.copy_from_slice(&slots[..nf]);
    }
}

/// Emits ops for `node` in post-order; returns the stack depth it needs.
fn emit(c: &Circuit, node: &Node, ops: &mut Vec<Op>) -> usize {
    match node {
        Node::Element(i) => {
            let e = &c.elements[*i];
            ops.push(Op::Element {
                kind: e.kind,
                first: e.first_param,
            });
            1
        }
        Node::Series(children) | Node::Parallel(children) => {
            let mut depth = 0;
            for (k, ch) in children.iter().enumerate() {
                depth = depth.max(k + emit(c, ch, ops));
            }
            let count = children.len();
            ops.push(if matches!(node, Node::Series(_)) {
                Op::Series { count }
            } else {
                Op::Parallel { count }
            });
            depth
        }
    }
}

/// Log-spaced frequencies from `fmax` down to `fmin` (both included) with `per_decade` points per
/// decade, rounded to a whole number of intervals.
///
/// ```
/// let f = eis_core::eval::log_frequencies(1e5, 1e-2, 10);
/// assert_eq!(f.len(), 71);
/// assert_eq!(f[0], 1e5);
/// assert_eq!(*f.last().unwrap(), 1e-2);
/// ```
pub fn log_frequencies(fmax: f64, fmin: f64, per_decade: usize) -> Vec<f64> {
    let (hi, lo) = (fmax.log10(), fmin.log10());
    let intervals = ((hi - lo) * per_decade as f64).round().max(1.0) as usize;
    (0..=intervals)
        .map(|k| {
            if k == 0 {
                fmax
            } else if k == intervals {
                fmin
            } else {
                10f64.powf(hi - (hi - lo) * k as f64 / intervals as f64)
            }
        })
        .collect()
}

/// ω = 2πf.
pub fn angular(f: f64) -> f64 {
    2.0 * std::f64::consts::PI * f
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Both ways of inverting agree where both are safe, and rows with values whose |z|² would
    /// overflow or underflow are still inverted to full precision (1/z checked by z·(1/z) = 1).
    #[test]
    fn rows_invert_safely_at_any_magnitude() {
        let typical: Vec<Complex64> = (0..9)
            .map(|k| Complex64::new(1.5 * k as f64 - 4.0, 0.3 + k as f64))
            .collect();
        let mut fast = typical.clone();
        invert(&mut fast);
        for (z, y) in typical.iter().zip(&fast) {
            assert!((y - recip_smith(*z)).norm() <= 1e-15 * y.norm());
        }
        for extreme in [1e170, 1e-170, 1e300, 1e-300] {
            let row: Vec<Complex64> = typical.iter().map(|z| z * extreme).collect();
            let mut inv = row.clone();
            invert(&mut inv);
            for (z, y) in row.iter().zip(&inv) {
                let one = z * y;
                assert!((one - 1.0).norm() < 1e-15, "{extreme}: {z} * {y} = {one}");
            }
        }
    }
}
