//! `vitrine build`: flags converted once into [`BuildOptions`], the build run, its summary printed.

use std::path::PathBuf;

use anyhow::Result;
use clap::{Args, ValueEnum};
use vitrine_build::pipeline::{build, BuildOptions, NeighbourSearch, Optimiser};
use vitrine_map::knn::Metric;

use crate::progress::Terminal;

#[derive(Clone, Copy, ValueEnum)]
pub enum MetricArg {
    Cosine,
    Euclidean,
}

#[derive(Clone, Copy, ValueEnum)]
pub enum NeighbourArg {
    /// Exact up to 20,000 items, NN-descent above.
    Auto,
    Exact,
    Approximate,
}

#[derive(Clone, Copy, ValueEnum)]
pub enum OptimiserArg {
    /// Sequential up to 50,000 items, parallel above.
    Auto,
    /// The method as published, on one core; keeps neighbourhoods best.
    Sequential,
    /// Over all cores; the same map for any number of threads.
    Parallel,
}

/// Build an atlas folder from feature vectors, a catalogue and images.
#[derive(Args)]
pub struct BuildArgs {
    /// Feature vectors, items x dimensions: a NumPy .npy file (float, integer or bool), a NumPy
    /// .npz archive (its one 2-D array; an array "ids" beside it gives their ids) or a
    /// .safetensors file (its one 2-D tensor). Without it, each item's vector is computed from
    /// its picture in --images (by the built-in descriptor).
    #[arg(long)]
    vectors: Option<PathBuf>,
    /// Without --vectors: an ONNX image model (a CNN or a vision transformer exported to ONNX)
    /// that computes each item's vector from its picture, run on the processor, instead of the
    /// built-in descriptor. See docs/vectors-from-images.md.
    #[arg(long, value_name = "FILE.onnx")]
    model: Option<PathBuf>,
    /// The model's input side in pixels, when its input leaves it open.
    #[arg(long, value_name = "PX", requires = "model")]
    model_size: Option<u32>,
    /// Per-channel mean subtracted from values in 0..1 before the model (R,G,B).
    #[arg(long, value_name = "R,G,B", value_parser = parse_triple, requires = "model", default_value = "0.485,0.456,0.406")]
    model_mean: [f32; 3],
    /// Per-channel standard deviation the values are divided by (R,G,B).
    #[arg(long, value_name = "R,G,B", value_parser = parse_triple, requires = "model", default_value = "0.229,0.224,0.225")]
    model_std: [f32; 3],
    /// The model output to take (default: its first).
    #[arg(long, value_name = "NAME", requires = "model")]
    model_output: Option<String>,
    /// Keep the vectors the build used (read or computed), with their ids, as a NumPy .npz:
    /// np.load reads it, and --vectors takes it back (computed vectors are then not computed again).
    #[arg(long, value_name = "FILE.npz")]
    save_vectors: Option<PathBuf>,
    /// Pictures the model runs at once (each core runs its own; 1 was fastest for a ResNet).
    #[arg(long, value_name = "N", requires = "model", default_value_t = 1)]
    model_batch: usize,
    /// The array of an .npz, or the tensor of a .safetensors, that holds the vectors (when it
    /// holds several).
    #[arg(long, value_name = "NAME")]
    vectors_key: Option<String>,
    /// A text file with one id per line, one line per vector row. Without it (or ids in the
    /// vectors' .npz), vectors match catalogue records in order.
    #[arg(long)]
    vector_ids: Option<PathBuf>,
    /// The catalogue: a delimited text file with a header row. Without it, items are numbered.
    #[arg(long)]
    catalogue: Option<PathBuf>,
    /// The catalogue column that holds each record's id.
    #[arg(long, default_value = "id")]
    id_column: String,
    /// A folder of images. Without it each item is drawn as a coloured mark; without --vectors
    /// the items' vectors are computed from these pictures (and without --catalogue every image
    /// file in it is an item, its id the file's path inside the folder without the extension).
    #[arg(long)]
    images: Option<PathBuf>,
    /// The catalogue column with each image's path inside --images (default: a column named
    /// image, image_path, file or filename; else files are found by id + image extension).
    #[arg(long)]
    image_column: Option<String>,
    /// The catalogue date field that orders the timeline map (default: the first date field).
    #[arg(long)]
    date_field: Option<String>,
    /// Where to write the atlas folder (replaced only when the build has succeeded).
    #[arg(long)]
    out: PathBuf,
    /// The atlas title shown in the viewer (default: the folder name).
    #[arg(long)]
    title: Option<String>,
    /// Distance between vectors.
    #[arg(long, value_enum, default_value = "cosine")]
    metric: MetricArg,
    /// How the neighbour graph is found: exact search, or NN-descent (approximate, for large collections).
    #[arg(long, value_enum, default_value = "auto")]
    neighbours: NeighbourArg,
    /// How the map's layout is optimised.
    #[arg(long, value_enum, default_value = "auto")]
    optimiser: OptimiserArg,
    /// Neighbours per item in the neighbour graph.
    #[arg(long, default_value_t = 15)]
    k: usize,
    /// Reduce the vectors to this many principal components (randomized PCA) before the
    /// neighbour graph; the explained variance is recorded in the atlas. Off by default.
    #[arg(long, value_name = "DIMS")]
    pca: Option<usize>,
    /// Keep every item's vector for the viewer, compressed to this many principal components of
    /// one byte each (the viewer scores items against marked examples and finds the items closest
    /// to one with them; ~64 bytes an item, fetched only when first used). 0 leaves them out.
    #[arg(long, value_name = "DIMS", default_value_t = 64)]
    browser_vectors: usize,
    /// Seed for every random choice: the same seed gives the same atlas.
    #[arg(long, default_value_t = 42)]
    seed: u64,
    /// UMAP's minimum distance between points on the map.
    #[arg(long, default_value_t = 0.1)]
    min_dist: f32,
    /// UMAP optimisation epochs (default 500 up to 10,000 items, else 200).
    #[arg(long)]
    epochs: Option<usize>,
    /// Thumbnail sizes (levels of detail) in pixels on the long side, smallest first,
    /// e.g. 16,64,256. Each level has its own sheets. [default: 32,128,512, leaving out
    /// sizes above --sheet-size]
    #[arg(long, value_delimiter = ',')]
    levels: Option<Vec<u32>>,
    /// Side of a thumbnail sheet in pixels.
    #[arg(long, default_value_t = 2048)]
    sheet_size: u32,
    /// JPEG quality of the sheets (1-100).
    #[arg(long, default_value_t = 85)]
    jpeg_quality: u8,
    /// Refuse images with more pixels than this (they get a placeholder and a report entry).
    #[arg(long, default_value_t = vitrine_images::decode::DEFAULT_MAX_PIXELS)]
    max_pixels: u64,
    /// Memory in MB that all threads together may hold in decoded full-size images at once; an
    /// image is decoded when its share is free, and one that needs more than all of it gets a
    /// placeholder and a report entry.
    #[arg(long, value_name = "MB", default_value_t = vitrine_images::decode::DEFAULT_DECODE_BUDGET >> 20)]
    decode_memory: u64,
    /// Stop the build when any image is missing or cannot be read, instead of drawing a
    /// placeholder for it.
    #[arg(long)]
    strict: bool,
    /// Folder where thumbnails are kept so that a rebuild reuses those of unchanged image
    /// files (same path, size and modification time). Default: ~/.cache/vitrine/thumbs.
    #[arg(long, value_name = "DIR")]
    thumb_cache: Option<PathBuf>,
    /// Make every thumbnail afresh and keep none.
    #[arg(long, conflicts_with = "thumb_cache")]
    no_thumb_cache: bool,
    /// The catalogue's delimiter: comma, semicolon, tab, bar (or the character itself). Found from
    /// its header row when left out.
    #[arg(long, value_parser = parse_delimiter)]
    delimiter: Option<u8>,
    /// The catalogue's text encoding: utf-8, windows-1252 or latin-1 (read as Windows-1252, which
    /// holds it). Found when left out: a file that is not UTF-8 is read as Windows-1252, and said.
    #[arg(long, value_parser = parse_encoding)]
    catalogue_encoding: Option<vitrine_build::catalogue::TextEncoding>,
    /// The sheet of a spreadsheet catalogue (.xlsx, .xls, .ods) to read (default: its first).
    #[arg(long)]
    sheet: Option<String>,
    /// Do not look for copies of one picture (they are looked for whenever there are images).
    #[arg(long)]
    no_copies: bool,
    /// Copies: two neighbours are a candidate pair when their distance is at most this share of
    /// the 75th percentile of the item's neighbour distances (0-1).
    #[arg(long, default_value_t = vitrine_build::copies::CopyRule::default().ratio)]
    copy_ratio: f32,
    /// Copies: a candidate is a copy when the perceptual hashes differ in at most this many bits
    /// of 64 (the least over 5 % and 10 % crops) ...
    #[arg(long, default_value_t = vitrine_build::copies::CopyRule::default().max_bits)]
    copy_bits: u32,
    /// ... and the pictures' colours correlate at least this much over the matched region (-1-1).
    #[arg(long, default_value_t = vitrine_build::copies::CopyRule::default().min_colour)]
    copy_colour: f32,
    /// A catalogue field that holds several values per record (keywords, subject headings,
    /// classification codes), filtered and counted value by value: FIELD, or FIELD=SEP to name
    /// the separator (default: the one its values use, `|` or `;`; `\n` a line break, `\t` a
    /// tab). Repeatable. Such fields are also found from their values (docs/building.md).
    #[arg(long = "multi-valued", value_name = "FIELD[=SEP]")]
    multi_valued: Vec<String>,
    /// A catalogue field read as one value per record even where its values look like several.
    /// Repeatable.
    #[arg(long = "single-valued", value_name = "FIELD")]
    single_valued: Vec<String>,
    /// Tile the atlas (format 3) with at most N items a tile of the similarity map, so that the
    /// viewer fetches only what is in view: for collections of millions (docs/atlas-format.md).
    #[arg(long, value_name = "N", value_parser = clap::value_parser!(u64).range(1..))]
    tile_items: Option<u64>,
    /// An IIIF Presentation 3 or 2.1 Manifest or Collection (an http(s) address or a file) as the
    /// catalogue and the pictures: one item per Canvas, its pictures fetched through the Image
    /// API at the size the thumbnails need. Replaces --catalogue and --images. See docs/iiif.md.
    #[arg(long, value_name = "URL-or-FILE")]
    iiif: Option<String>,
    /// Folder where pictures fetched from IIIF services are kept, so that an interrupted or
    /// repeated build fetches only what it lacks. Default: ~/.cache/vitrine/iiif.
    #[arg(long, value_name = "DIR", requires = "iiif")]
    iiif_cache: Option<PathBuf>,
    /// IIIF: requests at once (be polite to the institution's server).
    #[arg(long, default_value_t = 4, requires = "iiif")]
    iiif_concurrency: usize,
    /// IIIF: attempts per request after network failures and "busy" answers (429, 5xx).
    #[arg(long, default_value_t = 4, requires = "iiif")]
    iiif_attempts: u32,
    /// Folder with the viewer files to copy into the atlas (default: VITRINE_VIEWER, a folder
    /// "viewer" beside the program, else the files compiled into it).
    #[arg(long)]
    viewer: Option<PathBuf>,
    /// Print nothing but errors.
    #[arg(long)]
    quiet: bool,
}

impl BuildArgs {
    /// The flags as the build's options (checked by the build itself, before it reads anything).
    pub fn into_options(self) -> BuildOptions {
        let sheet_size = self.sheet_size;
        BuildOptions {
            vectors: self.vectors,
            save_vectors: self.save_vectors,
            engine: match self.model {
                None => vitrine_build::options::VectorEngine::BuiltIn,
                Some(path) => vitrine_build::options::VectorEngine::Model(
                    vitrine_images::onnx::ModelSettings {
                        path,
                        size: self.model_size,
                        mean: self.model_mean,
                        std: self.model_std,
                        output: self.model_output,
                        batch: self.model_batch,
                    },
                ),
            },
            vectors_key: self.vectors_key,
            vector_ids: self.vector_ids,
            catalogue: self.catalogue,
            id_column: self.id_column,
            images: self.images,
            date_field: self.date_field,
            image_column: self.image_column,
            out: self.out,
            title: self.title,
            metric: match self.metric {
                MetricArg::Cosine => Metric::Cosine,
                MetricArg::Euclidean => Metric::Euclidean,
            },
            neighbours: match self.neighbours {
                NeighbourArg::Auto => NeighbourSearch::Auto,
                NeighbourArg::Exact => NeighbourSearch::Exact,
                NeighbourArg::Approximate => NeighbourSearch::Approximate,
            },
            optimiser: match self.optimiser {
                OptimiserArg::Auto => Optimiser::Auto,
                OptimiserArg::Sequential => Optimiser::Sequential,
                OptimiserArg::Parallel => Optimiser::Parallel,
            },
            k: self.k,
            pca: self.pca,
            browser_vectors: self.browser_vectors,
            seed: self.seed,
            min_dist: self.min_dist,
            epochs: self.epochs,
            sheet_size,
            cells: self.levels.unwrap_or_else(|| {
                [32, 128, 512]
                    .into_iter()
                    .filter(|&c| c <= sheet_size)
                    .collect()
            }),
            jpeg_quality: self.jpeg_quality,
            max_pixels: self.max_pixels,
            decode_memory: self.decode_memory << 20,
            strict: self.strict,
            thumb_cache: if self.no_thumb_cache {
                None
            } else {
                self.thumb_cache.or_else(vitrine_images::cache::default_dir)
            },
            viewer: self.viewer,
            embedded_viewer: crate::embedded::FILES,
            catalogue_format: vitrine_build::catalogue::TableFormat {
                delimiter: self.delimiter,
                encoding: self.catalogue_encoding,
                sheet: self.sheet,
            },
            multi_valued: self
                .multi_valued
                .iter()
                .map(|m| match m.split_once('=') {
                    // \n and \t name a line break and a tab (lists in one spreadsheet cell).
                    Some((f, sep)) => (
                        f.to_string(),
                        Some(sep.replace("\\n", "\n").replace("\\t", "\t")),
                    ),
                    None => (m.clone(), None),
                })
                .collect(),
            single_valued: self.single_valued,
            tile_items: self.tile_items,
            iiif: self.iiif.map(|source| vitrine_build::iiif::IiifOptions {
                source,
                cache: self
                    .iiif_cache
                    .or_else(|| {
                        vitrine_images::cache::default_dir()
                            .and_then(|d| d.parent().map(|p| p.join("iiif")))
                    })
                    .unwrap_or_else(|| PathBuf::from(".vitrine-iiif")),
                concurrency: self.iiif_concurrency,
                attempts: self.iiif_attempts,
                long_side: 0,
            }),
            copies: (!self.no_copies).then_some(vitrine_build::copies::CopyRule {
                ratio: self.copy_ratio,
                max_bits: self.copy_bits,
                min_colour: self.copy_colour,
            }),
        }
    }
}

/// Three numbers separated by commas.
fn parse_triple(s: &str) -> Result<[f32; 3], String> {
    let v: Vec<f32> = s
        .split(',')
        .map(|x| x.trim().parse::<f32>())
        .collect::<Result<_, _>>()
        .map_err(|_| format!("{s:?}: give three numbers separated by commas"))?;
    v.try_into()
        .map_err(|_| format!("{s:?}: give three numbers separated by commas"))
}

fn parse_delimiter(s: &str) -> Result<u8, String> {
    match s.to_lowercase().as_str() {
        "comma" | "," => Ok(b','),
        "semicolon" | ";" => Ok(b';'),
        "tab" | "\\t" | "\t" => Ok(b'\t'),
        "bar" | "pipe" | "|" => Ok(b'|'),
        _ => Err(format!("{s:?}: give comma, semicolon, tab or bar")),
    }
}

fn parse_encoding(s: &str) -> Result<vitrine_build::catalogue::TextEncoding, String> {
    use vitrine_build::catalogue::TextEncoding;
    match s.to_lowercase().replace('_', "-").as_str() {
        "utf-8" | "utf8" => Ok(TextEncoding::Utf8),
        "windows-1252" | "cp1252" | "latin-1" | "latin1" | "iso-8859-1" => {
            Ok(TextEncoding::Windows1252)
        }
        _ => Err(format!("{s:?}: give utf-8, windows-1252 or latin-1")),
    }
}

pub fn run(args: BuildArgs) -> Result<()> {
    let progress = Terminal { quiet: args.quiet };
    let opts = args.into_options();
    let report = build(&opts, &progress)?;
    if progress.quiet {
        return Ok(());
    }
    let laps: Vec<String> = report
        .stages
        .iter()
        .zip(&report.stage_peak_memory_mib)
        .map(|((name, s), m)| match m {
            Some(m) => format!("{name} {s:.1} s ({m:.0} MiB)"),
            None => format!("{name} {s:.1} s"),
        })
        .collect();
    let total: f64 = report.stages.iter().map(|(_, s)| s).sum();
    eprintln!("time: {} (total {total:.1} s)", laps.join(", "));
    if let Some(m) = report.peak_memory_mib {
        eprintln!("peak memory: {m:.0} MiB");
    }
    for note in &report.notes {
        eprintln!("note: {note}");
    }
    for p in report.image_problems.iter().take(10) {
        if p.path.is_empty() {
            eprintln!("  image for {}: {}", p.id, p.reason);
        } else {
            eprintln!("  image for {}: {} ({})", p.id, p.reason, p.path);
        }
    }
    if !report.image_problems.is_empty() || !report.value_warnings.is_empty() {
        eprintln!("details: {}", opts.out.join("build-report.json").display());
    }
    Ok(())
}
