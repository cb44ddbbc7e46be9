//! Every item's compressed vector, fetched when a feature first needs it (the record card's
//! closest items over the whole collection), with its progress shown; each part is checked
//! against the manifest's checksum.

use super::*;
use vitrine_corpus::grow::Q8;

enum State {
    Idle,
    Loading { done: usize, parts: usize },
    Ready(Rc<Q8>),
    Failed(String),
}

thread_local! {
    static STATE: RefCell<State> = const { RefCell::new(State::Idle) };
    /// What waits on the vectors: each runs after every part and once they are here.
    static WAITING: RefCell<Vec<Rc<dyn Fn()>>> = RefCell::new(Vec::new());
}

/// Runs everything that waits on the vectors.
fn tell() {
    let all: Vec<Rc<dyn Fn()>> = WAITING.with(|w| w.borrow().clone());
    for f in all {
        f();
    }
}

/// The vectors, when they are here.
pub fn ready() -> Option<Rc<Q8>> {
    STATE.with(|s| match &*s.borrow() {
        State::Ready(q) => Some(q.clone()),
        _ => None,
    })
}

/// A line on where the vectors stand (None once they are here, or when the atlas has none).
pub fn status() -> Option<String> {
    STATE.with(|s| match &*s.borrow() {
        State::Idle => None,
        State::Ready(_) => None,
        State::Loading { done, parts } => {
            let mb = app()
                .and_then(|a| {
                    let a = a.borrow();
                    a.atlas
                        .manifest
                        .vectors
                        .as_ref()
                        .map(|v| v.chunks.iter().map(|c| c.bytes).sum::<u64>() as f64 / 1e6)
                })
                .unwrap_or(0.0);
            Some(format!(
                "Fetching every item's vector: part {} of {parts} ({mb:.0} MB in all)…",
                (*done + 1).min(*parts)
            ))
        }
        State::Failed(e) => Some(format!("The vectors could not be fetched: {e}")),
    })
}

/// Starts fetching the vectors unless they are here or on their way; `then` runs (again) after
/// every part and once they are here (or failed), so that what waits on them can show the
/// progress.
pub fn fetch(then: impl Fn() + 'static) {
    if ready().is_some() {
        return then();
    }
    WAITING.with(|w| w.borrow_mut().push(Rc::new(then)));
    let start = STATE.with(|s| {
        let mut s = s.borrow_mut();
        match &*s {
            State::Idle | State::Failed(_) => {
                *s = State::Loading { done: 0, parts: 0 };
                true
            }
            _ => false,
        }
    });
    if !start {
        return;
    }
    let Some(app) = app() else { return };
    let Some(v) = app.borrow().atlas.manifest.vectors.clone() else {
        STATE.with(|s| *s.borrow_mut() = State::Failed("the atlas keeps none".into()));
        set_state("vectors", "failed");
        return finish();
    };
    let n = app.borrow().atlas.n;
    set_state("vectors", "loading");
    wasm_bindgen_futures::spawn_local(async move {
        let parts = v.chunks.len();
        let mut bytes = Vec::with_capacity(n * v.dims as usize);
        for (k, c) in v.chunks.iter().enumerate() {
            STATE.with(|s| *s.borrow_mut() = State::Loading { done: k, parts });
            tell();
            let got = fetch_bytes(&c.file)
                .await
                .and_then(|b| c.verify(&b).map(|_| b).map_err(|e| e.to_string()));
            match got {
                Ok(b) => bytes.extend_from_slice(&b),
                Err(e) => {
                    STATE.with(|s| *s.borrow_mut() = State::Failed(e));
                    set_state("vectors", "failed");
                    return finish();
                }
            }
        }
        let q = Q8 {
            dims: v.dims as usize,
            offset: v.offset.clone(),
            scale: v.scale.clone(),
            bytes,
        };
        STATE.with(|s| *s.borrow_mut() = State::Ready(Rc::new(q)));
        set_state("vectors", "ready");
        finish();
    });
}

/// The fetch is over: what waited hears of it once more and waits no longer.
fn finish() {
    let all: Vec<Rc<dyn Fn()>> = WAITING.with(|w| std::mem::take(&mut *w.borrow_mut()));
    for f in all {
        f();
    }
}

/// Whether the last fetch failed (the card offers to try again).
pub fn failed() -> bool {
    STATE.with(|s| matches!(&*s.borrow(), State::Failed(_)))
}

/// For the bench: the closest `k` items to item `i` over every item, in milliseconds (NaN
/// while the vectors are not here).
#[wasm_bindgen]
pub fn bench_closest(i: usize, k: usize) -> f64 {
    let Some(q) = ready() else {
        return f64::NAN;
    };
    let t0 = js_sys::Date::now();
    let got = vitrine_corpus::grow::closest(&q, i, k);
    let ms = js_sys::Date::now() - t0;
    if got.is_empty() {
        f64::NAN
    } else {
        ms
    }
}

/// For the bench: the closest `k` to one item over `n` made-up items of `dims` bytes (seeded
/// noise), in milliseconds: the search's cost at a size and width the atlas at hand may not have.
#[wasm_bindgen]
pub fn bench_closest_synthetic(n: usize, dims: usize, k: usize) -> f64 {
    let mut state = 0x1234_5678_9ABC_DEF0u64;
    let bytes: Vec<u8> = (0..n * dims)
        .map(|_| {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            (state >> 24) as u8
        })
        .collect();
    let q = Q8 {
        dims,
        offset: vec![0.0; dims],
        scale: (0..dims).map(|j| 1.0 / (1.0 + j as f32)).collect(),
        bytes,
    };
    let t0 = js_sys::Date::now();
    let got = vitrine_corpus::grow::closest(&q, n / 2, k);
    let ms = js_sys::Date::now() - t0;
    if got.len() == k {
        ms
    } else {
        f64::NAN
    }
}

/// For the bench: a round of growing — `like` items spread over the atlas as examples against
/// 200 background items, trained, every item scored, the 40 best candidates found — in
/// milliseconds (NaN while the vectors are not here).
#[wasm_bindgen]
pub fn bench_grow(like: usize) -> f64 {
    let Some(q) = ready() else {
        return f64::NAN;
    };
    let n = q.items();
    let t0 = js_sys::Date::now();
    let examples: Vec<usize> = (0..like.max(1)).map(|k| (k * 7919) % n.max(1)).collect();
    let marked: std::collections::HashSet<usize> = examples.iter().copied().collect();
    let bg = vitrine_corpus::grow::background(n, &marked, 200, 1);
    let Ok(m) = vitrine_corpus::grow::train(&q, &examples, &bg, 1.0) else {
        return f64::NAN;
    };
    let s = vitrine_corpus::grow::scores(&q, &m);
    let top = vitrine_corpus::grow::candidates(&s, &|i| marked.contains(&i), 40);
    let ms = js_sys::Date::now() - t0;
    if top.len() == 40.min(n) {
        ms
    } else {
        f64::NAN
    }
}

/// For the bench and the tests: starts fetching the vectors.
#[wasm_bindgen]
pub fn load_vectors() {
    fetch(|| {});
}
