//! Readings off a display: the block header's `scale` (each voltage column's vertical scale),
//! and the step that turns a column read in divisions or peak to peak into RMS volts.

use super::table::VOLTAGE_SYMBOLS;
use super::values::ValueReader;
use super::words::short;
use super::{BlockReadout, Column, Row, Scale};
use crate::diag::Diagnostic;
use crate::quantity::{parse_quantity, Unit};
use serde_yaml::Value;

/// `scale: {VR: 0.5 V/div, VC: 200 mV/div}`: a voltage per division for each voltage column
/// read in divisions (a key `VRpp` names the column `VR` as well).
pub(super) fn scale_key(ex: &mut ValueReader, val: &Value) -> Vec<Scale> {
    let y = ex.y;
    let mut out: Vec<Scale> = Vec::new();
    let entries = ex.entries(&["scale"], val, None);
    for (name, v) in entries {
        let path = ["scale", name.as_str()];
        let key = y.key_span(&path);
        let written = name.trim();
        let symbol = written.strip_suffix("pp").unwrap_or(written);
        if !VOLTAGE_SYMBOLS.contains(&symbol) {
            ex.err(
                Diagnostic::new(key, "`scale` is for voltage columns read in divisions")
                    .expected(format!("one of {}", VOLTAGE_SYMBOLS.join(", ")))
                    .found(short(written)),
            );
            continue;
        }
        let Some(text) = ex.text(&path, v) else {
            continue;
        };
        let at = y.value_span(&path);
        match per_division(&text) {
            Some(per_div) => out.push(Scale {
                symbol: symbol.to_string(),
                per_div,
                key,
                value: at,
            }),
            None => {
                // Kept, refused, so that its column is not also said to lack a scale.
                out.push(Scale {
                    symbol: symbol.to_string(),
                    per_div: f64::NAN,
                    key,
                    value: at,
                });
                ex.err(
                    Diagnostic::new(
                        at,
                        format!("the scale of `{symbol}` is not a voltage per division"),
                    )
                    .expected("a positive voltage per division, e.g. `0.5 V/div` or `200 mV/div`")
                    .found(short(text.trim())),
                )
            }
        }
    }
    out
}

/// `0.5 V/div` → 0.5 (V per division); None for anything else.
fn per_division(text: &str) -> Option<f64> {
    let (volts, div) = text.trim().rsplit_once('/')?;
    if div.trim() != "div" {
        return None;
    }
    let q = parse_quantity(volts.trim()).ok()?;
    (q.unit == Unit::V && q.value.is_finite() && q.value > 0.0).then_some(q.value)
}

/// Each column read in divisions takes its scale (an error at the heading without one), each
/// scale needs such a column (an error at its key), and the cells of a column read in
/// divisions or peak to peak become RMS volts: reading × [`super::Readout::factor`].
pub(super) fn apply(
    readout: &BlockReadout,
    columns: &mut [Column],
    rows: &mut [Row],
    d: &mut Vec<Diagnostic>,
) {
    for (ci, c) in columns.iter_mut().enumerate() {
        if c.readout.divisions {
            match readout.scales.iter().find(|s| s.symbol == c.symbol) {
                // A refused scale is reported at its value.
                Some(s) if !s.per_div.is_finite() => continue,
                Some(s) => {
                    c.readout.per_div = Some(s.per_div);
                    c.unit = Unit::V;
                }
                None => {
                    d.push(
                        Diagnostic::new(
                            c.span,
                            format!("column `{}` is read in divisions but has no scale", c.heading),
                        )
                        .expected(format!(
                            "its vertical scale in the block header, e.g. `scale: {{{}: 0.5 V/div}}`",
                            c.symbol
                        ))
                        .found("no scale for this column"),
                    );
                    continue;
                }
            }
        }
        let k = c.readout.factor();
        if k != 1.0 {
            for cell in rows.iter_mut().filter_map(|r| r.cells.get_mut(ci)) {
                cell.value *= k;
            }
        }
    }
    for s in &readout.scales {
        if !columns
            .iter()
            .any(|c| c.readout.divisions && c.symbol == s.symbol)
        {
            d.push(
                Diagnostic::new(
                    s.key,
                    format!(
                        "`scale` names column `{}`, which the table does not read in divisions",
                        s.symbol
                    ),
                )
                .expected(format!(
                    "a column `{}/div` in the table, or no scale for it",
                    s.symbol
                ))
                .found(match columns.iter().find(|c| c.symbol == s.symbol) {
                    Some(c) => format!("`{}`", c.heading),
                    None => format!("no column `{}`", s.symbol),
                }),
            );
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn scales_read() {
        assert_eq!(per_division("0.5 V/div"), Some(0.5));
        assert_eq!(per_division("200 mV / div"), Some(0.2));
        assert_eq!(per_division("200 mV"), None);
        assert_eq!(per_division("2 ms/div"), None);
        assert_eq!(per_division("-1 V/div"), None);
        // A sine of 1 V RMS has a peak of √2 V and a peak-to-peak of 2√2 V (common practice).
        let pp = super::super::Readout {
            peak_to_peak: true,
            ..Default::default()
        };
        assert!((pp.factor() * 2.0 * 2f64.sqrt() - 1.0).abs() < 1e-15);
    }
}
