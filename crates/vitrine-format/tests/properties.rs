//! Property tests of the `.npy` reader (the NumPy format, version 1.0-3.0): any bytes, and valid
//! files with a byte changed, cut or with bytes inserted, give an array or an error, never a panic
//! and never an array the bytes do not hold; what the writer writes reads back the same.
//! Case counts are bounded for the normal test run.

use proptest::prelude::*;
use vitrine_format::npy::{encode_f32, parse, read};

fn valid() -> impl Strategy<Value = (usize, usize, Vec<f32>)> {
    (1usize..6, 1usize..6).prop_flat_map(|(r, c)| {
        (
            Just(r),
            Just(c),
            proptest::collection::vec(-1e6f32..1e6, r * c),
        )
    })
}

proptest! {
    // A failing case is printed, not saved into the source tree.
    #![proptest_config(ProptestConfig { cases: 512, failure_persistence: None, ..ProptestConfig::default() })]

    #[test]
    fn what_is_written_reads_back((rows, cols, data) in valid()) {
        let bytes = encode_f32(rows, cols, &data);
        let a = parse(&bytes).unwrap();
        prop_assert_eq!((a.rows, a.cols), (rows, cols));
        prop_assert_eq!(a.data, data.clone());
        let b = read(&mut bytes.as_slice(), bytes.len()).unwrap();
        prop_assert_eq!(b.data, data);
    }

    #[test]
    fn edited_files_read_or_fail_cleanly(
        (rows, cols, data) in valid(),
        at in any::<prop::sample::Index>(),
        byte in any::<u8>(),
        how in 0u8..3,
        ins in proptest::collection::vec(any::<u8>(), 1..8),
    ) {
        let mut bytes = encode_f32(rows, cols, &data);
        let i = at.index(bytes.len());
        match how {
            0 => bytes[i] = byte,
            1 => bytes.truncate(i),
            _ => { bytes.splice(i..i, ins); }
        }
        let got = [parse(&bytes), read(&mut bytes.as_slice(), bytes.len())];
        for a in got.into_iter().flatten() {
            // Whatever is read is held by the bytes: at least a byte a value.
            prop_assert_eq!(a.data.len(), a.rows * a.cols);
            prop_assert!(a.data.len() <= bytes.len());
        }
    }

    #[test]
    fn any_bytes_after_the_magic_fail_cleanly(tail in proptest::collection::vec(any::<u8>(), 0..300)) {
        let mut bytes = b"\x93NUMPY\x01\x00".to_vec();
        bytes.extend(tail);
        let _ = parse(&bytes);
        let _ = read(&mut bytes.as_slice(), bytes.len());
    }

    #[test]
    fn any_header_text_fails_cleanly(header in "\\{'descr': '[<>|=]?[fiub][1248]', 'fortran_order': (True|False), 'shape': \\([0-9, ]{0,30}\\), \\}") {
        let mut bytes = b"\x93NUMPY\x01\x00".to_vec();
        bytes.extend_from_slice(&(header.len() as u16).to_le_bytes());
        bytes.extend_from_slice(header.as_bytes());
        bytes.extend_from_slice(&[0u8; 64]);
        if let Ok(a) = parse(&bytes) {
            prop_assert_eq!(a.data.len(), a.rows * a.cols);
        }
    }
}
