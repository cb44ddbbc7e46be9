//! Comparing two corpora: their sizes and overlap, and for a category field the share of each
//! value in each corpus, the ratio of the shares, the adjusted residual of each value (which
//! values drive a difference) and Pearson's chi-square test of independence of corpus and value,
//! with its assumptions checked (Cochran's rule: no expected count below 1, at most a fifth below
//! 5).

use crate::columns::{Column, FieldColumn};
use crate::export::{cell, csv_row, number, CsvStyle};
use crate::stats::{chi_square, ChiSquare};
use crate::CorpusError;

/// Sizes and overlap of two corpora (items in atlas order).
#[derive(Debug, Clone, PartialEq)]
pub struct Overlap {
    pub a: usize,
    pub b: usize,
    pub both: usize,
}

/// Sizes and overlap of two sorted item lists.
pub fn overlap(a: &[usize], b: &[usize]) -> Overlap {
    let (mut i, mut j, mut both) = (0, 0, 0);
    while i < a.len() && j < b.len() {
        match a[i].cmp(&b[j]) {
            std::cmp::Ordering::Less => i += 1,
            std::cmp::Ordering::Greater => j += 1,
            std::cmp::Ordering::Equal => {
                both += 1;
                i += 1;
                j += 1;
            }
        }
    }
    Overlap {
        a: a.len(),
        b: b.len(),
        both,
    }
}

/// One value of a field in the two corpora.
#[derive(Debug, Clone, PartialEq)]
pub struct ValueRow {
    pub value: String,
    pub a: f64,
    pub b: f64,
    pub share_a: f64,
    pub share_b: f64,
    /// share_a / share_b; None when the value is absent from b.
    pub ratio: Option<f64>,
    /// The adjusted residual of the value in corpus a (Agresti): (observed − expected) over its
    /// standard error; beyond ±1.96 the value is over- (under-) represented in a at the 5 % level
    /// taken alone. None when the test is not defined.
    pub residual: Option<f64>,
}

/// A field compared in two corpora.
#[derive(Debug, Clone, PartialEq)]
pub struct FieldComparison {
    pub field: String,
    /// The values present in either corpus, most over-represented in a first (absent from b
    /// first of all), most over-represented in b last.
    pub rows: Vec<ValueRow>,
    /// Items with a value in each corpus (the shares' bases).
    pub with_value: (usize, usize),
    pub test: Option<ChiSquare>,
    /// Expected counts below 5, of how many.
    pub small_expected: (usize, usize),
    /// A note when the test is not defined or its assumptions fail.
    pub note: Option<String>,
}

/// Compares category field `col` in corpora `a` and `b` (item indices).
pub fn compare_field(
    col: &FieldColumn,
    a: &[usize],
    b: &[usize],
) -> Result<FieldComparison, CorpusError> {
    let Column::Category(codes) = &col.column else {
        return Err(CorpusError::Field {
            field: col.field.name.clone(),
            reason: "corpora are compared on category fields".into(),
        });
    };
    if col.multi.is_some() {
        // The chi-square test takes each item once, in one cell: a record with several values
        // would be counted in several.
        return Err(CorpusError::Field {
            field: col.field.name.clone(),
            reason: "holds several values per record; corpora are compared on fields with one value per record (filter by one of its values and compare the corpora on another field)".into(),
        });
    }
    let k = col.field.values.len();
    let count = |items: &[usize]| {
        let mut c = vec![0.0f64; k];
        let mut n = 0usize;
        for &i in items {
            let v = codes[i] as usize;
            if v < k {
                c[v] += 1.0;
                n += 1;
            }
        }
        (c, n)
    };
    let ((ca, na), (cb, nb)) = (count(a), count(b));
    let present: Vec<usize> = (0..k).filter(|&v| ca[v] + cb[v] > 0.0).collect();
    let table = vec![
        present.iter().map(|&v| ca[v]).collect::<Vec<f64>>(),
        present.iter().map(|&v| cb[v]).collect::<Vec<f64>>(),
    ];
    let test = chi_square(&table, true);
    let total = (na + nb) as f64;
    let mut small = 0;
    let mut below_one = false;
    for row_n in [na as f64, nb as f64] {
        for &v in &present {
            let e = row_n * (ca[v] + cb[v]) / total;
            if e < 5.0 {
                small += 1;
            }
            if e < 1.0 {
                below_one = true;
            }
        }
    }
    let cells = 2 * present.len();
    let note = if test.is_none() {
        Some(if na == 0 || nb == 0 {
            "one corpus has no item with a value: nothing to test".to_string()
        } else {
            "fewer than two values occur: nothing to test".to_string()
        })
    } else if below_one || small * 5 > cells {
        Some(format!(
            "{small} of {cells} expected counts are below 5{}: the chi-square approximation is doubtful \
             (join rare values, or use an exact test)",
            if below_one { ", some below 1" } else { "" }
        ))
    } else {
        None
    };
    let mut rows: Vec<ValueRow> = present
        .iter()
        .map(|&v| {
            let share_a = if na > 0 { ca[v] / na as f64 } else { 0.0 };
            let share_b = if nb > 0 { cb[v] / nb as f64 } else { 0.0 };
            let col_n = ca[v] + cb[v];
            let e = na as f64 * col_n / total;
            let se = (e * (1.0 - na as f64 / total) * (1.0 - col_n / total)).sqrt();
            ValueRow {
                value: col.field.values[v].clone(),
                a: ca[v],
                b: cb[v],
                share_a,
                share_b,
                ratio: (share_b > 0.0).then(|| share_a / share_b),
                residual: (test.is_some() && se > 0.0).then(|| (ca[v] - e) / se),
            }
        })
        .collect();
    rows.sort_by(|x, y| {
        let key = |r: &ValueRow| r.ratio.unwrap_or(f64::INFINITY);
        key(y)
            .total_cmp(&key(x))
            .then(y.a.total_cmp(&x.a))
            .then(x.value.cmp(&y.value))
    });
    Ok(FieldComparison {
        field: col.field.name.clone(),
        rows,
        with_value: (na, nb),
        test,
        small_expected: (small, cells),
        note,
    })
}

fn num(x: Option<f64>) -> String {
    x.map(number).unwrap_or_default()
}

/// The comparison as one CSV: first the corpora's sizes and overlap (field "(corpus)"), then per
/// field each value's counts, shares, ratio and adjusted residual, with the field's test on every
/// row of the field (statistic, degrees of freedom, p-value, smallest expected count, note).
pub fn comparison_csv(names: (&str, &str), o: &Overlap, fields: &[FieldComparison]) -> String {
    let mut out = String::new();
    let (na, nb) = names;
    let head = [
        "field".to_string(),
        "value".into(),
        format!("{na}_count"),
        format!("{na}_share"),
        format!("{nb}_count"),
        format!("{nb}_share"),
        "ratio".into(),
        "adjusted_residual".into(),
        "chi_square".into(),
        "dof".into(),
        "p_value".into(),
        "min_expected".into(),
        "note".into(),
    ];
    let head: Vec<String> = head
        .iter()
        .map(|h| cell(h, false, CsvStyle::Spreadsheet).into_owned())
        .collect();
    csv_row(&mut out, head.iter().map(String::as_str));
    let empty = String::new();
    for (what, a, b) in [
        ("items", o.a, o.b),
        ("in both", o.both, o.both),
        ("only in this one", o.a - o.both, o.b - o.both),
    ] {
        let cells = [
            "(corpus)".to_string(),
            what.to_string(),
            a.to_string(),
            empty.clone(),
            b.to_string(),
        ];
        csv_row(
            &mut out,
            cells
                .iter()
                .map(String::as_str)
                .chain(std::iter::repeat_n("", 8)),
        );
    }
    for f in fields {
        for r in &f.rows {
            let t = f.test.as_ref();
            let cells = [
                cell(&f.field, false, CsvStyle::Spreadsheet).into_owned(),
                cell(&r.value, false, CsvStyle::Spreadsheet).into_owned(),
                number(r.a),
                number(r.share_a),
                number(r.b),
                number(r.share_b),
                num(r.ratio),
                num(r.residual),
                num(t.map(|t| t.statistic)),
                num(t.map(|t| t.dof as f64)),
                num(t.map(|t| t.p_value)),
                num(t.map(|t| t.min_expected)),
                f.note.clone().unwrap_or_default(),
            ];
            csv_row(&mut out, cells.iter().map(String::as_str));
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use vitrine_format::{Field, FieldKind};

    fn column(values: &[&str], codes: Vec<u32>) -> FieldColumn {
        let mut field: Field = serde_json::from_value(serde_json::json!({
            "name": "technique", "kind": "category",
            "column": {"file": "x", "dtype": "u32", "count": codes.len(), "bytes": 0, "sha256": ""}
        }))
        .unwrap();
        field.kind = FieldKind::Category;
        field.values = values.iter().map(|s| s.to_string()).collect();
        FieldColumn {
            field,
            column: Column::Category(codes),
            multi: None,
            written: None,
            folded: Default::default(),
        }
    }

    #[test]
    fn overlap_counts_the_shared_items() {
        assert_eq!(
            overlap(&[1, 3, 5, 7], &[2, 3, 7, 9, 11]),
            Overlap {
                a: 4,
                b: 5,
                both: 2
            }
        );
    }

    #[test]
    fn shares_ratios_and_the_test_follow_the_counts() {
        // a: 30 etchings, 10 woodcuts; b: 10 etchings, 30 woodcuts; one item without a value.
        let mut codes = vec![0u32; 30];
        codes.extend(vec![1; 10]);
        codes.extend(vec![0; 10]);
        codes.extend(vec![1; 30]);
        codes.push(u32::MAX);
        let col = column(&["etching", "woodcut", "engraving"], codes);
        let a: Vec<usize> = (0..40).collect();
        let b: Vec<usize> = (40..81).collect();
        let f = compare_field(&col, &a, &b).unwrap();
        assert_eq!(f.with_value, (40, 40));
        assert_eq!(f.rows.len(), 2, "engraving occurs in neither");
        assert_eq!(f.rows[0].value, "etching");
        assert_eq!((f.rows[0].share_a, f.rows[0].share_b), (0.75, 0.25));
        assert_eq!(f.rows[0].ratio, Some(3.0));
        // 2 x 2, Yates: (|30 - 20| - 0.5)^2 / 20 x 4 = 18.05 (worked by hand).
        let t = f.test.unwrap();
        assert!((t.statistic - 18.05).abs() < 1e-9, "{t:?}");
        assert_eq!(t.dof, 1);
        assert!(f.note.is_none());
        // The adjusted residual of a 2 x 2 table is ±sqrt of the uncorrected statistic (20).
        assert!((f.rows[0].residual.unwrap() - 20f64.sqrt()).abs() < 1e-9);
        assert!((f.rows[1].residual.unwrap() + 20f64.sqrt()).abs() < 1e-9);
    }

    #[test]
    fn small_expected_counts_and_empty_corpora_are_noted() {
        let col = column(&["x", "y", "z"], vec![0, 1, 2, 0, 0, 1]);
        let f = compare_field(&col, &[0, 1, 2], &[3, 4, 5]).unwrap();
        assert!(f
            .note
            .unwrap()
            .contains("6 of 6 expected counts are below 5"));
        let f = compare_field(&col, &[0, 1], &[]).unwrap();
        assert!(f.test.is_none());
        assert!(f.note.as_ref().unwrap().contains("one corpus has no item"));
        let csv = comparison_csv(("a", "b"), &overlap(&[0, 1], &[]), &[f]);
        assert!(csv.starts_with("field,value,a_count,a_share,b_count,b_share,ratio,"));
        assert!(csv.contains("(corpus),items,2,,0,"));
    }
}
