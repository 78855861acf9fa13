//! Readings tables: cells of pipe and whitespace tables, column headings, plausible ranges.

use super::words::{list, unknown};
use super::{line_text, symbol_unit, Column, Line, SYMBOLS};
use crate::diag::{Diagnostic, Span};
use crate::quantity::{self, dimension_name, parse_unit};

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

pub(super) fn trim_tok(src: &str, a: usize, b: usize) -> CellRange {
    let t = &src[a..b];
    let lead = t.len() - t.trim_start().len();
    let s = a + lead;
    CellRange {
        start: s,
        end: s + t.trim().len(),
    }
}

pub(super) fn pipe_cells(src: &str, start: usize, end: usize) -> Vec<CellRange> {
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

pub(super) fn ws_tokens(src: &str, start: usize, end: usize) -> Vec<CellRange> {
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
pub(super) fn merge_headings(src: &str, toks: Vec<CellRange>) -> Vec<CellRange> {
    let mut out: Vec<CellRange> = Vec::new();
    for t in toks {
        let text = &src[t.start..t.end];
        let joins = out.last().is_some_and(|p| {
            let prev = &src[p.start..p.end];
            text.starts_with('(')
                || text.starts_with('/')
                || (prev.ends_with('/') && !prev.contains('('))
        });
        match out.last_mut() {
            Some(p) if joins => p.end = t.end,
            _ => out.push(t),
        }
    }
    out
}

/// Whitespace rows: `12 mV` is one cell (a unit token joins the number before it).
pub(super) fn merge_units(src: &str, toks: Vec<CellRange>) -> Vec<CellRange> {
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

pub(super) fn is_separator_row(src: &str, cells: &[CellRange]) -> bool {
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
    let sym = &src[sym_tok.start..sym_tok.end];
    let sym_span = Span::new(sym_tok.start, sym_tok.end);
    let known = SYMBOLS.contains(&sym);
    if !known {
        let at = if sym.is_empty() { span } else { sym_span };
        let expected = format!("one of {} (case-sensitive)", list(SYMBOLS));
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
    if unit != want {
        d.push(
            Diagnostic::new(uspan, format!("column `{symbol_s}` cannot be in `{utext}`"))
                .expected(format!("{} for `{symbol_s}`", dimension_name(want)))
                .found(format!("`{utext}`")),
        );
        return (symbol, None);
    }
    (
        symbol,
        Some((
            Column {
                symbol: symbol_s,
                unit,
                heading: text.to_string(),
                span,
            },
            factor,
        )),
    )
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
    ("I", 1e-12, 1e4, "1 pA", "10 kA", "a current",
     "no bench meter resolves less than a picoampere, and 10 kA is beyond any bench source"),
    ("phi", 0.0, 2.0 * std::f64::consts::PI, "", "360°", "a phase angle",
     "one turn is the most a phase can differ by"),
    ("shift", 1e-6, 1e3, "1e-6 div", "1000 div", "a trace shift",
     "a display has tens of divisions, read to a tenth or so"),
    ("period", 1e-3, 1e3, "0.001 div", "1000 div", "a trace period",
     "a display has tens of divisions, read to a tenth or so"),
];
const VOLT_WHY: &str =
    "no bench voltmeter resolves less than a picovolt, and a megavolt is beyond any bench source";

/// A reading outside its column's plausible range ([`RANGES`]), said at the cell. Zero passes:
/// the networks refuse a zero where it matters, with their own reasons.
pub(super) fn out_of_range(sym: &str, v: f64, text: &str, at: Span) -> Option<Diagnostic> {
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
}
