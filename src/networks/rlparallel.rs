//! Network RLparallel: a resistor R in parallel with a coil on one source, read with three
//! ammeters, the total current I and the branch currents IR and IL, and a voltmeter across the
//! pair (V).
//!
//! The dual of the coil's three-voltmeter method (network RL): the branch currents add as
//! phasors to I (Kirchhoff's current law), so cos θ = (I² − IR² − IL²)/(2·IR·IL), θ the lag
//! of IL on IR, which is the coil's impedance angle (see [`super::triangle`]). The coil is
//! taken as its series model, loss resistance Rac in series with L. Per frequency (handbook),
//! with ω = 2πf: R = V/IR, |ZL| = V/IL, Rac = |ZL|·cos θ, XL = |ZL|·sin θ, L = XL/ω,
//! Q = XL/Rac. Block R, L and Rac are equal-weight means of the rows.

use super::inputs::{BlockInputs, Spec};
use super::triangle::{self, cos_sin, Method, Needs};
use super::{BlockResult, Context, Descriptor};
use crate::diag::Diagnostic;
use crate::notebook::{PartKind, ReadingsBlock};
use crate::quantity::Unit;
use std::f64::consts::PI;

pub const METHOD: Method = Method {
    spec: Spec {
        network: "RLparallel",
        required: &["f", "V", "I", "IR", "IL"],
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
        ("IL", "a zero coil current would mean an open coil"),
    ],
    legs: ["I", "IR", "IL"],
    unit: "A",
    part: "coil",
    law: "Kirchhoff's current law: the phasors IR and IL must add up to I",
    outputs: &[
        ("R", Unit::Ohm, Needs::Always),
        ("Rac", Unit::Ohm, Needs::Closed),
        ("XL", Unit::Ohm, Needs::Closed),
        ("L", Unit::H, Needs::Closed),
        ("Q", Unit::One, Needs::Lossy),
    ],
    resolve: &["Rac", "L"],
    block: &["R", "L", "Rac"],
    agree: &["L"],
    row: row_value,
};

pub const NETWORK: Descriptor = Descriptor {
    spec: METHOD.spec,
    positive: METHOD.positive,
    judged: &[("L", PartKind::Inductor), ("R", PartKind::Resistor)],
    plot: triangle::per_frequency(&["L", "XL"], ("L", PartKind::Inductor)),
    reduce,
};

fn reduce(ctx: &Context, block: &ReadingsBlock) -> Result<BlockResult, Vec<Diagnostic>> {
    triangle::reduce(&METHOD, ctx, block)
}

/// The three-ammeter results of R ‖ coil at one frequency: [R, Rac, XL, L, Q], the order of
/// `METHOD.outputs`.
pub fn three_ammeter(v: f64, i: f64, ir: f64, il: f64, f: f64) -> [f64; 5] {
    let c = super::rl::cos_theta(i, ir, il);
    coil_values(v, ir, il, (c, (1.0 - c * c).sqrt()), f)
}

fn coil_values(v: f64, ir: f64, il: f64, (c, s): (f64, f64), f: f64) -> [f64; 5] {
    let z = v / il;
    let (rac, xl) = (z * c, z * s);
    [v / ir, rac, xl, xl / (2.0 * PI * f), xl / rac]
}

fn row_value(bi: &BlockInputs, x: &[f64], g: usize, name: &str) -> f64 {
    let [v, ir, il] = ["V", "IR", "IL"].map(|s| bi.voltage(s, g, x));
    let y = coil_values(v, ir, il, cos_sin(bi, &METHOD, g, x), bi.f(g, x));
    triangle::pick(&METHOD, &y, name)
}

#[cfg(test)]
mod tests {
    use super::super::inputs::testutil::*;
    use super::*;
    use crate::notebook::Accuracy;
    use num_complex::Complex64;

    /// Readings of R ‖ (Rac + jωL) on V, by complex arithmetic.
    fn ideal(r: f64, l: f64, rac: f64, v: f64, f: f64) -> Vec<f64> {
        let vv = Complex64::new(v, 0.0);
        let ir = vv / r;
        let il = vv / Complex64::new(rac, 2.0 * PI * f * l);
        vec![f, v, (ir + il).norm(), ir.norm(), il.norm()]
    }

    const COLS: [(&str, Unit); 5] = [
        ("f", Unit::Hz),
        ("V", Unit::V),
        ("I", Unit::A),
        ("IR", Unit::A),
        ("IL", Unit::A),
    ];

    // Hand case (handbook law of cosines): IR = 3 A and IL = 5 A at θ = 60° give
    // I² = 9 + 25 + 15 = 49, I = 7 A. On V = 10 V: R = 10/3 Ω, |ZL| = 2 Ω, Rac = 1 Ω,
    // XL = √3 Ω, Q = √3.
    #[test]
    fn hand_triangle() {
        let [r, rac, xl, l, q] = three_ammeter(10.0, 7.0, 3.0, 5.0, 100.0);
        assert!((r - 10.0 / 3.0).abs() < 1e-12 && (rac - 1.0).abs() < 1e-12);
        assert!((xl - 3f64.sqrt()).abs() < 1e-12 && (q - 3f64.sqrt()).abs() < 1e-12);
        assert!((l - xl / (200.0 * PI)).abs() < 1e-15);
    }

    #[test]
    fn exact_readings_reduce_back() {
        let (r, l, rac) = (270.0, 0.047, 18.0);
        let freqs = [250.0, 900.0, 2000.0];
        let data: Vec<Vec<f64>> = freqs.iter().map(|&f| ideal(r, l, rac, 2.2, f)).collect();
        let mut env = Env::new();
        env.instruments.insert(
            "dmm".into(),
            instrument(
                "dmm",
                Some(Accuracy::Relative {
                    fraction: 0.002,
                    counts: 0.0,
                }),
                None,
            ),
        );
        let mut b = block(network("RLparallel"), &COLS, &data);
        b.meter = Some(named("dmm"));
        let out = reduce(&env.ctx(), &b).unwrap();
        for &f in &freqs {
            let get = |n: &str| {
                let x = out.rows.iter().find(|x| x.name == n && x.f == Some(f));
                x.unwrap_or_else(|| panic!("{n} at {f}: {:?}", out.flags))
                    .m
                    .value
            };
            assert!(((get("L") - l) / l).abs() < 1e-9);
            assert!(((get("Rac") - rac) / rac).abs() < 1e-9);
            assert!(((get("R") - r) / r).abs() < 1e-9);
            let q = 2.0 * PI * f * l / rac;
            assert!(((get("Q") - q) / q).abs() < 1e-9);
        }
        let bl = out.results.iter().find(|x| x.name == "L").unwrap();
        assert!(((bl.m.value - l) / l).abs() < 1e-9 && bl.m.u > 0.0);
        assert!(!out.flags.iter().any(|f| f.warn), "{:?}", out.flags);
    }

    // I below |IR − IL| and a flat triangle (I = IR + IL: a coil with no reactance).
    #[test]
    fn impossible_currents_are_flagged() {
        let env = Env::new();
        let rows = [
            vec![100.0, 1.0, 0.1, 0.5, 0.8],
            vec![200.0, 1.0, 0.9, 0.5, 0.4],
        ];
        let b = block(network("RLparallel"), &COLS, &rows);
        let out = reduce(&env.ctx(), &b).unwrap();
        let msgs: Vec<&str> = out
            .flags
            .iter()
            .filter(|f| f.warn)
            .map(|f| f.message.as_str())
            .collect();
        assert!(
            msgs.iter().any(|m| m.contains("is below |IR − IL|")),
            "{msgs:?}"
        );
        assert!(msgs.iter().any(|m| m.contains("I = IR + IL")), "{msgs:?}");
        assert!(out.rows.iter().all(|r| r.name == "R"));
    }
}
