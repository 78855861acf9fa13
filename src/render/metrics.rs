//! Advance widths in the body font, so the template can give a table of short cells fixed
//! tracks. Typst lays an auto-sized cell out two or three times (to size its column, to size
//! its row, to place it); with fixed tracks it lays it out once.
//!
//! The width of a string is the sum of its glyphs' advances in em, without kerning or
//! ligatures; a character the font lacks counts as 1 em, a zero-width space as nothing.
//! Kerning in the body font is small and mostly negative, so this is close to, and usually a
//! little over, the set width.

use std::sync::LazyLock;

use typst::text::Font;

/// The family the built-in template sets its tables in.
pub const BODY_FAMILY: &str = "Libertinus Serif";

static BODY: LazyLock<Option<Font>> = LazyLock::new(|| super::world::embedded_font(BODY_FAMILY));

static FACE: LazyLock<Option<ttf_parser::Face<'static>>> = LazyLock::new(|| {
    let font: &'static Font = BODY.as_ref()?;
    ttf_parser::Face::parse(font.data().as_slice(), font.index()).ok()
});

/// Width of `s` set in the body font, in em.
pub fn em_width(s: &str) -> f64 {
    let Some(face) = FACE.as_ref() else {
        return s.chars().count() as f64;
    };
    let upem = f64::from(face.units_per_em());
    s.chars()
        .filter(|&c| c != '\u{200B}')
        .map(|c| {
            face.glyph_index(c)
                .and_then(|g| face.glyph_hor_advance(g))
                .map_or(1.0, |a| f64::from(a) / upem)
        })
        .sum()
}

/// Widest of `cells` in em, rounded up to a thousandth (the rounding keeps data.json stable).
pub fn widest<'a>(cells: impl IntoIterator<Item = &'a str>) -> f64 {
    widest_of(cells.into_iter().map(em_width))
}

/// Largest of some em widths, rounded up to a thousandth.
pub fn widest_of(widths: impl IntoIterator<Item = f64>) -> f64 {
    let w = widths.into_iter().fold(0.0, f64::max);
    (w * 1000.0).ceil() / 1000.0
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_body_font_is_found_and_digits_are_half_an_em_or_so() {
        assert!(FACE.is_some(), "{BODY_FAMILY} is embedded");
        // Common practice in book faces: figures are about half an em wide.
        let w = em_width("0123456789") / 10.0;
        assert!((0.4..0.65).contains(&w), "figure width {w} em");
        assert!(em_width("W") > em_width("i"));
        assert_eq!(em_width(""), 0.0);
        assert_eq!(em_width("a\u{200B}b"), em_width("ab"));
        assert_eq!(widest(["1", "22", "3"]), widest(["22"]));
    }

    /// Reference: typst's own layout. Each estimate, with the template's margin (4 % and half a
    /// point at 7.8 pt), must hold the width typst sets the string at, and not be loose by more
    /// than a quarter, over strings like the ones the tables print.
    #[test]
    fn estimates_hold_what_typst_sets() {
        use std::collections::BTreeMap;
        let cases = [
            "0",
            "1600",
            "0.0029",
            "2200.0",
            "−3.10 × 10⁻¹¹",
            "6.81 × 10⁻⁸",
            "0.20 nF",
            "∞",
            "69.34 ± 0.20",
            "1000 ± 13000",
            "rectangular",
            "normal",
            "gain(meter,VR)",
            "counts(meter,VC@1.6 kHz)",
            "WWMMQ",
            "iiiill",
            "dmm_2(VL@12.5 kHz)",
            "⋮",
            "—",
        ];
        let json = serde_json::to_string(
            &cases
                .iter()
                .map(|c| serde_json::json!({ "s": c, "em": em_width(c) }))
                .collect::<Vec<_>>(),
        )
        .unwrap();
        let main = r#"
#set text(font: "Libertinus Serif", size: 7.8pt)
#context for c in json("/cases.json") {
  let set-width = measure(text(c.s)).width
  let held = c.em * 1.04 * 7.8pt + 0.5pt
  assert(set-width <= held, message: "over: " + c.s)
  assert(set-width >= 0.75 * c.em * 7.8pt, message: "loose: " + c.s)
}
"#;
        let mut files = BTreeMap::new();
        files.insert("/cases.json".to_string(), json.into_bytes());
        let date = chrono::NaiveDate::from_ymd_opt(2026, 1, 1).unwrap();
        let world =
            crate::render::world::RecordWorld::new(main.into(), BTreeMap::new(), files, date)
                .unwrap();
        let out = typst::compile::<typst_layout::PagedDocument>(&world);
        if let Err(errors) = out.output {
            let msgs: Vec<String> = errors.iter().map(|e| e.message.to_string()).collect();
            panic!("{msgs:?}");
        }
    }
}
