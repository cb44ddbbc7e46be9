//! `vitrine build` as a library: ingest and validation of the user's files, the build's stages,
//! and writing the atlas folder; and reading one back.
//!
//! - ingest: [`vectors`] (.npy), [`catalogue`] (CSV, field kinds inferred), [`dates`] (catalogue
//!   datings to year ranges), errors that name the file, row or field ([`error`]);
//! - [`copies`]: copies of one picture, from graph candidates confirmed by image signatures;
//! - [`options`] (every setting, checked once), [`ingest`] (inputs read and matched), [`stages`]
//!   (the computing stages as typed values, calling the map engine `vitrine-map`), [`write`] (the
//!   atlas written, with `vitrine-images` for the pictures), [`folder`] (the temporary folder and
//!   the rename into place), [`report`] and [`progress`] (what the build tells);
//! - [`pipeline`]: the build from options to atlas folder, stage by stage;
//! - [`read`]: an atlas folder read back (`vitrine inspect`, `vitrine export`, `vitrine corpus`).
//!
//! Invariants: nothing here is needed by the viewer; nothing is written at `--out` until the whole
//! atlas is complete and has validated; the same inputs and seed give the same bytes.

pub mod catalogue;
pub mod columnar;
pub mod copies;
pub mod dates;
pub mod error;
pub mod folder;
pub mod from_images;
pub mod iiif;
pub mod ingest;
pub mod options;
pub mod pipeline;
pub mod progress;
pub mod read;
pub mod report;
pub mod stages;
pub mod tiles;
pub mod vectors;
pub mod write;
