//! GUM JCGM 100:2008 Annex H.2 (simultaneous measurement of resistance and reactance) through
//! the real reduction path: a notebook with a Z readings block → `networks::reduce`.

use benchrec::diag::Span;
use benchrec::networks::{self, BlockResult};
use benchrec::notebook::*;
use benchrec::uncertainty::coverage_factor;

/// A notebook with one readings block of `network`, built from its text by the parser.
fn notebook_of(network: Network, table: &str) -> Notebook {
    let src = format!(
        "---\nrecord: GUM-H2\ntitle: Annex H.2\ndate: 2026-05-02\noperator: test\n---\n\n\
         ```readings\nid: h2\nnetwork: {}\n---\n{table}```\n",
        network.name()
    );
    parse(&src).unwrap_or_else(|d| panic!("the fixture parses: {d:?}"))
}

/// GUM H.2, Table H.2: five sets of simultaneous V (V), I (mA), φ (rad), as a readings table.
fn h2_table() -> String {
    let sets = [
        [5.007, 19.663, 1.0456],
        [4.994, 19.639, 1.0438],
        [5.005, 19.640, 1.0468],
        [4.990, 19.685, 1.0428],
        [4.999, 19.678, 1.0433],
    ];
    let mut table = String::from("V/V I/mA phi/rad\n");
    for [v, i, phi] in sets {
        table.push_str(&format!("{v} {i} {phi}\n"));
    }
    table
}

fn h2_block() -> BlockResult {
    let table = h2_table();
    let mut red = networks::reduce(&notebook_of(Network::Z, &table)).expect("H.2 reduces");
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

// The same Annex H.2 written as a measurement model in the notebook (`network: model`,
// FORMAT.md 1.1): R = V/I·cos φ, X = V/I·sin φ, |Z| = V/I over the same five sets must give
// Table H.3's values and uncertainties (approach 1), with ν_eff = 4 (GUM H.2.4).
#[test]
fn gum_h2_written_as_a_model() {
    let table = h2_table();
    let src = format!(
        "---\nrecord: GUM-H2M\ntitle: Annex H.2 as a model\ndate: 2026-05-02\noperator: test\n---\n\n\
         ```readings\nid: h2m\nnetwork: model\nmodel:\n  R: {{ expr: \"V / I * cos(phi)\", unit: ohm }}\n  X: {{ expr: \"V / I * sin(phi)\", unit: ohm }}\n  Z: {{ expr: \"V / I\", unit: ohm }}\n---\n{table}```\n"
    );
    let nb = parse(&src).unwrap_or_else(|d| panic!("the fixture parses: {d:?}"));
    let b = networks::reduce(&nb).expect("H.2 reduces").blocks.remove(0);
    let get = |n: &str| {
        b.results
            .iter()
            .find(|r| r.name == n)
            .unwrap_or_else(|| panic!("no {n}"))
            .m
            .clone()
    };
    for (n, value, u) in [
        ("R", 127.732, 0.071),
        ("X", 219.847, 0.295),
        ("Z", 254.260, 0.236),
    ] {
        let m = get(n);
        assert!(within(m.value, value, 0.001), "{n} = {}", m.value);
        assert!(within(m.u, u, 0.001), "u({n}) = {}", m.u);
        let nu = m.dof.expect("finite dof");
        assert!((nu - 4.0).abs() < 1e-9, "ν_eff({n}) = {nu}");
    }
}

// Physically impossible readings (zero current) are a diagnostic at the cell, never NaN.
#[test]
fn zero_current_is_a_diagnostic() {
    let nb = notebook_of(Network::Z, "V/V I/A phi/rad\n1.0 0.000 0.3\n");
    let e = networks::reduce(&nb).expect_err("I = 0 cannot be reduced");
    assert!(e[0].message.starts_with("I must be positive"));
    let at = nb.source.find("0.000").unwrap();
    assert_eq!(e[0].span, Span::new(at, at + 5));
}

// The parser keeps where the `network:` value sits, so diagnostics about a block's network
// point at it (FORMAT.md: errors name line and column).
#[test]
fn network_span_points_at_the_value() {
    let src = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/demo/snubber-caps.md"))
        .unwrap();
    let nb = parse(&src).expect("the demo parses");
    let mut n = 0;
    for item in &nb.items {
        if let Item::Readings(b) = item {
            let s = b.network_span;
            assert_eq!(&src[s.start..s.end], b.network.name(), "block {}", b.id);
            let line_start = src[..s.start].rfind('\n').map_or(0, |i| i + 1);
            assert!(src[line_start..s.start].trim_start().starts_with("network"));
            n += 1;
        }
    }
    assert!(n > 0);
}
