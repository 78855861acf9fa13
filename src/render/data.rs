//! The data the template receives: one JSON document (`/data.json`) plus generated files
//! (prose markup, plot SVGs, images, the notebook source). Numbers are formatted here once
//! (digits per GUM 7.2.6) so every template prints the same values; layout is the
//! template's business.

use std::collections::BTreeMap;

use serde_json::{json, Value};

use crate::judge::{Outcome, Record, SignState};
use crate::networks::{BlockResult, NamedResult, PlotKind};
use crate::notebook::{Accuracy, Column, Decision, Item, Part, PartKind, ReadingsBlock, Tolerance};
use crate::print::{self, dof_text, k_text, sci, sig};
use crate::quantity::{Quantity, Unit};
use crate::render::markup::{self, Context};
use crate::render::metrics;
use crate::render::plots;
use crate::render::Assets;
use crate::uncertainty::{Dist, EvalType};

/// Everything generated for one render.
pub struct Generated {
    /// `/data.json` and other byte files, by virtual path.
    pub files: BTreeMap<String, Vec<u8>>,
    /// Typst sources (prose markup), by virtual path.
    pub sources: BTreeMap<String, String>,
    /// Virtual path of the notebook source (the attachment).
    pub attachment: String,
}

fn q(qty: &Quantity) -> String {
    if qty.unit == Unit::Percent {
        return print::percent(qty.value);
    }
    print::quantity(qty.value, qty.unit)
}

/// Symbol of a result or column as (base, subscript, italic base), ISO 80000-1 style:
/// the quantity symbol italic, a descriptive subscript upright.
pub fn symbol_parts(name: &str) -> (String, String, bool) {
    let s = |b: &str, sub: &str| (b.to_string(), sub.to_string(), true);
    match name {
        "f" => s("f", ""),
        "Vs" => s("V", "s"),
        "VR" => s("V", "R"),
        "VC" => s("V", "C"),
        "VL" => s("V", "L"),
        "V" => s("V", ""),
        "I" => s("I", ""),
        "phi" => s("φ", ""),
        "XC" => s("X", "C"),
        "XL" => s("X", "L"),
        "XL_dcr" => s("X", "L,dcr"),
        "L_dcr" => s("L", "dcr"),
        "Rac" => s("R", "ac"),
        "Rtotal" => s("R", "tot"),
        "Z" => s("|Z|", ""),
        "BW" => s("B", ""),
        "f0" => s("f", "0"),
        "f0_peak" => s("f", "0,peak"),
        "phase" => s("φ", "pred"),
        "phase_measured" => s("φ", "meas"),
        "residual" => s("ΔV", "s"),
        "shift" | "period" => (name.to_string(), String::new(), false),
        other => match other.split_once('_') {
            Some((head, tail)) => {
                let (b, sub, italic) = symbol_parts(head);
                let sub = if sub.is_empty() {
                    tail.to_string()
                } else {
                    format!("{sub},{tail}")
                };
                (b, sub, italic)
            }
            None if other.chars().count() <= 2 => {
                let mut cs = other.chars();
                let b: String = cs.next().map(String::from).unwrap_or_default();
                s(&b, cs.as_str())
            }
            None => (other.to_string(), String::new(), false),
        },
    }
}

pub(crate) fn symbol_json(name: &str) -> Value {
    let (base, sub, italic) = symbol_parts(name);
    json!({ "base": base, "sub": sub, "italic": italic })
}

/// The unit of a column heading as written (`VR/mV` → `mV`), in print form.
fn heading_unit(col: &Column) -> String {
    let h = col.heading.trim();
    let written = if let Some((_, u)) = h.split_once('/') {
        Some(u.trim().to_string())
    } else if let (Some(a), Some(b)) = (h.find('('), h.rfind(')')) {
        h.get(a + 1..b).map(|u| u.trim().to_string())
    } else {
        None
    };
    match written {
        Some(u) if !u.is_empty() => print_unit(&u),
        _ => print::unit_text(col.unit).to_string(),
    }
}

fn print_unit(u: &str) -> String {
    let u = u.replace("ohm", "Ω").replace("deg", "°");
    match u.strip_prefix('u') {
        Some(rest) if !rest.is_empty() => format!("µ{rest}"),
        _ => u,
    }
}

fn accuracy_text(a: &Accuracy) -> String {
    match a {
        Accuracy::Relative { fraction, counts } if *counts > 0.0 => format!(
            "±({} of reading + {} counts)",
            print::percent(*fraction),
            print::trim(*counts)
        ),
        Accuracy::Relative { fraction, .. } => format!("±{} of reading", print::percent(*fraction)),
        Accuracy::Absolute(a) => format!("±{}", q(a)),
    }
}

fn instrument_json(name: &str, i: &crate::notebook::Instrument, date: chrono::NaiveDate) -> Value {
    let mut accuracy = i.accuracy.as_ref().map(accuracy_text);
    if !i.range_accuracy.is_empty() {
        let per: Vec<String> = (i.range_accuracy.iter())
            .filter_map(|(r, a)| Some((i.ranges.get(*r)?, a)))
            .map(|(r, a)| format!("{} on {}", accuracy_text(a), q(&r.full_scale)))
            .collect();
        accuracy = Some(per.join("; "));
    } else if !i.ranges.is_empty() {
        let ranges: Vec<String> = i.ranges.iter().map(|r| q(&r.full_scale)).collect();
        let head = accuracy.map(|a| format!("{a}; ")).unwrap_or_default();
        accuracy = Some(format!("{head}ranges {}", ranges.join(", ")));
    }
    let overdue = i.due.is_some_and(|d| d < date);
    json!({
        "name": name,
        "what": i.what,
        "accuracy": accuracy,
        "distribution": match i.distribution {
            crate::notebook::Distribution::Rectangular => "rectangular".to_string(),
            crate::notebook::Distribution::Normal { k } => format!("normal, k = {}", k_text(k)),
        },
        "resolution": i.resolution.as_ref().map(q),
        "bandwidth": i.bandwidth.map(|b| print::quantity(b, Unit::Hz)),
        "reading": i.reading.as_ref().map(q),
        "calibrated": i.calibrated.map(|d| d.to_string()),
        "due": i.due.map(|d| d.to_string()),
        "overdue": overdue,
    })
}

/// Where an instrument's entry comes from, and the certificate of the calibration current on
/// the readings' date when the lab register holds it.
fn register_fields(v: &mut Value, name: &str, lab: Option<&crate::notebook::register::LabUse>) {
    let used = lab.and_then(|l| l.asset(name));
    let source = match (
        used,
        lab.is_some_and(|l| l.overrides.iter().any(|o| o == name)),
    ) {
        (Some(_), _) => "lab register",
        (None, true) => "notebook, over the register",
        (None, false) => "notebook",
    };
    v["source"] = json!(source);
    v["certificate"] = json!(used
        .and_then(|u| u.calibration.as_ref())
        .and_then(|c| c.certificate.clone()));
}

/// The derating policy the safety checks used, and where it comes from.
fn derating_json(record: &Record) -> Value {
    let d = &record.derating;
    let from_register = record
        .notebook
        .lab
        .as_ref()
        .is_some_and(|l| l.derating.is_some());
    json!({
        "resistor_power": print::percent(d.resistor_power),
        "capacitor_voltage": print::percent(d.capacitor_voltage),
        "inductor_current": print::percent(d.inductor_current),
        "source": if from_register { "the lab register's policy (lab.yaml)" } else { "common bench practice" },
    })
}

fn tolerance_text(t: &Tolerance, unit: Unit) -> String {
    match t {
        Tolerance::Relative(f) => format!("±{}", print::percent(*f)),
        Tolerance::Absolute(a) => format!("±{}", print::quantity(*a, unit)),
        Tolerance::Code(c, f) => format!("{c} (±{})", print::percent(*f)),
    }
}

/// The tolerance, then a capacitor's loss limits (`D ≤ 5 %; ESR ≤ 2 Ω`).
fn tolerance_cell(p: &Part, unit: Unit) -> Option<String> {
    let mut cell: Vec<String> = p
        .tolerance
        .iter()
        .map(|t| tolerance_text(t, unit))
        .collect();
    cell.extend(p.loss.max_d.map(|d| format!("D ≤ {}", print::percent(d))));
    cell.extend(
        p.loss
            .max_esr
            .map(|r| format!("ESR ≤ {}", print::quantity(r, Unit::Ohm))),
    );
    (!cell.is_empty()).then(|| cell.join("; "))
}

fn part_json(name: &str, p: &Part) -> Value {
    let unit = p.kind.unit();
    json!({
        "name": name,
        "kind": match p.kind {
            PartKind::Resistor => "resistor",
            PartKind::Capacitor => "capacitor",
            PartKind::Inductor => "inductor",
        },
        "nominal": p.nominal.as_ref().map(q),
        "tolerance": tolerance_cell(p, unit),
        "measured": p.measured.as_ref().map(q),
        "measured_by": p.measured_by,
        "dcr": p.dcr.as_ref().map(q),
        "dcr_by": p.dcr_by,
        "rating": p.rating.as_ref().map(q),
    })
}

fn dist_text(d: Dist) -> &'static str {
    match d {
        Dist::Normal => "normal",
        Dist::Rectangular => "rectangular",
        Dist::StudentT => "t",
    }
}

/// A long input name with zero-width break points after `,` `_` `(` `@`, so a table that
/// must wrap it can (typst finds no break in `counts(bench_meter_2,VR@1 kHz)` otherwise).
fn break_points(name: &str) -> String {
    if name.chars().count() <= 30 {
        return name.to_string();
    }
    let mut out = String::with_capacity(name.len() + 16);
    for c in name.chars() {
        out.push(c);
        if matches!(c, ',' | '_' | '(' | '@') {
            out.push('\u{200B}');
        }
    }
    out
}

/// The unit of a readings column symbol, for budget cells; `None` where it depends on the
/// column heading (phase) or is not a column.
fn symbol_unit(sym: &str) -> Option<&'static str> {
    match sym {
        "Vs" | "VR" | "VC" | "VL" | "V" | "VT" => Some("V"),
        "I" | "IR" | "IC" | "IL" => Some("A"),
        "f" => Some("Hz"),
        "shift" | "period" => Some("div"),
        _ => None,
    }
}

/// A budget input's name as a reader says it, and the unit of its estimate and u:
/// `gain(dmm,VR)` → "VR gain, dmm" (a relative factor), `counts(dmm,VR@1 kHz)` → "VR counts
/// at 1 kHz, dmm", `read(scope,shift@1 kHz)` → "shift read-off at 1 kHz, scope",
/// `VR@1 kHz` → "VR at 1 kHz". Other names (parts, fit parameters) are kept.
pub fn readable_input(name: &str) -> (String, Option<&'static str>) {
    let at = |tag: &str| -> (String, Option<&'static str>) {
        match tag.split_once('@') {
            Some((sym, f)) => (format!("{sym} at {f}"), symbol_unit(sym)),
            None => (tag.to_string(), symbol_unit(tag)),
        }
    };
    let call = name
        .split_once('(')
        .and_then(|(head, rest)| Some((head, rest.strip_suffix(')')?)))
        .and_then(|(head, args)| Some((head, args.split_once(',')?)));
    match call {
        // One gain per instrument range (`ranges`): `gain(dmm,2 V range)`.
        Some(("gain", (inst, range))) if range.ends_with(" range") => {
            (format!("gain, {inst} {range}"), Some("1"))
        }
        Some(("gain", (inst, sym))) => (format!("{sym} gain, {inst}"), Some("1")),
        Some((label @ ("counts" | "read"), (inst, tag))) => {
            let (what, unit) = at(tag);
            let word = if label == "read" {
                "read-off"
            } else {
                "counts"
            };
            let what = match what.split_once(" at ") {
                Some((sym, f)) => format!("{sym} {word} at {f}, {inst}"),
                None => format!("{what} {word}, {inst}"),
            };
            (what, unit)
        }
        Some(_) => (name.to_string(), None),
        None if name.contains('@') || symbol_unit(name).is_some() => at(name),
        None => (name.to_string(), None),
    }
}

/// The largest contributions to u_c², as "VR gain, dmm 49 %; VC gain, dmm 47 %" (at most
/// three, each at least 5 %).
fn largest_contributions(m: &crate::uncertainty::Measured) -> String {
    let total: f64 = m.budget.iter().map(|b| b.contribution.powi(2)).sum();
    if !(total > 0.0) {
        return String::new();
    }
    let mut order: Vec<usize> = (0..m.budget.len()).collect();
    order.sort_by(|&a, &b| {
        m.budget[b]
            .contribution
            .abs()
            .total_cmp(&m.budget[a].contribution.abs())
    });
    order
        .iter()
        .take(3)
        .map(|&i| (&m.budget[i], m.budget[i].contribution.powi(2) / total))
        .filter(|(_, share)| *share >= 0.05)
        .map(|(b, share)| format!("{} {:.0} %", readable_input(&b.input).0, 100.0 * share))
        .collect::<Vec<_>>()
        .join("; ")
}

/// A block result with its budget.
fn result_json(r: &NamedResult) -> Value {
    let m = &r.m;
    let (div, unit) = print::scale_for(r.unit, m.value.abs().max(m.expanded.abs()));
    let with_unit = |x: String| {
        if unit.is_empty() {
            x
        } else if unit == "°" {
            format!("{x}°")
        } else {
            format!("{x} {unit}")
        }
    };
    let (v, e) = print::value_and_u(m.value / div, m.expanded / div);
    // A long budget prints its largest contributions (in budget order) and sums the rest.
    let mut keep: Vec<usize> = (0..m.budget.len()).collect();
    let mut omitted = Value::Null;
    if m.budget.len() > BUDGET_LINES {
        keep.sort_by(|&a, &b| {
            m.budget[b]
                .contribution
                .total_cmp(&m.budget[a].contribution)
        });
        let rest: f64 = keep[BUDGET_LINES..]
            .iter()
            .map(|&i| m.budget[i].contribution.powi(2))
            .sum();
        omitted = json!({
            "count": keep.len() - BUDGET_LINES,
            "u": with_unit(sci(rest.sqrt() / div, 2)),
        });
        keep.truncate(BUDGET_LINES);
        keep.sort_unstable();
    }
    let lines: Vec<Value> = keep
        .iter()
        .map(|&i| &m.budget[i])
        .map(|b| {
            let (name, unit) = readable_input(&b.input);
            let with = |x: String| match unit {
                Some(u) if u != "1" && x != "—" => format!("{x} {u}"),
                _ => x,
            };
            json!({
                "input": break_points(&name),
                "estimate": with(sci(b.estimate, 5)),
                "u": with(sci(b.u, 2)),
                "type": match b.kind { EvalType::A => "A", EvalType::B => "B" },
                "distribution": dist_text(b.dist),
                "sensitivity": sci(b.sensitivity, 3),
                "contribution": with_unit(sci(b.contribution / div, 2)),
                "dof": dof_text(b.dof),
            })
        })
        .collect();
    let field = |k: &str| {
        metrics::widest(
            lines
                .iter()
                .map(|l| l.get(k).and_then(Value::as_str).unwrap_or("")),
        )
    };
    let budget_widths: Vec<f64> = [
        "input",
        "estimate",
        "u",
        "type",
        "distribution",
        "sensitivity",
        "contribution",
        "dof",
    ]
    .iter()
    .map(|k| field(k))
    .collect();
    let mc = m.mc.as_ref().map(|mc| {
        let (lo, hi) = (mc.low / div, mc.high / div);
        json!({
            "trials": mc.trials,
            "mean": with_unit(sig(mc.mean / div, 5)),
            "u": with_unit(sig(mc.u / div, 2)),
            "interval": with_unit(format!("[{}, {}]", sig(lo, 5), sig(hi, 5))),
            "validated": mc.gum_validated,
            "conditional": mc_conditional(mc),
        })
    });
    json!({
        "name": r.name,
        "symbol": symbol_json(&r.name),
        "unit": unit,
        "value": v,
        "U": e,
        "k": k_text(m.k),
        "text": print::value_u_k(m.value, m.expanded, m.k, r.unit),
        "u": with_unit(sig(m.u / div, 2)),
        "dof": dof_text(m.dof),
        "budget": lines,
        "largest": largest_contributions(m),
        "budget_widths": budget_widths,
        "budget_omitted": omitted,
        "mc": mc,
    })
}

/// "" or, for an interval from fewer trials than were drawn, what it is conditional on.
fn mc_conditional(mc: &crate::uncertainty::McInterval) -> String {
    if mc.dropped == 0 {
        return String::new();
    }
    format!(
        "conditional on the model being defined: {} of {} trials ({}) dropped",
        mc.dropped,
        mc.trials + mc.dropped,
        print::percent(print::round_sig(
            mc.dropped as f64 / (mc.trials + mc.dropped) as f64,
            2
        ))
    )
}

/// A per-frequency result as printed: value ± U, and the Monte Carlo interval where the GUM
/// interval failed the JCGM 101 §8 check.
fn row_text(r: &NamedResult) -> String {
    let gum = print::value_u_k(r.m.value, r.m.expanded, r.m.k, r.unit);
    match r.m.mc.as_ref().filter(|mc| !mc.gum_validated) {
        None => gum,
        Some(mc) => {
            let c = mc_conditional(mc);
            format!(
                "{gum}; Monte Carlo {}{}",
                print::interval(mc.low, mc.high, r.unit),
                if c.is_empty() { c } else { format!(", {c}") }
            )
        }
    }
}

/// The per-frequency results: long form and a grid (one column per result name).
fn frequency_json(block: &BlockResult) -> (Value, Value) {
    let long: Vec<Value> = block
        .rows
        .iter()
        .take(PRINT_ROWS * 8)
        .map(|r| {
            json!({
                "name": r.name,
                "f": r.f.map(|f| print::quantity(f, Unit::Hz)),
                "text": row_text(r),
                "k": k_text(r.m.k),
            })
        })
        .collect();
    let mut names: Vec<&str> = Vec::new();
    let mut freqs: Vec<f64> = Vec::new();
    for r in &block.rows {
        if !names.contains(&r.name.as_str()) {
            names.push(&r.name);
        }
        if let Some(f) = r.f {
            if !freqs.iter().any(|g| same_f(*g, f)) {
                freqs.push(f);
            }
        }
    }
    let fmin = freqs
        .iter()
        .copied()
        .filter(|f| *f > 0.0)
        .fold(f64::INFINITY, f64::min);
    let (fdiv, fprefix) = print::prefix_for(if fmin.is_finite() { fmin } else { 1.0 });
    let mut columns = Vec::new();
    let mut scales = Vec::new();
    for name in &names {
        let of: Vec<&NamedResult> = block.rows.iter().filter(|r| r.name == *name).collect();
        let unit = of.first().map(|r| r.unit).unwrap_or(Unit::One);
        let mut mags: Vec<f64> = of
            .iter()
            .map(|r| r.m.value.abs())
            .filter(|v| v.is_finite())
            .collect();
        mags.sort_by(f64::total_cmp);
        let median = mags.get(mags.len() / 2).copied().unwrap_or(0.0);
        let (div, utext) = print::scale_for(unit, median);
        let ks: Vec<String> = of.iter().map(|r| k_text(r.m.k)).collect();
        let common_k = ks.first().filter(|k0| ks.iter().all(|k| k == *k0)).cloned();
        columns.push(
            json!({ "name": name, "symbol": symbol_json(name), "unit": utext, "k": common_k }),
        );
        scales.push((div, common_k.is_none()));
    }
    // Results by (name, frequency), so a long sweep is not searched row by row.
    let mut index: std::collections::HashMap<(&str, u64), &NamedResult> =
        std::collections::HashMap::new();
    for r in &block.rows {
        if let Some(f) = r.f {
            index.entry((r.name.as_str(), f.to_bits())).or_insert(r);
        }
    }
    let (shown, omitted) = head_and_tail(freqs.len());
    // Cells whose GUM interval Monte Carlo did not validate (JCGM 101 §8): marked, and their
    // Monte Carlo intervals listed under the table.
    let mut mc_list: Vec<Value> = Vec::new();
    let rows: Vec<Value> = shown
        .iter()
        .map(|&i| match i {
            None => json!({ "f": "⋮", "cells": names.iter().map(|_| json!({"text": "⋮", "k": null})).collect::<Vec<_>>() }),
            Some(i) => {
            let f = freqs[i];
            let cells: Vec<Value> = names
                .iter()
                .zip(&scales)
                .map(|(name, (div, show_k))| {
                    match index.get(&(*name, f.to_bits())).copied().or_else(|| {
                        block.rows.iter().find(|r| r.name == *name && r.f.is_some_and(|g| same_f(g, f)))
                    }) {
                        Some(r) => {
                            let (v, e) = print::value_and_u(r.m.value / div, r.m.expanded / div);
                            let k = if *show_k { Some(k_text(r.m.k)) } else { None };
                            let mark = match r.m.mc.as_ref().filter(|mc| !mc.gum_validated && mc.trials >= 2) {
                                Some(mc) => {
                                    mc_list.push(json!({
                                        "symbol": symbol_json(name),
                                        "f": print::quantity(f, Unit::Hz),
                                        "interval": print::interval(mc.low, mc.high, r.unit),
                                        "conditional": mc_conditional(mc),
                                    }));
                                    " †"
                                }
                                None => "",
                            };
                            json!({ "text": format!("{v} ± {e}{mark}"), "k": k })
                        }
                        None => json!({ "text": "—", "k": null }),
                    }
                })
                .collect();
            json!({ "f": print::trim_sig(f / fdiv, 5), "cells": cells })
            }
        })
        .collect();
    let mut widths = vec![metrics::widest(
        rows.iter().map(|r| r["f"].as_str().unwrap_or("")),
    )];
    for c in 0..names.len() {
        let w = metrics::widest_of(rows.iter().map(|r| {
            let cell = &r["cells"][c];
            let text = metrics::em_width(cell["text"].as_str().unwrap_or(""));
            // The template sets k as a 0.6 em superscript after a 1.5 pt space.
            let k = cell["k"]
                .as_str()
                .map_or(0.0, |k| 0.2 + 0.6 * metrics::em_width(&format!("k={k}")));
            text + k
        }));
        widths.push(w);
    }
    let grid = json!({
        "f_unit": format!("{fprefix}Hz"), "columns": columns, "rows": rows, "omitted": omitted,
        "widths": widths, "mc": mc_list,
    });
    (Value::Array(long), grid)
}

/// Longest table printed whole; a longer one prints its first and last halves of this.
pub const PRINT_ROWS: usize = 60;
/// Budget lines printed; the rest are summed into one line.
pub const BUDGET_LINES: usize = 30;
/// Flags printed per block; all of them stay in the results export.
pub const PRINT_FLAGS: usize = 40;
/// Points per plotted series; longer series are thinned evenly (the fit uses every point).
pub const PLOT_POINTS: usize = 1500;

/// Indices to print for `n` rows: all of them, or head, a gap (`None`), tail; and how many
/// were left out.
fn head_and_tail(n: usize) -> (Vec<Option<usize>>, usize) {
    if n <= PRINT_ROWS {
        return ((0..n).map(Some).collect(), 0);
    }
    let h = PRINT_ROWS / 2;
    let mut v: Vec<Option<usize>> = (0..h).map(Some).collect();
    v.push(None);
    v.extend((n - h..n).map(Some));
    (v, n - 2 * h)
}

/// A copy of the block with every plot series thinned to at most `PLOT_POINTS`, or None when
/// nothing needs thinning.
fn thin_for_plotting(block: &BlockResult) -> Option<BlockResult> {
    let long = |n: usize| n > PLOT_POINTS;
    if !block.plot.series.iter().any(|(_, s)| long(s.len()))
        && !block.plot.curves.iter().any(|(_, c)| long(c.len()))
    {
        return None;
    }
    fn thin<T: Clone>(v: &[T]) -> Vec<T> {
        if v.len() <= PLOT_POINTS {
            return v.to_vec();
        }
        let step = v.len().div_ceil(PLOT_POINTS);
        let mut out: Vec<T> = v.iter().step_by(step).cloned().collect();
        if (v.len() - 1) % step != 0 {
            if let Some(last) = v.last() {
                out.push(last.clone());
            }
        }
        out
    }
    let mut b = BlockResult {
        id: block.id.clone(),
        network: block.network,
        rows: Vec::new(),
        results: block.results.clone(),
        correlations: Vec::new(),
        flags: Vec::new(),
        plot: block.plot.clone(),
    };
    for (_, s) in &mut b.plot.series {
        *s = thin(s);
    }
    for (_, c) in &mut b.plot.curves {
        *c = thin(c);
    }
    Some(b)
}

fn same_f(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-9 * a.abs().max(b.abs()).max(1e-300)
}

/// What the block's main plot is judged against: the verdict's interval, nominal and block
/// value ± U, else the tolerance of the block's part of the kind.
fn judged_for<'a>(
    record: &Record,
    rb: &ReadingsBlock,
    block: &'a BlockResult,
) -> Option<plots::Judged<'static>> {
    let PlotKind::PerFrequency {
        band: (want, kind), ..
    } = block.network.descriptor().plot
    else {
        return None;
    };
    if let Some(v) = record
        .verdicts
        .iter()
        .find(|v| v.block == block.id && v.name == want && v.serial.is_none())
    {
        return Some(plots::Judged {
            name: want,
            low: v.low,
            high: v.high,
            nominal: Some(v.nominal),
            value: Some((v.value, v.expanded)),
        });
    }
    rb.parts
        .iter()
        .filter_map(|n| record.notebook.front.parts.get(&n.name))
        .find(|p| p.kind == kind)
        .and_then(|p| {
            let nominal = p.nominal.as_ref()?.value;
            let (lo, hi) = crate::judge::tolerance_interval(nominal, p.tolerance.as_ref()?);
            Some(plots::Judged {
                name: want,
                low: lo,
                high: hi,
                nominal: Some(nominal),
                value: None,
            })
        })
}

fn outcome_word(o: Outcome) -> &'static str {
    match o {
        Outcome::Pass => "pass",
        Outcome::Fail => "fail",
        Outcome::Inconclusive => "inconclusive",
    }
}

/// The attachment name of each table file the notebook reads (`table:`), in the order of
/// `notebook::table_refs`: (path as written, name). The name is the path made safe (`/` becomes
/// `_`), never one of the record's other attachments or a `.md` name (a PDF carries one notebook),
/// and unique. `verify` and `index` find the files again by these names.
pub fn table_attachments(
    nb: &crate::notebook::Notebook,
    source_name: &str,
) -> Vec<(String, String)> {
    let mut taken = vec![
        attachment_name(source_name),
        SUMMARY_PATH.trim_start_matches('/').to_string(),
    ];
    let mut out = Vec::new();
    for (rel, _) in crate::notebook::table_refs(nb) {
        let mut name = attachment_name(&rel.replace(['/', '\\'], "_"));
        if name.ends_with(".md") || name == "notebook.md" {
            name = format!("{name}.txt");
        }
        let mut unique = name.clone();
        let mut n = 2;
        while taken.contains(&unique) {
            unique = format!("{n}-{name}");
            n += 1;
        }
        taken.push(unique.clone());
        out.push((rel, unique));
    }
    out
}

/// A file name safe as a PDF attachment name and a virtual path.
fn attachment_name(source_name: &str) -> String {
    let base = source_name.rsplit(['/', '\\']).next().unwrap_or("");
    let clean: String = base
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || matches!(c, '.' | '-' | '_') {
                c
            } else {
                '_'
            }
        })
        .collect();
    let clean = clean.trim_start_matches('.').to_string();
    if clean.is_empty() || clean == "main.typ" || clean == "data.json" {
        "notebook.md".into()
    } else {
        clean
    }
}

fn image_ext(path: &str, bytes: &[u8]) -> &'static str {
    if bytes.starts_with(b"\x89PNG") {
        "png"
    } else if bytes.starts_with(&[0xFF, 0xD8]) {
        "jpg"
    } else if bytes.starts_with(b"GIF8") {
        "gif"
    } else if bytes.len() > 12
        && bytes.get(0..4) == Some(b"RIFF")
        && bytes.get(8..12) == Some(b"WEBP")
    {
        "webp"
    } else if path.to_ascii_lowercase().ends_with(".svg") {
        "svg"
    } else {
        "bin"
    }
}

/// A verdict's value: value ± U, or with the Monte Carlo interval it was judged by.
fn verdict_value(v: &crate::judge::Verdict) -> String {
    let gum = print::value_u_k(v.value, v.expanded, v.k, v.unit);
    match v.mc {
        None => gum,
        Some(i) => format!(
            "{gum}; judged by the Monte Carlo interval {}{}",
            print::interval(i.low, i.high, v.unit),
            if i.dropped > 0 {
                format!(
                    ", conditional: {} of {} trials dropped",
                    i.dropped,
                    i.trials + i.dropped
                )
            } else {
                String::new()
            }
        ),
    }
}

/// The printed `<name>_clean` of a verdict's block (the judged result without the rows that
/// carry warnings), where the network gives one.
fn clean_of(record: &Record, v: &crate::judge::Verdict) -> Option<String> {
    let b = record.reduction.blocks.iter().find(|b| b.id == v.block)?;
    let want = format!("{}_clean", v.name);
    let r = b
        .results
        .iter()
        .find(|r| r.name == want && v.serial.is_none())?;
    Some(print::value_u_k(r.m.value, r.m.expanded, r.m.k, r.unit))
}

/// The verdicts table.
fn verdicts_json(record: &Record) -> Vec<Value> {
    // Blocks with warnings: their verdicts are marked in the summary.
    let warned_blocks: std::collections::BTreeSet<&str> = record
        .reduction
        .blocks
        .iter()
        .filter(|b| b.flags.iter().any(|f| f.warn))
        .map(|b| b.id.as_str())
        .collect();
    let mut out: Vec<Value> = record
        .verdicts
        .iter()
        .filter(|v| v.serial.is_none())
        .map(|v| {
            json!({
                "block": v.block,
                "name": v.name,
                "symbol": symbol_json(&v.name),
                "part": v.part,
                "nominal": print::quantity(v.nominal, v.unit),
                "interval": print::interval(v.low, v.high, v.unit),
                "value": match clean_of(record, v) {
                    Some(c) => format!("{}; without the rows with warnings {}", verdict_value(v), c),
                    None => verdict_value(v),
                },
                "outcome": outcome_word(v.outcome),
                "warned": warned_blocks.contains(v.block.as_str()),
            })
        })
        .collect();
    // A lot is one line: its worst verdict, and the counts in place of a value.
    for l in &record.lots {
        let worst = if l.fail > 0 {
            Outcome::Fail
        } else if l.inconclusive > 0 {
            Outcome::Inconclusive
        } else {
            Outcome::Pass
        };
        out.push(json!({
            "block": l.block,
            "name": l.name,
            "symbol": symbol_json(&l.name),
            "part": format!("{} (lot)", l.part),
            "nominal": print::quantity(l.nominal, l.unit),
            "interval": print::interval(l.low, l.high, l.unit),
            "value": format!("{}: {} pass, {} fail, {} inconclusive", print::count(l.pass + l.fail + l.inconclusive, "unit", "units"), l.pass, l.fail, l.inconclusive),
            "outcome": outcome_word(worst),
            "warned": warned_blocks.contains(l.block.as_str()),
        }));
    }
    out
}

/// The safety checks.
fn safety_json(record: &Record) -> Vec<Value> {
    record
        .safety
        .iter()
        .map(|s| {
            json!({
                "block": s.block,
                "part": s.part,
                "what": s.what,
                "value": print::quantity(s.value, s.unit),
                "rating": print::quantity(s.rating, s.unit),
                "limit": print::quantity(s.limit, s.unit),
                "ok": s.ok,
            })
        })
        .collect()
}

/// The sign-off state.
fn sign_json(sign: &SignState) -> Value {
    match sign {
        SignState::Unsigned => json!({ "state": "unsigned", "reason": "not signed" }),
        SignState::NameOnly {
            by,
            on,
            digest,
            accepted,
        } => json!({
            "state": "name-only", "by": by, "on": on, "digest": digest, "accepted": accepted,
        }),
        SignState::Keyed {
            by,
            on,
            digest,
            key,
            accepted,
        } => json!({
            "state": "keyed", "by": by, "on": on, "digest": digest, "key": key,
            "accepted": accepted,
        }),
        SignState::Void { by, on, recorded } => json!({
            "state": "void", "by": by, "on": on, "recorded": recorded,
            "reason": format!("signed by {by} on {on}, but the readings changed after signing"),
        }),
        SignState::Forged { by, on, reason } => json!({
            "state": "forged", "by": by, "on": on,
            "reason": format!("the sign-off as {by} is not authentic: {reason}"),
        }),
    }
}

/// Build the template's data and every generated file.
pub fn generate(record: &Record, assets: &Assets) -> Result<Generated, String> {
    let nb = &record.notebook;
    let fm = &nb.front;
    let mut files: BTreeMap<String, Vec<u8>> = BTreeMap::new();
    let mut sources: BTreeMap<String, String> = BTreeMap::new();

    // Images under generated names.
    let mut image_paths: BTreeMap<String, String> = BTreeMap::new();
    for (i, (path, bytes)) in assets.images.iter().enumerate() {
        let vpath = format!("/images/{i}.{}", image_ext(path, bytes));
        files.insert(vpath.clone(), bytes.clone());
        image_paths.insert(path.clone(), vpath);
    }
    let image = |p: &str| image_paths.get(p).cloned();
    let cite = |code: &str| {
        let key = code.strip_prefix('=')?.trim();
        if let Some(t) = record.citations.get(key) {
            return Some(t.clone());
        }
        crate::judge::resolve_citation(&record.reduction, key)
            .ok()
            .map(crate::judge::cite_text)
    };
    let ctx = Context {
        image: &image,
        cite: &cite,
    };

    let shared = shared_notes(record);
    let mut items = Vec::new();
    let mut prose_n = 0usize;
    for item in &nb.items {
        match item {
            Item::Prose { text, .. } => {
                let path = format!("/prose/{prose_n}.typ");
                prose_n += 1;
                sources.insert(path.clone(), markup::markdown_to_typst(text, &ctx));
                items.push(json!({ "kind": "prose", "file": path }));
            }
            Item::Readings(rb) => {
                let index = items.len();
                items.push(readings_json(record, rb, index, &shared, &mut files)?);
            }
        }
    }

    let verdicts = verdicts_json(record);
    let safety = safety_json(record);
    let sign = sign_json(&record.sign);
    let attachment = format!("/{}", attachment_name(&assets.source_name));
    let bytes = if assets.source.is_empty() {
        nb.source.as_bytes().to_vec()
    } else {
        assets.source.clone()
    };
    files.insert(attachment.clone(), bytes);
    files.insert(SUMMARY_PATH.into(), summary_json(record).into_bytes());
    let mut tables = Vec::new();
    for (rel, name) in table_attachments(nb, &assets.source_name) {
        if let Some(f) = nb.tables.files.iter().find(|f| f.path == rel) {
            let path = format!("/{name}");
            files.insert(path.clone(), f.bytes.clone());
            let mime = if f.path.to_ascii_lowercase().ends_with(".tsv") {
                "text/tab-separated-values"
            } else {
                "text/csv"
            };
            tables.push(json!({ "path": path, "name": name, "written": rel, "mime": mime }));
        }
    }

    let date = fm.date;
    use chrono::Datelike;
    let data = json!({
        "record": fm.record,
        "title": fm.title,
        "date": date.to_string(),
        "date_parts": { "year": date.year(), "month": date.month(), "day": date.day() },
        "operator": fm.operator,
        "lab": fm.lab,
        "project": fm.project,
        "lot": fm.lot,
        "environment": fm.environment,
        "coverage": print::percent(fm.coverage),
        "decision": match fm.decision { Decision::Simple => "simple", Decision::Guarded => "guarded" },
        "decision_text": match fm.decision {
            Decision::Simple => "simple acceptance: a value inside the tolerance interval passes, one outside fails (ILAC-G8, no guard band)",
            Decision::Guarded => "guarded acceptance: pass only when value ± U lies inside the tolerance interval, fail only when it lies wholly outside, otherwise inconclusive (ILAC-G8, guard band U)",
        },
        "instruments": fm.instruments.iter().map(|(n, i)| {
            let mut v = instrument_json(n, i, date);
            register_fields(&mut v, n, nb.lab.as_ref());
            v
        }).collect::<Vec<_>>(),
        "parts": fm.parts.iter().map(|(n, p)| part_json(n, p)).collect::<Vec<_>>(),
        "items": items,
        "cautions": cautions(record),
        "record_notes": shared.iter().collect::<Vec<_>>(),
        "verdicts": verdicts,
        "safety": safety,
        "sign": sign,
        "digest": record.digest,
        "source_digest": record.source_digest,
        "derating": derating_json(record),
        "attachment": { "path": attachment, "name": attachment.trim_start_matches('/') },
        "tables": tables,
        "generator": format!("benchrec {}", env!("CARGO_PKG_VERSION")),
    });
    let text = serde_json::to_vec(&data).map_err(|e| format!("template data: {e}"))?;
    files.insert("/data.json".into(), text);
    Ok(Generated {
        files,
        sources,
        attachment,
    })
}

/// Virtual path (and attachment name) of the record's summary, which `benchrec index` reads.
pub const SUMMARY_PATH: &str = "/benchrec-summary.json";

/// The summary attached beside the notebook: what an archive index shows without reducing
/// the notebook again. `digest` ties it to the attached notebook's readings.
pub fn summary_json(record: &Record) -> String {
    let fm = &record.notebook.front;
    let count = |o: Outcome| record.verdicts.iter().filter(|v| v.outcome == o).count();
    let warnings: usize = record
        .reduction
        .blocks
        .iter()
        .map(|b| b.flags.iter().filter(|f| f.warn).count())
        .sum::<usize>()
        + record.safety.iter().filter(|s| !s.ok).count();
    let overdue: Vec<&str> = fm
        .instruments
        .values()
        .filter(|i| i.due.is_some_and(|d| d < fm.date))
        .map(|i| i.name.as_str())
        .collect();
    json!({
        "summary": 1,
        "generator": format!("benchrec {}", env!("CARGO_PKG_VERSION")),
        "record": fm.record,
        "title": fm.title,
        "date": fm.date.to_string(),
        "operator": fm.operator,
        "lab": fm.lab,
        "lot": fm.lot,
        "digest": record.digest,
        "verdicts": {
            "pass": count(Outcome::Pass),
            "fail": count(Outcome::Fail),
            "inconclusive": count(Outcome::Inconclusive),
        },
        "warnings": warnings,
        "overdue": overdue,
    })
    .to_string()
}

/// Which bench cautions apply: the probe-ground one when a block reads a phase or a trace
/// shift (a two-trace display) or an instrument is described as a scope; the stored-charge one
/// when a capacitor is used; the inductive-kick one when a coil is.
fn cautions(record: &Record) -> Value {
    let nb = &record.notebook;
    let blocks: Vec<&ReadingsBlock> = nb
        .items
        .iter()
        .filter_map(|i| match i {
            Item::Readings(b) => Some(b),
            _ => None,
        })
        .collect();
    let scope = blocks.iter().any(|b| {
        b.phase.is_some()
            || ["phi", "shift", "period"]
                .iter()
                .any(|c| b.col(c).is_some())
    }) || nb.front.instruments.values().any(|i| {
        i.what
            .as_deref()
            .is_some_and(|w| w.to_lowercase().contains("scope"))
    });
    let used = |k: PartKind| {
        blocks.iter().any(|b| {
            b.parts
                .iter()
                .any(|n| nb.front.parts.get(&n.name).is_some_and(|p| p.kind == k))
        })
    };
    json!({
        "scope": scope,
        "capacitor": used(PartKind::Capacitor),
        "inductor": used(PartKind::Inductor),
    })
}

/// Notes (not warnings) that two or more blocks carry word for word: the record prints them
/// once, not in every block.
fn shared_notes(record: &Record) -> std::collections::BTreeSet<String> {
    let mut seen: BTreeMap<&str, usize> = BTreeMap::new();
    for b in &record.reduction.blocks {
        let mine: std::collections::BTreeSet<&str> = b
            .flags
            .iter()
            .filter(|f| !f.warn)
            .map(|f| f.message.as_str())
            .collect();
        for m in mine {
            *seen.entry(m).or_default() += 1;
        }
    }
    seen.into_iter()
        .filter(|(_, n)| *n >= 2)
        .map(|(m, _)| m.to_string())
        .collect()
}

/// Up to [`PRINT_FLAGS`] messages, with a line for the rest.
fn capped(msgs: Vec<String>, what: &str) -> Value {
    let n = msgs.len();
    let mut v: Vec<Value> = msgs
        .into_iter()
        .take(PRINT_FLAGS)
        .map(Value::from)
        .collect();
    if n > PRINT_FLAGS {
        v.push(Value::from(format!(
            "… and {} more {what}, not printed here; `benchrec results` lists every one",
            n - PRINT_FLAGS
        )));
    }
    Value::Array(v)
}

/// The readings table as entered: columns, the rows shown, rows omitted, column widths. A
/// lot's serials print as the first column.
fn table_json(rb: &ReadingsBlock) -> Value {
    let columns: Vec<Value> = rb
        .columns
        .iter()
        .map(|c| {
            let (base, mut sub, italic) = symbol_parts(&c.symbol);
            if c.readout.peak_to_peak {
                sub.push_str(if sub.is_empty() { "pp" } else { ",pp" });
            }
            json!({ "base": base, "sub": sub, "italic": italic, "unit": heading_unit(c), "heading": c.heading })
        })
        .collect();
    let (shown, table_omitted) = head_and_tail(rb.rows.len());
    // A lot's serials print as the table's first column.
    let serial = |i: usize| {
        rb.lot
            .as_ref()
            .map(|l| l.serials.get(i).map_or("", |s| &s.name))
    };
    let mut columns = columns;
    if rb.lot.is_some() {
        columns.insert(
            0,
            json!({ "base": "unit", "sub": "", "italic": false, "unit": "", "heading": "unit" }),
        );
    }
    let ncols = columns.len();
    let rows: Vec<Vec<String>> = shown
        .iter()
        .map(|i| match i.and_then(|i| rb.rows.get(i).map(|r| (i, r))) {
            Some((i, r)) => {
                let mut cells: Vec<String> = serial(i).map(str::to_string).into_iter().collect();
                cells.extend(r.cells.iter().map(|c| c.text.clone()));
                cells.resize(ncols.max(cells.len()), String::new());
                cells
            }
            None => vec!["⋮".to_string(); ncols],
        })
        .collect();
    let widths: Vec<f64> = (0..ncols)
        .map(|c| metrics::widest(rows.iter().map(|r| r.get(c).map_or("", String::as_str))))
        .collect();
    json!({ "columns": columns, "rows": rows, "omitted": table_omitted, "widths": widths })
}

fn readings_json(
    record: &Record,
    rb: &ReadingsBlock,
    index: usize,
    shared: &std::collections::BTreeSet<String>,
    files: &mut BTreeMap<String, Vec<u8>>,
) -> Result<Value, String> {
    let block = record.reduction.blocks.iter().find(|b| b.id == rb.id);
    let mut out = json!({
        "kind": "readings",
        "id": rb.id,
        "network": rb.network.name(),
        "note": rb.note,
        "parts": rb.parts.iter().map(|p| p.name.clone()).collect::<Vec<_>>(),
        "meter": rb.meter.as_ref().map(|m| m.name.clone()),
        "phase": rb.phase.as_ref().map(|m| m.name.clone()),
        "counter": rb.counter.as_ref().map(|m| m.name.clone()),
        "source": rb.source.map(|v| print::quantity(v, Unit::V)),
        "table": table_json(rb),
        "reduced": block.is_some(),
    });
    let Some(block) = block else { return Ok(out) };
    let (long, grid) = frequency_json(block);
    let mut plots_json = Vec::new();
    let thinned = thin_for_plotting(block);
    let block_for_plot = thinned.as_ref().unwrap_or(block);
    for (n, p) in plots::block_plots(block_for_plot, judged_for(record, rb, block))?
        .into_iter()
        .enumerate()
    {
        let path = format!("/plots/{index}-{n}.svg");
        let drawing = format!("/plots/{index}-{n}-drawing.svg");
        files.insert(path.clone(), p.svg.into_bytes());
        files.insert(drawing.clone(), p.drawing.into_bytes());
        plots_json.push(json!({
            "file": path, "caption": p.caption, "drawing": drawing, "width": p.width,
            "height": p.height, "labels": p.labels,
        }));
    }
    let verdicts: Vec<Value> = record
        .verdicts
        .iter()
        .filter(|v| v.block == block.id && v.serial.is_none())
        .map(|v| {
            json!({
                "name": v.name, "symbol": symbol_json(&v.name), "part": v.part,
                "interval": print::interval(v.low, v.high, v.unit),
                "value": print::value_u_k(v.value, v.expanded, v.k, v.unit),
                "outcome": outcome_word(v.outcome),
            })
        })
        .collect();
    if let Value::Object(map) = &mut out {
        map.insert("frequency_results".into(), long);
        map.insert("frequency_grid".into(), grid);
        map.insert(
            "results".into(),
            Value::Array(block.results.iter().map(result_json).collect()),
        );
        map.insert(
            "correlations".into(),
            Value::Array(
                block
                    .correlations
                    .iter()
                    .map(|c| {
                        json!({
                            "a": symbol_json(&c.a), "b": symbol_json(&c.b), "r": print::fixed(c.r, 3),
                            "f": c.f.map(|f| print::quantity(f, Unit::Hz)),
                        })
                    })
                    .collect(),
            ),
        );
        map.insert(
            "flags".into(),
            Value::Array({
                let mut v: Vec<Value> = block
                    .flags
                    .iter()
                    .take(PRINT_FLAGS)
                    .map(|f| Value::from(f.message.clone()))
                    .collect();
                if block.flags.len() > PRINT_FLAGS {
                    v.push(Value::from(format!(
                        "… and {} more flags, not printed here; `benchrec results` lists every one",
                        block.flags.len() - PRINT_FLAGS
                    )));
                }
                v
            }),
        );
        let of = |warn: bool| -> Vec<String> {
            block
                .flags
                .iter()
                .filter(|f| f.warn == warn && (warn || !shared.contains(&f.message)))
                .map(|f| f.message.clone())
                .collect()
        };
        map.insert("warnings".into(), capped(of(true), "warnings"));
        map.insert("notes".into(), capped(of(false), "notes"));
        map.insert("verdicts".into(), Value::Array(verdicts));
        map.insert("plots".into(), Value::Array(plots_json));
        map.insert(
            "lot".into(),
            super::lot::lot_json(record, &rb.id, index, files)?,
        );
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn budget_inputs_read_as_words_with_units() {
        let r = |n: &str| readable_input(n);
        assert_eq!(r("gain(dmm,VR)"), ("VR gain, dmm".into(), Some("1")));
        assert_eq!(
            r("counts(dmm,VC@1.2 kHz)"),
            ("VC counts at 1.2 kHz, dmm".into(), Some("V"))
        );
        assert_eq!(
            r("read(scope,shift@300 Hz)"),
            ("shift read-off at 300 Hz, scope".into(), Some("div"))
        );
        assert_eq!(r("VR@2.4 kHz"), ("VR at 2.4 kHz".into(), Some("V")));
        assert_eq!(r("I"), ("I".into(), Some("A")));
        assert_eq!(r("R1"), ("R1".into(), None));
        assert_eq!(r("f(x,y"), ("f(x,y".into(), None));
    }

    #[test]
    fn symbols_follow_iso_80000_1() {
        assert_eq!(symbol_parts("VR"), ("V".into(), "R".into(), true));
        assert_eq!(symbol_parts("XL_dcr"), ("X".into(), "L,dcr".into(), true));
        assert_eq!(symbol_parts("f0"), ("f".into(), "0".into(), true));
        assert_eq!(symbol_parts("period"), ("period".into(), "".into(), false));
        assert_eq!(
            symbol_parts("f0_phase"),
            ("f".into(), "0,phase".into(), true)
        );
        assert_eq!(symbol_parts("f_low"), ("f".into(), "low".into(), true));
        assert_eq!(print::trim_sig(1500.0, 5), "1500");
        assert_eq!(print::trim_sig(0.25, 5), "0.25");
    }

    #[test]
    fn long_input_names_get_break_points_and_short_ones_do_not() {
        assert_eq!(break_points("counts(dmm,VR@1 kHz)"), "counts(dmm,VR@1 kHz)");
        let long = break_points("counts(bench_meter_number_2,VR@1.6 kHz)");
        assert_eq!(
            long.replace('\u{200B}', ""),
            "counts(bench_meter_number_2,VR@1.6 kHz)"
        );
        assert_eq!(long.matches('\u{200B}').count(), 6);
    }

    #[test]
    fn attachment_names_are_safe() {
        assert_eq!(attachment_name("../x/tank sweep.md"), "tank_sweep.md");
        assert_eq!(attachment_name(""), "notebook.md");
        assert_eq!(attachment_name("data.json"), "notebook.md");
        assert_eq!(attachment_name("..."), "notebook.md");
    }

    #[test]
    fn units_as_written() {
        assert_eq!(print_unit("uF"), "µF");
        assert_eq!(print_unit("kohm"), "kΩ");
        assert_eq!(print_unit("deg"), "°");
        assert_eq!(print::percent(0.005), "0.5 %");
        assert_eq!(print::percent(0.9545), "95.45 %");
    }
}
