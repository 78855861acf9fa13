//! Propagation of distributions by Monte Carlo (JCGM 101:2008), and the §8 check of a GUM
//! (law of propagation) result against it. Pure maths, no I/O.
//!
//! Sampling (JCGM 101 §6.4): `Normal` → N(x, u²); `Rectangular` → R(x − a, x + a) with
//! a = √3·u; `StudentT` with ν degrees of freedom → x + u·t_ν (§6.4.9.2, the scaled and shifted
//! t of a Type A mean); `StudentT` without ν → normal. Inputs that take part in a correlation
//! are drawn jointly as a multivariate normal (§6.4.8) through a Cholesky factor of their
//! correlation matrix (eigen-decomposition with clipped eigenvalues when it is not positive
//! definite).
//!
//! Determinism: trials run in batches of [`BATCH`]; batch `h` draws from a ChaCha8 stream
//! `h` of the caller's seed, so the numbers do not depend on the number of threads. Batches run
//! in parallel (rayon) in groups of fixed size and are merged in order.

use crate::uncertainty::{Dist, Input, McInterval, Measured};
use nalgebra::DMatrix;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal, StudentT};
use rayon::prelude::*;

/// Trials per batch (JCGM 101 §7.9.4 b): M = max(100/(1 − p), 10⁴) for p ≤ 0.99).
pub const BATCH: usize = 10_000;
/// Batches computed at once in the adaptive procedure (a fixed number, for determinism).
const GROUP: usize = 8;

/// Tuning of the adaptive procedure.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct McOptions {
    /// Significant digits of u(y) regarded as meaningful (§7.9.2): 2.
    pub ndig: u32,
    /// Stabilisation test 2·s ≤ δ / divisor. The default 1 is §7.9.4 i) as written; a larger
    /// divisor (5 for a run that validates a GUM result, from memory of §8.2) costs
    /// divisor² times the trials.
    pub divisor: f64,
    /// Upper limit on trials in the adaptive procedure; reaching it means "not stabilised".
    pub max_trials: usize,
    /// Fewest batches before the test is applied: §7.9.4 allows h = 2, but s from two batch
    /// values is too unreliable to stop on (a deviation, for robustness).
    pub min_batches: usize,
}

impl Default for McOptions {
    fn default() -> Self {
        McOptions {
            ndig: 2,
            divisor: 1.0,
            max_trials: 2_000_000,
            min_batches: 10,
        }
    }
}

/// Numerical tolerance δ of a value z held to `ndig` significant digits (JCGM 101 §7.9.2):
/// write z = c × 10^l with c an `ndig`-digit integer, then δ = 10^l / 2.
pub fn numerical_tolerance(z: f64, ndig: u32) -> f64 {
    let z = z.abs();
    if !z.is_finite() || z == 0.0 {
        return 0.0;
    }
    let mut l = z.log10().floor() as i32 - (ndig as i32 - 1);
    // Guard the rounding at decade edges (e.g. 9.96 with two digits is 10 × 10⁰).
    if (z / 10f64.powi(l)).round() >= 10f64.powi(ndig as i32) {
        l += 1;
    }
    0.5 * 10f64.powi(l)
}

/// The §8 comparison of a GUM result with a Monte Carlo interval.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Validation {
    pub d_low: f64,
    pub d_high: f64,
    pub delta: f64,
    pub validated: bool,
}

/// JCGM 101 §8.2: d_low = |y − U − y_low|, d_high = |y + U − y_high|; the GUM interval is
/// validated when both are at most δ, the numerical tolerance of the GUM u(y).
pub fn validate(y: f64, u: f64, expanded: f64, mc: &McInterval, ndig: u32) -> Validation {
    let delta = numerical_tolerance(u, ndig);
    let d_low = (y - expanded - mc.low).abs();
    let d_high = (y + expanded - mc.high).abs();
    let validated = d_low.is_finite() && d_high.is_finite() && d_low <= delta && d_high <= delta;
    Validation {
        d_low,
        d_high,
        delta,
        validated,
    }
}

/// Sets `gum_validated` in `m.mc` (if any) by [`validate`], and returns the comparison.
pub fn attach_validation(m: &mut Measured) -> Option<Validation> {
    let (y, u, e) = (m.value, m.u, m.expanded);
    if m.mc.as_ref().is_some_and(|mc| mc.trials < 2) {
        m.mc = None; // every trial was dropped: no interval to show
    }
    let mc = m.mc.as_mut()?;
    let v = validate(y, u, e, mc, 2);
    mc.gum_validated = v.validated;
    Some(v)
}

/// Monte Carlo coverage intervals at probability `p` for every output of `f`, with the
/// adaptive procedure of JCGM 101 §7.9 ([`McOptions::default`]) or `trials` fixed.
/// Trials whose outputs are not all finite are dropped (`trials` counts those kept).
/// `gum_validated` is false here; see [`attach_validation`].
pub fn monte_carlo(
    inputs: &[Input],
    corr: &[(usize, usize, f64)],
    f: &(dyn Fn(&[f64]) -> Vec<f64> + Sync),
    p: f64,
    seed: u64,
    trials: Option<usize>,
) -> Vec<McInterval> {
    monte_carlo_with(inputs, corr, f, p, seed, trials, McOptions::default())
}

/// [`monte_carlo`] drawing only the inputs `used` (the others stay at their estimates);
/// correlations with an input not drawn are dropped, which leaves the joint law of the drawn
/// ones unchanged. `f` still receives the full input vector.
pub fn monte_carlo_on(
    inputs: &[Input],
    corr: &[(usize, usize, f64)],
    used: &[usize],
    f: &(dyn Fn(&[f64]) -> Vec<f64> + Sync),
    p: f64,
    seed: u64,
    trials: Option<usize>,
) -> Vec<McInterval> {
    let sub: Vec<Input> = used
        .iter()
        .filter_map(|&i| inputs.get(i).cloned())
        .collect();
    let pos = |i: usize| used.iter().position(|&k| k == i);
    let sub_corr: Vec<(usize, usize, f64)> = corr
        .iter()
        .filter_map(|&(a, b, r)| Some((pos(a)?, pos(b)?, r)))
        .collect();
    // Draw the used inputs (in their order, so the streams are those of a run on `sub`)
    // straight into the full input vector.
    let slot: Vec<usize> = used.iter().copied().filter(|&i| i < inputs.len()).collect();
    let mut sampler = Sampler::new(&sub, &sub_corr);
    sampler.full = inputs.iter().map(|i| i.value).collect();
    sampler.slot = slot;
    run_adaptive(&sampler, f, p, seed, trials, McOptions::default())
}

/// [`monte_carlo`] with explicit options.
pub fn monte_carlo_with(
    inputs: &[Input],
    corr: &[(usize, usize, f64)],
    f: &(dyn Fn(&[f64]) -> Vec<f64> + Sync),
    p: f64,
    seed: u64,
    trials: Option<usize>,
    opts: McOptions,
) -> Vec<McInterval> {
    let sampler = Sampler::new(inputs, corr);
    run_adaptive(&sampler, f, p, seed, trials, opts)
}

/// The trials of [`monte_carlo_with`]: `trials` fixed, or batches until §7.9.4 says stable.
/// The batches are kept as drawn and summarised together by [`summarise_parts`], so no copy
/// of all values is made at the end.
fn run_adaptive(
    sampler: &Sampler,
    f: &(dyn Fn(&[f64]) -> Vec<f64> + Sync),
    p: f64,
    seed: u64,
    trials: Option<usize>,
    opts: McOptions,
) -> Vec<McInterval> {
    let p = if p.is_finite() {
        p.clamp(0.5, 0.9999)
    } else {
        0.95
    };
    let nout = f(&sampler.start()).len();
    if nout == 0 {
        return Vec::new();
    }
    let run = |h: usize, m: usize| run_batch(sampler, f, nout, seed, h, m);
    // batches[h][o]: the values of output o in batch h.
    let mut all: Vec<Vec<Vec<f64>>> = Vec::new();
    let keep = |all: &mut Vec<Vec<Vec<f64>>>, b: Vec<Vec<f64>>| all.push(b);
    let mut stats: Vec<Vec<[f64; 4]>> = Vec::new(); // per batch, per output (adaptive runs)
    let drawn = match trials {
        Some(n) => {
            let n = n.max(2);
            let nb = n.div_ceil(BATCH);
            for h0 in (0..nb).step_by(GROUP) {
                let group: Vec<Vec<Vec<f64>>> = (h0..(h0 + GROUP).min(nb))
                    .into_par_iter()
                    .map(|h| run(h, if h + 1 == nb { n - h * BATCH } else { BATCH }))
                    .collect();
                for b in group {
                    keep(&mut all, b);
                }
            }
            n
        }
        None => {
            let max_batches = opts.max_trials.div_ceil(BATCH).max(2);
            'outer: loop {
                let start = stats.len();
                let group: Vec<Vec<Vec<f64>>> = (start..start + GROUP)
                    .into_par_iter()
                    .map(|h| run(h, BATCH))
                    .collect();
                for b in group {
                    stats.push(b.iter().map(|v| batch_summary(v, p)).collect());
                    keep(&mut all, b);
                    if stats.len() >= opts.min_batches.max(2) && stabilised(&stats, &opts) {
                        break 'outer;
                    }
                    if stats.len() >= max_batches {
                        break 'outer;
                    }
                }
            }
            stats.len() * BATCH
        }
    };
    (0..nout)
        .into_par_iter()
        .map(|o| {
            let parts: Vec<&[f64]> = all.iter().map(|b| b[o].as_slice()).collect();
            // The batches' own interval ends bracket the pooled ones (adaptive runs).
            let brackets = (!stats.is_empty()).then(|| {
                let span = |q: usize| {
                    stats
                        .iter()
                        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), s| {
                            (a.min(s[o][q]), b.max(s[o][q]))
                        })
                };
                [span(2), span(3)]
            });
            let mut s = summarise_parts(&parts, p, brackets);
            s.dropped = drawn.saturating_sub(s.trials);
            s
        })
        .collect()
}

/// Indices (0-based) of the order statistics §7.7.2 takes for `m` values: (low, high).
fn interval_ranks(m: usize, p: f64) -> (usize, usize) {
    let pm = p * m as f64;
    let q = if (pm - pm.round()).abs() < 1e-9 {
        pm.round() as usize
    } else {
        (pm + 0.5).floor() as usize
    };
    let q = q.min(m - 1).max(1);
    let r = (m - q).div_ceil(2).max(1); // 1-based
    (r - 1, (r + q - 1).min(m - 1))
}

/// [`summarise`] of the values of all `parts` taken in order, without gathering them: the
/// mean and variance are summed in the same order, and each order statistic is selected among
/// the few values inside a bracket from the batches' own quantiles (the values below it are
/// counted). The result is exactly that of [`summarise`] on the concatenation; when a bracket
/// misses, it falls back to that.
fn summarise_parts(parts: &[&[f64]], p: f64, brackets: Option<[(f64, f64); 2]>) -> McInterval {
    let m: usize = parts.iter().map(|v| v.len()).sum();
    if parts.len() < 4 || m < 2 {
        let mut v: Vec<f64> = parts.iter().flat_map(|v| v.iter().copied()).collect();
        return summarise(&mut v, p);
    }
    let mut sum = 0.0;
    for v in parts {
        for x in v.iter() {
            sum += x;
        }
    }
    let mean = sum / m as f64;
    let mut ss = 0.0;
    for v in parts {
        for x in v.iter() {
            ss += (x - mean).powi(2);
        }
    }
    let (lo_i, hi_i) = interval_ranks(m, p);
    let pick = |k: usize, bracket: Option<(f64, f64)>| -> Option<f64> {
        // Bracket: the smallest and largest of the batches' own k/m quantiles.
        let (a, b) = bracket.unwrap_or_else(|| {
            let frac = (k as f64 + 0.5) / m as f64;
            let (mut a, mut b) = (f64::INFINITY, f64::NEG_INFINITY);
            for v in parts.iter().filter(|v| v.len() >= 2) {
                let mut w = v.to_vec();
                let j = ((frac * w.len() as f64) as usize).min(w.len() - 1);
                let (_, q, _) = w.select_nth_unstable_by(j, f64::total_cmp);
                a = a.min(*q);
                b = b.max(*q);
            }
            (a, b)
        });
        let (mut below, mut inside) = (0usize, Vec::new());
        for v in parts {
            for &x in v.iter() {
                if x.total_cmp(&a).is_lt() {
                    below += 1;
                } else if x.total_cmp(&b).is_le() {
                    inside.push(x);
                }
            }
        }
        let j = k.checked_sub(below).filter(|&j| j < inside.len())?;
        let (_, q, _) = inside.select_nth_unstable_by(j, f64::total_cmp);
        Some(*q)
    };
    let (bl, bh) = match brackets {
        Some([l, h]) => (Some(l), Some(h)),
        None => (None, None),
    };
    match (pick(lo_i, bl), pick(hi_i, bh)) {
        (Some(low), Some(high)) => McInterval {
            trials: m,
            dropped: 0,
            mean,
            u: (ss / (m as f64 - 1.0)).sqrt(),
            low,
            high,
            gum_validated: false,
        },
        _ => {
            let mut v: Vec<f64> = parts.iter().flat_map(|v| v.iter().copied()).collect();
            summarise(&mut v, p)
        }
    }
}

/// §7.9.4 f)–i): every output's 2·s of the batch averages of y, u, y_low, y_high ≤ δ/divisor.
fn stabilised(stats: &[Vec<[f64; 4]>], opts: &McOptions) -> bool {
    let h = stats.len() as f64;
    let nout = stats.first().map_or(0, |s| s.len());
    for o in 0..nout {
        // u(y) from all values is close to the mean of the batch u's; §7.9.4 h) uses all values.
        let u_all = stats.iter().map(|s| s[o][1]).sum::<f64>() / h;
        let delta = numerical_tolerance(u_all, opts.ndig) / opts.divisor;
        for q in 0..4 {
            let mean = stats.iter().map(|s| s[o][q]).sum::<f64>() / h;
            let var = stats.iter().map(|s| (s[o][q] - mean).powi(2)).sum::<f64>() / (h * (h - 1.0));
            if !(2.0 * var.sqrt() <= delta) {
                return false;
            }
        }
    }
    true
}

/// Mean, standard deviation and the probabilistically symmetric interval of one batch.
fn batch_summary(v: &[f64], p: f64) -> [f64; 4] {
    let mut w = v.to_vec();
    let s = summarise(&mut w, p);
    [s.mean, s.u, s.low, s.high]
}

/// JCGM 101 §7.6 (mean, standard deviation) and §7.7.2 (probabilistically symmetric interval:
/// q = pM rounded, r = (M − q)/2 rounded up, interval [y_(r), y_(r+q)] of the sorted values).
fn summarise(v: &mut [f64], p: f64) -> McInterval {
    let m = v.len();
    if m < 2 {
        let x = v.first().copied().unwrap_or(0.0);
        return McInterval {
            trials: m,
            dropped: 0,
            mean: x,
            u: 0.0,
            low: x,
            high: x,
            gum_validated: false,
        };
    }
    let mean = v.iter().sum::<f64>() / m as f64;
    let var = v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (m as f64 - 1.0);
    let (lo_i, hi_i) = interval_ranks(m, p);
    let (_, lo, rest) = v.select_nth_unstable_by(lo_i, f64::total_cmp);
    let low = *lo;
    let high = if hi_i == lo_i {
        low
    } else {
        let k = hi_i - lo_i - 1;
        let (_, hi, _) = rest.select_nth_unstable_by(k, f64::total_cmp);
        *hi
    };
    McInterval {
        trials: m,
        dropped: 0,
        mean,
        u: var.sqrt(),
        low,
        high,
        gum_validated: false,
    }
}

/// One batch of `m` trials from stream `h`: values per output, non-finite trials dropped.
fn run_batch(
    s: &Sampler,
    f: &(dyn Fn(&[f64]) -> Vec<f64> + Sync),
    nout: usize,
    seed: u64,
    h: usize,
    m: usize,
) -> Vec<Vec<f64>> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(h as u64);
    let mut out: Vec<Vec<f64>> = (0..nout).map(|_| Vec::with_capacity(m)).collect();
    let mut x = s.start();
    let mut z = vec![0.0; s.group.len()];
    for _ in 0..m {
        s.draw(&mut rng, &mut x, &mut z);
        let y = f(&x);
        if y.len() == nout && y.iter().all(|v| v.is_finite()) {
            for (o, v) in out.iter_mut().zip(y) {
                o.push(v);
            }
        }
    }
    out
}

enum Law {
    Normal,
    Rect,
    T(StudentT<f64>),
    Joint,
}

struct Sampler {
    x: Vec<f64>,
    u: Vec<f64>,
    law: Vec<Law>,
    /// Indices of the jointly drawn (correlated) inputs and the lower factor of their
    /// correlation matrix, row-major.
    group: Vec<usize>,
    factor: Vec<f64>,
    /// The model's whole input vector at the estimates, when the sampler draws only some
    /// inputs ([`monte_carlo_on`]); empty when it draws them all.
    full: Vec<f64>,
    /// Where each drawn input goes in `full` (empty: in place).
    slot: Vec<usize>,
}

impl Sampler {
    fn new(inputs: &[Input], corr: &[(usize, usize, f64)]) -> Sampler {
        let n = inputs.len();
        let ok = |i: usize| i < n;
        let mut in_group = vec![false; n];
        for &(a, b, r) in corr {
            if ok(a) && ok(b) && a != b && r != 0.0 && r.is_finite() {
                in_group[a] = true;
                in_group[b] = true;
            }
        }
        let group: Vec<usize> = (0..n).filter(|&i| in_group[i]).collect();
        let g = group.len();
        let mut rm = DMatrix::<f64>::identity(g, g);
        for &(a, b, r) in corr {
            if let (Some(i), Some(j)) = (
                group.iter().position(|&k| k == a),
                group.iter().position(|&k| k == b),
            ) {
                if i != j && r.is_finite() {
                    let r = r.clamp(-1.0, 1.0);
                    rm[(i, j)] = r;
                    rm[(j, i)] = r;
                }
            }
        }
        let l = match rm.clone().cholesky() {
            Some(c) => c.l(),
            None => {
                let e = rm.symmetric_eigen();
                let sq = e.eigenvalues.map(|v| v.max(0.0).sqrt());
                &e.eigenvectors * DMatrix::from_diagonal(&sq)
            }
        };
        let mut factor = vec![0.0; g * g];
        for i in 0..g {
            for j in 0..g {
                factor[i * g + j] = l[(i, j)];
            }
        }
        let law = inputs
            .iter()
            .enumerate()
            .map(|(i, inp)| {
                if in_group[i] {
                    return Law::Joint;
                }
                match inp.dist {
                    Dist::Normal => Law::Normal,
                    Dist::Rectangular => Law::Rect,
                    Dist::StudentT => match inp.dof.filter(|v| v.is_finite() && *v > 0.0) {
                        Some(nu) => StudentT::new(nu).map(Law::T).unwrap_or(Law::Normal),
                        None => Law::Normal,
                    },
                }
            })
            .collect();
        Sampler {
            x: inputs.iter().map(|i| i.value).collect(),
            u: inputs
                .iter()
                .map(|i| if i.u.is_finite() { i.u.abs() } else { 0.0 })
                .collect(),
            law,
            group,
            factor,
            full: Vec::new(),
            slot: Vec::new(),
        }
    }

    /// The model's input vector at the estimates.
    fn start(&self) -> Vec<f64> {
        if self.slot.is_empty() {
            self.x.clone()
        } else {
            self.full.clone()
        }
    }

    /// Index in the model's input vector of drawn input `i`.
    #[inline]
    fn at(&self, i: usize) -> usize {
        if self.slot.is_empty() {
            i
        } else {
            self.slot[i]
        }
    }

    fn draw(&self, rng: &mut ChaCha8Rng, x: &mut [f64], z: &mut [f64]) {
        for (i, law) in self.law.iter().enumerate() {
            let (x0, u) = (self.x[i], self.u[i]);
            x[self.at(i)] = match law {
                Law::Normal => x0 + u * rng.sample::<f64, _>(StandardNormal),
                Law::Rect => x0 + u * 3f64.sqrt() * (2.0 * rng.random::<f64>() - 1.0),
                Law::T(t) => x0 + u * t.sample(rng),
                Law::Joint => x0,
            };
        }
        let g = self.group.len();
        if g == 0 {
            return;
        }
        for zi in z.iter_mut() {
            *zi = rng.sample(StandardNormal);
        }
        for (i, &k) in self.group.iter().enumerate() {
            let row = &self.factor[i * g..i * g + g];
            let c: f64 = row.iter().zip(z.iter()).map(|(a, b)| a * b).sum();
            x[self.at(k)] = self.x[k] + self.u[k] * c;
        }
    }
}

/// Stable 64-bit seed from a block id (FNV-1a), so Monte Carlo output is reproducible.
pub fn seed_of(id: &str, salt: u64) -> u64 {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for b in id.bytes().chain(salt.to_le_bytes()) {
        h ^= b as u64;
        h = h.wrapping_mul(0x0100_0000_01b3);
    }
    h
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::uncertainty::EvalType;

    fn inp(name: &str, value: f64, u: f64, dist: Dist, dof: Option<f64>) -> Input {
        Input {
            name: name.into(),
            value,
            u,
            dof,
            kind: EvalType::B,
            dist,
        }
    }

    /// The batched summary is exactly the §7.7.2 summary of all values taken together, with
    /// good brackets, with brackets that miss (fallback), and without brackets.
    #[test]
    fn batched_summary_equals_the_summary_of_all_values() {
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        let batches: Vec<Vec<f64>> = (0..12)
            .map(|_| {
                (0..997)
                    .map(|_| rng.sample::<f64, _>(StandardNormal))
                    .collect()
            })
            .collect();
        let parts: Vec<&[f64]> = batches.iter().map(|b| b.as_slice()).collect();
        let mut all: Vec<f64> = batches.concat();
        let want = summarise(&mut all, 0.95);
        let ends = |q: usize| {
            batches
                .iter()
                .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
                    let s = batch_summary(v, 0.95);
                    (a.min(s[q]), b.max(s[q]))
                })
        };
        for brackets in [
            None,
            Some([ends(2), ends(3)]),
            Some([(5.0, 6.0), (-6.0, -5.0)]),
        ] {
            let got = summarise_parts(&parts, 0.95, brackets);
            assert_eq!(
                (got.trials, got.mean, got.u, got.low, got.high),
                (want.trials, want.mean, want.u, want.low, want.high),
                "{brackets:?}"
            );
        }
    }

    #[test]
    fn tolerance_examples() {
        // Derived from the rule of JCGM 101 §7.9.2 (not its examples, which are in
        // tests/reference_bite.rs): u = 0.0036 to two digits → c = 36, l = −4, δ = 0.5 × 10⁻⁴.
        assert!((numerical_tolerance(0.0036, 2) - 0.5e-4).abs() < 1e-18);
        assert!((numerical_tolerance(2.0, 2) - 0.05).abs() < 1e-15);
        assert!((numerical_tolerance(1.0, 2) - 0.05).abs() < 1e-15);
        assert!((numerical_tolerance(99.4, 2) - 0.5).abs() < 1e-12);
    }

    #[test]
    fn additive_model_normal_inputs() {
        // JCGM 101 §9.2.2 (from memory): X1..X4 independent N(0, 1), Y = ΣXi: u(y) = 2.00,
        // 95 % interval [−3.92, 3.92] by both GUF and MCM; the GUF result is validated.
        let xs: Vec<Input> = (0..4)
            .map(|i| inp(&format!("X{i}"), 0.0, 1.0, Dist::Normal, None))
            .collect();
        let f = |x: &[f64]| vec![x.iter().sum::<f64>()];
        // Adaptive (§7.9.4): results good to about δ = 0.05 (u = 2.0 held to two digits).
        let mc = monte_carlo(&xs, &[], &f, 0.95, 11, None);
        let m = &mc[0];
        assert!((m.u - 2.0).abs() < 0.05, "{m:?}");
        assert!(
            (m.low + 3.92).abs() < 0.05 && (m.high - 3.92).abs() < 0.05,
            "{m:?}"
        );
        assert!(m.trials >= 10 * BATCH && m.trials < 2_000_000);
        let v = validate(0.0, 2.0, 1.959964 * 2.0, m, 2);
        assert!(v.validated, "{v:?}");
        // 10⁶ fixed trials: closer still.
        let m = &monte_carlo(&xs, &[], &f, 0.95, 12, Some(1_000_000))[0];
        assert!(
            (m.low + 3.92).abs() < 0.02 && (m.high - 3.92).abs() < 0.02,
            "{m:?}"
        );
        assert!(validate(0.0, 2.0, 1.959964 * 2.0, m, 2).validated);
    }

    /// Irwin–Hall CDF of the sum of n independent U(0, 1) (a textbook formula).
    fn irwin_hall_cdf(x: f64, n: u32) -> f64 {
        let mut s = 0.0;
        let mut binom = 1.0;
        let mut fact = 1.0;
        for i in 1..=n {
            fact *= i as f64;
        }
        for k in 0..=n {
            if (k as f64) <= x {
                let sign = if k % 2 == 0 { 1.0 } else { -1.0 };
                s += sign * binom * (x - k as f64).powi(n as i32);
            }
            binom = binom * (n - k) as f64 / (k + 1) as f64;
        }
        s / fact
    }

    #[test]
    fn additive_model_rectangular_inputs_matches_irwin_hall() {
        // JCGM 101 §9.2.3 (from memory: MCM [−3.88, 3.88] against GUF ±3.92). The exact 97.5 %
        // point of Σ of four R(−√3, √3) comes from the Irwin–Hall distribution.
        let xs: Vec<Input> = (0..4)
            .map(|i| inp(&format!("X{i}"), 0.0, 1.0, Dist::Rectangular, None))
            .collect();
        let f = |x: &[f64]| vec![x.iter().sum::<f64>()];
        let mc = monte_carlo(&xs, &[], &f, 0.95, 5, Some(1_000_000));
        let (mut a, mut b) = (2.0, 4.0);
        for _ in 0..200 {
            let mid = 0.5 * (a + b);
            if irwin_hall_cdf(mid, 4) < 0.975 {
                a = mid
            } else {
                b = mid
            }
        }
        let exact_high = 2.0 * 3f64.sqrt() * a - 4.0 * 3f64.sqrt();
        assert!((exact_high - 3.88).abs() < 0.005, "{exact_high}");
        assert!(
            (mc[0].high - exact_high).abs() < 0.01,
            "{:?} vs {exact_high}",
            mc[0]
        );
        assert!((mc[0].low + exact_high).abs() < 0.01);
        assert!((mc[0].u - 2.0).abs() < 0.01);
        assert_eq!(mc[0].trials, 1_000_000);
    }

    #[test]
    fn t_inputs_widen_and_correlation_is_honoured() {
        // JCGM 101 §6.4.9: x + u·t_ν has standard deviation u·√(ν/(ν−2)).
        let xs = vec![inp("A", 1.0, 0.1, Dist::StudentT, Some(5.0))];
        let f = |x: &[f64]| vec![x[0]];
        let mc = monte_carlo(&xs, &[], &f, 0.95, 3, Some(400_000));
        let want = 0.1 * (5.0f64 / 3.0).sqrt();
        assert!((mc[0].u - want).abs() < 0.003 * want * 10.0, "{:?}", mc[0]);
        // Y = X1 − X2 with r = 0.8, u = 1 each: u(y)² = 2 − 2·0.8 = 0.4 (GUM 5.2.2).
        let xs = vec![
            inp("1", 0.0, 1.0, Dist::Normal, None),
            inp("2", 0.0, 1.0, Dist::Normal, None),
        ];
        let f = |x: &[f64]| vec![x[0] - x[1]];
        let mc = monte_carlo(&xs, &[(0, 1, 0.8)], &f, 0.95, 3, Some(400_000));
        assert!((mc[0].u - 0.4f64.sqrt()).abs() < 0.005, "{:?}", mc[0]);
    }

    #[test]
    fn deterministic_and_independent_of_threads() {
        let xs: Vec<Input> = (0..3)
            .map(|i| inp(&format!("X{i}"), 1.0, 0.2, Dist::Rectangular, None))
            .collect();
        let f = |x: &[f64]| vec![x[0] * x[1] / x[2]];
        let a = monte_carlo(&xs, &[], &f, 0.95, 42, Some(50_000));
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(1)
            .build()
            .unwrap();
        let b = pool.install(|| monte_carlo(&xs, &[], &f, 0.95, 42, Some(50_000)));
        assert_eq!(a, b);
        let c = monte_carlo(&xs, &[], &f, 0.95, 43, Some(50_000));
        assert_ne!(a, c);
    }

    #[test]
    fn non_finite_trials_are_dropped() {
        let xs = vec![inp("A", 0.0, 1.0, Dist::Normal, None)];
        let f = |x: &[f64]| vec![x[0].sqrt()];
        let mc = monte_carlo(&xs, &[], &f, 0.95, 1, Some(20_000));
        assert!(mc[0].trials > 9_000 && mc[0].trials < 11_000);
        assert!(mc[0].low >= 0.0 && mc[0].high.is_finite());
    }
}
