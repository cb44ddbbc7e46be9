//! PCA pre-reduction of the feature vectors by randomized subspace iteration.
//!
//! The leading directions are found as Halko, Martinsson and Tropp describe ("Finding structure
//! with randomness", SIAM Review 53(2), 2011, algorithms 4.4 and 5.1): a Gaussian test matrix is
//! multiplied through the covariance a few times with re-orthonormalisation in between, and the
//! small projected problem is solved exactly (Rayleigh–Ritz, cyclic Jacobi). The products run
//! over fixed chunks of rows and are summed in a fixed order, so the result does not depend on the
//! number of threads. The fit uses at most [`FIT_ROWS`] evenly spread rows (the leading directions
//! of a large collection are settled long before that); every row is then projected.

use rayon::prelude::*;

use crate::matrix::Matrix;
use crate::rng::Rng;

/// Rows used to fit the directions, at most.
pub const FIT_ROWS: usize = 50_000;
/// Extra directions carried through the iteration beyond those kept (the method's oversampling).
const OVERSAMPLE: usize = 10;
/// Multiplications through the covariance.
const POWER_STEPS: usize = 7;
/// Rows per fixed chunk of the parallel products.
const CHUNK: usize = 1024;

#[derive(Debug, Clone)]
pub struct Pca {
    pub mean: Vec<f64>,
    /// Unit directions, strongest first: `dims` rows of `cols` values.
    pub components: Vec<Vec<f64>>,
    /// Variance along each kept direction over the total variance of the fitted rows.
    pub explained_variance_ratio: Vec<f64>,
    /// Rows the directions were fitted on.
    pub fit_rows: usize,
}

impl Pca {
    pub fn explained(&self) -> f64 {
        self.explained_variance_ratio.iter().sum()
    }
}

/// Fits `dims` leading directions of the rows of `m` (dims is cut to what the data can give).
pub fn fit(m: &Matrix, dims: usize, seed: u64) -> Pca {
    fit_with_progress(m, dims, seed, &|_, _| {})
}

/// How the directions were found, for the atlas's provenance.
pub fn method() -> String {
    format!(
        "randomized subspace iteration ({POWER_STEPS} power steps, {OVERSAMPLE} extra directions), Rayleigh-Ritz, fitted on at most {FIT_ROWS} evenly spread items"
    )
}

/// Steps [`fit_with_progress`] reports: the passes over the fitted rows.
pub const FIT_STEPS: u64 = POWER_STEPS as u64 + 2;

/// [`fit`], calling `progress(done, FIT_STEPS)` after each pass over the rows.
pub fn fit_with_progress(m: &Matrix, dims: usize, seed: u64, progress: &dyn Fn(u64, u64)) -> Pca {
    let (n, d) = (m.rows, m.cols);
    let rows: Vec<usize> = if n <= FIT_ROWS {
        (0..n).collect()
    } else {
        (0..FIT_ROWS).map(|i| i * n / FIT_ROWS).collect()
    };
    let fit_rows = rows.len();
    let dims = dims.min(d).min(fit_rows.saturating_sub(1)).max(1);
    let l = (dims + OVERSAMPLE).min(d);

    let mut mean = vec![0f64; d];
    for &i in &rows {
        for (s, &x) in mean.iter_mut().zip(m.row(i)) {
            *s += x as f64;
        }
    }
    for s in &mut mean {
        *s /= fit_rows.max(1) as f64;
    }
    let total: f64 = sum_chunks(&rows, 1, |chunk, acc| {
        for &i in chunk {
            acc[0] += m
                .row(i)
                .iter()
                .zip(&mean)
                .map(|(&x, mu)| (x as f64 - mu).powi(2))
                .sum::<f64>();
        }
    })[0];
    progress(1, FIT_STEPS);

    // Test matrix: d x l, Gaussian (Box–Muller), stored as l columns of length d.
    let mut rng = Rng::new(seed ^ 0x9ca);
    let mut q: Vec<Vec<f64>> = (0..l)
        .map(|_| {
            (0..d)
                .map(|_| {
                    let (u, v) = (rng.uniform().max(1e-300), rng.uniform());
                    (-2.0 * u.ln()).sqrt() * (std::f64::consts::TAU * v).cos()
                })
                .collect()
        })
        .collect();
    orthonormalise(&mut q);
    for step in 0..POWER_STEPS {
        q = covariance_times(m, &rows, &mean, &q);
        orthonormalise(&mut q);
        progress(2 + step as u64, FIT_STEPS);
    }
    // Rayleigh–Ritz: the covariance seen from the subspace, l x l, solved exactly.
    let cq = covariance_times(m, &rows, &mean, &q);
    progress(FIT_STEPS, FIT_STEPS);
    let mut small = vec![vec![0f64; l]; l];
    // Indices read as the matrix algebra writes them (small = Qᵀ C Q, then symmetrised).
    #[allow(clippy::needless_range_loop)]
    for a in 0..l {
        for b in 0..l {
            small[a][b] = dot(&q[a], &cq[b]);
        }
    }
    #[allow(clippy::needless_range_loop)]
    for a in 0..l {
        for b in 0..a {
            let s = 0.5 * (small[a][b] + small[b][a]);
            small[a][b] = s;
            small[b][a] = s;
        }
    }
    let (values, vectors) = jacobi_eigen(small);
    let mut order: Vec<usize> = (0..l).collect();
    order.sort_by(|&a, &b| values[b].total_cmp(&values[a]).then(a.cmp(&b)));
    let mut components = Vec::with_capacity(dims);
    let mut ratios = Vec::with_capacity(dims);
    for &j in order.iter().take(dims) {
        let mut c = vec![0f64; d];
        for (a, qa) in q.iter().enumerate() {
            let w = vectors[a][j];
            for (x, &y) in c.iter_mut().zip(qa) {
                *x += w * y;
            }
        }
        // A fixed sign: the largest entry positive, so that equal inputs give equal outputs.
        let big = c
            .iter()
            .copied()
            .fold(0f64, |acc, x| if x.abs() > acc.abs() { x } else { acc });
        if big < 0.0 {
            c.iter_mut().for_each(|x| *x = -*x);
        }
        let norm = dot(&c, &c).sqrt();
        if norm > 0.0 {
            c.iter_mut().for_each(|x| *x /= norm);
        }
        ratios.push(if total > 0.0 {
            values[j].max(0.0) / total
        } else {
            0.0
        });
        components.push(c);
    }
    Pca {
        mean,
        components,
        explained_variance_ratio: ratios,
        fit_rows,
    }
}

/// Every row of `m` on the fitted directions.
pub fn project(m: &Matrix, p: &Pca) -> Matrix {
    let r = p.components.len();
    let mut out = vec![0f32; m.rows * r];
    out.par_chunks_mut(r.max(1) * CHUNK)
        .enumerate()
        .for_each(|(b, block)| {
            let mut centred = vec![0f64; m.cols];
            for (k, o) in block.chunks_mut(r).enumerate() {
                let i = b * CHUNK + k;
                for (c, (&x, mu)) in centred.iter_mut().zip(m.row(i).iter().zip(&p.mean)) {
                    *c = x as f64 - mu;
                }
                for (slot, comp) in o.iter_mut().zip(&p.components) {
                    *slot = dot(&centred, comp) as f32;
                }
            }
        });
    Matrix {
        rows: m.rows,
        cols: r,
        data: out,
    }
}

/// Sums a per-chunk accumulation of `width` values over fixed chunks of `rows`, in chunk order.
fn sum_chunks(
    rows: &[usize],
    width: usize,
    work: impl Fn(&[usize], &mut [f64]) + Sync,
) -> Vec<f64> {
    let parts: Vec<Vec<f64>> = rows
        .par_chunks(CHUNK)
        .map(|chunk| {
            let mut acc = vec![0f64; width];
            work(chunk, &mut acc);
            acc
        })
        .collect();
    let mut out = vec![0f64; width];
    for p in parts {
        for (o, x) in out.iter_mut().zip(p) {
            *o += x;
        }
    }
    out
}

/// (Xc^T Xc) q for the centred fitted rows Xc, q given as columns of length d.
fn covariance_times(m: &Matrix, rows: &[usize], mean: &[f64], q: &[Vec<f64>]) -> Vec<Vec<f64>> {
    let (d, l) = (m.cols, q.len());
    let flat = sum_chunks(rows, d * l, |chunk, acc| {
        let mut centred = vec![0f64; d];
        let mut t = vec![0f64; l];
        for &i in chunk {
            for (c, (&x, mu)) in centred.iter_mut().zip(m.row(i).iter().zip(mean)) {
                *c = x as f64 - mu;
            }
            for (tj, qj) in t.iter_mut().zip(q) {
                *tj = dot(&centred, qj);
            }
            for (j, &tj) in t.iter().enumerate() {
                let col = &mut acc[j * d..(j + 1) * d];
                for (a, &c) in col.iter_mut().zip(&centred) {
                    *a += tj * c;
                }
            }
        }
    });
    flat.chunks(d).map(|c| c.to_vec()).collect()
}

fn dot(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b).map(|(x, y)| x * y).sum()
}

/// Modified Gram–Schmidt, twice over; a column that vanishes is replaced by a unit axis that is
/// independent of the others.
fn orthonormalise(cols: &mut [Vec<f64>]) {
    for _ in 0..2 {
        for j in 0..cols.len() {
            let (done, rest) = cols.split_at_mut(j);
            let c = &mut rest[0];
            for prev in done.iter() {
                let p = dot(c, prev);
                for (x, y) in c.iter_mut().zip(prev) {
                    *x -= p * y;
                }
            }
            let norm = dot(c, c).sqrt();
            if norm > 1e-12 {
                c.iter_mut().for_each(|x| *x /= norm);
            } else {
                let d = c.len();
                'axes: for axis in 0..d {
                    let mut e = vec![0f64; d];
                    e[axis] = 1.0;
                    for prev in done.iter() {
                        let p = dot(&e, prev);
                        for (x, y) in e.iter_mut().zip(prev) {
                            *x -= p * y;
                        }
                    }
                    let nn = dot(&e, &e).sqrt();
                    if nn > 1e-6 {
                        *c = e.into_iter().map(|x| x / nn).collect();
                        break 'axes;
                    }
                }
            }
        }
    }
}

/// Eigenvalues and eigenvectors (as columns: `vectors[row][j]` belongs to `values[j]`) of a small
/// symmetric matrix by the cyclic Jacobi method.
fn jacobi_eigen(mut a: Vec<Vec<f64>>) -> (Vec<f64>, Vec<Vec<f64>>) {
    let n = a.len();
    let mut v = vec![vec![0f64; n]; n];
    for (i, row) in v.iter_mut().enumerate() {
        row[i] = 1.0;
    }
    let scale: f64 = a.iter().flatten().map(|x| x * x).sum::<f64>().sqrt();
    for _sweep in 0..100 {
        let off: f64 = (0..n)
            .flat_map(|i| (0..n).filter(move |&j| j != i).map(move |j| (i, j)))
            .map(|(i, j)| a[i][j] * a[i][j])
            .sum::<f64>()
            .sqrt();
        if off <= 1e-15 * scale.max(1e-300) {
            break;
        }
        crate::linalg::jacobi_sweep(&mut a, &mut v);
    }
    ((0..n).map(|i| a[i][i]).collect(), v)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn jacobi_solves_a_worked_example() {
        // [[2, 1], [1, 2]] has eigenvalues 1 and 3 (worked by hand: (2 - x)^2 = 1).
        let (mut vals, _) = jacobi_eigen(vec![vec![2.0, 1.0], vec![1.0, 2.0]]);
        vals.sort_by(f64::total_cmp);
        assert!((vals[0] - 1.0).abs() < 1e-12 && (vals[1] - 3.0).abs() < 1e-12);
    }

    #[test]
    fn a_plane_in_five_dimensions_is_found_and_explains_all_variance() {
        // Points on the plane spanned by two known directions: two components explain everything
        // and span that plane.
        let u = [1.0, 2.0, 0.0, -1.0, 0.5];
        let w = [0.0, 1.0, 1.0, 1.0, -2.0];
        let mut rng = Rng::new(5);
        let n = 3000;
        let mut data = Vec::new();
        for _ in 0..n {
            let (s, t) = (rng.uniform() * 4.0 - 2.0, rng.uniform() - 0.5);
            data.extend((0..5).map(|c| (3.0 + s * u[c] + t * w[c]) as f32));
        }
        let m = Matrix {
            rows: n,
            cols: 5,
            data,
        };
        let p = fit(&m, 2, 1);
        assert!(
            (p.explained() - 1.0).abs() < 1e-6,
            "{:?}",
            p.explained_variance_ratio
        );
        for dir in [u, w] {
            // The direction's part outside the span of the components is nil.
            let norm = dir.iter().map(|x| x * x).sum::<f64>().sqrt();
            let mut rest: Vec<f64> = dir.iter().map(|x| x / norm).collect();
            for c in &p.components {
                let k = dot(&rest, c);
                rest.iter_mut().zip(c).for_each(|(r, y)| *r -= k * y);
            }
            assert!(dot(&rest, &rest).sqrt() < 1e-6);
        }
        let z = project(&m, &p);
        assert_eq!((z.rows, z.cols), (n, 2));
        assert!(z.data.iter().all(|x| x.is_finite()));
    }

    #[test]
    fn the_fit_does_not_depend_on_the_thread_count() {
        let mut rng = Rng::new(9);
        let m = Matrix {
            rows: 5000,
            cols: 12,
            data: (0..5000 * 12).map(|_| rng.uniform() as f32).collect(),
        };
        let one = rayon::ThreadPoolBuilder::new()
            .num_threads(1)
            .build()
            .unwrap();
        let a = one.install(|| project(&m, &fit(&m, 4, 3)));
        let b = project(&m, &fit(&m, 4, 3));
        assert_eq!(a, b);
    }
}
