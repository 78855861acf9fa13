//! Network RL: a series resistor R then a coil (inductance L with winding resistance), read with
//! a voltmeter across the source (Vs), the resistor (VR) and the coil (VL).
//!
//! Per frequency, with I = VR/R and ω = 2πf:
//! - three-voltmeter method (law of cosines in the voltage triangle Vs = VR + VL as phasors,
//!   handbook): cos θ = (Vs² − VR² − VL²)/(2·VR·VL), θ the coil's phase angle;
//!   Rac = (VL/I)·cos θ, XL = (VL/I)·sin θ, L = XL/ω, Q = XL/Rac;
//! - DC-resistance correction with the coil's `dcr`: XL_dcr = √(VL² − (I·dcr)²)/I,
//!   L_dcr = XL_dcr/ω (assumes the AC loss resistance equals the DC one).
//!
//! Block results L, L_dcr and Rac are inverse-variance weighted means over the frequencies,
//! computed in the same propagation as the rows so shared gains and R stay correlated; their
//! consistency is tested by the generalised χ² (row covariance included) at 95 %.

use super::inputs::{accuracy_limit, BlockInputs, Spec};
use super::outputs::{Out, Outputs};
use super::{
    check_positive, AtBlock, BlockResult, Context, Correlation, Descriptor, Flag, NamedResult,
    PlotData, PlotKind,
};
use crate::diag::Diagnostic;
use crate::montecarlo::{attach_validation, monte_carlo_on, Columns, CHUNK};
use crate::notebook::{PartKind, ReadingsBlock};
use crate::print::{hz, plain};
use crate::quantity::Unit;
use crate::uncertainty::{
    correlation, dist_of, propagate, ratio, relative_u, type_b, Dist, Input, McInterval, Measured,
    Model, Propagated,
};
use nalgebra::{DMatrix, DVector};
use rayon::prelude::*;
use statrs::distribution::{ChiSquared, ContinuousCDF};
use std::f64::consts::PI;

pub const NETWORK: Descriptor = Descriptor {
    spec: Spec {
        network: "RL",
        required: &["f", "Vs", "VR", "VL"],
        optional: &[],
        resistor: true,
    },
    positive: &[("Vs", AMPLITUDE), ("VR", AMPLITUDE), ("VL", AMPLITUDE)],
    judged: &[("L", PartKind::Inductor)],
    plot: PlotKind::PerFrequency {
        main: &["L", "XL"],
        beside: &["L_dcr"],
        band: ("L", PartKind::Inductor),
    },
    reduce,
};
const AMPLITUDE: &str = "an amplitude is never zero or negative here";

/// Relative standard uncertainty above which a three-voltmeter L or Rac is flagged.
pub const REL_U_LIMIT: f64 = 0.20;

/// The three-voltmeter results at one frequency: [I, Rac, XL, L, Q] (NaN when the voltage
/// triangle does not close, |cos θ| > 1).
pub fn three_voltmeter(vs: f64, vr: f64, vl: f64, r: f64, f: f64) -> [f64; 5] {
    let i = vr / r;
    let c = cos_theta(vs, vr, vl);
    let s = (1.0 - c * c).sqrt();
    let z = vl / i;
    let (rac, xl) = (z * c, z * s);
    [i, rac, xl, xl / (2.0 * PI * f), xl / rac]
}

/// [`three_voltmeter`] over the first `n` trials of Monte Carlo columns (each [`CHUNK`]
/// long): output k of trial t to `y[k·CHUNK + t]`, by the same operations.
fn three_voltmeter_cols(x: [&mut [f64]; 5], y: &mut [f64], n: usize) {
    let [vs, vr, vl, r, f] = x;
    let n = n.min(CHUNK);
    let (vs, vr, vl, r, f) = (&vs[..n], &vr[..n], &vl[..n], &r[..n], &f[..n]);
    let mut y = y.chunks_exact_mut(CHUNK);
    let mut next = || y.next().expect("five output columns");
    let (i, rac, xl, l, q) = (next(), next(), next(), next(), next());
    crate::montecarlo::wide(|| {
        for t in 0..n {
            [i[t], rac[t], xl[t], l[t], q[t]] = three_voltmeter(vs[t], vr[t], vl[t], r[t], f[t]);
        }
    })
}

/// cos θ of the coil from the law of cosines: Vs² = VR² + VL² + 2·VR·VL·cos θ.
pub fn cos_theta(vs: f64, vr: f64, vl: f64) -> f64 {
    (vs * vs - vr * vr - vl * vl) / (2.0 * vr * vl)
}

/// DC-resistance correction at one frequency: [XL_dcr, L_dcr].
pub fn dcr_method(vr: f64, vl: f64, r: f64, dcr: f64, f: f64) -> [f64; 2] {
    let i = vr / r;
    let xl = (vl * vl - (i * dcr).powi(2)).sqrt() / i;
    [xl, xl / (2.0 * PI * f)]
}

/// Consistency of n estimates with covariance `cov` (GUM-style, common practice in key
/// comparisons): χ² = (x − x̄₁)ᵀ V⁻¹ (x − x̄₁) at the generalised least-squares mean x̄₁,
/// ν = n − 1, Birge ratio √(χ²/ν), and whether χ² exceeds its 95 % quantile. Falls back to the
/// diagonal of V when V is singular (`generalised` false).
#[derive(Debug, Clone, PartialEq)]
pub struct Consistency {
    pub chi2: f64,
    pub dof: usize,
    pub birge: f64,
    pub chi2_95: f64,
    pub consistent: bool,
    pub generalised: bool,
}

/// The χ² agreement of a block value's row estimates as a flag: a note when they agree, a
/// warning when they disagree beyond their uncertainties (then the mean hides a frequency
/// dependence). `None` when the test cannot be computed (fewer than two rows).
pub fn consistency_flag(
    name: &str,
    xs: &[f64],
    cov: &dyn Fn(usize, usize) -> f64,
    span: crate::diag::Span,
) -> Option<Flag> {
    let n = xs.len();
    // The generalised test solves with the n × n covariance (O(n³)); a long sweep (5 000
    // rows took minutes) uses the row uncertainties alone, and the flag says so.
    let c = if n <= GENERALISED_MAX_ROWS {
        let m: Vec<Vec<f64>> = (0..n)
            .map(|i| (0..n).map(|j| cov(i, j)).collect())
            .collect();
        consistency(xs, &m)?
    } else {
        let var: Vec<f64> = (0..n).map(|i| cov(i, i)).collect();
        consistency_uncorrelated(xs, &var)?
    };
    let basis = if c.generalised {
        "with the row covariance"
    } else {
        "from the row uncertainties"
    };
    Some(Flag {
        warn: !c.consistent,
        span: Some(span),
        message: if c.consistent {
            format!(
                "{name}: the {} frequencies agree (χ² = {} ≤ {} at 95 %, ν = {}, Birge ratio {}, {basis})",
                xs.len(), plain(c.chi2, 3), plain(c.chi2_95, 3), c.dof, plain(c.birge, 3)
            )
        } else {
            format!(
                "{name}: the frequencies disagree beyond their uncertainties (χ² = {} > {} at 95 %, ν = {}, Birge ratio {}, {basis}): the weighted mean hides a frequency dependence",
                plain(c.chi2, 3), plain(c.chi2_95, 3), c.dof, plain(c.birge, 3)
            )
        },
    })
}

/// Above this many rows the agreement test uses the row variances only.
pub const GENERALISED_MAX_ROWS: usize = 200;

/// [`consistency`] with a diagonal covariance (`var`, the row variances): the weighted mean
/// and χ² = Σ (xᵢ − x̄)² / u²(xᵢ).
pub fn consistency_uncorrelated(x: &[f64], var: &[f64]) -> Option<Consistency> {
    let n = x.len();
    if n < 2 || var.len() != n || var.iter().any(|v| !(*v > 0.0)) {
        return None;
    }
    let sw: f64 = var.iter().map(|v| 1.0 / v).sum();
    let m = x.iter().zip(var).map(|(x, v)| x / v).sum::<f64>() / sw;
    let chi2: f64 = x.iter().zip(var).map(|(x, v)| (x - m).powi(2) / v).sum();
    finish_consistency(chi2, n, false)
}

fn finish_consistency(chi2: f64, n: usize, generalised: bool) -> Option<Consistency> {
    if !chi2.is_finite() {
        return None;
    }
    let dof = n - 1;
    let chi2_95 = ChiSquared::new(dof as f64)
        .map(|d| d.inverse_cdf(0.95))
        .ok()?;
    Some(Consistency {
        chi2,
        dof,
        birge: (chi2 / dof as f64).sqrt(),
        chi2_95,
        consistent: chi2 <= chi2_95,
        generalised,
    })
}

pub fn consistency(x: &[f64], cov: &[Vec<f64>]) -> Option<Consistency> {
    let n = x.len();
    if n < 2 || cov.len() != n || cov.iter().any(|r| r.len() != n) {
        return None;
    }
    let v = DMatrix::from_fn(n, n, |i, j| cov[i][j]);
    let xv = DVector::from_column_slice(x);
    let ones = DVector::from_element(n, 1.0);
    let chi2_of = |solve: &dyn Fn(&DVector<f64>) -> DVector<f64>| -> Option<f64> {
        let vi1 = solve(&ones);
        let vix = solve(&xv);
        let den = ones.dot(&vi1);
        if !(den > 0.0) {
            return None;
        }
        let m = ones.dot(&vix) / den;
        let d = &xv - &ones * m;
        let c = d.dot(&solve(&d));
        c.is_finite().then_some(c)
    };
    let scale = (0..n).map(|i| cov[i][i].abs()).fold(0.0, f64::max);
    let (chi2, generalised) = match v.clone().cholesky() {
        Some(ch) if scale > 0.0 && (0..n).all(|i| ch.l()[(i, i)] > 1e-9 * scale.sqrt()) => {
            (chi2_of(&|b: &DVector<f64>| ch.solve(b))?, true)
        }
        _ => {
            if (0..n).any(|i| !(cov[i][i] > 0.0)) {
                return None;
            }
            let diag = |b: &DVector<f64>| DVector::from_fn(n, |i, _| b[i] / cov[i][i]);
            (chi2_of(&diag)?, false)
        }
    };
    finish_consistency(chi2, n, generalised)
}

/// The coil's winding resistance as an input, if the block's inductor has a `dcr`.
fn dcr_input(ctx: &Context, block: &ReadingsBlock, flags: &mut Vec<Flag>) -> Option<Input> {
    let part = block
        .parts
        .iter()
        .filter_map(|n| ctx.parts.get(&n.name))
        .find(|p| p.kind == PartKind::Inductor);
    let Some(part) = part else {
        flags.push(Flag {
            warn: false,
            span: Some(block.span),
            message: "no inductor in `parts`: the DC-resistance correction (XL_dcr, L_dcr) is not computed".into(),
        });
        return None;
    };
    let Some(dcr) = part.dcr.filter(|q| q.value.is_finite() && q.value >= 0.0) else {
        flags.push(Flag {
            warn: false,
            span: Some(part.span),
            message: format!(
                "{} has no `dcr`: the DC-resistance correction (XL_dcr, L_dcr) is not computed",
                part.name
            ),
        });
        return None;
    };
    let name = format!("dcr({})", part.name);
    let inst = part
        .dcr_by
        .as_ref()
        .and_then(|b| ctx.instruments.get(b).map(|i| (b, i)));
    let u = match (&part.dcr_by, inst) {
        (Some(_), Some((_, i))) => {
            let a = accuracy_limit(i, dcr.value, Unit::Ohm);
            let d = if i.accuracy.is_some() {
                i.distribution
            } else {
                crate::notebook::Distribution::Rectangular
            };
            return Some(Input::type_b(name, dcr.value, type_b(a, d), dist_of(d)));
        }
        (Some(b), None) => {
            flags.push(Flag {
                warn: false,
                span: Some(part.span),
                message: format!(
                    "unknown instrument {b} for the dcr of {}: dcr taken as exact",
                    part.name
                ),
            });
            0.0
        }
        (None, _) => {
            flags.push(Flag {
                warn: false,
                span: Some(part.span),
                message: format!(
                    "dcr of {} names no instrument (`by`): taken as exact",
                    part.name
                ),
            });
            0.0
        }
    };
    Some(Input::type_b(name, dcr.value, u, Dist::Rectangular))
}

/// Within this of ±1, cos θ is taken as exactly ±1: readings of six or seven digits cannot
/// tell a flat triangle from one this close to flat (common practice).
const FLAT: f64 = 1e-9;

/// Why the voltage triangle of row group `g` does not close, in words; `None` when it does.
/// A flat triangle (Vs = VR + VL, θ = 0, or Vs = |VR − VL|, θ = 180°) has sin θ = 0 and an
/// infinite sensitivity of sin θ to cos θ, so it gives no L either.
fn open_triangle(c: f64, bi: &BlockInputs, g: usize, x: &[f64]) -> Option<String> {
    let (vs, vr, vl) = (
        bi.voltage("Vs", g, x),
        bi.voltage("VR", g, x),
        bi.voltage("VL", g, x),
    );
    let v = |x: f64| plain(x, 6);
    if c.abs() > 1.0 + FLAT {
        return Some(if c > 0.0 {
            format!(
                "Vs = {} V is above VR + VL = {} V (cos θ = {})",
                v(vs),
                v(vr + vl),
                plain(c, 4)
            )
        } else {
            format!(
                "Vs = {} V is below |VR − VL| = {} V (cos θ = {})",
                v(vs),
                v((vr - vl).abs()),
                plain(c, 4)
            )
        });
    }
    if c.abs() < 1.0 - FLAT {
        return None;
    }
    Some(if c > 0.0 {
        "Vs = VR + VL, so the coil's angle is 0".to_string()
    } else {
        "Vs = |VR − VL|, so the coil's angle would be 180°, which no passive coil has".to_string()
    })
}

/// Inverse-variance weights as (u_min/u_i)², in (0, 1] so no 1/u² can overflow; equal
/// weights when some row is exact.
fn weights_of(us: &[f64]) -> Vec<f64> {
    let umin = us.iter().copied().fold(f64::INFINITY, f64::min);
    match us
        .iter()
        .map(|u| ratio(umin, *u).map(|r| r * r))
        .collect::<Option<Vec<f64>>>()
    {
        Some(w) if umin > 0.0 => w,
        _ => vec![1.0; us.len()],
    }
}

pub fn reduce(ctx: &Context, block: &ReadingsBlock) -> Result<BlockResult, Vec<Diagnostic>> {
    let bi = BlockInputs::build(ctx, block, &NETWORK.spec)?;
    let d = check_positive(block, NETWORK.positive);
    if !d.is_empty() {
        return Err(d);
    }
    let mut flags = bi.flags.clone();
    let mut inputs = bi.inputs.clone();
    let dcr_idx = dcr_input(ctx, block, &mut flags).map(|inp| {
        inputs.push(inp);
        inputs.len() - 1
    });
    let dcr_value = dcr_idx.and_then(|i| inputs.get(i)).map(|i| i.value);
    let ng = bi.groups.len();
    let x0: Vec<f64> = inputs.iter().map(|i| i.value).collect();

    // cos θ per frequency with its uncertainty, to decide which rows close the triangle.
    let cos_model = |x: &[f64]| -> Vec<f64> {
        (0..ng)
            .map(|g| {
                cos_theta(
                    bi.voltage("Vs", g, x),
                    bi.voltage("VR", g, x),
                    bi.voltage("VL", g, x),
                )
            })
            .collect()
    };
    let pc = propagate(
        &Model {
            inputs: &inputs,
            corr: &bi.corr,
        },
        &cos_model,
        ctx.coverage,
    )
    .at_block(block)?;
    let ok = row_checks(&bi, &pc, &x0, dcr_value, &mut flags);

    // Row outputs.
    let layout = row_layout(&ok);
    let rows_model = |x: &[f64]| -> Vec<f64> {
        layout
            .iter()
            .map(|o| match o {
                Out::Row(g, n) => eval_row(&bi, dcr_idx, x, *g, n),
                Out::Block(_) => f64::NAN,
            })
            .collect()
    };
    let p1 = propagate(
        &Model {
            inputs: &inputs,
            corr: &bi.corr,
        },
        &rows_model,
        ctx.coverage,
    )
    .at_block(block)?;

    // Inverse-variance weights (fixed at the row uncertainties) for the block means.
    let weights = block_weights(&layout, &p1.results);
    let mut full = Outputs::default();
    for o in &layout {
        if let Out::Row(g, n) = *o {
            full.row(g, n, unit_of(n));
        }
    }
    for (name, _) in &weights {
        full.block(name, unit_of(name));
    }
    if weights.iter().any(|(n, _)| *n == "Rac") && dcr_idx.is_some() {
        full.block("Rac-dcr", Unit::Ohm);
    }
    // A block mean from the row values `y` (rows come first in `full`, as in `layout`).
    let mean_of = |name: &str, y: &[f64]| -> f64 {
        weights
            .iter()
            .find(|(n, _)| *n == name)
            .map(|(_, w)| {
                w.iter()
                    .map(|(i, wi)| wi * y.get(*i).copied().unwrap_or(f64::NAN))
                    .sum()
            })
            .unwrap_or(f64::NAN)
    };
    let full_model = |x: &[f64]| -> Vec<f64> {
        full.eval(
            |g, n| eval_row(&bi, dcr_idx, x, g, n),
            |name, y| match name {
                "Rac-dcr" => {
                    mean_of("Rac", y) - dcr_idx.and_then(|i| x.get(i).copied()).unwrap_or(f64::NAN)
                }
                _ => mean_of(name, y),
            },
        )
    };
    let p = propagate(
        &Model {
            inputs: &inputs,
            corr: &bi.corr,
        },
        &full_model,
        ctx.coverage,
    )
    .at_block(block)?;

    // Results per row.
    let mut rows: Vec<NamedResult> = Vec::new();
    for (k, o) in layout.iter().enumerate() {
        let Out::Row(g, name) = *o else { continue };
        rows.push(NamedResult {
            name: name.to_string(),
            f: bi.groups.get(g).and_then(|gr| gr.f),
            unit: unit_of(name),
            m: p.results[k].clone(),
        });
    }
    let run = Run {
        ctx,
        block,
        bi: &bi,
        inputs: &inputs,
        layout: &layout,
        p: &p,
    };
    if ng <= crate::montecarlo::MAX_ROWS {
        monte_carlo_rows(&run, &ok.tri, &mut rows, &mut flags);
    } else {
        flags.push(crate::montecarlo::rows_skipped(ng, block.span));
    }
    let correlations = row_flags(&run, &mut flags);
    let results = block_results(&run, &full, &weights, dcr_value, &mut flags);
    let plot = plot_of(&rows);
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

/// Which outputs each row group can have: the triangle closes (Rac, XL, L), cos θ > 0 (Q),
/// VL is above the drop across dcr (XL_dcr, L_dcr).
struct RowsOk {
    tri: Vec<bool>,
    q: Vec<bool>,
    dc: Vec<bool>,
}

/// The row checks on cos θ (`pc`, one output per group) and on the dcr drop, with their flags.
fn row_checks(
    bi: &BlockInputs,
    pc: &Propagated,
    x0: &[f64],
    dcr_value: Option<f64>,
    flags: &mut Vec<Flag>,
) -> RowsOk {
    let ng = bi.groups.len();
    let mut tri_ok = vec![false; ng];
    let mut q_ok = vec![false; ng];
    let mut dc_ok = vec![false; ng];
    for (g, grp) in bi.groups.iter().enumerate() {
        let f = grp.f.unwrap_or(f64::NAN);
        let (c, uc) = (pc.values[g], pc.results[g].expanded);
        if let Some(why) = open_triangle(c, bi, g, x0) {
            flags.push(Flag {
                warn: true,
                span: Some(grp.span),
                message: format!(
                    "at {}: the three readings close no triangle: {why}: Rac, XL, L and Q cannot be inferred from this row and are left out",
                    hz(f),
                ),
            });
        } else if c < -uc {
            flags.push(Flag {
                warn: true,
                span: Some(grp.span),
                message: format!(
                    "at {}: cos θ = {} is negative beyond its uncertainty (a negative coil resistance): the three-voltmeter results of this row are not computed",
                    hz(f),
                    plain(c, 3)
                ),
            });
        } else {
            tri_ok[g] = true;
            q_ok[g] = c > 0.0;
            if c <= uc {
                flags.push(Flag {
                    warn: false,
                    span: Some(grp.span),
                    message: format!(
                        "at {}: cos θ = {} is zero within its uncertainty: Rac is not resolved{}",
                        hz(f),
                        plain(c, 3),
                        if q_ok[g] {
                            ""
                        } else {
                            " and Q is not computed"
                        }
                    ),
                });
            }
            if c + uc >= 1.0 {
                flags.push(Flag {
                    warn: false,
                    span: Some(grp.span),
                    message: format!("at {}: cos θ is 1 within its uncertainty (XL not resolved); the linear propagation is poor here, see the Monte Carlo interval", hz(f)),
                });
            }
        }
        if let Some(dcr) = dcr_value {
            let vr = bi.voltage("VR", g, x0);
            let vl = bi.voltage("VL", g, x0);
            let drop = vr / bi.r(x0) * dcr;
            if vl > drop {
                dc_ok[g] = true;
            } else {
                flags.push(Flag {
                    warn: false,
                    span: Some(grp.span),
                    message: format!(
                        "at {}: VL = {} V is not above the resistive drop I·dcr = {} V: XL_dcr is not computed",
                        hz(f),
                        plain(vl, 4),
                        plain(drop, 4)
                    ),
                });
            }
        }
    }
    RowsOk {
        tri: tri_ok,
        q: q_ok,
        dc: dc_ok,
    }
}

/// The row outputs, group by group, as far as [`RowsOk`] allows.
fn row_layout(ok: &RowsOk) -> Vec<Out> {
    let (tri_ok, q_ok, dc_ok) = (&ok.tri, &ok.q, &ok.dc);
    let ng = tri_ok.len();
    let mut layout: Vec<Out> = Vec::new();
    for g in 0..ng {
        layout.push(Out::Row(g, "I"));
        if tri_ok[g] {
            layout.extend([Out::Row(g, "Rac"), Out::Row(g, "XL"), Out::Row(g, "L")]);
            if q_ok[g] {
                layout.push(Out::Row(g, "Q"));
            }
        }
        if dc_ok[g] {
            layout.extend([Out::Row(g, "XL_dcr"), Out::Row(g, "L_dcr")]);
        }
    }
    layout
}

/// Row output `name` of group `g` at inputs `x` (`dcr_idx`: the dcr input, if any).
fn eval_row(bi: &BlockInputs, dcr_idx: Option<usize>, x: &[f64], g: usize, name: &str) -> f64 {
    let (vs, vr, vl) = (
        bi.voltage("Vs", g, x),
        bi.voltage("VR", g, x),
        bi.voltage("VL", g, x),
    );
    let (r, f) = (bi.r(x), bi.f(g, x));
    match name {
        "I" => vr / r,
        "Rac" => three_voltmeter(vs, vr, vl, r, f)[1],
        "XL" => three_voltmeter(vs, vr, vl, r, f)[2],
        "L" => three_voltmeter(vs, vr, vl, r, f)[3],
        "Q" => three_voltmeter(vs, vr, vl, r, f)[4],
        "XL_dcr" | "L_dcr" => {
            let dcr = dcr_idx.and_then(|i| x.get(i).copied()).unwrap_or(f64::NAN);
            dcr_method(vr, vl, r, dcr, f)[if name == "XL_dcr" { 0 } else { 1 }]
        }
        _ => f64::NAN,
    }
}

fn unit_of(n: &str) -> Unit {
    match n {
        "I" => Unit::A,
        "L" | "L_dcr" => Unit::H,
        "Q" => Unit::One,
        _ => Unit::Ohm,
    }
}

/// Per block mean (L, L_dcr, Rac): its row outputs with normalised inverse-variance weights.
type Weights = Vec<(&'static str, Vec<(usize, f64)>)>;

fn block_weights(layout: &[Out], results: &[Measured]) -> Weights {
    let mut weights: Weights = Vec::new();
    for name in ["L", "L_dcr", "Rac"] {
        let idx: Vec<usize> = layout
            .iter()
            .enumerate()
            .filter(|(_, o)| matches!(o, Out::Row(_, n) if *n == name))
            .map(|(i, _)| i)
            .collect();
        if idx.is_empty() {
            continue;
        }
        let us: Vec<f64> = idx.iter().map(|&i| results[i].u).collect();
        let w = weights_of(&us);
        let sw: f64 = w.iter().sum();
        weights.push((
            name,
            idx.into_iter().zip(w.into_iter().map(|v| v / sw)).collect(),
        ));
    }
    weights
}

/// What the steps after the propagation read.
struct Run<'a> {
    ctx: &'a Context<'a>,
    block: &'a ReadingsBlock,
    bi: &'a BlockInputs,
    inputs: &'a [Input],
    layout: &'a [Out],
    /// The propagation of the rows and the block means.
    p: &'a Propagated,
}

/// Monte Carlo (JCGM 101) of each row's three-voltmeter results, and §8 validation.
fn monte_carlo_rows(run: &Run, tri_ok: &[bool], rows: &mut [NamedResult], flags: &mut Vec<Flag>) {
    let Run {
        ctx,
        block,
        bi,
        inputs,
        layout,
        p,
    } = *run;
    let ng = bi.groups.len();
    let mut not_validated: Vec<String> = Vec::new();
    // The rows are independent (one seed each): they run in parallel, in a fixed order.
    let runs: Vec<(usize, Vec<&'static str>, Vec<McInterval>)> = (0..ng)
        .into_par_iter()
        .filter(|&g| tri_ok.get(g).copied().unwrap_or(false))
        // A row whose results are exact has nothing to draw (the adaptive rule would never
        // see its zero spread settle).
        .filter(|&g| {
            layout
                .iter()
                .zip(&p.results)
                .any(|(o, m)| matches!(o, Out::Row(gg, _) if *gg == g) && m.u > 0.0)
        })
        .map(|g| {
            let names: Vec<&'static str> = layout
                .iter()
                .filter_map(|o| match o {
                    Out::Row(gg, n) if *gg == g && ["I", "Rac", "XL", "L", "Q"].contains(n) => {
                        Some(*n)
                    }
                    _ => None,
                })
                .collect();
            // Lookups resolved once: the model runs for every chunk of Monte Carlo trials.
            let pick: Vec<usize> = names
                .iter()
                .map(|n| match *n {
                    "I" => 0,
                    "Rac" => 1,
                    "XL" => 2,
                    "L" => 3,
                    _ => 4,
                })
                .collect();
            let (vs_cols, vr_cols, vl_cols) = (
                bi.voltage_cols("Vs", g),
                bi.voltage_cols("VR", g),
                bi.voltage_cols("VL", g),
            );
            let columns = |c: &Columns, out: &mut [f64], scratch: &mut Vec<f64>| {
                scratch.resize(10 * CHUNK, 0.0);
                let (x, y) = scratch.split_at_mut(5 * CHUNK);
                let mut x = x.chunks_exact_mut(CHUNK);
                let mut col = || x.next().expect("five input columns");
                let (vs, vr, vl, r, f) = (col(), col(), col(), col(), col());
                vs_cols(c, vs);
                vr_cols(c, vr);
                vl_cols(c, vl);
                bi.r_cols(c, r);
                bi.f_cols(g, c, f);
                three_voltmeter_cols([vs, vr, vl, r, f], y, c.len);
                for (o, &k) in pick.iter().enumerate() {
                    let from = &y[k * CHUNK..k * CHUNK + c.len];
                    out[o * CHUNK..o * CHUNK + c.len].copy_from_slice(from);
                }
            };
            let mc_model = crate::montecarlo::InPlace {
                outputs: pick.len(),
                eval: crate::montecarlo::Eval::Chunk(&columns),
            };
            let outs: Vec<usize> = layout
                .iter()
                .enumerate()
                .filter(|(_, o)| matches!(o, Out::Row(gg, n) if *gg == g && names.contains(n)))
                .map(|(k, _)| k)
                .collect();
            // The inputs the Monte Carlo outputs read (not the DC method's winding resistance).
            let used = p.inputs_of(&outs);
            let mc = monte_carlo_on(
                inputs,
                &bi.corr,
                &used,
                mc_model,
                ctx.coverage,
                crate::montecarlo::seed_of(&block.id, g as u64),
                None,
            );
            (g, names, mc)
        })
        .collect();
    for (g, names, mc) in runs {
        let f = bi.groups.get(g).and_then(|gr| gr.f);
        let mut unvalidated = Vec::new();
        // Every output of a trial is kept or dropped together, so one count serves the row.
        flags.extend(mc.first().and_then(|iv| {
            crate::montecarlo::dropped_flag(
                iv,
                &f.map(hz).unwrap_or_default(),
                bi.groups.get(g).map(|gr| gr.span),
                "readings whose triangle does not close",
                "the triangle closing",
            )
        }));
        for (n, interval) in names.iter().zip(mc) {
            if let Some(r) = rows.iter_mut().find(|r| r.f == f && r.name == *n) {
                r.m.mc = Some(interval);
                if let Some(v) = attach_validation(&mut r.m) {
                    if !v.validated && r.m.u > 0.0 {
                        unvalidated.push(*n);
                    }
                }
            }
        }
        if !unvalidated.is_empty() {
            not_validated.push(format!(
                "{} ({})",
                f.map(hz).unwrap_or_default(),
                unvalidated.join(", ")
            ));
        }
    }
    if !not_validated.is_empty() {
        flags.push(Flag {
            warn: false,
            span: Some(block.span),
            message: format!(
                "the GUM intervals differ from the Monte Carlo intervals by more than the numerical tolerance (JCGM 101 §8) at {}: the record marks those results † and prints their Monte Carlo intervals (probabilistically symmetric, JCGM 101 §7.7.2) under the table",
                not_validated.join("; ")
            ),
        });
    }
}

/// Row checks: relative uncertainties and the better-conditioned method; the Rac–XL
/// correlation per row.
fn row_flags(run: &Run, flags: &mut Vec<Flag>) -> Vec<Correlation> {
    let (bi, layout, p) = (run.bi, run.layout, run.p);
    let mut correlations = Vec::new();
    let get = |g: usize, n: &str| -> Option<&Measured> {
        layout
            .iter()
            .position(|o| matches!(o, Out::Row(gg, nn) if *gg == g && *nn == n))
            .and_then(|k| p.results.get(k))
    };
    for (g, grp) in bi.groups.iter().enumerate() {
        let fs = grp.f.map(hz).unwrap_or_default();
        let mut big = Vec::new();
        for n in ["L", "Rac"] {
            // A zero Rac (cos θ = 0) has no relative u; the cos θ flag above says so.
            if let Some(r) = get(g, n).and_then(relative_u) {
                if r > REL_U_LIMIT {
                    big.push(format!("{n} ({} %)", plain(100.0 * r, 2)));
                }
            }
        }
        if !big.is_empty() {
            flags.push(Flag {
                warn: false,
                span: Some(grp.span),
                message: format!(
                    "at {fs}: three-voltmeter relative standard uncertainty above 20 %: {}",
                    big.join(", ")
                ),
            });
        }
        let rel_pair = (get(g, "L").map(relative_u), get(g, "L_dcr").map(relative_u));
        if let (Some(Some(ra)), Some(Some(rb))) = rel_pair {
            // Within 5 % of each other the two are reported as alike.
            let verdict = if (ra - rb).abs() <= 0.05 * ra.max(rb) {
                "the two methods are about equally well conditioned".to_string()
            } else if ra < rb {
                "the three-voltmeter method is better conditioned".to_string()
            } else {
                "the DC-resistance correction method is better conditioned".to_string()
            };
            flags.push(Flag {
                warn: false,
                span: Some(grp.span),
                message: format!(
                    "at {fs}: {verdict} (u(L)/L = {} % three-voltmeter, {} % with dcr)",
                    plain(100.0 * ra, 2),
                    plain(100.0 * rb, 2)
                ),
            });
        }
        if let (Some(a), Some(b)) = (get(g, "Rac"), get(g, "XL")) {
            let (ia, ib) = (
                layout.iter().position(|o| *o == Out::Row(g, "Rac")),
                layout.iter().position(|o| *o == Out::Row(g, "XL")),
            );
            if let (Some(ia), Some(ib)) = (ia, ib) {
                if a.u > 0.0 && b.u > 0.0 {
                    correlations.push(Correlation {
                        a: "Rac".into(),
                        b: "XL".into(),
                        r: correlation(p, ia, ib),
                        f: grp.f,
                    });
                }
            }
        }
    }

    correlations
}

/// Block results and their consistency; `outs` are the block outputs, which follow the row
/// outputs in the propagation. The Rac − dcr output becomes a flag, not a result.
fn block_results(
    run: &Run,
    outs: &Outputs,
    weights: &Weights,
    dcr_value: Option<f64>,
    flags: &mut Vec<Flag>,
) -> Vec<NamedResult> {
    let (block, p) = (run.block, run.p);
    let mut results = Vec::new();
    for (k, o, _) in outs.iter() {
        let Out::Block(name) = o else { continue };
        let Some(m) = p.results.get(k) else { continue };
        if name == "Rac-dcr" {
            let dcr = dcr_value.unwrap_or(f64::NAN);
            let rac = m.value + dcr;
            let verdict = if m.value.abs() <= m.expanded {
                "equal within the expanded uncertainty".to_string()
            } else if m.value > 0.0 {
                "Rac is the larger, as expected of a coil's AC losses (skin and proximity effect, core loss)".to_string()
            } else {
                "Rac is below the DC resistance, which a coil cannot do: check R, dcr and the readings".to_string()
            };
            flags.push(Flag {
                warn: m.value < -m.expanded,
                span: Some(block.span),
                message: format!(
                    "Rac (mean) = {} against dcr = {}: difference {}; {verdict}",
                    crate::print::quantity(rac, Unit::Ohm),
                    crate::print::quantity(dcr, Unit::Ohm),
                    crate::print::value_u_k(m.value, m.expanded, m.k, Unit::Ohm)
                ),
            });
            continue;
        }
        results.push(NamedResult {
            name: name.to_string(),
            f: None,
            unit: unit_of(name),
            m: m.clone(),
        });
        // χ² over the rows of this result.
        let idx: Vec<usize> = weights
            .iter()
            .find(|(n, _)| *n == name)
            .map(|(_, w)| w.iter().map(|(i, _)| *i).collect())
            .unwrap_or_default();
        let xs: Vec<f64> = idx.iter().map(|&i| p.values[i]).collect();
        let cov = |a: usize, b: usize| p.cov(idx[a], idx[b]);
        flags.extend(consistency_flag(name, &xs, &cov, block.span));
    }

    results
}

/// Plot series (f, y, u).
fn plot_of(rows: &[NamedResult]) -> PlotData {
    let mut plot = PlotData::default();
    for name in ["XL", "L", "L_dcr", "Rac"] {
        let pts: Vec<(f64, f64, f64)> = rows
            .iter()
            .filter(|r| r.name == name)
            .filter_map(|r| r.f.map(|f| (f, r.m.value, r.m.u)))
            .collect();
        plot.series.push((name.to_string(), pts));
    }
    plot
}

#[cfg(test)]
mod tests {
    /// The chunked three-voltmeter model gives what the per-trial one gives, bit for bit, on
    /// a coil at 80° and on a triangle that does not close (NaN outputs, dropped later).
    #[test]
    fn three_voltmeter_over_columns_is_the_same_arithmetic() {
        use super::{three_voltmeter, three_voltmeter_cols, CHUNK};
        let n = 37;
        let mut x = vec![[0.0; CHUNK]; 5];
        for t in 0..n {
            let d = t as f64 * 1e-3;
            x[0][t] = 1.5 + d;
            x[1][t] = 1.2 - d;
            x[2][t] = if t == 5 { 0.01 } else { 0.77 + d };
            x[3][t] = 22.0;
            x[4][t] = 1000.0;
        }
        let want: Vec<[f64; 5]> = (0..n)
            .map(|t| three_voltmeter(x[0][t], x[1][t], x[2][t], x[3][t], x[4][t]))
            .collect();
        let mut y = vec![0.0; 5 * CHUNK];
        let [a, b, c, d, e] = &mut x[..] else {
            unreachable!()
        };
        three_voltmeter_cols([a, b, c, d, e], &mut y, n);
        for (t, w) in want.iter().enumerate() {
            for k in 0..5 {
                assert_eq!(
                    y[k * CHUNK + t].to_bits(),
                    w[k].to_bits(),
                    "trial {t} output {k}"
                );
            }
        }
        assert!(
            want[5][2].is_nan(),
            "the triangle at trial 5 does not close: no XL"
        );
    }

    /// Dropped trials (JCGM 101 §7: the model is undefined for part of the input law) are
    /// counted and make the interval conditional; above 1 % the flag is a warning.
    #[test]
    fn dropped_trials_are_counted_and_warned_above_one_percent() {
        let iv = |trials, dropped| McInterval {
            trials,
            dropped,
            mean: 0.0,
            u: 1.0,
            low: -2.0,
            high: 2.0,
            gum_validated: false,
        };
        let dropped_flag = |iv: &McInterval, _f: Option<f64>, _g: Option<()>| {
            crate::montecarlo::dropped_flag(
                iv,
                "100 Hz",
                None,
                "readings whose triangle does not close",
                "the triangle closing",
            )
        };
        assert!(dropped_flag(&iv(1000, 0), Some(100.0), None).is_none());
        let many = dropped_flag(&iv(790_000, 210_000), Some(100.0), None).unwrap();
        assert!(many.warn);
        assert!(many.message.contains("210000 of 1000000") && many.message.contains("(21 %)"));
        assert!(many.message.contains("conditional"));
        assert!(
            !dropped_flag(&iv(995_000, 5_000), Some(100.0), None)
                .unwrap()
                .warn
        );
        assert!(
            dropped_flag(&iv(989_000, 11_000), Some(100.0), None)
                .unwrap()
                .warn
        );
    }
    use super::super::inputs::testutil::*;
    use super::*;
    use crate::notebook::Network;
    use crate::notebook::{Accuracy, Part, Tolerance};
    use crate::quantity::Quantity;
    use num_complex::Complex64;

    /// Readings of a series R + (Rc + jωL) from complex arithmetic.
    fn ideal(r: f64, l: f64, rc: f64, vs: f64, f: f64) -> [f64; 4] {
        let w = 2.0 * PI * f;
        let zl = Complex64::new(rc, w * l);
        let i = Complex64::new(vs, 0.0) / (zl + r);
        [f, vs, (i * r).norm(), (i * zl).norm()]
    }

    fn coil(name: &str, dcr: Option<f64>) -> Part {
        Part {
            name: name.into(),
            kind: PartKind::Inductor,
            nominal: Some(Quantity {
                value: 0.068,
                unit: Unit::H,
            }),
            tolerance: Some(Tolerance::Relative(0.1)),
            measured: None,
            measured_by: None,
            dcr: dcr.map(|v| Quantity {
                value: v,
                unit: Unit::Ohm,
            }),
            dcr_by: None,
            rating: None,
            loss: Default::default(),
            span: Default::default(),
        }
    }

    /// The test meter `dmm`: `fraction` of reading + 2 counts of 0.1 mV.
    fn dmm(fraction: f64) -> crate::notebook::Instrument {
        instrument(
            "dmm",
            Some(Accuracy::Relative {
                fraction,
                counts: 2.0,
            }),
            Some(Quantity {
                value: 1e-4,
                unit: Unit::V,
            }),
        )
    }

    fn cols() -> Vec<(&'static str, Unit)> {
        vec![
            ("f", Unit::Hz),
            ("Vs", Unit::V),
            ("VR", Unit::V),
            ("VL", Unit::V),
        ]
    }

    // Law of cosines in the voltage triangle (three-voltmeter method as in electrical
    // measurement handbooks, e.g. Golding & Widdis, from memory): a 3-5-7 triangle. With
    // VR = 3, VL = 5 and θ = 60°, Vs² = 9 + 25 + 2·15·0.5 = 49: Vs = 7, cos θ = 0.5. (The 3-4-5
    // case, an ideal coil, is in tests/reference_bite.rs.)
    #[test]
    fn law_of_cosines_triangle() {
        assert!((cos_theta(7.0, 3.0, 5.0) - 0.5).abs() < 1e-15);
        // I = 3 V / 30 Ω = 0.1 A, |Z| = 50 Ω: Rac = 25 Ω, XL = 50·sin 60° = 43.30 Ω.
        let [i, rac, xl, l, q] = three_voltmeter(7.0, 3.0, 5.0, 30.0, 50.0);
        assert!((i - 0.1).abs() < 1e-15 && (rac - 25.0).abs() < 1e-12);
        assert!((xl - 25.0 * 3f64.sqrt()).abs() < 1e-12);
        assert!((l - xl / (100.0 * PI)).abs() < 1e-15 && (q - 3f64.sqrt()).abs() < 1e-12);
    }

    // Triangles that cannot close, one each way, and a flat one, next to a good row: each is
    // named with its own side lengths (Vs = 3 V above VR + VL = 2 V; Vs = 0.5 V below
    // |VR − VL| = 1 V; Vs = VR + VL = 2 V, θ = 0).
    #[test]
    fn open_triangles_say_which_side_is_wrong() {
        let mut env = Env::new();
        env.parts.insert(
            "R3".into(),
            resistor("R3", 100.0, Some(Tolerance::Relative(0.01))),
        );
        env.parts.insert("L3".into(), coil("L3", None));
        let mut data = vec![ideal(100.0, 0.0683, 27.5, 1.7, 400.0).to_vec()];
        data.push(vec![500.0, 3.0, 1.0, 1.0]);
        data.push(vec![600.0, 0.5, 2.0, 1.0]);
        // Flat: Vs = VR + VL exactly, cos θ = 1.
        data.push(vec![700.0, 2.0, 1.0, 1.0]);
        let mut b = block(Network::RL, &cols(), &data);
        b.parts = vec![named("R3"), named("L3")];
        let out = reduce(&env.ctx(), &b).unwrap();
        let said = |w: &str| out.flags.iter().any(|f| f.message.contains(w));
        assert!(said("Vs = 3 V is above VR + VL = 2 V"), "{:?}", out.flags);
        assert!(
            said("Vs = 0.5 V is below |VR − VL| = 1 V"),
            "{:?}",
            out.flags
        );
        assert!(
            said("Vs = VR + VL, so the coil's angle is 0"),
            "{:?}",
            out.flags
        );
        assert_eq!(
            out.flags
                .iter()
                .filter(|f| f.message.contains(" is above "))
                .count(),
            1
        );
        // The good row (θ well inside 0°–90°) is resolved both ways: no cos θ ≈ 1 or 0 note.
        assert!(!said("cos θ is 1 within") && !said("zero within its uncertainty"));
    }

    // A winding resistance above the coil's whole impedance: VL is below I·dcr, so the DC
    // correction has no XL (I = VR/R; the drop is I·dcr, not I/dcr).
    #[test]
    fn a_dcr_drop_above_vl_gives_no_dc_result() {
        let mut env = Env::new();
        env.parts.insert(
            "R3".into(),
            resistor("R3", 100.0, Some(Tolerance::Relative(0.01))),
        );
        env.parts.insert("L3".into(), coil("L3", Some(1000.0)));
        let data = vec![ideal(100.0, 0.0683, 27.5, 1.7, 400.0).to_vec()];
        let mut b = block(Network::RL, &cols(), &data);
        b.parts = vec![named("R3"), named("L3")];
        let out = reduce(&env.ctx(), &b).unwrap();
        assert!(
            out.flags
                .iter()
                .any(|f| f.message.contains("is not above the resistive drop I·dcr")),
            "{:?}",
            out.flags
        );
        assert!(!out.rows.iter().any(|r| r.name == "L_dcr"));
    }

    // Exact readings of a 68.3 mH coil whose AC resistance is 27.5 Ω, with dcr = 25 Ω: the
    // block means are the coil's own L and Rac, and the flag compares Rac with dcr by their
    // difference, 2.5 Ω (ideal-coil phasor model; common practice). The conditioning note
    // prints each method's u(L)/L in percent as its row results give them.
    #[test]
    fn block_means_and_the_dcr_comparison_are_the_coils_own() {
        let mut env = Env::new();
        env.parts.insert(
            "R3".into(),
            resistor("R3", 100.0, Some(Tolerance::Relative(0.01))),
        );
        env.parts.insert("L3".into(), coil("L3", Some(25.0)));
        let data: Vec<Vec<f64>> = [400.0, 800.0]
            .iter()
            .map(|&f| ideal(100.0, 0.0683, 27.5, 1.7, f).to_vec())
            .collect();
        let mut b = block(Network::RL, &cols(), &data);
        b.parts = vec![named("R3"), named("L3")];
        let out = reduce(&env.ctx(), &b).unwrap();
        let mean = |n: &str| out.results.iter().find(|r| r.name == n).unwrap().m.value;
        assert!((mean("L") - 0.0683).abs() < 1e-9, "{}", mean("L"));
        assert!((mean("Rac") - 27.5).abs() < 1e-6, "{}", mean("Rac"));
        let said: Vec<&str> = out.flags.iter().map(|f| f.message.as_str()).collect();
        let dcr = said
            .iter()
            .find(|m| m.starts_with("Rac (mean) = "))
            .unwrap_or_else(|| panic!("{said:?}"));
        assert!(dcr.starts_with("Rac (mean) = 27.5"), "{dcr}");
        assert!(dcr.contains("against dcr = 25"), "{dcr}");
        assert!(dcr.contains("difference (2.50 ±"), "{dcr}");
        assert!(dcr.contains("Rac is the larger"), "{dcr}");
        for f in [400.0, 800.0] {
            let rel = |n: &str| {
                let r = out
                    .rows
                    .iter()
                    .find(|r| r.name == n && r.f == Some(f))
                    .unwrap();
                format!("{:.2}", 100.0 * r.m.u / r.m.value)
            };
            let want = format!(
                "(u(L)/L = {} % three-voltmeter, {} % with dcr)",
                rel("L"),
                rel("L_dcr")
            );
            assert!(
                said.iter().any(|m| m.ends_with(&want)),
                "{want} in {said:?}"
            );
        }
    }

    // The same coil against a dcr above its Rac (30 Ω) and equal to it (27.5 Ω): the first is a
    // warning that no coil does that, the second "equal within" (a coil's AC resistance is at
    // least its DC resistance: skin and proximity effect, core loss; common practice). Rows carry
    // their units (I in A, L in H, Q a pure number, the rest Ω), and each row's conditioning
    // verdict follows its printed u(L)/L: within 5 % alike, else the smaller one is better.
    #[test]
    fn dcr_above_rac_is_a_warning_and_rows_carry_units() {
        for (dcr, words, warn) in [
            (30.0, "Rac is below the DC resistance", true),
            (27.5, "equal within the expanded uncertainty", false),
        ] {
            let mut env = Env::new();
            env.parts.insert(
                "R3".into(),
                resistor("R3", 100.0, Some(Tolerance::Relative(0.001))),
            );
            env.parts.insert("L3".into(), coil("L3", Some(dcr)));
            let data: Vec<Vec<f64>> = [300.0, 600.0, 1200.0]
                .iter()
                .map(|&f| ideal(100.0, 0.0683, 27.5, 1.7, f).to_vec())
                .collect();
            let mut b = block(Network::RL, &cols(), &data);
            b.parts = vec![named("R3"), named("L3")];
            let out = reduce(&env.ctx(), &b).unwrap();
            let flag = out
                .flags
                .iter()
                .find(|f| f.message.starts_with("Rac (mean) = "))
                .unwrap();
            assert!(flag.message.contains(words), "{dcr}: {}", flag.message);
            assert_eq!(flag.warn, warn, "{dcr}: {}", flag.message);
            for r in &out.rows {
                let want = match r.name.as_str() {
                    "I" => Unit::A,
                    "L" | "L_dcr" => Unit::H,
                    "Q" => Unit::One,
                    _ => Unit::Ohm,
                };
                assert_eq!(r.unit, want, "{}", r.name);
                // Monte Carlo runs the three-voltmeter outputs, each its own interval; the DC
                // method's rows have none.
                match (r.name.as_str(), &r.m.mc) {
                    ("L_dcr" | "XL_dcr", mc) => assert!(mc.is_none(), "{}: {mc:?}", r.name),
                    (_, Some(mc)) => assert!(
                        (mc.mean - r.m.value).abs() < 3.0 * r.m.u.max(mc.u),
                        "{} at {:?}: {mc:?} for {}",
                        r.name,
                        r.f,
                        r.m.value
                    ),
                    (n, None) => panic!("{n} at {:?} has no Monte Carlo", r.f),
                }
            }
            for f in [300.0, 600.0, 1200.0] {
                let rel = |n: &str| {
                    let r = out
                        .rows
                        .iter()
                        .find(|r| r.name == n && r.f == Some(f))
                        .unwrap();
                    r.m.u / r.m.value
                };
                let (ra, rb) = (rel("L"), rel("L_dcr"));
                let verdict = if (ra - rb).abs() <= 0.05 * ra.max(rb) {
                    "about equally well conditioned"
                } else if ra < rb {
                    "the three-voltmeter method is better conditioned"
                } else {
                    "the DC-resistance correction method is better conditioned"
                };
                let at = format!("at {}: ", hz(f));
                let said = out
                    .flags
                    .iter()
                    .find(|x| x.message.starts_with(&at) && x.message.contains("conditioned"))
                    .unwrap();
                assert!(
                    said.message.contains(verdict),
                    "{ra} {rb}: {}",
                    said.message
                );
            }
        }
    }

    // A nearly resistive coil (1 mH, 50 Ω at 50 Hz: θ = atan(0.314/50) = 0.36°, cos θ =
    // 0.99998, ideal-coil phasor model) closes its triangle, but cos θ is 1 within its own
    // uncertainty: the row says XL is not resolved and points at the Monte Carlo interval.
    // A well-resolved row (68.3 mH, 27.5 Ω at 400 Hz, θ = 81°) gets no such note.
    #[test]
    fn a_coil_angle_within_u_of_zero_is_noted() {
        let mut env = Env::new();
        env.parts.insert(
            "R3".into(),
            resistor("R3", 100.0, Some(Tolerance::Relative(0.01))),
        );
        env.parts.insert("L3".into(), coil("L3", None));
        env.instruments.insert("dmm".into(), dmm(0.003));
        let data = vec![
            ideal(100.0, 0.001, 50.0, 1.7, 50.0).to_vec(),
            ideal(100.0, 0.0683, 27.5, 1.7, 400.0).to_vec(),
        ];
        let mut b = block(Network::RL, &cols(), &data);
        b.parts = vec![named("R3"), named("L3")];
        b.meter = Some(named("dmm"));
        let out = reduce(&env.ctx(), &b).unwrap();
        let noted = |f: &str| {
            out.flags.iter().any(|x| {
                x.message
                    .starts_with(&format!("at {f}: cos θ is 1 within its uncertainty"))
            })
        };
        assert!(noted("50 Hz"), "{:?}", out.flags);
        assert!(!noted("400 Hz"), "{:?}", out.flags);
    }

    // A block of one row gets its row's Monte Carlo intervals too.
    #[test]
    fn a_single_row_gets_its_monte_carlo() {
        let mut env = Env::new();
        env.parts.insert(
            "R3".into(),
            resistor("R3", 100.0, Some(Tolerance::Relative(0.01))),
        );
        env.parts.insert("L3".into(), coil("L3", None));
        let data = vec![ideal(100.0, 0.0683, 27.5, 1.7, 400.0).to_vec()];
        let mut b = block(Network::RL, &cols(), &data);
        b.parts = vec![named("R3"), named("L3")];
        let out = reduce(&env.ctx(), &b).unwrap();
        for n in ["I", "Rac", "XL", "L", "Q"] {
            let r = out.rows.iter().find(|r| r.name == n).unwrap();
            assert!(r.m.mc.is_some(), "{n}");
        }
        // The figure draws each result's own rows: (f, value, u).
        for (name, pts) in &out.plot.series {
            let r = out.rows.iter().find(|r| &r.name == name);
            let want: Vec<(f64, f64, f64)> = r
                .map(|r| vec![(400.0, r.m.value, r.m.u)])
                .unwrap_or_default();
            assert_eq!(pts, &want, "{name}");
        }
        assert_eq!(out.plot.series.len(), 4);
    }

    // Exact readings and an exact resistor: every row result has u = 0, so no r(Rac, XL) is
    // reported (a correlation needs two variances, GUM 5.2.2).
    #[test]
    fn exact_rows_report_no_correlation() {
        let mut env = Env::new();
        env.parts.insert("R3".into(), resistor("R3", 100.0, None));
        env.parts.insert("L3".into(), coil("L3", None));
        let data = vec![
            ideal(100.0, 0.0683, 27.5, 1.7, 400.0).to_vec(),
            ideal(100.0, 0.0683, 27.5, 1.7, 800.0).to_vec(),
        ];
        let mut b = block(Network::RL, &cols(), &data);
        b.parts = vec![named("R3"), named("L3")];
        let out = reduce(&env.ctx(), &b).unwrap();
        assert!(out.rows.iter().all(|r| r.m.u == 0.0), "{:?}", out.rows);
        assert!(out.correlations.is_empty(), "{:?}", out.correlations);
        // Nothing to draw, so no Monte Carlo (its adaptive rule would run to its limit).
        assert!(out.rows.iter().all(|r| r.m.mc.is_none()));
    }

    // A coil whose AC resistance rises with frequency (27.5, 35, 45 Ω at 0.3, 0.6, 1.2 kHz, as
    // skin effect does; common practice) and whose L does not: the agreement test of each block
    // value uses that result's own rows, so Rac disagrees and L agrees. The JCGM 101 §8 note
    // names exactly the rows and results whose GUM interval Monte Carlo did not validate.
    #[test]
    fn each_block_value_is_tested_on_its_own_rows() {
        let mut env = Env::new();
        env.parts.insert(
            "R3".into(),
            resistor("R3", 100.0, Some(Tolerance::Relative(0.001))),
        );
        env.parts.insert("L3".into(), coil("L3", None));
        env.instruments.insert("dmm".into(), dmm(0.001));
        let data: Vec<Vec<f64>> = [(300.0, 27.5), (600.0, 35.0), (1200.0, 45.0)]
            .iter()
            .map(|&(f, rc)| ideal(100.0, 0.0683, rc, 1.7, f).to_vec())
            .collect();
        let mut b = block(Network::RL, &cols(), &data);
        b.parts = vec![named("R3"), named("L3")];
        b.meter = Some(named("dmm"));
        let out = reduce(&env.ctx(), &b).unwrap();
        let says = |start: &str| out.flags.iter().find(|f| f.message.starts_with(start));
        let rac = says("Rac: the frequencies").unwrap();
        assert!(
            rac.warn && rac.message.contains("disagree"),
            "{}",
            rac.message
        );
        let l = says("L: the ").unwrap();
        assert!(!l.warn && l.message.contains("agree ("), "{}", l.message);
        let mut want = Vec::new();
        for f in [300.0, 600.0, 1200.0] {
            let names: Vec<&str> = out
                .rows
                .iter()
                .filter(|r| r.f == Some(f) && r.m.u > 0.0)
                .filter(|r| r.m.mc.as_ref().is_some_and(|mc| !mc.gum_validated))
                .map(|r| r.name.as_str())
                .collect();
            if !names.is_empty() {
                want.push(format!("{} ({})", hz(f), names.join(", ")));
            }
        }
        let note = says("the GUM intervals differ");
        match (want.is_empty(), note) {
            (true, None) => {}
            (false, Some(n)) => {
                assert!(
                    n.message.contains(&format!("at {}:", want.join("; "))),
                    "{want:?}: {}",
                    n.message
                )
            }
            (_, n) => panic!("{want:?} vs {n:?}"),
        }
        assert!(!want.is_empty(), "the case has unvalidated rows");
    }

    // Inverse-variance weights (u_min/u_i)²; equal weights when a row is exact (u = 0).
    #[test]
    fn weights_are_inverse_variances_scaled_to_the_smallest_u() {
        assert_eq!(weights_of(&[1.0, 2.0, 4.0]), vec![1.0, 0.25, 0.0625]);
        assert_eq!(weights_of(&[0.0, 2.0]), vec![1.0, 1.0]);
    }

    // The χ² agreement test: n < 2, a variance list of the wrong length and a zero variance
    // give no test; the generalised form is used up to GENERALISED_MAX_ROWS rows, the row
    // variances above.
    #[test]
    fn agreement_test_needs_rows_and_variances_and_says_its_basis() {
        assert!(consistency_uncorrelated(&[1.0], &[1.0]).is_none());
        assert!(consistency_uncorrelated(&[1.0, 2.0], &[1.0]).is_none());
        assert!(consistency_uncorrelated(&[1.0, 2.0], &[1.0, 0.0]).is_none());
        // χ² = Σ (x − x̄)²/u² = 0.25 + 0.25 for 1 and 2 with unit variances (x̄ = 1.5).
        let c = consistency_uncorrelated(&[1.0, 2.0], &[1.0, 1.0]).unwrap();
        assert!((c.chi2 - 0.5).abs() < 1e-15 && c.dof == 1 && c.consistent);
        // 1, 2, 3: χ² = 1 + 0 + 1 = 2, ν = 2, Birge ratio √(χ²/ν) = 1; χ²₀.₉₅(2) = 5.991
        // (any χ² table, e.g. NIST/SEMATECH e-Handbook 1.3.6.7.4).
        let c = consistency_uncorrelated(&[1.0, 2.0, 3.0], &[1.0, 1.0, 1.0]).unwrap();
        assert!((c.chi2 - 2.0).abs() < 1e-15 && (c.birge - 1.0).abs() < 1e-15);
        assert!((c.chi2_95 - 5.991).abs() < 5e-4 && c.consistent);
        let c = consistency_uncorrelated(&[1.0, 2.0, 3.0], &[0.25, 0.25, 0.25]).unwrap();
        assert!((c.birge - 2.0).abs() < 1e-15 && !c.consistent);
        let flag = |n: usize| {
            let xs: Vec<f64> = (0..n).map(|i| (i % 2) as f64 * 1e-3).collect();
            let cov = |i: usize, j: usize| if i == j { 1.0 } else { 0.0 };
            consistency_flag("L", &xs, &cov, Default::default())
                .unwrap()
                .message
        };
        assert!(flag(3).contains("with the row covariance"), "{}", flag(3));
        let long = flag(GENERALISED_MAX_ROWS + 1);
        assert!(long.contains("from the row uncertainties"), "{long}");
        assert!(flag(GENERALISED_MAX_ROWS).contains("with the row covariance"));
    }

    #[test]
    fn exact_readings_reduce_back_with_uncertainties() {
        let (r, l, rc) = (330.0, 0.0683, 27.5);
        let freqs = [150.0, 400.0, 900.0, 2500.0];
        let data: Vec<Vec<f64>> = freqs
            .iter()
            .map(|&f| ideal(r, l, rc, 1.7, f).to_vec())
            .collect();
        let mut env = Env::new();
        env.parts.insert(
            "R3".into(),
            resistor("R3", r, Some(Tolerance::Relative(0.002))),
        );
        env.parts.insert("L3".into(), coil("L3", Some(rc)));
        env.instruments.insert("dmm".into(), dmm(0.003));
        let mut b = block(Network::RL, &cols(), &data);
        b.parts = vec![named("R3"), named("L3")];
        b.meter = Some(named("dmm"));
        let out = reduce(&env.ctx(), &b).unwrap();
        for &f in &freqs {
            let get = |n: &str| {
                out.rows
                    .iter()
                    .find(|x| x.name == n && x.f == Some(f))
                    .unwrap()
            };
            assert!(((get("L").m.value - l) / l).abs() < 1e-9);
            assert!(((get("Rac").m.value - rc) / rc).abs() < 1e-9);
            assert!(((get("L_dcr").m.value - l) / l).abs() < 1e-9);
            assert!(get("L").m.u > 0.0 && get("L").m.mc.is_some());
            // Each output's Monte Carlo interval is its own: its mean lies within 3 u of the
            // GUM value, and where the model is near-linear (I, XL, L; not Rac or Q, ratios
            // of a small cos θ) its u within 20 % of the GUM u (JCGM 101 §8).
            for n in ["I", "Rac", "XL", "L", "Q"] {
                let m = &get(n).m;
                let mc =
                    m.mc.as_ref()
                        .unwrap_or_else(|| panic!("{n} has an interval"));
                assert!(
                    (mc.mean - m.value).abs() < 3.0 * m.u,
                    "{n}: {mc:?} against {m:?}"
                );
                if ["I", "XL", "L"].contains(&n) {
                    assert!(
                        (mc.u / m.u - 1.0).abs() < 0.2,
                        "{n}: u {} against {}",
                        mc.u,
                        m.u
                    );
                }
            }
        }
        let bl = out.results.iter().find(|x| x.name == "L").unwrap();
        assert!(((bl.m.value - l) / l).abs() < 1e-9);
        assert!(out
            .flags
            .iter()
            .any(|f| f.message.contains("conditioned (u(L)/L")));
        assert!(out
            .flags
            .iter()
            .any(|f| f.message.starts_with("L: the 4 frequencies agree")));
        assert_eq!(out.plot.series.len(), 4);
        for r in out.rows.iter().chain(out.results.iter()) {
            assert!(r.m.value.is_finite() && r.m.u.is_finite() && r.m.expanded.is_finite());
        }
    }

    #[test]
    fn open_triangle_is_flagged_not_nan() {
        let mut env = Env::new();
        env.parts.insert("R1".into(), resistor("R1", 100.0, None));
        env.parts.insert("L1".into(), coil("L1", None));
        // Vs > VR + VL: cos θ > 1. Vs² < VR² + VL² − 2·VR·VL·…: negative cos θ.
        let mut b = block(
            Network::RL,
            &cols(),
            &[vec![100.0, 3.0, 1.0, 1.0], vec![200.0, 1.0, 0.8, 0.8]],
        );
        b.parts = vec![named("R1"), named("L1")];
        let out = reduce(&env.ctx(), &b).unwrap();
        assert!(out
            .flags
            .iter()
            .any(|f| f.message.contains("close no triangle")));
        assert!(out
            .flags
            .iter()
            .any(|f| f.message.contains("negative beyond")));
        assert!(out.rows.iter().all(|r| r.name == "I"));
        assert!(out.flags.iter().any(|f| f.message.contains("has no `dcr`")));
        for r in &out.rows {
            assert!(r.m.value.is_finite());
        }
    }

    // A nearly lossless coil: Rac is tiny beside |Z|, so 1 % meter gains leave Rac unresolved
    // (relative u far above 20 %) while L stays well determined (common practice: the
    // three-voltmeter method is poor for high-Q coils).
    #[test]
    fn high_q_coil_flags_rac() {
        let (r, l, rc) = (100.0, 0.05, 1.0);
        let data: Vec<Vec<f64>> = [800.0, 1200.0]
            .iter()
            .map(|&f| ideal(r, l, rc, 2.0, f).to_vec())
            .collect();
        let mut env = Env::new();
        env.parts.insert(
            "R1".into(),
            resistor("R1", r, Some(Tolerance::Relative(0.001))),
        );
        env.parts.insert("L1".into(), coil("L1", Some(rc)));
        env.instruments.insert(
            "dmm".into(),
            instrument(
                "dmm",
                Some(Accuracy::Relative {
                    fraction: 0.01,
                    counts: 1.0,
                }),
                Some(Quantity {
                    value: 1e-3,
                    unit: Unit::V,
                }),
            ),
        );
        let mut b = block(Network::RL, &cols(), &data);
        b.parts = vec![named("R1"), named("L1")];
        b.meter = Some(named("dmm"));
        let out = reduce(&env.ctx(), &b).unwrap();
        assert!(
            out.flags
                .iter()
                .any(|f| f.message.contains("above 20 %: Rac")),
            "{:?}",
            out.flags
        );
        // At high Q the three-voltmeter method never wins for L (it ties or loses).
        assert!(
            out.flags
                .iter()
                .any(|f| f.message.contains("conditioned (u(L)/L"))
                && !out.flags.iter().any(|f| f
                    .message
                    .contains("three-voltmeter method is better conditioned")),
            "{:?}",
            out.flags
                .iter()
                .filter(|f| f.message.contains("conditioned"))
                .collect::<Vec<_>>()
        );
        for r in out.rows.iter().chain(out.results.iter()) {
            assert!(r.m.value.is_finite() && r.m.u.is_finite());
        }
    }

    // χ² test: two equal uncorrelated estimates are consistent; two far apart are not
    // (χ²₀.₉₅(1) = 3.841, statistical tables).
    #[test]
    fn consistency_test() {
        let c = consistency(&[1.0, 1.0], &[vec![0.01, 0.0], vec![0.0, 0.01]]).unwrap();
        assert!(c.consistent && c.chi2 < 1e-12 && (c.chi2_95 - 3.841).abs() < 1e-3);
        let c = consistency(&[1.0, 1.5], &[vec![0.01, 0.0], vec![0.0, 0.01]]).unwrap();
        // (0.5)²/(0.02) = 12.5
        assert!(!c.consistent && (c.chi2 - 12.5).abs() < 1e-9);
        // The same from the variances alone (the path of long sweeps).
        let d = consistency_uncorrelated(&[1.0, 1.5], &[0.01, 0.01]).unwrap();
        assert!((d.chi2 - 12.5).abs() < 1e-9 && !d.consistent && !d.generalised);
        assert_eq!(d.chi2_95, c.chi2_95);
        // A large common component (correlation) does not hide the disagreement.
        let c = consistency(&[1.0, 1.5], &[vec![1.01, 1.0], vec![1.0, 1.01]]).unwrap();
        assert!(!c.consistent && c.generalised);
    }

    // A covariance that is not n × n, or a single estimate, has no agreement test. A nearly
    // singular one (u = 0.01, r = 1 − 1e-12: Cholesky L₂₂ = u·√(1 − r²) ≈ 1.4e-8, above the
    // 1e-9·u cut) keeps the generalised form, whose χ² for two estimates is
    // d²/(V₁₁ + V₂₂ − 2V₁₂) = (1e-8)²/(2e-16) = 0.5 (algebra of the 2 × 2 inverse).
    #[test]
    fn consistency_shapes_and_a_nearly_singular_covariance() {
        let eye = || vec![vec![1.0, 0.0], vec![0.0, 1.0]];
        let mut three = eye();
        three.push(vec![0.0, 1.0]);
        assert_eq!(consistency(&[1.0, 2.0], &three), None);
        assert_eq!(consistency(&[1.0, 2.0], &[vec![1.0, 0.0], vec![0.0]]), None);
        assert_eq!(consistency(&[1.0], &[vec![1.0]]), None);
        assert!(consistency(&[1.0, 2.0], &eye()).is_some());
        let (v, r) = (1e-4, 1.0 - 1e-12);
        let cov = [vec![v, r * v], vec![r * v, v]];
        let c = consistency(&[1.0, 1.0 + 1e-8], &cov).unwrap();
        assert!(c.generalised, "{c:?}");
        assert!((c.chi2 - 0.5).abs() < 1e-3, "{c:?}");
    }
}
