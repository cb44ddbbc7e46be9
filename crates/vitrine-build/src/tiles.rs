//! A tiled atlas (format 3, `vitrine_format::tiles`) from an atlas held in memory: every
//! per-item array is cut by leaf of the similarity map's tile pyramid, each item gets its cell
//! within its leaf, and every tile an overview picture.
//!
//! The items must already be in the pyramid's leaf order ([`leaf_order`] gives it).

use std::collections::HashMap;

use anyhow::{bail, Context, Result};
use rayon::prelude::*;
use vitrine_format::pyramid::Pyramid;
use vitrine_format::tiles::{self, ChunkLayout, ChunkedArray, Tiles};
use vitrine_format::{ArrayRef, Manifest, TILED_FORMAT_VERSION};

/// Side of an overview picture in pixels.
pub const OVERVIEW_PX: u32 = 256;
/// The deepest level a pyramid goes to (a leaf there holds what falls in it, however many).
pub const MAX_LEVEL: u8 = 16;

/// The similarity map's pyramid over `xy` (x, y interleaved, in the current order) with leaves of
/// at most `capacity` items, and the order that puts the items in leaf order (`order[new] =
/// current`), keeping the current order within each leaf.
pub fn leaf_order(xy: &[f32], capacity: u64) -> (Pyramid, Vec<u32>) {
    Pyramid::build(xy, capacity, MAX_LEVEL)
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
    let cell_bytes = tiles::cells(&pyramid, &xy);
    let points: Vec<[f32; 2]> = xy.chunks_exact(2).map(|p| [p[0], p[1]]).collect();
    let spacing = vitrine_format::spacing::typical_spacing(&points).unwrap_or(0.0);
    drop((points, xy));

    tick("overview pictures");
    let overviews: Vec<Vec<u8>> = (0..pyramid.tiles.len())
        .into_par_iter()
        .map(|t| {
            let rgba =
                tiles::overview_pixels(&pyramid, t, OVERVIEW_PX as usize, &cell_bytes, |k| {
                    [colours[4 * k], colours[4 * k + 1], colours[4 * k + 2], 255]
                });
            png(&rgba).with_context(|| format!("encoding the overview of tile {t}"))
        })
        .collect::<Result<_>>()?;
    drop(colours);
    let (overview_sums, sums_bytes) = tiles::sums_of("tiles/overview.sums.bin", &overviews);
    let mut out: Vec<(String, Vec<u8>)> = Vec::new();
    out.push((overview_sums.file.clone(), sums_bytes));
    for (t, png) in overviews.into_iter().enumerate() {
        out.push((tiles::overview_file(t), png));
    }
    let (cells, cell_bytes) = ArrayRef::encode("arrays/cells.bin", &cell_bytes);
    held.insert(cells.file.clone(), cell_bytes);
    m.tiles = Some(Tiles {
        map: "similarity".into(),
        pyramid,
        overview_px: OVERVIEW_PX,
        overview_sums,
        spacing,
        cells,
        chunked: Vec::new(),
    });

    tick("arrays by tile");
    let mut chunked = Vec::new();
    // Offsets' whole arrays, kept until what they span is cut (offsets come first).
    let mut offsets_of: HashMap<String, Vec<u32>> = HashMap::new();
    for (r, layout) in tiles::per_item_arrays(m) {
        let whole = held
            .remove(&r.file)
            .with_context(|| format!("{} is declared but not written", r.file))?;
        let offsets = match &layout {
            ChunkLayout::Offsets => {
                offsets_of.insert(r.file.clone(), r.decode(&whole)?);
                None
            }
            ChunkLayout::Spans { offsets } => {
                Some(offsets_of.get(offsets).with_context(|| {
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
    if let Some(t) = &mut m.tiles {
        t.chunked = chunked;
    }
    Ok(())
}

/// RGBA pixels of an overview as PNG.
fn png(rgba: &[u8]) -> Result<Vec<u8>> {
    let mut png = Vec::new();
    let enc = image::codecs::png::PngEncoder::new_with_quality(
        &mut png,
        image::codecs::png::CompressionType::Fast,
        image::codecs::png::FilterType::Adaptive,
    );
    image::ImageEncoder::write_image(
        enc,
        rgba,
        OVERVIEW_PX,
        OVERVIEW_PX,
        image::ExtendedColorType::Rgba8,
    )?;
    Ok(png)
}
