//! A corpus in figures, as its tray shows them: the years its datings span and the most common
//! values of each category field.

use crate::columns::{Column, FieldColumn};
use crate::mask::Mask;

#[derive(Debug, Clone, PartialEq)]
pub struct Figures {
    pub count: usize,
    /// Per date field: its name and the earliest start and latest end year among the items.
    pub spans: Vec<(String, i32, i32)>,
    /// Per category field: its name and its `top` most common values among the items, with counts.
    pub top: Vec<(String, Vec<(String, u64)>)>,
}

pub fn figures(cols: &[FieldColumn], items: &Mask, top: usize) -> Figures {
    let mut spans = Vec::new();
    let mut tops = Vec::new();
    for c in cols {
        match &c.column {
            Column::Date { start, end } => {
                let mut span: Option<(i32, i32)> = None;
                for i in items.items() {
                    if start[i] != i32::MIN {
                        span = Some(span.map_or((start[i], end[i]), |(a, b)| {
                            (a.min(start[i]), b.max(end[i]))
                        }));
                    }
                }
                if let Some((a, b)) = span {
                    spans.push((c.field.name.clone(), a, b));
                }
            }
            Column::Category(_) => {
                let mut counts = vec![0u64; c.field.values.len()];
                for i in items.items() {
                    for &code in c.codes_of(i) {
                        if let Some(k) = counts.get_mut(code as usize) {
                            *k += 1;
                        }
                    }
                }
                let mut order: Vec<usize> = (0..counts.len()).filter(|&v| counts[v] > 0).collect();
                order.sort_by_key(|&v| (std::cmp::Reverse(counts[v]), v));
                let best = order
                    .into_iter()
                    .take(top)
                    .map(|v| (c.field.values[v].clone(), counts[v]))
                    .collect::<Vec<_>>();
                if !best.is_empty() {
                    tops.push((c.field.name.clone(), best));
                }
            }
            _ => {}
        }
    }
    Figures {
        count: items.count(),
        spans,
        top: tops,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use vitrine_format::{ArrayRef, DType, Field, FieldKind};

    fn field(name: &str, kind: FieldKind, values: &[&str]) -> Field {
        Field {
            name: name.into(),
            kind,
            column: ArrayRef {
                file: format!("{name}.bin"),
                dtype: DType::U32,
                count: 0,
                bytes: 0,
                sha256: String::new(),
            },
            column2: None,
            values: values.iter().map(|s| s.to_string()).collect(),
            value_counts: vec![],
            written: None,
            multi: None,
            multi_separator: None,
        }
    }

    #[test]
    fn spans_and_top_values_are_those_of_the_chosen_items() {
        let cols = vec![
            FieldColumn {
                field: field("dating", FieldKind::Date, &[]),
                column: Column::Date {
                    start: vec![1500, 1540, i32::MIN, 1480],
                    end: vec![1510, 1560, i32::MIN, 1490],
                },
                multi: None,
                written: None,
                folded: Default::default(),
            },
            FieldColumn {
                field: field(
                    "technique",
                    FieldKind::Category,
                    &["etching", "woodcut", "drawing"],
                ),
                column: Column::Category(vec![1, 0, 1, 2]),
                multi: None,
                written: None,
                folded: Default::default(),
            },
        ];
        // Items 0, 1 and 2 (item 3, the earliest, is left out; item 2 is undated).
        let f = figures(&cols, &Mask::from_items(4, [0, 1, 2]), 2);
        assert_eq!(f.count, 3);
        assert_eq!(f.spans, [("dating".to_string(), 1500, 1560)]);
        assert_eq!(
            f.top,
            [(
                "technique".to_string(),
                vec![("woodcut".to_string(), 2), ("etching".to_string(), 1)]
            )]
        );
    }
}
