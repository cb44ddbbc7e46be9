//! The corpus tray's grid of pictures: which tiles a scrolled grid shows (only those, however
//! large the corpus: the grid is virtual) and where each picture sits in its thumbnail sheet, so
//! that the page shows it as a part of the sheet image. Plain Rust, no DOM.

use crate::raster::SheetStore;

/// Tile pitch (picture plus gap) in CSS pixels, and the picture's box inside it.
pub const PITCH: f64 = 58.0;
pub const TILE: f64 = 54.0;

/// The tiles a grid of `n` items in `cols` columns shows when scrolled to `scroll_top` with a
/// window `view_h` high (CSS pixels): whole rows, plus one row either side so that a scroll
/// shows no gap before the next redraw.
pub fn visible(n: usize, cols: usize, scroll_top: f64, view_h: f64) -> std::ops::Range<usize> {
    let cols = cols.max(1);
    let rows = n.div_ceil(cols);
    let first = ((scroll_top / PITCH).floor().max(0.0) as usize).saturating_sub(1);
    let last = (((scroll_top + view_h) / PITCH).ceil().max(0.0) as usize + 1).min(rows);
    (first * cols).min(n)..(last * cols).min(n)
}

/// Columns that fit in `width` CSS pixels (at least one).
pub fn columns(width: f64) -> usize {
    ((width / PITCH).floor() as usize).max(1)
}

/// A picture as part of a sheet image: the sheet's file, the size to draw the whole sheet at, and
/// the picture's place and size at that scale (CSS pixels), centred in a [`TILE`] box.
#[derive(Debug, Clone, PartialEq)]
pub struct Sprite {
    pub url: String,
    /// Width of the whole sheet drawn at the picture's scale (its height follows the image's).
    pub sheet_w: f64,
    /// Where the picture's top-left corner is in the scaled sheet.
    pub at: [f64; 2],
    pub size: [f64; 2],
    /// Offset of the picture inside the tile box (centred).
    pub offset: [f64; 2],
}

/// Where item `item` (picture `extent`, as the atlas gives it) is in the sheets, for a tile of
/// [`TILE`] CSS pixels on a screen of `dpr` device pixels per CSS pixel: from the smallest level
/// whose cells hold at least that many pixels (else the largest). None when the atlas has no
/// sheets or the item no picture.
pub fn sprite(sheets: &SheetStore, item: usize, extent: (u16, u16), dpr: f64) -> Option<Sprite> {
    if sheets.levels.is_empty() || extent.0 == 0 || extent.1 == 0 {
        return None;
    }
    let need = TILE * dpr.max(1.0);
    let level = (0..sheets.levels.len())
        .find(|&l| sheets.levels[l].cell as f64 >= need)
        .unwrap_or(sheets.levels.len() - 1);
    let lev = &sheets.levels[level];
    let sheet = sheets.sheet_of(level, item);
    let url = lev.files.get(sheet)?.clone();
    let [x, y, w, h] = sheets.cell(level, item, extent);
    let scale = TILE / w.max(h) as f64;
    let size = [w as f64 * scale, h as f64 * scale];
    Some(Sprite {
        url,
        sheet_w: (lev.columns * lev.cell) as f64 * scale,
        at: [x as f64 * scale, y as f64 * scale],
        size,
        offset: [(TILE - size[0]) / 2.0, (TILE - size[1]) / 2.0],
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::raster::SheetLevel;

    fn store() -> SheetStore {
        let level = |cell: u32, columns: u32, sheets: usize| SheetLevel {
            cell,
            columns,
            rows: columns,
            files: (0..sheets)
                .map(|k| format!("sheets/L{cell}-{k:05}.jpg"))
                .collect(),
            loaded: (0..sheets).map(|_| None).collect(),
        };
        SheetStore::new(vec![level(128, 16, 4), level(32, 64, 1)])
    }

    #[test]
    fn only_the_rows_in_view_and_one_either_side_are_made() {
        // 1,000 items in 4 columns (250 rows), a window of three rows.
        assert_eq!(visible(1000, 4, 0.0, 3.0 * PITCH), 0..16);
        let r = visible(1000, 4, 100.0 * PITCH, 3.0 * PITCH);
        assert_eq!(r, 99 * 4..104 * 4);
        // The end of the grid: the last row is partly filled.
        assert_eq!(visible(1001, 4, 249.0 * PITCH, 3.0 * PITCH), 248 * 4..1001);
        assert_eq!(visible(0, 4, 0.0, 200.0), 0..0);
        // A million items still make a handful of tiles.
        assert!(visible(1_000_000, 4, 12345.0 * PITCH, 3.0 * PITCH).len() <= 6 * 4);
        assert_eq!(columns(4.0 * PITCH + 10.0), 4);
        assert_eq!(columns(10.0), 1);
    }

    #[test]
    fn a_picture_is_the_right_part_of_the_right_sheet() {
        let s = store();
        // Item 300 on the 128 px level: sheet 1 (256 per sheet), slot 44 = column 12, row 2.
        // Extent 200 x 100 of the largest cell (128): the picture fills 128 x 64 of its cell.
        let p = sprite(&s, 300, (128, 64), 1.0).unwrap();
        assert_eq!(p.url, "sheets/L128-00001.jpg");
        let k = TILE / 128.0;
        assert_eq!(p.sheet_w, 16.0 * 128.0 * k);
        assert_eq!(p.at, [12.0 * 128.0 * k, 2.0 * 128.0 * k]);
        assert_eq!(p.size, [TILE, 64.0 * k]);
        assert_eq!(p.offset, [0.0, (TILE - 64.0 * k) / 2.0]);
        // A tall picture is centred across.
        let q = sprite(&s, 0, (32, 128), 1.0).unwrap();
        assert_eq!(q.size, [32.0 * k, TILE]);
        assert_eq!(q.offset[1], 0.0);
        // No picture, no sprite.
        assert!(sprite(&s, 0, (0, 0), 1.0).is_none());
    }

    #[test]
    fn the_level_is_the_smallest_sharp_enough_for_the_screen() {
        let level = |cell: u32| SheetLevel {
            cell,
            columns: 8,
            rows: 8,
            files: vec![format!("sheets/L{cell}-00000.jpg")],
            loaded: vec![None],
        };
        let s = SheetStore::new(vec![level(32), level(64), level(256)]);
        assert!(sprite(&s, 0, (256, 256), 1.0).unwrap().url.contains("L64-"));
        // Twice as many device pixels: the next level up.
        assert!(sprite(&s, 0, (256, 256), 2.0)
            .unwrap()
            .url
            .contains("L256-"));
        // None large enough: the largest.
        assert!(sprite(&s, 0, (256, 256), 8.0)
            .unwrap()
            .url
            .contains("L256-"));
    }
}
