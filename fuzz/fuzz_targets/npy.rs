//! The .npy reader, in memory and streamed: an array the bytes hold, or an error.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    for got in [
        vitrine_format::npy::parse(data),
        vitrine_format::npy::read(&mut &data[..], data.len()),
    ] {
        if let Ok(a) = got {
            assert_eq!(a.data.len(), a.rows * a.cols);
            assert!(a.data.len() <= data.len());
        }
    }
});
