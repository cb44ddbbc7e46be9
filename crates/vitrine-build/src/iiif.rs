//! IIIF as a source (`vitrine build --iiif URL-or-file`): a Presentation 3 or 2.1 Manifest or
//! Collection becomes the catalogue (one record per Canvas) and its pictures are fetched through
//! the Image API at the size the thumbnails need, never the full master.
//!
//! - Collections are followed (nested ones too, each document once); a Manifest that cannot be
//!   fetched or read is named in the build report and its Canvases are left out.
//! - Each Canvas gives the fields `title` (`label`), `summary` (`summary`, 2.1 `description`),
//!   `date` (`navDate`), `rights` (`rights`, 2.1 `license`), `required_statement`
//!   (`requiredStatement` "label: value", 2.1 `attribution`), `manifest` (its Manifest's label) and
//!   one field per `metadata` label; a Canvas without a property takes its Manifest's. Language maps
//!   give their English values, else those without a language, else the first; HTML is reduced
//!   to its text. `iiif_service` and `iiif_image_service` (the service's type and profile) keep
//!   the Image API service, so that exported Canvases carry it and viewers deep-zoom.
//! - Pictures: `{service}/full/!L,L/0/default.jpg` with L the largest thumbnail level (Image API
//!   3.0 and 2.1, section 4.2 "size"); when the service refuses that size (level 0 serves only the
//!   sizes it lists), the smallest listed size of at least L from its `info.json`; then the Canvas's
//!   `thumbnail`. A Canvas with no service gives its `thumbnail`, else the image itself (the only
//!   picture there is; the build report counts them). The image a service belongs to, usually the
//!   full master, is never asked for.
//! - Politely: at most `concurrency` requests at once, retried with a growing pause after a
//!   failure of the network or a 429/5xx answer (`Retry-After` honoured, up to a minute), a
//!   user agent that names the program. Every picture is kept in a local cache under a name made
//!   from its address, written whole or not at all, so that an interrupted build resumes where it
//!   stopped and a rebuild fetches nothing it has.

use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;
use std::time::Duration;

use anyhow::{bail, Context, Result};
use serde_json::Value;

use crate::catalogue::Catalogue;
use crate::progress::Progress;

/// How IIIF resources are fetched.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct IiifOptions {
    /// The Manifest or Collection: an http(s) address or a local file.
    pub source: String,
    /// Where fetched pictures are kept between builds.
    pub cache: PathBuf,
    /// Requests at once (at least 1).
    pub concurrency: usize,
    /// Attempts per request (at least 1).
    pub attempts: u32,
    /// The long side of the pictures asked for (the largest thumbnail level).
    pub long_side: u32,
}

/// The IIIF source made ready for the build: a catalogue and each record's picture.
pub struct Source {
    pub catalogue: Catalogue,
    /// The folder the pictures are fetched into.
    pub folder: PathBuf,
    /// Each catalogue row's picture, or why there is none.
    pub paths: Vec<std::result::Result<PathBuf, String>>,
    /// Each catalogue row's Canvas size (width, height; 0, 0 when the Canvas gives none).
    pub sizes: Vec<[u32; 2]>,
    /// The top document: its address, length and SHA-256, for the provenance.
    pub document: (String, u64, String),
    /// What the build report should say (documents that could not be read, pictures fetched whole).
    pub notes: Vec<String>,
}

/// Fixed fields, before the `metadata` labels.
const FIXED: [&str; 9] = [
    "canvas",
    "title",
    "summary",
    "date",
    "rights",
    "required_statement",
    "manifest",
    "iiif_service",
    "iiif_image_service",
];

/// One Canvas, as read.
#[derive(Debug, Default, Clone)]
struct Canvas {
    id: String,
    fields: Vec<String>,
    metadata: Vec<(String, String)>,
    size: [u32; 2],
    /// Image API service: (id, type, profile, major version).
    service: Option<(String, String, String, u8)>,
    /// The Canvas's thumbnail: asked for when the service cannot give a picture.
    thumbnail: Option<String>,
    /// The image itself (often the full master): asked for only when there is no service.
    body: Option<String>,
}

/// Reads the source, fetches every picture, and gives the catalogue.
pub fn read_source(o: &IiifOptions, progress: &dyn Progress) -> Result<Source> {
    let client = Client::new(o);
    let (bytes, top) = if is_web(&o.source) {
        let b = client
            .get(&o.source)
            .map_err(|e| anyhow::anyhow!("--iiif {}: {e}", o.source))?;
        (b, o.source.clone())
    } else {
        let b = std::fs::read(&o.source).with_context(|| format!("--iiif {}", o.source))?;
        (b, o.source.clone())
    };
    // A local file is named by its file name only (the atlas is for publishing; a local folder
    // layout is nobody's business).
    let shown = if is_web(&top) {
        top.clone()
    } else {
        Path::new(&top)
            .file_name()
            .map(|f| f.to_string_lossy().to_string())
            .unwrap_or_else(|| top.clone())
    };
    let document = (
        shown,
        bytes.len() as u64,
        vitrine_format::sha256_hex(&bytes),
    );
    let doc: Value = serde_json::from_slice(&bytes)
        .map_err(|e| anyhow::anyhow!("--iiif {top}: not JSON ({e})"))?;
    let mut notes = Vec::new();
    let mut canvases = Vec::new();
    let mut seen = std::collections::HashSet::new();
    seen.insert(top.clone());
    // Breadth first: each level's documents fetched side by side.
    let mut level: Vec<(String, Value)> = vec![(top.clone(), doc)];
    let mut depth = 0;
    while !level.is_empty() {
        let mut wanted = Vec::new();
        for (url, doc) in level {
            match kind(&doc) {
                "Collection" => {
                    for r in members(&doc) {
                        if let Some(id) = id_of(&r) {
                            if kind(&r) == "Manifest" && has_canvases(&r) {
                                canvases.extend(manifest_canvases(&r));
                            } else if seen.insert(id.to_string()) {
                                wanted.push(id.to_string());
                            }
                        }
                    }
                }
                "Manifest" => canvases.extend(manifest_canvases(&doc)),
                other => {
                    let what = if other.is_empty() { "no type" } else { other };
                    if url == top {
                        bail!("--iiif {url}: not an IIIF Manifest or Collection ({what})");
                    }
                    notes.push(format!(
                        "IIIF: {url} is not a Manifest or Collection ({what}): left out"
                    ));
                }
            }
        }
        depth += 1;
        if depth > 8 && !wanted.is_empty() {
            notes.push(format!(
                "IIIF: Collections nested more than 8 deep: {} documents below were not read",
                wanted.len()
            ));
            break;
        }
        let bar = progress.bar("IIIF documents", wanted.len() as u64);
        let got = client.fetch_all(&wanted, |url| client.get(url), &*bar);
        drop(bar);
        level = Vec::new();
        for (url, r) in wanted.into_iter().zip(got) {
            match r.and_then(|b| {
                serde_json::from_slice::<Value>(&b).map_err(|e| format!("not JSON ({e})"))
            }) {
                Ok(doc) => level.push((url, doc)),
                Err(why) => notes.push(format!("IIIF: {url}: {why}: its Canvases are left out")),
            }
        }
    }
    if canvases.is_empty() {
        bail!("--iiif {top}: no Canvas with a picture was found");
    }
    // The same Canvas in two Manifests is one item.
    let mut ids = std::collections::HashSet::new();
    canvases.retain(|c| ids.insert(c.id.clone()));

    // The pictures.
    let folder = o.cache.join("pictures");
    std::fs::create_dir_all(&folder)
        .with_context(|| format!("creating the IIIF cache {}", folder.display()))?;
    let whole = canvases.iter().filter(|c| c.service.is_none()).count();
    if whole > 0 {
        notes.push(format!(
            "IIIF: {whole} Canvas(es) have no Image API service: their thumbnail or whole image was fetched"
        ));
    }
    let bar = progress.bar("IIIF pictures", canvases.len() as u64);
    let index: Vec<usize> = (0..canvases.len()).collect();
    let paths = client.fetch_all(&index, |&i| client.picture(&canvases[i], &folder), &*bar);
    drop(bar);
    let fetched = paths.iter().filter(|p| p.is_ok()).count();
    progress.note(&format!(
        "IIIF: {} Canvases from {top}; {fetched} pictures at hand ({} fetched now, the rest from {})",
        canvases.len(),
        client.fetched.load(Ordering::Relaxed),
        folder.display()
    ));

    // The catalogue.
    let mut header: Vec<String> = FIXED.iter().map(|s| s.to_string()).collect();
    for c in &canvases {
        for (label, _) in &c.metadata {
            let name = if FIXED.iter().any(|f| f.eq_ignore_ascii_case(label)) {
                format!("{label} (metadata)")
            } else {
                label.clone()
            };
            if !header.contains(&name) {
                header.push(name);
            }
        }
    }
    let rows: Vec<Vec<String>> = canvases
        .iter()
        .map(|c| {
            let mut row = vec![String::new(); header.len()];
            row[0] = c.id.clone();
            row[1..FIXED.len()].clone_from_slice(&c.fields);
            for (label, value) in &c.metadata {
                let name = if FIXED.iter().any(|f| f.eq_ignore_ascii_case(label)) {
                    format!("{label} (metadata)")
                } else {
                    label.clone()
                };
                let k = header
                    .iter()
                    .position(|h| *h == name)
                    .expect("in the header");
                if row[k].is_empty() {
                    row[k] = value.clone();
                }
            }
            row
        })
        .collect();
    let catalogue = Catalogue {
        file: top.clone(),
        read_as: crate::catalogue::ReadAs {
            delimiter: b',',
            encoding: crate::catalogue::TextEncoding::Utf8,
            found: (false, false),
            sheet: None,
        },
        header,
        id_column: 0,
        rows,
    };
    Ok(Source {
        catalogue,
        folder,
        paths,
        sizes: canvases.iter().map(|c| c.size).collect(),
        document,
        notes,
    })
}

fn is_web(s: &str) -> bool {
    let l = s.to_ascii_lowercase();
    l.starts_with("http://") || l.starts_with("https://")
}

/// `type` (3) or `@type` (2.1, "sc:Manifest"), without its prefix.
fn kind(v: &Value) -> &str {
    let t = v
        .get("type")
        .or_else(|| v.get("@type"))
        .and_then(Value::as_str)
        .unwrap_or("");
    t.rsplit(':').next().unwrap_or(t)
}

fn id_of(v: &Value) -> Option<&str> {
    match v {
        Value::String(s) => Some(s),
        _ => v.get("id").or_else(|| v.get("@id")).and_then(Value::as_str),
    }
}

/// A Collection's members: 3 `items`; 2.1 `collections`, `manifests` and `members`.
fn members(v: &Value) -> Vec<Value> {
    let mut out = Vec::new();
    for key in ["items", "collections", "manifests", "members"] {
        if let Some(a) = v.get(key).and_then(Value::as_array) {
            out.extend(a.iter().cloned());
        }
    }
    out
}

fn has_canvases(v: &Value) -> bool {
    v.get("items")
        .and_then(Value::as_array)
        .is_some_and(|a| !a.is_empty())
        || v.get("sequences").is_some()
}

/// Text of a property: a string, a language map (English, else no language, else the first
/// language), a 2.1 `{"@value", "@language"}` value or a list of either; values joined by "; ",
/// HTML reduced to its text.
fn text(v: Option<&Value>) -> String {
    let Some(v) = v else {
        return String::new();
    };
    let values: Vec<String> = match v {
        Value::String(s) => vec![s.clone()],
        Value::Array(a) => {
            // 2.1: a list of strings or of language-tagged values; take English ones if tagged.
            let tagged: Vec<&Value> = a
                .iter()
                .filter(|x| {
                    x.get("@language")
                        .and_then(Value::as_str)
                        .is_some_and(|l| l.starts_with("en"))
                })
                .collect();
            let pick: Vec<&Value> = if tagged.is_empty() {
                a.iter().collect()
            } else {
                tagged
            };
            pick.iter()
                .map(|x| text(Some(x)))
                .filter(|s| !s.is_empty())
                .collect()
        }
        Value::Object(m) => {
            if let Some(s) = m.get("@value") {
                vec![text(Some(s))]
            } else {
                let lang = ["en", "none"]
                    .iter()
                    .find_map(|l| m.get(*l))
                    .or_else(|| m.iter().find(|(k, _)| k.starts_with("en-")).map(|(_, v)| v))
                    .or_else(|| m.values().next());
                lang.map(|l| vec![text(Some(l))]).unwrap_or_default()
            }
        }
        Value::Number(n) => vec![n.to_string()],
        _ => vec![],
    };
    values
        .iter()
        .map(|s| strip_html(s))
        .filter(|s| !s.is_empty())
        .collect::<Vec<_>>()
        .join("; ")
}

/// The text of a value that may hold HTML (tags dropped, the common entities read, spaces folded).
fn strip_html(s: &str) -> String {
    let t = s.trim();
    let mut out = String::with_capacity(t.len());
    if t.starts_with('<') {
        let mut inside = false;
        for ch in t.chars() {
            match ch {
                '<' => {
                    inside = true;
                    out.push(' ');
                }
                '>' => inside = false,
                c if !inside => out.push(c),
                _ => {}
            }
        }
        out = out
            .replace("&amp;", "&")
            .replace("&lt;", "<")
            .replace("&gt;", ">")
            .replace("&quot;", "\"")
            .replace("&#39;", "'")
            .replace("&nbsp;", " ");
    } else {
        out.push_str(t);
    }
    out.split_whitespace().collect::<Vec<_>>().join(" ")
}

/// `navDate` (xsd:dateTime) as the date field: the date part, which the catalogue's date rule
/// reads (`1923-04-01T00:00:00Z` gives 1923-04-01).
fn nav_date(v: Option<&Value>) -> String {
    let s = text(v);
    s.split('T').next().unwrap_or("").to_string()
}

/// `requiredStatement` (3: `{label, value}`) or `attribution` (2.1) as one line.
fn required(v: &Value) -> String {
    if let Some(r) = v.get("requiredStatement") {
        let (l, t) = (text(r.get("label")), text(r.get("value")));
        return match (l.is_empty(), t.is_empty()) {
            (false, false) => format!("{l}: {t}"),
            (_, false) => t,
            _ => String::new(),
        };
    }
    text(v.get("attribution"))
}

fn metadata(v: &Value) -> Vec<(String, String)> {
    v.get("metadata")
        .and_then(Value::as_array)
        .map(|a| {
            a.iter()
                .map(|m| (text(m.get("label")), text(m.get("value"))))
                .filter(|(l, v)| !l.is_empty() && !v.is_empty())
                .collect()
        })
        .unwrap_or_default()
}

fn first_service(v: Option<&Value>) -> Option<(String, String, String, u8)> {
    let v = v?;
    let list: Vec<&Value> = match v {
        Value::Array(a) => a.iter().collect(),
        other => vec![other],
    };
    list.into_iter().find_map(|s| {
        let id = id_of(s)?.trim_end_matches('/').to_string();
        let ty = s
            .get("type")
            .or_else(|| s.get("@type"))
            .and_then(Value::as_str)
            .unwrap_or("");
        let ctx = s.get("@context").and_then(Value::as_str).unwrap_or("");
        let profile = match s.get("profile") {
            Some(Value::String(p)) => p.clone(),
            Some(Value::Array(a)) => a.iter().find_map(Value::as_str).unwrap_or("").to_string(),
            _ => String::new(),
        };
        let version = if ty == "ImageService3" || ctx.contains("/image/3") {
            3
        } else if ty.starts_with("ImageService")
            || ctx.contains("/image/")
            || profile.contains("/image/")
        {
            2
        } else {
            return None;
        };
        let ty = if ty.starts_with("ImageService") {
            ty.to_string()
        } else {
            format!("ImageService{version}")
        };
        // 2.1 profiles are addresses ending in the level; 3 names the level.
        let level = profile
            .rsplit('/')
            .next()
            .unwrap_or("")
            .trim_end_matches(".json")
            .to_string();
        let level = if level.starts_with("level") {
            level
        } else {
            String::new()
        };
        Some((id, ty, level, version))
    })
}

/// The Canvases of a Manifest (3: `items`; 2.1: the first sequence's `canvases`), with the
/// Manifest's properties for those a Canvas lacks.
fn manifest_canvases(m: &Value) -> Vec<Canvas> {
    let mlabel = text(m.get("label"));
    let msummary = text(m.get("summary").or_else(|| m.get("description")));
    let mdate = nav_date(m.get("navDate"));
    let mrights = text(m.get("rights").or_else(|| m.get("license")));
    let mrequired = required(m);
    let mmeta = metadata(m);
    let list: Vec<Value> = if let Some(a) = m.get("items").and_then(Value::as_array) {
        a.clone()
    } else {
        m.get("sequences")
            .and_then(Value::as_array)
            .and_then(|s| s.first())
            .and_then(|s| s.get("canvases"))
            .and_then(Value::as_array)
            .cloned()
            .unwrap_or_default()
    };
    list.iter()
        .filter(|c| kind(c) == "Canvas")
        .filter_map(|c| {
            let id = id_of(c)?.to_string();
            let or = |a: String, b: &String| if a.is_empty() { b.clone() } else { a };
            let label = text(c.get("label"));
            let mut meta = metadata(c);
            for (l, v) in &mmeta {
                if !meta.iter().any(|(x, _)| x == l) {
                    meta.push((l.clone(), v.clone()));
                }
            }
            // 3: items → AnnotationPage → painting Annotation → body (a Choice: its first item).
            // 2.1: images → Annotation → resource.
            let body = c
                .get("items")
                .and_then(Value::as_array)
                .and_then(|pages| pages.first())
                .and_then(|p| p.get("items"))
                .and_then(Value::as_array)
                .and_then(|a| {
                    a.iter()
                        .find(|x| x.get("motivation").and_then(Value::as_str) == Some("painting"))
                        .or(a.first())
                })
                .and_then(|a| a.get("body"))
                .or_else(|| {
                    c.get("images")
                        .and_then(Value::as_array)
                        .and_then(|a| a.first())
                        .and_then(|a| a.get("resource"))
                })
                .map(|b| match b.get("items").and_then(Value::as_array) {
                    Some(choice) if kind(b) == "Choice" => choice.first().unwrap_or(b),
                    _ => b,
                });
            let service = body.and_then(|b| first_service(b.get("service")));
            let thumbnail = c.get("thumbnail").and_then(|t| match t {
                Value::Array(a) => a.first().and_then(id_of).map(String::from),
                other => id_of(other).map(String::from),
            });
            let body = body.and_then(id_of).map(String::from);
            if service.is_none() && thumbnail.is_none() && body.is_none() {
                return None;
            }
            let dim = |k: &str| c.get(k).and_then(Value::as_u64).unwrap_or(0) as u32;
            let (sid, stype) = match &service {
                Some((id, ty, level, _)) => (
                    id.clone(),
                    if level.is_empty() {
                        ty.clone()
                    } else {
                        format!("{ty} {level}")
                    },
                ),
                None => (String::new(), String::new()),
            };
            Some(Canvas {
                fields: vec![
                    if label.is_empty() {
                        mlabel.clone()
                    } else {
                        label
                    },
                    or(
                        text(c.get("summary").or_else(|| c.get("description"))),
                        &msummary,
                    ),
                    or(nav_date(c.get("navDate")), &mdate),
                    or(text(c.get("rights").or_else(|| c.get("license"))), &mrights),
                    or(required(c), &mrequired),
                    mlabel.clone(),
                    sid,
                    stype,
                ],
                id,
                metadata: meta,
                size: [dim("width"), dim("height")],
                service,
                thumbnail,
                body,
            })
        })
        .collect()
}

/// Fetches politely: a request limit, retries, a cache of pictures.
struct Client {
    agent: ureq::Agent,
    concurrency: usize,
    attempts: u32,
    long_side: u32,
    /// Pictures fetched by this build (not taken from the cache).
    fetched: AtomicUsize,
}

impl Client {
    fn new(o: &IiifOptions) -> Client {
        let agent: ureq::Agent = ureq::Agent::config_builder()
            .http_status_as_error(false)
            .timeout_connect(Some(Duration::from_secs(20)))
            .timeout_global(Some(Duration::from_secs(120)))
            .user_agent(format!(
                "vitrine/{} (atlas build; IIIF source)",
                env!("CARGO_PKG_VERSION")
            ))
            .build()
            .into();
        Client {
            agent,
            concurrency: o.concurrency.max(1),
            attempts: o.attempts.max(1),
            long_side: o.long_side.max(1),
            fetched: AtomicUsize::new(0),
        }
    }

    /// One resource's bytes, retried after network failures and 429/5xx answers.
    fn get(&self, url: &str) -> std::result::Result<Vec<u8>, String> {
        let mut pause = Duration::from_millis(500);
        let mut last = String::new();
        for attempt in 1..=self.attempts {
            match self.agent.get(url).call() {
                Ok(mut r) => {
                    let status = r.status().as_u16();
                    if (200..300).contains(&status) {
                        return r
                            .body_mut()
                            .with_config()
                            .limit(256 << 20)
                            .read_to_vec()
                            .map_err(|e| format!("reading the answer: {e}"));
                    }
                    last = format!("HTTP {status}");
                    if !(status == 429 || status >= 500) {
                        return Err(last);
                    }
                    if let Some(s) = r
                        .headers()
                        .get("retry-after")
                        .and_then(|v| v.to_str().ok())
                        .and_then(|v| v.trim().parse::<u64>().ok())
                    {
                        pause = pause.max(Duration::from_secs(s.min(60)));
                    }
                }
                Err(e) => last = e.to_string(),
            }
            if attempt < self.attempts {
                std::thread::sleep(pause);
                pause = (pause * 2).min(Duration::from_secs(60));
            }
        }
        Err(format!("{last} (after {} attempts)", self.attempts))
    }

    /// `f` over `jobs` on at most `concurrency` threads, in order.
    fn fetch_all<J: Sync, T: Send>(
        &self,
        jobs: &[J],
        f: impl Fn(&J) -> T + Sync,
        bar: &dyn crate::progress::Bar,
    ) -> Vec<T> {
        let next = AtomicUsize::new(0);
        let done = AtomicUsize::new(0);
        let out: Mutex<Vec<Option<T>>> = Mutex::new((0..jobs.len()).map(|_| None).collect());
        std::thread::scope(|s| {
            for _ in 0..self.concurrency.min(jobs.len()) {
                s.spawn(|| loop {
                    let i = next.fetch_add(1, Ordering::Relaxed);
                    let Some(job) = jobs.get(i) else { break };
                    let r = f(job);
                    out.lock().unwrap_or_else(|e| e.into_inner())[i] = Some(r);
                    let d = done.fetch_add(1, Ordering::Relaxed) + 1;
                    bar.set(d as u64, jobs.len() as u64);
                });
            }
        });
        out.into_inner()
            .unwrap_or_else(|e| e.into_inner())
            .into_iter()
            .map(|r| r.expect("every job ran"))
            .collect()
    }

    /// A Canvas's picture in `folder`: from the cache when it is there, else fetched.
    fn picture(&self, c: &Canvas, folder: &Path) -> std::result::Result<PathBuf, String> {
        let l = self.long_side;
        // One file per Canvas picture and size, whichever address gave it: a rebuild asks for
        // nothing it has.
        let key = format!(
            "{}|{l}|{:?}|{:?}|{:?}",
            c.id, c.service, c.thumbnail, c.body
        );
        let name = vitrine_format::sha256_hex(key.as_bytes());
        let path = folder.join(&name[..32]);
        if path.is_file() {
            return Ok(path);
        }
        let mut tried = Vec::new();
        if let Some((sid, _, _, version)) = &c.service {
            let url = format!("{sid}/full/!{l},{l}/0/default.jpg");
            match self.fetch_to(&url, &path) {
                Ok(p) => return Ok(p),
                Err(why) => tried.push(format!("{url}: {why}")),
            }
            // A level 0 service serves only the sizes its info.json lists.
            if tried.iter().all(|t| t.contains("HTTP 4")) {
                let info = format!("{sid}/info.json");
                match self
                    .get(&info)
                    .and_then(|b| serde_json::from_slice::<Value>(&b).map_err(|e| e.to_string()))
                {
                    Ok(info) => {
                        if let Some((w, h)) = listed_size(&info, l) {
                            let size = if *version >= 3 {
                                format!("{w},{h}")
                            } else {
                                format!("{w},")
                            };
                            let url = format!("{sid}/full/{size}/0/default.jpg");
                            match self.fetch_to(&url, &path) {
                                Ok(p) => return Ok(p),
                                Err(why) => tried.push(format!("{url}: {why}")),
                            }
                        }
                    }
                    Err(why) => tried.push(format!("{info}: {why}")),
                }
            }
        }
        // The image itself only when there is no service: with one, it is the full master.
        let whole = c.body.as_ref().filter(|_| c.service.is_none());
        for url in c.thumbnail.iter().chain(whole) {
            match self.fetch_to(url, &path) {
                Ok(p) => return Ok(p),
                Err(why) => tried.push(format!("{url}: {why}")),
            }
        }
        Err(format!("could not be fetched: {}", tried.join("; ")))
    }

    /// `url` written whole to `path` (a temporary name, then renamed).
    fn fetch_to(&self, url: &str, path: &Path) -> std::result::Result<PathBuf, String> {
        let bytes = self.get(url)?;
        let mut tmp = path.as_os_str().to_owned();
        tmp.push(format!(
            ".{}-{}.part",
            std::process::id(),
            self.fetched.fetch_add(1, Ordering::Relaxed)
        ));
        let tmp = PathBuf::from(tmp);
        std::fs::write(&tmp, &bytes)
            .and_then(|_| std::fs::rename(&tmp, path))
            .map_err(|e| {
                let _ = std::fs::remove_file(&tmp);
                format!("writing {}: {e}", path.display())
            })?;
        Ok(path.to_path_buf())
    }
}

/// From an Image API `info.json`, the smallest listed size whose long side is at least `l`, else
/// the largest listed; the full size when the service is not level 0 restricted and lists none.
fn listed_size(info: &Value, l: u32) -> Option<(u64, u64)> {
    let mut sizes: Vec<(u64, u64)> = info
        .get("sizes")
        .and_then(Value::as_array)
        .map(|a| {
            a.iter()
                .filter_map(|s| Some((s.get("width")?.as_u64()?, s.get("height")?.as_u64()?)))
                .collect()
        })
        .unwrap_or_default();
    sizes.sort_by_key(|&(w, h)| w.max(h));
    sizes
        .iter()
        .find(|&&(w, h)| w.max(h) >= l as u64)
        .or(sizes.last())
        .copied()
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    #[test]
    fn language_maps_and_html_give_plain_text() {
        assert_eq!(
            text(Some(&json!({"de": ["Bild"], "en": ["Picture"]}))),
            "Picture"
        );
        assert_eq!(text(Some(&json!({"none": ["A", "B"]}))), "A; B");
        assert_eq!(text(Some(&json!({"fr": ["Image"]}))), "Image");
        assert_eq!(
            text(Some(
                &json!([{"@value": "Bild", "@language": "de"}, {"@value": "Picture", "@language": "en"}])
            )),
            "Picture"
        );
        assert_eq!(
            text(Some(&json!("<p>Drawn in <b>ink</b> &amp; wash</p>"))),
            "Drawn in ink & wash"
        );
        assert_eq!(nav_date(Some(&json!("1923-04-01T00:00:00Z"))), "1923-04-01");
    }

    #[test]
    fn level_zero_sizes_pick_the_smallest_that_is_large_enough() {
        let info = json!({"sizes": [{"width": 150, "height": 100}, {"width": 600, "height": 400}, {"width": 1200, "height": 800}]});
        assert_eq!(listed_size(&info, 512), Some((600, 400)));
        assert_eq!(listed_size(&info, 2000), Some((1200, 800)));
        assert_eq!(listed_size(&json!({}), 512), None);
    }

    #[test]
    fn services_of_both_api_versions_are_recognised() {
        let v3 = json!([{"id": "https://x.example/iiif/a/", "type": "ImageService3", "profile": "level1"}]);
        assert_eq!(
            first_service(Some(&v3)),
            Some((
                "https://x.example/iiif/a".into(),
                "ImageService3".into(),
                "level1".into(),
                3
            ))
        );
        let v2 = json!({"@context": "http://iiif.io/api/image/2/context.json", "@id": "https://x.example/b", "profile": "http://iiif.io/api/image/2/level2.json"});
        assert_eq!(
            first_service(Some(&v2)),
            Some((
                "https://x.example/b".into(),
                "ImageService2".into(),
                "level2".into(),
                2
            ))
        );
        assert_eq!(
            first_service(Some(
                &json!({"id": "https://x.example/search", "type": "SearchService2"})
            )),
            None
        );
    }
}
