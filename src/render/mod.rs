//! Render: the typst world (serves only what it is given), Markdown → Typst markup with
//! escaping, plots as SVG, and PDF/A-3b export. No file system access here.

pub mod data;
pub mod labels;
pub mod lot;
pub mod markup;
pub mod metrics;
pub mod plots;
pub mod trend;
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
    /// Errors of the template or of benchrec itself.
    pub messages: Vec<String>,
    /// Errors inside a generated prose file: they come from the notebook's text.
    pub at: Vec<ProseError>,
}

/// A typesetting error inside the markup of one run of prose.
#[derive(Debug, Clone, PartialEq)]
pub struct ProseError {
    /// Which run of prose (the n-th `Item::Prose` of the notebook).
    pub prose: usize,
    /// The image call it is in, as the index of the image in `Assets::images` order.
    pub image: Option<usize>,
    pub message: String,
}

impl RenderError {
    fn one(msg: impl Into<String>) -> Self {
        RenderError {
            messages: vec![msg.into()],
            at: Vec::new(),
        }
    }

    /// Sorts typst's errors: those inside generated prose go to `at`, the rest are described.
    fn from_typst(
        world: &RecordWorld,
        errors: &[SourceDiagnostic],
        template: &str,
        user: bool,
    ) -> Self {
        let mut e = RenderError {
            messages: Vec::new(),
            at: Vec::new(),
        };
        for d in errors {
            match prose_error(world, d) {
                Some(p) => e.at.push(p),
                None => e.messages.push(describe(world, d, template, user)),
            }
        }
        e
    }
}

/// Where in the notebook's prose an error lies: generated prose files are `/prose/<n>.typ`,
/// and an image call in them names `/images/<k>.<ext>`.
fn prose_error(world: &RecordWorld, diag: &SourceDiagnostic) -> Option<ProseError> {
    let id = diag.span.id()?;
    let path = world.path_of(id)?;
    let prose = path
        .strip_prefix("/prose/")?
        .strip_suffix(".typ")?
        .parse()
        .ok()?;
    let image = world.range(diag.span).and_then(|r| {
        let src = world.served_source(id)?;
        let text = src.text().get(r)?;
        let after = &text[text.find("\"/images/")? + 9..];
        after.split('.').next()?.parse().ok()
    });
    let mut message = diag.message.to_string();
    for h in &diag.hints {
        message.push_str(&format!("; hint: {}", h.v));
    }
    Some(ProseError {
        prose,
        image,
        message,
    })
}

impl fmt::Display for RenderError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let prose = self
            .at
            .iter()
            .map(|p| format!("prose run {}: {}", p.prose + 1, p.message));
        let all: Vec<String> = self.messages.iter().cloned().chain(prose).collect();
        write!(f, "{}", all.join("\n"))
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
    let template = assets
        .template
        .clone()
        .unwrap_or_else(|| BUILTIN_TEMPLATE.to_string());
    RecordWorld::new(
        template,
        generated.sources,
        generated.files,
        record.notebook.front.date,
    )
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
    let warnings: Vec<String> = warned
        .warnings
        .iter()
        .map(|d| describe(&world, d, &tname, user))
        .collect();
    match warned.output {
        Ok(document) => Ok(Compiled {
            document,
            world,
            warnings,
        }),
        Err(errors) => Err(RenderError::from_typst(&world, &errors, &tname, user)),
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
    typst_pdf::pdf(&compiled.document, &options).map_err(|errs| {
        RenderError::from_typst(&compiled.world, &errs, &tname, assets.template.is_some())
    })
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;
    use crate::diag::Span;
    use crate::judge::{Outcome, SafetyCheck, SignState, Verdict};
    use crate::networks::{BlockResult, Correlation, Flag, NamedResult, PlotData, Reduction};
    use crate::notebook::*;
    use crate::quantity::{Quantity, Unit};
    use crate::uncertainty::{BudgetLine, Dist, EvalType, Measured};
    use chrono::NaiveDate;
    use std::collections::BTreeMap;
    use typst::layout::{Frame, FrameItem};

    fn measured(value: f64, u: f64) -> Measured {
        Measured {
            value,
            u,
            dof: Some(24.3),
            k: 2.06,
            expanded: 2.06 * u,
            budget: vec![
                BudgetLine {
                    input: "VC@1000 Hz".into(),
                    estimate: 1.732,
                    u: 0.0061,
                    kind: EvalType::B,
                    dist: Dist::Rectangular,
                    sensitivity: -1.27e-7,
                    contribution: 0.8 * u,
                    dof: None,
                },
                BudgetLine {
                    input: "VR@1000 Hz".into(),
                    estimate: 0.9821,
                    u: 0.0012,
                    kind: EvalType::A,
                    dist: Dist::StudentT,
                    sensitivity: 2.24e-7,
                    contribution: 0.6 * u,
                    dof: Some(4.0),
                },
            ],
            mc: None,
        }
    }

    /// A synthetic record: a 220 nF (J, ±5 %) capacitor behind a 1.5 kΩ resistor, swept
    /// 200 Hz … 5 kHz. The values are made up for the renderer; they need not reduce exactly.
    pub(crate) fn sample_record(prose: &str, sign: SignState) -> Record {
        let s = Span::default();
        let c_nom = 220e-9;
        let freqs = [200.0, 500.0, 1000.0, 2000.0, 5000.0];
        let xc = |f: f64| 1.0 / (2.0 * std::f64::consts::PI * f * c_nom * 1.012);
        let mut rows = Vec::new();
        let mut plot_c = Vec::new();
        let mut plot_ph = Vec::new();
        let mut plot_pm = Vec::new();
        for &f in &freqs {
            let x = xc(f);
            rows.push(NamedResult {
                name: "XC".into(),
                f: Some(f),
                unit: Unit::Ohm,
                m: measured(x, x * 0.004),
            });
            rows.push(NamedResult {
                name: "C".into(),
                f: Some(f),
                unit: Unit::F,
                m: measured(c_nom * 1.012, 0.9e-9),
            });
            let ph = (x / 1500.0).atan();
            rows.push(NamedResult {
                name: "phase".into(),
                f: Some(f),
                unit: Unit::Rad,
                m: measured(ph, 0.004),
            });
            plot_c.push((f, c_nom * 1.012 * (1.0 + 1e-6 * f), 1.8e-9));
            plot_ph.push((f, ph, 0.008));
            plot_pm.push((f, ph + 0.01, 0.02));
        }
        let cell = |t: &str, v: f64| Cell {
            value: v,
            text: t.into(),
            span: s,
        };
        let col = |sym: &str, unit: Unit, h: &str| Column {
            symbol: sym.into(),
            unit,
            heading: h.into(),
            range: None,
            readout: Default::default(),
            span: s,
        };
        let block = ReadingsBlock {
            id: "cap-sweep".into(),
            id_span: s,
            network: Network::RC,
            network_span: Span::new(0, 0),
            parts: vec![
                Named {
                    name: "R1".into(),
                    span: s,
                },
                Named {
                    name: "C1".into(),
                    span: s,
                },
            ],
            meter: Some(Named {
                name: "dmm".into(),
                span: s,
            }),
            phase: None,
            counter: None,
            note: Some("Sweep of C1 with R1 in series, source held at 2 V.".into()),
            source: Some(2.0),
            columns: vec![
                col("f", Unit::Hz, "f/Hz"),
                col("VR", Unit::V, "VR/V"),
                col("VC", Unit::V, "VC/V"),
            ],
            rows: freqs
                .iter()
                .map(|&f| Row {
                    cells: vec![
                        cell(&format!("{f}"), f),
                        cell("0.98", 0.98),
                        cell("1.73", 1.73),
                    ],
                    span: s,
                })
                .collect(),
            span: s,
            body: String::new(),
            lot: None,
            model: Vec::new(),
            readout: Default::default(),
        };
        let mut items = Vec::new();
        items.push(Item::Prose {
            text: prose.to_string(),
            span: s,
            refs: crate::notebook::prose::read(prose, s.start),
        });
        items.push(Item::Readings(block));
        let closing = "Closing remark: C1 cited as `=cap-sweep.C`.\n";
        items.push(Item::Prose {
            text: closing.into(),
            span: s,
            refs: crate::notebook::prose::read(closing, s.start),
        });
        let mut instruments = BTreeMap::new();
        instruments.insert(
            "dmm".to_string(),
            Instrument {
                name: "dmm".into(),
                what: Some("bench multimeter, 4½ digits".into()),
                accuracy: Some(Accuracy::Relative {
                    fraction: 0.005,
                    counts: 3.0,
                }),
                resolution: Some(Quantity {
                    value: 0.001,
                    unit: Unit::V,
                }),
                bandwidth: Some(20e3),
                calibrated: NaiveDate::from_ymd_opt(2025, 6, 1),
                due: NaiveDate::from_ymd_opt(2026, 6, 1),
                reading: None,
                distribution: Distribution::Rectangular,
                ranges: Vec::new(),
                range_accuracy: Vec::new(),
                vertical: None,
                span: s,
            },
        );
        let mut parts = BTreeMap::new();
        let part = |name: &str, kind, nominal: f64, unit| Part {
            name: name.into(),
            kind,
            nominal: Some(Quantity {
                value: nominal,
                unit,
            }),
            tolerance: Some(Tolerance::Code('J', 0.05)),
            measured: None,
            measured_by: None,
            dcr: None,
            dcr_by: None,
            rating: None,
            loss: Default::default(),
            span: s,
        };
        parts.insert(
            "R1".to_string(),
            part("R1", PartKind::Resistor, 1500.0, Unit::Ohm),
        );
        parts.insert(
            "C1".to_string(),
            part("C1", PartKind::Capacitor, c_nom, Unit::F),
        );
        let source = format!("---\nrecord: BR-0042\n---\n{prose}\n");
        let notebook = Notebook {
            source,
            front: FrontMatter {
                record: "BR-0042".into(),
                title: "Film capacitor check".into(),
                date: NaiveDate::from_ymd_opt(2026, 2, 3).unwrap(),
                operator: "A. Tester".into(),
                lab: Some("Bench 3".into()),
                project: None,
                lot: Some("L-17".into()),
                environment: Some("23 °C, 40 % RH".into()),
                coverage: 0.9545,
                decision: Decision::Guarded,
                instruments,
                parts,
                template: None,
                signoff: None,
            },
            front_span: s,
            items,
            tables: Tables::default(),
            lab: None,
        };
        let c_block = NamedResult {
            name: "C".into(),
            f: None,
            unit: Unit::F,
            m: measured(c_nom * 1.012, 0.9e-9),
        };
        let reduction = Reduction {
            blocks: vec![BlockResult {
                id: "cap-sweep".into(),
                network: Network::RC,
                rows,
                results: vec![c_block],
                correlations: vec![Correlation {
                    a: "XC".into(),
                    b: "phase".into(),
                    r: -0.31,
                    f: Some(1000.0),
                }],
                flags: vec![Flag {
                    warn: false,
                    span: None,
                    message: "row 5: VC near the meter's range limit".into(),
                }],
                plot: PlotData {
                    series: vec![
                        ("C".into(), plot_c),
                        ("phase".into(), plot_ph),
                        ("phase_measured".into(), plot_pm),
                    ],
                    curves: vec![],
                    markers: vec![],
                },
            }],
            lots: Vec::new(),
        };
        Record {
            notebook,
            reduction,
            verdicts: vec![Verdict {
                block: "cap-sweep".into(),
                name: "C".into(),
                part: "C1".into(),
                nominal: c_nom,
                unit: Unit::F,
                low: c_nom * 0.95,
                high: c_nom * 1.05,
                value: c_nom * 1.012,
                expanded: 1.85e-9,
                k: 2.06,
                outcome: Outcome::Pass,
                serial: None,
                mc: None,
            }],
            lots: Vec::new(),
            safety: vec![SafetyCheck {
                block: "cap-sweep".into(),
                part: "R1".into(),
                what: "dissipation VR²/R".into(),
                value: 6.4e-4,
                rating: 0.25,
                limit: 0.125,
                unit: Unit::W,
                ok: true,
                span: None,
            }],
            sign,
            digest: "3f".repeat(32),
            source_digest: "5e".repeat(32),
            citations: BTreeMap::new(),
            derating: crate::judge::Derating::default(),
        }
    }

    fn collect_text(frame: &Frame, out: &mut String) {
        for (_, item) in frame.items() {
            match item {
                FrameItem::Group(g) => collect_text(&g.frame, out),
                FrameItem::Text(t) => {
                    out.push_str(&t.text);
                    out.push(' ');
                }
                _ => {}
            }
        }
    }

    fn text_of(c: &Compiled) -> String {
        let mut s = String::new();
        for p in c.document.pages() {
            collect_text(&p.frame, &mut s);
        }
        s
    }

    const HOSTILE: &str =
        "# Notes\n\nTried #read(\"/etc/passwd\") and #include \"x\" and $x$ and @ref, \
        a back\\\\slash, <label> and `#image(\"/etc/hosts\")` code.\n\n\
        - item with #eval(\"1+1\") and [link](#read) ![pic](../../etc/shadow)\n\n\
        | a | b |\n|---|---|\n| #x | `y` |\n\n```\n#include \"/etc/passwd\"\n```\n";

    #[test]
    fn hostile_prose_is_literal_and_the_world_serves_only_its_files() {
        let rec = sample_record(HOSTILE, SignState::Unsigned);
        let assets = Assets {
            source_name: "cap.md".into(),
            ..Assets::default()
        };
        let c = compile(&rec, &assets).expect("compiles");
        let text = text_of(&c);
        for lit in [
            "#read(",
            "/etc/passwd",
            "#include",
            "$x$",
            "@ref",
            "<label>",
            "#eval(",
            "#image(",
        ] {
            assert!(
                text.replace(' ', "").contains(&lit.replace(' ', "")),
                "`{lit}` not printed literally in:\n{text}"
            );
        }
        assert!(text.contains("back\\slash"), "backslash kept");
        // Every request is a file the world serves (no /etc/..., no x).
        for p in c.world.requested() {
            let ok = p == world::MAIN_PATH
                || p == "/data.json"
                || p == "/cap.md"
                || p == data::SUMMARY_PATH
                || p.starts_with("/prose/")
                || p.starts_with("/plots/");
            assert!(ok, "world was asked for {p}");
        }
        assert!(
            c.world.requested().iter().any(|p| p == "/cap.md"),
            "attachment read"
        );
    }

    #[test]
    fn escaped_text_prints_exactly_what_was_written() {
        // Every ASCII punctuation mark, markup look-alikes at line starts, and Unicode.
        let samples = [
            "!#$%&()*+,-./:;<=>?@[\\]^_`{|}~",
            "= not a heading",
            "- not a list",
            "+ not an enum",
            "1. not numbered",
            "/ term: no",
            "http://example.org/a_b*c*",
            "a // not a comment /* nor this */",
            "\\u{41} stays",
            "#let x = 1; #x #{ 1 + 1 } #(2)",
            "Ω µF 23 °C",
        ];
        for sample in samples {
            let main = format!(
                "#set page(width: 40cm, height: auto)\n{}",
                markup::escape_markup(sample)
            );
            let date = NaiveDate::from_ymd_opt(2026, 1, 2).unwrap();
            let w = RecordWorld::new(main, BTreeMap::new(), BTreeMap::new(), date).unwrap();
            let doc = typst::compile::<PagedDocument>(&w)
                .output
                .expect("compiles");
            let mut got = String::new();
            for p in doc.pages() {
                collect_text(&p.frame, &mut got);
            }
            assert_eq!(
                got.replace(' ', ""),
                sample.replace(' ', ""),
                "sample {sample:?}"
            );
            assert_eq!(w.requested(), vec![world::MAIN_PATH.to_string()]);
        }
    }

    #[test]
    fn citations_and_summary_are_printed() {
        let rec = sample_record("Intro.\n", SignState::Unsigned);
        let c = compile(&rec, &Assets::default()).expect("compiles");
        assert!(c.warnings.is_empty(), "{:?}", c.warnings);
        let text = text_of(&c).replace(' ', "");
        assert!(text.contains("DRAFT"));
        assert!(text.contains("BR-0042"));
        assert!(text.contains("pass"));
        assert!(text.contains("(222.6±1.9)nF(k=2.06)"), "{text}");
        assert!(text.contains("page1of"), "{text}");
    }

    #[test]
    fn a_user_template_error_names_the_template_line() {
        let mut rec = sample_record("x", SignState::Unsigned);
        rec.notebook.front.template = Some(("lab.typ".into(), Span::default()));
        let assets = Assets {
            template: Some(
                "#let d = json(\"/data.json\")\nRecord #d.record\n#undefined-thing\n".into(),
            ),
            ..Assets::default()
        };
        let err = compile(&rec, &assets).err().expect("fails");
        assert!(
            err.messages.iter().any(|m| m.starts_with("lab.typ:3:")),
            "{err}"
        );

        let assets = Assets {
            template: Some("#read(\"/etc/passwd\")\n".into()),
            ..Assets::default()
        };
        let err = compile(&rec, &assets).err().expect("refused");
        assert!(err.to_string().contains("lab.typ:1:"), "{err}");
    }

    fn embedded_files(pdf: &[u8]) -> Vec<Vec<u8>> {
        let doc = lopdf::Document::load_mem(pdf).expect("PDF parses");
        let mut out = Vec::new();
        for obj in doc.objects.values() {
            if let lopdf::Object::Stream(s) = obj {
                let is_file = s
                    .dict
                    .get(b"Type")
                    .and_then(|t| t.as_name())
                    .map(|n| n == b"EmbeddedFile")
                    .unwrap_or(false);
                if is_file {
                    let bytes = if s.dict.get(b"Filter").is_ok() {
                        s.decompressed_content().expect("inflates")
                    } else {
                        s.content.clone()
                    };
                    out.push(bytes);
                }
            }
        }
        out
    }

    fn xmp(pdf: &[u8]) -> String {
        let doc = lopdf::Document::load_mem(pdf).expect("PDF parses");
        for obj in doc.objects.values() {
            if let lopdf::Object::Stream(s) = obj {
                let is_meta = s
                    .dict
                    .get(b"Type")
                    .and_then(|t| t.as_name())
                    .map(|n| n == b"Metadata")
                    .unwrap_or(false);
                if is_meta {
                    let bytes = if s.dict.get(b"Filter").is_ok() {
                        s.decompressed_content().unwrap_or_default()
                    } else {
                        s.content.clone()
                    };
                    return String::from_utf8_lossy(&bytes).into_owned();
                }
            }
        }
        String::new()
    }

    #[test]
    fn pdf_is_deterministic_pdfa3b_and_carries_the_source() {
        let rec = sample_record("Some *prose* with `=cap-sweep.C`.\n", SignState::Unsigned);
        let raw = b"\xEF\xBB\xBF---\r\nrecord: BR-0042\r\n---\r\nexact bytes\r\n".to_vec();
        let assets = Assets {
            source_name: "cap sweep.md".into(),
            source: raw.clone(),
            ..Assets::default()
        };
        let a = render_pdf(&rec, &assets).expect("renders");
        let b = render_pdf(&rec, &assets).expect("renders");
        assert!(a.starts_with(b"%PDF-"));
        assert!(a == b, "two renders differ");
        // The notebook byte for byte, and the summary for indexes (sorted by name).
        let files = embedded_files(&a);
        assert_eq!(files.len(), 2);
        assert!(
            files.contains(&raw),
            "the notebook is attached byte for byte"
        );
        // ISO 19005-3 §6.6.4 (PDF/A identification in XMP): pdfaid:part 3, conformance B.
        let x = xmp(&a);
        let part = x.contains("<pdfaid:part>3</pdfaid:part>") || x.contains("pdfaid:part=\"3\"");
        let conf = x.contains("<pdfaid:conformance>B</pdfaid:conformance>")
            || x.contains("pdfaid:conformance=\"B\"");
        assert!(part && conf, "XMP: {x}");
        // Without raw bytes, the parsed source is attached.
        let c = render_pdf(&rec, &Assets::default()).expect("renders");
        assert!(embedded_files(&c).contains(&rec.notebook.source.as_bytes().to_vec()));
    }

    #[test]
    fn signed_and_void_records() {
        let valid = SignState::NameOnly {
            by: "B. Reviewer".into(),
            on: "2026-02-04".into(),
            digest: "3f".repeat(32),
            accepted: Some("bridge reading checked by hand".into()),
        };
        let c = compile(&sample_record("x", valid), &Assets::default()).expect("compiles");
        // Runs break at line ends: compare with single spaces.
        let t = text_of(&c).split_whitespace().collect::<Vec<_>>().join(" ");
        assert!(!t.contains("DRAFT"), "a valid record has no draft mark");
        assert!(t.contains("B. Reviewer"));
        assert!(
            t.contains("not authenticated") && t.contains("bridge reading checked by hand"),
            "{t}"
        );
        let forged = SignState::Forged {
            by: "B. Reviewer".into(),
            on: "2026-02-04".into(),
            reason: "the signature does not match".into(),
        };
        let t =
            text_of(&compile(&sample_record("x", forged), &Assets::default()).expect("compiles"));
        assert!(t.contains("DRAFT") && t.contains("NOT AUTHENTICATED"));
        let void = SignState::Void {
            by: "B. Reviewer".into(),
            on: "2026-02-04".into(),
            recorded: "ab".repeat(32),
        };
        let c = compile(&sample_record("x", void), &Assets::default()).expect("compiles");
        let t = text_of(&c);
        assert!(t.contains("DRAFT") && t.contains("VOID"));
    }

    fn crc32(bytes: &[u8]) -> u32 {
        // CRC-32 (ISO 3309 / ITU-T V.42), as PNG chunks use it (ISO/IEC 15948 Annex D).
        let mut c = 0xFFFF_FFFFu32;
        for &b in bytes {
            c ^= u32::from(b);
            for _ in 0..8 {
                c = if c & 1 != 0 {
                    0xEDB8_8320 ^ (c >> 1)
                } else {
                    c >> 1
                };
            }
        }
        !c
    }

    /// A 2×2 8-bit grey PNG: zlib stored block (RFC 1950/1951) with Adler-32.
    fn tiny_png() -> Vec<u8> {
        let raw: Vec<u8> = vec![0, 40, 200, 0, 200, 40]; // filter byte + 2 pixels per row
        let (mut a, mut b) = (1u32, 0u32);
        for &x in &raw {
            a = (a + u32::from(x)) % 65521;
            b = (b + a) % 65521;
        }
        let mut z = vec![
            0x78,
            0x01,
            0x01,
            raw.len() as u8,
            0,
            !(raw.len() as u8),
            0xFF,
        ];
        z.extend(&raw);
        z.extend(((b << 16) | a).to_be_bytes());
        let chunk = |ty: &[u8], data: &[u8]| {
            let mut c = (data.len() as u32).to_be_bytes().to_vec();
            let mut body = ty.to_vec();
            body.extend(data);
            c.extend(&body);
            c.extend(crc32(&body).to_be_bytes());
            c
        };
        let mut png = b"\x89PNG\r\n\x1a\n".to_vec();
        png.extend(chunk(b"IHDR", &[0, 0, 0, 2, 0, 0, 0, 2, 8, 0, 0, 0, 0]));
        png.extend(chunk(b"IDAT", &z));
        png.extend(chunk(b"IEND", &[]));
        png
    }

    #[test]
    fn crc_matches_the_known_check_value() {
        // The CRC-32 check value of "123456789" is 0xCBF43926 (common practice, e.g. the
        // catalogue of parametrised CRC algorithms).
        assert_eq!(crc32(b"123456789"), 0xCBF4_3926);
    }

    #[test]
    fn images_from_assets_embed_and_missing_ones_print_alt_text() {
        let png = tiny_png();
        let rec = sample_record(
            "![the setup](img/setup.png)\n\n![lost](img/lost.png)\n",
            SignState::Unsigned,
        );
        let mut assets = Assets::default();
        assets.images.insert("img/setup.png".into(), png);
        let pdf = render_pdf(&rec, &assets).expect("renders with a PNG under PDF/A-3b");
        assert!(pdf.len() > 1000);
        let c = compile(&rec, &assets).expect("compiles");
        let t = text_of(&c);
        assert!(t.contains("lost") && t.contains("not available"), "{t}");
        assert!(c.world.requested().iter().any(|p| p == "/images/0.png"));
    }
}
