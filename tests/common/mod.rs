//! Helpers shared by the test binaries that run the real program.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

pub fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_benchrec"))
}

pub fn run(args: &[&str]) -> Output {
    bin()
        .args(args)
        .stdin(Stdio::null())
        .output()
        .expect("benchrec runs")
}

pub fn manifest_dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

pub fn malformed_dir() -> PathBuf {
    manifest_dir().join("tests").join("malformed")
}

pub fn s(p: &Path) -> &str {
    p.to_str().expect("temp paths are UTF-8")
}

pub fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

pub fn stdout(o: &Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

/// Text with all white space removed and typographic quotes made plain, for matching PDF text
/// across line breaks, kerning gaps and smart quotes.
pub fn squash(t: &str) -> String {
    t.chars()
        .filter(|c| !c.is_whitespace())
        .map(|c| match c {
            '\u{201C}' | '\u{201D}' | '\u{201E}' => '"',
            '\u{2018}' | '\u{2019}' => '\'',
            c => c,
        })
        .collect()
}

pub fn pdf_text(bytes: &[u8]) -> String {
    pdf_extract::extract_text_from_mem(bytes).unwrap_or_default()
}

/// Every stream of a PDF, decompressed where possible, concatenated (to search for leaks).
pub fn pdf_all_stream_bytes(bytes: &[u8]) -> Vec<u8> {
    let mut out = Vec::new();
    if let Ok(doc) = lopdf::Document::load_mem(bytes) {
        for obj in doc.objects.values() {
            if let Ok(st) = obj.as_stream() {
                match st.decompressed_content() {
                    Ok(d) => out.extend_from_slice(&d),
                    Err(_) => out.extend_from_slice(&st.content),
                }
            }
        }
    }
    out
}

pub fn contains_bytes(hay: &[u8], needle: &[u8]) -> bool {
    !needle.is_empty() && hay.windows(needle.len()).any(|w| w == needle)
}

/// The base notebook of the catalogue; it must build.
pub fn base_notebook() -> String {
    std::fs::read_to_string(malformed_dir().join("ok-minimal.md"))
        .expect("tests/malformed/ok-minimal.md")
}

/// The 10 MB line: the VR cell of the 800 Hz row (line 32, column 9) becomes a 1 followed by
/// ten million zeros, a well-formed decimal that no f64 holds.
pub fn huge_line_notebook() -> Vec<u8> {
    let base = base_notebook();
    let cell = format!("1{}", "0".repeat(10_000_000));
    let out = base.replacen("800     0.9015", &format!("800     {cell}"), 1);
    assert_ne!(out, base, "generator anchor missing from ok-minimal.md");
    out.into_bytes()
}

/// A 1×1 PNG (PNG spec, ISO/IEC 15948: signature, IHDR, IDAT, IEND), valid so that a refusal
/// cannot be blamed on a broken file.
pub const TINY_PNG: &[u8] = &[
    0x89, 0x50, 0x4E, 0x47, 0x0D, 0x0A, 0x1A, 0x0A, 0x00, 0x00, 0x00, 0x0D, 0x49, 0x48, 0x44, 0x52,
    0x00, 0x00, 0x00, 0x01, 0x00, 0x00, 0x00, 0x01, 0x08, 0x06, 0x00, 0x00, 0x00, 0x1F, 0x15, 0xC4,
    0x89, 0x00, 0x00, 0x00, 0x0D, 0x49, 0x44, 0x41, 0x54, 0x78, 0x9C, 0x63, 0xF8, 0xCF, 0xC0, 0xF0,
    0x1F, 0x00, 0x05, 0x00, 0x01, 0xFF, 0x89, 0x99, 0x3D, 0x1D, 0x00, 0x00, 0x00, 0x00, 0x49, 0x45,
    0x4E, 0x44, 0xAE, 0x42, 0x60, 0x82,
];

pub fn files_in(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .map(|rd| {
            rd.filter_map(|e| e.ok())
                .map(|e| e.file_name().to_string_lossy().into_owned())
                .collect()
        })
        .unwrap_or_default();
    v.sort();
    v
}

/// Results of a notebook as JSON, or a panic with its stderr.
pub fn results_json(nb: &Path) -> serde_json::Value {
    let o = run(&["results", s(nb)]);
    assert!(
        o.status.success(),
        "results {} failed:\n{}",
        nb.display(),
        stderr(&o)
    );
    serde_json::from_str(&stdout(&o))
        .unwrap_or_else(|e| panic!("results JSON of {}: {e}", nb.display()))
}

/// (block id, name, f, value, u, U) of every result, rounded to 12 significant digits.
pub fn result_values(j: &serde_json::Value) -> Vec<String> {
    let mut v = Vec::new();
    for b in j["blocks"].as_array().into_iter().flatten() {
        for r in b["results"].as_array().into_iter().flatten() {
            let num = |k: &str| {
                r[k].as_f64()
                    .map(|x| format!("{x:.12e}"))
                    .unwrap_or_else(|| format!("{}", r[k]))
            };
            v.push(format!(
                "{} {} {} {} {} {}",
                b["id"],
                r["name"],
                r["f"],
                num("value"),
                num("u"),
                num("U")
            ));
        }
    }
    v
}

/// Tokens that betray a non-finite number printed as text.
pub fn non_finite_tokens(text: &str) -> Vec<String> {
    text.split(|c: char| !c.is_ascii_alphanumeric())
        .filter(|t| matches!(t.to_ascii_lowercase().as_str(), "nan" | "inf" | "infinity"))
        .map(str::to_string)
        .collect()
}

/// The value of the block result `name` (no `f`) of block 0.
pub fn block_value(j: &serde_json::Value, name: &str) -> f64 {
    j["blocks"][0]["results"]
        .as_array()
        .unwrap()
        .iter()
        .find(|r| r["name"] == name && r.get("f").is_none())
        .unwrap_or_else(|| panic!("no block result {name}"))["value"]
        .as_f64()
        .unwrap()
}

/// The text of the PDF at `path`.
pub fn pdf_text_file(path: &Path) -> String {
    pdf_text(&std::fs::read(path).unwrap())
}

/// A demo notebook's path.
pub fn demo(name: &str) -> PathBuf {
    manifest_dir().join("demo").join(name)
}

/// Front matter of the synthetic test notebooks: a bench meter and four parts (R1, C1, R2,
/// L1), all invented, then a blank line.
pub fn synthetic_front(record: &str, title: &str, date: &str) -> String {
    format!(
        "---\nrecord: {record}\ntitle: {title}\ndate: {date}\noperator: T. Tester (synthetic)\ninstruments:\n  dmm:\n    what: bench meter\n    accuracy: 0.5% + 2\n    resolution: 0.1 mV\nparts:\n  R1:\n    kind: resistor\n    nominal: 2.2 kohm\n    tolerance: 1%\n  C1:\n    kind: capacitor\n    nominal: 68 nF\n    tolerance: K\n  R2:\n    kind: resistor\n    nominal: 47 ohm\n    tolerance: 1%\n  L1:\n    kind: inductor\n    nominal: 6.8 mH\n    tolerance: K\n    dcr: 1.9 ohm\n---\n\n"
    )
}

/// Every verb of the command line.
pub const VERBS: [&str; 12] = [
    "build",
    "check",
    "results",
    "sign",
    "verify",
    "index",
    "trend",
    "compare",
    "watch",
    "new",
    "completions",
    "man",
];
