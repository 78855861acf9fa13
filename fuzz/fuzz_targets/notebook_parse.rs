//! Any bytes, read as a notebook the way the CLI reads one: parse must return, not panic,
//! and every diagnostic's span must lie inside the source on character boundaries.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data);
    match benchrec::notebook::parse(&text) {
        Ok(nb) => {
            assert!(nb.source.len() <= text.len());
        }
        Err(diags) => {
            let src = text.strip_prefix('\u{feff}').unwrap_or(&text);
            for d in diags {
                assert!(
                    d.span.start <= d.span.end && d.span.end <= src.len(),
                    "span {:?} outside {}",
                    d.span,
                    src.len()
                );
                assert!(src.is_char_boundary(d.span.start) && src.is_char_boundary(d.span.end));
                let _ = benchrec::diag::line_col(src, d.span.start);
            }
        }
    }
});
