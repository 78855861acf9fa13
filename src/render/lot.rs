//! A lot block in the record: the table of units, the lot figures, and the histogram of the
//! unit values with the tolerance limits (plotters SVG, labels taken out as for the other figures).

use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

use crate::judge::{LotRecord, Record};
use crate::print;
use crate::quantity::Unit;
use crate::render::labels;
use crate::render::metrics;
use crate::render::plots::{Plot, PLOT_FONT};
use serde_json::{json, Value};
use std::collections::BTreeMap;

/// The template's `lot` of a lot block: part, quantity, the table of units (serial, value ± U,
/// verdict), the lot figures as (label, text) pairs, the counts, and the histogram.
pub fn lot_json(
    record: &Record,
    id: &str,
    index: usize,
    files: &mut BTreeMap<String, Vec<u8>>,
) -> Result<Value, String> {
    let Some(l) = record.lots.iter().find(|l| l.block == id) else {
        return Ok(Value::Null);
    };
    let units: Vec<Value> = record
        .verdicts
        .iter()
        .filter(|v| v.block == id && v.serial.is_some())
        .map(|v| {
            json!({
                "serial": v.serial,
                "value": print::value_u_k(v.value, v.expanded, v.k, v.unit),
                "outcome": v.outcome.word(),
            })
        })
        .collect();
    let col = |k: &str| {
        metrics::widest(
            units
                .iter()
                .map(|u| u.get(k).and_then(Value::as_str).unwrap_or("")),
        )
    };
    let widths = [col("serial"), col("value"), col("outcome")];
    let values: Vec<f64> = record
        .verdicts
        .iter()
        .filter(|v| v.block == id && v.serial.is_some())
        .map(|v| v.value)
        .collect();
    let mut plot = Value::Null;
    if let Some(p) = lot_histogram(id, &l.name, l.unit, &values, (l.low, l.nominal, l.high))? {
        let path = format!("/plots/{index}-lot.svg");
        let drawing = format!("/plots/{index}-lot-drawing.svg");
        files.insert(path.clone(), p.svg.into_bytes());
        files.insert(drawing.clone(), p.drawing.into_bytes());
        plot = json!({
            "file": path, "caption": p.caption, "drawing": drawing, "width": p.width,
            "height": p.height, "labels": p.labels,
        });
    }
    Ok(json!({
        "part": l.part,
        "name": l.name,
        "symbol": super::data::symbol_json(&l.name),
        "nominal": print::quantity(l.nominal, l.unit),
        "interval": print::interval(l.low, l.high, l.unit),
        "units": units,
        "widths": widths,
        "figures": figures(l),
        "counts": { "pass": l.pass, "fail": l.fail, "inconclusive": l.inconclusive },
        "plot": plot,
    }))
}

/// The lot figures as printed: (label, text).
fn figures(l: &LotRecord) -> Vec<Value> {
    let Some(s) = &l.stats else {
        return vec![json!({
            "label": "lot figures",
            "text": "not computed: a unit gave no value of the judged quantity",
        })];
    };
    let q = |x: f64| print::quantity(x, l.unit);
    let num = |x: f64| print::fixed(x, 2);
    let mut out = vec![
        json!({"label": "units n", "text": s.n.to_string()}),
        json!({"label": "mean", "text": q(s.mean)}),
    ];
    match s.s {
        Some(sd) => out.push(json!({"label": "s (sample standard deviation)", "text": q(sd)})),
        None => out.push(json!({"label": "s", "text": "— (one unit)"})),
    }
    out.push(json!({"label": "min … max", "text": format!("{} … {}", q(s.min), q(s.max))}));
    // Why a capability index is missing: one unit has no s; equal values give s = 0.
    let why = if s.n < 2 {
        "— (needs two or more units)"
    } else {
        "— (s = 0: every unit gave the same value)"
    };
    out.push(json!({"label": "Cp = (USL − LSL)/(6s)", "text": s.cp.map_or(why.into(), num)}));
    let cpk = match (s.cpk, s.cpk_interval) {
        (Some(c), Some((lo, hi))) => format!(
            "{}, approximate {} interval [{}, {}] (Bissell 1990 normal approximation)",
            num(c),
            crate::print::percent(s.confidence),
            num(lo),
            num(hi)
        ),
        (Some(c), None) => num(c),
        _ => why.into(),
    };
    out.push(json!({"label": "Cpk = min(USL − mean, mean − LSL)/(3s)", "text": cpk}));
    let normal = match s.normality {
        Some(a) => format!(
            "Anderson–Darling A² = {}, p = {} ({})",
            print::fixed(a.a2, 3),
            print::fixed(a.p, 3),
            if a.p < 0.05 {
                "the unit values do not look normal at the 5 % level: read Cp and Cpk with care"
            } else {
                "no departure from a normal distribution at the 5 % level"
            }
        ),
        None => "not tested (fewer than three distinct values)".into(),
    };
    out.push(json!({"label": "normality", "text": normal}));
    out
}

const W: u32 = 720;
const H: u32 = 280;

/// Bin edges over [lo, hi]: Sturges' rule, ⌈log₂ n⌉ + 1 bins (common practice).
fn bins(n: usize, lo: f64, hi: f64) -> Vec<f64> {
    let k = ((n.max(1) as f64).log2().ceil() as usize + 1).clamp(1, 40);
    let w = (hi - lo) / k as f64;
    (0..=k).map(|i| lo + w * i as f64).collect()
}

/// Units per bin; the last bin is closed on the right.
fn counts(values: &[f64], edges: &[f64]) -> Vec<usize> {
    let k = edges.len().saturating_sub(1);
    let mut c = vec![0usize; k];
    for &v in values {
        if let Some(i) = (0..k).find(|&i| v >= edges[i] && (v < edges[i + 1] || i + 1 == k)) {
            c[i] += 1;
        }
    }
    c
}

/// The figure: unit values (SI) of quantity `symbol` in `unit`, limits `low`, `high` and the
/// nominal drawn as vertical lines.
pub fn lot_histogram(
    block: &str,
    symbol: &str,
    unit: Unit,
    values: &[f64],
    (low, nominal, high): (f64, f64, f64),
) -> Result<Option<Plot>, String> {
    let finite: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
    if finite.is_empty() || !(low.is_finite() && high.is_finite() && high > low) {
        return Ok(None);
    }
    let (div, utext) = print::scale_for(unit, high.abs().max(low.abs()));
    let xs: Vec<f64> = finite.iter().map(|v| v / div).collect();
    let (l, nm, h) = (low / div, nominal / div, high / div);
    let vmin = xs.iter().copied().fold(l, f64::min);
    let vmax = xs.iter().copied().fold(h, f64::max);
    let pad = (vmax - vmin) * 0.04;
    let edges = bins(xs.len(), vmin - pad, vmax + pad);
    let c = counts(&xs, &edges);
    let top = c.iter().copied().max().unwrap_or(1).max(1) as f64 * 1.2;
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (W, H)).into_drawing_area();
        root.fill(&WHITE).map_err(|e| e.to_string())?;
        let font = (PLOT_FONT, 17).into_font();
        let x0 = edges[0];
        let x1 = *edges.last().unwrap_or(&(x0 + 1.0));
        let mut chart = ChartBuilder::on(&root)
            .margin_left(10)
            .margin_right(18)
            .margin_top(10)
            .margin_bottom(4)
            .x_label_area_size(46)
            .y_label_area_size(70)
            .build_cartesian_2d(x0..x1, 0.0..top)
            .map_err(|e| e.to_string())?;
        let xfmt = |v: &f64| print::sig(*v, 4);
        let yfmt = |v: &f64| print::sig(*v, 2);
        chart
            .configure_mesh()
            .max_light_lines(0)
            .bold_line_style(RGBColor(200, 200, 200))
            .label_style(font.clone())
            .axis_desc_style(font.clone())
            .x_label_formatter(&xfmt)
            .y_label_formatter(&yfmt)
            .x_desc(format!("{symbol} / {utext}"))
            .y_desc("units")
            .x_labels(8)
            .y_labels(5)
            .draw()
            .map_err(|e| e.to_string())?;
        let grey = RGBColor(190, 190, 190);
        chart
            .draw_series(c.iter().enumerate().filter(|(_, n)| **n > 0).map(|(i, n)| {
                Rectangle::new([(edges[i], 0.0), (edges[i + 1], *n as f64)], grey.filled())
            }))
            .map_err(|e| e.to_string())?;
        chart
            .draw_series(
                c.iter().enumerate().filter(|(_, n)| **n > 0).map(|(i, n)| {
                    Rectangle::new([(edges[i], 0.0), (edges[i + 1], *n as f64)], BLACK)
                }),
            )
            .map_err(|e| e.to_string())?;
        for (x, name, dashed) in [(l, "LSL", true), (nm, "nominal", false), (h, "USL", true)] {
            let line = vec![(x, 0.0), (x, top)];
            if dashed {
                chart
                    .draw_series(DashedLineSeries::new(line, 6, 4, BLACK.stroke_width(2)))
                    .map_err(|e| e.to_string())?;
            } else {
                chart
                    .draw_series(LineSeries::new(line, BLACK.stroke_width(1)))
                    .map_err(|e| e.to_string())?;
            }
            chart
                .draw_series(std::iter::once(Text::new(
                    name.to_string(),
                    (x, top),
                    TextStyle::from((PLOT_FONT, 16).into_font())
                        .pos(Pos::new(HPos::Left, VPos::Top)),
                )))
                .map_err(|e| e.to_string())?;
        }
        root.present().map_err(|e| e.to_string())?;
    }
    let (drawing, labels) = labels::split(&svg);
    Ok(Some(Plot {
        caption: format!(
            "Block {block}: {symbol} of each unit, {} in bins of equal width (Sturges), with the tolerance limits LSL and USL and the nominal.",
            print::count(finite.len(), "unit", "units")
        ),
        svg,
        drawing,
        width: W,
        height: H,
        labels,
    }))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_value_lands_in_one_bin() {
        let v = [98.2, 101.5, 99.7, 104.6, 100.8, 97.1, 106.0, 100.1];
        let e = bins(v.len(), 95.0, 106.0);
        assert_eq!(e.len(), 5, "Sturges: ⌈log₂ 8⌉ + 1 = 4 bins");
        let c = counts(&v, &e);
        assert_eq!(
            c.iter().sum::<usize>(),
            8,
            "the top value sits in the closed last bin"
        );
        let p = lot_histogram(
            "lot",
            "C",
            Unit::F,
            &v.map(|x| x * 1e-9),
            (95e-9, 100e-9, 105e-9),
        )
        .unwrap()
        .expect("a figure");
        assert!(p.labels.iter().any(|l| l.text == "USL"));
    }
}
