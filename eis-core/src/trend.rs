//! Trends of fitted quantities over a campaign: per cell (and SOC level) and quantity, the change from the
//! baseline, the growth rate with its uncertainty, the point where a change began, and flags with plain
//! explanations tied to the physics.
//!
//! # Method
//!
//! - A *series* is one cell's values of one quantity against x (cycle, SOC, time or any numeric field),
//!   sorted by x. When x is not SOC and the records hold several SOC levels, each level is its own series,
//!   so that SOC dependence is not mistaken for ageing.
//! - Change: relative to the baseline point (the first, or the first at or after a chosen x).
//! - Growth rate: ordinary least-squares slope with its standard error from the residual scatter
//!   (the scatter of repeated spectra is usually larger than single-fit standard errors). For x = cycle it
//!   is also given relative to the baseline per 100 cycles.
//! - Onset: the x where a "flat, then linear" hinge model y = a + b·max(0, x − x₀) fits best (x₀ over the
//!   measured points), reported when the hinge explains the data clearly better than a flat line.
//! - Soft short: the polarisation part (total − ohmic, with total the DC resistance or else the sum of
//!   the resistances) falls to less than a fraction of its running level (default half) and stays there.
//!
//! Flags are engineering hints to guide the analyst, not safety verdicts; each carries that caution.

use crate::derive::{QuantityKey, is_arc_column, quantity_of_column};
use serde::Serialize;

/// One record: a fitted spectrum of a cell.
#[derive(Debug, Clone, PartialEq)]
pub struct Record {
    /// Cell identifier.
    pub cell: String,
    /// The x value (cycle, SOC, time, ...).
    pub x: f64,
    /// SOC of the spectrum, when known (used to keep SOC levels apart).
    pub soc: Option<f64>,
    /// Quantities: name, value, standard error.
    pub values: Vec<(String, f64, Option<f64>)>,
    /// Whether the spectrum passed the Kramers–Kronig check, when known.
    pub kk_valid: Option<bool>,
    /// Where it came from (file and spectrum), for flags.
    pub source: String,
}

/// Thresholds of the flags. Build with [`TrendSettings::default`] and `with_*`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TrendSettings {
    /// A resistance whose fitted trend grew by at least this many percent is flagged. Default 20.
    pub growth_percent: f64,
    /// ...and whose slope is at least this many standard errors above zero. Default 3.
    pub slope_sigmas: f64,
    /// A soft short is flagged when the polarisation resistance falls below this fraction of its running
    /// level. Default 0.5.
    pub short_fraction: f64,
    /// The onset is reported when the hinge model reduces the residual sum of squares of a flat line by at
    /// least this fraction. Default 0.5.
    pub onset_gain: f64,
}

impl Default for TrendSettings {
    fn default() -> Self {
        TrendSettings {
            growth_percent: 20.0,
            slope_sigmas: 3.0,
            short_fraction: 0.5,
            onset_gain: 0.5,
        }
    }
}

impl TrendSettings {
    /// Sets the growth threshold in percent.
    pub fn with_growth_percent(mut self, v: f64) -> Self {
        self.growth_percent = v;
        self
    }
    /// Sets the slope significance in standard errors.
    pub fn with_slope_sigmas(mut self, v: f64) -> Self {
        self.slope_sigmas = v;
        self
    }
    /// Sets the soft-short fraction.
    pub fn with_short_fraction(mut self, v: f64) -> Self {
        self.short_fraction = v;
        self
    }
}

/// One series: a quantity of a cell against x.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Series {
    /// Cell.
    pub cell: String,
    /// The SOC level, when SOC levels are kept apart (x is not SOC and the records hold several).
    pub soc: Option<f64>,
    /// Quantity name (results column).
    pub quantity: String,
    /// x values, ascending.
    pub x: Vec<f64>,
    /// Values.
    pub y: Vec<f64>,
    /// Standard errors (null where unknown).
    pub y_stderr: Vec<Option<f64>>,
    /// Change of each point from the baseline, %.
    pub change_percent: Vec<f64>,
    /// Least-squares slope (per unit x).
    pub slope: Option<f64>,
    /// Its standard error.
    pub slope_stderr: Option<f64>,
    /// Slope relative to the baseline value per 100 units of x, % (per 100 cycles for x = cycle).
    pub slope_percent_per_100: Option<f64>,
    /// Where a change began (hinge model), when the data show one.
    pub onset_x: Option<f64>,
    /// Points flagged in this series (indices into x).
    pub flagged: Vec<usize>,
}

/// What a flag says.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum FlagKind {
    /// Ohmic resistance growing.
    OhmicGrowth,
    /// An arc (interface) resistance growing.
    InterfaceGrowth,
    /// Diffusion resistance growing.
    TransportGrowth,
    /// Total resistance falling suddenly toward the ohmic value.
    PossibleSoftShort,
    /// A spectrum that failed the Kramers–Kronig check.
    InvalidMeasurement,
    /// One point departing from both its neighbours, which agree with each other: a jump, not a
    /// trend; it is left out of the trend statistics.
    SinglePointJump,
}

impl FlagKind {
    /// The word used in outputs.
    pub fn as_str(self) -> &'static str {
        match self {
            FlagKind::OhmicGrowth => "ohmic-growth",
            FlagKind::InterfaceGrowth => "interface-growth",
            FlagKind::TransportGrowth => "transport-growth",
            FlagKind::PossibleSoftShort => "possible-soft-short",
            FlagKind::InvalidMeasurement => "invalid-measurement",
            FlagKind::SinglePointJump => "single-point-jump",
        }
    }
}

/// The caution every flag carries.
pub const FLAG_CAUTION: &str = "This is an engineering hint from impedance data, not a safety verdict; \
handle suspect cells by your lab's own rules.";

/// A flag raised on a series.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Flag {
    /// Cell.
    pub cell: String,
    /// The SOC level of the series, when SOC levels are kept apart.
    pub soc: Option<f64>,
    /// Quantity.
    pub quantity: String,
    /// Kind.
    pub kind: FlagKind,
    /// Where it began.
    pub onset_x: Option<f64>,
    /// Change from the baseline to the last point, %.
    pub change_percent: Option<f64>,
    /// Plain explanation, ending with the caution.
    pub explanation: String,
}

/// A series' name for people: the cell, with ` @ SOC n` when SOC levels are kept apart.
pub fn series_label(cell: &str, soc: Option<f64>) -> String {
    match soc {
        Some(s) => format!("{cell} @ SOC {}", trim(s)),
        None => cell.to_owned(),
    }
}

impl Series {
    /// The series' name for people: the cell, with ` @ SOC n` when SOC levels are kept apart.
    pub fn label(&self) -> String {
        series_label(&self.cell, self.soc)
    }
}

impl Flag {
    /// The flagged series' name for people, as [`Series::label`].
    pub fn label(&self) -> String {
        series_label(&self.cell, self.soc)
    }
}

/// The whole analysis.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TrendReport {
    /// Name of x.
    pub x_name: String,
    /// Every series.
    pub series: Vec<Series>,
    /// Every flag.
    pub flags: Vec<Flag>,
}

/// What a growing quantity column is flagged as: the battery quantity's flag from its table row, and
/// interface growth for an arc's resistance.
fn quantity_kind(name: &str) -> Option<FlagKind> {
    match quantity_of_column(name) {
        Some(q) => q.flag,
        None => is_arc_column(name).then_some(FlagKind::InterfaceGrowth),
    }
}

fn explain(
    kind: FlagKind,
    quantity: &str,
    change: f64,
    onset: Option<f64>,
    x_name: &str,
) -> String {
    let since = onset
        .map(|x| format!(" from {x_name} {} on", trim(x)))
        .unwrap_or_default();
    let what = match kind {
        FlagKind::OhmicGrowth => format!(
            "The ohmic resistance grew by {change:.0} %{since}. The series resistance holds electrolyte, \
separator and contacts: likely causes are electrolyte loss or drying, separator degradation, or a degrading \
contact between active material and current collector (or at the terminals)."
        ),
        FlagKind::InterfaceGrowth => format!(
            "The interface resistance ({quantity}) grew by {change:.0} %{since}. Arc resistances belong to \
interfaces: likely causes are a growing surface film or passivation layer, or loss of active area."
        ),
        FlagKind::TransportGrowth => format!(
            "The diffusion resistance grew by {change:.0} %{since}: mass transport is becoming limiting \
(electrolyte depletion, pore clogging, thicker diffusion layer)."
        ),
        FlagKind::PossibleSoftShort => format!(
            "The total resistance fell suddenly toward the ohmic value{since} (polarisation part down by \
{:.0} %): a possible soft short, for example through dendrites. Such a cell may self-discharge or heat.",
            -change
        ),
        FlagKind::SinglePointJump => format!(
            "One spectrum ({quantity}{}) departs by {change:+.0} % from both its neighbours, which \
agree with each other: a single jump (an arc assigned to the wrong process, a disturbed measurement), not a \
trend. It is left out of the growth statistics; check that fit before trusting it.",
            onset
                .map(|x| format!(" at {x_name} {}", trim(x)))
                .unwrap_or_default()
        ),
        FlagKind::InvalidMeasurement => "This spectrum failed the Kramers-Kronig check: the cell was probably \
not stable during the sweep (drift, temperature, a film still forming) or the measurement was disturbed; \
its fitted values should not be trusted."
            .to_owned(),
    };
    format!("{what} {FLAG_CAUTION}")
}

fn trim(x: f64) -> String {
    crate::number::format_float(x)
}

/// Ordinary least squares y = a + b x: (a, b, se_b). None with fewer than three points or no spread.
fn line_fit(x: &[f64], y: &[f64]) -> Option<(f64, f64, f64)> {
    let n = x.len();
    if n < 3 {
        return None;
    }
    let nf = n as f64;
    let mx = x.iter().sum::<f64>() / nf;
    let my = y.iter().sum::<f64>() / nf;
    let sxx: f64 = x.iter().map(|v| (v - mx).powi(2)).sum();
    if sxx <= 0.0 {
        return None;
    }
    let sxy: f64 = x.iter().zip(y).map(|(a, b)| (a - mx) * (b - my)).sum();
    let b = sxy / sxx;
    let a = my - b * mx;
    let rss: f64 = x.iter().zip(y).map(|(u, v)| (v - a - b * u).powi(2)).sum();
    let se = (rss / (nf - 2.0) / sxx).sqrt();
    Some((a, b, se))
}

/// Best hinge y = a + b·max(0, x − x₀) over x₀ in the measured x (excluding the last two points).
/// Returns (x₀, rss_hinge, rss_flat).
fn hinge(x: &[f64], y: &[f64]) -> Option<(f64, f64, f64)> {
    let n = x.len();
    if n < 4 {
        return None;
    }
    let my = y.iter().sum::<f64>() / n as f64;
    let rss_flat: f64 = y.iter().map(|v| (v - my).powi(2)).sum();
    let mut best: Option<(f64, f64)> = None;
    for k in 0..n - 2 {
        let x0 = x[k];
        let u: Vec<f64> = x.iter().map(|&v| (v - x0).max(0.0)).collect();
        let Some((a, b, _)) = line_fit(&u, y) else {
            continue;
        };
        let rss: f64 = u.iter().zip(y).map(|(p, q)| (q - a - b * p).powi(2)).sum();
        if best.is_none_or(|(_, r)| rss < r - 1e-12 * rss_flat) {
            best = Some((x0, rss));
        }
    }
    best.map(|(x0, r)| (x0, r, rss_flat))
}

/// Analyses the records: one series per cell (and SOC level) and quantity, and the flags.
pub fn analyse(
    records: &[Record],
    x_name: &str,
    quantities: &[String],
    settings: &TrendSettings,
) -> TrendReport {
    let split_soc = x_name != "soc"
        && records
            .iter()
            .filter_map(|r| r.soc)
            .fold(Vec::<f64>::new(), |mut v, s| {
                if !v.iter().any(|u| (u - s).abs() < 1e-9) {
                    v.push(s);
                }
                v
            })
            .len()
            > 1;
    // A series' group: the cell, and the SOC level when levels are kept apart (compared by its label,
    // so that levels equal in print are one group).
    let key = |r: &Record| -> (String, Option<f64>, String) {
        let soc = r.soc.filter(|_| split_soc);
        (r.cell.clone(), soc, series_label(&r.cell, soc))
    };
    let mut keys: Vec<(String, Option<f64>, String)> = Vec::new();
    for r in records {
        let k = key(r);
        if !keys.iter().any(|o| o.2 == k.2) {
            keys.push(k);
        }
    }
    let mut series = Vec::new();
    let mut flags = Vec::new();
    for (cell, soc, label) in &keys {
        let group = Group {
            cell,
            soc: *soc,
            x_name,
            settings,
        };
        let mut rs: Vec<&Record> = records.iter().filter(|r| &key(r).2 == label).collect();
        rs.sort_by(|a, b| a.x.total_cmp(&b.x));
        for r in &rs {
            if r.kk_valid == Some(false) {
                flags.push(Flag {
                    cell: cell.clone(),
                    soc: *soc,
                    quantity: r.source.clone(),
                    kind: FlagKind::InvalidMeasurement,
                    onset_x: Some(r.x),
                    change_percent: None,
                    explanation: explain(FlagKind::InvalidMeasurement, "", 0.0, None, x_name),
                });
            }
        }
        for q in quantities {
            series.extend(group.series(q, &rs, &mut flags));
        }
        if let Some(f) = soft_short(&rs, (cell, *soc), x_name, settings) {
            flags.push(f);
        }
    }
    TrendReport {
        x_name: x_name.to_owned(),
        series,
        flags,
    }
}

/// The records of one series' group: a cell, and its SOC level when levels are kept apart.
struct Group<'a> {
    cell: &'a str,
    soc: Option<f64>,
    x_name: &'a str,
    settings: &'a TrendSettings,
}

/// A point of a series: x, the value, its standard error, and whether its spectrum is trusted
/// (not failed by Kramers–Kronig).
type Point = (f64, f64, Option<f64>, bool);

impl Group<'_> {
    /// A flag of this group on `quantity`, explained in words.
    fn flag(&self, kind: FlagKind, quantity: &str, onset_x: Option<f64>, change: f64) -> Flag {
        Flag {
            cell: self.cell.to_owned(),
            soc: self.soc,
            quantity: quantity.to_owned(),
            kind,
            onset_x,
            change_percent: Some(change),
            explanation: explain(kind, quantity, change, onset_x, self.x_name),
        }
    }

    /// The series of quantity `q` over the group's records `rs` (sorted by x), with its single-point
    /// jumps and its growth flag pushed to `flags`; None when no record holds a finite value of `q`.
    fn series(&self, q: &str, rs: &[&Record], flags: &mut Vec<Flag>) -> Option<Series> {
        let settings = self.settings;
        let pts: Vec<Point> = rs
            .iter()
            .filter_map(|r| {
                r.values
                    .iter()
                    .find(|(n, _, _)| n == q)
                    .filter(|(_, v, _)| v.is_finite())
                    .map(|(_, v, se)| (r.x, *v, *se, r.kk_valid != Some(false)))
            })
            .collect();
        if pts.is_empty() {
            return None;
        }
        let x: Vec<f64> = pts.iter().map(|p| p.0).collect();
        let y: Vec<f64> = pts.iter().map(|p| p.1).collect();
        let base = y[0];
        let change: Vec<f64> = y.iter().map(|v| 100.0 * (v - base) / base.abs()).collect();
        // Single-point jumps are flagged on their own and left out of the trend statistics, so that
        // one spike neither raises a growth flag nor fakes an onset.
        let jumps = single_jumps(&pts, settings.growth_percent);
        for &i in &jumps {
            let reference = 0.5 * (pts[i - 1].1 + pts[i + 1].1);
            let jump = 100.0 * (pts[i].1 - reference) / reference.abs();
            flags.push(self.flag(FlagKind::SinglePointJump, q, Some(pts[i].0), jump));
        }
        // Trend statistics on the trusted points only.
        let (tx, ty): (Vec<f64>, Vec<f64>) = pts
            .iter()
            .enumerate()
            .filter(|(i, p)| p.3 && !jumps.contains(i))
            .map(|(_, p)| (p.0, p.1))
            .unzip();
        let lf = line_fit(&tx, &ty);
        let onset = hinge(&tx, &ty).and_then(|(x0, rss_h, rss_f)| {
            (rss_f > 0.0 && rss_h <= (1.0 - settings.onset_gain) * rss_f && x0 > tx[0])
                .then_some(x0)
        });
        let mut s = Series {
            cell: self.cell.to_owned(),
            soc: self.soc,
            quantity: q.to_owned(),
            x: x.clone(),
            y,
            y_stderr: pts.iter().map(|p| p.2).collect(),
            change_percent: change.clone(),
            slope: lf.map(|l| l.1),
            slope_stderr: lf.map(|l| l.2),
            slope_percent_per_100: lf.map(|l| 100.0 * 100.0 * l.1 / base.abs()),
            onset_x: onset,
            flagged: Vec::new(),
        };
        if let (Some(kind), Some(line)) = (quantity_kind(q), lf) {
            if self.grows(&pts, (&tx, &ty), line, onset) {
                let last = *change.last().expect("non-empty");
                s.flagged = (0..x.len())
                    .filter(|&i| onset.is_none_or(|o| x[i] >= o))
                    .collect();
                flags.push(self.flag(kind, q, onset, last));
            }
        }
        s.flagged.extend(&jumps);
        s.flagged.sort_unstable();
        s.flagged.dedup();
        Some(s)
    }

    /// Whether the trusted points `(tx, ty)` of a series with points `pts` grow: the straight line
    /// `(a, b, se)`, or the hinge model at a detected `onset`, shows growth of at least the threshold
    /// with a slope at least `slope_sigmas` standard errors above zero, by a change that stands out
    /// from the uncertainty of the single fits.
    fn grows(
        &self,
        pts: &[Point],
        (tx, ty): (&[f64], &[f64]),
        (a, b, se): (f64, f64, f64),
        onset: Option<f64>,
    ) -> bool {
        let settings = self.settings;
        // Change along the fitted trend, so that one noisy end point neither raises nor hides a flag.
        let (x_first, x_last) = (tx[0], tx[tx.len() - 1]);
        let y_first = a + b * x_first;
        let fitted_change = 100.0 * b * (x_last - x_first) / y_first.abs();
        let strong =
            |slope: f64, se: f64| slope > 0.0 && (se == 0.0 || slope / se >= settings.slope_sigmas);
        // The change must also stand out from the uncertainty of the single fits: at least
        // `slope_sigmas` times the typical standard error of a difference of two points.
        let mut ses: Vec<f64> = pts.iter().filter_map(|p| p.2).collect();
        ses.sort_by(f64::total_cmp);
        let point_se = ses.get(ses.len() / 2).copied().unwrap_or(0.0);
        let beyond_fit_error =
            |delta: f64| delta >= settings.slope_sigmas * point_se * std::f64::consts::SQRT_2;
        let line_ok = fitted_change >= settings.growth_percent
            && strong(b, se)
            && beyond_fit_error(b * (x_last - x_first));
        let hinge_ok = onset.is_some_and(|x0| {
            let u: Vec<f64> = tx.iter().map(|&v| (v - x0).max(0.0)).collect();
            line_fit(&u, ty).is_some_and(|(ha, hb, hse)| {
                100.0 * hb * (x_last - x0).max(0.0) / ha.abs() >= settings.growth_percent
                    && strong(hb, hse)
                    && beyond_fit_error(hb * (x_last - x0).max(0.0))
            })
        });
        line_ok || hinge_ok
    }
}

/// Interior trusted points (indices into `pts`: x, y, standard error, trusted) that depart from both
/// trusted neighbours by at least `percent` % of their mean and by more than six times the series'
/// median step between successive points, while the two neighbours differ by less than a quarter of
/// that departure.
fn single_jumps(pts: &[Point], percent: f64) -> Vec<usize> {
    let mut steps: Vec<f64> = pts.windows(2).map(|w| (w[1].1 - w[0].1).abs()).collect();
    steps.sort_by(f64::total_cmp);
    let typical = steps.get(steps.len() / 2).copied().unwrap_or(0.0);
    (1..pts.len().saturating_sub(1))
        .filter(|&i| {
            let (a, p, b) = (pts[i - 1], pts[i], pts[i + 1]);
            if !(a.3 && p.3 && b.3) {
                return false;
            }
            let reference = 0.5 * (a.1 + b.1);
            let departure = (p.1 - reference).abs();
            reference != 0.0
                && 100.0 * departure / reference.abs() >= percent
                && departure > 6.0 * typical
                && (b.1 - a.1).abs() < 0.25 * departure
        })
        .collect()
}

fn value(r: &Record, name: &str) -> Option<f64> {
    r.values
        .iter()
        .find(|(n, _, _)| n == name)
        .map(|(_, v, _)| *v)
        .filter(|v| v.is_finite())
}

/// Polarisation resistance (total minus ohmic) of a record.
fn polarisation(r: &Record) -> Option<f64> {
    let ohmic = value(r, QuantityKey::Ohmic.column())?;
    let total = value(r, QuantityKey::Dc.column()).or_else(|| {
        let ct = value(r, QuantityKey::ChargeTransfer.column()).unwrap_or(0.0);
        let d = value(r, QuantityKey::Diffusion.column()).unwrap_or(0.0);
        Some(ohmic + ct + d)
    })?;
    Some(total - ohmic)
}

fn soft_short(
    rs: &[&Record],
    (cell, soc): (&str, Option<f64>),
    x_name: &str,
    s: &TrendSettings,
) -> Option<Flag> {
    let pts: Vec<(f64, f64)> = rs
        .iter()
        .filter(|r| r.kk_valid != Some(false))
        .filter_map(|r| polarisation(r).map(|p| (r.x, p)))
        .collect();
    if pts.len() < 3 {
        return None;
    }
    // Running level: the median of the points so far; a drop must persist to the end.
    for k in 2..pts.len() {
        let mut before: Vec<f64> = pts[..k].iter().map(|p| p.1).collect();
        before.sort_by(f64::total_cmp);
        let level = before[before.len() / 2];
        if level <= 0.0 {
            continue;
        }
        if pts[k..].iter().all(|p| p.1 < s.short_fraction * level) {
            let last = pts[pts.len() - 1].1;
            let change = 100.0 * (last - level) / level;
            return Some(Flag {
                cell: cell.to_owned(),
                soc,
                quantity: "polarisation_resistance_ohm".to_owned(),
                kind: FlagKind::PossibleSoftShort,
                onset_x: Some(pts[k].0),
                change_percent: Some(change),
                explanation: explain(
                    FlagKind::PossibleSoftShort,
                    "",
                    change,
                    Some(pts[k].0),
                    x_name,
                ),
            });
        }
    }
    None
}

#[cfg(test)]
mod tests;

/// Rows of a campaign's `results.csv` turned into trend records.
#[derive(Debug, Clone, PartialEq)]
pub struct ResultsTable {
    /// Records with a numeric x (failed rows and rows without x are left out).
    pub records: Vec<Record>,
    /// Quantity columns available (those with a `_stderr` sibling and at least one value).
    pub quantities: Vec<String>,
    /// Rows left out, with why.
    pub skipped: Vec<String>,
}

/// Reads `results.csv` text (as written by a batch) into records against `x` (`cycle`, `soc`, `time` or
/// any numeric column). Only rows whose SOC lies within 0.5 of `at_soc` are kept when it is given.
///
/// # Errors
///
/// A message naming the line when the text is not such a table or lacks the x column.
pub fn read_results_csv(text: &str, x: &str, at_soc: Option<f64>) -> Result<ResultsTable, String> {
    let mut rdr = csv::ReaderBuilder::new()
        .flexible(false)
        .from_reader(text.as_bytes());
    let header: Vec<String> = rdr
        .headers()
        .map_err(|e| format!("line 1: {e}"))?
        .iter()
        .map(str::to_owned)
        .collect();
    let col = |name: &str| header.iter().position(|h| h == name);
    let (Some(file_col), Some(status_col)) = (col("file"), col("status")) else {
        return Err("line 1: not a results table (no `file` and `status` columns)".into());
    };
    let Some(x_col) = col(x) else {
        return Err(format!(
            "line 1: no column `{x}`; numeric columns include {}",
            header
                .iter()
                .filter(|h| !h.ends_with("_stderr"))
                .take(12)
                .cloned()
                .collect::<Vec<_>>()
                .join(", ")
        ));
    };
    let quantity_cols: Vec<(String, usize, usize)> = header
        .iter()
        .enumerate()
        .filter_map(|(i, h)| {
            let se = col(&format!("{h}_stderr"))?;
            Some((h.clone(), i, se))
        })
        .collect();
    let cell_col = col("cell");
    let soc_col = col("soc");
    let kk_col = col("kk_valid");
    let spectrum_col = col("spectrum");
    let mut records = Vec::new();
    let mut skipped = Vec::new();
    let mut seen: Vec<bool> = vec![false; quantity_cols.len()];
    for (n, row) in rdr.records().enumerate() {
        let line = n + 2;
        let row = row.map_err(|e| format!("line {line}: {e}"))?;
        let get = |i: usize| row.get(i).unwrap_or("").trim();
        if get(status_col) == "failed" {
            skipped.push(format!("line {line}: {} failed", get(file_col)));
            continue;
        }
        let Ok(xv) = get(x_col).parse::<f64>() else {
            skipped.push(format!("line {line}: no numeric {x}"));
            continue;
        };
        let soc = soc_col.and_then(|c| get(c).parse::<f64>().ok());
        if let (Some(target), Some(s)) = (at_soc, soc) {
            if (s - target).abs() > 0.5 {
                continue;
            }
        }
        let cell =
            crate::campaign::cell_name(cell_col.map(get), std::path::Path::new(get(file_col)));
        let mut values = Vec::new();
        for (k, (name, vi, si)) in quantity_cols.iter().enumerate() {
            if let Ok(v) = get(*vi).parse::<f64>() {
                seen[k] = true;
                values.push((name.clone(), v, get(*si).parse::<f64>().ok()));
            }
        }
        records.push(Record {
            cell,
            x: xv,
            soc: if at_soc.is_some() { None } else { soc },
            values,
            kk_valid: kk_col.and_then(|c| get(c).parse::<bool>().ok()),
            source: format!(
                "{} #{}",
                get(file_col),
                spectrum_col.map(get).unwrap_or("1")
            ),
        });
    }
    let quantities = quantity_cols
        .iter()
        .zip(&seen)
        .filter(|(_, s)| **s)
        .map(|((n, _, _), _)| n.clone())
        .collect();
    Ok(ResultsTable {
        records,
        quantities,
        skipped,
    })
}

/// `trends.csv`: one row per point of every series.
pub fn trends_csv(report: &TrendReport) -> String {
    use crate::number::format_float;
    use crate::output::csv_line;
    let mut out = csv_line([
        "cell",
        "soc",
        "quantity",
        &report.x_name,
        "y",
        "y_stderr",
        "change_percent",
        "slope",
        "slope_stderr",
        "onset",
        "flagged",
    ]);
    for s in &report.series {
        for i in 0..s.x.len() {
            let opt = |v: Option<f64>| v.map(format_float).unwrap_or_default();
            out.push_str(&csv_line([
                s.cell.clone(),
                opt(s.soc),
                s.quantity.clone(),
                format_float(s.x[i]),
                format_float(s.y[i]),
                opt(s.y_stderr[i]),
                format_float(s.change_percent[i]),
                opt(s.slope),
                opt(s.slope_stderr),
                opt(s.onset_x),
                s.flagged.contains(&i).to_string(),
            ]));
        }
    }
    out
}
