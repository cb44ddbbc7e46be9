//! The manifest reader: a manifest that passed its checks, or an error.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|text: &str| {
    let _ = vitrine_format::Manifest::from_json(text);
});
