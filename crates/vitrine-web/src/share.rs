//! Sharing a corpus: the address (its hash) carries the map, the view, the filters and the
//! selection steps, so that a copied link reopens the same corpus elsewhere; and a corpus file
//! saved earlier can be opened again.

use super::*;
use vitrine_corpus::corpus::{CorpusFile, Op, Shape, Step};
use vitrine_corpus::filter::Filter;
use vitrine_corpus::polygon::Polygon;

/// The longest address the page writes: links much longer are cut or refused by mail programs,
/// chat tools and some servers.
pub const MAX_LINK: usize = 8000;
const KEY: &str = "corpus=";

/// Map coordinates kept to this many significant digits in a link (a lasso of 200 points stays short).
fn round(v: f64) -> f64 {
    if v == 0.0 || !v.is_finite() {
        return v;
    }
    let digits = 6 - v.abs().log10().ceil() as i32;
    let k = 10f64.powi(digits);
    (v * k).round() / k
}

fn rounded(steps: &[Step]) -> Vec<Step> {
    steps
        .iter()
        .map(|s| Step {
            op: s.op,
            shape: match &s.shape {
                Shape::Lasso(p) => Shape::Lasso(Polygon(
                    p.0.iter().map(|q| [round(q[0]), round(q[1])]).collect(),
                )),
                Shape::Rect(r) => Shape::Rect(r.map(round)),
                other => other.clone(),
            },
        })
        .collect()
}

/// A selection step as a link carries it: items picked by hand go by their numbers in this
/// build of the atlas, packed (a few characters each rather than a whole id); other steps as
/// they are.
#[derive(serde::Serialize, serde::Deserialize)]
#[serde(untagged)]
enum LinkStep {
    Packed { op: Op, items: String },
    Plain(Step),
}

/// The first 16 hex digits of the manifest's SHA-256: names the build whose item numbers a link
/// uses.
fn build_of(a: &App) -> String {
    a.manifest_sha.chars().take(16).collect()
}

/// What a link carries.
#[derive(serde::Serialize, serde::Deserialize)]
struct Shared {
    v: u32,
    map: String,
    /// Centre x, y and zoom relative to the fitted view (of `map`; none when another map is shown).
    #[serde(default)]
    view: Option<[f64; 3]>,
    /// The build (see [`build_of`]) whose item numbers packed steps use.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    build: Option<String>,
    #[serde(default)]
    steps: Vec<LinkStep>,
    #[serde(default)]
    filters: Vec<Filter>,
}

/// The steps as a link carries them: items by id packed as item numbers (ids this atlas does not
/// have stay as they are).
fn link_steps(a: &mut App) -> (Vec<LinkStep>, bool) {
    let steps = rounded(a.selection.steps());
    let mut packed = false;
    let mut out = Vec::with_capacity(steps.len());
    for s in steps {
        let Shape::Ids(ids) = &s.shape else {
            out.push(LinkStep::Plain(s));
            continue;
        };
        let numbers: Option<Vec<u32>> = select::index_of(a)
            .and_then(|m| ids.iter().map(|id| m.get(id).map(|&i| i as u32)).collect());
        match numbers {
            Some(v) => {
                packed = true;
                out.push(LinkStep::Packed {
                    op: s.op,
                    items: vitrine_corpus::packed::pack(&v),
                });
            }
            None => out.push(LinkStep::Plain(s)),
        }
    }
    (out, packed)
}

/// The steps of a link as steps (packed items back to their ids); packed items need the link to
/// come from this build of the atlas.
fn from_link_steps(
    a: &App,
    build: Option<&str>,
    steps: Vec<LinkStep>,
) -> Result<Vec<Step>, String> {
    let mut out = Vec::with_capacity(steps.len());
    for s in steps {
        match s {
            LinkStep::Plain(s) => out.push(s),
            LinkStep::Packed { op, items } => {
                if build != Some(build_of(a).as_str()) {
                    return Err(
                        "it names items by their place in another build of this atlas \
                                (ask for the corpus file, which names them by id)"
                            .into(),
                    );
                }
                let numbers =
                    vitrine_corpus::packed::unpack(&items, a.atlas.n).map_err(|e| e.to_string())?;
                let ids = numbers.iter().map(|&i| a.atlas.id(i as usize).to_string());
                out.push(Step {
                    op,
                    shape: Shape::Ids(ids.collect()),
                });
            }
        }
    }
    Ok(out)
}

/// The address of the current corpus and view, and its length.
fn link(a: &mut App) -> String {
    let (steps, packed) = link_steps(a);
    let k = if a.selection.steps().is_empty() {
        a.atlas.current
    } else {
        a.selection.map.min(a.atlas.maps.len() - 1)
    };
    let map = &a.atlas.maps[k];
    let s = Shared {
        v: 1,
        map: map.name.clone(),
        view: (k == a.atlas.current).then(|| {
            [
                round(a.camera.centre[0]),
                round(a.camera.centre[1]),
                round(a.camera.zoom / a.base_zoom),
            ]
        }),
        build: packed.then(|| build_of(a)),
        steps,
        filters: a.filters.list().to_vec(),
    };
    let json = serde_json::to_string(&s).unwrap_or_default();
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
    steps: Vec<Step>,
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
        set_map(i);
    }
    let result = (|| -> Result<(), String> {
        let mut a = app.borrow_mut();
        let n = a.atlas.n;
        // Steps first (on map i), then filters: each leaves things as they were if it fails.
        let ids = steps.iter().any(|s| matches!(s.shape, Shape::Ids(_)));
        let old_map = a.selection.map;
        a.selection.map = i;
        let r = select::with_lookup(&mut a, ids, |sel, at| sel.set_steps(i, steps, at));
        if let Err(e) = r {
            a.selection.map = old_map;
            return Err(e.to_string());
        }
        let App {
            filters: f, atlas, ..
        } = &mut *a;
        f.replace(filters, &atlas.fields, n)
            .map_err(|e| e.to_string())?;
        if let Some([x, y, z]) = view {
            let limits = a.zoom_limits();
            let zoom = (a.base_zoom * z).clamp(limits[0], limits[1]);
            if x.is_finite() && y.is_finite() && zoom.is_finite() && zoom > 0.0 {
                a.glide = None;
                a.camera.centre = [x, y];
                a.camera.zoom = zoom;
            }
        }
        Ok(())
    })();
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
        Some(a) => from_link_steps(&a.borrow(), shared.build.as_deref(), shared.steps),
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
    let corpus = document()
        .body()
        .and_then(|b| b.dataset().get("corpus"))
        .and_then(|c| c.parse::<usize>().ok());
    set_state("restored", "file");
    match (same_atlas, corpus) {
        (false, _) => select::note(&format!(
            "Opened a corpus made on another atlas or build ({:?}): its steps and filters were replayed here.",
            file.atlas.title
        )),
        (true, Some(c)) if c != file.count => select::note(&format!(
            "The corpus file lists {} items, its steps give {c} here.",
            file.count
        )),
        _ => select::note(&format!("Opened the corpus of {} items.", file.count)),
    }
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
