//! The active catalogue filters (shown as the filters row) as the viewer holds them: one filter per field
//! (or per search), their combined items, and the counts shown beside each category value, taken
//! under every other filter (cross-filtering). Plain Rust, no DOM.

use vitrine_corpus::columns::{Column, FieldColumn};
use vitrine_corpus::filter::{apply_reusing, category_counts, Applied, Filter};
use vitrine_corpus::mask::Mask;
use vitrine_corpus::CorpusError;

#[derive(Default)]
pub struct Filters {
    list: Vec<Filter>,
    applied: Option<Applied>,
    /// Items the filters leave out are hidden (true) or dimmed (false).
    pub hide: bool,
    /// Changes whenever the passing items may have changed.
    pub generation: u64,
}

/// The key a filter is replaced by: its field (a search is its own key).
fn key(f: &Filter) -> String {
    match f {
        Filter::Text { .. } => "\u{0}search".into(),
        other => other
            .fields()
            .first()
            .map(|s| s.to_string())
            .unwrap_or_default(),
    }
}

impl Filters {
    pub fn list(&self) -> &[Filter] {
        &self.list
    }

    /// The items every filter passes, or None when no filter is active.
    pub fn passing(&self) -> Option<&Mask> {
        self.applied
            .as_ref()
            .filter(|_| !self.list.is_empty())
            .map(|a| &a.all)
    }

    /// Sets the filter for its field (or the search), replacing the one there; an empty category
    /// list or an empty search removes it.
    pub fn set(&mut self, f: Filter, cols: &[FieldColumn], n: usize) -> Result<(), CorpusError> {
        let k = key(&f);
        let empty = match &f {
            Filter::Category { values, .. } => values.is_empty(),
            Filter::Text { query, .. } => query.trim().is_empty(),
            _ => false,
        };
        let mut list: Vec<Filter> = self.list.iter().filter(|g| key(g) != k).cloned().collect();
        if !empty {
            // Kept in the order first set, so that the filters row does not jump about.
            match self.list.iter().position(|g| key(g) == k) {
                Some(at) => list.insert(at.min(list.len()), f),
                None => list.push(f),
            }
        }
        self.replace(list, cols, n)
    }

    /// Removes filter `k` (the × of its item in the filters row).
    pub fn remove(&mut self, k: usize, cols: &[FieldColumn], n: usize) -> Result<(), CorpusError> {
        let mut list = self.list.clone();
        if k < list.len() {
            list.remove(k);
        }
        self.replace(list, cols, n)
    }

    /// Puts in a whole list (from a corpus file or a shared link); nothing changes if one fails.
    pub fn replace(
        &mut self,
        list: Vec<Filter>,
        cols: &[FieldColumn],
        n: usize,
    ) -> Result<(), CorpusError> {
        let before = self.applied.as_ref().map(|a| (self.list.as_slice(), a));
        let applied = apply_reusing(&list, cols, n, before)?;
        self.list = list;
        self.applied = Some(applied);
        self.generation += 1;
        Ok(())
    }

    /// The filter on field `name`, if any.
    pub fn on(&self, name: &str) -> Option<&Filter> {
        self.list
            .iter()
            .find(|f| !matches!(f, Filter::Text { .. }) && f.fields().contains(&name))
    }

    /// Items per value of category field `c` under every filter but its own.
    pub fn counts(&self, c: &FieldColumn, n: usize) -> Vec<u64> {
        let under = match &self.applied {
            Some(a) => a.all_but(&self.list, &c.field.name),
            None => Mask::all(n),
        };
        category_counts(c, &under)
    }

    /// The years the items passing every filter but those on `field` span (for a date editor).
    pub fn date_span(&self, c: &FieldColumn, n: usize) -> Option<(i32, i32)> {
        let Column::Date { start, end } = &c.column else {
            return None;
        };
        let under = match &self.applied {
            Some(a) => a.all_but(&self.list, &c.field.name),
            None => Mask::all(n),
        };
        let mut span: Option<(i32, i32)> = None;
        for i in under.items() {
            if start[i] != i32::MIN {
                span = Some(match span {
                    None => (start[i], end[i]),
                    Some((a, b)) => (a.min(start[i]), b.max(end[i])),
                });
            }
        }
        span
    }
}

/// Which values of a category field the filter panel lists, as indices into `values`: the chosen
/// ones always (a box not shown could not keep its tick), then those whose folded text contains
/// the folded `query` (every value for an empty one), largest count first, up to `limit` in all;
/// and how many more match.
pub fn panel_values(
    values: &[String],
    counts: &[u64],
    chosen: &[String],
    query: &str,
    limit: usize,
) -> (Vec<usize>, usize) {
    let q = vitrine_corpus::filter::fold(query.trim());
    let mut order: Vec<usize> = (0..values.len()).collect();
    order.sort_by_key(|&v| std::cmp::Reverse(counts.get(v).copied().unwrap_or(0)));
    let (mut shown, rest): (Vec<usize>, Vec<usize>) = order
        .into_iter()
        .partition(|&v| chosen.contains(&values[v]));
    let matching: Vec<usize> = rest
        .into_iter()
        .filter(|&v| q.is_empty() || vitrine_corpus::filter::fold(&values[v]).contains(&q))
        .collect();
    let room = limit.saturating_sub(shown.len());
    let more = matching.len().saturating_sub(room);
    shown.extend(matching.into_iter().take(room));
    (shown, more)
}

#[cfg(test)]
mod tests {
    use super::*;
    use vitrine_format::{ArrayRef, DType, Field, FieldKind};

    fn category(name: &str, values: &[&str], codes: Vec<u32>) -> FieldColumn {
        let r = ArrayRef {
            file: format!("{name}.bin"),
            dtype: DType::U32,
            count: codes.len() as u64,
            bytes: 4 * codes.len() as u64,
            sha256: String::new(),
        };
        FieldColumn {
            field: Field {
                name: name.into(),
                kind: FieldKind::Category,
                column: r,
                column2: None,
                values: values.iter().map(|s| s.to_string()).collect(),
                value_counts: vec![],
                written: None,
                multi: None,
                multi_separator: None,
            },
            column: Column::Category(codes),
            multi: None,
            written: None,
            folded: Default::default(),
        }
    }

    #[test]
    fn counts_beside_a_fields_values_ignore_that_fields_own_filter() {
        // 8 items: technique a/b alternating, place x for the first half, y for the second.
        let cols = vec![
            category("technique", &["a", "b"], (0..8).map(|i| i % 2).collect()),
            category("place", &["x", "y"], (0..8).map(|i| i / 4).collect()),
        ];
        let mut f = Filters::default();
        let cat = |field: &str, v: &[&str]| Filter::Category {
            field: field.into(),
            values: v.iter().map(|s| s.to_string()).collect(),
        };
        f.set(cat("technique", &["a"]), &cols, 8).unwrap();
        f.set(cat("place", &["x"]), &cols, 8).unwrap();
        assert_eq!(f.passing().unwrap().count(), 2);
        // Technique's counts are taken under the place filter only: both values still show.
        assert_eq!(f.counts(&cols[0], 8), [2, 2]);
        assert_eq!(f.counts(&cols[1], 8), [2, 2]);
        // Setting a field's filter again replaces it, in its place.
        f.set(cat("technique", &["a", "b"]), &cols, 8).unwrap();
        assert_eq!(f.list().len(), 2);
        assert_eq!(f.list()[0].fields(), ["technique"]);
        assert_eq!(f.passing().unwrap().count(), 4);
        // An empty choice removes the filter; removing the last leaves no filter at all.
        f.set(cat("technique", &[]), &cols, 8).unwrap();
        assert_eq!(f.list().len(), 1);
        f.remove(0, &cols, 8).unwrap();
        assert!(f.passing().is_none());
        // A bad filter changes nothing.
        assert!(f.set(cat("technique", &["c"]), &cols, 8).is_err());
        assert!(f.list().is_empty());
    }

    #[test]
    fn a_changed_filter_is_recomputed_alone_with_the_same_items_as_afresh() {
        let n = 12;
        let titles: Vec<String> = (0..n)
            .map(|i| ["Étude", "Landscape", "Portrait of a Stag"][i % 3].to_string())
            .collect();
        let mut title = category("title", &[], vec![0; n]);
        title.field.kind = FieldKind::Text;
        title.column = Column::Text(vitrine_format::TextTable::from_strings(&titles));
        let cols = vec![
            category(
                "technique",
                &["a", "b"],
                (0..n as u32).map(|i| i % 2).collect(),
            ),
            category("place", &["x", "y"], (0..n as u32).map(|i| i / 6).collect()),
            title,
        ];
        let cat = |field: &str, v: &[&str]| Filter::Category {
            field: field.into(),
            values: v.iter().map(|s| s.to_string()).collect(),
        };
        let search = Filter::Text {
            fields: vec!["title".into()],
            query: "etude".into(),
        };
        let mut f = Filters::default();
        assert!(cols[2].folded.get().is_none());
        f.set(search.clone(), &cols, n).unwrap();
        // The search folded the titles once; the column keeps them.
        assert_eq!(cols[2].folded.get().map(|t| t.len()), Some(n));
        assert_eq!(cols[2].folded.get().unwrap().get(0), "etude");
        f.set(cat("technique", &["a"]), &cols, n).unwrap();
        for step in [
            cat("place", &["y"]),
            cat("technique", &["b"]),
            cat("place", &[]),
        ] {
            f.set(step, &cols, n).unwrap();
            let fresh = vitrine_corpus::filter::apply(f.list(), &cols, n).unwrap();
            assert_eq!(f.passing().unwrap(), &fresh.all);
        }
        // Items 3 and 9 are "Étude" and technique b (odd): what the last state leaves.
        assert_eq!(f.passing().unwrap().items().collect::<Vec<_>>(), [3, 9]);
    }

    #[test]
    fn the_panel_lists_chosen_values_then_the_largest_that_match() {
        let values: Vec<String> = ["Étampes", "Varnholt", "Osterlee", "Vèrnay", "Brisca"]
            .iter()
            .map(|s| s.to_string())
            .collect();
        let counts = [5, 50, 40, 30, 1];
        // Nothing chosen, no query: by count, cut at the limit, the rest counted.
        assert_eq!(
            panel_values(&values, &counts, &[], "", 3),
            (vec![1, 2, 3], 2)
        );
        // A chosen value too small to make the list is still there, first.
        let chosen = vec!["Brisca".to_string()];
        assert_eq!(
            panel_values(&values, &counts, &chosen, "", 3),
            (vec![4, 1, 2], 2)
        );
        // The query ignores case and accents: "VE" finds Vèrnay alone.
        assert_eq!(panel_values(&values, &counts, &[], "VE", 10), (vec![3], 0));
        assert_eq!(
            panel_values(&values, &counts, &[], "etam", 10),
            (vec![0], 0)
        );
        // Chosen values stay whatever the query.
        assert_eq!(
            panel_values(&values, &counts, &chosen, "etam", 10),
            (vec![4, 0], 0)
        );
    }
}
