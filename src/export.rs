//! Results export: the JSON document of FORMAT.md and a flat CSV table, both in SI units.

use crate::diag::line_col;
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
    pub results: Vec<JsonResult>,
    pub correlations: Vec<JsonCorrelation>,
    pub verdicts: Vec<JsonVerdict>,
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
    pub name: String,
    pub part: String,
    pub nominal: f64,
    pub low: f64,
    pub high: f64,
    pub verdict: String,
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

/// A flag as printed in the export: `line N: message` where the notebook location is known.
pub fn flag_text(rec: &Record, f: &crate::networks::Flag) -> String {
    match f.span {
        Some(s) => {
            let (line, col) = line_col(&rec.notebook.source, s.start);
            format!("line {line}, column {col}: {}", f.message)
        }
        None => f.message.clone(),
    }
}

pub fn to_json(rec: &Record) -> JsonRecord {
    let blocks = rec
        .reduction
        .blocks
        .iter()
        .map(|b| {
            let mut results: Vec<JsonResult> = b.rows.iter().map(result).collect();
            results.extend(b.results.iter().map(result));
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
                correlations: b
                    .correlations
                    .iter()
                    .map(|c| JsonCorrelation {
                        a: c.a.clone(),
                        b: c.b.clone(),
                        r: c.r,
                        f: c.f,
                    })
                    .collect(),
                verdicts: rec
                    .verdicts
                    .iter()
                    .filter(|v| v.block == b.id)
                    .map(|v| JsonVerdict {
                        name: v.name.clone(),
                        part: v.part.clone(),
                        nominal: v.nominal,
                        low: v.low,
                        high: v.high,
                        verdict: v.outcome.word().to_string(),
                    })
                    .collect(),
                flags,
            }
        })
        .collect();
    JsonRecord {
        record: rec.notebook.front.record.clone(),
        blocks,
    }
}

pub fn json_string(rec: &Record) -> String {
    serde_json::to_string_pretty(&to_json(rec)).unwrap_or_else(|e| format!("{{\"error\":\"{e}\"}}"))
}

/// Column names of the CSV export, one row per result.
pub const CSV_HEADER: [&str; 10] = [
    "record", "block", "name", "f", "value", "unit", "u", "k", "U", "verdict",
];

/// Appends one record's results to a CSV writer (SI units; `f` empty for block results,
/// `verdict` empty where the result is not judged).
pub fn write_csv_rows<W: std::io::Write>(rec: &Record, w: &mut csv::Writer<W>) -> csv::Result<()> {
    let num = |x: f64| format!("{x:e}");
    for b in &rec.reduction.blocks {
        for r in b.rows.iter().chain(b.results.iter()) {
            let verdict = if r.f.is_none() {
                rec.verdicts
                    .iter()
                    .find(|v| v.block == b.id && v.name == r.name)
                    .map(|v| v.outcome.word())
                    .unwrap_or("")
            } else {
                ""
            };
            w.write_record([
                rec.notebook.front.record.as_str(),
                b.id.as_str(),
                r.name.as_str(),
                &r.f.map(num).unwrap_or_default(),
                &num(r.m.value),
                r.unit.symbol(),
                &num(r.m.u),
                &format!("{}", r.m.k),
                &num(r.m.expanded),
                verdict,
            ])?;
        }
    }
    Ok(())
}

/// The CSV table of several records (header once).
pub fn csv_string(recs: &[&Record]) -> String {
    let mut w = csv::Writer::from_writer(Vec::new());
    let _ = w.write_record(CSV_HEADER);
    for r in recs {
        let _ = write_csv_rows(r, &mut w);
    }
    String::from_utf8(w.into_inner().unwrap_or_default()).unwrap_or_default()
}
