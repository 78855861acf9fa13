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
//! Determinism: trials run in batches of [`BATCH`]; batch `h` draws from xoshiro256++
//! generators seeded from ChaCha8 stream `h` of the caller's seed, so the numbers do not
//! depend on the number of threads. Batches run in parallel (rayon) in groups of fixed size
//! and are merged in order.

use crate::uncertainty::{Dist, Input, McInterval, Measured};
use nalgebra::DMatrix;
use rand::{Rng, RngCore, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal, StudentT};
use rand_xoshiro::Xoshiro256PlusPlus;
use rayon::prelude::*;

/// Trials per batch (JCGM 101 §7.9.4 b): M = max(100/(1 − p), 10⁴) for p ≤ 0.99).
pub const BATCH: usize = 10_000;

/// Most rows of one block that get a Monte Carlo run each: the adaptive rule draws at least
/// 10⁵ trials a row, so a long sweep would otherwise cost minutes. A longer block keeps its
/// GUM intervals, unvalidated, and says so ([`rows_skipped`]).
pub const MAX_ROWS: usize = 100;

/// The flag of a row whose Monte Carlo run left out trials (`iv.dropped`) because the model
/// has no value there: `drew` says what those trials drew, `given` what the interval is then
/// conditional on. Above 1 % of the trials drawn the interval describes a visibly different
/// population: a warning.
pub fn dropped_flag(
    iv: &McInterval,
    at: &str,
    span: Option<crate::diag::Span>,
    drew: &str,
    given: &str,
) -> Option<crate::networks::Flag> {
    let drawn = iv.trials + iv.dropped;
    (iv.dropped > 0).then(|| crate::networks::Flag {
        warn: iv.dropped as f64 > 0.01 * drawn as f64,
        span,
        message: format!(
            "at {at}: {} of {drawn} Monte Carlo trials drew {drew} ({}) and were left out: the Monte Carlo interval is conditional on {given}{}",
            iv.dropped,
            crate::print::percent(crate::print::round_sig(iv.dropped as f64 / drawn as f64, 2)),
            if iv.trials < 2 { ", and with fewer than two left there is none" } else { "" }
        ),
    })
}

/// The note of a block whose `rows` exceed [`MAX_ROWS`].
pub fn rows_skipped(rows: usize, span: crate::diag::Span) -> crate::networks::Flag {
    crate::networks::Flag {
        warn: false,
        span: Some(span),
        message: format!(
            "Monte Carlo was not run on this block's {rows} rows (more than {MAX_ROWS}): its GUM intervals are not checked against JCGM 101 §8"
        ),
    }
}
/// Batches computed at once in the adaptive procedure. The stopping test runs batch by batch
/// in order, so the result does not depend on this number; it only bounds the batches drawn
/// past the stopping point.
const GROUP: usize = 4;

/// A measurement model with `outputs` results, evaluated in place (no allocation per trial).
/// A trial with a non-finite output is dropped.
#[derive(Clone, Copy)]
pub struct InPlace<'a> {
    pub outputs: usize,
    pub eval: Eval<'a>,
}

/// How a model is evaluated.
#[derive(Clone, Copy)]
pub enum Eval<'a> {
    /// One trial at a time: `f(x, y)` writes the outputs at inputs `x` into `y`.
    Trial(&'a (dyn Fn(&[f64], &mut [f64]) + Sync)),
    /// A chunk of trials at once ([`ColumnModel`]): output `o` of trial `t` to
    /// `y[o·CHUNK + t]`, for `t < cols.len`; `scratch` is kept from chunk to chunk (sized
    /// once) for intermediate columns. It saves the per-trial call and lets the arithmetic
    /// run over arrays.
    Chunk(&'a ColumnModel<'a>),
}

/// A model over a chunk of trials; see [`Eval::Chunk`].
pub type ColumnModel<'a> = dyn Fn(&Columns, &mut [f64], &mut Vec<f64>) + Sync + 'a;

/// A chunk of trials, input by input: each model input is either drawn (a column of `len`
/// values) or held at its estimate.
pub struct Columns<'a> {
    /// Drawn input `d` at `cols[d·CHUNK..d·CHUNK + len]`.
    cols: &'a [f64],
    /// Model input → its drawn column (None: held at its estimate).
    drawn: &'a [Option<usize>],
    /// Every model input's estimate.
    x: &'a [f64],
    /// Trials in the chunk (at most [`CHUNK`]).
    pub len: usize,
}

/// One model input over a chunk: held fixed, or its drawn values.
pub enum Col<'a> {
    Fixed(f64),
    Drawn(&'a [f64]),
}

impl Col<'_> {
    /// Trial `t`'s value.
    #[inline(always)]
    pub fn at(&self, t: usize) -> f64 {
        match self {
            Col::Fixed(v) => *v,
            Col::Drawn(c) => c[t],
        }
    }
}

impl<'a> Columns<'a> {
    /// Model input `i` (fixed at NaN when there is no such input, as `eval` would read it).
    pub fn col(&self, i: usize) -> Col<'a> {
        match self.drawn.get(i).copied().flatten() {
            Some(d) => Col::Drawn(&self.cols[d * CHUNK..d * CHUNK + self.len]),
            None => Col::Fixed(self.x.get(i).copied().unwrap_or(f64::NAN)),
        }
    }
}

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
    f: InPlace,
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
    let nout = f(&sampler.start()).len();
    let eval = |x: &[f64], y: &mut [f64]| {
        let v = f(x);
        if v.len() == y.len() {
            y.copy_from_slice(&v);
        } else {
            y.fill(f64::NAN);
        }
    };
    let model = InPlace {
        outputs: nout,
        eval: Eval::Trial(&eval),
    };
    run_adaptive(&sampler, model, p, seed, trials, opts)
}

/// The trials of [`monte_carlo_with`]: `trials` fixed, or batches until §7.9.4 says stable.
/// Each batch is summarised where it is drawn, and only its tails are kept (the values beyond
/// its hint); the pooled interval ends are selected among them. Should the pooled ends fall
/// outside what the tails hold, the same batches run again keeping every value.
fn run_adaptive(
    sampler: &Sampler,
    f: InPlace,
    p: f64,
    seed: u64,
    trials: Option<usize>,
    opts: McOptions,
) -> Vec<McInterval> {
    let plan = |p| Plan {
        p,
        seed,
        trials,
        opts,
    };
    let p = if p.is_finite() {
        p.clamp(0.5, 0.9999)
    } else {
        0.95
    };
    if f.outputs == 0 {
        return Vec::new();
    }
    let run = |keep_all: bool| run_batches(sampler, f, plan(p), keep_all);
    let (stats, tails) = run(false);
    let drawn = trials.map_or(stats.len() * BATCH, |n| n.max(2));
    let pooled = |stats: &[Vec<BatchStat>], tails: &[Vec<Tails>], o: usize| {
        let own: Vec<BatchStat> = stats.iter().map(|s| s[o]).collect();
        let ends: Vec<&Tails> = tails.iter().map(|t| &t[o]).collect();
        pool(&own, &ends, p).map(|mut s| {
            s.dropped = drawn.saturating_sub(s.trials);
            s
        })
    };
    let first: Vec<Option<McInterval>> = (0..f.outputs)
        .into_par_iter()
        .map(|o| pooled(&stats, &tails, o))
        .collect();
    if first.iter().all(|s| s.is_some()) {
        return first.into_iter().flatten().collect();
    }
    let (stats, tails) = run(true);
    (0..f.outputs)
        .into_par_iter()
        .map(|o| pooled(&stats, &tails, o).unwrap_or_default())
        .collect()
}

/// Batches in groups of [`GROUP`], in parallel, until the §7.9.4 test passes (adaptive) or
/// `trials` are drawn: per batch and output, its summary and its tails (every value when
/// `keep_all`).
fn run_batches(
    sampler: &Sampler,
    f: InPlace,
    plan: Plan,
    keep_all: bool,
) -> (Vec<Vec<BatchStat>>, Vec<Vec<Tails>>) {
    let Plan {
        p,
        seed,
        trials,
        opts,
    } = plan;
    let fixed = trials.map(|n| n.max(2));
    let batches = fixed.map(|n| n.div_ceil(BATCH));
    let size = |h: usize| match fixed {
        Some(n) if (h + 1) * BATCH > n => n - h * BATCH,
        _ => BATCH,
    };
    let max_batches = opts.max_trials.div_ceil(BATCH).max(2);
    let mut stats: Vec<Vec<BatchStat>> = Vec::new();
    let mut tails: Vec<Vec<Tails>> = Vec::new();
    loop {
        let start = stats.len();
        let end = batches.map_or(start + GROUP, |nb| (start + GROUP).min(nb));
        if start >= end {
            return (stats, tails);
        }
        let hints: Vec<Option<Hint>> = (0..f.outputs)
            .map(|o| {
                if keep_all {
                    Some(KEEP_ALL)
                } else {
                    hint_of(&stats, o)
                }
            })
            .collect();
        let group: Vec<Vec<(BatchStat, Tails)>> = (start..end)
            .into_par_iter()
            .map(|h| {
                // The batch's values live in a buffer of the thread, reused batch to batch.
                VALUES.with_borrow_mut(|b| {
                    run_batch(sampler, f, seed, h, size(h), b);
                    b.iter()
                        .zip(&hints)
                        .map(|(v, &hn)| batch_stat(v, p, hn))
                        .collect()
                })
            })
            .collect();
        for b in group {
            let (st, tl): (Vec<BatchStat>, Vec<Tails>) = b.into_iter().unzip();
            stats.push(st);
            tails.push(tl);
            if fixed.is_none()
                && ((stats.len() >= opts.min_batches.max(2) && stabilised(&stats, &opts))
                    || stats.len() >= max_batches)
            {
                return (stats, tails);
            }
        }
    }
}

/// What a run draws: coverage probability, seed, fixed trials or adaptive, and its options.
#[derive(Clone, Copy)]
struct Plan {
    p: f64,
    seed: u64,
    trials: Option<usize>,
    opts: McOptions,
}

/// The values one batch keeps of one output: every value at or below `cut.low` and every
/// value at or above `cut.high` (with [`KEEP_ALL`] both hold every value).
#[derive(Debug, Clone)]
struct Tails {
    cut: Hint,
    low: Vec<f64>,
    high: Vec<f64>,
}

/// One batch's summary of one output: count, mean, sum of squared deviations from the mean
/// and the §7.7.2 interval ends.
#[derive(Debug, Clone, Copy, PartialEq)]
struct BatchStat {
    n: usize,
    mean: f64,
    m2: f64,
    low: f64,
    high: f64,
}

impl BatchStat {
    /// y, u(y), y_low, y_high: the four quantities of the §7.9.4 test.
    fn four(&self) -> [f64; 4] {
        let u = if self.n > 1 {
            (self.m2 / (self.n as f64 - 1.0)).sqrt()
        } else {
            0.0
        };
        [self.mean, u, self.low, self.high]
    }
}

/// Where a batch's interval ends are expected to lie, from the batches before it: values at
/// or below `low` and at or above `high` are the candidates. A hint only saves work: when it
/// misses, the ends are selected among all values, so the result does not depend on it.
#[derive(Debug, Clone, Copy)]
struct Hint {
    low: f64,
    high: f64,
}

/// The hint for output `o`: the mean of the earlier batches' ends, moved four standard
/// deviations of them towards the centre, so that the next batch's ends lie among the
/// candidates (none before three batches).
fn hint_of(stats: &[Vec<BatchStat>], o: usize) -> Option<Hint> {
    let h = stats.len();
    if h < 3 {
        return None;
    }
    let spread = |end: fn(&BatchStat) -> f64| {
        let mean = stats.iter().map(|s| end(&s[o])).sum::<f64>() / h as f64;
        let var = stats
            .iter()
            .map(|s| (end(&s[o]) - mean).powi(2))
            .sum::<f64>()
            / (h as f64 - 1.0);
        (mean, 4.0 * var.sqrt())
    };
    let (lo, wl) = spread(|s| s.low);
    let (hi, wh) = spread(|s| s.high);
    let hint = Hint {
        low: lo + wl,
        high: hi - wh,
    };
    (hint.low.is_finite() && hint.high.is_finite()).then_some(hint)
}

/// Sum in four interleaved partial sums (a fixed order, so deterministic; faster than one
/// running sum, whose every addition waits for the previous one).
#[inline(always)]
fn sum4(v: &[f64], f: impl Fn(f64) -> f64) -> f64 {
    let mut acc = [0.0; 4];
    let chunks = v.chunks_exact(4);
    let rest = chunks.remainder();
    for c in chunks {
        for k in 0..4 {
            acc[k] += f(c[k]);
        }
    }
    let tail: f64 = rest.iter().map(|&x| f(x)).sum();
    (acc[0] + acc[1]) + (acc[2] + acc[3]) + tail
}

/// The summary of one batch: mean and squared deviations, and the interval ends selected
/// among the candidates of `hint` (with none, of the batch's own cut, [`own_cut`]; among all
/// values when the candidates miss an end); and the batch's tails beyond the cut.
fn batch_stat(v: &[f64], p: f64, hint: Option<Hint>) -> (BatchStat, Tails) {
    let m = v.len();
    let hint = hint.or_else(|| own_cut(v, p));
    let cut = hint.unwrap_or(KEEP_ALL);
    let (low, high) = if hint.is_some() {
        tails_beyond(v, cut)
    } else {
        (v.to_vec(), v.to_vec())
    };
    let mut tails = Tails { cut, low, high };
    if m < 2 {
        let x = v.first().copied().unwrap_or(0.0);
        let stat = BatchStat {
            n: m,
            mean: x,
            m2: 0.0,
            low: x,
            high: x,
        };
        return (stat, tails);
    }
    let (mean, m2) = wide(|| {
        let mean = sum4(v, |x| x) / m as f64;
        (mean, sum4(v, |x| (x - mean) * (x - mean)))
    });
    let (lo_i, hi_i) = interval_ranks(m, p);
    // `tails.low` are the |low| smallest values, `tails.high` the |high| largest. Selecting
    // reorders them, which the pooling does not mind.
    let first_high = m - tails.high.len();
    let (low, high) = if lo_i < tails.low.len() && hi_i >= first_high {
        (
            nth(&mut tails.low, lo_i),
            nth(&mut tails.high, hi_i - first_high),
        )
    } else {
        let s = summarise(&mut v.to_vec(), p);
        (s.low, s.high)
    };
    let stat = BatchStat {
        n: m,
        mean,
        m2,
        low,
        high,
    };
    (stat, tails)
}

thread_local! {
    /// Room for one batch's tails, reused batch to batch.
    static SCRATCH: std::cell::RefCell<Vec<f64>> = const { std::cell::RefCell::new(Vec::new()) };
}

/// The values of `v` at or below `cut.low` and those at or above `cut.high`, in order.
fn tails_beyond(v: &[f64], cut: Hint) -> (Vec<f64>, Vec<f64>) {
    SCRATCH.with_borrow_mut(|w| {
        let n = v.len() + 8;
        if w.len() < 2 * n {
            w.resize(2 * n, 0.0);
        }
        let (lo, hi) = w.split_at_mut(n);
        let (a, b) = tails_into(v, cut, lo, hi);
        (lo[..a].to_vec(), hi[..b].to_vec())
    })
}

/// [`tails_beyond`] written into `lo` and `hi` (each at least 8 longer than `v`): the counts.
fn tails_into(v: &[f64], cut: Hint, lo: &mut [f64], hi: &mut [f64]) -> (usize, usize) {
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx512f") {
        // SAFETY: the processor has AVX-512F, checked just above.
        return unsafe { tails_avx512(v, cut, lo, hi) };
    }
    tails_from(v, cut, lo, hi, 0, 0)
}

/// The tails of `v` appended at `lo[a..]` and `hi[b..]`: every value is written and the
/// write position moves on only for a value kept (no branch on the values).
fn tails_from(
    v: &[f64],
    cut: Hint,
    lo: &mut [f64],
    hi: &mut [f64],
    mut a: usize,
    mut b: usize,
) -> (usize, usize) {
    for &x in v {
        lo[a] = x;
        hi[b] = x;
        a += (x <= cut.low) as usize;
        b += (x >= cut.high) as usize;
    }
    (a, b)
}

/// [`tails_from`] eight values at a time: one comparison gives the mask of the values beyond
/// each cut, and a compress packs them to the front of a register, stored whole at the
/// write position (the bytes past the count are overwritten by the next store).
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f")]
fn tails_avx512(v: &[f64], cut: Hint, lo: &mut [f64], hi: &mut [f64]) -> (usize, usize) {
    use std::arch::x86_64::*;
    let (cl, ch) = (_mm512_set1_pd(cut.low), _mm512_set1_pd(cut.high));
    let (mut a, mut b) = (0usize, 0usize);
    let mut blocks = v.chunks_exact(8);
    for q in &mut blocks {
        // SAFETY: q holds exactly 8 values; a ≤ (values so far) and lo, hi are 8 longer
        // than v, so each 8-value store stays inside them.
        unsafe {
            let x = _mm512_loadu_pd(q.as_ptr());
            let ml = _mm512_cmp_pd_mask::<_CMP_LE_OQ>(x, cl);
            let mh = _mm512_cmp_pd_mask::<_CMP_GE_OQ>(x, ch);
            assert!(a + 8 <= lo.len() && b + 8 <= hi.len());
            _mm512_storeu_pd(lo.as_mut_ptr().add(a), _mm512_maskz_compress_pd(ml, x));
            _mm512_storeu_pd(hi.as_mut_ptr().add(b), _mm512_maskz_compress_pd(mh, x));
            a += ml.count_ones() as usize;
            b += mh.count_ones() as usize;
        }
    }
    tails_from(blocks.remainder(), cut, lo, hi, a, b)
}

/// Every how many values [`own_cut`] looks at.
const CUT_STRIDE: usize = 8;

/// A batch's own cut when no earlier batch gives a hint: about its outer 10 % each side (four
/// times the interval ranks from either end for p = 0.95), estimated from every
/// [`CUT_STRIDE`]-th value (the trials are independent, so these are a random sample of the
/// batch), so that its tails keep a fraction of the batch rather than all of it. The cut only
/// saves work: should it miss an end, the end is selected among all values. None for fewer
/// than 2 values.
fn own_cut(v: &[f64], p: f64) -> Option<Hint> {
    let m = v.len();
    if m < 2 {
        return None;
    }
    let (lo_i, hi_i) = interval_ranks(m, p);
    let (k, j) = (
        (4 * (lo_i + 1)).min(m - 1),
        (m - 1).saturating_sub(4 * (m - hi_i)),
    );
    let stride = if m >= 100 * CUT_STRIDE { CUT_STRIDE } else { 1 };
    let mut w: Vec<f64> = v.iter().step_by(stride).copied().collect();
    let n = w.len();
    let at = |r: usize| (r * n / m).min(n - 1);
    let low = nth(&mut w, at(k));
    let high = nth(&mut w, at(j));
    Some(Hint { low, high })
}

/// A cut that keeps every value (the run that keeps all, when the tails missed).
const KEEP_ALL: Hint = Hint {
    low: f64::INFINITY,
    high: f64::NEG_INFINITY,
};

/// The `k`-th smallest value (0-based) of `v`, which must be longer than `k`.
fn nth(v: &mut [f64], k: usize) -> f64 {
    *v.select_nth_unstable_by(k, f64::total_cmp).1
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

/// The §7.6 and §7.7.2 summary of all batches together: the mean and variance pooled from
/// the batches' own (`own`; the pairwise form of Chan, Golub and LeVeque, 1979), the interval
/// ends selected among the batches' tails. Every value at or below the lowest of the batches'
/// low cuts is in the tails, so the low end is exact when more values than its rank lie
/// there (the same for the high end); `None` when they do not.
fn pool(own: &[BatchStat], tails: &[&Tails], p: f64) -> Option<McInterval> {
    let m: usize = own.iter().map(|s| s.n).sum();
    if m < 2 {
        let x = own.iter().find(|s| s.n > 0).map_or(0.0, |s| s.mean);
        return Some(McInterval {
            trials: m,
            mean: x,
            low: x,
            high: x,
            ..McInterval::default()
        });
    }
    let mean = own.iter().map(|s| s.n as f64 * s.mean).sum::<f64>() / m as f64;
    let m2: f64 = own
        .iter()
        .map(|s| s.m2 + s.n as f64 * (s.mean - mean).powi(2))
        .sum();
    let (lo_i, hi_i) = interval_ranks(m, p);
    let t_low = tails
        .iter()
        .map(|t| t.cut.low)
        .fold(f64::INFINITY, f64::min);
    let t_high = tails
        .iter()
        .map(|t| t.cut.high)
        .fold(f64::NEG_INFINITY, f64::max);
    let mut low: Vec<f64> = tails
        .iter()
        .flat_map(|t| t.low.iter().copied().filter(|&x| x <= t_low))
        .collect();
    let mut high: Vec<f64> = tails
        .iter()
        .flat_map(|t| t.high.iter().copied().filter(|&x| x >= t_high))
        .collect();
    let first_high = m - high.len();
    if lo_i >= low.len() || hi_i < first_high {
        return None;
    }
    Some(McInterval {
        trials: m,
        dropped: 0,
        mean,
        u: (m2 / (m as f64 - 1.0)).sqrt(),
        low: nth(&mut low, lo_i),
        high: nth(&mut high, hi_i - first_high),
        gum_validated: false,
    })
}

/// §7.9.4 f)–i): every output's 2·s of the batch averages of y, u, y_low, y_high ≤ δ/divisor.
fn stabilised(stats: &[Vec<BatchStat>], opts: &McOptions) -> bool {
    let h = stats.len() as f64;
    let nout = stats.first().map_or(0, |s| s.len());
    for o in 0..nout {
        let four: Vec<[f64; 4]> = stats.iter().map(|s| s[o].four()).collect();
        // u(y) from all values is close to the mean of the batch u's; §7.9.4 h) uses all values.
        let u_all = four.iter().map(|s| s[1]).sum::<f64>() / h;
        let delta = numerical_tolerance(u_all, opts.ndig) / opts.divisor;
        for q in 0..4 {
            let mean = four.iter().map(|s| s[q]).sum::<f64>() / h;
            let var = four.iter().map(|s| (s[q] - mean).powi(2)).sum::<f64>() / (h * (h - 1.0));
            if !(2.0 * var.sqrt() <= delta) {
                return false;
            }
        }
    }
    true
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

/// The generators of batch `h`: xoshiro256++ (Blackman and Vigna 2018), seeded from stream
/// `h` of a ChaCha8 generator keyed by `seed`, so that batches draw from unrelated sequences.
fn batch_rng(seed: u64, h: usize) -> Gens {
    let mut seeder = ChaCha8Rng::seed_from_u64(seed);
    seeder.set_stream(h as u64);
    let lanes = std::array::from_fn(|_| Xoshiro256PlusPlus::from_rng(&mut seeder));
    let uniform = Uniform4::from_rng(&mut seeder);
    Gens { lanes, uniform }
}

/// Generators of one batch, each drawing a quarter of every column: four short independent
/// streams instead of one long one, which the processor overlaps.
const LANES: usize = 4;
type Lanes = [Xoshiro256PlusPlus; LANES];

/// A batch's generators: `lanes` for the normal and t draws, `uniform` for the rectangular.
struct Gens {
    lanes: Lanes,
    uniform: Uniform4,
}

/// Four xoshiro256++ generators stepped together, each state word held across the four
/// lanes (`s[word][lane]`), so that one vector register steps all four: about 0.55 ns a draw
/// with AVX2 against 1.3 ns for one generator at a time. Lane k's numbers are those of a
/// `Xoshiro256PlusPlus` with the same state (tested); the arithmetic is integer and exact IEEE,
/// so the values do not depend on whether AVX2 is used.
#[derive(Clone)]
struct Uniform4 {
    s: [[u64; 4]; 4],
}

impl Uniform4 {
    /// Each lane's state from 32 bytes of `seeder`, as `Xoshiro256PlusPlus::from_seed` reads
    /// them (little-endian words); an all-zero state, which the generator cannot leave, is
    /// replaced by a fixed one.
    fn from_rng(seeder: &mut ChaCha8Rng) -> Uniform4 {
        let mut s = [[0u64; 4]; 4];
        for lane in 0..4 {
            let mut bytes = [0u8; 32];
            seeder.fill_bytes(&mut bytes);
            for (w, b) in bytes.chunks_exact(8).enumerate() {
                s[w][lane] = u64::from_le_bytes(b.try_into().expect("8 bytes"));
            }
            if (0..4).all(|w| s[w][lane] == 0) {
                s[0][lane] = 0x9e37_79b9_7f4a_7c15;
            }
        }
        Uniform4 { s }
    }

    /// One step of every lane: the four next outputs.
    #[inline(always)]
    fn next(&mut self) -> [u64; 4] {
        let [s0, s1, s2, s3] = &mut self.s;
        let mut out = [0u64; 4];
        for k in 0..4 {
            out[k] = s0[k]
                .wrapping_add(s3[k])
                .rotate_left(23)
                .wrapping_add(s0[k]);
            let t = s1[k] << 17;
            s2[k] ^= s0[k];
            s3[k] ^= s1[k];
            s1[k] ^= s2[k];
            s0[k] ^= s3[k];
            s2[k] ^= t;
            s3[k] = s3[k].rotate_left(45);
        }
        out
    }

    /// Fills `col` with R(x0 − a, x0 + a) values, trial t from lane t mod 4.
    fn fill_rect(&mut self, col: &mut [f64], x0: f64, a: f64) {
        #[cfg(target_arch = "x86_64")]
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: the processor has AVX2, checked just above.
            return unsafe { self.fill_rect_avx2(col, x0, a) };
        }
        self.fill_rect_any(col, x0, a)
    }

    /// [`Self::fill_rect_any`] in AVX2 registers, written out (the compiler does not
    /// vectorise the generator step on its own): the same operations in the same order.
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2")]
    fn fill_rect_avx2(&mut self, col: &mut [f64], x0: f64, a: f64) {
        use std::arch::x86_64::*;
        let load = |w: &[u64; 4]| {
            // SAFETY: an unaligned load of 32 bytes from a [u64; 4].
            unsafe { _mm256_loadu_si256(w.as_ptr().cast()) }
        };
        let [mut s0, mut s1, mut s2, mut s3] = [0, 1, 2, 3].map(|w| load(&self.s[w]));
        let rotl = |x: __m256i, r: i32| match r {
            23 => _mm256_or_si256(_mm256_slli_epi64(x, 23), _mm256_srli_epi64(x, 41)),
            _ => _mm256_or_si256(_mm256_slli_epi64(x, 45), _mm256_srli_epi64(x, 19)),
        };
        let one = _mm256_set1_epi64x(0x3ff0_0000_0000_0000);
        let (vx0, va) = (_mm256_set1_pd(x0), _mm256_set1_pd(a));
        let (two, three) = (_mm256_set1_pd(2.0), _mm256_set1_pd(3.0));
        let mut next = || {
            let out = _mm256_add_epi64(rotl(_mm256_add_epi64(s0, s3), 23), s0);
            let t = _mm256_slli_epi64(s1, 17);
            s2 = _mm256_xor_si256(s2, s0);
            s3 = _mm256_xor_si256(s3, s1);
            s1 = _mm256_xor_si256(s1, s2);
            s0 = _mm256_xor_si256(s0, s3);
            s2 = _mm256_xor_si256(s2, t);
            s3 = rotl(s3, 45);
            let w = _mm256_castsi256_pd(_mm256_or_si256(_mm256_srli_epi64(out, 12), one));
            _mm256_add_pd(
                vx0,
                _mm256_mul_pd(va, _mm256_sub_pd(_mm256_mul_pd(two, w), three)),
            )
        };
        let mut quads = col.chunks_exact_mut(4);
        for q in &mut quads {
            // SAFETY: an unaligned store of four f64 into a chunk of exactly four.
            unsafe { _mm256_storeu_pd(q.as_mut_ptr(), next()) };
        }
        let rest = quads.into_remainder();
        if !rest.is_empty() {
            let mut v = [0.0; 4];
            // SAFETY: as above, into a [f64; 4].
            unsafe { _mm256_storeu_pd(v.as_mut_ptr(), next()) };
            rest.copy_from_slice(&v[..rest.len()]);
        }
        let store = |w: &mut [u64; 4], x: __m256i| {
            // SAFETY: an unaligned store of 32 bytes into a [u64; 4].
            unsafe { _mm256_storeu_si256(w.as_mut_ptr().cast(), x) }
        };
        for (w, x) in self.s.iter_mut().zip([s0, s1, s2, s3]) {
            store(w, x);
        }
    }

    /// The top 52 bits of each output as a mantissa: w in [1, 2), and 2w − 3 in [−1, 1)
    /// exactly (Sterbenz), so the value is x0 + a·(2w − 3).
    #[inline(always)]
    fn fill_rect_any(&mut self, col: &mut [f64], x0: f64, a: f64) {
        let mut g = self.clone();
        let rect = |x: u64| {
            let w = f64::from_bits(0x3ff0_0000_0000_0000 | (x >> 12));
            x0 + a * (2.0 * w - 3.0)
        };
        let mut quads = col.chunks_exact_mut(4);
        for q in &mut quads {
            let o = g.next();
            for k in 0..4 {
                q[k] = rect(o[k]);
            }
        }
        let rest = quads.into_remainder();
        if !rest.is_empty() {
            let o = g.next();
            for (v, &x) in rest.iter_mut().zip(&o) {
                *v = rect(x);
            }
        }
        *self = g;
    }
}

/// Fills `col` with `draw`: its first quarter from lane 0, the next from lane 1, and so on.
/// Each lane runs on a copy of its state, which the compiler keeps in registers.
#[inline(always)]
fn draw_lanes(col: &mut [f64], rngs: &mut Lanes, draw: impl Fn(&mut Xoshiro256PlusPlus) -> f64) {
    let part = col.len().div_ceil(LANES).max(1);
    for (c, r) in col.chunks_mut(part).zip(rngs.iter_mut()) {
        let mut local = r.clone();
        for v in c {
            *v = draw(&mut local);
        }
        *r = local;
    }
}

/// Runs `f` compiled for AVX2 when the processor has it, so that loops over columns run four
/// values at a time: the same IEEE operations in the same order, so the same bits (no fused
/// multiply-add is enabled). `f` must be inlined into it to profit, as a closure called once is.
#[inline(always)]
pub fn wide<R>(f: impl FnOnce() -> R) -> R {
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx2") {
        #[target_feature(enable = "avx2")]
        fn avx2<R>(f: impl FnOnce() -> R) -> R {
            f()
        }
        // SAFETY: the processor has AVX2, checked just above.
        return unsafe { avx2(f) };
    }
    f()
}

/// Trials drawn together, input by input, before the model runs on them (a size that keeps
/// the columns in cache).
pub const CHUNK: usize = 1024;

thread_local! {
    /// The values of the batch a thread is drawing, per output.
    static VALUES: std::cell::RefCell<Vec<Vec<f64>>> = const { std::cell::RefCell::new(Vec::new()) };
}

/// One batch of `m` trials from stream `h` into `out`: values per output, non-finite trials
/// dropped.
fn run_batch(s: &Sampler, f: InPlace, seed: u64, h: usize, m: usize, out: &mut Vec<Vec<f64>>) {
    let mut gens = batch_rng(seed, h);
    out.resize_with(f.outputs, Vec::new);
    for o in out.iter_mut() {
        o.clear();
        o.reserve(m);
    }
    let mut x = s.start();
    let n = s.law.len();
    // Drawn inputs only: one held at its estimate stays as `x` has it.
    let dest: Vec<(usize, usize)> = (0..n)
        .filter(|&i| !matches!(s.law[i], Law::Fixed))
        .map(|i| (i, s.at(i)))
        .collect();
    let mut cols = vec![0.0; n * CHUNK];
    let mut z = vec![0.0; s.group.len() * CHUNK];
    let chunked = matches!(f.eval, Eval::Chunk(_));
    let mut y = vec![0.0; f.outputs * if chunked { CHUNK } else { 1 }];
    let mut drawn = vec![None; x.len()];
    let mut scratch = Vec::new();
    for &(i, d) in &dest {
        drawn[d] = Some(i);
    }
    let mut done = 0;
    while done < m {
        let c = CHUNK.min(m - done);
        s.fill(&mut gens, &mut cols, &mut z, c);
        match f.eval {
            Eval::Chunk(model) => {
                let view = Columns {
                    cols: &cols,
                    drawn: &drawn,
                    x: &x,
                    len: c,
                };
                model(&view, &mut y, &mut scratch);
                keep_finite(&y, c, out);
            }
            Eval::Trial(model) => {
                for t in 0..c {
                    for &(i, d) in &dest {
                        x[d] = cols[i * CHUNK + t];
                    }
                    model(&x, &mut y);
                    if y.iter().all(|v| v.is_finite()) {
                        for (o, &v) in out.iter_mut().zip(&y) {
                            o.push(v);
                        }
                    }
                }
            }
        }
        done += c;
    }
}

/// Appends the first `c` trials of the chunk `y` (output `o` at `y[o·CHUNK..]`) to `out`,
/// dropping a trial with any non-finite output.
fn keep_finite(y: &[f64], c: usize, out: &mut [Vec<f64>]) {
    wide(|| keep_finite_here(y, c, out))
}

#[inline(always)]
fn keep_finite_here(y: &[f64], c: usize, out: &mut [Vec<f64>]) {
    let outputs = out.len();
    let finite = |t: usize| (0..outputs).all(|o| y[o * CHUNK + t].is_finite());
    let all_finite = y
        .chunks(CHUNK)
        .all(|o| o[..c].iter().fold(true, |ok, v| ok & v.is_finite()));
    if all_finite {
        for (o, v) in out.iter_mut().enumerate() {
            v.extend_from_slice(&y[o * CHUNK..o * CHUNK + c]);
        }
        return;
    }
    for t in (0..c).filter(|&t| finite(t)) {
        for (o, v) in out.iter_mut().enumerate() {
            v.push(y[o * CHUNK + t]);
        }
    }
}

enum Law {
    /// u = 0: held at its estimate, not drawn.
    Fixed,
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
        // An input with u = 0 is held at its estimate: drawing it would change nothing.
        let fixed = |i: usize| !(inputs[i].u.is_finite() && inputs[i].u != 0.0);
        let ok = |i: usize| i < n && !fixed(i);
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
                if fixed(i) {
                    return Law::Fixed;
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

    /// Draws `c` trials into `cols` (input `i` at `cols[i·CHUNK..]`), input by input; `z`
    /// holds the standard normals of the jointly drawn inputs, trial by trial.
    fn fill(&self, gens: &mut Gens, cols: &mut [f64], z: &mut [f64], c: usize) {
        let rngs = &mut gens.lanes;
        for (i, law) in self.law.iter().enumerate() {
            let (x0, u) = (self.x[i], self.u[i]);
            let col = &mut cols[i * CHUNK..i * CHUNK + c];
            match law {
                Law::Normal => {
                    draw_lanes(col, rngs, |r| x0 + u * r.sample::<f64, _>(StandardNormal));
                }
                Law::Rect => {
                    gens.uniform.fill_rect(col, x0, u * 3f64.sqrt());
                }
                Law::T(t) => {
                    draw_lanes(col, rngs, |r| x0 + u * t.sample(r));
                }
                Law::Joint | Law::Fixed => {}
            }
        }
        let g = self.group.len();
        if g == 0 {
            return;
        }
        draw_lanes(&mut z[..g * c], rngs, |r| r.sample(StandardNormal));
        for t in 0..c {
            let zt = &z[t * g..t * g + g];
            for (a, &k) in self.group.iter().enumerate() {
                let row = &self.factor[a * g..a * g + g];
                let s: f64 = row.iter().zip(zt).map(|(p, q)| p * q).sum();
                cols[k * CHUNK + t] = self.x[k] + self.u[k] * s;
            }
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

    #[test]
    fn four_lanes_are_four_xoshiro256_plus_plus_generators() {
        // Reference: rand_xoshiro's Xoshiro256PlusPlus, seeded from the same 32 bytes.
        let mut seeder = ChaCha8Rng::seed_from_u64(2026);
        let mut copy = seeder.clone();
        let mut g = Uniform4::from_rng(&mut seeder);
        let mut refs: Vec<Xoshiro256PlusPlus> = (0..4)
            .map(|_| {
                let mut bytes = [0u8; 32];
                copy.fill_bytes(&mut bytes);
                Xoshiro256PlusPlus::from_seed(bytes)
            })
            .collect();
        for _ in 0..1000 {
            let o = g.next();
            for (k, r) in refs.iter_mut().enumerate() {
                assert_eq!(o[k], r.next_u64());
            }
        }
    }

    #[test]
    fn rectangular_draws_are_the_same_with_or_without_avx2() {
        let mut seeder = ChaCha8Rng::seed_from_u64(7);
        let g = Uniform4::from_rng(&mut seeder);
        // 1 023 values: whole groups of four and a remainder of three.
        let (mut a, mut b) = (vec![0.0; 1023], vec![0.0; 1023]);
        let (mut ga, mut gb) = (g.clone(), g);
        ga.fill_rect(&mut a, 5.0, 0.25);
        gb.fill_rect_any(&mut b, 5.0, 0.25);
        assert_eq!(a, b);
        assert_eq!(ga.next(), gb.next());
        // R(4.75, 5.25): every value inside, the half-width reached within a few 0.1 %.
        assert!(a.iter().all(|&x| (4.75..5.25).contains(&x)));
        let (lo, hi) = a
            .iter()
            .fold((9.0f64, 0.0f64), |(l, h), &x| (l.min(x), h.max(x)));
        assert!(lo < 4.753 && hi > 5.247, "{lo} {hi}");
    }

    #[test]
    fn tails_are_the_same_on_every_path() {
        let mut seeder = ChaCha8Rng::seed_from_u64(11);
        let mut g = Uniform4::from_rng(&mut seeder);
        for n in [0usize, 1, 7, 8, 9, 1000, 10_003] {
            let mut v = vec![0.0; n];
            g.fill_rect(&mut v, 0.0, 1.0);
            for cut in [
                Hint {
                    low: -0.9,
                    high: 0.9,
                },
                KEEP_ALL,
                Hint {
                    low: -2.0,
                    high: 2.0,
                },
            ] {
                let (lo, hi) = tails_beyond(&v, cut);
                let want_lo: Vec<f64> = v.iter().copied().filter(|&x| x <= cut.low).collect();
                let want_hi: Vec<f64> = v.iter().copied().filter(|&x| x >= cut.high).collect();
                assert_eq!((&lo, &hi), (&want_lo, &want_hi), "n = {n}");
                // The portable path, which runs where AVX-512 is missing.
                let (mut l, mut h) = (vec![0.0; n + 8], vec![0.0; n + 8]);
                let (a, b) = tails_from(&v, cut, &mut l, &mut h, 0, 0);
                assert_eq!((&l[..a], &h[..b]), (&want_lo[..], &want_hi[..]));
            }
        }
    }

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

    /// The batched summary gives exactly the §7.7.2 interval ends of all values taken
    /// together (and the mean and u to rounding), with good hints, with none (each batch's
    /// own cut) and with hints that miss (fallback); a batch's ends do not depend on its hint.
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
        let mut all: Vec<f64> = batches.concat();
        let want = summarise(&mut all, 0.95);
        let close = |a: f64, b: f64| (a - b).abs() <= 1e-12 * b.abs().max(1e-300);
        let hints = [
            None,
            Some(Hint {
                low: -1.5,
                high: 1.5,
            }),
            Some(Hint {
                low: -3.0,
                high: 3.0,
            }),
            Some(Hint {
                low: 10.0,
                high: -10.0,
            }),
        ];
        for b in &batches {
            let mut w = b.clone();
            let one = summarise(&mut w, 0.95);
            for h in hints {
                let (s, _) = batch_stat(b, 0.95, h);
                assert_eq!(
                    (s.n, s.low, s.high),
                    (one.trials, one.low, one.high),
                    "{h:?}"
                );
                assert!(
                    close(s.mean, one.mean) && close(s.four()[1], one.u),
                    "{h:?}"
                );
            }
        }
        // Pooled: exact ends from the tails when the cuts hold them (every batch hinted, or
        // some not), none when a cut leaves the pooled end out.
        let run = |hint: &dyn Fn(usize) -> Option<Hint>| -> Option<McInterval> {
            let (own, tails): (Vec<BatchStat>, Vec<Tails>) = batches
                .iter()
                .enumerate()
                .map(|(i, b)| batch_stat(b, 0.95, hint(i)))
                .unzip();
            let refs: Vec<&Tails> = tails.iter().collect();
            pool(&own, &refs, 0.95)
        };
        let good = |_| hints[1];
        let mixed = |i: usize| if i < 3 { None } else { hints[1] };
        for got in [run(&good), run(&mixed), run(&|_| None)] {
            let got = got.expect("the tails hold the pooled ends");
            assert_eq!(
                (got.trials, got.low, got.high),
                (want.trials, want.low, want.high)
            );
            assert!(
                close(got.mean, want.mean) && close(got.u, want.u),
                "{got:?}"
            );
        }
        let tight = |_| {
            Some(Hint {
                low: -2.5,
                high: 2.5,
            })
        };
        assert!(want.low > -2.5 && run(&tight).is_none());
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
    fn columns_give_what_the_per_trial_model_gives() {
        // y = x0 · x1 + x2, with x3 (u = 0) held at its value: the chunked model and the
        // per-trial one give the same intervals to the last bit, and x3 is not drawn.
        let xs = vec![
            inp("A", 2.0, 0.1, Dist::Rectangular, None),
            inp("B", 3.0, 0.2, Dist::Normal, None),
            inp("C", 0.5, 0.05, Dist::StudentT, Some(4.0)),
            inp("D", 7.0, 0.0, Dist::Rectangular, None),
        ];
        let eval = |x: &[f64], y: &mut [f64]| {
            y[0] = x[0] * x[1] + x[2];
            y[1] = x[3];
        };
        let cols = |c: &Columns, y: &mut [f64], _: &mut Vec<f64>| {
            let col = |i: usize, t: usize| match c.col(i) {
                Col::Drawn(v) => v[t],
                Col::Fixed(v) => v,
            };
            for t in 0..c.len {
                y[t] = col(0, t) * col(1, t) + col(2, t);
                y[CHUNK + t] = col(3, t);
            }
            assert!(matches!(c.col(3), Col::Fixed(v) if v == 7.0));
        };
        let run = |eval: Eval| {
            let f = InPlace { outputs: 2, eval };
            monte_carlo_on(&xs, &[], &[0, 1, 2, 3], f, 0.95, 5, Some(25_000))
        };
        let (a, b) = (run(Eval::Trial(&eval)), run(Eval::Chunk(&cols)));
        assert_eq!(a, b);
        assert_eq!(a[0].trials, 25_000);
        assert_eq!((a[1].low, a[1].high, a[1].u), (7.0, 7.0, 0.0));
    }

    #[test]
    fn own_cuts_keep_a_tenth_and_the_ends() {
        // Without a hint a batch keeps its outer tenths, not all of it, and its ends are the
        // ends of the whole batch (§7.7.2 ranks).
        let v: Vec<f64> = (0..10_000).map(|i| ((i * 7919) % 10_000) as f64).collect();
        let (s, t) = batch_stat(&v, 0.95, None);
        let one = summarise(&mut v.clone(), 0.95);
        assert_eq!((s.low, s.high), (one.low, one.high));
        // Ranks 249 and 9 749 (0-based); cuts near ranks 4·250 = 1 000 and 9 999 − 4·251,
        // estimated from every eighth value (here the multiples of 8, so 1 000 and 8 992).
        assert_eq!((s.low, s.high), (249.0, 9_749.0));
        assert_eq!((t.low.len(), t.high.len()), (1_001, 1_008));
        // A batch of fewer than 800 values is cut on all of them.
        let v: Vec<f64> = (0..500).map(|i| ((i * 7) % 500) as f64).collect();
        let (s, t) = batch_stat(&v, 0.95, None);
        assert_eq!((s.low, s.high), (12.0, 487.0));
        assert_eq!((t.low.len(), t.high.len()), (53, 53));
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
