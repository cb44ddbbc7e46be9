//! The catalogue: a CSV table with a header row and one record per image.
//!
//! Every column is kept. Each one becomes a field whose kind (category, number, date, text,
//! link) is inferred from its name and values by the rules in [`infer_kind`].

use std::collections::HashMap;
use std::path::Path;

use vitrine_format::FieldKind;

use crate::dates::{parse_date, YearRange};
use crate::error::InputError;

#[derive(Debug, Clone)]
pub struct Catalogue {
    pub file: String,
    pub header: Vec<String>,
    /// Column index of the id.
    pub id_column: usize,
    /// Records as read, one string per column.
    pub rows: Vec<Vec<String>>,
}

impl Catalogue {
    pub fn ids(&self) -> impl Iterator<Item = &str> {
        self.rows.iter().map(move |r| r[self.id_column].as_str())
    }
    pub fn column(&self, name: &str) -> Option<usize> {
        self.header.iter().position(|h| h == name)
    }
}

pub fn read_csv(path: &Path, id_column: &str) -> Result<Catalogue, InputError> {
    let raw = std::fs::read(path).map_err(|e| InputError::io(path, e))?;
    parse_csv(&raw, path, id_column)
}

/// The most columns a catalogue may have, and the longest column name (in characters).
pub const MAX_COLUMNS: usize = 1_000;
pub const MAX_COLUMN_NAME: usize = 200;

pub fn parse_csv(raw: &[u8], path: &Path, id_column: &str) -> Result<Catalogue, InputError> {
    let file = path.display().to_string();
    let bad = |reason: String| InputError::Catalogue {
        file: file.clone(),
        reason,
    };
    let body = raw.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(raw);
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(true)
        .flexible(false)
        .from_reader(body);
    let header: Vec<String> = reader
        .byte_headers()
        .map_err(|e| bad(format!("cannot read the header row: {e}")))?
        .iter()
        .enumerate()
        .map(|(i, h)| {
            String::from_utf8(h.to_vec())
                .map(|s| s.trim().to_string())
                .map_err(|_| bad(format!("header column {} is not UTF-8 text", i + 1)))
        })
        .collect::<Result<_, _>>()?;
    if header.is_empty() || header.iter().all(|h| h.is_empty()) {
        return Err(bad("the file has no header row".into()));
    }
    // Each column becomes a field with its own files and a filter in the viewer: a header of tens
    // of thousands of columns is a damaged or wrong file, not a catalogue.
    if header.len() > MAX_COLUMNS {
        return Err(bad(format!(
            "the header row has {} columns; a catalogue may have at most {MAX_COLUMNS} (is this the \
             right file, and is it comma-separated?)",
            header.len()
        )));
    }
    if let Some((i, h)) = header
        .iter()
        .enumerate()
        .find(|(_, h)| h.chars().count() > MAX_COLUMN_NAME)
    {
        return Err(bad(format!(
            "header column {} has a name of {} characters; at most {MAX_COLUMN_NAME}: {:?}...",
            i + 1,
            h.chars().count(),
            h.chars().take(40).collect::<String>()
        )));
    }
    let mut seen = HashMap::new();
    for (i, h) in header.iter().enumerate() {
        if h.is_empty() {
            return Err(bad(format!("header column {} has no name", i + 1)));
        }
        if let Some(j) = seen.insert(h.clone(), i) {
            return Err(bad(format!(
                "the column name {h:?} appears twice (columns {} and {})",
                j + 1,
                i + 1
            )));
        }
    }
    if header.len() == 1 {
        for (sep, name) in [(';', "semicolons"), ('\t', "tabs"), ('|', "vertical bars")] {
            if header[0].contains(sep) {
                return Err(bad(format!(
                    "the header row has one column, {:?}, which holds {name}: this build reads comma-separated \
                     files; save the catalogue as CSV with commas",
                    header[0]
                )));
            }
        }
    }
    let id_col = header.iter().position(|h| h == id_column).ok_or_else(|| {
        bad(format!(
            "there is no id column {id_column:?} (columns: {}); name it with --id-column",
            header.join(", ")
        ))
    })?;
    // Line numbers from byte offsets, so that CRLF and quoted newlines count as a text editor counts.
    let newlines: Vec<usize> = body
        .iter()
        .enumerate()
        .filter(|(_, &b)| b == b'\n')
        .map(|(i, _)| i)
        .collect();
    // (With CRLF endings the reader reports a record as starting on the previous line's '\n': step past it.)
    let line_of = |byte: u64| -> u64 {
        let mut b = byte as usize;
        while b < body.len() && (body[b] == b'\r' || body[b] == b'\n') {
            b += 1;
        }
        newlines.partition_point(|&p| p < b) as u64 + 1
    };
    let mut rows = Vec::new();
    let mut first_line = HashMap::<String, u64>::new();
    for (i, rec) in reader.byte_records().enumerate() {
        // Row numbers in messages count records from 1 after the header, as a spreadsheet shows them minus one.
        let row_no = i + 1;
        let rec = rec.map_err(|e| match e.kind() {
            csv::ErrorKind::UnequalLengths {
                expected_len,
                len,
                pos,
            } => bad(format!(
                "record {row_no} (line {}) has {len} fields, the header has {expected_len}",
                pos.as_ref().map(|p| line_of(p.byte())).unwrap_or(0)
            )),
            _ => bad(format!("record {row_no}: {e}")),
        })?;
        let line = rec.position().map(|p| line_of(p.byte())).unwrap_or(0);
        let mut row = Vec::with_capacity(header.len());
        for (c, f) in rec.iter().enumerate() {
            let s = String::from_utf8(f.to_vec()).map_err(|_| {
                bad(format!(
                    "record {row_no} (line {line}), field {:?}: not UTF-8 text (save the file as UTF-8)",
                    header[c]
                ))
            })?;
            row.push(s);
        }
        let id = row[id_col].trim().to_string();
        if id.is_empty() {
            return Err(bad(format!(
                "record {row_no} (line {line}) has an empty id"
            )));
        }
        if let Some(prev) = first_line.insert(id.clone(), line) {
            return Err(bad(format!(
                "the id {id:?} appears twice (lines {prev} and {line})"
            )));
        }
        row[id_col] = id;
        rows.push(row);
    }
    Ok(Catalogue {
        file,
        header,
        id_column: id_col,
        rows,
    })
}

/// A field's values, ready to be written as atlas columns.
#[derive(Debug, Clone, PartialEq)]
pub enum FieldData {
    Category {
        codes: Vec<u32>,
        values: Vec<String>,
        counts: Vec<u64>,
    },
    Number {
        values: Vec<f32>,
        written: Vec<String>,
    },
    Date {
        ranges: Vec<Option<YearRange>>,
        written: Vec<String>,
    },
    Text(Vec<String>),
    Link(Vec<String>),
}

impl FieldData {
    pub fn kind(&self) -> FieldKind {
        match self {
            FieldData::Category { .. } => FieldKind::Category,
            FieldData::Number { .. } => FieldKind::Number,
            FieldData::Date { .. } => FieldKind::Date,
            FieldData::Text(_) => FieldKind::Text,
            FieldData::Link(_) => FieldKind::Link,
        }
    }
}

/// A value that could not be read as its field's kind; kept as written, reported, never dropped.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct ValueWarning {
    pub field: String,
    pub id: String,
    pub value: String,
    pub reason: String,
}

/// Words that mark a value as unknown rather than as text; they count as empty when a kind is inferred
/// and stay in the record as written.
pub const UNKNOWN_MARKERS: &[&str] = &[
    "n/a", "na", "n.a.", "-", "–", "?", "unknown", "none", "null", "nan", "n.d.", "s.d.",
];

pub fn is_unknown_marker(v: &str) -> bool {
    let l = v.trim().to_lowercase();
    UNKNOWN_MARKERS.contains(&l.as_str())
}

/// A column whose name has a dating word as one of its words (`date`, `dating`, `dated`, `year`, `period`):
/// `object_date` and `Dating` do, `validated` and `number_of_years` do not.
fn looks_like_date_column(name: &str) -> bool {
    let n = name.to_lowercase();
    n.split(|c: char| !c.is_alphanumeric())
        .any(|w| ["date", "dating", "dated", "year", "period", "datierung"].contains(&w))
}

/// The kind of a column, from its name and values:
/// - link: every non-empty value starts with `http://` or `https://`;
/// - date: a word of the name is a dating word (date, dating, dated, year, period) and at least half the
///   values parse as year ranges, or every value parses and at least one is written as a range or with "c.";
/// - markers of an unknown value ("n/a", "unknown", "?", "-", "n.d.", ...) count as empty throughout;
/// - number: every non-empty value parses as a number (or all but at most 5 % of at least 20);
/// - text: the name says it is prose (title, description, notes, caption, inscription, remarks, comment);
/// - category: at most 1,000 distinct values and no more than half as many distinct values as records
///   (or at most 12 distinct values in a small catalogue);
/// - text otherwise.
pub fn infer_kind(name: &str, values: &[&str]) -> FieldKind {
    let filled: Vec<&str> = values
        .iter()
        .map(|v| v.trim())
        .filter(|v| !v.is_empty() && !is_unknown_marker(v))
        .collect();
    if filled.is_empty() {
        return FieldKind::Text;
    }
    if filled
        .iter()
        .all(|v| v.starts_with("http://") || v.starts_with("https://"))
    {
        return FieldKind::Link;
    }
    let all_dates = filled.iter().all(|v| parse_date(v).is_some());
    if looks_like_date_column(name)
        && filled.iter().filter(|v| parse_date(v).is_some()).count() * 2 >= filled.len()
    {
        return FieldKind::Date;
    }
    if all_dates
        && filled
            .iter()
            .any(|v| parse_date(v).is_some_and(|r| r.start != r.end) && v.parse::<f64>().is_err())
    {
        return FieldKind::Date;
    }
    // Numbers: all values, or all but a few stray ones (at most 5 %, listed in the build report).
    let numeric = filled
        .iter()
        .filter(|v| v.parse::<f64>().is_ok_and(|x| x.is_finite()))
        .count();
    if numeric == filled.len() || (numeric >= 20 && numeric * 20 >= filled.len() * 19) {
        return FieldKind::Number;
    }
    let lower = name.to_lowercase();
    if [
        "title",
        "description",
        "notes",
        "caption",
        "inscription",
        "remarks",
        "comment",
    ]
    .iter()
    .any(|w| lower.contains(w))
    {
        return FieldKind::Text;
    }
    let mut distinct = std::collections::HashSet::new();
    for v in &filled {
        distinct.insert(*v);
        if distinct.len() > 1000 {
            return FieldKind::Text;
        }
    }
    if distinct.len() * 2 <= filled.len()
        || distinct.len() <= 12.min(filled.len()) && filled.len() < 24
    {
        FieldKind::Category
    } else {
        FieldKind::Text
    }
}

/// Builds a field's columns for the given records (catalogue rows in item order).
pub fn field_data(
    name: &str,
    kind: FieldKind,
    values: &[&str],
    ids: &[&str],
    warnings: &mut Vec<ValueWarning>,
) -> FieldData {
    match kind {
        FieldKind::Category => {
            let mut index: HashMap<&str, u32> = HashMap::new();
            let mut order: Vec<&str> = Vec::new();
            for v in values {
                let v = v.trim();
                if !v.is_empty() && !index.contains_key(v) {
                    index.insert(v, 0);
                    order.push(v);
                }
            }
            // Vocabulary sorted by count (most frequent first), ties by text: stable and useful for legends.
            let mut counts: HashMap<&str, u64> = HashMap::new();
            for v in values {
                let v = v.trim();
                if !v.is_empty() {
                    *counts.entry(v).or_default() += 1;
                }
            }
            order.sort_by(|a, b| counts[b].cmp(&counts[a]).then(a.cmp(b)));
            for (i, v) in order.iter().enumerate() {
                index.insert(v, i as u32);
            }
            let codes = values
                .iter()
                .map(|v| {
                    let v = v.trim();
                    if v.is_empty() {
                        u32::MAX
                    } else {
                        index[v]
                    }
                })
                .collect();
            FieldData::Category {
                codes,
                counts: order.iter().map(|v| counts[v]).collect(),
                values: order.iter().map(|v| v.to_string()).collect(),
            }
        }
        FieldKind::Number => {
            let mut out = Vec::with_capacity(values.len());
            for (v, id) in values.iter().zip(ids) {
                let t = v.trim();
                if t.is_empty() || is_unknown_marker(t) {
                    out.push(f32::NAN);
                } else if let Ok(x) = t.parse::<f64>() {
                    out.push(x as f32);
                } else {
                    warnings.push(ValueWarning {
                        field: name.into(),
                        id: id.to_string(),
                        value: v.to_string(),
                        reason: "not a number; kept as written".into(),
                    });
                    out.push(f32::NAN);
                }
            }
            FieldData::Number {
                values: out,
                written: values.iter().map(|v| v.to_string()).collect(),
            }
        }
        FieldKind::Date => {
            let mut ranges = Vec::with_capacity(values.len());
            for (v, id) in values.iter().zip(ids) {
                let t = v.trim();
                let r = if t.is_empty() { None } else { parse_date(t) };
                if r.is_none() && !t.is_empty() && !is_unknown_marker(t) {
                    warnings.push(ValueWarning {
                        field: name.into(),
                        id: id.to_string(),
                        value: v.to_string(),
                        reason: if crate::dates::beyond_years(t) {
                            format!(
                                "a year beyond ±{}; kept as written, undated",
                                crate::dates::MAX_YEAR
                            )
                        } else {
                            "not a date this build can read; kept as written, undated".into()
                        },
                    });
                }
                ranges.push(r);
            }
            FieldData::Date {
                ranges,
                written: values.iter().map(|v| v.to_string()).collect(),
            }
        }
        FieldKind::Text => FieldData::Text(values.iter().map(|v| v.to_string()).collect()),
        FieldKind::Link => FieldData::Link(values.iter().map(|v| v.trim().to_string()).collect()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn kinds_follow_the_stated_rules() {
        let k = |name: &str, v: &[&str]| infer_kind(name, v);
        assert_eq!(
            k("record", &["https://a.example/1", "", "http://b.example/2"]),
            FieldKind::Link
        );
        assert_eq!(
            k("dating", &["1602", "c. 1540", "undated"]),
            FieldKind::Date
        );
        assert_eq!(
            k("made", &["1602", "1550-1575", "c. 1540"]),
            FieldKind::Date
        );
        assert_eq!(k("height_cm", &["12.5", "", "7"]), FieldKind::Number);
        assert_eq!(
            k("year_count", &["12", "13"]),
            FieldKind::Date,
            "a date-like name wins over numbers"
        );
        // Repeated titles are still prose, not a vocabulary.
        let titles: Vec<&str> = (0..100)
            .map(|i| ["Study", "Sketch", "Rosette"][i % 3])
            .collect();
        assert_eq!(k("title", &titles), FieldKind::Text);
        assert_eq!(k("technique", &titles), FieldKind::Category);
        let many: Vec<String> = (0..100).map(|i| format!("shelf {i}")).collect();
        let many: Vec<&str> = many.iter().map(String::as_str).collect();
        assert_eq!(k("shelf_mark", &many), FieldKind::Text);
        assert_eq!(k("empty", &["", " "]), FieldKind::Text);
    }

    #[test]
    fn csv_with_bom_quotes_and_newlines_keeps_every_value() {
        let raw = "\u{feff}id,title\n1,\"A, \"\"quoted\"\"\nsecond line\"\n2,Ünïcødé\n".as_bytes();
        let c = parse_csv(raw, Path::new("t.csv"), "id").unwrap();
        assert_eq!(c.header, ["id", "title"]);
        assert_eq!(c.rows[0][1], "A, \"quoted\"\nsecond line");
        assert_eq!(c.rows[1][1], "Ünïcødé");
        let e = parse_csv(b"id,t\n1,a\n1,b\n", Path::new("d.csv"), "id")
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("d.csv") && e.contains("\"1\" appears twice"),
            "{e}"
        );
        let e = parse_csv(b"id,t\n1,\xff\n", Path::new("u.csv"), "id")
            .unwrap_err()
            .to_string();
        assert!(e.contains("record 1") && e.contains("not UTF-8"), "{e}");
    }
}

#[cfg(test)]
mod inference_tests {
    use super::*;

    #[test]
    fn dating_words_unknown_markers_and_stray_values() {
        let k = |name: &str, v: &[&str]| infer_kind(name, v);
        assert_eq!(k("validated", &["0", "1"]), FieldKind::Number);
        assert_eq!(k("number_of_years", &["3", "40"]), FieldKind::Number);
        assert_eq!(
            k("date_acquired", &["2023-04-05", "2021-11-30", "n.d."]),
            FieldKind::Date
        );
        let mut h: Vec<String> = (0..200).map(|i| format!("{}.5", 10 + i % 50)).collect();
        for i in 0..8 {
            h[i * 20 + 1] = "n/a".into();
        }
        h[7] = "about 12".into();
        let h: Vec<&str> = h.iter().map(String::as_str).collect();
        assert_eq!(
            k("height_cm", &h),
            FieldKind::Number,
            "unknown markers and one stray value"
        );
        let mut w = Vec::new();
        let ids: Vec<String> = (0..200).map(|i| i.to_string()).collect();
        let ids: Vec<&str> = ids.iter().map(String::as_str).collect();
        match field_data("height_cm", FieldKind::Number, &h, &ids, &mut w) {
            FieldData::Number { values, written } => {
                assert!(values[1].is_nan() && values[7].is_nan() && values[0] == 10.5);
                assert_eq!(
                    (written[1].as_str(), written[7].as_str()),
                    ("n/a", "about 12")
                );
            }
            _ => unreachable!(),
        }
        assert_eq!(w.len(), 1, "only the stray value is reported: {w:?}");
    }

    #[test]
    fn windows_line_endings_and_other_separators() {
        let e = parse_csv(b"id,t\r\nA,x\r\nB,y,z\r\n", Path::new("w.csv"), "id")
            .unwrap_err()
            .to_string();
        assert!(e.contains("record 2 (line 3)"), "{e}");
        let e = parse_csv(b"id,t\r\nA,x\r\nB,y\r\nA,z\r\n", Path::new("w.csv"), "id")
            .unwrap_err()
            .to_string();
        assert!(e.contains("(lines 2 and 4)"), "{e}");
        let e = parse_csv(b"id;t\n1;a\n", Path::new("s.csv"), "id")
            .unwrap_err()
            .to_string();
        assert!(e.contains("semicolons"), "{e}");
    }

    #[test]
    fn too_many_columns_or_too_long_a_name_is_refused_with_the_count() {
        let mut wide = String::from("id");
        for c in 0..MAX_COLUMNS {
            wide.push_str(&format!(",c{c}"));
        }
        wide.push_str("\n1");
        wide.push_str(&",x".repeat(MAX_COLUMNS));
        wide.push('\n');
        let e = parse_csv(wide.as_bytes(), Path::new("wide.csv"), "id")
            .err()
            .unwrap()
            .to_string();
        assert!(e.contains("wide.csv") && e.contains("1001 columns"), "{e}");
        let ok = format!("id,{}\n1,x\n", "n".repeat(MAX_COLUMN_NAME));
        assert!(parse_csv(ok.as_bytes(), Path::new("n.csv"), "id").is_ok());
        let long = format!("id,{}\n1,x\n", "n".repeat(MAX_COLUMN_NAME + 1));
        let e = parse_csv(long.as_bytes(), Path::new("n.csv"), "id")
            .err()
            .unwrap()
            .to_string();
        assert!(
            e.contains("header column 2") && e.contains("201 characters"),
            "{e}"
        );
    }
}
