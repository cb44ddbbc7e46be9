//! The Vitrine viewer.
//!
//! The core (atlas data, camera, frame raster, picking) is plain Rust with unit tests that need no browser.
//! The `web` module (wasm32 only) translates DOM events and fetches into calls on the core and hands
//! finished frames to wgpu.
//!
//! Invariant: nothing outside `web` touches the DOM, the network or the GPU.

pub mod atlas;
pub mod camera;
pub mod grid;
pub mod pick;
pub mod raster;

#[cfg(target_arch = "wasm32")]
mod web;
