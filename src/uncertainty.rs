//! GUM machinery: inputs with standard uncertainties, the law of propagation (JCGM 100 §5)
//! with correlations, Welch–Satterthwaite, coverage factors, and Monte Carlo (JCGM 101).
//! Knows nothing of circuits.

use crate::notebook::Distribution;
use serde::Serialize;
use statrs::distribution::{ContinuousCDF, Normal, StudentsT};
use std::collections::BTreeMap;

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum EvalType {
    A,
    B,
}

#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub enum Dist {
    Normal,
    Rectangular,
    /// Student's t from a Type A evaluation.
    StudentT,
}

/// One input quantity of a measurement model.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Input {
    /// Name shown in budgets, e.g. `VR@1000 Hz` or `gain(dmm,VC)`.
    pub name: String,
    pub value: f64,
    pub u: f64,
    /// Degrees of freedom; None = infinite.
    pub dof: Option<f64>,
    pub kind: EvalType,
    pub dist: Dist,
}

impl Input {
    /// A Type A input: a mean with its standard deviation of the mean and n − 1 dof.
    pub fn type_a(name: impl Into<String>, value: f64, u: f64, dof: f64) -> Input {
        Input {
            name: name.into(),
            value,
            u,
            dof: Some(dof),
            kind: EvalType::A,
            dist: Dist::StudentT,
        }
    }

    /// A Type B input with infinite dof (GUM G.4.2: taken as exactly known u).
    pub fn type_b(name: impl Into<String>, value: f64, u: f64, dist: Dist) -> Input {
        Input {
            name: name.into(),
            value,
            u,
            dof: None,
            kind: EvalType::B,
            dist,
        }
    }
}

/// One line of an uncertainty budget.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BudgetLine {
    pub input: String,
    pub estimate: f64,
    pub u: f64,
    pub kind: EvalType,
    pub dist: Dist,
    /// Sensitivity coefficient ∂y/∂x.
    pub sensitivity: f64,
    /// |c|·u, the contribution to u(y).
    pub contribution: f64,
    pub dof: Option<f64>,
}

/// Coverage interval from a Monte Carlo run (JCGM 101).
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct McInterval {
    /// Trials kept (all outputs finite).
    pub trials: usize,
    /// Trials drawn but left out because an output was not finite there (a model that is
    /// undefined for part of the input distribution, e.g. a triangle that does not close).
    pub dropped: usize,
    pub mean: f64,
    pub u: f64,
    pub low: f64,
    pub high: f64,
    /// Whether the GUM interval passes the JCGM 101 §8 validation.
    pub gum_validated: bool,
}

/// A result with its uncertainty.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Measured {
    pub value: f64,
    /// Combined standard uncertainty.
    pub u: f64,
    /// Effective degrees of freedom; None = infinite.
    pub dof: Option<f64>,
    /// Coverage factor at the notebook's coverage probability.
    pub k: f64,
    /// Expanded uncertainty U = k·u.
    pub expanded: f64,
    pub budget: Vec<BudgetLine>,
    pub mc: Option<McInterval>,
}

/// `num / den` when that is a finite number; `None` for a zero or non-finite divisor or a
/// quotient beyond f64. Every ratio the reduction prints (a relative uncertainty, a ratio to a
/// result that may be zero) goes through this, so a non-finite number stops where it arises.
pub fn ratio(num: f64, den: f64) -> Option<f64> {
    let q = num / den;
    (den != 0.0 && q.is_finite()).then_some(q)
}

/// Relative standard uncertainty u(y)/|y|; `None` when y is zero or the ratio is not finite.
pub fn relative_u(m: &Measured) -> Option<f64> {
    ratio(m.u, m.value.abs())
}

/// Above this many degrees of freedom the normal quantile is used (the t quantile differs
/// from it by less than 1e-7 there).
const DOF_NORMAL: f64 = 1e7;

/// Degrees of freedom as they enter k and are printed: ν_eff truncated (GUM G.6.4 truncates to
/// the next lower integer; below 10, where t changes fast, we keep one decimal, truncated),
/// so that the printed ν reproduces the printed k. Never below 1.
pub fn dof_for_k(nu: f64) -> f64 {
    if !(nu > 1.0) {
        return 1.0;
    }
    if nu < 10.0 {
        ((nu * 10.0 + 1e-9).floor() / 10.0).max(1.0)
    } else {
        (nu + 1e-9).floor()
    }
}

/// Coverage factor for a two-sided coverage probability `p` (e.g. 0.9545): the Student's t
/// quantile t_p(ν) at ν = [`dof_for_k`] of a finite `dof`, the normal quantile for `None`.
/// `p` is clamped into [1e-12, 1 − 1e-12]; a non-positive or NaN dof is taken as 1 (the
/// smallest a Type A evaluation gives).
pub fn coverage_factor(p: f64, dof: Option<f64>) -> f64 {
    let p = if p.is_nan() {
        0.9545
    } else {
        p.clamp(1e-12, 1.0 - 1e-12)
    };
    let q = 0.5 * (1.0 + p);
    match dof {
        Some(nu) if !(nu >= DOF_NORMAL) => {
            let nu = dof_for_k(nu);
            match StudentsT::new(0.0, 1.0, nu) {
                Ok(t) => t.inverse_cdf(q),
                Err(_) => normal_quantile(q),
            }
        }
        _ => normal_quantile(q),
    }
}

fn normal_quantile(q: f64) -> f64 {
    match Normal::new(0.0, 1.0) {
        Ok(n) => n.inverse_cdf(q),
        Err(_) => 2.0,
    }
}

/// Welch–Satterthwaite effective degrees of freedom (GUM G.4.1, eq. G.2b) over contributions
/// `(c_i·u_i, ν_i)`: ν_eff = (Σ (c_i u_i)²)² / Σ (c_i u_i)⁴/ν_i. `None` (infinite) when no
/// contribution has finite dof or all are zero. The numerator is built from the contributions
/// themselves, so with correlated inputs (where G.4.1 does not strictly apply) ν_eff still lies
/// between min ν_i and Σ ν_i.
pub fn welch_satterthwaite(contribs: &[(f64, Option<f64>)]) -> Option<f64> {
    // Contributions are scaled by the largest, so that c⁴ neither under- nor overflows (the
    // ratio is scale-free). All zero, none with finite dof or one not finite: 0/0, x/0 or
    // ∞/∞, so None.
    let s = contribs.iter().fold(0.0, |s: f64, c| s.max(c.0.abs()));
    let mut num = 0.0;
    let mut den = 0.0;
    for &(cu, nu) in contribs {
        let c2 = (cu / s).powi(2);
        num += c2;
        if let Some(nu) = nu {
            let nu = if nu > 0.0 { nu } else { 1.0 };
            den += c2 * c2 / nu;
        }
    }
    let nu = num * num / den;
    nu.is_finite().then_some(nu)
}

/// Adds to `m` one further contribution, independent of its other inputs (a method term such
/// as an interpolation error, or the scatter beyond the stated uncertainties of a fit), as its
/// own budget line: u² grows by the line's contribution², ν_eff follows Welch–Satterthwaite
/// (GUM G.4.1) over the two parts, and k and U are recomputed at `coverage`.
pub fn add_term(m: &mut Measured, line: BudgetLine, coverage: f64) {
    let c = line.contribution.abs();
    if !c.is_finite() || c == 0.0 {
        return;
    }
    let u = m.u.hypot(c);
    m.dof = welch_satterthwaite(&[(m.u, m.dof), (c, line.dof)]);
    m.u = u;
    m.k = coverage_factor(coverage, m.dof);
    m.expanded = m.k * u;
    m.budget.push(line);
}

/// Type A evaluation of n repeated observations (GUM 4.2): returns (mean q̄, s(q̄) = s/√n,
/// ν = n − 1). n = 1 gives (q, 0, 0); an empty slice gives (0, 0, 0).
pub fn type_a(samples: &[f64]) -> (f64, f64, f64) {
    let n = samples.len();
    if n == 0 {
        return (0.0, 0.0, 0.0);
    }
    let nf = n as f64;
    let mean = samples.iter().sum::<f64>() / nf;
    if n == 1 {
        return (mean, 0.0, 0.0);
    }
    let ss: f64 = samples.iter().map(|x| (x - mean) * (x - mean)).sum();
    let s2 = ss / (nf - 1.0);
    (mean, (s2 / nf).sqrt(), nf - 1.0)
}

/// Correlation coefficient of two means from the same n observations (GUM 5.2.3, eq. 17 and
/// C.3.6): r(q̄, r̄) = s(q̄, r̄)/(s(q̄) s(r̄)). Zero when lengths differ, n < 2 or a variance is zero.
pub fn type_a_correlation(x: &[f64], y: &[f64]) -> f64 {
    let n = x.len();
    if n != y.len() || n < 2 {
        return 0.0;
    }
    let mx = x.iter().sum::<f64>() / n as f64;
    let my = y.iter().sum::<f64>() / n as f64;
    let (mut sxy, mut sxx, mut syy) = (0.0, 0.0, 0.0);
    for (a, b) in x.iter().zip(y) {
        sxy += (a - mx) * (b - my);
        sxx += (a - mx) * (a - mx);
        syy += (b - my) * (b - my);
    }
    let d = (sxx * syy).sqrt();
    if d > 0.0 && d.is_finite() {
        (sxy / d).clamp(-1.0, 1.0)
    } else {
        0.0
    }
}

/// Type B standard uncertainty from a half-width `a` (GUM 4.3.7, 4.3.3): rectangular a/√3,
/// normal at coverage factor k: a/k (k ≤ 0 is taken as 1).
pub fn type_b(half_width: f64, dist: Distribution) -> f64 {
    let a = half_width.abs();
    match dist {
        Distribution::Rectangular => a / 3f64.sqrt(),
        Distribution::Normal { k } => {
            if k > 0.0 {
                a / k
            } else {
                a
            }
        }
    }
}

/// The `Dist` recorded in a budget for a Type B half-width of this kind.
pub fn dist_of(d: Distribution) -> Dist {
    match d {
        Distribution::Rectangular => Dist::Rectangular,
        Distribution::Normal { .. } => Dist::Normal,
    }
}

/// A measurement model: inputs and their correlation coefficients `(i, j, r_ij)`, i ≠ j.
pub struct Model<'a> {
    pub inputs: &'a [Input],
    pub corr: &'a [(usize, usize, f64)],
}

/// Outcome of the law of propagation.
#[derive(Debug, Clone, PartialEq)]
pub struct Propagated {
    /// Output estimates y = f(x).
    pub values: Vec<f64>,
    /// One `Measured` per output.
    pub results: Vec<Measured>,
    /// Nonzero sensitivities per output, (input, ∂y_k/∂x_i) in input order.
    jac: Vec<Vec<(usize, f64)>>,
    /// Σ J_kᵀ per output, sparse as `jac`.
    sigma_j: Vec<Vec<(usize, f64)>>,
    /// Input standard uncertainties and correlation partners, for combinations of outputs.
    u: Vec<f64>,
    partners: Vec<Vec<(usize, f64)>>,
    pooled: Vec<bool>,
    roots: Vec<usize>,
}

fn sparse_dot(x: &[(usize, f64)], y: &[(usize, f64)]) -> f64 {
    let (mut p, mut q, mut s) = (0, 0, 0.0);
    while p < x.len() && q < y.len() {
        match x[p].0.cmp(&y[q].0) {
            std::cmp::Ordering::Less => p += 1,
            std::cmp::Ordering::Greater => q += 1,
            std::cmp::Ordering::Equal => {
                s += x[p].1 * y[q].1;
                p += 1;
                q += 1;
            }
        }
    }
    s
}

/// Σ r for a sparse row r (sorted by input): diag(u²) plus r_ij u_i u_j off the diagonal.
fn sigma_times(
    row: &[(usize, f64)],
    u: &[f64],
    partners: &[Vec<(usize, f64)>],
    scratch: &mut [f64],
    touched: &mut [bool],
) -> Vec<(usize, f64)> {
    let mut idx = Vec::new();
    let mut add = |i: usize, v: f64, idx: &mut Vec<usize>| {
        if !touched[i] {
            touched[i] = true;
            idx.push(i);
        }
        scratch[i] += v;
    };
    for &(i, d) in row {
        add(i, d * u[i] * u[i], &mut idx);
        for &(j, r) in &partners[i] {
            add(j, r * u[i] * u[j] * d, &mut idx);
        }
    }
    idx.sort_unstable();
    idx.iter()
        .map(|&i| {
            let v = scratch[i];
            scratch[i] = 0.0;
            touched[i] = false;
            (i, v)
        })
        .collect()
}

impl Propagated {
    /// Output covariance cov(y_a, y_b) = J_a Σ J_bᵀ (0 out of range).
    pub fn cov(&self, a: usize, b: usize) -> f64 {
        match (self.jac.get(b), self.sigma_j.get(a)) {
            (Some(jb), Some(sa)) => sparse_dot(jb, sa),
            _ => 0.0,
        }
    }

    /// ∂y_k/∂x_i (0 when y_k does not depend on x_i).
    pub fn sensitivity(&self, k: usize, i: usize) -> f64 {
        self.jac.get(k).map_or(0.0, |r| {
            r.binary_search_by_key(&i, |e| e.0).map_or(0.0, |p| r[p].1)
        })
    }

    /// Nonzero sensitivities of output k, (input, ∂y_k/∂x_i) in input order.
    pub fn sensitivities(&self, k: usize) -> &[(usize, f64)] {
        self.jac.get(k).map_or(&[], |r| r.as_slice())
    }

    /// Inputs on which some of `outputs` depend, in input order.
    pub fn inputs_of(&self, outputs: &[usize]) -> Vec<usize> {
        let mut v: Vec<usize> = outputs
            .iter()
            .flat_map(|&k| self.sensitivities(k).iter().map(|e| e.0))
            .collect();
        v.sort_unstable();
        v.dedup();
        v
    }

    /// The result z = Σ w_k y_k for weights `(output k, w_k)` (a mean over outputs, say), with
    /// its budget and ν_eff as [`propagate`] would give it: its sensitivities are Σ w_k J_k
    /// exactly (chain rule), so the model need not be evaluated again. `model` must be the one
    /// this came from.
    pub fn linear(
        &self,
        model: &Model,
        w: &[(usize, f64)],
        coverage: f64,
    ) -> Result<Measured, String> {
        let n = self.u.len();
        if model.inputs.len() != n {
            return Err("the model is not the one propagated".into());
        }
        let value: f64 = w
            .iter()
            .map(|&(k, c)| c * self.values.get(k).copied().unwrap_or(f64::NAN))
            .sum();
        let row = self.combined_row(w.iter().copied(), &mut vec![0.0; n]);
        let mut scratch = vec![0.0; n];
        let mut touched = vec![false; n];
        let sig = sigma_times(&row, &self.u, &self.partners, &mut scratch, &mut touched);
        let var = sparse_dot(&row, &sig);
        let cl = Clusters {
            pooled: &self.pooled,
            roots: &self.roots,
            partners: &self.partners,
        };
        if !value.is_finite() {
            return Err("the combined output is not finite".into());
        }
        measure(0, value, &row, var, model.inputs, &cl, coverage)
    }

    /// Sparse sensitivities Σ_k w_k J_k of a combination of outputs; `dense` is zeroed
    /// scratch of one slot per input and is left zeroed.
    fn combined_row(
        &self,
        w: impl Iterator<Item = (usize, f64)>,
        dense: &mut [f64],
    ) -> Vec<(usize, f64)> {
        for (k, c) in w.filter(|e| e.1 != 0.0) {
            for &(i, d) in self.sensitivities(k) {
                dense[i] += c * d;
            }
        }
        dense
            .iter_mut()
            .enumerate()
            .filter(|(_, v)| **v != 0.0)
            .map(|(i, v)| (i, std::mem::take(v)))
            .collect()
    }

    /// Covariance matrix of linear combinations z_l = Σ_k w[l][k] y_k (GUM eq. 13 applied to
    /// z = W J x): W J Σ Jᵀ Wᵀ, computed without forming the output covariance.
    pub fn combined_cov(&self, w: &[Vec<f64>]) -> Vec<Vec<f64>> {
        let n = self.u.len();
        let mut dense = vec![0.0; n];
        let rows: Vec<Vec<(usize, f64)>> = w
            .iter()
            .map(|wl| self.combined_row(wl.iter().copied().enumerate(), &mut dense))
            .collect();
        let mut scratch = vec![0.0; n];
        let mut touched = vec![false; n];
        let sig: Vec<Vec<(usize, f64)>> = rows
            .iter()
            .map(|r| sigma_times(r, &self.u, &self.partners, &mut scratch, &mut touched))
            .collect();
        (0..rows.len())
            .map(|a| {
                (0..rows.len())
                    .map(|b| sparse_dot(&rows[b], &sig[a]))
                    .collect()
            })
            .collect()
    }
}

/// Relative step of the central derivative: h_i = REL_STEP · max(|x_i|, u_i) (or REL_STEP
/// when both are zero). The truncation error is O(h²) and round-off O(ε/h), both ≲ 1e-10
/// relative for smooth models.
pub const REL_STEP: f64 = 1e-6;

/// Law of propagation of uncertainty (GUM 5.1.2 and 5.2.2, eq. 13), for a vector model
/// y = f(x). Sensitivities c = ∂f/∂x by a central difference with step h_i (see
/// [`REL_STEP`]), one-sided where f is not finite on one side. u_c²(y) = cᵀ Σ c with
/// Σ_ij = r_ij u_i u_j; output covariance J Σ Jᵀ. Each output's ν_eff is the
/// Welch–Satterthwaite value over its contributions, k = t_p(ν_eff), U = k·u_c.
/// G.4.1 assumes independent inputs; inputs linked by correlations that all share one finite
/// ν (Type A means from the same observations) are pooled into one contribution, their joint
/// c_Gᵀ Σ_G c_G, with that ν, as approach 2 of GUM H.2.4 would treat them.
/// Errors (never NaN) when an input or an output is not finite, or correlations are invalid.
pub fn propagate(
    model: &Model,
    f: &dyn Fn(&[f64]) -> Vec<f64>,
    coverage: f64,
) -> Result<Propagated, String> {
    propagate_sparse(model, f, None, coverage)
}

/// Inputs in groups ("colours") such that no two inputs of a group enter one output, given
/// `pattern[k]`, the inputs output k may depend on (greedy colouring of the column
/// intersection graph, the Curtis–Powell–Reid idea). One pair of model evaluations then
/// gives the derivatives of every input of a group.
fn colour_inputs(n: usize, pattern: &[Vec<usize>]) -> Vec<Vec<usize>> {
    let mut touches: Vec<Vec<usize>> = vec![Vec::new(); n];
    for (k, row) in pattern.iter().enumerate() {
        for &i in row {
            if i < n && touches[i].last() != Some(&k) {
                touches[i].push(k);
            }
        }
    }
    let mut colour: Vec<Option<usize>> = vec![None; n];
    let mut groups: Vec<Vec<usize>> = Vec::new();
    let mut stamp: Vec<usize> = Vec::new();
    for i in 0..n {
        if touches[i].is_empty() {
            continue;
        }
        for &k in &touches[i] {
            for &j in &pattern[k] {
                if let Some(c) = colour.get(j).copied().flatten() {
                    stamp[c] = i + 1;
                }
            }
        }
        let c = (0..groups.len())
            .find(|&c| stamp[c] != i + 1)
            .unwrap_or_else(|| {
                groups.push(Vec::new());
                stamp.push(0);
                groups.len() - 1
            });
        colour[i] = Some(c);
        groups[c].push(i);
    }
    groups
}

/// [`propagate`] for a model whose output k depends only on the inputs `pattern[k]` (a
/// superset is fine; a missing input gives wrong sensitivities). Inputs that share no output
/// are perturbed together, so a block of N independent points costs a few model evaluations
/// instead of one pair per input. `None` treats every output as depending on every input.
pub fn propagate_sparse(
    model: &Model,
    f: &dyn Fn(&[f64]) -> Vec<f64>,
    pattern: Option<&[Vec<usize>]>,
    coverage: f64,
) -> Result<Propagated, String> {
    let inputs = model.inputs;
    let n = inputs.len();
    let pairs = checked_pairs(model)?;
    let x0: Vec<f64> = inputs.iter().map(|i| i.value).collect();
    let y0 = f(&x0);
    let m = y0.len();
    if let Some(k) = y0.iter().position(|v| !v.is_finite()) {
        return Err(format!(
            "output {k} of the model is not finite at the estimates"
        ));
    }
    if let Some(p) = pattern {
        if p.len() != m {
            return Err(format!(
                "the dependency pattern names {} outputs but the model gives {m}",
                p.len()
            ));
        }
    }
    let jac = sensitivities(inputs, f, pattern, &x0, &y0)?;

    // Σ J_kᵀ per output, sparse: most outputs depend on a handful of inputs, so
    // cov[a][b] = J_b · (Σ J_aᵀ) over nonzeros.
    let nz = &jac;
    let mut partners: Vec<Vec<(usize, f64)>> = vec![Vec::new(); n];
    for &(i, j, r) in &pairs {
        partners[i].push((j, r));
        partners[j].push((i, r));
    }
    let u_in: Vec<f64> = inputs.iter().map(|i| i.u).collect();
    let mut scratch = vec![0.0; n];
    let mut touched = vec![false; n];
    let sigma_j: Vec<Vec<(usize, f64)>> = nz
        .iter()
        .map(|row| sigma_times(row, &u_in, &partners, &mut scratch, &mut touched))
        .collect();
    let var_of: Vec<f64> = (0..m).map(|k| sparse_dot(&nz[k], &sigma_j[k])).collect();
    let (roots, pooled) = pooling(inputs, &pairs);

    let mut results = Vec::with_capacity(m);
    for k in 0..m {
        let cl = Clusters {
            pooled: &pooled,
            roots: &roots,
            partners: &partners,
        };
        results.push(measure(k, y0[k], &nz[k], var_of[k], inputs, &cl, coverage)?);
    }
    Ok(Propagated {
        values: y0,
        results,
        jac,
        sigma_j,
        u: u_in,
        partners,
        pooled,
        roots,
    })
}

/// Checks the inputs (finite, u ≥ 0) and returns the correlations as sorted pairs (a < b),
/// each clamped to [−1, 1] and given once.
fn checked_pairs(model: &Model) -> Result<Vec<(usize, usize, f64)>, String> {
    let inputs = model.inputs;
    let n = inputs.len();
    for inp in inputs {
        if !inp.value.is_finite() || !inp.u.is_finite() || inp.u < 0.0 {
            return Err(format!(
                "input {} is not a finite value with u ≥ 0",
                inp.name
            ));
        }
    }
    let mut pairs: Vec<(usize, usize, f64)> = Vec::new();
    for &(i, j, r) in model.corr {
        if i >= n || j >= n || i == j {
            return Err(format!(
                "correlation ({i}, {j}) does not name two distinct inputs"
            ));
        }
        if !r.is_finite() || r.abs() > 1.0 + 1e-12 {
            return Err(format!(
                "correlation {r} between inputs {i} and {j} is outside [−1, 1]"
            ));
        }
        let (a, b) = if i < j { (i, j) } else { (j, i) };
        pairs.push((a, b, r.clamp(-1.0, 1.0)));
    }
    pairs.sort_by(|p, q| (p.0, p.1).cmp(&(q.0, q.1)));
    if let Some(w) = pairs
        .windows(2)
        .find(|w| w[0].0 == w[1].0 && w[0].1 == w[1].1)
    {
        return Err(format!(
            "correlation between inputs {} and {} given twice",
            w[0].0, w[0].1
        ));
    }
    Ok(pairs)
}

/// Nonzero sensitivities per output, (input, ∂y_k/∂x_i) in input order, by central
/// differences; inputs that share no output (per `pattern`) are perturbed together.
fn sensitivities(
    inputs: &[Input],
    f: &dyn Fn(&[f64]) -> Vec<f64>,
    pattern: Option<&[Vec<usize>]>,
    x0: &[f64],
    y0: &[f64],
) -> Result<Vec<Vec<(usize, f64)>>, String> {
    let n = inputs.len();
    let m = y0.len();
    // Which input of colour group `c` output k depends on, through `owner[i] == c`.
    let groups: Vec<Vec<usize>> = match pattern {
        Some(p) => colour_inputs(n, p),
        None => (0..n).map(|i| vec![i]).collect(),
    };
    let mut owner = vec![usize::MAX; n];
    for (c, g) in groups.iter().enumerate() {
        for &i in g {
            owner[i] = c;
        }
    }
    // For each colour, output k's input in it (at most one, by construction).
    let dep_in = |k: usize, c: usize| -> Option<usize> {
        match pattern {
            Some(p) => p[k].iter().copied().find(|&i| i < n && owner[i] == c),
            None => Some(groups[c][0]),
        }
    };
    let step = |i: usize| {
        let scale = x0[i].abs().max(inputs[i].u);
        if scale > 0.0 {
            REL_STEP * scale
        } else {
            REL_STEP
        }
    };

    let mut jac: Vec<Vec<(usize, f64)>> = vec![Vec::new(); m];
    let mut x = x0.to_vec();
    for (c, g) in groups.iter().enumerate() {
        for &i in g {
            x[i] = x0[i] + step(i);
        }
        let yp = f(&x);
        for &i in g {
            x[i] = x0[i] - step(i);
        }
        let ym = f(&x);
        for &i in g {
            x[i] = x0[i];
        }
        if yp.len() != m || ym.len() != m {
            return Err("the model returned a varying number of outputs".into());
        }
        for k in 0..m {
            let Some(i) = dep_in(k, c) else { continue };
            let h = step(i);
            let (p, q) = (yp[k], ym[k]);
            let d = if p.is_finite() && q.is_finite() {
                (p - q) / (2.0 * h)
            } else if p.is_finite() {
                (p - y0[k]) / h
            } else if q.is_finite() {
                (y0[k] - q) / h
            } else {
                return Err(format!(
                    "output {k} is not finite near the estimate of input {}",
                    inputs[i].name
                ));
            };
            if !d.is_finite() {
                return Err(format!(
                    "sensitivity of output {k} to input {} is not finite",
                    inputs[i].name
                ));
            }
            if d != 0.0 {
                jac[k].push((i, d));
            }
        }
    }
    for row in &mut jac {
        row.sort_unstable_by_key(|e| e.0);
    }
    Ok(jac)
}

/// Clusters of inputs linked by nonzero correlations (union–find): each input's cluster root,
/// and whether it is pooled in Welch–Satterthwaite (its cluster has several members that all
/// share one finite dof).
fn pooling(inputs: &[Input], pairs: &[(usize, usize, f64)]) -> (Vec<usize>, Vec<bool>) {
    let n = inputs.len();
    let mut parent: Vec<usize> = (0..n).collect();
    fn root(p: &mut [usize], mut i: usize) -> usize {
        while p[i] != i {
            p[i] = p[p[i]];
            i = p[i];
        }
        i
    }
    for &(i, j, r) in pairs {
        if r != 0.0 {
            let (a, b) = (root(&mut parent, i), root(&mut parent, j));
            if a != b {
                parent[a.max(b)] = a.min(b);
            }
        }
    }
    let roots: Vec<usize> = (0..n).map(|i| root(&mut parent, i)).collect();
    // Per cluster: its size and whether all members share the first member's dof.
    let mut cluster: std::collections::HashMap<usize, (usize, Option<f64>, bool)> =
        std::collections::HashMap::new();
    for j in 0..n {
        let e = cluster.entry(roots[j]).or_insert((0, inputs[j].dof, true));
        e.0 += 1;
        e.2 &= inputs[j].dof == e.1;
    }
    let pooled: Vec<bool> = (0..n)
        .map(|i| {
            let (size, _, same) = cluster[&roots[i]];
            size > 1 && inputs[i].dof.is_some() && same
        })
        .collect();
    (roots, pooled)
}

/// How inputs are pooled for Welch–Satterthwaite (see [`propagate`]).
struct Clusters<'a> {
    pooled: &'a [bool],
    roots: &'a [usize],
    partners: &'a [Vec<(usize, f64)>],
}

/// The `Measured` of one output from its sparse sensitivity row and variance.
fn measure(
    k: usize,
    value: f64,
    row: &[(usize, f64)],
    var: f64,
    inputs: &[Input],
    cl: &Clusters,
    coverage: f64,
) -> Result<Measured, String> {
    let sens = |j: usize| {
        row.binary_search_by_key(&j, |e| e.0)
            .map_or(0.0, |p| row[p].1)
    };
    let diag: f64 = row.iter().map(|&(i, d)| (d * inputs[i].u).powi(2)).sum();
    // Below zero by more than round-off at r = ±1: the correlations are not a covariance.
    if var < -1e-9 * diag {
        return Err(format!(
            "output {k} has a negative variance: the input correlations are inconsistent"
        ));
    }
    let u = var.max(0.0).sqrt();
    let mut budget = Vec::new();
    let mut contribs = Vec::new();
    for &(i, c) in row {
        let inp = &inputs[i];
        // Inputs that carry no uncertainty (a single reading's estimate, whose uncertainty
        // sits in its own offset inputs) or do not enter this output are left out of the
        // budget: they contribute nothing.
        if c == 0.0 || inp.u == 0.0 {
            continue;
        }
        let contribution = c.abs() * inp.u;
        budget.push(BudgetLine {
            input: inp.name.clone(),
            estimate: inp.value,
            u: inp.u,
            kind: inp.kind,
            dist: inp.dist,
            sensitivity: c,
            contribution,
            dof: inp.dof,
        });
        if !cl.pooled[i] {
            contribs.push((contribution, inp.dof));
        }
    }
    // Each pooled cluster enters Welch–Satterthwaite as one contribution.
    let mut pooled_var: BTreeMap<usize, f64> = BTreeMap::new();
    for &(i, d) in row {
        if !cl.pooled[i] {
            continue;
        }
        *pooled_var.entry(cl.roots[i]).or_insert(0.0) += (d * inputs[i].u).powi(2);
        for &(j, rho) in &cl.partners[i] {
            if j > i && cl.roots[j] == cl.roots[i] {
                *pooled_var.entry(cl.roots[i]).or_insert(0.0) +=
                    2.0 * rho * d * sens(j) * inputs[i].u * inputs[j].u;
            }
        }
    }
    for (r, v) in pooled_var {
        contribs.push((v.max(0.0).sqrt(), inputs[r].dof));
    }
    let dof = welch_satterthwaite(&contribs);
    let kf = coverage_factor(coverage, dof);
    let expanded = kf * u;
    // k > 0, so a non-finite u or k shows in U.
    if !expanded.is_finite() {
        return Err(format!("output {k} has a non-finite uncertainty"));
    }
    Ok(Measured {
        value,
        u,
        dof,
        k: kf,
        expanded,
        budget,
        mc: None,
    })
}

/// Correlation coefficient r(y_i, y_j) = cov_ij / (u_i u_j) (GUM 5.2.2 / H.2); 0 when an index
/// is out of range or a variance is zero.
pub fn correlation(p: &Propagated, i: usize, j: usize) -> f64 {
    // `cov` is 0 out of range; a zero (or round-off negative) variance makes r NaN or ∞.
    let r = p.cov(i, j) / (p.cov(i, i).sqrt() * p.cov(j, j).sqrt());
    if r.is_finite() {
        r.clamp(-1.0, 1.0)
    } else {
        0.0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn close(a: f64, b: f64, tol: f64) -> bool {
        (a - b).abs() <= tol
    }

    // GUM JCGM 100:2008 Table G.2, t_p(ν) for p = 95.45 % and p = 99.73 %. The table's p are
    // those of k = 2 and k = 3 for the normal distribution (GUM G.3.4 note), i.e.
    // erf(2/√2) = 0.954 499 7 and erf(3/√2) = 0.997 300 2; the table's ν = 1 entries need them.
    #[test]
    fn table_g2_coverage_factors() {
        let (p2, p3) = (0.954_499_736_103_642, 0.997_300_203_936_740);
        let p95: [(Option<f64>, f64); 7] = [
            (Some(1.0), 13.97),
            (Some(2.0), 4.53),
            (Some(3.0), 3.31),
            (Some(5.0), 2.65),
            (Some(10.0), 2.28),
            (Some(20.0), 2.13),
            (None, 2.00),
        ];
        for (nu, t) in p95 {
            let k = coverage_factor(p2, nu);
            assert!(close(k, t, 0.005), "p=95.45% ν={nu:?}: {k} vs {t}");
        }
        let p997: [(Option<f64>, f64); 7] = [
            (Some(1.0), 235.80),
            (Some(2.0), 19.21),
            (Some(3.0), 9.22),
            (Some(5.0), 5.51),
            (Some(10.0), 3.96),
            (Some(20.0), 3.42),
            (None, 3.00),
        ];
        for (nu, t) in p997 {
            let k = coverage_factor(p3, nu);
            assert!(close(k, t, 0.005), "p=99.73% ν={nu:?}: {k} vs {t}");
        }
    }

    // GUM Table G.2, p = 95 % row: t(ν=1) = 12.71, t(10) = 2.23, ∞ 1.960.
    // Non-integer ν: truncated to an integer from 10 (GUM G.6.4), to one decimal below 10.
    #[test]
    fn coverage_factor_95_and_fractional_dof() {
        assert!(close(coverage_factor(0.95, Some(1.0)), 12.71, 0.005));
        assert!(close(coverage_factor(0.95, Some(10.0)), 2.23, 0.005));
        assert!(close(coverage_factor(0.95, None), 1.960, 0.0005));
        assert_eq!(
            coverage_factor(0.95, Some(19.97)),
            coverage_factor(0.95, Some(19.0))
        );
        assert_eq!(
            coverage_factor(0.95, Some(2.152)),
            coverage_factor(0.95, Some(2.1))
        );
        let k = coverage_factor(0.95, Some(2.1));
        assert!(k < coverage_factor(0.95, Some(2.0)) && k > coverage_factor(0.95, Some(3.0)));
        assert_eq!(
            (dof_for_k(2.152), dof_for_k(9.99), dof_for_k(16.6)),
            (2.1, 9.9, 16.0)
        );
        // Fallbacks (ν ≤ 0 → 1, p clamped): values pinned in tests/reference_bite.rs.
        assert_eq!(
            coverage_factor(0.95, Some(0.0)),
            coverage_factor(0.95, Some(1.0))
        );
        assert_eq!(
            coverage_factor(2.0, Some(3.0)),
            coverage_factor(1.0 - 1e-12, Some(3.0))
        );
    }

    // GUM G.4.1 EXAMPLE (from memory): Y = b·X1·X2·X3, relative u 0.25 %, 0.57 %, 0.82 % from
    // n = 10, 5, 15 observations; u_c/y = 1.03 %, ν_eff = 19.0, t95(19) = 2.09, U95 = 2.2 %.
    #[test]
    fn welch_satterthwaite_gum_g41() {
        let c = [(0.25, Some(9.0)), (0.57, Some(4.0)), (0.82, Some(14.0))];
        let nu = welch_satterthwaite(&c).expect("finite");
        assert!(close(nu, 19.0, 0.05), "ν_eff = {nu}");
        let uc: f64 = c.iter().map(|x| x.0 * x.0).sum::<f64>().sqrt();
        assert!(close(uc, 1.03, 0.005));
        // The GUM rounds ν_eff = 19.0 to 19 (its numerator uses the rounded 1.03 %).
        let k = coverage_factor(0.95, Some(nu.round()));
        assert!(close(k, 2.09, 0.005));
        assert_eq!(crate::print::round_sig(k * uc, 2), 2.2); // 2.15… rounds to 2.2
                                                             // All infinite → infinite.
        assert_eq!(welch_satterthwaite(&[(1.0, None), (2.0, None)]), None);
        // Single contribution: ν_eff = ν (G.2b with N = 1).
        assert!(close(
            welch_satterthwaite(&[(3.0, Some(7.0)), (0.0, Some(2.0))]).unwrap(),
            7.0,
            1e-12
        ));
    }

    // GUM H.2, Table H.2: means V̄ = 4.9990 V, s(V̄) = 0.0032 V; Ī = 19.6610 mA, s(Ī) = 0.0095 mA;
    // φ̄ = 1.04446 rad, s(φ̄) = 0.00075 rad; r(V,I) = −0.36, r(V,φ) = 0.86, r(I,φ) = −0.65.
    #[test]
    fn type_a_gum_h2_table() {
        let v = [5.007, 4.994, 5.005, 4.990, 4.999];
        let i = [19.663, 19.639, 19.640, 19.685, 19.678];
        let p = [1.0456, 1.0438, 1.0468, 1.0428, 1.0433];
        let (mv, sv, nv) = type_a(&v);
        assert!(close(mv, 4.9990, 5e-5) && close(sv, 0.0032, 5e-5) && nv == 4.0);
        let (mi, si, _) = type_a(&i);
        assert!(close(mi, 19.6610, 5e-5) && close(si, 0.0095, 5e-5));
        let (mp, sp, _) = type_a(&p);
        assert!(close(mp, 1.04446, 5e-6) && close(sp, 0.00075, 5e-6));
        assert!(close(type_a_correlation(&v, &i), -0.36, 0.005));
        assert!(close(type_a_correlation(&v, &p), 0.86, 0.005));
        assert!(close(type_a_correlation(&i, &p), -0.65, 0.005));
        assert_eq!(type_a(&[2.5]), (2.5, 0.0, 0.0));
        assert_eq!(type_a_correlation(&[1.0], &[2.0]), 0.0);
    }

    /// GUM Table H.2's five (V, I, φ) observations as Type A means (I in A) and their
    /// correlations.
    fn h2_inputs() -> (Vec<Input>, [(usize, usize, f64); 3]) {
        let v = [5.007, 4.994, 5.005, 4.990, 4.999];
        let i = [19.663e-3, 19.639e-3, 19.640e-3, 19.685e-3, 19.678e-3];
        let p = [1.0456, 1.0438, 1.0468, 1.0428, 1.0433];
        let input = |name: &str, x: &[f64]| {
            let (m, s, nu) = type_a(x);
            Input::type_a(name, m, s, nu)
        };
        let inputs = vec![input("V", &v), input("I", &i), input("phi", &p)];
        let corr = [
            (0usize, 1usize, type_a_correlation(&v, &i)),
            (0, 2, type_a_correlation(&v, &p)),
            (1, 2, type_a_correlation(&i, &p)),
        ];
        (inputs, corr)
    }

    // GUM H.2.3 (approach 1), from the Table H.2 means and their correlations: u(R) = 0.071 Ω,
    // u(X) = 0.295 Ω, u(Z) = 0.236 Ω; r(R,X) = −0.588, r(R,Z) = −0.485, r(X,Z) = 0.993.
    #[test]
    fn output_correlations_gum_h2() {
        let (inputs, corr) = h2_inputs();
        let f = |x: &[f64]| {
            let z = x[0] / x[1];
            vec![z * x[2].cos(), z * x[2].sin(), z]
        };
        let model = Model {
            inputs: &inputs,
            corr: &corr,
        };
        let out = propagate(&model, &f, 0.95).unwrap();
        for (k, u) in [0.071, 0.295, 0.236].into_iter().enumerate() {
            // GUM prints three decimals from rounded means: u(X) here is 0.2956.
            assert!(
                close(out.results[k].u, u, 0.001),
                "u[{k}] = {}",
                out.results[k].u
            );
        }
        for (a, b, r) in [(0, 1, -0.588), (0, 2, -0.485), (1, 2, 0.993)] {
            assert!(close(correlation(&out, a, b), r, 0.0005), "r({a},{b})");
            assert!(close(correlation(&out, b, a), r, 0.0005), "r({b},{a})");
        }
        assert!(close(correlation(&out, 1, 1), 1.0, 1e-12));
        assert_eq!(correlation(&out, 0, 3), 0.0);
        assert_eq!(correlation(&out, 3, 0), 0.0);
        // An output that no input reaches has zero variance: no correlation.
        let g = |x: &[f64]| vec![x[0], 2.5];
        let flat = propagate(&model, &g, 0.95).unwrap();
        assert_eq!(correlation(&flat, 0, 1), 0.0);
        assert_eq!(correlation(&flat, 1, 0), 0.0);
        // Outputs that share one of their inputs (uncorrelated inputs): y0 = x2, y1 = x0 + x2
        // give cov = u2², r = u2/√(u0² + u2²) (GUM eq. 13 and 5.2.2).
        let h = |x: &[f64]| vec![x[2], x[0] + x[2]];
        let apart = Model {
            inputs: &inputs,
            corr: &[],
        };
        let shared = propagate(&apart, &h, 0.95).unwrap();
        let (u0, u2) = (inputs[0].u, inputs[2].u);
        let r = u2 / u0.hypot(u2);
        assert!(close(correlation(&shared, 0, 1), r, 1e-9));
        assert!(close(correlation(&shared, 1, 0), r, 1e-9));
    }

    // Edges of the small helpers, each of which a wrong guard would get wrong: a quotient
    // that overflows is no ratio; two observations of a straight line correlate fully (GUM
    // eq. 17 with n = 2), lists of unequal length not at all; a budget line with a non-finite
    // contribution changes nothing; a normal half-width with k = 0 is taken as u (k = 1).
    #[test]
    fn helper_edges() {
        assert_eq!(ratio(1e308, 1e-308), None);
        assert_eq!(ratio(1.0, 0.0), None);
        assert_eq!(ratio(3.0, 4.0), Some(0.75));
        assert!(close(
            type_a_correlation(&[1.0, 2.0], &[3.0, 5.0]),
            1.0,
            1e-15
        ));
        assert!(close(
            type_a_correlation(&[1.0, 2.0], &[5.0, 3.0]),
            -1.0,
            1e-15
        ));
        assert_eq!(type_a_correlation(&[1.0, 2.0, 3.0], &[3.0, 5.0]), 0.0);
        let mut m = Measured {
            value: 1.0,
            u: 0.1,
            dof: Some(4.0),
            k: 2.87,
            expanded: 0.287,
            budget: Vec::new(),
            mc: None,
        };
        let before = m.clone();
        for c in [f64::NAN, f64::INFINITY, 0.0] {
            let line = BudgetLine {
                input: "x".into(),
                estimate: 0.0,
                u: c,
                kind: EvalType::B,
                dist: Dist::Normal,
                sensitivity: 1.0,
                contribution: c,
                dof: None,
            };
            add_term(&mut m, line, 0.9545);
            assert_eq!(m, before, "contribution {c}");
        }
        assert_eq!(type_b(2.0, Distribution::Normal { k: 0.0 }), 2.0);
    }

    // Inputs and correlations that no propagation can use are refused, each with its reason:
    // a non-finite value or u, a negative u, a pair that is not two distinct inputs, r outside
    // [−1, 1], a pair given twice (either order). r within 1e-12 of ±1 is clamped, not refused.
    #[test]
    fn bad_inputs_and_correlations_are_refused() {
        let f = |x: &[f64]| vec![x[0] + x[1]];
        let ok = || {
            vec![
                Input::type_b("a", 1.0, 0.1, Dist::Normal),
                Input::type_b("b", 2.0, 0.2, Dist::Normal),
            ]
        };
        let run = |inputs: &[Input], corr: &[(usize, usize, f64)]| {
            propagate(&Model { inputs, corr }, &f, 0.95).map(|p| p.results[0].u)
        };
        for (k, bad) in [f64::NAN, f64::INFINITY].into_iter().enumerate() {
            let mut i = ok();
            i[k].value = bad;
            assert!(
                run(&i, &[]).unwrap_err().contains("not a finite value"),
                "value {bad}"
            );
            let mut i = ok();
            i[1 - k].u = bad;
            assert!(
                run(&i, &[]).unwrap_err().contains("not a finite value"),
                "u {bad}"
            );
        }
        let mut i = ok();
        i[1].u = -0.2;
        assert!(run(&i, &[]).unwrap_err().contains("u ≥ 0"));
        for pair in [(0, 2), (2, 0), (1, 1)] {
            let e = run(&ok(), &[(pair.0, pair.1, 0.5)]).unwrap_err();
            assert!(e.contains("two distinct inputs"), "{pair:?}: {e}");
        }
        for r in [1.1, -1.1, f64::NAN] {
            assert!(run(&ok(), &[(0, 1, r)])
                .unwrap_err()
                .contains("outside [−1, 1]"));
        }
        let e = run(&ok(), &[(0, 1, 0.5), (1, 0, 0.5)]).unwrap_err();
        assert!(e.contains("given twice"), "{e}");
        // Pairs that share one input are two pairs: y = a + b + c, u² = 0.01 + 0.04 + 0.09
        // + 2·0.5·0.1·0.2 + 2·0.2·0.1·0.3 = 0.172.
        let mut three = ok();
        three.push(Input::type_b("c", 3.0, 0.3, Dist::Normal));
        let g = |x: &[f64]| vec![x[0] + x[1] + x[2]];
        let corr = [(0, 1, 0.5), (0, 2, 0.2)];
        let p = propagate(
            &Model {
                inputs: &three,
                corr: &corr,
            },
            &g,
            0.95,
        )
        .unwrap();
        assert!(close(p.results[0].u, 0.172f64.sqrt(), 1e-9));
        // u² = 0.1² + 0.2² + 2·r·0.1·0.2 (GUM eq. 16) with r clamped to 1: u = 0.3.
        let u = run(&ok(), &[(1, 0, 1.0 + 1e-13)]).unwrap();
        assert!(close(u, 0.3, 1e-9), "{u}");
        let u = run(&ok(), &[(0, 1, -0.5)]).unwrap();
        assert!(close(u, (0.05f64 - 0.02).sqrt(), 1e-9), "{u}");
        // Welch–Satterthwaite with ν = 0 given takes ν = 1 for that term.
        assert_eq!(welch_satterthwaite(&[(1.0, Some(0.0))]), Some(1.0));
    }

    // GUM H.2.4: correlated Type A means from one series of n = 5 observations enter
    // Welch–Satterthwaite (G.4.1) as one contribution with ν = 4, its variance that of the
    // cluster alone (eq. 16). With a further Type B term of infinite ν beside it,
    // ν_eff = (u_A² + u_B²)² / (u_A⁴ / 4). Correlations that no covariance matrix can have
    // (three inputs pairwise at r = −0.9) give a negative variance, which is refused.
    #[test]
    fn a_correlated_series_enters_welch_satterthwaite_as_one() {
        let (mut inputs, corr) = h2_inputs();
        let r_of = |x: &[f64]| vec![x[0] / x[1] * x[2].cos() + x.get(3).copied().unwrap_or(0.0)];
        let alone = propagate(
            &Model {
                inputs: &inputs,
                corr: &corr,
            },
            &r_of,
            0.95,
        )
        .unwrap();
        assert_eq!(alone.results[0].dof, Some(4.0));
        let ua = alone.results[0].u;
        let ub = 0.05;
        inputs.push(Input::type_b("offset", 0.0, ub, Dist::Normal));
        let both = propagate(
            &Model {
                inputs: &inputs,
                corr: &corr,
            },
            &r_of,
            0.95,
        )
        .unwrap();
        let m = &both.results[0];
        // Numerical derivatives (checked steps) agree to about 1e-7 relative.
        assert!(
            close(m.u, ua.hypot(ub), 1e-7),
            "{} vs {}",
            m.u,
            ua.hypot(ub)
        );
        let nu = (ua * ua + ub * ub).powi(2) / (ua.powi(4) / 4.0);
        assert!(close(m.dof.unwrap(), nu, 1e-5 * nu), "{:?} vs {nu}", m.dof);
        // Its budget lists each input with |c|·u.
        for line in &m.budget {
            assert!(close(
                line.contribution,
                line.sensitivity.abs() * line.u,
                1e-15
            ));
        }
        assert_eq!(m.budget.len(), 4);
        let bad = vec![
            Input::type_b("a", 1.0, 1.0, Dist::Normal),
            Input::type_b("b", 1.0, 1.0, Dist::Normal),
            Input::type_b("c", 1.0, 1.0, Dist::Normal),
        ];
        let corr = [(0, 1, -0.9), (0, 2, -0.9), (1, 2, -0.9)];
        let sum = |x: &[f64]| vec![x[0] + x[1] + x[2]];
        let e = propagate(
            &Model {
                inputs: &bad,
                corr: &corr,
            },
            &sum,
            0.95,
        )
        .unwrap_err();
        assert!(e.contains("negative variance"), "{e}");
    }

    // Where f is not finite below (above) an estimate, the derivative is the forward
    // (backward) difference (common practice in numerical differentiation), exact for a linear
    // f; u then follows GUM eq. 10. A dependency pattern may name inputs the model lacks.
    #[test]
    fn one_sided_derivatives_and_misshapen_models() {
        let inputs = vec![
            Input::type_b("x", 1.0, 0.1, Dist::Normal),
            Input::type_b("y", 2.0, 0.2, Dist::Normal),
        ];
        let model = Model {
            inputs: &inputs,
            corr: &[],
        };
        let f = |x: &[f64]| {
            let a = if x[0] >= 1.0 { 3.0 * x[0] } else { f64::NAN };
            let b = if x[1] <= 2.0 { -5.0 * x[1] } else { f64::NAN };
            vec![a + b]
        };
        let wide = [vec![2, 0, 1, 7]];
        for pattern in [None, Some(&wide[..])] {
            let out = propagate_sparse(&model, &f, pattern, 0.95).unwrap();
            assert!(close(out.sensitivity(0, 0), 3.0, 1e-7), "{pattern:?}");
            assert!(close(out.sensitivity(0, 1), -5.0, 1e-7), "{pattern:?}");
            assert!(close(out.results[0].u, 1.09f64.sqrt(), 1e-8), "{pattern:?}");
        }
        let nowhere = |x: &[f64]| vec![if x[0] == 1.0 { 0.0 } else { f64::NAN }];
        let e = propagate(&model, &nowhere, 0.95).unwrap_err();
        assert!(e.contains("not finite near the estimate of input x"), "{e}");
        // One more output above the estimate only.
        let grows = |x: &[f64]| {
            if x[0] > 1.0 {
                vec![x[0], 0.0]
            } else {
                vec![x[0]]
            }
        };
        let e = propagate(&model, &grows, 0.95).unwrap_err();
        assert!(e.contains("varying number of outputs"), "{e}");
    }

    // Three inputs pairwise at r = −1/2 + ε: the correlation matrix's least eigenvalue is
    // 1 + 2r = −2ε (linear algebra), so u² = 4·(3 + 6r) = −24ε for y = x₁ + x₂ + x₃ with
    // u_i = 2 (exact sensitivities at x = 0). Within 1e-9 of Σ(c_i u_i)² = 12 that is round-off
    // and u = 0; beyond it the correlations are refused.
    #[test]
    fn a_negative_variance_is_round_off_or_an_error() {
        let inputs: Vec<Input> = ["a", "b", "c"]
            .into_iter()
            .map(|n| Input::type_b(n, 0.0, 2.0, Dist::Normal))
            .collect();
        let sum = |x: &[f64]| vec![x[0] + x[1] + x[2]];
        let run = |eps: f64| {
            let r = -0.5 - eps;
            let corr = [(0, 1, r), (0, 2, r), (1, 2, r)];
            propagate(
                &Model {
                    inputs: &inputs,
                    corr: &corr,
                },
                &sum,
                0.95,
            )
        };
        let ok = run(4e-10).unwrap();
        assert_eq!(ok.results[0].u, 0.0);
        assert_eq!(ok.results[0].expanded, 0.0);
        let e = run(6e-10).unwrap_err();
        assert!(e.contains("negative variance"), "{e}");
    }

    // An input with u = 0 that the output depends on contributes nothing and has no budget
    // line; the other's line is |c|·u (GUM eq. 10).
    #[test]
    fn an_exact_input_has_no_budget_line() {
        let inputs = vec![
            Input::type_b("a", 1.0, 0.1, Dist::Normal),
            Input::type_b("b", 2.0, 0.0, Dist::Normal),
        ];
        let out = propagate(
            &Model {
                inputs: &inputs,
                corr: &[],
            },
            &|x: &[f64]| vec![x[0] * x[1]],
            0.95,
        )
        .unwrap();
        let m = &out.results[0];
        assert!(close(out.sensitivity(0, 1), 1.0, 1e-9));
        assert_eq!(m.budget.len(), 1);
        assert_eq!(m.budget[0].input, "a");
        assert!(close(m.budget[0].contribution, 0.2, 1e-9));
        assert!(close(m.u, 0.2, 1e-9));
    }

    // Correlated inputs are pooled only when all share one finite ν (GUM H.2.4); otherwise each
    // enters G.4.1 on its own: ν_eff = (Σ c_i²u_i²)² / Σ c_i⁴u_i⁴/ν_i.
    #[test]
    fn only_correlated_inputs_of_one_dof_are_pooled() {
        let sum = |x: &[f64]| vec![x.iter().sum::<f64>()];
        let nu_of = |inputs: &[Input], corr: &[(usize, usize, f64)]| {
            propagate(&Model { inputs, corr }, &sum, 0.95)
                .unwrap()
                .results[0]
                .dof
                .unwrap()
        };
        let two_dofs = [
            Input::type_a("a", 1.0, 0.1, 4.0),
            Input::type_a("b", 1.0, 0.2, 9.0),
        ];
        let ws = 0.05f64.powi(2) / (1e-4 / 4.0 + 0.04f64.powi(2) / 9.0);
        let nu = nu_of(&two_dofs, &[(0, 1, 0.5)]);
        assert!(close(nu, ws, 1e-9 * ws), "{nu} vs {ws}");
        let b_pair = [
            Input::type_b("a", 1.0, 0.1, Dist::Normal),
            Input::type_b("b", 1.0, 0.1, Dist::Normal),
            Input::type_a("c", 1.0, 0.1, 5.0),
        ];
        let nu = nu_of(&b_pair, &[(0, 1, 0.9)]);
        assert!(close(nu, 45.0, 1e-9), "{nu}");
        let one_dof = [
            Input::type_a("a", 1.0, 0.1, 4.0),
            Input::type_a("b", 1.0, 0.2, 4.0),
        ];
        assert!(close(nu_of(&one_dof, &[(0, 1, 0.5)]), 4.0, 1e-9));
    }

    // G.4.1's ratio does not depend on the contributions' scale (a value in farads gives
    // c·u ~ 1e-12, whose fourth power is near the bottom of f64).
    #[test]
    fn welch_satterthwaite_is_scale_free() {
        let ws = 25.0 / (0.25 + 16.0 / 9.0);
        for s in [1.0, 1e-100, 1e100, 1e-160] {
            let nu = welch_satterthwaite(&[(s, Some(4.0)), (2.0 * s, Some(9.0))]).unwrap();
            assert!(close(nu, ws, 1e-12 * ws), "scale {s}: {nu}");
        }
        assert_eq!(welch_satterthwaite(&[(1e300, Some(4.0))]), Some(4.0));
        for bad in [
            vec![],
            vec![(0.0, Some(3.0))],
            vec![(1.0, None)],
            vec![(f64::INFINITY, Some(3.0)), (1.0, Some(3.0))],
            vec![(f64::NAN, Some(3.0)), (1.0, Some(3.0))],
        ] {
            assert_eq!(welch_satterthwaite(&bad), None, "{bad:?}");
        }
    }

    // GUM 4.3.7 (rectangular a/√3) and 4.3.3 (normal: a/k).
    #[test]
    fn type_b_half_widths() {
        assert!(close(
            type_b(3f64.sqrt(), Distribution::Rectangular),
            1.0,
            1e-15
        ));
        assert!(close(
            type_b(2.0, Distribution::Normal { k: 2.0 }),
            1.0,
            1e-15
        ));
    }

    // Checked numerical derivative: y = x0²·sin(x1)/x2 against its analytic partials
    // (calculus), and u_c² = cᵀΣc (GUM eq. 13) by hand.
    #[test]
    fn checked_numerical_derivative() {
        let inputs = vec![
            Input::type_b("a", 1.7, 0.01, Dist::Normal),
            Input::type_b("b", 0.6, 0.002, Dist::Normal),
            Input::type_a("c", 3.2e-3, 1e-6, 4.0),
        ];
        let corr = [(0usize, 2usize, 0.4)];
        let f = |x: &[f64]| vec![x[0] * x[0] * x[1].sin() / x[2], x[0] + x[1]];
        let p = propagate(
            &Model {
                inputs: &inputs,
                corr: &corr,
            },
            &f,
            0.9545,
        )
        .unwrap();
        let (a, b, c) = (1.7f64, 0.6f64, 3.2e-3f64);
        let exact = [
            2.0 * a * b.sin() / c,
            a * a * b.cos() / c,
            -a * a * b.sin() / (c * c),
        ];
        for i in 0..3 {
            let rel = (p.sensitivity(0, i) - exact[i]).abs() / exact[i].abs();
            assert!(
                rel < 1e-8,
                "∂y/∂x{i}: {} vs {}",
                p.sensitivity(0, i),
                exact[i]
            );
        }
        let u = [0.01, 0.002, 1e-6];
        let var = (exact[0] * u[0]).powi(2)
            + (exact[1] * u[1]).powi(2)
            + (exact[2] * u[2]).powi(2)
            + 2.0 * 0.4 * exact[0] * exact[2] * u[0] * u[2];
        assert!((p.results[0].u - var.sqrt()).abs() / var.sqrt() < 1e-8);
        // Second output: covariance with the first, cov = Σ J0 Σ J1.
        let cov01 = exact[0] * u[0] * u[0] + exact[1] * u[1] * u[1] + 0.4 * exact[2] * u[0] * u[2];
        assert!((p.cov(0, 1) - cov01).abs() / cov01.abs() < 1e-7);
        assert!((p.results[1].u - (u[0] * u[0] + u[1] * u[1]).sqrt()).abs() < 1e-12);
        assert_eq!(p.results[1].dof, None);
        // Budget of output 1 names only a and b (c has zero sensitivity).
        assert_eq!(p.results[1].budget.len(), 2);
        assert!(correlation(&p, 0, 1).abs() <= 1.0);
    }

    #[test]
    fn non_finite_outputs_are_errors() {
        let inputs = vec![Input::type_b("x", 0.0, 0.1, Dist::Normal)];
        let f = |x: &[f64]| vec![1.0 / x[0]];
        assert!(propagate(
            &Model {
                inputs: &inputs,
                corr: &[]
            },
            &f,
            0.95
        )
        .is_err());
        let bad = [(0usize, 0usize, 0.5)];
        let g = |x: &[f64]| vec![x[0]];
        assert!(propagate(
            &Model {
                inputs: &inputs,
                corr: &bad
            },
            &g,
            0.95
        )
        .is_err());
    }

    // The coloured (sparse) Jacobian must agree with the one-input-at-a-time central
    // difference: it is the same GUM eq. 13, only evaluated with fewer model calls.
    #[test]
    fn sparse_pattern_matches_the_dense_jacobian() {
        let n_pts = 40;
        // Inputs: shared gain g (0) and resistance r (1), then per point a reading and offset.
        let mut inputs = vec![
            Input::type_b("g", 1.0, 2e-3, Dist::Rectangular),
            Input::type_b("r", 100.0, 0.05, Dist::Normal),
        ];
        for k in 0..n_pts {
            inputs.push(Input::type_a(
                format!("a{k}"),
                1.0 + 0.01 * k as f64,
                1e-3,
                9.0,
            ));
            inputs.push(Input::type_b(format!("o{k}"), 0.0, 5e-4, Dist::Rectangular));
        }
        // Correlated Type A readings of neighbouring points.
        let corr: Vec<(usize, usize, f64)> = (0..n_pts - 1)
            .map(|k| (2 + 2 * k, 4 + 2 * k, 0.3))
            .collect();
        let f = |x: &[f64]| -> Vec<f64> {
            (0..n_pts)
                .map(|k| (x[2 + 2 * k] + x[3 + 2 * k]) * x[0] / x[1])
                .collect()
        };
        let pattern: Vec<Vec<usize>> = (0..n_pts)
            .map(|k| vec![0, 1, 2 + 2 * k, 3 + 2 * k])
            .collect();
        let model = Model {
            inputs: &inputs,
            corr: &corr,
        };
        let dense = propagate(&model, &f, 0.95).unwrap();
        let sparse = propagate_sparse(&model, &f, Some(&pattern), 0.95).unwrap();
        assert_eq!(dense.results, sparse.results);
        for a in 0..n_pts {
            assert_eq!(dense.sensitivities(a), sparse.sensitivities(a));
            for b in 0..n_pts {
                assert_eq!(dense.cov(a, b), sparse.cov(a, b));
            }
        }
        // Two shared inputs get a colour each, the per-point pairs fill two more.
        assert_eq!(colour_inputs(inputs.len(), &pattern).len(), 4);
        // The mean of the outputs: W J Σ Jᵀ Wᵀ equals the sum of the output covariances / n².
        let w = vec![vec![1.0 / n_pts as f64; n_pts]];
        let mut by_hand = 0.0;
        for a in 0..n_pts {
            for b in 0..n_pts {
                by_hand += dense.cov(a, b);
            }
        }
        by_hand /= (n_pts * n_pts) as f64;
        let c = sparse.combined_cov(&w);
        assert!(
            (c[0][0] - by_hand).abs() <= 1e-12 * by_hand,
            "{} vs {by_hand}",
            c[0][0]
        );
        // The same mean as a result of its own: `linear` against a dense propagation of the
        // mean model (value, u, ν_eff and budget).
        let mean = |x: &[f64]| vec![f(x).iter().sum::<f64>() / n_pts as f64];
        let direct = propagate(&model, &mean, 0.95).unwrap().results.remove(0);
        let wk: Vec<(usize, f64)> = (0..n_pts).map(|k| (k, 1.0 / n_pts as f64)).collect();
        let lin = sparse.linear(&model, &wk, 0.95).unwrap();
        assert!((lin.value - direct.value).abs() <= 1e-15 * direct.value.abs());
        assert!(
            (lin.u - direct.u).abs() <= 1e-8 * direct.u,
            "{} vs {}",
            lin.u,
            direct.u
        );
        let (dl, dd) = (lin.dof.unwrap(), direct.dof.unwrap());
        assert!((dl - dd).abs() <= 1e-6 * dd, "{dl} vs {dd}");
        assert_eq!(lin.budget.len(), direct.budget.len());
        for (a, b) in lin.budget.iter().zip(&direct.budget) {
            assert_eq!(a.input, b.input);
            // The direct central difference of the mean carries round-off ε·ȳ/h, about 2e-5
            // relative for the offsets here (h = 1e-6·u, small sensitivity); `linear` sums
            // the per-point derivatives, which are the more accurate.
            assert!(
                (a.sensitivity - b.sensitivity).abs() <= 1e-4 * b.sensitivity.abs(),
                "{}: {} vs {}",
                a.input,
                a.sensitivity,
                b.sensitivity
            );
        }
        // A pattern of the wrong length is refused.
        assert!(propagate_sparse(&model, &f, Some(&pattern[1..]), 0.95).is_err());
    }
}
