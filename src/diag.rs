//! Source spans and diagnostics that point at the notebook.

use serde::Serialize;

/// Byte range into the notebook source (after BOM removal, original line ends kept).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Hash)]
pub struct Span {
    pub start: usize,
    pub end: usize,
}

impl Span {
    pub fn new(start: usize, end: usize) -> Self {
        Span { start, end }
    }
}

/// One problem found in a notebook.
#[derive(Debug, Clone, PartialEq)]
pub struct Diagnostic {
    pub span: Span,
    pub message: String,
    pub expected: Option<String>,
    pub found: Option<String>,
    pub help: Option<String>,
}

impl Diagnostic {
    pub fn new(span: Span, message: impl Into<String>) -> Self {
        Diagnostic {
            span,
            message: message.into(),
            expected: None,
            found: None,
            help: None,
        }
    }
    pub fn expected(mut self, e: impl Into<String>) -> Self {
        self.expected = Some(e.into());
        self
    }
    pub fn found(mut self, f: impl Into<String>) -> Self {
        self.found = Some(f.into());
        self
    }
    pub fn help(mut self, h: impl Into<String>) -> Self {
        self.help = Some(h.into());
        self
    }
}

/// 1-based (line, column) of a byte offset; column counts characters.
pub fn line_col(src: &str, offset: usize) -> (usize, usize) {
    let offset = offset.min(src.len());
    let mut off = offset;
    while off > 0 && !src.is_char_boundary(off) {
        off -= 1;
    }
    let before = &src[..off];
    let line = before.matches('\n').count() + 1;
    let line_start = before.rfind('\n').map(|i| i + 1).unwrap_or(0);
    let col = before[line_start..].chars().count() + 1;
    (line, col)
}

/// Largest char boundary ≤ `i`, clamped to the text.
fn floor_boundary(src: &str, i: usize) -> usize {
    let mut i = i.min(src.len());
    while i > 0 && !src.is_char_boundary(i) {
        i -= 1;
    }
    i
}

/// Span clamped to the text and to char boundaries (start ≤ end).
pub fn clamp_span(src: &str, span: Span) -> Span {
    let start = floor_boundary(src, span.start);
    let end = floor_boundary(src, span.end.max(span.start)).max(start);
    Span::new(start, end)
}

fn notes(d: &Diagnostic) -> Vec<String> {
    let mut n = Vec::new();
    if let Some(e) = &d.expected {
        n.push(format!("expected: {e}"));
    }
    if let Some(f) = &d.found {
        n.push(format!("found: {f}"));
    }
    if let Some(h) = &d.help {
        n.push(format!("help: {h}"));
    }
    n
}

/// A file beside the notebook that spans may point into (a readings table, `table:`): its
/// text takes the span offsets `base ..= base + text.len()`, past the notebook's end.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Extra {
    /// The name printed before `:line:col`.
    pub name: String,
    pub text: String,
    pub base: usize,
}

/// The file a diagnostic points into (the notebook, or one of `extras` when its span lies past
/// the notebook's end) with the span made relative to that file.
fn place<'a>(
    file_name: &'a str,
    src: &'a str,
    extras: &'a [Extra],
    d: &Diagnostic,
) -> (&'a str, &'a str, Diagnostic) {
    let mut d = shorten(d);
    let start = d.span.start;
    match extras
        .iter()
        .rev()
        .find(|x| start > src.len() && start >= x.base)
    {
        Some(x) => {
            d.span = Span::new(start - x.base, d.span.end.max(start) - x.base);
            (&x.name, &x.text, d)
        }
        None => (file_name, src, d),
    }
}

/// All diagnostics as plain text (no colour): `file:line:col`, the source line with a caret
/// under the span, then `expected:`, `found:` and `help:` notes.
pub fn render(file_name: &str, src: &str, diags: &[Diagnostic]) -> String {
    render_in(file_name, src, &[], diags)
}

/// [`render`] where spans past the notebook's end point into one of `extras`.
pub fn render_in(file_name: &str, src: &str, extras: &[Extra], diags: &[Diagnostic]) -> String {
    use codespan_reporting::diagnostic::{Diagnostic as CsDiag, Label};
    use codespan_reporting::files::SimpleFile;
    use codespan_reporting::term::{self, Chars, Config};

    let config = Config {
        chars: Chars::ascii(),
        ..Config::default()
    };
    let mut out = String::new();
    for d in diags {
        let (file_name, src, d) = place(file_name, src, extras, d);
        let d = &d;
        let file = SimpleFile::new(file_name, src);
        let s = clamp_span(src, d.span);
        // A line too long to show (a pasted 10 MB cell) gets the one-line form.
        let (ls, le) = (
            src[..s.start].rfind('\n').map_or(0, |i| i + 1),
            src[s.end..].find('\n').map_or(src.len(), |i| s.end + i),
        );
        if le - ls > MAX_SNIPPET {
            out.push_str(&one_line(file_name, src, d));
            out.push('\n');
            continue;
        }
        let cs = CsDiag::error()
            .with_message(d.message.clone())
            .with_labels(vec![Label::primary((), s.start..s.end)])
            .with_notes(notes(d));
        match term::emit_into_string(&config, &file, &cs) {
            Ok(text) => out.push_str(&text),
            // A span the renderer refuses still yields the short form.
            Err(_) => {
                out.push_str(&one_line(file_name, src, d));
                out.push('\n');
            }
        }
    }
    out
}

/// Longest source line shown as a snippet, and longest text quoted in a message.
const MAX_SNIPPET: usize = 2000;
const MAX_QUOTE: usize = 200;

fn clip(t: &str) -> String {
    if t.len() <= MAX_QUOTE {
        return t.to_string();
    }
    let mut end = MAX_QUOTE;
    while !t.is_char_boundary(end) {
        end -= 1;
    }
    format!("{}… ({} bytes in all)", &t[..end], t.len())
}

/// The diagnostic with long quoted texts cut short.
fn shorten(d: &Diagnostic) -> Diagnostic {
    Diagnostic {
        span: d.span,
        message: clip(&d.message),
        expected: d.expected.as_deref().map(clip),
        found: d.found.as_deref().map(clip),
        help: d.help.as_deref().map(clip),
    }
}

/// `file:line:col: message (expected …, found …)`.
pub fn one_line(file_name: &str, src: &str, d: &Diagnostic) -> String {
    one_line_in(file_name, src, &[], d)
}

/// [`one_line`] where spans past the notebook's end point into one of `extras`.
pub fn one_line_in(file_name: &str, src: &str, extras: &[Extra], d: &Diagnostic) -> String {
    let (file_name, src, d) = place(file_name, src, extras, d);
    let d = &d;
    let (line, col) = line_col(src, d.span.start);
    let mut extra = Vec::new();
    if let Some(e) = &d.expected {
        extra.push(format!("expected {e}"));
    }
    if let Some(f) = &d.found {
        extra.push(format!("found {f}"));
    }
    if extra.is_empty() {
        format!("{file_name}:{line}:{col}: {}", d.message)
    } else {
        format!(
            "{file_name}:{line}:{col}: {} ({})",
            d.message,
            extra.join(", ")
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn line_col_counts_chars() {
        let src = "ab\nµx y\n";
        assert_eq!(line_col(src, 0), (1, 1));
        assert_eq!(line_col(src, 3), (2, 1));
        // `x` follows the two-byte µ: byte 5, column 2.
        assert_eq!(line_col(src, 5), (2, 2));
        // Inside a multi-byte char and past the end do not panic.
        assert_eq!(line_col(src, 4), (2, 1));
        assert_eq!(line_col(src, 999), (3, 1));
    }

    #[test]
    fn one_line_form() {
        let src = "---\ntitle: x\nf/Hz\n12 kg\n";
        let at = src.find("kg").unwrap();
        let d = Diagnostic::new(Span::new(at, at + 2), "unknown unit `kg`")
            .expected("a unit")
            .found("kg");
        assert_eq!(
            one_line("nb.md", src, &d),
            "nb.md:4:4: unknown unit `kg` (expected a unit, found kg)"
        );
        let d = Diagnostic::new(Span::new(0, 3), "plain");
        assert_eq!(one_line("nb.md", src, &d), "nb.md:1:1: plain");
    }

    #[test]
    fn render_shows_location_caret_and_notes() {
        let src = "---\ntitle: x\n---\nf/Hz\n12 kg\n";
        let at = src.find("kg").unwrap();
        let d = Diagnostic::new(Span::new(at, at + 2), "unknown unit `kg`")
            .expected("a unit such as V")
            .found("kg")
            .help("write a unit from the list");
        let out = render("nb.md", src, &[d]);
        assert!(out.contains("nb.md:5:4"), "{out}");
        assert!(out.contains("12 kg"), "{out}");
        assert!(out.contains("^^"), "{out}");
        assert!(out.contains("expected: a unit such as V"), "{out}");
        assert!(out.contains("found: kg"), "{out}");
        assert!(out.contains("help: write a unit from the list"), "{out}");
        assert!(!out.contains('\u{1b}'), "no colour codes: {out}");
    }

    #[test]
    fn render_survives_bad_spans() {
        let src = "µµ\n";
        let ds = [
            Diagnostic::new(Span::new(1, 3), "mid-char"),
            Diagnostic::new(Span::new(50, 40), "past the end"),
            Diagnostic::new(Span::new(0, 0), "empty"),
        ];
        let out = render("x.md", src, &ds);
        assert!(
            out.contains("mid-char") && out.contains("past the end") && out.contains("empty"),
            "{out}"
        );
        let out = render(
            "x.md",
            "",
            &[Diagnostic::new(Span::new(0, 5), "empty file")],
        );
        assert!(out.contains("empty file"), "{out}");
    }
}
