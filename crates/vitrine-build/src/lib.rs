//! Building a Vitrine atlas: ingest, neighbour graph, map, thumbnails, writing; and reading one back.
//!
//! Invariant: nothing here is needed by the viewer; the viewer depends on `vitrine-format` only.

pub mod catalogue;
pub mod clusters;
pub mod dates;
pub mod error;
pub mod hilbert;
pub mod kernels;
pub mod knn;
pub mod lattice;
pub mod nndescent;
pub mod npy;
pub mod pca;
pub mod pipeline;
pub mod quality;
pub mod read;
pub mod rng;
pub mod serve;
pub mod spectral;
pub mod thumbs;
pub mod timeline;
pub mod umap;
