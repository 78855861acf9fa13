//! The notebook: front matter, prose and readings blocks, with a span on every value.
//! Parsing only; no maths and no typst here.
//!
//! Beyond FORMAT.md this parser accepts: `coverage` as a number (`0.95`) or a percentage
//! (`95%`); a tolerance with a leading `±`; `by` on a part for both `measured` and `dcr`, or
//! `measured_by` / `dcr_by`, or the map form `dcr: {value: 38 ohm, by: dmm}`; accuracy counts
//! written `+ 3`, `+ 3 counts` or `+ 3 digits`; whitespace tables with a space before a unit
//! (`1.5 kHz`); headings `f/Hz`, `f / Hz`, `VR (mV)`, and a range after `@` with or without
//! a space before its unit (`VR/V@2V`, `VR/V@2 V`, `VR/V @2V`). A bare `source` or `bandwidth` number
//! is in V or Hz; part values need their unit. Readings blocks must sit at the left margin.
//! Every problem in a notebook is reported in one pass; none panics.

//!
//! Modules: `yaml` finds where YAML keys and values sit in the text, `values` reads typed
//! values out of it, `front` the front matter, `block` one readings block, `table` its table,
//! `words` the wording of near misses. This file holds the public types and [`parse`].

mod block;
mod file_table;
mod front;
pub mod prose;
mod readout;
pub mod register;
mod table;
mod values;
pub(crate) mod words;
mod yaml;

pub use file_table::{read_tables, table_refs, TABLE_MAX_BYTES};
pub use front::{parse_accuracy, parse_iso_date, same_range};
pub use table::UNIT_COLUMN;

use crate::diag::{Diagnostic, Span};
use crate::networks::{Descriptor, NETWORKS};
use crate::quantity::{Quantity, Unit};
use block::{parse_block, BlockCtx};
use chrono::NaiveDate;
use front::front_matter;
use pulldown_cmark::{CodeBlockKind, Event, Options, Parser, Tag};
use std::collections::BTreeMap;
use table::content_end;
use words::{short, suggest};
use yaml::YamlLocator;

#[derive(Debug, Clone)]
pub struct Notebook {
    /// The source as parsed (BOM removed); every `Span` indexes into it.
    pub source: String,
    pub front: FrontMatter,
    /// Byte range of the front matter YAML text (between the fences).
    pub front_span: Span,
    pub items: Vec<Item>,
    /// Blocks that read their table from a file (`table:`), and the files once read.
    pub tables: Tables,
    /// What the notebook takes from its lab register (`lab.yaml`), when it was given one.
    pub lab: Option<register::LabUse>,
}

/// The blocks whose table comes from a file (FORMAT.md 1.1, "Readings from a file") and, once
/// the edge has read them ([`read_tables`]), those files. Empty for a notebook without `table:`.
#[derive(Debug, Clone, Default)]
pub struct Tables {
    pub specs: Vec<TableSpec>,
    pub files: Vec<TableFile>,
}

/// What a block's header says about its table file.
#[derive(Debug, Clone)]
pub struct TableSpec {
    /// The block's id.
    pub block: String,
    /// The path as written (relative to the notebook) and the span of the value.
    pub path: String,
    pub span: Span,
    /// Field separator byte (`delimiter`; default from the extension).
    pub delimiter: u8,
    pub decimal: Decimal,
    /// `columns`: our heading → the file's header text, in the order written.
    pub columns: Vec<MappedColumn>,
    /// Lines before the header row (`skip`).
    pub skip: usize,
    /// The block's `unit_of`, checked against the file's `unit` column when it is read.
    pub unit_of: Option<Named>,
    /// The `---` line, when the fence has one (a table with no heading is reported there).
    pub fence: Span,
}

/// The decimal separator of a table file (`decimal`); never guessed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Decimal {
    Point,
    Comma,
}

/// One entry of `columns`: our heading (in the notebook) and the file's header text.
#[derive(Debug, Clone)]
pub struct MappedColumn {
    /// The heading read as a column, or None for the serial column `unit`.
    pub column: Option<(Column, f64)>,
    /// Our heading's span in the notebook (the key).
    pub ours: Span,
    /// The file's header text and its span in the notebook (the value).
    pub theirs: String,
    pub theirs_span: Span,
}

/// A table file as read by the edge: its bytes (for the digest and the attachment) and its text.
/// Spans into it are offset by `base`, past the notebook's end, so a diagnostic or a flag
/// at one of its cells points at the file's own line and column ([`crate::diag::Extra`]).
#[derive(Debug, Clone)]
pub struct TableFile {
    /// The path as written in the notebook.
    pub path: String,
    /// The name printed in diagnostics (the file's path as the user gave the notebook's).
    pub name: String,
    pub bytes: Vec<u8>,
    /// The text, UTF-8 BOM removed.
    pub text: String,
    pub base: usize,
}

impl Notebook {
    /// The table files as extra sources for [`crate::diag::render_in`].
    pub fn extras(&self) -> Vec<crate::diag::Extra> {
        self.tables
            .files
            .iter()
            .map(|f| crate::diag::Extra {
                name: f.name.clone(),
                text: f.text.clone(),
                base: f.base,
            })
            .collect()
    }

    /// `(file, line, column)` of a span: in a table file, or (None) in the notebook.
    pub fn locate(&self, span: Span) -> (Option<&TableFile>, usize, usize) {
        let at = span.start;
        let file = self
            .tables
            .files
            .iter()
            .rev()
            .find(|f| at > self.source.len() && at >= f.base);
        let (l, c) = match file {
            Some(f) => crate::diag::line_col(&f.text, at - f.base),
            None => crate::diag::line_col(&self.source, at),
        };
        (file, l, c)
    }
}

/// What each run of prose among `items` refers to, in order.
pub fn prose_refs(items: &[Item]) -> impl Iterator<Item = &prose::ProseRefs> {
    items.iter().filter_map(|item| match item {
        Item::Prose { refs, .. } => Some(refs),
        Item::Readings(_) => None,
    })
}

#[derive(Debug, Clone)]
pub enum Item {
    /// A run of Markdown between readings blocks, verbatim.
    Prose {
        text: String,
        span: Span,
        /// Its citations, images and paragraph lengths, read once.
        refs: prose::ProseRefs,
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
    /// Full-scale values of the ranges used (`ranges`), as listed.
    pub ranges: Vec<Range>,
    /// `accuracy` given per range: (index into `ranges`, accuracy); `accuracy` is then None.
    pub range_accuracy: Vec<(usize, Accuracy)>,
    /// A display's vertical gain accuracy (`vertical: 3%`), as a fraction.
    pub vertical: Option<f64>,
    pub span: Span,
}

/// One range of an instrument, or the range a column heading names (`VR/V@2V`).
#[derive(Debug, Clone, PartialEq)]
pub struct Range {
    pub full_scale: Quantity,
    pub span: Span,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PartKind {
    Resistor,
    Capacitor,
    Inductor,
}

impl PartKind {
    /// The SI unit of the part's value.
    pub fn unit(self) -> crate::quantity::Unit {
        use crate::quantity::Unit;
        match self {
            PartKind::Resistor => Unit::Ohm,
            PartKind::Capacitor => Unit::F,
            PartKind::Inductor => Unit::H,
        }
    }
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
    /// A capacitor's loss limits (`max_D`, `max_esr`), judged by the loss networks.
    pub loss: LossLimits,
    pub span: Span,
}

/// Upper limits on a capacitor's losses from its data sheet: the dissipation factor D = tan δ
/// (a fraction) and the equivalent series resistance (Ω).
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct LossLimits {
    pub max_d: Option<f64>,
    pub max_esr: Option<f64>,
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
    /// The digest of each lab register entry the record relied on when signed (asset id →
    /// `sha256:…`), so `verify` can name an entry that changed since.
    pub register: Vec<(String, String)>,
    pub span: Span,
}

/// A network: a handle on its descriptor in [`crate::networks::NETWORKS`], compared by name.
#[derive(Clone, Copy)]
pub struct Network(&'static Descriptor);

impl Network {
    pub const RC: Network = Network(&crate::networks::rc::NETWORK);
    pub const RL: Network = Network(&crate::networks::rl::NETWORK);
    pub const RLC: Network = Network(&crate::networks::rlc::NETWORK);
    pub const Z: Network = Network(&crate::networks::z::NETWORK);

    /// Every network, in the order messages list them.
    pub fn all() -> impl Iterator<Item = Network> {
        NETWORKS.iter().map(|d| Network(d))
    }

    /// The header's `network:` word.
    pub fn name(self) -> &'static str {
        self.0.spec.network
    }

    /// Everything else about the network.
    pub fn descriptor(self) -> &'static Descriptor {
        self.0
    }
}

impl PartialEq for Network {
    fn eq(&self, other: &Network) -> bool {
        self.name() == other.name()
    }
}

impl Eq for Network {}

impl std::hash::Hash for Network {
    fn hash<H: std::hash::Hasher>(&self, h: &mut H) {
        self.name().hash(h)
    }
}

impl std::fmt::Debug for Network {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

#[derive(Debug, Clone)]
pub struct Named {
    pub name: String,
    pub span: Span,
}

#[derive(Debug, Clone)]
pub struct Column {
    /// Case-sensitive symbol: f, Vs, VR, VC, VL, V, I, phi, shift, period, IR, IC, IL, VT.
    pub symbol: String,
    pub unit: Unit,
    /// Heading exactly as written (e.g. `f/Hz`).
    pub heading: String,
    /// The instrument range the heading names (`VR/V@2V`).
    pub range: Option<Range>,
    /// Read in divisions or peak to peak (`VR/div`, `VRpp/V`); plain otherwise.
    pub readout: Readout,
    pub span: Span,
}

/// How a voltage column was read when not as an RMS value in volts. The cells hold the RMS
/// value in volts either way: the reading × [`Readout::factor`].
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Readout {
    /// Read in divisions of a display (`VR/div`): the column's vertical scale (V/div) from the
    /// block's `scale`; None until the scale is applied, and for a column read in volts.
    pub per_div: Option<f64>,
    /// Read in divisions; set from the heading, before the scale is known.
    pub divisions: bool,
    /// Read peak to peak (`VRpp/…`), converted to RMS as for a sine: Vpp / (2√2).
    pub peak_to_peak: bool,
}

/// Peak-to-peak over RMS of a sine: V_pp = 2 V_p = 2√2 V_rms (common practice).
pub const SINE_PP_PER_RMS: f64 = 2.0 * std::f64::consts::SQRT_2;

impl Readout {
    /// The RMS value in volts per unit of the reading as written (div or V).
    pub fn factor(&self) -> f64 {
        let pp = if self.peak_to_peak {
            1.0 / SINE_PP_PER_RMS
        } else {
            1.0
        };
        self.per_div.unwrap_or(1.0) * pp
    }
}

/// What a block header says about readings off a display and the source's frequency
/// (`display`, `scale`, `generator`).
#[derive(Debug, Clone, Default)]
pub struct BlockReadout {
    /// The display the `/div` columns were read on (`display`; else the block's `phase`).
    pub display: Option<Named>,
    /// The generator whose frequency accuracy applies to `f` when no `counter` is named.
    pub generator: Option<Named>,
    /// `scale`: each column's vertical scale.
    pub scales: Vec<Scale>,
}

/// One entry of `scale`: a voltage column and its vertical scale.
#[derive(Debug, Clone)]
pub struct Scale {
    /// The column's symbol (`VR` for a key `VR` or `VRpp`).
    pub symbol: String,
    /// Volts per division (NaN for a value refused, and reported, where the header is read).
    pub per_div: f64,
    /// The key and the value as written.
    pub key: Span,
    pub value: Span,
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
    /// The `network:` value in the header.
    pub network_span: Span,
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
    /// A lot: many units of one part, a serial per row (`unit_of` and the `unit` column).
    pub lot: Option<LotSpec>,
    /// The results of a `network: model` block, each expression compiled (empty otherwise).
    pub model: Vec<crate::networks::model::ModelResult>,
    /// `display`, `scale` and `generator` (empty when none is given).
    pub readout: BlockReadout,
}

/// What makes a block a lot (FORMAT.md 1.1, "Lots").
#[derive(Debug, Clone)]
pub struct LotSpec {
    /// The part whose units vary (`unit_of`).
    pub part: Named,
    /// The `unit` column's heading.
    pub heading: Span,
    /// Each row's serial, in row order (as many as `rows`).
    pub serials: Vec<Named>,
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

/// Column symbols (case-sensitive).
pub const SYMBOLS: &[&str] = &[
    "f", "Vs", "VR", "VC", "VL", "V", "I", "phi", "shift", "period", "IR", "IC", "IL", "VT",
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
        "Vs" | "VR" | "VC" | "VL" | "V" | "VT" => Unit::V,
        "I" | "IR" | "IC" | "IL" => Unit::A,
        "phi" => Unit::Rad,
        "shift" | "period" => Unit::Div,
        _ => return None,
    })
}

/// Columns a network cannot do without.
pub fn required_columns(n: Network) -> &'static [&'static str] {
    n.descriptor().spec.required
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
    parse_with(src, None)
}

/// [`parse`] with the lab register that applies to the notebook: its asset ids may be named
/// as instruments, and its defaults fill keys the front matter leaves out.
pub fn parse_with(
    src: &str,
    register: Option<&register::Register>,
) -> Result<Notebook, Vec<Diagnostic>> {
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
        let y = YamlLocator::new(&source, front_span.start, front_span.end, open_span);
        front_matter(&y, &mut d, register.map(|r| &r.instruments))
    };
    let mut front = front;

    let base = close.next;
    let md = &source[base..];
    let cx = BlockCtx {
        src: &source,
        defined: &defined,
    };
    let mut items = Vec::new();
    let mut tables = Tables::default();
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
                                    refs: prose::read(&source[prev..r.start], prev),
                                });
                            }
                            prev = r.end.max(prev);
                            if let Some((b, spec)) = parse_block(&cx, r, &mut ids, &mut d) {
                                check_lot_part(&front.parts, &b, &mut d);
                                tables.specs.extend(spec);
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
            refs: prose::read(&source[prev..], prev),
        });
    }
    if !d.is_empty() {
        if register.is_some() {
            d.iter_mut().for_each(register::undefined_in_register);
        }
        return Err(d);
    }
    let lab = register.map(|r| register::resolve(&mut front, &items, r, &defined.present));
    Ok(Notebook {
        source,
        front,
        front_span,
        items,
        tables,
        lab,
    })
}

/// A lot's `unit_of` names a part of the block (`parts`) of a kind its network judges.
pub(super) fn check_lot_part(
    parts: &BTreeMap<String, Part>,
    b: &ReadingsBlock,
    d: &mut Vec<Diagnostic>,
) {
    let Some(lot) = &b.lot else { return };
    // A name the front matter does not define is reported where the header is read.
    let Some(part) = parts.get(&lot.part.name) else {
        return;
    };
    let judged = b.network.descriptor().judged;
    let kind = |k: PartKind| match k {
        PartKind::Resistor => "resistor",
        PartKind::Capacitor => "capacitor",
        PartKind::Inductor => "inductor",
    };
    if !judged.iter().any(|(_, k)| *k == part.kind) {
        let kinds: Vec<&str> = judged.iter().map(|(_, k)| kind(*k)).collect();
        d.push(
            Diagnostic::new(
                lot.part.span,
                format!(
                    "`unit_of: {}` names a {k}, and a {} block judges no {k}",
                    lot.part.name,
                    b.network.name(),
                    k = kind(part.kind),
                ),
            )
            .expected(format!("a part of kind {}", kinds.join(" or ")))
            .found(format!("{} ({})", lot.part.name, kind(part.kind))),
        );
    } else if !b.parts.iter().any(|p| p.name == lot.part.name) {
        let listed: Vec<&str> = b.parts.iter().map(|p| p.name.as_str()).collect();
        d.push(
            Diagnostic::new(
                lot.part.span,
                format!(
                    "`unit_of: {}` is not among the block's parts",
                    lot.part.name
                ),
            )
            .expected(format!("{} listed in `parts`", lot.part.name))
            .found(if listed.is_empty() {
                "no `parts`".to_string()
            } else {
                format!("parts [{}]", listed.join(", "))
            }),
        );
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::quantity::Unit;

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
