//! Reading a benchrec PDF back: its attachments and the text its pages print.

use lopdf::{Object, ObjectId};

/// Most name-tree nodes and file specifications one PDF may make us read.
const MAX_NODES: usize = 4096;

/// The embedded files of a PDF, as (name, bytes), sorted: those its catalogue names, in the
/// `EmbeddedFiles` name tree or the `AF` array (PDF/A-3 names each attachment in both).
pub fn pdf_attachments(pdf: &[u8]) -> Result<Vec<(String, Vec<u8>)>, String> {
    if let Some(lazy) = Lazy::open(pdf) {
        if let Some(files) = attachments_in(&|id| lazy.get(id), lazy.root) {
            return Ok(files);
        }
    }
    let doc = whole(pdf)?;
    let root = doc
        .trailer
        .get(b"Root")
        .and_then(Object::as_reference)
        .map_err(|_| "not a readable PDF: its trailer names no catalogue".to_string())?;
    let get = |id| doc.get_object(id).ok().cloned();
    attachments_in(&get, root)
        .ok_or_else(|| "not a readable PDF: its attachments cannot be read".into())
}

fn whole(pdf: &[u8]) -> Result<lopdf::Document, String> {
    lopdf::Document::load_mem(pdf).map_err(|e| format!("not a readable PDF: {e}"))
}

/// A PDF read object by object through its one classic cross-reference table, so that
/// listing its attachments does not parse its pages. `open` declines (and the whole-file
/// reader is used) for update sections, cross-reference streams, encryption, or a stream
/// whose length cannot be read; `get` gives `None` for an object it cannot read.
struct Lazy<'a> {
    reader: lopdf::Reader<'a>,
    root: ObjectId,
    info: Option<ObjectId>,
}

impl<'a> Lazy<'a> {
    fn open(pdf: &'a [u8]) -> Option<Self> {
        if !pdf.starts_with(b"%PDF-") {
            return None;
        }
        let start = startxref(pdf)?;
        let mut t = Tokens { b: pdf, at: start };
        if t.word()? != b"xref" {
            return None;
        }
        let mut xref = lopdf::xref::Xref::new(0, lopdf::xref::XrefType::CrossReferenceTable);
        let trailer_at = loop {
            let here = t.at;
            let w = t.word()?;
            if w == b"trailer" {
                break t.at;
            }
            t.at = here;
            let (first, count) = (t.number()?, t.number()?);
            for i in 0..count {
                let (offset, generation, kind) = (t.number()?, t.number()?, t.word()?);
                let id = u32::try_from(first.checked_add(i)?).ok()?;
                match kind {
                    b"n" => xref.insert(
                        id,
                        lopdf::xref::XrefEntry::Normal {
                            offset: u32::try_from(offset).ok()?,
                            generation: u16::try_from(generation).ok()?,
                        },
                    ),
                    b"f" => {}
                    _ => return None,
                }
            }
        };
        let rest = pdf.get(trailer_at..)?;
        let end = rest.windows(9).position(|w| w == b"startxref")?;
        let trailer = parse_trailer(&rest[..end])?;
        if [&b"Prev"[..], b"XRefStm", b"Encrypt"]
            .iter()
            .any(|k| trailer.has(k))
        {
            return None;
        }
        let root = trailer.get(b"Root").and_then(Object::as_reference).ok()?;
        let info = trailer.get(b"Info").and_then(Object::as_reference).ok();
        xref.size = xref.max_id().checked_add(1)?;
        let mut document = lopdf::Document::new();
        document.reference_table = xref;
        let reader = lopdf::Reader {
            buffer: pdf,
            document,
            encryption_state: None,
            raw_objects: Default::default(),
        };
        Some(Lazy { reader, root, info })
    }

    fn get(&self, id: ObjectId) -> Option<Object> {
        let obj = self.reader.get_object(id, &mut Default::default()).ok()?;
        // A stream whose length the parser could not resolve has no content yet.
        match &obj {
            Object::Stream(s) if s.content.is_empty() && s.start_position.is_some() => None,
            _ => Some(obj),
        }
    }
}

/// The offset `startxref` gives, from the file's last 1 KiB.
fn startxref(pdf: &[u8]) -> Option<usize> {
    let tail_from = pdf.len().saturating_sub(1024);
    let at = find_last(&pdf[tail_from..], b"startxref")? + tail_from + b"startxref".len();
    let mut t = Tokens { b: pdf, at };
    let n = usize::try_from(t.number()?).ok()?;
    (n < pdf.len()).then_some(n)
}

fn find_last(hay: &[u8], needle: &[u8]) -> Option<usize> {
    hay.windows(needle.len()).rposition(|w| w == needle)
}

/// The trailer dictionary, parsed by lopdf's own object parser as if it were object 1.
fn parse_trailer(bytes: &[u8]) -> Option<lopdf::Dictionary> {
    let mut buf = b"1 0 obj\n".to_vec();
    buf.extend_from_slice(bytes);
    buf.extend_from_slice(b"\nendobj\n");
    let mut document = lopdf::Document::new();
    let entry = lopdf::xref::XrefEntry::Normal {
        offset: 0,
        generation: 0,
    };
    document.reference_table.insert(1, entry);
    let reader = lopdf::Reader {
        buffer: &buf,
        document,
        encryption_state: None,
        raw_objects: Default::default(),
    };
    let obj = reader.get_object((1, 0), &mut Default::default()).ok()?;
    obj.as_dict().ok().cloned()
}

/// Whitespace-separated words of a cross-reference table.
struct Tokens<'a> {
    b: &'a [u8],
    at: usize,
}

impl<'a> Tokens<'a> {
    fn word(&mut self) -> Option<&'a [u8]> {
        let ws = |c: &u8| b" \t\n\r\0\x0c".contains(c);
        while self.b.get(self.at).is_some_and(ws) {
            self.at += 1;
        }
        let from = self.at;
        while self.b.get(self.at).is_some_and(|c| !ws(c)) {
            self.at += 1;
        }
        (self.at > from).then(|| &self.b[from..self.at])
    }

    fn number(&mut self) -> Option<u64> {
        let w = self.word()?;
        if w.len() > 12 || !w.iter().all(u8::is_ascii_digit) {
            return None;
        }
        std::str::from_utf8(w).ok()?.parse().ok()
    }
}

/// The attachments the catalogue `root` names, read through `get`; `None` when one of the
/// objects it names cannot be read.
fn attachments_in(
    get: &dyn Fn(ObjectId) -> Option<Object>,
    root: ObjectId,
) -> Option<Vec<(String, Vec<u8>)>> {
    let deref = |o: &Object| match o {
        Object::Reference(r) => get(*r),
        other => Some(other.clone()),
    };
    let catalog = get(root)?.as_dict().ok()?.clone();
    // File specifications: by reference (deduplicated) or written in place.
    let mut specs: Vec<Object> = Vec::new();
    let mut seen = std::collections::BTreeSet::new();
    let mut note = |o: &Object, specs: &mut Vec<Object>| match o {
        Object::Reference(r) => {
            if seen.insert(*r) {
                specs.push(o.clone());
            }
        }
        other => specs.push(other.clone()),
    };
    if let Ok(af) = catalog.get(b"AF") {
        for o in deref(af)?.as_array().ok()? {
            note(o, &mut specs);
        }
    }
    if let Ok(names) = catalog.get(b"Names") {
        let names = deref(names)?;
        if let Ok(tree) = names.as_dict().ok()?.get(b"EmbeddedFiles") {
            // The name tree, breadth first, each node once.
            let mut queue = vec![tree.clone()];
            let mut nodes = std::collections::BTreeSet::new();
            while let Some(node) = queue.pop() {
                if let Object::Reference(r) = node {
                    if !nodes.insert(r) {
                        continue;
                    }
                }
                if nodes.len() + specs.len() > MAX_NODES {
                    return None;
                }
                let node = deref(&node)?;
                let node = node.as_dict().ok()?;
                if let Ok(kids) = node.get(b"Kids") {
                    queue.extend(deref(kids)?.as_array().ok()?.iter().cloned());
                }
                if let Ok(pairs) = node.get(b"Names") {
                    for pair in deref(pairs)?.as_array().ok()?.chunks(2) {
                        if let [_, spec] = pair {
                            note(spec, &mut specs);
                        }
                    }
                }
            }
        }
    }
    let mut out = Vec::new();
    for spec in specs.iter().take(MAX_NODES) {
        let spec = deref(spec)?;
        let dict = spec.as_dict().ok()?;
        if !matches!(dict.get(b"Type"), Ok(Object::Name(n)) if n == b"Filespec") {
            continue;
        }
        let name = dict
            .get(b"UF")
            .or_else(|_| dict.get(b"F"))
            .ok()
            .and_then(|o| o.as_str().ok())
            .map(decode_pdf_string)
            .unwrap_or_default();
        let Ok(ef) = dict.get(b"EF") else { continue };
        let ef = deref(ef)?;
        let Ok(f) = ef.as_dict().ok()?.get(b"F") else {
            continue;
        };
        let file = deref(f)?;
        let stream = file.as_stream().ok()?;
        let bytes = stream
            .decompressed_content()
            .unwrap_or_else(|_| stream.content.clone());
        out.push((name, bytes));
    }
    out.sort();
    Some(out)
}

/// The notebook text embedded in a benchrec PDF (its one `.md` attachment).
pub fn verify_pdf_source(pdf: &[u8]) -> Result<String, String> {
    let files = pdf_attachments(pdf)?;
    let md: Vec<&(String, Vec<u8>)> = files.iter().filter(|(n, _)| n.ends_with(".md")).collect();
    let (_, bytes) = match md.as_slice() {
        [one] => *one,
        [] => return Err("the PDF carries no notebook attachment".into()),
        _ => return Err("the PDF carries more than one notebook attachment".into()),
    };
    let text = String::from_utf8(bytes.clone())
        .map_err(|_| "the attached notebook is not UTF-8 text".to_string())?;
    Ok(text)
}

/// The text of every page, as `pdf-extract` reads it through the fonts' ToUnicode maps. A
/// PDF that makes the extractor panic is reported, not fatal.
pub fn page_text(pdf: &[u8]) -> Result<String, String> {
    let read = std::panic::AssertUnwindSafe(|| pdf_extract::extract_text_from_mem(pdf));
    match std::panic::catch_unwind(read) {
        Ok(Ok(t)) => Ok(t),
        Ok(Err(e)) => Err(format!("the pages' text cannot be read: {e}")),
        Err(_) => Err("the pages' text cannot be read".into()),
    }
}

/// The 64 hex digits that follow each `label` in `text`, blanks and line breaks inside the
/// digest (where the page wrapped it) ignored.
pub fn printed_after(text: &str, label: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut from = 0;
    while let Some(p) = text[from..].find(label) {
        let start = from + p + label.len();
        let hex: String = text[start..]
            .chars()
            .filter(|c| !c.is_whitespace())
            .take_while(char::is_ascii_hexdigit)
            .take(64)
            .collect();
        if hex.len() == 64 {
            out.push(hex.to_ascii_lowercase());
        }
        from = start;
    }
    out
}

/// What the pages of a PDF say about its attachment, compared with the attachment itself.
#[derive(Debug, Clone, PartialEq)]
pub enum PageCheck {
    /// The printed digests equal those of the attached notebook.
    Match,
    /// They differ, or the pages print none; the text says how.
    Mismatch(String),
}

/// Compares the digests printed on the pages with the attachment: the notebook's SHA-256 (after
/// `SHA-256`) must be that of `source`, the bytes attached; the readings digest (after
/// `sha256:`) must be printed, and every one printed must be `digest`, the attached notebook's
/// own, or `recorded`, the one its sign-off names (a void record prints both).
pub fn check_pages(text: &str, source: &[u8], digest: &str, recorded: Option<&str>) -> PageCheck {
    let printed_source = printed_after(text, "SHA-256");
    let want_source = super::sha256_hex(source);
    if printed_source.is_empty() {
        return PageCheck::Mismatch("the pages print no SHA-256 of the notebook".into());
    }
    if let Some(other) = printed_source.iter().find(|h| **h != want_source) {
        return PageCheck::Mismatch(format!(
            "the pages print notebook SHA-256 {other}, the attachment has {want_source}"
        ));
    }
    let strip = |d: &str| d.trim_start_matches(super::DIGEST_PREFIX).to_string();
    let want = strip(digest);
    let recorded = recorded.map(strip);
    let printed = printed_after(text, super::DIGEST_PREFIX);
    if !printed.contains(&want) {
        return PageCheck::Mismatch(format!(
            "the pages do not print the attachment's readings digest {digest}"
        ));
    }
    if let Some(other) = printed
        .iter()
        .find(|h| **h != want && Some(*h) != recorded.as_ref())
    {
        return PageCheck::Mismatch(format!(
            "the pages print readings digest sha256:{other}, the attachment gives {digest}"
        ));
    }
    PageCheck::Match
}

/// The benchrec version named in the PDF's document information (`Creator`), if any.
pub fn creator(pdf: &[u8]) -> Option<String> {
    let info = match Lazy::open(pdf) {
        Some(lazy) => lazy.get(lazy.info?)?,
        None => {
            let doc = lopdf::Document::load_mem(pdf).ok()?;
            match doc.trailer.get(b"Info").ok()? {
                Object::Reference(r) => doc.get_object(*r).ok()?.clone(),
                other => other.clone(),
            }
        }
    };
    let c = info.as_dict().ok()?.get(b"Creator").ok()?.as_str().ok()?;
    Some(decode_pdf_string(c))
}

/// A PDF text string: UTF-16BE or UTF-8 with a byte-order mark; otherwise UTF-8 where the
/// bytes are (ASCII is), else PDFDocEncoding (read as Latin-1).
fn decode_pdf_string(b: &[u8]) -> String {
    if let Some(rest) = b.strip_prefix(&[0xfe, 0xff]) {
        let units: Vec<u16> = rest
            .chunks_exact(2)
            .map(|c| u16::from_be_bytes([c[0], c[1]]))
            .collect();
        String::from_utf16_lossy(&units)
    } else if let Ok(s) = std::str::from_utf8(b.strip_prefix(&[0xef, 0xbb, 0xbf]).unwrap_or(b)) {
        s.to_string()
    } else {
        b.iter().map(|&c| c as char).collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const FIXTURES: [&str; 2] = ["snubber.pdf", "signed-tank.pdf"];

    fn fixture(name: &str) -> Vec<u8> {
        let dir = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/fixtures/v0.1.0/");
        std::fs::read(format!("{dir}{name}")).unwrap()
    }

    /// Every file specification in the file, found by a scan of all its objects: a reader
    /// written apart from the catalogue walk.
    fn every_filespec(pdf: &[u8]) -> Vec<(String, Vec<u8>)> {
        let doc = lopdf::Document::load_mem(pdf).unwrap();
        let mut out = Vec::new();
        for obj in doc.objects.values() {
            let Ok(d) = obj.as_dict() else { continue };
            if !matches!(d.get(b"Type"), Ok(Object::Name(n)) if n == b"Filespec") {
                continue;
            }
            let name = d.get(b"UF").unwrap().as_str().unwrap();
            let r = d.get(b"EF").unwrap().as_dict().unwrap().get(b"F").unwrap();
            let s = doc.get_object(r.as_reference().unwrap()).unwrap();
            let s = s.as_stream().unwrap();
            let bytes = s
                .decompressed_content()
                .unwrap_or_else(|_| s.content.clone());
            out.push((String::from_utf8_lossy(name).into_owned(), bytes));
        }
        out.sort();
        out
    }

    #[test]
    fn the_object_by_object_reader_reads_what_the_whole_file_reader_reads() {
        for name in FIXTURES {
            let pdf = fixture(name);
            let lazy = Lazy::open(&pdf).expect("a benchrec PDF has one classic table");
            let by_object = attachments_in(&|id| lazy.get(id), lazy.root).unwrap();
            let all = every_filespec(&pdf);
            assert!(all.iter().any(|(n, _)| n.ends_with(".md")), "{name}");
            assert_eq!(by_object, all, "{name}");
            assert_eq!(pdf_attachments(&pdf).unwrap(), all, "{name}");
            let doc = lopdf::Document::load_mem(&pdf).unwrap();
            let info = doc.trailer.get(b"Info").unwrap().as_reference().unwrap();
            let want = doc
                .get_object(info)
                .unwrap()
                .as_dict()
                .unwrap()
                .get(b"Creator");
            let want = decode_pdf_string(want.unwrap().as_str().unwrap());
            assert_eq!(creator(&pdf), Some(want), "{name}");
        }
    }

    /// An update section appended to a file (ISO 32000-1 §7.5.6) replaces the Info
    /// dictionary; the object reader must decline and the whole-file reader see the update.
    #[test]
    fn an_update_section_is_read_whole() {
        let mut pdf = fixture("snubber.pdf");
        let prev = startxref(&pdf).unwrap();
        let doc = lopdf::Document::load_mem(&pdf).unwrap();
        let info = doc.trailer.get(b"Info").unwrap().as_reference().unwrap();
        let root = doc.trailer.get(b"Root").unwrap().as_reference().unwrap();
        let size = doc.trailer.get(b"Size").unwrap().as_i64().unwrap();
        let at = pdf.len() + 1;
        pdf.extend_from_slice(
            format!("\n{} 0 obj\n<</Creator (updated)>>\nendobj\n", info.0).as_bytes(),
        );
        let xref = pdf.len();
        let update = format!(
            "xref\n{} 1\n{at:010} 00000 n \ntrailer\n<</Size {size}/Root {} 0 R/Info {} 0 R/Prev {prev}>>\nstartxref\n{xref}\n%%EOF\n",
            info.0, root.0, info.0
        );
        pdf.extend_from_slice(update.as_bytes());
        assert!(Lazy::open(&pdf).is_none());
        assert_eq!(creator(&pdf).as_deref(), Some("updated"));
        assert_eq!(
            pdf_attachments(&pdf).unwrap(),
            every_filespec(&fixture("snubber.pdf"))
        );
    }

    /// Truncated and altered files: an error or a result, never a panic, and never an
    /// attachment the whole-file reader would not also find.
    #[test]
    fn broken_files_do_not_panic() {
        let pdf = fixture("snubber.pdf");
        let n = pdf.len();
        for cut in [0, 5, 100, n / 2, n - 600, n - 200, n - 30, n - 7, n - 1] {
            let _ = pdf_attachments(&pdf[..cut]);
            let _ = creator(&pdf[..cut]);
        }
        let start = startxref(&pdf).unwrap();
        let good = every_filespec(&pdf);
        for at in (start..n).step_by(61) {
            for byte in [b'9', b' ', b'<', b'#'] {
                let mut bad = pdf.clone();
                bad[at] = byte;
                if let Ok(files) = pdf_attachments(&bad) {
                    for f in &files {
                        assert!(good.contains(f), "offset {at}");
                    }
                }
                let _ = creator(&bad);
            }
        }
    }
}
