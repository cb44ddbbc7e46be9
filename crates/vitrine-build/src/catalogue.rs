//! The catalogue: a delimited text table (comma, semicolon, tab or vertical bar, found from the
//! header row) with a header row and one record per image, in UTF-8, or in Windows-1252 / Latin-1
//! as older spreadsheets export it (found when the bytes are not UTF-8, and said).
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
    /// How the file was read: its delimiter and text encoding, and whether each was found or given.
    pub read_as: ReadAs,
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

/// A catalogue's delimiter and text encoding, when the user names them (None: found from the file),
/// and the sheet of a spreadsheet workbook (None: its first).
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct TableFormat {
    pub delimiter: Option<u8>,
    pub encoding: Option<TextEncoding>,
    pub sheet: Option<String>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TextEncoding {
    Utf8,
    /// Windows-1252 (Western European), of which Latin-1's printable characters are a part.
    Windows1252,
    /// UTF-16 with a byte-order mark (found only, by the mark).
    Utf16,
}

impl TextEncoding {
    pub fn name(self) -> &'static str {
        match self {
            TextEncoding::Utf8 => "UTF-8",
            TextEncoding::Windows1252 => "Windows-1252",
            TextEncoding::Utf16 => "UTF-16",
        }
    }
}

/// How a catalogue was read.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ReadAs {
    pub delimiter: u8,
    pub encoding: TextEncoding,
    /// The delimiter, the encoding: found from the file (true) or given (false).
    pub found: (bool, bool),
    /// The sheet read, when the catalogue is a spreadsheet workbook.
    pub sheet: Option<String>,
}

impl ReadAs {
    /// The delimiter by name.
    pub fn delimiter_name(&self) -> &'static str {
        delimiter_name(self.delimiter)
    }
}

fn delimiter_name(d: u8) -> &'static str {
    match d {
        b',' => "commas",
        b';' => "semicolons",
        b'\t' => "tabs",
        b'|' => "vertical bars",
        _ => "its delimiter",
    }
}

pub fn read_csv(path: &Path, id_column: &str) -> Result<Catalogue, InputError> {
    read_table(path, id_column, TableFormat::default())
}

/// Whether `path` names a spreadsheet workbook (.xlsx, .xlsm, .xls, .ods) by its extension.
fn is_workbook(path: &Path) -> bool {
    matches!(
        crate::folder::lower_extension(path).as_str(),
        "xlsx" | "xlsm" | "xls" | "ods"
    )
}

/// Reads a catalogue file: a spreadsheet workbook's sheet, or a delimited text file with the
/// delimiter and encoding given, or found from it.
pub fn read_table(
    path: &Path,
    id_column: &str,
    format: TableFormat,
) -> Result<Catalogue, InputError> {
    let bad = |reason: String| InputError::Catalogue {
        file: path.display().to_string(),
        reason,
    };
    if is_workbook(path) {
        let (sheet, csv) = sheet_as_csv(path, format.sheet.as_deref()).map_err(bad)?;
        let as_text = TableFormat {
            delimiter: Some(b','),
            encoding: Some(TextEncoding::Utf8),
            sheet: None,
        };
        let mut c = parse_table(&csv, path, id_column, as_text)?;
        c.read_as.sheet = Some(sheet);
        return Ok(c);
    }
    if let Some(s) = &format.sheet {
        return Err(bad(format!(
            "--sheet {s:?}: the catalogue is not a spreadsheet workbook (.xlsx, .xls, .ods)"
        )));
    }
    let raw = std::fs::read(path).map_err(|e| InputError::io(path, e))?;
    parse_table(&raw, path, id_column, format)
}

/// A workbook's sheet (the one named, else the first) as CSV text: numbers as written without a
/// spurious ".0", dates as ISO 8601 (`1923-04-05`, with a time only when it has one), errors as
/// their code (`#N/A`).
fn sheet_as_csv(path: &Path, sheet: Option<&str>) -> Result<(String, Vec<u8>), String> {
    use calamine::{Data, Reader};
    let mut book = calamine::open_workbook_auto(path)
        .map_err(|e| format!("cannot read it as a spreadsheet workbook: {e}"))?;
    let names = book.sheet_names().to_vec();
    let name = match sheet {
        Some(s) if names.iter().any(|n| n == s) => s.to_string(),
        Some(s) => {
            return Err(format!(
                "--sheet {s:?}: the workbook has no such sheet (its sheets: {})",
                names.join(", ")
            ))
        }
        None => names
            .first()
            .cloned()
            .ok_or_else(|| "the workbook has no sheets".to_string())?,
    };
    let range = book
        .worksheet_range(&name)
        .map_err(|e| format!("sheet {name:?}: {e}"))?;
    let mut w = csv::Writer::from_writer(Vec::new());
    for row in range.rows() {
        let cells: Vec<String> = row
            .iter()
            .map(|c| match c {
                Data::Empty => String::new(),
                Data::String(s) | Data::DateTimeIso(s) | Data::DurationIso(s) => s.clone(),
                Data::Int(i) => i.to_string(),
                Data::Float(f) if f.fract() == 0.0 && f.abs() < 1e15 => format!("{}", *f as i64),
                Data::Float(f) => f.to_string(),
                Data::Bool(b) => b.to_string(),
                Data::DateTime(d) => match d.as_datetime() {
                    Some(t) => {
                        use chrono::{Datelike, Timelike};
                        let date = format!("{:04}-{:02}-{:02}", t.year(), t.month(), t.day());
                        if t.time() == chrono::NaiveTime::MIN {
                            date
                        } else {
                            format!("{date}T{:02}:{:02}:{:02}", t.hour(), t.minute(), t.second())
                        }
                    }
                    None => d.as_f64().to_string(),
                },
                Data::Error(e) => e.to_string(),
            })
            .collect();
        w.write_record(&cells)
            .map_err(|e| format!("sheet {name:?}: {e}"))?;
    }
    let bytes = w.into_inner().map_err(|e| format!("sheet {name:?}: {e}"))?;
    Ok((name, bytes))
}

/// The delimiters a catalogue may use.
const DELIMITERS: [u8; 4] = [b',', b';', b'\t', b'|'];

/// The delimiter of a table from its first line: the one of comma, semicolon, tab and vertical bar
/// that occurs most often outside quotes. Two occurring equally often (and at least once) make it
/// ambiguous: an error that asks for --delimiter.
fn find_delimiter(body: &[u8]) -> Result<u8, String> {
    let mut counts = [0usize; 4];
    let mut quoted = false;
    for &b in body {
        match b {
            b'"' => quoted = !quoted,
            b'\n' if !quoted => break,
            _ if !quoted => {
                if let Some(k) = DELIMITERS.iter().position(|&d| d == b) {
                    counts[k] += 1;
                }
            }
            _ => {}
        }
    }
    let most = *counts.iter().max().unwrap();
    if most == 0 {
        // One column (or an empty file): commas, as good as any.
        return Ok(b',');
    }
    let tied: Vec<u8> = (0..4)
        .filter(|&k| counts[k] == most)
        .map(|k| DELIMITERS[k])
        .collect();
    if tied.len() > 1 {
        return Err(format!(
            "its header row holds {} as often as {} ({most} each), so the delimiter is ambiguous: name it with --delimiter ({})",
            delimiter_name(tied[0]),
            delimiter_name(tied[1]),
            "comma, semicolon, tab or bar"
        ));
    }
    Ok(tied[0])
}

/// The text of a file in Windows-1252 (bytes 0x80-0x9F as that code page has them, the five it
/// leaves undefined as the Latin-1 control characters they are there).
fn windows_1252(raw: &[u8]) -> String {
    const HIGH: [char; 32] = [
        '€', '\u{81}', '‚', 'ƒ', '„', '…', '†', '‡', 'ˆ', '‰', 'Š', '‹', 'Œ', '\u{8D}', 'Ž',
        '\u{8F}', '\u{90}', '‘', '’', '“', '”', '•', '–', '—', '˜', '™', 'š', '›', 'œ', '\u{9D}',
        'ž', 'Ÿ',
    ];
    raw.iter()
        .map(|&b| match b {
            0x80..=0x9F => HIGH[(b - 0x80) as usize],
            _ => b as char,
        })
        .collect()
}

/// The most columns a catalogue may have, and the longest column name (in characters).
pub const MAX_COLUMNS: usize = 1_000;
pub const MAX_COLUMN_NAME: usize = 200;

pub fn parse_csv(raw: &[u8], path: &Path, id_column: &str) -> Result<Catalogue, InputError> {
    parse_table(raw, path, id_column, TableFormat::default())
}

pub fn parse_table(
    raw: &[u8],
    path: &Path,
    id_column: &str,
    format: TableFormat,
) -> Result<Catalogue, InputError> {
    let file = path.display().to_string();
    let bad = |reason: String| InputError::Catalogue {
        file: file.clone(),
        reason,
    };
    // UTF-16 ("Unicode text" from a spreadsheet), by its byte-order mark.
    let utf16 = match raw {
        [0xFF, 0xFE, rest @ ..] => Some((rest, true)),
        [0xFE, 0xFF, rest @ ..] => Some((rest, false)),
        _ => None,
    };
    if let Some((rest, little)) = utf16 {
        let units: Vec<u16> = rest
            .chunks_exact(2)
            .map(|c| {
                if little {
                    u16::from_le_bytes([c[0], c[1]])
                } else {
                    u16::from_be_bytes([c[0], c[1]])
                }
            })
            .collect();
        let text = String::from_utf16(&units).map_err(|_| {
            bad("the file begins as UTF-16 text but is not UTF-16 throughout".into())
        })?;
        let mut c = parse_table(text.as_bytes(), path, id_column, format.clone())?;
        c.read_as.encoding = TextEncoding::Utf16;
        return Ok(c);
    }
    let bom = raw.starts_with(b"\xEF\xBB\xBF");
    let body = raw.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(raw);
    // Text that is not UTF-8 is read as Windows-1252 (said in the build's notes). Not when UTF-8
    // was asked for, nor when the file says or shows it is UTF-8 (a byte-order mark, or accented
    // letters in UTF-8 before the first bad byte): then the line of the first bad byte is named.
    let utf8 = std::str::from_utf8(body);
    let refuse = |at: usize, why: &str| {
        let line = body[..at].iter().filter(|&&b| b == b'\n').count() + 1;
        bad(format!("line {line} is not UTF-8 text (byte {at}), {why}"))
    };
    let (encoding, decoded) = match (format.encoding, &utf8) {
        (Some(TextEncoding::Windows1252), _) => {
            (TextEncoding::Windows1252, Some(windows_1252(body)))
        }
        (Some(TextEncoding::Utf8), Err(e)) => {
            return Err(refuse(
                e.valid_up_to(),
                "though --catalogue-encoding utf-8 says it is; it may be Windows-1252 or Latin-1: leave the option out to read it so, or convert the file to UTF-8",
            ))
        }
        (None, Err(e)) if bom || !body[..e.valid_up_to()].is_ascii() => {
            return Err(refuse(
                e.valid_up_to(),
                "though the rest of the file is (a damaged or mixed file): mend that line, or give --catalogue-encoding windows-1252 to read it all as Windows-1252",
            ))
        }
        (None, Err(_)) => (TextEncoding::Windows1252, Some(windows_1252(body))),
        _ => (TextEncoding::Utf8, None),
    };
    let body: &[u8] = decoded.as_deref().map_or(body, str::as_bytes);
    let delimiter = match format.delimiter {
        Some(d) => d,
        None => find_delimiter(body).map_err(bad)?,
    };
    let read_as = ReadAs {
        delimiter,
        encoding,
        found: (format.delimiter.is_none(), format.encoding.is_none()),
        sheet: None,
    };
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(true)
        .flexible(false)
        .delimiter(delimiter)
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
             right file, and is it separated by {}? --delimiter names another)",
            header.len(),
            delimiter_name(delimiter)
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
        for sep in DELIMITERS.iter().filter(|&&d| d != delimiter) {
            if header[0].contains(*sep as char) {
                return Err(bad(format!(
                    "the header row has one column, {:?}, which holds {}: it was read as separated by {}; name the delimiter with --delimiter",
                    header[0],
                    delimiter_name(*sep),
                    delimiter_name(delimiter)
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
                "record {row_no} (line {}) has {len} fields, the header has {expected_len} (read as separated by {}{})",
                pos.as_ref().map(|p| line_of(p.byte())).unwrap_or(0),
                delimiter_name(delimiter),
                if read_as.found.0 {
                    ", found from the header row; --delimiter names another"
                } else {
                    ""
                }
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
        read_as,
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
    /// Several category values per record: each item's first value's code (`u32::MAX` empty),
    /// every item's codes (`offsets` into `codes`), the vocabulary, the items holding each value,
    /// and each record's values as written.
    Multi {
        first: Vec<u32>,
        offsets: Vec<u32>,
        codes: Vec<u32>,
        values: Vec<String>,
        counts: Vec<u64>,
        written: Vec<String>,
    },
}

impl FieldData {
    pub fn kind(&self) -> FieldKind {
        match self {
            FieldData::Category { .. } | FieldData::Multi { .. } => FieldKind::Category,
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
    if is_prose(name) {
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

/// The separators a multi-valued field may use, in the order they are tried.
pub const MULTI_SEPARATORS: [&str; 2] = ["|", ";"];

/// The parts of a multi-valued value: split at `sep`, trimmed, empty parts and markers of an
/// unknown value dropped, repeats dropped (first kept).
pub fn split_values<'a>(v: &'a str, sep: &str) -> Vec<&'a str> {
    let mut out: Vec<&str> = Vec::new();
    let mut seen: std::collections::HashSet<&str> = std::collections::HashSet::new();
    for p in v.split(sep).map(str::trim) {
        if p.is_empty() || is_unknown_marker(p) {
            continue;
        }
        // A linear look for the usual few parts; a set once a cell holds many.
        let repeat = if out.len() < 16 {
            out.contains(&p)
        } else {
            if seen.is_empty() {
                seen.extend(out.iter().copied());
            }
            !seen.insert(p)
        };
        if !repeat {
            out.push(p);
        }
    }
    out
}

/// Whether a column of `kind` (as [`infer_kind`] reads it) holds several values per record, and
/// their separator: a category or text column whose name does not say it is prose; at least 2
/// values and 5 % of the filled ones hold the separator; the parts split at it form a vocabulary
/// (at most 1,000 distinct parts, each used twice on average, fewer distinct parts than distinct
/// whole values); and the parts move about, as a list's do: at least a tenth of the distinct parts
/// are seen both first in a record and later in another (a record written by position, such as
/// "Box 3; Folder 12" or "sheet: 20 x 15 cm; image: 18 x 12 cm", keeps a vocabulary per position).
/// `|` is tried first, then `;`.
pub fn multi_separator(kind: FieldKind, name: &str, values: &[&str]) -> Option<&'static str> {
    if !matches!(kind, FieldKind::Category | FieldKind::Text) || is_prose(name) {
        return None;
    }
    let filled = || {
        values
            .iter()
            .map(|v| v.trim())
            .filter(|v| !v.is_empty() && !is_unknown_marker(v))
    };
    let n = filled().count();
    MULTI_SEPARATORS.into_iter().find(|sep| {
        let holding = filled().filter(|v| v.contains(sep)).count();
        if holding < 2 || holding * 20 < n {
            return false;
        }
        let mut parts = 0usize;
        // Each distinct part: seen first in a record, seen later in one.
        let mut distinct: HashMap<&str, (bool, bool)> = HashMap::new();
        for v in filled() {
            for (k, p) in split_values(v, sep).into_iter().enumerate() {
                parts += 1;
                let e = distinct.entry(p).or_default();
                if k == 0 {
                    e.0 = true;
                } else {
                    e.1 = true;
                }
            }
            if distinct.len() > 1000 {
                return false;
            }
        }
        let both = distinct.values().filter(|(a, b)| *a && *b).count();
        if distinct.len() * 2 > parts || both * 10 < distinct.len() {
            return false;
        }
        let whole: std::collections::HashSet<&str> = filled().collect();
        distinct.len() < whole.len()
    })
}

/// The separator most values of a column hold (`|` or `;`), when any holds one: for a field the
/// user says is multi-valued without naming its separator.
pub fn multi_separator_any(values: &[&str]) -> Option<&'static str> {
    MULTI_SEPARATORS
        .into_iter()
        .map(|sep| (sep, values.iter().filter(|v| v.contains(sep)).count()))
        .filter(|&(_, n)| n > 0)
        .max_by_key(|&(_, n)| n)
        .map(|(sep, _)| sep)
}

/// A column whose name says it holds prose (title, description, notes, caption, inscription,
/// remarks, comment).
fn is_prose(name: &str) -> bool {
    let lower = name.to_lowercase();
    [
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
}

/// A multi-valued field's columns: values split at `sep` (see [`split_values`]), the vocabulary
/// sorted by the number of records holding each value (most first), ties by text.
pub fn multi_field_data(values: &[&str], sep: &str) -> FieldData {
    let split: Vec<Vec<&str>> = values.iter().map(|v| split_values(v, sep)).collect();
    let mut counts: HashMap<&str, u64> = HashMap::new();
    for parts in &split {
        for p in parts {
            *counts.entry(p).or_default() += 1;
        }
    }
    let mut order: Vec<&str> = counts.keys().copied().collect();
    order.sort_by(|a, b| counts[b].cmp(&counts[a]).then(a.cmp(b)));
    let index: HashMap<&str, u32> = order
        .iter()
        .enumerate()
        .map(|(i, v)| (*v, i as u32))
        .collect();
    let mut offsets = Vec::with_capacity(values.len() + 1);
    let mut codes = Vec::new();
    offsets.push(0u32);
    for parts in &split {
        codes.extend(parts.iter().map(|p| index[p]));
        offsets.push(codes.len() as u32);
    }
    FieldData::Multi {
        first: split
            .iter()
            .map(|p| p.first().map_or(u32::MAX, |v| index[v]))
            .collect(),
        offsets,
        codes,
        counts: order.iter().map(|v| counts[v]).collect(),
        values: order.iter().map(|v| v.to_string()).collect(),
        written: values.iter().map(|v| v.to_string()).collect(),
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
        // A UTF-8 file with one bad byte is refused at its line, not read as Windows-1252.
        let e = parse_csv(
            "id,t\n1,é\n2,\u{ff}"
                .as_bytes()
                .iter()
                .copied()
                .chain([b'\n', 0xff, b'\n'])
                .collect::<Vec<u8>>()
                .as_slice(),
            Path::new("m.csv"),
            "id",
        )
        .unwrap_err()
        .to_string();
        assert!(
            e.contains("m.csv") && e.contains("line 4") && e.contains("damaged or mixed"),
            "{e}"
        );
        let e = parse_csv(b"\xEF\xBB\xBFid,t\n1,\xff\n", Path::new("b.csv"), "id")
            .unwrap_err()
            .to_string();
        assert!(e.contains("line 2"), "{e}");
        // UTF-16 with its byte-order mark, as spreadsheets save "Unicode text".
        let mut wide = vec![0xFF, 0xFE];
        for u in "id\tplace\n1\tKöln\n".encode_utf16() {
            wide.extend(u.to_le_bytes());
        }
        let c = parse_csv(&wide, Path::new("w.txt"), "id").unwrap();
        assert_eq!(c.rows[0][1], "Köln");
        assert_eq!(
            (c.read_as.encoding, c.read_as.delimiter),
            (TextEncoding::Utf16, b'\t')
        );
        // Not UTF-8: read as Windows-1252, unless UTF-8 is asked for.
        let c = parse_csv(b"id,t\n1,\xff\n", Path::new("u.csv"), "id").unwrap();
        assert_eq!(c.rows[0][1], "ÿ");
        assert_eq!(c.read_as.encoding, TextEncoding::Windows1252);
        let utf8 = TableFormat {
            encoding: Some(TextEncoding::Utf8),
            ..Default::default()
        };
        let e = parse_table(b"id,t\n1,a\n2,\xff\n", Path::new("u.csv"), "id", utf8)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("u.csv") && e.contains("line 3") && e.contains("not UTF-8"),
            "{e}"
        );
    }

    #[test]
    fn delimiters_and_encodings_as_spreadsheets_export_them() {
        let read = |bytes: &[u8]| parse_csv(bytes, Path::new("c.csv"), "id").unwrap();
        for (bytes, d) in [
            (&b"id;title;place\n1;A;Calvessa\n"[..], b';'),
            (&b"id\ttitle\tplace\n1\tA\tCalvessa\n"[..], b'\t'),
            (&b"id|title|place\n1|A|Calvessa\n"[..], b'|'),
            (&b"id,title,place\n1,A,Calvessa\n"[..], b','),
            // A delimiter inside quotes does not count.
            (&b"id,\"title; short\",place\n1,A,Calvessa\n"[..], b','),
        ] {
            let c = read(bytes);
            assert_eq!(
                c.read_as.delimiter,
                d,
                "{:?}",
                String::from_utf8_lossy(bytes)
            );
            assert_eq!(c.header.len(), 3);
            assert_eq!(c.rows[0][2], "Calvessa");
            assert!(c.read_as.found.0);
        }
        // Windows-1252: accents, the typographic quotes and dashes, the euro sign and the
        // ligatures that Latin-1 lacks (the code page's own table).
        let c =
            read(b"id;title;price\n1;\x93D\xfcsseldorfer \x8Cuvre\x94 \x96 Entw\xfcrfe;\x80 5\n");
        assert_eq!(c.read_as.encoding, TextEncoding::Windows1252);
        assert_eq!(c.rows[0][1], "“Düsseldorfer Œuvre” – Entwürfe");
        assert_eq!(c.rows[0][2], "€ 5");
        // As many semicolons as commas in the header: ambiguous, and said so.
        let e = parse_csv(b"id;a,b\n1;2,3\n", Path::new("c.csv"), "id")
            .unwrap_err()
            .to_string();
        assert!(e.contains("ambiguous") && e.contains("--delimiter"), "{e}");
        // Given, the delimiter wins; a header that then has one column holding another says so.
        let commas = TableFormat {
            delimiter: Some(b','),
            ..Default::default()
        };
        let e = parse_table(b"id;t\n1;a\n", Path::new("c.csv"), "id", commas)
            .unwrap_err()
            .to_string();
        assert!(e.contains("semicolons") && e.contains("--delimiter"), "{e}");
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
        let c = parse_csv(b"id;t\r\n1;a\r\n", Path::new("s.csv"), "id").unwrap();
        assert_eq!(
            (c.header.len(), c.read_as.delimiter_name()),
            (2, "semicolons")
        );
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

#[cfg(test)]
mod multi_valued_tests {
    use super::*;

    fn found(name: &str, v: &[&str]) -> Option<&'static str> {
        multi_separator(infer_kind(name, v), name, v)
    }

    #[test]
    fn keyword_lists_are_found_and_prose_and_single_values_are_not() {
        let kw = [
            "harbour; ship",
            "ship",
            "harbour; night; ship",
            "",
            "night",
            "portrait | study",
            "harbour",
            "ship; harbour",
        ];
        assert_eq!(found("keywords", &kw), Some(";"));
        let bars = ["a|b", "b|c", "a", "c|a", "b"];
        assert_eq!(found("classification", &bars), Some("|"));
        // The same lists under a name that says prose are prose.
        let grid: Vec<String> = ["ship", "night", "harbour"]
            .iter()
            .flat_map(|a| ["ship", "night", "harbour"].map(|b| format!("{a}; {b}")))
            .collect();
        let grid: Vec<&str> = grid.iter().map(String::as_str).collect();
        assert_eq!(found("subjects", &grid), Some(";"));
        assert_eq!(found("title", &grid), None);
        // Sentences that happen to hold a semicolon do not form a vocabulary.
        let notes = [
            "signed lower left; dated",
            "trimmed at the top; laid down",
            "foxing; small tear",
            "water stain; repaired",
        ];
        assert_eq!(found("condition", &notes), None);
        // Records written by position keep a vocabulary per position: not a list.
        let places: Vec<String> = (0..40)
            .map(|i| format!("Box {}; Folder {}", i % 4, i % 7))
            .collect();
        let places: Vec<&str> = places.iter().map(String::as_str).collect();
        assert_eq!(found("location", &places), None);
        // Three records in a hundred with a separator are strays, not a list (fewer than 5 %).
        let mut few: Vec<String> = (0..100).map(|i| format!("v{}", i % 5)).collect();
        for k in 0..3 {
            few[k * 30] = "v1; v2".into();
        }
        let few: Vec<&str> = few.iter().map(String::as_str).collect();
        assert_eq!(found("group", &few), None);
        // A date column is never a list, even of repeated years.
        let years = ["1540; 1550", "1550; 1540", "1540", "1550", "1540", "1550"];
        assert_eq!(
            multi_separator(FieldKind::Category, "period", &years),
            Some(";"),
            "as a category these would be a list"
        );
        assert_eq!(found("year", &years), None);
    }

    #[test]
    fn a_cell_with_many_parts_is_split_in_linear_time() {
        let long: String = (0..200_000).map(|i| format!("{};", i % 50_000)).collect();
        let parts = split_values(&long, ";");
        assert_eq!(parts.len(), 50_000);
        assert_eq!(parts[49_999], "49999");
    }

    #[test]
    fn values_are_split_counted_per_record_and_kept_as_written() {
        let v = ["ship; harbour", "harbour;harbour; n/a", "", "night ; ship"];
        let FieldData::Multi {
            first,
            offsets,
            codes,
            values,
            counts,
            written,
        } = multi_field_data(&v, ";")
        else {
            panic!("multi");
        };
        // Vocabulary by records holding each value (a repeat in one record counts once).
        assert_eq!(values, ["harbour", "ship", "night"]);
        assert_eq!(counts, [2, 2, 1]);
        assert_eq!(offsets, [0, 2, 3, 3, 5]);
        assert_eq!(codes, [1, 0, 0, 2, 1]);
        assert_eq!(first, [1, 0, u32::MAX, 2]);
        assert_eq!(written[1], "harbour;harbour; n/a");
    }
}
