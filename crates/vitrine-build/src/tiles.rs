//! A tiled atlas (format 3, `vitrine_format::tiles`) from an atlas held in memory: the per-item
//! arrays a view draws or a record card shows are cut by leaf of the similarity map's tile
//! pyramid, each item gets its cell within its leaf, and every tile an overview picture.
//!
//! The items must already be in the pyramid's leaf order ([`leaf_order`] gives it).

use std::collections::HashMap;

use anyhow::{bail, Context, Result};
use rayon::prelude::*;
use vitrine_format::pyramid::Pyramid;
use vitrine_format::tiles::{self, ChunkLayout, ChunkedArray, Tiles};
use vitrine_format::{ArrayRef, FieldKind, Manifest, TILED_FORMAT_VERSION};

/// Side of an overview picture in pixels.
pub const OVERVIEW_PX: u32 = 256;
/// Side of an item's mark in an overview picture, in its pixels.
pub const OVERVIEW_MARK_PX: u32 = 3;
/// The deepest level a pyramid goes to (a leaf there holds what falls in it, however many).
pub const MAX_LEVEL: u8 = 16;

/// The similarity map's pyramid over `xy` (x, y interleaved, in the current order) with leaves of
/// at most `capacity` items, and the order that puts the items in leaf order (`order[new] =
/// current`), keeping the current order within each leaf.
pub fn leaf_order(xy: &[f32], capacity: u64) -> (Pyramid, Vec<u32>) {
    Pyramid::build(xy, capacity, MAX_LEVEL)
}

/// The arrays a tiled atlas stores by leaf, with their layouts: the similarity map's positions,
/// the colours, the thumbnails' extents, pictures and image sizes, the ids, text and link fields
/// and every value as written.
fn chunked_arrays(m: &Manifest) -> Vec<(ArrayRef, ChunkLayout)> {
    let items = |per_item| ChunkLayout::Items { per_item };
    let text = |pair: [&ArrayRef; 2]| {
        [
            (pair[0].clone(), ChunkLayout::TextOffsets),
            (
                pair[1].clone(),
                ChunkLayout::TextBytes {
                    offsets: pair[0].file.clone(),
                },
            ),
        ]
    };
    let mut v = Vec::new();
    for map in m.maps.iter().filter(|p| p.name == "similarity") {
        v.push((map.positions.clone(), items(2)));
    }
    v.push((m.colours.clone(), items(4)));
    if let Some(s) = &m.sheets {
        v.push((s.extents.clone(), items(1)));
        v.extend(s.image_sizes.iter().map(|r| (r.clone(), items(2))));
        v.extend(s.pictures.iter().map(|r| (r.clone(), items(1))));
    }
    v.extend(text([&m.ids, &m.ids_text]));
    for f in &m.fields {
        if matches!(f.kind, FieldKind::Text | FieldKind::Link) {
            if let Some(bytes) = &f.column2 {
                v.extend(text([&f.column, bytes]));
            }
        }
        if let Some([o, b]) = &f.written {
            v.extend(text([o, b]));
        }
    }
    v
}

/// Makes the atlas `m` with array files `files` (items in `pyramid`'s leaf order) a tiled atlas:
/// the chunked arrays' whole files are replaced by their chunks and checksums, the cells and
/// overview pictures added, the manifest given its `tiles` and format version 3.
pub fn tile(
    m: &mut Manifest,
    files: &mut Vec<(String, Vec<u8>)>,
    pyramid: Pyramid,
    mut tick: impl FnMut(&str),
) -> Result<()> {
    let Some(sim) = m.maps.iter().find(|p| p.name == "similarity") else {
        bail!("a tiled atlas needs a similarity map");
    };
    let mut held: HashMap<String, Vec<u8>> = files.drain(..).collect();
    let bytes_of = |held: &HashMap<String, Vec<u8>>, r: &ArrayRef| -> Result<Vec<u8>> {
        held.get(&r.file)
            .cloned()
            .with_context(|| format!("{} is declared but not written", r.file))
    };
    let xy: Vec<f32> = sim.positions.decode(&bytes_of(&held, &sim.positions)?)?;
    pyramid
        .check(&xy)
        .map_err(|e| anyhow::anyhow!("the tile pyramid does not fit the map: {e}"))?;
    let runs: Vec<[u64; 2]> = pyramid.leaves().filter_map(|t| t.items).collect();
    let colours: Vec<u8> = m.colours.decode(&bytes_of(&held, &m.colours)?)?;

    tick("overview pictures");
    let overviews: Vec<Vec<u8>> = (0..pyramid.tiles.len())
        .into_par_iter()
        .map(|t| overview_png(&pyramid, t, &xy, &colours))
        .collect::<Result<_>>()?;
    let (overview_sums, sums_bytes) = tiles::sums_of("tiles/overview.sums.bin", &overviews);
    let mut out: Vec<(String, Vec<u8>)> = Vec::new();
    out.push((overview_sums.file.clone(), sums_bytes));
    for (t, png) in overviews.into_iter().enumerate() {
        out.push((tiles::overview_file(t), png));
    }
    let (cells, cell_bytes) = ArrayRef::encode("arrays/cells.bin", &tiles::cells(&pyramid, &xy));
    out.push((cells.file.clone(), cell_bytes));

    tick("arrays by tile");
    let mut chunked = Vec::new();
    // Text tables' whole offsets, kept until their bytes are cut (offsets come first).
    let mut text_offsets: HashMap<String, Vec<u32>> = HashMap::new();
    for (r, layout) in chunked_arrays(m) {
        let whole = held
            .remove(&r.file)
            .with_context(|| format!("{} is declared but not written", r.file))?;
        let offsets = match &layout {
            ChunkLayout::TextOffsets => {
                text_offsets.insert(r.file.clone(), r.decode(&whole)?);
                None
            }
            ChunkLayout::TextBytes { offsets } => {
                Some(text_offsets.get(offsets).with_context(|| {
                    format!("{} is cut by {offsets}, not cut before it", r.file)
                })?)
            }
            ChunkLayout::Items { .. } => None,
        };
        let parts = tiles::split(&r, &whole, &layout, &runs, offsets.map(|o| o.as_slice()))?;
        let (sums, sum_bytes) = tiles::sums_of(&tiles::sums_file(&r.file), &parts);
        out.push((sums.file.clone(), sum_bytes));
        for (leaf, part) in parts.into_iter().enumerate() {
            out.push((tiles::chunk_file(&r.file, leaf), part));
        }
        chunked.push(ChunkedArray {
            file: r.file.clone(),
            layout,
            sums,
        });
    }
    files.extend(held);
    files.extend(out);
    files.sort_by(|a, b| a.0.cmp(&b.0));
    m.format_version = TILED_FORMAT_VERSION;
    m.tiles = Some(Tiles {
        map: "similarity".into(),
        pyramid,
        overview_px: OVERVIEW_PX,
        overview_sums,
        cells,
        chunked,
    });
    Ok(())
}

/// Tile `t`'s overview picture as PNG: the marks of the items below it (in item order, later on
/// top), each a square of its colour, on a transparent ground; row 0 is the top of the square.
pub fn overview_png(p: &Pyramid, t: usize, xy: &[f32], colours: &[u8]) -> Result<Vec<u8>> {
    let rgba = overview_pixels(p, t, xy, colours);
    let mut png = Vec::new();
    let enc = image::codecs::png::PngEncoder::new_with_quality(
        &mut png,
        image::codecs::png::CompressionType::Fast,
        image::codecs::png::FilterType::Adaptive,
    );
    image::ImageEncoder::write_image(
        enc,
        &rgba,
        OVERVIEW_PX,
        OVERVIEW_PX,
        image::ExtendedColorType::Rgba8,
    )
    .with_context(|| format!("encoding the overview of tile {t}"))?;
    Ok(png)
}

/// Tile `t`'s overview as RGBA pixels (see [`overview_png`]).
pub fn overview_pixels(p: &Pyramid, t: usize, xy: &[f32], colours: &[u8]) -> Vec<u8> {
    let side = OVERVIEW_PX as usize;
    let mut px = vec![0u8; side * side * 4];
    let [x0, _, x1, y1] = p.square(&p.tiles[t]);
    let scale = side as f64 / (x1 - x0);
    let mark = OVERVIEW_MARK_PX as f64;
    let [a, b] = p.run(t);
    for k in a as usize..b as usize {
        let sx = (xy[2 * k] as f64 - x0) * scale;
        let sy = (y1 - xy[2 * k + 1] as f64) * scale;
        let c0 = (sx - mark / 2.0).round().clamp(0.0, side as f64) as usize;
        let r0 = (sy - mark / 2.0).round().clamp(0.0, side as f64) as usize;
        let (c1, r1) = (
            (c0 + mark as usize).min(side),
            (r0 + mark as usize).min(side),
        );
        let c = [colours[4 * k], colours[4 * k + 1], colours[4 * k + 2], 255];
        for r in r0..r1 {
            for q in px[(r * side + c0) * 4..(r * side + c1) * 4].chunks_exact_mut(4) {
                q.copy_from_slice(&c);
            }
        }
    }
    px
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_overview_shows_each_item_where_it_lies_in_its_colour() {
        // Four items in the corners of the map and one in the middle, one leaf each at level 1
        // but the middle one; the root's overview has a mark near each corner.
        let xy = vec![0.0, 0.0, 10.0, 0.0, 0.0, 10.0, 10.0, 10.0, 5.2, 5.2];
        let (p, order) = Pyramid::build(&xy, 1, 4);
        let sorted: Vec<f32> = order
            .iter()
            .flat_map(|&i| [xy[2 * i as usize], xy[2 * i as usize + 1]])
            .collect();
        let colours: Vec<u8> = order
            .iter()
            .flat_map(|&i| [40 * i as u8, 0, 0, 255])
            .collect();
        let px = overview_pixels(&p, 0, &sorted, &colours);
        let side = OVERVIEW_PX as usize;
        let at = |x: usize, y: usize| &px[(y * side + x) * 4..(y * side + x) * 4 + 4];
        // Item 0 at the lower-left corner: the picture's bottom-left; item 3 upper-right: top-right.
        assert_eq!(at(0, side - 1), &[0, 0, 0, 255]);
        assert_eq!(at(side - 1, 0)[..2], [120, 0]);
        assert_eq!(at(0, 0)[0], 80);
        assert_eq!(at(side - 1, side - 1)[0], 40);
        // The middle item near the centre; empty ground is transparent.
        let c = (5.2 / p.side as f64 * side as f64) as usize;
        assert_eq!(at(c, side - 1 - c)[0], 160);
        assert_eq!(at(side / 4, side / 4)[3], 0);
        // A leaf's picture holds only its own item: the middle one's, a whole mark.
        let k = order.iter().position(|&i| i == 4).unwrap() as u64;
        let leaf = (0..p.tiles.len())
            .find(|&t| p.tiles[t].items.is_some_and(|[a, b]| a <= k && k < b))
            .unwrap();
        let lp = overview_pixels(&p, leaf, &sorted, &colours);
        assert_eq!(lp.chunks_exact(4).filter(|q| q[3] == 255).count(), 9);
    }
}
