//! Markdown prose → Typst markup. Every piece of notebook text is escaped, so no notebook
//! text can run Typst code or name a file: ASCII punctuation in text gets a backslash
//! (Typst's markup escape), code goes into string literals, and every generated call ends
//! with `;` so nothing after it can extend it.

use pulldown_cmark::{Alignment, CodeBlockKind, Event, HeadingLevel, Options, Parser, Tag, TagEnd};

/// Escape text for Typst markup: every ASCII punctuation character but the two quote
/// marks (which only become typographic quotes) gets a backslash; line ends and tabs
/// become spaces; other control characters are dropped.
pub fn escape_markup(text: &str) -> String {
    let mut out = String::with_capacity(text.len() + text.len() / 4);
    for c in text.chars() {
        match c {
            '\n' | '\t' | '\r' => out.push(' '),
            '"' | '\'' | ' ' => out.push(c),
            c if c.is_control() => {}
            c if c.is_ascii_punctuation() => {
                out.push('\\');
                out.push(c);
            }
            c => out.push(c),
        }
    }
    out
}

/// A Typst string literal (with quotes) holding `text` exactly.
pub fn string_literal(text: &str) -> String {
    let mut out = String::with_capacity(text.len() + 2);
    out.push('"');
    for c in text.chars() {
        match c {
            '\\' => out.push_str("\\\\"),
            '"' => out.push_str("\\\""),
            '\n' => out.push_str("\\n"),
            '\r' => out.push_str("\\r"),
            '\t' => out.push_str("\\t"),
            c if c.is_control() => {}
            c => out.push(c),
        }
    }
    out.push('"');
    out
}

/// What the converter needs from its caller.
pub struct Context<'a> {
    /// Virtual path of an image the render serves for this notebook path, if any.
    pub image: &'a dyn Fn(&str) -> Option<String>,
    /// Formatted value of a citation (`=block.name` or `=block.name@f`), if it resolves.
    pub cite: &'a dyn Fn(&str) -> Option<String>,
}

enum Kind {
    Root,
    Paragraph,
    Heading(u8),
    Quote,
    Code {
        lang: Option<String>,
    },
    List {
        start: Option<u64>,
        items: Vec<String>,
    },
    Item,
    Table {
        aligns: Vec<Alignment>,
        head: Vec<String>,
        body: Vec<String>,
    },
    Head,
    Row,
    Cell,
    Emph,
    Strong,
    Strike,
    Sup,
    Sub,
    Link {
        url: String,
    },
    Image {
        url: String,
    },
    Html,
    Other,
}

struct Frame {
    kind: Kind,
    buf: String,
    /// Plain text seen inside (image alt text).
    plain: String,
}

/// Convert one run of Markdown prose to Typst markup.
pub fn markdown_to_typst(md: &str, ctx: &Context) -> String {
    let opts = Options::ENABLE_TABLES | Options::ENABLE_STRIKETHROUGH | Options::ENABLE_TASKLISTS;
    let mut stack: Vec<Frame> = vec![Frame {
        kind: Kind::Root,
        buf: String::new(),
        plain: String::new(),
    }];
    for ev in Parser::new_ext(md, opts) {
        match ev {
            Event::Start(tag) => {
                let kind = match tag {
                    Tag::Paragraph => Kind::Paragraph,
                    Tag::Heading { level, .. } => Kind::Heading(heading_level(level)),
                    Tag::BlockQuote(_) => Kind::Quote,
                    Tag::CodeBlock(k) => Kind::Code {
                        lang: match k {
                            CodeBlockKind::Fenced(info) => {
                                info.split_whitespace().next().map(str::to_string)
                            }
                            CodeBlockKind::Indented => None,
                        },
                    },
                    Tag::HtmlBlock => Kind::Html,
                    Tag::List(start) => Kind::List {
                        start,
                        items: Vec::new(),
                    },
                    Tag::Item => Kind::Item,
                    Tag::Table(aligns) => Kind::Table {
                        aligns,
                        head: Vec::new(),
                        body: Vec::new(),
                    },
                    Tag::TableHead => Kind::Head,
                    Tag::TableRow => Kind::Row,
                    Tag::TableCell => Kind::Cell,
                    Tag::Emphasis => Kind::Emph,
                    Tag::Strong => Kind::Strong,
                    Tag::Strikethrough => Kind::Strike,
                    Tag::Superscript => Kind::Sup,
                    Tag::Subscript => Kind::Sub,
                    Tag::Link { dest_url, .. } => Kind::Link {
                        url: dest_url.to_string(),
                    },
                    Tag::Image { dest_url, .. } => Kind::Image {
                        url: dest_url.to_string(),
                    },
                    _ => Kind::Other,
                };
                stack.push(Frame {
                    kind,
                    buf: String::new(),
                    plain: String::new(),
                });
            }
            Event::End(end) => {
                if matches!(end, TagEnd::TableHead | TagEnd::TableRow) {
                    // Its cells were already moved into the table; drop the row frame.
                    stack.pop();
                    continue;
                }
                if stack.len() < 2 {
                    continue;
                }
                let Some(frame) = stack.pop() else { continue };
                close(frame, &mut stack, ctx);
            }
            Event::Text(t) => push_text(&mut stack, &t),
            Event::Code(code) => {
                let out = match code.strip_prefix('=').and_then(|_| (ctx.cite)(&code)) {
                    Some(v) => format!("#box[{}];", escape_markup(&v)),
                    None => format!("#raw({});", string_literal(&code)),
                };
                push_markup(&mut stack, &out, &code);
            }
            Event::InlineMath(t) | Event::DisplayMath(t) => push_text(&mut stack, &t),
            Event::Html(t) | Event::InlineHtml(t) => push_text(&mut stack, &t),
            Event::FootnoteReference(t) => push_text(&mut stack, &format!("[^{t}]")),
            Event::SoftBreak => push_markup(&mut stack, " ", " "),
            Event::HardBreak => push_markup(&mut stack, "#linebreak();", " "),
            Event::Rule => push_markup(&mut stack, "\n#line(length: 100%);\n\n", ""),
            Event::TaskListMarker(done) => {
                push_markup(&mut stack, if done { "☒ " } else { "☐ " }, "")
            }
        }
    }
    // Unbalanced input cannot happen with pulldown-cmark, but close whatever is left.
    while stack.len() > 1 {
        if let Some(frame) = stack.pop() {
            close(frame, &mut stack, ctx);
        }
    }
    stack.pop().map(|f| f.buf).unwrap_or_default()
}

fn heading_level(level: HeadingLevel) -> u8 {
    match level {
        HeadingLevel::H1 => 1,
        HeadingLevel::H2 => 2,
        HeadingLevel::H3 => 3,
        HeadingLevel::H4 => 4,
        HeadingLevel::H5 => 5,
        HeadingLevel::H6 => 6,
    }
}

fn push_text(stack: &mut [Frame], text: &str) {
    let Some(top) = stack.last_mut() else { return };
    top.plain.push_str(text);
    match top.kind {
        // Code keeps its text verbatim; it is escaped as a string literal at the end.
        Kind::Code { .. } => top.buf.push_str(text),
        _ => top.buf.push_str(&escape_markup(text)),
    }
}

fn push_markup(stack: &mut [Frame], markup: &str, plain: &str) {
    if let Some(top) = stack.last_mut() {
        top.buf.push_str(markup);
        top.plain.push_str(plain);
    }
}

fn table_cell(stack: &mut [Frame], cell: String) {
    // The cell belongs to the nearest table; whether it is a header cell depends on
    // whether a Head frame lies between.
    let mut in_head = false;
    for f in stack.iter_mut().rev() {
        match &mut f.kind {
            Kind::Head => in_head = true,
            Kind::Table { head, body, .. } => {
                if in_head {
                    head.push(cell);
                } else {
                    body.push(cell);
                }
                return;
            }
            _ => {}
        }
    }
}

fn close(frame: Frame, stack: &mut Vec<Frame>, ctx: &Context) {
    let Frame { kind, buf, plain } = frame;
    let out = match kind {
        Kind::Root | Kind::Other => buf,
        Kind::Paragraph => format!("{}\n\n", buf.trim()),
        Kind::Heading(l) => format!("#heading(depth: {l})[{}];\n\n", buf.trim()),
        Kind::Quote => format!("#quote(block: true)[{}];\n\n", buf.trim()),
        Kind::Html => format!("{}\n\n", buf.trim()),
        Kind::Code { lang } => {
            let code = buf.strip_suffix('\n').unwrap_or(&buf);
            match lang {
                Some(l) => format!(
                    "#raw(block: true, lang: {}, {});\n\n",
                    string_literal(&l),
                    string_literal(code)
                ),
                None => format!("#raw(block: true, {});\n\n", string_literal(code)),
            }
        }
        Kind::List { start, items } => {
            let body: Vec<String> = items.iter().map(|i| format!("[{}]", i.trim())).collect();
            match start {
                Some(n) => format!("#enum(start: {n}, {});\n\n", body.join(", ")),
                None => format!("#list({});\n\n", body.join(", ")),
            }
        }
        Kind::Item => {
            if let Some(Frame {
                kind: Kind::List { items, .. },
                ..
            }) = stack.last_mut()
            {
                items.push(buf);
            }
            return;
        }
        Kind::Table { aligns, head, body } => {
            let n = aligns.len().max(1);
            let al: Vec<&str> = aligns
                .iter()
                .map(|a| match a {
                    Alignment::Center => "center",
                    Alignment::Right => "right",
                    _ => "left",
                })
                .collect();
            let head: Vec<String> = head.iter().map(|c| format!("[{}]", c.trim())).collect();
            let body: Vec<String> = body.iter().map(|c| format!("[{}]", c.trim())).collect();
            format!(
                "#table(columns: {n}, align: ({},), table.header({}), {});\n\n",
                al.join(", "),
                head.join(", "),
                body.join(", ")
            )
        }
        Kind::Cell => {
            table_cell(stack, buf);
            return;
        }
        Kind::Head | Kind::Row => String::new(),
        Kind::Emph => format!("#emph[{buf}];"),
        Kind::Strong => format!("#strong[{buf}];"),
        Kind::Strike => format!("#strike[{buf}];"),
        Kind::Sup => format!("#super[{buf}];"),
        Kind::Sub => format!("#sub[{buf}];"),
        Kind::Link { url } => {
            // The target is printed, never followed.
            if plain.trim() == url.trim() || url.is_empty() {
                buf
            } else {
                format!("{buf} ({})", escape_markup(&url))
            }
        }
        Kind::Image { url } => match (ctx.image)(&url) {
            Some(path) => format!(
                "#figure(image({}, alt: {}, width: 70%), caption: [{}]);",
                string_literal(&path),
                string_literal(&plain),
                buf
            ),
            None => format!(
                "#emph[{}]; \\[image {} not available\\]",
                if buf.is_empty() {
                    escape_markup("(no description)")
                } else {
                    buf
                },
                escape_markup(&url)
            ),
        },
    };
    if let Some(parent) = stack.last_mut() {
        parent.buf.push_str(&out);
        parent.plain.push_str(&plain);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn conv(md: &str) -> String {
        let image = |p: &str| {
            if p == "scope.png" {
                Some("/images/0.png".to_string())
            } else {
                None
            }
        };
        let cite = |c: &str| {
            if c == "=tank.f0" {
                Some("(1.234 ± 0.012) kHz".to_string())
            } else {
                None
            }
        };
        markdown_to_typst(
            md,
            &Context {
                image: &image,
                cite: &cite,
            },
        )
    }

    #[test]
    fn escapes_every_markup_character() {
        let e =
            escape_markup(r#"#read("/etc/passwd") $x$ @ref <l> \ * _ ` [ ] ~ = - + / 1. http://x"#);
        // Every markup-significant character is preceded by a backslash (an escape).
        let cs: Vec<char> = e.chars().collect();
        let mut i = 0;
        while i < cs.len() {
            if cs[i] == '\\' {
                i += 2;
                continue;
            }
            assert!(
                !cs[i].is_ascii_punctuation() || cs[i] == '"',
                "bare {:?} in {e}",
                cs[i]
            );
            i += 1;
        }
        assert!(e.contains("\\#read\\(\"\\/etc\\/passwd\"\\)"));
        assert!(e.contains("http\\:\\/\\/x"));
    }

    #[test]
    fn string_literals_escape_quotes_and_backslashes() {
        assert_eq!(string_literal("a\"b\\c\nd"), r#""a\"b\\c\nd""#);
    }

    #[test]
    fn structures() {
        let t = conv("# Title\n\nSome *em* and **strong** `code` and `=tank.f0` and `=nope.x`.\n");
        assert!(t.contains("#heading(depth: 1)[Title];"));
        assert!(t.contains("#emph[em];"));
        assert!(t.contains("#strong[strong];"));
        assert!(t.contains("#raw(\"code\");"));
        assert!(t.contains("#box[\\(1\\.234 ± 0\\.012\\) kHz];"));
        assert!(t.contains("#raw(\"=nope.x\");"));

        let t = conv("- a\n  - b\n- c\n\n3. x\n4. y\n");
        assert!(
            t.contains("#list([a\n\n#list([b]);], [c]);")
                || t.contains("#list([a#list([b]);], [c]);"),
            "{t}"
        );
        assert!(t.contains("#enum(start: 3, [x], [y]);"));

        let t = conv("| a | b |\n|:--|--:|\n| 1 | 2 |\n");
        assert!(
            t.contains(
                "#table(columns: 2, align: (left, right,), table.header([a], [b]), [1], [2]);"
            ),
            "{t}"
        );

        let t = conv("[site](https://example.org/x) ![scope trace](scope.png) ![gone](other.png)");
        assert!(t.contains("site (https\\:\\/\\/example\\.org\\/x)"));
        assert!(t.contains("image(\"/images/0.png\", alt: \"scope trace\""));
        assert!(t.contains("#emph[gone]; \\[image other\\.png not available\\]"));

        let t = conv("```\n#read(\"/etc/passwd\")\n```\n> quoted\n");
        assert!(t.contains("#raw(block: true, \"#read(\\\"/etc/passwd\\\")\");"));
        assert!(t.contains("#quote(block: true)[quoted];"));
    }
}
