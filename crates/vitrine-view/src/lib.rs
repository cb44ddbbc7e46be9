//! The Vitrine viewer's platform-free core: plain Rust with unit tests that need no browser.
//! The web crate (`vitrine-web`) translates DOM events and fetches into calls on it and puts
//! its answers on the page.
//!
//! - [`viewer`]: the state and what it does (view, record card, pointer gestures, selection,
//!   corpus) — the web layer asks it for every answer; [`input`]: every command as one
//!   [`input::Action`] and the one key map; [`sketch`]: lassos and rectangles being drawn;
//!   [`link`]: the corpus in a link; [`labels`]: wall labels placed beside their groups;
//! - [`atlas`] (the arrays decoded), [`camera`], [`grid`] (culling), [`pick`] (k-d tree),
//!   [`raster`] (the frame, drawn on the processor), [`selection`], [`filters`], [`colour`],
//!   [`tray`] (the tray grid's geometry);
//! - [`present`]: where a finished frame goes, behind a small trait; [`gpu`] (feature `gpu`):
//!   through wgpu.
//!
//! Invariants: nothing here touches the DOM or the network; nothing but [`gpu`] touches the GPU;
//! a frame is a finished RGBA buffer drawn by [`raster`] on the processor.

pub mod atlas;
pub mod camera;
pub mod coding;
pub mod colour;
pub mod filters;
pub mod grid;
pub mod input;
pub mod labels;
pub mod link;
pub mod pick;
pub mod present;
pub mod raster;
pub mod selection;
pub mod sketch;
pub mod tiled;
pub mod tray;
pub mod viewer;

#[cfg(feature = "gpu")]
pub mod gpu;
