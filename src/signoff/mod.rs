//! Sign-off: the canonical digest of what determines the results, the state of a notebook's
//! sign-off (name only, keyed, void, forged), writing the entry ([`edit`]), SSH signatures
//! ([`key`]) and reading a PDF back ([`pdf`]).

pub mod edit;
pub mod key;
pub mod pdf;

use crate::notebook::{Item, Notebook};
use sha2::{Digest, Sha256};

pub use edit::{set_signoff, Entry};
pub use pdf::{pdf_attachments, verify_pdf_source};

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
/// Two sections are appended only when used, so earlier records keep their digest: a notebook
/// whose blocks read table files (`table:`) gets the SHA-256 of each file's bytes in block
/// order; one that relies on its lab register gets each register entry it uses and the
/// register defaults it takes.
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
    for spec in &nb.tables.specs {
        let file = nb.tables.files.iter().find(|f| f.path == spec.path);
        out.push_str(&format!("[table {}]\n", spec.path));
        out.push_str(&file.map_or("not read".into(), |f| sha256_hex(&f.bytes)));
        out.push('\n');
    }
    for (name, text) in register_parts(nb) {
        out.push_str(&format!("[register {name}]\n{text}\n"));
    }
    out
}

/// The name under which the register defaults a notebook takes are digested.
pub const REGISTER_DEFAULTS: &str = "(defaults)";

/// What the notebook takes from its register, as (asset id or [`REGISTER_DEFAULTS`],
/// canonical JSON), in asset-id order, defaults last.
fn register_parts(nb: &Notebook) -> Vec<(String, String)> {
    let Some(lab) = &nb.lab else {
        return Vec::new();
    };
    let mut out: Vec<(String, String)> = lab
        .used
        .iter()
        .map(|u| (u.id.clone(), u.canonical.clone()))
        .collect();
    out.sort();
    if !lab.defaults.is_empty() {
        let json = serde_json::to_string(&lab.defaults).unwrap_or_default();
        out.push((REGISTER_DEFAULTS.to_string(), json));
    }
    out
}

/// The digest of each register part the notebook uses (see [`canonical_form`]): `sign` writes
/// them beside the digest so `verify` can name the entry that changed.
pub fn register_digests(nb: &Notebook) -> Vec<(String, String)> {
    register_parts(nb)
        .into_iter()
        .map(|(n, t)| (n, format!("{DIGEST_PREFIX}{}", sha256_hex(t.as_bytes()))))
        .collect()
}

/// The register entries whose digest differs from the one `recorded` at signing (or that
/// were used on one side only), by name.
pub fn changed_entries(nb: &Notebook, recorded: &[(String, String)]) -> Vec<String> {
    let now = register_digests(nb);
    let mut names: Vec<String> = now
        .iter()
        .filter(|e| !recorded.contains(e))
        .map(|(n, _)| n.clone())
        .collect();
    for (n, _) in recorded {
        if !now.iter().any(|(m, _)| m == n) && !names.contains(n) {
            names.push(n.clone());
        }
    }
    names.sort();
    names
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

/// What a notebook's sign-off proves.
#[derive(Debug, Clone, PartialEq)]
pub enum SignState {
    Unsigned,
    /// A name and date whose digest matches, with no signature: not authenticated.
    NameOnly {
        by: String,
        on: String,
        digest: String,
        accepted: Option<String>,
    },
    /// A good signature by the key `key` over the record id, digest, name and date. Whether
    /// that key belongs to `by` is for an allowed-signers list to say (`verify --signers`).
    Keyed {
        by: String,
        on: String,
        digest: String,
        key: String,
        accepted: Option<String>,
    },
    /// Signed, but the readings changed since.
    Void {
        by: String,
        on: String,
        recorded: String,
    },
    /// The digest matches but the signature does not hold (a name, date or key edited by hand,
    /// or a signature from elsewhere).
    Forged {
        by: String,
        on: String,
        reason: String,
    },
}

impl SignState {
    /// One line for `verify`, the archive and the record.
    pub fn describe(&self) -> String {
        match self {
            SignState::Unsigned => "unsigned".into(),
            SignState::NameOnly { by, on, .. } => {
                format!("name only, not authenticated: signed as {by} on {on}, no signature")
            }
            SignState::Keyed { by, on, key, .. } => {
                format!("signed by {by} on {on} with key {key}")
            }
            SignState::Void { by, on, .. } => {
                format!("void: signed by {by} on {on}, but the readings changed after signing")
            }
            SignState::Forged { by, on, reason } => {
                format!("not authenticated: the sign-off as {by} on {on} fails its check: {reason}")
            }
        }
    }
}

/// The sign-off's state, given the notebook's own digest. Pure: the signature is checked here.
pub fn state(nb: &Notebook, digest: &str) -> SignState {
    let Some(s) = &nb.front.signoff else {
        return SignState::Unsigned;
    };
    let (by, on) = (s.by.clone(), s.on.clone());
    if s.digest != digest {
        return SignState::Void {
            by,
            on,
            recorded: s.digest.clone(),
        };
    }
    let Some(sig) = &s.signature else {
        if let Some(k) = &s.key {
            return SignState::Forged {
                by,
                on,
                reason: format!("it names key {k} but carries no signature"),
            };
        }
        return SignState::NameOnly {
            by,
            on,
            digest: s.digest.clone(),
            accepted: s.accepted.clone(),
        };
    };
    if [&nb.front.record, &s.digest, &s.by, &s.on]
        .iter()
        .any(|f| f.chars().any(char::is_control))
    {
        // A line end inside a field would let two different sign-offs share one message.
        return SignState::Forged {
            by,
            on,
            reason: "the record id, digest, name or date holds a line end or control character"
                .into(),
        };
    }
    let msg = key::message(&nb.front.record, &s.digest, &s.by, &s.on);
    match key::check(sig, s.key.as_deref(), &msg) {
        Ok(k) => SignState::Keyed {
            by,
            on,
            digest: s.digest.clone(),
            key: key::key_fingerprint(&k),
            accepted: s.accepted.clone(),
        },
        Err(reason) => SignState::Forged { by, on, reason },
    }
}

/// An ISO 8601 date-time (`2026-12-02T09:30:00Z`, with an offset, or without seconds), as UTC.
/// A date alone is not a time of signing.
pub fn parse_time(on: &str) -> Option<chrono::NaiveDateTime> {
    let on = on.trim();
    if let Ok(t) = chrono::DateTime::parse_from_rfc3339(on) {
        return Some(t.naive_utc());
    }
    for f in ["%Y-%m-%dT%H:%M:%S%#z", "%Y-%m-%dT%H:%M%#z"] {
        if let Ok(t) = chrono::DateTime::parse_from_str(on, f) {
            return Some(t.naive_utc());
        }
    }
    for f in [
        "%Y-%m-%dT%H:%M:%S",
        "%Y-%m-%dT%H:%M",
        "%Y-%m-%dT%H:%M:%SZ",
        "%Y-%m-%dT%H:%MZ",
    ] {
        if let Ok(t) = chrono::NaiveDateTime::parse_from_str(on, f) {
            return Some(t);
        }
    }
    None
}

/// Checks that `edited` (the notebook after [`set_signoff`]) still parses, carries exactly the
/// entry written, and has the digest the entry names.
pub fn check_edit(edited: &str, entry: &Entry) -> Result<(), String> {
    check_edit_with(edited, entry, &[], None)
}

/// [`check_edit`] for a notebook whose blocks read the table files `tables` (as the record
/// built before signing read them; signing does not touch them) and that is read with its lab
/// register.
pub fn check_edit_with(
    edited: &str,
    entry: &Entry,
    tables: &[crate::notebook::TableFile],
    register: Option<&crate::notebook::register::Register>,
) -> Result<(), String> {
    let mut nb = crate::notebook::parse_with(edited, register).map_err(|d| {
        format!(
            "the signed notebook would not parse ({}); nothing was written",
            d.first().map(|d| d.message.as_str()).unwrap_or("?")
        )
    })?;
    let s = nb
        .front
        .signoff
        .as_ref()
        .ok_or("the signed notebook would carry no sign-off; nothing was written")?;
    let same = s.by == entry.by
        && s.on == entry.on
        && s.digest == entry.digest
        && s.key == entry.key
        && s.signature.as_deref().map(str::trim) == entry.signature.as_deref().map(str::trim)
        && s.accepted == entry.accepted
        && s.register == entry.register;
    if !same {
        return Err(
            "the signed notebook would read back a different sign-off; nothing was written".into(),
        );
    }
    nb.tables.files = tables.to_vec();
    if digest(&nb) != entry.digest {
        return Err("signing would change the notebook's digest; nothing was written".into());
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn set_signoff(raw: &str, by: &str, on: &str, digest: &str) -> Result<String, String> {
        edit::set_signoff(
            raw,
            &Entry {
                by: by.into(),
                on: on.into(),
                digest: digest.into(),
                ..Entry::default()
            },
        )
    }

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
