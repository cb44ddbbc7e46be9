//! The catalogue columns of an atlas, decoded: what filters read and exports write.

use vitrine_format::{
    ArrayRef, AtlasError, AtlasFiles, Field, FieldKind, Manifest, TextTable, MAX_YEAR,
};

pub enum Column {
    Category(Vec<u32>),
    Number(Vec<f32>),
    /// Start and end years, `i32::MIN` where undated.
    Date {
        start: Vec<i32>,
        end: Vec<i32>,
    },
    Text(TextTable),
}

/// Every item's values of a multi-valued category field.
pub struct Multi {
    /// Items + 1 offsets into `codes`.
    pub offsets: Vec<u32>,
    pub codes: Vec<u32>,
}

pub struct FieldColumn {
    pub field: Field,
    pub column: Column,
    /// A multi-valued category field's values per item (the column holds the first of each).
    pub multi: Option<Multi>,
    /// Date and number fields: each value as the catalogue wrote it.
    pub written: Option<TextTable>,
    /// Every item's text folded for search, made by the first search that reads the field and
    /// kept: a million titles are folded once, not at every keystroke.
    pub folded: std::sync::OnceLock<FoldedText>,
}

/// Texts folded for search (see [`crate::filter::fold`]), one per item, in one buffer.
#[derive(Default)]
pub struct FoldedText {
    text: String,
    ends: Vec<u32>,
}

impl FoldedText {
    pub fn new(texts: impl Iterator<Item = String>) -> FoldedText {
        let mut f = FoldedText::default();
        for t in texts {
            f.text.push_str(&t);
            f.ends.push(f.text.len() as u32);
        }
        f
    }

    pub fn get(&self, i: usize) -> &str {
        let a = if i == 0 { 0 } else { self.ends[i - 1] as usize };
        &self.text[a..self.ends[i] as usize]
    }

    pub fn len(&self) -> usize {
        self.ends.len()
    }

    pub fn is_empty(&self) -> bool {
        self.ends.is_empty()
    }
}

impl FieldColumn {
    /// Item `i`'s category codes: every value of a multi-valued field, else its one value (none
    /// when empty, or when the field is not a category).
    pub fn codes_of(&self, i: usize) -> &[u32] {
        if let Some(m) = &self.multi {
            return &m.codes[m.offsets[i] as usize..m.offsets[i + 1] as usize];
        }
        match &self.column {
            Column::Category(c) if c[i] != u32::MAX => std::slice::from_ref(&c[i]),
            _ => &[],
        }
    }

    /// Item `i`'s value as text: as the catalogue wrote it where that is kept, else the value
    /// ("" when empty).
    pub fn text(&self, i: usize) -> String {
        if let Some(w) = &self.written {
            return w.get(i).to_string();
        }
        match &self.column {
            Column::Category(c) => match c[i] {
                u32::MAX => String::new(),
                code => self
                    .field
                    .values
                    .get(code as usize)
                    .cloned()
                    .unwrap_or_default(),
            },
            Column::Number(v) if v[i].is_nan() => String::new(),
            Column::Number(v) => format!("{}", v[i]),
            Column::Date { start, .. } if start[i] == i32::MIN => String::new(),
            Column::Date { start, end } if start[i] == end[i] => format!("{}", start[i]),
            Column::Date { start, end } => format!("{}-{}", start[i], end[i]),
            Column::Text(t) => t.get(i).to_string(),
        }
    }
}

/// Datings no build writes — a year beyond ±[`MAX_YEAR`], an end before its start, one end
/// missing — are taken as undated, so that a damaged or crafted atlas cannot make a reader size
/// anything by its span of years.
fn undate_the_impossible(start: &mut [i32], end: &mut [i32]) {
    let year = |y: i32| (-MAX_YEAR..=MAX_YEAR).contains(&y);
    for (s, e) in start.iter_mut().zip(end.iter_mut()) {
        if *s == i32::MIN && *e == i32::MIN {
            continue;
        }
        if !year(*s) || !year(*e) || *e < *s {
            (*s, *e) = (i32::MIN, i32::MIN);
        }
    }
}

/// Decodes every catalogue field of `m` from its array files.
pub fn decode_fields(m: &Manifest, files: &AtlasFiles) -> Result<Vec<FieldColumn>, AtlasError> {
    m.fields.iter().map(|f| decode_field(m, f, files)).collect()
}

/// The arrays field `f` is stored in: its column (and end-year or byte column), its values as
/// written, its values per item.
pub fn field_arrays(f: &Field) -> Vec<&ArrayRef> {
    let mut v = vec![&f.column];
    v.extend(&f.column2);
    v.extend(f.written.iter().flatten());
    v.extend(f.multi.iter().flatten());
    v
}

/// One field's column, decoded and checked, from its [`field_arrays`] in `files`.
pub fn decode_field(
    m: &Manifest,
    f: &Field,
    files: &AtlasFiles,
) -> Result<FieldColumn, AtlasError> {
    let text = |a: &ArrayRef, b: &ArrayRef| files.text(a, b, m.item_count);
    let missing = |f: &Field, what: &str| {
        AtlasError::Inconsistent(format!("field {} has no {what} column", f.name))
    };
    {
        let column = match f.kind {
            FieldKind::Category => Column::Category(files.array(&f.column)?),
            FieldKind::Number => Column::Number(files.array(&f.column)?),
            FieldKind::Date => {
                let end = f.column2.as_ref().ok_or_else(|| missing(f, "end-year"))?;
                let (mut start, mut end): (Vec<i32>, Vec<i32>) =
                    (files.array(&f.column)?, files.array(end)?);
                undate_the_impossible(&mut start, &mut end);
                Column::Date { start, end }
            }
            FieldKind::Text | FieldKind::Link => {
                let bytes = f.column2.as_ref().ok_or_else(|| missing(f, "byte"))?;
                Column::Text(text(&f.column, bytes)?)
            }
        };
        let written = match &f.written {
            Some([a, b]) => Some(text(a, b)?),
            None => None,
        };
        let multi = match &f.multi {
            Some([a, b]) => {
                let m = Multi {
                    offsets: files.array(a)?,
                    codes: files.array(b)?,
                };
                // Offsets that climb from 0 to the codes' count, codes within the vocabulary:
                // what a build writes; anything else is a damaged atlas, not an index to follow.
                let climbs = m.offsets.first() == Some(&0)
                    && m.offsets.windows(2).all(|w| w[0] <= w[1])
                    && m.offsets.last().map(|&l| l as usize) == Some(m.codes.len());
                if !climbs || m.codes.iter().any(|&c| c as usize >= f.values.len()) {
                    return Err(AtlasError::Inconsistent(format!(
                        "field {}: its values per item do not fit its vocabulary",
                        f.name
                    )));
                }
                Some(m)
            }
            None => None,
        };
        Ok(FieldColumn {
            field: f.clone(),
            column,
            multi,
            written,
            folded: Default::default(),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn datings_no_build_writes_are_read_as_undated() {
        let m = i32::MIN;
        let mut start = vec![1500, -9999, 10_000, -2_000_000_000, 1600, m, 1500, m];
        let mut end = vec![1599, 9999, 10_000, 1500, 1599 - 200, m, m, 1500];
        undate_the_impossible(&mut start, &mut end);
        assert_eq!(start, [1500, -9999, m, m, m, m, m, m]);
        assert_eq!(end, [1599, 9999, m, m, m, m, m, m]);
    }
}
