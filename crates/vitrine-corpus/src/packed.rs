//! Item sets packed short enough for a link: item numbers (positions in the atlas's item order)
//! sorted, as gaps, each gap a LEB128 varint, the bytes in base64url without padding (RFC 4648 §5).
//! A hand-picked set of a few hundred items fits in a link this way, where their ids would not.
//! Item numbers are only meaningful for one build of an atlas: whoever writes them must also name
//! that build, and whoever reads them must check it.

use crate::CorpusError;

const ALPHABET: &[u8; 64] = b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789-_";

/// Packs item numbers (any order, repeats dropped).
pub fn pack(items: &[u32]) -> String {
    let mut v = items.to_vec();
    v.sort_unstable();
    v.dedup();
    let mut bytes = Vec::with_capacity(v.len() * 2);
    let mut prev = 0u32;
    for (k, &i) in v.iter().enumerate() {
        // The first number as it is, then each gap less one (gaps are at least 1).
        let mut g = if k == 0 { i } else { i - prev - 1 };
        prev = i;
        loop {
            let b = (g & 0x7f) as u8;
            g >>= 7;
            if g == 0 {
                bytes.push(b);
                break;
            }
            bytes.push(b | 0x80);
        }
    }
    base64url(&bytes)
}

/// The item numbers of a packed set, ascending; each must be below `n` (the atlas's item count).
pub fn unpack(text: &str, n: usize) -> Result<Vec<u32>, CorpusError> {
    let bad = |why: &str| CorpusError::Invalid(format!("packed items {:?}: {why}", short(text)));
    let bytes = from_base64url(text).ok_or_else(|| bad("not base64url"))?;
    let mut out = Vec::new();
    let (mut g, mut shift) = (0u64, 0u32);
    for &b in &bytes {
        if shift > 28 {
            return Err(bad("a number is too long"));
        }
        g |= ((b & 0x7f) as u64) << shift;
        shift += 7;
        if b & 0x80 == 0 {
            let i = match out.last() {
                None => g,
                Some(&p) => p as u64 + 1 + g,
            };
            if i >= n as u64 {
                return Err(bad(&format!(
                    "item number {i} is beyond this atlas's {n} items"
                )));
            }
            out.push(i as u32);
            (g, shift) = (0, 0);
        }
    }
    if shift != 0 {
        return Err(bad("it ends inside a number"));
    }
    Ok(out)
}

fn short(text: &str) -> String {
    match text.char_indices().nth(24) {
        Some((k, _)) => format!("{}…", &text[..k]),
        None => text.to_string(),
    }
}

fn base64url(bytes: &[u8]) -> String {
    let mut s = String::with_capacity(bytes.len().div_ceil(3) * 4);
    for c in bytes.chunks(3) {
        let w = (c[0] as u32) << 16
            | (c.get(1).copied().unwrap_or(0) as u32) << 8
            | c.get(2).copied().unwrap_or(0) as u32;
        let chars = c.len() + 1;
        for k in 0..chars {
            s.push(ALPHABET[(w >> (18 - 6 * k) & 63) as usize] as char);
        }
    }
    s
}

fn from_base64url(s: &str) -> Option<Vec<u8>> {
    let val = |c: u8| ALPHABET.iter().position(|&a| a == c).map(|v| v as u32);
    let s = s.as_bytes();
    if s.len() % 4 == 1 {
        return None;
    }
    let mut out = Vec::with_capacity(s.len() * 3 / 4);
    for c in s.chunks(4) {
        let mut w = 0u32;
        for (k, &ch) in c.iter().enumerate() {
            w |= val(ch)? << (18 - 6 * k);
        }
        let bytes = c.len() - 1;
        // Bits past the last whole byte must be zero (one text for each set).
        if w & ((1 << (24 - 8 * bytes)) - 1) != 0 {
            return None;
        }
        for k in 0..bytes {
            out.push((w >> (16 - 8 * k)) as u8);
        }
    }
    Some(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn base64url_matches_the_rfc_4648_test_vectors() {
        // RFC 4648 §10 test vectors (base64, whose alphabet agrees with base64url on these),
        // without their padding as §5 allows for URLs.
        for (plain, enc) in [
            ("", ""),
            ("f", "Zg"),
            ("fo", "Zm8"),
            ("foo", "Zm9v"),
            ("foob", "Zm9vYg"),
            ("fooba", "Zm9vYmE"),
            ("foobar", "Zm9vYmFy"),
        ] {
            assert_eq!(base64url(plain.as_bytes()), enc);
            assert_eq!(from_base64url(enc).unwrap(), plain.as_bytes());
        }
        // The two characters where base64url differs from base64 (§5: 62 is '-', 63 is '_').
        assert_eq!(base64url(&[0xfb, 0xff]), "-_8");
        assert!(from_base64url("Zm9v+A").is_none());
        assert!(
            from_base64url("Zh").is_none(),
            "stray bits after the last byte"
        );
    }

    #[test]
    fn sets_pack_and_come_back_sorted_and_short() {
        let items = [70_000u32, 3, 3, 0, 129, 128, 999_999];
        let text = pack(&items);
        assert_eq!(
            unpack(&text, 1_000_000).unwrap(),
            [0, 3, 128, 129, 70_000, 999_999]
        );
        // 300 items picked here and there in a million: a few characters each.
        let spread: Vec<u32> = (0..300).map(|k| k * 3_331 + (k % 7)).collect();
        let text = pack(&spread);
        assert!(text.len() < 300 * 4, "{} characters", text.len());
        assert_eq!(unpack(&text, 1_000_000).unwrap(), spread);
        assert_eq!(unpack(&pack(&[]), 10).unwrap(), Vec::<u32>::new());
    }

    #[test]
    fn bad_packed_sets_are_refused_with_the_reason() {
        let text = pack(&[5, 12]);
        let e = unpack(&text, 10).unwrap_err().to_string();
        assert!(
            e.contains("item number 12 is beyond this atlas's 10 items"),
            "{e}"
        );
        assert!(unpack("!!", 10)
            .unwrap_err()
            .to_string()
            .contains("not base64url"));
        // One byte with its continuation bit set and nothing after it.
        let e = unpack(&base64url(&[0x85]), 10).unwrap_err().to_string();
        assert!(e.contains("ends inside a number"), "{e}");
        let e = unpack(&base64url(&[0xff; 6]), 10).unwrap_err().to_string();
        assert!(e.contains("too long"), "{e}");
    }
}
