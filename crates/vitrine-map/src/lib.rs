//! The map engine: from feature vectors to neighbour graph, maps, clusters and quality figures.
//!
//! - vectors: [`matrix`], distances in [`kernels`] (SIMD where the processor has it), an optional
//!   [`pca`] pre-reduction (with the small dense solver in [`linalg`]);
//! - the neighbour graph: [`knn`] (exact) and [`nndescent`] (approximate, for large collections);
//! - maps: [`umap`] (fuzzy graph, layout optimisers in any dimension) started by [`spectral`],
//!   the [`timeline_map`] (dating across, similarity order down) and the [`lattice`] (one item per
//!   grid cell); [`hilbert`] orders the items along the similarity map;
//! - [`clusters`] (Louvain communities and their catalogue labels) and [`quality`]
//!   (trustworthiness and continuity).
//!
//! Invariants: deterministic for a seed whatever the number of threads ([`rng`] is the one source
//! of randomness); no I/O — callers hand in vectors and callbacks for progress.

pub mod clusters;
pub mod compress;
pub mod disjoint;
pub mod hilbert;
pub mod kernels;
pub mod knn;
pub mod lattice;
pub mod linalg;
pub mod matrix;
pub mod nndescent;
pub mod pca;
pub mod quality;
pub mod rng;
pub mod spectral;
pub mod timeline_map;
pub mod umap;
