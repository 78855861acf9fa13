//! Render: the typst world (serves only what it is given), Markdown → Typst markup with
//! escaping, plots as SVG, and PDF/A-3b export. No file system access here.

pub mod data;
pub mod format;
pub mod markup;
pub mod plots;
pub mod world;

use std::collections::BTreeMap;
use std::fmt;

use chrono::Datelike;
use typst::diag::{Severity, SourceDiagnostic};
use typst::foundations::{Datetime, Smart};
use typst::WorldExt;
use typst_layout::PagedDocument;
use typst_pdf::{PdfOptions, PdfStandard, PdfStandards, Timestamp};

use crate::judge::Record;
use world::RecordWorld;

/// The built-in report template.
pub const BUILTIN_TEMPLATE: &str = include_str!("../../templates/record.typ");

/// Everything from outside the notebook text that a render may use, gathered by the caller.
#[derive(Debug, Clone, Default)]
pub struct Assets {
    /// Image bytes keyed by the path exactly as written in the notebook (already checked to lie
    /// inside the notebook's folder by the caller).
    pub images: BTreeMap<String, Vec<u8>>,
    /// A user template's text (front matter `template:`), or None for the built-in one.
    pub template: Option<String>,
    /// File name of the notebook, used for the attachment.
    pub source_name: String,
    /// The notebook's bytes exactly as read from disk (added by the lead): this is what the PDF
    /// should attach, so the attachment round-trips byte for byte (BOM, line ends). Empty means:
    /// attach `record.notebook.source`.
    pub source: Vec<u8>,
}

/// Why a render failed; each message is readable on its own (a user template's errors
/// carry `path:line:col`).
#[derive(Debug, Clone, PartialEq)]
pub struct RenderError {
    pub messages: Vec<String>,
}

impl RenderError {
    fn one(msg: impl Into<String>) -> Self {
        RenderError { messages: vec![msg.into()] }
    }
}

impl fmt::Display for RenderError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.messages.join("\n"))
    }
}

impl std::error::Error for RenderError {}

/// A compiled document plus the world it came from (for tests and tools).
pub struct Compiled {
    pub document: PagedDocument,
    pub world: RecordWorld,
    pub warnings: Vec<String>,
}

/// Build the world for a record: the template as main, generated files, the source.
pub fn build_world(record: &Record, assets: &Assets) -> Result<RecordWorld, RenderError> {
    let generated = data::generate(record, assets).map_err(RenderError::one)?;
    let template = assets.template.clone().unwrap_or_else(|| BUILTIN_TEMPLATE.to_string());
    RecordWorld::new(template, generated.sources, generated.files, record.notebook.front.date)
        .ok_or_else(|| RenderError::one("cannot set up the typesetting world (bad date?)"))
}

/// Where the template came from, for messages.
fn template_name(record: &Record, assets: &Assets) -> String {
    match (&assets.template, &record.notebook.front.template) {
        (Some(_), Some((path, _))) => path.clone(),
        (Some(_), None) => "template".into(),
        (None, _) => "built-in template record.typ".into(),
    }
}

fn describe(world: &RecordWorld, diag: &SourceDiagnostic, template: &str, user: bool) -> String {
    let place = diag.span.id().and_then(|id| {
        let path = world.path_of(id)?;
        let range = world.range(diag.span)?;
        let (l, c) = world.line_col(id, range.start)?;
        let name = if path == world::MAIN_PATH {
            template.to_string()
        } else {
            format!("generated {path}")
        };
        Some(format!("{name}:{l}:{c}"))
    });
    let kind = match diag.severity {
        Severity::Error => "error",
        Severity::Warning => "warning",
    };
    let mut msg = match place {
        Some(p) => format!("{p}: {kind}: {}", diag.message),
        None => format!("{template}: {kind}: {}", diag.message),
    };
    for h in &diag.hints {
        msg.push_str(&format!("\n  hint: {}", h.v));
    }
    if !user && diag.severity == Severity::Error {
        msg.push_str("\n  (this is a defect of benchrec's built-in template; please report it)");
    }
    msg
}

/// Compile a record to a paged document.
pub fn compile(record: &Record, assets: &Assets) -> Result<Compiled, RenderError> {
    let world = build_world(record, assets)?;
    let user = assets.template.is_some();
    let tname = template_name(record, assets);
    let warned = typst::compile::<PagedDocument>(&world);
    let warnings: Vec<String> = warned.warnings.iter().map(|d| describe(&world, d, &tname, user)).collect();
    match warned.output {
        Ok(document) => Ok(Compiled { document, world, warnings }),
        Err(errors) => Err(RenderError { messages: errors.iter().map(|d| describe(&world, d, &tname, user)).collect() }),
    }
}

/// PDF identifier derived from the record id (stable across renders).
fn ident(record: &Record) -> String {
    format!("benchrec:{}", record.notebook.front.record)
}

/// Render a record to PDF/A-3b bytes, with the notebook source attached.
pub fn render_pdf(record: &Record, assets: &Assets) -> Result<Vec<u8>, RenderError> {
    let compiled = compile(record, assets)?;
    let d = record.notebook.front.date;
    let month = u8::try_from(d.month()).ok();
    let day = u8::try_from(d.day()).ok();
    let stamp = match (month, day) {
        (Some(m), Some(dd)) => Datetime::from_ymd_hms(d.year(), m, dd, 0, 0, 0),
        _ => None,
    };
    let standards = PdfStandards::new(&[PdfStandard::A_3b])
        .map_err(|e| RenderError::one(format!("PDF/A-3b: {}", e.message())))?;
    let options = PdfOptions {
        ident: Smart::Custom(ident(record)),
        creator: Smart::Custom(Some(format!("benchrec {}", env!("CARGO_PKG_VERSION")))),
        timestamp: stamp.map(Timestamp::new_utc),
        standards,
        ..PdfOptions::default()
    };
    let tname = template_name(record, assets);
    typst_pdf::pdf(&compiled.document, &options).map_err(|errs| RenderError {
        messages: errs.iter().map(|e| describe(&compiled.world, e, &tname, assets.template.is_some())).collect(),
    })
}
