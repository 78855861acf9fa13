//! Lots (FORMAT.md 1.1) through the CLI: a block of eight film capacitors, each read at two
//! frequencies in a series RC network. Readings are made exact by complex arithmetic from
//! the chosen capacitances, so the reduction must give those back, and the lot figures must
//! be those numpy and scipy give for the same values (tests/reference/lot_capability.py).

use num_complex::Complex64;
use std::process::{Command, Stdio};

/// The invented lot (nF); J tolerance (±5 %) on 100 nF.
const LOT: [(&str, f64); 8] = [
    ("FC-101", 98.2),
    ("FC-102", 101.5),
    ("FC-103", 99.7),
    ("FC-104", 104.6),
    ("FC-105", 100.8),
    ("FC-106", 97.1),
    ("FC-107", 106.0),
    ("FC-108", 100.1),
];
const R: f64 = 1500.0;
const VS: f64 = 2.0;
const FREQS: [f64; 2] = [800.0, 1600.0];

/// |VR| and |VC| of a series R–C driven at VS: I = VS / (R + 1/(jωC)).
fn readings(c: f64, f: f64) -> (f64, f64) {
    let w = 2.0 * std::f64::consts::PI * f;
    let zc = Complex64::new(0.0, -1.0 / (w * c));
    let i = Complex64::new(VS, 0.0) / (Complex64::new(R, 0.0) + zc);
    ((i * R).norm(), (i * zc).norm())
}

fn notebook() -> String {
    let mut t = String::from(
        "---\nrecord: LOT-T1\ntitle: Lot test\ndate: 2026-10-05\noperator: T. Tester (synthetic)\n\
         instruments:\n  dmm:\n    accuracy: 0.5%\n    resolution: 1 uV\n\
         parts:\n  R1:\n    kind: resistor\n    nominal: 1.5 kohm\n    tolerance: 0.1%\n\
         \x20\x20C1:\n    kind: capacitor\n    nominal: 100 nF\n    tolerance: J\n---\n\n\
         Invented readings of an invented lot, made by complex arithmetic.\n\n\
         ```readings\nid: films\nnetwork: RC\nparts: [R1, C1]\nmeter: dmm\nunit_of: C1\n---\n\
         | unit | f/Hz | VR/V | VC/V |\n|---|---|---|---|\n",
    );
    for (serial, c) in LOT {
        for f in FREQS {
            let (vr, vc) = readings(c * 1e-9, f);
            t.push_str(&format!("| {serial} | {f} | {vr:.12} | {vc:.12} |\n"));
        }
    }
    t.push_str("```\n");
    t
}

fn results_json(text: &str) -> serde_json::Value {
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("lot.md");
    std::fs::write(&nb, text).unwrap();
    let o = Command::new(env!("CARGO_BIN_EXE_benchrec"))
        .arg("results")
        .arg(&nb)
        .stdin(Stdio::null())
        .output()
        .expect("benchrec runs");
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    serde_json::from_slice(&o.stdout).expect("results JSON")
}

fn figure(block: &serde_json::Value, name: &str) -> f64 {
    block["results"]
        .as_array()
        .unwrap()
        .iter()
        .find(|r| r["name"] == name)
        .and_then(|r| r["value"].as_f64())
        .unwrap_or_else(|| panic!("no lot figure {name}"))
}

#[test]
fn each_unit_is_reduced_and_the_lot_figures_match_numpy() {
    let j = results_json(&notebook());
    let b = &j["blocks"][0];
    let units = b["units"].as_array().expect("units");
    assert_eq!(units.len(), 8);
    for (u, (serial, c)) in units.iter().zip(LOT) {
        assert_eq!(u["unit"], serial);
        let got = u["results"]
            .as_array()
            .unwrap()
            .iter()
            .find(|r| r["name"] == "C" && r.get("f").is_none())
            .and_then(|r| r["value"].as_f64())
            .expect("unit block C");
        // Synthetic readings: the chosen capacitance comes back (12 decimals in the cells).
        assert!((got / (c * 1e-9) - 1.0).abs() < 1e-9, "{serial}: {got}");
        let per_f = u["results"]
            .as_array()
            .unwrap()
            .iter()
            .filter(|r| r["name"] == "C" && r.get("f").is_some())
            .count();
        assert_eq!(per_f, 2, "{serial}: rows group by (unit, f)");
    }
    // numpy / scipy on the same values (tests/reference/lot_capability.out), in SI.
    let rel = |a: f64, b: f64| (a / b - 1.0).abs();
    assert_eq!(figure(b, "n"), 8.0);
    assert!(rel(figure(b, "mean"), 101.0e-9) < 1e-9);
    assert!(rel(figure(b, "s"), 3.018_987_531_323_326_3e-9) < 1e-7);
    assert!(rel(figure(b, "min"), 97.1e-9) < 1e-9);
    assert!(rel(figure(b, "max"), 106.0e-9) < 1e-9);
    assert!(rel(figure(b, "Cp"), 0.552_061_460_795_801_7) < 1e-7);
    assert!(rel(figure(b, "Cpk"), 0.441_649_168_636_641_33) < 1e-7);
    assert!(rel(figure(b, "AD_A2"), 0.262_604_126_577_343_8) < 1e-5);
    // The Cpk interval at the default coverage probability 95.45 % (Bissell 1990).
    let cpk = b["results"]
        .as_array()
        .unwrap()
        .iter()
        .find(|r| r["name"] == "Cpk")
        .unwrap();
    assert!(rel(cpk["low"].as_f64().unwrap(), 0.108_054_296_931_657_08) < 1e-6);
    assert!(rel(cpk["high"].as_f64().unwrap(), 0.775_244_040_341_625_6) < 1e-6);
    // Guarded acceptance (ILAC-G8 guard band U): 104.6 nF straddles USL = 105 nF with
    // U ≈ 0.8 % of reading, 106.0 nF lies wholly above it, the rest lie inside.
    let verdict = |s: &str| {
        b["verdicts"]
            .as_array()
            .unwrap()
            .iter()
            .find(|v| v["unit"] == s)
            .map(|v| v["verdict"].as_str().unwrap().to_string())
            .unwrap()
    };
    assert_eq!(verdict("FC-104"), "inconclusive");
    assert_eq!(verdict("FC-107"), "fail");
    assert_eq!(verdict("FC-106"), "pass");
    assert_eq!(figure(b, "pass"), 6.0);
    assert_eq!(figure(b, "fail"), 1.0);
    assert_eq!(figure(b, "inconclusive"), 1.0);
}

#[test]
fn json_without_lots_has_no_unit_keys() {
    let text = notebook()
        .replace("unit_of: C1\n", "")
        .replace("| unit | f/Hz", "| f/Hz")
        .replace("|---|---|---|---|", "|---|---|---|");
    let text: String = text
        .lines()
        .map(|l| match l.strip_prefix("| FC-") {
            Some(rest) => format!("|{}", rest.split_once('|').unwrap().1),
            None => l.to_string(),
        })
        .collect::<Vec<_>>()
        .join("\n");
    let j = results_json(&text);
    let b = &j["blocks"][0];
    assert!(b.get("units").is_none());
    assert!(b["verdicts"][0].get("unit").is_none());
    let keys: Vec<&String> = b["results"][0].as_object().unwrap().keys().collect();
    // serde_json keeps keys sorted: the same set as before lots.
    assert_eq!(keys, ["U", "dof", "f", "k", "name", "u", "unit", "value"]);
}

/// Builds `notebook` in a fresh folder and returns its record's page text without whitespace.
fn built_text(notebook: &str) -> String {
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("lot.md");
    std::fs::write(&nb, notebook).unwrap();
    let o = Command::new(env!("CARGO_BIN_EXE_benchrec"))
        .arg("build")
        .arg(&nb)
        .stdin(Stdio::null())
        .output()
        .expect("benchrec runs");
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let bytes = std::fs::read(dir.path().join("lot.pdf")).unwrap();
    pdf_extract::extract_text_from_mem(&bytes)
        .unwrap_or_default()
        .chars()
        .filter(|c| !c.is_whitespace())
        .collect()
}

#[test]
fn the_record_shows_one_table_of_units_and_the_histogram() {
    let text = built_text(&notebook());
    for needle in [
        "FC-107",
        "Cpk",
        "Anderson",
        "USL",
        "8units:6pass,1fail,1inconclusive",
    ] {
        assert!(text.contains(needle), "{needle} missing from the record");
    }
}

/// A lot of one unit has no s, Cp or Cpk, and the record says why instead of a bare dash.
#[test]
fn a_lot_of_one_unit_says_why_its_capability_is_missing() {
    let one: String = notebook()
        .lines()
        .filter(|l| !l.starts_with("| ") || l.starts_with("| unit") || l.contains(LOT[0].0))
        .map(|l| format!("{l}\n"))
        .collect();
    let text = built_text(&one);
    for needle in [
        "Lotof1unitofC1",
        "1unit:1pass",
        "(oneunit)",
        "(needstwoormoreunits)",
    ] {
        assert!(text.contains(needle), "{needle} missing from the record");
    }
}
