//! Front matter: record keys, instruments (accuracy, distribution, calibration), parts
//! (kind, nominal, tolerance, measured values), sign-off.

use super::values::ValueReader;
use super::words::one_of;
use super::yaml::{kind_name, YamlLocator};
use super::{
    Accuracy, Decision, Distribution, FrontMatter, Instrument, Part, PartKind, Range, Signoff,
    Tolerance, IEC_60062_CODES,
};
use crate::diag::{Diagnostic, Span};
use crate::quantity::{
    self, dimension_name, parse_quantity, parse_unit, Quantity, QuantityError, Unit,
};
use chrono::NaiveDate;
use serde_yaml::Value;
use std::collections::{BTreeMap, BTreeSet};

const FRONT_KEYS: &[&str] = &[
    "record",
    "title",
    "date",
    "operator",
    "lab",
    "project",
    "lot",
    "environment",
    "coverage",
    "decision",
    "instruments",
    "parts",
    "template",
    "signoff",
];
pub(super) const INSTRUMENT_KEYS: &[&str] = &[
    "what",
    "accuracy",
    "resolution",
    "bandwidth",
    "calibrated",
    "due",
    "reading",
    "distribution",
    "k",
    "ranges",
    "vertical",
];
const PART_KEYS: &[&str] = &[
    "kind",
    "nominal",
    "tolerance",
    "measured",
    "by",
    "measured_by",
    "dcr",
    "dcr_by",
    "rating",
    "max_D",
    "max_esr",
];
const MEASURED_KEYS: &[&str] = &["value", "by"];
const SIGNOFF_KEYS: &[&str] = &[
    "by",
    "on",
    "digest",
    "key",
    "signature",
    "accepted",
    "register",
];
const SIGNOFF_REQUIRED: &[&str] = &["by", "on", "digest"];

/// `YYYY-MM-DD` exactly (ISO 8601 calendar date, extended format).
pub fn parse_iso_date(s: &str) -> Option<NaiveDate> {
    let t = s.trim();
    let b = t.as_bytes();
    if b.len() != 10 || b[4] != b'-' || b[7] != b'-' {
        return None;
    }
    if ![0, 1, 2, 3, 5, 6, 8, 9]
        .iter()
        .all(|&i| b[i].is_ascii_digit())
    {
        return None;
    }
    let y: i32 = t[0..4].parse().ok()?;
    let m: u32 = t[5..7].parse().ok()?;
    let d: u32 = t[8..10].parse().ok()?;
    NaiveDate::from_ymd_opt(y, m, d)
}

/// Parses an instrument accuracy: `P% + N` (N counts), `P%`, or an absolute quantity.
/// Errors carry (offset, len) inside `text`.
pub fn parse_accuracy(text: &str) -> Result<Accuracy, QuantityError> {
    let lead = text.len() - text.trim_start().len();
    let mut t = text.trim();
    let mut off = lead;
    for pm in ["±", "+/-", "+-"] {
        if let Some(r) = t.strip_prefix(pm) {
            let r2 = r.trim_start();
            off += t.len() - r2.len();
            t = r2;
            break;
        }
    }
    const FORMS: &str =
        "`P% + N` (percent of reading plus N counts), `P%`, `N ppm`, or a value with a unit such as `5 mV`";
    let err = |o: usize, l: usize, m: &str, f: &str| QuantityError {
        offset: o,
        len: l,
        message: m.to_string(),
        expected: FORMS.to_string(),
        found: f.to_string(),
    };
    // A quantity error inside an accuracy still names the accuracy forms.
    let inner = |o: usize, e: QuantityError| QuantityError {
        offset: o + e.offset,
        expected: FORMS.to_string(),
        ..e
    };
    // Parts per million (`50 ppm`) read as a percentage of a millionth.
    let relative = match (t.find('%'), t.find("ppm")) {
        (Some(p), _) => Some((p + 1, parse_quantity(&t[..p + 1]))),
        (None, Some(p)) => Some((
            p + 3,
            parse_quantity(t[..p].trim_end()).and_then(|q| {
                if q.unit == Unit::One {
                    Ok(Quantity {
                        value: q.value * 1e-6,
                        unit: Unit::Percent,
                    })
                } else {
                    Err(err(0, p, "expected a number before `ppm`", &t[..p]))
                }
            }),
        )),
        (None, None) => None,
    };
    if let Some((end, q)) = relative {
        let head = &t[..end];
        let q = q.map_err(|e| inner(off, e))?;
        if q.value < 0.0 {
            return Err(err(off, head.len(), "accuracy cannot be negative", head));
        }
        let rest = &t[end..];
        let r = rest.trim_start();
        let r_off = off + end + (rest.len() - r.len());
        if r.is_empty() {
            return Ok(Accuracy::Relative {
                fraction: q.value,
                counts: 0.0,
            });
        }
        let Some(after_plus) = r.strip_prefix('+') else {
            return Err(err(
                r_off,
                r.len(),
                "expected `+ N` counts after the percentage",
                r,
            ));
        };
        let c = after_plus.trim_start();
        let c_off = r_off + 1 + (after_plus.len() - c.len());
        let n = quantity::number_len(c).unwrap_or(0);
        let word = c[n..].trim();
        if n == 0
            || !(word.is_empty()
                || [
                    "counts", "count", "digits", "digit", "dgt", "d", "ct", "cts",
                ]
                .contains(&word))
        {
            let help = if n > 0 && parse_unit(word).is_some() {
                "a term with a unit after the percentage is not supported; give it as counts of the resolution"
            } else {
                "expected a number of counts"
            };
            return Err(err(c_off, c.len(), help, c));
        }
        let counts: f64 = c[..n]
            .parse()
            .map_err(|_| err(c_off, n, "not a number", &c[..n]))?;
        if !counts.is_finite() || counts < 0.0 {
            return Err(err(c_off, n, "counts must be zero or more", &c[..n]));
        }
        return Ok(Accuracy::Relative {
            fraction: q.value,
            counts,
        });
    }
    let q = parse_quantity(t).map_err(|e| inner(off, e))?;
    if q.unit == Unit::One {
        return Err(err(off, t.len(), "accuracy needs `%` or a unit", t));
    }
    if q.value < 0.0 {
        return Err(err(off, t.len(), "accuracy cannot be negative", t));
    }
    Ok(Accuracy::Absolute(q))
}

// ---------------------------------------------------------------------------------------------
// Front matter.

pub(super) struct Defined {
    pub(super) instruments: BTreeSet<String>,
    pub(super) parts: BTreeSet<String>,
    /// The top-level keys the front matter has.
    pub(super) present: BTreeSet<String>,
    /// False when the front matter could not be read: names are then not checked, so one
    /// YAML slip does not bring an "is not defined" for every block.
    pub(super) known: bool,
}

impl Defined {
    pub(super) fn checked(&self) -> Option<&BTreeSet<String>> {
        self.known.then_some(&self.instruments)
    }
}

fn names_under(v: Option<&Value>) -> BTreeSet<String> {
    match v {
        Some(Value::Mapping(m)) => m
            .keys()
            .filter_map(|k| match k {
                Value::String(s) => Some(s.clone()),
                Value::Number(n) => Some(n.to_string()),
                _ => None,
            })
            .collect(),
        _ => BTreeSet::new(),
    }
}

/// The front matter; `register` holds the lab register's instruments, which may be named too.
pub(super) fn front_matter<T>(
    y: &YamlLocator,
    d: &mut Vec<Diagnostic>,
    register: Option<&BTreeMap<String, T>>,
) -> (FrontMatter, Defined) {
    let mut fm = FrontMatter {
        record: String::new(),
        title: String::new(),
        date: NaiveDate::default(),
        operator: String::new(),
        lab: None,
        project: None,
        lot: None,
        environment: None,
        coverage: 0.9545,
        decision: Decision::Guarded,
        instruments: BTreeMap::new(),
        parts: BTreeMap::new(),
        template: None,
        signoff: None,
    };
    let root = match y.load("front matter") {
        Ok(v) => v,
        Err(e) => {
            d.push(e);
            return (
                fm,
                Defined {
                    instruments: BTreeSet::new(),
                    parts: BTreeSet::new(),
                    present: BTreeSet::new(),
                    known: false,
                },
            );
        }
    };
    let mut ex = ValueReader {
        y,
        d,
        what: "front matter",
    };
    let entries = ex.entries(&[], &root, Some(FRONT_KEYS));
    let get = |k: &str| entries.iter().find(|(n, _)| n == k).map(|(_, v)| *v);
    let mut instruments = names_under(get("instruments"));
    instruments.extend(register.into_iter().flat_map(|r| r.keys().cloned()));
    let defined = Defined {
        instruments,
        parts: names_under(get("parts")),
        present: entries.iter().map(|(k, _)| k.clone()).collect(),
        known: true,
    };
    let mut seen = BTreeSet::new();
    for (key, v) in &entries {
        seen.insert(key.as_str());
        let path = [key.as_str()];
        match key.as_str() {
            "record" => fm.record = ex.nonempty_text(&path, v).unwrap_or_default(),
            "title" => fm.title = ex.nonempty_text(&path, v).unwrap_or_default(),
            "operator" => fm.operator = ex.nonempty_text(&path, v).unwrap_or_default(),
            "date" => {
                if let Some(dt) = ex.date(&path, v) {
                    fm.date = dt;
                }
            }
            "lab" => fm.lab = ex.text(&path, v),
            "project" => fm.project = ex.text(&path, v),
            "lot" => fm.lot = ex.text(&path, v),
            "environment" => fm.environment = ex.text(&path, v),
            "coverage" => {
                if let Some(p) = coverage(&mut ex, &path, v) {
                    fm.coverage = p;
                }
            }
            "decision" => {
                if let Some(rule) = decision(&mut ex, &path, v) {
                    fm.decision = rule;
                }
            }
            "template" => {
                if let Some(s) = ex.nonempty_text(&path, v) {
                    fm.template = Some((s, y.value_span(&path)));
                }
            }
            "signoff" => fm.signoff = signoff(&mut ex, v),
            "instruments" => {
                for (name, iv) in ex.entries(&path, v, None) {
                    if let Some(i) = instrument(&mut ex, &name, iv, INSTRUMENT_KEYS) {
                        fm.instruments.insert(name, i);
                    }
                }
            }
            "parts" => {
                for (name, pv) in ex.entries(&path, v, None) {
                    if let Some(p) = part(&mut ex, &name, pv, &defined.instruments) {
                        fm.parts.insert(name, p);
                    }
                }
            }
            _ => {}
        }
    }
    for req in ["record", "title", "date", "operator"] {
        if !seen.contains(req) {
            ex.err(
                Diagnostic::new(y.anchor, format!("the front matter lacks `{req}`"))
                    .expected(format!("a line `{req}: …` between the `---` lines"))
                    .found("no such key"),
            );
        }
    }
    (fm, defined)
}

/// A coverage probability at `path`: a number in (0, 1) or a percentage.
pub(super) fn coverage(ex: &mut ValueReader, path: &[&str], v: &Value) -> Option<f64> {
    let span = ex.y.value_span(path);
    let p = match v {
        Value::Number(n) => n.as_f64(),
        Value::String(s) => match parse_quantity(s) {
            Ok(q) if q.unit == Unit::One || q.unit == Unit::Percent => Some(q.value),
            Ok(_) => None,
            Err(e) => {
                ex.quantity_error(path, s, e);
                return None;
            }
        },
        _ => None,
    };
    match p {
        Some(p) if p > 0.0 && p < 1.0 => Some(p),
        _ => {
            let found = ex.y.src[span.start..span.end].to_string();
            ex.err(
                Diagnostic::new(span, "coverage probability out of range")
                    .expected("a probability between 0 and 1, e.g. 0.95 or 95%")
                    .found(format!("`{found}`")),
            );
            None
        }
    }
}

/// A decision rule at `path`: `simple` or `guarded`.
pub(super) fn decision(ex: &mut ValueReader, path: &[&str], v: &Value) -> Option<Decision> {
    let s = ex.text(path, v)?;
    let rules = [("simple", Decision::Simple), ("guarded", Decision::Guarded)];
    one_of(s.trim(), &rules, "decision rule", ex.y.value_span(path))
        .map_err(|dg| ex.err(dg))
        .ok()
}

fn signoff(ex: &mut ValueReader, v: &Value) -> Option<Signoff> {
    let span = ex.y.value_span(&["signoff"]);
    let entries = ex.entries(&["signoff"], v, Some(SIGNOFF_KEYS));
    let mut vals: BTreeMap<&str, String> = BTreeMap::new();
    let mut register = Vec::new();
    for (k, val) in &entries {
        if k == "register" {
            for (id, dv) in ex.entries(&["signoff", "register"], val, None) {
                if let Some(t) = ex.nonempty_text(&["signoff", "register", id.as_str()], dv) {
                    register.push((id, t.trim().to_string()));
                }
            }
            continue;
        }
        let key: &str = SIGNOFF_KEYS
            .iter()
            .find(|s| **s == k.as_str())
            .copied()
            .unwrap_or("");
        if let Some(t) = ex.nonempty_text(&["signoff", key], val) {
            vals.insert(key, t);
        }
    }
    let mut ok = true;
    for k in SIGNOFF_REQUIRED {
        if !entries.iter().any(|(n, _)| n == k) {
            ok = false;
            ex.err(
                Diagnostic::new(span, format!("`signoff` lacks `{k}`"))
                    .expected("`by`, `on` and `digest`"),
            );
        }
    }
    if !ok {
        return None;
    }
    Some(Signoff {
        by: vals.remove("by")?,
        on: vals.remove("on")?,
        digest: vals.remove("digest")?,
        key: vals.remove("key"),
        signature: vals.remove("signature"),
        accepted: vals.remove("accepted"),
        register,
        span,
    })
}

/// The instrument `name` at `instruments.<name>`; `keys` are the keys allowed in its mapping.
pub(super) fn instrument(
    ex: &mut ValueReader,
    name: &str,
    v: &Value,
    keys: &[&str],
) -> Option<Instrument> {
    let span = ex.y.key_span(&["instruments", name]);
    let mut ins = Instrument {
        name: name.to_string(),
        what: None,
        accuracy: None,
        resolution: None,
        bandwidth: None,
        calibrated: None,
        due: None,
        reading: None,
        distribution: Distribution::Rectangular,
        ranges: Vec::new(),
        range_accuracy: Vec::new(),
        vertical: None,
        span,
    };
    let entries = ex.entries(&["instruments", name], v, Some(keys));
    let mut by_range = Vec::new();
    let mut dist: Option<(String, Span)> = None;
    let mut k: Option<(f64, Span)> = None;
    for (key, val) in &entries {
        let path = ["instruments", name, key.as_str()];
        match key.as_str() {
            "what" => ins.what = ex.text(&path, val),
            "ranges" => ins.ranges = ranges(ex, name, val),
            "accuracy" if matches!(val, Value::Mapping(_)) => {
                by_range = accuracy_map(ex, name, val)
            }
            "accuracy" => {
                if let Some(t) = ex.text(&path, val) {
                    match parse_accuracy(&t) {
                        Ok(a) => ins.accuracy = Some(a),
                        Err(e) => ex.quantity_error(&path, &t, e),
                    }
                }
            }
            "resolution" => {
                let q = ex.quantity(&path, val, MEASURED_UNITS, None);
                ins.resolution = ex.positive(&path, q, "resolution");
            }
            "bandwidth" => {
                let q = ex.quantity(&path, val, &[Unit::Hz], Some(Unit::Hz));
                ins.bandwidth = ex.positive(&path, q, "bandwidth").map(|q| q.value);
            }
            "vertical" => {
                let q = ex.quantity(&path, val, &[Unit::Percent], None);
                ins.vertical = ex
                    .positive(&path, q, "vertical gain accuracy")
                    .map(|q| q.value);
            }
            "calibrated" => ins.calibrated = ex.date(&path, val),
            "due" => ins.due = ex.date(&path, val),
            "reading" => {
                let q = ex.quantity(
                    &path,
                    val,
                    &[Unit::Div, Unit::V, Unit::A, Unit::Rad, Unit::S, Unit::Hz],
                    None,
                );
                ins.reading = ex.positive(&path, q, "reading half-width");
            }
            "distribution" => {
                if let Some(t) = ex.text(&path, val) {
                    dist = Some((t.trim().to_string(), ex.y.value_span(&path)));
                }
            }
            "k" => {
                let kv = match val {
                    Value::Number(n) => n.as_f64(),
                    Value::String(s) => s.trim().parse::<f64>().ok(),
                    _ => None,
                };
                let sp = ex.y.value_span(&path);
                match kv {
                    Some(x) if x.is_finite() && x > 0.0 => k = Some((x, sp)),
                    _ => ex.err(
                        Diagnostic::new(sp, "coverage factor `k` must be a positive number")
                            .expected("e.g. `k: 2`")
                            .found(kind_name(val)),
                    ),
                }
            }
            _ => {}
        }
    }
    let normal = dist.map(|(s, sp)| {
        let words = [("rectangular", false), ("normal", true)];
        (one_of(&s, &words, "distribution", sp), sp)
    });
    match normal {
        None | Some((Ok(false), _)) => {
            if let Some((_, sp)) = k {
                ex.err(
                    Diagnostic::new(sp, "`k` applies only with `distribution: normal`")
                        .expected("`distribution: normal` beside `k`"),
                );
            }
        }
        Some((Ok(true), sp)) => match k {
            Some((kv, _)) => ins.distribution = Distribution::Normal { k: kv },
            None => ex.err(
                Diagnostic::new(sp, "a normal distribution needs its coverage factor")
                    .expected("a key `k` (e.g. `k: 2`) beside `distribution: normal`")
                    .found("no `k`"),
            ),
        },
        Some((Err(dg), _)) => ex.err(dg),
    }
    ins.range_accuracy = match_ranges(ex, name, &ins.ranges, by_range);
    if let (Some(c), Some(du)) = (ins.calibrated, ins.due) {
        if du < c {
            let sp = ex.y.value_span(&["instruments", name, "due"]);
            ex.err(
                Diagnostic::new(sp, "calibration due date is before the calibration date")
                    .expected(format!("a date on or after {c}"))
                    .found(du.to_string()),
            );
        }
    }
    Some(ins)
}

/// Units a range (and a resolution) may be in.
const MEASURED_UNITS: &[Unit] = &[
    Unit::V,
    Unit::A,
    Unit::Ohm,
    Unit::F,
    Unit::H,
    Unit::Hz,
    Unit::S,
    Unit::W,
    Unit::Rad,
    Unit::Div,
];

/// A range's full-scale value written `text` at `span`: a positive quantity with a unit.
pub(super) fn range_value(
    text: &str,
    span: Span,
    at: impl Fn(&QuantityError) -> Span,
) -> Result<Quantity, Diagnostic> {
    let q = parse_quantity(text).map_err(|e| {
        Diagnostic::new(at(&e), format!("range `{}`: {}", text.trim(), e.message))
            .expected("a full-scale value with its unit, e.g. `2 V` or `200 mV`")
            .found(format!("`{}`", e.found))
    })?;
    if !MEASURED_UNITS.contains(&q.unit) {
        return Err(Diagnostic::new(
            span,
            format!("range `{}` is not a quantity with a unit", text.trim()),
        )
        .expected("a full-scale value with its unit, e.g. `2 V` or `200 mV`")
        .found(format!("`{}`", text.trim())));
    }
    if !(q.value > 0.0 && q.value.is_finite()) {
        return Err(Diagnostic::new(
            span,
            format!("range `{}` must be greater than zero", text.trim()),
        )
        .expected("a positive full-scale value")
        .found(format!("`{}`", text.trim())));
    }
    Ok(q)
}

/// Whether two full-scale values are the same range (`2 V` and `2000 mV` are).
pub fn same_range(a: &Quantity, b: &Quantity) -> bool {
    a.unit == b.unit && (a.value - b.value).abs() <= 1e-9 * a.value.abs().max(b.value.abs())
}

/// An instrument's `ranges`: a list of full-scale values, each once.
fn ranges(ex: &mut ValueReader, name: &str, v: &Value) -> Vec<Range> {
    let path = ["instruments", name, "ranges"];
    let Value::Sequence(items) = v else {
        let span = ex.y.value_span(&path);
        ex.err(
            Diagnostic::new(span, "`ranges` must be a list of full-scale values")
                .expected("e.g. `ranges: [200 mV, 2 V, 20 V]`")
                .found(kind_name(v)),
        );
        return Vec::new();
    };
    let mut out: Vec<Range> = Vec::new();
    for item in items {
        let Some(text) = ex
            .text_of(&path, item)
            .filter(|_| !matches!(item, Value::Sequence(_) | Value::Mapping(_)))
        else {
            ex.err(
                Diagnostic::new(
                    ex.y.value_span(&path),
                    "a range must be a value with a unit",
                )
                .expected("e.g. `2 V`")
                .found(kind_name(item)),
            );
            continue;
        };
        let span = ex.y.item_span(&path, text.trim());
        match range_value(&text, span, |e| ex.y.quantity_span(span, &text, e)) {
            Ok(q) if out.iter().any(|r| same_range(&r.full_scale, &q)) => ex.err(
                Diagnostic::new(span, format!("range `{}` is listed twice", text.trim()))
                    .expected("each range once")
                    .found(format!("`{}` again", text.trim())),
            ),
            Ok(q) => out.push(Range {
                full_scale: q,
                span,
            }),
            Err(dg) => ex.err(dg),
        }
    }
    out
}

/// `accuracy` as a map from range to spec: (range, accuracy, span of the key).
fn accuracy_map(ex: &mut ValueReader, name: &str, v: &Value) -> Vec<(Quantity, Accuracy, Span)> {
    let mut out = Vec::new();
    for (key, val) in ex.entries(&["instruments", name, "accuracy"], v, None) {
        let path = ["instruments", name, "accuracy", key.as_str()];
        let kspan = ex.y.key_span(&path);
        let q = match range_value(&key, kspan, |_| kspan) {
            Ok(q) => q,
            Err(dg) => {
                ex.err(dg);
                continue;
            }
        };
        let Some(t) = ex.text(&path, val) else {
            continue;
        };
        match parse_accuracy(&t) {
            Ok(a) => out.push((q, a, kspan)),
            Err(e) => ex.quantity_error(&path, &t, e),
        }
    }
    out
}

/// Ties each key of a per-range accuracy to a listed range; every range needs one.
fn match_ranges(
    ex: &mut ValueReader,
    name: &str,
    ranges: &[Range],
    by_range: Vec<(Quantity, Accuracy, Span)>,
) -> Vec<(usize, Accuracy)> {
    if by_range.is_empty() {
        return Vec::new();
    }
    let listed = if ranges.is_empty() {
        "no `ranges`".to_string()
    } else {
        ranges
            .iter()
            .map(|r| ex.y.src[r.span.start..r.span.end].to_string())
            .collect::<Vec<_>>()
            .join(", ")
    };
    let mut out: Vec<(usize, Accuracy)> = Vec::new();
    for (q, a, kspan) in by_range {
        match ranges.iter().position(|r| same_range(&r.full_scale, &q)) {
            Some(i) => out.push((i, a)),
            None => {
                let key = ex.y.src[kspan.start..kspan.end].to_string();
                ex.err(
                    Diagnostic::new(
                        kspan,
                        format!("accuracy for `{key}`, a range {name} does not list"),
                    )
                    .expected(format!("one of the instrument's `ranges` ({listed})"))
                    .found(format!("`{key}`")),
                );
            }
        }
    }
    let aspan = ex.y.key_span(&["instruments", name, "accuracy"]);
    for (i, r) in ranges.iter().enumerate() {
        if !out.iter().any(|(j, _)| *j == i) {
            let text = ex.y.src[r.span.start..r.span.end].to_string();
            ex.err(
                Diagnostic::new(
                    aspan,
                    format!("`accuracy` of {name} gives nothing for its `{text}` range"),
                )
                .expected(format!("an entry `{text}: …` in the accuracy map"))
                .found("no such entry"),
            );
        }
    }
    out
}

fn part(
    ex: &mut ValueReader,
    name: &str,
    v: &Value,
    instruments: &BTreeSet<String>,
) -> Option<Part> {
    let base = ["parts", name];
    let span = ex.y.key_span(&base);
    let entries = ex.entries(&base, v, Some(PART_KEYS));
    if !matches!(v, Value::Mapping(_)) {
        return None;
    }
    let kind = part_kind(ex, name, span, entries.iter().find(|(k, _)| k == "kind"))?;
    let unit = kind.unit();
    let mut p = Part {
        name: name.to_string(),
        kind,
        nominal: None,
        tolerance: None,
        measured: None,
        measured_by: None,
        dcr: None,
        dcr_by: None,
        rating: None,
        loss: Default::default(),
        span,
    };
    let mut by: Option<String> = None;
    let mut tol: Option<&Value> = None;
    for (key, val) in &entries {
        let path = ["parts", name, key.as_str()];
        match key.as_str() {
            "nominal" => {
                let q = ex.quantity(&path, val, &[unit], None);
                p.nominal = ex.positive(&path, q, "a nominal value");
            }
            "tolerance" => tol = Some(val),
            "measured" | "dcr" => {
                let is_dcr = key == "dcr";
                if is_dcr && kind != PartKind::Inductor {
                    ex.err(
                        Diagnostic::new(
                            ex.y.key_span(&path),
                            "`dcr` (winding resistance) applies only to an inductor",
                        )
                        .expected("`kind: inductor`")
                        .found(format!("`kind: {}`", kind_word(kind))),
                    );
                    continue;
                }
                let want = if is_dcr { Unit::Ohm } else { unit };
                let what = if is_dcr {
                    "a winding resistance"
                } else {
                    "a measured value"
                };
                let (q, inner_by) = measured(ex, &path, val, (want, what), instruments);
                if is_dcr {
                    p.dcr = q;
                    if inner_by.is_some() {
                        p.dcr_by = inner_by;
                    }
                } else {
                    p.measured = q;
                    if inner_by.is_some() {
                        p.measured_by = inner_by;
                    }
                }
            }
            "by" => {
                by = ex
                    .instrument_name(&path, val, Some(instruments))
                    .map(|n| n.name)
            }
            "measured_by" => {
                p.measured_by = ex
                    .instrument_name(&path, val, Some(instruments))
                    .map(|n| n.name)
            }
            "dcr_by" => {
                p.dcr_by = ex
                    .instrument_name(&path, val, Some(instruments))
                    .map(|n| n.name)
            }
            "rating" => {
                let units: &[Unit] = match kind {
                    PartKind::Resistor => &[Unit::W],
                    PartKind::Capacitor => &[Unit::V],
                    PartKind::Inductor => &[Unit::A, Unit::W],
                };
                let q = ex.quantity(&path, val, units, None);
                p.rating = ex.positive(&path, q, "a rating");
            }
            "max_D" | "max_esr" => loss_limit(ex, &path, val, kind, &mut p.loss),
            _ => {}
        }
    }
    // `by` names the instrument for both `measured` and `dcr` unless given separately.
    if let Some(b) = by {
        if p.measured_by.is_none() {
            p.measured_by = Some(b.clone());
        }
        if p.dcr_by.is_none() && kind == PartKind::Inductor {
            p.dcr_by = Some(b);
        }
    }
    if let Some(tv) = tol {
        p.tolerance = tolerance(ex, name, tv, kind, p.nominal);
    }
    Some(p)
}

/// A capacitor's `max_D` (a pure number or a percentage) or `max_esr` (Ω), above zero.
fn loss_limit(
    ex: &mut ValueReader,
    path: &[&str; 3],
    val: &Value,
    kind: PartKind,
    loss: &mut super::LossLimits,
) {
    let key = path[2];
    if kind != PartKind::Capacitor {
        ex.err(
            Diagnostic::new(
                ex.y.key_span(path),
                format!("`{key}` (a loss limit) applies only to a capacitor"),
            )
            .expected("`kind: capacitor`")
            .found(format!("`kind: {}`", kind_word(kind))),
        );
        return;
    }
    if key == "max_D" {
        let q = ex.quantity(path, val, &[Unit::One, Unit::Percent], Some(Unit::One));
        loss.max_d = ex
            .positive(path, q, "a dissipation factor limit")
            .map(|q| q.value);
    } else {
        let q = ex.quantity(path, val, &[Unit::Ohm], None);
        loss.max_esr = ex.positive(path, q, "an ESR limit").map(|q| q.value);
    }
}

/// The part's `kind`, reported at the part when it is missing.
fn part_kind(
    ex: &mut ValueReader,
    name: &str,
    span: Span,
    entry: Option<&(String, &Value)>,
) -> Option<PartKind> {
    let Some((_, kv)) = entry else {
        ex.err(
            Diagnostic::new(span, format!("part `{name}` lacks `kind`"))
                .expected("`kind: resistor`, `kind: capacitor` or `kind: inductor`")
                .found("no `kind`"),
        );
        return None;
    };
    let path = ["parts", name, "kind"];
    let t = ex.text(&path, kv)?;
    let kinds = [
        ("resistor", PartKind::Resistor),
        ("capacitor", PartKind::Capacitor),
        ("inductor", PartKind::Inductor),
    ];
    one_of(t.trim(), &kinds, "part kind", ex.y.value_span(&path))
        .map_err(|dg| ex.err(dg))
        .ok()
}

/// A part's `measured` or `dcr` at `path` (`parts.<name>.<key>`): a value in `want.0`
/// (`want.1` names it in messages), or the map form `{value: …, by: instrument}`.
fn measured(
    ex: &mut ValueReader,
    path: &[&str; 3],
    val: &Value,
    want: (Unit, &str),
    instruments: &BTreeSet<String>,
) -> (Option<Quantity>, Option<String>) {
    let (unit, what) = want;
    if !matches!(val, Value::Mapping(_)) {
        let qq = ex.quantity(path, val, &[unit], None);
        return (ex.positive(path, qq, what), None);
    }
    let mut q = None;
    let mut b = None;
    for (k2, v2) in ex.entries(path, val, Some(MEASURED_KEYS)) {
        let p2 = [
            path[0],
            path[1],
            path[2],
            if k2 == "value" { "value" } else { "by" },
        ];
        if k2 == "value" {
            let qq = ex.quantity(&p2, v2, &[unit], None);
            q = ex.positive(&p2, qq, what);
        } else if let Some(n) = ex.instrument_name(&p2, v2, Some(instruments)) {
            b = Some(n.name);
        }
    }
    (q, b)
}

fn kind_word(k: PartKind) -> &'static str {
    match k {
        PartKind::Resistor => "resistor",
        PartKind::Capacitor => "capacitor",
        PartKind::Inductor => "inductor",
    }
}

fn tolerance(
    ex: &mut ValueReader,
    name: &str,
    v: &Value,
    kind: PartKind,
    nominal: Option<Quantity>,
) -> Option<Tolerance> {
    let path = ["parts", name, "tolerance"];
    let span = ex.y.value_span(&path);
    let raw = ex.text(&path, v)?;
    let t = raw.trim();
    let t = t
        .strip_prefix('±')
        .or_else(|| t.strip_prefix("+/-"))
        .unwrap_or(t)
        .trim();
    let codes: String = IEC_60062_CODES
        .iter()
        .map(|(c, _)| c.to_string())
        .collect::<Vec<_>>()
        .join(" ");
    let mut chars = t.chars();
    if let (Some(c), None) = (chars.next(), chars.next()) {
        if c.is_ascii_alphabetic() {
            let Some(&(_, frac)) = IEC_60062_CODES.iter().find(|(k, _)| *k == c) else {
                ex.err(
                    Diagnostic::new(
                        span,
                        format!("`{c}` is not an IEC 60062 tolerance letter handled here"),
                    )
                    .expected(format!(
                        "one of {codes}, a percentage or a value with a unit"
                    ))
                    .found(format!("`{c}`")),
                );
                return None;
            };
            // IEC 60062 (from memory): below 10 pF the letters B–G mean absolute pF values
            // (B 0.1, C 0.25, D 0.5, F 1, G 2 pF), so they are refused; J, K, M stay percent.
            let absolute_below_10pf = matches!(c, 'B' | 'C' | 'D' | 'F' | 'G');
            if kind == PartKind::Capacitor
                && absolute_below_10pf
                && nominal.is_some_and(|n| n.value < 10e-12)
            {
                ex.err(
                    Diagnostic::new(
                        span,
                        "below 10 pF a tolerance letter means an absolute value",
                    )
                    .expected("the tolerance as a value with a unit, e.g. `0.25 pF`")
                    .found(format!("`{c}`")),
                );
                return None;
            }
            return Some(Tolerance::Code(c, frac));
        }
    }
    match parse_quantity(t) {
        Ok(q) if q.unit == Unit::Percent => {
            if q.value > 0.0 && q.value < 1.0 {
                Some(Tolerance::Relative(q.value))
            } else {
                ex.err(
                    Diagnostic::new(span, "tolerance out of range")
                        .expected("a positive percentage, above 0 % and below 100 %")
                        .found(format!("`{}`", raw.trim())),
                );
                None
            }
        }
        Ok(q) if q.unit == kind.unit() => {
            if q.value > 0.0 {
                Some(Tolerance::Absolute(q.value))
            } else {
                ex.err(
                    Diagnostic::new(span, "tolerance must be greater than zero")
                        .expected("a positive value")
                        .found(format!("`{}`", raw.trim())),
                );
                None
            }
        }
        Ok(q) => {
            let mut dg = Diagnostic::new(
                span,
                format!("tolerance does not fit a {}", kind_word(kind)),
            )
            .expected(format!(
                "a percentage, a letter ({codes}) or a value in {}",
                dimension_name(kind.unit())
            ))
            .found(format!("`{}`", raw.trim()));
            // A bare number is most often a percentage without its sign.
            if q.unit == Unit::One && q.value > 0.0 && q.value < 100.0 {
                dg = dg.help(format!("a percentage needs its sign: `{}%`", raw.trim()));
            }
            ex.err(dg);
            None
        }
        Err(e) => {
            let mut e = e;
            e.expected =
                format!("a percentage such as `1%`, a letter ({codes}) or a value with a unit");
            ex.quantity_error(&path, t, e);
            None
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn iso_dates() {
        assert_eq!(
            parse_iso_date("2026-03-14"),
            NaiveDate::from_ymd_opt(2026, 3, 14)
        );
        assert_eq!(
            parse_iso_date(" 2024-02-29 "),
            NaiveDate::from_ymd_opt(2024, 2, 29)
        );
        // 2025 is not a leap year (Gregorian rule).
        assert_eq!(parse_iso_date("2025-02-29"), None);
        for bad in [
            "2026-3-14",
            "14.03.2026",
            "2026/03/14",
            "20260314",
            "2026-03-14T10:00",
            "",
            "２０２６-03-14",
        ] {
            assert_eq!(parse_iso_date(bad), None, "{bad}");
        }
    }

    #[test]
    fn accuracy_forms() {
        // `P% + N`: ± (P % of reading + N counts), a common way of stating meter accuracy (common practice).
        assert_eq!(
            parse_accuracy("0.5% + 3"),
            Ok(Accuracy::Relative {
                fraction: 0.005,
                counts: 3.0
            })
        );
        assert_eq!(
            parse_accuracy("±1.2 % + 5 counts"),
            Ok(Accuracy::Relative {
                fraction: 0.012,
                counts: 5.0
            })
        );
        assert_eq!(
            parse_accuracy("2%"),
            Ok(Accuracy::Relative {
                fraction: 0.02,
                counts: 0.0
            })
        );
        match parse_accuracy("3 mV") {
            Ok(Accuracy::Absolute(q)) => {
                assert!((q.value - 3e-3).abs() < 1e-15 && q.unit == Unit::V)
            }
            other => panic!("{other:?}"),
        }
        let e = parse_accuracy("0.5% + 2 mV").unwrap_err();
        assert_eq!(e.offset, 7);
        assert!(e.message.contains("not supported"));
        assert!(parse_accuracy("7")
            .unwrap_err()
            .message
            .contains("needs `%` or a unit"));
        assert!(parse_accuracy("-1%").is_err());
        assert!(parse_accuracy("1% + -2").is_err());
    }
}
