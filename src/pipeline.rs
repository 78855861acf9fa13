//! The edges: read a notebook and the files it names, run parse → reduce → judge → render,
//! and write the PDF atomically. All file system access of a build happens here.

use crate::diag::{self, Diagnostic, Span};
use crate::judge::{self, Record};
use crate::networks;
use crate::notebook::{self, Item};
use crate::render::{self, Assets};
use std::io::Write;
use std::path::{Component, Path, PathBuf};

/// Why one notebook did not build. Other notebooks of a batch go on.
#[derive(Debug)]
pub enum Failure {
    Io {
        path: PathBuf,
        message: String,
    },
    Notebook {
        path: PathBuf,
        source: String,
        diags: Vec<Diagnostic>,
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
            } => diag::render(&path.display().to_string(), source, diags),
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
            } => match diags.first() {
                Some(d) => {
                    let more = if diags.len() > 1 {
                        format!(" (+{} more)", diags.len() - 1)
                    } else {
                        String::new()
                    };
                    format!(
                        "{}{more}",
                        diag::one_line(&path.display().to_string(), source, d)
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

/// A notebook read from disk: its bytes as read and its text.
pub struct Source {
    pub path: PathBuf,
    pub raw: Vec<u8>,
    pub text: String,
}

/// Reads a notebook; bytes that are not UTF-8 are reported at their line and column.
pub fn read_source(path: &Path) -> Result<Source, Failure> {
    let raw = std::fs::read(path).map_err(|e| io_fail(path, e))?;
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
            })
        }
    }
}

/// Parse, reduce and judge one notebook's text. Pure: no file system access.
pub fn analyse_text(path: &Path, text: &str) -> Result<Record, Failure> {
    let fail = |source: &str, diags| Failure::Notebook {
        path: path.to_path_buf(),
        source: source.to_string(),
        diags,
    };
    let nb = notebook::parse(text).map_err(|d| fail(text, d))?;
    let red = networks::reduce(&nb).map_err(|d| fail(&nb.source, d))?;
    let src = nb.source.clone();
    judge::judge(nb, red).map_err(|d| fail(&src, d))
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

/// Images named in the prose, as (path as written, span).
pub fn image_refs(rec: &Record) -> Vec<(String, Span)> {
    use pulldown_cmark::{Event, Options, Parser, Tag};
    let mut out = Vec::new();
    for item in &rec.notebook.items {
        let Item::Prose { text, span } = item else {
            continue;
        };
        for (ev, r) in Parser::new_ext(text, Options::ENABLE_TABLES).into_offset_iter() {
            if let Event::Start(Tag::Image { dest_url, .. }) = ev {
                out.push((
                    dest_url.to_string(),
                    Span::new(span.start + r.start, span.start + r.end),
                ));
            }
        }
    }
    out
}

/// Gathers what the renderer may use: images inside the notebook's folder and a user template.
pub fn gather_assets(src: &Source, rec: &Record) -> Result<Assets, Failure> {
    let dir = src.path.parent().map(Path::to_path_buf).unwrap_or_default();
    let dir = if dir.as_os_str().is_empty() {
        PathBuf::from(".")
    } else {
        dir
    };
    let canon_dir = dir.canonicalize().map_err(|e| io_fail(&dir, e))?;
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
                .expected("a path relative to the notebook, inside its folder")
                .found(rel.clone())
                .help("copy the image next to the notebook (or into a subfolder) and name it by a relative path")
        };
        if !is_inside(&rel) {
            diags.push(refuse("points outside the notebook's folder"));
            continue;
        }
        let full = dir.join(&rel);
        match full.canonicalize() {
            Ok(c) if c.starts_with(&canon_dir) => match std::fs::read(&c) {
                Ok(bytes) => {
                    assets.images.insert(rel.clone(), bytes);
                }
                Err(e) => diags.push(refuse(&format!("could not be read: {e}"))),
            },
            Ok(_) => diags.push(refuse(
                "resolves (through a link) outside the notebook's folder",
            )),
            Err(_) => diags.push(refuse("does not exist")),
        }
    }
    if let Some((tpl, span)) = &rec.notebook.front.template {
        // A template is typeset into the record, so it obeys the same rule as images: a
        // relative path inside the notebook's folder, not leaving it through a link.
        let refuse = |why: String| {
            Diagnostic::new(*span, format!("template `{tpl}` {why}"))
                .expected("a Typst template file, relative to the notebook, inside its folder")
                .found(tpl.clone())
                .help("copy the lab's template next to the notebook (or into a subfolder)")
        };
        let full = dir.join(tpl);
        if !is_inside(tpl) {
            diags.push(refuse("points outside the notebook's folder".into()));
        } else {
            match full.canonicalize() {
                Ok(c) if c.starts_with(&canon_dir) => match std::fs::read_to_string(&c) {
                    Ok(t) => assets.template = Some(t),
                    Err(e) => diags.push(refuse(format!("could not be read: {e}"))),
                },
                Ok(_) => diags.push(refuse(
                    "resolves (through a link) outside the notebook's folder".into(),
                )),
                Err(_) => diags.push(refuse("does not exist".into())),
            }
        }
    }
    if diags.is_empty() {
        Ok(assets)
    } else {
        Err(Failure::Notebook {
            path: src.path.clone(),
            source: rec.notebook.source.clone(),
            diags,
        })
    }
}

/// Default output: `<stem>.pdf` beside the notebook.
pub fn default_output(path: &Path) -> PathBuf {
    path.with_extension("pdf")
}

/// Writes `bytes` to a temporary file beside `out` and renames it into place, so a reader never
/// sees a partial file and a failed build leaves the earlier file untouched.
pub fn write_atomic(out: &Path, bytes: &[u8]) -> std::io::Result<()> {
    let dir = match out.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let mut tmp = tempfile::Builder::new()
        .prefix(".benchrec-")
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

/// Everything up to the PDF bytes, for one notebook on disk.
pub fn render_file(path: &Path) -> Result<(Record, Vec<u8>), Failure> {
    let src = read_source(path)?;
    let rec = analyse_text(path, &src.text)?;
    let mut assets = gather_assets(&src, &rec)?;
    assets.source = src.raw.clone();
    let pdf = render::render_pdf(&rec, &assets).map_err(|e| Failure::Render {
        path: path.to_path_buf(),
        message: e.to_string(),
    });
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

/// Builds one notebook into `out` (default beside it). Returns the path written.
pub fn build_file(path: &Path, out: Option<&Path>) -> Result<PathBuf, Failure> {
    let (_rec, pdf) = render_file(path)?;
    let out = out
        .map(Path::to_path_buf)
        .unwrap_or_else(|| default_output(path));
    write_atomic(&out, &pdf).map_err(|e| io_fail(&out, e))?;
    Ok(out)
}
