//! The build's computing stages, each a function from typed values to a typed value: reduction,
//! neighbour graph, similarity map, timeline map, and the arrangement (clusters, lattice, quality
//! figures, atlas order). The map engine (`vitrine-map`) does the work; this module chooses its
//! settings from the options and reports what it chose.

use vitrine_format::YearRange;
use vitrine_map::clusters::louvain;
use vitrine_map::knn::{self, KnnGraph, Metric};
use vitrine_map::lattice::Lattice;
use vitrine_map::matrix::Matrix;
use vitrine_map::pca::Pca;
use vitrine_map::quality::{MapQuality, QualitySample};
use vitrine_map::rng::Rng;
use vitrine_map::spectral::StartReport;
use vitrine_map::timeline_map::TimelineMap;
use vitrine_map::umap::{self, FuzzyGraph, UmapParams};

use crate::options::BuildOptions;
use crate::progress::Progress;

/// Items in the sample on which trustworthiness and continuity are measured.
pub const QUALITY_SAMPLE: usize = 2000;

/// The rows the quality figures are measured on, kept from the vectors as given (before any
/// reduction), so that a reduced build still measures its maps against the originals.
pub struct QualityRows {
    idx: Vec<usize>,
    rows: Matrix,
}

impl QualityRows {
    pub fn new(vectors: &Matrix) -> QualityRows {
        let idx = vitrine_map::quality::sample(vectors.rows, QUALITY_SAMPLE);
        let rows = Matrix {
            rows: idx.len(),
            cols: vectors.cols,
            data: idx.iter().flat_map(|&i| vectors.row(i)).copied().collect(),
        };
        QualityRows { idx, rows }
    }
}

/// What was done to the vectors before the neighbour graph.
pub struct Reduction {
    pub input_dimensions: usize,
    pub pca: Option<Pca>,
    pub notes: Vec<String>,
}

/// The vectors the graph is found on, and by which distance.
pub struct Reduced {
    pub vectors: Matrix,
    pub metric: Metric,
    pub reduction: Reduction,
}

/// Optional PCA pre-reduction. Cosine vectors are unit-normalised first; in the reduced space
/// the graph is found by Euclidean distance (and [`neighbour_graph`] turns the distances back
/// into cosine distances).
pub fn reduce(vectors: Matrix, opts: &BuildOptions, progress: &dyn Progress) -> Reduced {
    let input_dimensions = vectors.cols;
    let mut notes = Vec::new();
    let (vectors, metric, pca) = match opts.pca {
        Some(dims) if dims < vectors.cols && vectors.rows > 1 => {
            let prepared = knn::prepare(&vectors, opts.metric);
            drop(vectors);
            let bar = progress.bar("PCA", vitrine_map::pca::FIT_STEPS);
            let fit = vitrine_map::pca::fit_with_progress(&prepared, dims, opts.seed, &|i, of| {
                bar.set(i, of)
            });
            let reduced = vitrine_map::pca::project(&prepared, &fit);
            drop(bar);
            progress.note(&format!(
                "PCA: {} -> {} dimensions, {:.1} % of the variance kept (fitted on {} items)",
                input_dimensions,
                reduced.cols,
                100.0 * fit.explained(),
                fit.fit_rows
            ));
            (reduced, Metric::Euclidean, Some(fit))
        }
        Some(dims) => {
            let note = format!(
                "--pca {dims}: not fewer than the vectors' {input_dimensions} dimensions (or a single item); the vectors are used as given",
            );
            progress.note(&note);
            notes.push(note);
            (vectors, opts.metric, None)
        }
        None => (vectors, opts.metric, None),
    };
    Reduced {
        vectors,
        metric,
        reduction: Reduction {
            input_dimensions,
            pca,
            notes,
        },
    }
}

/// Every item's vector compressed for the browser (None when the build keeps none).
pub fn browser_vectors(
    reduced: &Reduced,
    opts: &BuildOptions,
    progress: &dyn Progress,
) -> Option<vitrine_map::compress::Compressed> {
    if opts.browser_vectors == 0 || reduced.vectors.rows == 0 {
        return None;
    }
    let c = vitrine_map::compress::compress(
        &reduced.vectors,
        opts.metric,
        reduced.reduction.pca.as_ref(),
        opts.browser_vectors,
        opts.seed,
    );
    progress.note(&format!(
        "vectors for the browser: {} components of one byte, {:.1} % of the variance",
        c.dims,
        100.0 * c.explained_variance
    ));
    Some(c)
}

/// The neighbour graph and how it was found.
pub struct NeighbourGraph {
    pub graph: KnnGraph,
    pub exact: bool,
    /// NN-descent's recall against exact search, and the number of items it was measured on.
    pub recall: Option<(f64, usize)>,
    /// NN-descent's settings and what it did (none for an exact graph).
    pub search: Option<(
        vitrine_map::nndescent::NnDescentParams,
        vitrine_map::nndescent::DescentReport,
    )>,
}

pub fn neighbour_graph(
    reduced: &Reduced,
    opts: &BuildOptions,
    progress: &dyn Progress,
) -> NeighbourGraph {
    let (vectors, metric) = (&reduced.vectors, reduced.metric);
    let n = vectors.rows;
    let k = opts.k.min(n.saturating_sub(1)).max(1);
    let exact = opts.exact_neighbours(n);
    let (mut recall, mut search) = (None, None);
    let mut graph = if exact {
        let bar = progress.bar("neighbours", n as u64);
        knn::exact_knn(vectors, k, metric, &|c| bar.set(c, n as u64))
    } else {
        // Exact neighbours of a sample, first: NN-descent checks its recall on them (and widens its
        // lists if it falls short), and the final recall is recorded with the map's quality figures.
        let sample = vitrine_map::quality::sample(n, 500);
        let truth = vitrine_map::nndescent::exact_for(vectors, metric, k, &sample);
        let bar = progress.bar("neighbours", 1);
        let params = vitrine_map::nndescent::NnDescentParams::new(k, opts.seed);
        let known = vitrine_map::nndescent::Known {
            sample: &sample,
            truth: &truth,
        };
        let (g, report) = vitrine_map::nndescent::nn_descent_with(
            vectors,
            metric,
            &params,
            Some(known),
            &|stage, i, of| {
                bar.rename(stage);
                bar.set(i, of);
            },
        );
        drop(bar);
        let r = vitrine_map::nndescent::recall(&g, &truth, &sample);
        progress.note(&format!(
            "neighbour graph: NN-descent, recall@{k} {r:.3} on {} sampled items",
            sample.len()
        ));
        recall = Some((r, sample.len()));
        search = Some((params, report));
        g
    };
    if reduced.reduction.pca.is_some() && opts.metric == Metric::Cosine {
        // Euclidean distances of unit vectors back to cosine distances: 1 - cos = |u - v|^2 / 2.
        graph.distances.iter_mut().for_each(|d| *d = 0.5 * *d * *d);
    }
    NeighbourGraph {
        graph,
        exact,
        recall,
        search,
    }
}

/// The similarity map: a UMAP layout of the fuzzy neighbour graph from a spectral start.
pub struct SimilarityMap {
    pub fuzzy: FuzzyGraph,
    pub positions: Vec<[f32; 2]>,
    pub params: UmapParams,
    pub start: StartReport,
    /// The start's first axis: the 1-D start of the timeline map's similarity order.
    pub order_start: Vec<[f32; 1]>,
}

pub fn similarity_map(
    reduced: &Reduced,
    graph: &KnnGraph,
    opts: &BuildOptions,
    progress: &dyn Progress,
) -> SimilarityMap {
    let n = reduced.vectors.rows;
    let params = UmapParams {
        min_dist: opts.min_dist,
        epochs: opts.epochs,
        seed: opts.seed,
        parallel: opts.parallel_layout(n),
        ..UmapParams::default()
    };
    let fuzzy = umap::fuzzy_graph(graph);
    let mut rng = Rng::new(opts.seed);
    let start_vectors = knn::prepare(&reduced.vectors, reduced.metric);
    let pca = umap::pca_start(&start_vectors, &mut rng);
    drop(start_vectors);
    let (start, report) = vitrine_map::spectral::spectral_start(&fuzzy, &pca, opts.seed);
    drop(pca);
    progress.note(&format!(
        "map start: {} ({} connected part(s) of the graph, {} laid out spectrally, residual {:.1e})",
        report.method, report.parts, report.spectral_parts, report.max_residual
    ));
    let order_start: Vec<[f32; 1]> = start.iter().map(|p| [p[0]]).collect();
    let bar = progress.bar("layout", 1);
    let positions = umap::layout(&fuzzy, start, &params, &|e, total| {
        bar.set(e as u64, total as u64)
    });
    drop(bar);
    progress.note(&format!(
        "map: {} items, {} graph edges",
        n,
        fuzzy.weights.len()
    ));
    SimilarityMap {
        fuzzy,
        positions,
        params,
        start: report,
        order_start,
    }
}

/// The timeline map by `field`'s datings (None when no item is dated).
pub fn timeline_map(
    map: &mut SimilarityMap,
    field: &str,
    ranges: &[Option<YearRange>],
    progress: &dyn Progress,
) -> Option<TimelineMap> {
    let bar = progress.bar("timeline", 1);
    let t = vitrine_map::timeline_map::timeline_map(
        &map.fuzzy,
        std::mem::take(&mut map.order_start),
        ranges,
        field,
        &map.params,
        &|e, total| bar.set(e as u64, total as u64),
    );
    drop(bar);
    if let Some(t) = &t {
        progress.note(&format!(
            "timeline map: by {field:?}, {} of {} items dated",
            t.dated,
            ranges.len()
        ));
    }
    t
}

/// The lattice: the similarity map snapped to a grid, one item per cell.
pub struct LatticeMap {
    pub lattice: Lattice,
    pub positions: Vec<[f32; 2]>,
    pub quality: Option<MapQuality>,
}

pub fn clusters(map: &SimilarityMap) -> Vec<u32> {
    louvain(map.positions.len(), &map.fuzzy, 1.0)
}

pub fn lattice(map: &SimilarityMap) -> LatticeMap {
    let lattice = vitrine_map::lattice::lattice(&map.positions);
    let positions = lattice
        .cells
        .iter()
        .map(|c| [c[0] as f32, c[1] as f32])
        .collect();
    LatticeMap {
        lattice,
        positions,
        quality: None,
    }
}

/// Trustworthiness and continuity at 10 of the similarity map and the lattice (filled into
/// `lattice.quality`), measured against the vectors as given.
pub fn quality_figures(
    rows: QualityRows,
    metric: Metric,
    map: &SimilarityMap,
    lattice: &mut LatticeMap,
    progress: &dyn Progress,
) -> Option<MapQuality> {
    let sample = QualitySample::new(&rows.rows, rows.idx, metric);
    drop(rows.rows);
    let quality = sample.quality(&map.positions, 10);
    lattice.quality = sample.quality(&lattice.positions, 10);
    if let Some(q) = &quality {
        progress.note(&format!(
            "map quality on {} items: trustworthiness@10 {:.3}, continuity@10 {:.3}",
            q.sample, q.trustworthiness, q.continuity
        ));
    }
    quality
}

/// Atlas order: items along a Hilbert curve over the similarity map, so that a run of items is
/// a region of the map; in a tiled atlas, the tile pyramid's leaf order over that (each leaf one
/// run, the curve's order kept within it).
pub struct AtlasOrder {
    /// `order[new] = old`.
    pub order: Vec<usize>,
    /// `rank[old] = new`.
    pub rank: Vec<u32>,
    /// The similarity map's tile pyramid, when the atlas is tiled (leaves of at most this many).
    pub pyramid: Option<vitrine_format::pyramid::Pyramid>,
}

pub fn atlas_order(map: &SimilarityMap, tile_items: Option<u64>) -> AtlasOrder {
    let mut order = vitrine_map::hilbert::hilbert_order(&map.positions);
    let pyramid = tile_items.map(|capacity| {
        let xy: Vec<f32> = order.iter().flat_map(|&i| map.positions[i]).collect();
        let (p, leaf) = crate::tiles::leaf_order(&xy, capacity);
        order = leaf.iter().map(|&k| order[k as usize]).collect();
        p
    });
    let mut rank = vec![0u32; order.len()];
    for (new, &old) in order.iter().enumerate() {
        rank[old] = new as u32;
    }
    AtlasOrder {
        order,
        rank,
        pyramid,
    }
}

/// Everything the stages computed, handed to the writer.
pub struct Computed {
    pub reduction: Reduction,
    pub graph: NeighbourGraph,
    pub map: SimilarityMap,
    pub timeline: Option<TimelineMap>,
    pub clusters: Vec<u32>,
    pub lattice: LatticeMap,
    pub quality: Option<MapQuality>,
    pub order: AtlasOrder,
    pub browser_vectors: Option<vitrine_map::compress::Compressed>,
}
