//! Small dense kernels shared by the solvers.

/// Σ aᵢbᵢ over the common length, with eight independent accumulators: the latency of the additions
/// of a plain loop, not the arithmetic, bounds the speed of the short dot products the solvers make;
/// eight chains let the compiler vectorise and keep the adders busy.
#[inline]
pub(crate) fn dot(a: &[f64], b: &[f64]) -> f64 {
    let mut acc = [0.0f64; 8];
    let (ca, cb) = (a.chunks_exact(8), b.chunks_exact(8));
    let tail: f64 = ca
        .remainder()
        .iter()
        .zip(cb.remainder())
        .map(|(x, y)| x * y)
        .sum();
    for (x, y) in ca.zip(cb) {
        for j in 0..8 {
            acc[j] += x[j] * y[j];
        }
    }
    ((acc[0] + acc[4]) + (acc[1] + acc[5])) + ((acc[2] + acc[6]) + (acc[3] + acc[7])) + tail
}
