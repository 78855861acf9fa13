//! Numbers with SI prefixes and units; parsing and printing.
//!
//! Parsing accepts the prefixes p n u µ m k M (SI Brochure, 9th ed., Table 7) and the units
//! of FORMAT.md. Printing follows GUM (JCGM 100:2008) 7.2.6: at most two significant digits
//! for the uncertainty, the estimate rounded to the same decimal place.

use serde::Serialize;

/// Units a notebook may write. Values held in a [`Quantity`] are always SI:
/// degrees are converted to radians (unit `Rad`), percent to a fraction (unit `Percent`
/// keeps the fact that it was a percentage), `div` stays in divisions.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize)]
pub enum Unit {
    V,
    A,
    Ohm,
    F,
    H,
    Hz,
    S,
    W,
    Rad,
    Div,
    Percent,
    One,
}

impl Unit {
    /// SI symbol as printed in reports and the JSON export.
    pub fn symbol(self) -> &'static str {
        match self {
            Unit::V => "V",
            Unit::A => "A",
            Unit::Ohm => "ohm",
            Unit::F => "F",
            Unit::H => "H",
            Unit::Hz => "Hz",
            Unit::S => "s",
            Unit::W => "W",
            Unit::Rad => "rad",
            Unit::Div => "div",
            Unit::Percent => "%",
            Unit::One => "1",
        }
    }

    /// Symbol for typeset output: `Ω` for the ohm, empty for a pure number.
    pub fn display_symbol(self) -> &'static str {
        match self {
            Unit::Ohm => "Ω",
            Unit::One => "",
            u => u.symbol(),
        }
    }

    /// Whether an SI prefix is used when printing values of this unit.
    pub fn takes_prefix(self) -> bool {
        !matches!(self, Unit::Rad | Unit::Div | Unit::Percent | Unit::One)
    }

    /// Whether two units measure the same kind of quantity (percent is a pure number).
    pub fn same_dimension(self, other: Unit) -> bool {
        self == other
            || matches!(
                (self, other),
                (Unit::Percent, Unit::One) | (Unit::One, Unit::Percent)
            )
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Quantity {
    /// SI value (rad for angles, fraction for percent).
    pub value: f64,
    pub unit: Unit,
}

/// Why a quantity did not parse; `offset`/`len` are byte positions inside the text given.
#[derive(Debug, Clone, PartialEq)]
pub struct QuantityError {
    pub offset: usize,
    pub len: usize,
    pub message: String,
    pub expected: String,
    pub found: String,
}

impl QuantityError {
    fn new(
        offset: usize,
        len: usize,
        message: impl Into<String>,
        expected: impl Into<String>,
        found: impl Into<String>,
    ) -> Self {
        QuantityError {
            offset,
            len,
            message: message.into(),
            expected: expected.into(),
            found: found.into(),
        }
    }
}

const UNIT_HINT: &str = "a unit such as V, mA, kohm, uF, mH, kHz, deg, div or %";

/// Unit symbols without prefix: (symbol, unit, factor to SI, prefix allowed).
const UNITS: &[(&str, Unit, f64, bool)] = &[
    ("V", Unit::V, 1.0, true),
    ("A", Unit::A, 1.0, true),
    ("ohm", Unit::Ohm, 1.0, true),
    ("Ohm", Unit::Ohm, 1.0, true),
    ("ohms", Unit::Ohm, 1.0, true),
    ("\u{03A9}", Unit::Ohm, 1.0, true), // Greek capital omega
    ("\u{2126}", Unit::Ohm, 1.0, true), // OHM SIGN
    ("F", Unit::F, 1.0, true),
    ("H", Unit::H, 1.0, true),
    ("Hz", Unit::Hz, 1.0, true),
    ("s", Unit::S, 1.0, true),
    ("W", Unit::W, 1.0, true),
    ("rad", Unit::Rad, 1.0, true),
    ("deg", Unit::Rad, std::f64::consts::PI / 180.0, false),
    ("\u{00B0}", Unit::Rad, std::f64::consts::PI / 180.0, false), // degree sign
    ("div", Unit::Div, 1.0, false),
    ("%", Unit::Percent, 0.01, false),
];

/// SI prefixes accepted on input (SI Brochure 9th ed. Table 7).
fn prefix_factor(c: char) -> Option<f64> {
    match c {
        'p' => Some(1e-12),
        'n' => Some(1e-9),
        'u' | '\u{00B5}' | '\u{03BC}' => Some(1e-6),
        'm' => Some(1e-3),
        'k' => Some(1e3),
        'M' => Some(1e6),
        _ => None,
    }
}

fn bare_unit(s: &str) -> Option<(f64, Unit, bool)> {
    UNITS
        .iter()
        .find(|(sym, ..)| *sym == s)
        .map(|&(_, u, f, p)| (f, u, p))
}

/// Parses a unit with an optional SI prefix; returns (prefix × conversion factor to SI, unit).
/// `m` alone is no unit; `mV` is millivolt, `MHz` megahertz, `ms` millisecond.
pub fn parse_unit(s: &str) -> Option<(f64, Unit)> {
    if s.is_empty() {
        return None;
    }
    // A whole-string match wins, so `Hz`, `deg`, `div` are never read as prefixed.
    if let Some((f, u, _)) = bare_unit(s) {
        return Some((f, u));
    }
    let mut chars = s.chars();
    let first = chars.next()?;
    let rest = chars.as_str();
    let pf = prefix_factor(first)?;
    match bare_unit(rest) {
        Some((f, u, true)) => Some((pf * f, u)),
        _ => None,
    }
}

/// Explains why `s` is not a unit (for error messages).
fn explain_unit(s: &str) -> (String, Option<String>) {
    let mut chars = s.chars();
    if let Some(first) = chars.next() {
        let rest = chars.as_str();
        if let Some((_, _, allowed)) = bare_unit(rest) {
            if prefix_factor(first).is_some() && !allowed {
                return (format!("unit `{rest}` takes no SI prefix"), None);
            }
            let help = match first {
                'K' => Some("kilo is a lower-case `k`".to_string()),
                'N' | 'P' | 'U' => Some(format!(
                    "prefixes are case-sensitive: did you mean `{}{rest}`?",
                    first.to_ascii_lowercase()
                )),
                _ => None,
            };
            return (format!("unknown SI prefix `{first}`"), help);
        }
    }
    let lower = s.to_lowercase();
    let help = UNITS
        .iter()
        .find(|(sym, ..)| sym.to_lowercase() == lower)
        .map(|(sym, ..)| format!("units are case-sensitive: did you mean `{sym}`?"))
        .or_else(|| {
            if s.contains(',') || s.starts_with(',') {
                Some("use a decimal point, not a comma".to_string())
            } else {
                None
            }
        });
    (format!("unknown unit `{s}`"), help)
}

/// Length in bytes of a leading decimal number (sign, digits, point, exponent), or None.
pub fn number_len(s: &str) -> Option<usize> {
    lex_number(s)
}

fn lex_number(s: &str) -> Option<usize> {
    let b = s.as_bytes();
    let mut i = 0;
    if i < b.len() && (b[i] == b'+' || b[i] == b'-') {
        i += 1;
    }
    let int_start = i;
    while i < b.len() && b[i].is_ascii_digit() {
        i += 1;
    }
    let mut digits = i - int_start;
    if i < b.len() && b[i] == b'.' {
        i += 1;
        let frac_start = i;
        while i < b.len() && b[i].is_ascii_digit() {
            i += 1;
        }
        digits += i - frac_start;
    }
    if digits == 0 {
        return None;
    }
    // Exponent only when followed by digits, so `2 e` is not eaten.
    if i < b.len() && (b[i] == b'e' || b[i] == b'E') {
        let mut j = i + 1;
        if j < b.len() && (b[j] == b'+' || b[j] == b'-') {
            j += 1;
        }
        let exp_start = j;
        while j < b.len() && b[j].is_ascii_digit() {
            j += 1;
        }
        if j > exp_start {
            i = j;
        }
    }
    Some(i)
}

fn is_non_finite_word(s: &str) -> bool {
    let t = s.trim_start_matches(['+', '-']).to_ascii_lowercase();
    let word: String = t.chars().take_while(|c| c.is_ascii_alphabetic()).collect();
    matches!(word.as_str(), "nan" | "inf" | "infinity")
}

/// Parses `number [unit]`, e.g. `0.47 uF`, `-1.5e-3 V`, `40deg`, `2%`. A bare number is
/// `Unit::One`. The value is converted to SI.
pub fn parse_quantity(text: &str) -> Result<Quantity, QuantityError> {
    let lead = text.len() - text.trim_start().len();
    let t = text.trim();
    if t.is_empty() {
        return Err(QuantityError::new(
            0,
            text.len(),
            "empty value",
            "a number with an optional unit",
            "nothing",
        ));
    }
    if is_non_finite_word(t) {
        return Err(QuantityError::new(
            lead,
            t.len(),
            "not a finite number",
            "a finite number",
            t,
        ));
    }
    let n = match lex_number(t) {
        Some(n) => n,
        None => {
            let tok: String = t.chars().take_while(|c| !c.is_whitespace()).collect();
            return Err(QuantityError::new(
                lead,
                tok.len(),
                "not a number",
                "a number such as 2.2, -0.5 or 1.5e-3",
                tok,
            ));
        }
    };
    let num_text = &t[..n];
    let value: f64 = match num_text.parse() {
        Ok(v) => v,
        Err(_) => {
            return Err(QuantityError::new(
                lead,
                n,
                "not a number",
                "a decimal number",
                num_text,
            ))
        }
    };
    if !value.is_finite() {
        return Err(QuantityError::new(
            lead,
            n,
            "number out of range",
            "a finite number",
            num_text,
        ));
    }
    let after = &t[n..];
    let unit_text = after.trim_start();
    let unit_off = lead + n + (after.len() - unit_text.len());
    if unit_text.is_empty() {
        return Ok(Quantity {
            value,
            unit: Unit::One,
        });
    }
    if unit_text.starts_with(',') && unit_text[1..].starts_with(|c: char| c.is_ascii_digit()) {
        return Err(QuantityError::new(
            unit_off,
            unit_text.len(),
            "decimal comma is not accepted; use a decimal point",
            "a number such as 0.47",
            t,
        ));
    }
    match parse_unit(unit_text) {
        Some((factor, unit)) => {
            let v = value * factor;
            if !v.is_finite() {
                return Err(QuantityError::new(
                    lead,
                    t.len(),
                    "number out of range",
                    "a finite number",
                    t,
                ));
            }
            Ok(Quantity { value: v, unit })
        }
        None => {
            let (msg, _) = explain_unit(unit_text);
            Err(QuantityError::new(
                unit_off,
                unit_text.len(),
                msg,
                UNIT_HINT,
                unit_text,
            ))
        }
    }
}

/// A help line for a unit that did not parse (case slips, `K` for kilo, decimal comma).
pub fn unit_help(unit_text: &str) -> Option<String> {
    explain_unit(unit_text.trim()).1
}

/// Why `unit_text` is not a unit, e.g. "unknown SI prefix `x`" or "unknown unit `furlong`".
pub fn unit_problem(unit_text: &str) -> String {
    explain_unit(unit_text.trim()).0
}

/// Parses a cell of a column whose heading has unit `column_unit` with prefix factor
/// `column_factor` (e.g. `VR/mV` is `Unit::V`, 1e-3). A bare number takes the column's unit;
/// a number with its own unit must have the column's dimension.
pub fn parse_in_unit(
    text: &str,
    column_unit: Unit,
    column_factor: f64,
) -> Result<Quantity, QuantityError> {
    let q = parse_quantity(text)?;
    if q.unit == Unit::One && column_unit != Unit::One {
        let v = q.value * column_factor;
        if !v.is_finite() {
            return Err(QuantityError::new(
                0,
                text.len(),
                "number out of range",
                "a finite number",
                text.trim(),
            ));
        }
        return Ok(Quantity {
            value: v,
            unit: column_unit,
        });
    }
    if q.unit.same_dimension(column_unit) {
        return Ok(Quantity {
            value: q.value,
            unit: column_unit,
        });
    }
    let lead = text.len() - text.trim_start().len();
    let t = text.trim();
    let n = lex_number(t).unwrap_or(0);
    let unit_text = t[n..].trim_start();
    let off = lead + (t.len() - unit_text.len());
    Err(QuantityError::new(
        off,
        unit_text.len(),
        format!("unit `{}` does not fit here", unit_text),
        format!("a value in {}", dimension_name(column_unit)),
        unit_text,
    ))
}

/// Words for the kind of quantity a unit measures.
pub fn dimension_name(u: Unit) -> &'static str {
    match u {
        Unit::V => "volts (V)",
        Unit::A => "amperes (A)",
        Unit::Ohm => "ohms (ohm)",
        Unit::F => "farads (F)",
        Unit::H => "henries (H)",
        Unit::Hz => "hertz (Hz)",
        Unit::S => "seconds (s)",
        Unit::W => "watts (W)",
        Unit::Rad => "an angle (deg or rad)",
        Unit::Div => "divisions (div)",
        Unit::Percent => "percent (%)",
        Unit::One => "a pure number",
    }
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

/// Output prefixes, engineering steps (SI Brochure 9th ed. Table 7).
const OUT_PREFIXES: &[(i32, &str)] = &[
    (-12, "p"),
    (-9, "n"),
    (-6, "µ"),
    (-3, "m"),
    (0, ""),
    (3, "k"),
    (6, "M"),
];

/// Exponent (multiple of 3, clamped to p..M) that puts |x| in [1, 1000).
fn prefix_exp(x: f64) -> i32 {
    if x == 0.0 || !x.is_finite() {
        return 0;
    }
    let e = x.abs().log10().floor() as i32;
    (e.div_euclid(3) * 3).clamp(-12, 6)
}

fn prefix_symbol(exp: i32) -> &'static str {
    OUT_PREFIXES
        .iter()
        .find(|(e, _)| *e == exp)
        .map(|(_, s)| *s)
        .unwrap_or("")
}

fn join_unit(num: String, exp: i32, unit: Unit) -> String {
    let sym = unit.display_symbol();
    let p = if unit.takes_prefix() {
        prefix_symbol(exp)
    } else {
        ""
    };
    match unit {
        Unit::One => num,
        Unit::Percent => format!("{num} %"),
        _ => format!("{num} {p}{sym}"),
    }
}

/// Fixed-point text without a negative zero.
fn fixed(x: f64, decimals: usize) -> String {
    let s = format!("{:.*}", decimals, x);
    if s.starts_with('-') && s[1..].chars().all(|c| c == '0' || c == '.') {
        s[1..].to_string()
    } else {
        s
    }
}

/// Value in display scale: percent shown as percent, others divided by their prefix.
fn display_scale(value: f64, unit: Unit) -> (f64, i32) {
    match unit {
        Unit::Percent => (value * 100.0, 0),
        u if u.takes_prefix() => {
            let e = prefix_exp(value);
            (value / 10f64.powi(e), e)
        }
        _ => (value, 0),
    }
}

/// `value` with `sig` significant figures and one SI prefix, e.g. `470 nF`, `1.00 kΩ`.
/// Non-finite values print as `n/a`.
pub fn format_si(value: f64, unit: Unit, sig: usize) -> String {
    if !value.is_finite() {
        return "n/a".to_string();
    }
    let sig = sig.clamp(1, 17);
    let (mut scaled, mut exp) = display_scale(value, unit);
    scaled = round_sig(scaled, sig);
    // Rounding may carry into the next prefix (999.7 → 1000 → 1.00 k).
    if unit.takes_prefix() && scaled.abs() >= 1000.0 && exp < 6 {
        exp += 3;
        scaled = round_sig(value / 10f64.powi(exp), sig);
    }
    let decimals = if scaled == 0.0 {
        sig.saturating_sub(1)
    } else {
        let e = scaled.abs().log10().floor() as i32;
        (sig as i32 - 1 - e).max(0) as usize
    };
    join_unit(fixed(scaled, decimals), exp, unit)
}

/// `value ± U unit` per GUM 7.2.6: U to two significant figures, the value to the same
/// decimal place, one prefix chosen from the value's magnitude (from U's when the value is 0).
/// U = 0 prints the value alone (six significant figures); a non-finite or negative U prints
/// `± n/a`; a non-finite value prints `n/a`.
pub fn format_value_u(value: f64, expanded_u: f64, unit: Unit) -> String {
    if !value.is_finite() {
        return "n/a".to_string();
    }
    if !expanded_u.is_finite() || expanded_u < 0.0 {
        return format!("{} ± n/a", format_si(value, unit, 4));
    }
    if expanded_u == 0.0 {
        return format_si(value, unit, 6);
    }
    // The prefix follows the larger of |value| and U: "0 ± 14 mV", not "0 ± 14000 µV".
    let pick = value.abs().max(expanded_u);
    let (_, exp) = display_scale(pick, unit);
    let scale = |x: f64| match unit {
        Unit::Percent => x * 100.0,
        u if u.takes_prefix() => x / 10f64.powi(exp),
        _ => x,
    };
    let (v, uu) = (scale(value), scale(expanded_u));
    // Two significant digits of U fix the last decimal place shown.
    let ur = round_sig(uu, 2);
    let fallback = || {
        format!(
            "{} ± {}",
            format_si(value, unit, 4),
            format_si(expanded_u, unit, 2)
        )
    };
    if !v.is_finite() || !ur.is_finite() || ur <= 0.0 {
        return fallback();
    }
    let last = ur.log10().floor() as i32 - 1;
    if last < -40 {
        return fallback();
    }
    let vr = round_to_place(v, last);
    if !vr.is_finite() {
        return fallback();
    }
    let decimals = (-last).max(0) as usize;
    // The minus sign of ISO 80000-1 (U+2212), as the record's tables print it.
    let num = format!("{} ± {}", fixed(vr, decimals), fixed(ur, decimals)).replace('-', "−");
    match unit {
        Unit::One => num,
        Unit::Percent => format!("({num}) %"),
        _ => {
            let p = if unit.takes_prefix() {
                prefix_symbol(exp)
            } else {
                ""
            };
            // GUM 7.2.4's form: the unit applies to both, so the pair is bracketed.
            format!("({num}) {p}{}", unit.display_symbol())
        }
    }
}

/// Rounds `x` to the decade 10^place (place −2 → hundredths).
fn round_to_place(x: f64, place: i32) -> f64 {
    if place >= 0 {
        let m = 10f64.powi(place);
        (x / m).round() * m
    } else {
        let m = 10f64.powi(-place);
        (x * m).round() / m
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() <= 1e-12 * b.abs().max(1e-300)
    }

    // Prefix factors: SI Brochure, 9th ed. (2019), Table 7.
    #[test]
    fn prefixes_follow_si_brochure() {
        let cases = [
            ("pF", 1e-12, Unit::F),
            ("nF", 1e-9, Unit::F),
            ("uF", 1e-6, Unit::F),
            ("\u{00B5}F", 1e-6, Unit::F),
            ("\u{03BC}F", 1e-6, Unit::F),
            ("mH", 1e-3, Unit::H),
            ("kohm", 1e3, Unit::Ohm),
            ("M\u{03A9}", 1e6, Unit::Ohm),
            ("k\u{2126}", 1e3, Unit::Ohm),
            ("MHz", 1e6, Unit::Hz),
            ("mV", 1e-3, Unit::V),
            ("ms", 1e-3, Unit::S),
            ("mA", 1e-3, Unit::A),
            ("mW", 1e-3, Unit::W),
            ("mrad", 1e-3, Unit::Rad),
        ];
        for (s, f, u) in cases {
            let (pf, pu) = parse_unit(s).unwrap_or_else(|| panic!("{s} should parse"));
            assert!(close(pf, f), "{s}: {pf} vs {f}");
            assert_eq!(pu, u, "{s}");
        }
    }

    // Ambiguity: `m` is a prefix only (SI Brochure 3.1: a prefix never stands alone);
    // `Hz`, `s`, `div` are whole units. Prefix case matters (M mega vs m milli).
    #[test]
    fn unit_ambiguities() {
        assert_eq!(parse_unit("m"), None);
        assert_eq!(parse_unit("k"), None);
        assert_eq!(parse_unit(""), None);
        assert_eq!(parse_unit("Hz"), Some((1.0, Unit::Hz)));
        assert_eq!(parse_unit("s"), Some((1.0, Unit::S)));
        assert_eq!(parse_unit("div"), Some((1.0, Unit::Div)));
        assert_eq!(parse_unit("mdiv"), None);
        assert_eq!(parse_unit("kdeg"), None);
        assert_eq!(parse_unit("KHz"), None);
        assert_eq!(parse_unit("mhz"), None);
        let (f, u) = parse_unit("deg").unwrap();
        assert_eq!(u, Unit::Rad);
        // 1° = π/180 rad, SI Brochure Table 8.
        assert!(close(f, std::f64::consts::PI / 180.0));
        assert_eq!(parse_unit("%"), Some((0.01, Unit::Percent)));
    }

    #[test]
    fn quantities_parse_to_si() {
        let q = parse_quantity("0.47 uF").unwrap();
        assert!(close(q.value, 0.47e-6) && q.unit == Unit::F);
        let q = parse_quantity("  -1.5e-3 V ").unwrap();
        assert!(close(q.value, -1.5e-3) && q.unit == Unit::V);
        let q = parse_quantity("+2.5E3Hz").unwrap();
        assert!(close(q.value, 2500.0) && q.unit == Unit::Hz);
        let q = parse_quantity("40deg").unwrap();
        assert!(close(q.value, 40.0 * std::f64::consts::PI / 180.0) && q.unit == Unit::Rad);
        let q = parse_quantity("2%").unwrap();
        assert!(close(q.value, 0.02) && q.unit == Unit::Percent);
        let q = parse_quantity(".5").unwrap();
        assert!(close(q.value, 0.5) && q.unit == Unit::One);
        let q = parse_quantity("3.").unwrap();
        assert!(close(q.value, 3.0));
        let q = parse_quantity("1.2 M\u{03A9}").unwrap();
        assert!(close(q.value, 1.2e6) && q.unit == Unit::Ohm);
    }

    #[test]
    fn bad_quantities_have_precise_offsets() {
        for s in ["NaN", "nan", "inf", "-Infinity", "+INF V"] {
            let e = parse_quantity(s).unwrap_err();
            assert!(e.message.contains("finite"), "{s}: {}", e.message);
        }
        let e = parse_quantity("").unwrap_err();
        assert_eq!(e.message, "empty value");
        let e = parse_quantity("abc").unwrap_err();
        assert_eq!((e.offset, e.len, e.found.as_str()), (0, 3, "abc"));
        let e = parse_quantity("  12 xV").unwrap_err();
        assert_eq!((e.offset, e.len), (5, 2));
        assert!(e.message.contains("prefix `x`"), "{}", e.message);
        let e = parse_quantity("4.7 Kohm").unwrap_err();
        assert_eq!((e.offset, e.len), (4, 4));
        assert_eq!(
            unit_help("Kohm").as_deref(),
            Some("kilo is a lower-case `k`")
        );
        let e = parse_quantity("3 furlongs").unwrap_err();
        assert_eq!((e.offset, e.len, e.found.as_str()), (2, 8, "furlongs"));
        assert!(e.message.contains("unknown unit"));
        let e = parse_quantity("0,47 uF").unwrap_err();
        assert!(e.message.contains("decimal comma"));
        let e = parse_quantity("1e999").unwrap_err();
        assert!(e.message.contains("out of range"));
        let e = parse_quantity("1e308 MHz").unwrap_err();
        assert!(e.message.contains("out of range"));
        let e = parse_quantity("µ").unwrap_err();
        assert_eq!(e.len, "µ".len());
        let e = parse_quantity("5 mdeg").unwrap_err();
        assert!(e.message.contains("no SI prefix"), "{}", e.message);
    }

    #[test]
    fn column_units() {
        // Heading VR/mV: bare 12 means 12 mV.
        let q = parse_in_unit("12", Unit::V, 1e-3).unwrap();
        assert!(close(q.value, 0.012) && q.unit == Unit::V);
        let q = parse_in_unit("0.5 V", Unit::V, 1e-3).unwrap();
        assert!(close(q.value, 0.5));
        let q = parse_in_unit("30", Unit::Rad, std::f64::consts::PI / 180.0).unwrap();
        assert!(close(q.value, std::f64::consts::PI / 6.0));
        let e = parse_in_unit("  2 mA", Unit::V, 1.0).unwrap_err();
        assert_eq!((e.offset, e.len, e.found.as_str()), (4, 2, "mA"));
        assert!(e.expected.contains("volts"));
        assert!(parse_in_unit("nan", Unit::V, 1.0).is_err());
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
            format_value_u(100.02147, 2.26 * 0.00035, Unit::One),
            "100.02147 ± 0.00079"
        );
        assert_eq!(
            format_value_u(100.02147, 0.00035, Unit::One),
            "100.02147 ± 0.00035"
        );
    }

    // GUM 7.2.6: two significant digits for U, the estimate rounded to match.
    #[test]
    fn gum_7_2_6_digits_and_prefix() {
        assert_eq!(
            format_value_u(47.1312e-9, 0.2468e-9, Unit::F),
            "(47.13 ± 0.25) nF"
        );
        assert_eq!(
            format_value_u(1234.5678, 12.3, Unit::Ohm),
            "(1.235 ± 0.012) kΩ"
        );
        assert_eq!(
            format_value_u(2.71828e-3, 0.0000161, Unit::H),
            "(2.718 ± 0.016) mH"
        );
        assert_eq!(format_value_u(468.72, 23.4, Unit::Hz), "(469 ± 23) Hz");
        assert_eq!(format_value_u(523.0, 147.0, Unit::V), "(520 ± 150) V");
        // Carry of U to the next decade: 0.996 → 1.0.
        assert_eq!(format_value_u(5.4321, 0.996, Unit::A), "(5.4 ± 1.0) A");
        // The prefix follows the unrounded value; no carry into the next prefix.
        assert_eq!(
            format_value_u(999.9996, 0.012, Unit::Hz),
            "(1000.000 ± 0.012) Hz"
        );
        assert_eq!(format_value_u(0.0, 3.3e-6, Unit::V), "(0.0 ± 3.3) µV");
        assert_eq!(
            format_value_u(-0.61, 0.034, Unit::Rad),
            "(−0.610 ± 0.034) rad"
        );
        assert_eq!(
            format_value_u(0.0123, 0.00456, Unit::Percent),
            "(1.23 ± 0.46) %"
        );
        assert_eq!(format_value_u(-0.0004, 0.02, Unit::One), "0.000 ± 0.020");
    }

    #[test]
    fn degenerate_inputs_do_not_panic() {
        assert_eq!(format_value_u(f64::NAN, 1.0, Unit::V), "n/a");
        assert_eq!(format_value_u(1.5, f64::INFINITY, Unit::V), "1.500 V ± n/a");
        assert_eq!(format_value_u(1.5, 0.0, Unit::V), "1.50000 V");
        assert_eq!(format_si(f64::INFINITY, Unit::V, 3), "n/a");
        assert_eq!(format_si(0.0, Unit::V, 3), "0.00 V");
        for (v, u) in [
            (1e300, 1e-300),
            (1e-300, 1e300),
            (f64::MIN_POSITIVE, f64::MIN_POSITIVE),
            (5e-324, 5e-324),
            (-1e308, 1e308),
        ] {
            let s = format_value_u(v, u, Unit::F);
            assert!(!s.contains("NaN") && !s.contains("inf"), "{s}");
        }
    }

    #[test]
    fn format_si_examples() {
        assert_eq!(format_si(4.7e-7, Unit::F, 3), "470 nF");
        assert_eq!(format_si(1000.0, Unit::Ohm, 3), "1.00 kΩ");
        assert_eq!(format_si(999.96, Unit::Hz, 3), "1.00 kHz");
        assert_eq!(format_si(0.0331, Unit::H, 2), "33 mH");
        assert_eq!(format_si(1.5e9, Unit::Hz, 2), "1500 MHz");
        assert_eq!(format_si(0.05, Unit::Div, 1), "0.05 div");
        assert_eq!(format_si(0.025, Unit::Percent, 2), "2.5 %");
    }
}
