//! Sign-off: the canonical digest of what determines the results, signing a notebook in place
//! (only the `signoff` entry of its front matter changes), and finding the source again in a PDF.

use crate::notebook::{Item, Notebook};
use sha2::{Digest, Sha256};

/// Prefix of every digest string, so the algorithm is named in the record.
pub const DIGEST_PREFIX: &str = "sha256:";

/// Lines of a text with line ends normalised, trailing blanks trimmed and blank lines dropped.
fn canonical_lines(text: &str) -> String {
    let mut out = String::new();
    for line in text.lines() {
        let line = line.trim_end();
        if line.trim().is_empty() {
            continue;
        }
        out.push_str(line);
        out.push('\n');
    }
    out
}

/// The front matter without its `signoff` entry, as JSON with sorted keys, so that key order,
/// quoting style and comments in the YAML do not change the digest, but any value does.
fn canonical_front(yaml_text: &str) -> String {
    match serde_yaml::from_str::<serde_yaml::Value>(yaml_text) {
        Ok(serde_yaml::Value::Mapping(mut map)) => {
            map.remove("signoff");
            let value = serde_yaml::Value::Mapping(map);
            match serde_json::to_value(&value) {
                Ok(json) => json.to_string(),
                Err(_) => serde_yaml::to_string(&value).unwrap_or_default(),
            }
        }
        // The parser has already accepted the notebook; fall back to the text itself.
        _ => canonical_lines(yaml_text),
    }
}

/// The canonical form hashed by [`digest`]: front matter (less `signoff`) and every readings
/// block, in order. Prose is left out, so editing the narrative does not void a sign-off.
pub fn canonical_form(nb: &Notebook) -> String {
    let front = nb
        .source
        .get(nb.front_span.start..nb.front_span.end)
        .unwrap_or("");
    let mut out = String::from("benchrec canonical form 1\n[front]\n");
    out.push_str(&canonical_front(front));
    out.push('\n');
    for item in &nb.items {
        if let Item::Readings(block) = item {
            out.push_str("[readings]\n");
            out.push_str(&canonical_lines(&block.body));
        }
    }
    out
}

/// `sha256:<hex>` of [`canonical_form`].
pub fn digest(nb: &Notebook) -> String {
    format!(
        "{DIGEST_PREFIX}{}",
        sha256_hex(canonical_form(nb).as_bytes())
    )
}

pub fn sha256_hex(bytes: &[u8]) -> String {
    let hash = Sha256::digest(bytes);
    hash.iter().map(|b| format!("{b:02x}")).collect()
}

/// A YAML double-quoted scalar (JSON string syntax is valid YAML).
fn yaml_quote(s: &str) -> String {
    serde_json::to_string(s).unwrap_or_else(|_| "\"\"".into())
}

/// Returns `raw` with its front matter's `signoff` entry set to `by`, `on`, `digest`; every
/// other byte is kept. `raw` is the file as read (a BOM and CRLF line ends are kept).
pub fn set_signoff(raw: &str, by: &str, on: &str, digest: &str) -> Result<String, String> {
    let nl = if raw.contains("\r\n") { "\r\n" } else { "\n" };
    // Byte offsets of the start of every line.
    let mut starts = vec![0usize];
    for (i, b) in raw.bytes().enumerate() {
        if b == b'\n' {
            starts.push(i + 1);
        }
    }
    let line = |i: usize| -> &str {
        let s = starts[i];
        let e = starts.get(i + 1).copied().unwrap_or(raw.len());
        raw[s..e].trim_end_matches(['\n', '\r'])
    };
    let nlines = if raw.ends_with('\n') {
        starts.len() - 1
    } else {
        starts.len()
    };
    if nlines == 0 || line(0).trim_start_matches('\u{feff}').trim_end() != "---" {
        return Err("the notebook does not start with a front matter line `---`".into());
    }
    let close = (1..nlines)
        .find(|&i| matches!(line(i).trim_end(), "---" | "..."))
        .ok_or("the front matter has no closing `---` line")?;
    let entry = format!(
        "signoff:{nl}  by: {}{nl}  on: {}{nl}  digest: {}{nl}",
        yaml_quote(by),
        yaml_quote(on),
        yaml_quote(digest)
    );
    // An existing top-level `signoff:` entry runs to the next unindented line.
    let existing = (1..close).find(|&i| {
        let l = line(i);
        l.starts_with("signoff:") || l.starts_with("signoff :")
    });
    let (from, to) = match existing {
        Some(i) => {
            let mut j = i + 1;
            while j < close {
                let l = line(j);
                if !(l.starts_with(' ') || l.starts_with('\t') || l.trim().is_empty()) {
                    break;
                }
                j += 1;
            }
            // Keep blank lines that separated the entry from what follows.
            while j > i + 1 && line(j - 1).trim().is_empty() {
                j -= 1;
            }
            (starts[i], starts[j])
        }
        None => (starts[close], starts[close]),
    };
    let mut out = String::with_capacity(raw.len() + entry.len());
    out.push_str(&raw[..from]);
    out.push_str(&entry);
    out.push_str(&raw[to..]);
    Ok(out)
}

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

#[cfg(test)]
mod tests {
    use super::*;

    const NB: &str = "---\nrecord: S-1\ntitle: t\ndate: 2026-11-02\noperator: o\nparts:\n  R:\n    kind: resistor\n    nominal: 100 ohm\n    tolerance: 1%\n---\n\nSome prose.\n\n```readings\nid: b\nnetwork: RC\nparts: [R]\n---\nf/Hz VR/V VC/V\n1000 1.0 1.0\n```\n\nMore prose.\n";

    fn dig(src: &str) -> String {
        digest(&crate::notebook::parse(src).expect("parses"))
    }

    #[test]
    fn digest_ignores_prose_and_signoff_but_not_readings_or_parts() {
        let d = dig(NB);
        assert_eq!(d, dig(&NB.replace("Some prose.", "Other words entirely.")));
        assert_eq!(
            d,
            dig(&NB.replace("More prose.\n", "More prose.\n\n# A new heading\n"))
        );
        assert_ne!(
            d,
            dig(&NB.replace("1000 1.0 1.0", "1000 1.0 1.1")),
            "a reading"
        );
        assert_ne!(
            d,
            dig(&NB.replace("nominal: 100 ohm", "nominal: 101 ohm")),
            "a part value"
        );
        assert_ne!(
            d,
            dig(&NB.replace("tolerance: 1%", "tolerance: 2%")),
            "a tolerance"
        );
        let signed = set_signoff(NB, "A", "2026-11-03", &d).unwrap();
        assert_eq!(d, dig(&signed), "the sign-off itself is not hashed");
        assert!(d.starts_with(DIGEST_PREFIX) && d.len() == DIGEST_PREFIX.len() + 64);
    }

    #[test]
    fn signing_changes_only_the_signoff_entry() {
        let once = set_signoff(NB, "A. One", "2026-11-03T09:00:00Z", "sha256:aa").unwrap();
        let close = NB.find("---\n\nSome").unwrap();
        assert_eq!(&once[..close], &NB[..close]);
        assert!(once.ends_with(&NB[close..]));
        // Signing again replaces the entry in place.
        let twice = set_signoff(&once, "B. Two", "2026-11-04T09:00:00Z", "sha256:bb").unwrap();
        assert_eq!(
            twice,
            once.replace("A. One", "B. Two")
                .replace("11-03", "11-04")
                .replace("aa", "bb")
        );
        // CRLF files get CRLF lines; nothing else changes.
        let crlf = NB.replace('\n', "\r\n");
        let signed = set_signoff(&crlf, "C", "D", "E").unwrap();
        assert!(signed.contains("signoff:\r\n  by: \"C\"\r\n"));
        assert_eq!(
            signed.replace(
                "signoff:\r\n  by: \"C\"\r\n  on: \"D\"\r\n  digest: \"E\"\r\n",
                ""
            ),
            crlf
        );
        // Names are quoted, so YAML-special characters stay text.
        let odd = set_signoff(NB, "O'Neil: #1", "x", "y").unwrap();
        assert!(
            crate::notebook::parse(&odd)
                .map(|n| n.front.signoff.map(|s| s.by))
                .ok()
                .flatten()
                .as_deref()
                == Some("O'Neil: #1")
        );
    }
}
