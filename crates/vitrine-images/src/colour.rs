//! Embedded ICC colour profiles applied: the pixels of an image that carries a profile (Adobe RGB,
//! eciRGB, ProPhoto, a CMYK press profile, greyscale with its own tone curve) are converted to
//! sRGB, the colour space thumbnails, average colours and descriptors assume.
//!
//! The conversion is the ICC's (ICC.1, *Image technology colour management — Architecture,
//! profile format, and data structure*): source profile to the profile connection space, then the
//! sRGB profile (IEC 61966-2-1) back out, with the perceptual rendering intent, the specification's
//! default, and no black-point compensation. The arithmetic is the `moxcms` crate's (8-bit
//! fixed-point matrix/tone-curve paths, interpolated lookup tables for CMYK).
//!
//! Transforms are made once per distinct profile and layout and kept (collections hold thousands
//! of images with the same few profiles). A profile that is sRGB in all but name (checked on a
//! grid of colours, not by its description) is recognised and skipped.

use std::collections::HashMap;
use std::sync::{Arc, Mutex};

use image::{DynamicImage, GrayAlphaImage, GrayImage, RgbImage, RgbaImage};
use moxcms::{
    ColorProfile, Layout, Transform16BitExecutor, Transform8BitExecutor, TransformOptions,
};

/// How an image's samples are laid out when they meet their profile.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Samples {
    Gray,
    GrayAlpha,
    Rgb,
    Rgba,
    /// Ink amounts, 0 = no ink (as JPEG and TIFF decoders give them).
    Cmyk,
}

impl Samples {
    fn layouts(self) -> (Layout, Layout) {
        match self {
            Samples::Gray => (Layout::Gray, Layout::Rgb),
            Samples::GrayAlpha => (Layout::GrayAlpha, Layout::Rgba),
            Samples::Rgb => (Layout::Rgb, Layout::Rgb),
            Samples::Rgba => (Layout::Rgba, Layout::Rgba),
            // The 4-channel layout carries the four inks.
            Samples::Cmyk => (Layout::Rgba, Layout::Rgb),
        }
    }

    fn channels(self) -> (usize, usize) {
        match self {
            Samples::Gray => (1, 3),
            Samples::GrayAlpha => (2, 4),
            Samples::Rgb => (3, 3),
            Samples::Rgba => (4, 4),
            Samples::Cmyk => (4, 3),
        }
    }
}

/// A profile's conversion to sRGB; `None` when the profile is sRGB already.
type Conversion = Option<Arc<Transform8BitExecutor>>;

/// Transforms made so far, by the profile's SHA-256 and the layout (bounded: cleared when it grows
/// past [`KEPT`] entries, so that a collection with a profile per image cannot hoard memory).
static MADE: Cache<Result<Conversion, String>> = Mutex::new(None);
/// Transforms by the profile's SHA-256 and the layout.
type Cache<T> = Mutex<Option<HashMap<([u8; 32], Samples), T>>>;
const KEPT: usize = 256;

/// What `cache` holds for `icc` and `samples`, else `make()`'s result, kept there.
fn kept<T: Clone>(cache: &Cache<T>, icc: &[u8], samples: Samples, make: impl FnOnce() -> T) -> T {
    use sha2::Digest;
    let key: ([u8; 32], Samples) = (sha2::Sha256::digest(icc).into(), samples);
    if let Some(made) = cache
        .lock()
        .unwrap_or_else(|e| e.into_inner())
        .as_ref()
        .and_then(|m| m.get(&key))
    {
        return made.clone();
    }
    let made = make();
    let mut all = cache.lock().unwrap_or_else(|e| e.into_inner());
    let all = all.get_or_insert_with(HashMap::new);
    if all.len() >= KEPT {
        all.clear();
    }
    all.insert(key, made.clone());
    made
}

/// The conversion of `icc` for samples laid out as `samples`, made once and kept.
fn conversion(icc: &[u8], samples: Samples) -> Result<Conversion, String> {
    kept(&MADE, icc, samples, || make(icc, samples))
}

fn make(icc: &[u8], samples: Samples) -> Result<Conversion, String> {
    use moxcms::DataColorSpace as Space;
    let profile = ColorProfile::new_from_slice(icc)
        .map_err(|e| format!("the embedded colour profile cannot be read ({e})"))?;
    // The colour transforms take any samples of the right count: a profile for other pixels (an
    // RGB profile on CMYK inks, a CMYK one on RGBA) would turn them into nonsense, so it is refused.
    let fits = match samples {
        Samples::Gray | Samples::GrayAlpha => profile.color_space == Space::Gray,
        Samples::Rgb | Samples::Rgba => profile.color_space == Space::Rgb,
        Samples::Cmyk => profile.color_space == Space::Cmyk,
    };
    if !fits {
        return Err(format!(
            "the embedded colour profile is for {:?} pixels, the image's are {samples:?}",
            profile.color_space
        ));
    }
    let (from, to) = samples.layouts();
    let srgb = ColorProfile::new_srgb();
    let t = profile
        .create_transform_8bit(from, &srgb, to, TransformOptions::default())
        .map_err(|e| {
            format!(
                "the embedded colour profile ({:?}) does not fit the image's {samples:?} samples ({e})",
                profile.color_space
            )
        })?;
    Ok(if is_srgb(&*t, samples) { None } else { Some(t) })
}

/// Whether a transform leaves every colour of a 17-step grid (every grey, for greyscale) where
/// plain sRGB would have it, within one level: then it is not worth applying.
fn is_srgb(t: &Transform8BitExecutor, samples: Samples) -> bool {
    let steps: Vec<u8> = (0..17).map(|i| (i * 255 / 16) as u8).collect();
    let (src, want): (Vec<u8>, Vec<u8>) = match samples {
        Samples::Cmyk => return false,
        Samples::Gray | Samples::GrayAlpha => {
            let (c, _) = samples.channels();
            let src: Vec<u8> = (0..=255u8)
                .flat_map(|v| [v, 255].into_iter().take(c))
                .collect();
            let want = (0..=255u8)
                .flat_map(|v| {
                    if samples == Samples::Gray {
                        vec![v, v, v]
                    } else {
                        vec![v, v, v, 255]
                    }
                })
                .collect();
            (src, want)
        }
        Samples::Rgb | Samples::Rgba => {
            let alpha = samples == Samples::Rgba;
            let mut src = Vec::new();
            for &r in &steps {
                for &g in &steps {
                    for &b in &steps {
                        src.extend_from_slice(&[r, g, b]);
                        if alpha {
                            src.push(255);
                        }
                    }
                }
            }
            (src.clone(), src)
        }
    };
    let mut out = vec![0u8; want.len()];
    t.transform(&src, &mut out).is_ok()
        && out
            .iter()
            .zip(&want)
            .all(|(&a, &b)| (a as i16 - b as i16).abs() <= 1)
}

/// Converts samples laid out as `samples` through `icc` to sRGB: RGB, or RGBA when the samples
/// carry alpha (left as it was). `Ok(None)` when the profile is sRGB already.
pub fn convert(icc: &[u8], samples: Samples, pixels: &[u8]) -> Result<Option<Vec<u8>>, String> {
    let Some(t) = conversion(icc, samples)? else {
        return Ok(None);
    };
    run(&*t, samples, pixels).map(Some)
}

/// Every whole pixel of `pixels` through `t`, laid out as `samples` leave it. Rows of pixels in
/// parallel chunks would not pay: decoding runs one image per core already.
fn run<V: Copy + Default>(
    t: &(dyn moxcms::TransformExecutor<V> + Send + Sync),
    samples: Samples,
    pixels: &[V],
) -> Result<Vec<V>, String> {
    let (cin, cout) = samples.channels();
    let n = pixels.len() / cin;
    let mut out = vec![V::default(); n * cout];
    t.transform(&pixels[..n * cin], &mut out)
        .map_err(|e| format!("the colour conversion failed ({e})"))?;
    Ok(out)
}

/// 16-bit transforms made so far (see [`MADE`]).
static MADE16: Cache<Result<Arc<Transform16BitExecutor>, String>> = Mutex::new(None);

/// [`convert`] for 16-bit samples, converted at 16 bits (a linear or wide-gamut 16-bit scan cut to
/// 8 bits first would band in the shadows): RGB or RGBA, 16 bits per sample.
pub fn convert16(icc: &[u8], samples: Samples, pixels: &[u16]) -> Result<Option<Vec<u16>>, String> {
    // The 8-bit conversion says whether the profile reads at all and whether it is sRGB.
    if conversion(icc, samples)?.is_none() {
        return Ok(None);
    }
    let t = kept(&MADE16, icc, samples, || {
        ColorProfile::new_from_slice(icc)
            .map_err(|e| e.to_string())
            .and_then(|p| {
                let (from, to) = samples.layouts();
                p.create_transform_16bit(
                    from,
                    &ColorProfile::new_srgb(),
                    to,
                    TransformOptions::default(),
                )
                .map_err(|e| e.to_string())
            })
            .map_err(|e| format!("the embedded colour profile cannot convert 16-bit samples ({e})"))
    })?;
    run(&*t, samples, pixels).map(Some)
}

/// An image converted from its embedded profile to sRGB (8 bits per sample, or 16 for 16-bit
/// images; alpha kept). When the profile cannot be used, the image comes back as it was with the
/// reason.
pub fn to_srgb(img: DynamicImage, icc: &[u8]) -> (DynamicImage, Option<String>) {
    let (w, h) = (img.width(), img.height());
    let deep = match &img {
        DynamicImage::ImageLuma16(i) => Some((Samples::Gray, i.as_raw())),
        DynamicImage::ImageLumaA16(i) => Some((Samples::GrayAlpha, i.as_raw())),
        DynamicImage::ImageRgb16(i) => Some((Samples::Rgb, i.as_raw())),
        DynamicImage::ImageRgba16(i) => Some((Samples::Rgba, i.as_raw())),
        _ => None,
    };
    if let Some((samples, pixels)) = deep {
        return match convert16(icc, samples, pixels) {
            Ok(Some(out)) => {
                let img = match samples {
                    Samples::GrayAlpha | Samples::Rgba => {
                        image::ImageBuffer::from_raw(w, h, out).map(DynamicImage::ImageRgba16)
                    }
                    _ => image::ImageBuffer::from_raw(w, h, out).map(DynamicImage::ImageRgb16),
                };
                (img.expect("w x h converted pixels"), None)
            }
            Ok(None) => (img, None),
            Err(why) => (img, Some(why)),
        };
    }
    let (samples, pixels) = match img.color() {
        image::ColorType::L8 | image::ColorType::L16 => (Samples::Gray, img.to_luma8().into_raw()),
        image::ColorType::La8 | image::ColorType::La16 => {
            (Samples::GrayAlpha, img.to_luma_alpha8().into_raw())
        }
        c if c.has_alpha() => (Samples::Rgba, img.to_rgba8().into_raw()),
        _ => (Samples::Rgb, img.to_rgb8().into_raw()),
    };
    match convert(icc, samples, &pixels) {
        Ok(Some(out)) => {
            let img = match samples {
                Samples::Gray | Samples::Rgb | Samples::Cmyk => {
                    RgbImage::from_raw(w, h, out).map(DynamicImage::ImageRgb8)
                }
                Samples::GrayAlpha | Samples::Rgba => {
                    RgbaImage::from_raw(w, h, out).map(DynamicImage::ImageRgba8)
                }
            };
            (img.expect("w x h converted pixels"), None)
        }
        Ok(None) => (rebuild(samples, w, h, pixels), None),
        Err(why) => (rebuild(samples, w, h, pixels), Some(why)),
    }
}

/// The 8-bit image the samples came from.
fn rebuild(samples: Samples, w: u32, h: u32, pixels: Vec<u8>) -> DynamicImage {
    match samples {
        Samples::Gray => GrayImage::from_raw(w, h, pixels).map(DynamicImage::ImageLuma8),
        Samples::GrayAlpha => GrayAlphaImage::from_raw(w, h, pixels).map(DynamicImage::ImageLumaA8),
        Samples::Rgba => RgbaImage::from_raw(w, h, pixels).map(DynamicImage::ImageRgba8),
        Samples::Rgb | Samples::Cmyk => {
            RgbImage::from_raw(w, h, pixels).map(DynamicImage::ImageRgb8)
        }
    }
    .expect("w x h pixels")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn srgb_profiles_are_recognised_and_others_convert() {
        let srgb = ColorProfile::new_srgb().encode().unwrap();
        let px = vec![200u8, 40, 90, 10, 250, 128];
        assert_eq!(convert(&srgb, Samples::Rgb, &px).unwrap(), None);
        let adobe = ColorProfile::new_adobe_rgb().encode().unwrap();
        let out = convert(&adobe, Samples::Rgb, &px).unwrap().unwrap();
        assert_eq!(out.len(), 6);
        // Adobe RGB's green primary lies outside sRGB: a saturated green's red clips to 0, and
        // the reds of both pixels move.
        assert!(out[3] < 5, "{out:?}");
        assert_ne!(out[0], 200);
    }

    #[test]
    fn a_profile_that_does_not_fit_says_why_and_leaves_the_pixels() {
        let grey = ColorProfile::new_gray_with_gamma(2.2).encode().unwrap();
        let img = DynamicImage::ImageRgb8(RgbImage::from_pixel(3, 2, image::Rgb([9, 8, 7])));
        let (back, why) = to_srgb(img.clone(), &grey);
        assert_eq!(back.to_rgb8(), img.to_rgb8());
        assert!(why
            .unwrap()
            .contains("is for Gray pixels, the image's are Rgb"));
        // An RGB profile on CMYK inks is refused, not applied to them as if they were RGBA.
        let srgb = ColorProfile::new_srgb().encode().unwrap();
        let why = convert(&srgb, Samples::Cmyk, &[0, 0, 0, 0]).unwrap_err();
        assert!(
            why.contains("is for Rgb pixels, the image's are Cmyk"),
            "{why}"
        );
        let (_, why) = to_srgb(img, b"not a profile");
        assert!(why.unwrap().contains("cannot be read"));
    }
}
