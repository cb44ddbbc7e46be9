//! The page's side of selection: lasso and box drawn with the pointer, clicks that add or remove
//! one item, undo and redo, the selected count, the corpus tray and its exports (downloads).

use super::*;
use vitrine_corpus::corpus::{corpus_mask, AtlasRef, CorpusFile, Lookup, Made, Op, Shape, Step};
use vitrine_corpus::corpus::{CORPUS_FORMAT, CORPUS_VERSION};
use vitrine_corpus::export::{build_record, csv, iiif_manifest, IiifOptions};

/// What a drag on the map does.
#[derive(Clone, Copy, PartialEq, Eq)]
pub enum Mode {
    Move,
    Lasso,
    Box,
}

/// A lasso or box being drawn: screen points (canvas pixels) and what it will do.
pub struct Sketch {
    pub op: Op,
    pub boxed: bool,
    pub points: Vec<[f64; 2]>,
}

/// Screen points closer than this to the last kept one are dropped from a lasso.
const LASSO_STEP_PX: f64 = 3.0;

impl Mode {
    fn name(self) -> &'static str {
        match self {
            Mode::Move => "move",
            Mode::Lasso => "lasso",
            Mode::Box => "box",
        }
    }
}

/// Switches the drag mode (the same mode again goes back to moving the map).
pub fn set_mode(m: Mode) {
    let Some(app) = app() else { return };
    let m = {
        let mut a = app.borrow_mut();
        a.mode = if a.mode == m { Mode::Move } else { m };
        // A keyboard sketch belongs to the mode it was begun in.
        a.key_sketch = None;
        show_key_sketch(&a);
        a.mode
    };
    set_state("mode", m.name());
    for (id, mode) in [("mode-lasso", Mode::Lasso), ("mode-box", Mode::Box)] {
        if let Some(b) = by_id(id) {
            let _ = b.set_attribute("aria-pressed", if m == mode { "true" } else { "false" });
        }
    }
    if let Some(c) = by_id("map") {
        let _ = c
            .class_list()
            .toggle_with_force("selecting", m != Mode::Move);
    }
}

/// What a drag starting now does with these modifier keys: a sketch, or None (move the map).
pub fn sketch_for(mode: Mode, shift: bool, alt: bool) -> Option<Sketch> {
    let op = if shift {
        Op::Add
    } else if alt {
        Op::Subtract
    } else {
        Op::Replace
    };
    match mode {
        Mode::Move if !(shift || alt) => None,
        Mode::Box => Some(Sketch {
            op,
            boxed: true,
            points: Vec::new(),
        }),
        _ => Some(Sketch {
            op,
            boxed: false,
            points: Vec::new(),
        }),
    }
}

impl Sketch {
    pub fn extend(&mut self, p: [f64; 2]) {
        let far = self
            .points
            .last()
            .is_none_or(|q| (p[0] - q[0]).hypot(p[1] - q[1]) >= LASSO_STEP_PX);
        if self.boxed && self.points.len() >= 2 {
            self.points[1] = p;
        } else if far {
            self.points.push(p);
        }
    }

    /// Whether the pointer barely moved (a click, not a drawing).
    pub fn is_click(&self) -> bool {
        let (mut lo, mut hi) = ([f64::INFINITY; 2], [f64::NEG_INFINITY; 2]);
        for p in &self.points {
            for k in 0..2 {
                lo[k] = lo[k].min(p[k]);
                hi[k] = hi[k].max(p[k]);
            }
        }
        self.points.len() < 2 || (hi[0] - lo[0]).max(hi[1] - lo[1]) < 5.0
    }
}

/// A lasso or box drawn from the keyboard: Enter drops a vertex (a corner) at the centre of the
/// view, which the arrow keys and zoom keys move; Space closes a lasso. Vertices are kept in map
/// coordinates, so the view may move between them.
pub struct KeySketch {
    pub op: Op,
    pub boxed: bool,
    pub points: Vec<[f64; 2]>,
}

/// Enter in lasso or box mode: a vertex at the view's centre; a box's second corner applies it.
/// The first vertex fixes what the lasso does: Shift adds, Alt takes away.
pub fn key_vertex(shift: bool, alt: bool) {
    let Some(app) = app() else { return };
    let (boxed, n) = {
        let mut a = app.borrow_mut();
        if a.mode == Mode::Move {
            return;
        }
        let boxed = a.mode == Mode::Box;
        let centre = camera_target(&a).centre;
        let op = sketch_for(a.mode, shift, alt).map_or(Op::Replace, |s| s.op);
        let ks = a.key_sketch.get_or_insert_with(|| KeySketch {
            op,
            boxed,
            points: Vec::new(),
        });
        ks.points.push(centre);
        (boxed, ks.points.len())
    };
    if boxed && n >= 2 {
        key_close();
    } else {
        show_key_sketch(&app.borrow());
        // The hint sits by the crosshair (a note in the bar would make the bar, and the map, change size).
        let hint = if boxed {
            "corner 1 — move the view, Enter for the other corner".to_string()
        } else {
            format!("point {n} — move the view, Enter for the next; Space closes, Escape drops")
        };
        if let Some(h) = by_id("crosshair-hint") {
            h.set_text_content(Some(&hint));
        }
        request_frame();
    }
}

/// Space in lasso mode: closes the keyboard lasso and applies it; false when none is being drawn.
/// A lasso of fewer than three points, or a box with one corner, stays as it is, with a note.
pub fn key_close() -> bool {
    let Some(app) = app() else { return false };
    let short = match app.borrow().key_sketch.as_ref() {
        None => return false,
        Some(ks) if ks.boxed => (ks.points.len() < 2)
            .then_some("A box needs its other corner: move the view and press Enter."),
        Some(ks) => (ks.points.len() < 3).then_some(
            "A lasso needs three points at least: move the view and press Enter for each.",
        ),
    };
    if let Some(why) = short {
        if let Some(h) = by_id("crosshair-hint") {
            h.set_text_content(Some(why));
        }
        return true;
    }
    let Some(ks) = app.borrow_mut().key_sketch.take() else {
        return false;
    };
    show_key_sketch(&app.borrow());
    let shape = if ks.boxed {
        let (a, b) = (ks.points[0], ks.points[1]);
        Shape::Rect([a[0], a[1], b[0], b[1]])
    } else {
        Shape::Lasso(vitrine_corpus::polygon::Polygon(ks.points))
    };
    apply(Step { op: ks.op, shape });
    true
}

/// Escape: drops the keyboard lasso or box being drawn; false when there is none.
pub fn key_cancel() -> bool {
    let Some(app) = app() else { return false };
    let had = app.borrow_mut().key_sketch.take().is_some();
    if had {
        show_key_sketch(&app.borrow());
        note("");
    }
    had
}

/// The keyboard sketch over the map as the view now is: its vertices joined to the centre of the
/// view (marked by a crosshair), or nothing.
pub fn show_key_sketch(a: &App) {
    let cross = by_id("crosshair");
    let Some(ks) = &a.key_sketch else {
        if let Some(c) = cross {
            c.set_hidden(true);
        }
        if a.sketch.is_none() {
            draw_sketch(None);
        }
        return;
    };
    if let Some(c) = cross {
        c.set_hidden(false);
    }
    let cam = a.camera;
    let screen = |p: [f64; 2]| cam.to_screen([p[0] as f32, p[1] as f32]);
    let centre = [cam.size[0] / 2.0, cam.size[1] / 2.0];
    let mut points: Vec<[f64; 2]> = ks.points.iter().map(|&p| screen(p)).collect();
    points.push(centre);
    draw_sketch(Some(&Sketch {
        op: ks.op,
        boxed: ks.boxed,
        points,
    }));
}

/// The items in view: v makes them the selection, Shift+V adds them.
pub fn select_view(add: bool) {
    let Some(app) = app() else { return };
    let r = camera_target(&app.borrow()).visible(0.0);
    apply(Step {
        op: if add { Op::Add } else { Op::Replace },
        shape: Shape::Rect(r),
    });
}

/// Redraws the sketch overlay (an SVG outline over the map), or hides it.
pub fn draw_sketch(s: Option<&Sketch>) {
    let Some(svg) = document().get_element_by_id("sketch") else {
        return;
    };
    let Some(s) = s.filter(|s| s.points.len() >= 2) else {
        let _ = svg.set_attribute("hidden", "");
        return;
    };
    let k = css_per_px();
    let pts: Vec<[f64; 2]> = if s.boxed {
        let (a, b) = (s.points[0], s.points[1]);
        vec![a, [b[0], a[1]], b, [a[0], b[1]]]
    } else {
        s.points.clone()
    };
    let text: Vec<String> = pts
        .iter()
        .map(|p| format!("{:.1},{:.1}", p[0] * k, p[1] * k))
        .collect();
    if let Some(poly) = svg.query_selector("polygon").ok().flatten() {
        let _ = poly.set_attribute("points", &text.join(" "));
        let _ = poly.set_attribute(
            "class",
            match s.op {
                Op::Subtract => "subtract",
                _ => "add",
            },
        );
    }
    let _ = svg.remove_attribute("hidden");
}

/// The item index of an id (the index is made on first use).
pub fn index_of(a: &mut App) -> Option<&HashMap<String, usize>> {
    // Never from the empty id table of a catalogue still loading.
    if a.id_index.is_none() && a.atlas.catalogue {
        let m = (0..a.atlas.n)
            .map(|i| (a.atlas.ids.get(i).to_string(), i))
            .collect();
        a.id_index = Some(m);
    }
    a.id_index.as_ref()
}

/// Runs `f` with the selection and a lookup on the selection's map.
pub fn with_lookup<R>(
    a: &mut App,
    needs_ids: bool,
    f: impl FnOnce(&mut vitrine_view::selection::Selection, &Lookup) -> R,
) -> R {
    // The id index (a million strings for a million items) is made only when a step names items.
    if needs_ids {
        index_of(a);
    }
    let App {
        atlas,
        selection,
        id_index,
        grid,
        ..
    } = a;
    let selection_map = &selection.map.min(atlas.maps.len() - 1);
    let find = |id: &str| id_index.as_ref().and_then(|m| m.get(id).copied());
    let same_map = *selection_map == atlas.current;
    let near = |r: [f64; 4]| {
        let mut v = Vec::new();
        grid.query_any_order(r, &mut v);
        v
    };
    let at = Lookup {
        positions: &atlas.maps[*selection_map].positions,
        index_of: &find,
        // The grid is of the map shown: it can narrow lassos only on that map.
        near: if same_map { Some(&near) } else { None },
    };
    f(selection, &at)
}

/// Adds a step to the selection (the page's count, tray and picture follow).
pub fn apply(step: Step) {
    let Some(app) = app() else { return };
    note("");
    let result = {
        let mut a = app.borrow_mut();
        if !a.atlas.catalogue {
            return note("The catalogue is still loading: select again in a moment.");
        }
        let drawn = matches!(step.shape, Shape::Lasso(_) | Shape::Rect(_));
        if a.selection.steps().is_empty() {
            begin_here(&mut a);
        } else if drawn && a.selection.map != a.atlas.current {
            let name = a.atlas.maps[a.selection.map].name.clone();
            drop(a);
            return note(&format!(
                "This selection was drawn on the {name} map: go back to it to draw more, or clear it (x) to start on this one."
            ));
        }
        let ids = matches!(step.shape, Shape::Ids(_));
        with_lookup(&mut a, ids, |sel, at| sel.push(step, at))
    };
    refresh();
    if let Err(e) = result {
        note(&e.to_string());
    }
}

/// A selection begun now (there are no steps yet) is on the map shown.
pub fn begin_here(a: &mut App) {
    if a.selection.steps().is_empty() {
        a.selection.map = a.atlas.current;
    }
}

/// Ends a sketch at pointer-up: a lasso or box becomes a step; a click adds or removes the item
/// under the pointer.
pub fn finish(s: Sketch, p: [f64; 2]) {
    draw_sketch(None);
    let Some(app) = app() else { return };
    if s.is_click() {
        let i = app.borrow().pick(p);
        if let Some(i) = i {
            toggle(i);
        }
        return;
    }
    let cam = app.borrow().camera;
    let shape = if s.boxed {
        let (a, b) = (cam.to_map(s.points[0]), cam.to_map(s.points[1]));
        Shape::Rect([a[0], a[1], b[0], b[1]])
    } else {
        let pts = s.points.iter().map(|&q| cam.to_map(q)).collect();
        Shape::Lasso(vitrine_corpus::polygon::Polygon(pts))
    };
    apply(Step { op: s.op, shape });
}

/// Adds item `i` to the selection, or removes it when it is selected.
pub fn toggle(i: usize) {
    let Some(app) = app() else { return };
    let (id, on) = {
        let a = app.borrow();
        let on = a.selection.mask().is_some_and(|m| m.get(i));
        (a.atlas.id(i).to_string(), on)
    };
    if id.is_empty() {
        return;
    }
    let op = if on { Op::Subtract } else { Op::Add };
    apply(Step {
        op,
        shape: Shape::Ids(vec![id]),
    });
}

pub fn everything() {
    apply(Step {
        op: Op::Replace,
        shape: Shape::Everything(Default::default()),
    });
}

pub fn clear() {
    if let Some(app) = app() {
        app.borrow_mut().selection.clear();
    }
    refresh();
}

pub fn undo(redo: bool) {
    let Some(app) = app() else { return };
    let r = {
        let mut a = app.borrow_mut();
        let done = if redo {
            a.selection.redo()
        } else {
            a.selection.undo()
        };
        let ids = a.selection.names_items();
        // Replayed on the map the restored steps were drawn on.
        if done {
            with_lookup(&mut a, ids, |sel, at| sel.recompute(at))
        } else {
            Ok(())
        }
    };
    refresh();
    if let Err(e) = r {
        note(&e.to_string());
    }
}

/// A short note in the bar's status line (cleared by the next one).
pub fn note(text: &str) {
    if let Some(n) = by_id("select-note") {
        n.set_text_content(Some(text));
        n.set_hidden(text.is_empty());
    }
}

/// The corpus's items: the selection narrowed by the filters, in atlas order.
fn corpus_items(a: &mut App) -> Vec<usize> {
    let steps = a.selection.steps().to_vec();
    let filters = a.filters.list().to_vec();
    let cols = std::mem::take(&mut a.atlas.fields);
    let ids = steps.iter().any(|s| matches!(s.shape, Shape::Ids(_)));
    let items = with_lookup(a, ids, |_, at| corpus_mask(&steps, &filters, &cols, at));
    a.atlas.fields = cols;
    match items {
        Ok(m) => m.items().collect(),
        Err(e) => {
            note(&e.to_string());
            Vec::new()
        }
    }
}

/// After any change of the selection: the dimming, the count, the tray, the undo buttons.
pub fn refresh() {
    let Some(app) = app() else { return };
    let (count, corpus, history, any) = {
        let mut a = app.borrow_mut();
        let paper = READING_ROOM.paper;
        let (sel, pass) = (a.selection.mask(), a.filters.passing());
        let tones =
            vitrine_view::selection::tones(&a.atlas.colours, paper, sel, pass, a.filters.hide);
        let corpus_mask = match (sel, pass) {
            (Some(s), Some(p)) => {
                let mut m = s.clone();
                m.and(p);
                Some(m)
            }
            (Some(m), None) | (None, Some(m)) => Some(m.clone()),
            (None, None) => None,
        };
        let corpus = corpus_mask.as_ref().map(|m| m.count());
        let figures = corpus_mask
            .as_ref()
            .map(|m| vitrine_corpus::summary::figures(&a.atlas.fields, m, 3));
        show_figures(figures.as_ref());
        let count = sel.map(|m| m.count());
        a.tray_items = corpus_mask
            .as_ref()
            .map(|m| m.items().map(|i| i as u32).collect())
            .unwrap_or_default();
        a.tones = tones;
        a.tones_generation += 1;
        let history = a.selection.history();
        (count, corpus, history, corpus.is_some())
    };
    set_state("corpus", &corpus.map_or(String::new(), |c| c.to_string()));
    set_state("selected", &count.map_or(String::new(), |c| c.to_string()));
    if let Some(c) = by_id("selected-count") {
        c.set_text_content(Some(&match count {
            Some(1) => "1 selected".to_string(),
            Some(c) => format!("{c} selected"),
            None => String::new(),
        }));
    }
    if let Some(t) = by_id("tray") {
        t.set_hidden(!any);
    }
    if let Some(t) = by_id("tray-count") {
        t.set_text_content(Some(&corpus.unwrap_or(0).to_string()));
    }
    for (id, on) in [("undo", history.0), ("redo", history.1)] {
        if let Some(b) = by_id(id) {
            let _ = if on {
                b.remove_attribute("disabled")
            } else {
                b.set_attribute("disabled", "")
            };
        }
    }
    if let Some(d) = by_id("tray-how") {
        let a = app.borrow();
        let map = &a.atlas.maps[a.selection.map.min(a.atlas.maps.len() - 1)].name;
        d.set_text_content(Some(&vitrine_corpus::corpus::describe(
            map,
            a.selection.steps(),
            a.filters.list(),
        )));
    }
    timeline_strip::draw();
    tray::schedule();
    // The address carries the corpus (when it fits in a link).
    let _ = share::update_address();
    request_frame();
}

/// The tray's figures: the years the corpus spans and the commonest values of each category.
fn show_figures(f: Option<&vitrine_corpus::summary::Figures>) {
    let Some(dl) = by_id("tray-figures") else {
        return;
    };
    dl.set_text_content(None);
    let Some(f) = f else { return };
    let doc = document();
    let line = |k: &str, v: &str| {
        let dt = doc.create_element("dt").unwrap();
        dt.set_text_content(Some(k));
        let dd = doc.create_element("dd").unwrap();
        dd.set_text_content(Some(v));
        let _ = dl.append_child(&dt);
        let _ = dl.append_child(&dd);
    };
    for (name, a, b) in &f.spans {
        line(name, &format!("{a}–{b}"));
    }
    for (name, top) in &f.top {
        let v: Vec<String> = top
            .iter()
            .map(|(value, n)| format!("{value} {}%", (100 * n) / f.count.max(1) as u64))
            .collect();
        line(name, &v.join(", "));
    }
}

/// Offers `text` as a file download.
fn download(name: &str, mime: &str, text: &str) {
    let parts = js_sys::Array::of1(&JsValue::from_str(text));
    let opts = web_sys::BlobPropertyBag::new();
    opts.set_type(mime);
    let Ok(blob) = web_sys::Blob::new_with_str_sequence_and_options(&parts, &opts) else {
        return;
    };
    let Ok(url) = web_sys::Url::create_object_url_with_blob(&blob) else {
        return;
    };
    if let Ok(a) = document().create_element("a") {
        let a: web_sys::HtmlAnchorElement = a.unchecked_into();
        a.set_href(&url);
        a.set_download(name);
        a.click();
    }
    let _ = web_sys::Url::revoke_object_url(&url);
}

/// A file name from the atlas title: letters, digits and dashes.
fn file_stem(title: &str) -> String {
    let s: String = title
        .chars()
        .map(|c| {
            if c.is_alphanumeric() {
                c.to_ascii_lowercase()
            } else {
                '-'
            }
        })
        .collect();
    let s = s
        .split('-')
        .filter(|p| !p.is_empty())
        .collect::<Vec<_>>()
        .join("-");
    if s.is_empty() {
        "atlas".into()
    } else {
        s
    }
}

/// Writes the corpus as `kind` ("csv", "json" for the corpus file, "iiif") and downloads it.
pub fn export(kind: &str) {
    let Some(app) = app() else { return };
    let mut a = app.borrow_mut();
    if !a.atlas.catalogue {
        drop(a);
        return note("The catalogue is still loading: export in a moment.");
    }
    let items = corpus_items(&mut a);
    let m = &a.atlas.manifest;
    let stem = format!("{}-corpus-{}", file_stem(&m.title), items.len());
    let map = a.atlas.maps[a.selection.map.min(a.atlas.maps.len() - 1)]
        .name
        .clone();
    let description = vitrine_corpus::corpus::describe(&map, a.selection.steps(), a.filters.list());
    let (name, mime, text) = match kind {
        "csv" => (
            format!("{stem}.csv"),
            "text/csv;charset=utf-8",
            csv(m, &a.atlas.ids, &a.atlas.fields, &items),
        ),
        "iiif" => {
            let href = web_sys::window()
                .and_then(|w| w.location().href().ok())
                .unwrap_or_default();
            let dir = href.split(['?', '#']).next().unwrap_or("");
            let dir = &dir[..dir.rfind('/').map_or(0, |k| k + 1)];
            let base = format!("{dir}corpus/{}/", &a.manifest_sha[..16]);
            let summary = format!("{} items of {}: {description}", items.len(), m.title);
            let sizes = (!a.atlas.image_sizes.is_empty()).then_some(a.atlas.image_sizes.as_slice());
            let o = IiifOptions {
                base: &base,
                image_sizes: sizes,
                extents: &a.atlas.extents,
                summary: &summary,
            };
            let v = iiif_manifest(m, &a.atlas.ids, &a.atlas.fields, &items, &o);
            (
                format!("{stem}.iiif.json"),
                "application/ld+json",
                serde_json::to_string_pretty(&v).unwrap_or_default(),
            )
        }
        _ => {
            let file = CorpusFile {
                format: CORPUS_FORMAT.into(),
                format_version: CORPUS_VERSION,
                atlas: AtlasRef {
                    title: m.title.clone(),
                    manifest_sha256: a.manifest_sha.clone(),
                    item_count: m.item_count,
                },
                build: build_record(m),
                map,
                steps: a.selection.steps().to_vec(),
                filters: a.filters.list().to_vec(),
                count: items.len(),
                ids: items
                    .iter()
                    .map(|&i| a.atlas.ids.get(i).to_string())
                    .collect(),
                made: Made {
                    tool: "vitrine".into(),
                    tool_version: env!("CARGO_PKG_VERSION").into(),
                    time: js_sys::Date::new_0().to_iso_string().into(),
                    by: "viewer".into(),
                },
            };
            (
                format!("{stem}.corpus.json"),
                "application/json",
                file.to_json(),
            )
        }
    };
    drop(a);
    download(&name, mime, &text);
}

/// The selection's buttons and keys.
pub fn install() {
    for (id, what) in [
        ("mode-lasso", 0u8),
        ("mode-box", 1),
        ("undo", 2),
        ("redo", 3),
        ("clear", 4),
        ("select-all", 5),
        ("export-csv", 6),
        ("export-json", 7),
        ("export-iiif", 8),
    ] {
        if let Some(b) = by_id(id) {
            listen(
                &b,
                "click",
                true,
                move |_e: web_sys::MouseEvent| match what {
                    0 => set_mode(Mode::Lasso),
                    1 => set_mode(Mode::Box),
                    2 => undo(false),
                    3 => undo(true),
                    4 => clear(),
                    5 => everything(),
                    6 => export("csv"),
                    7 => export("json"),
                    _ => export("iiif"),
                },
            );
        }
    }
    set_state("mode", "move");
    refresh();
}

/// For tests and scripts: selects with a lasso through canvas points [x0, y0, x1, y1, ...] and
/// `op` ("replace", "add" or "subtract"), as a drawn lasso does; returns the selected count.
#[wasm_bindgen]
pub fn select_lasso(points: Vec<f64>, op: &str) -> usize {
    let op = match op {
        "add" => Op::Add,
        "subtract" => Op::Subtract,
        _ => Op::Replace,
    };
    let s = Sketch {
        op,
        boxed: false,
        points: points.chunks_exact(2).map(|p| [p[0], p[1]]).collect(),
    };
    if let Some(&last) = s.points.last() {
        finish(s, last);
    }
    app()
        .and_then(|a| a.borrow().selection.mask().map(|m| m.count()))
        .unwrap_or(0)
}
