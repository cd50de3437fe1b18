//! Identifiability across a campaign: the warnings every fit document carries, grouped by kind over
//! all fits ("R0 and Rf strongly correlated in 180 of 195 fits"), each with what would help. Read
//! from the typed parts of the documents (correlation matrices, relative errors, bound flags, arcs),
//! never from warning text.

use super::SpectrumResult;
use crate::number::format_si;
use crate::report::FitDocument;
use std::collections::BTreeMap;

/// |ρ| above which two parameters count as strongly correlated (as in the fit's own warnings).
const STRONG_CORRELATION: f64 = 0.98;

/// What is wrong, in how many fits.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub enum AdviceKind {
    /// Two parameters strongly correlated (|ρ| > 0.98).
    Correlated {
        /// The first parameter, in circuit order.
        a: String,
        /// The second.
        b: String,
        /// Median characteristic frequency (Hz) of the arc one of them closes, when the other is a
        /// series resistance: the sweep should reach well above it.
        arc_frequency_hz: Option<f64>,
    },
    /// A parameter with a relative standard error above 100 %.
    Undetermined {
        /// The parameter.
        parameter: String,
    },
    /// A parameter ended on a bound.
    AtBound {
        /// The parameter.
        parameter: String,
    },
}

/// One line of advice: a kind of identifiability problem and in how many of the fits it appears.
#[derive(Debug, Clone, PartialEq)]
pub struct Advice {
    /// The problem.
    pub kind: AdviceKind,
    /// Fits that show it.
    pub fits: usize,
    /// Fits in the campaign.
    pub of: usize,
}

impl std::fmt::Display for Advice {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let (fits, of) = (self.fits, self.of);
        match &self.kind {
            AdviceKind::Correlated {
                a,
                b,
                arc_frequency_hz,
            } => {
                write!(
                    f,
                    "{a} and {b} strongly correlated in {fits} of {of} fits: the data cannot tell them apart. What would help: "
                )?;
                if let Some(fc) = arc_frequency_hz {
                    write!(
                        f,
                        "extend the sweep above {}Hz (ten times the arc's characteristic frequency) so that the arc closes before the series resistance is read; ",
                        format_si(round_up_2(10.0 * fc))
                    )?;
                }
                write!(
                    f,
                    "share one of them along each cell's series (a joint fit) or fix it from an independent measurement; or a simpler model"
                )
            }
            AdviceKind::Undetermined { parameter } => write!(
                f,
                "{parameter} not determined (relative error above 100 %) in {fits} of {of} fits. What would help: measure where its element acts (a wider sweep), fix it, or a model without it"
            ),
            AdviceKind::AtBound { parameter } => write!(
                f,
                "{parameter} on a bound in {fits} of {of} fits. What would help: widen the bound where physics allows, or reconsider the model"
            ),
        }
    }
}

/// A problem found: its kind (0 correlated, 1 undetermined, 2 at a bound) and the parameter names.
type Problem = (u8, String, String);
/// When a problem was first met, in how many fits, and the arc frequencies met with it.
type Tally = (usize, usize, Vec<f64>);

/// `x` rounded up to two significant digits, for advice read by people.
fn round_up_2(x: f64) -> f64 {
    if !(x.is_finite() && x > 0.0) {
        return x;
    }
    let unit = 10f64.powf(x.log10().floor() - 1.0);
    let r = (x / unit).ceil() * unit;
    // Clean the last bits the multiplication leaves, so that the number prints short.
    format!("{r:.12e}").parse().unwrap_or(r)
}

/// The identifiability problems of the fits among `results`, most frequent first (then in the order
/// they were first met), each counted once per fit.
pub fn advice(results: &[SpectrumResult]) -> Vec<Advice> {
    let docs: Vec<&FitDocument> = results.iter().filter_map(|r| r.fit.as_ref()).collect();
    let mut found: BTreeMap<Problem, Tally> = BTreeMap::new();
    let mut order = 0;
    for d in &docs {
        let mut note = |key: (u8, String, String), fc: Option<f64>| {
            let e = found.entry(key).or_insert_with(|| {
                order += 1;
                (order, 0, Vec::new())
            });
            e.1 += 1;
            e.2.extend(fc.filter(|f| f.is_finite()));
        };
        let names = &d.correlation.parameters;
        for (i, row) in d.correlation.matrix.iter().enumerate() {
            for (j, rho) in row.iter().enumerate().skip(i + 1) {
                if rho.abs() > STRONG_CORRELATION {
                    let (Some(a), Some(b)) = (names.get(i), names.get(j)) else {
                        continue;
                    };
                    note((0, a.clone(), b.clone()), series_arc_frequency(d, a, b));
                }
            }
        }
        for p in &d.parameters {
            if p.relative_error.is_some_and(|r| r > 1.0) {
                note((1, p.name.clone(), String::new()), None);
            }
            if p.at_bound {
                note((2, p.name.clone(), String::new()), None);
            }
        }
    }
    let mut out: Vec<(usize, Advice)> = found
        .into_iter()
        .map(|((kind, a, b), (first, fits, mut fcs))| {
            fcs.sort_by(f64::total_cmp);
            let kind = match kind {
                0 => AdviceKind::Correlated {
                    a,
                    b,
                    arc_frequency_hz: fcs.get(fcs.len() / 2).copied(),
                },
                1 => AdviceKind::Undetermined { parameter: a },
                _ => AdviceKind::AtBound { parameter: a },
            };
            let of = docs.len();
            (first, Advice { kind, fits, of })
        })
        .collect();
    out.sort_by(|x, y| y.1.fits.cmp(&x.1.fits).then(x.0.cmp(&y.0)));
    out.into_iter().map(|(_, a)| a).collect()
}

/// When one of `a`, `b` is an arc's resistor and the other a resistance outside every arc (the
/// series resistance), the arc's characteristic frequency in this fit.
fn series_arc_frequency(d: &FitDocument, a: &str, b: &str) -> Option<f64> {
    let arcs = &d.derived.arcs;
    let arc_of = |p: &str| arcs.iter().find(|x| x.resistor == p);
    let in_arc = |p: &str| {
        arcs.iter()
            .any(|x| x.resistor == p || p.starts_with(&x.capacitor))
    };
    // A single resistance: a parameter in ohms (the element table's unit of a resistance).
    let resistor = |p: &str| {
        d.parameters
            .iter()
            .any(|q| q.name == p && q.unit == crate::element::OHM)
    };
    match (arc_of(a), arc_of(b)) {
        (Some(x), None) if resistor(b) && !in_arc(b) => Some(x.peak_frequency_hz),
        (None, Some(x)) if resistor(a) && !in_arc(a) => Some(x.peak_frequency_hz),
        _ => None,
    }
}
