//! Writing the `signoff` entry into a notebook's front matter. Only that entry's lines change;
//! every other byte (BOM, line ends, comments, key order) is kept. The caller re-parses the
//! result ([`super::check_edit`]) before it replaces the file.

/// The fields written by `sign`. Empty options are left out.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Entry {
    pub by: String,
    pub on: String,
    pub digest: String,
    pub key: Option<String>,
    pub signature: Option<String>,
    pub accepted: Option<String>,
    /// Digests of the lab register entries the record relies on (asset id → `sha256:…`).
    pub register: Vec<(String, String)>,
}

/// A YAML double-quoted scalar (JSON string syntax is valid YAML).
fn yaml_quote(s: &str) -> String {
    serde_json::to_string(s).unwrap_or_else(|_| "\"\"".into())
}

/// The entry as block YAML, two-space indented; the signature as a literal block.
pub fn entry_text(e: &Entry, nl: &str) -> String {
    let mut out = format!("signoff:{nl}");
    let mut field = |k: &str, v: &str| out.push_str(&format!("  {k}: {}{nl}", yaml_quote(v)));
    field("by", &e.by);
    field("on", &e.on);
    field("digest", &e.digest);
    if let Some(a) = &e.accepted {
        field("accepted", a);
    }
    if let Some(k) = &e.key {
        field("key", k);
    }
    if !e.register.is_empty() {
        out.push_str(&format!("  register:{nl}"));
        for (id, d) in &e.register {
            out.push_str(&format!("    {}: {}{nl}", yaml_quote(id), yaml_quote(d)));
        }
    }
    if let Some(sig) = &e.signature {
        out.push_str(&format!("  signature: |{nl}"));
        for l in sig.lines() {
            out.push_str(&format!("    {l}{nl}"));
        }
    }
    out
}

/// Lines of `raw` as (start, end without the line end) byte offsets.
fn lines(raw: &str) -> Vec<(usize, usize)> {
    let mut out = Vec::new();
    let mut start = 0;
    for (i, b) in raw.bytes().enumerate() {
        if b == b'\n' {
            let end = if i > start && raw.as_bytes()[i - 1] == b'\r' {
                i - 1
            } else {
                i
            };
            out.push((start, end));
            start = i + 1;
        }
    }
    if start < raw.len() {
        out.push((start, raw.len()));
    }
    out
}

/// The key of a top-level mapping line (`key: …`, `"key": …`, `'key' : …`), decoded as YAML
/// decodes it; `None` for a line that is not a plain top-level key.
fn top_key(line: &str) -> Option<String> {
    let bytes = line.as_bytes();
    let end = match bytes.first()? {
        b'"' => {
            let mut i = 1;
            loop {
                match bytes.get(i)? {
                    b'\\' => i += 2,
                    b'"' => break i + 1,
                    _ => i += 1,
                }
            }
        }
        b'\'' => {
            let mut i = 1;
            loop {
                match bytes.get(i)? {
                    b'\'' if bytes.get(i + 1) == Some(&b'\'') => i += 2,
                    b'\'' => break i + 1,
                    _ => i += 1,
                }
            }
        }
        _ => {
            // A plain key ends at the first `:` followed by a blank or the end of the line.
            let mut i = 0;
            loop {
                match bytes.get(i) {
                    None => return None,
                    Some(b':') if matches!(bytes.get(i + 1), None | Some(b' ' | b'\t')) => break i,
                    Some(b'#') if i > 0 && matches!(bytes[i - 1], b' ' | b'\t') => return None,
                    _ => i += 1,
                }
            }
        }
    };
    let rest = line.get(end..)?.trim_start_matches([' ', '\t']);
    if !rest.starts_with(':') {
        return None;
    }
    let key_text = line.get(..end)?.trim_end();
    match serde_yaml::from_str::<serde_yaml::Value>(key_text).ok()? {
        serde_yaml::Value::String(s) => Some(s),
        _ => None,
    }
}

/// The line end `sign` writes: CRLF when the file has any.
pub fn line_end(raw: &str) -> &'static str {
    if raw.contains("\r\n") {
        "\r\n"
    } else {
        "\n"
    }
}

/// Returns `raw` with its front matter's `signoff` entry set to `entry`. An existing entry,
/// in any YAML spelling of its key, is replaced where it stands; otherwise the entry goes last.
pub fn set_signoff(raw: &str, entry: &Entry) -> Result<String, String> {
    let r = entry_range(raw)?;
    let text = entry_text(entry, line_end(raw));
    let mut out = String::with_capacity(raw.len() + text.len());
    out.push_str(&raw[..r.start]);
    out.push_str(&text);
    out.push_str(&raw[r.end..]);
    Ok(out)
}

/// The byte range of the existing top-level `signoff` entry (its key line to the next
/// top-level key, less blank lines and comments before that key), or an empty range at the
/// front matter's closing line when there is none.
pub fn entry_range(raw: &str) -> Result<std::ops::Range<usize>, String> {
    let ls = lines(raw);
    let text = |i: usize| &raw[ls[i].0..ls[i].1];
    if ls.is_empty() || text(0).trim_start_matches('\u{feff}').trim_end() != "---" {
        return Err("the notebook does not start with a front matter line `---`".into());
    }
    let close = (1..ls.len())
        .find(|&i| matches!(text(i).trim_end(), "---" | "..."))
        .ok_or("the front matter has no closing `---` line")?;
    // Lines at column 0 that are neither blank nor comments start top-level entries.
    let top: Vec<usize> = (1..close)
        .filter(|&i| {
            let t = text(i);
            !t.is_empty() && !t.starts_with([' ', '\t', '#'])
        })
        .collect();
    if let Some(&i) = top
        .iter()
        .find(|&&i| text(i).starts_with(['{', '[', '?', '-', '&', '!', '*']))
    {
        return Err(format!(
            "line {} of the front matter is not a `key: value` entry; sign edits only a front matter written as one `key: value` per line (block style)",
            i + 1
        ));
    }
    // A column-0 line that is not a key is the continuation of a multi-line scalar, not an
    // entry; it is skipped.
    let keys: Vec<(usize, String)> = top
        .iter()
        .filter_map(|&i| top_key(text(i)).map(|k| (i, k)))
        .collect();
    let found: Vec<usize> = keys
        .iter()
        .filter(|(_, k)| k == "signoff")
        .map(|(i, _)| *i)
        .collect();
    match found.as_slice() {
        [] => Ok(ls[close].0..ls[close].0),
        [i] => {
            // The entry ends at the first later key where what precedes reads, on its own,
            // as the one `signoff` entry (a quoted scalar may run on at column 0).
            let ends = keys
                .iter()
                .map(|(j, _)| *j)
                .filter(|j| j > i)
                .chain([close]);
            for next in ends {
                // Keep blank lines and comments that sit between the entry and the next key.
                let mut j = next;
                while j > i + 1 && {
                    let t = text(j - 1).trim();
                    t.is_empty() || t.starts_with('#')
                } {
                    j -= 1;
                }
                let range = ls[*i].0..ls[j].0;
                if reads_as_signoff_entry(&raw[range.clone()]) {
                    return Ok(range);
                }
            }
            Err(format!(
                "sign cannot tell where the `signoff` entry of line {} ends; write it in block style, one key per line",
                i + 1
            ))
        }
        _ => Err("the front matter has more than one `signoff` entry".into()),
    }
}

/// Whether `text` alone is YAML for a mapping with the single key `signoff`.
fn reads_as_signoff_entry(text: &str) -> bool {
    matches!(
        serde_yaml::from_str::<serde_yaml::Value>(text),
        Ok(serde_yaml::Value::Mapping(m)) if m.len() == 1 && m.contains_key("signoff")
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn keys_are_read_in_every_spelling() {
        for (line, want) in [
            ("signoff:", Some("signoff")),
            ("\"signoff\":", Some("signoff")),
            ("'signoff' :", Some("signoff")),
            ("\"sign\\u006Fff\": {}", Some("signoff")),
            ("signoff : x", Some("signoff")),
            ("title: a: b", Some("title")),
            ("url:http://x", None),
            ("'it''s': 1", Some("it's")),
        ] {
            assert_eq!(top_key(line).as_deref(), want, "{line}");
        }
    }

    #[test]
    fn a_flow_style_front_matter_is_refused() {
        let e = Entry::default();
        assert!(set_signoff("---\n{record: a}\n---\n", &e).is_err());
    }

    /// Found by the `sign_edit` fuzz target: a double-quoted scalar inside the entry runs on
    /// to a line at column 0 that looks like a key; the entry ends after it.
    #[test]
    fn a_quoted_scalar_running_on_at_column_0_stays_inside_the_entry() {
        let raw = "---\nrecord: r\nsignoff:\n  by: \"a\n\nlot: b\"\n  on: x\n  digest: y\ntitle: t\n---\n";
        let r = entry_range(raw).unwrap();
        assert_eq!(
            &raw[r],
            "signoff:\n  by: \"a\n\nlot: b\"\n  on: x\n  digest: y\n"
        );
    }
}
