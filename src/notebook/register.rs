//! The lab register (`lab.yaml`, FORMAT.md 1.1): the lab's name, instruments by asset id with
//! their calibration history, defaults, and the allowed-signers file. Parsing only: the file
//! is found and read in `pipeline.rs`; every span here indexes into the register's own text.

use super::front::{coverage, decision, instrument, parse_iso_date, INSTRUMENT_KEYS};
use super::values::ValueReader;
use super::yaml::{kind_name, YamlLocator};
use super::{Decision, FrontMatter, Instrument, Item};
use crate::diag::{Diagnostic, Span};
use crate::quantity::Unit;
use chrono::NaiveDate;
use serde_yaml::Value;
use std::collections::{BTreeMap, BTreeSet};

const REGISTER_KEYS: &[&str] = &["lab", "instruments", "defaults", "signers"];
const DEFAULT_KEYS: &[&str] = &["coverage", "decision", "template", "derating"];
const DERATING_KEYS: &[&str] = &["resistor_power", "capacitor_voltage", "inductor_current"];
const HISTORY_KEYS: &[&str] = &["calibrated", "due", "certificate"];
/// Keys of an entry that say when it was calibrated, not what it is.
const CALIBRATION_KEYS: &[&str] = &["calibrated", "due", "certificate", "history"];
/// The largest register read, in bytes.
pub const MAX_REGISTER: usize = 1 << 20;

/// A parsed `lab.yaml`.
#[derive(Debug, Clone, Default)]
pub struct Register {
    pub lab: Option<String>,
    pub instruments: BTreeMap<String, Asset>,
    pub defaults: Defaults,
    /// `signers`: the allowed-signers file, relative to the register's folder.
    pub signers: Option<(String, Span)>,
}

/// One instrument of the register.
#[derive(Debug, Clone)]
pub struct Asset {
    /// The specs; `calibrated` and `due` are those of the entry's own keys, if any.
    pub instrument: Instrument,
    /// Every calibration on record: the entry's own `calibrated`/`due`/`certificate`, then
    /// `history`, sorted by calibration date.
    pub calibrations: Vec<Calibration>,
    /// The entry less its calibration keys, as JSON with sorted keys (for the digest).
    pub spec: serde_json::Value,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Calibration {
    pub calibrated: NaiveDate,
    pub due: Option<NaiveDate>,
    pub certificate: Option<String>,
}

impl Asset {
    /// The calibration current on `date`: the latest one made on or before it.
    pub fn calibration_on(&self, date: NaiveDate) -> Option<&Calibration> {
        self.calibrations
            .iter()
            .filter(|c| c.calibrated <= date)
            .max_by_key(|c| c.calibrated)
    }
}

/// `defaults`: what a notebook gets when it does not say.
#[derive(Debug, Clone, Default)]
pub struct Defaults {
    pub coverage: Option<f64>,
    pub decision: Option<Decision>,
    /// A template, relative to the register's folder.
    pub template: Option<(String, Span)>,
    pub derating: Option<DeratingSpec>,
}

/// `defaults.derating`, as fractions of the rating; a key left out keeps the built-in one.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct DeratingSpec {
    pub resistor_power: Option<f64>,
    pub capacitor_voltage: Option<f64>,
    pub inductor_current: Option<f64>,
}

/// Parses a register; on any problem returns every diagnostic found, spans into `src`.
pub fn parse_register(src: &str) -> Result<Register, Vec<Diagnostic>> {
    let first = src.find('\n').unwrap_or(src.len());
    let anchor = Span::new(0, first);
    if src.len() > MAX_REGISTER {
        return Err(vec![Diagnostic::new(
            anchor,
            "the lab register is too large",
        )
        .expected(format!("at most {} KiB", MAX_REGISTER >> 10))
        .found(format!("{} bytes", src.len()))]);
    }
    let y = YamlLocator::new(src, 0, src.len(), anchor);
    let root = y.load("lab register").map_err(|e| vec![e])?;
    let mut d = Vec::new();
    let mut ex = ValueReader {
        y: &y,
        d: &mut d,
        what: "lab register",
    };
    let mut reg = Register::default();
    for (key, v) in ex.entries(&[], &root, Some(REGISTER_KEYS)) {
        let path = [key.as_str()];
        match key.as_str() {
            "lab" => reg.lab = ex.nonempty_text(&path, v),
            "signers" => reg.signers = ex.nonempty_text(&path, v).map(|s| (s, y.value_span(&path))),
            "defaults" => reg.defaults = defaults(&mut ex, v),
            "instruments" => {
                let mut keys = INSTRUMENT_KEYS.to_vec();
                keys.extend(["certificate", "history"]);
                for (id, iv) in ex.entries(&path, v, None) {
                    if let Some(a) = asset(&mut ex, &id, iv, &keys) {
                        reg.instruments.insert(id, a);
                    }
                }
            }
            _ => {}
        }
    }
    if d.is_empty() {
        Ok(reg)
    } else {
        Err(d)
    }
}

fn asset(ex: &mut ValueReader, id: &str, v: &Value, keys: &[&str]) -> Option<Asset> {
    let instrument = instrument(ex, id, v, keys)?;
    let base = ["instruments", id];
    let mut calibrations = Vec::new();
    let mut certificate = None;
    let mut spec = serde_yaml::Mapping::new();
    if let Value::Mapping(m) = v {
        for (k, val) in m {
            let name = k.as_str().unwrap_or("");
            if !CALIBRATION_KEYS.contains(&name) {
                spec.insert(k.clone(), val.clone());
            }
            let path = ["instruments", id, name];
            match name {
                "certificate" => certificate = ex.nonempty_text(&path, val),
                "history" => history(ex, id, val, &mut calibrations),
                _ => {}
            }
        }
    }
    match instrument.calibrated {
        Some(c) => calibrations.push(Calibration {
            calibrated: c,
            due: instrument.due,
            certificate,
        }),
        None if certificate.is_some() || instrument.due.is_some() => ex.err(
            Diagnostic::new(
                ex.y.key_span(&base),
                format!("{id} gives a certificate or a due date but no `calibrated` date"),
            )
            .expected("`calibrated: YYYY-MM-DD` beside `due` and `certificate`")
            .found("no `calibrated`"),
        ),
        None => {}
    }
    calibrations.sort_by_key(|c| c.calibrated);
    let spec = serde_json::to_value(Value::Mapping(spec)).unwrap_or_default();
    Some(Asset {
        instrument,
        calibrations,
        spec,
    })
}

/// `history`: a list of `{calibrated, due, certificate}`.
fn history(ex: &mut ValueReader, id: &str, v: &Value, out: &mut Vec<Calibration>) {
    let path = ["instruments", id, "history"];
    let Value::Sequence(items) = v else {
        ex.err(
            Diagnostic::new(
                ex.y.value_span(&path),
                "`history` must be a list of calibrations",
            )
            .expected("e.g. `- {calibrated: 2026-01-10, due: 2027-01-10, certificate: C-118}`")
            .found(kind_name(v)),
        );
        return;
    };
    for item in items {
        let Value::Mapping(m) = item else {
            ex.err(
                Diagnostic::new(ex.y.value_span(&path), "a calibration must be a mapping")
                    .expected("`{calibrated, due, certificate}`")
                    .found(kind_name(item)),
            );
            continue;
        };
        let text = |k: &str| m.get(k).and_then(|x| ex.text_of(&path, x));
        let (cal, due, cert) = (text("calibrated"), text("due"), text("certificate"));
        for k in m.keys() {
            let k = k.as_str().unwrap_or("?");
            if !HISTORY_KEYS.contains(&k) {
                let at = ex.y.item_span(&path, k);
                ex.err(
                    Diagnostic::new(at, format!("unknown key `{k}` in a calibration"))
                        .expected("`calibrated`, `due` and `certificate`")
                        .found(format!("`{k}`")),
                );
            }
        }
        let mut date = |key: &str, t: Option<String>| -> Option<NaiveDate> {
            let Some(t) = t else {
                let at = cal_span(ex, &path, m);
                ex.err(
                    Diagnostic::new(
                        at,
                        format!("a calibration in the history of {id} lacks `{key}`"),
                    )
                    .expected(format!("`{key}: YYYY-MM-DD`"))
                    .found(format!("no `{key}`")),
                );
                return None;
            };
            let parsed = parse_iso_date(&t);
            if parsed.is_none() {
                let at = ex.y.item_span(&path, t.trim());
                ex.err(
                    Diagnostic::new(at, format!("`{key}` is not a date"))
                        .expected("an ISO 8601 date YYYY-MM-DD, e.g. 2026-03-14")
                        .found(format!("`{}`", t.trim())),
                );
            }
            parsed
        };
        let (Some(c), Some(du)) = (date("calibrated", cal), date("due", due)) else {
            continue;
        };
        if du < c {
            let at = ex.y.item_span(&path, &du.to_string());
            ex.err(
                Diagnostic::new(at, "calibration due date is before the calibration date")
                    .expected(format!("a date on or after {c}"))
                    .found(du.to_string()),
            );
            continue;
        }
        out.push(Calibration {
            calibrated: c,
            due: Some(du),
            certificate: cert,
        });
    }
}

/// Where a calibration sits: its first value's text inside `history`, else the key.
fn cal_span(ex: &ValueReader, path: &[&str], m: &serde_yaml::Mapping) -> Span {
    m.values()
        .find_map(|v| ex.text_of(path, v))
        .map(|t| ex.y.item_span(path, t.trim()))
        .unwrap_or_else(|| ex.y.value_span(path))
}

fn defaults(ex: &mut ValueReader, v: &Value) -> Defaults {
    let mut out = Defaults::default();
    for (key, val) in ex.entries(&["defaults"], v, Some(DEFAULT_KEYS)) {
        let path = ["defaults", key.as_str()];
        match key.as_str() {
            "coverage" => out.coverage = coverage(ex, &path, val),
            "decision" => out.decision = decision(ex, &path, val),
            "template" => {
                out.template = ex
                    .nonempty_text(&path, val)
                    .map(|s| (s, ex.y.value_span(&path)))
            }
            "derating" => out.derating = Some(derating(ex, val)),
            _ => {}
        }
    }
    out
}

/// `derating`: each a percentage of the rating, above 0 % and at most 100 %.
fn derating(ex: &mut ValueReader, v: &Value) -> DeratingSpec {
    let mut out = DeratingSpec::default();
    for (key, val) in ex.entries(&["defaults", "derating"], v, Some(DERATING_KEYS)) {
        let path = ["defaults", "derating", key.as_str()];
        let Some(q) = ex.quantity(&path, val, &[Unit::Percent], None) else {
            continue;
        };
        if !(q.value > 0.0 && q.value <= 1.0) {
            let span = ex.y.value_span(&path);
            ex.err(
                Diagnostic::new(span, format!("`{key}` is out of range"))
                    .expected("a percentage of the rating above 0 % and at most 100 %")
                    .found(format!("`{}`", &ex.y.src[span.start..span.end])),
            );
            continue;
        }
        match key.as_str() {
            "resistor_power" => out.resistor_power = Some(q.value),
            "capacitor_voltage" => out.capacitor_voltage = Some(q.value),
            _ => out.inductor_current = Some(q.value),
        }
    }
    out
}

// ---------------------------------------------------------------------------------------------
// What a notebook takes from the register.

/// What a notebook takes from its register (`Notebook::lab`).
#[derive(Debug, Clone, Default)]
pub struct LabUse {
    /// The register's `lab`.
    pub lab: Option<String>,
    /// Register entries the notebook relies on, in the order first named.
    pub used: Vec<UsedAsset>,
    /// Names of the notebook's own `instruments` that override a register entry and are used.
    pub overrides: Vec<String>,
    /// Defaults taken from the register (key → value as JSON), for the digest.
    pub defaults: BTreeMap<String, serde_json::Value>,
    /// `defaults.derating`, when the register gives it.
    pub derating: Option<DeratingSpec>,
    /// `defaults.template`, when the notebook names none (relative to the register's folder).
    pub template: Option<(String, Span)>,
}

/// A register entry as the notebook uses it.
#[derive(Debug, Clone)]
pub struct UsedAsset {
    pub id: String,
    /// The calibration current on the readings' date, if any.
    pub calibration: Option<Calibration>,
    /// The resolved entry (specs and that calibration) as canonical JSON, for the digest.
    pub canonical: String,
}

impl LabUse {
    pub fn asset(&self, id: &str) -> Option<&UsedAsset> {
        self.used.iter().find(|u| u.id == id)
    }
}

/// With a register, an instrument that is not defined is named as missing from both places.
pub(super) fn undefined_in_register(d: &mut Diagnostic) {
    let msg = d.message.clone();
    let Some(rest) = msg.strip_prefix("instrument `") else {
        return;
    };
    if let Some(name) = rest.strip_suffix("` is not defined in the front matter") {
        d.message = format!(
            "instrument `{name}` is defined neither in the front matter nor in the lab register"
        );
        if d.help.as_deref().is_some_and(|h| h.starts_with("add it")) {
            d.help = Some(format!(
                "add `{name}` under `instruments:` in the front matter or in lab.yaml"
            ));
        }
    }
}

/// Names the notebook uses an instrument by, with where: block headers, then parts' `by`.
fn references(front: &FrontMatter, items: &[Item]) -> Vec<(String, Span)> {
    let mut out = Vec::new();
    for item in items {
        if let Item::Readings(b) = item {
            for n in [&b.meter, &b.phase, &b.counter].into_iter().flatten() {
                out.push((n.name.clone(), n.span));
            }
        }
    }
    for p in front.parts.values() {
        for n in [&p.measured_by, &p.dcr_by].into_iter().flatten() {
            out.push((n.clone(), p.span));
        }
    }
    out
}

/// The entry `a` as used on `date`, its spans moved to `at` (a place in the notebook).
fn resolved(id: &str, a: &Asset, date: NaiveDate, at: Span) -> (Instrument, UsedAsset) {
    let cal = a.calibration_on(date).cloned();
    let mut ins = a.instrument.clone();
    ins.span = at;
    for r in &mut ins.ranges {
        r.span = at;
    }
    ins.calibrated = cal.as_ref().map(|c| c.calibrated);
    ins.due = cal.as_ref().and_then(|c| c.due);
    let cal_json = cal.as_ref().map(|c| {
        serde_json::json!({
            "calibrated": c.calibrated.to_string(),
            "due": c.due.map(|d| d.to_string()),
            "certificate": c.certificate,
        })
    });
    let canonical = serde_json::json!({ "spec": a.spec, "calibration": cal_json }).to_string();
    let used = UsedAsset {
        id: id.to_string(),
        calibration: cal,
        canonical,
    };
    (ins, used)
}

/// Takes into `front` the register entries the notebook names and does not define, and the
/// defaults for keys the front matter leaves out (`present` are the keys it has).
pub(super) fn resolve(
    front: &mut FrontMatter,
    items: &[Item],
    reg: &Register,
    present: &BTreeSet<String>,
) -> LabUse {
    let mut lab = LabUse {
        lab: reg.lab.clone(),
        ..LabUse::default()
    };
    let own: BTreeSet<String> = front.instruments.keys().cloned().collect();
    for (name, at) in references(front, items) {
        if lab.asset(&name).is_some() {
            continue;
        }
        if own.contains(&name) {
            if reg.instruments.contains_key(&name) && !lab.overrides.contains(&name) {
                lab.overrides.push(name);
            }
        } else if let Some(a) = reg.instruments.get(&name) {
            let (ins, used) = resolved(&name, a, front.date, at);
            front.instruments.insert(name, ins);
            lab.used.push(used);
        }
    }
    let d = &reg.defaults;
    if !present.contains("lab") && front.lab.is_none() {
        front.lab = reg.lab.clone();
    }
    if let (false, Some(p)) = (present.contains("coverage"), d.coverage) {
        front.coverage = p;
        lab.defaults.insert("coverage".into(), serde_json::json!(p));
    }
    if let (false, Some(rule)) = (present.contains("decision"), d.decision) {
        front.decision = rule;
        let word = match rule {
            Decision::Simple => "simple",
            Decision::Guarded => "guarded",
        };
        lab.defaults
            .insert("decision".into(), serde_json::json!(word));
    }
    if let (false, Some((t, sp))) = (present.contains("template"), &d.template) {
        lab.template = Some((t.clone(), *sp));
        lab.defaults.insert("template".into(), serde_json::json!(t));
    }
    if let Some(dr) = d.derating {
        lab.derating = Some(dr);
        if front.parts.values().any(|p| p.rating.is_some()) {
            let v = serde_json::json!({
                "resistor_power": dr.resistor_power,
                "capacitor_voltage": dr.capacitor_voltage,
                "inductor_current": dr.inductor_current,
            });
            lab.defaults.insert("derating".into(), v);
        }
    }
    lab
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::diag::line_col;

    const REG: &str = "lab: Test bench (invented)\ninstruments:\n  DMM-07:\n    what: bench meter\n    accuracy: 0.5% + 2\n    resolution: 0.1 mV\n    history:\n      - {calibrated: 2025-01-10, due: 2026-01-10, certificate: C-1}\n      - {calibrated: 2026-01-12, due: 2027-01-12, certificate: C-2}\ndefaults:\n  derating: {resistor_power: 40%, capacitor_voltage: 60%}\n";

    #[test]
    fn the_current_calibration_is_the_latest_made_on_or_before_the_date() {
        let r = parse_register(REG).expect("parses");
        assert_eq!(r.lab.as_deref(), Some("Test bench (invented)"));
        let a = &r.instruments["DMM-07"];
        let on = |d: &str| {
            a.calibration_on(parse_iso_date(d).unwrap())
                .and_then(|c| c.certificate.clone())
        };
        assert_eq!(on("2025-06-01").as_deref(), Some("C-1"));
        // On the day of the second calibration it is the current one.
        assert_eq!(on("2026-01-12").as_deref(), Some("C-2"));
        assert_eq!(on("2026-01-11").as_deref(), Some("C-1"));
        assert_eq!(on("2024-12-31"), None);
        let dr = r.defaults.derating.unwrap();
        assert_eq!(dr.resistor_power, Some(0.4));
        assert_eq!(dr.inductor_current, None);
        // The spec leaves the calibration keys out.
        assert!(a.spec.get("history").is_none() && a.spec.get("what").is_some());
    }

    #[test]
    fn register_errors_point_into_the_register() {
        let bad = REG.replace("due: 2027-01-12", "due: 2027-13-12");
        let d = parse_register(&bad).unwrap_err();
        let (l, _) = line_col(&bad, d[0].span.start);
        assert_eq!(l, 9, "{:?}", d);
        let bad = REG.replace("resistor_power: 40%", "resistor_power: 140%");
        let d = parse_register(&bad).unwrap_err();
        assert_eq!(line_col(&bad, d[0].span.start).0, 11, "{:?}", d);
        assert!(parse_register("lab: [unclosed\n").is_err());
        let d = parse_register("labs: x\n").unwrap_err();
        assert!(d[0].message.contains("unknown key"), "{:?}", d);
    }

    #[test]
    fn an_entry_named_twice_is_used_once_and_overrides_nothing() {
        let r = parse_register(REG).expect("parses");
        let block = |id: &str| {
            format!("```readings\nid: {id}\nnetwork: RC\nparts: [R1, C1]\nmeter: DMM-07\n---\nf/Hz VR/V VC/V\n1000 1.0 1.0\n```\n\n")
        };
        let src = format!(
            "---\nrecord: R\ntitle: t\ndate: 2026-02-01\noperator: o\nparts:\n  R1: {{kind: resistor, nominal: 1 kohm}}\n  C1: {{kind: capacitor, nominal: 1 uF}}\n---\n\n{}{}",
            block("a"),
            block("b")
        );
        let nb = crate::notebook::parse_with(&src, Some(&r)).expect("parses");
        let lab = nb.lab.expect("a register was given");
        assert!(lab.overrides.is_empty());
        assert_eq!(lab.used.len(), 1);
        let ins = &nb.front.instruments["DMM-07"];
        // The span points at the first `meter:` value in the notebook, not into lab.yaml.
        assert_eq!(&src[ins.span.start..ins.span.end], "DMM-07");
        assert_eq!(ins.due, parse_iso_date("2027-01-12"));
        assert!(
            crate::notebook::parse(&src).is_err(),
            "without the register"
        );
    }
}
