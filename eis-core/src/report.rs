//! The fit document: one serialisable record of a fit (`eis fit --json`, one line of a batch's
//! `results.jsonl`), and reading a previous one back as a warm start.

use crate::circuit::{Circuit, print};
use crate::derive::{
    Derived, QUANTITIES, Quantity, QuantityKey, SHORT_CIRCUIT_CAUTION, ShortCircuitEstimate,
};
use crate::fit::FitResult;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// Serde helpers for numbers that may be non-finite (an infinite time constant, an undetermined
/// correlation): written as `null`, read back as NaN. JSON has no NaN or infinity, and serde_json
/// writes them as `null`, which a plain `f64` field refuses to read back.
pub(crate) mod nullable {
    use serde::{Deserialize, Deserializer, Serializer};

    pub fn serialize<S: Serializer>(x: &f64, s: S) -> Result<S::Ok, S::Error> {
        if x.is_finite() {
            s.serialize_f64(*x)
        } else {
            s.serialize_none()
        }
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
        Ok(Option::<f64>::deserialize(d)?.unwrap_or(f64::NAN))
    }

    /// The same for a matrix.
    pub mod matrix {
        use serde::ser::SerializeSeq;
        use serde::{Deserialize, Deserializer, Serializer};

        pub fn serialize<S: Serializer>(m: &[Vec<f64>], s: S) -> Result<S::Ok, S::Error> {
            let mut seq = s.serialize_seq(Some(m.len()))?;
            for row in m {
                let row: Vec<Option<f64>> = row
                    .iter()
                    .map(|x| Some(*x).filter(|x| x.is_finite()))
                    .collect();
                seq.serialize_element(&row)?;
            }
            seq.end()
        }

        pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<Vec<f64>>, D::Error> {
            let m = Vec::<Vec<Option<f64>>>::deserialize(d)?;
            Ok(m.into_iter()
                .map(|row| row.into_iter().map(|x| x.unwrap_or(f64::NAN)).collect())
                .collect())
        }
    }

    /// The same for an optional pair (a frequency range).
    pub mod pair {
        use serde::{Deserialize, Deserializer, Serialize, Serializer};

        pub fn serialize<S: Serializer>(p: &Option<(f64, f64)>, s: S) -> Result<S::Ok, S::Error> {
            let finite = |x: f64| Some(x).filter(|x| x.is_finite());
            p.map(|(a, b)| (finite(a), finite(b))).serialize(s)
        }

        pub fn deserialize<'de, D: Deserializer<'de>>(
            d: D,
        ) -> Result<Option<(f64, f64)>, D::Error> {
            let p = Option::<(Option<f64>, Option<f64>)>::deserialize(d)?;
            Ok(p.map(|(a, b)| (a.unwrap_or(f64::NAN), b.unwrap_or(f64::NAN))))
        }
    }
}

/// One parameter of a fit document.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ParameterEntry {
    /// Parameter name (`Rct`, `Qdl.n`).
    pub name: String,
    /// Fitted (or fixed) value.
    #[serde(with = "nullable")]
    pub value: f64,
    /// Standard error; null when fixed or undetermined.
    pub stderr: Option<f64>,
    /// stderr/|value|; null when stderr is.
    pub relative_error: Option<f64>,
    /// SI unit.
    pub unit: String,
    /// Held fixed.
    pub fixed: bool,
    /// Ended on a bound.
    pub at_bound: bool,
}

/// One arc of a fit document.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ArcEntry {
    /// Resistor of the arc.
    pub resistor: String,
    /// Capacitive element of the arc.
    pub capacitor: String,
    /// Resistance (Ω).
    #[serde(with = "nullable")]
    pub resistance_ohm: f64,
    /// Its standard error.
    pub resistance_ohm_stderr: Option<f64>,
    /// Time constant (s).
    #[serde(with = "nullable")]
    pub time_constant_s: f64,
    /// Its standard error.
    pub time_constant_s_stderr: Option<f64>,
    /// Characteristic frequency (Hz).
    #[serde(with = "nullable")]
    pub peak_frequency_hz: f64,
    /// Its standard error.
    pub peak_frequency_hz_stderr: Option<f64>,
    /// Effective capacitance (F).
    #[serde(with = "nullable")]
    pub capacitance_f: f64,
    /// Its standard error.
    pub capacitance_f_stderr: Option<f64>,
    /// Role: film, charge-transfer, contact, diffusion or other.
    pub role: crate::circuit::Role,
    /// Whether the data determine this arc.
    pub determined: bool,
    /// Whether its characteristic frequency lies outside the measured window (then it is summed
    /// nowhere).
    #[serde(default)]
    pub beyond_data: bool,
}

/// A diffusion element seen only as a tail still rising at the lowest measured frequency.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TailEntry {
    /// The element.
    pub element: String,
    /// Warburg coefficient σ = R/√(2τ) (Ω·s^−½).
    pub sigma_ohm_s_half: Option<f64>,
    /// Its standard error.
    pub sigma_ohm_s_half_stderr: Option<f64>,
    /// Re Z of the element at the lowest measured frequency: a lower bound on its resistance (Ω).
    pub resistance_at_least_ohm: Option<f64>,
    /// Its standard error.
    pub resistance_at_least_ohm_stderr: Option<f64>,
}

/// A process whose characteristic frequency lies outside the measured window.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct BeyondEntry {
    /// The arc's resistor or the element.
    pub process: String,
    /// Its characteristic frequency (Hz).
    pub frequency_hz: Option<f64>,
    /// Which side of the window (`below-window` or `above-window`).
    pub placement: crate::roles::Placement,
}

/// Derived quantities of a fit document: the battery quantities of [`QUANTITIES`] and the arcs.
///
/// Written as one field per quantity (its column name, then `<column>_stderr`; null where the model
/// has no such quantity), in table order, then `arcs`, `diffusion_tails` and `beyond_data`.
#[derive(Debug, Clone, PartialEq)]
pub struct DerivedEntry {
    /// The quantities the model has.
    pub quantities: BTreeMap<QuantityKey, Quantity>,
    /// The arcs.
    pub arcs: Vec<ArcEntry>,
    /// Diffusion tails still rising at the lowest frequency.
    pub diffusion_tails: Vec<TailEntry>,
    /// Processes beyond the data, summed nowhere.
    pub beyond_data: Vec<BeyondEntry>,
}

impl DerivedEntry {
    /// The value and standard error of a quantity, where the model has it.
    pub fn get(&self, key: QuantityKey) -> Option<Quantity> {
        self.quantities.get(&key).copied()
    }

    /// The value of a quantity, where the model has it.
    pub fn value(&self, key: QuantityKey) -> Option<f64> {
        self.get(key).map(|q| q.value)
    }
}

/// A derived value as (value, standard error) for a document.
fn split(q: Option<Quantity>) -> (Option<f64>, Option<f64>) {
    match q {
        Some(q) => (Some(q.value), q.stderr),
        None => (None, None),
    }
}

impl Serialize for DerivedEntry {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        use serde::ser::SerializeMap;
        let mut m = s.serialize_map(Some(2 * QUANTITIES.len() + 3))?;
        for q in QUANTITIES {
            let v = self.get(q.key);
            m.serialize_entry(q.column, &v.map(|v| v.value))?;
            m.serialize_entry(&format!("{}_stderr", q.column), &v.and_then(|v| v.stderr))?;
        }
        m.serialize_entry("arcs", &self.arcs)?;
        m.serialize_entry("diffusion_tails", &self.diffusion_tails)?;
        m.serialize_entry("beyond_data", &self.beyond_data)?;
        m.end()
    }
}

impl<'de> Deserialize<'de> for DerivedEntry {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        #[derive(Deserialize)]
        struct Fields {
            arcs: Vec<ArcEntry>,
            #[serde(default)]
            diffusion_tails: Vec<TailEntry>,
            #[serde(default)]
            beyond_data: Vec<BeyondEntry>,
            #[serde(flatten)]
            numbers: BTreeMap<String, Option<f64>>,
        }
        let f = Fields::deserialize(d)?;
        let number = |name: &str| f.numbers.get(name).copied().flatten();
        let quantities = QUANTITIES
            .iter()
            .filter_map(|q| {
                // A value written as null (not finite) beside a standard error stays a NaN value.
                let value = number(q.column);
                let stderr = number(&format!("{}_stderr", q.column));
                (value.is_some() || stderr.is_some()).then(|| {
                    let value = value.unwrap_or(f64::NAN);
                    (q.key, Quantity { value, stderr })
                })
            })
            .collect();
        Ok(DerivedEntry {
            quantities,
            arcs: f.arcs,
            diffusion_tails: f.diffusion_tails,
            beyond_data: f.beyond_data,
        })
    }
}

/// Fit statistics of a fit document.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StatisticsEntry {
    /// Sum of squared weighted residuals.
    #[serde(with = "nullable")]
    pub chi_square: f64,
    /// χ²/(2N − P).
    #[serde(with = "nullable")]
    pub reduced_chi_square: f64,
    /// Akaike information criterion.
    #[serde(with = "nullable")]
    pub aic: f64,
    /// Bayesian information criterion.
    #[serde(with = "nullable")]
    pub bic: f64,
    /// Number of points.
    pub points: usize,
    /// Degrees of freedom.
    pub dof: usize,
    /// Solver iterations of the winning start.
    pub iterations: usize,
    /// Residual evaluations over all starts.
    pub evaluations: usize,
    /// Starting points tried.
    pub starts: usize,
    /// Whether the solver converged.
    pub converged: bool,
    /// Why it stopped.
    pub termination: String,
    /// Weighting used.
    pub weighting: crate::fit::Weighting,
    /// How standard errors were obtained.
    pub covariance: String,
}

/// Short-circuit estimates with their caution.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ShortCircuitEntry {
    /// Open-circuit voltage (V).
    #[serde(with = "nullable")]
    pub ocv_v: f64,
    /// V/R_dc (A).
    #[serde(with = "nullable")]
    pub short_circuit_current_a: f64,
    /// Its standard error.
    pub short_circuit_current_a_stderr: Option<f64>,
    /// V²/(4R_dc) (W).
    #[serde(with = "nullable")]
    pub matched_load_power_w: f64,
    /// Its standard error.
    pub matched_load_power_w_stderr: Option<f64>,
    /// Safety caution.
    pub caution: String,
}

/// Correlations among the free parameters.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CorrelationEntry {
    /// Names of the free parameters, in matrix order.
    pub parameters: Vec<String>,
    /// Correlation matrix rows.
    #[serde(with = "nullable::matrix")]
    pub matrix: Vec<Vec<f64>>,
}

/// The whole document.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FitDocument {
    /// Source file of the spectrum, when known.
    #[serde(default)]
    pub file: Option<String>,
    /// Spectrum number within the file.
    #[serde(default)]
    pub spectrum: Option<usize>,
    /// Canonical circuit text.
    pub model: String,
    /// Parameters in circuit order.
    pub parameters: Vec<ParameterEntry>,
    /// Derived quantities.
    pub derived: DerivedEntry,
    /// Fit statistics.
    pub statistics: StatisticsEntry,
    /// Correlations of the free parameters.
    pub correlation: CorrelationEntry,
    /// Warnings in plain words.
    pub warnings: Vec<String>,
    /// Short-circuit estimates, when an open-circuit voltage was given.
    #[serde(default)]
    pub short_circuit: Option<ShortCircuitEntry>,
}

/// Builds the document of a fit.
pub fn document(
    c: &Circuit,
    r: &FitResult,
    d: &Derived,
    short: Option<&ShortCircuitEstimate>,
) -> FitDocument {
    let parameters = c
        .params
        .iter()
        .enumerate()
        .map(|(i, p)| ParameterEntry {
            name: p.name.clone(),
            value: r.values[i],
            stderr: r.stderr[i],
            relative_error: r.relative_error(i),
            unit: c.unit(i).to_owned(),
            fixed: r.fixed[i],
            at_bound: r.at_bound[i],
        })
        .collect();
    let nf = r.free.len();
    FitDocument {
        file: None,
        spectrum: None,
        model: print(c),
        parameters,
        derived: DerivedEntry {
            quantities: QUANTITIES
                .iter()
                .filter_map(|q| (q.get)(d).map(|v| (q.key, v)))
                .collect(),
            arcs: d.arcs.iter().map(ArcEntry::from).collect(),
            diffusion_tails: d.diffusion_tails.iter().map(TailEntry::from).collect(),
            beyond_data: d.beyond_data.iter().map(BeyondEntry::from).collect(),
        },
        statistics: StatisticsEntry::from(r),
        correlation: CorrelationEntry {
            parameters: r.free.iter().map(|&i| c.params[i].name.clone()).collect(),
            matrix: (0..nf)
                .map(|a| r.correlation[a * nf..(a + 1) * nf].to_vec())
                .collect(),
        },
        warnings: r.warnings.iter().map(ToString::to_string).collect(),
        short_circuit: short.map(ShortCircuitEntry::from),
    }
}

impl From<&crate::derive::Arc> for ArcEntry {
    fn from(a: &crate::derive::Arc) -> ArcEntry {
        ArcEntry {
            resistor: a.resistor.clone(),
            capacitor: a.capacitor.clone(),
            resistance_ohm: a.resistance.value,
            resistance_ohm_stderr: a.resistance.stderr,
            time_constant_s: a.time_constant.value,
            time_constant_s_stderr: a.time_constant.stderr,
            peak_frequency_hz: a.peak_frequency.value,
            peak_frequency_hz_stderr: a.peak_frequency.stderr,
            capacitance_f: a.capacitance.value,
            capacitance_f_stderr: a.capacitance.stderr,
            role: a.role,
            determined: a.determined,
            beyond_data: a.placement != crate::roles::Placement::InWindow,
        }
    }
}

impl From<&crate::roles::DiffusionTail> for TailEntry {
    fn from(t: &crate::roles::DiffusionTail) -> TailEntry {
        let (sigma, sigma_se) = split(Some(t.sigma));
        let (low, low_se) = split(Some(t.resistance_at_least));
        TailEntry {
            element: t.element.clone(),
            sigma_ohm_s_half: sigma,
            sigma_ohm_s_half_stderr: sigma_se,
            resistance_at_least_ohm: low,
            resistance_at_least_ohm_stderr: low_se,
        }
    }
}

impl From<&crate::roles::BeyondData> for BeyondEntry {
    fn from(b: &crate::roles::BeyondData) -> BeyondEntry {
        BeyondEntry {
            process: b.process.clone(),
            frequency_hz: b.frequency_hz.is_finite().then_some(b.frequency_hz),
            placement: b.placement,
        }
    }
}

impl From<&FitResult> for StatisticsEntry {
    fn from(r: &FitResult) -> StatisticsEntry {
        StatisticsEntry {
            chi_square: r.chi_square,
            reduced_chi_square: r.reduced_chi_square,
            aic: r.aic,
            bic: r.bic,
            points: r.points,
            dof: r.dof,
            iterations: r.iterations,
            evaluations: r.evaluations,
            starts: r.starts_tried,
            converged: r.converged,
            termination: r.termination.to_string(),
            weighting: r.weighting,
            covariance: "s^2 (J^T J)^-1 with s^2 the reduced chi-square".to_owned(),
        }
    }
}

impl From<&ShortCircuitEstimate> for ShortCircuitEntry {
    fn from(s: &ShortCircuitEstimate) -> ShortCircuitEntry {
        ShortCircuitEntry {
            ocv_v: s.ocv,
            short_circuit_current_a: s.short_circuit_current.value,
            short_circuit_current_a_stderr: s.short_circuit_current.stderr,
            matched_load_power_w: s.matched_load_power.value,
            matched_load_power_w_stderr: s.matched_load_power.stderr,
            caution: SHORT_CIRCUIT_CAUTION.to_owned(),
        }
    }
}

impl FitDocument {
    /// Values for a warm start of `circuit`: each parameter takes the document's value of the same
    /// name, others keep the circuit's initial or default value. Returns the values and the names
    /// that were not found.
    pub fn warm_start_for(&self, c: &Circuit) -> (Vec<f64>, Vec<String>) {
        let mut v = c.default_values();
        let mut missing = Vec::new();
        for (i, p) in c.params.iter().enumerate() {
            match self.parameters.iter().find(|e| e.name == p.name) {
                Some(e) if e.value.is_finite() => v[i] = e.value,
                _ => missing.push(p.name.clone()),
            }
        }
        (v, missing)
    }
}
