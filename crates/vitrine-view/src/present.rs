//! Where a finished frame goes. The raster draws every frame into an RGBA buffer on the
//! processor; a [`Present`] shows it: the page's canvas through wgpu's surface (the web crate,
//! WebGPU where the browser offers it, else WebGL2), an offscreen texture read back (the golden
//! tests, [`crate::gpu::Offscreen`]), or nowhere ([`NullPresent`], for tests of the core).

/// Shows finished frames.
pub trait Present {
    /// Shows `pixels` (RGBA, `w` x `h`, rows top to bottom).
    fn present(&mut self, pixels: &[u8], w: u32, h: u32);
    /// What draws, for the About note and the tests ("SwiftShader (WebGL2)", "none").
    fn name(&self) -> &str;
}

/// Shows nothing; counts what it was given.
#[derive(Debug, Default)]
pub struct NullPresent {
    pub frames: u64,
    pub size: (u32, u32),
}

impl Present for NullPresent {
    fn present(&mut self, pixels: &[u8], w: u32, h: u32) {
        debug_assert_eq!(pixels.len(), (w * h * 4) as usize);
        self.frames += 1;
        self.size = (w, h);
    }
    fn name(&self) -> &str {
        "none"
    }
}
