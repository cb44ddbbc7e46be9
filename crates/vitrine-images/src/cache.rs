//! The thumbnail cache: a rebuild reuses the thumbnail of every image file that is unchanged
//! since it was last thumbnailed (same path, byte size and modification time), so adding a
//! thousand images to a hundred thousand does not redo the hundred thousand.
//!
//! One entry per image, named by a SHA-256 of what the thumbnail depends on (the file's absolute
//! path, size and modification time, the largest cell, the pixel limit and this format's version):
//! a header (bincode) with the original's size as shown, the file's size and SHA-256 (for the
//! provenance) and the stored JPEG's length and SHA-256, then the largest level's pixels as that
//! JPEG, at quality 95 without chroma subsampling. Lossless PNG would make the sheets of
//! a rebuild byte-identical, but at the 512 px level it costs ~250 KB per image (a quarter of a
//! terabyte per million images); this JPEG is ~4x smaller and a rebuilt sheet differs from a fresh
//! one by a fraction of a grey level on average (tested).
//! Entries are written to a temporary name and renamed, so a crash never leaves half an entry.
//! An entry is used only when its JPEG has the length and SHA-256 its header records: a JPEG
//! decoder reads a file cut short without complaint (the missing rows come out flat grey), so an
//! entry damaged on disk or cut short by a full disk would otherwise be published as it is. A
//! damaged entry is reported as such and made again.

use std::path::{Path, PathBuf};

use image::RgbImage;

const MAGIC: &[u8; 4] = b"VTC4";
/// Bumped whenever decoding or fitting changes what a thumbnail looks like (or the entry's layout).
// 5: embedded colour profiles applied, JPEG 2000 read.
const VERSION: u32 = 5;

/// What an entry says of its image, before the thumbnail's JPEG bytes: written with bincode
/// (standard configuration), which gives its length back on reading.
#[derive(serde::Serialize, serde::Deserialize)]
struct Header {
    size: [u32; 2],
    file_bytes: u64,
    sha256: [u8; 32],
    /// Length and SHA-256 of the JPEG that follows the header.
    thumb_bytes: u64,
    thumb_sha256: [u8; 32],
}
/// JPEG quality of the stored thumbnail.
const QUALITY: u8 = 95;

/// A cached thumbnail.
pub struct Entry {
    /// The original's width and height as shown.
    pub size: [u32; 2],
    /// SHA-256 (hex) and byte size of the image file.
    pub digest: (String, u64),
    /// The largest level's thumbnail.
    pub thumb: RgbImage,
}

/// What the cache holds for a key.
pub enum Lookup {
    Hit(Entry),
    /// No entry (or one written by another version of the format).
    Missing,
    /// An entry whose bytes are not what it was written with (cut short, changed on disk, or not
    /// an entry at all).
    Damaged,
}

/// The cache folder and what every key shares.
pub struct ThumbCache {
    dir: PathBuf,
    salt: Vec<u8>,
}

impl ThumbCache {
    pub fn new(dir: PathBuf, largest_cell: u32, max_pixels: u64) -> ThumbCache {
        let mut salt = Vec::new();
        salt.extend_from_slice(&VERSION.to_le_bytes());
        salt.extend_from_slice(&largest_cell.to_le_bytes());
        salt.extend_from_slice(&max_pixels.to_le_bytes());
        ThumbCache { dir, salt }
    }

    /// The entry file for an image, from its path and metadata; None when the file cannot be
    /// looked at (the caller then reads it and reports what is wrong).
    pub fn key(&self, path: &Path) -> Option<PathBuf> {
        let meta = std::fs::metadata(path).ok()?;
        if !meta.is_file() {
            return None;
        }
        let abs = std::fs::canonicalize(path).ok()?;
        let mtime = meta
            .modified()
            .ok()?
            .duration_since(std::time::UNIX_EPOCH)
            .ok()?;
        let mut id = self.salt.clone();
        id.extend_from_slice(abs.as_os_str().as_encoded_bytes());
        id.push(0);
        id.extend_from_slice(&meta.len().to_le_bytes());
        id.extend_from_slice(&mtime.as_secs().to_le_bytes());
        id.extend_from_slice(&mtime.subsec_nanos().to_le_bytes());
        let hex = vitrine_format::sha256_hex(&id);
        Some(self.dir.join(&hex[..2]).join(&hex))
    }

    /// The entry at `key`, checked against the length and checksum it was written with.
    pub fn get(&self, key: &Path) -> Lookup {
        let Ok(bytes) = std::fs::read(key) else {
            return Lookup::Missing;
        };
        // Entries of other versions have other keys; a file here without this magic is damaged.
        if bytes.len() < 4 || &bytes[..4] != MAGIC {
            return Lookup::Damaged;
        }
        let Ok((h, used)) = bincode::serde::decode_from_slice::<Header, _>(
            &bytes[4..],
            bincode::config::standard(),
        ) else {
            return Lookup::Damaged;
        };
        let jpeg = &bytes[4 + used..];
        if jpeg.len() as u64 != h.thumb_bytes || sha256_of(jpeg) != h.thumb_sha256 {
            return Lookup::Damaged;
        }
        let Ok(thumb) = image::load_from_memory_with_format(jpeg, image::ImageFormat::Jpeg) else {
            return Lookup::Damaged;
        };
        Lookup::Hit(Entry {
            size: h.size,
            digest: (vitrine_format::hex(&h.sha256), h.file_bytes),
            thumb: thumb.into_rgb8(),
        })
    }

    /// Stores an entry (the fields of [`Entry`]); failures are returned for the caller to
    /// mention, never fatal.
    pub fn put(
        &self,
        key: &Path,
        size: [u32; 2],
        digest: &(String, u64),
        thumb: &RgbImage,
    ) -> std::io::Result<()> {
        let mut sha256 = [0u8; 32];
        for (i, b) in sha256.iter_mut().enumerate() {
            *b = digest
                .0
                .get(2 * i..2 * i + 2)
                .and_then(|h| u8::from_str_radix(h, 16).ok())
                .ok_or_else(|| std::io::Error::other("not a SHA-256 digest"))?;
        }
        let mut jpeg = Vec::with_capacity(thumb.len() / 2);
        let mut enc = jpeg_encoder::Encoder::new(&mut jpeg, QUALITY);
        enc.set_sampling_factor(jpeg_encoder::SamplingFactor::R_4_4_4);
        enc.encode(
            thumb.as_raw(),
            thumb.width() as u16,
            thumb.height() as u16,
            jpeg_encoder::ColorType::Rgb,
        )
        .map_err(|e| std::io::Error::other(e.to_string()))?;
        let header = Header {
            size,
            file_bytes: digest.1,
            sha256,
            thumb_bytes: jpeg.len() as u64,
            thumb_sha256: sha256_of(&jpeg),
        };
        let mut out = Vec::with_capacity(128 + jpeg.len());
        out.extend_from_slice(MAGIC);
        let head = bincode::serde::encode_to_vec(&header, bincode::config::standard())
            .map_err(|e| std::io::Error::other(e.to_string()))?;
        out.extend_from_slice(&head);
        out.extend_from_slice(&jpeg);
        write_whole(key, &out)
    }
}

/// Writes `bytes` at `path` under a temporary name first (one of its own for each write, so that
/// two threads writing one entry do not mix) and renames it into place: a crash leaves no half file.
fn write_whole(path: &Path, bytes: &[u8]) -> std::io::Result<()> {
    static WRITES: std::sync::atomic::AtomicU64 = std::sync::atomic::AtomicU64::new(0);
    let parent = path.parent().expect("entries live in a subfolder");
    std::fs::create_dir_all(parent)?;
    let tmp = parent.join(format!(
        ".{}.{}-{}.tmp",
        path.file_name().unwrap().to_string_lossy(),
        std::process::id(),
        WRITES.fetch_add(1, std::sync::atomic::Ordering::Relaxed)
    ));
    std::fs::write(&tmp, bytes)?;
    std::fs::rename(&tmp, path)
}

impl ThumbCache {
    /// Where the vector an engine computed from a cached thumbnail is kept: beside the entry,
    /// named by the engine's id (its name, settings and model file's digest).
    fn vector_path(key: &Path, engine: &str) -> PathBuf {
        let tag = vitrine_format::sha256_hex(engine.as_bytes());
        let mut name = key.file_name().unwrap_or_default().to_os_string();
        name.push(format!(".{}.vec", &tag[..16]));
        key.with_file_name(name)
    }

    /// The vector `engine` computed for the entry at `key`, when it is there and intact (`dims`
    /// values, the checksum it was written with).
    pub fn get_vector(&self, key: &Path, engine: &str, dims: usize) -> Option<Vec<f32>> {
        let bytes = std::fs::read(Self::vector_path(key, engine)).ok()?;
        let body = 4 + 4 * dims;
        if bytes.len() != body + 32 || &bytes[..4] != VECTOR_MAGIC {
            return None;
        }
        if sha256_of(&bytes[..body]) != bytes[body..] {
            return None;
        }
        let v: Vec<f32> = bytes[4..body]
            .chunks_exact(4)
            .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]))
            .collect();
        v.iter().all(|x| x.is_finite()).then_some(v)
    }

    /// Stores the vector `engine` computed for the entry at `key` (written to a temporary name and
    /// renamed, like the entries).
    pub fn put_vector(&self, key: &Path, engine: &str, v: &[f32]) -> std::io::Result<()> {
        let mut out = Vec::with_capacity(4 + 4 * v.len() + 32);
        out.extend_from_slice(VECTOR_MAGIC);
        for x in v {
            out.extend_from_slice(&x.to_le_bytes());
        }
        let sum = sha256_of(&out);
        out.extend_from_slice(&sum);
        write_whole(&Self::vector_path(key, engine), &out)
    }
}

const VECTOR_MAGIC: &[u8; 4] = b"VTV1";

/// SHA-256 of `bytes`.
fn sha256_of(bytes: &[u8]) -> [u8; 32] {
    use sha2::Digest;
    sha2::Sha256::digest(bytes).into()
}

/// The default cache folder: `$VITRINE_CACHE/thumbs`, else `$XDG_CACHE_HOME/vitrine/thumbs`, else
/// `~/.cache/vitrine/thumbs`.
pub fn default_dir() -> Option<PathBuf> {
    if let Some(v) = std::env::var_os("VITRINE_CACHE") {
        return Some(PathBuf::from(v).join("thumbs"));
    }
    if let Some(x) = std::env::var_os("XDG_CACHE_HOME") {
        return Some(PathBuf::from(x).join("vitrine/thumbs"));
    }
    std::env::var_os("HOME").map(|h| PathBuf::from(h).join(".cache/vitrine/thumbs"))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_entry_comes_back_as_stored_and_a_changed_file_has_another_key() {
        let dir = tempfile::tempdir().unwrap();
        let cache = ThumbCache::new(dir.path().join("cache"), 128, 1000);
        let img = dir.path().join("a.png");
        std::fs::write(&img, b"first").unwrap();
        let key = cache.key(&img).unwrap();
        assert!(matches!(cache.get(&key), Lookup::Missing));
        let thumb = RgbImage::from_fn(5, 3, |x, y| image::Rgb([x as u8 * 40, y as u8 * 70, 9]));
        let e = Entry {
            size: [500, 300],
            digest: (format!("{:064x}", 0xabcdef_u64), 5),
            thumb: thumb.clone(),
        };
        cache.put(&key, e.size, &e.digest, &e.thumb).unwrap();
        let Lookup::Hit(back) = cache.get(&key) else {
            panic!("the entry just stored")
        };
        assert_eq!(back.size, [500, 300]);
        assert_eq!(back.digest, e.digest);
        // Stored as a quality-95 JPEG: the same size, every channel within a few levels.
        assert_eq!(back.thumb.dimensions(), thumb.dimensions());
        let worst = back
            .thumb
            .as_raw()
            .iter()
            .zip(thumb.as_raw())
            .map(|(a, b)| a.abs_diff(*b))
            .max()
            .unwrap();
        assert!(worst <= 12, "largest channel error {worst}");
        // Another size (and so another modification) is another key; so is another cell size.
        std::fs::write(&img, b"second, longer").unwrap();
        assert_ne!(cache.key(&img).unwrap(), key);
        let other = ThumbCache::new(dir.path().join("cache"), 512, 1000);
        assert_ne!(other.key(&img).unwrap(), cache.key(&img).unwrap());
        // A damaged entry is told apart from a missing one.
        std::fs::write(&key, b"VTC4 short").unwrap();
        assert!(matches!(cache.get(&key), Lookup::Damaged));
    }

    #[test]
    fn a_vector_comes_back_by_its_engine_and_a_damaged_one_does_not() {
        let dir = tempfile::tempdir().unwrap();
        let cache = ThumbCache::new(dir.path().join("cache"), 128, 1000);
        let img = dir.path().join("a.png");
        std::fs::write(&img, b"pixels").unwrap();
        let key = cache.key(&img).unwrap();
        let v = vec![0.25f32, -1.5, 3.0];
        cache.put_vector(&key, "engine one", &v).unwrap();
        assert_eq!(cache.get_vector(&key, "engine one", 3), Some(v.clone()));
        assert_eq!(cache.get_vector(&key, "engine two", 3), None);
        assert_eq!(cache.get_vector(&key, "engine one", 4), None);
        let path = ThumbCache::vector_path(&key, "engine one");
        let mut bytes = std::fs::read(&path).unwrap();
        bytes[6] ^= 1;
        std::fs::write(&path, &bytes).unwrap();
        assert_eq!(cache.get_vector(&key, "engine one", 3), None);
    }

    /// An entry cut short or changed in one byte is damaged, not a thumbnail with a grey bottom
    /// (the JPEG decoder alone accepts the cut file: checked here, so the test shows why the
    /// length and checksum are there).
    #[test]
    fn an_entry_cut_short_or_changed_is_damaged() {
        let dir = tempfile::tempdir().unwrap();
        let cache = ThumbCache::new(dir.path().join("cache"), 64, 1000);
        let img = dir.path().join("a.png");
        std::fs::write(&img, b"pixels").unwrap();
        let key = cache.key(&img).unwrap();
        let thumb = RgbImage::from_fn(64, 48, |x, y| {
            image::Rgb([(x * 4) as u8, (y * 5) as u8, ((x * y) % 251) as u8])
        });
        let digest = (format!("{:064x}", 7), 6);
        cache.put(&key, [640, 480], &digest, &thumb).unwrap();
        let whole = std::fs::read(&key).unwrap();
        assert!(matches!(cache.get(&key), Lookup::Hit(_)));
        let (_, head): (Header, usize) =
            bincode::serde::decode_from_slice(&whole[4..], bincode::config::standard()).unwrap();
        let jpeg_at = 4 + head;
        assert_eq!(
            &whole[jpeg_at..jpeg_at + 2],
            [0xFF, 0xD8],
            "a JPEG starts there"
        );
        let cut = &whole[..jpeg_at + (whole.len() - jpeg_at) * 2 / 3];
        assert!(
            image::load_from_memory_with_format(&cut[jpeg_at..], image::ImageFormat::Jpeg).is_ok(),
            "the decoder accepts the cut JPEG"
        );
        std::fs::write(&key, cut).unwrap();
        assert!(matches!(cache.get(&key), Lookup::Damaged));
        let mut changed = whole.clone();
        let mid = jpeg_at + (whole.len() - jpeg_at) / 2;
        changed[mid] ^= 0x10;
        std::fs::write(&key, &changed).unwrap();
        assert!(matches!(cache.get(&key), Lookup::Damaged));
        std::fs::write(&key, &whole).unwrap();
        assert!(matches!(cache.get(&key), Lookup::Hit(_)));
    }
}
