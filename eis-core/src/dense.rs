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

/// Whether |z|² = `n2` is a normal number below 1e300: then z̄/|z|² inverts z and √(|z|²) is its
/// modulus, both to full precision.
#[inline]
pub(crate) fn moderate(n2: f64) -> bool {
    (f64::MIN_POSITIVE..1e300).contains(&n2)
}

/// |z|: the square root of re² + im² where that sum is [`moderate`] (then it is within an ulp or two
/// of the exact modulus), `hypot` otherwise (squares that would overflow or underflow). The library's
/// hypot is several times dearer, and the fit takes a few hundred moduli per spectrum.
#[inline]
pub(crate) fn modulus(z: num_complex::Complex64) -> f64 {
    let n2 = z.re * z.re + z.im * z.im;
    if moderate(n2) {
        n2.sqrt()
    } else {
        z.re.hypot(z.im)
    }
}

/// outᵢ = (wᵢ·s)·aᵢ over `out` (w and a at least as long). Kept apart so that the slices arrive as
/// separate arguments, which the compiler knows not to overlap and vectorises.
#[inline(never)]
pub(crate) fn scaled_product(out: &mut [f64], w: &[f64], a: &[f64], s: f64) {
    let (w, a) = (&w[..out.len()], &a[..out.len()]);
    for ((o, w), a) in out.iter_mut().zip(w).zip(a) {
        *o = (w * s) * a;
    }
}

/// The instruction set [`pulp`] found on this processor, detected once.
pub(crate) fn arch() -> pulp::Arch {
    static ARCH: std::sync::OnceLock<pulp::Arch> = std::sync::OnceLock::new();
    *ARCH.get_or_init(pulp::Arch::new)
}

/// a·bₖ for up to four vectors bₖ at once (each at least as long as a) into `out[..b.len()]`, in the
/// widest vectors of `simd` (four lanes with fused multiply–add where the processor has them, found at
/// run time by [`pulp::Arch`]): one pass over a shared by all the products. A Gram matrix is many
/// products of one column with the others, and these passes are most of its cost. The sums are
/// grouped by lane, so the last bits differ from [`dot`]'s and from one instruction set to another.
#[inline(always)]
pub(crate) fn dots4<S: pulp::Simd>(simd: S, a: &[f64], b: &[&[f64]], out: &mut [f64]) {
    match *b {
        [] => {}
        [b0] => out[..1].copy_from_slice(&dots(simd, a, [b0])),
        [b0, b1] => out[..2].copy_from_slice(&dots(simd, a, [b0, b1])),
        [b0, b1, b2] => out[..3].copy_from_slice(&dots(simd, a, [b0, b1, b2])),
        [b0, b1, b2, b3] => out[..4].copy_from_slice(&dots(simd, a, [b0, b1, b2, b3])),
        _ => panic!("at most four products"),
    }
}

/// [`dots4`] for a fixed number of products: two accumulators per product, so that 2N independent
/// chains of fused multiply–adds hide their latency.
#[inline(always)]
fn dots<S: pulp::Simd, const N: usize>(simd: S, a: &[f64], b: [&[f64]; N]) -> [f64; N] {
    // No closures here (array::from_fn and the like): a closure is compiled for the baseline
    // processor, and the vector instructions inside it would become calls.
    let (head, tail) = S::as_simd_f64s(a);
    let mut heads: [&[S::f64s]; N] = [&[]; N];
    for (h, bc) in heads.iter_mut().zip(&b) {
        *h = &S::as_simd_f64s(&bc[..a.len()]).0[..head.len()];
    }
    let zero = simd.splat_f64s(0.0);
    let (mut even, mut odd) = ([zero; N], [zero; N]);
    let pairs = head.len() / 2;
    for i in 0..pairs {
        let (x0, x1) = (head[2 * i], head[2 * i + 1]);
        for c in 0..N {
            even[c] = simd.mul_add_e_f64s(x0, heads[c][2 * i], even[c]);
            odd[c] = simd.mul_add_e_f64s(x1, heads[c][2 * i + 1], odd[c]);
        }
    }
    if head.len() % 2 == 1 {
        let i = head.len() - 1;
        for c in 0..N {
            even[c] = simd.mul_add_e_f64s(head[i], heads[c][i], even[c]);
        }
    }
    let done = a.len() - tail.len();
    let mut out = [0.0; N];
    for c in 0..N {
        let mut s = simd.reduce_sum_f64s(simd.add_f64s(even[c], odd[c]));
        for (x, y) in tail.iter().zip(&b[c][done..]) {
            s += x * y;
        }
        out[c] = s;
    }
    out
}

/// y ← y + α·x over y (x at least as long), in the vectors of `simd`.
#[inline(always)]
pub(crate) fn axpy<S: pulp::Simd>(simd: S, alpha: f64, x: &[f64], y: &mut [f64]) {
    let x = &x[..y.len()];
    let (xh, xt) = S::as_simd_f64s(x);
    let (yh, yt) = S::as_mut_simd_f64s(y);
    let a = simd.splat_f64s(alpha);
    for (yi, xi) in yh.iter_mut().zip(xh) {
        *yi = simd.mul_add_e_f64s(a, *xi, *yi);
    }
    for (yi, xi) in yt.iter_mut().zip(xt) {
        *yi += alpha * xi;
    }
}

/// Arguments of [`exp_into`]'s polynomial: outside, e^x overflows, is subnormal or x is not a number,
/// and the library's `exp` is used.
const EXP_RANGE: std::ops::RangeInclusive<f64> = -708.0..=709.0;

/// e^x for x in [`EXP_RANGE`], branch-free so that a loop of it runs in vectors: x = k·ln 2 + r with
/// |r| ≤ ln 2 / 2 (Cody & Waite 1980, *Software Manual for the Elementary Functions*, ln 2 split in
/// two so that k·ln2_hi is exact), e^r by its Taylor series to r¹³/13! (truncation below 5e-18
/// relative) in Horner form with fused multiply–adds, times 2^k built in the exponent bits. Within
/// 2.3e-16 relative of the correctly rounded value (about one unit in the last place; checked in the
/// tests against the standard library over the whole range). Every operation is exactly rounded, so
/// the result is the same bit for bit on every instruction set.
#[inline(always)]
fn exp_kernel(x: f64) -> f64 {
    const LN2_HI: f64 = 6.931_471_803_691_238e-1;
    const LN2_LO: f64 = 1.908_214_929_270_587_7e-10;
    // Adding 1.5·2^52 rounds to an integer and leaves it in the low mantissa bits.
    const SHIFTER: f64 = 6_755_399_441_055_744.0;
    const INV_FACTORIALS: [f64; 13] = [
        1.0 / 479_001_600.0,
        1.0 / 39_916_800.0,
        1.0 / 3_628_800.0,
        1.0 / 362_880.0,
        1.0 / 40_320.0,
        1.0 / 5_040.0,
        1.0 / 720.0,
        1.0 / 120.0,
        1.0 / 24.0,
        1.0 / 6.0,
        0.5,
        1.0,
        1.0,
    ];
    let x = x.clamp(*EXP_RANGE.start(), *EXP_RANGE.end());
    let shifted = x.mul_add(std::f64::consts::LOG2_E, SHIFTER);
    let k = shifted - SHIFTER;
    let r = (-k).mul_add(LN2_LO, (-k).mul_add(LN2_HI, x));
    let mut p: f64 = 1.0 / 6_227_020_800.0;
    for c in INV_FACTORIALS {
        p = p.mul_add(r, c);
    }
    // The low bits of `shifted` hold k in two's complement; (k + 1023) << 52 is 2^k.
    p * f64::from_bits(shifted.to_bits().wrapping_add(1023) << 52)
}

/// `out[i] = e^{x[i]}` for every i, in the widest vectors the processor has (found at run time by
/// [`pulp::Arch`]); the same values as [`f64::exp`] to about one unit in the last place.
///
/// # Panics
///
/// If the lengths differ.
pub(crate) fn exp_into(x: &[f64], out: &mut [f64]) {
    assert_eq!(x.len(), out.len(), "exp_into lengths");
    arch().dispatch(
        #[inline(always)]
        || {
            for (o, &v) in out.iter_mut().zip(x) {
                *o = exp_kernel(v);
            }
        },
    );
    for (o, &v) in out.iter_mut().zip(x) {
        if !EXP_RANGE.contains(&v) {
            *o = v.exp();
        }
    }
}

/// Arguments of [`sin_cos_into`]'s polynomial: beyond, or for an argument that is not a number, the
/// library's `sin_cos` is used.
const SIN_COS_LIMIT: f64 = 1e5;

/// (sin x, cos x) for |x| ≤ [`SIN_COS_LIMIT`], branch-free so that a loop of it runs in vectors:
/// x = k·π/2 + r with |r| ≤ π/4, π/2 split in three doubles (P1 + P2 + P3 to about 1e-49; Cody &
/// Waite 1980, *Software Manual for the Elementary Functions*) and each product taken in a fused
/// multiply–add, then sin r and cos r by their Taylor series to r¹⁷/17! and r¹⁸/18! (truncation below
/// 1e-19) in Horner form, and the quadrant k mod 4 chosen and signed through bit masks. Within about
/// 2.3e-16 of the library's values in absolute terms (checked in the tests); the same bit for bit on
/// every instruction set.
#[inline(always)]
fn sin_cos_kernel(x: f64) -> (f64, f64) {
    const P1: f64 = std::f64::consts::FRAC_PI_2;
    const P2: f64 = 6.123_233_995_736_766e-17;
    const P3: f64 = -1.497_384_904_859_169_8e-33;
    const SHIFTER: f64 = 6_755_399_441_055_744.0;
    // 1/(2k + 1)! and 1/(2k)!, alternating in sign, highest power first.
    const SIN: [f64; 9] = [
        1.0 / 355_687_428_096_000.0,
        -1.0 / 1_307_674_368_000.0,
        1.0 / 6_227_020_800.0,
        -1.0 / 39_916_800.0,
        1.0 / 362_880.0,
        -1.0 / 5_040.0,
        1.0 / 120.0,
        -1.0 / 6.0,
        1.0,
    ];
    const COS: [f64; 10] = [
        -1.0 / 6_402_373_705_728_000.0,
        1.0 / 20_922_789_888_000.0,
        -1.0 / 87_178_291_200.0,
        1.0 / 479_001_600.0,
        -1.0 / 3_628_800.0,
        1.0 / 40_320.0,
        -1.0 / 720.0,
        1.0 / 24.0,
        -0.5,
        1.0,
    ];
    let x = x.clamp(-SIN_COS_LIMIT, SIN_COS_LIMIT);
    let shifted = x.mul_add(std::f64::consts::FRAC_2_PI, SHIFTER);
    let k = shifted - SHIFTER;
    let r = (-k).mul_add(P3, (-k).mul_add(P2, (-k).mul_add(P1, x)));
    let u = r * r;
    let mut s: f64 = 0.0;
    for c in SIN {
        s = s.mul_add(u, c);
    }
    let s = s * r;
    let mut c: f64 = 0.0;
    for v in COS {
        c = c.mul_add(u, v);
    }
    // The low bits of `shifted` hold k in two's complement: sin x = (s, c, −s, −c) and cos x =
    // (c, −s, −c, s) for k mod 4 = 0, 1, 2, 3.
    let q = shifted.to_bits();
    let odd = 0u64.wrapping_sub(q & 1);
    let (s, c) = (s.to_bits(), c.to_bits());
    let sin = (c & odd) | (s & !odd);
    let cos = (s & odd) | (c & !odd);
    (
        f64::from_bits(sin ^ ((q & 2) << 62)),
        f64::from_bits(cos ^ ((q.wrapping_add(1) & 2) << 62)),
    )
}

/// `sin[i] = sin x[i]` and `cos[i] = cos x[i]` for every i, in the widest vectors the processor has;
/// the library's values to about 2.3e-16 absolute.
///
/// # Panics
///
/// If the lengths differ.
pub(crate) fn sin_cos_into(x: &[f64], sin: &mut [f64], cos: &mut [f64]) {
    assert!(
        x.len() == sin.len() && x.len() == cos.len(),
        "sin_cos_into lengths"
    );
    arch().dispatch(
        #[inline(always)]
        || {
            for ((s, c), &v) in sin.iter_mut().zip(cos.iter_mut()).zip(x) {
                (*s, *c) = sin_cos_kernel(v);
            }
        },
    );
    for ((s, c), &v) in sin.iter_mut().zip(cos.iter_mut()).zip(x) {
        if v.is_nan() || v.abs() > SIN_COS_LIMIT {
            (*s, *c) = v.sin_cos();
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use pulp::WithSimd;

    /// The vector kernels against plain arithmetic, for every count of products and every length
    /// (tails of each vector width included), through the instruction set this machine offers and
    /// through the scalar fallback of machines without it. The values are small integers and
    /// quarters, so every sum is exact whatever the order: equality is the right test.
    #[test]
    fn kernels_match_plain_arithmetic_on_every_instruction_set() {
        struct Check;
        impl WithSimd for Check {
            type Output = ();
            fn with_simd<S: pulp::Simd>(self, simd: S) {
                for len in 0..12 {
                    let a: Vec<f64> = (0..len).map(|i| 1.5 - 0.25 * i as f64).collect();
                    let b: Vec<Vec<f64>> = (0..4)
                        .map(|k| (0..len + k).map(|i| (i * (k + 2)) as f64 - 3.0).collect())
                        .collect();
                    for count in 0..=4 {
                        let refs: Vec<&[f64]> = b[..count].iter().map(|v| v.as_slice()).collect();
                        let mut out = [f64::NAN; 4];
                        dots4(simd, &a, &refs, &mut out);
                        for (k, got) in out[..count].iter().enumerate() {
                            let want: f64 = a.iter().zip(&b[k]).map(|(x, y)| x * y).sum();
                            assert_eq!(*got, want, "len {len}, product {k} of {count}");
                        }
                        assert!(out[count..].iter().all(|v| v.is_nan()), "wrote past count");
                    }
                    let mut y = a.clone();
                    let want: Vec<f64> = y.iter().zip(&b[3]).map(|(y, x)| y + 0.25 * x).collect();
                    axpy(simd, 0.25, &b[3], &mut y);
                    assert_eq!(y, want, "axpy, len {len}");
                }
            }
        }
        arch().dispatch(Check);
        Check.with_simd(pulp::Scalar);
    }

    /// The fast modulus agrees with hypot to two ulps at ordinary magnitudes and keeps full range.
    #[test]
    fn modulus_matches_hypot_at_every_magnitude() {
        for scale in [1e-300, 1e-160, 1e-3, 1.0, 7e4, 1e160, 1e300] {
            for (re, im) in [(3.0, 4.0), (-1.0, 1e-9), (0.0, -2.5), (1.2345, -6.789)] {
                let z = num_complex::Complex64::new(re * scale, im * scale);
                let want = z.re.hypot(z.im);
                assert!((modulus(z) - want).abs() <= 4.5e-16 * want, "{z}");
            }
        }
        assert_eq!(modulus(num_complex::Complex64::new(0.0, 0.0)), 0.0);
        assert!(modulus(num_complex::Complex64::new(f64::NAN, 1.0)).is_nan());
    }

    #[test]
    fn scaled_product_scales_each_entry() {
        let mut out = vec![0.0; 5];
        scaled_product(
            &mut out,
            &[1.0, 2.0, 3.0, 4.0, 5.0, 6.0],
            &[1.0, -1.0, 0.5, 2.0, 0.0, 9.0],
            2.0,
        );
        assert_eq!(out, [2.0, -4.0, 3.0, 16.0, 0.0]);
    }

    /// The vector exponential against the standard library's over the whole range of f64 arguments,
    /// with its edges: overflow, the subnormal range, zero, infinities and NaN. The standard
    /// library's exp is within one unit in the last place of e^x (common practice for libm), so
    /// agreement to 4.5e-16 relative bounds ours near one unit too.
    #[test]
    fn exp_into_matches_the_standard_library() {
        let n = 200_001;
        let x: Vec<f64> = (0..n)
            .map(|i| -760.0 + 1480.0 * i as f64 / (n - 1) as f64)
            .chain([
                0.0, -0.0, 1e-300, -1e-300, 709.78, 709.79, -745.2, -708.0, 709.0,
            ])
            .chain([
                f64::INFINITY,
                f64::NEG_INFINITY,
                f64::NAN,
                f64::MAX,
                f64::MIN,
            ])
            .collect();
        let mut out = vec![0.0; x.len()];
        exp_into(&x, &mut out);
        for (&v, &e) in x.iter().zip(&out) {
            let want = v.exp();
            if want.is_nan() {
                assert!(e.is_nan(), "exp({v}) = {e}");
            } else if want == 0.0 || want.is_infinite() {
                assert_eq!(e, want, "exp({v})");
            } else {
                assert!(
                    (e - want).abs() <= 4.5e-16 * want,
                    "exp({v}) = {e}, std {want}"
                );
            }
        }
    }

    /// The vector sine and cosine against the standard library's (within one unit in the last place,
    /// common practice for libm) over ±1e5 and beyond, where the library takes over, with zeros,
    /// multiples of π/2 (where the reduction matters most), infinities and NaN.
    #[test]
    fn sin_cos_into_matches_the_standard_library() {
        let n = 400_001;
        let x: Vec<f64> = (0..n)
            .map(|i| -1.2e5 + 2.4e5 * i as f64 / (n - 1) as f64)
            .chain((0..2000).map(|i| i as f64 * 0.0025 - 2.5))
            .chain((-200..200).map(|k| k as f64 * std::f64::consts::FRAC_PI_2))
            .chain((-200..200).map(|k| k as f64 * 1234.5 * std::f64::consts::FRAC_PI_2))
            .chain([0.0, -0.0, 1e-300, 5e-324, 1e5, -1e5, 1e300])
            .chain([f64::INFINITY, f64::NEG_INFINITY, f64::NAN])
            .collect();
        let (mut s, mut c) = (vec![0.0; x.len()], vec![0.0; x.len()]);
        sin_cos_into(&x, &mut s, &mut c);
        for ((&v, &s), &c) in x.iter().zip(&s).zip(&c) {
            let (ws, wc) = v.sin_cos();
            if ws.is_nan() {
                assert!(s.is_nan() && c.is_nan(), "sin_cos({v}) = ({s}, {c})");
                continue;
            }
            assert!((s - ws).abs() <= 2.3e-16, "sin({v}) = {s}, std {ws}");
            assert!((c - wc).abs() <= 2.3e-16, "cos({v}) = {c}, std {wc}");
        }
        // Small arguments keep full relative precision: sin x = x to round-off.
        let tiny = [1e-300, 5e-324, -1e-20, 1e-8];
        let (mut s, mut c) = ([0.0; 4], [0.0; 4]);
        sin_cos_into(&tiny, &mut s, &mut c);
        for (&v, &s) in tiny.iter().zip(&s) {
            assert!((s - v.sin()).abs() <= 1.2e-16 * v.abs(), "sin({v}) = {s}");
        }
        assert_eq!(c, [1.0; 4]);
    }
}
