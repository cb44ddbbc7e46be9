//! The tiled atlas (format 3): an atlas too large to fetch whole, grouped by place on the
//! similarity map into a tile pyramid ([`crate::pyramid`]), so that a viewer fetches what is in
//! view.
//!
//! A tiled atlas is a format-2 atlas whose items are in the pyramid's leaf order, with three
//! additions:
//! - **chunked arrays**: the per-item arrays a view draws or a record card shows (the similarity
//!   map's positions, colours, thumbnail extents and picture cells, image sizes, ids, text and
//!   link fields, values as written) are stored by leaf: the whole array is declared as before
//!   (type, count, bytes and the SHA-256 of the whole), but on disk it is one file per leaf,
//!   `<file without .bin>/<leaf, five digits>.bin`, each checked by its own SHA-256 (`sums`, 32
//!   bytes a leaf). The arrays a filter reads over every item (category, number and date columns,
//!   clusters) stay whole files, fetched on first use.
//! - **cells**: u8 x, y per item, its place on a 256 x 256 grid over its leaf's square, enough to
//!   redraw an overview at any coarser tile (filters dimmed, another colouring) from the whole
//!   collection without the positions.
//! - **overviews**: a picture per tile (`tiles/<tile, five digits>.png`, `overview_px` square,
//!   transparent where there is nothing): the items' marks as they look when that tile fills
//!   about its own size on screen, drawn at build time.
//!
//! Joining the chunks of an array in leaf order gives back the whole array ([`join`]), so every
//! reader of format 2 reads a tiled atlas by joining first.

use serde::{Deserialize, Serialize};

use crate::pyramid::Pyramid;
use crate::{sha256_hex, ArrayRef, AtlasError, DType};

/// Side of the grid of `cells` over a leaf's square.
pub const CELL_GRID: u32 = 256;

/// How a chunked array's whole is cut into leaves.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "layout", rename_all = "snake_case")]
pub enum ChunkLayout {
    /// `per_item` elements for each item: a leaf's chunk is its items' elements.
    Items { per_item: u32 },
    /// A text table's offsets: a leaf's chunk holds its items' offsets and the one after them,
    /// less the first (so each chunk starts at 0).
    TextOffsets,
    /// A text table's bytes: a leaf's chunk holds the bytes its items' offsets span; `offsets`
    /// names the (chunked) offsets array.
    TextBytes { offsets: String },
}

/// An array stored by leaf.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ChunkedArray {
    /// The whole array's file, as the manifest declares it elsewhere (not itself on disk).
    pub file: String,
    #[serde(flatten)]
    pub layout: ChunkLayout,
    /// SHA-256 of each leaf's chunk, 32 bytes a leaf, in leaf order.
    pub sums: ArrayRef,
}

/// The `tiles` section of a format-3 manifest.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Tiles {
    /// The map the pyramid is over (`similarity`).
    pub map: String,
    pub pyramid: Pyramid,
    /// Side of each overview picture in pixels.
    pub overview_px: u32,
    /// SHA-256 of each tile's overview picture, 32 bytes a tile, in tile order.
    pub overview_sums: ArrayRef,
    /// u8 x, y per item: its cell on a 256 x 256 grid over its leaf's square.
    pub cells: ArrayRef,
    pub chunked: Vec<ChunkedArray>,
}

/// The file of leaf `leaf`'s chunk of the array stored whole at `file`.
pub fn chunk_file(file: &str, leaf: usize) -> String {
    let stem = file.strip_suffix(".bin").unwrap_or(file);
    format!("{stem}/{leaf:05}.bin")
}

/// The file of tile `tile`'s overview picture.
pub fn overview_file(tile: usize) -> String {
    format!("tiles/{tile:05}.png")
}

/// The file of the SHA-256 list of the array stored whole at `file`.
pub fn sums_file(file: &str) -> String {
    let stem = file.strip_suffix(".bin").unwrap_or(file);
    format!("{stem}.sums.bin")
}

/// The SHA-256 digests of `parts`, 32 bytes each, as one array declared at `file`.
pub fn sums_of<B: AsRef<[u8]>>(file: &str, parts: &[B]) -> (ArrayRef, Vec<u8>) {
    let mut v = Vec::with_capacity(parts.len() * 32);
    for p in parts {
        v.extend(crate::sha256_bytes(p.as_ref()));
    }
    ArrayRef::encode(file, &v)
}

/// Checks `bytes` as part `k` of a list whose digests are `sums` (32 bytes each); `file` names
/// the part in the error.
pub fn verify_part(file: &str, sums: &[u8], k: usize, bytes: &[u8]) -> Result<(), AtlasError> {
    let want = sums
        .get(32 * k..32 * k + 32)
        .ok_or_else(|| AtlasError::Inconsistent(format!("{file}: no checksum for part {k}")))?;
    let found = sha256_hex(bytes);
    let expected = crate::hex(want);
    if found != expected {
        return Err(AtlasError::Checksum {
            file: file.to_string(),
            expected,
            found,
        });
    }
    Ok(())
}

impl Tiles {
    /// The item runs of the leaves, in leaf order.
    pub fn runs(&self) -> Vec<[u64; 2]> {
        self.pyramid.leaves().filter_map(|t| t.items).collect()
    }

    /// The chunked declaration of the array stored whole at `file`, if it is chunked.
    pub fn chunked(&self, file: &str) -> Option<&ChunkedArray> {
        self.chunked.iter().find(|c| c.file == file)
    }

    /// Every file a reader may fetch beside the manifest's whole arrays: sums and cells.
    pub fn arrays(&self) -> Vec<&ArrayRef> {
        let mut v = vec![&self.overview_sums, &self.cells];
        v.extend(self.chunked.iter().map(|c| &c.sums));
        v
    }

    /// Checks the section against the manifest's arrays (`declared`: every whole array the
    /// manifest declares) and item count.
    pub fn check(&self, n: u64, declared: &[&ArrayRef]) -> Result<(), AtlasError> {
        let bad = |s: String| Err(AtlasError::Inconsistent(s));
        let p = &self.pyramid;
        let root = p.tiles.first();
        if root.map(|r| (r.level, r.x, r.y, r.count)) != Some((0, 0, 0, n)) {
            return bad(format!(
                "the tile pyramid's root does not hold the {n} items"
            ));
        }
        if !(p.side.is_finite() && p.side > 0.0 && p.origin.iter().all(|v| v.is_finite())) {
            return bad("the tile pyramid's square is not a square".into());
        }
        p.check_structure()
            .map_err(|e| AtlasError::Inconsistent(format!("tile pyramid: {e}")))?;
        let leaves = self.runs().len() as u64;
        let tiles = p.tiles.len() as u64;
        if self.overview_px == 0 || self.overview_px > 4096 {
            return bad(format!("overview pictures of {} pixels", self.overview_px));
        }
        let want = |r: &ArrayRef, count: u64, dtype: DType| {
            if r.count != count || r.dtype != dtype || r.count * dtype.size() != r.bytes {
                return bad(format!(
                    "{} should hold {count} {dtype:?} but declares {} {:?}",
                    r.file, r.count, r.dtype
                ));
            }
            Ok(())
        };
        want(&self.overview_sums, 32 * tiles, DType::U8)?;
        want(&self.cells, 2 * n, DType::U8)?;
        for c in &self.chunked {
            want(&c.sums, 32 * leaves, DType::U8)?;
            let Some(whole) = declared.iter().find(|r| r.file == c.file) else {
                return bad(format!("{} is chunked but not declared", c.file));
            };
            match &c.layout {
                ChunkLayout::Items { per_item } => {
                    if whole.count != n * *per_item as u64 {
                        return bad(format!(
                            "{} holds {} elements, not {per_item} for each of {n} items",
                            c.file, whole.count
                        ));
                    }
                }
                ChunkLayout::TextOffsets => {
                    if whole.count != n + 1 || whole.dtype != DType::U32 {
                        return bad(format!("{} is not a text table's offsets", c.file));
                    }
                }
                ChunkLayout::TextBytes { offsets } => {
                    let by_leaf = self
                        .chunked(offsets)
                        .is_some_and(|o| o.layout == ChunkLayout::TextOffsets);
                    if whole.dtype != DType::U8 || !by_leaf {
                        return bad(format!(
                            "{} is text cut by {offsets}, which is not chunked offsets",
                            c.file
                        ));
                    }
                }
            }
        }
        Ok(())
    }
}

/// The chunks of one array (`bytes`, the whole, as `r` declares it) for the leaves' item
/// `runs`; a text table's bytes need its whole offsets.
pub fn split(
    r: &ArrayRef,
    bytes: &[u8],
    layout: &ChunkLayout,
    runs: &[[u64; 2]],
    offsets: Option<&[u32]>,
) -> Result<Vec<Vec<u8>>, AtlasError> {
    r.verify(bytes)?;
    let size = r.dtype.size() as usize;
    let out_of = |what: &str| AtlasError::Inconsistent(format!("{}: {what}", r.file));
    let mut out = Vec::with_capacity(runs.len());
    for &[a, b] in runs {
        let (a, b) = (a as usize, b as usize);
        let chunk = match layout {
            ChunkLayout::Items { per_item } => {
                let per = *per_item as usize * size;
                bytes
                    .get(a * per..b * per)
                    .ok_or_else(|| out_of("too short"))?
                    .to_vec()
            }
            ChunkLayout::TextOffsets => {
                let at = |k: usize| -> Result<u32, AtlasError> {
                    let s = bytes
                        .get(4 * k..4 * k + 4)
                        .ok_or_else(|| out_of("too short"))?;
                    Ok(u32::from_le_bytes([s[0], s[1], s[2], s[3]]))
                };
                let base = at(a)?;
                let mut v = Vec::with_capacity(4 * (b - a + 1));
                for k in a..=b {
                    let o = at(k)?
                        .checked_sub(base)
                        .ok_or_else(|| out_of("offsets fall"))?;
                    v.extend(o.to_le_bytes());
                }
                v
            }
            ChunkLayout::TextBytes { .. } => {
                let o = offsets.ok_or_else(|| out_of("split without its offsets"))?;
                let (s, e) = (o.get(a), o.get(b));
                let (&s, &e) = s.zip(e).ok_or_else(|| out_of("offsets too short"))?;
                bytes
                    .get(s as usize..e as usize)
                    .ok_or_else(|| out_of("offsets beyond the text"))?
                    .to_vec()
            }
        };
        out.push(chunk);
    }
    Ok(out)
}

/// The whole array from its chunks in leaf order (the inverse of [`split`]).
pub fn join<B: AsRef<[u8]>>(layout: &ChunkLayout, chunks: &[B]) -> Vec<u8> {
    let total: usize = chunks.iter().map(|c| c.as_ref().len()).sum();
    let mut out = Vec::with_capacity(total);
    match layout {
        ChunkLayout::TextOffsets => {
            let mut base = 0u32;
            out.extend(0u32.to_le_bytes());
            for c in chunks {
                let c = c.as_ref();
                let mut last = 0u32;
                for w in c.chunks_exact(4).skip(1) {
                    last = u32::from_le_bytes([w[0], w[1], w[2], w[3]]);
                    out.extend(base.wrapping_add(last).to_le_bytes());
                }
                base = base.wrapping_add(last);
            }
        }
        _ => {
            for c in chunks {
                out.extend_from_slice(c.as_ref());
            }
        }
    }
    out
}

/// Each item's cell over its leaf's square (`positions`: x, y interleaved, in leaf order), u8
/// x, y per item.
pub fn cells(p: &Pyramid, positions: &[f32]) -> Vec<u8> {
    let mut out = vec![0u8; positions.len()];
    for t in p.leaves() {
        let Some([a, b]) = t.items else { continue };
        let [x0, y0, x1, _] = p.square(t);
        let per = CELL_GRID as f64 / (x1 - x0);
        for k in a as usize..b as usize {
            for d in 0..2 {
                let o = if d == 0 { x0 } else { y0 };
                let c = ((positions[2 * k + d] as f64 - o) * per).floor();
                out[2 * k + d] = c.clamp(0.0, (CELL_GRID - 1) as f64) as u8;
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn text_table(items: &[&str]) -> (Vec<u32>, Vec<u8>) {
        let t = crate::TextTable::from_strings(items);
        (t.offsets, t.utf8)
    }

    #[test]
    fn split_then_join_gives_back_every_kind_of_array() {
        // Leaves of 2, 0 (an empty run cannot occur, but must not break), 3 and 1 items.
        let runs = [[0, 2], [2, 2], [2, 5], [5, 6]];
        let words = [
            "Ansicht",
            "",
            "Brücke über den Fluss",
            "c. 1540",
            "ß",
            "last",
        ];
        let (offsets, utf8) = text_table(&words);
        let (ro, bo) = ArrayRef::encode("arrays/ids.offsets.bin", &offsets);
        let (rt, bt) = ArrayRef::encode("arrays/ids.text.bin", &utf8);
        let xy: Vec<f32> = (0..12).map(|v| v as f32 * 0.5).collect();
        let (rp, bp) = ArrayRef::encode("arrays/map-similarity.bin", &xy);
        let lo = ChunkLayout::TextOffsets;
        let lt = ChunkLayout::TextBytes {
            offsets: ro.file.clone(),
        };
        let lp = ChunkLayout::Items { per_item: 2 };
        let co = split(&ro, &bo, &lo, &runs, None).unwrap();
        let ct = split(&rt, &bt, &lt, &runs, Some(&offsets)).unwrap();
        let cp = split(&rp, &bp, &lp, &runs, None).unwrap();
        assert_eq!(join(&lo, &co), bo);
        assert_eq!(join(&lt, &ct), bt);
        assert_eq!(join(&lp, &cp), bp);
        // Each chunk is a table of its own: leaf 2's holds items 2..5 from offset 0.
        let o2: Vec<u32> = bytemuck::cast_slice(&co[2]).to_vec();
        let t2 = crate::TextTable {
            offsets: o2,
            utf8: ct[2].clone(),
        };
        t2.validate("leaf 2", 3).unwrap();
        assert_eq!(t2.get(0), "Brücke über den Fluss");
        assert_eq!(t2.get(2), "ß");
        assert_eq!(cp[3], bytemuck::cast_slice::<f32, u8>(&[5.0, 5.5]));
        // A chunk altered on the way is caught by its digest.
        let (sums, sum_bytes) = sums_of("arrays/ids.text.sums.bin", &ct);
        assert_eq!(sums.count, 32 * 4);
        verify_part("c", &sum_bytes, 2, &ct[2]).unwrap();
        let mut bad = ct[2].clone();
        bad[0] ^= 1;
        assert!(verify_part("c", &sum_bytes, 2, &bad).is_err());
        assert!(verify_part("c", &sum_bytes, 4, &ct[2]).is_err());
    }

    #[test]
    fn cells_place_each_item_on_its_leafs_grid() {
        // Two clumps: the leaves split until each holds at most 3 items.
        let mut xy = Vec::new();
        for k in 0..6 {
            xy.extend([k as f32 * 0.01, 0.0]);
            xy.extend([10.0 - k as f32 * 0.01, 10.0]);
        }
        let (p, order) = Pyramid::build(&xy, 3, 12);
        let sorted: Vec<f32> = order
            .iter()
            .flat_map(|&i| [xy[2 * i as usize], xy[2 * i as usize + 1]])
            .collect();
        let c = cells(&p, &sorted);
        for t in p.leaves() {
            let [a, b] = t.items.unwrap();
            let sq = p.square(t);
            let step = (sq[2] - sq[0]) / CELL_GRID as f64;
            for k in a as usize..b as usize {
                for d in 0..2 {
                    let lo = sq[d] + c[2 * k + d] as f64 * step;
                    let v = sorted[2 * k + d] as f64;
                    assert!(
                        v >= lo - 1e-9 && v < lo + step + 1e-9,
                        "{k} {d}: {v} vs {lo}"
                    );
                }
            }
        }
    }
}
