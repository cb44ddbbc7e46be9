//! A 2-D layout by the UMAP method (McInnes, Healy and Melville, 2018): a fuzzy neighbour graph
//! from the k-NN graph, a PCA start, and stochastic gradient descent with negative sampling.
//! Deterministic for a given seed (single-threaded optimisation).

use crate::knn::KnnGraph;
use crate::matrix::Matrix;
use crate::rng::Rng;

#[derive(Debug, Clone, serde::Serialize)]
pub struct UmapParams {
    pub min_dist: f32,
    pub spread: f32,
    pub epochs: Option<usize>,
    pub negative_samples: usize,
    pub learning_rate: f32,
    pub seed: u64,
    /// Optimise over all cores (see [`layout`]).
    pub parallel: bool,
}

impl Default for UmapParams {
    fn default() -> Self {
        UmapParams {
            min_dist: 0.1,
            spread: 1.0,
            epochs: None,
            negative_samples: 5,
            learning_rate: 1.0,
            seed: 42,
            parallel: false,
        }
    }
}

/// A weighted undirected edge list (each edge once, i < j).
#[derive(Debug, Clone)]
pub struct FuzzyGraph {
    pub heads: Vec<u32>,
    pub tails: Vec<u32>,
    pub weights: Vec<f32>,
}

/// Membership strengths: each item's distances are shifted by its nearest distance (rho) and scaled by a
/// sigma found by bisection so that the memberships sum to log2(k); the directed graph is then
/// symmetrised by the fuzzy union w + w' − w·w'.
pub fn fuzzy_graph(g: &KnnGraph) -> FuzzyGraph {
    use rayon::prelude::*;
    let n = g.ids.len() / g.k.max(1);
    let target = (g.k as f64).log2();
    let (sum, count) = g
        .distances
        .par_iter()
        .filter(|d| d.is_finite())
        .fold(|| (0.0f64, 0usize), |(s, c), &d| (s + d as f64, c + 1))
        .reduce(|| (0.0, 0), |a, b| (a.0 + b.0, a.1 + b.1));
    let mean_dist = if count > 0 { sum / count as f64 } else { 0.0 };
    // Directed memberships, each keyed by its unordered pair (low id first) and its direction.
    let mut directed: Vec<(u32, u32, bool, f32)> = (0..n)
        .into_par_iter()
        .flat_map_iter(|i| {
            let nb: Vec<(usize, f32)> = g.neighbours(i).collect();
            let mut out = Vec::with_capacity(nb.len());
            if nb.is_empty() {
                return out;
            }
            let rho = nb
                .iter()
                .map(|&(_, d)| d as f64)
                .find(|&d| d > 0.0)
                .unwrap_or(0.0);
            let (mut lo, mut hi, mut sigma) = (0.0f64, f64::INFINITY, 1.0f64);
            for _ in 0..64 {
                let s: f64 = nb
                    .iter()
                    .map(|&(_, d)| (-((d as f64 - rho).max(0.0)) / sigma).exp())
                    .sum();
                if (s - target).abs() < 1e-5 {
                    break;
                }
                if s > target {
                    hi = sigma;
                    sigma = (lo + hi) / 2.0;
                } else {
                    lo = sigma;
                    sigma = if hi.is_infinite() {
                        sigma * 2.0
                    } else {
                        (lo + hi) / 2.0
                    };
                }
            }
            sigma = sigma.max(1e-3 * mean_dist).max(1e-12);
            for &(j, d) in &nb {
                if j == i {
                    continue;
                }
                let w = (-((d as f64 - rho).max(0.0)) / sigma).exp() as f32;
                let (a, b, forward) = if i < j { (i, j, true) } else { (j, i, false) };
                out.push((a as u32, b as u32, forward, w));
            }
            out
        })
        .collect();
    directed.par_sort_unstable_by(|x, y| (x.0, x.1, x.2).cmp(&(y.0, y.1, y.2)));
    let mut out = FuzzyGraph {
        heads: vec![],
        tails: vec![],
        weights: vec![],
    };
    let mut k = 0;
    while k < directed.len() {
        let (a, b) = (directed[k].0, directed[k].1);
        let (mut w1, mut w2) = (0f32, 0f32);
        while k < directed.len() && directed[k].0 == a && directed[k].1 == b {
            if directed[k].2 {
                w1 = directed[k].3;
            } else {
                w2 = directed[k].3;
            }
            k += 1;
        }
        let w = w1 + w2 - w1 * w2;
        if w > 0.0 {
            out.heads.push(a);
            out.tails.push(b);
            out.weights.push(w);
        }
    }
    out
}

/// Fits the curve 1 / (1 + a d^(2b)) to the target membership (1 below min_dist, exp(−(d − min_dist)/spread) above)
/// by damped least squares on 300 points over [0, 3·spread], as the method defines the a, b parameters.
pub fn fit_ab(min_dist: f32, spread: f32) -> (f32, f32) {
    let (md, sp) = (min_dist as f64, spread as f64);
    let xs: Vec<f64> = (0..300).map(|i| 3.0 * sp * i as f64 / 299.0).collect();
    let ys: Vec<f64> = xs
        .iter()
        .map(|&x| if x < md { 1.0 } else { (-(x - md) / sp).exp() })
        .collect();
    let resid = |a: f64, b: f64| -> f64 {
        xs.iter()
            .zip(&ys)
            .map(|(&x, &y)| {
                let f = 1.0 / (1.0 + a * x.powf(2.0 * b));
                (f - y) * (f - y)
            })
            .sum()
    };
    let (mut a, mut b, mut lambda) = (1.0f64, 1.0f64, 1e-3f64);
    let mut cost = resid(a, b);
    for _ in 0..500 {
        // Gauss-Newton normal equations with Levenberg damping.
        let (mut jaa, mut jab, mut jbb, mut ga, mut gb) = (0.0, 0.0, 0.0, 0.0, 0.0);
        for (&x, &y) in xs.iter().zip(&ys) {
            if x <= 0.0 {
                continue;
            }
            let p = x.powf(2.0 * b);
            let den = 1.0 + a * p;
            let f = 1.0 / den;
            let da = -p / (den * den);
            let db = -a * p * 2.0 * x.ln() / (den * den);
            let r = f - y;
            jaa += da * da;
            jab += da * db;
            jbb += db * db;
            ga += da * r;
            gb += db * r;
        }
        let (m11, m22) = (jaa * (1.0 + lambda), jbb * (1.0 + lambda));
        let det = m11 * m22 - jab * jab;
        if det.abs() < 1e-300 {
            break;
        }
        let step_a = -(m22 * ga - jab * gb) / det;
        let step_b = -(m11 * gb - jab * ga) / det;
        let (na, nb) = (a + step_a, b + step_b);
        if na > 0.0 && nb > 0.0 {
            let nc = resid(na, nb);
            if nc < cost {
                let converged = (cost - nc) < 1e-14;
                a = na;
                b = nb;
                cost = nc;
                lambda = (lambda * 0.3).max(1e-12);
                if converged {
                    break;
                }
                continue;
            }
        }
        lambda *= 10.0;
        if lambda > 1e12 {
            break;
        }
    }
    (a as f32, b as f32)
}

/// The first two principal components of the vectors, scaled so that the larger spans [−10, 10].
pub fn pca_start(m: &Matrix, rng: &mut Rng) -> Vec<[f32; 2]> {
    let (n, d) = (m.rows, m.cols);
    let mut mean = vec![0f64; d];
    for i in 0..n {
        for (s, &x) in mean.iter_mut().zip(m.row(i)) {
            *s += x as f64;
        }
    }
    for s in &mut mean {
        *s /= n.max(1) as f64;
    }
    // Covariance, d x d, from at most 20,000 evenly spread rows (plenty for the two leading directions),
    // summed in parallel over fixed chunks so that the result does not depend on the thread count.
    let rows: Vec<usize> = if n <= 20_000 {
        (0..n).collect()
    } else {
        (0..20_000).map(|i| i * n / 20_000).collect()
    };
    let cov = covariance(m, &rows, &mean);
    let mut comps: Vec<Vec<f64>> = Vec::new();
    for _ in 0..2 {
        let mut v: Vec<f64> = (0..d).map(|_| rng.uniform() - 0.5).collect();
        for _ in 0..300 {
            let mut w = vec![0f64; d];
            for a in 0..d {
                w[a] = cov[a * d..(a + 1) * d]
                    .iter()
                    .zip(&v)
                    .map(|(c, x)| c * x)
                    .sum();
            }
            for c in &comps {
                let p: f64 = w.iter().zip(c).map(|(a, b)| a * b).sum();
                for (x, y) in w.iter_mut().zip(c) {
                    *x -= p * y;
                }
            }
            let norm = w.iter().map(|x| x * x).sum::<f64>().sqrt();
            if norm < 1e-300 {
                break;
            }
            v = w.into_iter().map(|x| x / norm).collect();
        }
        comps.push(v);
    }
    let mut pos: Vec<[f64; 2]> = (0..n)
        .map(|i| {
            let row = m.row(i);
            let mut p = [0f64; 2];
            for (k, c) in comps.iter().enumerate() {
                p[k] = row
                    .iter()
                    .zip(&mean)
                    .zip(c)
                    .map(|((&x, mu), w)| (x as f64 - mu) * w)
                    .sum();
            }
            p
        })
        .collect();
    let extent = pos
        .iter()
        .flat_map(|p| p.iter())
        .fold(0f64, |a, &b| a.max(b.abs()));
    let scale = if extent > 0.0 { 10.0 / extent } else { 1.0 };
    for p in &mut pos {
        // A little noise separates identical vectors, which would otherwise never move apart.
        p[0] = p[0] * scale + (rng.uniform() - 0.5) * 1e-2;
        p[1] = p[1] * scale + (rng.uniform() - 0.5) * 1e-2;
    }
    pos.into_iter()
        .map(|p| [p[0] as f32, p[1] as f32])
        .collect()
}

/// The d x d matrix of summed products of the centred `rows` of `m`, summed over fixed chunks of 512
/// rows so that the result does not depend on the thread count.
fn covariance(m: &Matrix, rows: &[usize], mean: &[f64]) -> Vec<f64> {
    use rayon::prelude::*;
    let d = m.cols;
    // Only the upper triangle is summed (the matrix is symmetric), four rows at a time so that each
    // entry is loaded and stored once per four rows (a covariance of 384 dimensions does not fit in a
    // core's cache); every entry still adds its rows' products one by one in row order.
    let partial: Vec<Vec<f64>> = rows
        .par_chunks(512)
        .map(|chunk| {
            let mut cov = vec![0f64; d * d];
            let centre = |i: usize| -> Vec<f64> {
                m.row(i)
                    .iter()
                    .zip(mean)
                    .map(|(&x, &mu)| x as f64 - mu)
                    .collect()
            };
            let mut fours = chunk.chunks_exact(4);
            for four in &mut fours {
                let [c0, c1, c2, c3] = [0, 1, 2, 3].map(|r| centre(four[r]));
                for a in 0..d {
                    let (x0, x1, x2, x3) = (c0[a], c1[a], c2[a], c3[a]);
                    let row = &mut cov[a * d + a..(a + 1) * d];
                    let rest = c0[a..]
                        .iter()
                        .zip(&c1[a..])
                        .zip(c2[a..].iter().zip(&c3[a..]));
                    for (r, ((y0, y1), (y2, y3))) in row.iter_mut().zip(rest) {
                        *r = (((*r + x0 * y0) + x1 * y1) + x2 * y2) + x3 * y3;
                    }
                }
            }
            for &i in fours.remainder() {
                let c = centre(i);
                for a in 0..d {
                    let row = &mut cov[a * d + a..(a + 1) * d];
                    for (r, &cb) in row.iter_mut().zip(&c[a..]) {
                        *r += c[a] * cb;
                    }
                }
            }
            cov
        })
        .collect();
    let mut cov = vec![0f64; d * d];
    for p in &partial {
        for (c, x) in cov.iter_mut().zip(p) {
            *c += x;
        }
    }
    for a in 0..d {
        for b in 0..a {
            cov[a * d + b] = cov[b * d + a];
        }
    }
    cov
}

/// log2 of a positive, finite x to about 5e-6: exponent bits, the mantissa reduced to [0.75, 1.5),
/// and a least-squares polynomial (degree 5, fitted on Chebyshev points) in u = m − 1. No division,
/// so that the layout's chain of dependent updates stays short.
#[inline]
fn fast_log2(x: f32) -> f32 {
    let bits = x.to_bits();
    let high = (bits >> 22) & 1; // mantissa >= 1.5: halve it and count one more in the exponent
    let e = ((bits >> 23) & 0xFF) as i32 - 127 + high as i32;
    let u = f32::from_bits((bits & 0x007F_FFFF) | ((127 - high) << 23)) - 1.0;
    let p = 1.442_691_6
        + u * (-0.721_170_3
            + u * (0.481_222_7 + u * (-0.369_516_1 + u * (0.295_481_8 + u * -0.152_777_6))));
    e as f32 + u * p
}

/// 2^y to about 4e-6 relative, for y in the range of normal f32: exponent bits times a
/// least-squares polynomial (degree 4, fitted on Chebyshev points) for 2^f on [0, 1).
#[inline]
fn fast_exp2(y: f32) -> f32 {
    // Clamped so that the exponent stays normal (a NaN becomes -126).
    let y = if y > -126.0 { y } else { -126.0 };
    let y = if y < 126.0 { y } else { 126.0 };
    // floor without a library call (baseline x86-64 has no rounding instruction).
    // SAFETY: y is finite and within ±126, so the conversion is exact truncation.
    let t = unsafe { y.to_int_unchecked::<i32>() } as f32;
    let i = if t > y { t - 1.0 } else { t };
    let f = y - i;
    let p =
        1.000_003_6 + f * (0.692_969_6 + f * (0.241_621_2 + f * (0.051_717_8 + f * 0.013_684_0)));
    // SAFETY: i is a whole number within ±126.
    f32::from_bits(((unsafe { i.to_int_unchecked::<i32>() } + 127) as u32) << 23) * p
}

/// x^p for x > 0: the layout's one power per update, at a fraction of the cost of `powf`.
#[inline]
pub fn fast_pow(x: f32, p: f32) -> f32 {
    fast_exp2(p * fast_log2(x))
}

/// Optimisation epochs: as given, else 500 up to 10,000 items and 200 above (the method's defaults).
pub fn epochs_for(n: usize, epochs: Option<usize>) -> usize {
    epochs.unwrap_or(if n <= 10_000 { 500 } else { 200 })
}

/// The attractive gradient's coefficient at squared distance d2 > 0 (to be multiplied by the offset).
#[inline]
fn attraction(d2: f32, a: f32, b: f32) -> f32 {
    let d2b = fast_pow(d2, b);
    -2.0 * a * b * d2b / (d2 * (a * d2b + 1.0))
}

/// The repulsive gradient's coefficient at squared distance d2 > 0.
#[inline]
fn repulsion(d2: f32, a: f32, b: f32) -> f32 {
    2.0 * b / ((0.001 + d2) * (a * fast_pow(d2, b) + 1.0))
}

/// Edges strong enough to be sampled at least once in `epochs`, as the method describes.
fn sampled_edges(graph: &FuzzyGraph, epochs: usize) -> (Vec<usize>, f32) {
    let max_w = graph.weights.iter().cloned().fold(0f32, f32::max);
    let keep = (0..graph.weights.len())
        .filter(|&e| graph.weights[e] >= max_w / epochs as f32)
        .collect();
    (keep, max_w)
}

/// A position that went non-finite is put back at the origin rather than passed on.
fn finite<const D: usize>(mut pos: Vec<[f32; D]>) -> Vec<[f32; D]> {
    for p in &mut pos {
        if p.iter().any(|c| !c.is_finite()) {
            *p = [0.0; D];
        }
    }
    pos
}

#[inline]
fn clip(x: f32) -> f32 {
    x.clamp(-4.0, 4.0)
}

/// Vertex blocks optimised in parallel. A fixed number, so that the result does not depend on how
/// many threads run them.
pub const BLOCKS: usize = 1024;

/// Optimises the layout: sequentially (the method as published: edges sampled in turn, both ends moved,
/// always reading the latest positions) or, with `params.parallel`, over all cores.
///
/// Parallel and deterministic: the vertices are cut into [`BLOCKS`] fixed blocks; in each epoch every
/// block moves only its own vertices, along its own directed edges (each undirected edge appears once
/// from each end) and negative samples drawn by its own seeded generator, reading every other vertex
/// where it stood at the start of the epoch. No two blocks write the same memory and nothing depends on
/// the order in which blocks run, so any number of threads gives the same map. Within a vertex, the
/// updates are computed four at a time in a pipeline (each pull together with the previous sample's
/// negative samples, each sample's negative samples after its pull), about twice as fast as one at
/// a time. On the hard benchmark mixtures its trustworthiness@10 is within 0.001 of the sequential
/// optimiser's (docs/performance.md).
pub fn layout<const D: usize>(
    graph: &FuzzyGraph,
    start: Vec<[f32; D]>,
    params: &UmapParams,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Vec<[f32; D]> {
    if params.parallel {
        layout_parallel(graph, start, params, progress)
    } else {
        layout_sequential(graph, start, params, progress)
    }
}

fn layout_parallel<const D: usize>(
    graph: &FuzzyGraph,
    start: Vec<[f32; D]>,
    params: &UmapParams,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Vec<[f32; D]> {
    // Vertices are renumbered in a space-filling order of the start, so that a block is a region and
    // most of its edges stay inside it, where positions are read as they move (and memory is local).
    let n = start.len();
    let key = |p: &[f32; D]| -> Vec<f32> { p.to_vec() };
    let perm: Vec<usize> = if D == 2 {
        let xy: Vec<[f32; 2]> = start.iter().map(|p| [p[0], p[1]]).collect();
        crate::hilbert::hilbert_order(&xy)
    } else {
        let mut idx: Vec<usize> = (0..n).collect();
        idx.sort_by(|&i, &j| {
            key(&start[i])
                .partial_cmp(&key(&start[j]))
                .unwrap()
                .then(i.cmp(&j))
        });
        idx
    };
    let mut new_of = vec![0u32; n];
    for (new, &old) in perm.iter().enumerate() {
        new_of[old] = new as u32;
    }
    let relabelled = FuzzyGraph {
        heads: graph.heads.iter().map(|&h| new_of[h as usize]).collect(),
        tails: graph.tails.iter().map(|&t| new_of[t as usize]).collect(),
        weights: graph.weights.clone(),
    };
    let permuted: Vec<[f32; D]> = perm.iter().map(|&old| start[old]).collect();
    let laid = layout_in_order(&relabelled, permuted, params, progress);
    let mut out = vec![[0f32; D]; n];
    for (new, &old) in perm.iter().enumerate() {
        out[old] = laid[new];
    }
    out
}

fn layout_in_order<const D: usize>(
    graph: &FuzzyGraph,
    start: Vec<[f32; D]>,
    params: &UmapParams,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Vec<[f32; D]> {
    use rayon::prelude::*;
    let n = start.len();
    let mut pos = start;
    if n < 2 || graph.weights.is_empty() {
        return pos;
    }
    let epochs = epochs_for(n, params.epochs);
    let (a, b) = fit_ab(params.min_dist, params.spread);
    // Directed edges grouped by head (CSR). Edges too weak to be sampled even once are dropped.
    let mut degree = vec![0u32; n + 1];
    let (keep, max_w) = sampled_edges(graph, epochs);
    for &e in &keep {
        degree[graph.heads[e] as usize + 1] += 1;
        degree[graph.tails[e] as usize + 1] += 1;
    }
    for i in 0..n {
        degree[i + 1] += degree[i];
    }
    let offsets = degree;
    let mut fill = offsets.clone();
    let m = offsets[n] as usize;
    let mut tails = vec![0u32; m];
    let mut eps = vec![0f64; m];
    for &e in &keep {
        let (h, t) = (graph.heads[e] as usize, graph.tails[e] as usize);
        let every = (max_w / graph.weights[e]) as f64;
        for (x, y) in [(h, t), (t, h)] {
            let slot = fill[x] as usize;
            tails[slot] = y as u32;
            eps[slot] = every;
            fill[x] += 1;
        }
    }
    // The method draws its negative samples per undirected edge sample and moves only the head; here each
    // undirected edge is sampled from both ends, so each end draws half of them.
    let neg = (params.negative_samples as f64 / 2.0).max(0.5);
    let mut next: Vec<f64> = eps.clone();
    let mut next_neg: Vec<f64> = eps.iter().map(|e| e / neg).collect();
    let block_len = n.div_ceil(BLOCKS);
    let mut before = pos.clone();
    for epoch in 0..epochs {
        let alpha = params.learning_rate * (1.0 - epoch as f32 / epochs as f32);
        let e_f = epoch as f64;
        before.copy_from_slice(&pos);
        let prev = &before;
        // Each block owns its vertices' positions and their edges' schedules.
        let edge_start = |blk: usize| offsets[(blk * block_len).min(n)] as usize;
        let mut pos_blocks: Vec<&mut [[f32; D]]> = pos.chunks_mut(block_len).collect();
        let mut next_blocks = split_by(&mut next, (0..=pos_blocks.len()).map(edge_start).collect());
        let mut neg_blocks = split_by(
            &mut next_neg,
            (0..=pos_blocks.len()).map(edge_start).collect(),
        );
        pos_blocks
            .par_iter_mut()
            .zip(next_blocks.par_iter_mut())
            .zip(neg_blocks.par_iter_mut())
            .enumerate()
            .for_each(|(blk, ((mine, next), next_neg))| {
                let first = blk * block_len;
                let base = offsets[first] as usize;
                let mut rng = Rng::new(
                    params.seed
                        ^ ((epoch as u64) << 20)
                        ^ (blk as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15),
                );
                let mut due: Vec<usize> = Vec::new();
                for local in 0..mine.len() {
                    let v = first + local;
                    let mut cur = mine[local];
                    let p = &mut cur;
                    // The edges due in this epoch, gathered without a branch per edge (whether an
                    // edge is due follows no pattern a processor could predict).
                    let (lo, hi) = (offsets[v] as usize, offsets[v + 1] as usize);
                    due.resize(hi - lo, 0);
                    let mut count = 0;
                    for slot in lo..hi {
                        due[count] = slot;
                        count += (next[slot - base] <= e_f) as usize;
                    }
                    // Updates are computed four at a time (one vectorised power serves four) in
                    // a pipeline: the pull along each sampled edge is computed together with the
                    // pushes of the previous sample's negative samples and applied at once, so
                    // that a sample's negative samples are always taken from where its pull
                    // moved the vertex (early on the pull may carry it past its neighbour; pushes
                    // taken from before the pull kept hard collections' neighbourhoods less well).
                    let mut lanes = Lanes::<D>::default();
                    let mut push = [0f32; D];
                    for &slot in &due[..count] {
                        let s = slot - base;
                        let tail = tails[slot] as usize;
                        next[s] += eps[slot];
                        let every_neg = eps[slot] / neg;
                        let negs = ((e_f - next_neg[s]) / every_neg).max(0.0) as usize;
                        if lanes.len == 4 {
                            lanes.apply(p, a, b, &mut push);
                        }
                        lanes.add(prev[tail], true);
                        lanes.apply(p, a, b, &mut push);
                        step(p, &mut push, alpha);
                        for _ in 0..negs {
                            let o = rng.below(n as u64) as usize;
                            if o == v {
                                continue;
                            }
                            if lanes.len == 4 {
                                lanes.apply(p, a, b, &mut push);
                                step(p, &mut push, alpha);
                            }
                            lanes.add(prev[o], false);
                        }
                        next_neg[s] += negs as f64 * every_neg;
                    }
                    if lanes.len > 0 {
                        lanes.apply(p, a, b, &mut push);
                        step(p, &mut push, alpha);
                    }
                    mine[local] = cur;
                }
            });
        if epoch % 10 == 0 {
            progress(epoch, epochs);
        }
    }
    progress(epochs, epochs);
    finite(pos)
}

/// Moves `p` by the summed pushes times the learning rate, and clears them.
#[inline]
fn step<const D: usize>(p: &mut [f32; D], push: &mut [f32; D], alpha: f32) {
    for (x, g) in p.iter_mut().zip(push.iter_mut()) {
        *x += *g * alpha;
        *g = 0.0;
    }
}

/// Up to four pending updates of one vertex (the pull along an edge and negative samples), whose
/// coefficients are computed side by side. Each lane gives exactly the value of the scalar formula,
/// and the pushes are summed in the order they were added.
struct Lanes<const D: usize> {
    at: [[f32; D]; 4],
    pull: [bool; 4],
    len: usize,
}

impl<const D: usize> Default for Lanes<D> {
    fn default() -> Self {
        Lanes {
            at: [[0.0; D]; 4],
            pull: [false; 4],
            len: 0,
        }
    }
}

impl<const D: usize> Lanes<D> {
    #[inline]
    fn add(&mut self, q: [f32; D], pull: bool) {
        self.at[self.len] = q;
        self.pull[self.len] = pull;
        self.len += 1;
    }

    #[inline]
    fn apply(&mut self, p: &[f32; D], a: f32, b: f32, push: &mut [f32; D]) {
        let mut delta = [[0f32; 4]; D];
        let mut d2 = [0f32; 4];
        for l in 0..4 {
            for c in 0..D {
                delta[c][l] = p[c] - self.at[l][c];
                d2[l] += delta[c][l] * delta[c][l];
            }
        }
        let coeff = coefficients4(d2, self.pull, a, b);
        for l in 0..self.len {
            for c in 0..D {
                push[c] += if d2[l] > 0.0 {
                    clip(coeff[l] * delta[c][l])
                } else if self.pull[l] {
                    0.0
                } else {
                    4.0
                };
            }
        }
        self.len = 0;
    }
}

/// The gradient coefficients of four updates at squared distances `d2`: the attraction
/// −2ab·d2^b / (d2·(a·d2^b + 1)) where `pull`, else the repulsion 2b / ((0.001 + d2)·(a·d2^b + 1)),
/// operand by operand as in [`attraction`] and [`repulsion`] (lanes with d2 <= 0 are not used).
#[inline]
fn coefficients4(d2: [f32; 4], pull: [bool; 4], a: f32, b: f32) -> [f32; 4] {
    #[cfg(target_arch = "x86_64")]
    {
        // SSE2 is part of every x86-64 processor; each operation rounds as its scalar twin.
        coefficients4_sse2(d2, pull, a, b)
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        coefficients4_any(d2, pull, a, b)
    }
}

#[cfg_attr(target_arch = "x86_64", allow(dead_code))]
fn coefficients4_any(d2: [f32; 4], pull: [bool; 4], a: f32, b: f32) -> [f32; 4] {
    let mut coeff = [0f32; 4];
    for l in 0..4 {
        // Unused lanes hold a harmless 1 so that the power stays finite.
        let pw = fast_pow(if d2[l] > 0.0 { d2[l] } else { 1.0 }, b);
        let num = if pull[l] { -2.0 * a * b * pw } else { 2.0 * b };
        let den = if pull[l] { d2[l] } else { 0.001 + d2[l] } * (a * pw + 1.0);
        coeff[l] = num / den;
    }
    coeff
}

#[cfg(target_arch = "x86_64")]
#[inline]
fn coefficients4_sse2(d2: [f32; 4], pull: [bool; 4], a: f32, b: f32) -> [f32; 4] {
    use std::arch::x86_64::*;
    // SAFETY: SSE2 is always present on x86-64; loads and stores go through arrays of four.
    unsafe {
        let f = |x: f32| _mm_set1_ps(x);
        let i = |x: i32| _mm_set1_epi32(x);
        let x = _mm_loadu_ps(d2.as_ptr());
        let positive = _mm_cmpgt_ps(x, _mm_setzero_ps());
        let x = _mm_or_ps(_mm_and_ps(positive, x), _mm_andnot_ps(positive, f(1.0)));
        // fast_log2
        let bits = _mm_castps_si128(x);
        let high = _mm_and_si128(_mm_srli_epi32(bits, 22), i(1));
        let e = _mm_add_epi32(
            _mm_sub_epi32(_mm_and_si128(_mm_srli_epi32(bits, 23), i(0xFF)), i(127)),
            high,
        );
        let m = _mm_or_si128(
            _mm_and_si128(bits, i(0x007F_FFFF)),
            _mm_slli_epi32(_mm_sub_epi32(i(127), high), 23),
        );
        let u = _mm_sub_ps(_mm_castsi128_ps(m), f(1.0));
        let mut p = _mm_mul_ps(u, f(-0.152_777_6));
        p = _mm_mul_ps(u, _mm_add_ps(f(0.295_481_8), p));
        p = _mm_mul_ps(u, _mm_add_ps(f(-0.369_516_1), p));
        p = _mm_mul_ps(u, _mm_add_ps(f(0.481_222_7), p));
        p = _mm_mul_ps(u, _mm_add_ps(f(-0.721_170_3), p));
        p = _mm_add_ps(f(1.442_691_6), p);
        let log2 = _mm_add_ps(_mm_cvtepi32_ps(e), _mm_mul_ps(u, p));
        // fast_exp2 of b·log2
        let y = _mm_mul_ps(f(b), log2);
        let y = _mm_min_ps(_mm_max_ps(y, f(-126.0)), f(126.0));
        let t = _mm_cvtepi32_ps(_mm_cvttps_epi32(y));
        let whole = _mm_sub_ps(t, _mm_and_ps(_mm_cmpgt_ps(t, y), f(1.0)));
        let fr = _mm_sub_ps(y, whole);
        let mut q = _mm_mul_ps(fr, f(0.013_684_0));
        q = _mm_mul_ps(fr, _mm_add_ps(f(0.051_717_8), q));
        q = _mm_mul_ps(fr, _mm_add_ps(f(0.241_621_2), q));
        q = _mm_mul_ps(fr, _mm_add_ps(f(0.692_969_6), q));
        q = _mm_add_ps(f(1.000_003_6), q);
        let scale = _mm_castsi128_ps(_mm_slli_epi32(
            _mm_add_epi32(_mm_cvttps_epi32(whole), i(127)),
            23,
        ));
        let pw = _mm_mul_ps(scale, q);
        // coefficients
        let lanes: [i32; 4] = pull.map(|p| if p { -1 } else { 0 });
        let mask = _mm_castsi128_ps(_mm_loadu_si128(lanes.as_ptr() as *const __m128i));
        let sel =
            |yes: __m128, no: __m128| _mm_or_ps(_mm_and_ps(mask, yes), _mm_andnot_ps(mask, no));
        let num = sel(_mm_mul_ps(f(-2.0 * a * b), pw), f(2.0 * b));
        let raw = _mm_loadu_ps(d2.as_ptr());
        let den = _mm_mul_ps(
            sel(raw, _mm_add_ps(f(0.001), raw)),
            _mm_add_ps(_mm_mul_ps(f(a), pw), f(1.0)),
        );
        let mut out = [0f32; 4];
        _mm_storeu_ps(out.as_mut_ptr(), _mm_div_ps(num, den));
        out
    }
}

/// Cuts `v` at the given boundaries (first 0 or more, last = len) into mutable pieces.
fn split_by(v: &mut [f64], bounds: Vec<usize>) -> Vec<&mut [f64]> {
    let mut out = Vec::with_capacity(bounds.len().saturating_sub(1));
    let mut rest = v;
    let mut at = bounds[0];
    for &b in &bounds[1..] {
        let (head, tail) = rest.split_at_mut(b - at);
        out.push(head);
        rest = tail;
        at = b;
    }
    out
}

// The D coordinates of two points are walked together by index, as the method's update is written.
#[allow(clippy::needless_range_loop)]
fn layout_sequential<const D: usize>(
    graph: &FuzzyGraph,
    start: Vec<[f32; D]>,
    params: &UmapParams,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Vec<[f32; D]> {
    let n = start.len();
    let mut pos = start;
    if n < 2 || graph.weights.is_empty() {
        return pos;
    }
    let epochs = epochs_for(n, params.epochs);
    let (a, b) = fit_ab(params.min_dist, params.spread);
    // Edges too weak to be sampled even once are dropped, as the method describes.
    let (keep, max_w) = sampled_edges(graph, epochs);
    let eps: Vec<f64> = keep
        .iter()
        .map(|&e| (max_w / graph.weights[e]) as f64)
        .collect();
    let eps_neg: Vec<f64> = eps
        .iter()
        .map(|&x| x / params.negative_samples as f64)
        .collect();
    let mut next: Vec<f64> = eps.clone();
    let mut next_neg: Vec<f64> = eps_neg.clone();
    let mut rng = Rng::new(params.seed ^ 0x5eed_1a70_u64);
    for epoch in 0..epochs {
        let alpha = params.learning_rate * (1.0 - epoch as f32 / epochs as f32);
        let e_f = epoch as f64;
        for (slot, &e) in keep.iter().enumerate() {
            if next[slot] > e_f {
                continue;
            }
            // Edges are undirected: alternate which end is the head.
            let (mut j, mut k) = (graph.heads[e] as usize, graph.tails[e] as usize);
            if rng.next_u64() & 1 == 1 {
                std::mem::swap(&mut j, &mut k);
            }
            let mut delta = [0f32; D];
            for c in 0..D {
                delta[c] = pos[j][c] - pos[k][c];
            }
            let d2: f32 = delta.iter().map(|x| x * x).sum();
            if d2 > 0.0 {
                let coeff = attraction(d2, a, b);
                for c in 0..D {
                    let g = clip(coeff * delta[c]) * alpha;
                    pos[j][c] += g;
                    pos[k][c] -= g;
                }
            }
            next[slot] += eps[slot];
            let negs = ((e_f - next_neg[slot]) / eps_neg[slot]).max(0.0) as usize;
            for _ in 0..negs {
                let m = rng.below(n as u64) as usize;
                if m == j {
                    continue;
                }
                for c in 0..D {
                    delta[c] = pos[j][c] - pos[m][c];
                }
                let d2: f32 = delta.iter().map(|x| x * x).sum();
                if d2 > 0.0 {
                    let coeff = repulsion(d2, a, b);
                    for c in 0..D {
                        pos[j][c] += clip(coeff * delta[c]) * alpha;
                    }
                } else {
                    for c in 0..D {
                        pos[j][c] += 4.0 * alpha;
                    }
                }
            }
            next_neg[slot] += negs as f64 * eps_neg[slot];
        }
        if epoch % 10 == 0 {
            progress(epoch, epochs);
        }
    }
    progress(epochs, epochs);
    finite(pos)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn covariance_by_fours_over_the_upper_triangle_equals_the_plain_sum_bit_for_bit() {
        // The last column is constant, so its centred values are exactly zero.
        let (n, d) = (1001, 37);
        let mut rng = Rng::new(3);
        let data: Vec<f32> = (0..n * d)
            .map(|k| {
                if k % d == d - 1 {
                    0.5
                } else {
                    rng.uniform() as f32 - 0.3
                }
            })
            .collect();
        let m = Matrix {
            rows: n,
            cols: d,
            data,
        };
        // Every row (a chunk of 512 in whole fours, then 489: a remainder of one row), and every
        // third row (334: a remainder of two).
        for rows in [(0..n).collect::<Vec<usize>>(), (0..n).step_by(3).collect()] {
            let mean: Vec<f64> = (0..d)
                .map(|c| rows.iter().map(|&i| m.row(i)[c] as f64).sum::<f64>() / rows.len() as f64)
                .collect();
            // The plain sum, as the start summed it before: each row's outer product added in
            // row order, chunk by chunk, skipping the matrix rows where the row's value is zero.
            let mut plain = vec![0f64; d * d];
            for chunk in rows.chunks(512) {
                let mut part = vec![0f64; d * d];
                for &i in chunk {
                    let c: Vec<f64> = m
                        .row(i)
                        .iter()
                        .zip(&mean)
                        .map(|(&x, mu)| x as f64 - mu)
                        .collect();
                    for a in 0..d {
                        if c[a] == 0.0 {
                            continue;
                        }
                        for b in 0..d {
                            part[a * d + b] += c[a] * c[b];
                        }
                    }
                }
                for (p, x) in plain.iter_mut().zip(part) {
                    *p += x;
                }
            }
            assert!(mean[d - 1] == 0.5 && plain[d * d - 1] == 0.0);
            let fast = covariance(&m, &rows, &mean);
            assert_eq!(
                fast.iter().map(|x| x.to_bits()).collect::<Vec<_>>(),
                plain.iter().map(|x| x.to_bits()).collect::<Vec<_>>()
            );
        }
    }

    #[test]
    fn fast_pow_is_close_to_powf_over_the_layouts_range() {
        let mut worst = 0f32;
        for i in 0..20_000 {
            let x = 10f32.powf(-6.0 + 10.0 * i as f32 / 20_000.0);
            for p in [0.79, 0.8951, 1.0, 1.93] {
                let rel = (fast_pow(x, p) - x.powf(p)).abs() / x.powf(p);
                worst = worst.max(rel);
            }
        }
        assert!(worst < 1e-4, "worst relative error {worst}");
    }

    #[test]
    fn four_lane_coefficients_equal_the_scalar_formulas_bit_for_bit() {
        let (a, b) = fit_ab(0.1, 1.0);
        let mut rng = Rng::new(7);
        for round in 0..50_000 {
            let mut d2 = [0f32; 4];
            for x in &mut d2 {
                // Squared distances from 1e-9 to 1e6, with an exact zero now and then.
                *x = if rng.below(50) == 0 {
                    0.0
                } else {
                    10f32.powf(-9.0 + 15.0 * rng.uniform() as f32)
                };
            }
            let pull = [round % 2 == 0, rng.below(2) == 0, false, rng.below(3) == 0];
            let four = coefficients4(d2, pull, a, b);
            for l in 0..4 {
                if d2[l] > 0.0 {
                    let one = if pull[l] {
                        attraction(d2[l], a, b)
                    } else {
                        repulsion(d2[l], a, b)
                    };
                    assert_eq!(
                        four[l].to_bits(),
                        one.to_bits(),
                        "d2 {} pull {}",
                        d2[l],
                        pull[l]
                    );
                }
            }
            assert_eq!(
                coefficients4_any(d2, pull, a, b).map(f32::to_bits),
                four.map(f32::to_bits)
            );
        }
    }
}
