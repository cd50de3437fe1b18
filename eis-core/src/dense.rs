//! Small dense kernels shared by the solvers.

/// Σ aᵢbᵢ over the common length, with four independent accumulators: the dependency chain of a plain
/// loop, not the arithmetic, bounds the speed of the short dot products the solvers make, and four
/// chains let the compiler vectorise.
#[inline]
pub(crate) fn dot(a: &[f64], b: &[f64]) -> f64 {
    let mut acc = [0.0f64; 4];
    let (ca, cb) = (a.chunks_exact(4), b.chunks_exact(4));
    let tail: f64 = ca
        .remainder()
        .iter()
        .zip(cb.remainder())
        .map(|(x, y)| x * y)
        .sum();
    for (x, y) in ca.zip(cb) {
        for j in 0..4 {
            acc[j] += x[j] * y[j];
        }
    }
    (acc[0] + acc[1]) + (acc[2] + acc[3]) + tail
}
