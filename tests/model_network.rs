//! `network: model` (FORMAT.md 1.1, "A measurement model written in the notebook"): the
//! format's own example against the built-in RC network on the same readings, the handbook
//! reactance, verdicts and citations, and expressions that fail at a reading, nest too deeply
//! or name what is not allowed.

mod common;
use common::*;

use benchrec::networks::{BlockResult, NamedResult};
use benchrec::notebook;

/// Invented parts (synthetic_front: R1 = 2.2 kΩ ± 1 %, C1 = 68 nF ± 10 %) on 2 V; readings
/// made by complex arithmetic, I = Vs / (R + 1/(jωC)), rounded to five decimals.
const ROWS: &str = "f/Hz    VR/V     VC/V
500     0.85070  1.81006
1000    1.36979  1.45728
2000    1.76573  0.93925
5000    1.95621  0.41623
";

/// The example of FORMAT.md, word for word, as the header of a block.
const EXAMPLE: &str = "model:
  C:  { expr: \"VR / (2*pi*f*R1*VC)\", unit: F }
  XC: { expr: \"VC * R1 / VR\", unit: ohm }
";

fn notebook_with(blocks: &[(&str, &str, &str)]) -> String {
    let mut t = synthetic_front("MODEL-01", "Model network (synthetic)", "2026-10-09");
    t.push_str("Invented readings of an invented RC pair, cited as =m.C.\n\n");
    for (id, network, extra) in blocks {
        t.push_str(&format!(
            "```readings\nid: {id}\nnetwork: {network}\nparts: [R1, C1]\nmeter: dmm\n{extra}---\n{ROWS}```\n\n"
        ));
    }
    t
}

fn reduce(text: &str) -> Vec<BlockResult> {
    let nb = notebook::parse(text).unwrap_or_else(|d| panic!("{d:?}"));
    benchrec::networks::reduce(&nb)
        .unwrap_or_else(|d| panic!("{d:?}"))
        .blocks
}

fn find<'a>(b: &'a BlockResult, name: &str, f: Option<f64>) -> &'a NamedResult {
    b.rows
        .iter()
        .chain(&b.results)
        .find(|r| r.name == name && r.f == f)
        .unwrap_or_else(|| panic!("{}: no {name} at {f:?}", b.id))
}

// The model of FORMAT.md is the RC network's own relations (C = I/(ωVC) with I = VR/R,
// XC = VC/I: phasor relations of a series circuit, handbook), so on the same readings it must
// give RC's values (to rounding, 1e-12) and, by the same propagation of the same inputs (the
// meter's shared gain, R1's tolerance), the same u (1e-9).
#[test]
fn format_example_matches_the_rc_network() {
    let text = notebook_with(&[("rc", "RC", ""), ("m", "model", EXAMPLE)]);
    let blocks = reduce(&text);
    let (rc, m) = (&blocks[0], &blocks[1]);
    let mut n = 0;
    for f in [500.0, 1000.0, 2000.0, 5000.0] {
        for name in ["C", "XC"] {
            let (a, b) = (&find(rc, name, Some(f)).m, &find(m, name, Some(f)).m);
            assert!(
                ((a.value - b.value) / a.value).abs() < 1e-12,
                "{name} at {f}"
            );
            assert!(a.u > 0.0);
            assert!(
                ((a.u - b.u) / a.u).abs() < 1e-9,
                "u({name}) at {f}: {} vs {}",
                a.u,
                b.u
            );
            assert_eq!(a.budget.len(), b.budget.len(), "budget of {name} at {f}");
            n += 1;
        }
    }
    assert_eq!(n, 8);
    let (a, b) = (&find(rc, "C", None).m, &find(m, "C", None).m);
    assert!(((a.value - b.value) / a.value).abs() < 1e-12);
    assert!(
        ((a.u - b.u) / a.u).abs() < 1e-9,
        "block u(C): {} vs {}",
        a.u,
        b.u
    );
    assert!(((a.expanded - b.expanded) / a.expanded).abs() < 1e-9);
    // The invented C1 comes back within U (reading rounding is far below the meter's 0.5 %).
    assert!((b.value - 68e-9).abs() <= b.expanded, "C = {}", b.value);
    // XC = 1/(2πfC) (handbook) of the invented 68 nF at 1 kHz: 2340.5 Ω, within rounding.
    let xc = find(m, "XC", Some(1000.0)).m.value;
    let want = 1.0 / (2.0 * std::f64::consts::PI * 1000.0 * 68e-9);
    assert!(((xc - want) / want).abs() < 2e-5, "XC = {xc} vs {want}");
    assert!(!blocks
        .iter()
        .flat_map(|b| b.rows.iter().chain(&b.results))
        .any(|r| !r.m.value.is_finite() || !r.m.u.is_finite()));
}

// A result named like a part's judged quantity (C, for the capacitor C1) gets a verdict as
// the built-in C does (ILAC-G8 simple acceptance: 68 nF ± 10 %, well inside), and a citation
// of it resolves.
#[test]
fn model_results_are_judged_and_cited() {
    let text = notebook_with(&[("m", "model", EXAMPLE)]);
    let nb = notebook::parse(&text).unwrap_or_else(|d| panic!("{d:?}"));
    let red = benchrec::networks::reduce(&nb).unwrap_or_else(|d| panic!("{d:?}"));
    let c = benchrec::judge::resolve_citation(&red, "m.C").unwrap();
    assert_eq!(c.name, "C");
    let rec = benchrec::judge::judge(nb, red).unwrap_or_else(|d| panic!("{d:?}"));
    let v: Vec<_> = rec.verdicts.iter().filter(|v| v.block == "m").collect();
    assert_eq!(v.len(), 1, "only C is judged, not XC");
    assert_eq!((v[0].name.as_str(), v[0].part.as_str()), ("C", "C1"));
    assert_eq!(format!("{:?}", v[0].outcome), "Pass");
}

// A division by zero at a reading, and the root of a negative number, are refused at the
// row they fail at (the 1 kHz row, line of `1000`), naming the expression: never a NaN.
#[test]
fn a_result_that_fails_at_a_reading_is_a_located_error() {
    for model in [
        "model:\n  Z: { expr: \"VR / (VC - 1.45728)\", unit: ohm }\n",
        "model:\n  Z: { expr: \"sqrt(1.45728 - VC - 1e-9) * R1\", unit: ohm }\n",
        "model:\n  Z: { expr: \"ln(VC - 1.45728) + R1\", unit: ohm }\n",
    ] {
        let text = notebook_with(&[("m", "model", model)]);
        let nb = notebook::parse(&text).unwrap_or_else(|d| panic!("{d:?}"));
        let d = benchrec::networks::reduce(&nb).expect_err(model);
        let row = text.find("1000    1.36979").unwrap();
        assert!(
            d.iter()
                .any(|x| x.span.start == row && x.message.contains("not a finite number")),
            "{model}: {d:?}"
        );
        assert!(d.iter().all(|x| x.span.start <= text.len()));
    }
}

/// The first diagnostic of a notebook that must not parse, with its line and column.
fn refused(text: &str) -> (benchrec::diag::Diagnostic, usize, usize) {
    let d = notebook::parse(text).expect_err("must be refused");
    let first = d.into_iter().next().unwrap();
    let (l, c) = benchrec::diag::line_col(text, first.span.start);
    (first, l, c)
}

// A name outside the allowed ones is refused at its line and column, and the message lists
// what is allowed.
#[test]
fn unknown_names_are_refused_where_they_stand() {
    let model = "model:\n  C: { expr: \"VR / (2*pi*f*Rx*VC)\", unit: F }\n";
    let text = notebook_with(&[("m", "model", model)]);
    let (d, l, c) = refused(&text);
    let at = text.find("Rx*VC").unwrap();
    assert_eq!(benchrec::diag::line_col(&text, at), (l, c));
    let e = d.expected.unwrap_or_default();
    assert!(
        e.contains("R1") && e.contains("hypot") && e.contains("pi"),
        "{e}"
    );
    // An unknown function, and a unit word outside the list.
    let model = "model:\n  C: { expr: \"cosh(VR)\", unit: F }\n";
    let (d, ..) = refused(&notebook_with(&[("m", "model", model)]));
    assert!(d.message.contains("not a function"), "{}", d.message);
    let model = "model:\n  C: { expr: \"VR\", unit: nF }\n";
    let (d, ..) = refused(&notebook_with(&[("m", "model", model)]));
    assert!(d.message.contains("not a unit"), "{}", d.message);
}

// Bounded: 40 levels of parentheses and a 3 000-character expression are refused with a
// message; 32 levels and a 200-term sum are read and reduce.
#[test]
fn long_and_deep_expressions_are_bounded() {
    let deep = format!("{}VR{}", "(".repeat(40), ")".repeat(40));
    let model = format!("model:\n  V: {{ expr: \"{deep}\", unit: V }}\n");
    let (d, ..) = refused(&notebook_with(&[("m", "model", &model)]));
    assert!(d.message.contains("nests too deeply"), "{}", d.message);
    let long = format!("VR{}", " + VR".repeat(600));
    let model = format!("model:\n  V: {{ expr: \"{long}\", unit: V }}\n");
    let (d, ..) = refused(&notebook_with(&[("m", "model", &model)]));
    assert!(d.message.contains("too long"), "{}", d.message);
    let ok = format!(
        "{}VR{} + VC{}",
        "(".repeat(32),
        ")".repeat(32),
        " + 0*VC".repeat(200)
    );
    let model = format!("model:\n  V: {{ expr: \"{ok}\", unit: V }}\n");
    let blocks = reduce(&notebook_with(&[("m", "model", &model)]));
    let v = find(&blocks[0], "V", Some(500.0)).m.value;
    assert!((v - (0.85070 + 1.81006)).abs() < 1e-12, "{v}");
}
