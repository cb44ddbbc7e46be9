//! Sharing a corpus: the address (its hash) carries the map, the view, the filters and the
//! selection steps, so that a copied link reopens the same corpus elsewhere; and a corpus file
//! saved earlier can be opened again.

use super::*;
use vitrine_corpus::corpus::CorpusFile;
use vitrine_corpus::filter::Filter;
use vitrine_view::link::{Shared, KEY, MAX_LINK};

/// The address of the current corpus and view.
fn link(a: &mut App) -> String {
    let json = vitrine_view::link::link_json(a);
    let enc: String = js_sys::encode_uri_component(&json).into();
    let href = web_sys::window()
        .and_then(|w| w.location().href().ok())
        .unwrap_or_default();
    let base = href.split('#').next().unwrap_or("");
    format!("{base}#{KEY}{enc}")
}

/// Puts the current corpus into the address bar (without a new history entry); returns the link
/// or why it is not there.
pub fn update_address() -> Result<String, String> {
    let Some(app) = app() else {
        return Err("not started".into());
    };
    let url = {
        let mut a = app.borrow_mut();
        if !a.atlas.catalogue {
            return Err("the catalogue is loading".into());
        }
        link(&mut a)
    };
    if url.len() > MAX_LINK {
        // The address must not keep an older corpus that reloading would bring back.
        let plain = url.split('#').next().unwrap_or("").to_string();
        if let Some(h) = web_sys::window().and_then(|w| w.history().ok()) {
            let _ = h.replace_state_with_url(&JsValue::NULL, "", Some(&plain));
        }
        return Err(format!(
            "this corpus is too detailed for a link ({} characters; links here stay under {MAX_LINK}): \
             save the corpus file instead and share that",
            url.len()
        ));
    }
    if let Some(h) = web_sys::window().and_then(|w| w.history().ok()) {
        let _ = h.replace_state_with_url(&JsValue::NULL, "", Some(&url));
    }
    set_state("link", &url.len().to_string());
    Ok(url)
}

/// The "Copy link" action: the address is updated and copied to the clipboard.
pub fn copy_link() {
    match update_address() {
        Ok(url) => {
            if let Some(w) = web_sys::window() {
                let _ = w.navigator().clipboard().write_text(&url);
            }
            select::note("Link copied: it opens this corpus, its filters and this view.");
        }
        Err(e) => select::note(&format!("No link: {e}.")),
    }
}

/// Applies a map, filters and steps (from a link or a corpus file); the view after, if given.
fn apply(
    map: &str,
    filters: Vec<Filter>,
    steps: Vec<vitrine_corpus::corpus::Step>,
    view: Option<[f64; 3]>,
) -> Result<(), String> {
    let Some(app) = app() else { return Ok(()) };
    let i = {
        let a = app.borrow();
        a.atlas
            .maps
            .iter()
            .position(|m| m.name == map)
            .ok_or_else(|| format!("this atlas has no map called {map:?}"))?
    };
    if app.borrow().atlas.current != i {
        show_map_now(i, 0.0);
    }
    let result = app.borrow_mut().restore(i, filters, steps, view);
    filters::changed();
    result
}

/// Opens the corpus the address carries, if any (after the catalogue has loaded).
pub fn restore_from_address() {
    let hash = web_sys::window()
        .and_then(|w| w.location().hash().ok())
        .unwrap_or_default();
    let Some(enc) = hash.strip_prefix('#').and_then(|h| h.strip_prefix(KEY)) else {
        return;
    };
    let json: String = match js_sys::decode_uri_component(enc) {
        Ok(s) => s.into(),
        Err(_) => return select::note("The link's corpus could not be read (it is not valid)."),
    };
    let shared: Shared = match serde_json::from_str(&json) {
        Ok(s) => s,
        Err(e) => return select::note(&format!("The link's corpus could not be read: {e}.")),
    };
    let steps = match app() {
        Some(a) => vitrine_view::link::steps_of(&a.borrow(), shared.build.as_deref(), shared.steps),
        None => return,
    };
    let steps = match steps {
        Ok(s) => s,
        Err(e) => return select::note(&format!("The link's corpus could not be opened: {e}.")),
    };
    if let Err(e) = apply(&shared.map, shared.filters, steps, shared.view) {
        return select::note(&format!("The link's corpus could not be opened: {e}."));
    }
    set_state("restored", "link");
}

/// Opens a corpus file chosen by the user: its map, filters and steps; says when it was made on
/// another atlas or gives other items here.
pub fn open_file(text: String) {
    if !app().is_some_and(|a| a.borrow().atlas.catalogue) {
        return select::note("The catalogue is still loading: open the corpus file in a moment.");
    }
    let file = match CorpusFile::from_json(&text) {
        Ok(f) => f,
        Err(e) => return select::note(&format!("Not opened: {e}.")),
    };
    let Some(app) = app() else { return };
    let same_atlas = app.borrow().manifest_sha == file.atlas.manifest_sha256;
    if let Err(e) = apply(&file.map, file.filters.clone(), file.steps.clone(), None) {
        return select::note(&format!("The corpus file could not be opened: {e}."));
    }
    // Its codes join those kept here (nothing a coder entered is replaced).
    let codes_note = super::coding::take_codes(&file);
    // Its rounds of growing, and their marks, to go on from.
    super::grow::take_rounds(&file.grow);
    let corpus = document()
        .body()
        .and_then(|b| b.dataset().get("corpus"))
        .and_then(|c| c.parse::<usize>().ok());
    set_state("restored", "file");
    let said = match (same_atlas, corpus) {
        (false, _) => format!(
            "Opened a corpus made on another atlas or build ({:?}): its steps and filters were replayed here.",
            file.atlas.title
        ),
        (true, Some(c)) if c != file.count => format!(
            "The corpus file lists {} items, its steps give {c} here.",
            file.count
        ),
        _ => format!("Opened the corpus of {} items.", file.count),
    };
    select::note(format!("{said} {codes_note}").trim_end());
}

/// The tray's "Copy link" and "Open corpus file" buttons.
pub fn install() {
    if let Some(b) = by_id("copy-link") {
        listen(&b, "click", true, move |_e: web_sys::MouseEvent| {
            copy_link()
        });
    }
    let Some(input) = document()
        .get_element_by_id("open-corpus")
        .and_then(|e| e.dyn_into::<web_sys::HtmlInputElement>().ok())
    else {
        return;
    };
    let i2 = input.clone();
    listen(&input, "change", true, move |_e: web_sys::Event| {
        let Some(file) = i2.files().and_then(|f| f.get(0)) else {
            return;
        };
        let i3 = i2.clone();
        wasm_bindgen_futures::spawn_local(async move {
            if let Ok(t) = JsFuture::from(file.text()).await {
                open_file(t.as_string().unwrap_or_default());
            }
            i3.set_value("");
        });
    });
    if let Some(b) = by_id("open-corpus-button") {
        let i4 = input.clone();
        listen(&b, "click", true, move |_e: web_sys::MouseEvent| i4.click());
    }
}
