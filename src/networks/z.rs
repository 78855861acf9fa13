//! Network Z: a direct impedance reading of V, I and the phase φ of V on I.
//!
//! R = (V/I) cos φ, X = (V/I) sin φ, |Z| = V/I (GUM H.2). Repeats give Type A means with
//! their correlations; R, X, Z and their correlations come from one propagation. With an `f`
//! column there is one set per distinct f (per-frequency results); without, one block set.

use super::inputs::{BlockInputs, Group, Spec};
use super::{
    check_positive, AtBlock, BlockResult, Context, Correlation, Descriptor, Flag, NamedResult,
    PlotData, PlotKind,
};
use crate::diag::Diagnostic;
use crate::notebook::{PartKind, ReadingsBlock};
use crate::print::hz;
use crate::quantity::Unit;
use crate::uncertainty::{correlation, propagate_sparse, Measured};

pub const NETWORK: Descriptor = Descriptor {
    spec: Spec {
        network: "Z",
        required: &["V", "I", "phi"],
        optional: &[],
        resistor: false,
    },
    positive: &[
        ("V", "it is the amplitude of a sinusoid"),
        ("I", "it is the amplitude of a sinusoid"),
    ],
    judged: &[("R", PartKind::Resistor)],
    plot: PlotKind::Series,
    reduce,
};

/// A passive part has R = |Z| cos φ ≥ 0, i.e. |φ| ≤ 90°. Flags a group whose R is negative:
/// beyond its expanded uncertainty R and X are left out (false), within it they are kept.
/// Flagged, not refused, as RL flags a voltage triangle that does not close: the readings
/// are each possible, their combination is not.
fn passive_check(block: &ReadingsBlock, grp: &Group, r: &Measured, flags: &mut Vec<Flag>) -> bool {
    if r.value >= 0.0 {
        return true;
    }
    let phi = block.col("phi").and_then(|c| {
        let row = block.rows.get(*grp.rows.first()?)?;
        row.cells.get(c)
    });
    let at = grp.f.map(|f| format!("at {}: ", hz(f))).unwrap_or_default();
    let read = phi.map_or(String::new(), |c| format!(" (φ = {})", c.text));
    let beyond = r.value < -r.expanded;
    flags.push(Flag {
        warn: true,
        span: phi.map(|c| c.span).or(Some(grp.span)),
        message: if beyond {
            format!(
                "{at}|φ| is above 90°{read}, so R = |Z| cos φ would be negative: a passive part's resistance cannot be negative; check the probe polarity or the phase sign convention. R and X are left out for this reading; |Z| is kept"
            )
        } else {
            format!(
                "{at}|φ| is above 90°{read} but within its uncertainty of it: R is negative yet zero within its expanded uncertainty (a nearly lossless part), and is reported as computed"
            )
        },
    });
    !beyond
}

pub fn reduce(ctx: &Context, block: &ReadingsBlock) -> Result<BlockResult, Vec<Diagnostic>> {
    let bi = BlockInputs::build(ctx, block, &NETWORK.spec)?;
    let diags = check_positive(block, NETWORK.positive);
    if !diags.is_empty() {
        return Err(diags);
    }
    let ng = bi.groups.len();
    let model = |x: &[f64]| -> Vec<f64> {
        let mut y = Vec::with_capacity(3 * ng);
        for g in 0..ng {
            let z = bi.voltage("V", g, x) / bi.value("I", g, x);
            let phi = bi.value("phi", g, x);
            y.push(z * phi.cos());
            y.push(z * phi.sin());
            y.push(z);
        }
        y
    };
    let pattern: Vec<Vec<usize>> = (0..ng)
        .flat_map(|g| std::iter::repeat_n(bi.group_inputs(g), 3))
        .collect();
    let p = propagate_sparse(&bi.model(), &model, Some(&pattern), ctx.coverage).at_block(block)?;
    let names = [("R", Unit::Ohm), ("X", Unit::Ohm), ("Z", Unit::Ohm)];
    let mut rows = Vec::new();
    let mut results = Vec::new();
    let mut correlations = Vec::new();
    let mut plot = PlotData::default();
    let mut series: Vec<Vec<(f64, f64, f64)>> = vec![Vec::new(); 3];
    let mut flags = bi.flags.clone();
    for (g, grp) in bi.groups.iter().enumerate() {
        let passive = p
            .results
            .get(3 * g)
            .is_none_or(|r| passive_check(block, grp, r, &mut flags));
        for (k, (name, unit)) in names.iter().enumerate() {
            let Some(m) = p.results.get(3 * g + k) else {
                continue;
            };
            if k < 2 && !passive {
                continue;
            }
            let r = NamedResult {
                name: name.to_string(),
                f: grp.f,
                unit: *unit,
                m: m.clone(),
            };
            match grp.f {
                Some(f) => {
                    if let Some(s) = series.get_mut(k) {
                        s.push((f, m.value, m.u));
                    }
                    rows.push(r)
                }
                None => results.push(r),
            }
        }
        let pairs: &[(usize, usize)] = if passive {
            &[(0, 1), (0, 2), (1, 2)]
        } else {
            &[]
        };
        for &(a, b) in pairs {
            correlations.push(Correlation {
                a: names[a].0.into(),
                b: names[b].0.into(),
                r: correlation(&p, 3 * g + a, 3 * g + b),
                f: grp.f,
            });
        }
    }
    if bi.groups.iter().any(|g| g.f.is_some()) {
        for (k, s) in series.into_iter().enumerate() {
            plot.series.push((names[k].0.into(), s));
        }
    }
    Ok(BlockResult {
        id: block.id.clone(),
        network: block.network,
        rows,
        results,
        correlations,
        flags,
        plot,
    })
}

#[cfg(test)]
mod tests {
    use super::super::inputs::testutil::*;
    use super::*;
    use crate::notebook::Network;

    // Single reading, exact: R = |Z| cos φ by trigonometry (handbook).
    #[test]
    fn single_reading_per_frequency() {
        let env = Env::new();
        let b = block(
            Network::Z,
            &[
                ("f", Unit::Hz),
                ("V", Unit::V),
                ("I", Unit::A),
                ("phi", Unit::Rad),
            ],
            &[vec![400.0, 1.3, 0.01, 0.5], vec![800.0, 1.3, 0.02, -0.25]],
        );
        let out = reduce(&env.ctx(), &b).unwrap();
        assert!(out.results.is_empty());
        assert_eq!(out.rows.len(), 6);
        assert!((out.rows[0].m.value - 130.0 * 0.5f64.cos()).abs() < 1e-12);
        assert!((out.rows[4].m.value - 65.0 * (-0.25f64).sin()).abs() < 1e-12);
        assert_eq!(out.correlations.len(), 6);
        assert_eq!(out.correlations[3].f, Some(800.0));
        let bad = block(
            Network::Z,
            &[("V", Unit::V), ("I", Unit::A), ("phi", Unit::Rad)],
            &[vec![1.0, 0.0, 0.1]],
        );
        assert!(reduce(&env.ctx(), &bad).is_err());
    }
}
