//! The tiled atlas (format 3): an atlas too large to fetch whole, grouped by place on the
//! similarity map into a tile pyramid ([`crate::pyramid`]), so that a viewer fetches what is in
//! view.
//!
//! A tiled atlas is a format-2 atlas whose items are in the pyramid's leaf order, with three
//! additions:
//! - **arrays stored by leaf**: every per-item array (positions on every map, colours, thumbnail
//!   extents and pictures, image sizes, ids, source rows, every field's columns and values as
//!   written, clusters, cells) is declared as before (type, count, bytes and the SHA-256 of the
//!   whole), but on disk it is one file per leaf, `<file without .bin>/<leaf, at least five digits>.bin`,
//!   each checked by its own SHA-256 (`sums`, 32 bytes a leaf). A viewer fetches the leaves in
//!   view, and every leaf of a column when a filter over the whole collection needs it.
//! - **cells**: u8 column and row per item, its place on a 256 x 256 grid over its leaf's square,
//!   from which any tile's overview is drawn ([`overview_pixels`]) — by the build, and so that a
//!   viewer can draw it again with other colours (filters dimming items, another field's colours).
//! - **overviews**: a picture per tile (`tiles/<tile, at least five digits>.png`, `overview_px` square,
//!   transparent where there is nothing): the items' marks as they look when that tile fills
//!   about its own size on screen.
//!
//! Joining the chunks of an array in leaf order gives back the whole array ([`join`]), so every
//! reader of format 2 reads a tiled atlas by joining first.

use serde::{Deserialize, Serialize};

use crate::pyramid::Pyramid;
use crate::{sha256_hex, ArrayRef, AtlasError, DType, FieldKind, Manifest};

/// Side of the grid of `cells` over a leaf's square.
pub const CELL_GRID: u32 = 256;

/// How a chunked array's whole is cut into leaves.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(tag = "layout", rename_all = "snake_case")]
pub enum ChunkLayout {
    /// `per_item` elements for each item: a leaf's chunk is its items' elements.
    Items { per_item: u32 },
    /// Offsets (u32, items + 1, from 0) into another array (a text table's bytes, a multi-valued
    /// field's codes): a leaf's chunk holds its items' offsets and the one after them, less the
    /// first, so that each chunk starts at 0.
    Offsets,
    /// The elements a leaf's items' offsets span; `offsets` names the (chunked) offsets array.
    Spans { offsets: String },
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
    /// The map's typical spacing ([`crate::spacing::typical_spacing`]), which a viewer cannot
    /// measure without every position.
    pub spacing: f64,
    /// u8 column and row per item: its cell on a 256 x 256 grid over its leaf's square (stored by
    /// leaf, as every per-item array).
    pub cells: ArrayRef,
    /// Every per-item array ([`per_item_arrays`]), stored by leaf.
    pub chunked: Vec<ChunkedArray>,
}

/// Every per-item array of an atlas, with how it is cut by leaf: what a tiled atlas stores by
/// leaf (its `cells` included).
pub fn per_item_arrays(m: &Manifest) -> Vec<(ArrayRef, ChunkLayout)> {
    let items = |per_item| ChunkLayout::Items { per_item };
    let spans = |pair: &[ArrayRef; 2]| {
        [
            (pair[0].clone(), ChunkLayout::Offsets),
            (
                pair[1].clone(),
                ChunkLayout::Spans {
                    offsets: pair[0].file.clone(),
                },
            ),
        ]
    };
    let mut v = Vec::new();
    v.extend(spans(&[m.ids.clone(), m.ids_text.clone()]));
    v.push((m.source_rows.clone(), items(1)));
    v.push((m.colours.clone(), items(4)));
    for map in &m.maps {
        v.push((map.positions.clone(), items(2)));
    }
    for f in &m.fields {
        match (f.kind, &f.column2) {
            (FieldKind::Text | FieldKind::Link, Some(bytes)) => {
                v.extend(spans(&[f.column.clone(), bytes.clone()]))
            }
            (_, second) => {
                v.push((f.column.clone(), items(1)));
                v.extend(second.iter().map(|c| (c.clone(), items(1))));
            }
        }
        v.extend(f.written.iter().flat_map(spans));
        v.extend(f.multi.iter().flat_map(spans));
    }
    if let Some(s) = &m.sheets {
        v.push((s.extents.clone(), items(1)));
        v.extend(s.image_sizes.iter().map(|r| (r.clone(), items(2))));
        v.extend(s.pictures.iter().map(|r| (r.clone(), items(1))));
    }
    v.extend(m.clusters.iter().map(|c| (c.ids.clone(), items(1))));
    v.extend(m.tiles.iter().map(|t| (t.cells.clone(), items(2))));
    v
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

    /// The arrays this section declares: the cells (stored by leaf) and the lists of sums.
    pub fn arrays(&self) -> Vec<&ArrayRef> {
        let mut v = vec![&self.overview_sums, &self.cells];
        v.extend(self.chunked.iter().map(|c| &c.sums));
        v
    }

    /// Checks the section against its manifest `m`.
    pub fn check(&self, m: &Manifest) -> Result<(), AtlasError> {
        let n = m.item_count;
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
        if !m.maps.iter().any(|x| x.name == self.map) {
            return bad(format!(
                "the tiles are over a map {:?} the atlas has not",
                self.map
            ));
        }
        p.check_structure()
            .map_err(|e| AtlasError::Inconsistent(format!("tile pyramid: {e}")))?;
        let leaves = self.runs().len() as u64;
        let tiles = p.tiles.len() as u64;
        if self.overview_px == 0 || self.overview_px > 1024 {
            return bad(format!("overview pictures of {} pixels", self.overview_px));
        }
        if !(self.spacing.is_finite() && self.spacing >= 0.0) {
            return bad(format!("a typical spacing of {}", self.spacing));
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
        // Every per-item array, and only those, stored by leaf, as the rule cuts it.
        let rule = per_item_arrays(m);
        if rule.len() != self.chunked.len() {
            return bad(format!(
                "{} arrays stored by leaf, the atlas has {} per-item arrays",
                self.chunked.len(),
                rule.len()
            ));
        }
        for (r, layout) in &rule {
            let Some(c) = self.chunked(&r.file) else {
                return bad(format!("{} is not stored by leaf", r.file));
            };
            if c.layout != *layout {
                return bad(format!(
                    "{} is cut as {:?}, not {layout:?}",
                    r.file, c.layout
                ));
            }
            want(&c.sums, 32 * leaves, DType::U8)?;
            match layout {
                ChunkLayout::Items { per_item } if r.count != n * *per_item as u64 => {
                    return bad(format!(
                        "{} holds {} elements, not {per_item} for each of {n} items",
                        r.file, r.count
                    ));
                }
                ChunkLayout::Offsets if r.count != n + 1 || r.dtype != DType::U32 => {
                    return bad(format!("{} is not offsets for {n} items", r.file));
                }
                _ => {}
            }
        }
        Ok(())
    }
}

/// The chunks of one array (`bytes`, the whole, as `r` declares it) for the leaves' item
/// `runs`; spans need their whole offsets.
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
            ChunkLayout::Offsets => {
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
            ChunkLayout::Spans { .. } => {
                let o = offsets.ok_or_else(|| out_of("split without its offsets"))?;
                let (s, e) = (o.get(a), o.get(b));
                let (&s, &e) = s.zip(e).ok_or_else(|| out_of("offsets too short"))?;
                bytes
                    .get(s as usize * size..e as usize * size)
                    .ok_or_else(|| out_of("offsets beyond the array"))?
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
        ChunkLayout::Offsets => {
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

/// Side of an item's mark in an overview picture, in its pixels.
pub const OVERVIEW_MARK_PX: usize = 2;

/// Tile `t`'s overview, `side` x `side` RGBA pixels (row 0 at the top of its square): each item
/// below it a square mark of `colour(item)` at 70 % opacity, placed by its `cells` (two bytes an
/// item, in item order), the marks on one pixel composited as their mean colour at opacity
/// 1 - 0.3^count, so that density shows as well as colour. An item whose colour has alpha 0 is
/// left out. The build draws every tile's picture so; a viewer draws it again with its own
/// colours (dimmed by filters, or another field's).
pub fn overview_pixels(
    p: &Pyramid,
    t: usize,
    side: usize,
    cells: &[u8],
    colour: impl Fn(usize) -> [u8; 4],
) -> Vec<u8> {
    // Per pixel: sums of red, green, blue and the count of marks.
    let mut acc = vec![[0u32; 4]; side * side];
    let tile = &p.tiles[t];
    let mut stack = vec![t];
    let grid = CELL_GRID as f64;
    while let Some(k) = stack.pop() {
        let leaf = &p.tiles[k];
        if let Some(c) = &leaf.children {
            stack.extend(c.iter().filter(|&&c| c != u32::MAX).map(|&c| c as usize));
            continue;
        }
        let Some([a, b]) = leaf.items else { continue };
        // The leaf inside the tile: `per` of the tile's side, offset by (ox, oy) leaves.
        let depth = leaf.level.saturating_sub(tile.level).min(30);
        let per = 1.0 / (1u64 << depth) as f64;
        let ox = (leaf.x - (tile.x << depth)) as f64;
        let oy = (leaf.y - (tile.y << depth)) as f64;
        let to_px = side as f64 * per;
        for k in a as usize..b as usize {
            let c = colour(k);
            if c[3] == 0 {
                continue;
            }
            let (cx, cy) = (cells[2 * k] as f64 + 0.5, cells[2 * k + 1] as f64 + 0.5);
            let sx = (ox + cx / grid) * to_px;
            let sy = side as f64 - (oy + cy / grid) * to_px;
            let half = OVERVIEW_MARK_PX as f64 / 2.0;
            let c0 = (sx - half).round().clamp(0.0, side as f64) as usize;
            let r0 = (sy - half).round().clamp(0.0, side as f64) as usize;
            let (c1, r1) = (
                (c0 + OVERVIEW_MARK_PX).min(side),
                (r0 + OVERVIEW_MARK_PX).min(side),
            );
            for r in r0..r1 {
                for q in &mut acc[r * side + c0..r * side + c1] {
                    q[0] += c[0] as u32;
                    q[1] += c[1] as u32;
                    q[2] += c[2] as u32;
                    q[3] += 1;
                }
            }
        }
    }
    let mut px = vec![0u8; side * side * 4];
    for (q, o) in acc.iter().zip(px.chunks_exact_mut(4)) {
        if q[3] > 0 {
            let n = q[3];
            let opacity = 1.0 - 0.3f64.powi(n.min(64) as i32);
            o.copy_from_slice(&[
                ((q[0] + n / 2) / n) as u8,
                ((q[1] + n / 2) / n) as u8,
                ((q[2] + n / 2) / n) as u8,
                (opacity * 255.0).round() as u8,
            ]);
        }
    }
    px
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
        let lo = ChunkLayout::Offsets;
        let lt = ChunkLayout::Spans {
            offsets: ro.file.clone(),
        };
        let lp = ChunkLayout::Items { per_item: 2 };
        let co = split(&ro, &bo, &lo, &runs, None).unwrap();
        let ct = split(&rt, &bt, &lt, &runs, Some(&offsets)).unwrap();
        let cp = split(&rp, &bp, &lp, &runs, None).unwrap();
        assert_eq!(join(&lo, &co), bo);
        assert_eq!(join(&lt, &ct), bt);
        assert_eq!(join(&lp, &cp), bp);
        // A multi-valued field's codes: spans of u32, cut by element.
        let (mo, mc) = (vec![0u32, 2, 2, 3, 5, 5, 6], vec![1u32, 2, 0, 3, 4, 1]);
        let (rmo, bmo) = ArrayRef::encode("arrays/field-kw.multi.offsets.bin", &mo);
        let (rmc, bmc) = ArrayRef::encode("arrays/field-kw.multi.codes.bin", &mc);
        let lmc = ChunkLayout::Spans {
            offsets: rmo.file.clone(),
        };
        let cmo = split(&rmo, &bmo, &lo, &runs, None).unwrap();
        let cmc = split(&rmc, &bmc, &lmc, &runs, Some(&mo)).unwrap();
        assert_eq!(cmc[2], bytemuck::cast_slice::<u32, u8>(&[0, 3, 4]));
        assert_eq!(cmo[2], bytemuck::cast_slice::<u32, u8>(&[0, 1, 3, 3]));
        assert_eq!(join(&lo, &cmo), bmo);
        assert_eq!(join(&lmc, &cmc), bmc);
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

    #[test]
    fn an_overview_shows_each_item_below_its_tile_where_it_lies() {
        // Clumps of very different sizes and a scatter; leaves of at most 50 items.
        let mut xy = Vec::new();
        let mut r = 12345u64;
        let mut next = || {
            r = r
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (r >> 11) as f64 / (1u64 << 53) as f64
        };
        for k in 0..3000 {
            let (cx, cy, s) = [(2.0, 3.0, 0.05), (7.0, 8.0, 0.8), (5.0, 5.0, 5.0)][k % 3];
            xy.extend([
                (cx + s * (next() - 0.5)) as f32,
                (cy + s * (next() - 0.5)) as f32,
            ]);
        }
        let (p, order) = Pyramid::build(&xy, 50, 12);
        let sorted: Vec<f32> = order
            .iter()
            .flat_map(|&i| [xy[2 * i as usize], xy[2 * i as usize + 1]])
            .collect();
        let cells = cells(&p, &sorted);
        let side = 256;
        // The root, a tile in the middle of the tree and a leaf: a few of their items, each drawn
        // alone, lie where their positions put them (within the mark and a cell's rounding).
        let deep = p
            .tiles
            .iter()
            .position(|t| t.level == 3 && t.children.is_some())
            .unwrap();
        let leaf = p
            .tiles
            .iter()
            .position(|t| t.level >= 4 && t.children.is_none())
            .unwrap();
        for t in [0, deep, leaf] {
            let [a, b] = p.run(t);
            let sq = p.square(&p.tiles[t]);
            let scale = side as f64 / (sq[2] - sq[0]);
            for k in (a..b).step_by(((b - a) / 7).max(1) as usize) {
                let k = k as usize;
                let px = overview_pixels(&p, t, side, &cells, |i| {
                    if i == k {
                        [200, 10, 10, 255]
                    } else {
                        [0; 4]
                    }
                });
                let drawn: Vec<(usize, usize)> = (0..side * side)
                    .filter(|&q| px[4 * q + 3] > 0)
                    .map(|q| (q % side, q / side))
                    .collect();
                assert!(!drawn.is_empty() && drawn.len() <= 4, "tile {t} item {k}");
                let sx = (sorted[2 * k] as f64 - sq[0]) * scale;
                let sy = (sq[3] - sorted[2 * k + 1] as f64) * scale;
                for &(x, y) in &drawn {
                    assert!(
                        (x as f64 + 0.5 - sx).abs() <= 2.0,
                        "tile {t} item {k}: {x} vs {sx}"
                    );
                    assert!(
                        (y as f64 + 0.5 - sy).abs() <= 2.0,
                        "tile {t} item {k}: {y} vs {sy}"
                    );
                    assert_eq!(&px[4 * (y * side + x)..][..4], &[200, 10, 10, 179]);
                }
            }
        }
        // Drawn whole, a tile's marks count its items: a pixel's opacity says how many.
        let px = overview_pixels(&p, 0, side, &cells, |_| [9, 9, 9, 255]);
        assert!(
            px.chunks_exact(4).any(|q| q[3] == 255),
            "the dense clump saturates"
        );
        assert!(
            px.chunks_exact(4).any(|q| q[3] == 179),
            "the scatter has lone marks"
        );
    }

    #[test]
    fn marks_on_one_pixel_mix_their_colours_and_add_up_in_opacity() {
        // Three items on one point, red, red and blue: two thirds red, opacity 1 - 0.3^3.
        let xy = vec![1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 0.0, 0.0, 2.0, 2.0];
        let (p, order) = Pyramid::build(&xy, 10, 4);
        assert_eq!(order, [0, 1, 2, 3, 4]);
        let colours = [
            [255, 0, 0, 255],
            [255, 0, 0, 255],
            [0, 0, 255, 255],
            [9, 9, 9, 255],
            [9, 9, 9, 255],
        ];
        let c = cells(&p, &xy);
        let px = overview_pixels(&p, 0, 256, &c, |k| colours[k]);
        let mixed: Vec<&[u8]> = px.chunks_exact(4).filter(|q| q[3] == 248).collect();
        assert_eq!(mixed.len(), 4, "one 2 x 2 mark");
        assert!(mixed.iter().all(|q| q[..3] == [170, 0, 85]));
        // Left out: an item whose colour is transparent. The two left are in corners of the
        // square, their marks cut to two pixels each by its edges.
        let px = overview_pixels(&p, 0, 256, &c, |k| if k < 3 { [0; 4] } else { colours[k] });
        assert_eq!(px.chunks_exact(4).filter(|q| q[3] > 0).count(), 4);
    }
}
