//! Decoding archive images into upright 8-bit sRGB pixels.
//!
//! Every format the `image` crate reads is accepted (JPEG baseline and progressive, also CMYK and
//! YCCK; PNG 8/16-bit, palette, alpha; TIFF 8/16-bit RGB, greyscale and CMYK, uncompressed, LZW or
//! Deflate, the first page of a multi-page file; WebP; the first frame of a GIF; BMP). The EXIF
//! orientation tag is honoured (all eight values, as the EXIF 2.32 / CIPA DC-008 Orientation tag
//! defines them), 16-bit samples are rounded to 8 bits, greyscale is spread to RGB, and alpha is
//! flattened onto the paper colour. JPEG 2000 (`.jp2`, `.jpx` and raw codestreams) is read too, at
//! a reduced resolution level when thumbnails need no more.
//!
//! An embedded ICC profile is applied ([`crate::colour`]): RGB, greyscale and CMYK pixels with a
//! profile come out in sRGB. Pixels without one are taken as sRGB, and CMYK without one is
//! converted by the usual naive formula. A profile that cannot be read or does not fit the pixels
//! is left aside (the pixels taken as they are), and [`Decoded::colour`] says why.
//!
//! A file that cannot be used yields an [`ImageFailure`] that says which of the failure classes it
//! is and why, so that the build can draw a placeholder and list it in the build report.

use std::fmt;
use std::io::Cursor;
use std::path::Path;

use image::{DynamicImage, ImageDecoder, ImageError, ImageReader, RgbImage};

use vitrine_format::palette::PAPER;
/// Default pixel-count limit beyond which an image is refused (a decompression-bomb guard).
pub const DEFAULT_MAX_PIXELS: u64 = 200_000_000;

/// Why an image could not be used.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ImageFailure {
    /// No file was found for the record (or the path does not exist).
    Missing(String),
    /// The file exists but could not be read from the disk.
    Unreadable(String),
    /// Not an image format Vitrine reads, or a variant of one it does not support.
    Unsupported(String),
    /// The file ends before the image does.
    Truncated(String),
    /// The data is damaged.
    Corrupt(String),
    /// More pixels than the limit allows (a guard against decompression bombs).
    TooLarge { width: u32, height: u32, limit: u64 },
    /// Decoding it needs more memory than the whole decoding budget (see [`set_decode_budget`]).
    OverBudget {
        width: u32,
        height: u32,
        bytes: u64,
        budget: u64,
    },
}

impl ImageFailure {
    /// A short name of the failure class, for the build report.
    pub fn kind(&self) -> &'static str {
        match self {
            ImageFailure::Missing(_) => "missing",
            ImageFailure::Unreadable(_) => "unreadable",
            ImageFailure::Unsupported(_) => "unsupported",
            ImageFailure::Truncated(_) => "truncated",
            ImageFailure::Corrupt(_) => "corrupt",
            ImageFailure::TooLarge { .. } | ImageFailure::OverBudget { .. } => "too large",
        }
    }
}

impl fmt::Display for ImageFailure {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ImageFailure::Missing(why) => write!(f, "missing: {why}"),
            ImageFailure::Unreadable(why) => write!(f, "cannot read the file: {why}"),
            ImageFailure::Unsupported(why) => write!(f, "unsupported: {why}"),
            ImageFailure::Truncated(why) => write!(f, "truncated: {why}"),
            ImageFailure::Corrupt(why) => write!(f, "corrupt: {why}"),
            ImageFailure::TooLarge {
                width,
                height,
                limit,
            } => write!(
                f,
                "too large: {width} x {height} pixels is more than the limit of {limit} (--max-pixels)"
            ),
            ImageFailure::OverBudget {
                width,
                height,
                bytes,
                budget,
            } => write!(
                f,
                "too large: {width} x {height} pixels needs {} MB to decode, more than the decoding budget of {} MB (--decode-memory)",
                bytes.div_ceil(1 << 20),
                budget >> 20
            ),
        }
    }
}

/// The memory all threads together may hold in decoded full-size images at once (2 GiB unless
/// [`set_decode_budget`] says otherwise). An image is decoded only when its share is free, so
/// that a few huge images decoded side by side by every core cannot exhaust the machine; an
/// image that needs more than the whole budget is refused ([`ImageFailure::OverBudget`]).
struct Budget {
    state: std::sync::Mutex<BudgetState>,
    freed: std::sync::Condvar,
}

struct BudgetState {
    total: u64,
    used: u64,
    /// The most held at once since the last [`set_decode_budget`] (for tests and reports).
    high: u64,
}

static BUDGET: Budget = Budget {
    state: std::sync::Mutex::new(BudgetState {
        total: DEFAULT_DECODE_BUDGET,
        used: 0,
        high: 0,
    }),
    freed: std::sync::Condvar::new(),
};

/// The default decoding budget, in bytes.
pub const DEFAULT_DECODE_BUDGET: u64 = 2 << 30;

/// Sets the decoding budget (bytes, at least 1 MiB).
pub fn set_decode_budget(bytes: u64) {
    let mut s = BUDGET.state.lock().unwrap_or_else(|e| e.into_inner());
    s.total = bytes.max(1 << 20);
    s.high = 0;
}

/// The most decoded bytes held at once since the budget was last set.
pub fn decode_high_water() -> u64 {
    BUDGET.state.lock().unwrap_or_else(|e| e.into_inner()).high
}

/// A share of the budget, given back when dropped.
#[derive(Debug)]
struct Permit(u64);

impl Drop for Permit {
    fn drop(&mut self) {
        let mut s = BUDGET.state.lock().unwrap_or_else(|e| e.into_inner());
        s.used -= self.0;
        BUDGET.freed.notify_all();
    }
}

/// Waits until `bytes` of the budget are free and takes them; the whole budget when it is larger.
fn take_budget(bytes: u64) -> Result<Permit, u64> {
    let mut s = BUDGET.state.lock().unwrap_or_else(|e| e.into_inner());
    if bytes > s.total {
        return Err(s.total);
    }
    while s.used + bytes > s.total {
        s = BUDGET.freed.wait(s).unwrap_or_else(|e| e.into_inner());
        // The budget may have been made smaller meanwhile.
        if bytes > s.total {
            return Err(s.total);
        }
    }
    s.used += bytes;
    s.high = s.high.max(s.used);
    Ok(Permit(bytes))
}

/// An upright 8-bit RGB image and the size of the original, as displayed (after orientation).
#[derive(Debug)]
pub struct Decoded {
    pub rgb: RgbImage,
    pub width: u32,
    pub height: u32,
    /// Why the image's embedded colour profile was not applied, when it was not.
    pub colour: Option<String>,
    /// The share of the decoding budget the full-size image holds: given back when it is dropped
    /// (after the thumbnail is made from it), not when decoding ends.
    _budget: Option<Permit>,
}

/// Reads one image file's bytes; `Missing` when it does not exist, `Unreadable` otherwise.
pub fn read_image_file(path: &Path) -> Result<Vec<u8>, ImageFailure> {
    std::fs::read(path).map_err(|e| match e.kind() {
        std::io::ErrorKind::NotFound => ImageFailure::Missing("the file does not exist".into()),
        _ => ImageFailure::Unreadable(e.to_string()),
    })
}

/// Reads and decodes one image file.
pub fn decode_file(path: &Path, max_pixels: u64) -> Result<(Decoded, Vec<u8>), ImageFailure> {
    let bytes = read_image_file(path)?;
    let d = decode(&bytes, max_pixels)?;
    Ok((d, bytes))
}

/// Decodes an image for thumbnails whose long side is at most `long_side`. A JPEG whose long side
/// is at least twice that is decoded at a reduced scale in the DCT domain (1/2, 1/4 or 1/8: the
/// smallest that still gives `long_side` pixels on the long side), which skips most of the inverse
/// transform and all of the full-size pixels; a JPEG 2000 image at the matching resolution level
/// of its wavelet pyramid; other images are decoded whole.
pub fn decode_for(bytes: &[u8], max_pixels: u64, long_side: u32) -> Result<Decoded, ImageFailure> {
    if is_jpeg2000(bytes) {
        return jpeg2000(bytes, max_pixels, Some(long_side));
    }
    if let Some(d) = jpeg_decoder_path(bytes, max_pixels, Some(long_side))? {
        return Ok(d);
    }
    decode_general(bytes, max_pixels, true)
}

/// The JPEG path through `jpeg-decoder`: a reduced DCT scale for 8-bit RGB or greyscale images at
/// least twice as large as thumbnails of `long_side` need, and every CMYK image with an embedded
/// profile (whose ink amounts the general path would turn into RGB by the naive formula before the
/// profile could be applied). `None` when it does not apply (not a JPEG, or neither case).
fn jpeg_decoder_path(
    bytes: &[u8],
    max_pixels: u64,
    long_side: Option<u32>,
) -> Result<Option<Decoded>, ImageFailure> {
    use jpeg_decoder::PixelFormat;
    if !bytes.starts_with(&[0xFF, 0xD8, 0xFF]) {
        return Ok(None);
    }
    let mut d = jpeg_decoder::Decoder::new(Cursor::new(bytes));
    if d.read_info().is_err() {
        // The general path says what is wrong.
        return Ok(None);
    }
    let Some(info) = d.info() else {
        return Ok(None);
    };
    let (w, h) = (info.width as u32, info.height as u32);
    let long = w.max(h);
    // The APP2 segments that carry a profile come before the frame header `read_info` stops at.
    let icc = d.icc_profile();
    let cmyk = info.pixel_format == PixelFormat::CMYK32 && icc.is_some();
    let rgb = matches!(info.pixel_format, PixelFormat::RGB24 | PixelFormat::L8);
    let reduce = long_side.is_some_and(|side| long >= 2 * side.max(1));
    let long_side = long_side.unwrap_or(long);
    if (w as u64) * (h as u64) > max_pixels || !(cmyk || (rgb && reduce)) {
        return Ok(None);
    }
    require_complete_jpeg(bytes)?;
    let need = |side: u32| ((side as u64 * long_side as u64).div_ceil(long as u64)).max(1) as u16;
    let (sw, sh) = if reduce {
        d.scale(need(w), need(h))
            .map_err(|e| ImageFailure::Corrupt(e.to_string()))?
    } else {
        (w as u16, h as u16)
    };
    let (sw, sh) = (sw as u32, sh as u32);
    // A full-size CMYK decode holds the ink amounts and the RGB made from them.
    let permit = if reduce {
        None
    } else {
        // The inks (4 B/px), their RGB (3), and the 8-bit image and its flattened copy (4).
        let peak = 11 * sw as u64 * sh as u64;
        Some(
            take_budget(peak).map_err(|budget| ImageFailure::OverBudget {
                width: w,
                height: h,
                bytes: peak,
                budget,
            })?,
        )
    };
    let orientation = d
        .exif_data()
        .and_then(image::metadata::Orientation::from_exif_chunk)
        .unwrap_or(image::metadata::Orientation::NoTransforms);
    let pixels = match d.decode() {
        Ok(p) => p,
        // A CMYK file this decoder cannot read goes to the general path (the naive formula).
        Err(_) if cmyk => return Ok(None),
        Err(e) => {
            return Err(match e {
                jpeg_decoder::Error::Io(io) if io.kind() == std::io::ErrorKind::UnexpectedEof => {
                    ImageFailure::Truncated(io.to_string())
                }
                jpeg_decoder::Error::Unsupported(u) => ImageFailure::Unsupported(format!("{u:?}")),
                other => ImageFailure::Corrupt(other.to_string()),
            })
        }
    };
    let short = || ImageFailure::Corrupt("the decoded pixels do not fill the image".into());
    let mut colour = None;
    let img = match info.pixel_format {
        PixelFormat::CMYK32 => {
            if pixels.len() < sw as usize * sh as usize * 4 {
                return Err(short());
            }
            let icc = icc
                .as_deref()
                .expect("CMYK is decoded here only with a profile");
            match crate::colour::convert(icc, crate::colour::Samples::Cmyk, &pixels) {
                Ok(Some(rgb)) => RgbImage::from_raw(sw, sh, rgb).map(DynamicImage::ImageRgb8),
                Ok(None) => unreachable!("a CMYK profile is never sRGB"),
                Err(why) => {
                    colour = Some(why);
                    RgbImage::from_raw(sw, sh, naive_cmyk(&pixels)).map(DynamicImage::ImageRgb8)
                }
            }
        }
        PixelFormat::L8 => image::GrayImage::from_raw(sw, sh, pixels).map(DynamicImage::ImageLuma8),
        _ => RgbImage::from_raw(sw, sh, pixels).map(DynamicImage::ImageRgb8),
    };
    let mut img = img.ok_or_else(short)?;
    if let (Some(icc), false) = (&icc, cmyk) {
        let (converted, why) = crate::colour::to_srgb(img, icc);
        img = converted;
        colour = why;
    }
    img.apply_orientation(orientation);
    let (width, height) = if is_transposing(orientation) {
        (h, w)
    } else {
        (w, h)
    };
    Ok(Some(Decoded {
        rgb: to_rgb8(img),
        width,
        height,
        colour,
        _budget: permit,
    }))
}

/// CMYK ink amounts (0 = no ink) to RGB by the usual naive formula, R = (255 - C)(255 - K) / 255,
/// for CMYK whose profile cannot be used.
fn naive_cmyk(cmyk: &[u8]) -> Vec<u8> {
    cmyk.chunks_exact(4)
        .flat_map(|p| {
            let k = 255 - p[3] as u32;
            [0, 1, 2].map(|c| (((255 - p[c] as u32) * k + 127) / 255) as u8)
        })
        .collect()
}

/// A JP2 or JPX file (the JPEG 2000 signature box, ISO/IEC 15444-1 Annex I.5.1) or a raw
/// codestream (its SOC and SIZ markers, A.4.1 and A.5.1).
fn is_jpeg2000(bytes: &[u8]) -> bool {
    bytes.starts_with(&[0, 0, 0, 0x0C, 0x6A, 0x50, 0x20, 0x20])
        || bytes.starts_with(&[0xFF, 0x4F, 0xFF, 0x51])
}

/// Decodes a JPEG 2000 image (`hayro-jpeg2000`, pure Rust): for thumbnails whose long side is at
/// most `long_side`, at the coarsest resolution level of the wavelet pyramid that still gives that
/// many pixels (the levels halve the size, so most of the decoding is skipped for a large master).
/// CMYK is converted by the decoder (through its embedded profile, else a press profile); an RGB or
/// grey profile is applied here as for every format.
fn jpeg2000(
    bytes: &[u8],
    max_pixels: u64,
    long_side: Option<u32>,
) -> Result<Decoded, ImageFailure> {
    use hayro_jpeg2000::{DecodeSettings, Image};
    let refused = |e: hayro_jpeg2000::DecodeError| {
        use hayro_jpeg2000::{DecodeError as E, FormatError as F, MarkerError as M};
        let why = format!("JPEG 2000: {e}");
        match e {
            E::Format(F::Unsupported) | E::Marker(M::Unsupported) | E::Color(_) => {
                ImageFailure::Unsupported(why)
            }
            _ => ImageFailure::Corrupt(why),
        }
    };
    require_complete_jpeg2000(bytes)?;
    let full = Image::new(bytes, &DecodeSettings::default()).map_err(refused)?;
    let (w, h) = (full.width(), full.height());
    let long = w.max(h) as u64;
    let image = match long_side {
        Some(side) if long >= 2 * side.max(1) as u64 => {
            let need = |n: u32| ((n as u64 * side as u64).div_ceil(long)).max(1) as u32;
            let settings = DecodeSettings {
                target_resolution: Some((need(w), need(h))),
                ..DecodeSettings::default()
            };
            Image::new(bytes, &settings).map_err(refused)?
        }
        _ => full,
    };
    // The pixel limit and the budget apply to the level decoded, not the master: a 1-gigapixel
    // map decoded at 1/64 of its size is small. The decoder holds a 32-bit float plane per
    // component and its wavelet coefficients: about 16 B/px besides its output (an estimate
    // counted from hayro-jpeg2000 0.5's data structures, not measured).
    let mut d = from_decoder(image, bytes, max_pixels, 16).map_err(|e| match e {
        ImageFailure::TooLarge { limit, .. } => ImageFailure::TooLarge {
            width: w,
            height: h,
            limit,
        },
        other => other,
    })?;
    (d.width, d.height) = (w, h);
    Ok(d)
}

fn is_transposing(o: image::metadata::Orientation) -> bool {
    use image::metadata::Orientation::*;
    matches!(o, Rotate90 | Rotate270 | Rotate90FlipH | Rotate270FlipH)
}

/// Decodes an image held in memory.
pub fn decode(bytes: &[u8], max_pixels: u64) -> Result<Decoded, ImageFailure> {
    decode_general(bytes, max_pixels, false)
}

/// [`decode`]; `jpeg_seen` when [`jpeg_decoder_path`] has already declined the bytes.
fn decode_general(bytes: &[u8], max_pixels: u64, jpeg_seen: bool) -> Result<Decoded, ImageFailure> {
    if bytes.is_empty() {
        return Err(ImageFailure::Truncated("the file is empty".into()));
    }
    if is_jpeg2000(bytes) {
        return jpeg2000(bytes, max_pixels, None);
    }
    let reader = ImageReader::new(Cursor::new(bytes))
        .with_guessed_format()
        .map_err(|e| ImageFailure::Unreadable(e.to_string()))?;
    let format = reader.format().ok_or_else(|| {
        ImageFailure::Unsupported(format!(
            "not an image format Vitrine reads (the file starts with {})",
            leading_bytes(bytes)
        ))
    })?;
    if format == image::ImageFormat::Jpeg {
        require_complete_jpeg(bytes)?;
        if !jpeg_seen {
            if let Some(d) = jpeg_decoder_path(bytes, max_pixels, None)? {
                return Ok(d);
            }
        }
    }
    let mut reader = reader;
    reader.no_limits();
    let decoder = reader.into_decoder().map_err(failure)?;
    from_decoder(decoder, bytes, max_pixels, 0)
}

/// Decodes through an `image` decoder: the size checked against the limit and the budget, the
/// embedded profile applied, the orientation honoured.
/// `working` is what the decoder itself holds per pixel beyond its output buffer (JPEG 2000 keeps
/// its samples as floating-point planes).
fn from_decoder(
    mut decoder: impl ImageDecoder,
    bytes: &[u8],
    max_pixels: u64,
    working: u64,
) -> Result<Decoded, ImageFailure> {
    let (w, h) = decoder.dimensions();
    if (w as u64) * (h as u64) > max_pixels {
        return Err(ImageFailure::TooLarge {
            width: w,
            height: h,
            limit: max_pixels,
        });
    }
    let orientation = decoder
        .orientation()
        .unwrap_or(image::metadata::Orientation::NoTransforms);
    // Taken before the pixels, which consume the decoder; a profile that cannot be taken out of
    // the file is no reason to refuse its pixels.
    let icc = decoder
        .icc_profile()
        .ok()
        .flatten()
        .or_else(|| tiff_icc(bytes));
    // What the decode holds at its peak: the decoder's buffer (and its own working planes) and
    // the RGB image made from it (through an RGBA copy for the layouts converted by the `image`
    // crate; with a profile, the 8-bit samples and the converted copy, 4 + 4 B/px at most), then
    // (the buffer gone) the RGB image and its turned copy.
    let pixels = w as u64 * h as u64;
    let via_rgba = matches!(
        decoder.color_type(),
        image::ColorType::La8 | image::ColorType::La16 | image::ColorType::Rgba32F
    );
    let profile = if icc.is_some() { 8 * pixels } else { 0 };
    let peak = (decoder.total_bytes()
        + (3 + working) * pixels
        + if via_rgba { 4 * pixels } else { 0 }
        + profile)
        .max(6 * pixels);
    let permit = take_budget(peak).map_err(|budget| ImageFailure::OverBudget {
        width: w,
        height: h,
        bytes: peak,
        budget,
    })?;
    let cmyk = matches!(
        decoder.original_color_type(),
        image::ExtendedColorType::Cmyk8 | image::ExtendedColorType::Cmyk16
    );
    let mut colour = None;
    let img = match (&icc, cmyk) {
        // The `image` crate hands CMYK over already turned into RGB by the naive formula: the
        // ink amounts are read again where the profile needs them.
        (Some(icc), true) => match cmyk_tiff(bytes, icc) {
            Some(Ok(rgb)) => DynamicImage::ImageRgb8(rgb),
            Some(Err(why)) => {
                colour = Some(why);
                DynamicImage::from_decoder(decoder).map_err(failure)?
            }
            None => DynamicImage::from_decoder(decoder).map_err(failure)?,
        },
        (Some(icc), false) => {
            let img = DynamicImage::from_decoder(decoder).map_err(failure)?;
            let (img, why) = crate::colour::to_srgb(img, icc);
            colour = why;
            img
        }
        (None, _) => DynamicImage::from_decoder(decoder).map_err(failure)?,
    };
    let mut rgb = DynamicImage::ImageRgb8(to_rgb8(img));
    rgb.apply_orientation(orientation);
    let (width, height) = (rgb.width(), rgb.height());
    Ok(Decoded {
        rgb: rgb.into_rgb8(),
        width,
        height,
        colour,
        _budget: Some(permit),
    })
}

fn is_tiff(bytes: &[u8]) -> bool {
    bytes.starts_with(b"II*\0") || bytes.starts_with(b"MM\0*")
}

/// A TIFF's embedded profile (tag 34675, TIFF/EP and the ICC's TIFF annex), read with the `tiff`
/// crate: the `image` crate's TIFF decoder (0.25.10) gave none for the TIFF files Pillow writes.
fn tiff_icc(bytes: &[u8]) -> Option<Vec<u8>> {
    if !is_tiff(bytes) {
        return None;
    }
    let mut t = tiff::decoder::Decoder::new(Cursor::new(bytes)).ok()?;
    t.get_tag_u8_vec(tiff::tags::Tag::IccProfile).ok()
}

/// An 8-bit CMYK TIFF's ink amounts converted through its profile; `None` when the file is not
/// one (a CMYK JPEG or WebP, a 16-bit or CMYK-with-alpha TIFF: the naive formula then).
fn cmyk_tiff(bytes: &[u8], icc: &[u8]) -> Option<Result<RgbImage, String>> {
    if !is_tiff(bytes) {
        return None;
    }
    let mut t = tiff::decoder::Decoder::new(Cursor::new(bytes))
        .ok()?
        .with_limits(tiff::decoder::Limits::unlimited());
    if t.colortype().ok()? != tiff::ColorType::CMYK(8) {
        return None;
    }
    let (w, h) = t.dimensions().ok()?;
    let tiff::decoder::DecodingResult::U8(inks) = t.read_image().ok()? else {
        return None;
    };
    if inks.len() < w as usize * h as usize * 4 {
        return None;
    }
    Some(
        crate::colour::convert(icc, crate::colour::Samples::Cmyk, &inks).map(|rgb| {
            RgbImage::from_raw(w, h, rgb.expect("a CMYK profile is never sRGB"))
                .expect("w x h converted pixels")
        }),
    )
}

/// The nearest 8-bit value of a 16-bit sample (v / 257, rounded).
#[inline]
fn to8(v: u16) -> u8 {
    ((v as u32 + 128) / 257) as u8
}

/// 8-bit RGB, alpha flattened onto [`PAPER`] (premultiplied, rounded). The common layouts are
/// converted here with integer arithmetic; the rest through the `image` crate.
fn to_rgb8(img: DynamicImage) -> RgbImage {
    let (w, h) = (img.width(), img.height());
    let from = |samples: &[u8], per: usize| -> RgbImage {
        let mut out = Vec::with_capacity(w as usize * h as usize * 3);
        match per {
            1 => samples
                .iter()
                .for_each(|&v| out.extend_from_slice(&[v, v, v])),
            _ => out.extend_from_slice(samples),
        }
        RgbImage::from_raw(w, h, out).expect("w x h pixels")
    };
    match &img {
        DynamicImage::ImageRgb8(_) => return img.into_rgb8(),
        DynamicImage::ImageLuma8(g) => return from(g.as_raw(), 1),
        DynamicImage::ImageLuma16(g) => {
            let mut out = Vec::with_capacity(w as usize * h as usize * 3);
            g.as_raw()
                .iter()
                .for_each(|&v| out.extend_from_slice(&[to8(v); 3]));
            return RgbImage::from_raw(w, h, out).expect("w x h pixels");
        }
        DynamicImage::ImageRgb16(c) => {
            let out: Vec<u8> = c.as_raw().iter().map(|&v| to8(v)).collect();
            return RgbImage::from_raw(w, h, out).expect("w x h pixels");
        }
        _ => {}
    }
    if !img.color().has_alpha() {
        return img.to_rgb8();
    }
    // Alpha flattened straight into RGB, the 16-bit samples rounded first, with no RGBA copy for
    // RGBA (the rarer layouts go through the `image` crate's RGBA conversion).
    let flat = |p: [u8; 4]| {
        let a = p[3] as u32;
        [0, 1, 2].map(|c| ((p[c] as u32 * a + PAPER[c] as u32 * (255 - a) + 127) / 255) as u8)
    };
    let mut out = Vec::with_capacity(w as usize * h as usize * 3);
    match &img {
        DynamicImage::ImageRgba16(c) => c
            .as_raw()
            .chunks_exact(4)
            .for_each(|p| out.extend_from_slice(&flat([p[0], p[1], p[2], p[3]].map(to8)))),
        DynamicImage::ImageRgba8(c) => c
            .as_raw()
            .chunks_exact(4)
            .for_each(|p| out.extend_from_slice(&flat([p[0], p[1], p[2], p[3]]))),
        _ => img
            .to_rgba8()
            .pixels()
            .for_each(|p| out.extend_from_slice(&flat(p.0))),
    }
    RgbImage::from_raw(w, h, out).expect("w x h pixels")
}

/// Sorts the decoder's errors into the failure classes.
fn failure(e: ImageError) -> ImageFailure {
    let text = e.to_string();
    let eof = |t: &str| {
        let t = t.to_lowercase();
        t.contains("eof") || t.contains("end of file") || t.contains("unexpected end")
    };
    match e {
        ImageError::Unsupported(u) => ImageFailure::Unsupported(u.to_string()),
        ImageError::Limits(_) => ImageFailure::Unsupported(text),
        ImageError::IoError(io) if io.kind() == std::io::ErrorKind::UnexpectedEof => {
            ImageFailure::Truncated(io.to_string())
        }
        ImageError::IoError(io) => ImageFailure::Corrupt(io.to_string()),
        _ if eof(&text) => ImageFailure::Truncated(text),
        _ => ImageFailure::Corrupt(text),
    }
}

/// `Truncated` unless a JPEG 2000 file is whole: each box of a JP2/JPX file within the file (ISO/IEC
/// 15444-1 Annex I.4), and the codestream ending in its end-of-codestream marker FF D9 (A.4.4; a
/// little padding after it is allowed). The decoder itself would decode what there is and say
/// nothing.
fn require_complete_jpeg2000(bytes: &[u8]) -> Result<(), ImageFailure> {
    let cut = |why: String| Err(ImageFailure::Truncated(why));
    let ends_whole = |c: &[u8]| {
        let tail = &c[c.len().saturating_sub(16)..];
        tail.windows(2).any(|w| w == [0xFF, 0xD9])
    };
    if bytes.starts_with(&[0xFF, 0x4F]) {
        return if ends_whole(bytes) {
            Ok(())
        } else {
            cut("the JPEG 2000 codestream ends before its end marker".into())
        };
    }
    let mut at = 0usize;
    let mut codestream = false;
    while at + 8 <= bytes.len() {
        let len = u32::from_be_bytes(bytes[at..at + 4].try_into().expect("4 bytes")) as u64;
        let kind = &bytes[at + 4..at + 8];
        let (head, len) = match len {
            0 => (8u64, (bytes.len() - at) as u64),
            1 if at + 16 <= bytes.len() => (
                16,
                u64::from_be_bytes(bytes[at + 8..at + 16].try_into().expect("8 bytes")),
            ),
            1 => return cut("the file ends inside a box header".into()),
            l => (8, l),
        };
        let end = at as u64 + len;
        if len < head || end > bytes.len() as u64 {
            let name = String::from_utf8_lossy(kind).to_string();
            return cut(format!("the file ends inside its {name:?} box"));
        }
        if kind == b"jp2c" {
            codestream = true;
            if !ends_whole(&bytes[at + head as usize..end as usize]) {
                return cut("the JPEG 2000 codestream ends before its end marker".into());
            }
        }
        at = end as usize;
    }
    if codestream {
        Ok(())
    } else {
        cut("the file ends before its codestream".into())
    }
}

/// `Truncated` unless a JPEG stream reaches its end-of-image marker. Inside entropy-coded data a
/// 0xFF byte is always followed by 0x00 or a restart marker, so an FF D9 after the first
/// start-of-scan marker is the end of the image (JPEG, ITU-T T.81, B.1.1.5 and F.1.2.3).
fn require_complete_jpeg(bytes: &[u8]) -> Result<(), ImageFailure> {
    let complete = bytes
        .windows(2)
        .position(|w| w == [0xFF, 0xDA])
        .is_some_and(|sos| bytes[sos..].windows(2).any(|w| w == [0xFF, 0xD9]));
    if complete {
        Ok(())
    } else {
        Err(ImageFailure::Truncated(
            "the JPEG data ends before its end-of-image marker".into(),
        ))
    }
}

fn leading_bytes(bytes: &[u8]) -> String {
    bytes
        .iter()
        .take(8)
        .map(|b| format!("{b:02x}"))
        .collect::<Vec<_>>()
        .join(" ")
}

#[cfg(test)]
mod tests {
    use super::*;

    fn png(img: &DynamicImage) -> Vec<u8> {
        let mut out = Vec::new();
        img.write_to(&mut Cursor::new(&mut out), image::ImageFormat::Png)
            .unwrap();
        out
    }

    fn jpeg(img: &RgbImage) -> Vec<u8> {
        let mut out = Vec::new();
        image::codecs::jpeg::JpegEncoder::new_with_quality(&mut out, 90)
            .encode_image(img)
            .unwrap();
        out
    }

    #[test]
    fn every_failure_class_is_named() {
        let good = jpeg(&RgbImage::from_pixel(40, 30, image::Rgb([200, 10, 10])));
        assert!(decode(&good, DEFAULT_MAX_PIXELS).is_ok());
        let cut = &good[..good.len() / 2];
        assert_eq!(
            decode(cut, DEFAULT_MAX_PIXELS).unwrap_err().kind(),
            "truncated"
        );
        assert_eq!(
            decode(&[], DEFAULT_MAX_PIXELS).unwrap_err().kind(),
            "truncated"
        );
        let text = b"id,title\n1,not an image\n";
        let e = decode(text, DEFAULT_MAX_PIXELS).unwrap_err();
        assert_eq!(e.kind(), "unsupported");
        assert!(e.to_string().contains("69 64 2c 74"), "{e}");
        // A PNG with its pixel data overwritten.
        let mut bad = png(&DynamicImage::ImageRgb8(RgbImage::from_fn(
            64,
            64,
            |x, y| image::Rgb([(x * 4) as u8, (y * 4) as u8, 7]),
        )));
        let at = bad.windows(4).position(|w| w == b"IDAT").unwrap() + 8;
        for b in &mut bad[at..at + 40] {
            *b = 0x5a;
        }
        let e = decode(&bad, DEFAULT_MAX_PIXELS).unwrap_err();
        assert!(matches!(e.kind(), "corrupt" | "truncated"), "{e}");
        let e = decode(&good, 40 * 30 - 1).unwrap_err();
        assert_eq!(
            e,
            ImageFailure::TooLarge {
                width: 40,
                height: 30,
                limit: 1199
            }
        );
        let dir = tempfile::tempdir().unwrap();
        let e = decode_file(&dir.path().join("nothing.jpg"), DEFAULT_MAX_PIXELS).unwrap_err();
        assert_eq!(e.kind(), "missing");
    }

    #[test]
    fn alpha_is_flattened_onto_paper_and_grey_spread_to_rgb() {
        let clear = DynamicImage::ImageRgba8(image::RgbaImage::from_pixel(
            3,
            2,
            image::Rgba([0, 0, 0, 0]),
        ));
        let d = decode(&png(&clear), DEFAULT_MAX_PIXELS).unwrap();
        assert!(d.rgb.pixels().all(|p| p.0 == PAPER));
        let half = DynamicImage::ImageRgba8(image::RgbaImage::from_pixel(
            3,
            2,
            image::Rgba([255, 255, 255, 128]),
        ));
        let d = decode(&png(&half), DEFAULT_MAX_PIXELS).unwrap();
        // 255 * 128/255 + paper * 127/255, rounded.
        let want: Vec<u8> = PAPER
            .iter()
            .map(|&p| ((255 * 128 + p as u32 * 127 + 127) / 255) as u8)
            .collect();
        assert_eq!(d.rgb.get_pixel(0, 0).0.to_vec(), want);
        let grey = DynamicImage::ImageLuma16(image::ImageBuffer::from_pixel(
            2,
            2,
            image::Luma([0x8080u16]),
        ));
        let d = decode(&png(&grey), DEFAULT_MAX_PIXELS).unwrap();
        assert_eq!(d.rgb.get_pixel(1, 1).0, [0x80, 0x80, 0x80]);
        // 16-bit colour, with and without alpha: each sample to its nearest 8-bit value.
        let samples = [0u16, 128, 129, 385, 386, 32767, 65406, 65535];
        let want = [0u8, 0, 1, 1, 2, 127, 254, 255];
        for (&v, &e) in samples.iter().zip(&want) {
            assert_eq!(
                ((v as f64) / 257.0).round() as u8,
                e,
                "the table itself, {v}"
            );
            let c = DynamicImage::ImageRgb16(image::ImageBuffer::from_pixel(
                2,
                1,
                image::Rgb([v, 0, 65535]),
            ));
            let d = decode(&png(&c), DEFAULT_MAX_PIXELS).unwrap();
            assert_eq!(d.rgb.get_pixel(0, 0).0, [e, 0, 255], "{v}");
            let a = DynamicImage::ImageRgba16(image::ImageBuffer::from_pixel(
                2,
                1,
                image::Rgba([v, v, v, 65535]),
            ));
            let d = decode(&png(&a), DEFAULT_MAX_PIXELS).unwrap();
            assert_eq!(d.rgb.get_pixel(1, 0).0, [e, e, e], "{v}");
        }
    }
}
