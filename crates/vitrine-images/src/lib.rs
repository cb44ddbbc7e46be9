//! The image pipeline of a build: [`decode`] reads every archive format into upright 8-bit sRGB
//! (JPEGs at a reduced DCT scale when that is enough), [`thumbs`] fits each picture into the cells
//! of every level of detail and packs them into JPEG sheets on every core, and [`cache`] keeps
//! thumbnails of unchanged files for the next build.
//!
//! Invariants: a file that cannot be used becomes a placeholder and a named problem, never a
//! failed build (unless the caller asks for strictness); memory stays bounded by a chunk of
//! images, whatever the collection's size.

pub mod cache;
pub mod colour;
pub mod copies;
pub mod decode;
pub mod describe;
pub mod embed;
pub mod onnx;
pub mod phash;
pub mod thumbs;
