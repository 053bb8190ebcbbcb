//! Checking a bench file must never panic, whatever the text.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(text) = std::str::from_utf8(data) {
        let _ = regulus::bench::BenchConfig::parse(text, "fuzz.toml");
    }
});
