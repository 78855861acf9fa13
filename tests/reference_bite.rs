//! Reference checks that fail when the code is wrong (issue 16): each names its source, and
//! says where a value comes from memory.

use benchrec::montecarlo::{numerical_tolerance, validate};
use benchrec::notebook::{self, Tolerance};
use benchrec::print::value_u;
use benchrec::quantity::Unit;
use benchrec::uncertainty::{coverage_factor, welch_satterthwaite, McInterval};
use std::process::{Command, Stdio};

/// `benchrec results` on `text` (written as `name` in a fresh folder): the JSON.
fn results_json(name: &str, text: &str) -> serde_json::Value {
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join(name);
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

/// The result `name` at frequency `f` (None: the block result) of block 0.
fn result<'a>(j: &'a serde_json::Value, name: &str, f: Option<f64>) -> &'a serde_json::Value {
    j["blocks"][0]["results"]
        .as_array()
        .unwrap()
        .iter()
        .find(|r| r["name"] == name && r["f"].as_f64() == f)
        .unwrap_or_else(|| panic!("no result {name} at {f:?}"))
}

fn mc(low: f64, high: f64) -> McInterval {
    McInterval {
        trials: 1_000_000,
        dropped: 0,
        mean: 0.0,
        u: 2.0,
        low,
        high,
        gum_validated: false,
    }
}

// JCGM 101:2008 §7.9.2, Examples 1 and 2 (from memory; they agree with the rule of §7.9.2,
// z = c × 10^ℓ with c an ndig-digit integer, δ = ½ × 10^ℓ): u(y) = 0.000 35 g with ndig = 2
// is 35 × 10⁻⁵ g, δ = 0.000 005 g; with ndig = 1 it is 4 × 10⁻⁴ g, δ = 0.000 05 g.
// Example 3 (from memory): u(y) = 2 K, ndig = 1, δ = 0.5 K.
#[test]
fn jcgm101_7_9_2_numerical_tolerance_examples() {
    let close = |a: f64, b: f64| (a - b).abs() <= 1e-12 * b;
    assert!(close(numerical_tolerance(0.00035, 2), 0.000005));
    assert!(close(numerical_tolerance(0.00035, 1), 0.00005));
    assert!(close(numerical_tolerance(2.0, 1), 0.5));
}

// JCGM 101:2008 §9.2.3 (from memory): Y = X1 + X2 + X3 + X4, each Xi rectangular with u = 1.
// GUF: y = 0, u(y) = 2, U = 1.96 × 2 = 3.92; MCM 95 % interval [−3.88, 3.88]. So
// d_low = d_high = 0.04: validated at ndig = 2 (δ = 0.05), not at ndig = 3 (δ = 0.005).
#[test]
fn jcgm101_9_2_3_validates_at_two_digits_not_at_three() {
    let m = mc(-3.88, 3.88);
    let two = validate(0.0, 2.0, 3.92, &m, 2);
    assert!(two.validated, "{two:?}");
    assert!((two.delta - 0.05).abs() < 1e-15 && (two.d_low - 0.04).abs() < 1e-12);
    let three = validate(0.0, 2.0, 3.92, &m, 3);
    assert!(!three.validated, "{three:?}");
    assert!((three.delta - 0.005).abs() < 1e-15);
    // One end alone outside δ already fails §8.2 (both d_low and d_high must be ≤ δ).
    assert!(!validate(0.0, 2.0, 3.92, &mc(-3.92, 3.80), 2).validated);
    assert!(!validate(0.0, 2.0, 3.92, &mc(-3.80, 3.92), 2).validated);
    // d is a distance: an MC interval wider than the GUF one by 0.04 is as good as narrower.
    assert!(validate(0.0, 2.0, 3.92, &mc(-3.96, 3.96), 2).validated);
}

// GUM (JCGM 100:2008) 7.2.6: "if y = 10.057 62 Ω with u_c(y) = 27 mΩ, y should be rounded to
// 10.058 Ω". Printed with that uncertainty as the ± term.
#[test]
fn gum_7_2_6_the_standards_own_example() {
    assert_eq!(value_u(10.05762, 0.027, Unit::Ohm), "(10.058 ± 0.027) Ω");
    assert_eq!(
        benchrec::print::value_and_u(10.05762, 0.027),
        ("10.058".to_string(), "0.027".to_string())
    );
}

// GUM G.4.1 EXAMPLE (from memory): relative u 0.25 %, 0.57 %, 0.82 % with ν = 9, 4, 14 give
// u_c = 1.03 %, ν_eff = 19.0, t95(19) = 2.09 and U95 = 2.2 %. The products are 2.15…, so the
// published 2.2 is the rounding to two significant digits (GUM 7.2.6), asserted as such.
#[test]
fn gum_g_4_1_expanded_uncertainty_rounds_to_2_2() {
    let c = [(0.25, Some(9.0)), (0.57, Some(4.0)), (0.82, Some(14.0))];
    let nu = welch_satterthwaite(&c).unwrap();
    assert_eq!(format!("{nu:.1}"), "19.0");
    let uc: f64 = c.iter().map(|x| x.0 * x.0).sum::<f64>().sqrt();
    assert_eq!(format!("{uc:.2}"), "1.03");
    let k = coverage_factor(0.95, Some(nu.round()));
    assert_eq!(format!("{k:.2}"), "2.09");
    assert_eq!(format!("{:.1}", k * uc), "2.2");
    assert_eq!(benchrec::print::round_sig(k * uc, 2), 2.2);
}

const PARTS_FM: &str = "---\nrecord: a\ntitle: t\ndate: 2026-05-04\noperator: o\nparts:\n";

// IEC 60062:2016, letter codes for tolerance (from memory): B ±0.1 %, C ±0.25 %, D ±0.5 %,
// F ±1 %, G ±2 %, J ±5 %, K ±10 %, M ±20 % (the set FORMAT.md lists). Any other letter, and
// the lower-case forms, are refused.
#[test]
fn iec_60062_every_letter() {
    let table = [
        ('B', 0.001),
        ('C', 0.0025),
        ('D', 0.005),
        ('F', 0.01),
        ('G', 0.02),
        ('J', 0.05),
        ('K', 0.10),
        ('M', 0.20),
    ];
    for kind in ["resistor", "capacitor", "inductor"] {
        for (c, frac) in table {
            let src = format!("{PARTS_FM}  X1: {{kind: {kind}, tolerance: {c}}}\n---\n");
            let n = notebook::parse(&src).unwrap_or_else(|d| panic!("{c} {kind}: {d:?}"));
            assert_eq!(
                n.front.parts["X1"].tolerance,
                Some(Tolerance::Code(c, frac)),
                "{c} on a {kind}"
            );
        }
    }
    for c in ('A'..='Z').chain('a'..='z') {
        if table.iter().any(|(k, _)| *k == c) {
            continue;
        }
        let src = format!("{PARTS_FM}  X1: {{kind: resistor, tolerance: {c}}}\n---\n");
        let d = notebook::parse(&src).expect_err(&format!("letter {c} accepted"));
        assert!(
            d.iter()
                .any(|d| d.message.contains("not an IEC 60062 tolerance letter")),
            "{c}: {d:?}"
        );
    }
}

// IEC 60062 (from memory): for capacitors below 10 pF the letters B, C, D, F and G stand for
// absolute tolerances (±0.1, 0.25, 0.5, 1, 2 pF), not percentages; they are refused there so
// the absolute value is written out. J, K and M keep their percentages; at 10 pF and above
// every letter is a percentage; other kinds are not affected.
#[test]
fn iec_60062_small_capacitance_letters_b_to_g() {
    let parse = |kind: &str, nominal: &str, c: char| {
        let src =
            format!("{PARTS_FM}  X1: {{kind: {kind}, nominal: {nominal}, tolerance: {c}}}\n---\n");
        notebook::parse(&src).map(|n| n.front.parts["X1"].tolerance.clone())
    };
    for c in ['B', 'C', 'D', 'F', 'G'] {
        let d = parse("capacitor", "4.7 pF", c).expect_err(&format!("{c} at 4.7 pF"));
        assert!(
            d.iter()
                .any(|d| d.message.contains("below 10 pF a tolerance letter")),
            "{c}: {d:?}"
        );
        assert!(
            matches!(parse("capacitor", "10 pF", c), Ok(Some(Tolerance::Code(k, _))) if k == c)
        );
        assert!(
            parse("resistor", "4.7 ohm", c).is_ok(),
            "{c} on a 4.7 Ω resistor"
        );
    }
    for (c, frac) in [('J', 0.05), ('K', 0.10), ('M', 0.20)] {
        assert_eq!(
            parse("capacitor", "4.7 pF", c).map_err(|d| format!("{d:?}")),
            Ok(Some(Tolerance::Code(c, frac))),
            "{c} at 4.7 pF"
        );
    }
}

// A true 3-4-5 triangle for the three-voltmeter method (law of cosines, any circuit text):
// Vs = 5, VR = 3, VL = 4 gives cos θ = (25 − 9 − 16)/(2·3·4) = 0, an ideal coil. With the
// series 30 Ω: I = 0.1 A, Rac = 0, XL = 40 Ω, L = 40/(2π·1 kHz) = 6.366 198 mH; Q = XL/Rac is
// not computed and the row says why.
#[test]
fn three_voltmeter_3_4_5_is_an_ideal_coil() {
    let text = "---
record: T-345
title: 3-4-5 check (synthetic)
date: 2026-10-06
operator: T. Tester (synthetic)
parts:
  R2:
    kind: resistor
    nominal: 30 ohm
  L1:
    kind: inductor
    nominal: 6.8 mH
---

```readings
id: t
network: RL
parts: [R2, L1]
---
f/Hz    Vs/V    VR/V    VL/V
1000    5.000   3.000   4.000
```
";
    let j = results_json("t345.md", text);
    let v = |n: &str| result(&j, n, Some(1000.0))["value"].as_f64().unwrap();
    assert!((v("I") - 0.1).abs() < 1e-15);
    assert!(v("Rac").abs() < 1e-12, "Rac = {}", v("Rac"));
    assert!((v("XL") - 40.0).abs() < 1e-12);
    let l = 40.0 / (2.0 * std::f64::consts::PI * 1000.0);
    assert!((v("L") - l).abs() < 1e-15 * 1e3, "L = {}", v("L"));
    let names: Vec<&str> = j["blocks"][0]["results"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["name"].as_str().unwrap())
        .collect();
    assert!(!names.contains(&"Q"), "{names:?}");
    let flags = j["blocks"][0]["flags"].to_string();
    assert!(
        flags.contains("cos θ = 0 is zero") && flags.contains("Q is not computed"),
        "{flags}"
    );
}

/// `benchrec results --format csv` on `text`: the `verdict` cell of the row `name` with no `f`.
fn csv_verdict(name: &str, text: &str, result: &str) -> String {
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join(name);
    std::fs::write(&nb, text).unwrap();
    let o = Command::new(env!("CARGO_BIN_EXE_benchrec"))
        .args(["results", "--format", "csv"])
        .arg(&nb)
        .stdin(Stdio::null())
        .output()
        .expect("benchrec runs");
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let mut rd = csv::Reader::from_reader(&o.stdout[..]);
    let head = rd.headers().unwrap().clone();
    let col = |n: &str| head.iter().position(|h| h == n).unwrap();
    rd.records()
        .map(Result::unwrap)
        .find(|r| &r[col("name")] == result && r[col("f")].is_empty())
        .map(|r| r[col("verdict")].to_string())
        .unwrap_or_else(|| panic!("no CSV row {result}"))
}

/// The catalogue's base notebook (an RC block judged on C1) with C1's nominal and absolute
/// tolerance in farads and a `decision:` line.
fn judged_notebook(nominal: f64, tol: f64, decision: &str) -> String {
    let base = std::fs::read_to_string(
        std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/malformed/ok-minimal.md"),
    )
    .unwrap();
    let out = base
        .replacen(
            "    nominal: 68 nF\n    tolerance: K\n",
            &format!("    nominal: {nominal:e} F\n    tolerance: {tol:e} F\n"),
            1,
        )
        .replacen(
            "operator: T. Tester (synthetic)\n",
            &format!("operator: T. Tester (synthetic)\ndecision: {decision}\n"),
            1,
        );
    assert_ne!(out, base, "anchors missing from ok-minimal.md");
    out
}

// ILAC-G8:09/2019 through the CLI, read from the JSON `verdicts` and the CSV `verdict` column.
// Simple acceptance (§4.2.1): pass when the value lies in [low, high]. Guarded (guard band
// w = U, as README states the rule): pass when value ± U lies inside, fail when it lies
// wholly outside, else inconclusive. The limits are set a hair (10⁻⁶ U) either side of the
// decisive points, and between u and U, so judging with u instead of U, or ignoring
// `decision:`, changes a verdict.
#[test]
fn ilac_g8_verdicts_at_the_limits_through_the_cli() {
    let probe = results_json("probe.md", &judged_notebook(68e-9, 1e-9, "guarded"));
    let c = result(&probe, "C", None);
    let (v, u, big_u) = (
        c["value"].as_f64().unwrap(),
        c["u"].as_f64().unwrap(),
        c["U"].as_f64().unwrap(),
    );
    let k = c["k"].as_f64().unwrap();
    assert!(
        ((big_u - k * u) / big_u).abs() < 1e-12 && k > 1.9,
        "U = k·u: {c}"
    );
    let e = 1e-6 * big_u;
    let mid = 0.5 * (u + big_u); // u < mid < U
                                 // (decision, nominal, tolerance half-width, verdict)
    let cases = [
        ("guarded", v, big_u + e, "pass"),
        ("guarded", v, big_u - e, "inconclusive"),
        ("guarded", v, mid, "inconclusive"),
        ("guarded", v + big_u + e + big_u, big_u, "fail"),
        ("guarded", v + big_u - e + big_u, big_u, "inconclusive"),
        ("guarded", v + mid + big_u, big_u, "inconclusive"),
        ("guarded", v - big_u - e - big_u, big_u, "fail"),
        ("guarded", v - mid - big_u, big_u, "inconclusive"),
        ("simple", v, mid, "pass"),
        ("simple", v, 0.5 * u, "pass"),
        ("simple", v + e + big_u, big_u, "fail"),
        ("simple", v - e + big_u, big_u, "pass"),
        ("simple", v - e - big_u, big_u, "fail"),
        ("simple", v + e - big_u, big_u, "pass"),
    ];
    for (i, (rule, nominal, tol, want)) in cases.into_iter().enumerate() {
        let text = judged_notebook(nominal, tol, rule);
        let j = results_json(&format!("case{i}.md"), &text);
        let c = result(&j, "C", None);
        assert_eq!(
            c["value"].as_f64(),
            Some(v),
            "case {i}: C moved with the nominal"
        );
        assert_eq!(
            c["U"].as_f64(),
            Some(big_u),
            "case {i}: U moved with the nominal"
        );
        let verdicts = j["blocks"][0]["verdicts"].as_array().unwrap();
        assert_eq!(verdicts.len(), 1, "case {i}: {verdicts:?}");
        let vd = &verdicts[0];
        let (lo, hi) = (vd["low"].as_f64().unwrap(), vd["high"].as_f64().unwrap());
        assert!(
            (lo - (nominal - tol)).abs() < 1e-9 * nominal
                && (hi - (nominal + tol)).abs() < 1e-9 * nominal
                && vd["name"] == "C"
                && vd["part"] == "C1",
            "case {i}: {vd}"
        );
        assert_eq!(
            vd["verdict"], want,
            "case {i} ({rule}): value {v:e}, U {big_u:e}, [{lo:e}, {hi:e}]"
        );
        assert_eq!(
            csv_verdict(&format!("case{i}.md"), &text, "C"),
            want,
            "case {i} CSV"
        );
    }
}

/// The reduction of a notebook file through the library (parse → reduce), block 0.
fn reduce_file(rel: &str) -> benchrec::networks::BlockResult {
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join(rel);
    let text = std::fs::read_to_string(&path).unwrap();
    let nb = notebook::parse(&text).unwrap_or_else(|d| panic!("{rel}: {d:?}"));
    let red = benchrec::networks::reduce(&nb).unwrap_or_else(|d| panic!("{rel}: {d:?}"));
    red.blocks.into_iter().next().expect("one block")
}

/// Lines `name f value u` of a reference output (`f` is `-` for a block result).
fn reference_rows(text: &str) -> Vec<(String, Option<f64>, f64, f64)> {
    text.lines()
        .filter(|l| !l.starts_with('#') && !l.trim().is_empty())
        .map(|l| {
            let v: Vec<&str> = l.split_whitespace().collect();
            (
                v[0].to_string(),
                v[1].parse().ok(),
                v[2].parse().unwrap(),
                v[3].parse().unwrap(),
            )
        })
        .collect()
}

// RL uncertainties against an independent first-order propagation by the Python
// `uncertainties` package (tests/reference/rl_uncertainty.py, output rl_uncertainty.out, from
// the readings of rl_three_voltmeter.md and the input rules of FORMAT.md/inputs.rs): u(I),
// u(Rac), u(XL), u(L), u(Q), u(XL_dcr), u(L_dcr) per frequency and the block means, with the
// shared gains and R correlated. Both are first order, so they agree to rounding (1e-6).
#[test]
fn rl_uncertainties_match_the_uncertainties_package() {
    let b = reduce_file("tests/reference/rl_three_voltmeter.md");
    let rows = reference_rows(include_str!("reference/rl_uncertainty.out"));
    assert_eq!(rows.len(), 3 * 7 + 3);
    for (name, f, value, u) in rows {
        let r = b
            .rows
            .iter()
            .chain(&b.results)
            .find(|r| r.name == name && r.f == f)
            .unwrap_or_else(|| panic!("no result {name} at {f:?}"));
        assert!(
            ((r.m.value - value) / value).abs() < 1e-9,
            "{name} at {f:?}: value {} vs {value}",
            r.m.value
        );
        assert!(
            ((r.m.u - u) / u).abs() < 1e-6,
            "{name} at {f:?}: u {} vs uncertainties {u}",
            r.m.u
        );
    }
}

// The correlation of each row's Rac and XL (GUM 5.2.2 / H.2.3: both from the same readings),
// against the `uncertainties` package's correlation matrix (tests/reference/rl_uncertainty.py,
// output rl_correlation.out). First order both, so to rounding.
#[test]
fn rl_rac_xl_correlations_match_the_uncertainties_package() {
    let b = reduce_file("tests/reference/rl_three_voltmeter.md");
    let mut n = 0;
    for line in include_str!("reference/rl_correlation.out").lines() {
        if line.starts_with('#') {
            continue;
        }
        let v: Vec<f64> = line
            .split_whitespace()
            .map(|x| x.parse().unwrap())
            .collect();
        let (f, want) = (v[0], v[1]);
        let c = b
            .correlations
            .iter()
            .find(|c| c.a == "Rac" && c.b == "XL" && c.f == Some(f))
            .unwrap_or_else(|| panic!("no r(Rac, XL) at {f}: {:?}", b.correlations));
        assert!((c.r - want).abs() < 1e-6, "at {f}: {} vs {want}", c.r);
        n += 1;
    }
    assert_eq!(n, 3);
}

// JCGM 101 §5.11 and §9 (from memory): where the model is near-linear the Monte Carlo
// standard deviation equals the GUM u. I = VR/R, XL and L are near-linear in the readings at
// these uncertainties (relative u < 1 %); the adaptive run (§7.9) holds u to two digits, so
// they must agree within 1.5 % (measured: at most 0.4 %).
#[test]
fn rl_monte_carlo_u_matches_the_gum_u_where_near_linear() {
    let b = reduce_file("tests/reference/rl_three_voltmeter.md");
    let mut n = 0;
    for r in b
        .rows
        .iter()
        .filter(|r| ["I", "XL", "L"].contains(&r.name.as_str()))
    {
        let mc = r.m.mc.as_ref().expect("Monte Carlo attached");
        let rel = (mc.u - r.m.u).abs() / r.m.u;
        assert!(
            rel < 0.015,
            "{} at {:?}: MC u {} vs GUM u {}",
            r.name,
            r.f,
            mc.u,
            r.m.u
        );
        n += 1;
    }
    assert_eq!(n, 9);
}

// RLC derived results: scipy's fitted (f0, Q, Rt) with their covariance (rlc_curve_fit.out) as
// correlated normal inputs, as rlc::reduce passes them, propagated by `propagate` through
// `rlc::derived_lin` to BW, L and C; the reference is the Python `uncertainties` package
// (tests/reference/rlc_derived_uncertainty.py, output rlc_derived_uncertainty.out).
#[test]
fn rlc_derived_uncertainties_match_the_uncertainties_package() {
    use benchrec::uncertainty::{propagate, Dist, Input, Model};
    let fit = include_str!("reference/rlc_curve_fit.out");
    let nums = |key: &str| -> Vec<Vec<f64>> {
        fit.lines()
            .filter(|l| l.split_whitespace().next() == Some(key))
            .map(|l| {
                l.split_whitespace()
                    .skip(1)
                    .map(|x| x.parse().unwrap())
                    .collect()
            })
            .collect()
    };
    let popt = nums("popt").remove(0);
    let pcov = nums("pcov");
    let names = ["f0", "Q", "Rtotal"];
    let inputs: Vec<Input> = (0..3)
        .map(|k| Input::type_b(names[k], popt[k], pcov[k][k].sqrt(), Dist::Normal))
        .collect();
    let mut corr = Vec::new();
    for a in 0..3 {
        for b in a + 1..3 {
            corr.push((a, b, pcov[a][b] / (pcov[a][a] * pcov[b][b]).sqrt()));
        }
    }
    let model = Model {
        inputs: &inputs,
        corr: &corr,
    };
    let p = propagate(&model, &benchrec::networks::rlc::derived_lin, 0.95).unwrap();
    let rows = reference_rows(include_str!("reference/rlc_derived_uncertainty.out"));
    assert_eq!(rows.len(), benchrec::networks::rlc::DERIVED.len());
    for (k, (name, _, value, u)) in rows.into_iter().enumerate() {
        assert_eq!(benchrec::networks::rlc::DERIVED[k].0, name);
        let m = &p.results[k];
        assert!(
            ((m.value - value) / value).abs() < 1e-12,
            "{name}: {} vs {value}",
            m.value
        );
        assert!(
            ((m.u - u) / u).abs() < 1e-6,
            "{name}: u {} vs uncertainties {u}",
            m.u
        );
    }
}

// coverage_factor's fallbacks, pinned: a non-positive ν is taken as 1, so k = t95(1) = 12.71
// (GUM Table G.2); p = 2 is clamped to 1 − 10⁻¹², so k is the t(3) quantile at 1 − 5·10⁻¹³,
// 13 016.38 (closed-form t(3) CDF solved with mpmath: tests/reference/t3_quantile.py, .out).
#[test]
fn coverage_factor_fallbacks_are_pinned() {
    assert!((coverage_factor(0.95, Some(0.0)) - 12.71).abs() < 0.005);
    assert!((coverage_factor(0.95, Some(-3.0)) - 12.71).abs() < 0.005);
    let t3: f64 = include_str!("reference/t3_quantile.out")
        .lines()
        .find_map(|l| l.strip_prefix("t3 "))
        .unwrap()
        .parse()
        .unwrap();
    // statrs' inverse t CDF is good to 3e-5 this far in the tail (measured).
    let k = coverage_factor(2.0, Some(3.0));
    assert!(((k - t3) / t3).abs() < 1e-4, "k = {k}, mpmath {t3}");
}
