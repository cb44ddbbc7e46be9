//! Approximate k-nearest-neighbour graph by NN-descent (Dong, Charikar and Li, 2011), started from a
//! forest of random-projection trees, parallel with rayon.
//!
//! Determinism: every random choice comes from a generator seeded by (seed, round, item), and the
//! candidate updates of a round are applied per item in a fixed order, so the graph does not depend on
//! the number of threads.

use rayon::prelude::*;

use crate::knn::{prepare, KnnGraph, Metric};
use crate::npy::Matrix;
use crate::rng::Rng;

#[derive(Debug, Clone)]
pub struct NnDescentParams {
    pub k: usize,
    pub trees: usize,
    pub leaf_size: usize,
    pub max_rounds: usize,
    /// Stop when a round changes fewer than this share of all n·k neighbour slots.
    pub delta: f64,
    /// Share of each item's neighbours sampled as join candidates per round.
    pub sample_rate: f64,
    pub seed: u64,
}

impl NnDescentParams {
    pub fn new(k: usize, seed: u64) -> NnDescentParams {
        NnDescentParams {
            k,
            trees: 6,
            leaf_size: 40,
            max_rounds: 12,
            delta: 0.001,
            sample_rate: 0.6,
            seed,
        }
    }
}

#[inline]
fn sq_dist(a: &[f32], b: &[f32]) -> f32 {
    // Eight running sums let the compiler vectorise the loop.
    let mut acc = [0f32; 8];
    let chunks = a.len() / 8;
    for c in 0..chunks {
        let (x, y) = (&a[c * 8..c * 8 + 8], &b[c * 8..c * 8 + 8]);
        for l in 0..8 {
            let t = x[l] - y[l];
            acc[l] += t * t;
        }
    }
    let mut s: f32 = acc.iter().sum();
    for i in chunks * 8..a.len() {
        let t = a[i] - b[i];
        s += t * t;
    }
    s
}

#[inline]
fn dot(a: &[f32], b: &[f32]) -> f32 {
    let mut acc = [0f32; 8];
    let chunks = a.len() / 8;
    for c in 0..chunks {
        let (x, y) = (&a[c * 8..c * 8 + 8], &b[c * 8..c * 8 + 8]);
        for l in 0..8 {
            acc[l] += x[l] * y[l];
        }
    }
    let mut s: f32 = acc.iter().sum();
    for i in chunks * 8..a.len() {
        s += a[i] * b[i];
    }
    s
}

/// Fixed-size neighbour lists kept sorted by distance (nearest first).
struct Lists {
    k: usize,
    ids: Vec<u32>,
    dist: Vec<f32>,
    /// True while a neighbour has not yet taken part in a local join.
    fresh: Vec<bool>,
}

impl Lists {
    fn new(n: usize, k: usize) -> Lists {
        Lists {
            k,
            ids: vec![u32::MAX; n * k],
            dist: vec![f32::INFINITY; n * k],
            fresh: vec![false; n * k],
        }
    }
}

/// Inserts (j, d) into one item's sorted list; returns whether it changed.
fn insert(ids: &mut [u32], dist: &mut [f32], fresh: &mut [bool], j: u32, d: f32) -> bool {
    let k = ids.len();
    if d >= dist[k - 1] {
        return false;
    }
    if ids.contains(&j) {
        return false;
    }
    let mut p = k - 1;
    while p > 0 && (dist[p - 1] > d || (dist[p - 1] == d && ids[p - 1] > j)) {
        ids[p] = ids[p - 1];
        dist[p] = dist[p - 1];
        fresh[p] = fresh[p - 1];
        p -= 1;
    }
    ids[p] = j;
    dist[p] = d;
    fresh[p] = true;
    true
}

/// Sorts and deduplicates a candidate list, then keeps a seeded random `cap` of it.
fn keep_sample(c: &mut Vec<u32>, cap: usize, rng: &mut Rng) {
    c.sort_unstable();
    c.dedup();
    if c.len() > cap {
        for x in 0..cap {
            let y = x + rng.below((c.len() - x) as u64) as usize;
            c.swap(x, y);
        }
        c.truncate(cap);
    }
}

/// Applies candidate updates (target, candidate, distance), grouped by target, in parallel.
fn apply(lists: &mut Lists, mut updates: Vec<(u32, u32, f32)>) -> usize {
    updates
        .par_sort_unstable_by(|a, b| a.0.cmp(&b.0).then(a.2.total_cmp(&b.2)).then(a.1.cmp(&b.1)));
    let k = lists.k;
    // Split the update list at target boundaries matching the per-item chunks.
    let mut bounds = Vec::with_capacity(lists.ids.len() / k + 1);
    let mut start = 0;
    while start < updates.len() {
        let t = updates[start].0;
        let mut end = start;
        while end < updates.len() && updates[end].0 == t {
            end += 1;
        }
        bounds.push((t as usize, start, end));
        start = end;
    }
    let ids_ptr = SendPtr(lists.ids.as_mut_ptr());
    let dist_ptr = SendPtr(lists.dist.as_mut_ptr());
    let fresh_ptr = SendPtr(lists.fresh.as_mut_ptr());
    bounds
        .par_iter()
        .map(|&(t, s, e)| {
            // SAFETY: each target item appears in exactly one bound, so its k slots are written by one thread only.
            let (ids, dist, fresh) = unsafe {
                (
                    std::slice::from_raw_parts_mut(ids_ptr.get().add(t * k), k),
                    std::slice::from_raw_parts_mut(dist_ptr.get().add(t * k), k),
                    std::slice::from_raw_parts_mut(fresh_ptr.get().add(t * k), k),
                )
            };
            updates[s..e]
                .iter()
                .filter(|&&(_, j, d)| insert(ids, dist, fresh, j, d))
                .count()
        })
        .sum()
}

#[derive(Clone, Copy)]
struct SendPtr<T>(*mut T);
unsafe impl<T> Send for SendPtr<T> {}
unsafe impl<T> Sync for SendPtr<T> {}
impl<T> SendPtr<T> {
    fn get(self) -> *mut T {
        self.0
    }
}

/// Leaves of one random-projection tree: split by the hyperplane halfway between two random items.
fn rp_leaves(data: &Matrix, leaf_size: usize, rng: &mut Rng) -> Vec<Vec<u32>> {
    let mut out = Vec::new();
    let mut stack: Vec<Vec<u32>> = vec![(0..data.rows as u32).collect()];
    while let Some(items) = stack.pop() {
        if items.len() <= leaf_size {
            out.push(items);
            continue;
        }
        let a = items[rng.below(items.len() as u64) as usize] as usize;
        let mut b = items[rng.below(items.len() as u64) as usize] as usize;
        for _ in 0..4 {
            if b != a {
                break;
            }
            b = items[rng.below(items.len() as u64) as usize] as usize;
        }
        let (ra, rb) = (data.row(a), data.row(b));
        let normal: Vec<f32> = ra.iter().zip(rb).map(|(x, y)| x - y).collect();
        let mid: Vec<f32> = ra.iter().zip(rb).map(|(x, y)| (x + y) / 2.0).collect();
        let offset = dot(&normal, &mid);
        let (mut left, mut right) = (Vec::new(), Vec::new());
        for &i in &items {
            let s = dot(data.row(i as usize), &normal) - offset;
            if s < 0.0 || (s == 0.0 && rng.next_u64() & 1 == 0) {
                left.push(i);
            } else {
                right.push(i);
            }
        }
        // Degenerate split (identical items): halve at random instead.
        if left.is_empty() || right.is_empty() {
            let mut all = items;
            let mid = all.len() / 2;
            right = all.split_off(mid);
            left = all;
        }
        stack.push(left);
        stack.push(right);
    }
    out
}

/// The approximate graph. Distances in the result are the metric's (cosine: 1 − cos; Euclidean: L2).
pub fn nn_descent(
    m: &Matrix,
    metric: Metric,
    p: &NnDescentParams,
    progress: &(dyn Fn(&str, u64, u64) + Sync),
) -> KnnGraph {
    let n = m.rows;
    let k = p.k.min(n.saturating_sub(1)).max(1);
    let data = prepare(m, metric);
    let mut lists = Lists::new(n, k);
    let trace = std::env::var_os("VITRINE_NND_TRACE").is_some();
    let clock = std::time::Instant::now();

    // Start: every pair within each leaf of a few random-projection trees.
    let forests: Vec<Vec<Vec<u32>>> = (0..p.trees)
        .into_par_iter()
        .map(|t| {
            rp_leaves(
                &data,
                p.leaf_size,
                &mut Rng::new(p.seed ^ (0x7ee5 + t as u64 * 0x9E37_79B9)),
            )
        })
        .collect();
    if trace {
        eprintln!("{:.2}s trees built", clock.elapsed().as_secs_f64());
    }
    for (t, leaves) in forests.iter().enumerate() {
        let updates: Vec<(u32, u32, f32)> = leaves
            .par_iter()
            .flat_map_iter(|leaf| {
                // All pairs in the leaf, but only each item's k nearest of them become updates.
                let m = leaf.len();
                let mut d = vec![0f32; m * m];
                for x in 0..m {
                    for y in x + 1..m {
                        let v = sq_dist(data.row(leaf[x] as usize), data.row(leaf[y] as usize));
                        d[x * m + y] = v;
                        d[y * m + x] = v;
                    }
                }
                let mut u = Vec::with_capacity(m * k);
                let mut row: Vec<(f32, u32)> = Vec::with_capacity(m);
                for x in 0..m {
                    row.clear();
                    row.extend((0..m).filter(|&y| y != x).map(|y| (d[x * m + y], leaf[y])));
                    let kk = k.min(row.len());
                    if kk > 0 && kk < row.len() {
                        row.select_nth_unstable_by(kk - 1, |a, b| a.0.total_cmp(&b.0));
                    }
                    u.extend(row[..kk].iter().map(|&(dd, j)| (leaf[x], j, dd)));
                }
                u
            })
            .collect();
        apply(&mut lists, updates);
        progress("neighbour trees", t as u64 + 1, p.trees as u64);
    }
    // Items a tiny leaf left short of neighbours get random ones.
    let short: Vec<usize> = (0..n)
        .filter(|&i| lists.ids[i * k + k - 1] == u32::MAX)
        .collect();
    if !short.is_empty() {
        let updates: Vec<(u32, u32, f32)> = short
            .par_iter()
            .flat_map_iter(|&i| {
                let mut rng =
                    Rng::new(p.seed ^ 0xfeed ^ (i as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15));
                (0..2 * k)
                    .map(|_| rng.below(n as u64) as u32)
                    .filter(|&j| j as usize != i)
                    .map(|j| (i as u32, j, sq_dist(data.row(i), data.row(j as usize))))
                    .collect::<Vec<_>>()
            })
            .collect();
        apply(&mut lists, updates);
    }

    if trace {
        eprintln!("{:.2}s leaves joined", clock.elapsed().as_secs_f64());
    }
    let sample = ((p.sample_rate * k as f64).ceil() as usize).max(1);
    for round in 0..p.max_rounds {
        // Candidates per item: a sample of its fresh neighbours ("new") and of the rest ("old"),
        // plus the same drawn from reverse neighbours.
        // Drawn in parallel per item, then grouped by the item they go to (sorted, so the same
        // for any number of threads).
        let mut pairs: Vec<(u32, bool, u32)> = lists
            .ids
            .par_chunks(k)
            .zip(lists.fresh.par_chunks_mut(k))
            .enumerate()
            .flat_map_iter(|(i, (ids, fresh))| {
                let mut rng = Rng::new(
                    p.seed
                        ^ ((round as u64) << 40)
                        ^ (i as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15),
                );
                let mut taken_new = 0;
                let mut out = Vec::with_capacity(2 * k);
                for s in 0..k {
                    let j = ids[s];
                    if j == u32::MAX {
                        continue;
                    }
                    if fresh[s] {
                        if taken_new < sample && rng.uniform() < (sample as f64 / k as f64).max(0.5)
                        {
                            out.push((i as u32, true, j));
                            out.push((j, true, i as u32));
                            fresh[s] = false;
                            taken_new += 1;
                        }
                    } else {
                        out.push((i as u32, false, j));
                        out.push((j, false, i as u32));
                    }
                }
                out
            })
            .collect();
        pairs.par_sort_unstable();
        let mut new_c: Vec<Vec<u32>> = vec![Vec::new(); n];
        let mut old_c: Vec<Vec<u32>> = vec![Vec::new(); n];
        for &(t, is_new, j) in &pairs {
            if is_new {
                new_c[t as usize].push(j);
            } else {
                old_c[t as usize].push(j);
            }
        }
        drop(pairs);
        let cap = 2 * sample;
        for (lists_c, salt) in [(&mut new_c, 0xabcu64), (&mut old_c, 0xdef)] {
            lists_c.par_iter_mut().enumerate().for_each(|(i, c)| {
                let mut rng = Rng::new(p.seed ^ salt ^ ((round as u64) << 36) ^ i as u64);
                keep_sample(c, cap, &mut rng);
            });
        }
        if trace {
            eprintln!("  candidates at {:.2}s", clock.elapsed().as_secs_f64());
        }
        // Local join: new x new and new x old pairs, kept only if they would enter a list.
        let worst: Vec<f32> = (0..n).map(|i| lists.dist[i * k + k - 1]).collect();
        let updates: Vec<(u32, u32, f32)> = (0..n)
            .into_par_iter()
            .flat_map_iter(|i| {
                let (nw, od) = (&new_c[i], &old_c[i]);
                let mut u = Vec::new();
                for (x, &a) in nw.iter().enumerate() {
                    let ra = data.row(a as usize);
                    for &b in nw[x + 1..].iter().chain(od.iter()) {
                        if a == b {
                            continue;
                        }
                        let d = sq_dist(ra, data.row(b as usize));
                        if d < worst[a as usize] {
                            u.push((a, b, d));
                        }
                        if d < worst[b as usize] {
                            u.push((b, a, d));
                        }
                    }
                }
                u
            })
            .collect();
        let n_updates = updates.len();
        let joined = clock.elapsed().as_secs_f64();
        let changed = apply(&mut lists, updates);
        if trace {
            eprintln!("  join done at {joined:.2}s with {n_updates} updates");
            eprintln!(
                "{:.2}s round {round}: {changed} changes",
                clock.elapsed().as_secs_f64()
            );
        }
        progress("neighbour rounds", round as u64 + 1, p.max_rounds as u64);
        if (changed as f64) < p.delta * (n * k) as f64 {
            break;
        }
    }

    let distances = lists
        .dist
        .iter()
        .map(|&d| {
            if !d.is_finite() {
                f32::INFINITY
            } else {
                match metric {
                    // Unit vectors: |a − b|² = 2 − 2 cos.
                    Metric::Cosine => (d / 2.0).max(0.0),
                    Metric::Euclidean => d.max(0.0).sqrt(),
                }
            }
        })
        .collect();
    KnnGraph {
        k,
        ids: lists.ids,
        distances,
    }
}

/// Share of the exact neighbours that the approximate graph found, on the sampled query items.
pub fn recall(approx: &KnnGraph, exact_ids: &[Vec<u32>], sample: &[usize]) -> f64 {
    let mut hit = 0usize;
    let mut total = 0usize;
    for (q, &i) in sample.iter().enumerate() {
        let got: std::collections::HashSet<u32> = approx.ids[i * approx.k..(i + 1) * approx.k]
            .iter()
            .copied()
            .collect();
        hit += exact_ids[q].iter().filter(|j| got.contains(j)).count();
        total += exact_ids[q].len();
    }
    hit as f64 / total.max(1) as f64
}

/// Exact neighbours of the sampled items only (for measuring recall on large collections).
pub fn exact_for(m: &Matrix, metric: Metric, k: usize, sample: &[usize]) -> Vec<Vec<u32>> {
    let data = prepare(m, metric);
    sample
        .par_iter()
        .map(|&i| {
            let mut d: Vec<(f32, u32)> = (0..m.rows)
                .filter(|&j| j != i)
                .map(|j| (sq_dist(data.row(i), data.row(j)), j as u32))
                .collect();
            let kk = k.min(d.len());
            if kk > 0 && kk < d.len() {
                d.select_nth_unstable_by(kk - 1, |a, b| a.0.total_cmp(&b.0));
            }
            d.truncate(kk);
            d.into_iter().map(|(_, j)| j).collect()
        })
        .collect()
}
