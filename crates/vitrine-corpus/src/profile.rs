//! Time profiles: how the items of each group (the values of a coded variable, of a category
//! field, or a corpus within its collection) are spread over periods, as weighted counts and
//! shares with Wilson score 95 % intervals, the over-representation of each period against the
//! group's overall share, and the span of years that holds the central 80 % of a group's weight.
//!
//! Periods are bins of years (each item's weight spread evenly over its dating range, as the
//! timeline strip spreads it, so that a "1520-1529" print adds a tenth to each of ten years) or
//! the catalogue's own periods (a category field: each item in the period it names).
//!
//! A share is a group's weight in a period over the weight of the **base** in that period: the
//! items that could have been in a group (for a variable, the items coded for it; for a field,
//! those with a value; for a corpus, the whole collection).

use crate::coding::{CodeValue, Coded, Kind, Variable};
use crate::columns::{Column, FieldColumn};
use crate::export::{cell, csv_row, number, CsvStyle};
use crate::stats::{wilson, Z95};
use crate::timeline::Histogram;
use crate::CorpusError;
use vitrine_format::TextTable;

/// The most periods a profile has (a guard against a typing slip such as `--bin 1` over
/// millennia).
pub const MAX_PERIODS: usize = 100_000;

/// The periods of a profile.
pub enum Bins<'a> {
    /// Bins of `width` years: over `range` (from its first year; the last bin ends at or after
    /// its last year), else over the span of the base's dated items, aligned to multiples of
    /// `width`.
    Years {
        width: i32,
        range: Option<(i32, i32)>,
    },
    /// The catalogue's own periods: their names and each item's period (None: none given).
    Periods {
        names: Vec<String>,
        of: &'a dyn Fn(usize) -> Option<usize>,
    },
}

/// The groups to profile: their names, their items (by index; an item may be in several) and the
/// base their shares are taken of (every group's items are base items).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Groups {
    pub names: Vec<String>,
    pub members: Vec<Vec<usize>>,
    pub base: Vec<usize>,
}

impl Groups {
    /// Keeps the `n` groups of most items and joins the rest into one group named `other` (an
    /// item counted once there however many of the rest it is in).
    pub fn keep_largest(mut self, n: usize, other: &str) -> Groups {
        if self.names.len() <= n {
            return self;
        }
        let mut order: Vec<usize> = (0..self.names.len()).collect();
        order.sort_by_key(|&g| (std::cmp::Reverse(self.members[g].len()), g));
        let (keep, rest) = order.split_at(n);
        let mut keep = keep.to_vec();
        keep.sort_unstable();
        let mut joined: Vec<usize> = rest
            .iter()
            .flat_map(|&g| self.members[g].iter().copied())
            .collect();
        joined.sort_unstable();
        joined.dedup();
        let mut names: Vec<String> = keep.iter().map(|&g| self.names[g].clone()).collect();
        let mut members: Vec<Vec<usize>> = keep
            .iter()
            .map(|&g| std::mem::take(&mut self.members[g]))
            .collect();
        names.push(other.to_string());
        members.push(joined);
        Groups {
            names,
            members,
            base: self.base,
        }
    }
}

/// One period of a profile.
#[derive(Debug, Clone, PartialEq)]
pub struct Bin {
    pub label: String,
    /// The years it covers (bins of years).
    pub years: Option<(i32, i32)>,
}

/// One group's profile.
#[derive(Debug, Clone, PartialEq)]
pub struct Row {
    pub name: String,
    /// Weighted count per period.
    pub counts: Vec<f64>,
    /// Items of the group that are in no period (undated, or no period given).
    pub outside: usize,
    /// The years holding the central 80 % of the group's weight (its 10th to 90th percentile
    /// year), None when none of its items is dated.
    pub span80: Option<(i32, i32)>,
}

/// A time profile.
#[derive(Debug, Clone, PartialEq)]
pub struct Profile {
    pub bins: Vec<Bin>,
    /// The base's weighted count per period.
    pub base: Vec<f64>,
    /// Base items in no period.
    pub base_outside: usize,
    pub groups: Vec<Row>,
    /// Periods the base does not reach (their shares are undefined).
    pub empty_bins: Vec<usize>,
}

impl Profile {
    /// Group `g`'s share of period `b`.
    pub fn share(&self, g: usize, b: usize) -> Option<f64> {
        let n = self.base[b];
        (n > 0.0).then(|| self.groups[g].counts[b] / n)
    }

    /// The Wilson score 95 % interval of [`Profile::share`].
    pub fn interval(&self, g: usize, b: usize) -> Option<(f64, f64)> {
        wilson(self.groups[g].counts[b], self.base[b], Z95)
    }

    /// Group `g`'s share over every period.
    pub fn overall(&self, g: usize) -> Option<f64> {
        let n: f64 = self.base.iter().sum();
        (n > 0.0).then(|| self.groups[g].counts.iter().sum::<f64>() / n)
    }

    /// Over-representation of group `g` in period `b`: its share there over its overall share,
    /// with the share's interval divided likewise (the overall share taken as known), as
    /// (ratio, low, high).
    pub fn ratio(&self, g: usize, b: usize) -> Option<(f64, f64, f64)> {
        let all = self.overall(g).filter(|&o| o > 0.0)?;
        let s = self.share(g, b)?;
        let (lo, hi) = self.interval(g, b)?;
        Some((s / all, lo / all, hi / all))
    }
}

/// Per-year weights of `items` over the years `y0..=y1`: each item's weight spread evenly over the
/// years of its dating, the part outside those years left out (a difference array: one step per
/// item whatever its range); and how many items are undated or lie wholly outside.
fn per_year(start: &[i32], end: &[i32], items: &[usize], y0: i32, y1: i32) -> (Vec<f64>, usize) {
    let n = (y1 as i64 - y0 as i64 + 1).max(0) as usize;
    let mut diff = vec![0.0f64; n + 1];
    let mut outside = 0;
    for &i in items {
        let (s, e) = (start[i], end[i]);
        if s == i32::MIN || e < s || e < y0 || s > y1 {
            outside += 1;
            continue;
        }
        let w = 1.0 / (e as i64 - s as i64 + 1) as f64;
        let (a, b) = (s.max(y0), e.min(y1));
        diff[(a - y0) as usize] += w;
        diff[(b - y0) as usize + 1] -= w;
    }
    let mut run = 0.0;
    diff.truncate(n);
    for d in diff.iter_mut() {
        run += *d;
        *d = run;
    }
    (diff, outside)
}

/// The 10th and 90th percentile years of per-year weights from year `y0`.
fn span80(weights: &[f64], y0: i32) -> Option<(i32, i32)> {
    let total: f64 = weights.iter().sum();
    if total <= 0.0 {
        return None;
    }
    let at = |p: f64| {
        let want = p * total * (1.0 - 1e-12);
        let mut cum = 0.0;
        for (k, c) in weights.iter().enumerate() {
            cum += c;
            if cum >= want && *c > 0.0 {
                return y0 + k as i32;
            }
        }
        y0 + weights.len() as i32 - 1
    };
    Some((at(0.1), at(0.9)))
}

/// Per-year weights summed into bins of `width` years from `first` (`nb` bins).
fn into_bins(weights: &[f64], y0: i32, first: i32, width: i32, nb: usize) -> Vec<f64> {
    let mut out = vec![0.0; nb];
    for (k, w) in weights.iter().enumerate() {
        let b = ((y0 as i64 + k as i64 - first as i64) / width as i64) as usize;
        if let Some(o) = out.get_mut(b) {
            *o += w;
        }
    }
    out
}

/// The profile of `groups` over `bins`; `dates` are the start and end years of every item
/// (`i32::MIN` where undated), needed for bins of years and for the central spans.
pub fn profile(
    dates: Option<(&[i32], &[i32])>,
    groups: &Groups,
    bins: &Bins,
) -> Result<Profile, CorpusError> {
    match bins {
        Bins::Years { width, range } => {
            let (start, end) = dates
                .ok_or_else(|| CorpusError::Invalid("periods of years need a date field".into()))?;
            if *width < 1 {
                return Err(CorpusError::Invalid(format!(
                    "a period of {width} years: give a width of at least one year"
                )));
            }
            let dated = |i: &&usize| start[**i] != i32::MIN;
            let mut h = match range {
                Some((a, b)) if a > b => {
                    return Err(CorpusError::Invalid(format!(
                        "the years {a}..{b} run backwards"
                    )))
                }
                Some((a, b)) => {
                    let bins = (*b as i64 - *a as i64) / *width as i64 + 1;
                    if bins > MAX_PERIODS as i64 {
                        return Err(CorpusError::Invalid(format!(
                            "{bins} periods of {width} years: choose wider periods or fewer years"
                        )));
                    }
                    Histogram {
                        from: *a,
                        bin: *width,
                        counts: vec![0.0; bins as usize],
                    }
                }
                None => {
                    let (mut lo, mut hi) = (i32::MAX, i32::MIN);
                    for &i in groups.base.iter().filter(dated) {
                        lo = lo.min(start[i]);
                        hi = hi.max(end[i]);
                    }
                    if lo > hi {
                        return Err(CorpusError::Invalid("none of the items is dated".into()));
                    }
                    Histogram::covering(lo, hi, *width)
                }
            };
            if h.counts.len() > MAX_PERIODS {
                return Err(CorpusError::Invalid(format!(
                    "{} periods of {width} years: choose wider periods or fewer years",
                    h.counts.len()
                )));
            }
            let last = h.years(h.counts.len() - 1).1;
            let first = h.from;
            let nb = h.counts.len();
            // The years the base's datings reach within the periods: every per-year array spans
            // them (at most the ±9,999 years an atlas holds).
            let (mut y0, mut y1) = (i32::MAX, i32::MIN);
            for &i in groups.base.iter().filter(dated) {
                y0 = y0.min(start[i]);
                y1 = y1.max(end[i]);
            }
            let (y0, y1) = (y0.max(first), y1.min(last));
            if y0 > y1 {
                return Err(CorpusError::Invalid(format!(
                    "no dated item falls in the years {first}..{last}"
                )));
            }
            let (base_years, base_outside) = per_year(start, end, &groups.base, y0, y1);
            h.counts = into_bins(&base_years, y0, first, *width, nb);
            if h.total() <= 0.0 {
                return Err(CorpusError::Invalid(format!(
                    "no dated item falls in the years {first}..{last}"
                )));
            }
            let rows = groups
                .names
                .iter()
                .zip(&groups.members)
                .map(|(name, items)| {
                    let (years, outside) = per_year(start, end, items, y0, y1);
                    Row {
                        name: name.clone(),
                        counts: into_bins(&years, y0, first, *width, nb),
                        outside,
                        span80: span80(&years, y0),
                    }
                })
                .collect();
            let bins: Vec<Bin> = (0..h.counts.len())
                .map(|b| {
                    let (a, z) = h.years(b);
                    Bin {
                        label: if a == z {
                            format!("{a}")
                        } else {
                            format!("{a}–{z}")
                        },
                        years: Some((a, z)),
                    }
                })
                .collect();
            Ok(finish(bins, h.counts, base_outside, rows))
        }
        Bins::Periods { names, of } => {
            let count = |items: &[usize]| {
                let mut c = vec![0.0; names.len()];
                let mut outside = 0;
                for &i in items {
                    match of(i) {
                        Some(p) if p < names.len() => c[p] += 1.0,
                        _ => outside += 1,
                    }
                }
                (c, outside)
            };
            let (base, base_outside) = count(&groups.base);
            if base.iter().sum::<f64>() <= 0.0 {
                return Err(CorpusError::Invalid(
                    "none of the items has a period".into(),
                ));
            }
            let rows = groups
                .names
                .iter()
                .zip(&groups.members)
                .map(|(name, items)| {
                    let (counts, outside) = count(items);
                    Row {
                        name: name.clone(),
                        counts,
                        outside,
                        span80: dates.and_then(|(s, e)| {
                            let (mut y0, mut y1) = (i32::MAX, i32::MIN);
                            for &i in items.iter().filter(|&&i| s[i] != i32::MIN) {
                                y0 = y0.min(s[i]);
                                y1 = y1.max(e[i]);
                            }
                            (y0 <= y1).then(|| span80(&per_year(s, e, items, y0, y1).0, y0))?
                        }),
                    }
                })
                .collect();
            let bins = names
                .iter()
                .map(|n| Bin {
                    label: n.clone(),
                    years: None,
                })
                .collect();
            Ok(finish(bins, base, base_outside, rows))
        }
    }
}

fn finish(
    bins: Vec<Bin>,
    mut base: Vec<f64>,
    base_outside: usize,
    mut groups: Vec<Row>,
) -> Profile {
    // The difference arrays sum in another order for a group than for its base: a count may come
    // out a rounding error below zero or above the base's. Such errors are set right (a share
    // stays within 0..=1, as its interval needs); larger gaps are left to show.
    for b in base.iter_mut() {
        if *b < 0.0 && *b > -1e-9 {
            *b = 0.0;
        }
    }
    for g in groups.iter_mut() {
        for (c, &n) in g.counts.iter_mut().zip(&base) {
            let tol = 1e-9 * n.max(1.0);
            if *c < 0.0 && *c > -tol {
                *c = 0.0;
            } else if *c > n && *c - n < tol {
                *c = n;
            }
        }
    }
    let empty_bins = (0..base.len()).filter(|&b| base[b] <= 0.0).collect();
    Profile {
        bins,
        base,
        base_outside,
        groups,
        empty_bins,
    }
}

/// The catalogue's periods in time order: by the mean middle year of their dated items (periods
/// without dated items last, in their own order). Returns the order of the period indices.
pub fn periods_in_time_order(
    count: usize,
    of: &dyn Fn(usize) -> Option<usize>,
    items: &[usize],
    dates: Option<(&[i32], &[i32])>,
) -> Vec<usize> {
    let mut sum = vec![(0.0f64, 0usize); count];
    if let Some((s, e)) = dates {
        for &i in items {
            if let (Some(p), true) = (of(i), s[i] != i32::MIN) {
                if p < count {
                    sum[p].0 += (s[i] as f64 + e[i] as f64) / 2.0;
                    sum[p].1 += 1;
                }
            }
        }
    }
    let mut order: Vec<usize> = (0..count).collect();
    order.sort_by(|&a, &b| {
        let key = |p: usize| {
            (
                sum[p].1 == 0,
                if sum[p].1 > 0 {
                    sum[p].0 / sum[p].1 as f64
                } else {
                    0.0
                },
                p,
            )
        };
        let (ka, kb) = (key(a), key(b));
        ka.0.cmp(&kb.0)
            .then(ka.1.total_cmp(&kb.1))
            .then(ka.2.cmp(&kb.2))
    });
    order
}

/// The groups of a coded variable over `items` (those coded for it are the base): one group per
/// value of a choice variable (an item of several choices in each of its values), yes and no for
/// yes/no. Numbers and notes have no groups to count.
pub fn groups_of_variable(
    var: &Variable,
    coded: &Coded,
    ids: &TextTable,
    items: &[usize],
) -> Result<Groups, CorpusError> {
    let names: Vec<String> = match var.kind {
        Kind::One | Kind::Several => var.values.iter().map(|d| d.value.clone()).collect(),
        Kind::YesNo => vec!["yes".into(), "no".into()],
        Kind::Number | Kind::Note => {
            return Err(CorpusError::Invalid(format!(
                "variable {:?} is a {}: profiles count choice and yes/no variables",
                var.name,
                var.kind.label()
            )))
        }
    };
    let mut g = Groups {
        members: vec![Vec::new(); names.len()],
        names,
        base: Vec::new(),
    };
    for &i in items {
        let Some(v) = coded.outcome(&var.name, ids.get(i)).value().cloned() else {
            continue;
        };
        g.base.push(i);
        match v {
            CodeValue::Text(t) => {
                if let Some(k) = var.value_index(&t) {
                    g.members[k].push(i);
                }
            }
            CodeValue::Several(vs) => {
                for t in vs {
                    if let Some(k) = var.value_index(&t) {
                        g.members[k].push(i);
                    }
                }
            }
            CodeValue::YesNo(b) => g.members[usize::from(!b)].push(i),
            CodeValue::Number(_) => {}
        }
    }
    Ok(g)
}

/// The groups of a category field over `items`: one per value (the items with a value are the
/// base).
pub fn groups_of_field(col: &FieldColumn, items: &[usize]) -> Result<Groups, CorpusError> {
    if !matches!(col.column, Column::Category(_)) {
        return Err(CorpusError::Field {
            field: col.field.name.clone(),
            reason: "profiles count the values of category fields".into(),
        });
    }
    let mut g = Groups {
        names: col.field.values.clone(),
        members: vec![Vec::new(); col.field.values.len()],
        base: Vec::new(),
    };
    // An item of a multi-valued field is in the group of each of its values, and once in the base.
    for &i in items {
        let mut any = false;
        for &c in col.codes_of(i) {
            if let Some(m) = g.members.get_mut(c as usize) {
                m.push(i);
                any = true;
            }
        }
        if any {
            g.base.push(i);
        }
    }
    Ok(g)
}

/// Corpora within their collection of `n` items: each corpus a group, the whole collection the
/// base (so a share is the part of the collection's items of a period that the corpus holds).
pub fn groups_of_corpora(names: &[String], corpora: &[Vec<usize>], n: usize) -> Groups {
    Groups {
        names: names.to_vec(),
        members: corpora.to_vec(),
        base: (0..n).collect(),
    }
}

/// The profile as CSV, one row per group and period: the period (label, first and last year),
/// the group, its weighted count, the base's, the share with its 95 % interval, the ratio to the
/// group's overall share with its interval, and per group its items in no period and the years of
/// its central 80 %.
pub fn profile_csv(p: &Profile) -> String {
    let num = |x: Option<f64>| x.map(number).unwrap_or_default();
    let year = |y: Option<i32>| y.map(|v| v.to_string()).unwrap_or_default();
    let mut out = String::new();
    csv_row(
        &mut out,
        [
            "period",
            "from",
            "to",
            "group",
            "count",
            "base",
            "share",
            "share_low",
            "share_high",
            "ratio",
            "ratio_low",
            "ratio_high",
            "group_outside",
            "central80_from",
            "central80_to",
        ]
        .into_iter(),
    );
    for (g, row) in p.groups.iter().enumerate() {
        for (b, bin) in p.bins.iter().enumerate() {
            let iv = p.interval(g, b);
            let r = p.ratio(g, b);
            let cells = [
                cell(&bin.label, false, CsvStyle::Spreadsheet).into_owned(),
                year(bin.years.map(|y| y.0)),
                year(bin.years.map(|y| y.1)),
                cell(&row.name, false, CsvStyle::Spreadsheet).into_owned(),
                number(row.counts[b]),
                number(p.base[b]),
                num(p.share(g, b)),
                num(iv.map(|v| v.0)),
                num(iv.map(|v| v.1)),
                num(r.map(|v| v.0)),
                num(r.map(|v| v.1)),
                num(r.map(|v| v.2)),
                row.outside.to_string(),
                year(row.span80.map(|s| s.0)),
                year(row.span80.map(|s| s.1)),
            ];
            csv_row(&mut out, cells.iter().map(String::as_str));
        }
    }
    out
}

fn esc(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

fn pct(x: f64) -> String {
    let p = x * 100.0;
    if p != 0.0 && p.abs() < 10.0 {
        format!("{p:.1} %")
    } else {
        format!("{p:.0} %")
    }
}

/// The profile as an SVG chart fit for a publication: the share of each group per period as a
/// line with points, its 95 % interval as a band, a legend with each group's items and central
/// 80 % span, the periods along the bottom, and `title` and `note` in words. Every point carries
/// its figures as a tooltip (`<title>`). Colours: the Okabe-Ito palette, grey for an "other" group.
pub fn svg(p: &Profile, title: &str, note: &str) -> String {
    use std::fmt::Write;
    // Taller when the legend needs it (34 px a group).
    let w = 760.0f64;
    let h = (420.0f64).max(44.0 + 10.0 + p.groups.len() as f64 * 46.0 + 40.0);
    let (left, right, top, bottom) = (58.0, 210.0, 44.0, 74.0);
    let (pw, ph) = (w - left - right, h - top - bottom);
    let nb = p.bins.len().max(1);
    let x = |b: usize| left + pw * (b as f64 + 0.5) / nb as f64;
    let mut ymax: f64 = 0.0;
    for g in 0..p.groups.len() {
        for b in 0..p.bins.len() {
            if let Some((_, hi)) = p.interval(g, b) {
                ymax = ymax.max(hi);
            }
        }
    }
    // A tick step of 1, 2, 2.5 or 5 times a power of ten, four to eight ticks.
    let ymax = if ymax <= 0.0 { 1.0 } else { ymax.min(1.0) };
    let mut step = 10f64.powf((ymax / 5.0).log10().floor());
    for m in [1.0, 2.0, 2.5, 5.0, 10.0] {
        if ymax / (step * m) <= 6.0 {
            step *= m;
            break;
        }
    }
    let top_tick = (ymax / step).ceil() * step;
    let y = |v: f64| top + ph * (1.0 - v / top_tick);
    let mut s = String::new();
    let _ = write!(
        s,
        r##"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}" font-family="Helvetica, Arial, sans-serif" font-size="11" fill="#2b2724">
<rect width="{w}" height="{h}" fill="#ffffff"/>
<text x="{left}" y="22" font-size="14" font-weight="bold">{}</text>
"##,
        esc(title)
    );
    let mut t = 0.0;
    while t <= top_tick + step * 1e-9 {
        let _ = writeln!(
            s,
            r##"<line x1="{left}" x2="{:.1}" y1="{:.1}" y2="{:.1}" stroke="#e4dfd8"/><text x="{:.1}" y="{:.1}" text-anchor="end">{}</text>"##,
            left + pw,
            y(t),
            y(t),
            left - 6.0,
            y(t) + 4.0,
            pct(t)
        );
        t += step;
    }
    let every = nb.div_ceil(12);
    for (b, bin) in p.bins.iter().enumerate() {
        if b % every != 0 {
            continue;
        }
        let _ = writeln!(
            s,
            r##"<text transform="translate({:.1},{:.1}) rotate(-40)" text-anchor="end">{}</text>"##,
            x(b) + 3.0,
            top + ph + 14.0,
            esc(&bin.label)
        );
    }
    let _ = writeln!(
        s,
        r##"<line x1="{left}" x2="{:.1}" y1="{:.1}" y2="{:.1}" stroke="#8a837a"/>"##,
        left + pw,
        top + ph,
        top + ph
    );
    for (g, row) in p.groups.iter().enumerate() {
        let other = g + 1 == p.groups.len() && row.name.starts_with('(');
        let c = if other {
            [0xB4, 0xAE, 0xA4]
        } else {
            vitrine_format::palette::OKABE_ITO[g % vitrine_format::palette::OKABE_ITO.len()]
        };
        // Past the palette's eight colours, the lines are told apart by their dashes too.
        let dash = match g / vitrine_format::palette::OKABE_ITO.len() {
            0 => String::new(),
            1 => r#" stroke-dasharray="6 3""#.to_string(),
            _ => r#" stroke-dasharray="2 3""#.to_string(),
        };
        let colour = format!("#{:02x}{:02x}{:02x}", c[0], c[1], c[2]);
        // Runs of periods with a share: a band and a line each.
        let mut runs: Vec<Vec<usize>> = Vec::new();
        for b in 0..p.bins.len() {
            if p.share(g, b).is_some() && p.interval(g, b).is_some() {
                match runs.last_mut() {
                    Some(r) if *r.last().unwrap() + 1 == b => r.push(b),
                    _ => runs.push(vec![b]),
                }
            }
        }
        for r in &runs {
            let mut band: Vec<String> = r
                .iter()
                .filter_map(|&b| Some(format!("{:.1},{:.1}", x(b), y(p.interval(g, b)?.1))))
                .collect();
            band.extend(
                r.iter()
                    .rev()
                    .filter_map(|&b| Some(format!("{:.1},{:.1}", x(b), y(p.interval(g, b)?.0)))),
            );
            let _ = writeln!(
                s,
                r##"<polygon points="{}" fill="{colour}" fill-opacity="0.16" stroke="none"/>"##,
                band.join(" ")
            );
            let line: Vec<String> = r
                .iter()
                .filter_map(|&b| Some(format!("{:.1},{:.1}", x(b), y(p.share(g, b)?))))
                .collect();
            let _ = writeln!(
                s,
                r##"<polyline points="{}" fill="none" stroke="{colour}" stroke-width="2"{dash}/>"##,
                line.join(" ")
            );
        }
        for b in 0..p.bins.len() {
            let (Some(v), Some((lo, hi))) = (p.share(g, b), p.interval(g, b)) else {
                continue;
            };
            let _ = writeln!(
                s,
                r##"<circle cx="{:.1}" cy="{:.1}" r="3" fill="{colour}"><title>{}, {}: {} ({}–{}), {:.1} of {:.1}</title></circle>"##,
                x(b),
                y(v),
                esc(&row.name),
                esc(&p.bins[b].label),
                pct(v),
                pct(lo),
                pct(hi),
                row.counts[b],
                p.base[b]
            );
        }
        let ly = top + 10.0 + g as f64 * 46.0;
        let lx = left + pw + 18.0;
        let items: f64 = row.counts.iter().sum();
        let span = row
            .span80
            .map(|(a, z)| format!("80 % in {a}–{z}"))
            .unwrap_or_default();
        let _ = writeln!(
            s,
            r##"<line x1="{lx:.1}" x2="{:.1}" y1="{:.1}" y2="{:.1}" stroke="{colour}" stroke-width="3"{dash}/><text x="{:.1}" y="{:.1}">{}</text><text x="{:.1}" y="{:.1}" fill="#6b645c">{:.0} {}</text><text x="{:.1}" y="{:.1}" fill="#6b645c">{}</text>"##,
            lx + 16.0,
            ly - 2.0,
            ly - 2.0,
            lx + 20.0,
            ly + 1.0,
            esc(&row.name),
            lx + 20.0,
            ly + 15.0,
            items,
            if p.bins.iter().any(|b| b.years.is_some()) {
                "dated items"
            } else {
                "items in a period"
            },
            lx + 20.0,
            ly + 28.0,
            span
        );
    }
    let _ = write!(
        s,
        r##"<text x="{left}" y="{:.1}" fill="#6b645c">{}</text>
</svg>
"##,
        h - 10.0,
        esc(note)
    );
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shares_spread_each_items_weight_over_its_years() {
        // Worked example: bins of 10 years from 1500. Items 0-3 are the base; group "a" holds
        // 0 (1503), 1 (1515-1524, half in each of two bins) and 3 (undated).
        let start = [1503, 1515, 1500, i32::MIN];
        let end = [1503, 1524, 1529, i32::MIN];
        let groups = Groups {
            names: vec!["a".into()],
            members: vec![vec![0, 1, 3]],
            base: vec![0, 1, 2, 3],
        };
        let p = profile(
            Some((&start, &end)),
            &groups,
            &Bins::Years {
                width: 10,
                range: None,
            },
        )
        .unwrap();
        assert_eq!(p.bins.len(), 3);
        assert_eq!(p.bins[0].label, "1500–1509");
        let third = 1.0 / 3.0;
        let close = |a: &[f64], b: &[f64]| a.iter().zip(b).all(|(x, y)| (x - y).abs() < 1e-12);
        assert!(
            close(&p.base, &[1.0 + third, 0.5 + third, 0.5 + third]),
            "{:?}",
            p.base
        );
        assert!(close(&p.groups[0].counts, &[1.0, 0.5, 0.5]));
        // The bars sum to the dated items of the base and of the group.
        assert!((p.base.iter().sum::<f64>() - 3.0).abs() < 1e-12);
        assert_eq!((p.base_outside, p.groups[0].outside), (1, 1));
        assert!((p.share(0, 0).unwrap() - 0.75).abs() < 1e-12);
        // Central 80 % of a's weight (1 in 1503, 0.1 in each of 1515-1524, 2 in all): 10 % is
        // reached in 1503, 90 % (1.8) in 1522 (1 + 8 x 0.1).
        assert_eq!(p.groups[0].span80, Some((1503, 1522)));
        // The overall share: 2 of 3 dated base items; the first period's ratio is 0.75 / (2/3).
        let (r, lo, hi) = p.ratio(0, 0).unwrap();
        assert!((r - 1.125).abs() < 1e-12 && lo < r && r < hi);
    }

    #[test]
    fn a_range_leaves_out_what_falls_outside_and_says_when_nothing_falls_inside() {
        let start = [1503, 1515, 1600];
        let end = [1503, 1524, 1600];
        let groups = Groups {
            names: vec!["a".into()],
            members: vec![vec![0, 1, 2]],
            base: vec![0, 1, 2],
        };
        let years = |a, b| Bins::Years {
            width: 10,
            range: Some((a, b)),
        };
        let p = profile(Some((&start, &end)), &groups, &years(1510, 1529)).unwrap();
        assert_eq!(p.bins.len(), 2);
        assert_eq!(p.base, vec![0.5, 0.5]);
        assert_eq!(p.base_outside, 2);
        let p = profile(Some((&start, &end)), &groups, &years(1500, 1559)).unwrap();
        assert_eq!(p.empty_bins, vec![3, 4, 5]);
        assert_eq!(p.share(0, 4), None);
        let e = profile(Some((&start, &end)), &groups, &years(1700, 1799)).unwrap_err();
        assert!(
            e.to_string()
                .contains("no dated item falls in the years 1700..1799"),
            "{e}"
        );
        assert!(profile(Some((&start, &end)), &groups, &years(1800, 1700)).is_err());
        // Far too many periods is refused before anything is allocated for them.
        let e = profile(
            Some((&start, &end)),
            &groups,
            &Bins::Years {
                width: 1,
                range: Some((-2_000_000_000, 2_000_000_000)),
            },
        )
        .unwrap_err();
        assert!(e.to_string().contains("choose wider periods"), "{e}");
    }

    #[test]
    fn the_catalogues_periods_count_each_item_once_and_sort_by_their_dates() {
        let start = [1700, 1500, 1510, i32::MIN];
        let end = [1700, 1500, 1520, i32::MIN];
        let period = [Some(0), Some(1), Some(1), None];
        let of = |i: usize| period[i];
        assert_eq!(
            periods_in_time_order(3, &of, &[0, 1, 2, 3], Some((&start, &end))),
            vec![1, 0, 2]
        );
        let groups = Groups {
            names: vec!["g".into()],
            members: vec![vec![1, 3]],
            base: vec![0, 1, 2, 3],
        };
        let p = profile(
            Some((&start, &end)),
            &groups,
            &Bins::Periods {
                names: vec!["late".into(), "early".into(), "none".into()],
                of: &of,
            },
        )
        .unwrap();
        assert_eq!(p.base, vec![1.0, 2.0, 0.0]);
        assert_eq!(p.groups[0].counts, vec![0.0, 1.0, 0.0]);
        assert_eq!(p.empty_bins, vec![2]);
        assert_eq!(p.groups[0].outside, 1);
    }

    #[test]
    fn the_largest_groups_are_kept_and_the_rest_joined_once() {
        let g = Groups {
            names: vec!["a".into(), "b".into(), "c".into(), "d".into()],
            members: vec![vec![0], vec![1, 2, 3], vec![0, 4], vec![0, 5]],
            base: (0..6).collect(),
        };
        let k = g.keep_largest(2, "(other values)");
        assert_eq!(k.names, vec!["b", "c", "(other values)"]);
        assert_eq!(k.members[2], vec![0, 5]);
    }

    #[test]
    fn the_chart_is_well_formed_and_escapes_names() {
        let start = [1503, 1515, 1500];
        let end = [1503, 1524, 1529];
        let groups = Groups {
            names: vec!["<b>&".into(), "(other values)".into()],
            members: vec![vec![0, 1], vec![2]],
            base: vec![0, 1, 2],
        };
        let p = profile(
            Some((&start, &end)),
            &groups,
            &Bins::Years {
                width: 10,
                range: None,
            },
        )
        .unwrap();
        let s = svg(&p, "Framing \"A\"", "95 % Wilson intervals");
        assert!(s.starts_with("<svg") && s.trim_end().ends_with("</svg>"));
        assert!(s.contains("&lt;b&gt;&amp;") && !s.contains("<b>"));
        assert_eq!(s.matches("<circle").count(), 6);
        assert_eq!(s.matches("<polygon").count(), 2);
        assert!(s.contains("fill=\"#b4aea4\""), "the other group is grey");
    }
}
