//! Large input finishes with the right numbers; concurrent builds leave one whole PDF.

mod common;

use common::*;
use std::path::PathBuf;
use std::process::Stdio;

/// 100 000 RC rows: 100 frequencies, 1 000 repeats each, made by complex arithmetic from
/// R = 2.2 kΩ and C = 68 nF with a deterministic ±0.3 mV dither.
pub fn large_rc_notebook() -> String {
    let mut t = String::with_capacity(4_000_000);
    t.push_str(&synthetic_front("HX-0200", "Large input", "2026-10-07"));
    t.push_str("```readings\nid: rc-large\nnetwork: RC\nparts: [R1, C1]\nmeter: dmm\n---\nf/Hz    VR/V    VC/V\n");
    let (r, c, vs) = (2200.0f64, 68e-9f64, 1.5f64);
    for i in 0..100_000u32 {
        let f = 200.0 + 50.0 * (i % 100) as f64;
        let xc = 1.0 / (2.0 * std::f64::consts::PI * f * c);
        let z = (r * r + xc * xc).sqrt();
        let d = (((i.wrapping_mul(2_654_435_761)) >> 16) % 7) as f64 - 3.0; // −3..3
        let vr = vs * r / z + d * 1e-4;
        let vc = vs * xc / z - d * 1e-4;
        t.push_str(&format!("{f:.0}    {vr:.4}    {vc:.4}\n"));
    }
    t.push_str("```\n\nThe block C is `=rc-large.C`.\n");
    t
}

/// A 5 000-frequency RC block (every row its own frequency, 200 Hz to 10.2 kHz), exact by
/// complex arithmetic to 0.1 mV: each frequency is a group, so this exercises the sparse
/// propagation (a dense Jacobian here is 25 000 outputs × 20 000 inputs).
pub fn large_rc_distinct_notebook() -> String {
    let mut t = String::with_capacity(200_000);
    t.push_str(&synthetic_front("HX-0200", "Large input", "2026-10-07"));
    t.push_str("```readings\nid: rc-sweep\nnetwork: RC\nparts: [R1, C1]\nmeter: dmm\n---\nf/Hz    VR/V    VC/V\n");
    let (r, c, vs) = (2200.0f64, 68e-9f64, 1.5f64);
    for i in 0..5_000u32 {
        let f = 200.0 + 2.0 * i as f64;
        let xc = 1.0 / (2.0 * std::f64::consts::PI * f * c);
        let z = (r * r + xc * xc).sqrt();
        t.push_str(&format!(
            "{f:.1}    {:.4}    {:.4}\n",
            vs * r / z,
            vs * xc / z
        ));
    }
    t.push_str("```\n");
    t
}

/// A 5 000-point RLC sweep (R = 47 Ω + 1.9 Ω coil, L = 6.8 mH, C = 68 nF; f0 = 1/(2π√(LC))
/// ≈ 7.40 kHz) from 1 kHz to 50 kHz, exact by complex arithmetic to 0.1 mV.
pub fn large_rlc_notebook() -> String {
    let mut t = String::with_capacity(200_000);
    t.push_str(&synthetic_front("HX-0200", "Large input", "2026-10-07"));
    t.push_str("```readings\nid: rlc-large\nnetwork: RLC\nparts: [R2, L1, C1]\nmeter: dmm\n---\nf/Hz    Vs/V    VR/V\n");
    let (rt, l, c, vs) = (48.9f64, 6.8e-3f64, 68e-9f64, 1.2f64);
    for i in 0..5_000u32 {
        let f = 1000.0 + 9.8 * i as f64;
        let w = 2.0 * std::f64::consts::PI * f;
        let x = w * l - 1.0 / (w * c);
        let vr = vs * 47.0 / (rt * rt + x * x).sqrt();
        t.push_str(&format!("{f:.1}    {vs:.3}    {vr:.4}\n"));
    }
    t.push_str("```\n\nThe resonance is `=rlc-large.f0`.\n");
    t
}

fn build_large(name: &str, text: &str) {
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join(name);
    std::fs::write(&nb, text).unwrap();
    let out = dir.path().join("large.pdf");
    let t0 = std::time::Instant::now();
    let o = run(&["build", s(&nb), "-o", s(&out)]);
    eprintln!("{name}: build took {:.1} s", t0.elapsed().as_secs_f64());
    assert!(
        o.status.success(),
        "{name} did not build:\n{}",
        stderr(&o).chars().take(3000).collect::<String>()
    );
    assert!(std::fs::read(&out).unwrap().starts_with(b"%PDF"));
    let j = results_json(&nb);
    let out = j.to_string();
    assert!(non_finite_tokens(&out).is_empty());
    for b in j["blocks"].as_array().into_iter().flatten() {
        for r in b["results"].as_array().into_iter().flatten() {
            assert!(
                r["value"].as_f64().is_some_and(f64::is_finite),
                "{name}: non-finite result {r}"
            );
        }
    }
}

/// Large input finishes (no time limit asserted; about 1 s and 100 MB each, measured with
/// `BENCHREC_WRITE_LARGE` below and /usr/bin/time).
#[test]
fn large_rc_block_of_100k_rows_builds() {
    build_large("rc-large.md", &large_rc_notebook());
}

/// The sweep's sensitivities come from a coloured (sparse) Jacobian, so this is linear in N.
#[test]
fn large_rlc_sweep_of_5000_points_builds() {
    build_large("rlc-large.md", &large_rlc_notebook());
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("rlc-large.md");
    std::fs::write(&nb, large_rlc_notebook()).unwrap();
    let j = results_json(&nb);
    // Series resonance (circuit theory): f0 = 1/(2π√(LC)), Q = √(L/C)/Rt, half-power points
    // f0(√(1 + 1/4Q²) ∓ 1/2Q), from the parts the readings were made with (0.1 mV rounding).
    let (rt, l, c) = (48.9f64, 6.8e-3f64, 68e-9f64);
    let f0 = 1.0 / (2.0 * std::f64::consts::PI * (l * c).sqrt());
    let q = (l / c).sqrt() / rt;
    let s = (1.0 + 1.0 / (4.0 * q * q)).sqrt();
    for (name, want, tol) in [
        ("f0", f0, 1e-5),
        ("Q", q, 1e-5),
        ("L", l, 1e-5),
        ("C", c, 1e-5),
        ("Rtotal", rt, 1e-5),
        ("f_low", f0 * (s - 0.5 / q), 1e-3),
        ("f_high", f0 * (s + 0.5 / q), 1e-3),
    ] {
        let got = block_value(&j, name);
        assert!(
            (got / want - 1.0).abs() < tol,
            "{name} = {got}, want {want}"
        );
    }
}

#[test]
fn large_rc_block_of_5000_frequencies_builds_and_keeps_c() {
    build_large("rc-sweep.md", &large_rc_distinct_notebook());
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("rc-sweep.md");
    std::fs::write(&nb, large_rc_distinct_notebook()).unwrap();
    let j = results_json(&nb);
    // The block C: the result named C without `f` (the first C in the list is the 200 Hz row).
    let c = block_value(&j, "C");
    // The readings were made from C = 68 nF (synthetic) and rounded to 0.1 mV; over 5 000
    // frequencies the rounding averages out (their mean C computed apart: 68 nF × (1 + 1.4e-7)).
    assert!((c / 68e-9 - 1.0).abs() < 1e-5, "C = {c}");
}

/// Writes the large notebooks into $BENCHREC_WRITE_LARGE (for measuring with /usr/bin/time).
#[test]
fn write_large_notebooks_when_asked() {
    // The generators' notebooks parse (the large tests above rely on them).
    for t in [
        large_rc_notebook(),
        large_rlc_notebook(),
        large_rc_distinct_notebook(),
    ] {
        if let Err(d) = benchrec::notebook::parse(&t) {
            panic!(
                "a large notebook does not parse: {:?}",
                &d[..d.len().min(3)]
            );
        }
    }
    if let Some(d) = std::env::var_os("BENCHREC_WRITE_LARGE") {
        let d = PathBuf::from(d);
        std::fs::create_dir_all(&d).unwrap();
        std::fs::write(d.join("rc-large.md"), large_rc_notebook()).unwrap();
        std::fs::write(d.join("rlc-large.md"), large_rlc_notebook()).unwrap();
        std::fs::write(d.join("huge-line.md"), huge_line_notebook()).unwrap();
    }
}

/// Two builds of one notebook to one path at once leave one whole PDF that loads and carries
/// the notebook as its attachment (pipeline::write_atomic renames a complete temp file).
#[test]
fn concurrent_builds_leave_one_whole_pdf() {
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("snubber-caps.md");
    let src = std::fs::read(manifest_dir().join("demo").join("snubber-caps.md")).unwrap();
    std::fs::write(&nb, &src).unwrap();
    let out = dir.path().join("same.pdf");
    for round in 0..3 {
        let spawn = || {
            bin()
                .args(["build", "--force", s(&nb), "-o", s(&out)])
                .stdout(Stdio::null())
                .stderr(Stdio::piped())
                .spawn()
                .unwrap()
        };
        let (a, b) = (spawn(), spawn());
        let (a, b) = (a.wait_with_output().unwrap(), b.wait_with_output().unwrap());
        assert!(
            a.status.success() && b.status.success(),
            "round {round}: {} / {}",
            stderr(&a),
            stderr(&b)
        );
        let bytes = std::fs::read(&out).unwrap();
        let doc = lopdf::Document::load_mem(&bytes)
            .unwrap_or_else(|e| panic!("round {round}: PDF does not load: {e}"));
        assert!(
            !doc.get_pages().is_empty(),
            "round {round}: PDF has no pages"
        );
        let att = benchrec::signoff::pdf_attachments(&bytes).unwrap();
        assert!(
            att.iter().any(|(n, b)| n.ends_with(".md") && b == &src),
            "round {round}: the notebook is not attached whole: {:?}",
            att.iter().map(|(n, b)| (n, b.len())).collect::<Vec<_>>()
        );
        let leftovers: Vec<String> = files_in(dir.path())
            .into_iter()
            .filter(|f| f.ends_with(".tmp"))
            .collect();
        assert!(
            leftovers.is_empty(),
            "round {round}: temporary files left: {leftovers:?}"
        );
    }
}
