//! Writing a corpus out: the catalogue rows as CSV, and an IIIF Presentation 3 Manifest.

use serde_json::{json, Value};
use vitrine_format::{FieldKind, Manifest, TextTable};

use crate::columns::{Column, FieldColumn};

/// A CSV field (RFC 4180): quoted when it holds a comma, a quote, a line break or outer spaces.
/// One CSV field (RFC 4180): quoted when it holds a comma, a quote, a line break or outer spaces.
/// The one quoting rule of every CSV the product writes.
pub fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) || s.starts_with(' ') || s.ends_with(' ') {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

/// Appends one CSV record (RFC 4180: fields quoted by [`csv_field`], CRLF at the end).
pub fn csv_row<'a>(out: &mut String, fields: impl Iterator<Item = &'a str>) {
    for (k, f) in fields.enumerate() {
        if k > 0 {
            out.push(',');
        }
        out.push_str(&csv_field(f));
    }
    out.push_str("\r\n");
}

/// The name of the catalogue's id column, as the build recorded it ("id" when it did not).
pub fn id_column(m: &Manifest) -> String {
    m.provenance
        .parameters
        .get("id_column")
        .and_then(|v| v.as_str())
        .unwrap_or("id")
        .to_string()
}

/// The catalogue rows of `items` (atlas order): the id column, then every field as the catalogue
/// wrote it, one row per item, CRLF line ends (RFC 4180).
pub fn csv(m: &Manifest, ids: &TextTable, cols: &[FieldColumn], items: &[usize]) -> String {
    let mut out = String::new();
    let id = id_column(m);
    csv_row(
        &mut out,
        std::iter::once(id.as_str()).chain(cols.iter().map(|c| c.field.name.as_str())),
    );
    for &i in items {
        let texts: Vec<String> = cols.iter().map(|c| c.text(i)).collect();
        csv_row(
            &mut out,
            std::iter::once(ids.get(i)).chain(texts.iter().map(String::as_str)),
        );
    }
    out
}

/// The build's record as a corpus file keeps it: tool, version, parameters and seed.
pub fn build_record(m: &Manifest) -> Value {
    json!({
        "tool": m.provenance.tool,
        "tool_version": m.provenance.tool_version,
        "parameters": m.provenance.parameters,
        "seed": m.provenance.seed,
    })
}

const IMAGE_ENDINGS: [&str; 8] = [
    ".jpg", ".jpeg", ".png", ".tif", ".tiff", ".webp", ".jp2", ".gif",
];

fn is_web_link(s: &str) -> bool {
    s.starts_with("https://") || s.starts_with("http://")
}

fn image_format(url: &str) -> &'static str {
    let u = url.to_ascii_lowercase();
    let u = u.split(['?', '#']).next().unwrap_or("");
    if u.ends_with(".png") {
        "image/png"
    } else if u.ends_with(".tif") || u.ends_with(".tiff") {
        "image/tiff"
    } else if u.ends_with(".webp") {
        "image/webp"
    } else if u.ends_with(".jp2") {
        "image/jp2"
    } else if u.ends_with(".gif") {
        "image/gif"
    } else {
        "image/jpeg"
    }
}

fn is_image_link(s: &str) -> bool {
    let u = s.to_ascii_lowercase();
    let u = u.split(['?', '#']).next().unwrap_or("");
    is_web_link(s) && IMAGE_ENDINGS.iter().any(|e| u.ends_with(e))
}

fn lang_none(s: &str) -> Value {
    json!({ "none": [s] })
}

/// What an IIIF export needs besides the corpus.
pub struct IiifOptions<'a> {
    /// Where the Manifest will be published (ends with "/"): the ids of the Manifest, its Canvases
    /// and their annotations are made under it.
    pub base: &'a str,
    /// Original image sizes per item (width, height; 0, 0 unknown), from the atlas.
    pub image_sizes: Option<&'a [u32]>,
    /// Thumbnail extents per item in the largest cell (width, height), for the aspect of items
    /// without a known image size.
    pub extents: &'a [(u16, u16)],
    /// A line saying how the corpus was chosen (the Manifest's summary).
    pub summary: &'a str,
}

/// An IIIF Presentation 3 Manifest with one Canvas per item: label, the catalogue fields as
/// metadata, the full image as its painting annotation when the catalogue links one (an http(s)
/// link ending in an image type), the record page as its homepage when it links one.
pub fn iiif_manifest(
    m: &Manifest,
    ids: &TextTable,
    cols: &[FieldColumn],
    items: &[usize],
    o: &IiifOptions,
) -> Value {
    let label_col = cols.iter().find(|c| {
        matches!(c.column, Column::Text(_))
            && c.field.kind == FieldKind::Text
            && c.field.name.to_lowercase().contains("title")
    });
    let canvases: Vec<Value> = items
        .iter()
        .enumerate()
        .map(|(k, &i)| {
            let id = ids.get(i);
            let canvas_id = format!("{}canvas/{}", o.base, k + 1);
            let label = label_col
                .map(|c| c.text(i))
                .filter(|t| !t.is_empty())
                .unwrap_or_else(|| id.to_string());
            let (mut w, mut h) = o
                .image_sizes
                .map(|s| (s[2 * i], s[2 * i + 1]))
                .unwrap_or((0, 0));
            if w == 0 || h == 0 {
                let (ew, eh) = o.extents.get(i).copied().unwrap_or((0, 0));
                (w, h) = if ew > 0 && eh > 0 {
                    (ew as u32, eh as u32)
                } else {
                    (1000, 1000)
                };
            }
            let mut metadata = vec![json!({ "label": lang_none(&id_column(m)), "value": lang_none(id) })];
            let mut image = None;
            let mut homepage = None;
            for c in cols {
                let v = c.text(i);
                if v.is_empty() {
                    continue;
                }
                metadata.push(json!({ "label": lang_none(&c.field.name), "value": lang_none(&v) }));
                if c.field.kind == FieldKind::Link {
                    if is_image_link(&v) && image.is_none() {
                        image = Some(v);
                    } else if is_web_link(&v) && homepage.is_none() {
                        homepage = Some(v);
                    }
                }
            }
            let mut canvas = json!({
                "id": canvas_id,
                "type": "Canvas",
                "label": lang_none(&label),
                "width": w,
                "height": h,
                "metadata": metadata,
            });
            if let Some(url) = image {
                let format = image_format(&url);
                canvas["items"] = json!([{
                    "id": format!("{canvas_id}/page"),
                    "type": "AnnotationPage",
                    "items": [{
                        "id": format!("{canvas_id}/page/image"),
                        "type": "Annotation",
                        "motivation": "painting",
                        "body": { "id": url, "type": "Image", "format": format, "width": w, "height": h },
                        "target": canvas_id,
                    }],
                }]);
                canvas["thumbnail"] = json!([{ "id": url, "type": "Image", "format": format }]);
            }
            if let Some(url) = homepage {
                canvas["homepage"] = json!([{
                    "id": url,
                    "type": "Text",
                    "label": lang_none(&label),
                    "format": "text/html",
                }]);
            }
            canvas
        })
        .collect();
    json!({
        "@context": "http://iiif.io/api/presentation/3/context.json",
        "id": format!("{}manifest.json", o.base),
        "type": "Manifest",
        "label": lang_none(&format!("{} — corpus of {} items", m.title, items.len())),
        "summary": lang_none(o.summary),
        "metadata": [
            { "label": lang_none("atlas"), "value": lang_none(&m.title) },
            { "label": lang_none("items"), "value": lang_none(&items.len().to_string()) },
        ],
        "items": canvases,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn csv_fields_are_quoted_only_when_they_must_be() {
        assert_eq!(csv_field("plain"), "plain");
        assert_eq!(csv_field("a, b"), "\"a, b\"");
        assert_eq!(csv_field("say \"hi\""), "\"say \"\"hi\"\"\"");
        assert_eq!(csv_field("two\nlines"), "\"two\nlines\"");
        assert_eq!(csv_field("Ćwirnak"), "Ćwirnak");
    }

    #[test]
    fn image_links_are_told_from_record_links() {
        assert!(is_image_link("https://img.example/a/b.JPG?size=full"));
        assert!(!is_image_link("https://archive.example/record/12"));
        assert!(!is_image_link("ftp://img.example/a.jpg"));
        assert_eq!(image_format("https://x.example/a.tif"), "image/tiff");
    }
}
