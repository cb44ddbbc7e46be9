//! A perceptual hash of a picture: 64 bits that change little when the picture is scanned again,
//! re-compressed, slightly cropped or re-toned, and much between different pictures: one of the
//! checks of two items that look like copies of one picture.
//!
//! The picture is made grey (BT.601 luma weights in 16-bit fixed point), scaled to 32 x 32 with a
//! Lanczos filter (three lobes, widened when shrinking), transformed by a two-dimensional DCT-II,
//! and the 8 x 8 lowest frequencies are compared with their median: bit k (row-major, the first
//! the most significant) says whether coefficient k lies above it. This is the usual DCT-based
//! perceptual hash; two hashes are compared by the number of bits in which they differ.

use image::imageops::FilterType;
use image::{GrayImage, RgbImage};

/// Side of the grey picture the DCT runs on.
const SIDE: usize = 32;
/// Side of the block of lowest frequencies the bits come from.
const LOW: usize = 8;

/// The grey value of an sRGB pixel: 0.299 R + 0.587 G + 0.114 B, rounded, in 16-bit fixed point.
pub(crate) fn luma(p: &[u8; 3]) -> u8 {
    ((p[0] as u32 * 19595 + p[1] as u32 * 38470 + p[2] as u32 * 7471 + 0x8000) >> 16) as u8
}

/// The 64-bit perceptual hash of `rgb`.
pub fn phash(rgb: &RgbImage) -> u64 {
    let (w, h) = rgb.dimensions();
    let grey = GrayImage::from_fn(w, h, |x, y| image::Luma([luma(&rgb.get_pixel(x, y).0)]));
    let small = image::imageops::resize(&grey, SIDE as u32, SIDE as u32, FilterType::Lanczos3);
    let px: Vec<f64> = small.pixels().map(|p| p.0[0] as f64).collect();
    hash_of_32(&px)
}

/// The hash of a grey picture already scaled to 32 x 32 (row-major, 1,024 values).
pub(crate) fn hash_of_32(px: &[f64]) -> u64 {
    debug_assert_eq!(px.len(), SIDE * SIDE);
    // cos(pi k (2n + 1) / 2N) for the 8 lowest frequencies k and every sample n.
    let basis: Vec<f64> = (0..LOW)
        .flat_map(|k| {
            (0..SIDE).map(move |n| {
                (std::f64::consts::PI * k as f64 * (2 * n + 1) as f64 / (2 * SIDE) as f64).cos()
            })
        })
        .collect();
    // Along the rows (the 8 lowest frequencies of each), then down the columns.
    let mut rows = vec![0f64; SIDE * LOW];
    for y in 0..SIDE {
        for k in 0..LOW {
            rows[y * LOW + k] = (0..SIDE)
                .map(|n| px[y * SIDE + n] * basis[k * SIDE + n])
                .sum();
        }
    }
    let mut low = [0f64; LOW * LOW];
    for u in 0..LOW {
        for k in 0..LOW {
            low[u * LOW + k] = (0..SIDE)
                .map(|y| rows[y * LOW + k] * basis[u * SIDE + y])
                .sum();
        }
    }
    let mut sorted = low;
    sorted.sort_by(f64::total_cmp);
    let median = (sorted[LOW * LOW / 2 - 1] + sorted[LOW * LOW / 2]) / 2.0;
    low.iter()
        .fold(0u64, |bits, &c| (bits << 1) | u64::from(c > median))
}

/// The number of bits in which two hashes differ (0: the same; 32 is what unrelated pictures
/// give on average).
pub fn distance(a: u64, b: u64) -> u32 {
    (a ^ b).count_ones()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// An invented picture: soft blobs and bars on a tone, from a seed.
    fn picture(seed: u32, w: u32, h: u32) -> RgbImage {
        RgbImage::from_fn(w, h, |x, y| {
            let (fx, fy) = (x as f32 / w as f32, y as f32 / h as f32);
            let s = seed as f32;
            let v = 128.0
                + 60.0 * ((fx * (3.0 + s) + s).sin() * (fy * (2.0 + s * 0.7)).cos())
                + 40.0 * (((fx - 0.3 * (s % 3.0)) * 9.0).cos() * (fy * 5.0 + s).sin());
            let v = v.clamp(0.0, 255.0) as u8;
            image::Rgb([v, v.saturating_sub(20), v / 2 + 40])
        })
    }

    #[test]
    fn a_picture_rescaled_and_retoned_keeps_its_hash_and_others_differ() {
        let a = picture(1, 400, 300);
        let h = phash(&a);
        // Scaled down (another scan's resolution) and a little brighter.
        let smaller = image::imageops::resize(&a, 230, 172, FilterType::Triangle);
        let brighter = RgbImage::from_fn(230, 172, |x, y| {
            let p = smaller.get_pixel(x, y).0;
            image::Rgb(p.map(|c| c.saturating_add(12)))
        });
        assert!(
            distance(h, phash(&brighter)) <= 4,
            "{}",
            distance(h, phash(&brighter))
        );
        // Other invented pictures are far.
        for s in 2..8 {
            let d = distance(h, phash(&picture(s, 400, 300)));
            assert!(d >= 12, "seed {s}: {d} bits");
        }
        // Half the bits are set: the median splits the 64 coefficients.
        assert_eq!(h.count_ones(), 32);
    }
}
