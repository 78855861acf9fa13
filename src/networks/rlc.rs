//! Network RLC: a series R–L–C swept in frequency, read as VR (and Vs) at each f.
//!
//! |Y(f)| = VR/(R·Vs) is fitted with the series model
//! |Y| = 1/√(Rt² + (ωL − 1/(ωC))²) = 1/(Rt·√(1 + Q²(x − 1/x)²)), x = f/f0,
//! by weighted Levenberg–Marquardt in the parameters θ = (ln f0, ln Q, ln Rt): logarithms keep
//! them positive and of similar scale, and f0, Q, Rt are nearly uncorrelated near the peak.
//! L = Q·Rt/(2π f0), C = 1/(2π f0·Q·Rt), BW = f0/Q.
//!
//! Weights 1/u_i² use each point's own (unshared) uncertainty. The covariance of θ is the
//! linear propagation of the full covariance V of the |Y| values (shared gains and R
//! included) through the estimator: cov θ = A V Aᵀ, A = (JᵀWJ)⁻¹JᵀW. With no shared inputs
//! this is the unscaled (JᵀWJ)⁻¹. When χ²/ν exceeds its 95 % limit, that own part is scaled
//! by χ²/ν (the Birge ratio R_B², [`birge_ratio`]) and shown as a budget line of its own.
//! The derived results come from `propagate` with the fitted (f0, Q, Rt) as correlated normal
//! inputs (their covariance mapped from θ), and a Monte Carlo run over the same multivariate
//! normal (JCGM 101 §6.4.8). That Monte Carlo knows only the fit covariance, not the shapes
//! of the readings' distributions.

use super::inputs::{BlockInputs, Spec};
use super::{
    check_positive, AtBlock, BlockResult, Context, Correlation, Descriptor, Flag, NamedResult,
    PlotData, PlotKind,
};
use crate::diag::Diagnostic;
use crate::montecarlo::{attach_validation, monte_carlo_on, Columns, Eval, InPlace, CHUNK};
use crate::notebook::{PartKind, ReadingsBlock};
use crate::print::{hz, plain};
use crate::quantity::Unit;
use crate::uncertainty::McInterval;
use crate::uncertainty::{
    add_term, correlation, propagate, propagate_sparse, BudgetLine, Dist, EvalType, Input, Model,
    Propagated,
};
use levenberg_marquardt::{LeastSquaresProblem, LevenbergMarquardt};
use nalgebra::{Dyn, Matrix3, OMatrix, OVector, Owned, Vector3, U3};
use statrs::distribution::{ChiSquared, ContinuousCDF};
use std::f64::consts::PI;

pub const NETWORK: Descriptor = Descriptor {
    spec: Spec {
        network: "RLC",
        required: &["f", "VR"],
        optional: &["Vs", "shift", "period", "phi"],
        resistor: true,
    },
    positive: &[("VR", ""), ("Vs", ""), ("period", "")],
    judged: &[("L", PartKind::Inductor), ("C", PartKind::Capacitor)],
    plot: PlotKind::Resonance,
    reduce,
};

/// The series-resonance admittance magnitude at f.
pub fn admittance(f: f64, f0: f64, q: f64, rt: f64) -> f64 {
    let x = f / f0;
    let g = x - 1.0 / x;
    1.0 / (rt * (1.0 + q * q * g * g).sqrt())
}

/// [f0, Q, BW, L, C, Rt] from θ = (ln f0, ln Q, ln Rt).
pub fn derived(theta: &[f64]) -> Vec<f64> {
    let lin: Vec<f64> = theta.iter().map(|t| t.exp()).collect();
    derived_lin(&lin)
}

/// [f0, Q, BW, L, C, Rt] from (f0, Q, Rt).
pub fn derived_lin(p: &[f64]) -> Vec<f64> {
    fill_vec(derived_into, DERIVED.len(), p)
}

/// [`derived_lin`] written into `y` (6 values), for the Monte Carlo trials.
pub fn derived_into(p: &[f64; 3], y: &mut [f64]) {
    let [f0, q, rt] = *p;
    let w0 = 2.0 * PI * f0;
    y[..6].copy_from_slice(&[f0, q, f0 / q, q * rt / w0, 1.0 / (w0 * q * rt), rt]);
}

/// The `n` outputs `fill` writes for parameters `p` (NaN for a missing parameter).
pub(crate) fn fill_vec(fill: fn(&[f64; 3], &mut [f64]), n: usize, p: &[f64]) -> Vec<f64> {
    let at = |k: usize| p.get(k).copied().unwrap_or(f64::NAN);
    let mut y = vec![0.0; n];
    fill(&[at(0), at(1), at(2)], &mut y);
    y
}

/// Names and units of [`derived`].
pub const DERIVED: [(&str, Unit); 6] = [
    ("f0", Unit::Hz),
    ("Q", Unit::One),
    ("BW", Unit::Hz),
    ("L", Unit::H),
    ("C", Unit::F),
    ("Rtotal", Unit::Ohm),
];

/// Points read off the data (f sorted ascending).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ReadOff {
    /// Index of the largest |Y|.
    pub imax: usize,
    /// Peak by the parabola through the three top points in (ln f, |Y|): (f, |Y|).
    pub peak: Option<(f64, f64)>,
    /// Half-power points: linear interpolation of |Y| at peak/√2 between the readings around it,
    /// with the index of the lower reading of the interval.
    pub low: Option<(f64, usize)>,
    pub high: Option<(f64, usize)>,
}

/// Why a sweep could not be fitted.
#[derive(Debug, Clone, PartialEq)]
pub enum FitError {
    TooFewPoints(usize),
    /// The largest |Y| is at an end of the sweep (monotonic or cut short).
    NoPeak {
        at_low_end: bool,
    },
    NotConverged(String),
    Singular,
}

impl std::fmt::Display for FitError {
    fn fmt(&self, fm: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            FitError::TooFewPoints(n) => write!(fm, "{n} distinct frequencies: the fit needs at least 4"),
            FitError::NoPeak { at_low_end } => write!(
                fm,
                "the sweep shows no resonance peak: |Y| is largest at the {} frequency (monotonic or cut short), so f0, Q and the half-power points cannot be found",
                if *at_low_end { "lowest" } else { "highest" }
            ),
            FitError::NotConverged(why) => write!(fm, "the fit did not converge ({why})"),
            FitError::Singular => write!(fm, "the fit is singular: the sweep does not determine f0, Q and Rt"),
        }
    }
}

/// Parabola vertex through (x_k, y_k), k = 0..3; None when not a maximum.
fn vertex(x: [f64; 3], y: [f64; 3]) -> Option<(f64, f64)> {
    let (d1, d2) = (x[1] - x[0], x[2] - x[1]);
    let s1 = (y[1] - y[0]) / d1;
    let s2 = (y[2] - y[1]) / d2;
    let a = (s2 - s1) / (x[2] - x[0]);
    if !(a < 0.0) {
        return None;
    }
    let b = s1 - a * (x[0] + x[1]);
    let xv = -b / (2.0 * a);
    let yv = y[1] + b * (xv - x[1]) + a * (xv * xv - x[1] * x[1]);
    (xv.is_finite() && yv.is_finite()).then_some((xv, yv))
}

/// The quadratic through three points (x_k, y_k), at x (Lagrange form).
fn quadratic_at(x: [f64; 3], y: [f64; 3], t: f64) -> f64 {
    let l =
        |a: usize, b: usize, c: usize| (t - x[b]) * (t - x[c]) / ((x[a] - x[b]) * (x[a] - x[c]));
    y[0] * l(0, 1, 2) + y[1] * l(1, 0, 2) + y[2] * l(2, 0, 1)
}

/// The cubic through four points (x_k, y_k), at x (Lagrange form).
fn cubic_at(x: [f64; 4], y: [f64; 4], t: f64) -> f64 {
    (0..4)
        .map(|a| {
            let mut l = 1.0;
            for b in (0..4).filter(|&b| b != a) {
                l *= (t - x[b]) / (x[a] - x[b]);
            }
            y[a] * l
        })
        .sum()
}

/// Where `g` crosses zero in [a, b] (g(a) and g(b) of opposite signs), by bisection.
fn root_between(g: impl Fn(f64) -> f64, mut a: f64, mut b: f64) -> Option<f64> {
    let (ga, gb) = (g(a), g(b));
    if !(ga * gb <= 0.0) {
        return None;
    }
    let rising = ga < gb;
    for _ in 0..100 {
        let m = 0.5 * (a + b);
        if (g(m) < 0.0) == rising {
            a = m;
        } else {
            b = m;
        }
    }
    Some(0.5 * (a + b))
}

/// Half-width of the interpolation error of a half-power point read linearly between
/// readings i and i + 1 at `level`: the largest |linear − quadratic| over the quadratics
/// through i, i + 1 and one neighbour on either side (the quadratic stands in for the curve).
pub fn crossing_halfwidth(f: &[f64], y: &[f64], i: usize, level: f64) -> f64 {
    let n = f.len().min(y.len());
    if i + 1 >= n {
        return 0.0;
    }
    let lin = f[i] + (f[i + 1] - f[i]) * (level - y[i]) / (y[i + 1] - y[i]);
    let mut out: f64 = 0.0;
    for s in [i.checked_sub(1), (i + 2 < n).then_some(i)]
        .into_iter()
        .flatten()
    {
        let (x3, y3) = ([f[s], f[s + 1], f[s + 2]], [y[s], y[s + 1], y[s + 2]]);
        if let Some(q) = root_between(|t| quadratic_at(x3, y3, t) - level, f[i], f[i + 1]) {
            out = out.max((q - lin).abs());
        }
    }
    out
}

/// Half-width of the interpolation error of the peak read by the parabola through the three
/// top points in ln f: the largest |parabola vertex − cubic maximum| over the cubics through
/// those three and one more point on either side. Returns (half-width in f, in |Y|).
pub fn peak_halfwidth(f: &[f64], y: &[f64], im: usize) -> (f64, f64) {
    let n = f.len().min(y.len());
    if im == 0 || im + 1 >= n {
        return (0.0, 0.0);
    }
    let lf: Vec<f64> = f.iter().map(|v| v.ln()).collect();
    let Some((xv, yv)) = vertex(
        [lf[im - 1], lf[im], lf[im + 1]],
        [y[im - 1], y[im], y[im + 1]],
    ) else {
        return (0.0, 0.0);
    };
    let yv = yv.max(y[im]);
    let (mut df, mut dy): (f64, f64) = (0.0, 0.0);
    for s in [im.checked_sub(2), (im + 2 < n).then(|| im - 1)]
        .into_iter()
        .flatten()
    {
        let x4 = [lf[s], lf[s + 1], lf[s + 2], lf[s + 3]];
        let y4 = [y[s], y[s + 1], y[s + 2], y[s + 3]];
        // The cubic's slope by central differences; its maximum where the slope changes sign.
        let h = 1e-6 * (lf[im + 1] - lf[im - 1]);
        let slope = |t: f64| cubic_at(x4, y4, t + h) - cubic_at(x4, y4, t - h);
        if let Some(xc) = root_between(slope, lf[im - 1], lf[im + 1]) {
            df = df.max((xc.exp() - xv.exp()).abs());
            dy = dy.max((cubic_at(x4, y4, xc) - yv).abs());
        }
    }
    (df, dy)
}

/// Reads the peak and the half-power points off a sweep sorted by f.
pub fn read_off(f: &[f64], y: &[f64]) -> ReadOff {
    let n = f.len().min(y.len());
    let mut imax = 0;
    for i in 0..n {
        if y[i] > y[imax] {
            imax = i;
        }
    }
    let peak = if imax > 0 && imax + 1 < n {
        vertex(
            [f[imax - 1].ln(), f[imax].ln(), f[imax + 1].ln()],
            [y[imax - 1], y[imax], y[imax + 1]],
        )
        .map(|(lx, yv)| (lx.exp(), yv.max(y[imax])))
    } else {
        None
    };
    let top = peak
        .map(|p| p.1)
        .unwrap_or_else(|| y.get(imax).copied().unwrap_or(0.0));
    let level = top / 2f64.sqrt();
    let cross =
        |i: usize, j: usize| -> f64 { f[i] + (f[j] - f[i]) * (level - y[i]) / (y[j] - y[i]) };
    let mut low = None;
    for i in (0..imax).rev() {
        if y[i] <= level && y[i + 1] > level {
            low = Some((cross(i, i + 1), i));
            break;
        }
    }
    let mut high = None;
    for i in imax..n.saturating_sub(1) {
        if y[i] > level && y[i + 1] <= level {
            high = Some((cross(i, i + 1), i));
            break;
        }
    }
    ReadOff {
        imax,
        peak,
        low,
        high,
    }
}

/// A converged fit.
#[derive(Debug, Clone, PartialEq)]
pub struct ResonanceFit {
    /// θ = (ln f0, ln Q, ln Rt).
    pub theta: [f64; 3],
    /// (JᵀWJ)⁻¹, unscaled.
    pub cov_theta: [[f64; 3]; 3],
    /// ∂θ/∂y_i for each point (the rows of Aᵀ).
    pub gain: Vec<[f64; 3]>,
    pub chi2: f64,
    pub dof: usize,
    /// y_i − model_i.
    pub residuals: Vec<f64>,
    pub evaluations: usize,
}

impl ResonanceFit {
    pub fn f0(&self) -> f64 {
        self.theta[0].exp()
    }
    pub fn q(&self) -> f64 {
        self.theta[1].exp()
    }
    pub fn rt(&self) -> f64 {
        self.theta[2].exp()
    }
    pub fn reduced_chi2(&self) -> f64 {
        if self.dof > 0 {
            self.chi2 / self.dof as f64
        } else {
            f64::NAN
        }
    }
    /// cov θ = A V Aᵀ, V the covariance of the fitted data as propagated in `p` (output k is
    /// point k), without forming V.
    pub fn cov_from(&self, p: &Propagated) -> [[f64; 3]; 3] {
        let w: Vec<Vec<f64>> = (0..3)
            .map(|a| self.gain.iter().map(|g| g[a]).collect())
            .collect();
        let c = p.combined_cov(&w);
        let mut out = [[0.0; 3]; 3];
        for a in 0..3 {
            for b in 0..3 {
                out[a][b] = c[a][b];
            }
        }
        out
    }
}

/// A resonance model in three log-parameters θ (θ₀ the log of a frequency): its value at f
/// and its gradient in θ.
pub type PointModel = fn(f64, &[f64; 3]) -> (f64, [f64; 3]);

/// The series model's |Y| at f and its gradient in θ = (ln f0, ln Q, ln Rt).
fn series_point(f: f64, t: &[f64; 3]) -> (f64, [f64; 3]) {
    let (f0, q, rt) = (t[0].exp(), t[1].exp(), t[2].exp());
    let x = f / f0;
    let g = x - 1.0 / x;
    let d = 1.0 + q * q * g * g;
    let y = 1.0 / (rt * d.sqrt());
    (
        y,
        [
            y * q * q * g * (x + 1.0 / x) / d,
            -y * q * q * g * g / d,
            -y,
        ],
    )
}

struct Problem<'a> {
    f: &'a [f64],
    y: &'a [f64],
    u: &'a [f64],
    p: Vector3<f64>,
    model: PointModel,
}

impl Problem<'_> {
    /// Model value and its gradient in θ at point i.
    fn point(&self, i: usize) -> (f64, [f64; 3]) {
        (self.model)(self.f[i], &[self.p[0], self.p[1], self.p[2]])
    }
}

impl LeastSquaresProblem<f64, Dyn, U3> for Problem<'_> {
    type ResidualStorage = Owned<f64, Dyn>;
    type JacobianStorage = Owned<f64, Dyn, U3>;
    type ParameterStorage = Owned<f64, U3>;

    fn set_params(&mut self, x: &Vector3<f64>) {
        self.p = *x;
    }
    fn params(&self) -> Vector3<f64> {
        self.p
    }
    fn residuals(&self) -> Option<OVector<f64, Dyn>> {
        let n = self.f.len();
        let r = OVector::<f64, Dyn>::from_iterator(
            n,
            (0..n).map(|i| (self.point(i).0 - self.y[i]) / self.u[i]),
        );
        r.iter().all(|v| v.is_finite()).then_some(r)
    }
    fn jacobian(&self) -> Option<OMatrix<f64, Dyn, U3>> {
        let n = self.f.len();
        let mut j = OMatrix::<f64, Dyn, U3>::zeros(n);
        for i in 0..n {
            let (_, d) = self.point(i);
            for k in 0..3 {
                j[(i, k)] = d[k] / self.u[i];
            }
        }
        j.iter().all(|v| v.is_finite()).then_some(j)
    }
}

/// Starting values (ln f0, ln Q, ln Rt) from the data alone: the parabola peak, and Q from
/// the half-power bandwidth, from one half-power point, or from the points' drop below the peak.
pub fn start(f: &[f64], y: &[f64]) -> Result<[f64; 3], FitError> {
    let ro = read_off(f, y);
    let n = f.len();
    if ro.imax == 0 || ro.imax + 1 >= n {
        return Err(FitError::NoPeak {
            at_low_end: ro.imax == 0,
        });
    }
    let (f0, top) = ro.peak.unwrap_or((f[ro.imax], y[ro.imax]));
    let q = match (ro.low, ro.high) {
        (Some((a, _)), Some((b, _))) if b > a => f0 / (b - a),
        (Some((a, _)), None) if f0 > a => f0 / (2.0 * (f0 - a)),
        (None, Some((b, _))) if b > f0 => f0 / (2.0 * (b - f0)),
        _ => {
            // (top/y)² = 1 + Q²(x − 1/x)² for each point clearly below the peak; take the median.
            let mut qs: Vec<f64> = (0..n)
                .filter(|&i| y[i] < 0.95 * top && y[i] > 0.0)
                .filter_map(|i| {
                    let x = f[i] / f0;
                    let g = (x - 1.0 / x).abs();
                    let v = ((top / y[i]).powi(2) - 1.0).sqrt() / g;
                    (v.is_finite() && v > 0.0).then_some(v)
                })
                .collect();
            qs.sort_by(f64::total_cmp);
            qs.get(qs.len() / 2).copied().unwrap_or(1.0)
        }
    };
    let t = [f0.ln(), q.ln(), (1.0 / top).ln()];
    if t.iter().all(|v| v.is_finite()) {
        Ok(t)
    } else {
        Err(FitError::Singular)
    }
}

/// Weighted least-squares fit of the series model to (f, |Y|, u) sorted by f.
pub fn fit_resonance(f: &[f64], y: &[f64], u: &[f64]) -> Result<ResonanceFit, FitError> {
    fit_model(series_point, start, f, y, u)
}

/// Weighted Levenberg–Marquardt fit of `model` to (f, y, u) sorted by f, from the starting
/// θ that `start` reads off the data; the covariance and gains as [`ResonanceFit`] holds them.
pub fn fit_model(
    model: PointModel,
    start: fn(&[f64], &[f64]) -> Result<[f64; 3], FitError>,
    f: &[f64],
    y: &[f64],
    u: &[f64],
) -> Result<ResonanceFit, FitError> {
    let n = f.len();
    if n < 4 || y.len() != n || u.len() != n {
        return Err(FitError::TooFewPoints(n));
    }
    if f.iter()
        .chain(y)
        .chain(u)
        .any(|v| !(v.is_finite() && *v > 0.0))
    {
        return Err(FitError::Singular);
    }
    let t0 = start(f, y)?;
    let prob = Problem {
        f,
        y,
        u,
        p: Vector3::from(t0),
        model,
    };
    let (prob, report) = LevenbergMarquardt::new().with_patience(200).minimize(prob);
    if !report.termination.was_successful() {
        return Err(FitError::NotConverged(format!("{:?}", report.termination)));
    }
    let theta = [prob.p[0], prob.p[1], prob.p[2]];
    let fmin = f.iter().copied().fold(f64::INFINITY, f64::min);
    let fmax = f.iter().copied().fold(0.0, f64::max);
    // A resonance found far outside the sweep is an extrapolation, not a fit.
    if !(theta[0].exp() > fmin / 10.0 && theta[0].exp() < fmax * 10.0)
        || theta.iter().any(|v| !v.is_finite())
    {
        return Err(FitError::NotConverged("f0 left the swept range".into()));
    }
    let jac = prob.jacobian().ok_or(FitError::Singular)?;
    let h: Matrix3<f64> = jac.transpose() * &jac;
    let hinv = h.try_inverse().ok_or(FitError::Singular)?;
    if hinv.iter().any(|v| !v.is_finite()) || (0..3).any(|k| !(hinv[(k, k)] > 0.0)) {
        return Err(FitError::Singular);
    }
    let gain: Vec<[f64; 3]> = (0..n)
        .map(|i| {
            let row = Vector3::new(jac[(i, 0)], jac[(i, 1)], jac[(i, 2)]) / u[i];
            let g = hinv * row;
            [g[0], g[1], g[2]]
        })
        .collect();
    let residuals: Vec<f64> = (0..n).map(|i| y[i] - prob.point(i).0).collect();
    let chi2 = residuals.iter().zip(u).map(|(r, s)| (r / s).powi(2)).sum();
    let mut cov_theta = [[0.0; 3]; 3];
    for a in 0..3 {
        for b in 0..3 {
            cov_theta[a][b] = hinv[(a, b)];
        }
    }
    Ok(ResonanceFit {
        theta,
        cov_theta,
        gain,
        chi2,
        dof: n - 3,
        residuals,
        evaluations: report.number_of_evaluations,
    })
}

/// Interpolated zero crossing of a phase sweep (f sorted): the first sign change, linear in f.
pub fn zero_crossing(f: &[f64], phase: &[f64]) -> Option<(f64, usize)> {
    let n = f.len().min(phase.len());
    (0..n.saturating_sub(1)).find_map(|i| {
        let (a, b) = (phase[i], phase[i + 1]);
        if a == 0.0 {
            return Some((f[i], i));
        }
        (a * b < 0.0).then(|| (f[i] + (f[i + 1] - f[i]) * a / (a - b), i))
    })
}

pub(crate) fn part_value(
    ctx: &Context,
    block: &ReadingsBlock,
    kind: PartKind,
) -> Option<(String, f64, Option<f64>)> {
    block
        .parts
        .iter()
        .filter_map(|n| ctx.parts.get(&n.name))
        .find(|p| p.kind == kind)
        .and_then(|p| {
            let v = p.measured.or(p.nominal)?.value;
            Some((p.name.clone(), v, p.dcr.map(|d| d.value)))
        })
}

pub fn reduce(ctx: &Context, block: &ReadingsBlock) -> Result<BlockResult, Vec<Diagnostic>> {
    let bi = BlockInputs::build(ctx, block, &NETWORK.spec)?;
    check_readings(block, &bi)?;
    let has_vs = bi.has("Vs");
    let mut out = empty_result(block, &bi);
    if !has_vs {
        out.flags.push(Flag {
            warn: false,
            span: Some(block.span),
            message: "no Vs column: |Y| uses the stated source level, taken as exact".into(),
        });
    }
    let (order, fs, own) = Sweep::order(&bi);
    let sw = Sweep {
        ctx,
        block,
        bi: &bi,
        has_vs,
        level: block.source.unwrap_or(f64::NAN),
        order,
        fs,
        own,
        y_of: admittance_of,
        symbol: "|Y|",
    };
    let pts = sweep_points(&sw, "Y", &mut out)?;
    read_offs(&sw, &pts.ys, &mut out);

    // The fit.
    match fit_resonance(&sw.fs, &pts.ys, &pts.u_w) {
        Err(e) => out.flags.push(Flag {
            warn: true,
            span: Some(block.span),
            message: format!("RLC fit: {e}"),
        }),
        Ok(fit) => fit_results(&sw, &SERIES, &fit, &pts, &mut out)?,
    }
    keep_markers(&mut out);
    phase_f0(&sw, &mut out);
    out.flags.extend(prediction(ctx, block, &bi));
    Ok(out)
}

/// The points of a sweep: the fitted magnitudes propagated (output k is point k), their
/// values and total u, and the fit weights with how they were chosen.
pub(crate) struct Points {
    pub(crate) py: Propagated,
    pub(crate) ys: Vec<f64>,
    pub(crate) u_tot: Vec<f64>,
    pub(crate) u_w: Vec<f64>,
    pub(crate) weights_note: &'static str,
}

/// The fitted magnitude at each point (plotted as series `series`) and the current
/// I = VR/R as per-frequency rows.
pub(crate) fn sweep_points(
    sw: &Sweep,
    series: &str,
    out: &mut BlockResult,
) -> Result<Points, Vec<Diagnostic>> {
    let (ctx, block, bi, fs) = (sw.ctx, sw.block, sw.bi, &sw.fs);
    let model = bi.model();
    let ys_model = |x: &[f64]| sw.ys(x);
    let py = propagate_sparse(&model, &ys_model, Some(&sw.own), ctx.coverage).at_block(block)?;
    let ys = py.values.clone();
    let u_tot: Vec<f64> = py.results.iter().map(|m| m.u).collect();
    let i_model = |x: &[f64]| -> Vec<f64> {
        sw.order
            .iter()
            .map(|&g| bi.voltage("VR", g, x) / bi.r(x))
            .collect()
    };
    let pi = propagate_sparse(&model, &i_model, Some(&sw.own), ctx.coverage).at_block(block)?;
    for (k, m) in pi.results.iter().enumerate() {
        out.rows.push(NamedResult {
            name: "I".into(),
            f: Some(fs[k]),
            unit: Unit::A,
            m: m.clone(),
        });
    }
    let (u_w, weights_note) = fit_weights(bi, &py, &ys, &u_tot);
    out.plot.series.push((
        series.into(),
        (0..fs.len()).map(|k| (fs[k], ys[k], u_tot[k])).collect(),
    ));
    Ok(Points {
        py,
        ys,
        u_tot,
        u_w,
        weights_note,
    })
}

/// A block's result with no results yet: the inputs' flags only.
pub(crate) fn empty_result(block: &ReadingsBlock, bi: &BlockInputs) -> BlockResult {
    BlockResult {
        id: block.id.clone(),
        network: block.network,
        rows: Vec::new(),
        results: Vec::new(),
        correlations: Vec::new(),
        flags: bi.flags.clone(),
        plot: PlotData::default(),
    }
}

/// Keeps one marker per name, in a fixed order.
pub(crate) fn keep_markers(out: &mut BlockResult) {
    let mut markers = Vec::new();
    for name in ["f0", "f_low", "f_high"] {
        if let Some(m) = out.plot.markers.iter().find(|(n, _)| n == name) {
            markers.push(m.clone());
        }
    }
    out.plot.markers = markers;
}

/// Positive VR, Vs and period; a source level from a Vs column or the header.
fn check_readings(block: &ReadingsBlock, bi: &BlockInputs) -> Result<(), Vec<Diagnostic>> {
    let mut diags = check_positive(block, NETWORK.positive);
    if !bi.has("Vs") && block.source.is_none() {
        diags.push(
            Diagnostic::new(
                block.span,
                "network RLC needs the source level: a Vs column or `source` in the header",
            )
            .expected("a column Vs or a header line like `source: 2 V`")
            .found("neither"),
        );
    }
    if diags.is_empty() {
        Ok(())
    } else {
        Err(diags)
    }
}

/// The sweep in order of frequency, and how the fitted magnitude (|Y| here) is read from it.
pub(crate) struct Sweep<'a> {
    pub(crate) ctx: &'a Context<'a>,
    pub(crate) block: &'a ReadingsBlock,
    pub(crate) bi: &'a BlockInputs,
    pub(crate) has_vs: bool,
    /// The header's source level (V), used without a Vs column.
    pub(crate) level: f64,
    /// Group indices in order of frequency, and their frequencies.
    pub(crate) order: Vec<usize>,
    pub(crate) fs: Vec<f64>,
    /// Per point, the inputs it reads.
    pub(crate) own: Vec<Vec<usize>>,
    /// The fitted magnitude of group `g` at inputs `x`, and its symbol for messages.
    pub(crate) y_of: fn(&Sweep, &[f64], usize) -> f64,
    pub(crate) symbol: &'static str,
}

/// |Y| = VR/(R·Vs) of group `g` at inputs `x`.
fn admittance_of(sw: &Sweep, x: &[f64], g: usize) -> f64 {
    let bi = sw.bi;
    let vs = if sw.has_vs {
        bi.voltage("Vs", g, x)
    } else {
        sw.level
    };
    bi.voltage("VR", g, x) / (bi.r(x) * vs)
}

impl Sweep<'_> {
    /// Groups in order of frequency, their frequencies, and each point's inputs (its own
    /// group's and the shared ones: resistor, gains).
    pub(crate) fn order(bi: &BlockInputs) -> (Vec<usize>, Vec<f64>, Vec<Vec<usize>>) {
        let mut order: Vec<usize> = (0..bi.groups.len()).collect();
        order.sort_by(|&a, &b| {
            let fa = bi.groups[a].f.unwrap_or(0.0);
            let fb = bi.groups[b].f.unwrap_or(0.0);
            fa.total_cmp(&fb)
        });
        let fs = order
            .iter()
            .map(|&g| bi.groups[g].f.unwrap_or(f64::NAN))
            .collect();
        let own = order.iter().map(|&g| bi.group_inputs(g)).collect();
        (order, fs, own)
    }

    /// The fitted magnitude at every point, in order of frequency.
    pub(crate) fn ys(&self, x: &[f64]) -> Vec<f64> {
        self.order
            .iter()
            .map(|&g| (self.y_of)(self, x, g))
            .collect()
    }

    /// The inputs read by the points `pts`, sorted, each once.
    pub(crate) fn union_of(&self, pts: &[usize]) -> Vec<usize> {
        let mut v: Vec<usize> = pts
            .iter()
            .filter_map(|&k| self.own.get(k))
            .flatten()
            .copied()
            .collect();
        v.sort_unstable();
        v.dedup();
        v
    }
}

/// Fit weights as standard uncertainties per point, and how they were chosen (for the flag).
fn fit_weights(
    bi: &BlockInputs,
    py: &Propagated,
    ys: &[f64],
    u_tot: &[f64],
) -> (Vec<f64>, &'static str) {
    let ng = ys.len();
    // Weights from each point's own inputs (those no other point depends on).
    let n_in = bi.inputs.len();
    let mut u_w = vec![0.0; ng];
    let mut users = vec![0usize; n_in];
    for k in 0..ng {
        for &(i, _) in py.sensitivities(k) {
            users[i] += 1;
        }
    }
    for k in 0..ng {
        for &(i, c) in py.sensitivities(k) {
            if users[i] == 1 {
                u_w[k] += (c * bi.inputs[i].u).powi(2);
            }
        }
    }
    let mut weights_note = "each point's own (unshared) uncertainty";
    for k in 0..ng {
        u_w[k] = u_w[k].sqrt();
        if !(u_w[k] > 0.0) {
            u_w[k] = u_tot[k];
        }
    }
    if u_w.iter().any(|u| !(*u > 0.0)) {
        weights_note = "equal relative weights (the readings carry no per-point uncertainty)";
        for k in 0..ng {
            u_w[k] = 1e-3 * ys[k].abs().max(f64::MIN_POSITIVE);
        }
    }

    (u_w, weights_note)
}

/// Read-offs from the data, with uncertainty from the readings (indices fixed at the
/// estimates): the peak and the half-power points.
pub(crate) fn read_offs(sw: &Sweep, ys: &[f64], out: &mut BlockResult) {
    let (ctx, block, fs) = (sw.ctx, sw.block, &sw.fs);
    let model = sw.bi.model();
    let ys_model = |x: &[f64]| sw.ys(x);
    let (plot, results, flags) = (&mut out.plot, &mut out.results, &mut out.flags);
    let ro = read_off(fs, ys);
    let ro_model = |x: &[f64]| -> Vec<f64> {
        let y = ys_model(x);
        let mut out = Vec::new();
        let im = ro.imax;
        if ro.peak.is_some() {
            let v = vertex(
                [fs[im - 1].ln(), fs[im].ln(), fs[im + 1].ln()],
                [y[im - 1], y[im], y[im + 1]],
            );
            out.push(v.map(|p| p.0.exp()).unwrap_or(f64::NAN));
            let top = v.map(|p| p.1.max(y[im])).unwrap_or(f64::NAN);
            let level = top / 2f64.sqrt();
            for side in [ro.low, ro.high].iter().flatten() {
                let i = side.1;
                out.push(fs[i] + (fs[i + 1] - fs[i]) * (level - y[i]) / (y[i + 1] - y[i]));
            }
        }
        out
    };
    if ro.peak.is_some() {
        let names: Vec<&str> = std::iter::once("f0_peak")
            .chain(ro.low.map(|_| "f_low"))
            .chain(ro.high.map(|_| "f_high"))
            .collect();
        let mut pts = vec![ro.imax.saturating_sub(1), ro.imax, ro.imax + 1];
        for side in [ro.low, ro.high].iter().flatten() {
            pts.extend([side.1, side.1 + 1]);
        }
        let near = sw.union_of(&pts);
        let ro_pattern = vec![near; names.len()];
        match propagate_sparse(&model, &ro_model, Some(&ro_pattern), ctx.coverage) {
            Ok(p) => {
                let hw = interpolation_halfwidths(fs, ys, &ro);
                for ((name, mut m), a) in names.iter().zip(p.results).zip(hw) {
                    add_term(&mut m, interpolation_line(a), ctx.coverage);
                    plot.markers
                        .push((name.replace("f0_peak", "f0").to_string(), m.value));
                    results.push(NamedResult {
                        name: name.to_string(),
                        f: None,
                        unit: Unit::Hz,
                        m,
                    });
                }
            }
            Err(e) => flags.push(Flag {
                warn: false,
                span: Some(block.span),
                message: format!("the read-off points have no uncertainty: {e}"),
            }),
        }
        flags.push(Flag {
            warn: false,
            span: Some(block.span),
            message: format!("read-off points: f0_peak is the vertex of the parabola through the three highest readings in ln f, f_low and f_high are linear interpolations between the readings around {}max/√2; each U includes the interpolation error between sweep points, a rectangular term of half-width |parabola vertex − cubic maximum| (f0_peak) or |linear − quadratic| crossing plus the effect of the peak height's own such error (f_low, f_high), rectangular because the difference bounds the error without making any value inside it likelier (GUM 4.3.7)", sw.symbol),
        });
        for (side, name) in [(ro.low, "lower"), (ro.high, "upper")] {
            if side.is_none() {
                flags.push(Flag {
                    warn: false,
                    span: Some(block.span),
                    message: format!("the sweep does not reach the {name} half-power point: it is not read off the data"),
                });
            }
        }
    }
}

/// The interpolation half-widths of the read-off points, in the order `read_offs` names them
/// (f0_peak, then f_low and f_high where read).
fn interpolation_halfwidths(fs: &[f64], ys: &[f64], ro: &ReadOff) -> Vec<f64> {
    let (df, dy) = peak_halfwidth(fs, ys, ro.imax);
    let Some((_, top)) = ro.peak else {
        return Vec::new();
    };
    let level = top / 2f64.sqrt();
    let mut out = vec![df];
    for side in [ro.low, ro.high].iter().flatten() {
        let i = side.1;
        let slope = ((ys[i + 1] - ys[i]) / (fs[i + 1] - fs[i])).abs();
        let from_level = if slope > 0.0 {
            dy / 2f64.sqrt() / slope
        } else {
            0.0
        };
        out.push(crossing_halfwidth(fs, ys, i, level) + from_level);
    }
    out
}

/// The budget line of the interpolation error of a read-off point: rectangular, half-width `a`.
fn interpolation_line(a: f64) -> BudgetLine {
    let u = a / 3f64.sqrt();
    BudgetLine {
        input: "interpolation between sweep points".into(),
        estimate: 0.0,
        u,
        kind: EvalType::B,
        dist: Dist::Rectangular,
        sensitivity: 1.0,
        contribution: u,
        dof: None,
    }
}

/// What follows from a fit's three parameters (e^θ, not their logarithms): the derived
/// results and their function, the pairs whose correlation is reported, the fitted curve,
/// the f0 marker, and the names of the fit and of its parameters as inputs.
pub(crate) struct FitModel {
    pub(crate) name: &'static str,
    pub(crate) params: [&'static str; 3],
    /// The results from (f0, Q, R) written in place: one per entry of `results`.
    pub(crate) fill: fn(&[f64; 3], &mut [f64]),
    pub(crate) results: &'static [(&'static str, Unit)],
    pub(crate) pairs: &'static [(usize, usize)],
    pub(crate) curve: fn(f64, &[f64; 3]) -> f64,
    pub(crate) marker: fn(&[f64; 3]) -> f64,
}

/// The series fit: (f0, Q, Rt) → [`DERIVED`].
const SERIES: FitModel = FitModel {
    name: "RLC fit",
    params: ["f0 (fit)", "Q (fit)", "Rtotal (fit)"],
    fill: derived_into,
    results: &DERIVED,
    pairs: &[(0, 1), (0, 2), (1, 5), (3, 4), (3, 5), (4, 5)],
    curve: |f, p| admittance(f, p[0], p[1], p[2]),
    marker: |p| p[0],
};

/// The fitted parameters and what follows from them (`fm`): derived results with Monte
/// Carlo, their correlations, the χ² flag, the fitted curve and the residuals.
pub(crate) fn fit_results(
    sw: &Sweep,
    fm: &FitModel,
    fit: &ResonanceFit,
    pts: &Points,
    out: &mut BlockResult,
) -> Result<(), Vec<Diagnostic>> {
    let (ctx, block, fs) = (sw.ctx, sw.block, &sw.fs);
    let (py, u_tot, weights_note) = (&pts.py, &pts.u_tot, pts.weights_note);
    let derived = |p: &[f64]| fill_vec(fm.fill, fm.results.len(), p);
    let ng = fs.len();
    let (plot, results, correlations, flags) = (
        &mut out.plot,
        &mut out.results,
        &mut out.correlations,
        &mut out.flags,
    );
    // Fitted (f0, Q, Rt) as correlated normal inputs: cov = D (A V Aᵀ) D, D = diag(e^θ).
    let cov_log = fit.cov_from(py);
    let p0 = [fit.f0(), fit.q(), fit.rt()];
    let birge = birge_ratio(fit);
    let (fit_in, corr) = fit_inputs(fm.params, p0, &cov_log);
    let pd = propagate(
        &Model {
            inputs: &fit_in,
            corr: &corr,
        },
        &derived,
        ctx.coverage,
    )
    .at_block(block)?;
    // Scatter beyond the stated u: the fit's own part (JᵀWJ)⁻¹ of the covariance is scaled
    // by χ²/ν = R_B²; the shared part (gains, R) is not. Monte Carlo samples the scaled law.
    let mut cov_mc = cov_log;
    if let Some(rb) = birge {
        for a in 0..3 {
            for b in 0..3 {
                cov_mc[a][b] += (rb * rb - 1.0) * fit.cov_theta[a][b];
            }
        }
    }
    let (mc_in, mc_corr) = fit_inputs(fm.params, p0, &cov_mc);
    let mc = fit_monte_carlo(fm, &mc_in, &mc_corr, ctx.coverage, &block.id);
    let mut unvalidated = Vec::new();
    for (k, (name, unit)) in fm.results.iter().enumerate() {
        let mut m = pd.results[k].clone();
        if let Some(rb) = birge {
            add_term(&mut m, scatter_line(&pd, k, p0, fit, rb), ctx.coverage);
        }
        m.mc = mc.get(k).cloned();
        if let Some(v) = attach_validation(&mut m) {
            if !v.validated && m.u > 0.0 {
                unvalidated.push(*name);
            }
        }
        results.push(NamedResult {
            name: name.to_string(),
            f: None,
            unit: *unit,
            m,
        });
    }
    for &(a, b) in fm.pairs {
        correlations.push(Correlation {
            a: fm.results[a].0.into(),
            b: fm.results[b].0.into(),
            r: correlation(&pd, a, b),
            f: None,
        });
    }
    if !unvalidated.is_empty() {
        flags.push(Flag {
            warn: false,
            span: Some(block.span),
            message: format!(
                "the GUM intervals of {} differ from the Monte Carlo intervals by more than the numerical tolerance (JCGM 101 §8): the record prints the Monte Carlo intervals (probabilistically symmetric, JCGM 101 §7.7.2) and judges with them",
                unvalidated.join(", ")
            ),
        });
    }
    flags.push(chi2_flag(fm.name, fit, weights_note, block));
    let f0 = p0[0];
    plot.markers.insert(0, ("f0".into(), (fm.marker)(&p0)));
    let (lo, hi) = (
        fs.first().copied().unwrap_or(f0),
        fs.last().copied().unwrap_or(f0),
    );
    let curve: Vec<(f64, f64)> = (0..200)
        .map(|k| {
            let fk = lo * (hi / lo).powf(k as f64 / 199.0);
            (fk, (fm.curve)(fk, &p0))
        })
        .collect();
    plot.curves.push(("fit".into(), curve));
    plot.series.push((
        "residual".into(),
        (0..ng)
            .map(|k| (fs[k], fit.residuals[k], u_tot[k]))
            .collect(),
    ));
    Ok(())
}

/// Monte Carlo over the fitted parameters (correlated normal `inputs`) through `fm.fill`, a
/// chunk of trials at a time with no allocation per trial.
fn fit_monte_carlo(
    fm: &FitModel,
    inputs: &[Input],
    corr: &[(usize, usize, f64)],
    p: f64,
    id: &str,
) -> Vec<McInterval> {
    let (fill, n) = (fm.fill, fm.results.len().min(MAX_DERIVED));
    let columns = |c: &Columns, out: &mut [f64], _: &mut Vec<f64>| {
        let cols = [c.col(0), c.col(1), c.col(2)];
        let mut y = [0.0; MAX_DERIVED];
        for t in 0..c.len {
            fill(&cols.each_ref().map(|col| col.at(t)), &mut y[..n]);
            for (o, v) in y[..n].iter().enumerate() {
                out[o * CHUNK + t] = *v;
            }
        }
    };
    let model = InPlace {
        outputs: n,
        eval: Eval::Chunk(&columns),
    };
    let seed = crate::montecarlo::seed_of(id, 0x5eed);
    monte_carlo_on(inputs, corr, &[0, 1, 2], model, p, seed, None)
}

/// Most results a fit model derives (the tank's eight).
const MAX_DERIVED: usize = 8;

/// 95 % upper limit of χ²/ν for ν degrees of freedom (the χ² quantile, statrs).
fn chi2_limit(nu: usize) -> f64 {
    ChiSquared::new(nu.max(1) as f64)
        .map(|d| d.inverse_cdf(0.95) / nu.max(1) as f64)
        .unwrap_or(f64::INFINITY)
}

/// The Birge ratio R_B = √(χ²/ν) (Birge 1932) when χ²/ν exceeds its 95 % limit: the scatter
/// is then beyond the stated uncertainties and the fit covariance is scaled by R_B², as
/// scipy's curve_fit does with absolute_sigma=False (common practice in least squares).
pub fn birge_ratio(fit: &ResonanceFit) -> Option<f64> {
    let rc2 = fit.reduced_chi2();
    (fit.dof > 0 && rc2 > chi2_limit(fit.dof) && rc2.is_finite()).then(|| rc2.sqrt())
}

/// Normal inputs `names` at `p0` with the covariance `cov_log` of their logarithms.
fn fit_inputs(
    names: [&str; 3],
    p0: [f64; 3],
    cov_log: &[[f64; 3]; 3],
) -> (Vec<Input>, Vec<(usize, usize, f64)>) {
    let fit_in: Vec<Input> = (0..3)
        .map(|k| {
            Input::type_b(
                names[k],
                p0[k],
                p0[k] * cov_log[k][k].max(0.0).sqrt(),
                Dist::Normal,
            )
        })
        .collect();
    let mut corr = Vec::new();
    for a in 0..3 {
        for b in a + 1..3 {
            let d = (cov_log[a][a] * cov_log[b][b]).sqrt();
            if d > 0.0 {
                corr.push((a, b, (cov_log[a][b] / d).clamp(-1.0, 1.0)));
            }
        }
    }
    (fit_in, corr)
}

/// The budget line of the scatter beyond the stated u for derived result `k`: the variance
/// (R_B² − 1)·gᵀ D (JᵀWJ)⁻¹ D g, g its sensitivities to (f0, Q, Rt), D = diag(f0, Q, Rt);
/// Type A with ν = n − 3 (it comes from the residuals).
fn scatter_line(
    pd: &Propagated,
    k: usize,
    p0: [f64; 3],
    fit: &ResonanceFit,
    rb: f64,
) -> BudgetLine {
    let g: Vec<f64> = (0..3).map(|i| pd.sensitivity(k, i) * p0[i]).collect();
    let mut var = 0.0;
    for a in 0..3 {
        for b in 0..3 {
            var += g[a] * fit.cov_theta[a][b] * g[b];
        }
    }
    let c = ((rb * rb - 1.0) * var).max(0.0).sqrt();
    BudgetLine {
        input: format!(
            "scatter beyond stated u, Birge ratio R_B = {}",
            plain(rb, 3)
        ),
        estimate: 0.0,
        u: c,
        kind: EvalType::A,
        dist: Dist::Normal,
        sensitivity: 1.0,
        contribution: c,
        dof: Some(fit.dof as f64),
    }
}

/// The note on the fit's χ²: the weights, and whether the covariance was scaled.
fn chi2_flag(name: &str, fit: &ResonanceFit, weights_note: &str, block: &ReadingsBlock) -> Flag {
    let nu = fit.dof;
    let rc2 = fit.reduced_chi2();
    let limit = chi2_limit(nu);
    let message = match birge_ratio(fit) {
        Some(rb) => format!(
            "{name}: χ²/ν = {} (ν = {nu}) exceeds its 95 % limit {}, weights from {weights_note}: the scatter is beyond the stated uncertainties, so the fit's own covariance is scaled by χ²/ν (Birge ratio R_B = {}, as least-squares practice and scipy's curve_fit with absolute_sigma=False do); each derived result's budget carries it as a line and its U and verdict use the scaled covariance",
            plain(rc2, 3),
            plain(limit, 3),
            plain(rb, 3)
        ),
        None => format!(
            "{name}: χ²/ν = {} (ν = {nu}, 95 % limit {}), weights from {weights_note}; the covariance is not scaled by χ²/ν",
            plain(rc2, 3),
            plain(limit, 3)
        ),
    };
    Flag {
        warn: false,
        span: Some(block.span),
        message,
    }
}

/// Phase zero crossing as a further f0 estimate.
fn phase_f0(sw: &Sweep, out: &mut BlockResult) {
    let (ctx, block, bi, fs, order) = (sw.ctx, sw.block, sw.bi, &sw.fs, &sw.order);
    let ng = fs.len();
    let model = bi.model();
    let (plot, results, flags) = (&mut out.plot, &mut out.results, &mut out.flags);
    let has_phi = bi.has("phi");
    let has_shift = bi.has("shift") && bi.has("period");
    if has_phi || has_shift {
        let ph = |x: &[f64], g: usize| -> f64 {
            if has_phi {
                bi.value("phi", g, x)
            } else {
                2.0 * PI * bi.value("shift", g, x) / bi.value("period", g, x)
            }
        };
        let x0 = bi.estimates();
        let phases: Vec<f64> = order.iter().map(|&g| ph(&x0, g)).collect();
        plot.series.push((
            "phase_measured".into(),
            (0..ng).map(|k| (fs[k], phases[k], 0.0)).collect(),
        ));
        match zero_crossing(fs, &phases) {
            Some((_, i)) => {
                let zc = |x: &[f64]| -> Vec<f64> {
                    let (a, b) = (ph(x, order[i]), ph(x, order[i + 1]));
                    vec![fs[i] + (fs[i + 1] - fs[i]) * a / (a - b)]
                };
                let zc_pattern = vec![sw.union_of(&[i, i + 1])];
                match propagate_sparse(&model, &zc, Some(&zc_pattern), ctx.coverage) {
                    Ok(p) => {
                        if let Some(m) = p.results.into_iter().next() {
                            results.push(NamedResult {
                                name: "f0_phase".into(),
                                f: None,
                                unit: Unit::Hz,
                                m,
                            });
                        }
                    }
                    Err(e) => flags.push(Flag {
                        warn: false,
                        span: Some(block.span),
                        message: format!("phase zero crossing not computed: {e}"),
                    }),
                }
            }
            None => flags.push(Flag {
                warn: false,
                span: Some(block.span),
                message:
                    "the measured phase does not change sign over the sweep: no f0 from the phase"
                        .into(),
            }),
        }
    }
}

/// Prediction from the parts' values.
fn prediction(ctx: &Context, block: &ReadingsBlock, bi: &BlockInputs) -> Option<Flag> {
    let (ln, l, dcr) = part_value(ctx, block, PartKind::Inductor)?;
    let (cn, c, _) = part_value(ctx, block, PartKind::Capacitor)?;
    let r = bi.r(&bi.estimates()) + dcr.unwrap_or(0.0);
    let f0p = 1.0 / (2.0 * PI * (l * c).sqrt());
    let qp = (l / c).sqrt() / r;
    (f0p.is_finite() && qp.is_finite()).then(|| Flag {
        warn: false,
        span: Some(block.span),
        message: format!(
            "the parts predict f0 = {} and Q = {} ({ln} and {cn}, R{} = {})",
            hz(f0p),
            plain(qp, 3),
            if dcr.is_some() { " + dcr" } else { "" },
            crate::print::quantity(r, Unit::Ohm)
        ),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::notebook::Network;

    fn sweep(f0: f64, q: f64, rt: f64, n: usize) -> (Vec<f64>, Vec<f64>) {
        let f: Vec<f64> = (0..n)
            .map(|k| f0 * 0.5 * 4f64.powf(k as f64 / (n - 1) as f64))
            .collect();
        let y = f.iter().map(|&x| admittance(x, f0, q, rt)).collect();
        (f, y)
    }

    // Series resonance (circuit theory): at f0 |Y| = 1/Rt; at the half-power points
    // f0(√(1 + 1/(4Q²)) ∓ 1/(2Q)) |Y| = 1/(√2 Rt), and their difference is f0/Q.
    #[test]
    fn model_and_half_power_points() {
        let (f0, q, rt) = (3170.0, 7.3, 41.0);
        assert!((admittance(f0, f0, q, rt) - 1.0 / rt).abs() < 1e-15);
        let s = (1.0 + 1.0 / (4.0 * q * q)).sqrt();
        let (fl, fh) = (f0 * (s - 0.5 / q), f0 * (s + 0.5 / q));
        for fx in [fl, fh] {
            assert!((admittance(fx, f0, q, rt) * rt * 2f64.sqrt() - 1.0).abs() < 1e-12);
        }
        assert!((fh - fl - f0 / q).abs() < 1e-9);
        // L and C from (f0, Q, Rt): ω0 L = Q Rt, 1/(ω0 C) = Q Rt.
        let d = derived(&[f0.ln(), q.ln(), rt.ln()]);
        assert!((1.0 / (2.0 * PI * (d[3] * d[4]).sqrt()) - f0).abs() < 1e-9);
    }

    #[test]
    fn exact_sweep_is_recovered() {
        let (f, y) = sweep(3170.0, 7.3, 41.0, 25);
        let u: Vec<f64> = y.iter().map(|v| v * 1e-3).collect();
        let fit = fit_resonance(&f, &y, &u).unwrap();
        assert!((fit.f0() / 3170.0 - 1.0).abs() < 1e-9);
        assert!((fit.q() / 7.3 - 1.0).abs() < 1e-9);
        assert!((fit.rt() / 41.0 - 1.0).abs() < 1e-9);
        assert!(fit.chi2 < 1e-12);
    }

    #[test]
    fn monotonic_sweep_is_no_peak() {
        let f: Vec<f64> = (1..10).map(|k| 100.0 * k as f64).collect();
        let y: Vec<f64> = f.iter().map(|x| 1.0 / x).collect();
        let u: Vec<f64> = y.iter().map(|v| v * 0.01).collect();
        assert_eq!(
            fit_resonance(&f, &y, &u).unwrap_err(),
            FitError::NoPeak { at_low_end: true }
        );
        let e = FitError::NoPeak { at_low_end: true }.to_string();
        assert!(e.contains("no resonance peak"));
    }

    // Phase from a two-trace display (FORMAT.md: 360° × shift/period, current leading
    // positive) and no Vs column (the stated `source` level): series-resonance phasors by
    // num-complex; f0 comes back from the fit, and from the phase zero crossing to within one
    // linear-interpolation step.
    #[test]
    fn shift_period_and_source_level() {
        use super::super::inputs::testutil::*;
        use crate::notebook::Tolerance;
        use num_complex::Complex64;
        let (r, rc, l, c, vs): (f64, f64, f64, f64, f64) = (82.0, 6.1, 12.7e-3, 0.33e-6, 1.25);
        let f0 = 1.0 / (2.0 * PI * (l * c).sqrt());
        let period = 10.0;
        let data: Vec<Vec<f64>> = (0..15)
            .map(|k| {
                let f = f0 * 0.6 * (2.9f64).powf(k as f64 / 14.0);
                let w = 2.0 * PI * f;
                let i = Complex64::new(vs, 0.0) / Complex64::new(r + rc, w * l - 1.0 / (w * c));
                vec![f, (i * r).norm(), i.arg() / (2.0 * PI) * period, period]
            })
            .collect();
        let mut env = Env::new();
        env.parts.insert(
            "R1".into(),
            resistor("R1", r, Some(Tolerance::Relative(0.01))),
        );
        let mut b = block(
            Network::RLC,
            &[
                ("f", Unit::Hz),
                ("VR", Unit::V),
                ("shift", Unit::Div),
                ("period", Unit::Div),
            ],
            &data,
        );
        b.parts = vec![named("R1")];
        b.source = Some(vs);
        let out = reduce(&env.ctx(), &b).unwrap();
        let get = |n: &str| out.results.iter().find(|x| x.name == n).map(|x| x.m.value);
        assert!((get("f0").unwrap() / f0 - 1.0).abs() < 1e-9);
        assert!((get("Rtotal").unwrap() / (r + rc) - 1.0).abs() < 1e-9);
        assert!((get("f0_phase").unwrap() / f0 - 1.0).abs() < 0.01);
        assert!(out
            .flags
            .iter()
            .any(|f| f.message.contains("stated source level")));
    }

    // Exact readings of coarse sweeps by complex arithmetic (num-complex): the read-off
    // points miss the circuit-theory values (f0 = 1/(2π√(LC)), half-power points
    // f0(√(1 + 1/4Q²) ∓ 1/2Q)) by far more than the readings' U, and the interpolation term
    // brings the truth inside U. The readings alone would not cover it in at least one case.
    // The sweeps step 4–11 % in f, 1.5 to 3 steps per bandwidth f0/Q; with less than one
    // step per bandwidth the quadratic no longer stands in for the curve and the term can
    // fall short (seen with 15 % steps at Q ≈ 14).
    #[test]
    fn read_off_points_cover_the_truth_on_coarse_sweeps() {
        use super::super::inputs::testutil::*;
        use crate::notebook::{Accuracy, Tolerance};
        use crate::quantity::Quantity;
        use num_complex::Complex64;
        let mut readings_alone_miss = false;
        let cases: [(f64, f64, f64, usize, f64); 4] = [
            (22.0e-3, 47e-9, 47.0, 31, 0.55),
            (10.0e-3, 100e-9, 33.0, 21, 0.47),
            (4.7e-3, 220e-9, 30.0, 13, 0.6),
            (33.0e-3, 15e-9, 120.0, 25, 0.52),
        ];
        for (l, c, r, n, start) in cases {
            let (vs, rc): (f64, f64) = (1.0, 0.0);
            let rt = r + rc;
            let f0 = 1.0 / (2.0 * PI * (l * c).sqrt());
            let q = (l / c).sqrt() / rt;
            let data: Vec<Vec<f64>> = (0..n)
                .map(|k| {
                    let f = f0 * start * (3.6f64).powf(k as f64 / (n - 1) as f64);
                    let w = 2.0 * PI * f;
                    let i = Complex64::new(vs, 0.0) / Complex64::new(rt, w * l - 1.0 / (w * c));
                    vec![f, vs, (i * r).norm()]
                })
                .collect();
            let mut env = Env::new();
            env.instruments.insert(
                "dmm".into(),
                instrument(
                    "dmm",
                    Some(Accuracy::Relative {
                        fraction: 0.002,
                        counts: 2.0,
                    }),
                    Some(Quantity {
                        value: 1e-6,
                        unit: Unit::V,
                    }),
                ),
            );
            env.parts.insert(
                "R1".into(),
                resistor("R1", r, Some(Tolerance::Relative(0.001))),
            );
            let mut b = block(
                Network::RLC,
                &[("f", Unit::Hz), ("Vs", Unit::V), ("VR", Unit::V)],
                &data,
            );
            b.parts = vec![named("R1")];
            b.meter = Some(named("dmm"));
            let out = reduce(&env.ctx(), &b).unwrap();
            let s = (1.0 + 1.0 / (4.0 * q * q)).sqrt();
            for (name, truth) in [
                ("f0_peak", f0),
                ("f_low", f0 * (s - 0.5 / q)),
                ("f_high", f0 * (s + 0.5 / q)),
            ] {
                let m = &out.results.iter().find(|x| x.name == name).unwrap().m;
                let err = (m.value - truth).abs();
                eprintln!("{name} Q={q:.2} n={n}: err {err:.3} U {:.3}", m.expanded);
                assert!(
                    err <= m.expanded,
                    "{name}: |{} − {truth}| > U = {}",
                    m.value,
                    m.expanded
                );
                let line = m
                    .budget
                    .iter()
                    .find(|b| b.input == "interpolation between sweep points")
                    .expect("the interpolation term is in the budget");
                let readings = (m.u * m.u - line.contribution.powi(2)).max(0.0).sqrt();
                readings_alone_miss |= err > m.k * readings;
            }
        }
        assert!(
            readings_alone_miss,
            "the readings' U alone already covered every point"
        );
    }

    #[test]
    fn read_off_parabola_is_exact_for_a_parabola() {
        // A parabola in ln f is recovered exactly by the three-point vertex (algebra).
        let f: Vec<f64> = [0.5f64, 0.8, 1.1, 1.7, 2.6]
            .iter()
            .map(|v| 1000.0 * v)
            .collect();
        let y: Vec<f64> = f
            .iter()
            .map(|v| 3.0 - (v.ln() - 1100f64.ln()).powi(2))
            .collect();
        let ro = read_off(&f, &y);
        let (fp, yp) = ro.peak.unwrap();
        assert!((fp - 1100.0).abs() < 1e-9 && (yp - 3.0).abs() < 1e-12);
    }
}
