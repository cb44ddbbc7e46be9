//! `vitrine build` as a library: ingest and validation of the user's files, the build's stages,
//! and writing the atlas folder; and reading one back.
//!
//! - ingest: [`vectors`] (.npy), [`catalogue`] (CSV, field kinds inferred), [`dates`] (catalogue
//!   datings to year ranges), errors that name the file, row or field ([`error`]);
//! - [`pipeline`]: the build from options to atlas folder, calling the map engine
//!   (`vitrine-map`) and the image pipeline (`vitrine-images`);
//! - [`read`]: an atlas folder read back (`vitrine inspect`, `vitrine export`, `vitrine corpus`).
//!
//! Invariants: nothing here is needed by the viewer; nothing is written at `--out` until the whole
//! atlas is complete and has validated; the same inputs and seed give the same bytes.

pub mod catalogue;
pub mod dates;
pub mod error;
pub mod pipeline;
pub mod read;
pub mod vectors;
