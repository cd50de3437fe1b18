//! The spectrum being built while a file is read: its points and their source lines, the metadata
//! of its rows, the rows dropped by point hygiene, and where a row starts the next spectrum.

use super::columns::ColumnMap;
use super::detect::parse_number;
use super::values::value_columns;
use super::{DataError, DataWarning, DropReason, DroppedRow, scaled};

/// Where a data row stands against the spectrum being built.
pub(super) struct Boundary {
    /// A splitting cell changed or the sweep restarted: the row starts a new spectrum.
    pub(super) new_spectrum: bool,
    /// Whether that is known: a row without a readable frequency or splitting cell leaves it to the
    /// next row.
    pub(super) decided: bool,
}

/// The columns that split spectra (cycle, step, sweep).
pub(super) fn splitting(map: &ColumnMap) -> impl Iterator<Item = usize> + '_ {
    map.meta.iter().filter(|(r, _)| r.splits()).map(|(_, i)| *i)
}

#[derive(Default)]
pub(super) struct Builder {
    pub(super) start_line: Option<usize>,
    /// Whether the first readable row has set `index` and the metadata accumulators.
    pub(super) begun: bool,
    pub(super) f: Vec<f64>,
    pub(super) a: Vec<f64>,
    pub(super) b: Vec<f64>,
    pub(super) lines: Vec<usize>,
    /// Raw cells of the splitting columns at the first row.
    pub(super) index: Vec<String>,
    pub(super) meta_first: Vec<String>,
    pub(super) meta_sum: Vec<f64>,
    pub(super) meta_numeric: Vec<bool>,
    pub(super) rows: usize,
    pub(super) warnings: Vec<DataWarning>,
    pub(super) dropped: Vec<DroppedRow>,
    pub(super) error: Option<DataError>,
}

impl Builder {
    pub(super) fn is_restart(&self, f: f64) -> bool {
        let (Some(&first), Some(&prev)) = (self.f.first(), self.f.last()) else {
            return false;
        };
        let Some(&second) = self.f.iter().find(|&&x| x != first) else {
            return false;
        };
        // Back at least half-way (geometric mean) towards the first frequency, against the direction.
        if second < first {
            f > prev && f * f >= first * prev
        } else {
            f < prev && f * f <= first * prev
        }
    }

    /// Counts a readable row: the first one sets the spectrum's index (its splitting cells) and the
    /// metadata accumulators; every one adds its metadata cells to the sums.
    pub(super) fn tally(&mut self, map: &ColumnMap, fields: &[String], comma: bool) {
        if !self.begun {
            self.begun = true;
            self.index = splitting(map)
                .map(|i| fields.get(i).cloned().unwrap_or_default())
                .collect();
            self.meta_first = map
                .meta
                .iter()
                .map(|(_, i)| fields.get(*i).cloned().unwrap_or_default())
                .collect();
            self.meta_sum = vec![0.0; map.meta.len()];
            self.meta_numeric = vec![true; map.meta.len()];
        }
        self.rows += 1;
        for (k, (_, i)) in map.meta.iter().enumerate() {
            let x = fields.get(*i).and_then(|c| parse_number(c, comma));
            match (x, self.meta_sum.get_mut(k)) {
                (Some(x), Some(sum)) if x.is_finite() => *sum += x,
                _ => {
                    if let Some(n) = self.meta_numeric.get_mut(k) {
                        *n = false;
                    }
                }
            }
        }
    }

    /// Point hygiene: keeps the point `vals` (frequency, two impedance values) of line `line_no`, or
    /// records why it is dropped (a value that is not finite, a frequency that is not positive).
    pub(super) fn push_point(
        &mut self,
        map: &ColumnMap,
        fields: &[String],
        vals: &[f64; 3],
        line_no: usize,
    ) {
        for (v, i) in vals.iter().zip(value_columns(map)) {
            if !v.is_finite() {
                let cell = fields.get(i).cloned().unwrap_or_default();
                self.dropped.push(DroppedRow {
                    line: line_no,
                    column: Some(i + 1),
                    reason: DropReason::NonFinite(cell),
                });
                return;
            }
        }
        let f = scaled(vals[0], map.freq.scale);
        if f <= 0.0 {
            self.dropped.push(DroppedRow {
                line: line_no,
                column: Some(map.freq.index + 1),
                reason: DropReason::NonPositiveFrequency(f),
            });
            return;
        }
        self.f.push(f);
        self.a.push(vals[1]);
        self.b.push(vals[2]);
        self.lines.push(line_no);
    }

    /// Records an error of the spectrum being built (the first one wins).
    pub(super) fn error(&mut self, e: DataError) {
        if let Some(line) = e.location.line {
            self.start_line.get_or_insert(line);
        }
        if self.error.is_none() {
            self.error = Some(e);
        }
    }
}
