//! Readings tables read from a file (`table:`, FORMAT.md 1.1): the file's bytes, as the edge
//! read them, become the block's columns and rows. Pure: no file system access here.
//!
//! Fields are split by the `csv` crate (quotes, CRLF, blank lines); the span of each field is
//! found again in the text so that every message points at the file's own line and column.
//! Spans into a file are offset by its `base` (past the notebook's end, see [`TableFile`]).

use super::block::{check_table, lot_spec};
use super::table::{cell, column_twice, parse_heading, CellRange, Table, UNIT_COLUMN};
use super::words::short;
use super::{check_lot_part, Decimal, Item, Named, Notebook, Row, TableFile, TableSpec};
use crate::diag::{Diagnostic, Span};
use crate::quantity::Unit;

/// The largest table file read, in bytes (as for a notebook).
pub const TABLE_MAX_BYTES: u64 = 16 * 1024 * 1024;

/// The files the notebook's blocks read their tables from: (path as written, span of `table:`),
/// each file once, in block order.
pub fn table_refs(nb: &Notebook) -> Vec<(String, Span)> {
    let mut out: Vec<(String, Span)> = Vec::new();
    for s in &nb.tables.specs {
        if !out.iter().any(|(p, _)| *p == s.path) {
            out.push((s.path.clone(), s.span));
        }
    }
    out
}

/// Fills every block that names a file with the rows read from `files`: (path as written,
/// name to print in messages, bytes). A block whose file is not among them is reported at its
/// `table:` value. Returns the notebook (holding the files, so that the diagnostics can be
/// shown in them) and every problem found; the notebook is fit to reduce only when there is
/// none.
pub fn read_tables(
    mut nb: Notebook,
    files: Vec<(String, String, Vec<u8>)>,
) -> (Notebook, Vec<Diagnostic>) {
    if nb.tables.specs.is_empty() {
        return (nb, Vec::new());
    }
    let mut d = Vec::new();
    let mut base = nb.source.len() + 1;
    for (path, name, bytes) in files {
        if nb.tables.files.iter().any(|f| f.path == path) {
            continue;
        }
        let text = decode(&bytes, base, &mut d);
        let next = base + text.len() + 1;
        nb.tables.files.push(TableFile {
            path,
            name,
            bytes,
            text,
            base,
        });
        base = next;
    }
    if !d.is_empty() {
        return (nb, d);
    }
    let specs = nb.tables.specs.clone();
    for spec in &specs {
        let Some(file) = nb.tables.files.iter().find(|f| f.path == spec.path) else {
            d.push(
                Diagnostic::new(
                    spec.span,
                    format!("table file `{}` was not read", spec.path),
                )
                .expected("a file beside the notebook")
                .found("no file"),
            );
            continue;
        };
        let table = file_table(&nb.source, file, spec, &mut d);
        let Some(Item::Readings(block)) = nb
            .items
            .iter_mut()
            .find(|i| matches!(i, Item::Readings(b) if b.id == spec.block))
        else {
            continue;
        };
        if table.heading.is_some() {
            check_table(&table, Some(block.network), spec.fence, &mut d);
        }
        block.lot = lot_spec(spec.unit_of.clone(), &table, &mut d);
        block.columns = table.columns;
        block.rows = table.rows;
        if table.heading.is_some() {
            super::readout::apply(&block.readout, &mut block.columns, &mut block.rows, &mut d);
        }
        check_lot_part(&nb.front.parts, block, &mut d);
    }
    (nb, d)
}

/// The file's text, UTF-8 BOM removed; bytes that are not UTF-8 are reported where they stand.
fn decode(bytes: &[u8], base: usize, d: &mut Vec<Diagnostic>) -> String {
    let body = bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes);
    match std::str::from_utf8(body) {
        Ok(t) => t.to_string(),
        Err(e) => {
            let at = e.valid_up_to();
            let lossy = String::from_utf8_lossy(body).into_owned();
            d.push(
                Diagnostic::new(
                    Span::new(base + at, base + at + 1),
                    "the table file is not valid UTF-8 text",
                )
                .expected("UTF-8 text (most spreadsheet programs offer \"CSV UTF-8\")")
                .found(format!("the byte 0x{:02x}", body[at])),
            );
            lossy
        }
    }
}

/// One field of a record: its text (quotes removed) and where it stands in the file text.
struct Field {
    text: String,
    /// Inside the quotes, surrounding blanks trimmed (file-relative).
    at: CellRange,
}

/// A record of the file: its fields and the span of the whole line (file-relative).
struct Record {
    fields: Vec<Field>,
    line: CellRange,
}

/// Offset of the line after the first `skip` lines, or None when the file has fewer lines.
fn after_skip(text: &str, skip: usize) -> Option<usize> {
    let mut at = 0;
    for _ in 0..skip {
        at += text[at..].find('\n')? + 1;
    }
    Some(at)
}

/// The raw spans of the fields of the record that starts at `at`, split as the csv reader
/// splits them (delimiter outside quotes, a doubled quote inside them), up to its line end.
fn field_spans(text: &str, at: usize, delim: u8) -> (Vec<CellRange>, usize) {
    let b = text.as_bytes();
    let (mut i, mut start, mut quoted) = (at, at, false);
    let mut out = Vec::new();
    while i < b.len() {
        match b[i] {
            b'"' => quoted = !quoted,
            c if c == delim && !quoted => {
                out.push(CellRange { start, end: i });
                start = i + 1;
            }
            b'\n' | b'\r' if !quoted => break,
            _ => {}
        }
        i += 1;
    }
    out.push(CellRange { start, end: i });
    (out, i)
}

/// The span inside a raw field: blanks trimmed, then one pair of enclosing quotes removed.
fn inner(text: &str, r: CellRange) -> CellRange {
    let t = &text[r.start..r.end];
    let start = r.start + (t.len() - t.trim_start().len());
    let end = start + t.trim().len();
    let q = &text[start..end];
    if q.len() >= 2 && q.starts_with('"') && q.ends_with('"') {
        let t = &text[start + 1..end - 1];
        let s = start + 1 + (t.len() - t.trim_start().len());
        CellRange {
            start: s,
            end: s + t.trim().len(),
        }
    } else {
        CellRange { start, end }
    }
}

/// Every non-blank record after `skip` lines, with its fields' spans.
fn records(text: &str, spec: &TableSpec, d: &mut Vec<Diagnostic>) -> Vec<Record> {
    let Some(from) = after_skip(text, spec.skip) else {
        d.push(
            Diagnostic::new(
                Span::new(text.len(), text.len()),
                format!("`skip: {}` passes over every line of the file", spec.skip),
            )
            .expected("a header row after the skipped lines")
            .found(format!("{} lines", text.lines().count())),
        );
        return Vec::new();
    };
    let mut rdr = csv::ReaderBuilder::new()
        .delimiter(spec.delimiter)
        .has_headers(false)
        .flexible(true)
        .from_reader(&text.as_bytes()[from..]);
    let mut out = Vec::new();
    for rec in rdr.records() {
        let rec = match rec {
            Ok(r) => r,
            Err(e) => {
                let at = e.position().map_or(from, |p| from + p.byte() as usize);
                d.push(
                    Diagnostic::new(
                        Span::new(at, at + 1),
                        "this line cannot be read as a table row",
                    )
                    .expected("fields separated by the delimiter, quotes paired")
                    .found(e.to_string()),
                );
                break;
            }
        };
        // The reader may place a record just after the previous one's `\r`, before its `\n`.
        let mut start = rec.position().map_or(from, |p| from + p.byte() as usize);
        while matches!(text.as_bytes().get(start), Some(b'\r' | b'\n')) {
            start += 1;
        }
        let (raw, end) = field_spans(text, start, spec.delimiter);
        if rec.iter().all(|f| f.trim().is_empty()) {
            continue;
        }
        // A quoted field across lines: fall back to the record's first line for every field.
        let spans: Vec<CellRange> = if raw.len() == rec.len() {
            raw.iter().map(|r| inner(text, *r)).collect()
        } else {
            vec![CellRange { start, end }; rec.len()]
        };
        let fields = rec
            .iter()
            .zip(spans)
            .map(|(t, at)| Field {
                text: t.trim().to_string(),
                at,
            })
            .collect();
        out.push(Record {
            fields,
            line: CellRange { start, end },
        });
    }
    out
}

/// What each field of the file's header row holds: a column with its prefix factor, the
/// serial column, or nothing we read.
#[derive(Clone)]
enum Slot {
    Column(String, Unit, f64),
    Serial,
    Ignored,
}

/// The table of one block from its file. Spans in what it returns and reports are offset by
/// the file's `base`, except those of the notebook's own `columns` keys.
fn file_table(src: &str, file: &TableFile, spec: &TableSpec, d: &mut Vec<Diagnostic>) -> Table {
    let mut fd = Vec::new();
    let mut table = Table::default();
    let text = &file.text;
    let recs = records(text, spec, &mut fd);
    let base = file.base;
    let sh = |s: Span| Span::new(s.start + base, s.end + base);
    match recs.split_first() {
        None => {
            if fd.is_empty() {
                fd.push(
                    Diagnostic::new(
                        Span::new(0, 0),
                        format!("table file `{}` is empty", spec.path),
                    )
                    .expected("a header row naming the columns, then rows of readings")
                    .found("no lines"),
                );
            }
        }
        Some((head, rows)) => {
            let slots = if spec.columns.is_empty() {
                own_headings(text, head, &mut table, &mut fd)
            } else {
                mapped_headings(src, head, spec, base, &mut table, &mut fd, d)
            };
            let work = decimal_text(text, spec.decimal, rows, &slots, &mut fd);
            for r in rows {
                if let Some((row, serial)) = file_row(&work, r, &slots, spec, &mut fd) {
                    table.rows.push(row);
                    table.serials.extend(serial);
                }
            }
            table.heading = Some(Span::new(head.line.start, head.line.end));
        }
    }
    // Everything above is relative to the file; shift it into the file's span space. Mapped
    // headings (`columns`) stand in the notebook and keep their spans.
    if spec.columns.is_empty() {
        for c in table.columns.iter_mut() {
            c.span = sh(c.span);
            if let Some(r) = c.range.as_mut() {
                r.span = sh(r.span);
            }
        }
        for s in table.symbols.iter_mut() {
            s.1 = sh(s.1);
        }
        table.unit_heading = table.unit_heading.map(sh);
    }
    table.heading = table.heading.map(sh);
    for r in table.rows.iter_mut() {
        r.span = sh(r.span);
        for c in r.cells.iter_mut() {
            c.span = sh(c.span);
        }
    }
    for s in table.serials.iter_mut() {
        s.span = sh(s.span);
    }
    for mut dg in fd {
        dg.span = sh(dg.span);
        d.push(dg);
    }
    table
}

/// The header row read as our headings (no `columns`): each field is a heading, as in a
/// readings block typed in the notebook.
fn own_headings(
    text: &str,
    head: &Record,
    table: &mut Table,
    d: &mut Vec<Diagnostic>,
) -> Vec<Slot> {
    let mut slots = Vec::with_capacity(head.fields.len());
    for f in &head.fields {
        let at = Span::new(f.at.start, f.at.end);
        if f.text == UNIT_COLUMN && table.unit_heading.is_none() {
            table.unit_heading = Some(at);
            slots.push(Slot::Serial);
            continue;
        }
        if f.text.is_empty() {
            d.push(
                Diagnostic::new(at, "empty column heading in the header row")
                    .expected("`symbol/unit`, e.g. `f/Hz`, or `columns` in the block header to map the file's own headings")
                    .found("nothing"),
            );
            slots.push(Slot::Ignored);
            continue;
        }
        let (sym, col) = parse_heading(text, f.at, d);
        if let Some(s) = &sym {
            if let Some((_, first)) = table.symbols.iter().find(|(x, _)| x == s) {
                d.push(column_twice(text, s, at, *first));
            } else {
                table.symbols.push((s.clone(), at));
            }
        }
        match col {
            Some((c, factor)) => {
                slots.push(Slot::Column(c.symbol.clone(), c.unit, factor));
                table.columns.push(c);
            }
            None => slots.push(Slot::Ignored),
        }
    }
    slots
}

/// The header row matched against `columns`: each of our headings takes the field whose text
/// is the one named; a name the row lacks is reported at the row. Other fields are not read.
fn mapped_headings(
    src: &str,
    head: &Record,
    spec: &TableSpec,
    base: usize,
    table: &mut Table,
    fd: &mut Vec<Diagnostic>,
    d: &mut Vec<Diagnostic>,
) -> Vec<Slot> {
    let mut slots = vec![Slot::Ignored; head.fields.len()];
    let names: Vec<&str> = head.fields.iter().map(|f| f.text.as_str()).collect();
    for m in &spec.columns {
        let Some(i) = names.iter().position(|n| *n == m.theirs) else {
            let ours = &src[m.ours.start..m.ours.end];
            let near = names.iter().find(|n| n.eq_ignore_ascii_case(&m.theirs));
            let mut dg = Diagnostic::new(
                Span::new(head.line.start, head.line.end),
                format!(
                    "the header row has no column \"{}\" (mapped to `{ours}`)",
                    m.theirs
                ),
            )
            .expected(format!("a header field \"{}\" exactly", m.theirs))
            .found(short(&names.join(", ")));
            if let Some(n) = near {
                dg = dg.help(format!("the row has \"{n}\": headers are case-sensitive"));
            }
            fd.push(dg);
            continue;
        };
        if !matches!(slots[i], Slot::Ignored) {
            d.push(
                Diagnostic::new(m.theirs_span, format!("\"{}\" is mapped twice", m.theirs))
                    .expected("each file column mapped to one of ours")
                    .found(format!("\"{}\" again", m.theirs)),
            );
            continue;
        }
        let at = head.fields[i].at;
        match &m.column {
            None => {
                // The serial column: its heading span is the file's field, so a lot error
                // (`unit` without `unit_of`) points where the serials are.
                table.unit_heading = Some(Span::new(base + at.start, base + at.end));
                slots[i] = Slot::Serial;
            }
            Some((c, factor)) => {
                table.symbols.push((c.symbol.clone(), c.span));
                slots[i] = Slot::Column(c.symbol.clone(), c.unit, *factor);
                table.columns.push(c.clone());
            }
        }
    }
    slots
}

/// The text cells are read from: as is for `decimal: point` (a decimal comma in a number is
/// reported), with each number's comma made a point for `decimal: comma` (a point reported).
/// Both marks are one byte, so every offset stays the same.
fn decimal_text(
    text: &str,
    decimal: Decimal,
    rows: &[Record],
    slots: &[Slot],
    d: &mut Vec<Diagnostic>,
) -> String {
    let mut work = text.as_bytes().to_vec();
    for r in rows {
        for (f, slot) in r.fields.iter().zip(slots) {
            if !matches!(slot, Slot::Column(..)) {
                continue;
            }
            let raw = &text[f.at.start..f.at.end];
            let (wrong, right, named, other) = match decimal {
                Decimal::Point => (',', ".", "point", "comma"),
                Decimal::Comma => ('.', ",", "comma", "point"),
            };
            if let Some(p) = raw.find(wrong) {
                let at = f.at.start + p;
                d.push(
                    Diagnostic::new(
                        Span::new(at, at + 1),
                        format!("a decimal {other} in a file read with `decimal: {named}`"),
                    )
                    .expected(format!(
                        "a decimal {named} (`{}`)",
                        raw.replace(wrong, right)
                    ))
                    .found(format!("`{raw}`"))
                    .help(format!(
                        "if the whole file writes decimals this way, say `decimal: {other}` in the block header"
                    )),
                );
                continue;
            }
            if decimal == Decimal::Comma {
                for i in f.at.start..f.at.end {
                    if work[i] == b',' {
                        work[i] = b'.';
                    }
                }
            }
        }
    }
    String::from_utf8(work).unwrap_or_else(|_| text.to_string())
}

/// One row of the file: its cells in their columns' units and its serial; None when it is
/// reported whole (a field count that differs from the header row's, an empty serial).
fn file_row(
    work: &str,
    r: &Record,
    slots: &[Slot],
    spec: &TableSpec,
    d: &mut Vec<Diagnostic>,
) -> Option<(Row, Option<Named>)> {
    let line = Span::new(r.line.start, r.line.end);
    if r.fields.len() != slots.len() {
        let at = match r.fields.get(slots.len()) {
            Some(f) => Span::new(f.at.start, f.at.end.max(f.at.start + 1).min(r.line.end)),
            None => line,
        };
        let mut dg = Diagnostic::new(
            at,
            format!(
                "row has {} fields but the header row has {}",
                r.fields.len(),
                slots.len()
            ),
        )
        .expected(format!("{} fields, as in the header row", slots.len()))
        .found(format!("{} fields", r.fields.len()));
        if spec.delimiter == b',' && r.fields.len() > slots.len() {
            dg = dg.help("a decimal comma splits a number in two in a comma-separated file: quote the number, or use `delimiter: \";\"` with `decimal: comma`");
        }
        d.push(dg);
        return None;
    }
    let mut cells = Vec::new();
    let mut serial = None;
    for (f, slot) in r.fields.iter().zip(slots) {
        match slot {
            Slot::Ignored => {}
            Slot::Serial if f.text.is_empty() => {
                d.push(
                    Diagnostic::new(
                        Span::new(f.at.start, f.at.start),
                        "empty serial in column `unit`",
                    )
                    .expected("the serial of the unit read in this row, e.g. `A07`")
                    .found("nothing"),
                );
                return None;
            }
            Slot::Serial => {
                serial = Some(Named {
                    name: f.text.clone(),
                    span: Span::new(f.at.start, f.at.end),
                })
            }
            Slot::Column(sym, unit, factor) => {
                cells.extend(cell(work, f.at, r.line.end, sym, *unit, *factor, d));
            }
        }
    }
    Some((Row { cells, span: line }, serial))
}
