//! The dating rule: a range within ±9,999, start before end, or none.
#![no_main]
use libfuzzer_sys::fuzz_target;
use vitrine_build::dates::{parse_date, MAX_YEAR};

fuzz_target!(|text: &str| {
    if let Some(r) = parse_date(text) {
        assert!(r.start <= r.end && r.start.abs() <= MAX_YEAR && r.end.abs() <= MAX_YEAR);
    }
});
