//! The frame, drawn on the CPU into one RGBA buffer: on software WebGL one texture upload of the
//! finished frame costs far less than drawing items one by one on the GPU.
//!
//! Level of detail: when an item's square on screen is smaller than [`THUMB_MIN_PX`] it is a mark in
//! its average colour; larger, it is its thumbnail from the smallest sheet level at least that size
//! (or the best level already loaded, while the right one is fetched).

use crate::atlas::AtlasData;
use crate::camera::Camera;
use std::collections::BTreeSet;

pub const THUMB_MIN_PX: f64 = 9.0;
/// Thumbnails up to this size fade in from their mark's flat colour (the handover from marks to
/// pictures is gradual as one zooms in, not a jump).
pub const THUMB_FADE_PX: f64 = 16.0;

/// The picture's weight out of 256 for thumbnails `side` pixels wide: none while they fade in.
fn fade_weight(side: f64) -> Option<u32> {
    (side < THUMB_FADE_PX).then(|| {
        let t = ((side - THUMB_MIN_PX) / (THUMB_FADE_PX - THUMB_MIN_PX)).clamp(0.0, 1.0);
        // From a third of the picture at the threshold (a mark's colour with a hint of its image).
        (85.0 + t * 171.0) as u32
    })
}

fn rgb(c: [u8; 4]) -> [u8; 3] {
    [c[0], c[1], c[2]]
}

#[derive(Debug, Clone, Copy)]
pub struct Theme {
    pub paper: [u8; 3],
    pub ink: [u8; 3],
    pub accent: [u8; 3],
}

/// The default look: warm paper, dark ink, one accent.
pub const READING_ROOM: Theme = Theme {
    paper: vitrine_format::palette::PAPER,
    ink: vitrine_format::palette::INK,
    accent: vitrine_format::palette::ACCENT,
};

/// A neutral grey surround for judging the colour of pictures: ISO 3664 (viewing conditions for
/// graphic technology and photography) asks for a neutral, matt grey surround; the value used
/// here, about 20 % luminous reflectance (sRGB 124), is taken from memory of that standard. Ink
/// and accent are neutral too (the accent nearly white), so that nothing around the pictures has
/// a hue; ink on this grey is 4.7:1, the accent 3.7:1.
pub const NEUTRAL_GREY: Theme = Theme {
    paper: vitrine_format::palette::GREY_SURROUND,
    ink: [0x0A, 0x0A, 0x0A],
    accent: [0xF5, 0xF5, 0xF5],
};

/// A decoded sheet: RGB pixels.
pub struct Sheet {
    pub width: u32,
    pub height: u32,
    pub rgb: Vec<u8>,
}

pub struct SheetLevel {
    pub cell: u32,
    pub columns: u32,
    pub rows: u32,
    pub files: Vec<String>,
    pub loaded: Vec<Option<Sheet>>,
}

#[derive(Default)]
pub struct SheetStore {
    /// Smallest cell first.
    pub levels: Vec<SheetLevel>,
    /// Per level and sheet: the last frame that drew from it (for least-recently-used eviction).
    last_used: Vec<Vec<u64>>,
    /// Bytes of decoded sheets held, and the most to hold before evicting.
    pub bytes: usize,
    pub budget: usize,
    /// Sheets evicted so far (a sheet fetched again after eviction costs a second download).
    pub evicted: usize,
    /// Changes with every [`SheetStore::insert`] (which may also evict): kept thumbnails drawn
    /// from another generation are stale.
    pub generation: u64,
    /// Each item's sheet cell when items share pictures (a tiled atlas's `pictures`, filled as
    /// its tiles arrive); empty: item i is in cell i.
    pub pictures: Vec<u32>,
}

/// Decoded sheets held at most, in bytes, unless the current frame draws from more.
pub const SHEET_BUDGET: usize = 512 << 20;

impl SheetStore {
    pub fn from_manifest(m: &vitrine_format::Manifest) -> SheetStore {
        let levels: Vec<SheetLevel> = m
            .sheets
            .iter()
            .flat_map(|s| s.levels.iter())
            .map(|l| SheetLevel {
                cell: l.cell,
                columns: l.columns,
                rows: l.rows,
                files: l.files.clone(),
                loaded: l.files.iter().map(|_| None).collect(),
            })
            .collect();
        SheetStore::new(levels)
    }

    pub fn new(mut levels: Vec<SheetLevel>) -> SheetStore {
        levels.sort_by_key(|l| l.cell);
        let last_used = levels.iter().map(|l| vec![0; l.files.len()]).collect();
        SheetStore {
            levels,
            last_used,
            bytes: 0,
            budget: SHEET_BUDGET,
            evicted: 0,
            generation: 0,
            pictures: Vec::new(),
        }
    }

    /// Notes that frame `frame` drew from these sheets.
    pub fn touch(&mut self, used: &[(usize, usize)], frame: u64) {
        for &(l, s) in used {
            self.last_used[l][s] = frame;
        }
    }

    /// Keeps a fetched sheet, used in frame `frame`, then evicts the least recently used sheets
    /// (never one used in `frame`) while more than the budget is held.
    pub fn insert(&mut self, level: usize, index: usize, sheet: Sheet, frame: u64) {
        let size = sheet.rgb.len();
        self.generation += 1;
        if let Some(old) = self.levels[level].loaded[index].replace(sheet) {
            self.bytes -= old.rgb.len();
        }
        self.bytes += size;
        self.last_used[level][index] = frame;
        while self.bytes > self.budget {
            let oldest = (0..self.levels.len())
                .flat_map(|l| (0..self.levels[l].loaded.len()).map(move |s| (l, s)))
                .filter(|&(l, s)| {
                    self.levels[l].loaded[s].is_some() && self.last_used[l][s] < frame
                })
                .min_by_key(|&(l, s)| (self.last_used[l][s], std::cmp::Reverse(l)));
            let Some((l, s)) = oldest else { break };
            let gone = self.levels[l].loaded[s].take().expect("a loaded sheet");
            self.bytes -= gone.rgb.len();
            self.evicted += 1;
        }
    }
    pub fn largest_cell(&self) -> u32 {
        self.levels.last().map_or(0, |l| l.cell)
    }
    /// The cell holding item `item`'s picture (at every level).
    pub fn slot_of(&self, item: usize) -> usize {
        self.pictures.get(item).map_or(item, |&p| p as usize)
    }
    pub fn sheet_of(&self, level: usize, item: usize) -> usize {
        let l = &self.levels[level];
        self.slot_of(item) / (l.columns * l.rows) as usize
    }
    /// Where item `item`'s thumbnail lies in its sheet at `level`: [x, y, width, height] in pixels, from
    /// its extent in the largest cell (thumbnails sit at the top left of their cells).
    pub fn cell(&self, level: usize, item: usize, extent: (u16, u16)) -> [u32; 4] {
        let lev = &self.levels[level];
        let per = (lev.columns * lev.rows) as usize;
        let slot = (self.slot_of(item) % per) as u32;
        let big = self.largest_cell().max(1) as f64;
        let scale = |e: u16| ((e as f64 / big * lev.cell as f64).round() as u32).clamp(1, lev.cell);
        [
            (slot % lev.columns) * lev.cell,
            (slot / lev.columns) * lev.cell,
            scale(extent.0),
            scale(extent.1),
        ]
    }

    /// The level that suits a thumbnail `side_px` wide: the smallest whose cell is at least that size.
    pub fn level_for(&self, side_px: f64) -> Option<usize> {
        if self.levels.is_empty() {
            return None;
        }
        Some(
            self.levels
                .iter()
                .position(|l| l.cell as f64 >= side_px)
                .unwrap_or(self.levels.len() - 1),
        )
    }
}

#[derive(Debug, Default, Clone, PartialEq)]
pub struct FrameStats {
    /// Items the frame looked at (all of them zoomed out; those near the screen zoomed in).
    pub visited: usize,
    pub marks: usize,
    pub thumbnails: usize,
    /// (level, sheet) pairs that visible items want but are not loaded, smallest level first (a
    /// coarse picture everywhere before sharp ones).
    pub wanted: Vec<(usize, usize)>,
    /// (level, sheet) pairs the frame drew from.
    pub used: Vec<(usize, usize)>,
    pub side_px: f64,
}

/// How each item is drawn while a selection or filters are shown.
pub struct Tones {
    /// Per item: its mark colour, already mixed towards the paper when dimmed; alpha 0 means the
    /// item is not drawn.
    pub colours: Vec<[u8; 4]>,
    /// Per item: the weight of its own picture out of 256 (the rest is paper); 0 = not drawn.
    pub weight: Vec<u16>,
}

pub struct Scene<'a> {
    pub atlas: &'a AtlasData,
    /// Dimmed and hidden items (None: every item drawn in full).
    pub tones: Option<&'a Tones>,
    /// The current map's grid: with it, a zoomed-in frame visits only the items near the screen.
    pub grid: Option<&'a crate::grid::Grid>,
    pub sheets: &'a SheetStore,
    pub camera: &'a Camera,
    pub hover: Option<usize>,
    pub open: Option<usize>,
    pub theme: Theme,
}

impl Scene<'_> {
    /// The mark colour of every item as this frame draws it.
    pub fn mark_colours(&self) -> &[[u8; 4]] {
        match self.tones {
            Some(t) => &t.colours,
            None => &self.atlas.colours,
        }
    }

    /// The side of an item's square on screen, in pixels.
    pub fn side_px(&self) -> f64 {
        self.atlas.spacing * self.camera.zoom * 0.92
    }

    /// The screen rectangle of item `i`: [x0, y0, x1, y1].
    pub fn item_rect(&self, i: usize) -> [f64; 4] {
        let side = self.side_px();
        let s = self.camera.to_screen(self.atlas.positions[i]);
        let (w, h) = if side >= THUMB_MIN_PX && !self.sheets.levels.is_empty() {
            let (ew, eh) = self.atlas.extents[i];
            let big = self.sheets.largest_cell().max(1) as f64;
            (
                (ew as f64 / big * side).max(1.0),
                (eh as f64 / big * side).max(1.0),
            )
        } else {
            let m = mark_side(side);
            (m, m)
        };
        [
            s[0] - w / 2.0,
            s[1] - h / 2.0,
            s[0] + w / 2.0,
            s[1] + h / 2.0,
        ]
    }
}

/// The side of a mark on screen for items `side` pixels apart: small, but never under 3 px.
fn mark_side(side: f64) -> f64 {
    (side * 0.9).clamp(3.0, 7.0)
}

/// A rectangle edge as a pixel index, clamped at 0: the nearest pixel boundary, as `round` then
/// the clamp gives, after the edge is first put on a grid of 1/1024 pixel. The grid makes the edge
/// of a mark moved by a whole-pixel pan (computed in floating point, so off by a rounding error)
/// land on the same pixel as the edge it was before, plus the pan: a map whose fit puts an edge
/// exactly on a half pixel would otherwise round one way in a kept layer and the other in a full
/// draw. Integer arithmetic (truncation equals `floor` here, as negatives clamp to 0 anyway), one
/// instruction each where `floor` and `round` may be calls.
#[inline]
fn px(x: f64) -> usize {
    // `as` truncates towards zero and saturates: negatives and NaN give 0.
    let grid = (x.min(1e12) * 1024.0 + 0.5) as u64;
    ((grid + 512) / 1024) as usize
}

fn fill_rect(buf: &mut [u8], w: usize, h: usize, r: [f64; 4], c: [u8; 3]) {
    fill_rect_in(buf, w, [0, 0, w, h], r, c);
}

/// Fills the pixels of `r` inside `clip` ([x0, y0, x1, y1] in pixels) of a buffer `w` wide.
fn fill_rect_in(buf: &mut [u8], w: usize, clip: [usize; 4], r: [f64; 4], c: [u8; 3]) {
    let x0 = px(r[0]).clamp(clip[0], clip[2]);
    let y0 = px(r[1]).clamp(clip[1], clip[3]);
    let x1 = px(r[2]).clamp(x0, clip[2]);
    let y1 = px(r[3]).clamp(y0, clip[3]);
    for y in y0..y1 {
        let row = &mut buf[(y * w + x0) * 4..(y * w + x1) * 4];
        for px in row.chunks_exact_mut(4) {
            px[0] = c[0];
            px[1] = c[1];
            px[2] = c[2];
            px[3] = 255;
        }
    }
}

fn outline(buf: &mut [u8], w: usize, h: usize, r: [f64; 4], c: [u8; 3], t: f64) {
    fill_rect(buf, w, h, [r[0] - t, r[1] - t, r[2] + t, r[1]], c);
    fill_rect(buf, w, h, [r[0] - t, r[3], r[2] + t, r[3] + t], c);
    fill_rect(buf, w, h, [r[0] - t, r[1], r[0], r[3]], c);
    fill_rect(buf, w, h, [r[2], r[1], r[2] + t, r[3]], c);
}

/// Copies the item's cell from a sheet into the part of `r` inside `clip`, sampling the nearest source pixel; with `fade`
/// (a colour and a weight out of 256 for the picture) it is mixed with that flat colour.
#[allow(clippy::too_many_arguments)]
fn blit(
    buf: &mut [u8],
    w: usize,
    clip: [usize; 4],
    r: [f64; 4],
    sheet: &Sheet,
    cell: [u32; 4],
    fade: Option<([u8; 3], u32)>,
) {
    let (dw, dh) = (r[2] - r[0], r[3] - r[1]);
    let x0 = px(r[0]).max(clip[0]);
    let y0 = px(r[1]).max(clip[1]);
    let x1 = px(r[2]).min(clip[2]);
    let y1 = px(r[3]).min(clip[3]);
    if x0 >= x1 || y0 >= y1 {
        return;
    }
    let [cx, cy, cw, ch] = cell;
    let sw = sheet.width as usize;
    // The source column of every destination column, worked out once for all rows.
    let columns: Vec<usize> = (x0..x1)
        .map(|x| {
            ((((x as f64 + 0.5 - r[0]) / dw * cw as f64) as u32).min(cw.saturating_sub(1)) + cx)
                as usize
                * 3
        })
        .collect();
    for y in y0..y1 {
        let v = (((y as f64 + 0.5 - r[1]) / dh * ch as f64) as u32).min(ch.saturating_sub(1)) + cy;
        if v >= sheet.height {
            continue;
        }
        let src = &sheet.rgb[v as usize * sw * 3..(v as usize + 1) * sw * 3];
        let dst = &mut buf[(y * w + x0) * 4..(y * w + x1) * 4];
        match fade {
            None => {
                for (d, &s) in dst.chunks_exact_mut(4).zip(&columns) {
                    d.copy_from_slice(&[src[s], src[s + 1], src[s + 2], 255]);
                }
            }
            Some((c, t)) => {
                for (d, &s) in dst.chunks_exact_mut(4).zip(&columns) {
                    for k in 0..3 {
                        let mixed = src[s + k] as u32 * t + c[k] as u32 * (256 - t);
                        d[k] = ((mixed + 128) >> 8) as u8;
                    }
                    d[3] = 255;
                }
            }
        }
    }
}

/// Draws `items` as marks: squares of side 2 x `reach` in their average colours, in the order given.
/// Written for speed (a zoomed-out frame may hold a million marks): one row of a square is one
/// slice fill of 32-bit pixels; the pixels are those `fill_rect` would set.
#[allow(clippy::too_many_arguments)]
fn draw_marks<I: Iterator<Item = usize>>(
    buf: &mut [u8],
    w: usize,
    clip: [usize; 4],
    atlas: &AtlasData,
    colours: &[[u8; 4]],
    cam: &Camera,
    reach: f64,
    items: I,
    stats: &mut FrameStats,
    mut spots: Option<&mut Vec<Spot>>,
) {
    let [cx0, cy0, cx1, cy1] = clip.map(|v| v as f64);
    let outside = |sx: f64, sy: f64| {
        sx < cx0 - reach || sy < cy0 - reach || sx > cx1 + reach || sy > cy1 + reach
    };
    let px_buf = match bytemuck::try_cast_slice_mut::<u8, u32>(buf) {
        Ok(px) => px,
        Err(_) => {
            // A buffer not aligned to 4 bytes (never seen): drawn in an aligned copy.
            let mut copy: Vec<u32> = bytemuck::pod_collect_to_vec(buf);
            let copy_bytes: &mut [u8] = bytemuck::cast_slice_mut(&mut copy);
            draw_marks(
                copy_bytes, w, clip, atlas, colours, cam, reach, items, stats, spots,
            );
            buf.copy_from_slice(copy_bytes);
            return;
        }
    };
    for i in items {
        stats.visited += 1;
        let [sx, sy] = cam.to_screen(atlas.positions[i]);
        if outside(sx, sy) {
            if let Some(v) = spots.as_deref_mut() {
                v.push(Spot::OFF);
            }
            continue;
        }
        let x0 = px(sx - reach).clamp(clip[0], clip[2]);
        let x1 = px(sx + reach).clamp(x0, clip[2]);
        let y0 = px(sy - reach).clamp(clip[1], clip[3]);
        let y1 = px(sy + reach).clamp(y0, clip[3]);
        if let Some(v) = spots.as_deref_mut() {
            v.push(Spot {
                at: (y0 * w + x0) as u32,
                w: (x1 - x0) as u16,
                h: (y1 - y0) as u16,
            });
        }
        let c = colours[i];
        if c[3] == 0 {
            continue;
        }
        let c = u32::from_le_bytes([c[0], c[1], c[2], 255]);
        for y in y0..y1 {
            px_buf[y * w + x0..y * w + x1].fill(c);
        }
        stats.marks += 1;
    }
}

/// `draw_marks` over the items a grid query found (`culled`), or over every item.
#[allow(clippy::too_many_arguments)]
fn draw_marks_of(
    buf: &mut [u8],
    w: usize,
    clip: [usize; 4],
    scene: &Scene,
    cam: &Camera,
    reach: f64,
    culled: Option<&[u32]>,
    stats: &mut FrameStats,
) {
    let (atlas, colours) = (scene.atlas, scene.mark_colours());
    match culled {
        Some(near) => {
            let items = near.iter().map(|&i| i as usize);
            draw_marks(buf, w, clip, atlas, colours, cam, reach, items, stats, None)
        }
        None => {
            let items = 0..atlas.n;
            draw_marks(buf, w, clip, atlas, colours, cam, reach, items, stats, None)
        }
    }
}

/// The items of the last frame (marks, or thumbnails when zoomed in), kept so that the next frame
/// need not draw them again: a frame with the same camera reuses them whole, a pan by whole pixels
/// moves them and draws only the strips that came into view. The open and hovered items and their
/// outlines are drawn over a copy, never into the layer. The pixels are those a full `draw` gives.
/// Where one item's mark went in a full pass: the offset of its top-left pixel and its size in
/// pixels (which clipping at an edge may make 0); [`Spot::OFF`] when it was not on screen.
#[derive(Clone, Copy)]
struct Spot {
    at: u32,
    w: u16,
    h: u16,
}

impl Spot {
    const OFF: Spot = Spot {
        at: u32::MAX,
        w: 0,
        h: 0,
    };
}

/// What a kept layer was drawn from, as the caller names it: `places` changes when the items'
/// positions do (another map), `looks` when only how they are drawn does (colours, dimming).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub struct LayerKey {
    pub places: u64,
    pub looks: u64,
}

#[derive(Default)]
pub struct MarkLayer {
    pixels: Vec<u8>,
    size: (usize, usize),
    camera: Option<Camera>,
    /// What the items were drawn from (the caller's key; and the sheets' generation when
    /// thumbnails are drawn): another value means the layer must be drawn afresh.
    key: (LayerKey, u64),
    /// Every item's mark in the last full pass over all items, for the camera, size, positions
    /// and mark size it was made with: when only the looks change (a filter, a lasso), the
    /// marks are filled in again at these places without placing them anew.
    spots: Vec<Spot>,
    spots_for: Option<(Camera, (usize, usize), u64, u64)>,
    /// Whether the last frame filled the marks in at noted spots.
    spots_reused: bool,
    marks: usize,
    /// Whether the last frame drew the whole layer afresh.
    last_full: bool,
}

impl MarkLayer {
    /// Whether the last frame drew every pixel afresh (rather than reusing or moving the layer).
    pub fn last_full(&self) -> bool {
        self.last_full
    }

    /// Whether the last frame drew the marks at the places noted by an earlier one (the same
    /// view with other colours or dimming).
    pub fn spots_reused(&self) -> bool {
        self.spots_reused
    }
}

/// The items near map rectangle `r` when the grid says they are few (under half of all), in item
/// order, into `near`; false when a pass over every item is the cheaper way.
fn near_items(scene: &Scene, r: [f64; 4], near: &mut Vec<u32>) -> bool {
    scene.grid.is_some_and(|g| {
        g.coverage(r) < 0.5 && {
            g.query(r, near);
            true
        }
    })
}

/// The screen shift from camera `a` to camera `b` (same zoom and size) when it is a whole number of
/// pixels smaller than the screen.
fn whole_pixel_shift(a: &Camera, b: &Camera) -> Option<(i64, i64)> {
    if a.zoom != b.zoom || a.size != b.size {
        return None;
    }
    let dx = (a.centre[0] - b.centre[0]) * a.zoom;
    let dy = (b.centre[1] - a.centre[1]) * a.zoom;
    let (rx, ry) = (dx.round(), dy.round());
    ((dx - rx).abs() < 1e-6
        && (dy - ry).abs() < 1e-6
        && rx.abs() < a.size[0]
        && ry.abs() < a.size[1])
        .then_some((rx as i64, ry as i64))
}

/// Moves the pixels of an RGBA buffer `w` x `h` by (dx, dy); what comes into view is left as it was.
fn shift_pixels(buf: &mut [u8], w: usize, h: usize, dx: i64, dy: i64) {
    let row = w * 4;
    let (ax, ay) = (dx.unsigned_abs() as usize, dy.unsigned_abs() as usize);
    if dy > 0 {
        buf.copy_within(0..(h - ay) * row, ay * row);
    } else if dy < 0 {
        buf.copy_within(ay * row..h * row, 0);
    }
    if ax > 0 {
        for y in 0..h {
            let r = &mut buf[y * row..(y + 1) * row];
            if dx > 0 {
                r.copy_within(0..(w - ax) * 4, ax * 4);
            } else {
                r.copy_within(ax * 4..w * 4, 0);
            }
        }
    }
}

/// Fills every item's mark at its noted spot, in item order (the pixels and the count
/// `draw_marks` gives for the same camera); false, drawing nothing, when the buffer is not
/// aligned for 32-bit pixels (the caller then draws the usual way).
fn fill_spots(
    buf: &mut [u8],
    w: usize,
    spots: &[Spot],
    colours: &[[u8; 4]],
    stats: &mut FrameStats,
) -> bool {
    let Ok(px) = bytemuck::try_cast_slice_mut::<u8, u32>(buf) else {
        return false;
    };
    for (s, c) in spots.iter().zip(colours) {
        stats.visited += 1;
        if s.at == u32::MAX || c[3] == 0 {
            continue;
        }
        let c = u32::from_le_bytes([c[0], c[1], c[2], 255]);
        let mut o = s.at as usize;
        for _ in 0..s.h {
            px[o..o + s.w as usize].fill(c);
            o += w;
        }
        stats.marks += 1;
    }
    true
}

/// Draws the scene as `draw` does, keeping the drawn items in `layer` between frames (`key` names
/// what they come from: change it when the map or the data change).
pub fn draw_with_layer(
    scene: &Scene,
    layer: &mut MarkLayer,
    key: LayerKey,
    buf: &mut [u8],
    w: usize,
    h: usize,
) -> FrameStats {
    let side = scene.side_px();
    let level = thumbnail_level(scene, side);
    let atlas = scene.atlas;
    let cam = *scene.camera;
    let reach = mark_side(side) / 2.0;
    let key = (key, level.map_or(0, |_| scene.sheets.generation + 1));
    let mut stats = FrameStats {
        side_px: side,
        ..Default::default()
    };
    let paper = scene.theme.paper;
    let paper = u32::from_le_bytes([paper[0], paper[1], paper[2], 255]);
    let reuse = match layer.camera {
        Some(old) if layer.key == key && layer.size == (w, h) => whole_pixel_shift(&old, &cam),
        _ => None,
    };
    // The regions to draw afresh: everything, or the strips a pan brought into view.
    let strips: Vec<[usize; 4]> = match reuse {
        None => {
            layer.pixels.resize(w * h * 4, 0);
            vec![[0, 0, w, h]]
        }
        Some((dx, dy)) => {
            shift_pixels(&mut layer.pixels, w, h, dx, dy);
            let (ax, ay) = (dx.unsigned_abs() as usize, dy.unsigned_abs() as usize);
            let mut v = Vec::new();
            // Rows first (whole width), then columns over the remaining rows.
            let (ry0, ry1) = if dy > 0 { (0, ay) } else { (h - ay, h) };
            if ay > 0 {
                v.push([0, ry0, w, ry1]);
            }
            let (rows0, rows1) = if dy > 0 { (ay, h) } else { (0, h - ay) };
            if ax > 0 {
                let (cx0, cx1) = if dx > 0 { (0, ax) } else { (w - ax, w) };
                v.push([cx0, rows0, cx1, rows1]);
            }
            v
        }
    };
    let full = strips.len() == 1 && strips[0] == [0, 0, w, h];
    // How far beyond a strip an item may sit and still reach into it, in pixels.
    let m = match level {
        Some(_) => side.max(8.0) + side,
        None => reach + 1.0,
    };
    let mut near = Vec::new();
    let mut reused = false;
    // What a full thumbnail pass notes (the frame's counts and sheets).
    let mut whole = (FrameStats::default(), BTreeSet::new(), BTreeSet::new());
    for clip in strips {
        if clip[0] >= clip[2] || clip[1] >= clip[3] {
            continue;
        }
        if let Ok(px) = bytemuck::try_cast_slice_mut::<u8, u32>(&mut layer.pixels) {
            for y in clip[1]..clip[3] {
                px[y * w + clip[0]..y * w + clip[2]].fill(paper);
            }
        } else {
            let p = scene.theme.paper;
            fill_rect_in(
                &mut layer.pixels,
                w,
                clip,
                [0.0, 0.0, w as f64, h as f64],
                p,
            );
        }
        // The items that reach into the strip, in item order (as a full pass draws them).
        let a = cam.to_map([clip[0] as f64 - m, clip[3] as f64 + m]);
        let b = cam.to_map([clip[2] as f64 + m, clip[1] as f64 - m]);
        let culled = near_items(scene, [a[0], a[1], b[0], b[1]], &mut near);
        let culled = culled.then_some(near.as_slice());
        let pixels = &mut layer.pixels;
        match level {
            None => {
                let mut drawn = FrameStats::default();
                let spots_for = Some((cam, (w, h), key.0.places, reach.to_bits()));
                if full && culled.is_none() {
                    // Every item afresh: at the places noted last time when they still hold,
                    // else placed and noted.
                    reused = layer.spots_for == spots_for
                        && layer.spots.len() == atlas.n
                        && fill_spots(pixels, w, &layer.spots, scene.mark_colours(), &mut drawn);
                    if !reused {
                        let mut spots = std::mem::take(&mut layer.spots);
                        spots.clear();
                        let colours = scene.mark_colours();
                        draw_marks(
                            pixels,
                            w,
                            clip,
                            atlas,
                            colours,
                            &cam,
                            reach,
                            0..atlas.n,
                            &mut drawn,
                            Some(&mut spots),
                        );
                        layer.spots = spots;
                        layer.spots_for = spots_for;
                    }
                } else {
                    draw_marks_of(pixels, w, clip, scene, &cam, reach, culled, &mut drawn);
                }
                stats.visited += drawn.visited;
                if full {
                    layer.marks = drawn.marks;
                }
            }
            Some(level) => {
                let (st, wanted, used) = &mut whole;
                let px = Some(&mut pixels[..]);
                thumbnails_of(scene, px, w, clip, level, culled, &[], st, wanted, used);
            }
        }
    }
    layer.camera = Some(cam);
    layer.key = key;
    layer.size = (w, h);
    layer.last_full = full;
    layer.spots_reused = reused;
    let Some(level) = level else {
        if !full && reuse != Some((0, 0)) {
            // The count of marks on screen after a pan, without drawing them.
            let (wf, hf) = (w as f64, h as f64);
            let colours = scene.mark_colours();
            layer.marks = atlas
                .positions
                .iter()
                .zip(colours)
                .filter(|&(&p, c)| {
                    let [sx, sy] = cam.to_screen(p);
                    c[3] != 0 && !(sx < -reach || sy < -reach || sx > wf + reach || sy > hf + reach)
                })
                .count();
        }
        stats.marks = layer.marks;
        buf.copy_from_slice(&layer.pixels);
        draw_on_top(scene, buf, w, h, reach, &mut stats);
        return stats;
    };
    // Thumbnails: the frame's counts and sheets come from a pass over what is on screen (the
    // full pass above, or one that draws nothing), then the open and hovered items go on top.
    let (mut stats, mut wanted, mut used) = if full {
        whole
    } else {
        let mut pass = (FrameStats::default(), BTreeSet::new(), BTreeSet::new());
        let (st, wanted, used) = &mut pass;
        let clip = [0, 0, w, h];
        let culled = near_items(scene, cam.visible(side.max(8.0) + side), &mut near);
        let culled = culled.then_some(near.as_slice());
        thumbnails_of(scene, None, w, clip, level, culled, &[], st, wanted, used);
        pass
    };
    buf.copy_from_slice(&layer.pixels);
    let on_top = [scene.open, scene.hover];
    let on_top = on_top.iter().flatten().copied();
    let clip = [0, 0, w, h];
    draw_thumbnails(
        scene,
        Some(buf),
        w,
        clip,
        level,
        on_top,
        &mut stats,
        &mut wanted,
        &mut used,
    );
    outlines(scene, buf, w, h, true);
    stats.side_px = side;
    stats.wanted = wanted.into_iter().collect();
    stats.used = used.into_iter().collect();
    stats
}

/// The sheet level items of `side` pixels are drawn from, or None when they are drawn as marks.
fn thumbnail_level(scene: &Scene, side: f64) -> Option<usize> {
    if side >= THUMB_MIN_PX && !scene.sheets.levels.is_empty() {
        scene.sheets.level_for(side)
    } else {
        None
    }
}

/// `draw_thumbnails` over the items a grid query found (`culled`), or over every item; then
/// `extra` (the open and hovered items, drawn again on top).
#[allow(clippy::too_many_arguments)]
fn thumbnails_of(
    scene: &Scene,
    buf: Option<&mut [u8]>,
    w: usize,
    clip: [usize; 4],
    level: usize,
    culled: Option<&[u32]>,
    extra: &[usize],
    stats: &mut FrameStats,
    wanted: &mut BTreeSet<(usize, usize)>,
    used: &mut BTreeSet<(usize, usize)>,
) {
    let extra = extra.iter().copied();
    match culled {
        Some(near) => {
            let items = near.iter().map(|&i| i as usize).chain(extra);
            draw_thumbnails(scene, buf, w, clip, level, items, stats, wanted, used)
        }
        None => {
            let items = (0..scene.atlas.n).chain(extra);
            draw_thumbnails(scene, buf, w, clip, level, items, stats, wanted, used)
        }
    }
}

/// Draws `items` (in that order) as thumbnails from sheet `level` (or the nearest loaded level,
/// or a flat square in the item's colour while none is loaded) into the part of `buf` inside
/// `clip`; notes the sheets they want and use and counts them in `stats`. With `buf` None it only
/// notes and counts. Items more than a margin outside `clip` are skipped.
#[allow(clippy::too_many_arguments)]
fn draw_thumbnails<I: Iterator<Item = usize>>(
    scene: &Scene,
    mut buf: Option<&mut [u8]>,
    w: usize,
    clip: [usize; 4],
    level: usize,
    items: I,
    stats: &mut FrameStats,
    wanted: &mut BTreeSet<(usize, usize)>,
    used: &mut BTreeSet<(usize, usize)>,
) {
    let atlas = scene.atlas;
    let sheets = scene.sheets;
    let side = scene.side_px();
    let margin = side.max(8.0);
    let fade = fade_weight(side);
    let colours = scene.mark_colours();
    let paper = scene.theme.paper;
    let [cx0, cy0, cx1, cy1] = clip.map(|v| v as f64);
    for i in items {
        stats.visited += 1;
        // Dimmed items show their picture mixed with the paper; hidden ones nothing.
        let weight = scene.tones.map_or(256, |t| t.weight[i]);
        if weight == 0 {
            continue;
        }
        let r = scene.item_rect(i);
        if r[2] < cx0 - margin || r[0] > cx1 + margin || r[3] < cy0 - margin || r[1] > cy1 + margin
        {
            continue;
        }
        let sheet_index = sheets.sheet_of(level, i);
        if sheets.levels[level].loaded[sheet_index].is_none() {
            wanted.insert((level, sheet_index));
        }
        // The wanted level if loaded, else the nearest loaded one (smaller levels first: they are fetched first).
        let mut chosen = None;
        for l in
            std::iter::once(level).chain((0..sheets.levels.len()).rev().filter(|&l| l != level))
        {
            let s = sheets.sheet_of(l, i);
            if let Some(sheet) = &sheets.levels[l].loaded[s] {
                chosen = Some((l, s, sheet));
                break;
            }
        }
        match chosen {
            Some((l, s, sheet)) => {
                if let Some(buf) = buf.as_deref_mut() {
                    let cell = sheets.cell(l, i, atlas.extents[i]);
                    let fade = if weight < 256 {
                        Some((paper, weight as u32))
                    } else {
                        fade.map(|t| (rgb(atlas.colours[i]), t))
                    };
                    blit(buf, w, clip, r, sheet, cell, fade);
                    if !atlas.copies.group(i).is_empty() {
                        // Dimmed with its picture.
                        let (a, p, t) = (scene.theme.accent, paper, weight as u32);
                        let c = [0, 1, 2]
                            .map(|k| ((a[k] as u32 * t + p[k] as u32 * (256 - t)) / 256) as u8);
                        dog_ear(buf, w, clip, r, c);
                    }
                }
                stats.thumbnails += 1;
                used.insert((l, s));
            }
            None => {
                // Nothing to show yet: the smallest level's sheet comes first.
                if level > 0 {
                    wanted.insert((0, sheets.sheet_of(0, i)));
                }
                if let Some(buf) = buf.as_deref_mut() {
                    fill_rect_in(buf, w, clip, r, rgb(colours[i]));
                }
                stats.marks += 1;
            }
        }
    }
}

/// The mark of a picture that has copies: its top right corner turned down, in the accent
/// colour, a right triangle whose legs are a fifth of the picture's shorter side (4 to 12 px, never
/// beyond the picture).
fn dog_ear(buf: &mut [u8], w: usize, clip: [usize; 4], r: [f64; 4], c: [u8; 3]) {
    let short = (r[2] - r[0]).min(r[3] - r[1]);
    let leg = (short * 0.2).clamp(4.0, 12.0).min(short);
    let rows = leg.round() as usize;
    for k in 0..rows {
        // Row k below the top edge covers the last (leg - k) pixels of the picture's width.
        let y = r[1] + k as f64;
        let x0 = r[2] - (leg - k as f64);
        fill_rect_in(buf, w, clip, [x0, y, r[2], y + 1.0], c);
    }
}

/// The open and hovered items drawn again over the marks, with their outlines.
fn draw_on_top(
    scene: &Scene,
    buf: &mut [u8],
    w: usize,
    h: usize,
    reach: f64,
    stats: &mut FrameStats,
) {
    let on_top = [scene.open, scene.hover];
    let items = on_top.iter().flatten().copied();
    draw_marks(
        buf,
        w,
        [0, 0, w, h],
        scene.atlas,
        scene.mark_colours(),
        scene.camera,
        reach,
        items,
        stats,
        None,
    );
    outlines(scene, buf, w, h, false);
}

fn outlines(scene: &Scene, buf: &mut [u8], w: usize, h: usize, thumbnails: bool) {
    for (item, thick) in [(scene.open, 3.0), (scene.hover, 2.0)] {
        if let Some(i) = item {
            let r = scene.item_rect(i);
            let grow = if thumbnails { 0.0 } else { 2.0 };
            outline(
                buf,
                w,
                h,
                [r[0] - grow, r[1] - grow, r[2] + grow, r[3] + grow],
                scene.theme.accent,
                thick,
            );
        }
    }
}

/// Draws a tiled atlas's frame into `buf` (RGBA, `w` x `h`): the overview pictures `plan`
/// names, each scaled into its tile's square over the paper, then the items of the leaves it
/// draws one by one (marks, or thumbnails when zoomed in), then the open and hovered items.
pub fn draw_tiled(
    scene: &Scene,
    tiled: &crate::tiled::Tiled,
    plan: &crate::tiled::Plan,
    buf: &mut [u8],
    w: usize,
    h: usize,
) -> FrameStats {
    use crate::tiled::Draw;
    let t = scene.theme;
    let paper = [t.paper[0], t.paper[1], t.paper[2], 255];
    for px in buf.chunks_exact_mut(4) {
        px.copy_from_slice(&paper);
    }
    let p = tiled.pyramid();
    let cam = scene.camera;
    let mut runs = Vec::new();
    for d in &plan.draws {
        match *d {
            Draw::Overview { tile, from } => {
                let Some(pic) = tiled.picture(from) else {
                    continue;
                };
                let sq = p.square(&p.tiles[tile]);
                let a = cam.to_screen([sq[0] as f32, sq[3] as f32]);
                let b = cam.to_screen([sq[2] as f32, sq[1] as f32]);
                let src = tiled.source_rect(tile, from);
                blit_overview(buf, w, h, [a[0], a[1], b[0], b[1]], pic, src, t.paper);
            }
            Draw::Items { leaf } => runs.push(tiled.runs[leaf]),
        }
    }
    let items = || runs.iter().flat_map(|r| r[0] as usize..r[1] as usize);
    let side = scene.side_px();
    let mut stats = FrameStats {
        side_px: side,
        ..Default::default()
    };
    let clip = [0, 0, w, h];
    match thumbnail_level(scene, side) {
        None => {
            let reach = mark_side(side) / 2.0;
            let colours = scene.mark_colours();
            draw_marks(
                buf,
                w,
                clip,
                scene.atlas,
                colours,
                cam,
                reach,
                items(),
                &mut stats,
                None,
            );
            draw_on_top(scene, buf, w, h, reach, &mut stats);
        }
        Some(level) => {
            let mut wanted = BTreeSet::new();
            let mut used = BTreeSet::new();
            let on_top = [scene.open, scene.hover];
            let all = items().chain(on_top.iter().flatten().copied());
            draw_thumbnails(
                scene,
                Some(buf),
                w,
                clip,
                level,
                all,
                &mut stats,
                &mut wanted,
                &mut used,
            );
            outlines(scene, buf, w, h, true);
            stats.wanted = wanted.into_iter().collect();
            stats.used = used.into_iter().collect();
        }
    }
    stats
}

/// Draws `pic`'s part `src` ([x0, y0, x1, y1] in its pixels) scaled into the screen rectangle
/// `r` ([x0, y0, x1, y1]), each pixel whose centre falls inside taking the source pixel under it,
/// laid over the paper by its opacity.
fn blit_overview(
    buf: &mut [u8],
    w: usize,
    h: usize,
    r: [f64; 4],
    pic: &crate::tiled::Overview,
    src: [f64; 4],
    paper: [u8; 3],
) {
    let first = |v: f64, max: usize| ((v - 0.5).ceil().max(0.0) as usize).min(max);
    let (x0, x1) = (first(r[0], w), first(r[2], w));
    let (y0, y1) = (first(r[1], h), first(r[3], h));
    if x0 >= x1 || y0 >= y1 || r[2] <= r[0] || r[3] <= r[1] {
        return;
    }
    let side = pic.side;
    let sx = (src[2] - src[0]) / (r[2] - r[0]);
    let sy = (src[3] - src[1]) / (r[3] - r[1]);
    let cols: Vec<usize> = (x0..x1)
        .map(|x| ((src[0] + (x as f64 + 0.5 - r[0]) * sx) as usize).min(side - 1))
        .collect();
    for y in y0..y1 {
        let row = ((src[1] + (y as f64 + 0.5 - r[1]) * sy) as usize).min(side - 1);
        let src_row = &pic.rgba[row * side * 4..(row + 1) * side * 4];
        let out = &mut buf[(y * w + x0) * 4..(y * w + x1) * 4];
        for (o, &c) in out.chunks_exact_mut(4).zip(&cols) {
            let q = &src_row[c * 4..c * 4 + 4];
            let a = q[3] as u32;
            if a == 0 {
                continue;
            }
            for k in 0..3 {
                o[k] = ((q[k] as u32 * a + paper[k] as u32 * (255 - a) + 127) / 255) as u8;
            }
        }
    }
}

/// Draws the scene into `buf` (RGBA, `w` x `h`).
pub fn draw(scene: &Scene, buf: &mut [u8], w: usize, h: usize) -> FrameStats {
    let t = scene.theme;
    let paper = [t.paper[0], t.paper[1], t.paper[2], 255];
    match bytemuck::try_cast_slice_mut::<u8, u32>(buf) {
        Ok(px) => px.fill(u32::from_le_bytes(paper)),
        Err(_) => {
            for px in buf.chunks_exact_mut(4) {
                px.copy_from_slice(&paper);
            }
        }
    }
    let side = scene.side_px();
    let mut stats = FrameStats {
        side_px: side,
        ..Default::default()
    };
    let level = thumbnail_level(scene, side);
    let margin = side.max(8.0);
    // Zoomed in, only the grid cells near the screen are visited (in item order, as a full pass
    // would draw them); zoomed out, a plain pass over every item is cheaper than the lookup.
    let mut near = Vec::new();
    let culled = near_items(scene, scene.camera.visible(margin + side), &mut near);
    let Some(level) = level else {
        // Marks only (zoomed out, where a frame may hold a million items): the same squares as
        // item_rect gives, without its per-item choices.
        let reach = mark_side(side) / 2.0;
        let cam = scene.camera;
        let clip = [0, 0, w, h];
        let culled = culled.then_some(near.as_slice());
        draw_marks_of(buf, w, clip, scene, cam, reach, culled, &mut stats);
        draw_on_top(scene, buf, w, h, reach, &mut stats);
        return stats;
    };
    let mut wanted = BTreeSet::new();
    let mut used = BTreeSet::new();
    // The open and hovered items are drawn again last, so that they sit on top of their neighbours.
    let on_top = [scene.open, scene.hover];
    let on_top = on_top.iter().flatten().copied();
    let clip = [0, 0, w, h];
    let on_top: Vec<usize> = on_top.collect();
    let culled = culled.then_some(near.as_slice());
    let (st, wanted_, used_) = (&mut stats, &mut wanted, &mut used);
    thumbnails_of(
        scene,
        Some(buf),
        w,
        clip,
        level,
        culled,
        &on_top,
        st,
        wanted_,
        used_,
    );
    outlines(scene, buf, w, h, true);
    stats.wanted = wanted.into_iter().collect();
    stats.used = used.into_iter().collect();
    stats
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_sheet_budget_evicts_the_least_recently_drawn_sheets_never_the_current_frames() {
        let level = |cell: u32, sheets: usize| SheetLevel {
            cell,
            columns: 4,
            rows: 4,
            files: (0..sheets).map(|i| format!("L{cell}-{i}.jpg")).collect(),
            loaded: (0..sheets).map(|_| None).collect(),
        };
        let sheet = || Sheet {
            width: 10,
            height: 10,
            rgb: vec![0; 300],
        };
        let mut s = SheetStore::new(vec![level(128, 5), level(32, 2)]);
        assert_eq!(s.levels[0].cell, 32, "smallest level first");
        s.budget = 3 * 300;
        s.insert(0, 0, sheet(), 1);
        s.insert(1, 0, sheet(), 2);
        s.insert(1, 1, sheet(), 3);
        assert_eq!((s.bytes, s.evicted), (900, 0));
        // Frame 4 draws from (0, 0) and (1, 1): (1, 0) is the least recently used.
        s.touch(&[(0, 0), (1, 1)], 4);
        s.insert(1, 2, sheet(), 4);
        assert!(s.levels[1].loaded[0].is_none());
        assert!(s.levels[0].loaded[0].is_some() && s.levels[1].loaded[1].is_some());
        assert_eq!((s.bytes, s.evicted), (900, 1));
        // A frame that draws from more sheets than the budget holds keeps them all.
        s.touch(&[(0, 0), (1, 1), (1, 2)], 5);
        s.insert(1, 3, sheet(), 5);
        assert_eq!((s.bytes, s.evicted), (1200, 1));
        // The next arrival evicts down to the budget again, oldest first; among sheets last drawn
        // in the same frame the sharper ones go first (the coarse level covers more items).
        s.touch(&[(1, 3)], 6);
        s.insert(1, 4, sheet(), 6);
        assert_eq!((s.bytes, s.evicted), (900, 3));
        assert!(s.levels[0].loaded[0].is_some());
        assert!(s.levels[1].loaded[3].is_some() && s.levels[1].loaded[4].is_some());
        // Replacing a held sheet counts its bytes once.
        s.insert(1, 4, sheet(), 7);
        assert_eq!(s.bytes, 900);
    }

    #[test]
    fn thumbnails_fade_in_from_their_marks_then_stay_pictures() {
        assert_eq!(fade_weight(THUMB_MIN_PX), Some(85));
        let mut last = 0;
        for k in 0..=70 {
            let side = THUMB_MIN_PX + k as f64 * 0.1;
            match fade_weight(side) {
                Some(t) => {
                    assert!(t >= last && t <= 256, "{side}: {t}");
                    last = t;
                }
                None => assert!(side >= THUMB_FADE_PX, "{side}"),
            }
        }
        assert!(
            last > 240,
            "nearly the whole picture just before the end: {last}"
        );
        assert_eq!(fade_weight(THUMB_FADE_PX), None);
    }

    #[test]
    fn pixel_edges_are_rounded_as_round_then_clamped() {
        let mut xs: Vec<f64> = (-40..=40).map(|i| i as f64 * 0.25).collect();
        xs.extend([-0.5, 0.5, 1.5, 2.5, 1e-12, -1e-12, 1279.5]);
        for x in xs {
            assert_eq!(px(x), x.round().max(0.0) as usize, "{x}");
            // A rounding error away from the edge lands on the same pixel.
            for e in [1e-9, -1e-9, 3e-13, -3e-13] {
                assert_eq!(px(x + e), px(x), "{x} {e}");
            }
        }
        // A whole-pixel pan in floating point: (p - (c - d / z)) * z against (p - c) * z + d.
        let (z, c) = (7.3f64, 0.123_456_789f64);
        for i in 0..2000 {
            let p = c + (i as f64 - 1000.0) * 0.5 / z; // edges on half pixels, off by rounding
            for d in [1.0, 9.0, -20.0, 37.0] {
                let before = px((p - c) * z + 80.0) as i64 + d as i64;
                let after = px((p - (c - d / z)) * z + 80.0) as i64;
                if before >= 0 && after >= 0 && (p - c) * z + 80.0 > 0.5 {
                    assert_eq!(after, before, "p {p} pan {d}");
                }
            }
        }
    }

    #[test]
    fn rectangles_partly_or_wholly_off_screen_are_clipped() {
        let (w, h) = (10usize, 8usize);
        let mut buf = vec![0u8; w * h * 4];
        for r in [
            [-5.0, -5.0, 2.0, 2.0],
            [8.0, 6.0, 30.0, 30.0],
            [12.0, 2.0, 15.0, 4.0],
            [2.0, 9.0, 4.0, 12.0],
            [-9.0, -9.0, -1.0, -1.0],
        ] {
            fill_rect(&mut buf, w, h, r, [9, 9, 9]);
            outline(&mut buf, w, h, r, [1, 2, 3], 2.0);
        }
        assert_eq!(&buf[(w + 1) * 4..(w + 1) * 4 + 3], &[9, 9, 9]);
        assert_eq!(&buf[((7 * w) + 9) * 4..((7 * w) + 9) * 4 + 3], &[9, 9, 9]);
    }
}
