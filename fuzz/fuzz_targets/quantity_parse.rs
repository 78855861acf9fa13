//! Any text as a quantity: parse must return, not panic; a value it accepts is finite and
//! its error offsets lie inside the text.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    match benchrec::quantity::parse_quantity(text) {
        Ok(q) => assert!(q.value.is_finite()),
        Err(e) => assert!(
            e.offset <= text.len() && e.offset + e.len <= text.len(),
            "{e:?} for {text:?}"
        ),
    }
});
