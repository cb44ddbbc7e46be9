//! An atlas folder read back from disk (`vitrine inspect`, `vitrine export`, `vitrine corpus`,
//! and the tests): its manifest, and its array files read into [`AtlasFiles`], which decodes them
//! the same way for the command line and the viewer.

use std::path::{Path, PathBuf};

use anyhow::{Context, Result};
use vitrine_format::{ArrayRef, AtlasFiles, Element, Manifest, TextTable, MANIFEST_FILE};

pub struct Atlas {
    pub dir: PathBuf,
    pub manifest: Manifest,
    /// SHA-256 of the manifest's bytes: what a corpus file names its atlas by.
    pub manifest_sha: String,
}

impl Atlas {
    pub fn open(dir: &Path) -> Result<Atlas> {
        let path = dir.join(MANIFEST_FILE);
        let bytes = std::fs::read(&path).with_context(|| format!("reading {}", path.display()))?;
        let text = String::from_utf8(bytes.clone())
            .with_context(|| format!("{}: not UTF-8 text", path.display()))?;
        let manifest = Manifest::from_json(&text).with_context(|| format!("{}", path.display()))?;
        Ok(Atlas {
            dir: dir.to_path_buf(),
            manifest,
            manifest_sha: vitrine_format::sha256_hex(&bytes),
        })
    }

    /// Reads the array files `refs` declare (each once).
    pub fn load<'a>(&self, refs: impl IntoIterator<Item = &'a ArrayRef>) -> Result<AtlasFiles> {
        self.load_files(refs.into_iter().map(|r| r.file.as_str()))
    }

    /// Reads the array files named (paths inside the atlas folder, each once).
    pub fn load_files<'a>(&self, names: impl IntoIterator<Item = &'a str>) -> Result<AtlasFiles> {
        let mut files = AtlasFiles::new();
        for name in names {
            if !files.contains(name) {
                files.insert(name.to_string(), self.read_whole(name)?);
            }
        }
        Ok(files)
    }

    /// The bytes of the array file `name`; an array a tiled atlas stores by leaf is read leaf
    /// by leaf, each chunk checked against its SHA-256, and joined.
    fn read_whole(&self, name: &str) -> Result<Vec<u8>> {
        let read =
            |f: &str| std::fs::read(self.dir.join(f)).with_context(|| format!("reading {f}"));
        let Some(c) = self.manifest.tiles.as_ref().and_then(|t| t.chunked(name)) else {
            return read(name);
        };
        let sums = read(&c.sums.file)?;
        c.sums.verify(&sums)?;
        let mut parts = Vec::with_capacity(sums.len() / 32);
        for leaf in 0..sums.len() / 32 {
            let f = vitrine_format::tiles::chunk_file(name, leaf);
            let bytes = read(&f)?;
            vitrine_format::tiles::verify_part(&f, &sums, leaf, &bytes)?;
            parts.push(bytes);
        }
        Ok(vitrine_format::tiles::join(&c.layout, &parts))
    }

    /// One array, read and checked.
    pub fn array<T: Element>(&self, r: &ArrayRef) -> Result<Vec<T>> {
        Ok(self.load([r])?.array(r)?)
    }

    pub fn text(&self, offsets: &ArrayRef, bytes: &ArrayRef) -> Result<TextTable> {
        let items = offsets.count.saturating_sub(1);
        Ok(self.load([offsets, bytes])?.text(offsets, bytes, items)?)
    }

    pub fn ids(&self) -> Result<TextTable> {
        let m = &self.manifest;
        Ok(self.load([&m.ids, &m.ids_text])?.ids(m)?)
    }

    /// Every item's neighbour list (k per item, atlas order), read from all chunks.
    pub fn neighbour_ids(&self) -> Result<Vec<u32>> {
        let mut v = Vec::new();
        for c in &self.manifest.neighbours.chunks {
            v.extend(self.array::<u32>(&c.ids)?);
        }
        Ok(v)
    }

    /// The atlas's copy groups, read and checked (None when the build did not look for copies).
    pub fn copies(&self) -> Result<Option<vitrine_format::CopyGroups>> {
        let Some(c) = &self.manifest.copies else {
            return Ok(None);
        };
        let files = self.load([&c.members, &c.starts, &c.pairs, &c.pair_bits])?;
        Ok(files.copies(&self.manifest)?)
    }

    /// The distances matching [`Atlas::neighbour_ids`].
    pub fn neighbour_distances(&self) -> Result<Vec<f32>> {
        let mut v = Vec::new();
        for c in &self.manifest.neighbours.chunks {
            v.extend(self.array::<f32>(&c.distances)?);
        }
        Ok(v)
    }
}
