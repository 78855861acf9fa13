//! One readings block: fences, the YAML header, the table, and the checks across them.

use super::front::Defined;
use super::table::{content_end, parse_heading, parse_table, CellRange, Table, UNIT_COLUMN};
use super::values::{undefined, ValueReader};
use super::words::{list, one_of};
use super::yaml::{kind_name, YamlLocator};
use super::{
    line_text, required_columns, split_lines, BlockReadout, Decimal, LotSpec, MappedColumn, Named,
    Network, ReadingsBlock, TableSpec, MAX_HEADER,
};
use crate::diag::{line_col, Diagnostic, Span};
use crate::networks::model::{self, ModelResult};
use crate::quantity::Unit;
use serde_yaml::Value;
use std::collections::BTreeMap;

const HEADER_KEYS: &[&str] = &[
    "id",
    "network",
    "parts",
    "meter",
    "phase",
    "counter",
    "note",
    "source",
    "unit_of",
    "table",
    "delimiter",
    "decimal",
    "columns",
    "skip",
    "model",
    "display",
    "generator",
    "scale",
];

/// Header keys that only a block reading its table from a file (`table:`) may give.
const FILE_KEYS: &[&str] = &["delimiter", "decimal", "columns", "skip"];

pub(super) struct BlockCtx<'a> {
    pub(super) src: &'a str,
    pub(super) defined: &'a Defined,
}

pub(super) fn parse_block(
    cx: &BlockCtx,
    r: Span,
    ids: &mut BTreeMap<String, Span>,
    d: &mut Vec<Diagnostic>,
) -> Option<(ReadingsBlock, Option<TableSpec>)> {
    let src = cx.src;
    let (open_span, body) = fenced_body(src, r, d)?;
    let blines = split_lines(src, body.start, body.end);
    let sep = blines
        .iter()
        .position(|l| line_text(src, l).trim() == "---");
    // With `table:` the fence may hold the header alone; without, the `---` line is required
    // and a header that runs into the table is not read (one message, not a YAML error).
    let mut hd = Vec::new();
    let header_end = sep.map_or(body.end, |s| blines[s].start);
    let mut header = header(cx, Span::new(body.start, header_end), open_span, &mut hd);
    if sep.is_none() && header.file.table.is_none() {
        d.push(
            Diagnostic::new(
                open_span,
                "readings block lacks the `---` line between header and table",
            )
            .expected("a YAML header (id, network, …), a line `---`, then the table")
            .found("no `---` line"),
        );
        return None;
    }
    d.append(&mut hd);
    // Ids are unique even among blocks that fail elsewhere.
    if let Some((name, span)) = &header.id {
        unique_id(src, name, *span, ids, d);
    }
    let fence = sep.map_or(open_span, |s| Span::new(blines[s].start, blines[s].end));
    let rest = sep.map_or(&[][..], |s| &blines[s + 1..]);
    let (table, lot, spec) = match header.file.table.take() {
        Some((path, span)) => {
            fence_holds_no_table(src, rest, &path, d);
            let spec = TableSpec {
                block: header.id.as_ref().map_or(String::new(), |i| i.0.clone()),
                delimiter: header.file.delimiter.unwrap_or(default_delimiter(&path)),
                path,
                span,
                decimal: header.file.decimal.unwrap_or(Decimal::Point),
                columns: std::mem::take(&mut header.file.columns),
                skip: header.file.skip.unwrap_or(0),
                unit_of: header.unit_of.take(),
                fence,
            };
            (Table::default(), None, Some(spec))
        }
        None => {
            let mut table = parse_table(src, rest, d);
            check_table(&table, header.network.map(|n| n.0), fence, d);
            if table.heading.is_some() {
                super::readout::apply(&header.readout, &mut table.columns, &mut table.rows, d);
            }
            let lot = lot_spec(header.unit_of.take(), &table, d);
            (table, lot, None)
        }
    };
    let (id, id_span) = header.id?;
    Some((
        ReadingsBlock {
            id,
            id_span,
            network: header.network?.0,
            network_span: header.network?.1,
            parts: header.parts,
            meter: header.meter,
            phase: header.phase,
            counter: header.counter,
            note: header.note,
            source: header.source,
            columns: table.columns,
            rows: table.rows,
            span: r,
            body: src[body.start..body.end].to_string(),
            lot,
            model: std::mem::take(&mut header.model),
            readout: std::mem::take(&mut header.readout),
        },
        spec,
    ))
}

/// A block that reads a file holds only its header: table lines after `---` are refused.
fn fence_holds_no_table(src: &str, rest: &[super::Line], path: &str, d: &mut Vec<Diagnostic>) {
    let Some(l) = rest
        .iter()
        .find(|l| !src[l.start..content_end(src, l)].trim().is_empty())
    else {
        return;
    };
    d.push(
        Diagnostic::new(
            Span::new(l.start, content_end(src, l)),
            format!("this block reads its table from `{path}`, so the fence holds no table"),
        )
        .expected("only the block header (the `---` line may be left out)")
        .found("table lines in the fence")
        .help("remove `table:` to type the readings here, or remove these lines"),
    );
}

/// The separator a file's name implies: `.tsv` tab, otherwise comma (`.csv`).
fn default_delimiter(path: &str) -> u8 {
    if path.to_ascii_lowercase().ends_with(".tsv") {
        b'\t'
    } else {
        b','
    }
}

/// A lot needs both `unit_of` and the `unit` column; either alone is an error at it.
pub(super) fn lot_spec(
    unit_of: Option<Named>,
    table: &Table,
    d: &mut Vec<Diagnostic>,
) -> Option<LotSpec> {
    match (unit_of, table.unit_heading) {
        (Some(part), Some(heading)) => Some(LotSpec {
            part,
            heading,
            serials: table.serials.clone(),
        }),
        (Some(part), None) => {
            d.push(
                Diagnostic::new(part.span, "`unit_of` needs a `unit` column in the table")
                    .expected("a text column headed `unit` with each row's serial")
                    .found("no `unit` column"),
            );
            None
        }
        (None, Some(heading)) => {
            d.push(
                Diagnostic::new(
                    heading,
                    "a `unit` column needs `unit_of` in the block header",
                )
                .expected("a header line `unit_of: <part>` naming the part whose units vary")
                .found("no `unit_of`"),
            );
            None
        }
        (None, None) => None,
    }
}

/// The opening fence's span and the body between the fences; an unclosed block runs to the
/// end of `r`.
fn fenced_body(src: &str, r: Span, d: &mut Vec<Diagnostic>) -> Option<(Span, Span)> {
    let lines = split_lines(src, r.start, r.end);
    let open = *lines.first()?;
    let open_span = Span::new(open.start, open.end);
    let otext = line_text(src, &open);
    let ot = otext.trim_start();
    let fch = ot.chars().next().unwrap_or('`');
    let flen = ot.chars().take_while(|c| *c == fch).count();
    let closed = lines.len() >= 2
        && lines.last().is_some_and(|l| {
            let t = line_text(src, l).trim();
            t.chars().take_while(|c| *c == fch).count() >= flen && t.chars().all(|c| c == fch)
        });
    let body = if closed {
        let last = lines[lines.len() - 1];
        Span::new(open.next.min(last.start), last.start)
    } else {
        d.push(
            Diagnostic::new(open_span, "this readings block is never closed")
                .expected(format!("a closing `{}` line", fch.to_string().repeat(flen)))
                .found("end of file"),
        );
        Span::new(open.next.min(r.end), r.end)
    };
    Some((open_span, body))
}

/// What a block's header gives; a key that is absent or wrong leaves its field empty.
#[derive(Default)]
struct Header {
    id: Option<(String, Span)>,
    network: Option<(Network, Span)>,
    parts: Vec<Named>,
    meter: Option<Named>,
    phase: Option<Named>,
    counter: Option<Named>,
    note: Option<String>,
    /// Stated source level (V).
    source: Option<f64>,
    /// The part whose units vary, in a lot.
    unit_of: Option<Named>,
    /// `table` and the keys that go with it.
    file: FileKeys,
    /// The results of a `network: model` block.
    model: Vec<ModelResult>,
    /// `display`, `generator` and `scale`.
    readout: BlockReadout,
}

/// The header keys of a table read from a file; each is None when absent or wrong.
#[derive(Default)]
struct FileKeys {
    table: Option<(String, Span)>,
    delimiter: Option<u8>,
    decimal: Option<Decimal>,
    columns: Vec<MappedColumn>,
    skip: Option<usize>,
    /// Where each of [`FILE_KEYS`] was given, to refuse it without `table`.
    given: Vec<(&'static str, Span)>,
}

/// The YAML header in `region` (between the opening fence and the `---` line).
fn header(cx: &BlockCtx, region: Span, open_span: Span, d: &mut Vec<Diagnostic>) -> Header {
    let mut h = Header::default();
    let len = region.end - region.start;
    if len > MAX_HEADER {
        d.push(
            Diagnostic::new(open_span, "readings block header is too long")
                .expected(format!("at most {} KiB", MAX_HEADER >> 10))
                .found(format!("{len} bytes")),
        );
        return h;
    }
    let y = YamlLocator::new(cx.src, region.start, region.end, open_span);
    let v = match y.load("block header") {
        Ok(v) => v,
        Err(e) => {
            d.push(e);
            return h;
        }
    };
    let mut ex = ValueReader {
        y: &y,
        d,
        what: "block header",
    };
    let mut network_seen = false;
    let entries = ex.entries(&[], &v, Some(HEADER_KEYS));
    for (key, val) in &entries {
        let path = [key.as_str()];
        match key.as_str() {
            "id" => {
                if let Some(s) = ex.nonempty_text(&path, val) {
                    h.id = Some((s.trim().to_string(), y.value_span(&path)));
                }
            }
            "network" => {
                network_seen = true;
                if let Some(s) = ex.text(&path, val) {
                    let choices: Vec<(&str, Network)> =
                        Network::all().map(|n| (n.name(), n)).collect();
                    let at = y.value_span(&path);
                    h.network = one_of(s.trim(), &choices, "network", at)
                        .map_err(|dg| ex.err(dg))
                        .ok()
                        .map(|n| (n, at));
                }
            }
            "parts" => h.parts = header_parts(cx, &mut ex, val),
            "meter" => h.meter = ex.instrument_name(&path, val, cx.defined.checked()),
            "phase" => h.phase = ex.instrument_name(&path, val, cx.defined.checked()),
            "counter" => h.counter = ex.instrument_name(&path, val, cx.defined.checked()),
            "display" => h.readout.display = ex.instrument_name(&path, val, cx.defined.checked()),
            "generator" => {
                h.readout.generator = ex.instrument_name(&path, val, cx.defined.checked())
            }
            "scale" => h.readout.scales = super::readout::scale_key(&mut ex, val),
            "note" => h.note = ex.text(&path, val),
            "unit_of" => {
                if let Some(s) = ex.nonempty_text(&path, val) {
                    let name = s.trim().to_string();
                    let sp = y.value_span(&path);
                    if cx.defined.known && !cx.defined.parts.contains(&name) {
                        ex.err(undefined("part", &name, sp, &cx.defined.parts, "parts"));
                    } else {
                        h.unit_of = Some(Named { name, span: sp });
                    }
                }
            }
            "source" => {
                let q = ex.quantity(&path, val, &[Unit::V], Some(Unit::V));
                h.source = ex.positive(&path, q, "the source level").map(|q| q.value);
            }
            "model" => h.model = model_key(cx, &mut ex, val),
            k => file_key(cx, &mut ex, k, val, &mut h.file),
        }
    }
    model_matches_network(
        &mut ex,
        &h,
        entries.iter().any(|(k, _)| k == "model"),
        open_span,
    );
    if h.file.table.is_none() {
        for (k, at) in &h.file.given {
            ex.err(
                Diagnostic::new(
                    *at,
                    format!("`{k}` applies only to a table read from a file"),
                )
                .expected("a header line `table: <file>.csv` beside it, or no `{k}`")
                .found(format!("`{k}` without `table`")),
            );
        }
    }
    if !entries.iter().any(|(k, _)| k == "id") {
        ex.err(
            Diagnostic::new(open_span, "readings block lacks `id`")
                .expected("a header line `id: <name>`")
                .found("no `id`"),
        );
    }
    if !network_seen {
        let names: Vec<&str> = Network::all().map(|n| n.name()).collect();
        let (first, rest) = names.split_first().map_or(("", &[][..]), |(f, r)| (*f, r));
        ex.err(
            Diagnostic::new(open_span, "readings block lacks `network`")
                .expected(format!(
                    "a header line `network: {first}` (or {})",
                    rest.join(", ")
                ))
                .found("no `network`"),
        );
    }
    h
}

/// One of `table`, `delimiter`, `decimal`, `columns`, `skip` (FORMAT.md 1.1).
fn file_key(cx: &BlockCtx, ex: &mut ValueReader, key: &str, val: &Value, f: &mut FileKeys) {
    let path = [key];
    let y = ex.y;
    let at = y.value_span(&path);
    if let Some(k) = FILE_KEYS.iter().find(|k| **k == key) {
        f.given.push((k, y.key_span(&path)));
    }
    let bad = |what: &str, expected: &str, found: String| {
        Diagnostic::new(at, format!("`{key}` {what}"))
            .expected(expected.to_string())
            .found(found)
    };
    match key {
        "table" => {
            if let Some(t) = ex.nonempty_text(&path, val) {
                f.table = Some((t.trim().to_string(), at));
            }
        }
        "delimiter" => match ex.text(&path, val).as_deref().map(str::trim) {
            Some(",") => f.delimiter = Some(b','),
            Some(";") => f.delimiter = Some(b';'),
            Some("tab") => f.delimiter = Some(b'\t'),
            Some(other) => ex.err(bad(
                "is not a separator a table file may use",
                "`,`, `;` or `tab`",
                format!("`{other}`"),
            )),
            None => {}
        },
        "decimal" => match ex.text(&path, val).as_deref().map(str::trim) {
            Some("point") => f.decimal = Some(Decimal::Point),
            Some("comma") => f.decimal = Some(Decimal::Comma),
            Some(other) => ex.err(bad(
                "names no decimal separator",
                "`point` or `comma`",
                format!("`{other}`"),
            )),
            None => {}
        },
        "skip" => match val.as_u64().and_then(|n| usize::try_from(n).ok()) {
            Some(n) if n <= MAX_SKIP => f.skip = Some(n),
            _ => ex.err(bad(
                "must be a count of lines",
                &format!("a whole number from 0 to {MAX_SKIP}"),
                format!("`{}`", short_value(y.src, at)),
            )),
        },
        "columns" => f.columns = mapped_columns(cx.src, ex, val),
        _ => {}
    }
}

/// `model` goes with `network: model` and with no other network.
fn model_matches_network(ex: &mut ValueReader, h: &Header, given: bool, open_span: Span) {
    let is_model = h
        .network
        .is_some_and(|n| n.0.name() == model::NETWORK.spec.network);
    if given && !is_model && h.network.is_some() {
        ex.err(
            Diagnostic::new(
                ex.y.key_span(&["model"]),
                "`model` applies only to a block with `network: model`",
            )
            .expected("`network: model` beside it, or no `model`")
            .found(format!(
                "`model` in a {} block",
                h.network.map_or("", |n| n.0.name())
            )),
        );
    } else if is_model && !given {
        ex.err(
            Diagnostic::new(open_span, "a `network: model` block needs `model`")
                .expected("a header key `model:` with result name → `{expr, unit}`")
                .found("no `model`"),
        );
    }
}

/// `model`: result name → `{expr, unit}`, each expression compiled against the column
/// symbols and the parts (FORMAT.md 1.1).
fn model_key(cx: &BlockCtx, ex: &mut ValueReader, val: &Value) -> Vec<ModelResult> {
    let y = ex.y;
    let parts: Vec<&str> = cx.defined.parts.iter().map(String::as_str).collect();
    let allowed = cx.defined.known.then_some(parts.as_slice());
    let mut out = Vec::new();
    let entries = ex.entries(&["model"], val, None);
    if entries.len() > model::MAX_RESULTS {
        ex.err(
            Diagnostic::new(y.key_span(&["model"]), "`model` has too many results")
                .expected(format!("at most {}", model::MAX_RESULTS))
                .found(entries.len().to_string()),
        );
        return out;
    }
    if entries.is_empty() {
        ex.err(
            Diagnostic::new(y.value_span(&["model"]), "`model` names no result").expected(
                "result name → `{expr, unit}`, e.g. `XC: { expr: \"VC * R1 / VR\", unit: ohm }`",
            ),
        );
    }
    for (name, v) in &entries {
        let path = ["model", name.as_str()];
        let name_span = y.key_span(&path);
        let good = name.len() <= 32
            && name.starts_with(|c: char| c.is_ascii_alphabetic())
            && name.chars().all(|c| c.is_ascii_alphanumeric() || c == '_');
        if !good {
            ex.err(
                Diagnostic::new(name_span, "a result name is a plain symbol")
                    .expected("letters, digits and `_`, starting with a letter, at most 32")
                    .found(format!("`{}`", super::words::short(name))),
            );
            continue;
        }
        let fields = ex.entries(&path, v, Some(&["expr", "unit"]));
        let get = |k: &str| fields.iter().find(|(f, _)| f == k).map(|(_, v)| *v);
        let (Some(e), Some(u)) = (get("expr"), get("unit")) else {
            ex.err(
                Diagnostic::new(
                    name_span,
                    format!("result `{name}` needs `expr` and `unit`"),
                )
                .expected(format!("`{name}: {{ expr: \"…\", unit: F }}`")),
            );
            continue;
        };
        let unit = model_unit(ex, &path, u);
        let unit_span = y.value_span(&[path[0], path[1], "unit"]);
        let epath = ["model", name.as_str(), "expr"];
        let Some(text) = ex.nonempty_text(&epath, e) else {
            continue;
        };
        let span = y.value_span(&epath);
        // The text sits verbatim at the value (plain), or one past its opening quote.
        let at = |o: usize| y.src.get(o..o + text.len()) == Some(text.as_str());
        let quoted = y.src[span.start..].starts_with(['"', '\'']);
        let start = if quoted && at(span.start + 1) {
            Some(span.start + 1)
        } else if !quoted && at(span.start) {
            Some(span.start)
        } else {
            None
        };
        let place = model::Place { start, span };
        match model::compile(&text, place, allowed) {
            Ok(expr) => {
                if let Some(unit) = unit {
                    out.push(ModelResult {
                        name: name.clone(),
                        name_span,
                        unit,
                        unit_span,
                        expr,
                        span,
                        text_span: start.map_or(span, |s| Span::new(s, s + text.len())),
                    });
                }
            }
            Err(dg) => ex.err(dg),
        }
    }
    out
}

/// A result's unit word.
fn model_unit(ex: &mut ValueReader, path: &[&str; 2], v: &Value) -> Option<Unit> {
    let upath = [path[0], path[1], "unit"];
    let word = match v {
        Value::Number(n) => n.to_string(),
        other => ex.text(&upath, other)?,
    };
    let found = model::UNIT_WORDS.iter().find(|(w, _)| *w == word.trim());
    if found.is_none() {
        let words: Vec<&str> = model::UNIT_WORDS.iter().map(|(w, _)| *w).collect();
        ex.err(
            Diagnostic::new(
                ex.y.value_span(&upath),
                "not a unit a model result may have",
            )
            .expected(format!("one of {}", list(&words)))
            .found(format!("`{}`", super::words::short(&word))),
        );
    }
    found.map(|(_, u)| *u)
}

/// Most lines `skip` may pass over before the header row.
const MAX_SKIP: usize = 10_000;

fn short_value(src: &str, at: Span) -> String {
    super::words::short(src.get(at.start..at.end).unwrap_or(""))
}

/// `columns`: each key is one of our headings (read as a table heading, at the key), each
/// value the file's header text.
fn mapped_columns(src: &str, ex: &mut ValueReader, val: &Value) -> Vec<MappedColumn> {
    let y = ex.y;
    let mut out: Vec<MappedColumn> = Vec::new();
    let mut symbols: Vec<(String, Span)> = Vec::new();
    for (ours, v) in ex.entries(&["columns"], val, None) {
        let path = ["columns", ours.as_str()];
        let Some(theirs) = ex.nonempty_text(&path, v) else {
            continue;
        };
        let mut k = y.key_span(&path);
        if src[k.start..k.end].starts_with(['"', '\'']) && k.end - k.start >= 2 {
            k = Span::new(k.start + 1, k.end - 1);
        }
        let column = if ours.trim() == UNIT_COLUMN {
            None
        } else {
            let tok = CellRange {
                start: k.start,
                end: k.end,
            };
            let (sym, col) = parse_heading(src, tok, ex.d);
            if let Some(first) = sym.and_then(|s| {
                let seen = symbols.iter().find(|(x, _)| *x == s).map(|p| p.1);
                symbols.push((s, k));
                seen
            }) {
                let (fl, fc) = line_col(src, first.start);
                ex.err(
                    Diagnostic::new(k, "this column is mapped twice in `columns`")
                        .expected("each of our columns once")
                        .found(format!("`{ours}` again"))
                        .help(format!("first at line {fl}, column {fc}")),
                );
                continue;
            }
            match col {
                Some(c) => Some(c),
                None => continue,
            }
        };
        out.push(MappedColumn {
            column,
            ours: k,
            theirs: theirs.trim().to_string(),
            theirs_span: y.value_span(&path),
        });
    }
    out
}

/// The header's `parts`: a YAML list or comma-separated text, each name defined in the front
/// matter (when it could be read).
fn header_parts(cx: &BlockCtx, ex: &mut ValueReader, val: &Value) -> Vec<Named> {
    let path = ["parts"];
    let y = ex.y;
    let names: Vec<String> = match val {
        Value::Sequence(items) => items
            .iter()
            .filter_map(|it| {
                let t = ex.text_of(&path, it);
                if t.is_none() {
                    let sp = y.value_span(&path);
                    ex.err(
                        Diagnostic::new(sp, "`parts` lists part names")
                            .expected("names, e.g. `[R1, C1]`")
                            .found(kind_name(it)),
                    );
                }
                t
            })
            .collect(),
        Value::String(s) => s
            .split(',')
            .map(|x| x.trim().to_string())
            .filter(|x| !x.is_empty())
            .collect(),
        other => {
            let sp = y.value_span(&path);
            ex.err(
                Diagnostic::new(sp, "`parts` lists part names")
                    .expected("a list, e.g. `[R1, C1]`")
                    .found(kind_name(other)),
            );
            Vec::new()
        }
    };
    let mut parts = Vec::new();
    for n in names {
        let sp = y.item_span(&path, &n);
        if cx.defined.known && !cx.defined.parts.contains(&n) {
            ex.err(undefined("part", &n, sp, &cx.defined.parts, "parts"));
        }
        parts.push(Named { name: n, span: sp });
    }
    parts
}

/// Records the block id, or reports it at its second use.
fn unique_id(
    src: &str,
    name: &str,
    span: Span,
    ids: &mut BTreeMap<String, Span>,
    d: &mut Vec<Diagnostic>,
) {
    match ids.get(name) {
        Some(first) => {
            let (l, c) = line_col(src, first.start);
            d.push(
                Diagnostic::new(span, format!("block id `{name}` is used twice"))
                    .expected("an id unique in the notebook")
                    .found(format!("`{name}` again"))
                    .help(format!("first used at line {l}, column {c}")),
            );
        }
        None => {
            ids.insert(name.to_string(), span);
        }
    }
}

/// Checks across the header and the table: a heading and rows, the network's required
/// columns, `shift` with `period`.
pub(super) fn check_table(
    table: &Table,
    network: Option<Network>,
    sep_span: Span,
    d: &mut Vec<Diagnostic>,
) {
    let Some(hspan) = table.heading else {
        d.push(
            Diagnostic::new(sep_span, "readings block has no table")
                .expected("a heading row such as `f/Hz  VR/V  VC/V` after the `---` line")
                .found("nothing"),
        );
        return;
    };
    if table.rows.is_empty() {
        d.push(
            Diagnostic::new(hspan, "readings block has no rows")
                .expected("at least one row of readings under the heading")
                .found("no rows"),
        );
    }
    let symbols = &table.symbols;
    if let Some(n) = network {
        let missing: Vec<&str> = required_columns(n)
            .iter()
            .copied()
            .filter(|c| !symbols.iter().any(|(s, _)| s == c))
            .collect();
        if !missing.is_empty() {
            let have: Vec<&str> = symbols.iter().map(|(s, _)| s.as_str()).collect();
            d.push(
                Diagnostic::new(
                    hspan,
                    format!(
                        "{} block lacks column{} {}",
                        n.name(),
                        if missing.len() > 1 { "s" } else { "" },
                        list(&missing)
                    ),
                )
                .expected(format!("columns {}", list(required_columns(n))))
                .found(if have.is_empty() {
                    "no known columns".to_string()
                } else {
                    list(&have)
                }),
            );
        }
    }
    let has = |s: &str| symbols.iter().find(|(x, _)| x == s).map(|(_, sp)| *sp);
    match (has("shift"), has("period")) {
        (Some(sp), None) => d.push(
            Diagnostic::new(sp, "`shift` needs a `period` column")
                .expected("both `shift/div` and `period/div`")
                .found("`shift` alone"),
        ),
        (None, Some(sp)) => d.push(
            Diagnostic::new(sp, "`period` needs a `shift` column")
                .expected("both `shift/div` and `period/div`")
                .found("`period` alone"),
        ),
        _ => {}
    }
}
