//! The trend record of a check standard as a PDF: the values with U against date, the
//! individuals chart's centre line and limits (plotters SVG), and the table.

use crate::print;
use crate::trend::Trend;
use plotters::prelude::*;
use std::collections::BTreeMap;

const TEMPLATE: &str = include_str!("../../templates/trend.typ");

/// A chart figure printed to the decimal place of the values' smallest U (GUM 7.2.6), on the
/// values' prefix: limits and ranges as fine as the values they are drawn from.
pub fn at_values_place(t: &Trend, v: f64) -> String {
    let mean = t.points.iter().map(|p| p.value.abs()).fold(0.0, f64::max);
    let u = t
        .points
        .iter()
        .map(|p| p.expanded)
        .filter(|u| *u > 0.0)
        .fold(f64::INFINITY, f64::min);
    if !u.is_finite() {
        return print::quantity(v, t.unit);
    }
    let (div, unit) = print::scale_for(t.unit, mean);
    format!("{} {unit}", print::value_and_u(v / div, u / div).0)
}

/// The warnings of a trend: values outside the limits, moving ranges above theirs.
pub fn warnings(t: &Trend) -> Vec<String> {
    let Some(c) = &t.chart else {
        return Vec::new();
    };
    let mut out = Vec::new();
    for &i in &c.outside {
        let p = &t.points[i];
        out.push(format!(
            "{} ({}): {} is outside the control limits [{}, {}]",
            p.record,
            p.date,
            at_values_place(t, p.value),
            at_values_place(t, c.lcl),
            at_values_place(t, c.ucl)
        ));
    }
    for &i in &c.jumps {
        let p = &t.points[i];
        out.push(format!(
            "{} ({}): the step from the value before is above the moving-range limit {}",
            p.record,
            p.date,
            at_values_place(t, c.mr_ucl)
        ));
    }
    out
}

fn svg(t: &Trend) -> Result<String, String> {
    let mut s = String::new();
    {
        let root = SVGBackend::with_string(&mut s, (720, 320)).into_drawing_area();
        root.fill(&WHITE).map_err(|e| e.to_string())?;
        let first = t.points.first().map(|p| p.date).unwrap_or_default();
        let day = |d: chrono::NaiveDate| (d - first).num_days() as f64;
        let (div, prefix) =
            print::prefix_for(t.points.iter().map(|p| p.value.abs()).fold(0.0, f64::max));
        let mut ys: Vec<f64> = t
            .points
            .iter()
            .flat_map(|p| [p.value - p.expanded, p.value + p.expanded])
            .collect();
        if let Some(c) = &t.chart {
            ys.extend([c.lcl, c.ucl]);
        }
        let (lo, hi) = ys.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |a, &y| {
            (a.0.min(y), a.1.max(y))
        });
        let pad = ((hi - lo) * 0.08).max(hi.abs() * 1e-9);
        let x1 = t.points.last().map(|p| day(p.date)).unwrap_or(1.0).max(1.0);
        let (ya, yb) = ((lo - pad) / div, (hi + pad) / div);
        let (xd, yd) = (
            super::plots::tick_decimals(-0.03 * x1, x1 * 1.03, 10),
            super::plots::tick_decimals(ya, yb, 10),
        );
        let mut chart = ChartBuilder::on(&root)
            .margin(12)
            .x_label_area_size(40)
            .y_label_area_size(70)
            .build_cartesian_2d(-0.03 * x1..x1 * 1.03, ya..yb)
            .map_err(|e| e.to_string())?;
        let sym = t.unit.display_symbol();
        chart
            .configure_mesh()
            .max_light_lines(0)
            .x_desc(format!("days since {first}"))
            .y_desc(format!("{} / {prefix}{sym}", t.result))
            .label_style(("Libertinus Serif", 15))
            .x_label_formatter(&|v| print::fixed(*v, xd))
            .y_label_formatter(&|v| print::fixed(*v, yd))
            .draw()
            .map_err(|e| e.to_string())?;
        if let Some(c) = &t.chart {
            let x0 = -0.03 * x1;
            for (y, dashed) in [(c.mean, false), (c.lcl, true), (c.ucl, true)] {
                let line = vec![(x0, y / div), (x1 * 1.03, y / div)];
                if dashed {
                    chart
                        .draw_series(DashedLineSeries::new(line, 6, 4, BLACK.stroke_width(1)))
                        .map_err(|e| e.to_string())?;
                } else {
                    chart
                        .draw_series(LineSeries::new(line, BLACK.stroke_width(1)))
                        .map_err(|e| e.to_string())?;
                }
            }
        }
        let pts: Vec<(f64, f64, f64)> = t
            .points
            .iter()
            .map(|p| (day(p.date), p.value / div, p.expanded / div))
            .collect();
        chart
            .draw_series(
                pts.iter()
                    .map(|&(x, y, u)| PathElement::new(vec![(x, y - u), (x, y + u)], BLACK)),
            )
            .map_err(|e| e.to_string())?;
        chart
            .draw_series(
                pts.iter()
                    .map(|&(x, y, _)| Circle::new((x, y), 4, BLACK.filled())),
            )
            .map_err(|e| e.to_string())?;
        root.present().map_err(|e| e.to_string())?;
    }
    Ok(s)
}

/// The trend record's PDF bytes.
pub fn trend_pdf(t: &Trend) -> Result<Vec<u8>, String> {
    let q = |v: f64| at_values_place(t, v);
    let mut flags: BTreeMap<usize, &str> = BTreeMap::new();
    if let Some(c) = &t.chart {
        for &i in &c.jumps {
            flags.insert(i, "step");
        }
        for &i in &c.outside {
            flags.insert(i, "outside");
        }
    }
    let points: Vec<serde_json::Value> = t
        .points
        .iter()
        .enumerate()
        .map(|(i, p)| {
            let mr = (i > 0).then(|| q((p.value - t.points[i - 1].value).abs()));
            serde_json::json!({
                "date": p.date.to_string(), "record": p.record, "path": p.path,
                "value": print::value_u(p.value, p.expanded, t.unit),
                "mr": mr.unwrap_or_default(), "flag": flags.get(&i).copied().unwrap_or(""),
            })
        })
        .collect();
    let chart = t.chart.as_ref().map(|c| {
        serde_json::json!({ "mean": q(c.mean), "ucl": q(c.ucl), "lcl": q(c.lcl), "mr_bar": q(c.mr_bar), "mr_ucl": q(c.mr_ucl) })
    });
    let drift = t.drift.map(|d| {
        serde_json::json!({
            "slope": format!("{} per year (± one standard uncertainty)", print::value_u(d.slope * 365.25, d.u_slope * 365.25, t.unit)),
            "dof": d.dof,
        })
    });
    let data = serde_json::json!({
        "part": t.part, "result": t.result, "points": points, "chart": chart, "drift": drift,
        "warnings": warnings(t), "generator": format!("benchrec {}", env!("CARGO_PKG_VERSION")),
    });
    let mut files = BTreeMap::new();
    files.insert("/data.json".to_string(), data.to_string().into_bytes());
    files.insert("/trend.svg".to_string(), svg(t)?.into_bytes());
    let date = t.points.last().map(|p| p.date).unwrap_or_default();
    super::world::typeset_pdf(
        TEMPLATE,
        files,
        date,
        &format!("benchrec:trend:{}", t.part),
        "the trend record",
    )
}
