//! The three-meter methods shared by the loss and parallel networks: three magnitudes that
//! add as phasors, a sum S of a reference leg A (the resistor's, in phase with the current or
//! the voltage) and the part's leg B, so that by the law of cosines (handbook)
//! S² = A² + B² + 2·A·B·cos θ, θ the angle between the two legs. Three voltmeters on a series
//! R + part (Vs, VR, VC) and three ammeters on a parallel R ‖ part (I, IR, IC or IL) are the
//! same triangle; [`super::rl::cos_theta`] computes it for both.
//!
//! A network states its legs, its outputs and a model of each output by name ([`Method`]);
//! [`reduce`] checks each row's triangle (open, flat, negative or unresolved loss), propagates
//! every output in one sparse propagation, takes equal-weight block means and flags rows whose
//! loss is not resolved.

use super::inputs::{BlockInputs, Spec};
use super::outputs::{Out, Outputs};
use super::rl::{consistency_flag, cos_theta, REL_U_LIMIT};
use super::{check_positive, AtBlock, BlockResult, Context, Flag, NamedResult, PlotData, PlotKind};
use crate::diag::Diagnostic;
use crate::notebook::ReadingsBlock;
use crate::print::{hz, plain};
use crate::quantity::Unit;
use crate::uncertainty::{propagate_sparse, relative_u, Propagated};

/// When a row output can be computed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Needs {
    /// From the readings alone (I = VR/R, R = V/IR).
    Always,
    /// Only when the triangle closes (θ known).
    Closed,
    /// Only when it closes with cos θ > 0 (a ratio over the loss, such as Q).
    Lossy,
}

/// A three-meter network: its legs, its outputs and their model.
#[derive(Debug)]
pub struct Method {
    pub spec: Spec<'static>,
    pub positive: &'static [(&'static str, &'static str)],
    /// Column symbols of the sum, the reference leg and the part's leg.
    pub legs: [&'static str; 3],
    /// The legs' unit symbol, for messages ("V", "A").
    pub unit: &'static str,
    /// The part, for messages ("capacitor", "coil").
    pub part: &'static str,
    /// What an open triangle contradicts, for messages.
    pub law: &'static str,
    /// Row outputs, in the order of a row's results.
    pub outputs: &'static [(&'static str, Unit, Needs)],
    /// Row outputs whose relative uncertainty is flagged above [`REL_U_LIMIT`].
    pub resolve: &'static [&'static str],
    /// Row outputs averaged (equal weights) into block results.
    pub block: &'static [&'static str],
    /// Block results whose frequencies are tested for agreement (χ²).
    pub agree: &'static [&'static str],
    /// The model of row output `name` of group `g` at inputs `x`.
    pub row: fn(&BlockInputs, &[f64], usize, &str) -> f64,
}

/// Why a meter magnitude must be above zero, for the networks' `positive` lists.
pub const AMPLITUDE: &str = "an amplitude is never zero or negative here";

/// Row output `name` from a row's values `y`, laid out in the order of `m.outputs`.
pub fn pick(m: &Method, y: &[f64], name: &str) -> f64 {
    let k = m.outputs.iter().position(|o| o.0 == name);
    k.and_then(|k| y.get(k).copied()).unwrap_or(f64::NAN)
}

/// Within this of ±1, cos θ is taken as exactly ±1 (common practice: readings of six or seven
/// digits cannot tell a flat triangle from one this close to flat).
const FLAT: f64 = 1e-9;

/// The three legs of group `g` at inputs `x`: [sum, reference, part].
pub fn legs(bi: &BlockInputs, m: &Method, g: usize, x: &[f64]) -> [f64; 3] {
    m.legs.map(|s| bi.voltage(s, g, x))
}

/// cos θ and sin θ of group `g` at `x` (sin θ ≥ 0: the part's angle is taken in [0, π]).
pub fn cos_sin(bi: &BlockInputs, m: &Method, g: usize, x: &[f64]) -> (f64, f64) {
    let [s, a, b] = legs(bi, m, g, x);
    let c = cos_theta(s, a, b);
    (c, (1.0 - c * c).sqrt())
}

/// Why the triangle of `legs` (with cos θ = `c`) gives no angle, in words; `None` when it does.
pub fn open_triangle(m: &Method, v: [f64; 3], c: f64) -> Option<String> {
    let [s, a, b] = m.legs;
    let u = m.unit;
    let p = |x: f64| plain(x, 6);
    if c.abs() > 1.0 + FLAT {
        return Some(if c > 0.0 {
            format!(
                "{s} = {} {u} is above {a} + {b} = {} {u} (cos θ = {})",
                p(v[0]),
                p(v[1] + v[2]),
                plain(c, 4)
            )
        } else {
            format!(
                "{s} = {} {u} is below |{a} − {b}| = {} {u} (cos θ = {})",
                p(v[0]),
                p((v[1] - v[2]).abs()),
                plain(c, 4)
            )
        });
    }
    if c.abs() < 1.0 - FLAT {
        return None;
    }
    Some(if c > 0.0 {
        format!(
            "{s} = {a} + {b}, so the {}'s leg is in phase with the resistor's and it shows no reactance",
            m.part
        )
    } else {
        format!(
            "{s} = |{a} − {b}|, so the {}'s angle would be 180°, which no passive part has",
            m.part
        )
    })
}

/// What a row's triangle allows: closed (θ known), and cos θ > 0 (the loss positive).
#[derive(Debug, Clone, Copy, Default)]
struct RowOk {
    closed: bool,
    lossy: bool,
}

/// The checks on each row's cos θ (`pc`, one output per group), with their flags.
fn row_checks(m: &Method, bi: &BlockInputs, pc: &Propagated, flags: &mut Vec<Flag>) -> Vec<RowOk> {
    let x0 = bi.estimates();
    let mut ok = vec![RowOk::default(); bi.groups.len()];
    for (g, grp) in bi.groups.iter().enumerate() {
        let at = grp.f.map(hz).unwrap_or_else(|| "this block".into());
        let (c, uc) = (pc.values[g], pc.results[g].expanded);
        let mut say = |warn: bool, message: String| {
            flags.push(Flag {
                warn,
                span: Some(grp.span),
                message,
            })
        };
        if let Some(why) = open_triangle(m, legs(bi, m, g, &x0), c) {
            say(true, format!(
                "at {at}: the three readings close no triangle ({}): {why}: the {}'s results that need its angle are left out",
                m.law, m.part
            ));
        } else if c < -uc {
            say(true, format!(
                "at {at}: cos θ = {} is negative beyond its uncertainty (a negative loss resistance, which no passive {} has): its results that need the angle are not computed",
                plain(c, 3),
                m.part
            ));
        } else {
            ok[g] = RowOk {
                closed: true,
                lossy: c > 0.0,
            };
            if c <= uc {
                say(false, format!(
                    "at {at}: cos θ = {} is zero within its uncertainty ±{}: the {}'s loss is not resolved by three meters (the triangle is nearly right-angled, where the method is ill-conditioned){}",
                    plain(c, 3),
                    plain(uc, 2),
                    m.part,
                    if c > 0.0 { "" } else { "; Q is not computed" }
                ));
            }
            if c + uc >= 1.0 {
                say(false, format!(
                    "at {at}: cos θ is 1 within its uncertainty: the reactance is not resolved and the linear propagation is poor here"
                ));
            }
        }
    }
    ok
}

/// The row outputs each group can have.
fn layout(m: &Method, ok: &[RowOk]) -> Outputs {
    let mut outs = Outputs::default();
    for (g, r) in ok.iter().enumerate() {
        for &(name, unit, needs) in m.outputs {
            let can = match needs {
                Needs::Always => true,
                Needs::Closed => r.closed,
                Needs::Lossy => r.closed && r.lossy,
            };
            if can {
                outs.row(g, name, unit);
            }
        }
    }
    outs
}

/// Reduces a block by a three-meter method.
pub fn reduce(
    m: &Method,
    ctx: &Context,
    block: &ReadingsBlock,
) -> Result<BlockResult, Vec<Diagnostic>> {
    let bi = BlockInputs::build(ctx, block, &m.spec)?;
    let d = check_positive(block, m.positive);
    if !d.is_empty() {
        return Err(d);
    }
    let mut flags = bi.flags.clone();
    let ng = bi.groups.len();
    let pattern: Vec<Vec<usize>> = (0..ng).map(|g| bi.group_inputs(g)).collect();
    let cos_model = |x: &[f64]| -> Vec<f64> { (0..ng).map(|g| cos_sin(&bi, m, g, x).0).collect() };
    let pc =
        propagate_sparse(&bi.model(), &cos_model, Some(&pattern), ctx.coverage).at_block(block)?;
    let ok = row_checks(m, &bi, &pc, &mut flags);
    let outs = layout(m, &ok);
    let model = |x: &[f64]| outs.eval(|g, n| (m.row)(&bi, x, g, n), |_, _| f64::NAN);
    let pattern = outs.pattern(&bi);
    let p = propagate_sparse(&bi.model(), &model, Some(&pattern), ctx.coverage).at_block(block)?;
    let rows = outs.rows(&p.results, |g| bi.groups.get(g).and_then(|gr| gr.f));
    unresolved_flags(m, &bi, &rows, &mut flags);
    let mut results = Vec::new();
    for &name in m.block {
        let idx: Vec<usize> = (0..ng)
            .filter_map(|g| outs.index(Out::Row(g, name)))
            .collect();
        if idx.is_empty() {
            continue;
        }
        let w: Vec<(usize, f64)> = idx.iter().map(|&k| (k, 1.0 / idx.len() as f64)).collect();
        let mean = p.linear(&bi.model(), &w, ctx.coverage).at_block(block)?;
        if m.agree.contains(&name) {
            let xs: Vec<f64> = idx.iter().map(|&k| p.values[k]).collect();
            let cov = |a: usize, b: usize| p.cov(idx[a], idx[b]);
            flags.extend(consistency_flag(name, &xs, &cov, block.span));
        }
        let unit = m
            .outputs
            .iter()
            .find(|o| o.0 == name)
            .map_or(Unit::One, |o| o.1);
        results.push(NamedResult {
            name: name.to_string(),
            f: None,
            unit,
            m: mean,
        });
    }
    Ok(BlockResult {
        id: block.id.clone(),
        network: block.network,
        plot: plot_of(m, &rows),
        rows,
        results,
        correlations: Vec::new(),
        flags,
    })
}

/// A note per row whose `resolve` outputs have a relative standard uncertainty above 20 %.
fn unresolved_flags(m: &Method, bi: &BlockInputs, rows: &[NamedResult], flags: &mut Vec<Flag>) {
    for grp in &bi.groups {
        let big: Vec<String> = rows
            .iter()
            .filter(|r| r.f == grp.f && m.resolve.contains(&r.name.as_str()))
            .filter_map(|r| Some((r, relative_u(&r.m)?)))
            .filter(|(_, ru)| *ru > REL_U_LIMIT)
            .map(|(r, ru)| format!("{} ({} %)", r.name, plain(100.0 * ru, 2)))
            .collect();
        if !big.is_empty() {
            flags.push(Flag {
                warn: false,
                span: Some(grp.span),
                message: format!(
                    "at {}: relative standard uncertainty above 20 % by three meters: {}",
                    grp.f.map(hz).unwrap_or_else(|| "this block".into()),
                    big.join(", ")
                ),
            });
        }
    }
}

/// Plot series (f, y, u) of every row output but the always-computed ones.
fn plot_of(m: &Method, rows: &[NamedResult]) -> PlotData {
    let mut plot = PlotData::default();
    for &(name, _, needs) in m.outputs {
        if needs == Needs::Always {
            continue;
        }
        let pts: Vec<(f64, f64, f64)> = rows
            .iter()
            .filter(|r| r.name == name)
            .filter_map(|r| r.f.map(|f| (f, r.m.value, r.m.u)))
            .collect();
        plot.series.push((name.to_string(), pts));
    }
    plot
}

/// The plot kind of a three-meter network: its main result against frequency with the
/// tolerance band of the part judged.
pub const fn per_frequency(
    main: &'static [&'static str],
    band: (&'static str, crate::notebook::PartKind),
) -> PlotKind {
    PlotKind::PerFrequency {
        main,
        beside: &[],
        band,
    }
}
