//! The three values of a row (frequency and the two impedance columns), read and scaled.

use super::*;

/// The column of the frequency, of the first and of the second impedance column.
pub(super) fn value_columns(map: &ColumnMap) -> [usize; 3] {
    match map.z {
        ZCols::Cartesian { re, im, .. } => [map.freq.index, re.index, im.index],
        ZCols::Polar { modulus, phase, .. } => [map.freq.index, modulus.index, phase],
    }
}

/// The unit factor of each value column (the phase keeps its unit until the spectrum is complete).
fn value_scales(map: &ColumnMap) -> [f64; 3] {
    match map.z {
        ZCols::Cartesian { re, im, .. } => [map.freq.scale, re.scale, im.scale],
        ZCols::Polar { modulus, .. } => [map.freq.scale, modulus.scale, 1.0],
    }
}

/// Reads the three values of a row, or says which cell is bad and why. NaN and infinite cells read
/// (they are dropped later, with a note); a finite cell that overflows once scaled is an error.
pub(super) fn read_values(
    map: &ColumnMap,
    fields: &[String],
    comma: bool,
) -> Result<[f64; 3], (usize, DataErrorKind)> {
    if fields.len() < map.needed {
        return Err((
            fields.len(),
            DataErrorKind::TooFewFields {
                expected: map.needed,
                found: fields.len(),
            },
        ));
    }
    let mut vals = [0.0; 3];
    for ((v, i), scale) in vals
        .iter_mut()
        .zip(value_columns(map))
        .zip(value_scales(map))
    {
        let cell = fields.get(i).map(String::as_str).unwrap_or("");
        let Some(x) = parse_number(cell, comma) else {
            return Err((
                i,
                DataErrorKind::NotANumber(cell.chars().take(40).collect()),
            ));
        };
        if x.is_finite() && !scaled(x, scale).is_finite() {
            return Err((
                i,
                DataErrorKind::OutOfRange {
                    cell: cell.chars().take(40).collect(),
                    scale,
                },
            ));
        }
        *v = x;
    }
    Ok(vals)
}
