//! Network tank (a coil with winding resistance in parallel with a capacitor, behind a sense
//! resistor) against outside references: phasor arithmetic (num-complex), the handbook
//! formulas of the parallel resonant circuit, scipy.optimize.curve_fit and the Python
//! `uncertainties` package (tests/reference/tank_curve_fit.py and its .out).

use benchrec::networks::{tank, BlockResult, NamedResult};
use benchrec::notebook::{parse, Notebook};
use benchrec::uncertainty::{propagate, Dist, Input, Model};
use num_complex::Complex64;
use std::f64::consts::PI;

fn rel(a: f64, b: f64) -> f64 {
    ((a - b) / b).abs()
}

/// The chosen circuit: sense resistor, coil L with winding resistance R, capacitor C.
#[derive(Clone, Copy)]
struct Tank {
    rs: f64,
    l: f64,
    r: f64,
    c: f64,
}

impl Tank {
    fn z(&self, f: f64) -> Complex64 {
        let w = 2.0 * PI * f;
        let coil = Complex64::new(self.r, w * self.l);
        let cap = Complex64::new(0.0, -1.0 / (w * self.c));
        coil * cap / (coil + cap)
    }

    /// (VR, VT) for a source of `vs` volts at f.
    fn readings(&self, vs: f64, f: f64) -> (f64, f64) {
        let z = self.z(f);
        let i = Complex64::new(vs, 0.0) / (z + self.rs);
        ((i * self.rs).norm(), (i * z).norm())
    }
}

/// A notebook with the meter `dmm` (0.1 % + 2 counts of 0.01 mV), the sense resistor `Rs`
/// (0.1 %), the coil `Lx` (its `dcr`) and the capacitor `Cx` (both 5 %), and one `tank` block
/// `trap` of the SI readings `rows` under f/Hz Vs/V VR/V VT/V. Values are written in Rust's
/// shortest round-trip form, so the parser reads back the very same f64.
fn notebook(t: Tank, rows: &[Vec<f64>]) -> String {
    let mut s = format!(
        "---\nrecord: TANK-1\ntitle: t\ndate: 2026-05-15\noperator: test\ncoverage: 0.95\n\
         instruments:\n  dmm:\n    accuracy: 0.1% + 2\n    resolution: 0.01 mV\nparts:\n\
         \x20 Rs:\n    kind: resistor\n    nominal: {:?} ohm\n    tolerance: 0.1%\n\
         \x20 Lx:\n    kind: inductor\n    nominal: {:?} H\n    tolerance: 5%\n    dcr: {:?} ohm\n\
         \x20 Cx:\n    kind: capacitor\n    nominal: {:?} F\n    tolerance: 5%\n---\n\n\
         ```readings\nid: trap\nnetwork: tank\nparts: [Rs, Lx, Cx]\nmeter: dmm\n---\n\
         f/Hz Vs/V VR/V VT/V\n",
        t.rs, t.l, t.r, t.c
    );
    for r in rows {
        let cells: Vec<String> = r.iter().map(|v| format!("{v:?}")).collect();
        s.push_str(&format!("{}\n", cells.join(" ")));
    }
    s.push_str("```\n");
    s
}

fn parsed(text: &str) -> Notebook {
    parse(text).unwrap_or_else(|d| panic!("the fixture parses: {d:?}\n{text}"))
}

/// The notebook's one block reduced the way a build reduces it (`networks::reduce`: the
/// network looked up by its name, then the non-finite fence).
fn reduced(nb: &Notebook) -> Result<BlockResult, Vec<benchrec::diag::Diagnostic>> {
    let mut r = benchrec::networks::reduce(nb)?;
    assert_eq!(r.blocks.len(), 1);
    Ok(r.blocks.remove(0))
}

fn result<'a>(b: &'a BlockResult, name: &str) -> &'a NamedResult {
    b.results
        .iter()
        .find(|r| r.name == name)
        .unwrap_or_else(|| panic!("no block result {name}: {:?}", b.flags))
}

/// An invented RF trap: 6.8 µH with 3.5 Ω series (AC) resistance across 150 pF (f_r ≈ 4.99 MHz,
/// Q ≈ 61),
/// behind 2.2 kΩ, swept at 1.5 V (61 geometric steps from 0.9 to 1.12 f_r: about four and a
/// half per bandwidth).
const TRAP: Tank = Tank {
    rs: 2200.0,
    l: 6.8e-6,
    r: 3.5,
    c: 150e-12,
};

fn trap_rows(t: Tank, n: usize, from: f64, to: f64) -> Vec<Vec<f64>> {
    let fr = 1.0 / (2.0 * PI * (t.l * t.c).sqrt());
    (0..n)
        .map(|k| {
            let f = fr * from * (to / from).powf(k as f64 / (n - 1) as f64);
            let (vr, vt) = t.readings(1.5, f);
            vec![f, 1.5, vr, vt]
        })
        .collect()
}

// Exact readings by complex arithmetic (num-complex) from chosen L, C, R and Rs: the fit
// gives them back to 1e-9, and f0, Q, R_D, BW by the handbook formulas of the parallel
// resonant circuit with a lossy coil (from memory, as any circuit-theory text on parallel
// resonance gives them): f0 = (1/2π)√(1/(LC) − R²/L²), Q = ω0L/R, R_D = L/(CR), BW = f0/Q.
#[test]
fn exact_readings_reduce_back() {
    let t = TRAP;
    let text = notebook(t, &trap_rows(t, 61, 0.9, 1.12));
    let nb = parsed(&text);
    let out = reduced(&nb).expect("reduces");
    let f0 = (1.0 / (t.l * t.c) - (t.r / t.l).powi(2)).sqrt() / (2.0 * PI);
    let q = 2.0 * PI * f0 * t.l / t.r;
    let fr = 1.0 / (2.0 * PI * (t.l * t.c).sqrt());
    for (name, want) in [
        ("L", t.l),
        ("C", t.c),
        ("R", t.r),
        ("f0", f0),
        ("Q", q),
        ("R_D", t.l / (t.c * t.r)),
        ("BW", f0 / q),
        ("f_r", fr),
    ] {
        let m = &result(&out, name).m;
        assert!(rel(m.value, want) < 1e-9, "{name}: {} vs {want}", m.value);
        assert!(m.u > 0.0 && m.u.is_finite(), "{name} has a u");
        let mc = m.mc.as_ref().expect("Monte Carlo attached");
        assert!(mc.low < m.value && m.value < mc.high, "{name}: MC interval");
    }
    // Per frequency: I = VR/Rs and |Z| as the phasors give them.
    for row in out.rows.iter().filter(|r| r.name == "Z") {
        let f = row.f.expect("per-frequency");
        assert!(rel(row.m.value, t.z(f).norm()) < 1e-12);
    }
    assert_eq!(out.rows.iter().filter(|r| r.name == "I").count(), 61);
    // The read-off points against the true peak and −3 dB points of |Z| (found on the
    // phasors by bisection): each inside its U, which carries the interpolation term.
    let (fp, lo, hi) = true_peak_and_half_power(t, fr);
    for (name, truth) in [("f0_peak", fp), ("f_low", lo), ("f_high", hi)] {
        let m = &result(&out, name).m;
        assert!(
            (m.value - truth).abs() <= m.expanded,
            "{name}: |{} − {truth}| > U = {}",
            m.value,
            m.expanded
        );
    }
    // BW = f0/Q is the high-Q approximation of hi − lo: within 1/Q of it here.
    assert!(rel(f0 / q, hi - lo) < 1.0 / q);
    for f in &out.flags {
        assert!(!f.warn, "no warning on exact readings: {}", f.message);
    }
    for note in [
        "tank fit: f0 is the unity-power-factor frequency",
        "the parts predict f0",
    ] {
        assert!(
            out.flags.iter().any(|f| f.message.starts_with(note)),
            "{note}"
        );
    }
    let marks: Vec<&str> = out.plot.markers.iter().map(|m| m.0.as_str()).collect();
    assert_eq!(marks, ["f0", "f_low", "f_high"]);
}

/// The frequency of the largest |Z| and the two where |Z| is 1/√2 of it, for `t` near f_r
/// (golden section, then bisection, on the phasors).
fn true_peak_and_half_power(t: Tank, fr: f64) -> (f64, f64, f64) {
    let m = |f: f64| t.z(f).norm();
    let (mut a, mut b) = (0.9 * fr, 1.1 * fr);
    let g = (5f64.sqrt() - 1.0) / 2.0;
    for _ in 0..200 {
        let (c, d) = (b - g * (b - a), a + g * (b - a));
        if m(c) > m(d) {
            b = d;
        } else {
            a = c;
        }
    }
    let fp = 0.5 * (a + b);
    let level = m(fp) / 2f64.sqrt();
    let cross = |mut inside: f64, mut outside: f64| {
        for _ in 0..200 {
            let mid = 0.5 * (inside + outside);
            if m(mid) > level {
                inside = mid;
            } else {
                outside = mid;
            }
        }
        0.5 * (inside + outside)
    };
    (fp, cross(fp, 0.5 * fr), cross(fp, 1.5 * fr))
}

// At f0 the tank's impedance is real and equals L/(CR) (handbook, as above): the reduced f0
// and R_D checked against the circuit itself by num-complex.
#[test]
fn f0_is_where_the_impedance_is_real() {
    let t = TRAP;
    let nb = parsed(&notebook(t, &trap_rows(t, 61, 0.9, 1.12)));
    let out = reduced(&nb).expect("reduces");
    let z = t.z(result(&out, "f0").m.value);
    assert!((z.im / z.re).abs() < 1e-8, "Z(f0) = {z}");
    assert!(rel(z.re, result(&out, "R_D").m.value) < 1e-8);
}

// L and C are judged against the parts' nominals (ILAC-G8 simple acceptance): the readings
// are exact, so both pass; R (the coil) and R_D are not judged.
#[test]
fn l_and_c_are_judged() {
    let t = TRAP;
    let nb = parsed(&notebook(t, &trap_rows(t, 61, 0.9, 1.12)));
    let red = benchrec::networks::reduce(&nb).unwrap_or_else(|d| panic!("{d:?}"));
    let rec = benchrec::judge::judge(nb, red).unwrap_or_else(|d| panic!("{d:?}"));
    let mut v: Vec<(&str, &str, String)> = rec
        .verdicts
        .iter()
        .map(|v| (v.name.as_str(), v.part.as_str(), format!("{:?}", v.outcome)))
        .collect();
    v.sort();
    assert_eq!(
        v,
        [("C", "Cx", "Pass".to_string()), ("L", "Lx", "Pass".into())]
    );
}

// A sweep that stops below the resonance has no peak inside it: a warning, no fit, no NaN.
#[test]
fn a_sweep_without_a_peak_is_flagged() {
    let t = TRAP;
    let nb = parsed(&notebook(t, &trap_rows(t, 12, 0.5, 0.9)));
    let out = reduced(&nb).expect("a flag, not an error");
    assert!(
        out.flags
            .iter()
            .any(|f| f.warn && f.message.contains("no peak of |Z| inside it")),
        "{:?}",
        out.flags
    );
    assert!(out.results.is_empty());
    assert!(out.rows.iter().all(|r| r.m.value.is_finite()));
}

// A reading of zero volts across the tank or the sense resistor is refused at its cell.
#[test]
fn a_zero_voltage_is_an_error_at_its_cell() {
    let t = TRAP;
    let mut rows = trap_rows(t, 9, 0.9, 1.1);
    rows[4][3] = 0.0;
    rows[6][2] = 0.0;
    let text = notebook(t, &rows);
    let nb = parsed(&text);
    let d = reduced(&nb).expect_err("refused");
    assert_eq!(d.len(), 2, "{d:?}");
    assert!(d
        .iter()
        .any(|x| x.message.starts_with("VT must be positive")));
    assert!(d
        .iter()
        .any(|x| x.message.starts_with("VR must be positive")));
    for x in &d {
        assert_eq!(&text[x.span.start..x.span.end], "0.0");
    }
}

/// tests/reference/tank_curve_fit.out (JSON): the data, popt (L, C, R), pcov, chi2 and the
/// derived results' (value, u) from the `uncertainties` package.
struct Reference {
    data: Vec<[f64; 3]>,
    popt: [f64; 3],
    pcov: [[f64; 3]; 3],
    chi2: f64,
    derived: Vec<(String, f64, f64)>,
}

fn reference() -> Reference {
    let j: serde_json::Value =
        serde_json::from_str(include_str!("reference/tank_curve_fit.out")).expect("JSON");
    let list = |v: &serde_json::Value| -> Vec<f64> {
        v.as_array()
            .expect("a list")
            .iter()
            .map(|x| x.as_f64().expect("a number"))
            .collect()
    };
    let three = |v: &serde_json::Value| -> [f64; 3] { list(v).try_into().expect("three") };
    let (f, z, u) = (list(&j["f"]), list(&j["z"]), list(&j["u"]));
    let pcov = &j["pcov"];
    Reference {
        data: (0..f.len()).map(|k| [f[k], z[k], u[k]]).collect(),
        popt: three(&j["popt"]),
        pcov: [three(&pcov[0]), three(&pcov[1]), three(&pcov[2])],
        chi2: j["chi2"].as_f64().expect("chi2"),
        derived: j["derived"]
            .as_object()
            .expect("derived")
            .iter()
            .map(|(name, v)| (name.clone(), list(v)[0], list(v)[1]))
            .collect(),
    }
}

/// The fit of the reference data, and its (L, C, R) with their covariance mapped from θ by
/// the Jacobian of (L, C, R)(e^θ), taken by central differences.
fn our_fit(
    r: &Reference,
) -> (
    benchrec::networks::rlc::ResonanceFit,
    [f64; 3],
    [[f64; 3]; 3],
) {
    let f: Vec<f64> = r.data.iter().map(|d| d[0]).collect();
    let y: Vec<f64> = r.data.iter().map(|d| d[1]).collect();
    let u: Vec<f64> = r.data.iter().map(|d| d[2]).collect();
    let fit = tank::fit(&f, &y, &u).expect("fits");
    let lcr = |t: &[f64; 3]| -> [f64; 3] {
        let d = tank::derived(&[t[0].exp(), t[1].exp(), t[2].exp()]);
        [d[3], d[4], d[5]]
    };
    let p = lcr(&fit.theta);
    let mut jac = [[0.0; 3]; 3];
    for k in 0..3 {
        let h = 1e-6;
        let (mut a, mut b) = (fit.theta, fit.theta);
        a[k] += h;
        b[k] -= h;
        let (pa, pb) = (lcr(&a), lcr(&b));
        for i in 0..3 {
            jac[i][k] = (pa[i] - pb[i]) / (2.0 * h);
        }
    }
    let mut cov = [[0.0; 3]; 3];
    for i in 0..3 {
        for j in 0..3 {
            for a in 0..3 {
                for b in 0..3 {
                    cov[i][j] += jac[i][a] * fit.cov_theta[a][b] * jac[j][b];
                }
            }
        }
    }
    (fit, p, cov)
}

// scipy.optimize.curve_fit (absolute_sigma=True), fitting (L, C, R) directly on the same
// data: the same optimum, χ², and the same unscaled covariance once ours is mapped from
// (ln f_r, ln Q_r, ln R_D) to (L, C, R).
#[test]
fn fit_agrees_with_scipy_curve_fit() {
    let r = reference();
    assert_eq!(r.data.len(), 29);
    let (fit, p, cov) = our_fit(&r);
    for k in 0..3 {
        assert!(
            rel(p[k], r.popt[k]) < 1e-7,
            "param {k}: {} vs {}",
            p[k],
            r.popt[k]
        );
    }
    for a in 0..3 {
        for b in 0..3 {
            let scale = (r.pcov[a][a] * r.pcov[b][b]).sqrt();
            assert!(
                (cov[a][b] - r.pcov[a][b]).abs() < 1e-4 * scale,
                "cov[{a}][{b}]: {} vs {}",
                cov[a][b],
                r.pcov[a][b]
            );
        }
    }
    assert!(rel(fit.chi2, r.chi2) < 1e-6);
}

// u(f0), u(Q), u(BW), u(R_D) by our GUM propagation (benchrec's `propagate`, numerical
// derivatives) from our fit's covariance in θ (the unscaled one: χ²/ν is below its limit here), against the `uncertainties` package's
// first-order propagation (exact derivatives) from scipy's covariance of (L, C, R).
#[test]
fn derived_uncertainties_agree_with_the_uncertainties_package() {
    let r = reference();
    let (fit, _, _) = our_fit(&r);
    // θ = θ̂ + chol(cov θ)·z with independent standard inputs z, so that no correlation
    // coefficient is needed (the way the Python script builds its correlated inputs).
    let c = fit.cov_theta;
    let mut chol = [[0.0; 3]; 3];
    for i in 0..3 {
        for j in 0..=i {
            let s: f64 = c[i][j] - (0..j).map(|k| chol[i][k] * chol[j][k]).sum::<f64>();
            chol[i][j] = if i == j { s.sqrt() } else { s / chol[j][j] };
        }
    }
    let inputs: Vec<Input> = ["z0", "z1", "z2"]
        .iter()
        .map(|n| Input::type_b(*n, 0.0, 1.0, Dist::Normal))
        .collect();
    let model = Model {
        inputs: &inputs,
        corr: &[],
    };
    let of_logs = |z: &[f64]| {
        let t: Vec<f64> = (0..3)
            .map(|i| fit.theta[i] + (0..3).map(|k| chol[i][k] * z[k]).sum::<f64>())
            .collect();
        tank::derived(&[t[0].exp(), t[1].exp(), t[2].exp()])
    };
    let p = propagate(&model, &of_logs, 0.95).expect("propagates");
    assert_eq!(r.derived.len(), 4);
    for (name, value, u) in &r.derived {
        let k = tank::DERIVED
            .iter()
            .position(|d| d.0 == name)
            .expect("a derived name");
        let m = &p.results[k];
        assert!(
            rel(m.value, *value) < 1e-7,
            "{name}: {} vs {value}",
            m.value
        );
        assert!(rel(m.u, *u) < 1e-4, "u({name}): {} vs {u}", m.u);
    }
}
