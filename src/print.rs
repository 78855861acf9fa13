//! The one printer of numbers: the record's tables, citations, budgets and flags and the
//! terminal all print through here. SI prefixes, value ± U with the digits of GUM
//! (JCGM 100:2008) 7.2.6, the minus sign of ISO 80000-1 (U+2212), angles in degrees, and a
//! space before % but not before ° (SI Brochure, 9th ed., 5.4.3 and 5.4.7). [`notation`] is
//! the exception that proves it: it writes the notebook's own input syntax.

use crate::quantity::Unit;

const MINUS: char = '\u{2212}';

/// Printed unit symbol (angles print in degrees, see [`display_scale`]).
pub fn unit_text(unit: Unit) -> &'static str {
    match unit {
        Unit::V => "V",
        Unit::A => "A",
        Unit::Ohm => "Ω",
        Unit::F => "F",
        Unit::H => "H",
        Unit::Hz => "Hz",
        Unit::S => "s",
        Unit::W => "W",
        Unit::Rad => "°",
        Unit::Div => "div",
        Unit::Percent => "%",
        Unit::One => "",
    }
}

/// Factor from the SI value to the printed one (rad → degree, fraction → percent).
pub fn display_scale(unit: Unit) -> f64 {
    match unit {
        Unit::Rad => 180.0 / std::f64::consts::PI,
        Unit::Percent => 100.0,
        _ => 1.0,
    }
}

/// Whether a unit takes SI prefixes in print.
fn takes_prefix(unit: Unit) -> bool {
    !matches!(unit, Unit::Rad | Unit::Percent | Unit::One | Unit::Div)
}

const PREFIXES: [(i32, &str); 9] = [
    (-12, "p"),
    (-9, "n"),
    (-6, "µ"),
    (-3, "m"),
    (0, ""),
    (3, "k"),
    (6, "M"),
    (9, "G"),
    (12, "T"),
];

/// Engineering prefix for a magnitude: returns (divisor, prefix).
pub fn prefix_for(magnitude: f64) -> (f64, &'static str) {
    prefix_within(magnitude, 12)
}

/// As [`prefix_for`], with the largest exponent `top` (the input syntax stops at M).
fn prefix_within(magnitude: f64, top: i32) -> (f64, &'static str) {
    let m = magnitude.abs();
    if !m.is_finite() || m == 0.0 {
        return (1.0, "");
    }
    // Round first so 999.96 does not print as "1000.0 m".
    let e = (m.log10() + 1e-9).floor() as i32;
    let e3 = e.div_euclid(3) * 3;
    let e3 = e3.clamp(-12, top);
    let p = PREFIXES
        .iter()
        .find(|(x, _)| *x == e3)
        .map(|(_, p)| *p)
        .unwrap_or("");
    (10f64.powi(e3), p)
}

/// The printing scale of a unit for values around `magnitude` (SI): (divisor, unit text).
/// The divisor maps the SI value to the printed number.
pub fn scale_for(unit: Unit, magnitude: f64) -> (f64, String) {
    let ds = display_scale(unit);
    if takes_prefix(unit) {
        let (div, p) = prefix_for(magnitude);
        (div, format!("{p}{}", unit_text(unit)))
    } else {
        (1.0 / ds, unit_text(unit).to_string())
    }
}

/// Replace '-' by the typographic minus.
fn minus(s: String) -> String {
    if s.starts_with('-') {
        let mut out = String::with_capacity(s.len() + 2);
        out.push(MINUS);
        out.push_str(&s[1..]);
        out
    } else {
        s
    }
}

/// Fixed decimals, typographic minus, "−0" shown as "0".
pub fn fixed(x: f64, decimals: usize) -> String {
    if !x.is_finite() {
        return "—".into();
    }
    let s = format!("{x:.decimals$}");
    let neg_zero = s.starts_with('-') && s[1..].chars().all(|c| c == '0' || c == '.');
    if neg_zero {
        return s[1..].to_string();
    }
    minus(s)
}

/// `sig` significant digits, no exponent (for numbers already scaled by a prefix).
pub fn sig(x: f64, sig: usize) -> String {
    if !x.is_finite() {
        return "—".into();
    }
    if x == 0.0 {
        return "0".into();
    }
    let e = x.abs().log10().floor() as i32;
    let dec = (sig as i32 - 1 - e).max(0) as usize;
    fixed(x, dec)
}

/// Decimals that give U two significant digits (GUM 7.2.6), at most 9.
fn decimals_for_u(u: f64) -> Option<usize> {
    if !u.is_finite() || u <= 0.0 {
        return None;
    }
    let e = u.log10().floor() as i32;
    Some((1 - e).clamp(0, 9) as usize)
}

/// Value and U (both already divided by the printing scale) with U to two significant
/// digits and the value rounded to the same decimal place (GUM 7.2.6). Where that place lies
/// left of the decimal point (U ≥ 100 on this scale) both are rounded to it: 12345 ± 234
/// prints as 12350 ± 230.
pub fn value_and_u(value: f64, u_exp: f64) -> (String, String) {
    if !u_exp.is_finite() || u_exp <= 0.0 || !value.is_finite() {
        return (sig(value, 5), fixed(u_exp.max(0.0), 0));
    }
    let ur = round_sig(u_exp, 2);
    let last = ur.log10().floor() as i32 - 1;
    if last >= 0 {
        let p = 10f64.powi(last);
        (
            fixed((value / p).round() * p, 0),
            fixed((ur / p).round() * p, 0),
        )
    } else {
        let d = (-last).min(9) as usize;
        (fixed(value, d), fixed(ur, d))
    }
}

/// Scientific form for a budget cell: `4.700 × 10⁻⁷`; plain between 10⁻³ and 10⁵.
pub fn sci(x: f64, digits: usize) -> String {
    if !x.is_finite() {
        return "—".into();
    }
    if x == 0.0 {
        return "0".into();
    }
    let a = x.abs();
    if (1e-3..1e5).contains(&a) {
        return sig(x, digits);
    }
    let mut e = a.log10().floor() as i32;
    let mut m = x / 10f64.powi(e);
    // Rounding the mantissa may carry to 10.
    let dec = digits.saturating_sub(1);
    let rounded: f64 = format!("{m:.dec$}").parse().unwrap_or(m);
    if rounded.abs() >= 10.0 {
        e += 1;
        m = x / 10f64.powi(e);
    }
    format!("{} × 10{}", fixed(m, dec), superscript(e))
}

fn superscript(e: i32) -> String {
    let mut s = String::new();
    if e < 0 {
        s.push('⁻');
    }
    for c in e.unsigned_abs().to_string().chars() {
        s.push(match c {
            '0' => '⁰',
            '1' => '¹',
            '2' => '²',
            '3' => '³',
            '4' => '⁴',
            '5' => '⁵',
            '6' => '⁶',
            '7' => '⁷',
            '8' => '⁸',
            _ => '⁹',
        });
    }
    s
}

/// Coverage factor as printed: three significant digits (2.00, 2.28, 12.7).
pub fn k_text(k: f64) -> String {
    if !k.is_finite() {
        return "—".into();
    }
    sig(k, 3)
}

/// Degrees of freedom as k was computed from them ([`crate::uncertainty::dof_for_k`]): "∞"
/// for None, one decimal below 10, else a whole number.
pub fn dof_text(dof: Option<f64>) -> String {
    match dof {
        None => "∞".into(),
        Some(v) if !(v < 1e7) => "∞".into(),
        Some(v) => {
            let nu = crate::uncertainty::dof_for_k(v);
            if nu < 10.0 {
                format!("{nu:.1}")
            } else {
                format!("{nu:.0}")
            }
        }
    }
}

/// A single quantity with a prefix: `470.0 nF` (4 significant digits).
pub fn quantity(value: f64, unit: Unit) -> String {
    quantity_sig(value, unit, 4)
}

/// A single quantity with a prefix and `digits` significant digits.
pub fn quantity_sig(value: f64, unit: Unit, digits: usize) -> String {
    let (div, u) = scale_for(unit, value);
    join_unit(sig(value / div, digits), &u)
}

fn join_unit(number: String, unit: &str) -> String {
    if unit.is_empty() {
        number
    } else if unit == "°" {
        format!("{number}{unit}")
    } else {
        format!("{number} {unit}")
    }
}

/// Print a fraction as a percentage without trailing zeros: 0.005 → "0.5 %".
pub fn percent(f: f64) -> String {
    format!("{} %", trim(f * 100.0))
}

/// Up to six decimals, trailing zeros trimmed, the ISO minus: 0.5, 12, −0.25.
pub fn trim(x: f64) -> String {
    if !x.is_finite() {
        return "—".into();
    }
    let s = format!("{:.6}", x);
    let s = s.trim_end_matches('0').trim_end_matches('.').to_string();
    if s == "-0" {
        "0".into()
    } else {
        minus(s)
    }
}

/// Significant digits without trailing zeros: 1500 → "1500", 0.25 → "0.25".
pub fn trim_sig(x: f64, digits: usize) -> String {
    let s = sig(x, digits);
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

/// `(468.3 ± 2.1) nF`: value ± U per GUM 7.2.6 (U to two significant digits, the value to
/// the same place), the pair bracketed as in GUM 7.2.4 when a unit follows, one prefix chosen
/// from the larger of |value| and U ("0 ± 14 mV", never "0 ± 14000 µV"). A non-finite value
/// prints "n/a"; U = 0 prints the value alone to six digits; a U that is not a finite,
/// non-negative number prints "± n/a".
pub fn value_u(value: f64, expanded: f64, unit: Unit) -> String {
    if !value.is_finite() {
        return "n/a".into();
    }
    if !expanded.is_finite() || expanded < 0.0 {
        return format!("{} ± n/a", quantity(value, unit));
    }
    if expanded == 0.0 {
        return quantity_sig(value, unit, 6);
    }
    let (div, u) = scale_for(unit, value.abs().max(expanded));
    let (v, e) = value_and_u(value / div, expanded / div);
    if u.is_empty() {
        format!("{v} ± {e}")
    } else if u == "°" {
        format!("({v} ± {e}){u}")
    } else {
        format!("({v} ± {e}) {u}")
    }
}

/// `(468.3 ± 2.1) nF (k = 2.00)`: a result as the record prints it.
pub fn value_u_k(value: f64, expanded: f64, k: f64, unit: Unit) -> String {
    format!("{} (k = {})", value_u(value, expanded, unit), k_text(k))
}

/// A number in running text (flags, messages): `sig` significant digits, trailing zeros
/// trimmed, the ISO minus. Callers guard their numbers; a non-finite one says so.
pub fn plain(x: f64, digits: usize) -> String {
    if !x.is_finite() {
        return "(not a finite number)".into();
    }
    trim_sig(x, digits)
}

/// A frequency in running text and budget names: `1 kHz`, `159.155 Hz`, six digits trimmed.
pub fn hz(f: f64) -> String {
    let (v, p) = if f.abs() >= 1e6 {
        (f / 1e6, "MHz")
    } else if f.abs() >= 1e3 {
        (f / 1e3, "kHz")
    } else {
        (f, "Hz")
    };
    format!("{} {p}", plain(v, 6))
}

/// Rounds to `sig` significant figures (at least 1). Zero and non-finite values pass through.
pub fn round_sig(x: f64, sig: usize) -> f64 {
    if x == 0.0 || !x.is_finite() {
        return x;
    }
    let sig = sig.clamp(1, 17) as i32;
    let e = x.abs().log10().floor() as i32;
    let p = sig - 1 - e;
    let r = if p >= 0 {
        let m = 10f64.powi(p);
        (x * m).round() / m
    } else {
        let m = 10f64.powi(-p);
        (x / m).round() * m
    };
    if r.is_finite() {
        r
    } else {
        x
    }
}

/// A quantity written in the notebook's input syntax (ASCII minus, `rad`, `ohm`, prefixes p
/// to M), so that [`crate::quantity::parse_quantity`] reads it back: `470 nF`, `-1.5 rad`.
pub fn notation(value: f64, unit: Unit, digits: usize) -> String {
    if !value.is_finite() {
        return "n/a".into();
    }
    let digits = digits.clamp(1, 17);
    let shown = if unit == Unit::Percent {
        value * 100.0
    } else {
        value
    };
    let (mut div, mut p) = if unit.takes_prefix() {
        prefix_within(shown, 6)
    } else {
        (1.0, "")
    };
    let mut m = round_sig(shown / div, digits);
    // Rounding may carry into the next prefix (999.96 → 1000 → 1.00 k).
    if unit.takes_prefix() && m.abs() >= 1000.0 && div < 1e6 {
        (div, p) = prefix_within(shown.abs().max(div * 1000.0), 6);
        m = round_sig(shown / div, digits);
    }
    let dec = if m == 0.0 {
        digits - 1
    } else {
        (digits as i32 - 1 - m.abs().log10().floor() as i32).max(0) as usize
    };
    let num = format!("{m:.dec$}");
    let num = match num.strip_prefix('-') {
        Some(r) if r.chars().all(|c| c == '0' || c == '.') => r.to_string(),
        _ => num,
    };
    match unit {
        Unit::One => num,
        Unit::Ohm => format!("{num} {p}ohm"),
        u => format!("{num} {p}{}", u.symbol()),
    }
}

/// An interval `[465.3, 474.7] nF` on a common prefix.
pub fn interval(low: f64, high: f64, unit: Unit) -> String {
    let (div, u) = scale_for(unit, low.abs().max(high.abs()));
    let w = ((high - low) / div).abs();
    // Two significant digits of the width, enough to tell the ends apart.
    let d = decimals_for_u(w).unwrap_or(3);
    join_unit(
        format!("[{}, {}]", fixed(low / div, d), fixed(high / div, d)),
        &u,
    )
}

/// A count with its noun in the right number: "1 unit", "3 units".
pub fn count(n: usize, one: &str, many: &str) -> String {
    format!("{n} {}", if n == 1 { one } else { many })
}

#[cfg(test)]
mod tests {
    use super::*;

    // GUM JCGM 100:2008 7.2.6: U to at most two significant digits, the value rounded to
    // the same place. GUM 7.2.4 example (from memory): m_S = (100.021 47 ± 0.000 79) g.
    #[test]
    fn gum_726_rounding() {
        assert_eq!(
            value_and_u(100.02147, 0.00079),
            ("100.02147".into(), "0.00079".into())
        );
        // Rounding: 0.0347 → 0.035 and the value to three decimals.
        assert_eq!(
            value_and_u(4.71234, 0.0347),
            ("4.712".into(), "0.035".into())
        );
        assert_eq!(value_and_u(468.26, 2.14), ("468.3".into(), "2.1".into()));
        assert_eq!(value_and_u(12345.0, 230.0), ("12350".into(), "230".into()));
        assert_eq!(value_and_u(976.2, 132.4), ("980".into(), "130".into()));
        assert_eq!(value_and_u(1.0, 0.0996), ("1.00".into(), "0.10".into()));
    }

    #[test]
    fn prefixes_are_engineering() {
        assert_eq!(prefix_for(4.7e-7), (1e-9, "n"));
        assert_eq!(prefix_for(4.7e-6).1, "µ");
        assert_eq!(prefix_for(3.3e-9).1, "n");
        assert_eq!(prefix_for(1500.0).1, "k");
        assert_eq!(prefix_for(1.0).1, "");
        assert_eq!(prefix_for(0.0).1, "");
        assert_eq!(
            value_u_k(4.6826e-7, 2.14e-9, 2.0, Unit::F),
            "(468.3 ± 2.1) nF (k = 2.00)"
        );
        // Phases print in degrees: 0.5 rad = 28.6479°.
        assert_eq!(
            value_u_k(0.5, 0.01, 2.0, Unit::Rad),
            "(28.65 ± 0.57)° (k = 2.00)"
        );
    }

    #[test]
    fn scientific_and_signs() {
        assert_eq!(sci(4.7e-7, 4), "4.700 × 10⁻⁷");
        assert_eq!(sci(9.9996e-7, 4), "1.000 × 10⁻⁶");
        assert_eq!(sci(-2.5e6, 3), "−2.50 × 10⁶");
        assert_eq!(sci(12.345, 4), "12.35");
        assert_eq!(fixed(-0.0001, 2), "0.00");
        assert_eq!(fixed(f64::NAN, 2), "—");
        assert_eq!(dof_text(None), "∞");
        assert_eq!(dof_text(Some(12.7)), "12");
        assert_eq!(dof_text(Some(2.152)), "2.1");
        // GUM 7.2.6 rounding on the prefix of the larger of |value| and U.
        assert_eq!(
            value_u_k(0.0, 0.014, 2.0, Unit::V),
            "(0 ± 14) mV (k = 2.00)"
        );
        assert_eq!(interval(4.653e-7, 4.747e-7, Unit::F), "[465.3, 474.7] nF");
    }

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() <= 1e-12 * b.abs().max(1e-300)
    }

    #[test]
    fn round_sig_examples() {
        // Plain arithmetic; round half away from zero (f64::round).
        assert_eq!(round_sig(0.0, 2), 0.0);
        assert!(close(round_sig(0.002468, 2), 0.0025));
        assert!(close(round_sig(-98765.0, 3), -98800.0));
        assert!(close(round_sig(1.0, 2), 1.0));
        assert!(round_sig(f64::NAN, 2).is_nan());
    }

    // GUM JCGM 100:2008 7.2.2 and 7.2.4: m_S = 100.021 47 g with u_c = 0.35 mg;
    // U = k·u_c with k = 2.26 gives m_S = (100.021 47 ± 0.000 79) g.
    #[test]
    fn gum_7_2_4_example() {
        assert_eq!(
            value_u(100.02147, 2.26 * 0.00035, Unit::One),
            "100.02147 ± 0.00079"
        );
        assert_eq!(
            value_u(100.02147, 0.00035, Unit::One),
            "100.02147 ± 0.00035"
        );
    }

    // GUM 7.2.6: two significant digits for U, the estimate rounded to match.
    #[test]
    fn gum_7_2_6_digits_and_prefix() {
        assert_eq!(value_u(47.1312e-9, 0.2468e-9, Unit::F), "(47.13 ± 0.25) nF");
        assert_eq!(value_u(1234.5678, 12.3, Unit::Ohm), "(1.235 ± 0.012) kΩ");
        assert_eq!(
            value_u(2.71828e-3, 0.0000161, Unit::H),
            "(2.718 ± 0.016) mH"
        );
        assert_eq!(value_u(468.72, 23.4, Unit::Hz), "(469 ± 23) Hz");
        assert_eq!(value_u(523.0, 147.0, Unit::V), "(520 ± 150) V");
        // Carry of U to the next decade: 0.996 → 1.0.
        assert_eq!(value_u(5.4321, 0.996, Unit::A), "(5.4 ± 1.0) A");
        // The prefix follows the unrounded value; no carry into the next prefix.
        assert_eq!(value_u(999.9996, 0.012, Unit::Hz), "(1000.000 ± 0.012) Hz");
        assert_eq!(value_u(0.0, 3.3e-6, Unit::V), "(0.0 ± 3.3) µV");
        assert_eq!(value_u(-0.61, 0.034, Unit::Rad), "(−35.0 ± 1.9)°");
        assert_eq!(value_u(0.0123, 0.00456, Unit::Percent), "(1.23 ± 0.46) %");
        assert_eq!(value_u(-0.0004, 0.02, Unit::One), "0.000 ± 0.020");
    }

    #[test]
    fn degenerate_inputs_do_not_panic() {
        assert_eq!(value_u(f64::NAN, 1.0, Unit::V), "n/a");
        assert_eq!(value_u(1.5, f64::INFINITY, Unit::V), "1.500 V ± n/a");
        assert_eq!(value_u(1.5, 0.0, Unit::V), "1.50000 V");
        assert_eq!(notation(f64::INFINITY, Unit::V, 3), "n/a");
        assert_eq!(notation(0.0, Unit::V, 3), "0.00 V");
        for (v, u) in [
            (1e300, 1e-300),
            (1e-300, 1e300),
            (f64::MIN_POSITIVE, f64::MIN_POSITIVE),
            (5e-324, 5e-324),
            (-1e308, 1e308),
        ] {
            let s = value_u(v, u, Unit::F);
            assert!(!s.contains("NaN") && !s.contains("inf"), "{s}");
        }
    }

    #[test]
    fn format_si_examples() {
        assert_eq!(notation(4.7e-7, Unit::F, 3), "470 nF");
        assert_eq!(notation(1000.0, Unit::Ohm, 3), "1.00 kohm");
        assert_eq!(notation(999.96, Unit::Hz, 3), "1.00 kHz");
        assert_eq!(notation(0.0331, Unit::H, 2), "33 mH");
        assert_eq!(notation(1.5e9, Unit::Hz, 2), "1500 MHz");
        assert_eq!(notation(0.05, Unit::Div, 1), "0.05 div");
        assert_eq!(notation(0.025, Unit::Percent, 2), "2.5 %");
    }

    // Edges the mutation run found untested (cargo-mutants): every superscript digit, the
    // smallest prefix, the interval's decimals, degenerate U, and ν at its print boundaries.
    #[test]
    fn edges_of_the_printer() {
        assert_eq!(superscript(1234567890), "¹²³⁴⁵⁶⁷⁸⁹⁰");
        assert_eq!(superscript(0), "⁰");
        assert_eq!(superscript(-5), "⁻⁵");
        assert_eq!(sci(1.5e-10, 3), "1.50 × 10⁻¹⁰");
        assert_eq!(prefix_for(4.7e-12), (1e-12, "p"));
        assert_eq!(prefix_for(4.7e12), (1e12, "T"));
        // Two significant digits of the interval's width fix its decimals.
        assert_eq!(interval(1.0, 1.094, Unit::V), "[1.000, 1.094] V");
        assert_eq!(interval(1000.0, 1250.0, Unit::Ohm), "[1.00, 1.25] kΩ");
        assert_eq!(interval(100.0, 350.0, Unit::Ohm), "[100, 350] Ω");
        assert_eq!(interval(1.0, 1.0, Unit::V), "[1.000, 1.000] V");
        // A U that is zero or not finite, or a value that is not: the value alone, U as 0 or —.
        assert_eq!(value_and_u(1.5, 0.0), ("1.5000".into(), "0".into()));
        assert_eq!(
            value_and_u(1.5, f64::INFINITY),
            ("1.5000".into(), "—".into())
        );
        assert_eq!(value_and_u(f64::NAN, 0.1), ("—".into(), "0".into()));
        assert_eq!(dof_text(Some(1e7)), "∞");
        assert_eq!(dof_text(Some(9.5e6)), "9500000");
        assert_eq!(dof_text(Some(10.0)), "10");
        assert_eq!(dof_text(Some(9.96)), "9.9");
        assert_eq!(hz(2.5e6), "2.5 MHz");
        assert_eq!(hz(1000.0), "1 kHz");
        assert_eq!(hz(159.1549), "159.155 Hz");
        // The carry into the next prefix starts from the value's own prefix.
        assert_eq!(notation(0.99996, Unit::V, 3), "1.00 V");
        assert_eq!(notation(-0.0, Unit::One, 2), "0.0");
        assert_eq!(notation(-1.5, Unit::V, 2), "-1.5 V");
    }
}
