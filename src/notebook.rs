//! The notebook: front matter, prose and readings blocks, with a span on every value.
//! Parsing only; no maths and no typst here.

use crate::diag::{Diagnostic, Span};
use crate::quantity::{Quantity, Unit};
use chrono::NaiveDate;
use std::collections::BTreeMap;

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
    Prose { text: String, span: Span },
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
    Normal { k: f64 },
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
