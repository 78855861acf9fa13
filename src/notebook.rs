//! The notebook: front matter, prose and readings blocks, with a span on every value.
//! Parsing only; no maths and no typst here.
//!
//! Beyond FORMAT.md this parser accepts: `coverage` as a number (`0.95`) or a percentage
//! (`95%`); a tolerance with a leading `±`; `by` on a part for both `measured` and `dcr`, or
//! `measured_by` / `dcr_by`, or the map form `dcr: {value: 38 ohm, by: dmm}`; accuracy counts
//! written `+ 3`, `+ 3 counts` or `+ 3 digits`; whitespace tables with a space before a unit
//! (`1.5 kHz`); headings `f/Hz`, `f / Hz`, `VR (mV)`. A bare `source` or `bandwidth` number
//! is in V or Hz; part values need their unit. Readings blocks must sit at the left margin.
//! Every problem in a notebook is reported in one pass; none panics.

use crate::diag::{line_col, Diagnostic, Span};
use crate::quantity::{
    self, dimension_name, parse_in_unit, parse_quantity, parse_unit, Quantity, QuantityError, Unit,
};
use chrono::NaiveDate;
use pulldown_cmark::{CodeBlockKind, Event, Options, Parser, Tag};
use serde_yaml::Value;
use std::collections::{BTreeMap, BTreeSet};

#[derive(Debug, Clone)]
pub struct Notebook {
    /// The source as parsed (BOM removed); every `Span` indexes into it.
    pub source: String,
    pub front: FrontMatter,
    /// Byte range of the front matter YAML text (between the fences).
    pub front_span: Span,
    pub items: Vec<Item>,
}

#[derive(Debug, Clone)]
pub enum Item {
    /// A run of Markdown between readings blocks, verbatim.
    Prose {
        text: String,
        span: Span,
    },
    Readings(ReadingsBlock),
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Decision {
    Simple,
    Guarded,
}

#[derive(Debug, Clone)]
pub struct FrontMatter {
    pub record: String,
    pub title: String,
    pub date: NaiveDate,
    pub operator: String,
    pub lab: Option<String>,
    pub project: Option<String>,
    pub lot: Option<String>,
    pub environment: Option<String>,
    /// Coverage probability, default 0.9545.
    pub coverage: f64,
    pub decision: Decision,
    pub instruments: BTreeMap<String, Instrument>,
    pub parts: BTreeMap<String, Part>,
    pub template: Option<(String, Span)>,
    pub signoff: Option<Signoff>,
}

#[derive(Debug, Clone, PartialEq)]
pub enum Accuracy {
    /// ± pct % of reading (fraction, e.g. 0.005) + counts × resolution.
    Relative { fraction: f64, counts: f64 },
    /// ± an absolute half-width in the reading's unit.
    Absolute(Quantity),
}

#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Distribution {
    Rectangular,
    /// Half-width given at coverage factor k (u = a / k).
    Normal {
        k: f64,
    },
}

#[derive(Debug, Clone)]
pub struct Instrument {
    pub name: String,
    pub what: Option<String>,
    pub accuracy: Option<Accuracy>,
    pub resolution: Option<Quantity>,
    pub bandwidth: Option<f64>,
    pub calibrated: Option<NaiveDate>,
    pub due: Option<NaiveDate>,
    /// Half-width of reading a scale (e.g. 0.05 div).
    pub reading: Option<Quantity>,
    pub distribution: Distribution,
    pub span: Span,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PartKind {
    Resistor,
    Capacitor,
    Inductor,
}

#[derive(Debug, Clone, PartialEq)]
pub enum Tolerance {
    /// Symmetric relative half-width (fraction).
    Relative(f64),
    /// Symmetric absolute half-width (SI, part's unit).
    Absolute(f64),
    /// IEC 60062 letter with its relative half-width (fraction).
    Code(char, f64),
}

#[derive(Debug, Clone)]
pub struct Part {
    pub name: String,
    pub kind: PartKind,
    pub nominal: Option<Quantity>,
    pub tolerance: Option<Tolerance>,
    pub measured: Option<Quantity>,
    pub measured_by: Option<String>,
    pub dcr: Option<Quantity>,
    pub dcr_by: Option<String>,
    pub rating: Option<Quantity>,
    pub span: Span,
}

#[derive(Debug, Clone)]
pub struct Signoff {
    pub by: String,
    pub on: String,
    pub digest: String,
    /// Fingerprint of the signing key (`SHA256:…`), when signed with a key.
    pub key: Option<String>,
    /// Armored SSH signature (sshsig, namespace `benchrec`) over [`crate::signoff::message`].
    pub signature: Option<String>,
    /// The signer's reason for signing a record with warnings or a verdict other than pass.
    pub accepted: Option<String>,
    pub span: Span,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Network {
    RC,
    RL,
    RLC,
    Z,
}

impl Network {
    pub fn name(self) -> &'static str {
        match self {
            Network::RC => "RC",
            Network::RL => "RL",
            Network::RLC => "RLC",
            Network::Z => "Z",
        }
    }
}

#[derive(Debug, Clone)]
pub struct Named {
    pub name: String,
    pub span: Span,
}

#[derive(Debug, Clone)]
pub struct Column {
    /// Case-sensitive symbol: f, Vs, VR, VC, VL, V, I, phi, shift, period.
    pub symbol: String,
    pub unit: Unit,
    /// Heading exactly as written (e.g. `f/Hz`).
    pub heading: String,
    pub span: Span,
}

#[derive(Debug, Clone)]
pub struct Cell {
    /// SI value in the column's unit (rad for angles).
    pub value: f64,
    /// Text as entered.
    pub text: String,
    pub span: Span,
}

#[derive(Debug, Clone)]
pub struct Row {
    pub cells: Vec<Cell>,
    pub span: Span,
}

#[derive(Debug, Clone)]
pub struct ReadingsBlock {
    pub id: String,
    pub id_span: Span,
    pub network: Network,
    pub parts: Vec<Named>,
    pub meter: Option<Named>,
    pub phase: Option<Named>,
    pub counter: Option<Named>,
    pub note: Option<String>,
    /// Stated source level (V).
    pub source: Option<f64>,
    pub columns: Vec<Column>,
    pub rows: Vec<Row>,
    /// The whole fenced block, fences included.
    pub span: Span,
    /// The block's body text (between the fences), verbatim.
    pub body: String,
}

impl ReadingsBlock {
    /// Index of a column by symbol.
    pub fn col(&self, symbol: &str) -> Option<usize> {
        self.columns.iter().position(|c| c.symbol == symbol)
    }
}

// ---------------------------------------------------------------------------------------------
// Limits. Inputs beyond them are refused with a diagnostic, never a hang.

/// Largest notebook accepted (bytes).
pub const MAX_SOURCE: usize = 16 << 20;
/// Largest front matter (bytes).
pub const MAX_FRONT: usize = 64 << 10;
/// Largest readings block header (bytes).
pub const MAX_HEADER: usize = 16 << 10;
/// Deepest `[`/`{` nesting let through to the YAML parser (its time grows with depth²).
const MAX_FLOW_DEPTH: usize = 32;

const FRONT_KEYS: &[&str] = &[
    "record",
    "title",
    "date",
    "operator",
    "lab",
    "project",
    "lot",
    "environment",
    "coverage",
    "decision",
    "instruments",
    "parts",
    "template",
    "signoff",
];
const INSTRUMENT_KEYS: &[&str] = &[
    "what",
    "accuracy",
    "resolution",
    "bandwidth",
    "calibrated",
    "due",
    "reading",
    "distribution",
    "k",
];
const PART_KEYS: &[&str] = &[
    "kind",
    "nominal",
    "tolerance",
    "measured",
    "by",
    "measured_by",
    "dcr",
    "dcr_by",
    "rating",
];
const MEASURED_KEYS: &[&str] = &["value", "by"];
const SIGNOFF_KEYS: &[&str] = &["by", "on", "digest", "key", "signature", "accepted"];
const SIGNOFF_REQUIRED: &[&str] = &["by", "on", "digest"];
const HEADER_KEYS: &[&str] = &[
    "id", "network", "parts", "meter", "phase", "counter", "note", "source",
];
/// Column symbols (case-sensitive).
pub const SYMBOLS: &[&str] = &[
    "f", "Vs", "VR", "VC", "VL", "V", "I", "phi", "shift", "period",
];

/// IEC 60062:2016 Table 8 (from memory): tolerance letter → relative half-width.
pub const IEC_60062_CODES: &[(char, f64)] = &[
    ('B', 0.001),
    ('C', 0.0025),
    ('D', 0.005),
    ('F', 0.01),
    ('G', 0.02),
    ('J', 0.05),
    ('K', 0.10),
    ('M', 0.20),
];

/// SI unit of a column symbol.
pub fn symbol_unit(symbol: &str) -> Option<Unit> {
    Some(match symbol {
        "f" => Unit::Hz,
        "Vs" | "VR" | "VC" | "VL" | "V" => Unit::V,
        "I" => Unit::A,
        "phi" => Unit::Rad,
        "shift" | "period" => Unit::Div,
        _ => return None,
    })
}

/// Columns a network cannot do without.
pub fn required_columns(n: Network) -> &'static [&'static str] {
    match n {
        Network::RC => &["f", "VR", "VC"],
        Network::RL => &["f", "Vs", "VR", "VL"],
        Network::RLC => &["f", "VR"],
        Network::Z => &["V", "I", "phi"],
    }
}

// ---------------------------------------------------------------------------------------------
// Lines.

#[derive(Debug, Clone, Copy)]
struct Line {
    start: usize,
    /// End of the content, before `\r\n` or `\n`.
    end: usize,
    /// Start of the next line.
    next: usize,
}

fn split_lines(src: &str, from: usize, to: usize) -> Vec<Line> {
    let mut out = Vec::new();
    let to = to.min(src.len());
    let mut start = from.min(to);
    let bytes = src.as_bytes();
    while start < to {
        let nl = src[start..to].find('\n').map(|i| start + i);
        let (mut end, next) = match nl {
            Some(i) => (i, i + 1),
            None => (to, to),
        };
        if end > start && bytes[end - 1] == b'\r' {
            end -= 1;
        }
        out.push(Line { start, end, next });
        start = next;
    }
    out
}

fn line_text<'a>(src: &'a str, l: &Line) -> &'a str {
    &src[l.start..l.end]
}

fn short(s: &str) -> String {
    let t = s.trim();
    if t.chars().count() > 40 {
        let cut: String = t.chars().take(40).collect();
        format!("`{cut}…`")
    } else {
        format!("`{t}`")
    }
}

fn list(keys: &[&str]) -> String {
    keys.iter()
        .map(|k| format!("`{k}`"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// Levenshtein distance over chars (short strings only).
fn edit_distance(a: &str, b: &str) -> usize {
    let a: Vec<char> = a.chars().collect();
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.iter().enumerate() {
        let mut cur = vec![i + 1; b.len() + 1];
        for (j, cb) in b.iter().enumerate() {
            let sub = prev[j] + usize::from(ca != cb);
            cur[j + 1] = sub.min(prev[j + 1] + 1).min(cur[j] + 1);
        }
        prev = cur;
    }
    prev[b.len()]
}

/// "did you mean …?" for a near miss among `known`.
fn suggest(word: &str, known: &[&str]) -> Option<String> {
    if word.chars().count() > 64 {
        return None;
    }
    let exact_ci = known.iter().find(|k| k.eq_ignore_ascii_case(word));
    let best = exact_ci.copied().or_else(|| {
        known
            .iter()
            .map(|k| (edit_distance(word, k), *k))
            .filter(|(d, k)| *d <= 2 && *d < k.chars().count())
            .min_by_key(|(d, _)| *d)
            .map(|(_, k)| k)
    });
    best.map(|k| format!("did you mean `{k}`?"))
}

// ---------------------------------------------------------------------------------------------
// YAML with spans: serde_yaml gives values, this finds where keys and values sit in the text.

#[derive(Debug, Clone, Copy)]
enum Scope {
    /// Lines [from, to) of the YAML text.
    Block(usize, usize),
    /// A flow collection on one line.
    Inline(Span),
}

#[derive(Debug, Clone, Copy)]
struct Found {
    key: Span,
    value: Option<Span>,
    child: Scope,
}

struct Yaml<'a> {
    src: &'a str,
    start: usize,
    end: usize,
    lines: Vec<Line>,
    /// Where to point when nothing better is known.
    anchor: Span,
}

fn kind_name(v: &Value) -> &'static str {
    match v {
        Value::Null => "nothing",
        Value::Bool(_) => "true/false",
        Value::Number(_) => "a number",
        Value::String(_) => "text",
        Value::Sequence(_) => "a list",
        Value::Mapping(_) => "a mapping",
        Value::Tagged(_) => "a tagged value",
    }
}

/// Removes serde_yaml's " at line L column C" (we print our own location).
fn clean_yaml_message(msg: &str) -> String {
    let mut out = String::new();
    let mut rest = msg;
    while let Some(i) = rest.find(" at line ") {
        out.push_str(&rest[..i]);
        let tail = &rest[i + " at line ".len()..];
        let d1 = tail
            .find(|c: char| !c.is_ascii_digit())
            .unwrap_or(tail.len());
        let tail2 = &tail[d1..];
        if d1 > 0 && tail2.starts_with(" column ") {
            let t3 = &tail2[" column ".len()..];
            let d2 = t3.find(|c: char| !c.is_ascii_digit()).unwrap_or(t3.len());
            rest = &t3[d2..];
        } else {
            out.push_str(" at line ");
            rest = tail;
        }
    }
    out.push_str(rest);
    out
}

/// From a raw serde_yaml message, the bracket and (line, column) of a flow collection that
/// was never closed: "... while parsing a flow sequence at line L column C".
fn unclosed_flow(raw: &str) -> Option<(char, usize, usize)> {
    for (phrase, open) in [
        ("while parsing a flow sequence at line ", '['),
        ("while parsing a flow mapping at line ", '{'),
    ] {
        let Some(i) = raw.find(phrase) else { continue };
        let tail = &raw[i + phrase.len()..];
        let (line, rest) = tail.split_once(" column ")?;
        let col: String = rest.chars().take_while(|c| c.is_ascii_digit()).collect();
        return Some((open, line.parse().ok()?, col.parse().ok()?));
    }
    None
}

/// Deepest nesting of flow brackets outside quotes and comments; returns (depth, offset).
fn flow_depth(text: &str) -> (usize, usize) {
    let mut depth = 0usize;
    let mut max = (0usize, 0usize);
    let mut quote: Option<char> = None;
    let mut prev = '\n';
    let mut in_comment = false;
    for (i, c) in text.char_indices() {
        if c == '\n' {
            in_comment = false;
            quote = None;
        } else if in_comment {
        } else if let Some(q) = quote {
            if c == q {
                quote = None;
            }
        } else {
            match c {
                '#' if prev.is_whitespace() => in_comment = true,
                '"' | '\'' if matches!(prev, ' ' | '\t' | '[' | '{' | ',' | ':' | '\n') => {
                    quote = Some(c)
                }
                '[' | '{' => {
                    depth += 1;
                    if depth > max.0 {
                        max = (depth, i);
                    }
                }
                ']' | '}' => depth = depth.saturating_sub(1),
                _ => {}
            }
        }
        prev = c;
    }
    max
}

impl<'a> Yaml<'a> {
    fn new(src: &'a str, start: usize, end: usize, anchor: Span) -> Self {
        Yaml {
            src,
            start,
            end,
            lines: split_lines(src, start, end),
            anchor,
        }
    }

    fn text(&self) -> &'a str {
        &self.src[self.start..self.end]
    }

    /// Byte offset of (1-based line, 1-based char column) inside this YAML text.
    fn offset_of(&self, line: usize, col: usize) -> usize {
        match self.lines.get(line.saturating_sub(1)) {
            Some(l) => {
                let t = line_text(self.src, l);
                t.char_indices()
                    .nth(col.saturating_sub(1))
                    .map(|(i, _)| l.start + i)
                    .unwrap_or(l.end)
            }
            None => self.end,
        }
    }

    /// One character at `off` (or an empty span at the end).
    fn char_span(&self, off: usize) -> Span {
        let off = off.min(self.src.len());
        let len = self.src[off..]
            .chars()
            .next()
            .filter(|c| *c != '\n' && *c != '\r')
            .map(|c| c.len_utf8())
            .unwrap_or(0);
        Span::new(off, off + len)
    }

    fn load(&self, what: &str) -> Result<Value, Diagnostic> {
        let text = self.text();
        let (depth, at) = flow_depth(text);
        if depth > MAX_FLOW_DEPTH {
            return Err(Diagnostic::new(
                self.char_span(self.start + at),
                format!("{what} nests `[`/`{{` too deeply"),
            )
            .expected(format!("at most {MAX_FLOW_DEPTH} levels"))
            .found(format!("{depth} levels")));
        }
        serde_yaml::from_str::<Value>(text).map_err(|e| self.yaml_error(&e, what))
    }

    fn yaml_error(&self, e: &serde_yaml::Error, what: &str) -> Diagnostic {
        let raw = e.to_string();
        let msg = clean_yaml_message(&raw);
        // serde_yaml points a duplicate at the mapping; point at the second key instead.
        if let Some(rest) = msg.strip_prefix("duplicate entry with key ") {
            let key = rest.trim().trim_matches('"');
            let hits: Vec<Span> = self
                .lines
                .iter()
                .filter_map(|l| {
                    let t = line_text(self.src, l);
                    let ind = t.len() - t.trim_start().len();
                    match_key(&t[ind..], key).map(|n| Span::new(l.start + ind, l.start + ind + n))
                })
                .collect();
            let span = hits.get(1).copied().unwrap_or(self.anchor);
            let mut d = Diagnostic::new(span, format!("key `{key}` appears twice in the {what}"))
                .expected(format!("each key once in the {what}"))
                .found(format!("a second `{key}`"));
            if let Some(first) = hits.first() {
                let (l, c) = line_col(self.src, first.start);
                d = d.help(format!("first given at line {l}, column {c}"));
            }
            return d;
        }
        let (span, line_has_tab) = match e.location() {
            Some(loc) => {
                let off = self.offset_of(loc.line(), loc.column());
                let tab = self
                    .lines
                    .get(loc.line().saturating_sub(1))
                    .is_some_and(|l| {
                        line_text(self.src, l).starts_with(|c: char| c == ' ' || c == '\t')
                            && line_text(self.src, l).contains('\t')
                    });
                (self.char_span(off), tab)
            }
            None => (self.anchor, false),
        };
        let mut d = Diagnostic::new(span, format!("the {what} is not valid YAML: {msg}"))
            .expected("YAML `key: value` lines, nested keys indented with spaces");
        if let Some((open, line, col)) = unclosed_flow(&raw) {
            // libyaml notices a missing `]` or `}` only where the next line begins; the
            // opening bracket is what the writer has to fix.
            let at = self.char_span(self.offset_of(line, col));
            let close = if open == '[' { ']' } else { '}' };
            return Diagnostic::new(
                at,
                format!("the YAML `{open}` opened here in the {what} is never closed"),
            )
            .expected(format!("`{close}` before the end of the line"))
            .help(format!(
                "close the list with `{close}`, or quote the text if the `{open}` belongs to it"
            ));
        }
        if msg.contains("recursion limit") {
            d = Diagnostic::new(span, format!("the {what} nests too deeply"))
                .expected("a few levels of nested keys and lists");
        } else if msg.contains("repetition limit") {
            let at = self.first_alias().unwrap_or(span);
            d = Diagnostic::new(at, format!("the {what} expands aliases too often"))
                .expected("at most a few thousand values after `*alias` references expand")
                .help("write the values out instead of repeating `*alias` references");
        }
        if line_has_tab || msg.contains("tab") {
            d = d.help("indent YAML with spaces, not tabs");
        } else if msg.contains("mapping values are not allowed") {
            d = d.help("quote text that contains `: `, e.g. title: \"Run 2: sweep\"");
        }
        d
    }

    /// The first `*alias` reference in the text, outside quotes and comments.
    fn first_alias(&self) -> Option<Span> {
        for l in &self.lines {
            let t = line_text(self.src, l);
            let mut quote: Option<char> = None;
            let mut prev = ' ';
            for (i, c) in t.char_indices() {
                match quote {
                    Some(q) if c == q => quote = None,
                    Some(_) => {}
                    None if c == '#' && prev.is_whitespace() => break,
                    None if (c == '"' || c == '\'') && !prev.is_alphanumeric() => quote = Some(c),
                    None if c == '*'
                        && matches!(prev, ' ' | '\t' | '[' | '{' | ',' | ':' | '-')
                        && t[i + 1..].starts_with(|n: char| n.is_alphanumeric() || n == '_') =>
                    {
                        return Some(self.char_span(l.start + i));
                    }
                    None => {}
                }
                prev = c;
            }
        }
        None
    }

    fn root(&self) -> Scope {
        Scope::Block(0, self.lines.len())
    }

    fn meaningful(&self, i: usize) -> bool {
        self.lines.get(i).is_some_and(|l| {
            let t = line_text(self.src, l).trim();
            !t.is_empty() && !t.starts_with('#')
        })
    }

    fn indent(&self, i: usize) -> usize {
        self.lines.get(i).map_or(0, |l| {
            let t = line_text(self.src, l);
            t.len() - t.trim_start_matches(' ').len()
        })
    }

    fn find(&self, scope: Scope, key: &str) -> Option<Found> {
        match scope {
            Scope::Block(from, to) => {
                let to = to.min(self.lines.len());
                let level = (from..to)
                    .find(|&i| self.meaningful(i))
                    .map(|i| self.indent(i))?;
                for i in from..to {
                    if !self.meaningful(i) || self.indent(i) != level {
                        continue;
                    }
                    let l = self.lines[i];
                    let content = &line_text(self.src, &l)[level..];
                    let Some(klen) = match_key(content, key) else {
                        continue;
                    };
                    let key_span = Span::new(l.start + level, l.start + level + klen);
                    let colon = content[klen..]
                        .find(':')
                        .map(|c| klen + c + 1)
                        .unwrap_or(content.len());
                    let value = trimmed_value(self.src, l.start + level + colon, l.end);
                    let child = match value {
                        Some(v) if self.src[v.start..v.end].starts_with(['{', '[']) => {
                            Scope::Inline(v)
                        }
                        _ => {
                            let mut j = i + 1;
                            while j < to {
                                if self.meaningful(j) {
                                    let ind = self.indent(j);
                                    let t = line_text(self.src, &self.lines[j]);
                                    if ind < level || (ind == level && !t[ind..].starts_with('-')) {
                                        break;
                                    }
                                }
                                j += 1;
                            }
                            Scope::Block(i + 1, j)
                        }
                    };
                    return Some(Found {
                        key: key_span,
                        value,
                        child,
                    });
                }
                None
            }
            Scope::Inline(span) => {
                let text = &self.src[span.start..span.end];
                let mut from = 0;
                while let Some(p) = text[from..].find(key).map(|p| p + from) {
                    from = p + key.len();
                    let before_ok = text[..p]
                        .chars()
                        .next_back()
                        .is_none_or(|c| matches!(c, '{' | ',' | ' ' | '\t' | '['));
                    let after = &text[p + key.len()..];
                    let gap = after.len() - after.trim_start().len();
                    if !before_ok || !after[gap..].starts_with(':') {
                        continue;
                    }
                    let vstart = p + key.len() + gap + 1;
                    let vend = text[vstart..]
                        .find([',', '}', ']'])
                        .map(|e| vstart + e)
                        .unwrap_or(text.len());
                    let key_span = Span::new(span.start + p, span.start + p + key.len());
                    let value = trimmed_value(self.src, span.start + vstart, span.start + vend);
                    let child = match value {
                        Some(v) => Scope::Inline(v),
                        None => Scope::Inline(Span::new(span.start + vend, span.start + vend)),
                    };
                    return Some(Found {
                        key: key_span,
                        value,
                        child,
                    });
                }
                None
            }
        }
    }

    /// Deepest match along `path` and whether the whole path was found.
    fn find_path(&self, path: &[&str]) -> (Option<Found>, bool) {
        let mut scope = self.root();
        let mut last = None;
        for (n, k) in path.iter().enumerate() {
            match self.find(scope, k) {
                Some(f) => {
                    scope = f.child;
                    last = Some(f);
                }
                None => return (last, n == path.len()),
            }
        }
        (last, true)
    }

    /// Span of the value at `path` (its key when the value sits on later lines).
    fn value_span(&self, path: &[&str]) -> Span {
        match self.find_path(path) {
            (Some(f), true) => f.value.unwrap_or(f.key),
            (Some(f), false) => f.key,
            (None, _) => self.anchor,
        }
    }

    fn key_span(&self, path: &[&str]) -> Span {
        match self.find_path(path) {
            (Some(f), _) => f.key,
            (None, _) => self.anchor,
        }
    }

    /// Span of the word `name` inside the value at `path` (a list item, say).
    fn item_span(&self, path: &[&str], name: &str) -> Span {
        let (found, all) = self.find_path(path);
        let Some(f) = found.filter(|_| all) else {
            return self.value_span(path);
        };
        let region = match f.child {
            Scope::Inline(s) => s,
            Scope::Block(a, b) => {
                let a = a.min(self.lines.len());
                let b = b.min(self.lines.len());
                if a >= b {
                    f.value.unwrap_or(f.key)
                } else {
                    Span::new(self.lines[a].start, self.lines[b - 1].end)
                }
            }
        };
        find_word(self.src, region, name)
            .or_else(|| f.value.and_then(|v| find_word(self.src, v, name)))
            .unwrap_or(f.value.unwrap_or(f.key))
    }

    /// Maps a quantity error inside `text` (the value at `span`) to a file span.
    fn quantity_span(&self, span: Span, text: &str, e: &QuantityError) -> Span {
        let hay = &self.src[span.start..span.end];
        match hay.find(text) {
            Some(p) if !text.is_empty() => {
                let s = span.start + p + e.offset.min(text.len());
                let end = (s + e.len.max(1)).min(span.start + p + text.len());
                crate::diag::clamp_span(self.src, Span::new(s, end.max(s)))
            }
            _ => span,
        }
    }
}

/// Length of the key token if `content` starts with `key:` (plain or quoted).
fn match_key(content: &str, key: &str) -> Option<usize> {
    let klen = if content.starts_with(key) {
        key.len()
    } else {
        let q = content.chars().next().filter(|c| *c == '"' || *c == '\'')?;
        let inner = &content[1..];
        if inner.starts_with(key) && inner[key.len()..].starts_with(q) {
            key.len() + 2
        } else {
            return None;
        }
    };
    let after = &content[klen..];
    let after = after.trim_start_matches([' ', '\t']);
    let rest = after.strip_prefix(':')?;
    if rest.is_empty() || rest.starts_with([' ', '\t']) {
        Some(klen)
    } else {
        None
    }
}

/// Value text in [from, to), trimmed and without a trailing ` # comment`.
fn trimmed_value(src: &str, from: usize, to: usize) -> Option<Span> {
    let t = &src[from..to];
    let mut cut = t.len();
    let b = t.as_bytes();
    let mut quote = None;
    for (i, c) in t.char_indices() {
        match quote {
            Some(q) if c == q => quote = None,
            Some(_) => {}
            None if (c == '"' || c == '\'') && t[..i].trim().is_empty() => quote = Some(c),
            None if c == '#' && (i == 0 || b[i - 1] == b' ' || b[i - 1] == b'\t') => {
                cut = i;
                break;
            }
            None => {}
        }
    }
    let v = &t[..cut];
    let lead = v.len() - v.trim_start().len();
    let v2 = v.trim();
    if v2.is_empty() {
        None
    } else {
        Some(Span::new(from + lead, from + lead + v2.len()))
    }
}

fn is_word_char(c: char) -> bool {
    c.is_alphanumeric() || c == '_' || c == '-' || c == '.'
}

fn find_word(src: &str, region: Span, word: &str) -> Option<Span> {
    if word.is_empty() {
        return None;
    }
    let hay = &src[region.start..region.end];
    let mut from = 0;
    while let Some(p) = hay[from..].find(word).map(|p| p + from) {
        from = p + word.len();
        let before = hay[..p].chars().next_back();
        let after = hay[p + word.len()..].chars().next();
        if !before.is_some_and(is_word_char) && !after.is_some_and(is_word_char) {
            return Some(Span::new(region.start + p, region.start + p + word.len()));
        }
    }
    None
}

// ---------------------------------------------------------------------------------------------
// Typed extraction from YAML values.

struct Ex<'a, 'b> {
    y: &'a Yaml<'a>,
    d: &'b mut Vec<Diagnostic>,
    /// "front matter" or "block header", for messages.
    what: &'static str,
}

impl Ex<'_, '_> {
    fn err(&mut self, d: Diagnostic) {
        self.d.push(d);
    }

    /// Text of a scalar; numbers keep their spelling from the source.
    fn text_of(&self, path: &[&str], v: &Value) -> Option<String> {
        match v {
            Value::String(s) => Some(s.clone()),
            Value::Number(n) => {
                let span = self.y.value_span(path);
                let raw = self.y.src[span.start..span.end].trim();
                let same = raw
                    .parse::<f64>()
                    .ok()
                    .zip(n.as_f64())
                    .is_some_and(|(a, b)| a == b);
                Some(if same { raw.to_string() } else { n.to_string() })
            }
            Value::Bool(b) => Some(b.to_string()),
            _ => None,
        }
    }

    fn text(&mut self, path: &[&str], v: &Value) -> Option<String> {
        match self.text_of(path, v) {
            Some(s) => Some(s),
            None => {
                let span = self.y.value_span(path);
                self.err(
                    Diagnostic::new(
                        span,
                        format!("`{}` must be text", path.last().unwrap_or(&"")),
                    )
                    .expected("text")
                    .found(kind_name(v)),
                );
                None
            }
        }
    }

    fn nonempty_text(&mut self, path: &[&str], v: &Value) -> Option<String> {
        let s = self.text(path, v)?;
        if s.trim().is_empty() {
            let span = self.y.value_span(path);
            self.err(
                Diagnostic::new(span, format!("`{}` is empty", path.last().unwrap_or(&"")))
                    .expected("some text"),
            );
            return None;
        }
        Some(s)
    }

    fn quantity_error(&mut self, path: &[&str], text: &str, e: QuantityError) {
        let span = self.y.value_span(path);
        let at = self.y.quantity_span(span, text, &e);
        let mut d = Diagnostic::new(
            at,
            format!("`{}`: {}", path.last().unwrap_or(&""), e.message),
        )
        .expected(e.expected)
        .found(format!("`{}`", e.found));
        if let Some(h) = quantity::unit_help(&e.found) {
            d = d.help(h);
        }
        self.err(d);
    }

    /// A quantity that must carry a unit of one of `units` (bare numbers take `bare` if given).
    fn quantity(
        &mut self,
        path: &[&str],
        v: &Value,
        units: &[Unit],
        bare: Option<Unit>,
    ) -> Option<Quantity> {
        let text = self.text(path, v)?;
        let q = match parse_quantity(&text) {
            Ok(q) => q,
            Err(e) => {
                self.quantity_error(path, &text, e);
                return None;
            }
        };
        let key = path.last().copied().unwrap_or("");
        let want = units
            .iter()
            .map(|u| dimension_name(*u))
            .collect::<Vec<_>>()
            .join(" or ");
        if q.unit == Unit::One {
            if let Some(b) = bare {
                return Some(Quantity {
                    value: q.value,
                    unit: b,
                });
            }
            let span = self.y.value_span(path);
            self.err(
                Diagnostic::new(span, format!("`{key}` needs a unit"))
                    .expected(format!("a value in {want}"))
                    .found(format!("`{}`", text.trim()))
                    .help(format!(
                        "write e.g. `{} {}`",
                        text.trim(),
                        units.first().map_or("V", |u| u.symbol())
                    )),
            );
            return None;
        }
        if !units.iter().any(|u| u.same_dimension(q.unit)) {
            let span = self.y.value_span(path);
            self.err(
                Diagnostic::new(span, format!("`{key}` has the wrong unit"))
                    .expected(format!("a value in {want}"))
                    .found(format!("`{}`", text.trim())),
            );
            return None;
        }
        Some(q)
    }

    fn positive(&mut self, path: &[&str], q: Option<Quantity>, what: &str) -> Option<Quantity> {
        let q = q?;
        if q.value > 0.0 {
            return Some(q);
        }
        let span = self.y.value_span(path);
        let text = self.y.src[span.start..span.end].to_string();
        self.err(
            Diagnostic::new(span, format!("{what} must be greater than zero"))
                .expected("a positive value")
                .found(format!("`{text}`")),
        );
        None
    }

    fn date(&mut self, path: &[&str], v: &Value) -> Option<NaiveDate> {
        let s = self.text(path, v)?;
        match parse_iso_date(&s) {
            Some(d) => Some(d),
            None => {
                let span = self.y.value_span(path);
                self.err(
                    Diagnostic::new(
                        span,
                        format!("`{}` is not a date", path.last().unwrap_or(&"")),
                    )
                    .expected("an ISO 8601 date YYYY-MM-DD, e.g. 2026-03-14")
                    .found(short(&s)),
                );
                None
            }
        }
    }

    /// Entries of a mapping with text keys; reports other keys and unknown names.
    fn entries<'v>(
        &mut self,
        path: &[&str],
        v: &'v Value,
        known: Option<&[&str]>,
    ) -> Vec<(String, &'v Value)> {
        let map = match v {
            Value::Mapping(m) => m,
            Value::Null => return Vec::new(),
            other => {
                let span = self.y.value_span(path);
                let what = path
                    .last()
                    .map(|k| format!("`{k}`"))
                    .unwrap_or_else(|| format!("the {}", self.what));
                self.err(
                    Diagnostic::new(
                        span,
                        format!("{what} must be a mapping of `key: value` lines"),
                    )
                    .expected("a mapping")
                    .found(kind_name(other)),
                );
                return Vec::new();
            }
        };
        let mut out = Vec::new();
        for (k, val) in map {
            let name = match k {
                Value::String(s) => s.clone(),
                Value::Number(n) => n.to_string(),
                Value::Bool(b) => b.to_string(),
                other => {
                    let span = self.y.value_span(path);
                    self.err(
                        Diagnostic::new(span, "a key must be a plain name")
                            .expected("a name")
                            .found(kind_name(other)),
                    );
                    continue;
                }
            };
            if let Some(known) = known {
                if !known.contains(&name.as_str()) {
                    let mut p: Vec<&str> = path.to_vec();
                    p.push(&name);
                    let span = self.y.key_span(&p);
                    let mut d = Diagnostic::new(span, format!("unknown key `{name}`"))
                        .expected(format!("one of {}", list(known)))
                        .found(format!("`{name}`"));
                    if let Some(s) = suggest(&name, known) {
                        d = d.help(s);
                    }
                    self.err(d);
                    continue;
                }
            }
            out.push((name, val));
        }
        out
    }

    fn instrument_name(
        &mut self,
        path: &[&str],
        v: &Value,
        known: Option<&BTreeSet<String>>,
    ) -> Option<Named> {
        let name = self.nonempty_text(path, v)?;
        let span = self.y.value_span(path);
        // None: the front matter could not be read, so the name is not checked.
        if let Some(known) = known.filter(|k| !k.contains(&name)) {
            self.err(undefined("instrument", &name, span, known, "instruments"));
        }
        Some(Named { name, span })
    }
}

fn undefined(
    kind: &str,
    name: &str,
    span: Span,
    known: &BTreeSet<String>,
    section: &str,
) -> Diagnostic {
    let names: Vec<&str> = known.iter().map(|s| s.as_str()).collect();
    let expected = if names.is_empty() {
        format!("a {kind} defined under `{section}:` in the front matter (none are defined)")
    } else {
        format!("one of {}", list(&names))
    };
    let mut d = Diagnostic::new(
        span,
        format!("{kind} `{name}` is not defined in the front matter"),
    )
    .expected(expected)
    .found(format!("`{name}`"));
    d = match suggest(name, &names) {
        Some(s) => d.help(s),
        None => d.help(format!("add it under `{section}:` in the front matter")),
    };
    d
}

/// `YYYY-MM-DD` exactly (ISO 8601 calendar date, extended format).
pub fn parse_iso_date(s: &str) -> Option<NaiveDate> {
    let t = s.trim();
    let b = t.as_bytes();
    if b.len() != 10 || b[4] != b'-' || b[7] != b'-' {
        return None;
    }
    if ![0, 1, 2, 3, 5, 6, 8, 9]
        .iter()
        .all(|&i| b[i].is_ascii_digit())
    {
        return None;
    }
    let y: i32 = t[0..4].parse().ok()?;
    let m: u32 = t[5..7].parse().ok()?;
    let d: u32 = t[8..10].parse().ok()?;
    NaiveDate::from_ymd_opt(y, m, d)
}

/// Parses an instrument accuracy: `P% + N` (N counts), `P%`, or an absolute quantity.
/// Errors carry (offset, len) inside `text`.
pub fn parse_accuracy(text: &str) -> Result<Accuracy, QuantityError> {
    let lead = text.len() - text.trim_start().len();
    let mut t = text.trim();
    let mut off = lead;
    for pm in ["±", "+/-", "+-"] {
        if let Some(r) = t.strip_prefix(pm) {
            let r2 = r.trim_start();
            off += t.len() - r2.len();
            t = r2;
            break;
        }
    }
    const FORMS: &str =
        "`P% + N` (percent of reading plus N counts), `P%`, or a value with a unit such as `5 mV`";
    let err = |o: usize, l: usize, m: &str, f: &str| QuantityError {
        offset: o,
        len: l,
        message: m.to_string(),
        expected: FORMS.to_string(),
        found: f.to_string(),
    };
    // A quantity error inside an accuracy still names the accuracy forms.
    let inner = |o: usize, e: QuantityError| QuantityError {
        offset: o + e.offset,
        expected: FORMS.to_string(),
        ..e
    };
    if let Some(pct) = t.find('%') {
        let head = &t[..pct + 1];
        let q = parse_quantity(head).map_err(|e| inner(off, e))?;
        if q.value < 0.0 {
            return Err(err(off, head.len(), "accuracy cannot be negative", head));
        }
        let rest = &t[pct + 1..];
        let r = rest.trim_start();
        let r_off = off + pct + 1 + (rest.len() - r.len());
        if r.is_empty() {
            return Ok(Accuracy::Relative {
                fraction: q.value,
                counts: 0.0,
            });
        }
        let Some(after_plus) = r.strip_prefix('+') else {
            return Err(err(
                r_off,
                r.len(),
                "expected `+ N` counts after the percentage",
                r,
            ));
        };
        let c = after_plus.trim_start();
        let c_off = r_off + 1 + (after_plus.len() - c.len());
        let n = quantity::number_len(c).unwrap_or(0);
        let word = c[n..].trim();
        if n == 0
            || !(word.is_empty()
                || [
                    "counts", "count", "digits", "digit", "dgt", "d", "ct", "cts",
                ]
                .contains(&word))
        {
            let help = if n > 0 && parse_unit(word).is_some() {
                "a term with a unit after the percentage is not supported; give it as counts of the resolution"
            } else {
                "expected a number of counts"
            };
            return Err(err(c_off, c.len(), help, c));
        }
        let counts: f64 = c[..n]
            .parse()
            .map_err(|_| err(c_off, n, "not a number", &c[..n]))?;
        if !counts.is_finite() || counts < 0.0 {
            return Err(err(c_off, n, "counts must be zero or more", &c[..n]));
        }
        return Ok(Accuracy::Relative {
            fraction: q.value,
            counts,
        });
    }
    let q = parse_quantity(t).map_err(|e| inner(off, e))?;
    if q.unit == Unit::One {
        return Err(err(off, t.len(), "accuracy needs `%` or a unit", t));
    }
    if q.value < 0.0 {
        return Err(err(off, t.len(), "accuracy cannot be negative", t));
    }
    Ok(Accuracy::Absolute(q))
}

// ---------------------------------------------------------------------------------------------
// Front matter.

struct Defined {
    instruments: BTreeSet<String>,
    parts: BTreeSet<String>,
    /// False when the front matter could not be read: names are then not checked, so one
    /// YAML slip does not bring an "is not defined" for every block.
    known: bool,
}

impl Defined {
    fn checked(&self) -> Option<&BTreeSet<String>> {
        self.known.then_some(&self.instruments)
    }
}

fn names_under(v: Option<&Value>) -> BTreeSet<String> {
    match v {
        Some(Value::Mapping(m)) => m
            .keys()
            .filter_map(|k| match k {
                Value::String(s) => Some(s.clone()),
                Value::Number(n) => Some(n.to_string()),
                _ => None,
            })
            .collect(),
        _ => BTreeSet::new(),
    }
}

fn front_matter(y: &Yaml, d: &mut Vec<Diagnostic>) -> (FrontMatter, Defined) {
    let mut fm = FrontMatter {
        record: String::new(),
        title: String::new(),
        date: NaiveDate::default(),
        operator: String::new(),
        lab: None,
        project: None,
        lot: None,
        environment: None,
        coverage: 0.9545,
        decision: Decision::Guarded,
        instruments: BTreeMap::new(),
        parts: BTreeMap::new(),
        template: None,
        signoff: None,
    };
    let root = match y.load("front matter") {
        Ok(v) => v,
        Err(e) => {
            d.push(e);
            return (
                fm,
                Defined {
                    instruments: BTreeSet::new(),
                    parts: BTreeSet::new(),
                    known: false,
                },
            );
        }
    };
    let mut ex = Ex {
        y,
        d,
        what: "front matter",
    };
    let entries = ex.entries(&[], &root, Some(FRONT_KEYS));
    let get = |k: &str| entries.iter().find(|(n, _)| n == k).map(|(_, v)| *v);
    let defined = Defined {
        instruments: names_under(get("instruments")),
        parts: names_under(get("parts")),
        known: true,
    };
    let mut seen = BTreeSet::new();
    for (key, v) in &entries {
        seen.insert(key.as_str());
        let path = [key.as_str()];
        match key.as_str() {
            "record" => fm.record = ex.nonempty_text(&path, v).unwrap_or_default(),
            "title" => fm.title = ex.nonempty_text(&path, v).unwrap_or_default(),
            "operator" => fm.operator = ex.nonempty_text(&path, v).unwrap_or_default(),
            "date" => {
                if let Some(dt) = ex.date(&path, v) {
                    fm.date = dt;
                }
            }
            "lab" => fm.lab = ex.text(&path, v),
            "project" => fm.project = ex.text(&path, v),
            "lot" => fm.lot = ex.text(&path, v),
            "environment" => fm.environment = ex.text(&path, v),
            "coverage" => {
                if let Some(p) = coverage(&mut ex, v) {
                    fm.coverage = p;
                }
            }
            "decision" => {
                if let Some(s) = ex.text(&path, v) {
                    match s.trim() {
                        "simple" => fm.decision = Decision::Simple,
                        "guarded" => fm.decision = Decision::Guarded,
                        other => {
                            let span = y.value_span(&path);
                            let mut dg =
                                Diagnostic::new(span, format!("unknown decision rule `{other}`"))
                                    .expected("`simple` or `guarded`")
                                    .found(format!("`{other}`"));
                            if let Some(h) = suggest(other, &["simple", "guarded"]) {
                                dg = dg.help(h);
                            }
                            ex.err(dg);
                        }
                    }
                }
            }
            "template" => {
                if let Some(s) = ex.nonempty_text(&path, v) {
                    fm.template = Some((s, y.value_span(&path)));
                }
            }
            "signoff" => fm.signoff = signoff(&mut ex, v),
            "instruments" => {
                for (name, iv) in ex.entries(&path, v, None) {
                    if let Some(i) = instrument(&mut ex, &name, iv) {
                        fm.instruments.insert(name, i);
                    }
                }
            }
            "parts" => {
                for (name, pv) in ex.entries(&path, v, None) {
                    if let Some(p) = part(&mut ex, &name, pv, &defined.instruments) {
                        fm.parts.insert(name, p);
                    }
                }
            }
            _ => {}
        }
    }
    for req in ["record", "title", "date", "operator"] {
        if !seen.contains(req) {
            ex.err(
                Diagnostic::new(y.anchor, format!("the front matter lacks `{req}`"))
                    .expected(format!("a line `{req}: …` between the `---` lines"))
                    .found("no such key"),
            );
        }
    }
    (fm, defined)
}

fn coverage(ex: &mut Ex, v: &Value) -> Option<f64> {
    let path = ["coverage"];
    let span = ex.y.value_span(&path);
    let p = match v {
        Value::Number(n) => n.as_f64(),
        Value::String(s) => match parse_quantity(s) {
            Ok(q) if q.unit == Unit::One || q.unit == Unit::Percent => Some(q.value),
            Ok(_) => None,
            Err(e) => {
                ex.quantity_error(&path, s, e);
                return None;
            }
        },
        _ => None,
    };
    match p {
        Some(p) if p > 0.0 && p < 1.0 => Some(p),
        _ => {
            let found = ex.y.src[span.start..span.end].to_string();
            ex.err(
                Diagnostic::new(span, "coverage probability out of range")
                    .expected("a probability between 0 and 1, e.g. 0.95 or 95%")
                    .found(format!("`{found}`")),
            );
            None
        }
    }
}

fn signoff(ex: &mut Ex, v: &Value) -> Option<Signoff> {
    let span = ex.y.value_span(&["signoff"]);
    let entries = ex.entries(&["signoff"], v, Some(SIGNOFF_KEYS));
    let mut vals: BTreeMap<&str, String> = BTreeMap::new();
    for (k, val) in &entries {
        let key: &str = SIGNOFF_KEYS
            .iter()
            .find(|s| **s == k.as_str())
            .copied()
            .unwrap_or("");
        if let Some(t) = ex.nonempty_text(&["signoff", key], val) {
            vals.insert(key, t);
        }
    }
    let mut ok = true;
    for k in SIGNOFF_REQUIRED {
        if !entries.iter().any(|(n, _)| n == k) {
            ok = false;
            ex.err(
                Diagnostic::new(span, format!("`signoff` lacks `{k}`"))
                    .expected("`by`, `on` and `digest`"),
            );
        }
    }
    if !ok {
        return None;
    }
    Some(Signoff {
        by: vals.remove("by")?,
        on: vals.remove("on")?,
        digest: vals.remove("digest")?,
        key: vals.remove("key"),
        signature: vals.remove("signature"),
        accepted: vals.remove("accepted"),
        span,
    })
}

fn instrument(ex: &mut Ex, name: &str, v: &Value) -> Option<Instrument> {
    let span = ex.y.key_span(&["instruments", name]);
    let mut ins = Instrument {
        name: name.to_string(),
        what: None,
        accuracy: None,
        resolution: None,
        bandwidth: None,
        calibrated: None,
        due: None,
        reading: None,
        distribution: Distribution::Rectangular,
        span,
    };
    let entries = ex.entries(&["instruments", name], v, Some(INSTRUMENT_KEYS));
    let mut dist: Option<(String, Span)> = None;
    let mut k: Option<(f64, Span)> = None;
    for (key, val) in &entries {
        let path = ["instruments", name, key.as_str()];
        match key.as_str() {
            "what" => ins.what = ex.text(&path, val),
            "accuracy" => {
                if let Some(t) = ex.text(&path, val) {
                    match parse_accuracy(&t) {
                        Ok(a) => ins.accuracy = Some(a),
                        Err(e) => ex.quantity_error(&path, &t, e),
                    }
                }
            }
            "resolution" => {
                let q = ex.quantity(
                    &path,
                    val,
                    &[
                        Unit::V,
                        Unit::A,
                        Unit::Ohm,
                        Unit::F,
                        Unit::H,
                        Unit::Hz,
                        Unit::S,
                        Unit::W,
                        Unit::Rad,
                        Unit::Div,
                    ],
                    None,
                );
                ins.resolution = ex.positive(&path, q, "resolution");
            }
            "bandwidth" => {
                let q = ex.quantity(&path, val, &[Unit::Hz], Some(Unit::Hz));
                ins.bandwidth = ex.positive(&path, q, "bandwidth").map(|q| q.value);
            }
            "calibrated" => ins.calibrated = ex.date(&path, val),
            "due" => ins.due = ex.date(&path, val),
            "reading" => {
                let q = ex.quantity(
                    &path,
                    val,
                    &[Unit::Div, Unit::V, Unit::A, Unit::Rad, Unit::S, Unit::Hz],
                    None,
                );
                ins.reading = ex.positive(&path, q, "reading half-width");
            }
            "distribution" => {
                if let Some(t) = ex.text(&path, val) {
                    dist = Some((t.trim().to_string(), ex.y.value_span(&path)));
                }
            }
            "k" => {
                let kv = match val {
                    Value::Number(n) => n.as_f64(),
                    Value::String(s) => s.trim().parse::<f64>().ok(),
                    _ => None,
                };
                let sp = ex.y.value_span(&path);
                match kv {
                    Some(x) if x.is_finite() && x > 0.0 => k = Some((x, sp)),
                    _ => ex.err(
                        Diagnostic::new(sp, "coverage factor `k` must be a positive number")
                            .expected("e.g. `k: 2`")
                            .found(kind_name(val)),
                    ),
                }
            }
            _ => {}
        }
    }
    match dist.as_ref().map(|(s, sp)| (s.as_str(), *sp)) {
        None | Some(("rectangular", _)) => {
            if let Some((_, sp)) = k {
                ex.err(
                    Diagnostic::new(sp, "`k` applies only with `distribution: normal`")
                        .expected("`distribution: normal` beside `k`"),
                );
            }
        }
        Some(("normal", sp)) => match k {
            Some((kv, _)) => ins.distribution = Distribution::Normal { k: kv },
            None => ex.err(
                Diagnostic::new(sp, "a normal distribution needs its coverage factor")
                    .expected("a key `k` (e.g. `k: 2`) beside `distribution: normal`")
                    .found("no `k`"),
            ),
        },
        Some((other, sp)) => {
            let mut dg = Diagnostic::new(sp, format!("unknown distribution `{other}`"))
                .expected("`rectangular` or `normal`")
                .found(format!("`{other}`"));
            if let Some(h) = suggest(other, &["rectangular", "normal"]) {
                dg = dg.help(h);
            }
            ex.err(dg);
        }
    }
    if let (Some(c), Some(du)) = (ins.calibrated, ins.due) {
        if du < c {
            let sp = ex.y.value_span(&["instruments", name, "due"]);
            ex.err(
                Diagnostic::new(sp, "calibration due date is before the calibration date")
                    .expected(format!("a date on or after {c}"))
                    .found(du.to_string()),
            );
        }
    }
    Some(ins)
}

fn part_unit(kind: PartKind) -> Unit {
    match kind {
        PartKind::Resistor => Unit::Ohm,
        PartKind::Capacitor => Unit::F,
        PartKind::Inductor => Unit::H,
    }
}

fn part(ex: &mut Ex, name: &str, v: &Value, instruments: &BTreeSet<String>) -> Option<Part> {
    let base = ["parts", name];
    let span = ex.y.key_span(&base);
    let entries = ex.entries(&base, v, Some(PART_KEYS));
    if !matches!(v, Value::Mapping(_)) {
        return None;
    }
    let kind = match entries.iter().find(|(k, _)| k == "kind") {
        None => {
            ex.err(
                Diagnostic::new(span, format!("part `{name}` lacks `kind`"))
                    .expected("`kind: resistor`, `kind: capacitor` or `kind: inductor`")
                    .found("no `kind`"),
            );
            return None;
        }
        Some((_, kv)) => {
            let path = ["parts", name, "kind"];
            let t = ex.text(&path, kv)?;
            match t.trim() {
                "resistor" => PartKind::Resistor,
                "capacitor" => PartKind::Capacitor,
                "inductor" => PartKind::Inductor,
                other => {
                    let sp = ex.y.value_span(&path);
                    let mut dg = Diagnostic::new(sp, format!("unknown part kind `{other}`"))
                        .expected("`resistor`, `capacitor` or `inductor`")
                        .found(format!("`{other}`"));
                    if let Some(h) = suggest(other, &["resistor", "capacitor", "inductor"]) {
                        dg = dg.help(h);
                    }
                    ex.err(dg);
                    return None;
                }
            }
        }
    };
    let unit = part_unit(kind);
    let mut p = Part {
        name: name.to_string(),
        kind,
        nominal: None,
        tolerance: None,
        measured: None,
        measured_by: None,
        dcr: None,
        dcr_by: None,
        rating: None,
        span,
    };
    let mut by: Option<String> = None;
    let mut tol: Option<&Value> = None;
    for (key, val) in &entries {
        let path = ["parts", name, key.as_str()];
        match key.as_str() {
            "nominal" => {
                let q = ex.quantity(&path, val, &[unit], None);
                p.nominal = ex.positive(&path, q, "a nominal value");
            }
            "tolerance" => tol = Some(val),
            "measured" | "dcr" => {
                let is_dcr = key == "dcr";
                if is_dcr && kind != PartKind::Inductor {
                    ex.err(
                        Diagnostic::new(
                            ex.y.key_span(&path),
                            "`dcr` (winding resistance) applies only to an inductor",
                        )
                        .expected("`kind: inductor`")
                        .found(format!("`kind: {}`", kind_word(kind))),
                    );
                    continue;
                }
                let want = if is_dcr { Unit::Ohm } else { unit };
                let what = if is_dcr {
                    "a winding resistance"
                } else {
                    "a measured value"
                };
                let (q, inner_by) = match val {
                    Value::Mapping(_) => {
                        let mut q = None;
                        let mut b = None;
                        for (k2, v2) in ex.entries(&path, val, Some(MEASURED_KEYS)) {
                            let p2 = [
                                "parts",
                                name,
                                key.as_str(),
                                if k2 == "value" { "value" } else { "by" },
                            ];
                            if k2 == "value" {
                                let qq = ex.quantity(&p2, v2, &[want], None);
                                q = ex.positive(&p2, qq, what);
                            } else if let Some(n) = ex.instrument_name(&p2, v2, Some(instruments)) {
                                b = Some(n.name);
                            }
                        }
                        (q, b)
                    }
                    _ => {
                        let qq = ex.quantity(&path, val, &[want], None);
                        (ex.positive(&path, qq, what), None)
                    }
                };
                if is_dcr {
                    p.dcr = q;
                    if inner_by.is_some() {
                        p.dcr_by = inner_by;
                    }
                } else {
                    p.measured = q;
                    if inner_by.is_some() {
                        p.measured_by = inner_by;
                    }
                }
            }
            "by" => {
                by = ex
                    .instrument_name(&path, val, Some(instruments))
                    .map(|n| n.name)
            }
            "measured_by" => {
                p.measured_by = ex
                    .instrument_name(&path, val, Some(instruments))
                    .map(|n| n.name)
            }
            "dcr_by" => {
                p.dcr_by = ex
                    .instrument_name(&path, val, Some(instruments))
                    .map(|n| n.name)
            }
            "rating" => {
                let units: &[Unit] = match kind {
                    PartKind::Resistor => &[Unit::W],
                    PartKind::Capacitor => &[Unit::V],
                    PartKind::Inductor => &[Unit::A, Unit::W],
                };
                let q = ex.quantity(&path, val, units, None);
                p.rating = ex.positive(&path, q, "a rating");
            }
            _ => {}
        }
    }
    // `by` names the instrument for both `measured` and `dcr` unless given separately.
    if let Some(b) = by {
        if p.measured_by.is_none() {
            p.measured_by = Some(b.clone());
        }
        if p.dcr_by.is_none() && kind == PartKind::Inductor {
            p.dcr_by = Some(b);
        }
    }
    if let Some(tv) = tol {
        p.tolerance = tolerance(ex, name, tv, kind, p.nominal);
    }
    Some(p)
}

fn kind_word(k: PartKind) -> &'static str {
    match k {
        PartKind::Resistor => "resistor",
        PartKind::Capacitor => "capacitor",
        PartKind::Inductor => "inductor",
    }
}

fn tolerance(
    ex: &mut Ex,
    name: &str,
    v: &Value,
    kind: PartKind,
    nominal: Option<Quantity>,
) -> Option<Tolerance> {
    let path = ["parts", name, "tolerance"];
    let span = ex.y.value_span(&path);
    let raw = ex.text(&path, v)?;
    let t = raw.trim();
    let t = t
        .strip_prefix('±')
        .or_else(|| t.strip_prefix("+/-"))
        .unwrap_or(t)
        .trim();
    let codes: String = IEC_60062_CODES
        .iter()
        .map(|(c, _)| c.to_string())
        .collect::<Vec<_>>()
        .join(" ");
    let mut chars = t.chars();
    if let (Some(c), None) = (chars.next(), chars.next()) {
        if c.is_ascii_alphabetic() {
            let Some(&(_, frac)) = IEC_60062_CODES.iter().find(|(k, _)| *k == c) else {
                ex.err(
                    Diagnostic::new(
                        span,
                        format!("`{c}` is not an IEC 60062 tolerance letter handled here"),
                    )
                    .expected(format!(
                        "one of {codes}, a percentage or a value with a unit"
                    ))
                    .found(format!("`{c}`")),
                );
                return None;
            };
            // IEC 60062 (from memory): below 10 pF the letters B–G mean absolute pF values
            // (B 0.1, C 0.25, D 0.5, F 1, G 2 pF), so they are refused; J, K, M stay percent.
            let absolute_below_10pf = matches!(c, 'B' | 'C' | 'D' | 'F' | 'G');
            if kind == PartKind::Capacitor
                && absolute_below_10pf
                && nominal.is_some_and(|n| n.value < 10e-12)
            {
                ex.err(
                    Diagnostic::new(
                        span,
                        "below 10 pF a tolerance letter means an absolute value",
                    )
                    .expected("the tolerance as a value with a unit, e.g. `0.25 pF`")
                    .found(format!("`{c}`")),
                );
                return None;
            }
            return Some(Tolerance::Code(c, frac));
        }
    }
    match parse_quantity(t) {
        Ok(q) if q.unit == Unit::Percent => {
            if q.value > 0.0 && q.value < 1.0 {
                Some(Tolerance::Relative(q.value))
            } else {
                ex.err(
                    Diagnostic::new(span, "tolerance out of range")
                        .expected("a positive percentage, above 0 % and below 100 %")
                        .found(format!("`{}`", raw.trim())),
                );
                None
            }
        }
        Ok(q) if q.unit == part_unit(kind) => {
            if q.value > 0.0 {
                Some(Tolerance::Absolute(q.value))
            } else {
                ex.err(
                    Diagnostic::new(span, "tolerance must be greater than zero")
                        .expected("a positive value")
                        .found(format!("`{}`", raw.trim())),
                );
                None
            }
        }
        Ok(_) => {
            ex.err(
                Diagnostic::new(
                    span,
                    format!("tolerance does not fit a {}", kind_word(kind)),
                )
                .expected(format!(
                    "a percentage, a letter ({codes}) or a value in {}",
                    dimension_name(part_unit(kind))
                ))
                .found(format!("`{}`", raw.trim())),
            );
            None
        }
        Err(e) => {
            let mut e = e;
            e.expected =
                format!("a percentage such as `1%`, a letter ({codes}) or a value with a unit");
            ex.quantity_error(&path, t, e);
            None
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Readings blocks.

#[derive(Debug, Clone, Copy)]
struct Tok {
    start: usize,
    end: usize,
}

/// End of a table line's content: before `#` and trailing whitespace.
fn content_end(src: &str, l: &Line) -> usize {
    let t = line_text(src, l);
    let cut = t.find('#').unwrap_or(t.len());
    l.start + t[..cut].trim_end().len()
}

fn trim_tok(src: &str, a: usize, b: usize) -> Tok {
    let t = &src[a..b];
    let lead = t.len() - t.trim_start().len();
    let s = a + lead;
    Tok {
        start: s,
        end: s + t.trim().len(),
    }
}

fn pipe_cells(src: &str, start: usize, end: usize) -> Vec<Tok> {
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

fn ws_tokens(src: &str, start: usize, end: usize) -> Vec<Tok> {
    let t = &src[start..end];
    let mut out = Vec::new();
    let mut cur: Option<usize> = None;
    for (i, c) in t.char_indices() {
        if c.is_whitespace() {
            if let Some(s) = cur.take() {
                out.push(Tok {
                    start: start + s,
                    end: start + i,
                });
            }
        } else if cur.is_none() {
            cur = Some(i);
        }
    }
    if let Some(s) = cur {
        out.push(Tok {
            start: start + s,
            end,
        });
    }
    out
}

/// Whitespace headings: `VR (mV)` and `f / Hz` are one heading each.
fn merge_headings(src: &str, toks: Vec<Tok>) -> Vec<Tok> {
    let mut out: Vec<Tok> = Vec::new();
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
fn merge_units(src: &str, toks: Vec<Tok>) -> Vec<Tok> {
    let mut out: Vec<Tok> = Vec::new();
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

fn is_separator_row(src: &str, cells: &[Tok]) -> bool {
    !cells.is_empty()
        && cells.iter().all(|c| {
            let t = &src[c.start..c.end];
            let core = t.trim_start_matches(':').trim_end_matches(':');
            !core.is_empty() && core.chars().all(|ch| ch == '-')
        })
}

/// A column heading: (symbol if recognised, column and prefix factor if fully valid).
fn parse_heading(
    src: &str,
    tok: Tok,
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
        let mut dg = Diagnostic::new(
            if sym.is_empty() { span } else { sym_span },
            format!("unknown column `{sym}`"),
        )
        .expected(format!("one of {} (case-sensitive)", list(SYMBOLS)))
        .found(format!("`{text}`"));
        if let Some(h) = suggest(sym, SYMBOLS) {
            dg = dg.help(h);
        }
        d.push(dg);
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

struct BlockCtx<'a> {
    src: &'a str,
    defined: &'a Defined,
}

fn parse_block(
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
        let y = Yaml::new(src, body.start, header_end, open_span);
        match y.load("block header") {
            Err(e) => d.push(e),
            Ok(v) => {
                let mut ex = Ex {
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
                                let t = s.trim();
                                network = match t {
                                    "RC" => Some(Network::RC),
                                    "RL" => Some(Network::RL),
                                    "RLC" => Some(Network::RLC),
                                    "Z" => Some(Network::Z),
                                    _ => {
                                        let mut dg = Diagnostic::new(
                                            y.value_span(&path),
                                            format!("unknown network `{t}`"),
                                        )
                                        .expected("one of `RC`, `RL`, `RLC`, `Z`")
                                        .found(format!("`{t}`"));
                                        if let Some(h) = suggest(t, &["RC", "RL", "RLC", "Z"]) {
                                            dg = dg.help(h);
                                        }
                                        ex.err(dg);
                                        None
                                    }
                                };
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
    let mut heading: Option<(Vec<Tok>, bool, Span)> = None;
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

// ---------------------------------------------------------------------------------------------
// Fences the Markdown reader does not see as readings blocks.

/// Whether a code block label is a near miss of `readings` (other case, a typo, a colon).
fn near_readings(word: &str) -> bool {
    !word.is_empty() && suggest(word, &["readings"]).is_some()
}

/// `(offset of the fence, label)` when a line opens a fence (``` or ~~~) labelled like
/// `readings`.
fn readings_fence(line: &str) -> Option<(usize, &str)> {
    let t = line.trim_start();
    let ch = t.chars().next().filter(|c| *c == '`' || *c == '~')?;
    let n = t.chars().take_while(|c| *c == ch).count();
    if n < 3 {
        return None;
    }
    let word = t[n..].split_whitespace().next()?;
    (word == "readings" || near_readings(word)).then_some((line.len() - t.len(), word))
}

fn misnamed_fence(src: &str, block: Span, word: &str) -> Diagnostic {
    let line_end = src[block.start..block.end]
        .find('\n')
        .map_or(block.end, |i| block.start + i);
    let lead = src[block.start..line_end].len() - src[block.start..line_end].trim_start().len();
    let why = if word.eq_ignore_ascii_case("readings") {
        "the label is case-sensitive"
    } else {
        "the label is misspelt"
    };
    Diagnostic::new(
        Span::new(block.start + lead, line_end),
        format!("a code block labelled {} is not read as readings: {why}", short(word)),
    )
    .expected("the label `readings` exactly (lower case) for a block to reduce, or another label for plain code")
    .found(short(word))
}

#[derive(Clone, Copy)]
enum Hidden {
    Html,
    Indented,
}

/// Reports every readings fence inside an HTML block or an indented code block, where
/// Markdown reads it as raw HTML or plain code and the block would be ignored.
fn hidden_fences(src: &str, region: Span, kind: Hidden, d: &mut Vec<Diagnostic>) {
    // From the start of the first line, so an indent is counted whole.
    let from = src[..region.start].rfind('\n').map_or(0, |i| i + 1);
    for l in split_lines(src, from, region.end) {
        let Some((off, word)) = readings_fence(line_text(src, &l)) else {
            continue;
        };
        let at = Span::new(l.start + off, content_end(src, &l).max(l.start + off));
        d.push(match kind {
            Hidden::Html => Diagnostic::new(
                at,
                "this readings fence sits inside an HTML block, where Markdown is not read: the block would be ignored",
            )
            .expected("a blank line between the HTML tag (e.g. `<details>`) and the fence, and one after the closing fence")
            .found(format!("{} inside HTML", short(word))),
            Hidden::Indented => Diagnostic::new(
                at,
                "this readings fence is indented four or more spaces, so Markdown reads it as indented plain code: the block would be ignored",
            )
            .expected("the fence at most three spaces from the margin")
            .found(format!("{} indented {off} spaces", short(word)))
            .help("to show a readings block as an example, put it inside a ````text fence"),
        });
    }
}

// ---------------------------------------------------------------------------------------------
// The notebook.

/// Parses a notebook; on any problem returns every diagnostic found (all in one pass).
pub fn parse(src: &str) -> Result<Notebook, Vec<Diagnostic>> {
    let source = src.strip_prefix('\u{FEFF}').unwrap_or(src).to_string();
    if source.len() > MAX_SOURCE {
        return Err(vec![Diagnostic::new(
            Span::new(0, 0),
            "notebook is too large",
        )
        .expected(format!("at most {} MiB", MAX_SOURCE >> 20))
        .found(format!("{} bytes", source.len()))]);
    }
    let mut d = Vec::new();
    let lines = split_lines(&source, 0, source.len());
    let first = lines.first().copied();
    let opened = first.is_some_and(|l| line_text(&source, &l).trim_end() == "---");
    let Some(first) = first.filter(|_| opened) else {
        let found = first
            .map(|l| short(line_text(&source, &l)))
            .unwrap_or_else(|| "an empty file".to_string());
        let end = first.map_or(0, |l| l.end);
        return Err(vec![Diagnostic::new(
            Span::new(0, end),
            "a notebook starts with its front matter",
        )
        .expected("a first line `---`, the front matter keys, then a line `---`")
        .found(found)]);
    };
    let open_span = Span::new(first.start, first.end);
    let Some(close) = lines.iter().skip(1).find(|l| {
        let t = line_text(&source, l).trim_end();
        t == "---" || t == "..."
    }) else {
        return Err(vec![Diagnostic::new(
            open_span,
            "the front matter is never closed",
        )
        .expected("a line `---` (or `...`) after the front matter keys")
        .found("end of file")]);
    };
    let front_span = Span::new(first.next, close.start);
    let (front, defined) = if front_span.end - front_span.start > MAX_FRONT {
        d.push(
            Diagnostic::new(open_span, "the front matter is too long")
                .expected(format!("at most {} KiB", MAX_FRONT >> 10))
                .found(format!("{} bytes", front_span.end - front_span.start)),
        );
        return Err(d);
    } else {
        let y = Yaml::new(&source, front_span.start, front_span.end, open_span);
        front_matter(&y, &mut d)
    };

    let base = close.next;
    let md = &source[base..];
    let cx = BlockCtx {
        src: &source,
        defined: &defined,
    };
    let mut items = Vec::new();
    let mut ids: BTreeMap<String, Span> = BTreeMap::new();
    let mut prev = base;
    let mut depth = 0usize;
    for (ev, range) in Parser::new_ext(md, Options::ENABLE_TABLES).into_offset_iter() {
        let here = Span::new(base + range.start, base + range.end);
        match ev {
            Event::Html(_) => hidden_fences(&source, here, Hidden::Html, &mut d),
            Event::Start(Tag::CodeBlock(CodeBlockKind::Indented)) => {
                hidden_fences(&source, here, Hidden::Indented, &mut d);
                depth += 1;
            }
            Event::Start(tag) => {
                if let Tag::CodeBlock(CodeBlockKind::Fenced(info)) = &tag {
                    let word = info.split_whitespace().next().unwrap_or("");
                    if word != "readings" && near_readings(word) {
                        d.push(misnamed_fence(&source, here, word));
                    }
                    if word == "readings" {
                        let r = Span::new(base + range.start, base + range.end);
                        if depth > 0 {
                            let open_end = source[r.start..r.end]
                                .find('\n')
                                .map_or(r.end, |i| r.start + i);
                            d.push(
                                Diagnostic::new(
                                    Span::new(r.start, open_end),
                                    "a readings block cannot sit inside a list or block quote",
                                )
                                .expected("the block's fences at the left margin")
                                .found("a nested block"),
                            );
                        } else {
                            if r.start > prev && !source[prev..r.start].trim().is_empty() {
                                items.push(Item::Prose {
                                    text: source[prev..r.start].to_string(),
                                    span: Span::new(prev, r.start),
                                });
                            }
                            prev = r.end.max(prev);
                            if let Some(b) = parse_block(&cx, r, &mut ids, &mut d) {
                                items.push(Item::Readings(b));
                            }
                        }
                    }
                }
                depth += 1;
            }
            Event::End(_) => depth = depth.saturating_sub(1),
            _ => {}
        }
    }
    if prev < source.len() && !source[prev..].trim().is_empty() {
        items.push(Item::Prose {
            text: source[prev..].to_string(),
            span: Span::new(prev, source.len()),
        });
    }
    if !d.is_empty() {
        return Err(d);
    }
    Ok(Notebook {
        source,
        front,
        front_span,
        items,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    // ISO 8601-1:2019 5.2.2.1: calendar date, extended format YYYY-MM-DD.
    #[test]
    fn iso_dates() {
        assert_eq!(
            parse_iso_date("2026-03-14"),
            NaiveDate::from_ymd_opt(2026, 3, 14)
        );
        assert_eq!(
            parse_iso_date(" 2024-02-29 "),
            NaiveDate::from_ymd_opt(2024, 2, 29)
        );
        // 2025 is not a leap year (Gregorian rule).
        assert_eq!(parse_iso_date("2025-02-29"), None);
        for bad in [
            "2026-3-14",
            "14.03.2026",
            "2026/03/14",
            "20260314",
            "2026-03-14T10:00",
            "",
            "２０２６-03-14",
        ] {
            assert_eq!(parse_iso_date(bad), None, "{bad}");
        }
    }

    #[test]
    fn accuracy_forms() {
        // `P% + N`: ± (P % of reading + N counts), a common way of stating meter accuracy (common practice).
        assert_eq!(
            parse_accuracy("0.5% + 3"),
            Ok(Accuracy::Relative {
                fraction: 0.005,
                counts: 3.0
            })
        );
        assert_eq!(
            parse_accuracy("±1.2 % + 5 counts"),
            Ok(Accuracy::Relative {
                fraction: 0.012,
                counts: 5.0
            })
        );
        assert_eq!(
            parse_accuracy("2%"),
            Ok(Accuracy::Relative {
                fraction: 0.02,
                counts: 0.0
            })
        );
        match parse_accuracy("3 mV") {
            Ok(Accuracy::Absolute(q)) => {
                assert!((q.value - 3e-3).abs() < 1e-15 && q.unit == Unit::V)
            }
            other => panic!("{other:?}"),
        }
        let e = parse_accuracy("0.5% + 2 mV").unwrap_err();
        assert_eq!(e.offset, 7);
        assert!(e.message.contains("not supported"));
        assert!(parse_accuracy("7")
            .unwrap_err()
            .message
            .contains("needs `%` or a unit"));
        assert!(parse_accuracy("-1%").is_err());
        assert!(parse_accuracy("1% + -2").is_err());
    }

    #[test]
    fn yaml_messages_lose_their_position() {
        assert_eq!(
            clean_yaml_message(
                "mapping values are not allowed in this context at line 2 column 13"
            ),
            "mapping values are not allowed in this context"
        );
        assert_eq!(
            clean_yaml_message(
                "did not find x at line 2 column 1, while parsing y at line 1 column 4"
            ),
            "did not find x, while parsing y"
        );
        assert_eq!(clean_yaml_message("odd at line x"), "odd at line x");
    }

    #[test]
    fn near_misses() {
        // Levenshtein distance, textbook examples: kitten → sitting is 3.
        assert_eq!(edit_distance("kitten", "sitting"), 3);
        assert_eq!(edit_distance("", "abc"), 3);
        assert_eq!(
            suggest("tolerence", PART_KEYS).as_deref(),
            Some("did you mean `tolerance`?")
        );
        assert_eq!(
            suggest("vs", SYMBOLS).as_deref(),
            Some("did you mean `Vs`?")
        );
        assert_eq!(suggest("zzzzzz", PART_KEYS), None);
    }

    #[test]
    fn flow_depth_ignores_quotes_and_comments() {
        assert_eq!(flow_depth("a: [[1], {b: [2]}]").0, 3);
        assert_eq!(flow_depth("a: \"[[[[\" # [[[[").0, 0);
        assert_eq!(flow_depth("a: x[1]").0, 1);
    }

    #[test]
    fn locator_finds_keys_values_and_items() {
        let src = "---\ntop: 1\ninst:\n  dmm:\n    what: meter  # note\n  lcr: {what: bridge, k: 2}\nparts:\n- R1\n- C1\n---\n";
        let start = 4;
        let end = src.rfind("---").unwrap();
        let y = Yaml::new(src, start, end, Span::new(0, 3));
        let at = |s: Span| &src[s.start..s.end];
        assert_eq!(at(y.value_span(&["top"])), "1");
        assert_eq!(at(y.value_span(&["inst", "dmm", "what"])), "meter");
        assert_eq!(at(y.key_span(&["inst", "dmm"])), "dmm");
        assert_eq!(at(y.value_span(&["inst", "lcr", "what"])), "bridge");
        assert_eq!(at(y.value_span(&["inst", "lcr", "k"])), "2");
        assert_eq!(at(y.item_span(&["parts"], "C1")), "C1");
        // A missing key falls back to its deepest ancestor found.
        assert_eq!(at(y.value_span(&["inst", "dmm", "nope"])), "dmm");
        assert_eq!(y.value_span(&["absent"]), Span::new(0, 3));
    }

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
    fn columns_per_network() {
        // FORMAT.md, "Networks and what each must yield".
        assert_eq!(required_columns(Network::RC), ["f", "VR", "VC"]);
        assert_eq!(required_columns(Network::RL), ["f", "Vs", "VR", "VL"]);
        assert_eq!(required_columns(Network::RLC), ["f", "VR"]);
        assert_eq!(required_columns(Network::Z), ["V", "I", "phi"]);
        assert_eq!(symbol_unit("phi"), Some(Unit::Rad));
        assert_eq!(symbol_unit("Phi"), None);
    }
}
