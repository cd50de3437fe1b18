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
use crate::dense::moderate;
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
    /// One impedance row per stack slot above the bottom one, `(depth − 1) × n_freq`; the bottom slot
    /// is the caller's output row.
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

/// 1/z: z̄/|z|² when |z|² is a normal number below 1e300 (impedances from far below µΩ to far beyond
/// TΩ; one division), Smith's algorithm otherwise. The choice is made for each value on its own, so a
/// value's reciprocal never depends on its neighbours in a row.
#[inline]
fn recip(z: Complex64) -> Complex64 {
    let n2 = z.re * z.re + z.im * z.im;
    if moderate(n2) {
        let s = 1.0 / n2;
        Complex64::new(z.re * s, -z.im * s)
    } else {
        recip_smith(z)
    }
}

/// Two impedances in parallel: Z = z₀z₁/(z₀ + z₁) and the factors ∂Z/∂z₀ = (z₁/(z₀ + z₁))² and
/// ∂Z/∂z₁ = (z₀/(z₀ + z₁))², with a single division. Used when |z₀|², |z₁|² and |z₀ + z₁|² are all
/// moderate: then every quotient z/(z₀ + z₁) lies between 1e-304 and 1e304, and Z only overflows where
/// the exact value does. Otherwise the admittance form with Smith's reciprocals, Z = 1/(1/z₀ + 1/z₁)
/// and (Z/zᵢ)².
#[inline(always)]
fn pair(z0: Complex64, z1: Complex64) -> (Complex64, Complex64, Complex64) {
    let sum = z0 + z1;
    let n = sum.re * sum.re + sum.im * sum.im;
    let (n0, n1) = (z0.re * z0.re + z0.im * z0.im, z1.re * z1.re + z1.im * z1.im);
    // One range check on the smallest and the largest of the three (a NaN may pass; it gives NaN
    // either way).
    let (lo, hi) = (min(min(n0, n1), n), max(max(n0, n1), n));
    if lo >= f64::MIN_POSITIVE && hi < 1e300 {
        let s = 1.0 / n;
        let inv = Complex64::new(sum.re * s, -sum.im * s);
        let (u0, u1) = (z1 * inv, z0 * inv);
        (z0 * u0, u0 * u0, u1 * u1)
    } else {
        let (y0, y1) = (recip(z0), recip(z1));
        let zp = recip(y0 + y1);
        let (r0, r1) = (zp * y0, zp * y1);
        (zp, r0 * r0, r1 * r1)
    }
}

/// The smaller of two values, in one machine instruction (no NaN rule).
#[inline(always)]
fn min(a: f64, b: f64) -> f64 {
    if a < b { a } else { b }
}

/// The larger of two values, in one machine instruction (no NaN rule).
#[inline(always)]
fn max(a: f64, b: f64) -> f64 {
    if a > b { a } else { b }
}

/// The arguments of [`Plan::eval`], handed to its body as one value.
struct Rows<'a> {
    params: &'a [f64],
    grid: &'a Grid,
    z: &'a mut [Complex64],
    jac: Option<&'a mut [Complex64]>,
    ws: &'a mut Workspace,
}

/// The bottom row of a combination of `count` stack slots starting at `base`, and the rows of the
/// other `count − 1` slots, contiguous. Slot 0 is the output row `z`; slot k ≥ 1 is row k − 1 of
/// `slots`.
#[inline(always)]
fn frame<'a>(
    z: &'a mut [Complex64],
    slots: &'a mut [Complex64],
    base: usize,
    count: usize,
    nf: usize,
) -> (&'a mut [Complex64], &'a mut [Complex64]) {
    if base == 0 {
        (z, &mut slots[..(count - 1) * nf])
    } else {
        slots[(base - 1) * nf..(base - 1 + count) * nf].split_at_mut(nf)
    }
}

/// Multiplies every row of `d` (rows of `scale`'s length) by `scale`, value by value.
#[inline(always)]
fn scale_rows(d: &mut [Complex64], scale: &[Complex64]) {
    for dp in d.chunks_exact_mut(scale.len()) {
        for (a, s) in dp.iter_mut().zip(scale) {
            *a *= *s;
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
        // Compiled for the widest vectors the processor has (the loops below are elementwise, so the
        // results are the same bit for bit on every instruction set).
        let rows = Rows {
            params,
            grid,
            z,
            jac,
            ws,
        };
        crate::dense::arch().dispatch(
            #[inline(always)]
            || self.eval_rows(rows),
        )
    }

    /// The body of [`Plan::eval`].
    #[inline(always)]
    fn eval_rows(&self, rows: Rows<'_>) {
        let Rows {
            params,
            grid,
            z,
            jac,
            ws,
        } = rows;
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
        slots.resize(self.depth.saturating_sub(1) * nf, ZERO);
        row.resize(nf, ZERO);
        stack.clear();
        for op in &self.ops {
            match *op {
                Op::Element { kind, first } => {
                    let hi = first + kind.params.len();
                    let slot = stack.len();
                    let out = match slot {
                        0 => &mut *z,
                        _ => &mut slots[(slot - 1) * nf..slot * nf],
                    };
                    (kind.impedance)(&params[first..hi], grid, out, &mut d[first * nf..hi * nf]);
                    stack.push((first, hi));
                }
                Op::Series { count } => {
                    let base = stack.len() - count;
                    let (head, rest) = frame(z, slots, base, count, nf);
                    // Two children per pass, added in the same order as one at a time.
                    let mut children = rest.chunks_exact(nf);
                    while let Some(a) = children.next() {
                        match children.next() {
                            Some(b) => {
                                for ((h, x), y) in head.iter_mut().zip(a).zip(b) {
                                    *h = *h + *x + *y;
                                }
                            }
                            None => {
                                for (h, x) in head.iter_mut().zip(a) {
                                    *h += *x;
                                }
                            }
                        }
                    }
                    let range = (stack[base].0, stack[stack.len() - 1].1);
                    stack.truncate(base);
                    stack.push(range);
                }
                Op::Parallel { count } => {
                    let base = stack.len() - count;
                    let (head, rest) = frame(z, slots, base, count, nf);
                    // One pass: the children's admittances Yᵢ, Z = 1/ΣYᵢ into the bottom row and,
                    // for the derivatives, the factors (Z·Yᵢ)² — child 0's into `row`, the others'
                    // over their own impedance rows.
                    if count == 2 {
                        let rest = &mut rest[..nf];
                        if want_d {
                            for ((a, b), s0) in head.iter_mut().zip(rest.iter_mut()).zip(&mut *row)
                            {
                                let (zp, f0, f1) = pair(*a, *b);
                                *a = zp;
                                *s0 = f0;
                                *b = f1;
                            }
                        } else {
                            for (a, b) in head.iter_mut().zip(rest.iter()) {
                                *a = pair(*a, *b).0;
                            }
                        }
                    } else {
                        for i in 0..nf {
                            let mut sum = recip(head[i]);
                            let y0 = sum;
                            for k in 1..count {
                                let y = recip(rest[(k - 1) * nf + i]);
                                rest[(k - 1) * nf + i] = y;
                                sum += y;
                            }
                            let zp = recip(sum);
                            head[i] = zp;
                            if want_d {
                                let r0 = zp * y0;
                                row[i] = r0 * r0;
                                for k in 1..count {
                                    let r = zp * rest[(k - 1) * nf + i];
                                    rest[(k - 1) * nf + i] = r * r;
                                }
                            }
                        }
                    }
                    if want_d {
                        // ∂Z/∂p = (Z·Yᵢ)²·∂Zᵢ/∂p for p in child i.
                        for (k, &(lo, hi)) in stack[base..].iter().enumerate() {
                            let scale = match k {
                                0 => &row[..],
                                _ => &rest[(k - 1) * nf..k * nf],
                            };
                            scale_rows(&mut d[lo * nf..hi * nf], scale);
                        }
                    }
                    let range = (stack[base].0, stack[stack.len() - 1].1);
                    stack.truncate(base);
                    stack.push(range);
                }
            }
        }
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

    /// Both ways of inverting agree where both are safe, and values whose |z|² would overflow or
    /// underflow are still inverted to full precision (1/z checked by z·(1/z) = 1).
    #[test]
    fn values_invert_safely_at_any_magnitude() {
        let typical: Vec<Complex64> = (0..9)
            .map(|k| Complex64::new(1.5 * k as f64 - 4.0, 0.3 + k as f64))
            .collect();
        for z in &typical {
            let y = recip(*z);
            assert!((y - recip_smith(*z)).norm() <= 1e-15 * y.norm());
        }
        for extreme in [1e170, 1e-170, 1e300, 1e-300] {
            for z in typical.iter().map(|z| z * extreme) {
                let y = recip(z);
                let one = z * y;
                assert!((one - 1.0).norm() < 1e-15, "{extreme}: {z} * {y} = {one}");
            }
        }
    }

    /// The single-division form of two impedances in parallel agrees with the admittance form to
    /// round-off where both apply, and at magnitudes where |z|² would overflow or underflow the
    /// fallback still gives Z·(1/z₀ + 1/z₁) = 1 and finite factors.
    #[test]
    fn pairs_combine_safely_at_any_magnitude() {
        let values: Vec<Complex64> = (0..9)
            .map(|k| Complex64::new(0.5 + 1.5 * k as f64, 0.3 - 0.7 * k as f64))
            .collect();
        for z0 in &values {
            for z1 in &values {
                let (zp, f0, f1) = pair(*z0, *z1);
                let y = recip_smith(*z0) + recip_smith(*z1);
                let want = recip_smith(y);
                assert!((zp - want).norm() <= 4e-16 * want.norm(), "{z0} | {z1}");
                for (f, zi) in [(f0, z0), (f1, z1)] {
                    let r = want * recip_smith(*zi);
                    assert!((f - r * r).norm() <= 1e-15 * f.norm(), "{z0} | {z1}");
                }
            }
        }
        for (a, b) in [
            (1e170, 1.0),
            (1e-170, 1.0),
            (1e300, 1e300),
            (1e-300, 1e-300),
        ] {
            for z0 in values.iter().map(|z| z * a) {
                for z1 in values.iter().map(|z| z * b) {
                    let (zp, f0, f1) = pair(z0, z1);
                    let one = zp * (recip_smith(z0) + recip_smith(z1));
                    assert!((one - 1.0).norm() < 1e-15, "{z0} | {z1}: {zp}");
                    assert!(f0.is_finite() && f1.is_finite(), "{z0} | {z1}");
                }
            }
        }
    }

    /// Evaluating a circuit over a whole grid gives, bit for bit, what one-point grids give, Jacobian
    /// included: no combination of rows may depend on neighbouring frequencies, even where some values
    /// of a row take the overflow-safe route and others do not. The dispatched build (widest vectors)
    /// and the baseline build of the same body agree bit for bit too.
    #[test]
    fn grid_evaluation_is_pointwise() {
        use crate::circuit::parse;
        let cases: &[(&str, &[f64])] = &[
            (
                "L0 + R0 + Rf|Qf + Rct|Qdl",
                &[1e-6, 0.05, 0.02, 1e-3, 0.85, 0.1, 0.05, 0.9],
            ),
            (
                "R1|(R2 + C2|(R3 + G3))|Q4",
                &[50.0, 5.0, 1e-6, 2.0, 8.0, 1e-3, 1e-5, 0.7],
            ),
            // |Z_C|² is moderate at low frequencies and underflows above 1e14 rad/s in the same row.
            ("R1|C1 + L2", &[1e-140, 1e140, 1.0]),
        ];
        let omegas: Vec<f64> = (0..=60)
            .map(|k| 10f64.powf(-10.0 + 0.5 * k as f64))
            .collect();
        for (model, p) in cases {
            let plan = Plan::compile(&parse(model).unwrap());
            let (nf, np) = (omegas.len(), p.len());
            let mut z = vec![ZERO; nf];
            let mut jac = vec![ZERO; nf * np];
            let mut ws = plan.workspace();
            plan.eval(p, &Grid::new(&omegas), &mut z, Some(&mut jac), &mut ws);
            // The same body compiled for the baseline processor (no dispatch) gives the same bits as
            // the dispatched one: the vectorised loops are elementwise.
            let (mut z_base, mut jac_base) = (vec![ZERO; nf], vec![ZERO; nf * np]);
            plan.eval_rows(Rows {
                params: p,
                grid: &Grid::new(&omegas),
                z: &mut z_base,
                jac: Some(&mut jac_base),
                ws: &mut ws,
            });
            assert_eq!(z, z_base, "{model}: baseline build");
            assert_eq!(jac, jac_base, "{model}: baseline build");
            for (i, &w) in omegas.iter().enumerate() {
                let (mut zi, mut ji) = ([ZERO], vec![ZERO; np]);
                plan.eval(p, &Grid::new(&[w]), &mut zi, Some(&mut ji), &mut ws);
                assert_eq!(z[i], zi[0], "{model} at {w}");
                for k in 0..np {
                    assert_eq!(jac[k * nf + i], ji[k], "{model} d{k} at {w}");
                }
            }
        }
    }
}
