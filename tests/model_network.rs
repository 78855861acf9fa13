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

// Each row of a written model gets its Monte Carlo interval (JCGM 101) and the §8 check of
// its GUM interval, as the built-in coil rows do. The FORMAT.md example is near linear
// (u(R1) is 0.58 %), so the Monte Carlo u and mean agree with GUM's (within 1 % of u, JCGM 101
// §5.1); its output is dominated by three rectangular inputs (two meter gains and R1's
// tolerance), flatter than normal, so the Monte Carlo interval is inside y ± 2u.
#[test]
fn a_near_linear_model_gets_monte_carlo_beside_gum() {
    let blocks = reduce(&notebook_with(&[("m", "model", EXAMPLE)]));
    let m = &blocks[0];
    assert_eq!(m.rows.len(), 8);
    for r in &m.rows {
        let mc =
            r.m.mc
                .as_ref()
                .unwrap_or_else(|| panic!("no Monte Carlo for {}", r.name));
        assert!(
            mc.trials >= 100_000 && mc.dropped == 0,
            "{}: {mc:?}",
            r.name
        );
        assert!(
            ((mc.u - r.m.u) / r.m.u).abs() < 0.01,
            "{}: {} vs {}",
            r.name,
            mc.u,
            r.m.u
        );
        assert!(
            (mc.mean - r.m.value).abs() < 0.01 * r.m.u,
            "{}: {mc:?}",
            r.name
        );
        let u2 = 2.0 * r.m.u;
        assert!(
            mc.low > r.m.value - u2 && mc.high < r.m.value + u2,
            "{mc:?}"
        );
        assert!(
            mc.low < r.m.value - 0.9 * u2 && mc.high > r.m.value + 0.9 * u2,
            "{mc:?}"
        );
    }
}

// y = exp((R1 − 2200 Ω)/10 Ω) with R1 rectangular on 2200 ± 22 Ω (1 %, GUM 4.3.7): c·a = 2.2.
// Its probabilistically symmetric interval at p is exp(±2.2·p) exactly (the quantiles of a
// uniform variable through a monotonic function), its mean sinh(2.2)/2.2 and its second
// moment sinh(4.4)/4.4 (integrals of exp over an interval, calculus). The GUM interval,
// 1 ± k·2.2/√3, fails JCGM 101 §8, so the record prints the Monte Carlo one and says so.
#[test]
fn a_skewed_model_gets_its_monte_carlo_interval() {
    // 10 Ω is written R1 − R1 + 10: a number in a sum takes its neighbour's unit, so the
    // argument of exp is a pure number.
    let model = "model:\n  y: { expr: \"exp((R1 - 2200) / (R1 - R1 + 10))\", unit: 1 }\n";
    let blocks = reduce(&notebook_with(&[("nl", "model", model)]));
    let b = &blocks[0];
    let p = 0.9545;
    let (lo, hi) = ((-2.2 * p as f64).exp(), (2.2 * p as f64).exp());
    let mean = 2.2f64.sinh() / 2.2;
    let sd = (4.4f64.sinh() / 4.4 - mean * mean).sqrt();
    for r in &b.rows {
        let mc = r.m.mc.as_ref().unwrap();
        assert!(!mc.gum_validated, "{mc:?}");
        assert!((mc.low - lo).abs() < 0.01 * lo, "low {} vs {lo}", mc.low);
        assert!((mc.high - hi).abs() < 0.02 * hi, "high {} vs {hi}", mc.high);
        assert!(
            (mc.mean - mean).abs() < 0.01 * mean,
            "mean {} vs {mean}",
            mc.mean
        );
        assert!((mc.u - sd).abs() < 0.01 * sd, "u {} vs {sd}", mc.u);
    }
    assert!(
        b.flags.iter().any(|f| !f.warn
            && f.message
                .contains("not near enough to linear or to normal for the GUM interval")
            && f.message.contains("JCGM 101 §8")),
        "{:?}",
        b.flags
    );
}

// On the page: each row result whose GUM interval Monte Carlo did not validate is marked †
// in the per-frequency table, and its Monte Carlo interval is printed under the table.
#[test]
fn the_page_marks_unvalidated_rows_and_prints_their_intervals() {
    let model = "model:\n  y: { expr: \"exp((R1 - 2200) / (R1 - R1 + 10))\", unit: 1 }\n";
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("skewed.md");
    std::fs::write(&nb, notebook_with(&[("nl", "model", model)])).unwrap();
    let o = run(&["build", nb.to_str().unwrap()]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let text = pdf_text(&std::fs::read(dir.path().join("skewed.pdf")).unwrap());
    let marked = text
        .lines()
        .filter(|l| l.trim_end().ends_with(" †"))
        .count();
    assert_eq!(marked, 4, "{text}");
    assert!(text.contains("† The GUM interval is not validated by Monte Carlo (JCGM 101 §8)"));
    // The text extraction spaces symbols apart; compare with single spaces.
    let flat = text.split_whitespace().collect::<Vec<_>>().join(" ");
    for f in ["500.0 Hz", "1.000 kHz", "2.000 kHz", "5.000 kHz"] {
        assert!(flat.contains(&format!("y at {f}: [0.1, 8.")), "{f}: {flat}");
    }
}

// √(R1 − 2200 Ω) has no value for half of a symmetric R1: about half the trials are left
// out (binomial, n ≥ 1e5: within ±2 %), and above 1 % that is a warning at each row.
#[test]
fn trials_without_a_value_are_counted_and_warned() {
    let model = "model:\n  y: { expr: \"sqrt((R1 - 2200) / (R1 - R1 + 1))\", unit: 1 }\n";
    let text = notebook_with(&[("dr", "model", model)]);
    let blocks = reduce(&text);
    let b = &blocks[0];
    for r in &b.rows {
        let mc = r.m.mc.as_ref().unwrap();
        let share = mc.dropped as f64 / (mc.dropped + mc.trials) as f64;
        assert!((share - 0.5).abs() < 0.02, "{mc:?}");
    }
    let warned: Vec<_> = b
        .flags
        .iter()
        .filter(|f| f.warn && f.message.contains("Monte Carlo trials drew readings at which an expression of the model has no value"))
        .collect();
    assert_eq!(warned.len(), 4, "{:?}", b.flags);
    let row = text.find("1000    1.36979").unwrap();
    assert!(warned
        .iter()
        .any(|f| f.span.is_some_and(|s| s.start == row)));
}

// A result whose expression cannot have its unit is refused at the unit word (VR/VC is a pure
// number, not farads: F = s/Ω, SI Brochure Table 4); one whose expression has no dimension
// (volts added to ohms) at the expression. Both name the units the names carry.
#[test]
fn a_unit_the_expression_cannot_have_is_refused_where_it_stands() {
    let model =
        "model:\n  C: { expr: \"VR / VC\", unit: F }\n  Z: { expr: \"VR + R1\", unit: ohm }\n";
    let text = notebook_with(&[("m", "model", model)]);
    let nb = notebook::parse(&text).unwrap_or_else(|d| panic!("{d:?}"));
    let d = benchrec::networks::reduce(&nb).expect_err("refused");
    assert_eq!(d.len(), 2, "{d:?}");
    let unit_at = text.find("unit: F").unwrap() + "unit: ".len();
    assert_eq!((d[0].span.start, d[0].span.end), (unit_at, unit_at + 1));
    assert!(
        d[0].message == "C = VR / VC has the dimension 1 (a pure number), not that of its unit F",
        "{}",
        d[0].message
    );
    assert!(d[0]
        .help
        .as_deref()
        .unwrap_or("")
        .contains("VC in V, VR in V"));
    let expr_at = text.find("\"VR + R1\"").unwrap();
    assert_eq!((d[1].span.start, d[1].span.end), (expr_at + 1, expr_at + 8));
    assert!(d[1].message.contains("adds V and Ω"), "{}", d[1].message);
}

// A block of more than 100 rows (here 101 frequencies) keeps its GUM intervals and says that
// Monte Carlo was not run, rather than spend 10⁵ trials on every row.
#[test]
fn a_long_block_is_not_run_through_monte_carlo_row_by_row() {
    let mut t = synthetic_front("MODEL-02", "Long model block (synthetic)", "2026-10-09");
    t.push_str(&format!(
        "Invented readings.\n\n```readings\nid: long\nnetwork: model\nparts: [R1, C1]\nmeter: dmm\n{EXAMPLE}---\nf/Hz VR/V VC/V\n"
    ));
    for k in 0..101 {
        let f = 300.0 + 10.0 * k as f64;
        let xc = 1.0 / (2.0 * std::f64::consts::PI * f * 68e-9);
        let z = (2200.0f64).hypot(xc);
        t.push_str(&format!(
            "{f} {:.5} {:.5}\n",
            2.0 * 2200.0 / z,
            2.0 * xc / z
        ));
    }
    t.push_str("```\n");
    let b = &reduce(&t)[0];
    assert_eq!(b.rows.len(), 202);
    assert!(b.rows.iter().all(|r| r.m.mc.is_none() && r.m.u > 0.0));
    assert!(
        b.flags.iter().any(|f| !f.warn
            && f.message
                .starts_with("Monte Carlo was not run on this block's 101 rows (more than 100)")),
        "{:?}",
        b.flags
    );
}

// A division by zero at a reading, and the root of a negative number, are refused at the
// row they fail at (the 1 kHz row, line of `1000`), naming the expression: never a NaN.
#[test]
fn a_result_that_fails_at_a_reading_is_a_located_error() {
    for model in [
        "model:\n  Z: { expr: \"VR / (VC - 1.45728) * R1\", unit: ohm }\n",
        "model:\n  Z: { expr: \"sqrt(1.45728 - VC - 1e-9) / sqrt(VC) * R1\", unit: ohm }\n",
        "model:\n  Z: { expr: \"ln((VC - 1.45728) / VC) * R1\", unit: ohm }\n",
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
    assert_eq!(d.help.as_deref(), Some("did you mean `R1`?"));
    // An unknown function, and a unit word outside the list.
    let model = "model:\n  C: { expr: \"cosh(VR)\", unit: F }\n";
    let (d, ..) = refused(&notebook_with(&[("m", "model", model)]));
    assert!(d.message.contains("not a function"), "{}", d.message);
    assert_eq!(d.help.as_deref(), Some("did you mean `cos`?"));
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
