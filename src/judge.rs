//! Judge: conformity verdicts (ILAC-G8), safety checks, citation checks and the sign-off
//! state. Turns a notebook and its reduction into the `Record` the renderer prints.

use crate::diag::{Diagnostic, Span};
use crate::networks::{BlockResult, NamedResult, Reduction};
use crate::notebook::{Decision, Item, Notebook, Part, PartKind, ReadingsBlock, Tolerance};
use crate::quantity::{parse_quantity, Unit};
use crate::signoff;
use std::collections::BTreeMap;

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Outcome {
    Pass,
    Fail,
    Inconclusive,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Verdict {
    pub block: String,
    /// Result name (C, L, R).
    pub name: String,
    pub part: String,
    pub nominal: f64,
    pub unit: Unit,
    pub low: f64,
    pub high: f64,
    pub value: f64,
    /// Expanded uncertainty U.
    pub expanded: f64,
    pub k: f64,
    pub outcome: Outcome,
    /// The unit's serial, for a verdict on one unit of a lot.
    pub serial: Option<String>,
    /// The Monte Carlo coverage interval the verdict used in place of value ± U, where the
    /// GUM interval failed the JCGM 101 §8 check.
    pub mc: Option<McUsed>,
}

/// A Monte Carlo coverage interval used for a verdict (probabilistically symmetric, JCGM 101
/// §7.7.2, at the notebook's coverage probability).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct McUsed {
    pub low: f64,
    pub high: f64,
    /// Trials kept and drawn: fewer kept than drawn makes the interval conditional on the
    /// model being defined (the dropped trials are not in it).
    pub trials: usize,
    pub dropped: usize,
}

/// The lot figures of one lot block (FORMAT.md 1.1, "Lots"), over the units' values of the
/// judged quantity `name` of `part`.
#[derive(Debug, Clone, PartialEq)]
pub struct LotRecord {
    pub block: String,
    pub part: String,
    /// The judged result (C, L, R).
    pub name: String,
    pub unit: Unit,
    pub nominal: f64,
    pub low: f64,
    pub high: f64,
    /// None when a unit's value could not be computed (the unit is then not judged).
    pub stats: Option<crate::lot::LotStats>,
    pub pass: usize,
    pub fail: usize,
    pub inconclusive: usize,
}

#[derive(Debug, Clone, PartialEq)]
pub struct SafetyCheck {
    pub block: String,
    pub part: String,
    /// What was checked, e.g. "dissipation VR²/R".
    pub what: String,
    /// Worst value over the block's rows.
    pub value: f64,
    /// The part's rating.
    pub rating: f64,
    /// Derated limit (rating × derating).
    pub limit: f64,
    pub unit: Unit,
    pub ok: bool,
    pub span: Option<Span>,
}

pub use crate::signoff::SignState;

#[derive(Debug, Clone)]
pub struct Record {
    pub notebook: Notebook,
    pub reduction: Reduction,
    pub verdicts: Vec<Verdict>,
    /// The figures of each lot block, in notebook order.
    pub lots: Vec<LotRecord>,
    pub safety: Vec<SafetyCheck>,
    pub sign: SignState,
    /// SHA-256 (hex) of the canonical form of everything that determines the results.
    pub digest: String,
    /// SHA-256 (hex) of the whole notebook source, as embedded in the PDF.
    pub source_digest: String,
    /// Citations found in prose (`=block.name` or `=block.name@f`), key without the `=`,
    /// resolved to printed text (value ± U unit).
    pub citations: std::collections::BTreeMap<String, String>,
    /// Derating factors used by the safety checks (stated in the report).
    pub derating: Derating,
}

/// Fractions of a part's rating allowed before a safety check is flagged.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Derating {
    pub resistor_power: f64,
    pub capacitor_voltage: f64,
    pub inductor_current: f64,
}

impl Default for Derating {
    /// Common practice on the bench: resistors at half their rated power, capacitors and
    /// coils at 80 % of their rated voltage or current.
    fn default() -> Self {
        Derating {
            resistor_power: 0.5,
            capacitor_voltage: 0.8,
            inductor_current: 0.8,
        }
    }
}

impl Derating {
    /// The lab register's policy (`defaults.derating`); a factor it leaves out keeps the
    /// default.
    pub fn from_register(spec: &crate::notebook::register::DeratingSpec) -> Self {
        let d = Derating::default();
        Derating {
            resistor_power: spec.resistor_power.unwrap_or(d.resistor_power),
            capacitor_voltage: spec.capacitor_voltage.unwrap_or(d.capacitor_voltage),
            inductor_current: spec.inductor_current.unwrap_or(d.inductor_current),
        }
    }
}

impl Outcome {
    pub fn word(self) -> &'static str {
        match self {
            Outcome::Pass => "pass",
            Outcome::Fail => "fail",
            Outcome::Inconclusive => "inconclusive",
        }
    }
}

/// The tolerance interval [low, high] around a nominal value.
pub fn tolerance_interval(nominal: f64, tol: &Tolerance) -> (f64, f64) {
    let half = match tol {
        Tolerance::Relative(f) | Tolerance::Code(_, f) => nominal.abs() * f,
        Tolerance::Absolute(a) => a.abs(),
    };
    (nominal - half, nominal + half)
}

/// Conformity decision after ILAC-G8:09/2019.
///
/// `Simple`: simple acceptance (guard band w = 0, §4.2.1): the value inside the closed tolerance
/// interval passes, a value on a limit passes, anything outside fails.
/// `Guarded`: guard band w = U (§4.2.2 and §4.2.3 read together as a binary rule with a third
/// outcome): pass when [value − U, value + U] lies inside [low, high] (touching a limit still
/// counts as inside), fail when it lies wholly outside (touching a limit is not wholly outside),
/// otherwise inconclusive.
pub fn decide(value: f64, expanded: f64, low: f64, high: f64, rule: Decision) -> Outcome {
    match rule {
        Decision::Simple => {
            if value >= low && value <= high {
                Outcome::Pass
            } else {
                Outcome::Fail
            }
        }
        Decision::Guarded => {
            let u = expanded.abs();
            if value - u >= low && value + u <= high {
                Outcome::Pass
            } else if value + u < low || value - u > high {
                Outcome::Fail
            } else {
                Outcome::Inconclusive
            }
        }
    }
}

/// Conformity decision on a coverage interval [y_low, y_high] (a Monte Carlo interval, which
/// need not be symmetric about the value): the ILAC-G8 rules of [`decide`] with value − U and
/// value + U replaced by the interval's ends. Simple acceptance still uses the value alone.
pub fn decide_interval(
    value: f64,
    y_low: f64,
    y_high: f64,
    low: f64,
    high: f64,
    rule: Decision,
) -> Outcome {
    match rule {
        Decision::Simple => decide(value, 0.0, low, high, rule),
        Decision::Guarded => {
            if y_low >= low && y_high <= high {
                Outcome::Pass
            } else if y_high < low || y_low > high {
                Outcome::Fail
            } else {
                Outcome::Inconclusive
            }
        }
    }
}

/// The Monte Carlo interval of `m` when the GUM interval failed its §8 check.
pub fn mc_in_place_of_gum(m: &crate::uncertainty::Measured) -> Option<McUsed> {
    let mc =
        m.mc.as_ref()
            .filter(|mc| !mc.gum_validated && mc.trials >= 2)?;
    Some(McUsed {
        low: mc.low,
        high: mc.high,
        trials: mc.trials,
        dropped: mc.dropped,
    })
}

/// The kind of part a block result is judged against, as its network says.
fn kind_for_result(res: &BlockResult, name: &str) -> Option<PartKind> {
    let judged = res.network.descriptor().judged;
    judged.iter().find(|(n, _)| *n == name).map(|(_, k)| *k)
}

/// The verdicts of a block's judged results; for one unit of a lot (`unit` set), only those
/// against the lot's part.
fn verdicts_for(
    nb: &Notebook,
    block: &ReadingsBlock,
    res: &BlockResult,
    unit: Option<&str>,
) -> Vec<Verdict> {
    let mut out = Vec::new();
    let only = block.lot.as_ref().map(|l| l.part.name.as_str());
    for r in &res.results {
        let Some(kind) = kind_for_result(res, &r.name) else {
            continue;
        };
        let part = block
            .parts
            .iter()
            .filter(|n| unit.is_none() || only == Some(n.name.as_str()))
            .filter_map(|n| nb.front.parts.get(&n.name))
            .find(|p| p.kind == kind);
        let Some(part) = part else { continue };
        let (Some(nominal), Some(tol)) = (part.nominal, part.tolerance.as_ref()) else {
            continue;
        };
        let (low, high) = tolerance_interval(nominal.value, tol);
        let mc = mc_in_place_of_gum(&r.m);
        let rule = nb.front.decision;
        let outcome = match mc {
            Some(i) => decide_interval(r.m.value, i.low, i.high, low, high, rule),
            None => decide(r.m.value, r.m.expanded, low, high, rule),
        };
        out.push(Verdict {
            block: block.id.clone(),
            name: r.name.clone(),
            part: part.name.clone(),
            nominal: nominal.value,
            unit: r.unit,
            low,
            high,
            value: r.m.value,
            expanded: r.m.expanded,
            k: r.m.k,
            outcome,
            serial: unit.map(str::to_string),
            mc,
        });
    }
    out.extend(loss_verdicts(nb, block, res, unit));
    out
}

/// Block results D and ESR held against the capacitor's `max_D` and `max_esr`: one-sided,
/// only the upper limit is tested; the interval shown is [0, limit] with the ideal 0 as
/// nominal (a loss is never negative).
fn loss_verdicts(
    nb: &Notebook,
    block: &ReadingsBlock,
    res: &BlockResult,
    unit: Option<&str>,
) -> Vec<Verdict> {
    let only = block.lot.as_ref().map(|l| l.part.name.as_str());
    let part = block
        .parts
        .iter()
        .filter(|n| unit.is_none() || only == Some(n.name.as_str()))
        .filter_map(|n| nb.front.parts.get(&n.name))
        .find(|p| p.kind == PartKind::Capacitor);
    let Some(part) = part else { return Vec::new() };
    let limit_of = |name: &str| match name {
        "D" => part.loss.max_d,
        "ESR" => part.loss.max_esr,
        _ => None,
    };
    let rule = nb.front.decision;
    res.results
        .iter()
        .filter_map(|r| {
            let high = limit_of(&r.name)?;
            let (value, expanded) = (r.m.value, r.m.expanded);
            Some(Verdict {
                block: block.id.clone(),
                name: r.name.clone(),
                part: part.name.clone(),
                nominal: 0.0,
                unit: r.unit,
                low: 0.0,
                high,
                value,
                expanded,
                k: r.m.k,
                outcome: decide(value, expanded, f64::NEG_INFINITY, high, rule),
                serial: unit.map(str::to_string),
                // The loss networks have no Monte Carlo: the verdict rests on value ± U.
                mc: None,
            })
        })
        .collect()
}

/// A lot block: each unit judged as a block of its own, then the lot figures over the units'
/// values of the judged quantity.
fn judge_lot(
    nb: &Notebook,
    block: &ReadingsBlock,
    lot: &crate::lot::LotReduction,
) -> (Vec<Verdict>, Option<LotRecord>) {
    let mut verdicts = Vec::new();
    for u in &lot.units {
        verdicts.extend(verdicts_for(nb, block, &u.result, Some(&u.serial)));
    }
    let first = verdicts.first().cloned();
    let Some(first) = first else {
        return (verdicts, None);
    };
    let values: Vec<f64> = verdicts.iter().map(|v| v.value).collect();
    let count = |o: Outcome| verdicts.iter().filter(|v| v.outcome == o).count();
    // Every unit gives the judged result unless a guard left it out; then no lot figures.
    let complete = values.len() == lot.units.len();
    let rec = LotRecord {
        block: block.id.clone(),
        part: first.part.clone(),
        name: first.name.clone(),
        unit: first.unit,
        nominal: first.nominal,
        low: first.low,
        high: first.high,
        stats: complete
            .then(|| crate::lot::stats(&values, first.low, first.high, nb.front.coverage))
            .flatten(),
        pass: count(Outcome::Pass),
        fail: count(Outcome::Fail),
        inconclusive: count(Outcome::Inconclusive),
    };
    (verdicts, Some(rec))
}

/// The value of a resistor for the safety checks: measured if given, else nominal.
fn part_value(p: &Part) -> Option<f64> {
    p.measured
        .or(p.nominal)
        .map(|q| q.value)
        .filter(|v| v.is_finite() && *v > 0.0)
}

/// Worst value of `f(row)` over a block's rows, with the row's span.
fn worst(
    block: &ReadingsBlock,
    f: impl Fn(&dyn Fn(&str) -> Option<f64>) -> Option<f64>,
) -> Option<(f64, Span)> {
    let mut best: Option<(f64, Span)> = None;
    for row in &block.rows {
        let get = |sym: &str| {
            block
                .col(sym)
                .and_then(|i| row.cells.get(i))
                .map(|c| c.value)
        };
        if let Some(v) = f(&get) {
            if v.is_finite() && best.map_or(true, |(b, _)| v > b) {
                best = Some((v, row.span));
            }
        }
    }
    best
}

/// Computed safety checks from the readings: series resistor dissipation VR²/R, capacitor
/// peak voltage √2·VC (or, where VC was not read, √2·I·XC from the C this block reduced to
/// (`reduced_c`, e.g. the RLC fit's), else the part's measured C, else its nominal), coil
/// current.
pub fn safety_checks(
    nb: &Notebook,
    block: &ReadingsBlock,
    d: &Derating,
    reduced_c: Option<f64>,
) -> Vec<SafetyCheck> {
    let parts: Vec<&Part> = block
        .parts
        .iter()
        .filter_map(|n| nb.front.parts.get(&n.name))
        .collect();
    let resistor = parts.iter().copied().find(|p| p.kind == PartKind::Resistor);
    let r_value = resistor.and_then(part_value);
    let current = |get: &dyn Fn(&str) -> Option<f64>| -> Option<f64> {
        get("I").or_else(|| Some(get("VR")? / r_value?))
    };
    let mut out = Vec::new();
    let mut push =
        |part: &Part, what: &str, worst: Option<(f64, Span)>, unit: Unit, factor: f64| {
            let (Some(rating), Some((value, span))) = (part.rating, worst) else {
                return;
            };
            let limit = rating.value * factor;
            out.push(SafetyCheck {
                block: block.id.clone(),
                part: part.name.clone(),
                what: what.into(),
                value,
                rating: rating.value,
                limit,
                unit,
                ok: value <= limit,
                span: Some(span),
            });
        };
    for part in &parts {
        match part.kind {
            PartKind::Resistor => {
                let Some(r) = part_value(part) else { continue };
                if block.col("VR").is_none() && block.col("IR").is_some() {
                    let w = worst(block, |g| Some(g("IR")?.powi(2) * r));
                    push(part, "dissipation IR²·R", w, Unit::W, d.resistor_power);
                    continue;
                }
                let w = worst(block, |g| Some(g("VR")?.powi(2) / r));
                push(part, "dissipation VR²/R", w, Unit::W, d.resistor_power);
            }
            PartKind::Capacitor => {
                // The block's own C, else the part's measured C, else the nominal; the
                // check says which.
                let reduced = reduced_c.filter(|c| c.is_finite() && *c > 0.0);
                let c = reduced.or_else(|| part_value(part));
                let what = if block.col("VC").is_some() {
                    "peak voltage √2·VC".to_string()
                } else if block.col("IC").is_some() {
                    "peak voltage √2·V".to_string()
                } else if reduced.is_some() {
                    "peak voltage √2·I/(2πf·C), C from this block's readings".to_string()
                } else if part.measured.is_some() {
                    "peak voltage √2·I/(2πf·C), C measured".to_string()
                } else {
                    "peak voltage √2·I/(2πf·C), C nominal".to_string()
                };
                let w = worst(block, |g| {
                    let parallel = g("IC").and(g("V"));
                    let vc = g("VC").or(parallel).or_else(|| {
                        let i = current(g)?;
                        let f = g("f")?;
                        Some(i / (2.0 * std::f64::consts::PI * f * c?))
                    })?;
                    Some(std::f64::consts::SQRT_2 * vc)
                });
                push(part, &what, w, Unit::V, d.capacitor_voltage);
            }
            PartKind::Inductor => {
                let Some(rating) = part.rating else { continue };
                if rating.unit == Unit::W {
                    let res = part.dcr.map(|q| q.value);
                    let w = worst(block, |g| {
                        Some(g("IL").or_else(|| current(g))?.powi(2) * res?)
                    });
                    push(
                        part,
                        "winding dissipation I²·dcr",
                        w,
                        Unit::W,
                        d.inductor_current,
                    );
                } else {
                    let w = worst(block, |g| g("IL").or_else(|| current(g)));
                    let what = if block.col("IL").is_some() {
                        "coil current IL"
                    } else {
                        "coil current I"
                    };
                    push(part, what, w, Unit::A, d.inductor_current);
                }
            }
        }
    }
    out
}

/// Looks up a citation key `block.name` or `block.name@f` (f with or without `Hz`).
pub fn resolve_citation<'a>(red: &'a Reduction, key: &str) -> Result<&'a NamedResult, String> {
    let (path, at) = match key.split_once('@') {
        Some((p, f)) => (p, Some(f.trim())),
        None => (key, None),
    };
    let Some((block_id, name)) = path.rsplit_once('.') else {
        return Err(format!(
            "a citation is written `=block.result` or `=block.result@f`, found `={key}`"
        ));
    };
    let Some(block) = red.blocks.iter().find(|b| b.id == block_id) else {
        let ids: Vec<&str> = red.blocks.iter().map(|b| b.id.as_str()).collect();
        return Err(format!(
            "no readings block `{block_id}` (blocks: {})",
            ids.join(", ")
        ));
    };
    match at {
        None => block
            .results
            .iter()
            .find(|r| r.name == name)
            .ok_or_else(|| {
                let names: Vec<&str> = block.results.iter().map(|r| r.name.as_str()).collect();
                format!(
                    "block `{block_id}` has no block result `{name}` (it has: {})",
                    names.join(", ")
                )
            }),
        Some(ftext) => {
            let f = parse_quantity(ftext)
                .ok()
                .filter(|q| q.unit == Unit::Hz || q.unit == Unit::One)
                .map(|q| q.value)
                .ok_or_else(|| format!("`{ftext}` is not a frequency (write e.g. `@1.2kHz`)"))?;
            block
                .rows
                .iter()
                .find(|r| {
                    r.name == name
                        && r.f
                            .is_some_and(|rf| (rf - f).abs() <= 1e-9 * f.abs().max(1e-300))
                })
                .ok_or_else(|| {
                    let fs: Vec<String> = block
                        .rows
                        .iter()
                        .filter(|r| r.name == name)
                        .filter_map(|r| r.f)
                        .map(|f| format!("{f} Hz"))
                        .collect();
                    if fs.is_empty() {
                        format!("block `{block_id}` has no per-frequency result `{name}`")
                    } else {
                        format!(
                            "block `{block_id}` has `{name}` at {} but not at {f} Hz",
                            fs.join(", ")
                        )
                    }
                })
        }
    }
}

/// Printed form of a cited result: value ± U unit, as the record's tables print it.
pub fn cite_text(r: &NamedResult) -> String {
    crate::print::value_u(r.m.value, r.m.expanded, r.unit)
}

/// Every citation (inline code starting with `=`) in the prose, with its span.
pub fn citations(nb: &Notebook) -> Vec<(String, Span)> {
    crate::notebook::prose_refs(&nb.items)
        .flat_map(|r| r.citations.iter().cloned())
        .collect()
}

/// Judge a reduced notebook: verdicts, safety, citations, sign-off state.
pub fn judge(nb: Notebook, reduction: Reduction) -> Result<Record, Vec<Diagnostic>> {
    let derating = match nb.lab.as_ref().and_then(|l| l.derating.as_ref()) {
        Some(spec) => Derating::from_register(spec),
        None => Derating::default(),
    };
    let mut verdicts = Vec::new();
    let mut lots = Vec::new();
    let mut safety = Vec::new();
    for item in &nb.items {
        let Item::Readings(block) = item else {
            continue;
        };
        let res = reduction.blocks.iter().find(|b| b.id == block.id);
        if let Some(lot) = reduction.lots.iter().find(|l| l.block == block.id) {
            let (v, rec) = judge_lot(&nb, block, lot);
            verdicts.extend(v);
            lots.extend(rec);
        } else if let Some(res) = res {
            verdicts.extend(verdicts_for(&nb, block, res, None));
        }
        let reduced_c = res.and_then(|r| r.results.iter().find(|x| x.name == "C"));
        safety.extend(safety_checks(
            &nb,
            block,
            &derating,
            reduced_c.map(|x| x.m.value),
        ));
    }
    let mut diags = Vec::new();
    let mut cites = BTreeMap::new();
    for (key, span) in citations(&nb) {
        match resolve_citation(&reduction, &key) {
            Ok(r) => {
                cites.insert(key, cite_text(r));
            }
            Err(msg) => diags.push(
                Diagnostic::new(
                    span,
                    format!("citation `={key}` does not name a result: {msg}"),
                )
                .expected(
                    "`=block.result` for a block result, or `=block.result@f` for one frequency",
                )
                .found(format!("`={key}`")),
            ),
        }
    }
    if !diags.is_empty() {
        return Err(diags);
    }
    let digest = signoff::digest(&nb);
    let sign = signoff::state(&nb, &digest);
    let source_digest = signoff::sha256_hex(nb.source.as_bytes());
    Ok(Record {
        notebook: nb,
        reduction,
        verdicts,
        lots,
        safety,
        sign,
        digest,
        source_digest,
        citations: cites,
        derating,
    })
}

/// Everything a signer must acknowledge with a reason (`sign --accept`): every warning flag
/// ([`crate::networks::Flag::warn`]), every verdict other than pass, and every safety check
/// over its limit. Empty for a clean record.
pub fn reservations(rec: &Record) -> Vec<String> {
    let mut out = Vec::new();
    for b in &rec.reduction.blocks {
        for f in b.flags.iter().filter(|f| f.warn) {
            out.push(format!("block `{}`: {}", b.id, f.message));
        }
    }
    for v in &rec.verdicts {
        let word = match v.outcome {
            Outcome::Pass => continue,
            Outcome::Fail => "fail",
            Outcome::Inconclusive => "inconclusive",
        };
        match &v.serial {
            Some(u) => out.push(format!(
                "block `{}`: {} of {} unit {u} is {word}",
                v.block, v.name, v.part
            )),
            None => out.push(format!(
                "block `{}`: {} of {} is {word}",
                v.block, v.name, v.part
            )),
        }
    }
    for s in rec.safety.iter().filter(|s| !s.ok) {
        out.push(format!(
            "block `{}`: {} of {} exceeds its derated limit",
            s.block, s.what, s.part
        ));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    // ILAC-G8:09/2019 §4.2.1 (simple acceptance, guard band w = 0) and §4.2.2/§4.2.3
    // (guard band w = U; the zone between acceptance and rejection gives no binary statement).
    // Section numbers from memory. Tolerance interval [9, 11] throughout.
    const LO: f64 = 9.0;
    const HI: f64 = 11.0;

    #[test]
    fn simple_acceptance_at_the_limits() {
        use Outcome::*;
        let d = |v, u| decide(v, u, LO, HI, Decision::Simple);
        assert_eq!(d(10.0, 0.5), Pass);
        assert_eq!(
            d(11.0, 0.5),
            Pass,
            "a value on the upper limit is within the interval"
        );
        assert_eq!(
            d(9.0, 0.5),
            Pass,
            "a value on the lower limit is within the interval"
        );
        assert_eq!(d(11.000001, 0.0), Fail);
        assert_eq!(d(8.9, 5.0), Fail, "simple acceptance ignores U");
        assert_eq!(d(10.9, 5.0), Pass, "simple acceptance ignores U");
    }

    #[test]
    fn guarded_acceptance_at_the_limits() {
        use Outcome::*;
        let d = |v, u| decide(v, u, LO, HI, Decision::Guarded);
        assert_eq!(d(10.0, 0.5), Pass);
        assert_eq!(
            d(10.5, 0.5),
            Pass,
            "value + U exactly on the limit is still inside"
        );
        assert_eq!(d(10.6, 0.5), Inconclusive, "U straddles the upper limit");
        assert_eq!(d(11.0, 0.5), Inconclusive, "value on the limit: straddles");
        assert_eq!(d(9.3, 0.5), Inconclusive, "U straddles the lower limit");
        assert_eq!(
            d(11.5, 0.5),
            Inconclusive,
            "value − U exactly on the limit is not wholly outside"
        );
        assert_eq!(d(11.6, 0.5), Fail);
        assert_eq!(d(8.4, 0.5), Fail);
        assert_eq!(
            d(10.0, 1.5),
            Inconclusive,
            "U wider than the interval can never pass"
        );
    }

    #[test]
    fn tolerance_intervals() {
        // IEC 60062:2016 Table 8 letter codes (from memory): J = ±5 %, K = ±10 %.
        let (lo, hi) = tolerance_interval(100e-9, &Tolerance::Code('J', 0.05));
        assert!((lo - 95e-9).abs() < 1e-21 && (hi - 105e-9).abs() < 1e-21);
        let (lo, hi) = tolerance_interval(2.2e-3, &Tolerance::Code('K', 0.10));
        assert!((lo - 1.98e-3).abs() < 1e-15 && (hi - 2.42e-3).abs() < 1e-15);
        let (lo, hi) = tolerance_interval(22.0, &Tolerance::Absolute(0.5));
        assert_eq!((lo, hi), (21.5, 22.5));
        let (lo, hi) = tolerance_interval(1000.0, &Tolerance::Relative(0.01));
        assert_eq!((lo, hi), (990.0, 1010.0));
    }

    fn notebook(rows: &str) -> Notebook {
        let src = format!(
            "---\nrecord: T-1\ntitle: t\ndate: 2026-11-02\noperator: o\nparts:\n  R:\n    kind: resistor\n    nominal: 100 ohm\n    tolerance: 1%\n    rating: 0.25 W\n  C:\n    kind: capacitor\n    nominal: 1 uF\n    tolerance: 10%\n    rating: 10 V\n  L:\n    kind: inductor\n    nominal: 10 mH\n    tolerance: 10%\n    rating: 40 mA\n---\n\n```readings\nid: b\nnetwork: RC\nparts: [R, C, L]\n---\nf/Hz VR/V VC/V\n{rows}```\n"
        );
        crate::notebook::parse(&src).expect("test notebook parses")
    }

    fn checks(rows: &str) -> Vec<(String, bool)> {
        let nb = notebook(rows);
        let Some(Item::Readings(block)) = nb.items.iter().find(|i| matches!(i, Item::Readings(_)))
        else {
            panic!("no block")
        };
        safety_checks(&nb, block, &Derating::default(), None)
            .into_iter()
            .map(|c| (c.what, c.ok))
            .collect()
    }

    #[test]
    fn safety_checks_fire_at_the_derated_limits() {
        // Derating is common practice: resistor at 50 % of rated power, capacitor and coil at
        // 80 % of rated voltage and current. R = 100 Ω rated 0.25 W → limit 0.125 W, i.e.
        // VR = √(0.125·100) = 3.5355 V; C rated 10 V → √2·VC ≤ 8 V, VC ≤ 5.657 V;
        // coil rated 40 mA → I = VR/R ≤ 32 mA, VR ≤ 3.2 V.
        let ok = checks("1000 3.199 5.656\n");
        assert!(ok.iter().all(|(_, ok)| *ok), "{ok:?}");
        let hot = checks("1000 3.201 5.658\n");
        assert!(
            hot.iter()
                .any(|(w, ok)| w.starts_with("coil current") && !ok),
            "{hot:?}"
        );
        assert!(
            hot.iter()
                .any(|(w, ok)| w.starts_with("peak voltage") && !ok),
            "{hot:?}"
        );
        assert!(
            hot.iter()
                .any(|(w, ok)| w.starts_with("dissipation") && *ok),
            "{hot:?}"
        );
        let burning = checks("1000 3.536 1.0\n1000 1.0 1.0\n");
        assert!(
            burning
                .iter()
                .any(|(w, ok)| w.starts_with("dissipation") && !ok),
            "{burning:?}"
        );
        let cool = checks("1000 3.535 1.0\n");
        assert!(
            cool.iter()
                .any(|(w, ok)| w.starts_with("dissipation") && *ok),
            "{cool:?}"
        );
    }

    /// Guarded acceptance when U touches a limit from outside (ILAC-G8 §4.2.3, from memory):
    /// touching is not wholly outside, so the outcome is inconclusive, on both sides. The
    /// numbers are exact in binary.
    #[test]
    fn guarded_touching_from_outside_is_inconclusive() {
        use Outcome::*;
        assert_eq!(decide(8.5, 0.5, LO, HI, Decision::Guarded), Inconclusive);
        assert_eq!(decide(11.5, 0.5, LO, HI, Decision::Guarded), Inconclusive);
        assert_eq!(decide(8.25, 0.5, LO, HI, Decision::Guarded), Fail);
        assert_eq!(decide(11.75, 0.5, LO, HI, Decision::Guarded), Fail);
    }

    /// The worst row is the largest, wherever it stands, and its value is reported exactly:
    /// dissipation VR²/R (Joule's law, handbook) with R = 100 Ω.
    #[test]
    fn the_worst_row_is_the_largest_wherever_it_stands() {
        let worst = |rows: &str| {
            let nb = notebook(rows);
            let Some(Item::Readings(block)) =
                nb.items.iter().find(|i| matches!(i, Item::Readings(_)))
            else {
                panic!("no block")
            };
            let c = safety_checks(&nb, block, &Derating::default(), None);
            let d = c
                .iter()
                .find(|c| c.what.starts_with("dissipation"))
                .unwrap();
            (
                d.value,
                crate::diag::line_col(&nb.source, d.span.unwrap().start).0,
            )
        };
        // Rows start at line 30 of the test notebook.
        assert_eq!(
            worst("1000 1.0 1.0\n1000 3.0 1.0\n1000 2.0 1.0\n"),
            (0.09, 31)
        );
        assert_eq!(worst("1000 3.0 1.0\n1000 1.0 1.0\n"), (0.09, 30));
        // A tie keeps the first row.
        assert_eq!(worst("1000 2.0 1.0\n1000 2.0 1.0\n").1, 30);
    }

    /// Without a VC column the capacitor's peak voltage is √2·I·XC with I = VR/R and
    /// XC = 1/(2πfC) (Ohm's law for a capacitor, handbook), from the block's own C (an RLC
    /// fit's) first, else the measured C, else the nominal, and the check says which.
    #[test]
    fn capacitor_peak_voltage_without_vc_uses_the_measured_c() {
        let src = |measured: &str| {
            format!(
                "---\nrecord: T-2\ntitle: t\ndate: 2026-11-02\noperator: o\nparts:\n  R:\n    kind: resistor\n    nominal: 100 ohm\n  C:\n    kind: capacitor\n    nominal: 1 uF\n{measured}    rating: 10 V\n  L:\n    kind: inductor\n    nominal: 10 mH\n---\n\n```readings\nid: b\nnetwork: RLC\nparts: [R, L, C]\n---\nf/Hz Vs/V VR/V\n1000 2.0 1.0\n2000 2.0 1.5\n```\n"
            )
        };
        for (measured, reduced, c, word) in [
            ("", None, 1e-6, "C nominal"),
            ("    measured: 0.5 uF\n", None, 0.5e-6, "C measured"),
            (
                "    measured: 0.5 uF\n",
                Some(0.8e-6),
                0.8e-6,
                "C from this block's readings",
            ),
            ("", Some(f64::NAN), 1e-6, "C nominal"),
        ] {
            let nb = crate::notebook::parse(&src(measured)).expect("parses");
            let Some(Item::Readings(block)) =
                nb.items.iter().find(|i| matches!(i, Item::Readings(_)))
            else {
                panic!("no block")
            };
            let checks = safety_checks(&nb, block, &Derating::default(), reduced);
            let pk = checks
                .iter()
                .find(|c| c.what.starts_with("peak voltage"))
                .unwrap();
            assert!(pk.what.ends_with(word), "{}", pk.what);
            let tau = 2.0 * std::f64::consts::PI;
            let want = [(1000.0, 1.0), (2000.0, 1.5)]
                .iter()
                .map(|(f, vr)| std::f64::consts::SQRT_2 * (vr / 100.0) / (tau * f * c))
                .fold(0.0, f64::max);
            assert!(
                (pk.value - want).abs() < 1e-12 * want,
                "{} vs {want}",
                pk.value
            );
        }
    }

    fn parse_one(src: &str) -> (Notebook, ReadingsBlock) {
        let nb = crate::notebook::parse(src).expect("test notebook parses");
        let Some(Item::Readings(b)) = nb.items.iter().find(|i| matches!(i, Item::Readings(_)))
        else {
            panic!("no block")
        };
        let b = b.clone();
        (nb, b)
    }

    /// A coil rated in watts is checked for winding dissipation I²·dcr (Joule's law) with
    /// I = VR/R: VR = 1 V over 100 Ω and dcr = 10 Ω give 1 mW; the worst of two rows.
    #[test]
    fn coil_rated_in_watts_is_checked_for_winding_dissipation() {
        let (nb, b) = parse_one("---\nrecord: T-3\ntitle: t\ndate: 2026-11-02\noperator: o\nparts:\n  R:\n    kind: resistor\n    nominal: 100 ohm\n  L:\n    kind: inductor\n    nominal: 10 mH\n    dcr: 10 ohm\n    rating: 0.5 W\n---\n\n```readings\nid: b\nnetwork: RL\nparts: [R, L]\n---\nf/Hz Vs/V VR/V VL/V\n1000 2.0 0.5 1.8\n2000 2.0 1.0 1.6\n```\n");
        let c = safety_checks(&nb, &b, &Derating::default(), None);
        let w = c
            .iter()
            .find(|c| c.what.starts_with("winding dissipation"))
            .expect("checked");
        assert!((w.value - 1e-3).abs() < 1e-15, "{}", w.value);
        assert_eq!(w.rating, 0.5);
        assert!(w.ok);
    }

    /// `=block.result@f` finds the row at the frequency written, in any spelling of it, and
    /// refuses a frequency the block does not have or a quantity that is not a frequency.
    #[test]
    fn citations_find_the_row_at_the_frequency_written() {
        let (nb, _) = parse_one("---\nrecord: T-4\ntitle: t\ndate: 2026-11-02\noperator: o\nparts:\n  R:\n    kind: resistor\n    nominal: 1 kohm\n  C:\n    kind: capacitor\n    nominal: 100 nF\n---\n\n```readings\nid: b\nnetwork: RC\nparts: [R, C]\n---\nf/Hz Vs/V VR/V VC/V\n1000 2.0 1.073 1.688\n2000 2.0 1.562 1.243\n```\n");
        let red = crate::networks::reduce(&nb).expect("reduces");
        let at = |k: &str| resolve_citation(&red, k).map(|r| (r.f, r.m.value));
        let a = at("b.XC@2000Hz").unwrap();
        assert_eq!(a.0, Some(2000.0));
        assert_eq!(at("b.XC@2kHz").unwrap(), a);
        assert_eq!(at("b.XC@2000").unwrap(), a);
        assert_ne!(at("b.XC@1000Hz").unwrap().1, a.1);
        assert!(at("b.XC@1500Hz").is_err());
        assert!(at("b.XC@2000V").is_err());
        assert!(at("b.C").is_ok() && at("b.XC").is_err() && at("c.C").is_err());
    }

    /// ILAC-G8 guarded acceptance applied to the ends of a Monte Carlo interval (JCGM 101
    /// §7.7), which need not be symmetric: [9.2, 10.4] passes, [9.6, 11.2] straddles the upper
    /// limit although 10.0 ± 0.8 would pass, [11.1, 11.9] fails; simple acceptance still uses
    /// the value alone.
    #[test]
    fn monte_carlo_interval_ends_are_judged() {
        use Outcome::*;
        let g = |v, a, b| decide_interval(v, a, b, LO, HI, Decision::Guarded);
        assert_eq!(g(10.0, 9.2, 10.4), Pass);
        assert_eq!(decide(10.0, 0.8, LO, HI, Decision::Guarded), Pass);
        assert_eq!(g(10.0, 9.6, 11.2), Inconclusive);
        assert_eq!(g(11.5, 11.1, 11.9), Fail);
        assert_eq!(
            g(11.0, 9.0, 11.0),
            Pass,
            "touching a limit from inside is inside"
        );
        assert_eq!(
            decide_interval(10.9, 9.6, 11.9, LO, HI, Decision::Simple),
            Pass
        );
    }

    /// A verdict on a result whose GUM interval failed the JCGM 101 §8 check uses the Monte
    /// Carlo interval and carries it; a validated one keeps value ± U.
    #[test]
    fn a_verdict_uses_the_monte_carlo_interval_where_the_gum_one_fails() {
        let nb = notebook("1000 1.0 1.6\n2000 1.2 1.0\n");
        let mut red = crate::networks::reduce(&nb).expect("reduces");
        let Some(Item::Readings(block)) = nb.items.iter().find(|i| matches!(i, Item::Readings(_)))
        else {
            panic!("no block")
        };
        let c = red.blocks[0]
            .results
            .iter_mut()
            .find(|r| r.name == "C")
            .unwrap();
        let (v, tol_hi) = (c.m.value, 1.1e-6);
        // An interval reaching past the upper limit, from a model skewed to high values.
        let mc = |gum_validated| crate::uncertainty::McInterval {
            trials: 990_000,
            dropped: 10_000,
            mean: v,
            u: 1e-9,
            low: v - 1e-9,
            high: tol_hi + 1e-9,
            gum_validated,
        };
        c.m.mc = Some(mc(true));
        let before = verdicts_for(&nb, block, &red.blocks[0], None);
        let c = red.blocks[0]
            .results
            .iter_mut()
            .find(|r| r.name == "C")
            .unwrap();
        c.m.mc = Some(mc(false));
        let after = verdicts_for(&nb, block, &red.blocks[0], None);
        let (b, a) = (&before[0], &after[0]);
        assert!(
            b.value + b.expanded < tol_hi,
            "the GUM interval is inside: {b:?}"
        );
        assert_eq!((b.outcome, b.mc), (Outcome::Pass, None));
        assert_eq!(a.outcome, Outcome::Inconclusive);
        let used = a.mc.expect("the interval is carried");
        assert_eq!((used.high, used.dropped), (tol_hi + 1e-9, 10_000));
    }

    /// A safety check over its limit is a reservation; one within it is not.
    #[test]
    fn safety_checks_over_their_limit_are_reservations() {
        for (rows, over) in [("1000 3.536 1.0\n", true), ("1000 3.0 1.0\n", false)] {
            let nb = notebook(rows);
            let Some(Item::Readings(block)) =
                nb.items.iter().find(|i| matches!(i, Item::Readings(_)))
            else {
                panic!("no block")
            };
            let safety = safety_checks(&nb, block, &Derating::default(), None);
            let rec = Record {
                reduction: Reduction {
                    blocks: Vec::new(),
                    lots: Vec::new(),
                },
                verdicts: Vec::new(),
                lots: Vec::new(),
                safety,
                sign: SignState::Unsigned,
                digest: String::new(),
                source_digest: String::new(),
                citations: BTreeMap::new(),
                derating: Derating::default(),
                notebook: nb,
            };
            let r = reservations(&rec);
            assert_eq!(
                r.iter()
                    .any(|m| m.contains("dissipation") && m.contains("exceeds")),
                over,
                "{r:?}"
            );
        }
    }
}
