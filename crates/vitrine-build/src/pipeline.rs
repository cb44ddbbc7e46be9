//! `vitrine build`: inputs → validated items → neighbour graph → map → atlas order → sheets → atlas folder.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use anyhow::{bail, Context, Result};
use indicatif::{ProgressBar, ProgressStyle};
use serde_json::json;
use vitrine_format::{
    ArrayRef, Field, InputFile, Manifest, MapLayout, NeighbourChunk, Neighbours, Provenance,
    SheetLevel, Sheets, TextTable, FORMAT_NAME, FORMAT_VERSION, MANIFEST_FILE,
    NEIGHBOUR_CHUNK_ITEMS,
};

use crate::catalogue::{self, Catalogue, FieldData, ValueWarning};
use crate::error::{id_list, InputError};
use vitrine_images::thumbs::{self, ImageProblem, SheetPlan};
use vitrine_map::knn::{self, Metric};
use vitrine_map::matrix::Matrix;
use vitrine_map::rng::Rng;
use vitrine_map::umap::{self, UmapParams};

pub const IMAGE_EXTENSIONS: &[&str] = &["jpg", "jpeg", "png", "tif", "tiff", "webp", "gif", "bmp"];

use vitrine_format::palette::{INK, OKABE_ITO, UNLISTED};

/// Collections up to this size get the sequential layout optimiser when it is `auto`.
pub const SEQUENTIAL_UP_TO: usize = 50_000;

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Optimiser {
    Auto,
    Sequential,
    Parallel,
}

/// Collections up to this size get the exact neighbour graph when the search is `auto`.
pub const EXACT_UP_TO: usize = 20_000;
/// Items in the sample on which trustworthiness and continuity are measured.
pub const QUALITY_SAMPLE: usize = 2000;

/// What was done to the vectors before the neighbour graph.
pub struct Reduction {
    pub input_dimensions: usize,
    pub pca: Option<vitrine_map::pca::Pca>,
    pub notes: Vec<String>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NeighbourSearch {
    Auto,
    Exact,
    Approximate,
}

#[derive(Debug, Clone)]
pub struct BuildOptions {
    pub vectors: PathBuf,
    pub vector_ids: Option<PathBuf>,
    pub catalogue: Option<PathBuf>,
    pub id_column: String,
    pub images: Option<PathBuf>,
    pub date_field: Option<String>,
    pub image_column: Option<String>,
    pub out: PathBuf,
    pub title: Option<String>,
    pub metric: Metric,
    pub neighbours: NeighbourSearch,
    pub optimiser: Optimiser,
    pub k: usize,
    /// Principal components to keep before the neighbour graph (None: the vectors as given).
    pub pca: Option<usize>,
    pub seed: u64,
    pub min_dist: f32,
    pub epochs: Option<usize>,
    pub sheet_size: u32,
    pub cells: Vec<u32>,
    pub jpeg_quality: u8,
    /// Images with more pixels than this get a placeholder (a decompression-bomb guard).
    pub max_pixels: u64,
    /// Stop the build when any image cannot be used, instead of drawing a placeholder.
    pub strict: bool,
    /// Where thumbnails of unchanged image files are kept for the next build (None: no cache).
    pub thumb_cache: Option<PathBuf>,
    pub viewer: Option<PathBuf>,
    pub quiet: bool,
}

impl BuildOptions {
    pub fn new(vectors: PathBuf, out: PathBuf) -> BuildOptions {
        BuildOptions {
            vectors,
            vector_ids: None,
            catalogue: None,
            id_column: "id".into(),
            images: None,
            date_field: None,
            image_column: None,
            out,
            title: None,
            metric: Metric::Cosine,
            neighbours: NeighbourSearch::Auto,
            optimiser: Optimiser::Auto,
            k: 15,
            pca: None,
            seed: 42,
            min_dist: 0.1,
            epochs: None,
            sheet_size: 2048,
            cells: vec![32, 128, 512],
            jpeg_quality: 85,
            max_pixels: vitrine_images::decode::DEFAULT_MAX_PIXELS,
            strict: false,
            thumb_cache: None,
            viewer: None,
            quiet: false,
        }
    }
}

#[derive(Debug, Default, serde::Serialize)]
pub struct BuildReport {
    pub items: usize,
    /// Seconds per stage, in order, and the process's peak resident memory (Linux) in MiB.
    pub stages: Vec<(String, f64)>,
    /// Per stage (in the order of `stages`), the process's peak resident memory during it in MiB,
    /// where the system tells (Linux).
    pub stage_peak_memory_mib: Vec<Option<f64>>,
    /// Per stage, the resident memory when it began, in MiB (what earlier stages left held).
    pub stage_start_memory_mib: Vec<Option<f64>>,
    pub peak_memory_mib: Option<f64>,
    pub image_problems: Vec<ImageProblem>,
    /// Thumbnails made from their image files, and taken unchanged from the thumbnail cache.
    pub thumbnails_made: usize,
    pub thumbnails_reused: usize,
    pub value_warnings: Vec<ValueWarning>,
    pub notes: Vec<String>,
}

/// Lap times of the build's stages, and each stage's peak memory.
pub struct Stages {
    last: std::time::Instant,
    pub laps: Vec<(String, f64)>,
    pub peaks: Vec<Option<f64>>,
    pub starts: Vec<Option<f64>>,
    start: Option<f64>,
    /// The largest peak so far, kept across the per-stage resets.
    overall: Option<f64>,
}

impl Stages {
    fn new() -> Stages {
        reset_peak_memory();
        Stages {
            last: std::time::Instant::now(),
            laps: Vec::new(),
            peaks: Vec::new(),
            starts: Vec::new(),
            start: memory_mib("VmRSS:"),
            overall: None,
        }
    }
    fn lap(&mut self, name: &str) {
        let now = std::time::Instant::now();
        self.laps
            .push((name.to_string(), (now - self.last).as_secs_f64()));
        let peak = peak_memory_mib();
        self.overall = match (self.overall, peak) {
            (Some(a), Some(b)) => Some(a.max(b)),
            (a, b) => a.or(b),
        };
        self.peaks.push(peak);
        self.starts.push(self.start);
        // Each stage's peak is its own: the high-water mark starts again from what is resident.
        reset_peak_memory();
        self.start = memory_mib("VmRSS:");
        self.last = now;
    }
}

/// Peak resident memory of this process in MiB since it started or since the last
/// [`reset_peak_memory`] (Linux: VmHWM), if the system tells.
pub fn peak_memory_mib() -> Option<f64> {
    memory_mib("VmHWM:")
}

/// A memory line of /proc/self/status in MiB.
fn memory_mib(key: &str) -> Option<f64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with(key))?;
    let kib: f64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib / 1024.0)
}

/// Restarts the peak-memory mark from the current resident size (Linux: writing 5 to
/// /proc/self/clear_refs); elsewhere, or when refused, the mark keeps counting from the start.
fn reset_peak_memory() {
    let _ = std::fs::write("/proc/self/clear_refs", "5");
}

fn bar(quiet: bool, len: u64, what: &str) -> ProgressBar {
    let pb = if quiet {
        ProgressBar::hidden()
    } else {
        ProgressBar::new(len)
    };
    pb.set_style(
        ProgressStyle::with_template("{prefix:>12} [{bar:30}] {pos}/{len} {per_sec} eta {eta}")
            .unwrap()
            .progress_chars("=> "),
    );
    pb.set_prefix(what.to_string());
    pb
}

/// Items as the build sees them: vector rows, their ids and their catalogue rows.
struct Items {
    ids: Vec<String>,
    /// Catalogue row for each vector row.
    catalogue_rows: Option<Vec<usize>>,
}

fn read_id_list(path: &Path) -> Result<Vec<String>, InputError> {
    let text = std::fs::read_to_string(path).map_err(|e| InputError::io(path, e))?;
    let text = text.strip_prefix('\u{feff}').unwrap_or(&text);
    let ids: Vec<String> = text.lines().map(|l| l.trim().to_string()).collect();
    let ids: Vec<String> = match ids.iter().rposition(|l| !l.is_empty()) {
        Some(last) => ids[..=last].to_vec(),
        None => vec![],
    };
    let mut seen = HashMap::new();
    for (i, id) in ids.iter().enumerate() {
        if id.is_empty() {
            return Err(InputError::Vectors {
                file: path.display().to_string(),
                reason: format!("line {} is an empty id", i + 1),
            });
        }
        if let Some(j) = seen.insert(id.clone(), i) {
            return Err(InputError::Vectors {
                file: path.display().to_string(),
                reason: format!(
                    "the id {id:?} appears twice (lines {} and {})",
                    j + 1,
                    i + 1
                ),
            });
        }
    }
    Ok(ids)
}

fn match_items(
    vectors: &Matrix,
    opts: &BuildOptions,
    cat: Option<&Catalogue>,
) -> Result<Items, InputError> {
    let vfile = opts.vectors.display().to_string();
    let vector_ids = match &opts.vector_ids {
        Some(p) => {
            let ids = read_id_list(p)?;
            if ids.len() != vectors.rows {
                return Err(InputError::Matching(format!(
                    "{} lists {} ids but {vfile} has {} rows",
                    p.display(),
                    ids.len(),
                    vectors.rows
                )));
            }
            Some(ids)
        }
        None => None,
    };
    let Some(cat) = cat else {
        let ids = vector_ids.unwrap_or_else(|| (0..vectors.rows).map(|i| i.to_string()).collect());
        return Ok(Items {
            ids,
            catalogue_rows: None,
        });
    };
    match vector_ids {
        Some(vids) => {
            let by_id: HashMap<&str, usize> =
                cat.ids().enumerate().map(|(i, id)| (id, i)).collect();
            let vset: std::collections::HashSet<&str> = vids.iter().map(String::as_str).collect();
            let no_vector: Vec<String> = cat
                .ids()
                .filter(|id| !vset.contains(id))
                .map(String::from)
                .collect();
            let no_record: Vec<String> = vids
                .iter()
                .filter(|id| !by_id.contains_key(id.as_str()))
                .cloned()
                .collect();
            let mut msg = Vec::new();
            if !no_vector.is_empty() {
                msg.push(format!(
                    "{} catalogue record(s) in {} have no vector: {}",
                    no_vector.len(),
                    cat.file,
                    id_list(&no_vector)
                ));
            }
            if !no_record.is_empty() {
                msg.push(format!(
                    "{} vector(s) in {vfile} have no catalogue record: {}",
                    no_record.len(),
                    id_list(&no_record)
                ));
            }
            if !msg.is_empty() {
                return Err(InputError::Matching(msg.join("\n")));
            }
            let rows = vids.iter().map(|id| by_id[id.as_str()]).collect();
            Ok(Items {
                ids: vids,
                catalogue_rows: Some(rows),
            })
        }
        None => {
            let ids: Vec<String> = cat.ids().map(String::from).collect();
            if ids.len() != vectors.rows {
                let detail = if ids.len() > vectors.rows {
                    format!(
                        "catalogue record(s) with no vector: {}",
                        id_list(&ids[vectors.rows..])
                    )
                } else {
                    format!(
                        "vector rows {}..{} have no catalogue record",
                        ids.len(),
                        vectors.rows - 1
                    )
                };
                return Err(InputError::Matching(format!(
                    "{} has {} records but {vfile} has {} rows; without --vector-ids they are matched in order. {detail}",
                    cat.file,
                    ids.len(),
                    vectors.rows
                )));
            }
            Ok(Items {
                ids,
                catalogue_rows: Some((0..vectors.rows).collect()),
            })
        }
    }
}

fn check_finite(vectors: &Matrix, ids: &[String], file: &Path) -> Result<(), InputError> {
    let bad: Vec<String> = (0..vectors.rows)
        .filter(|&i| vectors.row(i).iter().any(|x| !x.is_finite()))
        .map(|i| format!("row {i} (id {})", ids[i]))
        .collect();
    if bad.is_empty() {
        return Ok(());
    }
    Err(InputError::Vectors {
        file: file.display().to_string(),
        reason: format!(
            "{} row(s) hold NaN or infinite values: {}",
            bad.len(),
            id_list(&bad)
        ),
    })
}

/// Finds each item's image: the image column's relative path, or a file named id + an image extension.
fn find_images(
    dir: &Path,
    ids: &[String],
    cat: Option<&Catalogue>,
    cat_rows: Option<&[usize]>,
    image_column: Option<&str>,
) -> Result<Vec<Result<PathBuf, String>>, InputError> {
    if !dir.is_dir() {
        return Err(InputError::Usage(format!(
            "--images {}: not a folder",
            dir.display()
        )));
    }
    let column = match (cat, image_column) {
        (Some(c), Some(name)) => Some(c.column(name).ok_or_else(|| {
            InputError::Usage(format!(
                "--image-column {name:?}: the catalogue has no such column"
            ))
        })?),
        (Some(c), None) => ["image", "image_path", "file", "filename"]
            .iter()
            .find_map(|n| c.column(n)),
        (None, Some(_)) => {
            return Err(InputError::Usage("--image-column needs --catalogue".into()))
        }
        (None, None) => None,
    };
    let mut by_stem: HashMap<String, PathBuf> = HashMap::new();
    if column.is_none() {
        for entry in walk(dir) {
            let ext = entry
                .extension()
                .and_then(|e| e.to_str())
                .map(|e| e.to_lowercase())
                .unwrap_or_default();
            if IMAGE_EXTENSIONS.contains(&ext.as_str()) {
                if let Some(stem) = entry.file_stem().and_then(|s| s.to_str()) {
                    by_stem.entry(stem.to_string()).or_insert(entry.clone());
                }
            }
        }
    }
    Ok(ids
        .iter()
        .enumerate()
        .map(|(i, id)| match (column, cat, cat_rows) {
            (Some(c), Some(cat), Some(rows)) => {
                let rel = cat.rows[rows[i]][c].trim();
                if rel.is_empty() {
                    return Err(format!(
                        "the catalogue's {:?} field is empty",
                        cat.header[c]
                    ));
                }
                let inside = Path::new(rel).components().all(|p| {
                    matches!(
                        p,
                        std::path::Component::Normal(_) | std::path::Component::CurDir
                    )
                });
                if !inside {
                    return Err(format!(
                        "the path {rel:?} leads outside the --images folder; it was not read"
                    ));
                }
                Ok(dir.join(rel))
            }
            _ => by_stem.get(id).cloned().ok_or_else(|| {
                format!("no file named {id} with an image extension in the --images folder")
            }),
        })
        .collect())
}

fn walk(dir: &Path) -> Vec<PathBuf> {
    let mut out = Vec::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        let Ok(rd) = std::fs::read_dir(&d) else {
            continue;
        };
        let mut entries: Vec<PathBuf> = rd.filter_map(|e| e.ok().map(|e| e.path())).collect();
        entries.sort();
        for p in entries {
            if p.is_dir() {
                stack.push(p);
            } else {
                out.push(p);
            }
        }
    }
    out.sort();
    out
}

fn input_file(role: &str, path: &Path) -> Result<InputFile> {
    let bytes = std::fs::read(path).with_context(|| format!("reading {}", path.display()))?;
    // Only the file name: the atlas is meant for publishing, and a local folder layout is nobody's business.
    Ok(InputFile {
        role: role.into(),
        path: file_name(path),
        bytes: bytes.len() as u64,
        sha256: vitrine_format::sha256_hex(&bytes),
    })
}

fn file_name(path: &Path) -> String {
    path.file_name()
        .map(|s| s.to_string_lossy().to_string())
        .unwrap_or_else(|| path.display().to_string())
}

/// Collects the arrays of the atlas being written.
struct ArrayWriter {
    files: Vec<(String, Vec<u8>)>,
}

impl ArrayWriter {
    fn add<T: vitrine_format::Element>(&mut self, name: &str, data: &[T]) -> ArrayRef {
        let (r, bytes) = ArrayRef::encode(&format!("arrays/{name}.bin"), data);
        self.files.push((r.file.clone(), bytes));
        r
    }
    fn text(&mut self, name: &str, items: &[impl AsRef<str>]) -> [ArrayRef; 2] {
        let t = TextTable::from_strings(items);
        [
            self.add(&format!("{name}.offsets"), &t.offsets),
            self.add(&format!("{name}.text"), &t.utf8),
        ]
    }
}

fn safe_name(s: &str) -> String {
    s.chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' {
                c.to_ascii_lowercase()
            } else {
                '_'
            }
        })
        .collect()
}

/// What a build writes at the top of an atlas folder; nothing else may be there when one is replaced.
pub const ATLAS_ENTRIES: &[&str] = &[
    MANIFEST_FILE,
    "arrays",
    "sheets",
    "viewer",
    "index.html",
    "build-report.json",
    "image-digests.txt",
];

/// Refuses to replace a folder unless it is empty or an atlas holding only what a build writes, so that
/// a mistyped --out, or files a user put into an atlas, are never deleted.
fn check_out(out: &Path) -> Result<()> {
    if !out.exists() {
        return Ok(());
    }
    if !out.is_dir() {
        bail!("--out {}: exists and is not a folder", out.display());
    }
    let entries: Vec<String> = std::fs::read_dir(out)?
        .filter_map(|e| e.ok())
        .map(|e| e.file_name().to_string_lossy().to_string())
        .collect();
    if entries.is_empty() {
        return Ok(());
    }
    let is_atlas = std::fs::read_to_string(out.join(MANIFEST_FILE))
        .ok()
        .and_then(|t| serde_json::from_str::<serde_json::Value>(&t).ok())
        .is_some_and(|v| v.get("format").and_then(|f| f.as_str()) == Some(FORMAT_NAME));
    if !is_atlas {
        bail!(
            "--out {}: the folder exists, is not empty and is not an atlas; choose a new folder",
            out.display()
        );
    }
    let mut foreign: Vec<&String> = entries
        .iter()
        .filter(|e| !ATLAS_ENTRIES.contains(&e.as_str()))
        .collect();
    foreign.sort();
    if !foreign.is_empty() {
        bail!(
            "--out {}: the atlas folder also holds files a build did not write ({}); a rebuild replaces the \
             whole folder, so move them elsewhere or choose a new --out",
            out.display(),
            foreign.iter().map(|s| s.as_str()).collect::<Vec<_>>().join(", ")
        );
    }
    Ok(())
}

pub fn build(opts: &BuildOptions) -> Result<BuildReport> {
    check_out(&opts.out)?;
    if let Some(v) = &opts.viewer {
        if viewer_dir(Some(v)).is_none() {
            bail!("--viewer {}: not a folder with the viewer's index.html (./build.sh atlas makes one in target/viewer)", v.display());
        }
    }
    if opts.k == 0 {
        bail!("--k must be at least 1");
    }
    if opts.cells.is_empty()
        || opts.cells.windows(2).any(|w| w[0] >= w[1])
        || opts.cells.iter().any(|&c| c < 8 || c > opts.sheet_size)
    {
        bail!(
            "--levels {:?}: give the thumbnail sizes smallest first, each from 8 px to the sheet size ({} px)",
            opts.cells,
            opts.sheet_size
        );
    }
    let log = |s: &str| {
        if !opts.quiet {
            eprintln!("{s}");
        }
    };
    let mut stages = Stages::new();
    let vectors = crate::vectors::read_vectors(&opts.vectors)?;
    log(&format!(
        "vectors: {} x {} from {}",
        vectors.rows,
        vectors.cols,
        opts.vectors.display()
    ));
    let cat = match &opts.catalogue {
        Some(p) => {
            let c = catalogue::read_csv(p, &opts.id_column)?;
            log(&format!(
                "catalogue: {} records, {} columns from {}",
                c.rows.len(),
                c.header.len(),
                p.display()
            ));
            Some(c)
        }
        None => None,
    };
    let items = match_items(&vectors, opts, cat.as_ref())?;
    stages.lap("read inputs");
    check_finite(&vectors, &items.ids, &opts.vectors)?;
    let n = vectors.rows;
    if n == 0 {
        bail!("{}: there are no vectors", opts.vectors.display());
    }
    let image_paths = match &opts.images {
        Some(dir) => Some(find_images(
            dir,
            &items.ids,
            cat.as_ref(),
            items.catalogue_rows.as_deref(),
            opts.image_column.as_deref(),
        )?),
        None => None,
    };

    // The quality figures measure the map against the vectors as given, so their sample is kept
    // before any reduction.
    let quality_idx = vitrine_map::quality::sample(n, QUALITY_SAMPLE);
    let quality_rows = Matrix {
        rows: quality_idx.len(),
        cols: vectors.cols,
        data: quality_idx
            .iter()
            .flat_map(|&i| vectors.row(i))
            .copied()
            .collect(),
    };
    let vector_dimensions = vectors.cols;
    let mut notes = Vec::new();
    // Optional PCA pre-reduction. Cosine vectors are unit-normalised first; in the reduced space
    // the graph is found by Euclidean distance, and for cosine the distances are turned back into
    // cosine distances (for unit vectors |u - v|^2 = 2 (1 - cos)).
    let (vectors, graph_metric, reduction) = match opts.pca {
        Some(dims) if dims < vectors.cols && n > 1 => {
            let prepared = knn::prepare(&vectors, opts.metric);
            drop(vectors);
            let pb = bar(opts.quiet, vitrine_map::pca::FIT_STEPS, "PCA");
            let fit = vitrine_map::pca::fit_with_progress(&prepared, dims, opts.seed, &|i, of| {
                pb.set_length(of);
                pb.set_position(i);
            });
            let reduced = vitrine_map::pca::project(&prepared, &fit);
            pb.finish_and_clear();
            log(&format!(
                "PCA: {} -> {} dimensions, {:.1} % of the variance kept (fitted on {} items)",
                vector_dimensions,
                reduced.cols,
                100.0 * fit.explained(),
                fit.fit_rows
            ));
            stages.lap("PCA reduction");
            (reduced, Metric::Euclidean, Some(fit))
        }
        Some(dims) => {
            let note = format!(
                "--pca {dims}: not fewer than the vectors' {} dimensions (or a single item); the vectors are used as given",
                vector_dimensions
            );
            log(&note);
            notes.push(note);
            (vectors, opts.metric, None)
        }
        None => (vectors, opts.metric, None),
    };
    // Neighbour graph and map.
    let k = opts.k.min(n.saturating_sub(1)).max(1);
    let exact = match opts.neighbours {
        NeighbourSearch::Exact => true,
        NeighbourSearch::Approximate => false,
        NeighbourSearch::Auto => n <= EXACT_UP_TO,
    };
    let mut recall = None;
    let graph = if exact {
        let pb = bar(opts.quiet, n as u64, "neighbours");
        let g = knn::exact_knn(&vectors, k, graph_metric, &|c| pb.set_position(c));
        pb.finish_and_clear();
        g
    } else {
        let pb = bar(opts.quiet, 1, "neighbours");
        let params = vitrine_map::nndescent::NnDescentParams::new(k, opts.seed);
        let g =
            vitrine_map::nndescent::nn_descent(&vectors, graph_metric, &params, &|stage, i, of| {
                pb.set_prefix(stage.to_string());
                pb.set_length(of);
                pb.set_position(i);
            });
        pb.finish_and_clear();
        // Recall against exact search on a sample, recorded with the map's quality figures.
        let sample = vitrine_map::quality::sample(n, 500);
        let truth = vitrine_map::nndescent::exact_for(&vectors, graph_metric, k, &sample);
        let r = vitrine_map::nndescent::recall(&g, &truth, &sample);
        log(&format!(
            "neighbour graph: NN-descent, recall@{k} {r:.3} on {} sampled items",
            sample.len()
        ));
        recall = Some((r, sample.len()));
        g
    };
    let parallel = match opts.optimiser {
        Optimiser::Auto => n > SEQUENTIAL_UP_TO,
        Optimiser::Sequential => false,
        Optimiser::Parallel => true,
    };
    let mut graph = graph;
    if reduction.is_some() && opts.metric == Metric::Cosine {
        // Euclidean distances of unit vectors back to cosine distances: 1 - cos = |u - v|^2 / 2.
        graph.distances.iter_mut().for_each(|d| *d = 0.5 * *d * *d);
    }
    stages.lap("neighbour graph");
    let params = UmapParams {
        min_dist: opts.min_dist,
        epochs: opts.epochs,
        seed: opts.seed,
        parallel,
        ..UmapParams::default()
    };
    let fuzzy = umap::fuzzy_graph(&graph);
    let mut rng = Rng::new(opts.seed);
    let start_vectors = knn::prepare(&vectors, graph_metric);
    let pca = umap::pca_start(&start_vectors, &mut rng);
    drop(start_vectors);
    let (start, start_report) = vitrine_map::spectral::spectral_start(&fuzzy, &pca, opts.seed);
    drop(pca);
    log(&format!(
        "map start: {} ({} connected part(s) of the graph, {} laid out spectrally, residual {:.1e})",
        start_report.method,
        start_report.parts,
        start_report.spectral_parts,
        start_report.max_residual
    ));
    let order_start: Vec<[f32; 1]> = start.iter().map(|p| [p[0]]).collect();
    let pb = bar(opts.quiet, 1, "layout");
    let pos = umap::layout(&fuzzy, start, &params, &|e, total| {
        pb.set_length(total as u64);
        pb.set_position(e as u64)
    });
    pb.finish_and_clear();
    log(&format!(
        "map: {} items, {} graph edges",
        n,
        fuzzy.weights.len()
    ));
    stages.lap("similarity map");
    // The timeline map, when the catalogue has a date field (the first one, or --date-field).
    let timeline = match (&cat, &items.catalogue_rows) {
        (Some(cat), Some(rows)) => {
            let chosen = match &opts.date_field {
                Some(name) => Some(cat.column(name).ok_or_else(|| {
                    InputError::Usage(format!(
                        "--date-field {name:?}: the catalogue has no such column"
                    ))
                })?),
                None => (0..cat.header.len())
                    .filter(|&c| c != cat.id_column)
                    .find(|&c| {
                        let values: Vec<&str> =
                            rows.iter().map(|&r| cat.rows[r][c].as_str()).collect();
                        catalogue::infer_kind(&cat.header[c], &values)
                            == vitrine_format::FieldKind::Date
                    }),
            };
            match chosen {
                Some(c) => {
                    let ranges: Vec<_> = rows
                        .iter()
                        .map(|&r| crate::dates::parse_date(&cat.rows[r][c]))
                        .collect();
                    let pb = bar(opts.quiet, 1, "timeline");
                    let t = vitrine_map::timeline_map::timeline_map(
                        &fuzzy,
                        order_start,
                        &ranges,
                        &cat.header[c],
                        &params,
                        &|e, total| {
                            pb.set_length(total as u64);
                            pb.set_position(e as u64)
                        },
                    );
                    pb.finish_and_clear();
                    if let Some(t) = &t {
                        log(&format!(
                            "timeline map: by {:?}, {} of {} items dated",
                            cat.header[c], t.dated, n
                        ));
                    }
                    t
                }
                None => None,
            }
        }
        _ => None,
    };
    if timeline.is_some() {
        stages.lap("timeline map");
    }
    let clusters = vitrine_map::clusters::louvain(n, &fuzzy, 1.0);
    stages.lap("clusters");
    let lattice = vitrine_map::lattice::lattice(&pos);
    let lattice_pos: Vec<[f32; 2]> = lattice
        .cells
        .iter()
        .map(|c| [c[0] as f32, c[1] as f32])
        .collect();
    stages.lap("lattice");
    let quality_sample =
        vitrine_map::quality::QualitySample::new(&quality_rows, quality_idx, opts.metric);
    drop(quality_rows);
    let quality = quality_sample.quality(&pos, 10);
    let lattice_quality = quality_sample.quality(&lattice_pos, 10);
    if let Some(q) = &quality {
        log(&format!(
            "map quality on {} items: trustworthiness@10 {:.3}, continuity@10 {:.3}",
            q.sample, q.trustworthiness, q.continuity
        ));
    }

    // Atlas order: along a Hilbert curve over the map.
    let order = vitrine_map::hilbert::hilbert_order(&pos);
    stages.lap("quality figures");
    let mut rank = vec![0u32; n];
    for (new, &old) in order.iter().enumerate() {
        rank[old] = new as u32;
    }

    let tmp = tmp_sibling(&opts.out, "building");
    if tmp.exists() {
        std::fs::remove_dir_all(&tmp)?;
    }
    std::fs::create_dir_all(&tmp).with_context(|| format!("creating {}", tmp.display()))?;
    let result = write_atlas(
        opts,
        &tmp,
        &vectors,
        &items,
        cat.as_ref(),
        &graph,
        &pos,
        &order,
        &rank,
        image_paths,
        quality,
        recall,
        exact,
        timeline,
        (lattice, lattice_pos, lattice_quality),
        clusters,
        &params,
        &start_report,
        Reduction {
            input_dimensions: vector_dimensions,
            pca: reduction,
            notes,
        },
        &mut stages,
    );
    match result {
        Ok(report) => {
            replace_dir(&tmp, &opts.out)?;
            log(&format!("atlas: {} ({} items)", opts.out.display(), n));
            Ok(report)
        }
        Err(e) => {
            let _ = std::fs::remove_dir_all(&tmp);
            Err(e)
        }
    }
}

/// Positions rearranged into atlas order, interleaved x, y, with their bounds [min_x, min_y, max_x, max_y].
fn in_atlas_order(order: &[usize], pos: &[[f32; 2]]) -> (Vec<f32>, [f32; 4]) {
    let mut xy = Vec::with_capacity(order.len() * 2);
    let mut b = [
        f32::INFINITY,
        f32::INFINITY,
        f32::NEG_INFINITY,
        f32::NEG_INFINITY,
    ];
    for &i in order {
        let [x, y] = pos[i];
        xy.push(x);
        xy.push(y);
        b = [b[0].min(x), b[1].min(y), b[2].max(x), b[3].max(y)];
    }
    (xy, b)
}

fn tmp_sibling(out: &Path, what: &str) -> PathBuf {
    let name = out
        .file_name()
        .map(|s| s.to_string_lossy().to_string())
        .unwrap_or_else(|| "atlas".into());
    out.with_file_name(format!(".{name}.{what}-{}", std::process::id()))
}

/// Puts the finished folder in place: the old atlas (if any) is moved aside first and removed after.
fn replace_dir(tmp: &Path, out: &Path) -> Result<()> {
    if out.exists() {
        let old = tmp_sibling(out, "old");
        std::fs::rename(out, &old)
            .with_context(|| format!("moving the old atlas {} aside", out.display()))?;
        std::fs::rename(tmp, out)
            .with_context(|| format!("putting the new atlas at {}", out.display()))?;
        std::fs::remove_dir_all(&old)?;
    } else {
        std::fs::rename(tmp, out)
            .with_context(|| format!("putting the new atlas at {}", out.display()))?;
    }
    Ok(())
}

#[allow(clippy::too_many_arguments)]
fn write_atlas(
    opts: &BuildOptions,
    dir: &Path,
    vectors: &Matrix,
    items: &Items,
    cat: Option<&Catalogue>,
    graph: &knn::KnnGraph,
    pos: &[[f32; 2]],
    order: &[usize],
    rank: &[u32],
    image_paths: Option<Vec<Result<PathBuf, String>>>,
    quality: Option<vitrine_map::quality::MapQuality>,
    recall: Option<(f64, usize)>,
    exact: bool,
    timeline: Option<vitrine_map::timeline_map::TimelineMap>,
    lattice: (
        vitrine_map::lattice::Lattice,
        Vec<[f32; 2]>,
        Option<vitrine_map::quality::MapQuality>,
    ),
    clusters: Vec<u32>,
    umap_params: &UmapParams,
    start: &vitrine_map::spectral::StartReport,
    reduction: Reduction,
    stages: &mut Stages,
) -> Result<BuildReport> {
    let n = vectors.rows;
    let mut report = BuildReport {
        items: n,
        notes: reduction.notes,
        ..Default::default()
    };
    let mut w = ArrayWriter { files: Vec::new() };
    let ids_sorted: Vec<&str> = order.iter().map(|&i| items.ids[i].as_str()).collect();
    let [ids, ids_text] = w.text("ids", &ids_sorted);
    let source_rows = w.add(
        "source-rows",
        &order.iter().map(|&i| i as u32).collect::<Vec<_>>(),
    );

    // Positions in atlas order.
    let (xy, bounds) = in_atlas_order(order, pos);
    let map = MapLayout {
        name: "similarity".into(),
        description: format!(
            "UMAP of the {} neighbour graph{} (k = {}, min_dist = {}, seed {})",
            opts.metric.name(),
            match &reduction.pca {
                Some(p) => format!(
                    " on {} principal components ({:.0} % of the variance)",
                    p.components.len(),
                    100.0 * p.explained()
                ),
                None => String::new(),
            },
            graph.k,
            opts.min_dist,
            opts.seed
        ),
        positions: w.add("map-similarity", &xy),
        bounds,
        x_axis: None,
    };
    let mut maps = vec![map];
    {
        let (grid, cells, _) = &lattice;
        let xy: Vec<f32> = order.iter().flat_map(|&i| cells[i]).collect();
        maps.push(MapLayout {
            name: "lattice".into(),
            description: format!(
                "the similarity map snapped to a {} x {} grid, one item per cell (recursive balanced bisection)",
                grid.columns, grid.rows
            ),
            positions: w.add("map-lattice", &xy),
            bounds: [0.0, 0.0, grid.columns.saturating_sub(1) as f32, grid.rows.saturating_sub(1) as f32],
            x_axis: None,
        });
    }
    if let Some(t) = &timeline {
        let (xy, b) = in_atlas_order(order, &t.positions);
        maps.push(MapLayout {
            name: "timeline".into(),
            description: format!(
                "x: {:?} (a random year within each item's range), y: a 1-D UMAP of the same neighbour graph; {} of {} items dated",
                t.axis.label, t.dated, n
            ),
            positions: w.add("map-timeline", &xy),
            bounds: b,
            x_axis: Some(t.axis.clone()),
        });
    }

    // Neighbours renumbered into atlas order.
    let mut nb_ids = Vec::with_capacity(n * graph.k);
    let mut nb_d = Vec::with_capacity(n * graph.k);
    for &i in order {
        let s = i * graph.k;
        for slot in s..s + graph.k {
            let j = graph.ids[slot];
            nb_ids.push(if j == u32::MAX {
                u32::MAX
            } else {
                rank[j as usize]
            });
            nb_d.push(graph.distances[slot]);
        }
    }
    // In chunks of consecutive items (a region of the map each): a record card needs one.
    let per = NEIGHBOUR_CHUNK_ITEMS as usize * graph.k;
    let chunks = nb_ids
        .chunks(per.max(1))
        .zip(nb_d.chunks(per.max(1)))
        .enumerate()
        .map(|(c, (ids, d))| NeighbourChunk {
            ids: w.add(&format!("neighbours/ids-{c:04}"), ids),
            distances: w.add(&format!("neighbours/distances-{c:04}"), d),
        })
        .collect();
    let neighbours = Neighbours {
        k: graph.k as u32,
        metric: opts.metric.name().into(),
        exact,
        chunk_items: NEIGHBOUR_CHUNK_ITEMS,
        chunks,
    };

    // Catalogue fields, every column but the id.
    let mut fields = Vec::new();
    let mut first_category: Option<Vec<u32>> = None;
    // Per field: its category codes, when it is a category field (for the cluster labels).
    let mut category_codes: Vec<Option<Vec<u32>>> = Vec::new();
    if let (Some(cat), Some(rows)) = (cat, &items.catalogue_rows) {
        let item_rows: Vec<usize> = order.iter().map(|&i| rows[i]).collect();
        for (c, name) in cat.header.iter().enumerate() {
            if c == cat.id_column {
                continue;
            }
            let values: Vec<&str> = item_rows.iter().map(|&r| cat.rows[r][c].as_str()).collect();
            let kind = catalogue::infer_kind(name, &values);
            let data =
                catalogue::field_data(name, kind, &values, &ids_sorted, &mut report.value_warnings);
            let tag = format!("field-{}-{}", fields.len(), safe_name(name));
            let field = match data {
                FieldData::Category {
                    codes,
                    values,
                    counts,
                } => {
                    if first_category.is_none() {
                        first_category = Some(codes.clone());
                    }
                    category_codes.push(Some(codes.clone()));
                    Field {
                        name: name.clone(),
                        kind,
                        column: w.add(&tag, &codes),
                        column2: None,
                        values,
                        value_counts: counts,
                        written: None,
                    }
                }
                FieldData::Number { values, written } => Field {
                    name: name.clone(),
                    kind,
                    column: w.add(&tag, &values),
                    column2: None,
                    values: vec![],
                    value_counts: vec![],
                    written: Some(w.text(&format!("{tag}.written"), &written)),
                },
                FieldData::Date { ranges, written } => {
                    let s: Vec<i32> = ranges
                        .iter()
                        .map(|r| r.map_or(i32::MIN, |r| r.start))
                        .collect();
                    let e: Vec<i32> = ranges
                        .iter()
                        .map(|r| r.map_or(i32::MIN, |r| r.end))
                        .collect();
                    Field {
                        name: name.clone(),
                        kind,
                        column: w.add(&format!("{tag}.start"), &s),
                        column2: Some(w.add(&format!("{tag}.end"), &e)),
                        values: vec![],
                        value_counts: vec![],
                        written: Some(w.text(&format!("{tag}.written"), &written)),
                    }
                }
                FieldData::Text(t) | FieldData::Link(t) => {
                    let [a, b] = w.text(&tag, &t);
                    Field {
                        name: name.clone(),
                        kind,
                        column: a,
                        column2: Some(b),
                        values: vec![],
                        value_counts: vec![],
                        written: None,
                    }
                }
            };
            fields.push(field);
            if category_codes.len() < fields.len() {
                category_codes.push(None);
            }
        }
    }

    // Clusters in atlas order, with labels from the catalogue's category fields.
    let cluster_of: Vec<u32> = order.iter().map(|&i| clusters[i]).collect();
    let mut category_columns: Vec<(String, Vec<u32>, Vec<String>)> = Vec::new();
    for (f, data) in fields.iter().zip(&category_codes) {
        if let Some(codes) = data {
            category_columns.push((f.name.clone(), codes.clone(), f.values.clone()));
        }
    }
    let terms = vitrine_map::clusters::label_terms(&cluster_of, &category_columns, 3);
    let k = terms.len();
    let mut members: Vec<Vec<[f32; 2]>> = vec![Vec::new(); k];
    for (slot, &c) in cluster_of.iter().enumerate() {
        members[c as usize].push([xy[2 * slot], xy[2 * slot + 1]]);
    }
    let median = |v: &mut Vec<f32>| -> f32 {
        v.sort_by(|a, b| a.total_cmp(b));
        v[v.len() / 2]
    };
    let list: Vec<vitrine_format::ClusterInfo> = (0..k)
        .map(|c| {
            let mut xs: Vec<f32> = members[c].iter().map(|p| p[0]).collect();
            let mut ys: Vec<f32> = members[c].iter().map(|p| p[1]).collect();
            let label = if terms[c].is_empty() {
                format!("cluster {}", c + 1)
            } else {
                terms[c]
                    .iter()
                    .map(|t| t.value.as_str())
                    .collect::<Vec<_>>()
                    .join(" · ")
            };
            vitrine_format::ClusterInfo {
                size: members[c].len() as u64,
                label,
                position: [median(&mut xs), median(&mut ys)],
                terms: terms[c]
                    .iter()
                    .map(|t| vitrine_format::ClusterTerm {
                        field: t.field.clone(),
                        value: t.value.clone(),
                        share: t.share,
                        lift: t.lift,
                    })
                    .collect(),
            }
        })
        .collect();
    let clusters = vitrine_format::Clusters {
        method: "Louvain modularity on the fuzzy neighbour graph (resolution 1)".into(),
        ids: w.add("clusters", &cluster_of),
        list,
    };

    // Thumbnails and colours.
    let mut inputs = vec![input_file("vectors", &opts.vectors)?];
    if let Some(p) = &opts.vector_ids {
        inputs.push(input_file("vector-ids", p)?);
    }
    if let Some(p) = &opts.catalogue {
        inputs.push(input_file("catalogue", p)?);
    }
    let (colours, sheets) = match image_paths {
        Some(paths) => {
            let plan = SheetPlan {
                cells: opts.cells.clone(),
                sheet: opts.sheet_size,
                quality: opts.jpeg_quality,
                max_pixels: opts.max_pixels,
            };
            let list: Vec<(String, Result<PathBuf, String>)> = order
                .iter()
                .map(|&i| (items.ids[i].clone(), paths[i].clone()))
                .collect();
            let pb = bar(opts.quiet, n as u64, "thumbnails");
            let cache = opts.thumb_cache.as_ref().map(|d| {
                vitrine_images::cache::ThumbCache::new(
                    d.clone(),
                    *plan.cells.iter().max().unwrap(),
                    plan.max_pixels,
                )
            });
            let t =
                thumbs::make_sheets(&list, &plan, dir, cache.as_ref(), &|c| pb.set_position(c))?;
            pb.finish_and_clear();
            report.thumbnails_reused = t.reused;
            report.thumbnails_made = n - t.reused - t.problems.len();
            if cache.is_some() && !opts.quiet {
                eprintln!(
                    "thumbnails: {} made, {} reused from the cache ({})",
                    report.thumbnails_made,
                    t.reused,
                    opts.thumb_cache.as_ref().unwrap().display()
                );
            }
            if t.cache_errors > 0 {
                report.notes.push(format!(
                    "{} thumbnail(s) could not be stored in the cache {}; the next build makes them again",
                    t.cache_errors,
                    opts.thumb_cache.as_ref().unwrap().display()
                ));
            }
            if opts.strict && !t.problems.is_empty() {
                let listed: Vec<String> = t
                    .problems
                    .iter()
                    .take(10)
                    .map(|p| format!("  {} ({}): {}", p.id, p.path, p.reason))
                    .collect();
                anyhow::bail!(
                    "--strict: {} image(s) could not be used:\n{}{}",
                    t.problems.len(),
                    listed.join("\n"),
                    if t.problems.len() > 10 {
                        format!("\n  and {} more", t.problems.len() - 10)
                    } else {
                        String::new()
                    }
                );
            }
            stages.lap("thumbnails");
            // The images' provenance: one line per image (SHA-256, bytes, path), hashed as a whole.
            let mut listing = String::new();
            let mut total = 0u64;
            let images_dir = opts.images.as_ref().unwrap();
            let relative = |p: &Path| {
                p.strip_prefix(images_dir)
                    .unwrap_or(p)
                    .display()
                    .to_string()
            };
            for ((_, p), (sha, bytes)) in list.iter().zip(&t.digests) {
                // Files that could not be read have no digest; the build report lists them.
                if let (Ok(p), false) = (p, sha.is_empty()) {
                    listing.push_str(&format!("{sha}  {bytes}  {}\n", relative(p)));
                    total += bytes;
                }
            }
            std::fs::write(dir.join("image-digests.txt"), &listing)?;
            inputs.push(InputFile {
                role: "images (digest of image-digests.txt)".into(),
                path: file_name(images_dir),
                bytes: total,
                sha256: vitrine_format::sha256_hex(listing.as_bytes()),
            });
            report.image_problems = t
                .problems
                .into_iter()
                .map(|mut p| {
                    p.path = relative(Path::new(&p.path));
                    p
                })
                .collect();
            let levels = plan
                .cells
                .iter()
                .zip(t.files)
                .map(|(&cell, files)| {
                    let (columns, rows) = plan.per_sheet(cell);
                    SheetLevel {
                        cell,
                        columns,
                        rows,
                        files,
                    }
                })
                .collect();
            let extents = w.add("thumbnail-extents", &t.extents);
            let flat: Vec<u32> = t.sizes.iter().flatten().copied().collect();
            let image_sizes = Some(w.add("image-sizes", &flat));
            (
                t.colours,
                Some(Sheets {
                    levels,
                    extents,
                    image_sizes,
                }),
            )
        }
        None => {
            let colours = (0..n)
                .map(|i| {
                    let c = match &first_category {
                        Some(codes) if (codes[i] as usize) < OKABE_ITO.len() => {
                            OKABE_ITO[codes[i] as usize]
                        }
                        Some(_) => UNLISTED,
                        None => INK,
                    };
                    [c[0], c[1], c[2], 255]
                })
                .collect();
            (colours, None)
        }
    };
    let flat: Vec<u8> = colours.iter().flatten().copied().collect();
    let colours = w.add("colours", &flat);

    let mut parameters = serde_json::Map::new();
    parameters.insert("metric".into(), json!(opts.metric.name()));
    parameters.insert("k".into(), json!(graph.k));
    parameters.insert(
        "neighbour_search".into(),
        json!(if exact { "exact" } else { "nn-descent" }),
    );
    parameters.insert("layout".into(), json!("umap"));
    parameters.insert("min_dist".into(), json!(opts.min_dist));
    parameters.insert("spread".into(), json!(1.0));
    let (a, b) = umap::fit_ab(opts.min_dist, 1.0);
    parameters.insert("umap_a".into(), json!(a));
    parameters.insert("umap_b".into(), json!(b));
    parameters.insert(
        "epochs".into(),
        json!(umap::epochs_for(n, umap_params.epochs)),
    );
    parameters.insert("start".into(), json!(start.method));
    parameters.insert("start_graph_parts".into(), json!(start.parts));
    parameters.insert("start_spectral_parts".into(), json!(start.spectral_parts));
    parameters.insert("start_residual".into(), json!(start.max_residual));
    parameters.insert(
        "layout_optimiser".into(),
        json!(if umap_params.parallel {
            "parallel blocks"
        } else {
            "sequential"
        }),
    );
    parameters.insert("pca".into(), json!(opts.pca));
    parameters.insert("id_column".into(), json!(opts.id_column));
    parameters.insert("sheet_size".into(), json!(opts.sheet_size));
    parameters.insert("cells".into(), json!(opts.cells));
    parameters.insert("jpeg_quality".into(), json!(opts.jpeg_quality));
    parameters.insert("max_pixels".into(), json!(opts.max_pixels));
    parameters.insert("strict".into(), json!(opts.strict));
    parameters.insert(
        "vector_dimensions".into(),
        json!(reduction.input_dimensions),
    );
    if let Some(p) = &reduction.pca {
        parameters.insert("pca_dimensions".into(), json!(p.components.len()));
        parameters.insert("pca_explained_variance".into(), json!(p.explained()));
        parameters.insert(
            "pca_explained_variance_ratios".into(),
            json!(p.explained_variance_ratio),
        );
        parameters.insert("pca_fit_items".into(), json!(p.fit_rows));
        parameters.insert("pca_method".into(), json!(vitrine_map::pca::method()));
    }

    let title = opts.title.clone().unwrap_or_else(|| {
        opts.out
            .file_name()
            .map(|s| s.to_string_lossy().to_string())
            .unwrap_or_else(|| "Atlas".into())
    });
    let manifest = Manifest {
        format: FORMAT_NAME.into(),
        format_version: FORMAT_VERSION,
        title,
        item_count: n as u64,
        ids,
        ids_text,
        source_rows,
        colours,
        fields,
        maps,
        neighbours,
        sheets,
        quality: {
            let mut q = serde_json::Map::new();
            q.insert("clusters".into(), json!(clusters.list.len()));
            if let Some(mq) = &quality {
                q.insert(
                    "similarity_trustworthiness_at_10".into(),
                    json!(mq.trustworthiness),
                );
                q.insert("similarity_continuity_at_10".into(), json!(mq.continuity));
                q.insert("quality_sample_items".into(), json!(mq.sample));
            }
            if let Some(lq) = &lattice.2 {
                q.insert(
                    "lattice_trustworthiness_at_10".into(),
                    json!(lq.trustworthiness),
                );
                q.insert("lattice_continuity_at_10".into(), json!(lq.continuity));
            }
            if let Some((r, items)) = recall {
                q.insert("neighbour_recall".into(), json!(r));
                q.insert("neighbour_recall_sample_items".into(), json!(items));
            }
            q
        },
        clusters: Some(clusters),
        provenance: Provenance {
            tool: "vitrine".into(),
            tool_version: env!("CARGO_PKG_VERSION").into(),
            inputs,
            parameters,
            seed: opts.seed,
        },
    };
    std::fs::create_dir_all(dir.join("arrays").join("neighbours"))?;
    for (name, bytes) in &w.files {
        std::fs::write(dir.join(name), bytes).with_context(|| format!("writing {name}"))?;
    }
    // Validate what was written with the same reader the viewer uses.
    Manifest::from_json(&manifest.to_json())
        .context("the manifest this build wrote does not validate")?;
    std::fs::write(dir.join(MANIFEST_FILE), manifest.to_json())?;

    if !report.image_problems.is_empty() {
        report.notes.push(format!(
            "{} image(s) could not be used and are drawn as placeholders",
            report.image_problems.len()
        ));
    }
    if !report.value_warnings.is_empty() {
        report.notes.push(format!(
            "{} catalogue value(s) could not be read as their field's kind; kept as written",
            report.value_warnings.len()
        ));
    }
    copy_viewer(opts, dir, &mut report)?;
    stages.lap("write atlas");
    report.stages = stages.laps.clone();
    report.stage_peak_memory_mib = stages.peaks.clone();
    report.stage_start_memory_mib = stages.starts.clone();
    report.peak_memory_mib = stages.overall;
    std::fs::write(
        dir.join("build-report.json"),
        serde_json::to_string_pretty(&report)?,
    )?;
    Ok(report)
}

/// The viewer files (index.html, the wasm module and its loader) make the atlas self-contained.
fn copy_viewer(opts: &BuildOptions, dir: &Path, report: &mut BuildReport) -> Result<()> {
    let found = viewer_dir(opts.viewer.as_deref());
    let Some(src) = found else {
        report.notes.push(
            "no viewer files were found (build them with ./build.sh atlas, or pass --viewer DIR): \
             the atlas holds the data only"
                .into(),
        );
        return Ok(());
    };
    for entry in walk(&src) {
        let rel = entry.strip_prefix(&src).unwrap();
        let to = dir.join(rel);
        if let Some(parent) = to.parent() {
            std::fs::create_dir_all(parent)?;
        }
        std::fs::copy(&entry, &to)
            .with_context(|| format!("copying viewer file {}", entry.display()))?;
    }
    Ok(())
}

pub fn viewer_dir(explicit: Option<&Path>) -> Option<PathBuf> {
    let ok = |p: &Path| p.join("index.html").is_file();
    if let Some(p) = explicit {
        return ok(p).then(|| p.to_path_buf());
    }
    if let Ok(p) = std::env::var("VITRINE_VIEWER") {
        let p = PathBuf::from(p);
        if ok(&p) {
            return Some(p);
        }
    }
    let exe = std::env::current_exe().ok()?;
    let exe_dir = exe.parent()?;
    [exe_dir.join("viewer"), exe_dir.join("../viewer")]
        .into_iter()
        .find(|p| ok(p))
}
