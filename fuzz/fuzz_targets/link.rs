//! What a link carries (its JSON, then its packed item sets): values or errors, item numbers below
//! the count and ascending.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|text: &str| {
    if let Ok(s) = serde_json::from_str::<vitrine_view::link::Shared>(text) {
        for step in s.steps {
            if let vitrine_view::link::LinkStep::Packed { items, .. } = step {
                if let Ok(v) = vitrine_corpus::packed::unpack(&items, 1_000_000) {
                    assert!(v.windows(2).all(|w| w[0] < w[1]) && v.iter().all(|&i| i < 1_000_000));
                }
            }
        }
    }
    if let Ok(v) = vitrine_corpus::packed::unpack(text, 5_000) {
        assert!(v.iter().all(|&i| i < 5_000));
    }
});
