//! The CSV catalogue reader: a catalogue whose rows have the header's width, or an error that
//! names the file.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    match vitrine_build::catalogue::parse_csv(data, std::path::Path::new("f.csv"), "id") {
        Ok(c) => assert!(c.rows.iter().all(|r| r.len() == c.header.len())),
        Err(e) => assert!(e.to_string().contains("f.csv")),
    }
});
