//! The viewer's state and what it does, without a browser: the atlas, the view, the record card
//! being read, pointer gestures, the selection and its sketches, the filters, and the frame drawn
//! from them. The web layer owns the page (DOM, fetches, the GPU) and asks this for every answer;
//! the tests here drive it as a page would.

use std::collections::{BTreeMap, HashMap};

use vitrine_corpus::corpus::{corpus_mask, Lookup, Op, Shape, Step};
use vitrine_corpus::mask::Mask;

use crate::atlas::AtlasData;
use crate::camera::{Camera, Glide, MAX_ZOOM_FACTOR, MIN_ZOOM_FACTOR};
use crate::filters::Filters;
use crate::grid::Grid;
use crate::pick::Picker;
use crate::raster::{self, FrameStats, MarkLayer, Scene, SheetStore, Theme};
use crate::selection::Selection;
use crate::sketch::{sketch_for, KeySketch, Mode, Sketch};

/// Items per cell of the culling grid on average.
pub const GRID_ITEMS_PER_CELL: usize = 16;
/// A drag that moved less than this (canvas pixels, across and down together) is a click.
const CLICK_SLOP_PX: f64 = 4.0;
/// How far outside an item's square (or mark) a pointer still picks it, in canvas pixels.
const PICK_SLACK_PX: f64 = 4.0;

/// A drag of the map under way.
#[derive(Debug, Clone, Copy)]
struct Drag {
    start: [f64; 2],
    last: [f64; 2],
    moved: bool,
}

/// What a pointer event came to.
#[derive(Debug, Clone, PartialEq)]
pub enum Pointer {
    /// Nothing the page shows changed.
    Nothing,
    /// The sketch being drawn changed (or ended without a shape): draw it again.
    Sketch,
    /// The view moved: draw a frame.
    Moved,
    /// The pointer is over this item, or over none: ask [`Viewer::pick`] and show it.
    Hover([f64; 2]),
    /// A click on the map at this point, with Ctrl (Cmd) or without.
    Click { at: [f64; 2], ctrl: bool },
    /// A sketch was finished into this step, or a click in a selection mode toggles an item.
    Step(Step),
}

/// The viewer: everything it knows and decides, platform-free.
pub struct Viewer {
    pub atlas: AtlasData,
    pub sheets: SheetStore,
    /// Built after the first picture is on screen (hover and clicks wait for it).
    pub picker: Option<Picker>,
    pub grid: Grid,
    pub camera: Camera,
    /// The fitted zoom of the map shown: zoom limits and links are relative to it.
    pub base_zoom: f64,
    /// The animated camera move under way, if any.
    pub glide: Option<Glide>,
    pub hover: Option<usize>,
    /// The item whose record card is open.
    pub open: Option<usize>,
    /// The record cards walked through (for going back), and the one shown last.
    walk: Vec<usize>,
    open_prev: Option<usize>,
    pointers: BTreeMap<i32, [f64; 2]>,
    pinch: Option<f64>,
    drag: Option<Drag>,
    /// What a drag does: move the map, or draw a lasso or a rectangle.
    pub mode: Mode,
    pub selection: Selection,
    /// The lasso or rectangle being drawn with the pointer.
    pub sketch: Option<Sketch>,
    /// A lasso or rectangle being drawn from the keyboard.
    pub key_sketch: Option<KeySketch>,
    /// How items are dimmed for the selection and the filters (None: nothing chosen).
    pub tones: Option<raster::Tones>,
    /// Changes with `tones`: the kept layer of marks is drawn again.
    pub tones_generation: u64,
    /// Item index by id (made when a step names items).
    id_index: Option<HashMap<String, usize>>,
    /// SHA-256 of the atlas.json text: names the atlas in corpus files and links.
    pub manifest_sha: String,
    pub filters: Filters,
    /// The codebook the corpus is coded against, every coder's codes (from an opened corpus
    /// file, the browser's store and the coding view; written back with the corpus file: nothing
    /// a coder entered is lost), and the coding view's walk.
    pub coding: crate::coding::Coding,
    /// The corpus's items in atlas order, as the tray's grid shows them.
    pub tray_items: Vec<u32>,
    /// The marks' own colours (their pictures' averages) while they are coloured by a field.
    pub picture_colours: Option<Vec<[u8; 4]>>,
    /// Zoomed-out marks kept between frames (a pan draws only what comes into view).
    pub layer: MarkLayer,
    pub frames: u64,
    /// What the last frame drew.
    pub last: FrameStats,
    pub theme: Theme,
    /// Items gliding from their places on one map to the next, if a map change is under way.
    map_glide: Option<MapGlide>,
    /// Changes whenever the items' places change (another map, a step of a map glide): the kept
    /// marks are drawn again.
    places_generation: u64,
    /// A tiled atlas: what the last frame drew and wants fetched.
    pub plan: crate::tiled::Plan,
}

/// Every item on its way from its place on the map left to its place on the map shown, in the
/// new map's coordinates: it starts where it stood on screen (seen through the new map's fitted
/// view) and ends at its place, eased as camera glides are. The view may move meanwhile.
struct MapGlide {
    from: Vec<[f32; 2]>,
    start: f64,
    duration: f64,
}

/// The corpus as the page shows it after a change of the selection or the filters.
pub struct CorpusState {
    /// Items selected on the map (None: no selection).
    pub selected: Option<usize>,
    /// Items in the corpus (None: nothing chosen, no filter).
    pub corpus: Option<usize>,
    pub figures: Option<vitrine_corpus::summary::Figures>,
    /// Whether undo and redo can act.
    pub history: (bool, bool),
    /// How the corpus was chosen, in words.
    pub description: String,
}

impl Viewer {
    /// A viewer of `atlas` on a canvas of `size` pixels, fitted.
    pub fn new(atlas: AtlasData, size: [f64; 2], manifest_sha: String, theme: Theme) -> Viewer {
        // A tiled atlas is culled by its tiles: no grid over positions that are not here yet.
        let culled: &[[f32; 2]] = if atlas.tiled.is_some() {
            &[]
        } else {
            &atlas.positions
        };
        let grid = Grid::new(culled, atlas.bounds, GRID_ITEMS_PER_CELL);
        let camera = Camera::fit(atlas.bounds, size);
        let sheets = SheetStore::from_manifest(&atlas.manifest);
        Viewer {
            base_zoom: camera.zoom,
            atlas,
            sheets,
            picker: None,
            grid,
            camera,
            glide: None,
            hover: None,
            open: None,
            walk: Vec::new(),
            open_prev: None,
            pointers: BTreeMap::new(),
            pinch: None,
            drag: None,
            mode: Mode::Move,
            selection: Default::default(),
            sketch: None,
            key_sketch: None,
            tones: None,
            tones_generation: 0,
            id_index: None,
            manifest_sha,
            filters: Default::default(),
            coding: Default::default(),
            tray_items: Vec::new(),
            picture_colours: None,
            layer: Default::default(),
            frames: 0,
            last: Default::default(),
            theme,
            map_glide: None,
            places_generation: 0,
            plan: Default::default(),
        }
    }

    /// Makes the index for hover and clicks (deferred until the first picture is shown); in a
    /// tiled atlas, over the leaves here (each leaf that arrives later is added).
    pub fn make_picker(&mut self) {
        let Some(t) = &self.atlas.tiled else {
            self.picker = Some(Picker::new(&self.atlas.positions));
            return;
        };
        let mut p = Picker::new(&[]);
        for (leaf, r) in t.runs.iter().enumerate() {
            if t.leaf_state[leaf] == crate::tiled::Fetch::Here {
                p.add_run(
                    r[0] as usize,
                    &self.atlas.positions[r[0] as usize..r[1] as usize],
                );
            }
        }
        self.picker = Some(p);
    }

    /// A tiled atlas's leaf arrived (its chunks in `files`, the lists of checksums in `sums`): its
    /// items are drawn and picked from now on (a leaf already here is left as it is). An error
    /// leaves the leaf failed.
    pub fn insert_leaf(
        &mut self,
        leaf: usize,
        sums: &vitrine_format::AtlasFiles,
        files: &vitrine_format::AtlasFiles,
    ) -> Result<(), vitrine_format::AtlasError> {
        if self
            .atlas
            .tiled
            .as_ref()
            .is_some_and(|t| t.leaf_state.get(leaf) == Some(&crate::tiled::Fetch::Here))
        {
            return Ok(());
        }
        let pictures = match self.atlas.insert_leaf(leaf, sums, files) {
            Ok(p) => p,
            Err(e) => {
                self.leaf_failed(leaf);
                return Err(e);
            }
        };
        let Some(t) = &self.atlas.tiled else {
            return Ok(());
        };
        let [a, b] = t.runs[leaf];
        let (a, b) = (a as usize, b as usize);
        // The leaf's colours were not here when the tones were made.
        if let Some(tones) = &mut self.tones {
            for i in a..b {
                tones.colours[i] = crate::selection::tone(
                    self.atlas.colours[i],
                    tones.weight[i],
                    self.theme.paper,
                );
            }
        }
        if !pictures.is_empty() {
            if self.sheets.pictures.len() != self.atlas.n {
                self.sheets.pictures = vec![0; self.atlas.n];
            }
            self.sheets.pictures[a..b].copy_from_slice(&pictures);
        }
        if let Some(p) = &mut self.picker {
            p.add_run(a, &self.atlas.positions[a..b]);
        }
        Ok(())
    }

    /// A tiled atlas's overview picture of tile `tile` arrived, decoded.
    pub fn insert_overview(&mut self, tile: usize, o: crate::tiled::Overview) {
        let frame = self.frames;
        if let Some(t) = &mut self.atlas.tiled {
            t.insert_overview(tile, o, frame);
        }
    }

    /// Tile `tile`'s picture or leaf `leaf`'s items are on their way: not asked for twice.
    pub fn fetching_tile(&mut self, tile: Option<usize>, leaf: Option<usize>) {
        if let Some(t) = &mut self.atlas.tiled {
            if let Some(k) = tile {
                t.overview_state[k] = crate::tiled::Fetch::Loading;
            }
            if let Some(l) = leaf {
                t.leaf_state[l] = crate::tiled::Fetch::Loading;
            }
        }
    }

    /// Tile `tile`'s picture could not be fetched or read: not asked for again.
    pub fn overview_failed(&mut self, tile: usize) {
        if let Some(t) = &mut self.atlas.tiled {
            t.overview_state[tile] = crate::tiled::Fetch::Failed;
        }
    }

    /// A leaf could not be fetched or read: not asked for again.
    pub fn leaf_failed(&mut self, leaf: usize) {
        if let Some(t) = &mut self.atlas.tiled {
            t.leaf_state[leaf] = crate::tiled::Fetch::Failed;
        }
    }

    pub fn scene(&self) -> Scene<'_> {
        Scene {
            atlas: &self.atlas,
            grid: self.atlas.tiled.is_none().then_some(&self.grid),
            sheets: &self.sheets,
            camera: &self.camera,
            hover: self.hover,
            open: self.open,
            tones: self.tones.as_ref(),
            theme: self.theme,
        }
    }

    /// Draws the frame into `pixels` (RGBA, `w` x `h`): marks kept from the last frame where
    /// they can be, the sheets it used marked as used.
    pub fn draw(&mut self, pixels: &mut [u8], w: usize, h: usize) -> &FrameStats {
        self.camera.size = [w as f64, h as f64];
        if let Some(t) = &self.atlas.tiled {
            let plan = t.plan(&self.camera);
            let weights = self.tones.as_ref().map(|t| &t.weight[..]);
            if let Some(t) = &mut self.atlas.tiled {
                t.tone(&plan, weights, self.tones_generation);
            }
            let t = self.atlas.tiled.as_ref().expect("tiled");
            let stats = raster::draw_tiled(&self.scene(), t, &plan, pixels, w, h);
            self.frames += 1;
            if let Some(t) = &mut self.atlas.tiled {
                t.touch(&plan, self.frames);
            }
            self.plan = plan;
            self.sheets.touch(&stats.used, self.frames);
            self.last = stats;
            return &self.last;
        }
        let mut layer = std::mem::take(&mut self.layer);
        // The kept marks depend on the map shown and on how the selection dims them.
        let key = raster::LayerKey {
            places: self.places_generation,
            looks: self.tones_generation,
        };
        let stats = raster::draw_with_layer(&self.scene(), &mut layer, key, pixels, w, h);
        self.layer = layer;
        self.frames += 1;
        self.sheets.touch(&stats.used, self.frames);
        self.last = stats;
        &self.last
    }

    /// The item under a screen point, if the pointer is on its square (or within a few pixels of a mark).
    pub fn pick(&self, s: [f64; 2]) -> Option<usize> {
        let m = self.camera.to_map(s);
        let (i, _) = self.picker.as_ref()?.nearest(m)?;
        let r = self.scene().item_rect(i);
        (s[0] >= r[0] - PICK_SLACK_PX
            && s[0] <= r[2] + PICK_SLACK_PX
            && s[1] >= r[1] - PICK_SLACK_PX
            && s[1] <= r[3] + PICK_SLACK_PX)
            .then_some(i)
    }

    /// The item nearest the centre of the view (where the view is heading), if one is in view.
    pub fn nearest_to_centre(&self) -> Option<usize> {
        let to = self.camera_target();
        let (i, _) = self.picker.as_ref()?.nearest(to.centre)?;
        let v = to.visible(0.0);
        let p = self.atlas.positions[i];
        let (x, y) = (p[0] as f64, p[1] as f64);
        (x >= v[0] && x <= v[2] && y >= v[1] && y <= v[3]).then_some(i)
    }

    pub fn zoom_limits(&self) -> [f64; 2] {
        [
            self.base_zoom * MIN_ZOOM_FACTOR,
            self.base_zoom * MAX_ZOOM_FACTOR,
        ]
    }

    /// The camera a glide under way is heading for, or the camera itself.
    pub fn camera_target(&self) -> Camera {
        self.glide.map(|g| g.to).unwrap_or(self.camera)
    }

    /// Where a zoom by `factor` about `at` (canvas pixels; the centre when None) ends.
    pub fn zoomed(&self, factor: f64, at: Option<[f64; 2]>) -> Camera {
        let at = at.unwrap_or([self.camera.size[0] / 2.0, self.camera.size[1] / 2.0]);
        let mut to = self.camera_target();
        to.zoom_at(at, factor, self.zoom_limits());
        to
    }

    /// Where a pan by (dx, dy) canvas pixels ends.
    pub fn panned(&self, dx: f64, dy: f64) -> Camera {
        let mut to = self.camera_target();
        to.pan(dx, dy);
        to
    }

    /// The whole map shown in the canvas.
    pub fn fitted(&self) -> Camera {
        Camera::fit(self.atlas.bounds, self.camera.size)
    }

    /// Starts a glide to `to` at time `now` lasting `ms` (0: a jump).
    pub fn glide_to(&mut self, to: Camera, now: f64, ms: f64) {
        self.glide = Some(Glide::new(self.camera, to, now, ms));
    }

    /// Moves the camera along the glide under way; whether it is still under way.
    pub fn step_glide(&mut self, now: f64) -> bool {
        if let Some(g) = self.glide {
            self.camera = g.at(now);
            if g.done(now) {
                self.glide = None;
            }
        }
        self.glide.is_some()
    }

    /// Shows map `i`, fitted, every item gliding from its place on the map shown now to its place
    /// on map `i` over `ms` milliseconds from `now` (0: at once), so that the eye can follow a
    /// group; false when there is no such map.
    pub fn set_map_gliding(&mut self, i: usize, now: f64, ms: f64) -> bool {
        if i >= self.atlas.maps.len() || i == self.atlas.current {
            return i < self.atlas.maps.len();
        }
        let screen = self.on_screen();
        // Hover and clicks wait for the items to come to rest: the index for them is made then
        // (for a million items it takes longer than a frame).
        self.switch_map(i, ms <= 0.0);
        if ms <= 0.0 {
            return true;
        }
        let cam = self.camera;
        let from = screen
            .iter()
            .map(|s| {
                let m = cam.to_map([s[0] as f64, s[1] as f64]);
                [m[0] as f32, m[1] as f32]
            })
            .collect();
        self.map_glide = Some(MapGlide {
            from,
            start: now,
            duration: ms,
        });
        self.step_map_glide(now);
        true
    }

    /// Every item's place on screen in the view shown.
    fn on_screen(&self) -> Vec<[f32; 2]> {
        let cam = self.camera;
        self.atlas
            .positions
            .iter()
            .map(|&p| {
                let s = cam.to_screen(p);
                [s[0] as f32, s[1] as f32]
            })
            .collect()
    }

    /// Moves the items along a map change under way; whether it is still under way.
    pub fn step_map_glide(&mut self, now: f64) -> bool {
        let Some(g) = &self.map_glide else {
            return false;
        };
        let t = ((now - g.start) / g.duration).clamp(0.0, 1.0);
        self.places_generation += 1;
        if t >= 1.0 {
            self.map_glide = None;
            self.atlas.positions = self.atlas.maps[self.atlas.current].positions.clone();
            self.make_picker();
            return false;
        }
        let e = (1.0 - (1.0 - t).powi(3)) as f32;
        let AtlasData {
            positions,
            maps,
            current,
            ..
        } = &mut self.atlas;
        for ((p, a), b) in positions
            .iter_mut()
            .zip(&g.from)
            .zip(&maps[*current].positions)
        {
            *p = [a[0] + (b[0] - a[0]) * e, a[1] + (b[1] - a[1]) * e];
        }
        true
    }

    /// Whether items are gliding to another map's places.
    pub fn map_gliding(&self) -> bool {
        self.map_glide.is_some()
    }

    /// Shows map `i`, fitted; false when there is no such map.
    pub fn set_map(&mut self, i: usize) -> bool {
        if i >= self.atlas.maps.len() {
            return false;
        }
        self.switch_map(i, true);
        true
    }

    /// Map `i` shown and fitted; its hover index made now when `index` (else by the caller).
    fn switch_map(&mut self, i: usize, index: bool) {
        if self.map_glide.take().is_some() {
            self.atlas.positions = self.atlas.maps[self.atlas.current].positions.clone();
        }
        self.places_generation += 1;
        self.atlas.select_map(i);
        self.picker = index.then(|| Picker::new(&self.atlas.positions));
        self.grid = Grid::new(
            &self.atlas.positions,
            self.atlas.bounds,
            GRID_ITEMS_PER_CELL,
        );
        self.glide = None;
        self.camera = self.fitted();
        self.base_zoom = self.camera.zoom;
        self.hover = None;
        // A keyboard sketch's points belong to the map they were dropped on.
        self.key_sketch = None;
    }

    /// The map after the one shown (the first after the last).
    pub fn next_map(&self) -> usize {
        (self.atlas.current + 1) % self.atlas.maps.len()
    }

    // The record card.

    /// Opens item `i`'s record card (None closes it), remembering the way back.
    pub fn open_card(&mut self, i: Option<usize>) {
        self.open = i;
        let Some(i) = i else {
            self.walk.clear();
            self.open_prev = None;
            return;
        };
        if let Some(prev) = self.open_prev.take() {
            if prev != i {
                self.walk.push(prev);
            }
        }
        self.open_prev = Some(i);
    }

    /// With a card open: `forward`, its nearest neighbour not yet walked through (None while the
    /// neighbour lists are not loaded); else the card before it.
    pub fn card_step(&mut self, forward: bool) -> Option<usize> {
        let i = self.open?;
        if forward {
            let walked = self.walk.clone();
            self.atlas
                .neighbours_of(i)
                .and_then(|nb| nb.into_iter().find(|j| !walked.contains(j) && *j != i))
        } else {
            let back = self.walk.pop();
            // Going back must not record the card left as a step forward (with nowhere to go
            // back to, the card stays the one shown).
            if back.is_some() {
                self.open_prev = None;
            }
            back
        }
    }

    // Pointer gestures: one pointer drags the map or draws a sketch, two pinch.

    pub fn pointer_down(&mut self, id: i32, p: [f64; 2], shift: bool, alt: bool) -> Pointer {
        self.pointers.insert(id, p);
        if self.pointers.len() == 1 {
            if let Some(mut s) = sketch_for(self.mode, shift, alt) {
                s.extend(p);
                self.sketch = Some(s);
                self.drag = None;
                return Pointer::Nothing;
            }
        }
        // A second finger ends the lasso being drawn.
        let dropped = self.sketch.take().is_some();
        if self.pointers.len() == 2 {
            self.pinch = Some(self.finger_distance());
            self.drag = None;
        } else {
            self.drag = Some(Drag {
                start: p,
                last: p,
                moved: false,
            });
        }
        if dropped {
            Pointer::Sketch
        } else {
            Pointer::Nothing
        }
    }

    fn finger_distance(&self) -> f64 {
        let v: Vec<[f64; 2]> = self.pointers.values().copied().collect();
        (v[0][0] - v[1][0]).hypot(v[0][1] - v[1][1])
    }

    pub fn pointer_move(&mut self, id: i32, p: [f64; 2]) -> Pointer {
        if let Some(q) = self.pointers.get_mut(&id) {
            *q = p;
        }
        if let Some(s) = self.sketch.as_mut() {
            s.extend(p);
            return Pointer::Sketch;
        }
        if self.pointers.len() == 2 {
            let v: Vec<[f64; 2]> = self.pointers.values().copied().collect();
            let d = self.finger_distance();
            if let Some(prev) = self.pinch {
                let mid = [(v[0][0] + v[1][0]) / 2.0, (v[0][1] + v[1][1]) / 2.0];
                let limits = self.zoom_limits();
                self.glide = None;
                self.camera.zoom_at(mid, d / prev.max(1.0), limits);
            }
            self.pinch = Some(d);
            return Pointer::Moved;
        }
        if let Some(drag) = self.drag.as_mut() {
            // The map moves by whole pixels (the rest is carried to the next move), so that
            // zoomed-out frames can reuse the marks already drawn.
            let (dx, dy) = ((p[0] - drag.last[0]).round(), (p[1] - drag.last[1]).round());
            drag.last = [drag.last[0] + dx, drag.last[1] + dy];
            if (p[0] - drag.start[0]).abs() + (p[1] - drag.start[1]).abs() > CLICK_SLOP_PX {
                drag.moved = true;
            }
            if drag.moved {
                self.glide = None;
                self.camera.pan(dx, dy);
            }
            return Pointer::Moved;
        }
        Pointer::Hover(p)
    }

    pub fn pointer_up(&mut self, id: i32, p: [f64; 2], ctrl: bool) -> Pointer {
        self.pointers.remove(&id);
        if self.pointers.len() < 2 {
            self.pinch = None;
        }
        let click = self.drag.take().is_some_and(|d| !d.moved);
        if let Some(mut s) = self.sketch.take() {
            s.extend(p);
            if s.is_click() {
                // A click in a selection mode adds the item under it, or takes it out.
                return match self.pick(p).and_then(|i| self.toggle_step(i)) {
                    Some(step) => Pointer::Step(step),
                    None => Pointer::Sketch,
                };
            }
            return Pointer::Step(Step {
                op: s.op,
                shape: s.shape(&self.camera),
            });
        }
        if click {
            Pointer::Click { at: p, ctrl }
        } else {
            Pointer::Nothing
        }
    }

    pub fn pointer_cancel(&mut self, id: i32) {
        self.pointers.remove(&id);
        self.drag = None;
        self.pinch = None;
        self.sketch = None;
    }

    // Selection.

    /// Switches the drag mode (the same mode again goes back to moving the map); a keyboard
    /// sketch belongs to the mode it was begun in.
    pub fn set_mode(&mut self, m: Mode) -> Mode {
        self.mode = if self.mode == m { Mode::Move } else { m };
        self.key_sketch = None;
        self.mode
    }

    /// The item index of an id (the index, a string per item, is made on first use, and never
    /// from the empty ids of a catalogue still loading).
    pub fn index_of(&mut self) -> Option<&HashMap<String, usize>> {
        if self.id_index.is_none() && self.atlas.catalogue {
            let m = (0..self.atlas.n)
                .map(|i| (self.atlas.ids.get(i).to_string(), i))
                .collect();
            self.id_index = Some(m);
        }
        self.id_index.as_ref()
    }

    /// Runs `f` with the selection and a lookup on the selection's map.
    pub fn with_lookup<R>(
        &mut self,
        needs_ids: bool,
        f: impl FnOnce(&mut Selection, &Lookup) -> R,
    ) -> R {
        if needs_ids {
            self.index_of();
        }
        let Viewer {
            atlas,
            selection,
            id_index,
            grid,
            ..
        } = self;
        let selection_map = selection.map.min(atlas.maps.len() - 1);
        let find = |id: &str| id_index.as_ref().and_then(|m| m.get(id).copied());
        let near = |r: [f64; 4]| {
            let mut v = Vec::new();
            grid.query_any_order(r, &mut v);
            v
        };
        // A tiled atlas: leaves wholly inside an outline are taken whole, the items of those it
        // crosses tested (their leaves must be here: see `leaves_to_test`).
        let tiled_runs = |p: &vitrine_corpus::polygon::Polygon| {
            let Some(t) = &atlas.tiled else {
                return (Vec::new(), Vec::new());
            };
            let (inside, crossing) = t.lasso_leaves(p);
            let near = crossing
                .iter()
                .filter(|&&l| t.leaf_state[l] == crate::tiled::Fetch::Here)
                .flat_map(|&l| t.runs[l][0] as u32..t.runs[l][1] as u32)
                .collect();
            (inside.iter().map(|&l| t.runs[l]).collect(), near)
        };
        let tiled = atlas.tiled.is_some();
        let at = Lookup {
            positions: if tiled {
                &atlas.positions
            } else {
                &atlas.maps[selection_map].positions
            },
            index_of: &find,
            // The grid is of the map shown: it narrows lassos only on that map.
            near: if selection_map == atlas.current && !tiled {
                Some(&near)
            } else {
                None
            },
            runs: if tiled { Some(&tiled_runs) } else { None },
        };
        f(selection, &at)
    }

    /// Adds a step to the selection; an error says, in words, why it was not added.
    pub fn apply_step(&mut self, step: Step) -> Result<(), String> {
        // A tiled atlas draws and picks without its catalogue; ids need it.
        let needs_catalogue = self.atlas.tiled.is_none() || matches!(step.shape, Shape::Ids(_));
        if !self.atlas.catalogue && needs_catalogue {
            return Err("The catalogue is still loading: select again in a moment.".into());
        }
        let drawn = matches!(step.shape, Shape::Lasso(_) | Shape::Rect(_));
        if self.selection.steps().is_empty() {
            self.begin_here();
        } else if drawn && self.selection.map != self.atlas.current {
            let name = &self.atlas.maps[self.selection.map].name;
            return Err(format!(
                "This selection was drawn on the {name} map: go back to it to draw more, or clear it (x) to start on this one."
            ));
        }
        let ids = matches!(step.shape, Shape::Ids(_));
        let step = crate::link::rounded_step(step);
        self.with_lookup(ids, |sel, at| sel.push(step, at))
            .map_err(|e| e.to_string())
    }

    /// A tiled atlas: the leaves that `step`'s outline crosses and that are not here yet (their
    /// items must be tested one by one, so they are fetched before the step is applied).
    pub fn leaves_to_test(&self, step: &Step) -> Vec<usize> {
        let Some(t) = &self.atlas.tiled else {
            return Vec::new();
        };
        let poly = match &step.shape {
            Shape::Lasso(p) => p.clone(),
            Shape::Rect(r) => vitrine_corpus::polygon::Polygon::rect(*r),
            _ => return Vec::new(),
        };
        t.lasso_leaves(&poly)
            .1
            .into_iter()
            .filter(|&l| t.leaf_state[l] != crate::tiled::Fetch::Here)
            .collect()
    }

    /// A selection begun now (there are no steps yet) is on the map shown.
    pub fn begin_here(&mut self) {
        if self.selection.steps().is_empty() {
            self.selection.map = self.atlas.current;
        }
    }

    /// The step that adds item `i` to the selection, or takes it out when it is selected (None
    /// while ids are not loaded).
    pub fn toggle_step(&self, i: usize) -> Option<Step> {
        let id = self.atlas.id(i);
        if id.is_empty() {
            return None;
        }
        let on = self.selection.mask().is_some_and(|m| m.get(i));
        Some(Step {
            op: if on { Op::Subtract } else { Op::Add },
            shape: Shape::Ids(vec![id.to_string()]),
        })
    }

    /// The step that selects what is in view (`add`: adds it).
    pub fn view_step(&self, add: bool) -> Step {
        Step {
            op: if add { Op::Add } else { Op::Replace },
            shape: Shape::Rect(self.camera_target().visible(0.0)),
        }
    }

    /// Undoes (or redoes) the last step; the restored steps are replayed on their map.
    pub fn undo(&mut self, redo: bool) -> Result<(), String> {
        let done = if redo {
            self.selection.redo()
        } else {
            self.selection.undo()
        };
        let ids = self.selection.names_items();
        if done {
            self.with_lookup(ids, |sel, at| sel.recompute(at))
                .map_err(|e| e.to_string())
        } else {
            Ok(())
        }
    }

    /// Enter in a selection mode: a point at the centre of the view (a rectangle's second corner
    /// completes it). Returns the finished step when the shape is complete.
    pub fn key_point(&mut self, add: bool, subtract: bool) -> Option<Step> {
        if self.mode == Mode::Move {
            return None;
        }
        let rectangle = self.mode == Mode::Rectangle;
        let centre = self.camera_target().centre;
        let op = sketch_for(self.mode, add, subtract).map_or(Op::Replace, |s| s.op);
        let ks = self.key_sketch.get_or_insert_with(|| KeySketch {
            op,
            rectangle,
            points: Vec::new(),
        });
        ks.points.push(centre);
        if rectangle && ks.points.len() >= 2 {
            return self.key_close().ok().flatten();
        }
        None
    }

    /// Space: closes the keyboard lasso into its step. Ok(None): there is none; Err: it is not
    /// complete yet (it stays, and the text says what it lacks).
    pub fn key_close(&mut self) -> Result<Option<Step>, &'static str> {
        let Some(ks) = &self.key_sketch else {
            return Ok(None);
        };
        if let Some(why) = ks.missing() {
            return Err(why);
        }
        let ks = self.key_sketch.take().expect("checked above");
        Ok(ks.shape().map(|shape| Step { op: ks.op, shape }))
    }

    /// The corpus's items: the selection narrowed by the filters, in atlas order.
    pub fn corpus_items(&mut self) -> Result<Vec<usize>, String> {
        let steps = self.selection.steps().to_vec();
        let filters = self.filters.list().to_vec();
        let cols = std::mem::take(&mut self.atlas.fields);
        let ids = steps.iter().any(|s| matches!(s.shape, Shape::Ids(_)));
        let items = self.with_lookup(ids, |_, at| corpus_mask(&steps, &filters, &cols, at));
        self.atlas.fields = cols;
        items
            .map(|m| m.items().collect())
            .map_err(|e| e.to_string())
    }

    /// The name of the map the selection is on.
    pub fn selection_map_name(&self) -> &str {
        &self.atlas.maps[self.selection.map.min(self.atlas.maps.len() - 1)].name
    }

    /// After any change of the selection or the filters: how items are dimmed, the tray's items,
    /// and what the page shows of the corpus.
    pub fn corpus_changed(&mut self) -> CorpusState {
        self.retone();
        let (sel, pass) = (self.selection.mask(), self.filters.passing());
        let corpus_mask: Option<Mask> = match (sel, pass) {
            (Some(s), Some(p)) => {
                let mut m = s.clone();
                m.and(p);
                Some(m)
            }
            (Some(m), None) | (None, Some(m)) => Some(m.clone()),
            (None, None) => None,
        };
        let state = CorpusState {
            selected: sel.map(|m| m.count()),
            corpus: corpus_mask.as_ref().map(|m| m.count()),
            figures: corpus_mask
                .as_ref()
                .map(|m| vitrine_corpus::summary::figures(&self.atlas.fields, m, 3)),
            history: self.selection.history(),
            description: vitrine_corpus::corpus::describe(
                self.selection_map_name(),
                self.selection.steps(),
                self.filters.list(),
            ),
        };
        self.tray_items = corpus_mask
            .as_ref()
            .map(|m| m.items().map(|i| i as u32).collect())
            .unwrap_or_default();
        state
    }

    /// The theme changed: the dimming is made again against its paper, and every kept mark drawn again.
    pub fn set_theme(&mut self, theme: Theme) {
        self.theme = theme;
        self.retone();
    }

    /// How every item is dimmed for the selection and the filters (towards the theme's paper);
    /// the kept marks are drawn again.
    fn retone(&mut self) {
        // A tiled atlas: colours only where its leaves are here.
        let runs: Option<Vec<[u64; 2]>> = self.atlas.tiled.as_ref().map(|t| {
            (0..t.runs.len())
                .filter(|&l| t.leaf_state[l] == crate::tiled::Fetch::Here)
                .map(|l| t.runs[l])
                .collect()
        });
        self.tones = crate::selection::tones_within(
            &self.atlas.colours,
            self.theme.paper,
            self.selection.mask(),
            self.filters.passing(),
            self.filters.hide,
            runs.as_deref(),
        );
        self.tones_generation += 1;
    }
}
