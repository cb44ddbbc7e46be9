//! The page's side of the catalogue filters: the search box, the filters row, the filter panel
//! (category values with their cross-filtered counts, number and date ranges), dim or hide.

use super::*;
use vitrine_corpus::columns::Column;
use vitrine_corpus::filter::{DateRule, Filter};
use vitrine_format::FieldKind;

thread_local! {
    /// Per field (index): what its value finder holds, kept while the panel is rebuilt.
    static VALUE_FIND: RefCell<HashMap<usize, String>> = RefCell::new(HashMap::new());
}

/// Category values listed per field in the panel (the rest through the field's value finder).
const PANEL_VALUES: usize = 40;
/// Milliseconds of quiet typing before a search runs.
const SEARCH_DELAY_MS: i32 = 250;

fn input(id: &str) -> Option<web_sys::HtmlInputElement> {
    document()
        .get_element_by_id(id)
        .and_then(|e| e.dyn_into().ok())
}

/// Sets a filter (replacing the one on its field) and shows the result; in a tiled atlas, the
/// columns it reads are fetched first.
pub fn set(f: Filter) {
    let Some(app) = app() else { return };
    let names: Vec<String> = {
        let a = app.borrow();
        let m = &a.atlas.manifest;
        match &f {
            Filter::Text { fields, .. } if fields.is_empty() => m
                .fields
                .iter()
                .filter(|x| matches!(x.kind, FieldKind::Text | FieldKind::Link))
                .map(|x| x.name.clone())
                .collect(),
            f => f.fields().iter().map(|x| x.to_string()).collect(),
        }
    };
    columns::ensure(names, move || set_now(f));
}

fn set_now(f: Filter) {
    let Some(app) = app() else { return };
    let t0 = now();
    let r = {
        let mut a = app.borrow_mut();
        if !a.atlas.catalogue && a.atlas.tiled.is_none() {
            return;
        }
        let n = a.atlas.n;
        let Viewer { filters, atlas, .. } = &mut a.viewer;
        filters.set(f, &atlas.fields, n)
    };
    if let Err(e) = r {
        select::note(&e.to_string());
        return;
    }
    let t1 = now();
    changed();
    // What a filter costs, for the bench: every item's pass, then the page brought up to date.
    set_state("filterMs", &format!("{:.0}+{:.0}", t1 - t0, now() - t1));
}

pub fn remove(k: usize) {
    let Some(app) = app() else { return };
    {
        let mut a = app.borrow_mut();
        let n = a.atlas.n;
        let Viewer { filters, atlas, .. } = &mut a.viewer;
        let _ = filters.remove(k, &atlas.fields, n);
    }
    // The search box mirrors the search filter.
    let has_search = app
        .borrow()
        .filters
        .list()
        .iter()
        .any(|f| matches!(f, Filter::Text { .. }));
    if !has_search {
        if let Some(i) = input("search") {
            i.set_value("");
        }
    }
    changed();
}

thread_local! {
    /// Changes of the filters so far (the page's `data-filter-changes`, which tests and the
    /// bench wait on).
    static CHANGES: std::cell::Cell<u64> = const { std::cell::Cell::new(0) };
}

/// After any change of the filters: the filters row, panel, counts, dimming.
pub fn changed() {
    let k = CHANGES.with(|c| {
        c.set(c.get() + 1);
        c.get()
    });
    set_state("filterChanges", &k.to_string());
    render_filters_row();
    if by_id("filter-panel").is_some_and(|p| !p.hidden()) {
        update_panel();
    }
    if let Some(app) = app() {
        let a = app.borrow();
        set_state("filters", &a.filters.list().len().to_string());
        let text = match a.filters.passing() {
            Some(p) => format!("{} of {} pass", p.count(), a.atlas.n),
            None => String::new(),
        };
        set_state(
            "passing",
            &a.filters
                .passing()
                .map_or(String::new(), |p| p.count().to_string()),
        );
        if let Some(c) = by_id("filtered-count") {
            c.set_text_content(Some(&text));
        }
    }
    select::refresh();
}

/// The filters row: an item with its × for each active filter.
fn render_filters_row() {
    let Some(box_) = by_id("filters") else { return };
    box_.set_text_content(None);
    let Some(app) = app() else { return };
    let list = app.borrow().filters.list().to_vec();
    let doc = document();
    for (k, f) in list.iter().enumerate() {
        let item = doc.create_element("span").unwrap();
        item.set_class_name("filter");
        item.set_text_content(Some(&f.label()));
        let x = doc.create_element("button").unwrap();
        x.set_text_content(Some("×"));
        let _ = x.set_attribute("aria-label", &format!("Remove the filter {}", f.label()));
        listen(&x, "click", true, move |_e: web_sys::MouseEvent| remove(k));
        let _ = item.append_child(&x);
        let _ = box_.append_child(&item);
    }
    // More filters than the row shows: the row fades at its end and says how to see the rest.
    let over = box_.scroll_width() > box_.client_width();
    let _ = box_.class_list().toggle_with_force("overflowing", over);
    box_.set_title(if over {
        "More filters: scroll sideways (or turn the wheel here) to see them all"
    } else {
        ""
    });
}

/// The values chosen for category field `name` (none when it has no filter).
fn chosen_values(f: &vitrine_view::filters::Filters, name: &str) -> Vec<String> {
    match f.on(name) {
        Some(Filter::Category { values, .. }) => values.clone(),
        _ => Vec::new(),
    }
}

/// The bounds a range or date filter on `name` sets (None where open or unfiltered) and its rule.
fn bounds_of(
    f: &vitrine_view::filters::Filters,
    name: &str,
) -> (Option<f64>, Option<f64>, DateRule) {
    match f.on(name) {
        Some(Filter::Range { min, max, .. }) => (*min, *max, DateRule::Overlap),
        Some(Filter::Date { from, to, rule, .. }) => (Some(*from as f64), Some(*to as f64), *rule),
        _ => (None, None, DateRule::Overlap),
    }
}

/// A date rule as the rule menu's option value.
fn rule_value(rule: DateRule) -> &'static str {
    match rule {
        DateRule::Within => "within",
        DateRule::Overlap => "overlap",
    }
}

/// The filter panel: one section per category, number and date field.
fn render_panel() {
    let Some(panel) = by_id("filter-panel") else {
        return;
    };
    let Some(app) = app() else { return };
    let a = app.borrow();
    let doc = document();
    // Keep which sections were open across the rebuild.
    let open: Vec<String> = (0..a.atlas.fields.len())
        .filter(|&k| {
            doc.get_element_by_id(&format!("field-{k}"))
                .is_some_and(|d| d.has_attribute("open"))
        })
        .map(|k| a.atlas.fields[k].field.name.clone())
        .collect();
    panel.set_text_content(None);
    if !a.atlas.catalogue && a.atlas.tiled.is_none() {
        panel.set_text_content(Some("The catalogue is loading…"));
        return;
    }
    if a.atlas.tiled.is_some() {
        let p = doc.create_element("p").unwrap();
        p.set_class_name("panel-note");
        p.set_text_content(Some(
            "This atlas is stored in tiles: a field's values are fetched for every item when you \
             open it (counts and filters are then exact over the whole collection).",
        ));
        let _ = panel.append_child(&p);
    }
    let n = a.atlas.n;
    for (k, c) in a.atlas.fields.iter().enumerate() {
        let name = c.field.name.clone();
        let body = doc.create_element("div").unwrap();
        body.set_class_name("field-body");
        match (&c.column, c.field.kind) {
            (Column::Category(_), _) => {
                let counts = a.filters.counts(c, n);
                let chosen = chosen_values(&a.filters, &name);
                let many = c.field.values.len() > PANEL_VALUES;
                let query = VALUE_FIND.with(|q| q.borrow().get(&k).cloned().unwrap_or_default());
                if many {
                    // A long list gets a finder: it narrows the values listed, never the filter.
                    let find: web_sys::HtmlInputElement =
                        doc.create_element("input").unwrap().unchecked_into();
                    find.set_type("search");
                    find.set_class_name("value-find");
                    find.set_id(&format!("field-{k}-find"));
                    find.set_value(&query);
                    find.set_placeholder(&format!("Find among {} values", c.field.values.len()));
                    let _ = find.set_attribute("aria-label", &format!("Find a value of {name}"));
                    let f2 = find.clone();
                    listen(&find, "input", true, move |e: web_sys::Event| {
                        // Not while an input method is composing a character (the field is
                        // made anew, which would break the composition): at its end instead.
                        let composing = js_sys::Reflect::get(&e, &"isComposing".into())
                            .ok()
                            .and_then(|v| v.as_bool())
                            .unwrap_or(false);
                        if !composing {
                            finder_changed(k, f2.value());
                        }
                    });
                    let f3 = find.clone();
                    listen(&find, "compositionend", true, move |_e: web_sys::Event| {
                        finder_changed(k, f3.value())
                    });
                    let _ = body.append_child(&find);
                }
                // Values keep their places as the other filters change (by their share of the
                // whole collection); only their counts follow.
                let whole = if c.field.value_counts.len() == c.field.values.len() {
                    c.field.value_counts.clone()
                } else {
                    vitrine_corpus::filter::category_counts(c, &vitrine_corpus::mask::Mask::all(n))
                };
                let (order, more_values) = vitrine_view::filters::panel_values(
                    &c.field.values,
                    &whole,
                    &chosen,
                    &query,
                    PANEL_VALUES,
                );
                for &v in &order {
                    let value = c.field.values[v].clone();
                    let label = doc.create_element("label").unwrap();
                    let cb: web_sys::HtmlInputElement =
                        doc.create_element("input").unwrap().unchecked_into();
                    cb.set_type("checkbox");
                    cb.set_checked(chosen.contains(&value));
                    let _ = cb.set_attribute("data-value", &value);
                    let field = name.clone();
                    listen(&cb, "change", true, move |_e: web_sys::Event| {
                        category_changed(&field, k)
                    });
                    let _ = label.append_child(&cb);
                    let t = doc.create_element("span").unwrap();
                    t.set_text_content(Some(&value));
                    let _ = label.append_child(&t);
                    let num = doc.create_element("span").unwrap();
                    num.set_class_name("n");
                    num.set_text_content(Some(&counts[v].to_string()));
                    let _ = label.append_child(&num);
                    let _ = body.append_child(&label);
                }
                if more_values > 0 || (many && order.len() == chosen.len()) {
                    let more = doc.create_element("p").unwrap();
                    more.set_class_name("more");
                    more.set_text_content(Some(&if more_values > 0 {
                        format!("and {more_values} more: type in the finder above to list them")
                    } else {
                        "no other value contains that".to_string()
                    }));
                    let _ = body.append_child(&more);
                }
            }
            (Column::Number(v), _) => {
                let (lo, hi) = v
                    .iter()
                    .filter(|x| !x.is_nan())
                    .fold((f32::INFINITY, f32::NEG_INFINITY), |(a, b), &x| {
                        (a.min(x), b.max(x))
                    });
                let (min, max, _) = bounds_of(&a.filters, &name);
                range_editor(
                    &doc,
                    &body,
                    k,
                    &format!("{lo}"),
                    &format!("{hi}"),
                    min,
                    max,
                    None,
                );
            }
            (Column::Date { .. }, _) => {
                let span = a.filters.date_span(c, n).unwrap_or((0, 0));
                let (from, to, rule) = bounds_of(&a.filters, &name);
                let (lo, hi) = (span.0.to_string(), span.1.to_string());
                range_editor(&doc, &body, k, &lo, &hi, from, to, Some(rule));
            }
            (Column::Text(_), FieldKind::Link) | (Column::Text(_), _) => continue,
        }
        let det = doc.create_element("details").unwrap();
        det.set_id(&format!("field-{k}"));
        let _ = det.set_attribute("data-field", &name);
        if open.contains(&name) || a.filters.on(&name).is_some() {
            let _ = det.set_attribute("open", "");
        }
        let sum = doc.create_element("summary").unwrap();
        sum.set_text_content(Some(&name));
        let _ = det.append_child(&sum);
        let _ = det.append_child(&body);
        let _ = panel.append_child(&det);
    }
    if a.atlas.tiled.is_some() {
        unfetched_sections(&a, &doc, &panel);
    }
}

/// A tiled atlas: a closed section for each filterable field whose column is not here yet (in
/// catalogue order among the others); opening it fetches the column.
fn unfetched_sections(a: &App, doc: &web_sys::Document, panel: &web_sys::HtmlElement) {
    let m = &a.atlas.manifest;
    for f in &m.fields {
        if !matches!(
            f.kind,
            FieldKind::Category | FieldKind::Number | FieldKind::Date
        ) || a.atlas.has_field(&f.name)
        {
            continue;
        }
        let det = doc.create_element("details").unwrap();
        let _ = det.set_attribute("data-field", &f.name);
        det.set_class_name("unfetched");
        let sum = doc.create_element("summary").unwrap();
        sum.set_text_content(Some(&f.name));
        let _ = det.append_child(&sum);
        let body = doc.create_element("p").unwrap();
        body.set_class_name("more");
        body.set_text_content(Some(&if columns::fetching(&f.name) {
            "Fetching its values…".to_string()
        } else {
            format!(
                "Opening this fetches the {} of {} items.",
                f.name, a.atlas.n
            )
        }));
        let _ = det.append_child(&body);
        let name = f.name.clone();
        let d2 = det.clone();
        listen(&det, "toggle", true, move |_e: web_sys::Event| {
            if d2.has_attribute("open") {
                let name = name.clone();
                let keep = name.clone();
                columns::ensure(vec![name], move || {
                    render_panel();
                    // The section just fetched stays open.
                    if let Ok(Some(d)) = document()
                        .query_selector(&format!("#filter-panel details[data-field=\"{keep}\"]"))
                    {
                        let _ = d.set_attribute("open", "");
                    }
                });
            }
        });
        // Before the first section of a later field.
        let order = |n: &str| m.fields.iter().position(|x| x.name == n);
        let here = order(&f.name);
        let mut next = None;
        if let Ok(list) = panel.query_selector_all("details[data-field]") {
            for j in 0..list.length() {
                let Some(e) = list
                    .item(j)
                    .and_then(|e| e.dyn_into::<web_sys::Element>().ok())
                else {
                    continue;
                };
                if order(&e.get_attribute("data-field").unwrap_or_default()) > here {
                    next = Some(e);
                    break;
                }
            }
        }
        let _ = panel.insert_before(&det, next.as_ref().map(|e| e.as_ref()));
    }
}

/// Brings the open panel up to date after the filters changed: each category value's count and
/// tick in place (the values keep their places, and the page repaints only what changed), each
/// range's inputs unless they are being typed in; the whole panel is made anew only when a chosen
/// value is not listed yet (a link or corpus file chose it).
fn update_panel() {
    let Some(app) = app() else { return };
    let doc = document();
    let typing = doc.active_element();
    let rebuild = {
        let a = app.borrow();
        let n = a.atlas.n;
        let mut rebuild = !a.atlas.catalogue;
        for (k, c) in a.atlas.fields.iter().enumerate() {
            if rebuild {
                break;
            }
            let name = &c.field.name;
            match &c.column {
                Column::Category(_) => {
                    let Some(det) = doc.get_element_by_id(&format!("field-{k}")) else {
                        rebuild = true;
                        break;
                    };
                    let chosen = chosen_values(&a.filters, name);
                    let counts = a.filters.counts(c, n);
                    let mut listed = 0;
                    let Ok(boxes) = det.query_selector_all("label") else {
                        continue;
                    };
                    for j in 0..boxes.length() {
                        let Some(label) = boxes
                            .item(j)
                            .and_then(|l| l.dyn_into::<web_sys::Element>().ok())
                        else {
                            continue;
                        };
                        let cb = label
                            .query_selector("input[type=checkbox]")
                            .ok()
                            .flatten()
                            .and_then(|e| e.dyn_into::<web_sys::HtmlInputElement>().ok());
                        let Some(cb) = cb else { continue };
                        let value = cb.get_attribute("data-value").unwrap_or_default();
                        let on = chosen.contains(&value);
                        listed += on as usize;
                        cb.set_checked(on);
                        let count = c.field.values.iter().position(|v| *v == value);
                        let count = count.and_then(|v| counts.get(v)).copied().unwrap_or(0);
                        if let Some(num) = label.query_selector(".n").ok().flatten() {
                            let text = count.to_string();
                            if num.text_content().as_deref() != Some(text.as_str()) {
                                num.set_text_content(Some(&text));
                            }
                        }
                    }
                    rebuild = listed < chosen.len();
                }
                Column::Number(_) | Column::Date { .. } => {
                    let (from, to, rule) = bounds_of(&a.filters, name);
                    for (id, v) in [("from", from), ("to", to)] {
                        let Some(i) = input(&format!("field-{k}-{id}")) else {
                            continue;
                        };
                        if typing.as_ref() != Some(i.as_ref()) {
                            i.set_value(&v.map_or(String::new(), |v| v.to_string()));
                        }
                    }
                    // As the panel made anew would show it (a number field has no rule menu).
                    if let Some(sel) = doc
                        .get_element_by_id(&format!("field-{k}-rule"))
                        .and_then(|e| e.dyn_into::<web_sys::HtmlSelectElement>().ok())
                    {
                        sel.set_value(rule_value(rule));
                    }
                }
                Column::Text(_) => {}
            }
        }
        rebuild
    };
    if rebuild {
        render_panel();
    }
}

/// The value finder of field `k` now holds `value`: the panel lists what matches, and typing
/// goes on in the finder made anew.
fn finder_changed(k: usize, value: String) {
    VALUE_FIND.with(|q| q.borrow_mut().insert(k, value));
    render_panel();
    if let Some(i) = input(&format!("field-{k}-find")) {
        let _ = i.focus();
        let end = i.value().encode_utf16().count() as u32;
        let _ = i.set_selection_range(end, end);
    }
}

/// From/to inputs (with the data's own span as placeholders), a rule choice for dates, Apply.
#[allow(clippy::too_many_arguments)]
fn range_editor(
    doc: &Document,
    body: &web_sys::Element,
    k: usize,
    lo: &str,
    hi: &str,
    from: Option<f64>,
    to: Option<f64>,
    rule: Option<DateRule>,
) {
    let row = doc.create_element("div").unwrap();
    row.set_class_name("range");
    for (id, place, value) in [("from", lo, from), ("to", hi, to)] {
        let i: web_sys::HtmlInputElement = doc.create_element("input").unwrap().unchecked_into();
        i.set_type("number");
        i.set_id(&format!("field-{k}-{id}"));
        i.set_placeholder(place);
        let _ = i.set_attribute("aria-label", id);
        if let Some(v) = value {
            i.set_value(&v.to_string());
        }
        let _ = row.append_child(&i);
    }
    if let Some(rule) = rule {
        let s: web_sys::HtmlSelectElement = doc.create_element("select").unwrap().unchecked_into();
        s.set_id(&format!("field-{k}-rule"));
        for (v, t) in [("overlap", "overlapping"), ("within", "within")] {
            let o = web_sys::HtmlOptionElement::new_with_text_and_value(t, v).unwrap();
            let _ = s.append_child(&o);
        }
        s.set_value(rule_value(rule));
        let _ = s.set_attribute(
            "title",
            "overlapping: the dating shares a year with the range; within: it lies wholly inside",
        );
        let _ = row.append_child(&s);
    }
    let b = doc.create_element("button").unwrap();
    b.set_text_content(Some("Apply"));
    b.set_id(&format!("field-{k}-apply"));
    listen(&b, "click", true, move |_e: web_sys::MouseEvent| {
        range_applied(k)
    });
    let _ = row.append_child(&b);
    let _ = body.append_child(&row);
}

fn category_changed(field: &str, k: usize) {
    let Some(det) = document().get_element_by_id(&format!("field-{k}")) else {
        return;
    };
    let mut values = Vec::new();
    if let Ok(list) = det.query_selector_all("input[type=checkbox]") {
        for j in 0..list.length() {
            let Some(cb) = list
                .item(j)
                .and_then(|n| n.dyn_into::<web_sys::HtmlInputElement>().ok())
            else {
                continue;
            };
            if cb.checked() {
                values.extend(cb.get_attribute("data-value"));
            }
        }
    }
    set(Filter::Category {
        field: field.to_string(),
        values,
    });
}

fn range_applied(k: usize) {
    let Some(app) = app() else { return };
    let (name, is_date) = {
        let a = app.borrow();
        let Some(c) = a.atlas.fields.get(k) else {
            return;
        };
        (
            c.field.name.clone(),
            matches!(c.column, Column::Date { .. }),
        )
    };
    let read = |id: &str| -> Result<Option<f64>, String> {
        let v = input(&format!("field-{k}-{id}"))
            .map(|i| i.value())
            .unwrap_or_default();
        let v = v.trim();
        if v.is_empty() {
            return Ok(None);
        }
        v.parse::<f64>()
            .map(Some)
            .map_err(|_| format!("{name}: {v:?} is not a number"))
    };
    let (from, to) = match (read("from"), read("to")) {
        (Ok(a), Ok(b)) => (a, b),
        (Err(e), _) | (_, Err(e)) => return select::note(&e),
    };
    if from.is_none() && to.is_none() {
        // Both empty: the field's filter goes.
        let k =
            app.borrow().filters.list().iter().position(|f| {
                !matches!(f, Filter::Text { .. }) && f.fields().contains(&name.as_str())
            });
        if let Some(k) = k {
            remove(k);
        }
        return;
    }
    let f = if is_date {
        let rule = document()
            .get_element_by_id(&format!("field-{k}-rule"))
            .and_then(|e| e.dyn_into::<web_sys::HtmlSelectElement>().ok())
            .map(|s| s.value());
        Filter::Date {
            field: name,
            from: from.map_or(i32::MIN + 1, |v| v.floor() as i32),
            to: to.map_or(i32::MAX, |v| v.floor() as i32),
            rule: if rule.as_deref() == Some("within") {
                DateRule::Within
            } else {
                DateRule::Overlap
            },
        }
    } else {
        Filter::Range {
            field: name,
            min: from,
            max: to,
        }
    };
    set(f);
}

/// Runs the search in the box (after a pause in typing, or at once on Enter).
fn search_now() {
    let q = input("search").map(|i| i.value()).unwrap_or_default();
    set(Filter::Text {
        fields: Vec::new(),
        query: q.trim().to_string(),
    });
}

thread_local! {
    static SEARCH_TIMER: RefCell<Option<i32>> = const { RefCell::new(None) };
}

pub fn install() {
    if let Some(c) = by_id("filters") {
        // The wheel over the filters row scrolls them sideways.
        let c2 = c.clone();
        listen(&c, "wheel", false, move |e: web_sys::WheelEvent| {
            if c2.scroll_width() > c2.client_width() && e.delta_y() != 0.0 {
                c2.set_scroll_left(c2.scroll_left() + e.delta_y() as i32);
                e.prevent_default();
            }
        });
    }
    if let Some(i) = input("search") {
        listen(&i, "input", true, move |_e: web_sys::Event| {
            let w = web_sys::window().unwrap();
            SEARCH_TIMER.with(|t| {
                if let Some(id) = t.borrow_mut().take() {
                    w.clear_timeout_with_handle(id);
                }
                let cb = Closure::once_into_js(search_now);
                let id = w
                    .set_timeout_with_callback_and_timeout_and_arguments_0(
                        cb.unchecked_ref(),
                        SEARCH_DELAY_MS,
                    )
                    .ok();
                *t.borrow_mut() = id;
            });
        });
        listen(&i, "keydown", false, move |e: web_sys::KeyboardEvent| {
            if e.key() == "Enter" {
                SEARCH_TIMER.with(|t| {
                    if let Some(id) = t.borrow_mut().take() {
                        web_sys::window().unwrap().clear_timeout_with_handle(id);
                    }
                });
                search_now();
            } else if e.key() == "Escape" {
                if let Some(i) = input("search") {
                    i.set_value("");
                    let _ = i.blur();
                }
                search_now();
            }
        });
    }
    if let Some(b) = by_id("filter-button") {
        listen(&b, "click", true, move |_e: web_sys::MouseEvent| {
            toggle_panel()
        });
    }
    if let Some(h) = input("hide-filtered") {
        let h2 = h.clone();
        listen(&h, "change", true, move |_e: web_sys::Event| {
            if let Some(app) = app() {
                app.borrow_mut().filters.hide = h2.checked();
            }
            select::refresh();
        });
    }
}

/// Closes the filter panel if it is open.
pub fn close_panel() {
    if by_id("filter-panel").is_some_and(|p| !p.hidden()) {
        toggle_panel();
    }
}

/// Opens or closes the filter panel.
pub fn toggle_panel() {
    let Some(p) = by_id("filter-panel") else {
        return;
    };
    let open = p.hidden();
    p.set_hidden(!open);
    if let Some(b) = by_id("filter-button") {
        let _ = b.set_attribute("aria-expanded", if open { "true" } else { "false" });
    }
    if open {
        render_panel();
    }
}

/// For tests and scripts: sets a filter given as JSON (as a corpus file writes it, e.g.
/// {"kind":"category","field":"technique","values":["etching"]}); returns the count passing.
#[wasm_bindgen]
pub fn set_filter(json: &str) -> Result<usize, JsValue> {
    let f: Filter = serde_json::from_str(json).map_err(|e| JsValue::from_str(&e.to_string()))?;
    set(f);
    Ok(app()
        .and_then(|a| a.borrow().filters.passing().map(|m| m.count()))
        .unwrap_or(0))
}

/// Colours the marks by catalogue field `k` (None: by their pictures), with a legend.
pub fn colour_by(k: Option<usize>) {
    let Some(app) = app() else { return };
    let legend = {
        let mut a = app.borrow_mut();
        if !a.atlas.catalogue {
            return;
        }
        let n = a.atlas.n;
        if a.picture_colours.is_none() {
            a.picture_colours = Some(a.atlas.colours.clone());
        }
        match k.and_then(|k| a.atlas.fields.get(k)) {
            Some(c) => {
                let name = c.field.name.clone();
                let (cols, legend) = vitrine_view::colour::by_field(c, n);
                a.atlas.colours = cols;
                Some((name, legend))
            }
            None => {
                let pictures = a.picture_colours.take().unwrap_or_default();
                a.atlas.colours = pictures;
                None
            }
        }
    };
    set_state(
        "colour",
        legend.as_ref().map_or("pictures", |(n, _)| n.as_str()),
    );
    show_legend(legend);
    select::refresh();
}

/// Colours the marks by `values` (one per item; NaN: none) on the ramp, with a legend named
/// `name`; the colour menu shows `menu` (an option it holds).
pub fn colour_by_values(values: &[f64], name: &str, menu: &str) {
    let Some(app) = app() else { return };
    let legend = {
        let mut a = app.borrow_mut();
        if a.picture_colours.is_none() {
            a.picture_colours = Some(a.atlas.colours.clone());
        }
        let (cols, legend) = vitrine_view::colour::ramped(values, |x| x.is_nan());
        a.atlas.colours = cols;
        legend
    };
    if let Some(sel) = document()
        .get_element_by_id("colour-choice")
        .and_then(|e| e.dyn_into::<web_sys::HtmlSelectElement>().ok())
    {
        sel.set_value(menu);
    }
    set_state("colour", name);
    show_legend(Some((name.to_string(), legend)));
    select::refresh();
}

fn show_legend(legend: Option<(String, vitrine_view::colour::Legend)>) {
    use vitrine_view::colour::{Legend, OTHER};
    let Some(box_) = by_id("legend") else { return };
    box_.set_text_content(None);
    let Some((name, legend)) = legend else {
        box_.set_hidden(true);
        return;
    };
    let doc = document();
    let h = doc.create_element("h3").unwrap();
    h.set_text_content(Some(&name));
    let _ = box_.append_child(&h);
    let hex = |c: [u8; 3]| format!("#{:02x}{:02x}{:02x}", c[0], c[1], c[2]);
    let row = |colour: [u8; 3], text: &str| {
        let r = doc.create_element("div").unwrap();
        r.set_class_name("swatch-row");
        let sw = doc.create_element("span").unwrap();
        sw.set_class_name("swatch");
        if let Some(sw) = sw.dyn_ref::<web_sys::HtmlElement>() {
            let _ = sw.style().set_property("background", &hex(colour));
        }
        let t = doc.create_element("span").unwrap();
        t.set_text_content(Some(text));
        let _ = r.append_child(&sw);
        let _ = r.append_child(&t);
        r
    };
    match legend {
        Legend::Categories(shown, rest) => {
            for (v, c, count) in shown {
                let _ = box_.append_child(&row(c, &format!("{v} ({count})")));
            }
            if rest > 0 {
                let _ = box_.append_child(&row(OTHER, &format!("other values ({rest})")));
            }
        }
        Legend::Ramp { lo, hi, stops } => {
            let bar = doc.create_element("div").unwrap();
            bar.set_class_name("ramp");
            let stops: Vec<String> = stops.iter().map(|&c| hex(c)).collect();
            if let Some(bar) = bar.dyn_ref::<web_sys::HtmlElement>() {
                let gradient = format!("linear-gradient(to right,{})", stops.join(","));
                let _ = bar.style().set_property("background", &gradient);
            }
            let _ = box_.append_child(&bar);
            let ends = doc.create_element("div").unwrap();
            ends.set_class_name("ramp-ends");
            let fmt = |x: f64| {
                if x.fract() == 0.0 || x.abs() >= 100.0 {
                    format!("{}", x.round())
                } else {
                    format!("{x:.1}")
                }
            };
            for x in [lo, hi] {
                let s = doc.create_element("span").unwrap();
                s.set_text_content(Some(&fmt(x)));
                let _ = ends.append_child(&s);
            }
            let _ = box_.append_child(&ends);
        }
    }
    box_.set_hidden(false);
}

/// Fills the Colour menu once the catalogue is there.
pub fn install_colour_menu() {
    let Some(app) = app() else { return };
    let Some(sel) = document()
        .get_element_by_id("colour-choice")
        .and_then(|e| e.dyn_into::<web_sys::HtmlSelectElement>().ok())
    else {
        return;
    };
    let a = app.borrow();
    for (k, c) in a.atlas.fields.iter().enumerate() {
        if matches!(c.column, Column::Text(_)) {
            continue;
        }
        if let Ok(o) =
            web_sys::HtmlOptionElement::new_with_text_and_value(&c.field.name, &k.to_string())
        {
            let _ = sel.append_child(&o);
        }
    }
    drop(a);
    let s2 = sel.clone();
    listen(&sel, "change", true, move |_e: web_sys::Event| {
        if s2.value() == "grow" {
            return crate::grow::colour_map();
        }
        colour_by(s2.value().parse::<usize>().ok());
    });
}

/// For tests and scripts: drops every filter and the selection, so that the corpus is every item.
#[wasm_bindgen]
pub fn clear_corpus() {
    let n = app().map_or(0, |a| a.borrow().filters.list().len());
    for _ in 0..n {
        remove(0);
    }
    select::clear();
}
