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
            prefixed_case_slip(s).map(|m| format!("units are case-sensitive: did you mean `{m}`?"))
        })
        .or_else(|| {
            if thousands_grouped(s) {
                Some(format!(
                    "write `{}`; if the comma is a decimal comma, write `{}`",
                    s.replace(',', ""),
                    s.replacen(',', ".", 1)
                ))
            } else if s.contains(',') || s.starts_with(',') {
                Some("use a decimal point, not a comma".to_string())
            } else {
                None
            }
        });
    (format!("unknown unit `{s}`"), help)
}

/// A prefixed unit written in the wrong case (`nf`, `KHZ`, `uh`), in its right case. The
/// prefix keeps the case typed when case is what tells it apart (`m` milli, `M` mega).
fn prefixed_case_slip(s: &str) -> Option<String> {
    let mut chars = s.chars();
    let first = chars.next()?;
    let rest = chars.as_str().to_lowercase();
    let prefix = match first {
        'm' | 'M' => first,
        c if prefix_factor(c.to_ascii_lowercase()).is_some() => c.to_ascii_lowercase(),
        _ => return None,
    };
    UNITS
        .iter()
        .find(|(sym, _, _, allowed)| *allowed && sym.to_lowercase() == rest)
        .map(|(sym, ..)| format!("{prefix}{sym}"))
}

/// `1,000` or `12,345.6`: groups of three digits after a comma, as a thousands separator.
fn thousands_grouped(t: &str) -> bool {
    let num = t.split_whitespace().next().unwrap_or("");
    let int = num.split('.').next().unwrap_or("");
    let int = int.strip_prefix(['-', '+']).unwrap_or(int);
    let mut groups = int.split(',');
    let head = groups.next().unwrap_or("");
    let rest: Vec<&str> = groups.collect();
    !rest.is_empty()
        && (1..=3).contains(&head.len())
        && head.chars().all(|c| c.is_ascii_digit())
        && rest
            .iter()
            .all(|g| g.len() == 3 && g.chars().all(|c| c.is_ascii_digit()))
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
        if thousands_grouped(t) {
            return Err(QuantityError::new(
                lead,
                t.len(),
                "a comma in a number is not accepted: this reads as a thousands separator",
                format!("the number without it, `{}`", t.replace(',', "")),
                t,
            ));
        }
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
}
