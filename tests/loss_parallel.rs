//! The three-meter networks (RCloss, RCparallel, RLparallel) against outside references: the
//! Python `uncertainties` package for the GUM propagation, the loss limits judged through the
//! CLI, and the record built.

mod common;
use common::*;

use benchrec::notebook;

const NB: &str = "tests/reference/loss_parallel.md";

fn reduce_all() -> Vec<benchrec::networks::BlockResult> {
    let text = std::fs::read_to_string(manifest_dir().join(NB)).unwrap();
    let nb = notebook::parse(&text).unwrap_or_else(|d| panic!("{d:?}"));
    benchrec::networks::reduce(&nb)
        .unwrap_or_else(|d| panic!("{d:?}"))
        .blocks
}

// GUM first-order propagation (JCGM 100 §5.1) against an independent one by the Python
// `uncertainties` package (tests/reference/loss_parallel_uncertainty.py, output
// loss_parallel_uncertainty.out, from the readings of loss_parallel.md and the input rules of
// FORMAT.md): every row result and block mean of the three blocks, shared gains and R
// correlated. Both are first order, so values agree to 1e-9 and u to 1e-6.
#[test]
fn uncertainties_match_the_uncertainties_package() {
    let blocks = reduce_all();
    let refs = include_str!("reference/loss_parallel_uncertainty.out");
    let mut n = 0;
    for l in refs
        .lines()
        .filter(|l| !l.starts_with('#') && !l.is_empty())
    {
        let v: Vec<&str> = l.split_whitespace().collect();
        let (id, name, f) = (v[0], v[1], v[2].parse::<f64>().ok());
        let (value, u): (f64, f64) = (v[3].parse().unwrap(), v[4].parse().unwrap());
        let b = blocks.iter().find(|b| b.id == id).unwrap();
        let r = b
            .rows
            .iter()
            .chain(&b.results)
            .find(|r| r.name == name && r.f == f)
            .unwrap_or_else(|| panic!("{id}: no {name} at {f:?}"));
        assert!(
            ((r.m.value - value) / value).abs() < 1e-9,
            "{id} {name} at {f:?}: {} vs {value}",
            r.m.value
        );
        assert!(
            ((r.m.u - u) / u).abs() < 1e-6,
            "{id} {name} at {f:?}: u {} vs uncertainties {u}",
            r.m.u
        );
        n += 1;
    }
    assert_eq!(n, 21 + 18 + 18);
}

// The invented parts come back from readings rounded to five digits (complex arithmetic made
// them): C4 = 2.2 µF with ESR 6 Ω; C5 = 470 nF with D = 0.02 at 1 kHz; L6 = 15 mH of 9 Ω.
#[test]
fn invented_parts_come_back() {
    let blocks = reduce_all();
    let get = |id: &str, name: &str, f: Option<f64>| {
        let b = blocks.iter().find(|b| b.id == id).unwrap();
        let r = b.rows.iter().chain(&b.results);
        r.clone()
            .find(|r| r.name == name && r.f == f)
            .unwrap()
            .m
            .clone()
    };
    let near = |m: &benchrec::uncertainty::Measured, want: f64| {
        assert!(
            (m.value - want).abs() <= m.expanded,
            "{} vs {want}",
            m.value
        )
    };
    near(&get("esr", "C", None), 2.2e-6);
    near(&get("esr", "ESR", None), 6.0);
    near(&get("rc-par", "D", Some(1000.0)), 0.02);
    near(&get("rc-par", "C", None), 470e-9);
    near(&get("rl-par", "L", None), 15e-3);
    near(&get("rl-par", "Rac", None), 9.0);
}

// One-sided limits (ILAC-G8:09/2019 §4.2.2 guarded acceptance, upper limit only): the block
// ESR 6.0 Ω ± 0.6 Ω is wholly above max_esr = 4 Ω (fail); D = 0.097 ± 0.007 is wholly below
// max_D = 20 % (pass); C against 2.2 µF ± 20 % passes.
#[test]
fn loss_limits_are_judged_through_the_cli() {
    let j = results_json(&manifest_dir().join(NB));
    let blocks = j["blocks"].as_array().unwrap();
    let esr = blocks.iter().find(|b| b["id"] == "esr").unwrap();
    let verdict = |name: &str| {
        esr["verdicts"]
            .as_array()
            .unwrap()
            .iter()
            .find(|v| v["name"] == name)
            .unwrap_or_else(|| panic!("no verdict on {name}: {}", esr["verdicts"]))
            .clone()
    };
    assert_eq!(verdict("ESR")["verdict"], "fail");
    assert_eq!(verdict("ESR")["high"].as_f64(), Some(4.0));
    assert_eq!(verdict("D")["verdict"], "pass");
    assert_eq!(verdict("D")["high"].as_f64(), Some(0.2));
    assert_eq!(verdict("C")["verdict"], "pass");
    let rl = blocks.iter().find(|b| b["id"] == "rl-par").unwrap();
    let names: Vec<&str> = rl["verdicts"]
        .as_array()
        .unwrap()
        .iter()
        .filter_map(|v| v["name"].as_str())
        .collect();
    assert_eq!(names, ["R", "L"]);
    assert!(non_finite_tokens(&stdout(&run(&["results", NB]))).is_empty());
}

#[test]
fn the_record_builds_with_the_new_results() {
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("loss.md");
    std::fs::copy(manifest_dir().join(NB), &nb).unwrap();
    let out = dir.path().join("loss.pdf");
    let o = run(&["build", s(&nb), "-o", s(&out)]);
    assert!(o.status.success(), "{}", stderr(&o));
    let text = squash(&pdf_text_file(&out));
    // The limits in the parts table, the judged loss results in the verdicts.
    for want in [
        "RCloss",
        "RCparallel",
        "RLparallel",
        "D≤20%",
        "ESR≤4.000Ω",
        "✗FAIL",
        "IR",
    ] {
        assert!(text.contains(want), "{want} not in the record");
    }
}
