//! Plots of a block as SVG (plotters' SVG backend). The labels are taken out of the SVG and
//! set by the template over the image (see `labels`), in the family named here. Series differ by marker
//! shape and dash, not by colour, so a black-and-white print still reads.

use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

use crate::networks::{BlockResult, PlotData, PlotKind};
use crate::print;
use crate::render::labels::{self, Label};

/// The font typst sets plot text in (embedded by typst-kit).
pub const PLOT_FONT: &str = "Libertinus Serif";

const W: u32 = 720;
const H_MAIN: u32 = 300;
const H_LOWER: u32 = 190;

/// One generated figure: the whole SVG, and the same drawing without its text plus the labels
/// to set over it (what the built-in template uses).
#[derive(Debug, Clone, PartialEq)]
pub struct Plot {
    pub caption: String,
    pub svg: String,
    pub drawing: String,
    /// Size of the drawing in SVG user units.
    pub width: u32,
    pub height: u32,
    pub labels: Vec<Label>,
}

/// How a series' y is printed.
struct YKind {
    symbol: &'static str,
    unit: &'static str,
    /// Multiplier from SI to the printed base unit (degrees for phases).
    factor: f64,
    prefix: bool,
}

fn ykind(name: &str) -> YKind {
    let k = |symbol, unit, factor, prefix| YKind {
        symbol,
        unit,
        factor,
        prefix,
    };
    match name {
        "XC" => k("X_C", "Ω", 1.0, true),
        "XL" => k("X_L", "Ω", 1.0, true),
        "XL_dcr" => k("X_L,dcr", "Ω", 1.0, true),
        "C" => k("C", "F", 1.0, true),
        "L" => k("L", "H", 1.0, true),
        "L_dcr" => k("L_dcr", "H", 1.0, true),
        "Rac" => k("R_ac", "Ω", 1.0, true),
        "R" | "Rtotal" => k("R", "Ω", 1.0, true),
        "X" => k("X", "Ω", 1.0, true),
        "Z" => k("|Z|", "Ω", 1.0, true),
        "Y" => k("|Y|", "S", 1.0, true),
        "I" => k("I", "A", 1.0, true),
        "Q" => k("Q", "1", 1.0, false),
        "D" => k("D", "1", 1.0, false),
        "ESR" => k("ESR", "Ω", 1.0, true),
        n if n.starts_with("phase") || n == "phi" => {
            k("φ", "°", 180.0 / std::f64::consts::PI, false)
        }
        "residual" => k("Δ", "V", 1.0, true),
        _ => k("y", "1", 1.0, false),
    }
}

fn legend_name(name: &str) -> String {
    match name {
        "phase" => "φ from magnitudes".into(),
        "phase_measured" => "φ measured".into(),
        "L_dcr" => "L (DC-resistance method)".into(),
        "L" => "L (three-voltmeter method)".into(),
        "XL_dcr" => "X_L (DC-resistance method)".into(),
        "Y" => "|Y| measured".into(),
        "Z" => "|Z| measured".into(),
        other => other.to_string(),
    }
}

/// What the main panel's quantity is judged against (SI): the tolerance interval, the
/// nominal, and the block's value with its expanded uncertainty, so that a verdict can be seen.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Judged<'a> {
    pub name: &'a str,
    pub low: f64,
    pub high: f64,
    pub nominal: Option<f64>,
    pub value: Option<(f64, f64)>,
}

/// A panel to draw: series with error bars, curves, markers, an optional band.
struct Panel<'a> {
    series: Vec<&'a (String, Vec<(f64, f64, f64)>)>,
    curves: Vec<&'a (String, Vec<(f64, f64)>)>,
    markers: Vec<&'a (String, f64)>,
    band: Option<(f64, f64, String)>,
    /// The nominal (dashed line) and the block value ± U (solid line, dotted bounds).
    nominal: Option<f64>,
    value: Option<(f64, f64, String)>,
    /// Computed residual points (x, y, u) when the panel is a residual panel.
    residuals: Vec<(f64, f64, f64)>,
    residual_name: String,
    y: YKind,
}

fn find<'a>(p: &'a PlotData, name: &str) -> Option<&'a (String, Vec<(f64, f64, f64)>)> {
    p.series
        .iter()
        .find(|(n, pts)| n == name && !pts.is_empty())
}

/// Linear interpolation of a curve at x (curve sorted by x or not; nearest segment).
fn interp(curve: &[(f64, f64)], x: f64) -> Option<f64> {
    let mut pts: Vec<(f64, f64)> = curve
        .iter()
        .copied()
        .filter(|(a, b)| a.is_finite() && b.is_finite())
        .collect();
    pts.sort_by(|a, b| a.0.total_cmp(&b.0));
    for w in pts.windows(2) {
        let (a, b) = (w[0], w[1]);
        if x >= a.0 && x <= b.0 {
            if b.0 == a.0 {
                return Some(a.1);
            }
            return Some(a.1 + (b.1 - a.1) * (x - a.0) / (b.0 - a.0));
        }
    }
    None
}

/// The figures for a block, the main panel drawn against `judged` when given.
pub fn block_plots(block: &BlockResult, judged: Option<Judged>) -> Result<Vec<Plot>, String> {
    let p = &block.plot;
    let mut panels: Vec<Panel> = Vec::new();
    let empty = |y| Panel {
        series: Vec::new(),
        curves: Vec::new(),
        markers: Vec::new(),
        band: None,
        nominal: None,
        value: None,
        residuals: Vec::new(),
        residual_name: String::new(),
        y,
    };
    let kind = block.network.descriptor().plot;
    match kind {
        PlotKind::PerFrequency { main, beside, .. } => {
            if let Some(first) = main.iter().find_map(|n| find(p, n)) {
                let mut panel = empty(ykind(&first.0));
                panel.series.push(first);
                if main.first() == Some(&first.0.as_str()) {
                    panel
                        .series
                        .extend(beside.iter().filter_map(|n| find(p, n)));
                }
                if let Some(j) = judged.filter(|j| j.name == first.0) {
                    panel.band = Some((j.low, j.high, format!("tolerance of {}", j.name)));
                    panel.nominal = j.nominal;
                    panel.value = j
                        .value
                        .map(|(v, u)| (v, u, format!("block {} ± U", j.name)));
                }
                panels.push(panel);
            }
            let phases: Vec<_> = ["phase", "phase_measured"]
                .iter()
                .filter_map(|n| find(p, n))
                .collect();
            if !phases.is_empty() {
                let mut panel = empty(ykind("phase"));
                panel.series = phases;
                panels.push(panel);
            }
        }
        PlotKind::Resonance => {
            let first = find(p, "Y").or_else(|| p.series.iter().find(|(_, v)| !v.is_empty()));
            if let Some(first) = first {
                let mut panel = empty(ykind(&first.0));
                panel.series.push(first);
                panel.curves = p.curves.iter().filter(|(_, c)| !c.is_empty()).collect();
                panel.markers = p.markers.iter().collect();
                // Residuals: a series named "residual", else measured − fitted curve.
                let mut lower = empty(ykind(&first.0));
                lower.residual_name = format!("{} − fit", ykind(&first.0).symbol);
                if let Some(r) = find(p, "residual") {
                    lower.residuals = r.1.clone();
                } else if let Some((_, curve)) = panel.curves.first() {
                    // The reading's own U bounds its residual (the curve is taken as exact).
                    lower.residuals = first
                        .1
                        .iter()
                        .filter_map(|&(x, y, u)| interp(curve, x).map(|c| (x, y - c, u)))
                        .collect();
                }
                panels.push(panel);
                if !lower.residuals.is_empty() {
                    panels.push(lower);
                }
            }
        }
        PlotKind::Series => {
            for s in p.series.iter().filter(|(_, v)| v.len() > 1) {
                let mut panel = empty(ykind(&s.0));
                panel.series.push(s);
                panels.push(panel);
            }
        }
    }
    if panels.is_empty() {
        return Ok(Vec::new());
    }
    let caption = caption(block, kind, &panels);
    let (svg, height) = draw(&panels).map_err(|e| format!("plot of block `{}`: {e}", block.id))?;
    let (drawing, labels) = labels::split(&svg);
    Ok(vec![Plot {
        caption,
        svg,
        drawing,
        width: W,
        height,
        labels,
    }])
}

/// The figure's caption, naming only the panels and lines drawn.
fn caption(block: &BlockResult, kind: PlotKind, panels: &[Panel]) -> String {
    match kind {
        PlotKind::PerFrequency { .. } => {
            let main = panels.first();
            let sym = main.map(|p| p.y.symbol).unwrap_or("result");
            let mut what = format!(
                "Block {}: {sym} against frequency with expanded uncertainties (k as in the results)",
                block.id
            );
            if let Some(p) = main.filter(|p| p.band.is_some()) {
                what.push_str(", the tolerance interval");
                if p.nominal.is_some() {
                    what.push_str(", the nominal (dashed)");
                }
                if p.value.is_some() {
                    what.push_str(" and the block value ± U (solid, dotted bounds)");
                }
            }
            if panels.iter().skip(1).any(|p| p.y.symbol == "φ") {
                what.push_str("; phase below");
            }
            what.push('.');
            what
        }
        PlotKind::Resonance => {
            let tank = panels.first().is_some_and(|p| p.y.symbol == "|Z|");
            let (sweep, model) = if tank {
                ("impedance", "tank")
            } else {
                ("admittance", "series")
            };
            let mut what = format!(
                "Block {}: {sweep} sweep with the fitted {model} model and the resonance and half-power markers",
                block.id
            );
            if panels.len() > 1 {
                what.push_str("; residuals below, with each reading's U");
            }
            what.push('.');
            what
        }
        PlotKind::Series => format!("Block {}: results.", block.id),
    }
}

/// The decimals that print every tick plotters puts on a linear axis alike (`96, 98, 100`,
/// not `96.0, 98.0, 100`): the fewest that show each tick exactly.
pub(crate) fn tick_decimals(lo: f64, hi: f64, n: usize) -> usize {
    if !(hi > lo && lo.is_finite() && hi.is_finite()) {
        return 0;
    }
    let ticks = plotters::coord::types::RangedCoordf64::from(lo..hi).key_points(n);
    (0..=9)
        .find(|&d| {
            let m = 10f64.powi(d as i32);
            ticks.iter().all(|t| {
                let x = t * m;
                (x - x.round()).abs() <= 1e-6 * x.abs().max(1.0)
            })
        })
        .unwrap_or(3)
}

/// The legend corner with the fewest points under it (fractions of the plot area), preferring
/// the upper right.
fn legend_corner(points: &[(f64, f64)]) -> SeriesLabelPosition {
    let corners = [
        (SeriesLabelPosition::UpperRight, true, true),
        (SeriesLabelPosition::UpperLeft, false, true),
        (SeriesLabelPosition::LowerRight, true, false),
        (SeriesLabelPosition::LowerLeft, false, false),
    ];
    let under = |right: bool, upper: bool| {
        points
            .iter()
            .filter(|(fx, fy)| {
                let x_in = if right { *fx > 0.55 } else { *fx < 0.45 };
                let y_in = if upper { *fy > 0.6 } else { *fy < 0.4 };
                x_in && y_in
            })
            .count()
    };
    let mut best = (usize::MAX, SeriesLabelPosition::UpperRight);
    for (pos, right, upper) in corners {
        let n = under(right, upper);
        if n < best.0 {
            best = (n, pos);
        }
    }
    best.1
}

/// Range of finite values with padding; never empty.
fn padded(vals: impl Iterator<Item = f64>, log: bool) -> (f64, f64) {
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for v in vals.filter(|v| v.is_finite() && (!log || *v > 0.0)) {
        lo = lo.min(v);
        hi = hi.max(v);
    }
    if !lo.is_finite() || !hi.is_finite() {
        return if log { (1.0, 10.0) } else { (0.0, 1.0) };
    }
    if log {
        return (lo / 1.3, hi * 1.3);
    }
    let span = hi - lo;
    let pad = if span > 0.0 {
        span * 0.08
    } else {
        (lo.abs() * 0.05).max(1e-12)
    };
    (lo - pad, hi + pad)
}

/// The SVG and its height.
fn draw(panels: &[Panel]) -> Result<(String, u32), String> {
    let heights: Vec<u32> = panels
        .iter()
        .enumerate()
        .map(|(i, _)| if i == 0 { H_MAIN } else { H_LOWER })
        .collect();
    let total: u32 = heights.iter().sum();
    // Common x range over every panel.
    let xs = panels.iter().flat_map(|p| {
        p.series
            .iter()
            .flat_map(|s| s.1.iter().map(|t| t.0))
            .chain(p.residuals.iter().map(|t| t.0))
            .chain(p.markers.iter().map(|m| m.1))
            .collect::<Vec<_>>()
    });
    let xs: Vec<f64> = xs.filter(|x| x.is_finite() && *x > 0.0).collect();
    let (xmin, xmax) = (
        xs.iter().copied().fold(f64::INFINITY, f64::min),
        xs.iter().copied().fold(0.0, f64::max),
    );
    let log = xmin.is_finite() && xmin > 0.0 && xmax / xmin > 10.0;
    let (xdiv, xprefix) = print::prefix_for(xmax);
    let (x0, x1) = padded(xs.iter().map(|x| x / xdiv), log);
    let xdesc = format!("f / {xprefix}Hz");

    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (W, total)).into_drawing_area();
        root.fill(&WHITE).map_err(|e| e.to_string())?;
        let mut rest = root.clone();
        for (i, panel) in panels.iter().enumerate() {
            let h = heights.get(i).copied().unwrap_or(H_LOWER);
            let (area, below) = rest.split_vertically(h);
            rest = below;
            let last = i + 1 == panels.len();
            if log {
                draw_panel_log(&area, panel, (x0, x1), xdiv, &xdesc, last)?;
            } else {
                draw_panel_lin(&area, panel, (x0, x1), xdiv, &xdesc, last)?;
            }
        }
        root.present().map_err(|e| e.to_string())?;
    }
    Ok((svg, total))
}

fn y_scale(panel: &Panel) -> (f64, String, String) {
    let ys = panel
        .series
        .iter()
        .flat_map(|s| s.1.iter().map(|t| t.1.abs() * panel.y.factor))
        .chain(panel.residuals.iter().map(|t| t.1.abs() * panel.y.factor))
        .fold(0.0, f64::max);
    let (div, prefix) = if panel.y.prefix {
        print::prefix_for(ys)
    } else {
        (1.0, "")
    };
    let unit = if panel.y.unit == "1" {
        "1".to_string()
    } else {
        format!("{prefix}{}", panel.y.unit)
    };
    let sym = if panel.residuals.is_empty() {
        panel.y.symbol.to_string()
    } else {
        panel.residual_name.clone()
    };
    (div / panel.y.factor, sym, unit)
}

macro_rules! panel_body {
    ($area:expr, $panel:expr, $xr:expr, $xdiv:expr, $xdesc:expr, $last:expr, $xspec:expr, $xfmt:expr, $xfrac:expr) => {{
        let panel: &Panel = $panel;
        let (ydiv, ysym, yunit) = y_scale(panel);
        let xdiv: f64 = $xdiv;
        let sx = |x: f64| x / xdiv;
        let sy = |y: f64| y / ydiv;
        let mut yvals: Vec<f64> = Vec::new();
        for s in &panel.series {
            for &(_, y, u) in &s.1 {
                yvals.push(sy(y - u.abs()));
                yvals.push(sy(y + u.abs()));
            }
        }
        for c in &panel.curves {
            yvals.extend(c.1.iter().map(|t| sy(t.1)));
        }
        for &(_, y, u) in &panel.residuals {
            yvals.push(sy(y - u.abs()));
            yvals.push(sy(y + u.abs()));
        }
        if !panel.residuals.is_empty() {
            yvals.push(0.0);
        }
        if let Some((lo, hi, _)) = &panel.band {
            yvals.push(sy(*lo));
            yvals.push(sy(*hi));
        }
        yvals.extend(panel.nominal.map(sy));
        if let Some((v, u, _)) = &panel.value {
            yvals.push(sy(v - u));
            yvals.push(sy(v + u));
        }
        let (y0, y1) = padded(yvals.into_iter(), false);
        let ydec = tick_decimals(y0, y1, 6);
        let font = (PLOT_FONT, 17).into_font();
        let mut chart = ChartBuilder::on($area)
            .margin_left(10)
            .margin_right(18)
            .margin_top(10)
            .margin_bottom(4)
            .x_label_area_size(if $last { 46 } else { 26 })
            .y_label_area_size(70)
            .build_cartesian_2d($xspec, y0..y1)
            .map_err(|e| e.to_string())?;
        let xfmt = $xfmt;
        let yfmt = |v: &f64| print::fixed(*v, ydec);
        let ydesc = if yunit == "1" {
            ysym.clone()
        } else {
            format!("{ysym} / {yunit}")
        };
        let mut mesh = chart.configure_mesh();
        // No minor grid: each light line is an SVG element to parse and convert.
        mesh.max_light_lines(0)
            .bold_line_style(RGBColor(200, 200, 200))
            .label_style(font.clone())
            .axis_desc_style(font.clone())
            .x_label_formatter(&xfmt)
            .y_label_formatter(&yfmt)
            .y_desc(ydesc)
            .x_labels(8)
            .y_labels(6);
        if $last {
            mesh.x_desc($xdesc);
        }
        mesh.draw().map_err(|e| e.to_string())?;

        if let Some((lo, hi, label)) = &panel.band {
            let (xa, xb) = $xr;
            let grey = RGBColor(215, 215, 215);
            chart
                .draw_series(std::iter::once(Rectangle::new(
                    [(xa, sy(*lo)), (xb, sy(*hi))],
                    grey.filled(),
                )))
                .map_err(|e| e.to_string())?
                .label(label.clone())
                .legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 18, y + 5)], grey.filled()));
            let small = TextStyle::from((PLOT_FONT, 14).into_font());
            for (at, word, vpos) in [
                (*hi, "upper limit", VPos::Top),
                (*lo, "lower limit", VPos::Bottom),
            ] {
                chart
                    .draw_series(std::iter::once(Text::new(
                        word,
                        (xa, sy(at)),
                        small.clone().pos(Pos::new(HPos::Left, vpos)),
                    )))
                    .map_err(|e| e.to_string())?;
            }
        }
        if let Some(n) = panel.nominal {
            let (xa, xb) = $xr;
            chart
                .draw_series(DashedLineSeries::new(
                    vec![(xa, sy(n)), (xb, sy(n))],
                    8,
                    5,
                    BLACK.stroke_width(1),
                ))
                .map_err(|e| e.to_string())?
                .label("nominal")
                .legend(|(x, y)| {
                    EmptyElement::at((x, y))
                        + PathElement::new(vec![(0, 0), (7, 0)], BLACK)
                        + PathElement::new(vec![(11, 0), (18, 0)], BLACK)
                });
        }
        if let Some((v, u, label)) = &panel.value {
            let (xa, xb) = $xr;
            let grey = RGBColor(90, 90, 90);
            for b in [v - u, v + u] {
                chart
                    .draw_series(DashedLineSeries::new(
                        vec![(xa, sy(b)), (xb, sy(b))],
                        2,
                        3,
                        grey.stroke_width(1),
                    ))
                    .map_err(|e| e.to_string())?;
            }
            chart
                .draw_series(LineSeries::new(
                    vec![(xa, sy(*v)), (xb, sy(*v))],
                    grey.stroke_width(2),
                ))
                .map_err(|e| e.to_string())?
                .label(label.clone())
                .legend(move |(x, y)| {
                    PathElement::new(vec![(x, y), (x + 18, y)], grey.stroke_width(2))
                });
        }
        for (i, c) in panel.curves.iter().enumerate() {
            let pts: Vec<(f64, f64)> =
                c.1.iter()
                    .filter(|t| t.0.is_finite() && t.1.is_finite() && t.0 > 0.0)
                    .map(|t| (sx(t.0), sy(t.1)))
                    .collect();
            let style = BLACK.stroke_width(2);
            if i == 0 {
                chart
                    .draw_series(LineSeries::new(pts, style))
                    .map_err(|e| e.to_string())?
                    .label(if c.0.contains("fit") {
                        legend_name(&c.0)
                    } else {
                        format!("{} (fit)", legend_name(&c.0))
                    })
                    .legend(|(x, y)| {
                        PathElement::new(vec![(x, y), (x + 18, y)], BLACK.stroke_width(2))
                    });
            } else {
                chart
                    .draw_series(DashedLineSeries::new(pts, 6, 4, style))
                    .map_err(|e| e.to_string())?
                    .label(legend_name(&c.0))
                    .legend(|(x, y)| PathElement::new(vec![(x, y), (x + 18, y)], BLACK));
            }
        }
        for (i, s) in panel.series.iter().enumerate() {
            let pts: Vec<(f64, f64, f64)> =
                s.1.iter()
                    .filter(|t| t.0.is_finite() && t.1.is_finite() && t.0 > 0.0)
                    .map(|t| {
                        (
                            sx(t.0),
                            sy(t.1),
                            if t.2.is_finite() {
                                t.2.abs() / ydiv
                            } else {
                                0.0
                            },
                        )
                    })
                    .collect();
            // Error bars as line segments with short caps.
            let bars: Vec<PathElement<(f64, f64)>> = pts
                .iter()
                .filter(|t| t.2 > 0.0)
                .map(|&(x, y, u)| PathElement::new(vec![(x, y - u), (x, y + u)], BLACK))
                .collect();
            chart.draw_series(bars).map_err(|e| e.to_string())?;
            let centre: Vec<(f64, f64)> = pts.iter().map(|t| (t.0, t.1)).collect();
            let label = legend_name(&s.0);
            if i == 0 {
                if centre.len() > 1 && panel.curves.is_empty() {
                    chart
                        .draw_series(LineSeries::new(centre.clone(), BLACK.stroke_width(1)))
                        .map_err(|e| e.to_string())?;
                }
                chart
                    .draw_series(centre.iter().map(|&p| Circle::new(p, 4, BLACK.filled())))
                    .map_err(|e| e.to_string())?
                    .label(label)
                    .legend(|(x, y)| Circle::new((x + 9, y), 4, BLACK.filled()));
            } else {
                if centre.len() > 1 {
                    chart
                        .draw_series(DashedLineSeries::new(
                            centre.clone(),
                            6,
                            4,
                            BLACK.stroke_width(1),
                        ))
                        .map_err(|e| e.to_string())?;
                }
                chart
                    .draw_series(
                        centre
                            .iter()
                            .map(|&p| TriangleMarker::new(p, 6, BLACK.stroke_width(2))),
                    )
                    .map_err(|e| e.to_string())?
                    .label(label)
                    .legend(|(x, y)| TriangleMarker::new((x + 9, y), 6, BLACK.stroke_width(2)));
            }
        }
        if !panel.residuals.is_empty() {
            let (xa, xb) = $xr;
            chart
                .draw_series(std::iter::once(PathElement::new(
                    vec![(xa, 0.0), (xb, 0.0)],
                    BLACK,
                )))
                .map_err(|e| e.to_string())?;
            let with_u: Vec<(f64, f64, f64)> = panel
                .residuals
                .iter()
                .filter(|t| t.0.is_finite() && t.1.is_finite() && t.0 > 0.0)
                .map(|t| {
                    (
                        sx(t.0),
                        sy(t.1),
                        if t.2.is_finite() {
                            t.2.abs() / ydiv
                        } else {
                            0.0
                        },
                    )
                })
                .collect();
            let pts: Vec<(f64, f64)> = with_u.iter().map(|t| (t.0, t.1)).collect();
            // Each residual's error bar, capped, beside its stem.
            chart
                .draw_series(
                    with_u
                        .iter()
                        .filter(|t| t.2 > 0.0)
                        .map(|&(x, y, u)| PathElement::new(vec![(x, y - u), (x, y + u)], BLACK)),
                )
                .map_err(|e| e.to_string())?;
            chart
                .draw_series(
                    pts.iter()
                        .map(|&(x, y)| PathElement::new(vec![(x, 0.0), (x, y)], BLACK)),
                )
                .map_err(|e| e.to_string())?;
            chart
                .draw_series(pts.iter().map(|&p| Cross::new(p, 5, BLACK.stroke_width(2))))
                .map_err(|e| e.to_string())?;
        }
        for (name, x) in panel.markers.iter().map(|m| (&m.0, m.1)) {
            if !x.is_finite() || x <= 0.0 {
                continue;
            }
            let x = sx(x);
            let dashed = name.as_str() != "f0";
            let line = vec![(x, y0), (x, y1)];
            if dashed {
                chart
                    .draw_series(DashedLineSeries::new(line, 3, 5, BLACK.stroke_width(1)))
                    .map_err(|e| e.to_string())?;
            } else {
                chart
                    .draw_series(LineSeries::new(line, BLACK.stroke_width(1)))
                    .map_err(|e| e.to_string())?;
            }
            let text = match name.as_str() {
                "f0" => "f₀".to_string(),
                "f_low" => "f₁".to_string(),
                "f_high" => "f₂".to_string(),
                other => other.to_string(),
            };
            chart
                .draw_series(std::iter::once(Text::new(
                    text,
                    (x, y1),
                    TextStyle::from((PLOT_FONT, 17).into_font())
                        .pos(Pos::new(HPos::Left, VPos::Top)),
                )))
                .map_err(|e| e.to_string())?;
        }
        let labelled = panel.series.len()
            + panel.curves.len()
            + usize::from(panel.band.is_some())
            + usize::from(panel.nominal.is_some())
            + usize::from(panel.value.is_some());
        let xfrac = $xfrac;
        let fractions: Vec<(f64, f64)> = panel
            .series
            .iter()
            .flat_map(|s| s.1.iter())
            .filter(|t| t.0.is_finite() && t.1.is_finite() && t.0 > 0.0)
            .map(|t| (xfrac(sx(t.0)), (sy(t.1) - y0) / (y1 - y0)))
            .collect();
        if labelled > 1 {
            chart
                .configure_series_labels()
                .position(legend_corner(&fractions))
                .background_style(WHITE.mix(0.9))
                .border_style(BLACK)
                .label_font((PLOT_FONT, 16).into_font())
                .draw()
                .map_err(|e| e.to_string())?;
        }
        Ok(())
    }};
}

fn draw_panel_lin(
    area: &DrawingArea<SVGBackend, Shift>,
    panel: &Panel,
    xr: (f64, f64),
    xdiv: f64,
    xdesc: &str,
    last: bool,
) -> Result<(), String> {
    let dec = tick_decimals(xr.0, xr.1, 8);
    panel_body!(
        area,
        panel,
        xr,
        xdiv,
        xdesc,
        last,
        xr.0..xr.1,
        |v: &f64| print::fixed(*v, dec),
        |x: f64| (x - xr.0) / (xr.1 - xr.0)
    )
}

fn draw_panel_log(
    area: &DrawingArea<SVGBackend, Shift>,
    panel: &Panel,
    xr: (f64, f64),
    xdiv: f64,
    xdesc: &str,
    last: bool,
) -> Result<(), String> {
    panel_body!(
        area,
        panel,
        xr,
        xdiv,
        xdesc,
        last,
        (xr.0..xr.1)
            .log_scale()
            .with_key_points(log_ticks(xr.0, xr.1)),
        // 1-2-5 ticks print each in its shortest form: 0.5, 1, 2, 5.
        |v: &f64| print::trim_sig(*v, 3),
        |x: f64| (x / xr.0).ln() / (xr.1 / xr.0).ln()
    )
}

/// Tick positions on a log axis: 1-2-5 per decade up to three decades, else decades.
fn log_ticks(lo: f64, hi: f64) -> Vec<f64> {
    if !(lo > 0.0 && hi > lo && lo.is_finite() && hi.is_finite()) {
        return Vec::new();
    }
    let steps: &[f64] = if hi / lo <= 1000.0 {
        &[1.0, 2.0, 5.0]
    } else {
        &[1.0]
    };
    let mut out = Vec::new();
    let mut e = lo.log10().floor() as i32;
    while 10f64.powi(e) <= hi && out.len() < 40 {
        for s in steps {
            let v = s * 10f64.powi(e);
            if v >= lo && v <= hi {
                out.push(v);
            }
        }
        e += 1;
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::notebook::Network;

    fn block(network: Network, plot: PlotData) -> BlockResult {
        BlockResult {
            id: "b1".into(),
            network,
            rows: vec![],
            results: vec![],
            correlations: vec![],
            flags: vec![],
            plot,
        }
    }

    #[test]
    fn rc_plot_has_axes_band_and_error_bars() {
        // Synthetic capacitor of 330 nF read at 200 Hz … 5 kHz (more than a decade: log x).
        let c: Vec<(f64, f64, f64)> = [200.0, 500.0, 1000.0, 2000.0, 5000.0]
            .iter()
            .map(|&f| (f, 330e-9 * (1.0 + f * 1e-6), 2e-9))
            .collect();
        let ph: Vec<(f64, f64, f64)> = c
            .iter()
            .map(|&(f, _, _)| (f, (1.0f64 / (f / 1000.0)).atan(), 0.01))
            .collect();
        let plot = PlotData {
            series: vec![
                ("C".into(), c),
                ("phase".into(), ph.clone()),
                ("phase_measured".into(), ph),
            ],
            curves: vec![],
            markers: vec![],
        };
        let plots = block_plots(
            &block(Network::RC, plot),
            Some(Judged {
                name: "C",
                low: 313.5e-9,
                high: 346.5e-9,
                nominal: Some(330e-9),
                value: Some((331e-9, 1.5e-9)),
            }),
        )
        .unwrap();
        assert_eq!(plots.len(), 1);
        let svg = &plots[0].svg;
        let text: Vec<&str> = plots[0].labels.iter().map(|l| l.text.as_str()).collect();
        assert!(svg.starts_with("<svg") && plots[0].drawing.starts_with("<svg"));
        assert!(svg.contains("C / nF"), "the whole SVG keeps its text");
        assert!(
            !plots[0].drawing.contains("<text"),
            "labels are set by the template"
        );
        assert!(text.contains(&"C / nF"), "axis label quantity/unit");
        assert!(text.contains(&"f / kHz"));
        assert!(text.contains(&"φ / °"));
        assert!(text.contains(&"tolerance of C"));
        // The verdict can be read off the figure: nominal, block value ± U, labelled limits.
        for t in ["nominal", "block C ± U", "upper limit", "lower limit"] {
            assert!(text.contains(&t), "no `{t}` in {text:?}");
        }
        assert!(plots[0].caption.contains("the nominal (dashed)"));
        assert!(plots[0].caption.ends_with("; phase below."));
        // Log axis ticks in their shortest form; y ticks with one number of decimals.
        assert!(
            text.contains(&"0.5") && text.contains(&"1") && text.contains(&"5"),
            "{text:?}"
        );
        assert!(!text.contains(&"0.500") && !text.contains(&"1.00"));
        assert!(
            plots[0].labels.iter().any(|l| l.rotate == 270.0),
            "y label turned"
        );
        // 1-2-5 ticks on the log axis: 0.2, 0.5, 1, 2, 5 kHz.
        assert_eq!(log_ticks(0.15, 6.5), vec![0.2, 0.5, 1.0, 2.0, 5.0]);
        assert!(!svg.contains("NaN"));
    }

    #[test]
    fn rlc_plot_has_residual_panel_and_markers() {
        let f0 = 2000.0f64;
        let y = |f: f64| 1.0 / (100.0 * (1.0 + (4.0 * (f / f0 - f0 / f)).powi(2)).sqrt());
        let pts: Vec<(f64, f64, f64)> = (0..12)
            .map(|i| 1200.0 + 140.0 * i as f64)
            .map(|f| (f, y(f) * 1.01, 1e-4))
            .collect();
        let curve: Vec<(f64, f64)> = (0..200)
            .map(|i| 1100.0 + 9.0 * i as f64)
            .map(|f| (f, y(f)))
            .collect();
        let plot = PlotData {
            series: vec![("Y".into(), pts)],
            curves: vec![("Y".into(), curve)],
            markers: vec![
                ("f0".into(), f0),
                ("f_low".into(), 1780.0),
                ("f_high".into(), 2250.0),
                ("bad".into(), f64::NAN),
            ],
        };
        let plots = block_plots(&block(Network::RLC, plot), None).unwrap();
        let svg = &plots[0].svg;
        let text: Vec<&str> = plots[0].labels.iter().map(|l| l.text.as_str()).collect();
        assert!(
            text.iter().any(|t| t.starts_with("|Y| − fit")),
            "residual panel"
        );
        assert!(text.contains(&"f₀"));
        assert!(text.contains(&"|Y| / mS"));
        assert!(!svg.contains("NaN"));
    }

    #[test]
    fn empty_plot_data_gives_no_figure() {
        assert!(block_plots(&block(Network::RC, PlotData::default()), None)
            .unwrap()
            .is_empty());
    }

    // Ticks of one axis print alike (the issue of mixed "8.00" beside "12.0"): plotters puts
    // 96, 98, …, 104 on this range, so no decimals; 0.25-steps need two.
    #[test]
    fn tick_labels_share_their_decimals() {
        assert_eq!(tick_decimals(95.1, 104.9, 6), 0);
        assert_eq!(tick_decimals(0.0, 1.0, 6), 1);
        assert_eq!(tick_decimals(0.01, 0.06, 6), 2);
    }

    // The legend goes to the corner with the fewest points under it.
    #[test]
    fn the_legend_avoids_the_points() {
        let upper_right = [(0.9, 0.9), (0.8, 0.95), (0.2, 0.1)];
        assert_eq!(legend_corner(&upper_right), SeriesLabelPosition::UpperLeft);
        let busy_top = [(0.9, 0.9), (0.1, 0.9), (0.2, 0.1)];
        assert_eq!(legend_corner(&busy_top), SeriesLabelPosition::LowerRight);
        assert_eq!(legend_corner(&[]), SeriesLabelPosition::UpperRight);
    }
}
