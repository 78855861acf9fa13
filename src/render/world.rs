//! The typst world of one render: it serves the template (as main), the generated files and
//! nothing else. Every other path is refused, which is the sandbox. Fonts and the standard
//! library are built once per process.

use std::collections::BTreeMap;
use std::sync::{LazyLock, Mutex};

use chrono::{Datelike, NaiveDate};
use typst::diag::{FileError, FileResult};
use typst::foundations::{Bytes, Datetime, Duration};
use typst::syntax::{FileId, RootedPath, Source, VirtualPath, VirtualRoot};
use typst::text::{Font, FontBook};
use typst::utils::LazyHash;
use typst::{Library, LibraryExt, World};
use typst_kit::fonts::FontStore;

/// The virtual path of the main file (the template).
pub const MAIN_PATH: &str = "/main.typ";

static FONTS: LazyLock<FontStore> = LazyLock::new(|| {
    let mut store = FontStore::new();
    store.extend(typst_kit::fonts::embedded());
    store
});

/// An embedded font by family name (regular, upright), for metrics outside typst.
pub fn embedded_font(family: &str) -> Option<Font> {
    let index = FONTS
        .book()
        .select(&family.to_lowercase(), typst::text::FontVariant::default())?;
    FONTS.font(index)
}

static LIBRARY: LazyLock<LazyHash<Library>> = LazyLock::new(|| LazyHash::new(Library::default()));

/// Builds the fonts and the standard library now (they are otherwise built by the first
/// render), so that a caller can do it on a thread of its own while it reduces a notebook.
pub fn warm_up() {
    LazyLock::force(&FONTS);
    LazyLock::force(&LIBRARY);
}

/// The id of a project-rooted virtual path such as `/data.json`.
pub fn file_id(path: &str) -> Option<FileId> {
    let vpath = VirtualPath::new(path).ok()?;
    Some(RootedPath::new(VirtualRoot::Project, vpath).intern())
}

/// Canonical text of a project-rooted file id (`/dir/name`), or None for package files.
fn id_path(id: FileId) -> Option<String> {
    match id.root() {
        VirtualRoot::Project => Some(id.vpath().get_with_slash().to_string()),
        VirtualRoot::Package(_) => None,
    }
}

pub struct RecordWorld {
    main: Source,
    /// Typst sources other than main (generated prose markup), by virtual path.
    sources: BTreeMap<String, Source>,
    /// Byte files (data, plots, images, the notebook source), by virtual path.
    files: BTreeMap<String, Bytes>,
    today: Datetime,
    /// Every path the compiler asked for, served or not, in order.
    log: Mutex<Vec<String>>,
}

impl RecordWorld {
    /// `template` becomes `/main.typ`; `sources` are further typst files; `files` byte files.
    /// Paths are project-rooted (`/prose/0.typ`). Paths that do not parse are dropped.
    pub fn new(
        template: String,
        sources: BTreeMap<String, String>,
        files: BTreeMap<String, Vec<u8>>,
        date: NaiveDate,
    ) -> Option<Self> {
        let main_id = file_id(MAIN_PATH)?;
        let mut src_map = BTreeMap::new();
        for (path, text) in sources {
            if let Some(id) = file_id(&path) {
                if let Some(key) = id_path(id) {
                    src_map.insert(key, Source::new(id, text));
                }
            }
        }
        let mut file_map = BTreeMap::new();
        for (path, bytes) in files {
            if let Some(key) = file_id(&path).and_then(id_path) {
                file_map.insert(key, Bytes::new(bytes));
            }
        }
        let month = u8::try_from(date.month()).ok()?;
        let day = u8::try_from(date.day()).ok()?;
        let today = Datetime::from_ymd(date.year(), month, day)?;
        Some(RecordWorld {
            main: Source::new(main_id, template),
            sources: src_map,
            files: file_map,
            today,
            log: Mutex::new(Vec::new()),
        })
    }

    /// The paths requested so far (source or file), in order of request.
    pub fn requested(&self) -> Vec<String> {
        match self.log.lock() {
            Ok(g) => g.clone(),
            Err(p) => p.into_inner().clone(),
        }
    }

    fn note(&self, id: FileId) {
        let text = match id_path(id) {
            Some(p) => p,
            None => format!("{id:?}"),
        };
        match self.log.lock() {
            Ok(mut g) => g.push(text),
            Err(p) => p.into_inner().push(text),
        }
    }

    /// Byte range → 1-based (line, column) in a served source.
    pub fn line_col(&self, id: FileId, byte: usize) -> Option<(usize, usize)> {
        let src = self.lookup_source(id)?;
        let (l, c) = src.lines().byte_to_line_column(byte)?;
        Some((l + 1, c + 1))
    }

    /// The virtual path of a served id.
    pub fn path_of(&self, id: FileId) -> Option<String> {
        id_path(id)
    }

    /// A served source (template or generated prose), for mapping errors back.
    pub fn served_source(&self, id: FileId) -> Option<Source> {
        self.lookup_source(id)
    }

    fn lookup_source(&self, id: FileId) -> Option<Source> {
        if id == self.main.id() {
            return Some(self.main.clone());
        }
        let path = id_path(id)?;
        self.sources.get(&path).cloned()
    }
}

impl World for RecordWorld {
    fn library(&self) -> &LazyHash<Library> {
        &LIBRARY
    }

    fn book(&self) -> &LazyHash<FontBook> {
        FONTS.book()
    }

    fn main(&self) -> FileId {
        self.main.id()
    }

    fn source(&self, id: FileId) -> FileResult<Source> {
        self.note(id);
        match self.lookup_source(id) {
            Some(s) => Ok(s),
            None => {
                let served_bytes = id_path(id).is_some_and(|p| self.files.contains_key(&p));
                if served_bytes {
                    Err(FileError::NotSource)
                } else {
                    Err(FileError::AccessDenied)
                }
            }
        }
    }

    fn file(&self, id: FileId) -> FileResult<Bytes> {
        self.note(id);
        if let Some(s) = self.lookup_source(id) {
            return Ok(Bytes::from_string(s));
        }
        let path = id_path(id).ok_or(FileError::AccessDenied)?;
        self.files
            .get(&path)
            .cloned()
            .ok_or(FileError::AccessDenied)
    }

    fn font(&self, index: usize) -> Option<Font> {
        FONTS.font(index)
    }

    fn today(&self, _offset: Option<Duration>) -> Option<Datetime> {
        Some(self.today)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn world() -> RecordWorld {
        let mut sources = BTreeMap::new();
        sources.insert("/prose/0.typ".to_string(), "hello".to_string());
        let mut files = BTreeMap::new();
        files.insert("/data.json".to_string(), b"{}".to_vec());
        let date = NaiveDate::from_ymd_opt(2026, 3, 14).unwrap();
        RecordWorld::new("main".into(), sources, files, date).unwrap()
    }

    #[test]
    fn serves_only_what_it_was_given() {
        let w = world();
        assert!(w.source(w.main()).is_ok());
        assert!(w.source(file_id("/prose/0.typ").unwrap()).is_ok());
        assert!(w.file(file_id("/data.json").unwrap()).is_ok());
        for p in ["/etc/passwd", "/prose/1.typ", "/data.json.bak", "/x.typ"] {
            let id = file_id(p).unwrap();
            assert_eq!(w.file(id), Err(FileError::AccessDenied), "{p}");
            assert!(matches!(w.source(id), Err(FileError::AccessDenied)), "{p}");
        }
        assert!(matches!(
            w.source(file_id("/data.json").unwrap()),
            Err(FileError::NotSource)
        ));
        // Every request was logged.
        assert!(w.requested().iter().any(|p| p == "/etc/passwd"));
    }

    #[test]
    fn today_is_the_notebook_date() {
        let w = world();
        let d = w.today(None).unwrap();
        assert_eq!(
            (d.year(), d.month(), d.day()),
            (Some(2026), Some(3), Some(14))
        );
        assert!(w
            .book()
            .families()
            .any(|(name, _)| name == "Libertinus Serif"));
        assert!(w
            .book()
            .families()
            .any(|(name, _)| name == "DejaVu Sans Mono"));
    }
}

/// Typesets `template` over `files` (its `/data.json` and any images) to PDF bytes: the
/// small documents beside the records (the archive index, a trend). `what` names it in errors.
pub fn typeset_pdf(
    template: &str,
    files: BTreeMap<String, Vec<u8>>,
    date: NaiveDate,
    ident: &str,
    what: &str,
) -> Result<Vec<u8>, String> {
    let world = RecordWorld::new(template.to_string(), BTreeMap::new(), files, date)
        .ok_or("cannot set up the typesetting world")?;
    let first = |e: &[typst::diag::SourceDiagnostic]| {
        e.first()
            .map(|d| d.message.to_string())
            .unwrap_or_else(|| "?".into())
    };
    let doc = typst::compile::<typst_layout::PagedDocument>(&world)
        .output
        .map_err(|e| format!("{what} could not be typeset: {}", first(&e)))?;
    let options = typst_pdf::PdfOptions {
        ident: typst::foundations::Smart::Custom(ident.into()),
        ..typst_pdf::PdfOptions::default()
    };
    typst_pdf::pdf(&doc, &options)
        .map_err(|e| format!("{what} could not be written as PDF: {}", first(&e)))
}
