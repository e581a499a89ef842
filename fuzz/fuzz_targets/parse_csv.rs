//! Feeds arbitrary UTF-8 text to `ellone::io::parse_dense_csv`: it must return, never panic.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(text) = std::str::from_utf8(data) {
        let _ = ellone::io::parse_dense_csv(text, "<fuzz>");
    }
});
