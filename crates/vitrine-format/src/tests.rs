use super::*;

#[test]
fn array_round_trip_and_checksum() {
    let data = [1.5f32, -2.0, 3.25];
    let (r, bytes) = ArrayRef::encode("arrays/x.f32", &data);
    assert_eq!(r.bytes, 12);
    assert_eq!(r.decode::<f32>(&bytes).unwrap(), data.to_vec());
    // Little-endian layout, per IEEE 754: 1.5f32 = 0x3FC00000.
    assert_eq!(&bytes[0..4], &[0x00, 0x00, 0xC0, 0x3F]);
}

#[test]
fn sha256_matches_published_vector() {
    // FIPS 180-2 example: SHA-256("abc").
    assert_eq!(
        sha256_hex(b"abc"),
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    );
}

#[test]
fn bad_bytes_give_typed_errors() {
    let (r, mut bytes) = ArrayRef::encode("a.u32", &[1u32, 2, 3]);
    assert!(matches!(
        r.decode::<u32>(&bytes[..5]),
        Err(AtlasError::WrongLength { .. })
    ));
    assert!(matches!(
        r.decode::<f32>(&bytes),
        Err(AtlasError::WrongType { .. })
    ));
    bytes[0] ^= 1;
    assert!(matches!(
        r.decode::<u32>(&bytes),
        Err(AtlasError::Checksum { .. })
    ));
}

#[test]
fn text_table_validates() {
    let t = TextTable::from_strings(&["a", "überlieferung", ""]);
    t.validate("t", 3).unwrap();
    assert_eq!(t.get(1), "überlieferung");
    let mut broken = t.clone();
    broken.offsets[1] = 2; // inside "ü"
    assert!(broken.validate("t", 3).is_err());
    let mut broken = t.clone();
    broken.offsets[2] = 0;
    assert!(broken.validate("t", 3).is_err());
}

#[test]
fn manifest_rejects_garbage_without_panicking() {
    assert!(matches!(
        Manifest::from_json("{"),
        Err(AtlasError::ManifestJson(_))
    ));
    assert!(matches!(
        Manifest::from_json("{\"format\":\"x\"}"),
        Err(AtlasError::NotAnAtlas(_))
    ));
    assert!(matches!(
        Manifest::from_json("{\"format\":\"vitrine-atlas\",\"format_version\":9}"),
        Err(AtlasError::UnsupportedVersion { found: 9, .. })
    ));
    // Arbitrary byte soup must never panic.
    for seed in 0..200u32 {
        let s: String = (0..64)
            .map(|i| (((seed * 31 + i * 7) % 94) as u8 + 32) as char)
            .collect();
        let _ = Manifest::from_json(&s);
    }
}

#[test]
fn copy_groups_are_checked_item_by_item() {
    // Two groups: items 0, 2, 5 and items 1, 3; the pairs join them.
    let g = CopyGroups::new(
        6,
        vec![0, 2, 5, 1, 3],
        vec![0, 3, 5],
        vec![0, 2, 2, 5, 1, 3],
        vec![4, 0, 6],
    )
    .unwrap();
    assert_eq!(g.groups(), 2);
    assert_eq!(g.group(5), &[0, 2, 5]);
    assert_eq!(g.group(3), &[1, 3]);
    assert!(g.group(4).is_empty());
    let bad = |members: Vec<u32>, starts: Vec<u32>, pairs: Vec<u32>, bits: Vec<u8>| {
        CopyGroups::new(6, members, starts, pairs, bits)
            .unwrap_err()
            .to_string()
    };
    assert!(bad(vec![0, 2, 2, 5], vec![0, 2, 4], vec![], vec![]).contains("two groups"));
    assert!(bad(vec![0, 2, 5], vec![0, 1, 3], vec![], vec![]).contains("fewer than two"));
    assert!(bad(vec![0, 9], vec![0, 2], vec![], vec![]).contains("not one of the 6 items"));
    assert!(bad(vec![0, 2], vec![0, 3], vec![], vec![]).contains("end at the 2 members"));
    assert!(
        bad(vec![0, 2, 1, 3], vec![0, 2, 4], vec![0, 1], vec![3]).contains("not within one group")
    );
    assert!(bad(vec![0, 2], vec![0, 2], vec![0, 2], vec![]).contains("differ in number"));
    // Starts that run back or past the members are refused, not sliced.
    assert!(bad(vec![0, 1, 2, 3, 4], vec![0, 7, 5], vec![], vec![]).contains("runs back or past"));
    assert!(
        bad(vec![0, 1, 2, 3], vec![0, u32::MAX, 4], vec![], vec![]).contains("runs back or past")
    );
}
