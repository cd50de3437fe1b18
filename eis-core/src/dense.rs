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

/// a·bₖ for four vectors bₖ at once (each at least as long as a): one pass over a shared by all four,
/// with two accumulators per product. Where one product's loads of a and b bound a single [`dot`], this
/// loads a once for four, which about halves the work of the many products of one column with the
/// others that a Gram matrix needs.
#[inline]
pub(crate) fn dot4(a: &[f64], b: [&[f64]; 4]) -> [f64; 4] {
    let n = a.len();
    let b = [&b[0][..n], &b[1][..n], &b[2][..n], &b[3][..n]];
    let mut acc = [[0.0f64; 2]; 4];
    let rows = a
        .chunks_exact(2)
        .zip(b[0].chunks_exact(2))
        .zip(b[1].chunks_exact(2))
        .zip(b[2].chunks_exact(2).zip(b[3].chunks_exact(2)));
    for (((x, b0), b1), (b2, b3)) in rows {
        for l in 0..2 {
            acc[0][l] += x[l] * b0[l];
            acc[1][l] += x[l] * b1[l];
            acc[2][l] += x[l] * b2[l];
            acc[3][l] += x[l] * b3[l];
        }
    }
    let mut out = [0.0; 4];
    for (o, (acc, b)) in out.iter_mut().zip(acc.iter().zip(&b)) {
        *o = acc[0] + acc[1];
        if n % 2 == 1 {
            *o += a[n - 1] * b[n - 1];
        }
    }
    out
}
