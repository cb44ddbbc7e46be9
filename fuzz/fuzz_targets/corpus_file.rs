//! The corpus-file reader: a file that writes back to itself, or an error.
#![no_main]
use libfuzzer_sys::fuzz_target;
use vitrine_corpus::corpus::CorpusFile;

fuzz_target!(|text: &str| {
    if let Ok(c) = CorpusFile::from_json(text) {
        assert_eq!(CorpusFile::from_json(&c.to_json()).unwrap(), c);
    }
});
