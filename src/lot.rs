//! Lots: many units of one part in one block (FORMAT.md 1.1, "Lots"). The block's rows are
//! split by serial, each unit is reduced by its network's own `reduce`, and the lot figures
//! are computed over the units' block values. Pure maths, no I/O.

use crate::diag::{Diagnostic, Span};
use crate::networks::{fence, reduce_block, BlockResult, Context, Flag, PlotData};
use crate::notebook::ReadingsBlock;
use statrs::distribution::{ContinuousCDF, Normal};

/// One unit of a lot: its serial and its results, as its network reduces them.
#[derive(Debug, Clone, PartialEq)]
pub struct UnitResult {
    pub serial: String,
    /// The serial cell of the unit's first row.
    pub span: Span,
    pub result: BlockResult,
}

/// The units of one lot block, in the order their serials first appear.
#[derive(Debug, Clone, PartialEq)]
pub struct LotReduction {
    /// The block's id.
    pub block: String,
    /// The part whose units vary (`unit_of`).
    pub part: String,
    pub units: Vec<UnitResult>,
}

/// The block's rows split by serial, in order of first appearance: (serial, its first cell,
/// the unit's block with only its rows).
pub fn split(b: &ReadingsBlock) -> Vec<(String, Span, ReadingsBlock)> {
    let Some(lot) = &b.lot else {
        return Vec::new();
    };
    let mut order: Vec<(String, Span, Vec<usize>)> = Vec::new();
    let mut index = std::collections::HashMap::new();
    for (i, s) in lot.serials.iter().enumerate().take(b.rows.len()) {
        let k = *index.entry(s.name.clone()).or_insert_with(|| {
            order.push((s.name.clone(), s.span, Vec::new()));
            order.len() - 1
        });
        order[k].2.push(i);
    }
    order
        .into_iter()
        .map(|(serial, span, rows)| {
            let unit = ReadingsBlock {
                rows: rows.iter().map(|&i| b.rows[i].clone()).collect(),
                lot: None,
                // The digest reads the block's body; a unit's reduction never does.
                body: String::new(),
                ..b.clone_header()
            };
            (serial, span, unit)
        })
        .collect()
}

impl ReadingsBlock {
    /// The block without its rows, body and lot (cheap to copy per unit).
    fn clone_header(&self) -> ReadingsBlock {
        ReadingsBlock {
            id: self.id.clone(),
            id_span: self.id_span,
            network: self.network,
            network_span: self.network_span,
            parts: self.parts.clone(),
            meter: self.meter.clone(),
            phase: self.phase.clone(),
            counter: self.counter.clone(),
            note: self.note.clone(),
            source: self.source,
            columns: self.columns.clone(),
            model: self.model.clone(),
            readout: self.readout.clone(),
            rows: Vec::new(),
            span: self.span,
            body: String::new(),
            lot: None,
        }
    }
}

/// Reduces every unit of a lot block. The block's own result holds no results of its own,
/// only every unit's flags (each said with its serial), so warnings reach the record and the
/// signer as any block's do; the units' results are in the [`LotReduction`].
pub fn reduce(
    ctx: &Context,
    b: &ReadingsBlock,
) -> Result<(BlockResult, LotReduction), Vec<Diagnostic>> {
    let mut units = Vec::new();
    let mut diags = Vec::new();
    for (serial, span, unit) in split(b) {
        match reduce_block(ctx, &unit) {
            Ok(mut r) => {
                fence(&mut r);
                units.push(UnitResult {
                    serial,
                    span,
                    result: r,
                });
            }
            Err(d) => diags.extend(d),
        }
    }
    if !diags.is_empty() {
        return Err(diags);
    }
    let flags = merged_flags(&units);
    let part = b
        .lot
        .as_ref()
        .map(|l| l.part.name.clone())
        .unwrap_or_default();
    let block = BlockResult {
        id: b.id.clone(),
        network: b.network,
        rows: Vec::new(),
        results: Vec::new(),
        correlations: Vec::new(),
        flags,
        plot: PlotData::default(),
    };
    Ok((
        block,
        LotReduction {
            block: b.id.clone(),
            part,
            units,
        },
    ))
}

/// Every unit's flags, each said once with the serials it applies to ("every unit" when it
/// applies to all), at the first unit's span.
fn merged_flags(units: &[UnitResult]) -> Vec<Flag> {
    let mut order: Vec<(bool, String, Option<Span>, Vec<&str>)> = Vec::new();
    let mut index = std::collections::HashMap::new();
    for u in units {
        for f in &u.result.flags {
            let k = *index.entry((f.warn, f.message.clone())).or_insert_with(|| {
                order.push((f.warn, f.message.clone(), f.span, Vec::new()));
                order.len() - 1
            });
            if order[k].3.last() != Some(&u.serial.as_str()) {
                order[k].3.push(&u.serial);
            }
        }
    }
    order
        .into_iter()
        .map(|(warn, message, span, serials)| {
            let who = if serials.len() == units.len() && units.len() > 1 {
                "every unit".to_string()
            } else if serials.len() == 1 {
                format!("unit {}", serials[0])
            } else {
                format!("units {}", serials.join(", "))
            };
            Flag {
                warn,
                span,
                message: format!("{who}: {message}"),
            }
        })
        .collect()
}

/// The lot figures over the units' values x_i of the judged quantity, against the tolerance
/// interval [LSL, USL].
#[derive(Debug, Clone, PartialEq)]
pub struct LotStats {
    pub n: usize,
    pub mean: f64,
    /// Sample standard deviation (n − 1 in the denominator); None for one unit.
    pub s: Option<f64>,
    pub min: f64,
    pub max: f64,
    /// (USL − LSL) / (6 s); None when s is zero or unknown.
    pub cp: Option<f64>,
    /// min(USL − mean, mean − LSL) / (3 s).
    pub cpk: Option<f64>,
    /// Approximate interval for Cpk at `confidence` (see [`cpk_interval`]).
    pub cpk_interval: Option<(f64, f64)>,
    pub confidence: f64,
    /// Anderson–Darling test of the units' values against a normal distribution.
    pub normality: Option<Normality>,
}

/// The Anderson–Darling test of normality with mean and variance estimated from the data.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Normality {
    /// A² (as scipy.stats.anderson reports it).
    pub a2: f64,
    /// A*² = A² (1 + 0.75/n + 2.25/n²), the small-sample form the p-value is read from.
    pub a2_star: f64,
    /// p-value (D'Agostino and Stephens 1986, Table 4.9, case 3).
    pub p: f64,
}

/// Mean, s, min, max, Cp, Cpk, the Cpk interval and the normality test of `x` against
/// [low, high]. None for an empty lot or a non-finite value.
pub fn stats(x: &[f64], low: f64, high: f64, confidence: f64) -> Option<LotStats> {
    let n = x.len();
    if n == 0 || x.iter().any(|v| !v.is_finite()) {
        return None;
    }
    let nf = n as f64;
    let mean = x.iter().sum::<f64>() / nf;
    let s = (n > 1).then(|| {
        let ss: f64 = x.iter().map(|v| (v - mean).powi(2)).sum();
        (ss / (nf - 1.0)).sqrt()
    });
    let min = x.iter().copied().fold(f64::INFINITY, f64::min);
    let max = x.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let spread = s.filter(|s| *s > 0.0);
    let cp = spread.map(|s| (high - low) / (6.0 * s));
    let cpk = spread.map(|s| (high - mean).min(mean - low) / (3.0 * s));
    let cpk_interval = cpk.and_then(|c| cpk_interval(c, n, confidence));
    Some(LotStats {
        n,
        mean,
        s,
        min,
        max,
        cp,
        cpk,
        cpk_interval,
        confidence,
        normality: anderson_darling(x),
    })
}

/// Two-sided interval for Cpk at `confidence` by the normal approximation of Bissell,
/// "How reliable is your capability index?", Applied Statistics 39 (1990) 331–340 (from
/// memory): Ĉpk ± z √(1/(9n) + Ĉpk²/(2(n − 1))). It assumes normal unit values; for small
/// lots it is rough.
pub fn cpk_interval(cpk: f64, n: usize, confidence: f64) -> Option<(f64, f64)> {
    if n < 2 || !(confidence > 0.0 && confidence < 1.0) {
        return None;
    }
    let nf = n as f64;
    let z = Normal::standard().inverse_cdf(0.5 + confidence / 2.0);
    let half = z * (1.0 / (9.0 * nf) + cpk * cpk / (2.0 * (nf - 1.0))).sqrt();
    half.is_finite().then_some((cpk - half, cpk + half))
}

/// Anderson–Darling A² of `x` against the normal distribution with the sample mean and the
/// sample standard deviation (n − 1), as scipy.stats.anderson(x, "norm") computes it, with
/// the p-value of D'Agostino and Stephens, "Goodness-of-Fit Techniques" (1986), Table 4.9
/// (from memory). None below three values or for values that are all equal.
pub fn anderson_darling(x: &[f64]) -> Option<Normality> {
    let n = x.len();
    if n < 3 {
        return None;
    }
    let nf = n as f64;
    let mean = x.iter().sum::<f64>() / nf;
    let s = (x.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (nf - 1.0)).sqrt();
    if !(s > 0.0) {
        return None;
    }
    let mut z: Vec<f64> = x.iter().map(|v| (v - mean) / s).collect();
    z.sort_by(f64::total_cmp);
    let nd = Normal::standard();
    let mut sum = 0.0;
    for i in 0..n {
        // ln Φ(z_i) + ln(1 − Φ(z_{n+1−i})); the upper tail through sf keeps its digits.
        let lo = nd.cdf(z[i]).ln();
        let hi = nd.sf(z[n - 1 - i]).ln();
        sum += (2.0 * i as f64 + 1.0) * (lo + hi);
    }
    let a2 = -nf - sum / nf;
    let a2_star = a2 * (1.0 + 0.75 / nf + 2.25 / (nf * nf));
    let a = a2_star;
    let p = if a >= 0.6 {
        (1.2937 - 5.709 * a + 0.0186 * a * a).exp()
    } else if a >= 0.34 {
        (0.9177 - 4.279 * a - 1.38 * a * a).exp()
    } else if a >= 0.2 {
        1.0 - (-8.318 + 42.796 * a - 59.938 * a * a).exp()
    } else {
        1.0 - (-13.436 + 101.14 * a - 223.73 * a * a).exp()
    };
    (a2.is_finite() && p.is_finite()).then_some(Normality {
        a2,
        a2_star,
        p: p.clamp(0.0, 1.0),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The invented lot of eight film capacitors (nF), J tolerance (±5 %) on 100 nF.
    const LOT: [f64; 8] = [98.2, 101.5, 99.7, 104.6, 100.8, 97.1, 106.0, 100.1];

    #[test]
    fn lot_figures_match_numpy() {
        // numpy: mean, std(ddof=1); Cp and Cpk from them (tests/reference/lot_capability.py
        // and .out).
        let s = stats(&LOT, 95.0, 105.0, 0.95).expect("stats");
        assert_eq!(s.n, 8);
        assert!((s.mean - 101.0).abs() < 1e-12, "{}", s.mean);
        let sd = s.s.expect("s");
        assert!((sd - 3.018_987_531_323_326_3).abs() < 1e-12, "{sd}");
        assert_eq!((s.min, s.max), (97.1, 106.0));
        assert!((s.cp.unwrap() - 0.552_061_460_795_801_7).abs() < 1e-12);
        assert!((s.cpk.unwrap() - 0.441_649_168_636_641_33).abs() < 1e-12);
        // The figures the brief states, to their printed digits.
        assert!((sd - 3.01899).abs() < 5e-6);
        assert!((s.cp.unwrap() - 0.55206).abs() < 5e-6);
        assert!((s.cpk.unwrap() - 0.44165).abs() < 5e-6);
    }

    #[test]
    fn anderson_darling_matches_scipy() {
        // scipy.stats.anderson(x, "norm").statistic (tests/reference/lot_capability.out).
        let t = anderson_darling(&LOT).expect("A²");
        assert!((t.a2 - AD_SCIPY).abs() < 1e-9, "{}", t.a2);
        assert!((t.p - AD_P).abs() < 1e-9, "{}", t.p);
        assert!(anderson_darling(&[1.0, 1.0, 1.0]).is_none());
        assert!(anderson_darling(&[1.0, 2.0]).is_none());
    }

    #[test]
    fn cpk_interval_by_bissell() {
        // Bissell (1990) normal approximation, computed by the reference script.
        let (lo, hi) = cpk_interval(0.441_649_168_636_641_33, 8, 0.95).expect("interval");
        assert!((lo - CPK_LO).abs() < 1e-9, "{lo}");
        assert!((hi - CPK_HI).abs() < 1e-9, "{hi}");
        assert!(cpk_interval(1.0, 1, 0.95).is_none());
    }

    #[test]
    fn one_unit_has_no_spread() {
        let s = stats(&[100.0], 95.0, 105.0, 0.95).expect("stats");
        assert_eq!((s.s, s.cp, s.cpk), (None, None, None));
        assert!(stats(&[], 95.0, 105.0, 0.95).is_none());
        assert!(stats(&[f64::NAN, 1.0], 95.0, 105.0, 0.95).is_none());
    }

    // tests/reference/lot_capability.out (numpy 2.4.6, scipy 1.17.1). The p-value is the
    // D'Agostino–Stephens formula as the script computes it; scipy's own tables
    // (method="interpolate") say only p ≥ 0.15, which it agrees with.
    const AD_SCIPY: f64 = 0.262_604_126_577_343_8;
    const AD_P: f64 = 0.592_858_197_220_471_2;
    const CPK_LO: f64 = 0.114_732_601_127_761_51;
    const CPK_HI: f64 = 0.768_565_736_145_521_2;
}
