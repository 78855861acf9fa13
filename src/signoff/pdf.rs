//! Reading a benchrec PDF back: its attachments and the text its pages print.

/// The embedded files of a PDF, as (name, bytes).
pub fn pdf_attachments(pdf: &[u8]) -> Result<Vec<(String, Vec<u8>)>, String> {
    use lopdf::Object;
    let doc = lopdf::Document::load_mem(pdf).map_err(|e| format!("not a readable PDF: {e}"))?;
    let mut out = Vec::new();
    for obj in doc.objects.values() {
        let Ok(dict) = obj.as_dict() else { continue };
        let is_filespec = matches!(dict.get(b"Type"), Ok(Object::Name(n)) if n == b"Filespec");
        if !is_filespec {
            continue;
        }
        let name = dict
            .get(b"UF")
            .or_else(|_| dict.get(b"F"))
            .ok()
            .and_then(|o| o.as_str().ok())
            .map(|b| String::from_utf8_lossy(b).into_owned())
            .unwrap_or_default();
        let Ok(ef) = dict.get(b"EF").and_then(|o| o.as_dict()) else {
            continue;
        };
        let Ok(r) = ef.get(b"F").and_then(|o| o.as_reference()) else {
            continue;
        };
        let Ok(stream) = doc.get_object(r).and_then(|o| o.as_stream()) else {
            continue;
        };
        let bytes = stream
            .decompressed_content()
            .unwrap_or_else(|_| stream.content.clone());
        out.push((name, bytes));
    }
    out.sort();
    Ok(out)
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
    let doc = lopdf::Document::load_mem(pdf).ok()?;
    let info = doc.trailer.get(b"Info").ok()?;
    let info = match info {
        lopdf::Object::Reference(r) => doc.get_object(*r).ok()?,
        other => other,
    };
    let c = info.as_dict().ok()?.get(b"Creator").ok()?.as_str().ok()?;
    Some(decode_pdf_string(c))
}

/// A PDF text string: UTF-16BE with a byte-order mark, or PDFDocEncoding (read as Latin-1).
fn decode_pdf_string(b: &[u8]) -> String {
    if let Some(rest) = b.strip_prefix(&[0xfe, 0xff]) {
        let units: Vec<u16> = rest
            .chunks_exact(2)
            .map(|c| u16::from_be_bytes([c[0], c[1]]))
            .collect();
        String::from_utf16_lossy(&units)
    } else {
        b.iter().map(|&c| c as char).collect()
    }
}
