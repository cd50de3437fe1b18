//! The workspace's one tolerance check for tests: [`close`] and the [`assert_close!`](crate::assert_close)
//! macro built on it. Not part of the supported API.

use num_complex::Complex64;

/// Whether `got` agrees with `want` to relative tolerance `rel`: |got − want| ≤ rel·|want| (real or
/// complex; with `want` = 0 only an exact zero passes).
pub fn close(got: impl Into<Complex64>, want: impl Into<Complex64>, rel: f64) -> bool {
    let (g, w) = (got.into(), want.into());
    (g - w).norm() <= rel * w.norm()
}

/// The relative error |got − want|/|want| (infinite for a non-zero `got` against `want` = 0).
pub fn relative_error(got: impl Into<Complex64>, want: impl Into<Complex64>) -> f64 {
    let (g, w) = (got.into(), want.into());
    let d = (g - w).norm();
    if d == 0.0 { 0.0 } else { d / w.norm() }
}

/// Least-squares slope of `y` against `x` (ordinary least squares through the means).
pub fn slope(x: &[f64], y: &[f64]) -> f64 {
    let n = x.len() as f64;
    let (mx, my) = (x.iter().sum::<f64>() / n, y.iter().sum::<f64>() / n);
    let sxy: f64 = x.iter().zip(y).map(|(a, b)| (a - mx) * (b - my)).sum();
    let sxx: f64 = x.iter().map(|a| (a - mx).powi(2)).sum();
    sxy / sxx
}

/// The numbers of a JSON array of a reference fixture (panics with the offending entry otherwise: for
/// tests only).
pub fn floats(v: &serde_json::Value) -> Vec<f64> {
    v.as_array()
        .unwrap_or_else(|| panic!("not an array: {v}"))
        .iter()
        .map(|x| x.as_f64().unwrap_or_else(|| panic!("not a number: {x}")))
        .collect()
}

/// Asserts that `got` agrees with `want` (real or complex) to relative tolerance `rel`, naming both and
/// the relative error when it does not; an optional message (format arguments) says what is checked.
///
/// ```
/// eis_core::assert_close!(1.0 + 1e-12, 1.0, 1e-9);
/// eis_core::assert_close!(2.0, 2.0, 0.0, "exact {}", "value");
/// ```
#[macro_export]
macro_rules! assert_close {
    ($got:expr, $want:expr, $rel:expr $(,)?) => {
        $crate::assert_close!($got, $want, $rel, "values differ")
    };
    ($got:expr, $want:expr, $rel:expr, $($what:tt)+) => {{
        let (got, want, rel) = ($got, $want, $rel);
        assert!(
            $crate::testing::close(got, want, rel),
            "{}: got {}, want {}, relative error {:e} > {:e}",
            format_args!($($what)+),
            got,
            want,
            $crate::testing::relative_error(got, want),
            rel
        );
    }};
}
