//! The parsers never panic and keep their spans on char boundaries inside the source, on the
//! fuzz targets' kept inputs and on generated notebooks; quantities round-trip.

mod common;

use common::*;
use proptest::prelude::*;
use std::path::PathBuf;

/// The fuzz target `notebook_parse`'s property on one input: parse returns, and every
/// diagnostic's span lies inside the source (BOM stripped) on character boundaries.
fn check_notebook_target(name: &str, text: &str) {
    match benchrec::notebook::parse(text) {
        Ok(nb) => assert!(nb.source.len() <= text.len(), "{name}: source grew"),
        Err(diags) => {
            assert!(!diags.is_empty(), "{name}: error with no diagnostic");
            let src = text.strip_prefix('\u{feff}').unwrap_or(text);
            for d in diags {
                assert!(
                    d.span.start <= d.span.end && d.span.end <= src.len(),
                    "{name}: span {:?} outside {}",
                    d.span,
                    src.len()
                );
                assert!(
                    src.is_char_boundary(d.span.start) && src.is_char_boundary(d.span.end),
                    "{name}: span {:?} splits a character",
                    d.span
                );
                let _ = benchrec::diag::line_col(src, d.span.start);
            }
        }
    }
}

/// The fuzz target `quantity_parse`'s property: an accepted value is finite, an error's
/// offsets lie inside the text (and, stricter than the target, on character boundaries).
fn check_quantity_target(name: &str, text: &str) {
    match benchrec::quantity::parse_quantity(text) {
        Ok(q) => assert!(q.value.is_finite(), "{name}: {text:?} gave {}", q.value),
        Err(e) => {
            assert!(
                e.offset <= text.len() && e.offset + e.len <= text.len(),
                "{name}: {e:?} for {text:?}"
            );
            assert!(
                text.is_char_boundary(e.offset) && text.is_char_boundary(e.offset + e.len),
                "{name}: {e:?} splits a character of {text:?}"
            );
        }
    }
}

/// Inputs that once crashed a parser and the fuzz targets' seeds (`fuzz/seeds/`), kept in
/// `tests/malformed/fuzz/` and run through both targets' properties. The folder must exist,
/// hold every seed byte for byte, and hold inputs for both targets.
#[test]
fn fuzz_regressions_do_not_panic() {
    let dir = malformed_dir().join("fuzz");
    let files = files_in(&dir);
    assert!(
        files.iter().any(|f| f.starts_with("notebook-"))
            && files.iter().any(|f| f.starts_with("quantity-")),
        "{} must hold notebook-* and quantity-* inputs, has {files:?}",
        dir.display()
    );
    let seeds = manifest_dir().join("fuzz").join("seeds").join("quantity");
    let seed_names = files_in(&seeds);
    assert!(!seed_names.is_empty(), "{} is empty", seeds.display());
    for f in seed_names {
        let kept = std::fs::read(dir.join(format!("quantity-{f}"))).ok();
        assert_eq!(
            kept,
            std::fs::read(seeds.join(&f)).ok(),
            "fuzz seed {f} is not kept as tests/malformed/fuzz/quantity-{f}"
        );
    }
    for f in &files {
        let bytes = std::fs::read(dir.join(f)).unwrap();
        check_notebook_target(f, &String::from_utf8_lossy(&bytes));
        if let Ok(text) = std::str::from_utf8(&bytes) {
            check_quantity_target(f, text);
        }
    }
}

/// The parser on every catalogue file and demo: an error list, never a panic; an error's
/// span lies inside the source and on character boundaries (diag.rs: spans index the source).
#[test]
fn parser_spans_stay_inside_the_source() {
    let mut files: Vec<PathBuf> = files_in(&malformed_dir())
        .into_iter()
        .filter(|f| f.ends_with(".md"))
        .map(|f| malformed_dir().join(f))
        .collect();
    for d in files_in(&manifest_dir().join("demo")) {
        if d.ends_with(".md") {
            files.push(manifest_dir().join("demo").join(d));
        }
    }
    for p in files {
        let text = String::from_utf8_lossy(&std::fs::read(&p).unwrap()).into_owned();
        if let Err(diags) = benchrec::notebook::parse(&text) {
            assert!(
                !diags.is_empty(),
                "{}: error with no diagnostic",
                p.display()
            );
            let src = text.strip_prefix('\u{feff}').unwrap_or(&text);
            for d in diags {
                assert!(
                    d.span.start <= d.span.end && d.span.end <= src.len(),
                    "{}: span {:?} outside the source",
                    p.display(),
                    d.span
                );
                assert!(
                    src.is_char_boundary(d.span.start) && src.is_char_boundary(d.span.end),
                    "{}: span {:?} splits a character",
                    p.display(),
                    d.span
                );
                assert!(
                    !d.message.trim().is_empty(),
                    "{}: empty message",
                    p.display()
                );
            }
        }
    }
}

fn notebook_like() -> impl Strategy<Value = String> {
    // Fragments of real notebooks, shuffled: reaches deeper than uniform noise.
    let frag = prop::sample::select(vec![
        "---\n",
        "```readings\n",
        "```\n",
        "id: a\n",
        "network: RC\n",
        "network: RLC\n",
        "network: Z\n",
        "network: RL\n",
        "parts: [R1, C1]\n",
        "meter: dmm\n",
        "f/Hz VR/V VC/V\n",
        "| f/Hz | VR/V | VC/V |\n",
        "|---|---|---|\n",
        "| 1 | 2 | 3 |\n",
        "100 0.5 1.2\n",
        "100 0.5 # c\n",
        "record: X\n",
        "title: T\n",
        "date: 2026-01-02\n",
        "operator: O\n",
        "parts:\n  R1:\n    kind: resistor\n    nominal: 1 kohm\n",
        "  C1:\n    kind: capacitor\n    nominal: 10 nF\n    tolerance: J\n",
        "instruments:\n  dmm:\n    accuracy: 1% + 2\n",
        "`=a.C`\n",
        "![i](x.png)\n",
        "\u{feff}",
        "\r\n",
        "\t",
        "µ",
        "Ω",
        "&a [*a, *a]\n",
        "...\n",
        "# h\n",
        "1e999\n",
        "NaN\n",
        "-0\n",
        "shift/div period/div\n",
        "Vs/V\n",
        "\u{0}",
        "é",
        "\u{10FFFF}",
    ]);
    prop::collection::vec(frag, 0..40).prop_map(|v| v.concat())
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 2000, .. ProptestConfig::default() })]

    /// No string makes the notebook parser panic (brief: never panic on input).
    #[test]
    fn notebook_parse_never_panics_on_any_string(src in any::<String>()) {
        check_notebook_target("any string", &src);
    }

    #[test]
    fn notebook_parse_never_panics_on_notebook_fragments(src in notebook_like()) {
        check_notebook_target("fragments", &src);
    }

    /// Structured: the catalogue's base notebook (which parses) with one random edit (a
    /// stretch cut out, a fragment or any text put in), so most cases get past the front
    /// matter into the blocks and the reduction. Parse keeps the fuzz target's properties; a
    /// notebook that parses reduces without panic, to finite values.
    #[test]
    fn edited_notebooks_keep_spans_and_reduce_to_finite_values(
        at in 0.0f64..1.0,
        cut in 0usize..12,
        put in prop_oneof![notebook_like(), any::<String>(), "[0-9eE.+-]{0,6}"],
    ) {
        let base = base_notebook();
        let mut i = (at * base.len() as f64) as usize;
        while !base.is_char_boundary(i) { i -= 1; }
        let mut j = (i + cut).min(base.len());
        while !base.is_char_boundary(j) { j -= 1; }
        let src = format!("{}{put}{}", &base[..i], &base[j..]);
        check_notebook_target("edited", &src);
        if let Ok(nb) = benchrec::notebook::parse(&src) {
            if let Ok(red) = benchrec::networks::reduce(&nb) {
                for r in red.blocks.iter().flat_map(|b| b.rows.iter().chain(&b.results)) {
                    prop_assert!(r.m.value.is_finite() && r.m.u.is_finite(), "{} in {:?}", r.name, src);
                }
            }
        }
    }

    #[test]
    fn parse_quantity_never_panics(t in any::<String>()) {
        check_quantity_target("any string", &t);
    }

    #[test]
    fn parse_quantity_never_panics_on_number_like_text(t in "[ +\\-]{0,2}[0-9.eE+\\-]{0,12} ?[pnuµmkMKxΩ°%]{0,2}(V|A|ohm|Ω|F|H|Hz|s|W|deg|rad|div|%|hz)?[ ,]{0,2}") {
        if let Ok(q) = benchrec::quantity::parse_quantity(&t) {
            prop_assert!(q.value.is_finite(), "`{}` gave a non-finite value", t);
        }
    }

    /// Printing with 17 significant digits and one SI prefix, then parsing, gives the value back
    /// to within a few ulps (8 ε relative) (17 digits round-trip an f64: IEEE 754-2019 §5.12.2; the prefix
    /// scaling adds at most a couple of roundings).
    #[test]
    fn quantity_printed_and_parsed_back_is_the_same_value(
        mant in 1.0f64..1000.0,
        exp in -12i32..=6,
        neg in any::<bool>(),
        unit_i in 0usize..8,
    ) {
        use benchrec::print::notation;
        use benchrec::quantity::{parse_quantity, Unit};
        let units = [Unit::V, Unit::A, Unit::Ohm, Unit::F, Unit::H, Unit::Hz, Unit::S, Unit::W];
        let unit = units[unit_i];
        let v = if neg { -mant } else { mant } * 10f64.powi(exp);
        let text = notation(v, unit, 17);
        let q = parse_quantity(&text).map_err(|e| TestCaseError::fail(format!("`{text}` does not parse back: {}", e.message)))?;
        prop_assert_eq!(q.unit, unit, "`{}`", text);
        prop_assert!((q.value - v).abs() <= 8.0 * f64::EPSILON * v.abs(), "`{}` → {} ≠ {}", text, q.value, v);
    }

    /// Pure numbers, percent, radians and divisions round-trip too (no prefix on those).
    #[test]
    fn unprefixed_quantities_round_trip(x in -1.0e6f64..1.0e6, unit_i in 0usize..4) {
        use benchrec::print::notation;
        use benchrec::quantity::{parse_quantity, Unit};
        let unit = [Unit::One, Unit::Percent, Unit::Rad, Unit::Div][unit_i];
        let text = notation(x, unit, 17);
        let q = parse_quantity(&text).map_err(|e| TestCaseError::fail(format!("`{text}` does not parse back: {}", e.message)))?;
        prop_assert!(q.unit.same_dimension(unit), "`{}` came back as {:?}", text, q.unit);
        prop_assert!((q.value - x).abs() <= 1e-13 * x.abs().max(1e-300), "`{}` → {} ≠ {}", text, q.value, x);
    }
}
