//! Network RCloss: a capacitor's losses by three voltmeters, across the source (Vs), a series
//! resistor R (VR) and the capacitor (VC).
//!
//! The capacitor is taken as its series model, ESR in series with C. Its voltage leads the
//! current by θ, θ = 90° − δ with δ the loss angle, so the law of cosines in the voltage
//! triangle (see [`super::triangle`]) gives cos θ = (Vs² − VR² − VC²)/(2·VR·VC) = sin δ.
//! Per frequency, with I = VR/R, |Zc| = VC/I and ω = 2πf (handbook series-equivalent
//! relations): ESR = |Zc|·cos θ, XC = |Zc|·sin θ, C = 1/(ω·XC), D = tan δ = ESR/XC and
//! Q = 1/D. Block C, ESR and D are equal-weight means of the rows from the same
//! propagation. D and ESR are judged against the part's `max_D` and `max_esr`.
//!
//! A good capacitor has a small δ: the triangle is then nearly right-angled, cos θ is a
//! small difference of large squares, and three meters resolve D only when it is above
//! their relative uncertainty; the row says so.

use super::inputs::{BlockInputs, Spec};
use super::triangle::{self, cos_sin, Method, Needs};
use super::{BlockResult, Context, Descriptor};
use crate::diag::Diagnostic;
use crate::notebook::{PartKind, ReadingsBlock};
use crate::quantity::Unit;
use std::f64::consts::PI;

pub const METHOD: Method = Method {
    spec: Spec {
        network: "RCloss",
        required: &["f", "Vs", "VR", "VC"],
        optional: &[],
        resistor: true,
    },
    positive: &[
        ("Vs", triangle::AMPLITUDE),
        (
            "VR",
            "with no voltage across R no current flows and C cannot be found",
        ),
        (
            "VC",
            "a zero voltage across the capacitor would mean an infinite C",
        ),
    ],
    legs: ["Vs", "VR", "VC"],
    unit: "V",
    part: "capacitor",
    law: "the phasors VR and VC must add up to Vs",
    outputs: &[
        ("I", Unit::A, Needs::Always),
        ("XC", Unit::Ohm, Needs::Closed),
        ("C", Unit::F, Needs::Closed),
        ("ESR", Unit::Ohm, Needs::Closed),
        ("D", Unit::One, Needs::Closed),
        ("Q", Unit::One, Needs::Lossy),
    ],
    resolve: &["ESR", "D"],
    block: &["C", "ESR", "D"],
    agree: &["C"],
    row: row_value,
};

pub const NETWORK: Descriptor = Descriptor {
    spec: METHOD.spec,
    positive: METHOD.positive,
    judged: &[("C", PartKind::Capacitor)],
    plot: triangle::per_frequency(&["C", "XC"], ("C", PartKind::Capacitor)),
    reduce,
};

fn reduce(ctx: &Context, block: &ReadingsBlock) -> Result<BlockResult, Vec<Diagnostic>> {
    triangle::reduce(&METHOD, ctx, block)
}

/// The three-voltmeter results of a series R + capacitor at one frequency:
/// [I, XC, C, ESR, D, Q], the order of `METHOD.outputs` (NaN where the triangle does not
/// close).
pub fn three_voltmeter(vs: f64, vr: f64, vc: f64, r: f64, f: f64) -> [f64; 6] {
    let c = super::rl::cos_theta(vs, vr, vc);
    series_values(vr / r, vc, c, (1.0 - c * c).sqrt(), f)
}

fn series_values(i: f64, vc: f64, c: f64, s: f64, f: f64) -> [f64; 6] {
    let z = vc / i;
    let (esr, xc) = (z * c, z * s);
    [i, xc, 1.0 / (2.0 * PI * f * xc), esr, c / s, s / c]
}

fn row_value(bi: &BlockInputs, x: &[f64], g: usize, name: &str) -> f64 {
    let (c, s) = cos_sin(bi, &METHOD, g, x);
    let i = bi.voltage("VR", g, x) / bi.r(x);
    let y = series_values(i, bi.voltage("VC", g, x), c, s, bi.f(g, x));
    triangle::pick(&METHOD, &y, name)
}

#[cfg(test)]
mod tests {
    use super::super::inputs::testutil::*;
    use super::*;
    use crate::notebook::{Accuracy, Tolerance};
    use crate::quantity::Quantity;
    use num_complex::Complex64;

    /// Readings of R in series with (ESR + 1/(jωC)), by complex arithmetic.
    fn ideal(r: f64, c: f64, esr: f64, vs: f64, f: f64) -> Vec<f64> {
        let zc = Complex64::new(esr, -1.0 / (2.0 * PI * f * c));
        let i = Complex64::new(vs, 0.0) / (zc + r);
        vec![f, vs, (i * r).norm(), (i * zc).norm()]
    }

    const COLS: [(&str, Unit); 4] = [
        ("f", Unit::Hz),
        ("Vs", Unit::V),
        ("VR", Unit::V),
        ("VC", Unit::V),
    ];

    fn env(r: f64) -> Env {
        let mut env = Env::new();
        env.parts.insert(
            "R2".into(),
            resistor("R2", r, Some(Tolerance::Relative(0.001))),
        );
        env.instruments.insert(
            "dmm".into(),
            instrument(
                "dmm",
                Some(Accuracy::Relative {
                    fraction: 0.002,
                    counts: 2.0,
                }),
                Some(Quantity {
                    value: 1e-5,
                    unit: Unit::V,
                }),
            ),
        );
        env
    }

    // The textbook series-equivalent relations (handbook; e.g. a capacitor with D = 0.1 has
    // Q = 10 and δ = atan 0.1 = 5.71°, from memory): a 3-4-5 style check by hand. With
    // VR = 3 V, VC = 5 V and θ = 60° (δ = 30°), Vs² = 9 + 25 + 15 = 49, Vs = 7 V; with
    // R = 30 Ω, I = 0.1 A, |Zc| = 50 Ω: ESR = 25 Ω, XC = 43.30 Ω, D = tan 30° = 0.5774.
    #[test]
    fn hand_triangle() {
        let [i, xc, c, esr, d, q] = three_voltmeter(7.0, 3.0, 5.0, 30.0, 1000.0);
        assert!((i - 0.1).abs() < 1e-15 && (esr - 25.0).abs() < 1e-12);
        assert!((xc - 25.0 * 3f64.sqrt()).abs() < 1e-12);
        assert!((d - 1.0 / 3f64.sqrt()).abs() < 1e-12 && (q - 3f64.sqrt()).abs() < 1e-12);
        assert!((c - 1.0 / (2000.0 * PI * xc)).abs() < 1e-20);
    }

    #[test]
    fn exact_readings_reduce_back() {
        let (r, c, esr) = (1500.0, 150e-9, 42.0);
        let freqs = [200.0, 700.0, 2400.0];
        let data: Vec<Vec<f64>> = freqs.iter().map(|&f| ideal(r, c, esr, 2.5, f)).collect();
        let env = env(r);
        let mut b = block(network("RCloss"), &COLS, &data);
        b.parts = vec![named("R2")];
        b.meter = Some(named("dmm"));
        let out = reduce(&env.ctx(), &b).unwrap();
        for &f in &freqs {
            let get = |n: &str| {
                let r = out.rows.iter().find(|x| x.name == n && x.f == Some(f));
                r.unwrap_or_else(|| panic!("{n} at {f}: {:?}", out.flags))
                    .m
                    .clone()
            };
            let xc = 1.0 / (2.0 * PI * f * c);
            assert!(((get("C").value - c) / c).abs() < 1e-9);
            assert!(((get("ESR").value - esr) / esr).abs() < 1e-9);
            assert!(((get("D").value - esr / xc) / (esr / xc)).abs() < 1e-9);
            assert!(((get("Q").value - xc / esr) / (xc / esr)).abs() < 1e-9);
            assert!(get("C").u > 0.0 && get("ESR").u > 0.0);
        }
        let bc = out.results.iter().find(|x| x.name == "C").unwrap();
        assert!(((bc.m.value - c) / c).abs() < 1e-9);
        let be = out.results.iter().find(|x| x.name == "ESR").unwrap();
        assert!(((be.m.value - esr) / esr).abs() < 1e-9);
        assert!(out.results.iter().any(|x| x.name == "D"));
        assert!(!out.flags.iter().any(|f| f.warn), "{:?}", out.flags);
        assert!(out
            .plot
            .series
            .iter()
            .any(|(n, p)| n == "C" && p.len() == 3));
    }

    // A film capacitor (D of a few 1e-4, common practice) on 0.2 % meters: the triangle is
    // almost right-angled and the loss is not resolved; C still is.
    #[test]
    fn small_loss_angle_is_flagged() {
        let (r, c) = (1000.0, 100e-9);
        let f = 1600.0;
        let esr = 3e-4 / (2.0 * PI * f * c);
        let env = env(r);
        let mut b = block(network("RCloss"), &COLS, &[ideal(r, c, esr, 2.0, f)]);
        b.parts = vec![named("R2")];
        b.meter = Some(named("dmm"));
        let out = reduce(&env.ctx(), &b).unwrap();
        assert!(out
            .flags
            .iter()
            .any(|f| !f.warn && f.message.contains("loss is not resolved")));
        assert!(out
            .flags
            .iter()
            .any(|f| f.message.contains("above 20 % by three meters: ESR")));
        let cm = out.rows.iter().find(|x| x.name == "C").unwrap();
        assert!(((cm.m.value - c) / c).abs() < 1e-9 && cm.m.u / c < 0.01);
    }

    #[test]
    fn open_triangle_is_a_warning_not_nan() {
        let env = env(1000.0);
        // Vs above VR + VC; then VC far above Vs + VR.
        let rows = [vec![1000.0, 3.0, 1.0, 1.0], vec![2000.0, 1.0, 0.2, 2.0]];
        let mut b = block(network("RCloss"), &COLS, &rows);
        b.parts = vec![named("R2")];
        let out = reduce(&env.ctx(), &b).unwrap();
        let open: Vec<_> = out
            .flags
            .iter()
            .filter(|f| f.warn && f.message.contains("close no triangle"))
            .collect();
        assert_eq!(open.len(), 2, "{:?}", out.flags);
        assert!(open[0].message.contains("is above VR + VC"));
        assert!(out
            .rows
            .iter()
            .all(|r| r.name == "I" && r.m.value.is_finite()));
        assert!(out.results.is_empty());
    }
}
