//! Network `model`: a measurement model written in the notebook (FORMAT.md 1.1). The block
//! header's `model` maps each result name to `{expr, unit}`; the expression reads the block's
//! column symbols, the parts' names (their values, SI) and `pi`, with the functions of
//! [`FUNCTIONS`]. Each expression is compiled once, when the notebook is parsed (the `exmex`
//! crate; only our operators and functions are given to it), and evaluated per group like
//! any built-in network: one propagation for every row result, a block mean per result.

use super::inputs::{part_input, BlockInputs, Spec};
use super::outputs::{Out, Outputs};
use super::Flag;
use super::{AtBlock, BlockResult, Context, Descriptor, NamedResult, PlotData, PlotKind};
use crate::diag::{Diagnostic, Span};
use crate::montecarlo::{
    attach_validation, monte_carlo_on, seed_of, Col, Columns, Eval, InPlace, CHUNK,
};
use crate::notebook::{PartKind, ReadingsBlock, SYMBOLS};
use crate::quantity::Unit;
use crate::uncertainty::{propagate_sparse, McInterval, Propagated};
use exmex::{
    literal_matcher_from_pattern, BinOp, Express, FlatEx, MakeOperators, MatchLiteral, Operator,
};
use rayon::prelude::*;

pub const NETWORK: Descriptor = Descriptor {
    spec: Spec {
        network: "model",
        required: &[],
        optional: &[],
        resistor: false,
    },
    positive: &[],
    // A result named like a part's judged quantity is held against that part.
    judged: &[
        ("C", PartKind::Capacitor),
        ("L", PartKind::Inductor),
        ("R", PartKind::Resistor),
    ],
    plot: PlotKind::Series,
    reduce,
};

/// The functions an expression may call.
pub const FUNCTIONS: &[&str] = &[
    "sqrt", "abs", "exp", "ln", "log10", "sin", "cos", "tan", "asin", "acos", "atan", "atan2",
    "hypot",
];

/// Longest expression text accepted (bytes), deepest nesting of parentheses, most results.
pub const MAX_EXPR: usize = 2048;
pub const MAX_DEPTH: usize = 32;
pub const MAX_RESULTS: usize = 32;

/// The unit words a result may be given.
pub const UNIT_WORDS: &[(&str, Unit)] = &[
    ("F", Unit::F),
    ("H", Unit::H),
    ("ohm", Unit::Ohm),
    ("V", Unit::V),
    ("A", Unit::A),
    ("Hz", Unit::Hz),
    ("rad", Unit::Rad),
    ("1", Unit::One),
    ("%", Unit::Percent),
];

/// Keys of the outputs (the [`Outputs`] names are static); result k is laid out as `KEYS[k]`.
const KEYS: [&str; MAX_RESULTS] = [
    "0", "1", "2", "3", "4", "5", "6", "7", "8", "9", "10", "11", "12", "13", "14", "15", "16",
    "17", "18", "19", "20", "21", "22", "23", "24", "25", "26", "27", "28", "29", "30", "31",
];

/// Our operators: the four arithmetic ones, `^`, the functions and `pi`; nothing else. One
/// list serves the scalar form ([`Ops`]) and the chunk form ([`LaneOps`]), so both read an
/// expression alike; `$bin`/`$un` lift an f64 function to the form's type.
macro_rules! our_operators {
    ($t:ty, $bin:ident, $un:ident, $konst:expr) => {{
        let bin = |apply: fn($t, $t) -> $t, prio: i64, is_commutative: bool| BinOp {
            apply,
            prio,
            is_commutative,
        };
        vec![
            Operator::make_bin("^", bin($bin!(power), 4, false)),
            Operator::make_bin("*", bin($bin!(mul), 2, true)),
            Operator::make_bin("/", bin($bin!(div), 3, false)),
            Operator::make_bin_unary("+", bin($bin!(add), 0, true), $un!(same)),
            Operator::make_bin_unary("-", bin($bin!(sub), 1, false), $un!(neg)),
            Operator::make_bin("atan2", bin($bin!(f64::atan2), 0, false)),
            Operator::make_bin("hypot", bin($bin!(f64::hypot), 0, true)),
            Operator::make_unary("sqrt", $un!(f64::sqrt)),
            Operator::make_unary("abs", $un!(f64::abs)),
            Operator::make_unary("exp", $un!(f64::exp)),
            Operator::make_unary("ln", $un!(f64::ln)),
            Operator::make_unary("log10", $un!(f64::log10)),
            Operator::make_unary("sin", $un!(f64::sin)),
            Operator::make_unary("cos", $un!(f64::cos)),
            Operator::make_unary("tan", $un!(f64::tan)),
            Operator::make_unary("asin", $un!(f64::asin)),
            Operator::make_unary("acos", $un!(f64::acos)),
            Operator::make_unary("atan", $un!(f64::atan)),
            Operator::make_constant("pi", $konst(std::f64::consts::PI)),
        ]
    }};
}

mod dim;
pub use dim::Dim;

/// x^y, with a square as x·x (correctly rounded; `powf` was a quarter of a Monte Carlo run).
fn power(a: f64, b: f64) -> f64 {
    if b == 2.0 {
        a * a
    } else {
        a.powf(b)
    }
}
fn mul(a: f64, b: f64) -> f64 {
    a * b
}
fn div(a: f64, b: f64) -> f64 {
    a / b
}
fn add(a: f64, b: f64) -> f64 {
    a + b
}
fn sub(a: f64, b: f64) -> f64 {
    a - b
}
fn same(a: f64) -> f64 {
    a
}
fn neg(a: f64) -> f64 {
    -a
}

macro_rules! scalar_bin {
    ($f:expr) => {
        $f
    };
}
macro_rules! scalar_un {
    ($f:expr) => {
        $f
    };
}
macro_rules! lane_bin {
    ($f:expr) => {
        |a: Lanes, b: Lanes| a.zip(b, $f)
    };
}
macro_rules! lane_un {
    ($f:expr) => {
        |a: Lanes| a.map($f)
    };
}

#[derive(Clone, Debug)]
pub struct Ops;

impl MakeOperators<f64> for Ops {
    fn make<'a>() -> Vec<Operator<'a, f64>> {
        our_operators!(f64, scalar_bin, scalar_un, |v| v)
    }
}

/// Many trials' values of one quantity at once (a number in the text is one value, applied to
/// every trial). Each trial's result comes from the same f64 operations in the same order as
/// [`Expr::eval`] gives it.
#[derive(Clone, Debug, Default)]
pub struct Lanes(pub Vec<f64>);

impl Lanes {
    fn map(mut self, f: fn(f64) -> f64) -> Lanes {
        self.0.iter_mut().for_each(|v| *v = f(*v));
        self
    }

    fn zip(self, b: Lanes, f: fn(f64, f64) -> f64) -> Lanes {
        let (mut a, b) = (self.0, b.0);
        match (a.len(), b.len()) {
            (n, m) if n == m => a.iter_mut().zip(&b).for_each(|(x, y)| *x = f(*x, *y)),
            (_, 1) => a.iter_mut().for_each(|x| *x = f(*x, b[0])),
            (1, _) => {
                let x = a[0];
                return Lanes(b.into_iter().map(|y| f(x, y)).collect());
            }
            (n, m) => return Lanes(vec![f64::NAN; n.max(m)]),
        }
        Lanes(a)
    }
}

impl std::str::FromStr for Lanes {
    type Err = std::num::ParseFloatError;
    fn from_str(s: &str) -> Result<Lanes, Self::Err> {
        Ok(Lanes(vec![s.parse()?]))
    }
}

#[derive(Clone, Debug)]
pub struct LaneOps;

impl MakeOperators<Lanes> for LaneOps {
    fn make<'a>() -> Vec<Operator<'a, Lanes>> {
        our_operators!(Lanes, lane_bin, lane_un, |v| Lanes(vec![v]))
    }
}

// Decimal numbers with an optional exponent (`2.2e-3`); the crate's own matcher has none.
literal_matcher_from_pattern!(Number, r"^([0-9]+(\.[0-9]*)?|\.[0-9]+)([eE][+-]?[0-9]+)?");

/// One expression, compiled: the text, the crate's flat form and its variables (in the order
/// `eval` takes them), each with where it first appears.
#[derive(Debug, Clone)]
pub struct Expr {
    pub text: String,
    flat: FlatEx<f64, Ops, Number>,
    /// The same text over chunks of Monte Carlo trials.
    lanes: FlatEx<Lanes, LaneOps, Number>,
    /// The same text over dimensions.
    dims: FlatEx<Dim, dim::DimOps, Number>,
    pub vars: Vec<(String, Span)>,
}

impl Expr {
    /// The value with the variables' values in the order of `vars` (NaN on any failure).
    pub fn eval(&self, vals: &[f64]) -> f64 {
        self.flat.eval(vals).unwrap_or(f64::NAN)
    }

    /// The dimension the expression has when its variables (in the order of `vars`) have
    /// theirs.
    pub fn dimension(&self, vars: Vec<Dim>) -> Dim {
        self.dims
            .eval_vec(vars)
            .unwrap_or_else(|e| Dim::Clash(e.to_string()))
    }

    /// [`Self::eval`] of `n` trials at once, each variable's values a column of `n`, into
    /// `out[..n]`.
    pub fn eval_lanes(&self, vals: Vec<Lanes>, n: usize, out: &mut [f64]) {
        let out = &mut out[..n];
        match self.lanes.eval_vec(vals).map(|l| l.0) {
            Ok(v) if v.len() == n => out.copy_from_slice(&v),
            Ok(v) if v.len() == 1 => out.fill(v[0]),
            _ => out.fill(f64::NAN),
        }
    }
}

/// One result of a `model` header: its name, unit and compiled expression.
#[derive(Debug, Clone)]
pub struct ModelResult {
    pub name: String,
    pub name_span: Span,
    pub unit: Unit,
    /// The unit word in the header.
    pub unit_span: Span,
    pub expr: Expr,
    /// The expression's value in the header.
    pub span: Span,
    /// The expression's text in the notebook (`span` when it is not there verbatim).
    pub text_span: Span,
}

/// Where each byte of an expression text lies in the notebook: `start` when the text sits
/// there verbatim (plain or quoted without escapes), else the whole value `span`.
#[derive(Debug, Clone, Copy)]
pub struct Place {
    pub start: Option<usize>,
    pub span: Span,
}

impl Place {
    fn at(&self, a: usize, b: usize) -> Span {
        match self.start {
            Some(s) => Span::new(s + a, s + b.max(a + 1)),
            None => self.span,
        }
    }
}

/// Compiles `text`, allowing as names the column symbols, `parts` (None: any name, when the
/// front matter could not be read) and the functions. Every refusal is at the offending
/// character or name.
pub fn compile(text: &str, place: Place, parts: Option<&[&str]>) -> Result<Expr, Diagnostic> {
    let allowed = || {
        let mut names: Vec<&str> = SYMBOLS.to_vec();
        names.extend(parts.unwrap_or(&[]));
        format!(
            "column symbols and part names ({}), `pi`, and the functions {}",
            names.join(", "),
            FUNCTIONS.join(", ")
        )
    };
    if text.trim().is_empty() {
        return Err(Diagnostic::new(place.span, "the expression is empty")
            .expected("an expression such as `VC * R1 / VR`"));
    }
    if text.len() > MAX_EXPR {
        return Err(Diagnostic::new(place.span, "the expression is too long")
            .expected(format!("at most {MAX_EXPR} characters"))
            .found(format!("{} bytes", text.len())));
    }
    let vars = scan(text, place, parts, &allowed)?;
    if let Some((at, what)) = ambiguous_power(text) {
        return Err(Diagnostic::new(place.at(at, at + 1), what).expected(
            "parentheses that say which is meant: `-(x^2)` or `(-x)^2`, `a^(b^c)` or `(a^b)^c`",
        ));
    }
    let flat = std::panic::catch_unwind(|| FlatEx::<f64, Ops, Number>::parse(text));
    let flat = match flat {
        Ok(Ok(f)) => f,
        Ok(Err(e)) => {
            return Err(
                Diagnostic::new(place.span, "the expression could not be read")
                    .expected("numbers, names, + − * / ^, parentheses and f(x) or f(x, y) calls")
                    .found(e.to_string()),
            )
        }
        Err(_) => {
            return Err(
                Diagnostic::new(place.span, "the expression could not be read")
                    .expected("a well-formed expression"),
            )
        }
    };
    // The same parser with the same operators: this cannot fail where the scalar form did not.
    let forms = std::panic::catch_unwind(|| {
        (
            FlatEx::<Lanes, LaneOps, Number>::parse(text),
            FlatEx::<Dim, dim::DimOps, Number>::parse(text),
        )
    });
    let Ok((Ok(lanes), Ok(dims))) = forms else {
        return Err(
            Diagnostic::new(place.span, "the expression could not be read")
                .expected("a well-formed expression"),
        );
    };
    let ordered: Vec<(String, Span)> = flat
        .var_names()
        .iter()
        .map(|n| {
            let at = vars
                .iter()
                .find(|(v, _)| v == n)
                .map_or(place.span, |v| v.1);
            (n.clone(), at)
        })
        .collect();
    Ok(Expr {
        text: text.to_string(),
        flat,
        lanes,
        dims,
        vars: ordered,
    })
}

/// Where a power is written in a way the crate reads otherwise than written mathematics does,
/// so it is refused rather than read either way: a unary `+` or `−` before an operand raised
/// to a power (`-x^2`: the crate binds the sign first, (−x)², where mathematics gives −(x²)),
/// and a chain of powers (`a^b^c`: the crate reads (a^b)^c, mathematics a^(b^c)).
fn ambiguous_power(text: &str) -> Option<(usize, &'static str)> {
    let b: Vec<(usize, u8)> = text
        .bytes()
        .enumerate()
        .filter(|(_, c)| !c.is_ascii_whitespace())
        .collect();
    let is_word = |c: u8| c.is_ascii_alphanumeric() || c == b'_' || c == b'.';
    // The end of the operand starting at j: a word (with a call's parentheses) or a group.
    let operand_end = |mut j: usize| {
        while j < b.len() && matches!(b[j].1, b'+' | b'-') {
            j += 1;
        }
        while j < b.len() && is_word(b[j].1) {
            j += 1;
        }
        if j < b.len() && b[j].1 == b'(' {
            let mut depth = 0usize;
            while j < b.len() {
                match b[j].1 {
                    b'(' => depth += 1,
                    b')' => {
                        depth = depth.saturating_sub(1);
                        if depth == 0 {
                            return j + 1;
                        }
                    }
                    _ => {}
                }
                j += 1;
            }
        }
        j
    };
    for k in 0..b.len() {
        let (at, c) = b[k];
        let prev = (k > 0).then(|| b[k - 1].1);
        match c {
            b'-' | b'+' => {
                let unary = matches!(
                    prev,
                    None | Some(b'(' | b',' | b'+' | b'-' | b'*' | b'/' | b'^')
                );
                // An exponent's sign inside a number (2.5e-3) is not an operator.
                let in_number =
                    k >= 2 && matches!(prev, Some(b'e' | b'E')) && b[k - 2].1.is_ascii_digit();
                let j = operand_end(k + 1);
                if unary && !in_number && prev != Some(b'^') && j < b.len() && b[j].1 == b'^' {
                    return Some((at, "a sign before a power is ambiguous here"));
                }
            }
            b'^' => {
                let j = operand_end(k + 1);
                if j < b.len() && b[j].1 == b'^' {
                    return Some((b[j].0, "a chain of powers is ambiguous here"));
                }
            }
            _ => {}
        }
    }
    None
}

/// The lexical check before the crate sees the text: allowed characters, nesting depth, and
/// every name one we allow (a function only before `(`). Returns the names read, each at its
/// first place.
fn scan(
    text: &str,
    place: Place,
    parts: Option<&[&str]>,
    allowed: &dyn Fn() -> String,
) -> Result<Vec<(String, Span)>, Diagnostic> {
    let b = text.as_bytes();
    let mut names: Vec<(String, Span)> = Vec::new();
    let (mut i, mut depth) = (0usize, 0usize);
    while i < b.len() {
        let c = b[i];
        if c.is_ascii_digit() || c == b'.' {
            i = number_end(b, i);
            continue;
        }
        if c.is_ascii_alphabetic() || c == b'_' {
            let s = i;
            while i < b.len() && (b[i].is_ascii_alphanumeric() || b[i] == b'_') {
                i += 1;
            }
            let name = &text[s..i];
            let next = text[i..].trim_start().starts_with('(');
            let at = place.at(s, i);
            check_name(name, next, at, parts, allowed)?;
            if !FUNCTIONS.contains(&name) && name != "pi" && !names.iter().any(|n| n.0 == name) {
                names.push((name.to_string(), at));
            }
            continue;
        }
        match c {
            b'(' => {
                depth += 1;
                if depth > MAX_DEPTH {
                    return Err(Diagnostic::new(
                        place.at(i, i + 1),
                        "the expression nests too deeply",
                    )
                    .expected(format!("at most {MAX_DEPTH} levels of parentheses")));
                }
            }
            b')' => depth = depth.saturating_sub(1),
            b'+' | b'-' | b'*' | b'/' | b'^' | b',' | b' ' | b'\t' => {}
            _ => {
                let ch = text[i..].chars().next().unwrap_or(' ');
                return Err(Diagnostic::new(
                    place.at(i, i + ch.len_utf8()),
                    format!("`{ch}` has no meaning in an expression"),
                )
                .expected(format!(
                    "numbers, + - * / ^, parentheses, commas and {}",
                    allowed()
                )));
            }
        }
        i += 1;
    }
    Ok(names)
}

/// The end of the number that starts at `i` (digits, a point, an exponent).
fn number_end(b: &[u8], mut i: usize) -> usize {
    while i < b.len() && (b[i].is_ascii_digit() || b[i] == b'.') {
        i += 1;
    }
    if i < b.len() && (b[i] == b'e' || b[i] == b'E') {
        let mut j = i + 1;
        if j < b.len() && (b[j] == b'+' || b[j] == b'-') {
            j += 1;
        }
        if j < b.len() && b[j].is_ascii_digit() {
            while j < b.len() && b[j].is_ascii_digit() {
                j += 1;
            }
            i = j;
        }
    }
    i
}

/// A name is a function (only before `(`), `pi`, a column symbol or a part.
fn check_name(
    name: &str,
    call: bool,
    at: Span,
    parts: Option<&[&str]>,
    allowed: &dyn Fn() -> String,
) -> Result<(), Diagnostic> {
    let function = FUNCTIONS.contains(&name);
    if function && !call {
        return Err(
            Diagnostic::new(at, format!("the function `{name}` needs its argument"))
                .expected(format!("`{name}(…)`")),
        );
    }
    let value = name == "pi" || SYMBOLS.contains(&name) || parts.is_none_or(|p| p.contains(&name));
    if function || (value && !call) {
        return Ok(());
    }
    let what = if call {
        format!("`{name}` is not a function an expression may call")
    } else {
        format!("`{name}` is no name an expression may use")
    };
    // A near miss among what this place allows: functions for a call, else names.
    let mut known: Vec<&str> = if call {
        FUNCTIONS.to_vec()
    } else {
        let mut k = SYMBOLS.to_vec();
        k.push("pi");
        k.extend(parts.unwrap_or(&[]));
        k
    };
    known.sort_unstable();
    let mut d = Diagnostic::new(at, what)
        .expected(allowed())
        .found(format!("`{name}`"));
    if let Some(s) = crate::notebook::words::suggest(name, &known) {
        d = d.help(s);
    }
    Err(d)
}

/// What each variable of an expression reads.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Source<'a> {
    Frequency,
    Column(&'a str),
    Input(usize),
}

pub fn reduce(ctx: &Context, block: &ReadingsBlock) -> Result<BlockResult, Vec<Diagnostic>> {
    let results = &block.model;
    if results.is_empty() {
        return Err(vec![Diagnostic::new(
            block.span,
            "a `network: model` block needs a `model` in its header",
        )
        .expected("`model:` with result name → `{expr, unit}`")]);
    }
    // The columns the expressions read, each present in the table.
    let mut cols: Vec<&str> = Vec::new();
    let mut diags = Vec::new();
    for r in results {
        for (v, at) in &r.expr.vars {
            if SYMBOLS.contains(&v.as_str()) {
                if block.col(v).is_none() {
                    diags.push(
                        Diagnostic::new(*at, format!("column {v} is not in this block's table"))
                            .expected(format!(
                                "a column headed {v}/… or an expression without {v}"
                            )),
                    );
                } else if v != "f" && !cols.contains(&v.as_str()) {
                    cols.push(v);
                }
            }
        }
    }
    diags.extend(results.iter().filter_map(|r| dimension_check(ctx, r)));
    if !diags.is_empty() {
        return Err(diags);
    }
    let spec = Spec {
        network: "model",
        required: &cols,
        optional: &[],
        resistor: false,
    };
    let mut bi = BlockInputs::build(ctx, block, &spec)?;
    let mut flags = std::mem::take(&mut bi.flags);
    let sources = sources(ctx, block, &mut bi, &mut flags)?;
    let ng = bi.groups.len();
    let mut outs = Outputs::default();
    for g in 0..ng {
        for (k, r) in results.iter().enumerate() {
            outs.row(g, KEYS[k], r.unit);
        }
    }
    let value = |g: usize, k: usize, x: &[f64]| {
        let vals: Vec<f64> = sources[k]
            .iter()
            .map(|s| match *s {
                Source::Frequency => bi.f(g, x),
                Source::Column(c) => bi.voltage(c, g, x),
                Source::Input(i) => x.get(i).copied().unwrap_or(f64::NAN),
            })
            .collect();
        results[k].expr.eval(&vals)
    };
    let key = |n: &str| KEYS.iter().position(|k| *k == n).unwrap_or(usize::MAX);
    let model = |x: &[f64]| {
        outs.eval(
            |g, n| {
                let k = key(n);
                if k < results.len() {
                    value(g, k, x)
                } else {
                    f64::NAN
                }
            },
            |_, _| f64::NAN,
        )
    };
    not_finite_at_estimates(block, &bi, &outs, &model, results)?;
    let shared: Vec<usize> = sources
        .iter()
        .flatten()
        .filter_map(|s| match s {
            Source::Input(i) => Some(*i),
            _ => None,
        })
        .collect();
    let pattern: Vec<Vec<usize>> = outs
        .pattern(&bi)
        .into_iter()
        .map(|mut p| {
            p.extend(&shared);
            p.sort_unstable();
            p.dedup();
            p
        })
        .collect();
    let mut p =
        propagate_sparse(&bi.model(), &model, Some(&pattern), ctx.coverage).at_block(block)?;
    if bi.groups.len() <= crate::montecarlo::MAX_ROWS {
        monte_carlo_rows(ctx, block, &bi, &sources, &outs, &mut p, &mut flags);
    } else {
        flags.push(crate::montecarlo::rows_skipped(bi.groups.len(), block.span));
    }
    let mut block_results = Vec::new();
    for (k, r) in results.iter().enumerate() {
        let idx: Vec<usize> = (0..ng)
            .filter_map(|g| outs.index(Out::Row(g, KEYS[k])))
            .collect();
        let w: Vec<(usize, f64)> = idx.iter().map(|&i| (i, 1.0 / ng as f64)).collect();
        let m = p.linear(&bi.model(), &w, ctx.coverage).at_block(block)?;
        if NETWORK.judged.iter().any(|(n, _)| *n == r.name) {
            let xs: Vec<f64> = idx.iter().map(|&i| p.values[i]).collect();
            let cov = |a: usize, b: usize| p.cov(idx[a], idx[b]);
            flags.extend(super::rl::consistency_flag(&r.name, &xs, &cov, block.span));
        }
        block_results.push(NamedResult {
            name: r.name.clone(),
            f: None,
            unit: r.unit,
            m,
        });
    }
    let mut rows = outs.rows(&p.results, |g| bi.groups.get(g).and_then(|gr| gr.f));
    for row in &mut rows {
        if let Some(r) = results.get(key(&row.name)) {
            row.name = r.name.clone();
        }
    }
    let plot = plot_of(results, &rows);
    Ok(BlockResult {
        id: block.id.clone(),
        network: block.network,
        rows,
        results: block_results,
        correlations: Vec::new(),
        flags,
        plot,
    })
}

/// The dimension a name carries in an expression: a column's by its symbol, a part's by its
/// kind (None: an unknown name, refused elsewhere).
fn dim_of_name(ctx: &Context, name: &str) -> Option<Dim> {
    let unit = symbol_unit(name).or_else(|| {
        Some(match ctx.parts.get(name)?.kind {
            PartKind::Resistor => Unit::Ohm,
            PartKind::Capacitor => Unit::F,
            PartKind::Inductor => Unit::H,
        })
    })?;
    dim::of_unit(unit).map(Dim::Of)
}

/// The SI unit of a column symbol's values (an angle and a fraction of a period are pure).
fn symbol_unit(name: &str) -> Option<Unit> {
    Some(match name {
        "f" => Unit::Hz,
        "I" | "IR" | "IC" | "IL" => Unit::A,
        "phi" | "shift" | "period" => Unit::One,
        v if SYMBOLS.contains(&v) => Unit::V,
        _ => return None,
    })
}

/// A result whose expression cannot have the dimension of its unit is refused at the unit; an
/// expression that has none (volts added to ohms, the sine of a voltage) at the expression.
fn dimension_check(ctx: &Context, r: &ModelResult) -> Option<Diagnostic> {
    let vars: Option<Vec<Dim>> = r
        .expr
        .vars
        .iter()
        .map(|(v, _)| dim_of_name(ctx, v))
        .collect();
    let carried = || {
        let list: Vec<String> = r
            .expr
            .vars
            .iter()
            .filter_map(|(v, _)| match dim_of_name(ctx, v)? {
                Dim::Of(d) => Some(format!("{v} in {}", dim::show(&d))),
                _ => None,
            })
            .collect();
        format!("the names carry their SI units: {}", list.join(", "))
    };
    match r.expr.dimension(vars?) {
        Dim::Clash(why) => Some(
            Diagnostic::new(r.text_span, format!("{} = {} {why}", r.name, r.expr.text))
                .expected("terms of one dimension, and pure numbers as the arguments of exp, ln, log10 and the angle functions")
                .help(carried()),
        ),
        Dim::Of(d) if dim::of_unit(r.unit).is_some_and(|u| u != d) => Some(
            Diagnostic::new(
                r.unit_span,
                format!(
                    "{} = {} has the dimension {}, not that of its unit {}",
                    r.name,
                    r.expr.text,
                    dim::show(&d),
                    r.unit.symbol()
                ),
            )
            .expected(format!("a unit of dimension {}", dim::show(&d)))
            .found(crate::quantity::dimension_name(r.unit).to_string())
            .help(carried()),
        ),
        _ => None,
    }
}

/// Monte Carlo (JCGM 101) of every row's results, each with the §8 check of its GUM
/// interval, as for the coil's rows: one seed per row, the rows in parallel. A trial at
/// which some expression has no value is left out, and the record says how many were.
fn monte_carlo_rows(
    ctx: &Context,
    block: &ReadingsBlock,
    bi: &BlockInputs,
    sources: &[Vec<Source>],
    outs: &Outputs,
    p: &mut Propagated,
    flags: &mut Vec<Flag>,
) {
    let results = &block.model;
    let model = bi.model();
    let p_ro: &Propagated = p;
    let runs: Vec<(usize, Vec<usize>, Vec<McInterval>)> = (0..bi.groups.len())
        .into_par_iter()
        .filter_map(|g| {
            let idx: Option<Vec<usize>> = (0..results.len())
                .map(|k| outs.index(Out::Row(g, KEYS[k])))
                .collect();
            let idx = idx?;
            // Exact results have nothing to draw.
            if idx
                .iter()
                .all(|&i| p_ro.results.get(i).is_none_or(|m| m.u == 0.0))
            {
                return None;
            }
            // The distinct quantities the expressions read, each filled once per chunk.
            let mut kinds: Vec<Source> = Vec::new();
            let at: Vec<Vec<usize>> = sources
                .iter()
                .map(|vars| {
                    vars.iter()
                        .map(|s| match kinds.iter().position(|x| x == s) {
                            Some(j) => j,
                            None => {
                                kinds.push(*s);
                                kinds.len() - 1
                            }
                        })
                        .collect()
                })
                .collect();
            let fill: Vec<ColFill> = kinds.iter().map(|s| col_fill(bi, g, *s)).collect();
            let columns = |c: &Columns, out: &mut [f64], scratch: &mut Vec<f64>| {
                scratch.resize(fill.len() * CHUNK, 0.0);
                for (col, f) in scratch.chunks_exact_mut(CHUNK).zip(&fill) {
                    f(c, col);
                }
                for (k, r) in results.iter().enumerate() {
                    let vals: Vec<Lanes> = at[k]
                        .iter()
                        .map(|&j| Lanes(scratch[j * CHUNK..j * CHUNK + c.len].to_vec()))
                        .collect();
                    r.expr.eval_lanes(vals, c.len, &mut out[k * CHUNK..]);
                }
            };
            let used = p_ro.inputs_of(&idx);
            let mc = monte_carlo_on(
                model.inputs,
                model.corr,
                &used,
                InPlace {
                    outputs: results.len(),
                    eval: Eval::Chunk(&columns),
                },
                ctx.coverage,
                seed_of(&block.id, g as u64),
                None,
            );
            Some((g, idx, mc))
        })
        .collect();
    let mut not_validated: Vec<String> = Vec::new();
    let mut all = runs.len() == bi.groups.len();
    for (g, idx, mc) in runs {
        let grp = bi.groups.get(g);
        let when = grp
            .and_then(|gr| gr.f)
            .map_or_else(|| format!("row {}", g + 1), crate::print::hz);
        flags.extend(mc.first().and_then(|iv| {
            crate::montecarlo::dropped_flag(
                iv,
                &when,
                grp.map(|gr| gr.span),
                "readings at which an expression of the model has no value",
                "the expressions having a value",
            )
        }));
        let mut names = Vec::new();
        for ((&i, interval), r) in idx.iter().zip(mc).zip(results) {
            let Some(m) = p.results.get_mut(i) else {
                continue;
            };
            m.mc = Some(interval);
            if attach_validation(m).is_some_and(|v| !v.validated) && m.u > 0.0 {
                names.push(r.name.as_str());
            }
        }
        all &= names.len() == results.len();
        if !names.is_empty() {
            not_validated.push(format!("{when} ({})", names.join(", ")));
        }
    }
    if all && !not_validated.is_empty() {
        not_validated = vec!["every row, for every result".into()];
    }
    if !not_validated.is_empty() {
        flags.push(Flag {
            warn: false,
            span: Some(block.span),
            message: format!(
                "the GUM and Monte Carlo intervals differ by more than the numerical tolerance (JCGM 101 §8) at {}: the result is not near enough to linear or to normal for the GUM interval, so the record marks those results † and prints their Monte Carlo intervals (probabilistically symmetric, JCGM 101 §7.7.2) under the table",
                not_validated.join("; ")
            ),
        });
    }
}

/// Fills a chunk's column of one quantity an expression reads.
type ColFill<'a> = Box<dyn Fn(&Columns, &mut [f64]) + Sync + 'a>;

fn col_fill<'a>(bi: &'a BlockInputs, g: usize, s: Source<'a>) -> ColFill<'a> {
    match s {
        Source::Frequency => Box::new(move |c: &Columns, out: &mut [f64]| bi.f_cols(g, c, out)),
        Source::Column(sym) => Box::new(bi.voltage_cols(sym, g)),
        Source::Input(i) => Box::new(move |c: &Columns, out: &mut [f64]| {
            let out = &mut out[..c.len];
            match c.col(i) {
                Col::Drawn(v) => out.copy_from_slice(v),
                Col::Fixed(v) => out.fill(v),
            }
        }),
    }
}

/// Per result, what each of its variables reads; the parts named become inputs of `bi`.
fn sources<'b>(
    ctx: &Context,
    block: &'b ReadingsBlock,
    bi: &mut BlockInputs,
    flags: &mut Vec<super::Flag>,
) -> Result<Vec<Vec<Source<'b>>>, Vec<Diagnostic>> {
    let mut parts: Vec<(&str, usize)> = Vec::new();
    let mut out = Vec::new();
    for r in &block.model {
        let mut s = Vec::new();
        for (v, at) in &r.expr.vars {
            let v = v.as_str();
            if v == "f" {
                s.push(Source::Frequency);
            } else if SYMBOLS.contains(&v) {
                s.push(Source::Column(v));
            } else if let Some((_, i)) = parts.iter().find(|(n, _)| *n == v) {
                s.push(Source::Input(*i));
            } else {
                let Some(part) = ctx.parts.get(v) else {
                    return Err(vec![Diagnostic::new(*at, format!("unknown part {v}"))
                        .expected("a name under `parts` in the front matter")]);
                };
                bi.inputs.push(part_input(ctx, part, flags)?);
                parts.push((v, bi.inputs.len() - 1));
                s.push(Source::Input(bi.inputs.len() - 1));
            }
        }
        out.push(s);
    }
    Ok(out)
}

/// A result that is not a finite number at the readings (a division by zero, the root or
/// logarithm of a negative number) is refused at its row, naming the expression.
fn not_finite_at_estimates(
    block: &ReadingsBlock,
    bi: &BlockInputs,
    outs: &Outputs,
    model: &dyn Fn(&[f64]) -> Vec<f64>,
    results: &[ModelResult],
) -> Result<(), Vec<Diagnostic>> {
    let y = model(&bi.estimates());
    let mut d = Vec::new();
    for (k, o, _) in outs.iter() {
        let Out::Row(g, n) = o else { continue };
        if y.get(k).is_some_and(|v| v.is_finite()) {
            continue;
        }
        let Some(r) = KEYS
            .iter()
            .position(|x| *x == n)
            .and_then(|i| results.get(i))
        else {
            continue;
        };
        let at = bi.groups.get(g).map_or(block.span, |gr| gr.span);
        let when = bi
            .groups
            .get(g)
            .and_then(|gr| gr.f)
            .map_or(String::new(), |f| format!(" at {}", crate::print::hz(f)));
        d.push(
            Diagnostic::new(
                at,
                format!(
                    "{} = {} is not a finite number at these readings{when}",
                    r.name, r.expr.text
                ),
            )
            .expected("readings at which the expression has a value (no division by zero, no root or logarithm of a negative number)")
            .help(format!("the expression is set in `model` of block {}", block.id)),
        );
    }
    if d.is_empty() {
        Ok(())
    } else {
        Err(d)
    }
}

/// One series per result against frequency (blocks without `f` have no figure).
fn plot_of(results: &[ModelResult], rows: &[NamedResult]) -> PlotData {
    let mut plot = PlotData::default();
    for r in results {
        let pts: Vec<(f64, f64, f64)> = rows
            .iter()
            .filter(|x| x.name == r.name)
            .filter_map(|x| Some((x.f?, x.m.value, x.m.u)))
            .collect();
        if !pts.is_empty() {
            plot.series.push((r.name.clone(), pts));
        }
    }
    plot
}

#[cfg(test)]
mod tests {
    use super::*;

    fn place() -> Place {
        Place {
            start: Some(100),
            span: Span::new(99, 400),
        }
    }

    fn ok(text: &str) -> Expr {
        compile(text, place(), Some(&["R1", "C1"])).unwrap()
    }

    fn err(text: &str) -> Diagnostic {
        compile(text, place(), Some(&["R1", "C1"])).unwrap_err()
    }

    // Values by hand (exact arithmetic and the functions of f64).
    #[test]
    fn compiles_and_evaluates() {
        let e = ok("VR / (2*pi*f*R1*VC)");
        let names: Vec<&str> = e.vars.iter().map(|v| v.0.as_str()).collect();
        assert_eq!(names, ["R1", "VC", "VR", "f"]);
        let v = e.eval(&[1000.0, 2.0, 1.0, 50.0]);
        let want = 1.0 / (2.0 * std::f64::consts::PI * 50.0 * 1000.0 * 2.0);
        assert!((v - want).abs() <= 1e-15 * want);
        assert_eq!(ok("hypot(3, 4)").eval(&[]), 5.0);
        assert_eq!(ok("atan2(1, 1) * 4").eval(&[]), std::f64::consts::PI);
        assert_eq!(ok("2.5e-3 * 4").eval(&[]), 0.01);
        assert_eq!(
            ok("sqrt(16) + abs(-2) + ln(exp(1)) + log10(100)").eval(&[]),
            9.0
        );
        assert_eq!(ok("2 - 3 - 4").eval(&[]), -5.0);
        assert_eq!(ok("12 / 2 / 3").eval(&[]), 2.0);
        // The usual order of operations (ISO 80000-2 conventions, common practice).
        assert_eq!(ok("6 / 2 * 3").eval(&[]), 9.0);
        assert_eq!(ok("2 * 3 ^ 2").eval(&[]), 18.0);
        assert_eq!(ok("10 - 4 + 3").eval(&[]), 9.0);
        assert_eq!(ok("-(2 ^ 2)").eval(&[]), -4.0);
        assert_eq!(ok("(-2) ^ 2").eval(&[]), 4.0);
        assert_eq!(ok("2 ^ (3 ^ 2)").eval(&[]), 512.0);
        assert_eq!(ok("2 ^ -1").eval(&[]), 0.5);
        assert!(err("2 ^ 3 ^ 2").message.contains("chain of powers"));
        assert_eq!(ok("3 * -2").eval(&[]), -6.0);
        assert_eq!(ok("2.5e-3 ^ 1").eval(&[]), 2.5e-3);
        // `-2^2` reads −4 in written mathematics and 4 in the crate: refused, either way.
        for t in ["-2 ^ 2", "1 + -VR^2", "-(VR)^2", "-sqrt(VR)^2"] {
            assert!(err(t).message.contains("sign before a power"), "{t}");
        }
    }

    // The chunk form gives each trial the scalar form's value to the last bit, with numbers
    // and `pi` applied to every trial, and a constant expression filled out.
    #[test]
    fn chunks_evaluate_as_the_scalar_form() {
        let texts = [
            "sqrt(VR^2 - VC^2) / (2*pi*f*R1*VC)",
            "atan2(VC, VR) - hypot(VR, 3) + R1^0.5 - -VC",
            "abs(ln(VR)) * exp(-VC) / log10(f) + sin(VR) * cos(VC) - tan(R1) + asin(0.5) + acos(VC / 10) + atan(f)",
            "3 / VR - 2 ^ VC + atan2(1, VC)",
            "2 * 3 + pi",
        ];
        for text in texts {
            let e = ok(text);
            let n = 7;
            let cols: Vec<Vec<f64>> = (0..e.vars.len())
                .map(|v| {
                    (0..n)
                        .map(|t| 0.3 + 1.7 * (v as f64) + 0.37 * t as f64)
                        .collect()
                })
                .collect();
            let mut out = vec![0.0; n + 2];
            out[n] = 42.0;
            let lanes: Vec<Lanes> = cols.iter().map(|c| Lanes(c.clone())).collect();
            e.eval_lanes(lanes, n, &mut out);
            for t in 0..n {
                let x: Vec<f64> = cols.iter().map(|c| c[t]).collect();
                let want = e.eval(&x);
                assert!(
                    out[t].to_bits() == want.to_bits(),
                    "{text}, trial {t}: {} vs {want}",
                    out[t]
                );
            }
            assert_eq!(out[n], 42.0, "only n values are written");
        }
        assert_eq!(ok("VR^2").eval(&[3.0]), 9.0);
        assert_eq!(ok("VR^3").eval(&[2.0]), 8.0);
    }

    // Dimensions by the SI's coherent derived units (SI Brochure, 9th ed., Table 4): Ω = V/A,
    // F = A·s/V = s/Ω, H = V·s/A = Ω·s, W = V·A, Hz = 1/s; so 1/(2π√(LC)) is in Hz and ωL in Ω.
    #[test]
    fn dimensions_of_expressions() {
        let dim_of = |text: &str| {
            let e = ok(text);
            let vars: Vec<Dim> = e
                .vars
                .iter()
                .map(|(v, _)| {
                    let u = match v.as_str() {
                        "R1" => Unit::Ohm,
                        "C1" => Unit::F,
                        v => symbol_unit(v).unwrap(),
                    };
                    Dim::Of(dim::of_unit(u).unwrap())
                })
                .collect();
            e.dimension(vars)
        };
        let is = |text: &str, u: Unit| {
            assert_eq!(dim_of(text), Dim::Of(dim::of_unit(u).unwrap()), "{text}");
        };
        is("VR / (2*pi*f*R1*VC)", Unit::F);
        is("VC * R1 / VR", Unit::Ohm);
        is("1 / (2*pi*sqrt(R1*C1*R1*C1))", Unit::Hz);
        is("VR / R1", Unit::A);
        is("VR * I", Unit::W);
        is("VC - 0.002", Unit::V);
        is("hypot(VR, 1) * VR / VR", Unit::V);
        is("VR^(3-1) / VR", Unit::V);
        is("sqrt(VR^2 - VC^2) / VC", Unit::One);
        is("atan2(VR, VC) + phi + 2*pi*shift/period", Unit::One);
        is("abs(-VR)", Unit::V);
        is("R1 * C1", Unit::S);
        assert_eq!(dim_of("2 * 3 ^ 2"), Dim::Num(18.0));
        for (text, why) in [
            ("VR + R1", "adds V and Ω"),
            ("VR - I", "subtracts V and A"),
            ("sin(VR)", "takes sin of a quantity in V"),
            ("ln(R1)", "takes ln of a quantity in Ω"),
            ("VR ^ VC", "raises to a power in V"),
            ("R1 ^ (VR / VC)", "not a written number"),
            ("R1 ^ 0.3", "raises Ω to the power 0.3"),
            ("sqrt(sqrt(R1))", "square root of Ω^(1/2)"),
            ("atan2(VR, I)", "takes atan2 of V and A"),
            ("hypot(R1, C1)", "takes hypot of Ω and F"),
        ] {
            match dim_of(text) {
                Dim::Clash(m) => assert!(m.contains(why), "{text}: {m}"),
                other => panic!("{text}: {other:?}"),
            }
        }
        // Exponents far out of any unit's range saturate rather than overflow.
        let big = vec!["VR^4999"; 9].join(" * ");
        assert!(matches!(dim_of(&big), Dim::Of(_)));
        let small = format!("1 / ({})", big);
        assert!(matches!(dim_of(&small), Dim::Of(_)));
        assert!(matches!(dim_of("VR ^ 1e300"), Dim::Clash(_)));
        assert!(matches!(dim_of("VR ^ (0/0)"), Dim::Clash(_)));
        assert_eq!(dim::show(&[1, 2, -3, -2]), "Ω^(1/2)");
        assert_eq!(dim::show(&[0, 0, 4, 0]), "s^2");
        assert_eq!(dim::show(&[2, 1, 0, 0]), "kg·m^(1/2)");
    }

    #[test]
    fn refusals_are_located_and_say_what_is_allowed() {
        let d = err("VR * foo");
        assert_eq!((d.span.start, d.span.end), (105, 108));
        assert!(d.expected.unwrap().contains("sqrt, abs"));
        let d = err("cosh(VR)");
        assert!(d.message.contains("not a function"), "{}", d.message);
        assert_eq!(d.span.start, 100);
        let d = err("VR + sin");
        assert!(d.message.contains("needs its argument"));
        let d = err("VR ; VC");
        assert_eq!(d.span.start, 103);
        assert!(err("{x} + 1").message.contains("no meaning"));
        assert!(err("π * 2").message.contains("no meaning"));
        assert!(err("E * 2").message.contains("no name"));
        assert!(err("").message.contains("empty"));
        assert!(err(&"(".repeat(40)).message.contains("nests too deeply"));
        assert!(err(&"1+".repeat(MAX_EXPR)).message.contains("too long"));
    }

    // Hostile texts: every one returns (an expression or a diagnostic), none panics.
    #[test]
    fn hostile_texts_never_panic() {
        let cases = [
            "(",
            ")",
            "()",
            "(((VR)))",
            "VR VC",
            "1 2",
            "+",
            "-",
            "*",
            "/",
            "^",
            ",",
            "1,2",
            "atan2(1)",
            "atan2(1,2,3)",
            "hypot(,)",
            "sin()",
            "sin(,)",
            ")(",
            "VR)",
            "(VR",
            "1e",
            "1e+",
            ".",
            "..",
            "1..2",
            "1.2.3",
            "--VR",
            "VR--VC",
            "VR^^2",
            "* VR",
            "VR *",
            "sqrt sqrt",
            "atan2",
            "f(2)",
            "R1(VR)",
            "pi(1)",
            "1e999999",
            "0/0",
            "sqrt(-1)",
            "-(-(-(1)))",
            "atan2(VR, )",
            "hypot(VR VC)",
            "1 + + + 2",
        ];
        for c in cases {
            let _ = compile(c, place(), Some(&["R1"]));
        }
        let deep = format!("{}VR{}", "(".repeat(MAX_DEPTH), ")".repeat(MAX_DEPTH));
        assert!(compile(&deep, place(), None).is_ok());
        let long = format!("VR{}", " + VR".repeat(300));
        assert_eq!(compile(&long, place(), None).unwrap().eval(&[1.0]), 301.0);
    }
}
