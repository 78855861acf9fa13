//! `check` says what matters: every warning with its file:line:column, notes with `-v`, one
//! line per verdict, and `--strict` exits 1 on a record with reservations.

mod common;

use common::run;
use std::path::PathBuf;

fn demo(name: &str) -> String {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("demo")
        .join(name)
        .to_str()
        .unwrap()
        .to_string()
}

#[test]
fn check_prints_warnings_at_their_row_and_strict_fails_on_them() {
    let snub = demo("snubber-caps.md");
    let text = std::fs::read_to_string(&snub).unwrap();
    // The 1.2 kHz row of the invented snubber data fails the Kirchhoff check (Vs against
    // √(VR² + VC²), a handbook identity of the series RC); find its line independently.
    let line = text
        .lines()
        .position(|l| l.starts_with("1200 ") && l.contains("1.220"))
        .expect("the 1.2 kHz row")
        + 1;
    let o = run(&["check", &snub]);
    assert_eq!(o.status.code(), Some(0));
    let out = String::from_utf8_lossy(&o.stdout);
    let want = format!("warning: {snub}:{line}:1: Kirchhoff check at 1.2 kHz");
    assert!(out.contains(&want), "{want} not in\n{out}");
    // The same 1.2 kHz row also makes the frequencies disagree on C (χ² test); the notes are
    // the column without an instrument and C without the warned row (C_clean).
    assert!(out.contains("2 warnings, 2 notes"), "{out}");
    assert!(
        out.contains(&format!("warning: {snub}:")) && out.contains("C: the frequencies disagree"),
        "{out}"
    );
    assert!(!out.contains("note: "), "notes only with -v: {out}");
    assert!(
        out.contains("pass         C of C1 (block snub-c1)"),
        "{out}"
    );
    let v = run(&["check", "-v", &snub]);
    let verbose = String::from_utf8_lossy(&v.stdout);
    assert!(verbose.contains("note: "));
    assert!(
        verbose.contains("without the rows with warnings (1.2 kHz), C_clean = "),
        "{verbose}"
    );
    assert_eq!(run(&["check", "--strict", &snub]).status.code(), Some(1));
    // The sensor tank has notes but no warning and passes: --strict accepts it.
    let o = run(&["check", "--strict", &demo("sensor-tank.md")]);
    assert_eq!(
        o.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&o.stdout)
    );
}

/// A phase cited in prose is printed in degrees, as the tables print it, with U to two
/// significant digits (GUM 7.2.6) and the pair bracketed before the unit (GUM 7.2.4).
#[test]
fn a_cited_phase_prints_in_degrees() {
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("snub.md");
    let text = std::fs::read_to_string(demo("snubber-caps.md")).unwrap();
    std::fs::write(&nb, format!("{text}\nCITE `=snub-c1.phase@2400Hz` END\n")).unwrap();
    let o = run(&["build", nb.to_str().unwrap()]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let json: serde_json::Value =
        serde_json::from_slice(&run(&["results", nb.to_str().unwrap()]).stdout).unwrap();
    let r = json["blocks"][0]["results"]
        .as_array()
        .unwrap()
        .iter()
        .find(|r| r["name"] == "phase" && r["f"] == 2400.0)
        .expect("phase at 2.4 kHz")
        .clone();
    assert_eq!(r["unit"], "rad");
    let (v, u) = (
        r["value"].as_f64().unwrap().to_degrees(),
        r["U"].as_f64().unwrap().to_degrees(),
    );
    // U between 0.1° and 1°: two decimals.
    assert!((0.1..1.0).contains(&u), "{u}");
    let want = format!("({v:.2}±{u:.2})°");
    let pdf =
        pdf_extract::extract_text_from_mem(&std::fs::read(dir.path().join("snub.pdf")).unwrap())
            .unwrap();
    let flat: String = pdf.split_whitespace().collect();
    assert!(
        flat.contains(&format!("CITE{want}END")),
        "{want} not in {}",
        &flat[flat.find("CITE").unwrap_or(0)..][..40]
    );
}
