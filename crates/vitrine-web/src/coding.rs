//! The page's side of coding: the coding view (a keyboard-first walk through the corpus), the
//! codebook editor, the browser's store of both (IndexedDB, written as each code is set, so a
//! closed tab or a reload loses nothing), and adding another coder's corpus file.
//!
//! What a key does is decided by the core (`vitrine_view::coding`); this module draws and stores.

use super::*;
use vitrine_corpus::coding::{
    merge_codebooks, Cleared, CodeValue, Codebook, Kind, ValueDef, Variable,
};
use vitrine_view::coding::{value_keys, CodeKey, Dirty, Effect, Order};

thread_local! {
    /// The store's state: a write under way, another asked for meanwhile, the last generation
    /// written, and whether the browser lets the page store at all.
    static SAVING: RefCell<Saving> = RefCell::new(Saving::default());
    /// The codes the store holds (so that a full rewrite removes exactly those that went, and
    /// never a record it could not read).
    static STORED: RefCell<std::collections::HashSet<CodeKey>> = RefCell::new(Default::default());
    /// Set while a view holding code fields is drawn anew: a field taken out then fires its
    /// change event, which is not a code (its text is put back into the new field).
    static QUIET: std::cell::Cell<bool> = const { std::cell::Cell::new(false) };
}

/// A field being typed in: how to find it again after a redraw, its text and caret.
pub(crate) struct Typing {
    key: String,
    value: String,
    caret: Option<u32>,
}

/// The field being typed in inside `container`, if any.
pub(crate) fn typing_in(container: &web_sys::Element) -> Option<Typing> {
    let e = document()
        .active_element()
        .filter(|e| container.contains(Some(e.as_ref())))?;
    let key = e
        .get_attribute("id")
        .map(|id| format!("#{id}"))
        .or_else(|| {
            e.get_attribute("data-field")
                .map(|f| format!("[data-field=\"{}\"]", f.replace('"', "\\\"")))
        })?;
    let f: HtmlElement = e.dyn_into().ok()?;
    if !matches!(f.tag_name().as_str(), "INPUT" | "TEXTAREA") {
        return None;
    }
    Some(Typing {
        key,
        value: field_value(&f),
        caret: field_caret(&f),
    })
}

/// Empties `container` without the change events of its fields counting as codes.
pub(crate) fn empty_quietly(container: &web_sys::Element) {
    QUIET.with(|q| q.set(true));
    container.set_text_content(None);
    QUIET.with(|q| q.set(false));
}

/// Puts the text, caret and focus of a field being typed in back into its redrawn self.
pub(crate) fn restore_typing(container: &web_sys::Element, t: Typing) {
    if let Some(f) = container
        .query_selector(&t.key)
        .ok()
        .flatten()
        .and_then(|e| e.dyn_into::<HtmlElement>().ok())
    {
        set_field(&f, &t.value, t.caret);
        let _ = f.focus();
    }
}

#[derive(Default)]
struct Saving {
    busy: bool,
    again: bool,
    written: u64,
    failed: Option<String>,
    /// The store has been read (until then coding waits, so that nothing is read over it).
    restored: bool,
}

pub(crate) fn now_utc() -> String {
    js_sys::Date::new_0().to_iso_string().into()
}

/// What a save writes: the codebook record, the codes set, the codes cleared (kept as such), the
/// records gone.
struct Plan {
    generation: u64,
    book: store::Book,
    puts: Vec<vitrine_corpus::coding::Code>,
    clears: Vec<Cleared>,
    deletes: Vec<CodeKey>,
}

fn plan(a: &mut App) -> Plan {
    let dirty = std::mem::take(&mut a.viewer.coding.dirty);
    let c = &a.viewer.coding;
    let book = store::Book {
        format: "vitrine-coding".into(),
        atlas_sha256: a.viewer.manifest_sha.clone(),
        coder: c.coder.clone(),
        codebook: c.book.clone(),
    };
    let (mut puts, mut clears, mut deletes) = (Vec::new(), Vec::new(), Vec::new());
    match dirty {
        Dirty::Clean => {}
        Dirty::Codes(mut keys) => {
            keys.sort();
            keys.dedup();
            for k in keys {
                match (c.get(&k), c.cleared_at(&k)) {
                    (Some(code), _) => puts.push(code.clone()),
                    (None, Some(t)) => clears.push(Cleared::of(&k, t)),
                    (None, None) => deletes.push(k),
                }
            }
        }
        Dirty::All => {
            puts = c.codes.clone();
            clears = c.clearings();
            let now: std::collections::HashSet<CodeKey> = c
                .codes
                .iter()
                .map(|c| c.owned_key())
                .chain(clears.iter().map(|c| c.owned_key()))
                .collect();
            deletes = STORED.with(|s| s.borrow().difference(&now).cloned().collect());
        }
    }
    Plan {
        generation: c.generation,
        book,
        puts,
        clears,
        deletes,
    }
}

/// Stores what changed (and again once more if more changes while it writes).
pub fn save() {
    let busy = SAVING.with(|s| {
        let mut s = s.borrow_mut();
        if s.busy {
            s.again = true;
        }
        let was = s.busy;
        s.busy = true;
        was
    });
    if busy {
        return;
    }
    wasm_bindgen_futures::spawn_local(async {
        while let Some(p) = app().map(|a| plan(&mut a.borrow_mut())) {
            let result =
                store::write(&store::atlas_key(), &p.book, &p.puts, &p.clears, &p.deletes).await;
            match &result {
                Ok(()) => STORED.with(|s| {
                    let mut s = s.borrow_mut();
                    for c in &p.puts {
                        s.insert(c.owned_key());
                    }
                    for c in &p.clears {
                        s.insert(c.owned_key());
                    }
                    for k in &p.deletes {
                        s.remove(k);
                    }
                }),
                // Written again in full next time.
                Err(_) => {
                    if let Some(a) = app() {
                        a.borrow_mut().viewer.coding.dirty = Dirty::All;
                    }
                }
            }
            let again = SAVING.with(|s| {
                let mut s = s.borrow_mut();
                match result {
                    Ok(()) => {
                        s.written = p.generation;
                        s.failed = None;
                    }
                    Err(e) => s.failed = Some(e),
                }
                let again = s.again;
                s.again = false;
                if !again {
                    s.busy = false;
                }
                again
            });
            status();
            if !again {
                break;
            }
        }
    });
}

/// After the catalogue: takes back what the browser kept for this atlas (joined with anything
/// opened meanwhile: nothing is replaced).
pub async fn restore() {
    let mut notes = Vec::new();
    match store::read(&store::atlas_key()).await {
        Ok(kept) => {
            STORED.with(|s| {
                *s.borrow_mut() = kept
                    .codes
                    .iter()
                    .map(|c| c.owned_key())
                    .chain(kept.cleared.iter().map(|c| c.owned_key()))
                    .collect()
            });
            if kept.unreadable > 0 {
                notes.push(format!(
                    "{} records kept in this browser could not be read; they are left in its store.",
                    kept.unreadable
                ));
            }
            if let Some(app) = app() {
                let mut a = app.borrow_mut();
                let (coder, book, other_build) = match kept.book {
                    Some(b) => (b.coder, b.codebook, b.atlas_sha256 != a.manifest_sha),
                    None => (String::new(), Codebook::default(), false),
                };
                let empty = a.coding.book.is_empty() && a.coding.codes.is_empty();
                if empty {
                    a.viewer.coding.coder = coder;
                    a.viewer.coding.load(book, kept.codes, kept.cleared);
                    // What was read is what is stored.
                    a.viewer.coding.dirty = Dirty::Clean;
                    let g = a.coding.generation;
                    SAVING.with(|s| s.borrow_mut().written = g);
                } else {
                    match merge_codebooks(&a.coding.book, &book) {
                        Ok(merged) => {
                            a.viewer.coding.merge(merged, &kept.codes, &kept.cleared);
                        }
                        Err(why) => notes.push(format!(
                            "The codes kept in this browser were not joined to those opened ({why}); they stay in its store."
                        )),
                    }
                }
                if other_build {
                    notes.push(
                        "Coding kept in this browser for an earlier build of this atlas was taken back."
                            .into(),
                    );
                }
            }
        }
        Err(e) => SAVING.with(|s| s.borrow_mut().failed = Some(e)),
    }
    SAVING.with(|s| s.borrow_mut().restored = true);
    if !notes.is_empty() {
        select::note(&notes.join(" "));
    }
    set_state("coding", "restored");
    save();
    status();
}

/// Whether the store has been read; says to wait when not.
pub(crate) fn ready() -> bool {
    let r = SAVING.with(|s| s.borrow().restored);
    if !r {
        select::note("The codes kept in this browser are being read: a moment.");
    }
    r
}

/// The tray's line on coding: codes and how they are kept.
pub fn status() {
    let Some(app) = app() else { return };
    let a = app.borrow();
    let (written, failed) = SAVING.with(|s| {
        let s = s.borrow();
        (s.written, s.failed.clone())
    });
    let text = if a.coding.book.is_empty() && a.coding.codes.is_empty() {
        "No codebook yet.".to_string()
    } else {
        let kept = match (&failed, written == a.coding.generation) {
            (Some(e), _) => format!("not kept in this browser ({e}): save the corpus file"),
            (None, true) => "kept in this browser".to_string(),
            (None, false) => "saving…".to_string(),
        };
        format!(
            "{} variables, {} codes; {kept}.",
            a.coding.book.variables.len(),
            a.coding.codes.len()
        )
    };
    if let Some(s) = by_id("coding-status") {
        s.set_text_content(Some(&text));
    }
    set_state(
        "codes",
        &if written == a.coding.generation && failed.is_none() {
            a.coding.codes.len().to_string()
        } else {
            String::new()
        },
    );
}

/// After the codes or codebook changed: store them, redraw what shows them.
pub(crate) fn changed() {
    save();
    status();
    // An open record card shows the codes as they are now.
    if let Some(i) = app().and_then(|a| a.borrow().open) {
        redraw_soon(Target::Card(i));
    }
}

/// An element with a class and a text (the panels' one way to make them).
pub fn el(tag: &str, class: &str, text: &str) -> web_sys::Element {
    let e = document().create_element(tag).unwrap();
    if !class.is_empty() {
        e.set_class_name(class);
    }
    if !text.is_empty() {
        e.set_text_content(Some(text));
    }
    e
}

/// A button with a tooltip that runs `on` when clicked.
pub fn button(text: &str, title: &str, on: impl FnMut() + 'static) -> web_sys::Element {
    let b = el("button", "", text);
    if !title.is_empty() {
        let _ = b.set_attribute("title", title);
    }
    let cb = Closure::<dyn FnMut()>::new(on);
    let _ = b.add_event_listener_with_callback("click", cb.as_ref().unchecked_ref());
    cb.forget();
    b
}

pub fn is_open() -> bool {
    by_id("coding").is_some_and(|c| !c.hidden())
}

/// Opens the coding view over the corpus (every item when nothing is chosen); with `settle`, on
/// its disagreements, to settle them.
pub fn open_walk(settle: bool) {
    let Some(app) = app() else { return };
    if !ready() {
        return;
    }
    {
        let a = app.borrow();
        if !a.atlas.catalogue {
            return select::note("The catalogue is still loading: code in a moment.");
        }
        if a.coding.book.is_empty() {
            drop(a);
            select::note("Define the codebook first (the tray's Codebook…).");
            return open_codebook();
        }
    }
    {
        let mut a = app.borrow_mut();
        let items: Vec<u32> = if a.tray_items.is_empty() {
            (0..a.atlas.n as u32).collect()
        } else {
            a.tray_items.clone()
        };
        // The same corpus again: the walk goes on where it was (its counts made anew, as the
        // codebook may have changed meanwhile).
        if a.coding.walks(&items, settle) {
            let v = &mut a.viewer;
            let ids = &v.atlas.ids;
            v.coding.recount(&|i: usize| ids.get(i).to_string());
        } else {
            let how = match a.coding.walk.as_ref().map(|w| w.how) {
                _ if settle => Order::Disagreements,
                Some(Order::Disagreements) | None => Order::UncodedFirst,
                Some(how) => how,
            };
            start_walk(&mut a, &items, how);
        }
    }
    if let Some(c) = by_id("coding") {
        c.set_hidden(false);
    }
    set_state("codingView", "open");
    render();
    focus_view();
}

/// Gives the keyboard to the coding view (out of a field), or to the coder's name while none
/// is given.
fn focus_view() {
    let nameless = app().is_some_and(|a| a.borrow().coding.coder.trim().is_empty());
    if nameless {
        return focus_field("coder");
    }
    if let Some(v) = by_id("coding") {
        let _ = v.set_attribute("tabindex", "-1");
        let _ = v.focus();
    }
}

fn start_walk(a: &mut App, items: &[u32], how: Order) {
    let years = a.atlas.fields.iter().find_map(|f| match &f.column {
        vitrine_corpus::columns::Column::Date { start, .. } => Some(start.clone()),
        _ => None,
    });
    let v = &mut a.viewer;
    let ids = &v.atlas.ids;
    let id_of = |i: usize| ids.get(i).to_string();
    v.coding.start(items, how, &id_of, years.as_deref());
}

fn close() {
    if let Some(c) = by_id("coding") {
        c.set_hidden(true);
    }
    // The map under it is drawn again (frames wait while the view is open).
    request_frame();
    set_state("codingView", "");
    focus_map();
}

/// A key while the coding view is open (not typed into one of its fields).
pub fn key(e: &web_sys::KeyboardEvent) -> bool {
    if !is_open() {
        return false;
    }
    // Enter and Space on a focused button are the button's own.
    let on_button = e
        .target()
        .and_then(|t| t.dyn_into::<HtmlElement>().ok())
        .is_some_and(|t| t.tag_name() == "BUTTON");
    if on_button && matches!(e.key().as_str(), "Enter" | " ") {
        return true;
    }
    let Some(app) = app() else { return false };
    let effect = {
        let mut a = app.borrow_mut();
        if a.coding.coder.trim().is_empty() && e.key().len() == 1 && !e.ctrl_key() {
            drop(a);
            e.prevent_default();
            focus_field("coder");
            return true;
        }
        let v = &mut a.viewer;
        let ids = &v.atlas.ids;
        let id_of = |i: usize| ids.get(i).to_string();
        let ctrl = e.ctrl_key() || e.meta_key();
        let effect = if e.key() == "Tab" && e.shift_key() {
            v.coding.key("ArrowUp", false, "", &id_of)
        } else {
            v.coding.key(&e.key(), ctrl, &now_utc(), &id_of)
        };
        // An undo took back a coder's own code while settling: what they disagree on is found
        // anew.
        if v.coding.take_stale() {
            v.coding.recount(&id_of);
        }
        effect
    };
    match effect {
        // Not the coding view's key: it goes nowhere else either (the map and the selection
        // behind the view must not change unseen); the browser's own shortcuts still work.
        Effect::None => return true,
        Effect::Close => close(),
        Effect::Coded => {
            changed();
            render();
        }
        Effect::Moved => render(),
        Effect::Type(start) => {
            render();
            if let Some(f) = document()
                .query_selector("#coding .current input, #coding .current textarea")
                .ok()
                .flatten()
                .and_then(|f| f.dyn_into::<HtmlElement>().ok())
            {
                let _ = f.focus();
                if let Some(i) = f.dyn_ref::<web_sys::HtmlInputElement>() {
                    if !start.is_empty() {
                        i.set_value(&start);
                    }
                }
            }
        }
    }
    e.prevent_default();
    true
}

fn focus_field(id: &str) {
    if let Some(f) = by_id(id) {
        let _ = f.focus();
    }
}

/// Sets variable `v`'s value of the target's item from a field (a number or a note).
fn set_from_field(target: Target, v: usize, text: String) {
    if QUIET.with(|q| q.get()) {
        return;
    }
    let Some(app) = app() else { return };
    let outcome = {
        let mut a = app.borrow_mut();
        if a.coding.coder.trim().is_empty() {
            drop(a);
            return ask_coder();
        }
        let Some(item) = target_item(&a, target) else {
            return;
        };
        let Some(var) = a.coding.book.variables.get(v).cloned() else {
            return;
        };
        let id = a.atlas.id(item).to_string();
        let c = &mut a.viewer.coding;
        match CodeValue::parse(&var, &text) {
            Ok(value) if target == Target::View => {
                Ok(c.set(item, &id, &var.name, value, &now_utc()))
            }
            Ok(value) => Ok(c.set_own(item, &id, &var.name, value, &now_utc())),
            Err(why) => Err(why),
        }
    };
    match outcome {
        Ok(true) => {
            changed();
            if target == Target::View {
                render_soon(false);
            }
        }
        Ok(false) => {}
        Err(why) => select::note(&format!("Not coded: {why}.")),
    }
}

/// The item a control codes.
fn target_item(a: &App, target: Target) -> Option<usize> {
    match target {
        Target::View => a.coding.current(),
        Target::Card(i) => Some(i),
    }
}

/// No coder's name yet: the coding view asks for it; elsewhere a note says where to give it.
fn ask_coder() {
    if is_open() {
        focus_field("coder");
    } else {
        select::note("Give your name as coder first: the coding view (k) asks for it.");
    }
}

/// Draws what shows the target's codes again once the event under way is over.
fn redraw_soon(target: Target) {
    match target {
        Target::View => render_soon(false),
        Target::Card(i) => {
            let cb = Closure::once_into_js(move || {
                if app().is_some_and(|a| a.borrow().open == Some(i)) {
                    crate::open_card(Some(i));
                }
            });
            if let Some(w) = web_sys::window() {
                let _ =
                    w.set_timeout_with_callback_and_timeout_and_arguments_0(cb.unchecked_ref(), 0);
            }
        }
    }
}

/// Draws the coding view once the event under way is over (a field's own change handler must
/// not take the field out of the page while it runs), then gives it the keyboard if `focus`.
fn render_soon(focus: bool) {
    let cb = Closure::once_into_js(move || {
        render();
        if focus {
            focus_view();
        }
    });
    if let Some(w) = web_sys::window() {
        let _ = w.set_timeout_with_callback_and_timeout_and_arguments_0(cb.unchecked_ref(), 0);
    }
}

/// Draws the coding view for the item the walk stands on.
pub fn render() {
    let Some(app) = app() else { return };
    let Some(view) = by_id("coding") else { return };
    // The largest thumbnail level's sheet of the item, fetched if it is not here yet.
    let want = {
        let a = app.borrow();
        a.coding.current().and_then(|i| {
            let l = a.sheets.levels.len();
            (l > 0 && a.atlas.extents[i].0 > 0)
                .then(|| (l - 1, a.sheets.sheet_of(l - 1, i)))
                .filter(|&(l, s)| a.sheets.levels[l].loaded[s].is_none())
        })
    };
    if let Some(w) = want {
        fetch_sheets(vec![w]);
    }
    // A field being typed in keeps its text, caret and focus through the redraw (a picture
    // arriving redraws the view while a coder types).
    let typing = typing_in(&view);
    // The heading (coder, order) stays while the walk's order and coder do: made anew with every
    // item it would be most of a step's work for the browser.
    let head_key = {
        let a = app.borrow();
        a.coding
            .walk
            .as_ref()
            .map(|w| format!("{}\u{1}{}", w.how.name(), a.coding.coder))
    };
    let kept = view
        .first_element_child()
        .filter(|h| h.get_attribute("data-key") == head_key);
    // Emptied before the state is borrowed, quietly: taking out a field with text not yet
    // committed fires its change event here and then.
    QUIET.with(|q| q.set(true));
    match &kept {
        Some(h) => {
            while let Some(next) = h.next_element_sibling() {
                next.remove();
            }
        }
        None => view.set_text_content(None),
    }
    QUIET.with(|q| q.set(false));
    render_view(&app, &view, kept.is_some());
    if let Some(t) = typing {
        restore_typing(&view, t);
    }
}

/// The item's largest thumbnail in the picture pane, or a line saying it is on its way.
fn fill_picture(a: &App, item: usize, pane: &web_sys::Element) {
    pane.set_text_content(None);
    match card_picture(a, item) {
        Some(pic) => {
            let _ = pane.append_child(&pic);
        }
        None => {
            let _ = pane.append_child(&el("p", "pending", "loading the picture…"));
        }
    }
}

fn field_caret(f: &HtmlElement) -> Option<u32> {
    if let Some(i) = f.dyn_ref::<web_sys::HtmlInputElement>() {
        i.selection_start().ok().flatten()
    } else {
        f.dyn_ref::<web_sys::HtmlTextAreaElement>()
            .and_then(|t| t.selection_start().ok().flatten())
    }
}

fn set_field(f: &HtmlElement, value: &str, caret: Option<u32>) {
    if let Some(i) = f.dyn_ref::<web_sys::HtmlInputElement>() {
        if i.type_() == "text" {
            i.set_value(value);
            if let Some(c) = caret {
                let _ = i.set_selection_range(c, c);
            }
        }
    } else if let Some(t) = f.dyn_ref::<web_sys::HtmlTextAreaElement>() {
        t.set_value(value);
        if let Some(c) = caret {
            let _ = t.set_selection_range(c, c);
        }
    }
}

/// The walk's count: the item it stands on, of how many, how many finished (settled).
fn count_line(a: &App) -> String {
    let Some(w) = a.coding.walk.as_ref() else {
        return String::new();
    };
    format!(
        "item {} of {} · {} {}",
        (w.pos + 1).min(w.order.len()),
        w.order.len(),
        a.coding.finished_count(),
        if a.coding.settling() {
            "settled"
        } else {
            "finished"
        }
    )
}

fn render_view(app: &Rc<RefCell<App>>, view: &HtmlElement, head_kept: bool) {
    let a = app.borrow();
    if a.coding.walk.is_none() {
        return;
    }
    if head_kept {
        if let Some(c) = by_id("coding-count") {
            c.set_text_content(Some(&count_line(&a)));
        }
    } else {
        render_head(&a, view);
    }
    render_item(&a, view);
}

fn render_head(a: &App, view: &HtmlElement) {
    let doc = document();
    let Some(w) = a.coding.walk.as_ref() else {
        return;
    };
    let settling = a.coding.settling();
    let head = el("header", "coding-head", "");
    let _ = head.set_attribute(
        "data-key",
        &format!("{}\u{1}{}", w.how.name(), a.coding.coder),
    );
    let _ = head.append_child(&el(
        "h2",
        "",
        if settling {
            "Settling disagreements"
        } else {
            "Coding"
        },
    ));
    let count = el("span", "count", &count_line(a));
    count.set_id("coding-count");
    let _ = head.append_child(&count);
    let coder_label = el("label", "", "Coder ");
    let coder: web_sys::HtmlInputElement = doc.create_element("input").unwrap().dyn_into().unwrap();
    coder.set_id("coder");
    coder.set_value(&a.coding.coder);
    coder.set_placeholder("your name");
    let _ = coder.set_attribute("title", "Your name: every code keeps it, with the time");
    let c2 = coder.clone();
    listen(&coder, "change", true, move |_e: web_sys::Event| {
        if let Some(app) = self::app() {
            let mut a = app.borrow_mut();
            let v = &mut a.viewer;
            let ids = &v.atlas.ids;
            v.coding
                .set_coder(c2.value().trim(), &|i: usize| ids.get(i).to_string());
        }
        changed();
        render_soon(true);
    });
    // Enter in the name field gives the keyboard back to the coding.
    let c3 = coder.clone();
    listen(
        &coder,
        "keydown",
        false,
        move |e: web_sys::KeyboardEvent| {
            if e.key() == "Enter" || e.key() == "Escape" {
                e.prevent_default();
                e.stop_propagation();
                let _ = c3.blur();
            }
        },
    );
    let _ = coder_label.append_child(&coder);
    let _ = head.append_child(&coder_label);
    let order_label = el("label", "", "Order ");
    let order: web_sys::HtmlSelectElement =
        doc.create_element("select").unwrap().dyn_into().unwrap();
    order.set_id("coding-order");
    for (v, t) in [
        ("uncoded", "uncoded first"),
        ("map", "map"),
        ("date", "date"),
        ("random", "random"),
        ("disagreements", "disagreements (settle)"),
    ] {
        let o = web_sys::HtmlOptionElement::new_with_text_and_value(t, v).unwrap();
        let _ = order.append_child(&o);
    }
    order.set_value(match w.how {
        Order::UncodedFirst => "uncoded",
        Order::Map => "map",
        Order::Date => "date",
        Order::Random(_) => "random",
        Order::Disagreements => "disagreements",
    });
    let o2 = order.clone();
    listen(&order, "change", true, move |_e: web_sys::Event| {
        let Some(app) = self::app() else { return };
        {
            let mut a = app.borrow_mut();
            let items = a.coding.walk.as_ref().map(|w| w.source.clone());
            let how = match o2.value().as_str() {
                "disagreements" => Order::Disagreements,
                "map" => Order::Map,
                "date" => Order::Date,
                // A seed from the clock, said in the view, so that the order can be told.
                "random" => Order::Random((js_sys::Date::now() as u64) % 100_000),
                _ => Order::UncodedFirst,
            };
            if let Some(items) = items {
                start_walk(&mut a, &items, how);
            }
        }
        render();
    });
    let _ = order_label.append_child(&order);
    let _ = head.append_child(&order_label);
    if let Order::Random(seed) = w.how {
        let _ = head.append_child(&el("span", "count", &format!("seed {seed}")));
    }
    let _ = head.append_child(&button("Close", "Close the coding view (Escape)", close));
    let _ = view.append_child(&head);
}

fn render_item(a: &App, view: &HtmlElement) {
    let Some(w) = a.coding.walk.as_ref() else {
        return;
    };
    let settling = a.coding.settling();

    let Some(item) = a.coding.current() else {
        let empty = if settling {
            "The coders agree on every item of the corpus: nothing to settle."
        } else {
            "The corpus is empty."
        };
        let _ = view.append_child(&el("p", "pending", empty));
        return;
    };
    let id = a.atlas.id(item).to_string();
    let pane = el("div", "coding-picture", "");
    fill_picture(a, item, &pane);
    let _ = view.append_child(&pane);
    let side = el("div", "coding-side", "");
    let _ = side.append_child(&el("h3", "coding-title", &a.atlas.label(item)));
    let dl = el("dl", "coding-record", "");
    for line in a.atlas.record(item).into_iter().take(8) {
        let _ = dl.append_child(&el("dt", "", &line.name));
        let _ = dl.append_child(&el(
            "dd",
            "",
            if line.value.is_empty() {
                "—"
            } else {
                &line.value
            },
        ));
    }
    let _ = side.append_child(&dl);
    let vars = el(
        "ol",
        if settling {
            "coding-variables settling"
        } else {
            "coding-variables"
        },
        "",
    );
    for (k, var) in a.coding.book.variables.iter().enumerate() {
        let current = k == w.variable;
        let disputed = settling && a.coding.disputed(&id, k);
        let li = el(
            "li",
            match (current, disputed) {
                (true, true) => "variable current disputed",
                (true, false) => "variable current",
                (false, true) => "variable disputed",
                (false, false) => "variable",
            },
            "",
        );
        let _ = li.set_attribute("data-variable", &var.name);
        let code = a.coding.code(&id, &var.name).map(|c| c.value.clone());
        let name = el("div", "variable-name", &var.name);
        let _ = name.set_attribute("title", &var.description);
        let k2 = k;
        let cb = Closure::<dyn FnMut()>::new(move || {
            if let Some(app) = self::app() {
                if let Some(w) = app.borrow_mut().viewer.coding.walk.as_mut() {
                    w.variable = k2;
                }
            }
            render();
        });
        let _ = name.add_event_listener_with_callback("click", cb.as_ref().unchecked_ref());
        cb.forget();
        let _ = li.append_child(&name);
        if settling {
            // What each coder gave, above the value that settles it.
            let theirs: Vec<String> = a
                .coding
                .coders_codes(&id, &var.name)
                .iter()
                .map(|c| {
                    let v = c.value.cell();
                    format!("{}: {}", c.coder, if v.is_empty() { "none" } else { &v })
                })
                .collect();
            let _ = li.append_child(&el(
                "div",
                "coders-values",
                &if theirs.is_empty() {
                    "not coded".to_string()
                } else {
                    theirs.join(" · ")
                },
            ));
        }
        let _ = li.append_child(&value_controls(k, var, &code, Target::View));
        if let Some(c) = a.coding.code(&id, &var.name) {
            let by = if c.settled { "settled by " } else { "" };
            let _ = li.append_child(&el(
                "div",
                "coded-by",
                &format!("{by}{} · {}", c.coder, c.time),
            ));
        }
        let _ = vars.append_child(&li);
    }
    let _ = side.append_child(&vars);
    let progress = el("dl", "coding-progress", "");
    for (name, n, total) in a.coding.progress() {
        let _ = progress.append_child(&el("dt", "", &name));
        let line = if settling && total == 0 {
            "no disagreement".to_string()
        } else {
            format!("{n} / {total}")
        };
        let _ = progress.append_child(&el("dd", "", &line));
    }
    let _ = side.append_child(&progress);
    let _ = view.append_child(&side);
    let _ = view.append_child(&el(
        "footer",
        "coding-keys",
        if settling {
            "1–9 settle the value · ↑ ↓ (Tab) disputed variable · → or Enter next item, ← previous · \
             0 or Backspace clear the settled value · Ctrl+Z undo · Escape close"
        } else {
            "1–9 set a value · ↑ ↓ (Tab) variable · → or Enter next item, ← previous · 0 or Backspace clear · \
             e type a number or note · Ctrl+Z undo · Escape close"
        },
    ));
    set_state("codingItem", &id);
}

/// Where a value set by a control goes: the item the coding view stands on (its code, or the
/// settled value when settling), or the record card's item (this coder's own code).
#[derive(Clone, Copy, PartialEq)]
pub enum Target {
    View,
    Card(usize),
}

/// The controls that set variable `k`'s value: a button per value (choices, yes/no) or a field
/// (number, note), showing `code`.
fn value_controls(
    k: usize,
    var: &Variable,
    code: &Option<CodeValue>,
    target: Target,
) -> web_sys::Element {
    let doc = document();
    let out = el("div", "controls", "");
    let li = &out;
    match var.kind {
        Kind::One | Kind::Several | Kind::YesNo => {
            let choices: Vec<(String, Option<u8>, String, bool)> = if var.kind == Kind::YesNo {
                vec![
                    (
                        "yes".into(),
                        Some(1),
                        String::new(),
                        *code == Some(CodeValue::YesNo(true)),
                    ),
                    (
                        "no".into(),
                        Some(2),
                        String::new(),
                        *code == Some(CodeValue::YesNo(false)),
                    ),
                ]
            } else {
                let keys = value_keys(var);
                var.values
                    .iter()
                    .zip(keys)
                    .map(|(d, key)| {
                        let on = match &code {
                            Some(CodeValue::Text(t)) => t == &d.value,
                            Some(CodeValue::Several(vs)) => vs.contains(&d.value),
                            _ => false,
                        };
                        (d.value.clone(), key, d.description.clone(), on)
                    })
                    .collect()
            };
            let row = el("div", "values", "");
            for (value, key, description, on) in choices {
                let text = match key {
                    Some(k) => format!("{k} {value}"),
                    None => value.clone(),
                };
                let (vname, kind) = (var.name.clone(), var.kind);
                let v2 = value.clone();
                let b = button(&text, &description, move || {
                    choose(target, &vname, kind, &v2);
                });
                b.set_class_name(if on { "value on" } else { "value" });
                let _ = b.set_attribute("aria-pressed", if on { "true" } else { "false" });
                let _ = row.append_child(&b);
            }
            if var.kind == Kind::Several
                && matches!(&code, Some(CodeValue::Several(v)) if v.is_empty())
            {
                let _ = row.append_child(&el("span", "count", "none of these"));
            }
            let _ = li.append_child(&row);
        }
        Kind::Number | Kind::Note => {
            let field: HtmlElement = if var.kind == Kind::Note {
                let t: web_sys::HtmlTextAreaElement =
                    doc.create_element("textarea").unwrap().dyn_into().unwrap();
                t.set_value(&code.as_ref().map(CodeValue::cell).unwrap_or_default());
                t.set_rows(2);
                t.into()
            } else {
                let i: web_sys::HtmlInputElement =
                    doc.create_element("input").unwrap().dyn_into().unwrap();
                i.set_type("text");
                let _ = i.set_attribute("inputmode", "decimal");
                i.set_value(&code.as_ref().map(CodeValue::cell).unwrap_or_default());
                i.into()
            };
            let _ = field.set_attribute("aria-label", &var.name);
            let _ = field.set_attribute("data-field", &var.name);
            let f2 = field.clone();
            let note = var.kind == Kind::Note;
            listen(
                &field,
                "keydown",
                false,
                move |e: web_sys::KeyboardEvent| {
                    let done = match e.key().as_str() {
                        "Enter" => !(note && e.shift_key()),
                        "Escape" | "Tab" => true,
                        _ => false,
                    };
                    if done {
                        e.prevent_default();
                        e.stop_propagation();
                        let text = field_value(&f2);
                        set_from_field(target, k, text);
                        if target == Target::View {
                            if let Some(v) = by_id("coding") {
                                let _ = v.set_attribute("tabindex", "-1");
                                let _ = v.focus();
                            }
                        } else {
                            let _ = f2.blur();
                        }
                    }
                },
            );
            let f3 = field.clone();
            listen(&field, "change", false, move |_e: web_sys::Event| {
                set_from_field(target, k, field_value(&f3));
            });
            let _ = li.append_child(&field);
        }
    }
    out
}

fn field_value(f: &HtmlElement) -> String {
    if let Some(i) = f.dyn_ref::<web_sys::HtmlInputElement>() {
        i.value()
    } else if let Some(t) = f.dyn_ref::<web_sys::HtmlTextAreaElement>() {
        t.value()
    } else {
        String::new()
    }
}

/// A click on a value button: the same as its key.
fn choose(target: Target, variable: &str, kind: Kind, value: &str) {
    let Some(app) = app() else { return };
    let changed_now = {
        let mut a = app.borrow_mut();
        if a.coding.coder.trim().is_empty() {
            drop(a);
            return ask_coder();
        }
        let Some(item) = target_item(&a, target) else {
            return;
        };
        let id = a.atlas.id(item).to_string();
        let Some(var) = a.coding.book.variable(variable).cloned() else {
            return;
        };
        let now = match target {
            Target::View => a.coding.code(&id, variable),
            Target::Card(_) => a.coding.own_code(&id, variable),
        }
        .map(|c| c.value.clone());
        let value = match kind {
            Kind::YesNo => CodeValue::YesNo(value == "yes"),
            Kind::Several => {
                let mut vs: Vec<String> = match now {
                    Some(CodeValue::Several(v)) => v,
                    _ => vec![],
                };
                if let Some(k) = vs.iter().position(|t| t == value) {
                    vs.remove(k);
                } else {
                    vs.push(value.to_string());
                }
                vs.sort_by_key(|t| var.value_index(t));
                CodeValue::Several(vs)
            }
            _ => CodeValue::Text(value.to_string()),
        };
        let c = &mut a.viewer.coding;
        match target {
            Target::View => c.set(item, &id, variable, Some(value), &now_utc()),
            Target::Card(_) => c.set_own(item, &id, variable, Some(value), &now_utc()),
        }
    };
    if changed_now {
        changed();
    }
    if target == Target::View {
        render();
    }
}

/// The record card's codes of item `i`: this coder's own, set by the same buttons and fields as
/// the coding view's (None without a codebook).
pub fn card_codes(a: &App, i: usize) -> Option<web_sys::Element> {
    if a.coding.book.is_empty() {
        return None;
    }
    let id = a.atlas.id(i);
    let out = el("section", "card-codes", "");
    let who = if a.coding.coder.trim().is_empty() {
        "Codes (give your name in the coding view, k, to code here)".to_string()
    } else {
        format!("Codes of {}", a.coding.coder)
    };
    let _ = out.append_child(&el("h3", "", &who));
    for (k, var) in a.coding.book.variables.iter().enumerate() {
        let row = el("div", "variable", "");
        let _ = row.set_attribute("data-variable", &var.name);
        let name = el("div", "variable-name", &var.name);
        let _ = name.set_attribute("title", &var.description);
        let _ = row.append_child(&name);
        let code = a.coding.own_code(id, &var.name).map(|c| c.value.clone());
        let _ = row.append_child(&value_controls(k, var, &code, Target::Card(i)));
        if code.is_some() {
            let (item, vname) = (id.to_string(), var.name.clone());
            let b = button("Clear", "Take your code of this variable back", move || {
                let Some(app) = self::app() else { return };
                let done =
                    app.borrow_mut()
                        .viewer
                        .coding
                        .set_own(i, &item, &vname, None, &now_utc());
                if done {
                    changed();
                }
            });
            b.set_class_name("clear-code");
            let _ = row.append_child(&b);
        }
        // Other coders' codes and a settled value, read only.
        let others: Vec<String> = a
            .coding
            .coders_codes(id, &var.name)
            .iter()
            .filter(|c| c.coder != a.coding.coder)
            .map(|c| format!("{}: {}", c.coder, c.value.cell()))
            .chain(
                a.coding
                    .settled_code(id, &var.name)
                    .map(|c| format!("settled: {}", c.value.cell())),
            )
            .collect();
        if !others.is_empty() {
            let _ = row.append_child(&el("div", "coders-values", &others.join(" · ")));
        }
        let _ = out.append_child(&row);
    }
    Some(out)
}

fn is_codebook_open() -> bool {
    by_id("codebook").is_some_and(|c| !c.hidden())
}

/// Shows the codebook editor (closing the coding view: its counts are made anew when it opens).
pub fn open_codebook() {
    if !ready() {
        return;
    }
    if is_open() {
        close();
    }
    if let Some(c) = by_id("codebook") {
        c.set_hidden(false);
    }
    draw_codebook();
    if let Some(c) = by_id("codebook") {
        let _ = c.set_attribute("tabindex", "-1");
        let _ = c.focus();
    }
}

fn close_codebook() {
    if let Some(c) = by_id("codebook") {
        c.set_hidden(true);
    }
    focus_map();
}

pub(crate) fn confirm(text: &str) -> bool {
    web_sys::window()
        .and_then(|w| w.confirm_with_message(text).ok())
        .unwrap_or(false)
}

fn input(value: &str, label: &str, class: &str) -> web_sys::HtmlInputElement {
    let i: web_sys::HtmlInputElement = document()
        .create_element("input")
        .unwrap()
        .dyn_into()
        .unwrap();
    i.set_value(value);
    let _ = i.set_attribute("aria-label", label);
    i.set_placeholder(label);
    if !class.is_empty() {
        i.set_class_name(class);
    }
    i
}

/// Applies an edit to the codebook after checking it; says why when it is refused.
fn edit_book(f: impl FnOnce(&mut Codebook)) {
    let Some(app) = app() else { return };
    let result = {
        let mut a = app.borrow_mut();
        let mut book = a.coding.book.clone();
        f(&mut book);
        match book.check() {
            Ok(()) => {
                a.viewer.coding.book = book;
                a.viewer.coding.touched();
                Ok(())
            }
            Err(e) => Err(e.to_string()),
        }
    };
    if let Err(e) = result {
        select::note(&format!("Not changed: {e}."));
    } else {
        changed();
    }
    render_codebook();
}

/// Draws the codebook editor once the event under way is over (its fields' change handlers must
/// not take their field out of the page while they run).
fn render_codebook() {
    render_codebook_then(|| {});
}

fn render_codebook_then(then: impl FnOnce() + 'static) {
    let cb = Closure::once_into_js(move || {
        draw_codebook();
        then();
    });
    if let Some(w) = web_sys::window() {
        let _ = w.set_timeout_with_callback_and_timeout_and_arguments_0(cb.unchecked_ref(), 0);
    }
}

/// Draws the codebook editor now.
fn draw_codebook() {
    let Some(app) = app() else { return };
    let Some(panel) = by_id("codebook") else {
        return;
    };
    // Emptied before the state is borrowed: a field taken out with text not yet committed fires
    // its change event here and then, and its handler edits the codebook.
    panel.set_text_content(None);
    let a = app.borrow();
    let doc = document();
    let head = el("header", "coding-head", "");
    let _ = head.append_child(&el("h2", "", "Codebook"));
    let _ = head.append_child(&button(
        "Close",
        "Close the codebook (Escape)",
        close_codebook,
    ));
    let _ = panel.append_child(&head);
    let _ = panel.append_child(&el(
        "p",
        "how",
        "The variables every item of the corpus is coded for. Choice values get keys 1–9 in the coding view.",
    ));
    for (k, var) in a.coding.book.variables.iter().enumerate() {
        let block = el("fieldset", "codebook-variable", "");
        let _ = block.set_attribute("data-variable", &var.name);
        let row = el("div", "row", "");
        let name = input(&var.name, "variable name", "variable-name");
        let old = var.name.clone();
        let n2 = name.clone();
        listen(&name, "change", true, move |_e: web_sys::Event| {
            rename_variable(&old, n2.value().trim());
        });
        let _ = row.append_child(&name);
        let _ = row.append_child(&el("span", "count", var.kind.label()));
        let desc = input(&var.description, "what it records", "variable-description");
        let d2 = desc.clone();
        listen(&desc, "change", true, move |_e: web_sys::Event| {
            let text = d2.value();
            edit_book(|b| b.variables[k].description = text);
        });
        let _ = row.append_child(&desc);
        let vname = var.name.clone();
        let _ = row.append_child(&button("Remove", "Remove this variable", move || {
            remove_variable(&vname)
        }));
        let _ = block.append_child(&row);
        if matches!(var.kind, Kind::One | Kind::Several) {
            let list = el("ol", "codebook-values", "");
            let keys = value_keys(var);
            for (j, d) in var.values.iter().enumerate() {
                let li = el("li", "", "");
                let _ = li.append_child(&el(
                    "span",
                    "key",
                    &keys[j].map(|x| x.to_string()).unwrap_or_default(),
                ));
                let v = input(&d.value, "value", "value-name");
                let (vn, old) = (var.name.clone(), d.value.clone());
                let v2 = v.clone();
                listen(&v, "change", true, move |_e: web_sys::Event| {
                    rename_value(&vn, &old, v2.value().trim());
                });
                let _ = li.append_child(&v);
                let dd = input(&d.description, "description", "value-description");
                let dd2 = dd.clone();
                listen(&dd, "change", true, move |_e: web_sys::Event| {
                    let text = dd2.value();
                    edit_book(|b| b.variables[k].values[j].description = text);
                });
                let _ = li.append_child(&dd);
                let (vn, value) = (var.name.clone(), d.value.clone());
                let _ = li.append_child(&button("×", "Remove this value", move || {
                    remove_value(&vn, &value)
                }));
                let _ = list.append_child(&li);
            }
            let _ = block.append_child(&list);
            let add = input("", "new value", "new-value");
            let add2 = add.clone();
            listen(&add, "change", true, move |_e: web_sys::Event| {
                let value = add2.value().trim().to_string();
                if value.is_empty() {
                    return;
                }
                edit_book(|b| {
                    b.variables[k].values.push(ValueDef {
                        value,
                        key: None,
                        description: String::new(),
                    })
                });
                render_codebook_then(move || focus_new_value(k));
            });
            let _ = block.append_child(&add);
        }
        let _ = panel.append_child(&block);
    }
    // A new variable: its name and kind.
    let row = el("div", "row codebook-add", "");
    let name = input("", "new variable", "new-variable");
    name.set_id("new-variable");
    let kind: web_sys::HtmlSelectElement =
        doc.create_element("select").unwrap().dyn_into().unwrap();
    kind.set_id("new-variable-kind");
    let _ = kind.set_attribute("aria-label", "its kind");
    for (v, t) in [
        ("one", "one choice"),
        ("several", "several choices"),
        ("yes-no", "yes/no"),
        ("number", "number"),
        ("note", "note"),
    ] {
        let _ =
            kind.append_child(&web_sys::HtmlOptionElement::new_with_text_and_value(t, v).unwrap());
    }
    let (n2, k2) = (name.clone(), kind.clone());
    let add = button("Add variable", "Add a variable of this kind", move || {
        let name = n2.value().trim().to_string();
        if name.is_empty() {
            return select::note("Name the variable first.");
        }
        let kind: Kind =
            serde_json::from_value(serde_json::Value::String(k2.value())).unwrap_or(Kind::One);
        // A choice variable is made with a first value to rename, as it needs one.
        let values = if matches!(kind, Kind::One | Kind::Several) {
            vec![ValueDef {
                value: "value 1".into(),
                key: None,
                description: String::new(),
            }]
        } else {
            vec![]
        };
        edit_book(|b| {
            b.variables.push(Variable {
                name,
                kind,
                description: String::new(),
                values,
            })
        });
    });
    add.set_id("add-variable");
    let _ = row.append_child(&name);
    let _ = row.append_child(&kind);
    let _ = row.append_child(&add);
    let _ = panel.append_child(&row);
    drop(a);
}

fn focus_new_value(k: usize) {
    if let Some(f) = document()
        .query_selector_all("#codebook .new-value")
        .ok()
        .and_then(|l| l.get(k as u32))
        .and_then(|n| n.dyn_into::<HtmlElement>().ok())
    {
        let _ = f.focus();
    }
}

fn rename_variable(old: &str, new: &str) {
    let Some(app) = app() else { return };
    if new.is_empty() || new == old {
        return render_codebook();
    }
    if app.borrow().coding.book.variable(new).is_some() {
        select::note(&format!(
            "Not renamed: there is a variable {new:?} already."
        ));
        return render_codebook();
    }
    let n = app.borrow().coding.uses_variable(old);
    if n > 0
        && !confirm(&format!(
            "Rename {old:?} to {new:?} in the codebook and in its {n} codes?"
        ))
    {
        return render_codebook();
    }
    app.borrow_mut().viewer.coding.rename_variable(old, new);
    changed();
    render_codebook();
}

fn rename_value(variable: &str, old: &str, new: &str) {
    let Some(app) = app() else { return };
    if new.is_empty() || new == old {
        return render_codebook();
    }
    let (n, taken) = {
        let a = app.borrow();
        (
            a.coding.uses(variable, old),
            a.coding
                .book
                .variable(variable)
                .is_some_and(|v| v.value_index(new).is_some()),
        )
    };
    if taken {
        // Joining two values: the codes of the old one take the other.
        if !confirm(&format!(
            "{variable:?} has a value {new:?} already. Join {old:?} into it ({n} codes take {new:?})?"
        )) {
            return render_codebook();
        }
        let mut a = app.borrow_mut();
        vitrine_corpus::coding::recode(&mut a.viewer.coding.codes, variable, old, new);
        let codes = std::mem::take(&mut a.viewer.coding.codes);
        let mut book = a.coding.book.clone();
        if let Some(v) = book.variables.iter_mut().find(|v| v.name == variable) {
            v.values.retain(|d| d.value != old);
        }
        let cleared = a.coding.clearings();
        a.viewer.coding.load(book, codes, cleared);
    } else {
        if n > 0
            && !confirm(&format!(
                "Rename {old:?} to {new:?} in the codebook and in its {n} codes?"
            ))
        {
            return render_codebook();
        }
        let check = {
            let mut b = app.borrow().coding.book.clone();
            if let Some(v) = b.variables.iter_mut().find(|v| v.name == variable) {
                for d in v.values.iter_mut().filter(|d| d.value == old) {
                    d.value = new.to_string();
                }
            }
            b.check()
        };
        if let Err(e) = check {
            select::note(&format!("Not renamed: {e}."));
            return render_codebook();
        }
        app.borrow_mut()
            .viewer
            .coding
            .rename_value(variable, old, new);
    }
    changed();
    render_codebook();
}

fn remove_value(variable: &str, value: &str) {
    let Some(app) = app() else { return };
    let (n, last) = {
        let a = app.borrow();
        (
            a.coding.uses(variable, value),
            a.coding
                .book
                .variable(variable)
                .is_some_and(|v| v.values.len() == 1),
        )
    };
    if last {
        return select::note("A choice variable needs a value: remove the variable instead.");
    }
    if n > 0
        && !confirm(&format!(
            "{n} codes use {value:?}. Remove the value and those codes? (To keep them, rename the value, or type another value's name into it to join the two.)"
        ))
    {
        return;
    }
    {
        let mut a = app.borrow_mut();
        a.viewer.coding.drop_codes(variable, Some(value));
        if let Some(v) = a
            .viewer
            .coding
            .book
            .variables
            .iter_mut()
            .find(|v| v.name == variable)
        {
            v.values.retain(|d| d.value != value);
        }
        a.viewer.coding.touched();
    }
    changed();
    render_codebook();
}

fn remove_variable(variable: &str) {
    let Some(app) = app() else { return };
    let n = app.borrow().coding.uses_variable(variable);
    let ask = if n > 0 {
        format!("Remove {variable:?} and its {n} codes?")
    } else {
        format!("Remove {variable:?}?")
    };
    if !confirm(&ask) {
        return;
    }
    {
        let mut a = app.borrow_mut();
        a.viewer.coding.drop_codes(variable, None);
        a.viewer
            .coding
            .book
            .variables
            .retain(|v| v.name != variable);
        a.viewer.coding.touched();
    }
    changed();
    render_codebook();
}

/// Adds a corpus file's codebook and codes to what is here; says what it did, or why nothing
/// was added (the codebooks differ in a variable both have).
pub fn take_codes(file: &vitrine_corpus::corpus::CorpusFile) -> String {
    let Some(app) = app() else {
        return String::new();
    };
    let note = {
        let mut a = app.borrow_mut();
        if file.codebook.is_empty() && file.codes.is_empty() {
            return String::new();
        }
        match merge_codebooks(&a.coding.book, &file.codebook) {
            Err(why) => {
                format!("Its codes were not added: its codebook does not match this one ({why}).")
            }
            Ok(book) => {
                let r = a.viewer.coding.merge(book, &file.codes, &file.cleared);
                let mut s = format!("Added {} codes ({} already here)", r.added, r.same);
                if r.replaced_by_later + r.kept_later > 0 {
                    s.push_str(&format!(
                        "; {} coded twice by one coder: the later kept",
                        r.replaced_by_later + r.kept_later
                    ));
                }
                if r.cleared_later > 0 {
                    s.push_str(&format!(
                        "; {} left out: their coder cleared them later",
                        r.cleared_later
                    ));
                }
                s.push('.');
                s
            }
        }
    };
    changed();
    note
}

/// The tray's "Add a coder's file": a corpus file's codebook and codes join these (its steps and
/// filters are not applied).
pub fn merge_file(text: &str) {
    if !ready() {
        return;
    }
    match vitrine_corpus::corpus::CorpusFile::from_json(text) {
        Ok(f) => {
            let note = take_codes(&f);
            select::note(if note.is_empty() {
                "The file has no codes."
            } else {
                &note
            });
        }
        Err(e) => select::note(&format!("Not added: {e}.")),
    }
}

/// Escape with the coding view or the codebook open closes it; true when it did.
pub fn escape() -> bool {
    if is_open() {
        close();
        return true;
    }
    if is_codebook_open() {
        close_codebook();
        return true;
    }
    false
}

/// The tray's coding buttons and the store.
pub fn install() {
    if let Some(b) = by_id("codebook-button") {
        listen(&b, "click", true, move |_e: web_sys::MouseEvent| {
            open_codebook()
        });
    }
    if let Some(b) = by_id("code-button") {
        listen(&b, "click", true, move |_e: web_sys::MouseEvent| {
            open_walk(false)
        });
    }
    if let Some(input) = document()
        .get_element_by_id("merge-codes")
        .and_then(|e| e.dyn_into::<web_sys::HtmlInputElement>().ok())
    {
        let i2 = input.clone();
        listen(&input, "change", true, move |_e: web_sys::Event| {
            let Some(file) = i2.files().and_then(|f| f.get(0)) else {
                return;
            };
            let i3 = i2.clone();
            wasm_bindgen_futures::spawn_local(async move {
                if let Ok(t) = JsFuture::from(file.text()).await {
                    merge_file(&t.as_string().unwrap_or_default());
                }
                i3.set_value("");
            });
        });
        if let Some(b) = by_id("merge-codes-button") {
            listen(&b, "click", true, move |_e: web_sys::MouseEvent| {
                input.click()
            });
        }
    }
    // Store once more when the page is left (a write under way then still completes).
    if let Some(w) = web_sys::window() {
        listen(&w, "pagehide", true, move |_e: web_sys::Event| {
            // A number or note being typed is kept: leaving its field commits it.
            let holds = |id: &str, e: &web_sys::Element| {
                by_id(id).is_some_and(|v| v.contains(Some(e.as_ref())))
            };
            if let Some(f) = document()
                .active_element()
                .filter(|e| holds("coding", e) || holds("card", e))
                .and_then(|e| e.dyn_into::<HtmlElement>().ok())
            {
                let _ = f.blur();
            }
            let behind = app().is_some_and(|a| {
                a.borrow().coding.generation != SAVING.with(|s| s.borrow().written)
            });
            if behind {
                save();
            }
        });
    }
    status();
}

/// A thumbnail sheet arrived: the coding view waiting for it draws its picture.
pub fn sheet_arrived(level: usize, index: usize) {
    let waiting = app().is_some_and(|a| {
        let a = a.borrow();
        let largest = a.sheets.levels.len().saturating_sub(1);
        level == largest
            && a.coding
                .current()
                .is_some_and(|i| a.sheets.sheet_of(largest, i) == index)
    });
    // Only the picture is drawn again: a field being typed in stays as it is.
    if let (true, Some(app), Some(pane)) = (
        waiting && is_open(),
        app(),
        document()
            .query_selector("#coding .coding-picture")
            .ok()
            .flatten(),
    ) {
        let a = app.borrow();
        if let Some(i) = a.coding.current() {
            fill_picture(&a, i, &pane);
        }
    }
}

/// For the bench: takes the codebook `json` (`{"variables": [...]}`) and the coder's name, and
/// opens the coding view over the corpus (every item when nothing is chosen).
#[wasm_bindgen]
pub fn bench_coding(json: &str, coder: &str) -> bool {
    let Ok(book) = serde_json::from_str::<Codebook>(json) else {
        return false;
    };
    let Some(app) = app() else { return false };
    {
        let mut a = app.borrow_mut();
        let codes = a.coding.codes.clone();
        let cleared = a.coding.clearings();
        a.viewer.coding.load(book, codes, cleared);
        a.viewer.coding.coder = coder.to_string();
    }
    changed();
    open_walk(false);
    is_open()
}
