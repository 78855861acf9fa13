//! Physically impossible but well-formed readings are flagged at their row, never NaN or inf.

mod common;

use common::*;

/// Runs `results` on a well-formed but physically impossible notebook. Either the notebook is
/// refused with a located error, or it reduces with every number finite and a flag that says
/// what is wrong (one of `words`). Returns a problem description, or None.
fn impossible_readings(name: &str, text: &str, words: &[&str]) -> Option<String> {
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join(name);
    std::fs::write(&nb, text).unwrap();
    let o = run(&["results", s(&nb)]);
    let out = stdout(&o);
    let err = stderr(&o);
    let bad_tokens = non_finite_tokens(&out);
    if !bad_tokens.is_empty() {
        return Some(format!(
            "{name}: results print non-finite numbers {bad_tokens:?}"
        ));
    }
    let hit = |t: &str| {
        words
            .iter()
            .any(|w| t.to_lowercase().contains(&w.to_lowercase()))
    };
    if !o.status.success() {
        if err.contains(&format!("{name}:")) && hit(&err) {
            return None; // refused with a located, clear error
        }
        return Some(format!(
            "{name}: refused without a located error naming one of {words:?}:\n{err}"
        ));
    }
    let j: serde_json::Value = match serde_json::from_str(&out) {
        Ok(j) => j,
        Err(e) => return Some(format!("{name}: results JSON does not parse: {e}")),
    };
    let mut problems = Vec::new();
    let mut flagged = false;
    for b in j["blocks"].as_array().into_iter().flatten() {
        for r in b["results"].as_array().into_iter().flatten() {
            for k in ["value", "u", "U", "k"] {
                // serde_json writes a non-finite f64 as null.
                if !r[k].as_f64().is_some_and(f64::is_finite) {
                    problems.push(format!(
                        "result {} {}: `{k}` is {}",
                        r["name"], r["f"], r[k]
                    ));
                }
            }
        }
        for f in b["flags"].as_array().into_iter().flatten() {
            if hit(&f.to_string()) {
                flagged = true;
            }
        }
    }
    if !flagged {
        problems.push(format!(
            "no flag mentions any of {words:?}; flags: {}",
            flags_of(&j)
        ));
    }
    if problems.is_empty() {
        None
    } else {
        Some(format!("{name}: {}", problems.join("; ")))
    }
}

fn flags_of(j: &serde_json::Value) -> String {
    j["blocks"]
        .as_array()
        .into_iter()
        .flatten()
        .map(|b| b["flags"].to_string())
        .collect::<Vec<_>>()
        .join(" ")
}

/// Series RC: |VR| ≤ |Vs| since Vs = VR + VC with VR ⟂ VC (phasor sum, any circuit-theory
/// text). A VR above Vs cannot happen; the row must be flagged (Kirchhoff residual).
#[test]
fn impossible_rc_vr_above_vs_is_flagged_never_nan() {
    let fm = synthetic_front("HX-0100", "Impossible readings", "2026-10-06");
    let text = format!(
        "{fm}```readings
id: rc-bad
network: RC
parts: [R1, C1]
meter: dmm
---
f/Hz    Vs/V    VR/V    VC/V
800     1.500   1.650   1.199
1600    1.500   1.249   0.830
```
"
    );
    if let Some(p) = impossible_readings(
        "rc-bad.md",
        &text,
        &[
            "impossible",
            "exceeds Vs",
            "above Vs",
            "greater than Vs",
            "VR > Vs",
        ],
    ) {
        panic!("{p}");
    }
}

/// Series RL, three-voltmeter method: cos θ = (Vs² − VR² − VL²)/(2·VR·VL) (the classical
/// three-voltmeter relation, law of cosines). Vs = 1.0, VR = VL = 0.8 gives cos θ = −0.219:
/// a coil with negative AC resistance. That row, and only that row, must carry the flag that
/// says so, and no three-voltmeter result (Rac, XL, L, Q) for it; the valid 2 kHz row keeps
/// its results; nothing is NaN.
#[test]
fn impossible_rl_negative_cos_is_flagged_never_nan() {
    let fm = synthetic_front("HX-0100", "Impossible readings", "2026-10-06");
    let text = format!(
        "{fm}```readings
id: rl-bad
network: RL
parts: [R2, L1]
meter: dmm
---
f/Hz    Vs/V    VR/V    VL/V
1000    1.000   0.800   0.800
2000    1.000   0.600   0.780
```
"
    );
    let dir = tempfile::tempdir().unwrap();
    let nb = dir.path().join("rl-bad.md");
    std::fs::write(&nb, &text).unwrap();
    let o = run(&["results", s(&nb)]);
    assert!(o.status.success(), "{}", stderr(&o));
    let out = stdout(&o);
    assert!(non_finite_tokens(&out).is_empty(), "non-finite: {out}");
    let j: serde_json::Value = serde_json::from_str(&out).unwrap();
    let b = &j["blocks"][0];
    let cos = (1.0f64 - 0.64 - 0.64) / (2.0 * 0.8 * 0.8);
    // The record prints the minus of ISO 80000-1 (U+2212).
    let want = format!("cos θ = {cos:.3} is negative").replace('-', "\u{2212}");
    let flags: Vec<String> = b["flags"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| f.as_str().unwrap_or_default().to_string())
        .collect();
    let cos_flags: Vec<&String> = flags.iter().filter(|f| f.contains("cos θ")).collect();
    assert!(
        cos_flags.len() == 1
            && cos_flags[0].contains("at 1 kHz")
            && cos_flags[0].contains(&want)
            && cos_flags[0].contains("line 38, column 1"),
        "want one flag at line 38 (the 1 kHz row) saying `{want}`; flags: {flags:#?}"
    );
    let names_at = |f: f64| -> Vec<String> {
        b["results"]
            .as_array()
            .unwrap()
            .iter()
            .filter(|r| r["f"].as_f64() == Some(f))
            .map(|r| r["name"].as_str().unwrap().to_string())
            .collect()
    };
    for f in [1000.0, 2000.0] {
        let names = names_at(f);
        let three = ["Rac", "XL", "L", "Q"].map(|n| names.iter().any(|x| x == n));
        assert_eq!(
            three,
            [f == 2000.0; 4],
            "at {f} Hz, Rac/XL/L/Q present: {three:?} (names {names:?})"
        );
    }
    for r in b["results"].as_array().unwrap() {
        for k in ["value", "u", "U", "k"] {
            assert!(r[k].as_f64().is_some_and(f64::is_finite), "{r}: `{k}`");
        }
    }
}

/// Series RLC sweep that never turns over: VR rises monotonically, so no peak and no
/// half-power points lie in the data. f_low/f_high/f0_peak cannot be read off; a flag or an
/// error must say so. Gap marker: needs the RLC network (another helper).
#[test]
fn impossible_rlc_sweep_without_peak_is_flagged_never_nan() {
    let mut rows = String::new();
    // Chosen: R = 47 Ω + 1.9 Ω, L = 6.8 mH, C = 68 nF → f0 ≈ 7.4 kHz; the sweep stops at 2 kHz.
    let (r, l, c, vs) = (48.9f64, 6.8e-3f64, 68e-9f64, 1.2f64);
    for i in 0..12 {
        let f = 200.0 + 150.0 * i as f64;
        let w = 2.0 * std::f64::consts::PI * f;
        let x = w * l - 1.0 / (w * c);
        let vr = vs * 47.0 / (r * r + x * x).sqrt();
        rows.push_str(&format!("{f:.0}    {vs:.3}    {vr:.5}\n"));
    }
    let fm = synthetic_front("HX-0100", "Impossible readings", "2026-10-06");
    let text = format!(
        "{fm}```readings
id: rlc-bad
network: RLC
parts: [R2, L1, C1]
meter: dmm
---
f/Hz    Vs/V    VR/V
{rows}```
"
    );
    if let Some(p) = impossible_readings(
        "rlc-bad.md",
        &text,
        &["peak", "resonan", "half-power", "maximum", "edge", "range"],
    ) {
        panic!("GAP (RLC network): {p}");
    }
}
