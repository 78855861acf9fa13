//! Network tank: a coil (L with its winding resistance R in series) in parallel with a
//! capacitor C, fed from the source through a series sense resistor Rs, swept in frequency;
//! read as VR (across Rs), VT (across the tank) and optionally Vs at each f.
//!
//! I = VR/Rs and |Z| = VT/I = VT·Rs/VR. The model Z(ω) = (R + jωL) ∥ 1/(jωC) is fitted to
//! |Z| by the weighted Levenberg–Marquardt fit of the series network ([`rlc::fit_model`]),
//! with its covariance, Birge scaling and Monte Carlo, in θ = (ln f_r, ln Q_r, ln R_D):
//! f_r = 1/(2π√(LC)), Q_r = ω_r·L/R and R_D = L/(CR) = Q_r²·R. With x = f/f_r,
//! |Z| = (R_D/Q_r²)·√(1 + Q_r²x²)/√((1 − x²)² + x²/Q_r²), and L = R_D/(Q_r·ω_r),
//! C = Q_r/(ω_r·R_D), R = R_D/Q_r².
//!
//! f0 is the unity-power-factor frequency, where Z is real: f0 = (1/2π)·√(1/(LC) − R²/L²)
//! = f_r·√(1 − 1/Q_r²) (the handbook definition for this tank); there Z = R_D exactly.
//! Q = ω0·L/R = √(Q_r² − 1), BW = f0/Q (the high-Q approximation of the −3 dB bandwidth).
//! A tank with Q_r ≤ 1 has no unity-power-factor frequency: L, C, R, R_D and f_r only.

use super::inputs::{BlockInputs, Spec};
use super::rlc::{self, FitModel, Sweep};
use super::{check_positive, BlockResult, Context, Descriptor, Flag, NamedResult, PlotKind};
use crate::diag::Diagnostic;
use crate::notebook::{PartKind, ReadingsBlock};
use crate::print::{hz, plain, quantity};
use crate::quantity::Unit;
use std::f64::consts::PI;

pub const NETWORK: Descriptor = Descriptor {
    spec: Spec {
        network: "tank",
        required: &["f", "VR", "VT"],
        optional: &["Vs"],
        resistor: true,
    },
    positive: &[
        ("VR", "the current I = VR/Rs divides |Z|"),
        ("VT", "a tank with no voltage across it gives no |Z|"),
        ("Vs", ""),
    ],
    judged: &[("L", PartKind::Inductor), ("C", PartKind::Capacitor)],
    plot: PlotKind::Resonance,
    reduce,
};

/// The tank's |Z| at f from L, C and the coil's series R (complex arithmetic, as a circuit
/// text writes it: Z = (R + jωL) ∥ 1/(jωC)).
pub fn impedance(f: f64, l: f64, c: f64, r: f64) -> f64 {
    let w = 2.0 * PI * f;
    let (a, b) = (r, w * l);
    // Z = (R + jωL)/(1 − ω²LC + jωRC).
    let (d, e) = (1.0 - w * w * l * c, w * r * c);
    (a.hypot(b)) / d.hypot(e)
}

/// |Z| at f and its gradient in θ = (ln f_r, ln Q_r, ln R_D).
pub fn point(f: f64, t: &[f64; 3]) -> (f64, [f64; 3]) {
    let (fr, q, rd) = (t[0].exp(), t[1].exp(), t[2].exp());
    let x = f / fr;
    let (q2, x2) = (q * q, x * x);
    let a = 1.0 + q2 * x2;
    let d = (1.0 - x2).powi(2) + x2 / q2;
    let y = rd / q2 * (a / d).sqrt();
    let dlnx = q2 * x / a + (2.0 * x * (1.0 - x2) - x / q2) / d;
    let dlnq = -2.0 + q2 * x2 / a + x2 / (q2 * d);
    (y, [-y * x * dlnx, y * dlnq, y])
}

/// Starting θ from the data: the series fit's start (the peak, Q from the half-power
/// points) with the peak |Z| for R_D; near the peak a tank's |Z| has the shape of a series
/// circuit's |Y| when Q is high.
fn start(f: &[f64], y: &[f64]) -> Result<[f64; 3], rlc::FitError> {
    let t = rlc::start(f, y)?;
    Ok([t[0], t[1], -t[2]])
}

/// The weighted fit of the tank model to (f, |Z|, u) sorted by f; θ = (ln f_r, ln Q_r, ln R_D).
pub fn fit(f: &[f64], y: &[f64], u: &[f64]) -> Result<rlc::ResonanceFit, rlc::FitError> {
    rlc::fit_model(point, start, f, y, u)
}

/// [f0, Q, BW, L, C, R, R_D, f_r] from (f_r, Q_r, R_D); f0, Q and BW are NaN for Q_r ≤ 1.
pub fn derived(p: &[f64]) -> Vec<f64> {
    rlc::fill_vec(derived_into, DERIVED.len(), p)
}

/// [`derived`] written into `y` (8 values), for the Monte Carlo trials.
fn derived_into(p: &[f64; 3], y: &mut [f64]) {
    let [fr, qr, rd] = *p;
    let wr = 2.0 * PI * fr;
    let (l, c, r) = (rd / (qr * wr), qr / (wr * rd), rd / (qr * qr));
    let f0 = fr * (1.0 - 1.0 / (qr * qr)).sqrt();
    let q = (qr * qr - 1.0).sqrt();
    y[..8].copy_from_slice(&[f0, q, f0 / q, l, c, r, rd, fr]);
}

/// [`derived`] without f0, Q and BW, written into `y`: [L, C, R, R_D, f_r].
fn low_q_into(p: &[f64; 3], y: &mut [f64]) {
    let mut all = [0.0; 8];
    derived_into(p, &mut all);
    y[..5].copy_from_slice(&all[3..]);
}

/// Names and units of [`derived`].
pub const DERIVED: [(&str, Unit); 8] = [
    ("f0", Unit::Hz),
    ("Q", Unit::One),
    ("BW", Unit::Hz),
    ("L", Unit::H),
    ("C", Unit::F),
    ("R", Unit::Ohm),
    ("R_D", Unit::Ohm),
    ("f_r", Unit::Hz),
];

const PARAMS: [&str; 3] = ["f_r (fit)", "Q_r (fit)", "R_D (fit)"];

fn curve(f: f64, p: &[f64; 3]) -> f64 {
    point(f, &[p[0].ln(), p[1].ln(), p[2].ln()]).0
}

const TANK: FitModel = FitModel {
    name: "tank fit",
    params: PARAMS,
    fill: derived_into,
    results: &DERIVED,
    pairs: &[(0, 1), (1, 6), (3, 4), (3, 5), (4, 5)],
    curve,
    marker: |p| derived(p)[0],
};

const TANK_LOW_Q: FitModel = FitModel {
    name: "tank fit",
    params: PARAMS,
    fill: low_q_into,
    results: &[
        ("L", Unit::H),
        ("C", Unit::F),
        ("R", Unit::Ohm),
        ("R_D", Unit::Ohm),
        ("f_r", Unit::Hz),
    ],
    pairs: &[(0, 1), (0, 2), (1, 2)],
    curve,
    marker: |_| f64::NAN,
};

/// |Z| = VT·Rs/VR of group `g` at inputs `x`.
fn impedance_of(sw: &Sweep, x: &[f64], g: usize) -> f64 {
    let bi = sw.bi;
    bi.voltage("VT", g, x) * bi.r(x) / bi.voltage("VR", g, x)
}

pub fn reduce(ctx: &Context, block: &ReadingsBlock) -> Result<BlockResult, Vec<Diagnostic>> {
    let bi = BlockInputs::build(ctx, block, &NETWORK.spec)?;
    let diags = check_positive(block, NETWORK.positive);
    if !diags.is_empty() {
        return Err(diags);
    }
    let mut out = rlc::empty_result(block, &bi);
    let (order, fs, own) = Sweep::order(&bi);
    let sw = Sweep {
        ctx,
        block,
        bi: &bi,
        has_vs: bi.has("Vs"),
        level: block.source.unwrap_or(f64::NAN),
        order,
        fs,
        own,
        y_of: impedance_of,
        symbol: "|Z|",
    };
    let pts = rlc::sweep_points(&sw, "Z", &mut out)?;
    for (k, m) in pts.py.results.iter().enumerate() {
        out.rows.push(NamedResult {
            name: "Z".into(),
            f: Some(sw.fs[k]),
            unit: Unit::Ohm,
            m: m.clone(),
        });
    }
    if let Some(flag) = no_peak(&sw.fs, &pts.ys, block) {
        out.flags.push(flag);
        return Ok(out);
    }
    rlc::read_offs(&sw, &pts.ys, &mut out);
    match fit(&sw.fs, &pts.ys, &pts.u_w) {
        Err(e) => out.flags.push(Flag {
            warn: true,
            span: Some(block.span),
            message: format!("tank fit: {e}"),
        }),
        Ok(fit) => {
            let qr = fit.theta[1].exp();
            let fm = if qr > 1.0 {
                &TANK
            } else {
                out.flags.push(Flag {
                    warn: true,
                    span: Some(block.span),
                    message: format!(
                        "tank fit: the coil's Q at f_r is {} (not above 1), so Z is never real: the tank has no unity-power-factor frequency, and f0, Q and BW are not given",
                        plain(qr, 3)
                    ),
                });
                &TANK_LOW_Q
            };
            rlc::fit_results(&sw, fm, &fit, &pts, &mut out)?;
            out.flags.push(method_note(block));
        }
    }
    rlc::keep_markers(&mut out);
    out.flags.extend(prediction(ctx, block));
    Ok(out)
}

/// A warning when the largest |Z| is at an end of the sweep: the resonance is outside it.
fn no_peak(fs: &[f64], ys: &[f64], block: &ReadingsBlock) -> Option<Flag> {
    let n = fs.len().min(ys.len());
    if n < 3 {
        return Some(Flag {
            warn: true,
            span: Some(block.span),
            message: format!(
                "{n} distinct frequencies: a tank sweep needs a peak of |Z| between its ends, so at least 3 (and 4 for the fit)"
            ),
        });
    }
    let imax = rlc::read_off(fs, ys).imax;
    if imax > 0 && imax + 1 < n {
        return None;
    }
    let end = if imax == 0 { "lowest" } else { "highest" };
    Some(Flag {
        warn: true,
        span: Some(block.span),
        message: format!(
            "the sweep shows no peak of |Z| inside it: |Z| is largest at the {end} frequency ({}), so the tank's resonance lies outside the sweep or was stepped over; no fit and no read-off points",
            hz(fs[imax])
        ),
    })
}

/// What f0, Q, R_D and BW mean here.
fn method_note(block: &ReadingsBlock) -> Flag {
    Flag {
        warn: false,
        span: Some(block.span),
        message: "tank fit: f0 is the unity-power-factor frequency (1/2π)·√(1/(LC) − R²/L²), where the tank's Z is real (the handbook definition for a coil with series resistance R in parallel with C); f_r = 1/(2π√(LC)) is given beside it; Q = 2π·f0·L/R; R_D = L/(CR) is |Z| at f0; BW = f0/Q is the high-Q approximation of the −3 dB bandwidth, and f_low, f_high read off the data are the model-free check".into(),
    }
}

/// Prediction from the parts' values (the coil's `dcr` as R when given).
fn prediction(ctx: &Context, block: &ReadingsBlock) -> Option<Flag> {
    let (ln, l, dcr) = rlc::part_value(ctx, block, PartKind::Inductor)?;
    let (cn, c, _) = rlc::part_value(ctx, block, PartKind::Capacitor)?;
    let r = dcr.unwrap_or(0.0);
    let f0 = (1.0 / (l * c) - (r / l).powi(2)).sqrt() / (2.0 * PI);
    if !(f0.is_finite() && f0 > 0.0) {
        return None;
    }
    let rd = match dcr {
        Some(d) if d > 0.0 => format!(
            " and R_D = L/(C·dcr) = {}",
            quantity(l / (c * d), Unit::Ohm)
        ),
        _ => String::new(),
    };
    Some(Flag {
        warn: false,
        span: Some(block.span),
        message: format!(
            "the parts predict f0 = {}{rd} ({ln} and {cn}{})",
            hz(f0),
            if dcr.is_some() {
                ", R = dcr"
            } else {
                ", R taken as 0"
            }
        ),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    // The analytic gradient of |Z| in θ against central differences.
    #[test]
    fn gradient_matches_differences() {
        let t = [3100f64.ln(), 9.3f64.ln(), 2400f64.ln()];
        for f in [800.0, 2900.0, 3100.0, 3300.0, 12000.0] {
            let (_, g) = point(f, &t);
            for k in 0..3 {
                let h = 1e-6;
                let (mut a, mut b) = (t, t);
                a[k] += h;
                b[k] -= h;
                let num = (point(f, &a).0 - point(f, &b).0) / (2.0 * h);
                assert!(
                    (num - g[k]).abs() <= 1e-6 * g[k].abs().max(point(f, &t).0),
                    "f {f} k {k}: {num} vs {}",
                    g[k]
                );
            }
        }
    }

    // The parameterised |Z| is the circuit's (R + jωL) ∥ 1/(jωC) at every f.
    #[test]
    fn parameterisation_is_the_circuit() {
        let (l, c, r): (f64, f64, f64) = (2.2e-3, 47e-9, 6.8);
        let fr = 1.0 / (2.0 * PI * (l * c).sqrt());
        let qr = 2.0 * PI * fr * l / r;
        let rd = l / (c * r);
        let t = [fr.ln(), qr.ln(), rd.ln()];
        for k in 0..30 {
            let f = fr * 0.2 * 1.2f64.powi(k);
            let (y, _) = point(f, &t);
            assert!((y / impedance(f, l, c, r) - 1.0).abs() < 1e-12);
        }
        let d = derived(&[fr, qr, rd]);
        assert!((d[3] / l - 1.0).abs() < 1e-12);
        assert!((d[4] / c - 1.0).abs() < 1e-12);
        assert!((d[5] / r - 1.0).abs() < 1e-12);
    }

    #[test]
    fn low_q_leaves_out_f0() {
        assert!(derived(&[1000.0, 0.8, 50.0])[0].is_nan());
        assert_eq!(rlc::fill_vec(low_q_into, 5, &[1000.0, 0.8, 50.0]).len(), 5);
        assert!(rlc::fill_vec(low_q_into, 5, &[1000.0, 0.8, 50.0])
            .iter()
            .all(|v| v.is_finite()));
    }
}
