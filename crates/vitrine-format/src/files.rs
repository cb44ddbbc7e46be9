//! An atlas's array files held in memory, and every typed view of them decoded in one place: the
//! command line reads the files from the atlas folder, the viewer fetches them, and both decode
//! through [`AtlasFiles`].

use std::collections::HashMap;

use crate::{ArrayRef, AtlasError, Element, Manifest, MapLayout, TextTable};

/// Array files by their path in the atlas folder (`arrays/...`), as read or fetched.
#[derive(Debug, Default, Clone)]
pub struct AtlasFiles {
    files: HashMap<String, Vec<u8>>,
}

impl AtlasFiles {
    pub fn new() -> AtlasFiles {
        AtlasFiles::default()
    }

    pub fn insert(&mut self, file: String, bytes: Vec<u8>) {
        self.files.insert(file, bytes);
    }

    /// The bytes held under `file`, if any (not checked).
    pub fn get(&self, file: &str) -> Option<&[u8]> {
        self.files.get(file).map(|v| v.as_slice())
    }

    /// Takes the bytes held under `file` out, if any.
    pub fn take(&mut self, file: &str) -> Option<Vec<u8>> {
        self.files.remove(file)
    }

    pub fn contains(&self, file: &str) -> bool {
        self.files.contains_key(file)
    }

    /// The bytes of the array `r` declares (not yet checked); a file not held reads as empty, so
    /// that its check fails naming it.
    pub fn bytes(&self, r: &ArrayRef) -> Result<&[u8], AtlasError> {
        self.files
            .get(&r.file)
            .map(|v| v.as_slice())
            .ok_or_else(|| AtlasError::WrongLength {
                file: r.file.clone(),
                expected: r.bytes,
                found: 0,
            })
    }

    /// The array `r` declares, checked (length, element type, SHA-256) and decoded.
    pub fn array<T: Element>(&self, r: &ArrayRef) -> Result<Vec<T>, AtlasError> {
        r.decode(self.bytes(r)?)
    }

    /// A text table of `items` strings from its offsets and UTF-8 bytes.
    pub fn text(
        &self,
        offsets: &ArrayRef,
        utf8: &ArrayRef,
        items: u64,
    ) -> Result<TextTable, AtlasError> {
        crate::decode_text(
            offsets,
            self.bytes(offsets)?,
            utf8,
            self.bytes(utf8)?,
            items,
        )
    }

    /// Every item's id, in atlas order.
    pub fn ids(&self, m: &Manifest) -> Result<TextTable, AtlasError> {
        self.text(&m.ids, &m.ids_text, m.item_count)
    }

    /// A map's positions, one [x, y] per item in atlas order.
    pub fn positions(&self, map: &MapLayout) -> Result<Vec<[f32; 2]>, AtlasError> {
        let flat: Vec<f32> = self.array(&map.positions)?;
        Ok(flat.chunks_exact(2).map(|c| [c[0], c[1]]).collect())
    }

    /// Every item's mark colour (RGBA: its picture's average, or its category's colour).
    pub fn colours(&self, m: &Manifest) -> Result<Vec<[u8; 4]>, AtlasError> {
        let flat: Vec<u8> = self.array(&m.colours)?;
        Ok(flat
            .chunks_exact(4)
            .map(|c| [c[0], c[1], c[2], c[3]])
            .collect())
    }

    /// Each thumbnail's width and height in the largest cell (None: the atlas has no pictures).
    pub fn extents(&self, m: &Manifest) -> Result<Option<Vec<(u16, u16)>>, AtlasError> {
        match &m.sheets {
            Some(s) => Ok(Some(
                self.array::<u32>(&s.extents)?
                    .into_iter()
                    .map(crate::unpack_extent)
                    .collect(),
            )),
            None => Ok(None),
        }
    }

    /// The original images' widths and heights, a pair per item (0, 0 where unknown); None when
    /// the atlas does not record them.
    pub fn image_sizes(&self, m: &Manifest) -> Result<Option<Vec<u32>>, AtlasError> {
        match m.sheets.as_ref().and_then(|s| s.image_sizes.as_ref()) {
            Some(r) => Ok(Some(self.array(r)?)),
            None => Ok(None),
        }
    }

    /// The copy groups, checked (None: the build did not look for copies).
    pub fn copies(&self, m: &Manifest) -> Result<Option<crate::CopyGroups>, AtlasError> {
        match &m.copies {
            Some(c) => Ok(Some(crate::CopyGroups::new(
                m.item_count as usize,
                self.array(&c.members)?,
                self.array(&c.starts)?,
                self.array(&c.pairs)?,
                self.array(&c.pair_bits)?,
            )?)),
            None => Ok(None),
        }
    }

    /// Every item's cluster number (None: the atlas has no clusters).
    pub fn clusters(&self, m: &Manifest) -> Result<Option<Vec<u32>>, AtlasError> {
        match &m.clusters {
            Some(c) => Ok(Some(self.array(&c.ids)?)),
            None => Ok(None),
        }
    }
}

impl FromIterator<(String, Vec<u8>)> for AtlasFiles {
    fn from_iter<I: IntoIterator<Item = (String, Vec<u8>)>>(iter: I) -> AtlasFiles {
        AtlasFiles {
            files: iter.into_iter().collect(),
        }
    }
}
