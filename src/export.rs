//! Results export: the JSON document of FORMAT.md and a flat CSV table, both in SI units.

use crate::judge::Record;
use crate::networks::NamedResult;
use serde::Serialize;

#[derive(Serialize)]
pub struct JsonRecord {
    pub record: String,
    pub blocks: Vec<JsonBlock>,
}

#[derive(Serialize)]
pub struct JsonBlock {
    pub id: String,
    pub network: String,
    pub results: Vec<JsonItem>,
    pub correlations: Vec<JsonCorrelation>,
    pub verdicts: Vec<JsonVerdict>,
    pub flags: Vec<String>,
    /// A lot block's units, each with its own results (absent for other blocks).
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub units: Vec<JsonUnit>,
}

/// A block's result, or a lot figure (no uncertainty: a statistic of the units' values).
#[derive(Serialize)]
#[serde(untagged)]
pub enum JsonItem {
    Result(JsonResult),
    Lot(JsonLotFigure),
}

#[derive(Serialize)]
pub struct JsonLotFigure {
    pub name: String,
    pub value: f64,
    pub unit: String,
    /// The approximate confidence interval of Cpk (Bissell 1990) and its level.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub low: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub high: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub confidence: Option<f64>,
}

/// One unit of a lot: `unit` is its serial.
#[derive(Serialize)]
pub struct JsonUnit {
    pub unit: String,
    pub results: Vec<JsonResult>,
    pub correlations: Vec<JsonCorrelation>,
    pub flags: Vec<String>,
}

#[derive(Serialize)]
pub struct JsonResult {
    pub name: String,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub f: Option<f64>,
    pub value: f64,
    pub unit: String,
    pub u: f64,
    pub k: f64,
    #[serde(rename = "U")]
    pub expanded: f64,
    pub dof: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub mc: Option<JsonMc>,
}

#[derive(Serialize)]
pub struct JsonMc {
    pub trials: usize,
    pub low: f64,
    pub high: f64,
    pub validated: bool,
}

#[derive(Serialize)]
pub struct JsonCorrelation {
    pub a: String,
    pub b: String,
    pub r: f64,
    /// The frequency of per-frequency correlations (Z blocks with an `f` column).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub f: Option<f64>,
}

#[derive(Serialize)]
pub struct JsonVerdict {
    /// The unit's serial, for a verdict on one unit of a lot.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub unit: Option<String>,
    pub name: String,
    pub part: String,
    pub nominal: f64,
    pub low: f64,
    pub high: f64,
    pub verdict: String,
    /// The Monte Carlo coverage interval [low, high] the verdict used, where the GUM
    /// interval failed the JCGM 101 §8 check.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub mc_interval: Option<[f64; 2]>,
}

fn result(r: &NamedResult) -> JsonResult {
    JsonResult {
        name: r.name.clone(),
        f: r.f,
        value: r.m.value,
        unit: r.unit.symbol().to_string(),
        u: r.m.u,
        k: r.m.k,
        expanded: r.m.expanded,
        dof: r.m.dof,
        mc: r.m.mc.as_ref().map(|m| JsonMc {
            trials: m.trials,
            low: m.low,
            high: m.high,
            validated: m.gum_validated,
        }),
    }
}

/// A flag as printed in the export: `line N: message` where the notebook location is known
/// (`FILE line N: message` in a table file).
pub fn flag_text(rec: &Record, f: &crate::networks::Flag) -> String {
    match f.span {
        Some(s) => match rec.notebook.locate(s) {
            (None, line, col) => format!("line {line}, column {col}: {}", f.message),
            (Some(t), line, col) => {
                format!("{} line {line}, column {col}: {}", t.path, f.message)
            }
        },
        None => f.message.clone(),
    }
}

pub fn to_json(rec: &Record) -> JsonRecord {
    let blocks = rec
        .reduction
        .blocks
        .iter()
        .map(|b| {
            let mut results: Vec<JsonItem> =
                b.rows.iter().map(|r| JsonItem::Result(result(r))).collect();
            results.extend(b.results.iter().map(|r| JsonItem::Result(result(r))));
            results.extend(lot_figures(rec, &b.id));
            let mut flags: Vec<String> = b.flags.iter().map(|f| flag_text(rec, f)).collect();
            for s in rec.safety.iter().filter(|s| s.block == b.id && !s.ok) {
                flags.push(format!(
                    "safety: {} of {} is {}, above {} % of its rating {}",
                    s.what,
                    s.part,
                    crate::print::quantity(s.value, s.unit),
                    crate::print::plain(100.0 * s.limit / s.rating, 3),
                    crate::print::quantity(s.rating, s.unit)
                ));
            }
            JsonBlock {
                id: b.id.clone(),
                network: b.network.name().to_string(),
                results,
                correlations: correlations(b),
                verdicts: rec
                    .verdicts
                    .iter()
                    .filter(|v| v.block == b.id)
                    .map(|v| JsonVerdict {
                        unit: v.serial.clone(),
                        name: v.name.clone(),
                        part: v.part.clone(),
                        nominal: v.nominal,
                        low: v.low,
                        high: v.high,
                        verdict: v.outcome.word().to_string(),
                        mc_interval: v.mc.map(|i| [i.low, i.high]),
                    })
                    .collect(),
                flags,
                units: units(rec, &b.id),
            }
        })
        .collect();
    JsonRecord {
        record: rec.notebook.front.record.clone(),
        blocks,
    }
}

fn correlations(b: &crate::networks::BlockResult) -> Vec<JsonCorrelation> {
    b.correlations
        .iter()
        .map(|c| JsonCorrelation {
            a: c.a.clone(),
            b: c.b.clone(),
            r: c.r,
            f: c.f,
        })
        .collect()
}

/// The units of the lot block `id`, each with its per-frequency and block results.
fn units(rec: &Record, id: &str) -> Vec<JsonUnit> {
    let Some(lot) = rec.reduction.lots.iter().find(|l| l.block == id) else {
        return Vec::new();
    };
    lot.units
        .iter()
        .map(|u| {
            let b = &u.result;
            JsonUnit {
                unit: u.serial.clone(),
                results: b.rows.iter().chain(&b.results).map(result).collect(),
                correlations: correlations(b),
                flags: b.flags.iter().map(|f| flag_text(rec, f)).collect(),
            }
        })
        .collect()
}

/// The lot figures of block `id`, in the order of FORMAT.md 1.1: n, mean, s, min, max, Cp,
/// Cpk (with its interval), pass, fail, inconclusive; then the normality test.
fn lot_figures(rec: &Record, id: &str) -> Vec<JsonItem> {
    let Some(l) = rec.lots.iter().find(|l| l.block == id) else {
        return Vec::new();
    };
    let fig = |name: &str, value: f64, unit: &str| {
        JsonItem::Lot(JsonLotFigure {
            name: name.into(),
            value,
            unit: unit.into(),
            low: None,
            high: None,
            confidence: None,
        })
    };
    let u = l.unit.symbol();
    let mut out = Vec::new();
    if let Some(s) = &l.stats {
        out.push(fig("n", s.n as f64, ""));
        out.push(fig("mean", s.mean, u));
        out.extend(s.s.map(|x| fig("s", x, u)));
        out.push(fig("min", s.min, u));
        out.push(fig("max", s.max, u));
        out.extend(s.cp.map(|x| fig("Cp", x, "")));
        if let Some(c) = s.cpk {
            out.push(JsonItem::Lot(JsonLotFigure {
                name: "Cpk".into(),
                value: c,
                unit: String::new(),
                low: s.cpk_interval.map(|i| i.0),
                high: s.cpk_interval.map(|i| i.1),
                confidence: s.cpk_interval.map(|_| s.confidence),
            }));
        }
    }
    out.push(fig("pass", l.pass as f64, ""));
    out.push(fig("fail", l.fail as f64, ""));
    out.push(fig("inconclusive", l.inconclusive as f64, ""));
    if let Some(a) = l.stats.as_ref().and_then(|s| s.normality) {
        out.push(fig("AD_A2", a.a2, ""));
        out.push(fig("AD_p", a.p, ""));
    }
    out
}

pub fn json_string(rec: &Record) -> String {
    serde_json::to_string_pretty(&to_json(rec)).unwrap_or_else(|e| format!("{{\"error\":\"{e}\"}}"))
}

/// Column names of the CSV export, one row per result.
pub const CSV_HEADER: [&str; 11] = [
    "record", "block", "name", "f", "value", "unit", "u", "k", "U", "verdict", "path",
];

/// Appends one record's results to a CSV writer (SI units; `f` empty for block results,
/// `verdict` empty where the result is not judged). The lot figures are in the JSON only.
/// `path` is the notebook's path as the command line found it (the last column).
pub fn write_csv_rows<W: std::io::Write>(
    rec: &Record,
    path: &str,
    w: &mut csv::Writer<W>,
) -> csv::Result<()> {
    let num = |x: f64| format!("{x:e}");
    // A lot's units follow the blocks, each as block `<id>/<serial>`.
    let units = rec.reduction.lots.iter().flat_map(|l| {
        l.units.iter().map(move |u| {
            (
                format!("{}/{}", l.block, u.serial),
                Some(&u.serial),
                &u.result,
            )
        })
    });
    let blocks = rec.reduction.blocks.iter().map(|b| (b.id.clone(), None, b));
    for (label, serial, b) in blocks.chain(units) {
        for r in b.rows.iter().chain(b.results.iter()) {
            let verdict = if r.f.is_none() {
                rec.verdicts
                    .iter()
                    .find(|v| v.block == b.id && v.name == r.name && v.serial.as_ref() == serial)
                    .map(|v| v.outcome.word())
                    .unwrap_or("")
            } else {
                ""
            };
            w.write_record([
                rec.notebook.front.record.as_str(),
                label.as_str(),
                r.name.as_str(),
                &r.f.map(num).unwrap_or_default(),
                &num(r.m.value),
                r.unit.symbol(),
                &num(r.m.u),
                &format!("{}", r.m.k),
                &num(r.m.expanded),
                verdict,
                path,
            ])?;
        }
    }
    Ok(())
}

/// The CSV table of several records (header once).
/// The CSV table of these records, each with its notebook's path.
pub fn csv_string(recs: &[(&str, &Record)]) -> String {
    let mut w = csv::Writer::from_writer(Vec::new());
    let _ = w.write_record(CSV_HEADER);
    for (path, r) in recs {
        let _ = write_csv_rows(r, path, &mut w);
    }
    String::from_utf8(w.into_inner().unwrap_or_default()).unwrap_or_default()
}
