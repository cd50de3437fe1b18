//! Compiled evaluation of a circuit: Z(ω) and ∂Z/∂p for every parameter, at many frequencies, without
//! allocating per call.
//!
//! A [`Circuit`] is compiled once into a [`Plan`]: a post-order list of element evaluations and
//! series/parallel combinations. Because parameters are numbered in tree order, the parameters of any
//! subtree are one contiguous range, so a single derivative array suffices: after a subtree is evaluated,
//! `d[p]` holds ∂Z_subtree/∂p for its parameters. Combining children then only rescales:
//!
//! - series: Z = Σ Zᵢ, and ∂Z/∂p = ∂Zᵢ/∂p unchanged;
//! - parallel: Z = 1/Σ(1/Zᵢ), and ∂Z/∂p = (Z/Zᵢ)²·∂Zᵢ/∂p for p in child i.
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

#[derive(Debug, Clone, Copy)]
struct Frame {
    z: Complex64,
    lo: usize,
    hi: usize,
}

/// A circuit compiled for evaluation. Immutable and shareable between threads; each thread evaluates
/// with its own [`Workspace`].
#[derive(Debug, Clone)]
pub struct Plan {
    ops: Vec<Op>,
    n_params: usize,
    depth: usize,
}

/// Scratch memory for [`Plan::eval`], made once by [`Plan::workspace`] and reused for every call.
#[derive(Debug, Clone)]
pub struct Workspace {
    stack: Vec<Frame>,
    d: Vec<Complex64>,
}

/// 1/z without overflow or underflow for any finite non-zero z (Smith's algorithm).
#[inline]
pub(crate) fn recip(z: Complex64) -> Complex64 {
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
            d: vec![ZERO; self.n_params],
        }
    }

    /// Z at one angular frequency (allocates a workspace; use [`Plan::eval`] in loops).
    ///
    /// # Panics
    ///
    /// If `params.len() != self.n_params()`.
    pub fn impedance(&self, params: &[f64], omega: f64) -> Complex64 {
        let mut ws = self.workspace();
        let mut z = [ZERO];
        self.eval(params, &[omega], &mut z, None, &mut ws);
        z[0]
    }

    /// Z at every angular frequency (allocates the result).
    pub fn impedances(&self, params: &[f64], omegas: &[f64]) -> Vec<Complex64> {
        let mut ws = self.workspace();
        let mut z = vec![ZERO; omegas.len()];
        self.eval(params, omegas, &mut z, None, &mut ws);
        z
    }

    /// Evaluates Z(ωᵢ) into `z[i]` and, when `jac` is given, ∂Z(ωᵢ)/∂p_k into `jac[i * n_params + k]`.
    ///
    /// # Panics
    ///
    /// If `params.len() != self.n_params()`, `z.len() != omegas.len()` or `jac` has the wrong length.
    pub fn eval(
        &self,
        params: &[f64],
        omegas: &[f64],
        z: &mut [Complex64],
        mut jac: Option<&mut [Complex64]>,
        ws: &mut Workspace,
    ) {
        let np = self.n_params;
        assert_eq!(params.len(), np, "parameter count");
        assert_eq!(z.len(), omegas.len(), "output length");
        if let Some(j) = &jac {
            assert_eq!(j.len(), omegas.len() * np, "Jacobian length");
        }
        for (i, &w) in omegas.iter().enumerate() {
            z[i] = self.eval_one(params, w, ws);
            if let Some(j) = jac.as_deref_mut() {
                j[i * np..(i + 1) * np].copy_from_slice(&ws.d);
            }
        }
    }

    fn eval_one(&self, params: &[f64], w: f64, ws: &mut Workspace) -> Complex64 {
        let Workspace { stack, d } = ws;
        stack.clear();
        for op in &self.ops {
            match *op {
                Op::Element { kind, first } => {
                    let hi = first + kind.params.len();
                    let z = (kind.impedance)(&params[first..hi], w, &mut d[first..hi]);
                    stack.push(Frame { z, lo: first, hi });
                }
                Op::Series { count } => {
                    let base = stack.len() - count;
                    let mut z = ZERO;
                    for f in &stack[base..] {
                        z += f.z;
                    }
                    let lo = stack[base].lo;
                    let hi = stack[stack.len() - 1].hi;
                    stack.truncate(base);
                    stack.push(Frame { z, lo, hi });
                }
                Op::Parallel { count } => {
                    let base = stack.len() - count;
                    let mut y = ZERO;
                    for f in &stack[base..] {
                        y += recip(f.z);
                    }
                    let z = recip(y);
                    for f in &stack[base..] {
                        let ratio = z * recip(f.z);
                        let scale = ratio * ratio;
                        for dp in &mut d[f.lo..f.hi] {
                            *dp *= scale;
                        }
                    }
                    let lo = stack[base].lo;
                    let hi = stack[stack.len() - 1].hi;
                    stack.truncate(base);
                    stack.push(Frame { z, lo, hi });
                }
            }
        }
        stack[0].z
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
