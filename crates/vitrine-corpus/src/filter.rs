//! Catalogue filters (the filters row of the viewer): category values, number ranges, date ranges and text
//! search. Filters combine with AND; the values of one category filter combine with OR.

use serde::{Deserialize, Serialize};
use unicode_normalization::char::is_combining_mark;
use unicode_normalization::UnicodeNormalization;

use vitrine_format::FieldKind;

use crate::columns::{Column, FieldColumn};
use crate::mask::Mask;
use crate::CorpusError;

/// A misspelt key ("rulee", "vaules") is refused rather than ignored: a filter read without it
/// would give another corpus than the one written.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum Filter {
    /// Items whose value is one of `values` (as the catalogue writes them).
    Category { field: String, values: Vec<String> },
    /// Items with `min <= value <= max` (a missing bound is open); empty values never match.
    Range {
        field: String,
        #[serde(default)]
        min: Option<f64>,
        #[serde(default)]
        max: Option<f64>,
    },
    /// Items dated in the years `from..=to`: by `rule`, their range overlaps it or lies within it.
    /// A "c. 1540" is its parsed range (see the atlas format); undated items never match.
    Date {
        field: String,
        from: i32,
        to: i32,
        rule: DateRule,
    },
    /// Items where every word of `query` occurs in one of `fields` (when empty: every text and
    /// category field), ignoring case and accents.
    Text {
        #[serde(default)]
        fields: Vec<String>,
        query: String,
    },
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum DateRule {
    /// The item's range and the filter's share at least one year.
    Overlap,
    /// The item's whole range lies inside the filter's.
    Within,
}

/// Text as compared by search: decomposed, accents dropped, lower case ("Śląsk" → "slask").
pub fn fold(s: &str) -> String {
    if s.is_ascii() {
        return s.to_ascii_lowercase();
    }
    s.nfd()
        .filter(|c| !is_combining_mark(*c))
        .flat_map(char::to_lowercase)
        .collect()
}

fn field<'a>(cols: &'a [FieldColumn], name: &str) -> Result<&'a FieldColumn, CorpusError> {
    cols.iter().find(|c| c.field.name == name).ok_or_else(|| {
        let names: Vec<&str> = cols.iter().map(|c| c.field.name.as_str()).collect();
        CorpusError::Field {
            field: name.into(),
            reason: format!("no such field; the catalogue has {}", names.join(", ")),
        }
    })
}

impl Filter {
    /// The field names this filter reads.
    pub fn fields(&self) -> Vec<&str> {
        match self {
            Filter::Category { field, .. }
            | Filter::Range { field, .. }
            | Filter::Date { field, .. } => vec![field.as_str()],
            Filter::Text { fields, .. } => fields.iter().map(|f| f.as_str()).collect(),
        }
    }

    /// The filter in a few words, as the filters row shows it and corpus descriptions write it:
    /// "technique: etching, woodcut", "dating: 1500–1560 (overlapping)", "“ash tree”".
    pub fn label(&self) -> String {
        match self {
            Filter::Category { field, values } => format!("{field}: {}", values.join(", ")),
            Filter::Range { field, min, max } => {
                let b = |v: &Option<f64>| v.map(|x| x.to_string()).unwrap_or_else(|| "…".into());
                format!("{field}: {}–{}", b(min), b(max))
            }
            Filter::Date {
                field,
                from,
                to,
                rule,
            } => format!(
                "{field}: {from}–{to} ({})",
                match rule {
                    DateRule::Overlap => "overlapping",
                    DateRule::Within => "within",
                }
            ),
            Filter::Text { fields, query } if fields.is_empty() => format!("“{query}”"),
            Filter::Text { fields, query } => format!("“{query}” in {}", fields.join(", ")),
        }
    }

    /// The items that pass, of `n`.
    pub fn mask(&self, cols: &[FieldColumn], n: usize) -> Result<Mask, CorpusError> {
        match self {
            Filter::Category {
                field: name,
                values,
            } => {
                let f = field(cols, name)?;
                let Column::Category(codes) = &f.column else {
                    return Err(CorpusError::Field {
                        field: name.clone(),
                        reason: "is not a category field".into(),
                    });
                };
                let vocab = &f.field.values;
                let mut wanted = vec![false; vocab.len()];
                for v in values {
                    let code = vocab.iter().position(|x| x == v).ok_or_else(|| {
                        let some: Vec<&str> = vocab.iter().take(12).map(|s| s.as_str()).collect();
                        let several = match &f.field.multi_separator {
                            Some(sep) if f.multi.is_some() => format!(
                                "; it holds several values per record, separated by {sep:?}: choose one of them, or build with --single-valued {name:?} to take each record's values as one"
                            ),
                            _ => String::new(),
                        };
                        CorpusError::Field {
                            field: name.clone(),
                            reason: format!(
                                "has no value {v:?} (values include {}{}){several}",
                                some.join(", "),
                                if vocab.len() > 12 { ", …" } else { "" }
                            ),
                        }
                    })?;
                    wanted[code] = true;
                }
                if f.multi.is_some() {
                    // Several values per record: any one of them chosen lets the record pass.
                    return Ok(Mask::from_fn(n, |i| {
                        f.codes_of(i).iter().any(|&c| wanted[c as usize])
                    }));
                }
                Ok(Mask::from_fn(n, |i| {
                    wanted.get(codes[i] as usize).copied().unwrap_or(false)
                }))
            }
            Filter::Range {
                field: name,
                min,
                max,
            } => {
                let f = field(cols, name)?;
                let Column::Number(v) = &f.column else {
                    return Err(CorpusError::Field {
                        field: name.clone(),
                        reason: "is not a number field".into(),
                    });
                };
                if min.is_some_and(|v| !v.is_finite()) || max.is_some_and(|v| !v.is_finite()) {
                    return Err(CorpusError::Field {
                        field: name.clone(),
                        reason: "a range's bounds must be finite numbers".into(),
                    });
                }
                if let (Some(a), Some(b)) = (min, max) {
                    if a > b {
                        return Err(CorpusError::Field {
                            field: name.clone(),
                            reason: format!("the range {a}..{b} ends before it starts"),
                        });
                    }
                }
                let (lo, hi) = (
                    min.unwrap_or(f64::NEG_INFINITY),
                    max.unwrap_or(f64::INFINITY),
                );
                Ok(Mask::from_fn(n, |i| {
                    let x = v[i] as f64;
                    !x.is_nan() && x >= lo && x <= hi
                }))
            }
            Filter::Date {
                field: name,
                from,
                to,
                rule,
            } => {
                let f = field(cols, name)?;
                let Column::Date { start, end } = &f.column else {
                    return Err(CorpusError::Field {
                        field: name.clone(),
                        reason: "is not a date field".into(),
                    });
                };
                if from > to {
                    return Err(CorpusError::Field {
                        field: name.clone(),
                        reason: format!("the date range {from}..{to} ends before it starts"),
                    });
                }
                Ok(Mask::from_fn(n, |i| {
                    let (s, e) = (start[i], end[i]);
                    s != i32::MIN
                        && match rule {
                            DateRule::Overlap => s <= *to && e >= *from,
                            DateRule::Within => s >= *from && e <= *to,
                        }
                }))
            }
            Filter::Text { fields, query } => {
                let words: Vec<String> = query.split_whitespace().map(fold).collect();
                let chosen: Vec<&FieldColumn> = if fields.is_empty() {
                    cols.iter()
                        .filter(|c| matches!(c.field.kind, FieldKind::Text | FieldKind::Category))
                        .collect()
                } else {
                    fields
                        .iter()
                        .map(|name| field(cols, name))
                        .collect::<Result<_, _>>()?
                };
                if words.is_empty() {
                    return Ok(Mask::all(n));
                }
                // Per word, the items that hold it somewhere; the words then combine with AND.
                let mut all = Mask::all(n);
                let folded: Vec<Folded> = chosen.iter().map(|c| Folded::new(c, n)).collect();
                for w in &words {
                    let mut any = Mask::none(n);
                    for f in &folded {
                        any.or(&f.holding(w, n));
                    }
                    all.and(&any);
                }
                Ok(all)
            }
        }
    }
}

/// A field's values folded for search: category fields per value (few), others per item (kept
/// in the column once made).
enum Folded<'a> {
    Values(&'a [u32], Vec<String>),
    Items(&'a crate::columns::FoldedText),
}

impl<'a> Folded<'a> {
    fn new(c: &'a FieldColumn, n: usize) -> Folded<'a> {
        match &c.column {
            Column::Category(codes) if c.written.is_none() => {
                Folded::Values(codes, c.field.values.iter().map(|v| fold(v)).collect())
            }
            _ => {
                Folded::Items(c.folded.get_or_init(|| {
                    crate::columns::FoldedText::new((0..n).map(|i| fold(&c.text(i))))
                }))
            }
        }
    }

    fn holding(&self, word: &str, n: usize) -> Mask {
        match self {
            Folded::Values(codes, values) => {
                let hit: Vec<bool> = values.iter().map(|v| v.contains(word)).collect();
                Mask::from_fn(n, |i| hit.get(codes[i] as usize).copied().unwrap_or(false))
            }
            Folded::Items(texts) => Mask::from_fn(n, |i| texts.get(i).contains(word)),
        }
    }
}

/// The filters applied: each one's items, and the items that pass them all.
pub struct Applied {
    pub each: Vec<Mask>,
    pub all: Mask,
}

pub fn apply(filters: &[Filter], cols: &[FieldColumn], n: usize) -> Result<Applied, CorpusError> {
    apply_reusing(filters, cols, n, None)
}

/// [`apply`], taking the items of a filter unchanged since `before` (the filters applied last
/// time) from there: changing one filter recomputes that filter alone.
pub fn apply_reusing(
    filters: &[Filter],
    cols: &[FieldColumn],
    n: usize,
    before: Option<(&[Filter], &Applied)>,
) -> Result<Applied, CorpusError> {
    let each: Vec<Mask> = filters
        .iter()
        .map(|f| {
            let kept = before.and_then(|(list, applied)| {
                let k = list.iter().position(|g| g == f)?;
                applied.each.get(k).filter(|m| m.len() == n).cloned()
            });
            match kept {
                Some(m) => Ok(m),
                None => f.mask(cols, n),
            }
        })
        .collect::<Result<_, _>>()?;
    let mut all = Mask::all(n);
    for m in &each {
        all.and(m);
    }
    Ok(Applied { each, all })
}

impl Applied {
    /// The items that pass every filter but those on field `name` (what the counts beside that
    /// field's values are taken over: cross-filtering).
    pub fn all_but(&self, filters: &[Filter], name: &str) -> Mask {
        let mut m = Mask::all(self.all.len());
        for (f, mask) in filters.iter().zip(&self.each) {
            if !f.fields().contains(&name) {
                m.and(mask);
            }
        }
        m
    }
}

/// Items per value of a category field among `under` (in the field's value order); an item of a
/// multi-valued field counts once for each of its values.
pub fn category_counts(c: &FieldColumn, under: &Mask) -> Vec<u64> {
    if !matches!(c.column, Column::Category(_)) {
        return Vec::new();
    }
    let mut counts = vec![0u64; c.field.values.len()];
    for i in under.items() {
        for &code in c.codes_of(i) {
            if let Some(k) = counts.get_mut(code as usize) {
                *k += 1;
            }
        }
    }
    counts
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn search_ignores_case_and_accents() {
        assert_eq!(fold("Śląsk Ångström École"), "slask angstrom ecole");
        assert_eq!(fold("ETCHING"), "etching");
        assert!(fold("Mühlental").contains(&fold("MUHL")));
    }
}
