//! A tiled atlas in the viewer (format 3, `vitrine_format::tiles`): which tiles a view draws and
//! at which level, what it wants fetched, and which overview pictures are kept.
//!
//! A view walks the pyramid from the root. An inner tile that would be drawn larger than
//! [`DESCEND_AT`] times its overview's size is replaced by its children; otherwise its overview
//! picture is drawn. A leaf's items are drawn one by one once the leaf covers at least one screen
//! pixel per item (or would be drawn larger than [`DESCEND_AT`]); until its items have arrived,
//! and while a tile's own picture is on its way, the nearest coarser picture that is here stands
//! in, cut to the tile's square. Overview pictures are kept up to a budget, the least recently
//! drawn dropped first; the items' drawing data, once fetched, stay (see `AtlasData`).

use vitrine_format::pyramid::Pyramid;
use vitrine_format::tiles::Tiles;

use crate::camera::Camera;

/// An inner tile is replaced by its children once drawn larger than this many times its
/// overview picture's side (so pictures are drawn at 0.71 to 1.41 of their size).
pub const DESCEND_AT: f64 = std::f64::consts::SQRT_2;
/// Overview pictures kept decoded at most (256 x 256 RGBA: 256 KiB each, 48 MiB in all), unless
/// the current frame draws from more.
pub const OVERVIEW_BUDGET: usize = 192;
/// The pictures of levels below this (21 at most) are never dropped: they stand in everywhere.
pub const KEPT_LEVELS: u8 = 3;

/// Where a tile's picture or a leaf's items stand.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Fetch {
    Absent,
    Loading,
    Here,
    /// It could not be fetched or read: not asked for again.
    Failed,
}

/// One overview picture, decoded: `side` x `side` RGBA, not premultiplied.
pub struct Overview {
    pub side: usize,
    pub rgba: Vec<u8>,
}

/// What a frame draws for one part of the map.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Draw {
    /// Tile `tile`'s square, from the overview of `from` (the tile itself or a coarser one).
    Overview { tile: usize, from: usize },
    /// Leaf `leaf`'s items, one by one.
    Items { leaf: usize },
}

/// What a view needs: the draws, the pictures and leaves it wants fetched (nearest first), and
/// the tiles it shows that could not be fetched.
#[derive(Debug, Default, Clone, PartialEq)]
pub struct Plan {
    pub draws: Vec<Draw>,
    pub want_tiles: Vec<usize>,
    pub want_leaves: Vec<usize>,
    pub failed: usize,
}

pub struct Tiled {
    pub tiles: Tiles,
    /// Each leaf's items, `[start, end)`, in leaf order.
    pub runs: Vec<[u64; 2]>,
    /// Leaf index → tile index, and tile index → leaf index (`u32::MAX` for an inner tile).
    pub leaf_tile: Vec<u32>,
    pub tile_leaf: Vec<u32>,
    /// Each tile's parent (`u32::MAX` for the root).
    parent: Vec<u32>,
    pub overviews: Vec<Option<Overview>>,
    pub overview_state: Vec<Fetch>,
    overview_used: Vec<u64>,
    pub leaf_state: Vec<Fetch>,
    pub budget: usize,
    /// Overview pictures kept, and dropped so far.
    kept: usize,
    pub evicted: usize,
    /// Every item's cell over its leaf's square (two bytes an item, see
    /// `vitrine_format::tiles::cells`), once fetched whole: the overviews are drawn again from
    /// them when filters or a selection dim items. Empty until then.
    pub cells: Vec<u8>,
    /// Overview pictures drawn again with the items' tones, for the tones of `toned_for`.
    pub toned: Vec<Option<Overview>>,
    toned_for: u64,
}

impl Tiled {
    pub fn new(tiles: Tiles) -> Tiled {
        let p = &tiles.pyramid;
        let count = p.tiles.len();
        let mut parent = vec![u32::MAX; count];
        let mut tile_leaf = vec![u32::MAX; count];
        let mut leaf_tile = Vec::new();
        let mut runs = Vec::new();
        for (i, t) in p.tiles.iter().enumerate() {
            for &c in t.children.iter().flatten().filter(|&&c| c != u32::MAX) {
                parent[c as usize] = i as u32;
            }
            if let (None, Some(r)) = (&t.children, t.items) {
                tile_leaf[i] = leaf_tile.len() as u32;
                leaf_tile.push(i as u32);
                runs.push(r);
            }
        }
        let leaves = runs.len();
        Tiled {
            tiles,
            runs,
            leaf_tile,
            tile_leaf,
            parent,
            overviews: (0..count).map(|_| None).collect(),
            overview_state: vec![Fetch::Absent; count],
            overview_used: vec![0; count],
            leaf_state: vec![Fetch::Absent; leaves],
            budget: OVERVIEW_BUDGET,
            kept: 0,
            evicted: 0,
            cells: Vec::new(),
            toned: (0..count).map(|_| None).collect(),
            toned_for: 0,
        }
    }

    pub fn pyramid(&self) -> &Pyramid {
        &self.tiles.pyramid
    }

    /// The leaf holding item `i`.
    pub fn leaf_of(&self, i: usize) -> usize {
        self.runs
            .partition_point(|r| r[1] <= i as u64)
            .min(self.runs.len().saturating_sub(1))
    }

    /// Side of tile `t` on screen at `zoom`, in pixels.
    fn side_px(&self, t: usize, zoom: f64) -> f64 {
        let p = self.pyramid();
        p.side as f64 / (1u64 << p.tiles[t].level) as f64 * zoom
    }

    /// The draws for `cam`, and what they want fetched.
    pub fn plan(&self, cam: &Camera) -> Plan {
        let p = self.pyramid();
        let view = cam.visible(0.0);
        let limit = self.tiles.overview_px as f64 * DESCEND_AT;
        let mut plan = Plan::default();
        let mut items = Vec::new();
        let mut stack = vec![0usize];
        while let Some(t) = stack.pop() {
            let tile = &p.tiles[t];
            let sq = p.square(tile);
            if sq[0] > view[2] || sq[2] < view[0] || sq[1] > view[3] || sq[3] < view[1] {
                continue;
            }
            let px = self.side_px(t, cam.zoom);
            match &tile.children {
                Some(c) if px > limit => stack.extend(
                    c.iter()
                        .rev()
                        .filter(|&&k| k != u32::MAX)
                        .map(|&k| k as usize),
                ),
                Some(_) => self.overview_of(t, &mut plan),
                None => {
                    let leaf = self.tile_leaf[t] as usize;
                    if px * px >= tile.count as f64 || px > limit {
                        match self.leaf_state[leaf] {
                            Fetch::Here => items.push(Draw::Items { leaf }),
                            state => {
                                if state == Fetch::Absent {
                                    plan.want_leaves.push(leaf);
                                }
                                if state == Fetch::Failed {
                                    plan.failed += 1;
                                }
                                self.overview_of(t, &mut plan);
                            }
                        }
                    } else {
                        self.overview_of(t, &mut plan);
                    }
                }
            }
        }
        // Pictures under the items: a mark may reach a little beyond its leaf's square.
        plan.draws.extend(items);
        let centre = cam.to_map([cam.size[0] / 2.0, cam.size[1] / 2.0]);
        let dist = |t: usize| {
            let s = p.square(&p.tiles[t]);
            let (x, y) = ((s[0] + s[2]) / 2.0, (s[1] + s[3]) / 2.0);
            (x - centre[0]).powi(2) + (y - centre[1]).powi(2)
        };
        let by_distance = |v: &mut Vec<usize>, tile: &dyn Fn(usize) -> usize| {
            v.sort_by(|&a, &b| dist(tile(a)).total_cmp(&dist(tile(b))));
        };
        by_distance(&mut plan.want_tiles, &|t| t);
        by_distance(&mut plan.want_leaves, &|l| self.leaf_tile[l] as usize);
        plan
    }

    /// Tile `t` drawn from its own picture, else from the nearest coarser one here (which is
    /// wanted first when none is: the coarsest comes fastest).
    fn overview_of(&self, t: usize, plan: &mut Plan) {
        match self.overview_state[t] {
            Fetch::Here => {
                plan.draws.push(Draw::Overview { tile: t, from: t });
                return;
            }
            Fetch::Absent => plan.want_tiles.push(t),
            Fetch::Failed => plan.failed += 1,
            Fetch::Loading => {}
        }
        let mut a = self.parent[t];
        while a != u32::MAX {
            if self.overview_state[a as usize] == Fetch::Here {
                plan.draws.push(Draw::Overview {
                    tile: t,
                    from: a as usize,
                });
                return;
            }
            a = self.parent[a as usize];
        }
        if self.overview_state[0] == Fetch::Absent && !plan.want_tiles.contains(&0) {
            plan.want_tiles.push(0);
        }
    }

    /// Notes that frame `frame` drew `plan`.
    pub fn touch(&mut self, plan: &Plan, frame: u64) {
        for d in &plan.draws {
            if let Draw::Overview { from, .. } = d {
                self.overview_used[*from] = frame;
            }
        }
    }

    /// Keeps tile `t`'s decoded picture, used in frame `frame`; then drops the least recently
    /// drawn pictures (never one drawn in `frame`, nor the coarse ones of levels 0 to
    /// [`KEPT_LEVELS`] - 1, which stand in everywhere) while more than the budget are kept.
    pub fn insert_overview(&mut self, t: usize, o: Overview, frame: u64) {
        if self.overviews[t].is_none() {
            self.kept += 1;
        }
        self.overviews[t] = Some(o);
        self.overview_state[t] = Fetch::Here;
        self.overview_used[t] = frame;
        if self.kept <= self.budget {
            return;
        }
        let levels = &self.tiles.pyramid.tiles;
        let mut held: Vec<usize> = (0..self.overviews.len())
            .filter(|&k| self.overviews[k].is_some() && levels[k].level >= KEPT_LEVELS)
            .collect();
        held.sort_by_key(|&k| self.overview_used[k]);
        for k in held {
            if self.kept <= self.budget || self.overview_used[k] >= frame {
                break;
            }
            self.overviews[k] = None;
            self.toned[k] = None;
            self.overview_state[k] = Fetch::Absent;
            self.kept -= 1;
            self.evicted += 1;
        }
    }

    /// Draws again, with the items' tone `weights` (out of 256, 0 = hidden; see
    /// `crate::raster::Tones`) of tones generation `generation`, the overview pictures `plan`
    /// draws from that are not toned yet; without weights, the toned pictures are dropped. Each
    /// pixel keeps its picture's colour (the mean of every item on it) and takes the opacity of
    /// its items as toned: the opacity of those drawn, times their mean weight. Nothing is done
    /// before the cells are here.
    pub fn tone(&mut self, plan: &Plan, weights: Option<&[u16]>, generation: u64) {
        let Some(weights) = weights else {
            if self.toned.iter().any(|t| t.is_some()) {
                self.toned.iter_mut().for_each(|t| *t = None);
            }
            return;
        };
        if self.cells.len() != 2 * weights.len() {
            return;
        }
        if generation != self.toned_for {
            self.toned.iter_mut().for_each(|t| *t = None);
            self.toned_for = generation;
        }
        for d in &plan.draws {
            let Draw::Overview { from, .. } = *d else {
                continue;
            };
            if self.toned[from].is_some() {
                continue;
            }
            let Some(pic) = &self.overviews[from] else {
                continue;
            };
            let side = pic.side;
            // The mean weight in the red channel, the opacity of the items drawn in alpha.
            let w = vitrine_format::tiles::overview_pixels(
                self.pyramid(),
                from,
                side,
                &self.cells,
                |k| match weights[k] {
                    0 => [0; 4],
                    w => [w.min(255) as u8, 0, 0, 255],
                },
            );
            let mut rgba = pic.rgba.clone();
            for (o, q) in rgba.chunks_exact_mut(4).zip(w.chunks_exact(4)) {
                o[3] = ((q[3] as u32 * q[0] as u32 + 127) / 255) as u8;
            }
            self.toned[from] = Some(Overview { side, rgba });
        }
    }

    /// The leaves an outline covers: those whose squares are wholly inside it, and those it
    /// crosses (whose items must be tested one by one), each in leaf order. The pyramid is walked
    /// from the root: a tile wholly inside brings every leaf below it, one wholly outside none.
    /// Squares are widened by a millionth of their side, so that an item on a square's edge is
    /// never taken for inside when the outline passes just beyond it.
    pub fn lasso_leaves(
        &self,
        poly: &vitrine_corpus::polygon::Polygon,
    ) -> (Vec<usize>, Vec<usize>) {
        let p = self.pyramid();
        let (mut inside, mut crossing) = (Vec::new(), Vec::new());
        let mut stack = vec![0usize];
        while let Some(t) = stack.pop() {
            let tile = &p.tiles[t];
            let sq = p.square(tile);
            let e = (sq[2] - sq[0]) * 1e-6;
            let status = poly.rect_status([sq[0] - e, sq[1] - e, sq[2] + e, sq[3] + e]);
            match (status, &tile.children) {
                (Some(false), _) => {}
                (Some(true), _) => {
                    let mut below = vec![t];
                    while let Some(k) = below.pop() {
                        match &p.tiles[k].children {
                            Some(c) => below
                                .extend(c.iter().filter(|&&c| c != u32::MAX).map(|&c| c as usize)),
                            None => inside.push(self.tile_leaf[k] as usize),
                        }
                    }
                }
                (None, Some(c)) => {
                    stack.extend(c.iter().filter(|&&c| c != u32::MAX).map(|&c| c as usize))
                }
                (None, None) => crossing.push(self.tile_leaf[t] as usize),
            }
        }
        inside.sort_unstable();
        crossing.sort_unstable();
        (inside, crossing)
    }

    /// Tile `t`'s picture as drawn now: toned when there is one, else its own.
    pub fn picture(&self, t: usize) -> Option<&Overview> {
        self.toned[t].as_ref().or(self.overviews[t].as_ref())
    }

    /// How many overview pictures are kept.
    pub fn overviews_kept(&self) -> usize {
        self.kept
    }

    /// Where tile `t`'s square lies in the picture of its ancestor (or itself) `from`: [x0, y0,
    /// x1, y1] in that picture's pixels (row 0 at the top).
    pub fn source_rect(&self, t: usize, from: usize) -> [f64; 4] {
        let p = self.pyramid();
        let (a, b) = (&p.tiles[t], &p.tiles[from]);
        let d = a.level.saturating_sub(b.level).min(30);
        let per = self.tiles.overview_px as f64 / (1u64 << d) as f64;
        let x0 = (a.x - (b.x << d)) as f64 * per;
        let y_from_bottom = (a.y - (b.y << d)) as f64 * per;
        let side = self.tiles.overview_px as f64;
        [
            x0,
            side - y_from_bottom - per,
            x0 + per,
            side - y_from_bottom,
        ]
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use vitrine_format::tiles::Tiles;
    use vitrine_format::{ArrayRef, DType};

    fn tiled(xy: &[f32], capacity: u64) -> Tiled {
        let (pyramid, _) = Pyramid::build(xy, capacity, 12);
        let empty = ArrayRef {
            file: String::new(),
            dtype: DType::U8,
            count: 0,
            bytes: 0,
            sha256: String::new(),
        };
        Tiled::new(Tiles {
            map: "similarity".into(),
            pyramid,
            overview_px: 256,
            overview_sums: empty.clone(),
            spacing: 0.01,
            cells: empty,
            chunked: vec![],
        })
    }

    /// A dense clump in one corner and a sparse scatter: leaves at many levels.
    fn mixture() -> Vec<f32> {
        let mut s = 99u64;
        let mut next = || {
            s = s
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (s >> 11) as f64 / (1u64 << 53) as f64
        };
        let mut xy = Vec::new();
        for k in 0..20_000 {
            let (x, y) = if k % 4 == 0 {
                (next() * 100.0, next() * 100.0)
            } else {
                (10.0 + next() * 2.0, 10.0 + next() * 2.0)
            };
            xy.extend([x as f32, y as f32]);
        }
        xy
    }

    /// The squares a plan draws cover the view once each: no gaps, no overlaps.
    fn covered_once(t: &Tiled, plan: &Plan, cam: &Camera) {
        let p = t.pyramid();
        let v = cam.visible(0.0);
        let mut area = 0.0;
        let mut squares = Vec::new();
        for d in &plan.draws {
            let tile = match *d {
                Draw::Overview { tile, .. } => tile,
                Draw::Items { leaf } => t.leaf_tile[leaf] as usize,
            };
            let s = p.square(&p.tiles[tile]);
            let w = (s[2].min(v[2]) - s[0].max(v[0])).max(0.0);
            let h = (s[3].min(v[3]) - s[1].max(v[1])).max(0.0);
            area += w * h;
            squares.push(tile);
        }
        squares.sort();
        squares.dedup();
        assert_eq!(squares.len(), plan.draws.len(), "a tile drawn twice");
        // The part of the view inside the pyramid's square.
        let r = [p.origin[0] as f64, p.origin[1] as f64];
        let r = [r[0], r[1], r[0] + p.side as f64, r[1] + p.side as f64];
        let w = (r[2].min(v[2]) - r[0].max(v[0])).max(0.0);
        let h = (r[3].min(v[3]) - r[1].max(v[1])).max(0.0);
        assert!((area - w * h).abs() <= 1e-6 * w * h, "{area} vs {}", w * h);
    }

    #[test]
    fn a_view_draws_each_part_once_finer_as_it_zooms_and_leaves_as_items_when_they_spread() {
        let xy = mixture();
        let mut t = tiled(&xy, 500);
        let size = [1280.0, 800.0];
        let fit = Camera::fit([0.0, 0.0, 100.0, 100.0], size);
        // Nothing here yet: the root is wanted, and nothing is drawn.
        let plan = t.plan(&fit);
        assert!(plan.draws.is_empty());
        assert_eq!(plan.want_tiles.first(), Some(&0));
        // Every picture here: the fitted view draws pictures only, each at 0.71-1.41 of its size.
        for k in 0..t.pyramid().tiles.len() {
            t.overview_state[k] = Fetch::Here;
        }
        let plan = t.plan(&fit);
        covered_once(&t, &plan, &fit);
        assert!(plan.want_tiles.is_empty());
        for d in &plan.draws {
            let Draw::Overview { tile, from } = *d else {
                panic!("items drawn at the fitted view of 20,000 in 100 x 100: {d:?}");
            };
            assert_eq!(tile, from);
            let px = t.side_px(tile, fit.zoom);
            let leaf = t.pyramid().tiles[tile].children.is_none();
            assert!(px <= 256.0 * DESCEND_AT + 1e-9, "{px}");
            assert!(leaf || px > 256.0 * DESCEND_AT / 2.0 - 1e-9, "{px}");
        }
        // Zoomed into the clump, its leaves' items are wanted, nearest the centre first; then
        // drawn once here, and the view is still covered once.
        let mut deep = fit;
        deep.centre = [11.0, 11.0];
        deep.zoom *= 40.0;
        let plan = t.plan(&deep);
        covered_once(&t, &plan, &deep);
        assert!(!plan.want_leaves.is_empty());
        let first = t.leaf_tile[plan.want_leaves[0]] as usize;
        let sq = t.pyramid().square(&t.pyramid().tiles[first]);
        assert!(
            sq[0] <= 11.0 + 2.0 && sq[2] >= 11.0 - 2.0,
            "nearest first: {sq:?}"
        );
        for &l in &plan.want_leaves {
            t.leaf_state[l] = Fetch::Here;
        }
        let plan = t.plan(&deep);
        covered_once(&t, &plan, &deep);
        let items: u64 = plan
            .draws
            .iter()
            .filter_map(|d| match d {
                Draw::Items { leaf } => Some(t.runs[*leaf][1] - t.runs[*leaf][0]),
                _ => None,
            })
            .sum();
        assert!(items > 0 && items <= 1280 * 800, "{items} items drawn");
    }

    #[test]
    fn a_missing_picture_is_stood_in_for_by_a_coarser_one_and_a_failed_one_is_counted() {
        let xy = mixture();
        let mut t = tiled(&xy, 500);
        let cam = Camera::fit([0.0, 0.0, 100.0, 100.0], [1280.0, 800.0]);
        t.overview_state[0] = Fetch::Here;
        let plan = t.plan(&cam);
        covered_once(&t, &plan, &cam);
        assert!(plan
            .draws
            .iter()
            .all(|d| matches!(d, Draw::Overview { from: 0, .. })));
        assert!(!plan.want_tiles.is_empty() && !plan.want_tiles.contains(&0));
        // The root's picture cut to a child's square: a quarter of it, row 0 at the top.
        let child = t.pyramid().tiles[0].children.unwrap()[2] as usize; // upper-left
        assert_eq!(t.source_rect(child, 0), [0.0, 0.0, 128.0, 128.0]);
        let lower_right = t.pyramid().tiles[0].children.unwrap()[1] as usize;
        assert_eq!(t.source_rect(lower_right, 0), [128.0, 128.0, 256.0, 256.0]);
        // A picture that failed is not asked for again, and is counted.
        let w = plan.want_tiles[0];
        t.overview_state[w] = Fetch::Failed;
        let again = t.plan(&cam);
        assert!(!again.want_tiles.contains(&w));
        assert!(again.failed >= 1);
        covered_once(&t, &again, &cam);
    }

    #[test]
    fn the_least_recently_drawn_pictures_go_first_never_the_current_frames() {
        let xy = mixture();
        let mut t = tiled(&xy, 50);
        t.budget = 3;
        // Tiles deep enough to be dropped, and one coarse one that stays whatever its age.
        let deep: Vec<usize> = (0..t.pyramid().tiles.len())
            .filter(|&k| t.pyramid().tiles[k].level >= KEPT_LEVELS)
            .take(8)
            .collect();
        let [d1, d2, d3, d4, d5, d6, d7, d8] = deep[..] else {
            panic!("a deep pyramid")
        };
        let picture = || Overview {
            side: 1,
            rgba: vec![0; 4],
        };
        for (k, frame) in [(d1, 1), (d2, 2), (d3, 3)] {
            t.insert_overview(k, picture(), frame);
        }
        t.overview_used[d1] = 5;
        t.insert_overview(d4, picture(), 6);
        assert_eq!(t.overviews_kept(), 3);
        assert!(t.overviews[d2].is_none(), "the one drawn longest ago");
        assert_eq!(t.overview_state[d2], Fetch::Absent);
        // All drawn in the current frame: kept over the budget.
        for k in [d5, d6, d7] {
            t.overview_used[k] = 9;
            t.insert_overview(k, picture(), 9);
        }
        assert_eq!(t.evicted, 4);
        assert!([d5, d6, d7].iter().all(|&k| t.overviews[k].is_some()));
        t.overview_used[d8] = 9;
        t.insert_overview(d8, picture(), 9);
        assert_eq!((t.overviews_kept(), t.evicted), (4, 4));
        // The root, drawn long ago, is never dropped; deeper ones drawn since are.
        t.insert_overview(0, picture(), 1);
        t.insert_overview(d2, picture(), 10);
        assert!(t.overviews[0].is_some() && t.overviews[d2].is_some());
        assert_eq!(t.overviews_kept(), 3);
        assert_eq!(t.leaf_of(0), 0);
        let last = t.runs.len() - 1;
        assert_eq!(t.leaf_of(t.runs[last][0] as usize), last);
    }
}
