//! The `vitrine` command: a thin layer that parses flags and calls the library.

// The map engine allocates and frees large buffers every round; this allocator, told to by
// `keep_freed_memory`, keeps them mapped instead of handing them back to the system and
// faulting them in again.
#[global_allocator]
static ALLOCATOR: mimalloc::MiMalloc = mimalloc::MiMalloc;

use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Parser, Subcommand, ValueEnum};
use vitrine_build::pipeline::{build, BuildOptions};
use vitrine_build::read::{export_positions, inspect, Atlas};
use vitrine_map::knn::Metric;

#[derive(Parser)]
#[command(
    name = "vitrine",
    version,
    about = "Build and share image-collection atlases"
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Clone, Copy, ValueEnum)]
enum MetricArg {
    Cosine,
    Euclidean,
}

#[derive(Clone, Copy, ValueEnum)]
enum NeighbourArg {
    /// Exact up to 20,000 items, NN-descent above.
    Auto,
    Exact,
    Approximate,
}

#[derive(Clone, Copy, ValueEnum)]
enum OptimiserArg {
    /// Sequential up to 50,000 items, parallel above.
    Auto,
    /// The method as published, on one core; keeps neighbourhoods best.
    Sequential,
    /// Over all cores; the same map for any number of threads.
    Parallel,
}

#[derive(Subcommand)]
enum Command {
    /// Build an atlas folder from feature vectors, a catalogue and images.
    Build {
        /// Feature vectors: a NumPy .npy file, items x dimensions (float16, float32 or float64).
        #[arg(long)]
        vectors: PathBuf,
        /// A text file with one id per line, one line per vector row. Without it, vectors match
        /// catalogue records in order.
        #[arg(long)]
        vector_ids: Option<PathBuf>,
        /// The catalogue: a CSV file with a header row. Without it, items are numbered.
        #[arg(long)]
        catalogue: Option<PathBuf>,
        /// The catalogue column that holds each record's id.
        #[arg(long, default_value = "id")]
        id_column: String,
        /// A folder of images. Optional: without it each item is drawn as a coloured mark.
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
        /// Folder with the viewer files to copy into the atlas (default: found beside the program).
        #[arg(long)]
        viewer: Option<PathBuf>,
        /// Print nothing but errors.
        #[arg(long)]
        quiet: bool,
    },
    /// Serve an atlas folder over HTTP on this machine.
    Serve {
        /// The atlas folder to serve.
        dir: PathBuf,
        /// Address to listen on. 127.0.0.1 keeps the atlas on this machine; 0.0.0.0 shows it to your network.
        #[arg(long, default_value = "127.0.0.1")]
        host: String,
        #[arg(long, default_value_t = 8080)]
        port: u16,
    },
    /// Print an atlas's counts, fields, maps, quality figures and provenance, after checking every array.
    Inspect {
        /// The atlas folder.
        atlas: PathBuf,
    },
    /// Write data out of an atlas.
    Export {
        /// The atlas folder.
        atlas: PathBuf,
        /// CSV with each item's id and its x, y on every map, one row per item in atlas order.
        #[arg(long)]
        positions: PathBuf,
        /// Replace the file if it exists.
        #[arg(long)]
        force: bool,
    },
    /// Rebuild a corpus without a browser: from a corpus file (saved in the viewer) and/or a
    /// selection given here, write its catalogue rows (CSV), its corpus file (JSON: the ids and
    /// how they were chosen) and an IIIF Presentation 3 Manifest. The corpus is the selected items
    /// that pass every filter; with nothing selected, every item that passes them.
    Corpus {
        /// The atlas folder.
        atlas: PathBuf,
        /// A corpus file to start from (its map, steps and filters; flags below add to them).
        #[arg(long)]
        from: Option<PathBuf>,
        /// The map the lassos and rectangles are in (default: the corpus file's, else the first).
        #[arg(long)]
        map: Option<String>,
        /// Add the items inside a lasso, "x1,y1 x2,y2 ..." in map coordinates (even-odd rule for
        /// outlines that cross themselves). Repeatable.
        #[arg(long, allow_hyphen_values = true)]
        lasso: Vec<String>,
        /// Remove the items inside a lasso (from every item when nothing else is selected). Repeatable.
        #[arg(long = "subtract-lasso", allow_hyphen_values = true)]
        subtract_lasso: Vec<String>,
        /// Add the items inside a rectangle "x0,y0,x1,y1" in map coordinates. Repeatable.
        #[arg(long, allow_hyphen_values = true)]
        rect: Vec<String>,
        /// Add items by id, comma-separated.
        #[arg(long, value_delimiter = ',')]
        ids: Vec<String>,
        /// Keep items whose category FIELD has VALUE: FIELD=VALUE. Repeat for more values of one
        /// field (any of them) or other fields (all of them).
        #[arg(long)]
        filter: Vec<String>,
        /// Keep items whose number FIELD lies in MIN..MAX (either may be left out): FIELD=MIN..MAX.
        #[arg(long, allow_hyphen_values = true)]
        range: Vec<String>,
        /// Keep items dated in FROM..TO years: [FIELD=]FROM..TO (the field may be left out when the
        /// catalogue has one date field).
        #[arg(long, allow_hyphen_values = true)]
        date: Vec<String>,
        /// How --date treats an item's dating range: overlap (shares a year) or within (inside).
        #[arg(long = "date-rule", default_value = "overlap")]
        date_rule: String,
        /// Keep items where every word occurs (ignoring case and accents) in --search-in's fields.
        #[arg(long)]
        search: Option<String>,
        /// The fields --search looks in, comma-separated (default: every text and category field).
        #[arg(long = "search-in", value_delimiter = ',')]
        search_in: Vec<String>,
        /// Write the corpus's catalogue rows here (CSV, the id column first).
        #[arg(long)]
        csv: Option<PathBuf>,
        /// Write the corpus file here (JSON: ids, steps, filters, atlas hash, build parameters, time).
        #[arg(long)]
        json: Option<PathBuf>,
        /// Write an IIIF Presentation 3 Manifest here, one Canvas per item.
        #[arg(long)]
        iiif: Option<PathBuf>,
        /// Where the IIIF Manifest will be published (its ids are made under this address).
        #[arg(long = "base-url")]
        base_url: Option<String>,
        /// Replace output files that exist.
        #[arg(long)]
        force: bool,
    },
}

fn run() -> anyhow::Result<()> {
    match Cli::parse().command {
        Command::Build {
            vectors,
            vector_ids,
            catalogue,
            id_column,
            images,
            image_column,
            date_field,
            out,
            title,
            metric,
            neighbours,
            optimiser,
            k,
            pca,
            seed,
            min_dist,
            epochs,
            levels,
            sheet_size,
            jpeg_quality,
            max_pixels,
            strict,
            thumb_cache,
            no_thumb_cache,
            viewer,
            quiet,
        } => {
            if !(1..=100).contains(&jpeg_quality) {
                anyhow::bail!("--jpeg-quality must be between 1 and 100");
            }
            if !(64..=4096).contains(&sheet_size) {
                anyhow::bail!("--sheet-size must be between 64 and 4096");
            }
            let mut opts = BuildOptions::new(vectors, out);
            opts.vector_ids = vector_ids;
            opts.catalogue = catalogue;
            opts.id_column = id_column;
            opts.images = images;
            opts.image_column = image_column;
            opts.date_field = date_field;
            opts.title = title;
            opts.metric = match metric {
                MetricArg::Cosine => Metric::Cosine,
                MetricArg::Euclidean => Metric::Euclidean,
            };
            opts.k = k;
            if pca == Some(0) {
                anyhow::bail!("--pca must be at least 1 (or left out for no reduction)");
            }
            opts.pca = pca;
            opts.optimiser = match optimiser {
                OptimiserArg::Auto => vitrine_build::pipeline::Optimiser::Auto,
                OptimiserArg::Sequential => vitrine_build::pipeline::Optimiser::Sequential,
                OptimiserArg::Parallel => vitrine_build::pipeline::Optimiser::Parallel,
            };
            opts.neighbours = match neighbours {
                NeighbourArg::Auto => vitrine_build::pipeline::NeighbourSearch::Auto,
                NeighbourArg::Exact => vitrine_build::pipeline::NeighbourSearch::Exact,
                NeighbourArg::Approximate => vitrine_build::pipeline::NeighbourSearch::Approximate,
            };
            opts.seed = seed;
            opts.min_dist = min_dist;
            opts.epochs = epochs;
            opts.sheet_size = sheet_size;
            opts.cells = levels.unwrap_or_else(|| {
                [32, 128, 512]
                    .into_iter()
                    .filter(|&c| c <= sheet_size)
                    .collect()
            });
            opts.jpeg_quality = jpeg_quality;
            if max_pixels == 0 {
                anyhow::bail!("--max-pixels must be at least 1");
            }
            opts.max_pixels = max_pixels;
            opts.strict = strict;
            opts.thumb_cache = if no_thumb_cache {
                None
            } else {
                thumb_cache.or_else(vitrine_images::cache::default_dir)
            };
            opts.viewer = viewer;
            opts.quiet = quiet;
            let report = build(&opts)?;
            if !opts.quiet {
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
            }
        }
        Command::Serve { dir, host, port } => {
            if !dir.join(vitrine_format::MANIFEST_FILE).is_file() {
                anyhow::bail!(
                    "{} is not an atlas folder (it has no {})",
                    dir.display(),
                    vitrine_format::MANIFEST_FILE
                );
            }
            let local = host == "127.0.0.1" || host == "localhost" || host == "::1";
            vitrine_cli::http::serve(&dir, &host, port, |url| {
                println!("Serving {} at {url}  (Ctrl-C stops)", dir.display());
                if !local {
                    eprintln!(
                        "warning: listening on {host}: other machines on your network can open this atlas, \
                         with its thumbnails and catalogue data"
                    );
                }
            })?;
        }
        Command::Inspect { atlas } => {
            let a = Atlas::open(&atlas)?;
            print!("{}", inspect(&a)?);
        }
        Command::Export {
            atlas,
            positions,
            force,
        } => {
            let a = Atlas::open(&atlas)?;
            let inside = |p: &std::path::Path| -> bool {
                let parent = p
                    .parent()
                    .filter(|p| !p.as_os_str().is_empty())
                    .unwrap_or(std::path::Path::new("."));
                match (parent.canonicalize(), atlas.canonicalize()) {
                    (Ok(pp), Ok(ap)) => pp.starts_with(ap),
                    _ => false,
                }
            };
            if inside(&positions) {
                anyhow::bail!(
                    "--positions {}: that is inside the atlas folder; write exports elsewhere",
                    positions.display()
                );
            }
            if positions.exists() && !force {
                anyhow::bail!(
                    "--positions {}: the file exists (add --force to replace it)",
                    positions.display()
                );
            }
            export_positions(&a, &positions)?;
            eprintln!(
                "wrote {} ({} items)",
                positions.display(),
                a.manifest.item_count
            );
        }
        Command::Corpus {
            atlas,
            from,
            map,
            lasso,
            subtract_lasso,
            rect,
            ids,
            filter,
            range,
            date,
            date_rule,
            search,
            search_in,
            csv,
            json,
            iiif,
            base_url,
            force,
        } => {
            let args = vitrine_cli::corpus::CorpusArgs {
                from,
                map,
                lassos: lasso,
                subtract: subtract_lasso,
                rects: rect,
                ids,
                filters: filter,
                ranges: range,
                dates: date,
                date_rule: Some(date_rule),
                search,
                search_in,
                csv,
                json,
                iiif,
                base_url,
                force,
                time: None,
            };
            let r = vitrine_cli::corpus::run(&atlas, &args)?;
            println!("{} items: {}", r.count, r.description);
            for p in &r.written {
                eprintln!("wrote {}", p.display());
            }
            for n in &r.notes {
                eprintln!("note: {n}");
            }
        }
    }
    Ok(())
}

fn main() -> ExitCode {
    vitrine_cli::keep_freed_memory();
    match run() {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: {e:#}");
            ExitCode::FAILURE
        }
    }
}
