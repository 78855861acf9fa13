//! What the later stages need from a run of prose, read in one pass when the notebook is
//! parsed: the citations (judge), the images (pipeline and folder builds), and where a
//! paragraph first runs past the typesetting limit. Only the renderer reads the Markdown
//! again, to convert it to markup.

use crate::diag::Span;
use pulldown_cmark::{Event, Options, Parser, Tag, TagEnd};

/// The longest run of text in one paragraph, heading, list item or table cell, in bytes
/// (about 5 000 words: some ten pages).
pub const PARAGRAPH_MAX_BYTES: usize = 32 * 1024;

/// The references of one run of prose, with spans in the notebook.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ProseRefs {
    /// Inline code starting with `=` and a name: (the name, the code span's span).
    pub citations: Vec<(String, Span)>,
    /// Images as (path as written, span).
    pub images: Vec<(String, Span)>,
    /// The first paragraph over [`PARAGRAPH_MAX_BYTES`]: (where it starts, bytes counted).
    pub long_paragraph: Option<(usize, usize)>,
}

fn inline(t: &Tag) -> bool {
    matches!(
        t,
        Tag::Emphasis
            | Tag::Strong
            | Tag::Strikethrough
            | Tag::Superscript
            | Tag::Subscript
            | Tag::Link { .. }
            | Tag::Image { .. }
    )
}

fn inline_end(t: &TagEnd) -> bool {
    matches!(
        t,
        TagEnd::Emphasis
            | TagEnd::Strong
            | TagEnd::Strikethrough
            | TagEnd::Superscript
            | TagEnd::Subscript
            | TagEnd::Link
            | TagEnd::Image
    )
}

/// Reads `text`, which starts at byte `base` of the notebook.
pub fn read(text: &str, base: usize) -> ProseRefs {
    let mut out = ProseRefs::default();
    let at = |r: std::ops::Range<usize>| Span::new(base + r.start, base + r.end);
    let (mut run, mut start) = (0usize, None::<usize>);
    let opts = Options::ENABLE_TABLES | Options::ENABLE_STRIKETHROUGH;
    for (ev, r) in Parser::new_ext(text, opts).into_offset_iter() {
        match &ev {
            Event::Code(code) => {
                // `=` followed by a name: a lone `=` or `= x` is ordinary code.
                if let Some(key) = code
                    .strip_prefix('=')
                    .filter(|k| k.starts_with(|c: char| c.is_alphanumeric()))
                {
                    out.citations.push((key.trim().to_string(), at(r.clone())));
                }
            }
            Event::Start(Tag::Image { dest_url, .. }) => {
                out.images.push((dest_url.to_string(), at(r.clone())));
            }
            _ => {}
        }
        if out.long_paragraph.is_some() {
            continue;
        }
        let boundary = match &ev {
            Event::Start(t) => !inline(t),
            Event::End(t) => !inline_end(t),
            Event::Rule => true,
            _ => false,
        };
        if boundary {
            (run, start) = (0, None);
            continue;
        }
        run += match ev {
            Event::Start(_) | Event::End(_) | Event::TaskListMarker(_) => continue,
            Event::SoftBreak | Event::HardBreak => 1,
            _ => r.len(),
        };
        let first = *start.get_or_insert(r.start);
        if run > PARAGRAPH_MAX_BYTES {
            out.long_paragraph = Some((base + first, run));
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_pass_finds_citations_images_and_long_paragraphs() {
        let text = "See `=C` and `= x` and `=`.\n\n![trace](scope.png)\n";
        let r = read(text, 100);
        assert_eq!(r.citations, vec![("C".to_string(), Span::new(104, 108))]);
        assert_eq!(
            r.images,
            vec![("scope.png".to_string(), Span::new(129, 148))]
        );
        assert_eq!(r.long_paragraph, None);
        let long = format!("intro\n\n{}\n", "word ".repeat(7000));
        let r = read(&long, 0);
        assert_eq!(r.long_paragraph.map(|p| p.0), Some(7));
    }
}
