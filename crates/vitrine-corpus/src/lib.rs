//! Defining a corpus: which items of an atlas a scholar chose, and how.
//!
//! A corpus is the items picked by a sequence of selection steps on one map (lassos, rectangles,
//! items added or removed by hand, "everything the filters leave") narrowed by the active
//! catalogue filters; with no steps at all it is everything the filters leave. The same code
//! answers in the viewer (wasm) and in `vitrine corpus` (native), so a corpus file replays to the
//! same items in both.
//!
//! Invariant: no dependency that cannot compile for wasm32; nothing here touches the DOM or files.

pub mod agreement;
pub mod coding;
pub mod columns;
pub mod compare;
pub mod corpus;
pub mod export;
pub mod filter;
pub mod grow;
pub mod mask;
pub mod packed;
pub mod polygon;
pub mod profile;
pub mod stats;
pub mod summary;
pub mod timeline;

#[derive(Debug, thiserror::Error)]
pub enum CorpusError {
    #[error("{0}")]
    Invalid(String),
    #[error("field {field:?}: {reason}")]
    Field { field: String, reason: String },
    #[error(transparent)]
    Atlas(#[from] vitrine_format::AtlasError),
    #[error("corpus file is not valid JSON: {0}")]
    Json(String),
}
