//! A check standard followed through records (`benchrec trend`) and two results compared
//! (`benchrec compare`), against scipy.stats.linregress (tests/reference/trend_drift.py and
//! its .out), the NIST/SEMATECH e-Handbook §6.3.2.2 chart limits and ISO 13528's E_n.

mod common;

use common::*;
use std::path::Path;

/// A notebook of the invented check standard CS-100n read once at 1 kHz against a 1.5 kΩ
/// resistor: readings made so that C = VR / (2π f R VC) is `c_nf` nF exactly.
fn notebook(record: &str, date: &str, c_nf: f64) -> String {
    let (f, r, vc) = (1000.0f64, 1500.0f64, 1.0f64);
    let vr = 2.0 * std::f64::consts::PI * f * r * c_nf * 1e-9 * vc;
    format!(
        "---\nrecord: {record}\ntitle: Check standard\ndate: {date}\noperator: T. Tester (synthetic)\n\
         instruments:\n  dmm:\n    accuracy: 0.02% + 2\n    resolution: 0.01 mV\n\
         parts:\n  R1:\n    kind: resistor\n    nominal: 1.5 kohm\n  CS-100n:\n    kind: capacitor\n    nominal: 100 nF\n    tolerance: 1%\n---\n\n\
         Invented data.\n\n```readings\nid: cs\nnetwork: RC\nparts: [R1, CS-100n]\nmeter: dmm\n---\n\
         f/Hz VR/V VC/V\n{f} {vr:.15} {vc}\n```\n"
    )
}

fn reference(key: &str) -> f64 {
    let out =
        std::fs::read_to_string(manifest_dir().join("tests/reference/trend_drift.out")).unwrap();
    out.lines()
        .find_map(|l| l.strip_prefix(key).map(|v| v.trim().parse().unwrap()))
        .unwrap_or_else(|| panic!("{key} not in trend_drift.out"))
}

fn tree(dir: &Path, extra: Option<f64>) {
    // Days 0, 31, 59, 90, 120 from 2026-01-05, as in trend_drift.py.
    let series = [
        ("2026-01-05", 100.012),
        ("2026-02-05", 100.019),
        ("2026-03-05", 100.021),
        ("2026-04-05", 100.030),
        ("2026-05-05", 100.034),
    ];
    for (i, (date, c)) in series.iter().enumerate() {
        let rec = format!("CS-{}", i + 1);
        std::fs::write(dir.join(format!("{rec}.md")), notebook(&rec, date, *c)).unwrap();
    }
    if let Some(c) = extra {
        std::fs::write(dir.join("CS-6.md"), notebook("CS-6", "2026-06-05", c)).unwrap();
    }
}

#[test]
fn trend_gives_the_reference_drift_and_the_chart() {
    let d = tempfile::tempdir().unwrap();
    tree(d.path(), None);
    let notebooks: Vec<(String, benchrec::judge::Record)> = (1..=5)
        .map(|i| {
            let p = d.path().join(format!("CS-{i}.md"));
            let (rec, _) = benchrec::pipeline::render_file(&p).unwrap();
            (p.display().to_string(), rec)
        })
        .collect();
    let t = benchrec::trend::gather("CS-100n", None, &notebooks);
    assert_eq!(t.points.len(), 5);
    assert_eq!(t.result, "C");
    let dr = t.drift.expect("a drift from five points");
    let rel = |a: f64, b: f64| ((a - b) / b).abs();
    assert!(
        rel(dr.slope, reference("slope_nF_per_day") * 1e-9) < 1e-7,
        "{dr:?}"
    );
    assert!(
        rel(dr.u_slope, reference("stderr_nF_per_day") * 1e-9) < 1e-6,
        "{dr:?}"
    );
    let c = t.chart.as_ref().unwrap();
    assert!(rel(c.mean, reference("mean_nF") * 1e-9) < 1e-9);
    assert!(rel(c.mr_bar, reference("mr_bar_nF") * 1e-9) < 1e-6);
    assert!(c.outside.is_empty());

    // Through the CLI: the table on standard output and the trend record written.
    let out = d.path().join("cs-trend.pdf");
    let o = run(&[
        "trend",
        d.path().to_str().unwrap(),
        "--part",
        "CS-100n",
        "-o",
        out.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(
        stdout(&o)
            .lines()
            .filter(|l| l.starts_with("2026-"))
            .count(),
        5
    );
    assert!(stdout(&o).contains("NIST/SEMATECH"));
    let text = squash(&pdf_text_file(&out));
    assert!(text.contains(&squash("Trend of CS-100n (C)")), "{text}");
    assert!(text.contains("peryear"));
}

#[test]
fn a_value_outside_the_limits_is_a_warning_and_an_unknown_part_an_error() {
    let d = tempfile::tempdir().unwrap();
    tree(d.path(), Some(100.3));
    let o = run(&["trend", d.path().to_str().unwrap(), "--part", "CS-100n"]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(
        stdout(&o).contains("warning: CS-6 (2026-06-05)"),
        "{}",
        stdout(&o)
    );
    assert!(d.path().join("trend-CS-100n.pdf").is_file());
    let o = run(&["trend", d.path().to_str().unwrap(), "--part", "CS-999"]);
    assert_eq!(o.status.code(), Some(1));
    assert!(stderr(&o).contains("no record under"), "{}", stderr(&o));
}

#[test]
fn compare_prints_e_n_by_iso_13528() {
    let d = tempfile::tempdir().unwrap();
    let (a, b) = (d.path().join("a.md"), d.path().join("b.md"));
    std::fs::write(&a, notebook("CMP-A", "2026-03-01", 100.00)).unwrap();
    std::fs::write(&b, notebook("CMP-B", "2026-09-01", 100.05)).unwrap();
    let val = |p: &Path| -> (f64, f64) {
        let j: serde_json::Value =
            serde_json::from_str(&stdout(&run(&["results", p.to_str().unwrap()]))).unwrap();
        let r = j["blocks"][0]["results"]
            .as_array()
            .unwrap()
            .iter()
            .find(|r| r["name"] == "C" && r.get("f").is_none())
            .unwrap()
            .clone();
        (r["value"].as_f64().unwrap(), r["U"].as_f64().unwrap())
    };
    let ((x1, u1), (x2, u2)) = (val(&a), val(&b));
    // ISO 13528:2022 §9.7: E_n = (x₁ − x₂)/√(U₁² + U₂²).
    let en = (x1 - x2) / (u1 * u1 + u2 * u2).sqrt();
    let o = run(&["compare", a.to_str().unwrap(), b.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let want = format!("E_n = {:.2}", en).replace('-', "\u{2212}");
    assert!(stdout(&o).contains(&want), "{} vs {want}", stdout(&o));
    let word = if en.abs() <= 1.0 {
        "satisfactory"
    } else {
        "unsatisfactory"
    };
    assert!(stdout(&o).contains(word));
}
