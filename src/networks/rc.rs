//! Network RC: a series resistor R then the capacitor, read with a voltmeter across each.
//!
//! Per frequency (phasor relations of a series circuit, handbook):
//! I = VR/R, XC = VC/I, C = 1/(ω XC) = I/(ω VC), predicted phase of the current on the source
//! φ = atan(XC/R) = atan(VC/VR) (current leads: positive), measured phase 2π·shift/period,
//! Kirchhoff residual Vs − √(VR² + VC²). Block C: the mean of the per-frequency C, from the
//! same propagation so shared gains and R stay correlated.

use super::inputs::{BlockInputs, Spec};
use super::outputs::{Out, Outputs};
use super::{
    check_positive, AtBlock, BlockResult, Context, Descriptor, Flag, NamedResult, PlotData,
    PlotKind,
};
use crate::diag::Diagnostic;
use crate::notebook::{PartKind, ReadingsBlock};
use crate::print::{hz, plain};
use crate::quantity::Unit;
use crate::uncertainty::{propagate_sparse, Measured};
use std::f64::consts::PI;

pub const NETWORK: Descriptor = Descriptor {
    spec: Spec {
        network: "RC",
        required: &["f", "VR", "VC"],
        optional: &["Vs", "shift", "period"],
        resistor: true,
    },
    positive: &[
        (
            "VR",
            "with no voltage across R no current flows and C cannot be found",
        ),
        (
            "VC",
            "a zero voltage across the capacitor would mean an infinite C",
        ),
        ("Vs", "an amplitude must be positive"),
        ("period", "a trace period must be positive"),
    ],
    judged: &[("C", PartKind::Capacitor)],
    plot: PlotKind::PerFrequency {
        main: &["C", "XC"],
        beside: &[],
        band: ("C", PartKind::Capacitor),
    },
    reduce,
};

pub fn reduce(ctx: &Context, block: &ReadingsBlock) -> Result<BlockResult, Vec<Diagnostic>> {
    let bi = BlockInputs::build(ctx, block, &NETWORK.spec)?;
    let diags = check_positive(block, NETWORK.positive);
    if !diags.is_empty() {
        return Err(diags);
    }
    let mut flags: Vec<Flag> = bi.flags.clone();
    reading_flags(block, &bi, &mut flags);
    let has_vs = bi.has("Vs");
    let has_phase = bi.has("shift") && bi.has("period");

    // Per group I, XC, C, phase (and the measured phase, the Kirchhoff residual when read);
    // the block C (mean over groups) is a linear combination of the groups' C.
    let ng = bi.groups.len();
    let mut outs = Outputs::default();
    for g in 0..ng {
        outs.row(g, "I", Unit::A);
        outs.row(g, "XC", Unit::Ohm);
        outs.row(g, "C", Unit::F);
        outs.row(g, "phase", Unit::Rad);
        if has_phase {
            outs.row(g, "phase_measured", Unit::Rad);
        }
        if has_vs {
            outs.row(g, "residual", Unit::V);
        }
    }
    let model = |x: &[f64]| outs.eval(|g, n| row_value(&bi, x, g, n), |_, _| f64::NAN);
    // Each group's outputs read that group's inputs and the shared ones only.
    let pattern = outs.pattern(&bi);
    let p = propagate_sparse(&bi.model(), &model, Some(&pattern), ctx.coverage).at_block(block)?;
    // Block C = mean of the groups' C.
    let w: Vec<(usize, f64)> = (0..ng)
        .filter_map(|g| outs.index(Out::Row(g, "C")))
        .map(|k| (k, 1.0 / ng as f64))
        .collect();
    let block_c = p.linear(&bi.model(), &w, ctx.coverage).at_block(block)?;
    // Do the frequencies agree on C? The same χ² test as the RL block means.
    let idx: Vec<usize> = w.iter().map(|(i, _)| *i).collect();
    let xs: Vec<f64> = idx.iter().map(|&i| p.values[i]).collect();
    let cov = |a: usize, b: usize| p.cov(idx[a], idx[b]);
    flags.extend(super::rl::consistency_flag("C", &xs, &cov, block.span));
    let rows = outs.rows(&p.results, |g| bi.groups.get(g).and_then(|gr| gr.f));
    let plot = per_frequency(&bi, &outs, &p.results, has_phase, &mut flags);
    let mut results = Vec::new();
    results.push(NamedResult {
        name: "C".into(),
        f: None,
        unit: Unit::F,
        m: block_c,
    });
    // The block C again without the rows that carry a warning: printed beside C, not judged.
    let flagged = flagged_groups(block, &bi, &flags);
    if flagged.iter().any(|&x| x) && flagged.iter().any(|&x| !x) {
        let clean: Vec<usize> = (0..ng).filter(|&g| !flagged[g]).collect();
        let w: Vec<(usize, f64)> = clean
            .iter()
            .filter_map(|&g| outs.index(Out::Row(g, "C")))
            .map(|k| (k, 1.0 / clean.len() as f64))
            .collect();
        let m = p.linear(&bi.model(), &w, ctx.coverage).at_block(block)?;
        let at: Vec<String> = (0..ng)
            .filter(|&g| flagged[g])
            .filter_map(|g| bi.groups[g].f.map(hz))
            .collect();
        flags.push(Flag {
            warn: false,
            span: Some(block.span),
            message: format!(
                "without the rows with warnings ({}), C_clean = {} from {} of {} frequencies; it is printed beside C, and only C is judged",
                at.join(", "),
                crate::print::value_u_k(m.value, m.expanded, m.k, Unit::F),
                clean.len(),
                ng
            ),
        });
        results.push(NamedResult {
            name: "C_clean".into(),
            f: None,
            unit: Unit::F,
            m,
        });
    }
    Ok(BlockResult {
        id: block.id.clone(),
        network: block.network,
        rows,
        results,
        correlations: Vec::new(),
        flags,
        plot,
    })
}

/// Per group, whether a warning flag points into one of its rows.
fn flagged_groups(block: &ReadingsBlock, bi: &BlockInputs, flags: &[Flag]) -> Vec<bool> {
    let inside = |r: usize, sp: crate::diag::Span| {
        block
            .rows
            .get(r)
            .is_some_and(|row| sp.start >= row.span.start && sp.end <= row.span.end)
    };
    bi.groups
        .iter()
        .map(|g| {
            flags
                .iter()
                .filter(|f| f.warn)
                .filter_map(|f| f.span)
                .any(|sp| g.rows.iter().any(|&r| inside(r, sp)))
        })
        .collect()
}

/// Flags on the readings themselves: shift without period, VR or VC above Vs.
fn reading_flags(block: &ReadingsBlock, bi: &BlockInputs, flags: &mut Vec<Flag>) {
    if bi.has("shift") != bi.has("period") {
        flags.push(Flag {
            warn: false,
            span: Some(block.span),
            message: "shift and period are read together: the measured phase is not computed"
                .into(),
        });
    }
    // Each voltage of a series circuit is at most the source's (|VR|, |VC| ≤ |Vs|).
    if let (Some(vs), Some(vr), Some(vc)) = (block.col("Vs"), block.col("VR"), block.col("VC")) {
        for row in &block.rows {
            let (Some(s), Some(r), Some(c)) =
                (row.cells.get(vs), row.cells.get(vr), row.cells.get(vc))
            else {
                continue;
            };
            for (cell, name) in [(r, "VR"), (c, "VC")] {
                if cell.value > s.value {
                    flags.push(Flag {
                        warn: true,
                        span: Some(cell.span),
                        message: format!(
                            "{name} = {} V exceeds Vs = {} V, impossible in a series RC: check the readings",
                            plain(cell.value, 6),
                            plain(s.value, 6)
                        ),
                    });
                }
            }
        }
    }
}

fn g_of(o: Out) -> usize {
    match o {
        Out::Row(g, _) => g,
        Out::Block(_) => usize::MAX,
    }
}

/// One per-frequency output of group `g`, by name.
fn row_value(bi: &BlockInputs, x: &[f64], g: usize, name: &str) -> f64 {
    let vr = bi.voltage("VR", g, x);
    let vc = bi.voltage("VC", g, x);
    let i = vr / bi.r(x);
    match name {
        "I" => i,
        "XC" => vc / i,
        "C" => i / (2.0 * PI * bi.f(g, x) * vc),
        "phase" => (vc / vr).atan(),
        "phase_measured" => 2.0 * PI * bi.value("shift", g, x) / bi.value("period", g, x),
        "residual" => bi.voltage("Vs", g, x) - vr.hypot(vc),
        _ => f64::NAN,
    }
}

/// The plot series of the per-frequency results, and the flags of the measured phase and the
/// Kirchhoff check.
fn per_frequency(
    bi: &BlockInputs,
    outs: &Outputs,
    results: &[Measured],
    has_phase: bool,
    flags: &mut Vec<Flag>,
) -> PlotData {
    let x0 = bi.estimates();
    let mut plot = PlotData::default();
    let mut s_xc = Vec::new();
    let mut s_c = Vec::new();
    let mut s_ph = Vec::new();
    let mut s_pm = Vec::new();
    for (k, o, _) in outs.iter() {
        let (Out::Row(g, name), Some(m), Some(grp)) = (o, results.get(k), bi.groups.get(g_of(o)))
        else {
            continue;
        };
        let f = grp.f.unwrap_or(f64::NAN);
        let pt = (f, m.value, m.u);
        match name {
            "XC" => s_xc.push(pt),
            "C" => s_c.push(pt),
            "phase" => s_ph.push(pt),
            "phase_measured" => {
                s_pm.push(pt);
                if m.value < -m.expanded || m.value > PI / 2.0 + m.expanded {
                    flags.push(Flag {
                            warn: true,
                            span: Some(grp.span),
                            message: format!(
                                "measured phase at {} is {}, outside 0° to 90° for a series RC: check the trace polarity",
                                hz(f),
                                crate::print::quantity(m.value, crate::quantity::Unit::Rad)
                            ),
                        });
                }
            }
            "residual" => {
                // Rounding of the square root alone is not a failed check.
                let vs = bi.voltage("Vs", g, &x0).abs();
                if m.value.abs() > m.expanded + 1e-9 * vs {
                    flags.push(Flag {
                            warn: true,
                            span: Some(grp.span),
                            message: format!(
                                "Kirchhoff check at {}: Vs − √(VR² + VC²) = {} exceeds its expanded uncertainty {}",
                                hz(f),
                                crate::print::quantity_sig(m.value, crate::quantity::Unit::V, 3),
                                crate::print::quantity_sig(m.expanded, crate::quantity::Unit::V, 2)
                            ),
                        });
                }
            }
            _ => {}
        }
    }
    plot.series.push(("XC".into(), s_xc));
    plot.series.push(("C".into(), s_c));
    plot.series.push(("phase".into(), s_ph));
    if has_phase {
        plot.series.push(("phase_measured".into(), s_pm));
    }
    plot
}

#[cfg(test)]
mod tests {
    use super::super::inputs::testutil::*;
    use super::*;
    use crate::notebook::Network;
    use crate::notebook::{Accuracy, Tolerance};
    use crate::quantity::Quantity;
    use num_complex::Complex64;

    fn find<'a>(b: &'a BlockResult, name: &str, f: f64) -> &'a NamedResult {
        b.rows
            .iter()
            .find(|r| r.name == name && r.f == Some(f))
            .expect("result present")
    }

    /// Readings of an ideal series RC from complex arithmetic: I = Vs/(R + 1/(jωC)).
    fn ideal(r: f64, c: f64, vs: f64, f: f64) -> (f64, f64, f64) {
        let w = 2.0 * PI * f;
        let z = Complex64::new(r, -1.0 / (w * c));
        let i = Complex64::new(vs, 0.0) / z;
        let vr = (i * r).norm();
        let vc = (i * Complex64::new(0.0, -1.0 / (w * c))).norm();
        (vr, vc, i.arg())
    }

    // Phasor arithmetic (num-complex) as the reference: C and phase come back to 1e-9.
    #[test]
    fn exact_readings_reduce_back() {
        let (r, c, vs) = (2200.0, 68e-9, 1.6);
        let freqs = [120.0, 470.0, 1300.0, 5600.0];
        let mut data = Vec::new();
        for &f in &freqs {
            let (vr, vc, ph) = ideal(r, c, vs, f);
            let period = 8.0;
            data.push(vec![f, vs, vr, vc, ph / (2.0 * PI) * period, period]);
        }
        let mut env = Env::new();
        env.parts.insert(
            "R7".into(),
            resistor("R7", r, Some(Tolerance::Relative(0.001))),
        );
        let mut b = block(Network::RC, &FULL_RC6, &data);
        b.parts = vec![named("R7")];
        let out = reduce(&env.ctx(), &b).unwrap();
        for &f in &freqs {
            let (_, _, ph) = ideal(r, c, vs, f);
            let cm = find(&out, "C", f).m.value;
            assert!(((cm - c) / c).abs() < 1e-9, "C at {f}: {cm}");
            let p = find(&out, "phase", f).m.value;
            assert!(((p - ph) / ph).abs() < 1e-9, "phase at {f}: {p} vs {ph}");
            let pm = find(&out, "phase_measured", f).m.value;
            assert!(((pm - ph) / ph).abs() < 1e-9);
            assert!(find(&out, "residual", f).m.value.abs() < 1e-12);
            assert!(find(&out, "C", f).m.u > 0.0);
        }
        assert!(((out.results[0].m.value - c) / c).abs() < 1e-9);
        assert!(!out.flags.iter().any(|f| f.message.starts_with("Kirchhoff")));
        assert_eq!(out.plot.series.len(), 4);
        // Exact readings agree across frequencies (χ² test, note); 5 % more VC at one
        // frequency makes them disagree (warning).
        let agree = |o: &BlockResult| {
            o.flags
                .iter()
                .find(|f| f.message.starts_with("C: the "))
                .map(|f| (f.warn, f.message.contains("agree (")))
        };
        assert_eq!(agree(&out), Some((false, true)));
        data[1][3] *= 1.05;
        let mut b2 = block(Network::RC, &FULL_RC6, &data);
        b2.parts = vec![named("R7")];
        let out2 = reduce(&env.ctx(), &b2).unwrap();
        assert_eq!(agree(&out2), Some((true, false)));
    }

    /// Columns of an RC block with the source and a trace shift read too.
    const FULL_RC6: [(&str, Unit); 6] = [
        ("f", Unit::Hz),
        ("Vs", Unit::V),
        ("VR", Unit::V),
        ("VC", Unit::V),
        ("shift", Unit::Div),
        ("period", Unit::Div),
    ];

    // The 3-4-5 series RC of the textbooks (from memory, common in electrical-technology
    // texts): R = 30 Ω, XC = 40 Ω on 100 V: Z = 50 Ω, I = 2 A, VR = 60 V, VC = 80 V,
    // current leads by atan(40/30) = 53.13°. At 50 Hz, C = 1/(2π·50·40) = 79.577 µF.
    /// Columns of an RC block with the source read too.
    const FULL_RC: [(&str, Unit); 4] = [
        ("f", Unit::Hz),
        ("Vs", Unit::V),
        ("VR", Unit::V),
        ("VC", Unit::V),
    ];

    #[test]
    fn textbook_345_triangle() {
        let mut env = Env::new();
        env.parts.insert("R1".into(), resistor("R1", 30.0, None));
        let mut b = block(Network::RC, &FULL_RC, &[vec![50.0, 100.0, 60.0, 80.0]]);
        b.parts = vec![named("R1")];
        let out = reduce(&env.ctx(), &b).unwrap();
        assert!((find(&out, "I", 50.0).m.value - 2.0).abs() < 1e-12);
        assert!((find(&out, "XC", 50.0).m.value - 40.0).abs() < 1e-12);
        assert!((find(&out, "phase", 50.0).m.value.to_degrees() - 53.13).abs() < 0.005);
        assert!((find(&out, "C", 50.0).m.value * 1e6 - 79.577).abs() < 0.0005);
        assert!(find(&out, "residual", 50.0).m.value.abs() < 1e-12);
        // No instruments: flagged, and everything exact.
        assert!(out
            .flags
            .iter()
            .any(|f| f.message.contains("no instrument for column VR")));
        assert_eq!(find(&out, "C", 50.0).m.u, 0.0);
    }

    // Correlated Type B (GUM 5.2, F.1.2): with a shared gain of P % on VR and VC, the block
    // mean keeps u_rel = √2·P/√3 however many frequencies; only the per-reading quantisation
    // (res/2, rectangular, GUM F.2.2.1) averages down. Analytic value from GUM eq. 10/13.
    #[test]
    fn shared_gain_does_not_average_down() {
        let (r, c, vs, p, res) = (1500.0, 150e-9, 2.0, 0.01, 1e-3);
        let mut prev = f64::INFINITY;
        for &n in &[1usize, 4, 16] {
            let mut env = Env::new();
            env.instruments.insert(
                "dmm".into(),
                instrument(
                    "dmm",
                    Some(Accuracy::Relative {
                        fraction: p,
                        counts: 0.0,
                    }),
                    Some(Quantity {
                        value: res,
                        unit: Unit::V,
                    }),
                ),
            );
            env.parts.insert("R2".into(), resistor("R2", r, None));
            let mut data = Vec::new();
            let mut cs = Vec::new();
            for k in 0..n {
                let f = 200.0 * (1.0 + k as f64 * 0.37);
                let (vr, vc, _) = ideal(r, c, vs, f);
                data.push(vec![f, vr, vc]);
                cs.push((vr, vc));
            }
            let mut b = block(
                Network::RC,
                &[("f", Unit::Hz), ("VR", Unit::V), ("VC", Unit::V)],
                &data,
            );
            b.parts = vec![named("R2")];
            b.meter = Some(named("dmm"));
            let out = reduce(&env.ctx(), &b).unwrap();
            let m = &out.results[0].m;
            let ug = p / 3f64.sqrt();
            let uq = res / 2.0 / 3f64.sqrt();
            let nf = n as f64;
            // C_k = VR_k/(R ω_k VC_k): ∂C̄/∂g = ±C̄, ∂C̄/∂VR_k = C_k/(n VR_k), ∂C̄/∂VC_k = −C_k/(n VC_k).
            let mut var = 2.0 * (c * ug).powi(2);
            for (vr, vc) in &cs {
                var += (c / nf).powi(2) * ((uq / vr).powi(2) + (uq / vc).powi(2));
            }
            assert!(
                (m.u - var.sqrt()).abs() / var.sqrt() < 1e-6,
                "n={n}: {} vs {}",
                m.u,
                var.sqrt()
            );
            assert!(m.u >= c * ug * 2f64.sqrt() * (1.0 - 1e-9));
            assert!(m.u <= prev);
            prev = m.u;
        }
    }

    #[test]
    fn impossible_readings_are_diagnostics_or_flags() {
        let mut env = Env::new();
        env.parts.insert("R1".into(), resistor("R1", 100.0, None));
        let mut b = block(Network::RC, &FULL_RC, &[vec![50.0, 1.0, 0.0, 0.5]]);
        b.parts = vec![named("R1")];
        let e = reduce(&env.ctx(), &b).unwrap_err();
        assert!(e[0].message.starts_with("VR must be positive"));
        let mut b2 = block(Network::RC, &FULL_RC, &[vec![50.0, 1.0, 1.2, 0.5]]);
        b2.parts = vec![named("R1")];
        let out = reduce(&env.ctx(), &b2).unwrap();
        assert!(out
            .flags
            .iter()
            .any(|f| f.message.starts_with("VR = 1.2 V exceeds Vs")));
        assert!(
            out.flags.iter().any(|f| f.message.starts_with("Kirchhoff"))
                || find(&out, "residual", 50.0).m.u == 0.0
        );
        for r in out.rows.iter().chain(out.results.iter()) {
            assert!(r.m.value.is_finite() && r.m.u.is_finite());
        }
        // No resistor in parts.
        let b3 = block(
            Network::RC,
            &[("f", Unit::Hz), ("VR", Unit::V), ("VC", Unit::V)],
            &[vec![50.0, 1.0, 0.5]],
        );
        assert!(reduce(&env.ctx(), &b3).is_err());
    }

    // Source level (FORMAT.md): a row off the stated level is flagged and normalised; C is a
    // ratio of voltages and does not change, I scales by level/Vs.
    #[test]
    fn source_level_normalises() {
        let mut env = Env::new();
        env.instruments.insert(
            "dmm".into(),
            instrument(
                "dmm",
                Some(Accuracy::Relative {
                    fraction: 0.002,
                    counts: 1.0,
                }),
                Some(Quantity {
                    value: 1e-3,
                    unit: Unit::V,
                }),
            ),
        );
        env.parts.insert(
            "R1".into(),
            resistor("R1", 1000.0, Some(Tolerance::Relative(0.01))),
        );
        let (vr, vc, _) = ideal(1000.0, 100e-9, 1.9, 1000.0);
        let mut b = block(Network::RC, &FULL_RC, &[vec![1000.0, 1.9, vr, vc]]);
        b.parts = vec![named("R1")];
        b.meter = Some(named("dmm"));
        b.source = Some(2.0);
        let out = reduce(&env.ctx(), &b).unwrap();
        assert!(out
            .flags
            .iter()
            .any(|f| f.message.contains("normalised to 2 V")));
        assert!((find(&out, "C", 1000.0).m.value - 100e-9).abs() < 1e-18);
        assert!((find(&out, "I", 1000.0).m.value - vr / 1000.0 * 2.0 / 1.9).abs() < 1e-12);
    }

    // Phase from a two-trace display (FORMAT.md): φ = 2π·shift/period with each reading's
    // half-width 0.05 div rectangular (GUM 4.3.7); u by GUM eq. 10:
    // u²(φ) = (2π/P)²u²(S) + (2πS/P²)²u²(P). Repeats at one f: Type A with ν = n − 1.
    #[test]
    fn display_phase_and_repeats() {
        let mut env = Env::new();
        let mut scope = instrument("scope", None, None);
        scope.reading = Some(Quantity {
            value: 0.05,
            unit: Unit::Div,
        });
        env.instruments.insert("scope".into(), scope);
        env.parts.insert(
            "R1".into(),
            resistor("R1", 1000.0, Some(Tolerance::Relative(0.01))),
        );
        let mut b = block(
            Network::RC,
            &[
                ("f", Unit::Hz),
                ("VR", Unit::V),
                ("VC", Unit::V),
                ("shift", Unit::Div),
                ("period", Unit::Div),
            ],
            &[
                vec![800.0, 1.01, 1.21, 1.4, 10.0],
                vec![800.0, 1.00, 1.22, 1.4, 10.0],
                vec![800.0, 1.02, 1.20, 1.4, 10.0],
            ],
        );
        b.parts = vec![named("R1")];
        b.phase = Some(named("scope"));
        let out = reduce(&env.ctx(), &b).unwrap();
        let pm = &find(&out, "phase_measured", 800.0).m;
        let ur = 0.05 / 3f64.sqrt();
        let expect = 2.0 * PI * ((ur / 10.0).powi(2) + (1.4 * ur / 100.0).powi(2)).sqrt();
        assert!((pm.u - expect).abs() / expect < 1e-6);
        assert!((pm.value - 2.0 * PI * 0.14).abs() < 1e-12);
        let c = &find(&out, "C", 800.0).m;
        assert!(c.dof.is_some(), "Type A present: finite ν_eff");
        assert!(c
            .budget
            .iter()
            .any(|l| l.input == "VR@800 Hz" && l.kind == crate::uncertainty::EvalType::A));
        assert!(c.budget.iter().any(|l| l.input == "R1"));
    }

    /// The 3-4-5 triangle (R = 30 Ω, 100 V, VR = 60 V, VC = 80 V, 50 Hz; see
    /// `textbook_345_triangle`) read on a 0.5 % + 3 counts meter, with a trace shift of
    /// `shift` divisions on a period of 10, and the source read as `vs`.
    fn triangle_with_meter(vs: f64, shift: f64) -> BlockResult {
        let mut env = Env::new();
        env.parts.insert("R1".into(), resistor("R1", 30.0, None));
        env.instruments.insert(
            "dmm".into(),
            instrument(
                "dmm",
                Some(Accuracy::Relative {
                    fraction: 0.005,
                    counts: 3.0,
                }),
                Some(Quantity {
                    value: 0.01,
                    unit: Unit::V,
                }),
            ),
        );
        let mut b = block(
            Network::RC,
            &FULL_RC6,
            &[vec![50.0, vs, 60.0, 80.0, shift, 10.0]],
        );
        b.parts = vec![named("R1")];
        b.meter = Some(named("dmm"));
        reduce(&env.ctx(), &b).unwrap()
    }

    fn warned(out: &BlockResult, start: &str) -> bool {
        out.flags
            .iter()
            .any(|f| f.warn && f.message.contains(start))
    }

    // Each plot series holds exactly the per-frequency results of its name: (f, value, u).
    #[test]
    fn plot_series_are_the_rows() {
        let out = triangle_with_meter(100.0, 1.4758);
        let names: Vec<&str> = out.plot.series.iter().map(|(n, _)| n.as_str()).collect();
        assert_eq!(names, ["XC", "C", "phase", "phase_measured"]);
        for (name, pts) in &out.plot.series {
            let r = find(&out, name, 50.0);
            assert_eq!(pts, &vec![(50.0, r.m.value, r.m.u)], "series {name}");
        }
    }

    // A series RC's current leads by 0° to 90° (common practice): a measured phase outside
    // that range by more than its U is a warning; one inside, or at 0 within U, is not.
    #[test]
    fn measured_phase_outside_a_quadrant_is_a_warning() {
        // 53.13° is 1.4758 divisions of 10.
        let inside = triangle_with_meter(100.0, 1.4758);
        assert!(!warned(&inside, "outside 0° to 90°"));
        let zero = triangle_with_meter(100.0, 0.0);
        assert!(!warned(&zero, "outside 0° to 90°"));
        let negative = triangle_with_meter(100.0, -0.5);
        assert!(warned(&negative, "measured phase at 50 Hz is −18.00°"));
        let over = triangle_with_meter(100.0, 3.0);
        assert!(warned(&over, "measured phase at 50 Hz is 108.0°"));
        let near = triangle_with_meter(100.0, 2.4);
        assert!(!warned(&near, "outside 0° to 90°"));
    }

    // Kirchhoff's voltage law for the phasors: |Vs| = √(VR² + VC²) (common practice).
    #[test]
    fn kirchhoff_residual_beyond_u_is_a_warning() {
        let exact = triangle_with_meter(100.0, 1.4758);
        assert!(!warned(&exact, "Kirchhoff"));
        let u = find(&exact, "residual", 50.0).m.expanded;
        assert!(u > 0.0);
        // A source reading 0.5 U high stays inside; 3 U high fails the check.
        assert!(!warned(
            &triangle_with_meter(100.0 + 0.5 * u, 1.4758),
            "Kirchhoff"
        ));
        let off = triangle_with_meter(100.0 + 3.0 * u, 1.4758);
        assert!(warned(
            &off,
            "Kirchhoff check at 50 Hz: Vs − √(VR² + VC²) = "
        ));
        assert!((find(&off, "residual", 50.0).m.value - 3.0 * u).abs() < 1e-9);
    }

    // Exact readings by phasor arithmetic (num-complex) at four frequencies, and a fifth whose
    // VC is misread by 10 %: the Kirchhoff check (common practice) warns at that row, the block
    // C (mean of all five) is pulled off, and C_clean, the mean without the warned row, gives
    // the chosen C back; it is not a judged result. A clean block has no C_clean.
    #[test]
    fn block_c_without_the_warned_rows() {
        let (r, c, vs) = (1500.0, 100e-9, 2.0);
        let fs = [300.0, 600.0, 1200.0, 2400.0, 4800.0];
        let run = |bad: Option<usize>| {
            let rows: Vec<Vec<f64>> = fs
                .iter()
                .enumerate()
                .map(|(k, &f)| {
                    let (vr, vc, _) = ideal(r, c, vs, f);
                    let vc = if bad == Some(k) { vc * 0.9 } else { vc };
                    vec![f, vs, vr, vc]
                })
                .collect();
            let mut env = Env::new();
            env.parts.insert(
                "R1".into(),
                resistor("R1", r, Some(Tolerance::Relative(0.001))),
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
                        value: 1e-4,
                        unit: Unit::V,
                    }),
                ),
            );
            let mut b = block(
                Network::RC,
                &[
                    ("f", Unit::Hz),
                    ("Vs", Unit::V),
                    ("VR", Unit::V),
                    ("VC", Unit::V),
                ],
                &rows,
            );
            b.parts = vec![named("R1")];
            b.meter = Some(named("dmm"));
            reduce(&env.ctx(), &b).unwrap()
        };
        let clean = run(None);
        assert!(!clean.results.iter().any(|x| x.name == "C_clean"));
        let out = run(Some(2));
        assert!(warned(&out, "Kirchhoff check at 1.2 kHz"));
        let get = |n: &str| &out.results.iter().find(|x| x.name == n).unwrap().m;
        assert!((get("C_clean").value / c - 1.0).abs() < 1e-9);
        assert!((get("C").value / c - 1.0).abs() > 0.01);
        assert!(get("C_clean").u > 0.0);
        assert!(out.flags.iter().any(|f| !f.warn
            && f.message
                .starts_with("without the rows with warnings (1.2 kHz), C_clean = ")));
        assert!(!NETWORK.judged.iter().any(|(n, _)| *n == "C_clean"));
    }

    // |VR| and |VC| are at most |Vs| in a series circuit (common practice).
    #[test]
    fn a_part_voltage_above_the_source_is_a_warning() {
        assert!(!warned(&triangle_with_meter(100.0, 1.4758), "exceeds Vs"));
        let out = triangle_with_meter(79.0, 1.4758);
        assert!(warned(&out, "VC = 80 V exceeds Vs = 79 V"));
        assert!(!warned(&out, "VR = 60 V exceeds"));
        let out = triangle_with_meter(59.0, 1.4758);
        assert!(warned(&out, "VR = 60 V exceeds Vs = 59 V"));
        // Equal is possible (a part with no partner voltage) and not flagged.
        assert!(!warned(
            &triangle_with_meter(80.0, 1.4758),
            "VC = 80 V exceeds"
        ));
    }

    /// The 3-4-5 triangle with a scope reading the trace to ±0.05 div (rectangular), so the
    /// measured phase has a U of about 1°, and the given columns only.
    fn triangle_on_scope(cols: &[(&str, Unit)], row: Vec<f64>) -> BlockResult {
        let mut env = Env::new();
        env.parts.insert("R1".into(), resistor("R1", 30.0, None));
        let mut scope = instrument("scope", None, None);
        scope.reading = Some(Quantity {
            value: 0.05,
            unit: Unit::Div,
        });
        env.instruments.insert("scope".into(), scope);
        let mut b = block(Network::RC, cols, &[row]);
        b.parts = vec![named("R1")];
        b.phase = Some(named("scope"));
        reduce(&env.ctx(), &b).unwrap()
    }

    // The quadrant check allows the measured phase its U on both sides (common practice for a
    // limit check): 0.02 div of 10 (0.72°) and 2.49 div (89.6°) are inside within U; −0.2 div
    // (−7.2°) and 2.7 div (97.2°) are not.
    #[test]
    fn the_quadrant_check_allows_the_phase_its_uncertainty() {
        let at =
            |shift: f64| triangle_on_scope(&FULL_RC6, vec![50.0, 100.0, 60.0, 80.0, shift, 10.0]);
        let u = find(&at(0.02), "phase_measured", 50.0).m.expanded;
        assert!(
            u.to_degrees() > 0.9 && u.to_degrees() < 3.0,
            "U = {}°",
            u.to_degrees()
        );
        assert!(!warned(&at(0.02), "outside 0° to 90°"));
        assert!(!warned(&at(2.49), "outside 0° to 90°"));
        assert!(warned(&at(-0.2), "outside 0° to 90°"));
        assert!(warned(&at(2.7), "outside 0° to 90°"));
    }

    // A shift needs its period: alone, it gives a note and no measured phase.
    #[test]
    fn shift_without_period_gives_a_note_and_no_measured_phase() {
        let cols = [
            ("f", Unit::Hz),
            ("VR", Unit::V),
            ("VC", Unit::V),
            ("shift", Unit::Div),
        ];
        let out = triangle_on_scope(&cols, vec![50.0, 60.0, 80.0, 1.4758]);
        let note = "shift and period are read together";
        assert!(out
            .flags
            .iter()
            .any(|f| !f.warn && f.message.starts_with(note)));
        assert!(!out.rows.iter().any(|r| r.name == "phase_measured"));
        let both = triangle_on_scope(&FULL_RC6, vec![50.0, 100.0, 60.0, 80.0, 1.4758, 10.0]);
        assert!(!both.flags.iter().any(|f| f.message.starts_with(note)));
        assert!(both.rows.iter().any(|r| r.name == "phase_measured"));
    }

    // Rounding of the square root is not a failed Kirchhoff check: a residual of 1e-9 V on
    // 100 V with no instrument (U = 0) is within the 1e-9·Vs allowance; 1e-6 V is not.
    #[test]
    fn the_kirchhoff_allowance_is_relative_to_the_source() {
        let at = |vs: f64| {
            let mut env = Env::new();
            env.parts.insert("R1".into(), resistor("R1", 30.0, None));
            let mut b = block(Network::RC, &FULL_RC, &[vec![50.0, vs, 60.0, 80.0]]);
            b.parts = vec![named("R1")];
            reduce(&env.ctx(), &b).unwrap()
        };
        assert!(!warned(&at(100.0 + 1e-9), "Kirchhoff"));
        assert!(warned(&at(100.0 + 1e-6), "Kirchhoff"));
    }

    // Each plot series holds its frequencies' points in order (the outputs' groups).
    #[test]
    fn plot_series_follow_the_groups() {
        let (r, c, vs) = (2200.0, 68e-9, 1.6);
        let freqs = [120.0, 470.0, 1300.0];
        let data: Vec<Vec<f64>> = freqs
            .iter()
            .map(|&f| {
                let (vr, vc, _) = ideal(r, c, vs, f);
                vec![f, vr, vc]
            })
            .collect();
        let mut env = Env::new();
        env.parts.insert("R7".into(), resistor("R7", r, None));
        let mut b = block(
            Network::RC,
            &[("f", Unit::Hz), ("VR", Unit::V), ("VC", Unit::V)],
            &data,
        );
        b.parts = vec![named("R7")];
        let out = reduce(&env.ctx(), &b).unwrap();
        for (name, pts) in &out.plot.series {
            let xs: Vec<f64> = pts.iter().map(|p| p.0).collect();
            assert_eq!(xs, freqs, "series {name}");
        }
    }

    // C without the flagged rows needs rows left to average: with every row flagged there is
    // no C_clean, and with none flagged it would only repeat C.
    #[test]
    fn c_clean_only_when_some_rows_are_flagged_and_some_are_not() {
        let all_flagged = triangle_with_meter(79.0, 1.4758);
        assert!(warned(&all_flagged, "exceeds Vs"));
        assert!(!all_flagged.results.iter().any(|r| r.name == "C_clean"));
        let none = triangle_with_meter(100.0, 1.4758);
        assert!(!none.results.iter().any(|r| r.name == "C_clean"));
    }
}
