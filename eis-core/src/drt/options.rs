//! The settings of a DRT: how λ is chosen, which derivative is penalised, which part is fitted, how
//! points are weighted, and the [`DrtOptions`] value that carries them.

use super::{DrtError, DrtErrorKind};
use std::fmt;

/// `Display` and `Serialize` of a choice by its short name (its `name()`, as in the text output; a
/// fixed λ's value is reported beside its name).
macro_rules! by_name {
    ($t:ty) => {
        impl fmt::Display for $t {
            fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str(self.name())
            }
        }

        impl serde::Serialize for $t {
            fn serialize<S: serde::Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
                serializer.serialize_str(self.name())
            }
        }
    };
}

/// How λ is chosen.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum LambdaMethod {
    /// Generalised cross-validation (the default).
    Gcv,
    /// The corner of the L-curve.
    LCurve,
    /// This value, in the scale-free units described in the [module docs](super).
    Fixed(f64),
}

impl LambdaMethod {
    /// Short name: `gcv`, `lcurve` or `fixed`.
    pub fn name(&self) -> &'static str {
        match self {
            LambdaMethod::Gcv => "gcv",
            LambdaMethod::LCurve => "lcurve",
            LambdaMethod::Fixed(_) => "fixed",
        }
    }
}

by_name!(LambdaMethod);

/// Which derivative of γ the penalty measures.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Penalty {
    /// ∫(dγ/d ln τ)² d ln τ: penalises slope, favours flat γ.
    First,
    /// ∫(d²γ/d ln τ²)² d ln τ: penalises curvature, favours smooth peaks (the default).
    Second,
}

impl Penalty {
    /// The derivative order, 1 or 2.
    pub fn order(&self) -> u8 {
        match self {
            Penalty::First => 1,
            Penalty::Second => 2,
        }
    }
}

/// Which part of the impedance is fitted.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Part {
    /// Real and imaginary parts together (the default).
    Both,
    /// The real part only; L, if asked for, is estimated afterwards from the imaginary residual.
    Real,
    /// The imaginary part only; R∞ is estimated afterwards from the real residual (its weighted mean).
    Imaginary,
}

impl Part {
    /// Short name: `both`, `real` or `imag`.
    pub fn name(&self) -> &'static str {
        match self {
            Part::Both => "both",
            Part::Real => "real",
            Part::Imaginary => "imag",
        }
    }
}

by_name!(Part);

/// How the residual of each point is scaled.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Weighting {
    /// Divided by |Z_i|: every point counts by its relative error (the default).
    Modulus,
    /// Divided by max|Z| for all points: large impedances dominate.
    Unit,
}

/// Settings of a DRT computation: a small `Copy` value with `with_*` setters. Each setter documents
/// its default.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DrtOptions {
    pub(super) lambda: LambdaMethod,
    pub(super) penalty: Penalty,
    pub(super) part: Part,
    pub(super) inductance: bool,
    pub(super) capacitance: bool,
    pub(super) weighting: Weighting,
    pub(super) rbf_width: f64,
    pub(super) grid_per_decade: usize,
    pub(super) lambda_range: (f64, f64),
    pub(super) scan_per_decade: usize,
    pub(super) peak_threshold: f64,
}

impl Default for DrtOptions {
    fn default() -> Self {
        DrtOptions {
            lambda: LambdaMethod::Gcv,
            penalty: Penalty::Second,
            part: Part::Both,
            inductance: false,
            capacitance: true,
            weighting: Weighting::Modulus,
            rbf_width: 2.0,
            grid_per_decade: 40,
            lambda_range: (1e-9, 1e1),
            scan_per_decade: 3,
            peak_threshold: super::DEFAULT_PEAK_THRESHOLD,
        }
    }
}

impl DrtOptions {
    /// How λ is chosen. Default: [`LambdaMethod::Gcv`].
    pub fn with_lambda(mut self, method: LambdaMethod) -> Self {
        self.lambda = method;
        self
    }

    /// Which derivative is penalised. Default: [`Penalty::Second`].
    pub fn with_penalty(mut self, penalty: Penalty) -> Self {
        self.penalty = penalty;
        self
    }

    /// Which part is fitted. Default: [`Part::Both`].
    pub fn with_part(mut self, part: Part) -> Self {
        self.part = part;
        self
    }

    /// Whether a series inductance L ≥ 0 is part of the model. Default: false.
    pub fn with_inductance(mut self, inductance: bool) -> Self {
        self.inductance = inductance;
        self
    }

    /// Whether a series capacitance C > 0 is part of the model (its elastance 1/C ≥ 0 is an unknown
    /// beside R∞ and L, not penalised). Default: true. An open capacitive tail (−Z″ still rising at
    /// the lowest frequency, as a blocking or diffusion-limited electrode gives) is then taken up by C
    /// instead of piling γ against the end of the window; data without such a tail leave 1/C at 0.
    /// Fitting the real part alone cannot see a capacitance, and none is modelled then.
    pub fn with_capacitance(mut self, capacitance: bool) -> Self {
        self.capacitance = capacitance;
        self
    }

    /// How residuals are scaled. Default: [`Weighting::Modulus`].
    pub fn with_weighting(mut self, weighting: Weighting) -> Self {
        self.weighting = weighting;
        self
    }

    /// Full width at half maximum of each Gaussian basis function, as a multiple of the mean spacing of
    /// the centres in ln τ. Default: 2 (neighbouring functions overlap enough that a constant γ is
    /// represented without visible ripple). Must be positive.
    pub fn with_rbf_width(mut self, width: f64) -> Self {
        self.rbf_width = width;
        self
    }

    /// Points per decade of the output τ grid. Default: 40. At least 2.
    pub fn with_grid_per_decade(mut self, points: usize) -> Self {
        self.grid_per_decade = points;
        self
    }

    /// The interval searched by GCV and the L-curve, in scale-free units. Default: 1e-9 to 10.
    pub fn with_lambda_range(mut self, min: f64, max: f64) -> Self {
        self.lambda_range = (min, max);
        self
    }

    /// Scan points per decade of λ for GCV and the L-curve. Default: 3. At least 1.
    pub fn with_scan_per_decade(mut self, points: usize) -> Self {
        self.scan_per_decade = points;
        self
    }

    /// A local maximum of γ counts as a peak when its height, and its rise above the higher of the
    /// valleys that separate it from its neighbours, are both at least this fraction of the largest γ
    /// (the rule is in the [peaks module](super::peaks)). Default:
    /// [`DEFAULT_PEAK_THRESHOLD`](super::DEFAULT_PEAK_THRESHOLD). In [0, 1).
    pub fn with_peak_threshold(mut self, fraction: f64) -> Self {
        self.peak_threshold = fraction;
        self
    }

    /// How λ is chosen.
    pub fn lambda(&self) -> LambdaMethod {
        self.lambda
    }

    /// Which derivative is penalised.
    pub fn penalty(&self) -> Penalty {
        self.penalty
    }

    /// Which part is fitted.
    pub fn part(&self) -> Part {
        self.part
    }

    /// Whether a series inductance is modelled.
    pub fn inductance(&self) -> bool {
        self.inductance
    }

    /// Whether a series capacitance is modelled.
    pub fn capacitance(&self) -> bool {
        self.capacitance
    }

    pub(super) fn validate(&self) -> Result<(), DrtError> {
        let bad = |name, value, expected| {
            Err(DrtError::new(DrtErrorKind::BadOption {
                name,
                value,
                expected,
            }))
        };
        if let LambdaMethod::Fixed(l) = self.lambda {
            if !(l.is_finite() && l >= 0.0) {
                return bad("lambda", l, "a finite number ≥ 0");
            }
        }
        if !(self.rbf_width.is_finite() && self.rbf_width > 0.0) {
            return bad("rbf width", self.rbf_width, "a positive number");
        }
        if self.grid_per_decade < 2 || self.grid_per_decade > 10_000 {
            return bad(
                "grid points per decade",
                self.grid_per_decade as f64,
                "2 to 10000",
            );
        }
        let (lo, hi) = self.lambda_range;
        if !(lo.is_finite() && hi.is_finite() && lo > 0.0 && hi > lo) {
            return bad(
                "lambda range",
                if lo > 0.0 { hi } else { lo },
                "0 < min < max, finite",
            );
        }
        if self.scan_per_decade < 1 || self.scan_per_decade > 100 {
            return bad(
                "scan points per decade",
                self.scan_per_decade as f64,
                "1 to 100",
            );
        }
        if !(0.0..1.0).contains(&self.peak_threshold) {
            return bad(
                "peak threshold",
                self.peak_threshold,
                "a fraction in [0, 1)",
            );
        }
        Ok(())
    }
}
