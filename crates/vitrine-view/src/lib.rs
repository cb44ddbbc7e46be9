//! The Vitrine viewer's platform-free core: plain Rust with unit tests that need no browser.
//! The web crate (`vitrine-web`) translates DOM events and fetches into calls on it and puts
//! its answers on the page.
//!
//! Invariants: nothing here touches the DOM or the network; nothing but `present` (feature `gpu`,
//! which shows a finished frame through wgpu) touches the GPU; a frame is a finished RGBA buffer
//! drawn by [`raster`] on the processor.

pub mod atlas;
pub mod camera;
pub mod colour;
pub mod filters;
pub mod grid;
pub mod pick;
pub mod raster;
pub mod selection;
pub mod tray;

#[cfg(feature = "gpu")]
pub mod present;
