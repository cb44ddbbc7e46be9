//! The timeline strip along the bottom: the date histogram of the whole collection, of what the
//! filters leave and of the corpus, each item's weight spread over its dating range. Brushing it
//! sets the date filter (overlapping years); a click without a drag removes it.

use super::*;
use vitrine_corpus::columns::Column;
use vitrine_corpus::filter::{DateRule, Filter};
use vitrine_corpus::timeline::{bin_years, Histogram};

/// Bars at most, over the strip's width.
const MAX_BINS: usize = 160;

pub struct Strip {
    /// The date field it shows.
    field: usize,
    name: String,
    whole: Histogram,
    /// What the filters leave, for the filters' generation it was made for.
    filtered: Option<(u64, Option<Histogram>)>,
    /// The corpus, for the (selection, filters) generations it was made for.
    corpus: Option<((u64, u64), Option<Histogram>)>,
    /// The brush being dragged: canvas x of its two ends.
    brush: Option<(f64, f64)>,
}

fn canvas() -> Option<HtmlCanvasElement> {
    document()
        .get_element_by_id("timeline")
        .and_then(|e| e.dyn_into().ok())
}

/// Makes the strip for the first date field, once the catalogue is loaded.
pub fn install(a: &mut App) {
    let Some((k, c)) = a
        .viewer
        .atlas
        .fields
        .iter()
        .enumerate()
        .find(|(_, c)| matches!(c.column, Column::Date { .. }))
    else {
        return;
    };
    let Column::Date { start, end } = &c.column else {
        return;
    };
    let mut span: Option<(i32, i32)> = None;
    for i in 0..a.viewer.atlas.n {
        if start[i] != i32::MIN {
            span = Some(span.map_or((start[i], end[i]), |(x, y)| {
                (x.min(start[i]), y.max(end[i]))
            }));
        }
    }
    let Some((lo, hi)) = span else { return };
    let mut whole = Histogram::covering(lo, hi, bin_years(lo, hi, MAX_BINS));
    whole.add(start, end, 0..a.viewer.atlas.n);
    a.timeline = Some(Strip {
        field: k,
        name: c.field.name.clone(),
        whole,
        filtered: None,
        corpus: None,
        brush: None,
    });
    if let Some(f) = by_id("timeline-strip") {
        f.set_hidden(false);
    }
    set_state("timeline", &c.field.name);
    if let Some(cv) = canvas() {
        listen_brush(&cv);
    }
}

/// The years the strip shows.
fn years(s: &Strip) -> i64 {
    s.whole.counts.len() as i64 * s.whole.bin as i64
}

/// The year whose span holds canvas x (`end`: the year just left of x, for a brush's right end).
fn year_at(s: &Strip, w: f64, x: f64, end: bool) -> i32 {
    let t = (x / w).clamp(0.0, 1.0) * years(s) as f64;
    let y = if end {
        t.ceil() as i64 - 1
    } else {
        t.floor() as i64
    };
    (s.whole.from as i64 + y.clamp(0, years(s) - 1)) as i32
}

fn listen_brush(cv: &HtmlCanvasElement) {
    let c = cv.clone();
    let x_of = move |e: &web_sys::PointerEvent| {
        let r = c.get_bounding_client_rect();
        (e.client_x() as f64 - r.left()) * c.width() as f64 / r.width().max(1.0)
    };
    let x1 = x_of.clone();
    let c1 = cv.clone();
    listen(cv, "pointerdown", false, move |e: web_sys::PointerEvent| {
        let _ = c1.set_pointer_capture(e.pointer_id());
        let x = x1(&e);
        if let Some(app) = app() {
            if let Some(s) = app.borrow_mut().timeline.as_mut() {
                s.brush = Some((x, x));
            }
        }
        draw();
    });
    let x2 = x_of.clone();
    listen(cv, "pointermove", false, move |e: web_sys::PointerEvent| {
        let x = x2(&e);
        let moved = app().is_some_and(|app| {
            let mut a = app.borrow_mut();
            match a.timeline.as_mut().and_then(|s| s.brush.as_mut()) {
                Some(b) => {
                    b.1 = x;
                    true
                }
                None => false,
            }
        });
        if moved {
            draw();
        }
    });
    let c3 = cv.clone();
    listen(cv, "pointerup", false, move |e: web_sys::PointerEvent| {
        let x = x_of(&e);
        let Some(app) = app() else { return };
        let (filter, name) = {
            let mut a = app.borrow_mut();
            let Some(s) = a.timeline.as_mut() else { return };
            let Some((x0, _)) = s.brush.take() else {
                return;
            };
            let w = c3.width() as f64;
            let name = s.name.clone();
            if (x - x0).abs() < 3.0 {
                (None, name)
            } else {
                let a0 = year_at(s, w, x0.min(x), false);
                let a1 = year_at(s, w, x0.max(x), true).max(a0);
                (
                    Some(Filter::Date {
                        field: name.clone(),
                        from: a0,
                        to: a1,
                        rule: DateRule::Overlap,
                    }),
                    name,
                )
            }
        };
        match filter {
            Some(f) => filters::set(f),
            None => {
                let k = app
                    .borrow()
                    .filters
                    .list()
                    .iter()
                    .position(|f| matches!(f, Filter::Date { field, .. } if *field == name));
                match k {
                    Some(k) => filters::remove(k),
                    None => draw(),
                }
            }
        }
    });
}

/// Brings the filtered and corpus histograms up to date, each only when what it counts changed
/// (a lasso leaves the filtered one as it was).
fn update_histograms(a: &mut App) {
    let (fg, sg) = (a.filters.generation, a.selection.generation);
    let App {
        timeline, viewer, ..
    } = a;
    let Viewer {
        atlas,
        filters,
        selection,
        ..
    } = viewer;
    let Some(s) = timeline.as_mut() else { return };
    let Column::Date { start, end } = &atlas.fields[s.field].column else {
        return;
    };
    let empty = || Histogram {
        counts: vec![0.0; s.whole.counts.len()],
        ..s.whole.clone()
    };
    let pass = filters.passing();
    if s.filtered.as_ref().map(|(g, _)| *g) != Some(fg) {
        let hist = pass.map(|p| {
            let mut hist = empty();
            hist.add(start, end, p.items());
            hist
        });
        s.filtered = Some((fg, hist));
    }
    if s.corpus.as_ref().map(|(g, _)| *g) != Some((sg, fg)) {
        let hist = selection.mask().map(|m| {
            let mut hist = empty();
            match pass {
                Some(p) => {
                    let mut c = m.clone();
                    c.and(p);
                    hist.add(start, end, c.items());
                }
                None => hist.add(start, end, m.items()),
            }
            hist
        });
        s.corpus = Some(((sg, fg), hist));
    }
}

/// The colours of the page's theme (CSS custom properties on the body, see style.css): each
/// asked for by name, with a fallback.
fn theme_colours() -> impl Fn(&str, &str) -> String {
    let style = document()
        .body()
        .and_then(|b| web_sys::window()?.get_computed_style(&b).ok().flatten());
    move |name, fallback| {
        style
            .as_ref()
            .and_then(|st| st.get_property_value(name).ok())
            .map(|v| v.trim().to_string())
            .filter(|v| !v.is_empty())
            .unwrap_or_else(|| fallback.to_string())
    }
}

/// Draws the strip: whole collection, filtered, corpus; the brush; year ticks — in the colours of
/// the theme shown.
pub fn draw() {
    let Some(app) = app() else { return };
    let Some(cv) = canvas() else { return };
    update_histograms(&mut app.borrow_mut());
    let a = app.borrow();
    let Some(s) = a.timeline.as_ref() else { return };
    let ratio = web_sys::window()
        .map_or(1.0, |w| w.device_pixel_ratio())
        .max(1.0);
    let (cw, ch) = (
        (cv.client_width() as f64 * ratio).round().max(1.0) as u32,
        (cv.client_height() as f64 * ratio).round().max(1.0) as u32,
    );
    if cv.width() != cw || cv.height() != ch {
        cv.set_width(cw);
        cv.set_height(ch);
    }
    let Some(ctx) = cv
        .get_context("2d")
        .ok()
        .flatten()
        .and_then(|c| c.dyn_into::<web_sys::CanvasRenderingContext2d>().ok())
    else {
        return;
    };
    let (w, h) = (cw as f64, ch as f64);
    ctx.clear_rect(0.0, 0.0, w, h);
    let filtered = s.filtered.as_ref().and_then(|(_, h)| h.as_ref());
    let corpus = s.corpus.as_ref().and_then(|(_, h)| h.as_ref());
    let axis = 14.0 * ratio;
    let top = 4.0 * ratio;
    let max = s.whole.counts.iter().cloned().fold(0.0, f64::max).max(1e-9);
    let bw = w / s.whole.counts.len() as f64;
    let bars = |hist: &Histogram, colour: &str| {
        ctx.set_fill_style_str(colour);
        for (b, &v) in hist.counts.iter().enumerate() {
            if v > 0.0 {
                let bh = ((h - axis - top) * v / max).max(1.0);
                ctx.fill_rect(b as f64 * bw, h - axis - bh, (bw - ratio).max(1.0), bh);
            }
        }
    };
    let theme_colour = theme_colours();
    let accent = theme_colour("--accent", "#116466");
    bars(&s.whole, &theme_colour("--strip-whole", "#d9d0bf"));
    if let Some(f) = filtered {
        bars(f, &theme_colour("--strip-filtered", "#8c8577"));
    }
    if let Some(c) = corpus {
        bars(c, &accent);
    }
    // Year ticks: about one per 90 CSS pixels, on round years.
    ctx.set_fill_style_str(&theme_colour("--ink-soft", "#5f5a55"));
    ctx.set_font(&format!("{}px sans-serif", (11.0 * ratio).round()));
    let years = years(s);
    let wide = ((w / ratio) / 90.0).max(2.0) as usize;
    let step = bin_years(0, years.min(i32::MAX as i64) as i32, wide).max(1) as i64;
    let origin = s.whole.from as i64;
    let mut y = (origin + step - 1).div_euclid(step) * step;
    while y <= origin + years {
        let x = (y - origin) as f64 / years as f64 * w;
        ctx.fill_rect(x, h - axis, ratio, 3.0 * ratio);
        let _ = ctx.fill_text(&y.to_string(), x + 2.0 * ratio, h - 2.0 * ratio);
        y += step;
    }
    // The brush, or the date filter's range.
    let range = s
        .brush
        .map(|(x0, x1)| (x0.min(x1), x0.max(x1)))
        .or_else(|| {
            a.filters.list().iter().find_map(|f| match f {
                Filter::Date {
                    field, from, to, ..
                } if *field == s.name => {
                    let x = |yr: i64| ((yr - origin) as f64 / years as f64 * w).clamp(0.0, w);
                    Some((x(*from as i64), x(*to as i64 + 1)))
                }
                _ => None,
            })
        });
    if let Some((x0, x1)) = range {
        ctx.set_fill_style_str(&theme_colour("--strip-brush", "rgba(17, 100, 102, 0.12)"));
        ctx.fill_rect(x0, 0.0, (x1 - x0).max(1.0), h - axis);
        ctx.set_fill_style_str(&accent);
        ctx.fill_rect(x0, 0.0, ratio, h - axis);
        ctx.fill_rect(x1 - ratio, 0.0, ratio, h - axis);
    }
    set_state("timelineTotal", &format!("{:.3}", s.whole.total()));
}
