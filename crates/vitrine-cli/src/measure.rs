//! `vitrine corpus`'s measuring side: a time profile (CSV and SVG) and the comparison with another
//! corpus (CSV), from the same library code the viewer runs.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use anyhow::{bail, Context, Result};
use vitrine_corpus::coding::{Codebook, Coded};
use vitrine_corpus::columns::{Column, FieldColumn};
use vitrine_corpus::compare::{compare_field, comparison_csv, overlap};
use vitrine_corpus::corpus::CorpusFile;
use vitrine_corpus::profile::{
    groups_of_corpora, groups_of_field, groups_of_variable, periods_in_time_order, profile,
    profile_csv, svg, Bins, Groups,
};
use vitrine_format::{FieldKind, Manifest, TextTable};

use crate::corpus::CorpusArgs;

/// What measuring needs of the corpus already made.
pub struct Made<'a> {
    pub m: &'a Manifest,
    pub ids: &'a TextTable,
    pub cols: &'a [FieldColumn],
    /// The corpus's items, atlas order.
    pub items: &'a [usize],
    pub index: &'a HashMap<&'a str, usize>,
    pub book: &'a Codebook,
    pub coded: &'a Coded<'a>,
}

fn stem(p: &Path) -> String {
    let name = p
        .file_name()
        .map(|s| s.to_string_lossy().to_string())
        .unwrap_or_default();
    let name = name.strip_suffix(".json").unwrap_or(&name);
    let name = name.strip_suffix(".corpus").unwrap_or(name).to_string();
    if name.is_empty() {
        "other".into()
    } else {
        name
    }
}

/// The other corpus of `--compare`: its items here, by the ids it lists.
fn other_corpus(p: &Path, x: &Made, notes: &mut Vec<String>) -> Result<Vec<usize>> {
    let text = std::fs::read_to_string(p).with_context(|| format!("reading {}", p.display()))?;
    let c = CorpusFile::from_json(&text).with_context(|| format!("{}", p.display()))?;
    let mut items = Vec::with_capacity(c.ids.len());
    let mut missing = Vec::new();
    for id in &c.ids {
        match x.index.get(id.as_str()) {
            Some(&i) => items.push(i),
            None => missing.push(id.clone()),
        }
    }
    if !missing.is_empty() {
        notes.push(format!(
            "{}: {} of its items are not in this atlas and are left out of the comparison: {}",
            p.display(),
            missing.len(),
            crate::coding::first_few(&missing)
        ));
    }
    items.sort_unstable();
    items.dedup();
    Ok(items)
}

/// A date field: its name, start years and end years.
type Dates<'a> = (&'a str, &'a [i32], &'a [i32]);

fn date_column<'a>(a: &CorpusArgs, x: &'a Made) -> Result<Option<Dates<'a>>> {
    let dated: Vec<&FieldColumn> = x
        .cols
        .iter()
        .filter(|c| c.field.kind == FieldKind::Date)
        .collect();
    let col = match (&a.date_field, dated.as_slice()) {
        (Some(name), _) => Some(dated.iter().find(|c| &c.field.name == name).with_context(
            || {
                let names: Vec<&str> = dated.iter().map(|c| c.field.name.as_str()).collect();
                format!(
                    "--date-field {name:?}: the catalogue's date fields are {}",
                    if names.is_empty() {
                        "none".to_string()
                    } else {
                        names.join(", ")
                    }
                )
            },
        )?),
        (None, []) => None,
        (None, [one]) => Some(one),
        (None, many) => bail!(
            "the catalogue has several date fields ({}): choose one with --date-field",
            many.iter()
                .map(|c| c.field.name.as_str())
                .collect::<Vec<_>>()
                .join(", ")
        ),
    };
    Ok(col.and_then(|c| match &c.column {
        Column::Date { start, end } => {
            Some((c.field.name.as_str(), start.as_slice(), end.as_slice()))
        }
        _ => None,
    }))
}

/// Writes the profile and comparison files `a` asks for.
pub fn measure(a: &CorpusArgs, x: &Made, notes: &mut Vec<String>) -> Result<Vec<PathBuf>> {
    let mut written = Vec::new();
    let n = x.m.item_count as usize;
    let this_name = a
        .from
        .as_deref()
        .map(stem)
        .unwrap_or_else(|| "corpus".into());
    let other = match &a.compare {
        Some(p) => {
            let items = other_corpus(p, x, notes)?;
            let mut name = stem(p);
            if name == this_name {
                name = format!("{name} (2)");
            }
            Some((name, items))
        }
        None => None,
    };
    if a.comparison.is_some() && other.is_none() {
        bail!("--comparison: give the corpus file to compare with (--compare FILE)");
    }
    // The fields to compare, checked before anything is written.
    let fields: Vec<&FieldColumn> = if a.compare_fields.is_empty() {
        // Fields with several values per record are left out: the test takes each item once.
        let multi: Vec<&str> = x
            .cols
            .iter()
            .filter(|c| c.multi.is_some())
            .map(|c| c.field.name.as_str())
            .collect();
        if other.is_some() && !multi.is_empty() {
            notes.push(format!(
                "the comparison leaves out {} (several values per record; the test takes each item once)",
                multi.join(", ")
            ));
        }
        x.cols
            .iter()
            .filter(|c| c.field.kind == FieldKind::Category && c.multi.is_none())
            .collect()
    } else {
        a.compare_fields
            .iter()
            .map(|f| {
                let c = x
                    .cols
                    .iter()
                    .find(|c| &c.field.name == f)
                    .with_context(|| {
                        format!("--compare-fields: the catalogue has no field {f:?}")
                    })?;
                if c.field.kind != FieldKind::Category {
                    bail!("--compare-fields: {f:?} is not a category field");
                }
                if c.multi.is_some() {
                    bail!("--compare-fields: {f:?} holds several values per record; the test compares fields with one value per record");
                }
                Ok(c)
            })
            .collect::<Result<_>>()?
    };

    if a.profile.is_some() || a.profile_svg.is_some() {
        let dates = date_column(a, x)?;
        let of = a.profile_of.as_deref().unwrap_or("corpus");
        let (kind, name) = match of.split_once(':') {
            Some(("variable", v)) => (Some("variable"), v),
            Some(("field", f)) => (Some("field"), f),
            _ => (None, of),
        };
        let var = x.book.variable(name).filter(|_| kind != Some("field"));
        let field = x
            .cols
            .iter()
            .find(|c| c.field.name == name)
            .filter(|_| kind != Some("variable"));
        let (groups, what): (Groups, String) = match (of, var, field) {
            ("corpus", _, _) if kind.is_none() => {
                let mut names = vec![this_name.clone()];
                let mut corpora = vec![x.items.to_vec()];
                if let Some((on, oi)) = &other {
                    names.push(on.clone());
                    corpora.push(oi.clone());
                }
                (
                    groups_of_corpora(&names, &corpora, n),
                    "Share of the collection's items in the corpus".to_string(),
                )
            }
            (_, Some(_), Some(_)) => bail!(
                "--profile-of {name:?}: both a codebook variable and a catalogue field; write \
                 variable:{name} or field:{name}"
            ),
            (_, Some(v), None) => (
                groups_of_variable(v, x.coded, x.ids, x.items)?
                    .keep_largest(a.top.unwrap_or(12), "(other values)"),
                format!("{name}: share of the coded items"),
            ),
            (_, None, Some(f)) => (
                groups_of_field(f, x.items)?.keep_largest(a.top.unwrap_or(12), "(other values)"),
                format!("{name}: share of the items with a value"),
            ),
            _ => {
                let vars: Vec<&str> = x.book.variables.iter().map(|v| v.name.as_str()).collect();
                let fields: Vec<&str> = x
                    .cols
                    .iter()
                    .filter(|c| c.field.kind == FieldKind::Category)
                    .map(|c| c.field.name.as_str())
                    .collect();
                bail!(
                    "--profile-of {of:?}: give corpus, a codebook variable ({}) or a category field ({})",
                    if vars.is_empty() { "none".into() } else { vars.join(", ") },
                    fields.join(", ")
                )
            }
        };
        let period_field;
        let order;
        let position: Vec<u32>;
        let of_period;
        let bins = match &a.periods {
            Some(pf) => {
                period_field = x
                    .cols
                    .iter()
                    .find(|c| &c.field.name == pf)
                    .with_context(|| {
                        format!("--periods {pf:?}: the catalogue has no such field")
                    })?;
                let Column::Category(codes) = &period_field.column else {
                    bail!("--periods {pf:?}: the periods must be a category field");
                };
                if period_field.multi.is_some() {
                    bail!("--periods {pf:?}: the field holds several values per record; periods need one per record");
                }
                let nv = period_field.field.values.len();
                let raw = move |i: usize| Some(codes[i] as usize).filter(|&c| c < nv);
                let all: Vec<usize> = (0..n).collect();
                order = periods_in_time_order(nv, &raw, &all, dates.map(|d| (d.1, d.2)));
                let mut pos = vec![u32::MAX; nv];
                for (k, &v) in order.iter().enumerate() {
                    pos[v] = k as u32;
                }
                position = pos;
                of_period = move |i: usize| raw(i).map(|c| position[c] as usize);
                Bins::Periods {
                    names: order
                        .iter()
                        .map(|&v| period_field.field.values[v].clone())
                        .collect(),
                    of: &of_period,
                }
            }
            None => {
                if dates.is_none() {
                    bail!(
                        "--profile: the catalogue has no date field; give its periods with --periods FIELD"
                    );
                }
                let range = match &a.years {
                    Some(s) => {
                        let (f, t) = s
                            .split_once("..")
                            .and_then(|(f, t)| {
                                Some((f.trim().parse::<i32>().ok()?, t.trim().parse::<i32>().ok()?))
                            })
                            .with_context(|| format!("--years {s:?}: give FROM..TO in years"))?;
                        Some((f, t))
                    }
                    None => None,
                };
                let width = a.bin.unwrap_or(25);
                Bins::Years { width, range }
            }
        };
        let p = profile(dates.map(|d| (d.1, d.2)), &groups, &bins).map_err(|e| {
            anyhow::anyhow!(
                "--profile: {e}{}",
                dates
                    .map(|d| format!(" (date field {:?})", d.0))
                    .unwrap_or_default()
            )
        })?;
        if !p.empty_bins.is_empty() {
            let labels: Vec<String> = p
                .empty_bins
                .iter()
                .map(|&b| p.bins[b].label.clone())
                .collect();
            notes.push(format!(
                "no item reaches {} of the {} periods ({}); their shares are left empty",
                labels.len(),
                p.bins.len(),
                crate::coding::first_few(&labels)
            ));
        }
        if p.base_outside > 0 {
            notes.push(format!(
                "{} items of the profile's base are in no period (undated, or outside the years) and are left out",
                p.base_outside
            ));
        }
        if let Some(path) = &a.profile {
            std::fs::write(path, profile_csv(&p))
                .with_context(|| format!("writing {}", path.display()))?;
            written.push(path.clone());
        }
        if let Some(path) = &a.profile_svg {
            let per = match (&a.periods, a.bin.unwrap_or(25)) {
                (Some(f), _) => format!("per {f}"),
                (None, w) => format!("per {w} years"),
            };
            let note = format!(
                "{}. {}bands: 95 % Wilson score intervals.",
                x.m.title,
                if a.periods.is_none() {
                    "Each item's weight is spread over its dating range; "
                } else {
                    ""
                }
            );
            std::fs::write(path, svg(&p, &format!("{what}, {per}"), &note))
                .with_context(|| format!("writing {}", path.display()))?;
            written.push(path.clone());
        }
    }

    if let (Some(path), Some((on, oi))) = (&a.comparison, &other) {
        let o = overlap(x.items, oi);
        if o.both > 0 {
            notes.push(format!(
                "the corpora share {} items: the chi-square test takes them as independent samples, which shared items are not",
                o.both
            ));
        }
        let mut out = Vec::new();
        for f in fields {
            let c =
                compare_field(f, x.items, oi).with_context(|| "--compare-fields".to_string())?;
            if let Some(nt) = &c.note {
                notes.push(format!("{}: {nt}", c.field));
            }
            out.push(c);
        }
        std::fs::write(path, comparison_csv((&this_name, on), &o, &out))
            .with_context(|| format!("writing {}", path.display()))?;
        written.push(path.clone());
    }
    Ok(written)
}
