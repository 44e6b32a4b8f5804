//! Configuration text → validated settings: any bytes give settings or
//! problems, never a panic; every problem and warning names a line of the
//! file when it names one at all.

#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    let lines = text.lines().count().max(1);
    match wallflux::config::parse(text, "fuzz.toml", None) {
        Ok(s) => {
            for w in &s.warnings {
                assert!(w.line.is_none_or(|l| (1..=lines).contains(&l)), "{w:?}");
            }
        }
        Err(e) => {
            assert!(!e.problems.is_empty());
            let _ = e.to_string();
        }
    }
});
