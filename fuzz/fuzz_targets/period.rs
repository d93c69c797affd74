//! Any text as a period (`2026-03-14`, `2026-W11`, `2026-03`, `2026-Q1`, `2026`, or a
//! range): parsing never panics, and a parsed period prints back to text that parses
//! to the same period.
#![no_main]

use dispar_core::period::Period;
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    if let Ok(p) = text.parse::<Period>() {
        let again: Period = p.to_string().parse().expect("a printed period parses");
        assert_eq!(again, p);
        let _ = p.next();
    }
});
