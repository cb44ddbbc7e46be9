//! Coding every item of the corpus at once: one value set (or, for several choices, added or
//! taken out) on each item, as this coder's own codes, asked first when it replaces codes, and
//! taken back in one step.

use super::*;
use crate::coding::{button, el};
use vitrine_corpus::coding::{CodeValue, Kind};

fn is_open() -> bool {
    by_id("bulk").is_some_and(|b| !b.hidden())
}

/// Opens the panel over the corpus.
pub fn open() {
    if !coding::ready() {
        return;
    }
    let Some(app) = app() else { return };
    {
        let a = app.borrow();
        if a.coding.book.is_empty() {
            drop(a);
            select::note("Define the codebook first (the tray's Codebook…).");
            return coding::open_codebook();
        }
        if a.tray_items.is_empty() {
            return select::note("Choose the items first: a lasso, a filter or a search.");
        }
    }
    coding::escape();
    measure::close();
    if let Some(b) = by_id("bulk") {
        b.set_hidden(false);
        let _ = b.set_attribute("tabindex", "-1");
    }
    render();
    if let Some(b) = by_id("bulk") {
        let _ = b.focus();
    }
}

pub fn close() -> bool {
    if !is_open() {
        return false;
    }
    if let Some(b) = by_id("bulk") {
        b.set_hidden(true);
    }
    focus_map();
    true
}

/// What a button does to each item's present value of a variable.
#[derive(Clone)]
enum Apply {
    /// Sets this value (None clears).
    Set(Option<CodeValue>),
    /// Adds a value to a several-choice code.
    Add(String),
    /// Takes a value out of a several-choice code (a code left empty means "none of these").
    TakeOut(String),
}

impl Apply {
    fn to(
        &self,
        now: Option<&CodeValue>,
        order: &dyn Fn(&str) -> Option<usize>,
    ) -> Option<CodeValue> {
        match self {
            Apply::Set(v) => v.clone(),
            Apply::Add(x) | Apply::TakeOut(x) => {
                let mut vs = match now {
                    Some(CodeValue::Several(v)) => v.clone(),
                    // Taking a value out of an uncoded item leaves it uncoded.
                    _ if matches!(self, Apply::TakeOut(_)) => return now.cloned(),
                    _ => vec![],
                };
                vs.retain(|t| t != x);
                if matches!(self, Apply::Add(_)) {
                    vs.push(x.clone());
                    vs.sort_by_key(|t| order(t));
                }
                Some(CodeValue::Several(vs))
            }
        }
    }

    fn said(&self, variable: &str) -> String {
        match self {
            Apply::Set(None) => format!("{variable} cleared"),
            Apply::Set(Some(v)) => format!("{variable} = {}", v.cell()),
            Apply::Add(x) => format!("{x} added to {variable}"),
            Apply::TakeOut(x) => format!("{x} taken out of {variable}"),
        }
    }
}

/// Applies `what` to variable `variable` of every item of the corpus, after asking when codes of
/// this coder would be replaced or cleared.
fn apply(variable: &str, what: Apply) {
    let Some(app) = app() else { return };
    let (items, replaced, var) = {
        let a = app.borrow();
        if a.coding.coder.trim().is_empty() {
            drop(a);
            return select::note("Give your name as coder first (below the heading).");
        }
        let Some(var) = a.coding.book.variable(variable).cloned() else {
            return;
        };
        let items: Vec<(usize, String)> = a
            .tray_items
            .iter()
            .map(|&i| (i as usize, a.atlas.id(i as usize).to_string()))
            .collect();
        let order = |t: &str| var.value_index(t);
        // Codes this coder had that the step changes or removes (not merely adds to).
        let replaced = items
            .iter()
            .filter_map(|(_, id)| a.coding.own_code(id, variable))
            .filter(|c| {
                let to = what.to(Some(&c.value), &order);
                to.as_ref().is_none_or(|v| match (&c.value, v) {
                    (CodeValue::Several(old), CodeValue::Several(new)) => {
                        !old.iter().all(|t| new.contains(t))
                    }
                    (old, new) => old != new,
                })
            })
            .count();
        (items, replaced, var)
    };
    let said = what.said(variable);
    if replaced > 0
        && !coding::confirm(&format!(
            "{said} on {} items: this changes or clears {replaced} of your codes. Go on?",
            items.len()
        ))
    {
        return;
    }
    let n = {
        let mut a = app.borrow_mut();
        let order = |t: &str| var.value_index(t);
        let to = |now: Option<&CodeValue>| what.to(now, &order);
        a.viewer
            .coding
            .set_many(&items, variable, &to, &coding::now_utc())
    };
    if n > 0 {
        coding::changed();
    }
    select::note(&format!("{said}: {n} of {} items changed.", items.len()));
    set_state("bulk", &n.to_string());
    render();
}

fn render() {
    let Some(app) = app() else { return };
    let Some(panel) = by_id("bulk") else { return };
    // Emptied before the state is borrowed (a field taken out fires its change event).
    panel.set_text_content(None);
    let a = app.borrow();
    let doc = document();
    let head = el("header", "coding-head", "");
    let _ = head.append_child(&el(
        "h2",
        "",
        &format!("Code all {} items of the corpus", a.tray_items.len()),
    ));
    let _ = head.append_child(&button("Close", "Close (Escape)", || {
        close();
    }));
    let _ = panel.append_child(&head);
    let coder = a.coding.coder.trim();
    let _ = panel.append_child(&el(
        "p",
        "how",
        &if coder.is_empty() {
            "Give your name as coder in the coding view (k) first: every code keeps it.".to_string()
        } else {
            format!(
                "As {coder}: each button sets the value on every item of the corpus (your own codes; \
                 other coders' codes are not touched). Asked first when your codes would change."
            )
        },
    ));
    for var in &a.coding.book.variables {
        let row = el("div", "codebook-variable", "");
        let _ = row.set_attribute("data-variable", &var.name);
        let line = el("div", "row", "");
        let _ = line.append_child(&el("span", "variable-name", &var.name));
        let coded = a
            .tray_items
            .iter()
            .filter(|&&i| {
                a.coding
                    .own_code(a.atlas.id(i as usize), &var.name)
                    .is_some()
            })
            .count();
        let _ = line.append_child(&el(
            "span",
            "count",
            &format!("{coded} of {} coded by you", a.tray_items.len()),
        ));
        let _ = row.append_child(&line);
        let values = el("div", "row", "");
        let name = var.name.clone();
        let act = move |what: Apply| {
            let name = name.clone();
            move || apply(&name, what.clone())
        };
        match var.kind {
            Kind::One => {
                for d in &var.values {
                    let b = button(
                        &d.value,
                        &format!("Set {} to {} on every item", var.name, d.value),
                        act(Apply::Set(Some(CodeValue::Text(d.value.clone())))),
                    );
                    let _ = values.append_child(&b);
                }
            }
            Kind::YesNo => {
                for (t, v) in [("yes", true), ("no", false)] {
                    let b = button(
                        t,
                        &format!("Set {} to {t} on every item", var.name),
                        act(Apply::Set(Some(CodeValue::YesNo(v)))),
                    );
                    let _ = values.append_child(&b);
                }
            }
            Kind::Several => {
                for d in &var.values {
                    let _ = values.append_child(&button(
                        &format!("+ {}", d.value),
                        &format!("Add {} to every item's {}", d.value, var.name),
                        act(Apply::Add(d.value.clone())),
                    ));
                    let _ = values.append_child(&button(
                        &format!("− {}", d.value),
                        &format!("Take {} out of every item's {}", d.value, var.name),
                        act(Apply::TakeOut(d.value.clone())),
                    ));
                }
            }
            Kind::Number | Kind::Note => {
                let f: web_sys::HtmlInputElement =
                    doc.create_element("input").unwrap().dyn_into().unwrap();
                f.set_type("text");
                let _ = f.set_attribute("aria-label", &format!("{} for every item", var.name));
                let _ = f.set_attribute("data-field", &var.name);
                let _ = values.append_child(&f);
                let (f2, v2) = (f.clone(), var.clone());
                let _ = values.append_child(&button(
                    "Set on all",
                    &format!("Set this {} on every item", var.kind.label()),
                    move || match CodeValue::parse(&v2, &f2.value()) {
                        Ok(Some(v)) => apply(&v2.name, Apply::Set(Some(v))),
                        Ok(None) => select::note("Type a value first."),
                        Err(why) => select::note(&format!("Not coded: {why}.")),
                    },
                ));
            }
        }
        let _ = values.append_child(&button(
            "Clear",
            &format!("Clear your {} code of every item", var.name),
            act(Apply::Set(None)),
        ));
        let _ = row.append_child(&values);
        let _ = panel.append_child(&row);
    }
    let foot = el("div", "row", "");
    let undo = button("Undo", "Take back the last step of coding", || {
        let done = super::app().is_some_and(|a| a.borrow_mut().viewer.coding.undo());
        if done {
            coding::changed();
            select::note("The last coding step was taken back.");
        }
        render();
    });
    undo.set_id("bulk-undo");
    if !a.coding.can_undo() {
        let _ = undo.set_attribute("disabled", "");
    }
    let _ = foot.append_child(&undo);
    let _ = panel.append_child(&foot);
}

pub fn install() {
    if let Some(b) = by_id("code-all-button") {
        listen(&b, "click", true, move |_e: web_sys::MouseEvent| open());
    }
}

/// The corpus changed: an open panel counts the new one.
pub fn corpus_changed() {
    if is_open() {
        render();
    }
}
