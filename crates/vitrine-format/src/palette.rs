//! The product's colours, in one place: the page's CSS repeats PAPER and INK as `--paper` and `--ink`.

/// The warm off-white of the reading-room theme: the viewer's background, and what transparent
/// pixels of an image are flattened onto in its thumbnails.
pub const PAPER: [u8; 3] = [0xF3, 0xEE, 0xE4];
/// Dark ink: text, outlines, and the marks of an atlas with neither images nor categories.
pub const INK: [u8; 3] = [0x2B, 0x2A, 0x33];
/// The one accent colour (the open record's outline, the selection).
pub const ACCENT: [u8; 3] = [0x11, 0x64, 0x66];
/// The neutral grey surround of the viewer's grey theme (sRGB 124, about 20 % reflectance); the
/// page's CSS repeats it.
pub const GREY_SURROUND: [u8; 3] = [0x7C, 0x7C, 0x7C];
/// Marks of category values beyond the palette's seven.
pub const UNLISTED: [u8; 3] = [0x9A, 0x96, 0x8E];

/// The Okabe-Ito colour-blind-safe palette (Okabe and Ito, "Color Universal Design", 2002), without
/// black: the build colours marks of atlases without images by it, the viewer colours by field with it.
pub const OKABE_ITO: [[u8; 3]; 7] = [
    [0xE6, 0x9F, 0x00],
    [0x56, 0xB4, 0xE9],
    [0x00, 0x9E, 0x73],
    [0xF0, 0xE4, 0x42],
    [0x00, 0x72, 0xB2],
    [0xD5, 0x5E, 0x00],
    [0xCC, 0x79, 0xA7],
];
