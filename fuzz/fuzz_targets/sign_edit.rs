//! `sign`'s front-matter edit on any notebook that parses: the edit either refuses, or its
//! result parses, reads back exactly the entry written, keeps the digest, and keeps every byte
//! outside the `signoff` entry (the text before it and after it are prefix and suffix).
#![no_main]
use benchrec::signoff::{self, Entry};

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    // The first line is the signer's name; the rest is the notebook.
    let text = String::from_utf8_lossy(data);
    let (by, raw) = text.split_once('\n').unwrap_or(("A. Signer", &text));
    let Ok(nb) = benchrec::notebook::parse(raw) else {
        return;
    };
    let entry = Entry {
        by: by.to_string(),
        on: "2026-12-01T09:30:00Z".into(),
        digest: signoff::digest(&nb),
        accepted: (by.len() % 2 == 1).then(|| format!("reason: {by}")),
        ..Entry::default()
    };
    let Ok(edited) = signoff::set_signoff(raw, &entry) else {
        return;
    };
    // Every other byte kept: exactly one range was replaced by the entry, and that range is
    // the old `signoff` entry (YAML reads it as a mapping with that one key) or empty.
    let r = signoff::edit::entry_range(raw).expect("set_signoff succeeded");
    let text = signoff::edit::entry_text(&entry, signoff::edit::line_end(raw));
    assert_eq!(edited, format!("{}{}{}", &raw[..r.start], text, &raw[r.end..]));
    let removed = &raw[r];
    if !removed.is_empty() {
        match serde_yaml::from_str::<serde_yaml::Value>(removed) {
            Ok(serde_yaml::Value::Mapping(m)) => {
                assert!(m.len() == 1 && m.contains_key("signoff"), "removed {removed:?}")
            }
            other => panic!("removed {removed:?}, which reads as {other:?}"),
        }
    }
    if by.trim().is_empty() || by.chars().any(char::is_control) {
        return; // `sign` refuses these names before it edits.
    }
    // An edit that `set_signoff` accepted must pass the check `sign` runs before it writes:
    // it parses, reads back the entry written and keeps the digest.
    if let Err(e) = signoff::check_edit(&edited, &entry) {
        panic!("edit accepted but broken: {e}\n---\n{edited}");
    }
});
