//! `Timestamp::parse` on any text: a time within the years 0000..9999 that
//! writes itself back as RFC 3339 and parses again, or an error.

#![no_main]

use libfuzzer_sys::fuzz_target;
use wallflux::time::Timestamp;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    if let Ok(t) = Timestamp::parse(text) {
        let s = t.epoch_s();
        assert!(s.is_finite() && (-62_167_219_200.0..=253_402_300_800.0).contains(&s));
        let back = t.rfc3339();
        assert!(Timestamp::parse(&back).is_ok(), "{back}");
    }
});
