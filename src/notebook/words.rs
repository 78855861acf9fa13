//! Words in messages: quoting, lists of accepted words, and "did you mean …" for near misses.

use crate::diag::{Diagnostic, Span};

pub(super) fn short(s: &str) -> String {
    let t = s.trim();
    if t.chars().count() > 40 {
        let cut: String = t.chars().take(40).collect();
        format!("`{cut}…`")
    } else {
        format!("`{t}`")
    }
}

pub(super) fn list(keys: &[&str]) -> String {
    keys.iter()
        .map(|k| format!("`{k}`"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// Levenshtein distance (strsim).
fn edit_distance(a: &str, b: &str) -> usize {
    strsim::levenshtein(a, b)
}

/// "did you mean …?" for a near miss among `known`.
pub(crate) fn suggest(word: &str, known: &[&str]) -> Option<String> {
    if word.chars().count() > 64 {
        return None;
    }
    let exact_ci = known.iter().find(|k| k.eq_ignore_ascii_case(word));
    let best = exact_ci.copied().or_else(|| {
        known
            .iter()
            .map(|k| (edit_distance(word, k), *k))
            .filter(|(d, k)| *d <= 2 && *d < k.chars().count())
            .min_by_key(|(d, _)| *d)
            .map(|(_, k)| k)
    });
    best.map(|k| format!("did you mean `{k}`?"))
}

/// The accepted words for a message: "`a` or `b`", "`a`, `b` or `c`", else "one of `a`, …".
fn alternatives(words: &[&str]) -> String {
    match words {
        [] => String::new(),
        [one] => format!("`{one}`"),
        [head @ .., last] if words.len() <= 3 => format!("{} or `{last}`", list(head)),
        _ => format!("one of {}", list(words)),
    }
}

/// "unknown {what} `word`" at `at`, with what was expected and "did you mean …" for a near
/// miss among `known`.
pub(super) fn unknown(
    at: Span,
    what: &str,
    word: &str,
    known: &[&str],
    expected: impl Into<String>,
) -> Diagnostic {
    let d = Diagnostic::new(at, format!("unknown {what} `{word}`"))
        .expected(expected)
        .found(format!("`{word}`"));
    match suggest(word, known) {
        Some(h) => d.help(h),
        None => d,
    }
}

/// The value paired with `word` among `choices`, else [`unknown`] listing the words.
pub(super) fn one_of<T: Copy>(
    word: &str,
    choices: &[(&str, T)],
    what: &str,
    at: Span,
) -> Result<T, Diagnostic> {
    if let Some((_, v)) = choices.iter().find(|(w, _)| *w == word) {
        return Ok(*v);
    }
    let words: Vec<&str> = choices.iter().map(|(w, _)| *w).collect();
    Err(unknown(at, what, word, &words, alternatives(&words)))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::notebook::SYMBOLS;

    #[test]
    fn near_misses() {
        // Levenshtein distance, textbook examples: kitten → sitting is 3.
        assert_eq!(edit_distance("kitten", "sitting"), 3);
        assert_eq!(edit_distance("", "abc"), 3);
        assert_eq!(
            suggest("tolerence", &["kind", "nominal", "tolerance"]).as_deref(),
            Some("did you mean `tolerance`?")
        );
        assert_eq!(
            suggest("vs", SYMBOLS).as_deref(),
            Some("did you mean `Vs`?")
        );
        assert_eq!(suggest("zzzzzz", &["kind", "nominal", "tolerance"]), None);
    }

    #[test]
    fn one_of_names_the_words_and_a_near_miss() {
        let at = Span::new(3, 9);
        let kinds = [("resistor", 1), ("capacitor", 2), ("inductor", 3)];
        assert_eq!(one_of("inductor", &kinds, "part kind", at), Ok(3));
        let d = one_of("capasitor", &kinds, "part kind", at).unwrap_err();
        assert_eq!(d.span, at);
        assert_eq!(d.message, "unknown part kind `capasitor`");
        assert_eq!(
            d.expected.as_deref(),
            Some("`resistor`, `capacitor` or `inductor`")
        );
        assert_eq!(d.found.as_deref(), Some("`capasitor`"));
        assert_eq!(d.help.as_deref(), Some("did you mean `capacitor`?"));
        let two = [("simple", 0), ("guarded", 1)];
        let d = one_of("zzzzzzzz", &two, "decision rule", at).unwrap_err();
        assert_eq!(d.expected.as_deref(), Some("`simple` or `guarded`"));
        assert_eq!(d.help, None);
        let four = [("RC", 0), ("RL", 1), ("RLC", 2), ("Z", 3)];
        let d = one_of("LC", &four, "network", at).unwrap_err();
        assert_eq!(d.expected.as_deref(), Some("one of `RC`, `RL`, `RLC`, `Z`"));
    }
}
