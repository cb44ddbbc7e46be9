//! Thumbnails: decode each image, fit it into square cells at each level of detail, pack the cells
//! into sheets (texture pages) in atlas order, and take each item's average colour.

use std::path::{Path, PathBuf};

use image::RgbImage;
use rayon::prelude::*;

use crate::decode::ImageFailure;
use vitrine_format::palette::PAPER;

#[derive(Debug, Clone, serde::Serialize)]
pub struct ImageProblem {
    pub id: String,
    pub path: String,
    /// The failure class: missing, unreadable, unsupported, truncated, corrupt or too large.
    pub kind: String,
    pub reason: String,
}

pub struct SheetPlan {
    /// Cell sizes, smallest first (e.g. 32, 128 and 512).
    pub cells: Vec<u32>,
    /// Sheet side in pixels.
    pub sheet: u32,
    pub quality: u8,
    /// Images with more pixels than this are refused.
    pub max_pixels: u64,
}

impl SheetPlan {
    pub fn per_sheet(&self, cell: u32) -> (u32, u32) {
        let c = (self.sheet / cell).max(1);
        (c, c)
    }
}

pub struct Thumbnailed {
    /// Per item: RGBA average colour.
    pub colours: Vec<[u8; 4]>,
    /// Per item: thumbnail width | height << 16 in the largest cell.
    pub extents: Vec<u32>,
    /// Per item: the image's width and height as shown (0, 0 when it could not be used).
    pub sizes: Vec<[u32; 2]>,
    /// Thumbnails taken from the cache (their files unchanged since they were made).
    pub reused: usize,
    /// Cache entries that could not be written.
    pub cache_errors: usize,
    /// Cache entries found damaged (cut short or changed on disk): made again and replaced.
    pub cache_damaged: usize,
    /// Per level: sheet file names relative to the atlas.
    pub files: Vec<Vec<String>>,
    pub problems: Vec<ImageProblem>,
    /// Per item: SHA-256 and byte size of the image file (empty when there was none).
    pub digests: Vec<(String, u64)>,
    /// Per item asked for: the signature its copies are found by, taken from the largest
    /// thumbnail (None when not asked for or when the image could not be used).
    pub signatures: Vec<Option<crate::copies::Signature>>,
}

/// A thumbnail fitted into a `cell` x `cell` square, aspect kept, resampled with a Lanczos-3
/// filter (SIMD convolution).
fn fit(img: &RgbImage, cell: u32) -> RgbImage {
    use fast_image_resize as fr;
    let (w, h) = img.dimensions();
    let scale = cell as f64 / w.max(h) as f64;
    let tw = ((w as f64 * scale).round() as u32).clamp(1, cell);
    let th = ((h as f64 * scale).round() as u32).clamp(1, cell);
    if (tw, th) == (w, h) {
        return img.clone();
    }
    let mut dst = fr::images::Image::new(tw, th, fr::PixelType::U8x3);
    let options =
        fr::ResizeOptions::new().resize_alg(fr::ResizeAlg::Convolution(fr::FilterType::Lanczos3));
    let src = fr::images::ImageRef::new(w, h, img.as_raw(), fr::PixelType::U8x3)
        .expect("an RGB8 buffer of its own size");
    fr::Resizer::new()
        .resize(&src, &mut dst, &options)
        .expect("RGB8 to RGB8 resizing has no failure case");
    RgbImage::from_raw(tw, th, dst.into_vec()).expect("the resizer fills the image")
}

/// One image's thumbnail with `long_side` pixels on its long side, and the image's width and
/// height as shown: the reduced-scale decode where it applies, then the Lanczos-3 fit.
pub fn thumbnail(
    bytes: &[u8],
    max_pixels: u64,
    long_side: u32,
) -> Result<(RgbImage, [u32; 2]), ImageFailure> {
    thumbnail_noted(bytes, max_pixels, long_side).map(|(t, s, _)| (t, s))
}

/// [`thumbnail`], and why the image's colour profile was not applied, when it was not.
fn thumbnail_noted(
    bytes: &[u8],
    max_pixels: u64,
    long_side: u32,
) -> Result<(RgbImage, [u32; 2], Option<String>), ImageFailure> {
    let d = crate::decode::decode_for(bytes, max_pixels, long_side)?;
    Ok((
        fit(&d.rgb, long_side),
        [d.width, d.height],
        d.colour.clone(),
    ))
}

/// Files whose embedded colour profile could not be applied (path, why), as their thumbnails were
/// made since the last [`take_colour_notes`]; a thumbnail taken from the cache adds none.
static COLOUR_NOTES: std::sync::Mutex<Vec<(String, String)>> = std::sync::Mutex::new(Vec::new());

/// The colour notes gathered so far, sorted and without repeats; the list is emptied.
pub fn take_colour_notes() -> Vec<(String, String)> {
    let mut v = std::mem::take(&mut *COLOUR_NOTES.lock().unwrap_or_else(|e| e.into_inner()));
    v.sort();
    v.dedup();
    v
}

/// A thumbnail and its image's size as shown (width, height), or why there is none.
pub type Made = Result<(RgbImage, [u32; 2]), ImageFailure>;
/// A file's SHA-256 (hex) and its size in bytes; empty when it could not be read.
pub type Digest = (String, u64);

/// The largest level's thumbnail of one image file and the image's size, taken from the cache
/// when the file is unchanged, else made (and stored in the cache); with the file's digest.
pub fn largest_thumbnail(
    path: &Path,
    plan: &SheetPlan,
    cache: Option<&crate::cache::ThumbCache>,
    counts: &CacheCounts,
) -> (Made, Digest) {
    largest_thumbnail_from(path, plan, cache, counts, true)
}

/// [`largest_thumbnail`], made from the file even when the cache holds it when `use_cached` is
/// false (and stored in the cache all the same): the pixels of a fresh thumbnail, not of the
/// cache's JPEG of it.
pub fn largest_thumbnail_from(
    path: &Path,
    plan: &SheetPlan,
    cache: Option<&crate::cache::ThumbCache>,
    counts: &CacheCounts,
    use_cached: bool,
) -> (Made, Digest) {
    use std::sync::atomic::Ordering::Relaxed;
    let largest = *plan.cells.last().expect("at least one level");
    let key = cache.and_then(|c| c.key(path));
    if let (Some(c), Some(k), true) = (cache, &key, use_cached) {
        match c.get(k) {
            crate::cache::Lookup::Hit(e) => {
                counts.reused.fetch_add(1, Relaxed);
                return (Ok((e.thumb, e.size)), e.digest);
            }
            crate::cache::Lookup::Damaged => {
                counts.damaged.fetch_add(1, Relaxed);
            }
            crate::cache::Lookup::Missing => {}
        }
    }
    let bytes = match crate::decode::read_image_file(path) {
        Ok(b) => b,
        Err(e) => return (Err(e), (String::new(), 0)),
    };
    let digest = (vitrine_format::sha256_hex(&bytes), bytes.len() as u64);
    let made = thumbnail_noted(&bytes, plan.max_pixels, largest).map(|(t, s, note)| {
        if let Some(why) = note {
            COLOUR_NOTES
                .lock()
                .unwrap_or_else(|e| e.into_inner())
                .push((path.display().to_string(), why));
        }
        (t, s)
    });
    if made.is_ok() {
        counts.made.fetch_add(1, Relaxed);
    }
    if let (Ok((thumb, size)), Some(c), Some(k)) = (&made, cache, &key) {
        if c.put(k, *size, &digest, thumb).is_err() {
            counts.errors.fetch_add(1, Relaxed);
        }
    }
    (made, digest)
}

/// Thumbnails taken from the cache, cache entries that could not be written, and damaged
/// entries found (and made again).
#[derive(Default)]
pub struct CacheCounts {
    pub reused: std::sync::atomic::AtomicUsize,
    pub errors: std::sync::atomic::AtomicUsize,
    pub damaged: std::sync::atomic::AtomicUsize,
    /// Thumbnails made from their masters.
    pub made: std::sync::atomic::AtomicUsize,
}

/// Encodes RGB pixels as a baseline JPEG (4:2:0) at `quality`.
pub fn encode_jpeg(img: &RgbImage, quality: u8) -> std::io::Result<Vec<u8>> {
    let mut bytes = Vec::new();
    jpeg_encoder::Encoder::new(&mut bytes, quality)
        .encode(
            img.as_raw(),
            img.width() as u16,
            img.height() as u16,
            jpeg_encoder::ColorType::Rgb,
        )
        .map_err(|e| std::io::Error::other(e.to_string()))?;
    Ok(bytes)
}

/// The placeholder drawn for an image that could not be read: a grey card with a cross.
pub fn placeholder(cell: u32) -> RgbImage {
    let mut img = RgbImage::from_pixel(cell, cell, image::Rgb([0xC9, 0xC4, 0xBA]));
    for i in 0..cell {
        for t in 0..(cell / 32).max(1) {
            let j = (i + t).min(cell - 1);
            img.put_pixel(i, j, image::Rgb([0x8A, 0x84, 0x7A]));
            img.put_pixel(cell - 1 - i, j, image::Rgb([0x8A, 0x84, 0x7A]));
        }
    }
    img
}

fn average(img: &RgbImage) -> [u8; 4] {
    let mut s = [0u64; 3];
    for p in img.pixels() {
        for c in 0..3 {
            s[c] += p[c] as u64;
        }
    }
    let n = (img.width() as u64 * img.height() as u64).max(1);
    [(s[0] / n) as u8, (s[1] / n) as u8, (s[2] / n) as u8, 255]
}

/// Makes every sheet. `images[i]` is the file for item i in atlas order, or why there is none;
/// `signed[i]` says whether item i's copy signature is wanted (an empty slice: none is).
pub fn make_sheets(
    images: &[(String, Result<PathBuf, String>)],
    signed: &[bool],
    plan: &SheetPlan,
    out_dir: &Path,
    cache: Option<&crate::cache::ThumbCache>,
    progress: &(dyn Fn(u64) + Sync),
) -> std::io::Result<Thumbnailed> {
    let n = images.len();
    let mut signatures = vec![None; n];
    let mut colours = vec![[0u8; 4]; n];
    let mut extents = vec![0u32; n];
    let mut sizes = vec![[0u32; 2]; n];
    let mut problems = Vec::new();
    let mut digests = vec![(String::new(), 0u64); n];
    let mut files: Vec<Vec<String>> = vec![Vec::new(); plan.cells.len()];
    std::fs::create_dir_all(out_dir.join("sheets"))?;
    // Items are thumbnailed in parallel a chunk at a time; each level keeps one open sheet that
    // the chunk's thumbnails are pasted into and that is written out as soon as it is full. Memory
    // is one chunk of thumbnails, one open sheet per level and the sheets the chunk filled (at most
    // a chunk's worth of 512 px cells), whatever the collection's size.
    let batch = (64 * rayon::current_num_threads()).max(64);
    let mut open: Vec<Option<(usize, RgbImage)>> = vec![None; plan.cells.len()];
    let mut full: Vec<(String, RgbImage)> = Vec::new();
    let done = std::sync::atomic::AtomicU64::new(0);
    let counts = CacheCounts::default();
    let mut start = 0;
    while start < n {
        let end = (start + batch).min(n);
        #[allow(clippy::type_complexity)]
        let thumbs: Vec<(Vec<RgbImage>, Option<ImageFailure>, (String, u64), [u32; 2])> = images
            [start..end]
            .par_iter()
            .zip(signatures[start..end].par_iter_mut())
            .enumerate()
            .map(|(off, ((_, path), signature))| {
                let (result, digest) = match path {
                    Err(reason) => (
                        Err(ImageFailure::Missing(reason.clone())),
                        (String::new(), 0),
                    ),
                    Ok(p) => largest_thumbnail(p, plan, cache, &counts),
                };
                let c = done.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
                if c.is_multiple_of(16) {
                    progress(c);
                }
                match result {
                    Ok((big, size)) => {
                        if signed.get(start + off).copied().unwrap_or(false) {
                            *signature = Some(crate::copies::signature(&big));
                        }
                        let mut levels: Vec<RgbImage> = plan.cells[..plan.cells.len() - 1]
                            .iter()
                            .map(|&c| fit(&big, c))
                            .collect();
                        levels.push(big);
                        (levels, None, digest, size)
                    }
                    Err(reason) => (
                        plan.cells.iter().map(|&c| placeholder(c)).collect(),
                        Some(reason),
                        digest,
                        [0, 0],
                    ),
                }
            })
            .collect();
        for (off, (levels, problem, digest, size)) in thumbs.iter().enumerate() {
            let i = start + off;
            sizes[i] = *size;
            digests[i] = digest.clone();
            let big = levels.last().unwrap();
            extents[i] = big.width() | (big.height() << 16);
            colours[i] = average(&levels[0]);
            if let Some(failure) = problem {
                problems.push(ImageProblem {
                    id: images[i].0.clone(),
                    path: images[i]
                        .1
                        .as_ref()
                        .map(|p| p.display().to_string())
                        .unwrap_or_default(),
                    kind: failure.kind().to_string(),
                    reason: failure.to_string().trim().to_string(),
                });
            }
        }
        for (off, (levels, ..)) in thumbs.iter().enumerate() {
            let i = start + off;
            for (l, &cell) in plan.cells.iter().enumerate() {
                let (cols, rows) = plan.per_sheet(cell);
                let per = (cols * rows) as usize;
                let sheet_index = i / per;
                let last = ((sheet_index + 1) * per).min(n) - 1;
                let (_, sheet) = open[l].get_or_insert_with(|| {
                    let used_rows = ((last + 1 - sheet_index * per) as u32).div_ceil(cols);
                    (
                        sheet_index,
                        RgbImage::from_pixel(cols * cell, used_rows * cell, image::Rgb(PAPER)),
                    )
                });
                let slot = (i % per) as u32;
                let (cx, cy) = ((slot % cols) * cell, (slot / cols) * cell);
                image::imageops::replace(sheet, &levels[l], cx as i64, cy as i64);
                if i == last {
                    let (index, sheet) = open[l].take().expect("the sheet just filled");
                    let name = format!("sheets/L{cell}-{index:05}.jpg");
                    files[l].push(name.clone());
                    full.push((name, sheet));
                }
            }
        }
        drop(thumbs);
        // The sheets this chunk filled are encoded in parallel (at the 512 px level a sheet holds
        // only 16 thumbnails, and encoding one takes as long as decoding a few photographs).
        full.par_drain(..)
            .map(|(name, sheet)| {
                let bytes = encode_jpeg(&sheet, plan.quality)
                    .map_err(|e| std::io::Error::other(format!("encoding {name}: {e}")))?;
                std::fs::write(out_dir.join(&name), bytes)
            })
            .collect::<std::io::Result<()>>()?;
        start = end;
    }
    Ok(Thumbnailed {
        reused: counts.reused.into_inner(),
        cache_errors: counts.errors.into_inner(),
        cache_damaged: counts.damaged.into_inner(),
        colours,
        extents,
        sizes,
        files,
        problems,
        digests,
        signatures,
    })
}
