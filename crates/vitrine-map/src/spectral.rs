//! The spectral start of the similarity map: for each connected part of the fuzzy graph, the two
//! leading non-trivial eigenvectors of its normalised adjacency D^-1/2 W D^-1/2 (equivalently the
//! smallest non-trivial ones of the normalised Laplacian), as the UMAP method starts its layout.
//!
//! A graph that falls apart into several parts has no single spectral layout. Each part of at least
//! [`MIN_PART`] items is then laid out spectrally on its own, scaled by the square root of its size and
//! placed at the centre its items have in the PCA start; smaller parts keep their PCA positions.
//!
//! The eigenvectors come from Chebyshev-filtered subspace iteration on N = (I + D^-1/2 W D^-1/2) / 2
//! (eigenvalues in [0, 1]), started from the PCA start, with a Rayleigh–Ritz step after each filter,
//! until the residuals fall below [`TOLERANCE`] or a fixed amount of work is spent (then the start is
//! the best subspace found and its residual is reported: it is only where the optimisation begins).
//! Sums run over fixed chunks, so the start does not depend on the number of threads.

use rayon::prelude::*;

use crate::umap::FuzzyGraph;

/// Parts smaller than this keep their PCA positions.
pub const MIN_PART: usize = 10;
/// Residual ||N v − θ v|| (for unit v) below which an eigenvector counts as found, for the map's
/// start. The start is only where the optimisation begins: on the bench collections (100,000 items)
/// 1e-3 takes about 28 products with N where 1e-4 took 145 (0.7 s against 2.5 s here), and the maps'
/// trustworthiness moved by less than 0.001 either way (docs/performance.md).
pub const TOLERANCE: f64 = 1e-3;
/// Degree of the Chebyshev filter between two Rayleigh–Ritz steps.
const DEGREE: usize = 8;
/// Multiply-adds the eigenvectors of one part may cost (about two seconds here), and the most
/// products with N for a small part.
const WORK_BUDGET: f64 = 3e9 / BLOCK as f64;
const MAX_PRODUCTS: usize = 2000;
/// Block width: the two wanted vectors and two more that speed up convergence.
const BLOCK: usize = 4;
const CHUNK: usize = 4096;

/// A part's two spectral coordinates, its residual and the products it took.
type PartLayout = ([Vec<f64>; 2], f64, usize);

/// How the start was made, for the manifest's provenance.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct StartReport {
    /// "spectral", "spectral per part" or "pca".
    pub method: String,
    /// Connected parts of the fuzzy graph.
    pub parts: usize,
    /// Parts laid out spectrally.
    pub spectral_parts: usize,
    /// Items in parts that kept their PCA positions.
    pub pca_items: usize,
    /// Largest residual among the eigenvectors used (0 when none were needed).
    pub max_residual: f64,
    /// Products with N that the largest part needed.
    pub products: usize,
}

/// Symmetric adjacency in compressed rows, restricted to one part, with local numbering.
struct Part {
    offsets: Vec<usize>,
    cols: Vec<u32>,
    weights: Vec<f32>,
    /// D^-1/2 per local item.
    inv_sqrt_deg: Vec<f64>,
}

/// Connected parts of the graph, each as its sorted item list, largest first (ties by first item).
pub fn parts(n: usize, graph: &FuzzyGraph) -> Vec<Vec<u32>> {
    let mut sets = crate::disjoint::DisjointSets::new(n);
    for (&h, &t) in graph.heads.iter().zip(&graph.tails) {
        sets.union(h, t);
    }
    let mut index = vec![u32::MAX; n];
    let mut out: Vec<Vec<u32>> = Vec::new();
    for i in 0..n as u32 {
        let r = sets.find(i) as usize;
        if index[r] == u32::MAX {
            index[r] = out.len() as u32;
            out.push(Vec::new());
        }
        out[index[r] as usize].push(i);
    }
    out.sort_by(|a, b| b.len().cmp(&a.len()).then(a[0].cmp(&b[0])));
    out
}

fn build_part(items: &[u32], local: &[u32], graph: &FuzzyGraph, edges: &[usize]) -> Part {
    let m = items.len();
    let mut count = vec![0usize; m + 1];
    for &e in edges {
        count[local[graph.heads[e] as usize] as usize + 1] += 1;
        count[local[graph.tails[e] as usize] as usize + 1] += 1;
    }
    for i in 0..m {
        count[i + 1] += count[i];
    }
    let offsets = count.clone();
    let mut fill = count;
    let mut cols = vec![0u32; offsets[m]];
    let mut weights = vec![0f32; offsets[m]];
    for &e in edges {
        let (h, t) = (
            local[graph.heads[e] as usize],
            local[graph.tails[e] as usize],
        );
        for (x, y) in [(h, t), (t, h)] {
            let s = fill[x as usize];
            cols[s] = y;
            weights[s] = graph.weights[e];
            fill[x as usize] += 1;
        }
    }
    let inv_sqrt_deg = (0..m)
        .map(|i| {
            let d: f64 = weights[offsets[i]..offsets[i + 1]]
                .iter()
                .map(|&w| w as f64)
                .sum();
            if d > 0.0 {
                1.0 / d.sqrt()
            } else {
                0.0
            }
        })
        .collect();
    Part {
        offsets,
        cols,
        weights,
        inv_sqrt_deg,
    }
}

/// y = (x + D^-1/2 W D^-1/2 x) / 2 for one column.
fn apply(p: &Part, x: &[f64], y: &mut [f64]) {
    y.par_chunks_mut(CHUNK).enumerate().for_each(|(c, ys)| {
        for (r, out) in ys.iter_mut().enumerate() {
            let i = c * CHUNK + r;
            let mut s = 0f64;
            for e in p.offsets[i]..p.offsets[i + 1] {
                let j = p.cols[e] as usize;
                s += p.weights[e] as f64 * p.inv_sqrt_deg[j] * x[j];
            }
            *out = 0.5 * (x[i] + p.inv_sqrt_deg[i] * s);
        }
    });
}

fn dot(a: &[f64], b: &[f64]) -> f64 {
    let partial: Vec<f64> = a
        .par_chunks(CHUNK)
        .zip(b.par_chunks(CHUNK))
        .map(|(x, y)| x.iter().zip(y).map(|(p, q)| p * q).sum())
        .collect();
    partial.iter().sum()
}

fn axpy(y: &mut [f64], a: f64, x: &[f64]) {
    y.par_iter_mut().zip(x).for_each(|(p, q)| *p += a * q);
}

/// Orthonormalises the columns against `trivial` (unit) and each other (modified Gram–Schmidt).
/// A column that vanishes is replaced by `fresh(column)`, then orthonormalised again.
fn orthonormalise(cols: &mut [Vec<f64>], trivial: &[f64], fresh: &dyn Fn(usize) -> Vec<f64>) {
    for c in 0..cols.len() {
        for attempt in 0..3 {
            let before = dot(&cols[c], &cols[c]).sqrt();
            for _ in 0..2 {
                let t = dot(&cols[c], trivial);
                axpy(&mut cols[c], -t, trivial);
                for o in 0..c {
                    let (done, rest) = cols.split_at_mut(c);
                    let t = dot(&rest[0], &done[o]);
                    axpy(&mut rest[0], -t, &done[o]);
                }
            }
            let norm = dot(&cols[c], &cols[c]).sqrt();
            if norm > 1e-10 * before.max(1e-300) && norm > 1e-300 {
                cols[c].par_iter_mut().for_each(|x| *x /= norm);
                break;
            }
            cols[c] = fresh(c * 7 + attempt);
        }
    }
}

/// Eigen-decomposition of a small symmetric matrix by cyclic Jacobi rotations: eigenvalues in
/// decreasing order and the matching eigenvectors as columns (v[row][col]).
fn small_eigen(mut a: [[f64; BLOCK]; BLOCK]) -> ([f64; BLOCK], [[f64; BLOCK]; BLOCK]) {
    let mut v = [[0f64; BLOCK]; BLOCK];
    for (i, row) in v.iter_mut().enumerate() {
        row[i] = 1.0;
    }
    for _ in 0..100 {
        let off: f64 = (0..BLOCK)
            .flat_map(|i| (0..BLOCK).filter(move |&j| j != i).map(move |j| (i, j)))
            .map(|(i, j)| a[i][j] * a[i][j])
            .sum();
        if off < 1e-30 {
            break;
        }
        crate::linalg::jacobi_sweep(&mut a, &mut v);
    }
    let mut order: Vec<usize> = (0..BLOCK).collect();
    order.sort_by(|&x, &y| a[y][y].total_cmp(&a[x][x]));
    let mut vals = [0f64; BLOCK];
    let mut vecs = [[0f64; BLOCK]; BLOCK];
    for (new, &old) in order.iter().enumerate() {
        vals[new] = a[old][old];
        for r in 0..BLOCK {
            vecs[r][new] = v[r][old];
        }
    }
    (vals, vecs)
}

/// One Chebyshev filter of degree [`DEGREE`] applied to the columns: it damps the eigenvalues of N in
/// [0, cut] (all of them lie in [0, 1]) and raises those above `cut`, many times faster per product
/// with N than plain powers of N when the wanted eigenvalues lie close together.
fn filter(p: &Part, x: Vec<Vec<f64>>, cut: f64) -> Vec<Vec<f64>> {
    let m = p.inv_sqrt_deg.len();
    let (e, c) = (cut / 2.0, cut / 2.0);
    x.into_iter()
        .map(|x0| {
            let mut nx = vec![0f64; m];
            apply(p, &x0, &mut nx);
            let mut prev = x0;
            let mut cur: Vec<f64> = nx
                .par_iter()
                .zip(&prev)
                .map(|(a, b)| (a - c * b) / e)
                .collect();
            for _ in 2..=DEGREE {
                apply(p, &cur, &mut nx);
                let next: Vec<f64> = nx
                    .par_iter()
                    .zip(&cur)
                    .zip(&prev)
                    .map(|((a, b), q)| 2.0 * (a - c * b) / e - q)
                    .collect();
                prev = std::mem::replace(&mut cur, next);
            }
            cur
        })
        .collect()
}

/// The two leading non-trivial eigenvectors of one part, from the given two starting columns.
/// Returns them (unit length), their largest residual and the products with N used.
fn eigenvectors(
    p: &Part,
    start: [Vec<f64>; 2],
    seed: u64,
    tolerance: f64,
) -> ([Vec<f64>; 2], f64, usize) {
    let m = p.inv_sqrt_deg.len();
    // The trivial eigenvector (eigenvalue 1): D^1/2 · 1, normalised.
    let mut trivial: Vec<f64> = p
        .inv_sqrt_deg
        .iter()
        .map(|&s| if s > 0.0 { 1.0 / s } else { 0.0 })
        .collect();
    let tn = dot(&trivial, &trivial).sqrt();
    trivial.iter_mut().for_each(|x| *x /= tn.max(1e-300));
    let random = |salt: usize| -> Vec<f64> {
        let mut rng = crate::rng::Rng::new(seed ^ (salt as u64).wrapping_mul(0x9E37_79B9));
        (0..m).map(|_| rng.uniform() - 0.5).collect()
    };
    let [s0, s1] = start;
    let mut x: Vec<Vec<f64>> = vec![s0, s1, random(1), random(2)];
    orthonormalise(&mut x, &trivial, &random);
    // Products with N allowed for this part: a fixed amount of work however large the part.
    let per_product = (p.cols.len() + m) as f64;
    let budget = ((WORK_BUDGET / per_product) as usize).clamp(3 * (DEGREE + 1), MAX_PRODUCTS);
    let mut products = 0;
    let mut residual;
    let mut y: Vec<Vec<f64>> = vec![vec![0f64; m]; BLOCK];
    loop {
        // Rayleigh–Ritz on span(x): H = xᵀ N x, rotate to its eigenvectors.
        for c in 0..BLOCK {
            apply(p, &x[c], &mut y[c]);
        }
        products += 1;
        let mut h = [[0f64; BLOCK]; BLOCK];
        for a in 0..BLOCK {
            for b in a..BLOCK {
                let v = dot(&x[a], &y[b]);
                h[a][b] = v;
                h[b][a] = v;
            }
        }
        let (vals, vecs) = small_eigen(h);
        let rotate = |cols: &Vec<Vec<f64>>| -> Vec<Vec<f64>> {
            (0..BLOCK)
                .map(|new| {
                    let mut out = vec![0f64; m];
                    for old in 0..BLOCK {
                        axpy(&mut out, vecs[old][new], &cols[old]);
                    }
                    out
                })
                .collect()
        };
        let (rx, ry) = (rotate(&x), rotate(&y));
        residual = (0..2)
            .map(|c| {
                let mut r = ry[c].clone();
                axpy(&mut r, -vals[c], &rx[c]);
                dot(&r, &r).sqrt()
            })
            .fold(0f64, f64::max);
        x = rx;
        if residual < tolerance || products + DEGREE + 1 > budget {
            break;
        }
        // Damp everything at or below the block's smallest Ritz value.
        let cut = vals[BLOCK - 1].clamp(1e-3, 1.0 - 1e-9);
        x = filter(p, x, cut);
        products += DEGREE;
        orthonormalise(&mut x, &trivial, &random);
    }
    let mut it = x.into_iter();
    ([it.next().unwrap(), it.next().unwrap()], residual, products)
}

/// The spectral start (see the module note). `pca` is the PCA start of the same items, used for the
/// placement of parts, for parts too small to lay out and as the eigenvectors' starting guess.
pub fn spectral_start(
    graph: &FuzzyGraph,
    pca: &[[f32; 2]],
    seed: u64,
) -> (Vec<[f32; 2]>, StartReport) {
    spectral_start_to(graph, pca, seed, TOLERANCE)
}

/// [`spectral_start`] with the eigenvectors found to the given residual.
pub fn spectral_start_to(
    graph: &FuzzyGraph,
    pca: &[[f32; 2]],
    seed: u64,
    tolerance: f64,
) -> (Vec<[f32; 2]>, StartReport) {
    let n = pca.len();
    let parts = parts(n, graph);
    let mut part_of = vec![0u32; n];
    let mut local = vec![0u32; n];
    for (c, items) in parts.iter().enumerate() {
        for (l, &i) in items.iter().enumerate() {
            part_of[i as usize] = c as u32;
            local[i as usize] = l as u32;
        }
    }
    let mut edges: Vec<Vec<usize>> = vec![Vec::new(); parts.len()];
    for e in 0..graph.heads.len() {
        edges[part_of[graph.heads[e] as usize] as usize].push(e);
    }
    let mut out: Vec<[f64; 2]> = pca.iter().map(|p| [p[0] as f64, p[1] as f64]).collect();
    let mut report = StartReport {
        method: String::new(),
        parts: parts.len(),
        spectral_parts: 0,
        pca_items: 0,
        max_residual: 0.0,
        products: 0,
    };
    // The PCA start spans about [-10, 10]; each part gets a share of that area by its size.
    let one = parts.len() == 1;
    // Parts are laid out side by side (most are small); each part's own sums run over fixed chunks.
    let laid: Vec<Option<PartLayout>> = parts
        .par_iter()
        .enumerate()
        .map(|(c, items)| {
            if items.len() < MIN_PART {
                return None;
            }
            let part = build_part(items, &local, graph, &edges[c]);
            let start = [0, 1].map(|d| items.iter().map(|&i| pca[i as usize][d] as f64).collect());
            Some(eigenvectors(
                &part,
                start,
                seed ^ (c as u64).wrapping_mul(0x5851_F42D),
                tolerance,
            ))
        })
        .collect();
    for (c, (items, result)) in parts.iter().zip(laid).enumerate() {
        let Some(([e0, e1], residual, products)) = result else {
            report.pca_items += items.len();
            continue;
        };
        report.spectral_parts += 1;
        report.max_residual = report.max_residual.max(residual);
        if c == 0 {
            report.products = products;
        }
        // Unit eigenvectors have entries of size ~1/sqrt(m): scale to the part's share of the area.
        let m = items.len() as f64;
        let radius = 10.0 * (m / n as f64).sqrt();
        let spread = e0
            .iter()
            .chain(&e1)
            .fold(0f64, |a, &b| a.max(b.abs()))
            .max(1e-300);
        let centre = if one {
            [0.0, 0.0]
        } else {
            let mut s = [0f64; 2];
            for &i in items {
                s[0] += pca[i as usize][0] as f64;
                s[1] += pca[i as usize][1] as f64;
            }
            [s[0] / m, s[1] / m]
        };
        for (l, &i) in items.iter().enumerate() {
            out[i as usize] = [
                centre[0] + e0[l] / spread * radius,
                centre[1] + e1[l] / spread * radius,
            ];
        }
    }
    report.method = if report.spectral_parts == 0 {
        "pca".into()
    } else if one {
        "spectral".into()
    } else {
        "spectral per part".into()
    };
    // Overall extent back to [-10, 10], plus the PCA start's tiny seeded noise that separates
    // identical items.
    let extent = out
        .iter()
        .flat_map(|p| p.iter())
        .fold(0f64, |a, &b| a.max(b.abs()));
    let scale = if extent > 0.0 { 10.0 / extent } else { 1.0 };
    let mut rng = crate::rng::Rng::new(seed ^ 0x5bec);
    let pos = out
        .into_iter()
        .map(|p| {
            [
                (p[0] * scale + (rng.uniform() - 0.5) * 1e-2) as f32,
                (p[1] * scale + (rng.uniform() - 0.5) * 1e-2) as f32,
            ]
        })
        .collect();
    (pos, report)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ring(n: usize) -> FuzzyGraph {
        FuzzyGraph {
            heads: (0..n as u32).collect(),
            tails: (0..n as u32).map(|i| (i + 1) % n as u32).collect(),
            weights: vec![1.0; n],
        }
    }

    /// Worked example: the normalised adjacency of a ring of n items has eigenvalues cos(2πk/n); the
    /// two leading non-trivial eigenvectors are cos and sin of 2πi/n, so the spectral start of a ring is
    /// a circle with the items in ring order.
    #[test]
    fn a_ring_starts_as_a_circle_in_ring_order() {
        let n = 60;
        let mut rng = crate::rng::Rng::new(3);
        let pca: Vec<[f32; 2]> = (0..n)
            .map(|_| [rng.uniform() as f32, rng.uniform() as f32])
            .collect();
        // Solved to a tight residual, the solver must find the true eigenvectors.
        let (pos, report) = spectral_start_to(&ring(n), &pca, 9, 1e-5);
        assert_eq!(report.method, "spectral");
        assert!(report.max_residual < 1e-5, "{report:?}");
        let r: Vec<f64> = pos
            .iter()
            .map(|p| ((p[0] as f64).powi(2) + (p[1] as f64).powi(2)).sqrt())
            .collect();
        let mean = r.iter().sum::<f64>() / n as f64;
        assert!(r.iter().all(|x| (x / mean - 1.0).abs() < 0.01), "{r:?}");
        // Consecutive items are 2π/n apart in angle, all turning the same way.
        let angle = |p: &[f32; 2]| (p[1] as f64).atan2(p[0] as f64);
        let steps: Vec<f64> = (0..n)
            .map(|i| {
                let d = angle(&pos[(i + 1) % n]) - angle(&pos[i]);
                (d + std::f64::consts::PI).rem_euclid(2.0 * std::f64::consts::PI)
                    - std::f64::consts::PI
            })
            .collect();
        let step = 2.0 * std::f64::consts::PI / n as f64;
        assert!(
            steps.iter().all(|s| (s.abs() - step).abs() < 0.05 * step)
                && (steps.iter().all(|&s| s > 0.0) || steps.iter().all(|&s| s < 0.0)),
            "{steps:?}"
        );
    }

    #[test]
    fn separate_parts_are_laid_out_apart_and_tiny_ones_keep_their_pca_place() {
        // Two rings of 30 and a pair, with PCA positions far apart.
        let mut g = ring(30);
        let r2 = ring(30);
        g.heads.extend(r2.heads.iter().map(|h| h + 30));
        g.tails.extend(r2.tails.iter().map(|t| t + 30));
        g.weights.extend(&r2.weights);
        g.heads.push(60);
        g.tails.push(61);
        g.weights.push(1.0);
        let pca: Vec<[f32; 2]> = (0..62)
            .map(|i| match i {
                0..30 => [-8.0, 0.0],
                30..60 => [8.0, 0.0],
                _ => [0.0, 8.0],
            })
            .collect();
        let (pos, report) = spectral_start(&g, &pca, 1);
        assert_eq!(report.method, "spectral per part");
        assert_eq!(
            (report.parts, report.spectral_parts, report.pca_items),
            (3, 2, 2)
        );
        // The rings keep the sides their PCA places give them, without overlapping.
        let right_of_a = pos[..30].iter().map(|p| p[0]).fold(f32::MIN, f32::max);
        let left_of_b = pos[30..60].iter().map(|p| p[0]).fold(f32::MAX, f32::min);
        assert!(
            right_of_a < 0.0 && left_of_b > 0.0,
            "{right_of_a} {left_of_b}"
        );
        assert!(pos[60..].iter().all(|p| p[1] > 5.0));
        assert!(pos.iter().all(|p| p[0].is_finite() && p[1].is_finite()));
    }

    #[test]
    fn the_start_does_not_depend_on_the_thread_count() {
        let n = 20_000;
        let mut g = ring(n);
        // Chords make the problem less regular.
        for i in (0..n as u32).step_by(7) {
            g.heads.push(i);
            g.tails.push((i * 31 + 5) % n as u32);
            g.weights.push(0.3);
        }
        let pca: Vec<[f32; 2]> = (0..n).map(|i| [(i % 97) as f32, (i % 89) as f32]).collect();
        let run = |threads| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap()
                .install(|| spectral_start(&g, &pca, 4))
        };
        let (a, _) = run(1);
        let (b, _) = run(3);
        assert_eq!(a, b);
    }
}
