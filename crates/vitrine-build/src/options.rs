//! What a build is asked to do: every setting in one typed value, checked once before any work.

use std::path::PathBuf;

use anyhow::{bail, Result};
use vitrine_map::knn::Metric;

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

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NeighbourSearch {
    Auto,
    Exact,
    Approximate,
}

/// What computes each item's vector from its image when the build is given no vectors.
#[derive(Debug, Clone, PartialEq)]
pub enum VectorEngine {
    /// The built-in descriptor (`vitrine_images::describe`).
    BuiltIn,
    /// An ONNX image model (`vitrine_images::onnx`).
    Model(vitrine_images::onnx::ModelSettings),
}

#[derive(Debug, Clone)]
pub struct BuildOptions {
    /// The vectors file (None: vectors are computed from the images by `engine`).
    pub vectors: Option<PathBuf>,
    /// What computes the vectors when there is no vectors file.
    pub engine: VectorEngine,
    /// Where to keep the vectors the build used, with their ids, as a NumPy `.npz` (None: not kept).
    pub save_vectors: Option<PathBuf>,
    pub vector_ids: Option<PathBuf>,
    /// The array of an `.npz`, or the tensor of a `.safetensors`, that holds the vectors.
    pub vectors_key: Option<String>,
    pub catalogue: Option<PathBuf>,
    /// The catalogue's delimiter and encoding, when given (else found from the file).
    pub catalogue_format: crate::catalogue::TableFormat,
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
    /// Components of the vectors compressed for the browser (0: none kept).
    pub browser_vectors: usize,
    pub seed: u64,
    pub min_dist: f32,
    pub epochs: Option<usize>,
    pub sheet_size: u32,
    pub cells: Vec<u32>,
    pub jpeg_quality: u8,
    /// Images with more pixels than this get a placeholder (a decompression-bomb guard).
    pub max_pixels: u64,
    /// Bytes all threads together may hold in decoded full-size images at once.
    pub decode_memory: u64,
    /// Stop the build when any image cannot be used, instead of drawing a placeholder.
    pub strict: bool,
    /// Where thumbnails of unchanged image files are kept for the next build (None: no cache).
    pub thumb_cache: Option<PathBuf>,
    /// Folder with the viewer files to copy into the atlas (None: found beside the program).
    pub viewer: Option<PathBuf>,
    /// The viewer files the program holds (path inside the atlas, bytes): written when no folder
    /// of them is given or found.
    pub embedded_viewer: &'static [(&'static str, &'static [u8])],
    /// How copies of one picture are found, when there are images (None: not looked for).
    pub copies: Option<crate::copies::CopyRule>,
    /// An IIIF Manifest or Collection as the catalogue and the pictures (its `long_side` is set
    /// from the largest thumbnail level).
    pub iiif: Option<crate::iiif::IiifOptions>,
    /// Catalogue fields that hold several values per record, with their separator (None: the one
    /// the values use), whatever the values show.
    pub multi_valued: Vec<(String, Option<String>)>,
    /// Catalogue fields read as one value per record, whatever the values show.
    pub single_valued: Vec<String>,
    /// Most items a tile of the similarity map holds: the atlas is then tiled (format 3), so that
    /// the viewer fetches what is in view. None: one atlas fetched whole (format 2).
    pub tile_items: Option<u64>,
}

impl BuildOptions {
    pub fn new(vectors: PathBuf, out: PathBuf) -> BuildOptions {
        BuildOptions {
            vectors: Some(vectors),
            engine: VectorEngine::BuiltIn,
            save_vectors: None,
            vector_ids: None,
            vectors_key: None,
            catalogue: None,
            catalogue_format: Default::default(),
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
            browser_vectors: vitrine_map::compress::DEFAULT_DIMS,
            seed: 42,
            min_dist: 0.1,
            epochs: None,
            sheet_size: 2048,
            cells: vec![32, 128, 512],
            jpeg_quality: 85,
            max_pixels: vitrine_images::decode::DEFAULT_MAX_PIXELS,
            decode_memory: vitrine_images::decode::DEFAULT_DECODE_BUDGET,
            strict: false,
            thumb_cache: None,
            viewer: None,
            embedded_viewer: &[],
            copies: Some(crate::copies::CopyRule::default()),
            iiif: None,
            multi_valued: Vec::new(),
            single_valued: Vec::new(),
            tile_items: None,
        }
    }

    /// Refuses settings no build can honour, before anything is read.
    pub fn check(&self) -> Result<()> {
        if !(1..=100).contains(&self.jpeg_quality) {
            bail!("--jpeg-quality must be between 1 and 100");
        }
        if !(64..=4096).contains(&self.sheet_size) {
            bail!("--sheet-size must be between 64 and 4096");
        }
        if self.pca == Some(0) {
            bail!("--pca must be at least 1 (or left out for no reduction)");
        }
        if self.max_pixels == 0 {
            bail!("--max-pixels must be at least 1");
        }
        if self.decode_memory < 64 << 20 {
            bail!("--decode-memory must be at least 64 (MB)");
        }
        if let Some(i) = &self.iiif {
            if self.images.is_some() || self.catalogue.is_some() {
                bail!("--iiif gives the catalogue and the pictures: leave out --catalogue and --images");
            }
            if self.image_column.is_some() {
                bail!("--image-column names a catalogue column; with --iiif the pictures come from the Canvases");
            }
            if i.concurrency == 0 || i.concurrency > 32 {
                bail!("--iiif-concurrency must be between 1 and 32");
            }
            if i.attempts == 0 || i.attempts > 10 {
                bail!("--iiif-attempts must be between 1 and 10");
            }
        }
        if self.vectors.is_none() {
            if self.images.is_none() && self.iiif.is_none() {
                bail!("give --vectors, or --images (or --iiif) to compute each item's vector from its picture");
            }
            if self.vector_ids.is_some() {
                bail!("--vector-ids names the rows of a --vectors file; without one, items are the catalogue's records (or the image files)");
            }
            if self.vectors_key.is_some() {
                bail!("--vectors-key names an array of a --vectors file; there is none");
            }
        } else if self.engine != VectorEngine::BuiltIn {
            bail!(
                "--model computes vectors from the images; leave it out when --vectors gives them"
            );
        }
        if let VectorEngine::Model(m) = &self.engine {
            if !(1..=256).contains(&m.batch) {
                bail!("--model-batch must be between 1 and 256");
            }
            if m.std.iter().any(|s| !(s.is_finite() && *s > 0.0))
                || m.mean.iter().any(|v| !v.is_finite())
            {
                bail!("--model-std must be three numbers above 0, --model-mean three numbers");
            }
        }
        if let Some(p) = &self.save_vectors {
            if crate::folder::lower_extension(p) != "npz" {
                bail!(
                    "--save-vectors {}: give a file name ending in .npz",
                    p.display()
                );
            }
        }
        crate::folder::check_out(&self.out)?;
        if let Some(v) = &self.viewer {
            if crate::folder::viewer_dir(Some(v)).is_none() {
                bail!("--viewer {}: not a folder with the viewer's index.html (./build.sh atlas makes one in target/viewer)", v.display());
            }
        }
        if let Some(c) = &self.copies {
            if !(c.ratio > 0.0 && c.ratio <= 1.0) {
                bail!("--copy-ratio must be above 0 and at most 1");
            }
            if c.max_bits > 32 {
                bail!("--copy-bits must be at most 32 (of the hash's 64; unrelated pictures differ in 32 on average)");
            }
            if !(-1.0..=1.0).contains(&c.min_colour) {
                bail!("--copy-colour must be between -1 and 1");
            }
        }
        for (f, sep) in &self.multi_valued {
            if self.single_valued.contains(f) {
                bail!("{f:?} is named by both --multi-valued and --single-valued");
            }
            if sep.as_deref().is_some_and(str::is_empty) {
                bail!("--multi-valued {f}=SEP: the separator is empty");
            }
            if self.multi_valued.iter().filter(|(g, _)| g == f).count() > 1 {
                bail!("--multi-valued names {f:?} more than once");
            }
            if *f == self.id_column {
                bail!("--multi-valued {f:?}: that is the id column, one id per record");
            }
        }
        if self.k == 0 {
            bail!("--k must be at least 1");
        }
        if self.cells.is_empty()
            || self.cells.windows(2).any(|w| w[0] >= w[1])
            || self.cells.iter().any(|&c| c < 8 || c > self.sheet_size)
        {
            bail!(
                "--levels {:?}: give the thumbnail sizes smallest first, each from 8 px to the sheet size ({} px)",
                self.cells,
                self.sheet_size
            );
        }
        Ok(())
    }

    /// Whether the graph is found by exact search for `n` items.
    pub fn exact_neighbours(&self, n: usize) -> bool {
        match self.neighbours {
            NeighbourSearch::Exact => true,
            NeighbourSearch::Approximate => false,
            NeighbourSearch::Auto => n <= EXACT_UP_TO,
        }
    }

    /// Whether the layout is optimised in parallel blocks for `n` items.
    pub fn parallel_layout(&self, n: usize) -> bool {
        match self.optimiser {
            Optimiser::Auto => n > SEQUENTIAL_UP_TO,
            Optimiser::Sequential => false,
            Optimiser::Parallel => true,
        }
    }
}
