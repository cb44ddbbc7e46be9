//! The Vitrine viewer.
//!
//! The core (atlas data, camera, frame raster, picking) is plain Rust with unit tests that need no browser.
//! The `web` module (wasm32 only) translates DOM events and fetches into calls on the core and hands
//! finished frames to wgpu.
//!
//! Invariant: nothing outside `web` touches the DOM or the network, and nothing outside `web` and
//! `present` (which shows a finished frame through wgpu) touches the GPU.

pub mod atlas;
pub mod camera;
pub mod colour;
pub mod filters;
pub mod grid;
pub mod pick;
pub mod raster;
pub mod selection;
pub mod tray;

#[cfg(any(target_arch = "wasm32", feature = "native-gpu"))]
pub mod present;

#[cfg(target_arch = "wasm32")]
mod web;
