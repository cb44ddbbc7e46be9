//! What the build keeps of a picture to tell whether another is a copy of it: perceptual hashes of
//! the whole picture and of ten crops of it, and a coarse colour grid.
//!
//! A copy is the same picture again: a re-scan (other tone and contrast, other resolution), a
//! re-compression, a slight turn, and often a crop by a few per cent (another book's margins,
//! another photographer's framing). The hash of a cropped copy moves far from the whole picture's
//! (every low frequency shifts), so the original's hash is kept for the crops a copy is likely to
//! be — 5 % and 10 % off, centred and at each corner — and two pictures are compared by the least
//! distance between one's whole hash and any of the other's ([`compare`]). A hash is blind to
//! colour: two flat pictures alike in shape but not in colour (one shield red, the other blue)
//! hash alike. The colour grid refuses them: the correlation of the two pictures' colours over the
//! matched region, each channel's mean taken out (so that a re-toned copy still correlates) and
//! all channels pooled.

use image::imageops::FilterType;
use image::{GrayImage, RgbImage};

/// Hashes kept per picture: the whole picture, then 5 % and 10 % crops centred and at the four
/// corners.
pub const VARIANTS: usize = 11;
/// Side of the grey picture the crops are taken from (5 % of it is a whole 8 pixels).
const GREY_SIDE: u32 = 160;
/// Side of the colour grid.
pub const GRID: usize = 16;
/// Side of the samples compared over a matched region.
const SAMPLES: usize = 8;
/// A colour variance (per sample and channel, in 8-bit levels squared) added to each picture's
/// own: a nearly even picture correlates with nothing, rather than by its noise.
const VARIANCE_FLOOR: f64 = 9.0;

/// The part of the whole picture variant `v` covers: [x0, y0, x1, y1] in 0..=1, and in pixels of
/// the grey picture.
fn region(v: usize) -> ([f64; 4], [u32; 4]) {
    if v == 0 {
        return ([0.0, 0.0, 1.0, 1.0], [0, 0, GREY_SIDE, GREY_SIDE]);
    }
    let cut = if v <= 5 {
        GREY_SIDE / 20
    } else {
        GREY_SIDE / 10
    };
    let (dx, dy) = [(cut / 2, cut / 2), (0, 0), (cut, 0), (0, cut), (cut, cut)][(v - 1) % 5];
    let side = GREY_SIDE - cut;
    let s = GREY_SIDE as f64;
    (
        [
            dx as f64 / s,
            dy as f64 / s,
            (dx + side) as f64 / s,
            (dy + side) as f64 / s,
        ],
        [dx, dy, side, side],
    )
}

/// A picture's signature for finding its copies.
#[derive(Clone, Debug, PartialEq)]
pub struct Signature {
    /// The perceptual hash of each variant (see [`VARIANTS`]); the first is the whole picture.
    pub hashes: [u64; VARIANTS],
    /// The picture's colours averaged on a 16 x 16 grid over its whole extent, RGB row-major.
    pub grid: Vec<u8>,
}

/// The signature of `rgb` (any size; the build takes it from the largest thumbnail).
pub fn signature(rgb: &RgbImage) -> Signature {
    let (w, h) = rgb.dimensions();
    let grey = GrayImage::from_fn(w, h, |x, y| {
        image::Luma([crate::phash::luma(&rgb.get_pixel(x, y).0)])
    });
    let grey = image::imageops::resize(&grey, GREY_SIDE, GREY_SIDE, FilterType::Lanczos3);
    let mut hashes = [0u64; VARIANTS];
    for (v, hash) in hashes.iter_mut().enumerate() {
        let [x, y, sw, sh] = region(v).1;
        let crop = image::imageops::crop_imm(&grey, x, y, sw, sh).to_image();
        let small = image::imageops::resize(&crop, 32, 32, FilterType::Lanczos3);
        let px: Vec<f64> = small.pixels().map(|p| p.0[0] as f64).collect();
        *hash = crate::phash::hash_of_32(&px);
    }
    let grid = image::imageops::resize(rgb, GRID as u32, GRID as u32, FilterType::Triangle);
    Signature {
        hashes,
        grid: grid.into_raw(),
    }
}

/// How alike two signatures are.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Likeness {
    /// The least Hamming distance between one picture's whole hash and any variant of the other's.
    pub bits: u32,
    /// The pooled correlation of the two pictures' colours over the region that matched, in -1..=1.
    pub colour: f32,
}

/// Samples `grid` bilinearly at an 8 x 8 lattice of points inside `r`, per channel.
fn sample(grid: &[u8], r: [f64; 4]) -> [[f64; SAMPLES * SAMPLES]; 3] {
    let mut out = [[0f64; SAMPLES * SAMPLES]; 3];
    let g = GRID as f64;
    let at = |x: usize, y: usize, c: usize| grid[(y * GRID + x) * 3 + c] as f64;
    for sy in 0..SAMPLES {
        let v = r[1] + (sy as f64 + 0.5) / SAMPLES as f64 * (r[3] - r[1]);
        let gy = (v * g - 0.5).clamp(0.0, g - 1.0);
        let (y0, fy) = (gy.floor() as usize, gy.fract());
        let y1 = (y0 + 1).min(GRID - 1);
        for sx in 0..SAMPLES {
            let u = r[0] + (sx as f64 + 0.5) / SAMPLES as f64 * (r[2] - r[0]);
            let gx = (u * g - 0.5).clamp(0.0, g - 1.0);
            let (x0, fx) = (gx.floor() as usize, gx.fract());
            let x1 = (x0 + 1).min(GRID - 1);
            for (c, ch) in out.iter_mut().enumerate() {
                let top = at(x0, y0, c) * (1.0 - fx) + at(x1, y0, c) * fx;
                let bottom = at(x0, y1, c) * (1.0 - fx) + at(x1, y1, c) * fx;
                ch[sy * SAMPLES + sx] = top * (1.0 - fy) + bottom * fy;
            }
        }
    }
    out
}

/// The pooled correlation of two sets of colour samples, each channel's mean taken out.
fn correlation(a: &[[f64; SAMPLES * SAMPLES]; 3], b: &[[f64; SAMPLES * SAMPLES]; 3]) -> f64 {
    let n = (SAMPLES * SAMPLES) as f64;
    let (mut ab, mut aa, mut bb) = (0f64, 0f64, 0f64);
    for c in 0..3 {
        let ma = a[c].iter().sum::<f64>() / n;
        let mb = b[c].iter().sum::<f64>() / n;
        for (x, y) in a[c].iter().zip(&b[c]) {
            let (x, y) = (x - ma, y - mb);
            ab += x * y;
            aa += x * x;
            bb += y * y;
        }
    }
    let floor = VARIANCE_FLOOR * n * 3.0;
    ab / ((aa + floor) * (bb + floor)).sqrt()
}

/// How alike `a` and `b` are: the least hash distance of either picture as a crop of the other,
/// and the colour correlation over the region that gave it.
pub fn compare(a: &Signature, b: &Signature) -> Likeness {
    // (bits, variant, whether `a` is the one cropped)
    let mut best = (u32::MAX, 0usize, true);
    for v in 0..VARIANTS {
        let d = crate::phash::distance(a.hashes[v], b.hashes[0]);
        if d < best.0 {
            best = (d, v, true);
        }
        let d = crate::phash::distance(b.hashes[v], a.hashes[0]);
        if d < best.0 {
            best = (d, v, false);
        }
    }
    let (bits, v, a_cropped) = best;
    let (cropped, whole) = if a_cropped { (a, b) } else { (b, a) };
    let colour = correlation(
        &sample(&cropped.grid, region(v).0),
        &sample(&whole.grid, [0.0, 0.0, 1.0, 1.0]),
    );
    Likeness {
        bits,
        colour: colour as f32,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// An invented textured scene: smooth waves of colour at a few scales under soft discs.
    fn scene(seed: u32, w: u32, h: u32) -> RgbImage {
        let s = seed as f32;
        RgbImage::from_fn(w, h, |x, y| {
            let (fx, fy) = (x as f32 / w as f32, y as f32 / h as f32);
            let mut c = [0f32; 3];
            for (k, ch) in c.iter_mut().enumerate() {
                let kf = k as f32;
                *ch = 128.0
                    + 50.0 * ((fx * (4.0 + s % 5.0) + s + kf).sin() * (fy * (3.0 + kf) + s).cos())
                    + 30.0 * ((fx * 17.0 + fy * (11.0 + s % 3.0) + kf * 2.0).sin())
                    + 15.0 * ((fx * 41.0 - fy * 37.0 + s * 1.7).cos());
            }
            for d in 0..4 {
                let df = d as f32;
                let (cx, cy) = (
                    0.2 + 0.6 * ((s * 3.1 + df * 1.3).sin() * 0.5 + 0.5),
                    0.2 + 0.6 * ((s * 2.3 + df * 2.9).cos() * 0.5 + 0.5),
                );
                let r2 = ((fx - cx).powi(2) + (fy - cy).powi(2)) / 0.012;
                let m = (-r2 * r2).exp();
                let col = [
                    (s * 37.0 + df * 80.0) % 255.0,
                    (df * 60.0 + 40.0),
                    200.0 - df * 30.0,
                ];
                for k in 0..3 {
                    c[k] = c[k] * (1.0 - m) + col[k] * m;
                }
            }
            image::Rgb(c.map(|v| v.clamp(0.0, 255.0) as u8))
        })
    }

    /// `img` cropped by `frac` of each side's length, the cut split `at` (0: all on the right and
    /// bottom, 1: all on the left and top).
    fn cropped(img: &RgbImage, frac: f32, at: f32) -> RgbImage {
        let (w, h) = img.dimensions();
        let (cw, ch) = ((w as f32 * frac) as u32, (h as f32 * frac) as u32);
        let (x, y) = ((cw as f32 * at) as u32, (ch as f32 * at) as u32);
        image::imageops::crop_imm(img, x, y, w - cw, h - ch).to_image()
    }

    #[test]
    fn a_crop_is_matched_by_the_variant_it_is_and_keeps_its_colours() {
        let a = scene(3, 480, 360);
        let sa = signature(&a);
        for (frac, at) in [(0.05, 0.5), (0.10, 0.0), (0.10, 1.0), (0.08, 0.3)] {
            let c = cropped(&a, frac, at);
            let l = compare(&sa, &signature(&c));
            assert!(l.bits <= 6, "crop {frac} at {at}: {} bits", l.bits);
            assert!(l.colour > 0.8, "crop {frac} at {at}: colour {}", l.colour);
            // The same either way round.
            assert_eq!(compare(&signature(&c), &sa), l);
        }
        // The plain hashes of a 10 % corner crop are much farther apart than the least over crops.
        let c = cropped(&a, 0.10, 0.0);
        let plain = crate::phash::distance(sa.hashes[0], signature(&c).hashes[0]);
        assert!(plain > compare(&sa, &signature(&c)).bits, "{plain}");
    }

    #[test]
    fn a_retoned_copy_correlates_and_a_recoloured_look_alike_does_not() {
        let a = scene(5, 400, 300);
        let sa = signature(&a);
        // Darker and flatter (a re-scan): the colours' means and spread change, not their pattern.
        let retoned = RgbImage::from_fn(400, 300, |x, y| {
            image::Rgb(a.get_pixel(x, y).0.map(|c| (c as f32 * 0.7 + 20.0) as u8))
        });
        let l = compare(&sa, &signature(&retoned));
        assert!(l.bits <= 4 && l.colour > 0.9, "{l:?}");
        // The same shapes with the channels swapped round: alike in grey, not in colour.
        let swapped = RgbImage::from_fn(400, 300, |x, y| {
            let [r, g, b] = a.get_pixel(x, y).0;
            image::Rgb([b, r, g])
        });
        let l = compare(&sa, &signature(&swapped));
        assert!(l.colour < 0.5, "{l:?}");
        // Another scene is far in bits.
        let other = compare(&sa, &signature(&scene(11, 400, 300)));
        assert!(other.bits >= 14, "{other:?}");
    }

    #[test]
    fn an_even_picture_correlates_with_nothing() {
        let even = RgbImage::from_pixel(200, 200, image::Rgb([120, 110, 90]));
        let l = compare(&signature(&even), &signature(&even));
        assert_eq!(l.bits, 0);
        assert!(l.colour.abs() < 0.01, "{l:?}");
    }
}
