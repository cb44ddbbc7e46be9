//! An image descriptor computed from the pixels: a colour histogram, a grid of gradient-orientation
//! histograms, and a coarse luminance layout. Histograms are square-rooted (the Hellinger mapping)
//! so that cosine distance between descriptors compares distributions sensibly.

use image::RgbImage;

pub const COLOUR_BINS: usize = 4; // per channel: 64 colour bins
pub const GRID: usize = 3; // 3 x 3 cells of orientation histograms
pub const ORIENTATIONS: usize = 8;
pub const LAYOUT: usize = 4; // 4 x 4 luminance means
pub const DIMENSIONS: usize =
    COLOUR_BINS * COLOUR_BINS * COLOUR_BINS + GRID * GRID * ORIENTATIONS + LAYOUT * LAYOUT + 1;

pub fn describe(img: &RgbImage) -> Vec<f32> {
    let (w, h) = (img.width() as usize, img.height() as usize);
    let mut colour = vec![0f64; COLOUR_BINS.pow(3)];
    let mut lum = vec![0f32; w * h];
    for (i, p) in img.pixels().enumerate() {
        let b = |v: u8| (v as usize * COLOUR_BINS) / 256;
        colour[(b(p[0]) * COLOUR_BINS + b(p[1])) * COLOUR_BINS + b(p[2])] += 1.0;
        lum[i] = 0.2126 * p[0] as f32 + 0.7152 * p[1] as f32 + 0.0722 * p[2] as f32;
    }
    let mut grads = vec![0f64; GRID * GRID * ORIENTATIONS];
    let mut layout = [0f64; LAYOUT * LAYOUT];
    let mut layout_n = vec![0f64; LAYOUT * LAYOUT];
    let mut edge_total = 0f64;
    for y in 0..h {
        for x in 0..w {
            let l = lum[y * w + x];
            let cell = (y * LAYOUT / h) * LAYOUT + x * LAYOUT / w;
            layout[cell] += l as f64;
            layout_n[cell] += 1.0;
            if x == 0 || y == 0 || x + 1 == w || y + 1 == h {
                continue;
            }
            let gx = lum[y * w + x + 1] - lum[y * w + x - 1];
            let gy = lum[(y + 1) * w + x] - lum[(y - 1) * w + x];
            let mag = (gx * gx + gy * gy).sqrt() as f64;
            if mag < 8.0 {
                continue;
            }
            edge_total += mag;
            // Unsigned orientation in [0, pi).
            let ang = gy.atan2(gx).rem_euclid(std::f32::consts::PI);
            let bin =
                ((ang / std::f32::consts::PI * ORIENTATIONS as f32) as usize).min(ORIENTATIONS - 1);
            let g = (y * GRID / h) * GRID + x * GRID / w;
            grads[g * ORIENTATIONS + bin] += mag;
        }
    }
    let mut out = Vec::with_capacity(DIMENSIONS);
    let ctotal: f64 = colour.iter().sum();
    out.extend(colour.iter().map(|c| (c / ctotal).sqrt() as f32));
    let gtotal: f64 = grads.iter().sum::<f64>().max(1e-9);
    out.extend(grads.iter().map(|g| (g / gtotal).sqrt() as f32));
    out.extend(
        layout
            .iter()
            .zip(&layout_n)
            .map(|(s, n)| (s / n.max(1.0) / 255.0) as f32 * 0.5),
    );
    // Edge density, scaled to be comparable with the histogram entries.
    out.push(((edge_total / (w * h) as f64) / 40.0).min(1.0) as f32);
    out
}
