//! Every item's vector compressed for the browser: its leading principal components, each
//! quantised to one byte. The viewer scores and compares every item with them (a linear model
//! trained on marked examples; the items closest to one) without the full vectors, at ~64 bytes
//! an item.
//!
//! Component j of an item is `offset[j] + scale[j] * q` for its byte q. Each component's range is
//! taken from its 0.05 % and 99.95 % quantiles on the fitted rows (values beyond are clamped), so
//! that a few outliers do not spend the 256 steps on empty range. The directions are the PCA of
//! [`crate::pca`], fitted on at most [`crate::pca::FIT_ROWS`] evenly spread rows; for the cosine
//! metric the rows are made unit-length first, so that distances between compressed vectors
//! follow the cosine distance.

use rayon::prelude::*;

use crate::knn::Metric;
use crate::matrix::Matrix;
use crate::pca::{self, Pca};

/// Components kept when the caller does not say.
pub const DEFAULT_DIMS: usize = 64;
/// The share of the fitted rows left outside the range at each end of a component.
const TAIL: f64 = 0.0005;
/// Rows per parallel block.
const BLOCK: usize = 4096;

/// Compressed vectors (rows in the order of the input).
#[derive(Debug, Clone)]
pub struct Compressed {
    pub dims: usize,
    pub offset: Vec<f32>,
    pub scale: Vec<f32>,
    /// `rows * dims` bytes, row-major.
    pub codes: Vec<u8>,
    /// The share of the (prepared) vectors' variance the kept components hold, 0–1.
    pub explained_variance: f64,
    pub method: String,
}

impl Compressed {
    /// Row `i`, decoded.
    pub fn row(&self, i: usize) -> Vec<f32> {
        let q = &self.codes[i * self.dims..(i + 1) * self.dims];
        q.iter()
            .zip(self.offset.iter().zip(&self.scale))
            .map(|(&b, (&o, &s))| o + s * b as f32)
            .collect()
    }
}

/// Per-component byte ranges from sample projections (`rows x dims`, row-major).
fn ranges(sample: &[f32], dims: usize) -> (Vec<f32>, Vec<f32>) {
    let rows = sample.len() / dims.max(1);
    let (mut offset, mut scale) = (vec![0f32; dims], vec![0f32; dims]);
    for j in 0..dims {
        let mut col: Vec<f32> = (0..rows).map(|r| sample[r * dims + j]).collect();
        col.sort_by(f32::total_cmp);
        let at = |q: f64| col[((q * (rows - 1) as f64).round() as usize).min(rows - 1)];
        let (lo, hi) = if rows == 0 {
            (0.0, 0.0)
        } else {
            (at(TAIL), at(1.0 - TAIL))
        };
        offset[j] = lo;
        // A component with no spread (all equal) decodes to its one value.
        scale[j] = if hi > lo { (hi - lo) / 255.0 } else { 0.0 };
    }
    (offset, scale)
}

fn quantise(x: f32, offset: f32, scale: f32) -> u8 {
    if scale <= 0.0 || !x.is_finite() {
        return 0;
    }
    ((x - offset) / scale).round().clamp(0.0, 255.0) as u8
}

/// Compresses `vectors` (as given, compared by `metric`) to `dims` components; or, when the
/// build already projected them on principal components (`projected_by` that fit: `vectors` are
/// then the projections, strongest first), keeps their first `dims` columns.
pub fn compress(
    vectors: &Matrix,
    metric: Metric,
    projected_by: Option<&Pca>,
    dims: usize,
    seed: u64,
) -> Compressed {
    let n = vectors.rows;
    // How a row is projected (into `out`, `dims` values), by one of two ways, and what the
    // kept components hold of the variance.
    enum Way {
        /// The build's own projection: its first columns.
        Reuse,
        Fit(Pca),
    }
    let (way, dims, explained, method) = match projected_by {
        Some(fit) if vectors.cols > 0 => {
            let d = dims.min(vectors.cols);
            let explained: f64 = fit.explained_variance_ratio.iter().take(d).sum();
            (
                Way::Reuse,
                d,
                explained,
                "the build's PCA pre-reduction".to_string(),
            )
        }
        _ => {
            let sample: Vec<usize> = if n <= pca::FIT_ROWS {
                (0..n).collect()
            } else {
                (0..pca::FIT_ROWS).map(|i| i * n / pca::FIT_ROWS).collect()
            };
            let fit_rows = Matrix {
                rows: sample.len(),
                cols: vectors.cols,
                data: sample
                    .iter()
                    .flat_map(|&i| prepared_row(vectors.row(i), metric))
                    .collect(),
            };
            let fit = pca::fit(&fit_rows, dims, seed);
            let (d, e) = (fit.components.len(), fit.explained());
            (Way::Fit(fit), d, e, pca::method())
        }
    };
    let project = |i: usize, centred: &mut Vec<f64>, out: &mut [f32]| match &way {
        Way::Reuse => out.copy_from_slice(&vectors.row(i)[..dims]),
        Way::Fit(fit) => {
            let row = prepared_row(vectors.row(i), metric);
            centred.resize(vectors.cols, 0.0);
            for (c, (&x, mu)) in centred.iter_mut().zip(row.iter().zip(&fit.mean)) {
                *c = x as f64 - mu;
            }
            for (slot, comp) in out.iter_mut().zip(&fit.components) {
                *slot = centred.iter().zip(comp).map(|(a, b)| a * b).sum::<f64>() as f32;
            }
        }
    };
    // Ranges from evenly spread rows (about as many as the directions are fitted on), projected
    // first; then every row projected and quantised block by block: no projection of the whole
    // collection is ever held.
    let step = (n / pca::FIT_ROWS).max(1);
    let picked: Vec<usize> = (0..n).step_by(step).collect();
    let mut sample = vec![0f32; picked.len() * dims];
    sample
        .par_chunks_mut(dims.max(1))
        .zip(&picked)
        .for_each_init(Vec::new, |centred, (out, &i)| project(i, centred, out));
    let (offset, scale) = ranges(&sample, dims);
    let mut codes = vec![0u8; n * dims];
    codes
        .par_chunks_mut(dims.max(1) * BLOCK)
        .enumerate()
        .for_each(|(b, block)| {
            let (mut centred, mut row) = (Vec::new(), vec![0f32; dims]);
            for (k, q) in block.chunks_mut(dims.max(1)).enumerate() {
                project(b * BLOCK + k, &mut centred, &mut row);
                for (slot, (&x, (&o, &s))) in
                    q.iter_mut().zip(row.iter().zip(offset.iter().zip(&scale)))
                {
                    *slot = quantise(x, o, s);
                }
            }
        });
    Compressed {
        dims,
        offset,
        scale,
        codes,
        explained_variance: explained,
        method: format!(
            "{dims} principal components ({method}) of the {} vectors, each quantised to 8 bits between its 0.05 % and 99.95 % quantiles",
            match metric {
                Metric::Cosine => "unit-length",
                Metric::Euclidean => "given",
            }
        ),
    }
}

/// A row as the metric compares it: unit length for the cosine (a zero row stays zero).
fn prepared_row(row: &[f32], metric: Metric) -> Vec<f32> {
    match metric {
        Metric::Euclidean => row.to_vec(),
        Metric::Cosine => {
            let norm = row.iter().map(|&x| x as f64 * x as f64).sum::<f64>().sqrt();
            if norm > 0.0 {
                row.iter().map(|&x| (x as f64 / norm) as f32).collect()
            } else {
                row.to_vec()
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::Rng;

    /// A standard normal draw (Box–Muller).
    fn normal(rng: &mut Rng) -> f64 {
        let u = rng.uniform().max(1e-12);
        (-2.0 * u.ln()).sqrt() * (std::f64::consts::TAU * rng.uniform()).cos()
    }

    fn blobs(n: usize, d: usize, seed: u64) -> Matrix {
        let mut rng = Rng::new(seed);
        let centres: Vec<Vec<f32>> = (0..8)
            .map(|_| (0..d).map(|_| normal(&mut rng) as f32 * 3.0).collect())
            .collect();
        let mut data = Vec::with_capacity(n * d);
        for i in 0..n {
            let c = &centres[i % 8];
            data.extend(c.iter().map(|&x| x + normal(&mut rng) as f32));
        }
        Matrix {
            rows: n,
            cols: d,
            data,
        }
    }

    #[test]
    fn decoded_rows_keep_distances_and_dot_products_of_the_float_projection() {
        let m = blobs(3000, 40, 7);
        let c = compress(&m, Metric::Euclidean, None, 16, 1);
        assert_eq!((c.dims, c.codes.len()), (16, 3000 * 16));
        assert!(c.explained_variance > 0.5 && c.explained_variance <= 1.0);
        // The float projection, independently: the same fit, rows projected in f64.
        let fit = pca::fit(&m, 16, 1);
        let exact = pca::project(&m, &fit);
        let mut errs = Vec::new();
        for i in 0..3000 {
            let (a, b) = (c.row(i), exact.row(i));
            let scale: f64 = b.iter().map(|&x| (x as f64).powi(2)).sum::<f64>().sqrt();
            let err: f64 = a
                .iter()
                .zip(b)
                .map(|(&x, &y)| (x as f64 - y as f64).powi(2))
                .sum::<f64>()
                .sqrt();
            errs.push(err / scale);
        }
        errs.sort_by(f64::total_cmp);
        let (median, p99) = (errs[1500], errs[2970]);
        // Quantisation to 256 steps over each component's range: about half a percent of a row's
        // length (measured 0.46 % median, 0.83 % p99 here; 128 steps would double it), more for
        // the few rows in a component's clamped tails (6 % at worst here).
        assert!(
            median < 0.006 && p99 < 0.012,
            "relative error: median {median}, p99 {p99}, max {}",
            errs[2999]
        );
    }

    #[test]
    fn the_build_s_own_reduction_is_reused_and_constant_components_decode() {
        let m = blobs(500, 12, 3);
        let fit = pca::fit(&m, 10, 2);
        let reduced = pca::project(&m, &fit);
        let c = compress(&reduced, Metric::Euclidean, Some(&fit), 6, 2);
        assert_eq!(c.dims, 6);
        let want: f64 = fit.explained_variance_ratio[..6].iter().sum();
        assert!((c.explained_variance - want).abs() < 1e-12);
        assert!(c.method.contains("pre-reduction"));
        // One value everywhere: the scale is 0 and every row decodes to it.
        let flat = Matrix {
            rows: 4,
            cols: 1,
            data: vec![2.0; 4],
        };
        let (o, s) = ranges(&flat.data, 1);
        assert_eq!((o[0], s[0]), (2.0, 0.0));
        assert_eq!(quantise(2.0, o[0], s[0]), 0);
    }
}
