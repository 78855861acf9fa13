//! The edges of signing and verifying: `sign` edits a notebook on disk (and rebuilds its PDF),
//! `verify` reads notebooks and PDFs back and says what their sign-offs prove.

use crate::judge::{self, Record};
use crate::pipeline::{self, Failure};
use crate::render::{self, Assets};
use crate::signoff::{self, key::Signers, pdf::PageCheck, Entry, SignState};
use std::path::{Path, PathBuf};

/// Largest private key or allowed-signers file read.
const KEY_FILE_MAX_BYTES: u64 = 1024 * 1024;
/// Largest PDF `verify` reads.
pub const PDF_MAX_BYTES: u64 = 512 * 1024 * 1024;

/// What `sign` is asked to write.
#[derive(Debug, Clone, Default)]
pub struct SignRequest {
    pub by: String,
    /// ISO 8601 date-time; `None` means now, in UTC.
    pub on: Option<String>,
    /// An OpenSSH private key file (ed25519, unencrypted).
    pub key: Option<PathBuf>,
    /// The signer's reason for signing a record with reservations.
    pub accept: Option<String>,
}

/// What `sign` did.
#[derive(Debug, Clone)]
pub struct Signed {
    /// The file written (the target when the notebook is a symlink).
    pub notebook: PathBuf,
    pub entry: Entry,
    /// The PDF rebuilt beside the notebook, if one was there.
    pub rebuilt: Option<PathBuf>,
    /// Where the PDF would go when none exists yet.
    pub pdf: PathBuf,
}

fn io(path: &Path, m: impl std::fmt::Display) -> Failure {
    Failure::Io {
        path: path.to_path_buf(),
        message: m.to_string(),
    }
}

fn is_iso_time(on: &str) -> bool {
    signoff::parse_time(on).is_some()
}

/// Signs the notebook at `path`: checks it as `build` would, writes the `signoff` entry (in
/// place, atomically, mode kept) and rebuilds the PDF beside it when one exists.
pub fn sign_file(path: &Path, req: &SignRequest) -> Result<Signed, Failure> {
    let by = req.by.trim();
    if by.is_empty() {
        return Err(io(path, "`--by` is empty: name the person signing"));
    }
    if by.chars().any(char::is_control) {
        return Err(io(path, "`--by` holds a line end or control character"));
    }
    let on = match &req.on {
        Some(on) if is_iso_time(on) => on.trim().to_string(),
        Some(on) => {
            return Err(io(
                path,
                format!(
                    "`--on {on}` is not an ISO 8601 date-time; expected e.g. 2026-12-02T09:30:00Z"
                ),
            ))
        }
        None => chrono::Utc::now().format("%Y-%m-%dT%H:%M:%SZ").to_string(),
    };
    let accepted = match &req.accept {
        Some(a) if a.trim().is_empty() => {
            return Err(io(path, "`--accept` is empty: give the reason for signing"))
        }
        Some(a) if a.chars().any(char::is_control) => {
            return Err(io(path, "`--accept` holds a line end or control character"))
        }
        Some(a) => Some(a.trim().to_string()),
        None => None,
    };
    // Edit the file a symlink points at, not the link.
    let target = std::fs::canonicalize(path).map_err(|e| io(path, e))?;
    let lab = pipeline::lab_for(&target)?;
    let (rec, _pdf) = pipeline::render_file_with(&target, lab.as_ref())?;
    let reservations = judge::reservations(&rec);
    if !reservations.is_empty() && accepted.is_none() {
        let list: Vec<String> = reservations
            .iter()
            .take(12)
            .map(|r| format!("  - {r}"))
            .collect();
        let more = reservations.len().saturating_sub(12);
        return Err(io(
            path,
            format!(
                "the record has {} reservation(s); sign it only with `--accept \"REASON\"`, which is printed in the sign-off box:\n{}{}",
                reservations.len(),
                list.join("\n"),
                if more > 0 { format!("\n  … and {more} more") } else { String::new() }
            ),
        ));
    }
    let record = &rec.notebook.front.record;
    let (key, signature) = match &req.key {
        Some(kp) => {
            let pem = pipeline::read_regular(kp, KEY_FILE_MAX_BYTES)
                .map_err(|r| io(kp, format!("the key file {r}")))?;
            let pem = String::from_utf8(pem).map_err(|_| io(kp, "the key file is not text"))?;
            let msg = signoff::key::message(record, &rec.digest, by, &on);
            let (fp, sig) = signoff::key::sign(&pem, &msg).map_err(|e| io(kp, e))?;
            (Some(fp), Some(sig))
        }
        None => (None, None),
    };
    let entry = Entry {
        by: by.to_string(),
        on,
        digest: rec.digest.clone(),
        key,
        signature,
        accepted,
        register: signoff::register_digests(&rec.notebook),
    };
    let src = pipeline::read_source(&target)?;
    let edited = signoff::set_signoff(&src.text, &entry).map_err(|e| io(path, e))?;
    signoff::check_edit_with(
        &edited,
        &entry,
        &rec.notebook.tables.files,
        lab.as_ref().map(|l| &l.register),
    )
    .map_err(|e| io(path, e))?;
    pipeline::write_atomic(&target, edited.as_bytes()).map_err(|e| io(&target, e))?;
    let pdf = pipeline::default_output(path);
    let rebuilt = if pdf.is_file() {
        Some(pipeline::build_file(&target, Some(&pdf))?)
    } else {
        None
    };
    Ok(Signed {
        notebook: target,
        entry,
        rebuilt,
        pdf,
    })
}

/// The outcome of verifying one record.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Status {
    /// A good key signature (on a list, when one was given) over a matching digest.
    Valid,
    /// The digest matches; no signature.
    NameOnly,
    /// Readings changed after signing.
    Void,
    Unsigned,
    /// A PDF's pages do not belong to its attachment.
    Mismatch,
    /// A signature or key that does not hold, or a key not on the given list.
    NotAuthentic,
    /// The file could not be read or analysed.
    Error,
}

impl Status {
    pub fn word(self) -> &'static str {
        match self {
            Status::Valid => "valid",
            Status::NameOnly => "name only",
            Status::Void => "void",
            Status::Unsigned => "unsigned",
            Status::Mismatch => "mismatch",
            Status::NotAuthentic => "not authentic",
            Status::Error => "error",
        }
    }

    /// Exit status 0 for these. A name-only sign-off with a matching digest is what 0.1.0
    /// could write; it passes unless a signers list was asked for.
    pub fn ok(self, with_list: bool) -> bool {
        matches!(self, Status::Valid) || (self == Status::NameOnly && !with_list)
    }
}

#[derive(Debug, Clone)]
pub struct Report {
    pub path: PathBuf,
    pub status: Status,
    pub detail: String,
}

/// Verifies a notebook or a PDF.
pub fn verify_file(path: &Path, signers: Option<&Signers>) -> Report {
    let (status, detail) = match verify_inner(path, signers) {
        Ok(sd) => sd,
        Err(f) => {
            // The report line names the file already.
            let s = f.summary();
            let p = format!("{}: ", path.display());
            let s = s.strip_prefix("error: ").unwrap_or(&s);
            (Status::Error, s.strip_prefix(&p).unwrap_or(s).to_string())
        }
    };
    Report {
        path: path.to_path_buf(),
        status,
        detail,
    }
}

fn verify_inner(path: &Path, signers: Option<&Signers>) -> Result<(Status, String), Failure> {
    let bytes = pipeline::read_regular(path, PDF_MAX_BYTES).map_err(|r| io(path, r))?;
    // The register that applies where the notebook or PDF lies now.
    let lab = pipeline::lab_for(path)?;
    if !bytes.starts_with(b"%PDF") {
        let src = pipeline::read_source(path)?;
        let rec = pipeline::analyse_file(&src, lab.as_ref())?;
        return Ok(sign_status(&rec, signers));
    }
    let files = signoff::pdf_attachments(&bytes).map_err(|e| io(path, e))?;
    let md: Vec<&(String, Vec<u8>)> = files.iter().filter(|(n, _)| n.ends_with(".md")).collect();
    let (name, source) = match md.as_slice() {
        [one] => (one.0.clone(), one.1.clone()),
        [] => {
            return Ok((
                Status::Mismatch,
                "the PDF carries no notebook attachment".into(),
            ))
        }
        _ => {
            return Ok((
                Status::Mismatch,
                "the PDF carries more than one notebook attachment".into(),
            ))
        }
    };
    let text = String::from_utf8(source.clone())
        .map_err(|_| io(path, "the attached notebook is not UTF-8 text"))?;
    let rec = pipeline::analyse_with(&PathBuf::from(&name), &text, lab.as_ref(), |nb| {
        Ok(attached_tables(nb, &name, &files))
    })?;
    if let Some(why) = pages_mismatch(&bytes, &name, &source, &rec) {
        return Ok((
            Status::Mismatch,
            format!("the pages do not match the attached notebook: {why}"),
        ));
    }
    Ok(sign_status(&rec, signers))
}

/// The table files a notebook reads, taken from the PDF's attachments beside it (by the names
/// the record gave them); a file not attached is left out, and the notebook reports it.
pub fn attached_tables(
    nb: &crate::notebook::Notebook,
    source_name: &str,
    files: &[(String, Vec<u8>)],
) -> pipeline::TableBytes {
    render::data::table_attachments(nb, source_name)
        .into_iter()
        .filter_map(|(rel, att)| {
            let (_, bytes) = files.iter().find(|(n, _)| *n == att)?;
            Some((rel, att, bytes.clone()))
        })
        .collect()
}

/// Why the pages of `pdf` do not belong to its attachment, or `None` when they do. The digests
/// printed on the pages are compared always; a PDF made by this version, from a notebook that
/// names no image or template, is also rebuilt and compared byte for byte.
fn pages_mismatch(pdf: &[u8], name: &str, source: &[u8], rec: &Record) -> Option<String> {
    let text = match signoff::pdf::page_text(pdf) {
        Ok(t) => t,
        Err(e) => return Some(e),
    };
    let recorded = rec
        .notebook
        .front
        .signoff
        .as_ref()
        .map(|s| s.digest.as_str());
    // A record signed before a register entry it uses changed was built with the entry as it
    // was: its pages print the digest of signing, and it cannot be rebuilt as it was.
    let moved = !register_changes(rec).is_empty();
    let digest = match recorded {
        Some(d) if moved => d,
        _ => rec.digest.as_str(),
    };
    if let PageCheck::Mismatch(why) = signoff::pdf::check_pages(&text, source, digest, recorded) {
        return Some(why);
    }
    if moved {
        return None;
    }
    let this = format!("benchrec {}", env!("CARGO_PKG_VERSION"));
    let standalone = pipeline::image_refs(rec).is_empty()
        && rec.notebook.front.template.is_none()
        && rec
            .notebook
            .lab
            .as_ref()
            .is_none_or(|l| l.template.is_none());
    if signoff::pdf::creator(pdf).as_deref() == Some(this.as_str()) && standalone {
        let assets = Assets {
            source_name: name.to_string(),
            source: source.to_vec(),
            ..Assets::default()
        };
        let again = render::render_pdf(rec, &assets);
        // As in `pipeline::render_file`: drop typst's memoised layout now and then, or a
        // folder of records keeps every one's in memory.
        static BUILDS: std::sync::atomic::AtomicUsize = std::sync::atomic::AtomicUsize::new(0);
        if BUILDS.fetch_add(1, std::sync::atomic::Ordering::Relaxed) % 4 == 3 {
            typst::comemo::evict(2);
        }
        match again {
            Ok(again) if again == pdf => {}
            Ok(_) => return Some("rebuilt from the attachment, the record differs".into()),
            Err(e) => return Some(format!("the attachment does not typeset: {e}")),
        }
    }
    None
}

/// The lab register entries (asset ids, or `(defaults)`) whose digest differs from the one
/// the sign-off recorded; empty when the sign-off recorded none or none changed.
fn register_changes(rec: &Record) -> Vec<String> {
    match &rec.notebook.front.signoff {
        Some(s) if !s.register.is_empty() || rec.notebook.lab.is_some() => {
            signoff::changed_entries(&rec.notebook, &s.register)
        }
        _ => Vec::new(),
    }
}

/// What the record's sign-off proves, and against `signers` when given.
fn sign_status(rec: &Record, signers: Option<&Signers>) -> (Status, String) {
    let d = rec.sign.describe();
    match &rec.sign {
        SignState::Unsigned => (Status::Unsigned, "no sign-off".into()),
        SignState::Void { by, on, recorded } => {
            let changed = register_changes(rec);
            let what = if changed.is_empty() {
                d
            } else {
                let names: Vec<String> = changed.iter().map(|n| format!("`{n}`")).collect();
                let entry = if names.len() == 1 { "entry" } else { "entries" };
                format!(
                    "void: signed by {by} on {on}, but the lab register {entry} {} that the record relies on changed after signing",
                    names.join(", ")
                )
            };
            (
                Status::Void,
                format!("{what} (digest at signing {recorded}, now {})", rec.digest),
            )
        }
        SignState::Forged { .. } => (Status::NotAuthentic, d),
        SignState::NameOnly { digest, .. } => (
            Status::NameOnly,
            format!("{d}; the digest matches ({digest})"),
        ),
        SignState::Keyed { by, on, key, .. } => match signers {
            None => (
                Status::Valid,
                format!("signed by {by} on {on}; the signature is valid for key {key} but was not checked against a list of allowed signers (--signers)"),
            ),
            Some(list) => {
                let pk = rec
                    .notebook
                    .front
                    .signoff
                    .as_ref()
                    .and_then(|s| s.signature.as_deref())
                    .and_then(|s| ssh_key::SshSig::from_pem(s.trim().as_bytes()).ok())
                    .map(|s| ssh_key::PublicKey::from(s.public_key().clone()));
                match pk {
                    Some(pk) if list.allows(by, &pk, on) => {
                        (Status::Valid, format!("{d}; the key is listed for {by}"))
                    }
                    _ => (
                        Status::NotAuthentic,
                        format!("{d}, but that key is not listed for {by} in the allowed signers"),
                    ),
                }
            }
        },
    }
}

/// Reads an allowed-signers file; an error names its line.
pub fn read_signers(path: &Path) -> Result<Signers, Failure> {
    let bytes = pipeline::read_regular(path, KEY_FILE_MAX_BYTES)
        .map_err(|r| io(path, format!("the allowed-signers file {r}")))?;
    let text =
        String::from_utf8(bytes).map_err(|_| io(path, "the allowed-signers file is not text"))?;
    Signers::parse(&text).map_err(|(line, m)| io(path, format!("line {line}: {m}")))
}

/// The allowed signers the lab register names (`signers`, relative to lab.yaml) for the
/// notebook, PDF or folder at `path`; `None` when no register applies or it names none.
pub fn register_signers(path: &Path) -> Result<Option<Signers>, Failure> {
    let lab = if path.is_dir() {
        let dir = path.canonicalize().map_err(|e| io(path, e))?;
        pipeline::find_lab(&dir)
            .map(|p| pipeline::load_lab(&p))
            .transpose()?
    } else {
        pipeline::lab_for(path)?
    };
    let Some(lab) = lab else { return Ok(None) };
    let Some((rel, span)) = &lab.register.signers else {
        return Ok(None);
    };
    let at = |why: String| Failure::Notebook {
        path: lab.path.clone(),
        source: String::from_utf8_lossy(&lab.raw).into_owned(),
        diags: vec![crate::diag::Diagnostic::new(*span, why).expected(
            "an allowed-signers file (OpenSSH format), relative to lab.yaml, inside its folder",
        )],
        tables: Vec::new(),
    };
    let bytes = pipeline::read_named(lab.folder(), rel, KEY_FILE_MAX_BYTES)
        .map_err(|r| at(format!("the allowed-signers file `{rel}` {r}")))?;
    let text = String::from_utf8(bytes).map_err(|_| at(format!("`{rel}` is not text")))?;
    Signers::parse(&text)
        .map(Some)
        .map_err(|(line, m)| at(format!("`{rel}` line {line}: {m}")))
}

/// Every PDF under `dir`, in path order, verified in parallel.
pub fn verify_tree(dir: &Path, signers: Option<&Signers>) -> Vec<Report> {
    let mut pdfs: Vec<PathBuf> = walkdir::WalkDir::new(dir)
        .follow_links(false)
        .into_iter()
        .filter_map(Result::ok)
        .filter(|e| e.file_type().is_file())
        .map(|e| e.into_path())
        .filter(|p| p.extension().is_some_and(|x| x.eq_ignore_ascii_case("pdf")))
        // The archive index (`benchrec index DIR`) is not a record; nor is the cache folder.
        .filter(|p| {
            p != &dir.join("index.pdf") && !p.components().any(|c| c.as_os_str() == ".benchrec")
        })
        .collect();
    pdfs.sort();
    // Plain workers with a large stack: verifying may typeset the record again.
    crate::batch::on_workers(
        &pdfs,
        &|p: &PathBuf| verify_file(p, signers),
        &|p: &PathBuf| Report {
            path: p.clone(),
            status: Status::Error,
            detail: "verification failed unexpectedly (a defect of benchrec)".into(),
        },
    )
}
