//! Meter ranges and the shared gain error (FORMAT.md 1.1, "Meter ranges and the shared gain
//! error"): readings of one instrument on one range share one gain input, which cancels in
//! the ratio VR/VC; readings on different ranges have independent gains.

use benchrec::networks::{reduce, BlockResult};
use benchrec::notebook;
use std::process::{Command, Stdio};

const BASE: &str = include_str!("reference/rc_shared_gain.md");

/// `benchrec VERB` on `text`, written as `name` in a fresh folder (kept in the result).
fn run(verb: &str, name: &str, text: &str) -> (std::process::Output, tempfile::TempDir) {
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join(name);
    std::fs::write(&nb, text).unwrap();
    let o = Command::new(env!("CARGO_BIN_EXE_benchrec"))
        .args([verb, nb.to_str().unwrap()])
        .stdin(Stdio::null())
        .output()
        .expect("benchrec runs");
    (o, dir)
}

/// `benchrec results` on `text`: the JSON.
fn results_json(text: &str) -> serde_json::Value {
    let (o, _dir) = run("results", "ranges.md", text);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    serde_json::from_slice(&o.stdout).expect("results JSON")
}

/// (value, u) of the block result C of block 0.
fn c_of(j: &serde_json::Value) -> (f64, f64) {
    let r = j["blocks"][0]["results"]
        .as_array()
        .unwrap()
        .iter()
        .find(|r| r["name"] == "C" && r["f"].is_null())
        .expect("block result C");
    (r["value"].as_f64().unwrap(), r["u"].as_f64().unwrap())
}

fn block_of(text: &str) -> BlockResult {
    let nb = notebook::parse(text).unwrap_or_else(|d| panic!("{d:?}"));
    let red = reduce(&nb).unwrap_or_else(|d| panic!("{d:?}"));
    red.blocks.into_iter().next().expect("one block")
}

/// Names of the gain inputs in the budget of the block result C.
fn gains(b: &BlockResult) -> Vec<String> {
    let c = b
        .results
        .iter()
        .find(|r| r.name == "C" && r.f.is_none())
        .expect("C");
    let mut v: Vec<String> = (c.m.budget.iter())
        .map(|l| l.input.clone())
        .filter(|n| n.starts_with("gain("))
        .collect();
    v.sort();
    v
}

/// Lines `case value u rel` of tests/reference/shared_gain.out.
fn reference(case: &str) -> (f64, f64, String) {
    let line = include_str!("reference/shared_gain.out")
        .lines()
        .find(|l| l.split_whitespace().next() == Some(case))
        .unwrap_or_else(|| panic!("no case {case}"));
    let v: Vec<&str> = line.split_whitespace().collect();
    (
        v[1].parse().unwrap(),
        v[2].parse().unwrap(),
        v[3].to_string(),
    )
}

// Reference: the Python `uncertainties` package, first-order propagation with shared inputs
// kept (tests/reference/shared_gain.py, output shared_gain.out, from the readings and specs of
// rc_shared_gain.md). One RC reading, voltmeter 0.5 % + 3 counts, ohmmeter 0.05 % + 2 counts:
// u_rel(C) = 0.2121 % when VR and VC share the 2 V range's gain, 0.4600 % when VC is read on
// the 20 V range (its own gain). Both are first order, so they agree to rounding (1e-6).
#[test]
fn shared_and_independent_gains_match_the_uncertainties_package() {
    let cases = [
        ("shared", BASE.to_string()),
        (
            "independent",
            BASE.replace("VR/V    VC/V\n", "VR/V    VC/V@20V\n"),
        ),
    ];
    for (case, text) in cases {
        assert_ne!(
            case == "independent",
            text == BASE,
            "the heading edit applies"
        );
        let (value, u) = c_of(&results_json(&text));
        let (rv, ru, rel) = reference(case);
        assert!(
            ((value - rv) / rv).abs() < 1e-9,
            "{case}: C {value} vs {rv}"
        );
        assert!(
            ((u - ru) / ru).abs() < 1e-6,
            "{case}: u {u} vs uncertainties {ru}"
        );
        let printed = format!("{:.4}", 100.0 * u / value);
        assert_eq!(printed, rel, "{case}: u_rel(C) in %");
        let want = if case == "shared" { "0.2121" } else { "0.4600" };
        assert_eq!(printed, want, "{case}: the figure of the issue");
    }
}

// The shared gain cancels in VR/VC (first order: C = VR/(2π f R VC) does not depend on a
// common factor of VR and VC), so the budget has one gain input and it contributes nothing;
// on two ranges there are two, each contributing its full 0.5 %/√3 (rectangular, GUM 4.3.7).
#[test]
fn one_range_one_gain_two_ranges_two() {
    let b = block_of(BASE);
    assert_eq!(gains(&b), ["gain(dmm,2 V range)"]);
    let c = b
        .results
        .iter()
        .find(|r| r.name == "C" && r.f.is_none())
        .unwrap();
    let g =
        c.m.budget
            .iter()
            .find(|l| l.input.starts_with("gain("))
            .unwrap();
    assert!(
        g.contribution.abs() < 1e-9 * c.m.u,
        "shared gain cancels: {}",
        g.contribution
    );

    let two = block_of(&BASE.replace("VR/V    VC/V\n", "VR/V    VC/V@20V\n"));
    assert_eq!(gains(&two), ["gain(dmm,2 V range)", "gain(dmm,20 V range)"]);
    let c = two
        .results
        .iter()
        .find(|r| r.name == "C" && r.f.is_none())
        .unwrap();
    for l in c.m.budget.iter().filter(|l| l.input.starts_with("gain(")) {
        let rel = l.contribution.abs() / c.m.value;
        assert!(
            (rel - 0.005 / 3f64.sqrt()).abs() < 1e-6,
            "{}: {rel}",
            l.input
        );
    }
}

// A reading goes on the smallest listed range that holds it (FORMAT.md 1.1): 0.150 V on the
// 200 mV range, 1.240 V on the 2 V range, so two gains. Without `ranges`, one gain per
// instrument and column as before, and the same u as two independent ranges (same counts).
#[test]
fn smallest_range_that_holds_the_reading_and_no_ranges_as_before() {
    let low = block_of(&BASE.replace("1.240   1.122", "1.240   0.150"));
    assert_eq!(
        gains(&low),
        ["gain(dmm,2 V range)", "gain(dmm,200 mV range)"]
    );

    let plain = BASE.replace("    ranges: [200 mV, 2 V, 20 V]\n", "");
    assert_ne!(plain, BASE);
    let b = block_of(&plain);
    assert_eq!(gains(&b), ["gain(dmm,VC)", "gain(dmm,VR)"]);
    let (_, u_plain) = c_of(&results_json(&plain));
    let (_, u_ref, _) = reference("independent");
    assert!(
        ((u_plain - u_ref) / u_ref).abs() < 1e-6,
        "{u_plain} vs {u_ref}"
    );
}

// `accuracy` per range: the 20 V range's own 0.8 % + 5 counts apply to VC read there; its
// gain u is 0.8 %/√3 and its counts 5 × 1 mV/√3 (rectangular, GUM 4.3.7).
#[test]
fn accuracy_per_range() {
    let text = BASE
        .replace(
            "    accuracy: 0.5% + 3\n    resolution: 1 mV\n    ranges: [200 mV, 2 V, 20 V]\n",
            "    accuracy: { 200 mV: 0.3% + 3, 2 V: 0.5% + 3, 20 V: 0.8% + 5 }\n    resolution: 1 mV\n    ranges: [200 mV, 2 V, 20 V]\n",
        )
        .replace("VR/V    VC/V\n", "VR/V    VC/V@20V\n");
    assert_ne!(text, BASE.replace("VR/V    VC/V\n", "VR/V    VC/V@20V\n"));
    let b = block_of(&text);
    let c = b
        .results
        .iter()
        .find(|r| r.name == "C" && r.f.is_none())
        .unwrap();
    let line = |n: &str| {
        c.m.budget
            .iter()
            .find(|l| l.input == n)
            .unwrap_or_else(|| panic!("{n}"))
    };
    let s3 = 3f64.sqrt();
    assert!((line("gain(dmm,20 V range)").u - 0.008 / s3).abs() < 1e-12);
    assert!((line("gain(dmm,2 V range)").u - 0.005 / s3).abs() < 1e-12);
    let counts: Vec<_> = (c.m.budget.iter())
        .filter(|l| l.input.starts_with("counts("))
        .collect();
    let vc = counts
        .iter()
        .find(|l| l.input.contains(",VC"))
        .expect("VC counts");
    let vr = counts
        .iter()
        .find(|l| l.input.contains(",VR"))
        .expect("VR counts");
    assert!((vc.u - 5e-3 / s3).abs() < 1e-12, "{}", vc.u);
    assert!((vr.u - 3e-3 / s3).abs() < 1e-12, "{}", vr.u);
}

/// What `benchrec check` prints for `text`, which must fail.
fn first_error(text: &str) -> String {
    let (o, _dir) = run("check", "bad.md", text);
    assert!(!o.status.success(), "must fail");
    String::from_utf8_lossy(&o.stderr).into_owned()
}

// A reading over its range is an error at its cell (line 40 of the notebook, column 17).
#[test]
fn over_range_is_an_error_at_the_cell() {
    let e = first_error(&BASE.replace("1.240   1.122", "1.240   21.22"));
    assert!(e.contains("over range"), "{e}");
    assert!(e.contains("bad.md:40:17"), "{e}");
}

// The snubber demo reads VR and VC on the one 6 V range of its meter, so its printed budgets
// show one shared gain, named for the range, and no per-column gain of that meter.
#[test]
fn the_snubber_record_prints_one_shared_gain() {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR"));
    let demo = std::fs::read_to_string(root.join("demo/snubber-caps.md")).unwrap();
    let (o, dir) = run("build", "snubber-caps.md", &demo);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let pdf = std::fs::read(dir.path().join("snubber-caps.pdf")).unwrap();
    let text = benchrec::signoff::pdf::page_text(&pdf).unwrap();
    let flat = text.split_whitespace().collect::<Vec<_>>().join(" ");
    assert!(flat.contains("gain, dmm 6 V range"), "{flat}");
    for col in ["VR gain, dmm", "VC gain, dmm", "Vs gain, dmm"] {
        assert!(!flat.contains(col), "{col} printed");
    }
}

// The whole RLC chain, readings → |Y| → fit → f0, Q, BW, L, C, Rtotal, against an independent
// first-order propagation whose sensitivities come from re-fitting with scipy's curve_fit
// (tests/reference/rlc_shared_gain.py, its .md and .out). Vs and VR on one range share one
// gain, which cancels in |Y| = VR/(R·Vs): u(Rtotal) is then R1's alone; with VR named on the
// 20 V range the two gains are independent and u(Rtotal), u(L), u(C) grow. f0 and Q do not
// depend on a scale of |Y|, so theirs are the readings' offsets' either way.
#[test]
fn rlc_chain_with_shared_and_independent_gains_matches_scipy() {
    let shared = include_str!("reference/rlc_shared_gain.md");
    let heading = "f/Hz    Vs/V    VR/V\n";
    assert!(shared.contains(heading));
    let independent = shared.replace(heading, "f/Hz    Vs/V    VR/V@20V\n");
    let reference = include_str!("reference/rlc_shared_gain.out");
    let mut checked = 0;
    for (case, text) in [("shared", shared), ("independent", independent.as_str())] {
        let b = block_of(text);
        for line in reference.lines().filter(|l| l.starts_with(case)) {
            let v: Vec<&str> = line.split_whitespace().collect();
            let (name, value, u): (&str, f64, f64) =
                (v[1], v[2].parse().unwrap(), v[3].parse().unwrap());
            let m = &b
                .results
                .iter()
                .find(|r| r.name == name && r.f.is_none())
                .unwrap_or_else(|| panic!("{case}: no {name}"))
                .m;
            assert!(
                ((m.value - value) / value).abs() < 1e-9,
                "{case} {name}: {} vs {value}",
                m.value
            );
            assert!(
                ((m.u - u) / u).abs() < 5e-5,
                "{case} u({name}): {} vs {u}",
                m.u
            );
            checked += 1;
        }
    }
    assert_eq!(checked, 12);
}
