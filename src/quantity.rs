//! Numbers with SI prefixes and units; parsing and printing.

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
