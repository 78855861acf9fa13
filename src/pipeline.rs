//! The edges: read a notebook and the files it names, run parse → reduce → judge → render,
//! and write the PDF atomically. All file system access of a build happens here.

use crate::diag::{self, Diagnostic, Span};
use crate::judge::{self, Record};
use crate::networks;
use crate::notebook::{self, register::Register, Item};
use crate::render::{self, Assets, RenderError};
use std::io::Write;
use std::path::{Component, Path, PathBuf};

/// Why one notebook did not build. Other notebooks of a batch go on.
#[derive(Debug, Clone)]
pub enum Failure {
    Io {
        path: PathBuf,
        message: String,
    },
    Notebook {
        path: PathBuf,
        source: String,
        diags: Vec<Diagnostic>,
        /// Table files (`table:`) that spans past the notebook's end point into.
        tables: Vec<diag::Extra>,
    },
    Render {
        path: PathBuf,
        message: String,
    },
}

impl Failure {
    /// The full report: file:line:col, snippet, expected / found.
    pub fn report(&self) -> String {
        match self {
            Failure::Io { path, message } => format!("error: {}: {message}\n", path.display()),
            Failure::Notebook {
                path,
                source,
                diags,
                tables,
            } => diag::render_in(&path.display().to_string(), source, tables, diags),
            Failure::Render { path, message } => {
                format!(
                    "error: {}: the report could not be typeset: {message}\n",
                    path.display()
                )
            }
        }
    }

    pub fn path(&self) -> &Path {
        match self {
            Failure::Io { path, .. }
            | Failure::Notebook { path, .. }
            | Failure::Render { path, .. } => path,
        }
    }

    /// One line for summaries: the first problem with its location.
    pub fn summary(&self) -> String {
        match self {
            Failure::Notebook {
                path,
                source,
                diags,
                tables,
            } => match diags.first() {
                Some(d) => {
                    let more = if diags.len() > 1 {
                        format!(" (+{} more)", diags.len() - 1)
                    } else {
                        String::new()
                    };
                    format!(
                        "{}{more}",
                        diag::one_line_in(&path.display().to_string(), source, tables, d)
                    )
                }
                None => format!("{}: invalid notebook", path.display()),
            },
            other => other.report().trim_end().to_string(),
        }
    }
}

fn io_fail(path: &Path, e: impl std::fmt::Display) -> Failure {
    Failure::Io {
        path: path.to_path_buf(),
        message: e.to_string(),
    }
}

/// The largest notebook read, in bytes (from the file's metadata, then bounded while reading).
/// A 100 000-row readings block is about 2.5 MB.
pub const NOTEBOOK_MAX_BYTES: u64 = 16 * 1024 * 1024;
/// The largest raster image (PNG, JPEG, GIF, WebP) a notebook may name, in bytes.
pub const IMAGE_MAX_BYTES: u64 = 32 * 1024 * 1024;
/// The largest SVG image, in bytes (typst parses SVG text into a tree).
pub const SVG_MAX_BYTES: u64 = 4 * 1024 * 1024;
/// The largest user template, in bytes.
pub const TEMPLATE_MAX_BYTES: u64 = 1024 * 1024;
/// The most pixels (width × height, from the image header) of one raster image: a decoded
/// pixel takes 4 bytes or more, so this bounds one image at about 200 MB of memory.
pub const IMAGE_MAX_PIXELS: u64 = 50_000_000;

/// Why a file may not be opened or was not read.
#[derive(Debug)]
pub enum Refusal {
    /// The path as written leaves the folder (root, `..`, a drive or a scheme).
    Outside,
    /// The path resolves outside the folder through a symbolic link.
    OutsideByLink,
    Missing,
    /// Not a regular file: what it is instead.
    NotRegular(&'static str),
    TooLarge {
        size: u64,
        cap: u64,
    },
    Unreadable(std::io::Error),
}

impl std::fmt::Display for Refusal {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Refusal::Outside => write!(f, "points outside the notebook's folder"),
            Refusal::OutsideByLink => {
                write!(f, "resolves (through a link) outside the notebook's folder")
            }
            Refusal::Missing => write!(f, "does not exist"),
            Refusal::NotRegular(what) => write!(f, "is {what}, not a regular file"),
            Refusal::TooLarge { size, cap } => {
                write!(f, "is {size} bytes, over the limit of {cap} bytes")
            }
            Refusal::Unreadable(e) => write!(f, "could not be read: {e}"),
        }
    }
}

fn kind_of(ft: std::fs::FileType) -> Option<&'static str> {
    if ft.is_file() {
        return None;
    }
    if ft.is_dir() {
        return Some("a folder");
    }
    #[cfg(unix)]
    {
        use std::os::unix::fs::FileTypeExt;
        if ft.is_fifo() {
            return Some("a named pipe (FIFO)");
        }
        if ft.is_char_device() || ft.is_block_device() {
            return Some("a device");
        }
        if ft.is_socket() {
            return Some("a socket");
        }
    }
    Some("a special file")
}

/// Reads a regular file of at most `cap` bytes: the type and size come from its metadata
/// before it is opened (so a FIFO or a device is never opened), are checked again on the open
/// file, and the read stops after `cap + 1` bytes in case the file grows meanwhile.
pub fn read_regular(path: &Path, cap: u64) -> Result<Vec<u8>, Refusal> {
    use std::io::Read;
    let meta = std::fs::metadata(path).map_err(|e| match e.kind() {
        std::io::ErrorKind::NotFound => Refusal::Missing,
        _ => Refusal::Unreadable(e),
    })?;
    let check = |m: &std::fs::Metadata| match kind_of(m.file_type()) {
        Some(what) => Err(Refusal::NotRegular(what)),
        None if m.len() > cap => Err(Refusal::TooLarge { size: m.len(), cap }),
        None => Ok(()),
    };
    check(&meta)?;
    let mut opts = std::fs::OpenOptions::new();
    opts.read(true);
    #[cfg(unix)]
    {
        // Should the path be swapped for a FIFO after the check, opening it does not wait.
        use std::os::unix::fs::OpenOptionsExt;
        opts.custom_flags(libc::O_NONBLOCK);
    }
    let file = opts.open(path).map_err(Refusal::Unreadable)?;
    check(&file.metadata().map_err(Refusal::Unreadable)?)?;
    let mut bytes = Vec::with_capacity(usize::try_from(meta.len()).unwrap_or(0));
    file.take(cap + 1)
        .read_to_end(&mut bytes)
        .map_err(Refusal::Unreadable)?;
    if bytes.len() as u64 > cap {
        return Err(Refusal::TooLarge {
            size: bytes.len() as u64,
            cap,
        });
    }
    Ok(bytes)
}

/// The one gate for a file a notebook names: `rel` must be a plain relative path inside
/// `folder` (already canonical), stay inside it after links are resolved, and be a regular
/// file of at most `cap` bytes. Nothing is opened before all of that holds.
pub fn read_named(folder: &Path, rel: &str, cap: u64) -> Result<Vec<u8>, Refusal> {
    if !is_inside(rel) {
        return Err(Refusal::Outside);
    }
    let canon = folder
        .join(rel)
        .canonicalize()
        .map_err(|e| match e.kind() {
            std::io::ErrorKind::NotFound => Refusal::Missing,
            _ => Refusal::Unreadable(e),
        })?;
    if !canon.starts_with(folder) {
        return Err(Refusal::OutsideByLink);
    }
    read_regular(&canon, cap)
}

/// The folder of a notebook, canonical: named files are resolved against it.
pub fn notebook_folder(path: &Path) -> std::io::Result<PathBuf> {
    match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.canonicalize(),
        _ => Path::new(".").canonicalize(),
    }
}

/// The byte cap of an image by the name it is given: SVG is text, the rest raster.
pub fn image_cap(rel: &str) -> u64 {
    if rel.to_ascii_lowercase().ends_with(".svg") {
        SVG_MAX_BYTES
    } else {
        IMAGE_MAX_BYTES
    }
}

/// Is this image one typst will decode within the limits? Raster formats are recognised by
/// their header (width and height read from it, never decoded); SVG by its name.
pub fn check_image(rel: &str, bytes: &[u8]) -> Result<(), String> {
    use imagesize::ImageType;
    match imagesize::image_type(bytes) {
        Ok(ImageType::Png | ImageType::Jpeg | ImageType::Gif | ImageType::Webp) => {
            let size = imagesize::blob_size(bytes)
                .map_err(|e| format!("has a header that could not be read ({e})"))?;
            let pixels = (size.width as u64).saturating_mul(size.height as u64);
            if pixels > IMAGE_MAX_PIXELS {
                return Err(format!(
                    "is {} × {} pixels ({:.1} megapixels), over the limit of {} megapixels",
                    size.width,
                    size.height,
                    pixels as f64 / 1e6,
                    IMAGE_MAX_PIXELS / 1_000_000
                ));
            }
            Ok(())
        }
        Ok(other) => Err(format!(
            "is in a format the report cannot show ({other:?}); use PNG, JPEG, GIF, WebP or SVG"
        )),
        Err(_) if image_cap(rel) == SVG_MAX_BYTES => {
            if std::str::from_utf8(bytes).is_err() {
                return Err("is named .svg but is not UTF-8 text".into());
            }
            Ok(())
        }
        Err(_) => Err(
            "is not in an image format the report can show (PNG, JPEG, GIF, WebP or SVG)".into(),
        ),
    }
}

/// A notebook read from disk: its bytes as read and its text.
pub struct Source {
    pub path: PathBuf,
    pub raw: Vec<u8>,
    pub text: String,
}

/// Reads a notebook's bytes through [`read_regular`] (a regular file under
/// [`NOTEBOOK_MAX_BYTES`]).
pub fn read_notebook_bytes(path: &Path) -> Result<Vec<u8>, Failure> {
    read_regular(path, NOTEBOOK_MAX_BYTES).map_err(|r| {
        let msg = match r {
            Refusal::Missing => "no such file".to_string(),
            Refusal::TooLarge { size, cap } => format!(
                "the notebook is {size} bytes, over the limit of {cap} bytes ({} MiB)",
                cap / (1024 * 1024)
            ),
            other => format!("the notebook {other}"),
        };
        io_fail(path, msg)
    })
}

/// Reads a notebook; bytes that are not UTF-8 are reported at their line and column.
pub fn read_source(path: &Path) -> Result<Source, Failure> {
    let raw = read_notebook_bytes(path)?;
    match String::from_utf8(raw.clone()) {
        Ok(text) => Ok(Source {
            path: path.to_path_buf(),
            raw,
            text,
        }),
        Err(e) => {
            let at = e.utf8_error().valid_up_to();
            let lossy = String::from_utf8_lossy(&raw).into_owned();
            let start = lossy
                .char_indices()
                .nth(String::from_utf8_lossy(&raw[..at]).chars().count())
                .map_or(lossy.len(), |(i, _)| i);
            let d = Diagnostic::new(
                Span::new(start, start + 1),
                "the notebook is not valid UTF-8 text",
            )
            .expected("UTF-8 text")
            .found(format!(
                "the byte 0x{:02x}",
                raw.get(at).copied().unwrap_or(0)
            ))
            .help("save the notebook as UTF-8 in your editor");
            Err(Failure::Notebook {
                path: path.to_path_buf(),
                source: lossy,
                diags: vec![d],
                tables: Vec::new(),
            })
        }
    }
}

/// The name of a lab register file.
pub const LAB_FILE: &str = "lab.yaml";

/// A lab register as read from disk.
#[derive(Debug, Clone)]
pub struct Lab {
    /// Where it was found (in a canonical folder).
    pub path: PathBuf,
    /// Its bytes, for the build key.
    pub raw: Vec<u8>,
    pub register: Register,
}

impl Lab {
    /// The register's folder, against which its `template` and `signers` are resolved.
    pub fn folder(&self) -> &Path {
        self.path.parent().unwrap_or(Path::new("/"))
    }
}

/// The nearest `lab.yaml` in `folder` (canonical) or a folder above it, up to the root.
pub fn find_lab(folder: &Path) -> Option<PathBuf> {
    folder
        .ancestors()
        .map(|d| d.join(LAB_FILE))
        .find(|p| std::fs::symlink_metadata(p).is_ok())
}

/// Reads and parses a lab register; a broken one is reported at its own line and column.
pub fn load_lab(path: &Path) -> Result<Lab, Failure> {
    let cap = notebook::register::MAX_REGISTER as u64;
    let raw =
        read_regular(path, cap).map_err(|r| io_fail(path, format!("the lab register {r}")))?;
    let text = String::from_utf8(raw.clone())
        .map_err(|_| io_fail(path, "the lab register is not UTF-8 text"))?;
    let register =
        notebook::register::parse_register(&text).map_err(|diags| Failure::Notebook {
            path: path.to_path_buf(),
            source: text.clone(),
            diags,
            tables: Vec::new(),
        })?;
    Ok(Lab {
        path: path.to_path_buf(),
        raw,
        register,
    })
}

/// The lab register that applies to the notebook (or PDF) at `path`, if there is one.
pub fn lab_for(path: &Path) -> Result<Option<Lab>, Failure> {
    let folder = notebook_folder(path).map_err(|e| io_fail(path, e))?;
    find_lab(&folder).map(|p| load_lab(&p)).transpose()
}

/// Parse, reduce and judge one notebook's text. Pure: no file system access (a block that
/// reads its table from a file is reported: use [`analyse_file`] or [`analyse_with`]).
pub fn analyse_text(path: &Path, text: &str) -> Result<Record, Failure> {
    analyse_with(path, text, None, |_| Ok(Vec::new()))
}

/// Table files as [`notebook::read_tables`] takes them: (path as written, name, bytes).
pub type TableBytes = Vec<(String, String, Vec<u8>)>;

/// Parse with the lab register `lab`, read the table files `tables` hands over for the parsed
/// notebook, reduce and judge. Pure apart from what `tables` does.
pub fn analyse_with(
    path: &Path,
    text: &str,
    lab: Option<&Lab>,
    tables: impl FnOnce(&notebook::Notebook) -> Result<TableBytes, Vec<Diagnostic>>,
) -> Result<Record, Failure> {
    let fail = |nb: &notebook::Notebook, diags| Failure::Notebook {
        path: path.to_path_buf(),
        source: nb.source.clone(),
        diags,
        tables: nb.extras(),
    };
    let nb = notebook::parse_with(text, lab.map(|l| &l.register)).map_err(|diags| {
        Failure::Notebook {
            path: path.to_path_buf(),
            source: text.to_string(),
            diags,
            tables: Vec::new(),
        }
    })?;
    let files = tables(&nb).map_err(|d| fail(&nb, d))?;
    let (nb, d) = notebook::read_tables(nb, files);
    if !d.is_empty() {
        return Err(fail(&nb, d));
    }
    let red = networks::reduce(&nb).map_err(|d| fail(&nb, d))?;
    let extras = nb.extras();
    let src = nb.source.clone();
    judge::judge(nb, red).map_err(|diags| Failure::Notebook {
        path: path.to_path_buf(),
        source: src,
        diags,
        tables: extras,
    })
}

/// [`analyse_with`] for a notebook on disk: each table file it names is read through
/// [`read_named`] (inside the notebook's folder, links included, at most
/// [`notebook::TABLE_MAX_BYTES`]), as images are.
pub fn analyse_file(src: &Source, lab: Option<&Lab>) -> Result<Record, Failure> {
    analyse_with(&src.path, &src.text, lab, |nb| {
        read_table_files(&src.path, nb)
    })
}

/// The bytes of every table file `nb` names, or a diagnostic at each `table:` refused.
pub fn read_table_files(
    path: &Path,
    nb: &notebook::Notebook,
) -> Result<TableBytes, Vec<Diagnostic>> {
    let refs = notebook::table_refs(nb);
    if refs.is_empty() {
        return Ok(Vec::new());
    }
    let folder = notebook_folder(path).map_err(|e| {
        vec![Diagnostic::new(
            refs[0].1,
            format!("the notebook's folder cannot be read: {e}"),
        )
        .expected("a readable folder")]
    })?;
    let mut files = Vec::new();
    let mut diags = Vec::new();
    for (rel, span) in refs {
        match read_named(&folder, &rel, notebook::TABLE_MAX_BYTES) {
            Ok(bytes) => {
                let name = match path.parent() {
                    Some(p) if !p.as_os_str().is_empty() => p.join(&rel).display().to_string(),
                    _ => rel.clone(),
                };
                files.push((rel, name, bytes));
            }
            Err(r) => diags.push(
                Diagnostic::new(span, format!("table file `{rel}` {r}"))
                    .expected("a CSV or TSV file relative to the notebook, inside its folder")
                    .found(rel.clone())
                    .help("copy the file next to the notebook (or into a subfolder) and name it by a relative path"),
            ),
        }
    }
    if diags.is_empty() {
        Ok(files)
    } else {
        Err(diags)
    }
}

/// The most prose (Markdown outside readings blocks) a notebook may hold, in bytes. Typesetting
/// prose costs about 1.7 s and 300 MB per MB, so this bounds it near 1 s and 150 MB.
pub const PROSE_MAX_BYTES: usize = 512 * 1024;
pub use crate::notebook::prose::PARAGRAPH_MAX_BYTES;

/// Prose over [`PROSE_MAX_BYTES`] in all or a paragraph over [`PARAGRAPH_MAX_BYTES`], each
/// reported where it starts. Readings blocks are not prose and have no such limit.
pub fn prose_limits(items: &[Item]) -> Vec<Diagnostic> {
    let mut diags = Vec::new();
    let mut total = 0usize;
    for item in items {
        let Item::Prose { text, span, refs } = item else {
            continue;
        };
        if let Some((at, run)) = refs.long_paragraph {
            diags.push(
                Diagnostic::new(
                    Span::new(at, at + 1),
                    "this paragraph is too long to typeset",
                )
                .expected(format!(
                    "at most {} KiB of text in one paragraph, heading, list item or table cell",
                    PARAGRAPH_MAX_BYTES / 1024
                ))
                .found(format!("more than {} KiB without a blank line", run / 1024))
                .help("break the text into paragraphs (a blank line between them)"),
            );
        }
        total += text.len();
        if total > PROSE_MAX_BYTES {
            let mut cut = text.len().saturating_sub(total - PROSE_MAX_BYTES);
            while !text.is_char_boundary(cut) {
                cut -= 1;
            }
            let at = span.start + cut;
            diags.push(
                Diagnostic::new(
                    Span::new(at, at),
                    "the notebook holds too much prose to typeset",
                )
                .expected(format!(
                    "at most {} KiB of prose in all",
                    PROSE_MAX_BYTES / 1024
                ))
                .found(format!(
                    "{} KiB up to the end of this run of prose",
                    total / 1024
                ))
                .help(
                    "move long text into a separate document and keep the notebook to the record",
                ),
            );
            break;
        }
    }
    diags
}

/// Is `rel` a plain relative path that stays inside its folder (no root, no `..`, no scheme)?
fn is_inside(rel: &str) -> bool {
    if rel.is_empty() || rel.contains("://") || rel.starts_with('/') || rel.starts_with('\\') {
        return false;
    }
    let p = Path::new(rel);
    if p.has_root() || rel.get(1..2) == Some(":") {
        return false;
    }
    p.components()
        .all(|c| matches!(c, Component::Normal(_) | Component::CurDir))
}

/// Images named in the prose of these items, as (path as written, span).
pub fn image_refs_in(items: &[Item]) -> Vec<(String, Span)> {
    crate::notebook::prose_refs(items)
        .flat_map(|r| r.images.iter().cloned())
        .collect()
}

/// Images named in the prose, as (path as written, span).
pub fn image_refs(rec: &Record) -> Vec<(String, Span)> {
    image_refs_in(&rec.notebook.items)
}

/// Gathers what the renderer may use: images inside the notebook's folder and a user
/// template, each read through [`read_named`] and each image checked by [`check_image`].
pub fn gather_assets(src: &Source, rec: &Record) -> Result<Assets, Failure> {
    gather_assets_with(src, rec, None)
}

/// [`gather_assets`], and the register's default template when the notebook takes it.
pub fn gather_assets_with(
    src: &Source,
    rec: &Record,
    lab: Option<&Lab>,
) -> Result<Assets, Failure> {
    let mut assets = gather_notebook_assets(src, rec)?;
    let from_register = rec.notebook.lab.as_ref().and_then(|u| u.template.as_ref());
    if let (Some(lab), Some((tpl, span))) = (lab, from_register) {
        assets.template = Some(register_template(lab, tpl, *span)?);
    }
    Ok(assets)
}

/// The register's `defaults.template`, read inside the register's folder.
fn register_template(lab: &Lab, tpl: &str, span: Span) -> Result<String, Failure> {
    let refuse = |why: String| {
        let d = Diagnostic::new(span, format!("template `{tpl}` {why}"))
            .expected("a Typst template file, relative to lab.yaml, inside its folder");
        Failure::Notebook {
            path: lab.path.clone(),
            source: String::from_utf8_lossy(&lab.raw).into_owned(),
            diags: vec![d],
            tables: Vec::new(),
        }
    };
    let bytes =
        read_named(lab.folder(), tpl, TEMPLATE_MAX_BYTES).map_err(|r| refuse(r.to_string()))?;
    String::from_utf8(bytes).map_err(|_| refuse("is not UTF-8 text".into()))
}

fn gather_notebook_assets(src: &Source, rec: &Record) -> Result<Assets, Failure> {
    let canon_dir = notebook_folder(&src.path).map_err(|e| io_fail(&src.path, e))?;
    let mut assets = Assets {
        source_name: src
            .path
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_else(|| "notebook.md".into()),
        ..Assets::default()
    };
    let mut diags = Vec::new();
    for (rel, span) in image_refs(rec) {
        if assets.images.contains_key(&rel) {
            continue;
        }
        let refuse = |why: &str| {
            Diagnostic::new(span, format!("image `{rel}` {why}"))
                .expected("a PNG, JPEG, GIF, WebP or SVG file relative to the notebook, inside its folder")
                .found(rel.clone())
                .help("copy the image next to the notebook (or into a subfolder) and name it by a relative path")
        };
        match read_named(&canon_dir, &rel, image_cap(&rel)) {
            Ok(bytes) => match check_image(&rel, &bytes) {
                Ok(()) => {
                    assets.images.insert(rel.clone(), bytes);
                }
                Err(why) => diags.push(refuse(&why)),
            },
            Err(r) => diags.push(refuse(&r.to_string())),
        }
    }
    if let Some((tpl, span)) = &rec.notebook.front.template {
        // A template is typeset into the record, so it obeys the same rule as images.
        let refuse = |why: String| {
            Diagnostic::new(*span, format!("template `{tpl}` {why}"))
                .expected("a Typst template file, relative to the notebook, inside its folder")
                .found(tpl.clone())
                .help("copy the lab's template next to the notebook (or into a subfolder)")
        };
        match read_named(&canon_dir, tpl, TEMPLATE_MAX_BYTES) {
            Ok(bytes) => match String::from_utf8(bytes) {
                Ok(t) => assets.template = Some(t),
                Err(_) => diags.push(refuse("is not UTF-8 text".into())),
            },
            Err(r) => diags.push(refuse(r.to_string())),
        }
    }
    if diags.is_empty() {
        Ok(assets)
    } else {
        Err(Failure::Notebook {
            path: src.path.clone(),
            source: rec.notebook.source.clone(),
            diags,
            tables: Vec::new(),
        })
    }
}

/// Default output: `<stem>.pdf` beside the notebook.
pub fn default_output(path: &Path) -> PathBuf {
    path.with_extension("pdf")
}

/// The identity of an existing file: (device, inode).
#[cfg(unix)]
fn file_identity(path: &Path) -> Option<FileId> {
    use std::os::unix::fs::MetadataExt;
    let meta = std::fs::metadata(path).ok()?;
    Some((meta.dev(), meta.ino()))
}

/// The identity of an existing file: its canonical path.
#[cfg(not(unix))]
fn file_identity(path: &Path) -> Option<FileId> {
    path.canonicalize().ok()
}

/// May a build write `out`? Refused, before anything is written: an output that is one of
/// the `inputs` (also through a link or `..`), one that is not a regular file, and an
/// existing file that is not a PDF (does not start with `%PDF-`). benchrec replaces only PDFs.
pub fn check_output(out: &Path, inputs: &[&Path]) -> Result<(), Failure> {
    check_output_against(out, &Inputs::of(inputs))
}

/// The notebooks of a build with their file identities, taken once.
pub struct Inputs<'a>(Vec<(&'a Path, Option<FileId>)>);

#[cfg(unix)]
type FileId = (u64, u64);
#[cfg(not(unix))]
type FileId = PathBuf;

impl<'a> Inputs<'a> {
    pub fn of(paths: &[&'a Path]) -> Self {
        Inputs(paths.iter().map(|p| (*p, file_identity(p))).collect())
    }
}

/// [`check_output`] against inputs whose identities are already known.
pub fn check_output_against(out: &Path, inputs: &Inputs) -> Result<(), Failure> {
    let refuse = |why: String| {
        Err(io_fail(
            out,
            format!("{why}; nothing was written (name a new .pdf file or a folder with -o)"),
        ))
    };
    let Ok(meta) = std::fs::metadata(out) else {
        return Ok(());
    };
    if let Some(id) = file_identity(out) {
        if let Some((nb, _)) = inputs.0.iter().find(|(_, i)| i.as_ref() == Some(&id)) {
            return refuse(format!(
                "the output is the notebook {} itself",
                nb.display()
            ));
        }
    }
    if let Some(what) = kind_of(meta.file_type()) {
        return refuse(format!("the output is {what}, not a PDF file"));
    }
    let mut head = Vec::new();
    if let Ok(f) = std::fs::File::open(out) {
        use std::io::Read;
        let _ = f.take(5).read_to_end(&mut head);
    }
    if head != b"%PDF-" {
        return refuse("the output exists and is not a PDF".to_string());
    }
    Ok(())
}

/// Name prefix of the temporary files [`write_atomic`] leaves while it writes.
const TEMP_PREFIX: &str = ".benchrec-";
/// A temporary file in the older naming (no writer pid) is stale after this long.
const TEMP_STALE_SECS: u64 = 10 * 60;

/// Is the process `pid` still running (on this machine)?
fn process_alive(pid: u32) -> bool {
    #[cfg(unix)]
    {
        let Ok(p) = libc::pid_t::try_from(pid) else {
            return false;
        };
        // Signal 0 only checks: success or EPERM means the process exists.
        let r = unsafe { libc::kill(p, 0) };
        r == 0 || std::io::Error::last_os_error().raw_os_error() == Some(libc::EPERM)
    }
    #[cfg(not(unix))]
    {
        let _ = pid;
        true
    }
}

/// Removes the temporary files that killed builds left in `dir`: those named with a writer
/// pid (`.benchrec-p<pid>-….tmp`) whose process is gone, and older-style ones
/// (`.benchrec-….tmp`) untouched for ten minutes. A file a running build writes is kept.
/// Returns how many were removed.
pub fn sweep_temps(dir: &Path) -> usize {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return 0;
    };
    let mut removed = 0;
    for e in entries.flatten() {
        let name = e.file_name().to_string_lossy().into_owned();
        let Some(mid) = name
            .strip_prefix(TEMP_PREFIX)
            .and_then(|n| n.strip_suffix(".tmp"))
        else {
            continue;
        };
        let Ok(meta) = e.metadata() else { continue };
        if !meta.file_type().is_file() {
            continue;
        }
        let pid = mid
            .strip_prefix('p')
            .and_then(|m| m.split_once('-'))
            .and_then(|(p, _)| p.parse::<u32>().ok());
        let stale = match pid {
            Some(p) => !process_alive(p),
            None => meta
                .modified()
                .ok()
                .and_then(|m| m.elapsed().ok())
                .is_some_and(|age| age.as_secs() >= TEMP_STALE_SECS),
        };
        if stale && std::fs::remove_file(e.path()).is_ok() {
            removed += 1;
        }
    }
    removed
}

/// Writes `bytes` to a temporary file beside `out` and renames it into place, so a reader never
/// sees a partial file and a failed build leaves the earlier file untouched. The temporary
/// name carries this process's id, so [`sweep_temps`] can tell a live writer's file from a
/// killed one's.
pub fn write_atomic(out: &Path, bytes: &[u8]) -> std::io::Result<()> {
    let dir = match out.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let mut tmp = tempfile::Builder::new()
        .prefix(&format!("{TEMP_PREFIX}p{}-", std::process::id()))
        .suffix(".tmp")
        .tempfile_in(&dir)?;
    tmp.write_all(bytes)?;
    // The temporary file is private (0600); give the result the mode of the file it replaces,
    // or the usual 0644 for a new one.
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        let mode = std::fs::metadata(out)
            .map(|m| m.permissions().mode() & 0o7777)
            .unwrap_or(0o644);
        tmp.as_file()
            .set_permissions(std::fs::Permissions::from_mode(mode))?;
    }
    tmp.as_file().sync_all()?;
    tmp.persist(out).map_err(|e| e.error)?;
    Ok(())
}

/// Everything up to the PDF bytes, for one notebook on disk. `check` and `results` run this
/// too (and drop the bytes), so they accept exactly what `build` accepts.
pub fn render_file(path: &Path) -> Result<(Record, Vec<u8>), Failure> {
    let src = read_source(path)?;
    let lab = lab_for(path)?;
    render_source(&src, lab.as_ref())
}

/// [`render_file`] with the lab register already found (`batch` reads each register once).
pub fn render_file_with(path: &Path, lab: Option<&Lab>) -> Result<(Record, Vec<u8>), Failure> {
    render_source(&read_source(path)?, lab)
}

fn render_source(src: &Source, lab: Option<&Lab>) -> Result<(Record, Vec<u8>), Failure> {
    let path = src.path.as_path();
    // The first record of a process: fonts and the typst library load on a thread of their
    // own while the notebook is reduced (its Monte Carlo is the longest part).
    static WARM: std::sync::Once = std::sync::Once::new();
    WARM.call_once(|| {
        std::thread::spawn(render::world::warm_up);
    });
    let rec = analyse_file(src, lab)?;
    let too_long = prose_limits(&rec.notebook.items);
    if !too_long.is_empty() {
        return Err(Failure::Notebook {
            path: path.to_path_buf(),
            source: rec.notebook.source.clone(),
            diags: too_long,
            tables: Vec::new(),
        });
    }
    let mut assets = gather_assets_with(src, &rec, lab)?;
    assets.source = src.raw.clone();
    let pdf = render::render_pdf(&rec, &assets).map_err(|e| render_failure(path, &rec, &assets, e));
    // Typst memoises layout across compilations; a batch or a watch session would otherwise
    // keep every record's intermediate results in memory. Every 4 builds, drop what the last
    // 8 did not use: for the 500-record benchmark this held 260 MB at peak (640 MB when every
    // 16, 5.5 GB never) at about the same speed; after every build it was slower.
    static BUILDS: std::sync::atomic::AtomicUsize = std::sync::atomic::AtomicUsize::new(0);
    if BUILDS.fetch_add(1, std::sync::atomic::Ordering::Relaxed) % 4 == 3 {
        typst::comemo::evict(2);
    }
    Ok((rec, pdf?))
}

/// A typesetting error that came from the notebook's own prose is reported at the notebook
/// line (the image it names, or the start of the run of prose); the rest as a render failure.
fn render_failure(path: &Path, rec: &Record, assets: &Assets, e: RenderError) -> Failure {
    if e.at.is_empty() {
        return Failure::Render {
            path: path.to_path_buf(),
            message: e.to_string(),
        };
    }
    let prose: Vec<&Span> = rec
        .notebook
        .items
        .iter()
        .filter_map(|i| match i {
            Item::Prose { span, .. } => Some(span),
            _ => None,
        })
        .collect();
    let refs = image_refs(rec);
    let mut diags = Vec::new();
    for p in &e.at {
        let image = p
            .image
            .and_then(|k| assets.images.keys().nth(k))
            .and_then(|rel| refs.iter().find(|(r, _)| r == rel));
        let (span, what) = match (image, prose.get(p.prose)) {
            (Some((rel, span)), _) => (*span, format!("image `{rel}` could not be typeset")),
            (None, Some(s)) => (
                Span::new(s.start, s.start),
                "this prose could not be typeset".into(),
            ),
            (None, None) => (Span::default(), "the prose could not be typeset".into()),
        };
        diags.push(
            Diagnostic::new(span, what)
                .expected("text and images the typesetter can set")
                .found(p.message.clone()),
        );
    }
    if let (Some(first), false) = (diags.first_mut(), e.messages.is_empty()) {
        first.help = Some(e.messages.join("\n"));
    }
    Failure::Notebook {
        path: path.to_path_buf(),
        source: rec.notebook.source.clone(),
        diags,
        tables: Vec::new(),
    }
}

/// Builds one notebook into `out` (default beside it). Returns the path written. The output
/// is checked by [`check_output`] before anything is read or written.
pub fn build_file(path: &Path, out: Option<&Path>) -> Result<PathBuf, Failure> {
    let out = out
        .map(Path::to_path_buf)
        .unwrap_or_else(|| default_output(path));
    check_output(&out, &[path])?;
    let (_rec, pdf) = render_file(path)?;
    write_atomic(&out, &pdf).map_err(|e| io_fail(&out, e))?;
    Ok(out)
}
