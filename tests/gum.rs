//! GUM JCGM 100:2008 Annex H.2 (simultaneous measurement of resistance and reactance) through
//! the real reduction path: a notebook with a Z readings block → `networks::reduce`.

use benchrec::diag::Span;
use benchrec::networks::{self, BlockResult};
use benchrec::notebook::*;
use benchrec::quantity::Unit;
use benchrec::uncertainty::coverage_factor;
use std::collections::BTreeMap;

fn front() -> FrontMatter {
    FrontMatter {
        record: "GUM-H2".into(),
        title: "Annex H.2".into(),
        date: chrono::NaiveDate::from_ymd_opt(2026, 5, 2).expect("valid date"),
        operator: "test".into(),
        lab: None,
        project: None,
        lot: None,
        environment: None,
        coverage: 0.9545,
        decision: Decision::Guarded,
        instruments: BTreeMap::new(),
        parts: BTreeMap::new(),
        template: None,
        signoff: None,
    }
}

fn readings(network: Network, cols: &[(&str, Unit)], rows: &[[f64; 3]]) -> ReadingsBlock {
    let columns = cols
        .iter()
        .map(|(s, u)| Column {
            symbol: s.to_string(),
            unit: *u,
            heading: format!("{s}/{}", u.symbol()),
            range: None,
            span: Span::default(),
        })
        .collect();
    let rows = rows
        .iter()
        .enumerate()
        .map(|(k, r)| Row {
            cells: r
                .iter()
                .enumerate()
                .map(|(j, v)| Cell {
                    value: *v,
                    text: format!("{v}"),
                    span: Span::new(k * 30 + j * 10, k * 30 + j * 10 + 5),
                })
                .collect(),
            span: Span::new(k * 30, k * 30 + 29),
        })
        .collect();
    ReadingsBlock {
        id: "h2".into(),
        id_span: Span::default(),
        network,
        parts: vec![],
        meter: None,
        phase: None,
        counter: None,
        note: None,
        source: None,
        columns,
        rows,
        span: Span::new(0, 50),
        body: String::new(),
    }
}

fn notebook(b: ReadingsBlock) -> Notebook {
    Notebook {
        source: String::new(),
        front: front(),
        front_span: Span::default(),
        items: vec![Item::Readings(b)],
    }
}

fn h2_block() -> BlockResult {
    // GUM H.2, Table H.2: five sets of simultaneous V (V), I (mA), φ (rad).
    let sets = [
        [5.007, 19.663, 1.0456],
        [4.994, 19.639, 1.0438],
        [5.005, 19.640, 1.0468],
        [4.990, 19.685, 1.0428],
        [4.999, 19.678, 1.0433],
    ];
    let si: Vec<[f64; 3]> = sets.iter().map(|s| [s[0], s[1] * 1e-3, s[2]]).collect();
    let b = readings(
        Network::Z,
        &[("V", Unit::V), ("I", Unit::A), ("phi", Unit::Rad)],
        &si,
    );
    let mut red = networks::reduce(&notebook(b)).expect("H.2 reduces");
    red.blocks.remove(0)
}

/// |a − b| within ±1 in the last published digit (`ulp`): the GUM rounds some of its
/// intermediate values, so its last digit can differ by one from an unrounded computation.
fn within(a: f64, b: f64, ulp: f64) -> bool {
    (a - b).abs() <= ulp * (1.0 + 1e-9)
}

// GUM JCGM 100:2008 Table H.3 (approach 1): R = 127.732 Ω, u = 0.071 Ω; X = 219.847 Ω,
// u = 0.295 Ω; |Z| = 254.260 Ω, u = 0.236 Ω; r(R,X) = −0.588, r(R,Z) = −0.485, r(X,Z) = 0.993.
#[test]
fn gum_h2_resistance_reactance() {
    let b = h2_block();
    assert!(b.rows.is_empty(), "no f column: block-level results only");
    let get = |n: &str| {
        b.results
            .iter()
            .find(|r| r.name == n)
            .expect("result")
            .m
            .clone()
    };
    let (r, x, z) = (get("R"), get("X"), get("Z"));
    for (n, m) in [("R", &r), ("X", &x), ("Z", &z)] {
        println!(
            "{n} = {:.4} u = {:.4} dof = {:?} k = {:.3}",
            m.value, m.u, m.dof, m.k
        );
    }
    for c in &b.correlations {
        println!("r({},{}) = {:.4}", c.a, c.b, c.r);
    }
    assert!(within(r.value, 127.732, 0.001), "R = {}", r.value);
    assert!(within(r.u, 0.071, 0.001), "u(R) = {}", r.u);
    assert!(within(x.value, 219.847, 0.001), "X = {}", x.value);
    assert!(within(x.u, 0.295, 0.001), "u(X) = {}", x.u);
    assert!(within(z.value, 254.260, 0.001), "Z = {}", z.value);
    assert!(within(z.u, 0.236, 0.001), "u(Z) = {}", z.u);
    let corr = |a: &str, c: &str| {
        b.correlations
            .iter()
            .find(|k| k.a == a && k.b == c)
            .expect("correlation")
            .r
    };
    assert!(
        within(corr("R", "X"), -0.588, 0.001),
        "r(R,X) = {}",
        corr("R", "X")
    );
    assert!(
        within(corr("R", "Z"), -0.485, 0.001),
        "r(R,Z) = {}",
        corr("R", "Z")
    );
    assert!(
        within(corr("X", "Z"), 0.993, 0.001),
        "r(X,Z) = {}",
        corr("X", "Z")
    );
    // V, I, φ are correlated Type A means of the same 5 sets: pooled, ν_eff = n − 1 = 4 (as
    // approach 2 of GUM H.2.4 gives); GUM Table G.2: t_95.45(4) = 2.87.
    let nu = r.dof.expect("finite dof");
    assert!((nu - 4.0).abs() < 1e-9, "ν_eff = {nu}");
    assert!((r.k - 2.87).abs() < 0.005);
    assert!((r.k - coverage_factor(0.9545, Some(nu))).abs() < 1e-12);
    assert!((r.expanded - r.k * r.u).abs() < 1e-12);
    // Budget: V, I, φ with c·u contributions; ∂R/∂V = cos φ̄/Ī (calculus).
    let v = r.budget.iter().find(|l| l.input == "V").expect("V line");
    let (vm, im, pm) = (4.9990f64, 19.6610e-3f64, 1.04446f64);
    assert!(((v.sensitivity - pm.cos() / im) / v.sensitivity).abs() < 1e-3);
    assert!((v.estimate - vm).abs() < 1e-9);
    // No instrument named: each column flagged.
    assert_eq!(
        b.flags
            .iter()
            .filter(|f| f.message.starts_with("no instrument for column"))
            .count(),
        3
    );
}

// Physically impossible readings (zero current) are a diagnostic at the cell, never NaN.
#[test]
fn zero_current_is_a_diagnostic() {
    let b = readings(
        Network::Z,
        &[("V", Unit::V), ("I", Unit::A), ("phi", Unit::Rad)],
        &[[1.0, 0.0, 0.3]],
    );
    let e = networks::reduce(&notebook(b)).expect_err("I = 0 cannot be reduced");
    assert!(e[0].message.starts_with("I must be positive"));
    assert_eq!(e[0].span, Span::new(10, 15));
}

// Diagnostics about a block's network point at the `network:` value (FORMAT.md: errors name
// line and column).
#[test]
fn network_span_points_at_the_value() {
    let src = "# t\n\n```readings\nid: a\nnetwork:  RC   # series\n---\nf/Hz VR/V\n```\n";
    let mut b = readings(Network::RC, &[("f", Unit::Hz)], &[]);
    b.span = Span::new(5, src.len());
    let mut nb = notebook(b.clone());
    nb.source = src.to_string();
    let ctx = networks::Context::new(&nb);
    let s = ctx.network_span(&b);
    assert_eq!(&src[s.start..s.end], "RC");
}
