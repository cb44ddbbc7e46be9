//! Growing the corpus from examples in the page: items marked "like these" and "not these" (in
//! the record card, or by the keys . and , on its item), a model trained on every item's
//! compressed vector (fetched on first use), the map coloured by its scores, and a ranked grid of
//! the best unmarked candidates to accept into the corpus or reject, one by one or the top N.
//! The rounds go into the corpus file and replay with `vitrine corpus`.

use std::collections::BTreeSet;

use super::*;
use crate::coding::{button, el};
use vitrine_corpus::grow::{self, Round};

/// Candidates the panel's grid shows.
const SHOWN: usize = 40;

struct Grow {
    like: BTreeSet<usize>,
    not: BTreeSet<usize>,
    c: f64,
    background: usize,
    seed: u64,
    rounds: Vec<Round>,
    /// The scores of round `.1` (its index in `rounds`), whose candidates the panel shows.
    scores: Option<(Rc<Vec<f32>>, usize)>,
    note: String,
}

impl Default for Grow {
    fn default() -> Grow {
        Grow {
            like: BTreeSet::new(),
            not: BTreeSet::new(),
            c: 1.0,
            background: 200,
            seed: 1,
            rounds: Vec::new(),
            scores: None,
            note: String::new(),
        }
    }
}

thread_local! {
    static GROW: RefCell<Grow> = RefCell::new(Grow::default());
    /// A training waits for the vectors to arrive.
    static TRAIN_WAITING: std::cell::Cell<bool> = const { std::cell::Cell::new(false) };
}

/// The rounds so far, for the corpus file.
pub fn rounds() -> Vec<Round> {
    GROW.with(|g| g.borrow().rounds.clone())
}

/// Takes over a corpus file's rounds: the marks of the last (its rejected items "not these"),
/// its settings, and the rounds themselves to go on from. Ids this atlas lacks are left out of
/// the marks (the rounds keep them).
pub fn take_rounds(rounds: &[Round]) {
    let Some(last) = rounds.last() else {
        // A corpus not grown: this session's rounds and marks were of another.
        GROW.with(|g| *g.borrow_mut() = Grow::default());
        return counts_changed();
    };
    let Some(app) = app() else { return };
    let (like, not) = {
        let mut a = app.borrow_mut();
        let Some(index) = a.viewer.index_of() else {
            return;
        };
        let find = |id: &String| index.get(id.as_str()).copied();
        let like: BTreeSet<usize> = last.like.iter().filter_map(find).collect();
        let not: BTreeSet<usize> = last
            .not
            .iter()
            .chain(&last.rejected)
            .filter_map(find)
            .collect();
        (like, not)
    };
    GROW.with(|g| {
        let mut g = g.borrow_mut();
        g.like = like;
        g.not = not;
        g.c = last.c;
        g.background = last.background;
        g.seed = last.seed;
        g.rounds = rounds.to_vec();
        g.scores = None;
        g.note = format!(
            "{} rounds taken from the corpus file: train to see the candidates again.",
            rounds.len()
        );
    });
    counts_changed();
}

/// How item `i` is marked: "like", "not" or "".
pub fn mark_of(i: usize) -> &'static str {
    GROW.with(|g| {
        let g = g.borrow();
        if g.like.contains(&i) {
            "like"
        } else if g.not.contains(&i) {
            "not"
        } else {
            ""
        }
    })
}

/// Marks item `i` ("like", "not"), or takes its mark away when it has that one already.
pub fn toggle(i: usize, how: &str) {
    GROW.with(|g| {
        let mut g = g.borrow_mut();
        let (this, other) = if how == "like" {
            let g = &mut *g;
            (&mut g.like, &mut g.not)
        } else {
            let g = &mut *g;
            (&mut g.not, &mut g.like)
        };
        other.remove(&i);
        if !this.remove(&i) {
            this.insert(i);
        }
    });
    counts_changed();
}

fn counts_changed() {
    let (l, n) = GROW.with(|g| (g.borrow().like.len(), g.borrow().not.len()));
    set_state("growMarks", &format!("{l},{n}"));
    tray::render();
    if let Some(i) = app().and_then(|a| a.borrow().open) {
        open_card(Some(i));
    }
    if is_open() {
        render();
    }
}

/// The record card's marking buttons for item `i`.
pub fn card_marks(i: usize) -> web_sys::Element {
    let row = el("div", "row grow-marks", "");
    let mark = mark_of(i);
    for (how, text, title) in [
        (
            "like",
            "Like these",
            "Mark as an example of what the corpus should grow by (the key .)",
        ),
        (
            "not",
            "Not these",
            "Mark as an example of what it should not (the key ,)",
        ),
    ] {
        let b = button(text, title, move || toggle(i, how));
        b.set_id(&format!("card-{how}"));
        let on = mark == how;
        b.set_class_name(if on { "value on" } else { "value" });
        let _ = b.set_attribute("aria-pressed", if on { "true" } else { "false" });
        let _ = row.append_child(&b);
    }
    let g = button("Grow…", "The marks, the model and its candidates", open);
    g.set_id("card-grow");
    let _ = row.append_child(&g);
    row
}

fn is_open() -> bool {
    by_id("grow").is_some_and(|g| !g.hidden())
}

pub fn open() {
    if let Some(g) = by_id("grow") {
        g.set_hidden(false);
        let _ = g.set_attribute("tabindex", "-1");
    }
    render();
    if let Some(g) = by_id("grow") {
        let _ = g.focus();
    }
}

pub fn close() -> bool {
    if !is_open() {
        return false;
    }
    if let Some(g) = by_id("grow") {
        g.set_hidden(true);
    }
    focus_map();
    true
}

/// Trains a round on the marks (fetching the vectors first if need be) and scores every item.
fn train() {
    let Some(q) = vectors::ready() else {
        // One training waits for the vectors, however often Train is pressed meanwhile.
        if TRAIN_WAITING.with(|w| w.replace(true)) {
            return;
        }
        return vectors::fetch(|| {
            if vectors::ready().is_some() {
                TRAIN_WAITING.with(|w| w.set(false));
                train();
            } else {
                if vectors::failed() {
                    TRAIN_WAITING.with(|w| w.set(false));
                }
                if is_open() {
                    render();
                }
            }
        });
    };
    let Some(app) = app() else { return };
    let t0 = js_sys::Date::now();
    let outcome = GROW.with(|g| {
        let mut g = g.borrow_mut();
        let a = app.borrow();
        let like: Vec<usize> = g.like.iter().copied().collect();
        let marked: std::collections::HashSet<usize> = g.like.union(&g.not).copied().collect();
        let bg = grow::background(q.items(), &marked, g.background, g.seed);
        let not: Vec<usize> = g.not.iter().copied().chain(bg).collect();
        match grow::train(&q, &like, &not, g.c) {
            Err(e) => Err(e),
            Ok(m) => {
                let s = grow::scores(&q, &m);
                let ms = js_sys::Date::now() - t0;
                let id = |i: &usize| a.atlas.id(*i).to_string();
                let round = Round {
                    like: g.like.iter().map(id).collect(),
                    not: g.not.iter().map(id).collect(),
                    c: g.c,
                    background: g.background,
                    seed: g.seed,
                    accepted: vec![],
                    rejected: vec![],
                };
                g.rounds.push(round);
                g.note = format!(
                    "Round {}: trained on {} like these, {} not these and {} background items; every item scored in {:.0} ms.",
                    g.rounds.len(),
                    g.like.len(),
                    g.not.len(),
                    g.background,
                    ms
                );
                let k = g.rounds.len() - 1;
                g.scores = Some((Rc::new(s), k));
                Ok(())
            }
        }
    });
    match outcome {
        // No scores stand for marks they were not trained on: the grid and the colours go.
        Err(e) => GROW.with(|g| {
            let mut g = g.borrow_mut();
            g.note = format!("Not trained: {e}.");
            g.scores = None;
        }),
        Ok(()) => colour_map(),
    }
    render();
}

/// Colours the map by the last round's scores.
pub fn colour_map() {
    let Some((s, _)) = GROW.with(|g| g.borrow().scores.clone()) else {
        return;
    };
    let values: Vec<f64> = s.iter().map(|&x| x as f64).collect();
    ensure_menu_option();
    filters::colour_by_values(&values, "grow scores", "grow");
    set_state(
        "growRounds",
        &GROW.with(|g| g.borrow().rounds.len()).to_string(),
    );
}

fn ensure_menu_option() {
    let Some(sel) = document()
        .get_element_by_id("colour-choice")
        .and_then(|e| e.dyn_into::<web_sys::HtmlSelectElement>().ok())
    else {
        return;
    };
    if sel
        .query_selector("option[value=\"grow\"]")
        .ok()
        .flatten()
        .is_none()
    {
        if let Ok(o) = web_sys::HtmlOptionElement::new_with_text_and_value("grow scores", "grow") {
            let _ = sel.append_child(&o);
        }
    }
}

/// The best unmarked candidates not yet in the corpus, best first.
fn candidates(a: &App, s: &[f32], k: usize) -> Vec<usize> {
    let chosen = a.selection.mask().cloned();
    GROW.with(|g| {
        let g = g.borrow();
        grow::candidates(
            s,
            &|i| {
                g.like.contains(&i)
                    || g.not.contains(&i)
                    || chosen.as_ref().is_some_and(|m| m.get(i))
            },
            k,
        )
    })
}

/// Accepts `items` into the corpus (one step) and records them with the last round.
fn accept(items: Vec<usize>) {
    let Some(app) = app() else { return };
    if items.is_empty() {
        return;
    }
    let ids: Vec<String> = {
        let a = app.borrow();
        items.iter().map(|&i| a.atlas.id(i).to_string()).collect()
    };
    let r = app.borrow_mut().apply_step(Step {
        op: Op::Add,
        shape: Shape::Ids(ids.clone()),
    });
    match r {
        // Recorded with the round whose candidates they were.
        Ok(()) => GROW.with(|g| {
            let mut g = g.borrow_mut();
            if let Some(k) = g.scores.as_ref().map(|s| s.1) {
                if let Some(r) = g.rounds.get_mut(k) {
                    r.accepted.extend(ids);
                }
            }
        }),
        Err(e) => select::note(&e),
    }
    select::refresh();
    render();
}

/// Rejects candidate `i`: marked "not these" for the next round.
fn reject(i: usize) {
    let id = app().map(|a| a.borrow().atlas.id(i).to_string());
    GROW.with(|g| {
        let mut g = g.borrow_mut();
        g.not.insert(i);
        g.like.remove(&i);
        let k = g.scores.as_ref().map(|s| s.1);
        if let (Some(r), Some(id)) = (k.and_then(|k| g.rounds.get_mut(k)), id) {
            r.rejected.push(id);
        }
    });
    counts_changed();
}

fn number_field(
    id: &str,
    label: &str,
    value: String,
    set: impl Fn(f64) + 'static,
) -> web_sys::Element {
    let l = el("label", "", label);
    let f: web_sys::HtmlInputElement = document()
        .create_element("input")
        .unwrap()
        .dyn_into()
        .unwrap();
    f.set_id(id);
    f.set_type("text");
    let _ = f.set_attribute("inputmode", "decimal");
    f.set_value(&value);
    let f2 = f.clone();
    listen(&f, "change", true, move |_e: web_sys::Event| {
        if let Ok(v) = f2.value().trim().parse::<f64>() {
            set(v);
        }
    });
    let _ = l.append_child(&f);
    l
}

fn render() {
    let Some(app) = app() else { return };
    let Some(panel) = by_id("grow") else { return };
    panel.set_text_content(None);
    let a = app.borrow();
    let head = el("header", "coding-head", "");
    let _ = head.append_child(&el("h2", "", "Grow the corpus from examples"));
    let _ = head.append_child(&button("Close", "Close (Escape)", || {
        close();
    }));
    let _ = panel.append_child(&head);
    let (like, not, c, background, note, scores) = GROW.with(|g| {
        let g = g.borrow();
        (
            g.like.iter().copied().collect::<Vec<_>>(),
            g.not.iter().copied().collect::<Vec<_>>(),
            g.c,
            g.background,
            g.note.clone(),
            g.scores.clone(),
        )
    });
    let _ = panel.append_child(&el(
        "p",
        "how",
        "Mark items in their record cards (Like these, Not these; the keys . and , on the card's item). \
         A model learns from the marks what sets the first apart, on every item's compressed vector, \
         and ranks every other item; accept the best into the corpus, reject the wrong ones, train again.",
    ));
    let dpr = web_sys::window().map_or(1.0, |w| w.device_pixel_ratio());
    for (what, items, how) in [("Like these", &like, "like"), ("Not these", &not, "not")] {
        let row = el("div", "grow-row", "");
        let _ = row.set_attribute("data-marks", how);
        let _ = row.append_child(&el("h3", "", &format!("{what} ({})", items.len())));
        let strip = el("div", "closest-strip", "");
        for &i in items.iter().take(60) {
            let tile = el("div", "tile", "");
            let pic = tray::picture_button(&a, i, dpr);
            listen(&pic, "click", true, move |_e: web_sys::MouseEvent| {
                open_card(Some(i))
            });
            let _ = tile.append_child(&pic);
            let _ = strip.append_child(&tile);
        }
        let _ = row.append_child(&strip);
        let _ = panel.append_child(&row);
    }
    let settings = el("div", "row", "");
    let _ = settings.append_child(&number_field("grow-c", "C ", format!("{c}"), |v| {
        if v.is_finite() && v > 0.0 {
            GROW.with(|g| g.borrow_mut().c = v);
        }
    }));
    let _ = settings.append_child(&number_field(
        "grow-background",
        "background items ",
        format!("{background}"),
        |v| {
            if v.is_finite() {
                let n = v.clamp(0.0, grow::MAX_BACKGROUND as f64) as usize;
                GROW.with(|g| g.borrow_mut().background = n);
            }
        },
    ));
    let b = button(
        "Train",
        "Train the model on the marks and score every item",
        train,
    );
    b.set_id("grow-train");
    let _ = settings.append_child(&b);
    let _ = panel.append_child(&settings);
    if let Some(line) = vectors::status() {
        let _ = panel.append_child(&el("p", "pending", &line));
    }
    if !note.is_empty() {
        let _ = panel.append_child(&el("p", "how", &note));
    }
    if let Some((s, _)) = scores {
        let top = candidates(&a, &s, SHOWN);
        let row = el("div", "row", "");
        let n: web_sys::HtmlInputElement = document()
            .create_element("input")
            .unwrap()
            .dyn_into()
            .unwrap();
        n.set_id("grow-top-n");
        n.set_type("text");
        n.set_value("20");
        let _ = n.set_attribute("aria-label", "how many of the best to accept");
        let (n2, s2) = (n.clone(), s.clone());
        let acc = button(
            "Accept the top",
            "Accept this many of the best candidates into the corpus",
            move || {
                let k = n2.value().trim().parse::<usize>().unwrap_or(0);
                let top = super::app()
                    .map(|a| candidates(&a.borrow(), &s2, k))
                    .unwrap_or_default();
                accept(top);
            },
        );
        acc.set_id("grow-accept-top");
        let _ = row.append_child(&acc);
        let _ = row.append_child(&n);
        let _ = panel.append_child(&row);
        let grid = el("div", "grow-candidates", "");
        for i in top {
            let tile = el("div", "candidate", "");
            let _ = tile.set_attribute("data-id", a.atlas.id(i));
            let t = el("div", "tile", "");
            let pic = tray::picture_button(&a, i, dpr);
            listen(&pic, "click", true, move |_e: web_sys::MouseEvent| {
                open_card(Some(i))
            });
            let _ = t.append_child(&pic);
            let _ = tile.append_child(&t);
            let _ = tile.append_child(&el("span", "score", &format!("{:.2}", s[i])));
            let ok = button("✓", "Accept into the corpus", move || accept(vec![i]));
            ok.set_class_name("accept");
            let no = button("✗", "Not these: reject", move || reject(i));
            no.set_class_name("reject");
            let act = el("div", "act", "");
            let _ = act.append_child(&ok);
            let _ = act.append_child(&no);
            let _ = tile.append_child(&act);
            let _ = grid.append_child(&tile);
        }
        let _ = panel.append_child(&grid);
    }
}

/// A key on the record card's item (else the item under the pointer on the map): . marks it
/// "like these", , "not these".
pub fn key(k: &str) -> bool {
    if !matches!(k, "." | ",") {
        return false;
    }
    let Some(i) = app()
        .filter(|a| a.borrow().atlas.manifest.vectors.is_some())
        .and_then(|a| {
            let a = a.borrow();
            a.open.or_else(|| crate::under_pointer(&a))
        })
    else {
        return false;
    };
    toggle(i, if k == "." { "like" } else { "not" });
    // Said in words (the map shows no mark of it).
    let label = app().map(|a| a.borrow().atlas.label(i)).unwrap_or_default();
    let (l, n) = GROW.with(|g| (g.borrow().like.len(), g.borrow().not.len()));
    let now = match mark_of(i) {
        "like" => "like these",
        "not" => "not these",
        _ => "no longer marked",
    };
    select::note(&format!(
        "{label}: {now} ({l} like these, {n} not these; Grow… in its record card)"
    ));
    true
}

pub fn install() {
    if let Some(b) = by_id("grow-button") {
        listen(&b, "click", true, move |_e: web_sys::MouseEvent| open());
    }
}

/// The corpus changed: an open panel shows the candidates not yet in it.
pub fn corpus_changed() {
    if is_open() {
        render();
    }
}
