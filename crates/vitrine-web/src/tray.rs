//! The corpus tray's grid of pictures: a scrolling grid of every item in the corpus, in atlas
//! order, made only for the rows in view (a corpus of a million items makes a few dozen tiles).
//! A tile opens its record card; its × (or Delete on it) takes the item out of the corpus.

use super::*;
use vitrine_view::tray::{self as layout, PITCH};

/// Milliseconds the corpus must stay unchanged before the grid shows its pictures again: while a
/// brush is dragged or filters are clicked through, the count and figures follow at once, but
/// the pictures (thumbnail sheets the browser must fetch and decode) only once it settles.
const SETTLE_MS: i32 = 250;

thread_local! {
    static TIMER: RefCell<Option<i32>> = const { RefCell::new(None) };
}

/// The corpus changed: the grid is drawn again once it has stayed so for [`SETTLE_MS`] (an empty
/// corpus empties it at once).
pub fn schedule() {
    if app().is_some_and(|a| a.borrow().tray_items.is_empty()) {
        return render();
    }
    let Some(w) = web_sys::window() else { return };
    TIMER.with(|t| {
        if let Some(id) = t.borrow_mut().take() {
            w.clear_timeout_with_handle(id);
        }
        let cb = Closure::once_into_js(|| {
            TIMER.with(|t| t.borrow_mut().take());
            render();
        });
        *t.borrow_mut() = w
            .set_timeout_with_callback_and_timeout_and_arguments_0(cb.unchecked_ref(), SETTLE_MS)
            .ok();
    });
}

/// Draws the tiles in view now (after the grid scrolled, or an item was taken out through it).
pub fn render() {
    if let Some(id) = TIMER.with(|t| t.borrow_mut().take()) {
        if let Some(w) = web_sys::window() {
            w.clear_timeout_with_handle(id);
        }
    }
    let Some(app) = app() else { return };
    let (Some(grid), Some(space)) = (by_id("tray-grid"), by_id("tray-space")) else {
        return;
    };
    let a = app.borrow();
    let n = a.tray_items.len();
    // The tile that has the keyboard focus gets it back once the tiles are made anew.
    let focused: Option<String> = document()
        .active_element()
        .filter(|e| space.contains(Some(e.as_ref())))
        .and_then(|e| e.closest(".tile").ok().flatten())
        .and_then(|t| t.get_attribute("data-item"));
    grid.set_hidden(n == 0);
    space.set_text_content(None);
    if n == 0 {
        return;
    }
    let width = grid.client_width() as f64;
    let cols = layout::columns(width);
    // The columns spread over the whole width.
    let pitch_x = (width / cols as f64).max(PITCH);
    let rows = n.div_ceil(cols);
    let _ = space
        .style()
        .set_property("height", &format!("{}px", rows as f64 * PITCH));
    let range = layout::visible(
        n,
        cols,
        grid.scroll_top() as f64,
        grid.client_height().max(PITCH as i32) as f64,
    );
    let dpr = web_sys::window().map_or(1.0, |w| w.device_pixel_ratio());
    let doc = document();
    // A tiled atlas: the leaves of the items shown whose drawing data is not here yet.
    let mut leaves: Vec<usize> = Vec::new();
    for k in range {
        let i = a.tray_items[k] as usize;
        if !a.atlas.placed(i) {
            if let Some(t) = &a.atlas.tiled {
                leaves.push(t.leaf_of(i));
            }
        }
        let label = a.atlas.label(i);
        let tile: HtmlElement = doc.create_element("div").unwrap().dyn_into().unwrap();
        tile.set_class_name(match crate::grow::mark_of(i) {
            "like" => "tile like",
            "not" => "tile not",
            _ => "tile",
        });
        let _ = tile.dataset().set("item", &i.to_string());
        let style = tile.style();
        let _ = style.set_property("left", &format!("{:.1}px", (k % cols) as f64 * pitch_x));
        let _ = style.set_property("top", &format!("{}px", (k / cols) as f64 * PITCH));
        let pic = picture_button(&a, i, dpr);
        let remove: HtmlElement = doc.create_element("button").unwrap().dyn_into().unwrap();
        remove.set_class_name("remove");
        remove.set_text_content(Some("×"));
        remove.set_title("Take out of the corpus (Delete)");
        let _ = remove.set_attribute("aria-label", &format!("Take {label} out of the corpus"));
        let _ = tile.append_child(&pic);
        let _ = tile.append_child(&remove);
        let _ = space.append_child(&tile);
    }
    set_state("trayTiles", &space.child_element_count().to_string());
    drop(a);
    leaves.sort_unstable();
    leaves.dedup();
    for leaf in leaves {
        super::fetch_leaf(leaf);
    }
    if let Some(item) = focused {
        focus_pic(&item);
    }
}

/// A button showing item `i`'s picture at tile size (its colour until the sheet is here),
/// named for opening its record.
pub fn picture_button(a: &App, i: usize, dpr: f64) -> HtmlElement {
    let label = a.atlas.label(i);
    let pic: HtmlElement = document()
        .create_element("button")
        .unwrap()
        .dyn_into()
        .unwrap();
    pic.set_class_name("pic");
    pic.set_title(&label);
    let _ = pic.set_attribute("aria-label", &format!("Open the record of {label}"));
    let ps = pic.style();
    if !a.atlas.placed(i) {
        // A tiled atlas's item whose leaf is on its way: a blank until it is here.
        pic.set_class_name("pic pending");
        return pic;
    }
    let c = a.atlas.colours[i];
    let _ = ps.set_property(
        "background-color",
        &format!("rgb({},{},{})", c[0], c[1], c[2]),
    );
    if let Some(sp) = layout::sprite(&a.sheets, i, a.atlas.extents[i], dpr) {
        let url = sp.url.replace('"', "%22");
        let _ = ps.set_property("background-image", &format!("url(\"{url}\")"));
        let _ = ps.set_property("background-size", &format!("{:.2}px auto", sp.sheet_w));
        let _ = ps.set_property(
            "background-position",
            &format!("{:.2}px {:.2}px", -sp.at[0], -sp.at[1]),
        );
        let _ = ps.set_property("width", &format!("{:.2}px", sp.size[0]));
        let _ = ps.set_property("height", &format!("{:.2}px", sp.size[1]));
        let _ = ps.set_property("left", &format!("{:.2}px", sp.offset[0]));
        let _ = ps.set_property("top", &format!("{:.2}px", sp.offset[1]));
    }
    pic
}

/// Gives the keyboard focus to the picture of item `item`'s tile, if it is drawn.
fn focus_pic(item: &str) {
    let sel = format!("#tray-space .tile[data-item=\"{item}\"] .pic");
    if let Some(b) = document()
        .query_selector(&sel)
        .ok()
        .flatten()
        .and_then(|e| e.dyn_into::<HtmlElement>().ok())
    {
        let _ = b.focus();
    }
}

/// The item of the tile an event happened in, and whether it was on the tile's ×.
fn tile_of(e: &web_sys::Event) -> Option<(usize, bool)> {
    let t: web_sys::Element = e.target()?.dyn_into().ok()?;
    let tile = t.closest(".tile").ok()??;
    let i = tile.get_attribute("data-item")?.parse().ok()?;
    let on_remove = t.closest(".remove").ok().flatten().is_some();
    Some((i, on_remove))
}

/// Takes item `i` out of the corpus (one undoable step), keeping the grid where it was.
fn remove(i: usize) {
    let Some(app) = app() else { return };
    let r = {
        let mut a = app.borrow_mut();
        let id = a.atlas.id(i).to_string();
        if id.is_empty() {
            return;
        }
        // The corpus may have been the filters' alone: the selection begins here.
        a.begin_here();
        a.with_lookup(true, |sel, at| sel.remove_ids(vec![id], at))
    };
    if let Err(e) = r {
        select::note(&e.to_string());
    }
    select::refresh();
    // The grid answers its own click at once (and keeps the focus where it was).
    render();
}

/// Opens item `i`'s record card, moving the view to it when it is off screen.
fn show(i: usize) {
    let Some(app) = app() else { return };
    let to = {
        let a = app.borrow();
        let p = a.atlas.positions[i];
        let s = a.camera.to_screen(p);
        let [w, h] = a.camera.size;
        (s[0] < 0.0 || s[1] < 0.0 || s[0] > w || s[1] > h).then(|| {
            let mut c = a.camera_target();
            c.centre = [p[0] as f64, p[1] as f64];
            c
        })
    };
    if let Some(c) = to {
        glide_to(c, 400.0);
    }
    open_card(Some(i));
}

pub fn install() {
    let Some(grid) = by_id("tray-grid") else {
        return;
    };
    listen(&grid, "scroll", true, move |_e: web_sys::Event| render());
    listen(&grid, "click", false, move |e: web_sys::MouseEvent| {
        if let Some((i, on_remove)) = tile_of(&e) {
            if on_remove {
                remove(i)
            } else {
                show(i)
            }
        }
    });
    listen(&grid, "keydown", false, move |e: web_sys::KeyboardEvent| {
        // . and , mark the tile's item "like these" and "not these" for growing the corpus.
        if matches!(e.key().as_str(), "." | ",") {
            if let Some((i, _)) = tile_of(&e) {
                e.prevent_default();
                e.stop_propagation();
                // (Marking draws the grid again.)
                crate::grow::toggle(i, if e.key() == "." { "like" } else { "not" });
                focus_pic(&i.to_string());
            }
            return;
        }
        if !matches!(e.key().as_str(), "Delete" | "Backspace") {
            return;
        }
        if let Some((i, _)) = tile_of(&e) {
            e.prevent_default();
            e.stop_propagation();
            // Focus stays in the grid: on the tile that takes the removed one's place.
            let k = app().and_then(|a| a.borrow().tray_items.iter().position(|&j| j as usize == i));
            remove(i);
            if let Some(k) = k {
                focus_tile(k);
            }
        }
    });
}

/// Moves the keyboard focus to the picture of tile `k` (or the last), if it is drawn.
fn focus_tile(k: usize) {
    let Some(app) = app() else { return };
    let item = {
        let a = app.borrow();
        let n = a.tray_items.len();
        if n == 0 {
            return;
        }
        a.tray_items[k.min(n - 1)]
    };
    focus_pic(&item.to_string());
}
