//! Plot builders: the library's results (a fit, a DRT, a trend report, or the JSON documents the
//! commands write) turned into the plain plot structs of this module. Every command that draws one of
//! these plots goes through here, so `eis fit --plot`, `eis drt --plot`, `eis trend --plot`, `eis
//! plot`, the batch and the demo draw the same thing from the same data.

use super::{
    Annotation, DrtPeak, DrtPlot, NyquistPlot, Plot, SeriesData, TrendPlot, TrendPoint, TrendSeries,
};
use crate::format::quantity;
use eis_core::circuit::Circuit;
use eis_core::derive::{derive, quantity_of_column};
use eis_core::drt::DrtResult;
use eis_core::fit::FitResult;
use eis_core::spectrum::Spectrum;
use eis_core::trend::TrendReport;

/// Nyquist plot of data and fitted model (the model on a fine grid over the measured window), each
/// arc's characteristic frequency marked when it lies inside the window.
pub fn fit(c: &Circuit, s: &Spectrum, r: &FitResult) -> Plot {
    let (lo, hi) = s
        .frequency_hz
        .iter()
        .fold((f64::INFINITY, 0.0f64), |(a, b), &f| (a.min(f), b.max(f)));
    let freq = eis_core::eval::log_frequencies(hi, lo, 40);
    let plan = eis_core::Plan::compile(c);
    let omegas: Vec<f64> = freq.iter().map(|&f| eis_core::eval::angular(f)).collect();
    let z = plan.impedances(&r.values, &omegas);
    let d = derive(c, r);
    let annotations = d
        .arcs
        .iter()
        .filter(|a| a.peak_frequency.value >= lo && a.peak_frequency.value <= hi)
        .map(|a| {
            let w = eis_core::eval::angular(a.peak_frequency.value);
            Annotation {
                z: plan.impedance(&r.values, w),
                text: format!(
                    "{} {}",
                    a.resistor,
                    quantity(a.peak_frequency.value, 3, "Hz")
                ),
            }
        })
        .collect();
    Plot::Nyquist(NyquistPlot {
        title: format!("Fit of {}", eis_core::circuit::print_expression(c)),
        series: vec![
            SeriesData::markers("data", s.frequency_hz.clone(), s.z.clone()),
            SeriesData::line("fit", freq, z),
        ],
        annotations,
    })
}

/// The DRT plot of a result: γ against τ, each peak of the table marked with its resistance, each peak
/// at the window edge marked as such (exactly the peaks `eis drt` reports, no others).
pub fn drt(r: &DrtResult, title: String) -> Plot {
    Plot::Drt(drt_curve(
        title,
        r.tau_s.clone(),
        r.gamma_ohm.clone(),
        r.peaks
            .iter()
            .map(|p| (p.tau_s, p.gamma_ohm, p.resistance_ohm)),
        r.edge_peaks.iter().map(|p| (p.tau_s, p.gamma_ohm)),
    ))
}

/// The DRT plot of a curve and its peaks (τ, γ, resistance) and window-edge peaks (τ, γ), as read back
/// from `eis drt --json`.
pub fn drt_curve(
    title: String,
    tau: Vec<f64>,
    gamma: Vec<f64>,
    peaks: impl Iterator<Item = (f64, f64, f64)>,
    edge_peaks: impl Iterator<Item = (f64, f64)>,
) -> DrtPlot {
    let table = peaks.map(|(tau, gamma, r)| DrtPeak {
        tau,
        gamma,
        label: Some(quantity(r, 3, "Ω")),
    });
    let edge = edge_peaks.map(|(tau, gamma)| DrtPeak {
        tau,
        gamma,
        label: Some("window edge".to_owned()),
    });
    DrtPlot {
        title,
        tau,
        gamma,
        peaks: table.chain(edge).collect(),
    }
}

/// Trend plot of one quantity of a report, all its series.
pub fn trend(report: &TrendReport, q: &str) -> Plot {
    let series = report
        .series
        .iter()
        .filter(|s| s.quantity == q)
        .map(|s| trend_series(s.label(), &s.x, &s.y, &s.y_stderr, &s.flagged))
        .collect();
    Plot::Trend(trend_of(&report.x_name, q, series))
}

/// One series of a trend plot: points (x, y ± y_err), those at the indices in `flagged` marked.
pub fn trend_series(
    label: String,
    x: &[f64],
    y: &[f64],
    y_err: &[Option<f64>],
    flagged: &[usize],
) -> TrendSeries {
    TrendSeries {
        label,
        points: x
            .iter()
            .zip(y)
            .enumerate()
            .map(|(i, (&x, &y))| TrendPoint {
                x,
                y,
                y_err: y_err.get(i).copied().flatten(),
                flagged: flagged.contains(&i),
            })
            .collect(),
    }
}

/// A trend plot of quantity `q` (a results column) against `x_name`, titled and labelled from the
/// quantity table.
pub fn trend_of(x_name: &str, q: &str, series: Vec<TrendSeries>) -> TrendPlot {
    let (label, unit) = quantity_label(q);
    TrendPlot {
        title: format!("{label} against {x_name}"),
        series,
        x_label: x_name.to_owned(),
        x_unit: if x_name == "soc" {
            "%".into()
        } else {
            String::new()
        },
        y_label: label,
        y_unit: unit,
    }
}

/// Axis label and unit of a results column.
pub fn quantity_label(q: &str) -> (String, String) {
    if let Some(row) = quantity_of_column(q) {
        return (row.axis.to_owned(), row.unit.to_owned());
    }
    let (base, unit) = if let Some(b) = q.strip_suffix("_ohm") {
        (b, "Ω")
    } else {
        (q, "")
    };
    (base.replace('_', " "), unit.to_owned())
}
