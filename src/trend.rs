//! A check standard over time and two results compared: pure arithmetic on values already
//! reduced and judged.
//!
//! - Control chart for individual values (NIST/SEMATECH e-Handbook of Statistical Methods,
//!   §6.3.2.2, "Individuals control charts"): centre line x̄, moving ranges MR_i = |x_i − x_{i−1}|,
//!   limits x̄ ± 3·MR̄/d₂ with d₂ = 1.128 for ranges of two (so ± 2.66·MR̄), and the moving-range
//!   chart's upper limit D₄·MR̄ = 3.267·MR̄.
//! - Drift: the least-squares slope of value against time with its standard uncertainty
//!   s/√Σ(t − t̄)², s² = Σ residual² / (n − 2) (any regression text; scipy.stats.linregress's
//!   `stderr` is the same quantity).
//! - E_n = (x₁ − x₂) / √(U₁² + U₂²), |E_n| ≤ 1 satisfactory (ISO 13528:2022 §9.7, ISO/IEC
//!   17043).

use chrono::NaiveDate;

/// d₂ for moving ranges of two consecutive values (NIST/SEMATECH §6.3.2, table of constants).
pub const D2: f64 = 1.128;
/// D₄ for ranges of two: the upper limit of the moving-range chart.
pub const D4: f64 = 3.267;

/// One record's value of the check standard.
#[derive(Debug, Clone, PartialEq)]
pub struct TrendPoint {
    pub date: NaiveDate,
    pub record: String,
    pub path: String,
    pub value: f64,
    /// Expanded uncertainty U and its coverage factor.
    pub expanded: f64,
    pub k: f64,
}

/// The individuals chart of a series.
#[derive(Debug, Clone, PartialEq)]
pub struct Chart {
    pub mean: f64,
    /// The mean moving range MR̄.
    pub mr_bar: f64,
    pub lcl: f64,
    pub ucl: f64,
    /// Upper limit of the moving-range chart.
    pub mr_ucl: f64,
    /// Indices of the values outside [lcl, ucl].
    pub outside: Vec<usize>,
    /// Indices i whose moving range |x_i − x_{i−1}| is above `mr_ucl`.
    pub jumps: Vec<usize>,
}

/// The chart of `x` (in time order); None below two values.
pub fn individuals_chart(x: &[f64]) -> Option<Chart> {
    if x.len() < 2 || x.iter().any(|v| !v.is_finite()) {
        return None;
    }
    let n = x.len() as f64;
    let mean = x.iter().sum::<f64>() / n;
    let mr: Vec<f64> = x.windows(2).map(|w| (w[1] - w[0]).abs()).collect();
    let mr_bar = mr.iter().sum::<f64>() / mr.len() as f64;
    let half = 3.0 * mr_bar / D2;
    let (lcl, ucl) = (mean - half, mean + half);
    let mr_ucl = D4 * mr_bar;
    let outside = (0..x.len()).filter(|&i| x[i] < lcl || x[i] > ucl).collect();
    let jumps = (0..mr.len())
        .filter(|&i| mr[i] > mr_ucl)
        .map(|i| i + 1)
        .collect();
    Some(Chart {
        mean,
        mr_bar,
        lcl,
        ucl,
        mr_ucl,
        outside,
        jumps,
    })
}

/// A straight-line drift: slope (value per day) and its standard uncertainty, with n − 2
/// degrees of freedom.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Drift {
    pub slope: f64,
    pub u_slope: f64,
    pub intercept: f64,
    pub dof: usize,
}

/// Least squares of `y` on `t`; None below three points or when every t is the same.
pub fn drift(t: &[f64], y: &[f64]) -> Option<Drift> {
    let n = t.len();
    if n < 3 || y.len() != n {
        return None;
    }
    let nf = n as f64;
    let (tm, ym) = (t.iter().sum::<f64>() / nf, y.iter().sum::<f64>() / nf);
    let sxx: f64 = t.iter().map(|v| (v - tm).powi(2)).sum();
    if !(sxx > 0.0) {
        return None;
    }
    let sxy: f64 = t.iter().zip(y).map(|(a, b)| (a - tm) * (b - ym)).sum();
    let slope = sxy / sxx;
    let intercept = ym - slope * tm;
    let sse: f64 = t
        .iter()
        .zip(y)
        .map(|(a, b)| (b - intercept - slope * a).powi(2))
        .sum();
    let s2 = sse / (nf - 2.0);
    Some(Drift {
        slope,
        u_slope: (s2 / sxx).sqrt(),
        intercept,
        dof: n - 2,
    })
}

/// E_n of two results with their expanded uncertainties; None when both U are zero.
pub fn e_n(x1: f64, u1: f64, x2: f64, u2: f64) -> Option<f64> {
    let d = (u1 * u1 + u2 * u2).sqrt();
    (d > 0.0 && d.is_finite()).then(|| (x1 - x2) / d)
}

/// A check standard's values gathered from records, with its chart and drift.
#[derive(Debug, Clone)]
pub struct Trend {
    /// The part (or a lot unit's serial) followed.
    pub part: String,
    /// The judged result followed (C, L, R).
    pub result: String,
    pub unit: crate::quantity::Unit,
    pub points: Vec<TrendPoint>,
    pub chart: Option<Chart>,
    /// Slope per day.
    pub drift: Option<Drift>,
}

/// Every judged value of `part` (a part name, or a lot unit's serial) in `records`, in date
/// order, with the individuals chart and the drift. `result` picks one result when the part
/// has several judged (default: the first name found).
pub fn gather(
    part: &str,
    result: Option<&str>,
    records: &[(String, crate::judge::Record)],
) -> Trend {
    let mut points = Vec::new();
    let mut name: Option<String> = result.map(str::to_string);
    let mut unit = crate::quantity::Unit::One;
    for (path, rec) in records {
        for v in &rec.verdicts {
            let hit = match &v.serial {
                Some(s) => s == part,
                None => v.part == part,
            };
            if !hit || name.as_deref().is_some_and(|n| n != v.name) {
                continue;
            }
            name.get_or_insert_with(|| v.name.clone());
            unit = v.unit;
            points.push(TrendPoint {
                date: rec.notebook.front.date,
                record: rec.notebook.front.record.clone(),
                path: path.clone(),
                value: v.value,
                expanded: v.expanded,
                k: v.k,
            });
        }
    }
    points.sort_by(|a, b| (a.date, &a.record, &a.path).cmp(&(b.date, &b.record, &b.path)));
    let xs: Vec<f64> = points.iter().map(|p| p.value).collect();
    let days: Vec<f64> = points
        .iter()
        .map(|p| (p.date - points[0].date).num_days() as f64)
        .collect();
    Trend {
        part: part.to_string(),
        result: name.unwrap_or_default(),
        unit,
        chart: individuals_chart(&xs),
        drift: drift(&days, &xs),
        points,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Individuals chart by hand from the NIST/SEMATECH §6.3.2.2 definitions on five values:
    // x̄ = 10.2, moving ranges 1, 2, 1, 1 → MR̄ = 1.25, limits 10.2 ± 3·1.25/1.128.
    #[test]
    fn chart_limits_from_the_moving_range() {
        let c = individuals_chart(&[10.0, 11.0, 9.0, 10.0, 11.0]).unwrap();
        assert!((c.mean - 10.2).abs() < 1e-12);
        let mr = (1.0 + 2.0 + 1.0 + 1.0) / 4.0;
        assert!((c.mr_bar - mr).abs() < 1e-12);
        assert!((c.ucl - (10.2 + 3.0 * mr / 1.128)).abs() < 1e-12);
        assert!(c.outside.is_empty());
        let c = individuals_chart(&[10.0, 10.1, 9.9, 10.0, 10.1, 12.0]).unwrap();
        assert_eq!(c.outside, vec![5]);
        assert_eq!(c.jumps, vec![5]);
        assert!(individuals_chart(&[1.0]).is_none());
    }

    // E_n: ISO 13528 §9.7's formula on a hand-worked pair: (100.4 − 100.0)/√(0.3² + 0.4²) = 0.8.
    #[test]
    fn e_n_of_a_pair() {
        assert!((e_n(100.4, 0.3, 100.0, 0.4).unwrap() - 0.8).abs() < 1e-12);
        assert!((e_n(99.0, 0.3, 100.0, 0.4).unwrap() + 2.0).abs() < 1e-12);
        assert!(e_n(1.0, 0.0, 1.0, 0.0).is_none());
    }
}
