//! Typed values read out of YAML (text, quantities, dates, mappings), each problem reported
//! at its span.

use super::front::parse_iso_date;
use super::words::{list, short, suggest, unknown};
use super::yaml::{kind_name, YamlLocator};
use super::Named;
use crate::diag::{Diagnostic, Span};
use crate::quantity::{self, dimension_name, parse_quantity, Quantity, QuantityError, Unit};
use chrono::NaiveDate;
use serde_yaml::Value;
use std::collections::BTreeSet;

// ---------------------------------------------------------------------------------------------
// Typed extraction from YAML values.

pub(super) struct ValueReader<'a, 'b> {
    pub(super) y: &'a YamlLocator<'a>,
    pub(super) d: &'b mut Vec<Diagnostic>,
    /// "front matter" or "block header", for messages.
    pub(super) what: &'static str,
}

impl ValueReader<'_, '_> {
    pub(super) fn err(&mut self, d: Diagnostic) {
        self.d.push(d);
    }

    /// Text of a scalar; numbers keep their spelling from the source.
    pub(super) fn text_of(&self, path: &[&str], v: &Value) -> Option<String> {
        match v {
            Value::String(s) => Some(s.clone()),
            Value::Number(n) => {
                let span = self.y.value_span(path);
                let raw = self.y.src[span.start..span.end].trim();
                let same = raw
                    .parse::<f64>()
                    .ok()
                    .zip(n.as_f64())
                    .is_some_and(|(a, b)| a == b);
                Some(if same { raw.to_string() } else { n.to_string() })
            }
            Value::Bool(b) => Some(b.to_string()),
            _ => None,
        }
    }

    pub(super) fn text(&mut self, path: &[&str], v: &Value) -> Option<String> {
        match self.text_of(path, v) {
            Some(s) => Some(s),
            None => {
                let span = self.y.value_span(path);
                self.err(
                    Diagnostic::new(
                        span,
                        format!("`{}` must be text", path.last().unwrap_or(&"")),
                    )
                    .expected("text")
                    .found(kind_name(v)),
                );
                None
            }
        }
    }

    pub(super) fn nonempty_text(&mut self, path: &[&str], v: &Value) -> Option<String> {
        let s = self.text(path, v)?;
        if s.trim().is_empty() {
            let span = self.y.value_span(path);
            self.err(
                Diagnostic::new(span, format!("`{}` is empty", path.last().unwrap_or(&"")))
                    .expected("some text"),
            );
            return None;
        }
        Some(s)
    }

    pub(super) fn quantity_error(&mut self, path: &[&str], text: &str, e: QuantityError) {
        let span = self.y.value_span(path);
        let at = self.y.quantity_span(span, text, &e);
        let mut d = Diagnostic::new(
            at,
            format!("`{}`: {}", path.last().unwrap_or(&""), e.message),
        )
        .expected(e.expected)
        .found(format!("`{}`", e.found));
        if let Some(h) = quantity::unit_help(&e.found) {
            d = d.help(h);
        }
        self.err(d);
    }

    /// A quantity that must carry a unit of one of `units` (bare numbers take `bare` if given).
    pub(super) fn quantity(
        &mut self,
        path: &[&str],
        v: &Value,
        units: &[Unit],
        bare: Option<Unit>,
    ) -> Option<Quantity> {
        let text = self.text(path, v)?;
        let q = match parse_quantity(&text) {
            Ok(q) => q,
            Err(e) => {
                self.quantity_error(path, &text, e);
                return None;
            }
        };
        let key = path.last().copied().unwrap_or("");
        let want = units
            .iter()
            .map(|u| dimension_name(*u))
            .collect::<Vec<_>>()
            .join(" or ");
        if q.unit == Unit::One {
            if let Some(b) = bare {
                return Some(Quantity {
                    value: q.value,
                    unit: b,
                });
            }
            let span = self.y.value_span(path);
            self.err(
                Diagnostic::new(span, format!("`{key}` needs a unit"))
                    .expected(format!("a value in {want}"))
                    .found(format!("`{}`", text.trim()))
                    .help(bare_number_help(text.trim(), units.first().copied())),
            );
            return None;
        }
        if !units.iter().any(|u| u.same_dimension(q.unit)) {
            let span = self.y.value_span(path);
            self.err(
                Diagnostic::new(span, format!("`{key}` has the wrong unit"))
                    .expected(format!("a value in {want}"))
                    .found(format!("`{}`", text.trim())),
            );
            return None;
        }
        Some(q)
    }

    pub(super) fn positive(
        &mut self,
        path: &[&str],
        q: Option<Quantity>,
        what: &str,
    ) -> Option<Quantity> {
        let q = q?;
        if q.value > 0.0 {
            return Some(q);
        }
        let span = self.y.value_span(path);
        let text = self.y.src[span.start..span.end].to_string();
        self.err(
            Diagnostic::new(span, format!("{what} must be greater than zero"))
                .expected("a positive value")
                .found(format!("`{text}`")),
        );
        None
    }

    pub(super) fn date(&mut self, path: &[&str], v: &Value) -> Option<NaiveDate> {
        let s = self.text(path, v)?;
        match parse_iso_date(&s) {
            Some(d) => Some(d),
            None => {
                let span = self.y.value_span(path);
                self.err(
                    Diagnostic::new(
                        span,
                        format!("`{}` is not a date", path.last().unwrap_or(&"")),
                    )
                    .expected("an ISO 8601 date YYYY-MM-DD, e.g. 2026-03-14")
                    .found(short(&s)),
                );
                None
            }
        }
    }

    /// Entries of a mapping with text keys; reports other keys and unknown names.
    pub(super) fn entries<'v>(
        &mut self,
        path: &[&str],
        v: &'v Value,
        known: Option<&[&str]>,
    ) -> Vec<(String, &'v Value)> {
        let map = match v {
            Value::Mapping(m) => m,
            Value::Null => return Vec::new(),
            other => {
                let span = self.y.value_span(path);
                let what = path
                    .last()
                    .map(|k| format!("`{k}`"))
                    .unwrap_or_else(|| format!("the {}", self.what));
                self.err(
                    Diagnostic::new(
                        span,
                        format!("{what} must be a mapping of `key: value` lines"),
                    )
                    .expected("a mapping")
                    .found(kind_name(other)),
                );
                return Vec::new();
            }
        };
        let mut out = Vec::new();
        for (k, val) in map {
            let name = match k {
                Value::String(s) => s.clone(),
                Value::Number(n) => n.to_string(),
                Value::Bool(b) => b.to_string(),
                other => {
                    let span = self.y.value_span(path);
                    self.err(
                        Diagnostic::new(span, "a key must be a plain name")
                            .expected("a name")
                            .found(kind_name(other)),
                    );
                    continue;
                }
            };
            if let Some(known) = known {
                if !known.contains(&name.as_str()) {
                    let mut p: Vec<&str> = path.to_vec();
                    p.push(&name);
                    let span = self.y.key_span(&p);
                    let expected = format!("one of {}", list(known));
                    self.err(unknown(span, "key", &name, known, expected));
                    continue;
                }
            }
            out.push((name, val));
        }
        out
    }

    pub(super) fn instrument_name(
        &mut self,
        path: &[&str],
        v: &Value,
        known: Option<&BTreeSet<String>>,
    ) -> Option<Named> {
        let name = self.nonempty_text(path, v)?;
        let span = self.y.value_span(path);
        // None: the front matter could not be read, so the name is not checked.
        if let Some(known) = known.filter(|k| !k.contains(&name)) {
            self.err(undefined("instrument", &name, span, known, "instruments"));
        }
        Some(Named { name, span })
    }
}

pub(super) fn undefined(
    kind: &str,
    name: &str,
    span: Span,
    known: &BTreeSet<String>,
    section: &str,
) -> Diagnostic {
    let names: Vec<&str> = known.iter().map(|s| s.as_str()).collect();
    let expected = if names.is_empty() {
        let article = if kind.starts_with(['a', 'e', 'i', 'o', 'u']) {
            "an"
        } else {
            "a"
        };
        format!(
            "{article} {kind} defined under `{section}:` in the front matter (none are defined)"
        )
    } else {
        format!("one of {}", list(&names))
    };
    let mut d = Diagnostic::new(
        span,
        format!("{kind} `{name}` is not defined in the front matter"),
    )
    .expected(expected)
    .found(format!("`{name}`"));
    d = match suggest(name, &names) {
        Some(s) => d.help(s),
        None => d.help(format!("add it under `{section}:` in the front matter")),
    };
    d
}

/// What to suggest for a bare number where a unit is needed: a prefix for farads and henries,
/// whose values in the base unit are rarely meant (`220` on a capacitor is not 220 F).
fn bare_number_help(number: &str, unit: Option<Unit>) -> String {
    match unit {
        Some(Unit::F) => format!(
            "add a unit with its prefix, e.g. `{number} nF`, `{number} pF` or `{number} uF`"
        ),
        Some(Unit::H) => format!("add a unit with its prefix, e.g. `{number} mH` or `{number} uH`"),
        Some(u) => format!("write e.g. `{number} {}`", u.symbol()),
        None => format!("write e.g. `{number} V`"),
    }
}
