//! Networks RL and RLC against outside references: phasor arithmetic (num-complex),
//! scipy.optimize.curve_fit (tests/reference/rlc_curve_fit.py and its .out), and the
//! statistical coverage of the fit's stated intervals.

use benchrec::diag::Span;
use benchrec::networks::{rl, rlc, BlockResult, Context};
use benchrec::notebook::*;
use benchrec::quantity::{Quantity, Unit};
use benchrec::uncertainty::{coverage_factor, propagate, Dist, Input, Model};
use num_complex::Complex64;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution as _, StandardNormal};
use std::collections::BTreeMap;
use std::f64::consts::PI;

fn named(n: &str) -> Named {
    Named {
        name: n.into(),
        span: Span::default(),
    }
}

fn q(value: f64, unit: Unit) -> Quantity {
    Quantity { value, unit }
}

fn dmm() -> Instrument {
    Instrument {
        name: "dmm".into(),
        what: None,
        accuracy: Some(Accuracy::Relative {
            fraction: 0.002,
            counts: 2.0,
        }),
        resolution: Some(q(1e-4, Unit::V)),
        bandwidth: None,
        calibrated: None,
        due: None,
        reading: None,
        distribution: Distribution::Rectangular,
        ranges: Vec::new(),
        range_accuracy: Vec::new(),
        span: Span::default(),
    }
}

fn part(name: &str, kind: PartKind, nominal: f64, unit: Unit, dcr: Option<f64>) -> Part {
    Part {
        name: name.into(),
        kind,
        nominal: Some(q(nominal, unit)),
        tolerance: Some(Tolerance::Relative(0.005)),
        measured: None,
        measured_by: None,
        dcr: dcr.map(|v| q(v, Unit::Ohm)),
        dcr_by: None,
        rating: None,
        span: Span::default(),
    }
}

fn block(network: Network, cols: &[(&str, Unit)], rows: &[Vec<f64>]) -> ReadingsBlock {
    let mut pos = 0;
    let mut sp = || {
        pos += 8;
        Span::new(pos - 8, pos - 1)
    };
    let columns = cols
        .iter()
        .map(|(s, u)| Column {
            symbol: s.to_string(),
            unit: *u,
            heading: format!("{s}/{}", u.symbol()),
            range: None,
            span: sp(),
        })
        .collect();
    let rows = rows
        .iter()
        .map(|r| Row {
            cells: r
                .iter()
                .map(|v| Cell {
                    value: *v,
                    text: format!("{v}"),
                    span: sp(),
                })
                .collect(),
            span: sp(),
        })
        .collect();
    ReadingsBlock {
        id: "sweep-1".into(),
        id_span: Span::default(),
        network,
        network_span: Span::new(0, 0),
        parts: Vec::new(),
        meter: Some(named("dmm")),
        phase: None,
        counter: None,
        note: None,
        source: None,
        columns,
        rows,
        span: Span::new(0, 1),
        body: String::new(),
        lot: None,
    }
}

struct Env {
    instruments: BTreeMap<String, Instrument>,
    parts: BTreeMap<String, Part>,
}

impl Env {
    fn ctx(&self) -> Context<'_> {
        Context {
            source: "",
            coverage: 0.95,
            date: chrono::NaiveDate::from_ymd_opt(2026, 5, 4).unwrap(),
            instruments: &self.instruments,
            parts: &self.parts,
            lab: None,
        }
    }
}

fn block_result<'a>(b: &'a BlockResult, name: &str) -> &'a benchrec::networks::NamedResult {
    b.results
        .iter()
        .find(|r| r.name == name)
        .unwrap_or_else(|| panic!("no block result {name}: {:?}", b.flags))
}

fn rel(a: f64, b: f64) -> f64 {
    ((a - b) / b).abs()
}

// Series R + coil (Rc + jωL) by complex arithmetic (num-complex) gives exact readings; both
// the three-voltmeter method and the dcr correction must give back L and Rc.
#[test]
fn rl_exact_readings_reduce_back() {
    let (r, l, rc, vs) = (220.0, 0.1275, 18.3, 2.4);
    let freqs = [60.0, 250.0, 700.0, 1800.0, 4200.0];
    let data: Vec<Vec<f64>> = freqs
        .iter()
        .map(|&f| {
            let zl = Complex64::new(rc, 2.0 * PI * f * l);
            let i = Complex64::new(vs, 0.0) / (zl + r);
            vec![f, vs, (i * r).norm(), (i * zl).norm()]
        })
        .collect();
    let mut env = Env {
        instruments: BTreeMap::new(),
        parts: BTreeMap::new(),
    };
    env.instruments.insert("dmm".into(), dmm());
    env.parts.insert(
        "R5".into(),
        part("R5", PartKind::Resistor, r, Unit::Ohm, None),
    );
    env.parts.insert(
        "L5".into(),
        part("L5", PartKind::Inductor, l, Unit::H, Some(rc)),
    );
    let mut b = block(
        Network::RL,
        &[
            ("f", Unit::Hz),
            ("Vs", Unit::V),
            ("VR", Unit::V),
            ("VL", Unit::V),
        ],
        &data,
    );
    b.parts = vec![named("R5"), named("L5")];
    let out = rl::reduce(&env.ctx(), &b).expect("reduces");
    for &f in &freqs {
        let get = |n: &str| {
            &out.rows
                .iter()
                .find(|x| x.name == n && x.f == Some(f))
                .unwrap()
                .m
        };
        assert!(rel(get("L").value, l) < 1e-9, "L at {f}");
        assert!(rel(get("Rac").value, rc) < 1e-9, "Rac at {f}");
        assert!(rel(get("XL").value, 2.0 * PI * f * l) < 1e-9);
        assert!(rel(get("Q").value, 2.0 * PI * f * l / rc) < 1e-9);
        assert!(rel(get("L_dcr").value, l) < 1e-9);
        assert!(rel(get("XL_dcr").value, 2.0 * PI * f * l) < 1e-9);
        let mc = get("L").mc.as_ref().expect("Monte Carlo attached");
        assert!(mc.low < l && mc.high > l);
    }
    assert!(rel(block_result(&out, "L").m.value, l) < 1e-9);
    assert!(rel(block_result(&out, "L_dcr").m.value, l) < 1e-9);
    assert!(rel(block_result(&out, "Rac").m.value, rc) < 1e-9);
    // Rac equals dcr here: the note says so.
    assert!(out
        .flags
        .iter()
        .any(|f| f.message.contains("equal within the expanded uncertainty")));
    for r in out.rows.iter().chain(&out.results) {
        assert!(r.m.value.is_finite() && r.m.u.is_finite() && r.m.u > 0.0);
    }
}

/// |Y| and the phase of the current on the source for a series R + (Rc + jωL) + 1/(jωC).
fn rlc_point(r: f64, rc: f64, l: f64, c: f64, vs: f64, f: f64) -> (f64, f64) {
    let w = 2.0 * PI * f;
    let z = Complex64::new(r + rc, w * l - 1.0 / (w * c));
    let i = Complex64::new(vs, 0.0) / z;
    ((i * r).norm(), i.arg())
}

// Exact RLC readings from complex arithmetic: the fit returns the chosen L, C and R + Rc.
#[test]
fn rlc_exact_readings_reduce_back() {
    let (r, rc, l, c, vs): (f64, f64, f64, f64, f64) = (150.0, 9.4, 33.5e-3, 120e-9, 1.8);
    let (f0, qf, rt) = (
        1.0 / (2.0 * PI * (l * c).sqrt()),
        (l / c).sqrt() / (r + rc),
        r + rc,
    );
    let freqs: Vec<f64> = (0..21)
        .map(|k| f0 * 0.4 * (6.25f64).powf(k as f64 / 20.0))
        .collect();
    let data: Vec<Vec<f64>> = freqs
        .iter()
        .map(|&f| {
            let (vr, ph) = rlc_point(r, rc, l, c, vs, f);
            vec![f, vs, vr, ph]
        })
        .collect();
    let mut env = Env {
        instruments: BTreeMap::new(),
        parts: BTreeMap::new(),
    };
    env.instruments.insert("dmm".into(), dmm());
    env.parts.insert(
        "R8".into(),
        part("R8", PartKind::Resistor, r, Unit::Ohm, None),
    );
    env.parts.insert(
        "L8".into(),
        part("L8", PartKind::Inductor, l, Unit::H, Some(rc)),
    );
    env.parts.insert(
        "C8".into(),
        part("C8", PartKind::Capacitor, c, Unit::F, None),
    );
    let mut b = block(
        Network::RLC,
        &[
            ("f", Unit::Hz),
            ("Vs", Unit::V),
            ("VR", Unit::V),
            ("phi", Unit::Rad),
        ],
        &data,
    );
    b.parts = vec![named("R8"), named("L8"), named("C8")];
    let out = rlc::reduce(&env.ctx(), &b).expect("reduces");
    for (name, want) in [
        ("f0", f0),
        ("Q", qf),
        ("BW", f0 / qf),
        ("L", l),
        ("C", c),
        ("Rtotal", rt),
    ] {
        let m = &block_result(&out, name).m;
        assert!(rel(m.value, want) < 1e-9, "{name}: {} vs {want}", m.value);
        assert!(m.u > 0.0 && m.u.is_finite());
        assert!(m.mc.is_some());
    }
    // Half-power points of a series resonance (circuit theory): f0(√(1 + 1/4Q²) ∓ 1/2Q).
    // Read off by linear interpolation between readings: within 1 % here.
    let s = (1.0 + 1.0 / (4.0 * qf * qf)).sqrt();
    assert!(rel(block_result(&out, "f_low").m.value, f0 * (s - 0.5 / qf)) < 0.01);
    assert!(rel(block_result(&out, "f_high").m.value, f0 * (s + 0.5 / qf)) < 0.01);
    assert!(rel(block_result(&out, "f0_peak").m.value, f0) < 0.01);
    // Phase zero crossing, linear across one sweep step.
    assert!(rel(block_result(&out, "f0_phase").m.value, f0) < 0.01);
    // The prediction from the parts' nominals matches the truth (they are the truth here).
    assert!(out
        .flags
        .iter()
        .any(|f| f.message.starts_with("the parts predict f0")));
    let names: Vec<&str> = out.plot.series.iter().map(|s| s.0.as_str()).collect();
    assert!(names.contains(&"Y") && names.contains(&"residual"));
    assert_eq!(out.plot.curves[0].0, "fit");
    let marks: Vec<&str> = out.plot.markers.iter().map(|m| m.0.as_str()).collect();
    assert_eq!(marks, ["f0", "f_low", "f_high"]);
}

// A monotonic sweep (no resonance in range) is a flag, never NaN.
#[test]
fn rlc_monotonic_sweep_is_flagged() {
    let (r, rc, l, c, vs): (f64, f64, f64, f64, f64) = (150.0, 9.4, 33.5e-3, 120e-9, 1.8);
    let data: Vec<Vec<f64>> = (0..8)
        .map(|k| 100.0 * (1.3f64).powi(k))
        .map(|f| vec![f, vs, rlc_point(r, rc, l, c, vs, f).0])
        .collect();
    let mut env = Env {
        instruments: BTreeMap::new(),
        parts: BTreeMap::new(),
    };
    env.instruments.insert("dmm".into(), dmm());
    env.parts.insert(
        "R8".into(),
        part("R8", PartKind::Resistor, r, Unit::Ohm, None),
    );
    let mut b = block(
        Network::RLC,
        &[("f", Unit::Hz), ("Vs", Unit::V), ("VR", Unit::V)],
        &data,
    );
    b.parts = vec![named("R8")];
    let out = rlc::reduce(&env.ctx(), &b).expect("flags, not an error");
    assert!(
        out.flags
            .iter()
            .any(|f| f.message.contains("no resonance peak")),
        "{:?}",
        out.flags
    );
    assert!(out.results.iter().all(|r| r.m.value.is_finite()));
    assert!(!out.results.iter().any(|r| r.name == "f0"));
}

/// Parses tests/reference/rlc_curve_fit.out (written by rlc_curve_fit.py).
fn scipy_reference() -> (Vec<[f64; 3]>, [f64; 3], [[f64; 3]; 3], f64) {
    let text = include_str!("reference/rlc_curve_fit.out");
    let mut data = Vec::new();
    let mut popt = [0.0; 3];
    let mut pcov = Vec::new();
    let mut chi2 = 0.0;
    for line in text.lines() {
        let mut it = line.split_whitespace();
        let key = it.next().unwrap_or("#");
        let v: Vec<f64> = it.filter_map(|s| s.parse().ok()).collect();
        match key {
            "data" => data.push([v[0], v[1], v[2]]),
            "popt" => popt = [v[0], v[1], v[2]],
            "pcov" => pcov.push([v[0], v[1], v[2]]),
            "chi2" => chi2 = v[0],
            _ => {}
        }
    }
    (data, popt, [pcov[0], pcov[1], pcov[2]], chi2)
}

// scipy.optimize.curve_fit (absolute_sigma=True) on the same data: same optimum, and the same
// unscaled covariance once the log-parameters are mapped back (cov = D cov_log D, D = diag θ).
#[test]
fn rlc_fit_agrees_with_scipy_curve_fit() {
    let (data, popt, pcov, chi2) = scipy_reference();
    assert_eq!(data.len(), 27);
    let f: Vec<f64> = data.iter().map(|d| d[0]).collect();
    let y: Vec<f64> = data.iter().map(|d| d[1]).collect();
    let u: Vec<f64> = data.iter().map(|d| d[2]).collect();
    let fit = rlc::fit_resonance(&f, &y, &u).expect("fits");
    let p = [fit.f0(), fit.q(), fit.rt()];
    for k in 0..3 {
        assert!(
            rel(p[k], popt[k]) < 1e-7,
            "param {k}: {} vs {}",
            p[k],
            popt[k]
        );
    }
    for a in 0..3 {
        for b in 0..3 {
            let ours = p[a] * fit.cov_theta[a][b] * p[b];
            let scale = (pcov[a][a] * pcov[b][b]).sqrt();
            assert!(
                (ours - pcov[a][b]).abs() < 1e-4 * scale,
                "cov[{a}][{b}]: {ours} vs {}",
                pcov[a][b]
            );
        }
    }
    assert!(rel(fit.chi2, chi2) < 1e-6);
}

// Statistical coverage (GUM 6.2 meaning of a coverage interval): with noise drawn from the
// stated u, the 95 % intervals of f0, Q, Rt, L and C cover the truth in about 95 % of 400
// independent sweeps (binomial sd 1.1 %; accepted 91–98 %).
#[test]
fn rlc_fit_intervals_cover_the_truth() {
    let (r, rc, l, c): (f64, f64, f64, f64) = (150.0, 9.4, 33.5e-3, 120e-9);
    let rt = r + rc;
    let f0 = 1.0 / (2.0 * PI * (l * c).sqrt());
    let qf = (l / c).sqrt() / rt;
    let truth = rlc::derived(&[f0.ln(), qf.ln(), rt.ln()]);
    let f: Vec<f64> = (0..19)
        .map(|k| f0 * 0.5 * 4f64.powf(k as f64 / 18.0))
        .collect();
    let y0: Vec<f64> = f.iter().map(|&x| rlc::admittance(x, f0, qf, rt)).collect();
    let u: Vec<f64> = y0.iter().map(|v| 0.01 * v).collect();
    let mut rng = ChaCha8Rng::seed_from_u64(7_2026);
    let k95 = coverage_factor(0.95, None);
    let mut hits = [0usize; 6];
    let trials = 400;
    for _ in 0..trials {
        let y: Vec<f64> = y0
            .iter()
            .zip(&u)
            .map(|(v, s)| {
                v + s * {
                    let z: f64 = StandardNormal.sample(&mut rng);
                    z
                }
            })
            .collect();
        let fit = rlc::fit_resonance(&f, &y, &u).expect("fits");
        let inputs: Vec<Input> = (0..3)
            .map(|k| {
                Input::type_b(
                    format!("t{k}"),
                    fit.theta[k],
                    fit.cov_theta[k][k].sqrt(),
                    Dist::Normal,
                )
            })
            .collect();
        let mut corr = Vec::new();
        for a in 0..3 {
            for b in a + 1..3 {
                corr.push((
                    a,
                    b,
                    fit.cov_theta[a][b] / (fit.cov_theta[a][a] * fit.cov_theta[b][b]).sqrt(),
                ));
            }
        }
        let p = propagate(
            &Model {
                inputs: &inputs,
                corr: &corr,
            },
            &rlc::derived,
            0.95,
        )
        .unwrap();
        for k in 0..6 {
            if (p.results[k].value - truth[k]).abs() <= k95 * p.results[k].u {
                hits[k] += 1;
            }
        }
    }
    for (k, h) in hits.iter().enumerate() {
        let frac = *h as f64 / trials as f64;
        eprintln!("coverage of {}: {frac}", rlc::DERIVED[k].0);
        assert!(
            (0.91..=0.98).contains(&frac),
            "{}: coverage {frac}",
            rlc::DERIVED[k].0
        );
    }
}
