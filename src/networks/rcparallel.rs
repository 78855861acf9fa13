//! Network RCparallel: a resistor R in parallel with a capacitor on one source, read with three
//! ammeters, the total current I and the branch currents IR and IC, and a voltmeter across the
//! pair (V).
//!
//! The three-ammeter method is the dual of the three-voltmeter one: the branch currents add
//! as phasors to I (Kirchhoff's current law), so cos θ = (I² − IR² − IC²)/(2·IR·IC) with θ the
//! angle of IC on IR (see [`super::triangle`]); an ideal capacitor has θ = 90°. The capacitor
//! is taken as its parallel model, a conductance G beside C, θ = 90° − δ. Per frequency
//! (handbook admittance relations), with ω = 2πf: R = V/IR, the capacitor's admittance
//! |Y| = IC/V, B = |Y|·sin θ = ωC, G = |Y|·cos θ, XC = 1/B, C = B/ω and D = tan δ = G/B,
//! Q = 1/D. Block R, C and D are equal-weight means of the rows.

use super::inputs::{BlockInputs, Spec};
use super::triangle::{self, cos_sin, Method, Needs};
use super::{BlockResult, Context, Descriptor};
use crate::diag::Diagnostic;
use crate::notebook::{PartKind, ReadingsBlock};
use crate::quantity::Unit;
use std::f64::consts::PI;

pub const METHOD: Method = Method {
    spec: Spec {
        network: "RCparallel",
        required: &["f", "V", "I", "IR", "IC"],
        optional: &[],
        resistor: false,
    },
    positive: &[
        (
            "V",
            "with no voltage across the pair no branch current flows",
        ),
        ("I", triangle::AMPLITUDE),
        ("IR", "a zero resistor current would mean an infinite R"),
        ("IC", "a zero capacitor current would mean no capacitance"),
    ],
    legs: ["I", "IR", "IC"],
    unit: "A",
    part: "capacitor",
    law: "Kirchhoff's current law: the phasors IR and IC must add up to I",
    outputs: &[
        ("R", Unit::Ohm, Needs::Always),
        ("XC", Unit::Ohm, Needs::Closed),
        ("C", Unit::F, Needs::Closed),
        ("D", Unit::One, Needs::Closed),
        ("Q", Unit::One, Needs::Lossy),
    ],
    resolve: &["D"],
    block: &["R", "C", "D"],
    agree: &["C"],
    row: row_value,
};

pub const NETWORK: Descriptor = Descriptor {
    spec: METHOD.spec,
    positive: METHOD.positive,
    judged: &[("C", PartKind::Capacitor), ("R", PartKind::Resistor)],
    plot: triangle::per_frequency(&["C", "XC"], ("C", PartKind::Capacitor)),
    reduce,
};

fn reduce(ctx: &Context, block: &ReadingsBlock) -> Result<BlockResult, Vec<Diagnostic>> {
    triangle::reduce(&METHOD, ctx, block)
}

/// The three-ammeter results of R ‖ capacitor at one frequency: [R, XC, C, D, Q], the order
/// of `METHOD.outputs`.
pub fn three_ammeter(v: f64, i: f64, ir: f64, ic: f64, f: f64) -> [f64; 5] {
    let c = super::rl::cos_theta(i, ir, ic);
    parallel_values(v, ir, ic, (c, (1.0 - c * c).sqrt()), f)
}

fn parallel_values(v: f64, ir: f64, ic: f64, (c, s): (f64, f64), f: f64) -> [f64; 5] {
    let y = ic / v;
    let b = y * s;
    [v / ir, 1.0 / b, b / (2.0 * PI * f), c / s, s / c]
}

fn row_value(bi: &BlockInputs, x: &[f64], g: usize, name: &str) -> f64 {
    let [v, ir, ic] = ["V", "IR", "IC"].map(|s| bi.voltage(s, g, x));
    let y = parallel_values(v, ir, ic, cos_sin(bi, &METHOD, g, x), bi.f(g, x));
    triangle::pick(&METHOD, &y, name)
}

#[cfg(test)]
mod tests {
    use super::super::inputs::testutil::*;
    use super::*;
    use crate::notebook::Accuracy;
    use crate::quantity::Quantity;
    use num_complex::Complex64;

    /// Readings of R ‖ (G + jωC) on V, by complex arithmetic.
    fn ideal(r: f64, c: f64, g: f64, v: f64, f: f64) -> Vec<f64> {
        let vv = Complex64::new(v, 0.0);
        let ir = vv / r;
        let ic = vv * Complex64::new(g, 2.0 * PI * f * c);
        vec![f, v, (ir + ic).norm(), ir.norm(), ic.norm()]
    }

    const COLS: [(&str, Unit); 5] = [
        ("f", Unit::Hz),
        ("V", Unit::V),
        ("I", Unit::A),
        ("IR", Unit::A),
        ("IC", Unit::A),
    ];

    fn env() -> Env {
        let mut env = Env::new();
        env.instruments.insert(
            "dmm".into(),
            instrument(
                "dmm",
                Some(Accuracy::Relative {
                    fraction: 0.003,
                    counts: 0.0,
                }),
                None::<Quantity>,
            ),
        );
        env
    }

    // The three-ammeter hand case (handbook law of cosines): IR = 3 A, IC = 4 A at right
    // angles give I = 5 A; an ideal capacitor, D = 0. With V = 12 V at 50 Hz: R = 4 Ω,
    // XC = 3 Ω, C = 1/(2π·50·3) = 1.0610 mF.
    #[test]
    fn hand_triangle() {
        let [r, xc, c, d, _] = three_ammeter(12.0, 5.0, 3.0, 4.0, 50.0);
        assert!((r - 4.0).abs() < 1e-12 && (xc - 3.0).abs() < 1e-12 && d.abs() < 1e-15);
        assert!((c - 1.0 / (300.0 * PI)).abs() < 1e-15);
    }

    #[test]
    fn exact_readings_reduce_back() {
        let (r, c, g) = (820.0, 220e-9, 2.0e-5);
        let freqs = [300.0, 1000.0, 3300.0];
        let data: Vec<Vec<f64>> = freqs.iter().map(|&f| ideal(r, c, g, 3.3, f)).collect();
        let env = env();
        let mut b = block(network("RCparallel"), &COLS, &data);
        b.meter = Some(named("dmm"));
        let out = reduce(&env.ctx(), &b).unwrap();
        for &f in &freqs {
            let get = |n: &str| {
                let x = out.rows.iter().find(|x| x.name == n && x.f == Some(f));
                x.unwrap_or_else(|| panic!("{n} at {f}: {:?}", out.flags))
                    .m
                    .value
            };
            let d = g / (2.0 * PI * f * c);
            assert!(((get("C") - c) / c).abs() < 1e-9);
            assert!(((get("R") - r) / r).abs() < 1e-9);
            assert!(((get("D") - d) / d).abs() < 1e-9);
        }
        for name in ["R", "C"] {
            let m = out.results.iter().find(|x| x.name == name).unwrap();
            assert!(m.m.u > 0.0 && m.m.value.is_finite());
        }
        let bc = out.results.iter().find(|x| x.name == "C").unwrap();
        assert!(((bc.m.value - c) / c).abs() < 1e-9);
        assert!(!out.flags.iter().any(|f| f.warn), "{:?}", out.flags);
    }

    // Kirchhoff's current law: the total cannot exceed the sum of the branch currents.
    #[test]
    fn currents_that_break_kirchhoff_are_flagged() {
        let env = env();
        let b = block(
            network("RCparallel"),
            &COLS,
            &[vec![1000.0, 1.0, 0.9, 0.3, 0.4]],
        );
        let out = reduce(&env.ctx(), &b).unwrap();
        let f = out
            .flags
            .iter()
            .find(|f| f.message.contains("Kirchhoff's current law"))
            .expect("a KCL flag");
        assert!(f.warn && f.message.contains("I = 0.9 A is above IR + IC = 0.7 A"));
        assert!(out.rows.iter().all(|r| r.name == "R"));
    }
}
