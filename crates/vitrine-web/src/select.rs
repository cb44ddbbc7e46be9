//! The page's side of selection: lasso and rectangle outlines over the map, the mode buttons,
//! the keyboard lasso's crosshair, notes, the corpus tray and its exports (downloads). What is
//! selected, and how, is decided by the core's viewer.

use super::*;
use vitrine_corpus::coding::{code_columns, Coded};
use vitrine_corpus::corpus::{AtlasRef, CorpusFile, Made, Op, Shape, Step};
use vitrine_corpus::corpus::{CORPUS_FORMAT, CORPUS_VERSION};
use vitrine_corpus::export::{build_record, csv, iiif_manifest, CsvStyle, IiifOptions};
use vitrine_view::sketch::Sketch;

/// Switches the drag mode (the same mode again goes back to moving the map).
pub fn set_mode(m: Mode) {
    let Some(app) = app() else { return };
    let m = {
        let mut a = app.borrow_mut();
        let m = a.set_mode(m);
        show_key_sketch(&a);
        m
    };
    set_state("mode", m.name());
    for (id, mode) in [
        ("mode-lasso", Mode::Lasso),
        ("mode-rectangle", Mode::Rectangle),
    ] {
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

/// Enter in a selection mode: a point (a corner) at the view's centre; a rectangle's second
/// corner applies it.
pub fn key_point(add: bool, subtract: bool) {
    let Some(app) = app() else { return };
    let done = app.borrow_mut().key_point(add, subtract);
    match done {
        Some(step) => {
            show_key_sketch(&app.borrow());
            apply(step);
        }
        None => {
            let hint = app.borrow().key_sketch.as_ref().map(|k| k.hint());
            show_key_sketch(&app.borrow());
            // The hint sits by the crosshair (a note in the bar would make the bar, and the map, change size).
            if let (Some(h), Some(hint)) = (by_id("crosshair-hint"), hint) {
                h.set_text_content(Some(&hint));
            }
            request_frame();
        }
    }
}

/// Space in a selection mode: closes the keyboard lasso and applies it; false when none is
/// being drawn. One that is not complete stays as it is, with a note by the crosshair.
pub fn key_close() -> bool {
    let Some(app) = app() else { return false };
    let closed = app.borrow_mut().key_close();
    match closed {
        Ok(None) => false,
        Err(why) => {
            if let Some(h) = by_id("crosshair-hint") {
                h.set_text_content(Some(why));
            }
            true
        }
        Ok(Some(step)) => {
            show_key_sketch(&app.borrow());
            apply(step);
            true
        }
    }
}

/// Escape: drops the keyboard lasso or rectangle being drawn; false when there is none.
pub fn key_cancel() -> bool {
    let Some(app) = app() else { return false };
    let had = app.borrow_mut().key_sketch.take().is_some();
    if had {
        show_key_sketch(&app.borrow());
        note("");
    }
    had
}

/// The keyboard sketch over the map as the view now is: its points joined to the centre of the
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
    draw_sketch(Some(&ks.on_screen(&a.camera)));
}

/// The items in view: v makes them the selection, Shift+V adds them.
pub fn select_view(add: bool) {
    let Some(app) = app() else { return };
    let step = app.borrow().view_step(add);
    apply(step);
}

/// Redraws the sketch overlay (an SVG outline over the map), or hides it.
pub fn draw_sketch(s: Option<&Sketch>) {
    let Some(svg) = document().get_element_by_id("sketch") else {
        return;
    };
    let Some((s, pts)) = s.and_then(|s| Some((s, s.outline()?))) else {
        let _ = svg.set_attribute("hidden", "");
        return;
    };
    let k = css_per_px();
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

/// Adds a step to the selection (the page's count, tray and picture follow). In a tiled atlas,
/// the leaves the outline crosses are fetched first (their items are tested one by one).
pub fn apply(step: Step) {
    let Some(app) = app() else { return };
    let wanted = app.borrow().leaves_to_test(&step);
    if wanted.is_empty() {
        return apply_now(step);
    }
    note(&format!(
        "Fetching the {} part{} of the map the outline crosses…",
        wanted.len(),
        if wanted.len() == 1 { "" } else { "s" }
    ));
    set_state("selecting", "fetching");
    wasm_bindgen_futures::spawn_local(async move {
        let failed = super::load_leaves(&wanted).await;
        set_state("selecting", "");
        apply_now(step);
        if failed > 0 {
            note(&format!(
                "{failed} part{} of the map the outline crosses could not be loaded: their items \
                 are left out of the selection.",
                if failed == 1 { "" } else { "s" }
            ));
        }
    });
}

fn apply_now(step: Step) {
    let Some(app) = app() else { return };
    note("");
    // A tiled atlas dims its overview pictures from the items' cells: fetched the first time.
    super::columns::ensure(Vec::new(), || {});
    let result = app.borrow_mut().apply_step(step);
    refresh();
    if let Err(e) = result {
        note(&e);
    }
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
    let r = app.borrow_mut().undo(redo);
    refresh();
    if let Err(e) = r {
        note(&e);
    }
}

/// A short note in the bar's status line (cleared by the next one).
pub fn note(text: &str) {
    if let Some(n) = by_id("select-note") {
        n.set_text_content(Some(text));
        n.set_hidden(text.is_empty());
    }
}

/// After any change of the selection: the dimming, the count, the tray, the undo buttons.
pub fn refresh() {
    let Some(app) = app() else { return };
    let t0 = super::now();
    super::measure::corpus_changed();
    super::bulk::corpus_changed();
    super::grow::corpus_changed();
    let t1 = super::now();
    let state = app.borrow_mut().corpus_changed();
    let t2 = super::now();
    show_figures(state.figures.as_ref());
    if let Some(b) = by_id("add-copies") {
        let a = app.borrow();
        b.set_hidden(a.atlas.copies.groups() == 0);
        let _ = if a.tray_items.is_empty() {
            b.set_attribute("disabled", "")
        } else {
            b.remove_attribute("disabled")
        };
    }
    let (count, corpus, history, any) = (
        state.selected,
        state.corpus,
        state.history,
        state.corpus.is_some(),
    );
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
        d.set_text_content(Some(&state.description));
    }
    let t3 = super::now();
    timeline_strip::draw();
    tray::schedule();
    // The address carries the corpus (when it fits in a link).
    let _ = share::update_address();
    request_frame();
    // Where a change of the corpus spends its time, for the bench.
    set_state(
        "refreshMs",
        &format!(
            "panels {:.0}, corpus {:.0}, page {:.0}, strip and address {:.0}",
            t1 - t0,
            t2 - t1,
            t3 - t2,
            super::now() - t3
        ),
    );
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
pub fn download(name: &str, mime: &str, text: &str) {
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

/// Writes the corpus as `kind` ("csv" for spreadsheets, "csv-exact" for scripts, "json" for the
/// corpus file, "iiif") and downloads it.
pub fn export(kind: &str) {
    let Some(app) = app() else { return };
    let mut a = app.borrow_mut();
    if !a.atlas.catalogue {
        drop(a);
        return note("The catalogue is still loading: export in a moment.");
    }
    let items = match a.corpus_items() {
        Ok(items) => items,
        Err(e) => {
            drop(a);
            return note(&e);
        }
    };
    let m = &a.atlas.manifest;
    let stem = format!("{}-corpus-{}", file_stem(&m.title), items.len());
    let map = a.selection_map_name().to_string();
    let description = vitrine_corpus::corpus::describe(&map, a.selection.steps(), a.filters.list());
    let (name, mime, text) = match kind {
        "csv" | "csv-exact" => {
            let style = if kind == "csv" {
                CsvStyle::Spreadsheet
            } else {
                CsvStyle::Exact
            };
            (format!("{stem}.csv"), "text/csv;charset=utf-8", {
                let coded = Coded::new(&a.coding.codes);
                let taken: Vec<&str> = a
                    .atlas
                    .fields
                    .iter()
                    .map(|f| f.field.name.as_str())
                    .collect();
                let cc = code_columns(&a.coding.book, &coded, &taken);
                csv(
                    m,
                    &a.atlas.ids,
                    &a.atlas.fields,
                    &items,
                    style,
                    Some((&cc, &coded)),
                )
            })
        }
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
                codebook: a.coding.book.clone(),
                codes: a.coding.codes.clone(),
                cleared: a.coding.clearings(),
                grow: super::grow::rounds(),
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
        ("mode-rectangle", 1),
        ("undo", 2),
        ("redo", 3),
        ("clear", 4),
        ("select-all", 5),
        ("export-csv", 6),
        ("export-json", 7),
        ("export-iiif", 8),
        ("export-csv-exact", 9),
    ] {
        if let Some(b) = by_id(id) {
            listen(
                &b,
                "click",
                true,
                move |_e: web_sys::MouseEvent| match what {
                    0 => dispatch(Action::SetMode(Mode::Lasso)),
                    1 => dispatch(Action::SetMode(Mode::Rectangle)),
                    2 => dispatch(Action::Undo),
                    3 => dispatch(Action::Redo),
                    4 => dispatch(Action::ClearSelection),
                    5 => dispatch(Action::SelectAll),
                    6 => export("csv"),
                    7 => export("json"),
                    8 => export("iiif"),
                    _ => export("csv-exact"),
                },
            );
        }
    }
    if let Some(b) = by_id("add-copies") {
        listen(&b, "click", true, |_e: web_sys::MouseEvent| {
            add_their_copies()
        });
    }
    set_state("mode", "move");
    refresh();
}

/// Adds to the corpus every copy of its pictures that is not in it yet (their whole groups).
fn add_their_copies() {
    let Some(app) = app() else { return };
    let (missing, left_out) = {
        let a = app.borrow();
        if a.selection.mask().is_none() {
            note("Copies are added to a selection: select the corpus's items first (All, or a lasso), then add their copies.");
            return;
        }
        let in_corpus: std::collections::HashSet<u32> = a.tray_items.iter().copied().collect();
        let pass = a.filters.passing();
        let (mut out, mut left_out) = (std::collections::BTreeSet::new(), 0usize);
        for &i in &a.tray_items {
            for &j in a.atlas.copies.group(i as usize) {
                if in_corpus.contains(&j) || out.contains(&(j as usize)) {
                    continue;
                }
                if pass.is_some_and(|p| !p.get(j as usize)) {
                    left_out += 1;
                } else {
                    out.insert(j as usize);
                }
            }
        }
        (out.into_iter().collect::<Vec<usize>>(), left_out)
    };
    if missing.is_empty() {
        note(&if left_out > 0 {
            format!("The corpus's pictures have no copies outside it that the filters let through ({left_out} left out).")
        } else {
            "The corpus's pictures have no copies outside it.".to_string()
        });
        return;
    }
    crate::add_copies(missing);
    if left_out > 0 {
        note(&format!("{left_out} copies are left out by the filters."));
    }
}

/// For tests and scripts: makes the corpus the items of the JSON list of ids (as a corpus file's
/// step by ids does); returns the selected count.
#[wasm_bindgen]
pub fn select_ids(json: &str) -> Result<usize, JsValue> {
    let ids: Vec<String> =
        serde_json::from_str(json).map_err(|e| JsValue::from_str(&e.to_string()))?;
    apply(Step {
        op: Op::Replace,
        shape: Shape::Ids(ids),
    });
    Ok(app()
        .and_then(|a| a.borrow().selection.mask().map(|m| m.count()))
        .unwrap_or(0))
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
        rectangle: false,
        points: points.chunks_exact(2).map(|p| [p[0], p[1]]).collect(),
    };
    if s.points.len() >= 3 {
        let step = app().map(|a| Step {
            op: s.op,
            shape: s.shape(&a.borrow().camera),
        });
        if let Some(step) = step {
            apply(step);
        }
    }
    app()
        .and_then(|a| a.borrow().selection.mask().map(|m| m.count()))
        .unwrap_or(0)
}
