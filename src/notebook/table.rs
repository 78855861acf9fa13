//! Readings tables: cells of pipe and whitespace tables, column headings, plausible ranges.

use super::front::range_value;
use super::words::{list, unknown};
use super::{line_text, symbol_unit, Cell, Column, Line, Named, Range, Readout, Row, SYMBOLS};
use crate::diag::{line_col, Diagnostic, Span};
use crate::quantity::{self, dimension_name, parse_in_unit, parse_quantity, parse_unit, Unit};

// ---------------------------------------------------------------------------------------------
// Readings blocks.

#[derive(Debug, Clone, Copy)]
pub(super) struct CellRange {
    pub(super) start: usize,
    pub(super) end: usize,
}

/// End of a table line's content: before `#` and trailing whitespace.
pub(super) fn content_end(src: &str, l: &Line) -> usize {
    let t = line_text(src, l);
    let cut = t.find('#').unwrap_or(t.len());
    l.start + t[..cut].trim_end().len()
}

fn trim_tok(src: &str, a: usize, b: usize) -> CellRange {
    let t = &src[a..b];
    let lead = t.len() - t.trim_start().len();
    let s = a + lead;
    CellRange {
        start: s,
        end: s + t.trim().len(),
    }
}

fn pipe_cells(src: &str, start: usize, end: usize) -> Vec<CellRange> {
    let t = &src[start..end];
    let mut bounds = vec![start];
    for (i, c) in t.char_indices() {
        if c == '|' {
            bounds.push(start + i);
        }
    }
    bounds.push(end);
    let mut segs: Vec<(usize, usize)> = Vec::new();
    for w in 0..bounds.len() - 1 {
        let a = if w == 0 { bounds[0] } else { bounds[w] + 1 };
        segs.push((a, bounds[w + 1].max(a)));
    }
    let trimmed = t.trim();
    if trimmed.starts_with('|') && !segs.is_empty() {
        segs.remove(0);
    }
    if trimmed.ends_with('|') && trimmed.len() > 1 && !segs.is_empty() {
        segs.pop();
    }
    segs.into_iter().map(|(a, b)| trim_tok(src, a, b)).collect()
}

fn ws_tokens(src: &str, start: usize, end: usize) -> Vec<CellRange> {
    let t = &src[start..end];
    let mut out = Vec::new();
    let mut cur: Option<usize> = None;
    for (i, c) in t.char_indices() {
        if c.is_whitespace() {
            if let Some(s) = cur.take() {
                out.push(CellRange {
                    start: start + s,
                    end: start + i,
                });
            }
        } else if cur.is_none() {
            cur = Some(i);
        }
    }
    if let Some(s) = cur {
        out.push(CellRange {
            start: start + s,
            end,
        });
    }
    out
}

/// Whitespace headings: `VR (mV)` and `f / Hz` are one heading each.
fn merge_headings(src: &str, toks: Vec<CellRange>) -> Vec<CellRange> {
    let mut out: Vec<CellRange> = Vec::new();
    for t in toks {
        let text = &src[t.start..t.end];
        let joins = out.last().is_some_and(|p| {
            let prev = &src[p.start..p.end];
            let bare_range = prev
                .split_once('@')
                .is_some_and(|(_, r)| !r.is_empty() && quantity::number_len(r) == Some(r.len()));
            text.starts_with('(')
                || text.starts_with('/')
                || text.starts_with('@')
                || (prev.ends_with('/') && !prev.contains('('))
                || prev.ends_with('@')
                || (bare_range && parse_unit(text).is_some())
        });
        match out.last_mut() {
            Some(p) if joins => p.end = t.end,
            _ => out.push(t),
        }
    }
    out
}

/// Whitespace rows: `12 mV` is one cell (a unit token joins the number before it).
fn merge_units(src: &str, toks: Vec<CellRange>) -> Vec<CellRange> {
    let mut out: Vec<CellRange> = Vec::new();
    for t in toks {
        let text = &src[t.start..t.end];
        let unit_like = !text
            .starts_with(|c: char| c.is_ascii_digit() || c == '+' || c == '-' || c == '.')
            && parse_unit(text).is_some();
        let joins = unit_like
            && out.last().is_some_and(|p| {
                let prev = &src[p.start..p.end];
                quantity::number_len(prev) == Some(prev.len())
            });
        match out.last_mut() {
            Some(p) if joins => p.end = t.end,
            _ => out.push(t),
        }
    }
    out
}

fn is_separator_row(src: &str, cells: &[CellRange]) -> bool {
    !cells.is_empty()
        && cells.iter().all(|c| {
            let t = &src[c.start..c.end];
            let core = t.trim_start_matches(':').trim_end_matches(':');
            !core.is_empty() && core.chars().all(|ch| ch == '-')
        })
}

/// A column heading: (symbol if recognised, column and prefix factor if fully valid).
pub(super) fn parse_heading(
    src: &str,
    tok: CellRange,
    d: &mut Vec<Diagnostic>,
) -> (Option<String>, Option<(Column, f64)>) {
    let full = &src[tok.start..tok.end];
    let full_span = Span::new(tok.start, tok.end);
    // `VR/V@2V`: the part after `@` names the instrument range.
    let (tok, range_tok) = match full.find('@') {
        Some(p) => (
            trim_tok(src, tok.start, tok.start + p),
            Some(trim_tok(src, tok.start + p + 1, tok.end)),
        ),
        None => (tok, None),
    };
    let text = &src[tok.start..tok.end];
    let span = Span::new(tok.start, tok.end);
    let (sym_rel, unit_rel) = if let Some(p) = text.find('/') {
        ((0, p), Some((p + 1, text.len())))
    } else if let (Some(p), true) = (text.find('('), text.ends_with(')')) {
        ((0, p), Some((p + 1, text.len() - 1)))
    } else {
        ((0, text.len()), None)
    };
    let sym_tok = trim_tok(src, tok.start + sym_rel.0, tok.start + sym_rel.1);
    let written = &src[sym_tok.start..sym_tok.end];
    let sym_span = Span::new(sym_tok.start, sym_tok.end);
    // `VRpp`: a voltage read peak to peak.
    let (sym, peak_to_peak) = match written.strip_suffix("pp") {
        Some(b) if VOLTAGE_SYMBOLS.contains(&b) => (b, true),
        _ => (written, false),
    };
    let known = SYMBOLS.contains(&sym);
    if !known {
        let at = if sym.is_empty() { span } else { sym_span };
        let expected = format!(
            "one of {} (case-sensitive), a voltage with `pp` for peak to peak (`VRpp`)",
            list(SYMBOLS)
        );
        d.push(unknown(at, "column", sym, SYMBOLS, expected).found(format!("`{text}`")));
    }
    let symbol = known.then(|| sym.to_string());
    let Some(ur) = unit_rel else {
        if known {
            let u = symbol_unit(sym).map_or("V", |u| u.symbol());
            d.push(
                Diagnostic::new(span, format!("column heading `{text}` has no unit"))
                    .expected(format!("`symbol/unit`, e.g. `{sym}/{u}`"))
                    .found(format!("`{text}`")),
            );
        }
        return (symbol, None);
    };
    let utok = trim_tok(src, tok.start + ur.0, tok.start + ur.1);
    let utext = &src[utok.start..utok.end];
    let uspan = if utext.is_empty() {
        span
    } else {
        Span::new(utok.start, utok.end)
    };
    let Some((factor, unit)) = parse_unit(utext) else {
        let mut dg = Diagnostic::new(
            uspan,
            if utext.is_empty() {
                format!("column heading `{text}` has no unit")
            } else {
                let p = quantity::unit_problem(utext);
                if p.contains("prefix") {
                    format!("{p} in `{utext}`")
                } else {
                    p
                }
            },
        )
        .expected("a unit such as Hz, V, mV, mA, deg or div")
        .found(format!("`{utext}`"));
        if let Some(h) = quantity::unit_help(utext) {
            dg = dg.help(h);
        }
        d.push(dg);
        return (symbol, None);
    };
    let Some((symbol_s, want)) = symbol.clone().and_then(|s| symbol_unit(&s).map(|u| (s, u)))
    else {
        return (symbol, None);
    };
    // A voltage read off a display in divisions (`VR/div`): volts once the scale is applied.
    let divisions = want == Unit::V && unit == Unit::Div;
    if divisions && range_tok.is_some() {
        d.push(
            Diagnostic::new(
                full_span,
                format!("column `{symbol_s}` read in divisions names no meter range"),
            )
            .expected(format!("`{written}/div` without `@`"))
            .found(format!("`{full}`")),
        );
        return (symbol, None);
    }
    if unit != want && !divisions {
        d.push(
            Diagnostic::new(uspan, format!("column `{symbol_s}` cannot be in `{utext}`"))
                .expected(format!("{} for `{symbol_s}`", dimension_name(want)))
                .found(format!("`{utext}`")),
        );
        return (symbol, None);
    }
    let range = match range_tok {
        None => None,
        Some(rt) => Some(heading_range(src, rt, &symbol_s, want, full_span, d).ok_or(())),
    };
    if let Some(Err(())) = range {
        return (symbol, None);
    }
    (
        symbol,
        Some((
            Column {
                symbol: symbol_s,
                unit,
                heading: full.to_string(),
                range: range.and_then(Result::ok),
                readout: Readout {
                    per_div: None,
                    divisions,
                    peak_to_peak,
                },
                span: full_span,
            },
            factor,
        )),
    )
}

/// Voltage symbols, which may be read peak to peak (`VRpp`) or in divisions (`VR/div`).
pub(super) const VOLTAGE_SYMBOLS: &[&str] = &["Vs", "VR", "VC", "VL", "V", "VT"];

/// A column symbol given twice in one table (`at` the second heading, `first` the first):
/// said as a mix when one heading reads it peak to peak and the other as RMS.
pub(super) fn column_twice(src: &str, s: &str, at: Span, first: Span) -> Diagnostic {
    let (fl, fc) = line_col(src, first.start);
    let heading = |sp: Span| src.get(sp.start..sp.end).unwrap_or("");
    let pp = |h: &str| {
        h.split(['/', '(', '@'])
            .next()
            .is_some_and(|x| x.trim().ends_with("pp"))
    };
    let (one, two) = (heading(first), heading(at));
    let dg = if pp(one) != pp(two) {
        Diagnostic::new(
            at,
            format!("column `{s}` is read both as RMS and peak to peak in one block"),
        )
        .expected(format!(
            "`{s}` once: `{s}/…` for an RMS reading or `{s}pp/…` for a peak-to-peak one"
        ))
        .found(format!("`{one}` and `{two}`"))
    } else {
        Diagnostic::new(at, format!("column `{s}` appears twice"))
            .expected("each column once")
            .found(format!("a second `{s}`"))
    };
    dg.help(format!("first at line {fl}, column {fc}"))
}

/// The range a heading names after `@` (token `rt`), in the column's unit `want`.
fn heading_range(
    src: &str,
    rt: CellRange,
    sym: &str,
    want: Unit,
    heading: Span,
    d: &mut Vec<Diagnostic>,
) -> Option<Range> {
    let rtext = &src[rt.start..rt.end];
    if rtext.is_empty() {
        d.push(
            Diagnostic::new(
                heading,
                format!("`@` in the heading of `{sym}` names no range"),
            )
            .expected(format!(
                "a range after `@`, e.g. `{sym}/{}@2{}`",
                want.symbol(),
                want.symbol()
            ))
            .found(format!("`{}`", &src[heading.start..heading.end])),
        );
        return None;
    }
    let rspan = Span::new(rt.start, rt.end);
    let at = |e: &quantity::QuantityError| {
        let s = rt.start + e.offset.min(rtext.len());
        Span::new(s, (s + e.len.max(1)).min(rt.end).max(s))
    };
    match range_value(rtext, rspan, at) {
        Err(dg) => {
            d.push(dg);
            None
        }
        Ok(q) if q.unit != want => {
            d.push(
                Diagnostic::new(
                    rspan,
                    format!(
                        "range `{rtext}` is not in {} as column `{sym}` is",
                        dimension_name(want)
                    ),
                )
                .expected(format!("a range in {} for `{sym}`", dimension_name(want)))
                .found(format!("`{rtext}`")),
            );
            None
        }
        Ok(q) => Some(Range {
            full_scale: q,
            span: rspan,
        }),
    }
}

/// The plausible range of each column's readings (SI): (symbol, smallest nonzero magnitude,
/// largest magnitude, both as text, what the column is, why). A reading outside is a typo or
/// a unit slip, and inside these every reduction stays well within f64 (products of four
/// extremes stay between 1e-100 and 1e100). The limits are common practice for bench AC work
/// with a signal generator, a true-RMS meter and a display, set wide.
const RANGES: &[(&str, f64, f64, &str, &str, &str, &str)] = &[
    ("f", 1e-3, 1e10, "1 mHz", "10 GHz", "a frequency",
     "below 1 mHz one period lasts over a quarter of an hour and no RMS meter settles; above 10 GHz parts are no longer lumped"),
    ("Vs", 1e-12, 1e6, "1 pV", "1 MV", "a voltage", VOLT_WHY),
    ("VR", 1e-12, 1e6, "1 pV", "1 MV", "a voltage", VOLT_WHY),
    ("VC", 1e-12, 1e6, "1 pV", "1 MV", "a voltage", VOLT_WHY),
    ("VL", 1e-12, 1e6, "1 pV", "1 MV", "a voltage", VOLT_WHY),
    ("V", 1e-12, 1e6, "1 pV", "1 MV", "a voltage", VOLT_WHY),
    ("VT", 1e-12, 1e6, "1 pV", "1 MV", "a voltage", VOLT_WHY),
    ("I", 1e-12, 1e4, "1 pA", "10 kA", "a current",
     "no bench meter resolves less than a picoampere, and 10 kA is beyond any bench source"),
    ("IR", 1e-12, 1e4, "1 pA", "10 kA", "a current", AMP_WHY),
    ("IC", 1e-12, 1e4, "1 pA", "10 kA", "a current", AMP_WHY),
    ("IL", 1e-12, 1e4, "1 pA", "10 kA", "a current", AMP_WHY),
    ("phi", 0.0, 2.0 * std::f64::consts::PI, "", "360°", "a phase angle",
     "one turn is the most a phase can differ by"),
    ("shift", 1e-6, 1e3, "1e-6 div", "1000 div", "a trace shift",
     "a display has tens of divisions, read to a tenth or so"),
    ("period", 1e-3, 1e3, "0.001 div", "1000 div", "a trace period",
     "a display has tens of divisions, read to a tenth or so"),
];
const AMP_WHY: &str =
    "no bench meter resolves less than a picoampere, and 10 kA is beyond any bench source";
const VOLT_WHY: &str =
    "no bench voltmeter resolves less than a picovolt, and a megavolt is beyond any bench source";

/// A reading outside its column's plausible range ([`RANGES`]), said at the cell. Zero passes:
/// the networks refuse a zero where it matters, with their own reasons.
fn out_of_range(sym: &str, v: f64, text: &str, at: Span) -> Option<Diagnostic> {
    let &(_, lo, hi, lo_t, hi_t, what, why) = RANGES.iter().find(|r| r.0 == sym)?;
    let m = v.abs();
    let (msg, expected) = if m > hi {
        (
            format!("`{text}` is too large to compute with: {what} must be at most {hi_t}"),
            format!("{what} of at most {hi_t}"),
        )
    } else if m != 0.0 && m < lo {
        (
            format!("`{text}` is too small to compute with: {what} must be at least {lo_t}"),
            format!("{what} of at least {lo_t}"),
        )
    } else {
        return None;
    };
    Some(
        Diagnostic::new(at, format!("column `{sym}`: {msg}"))
            .expected(expected)
            .found(format!("`{text}`"))
            .help(format!(
                "the limits are magnitudes; {why} (common practice)"
            )),
    )
}

/// A block's table as read.
#[derive(Default)]
pub(super) struct Table {
    pub(super) columns: Vec<Column>,
    pub(super) rows: Vec<Row>,
    /// Each recognised column symbol once, with its heading's span, in order.
    pub(super) symbols: Vec<(String, Span)>,
    /// The heading row, when the table has one.
    pub(super) heading: Option<Span>,
    /// The heading of the text column `unit` (a lot's serials), when there is one.
    pub(super) unit_heading: Option<Span>,
    /// Each row's serial (in row order) when there is a `unit` column.
    pub(super) serials: Vec<Named>,
}

/// Heading of the text column that holds each row's serial in a lot block.
pub const UNIT_COLUMN: &str = "unit";

/// The heading row as the rows below it need it.
struct Heading {
    pipe: bool,
    /// Per heading cell: (symbol, SI unit, prefix factor) when the heading is valid.
    columns: Vec<Option<(String, Unit, f64)>>,
    /// Index of the `unit` heading cell.
    unit_col: Option<usize>,
}

/// The table in `lines` (after the `---` line): the first non-blank line is the heading,
/// every other non-blank line a row.
pub(super) fn parse_table(src: &str, lines: &[Line], d: &mut Vec<Diagnostic>) -> Table {
    let mut table = Table {
        columns: Vec::new(),
        rows: Vec::new(),
        symbols: Vec::new(),
        heading: None,
        unit_heading: None,
        serials: Vec::new(),
    };
    let mut heading: Option<Heading> = None;
    let first_diag = d.len();
    for l in lines {
        let cend = content_end(src, l);
        if src[l.start..cend].trim().is_empty() {
            continue;
        }
        match &heading {
            None => heading = Some(heading_row(src, l, cend, &mut table, d)),
            Some(h) => {
                if let Some((row, serial)) = table_row(src, l, cend, h, d) {
                    table.rows.push(row);
                    table.serials.extend(serial);
                }
            }
        }
    }
    one_decimal_comma_report(src, d, first_diag);
    table
}

/// A table pasted with decimal commas gives one error, at its first such cell, with a count,
/// not one per cell.
fn one_decimal_comma_report(src: &str, d: &mut Vec<Diagnostic>, from: usize) {
    let is_comma = |dg: &Diagnostic| {
        dg.message
            .ends_with("decimal comma is not accepted; use a decimal point")
    };
    let hits: Vec<usize> = (from..d.len()).filter(|&i| is_comma(&d[i])).collect();
    if hits.len() < 2 {
        return;
    }
    let last = d[hits[hits.len() - 1]].span.start;
    let (last_line, _) = crate::diag::line_col(src, last);
    let n = hits.len();
    for &i in hits[1..].iter().rev() {
        d.remove(i);
    }
    let first = &mut d[hits[0]];
    first.message = format!(
        "{} ({n} cells of this table, to line {last_line})",
        first.message
    );
    first.help = Some(format!(
        "replace the decimal comma by a point in all {n} cells (a spreadsheet's export setting, \
         or search and replace `,` by `.` in the table)"
    ));
}

/// The heading row: its columns and symbols go into `table`.
fn heading_row(
    src: &str,
    l: &Line,
    cend: usize,
    table: &mut Table,
    d: &mut Vec<Diagnostic>,
) -> Heading {
    let pipe = src[l.start..cend].contains('|');
    let toks = if pipe {
        pipe_cells(src, l.start, cend)
    } else {
        merge_headings(src, ws_tokens(src, l.start, cend))
    };
    let hspan = trim_tok(src, l.start, cend);
    table.heading = Some(Span::new(hspan.start, hspan.end));
    let mut columns = Vec::with_capacity(toks.len());
    let mut unit_col = None;
    for (i, tok) in toks.iter().enumerate() {
        if &src[tok.start..tok.end] == UNIT_COLUMN {
            let at = Span::new(tok.start, tok.end);
            match table.unit_heading {
                Some(first) => d.push(
                    Diagnostic::new(at, "column `unit` appears twice")
                        .expected("one `unit` column (the serial of each row)")
                        .found("a second `unit`")
                        .help({
                            let (fl, fc) = line_col(src, first.start);
                            format!("first at line {fl}, column {fc}")
                        }),
                ),
                None => {
                    table.unit_heading = Some(at);
                    unit_col = Some(i);
                }
            }
            columns.push(None);
            continue;
        }
        if tok.start == tok.end {
            d.push(
                Diagnostic::new(
                    Span::new(tok.start, (tok.start + 1).min(cend)),
                    "empty column heading",
                )
                .expected("`symbol/unit`, e.g. `f/Hz`"),
            );
            columns.push(None);
            continue;
        }
        let (sym, col) = parse_heading(src, *tok, d);
        if let Some(s) = &sym {
            if let Some((_, first)) = table.symbols.iter().find(|(x, _)| x == s) {
                let at = Span::new(tok.start, tok.end);
                d.push(column_twice(src, s, at, *first));
            } else {
                table
                    .symbols
                    .push((s.clone(), Span::new(tok.start, tok.end)));
            }
        }
        match col {
            Some((c, f)) => {
                columns.push(Some((c.symbol.clone(), c.unit, f)));
                table.columns.push(c);
            }
            None => columns.push(None),
        }
    }
    Heading {
        pipe,
        columns,
        unit_col,
    }
}

/// One row: its cells in their columns' units, and its serial when the table has a `unit`
/// column. None for a separator row or a row reported whole (a cell count that does not match
/// the heading, an unknown unit word, an empty serial).
fn table_row(
    src: &str,
    l: &Line,
    cend: usize,
    h: &Heading,
    d: &mut Vec<Diagnostic>,
) -> Option<(Row, Option<Named>)> {
    let (pipe, ncols) = (h.pipe, h.columns.len());
    let cells_tok = if pipe {
        pipe_cells(src, l.start, cend)
    } else {
        merge_units(src, ws_tokens(src, l.start, cend))
    };
    if pipe && is_separator_row(src, &cells_tok) {
        return None;
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
                return None;
            }
        }
    }
    if cells_tok.len() > ncols && !pipe {
        if let Some(dg) = digit_grouping(src, &cells_tok) {
            d.push(dg);
            return None;
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
        return None;
    }
    let serial = match h.unit_col.and_then(|i| cells_tok.get(i)) {
        Some(t) if t.start == t.end => {
            d.push(
                Diagnostic::new(
                    Span::new(t.start, (t.start + 1).min(cend)),
                    "empty serial in column `unit`",
                )
                .expected("the serial of the unit read in this row, e.g. `A07`")
                .found("nothing"),
            );
            return None;
        }
        Some(t) => Some(Named {
            name: src[t.start..t.end].to_string(),
            span: Span::new(t.start, t.end),
        }),
        None => None,
    };
    let mut cells = Vec::with_capacity(ncols);
    for (tok, col) in cells_tok.iter().zip(&h.columns) {
        if let Some((sym, unit, factor)) = col {
            cells.extend(cell(src, *tok, cend, sym, *unit, *factor, d));
        }
    }
    Some((
        Row {
            cells,
            span: row_span,
        },
        serial,
    ))
}

/// `1 000` in a whitespace table: a group of one to three digits followed by one of three
/// digits reads as digit grouping with a space (ISO 80000-1 allows it in print, not here),
/// which the row's cell count would otherwise report at its last cell.
fn digit_grouping(src: &str, toks: &[CellRange]) -> Option<Diagnostic> {
    let digits = |t: &str| !t.is_empty() && t.chars().all(|c| c.is_ascii_digit());
    (1..toks.len()).find_map(|j| {
        let (a, b) = (toks[j - 1], toks[j]);
        let (ta, tb) = (&src[a.start..a.end], &src[b.start..b.end]);
        let lead = ta.strip_prefix(['-', '+']).unwrap_or(ta);
        let int_b = tb.split('.').next().unwrap_or("");
        let grouped = digits(lead) && lead.len() <= 3 && int_b.len() == 3 && digits(int_b);
        grouped.then(|| {
            Diagnostic::new(
                Span::new(a.start, b.end),
                format!("`{ta} {tb}` looks like one number with its digits grouped by a space"),
            )
            .expected("one number per cell, written without spaces")
            .found(format!("`{ta} {tb}`"))
            .help(format!("write `{ta}{tb}`"))
        })
    })
}

/// One cell in column `sym` (heading unit `unit` times `factor`); None when it is empty or
/// not a number. A reading out of range is reported and kept.
pub(super) fn cell(
    src: &str,
    tok: CellRange,
    cend: usize,
    sym: &str,
    unit: Unit,
    factor: f64,
    d: &mut Vec<Diagnostic>,
) -> Option<Cell> {
    let text = &src[tok.start..tok.end];
    let cspan = Span::new(tok.start, tok.end);
    if text.is_empty() {
        d.push(
            Diagnostic::new(
                Span::new(tok.start, (tok.start + 1).min(cend)),
                format!("empty cell in column `{sym}`"),
            )
            .expected("a number")
            .found("nothing"),
        );
        return None;
    }
    match parse_in_unit(text, unit, factor) {
        Ok(q) => {
            let problem = match sym {
                "f" if q.value <= 0.0 => Some("a frequency must be greater than zero"),
                "period" if q.value <= 0.0 => Some("a period must be greater than zero"),
                "Vs" | "VR" | "VC" | "VL" | "V" | "VT" | "I" | "IR" | "IC" | "IL"
                    if q.value < 0.0 =>
                {
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
            Some(Cell {
                value: q.value,
                text: text.to_string(),
                span: cspan,
            })
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
            None
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn table_cells() {
        let src = "| f/Hz |  VR (mV) | |\n";
        let cells = pipe_cells(src, 0, src.len() - 1);
        let texts: Vec<&str> = cells.iter().map(|t| &src[t.start..t.end]).collect();
        assert_eq!(texts, ["f/Hz", "VR (mV)", ""]);
        let src = "f / Hz\tVR (mV)  VC/V";
        let toks = merge_headings(src, ws_tokens(src, 0, src.len()));
        let texts: Vec<&str> = toks.iter().map(|t| &src[t.start..t.end]).collect();
        assert_eq!(texts, ["f / Hz", "VR (mV)", "VC/V"]);
        let src = "1.5 kHz  12 mV 3  x V -2 V";
        let toks = merge_units(src, ws_tokens(src, 0, src.len()));
        let texts: Vec<&str> = toks.iter().map(|t| &src[t.start..t.end]).collect();
        assert_eq!(texts, ["1.5 kHz", "12 mV", "3", "x", "V", "-2 V"]);
        let src = "|:---|---:|";
        assert!(is_separator_row(src, &pipe_cells(src, 0, src.len())));
    }

    #[test]
    fn heading_ranges() {
        let src = "f/Hz  VR/V@2 V  VC/V @20V  Vs/V@ 200mV";
        let toks = merge_headings(src, ws_tokens(src, 0, src.len()));
        let texts: Vec<&str> = toks.iter().map(|t| &src[t.start..t.end]).collect();
        assert_eq!(texts, ["f/Hz", "VR/V@2 V", "VC/V @20V", "Vs/V@ 200mV"]);
        let mut d = Vec::new();
        let ranges: Vec<Option<f64>> = toks
            .iter()
            .map(|t| parse_heading(src, *t, &mut d).1.expect("valid"))
            .map(|(c, _)| c.range.map(|r| r.full_scale.value))
            .collect();
        assert!(d.is_empty(), "{d:?}");
        assert_eq!(ranges, [None, Some(2.0), Some(20.0), Some(0.2)]);
        let src = "VR/V@2mA";
        let tok = CellRange {
            start: 0,
            end: src.len(),
        };
        assert!(parse_heading(src, tok, &mut d).1.is_none());
        assert_eq!((d.len(), d[0].span.start), (1, 5), "{d:?}");
    }
}
