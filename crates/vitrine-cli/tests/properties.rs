//! Property tests of the manifest reader on a real atlas's `atlas.json` (one built here with
//! images, so it has sheets, fields and maps): with a byte changed, cut or inserted, or any of its
//! numbers replaced by an extreme value (0, -1, 2^32 - 1, 2^53, 1e300), it reads or fails with an
//! error, never a panic. Case counts are bounded for the normal test run.

mod common;

use std::sync::OnceLock;

use proptest::prelude::*;
use vitrine_format::Manifest;

/// The manifest of a small atlas built once for all cases.
fn seed() -> &'static str {
    static SEED: OnceLock<String> = OnceLock::new();
    SEED.get_or_init(|| {
        let dir = tempfile::tempdir().unwrap();
        let d = dir.path();
        std::fs::create_dir_all(d.join("images")).unwrap();
        for i in 0..12u32 {
            image::RgbImage::from_pixel(30 + i, 20, image::Rgb([20 * i as u8, 90, 200]))
                .save(d.join(format!("images/p{i}.png")))
                .unwrap();
        }
        common::write_small_inputs(d, &(0..12).map(|i| format!("p{i}")).collect::<Vec<_>>());
        // A catalogue with fields of every kind the reader decodes.
        let mut csv = String::from("id,title,dating,height,kind\n");
        for i in 0..12 {
            csv.push_str(&format!(
                "p{i},Sheet {i},{},{}.5,{}\n",
                1500 + i,
                i,
                ["a", "b"][i % 2]
            ));
        }
        std::fs::write(d.join("records.csv"), csv).unwrap();
        let o = common::image_build(d).output().unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        std::fs::read_to_string(d.join("atlas/atlas.json")).unwrap()
    })
}

/// Byte offsets and lengths of the numbers in a JSON text (outside strings).
fn numbers(text: &str) -> Vec<(usize, usize)> {
    let b = text.as_bytes();
    let (mut out, mut i, mut in_string) = (Vec::new(), 0, false);
    while i < b.len() {
        match b[i] {
            b'"' if !in_string => in_string = true,
            b'"' if in_string && b[i - 1] != b'\\' => in_string = false,
            c if !in_string && (c == b'-' || c.is_ascii_digit()) => {
                let start = i;
                while i < b.len() && matches!(b[i], b'-' | b'+' | b'.' | b'e' | b'E' | b'0'..=b'9')
                {
                    i += 1;
                }
                out.push((start, i - start));
                continue;
            }
            _ => {}
        }
        i += 1;
    }
    out
}

proptest! {
    // A failing case is printed, not saved into the source tree.
    #![proptest_config(ProptestConfig { cases: 384, failure_persistence: None, ..ProptestConfig::default() })]

    #[test]
    fn manifests_with_a_byte_edit_read_or_fail_cleanly(
        at in any::<prop::sample::Index>(),
        byte in any::<u8>(),
        how in 0u8..3,
    ) {
        let mut bytes = seed().as_bytes().to_vec();
        let i = at.index(bytes.len());
        match how {
            0 => bytes[i] = byte,
            1 => bytes.truncate(i),
            _ => bytes.insert(i, byte),
        }
        let _ = Manifest::from_json(&String::from_utf8_lossy(&bytes));
    }

    #[test]
    fn manifests_with_an_extreme_number_read_or_fail_cleanly(
        which in any::<prop::sample::Index>(),
        value in prop::sample::select(vec!["0", "-1", "4294967295", "4294967296", "9007199254740992", "1e300", "-2147483648"]),
    ) {
        let text = seed();
        let nums = numbers(text);
        let (at, len) = nums[which.index(nums.len())];
        let edited = format!("{}{}{}", &text[..at], value, &text[at + len..]);
        let _ = Manifest::from_json(&edited);
    }
}

#[test]
fn the_seed_manifest_reads() {
    let m = Manifest::from_json(seed()).unwrap();
    assert_eq!(m.item_count, 12);
    assert!(m.sheets.is_some() && !m.fields.is_empty());
    assert!(numbers(seed()).len() > 50);
}
