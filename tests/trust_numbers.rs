//! Never a non-finite number, never a silent drop: hostile readings reduce to finite numbers
//! with the trouble said in words. All readings are invented for these tests.

use benchrec::networks::{fence, reduce, BlockResult, NamedResult, PlotData, Reduction};
use benchrec::notebook::{parse, Network};
use benchrec::quantity::Unit;
use benchrec::uncertainty::Measured;
use num_complex::Complex64;
use std::f64::consts::PI;

const FRONT: &str = "---
record: TN-0001
title: Finite numbers (synthetic)
date: 2026-11-02
operator: T. Tester (synthetic)
instruments:
  dmm: { accuracy: 0.3% + 2, resolution: 0.1 mV }
parts:
  R1: { kind: resistor, nominal: 150 ohm, tolerance: 0.5% }
  L1: { kind: inductor, nominal: 50 mH, tolerance: 10%, dcr: 20 ohm }
---
Invented readings.

";

fn notebook(network: &str, table: &str) -> String {
    format!("{FRONT}```readings\nid: b\nnetwork: {network}\nparts: [R1, L1]\nmeter: dmm\n---\n{table}```\n")
}

/// Exact readings of R then a coil (rc + jωL) by complex arithmetic: (Vs, VR, VL).
fn coil_row(f: f64) -> String {
    let (r, rc, l, vs) = (150.0, 20.0, 0.05, 2.0);
    let zl = Complex64::new(rc, 2.0 * PI * f * l);
    let i = Complex64::new(vs, 0.0) / (zl + r);
    format!("{f}  {vs}  {:.6}  {:.6}\n", (i * r).norm(), (i * zl).norm())
}

fn reduced(src: &str) -> Reduction {
    let nb = parse(src).unwrap_or_else(|d| panic!("parse: {d:?}"));
    reduce(&nb).unwrap_or_else(|d| panic!("reduce: {d:?}"))
}

/// Every number of a reduction, with where it sits.
fn numbers(red: &Reduction) -> Vec<(String, f64)> {
    let mut v = Vec::new();
    fn m(v: &mut Vec<(String, f64)>, w: &str, x: &Measured) {
        let mut push = |s: &str, y: f64| v.push((format!("{w}.{s}"), y));
        push("value", x.value);
        push("u", x.u);
        push("k", x.k);
        push("U", x.expanded);
        if let Some(d) = x.dof {
            push("dof", d);
        }
        for b in &x.budget {
            push("budget.estimate", b.estimate);
            push("budget.u", b.u);
            push("budget.sensitivity", b.sensitivity);
            push("budget.contribution", b.contribution);
            if let Some(d) = b.dof {
                push("budget.dof", d);
            }
        }
        if let Some(mc) = &x.mc {
            for (s, y) in [("mc.mean", mc.mean), ("mc.u", mc.u), ("mc.low", mc.low)] {
                push(s, y);
            }
            push("mc.high", mc.high);
        }
    }
    for b in &red.blocks {
        for r in b.rows.iter().chain(&b.results) {
            let w = format!("{}.{}@{:?}", b.id, r.name, r.f);
            m(&mut v, &w, &r.m);
        }
        for c in &b.correlations {
            v.push((format!("{}.r({},{})", b.id, c.a, c.b), c.r));
        }
        for (n, pts) in &b.plot.series {
            for p in pts {
                for y in [p.0, p.1, p.2] {
                    v.push((format!("{}.plot.{n}", b.id), y));
                }
            }
        }
    }
    v
}

/// A word of a flag that prints a non-finite number.
fn non_finite_word(s: &str) -> bool {
    s.split(|c: char| !c.is_alphanumeric())
        .any(|w| matches!(w.to_lowercase().as_str(), "inf" | "nan" | "infinity"))
}

fn assert_finite(red: &Reduction, what: &str) {
    for (w, x) in numbers(red) {
        assert!(x.is_finite(), "{what}: {w} = {x}");
    }
    for b in &red.blocks {
        for f in &b.flags {
            assert!(!non_finite_word(&f.message), "{what}: flag {}", f.message);
        }
    }
}

/// Panics unless some flag holds every one of `words` and, when given, starts at `at`.
fn assert_flag(b: &BlockResult, words: &[&str], at: Option<usize>) {
    let ok = b.flags.iter().any(|f| {
        words.iter().all(|w| f.message.contains(w))
            && at.is_none_or(|a| f.span.map(|s| s.start) == Some(a))
    });
    assert!(ok, "no flag with {words:?} at {at:?}: {:#?}", b.flags);
}

fn has(b: &BlockResult, name: &str, f: f64) -> bool {
    b.rows.iter().any(|r| r.name == name && r.f == Some(f))
}

// Law of cosines in the voltage triangle (handbook): Vs = VR + VL makes cos θ = 1, a flat
// triangle with sin θ = 0, from which no L follows. Before: "u(L)/L = inf %".
#[test]
fn flat_rl_triangle_is_said_in_words_and_gives_no_l() {
    let table = format!(
        "f/Hz Vs/V VR/V VL/V\n{}{}1000 2.0 1.25 0.75\n",
        coil_row(300.0),
        coil_row(600.0)
    );
    let red = reduced(&notebook("RL", &table));
    assert_finite(&red, "flat triangle");
    let b = &red.blocks[0];
    for n in ["Rac", "XL", "L", "Q"] {
        assert!(!has(b, n, 1000.0), "{n} at the flat row");
        assert!(has(b, n, 300.0), "{n} at a good row");
    }
    let src = notebook("RL", &table);
    let row_at = src.find("1000 2.0").unwrap();
    assert_flag(b, &["close no triangle", "Vs = VR + VL"], Some(row_at));
    assert!(
        b.results.iter().any(|r| r.name == "L"),
        "block L from the good rows"
    );
}

// Vs above VR + VL: no triangle at all (the triangle inequality, handbook). The row is named
// with its readings and gives no Rac or L; the block mean comes from the others.
#[test]
fn open_rl_triangle_flags_that_row() {
    let table = format!(
        "f/Hz Vs/V VR/V VL/V\n{}2000 2.5 1.2 0.9\n{}",
        coil_row(300.0),
        coil_row(600.0)
    );
    let src = notebook("RL", &table);
    let red = reduced(&src);
    assert_finite(&red, "open triangle");
    let b = &red.blocks[0];
    assert!(!has(b, "L", 2000.0) && !has(b, "Rac", 2000.0) && has(b, "I", 2000.0));
    let row_at = src.find("2000 2.5").unwrap();
    assert_flag(b, &["close no triangle", "above VR + VL"], Some(row_at));
}

// R = |Z| cos φ (GUM H.2): |φ| > 90° would make a passive part's resistance negative.
// Before: R = −65 Ω without a word (|Z| = 101.1 Ω, cos 130° = −0.643).
#[test]
fn z_phase_beyond_ninety_degrees_is_flagged_and_r_left_out() {
    let src = format!(
        "{FRONT}```readings\nid: z\nnetwork: Z\nmeter: dmm\n---\nf/Hz V/V I/mA phi/deg\n1000 1.0 9.89 130\n2000 1.0 9.89 30\n```\n"
    );
    let red = reduced(&src);
    assert_finite(&red, "phase 130°");
    let b = &red.blocks[0];
    assert!(!has(b, "R", 1000.0) && !has(b, "X", 1000.0) && has(b, "Z", 1000.0));
    assert!(has(b, "R", 2000.0) && b.rows.iter().all(|r| r.m.value >= 0.0 || r.name == "X"));
    let cell = src.find("130").unwrap();
    assert_flag(b, &["cannot be negative", "probe polarity"], Some(cell));
    assert!(b.correlations.iter().all(|c| c.f != Some(1000.0)));
}

// A triangle a hair from flat: part of the Monte Carlo draws close no triangle (JCGM 101
// draws the inputs' own distributions); the dropped share is said, not hidden.
#[test]
fn monte_carlo_trials_that_close_no_triangle_are_counted() {
    let table = format!(
        "f/Hz Vs/V VR/V VL/V\n{}1000 2.0 1.25 0.7501\n",
        coil_row(300.0)
    );
    let red = reduced(&notebook("RL", &table));
    assert_finite(&red, "near-flat");
    let b = &red.blocks[0];
    assert_flag(b, &["Monte Carlo trials drew readings"], None);
    let mc = b
        .rows
        .iter()
        .find(|r| r.name == "L" && r.f == Some(1000.0))
        .and_then(|r| r.m.mc.as_ref());
    assert!(mc.is_some_and(|m| m.dropped > 0));
}

// The final fence: a result with a non-finite number never reaches judging; it is left out
// with a flag naming it.
#[test]
fn fence_leaves_out_a_non_finite_result_with_a_flag() {
    let m = |v: f64| Measured {
        value: v,
        u: 0.1,
        dof: None,
        k: 2.0,
        expanded: 0.2,
        budget: vec![],
        mc: None,
    };
    let r = |n: &str, v: f64| NamedResult {
        name: n.into(),
        f: Some(1000.0),
        unit: Unit::H,
        m: m(v),
    };
    let mut b = BlockResult {
        id: "x".into(),
        network: Network::RL,
        rows: vec![r("L", 0.05), r("Q", f64::INFINITY), r("XL", f64::NAN)],
        results: vec![],
        correlations: vec![],
        flags: vec![],
        plot: PlotData {
            series: vec![("L".into(), vec![(1000.0, f64::NAN, 0.1)])],
            ..Default::default()
        },
    };
    fence(&mut b);
    assert_eq!(
        b.rows.iter().map(|r| r.name.as_str()).collect::<Vec<_>>(),
        ["L"]
    );
    assert_eq!(
        b.flags
            .iter()
            .filter(|f| f.message.contains("left out"))
            .count(),
        2
    );
    assert!(b.flags.iter().any(|f| f.message.contains("Q at 1 kHz")));
    assert!(b.plot.series[0].1.is_empty());
}

// A set of hostile notebooks within the stated ranges: every number of the reduction is
// finite, and the JSON and CSV exports print none that is not.
#[test]
fn hostile_notebooks_reduce_to_finite_numbers_everywhere() {
    let rc = |t: &str| {
        format!("{FRONT}```readings\nid: c\nnetwork: RC\nparts: [R1]\nmeter: dmm\n---\n{t}```\n")
    };
    let cases = [
        notebook("RL", "f/Hz Vs/V VR/V VL/V\n1000 2.0 1.25 0.75\n"),
        notebook("RL", "f/Hz Vs/V VR/V VL/V\n1000 2.0 1.0 1.0\n1000 2.0 1.0 1.0\n"),
        notebook("RL", "f/Hz Vs/V VR/V VL/V\n50 0.5 0.3 0.4\n60 0.5 1.0 0.5\n"),
        notebook("RL", "f/Hz Vs/V VR/V VL/V\n1000 1e5 1e-12 1e5\n"),
        rc("f/Hz VR/V VC/V\n1e-3 1e6 1e-12\n1e10 1e-12 1e6\n"),
        format!("{FRONT}```readings\nid: z\nnetwork: Z\nmeter: dmm\n---\nV/V I/A phi/deg\n1e6 1e-12 90\n1e-12 1e4 -90\n```\n"),
        format!("{FRONT}```readings\nid: z\nnetwork: Z\nmeter: dmm\n---\nV/V I/A phi/deg\n1 0.01 -179\n```\n"),
    ];
    for (i, src) in cases.iter().enumerate() {
        let nb = parse(src).unwrap_or_else(|d| panic!("case {i}: {d:?}"));
        let red = match reduce(&nb) {
            Ok(r) => r,
            // A refusal is allowed, but only as a located diagnostic, never a number.
            Err(d) => {
                assert!(
                    d.iter().all(|x| !non_finite_word(&x.message)),
                    "case {i}: {d:?}"
                );
                continue;
            }
        };
        assert_finite(&red, &format!("case {i}"));
        let rec = benchrec::judge::judge(nb, red).unwrap_or_else(|d| panic!("case {i}: {d:?}"));
        let json = benchrec::export::json_string(&rec);
        let csv = benchrec::export::csv_string(&[("t.md", &rec)]);
        for text in [&json, &csv] {
            assert!(!non_finite_word(text), "case {i}: {text}");
        }
    }
}
