//! Writing a corpus out: the catalogue rows as CSV, and an IIIF Presentation 3 Manifest.

use serde_json::{json, Value};
use vitrine_format::{FieldKind, Manifest, TextTable};

use crate::coding::{CodeColumn, Coded};
use crate::columns::{Column, FieldColumn};

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

/// How the cells of an exported CSV are written.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum CsvStyle {
    /// To be opened in a spreadsheet (the default). A cell that a spreadsheet would take for a
    /// formula — one that begins with `=`, `+`, `-`, `@`, a tab or a carriage return — gets a
    /// leading apostrophe, so that the spreadsheet shows it as the text it is and runs nothing
    /// (the rule of OWASP's "CSV Injection" page). A plain number in a number or date column
    /// (`-2.5`, `-500`) stays as it is: a spreadsheet reads it as that number.
    Spreadsheet,
    /// Every value exactly as catalogued, for scripts and other programs.
    Exact,
}

/// Whether a spreadsheet would read a cell that begins like `s` as a formula.
pub fn looks_like_formula(s: &str) -> bool {
    s.starts_with(['=', '+', '-', '@', '\t', '\r'])
}

/// A number written plainly: a sign, digits with at most one decimal point, an exponent
/// (`-2.5`, `+3`, `1e-4`); not `-2+3`, `inf` or `1,5`.
fn plain_number(s: &str) -> bool {
    let b = s.as_bytes();
    let mut i = usize::from(matches!(b.first(), Some(b'-' | b'+')));
    let digits = |i: &mut usize| {
        let from = *i;
        while *i < b.len() && b[*i].is_ascii_digit() {
            *i += 1;
        }
        *i - from
    };
    let mut n = digits(&mut i);
    if b.get(i) == Some(&b'.') {
        i += 1;
        n += digits(&mut i);
    }
    if n == 0 {
        return false;
    }
    if matches!(b.get(i), Some(b'e' | b'E')) {
        i += 1;
        if matches!(b.get(i), Some(b'-' | b'+')) {
            i += 1;
        }
        if digits(&mut i) == 0 {
            return false;
        }
    }
    i == b.len()
}

/// `s` as a cell of a CSV in `style` (before quoting); `numeric` says its column holds numbers
/// or years.
pub fn cell(s: &str, numeric: bool, style: CsvStyle) -> std::borrow::Cow<'_, str> {
    if style == CsvStyle::Spreadsheet && looks_like_formula(s) && !(numeric && plain_number(s)) {
        format!("'{s}").into()
    } else {
        s.into()
    }
}

/// A number for a CSV of figures: the shortest text that reads back to the same f64, with an
/// exponent below 1e-5 and from 1e16 on (`1.03e-70`, not seventy zeros), as R, pandas and
/// spreadsheets read it.
pub fn number(x: f64) -> String {
    let a = x.abs();
    if a != 0.0 && !(1e-5..1e16).contains(&a) {
        format!("{x:e}")
    } else {
        format!("{x}")
    }
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

/// The codes a CSV export carries: the columns and the codes they are read from.
pub type CodeCells<'a> = (&'a [CodeColumn], &'a Coded<'a>);

/// The catalogue rows of `items` (atlas order): the id column, then every field as the catalogue
/// wrote it, then the code columns when `codes` are given, one row per item, CRLF line ends
/// (RFC 4180), the cells written for `style`.
pub fn csv(
    m: &Manifest,
    ids: &TextTable,
    cols: &[FieldColumn],
    items: &[usize],
    style: CsvStyle,
    codes: Option<CodeCells>,
) -> String {
    let mut out = String::new();
    let id = id_column(m);
    let code_cols: &[CodeColumn] = codes.map_or(&[], |c| c.0);
    let head = std::iter::once(id.as_str())
        .chain(cols.iter().map(|c| c.field.name.as_str()))
        .chain(code_cols.iter().map(|c| c.header.as_str()));
    csv_row(
        &mut out,
        head.map(|h| cell(h, false, style))
            .collect::<Vec<_>>()
            .iter()
            .map(|c| c.as_ref()),
    );
    let numeric: Vec<bool> = cols
        .iter()
        .map(|c| matches!(c.field.kind, FieldKind::Number | FieldKind::Date))
        .chain(code_cols.iter().map(|c| c.numeric))
        .collect();
    for &i in items {
        let item = ids.get(i);
        let mut texts: Vec<String> = cols.iter().map(|c| c.text(i)).collect();
        if let Some((cc, coded)) = codes {
            texts.extend(cc.iter().map(|c| c.cell(coded, item)));
        }
        let cells = std::iter::once(cell(item, false, style))
            .chain(
                texts
                    .iter()
                    .zip(&numeric)
                    .map(|(t, &num)| cell(t, num, style)),
            )
            .collect::<Vec<_>>();
        csv_row(&mut out, cells.iter().map(|c| c.as_ref()));
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

/// A language map with no language holding `s`, for a label (plain text by the specification).
fn lang_none(s: &str) -> Value {
    json!({ "none": [s] })
}

/// A language map with no language holding `s` as plain text, for a property an IIIF client may
/// read as HTML (`summary`, metadata values): see [`iiif_text`].
fn lang_text(s: &str) -> Value {
    json!({ "none": [iiif_text(s)] })
}

/// Plain text as an IIIF Presentation 3 property value that may hold HTML. The specification
/// ("HTML Markup in Property Values", section 4.4 — rule stated from memory) lets `summary`,
/// metadata values and the required statement's value hold HTML, and has clients take such a
/// value whose first character is `<` and last is `>` as HTML (labels are always plain text); a catalogue value shaped so (`<script>…</script>`,
/// `<img src=x onerror=…>`, or innocent text such as `<untitled>`) would then be read as markup.
/// Such a value is written as HTML that shows the text: escaped and wrapped in a `<span>`, one of
/// the elements the specification lets clients keep. Other text stays as it is.
pub fn iiif_text(s: &str) -> String {
    let t = s.trim();
    if !(t.starts_with('<') && t.ends_with('>')) {
        return s.to_string();
    }
    let mut out = String::with_capacity(s.len() + 32);
    out.push_str("<span>");
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out.push_str("</span>");
    out
}

/// The fields an IIIF source gives (`vitrine build --iiif`) that export as IIIF properties rather
/// than as a homepage or an image link: the Image API service, its type and profile, the rights.
const IIIF_FIELDS: [&str; 3] = ["iiif_service", "iiif_image_service", "rights"];

/// An item's Image API service, rights and required statement, from the fields an IIIF source
/// gives.
struct IiifSource {
    /// The service's id and its reference as IIIF Presentation 3 writes it (section 3.4: an
    /// `ImageService3` with `id` and `type`; an `ImageService2` with `@id` and `@type`).
    service: Option<(String, Value)>,
    rights: Option<String>,
    required: Option<String>,
}

/// A Creative Commons licence or a RightsStatements.org statement address.
fn is_rights_uri(s: &str) -> bool {
    let l = s.to_ascii_lowercase();
    let rest = l
        .strip_prefix("http://")
        .or_else(|| l.strip_prefix("https://"))
        .unwrap_or("");
    rest.starts_with("creativecommons.org/") || rest.starts_with("rightsstatements.org/")
}

fn iiif_source(cols: &[FieldColumn], i: usize) -> IiifSource {
    let field = |name: &str| {
        cols.iter()
            .find(|c| c.field.name == name)
            .map(|c| c.text(i))
            .filter(|v| !v.is_empty())
    };
    let service = field("iiif_service").filter(|s| is_web_link(s)).map(|sid| {
        // "TYPE PROFILE", the profile as the source wrote it (3: `level2`; 2.1: an address).
        let kind = field("iiif_image_service").unwrap_or_default();
        let (ty, profile) = kind.split_once(' ').unwrap_or((kind.as_str(), ""));
        let ty = if ty.starts_with("ImageService") {
            ty
        } else {
            "ImageService3"
        };
        let mut reference = if ty == "ImageService3" {
            json!({ "id": sid, "type": ty })
        } else {
            json!({ "@id": sid, "@type": ty })
        };
        if !profile.is_empty() {
            reference["profile"] = json!(profile);
        }
        (sid, reference)
    });
    IiifSource {
        service,
        rights: field("rights"),
        required: field("required_statement"),
    }
}

/// A Canvas's `items`: one annotation page painting `body` onto the whole Canvas.
fn painting(canvas_id: &str, body: Value) -> Value {
    json!([{
        "id": format!("{canvas_id}/page"),
        "type": "AnnotationPage",
        "items": [{
            "id": format!("{canvas_id}/page/image"),
            "type": "Annotation",
            "motivation": "painting",
            "body": body,
            "target": canvas_id,
        }],
    }])
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
            let mut metadata = vec![json!({ "label": lang_none(&id_column(m)), "value": lang_text(id) })];
            let mut image = None;
            let mut homepage = None;
            let source = iiif_source(cols, i);
            for c in cols {
                let v = c.text(i);
                if v.is_empty() {
                    continue;
                }
                metadata.push(json!({ "label": lang_none(&c.field.name), "value": lang_text(&v) }));
                if IIIF_FIELDS.contains(&c.field.name.as_str()) {
                    continue;
                }
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
            // Presentation 3 takes as `rights` a Creative Commons licence or a RightsStatements.org
            // statement (section 3.3); any other rights link stays in the metadata only.
            if let Some(rights) = source.rights.filter(|r| is_rights_uri(r)) {
                canvas["rights"] = json!(rights);
            }
            if let Some(statement) = &source.required {
                let (label, value) = statement
                    .split_once(": ")
                    .unwrap_or(("Attribution", statement.as_str()));
                canvas["requiredStatement"] =
                    json!({ "label": lang_none(label), "value": lang_text(value) });
            }
            if let Some((sid, service)) = &source.service {
                // The whole image through its service, which viewers use to deep-zoom.
                let full = if service["type"] == "ImageService3" || service["@type"] == "ImageService3" {
                    "max"
                } else {
                    "full"
                };
                canvas["items"] = painting(
                    &canvas_id,
                    json!({
                        "id": format!("{sid}/full/{full}/0/default.jpg"),
                        "type": "Image",
                        "format": "image/jpeg",
                        "width": w,
                        "height": h,
                        "service": [service],
                    }),
                );
                // A fitted size is for level 2 services only; others are left to the viewer,
                // which asks the service itself.
                let profile = service["profile"].as_str().unwrap_or("");
                if profile.trim_end_matches(".json").ends_with("level2") {
                    canvas["thumbnail"] = json!([{
                        "id": format!("{sid}/full/!400,400/0/default.jpg"),
                        "type": "Image",
                        "format": "image/jpeg",
                        "service": [service],
                    }]);
                }
            } else if let Some(url) = image {
                let format = image_format(&url);
                canvas["items"] = painting(
                    &canvas_id,
                    json!({ "id": url, "type": "Image", "format": format, "width": w, "height": h }),
                );
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
        "summary": lang_text(o.summary),
        "metadata": [
            { "label": lang_none("atlas"), "value": lang_text(&m.title) },
            { "label": lang_none("items"), "value": lang_text(&items.len().to_string()) },
        ],
        "items": canvases,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn figures_read_back_exactly_and_tiny_ones_take_an_exponent() {
        for x in [
            0.0,
            1.0,
            -2.5,
            0.1 + 0.2,
            1.0321489252946542e-70,
            6.02e23,
            1e-5,
            9.9e-6,
        ] {
            assert_eq!(number(x).parse::<f64>().unwrap(), x, "{}", number(x));
        }
        assert_eq!(number(1.5e-70), "1.5e-70");
        assert_eq!(number(0.25), "0.25");
        assert_eq!(number(12.0), "12");
    }

    #[test]
    fn csv_fields_are_quoted_only_when_they_must_be() {
        assert_eq!(csv_field("plain"), "plain");
        assert_eq!(csv_field("a, b"), "\"a, b\"");
        assert_eq!(csv_field("say \"hi\""), "\"say \"\"hi\"\"\"");
        assert_eq!(csv_field("two\nlines"), "\"two\nlines\"");
        assert_eq!(csv_field("Ćwirnak"), "Ćwirnak");
    }

    /// The rule of OWASP's "CSV Injection" page (prefix an apostrophe to a cell that begins with
    /// =, +, -, @, tab or carriage return), applied to the attack strings it and the issue name.
    #[test]
    fn cells_a_spreadsheet_would_run_get_an_apostrophe() {
        let sheet = |s: &str, num: bool| cell(s, num, CsvStyle::Spreadsheet).into_owned();
        for bad in [
            "=HYPERLINK(\"http://evil.example\",\"x\")",
            "@SUM(1+1)*cmd|' /C calc'!A0",
            "+cmd|' /C calc'!A0",
            "-2+3",
            "\t=1+1",
            "\r=1+1",
            "=1",
        ] {
            assert_eq!(sheet(bad, false), format!("'{bad}"), "text column: {bad:?}");
            assert_eq!(
                sheet(bad, true),
                format!("'{bad}"),
                "number column: {bad:?}"
            );
        }
        // Plain numbers in number and date columns stay numbers; in text columns they do not.
        for num in ["-2.5", "-500", "+3", "-1e-4", "-.5", "-3."] {
            assert_eq!(sheet(num, true), num);
            assert_eq!(sheet(num, false), format!("'{num}"));
        }
        for not_plain in ["-inf", "-NaN", "-2,5", "-1e", "-", "-.", "-1-2", "-1 "] {
            assert_eq!(
                sheet(not_plain, true),
                format!("'{not_plain}"),
                "{not_plain:?}"
            );
        }
        // Harmless beginnings and the exact style are untouched.
        for ok in ["a=b", " =1", "'=1", "Ćwirnak", "", "1-2"] {
            assert_eq!(sheet(ok, false), ok);
        }
        assert_eq!(cell("=1+1", false, CsvStyle::Exact), "=1+1");
    }

    #[test]
    fn text_an_iiif_client_would_take_for_html_is_written_as_escaped_html() {
        assert_eq!(iiif_text("Harbour at dusk"), "Harbour at dusk");
        assert_eq!(iiif_text("a <b> in the middle"), "a <b> in the middle");
        assert_eq!(
            iiif_text("<img src=x onerror=alert(1)>"),
            "<span>&lt;img src=x onerror=alert(1)&gt;</span>"
        );
        assert_eq!(
            iiif_text(" <script>alert('x')</script> "),
            "<span> &lt;script&gt;alert(&#39;x&#39;)&lt;/script&gt; </span>"
        );
        assert_eq!(
            iiif_text("<untitled & \"lost\">"),
            "<span>&lt;untitled &amp; &quot;lost&quot;&gt;</span>"
        );
        // Values that may hold HTML go through it; labels, plain text by the specification, do not.
        assert_eq!(
            lang_text("<b>x</b>"),
            json!({ "none": ["<span>&lt;b&gt;x&lt;/b&gt;</span>"] })
        );
        assert_eq!(lang_none("<untitled>"), json!({ "none": ["<untitled>"] }));
    }

    #[test]
    fn image_links_are_told_from_record_links() {
        assert!(is_image_link("https://img.example/a/b.JPG?size=full"));
        assert!(!is_image_link("https://archive.example/record/12"));
        assert!(!is_image_link("ftp://img.example/a.jpg"));
        assert_eq!(image_format("https://x.example/a.tif"), "image/tiff");
    }
}
