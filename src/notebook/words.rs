//! Words in messages: quoting, lists of accepted words, and "did you mean …" for near misses.

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

/// Levenshtein distance over chars (short strings only).
fn edit_distance(a: &str, b: &str) -> usize {
    let a: Vec<char> = a.chars().collect();
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.iter().enumerate() {
        let mut cur = vec![i + 1; b.len() + 1];
        for (j, cb) in b.iter().enumerate() {
            let sub = prev[j] + usize::from(ca != cb);
            cur[j + 1] = sub.min(prev[j + 1] + 1).min(cur[j] + 1);
        }
        prev = cur;
    }
    prev[b.len()]
}

/// "did you mean …?" for a near miss among `known`.
pub(super) fn suggest(word: &str, known: &[&str]) -> Option<String> {
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
}
