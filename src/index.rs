//! `benchrec index DIR`: one page over the archive. Every record PDF under DIR becomes a row
//! (id, title, date, operator, lab, lot, sign-off state, verdict counts, warnings, instruments
//! past due, link), written as DIR/index.html (one static file: sorting and filtering in the
//! browser, no network) and DIR/index.pdf. Rows are cached by the PDF's size and modification
//! time in DIR/.benchrec/index.json, so an unchanged archive is indexed without reading a PDF.
//!
//! A row's state comes from the attached notebook (its digest recomputed, its signature
//! checked) and the attached summary; the pages themselves are checked by `verify`, which
//! costs a text extraction per PDF and is not repeated here.

use crate::pipeline::{self, Failure};
use crate::signoff::{self, SignState};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// The index's own template, compiled into the binary.
const INDEX_TEMPLATE: &str = include_str!("../templates/index.typ");
const CACHE_NAME: &str = "index.json";
/// Bumped when a row's fields change, so old caches are not reused.
const CACHE_VERSION: u32 = 1;

/// One record in the index.
#[derive(Debug, Clone, Serialize, Deserialize, PartialEq)]
pub struct Row {
    /// The PDF, relative to the indexed folder, with `/` separators.
    pub pdf: String,
    pub record: String,
    pub title: String,
    pub date: String,
    pub operator: String,
    pub lab: String,
    pub lot: String,
    /// One word: "valid (key)", "name only", "void", "draft", "not authentic", "mismatch", "error".
    pub state: String,
    /// Who signed, or why the state is what it is.
    pub detail: String,
    pub pass: usize,
    pub fail: usize,
    pub inconclusive: usize,
    pub warnings: usize,
    pub overdue: Vec<String>,
}

#[derive(Debug, Default, Serialize, Deserialize)]
struct Cache {
    version: u32,
    /// PDF path → (size, modification time in ns, row).
    rows: BTreeMap<String, (u64, u128, Row)>,
    /// What the last run wrote: absent in a cache from before it was kept.
    #[serde(default)]
    written: Option<Written>,
}

/// The index files the last run wrote: the key of their content and each file's stamp. When
/// the key is the same and both files still have their stamps, nothing is written again.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
struct Written {
    key: String,
    html: (u64, u128),
    pdf: (u64, u128),
}

/// The key of the index files' content: this program's version, the template and the rows.
fn content_key(rows: &[Row]) -> String {
    use sha2::{Digest, Sha256};
    let mut h = Sha256::new();
    h.update(env!("CARGO_PKG_VERSION"));
    h.update([0]);
    h.update(INDEX_TEMPLATE);
    h.update([0]);
    h.update(serde_json::to_vec(rows).unwrap_or_default());
    h.finalize().iter().map(|b| format!("{b:02x}")).collect()
}

/// The stamp of a file as it is now (None when it is missing).
fn stamp_of(path: &Path) -> Option<(u64, u128)> {
    std::fs::metadata(path).ok().map(|m| stamp(&m))
}

#[derive(Deserialize)]
struct Summary {
    digest: String,
    verdicts: BTreeMap<String, usize>,
    warnings: usize,
    #[serde(default)]
    overdue: Vec<String>,
}

/// What `index` did.
#[derive(Debug)]
pub struct Indexed {
    pub rows: Vec<Row>,
    /// Rows read from PDFs this time (the rest came from the cache).
    pub read: usize,
    pub html: PathBuf,
    pub pdf: PathBuf,
}

fn io(path: &Path, m: impl std::fmt::Display) -> Failure {
    Failure::Io {
        path: path.to_path_buf(),
        message: m.to_string(),
    }
}

fn stamp(meta: &std::fs::Metadata) -> (u64, u128) {
    let mtime = meta
        .modified()
        .ok()
        .and_then(|t| t.duration_since(std::time::UNIX_EPOCH).ok())
        .map_or(0, |d| d.as_nanos());
    (meta.len(), mtime)
}

/// Indexes every record PDF under `dir` and writes index.html and index.pdf there.
pub fn index_dir(dir: &Path) -> Result<Indexed, Failure> {
    use rayon::prelude::*;
    let cache_dir = dir.join(".benchrec");
    let cache_path = cache_dir.join(CACHE_NAME);
    let cache: Cache = std::fs::read(&cache_path)
        .ok()
        .and_then(|b| serde_json::from_slice(&b).ok())
        .filter(|c: &Cache| c.version == CACHE_VERSION)
        .unwrap_or_default();
    let mut pdfs: Vec<(String, PathBuf)> = walkdir::WalkDir::new(dir)
        .follow_links(false)
        .into_iter()
        .filter_entry(|e| e.file_name() != ".benchrec")
        .filter_map(Result::ok)
        .filter(|e| e.file_type().is_file())
        .filter(|e| {
            e.path()
                .extension()
                .is_some_and(|x| x.eq_ignore_ascii_case("pdf"))
        })
        .filter_map(|e| {
            let rel = e.path().strip_prefix(dir).ok()?;
            let rel = rel.to_string_lossy().replace('\\', "/");
            (rel != "index.pdf").then(|| (rel, e.into_path()))
        })
        .collect();
    pdfs.sort();
    let rows: Vec<(Row, Option<(u64, u128)>, bool)> = pdfs
        .par_iter()
        .map(|(rel, path)| {
            let st = std::fs::metadata(path).ok().map(|m| stamp(&m));
            if let (Some(s), Some((size, mtime, row))) = (st, cache.rows.get(rel)) {
                if s == (*size, *mtime) {
                    return (row.clone(), st, false);
                }
            }
            let row = std::panic::catch_unwind(|| read_row(rel, path)).unwrap_or_else(|_| {
                error_row(
                    rel,
                    "reading this PDF failed unexpectedly (a defect of benchrec)",
                )
            });
            (row, st, true)
        })
        .collect();
    let read = rows.iter().filter(|r| r.2).count();
    let mut next = Cache {
        version: CACHE_VERSION,
        rows: BTreeMap::new(),
        written: None,
    };
    for (row, st, _) in &rows {
        if let Some((size, mtime)) = st {
            next.rows
                .insert(row.pdf.clone(), (*size, *mtime, row.clone()));
        }
    }
    let rows: Vec<Row> = rows.into_iter().map(|r| r.0).collect();
    let html = dir.join("index.html");
    let pdf = dir.join("index.pdf");
    let key = content_key(&rows);
    let unchanged = cache.written.as_ref().is_some_and(|w| {
        w.key == key && stamp_of(&html) == Some(w.html) && stamp_of(&pdf) == Some(w.pdf)
    });
    if unchanged {
        next.written = cache.written.clone();
    } else {
        pipeline::write_atomic(&html, html_page(&rows).as_bytes()).map_err(|e| io(&html, e))?;
        let pdf_bytes = index_pdf(&rows).map_err(|e| io(&pdf, e))?;
        pipeline::write_atomic(&pdf, &pdf_bytes).map_err(|e| io(&pdf, e))?;
        next.written = match (stamp_of(&html), stamp_of(&pdf)) {
            (Some(h), Some(p)) => Some(Written {
                key,
                html: h,
                pdf: p,
            }),
            _ => None,
        };
    }
    if read > 0 || next.rows.len() != cache.rows.len() || next.written != cache.written {
        std::fs::create_dir_all(&cache_dir).map_err(|e| io(&cache_dir, e))?;
        let bytes = serde_json::to_vec(&next).unwrap_or_default();
        pipeline::write_atomic(&cache_path, &bytes).map_err(|e| io(&cache_path, e))?;
    }
    Ok(Indexed {
        rows,
        read,
        html,
        pdf,
    })
}

fn error_row(rel: &str, why: &str) -> Row {
    Row {
        pdf: rel.to_string(),
        record: String::new(),
        title: String::new(),
        date: String::new(),
        operator: String::new(),
        lab: String::new(),
        lot: String::new(),
        state: "error".into(),
        detail: why.to_string(),
        pass: 0,
        fail: 0,
        inconclusive: 0,
        warnings: 0,
        overdue: Vec::new(),
    }
}

/// One PDF's row: the attached notebook parsed (not reduced), its digest and sign-off
/// checked, the counts from the attached summary when it belongs to that notebook.
fn read_row(rel: &str, path: &Path) -> Row {
    let bytes = match pipeline::read_regular(path, crate::attest::PDF_MAX_BYTES) {
        Ok(b) => b,
        Err(r) => return error_row(rel, &format!("the PDF {r}")),
    };
    let files = match signoff::pdf_attachments(&bytes) {
        Ok(f) => f,
        Err(e) => return error_row(rel, &e),
    };
    let mds: Vec<&(String, Vec<u8>)> = files.iter().filter(|(n, _)| n.ends_with(".md")).collect();
    let [(_, md)] = mds.as_slice() else {
        return error_row(rel, "not a benchrec record: no single notebook attached");
    };
    let Ok(text) = std::str::from_utf8(md) else {
        return error_row(rel, "the attached notebook is not UTF-8 text");
    };
    let lab = pipeline::lab_for(path).ok().flatten();
    let nb = match crate::notebook::parse_with(text, lab.as_ref().map(|l| &l.register)) {
        Ok(nb) => nb,
        Err(d) => {
            let why = d.first().map(|d| d.message.clone()).unwrap_or_default();
            return error_row(rel, &format!("the attached notebook does not parse: {why}"));
        }
    };
    // Table files (`table:`) count in the digest: take them from the attachments beside.
    let md_name = files
        .iter()
        .find(|(n, _)| n.ends_with(".md"))
        .map_or("", |(n, _)| n.as_str());
    let tables = crate::attest::attached_tables(&nb, md_name, &files);
    let (nb, _) = crate::notebook::read_tables(nb, tables);
    let digest = signoff::digest(&nb);
    let sign = signoff::state(&nb, &digest);
    let fm = &nb.front;
    let mut row = Row {
        pdf: rel.to_string(),
        record: fm.record.clone(),
        title: fm.title.clone(),
        date: fm.date.to_string(),
        operator: fm.operator.clone(),
        lab: fm.lab.clone().unwrap_or_default(),
        lot: fm.lot.clone().unwrap_or_default(),
        state: match &sign {
            SignState::Keyed { .. } => "valid (key)",
            SignState::NameOnly { .. } => "name only",
            SignState::Void { .. } => "void",
            SignState::Unsigned => "draft",
            SignState::Forged { .. } => "not authentic",
        }
        .into(),
        detail: sign.describe(),
        pass: 0,
        fail: 0,
        inconclusive: 0,
        warnings: 0,
        overdue: fm
            .instruments
            .values()
            .filter(|i| i.due.is_some_and(|d| d < fm.date))
            .map(|i| i.name.clone())
            .collect(),
    };
    let summary = files
        .iter()
        .find(|(n, _)| n == "benchrec-summary.json")
        .and_then(|(_, b)| serde_json::from_slice::<Summary>(b).ok());
    match summary {
        Some(s) if s.digest == digest => {
            let n = |k: &str| s.verdicts.get(k).copied().unwrap_or(0);
            row.pass = n("pass");
            row.fail = n("fail");
            row.inconclusive = n("inconclusive");
            row.warnings = s.warnings;
            row.overdue = s.overdue;
        }
        Some(_) => {
            row.state = "mismatch".into();
            row.detail = "the attached summary belongs to other readings than the attached notebook: run `benchrec verify` on this PDF".into();
        }
        None => {
            // A record made before summaries were attached: reduce the notebook once.
            if let Ok(rec) =
                pipeline::analyse_with(Path::new(rel), text, lab.as_ref(), |_| Ok(Vec::new()))
            {
                let count = |o| rec.verdicts.iter().filter(|v| v.outcome == o).count();
                row.pass = count(crate::judge::Outcome::Pass);
                row.fail = count(crate::judge::Outcome::Fail);
                row.inconclusive = count(crate::judge::Outcome::Inconclusive);
                row.warnings = crate::judge::reservations(&rec)
                    .len()
                    .saturating_sub(row.fail + row.inconclusive);
            }
        }
    }
    row
}

/// Text for HTML: `&`, `<`, `>`, `"` and `'` escaped.
fn esc(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(c),
        }
    }
    out
}

/// A relative link: every path segment percent-encoded.
fn href(rel: &str) -> String {
    rel.split('/')
        .map(|seg| {
            seg.bytes()
                .map(|b| match b {
                    b'A'..=b'Z' | b'a'..=b'z' | b'0'..=b'9' | b'-' | b'_' | b'.' | b'~' => {
                        (b as char).to_string()
                    }
                    _ => format!("%{b:02X}"),
                })
                .collect::<String>()
        })
        .collect::<Vec<_>>()
        .join("/")
}

const COLUMNS: [&str; 12] = [
    "Record",
    "Title",
    "Date",
    "Operator",
    "Lab",
    "Lot",
    "State",
    "Pass",
    "Fail",
    "Inconclusive",
    "Warnings",
    "Past due",
];

/// The static page: one table, a state and a lot filter, sorting by any column.
pub fn html_page(rows: &[Row]) -> String {
    let mut lots: Vec<&str> = rows
        .iter()
        .map(|r| r.lot.as_str())
        .filter(|l| !l.is_empty())
        .collect();
    lots.sort();
    lots.dedup();
    let mut states: Vec<&str> = rows.iter().map(|r| r.state.as_str()).collect();
    states.sort();
    states.dedup();
    let options = |v: &[&str]| {
        v.iter()
            .map(|x| format!("<option value=\"{0}\">{0}</option>", esc(x)))
            .collect::<String>()
    };
    let mut body = String::new();
    for r in rows {
        let cells = [
            format!(
                "<a href=\"{}\">{}</a>",
                esc(&href(&r.pdf)),
                esc(if r.record.is_empty() {
                    &r.pdf
                } else {
                    &r.record
                })
            ),
            esc(&r.title),
            esc(&r.date),
            esc(&r.operator),
            esc(&r.lab),
            esc(&r.lot),
            format!(
                "<span title=\"{}\">{}</span>",
                esc(&r.detail),
                esc(&r.state)
            ),
            r.pass.to_string(),
            r.fail.to_string(),
            r.inconclusive.to_string(),
            r.warnings.to_string(),
            esc(&r.overdue.join(", ")),
        ];
        body.push_str(&format!(
            "<tr data-state=\"{}\" data-lot=\"{}\">{}</tr>\n",
            esc(&r.state),
            esc(&r.lot),
            cells
                .iter()
                .map(|c| format!("<td>{c}</td>"))
                .collect::<String>()
        ));
    }
    let head: String = COLUMNS
        .iter()
        .enumerate()
        .map(|(i, c)| format!("<th data-col=\"{i}\">{c}</th>"))
        .collect();
    format!(
        r#"<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<title>Record archive index</title>
<style>
body {{ font-family: serif; margin: 1.5em; }}
table {{ border-collapse: collapse; font-size: 0.9em; }}
th, td {{ border-bottom: 1px solid #bbb; padding: 0.2em 0.6em; text-align: left; }}
th {{ cursor: pointer; background: #eee; }}
td:nth-child(n+8):nth-child(-n+11) {{ text-align: right; }}
</style></head><body>
<h1>Record archive index</h1>
<p>{count} records. States come from each PDF's attached notebook (digest and signature checked);
<code>benchrec verify</code> also checks each PDF's pages against its attachment.</p>
<p><label>State <select id="state"><option value="">all</option>{states}</select></label>
<label>Lot <select id="lot"><option value="">all</option>{lots}</select></label></p>
<table id="records"><thead><tr>{head}</tr></thead><tbody>
{body}</tbody></table>
<script>
(function () {{
  var tbody = document.querySelector('#records tbody');
  function filter() {{
    var s = document.getElementById('state').value, l = document.getElementById('lot').value;
    Array.prototype.forEach.call(tbody.rows, function (r) {{
      var ok = (!s || r.dataset.state === s) && (!l || r.dataset.lot === l);
      r.style.display = ok ? '' : 'none';
    }});
  }}
  document.getElementById('state').onchange = filter;
  document.getElementById('lot').onchange = filter;
  var dir = {{}};
  Array.prototype.forEach.call(document.querySelectorAll('#records th'), function (th) {{
    th.onclick = function () {{
      var c = +th.dataset.col, up = dir[c] = !dir[c];
      var rows = Array.prototype.slice.call(tbody.rows);
      rows.sort(function (a, b) {{
        var x = a.cells[c].textContent, y = b.cells[c].textContent;
        var nx = parseFloat(x), ny = parseFloat(y);
        var d = (!isNaN(nx) && !isNaN(ny) && c >= 7 && c <= 10) ? nx - ny : x.localeCompare(y);
        return up ? d : -d;
      }});
      rows.forEach(function (r) {{ tbody.appendChild(r); }});
    }};
  }});
}})();
</script>
</body></html>
"#,
        count = rows.len(),
        states = options(&states),
        lots = options(&lots),
    )
}

/// The same rows typeset as a PDF (the index template), dated by the latest record.
fn index_pdf(rows: &[Row]) -> Result<Vec<u8>, String> {
    let date = rows
        .iter()
        .filter_map(|r| chrono::NaiveDate::parse_from_str(&r.date, "%Y-%m-%d").ok())
        .max()
        .unwrap_or_else(|| chrono::NaiveDate::from_ymd_opt(2026, 1, 1).unwrap_or_default());
    let data = serde_json::json!({ "rows": rows, "generator": format!("benchrec {}", env!("CARGO_PKG_VERSION")) });
    let mut files = BTreeMap::new();
    files.insert("/data.json".to_string(), data.to_string().into_bytes());
    crate::render::world::typeset_pdf(INDEX_TEMPLATE, files, date, "benchrec:index", "the index")
}
