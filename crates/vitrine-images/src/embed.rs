//! Vectors from the images, for collections that have none: each item's largest thumbnail (from
//! the thumbnail cache, or decoded and stored there, so that the thumbnail stage finds it and each
//! master is decoded once) is given to an [`Engine`] — the built-in descriptor or an image model —
//! a chunk at a time on every core. The vectors are kept beside the thumbnails in the cache, so a
//! rebuild computes only those of new or changed files (and gives the same vectors again).

use std::path::PathBuf;

use image::RgbImage;
use rayon::prelude::*;

use crate::cache::ThumbCache;
use crate::thumbs::{CacheCounts, SheetPlan};

/// What turns pictures into vectors.
pub trait Engine: Sync {
    /// The engine, its settings and (for a model) its file's digest: what its vectors depend on.
    /// It keys the cached vectors and is recorded in the atlas's provenance.
    fn id(&self) -> &str;
    /// Length of every vector.
    fn dims(&self) -> usize;
    /// Pictures given at once (a model runs them as one batch).
    fn batch(&self) -> usize {
        64
    }
    /// One vector per picture, in order.
    fn describe(&self, pictures: &[&RgbImage]) -> Result<Vec<Vec<f32>>, String>;
}

/// The built-in descriptor ([`crate::describe`]).
pub struct BuiltIn;

impl Engine for BuiltIn {
    fn id(&self) -> &str {
        crate::describe::NAME
    }
    fn dims(&self) -> usize {
        crate::describe::DIMS
    }
    fn describe(&self, pictures: &[&RgbImage]) -> Result<Vec<Vec<f32>>, String> {
        Ok(pictures
            .par_iter()
            .map(|p| crate::describe::describe(p))
            .collect())
    }
}

/// Every item's vector and what it took.
pub struct FromImages {
    /// Items x dims, row-major.
    pub vectors: Vec<f32>,
    pub dims: usize,
    /// Items whose image could not be used: their vector is the placeholder picture's.
    pub failed: usize,
    /// Masters decoded in this pass (their thumbnails now in the cache for the sheets).
    pub decoded: usize,
    /// Vectors taken from the cache.
    pub reused: usize,
    /// Thumbnails that could not be stored in the cache.
    pub cache_errors: usize,
}

/// One item's state within a chunk.
enum Got {
    Vector(Vec<f32>),
    /// The thumbnail, its cache key and its file.
    Picture(RgbImage, Option<PathBuf>, PathBuf),
    Failed,
}

/// Vectors for every item of `paths` (the file, or why there is none). `progress` gets the count
/// of items done.
pub fn vectors_from_images(
    paths: &[Result<PathBuf, String>],
    plan: &SheetPlan,
    cache: Option<&ThumbCache>,
    engine: &dyn Engine,
    progress: &(dyn Fn(u64) + Sync),
) -> Result<FromImages, String> {
    let dims = engine.dims();
    let largest = *plan.cells.last().expect("at least one level");
    let placeholder = engine
        .describe(&[&crate::thumbs::placeholder(largest)])?
        .pop()
        .ok_or("the engine gave no vector for the placeholder picture")?;
    check_length(&placeholder, dims)?;
    let n = paths.len();
    let mut vectors = Vec::with_capacity(n * dims);
    let (mut failed, mut reused) = (0, 0);
    let counts = CacheCounts::default();
    let chunk = engine.batch().max(16 * rayon::current_num_threads());
    for (c, part) in paths.chunks(chunk).enumerate() {
        let got: Vec<Got> = part
            .par_iter()
            .map(|path| {
                let Ok(p) = path else { return Got::Failed };
                let key = cache.and_then(|c| c.key(p));
                if let (Some(c), Some(k)) = (cache, &key) {
                    if let Some(v) = c.get_vector(k, engine.id(), dims) {
                        return Got::Vector(v);
                    }
                }
                // Always the fresh thumbnail's pixels (a cached one is a JPEG of them, a shade
                // off): the same file gives the same vector whatever the cache held.
                let (made, _) =
                    crate::thumbs::largest_thumbnail_from(p, plan, cache, &counts, false);
                match made {
                    Ok((thumb, _)) => Got::Picture(thumb, key, p.clone()),
                    Err(_) => Got::Failed,
                }
            })
            .collect();
        let pictures: Vec<&RgbImage> = got
            .iter()
            .filter_map(|g| match g {
                Got::Picture(p, ..) => Some(p),
                _ => None,
            })
            .collect();
        let mut fresh = if pictures.is_empty() {
            Vec::new()
        } else {
            engine.describe(&pictures)?
        };
        if fresh.len() != pictures.len() {
            return Err(format!(
                "the engine gave {} vectors for {} pictures",
                fresh.len(),
                pictures.len()
            ));
        }
        fresh.reverse();
        for g in &got {
            match g {
                Got::Vector(v) => {
                    reused += 1;
                    vectors.extend_from_slice(v);
                }
                Got::Picture(_, key, path) => {
                    let v = fresh.pop().expect("one vector per picture");
                    check_length(&v, dims).map_err(|e| format!("{}: {e}", path.display()))?;
                    if let (Some(c), Some(k)) = (cache, key) {
                        // A vector that cannot be stored is computed again next time.
                        let _ = c.put_vector(k, engine.id(), &v);
                    }
                    vectors.extend_from_slice(&v);
                }
                Got::Failed => {
                    failed += 1;
                    vectors.extend_from_slice(&placeholder);
                }
            }
        }
        progress(((c * chunk + part.len()) as u64).min(n as u64));
    }
    Ok(FromImages {
        vectors,
        dims,
        failed,
        decoded: counts.made.into_inner(),
        cache_errors: counts.errors.into_inner(),
        reused,
    })
}

fn check_length(v: &[f32], dims: usize) -> Result<(), String> {
    if v.len() != dims {
        return Err(format!(
            "the engine gave a vector of {} values; it says its vectors have {dims}",
            v.len()
        ));
    }
    if v.iter().any(|x| !x.is_finite()) {
        return Err("the engine gave a vector with NaN or infinite values".into());
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Vectors come back in item order whatever the chunking; a rebuild takes every vector from
    /// the cache, equal to the first; an unreadable file gets the placeholder's vector.
    #[test]
    fn vectors_in_order_cached_and_placeholders_for_failures() {
        let dir = tempfile::tempdir().unwrap();
        let mut paths = Vec::new();
        for i in 0..40u32 {
            let p = dir.path().join(format!("{i}.png"));
            RgbImage::from_fn(60 + i, 40, |x, y| {
                image::Rgb([(x * i) as u8, (y * 3) as u8, (i * 6) as u8])
            })
            .save(&p)
            .unwrap();
            paths.push(Ok(p));
        }
        let broken = dir.path().join("broken.png");
        std::fs::write(&broken, b"not a picture").unwrap();
        paths.insert(7, Ok(broken));
        paths.insert(3, Err("no file".to_string()));
        let plan = SheetPlan {
            cells: vec![16, 64],
            sheet: 256,
            quality: 80,
            max_pixels: 1 << 24,
        };
        let cache = ThumbCache::new(dir.path().join("cache"), 64, 1 << 24);
        let first = vectors_from_images(&paths, &plan, Some(&cache), &BuiltIn, &|_| {}).unwrap();
        assert_eq!(first.vectors.len(), 42 * first.dims);
        assert_eq!((first.failed, first.decoded, first.reused), (2, 40, 0));
        let again = vectors_from_images(&paths, &plan, Some(&cache), &BuiltIn, &|_| {}).unwrap();
        assert_eq!((again.failed, again.decoded, again.reused), (2, 0, 40));
        assert_eq!(again.vectors, first.vectors);
        // Item 10 (file 8.png after the two insertions) is its own picture's descriptor.
        let d = first.dims;
        let (thumb, _) = crate::thumbs::thumbnail(
            &std::fs::read(dir.path().join("8.png")).unwrap(),
            1 << 24,
            64,
        )
        .unwrap();
        assert_eq!(
            &first.vectors[10 * d..11 * d],
            crate::describe::describe(&thumb).as_slice()
        );
        let placeholder = crate::describe::describe(&crate::thumbs::placeholder(64));
        assert_eq!(&first.vectors[3 * d..4 * d], placeholder.as_slice());
        assert_eq!(&first.vectors[8 * d..9 * d], placeholder.as_slice());
    }
}
