//! One readings block: fences, the YAML header, the table, and the checks across them.

use super::front::Defined;
use super::table::{
    content_end, is_separator_row, merge_headings, merge_units, out_of_range, parse_heading,
    pipe_cells, trim_tok, ws_tokens, CellRange,
};
use super::values::{undefined, ValueReader};
use super::words::{list, one_of};
use super::yaml::{kind_name, YamlLocator};
use super::{
    line_text, required_columns, split_lines, Cell, Column, Named, Network, ReadingsBlock, Row,
    MAX_HEADER,
};
use crate::diag::{line_col, Diagnostic, Span};
use crate::quantity::{self, parse_in_unit, parse_quantity, Unit};
use serde_yaml::Value;
use std::collections::BTreeMap;

const HEADER_KEYS: &[&str] = &[
    "id", "network", "parts", "meter", "phase", "counter", "note", "source",
];

pub(super) struct BlockCtx<'a> {
    pub(super) src: &'a str,
    pub(super) defined: &'a Defined,
}

pub(super) fn parse_block(
    cx: &BlockCtx,
    r: Span,
    ids: &mut BTreeMap<String, Span>,
    d: &mut Vec<Diagnostic>,
) -> Option<ReadingsBlock> {
    let src = cx.src;
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
    let blines = split_lines(src, body.start, body.end);
    let Some(sep) = blines
        .iter()
        .position(|l| line_text(src, l).trim() == "---")
    else {
        d.push(
            Diagnostic::new(
                open_span,
                "readings block lacks the `---` line between header and table",
            )
            .expected("a YAML header (id, network, …), a line `---`, then the table")
            .found("no `---` line"),
        );
        return None;
    };
    let sep_line = blines[sep];
    let header_end = sep_line.start;

    // Header.
    let mut id: Option<(String, Span)> = None;
    let mut network: Option<Network> = None;
    let mut parts = Vec::new();
    let (mut meter, mut phase, mut counter, mut note, mut source) = (None, None, None, None, None);
    let mut network_seen = false;
    if header_end - body.start > MAX_HEADER {
        d.push(
            Diagnostic::new(open_span, "readings block header is too long")
                .expected(format!("at most {} KiB", MAX_HEADER >> 10))
                .found(format!("{} bytes", header_end - body.start)),
        );
    } else {
        let y = YamlLocator::new(src, body.start, header_end, open_span);
        match y.load("block header") {
            Err(e) => d.push(e),
            Ok(v) => {
                let mut ex = ValueReader {
                    y: &y,
                    d,
                    what: "block header",
                };
                let entries = ex.entries(&[], &v, Some(HEADER_KEYS));
                for (key, val) in &entries {
                    let path = [key.as_str()];
                    match key.as_str() {
                        "id" => {
                            if let Some(s) = ex.nonempty_text(&path, val) {
                                id = Some((s.trim().to_string(), y.value_span(&path)));
                            }
                        }
                        "network" => {
                            network_seen = true;
                            if let Some(s) = ex.text(&path, val) {
                                let choices = Network::ALL.map(|n| (n.name(), n));
                                let at = y.value_span(&path);
                                network = one_of(s.trim(), &choices, "network", at)
                                    .map_err(|dg| ex.err(dg))
                                    .ok();
                            }
                        }
                        "parts" => {
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
                            for n in names {
                                let sp = y.item_span(&path, &n);
                                if cx.defined.known && !cx.defined.parts.contains(&n) {
                                    ex.err(undefined("part", &n, sp, &cx.defined.parts, "parts"));
                                }
                                parts.push(Named { name: n, span: sp });
                            }
                        }
                        "meter" => meter = ex.instrument_name(&path, val, cx.defined.checked()),
                        "phase" => phase = ex.instrument_name(&path, val, cx.defined.checked()),
                        "counter" => counter = ex.instrument_name(&path, val, cx.defined.checked()),
                        "note" => note = ex.text(&path, val),
                        "source" => {
                            let q = ex.quantity(&path, val, &[Unit::V], Some(Unit::V));
                            source = ex.positive(&path, q, "the source level").map(|q| q.value);
                        }
                        _ => {}
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
                    ex.err(
                        Diagnostic::new(open_span, "readings block lacks `network`")
                            .expected("a header line `network: RC` (or RL, RLC, Z)")
                            .found("no `network`"),
                    );
                }
            }
        }
    }

    // Ids are unique even among blocks that fail elsewhere.
    if let Some((name, span)) = &id {
        match ids.get(name) {
            Some(first) => {
                let (l, c) = line_col(src, first.start);
                d.push(
                    Diagnostic::new(*span, format!("block id `{name}` is used twice"))
                        .expected("an id unique in the notebook")
                        .found(format!("`{name}` again"))
                        .help(format!("first used at line {l}, column {c}")),
                );
            }
            None => {
                ids.insert(name.clone(), *span);
            }
        }
    }

    // Table.
    let mut heading: Option<(Vec<CellRange>, bool, Span)> = None;
    let mut columns: Vec<Column> = Vec::new();
    let mut colinfo: Vec<Option<(String, Unit, f64)>> = Vec::new();
    let mut symbols: Vec<(String, Span)> = Vec::new();
    let mut rows: Vec<Row> = Vec::new();
    let mut ncols = 0usize;
    for l in &blines[sep + 1..] {
        let cend = content_end(src, l);
        let t = &src[l.start..cend];
        if t.trim().is_empty() {
            continue;
        }
        let Some((_, pipe, _)) = heading.as_ref() else {
            let pipe = t.contains('|');
            let toks = if pipe {
                pipe_cells(src, l.start, cend)
            } else {
                merge_headings(src, ws_tokens(src, l.start, cend))
            };
            let hspan = trim_tok(src, l.start, cend);
            let hspan = Span::new(hspan.start, hspan.end);
            ncols = toks.len();
            for tok in &toks {
                if tok.start == tok.end {
                    d.push(
                        Diagnostic::new(
                            Span::new(tok.start, (tok.start + 1).min(cend)),
                            "empty column heading",
                        )
                        .expected("`symbol/unit`, e.g. `f/Hz`"),
                    );
                    colinfo.push(None);
                    continue;
                }
                let (sym, col) = parse_heading(src, *tok, d);
                if let Some(s) = &sym {
                    if let Some((_, first)) = symbols.iter().find(|(x, _)| x == s) {
                        let (fl, fc) = line_col(src, first.start);
                        d.push(
                            Diagnostic::new(
                                Span::new(tok.start, tok.end),
                                format!("column `{s}` appears twice"),
                            )
                            .expected("each column once")
                            .found(format!("a second `{s}`"))
                            .help(format!("first at line {fl}, column {fc}")),
                        );
                    } else {
                        symbols.push((s.clone(), Span::new(tok.start, tok.end)));
                    }
                }
                match col {
                    Some((c, f)) => {
                        colinfo.push(Some((c.symbol.clone(), c.unit, f)));
                        columns.push(c);
                    }
                    None => colinfo.push(None),
                }
            }
            heading = Some((toks, pipe, hspan));
            continue;
        };
        let pipe = *pipe;
        let cells_tok = if pipe {
            pipe_cells(src, l.start, cend)
        } else {
            merge_units(src, ws_tokens(src, l.start, cend))
        };
        if pipe && is_separator_row(src, &cells_tok) {
            continue;
        }
        let rs = trim_tok(src, l.start, cend);
        let row_span = Span::new(rs.start, rs.end);
        if cells_tok.len() > ncols && !pipe {
            // A word right after a number in a whitespace table is most likely a unit that
            // is not known, not an extra column: say so at the word.
            let found = (1..cells_tok.len()).find(|&j| {
                let w = &src[cells_tok[j].start..cells_tok[j].end];
                let p = &src[cells_tok[j - 1].start..cells_tok[j - 1].end];
                w.starts_with(|c: char| c.is_alphabetic()) && p.parse::<f64>().is_ok()
            });
            if let Some(j) = found {
                let (prev, extra) = (cells_tok[j - 1], cells_tok[j]);
                let word = &src[extra.start..extra.end];
                let joined = format!("{} {word}", &src[prev.start..prev.end]);
                if let Err(e) = parse_quantity(&joined) {
                    d.push(
                        Diagnostic::new(Span::new(extra.start, extra.end), e.message)
                            .expected(e.expected)
                            .found(format!("`{word}`")),
                    );
                    continue;
                }
            }
        }
        if cells_tok.len() != ncols {
            // Too many cells: point at the first one the table has no column for.
            let at = match cells_tok.get(ncols) {
                Some(t) if cells_tok.len() > ncols => Span::new(t.start, t.end),
                _ => row_span,
            };
            d.push(
                Diagnostic::new(
                    at,
                    format!(
                        "row has {} cells but the table has {} columns",
                        cells_tok.len(),
                        ncols
                    ),
                )
                .expected(format!("{ncols} cells"))
                .found(format!("{} cells", cells_tok.len())),
            );
            continue;
        }
        let mut cells = Vec::with_capacity(ncols);
        for (j, tok) in cells_tok.iter().enumerate() {
            let text = &src[tok.start..tok.end];
            let cspan = Span::new(tok.start, tok.end);
            let Some(Some((sym, unit, factor))) = colinfo.get(j) else {
                continue;
            };
            if text.is_empty() {
                d.push(
                    Diagnostic::new(
                        Span::new(tok.start, (tok.start + 1).min(cend)),
                        format!("empty cell in column `{sym}`"),
                    )
                    .expected("a number")
                    .found("nothing"),
                );
                continue;
            }
            match parse_in_unit(text, *unit, *factor) {
                Ok(q) => {
                    let problem = match sym.as_str() {
                        "f" if q.value <= 0.0 => Some("a frequency must be greater than zero"),
                        "period" if q.value <= 0.0 => Some("a period must be greater than zero"),
                        "Vs" | "VR" | "VC" | "VL" | "V" | "I" if q.value < 0.0 => {
                            Some("a meter magnitude cannot be negative")
                        }
                        _ => None,
                    };
                    if let Some(m) = problem {
                        d.push(
                            Diagnostic::new(cspan, m)
                                .expected("a positive value")
                                .found(format!("`{text}`")),
                        );
                    } else if let Some(dg) = out_of_range(sym, q.value, text, cspan) {
                        d.push(dg);
                    }
                    cells.push(Cell {
                        value: q.value,
                        text: text.to_string(),
                        span: cspan,
                    });
                }
                Err(e) => {
                    let s = tok.start + e.offset.min(text.len());
                    let end = (s + e.len.max(1)).min(tok.end).max(s);
                    let mut dg = Diagnostic::new(
                        crate::diag::clamp_span(src, Span::new(s, end)),
                        format!("column `{sym}`: {}", e.message),
                    )
                    .expected(e.expected.clone())
                    .found(format!("`{}`", e.found));
                    if let Some(h) = quantity::unit_help(&e.found) {
                        dg = dg.help(h);
                    }
                    d.push(dg);
                }
            }
        }
        rows.push(Row {
            cells,
            span: row_span,
        });
    }
    let sep_span = Span::new(sep_line.start, sep_line.end);
    match &heading {
        None => d.push(
            Diagnostic::new(sep_span, "readings block has no table")
                .expected("a heading row such as `f/Hz  VR/V  VC/V` after the `---` line")
                .found("nothing"),
        ),
        Some((_, _, hspan)) => {
            if rows.is_empty() {
                d.push(
                    Diagnostic::new(*hspan, "readings block has no rows")
                        .expected("at least one row of readings under the heading")
                        .found("no rows"),
                );
            }
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
                            *hspan,
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
    }
    let (id, id_span) = id?;
    Some(ReadingsBlock {
        id,
        id_span,
        network: network?,
        parts,
        meter,
        phase,
        counter,
        note,
        source,
        columns,
        rows,
        span: r,
        body: src[body.start..body.end].to_string(),
    })
}
