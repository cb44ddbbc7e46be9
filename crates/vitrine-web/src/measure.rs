//! The measure panel: a time profile of the corpus (of a coded variable's values, of a category
//! field's values, or of the corpus within the collection) as a chart with its table, the
//! agreement between coders, and the comparison of two kept corpora — each downloadable as the
//! CSV `vitrine corpus` writes from the same corpus file, by the same library code.

use super::coding::{button, el};
use super::*;
use vitrine_corpus::coding::{agreement_table, disagreements, Kind};
use vitrine_corpus::columns::Column;
use vitrine_corpus::compare::{compare_field, comparison_csv, overlap};
use vitrine_corpus::profile::{
    groups_of_corpora, groups_of_field, groups_of_variable, periods_in_time_order, profile,
    profile_csv, svg, Bins, Groups, Profile,
};
use vitrine_format::FieldKind;

/// A corpus kept for comparing: its name and items (atlas order).
struct KeptCorpus {
    name: String,
    items: Vec<usize>,
}

thread_local! {
    static KEPT: RefCell<Vec<KeptCorpus>> = const { RefCell::new(Vec::new()) };
    /// The value of each of the panel's menus (kept while the panel is drawn anew).
    static CHOICES: RefCell<std::collections::HashMap<String, String>> = RefCell::new(Default::default());
    static TAB: RefCell<&'static str> = const { RefCell::new("profile") };
}

fn select_el(id: &str, label: &str, options: &[(String, String)], value: &str) -> web_sys::Element {
    let l = el("label", "", label);
    let s: web_sys::HtmlSelectElement = document()
        .create_element("select")
        .unwrap()
        .dyn_into()
        .unwrap();
    s.set_id(id);
    for (v, t) in options {
        let _ = s.append_child(&web_sys::HtmlOptionElement::new_with_text_and_value(t, v).unwrap());
    }
    s.set_value(value);
    let (s2, key) = (s.clone(), id.to_string());
    listen(&s, "change", true, move |_e: web_sys::Event| {
        CHOICES.with(|c| c.borrow_mut().insert(key.clone(), s2.value()));
        render_soon();
    });
    let _ = l.append_child(&s);
    l
}

fn value_of(id: &str) -> Option<String> {
    CHOICES.with(|c| c.borrow().get(id).cloned())
}

fn render_soon() {
    let cb = Closure::once_into_js(render);
    if let Some(w) = web_sys::window() {
        let _ = w.set_timeout_with_callback_and_timeout_and_arguments_0(cb.unchecked_ref(), 0);
    }
}

fn is_open() -> bool {
    by_id("measure").is_some_and(|m| !m.hidden())
}

/// Opens the panel on a tab.
pub fn open(tab: &'static str) {
    TAB.with(|t| *t.borrow_mut() = tab);
    if let Some(m) = by_id("measure") {
        m.set_hidden(false);
        let _ = m.set_attribute("tabindex", "-1");
    }
    render();
    if let Some(m) = by_id("measure") {
        let _ = m.focus();
    }
}

pub fn close() -> bool {
    if !is_open() {
        return false;
    }
    if let Some(m) = by_id("measure") {
        m.set_hidden(true);
    }
    focus_map();
    true
}

/// The corpus's items (every item when nothing is chosen).
fn corpus_items(a: &App) -> Vec<usize> {
    if a.tray_items.is_empty() {
        (0..a.atlas.n).collect()
    } else {
        a.tray_items.iter().map(|&i| i as usize).collect()
    }
}

/// The date field (the first) as start and end years.
fn dates(a: &App) -> Option<(&[i32], &[i32])> {
    a.atlas.fields.iter().find_map(|f| match &f.column {
        Column::Date { start, end } => Some((start.as_slice(), end.as_slice())),
        _ => None,
    })
}

/// What the profile counts and over which periods, as the controls say; with its title.
fn groups_for(a: &App, of: &str) -> Result<(Groups, String), String> {
    let items = corpus_items(a);
    if of == "corpus" {
        let mut names = vec!["corpus".to_string()];
        let mut corpora = vec![items];
        KEPT.with(|k| {
            for c in k.borrow().iter() {
                names.push(c.name.clone());
                corpora.push(c.items.clone());
            }
        });
        return Ok((
            groups_of_corpora(&names, &corpora, a.atlas.n),
            "Share of the collection's items in the corpus".into(),
        ));
    }
    if let Some(v) = of.strip_prefix("variable:") {
        let var = a
            .coding
            .book
            .variable(v)
            .ok_or_else(|| format!("the codebook has no variable {v:?}"))?;
        let coded = a.coding.coded();
        let g = groups_of_variable(var, &coded, &a.atlas.ids, &items)
            .map_err(|e| e.to_string())?
            .keep_largest(12, "(other values)");
        return Ok((g, format!("{v}: share of the coded items")));
    }
    if let Some(f) = of.strip_prefix("field:") {
        let col = a
            .atlas
            .fields
            .iter()
            .find(|c| c.field.name == f)
            .ok_or_else(|| format!("the catalogue has no field {f:?}"))?;
        let g = groups_of_field(col, &items)
            .map_err(|e| e.to_string())?
            .keep_largest(12, "(other values)");
        return Ok((g, format!("{f}: share of the items with a value")));
    }
    Err("choose what to count".into())
}

/// The profile the controls ask for, its title and the milliseconds it took.
fn compute(a: &App, of: &str, per: &str) -> Result<(Profile, String), String> {
    let (groups, what) = groups_for(a, of)?;
    let d = dates(a);
    let p = if let Some(f) = per.strip_prefix("field:") {
        let col = a
            .atlas
            .fields
            .iter()
            .find(|c| c.field.name == f)
            .ok_or_else(|| format!("the catalogue has no field {f:?}"))?;
        let Column::Category(codes) = &col.column else {
            return Err(format!("{f:?} is not a category field"));
        };
        if col.multi.is_some() {
            return Err(format!(
                "{f:?} holds several values per record; periods need one per record"
            ));
        }
        let nv = col.field.values.len();
        let raw = |i: usize| Some(codes[i] as usize).filter(|&c| c < nv);
        let all: Vec<usize> = (0..a.atlas.n).collect();
        let order = periods_in_time_order(nv, &raw, &all, d);
        let mut pos = vec![0usize; nv];
        for (k, &v) in order.iter().enumerate() {
            pos[v] = k;
        }
        let of_period = |i: usize| raw(i).map(|c| pos[c]);
        let names = order.iter().map(|&v| col.field.values[v].clone()).collect();
        profile(
            d,
            &groups,
            &Bins::Periods {
                names,
                of: &of_period,
            },
        )
        .map_err(|e| e.to_string())?
    } else {
        let width: i32 = per.parse().unwrap_or(25);
        profile(d, &groups, &Bins::Years { width, range: None }).map_err(|e| e.to_string())?
    };
    let per_words = match per.strip_prefix("field:") {
        Some(f) => format!("per {f}"),
        None => format!("per {per} years"),
    };
    Ok((p, format!("{what}, {per_words}")))
}

fn file_stem(a: &App) -> String {
    let t: String = a
        .atlas
        .manifest
        .title
        .chars()
        .map(|c| {
            if c.is_alphanumeric() {
                c.to_ascii_lowercase()
            } else {
                '-'
            }
        })
        .collect();
    let t = t.trim_matches('-').to_string();
    if t.is_empty() {
        "atlas".into()
    } else {
        t
    }
}

/// Draws the panel.
pub fn render() {
    let Some(app) = app() else { return };
    let Some(panel) = by_id("measure") else {
        return;
    };
    panel.set_text_content(None);
    let tab = TAB.with(|t| *t.borrow());
    let head = el("header", "coding-head", "");
    let _ = head.append_child(&el("h2", "", "Measure"));
    let tabs = el("div", "row tabs", "");
    for (id, text) in [
        ("profile", "Time profile"),
        ("agreement", "Agreement"),
        ("compare", "Compare"),
    ] {
        let b = button(text, "", move || open(id));
        let _ = b.set_attribute("aria-pressed", if tab == id { "true" } else { "false" });
        b.set_id(&format!("measure-{id}"));
        let _ = tabs.append_child(&b);
    }
    let _ = head.append_child(&tabs);
    let _ = head.append_child(&button("Close", "Close (Escape)", || {
        close();
    }));
    let _ = panel.append_child(&head);
    let body = el("div", "measure-body", "");
    let _ = panel.append_child(&body);
    match tab {
        "agreement" => render_agreement(&app, &body),
        "compare" => render_compare(&app, &body),
        _ => render_profile(&app, &body),
    }
}

fn render_profile(app: &Rc<RefCell<App>>, body: &web_sys::Element) {
    let a = app.borrow();
    let mut ofs = vec![(
        "corpus".to_string(),
        "the corpus in the collection".to_string(),
    )];
    for v in &a.coding.book.variables {
        if matches!(v.kind, Kind::One | Kind::Several | Kind::YesNo) {
            ofs.push((
                format!("variable:{}", v.name),
                format!("{} (coded)", v.name),
            ));
        }
    }
    let cats: Vec<&str> = a
        .atlas
        .fields
        .iter()
        .filter(|c| c.field.kind == FieldKind::Category)
        .map(|c| c.field.name.as_str())
        .collect();
    for c in &cats {
        ofs.push((format!("field:{c}"), format!("{c} (catalogue)")));
    }
    let mut pers: Vec<(String, String)> = Vec::new();
    if dates(&a).is_some() {
        for w in ["10", "25", "50"] {
            pers.push((w.to_string(), format!("{w} years")));
        }
    }
    // Periods need one value per record.
    let single = |name: &str| {
        a.atlas
            .fields
            .iter()
            .any(|c| c.field.name == name && c.multi.is_none())
    };
    for c in cats.iter().filter(|c| single(c)) {
        pers.push((
            format!("field:{c}"),
            format!("{c} (the catalogue's periods)"),
        ));
    }
    let of = value_of("profile-of").unwrap_or_else(|| "corpus".into());
    let per = value_of("profile-per")
        .unwrap_or_else(|| pers.first().map(|p| p.0.clone()).unwrap_or_default());
    let controls = el("div", "row", "");
    let _ = controls.append_child(&select_el("profile-of", "Of ", &ofs, &of));
    let _ = controls.append_child(&select_el("profile-per", "Periods ", &pers, &per));
    let _ = body.append_child(&controls);
    let t0 = now();
    let result = compute(&a, &of, &per);
    let ms = now() - t0;
    set_state("profileMs", &format!("{ms:.1}"));
    match result {
        Err(e) => {
            let _ = body.append_child(&el("p", "pending", &format!("No profile: {e}.")));
            set_state("profile", "");
        }
        Ok((p, title)) => {
            let note = format!(
                "{}. {}Bands: 95 % Wilson score intervals.",
                a.atlas.manifest.title,
                if p.bins.iter().any(|b| b.years.is_some()) {
                    "Each item's weight is spread over its dating range. "
                } else {
                    ""
                }
            );
            let chart = el("div", "profile-chart", "");
            let picture = svg(&p, &title, &note);
            chart.set_inner_html(&picture);
            let _ = body.append_child(&chart);
            let mut lines = Vec::new();
            if !p.empty_bins.is_empty() {
                lines.push(format!(
                    "No item reaches {} of the {} periods; their shares are left empty.",
                    p.empty_bins.len(),
                    p.bins.len()
                ));
            }
            if p.base_outside > 0 {
                lines.push(format!(
                    "{} items are in no period (undated) and are left out.",
                    p.base_outside
                ));
            }
            for l in lines {
                let _ = body.append_child(&el("p", "how", &l));
            }
            let spans = el("dl", "coding-record", "");
            for g in &p.groups {
                let _ = spans.append_child(&el("dt", "", &g.name));
                let _ = spans.append_child(&el(
                    "dd",
                    "",
                    &g.span80
                        .map(|(x, y)| format!("80 % of its weight in {x}–{y}"))
                        .unwrap_or_else(|| "no dated items".into()),
                ));
            }
            let _ = body.append_child(&spans);
            let csv = profile_csv(&p);
            let stem = file_stem(&a);
            let row = el("div", "row", "");
            let _ = row.append_child(&download(
                "profile-csv",
                "CSV",
                "The profile's table: counts, shares and intervals per period",
                format!("{stem}-profile.csv"),
                csv,
            ));
            let _ = row.append_child(&download(
                "profile-svg",
                "SVG",
                "The chart, for a publication",
                format!("{stem}-profile.svg"),
                picture,
            ));
            let _ = body.append_child(&row);
            set_state("profile", &p.groups.len().to_string());
        }
    }
}

fn fmt(x: Option<f64>) -> String {
    x.map(|v| format!("{v:.3}")).unwrap_or_else(|| "—".into())
}

fn render_agreement(app: &Rc<RefCell<App>>, body: &web_sys::Element) {
    let a = app.borrow();
    let items = corpus_items(&a);
    let ids: Vec<&str> = items.iter().map(|&i| a.atlas.ids.get(i)).collect();
    let coded = a.coding.coded();
    if coded.coders.len() < 2 {
        let _ = body.append_child(&el(
            "p",
            "pending",
            "Agreement needs two coders: add another coder's corpus file (the tray's \"Add a coder's file…\").",
        ));
        set_state("agreement", "");
        return;
    }
    let _ = body.append_child(&el(
        "p",
        "how",
        &format!(
            "Coders: {}. Over the {} items of the corpus.",
            coded.coders.join(", "),
            items.len()
        ),
    ));
    let table = el("table", "agreement", "");
    let head = el("tr", "", "");
    for h in [
        "variable",
        "coders",
        "items",
        "% agreement",
        "Cohen's κ",
        "α nominal",
        "α interval",
    ] {
        let _ = head.append_child(&el("th", "", h));
    }
    let _ = table.append_child(&head);
    let rows = agreement_table(&a.coding.book, &coded, &ids);
    for r in &rows {
        let tr = el("tr", "", "");
        let name = if r.value.is_empty() {
            r.variable.clone()
        } else {
            format!("{}: {}", r.variable, r.value)
        };
        let _ = tr.set_attribute("data-variable", &name);
        for cell in [
            name,
            r.coders.to_string(),
            r.items_compared.to_string(),
            r.percent_agreement
                .map(|v| format!("{:.1}", v * 100.0))
                .unwrap_or_else(|| "—".into()),
            fmt(r.cohen_kappa),
            fmt(r.alpha_nominal),
            fmt(r.alpha_interval),
        ] {
            let _ = tr.append_child(&el("td", "", &cell));
        }
        let _ = table.append_child(&tr);
    }
    let _ = body.append_child(&table);
    let d = disagreements(&a.coding.book, &coded, &ids);
    let settled = d.iter().filter(|x| x.settled.is_some()).count();
    let _ = body.append_child(&el(
        "p",
        "how",
        &format!("{} disagreements, {settled} of them settled.", d.len()),
    ));
    let csv = vitrine_corpus::coding::agreement_csv(&a.coding.book, &coded, &ids);
    let stem = file_stem(&a);
    let row = el("div", "row", "");
    let _ = row.append_child(&download(
        "agreement-csv",
        "CSV",
        "The agreement table",
        format!("{stem}-agreement.csv"),
        csv,
    ));
    if !d.is_empty() {
        let s = button(
            "Settle…",
            "Walk the disagreements one by one and set the value that holds (kept beside the coders' own)",
            || crate::coding::open_walk(true),
        );
        s.set_id("settle-button");
        let _ = row.append_child(&s);
    }
    let _ = body.append_child(&row);
    set_state("agreement", &rows.len().to_string());
}

fn render_compare(app: &Rc<RefCell<App>>, body: &web_sys::Element) {
    let doc = document();
    let keep_row = el("div", "row", "");
    let name: web_sys::HtmlInputElement = doc.create_element("input").unwrap().dyn_into().unwrap();
    name.set_id("keep-name");
    name.set_placeholder("a name for the corpus now");
    let _ = name.set_attribute("aria-label", "a name for the corpus now");
    let n2 = name.clone();
    let keep = button(
        "Keep",
        "Keep the corpus now under this name, to compare it with another",
        move || {
            let Some(app) = self::app() else { return };
            let items = corpus_items(&app.borrow());
            let mut given = n2.value().trim().to_string();
            if given.is_empty() {
                given = format!("corpus {}", KEPT.with(|k| k.borrow().len()) + 1);
            }
            KEPT.with(|k| {
                let mut k = k.borrow_mut();
                k.retain(|c| c.name != given);
                k.push(KeptCorpus { name: given, items });
            });
            render_soon();
        },
    );
    keep.set_id("keep-corpus");
    let _ = keep_row.append_child(&name);
    let _ = keep_row.append_child(&keep);
    let _ = body.append_child(&keep_row);
    let names: Vec<String> = KEPT.with(|k| k.borrow().iter().map(|c| c.name.clone()).collect());
    let mut options = vec![("now".to_string(), "the corpus now".to_string())];
    options.extend(names.iter().map(|n| (format!("kept:{n}"), n.clone())));
    if names.is_empty() {
        let _ = body.append_child(&el(
            "p",
            "pending",
            "Keep a corpus under a name, change the selection or filters, and compare the two here.",
        ));
        set_state("comparison", "");
        return;
    }
    let first = value_of("compare-a").unwrap_or_else(|| format!("kept:{}", names[0]));
    let second = value_of("compare-b").unwrap_or_else(|| "now".into());
    let row = el("div", "row", "");
    let _ = row.append_child(&select_el("compare-a", "Compare ", &options, &first));
    let _ = row.append_child(&select_el("compare-b", " with ", &options, &second));
    let _ = body.append_child(&row);
    let a = app.borrow();
    let pick = |v: &str| -> (String, Vec<usize>) {
        match v.strip_prefix("kept:") {
            Some(n) => KEPT.with(|k| {
                k.borrow()
                    .iter()
                    .find(|c| c.name == n)
                    .map(|c| (c.name.clone(), c.items.clone()))
                    .unwrap_or_default()
            }),
            None => ("now".to_string(), corpus_items(&a)),
        }
    };
    let ((na, ia), (nb, ib)) = (pick(&first), pick(&second));
    let t0 = now();
    let o = overlap(&ia, &ib);
    let fields: Vec<_> = a
        .atlas
        .fields
        .iter()
        .filter(|c| c.field.kind == FieldKind::Category)
        .filter_map(|c| compare_field(c, &ia, &ib).ok())
        .collect();
    let groups = groups_of_corpora(
        &[na.clone(), nb.clone()],
        &[ia.clone(), ib.clone()],
        a.atlas.n,
    );
    let prof = profile(
        dates(&a),
        &groups,
        &Bins::Years {
            width: 25,
            range: None,
        },
    );
    set_state("comparisonMs", &format!("{:.1}", now() - t0));
    let _ = body.append_child(&el(
        "p",
        "how",
        &format!(
            "{na}: {} items; {nb}: {} items; {} in both.{}",
            o.a,
            o.b,
            o.both,
            if o.both > 0 {
                " The test below takes them as independent samples, which shared items are not."
            } else {
                ""
            }
        ),
    ));
    if let Ok(p) = &prof {
        let chart = el("div", "profile-chart", "");
        chart.set_inner_html(&svg(
            p,
            "Share of the collection's items in each corpus, per 25 years",
            &format!(
                "{}. Bands: 95 % Wilson score intervals.",
                a.atlas.manifest.title
            ),
        ));
        let _ = body.append_child(&chart);
    }
    for f in &fields {
        let h = el("h3", "", &f.field);
        let _ = body.append_child(&h);
        let test = match (&f.test, &f.note) {
            (Some(t), note) => format!(
                "χ² = {:.2}, {} degrees of freedom, p {}{}",
                t.statistic,
                t.dof,
                if t.p_value < 0.001 {
                    "< 0.001".to_string()
                } else {
                    format!("= {:.3}", t.p_value)
                },
                note.as_ref().map(|n| format!(" — {n}")).unwrap_or_default()
            ),
            (None, Some(n)) => n.clone(),
            (None, None) => String::new(),
        };
        let _ = body.append_child(&el("p", "how", &test));
        let list = el("ol", "over", "");
        let show = |r: &vitrine_corpus::compare::ValueRow, side: &str| {
            format!(
                "{} — {:.0} % vs {:.0} % ({side})",
                r.value,
                r.share_a * 100.0,
                r.share_b * 100.0
            )
        };
        for r in f.rows.iter().take(3) {
            let _ = list.append_child(&el("li", "", &show(r, &format!("more in {na}"))));
        }
        for r in f
            .rows
            .iter()
            .rev()
            .take(3)
            .filter(|r| r.ratio.is_some_and(|x| x < 1.0))
        {
            let _ = list.append_child(&el("li", "", &show(r, &format!("more in {nb}"))));
        }
        let _ = body.append_child(&list);
    }
    let csv = comparison_csv((&na, &nb), &o, &fields);
    let stem = file_stem(&a);
    let row = el("div", "row", "");
    let _ = row.append_child(&download(
        "comparison-csv",
        "CSV",
        "The comparison table",
        format!("{stem}-comparison.csv"),
        csv,
    ));
    let _ = body.append_child(&row);
    set_state("comparison", &fields.len().to_string());
}

/// A button that downloads `content` as `name` (CSV or SVG, by the name's ending).
fn download(id: &str, text: &str, title: &str, name: String, content: String) -> web_sys::Element {
    let mime = if name.ends_with(".svg") {
        "image/svg+xml"
    } else {
        "text/csv;charset=utf-8"
    };
    let b = button(text, title, move || select::download(&name, mime, &content));
    b.set_id(id);
    b
}

/// The tray's Measure buttons.
pub fn install() {
    for (id, tab) in [
        ("profile-button", "profile"),
        ("agreement-button", "agreement"),
        ("compare-button", "compare"),
    ] {
        if let Some(b) = by_id(id) {
            listen(&b, "click", true, move |_e: web_sys::MouseEvent| open(tab));
        }
    }
}

/// The corpus changed: an open panel shows the new one.
pub fn corpus_changed() {
    if is_open() {
        render_soon();
    }
}

/// For the bench: the time profile of `of` per `per` (as the panel's menus give them) drawn in the
/// panel; the milliseconds from asking to the panel drawn.
#[wasm_bindgen]
pub fn bench_profile(of: &str, per: &str) -> f64 {
    CHOICES.with(|c| {
        let mut c = c.borrow_mut();
        c.insert("profile-of".into(), of.into());
        c.insert("profile-per".into(), per.into());
    });
    let t0 = now();
    open("profile");
    now() - t0
}

/// For the bench: two corpora — the items with `first`, and those with `second`, as values of the
/// category field `field` ("*": every item) — kept and compared in the panel; the milliseconds to
/// the panel drawn.
#[wasm_bindgen]
pub fn bench_compare(field: &str, first: &str, second: &str) -> f64 {
    let Some(app) = app() else { return f64::NAN };
    let (ia, ib) = {
        let a = app.borrow();
        let Some(col) = a.atlas.fields.iter().find(|c| c.field.name == field) else {
            return f64::NAN;
        };
        let Column::Category(codes) = &col.column else {
            return f64::NAN;
        };
        let code = |v: &str| {
            col.field
                .values
                .iter()
                .position(|x| x == v)
                .map(|k| k as u32)
        };
        let pick = |v: &str| -> Vec<usize> {
            if v == "*" {
                return (0..a.atlas.n).collect();
            }
            let c = code(v);
            (0..a.atlas.n).filter(|&i| Some(codes[i]) == c).collect()
        };
        (pick(first), pick(second))
    };
    KEPT.with(|k| {
        let mut k = k.borrow_mut();
        k.retain(|c| c.name != first && c.name != second);
        k.push(KeptCorpus {
            name: first.into(),
            items: ia,
        });
        k.push(KeptCorpus {
            name: second.into(),
            items: ib,
        });
    });
    CHOICES.with(|c| {
        let mut c = c.borrow_mut();
        c.insert("compare-a".into(), format!("kept:{first}"));
        c.insert("compare-b".into(), format!("kept:{second}"));
    });
    let t0 = now();
    open("compare");
    now() - t0
}
