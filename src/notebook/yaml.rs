//! The YAML span locator: serde_yaml gives values, this finds where keys and values sit in
//! the text, and turns serde_yaml's errors into diagnostics at the right place.

use super::{line_text, split_lines, Line, MAX_FLOW_DEPTH};
use crate::diag::{line_col, Diagnostic, Span};
use crate::quantity::QuantityError;
use serde_yaml::Value;

// ---------------------------------------------------------------------------------------------
// YAML with spans: serde_yaml gives values, this finds where keys and values sit in the text.

#[derive(Debug, Clone, Copy)]
enum Scope {
    /// Lines [from, to) of the YAML text.
    Block(usize, usize),
    /// A flow collection on one line.
    Inline(Span),
}

#[derive(Debug, Clone, Copy)]
struct KeyLocation {
    key: Span,
    value: Option<Span>,
    child: Scope,
}

pub(super) struct YamlLocator<'a> {
    pub(super) src: &'a str,
    start: usize,
    end: usize,
    lines: Vec<Line>,
    /// Where to point when nothing better is known.
    pub(super) anchor: Span,
}

pub(super) fn kind_name(v: &Value) -> &'static str {
    match v {
        Value::Null => "nothing",
        Value::Bool(_) => "true/false",
        Value::Number(_) => "a number",
        Value::String(_) => "text",
        Value::Sequence(_) => "a list",
        Value::Mapping(_) => "a mapping",
        Value::Tagged(_) => "a tagged value",
    }
}

/// Removes serde_yaml's " at line L column C" (we print our own location).
fn clean_yaml_message(msg: &str) -> String {
    let mut out = String::new();
    let mut rest = msg;
    while let Some(i) = rest.find(" at line ") {
        out.push_str(&rest[..i]);
        let tail = &rest[i + " at line ".len()..];
        let d1 = tail
            .find(|c: char| !c.is_ascii_digit())
            .unwrap_or(tail.len());
        let tail2 = &tail[d1..];
        if d1 > 0 && tail2.starts_with(" column ") {
            let t3 = &tail2[" column ".len()..];
            let d2 = t3.find(|c: char| !c.is_ascii_digit()).unwrap_or(t3.len());
            rest = &t3[d2..];
        } else {
            out.push_str(" at line ");
            rest = tail;
        }
    }
    out.push_str(rest);
    out
}

/// From a raw serde_yaml message, the bracket and (line, column) of a flow collection that
/// was never closed: "... while parsing a flow sequence at line L column C".
fn unclosed_flow(raw: &str) -> Option<(char, usize, usize)> {
    for (phrase, open) in [
        ("while parsing a flow sequence at line ", '['),
        ("while parsing a flow mapping at line ", '{'),
    ] {
        let Some(i) = raw.find(phrase) else { continue };
        let tail = &raw[i + phrase.len()..];
        let (line, rest) = tail.split_once(" column ")?;
        let col: String = rest.chars().take_while(|c| c.is_ascii_digit()).collect();
        return Some((open, line.parse().ok()?, col.parse().ok()?));
    }
    None
}

/// Deepest nesting of flow brackets outside quotes and comments; returns (depth, offset).
fn flow_depth(text: &str) -> (usize, usize) {
    let mut depth = 0usize;
    let mut max = (0usize, 0usize);
    let mut quote: Option<char> = None;
    let mut prev = '\n';
    let mut in_comment = false;
    for (i, c) in text.char_indices() {
        if c == '\n' {
            in_comment = false;
            quote = None;
        } else if in_comment {
        } else if let Some(q) = quote {
            if c == q {
                quote = None;
            }
        } else {
            match c {
                '#' if prev.is_whitespace() => in_comment = true,
                '"' | '\'' if matches!(prev, ' ' | '\t' | '[' | '{' | ',' | ':' | '\n') => {
                    quote = Some(c)
                }
                '[' | '{' => {
                    depth += 1;
                    if depth > max.0 {
                        max = (depth, i);
                    }
                }
                ']' | '}' => depth = depth.saturating_sub(1),
                _ => {}
            }
        }
        prev = c;
    }
    max
}

impl<'a> YamlLocator<'a> {
    pub(super) fn new(src: &'a str, start: usize, end: usize, anchor: Span) -> Self {
        YamlLocator {
            src,
            start,
            end,
            lines: split_lines(src, start, end),
            anchor,
        }
    }

    fn text(&self) -> &'a str {
        &self.src[self.start..self.end]
    }

    /// Byte offset of (1-based line, 1-based char column) inside this YAML text.
    fn offset_of(&self, line: usize, col: usize) -> usize {
        match self.lines.get(line.saturating_sub(1)) {
            Some(l) => {
                let t = line_text(self.src, l);
                t.char_indices()
                    .nth(col.saturating_sub(1))
                    .map(|(i, _)| l.start + i)
                    .unwrap_or(l.end)
            }
            None => self.end,
        }
    }

    /// One character at `off` (or an empty span at the end).
    fn char_span(&self, off: usize) -> Span {
        let off = off.min(self.src.len());
        let len = self.src[off..]
            .chars()
            .next()
            .filter(|c| *c != '\n' && *c != '\r')
            .map(|c| c.len_utf8())
            .unwrap_or(0);
        Span::new(off, off + len)
    }

    pub(super) fn load(&self, what: &str) -> Result<Value, Diagnostic> {
        let text = self.text();
        let (depth, at) = flow_depth(text);
        if depth > MAX_FLOW_DEPTH {
            return Err(Diagnostic::new(
                self.char_span(self.start + at),
                format!("{what} nests `[`/`{{` too deeply"),
            )
            .expected(format!("at most {MAX_FLOW_DEPTH} levels"))
            .found(format!("{depth} levels")));
        }
        serde_yaml::from_str::<Value>(text).map_err(|e| self.yaml_error(&e, what))
    }

    fn yaml_error(&self, e: &serde_yaml::Error, what: &str) -> Diagnostic {
        let raw = e.to_string();
        let msg = clean_yaml_message(&raw);
        // serde_yaml points a duplicate at the mapping; point at the second key instead.
        if let Some(rest) = msg.strip_prefix("duplicate entry with key ") {
            let key = rest.trim().trim_matches('"');
            let hits: Vec<Span> = self
                .lines
                .iter()
                .filter_map(|l| {
                    let t = line_text(self.src, l);
                    let ind = t.len() - t.trim_start().len();
                    match_key(&t[ind..], key).map(|n| Span::new(l.start + ind, l.start + ind + n))
                })
                .collect();
            let span = hits.get(1).copied().unwrap_or(self.anchor);
            let mut d = Diagnostic::new(span, format!("key `{key}` appears twice in the {what}"))
                .expected(format!("each key once in the {what}"))
                .found(format!("a second `{key}`"));
            if let Some(first) = hits.first() {
                let (l, c) = line_col(self.src, first.start);
                d = d.help(format!("first given at line {l}, column {c}"));
            }
            return d;
        }
        let (span, line_has_tab) = match e.location() {
            Some(loc) => {
                let off = self.offset_of(loc.line(), loc.column());
                let tab = self
                    .lines
                    .get(loc.line().saturating_sub(1))
                    .is_some_and(|l| {
                        line_text(self.src, l).starts_with(|c: char| c == ' ' || c == '\t')
                            && line_text(self.src, l).contains('\t')
                    });
                (self.char_span(off), tab)
            }
            None => (self.anchor, false),
        };
        let mut d = Diagnostic::new(span, format!("the {what} is not valid YAML: {msg}"))
            .expected("YAML `key: value` lines, nested keys indented with spaces");
        if let Some((open, line, col)) = unclosed_flow(&raw) {
            // libyaml notices a missing `]` or `}` only where the next line begins; the
            // opening bracket is what the writer has to fix.
            let at = self.char_span(self.offset_of(line, col));
            let close = if open == '[' { ']' } else { '}' };
            return Diagnostic::new(
                at,
                format!("the YAML `{open}` opened here in the {what} is never closed"),
            )
            .expected(format!("`{close}` before the end of the line"))
            .help(format!(
                "close the list with `{close}`, or quote the text if the `{open}` belongs to it"
            ));
        }
        if msg.contains("recursion limit") {
            d = Diagnostic::new(span, format!("the {what} nests too deeply"))
                .expected("a few levels of nested keys and lists");
        } else if msg.contains("repetition limit") {
            let at = self.first_alias().unwrap_or(span);
            d = Diagnostic::new(at, format!("the {what} expands aliases too often"))
                .expected("at most a few thousand values after `*alias` references expand")
                .help("write the values out instead of repeating `*alias` references");
        }
        if line_has_tab || msg.contains("tab") {
            d = d.help("indent YAML with spaces, not tabs");
        } else if let Some(h) = e.location().and_then(|l| self.indent_slip(l.line())) {
            d = d.help(h);
        } else if msg.contains("mapping values are not allowed") {
            d = d.help("quote text that contains `: `, e.g. title: \"Run 2: sweep\"");
        }
        d
    }

    /// An indentation slip at or just above YAML line `line` (1-based): two neighbouring keys
    /// whose indents differ by less than a level, so neither lines up nor nests.
    fn indent_slip(&self, line: usize) -> Option<String> {
        let key_line = |n: usize| -> Option<(usize, String, usize)> {
            let l = self.lines.get(n.checked_sub(1)?)?;
            let t = line_text(self.src, l);
            let body = t.trim_start_matches(' ');
            let key = body.split_once(':')?.0;
            if key.is_empty() || !key.chars().all(|c| c.is_alphanumeric() || c == '_') {
                return None;
            }
            let (fl, _) = line_col(self.src, l.start);
            Some((t.len() - body.len(), key.to_string(), fl))
        };
        for n in [line, line.saturating_sub(1)] {
            let (Some((ia, ka, la)), Some((ib, kb, lb))) =
                (key_line(n.saturating_sub(1)), key_line(n))
            else {
                continue;
            };
            if ia != ib && ia.abs_diff(ib) < 2 {
                return Some(format!(
                    "`{ka}` (line {la}) is indented {ia} spaces and `{kb}` (line {lb}) {ib}: keys \
                     of one entry line up, and a nested key goes at least two spaces deeper"
                ));
            }
        }
        None
    }

    /// The first `*alias` reference in the text, outside quotes and comments.
    fn first_alias(&self) -> Option<Span> {
        for l in &self.lines {
            let t = line_text(self.src, l);
            let mut quote: Option<char> = None;
            let mut prev = ' ';
            for (i, c) in t.char_indices() {
                match quote {
                    Some(q) if c == q => quote = None,
                    Some(_) => {}
                    None if c == '#' && prev.is_whitespace() => break,
                    None if (c == '"' || c == '\'') && !prev.is_alphanumeric() => quote = Some(c),
                    None if c == '*'
                        && matches!(prev, ' ' | '\t' | '[' | '{' | ',' | ':' | '-')
                        && t[i + 1..].starts_with(|n: char| n.is_alphanumeric() || n == '_') =>
                    {
                        return Some(self.char_span(l.start + i));
                    }
                    None => {}
                }
                prev = c;
            }
        }
        None
    }

    fn root(&self) -> Scope {
        Scope::Block(0, self.lines.len())
    }

    fn meaningful(&self, i: usize) -> bool {
        self.lines.get(i).is_some_and(|l| {
            let t = line_text(self.src, l).trim();
            !t.is_empty() && !t.starts_with('#')
        })
    }

    fn indent(&self, i: usize) -> usize {
        self.lines.get(i).map_or(0, |l| {
            let t = line_text(self.src, l);
            t.len() - t.trim_start_matches(' ').len()
        })
    }

    fn find(&self, scope: Scope, key: &str) -> Option<KeyLocation> {
        match scope {
            Scope::Block(from, to) => {
                let to = to.min(self.lines.len());
                let level = (from..to)
                    .find(|&i| self.meaningful(i))
                    .map(|i| self.indent(i))?;
                for i in from..to {
                    if !self.meaningful(i) || self.indent(i) != level {
                        continue;
                    }
                    let l = self.lines[i];
                    let content = &line_text(self.src, &l)[level..];
                    let Some(klen) = match_key(content, key) else {
                        continue;
                    };
                    let key_span = Span::new(l.start + level, l.start + level + klen);
                    let colon = content[klen..]
                        .find(':')
                        .map(|c| klen + c + 1)
                        .unwrap_or(content.len());
                    let value = trimmed_value(self.src, l.start + level + colon, l.end);
                    let child = match value {
                        Some(v) if self.src[v.start..v.end].starts_with(['{', '[']) => {
                            Scope::Inline(v)
                        }
                        _ => {
                            let mut j = i + 1;
                            while j < to {
                                if self.meaningful(j) {
                                    let ind = self.indent(j);
                                    let t = line_text(self.src, &self.lines[j]);
                                    if ind < level || (ind == level && !t[ind..].starts_with('-')) {
                                        break;
                                    }
                                }
                                j += 1;
                            }
                            Scope::Block(i + 1, j)
                        }
                    };
                    return Some(KeyLocation {
                        key: key_span,
                        value,
                        child,
                    });
                }
                None
            }
            Scope::Inline(span) => {
                let text = &self.src[span.start..span.end];
                let mut from = 0;
                while let Some(p) = text[from..].find(key).map(|p| p + from) {
                    from = p + key.len();
                    let before_ok = text[..p]
                        .chars()
                        .next_back()
                        .is_none_or(|c| matches!(c, '{' | ',' | ' ' | '\t' | '['));
                    let after = &text[p + key.len()..];
                    let gap = after.len() - after.trim_start().len();
                    if !before_ok || !after[gap..].starts_with(':') {
                        continue;
                    }
                    let vstart = p + key.len() + gap + 1;
                    let vend = text[vstart..]
                        .find([',', '}', ']'])
                        .map(|e| vstart + e)
                        .unwrap_or(text.len());
                    let key_span = Span::new(span.start + p, span.start + p + key.len());
                    let value = trimmed_value(self.src, span.start + vstart, span.start + vend);
                    let child = match value {
                        Some(v) => Scope::Inline(v),
                        None => Scope::Inline(Span::new(span.start + vend, span.start + vend)),
                    };
                    return Some(KeyLocation {
                        key: key_span,
                        value,
                        child,
                    });
                }
                None
            }
        }
    }

    /// Deepest match along `path` and whether the whole path was found.
    fn find_path(&self, path: &[&str]) -> (Option<KeyLocation>, bool) {
        let mut scope = self.root();
        let mut last = None;
        for (n, k) in path.iter().enumerate() {
            match self.find(scope, k) {
                Some(f) => {
                    scope = f.child;
                    last = Some(f);
                }
                None => return (last, n == path.len()),
            }
        }
        (last, true)
    }

    /// Span of the value at `path` (its key when the value sits on later lines).
    pub(super) fn value_span(&self, path: &[&str]) -> Span {
        match self.find_path(path) {
            (Some(f), true) => f.value.unwrap_or(f.key),
            (Some(f), false) => f.key,
            (None, _) => self.anchor,
        }
    }

    pub(super) fn key_span(&self, path: &[&str]) -> Span {
        match self.find_path(path) {
            (Some(f), _) => f.key,
            (None, _) => self.anchor,
        }
    }

    /// Span of the word `name` inside the value at `path` (a list item, say).
    pub(super) fn item_span(&self, path: &[&str], name: &str) -> Span {
        let (found, all) = self.find_path(path);
        let Some(f) = found.filter(|_| all) else {
            return self.value_span(path);
        };
        let region = match f.child {
            Scope::Inline(s) => s,
            Scope::Block(a, b) => {
                let a = a.min(self.lines.len());
                let b = b.min(self.lines.len());
                if a >= b {
                    f.value.unwrap_or(f.key)
                } else {
                    Span::new(self.lines[a].start, self.lines[b - 1].end)
                }
            }
        };
        find_word(self.src, region, name)
            .or_else(|| f.value.and_then(|v| find_word(self.src, v, name)))
            .unwrap_or(f.value.unwrap_or(f.key))
    }

    /// Maps a quantity error inside `text` (the value at `span`) to a file span.
    pub(super) fn quantity_span(&self, span: Span, text: &str, e: &QuantityError) -> Span {
        let hay = &self.src[span.start..span.end];
        match hay.find(text) {
            Some(p) if !text.is_empty() => {
                let s = span.start + p + e.offset.min(text.len());
                let end = (s + e.len.max(1)).min(span.start + p + text.len());
                crate::diag::clamp_span(self.src, Span::new(s, end.max(s)))
            }
            _ => span,
        }
    }
}

/// Length of the key token if `content` starts with `key:` (plain or quoted).
fn match_key(content: &str, key: &str) -> Option<usize> {
    let klen = if content.starts_with(key) {
        key.len()
    } else {
        let q = content.chars().next().filter(|c| *c == '"' || *c == '\'')?;
        let inner = &content[1..];
        if inner.starts_with(key) && inner[key.len()..].starts_with(q) {
            key.len() + 2
        } else {
            return None;
        }
    };
    let after = &content[klen..];
    let after = after.trim_start_matches([' ', '\t']);
    let rest = after.strip_prefix(':')?;
    if rest.is_empty() || rest.starts_with([' ', '\t']) {
        Some(klen)
    } else {
        None
    }
}

/// Value text in [from, to), trimmed and without a trailing ` # comment`.
fn trimmed_value(src: &str, from: usize, to: usize) -> Option<Span> {
    let t = &src[from..to];
    let mut cut = t.len();
    let b = t.as_bytes();
    let mut quote = None;
    for (i, c) in t.char_indices() {
        match quote {
            Some(q) if c == q => quote = None,
            Some(_) => {}
            None if (c == '"' || c == '\'') && t[..i].trim().is_empty() => quote = Some(c),
            None if c == '#' && (i == 0 || b[i - 1] == b' ' || b[i - 1] == b'\t') => {
                cut = i;
                break;
            }
            None => {}
        }
    }
    let v = &t[..cut];
    let lead = v.len() - v.trim_start().len();
    let v2 = v.trim();
    if v2.is_empty() {
        None
    } else {
        Some(Span::new(from + lead, from + lead + v2.len()))
    }
}

fn is_word_char(c: char) -> bool {
    c.is_alphanumeric() || c == '_' || c == '-' || c == '.'
}

fn find_word(src: &str, region: Span, word: &str) -> Option<Span> {
    if word.is_empty() {
        return None;
    }
    let hay = &src[region.start..region.end];
    let mut from = 0;
    while let Some(p) = hay[from..].find(word).map(|p| p + from) {
        from = p + word.len();
        let before = hay[..p].chars().next_back();
        let after = hay[p + word.len()..].chars().next();
        if !before.is_some_and(is_word_char) && !after.is_some_and(is_word_char) {
            return Some(Span::new(region.start + p, region.start + p + word.len()));
        }
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn yaml_messages_lose_their_position() {
        assert_eq!(
            clean_yaml_message(
                "mapping values are not allowed in this context at line 2 column 13"
            ),
            "mapping values are not allowed in this context"
        );
        assert_eq!(
            clean_yaml_message(
                "did not find x at line 2 column 1, while parsing y at line 1 column 4"
            ),
            "did not find x, while parsing y"
        );
        assert_eq!(clean_yaml_message("odd at line x"), "odd at line x");
    }

    #[test]
    fn flow_depth_ignores_quotes_and_comments() {
        assert_eq!(flow_depth("a: [[1], {b: [2]}]").0, 3);
        assert_eq!(flow_depth("a: \"[[[[\" # [[[[").0, 0);
        assert_eq!(flow_depth("a: x[1]").0, 1);
    }

    #[test]
    fn locator_finds_keys_values_and_items() {
        let src = "---\ntop: 1\ninst:\n  dmm:\n    what: meter  # note\n  lcr: {what: bridge, k: 2}\nparts:\n- R1\n- C1\n---\n";
        let start = 4;
        let end = src.rfind("---").unwrap();
        let y = YamlLocator::new(src, start, end, Span::new(0, 3));
        let at = |s: Span| &src[s.start..s.end];
        assert_eq!(at(y.value_span(&["top"])), "1");
        assert_eq!(at(y.value_span(&["inst", "dmm", "what"])), "meter");
        assert_eq!(at(y.key_span(&["inst", "dmm"])), "dmm");
        assert_eq!(at(y.value_span(&["inst", "lcr", "what"])), "bridge");
        assert_eq!(at(y.value_span(&["inst", "lcr", "k"])), "2");
        assert_eq!(at(y.item_span(&["parts"], "C1")), "C1");
        // A missing key falls back to its deepest ancestor found.
        assert_eq!(at(y.value_span(&["inst", "dmm", "nope"])), "dmm");
        assert_eq!(y.value_span(&["absent"]), Span::new(0, 3));
    }
}
