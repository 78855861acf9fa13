//! The dimension of a written model's expression, so that a result whose expression cannot have
//! its stated unit is refused. A dimension is a product of powers of the SI base units kg, m, s
//! and A (ISO 80000-1; the four are all these networks need). The expression is read by the
//! same parser with the same operators as its value, over [`Dim`] instead of f64.
//!
//! Conventions: a number is a pure number in a product, a quotient or a power (`2*pi*f`), but
//! next to a quantity in a sum or difference it is taken in that quantity's SI unit (`VC - 0.002`,
//! FORMAT.md's inputs being in SI). The arguments of exp, ln, log10 and the angle functions
//! must be pure numbers (ISO 80000-1, from memory).

use super::{BinOp, MakeOperators, Operator};

/// Exponents of kg, m, s, A, each doubled so that a square root of any dimension has one.
pub type Exps = [i16; 4];

const PURE: Exps = [0; 4];

/// What an expression (or part of it) is, dimensionally.
#[derive(Clone, Debug, PartialEq)]
pub enum Dim {
    /// A number written in the text, or an expression of such numbers only (with its value,
    /// which a power's exponent needs).
    Num(f64),
    /// A quantity of these (doubled) exponents.
    Of(Exps),
    /// Why the expression has no dimension: the first mismatch met.
    Clash(String),
}

impl Default for Dim {
    fn default() -> Self {
        Dim::Num(0.0)
    }
}

impl std::str::FromStr for Dim {
    type Err = std::num::ParseFloatError;
    fn from_str(s: &str) -> Result<Dim, Self::Err> {
        Ok(Dim::Num(s.parse()?))
    }
}

/// The dimension of a unit a result or a column may have (None: not checked).
pub fn of_unit(u: crate::quantity::Unit) -> Option<Exps> {
    use crate::quantity::Unit;
    let e = |kg: i16, m: i16, s: i16, a: i16| Some([2 * kg, 2 * m, 2 * s, 2 * a]);
    match u {
        Unit::V => e(1, 2, -3, -1),
        Unit::A => e(0, 0, 0, 1),
        Unit::Ohm => e(1, 2, -3, -2),
        Unit::F => e(-1, -2, 4, 2),
        Unit::H => e(1, 2, -2, -2),
        Unit::Hz => e(0, 0, -1, 0),
        Unit::S => e(0, 0, 1, 0),
        Unit::W => e(1, 2, -3, 0),
        Unit::Rad | Unit::Div | Unit::Percent | Unit::One => Some(PURE),
    }
}

/// A dimension as a reader writes it: a named unit where one fits, else base-unit powers.
pub fn show(d: &Exps) -> String {
    use crate::quantity::Unit;
    const NAMED: [(Unit, &str); 8] = [
        (Unit::V, "V"),
        (Unit::A, "A"),
        (Unit::Ohm, "Ω"),
        (Unit::F, "F"),
        (Unit::H, "H"),
        (Unit::Hz, "Hz"),
        (Unit::W, "W"),
        (Unit::S, "s"),
    ];
    if *d == PURE {
        return "1 (a pure number)".into();
    }
    // A named unit, or a whole or half power of one (Ω^(1/2), V^2, Hz^-1 is s so comes later).
    for (u, n) in NAMED {
        let Some(e) = of_unit(u) else { continue };
        let Some(i) = e.iter().position(|&x| x != 0) else {
            continue;
        };
        let twice = 2 * d[i] / e[i];
        if 2 * d[i] % e[i] == 0 && (0..4).all(|k| 2 * d[k] == twice * e[k]) && twice > 0 {
            return match twice {
                2 => n.to_string(),
                t if t % 2 == 0 => format!("{n}^{}", t / 2),
                t => format!("{n}^({t}/2)"),
            };
        }
    }
    let parts: Vec<String> = ["kg", "m", "s", "A"]
        .iter()
        .zip(d)
        .filter(|(_, e)| **e != 0)
        .map(|(b, e)| match (e % 2 == 0, *e) {
            (true, 2) => (*b).to_string(),
            (true, e) => format!("{b}^{}", e / 2),
            (false, e) => format!("{b}^({e}/2)"),
        })
        .collect();
    parts.join("·")
}

fn of(d: &Dim) -> Option<Exps> {
    match d {
        Dim::Num(_) => Some(PURE),
        Dim::Of(e) => Some(*e),
        Dim::Clash(_) => None,
    }
}

/// Terms of a sum (or the two arguments of atan2 and hypot): one dimension, a number taking
/// the other's. `value` combines two numbers.
fn alike(a: Dim, b: Dim, what: &str, value: fn(f64, f64) -> f64) -> Dim {
    match (a, b) {
        (c @ Dim::Clash(_), _) | (_, c @ Dim::Clash(_)) => c,
        (Dim::Num(x), Dim::Num(y)) => Dim::Num(value(x, y)),
        (Dim::Num(_), d) | (d, Dim::Num(_)) => d,
        (Dim::Of(x), Dim::Of(y)) if x == y => Dim::Of(x),
        (Dim::Of(x), Dim::Of(y)) => Dim::Clash(format!("{what} {} and {}", show(&x), show(&y))),
    }
}

fn add(a: Dim, b: Dim) -> Dim {
    alike(a, b, "adds", |x, y| x + y)
}

fn sub(a: Dim, b: Dim) -> Dim {
    alike(a, b, "subtracts", |x, y| x - y)
}

fn hypot(a: Dim, b: Dim) -> Dim {
    alike(a, b, "takes hypot of", f64::hypot)
}

fn atan2(a: Dim, b: Dim) -> Dim {
    match alike(a, b, "takes atan2 of", f64::atan2) {
        Dim::Of(_) => Dim::Of(PURE),
        other => other,
    }
}

/// A product (`sign` 1) or quotient (−1).
fn product(a: Dim, b: Dim, sign: i16, value: fn(f64, f64) -> f64) -> Dim {
    match (a, b) {
        (c @ Dim::Clash(_), _) | (_, c @ Dim::Clash(_)) => c,
        (Dim::Num(x), Dim::Num(y)) => Dim::Num(value(x, y)),
        (a, b) => {
            let (x, y) = (of(&a).unwrap_or(PURE), of(&b).unwrap_or(PURE));
            // Saturating: only an absurd expression gets there, and no unit is that far out.
            Dim::Of(std::array::from_fn(|i| {
                x[i].saturating_add(y[i].saturating_mul(sign))
            }))
        }
    }
}

fn mul(a: Dim, b: Dim) -> Dim {
    product(a, b, 1, |x, y| x * y)
}

fn div(a: Dim, b: Dim) -> Dim {
    product(a, b, -1, |x, y| x / y)
}

/// `d` raised to `e`, when every exponent stays a whole or half one.
fn raise(d: Exps, e: f64) -> Option<Dim> {
    let scaled: Vec<f64> = d.iter().map(|&x| f64::from(x) * e).collect();
    scaled
        .iter()
        .all(|x| x.fract() == 0.0 && x.abs() < 3e4)
        .then(|| Dim::Of(std::array::from_fn(|i| scaled[i] as i16)))
}

fn power(a: Dim, b: Dim) -> Dim {
    match (a, b) {
        (c @ Dim::Clash(_), _) | (_, c @ Dim::Clash(_)) => c,
        (Dim::Num(x), Dim::Num(y)) => Dim::Num(super::power(x, y)),
        (Dim::Of(d), Dim::Num(e)) => raise(d, e).unwrap_or_else(|| {
            Dim::Clash(format!(
                "raises {} to the power {e}, which leaves no whole or half exponents",
                show(&d)
            ))
        }),
        (_, Dim::Of(e)) if e != PURE => Dim::Clash(format!("raises to a power in {}", show(&e))),
        (Dim::Num(_), _) => Dim::Of(PURE),
        (Dim::Of(d), _) if d == PURE => Dim::Of(PURE),
        (Dim::Of(d), _) => Dim::Clash(format!(
            "raises {} to a power that is not a written number",
            show(&d)
        )),
    }
}

fn same(a: Dim) -> Dim {
    a
}

fn neg(a: Dim) -> Dim {
    match a {
        Dim::Num(x) => Dim::Num(-x),
        other => other,
    }
}

fn abs(a: Dim) -> Dim {
    match a {
        Dim::Num(x) => Dim::Num(x.abs()),
        other => other,
    }
}

fn sqrt(a: Dim) -> Dim {
    match a {
        Dim::Num(x) => Dim::Num(x.sqrt()),
        Dim::Of(d) => raise(d, 0.5).unwrap_or_else(|| {
            Dim::Clash(format!(
                "takes the square root of {}, which leaves no whole or half exponents",
                show(&d)
            ))
        }),
        c => c,
    }
}

/// A function whose argument must be a pure number (and whose value is one).
fn pure(a: Dim, f: fn(f64) -> f64, name: &str) -> Dim {
    match a {
        Dim::Num(x) => Dim::Num(f(x)),
        Dim::Of(d) if d == PURE => Dim::Of(PURE),
        Dim::Of(d) => Dim::Clash(format!(
            "takes {name} of a quantity in {}, where a pure number is needed",
            show(&d)
        )),
        c => c,
    }
}

macro_rules! dim_bin {
    (power) => {
        power
    };
    (mul) => {
        mul
    };
    (div) => {
        div
    };
    (add) => {
        add
    };
    (sub) => {
        sub
    };
    (f64::atan2) => {
        atan2
    };
    (f64::hypot) => {
        hypot
    };
}

macro_rules! dim_un {
    (same) => {
        same
    };
    (neg) => {
        neg
    };
    (f64::sqrt) => {
        sqrt
    };
    (f64::abs) => {
        abs
    };
    (f64::$f:ident) => {
        |a: Dim| pure(a, f64::$f, stringify!($f))
    };
}

#[derive(Clone, Debug)]
pub struct DimOps;

impl MakeOperators<Dim> for DimOps {
    fn make<'a>() -> Vec<Operator<'a, Dim>> {
        our_operators!(Dim, dim_bin, dim_un, Dim::Num)
    }
}
