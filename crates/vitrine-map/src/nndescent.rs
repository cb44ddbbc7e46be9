//! Approximate k-nearest-neighbour graph by NN-descent (Dong, Charikar and Li, 2011), started from a
//! forest of random-projection trees, parallel with rayon.
//!
//! Determinism: every random choice comes from a generator seeded by (seed, round, item), and the
//! candidate updates of a round are applied per item in a fixed order, so the graph does not depend on
//! the number of threads.

use rayon::prelude::*;

use crate::kernels::{dot, dot_block, dot_many, sq_dist, sq_dist_block, sq_dist_many};
use crate::knn::{prepare, KnnGraph, Metric};
use crate::matrix::Matrix;
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
    /// After the rounds settle, the recall measured on 128 sampled items against exact search
    /// (about ±0.01); below this the lists are widened (see [`nn_descent`]).
    pub min_recall: f64,
    /// Widenings at most.
    pub max_widenings: usize,
    pub seed: u64,
}

impl NnDescentParams {
    pub fn new(k: usize, seed: u64) -> NnDescentParams {
        NnDescentParams {
            k,
            trees: 4,
            leaf_size: 40,
            max_rounds: 12,
            delta: 0.005,
            sample_rate: 0.6,
            min_recall: 0.96,
            max_widenings: 1,
            seed,
        }
    }
}

/// Fixed-size neighbour lists kept sorted by (distance, id), nearest first.
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

    /// The same lists with `extra` more slots each (empty), every entry fresh again so that it
    /// takes part in the next joins with the wider lists.
    fn widened(&self, extra: usize) -> Lists {
        let (k, k2) = (self.k, self.k + extra);
        let n = self.ids.len() / k;
        let mut out = Lists::new(n, k2);
        for i in 0..n {
            out.ids[i * k2..i * k2 + k].copy_from_slice(&self.ids[i * k..(i + 1) * k]);
            out.dist[i * k2..i * k2 + k].copy_from_slice(&self.dist[i * k..(i + 1) * k]);
        }
        for (f, &j) in out.fresh.iter_mut().zip(&out.ids) {
            *f = j != u32::MAX;
        }
        out
    }
}

/// Inserts (j, d) into one item's list; returns whether it changed. A list always ends up holding
/// the k smallest distinct (distance, id) pairs it was offered, whatever the order of the offers:
/// this is what makes the graph independent of the number of threads without sorting the updates.
fn insert(ids: &mut [u32], dist: &mut [f32], fresh: &mut [bool], j: u32, d: f32) -> bool {
    let k = ids.len();
    if d > dist[k - 1] || (d == dist[k - 1] && j >= ids[k - 1]) {
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

/// One update: offer `candidate` at distance `d` to `target`'s list.
type Update = (u32, u32, f32);

/// Items per block of the parallel loops that produce updates.
const BLOCK: usize = 256;

/// Blocks per batch of a round's local join (32,768 items).
const JOIN_BATCH_BLOCKS: usize = 128;

/// Items per range when the items are split into one contiguous range per thread.
fn part_size(n: usize) -> usize {
    n.div_ceil(rayon::current_num_threads().max(1)).max(1)
}

/// Updates produced by one block of work, already split by the range their target falls in.
struct Sink {
    per: usize,
    parts: Vec<Vec<Update>>,
}

impl Sink {
    fn new(n: usize) -> Sink {
        let per = part_size(n);
        Sink {
            per,
            parts: (0..n.div_ceil(per)).map(|_| Vec::new()).collect(),
        }
    }
    #[inline]
    fn push(&mut self, t: u32, j: u32, d: f32) {
        self.parts[t as usize / self.per].push((t, j, d));
    }
    fn len(&self) -> usize {
        self.parts.iter().map(Vec::len).sum()
    }
    /// Empty again, keeping the memory for the next block.
    fn clear(&mut self) {
        self.parts.iter_mut().for_each(Vec::clear);
    }
}

/// Applies blocks of updates. Each thread owns a range of target items and reads that range's
/// part of every block, so no update is sorted or moved. Returns how many list entries are new
/// after the updates.
fn apply(lists: &mut Lists, blocks: &[Sink]) -> usize {
    let k = lists.k;
    let n = lists.ids.len() / k;
    let per = part_size(n);
    lists
        .ids
        .chunks_mut(per * k)
        .zip(lists.dist.chunks_mut(per * k))
        .zip(lists.fresh.chunks_mut(per * k))
        .enumerate()
        .collect::<Vec<_>>()
        .into_par_iter()
        .map(|(c, ((ids, dist), fresh))| {
            let lo = c * per;
            let before = ids.to_vec();
            let mut touched = vec![false; ids.len() / k];
            for block in blocks {
                for &(t, j, d) in &block.parts[c] {
                    let u = t as usize - lo;
                    let s = u * k;
                    let (ids, dist, fresh) = (
                        &mut ids[s..s + k],
                        &mut dist[s..s + k],
                        &mut fresh[s..s + k],
                    );
                    if insert(ids, dist, fresh, j, d) {
                        touched[u] = true;
                    }
                }
            }
            touched
                .iter()
                .enumerate()
                .filter(|&(_, &t)| t)
                .map(|(u, _)| {
                    let (now, was) = (&ids[u * k..u * k + k], &before[u * k..u * k + k]);
                    now.iter().filter(|j| !was.contains(j)).count()
                })
                .sum::<usize>()
        })
        .sum()
}

/// Join candidates per item, at most `cap` of each kind, chosen by a seeded priority per pair.
struct Candidates {
    cap: usize,
    ids: Vec<u32>,
    len: Vec<u8>,
}

/// The priority of pair {i, j} in a round: the same from both ends, so a candidate offered twice is
/// one candidate, and the kept set (the `cap` lowest priorities) does not depend on the offer order.
#[inline]
fn priority(seed: u64, round: usize, i: u32, j: u32) -> u64 {
    let (a, b) = if i < j { (i, j) } else { (j, i) };
    Rng::new(seed ^ ((round as u64) << 56) ^ ((a as u64) << 32 | b as u64)).next_u64()
}

/// Offers candidate `j` with priority `pr` to one item's candidate slots; `worst` is the slot of
/// the highest (priority, id) once the slots are full.
#[inline]
fn offer(ids: &mut [u32], prs: &mut [u64], len: &mut u8, worst: &mut u8, j: u32, pr: u64) {
    let m = *len as usize;
    let cap = ids.len();
    if m == cap {
        let w = *worst as usize;
        if (pr, j) >= (prs[w], ids[w]) || ids.contains(&j) {
            return;
        }
        ids[w] = j;
        prs[w] = pr;
    } else {
        if ids[..m].contains(&j) {
            return;
        }
        ids[m] = j;
        prs[m] = pr;
        *len += 1;
        if m + 1 < cap {
            return;
        }
    }
    let mut w = 0;
    for s in 1..cap {
        if (prs[s], ids[s]) > (prs[w], ids[w]) {
            w = s;
        }
    }
    *worst = w as u8;
}

/// New and old join candidates of every item: its own neighbours and the items that have it as a
/// neighbour, fresh ones in `new`, the rest in `old`. Fresh neighbours chosen as new candidates stop
/// being fresh.
fn candidates(lists: &mut Lists, cap: usize, seed: u64, round: usize) -> (Candidates, Candidates) {
    let k = lists.k;
    let n = lists.ids.len() / k;
    let per = part_size(n);
    let mut new_c = Candidates {
        cap,
        ids: vec![u32::MAX; n * cap],
        len: vec![0; n],
    };
    let mut old_c = Candidates {
        cap,
        ids: vec![u32::MAX; n * cap],
        len: vec![0; n],
    };
    {
        let (ids, fresh) = (&lists.ids, &lists.fresh);
        let parts: Vec<_> = new_c
            .ids
            .chunks_mut(per * cap)
            .zip(new_c.len.chunks_mut(per))
            .zip(
                old_c
                    .ids
                    .chunks_mut(per * cap)
                    .zip(old_c.len.chunks_mut(per)),
            )
            .enumerate()
            .collect();
        parts
            .into_par_iter()
            .for_each(|(c, ((nid, nlen), (oid, olen)))| {
                let lo = c * per;
                let hi = lo + nlen.len();
                let mut npr = vec![0u64; nid.len()];
                let mut opr = vec![0u64; oid.len()];
                let mut nworst = vec![0u8; nlen.len()];
                let mut oworst = vec![0u8; olen.len()];
                let mut give = |t: usize, j: u32, is_new: bool, pr: u64| {
                    let (s, u) = ((t - lo) * cap, t - lo);
                    if is_new {
                        let (ids, prs) = (&mut nid[s..s + cap], &mut npr[s..s + cap]);
                        offer(ids, prs, &mut nlen[u], &mut nworst[u], j, pr);
                    } else {
                        let (ids, prs) = (&mut oid[s..s + cap], &mut opr[s..s + cap]);
                        offer(ids, prs, &mut olen[u], &mut oworst[u], j, pr);
                    }
                };
                for i in 0..n {
                    let mine = i >= lo && i < hi;
                    for s in i * k..(i + 1) * k {
                        let j = ids[s];
                        if j == u32::MAX {
                            continue;
                        }
                        let theirs = (j as usize) >= lo && (j as usize) < hi;
                        if !mine && !theirs {
                            continue;
                        }
                        let pr = priority(seed, round, i as u32, j);
                        if mine {
                            give(i, j, fresh[s], pr);
                        }
                        if theirs {
                            give(j as usize, i as u32, fresh[s], pr);
                        }
                    }
                }
            });
    }
    // Neighbours that go into the join as new candidates are no longer fresh.
    lists
        .ids
        .par_chunks(k)
        .zip(lists.fresh.par_chunks_mut(k))
        .enumerate()
        .for_each(|(i, (ids, fresh))| {
            let chosen = &new_c.ids[i * cap..i * cap + new_c.len[i] as usize];
            for (j, f) in ids.iter().zip(fresh.iter_mut()) {
                if *f && chosen.contains(j) {
                    *f = false;
                }
            }
        });
    (new_c, old_c)
}

impl Candidates {
    fn of(&self, i: usize) -> &[u32] {
        &self.ids[i * self.cap..i * self.cap + self.len[i] as usize]
    }
}

/// Leaves of one random-projection tree, in tree order: each node splits its items by the
/// hyperplane halfway between two of them drawn at random. Every node draws from its own generator,
/// seeded by its parent's, so large subtrees are built in parallel with the same result.
fn rp_leaves(data: &Matrix, items: Vec<u32>, leaf_size: usize, seed: u64) -> Vec<Vec<u32>> {
    if items.len() <= leaf_size {
        return vec![items];
    }
    let mut rng = Rng::new(seed);
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
    // Three rows at a time share the reads of the normal.
    let mut sides = |group: &[u32], ds: &[f32]| {
        for (&i, &d) in group.iter().zip(ds) {
            let s = d - offset;
            if s < 0.0 || (s == 0.0 && rng.next_u64() & 1 == 0) {
                left.push(i);
            } else {
                right.push(i);
            }
        }
    };
    let mut three = items.chunks_exact(3);
    for group in three.by_ref() {
        let ds = dot_many(
            &normal,
            [group[0], group[1], group[2]].map(|i| data.row(i as usize)),
        );
        sides(group, &ds);
    }
    let rest = three.remainder();
    let ds: Vec<f32> = rest
        .iter()
        .map(|&i| dot(data.row(i as usize), &normal))
        .collect();
    sides(rest, &ds);
    // Degenerate split (identical items): halve instead.
    if left.is_empty() || right.is_empty() {
        let mut all = items;
        let mid = all.len() / 2;
        right = all.split_off(mid);
        left = all;
    }
    let (sl, sr) = (rng.next_u64(), rng.next_u64());
    let (mut l, r) = if left.len() + right.len() > 8192 {
        rayon::join(
            || rp_leaves(data, left, leaf_size, sl),
            || rp_leaves(data, right, leaf_size, sr),
        )
    } else {
        (
            rp_leaves(data, left, leaf_size, sl),
            rp_leaves(data, right, leaf_size, sr),
        )
    };
    l.extend(r);
    l
}

/// The working distance between two prepared rows: the squared Euclidean distance, which for the
/// unit rows of the cosine metric is 2 − 2·(a·b), computed so (one multiply-add per element
/// instead of a subtraction and a multiply-add).
#[derive(Clone, Copy)]
struct PairDist {
    unit: bool,
}

impl PairDist {
    #[inline(always)]
    fn of(self, a: &[f32], b: &[f32]) -> f32 {
        if self.unit {
            (2.0 - 2.0 * dot(a, b)).max(0.0)
        } else {
            sq_dist(a, b)
        }
    }

    /// [`PairDist::of`] for every row of `a` with every row of `b`, the same bits.
    #[inline(always)]
    fn of_block<const A: usize, const B: usize>(
        self,
        a: [&[f32]; A],
        b: [&[f32]; B],
    ) -> [[f32; B]; A] {
        if self.unit {
            dot_block(a, b).map(|r| r.map(|d| (2.0 - 2.0 * d).max(0.0)))
        } else {
            sq_dist_block(a, b)
        }
    }

    /// [`PairDist::of`] from `a` to each of `bs`, the same bits, `a` read once.
    #[inline(always)]
    fn of_many<const M: usize>(self, a: &[f32], bs: [&[f32]; M]) -> [f32; M] {
        if self.unit {
            dot_many(a, bs).map(|d| (2.0 - 2.0 * d).max(0.0))
        } else {
            sq_dist_many(a, bs)
        }
    }
}

/// The local join's pairs of one item's candidates `c` (its new candidates first, `new` of them):
/// every (x, y) with x among the new and x < y, given with their distance to `f(x, y, d)`. Rows go
/// three by three against three (see [`crate::kernels::dot_block`]); a pair of one item given twice
/// is given too, and left to `f`.
fn join_pairs(
    data: &Matrix,
    dist: PairDist,
    c: &[u32],
    new: usize,
    mut f: impl FnMut(usize, usize, f32),
) {
    let row = |i: usize| data.row(c[i] as usize);
    let l = c.len();
    let full = new / 3 * 3;
    for x0 in (0..full).step_by(3) {
        let xs = [row(x0), row(x0 + 1), row(x0 + 2)];
        // From the block on the diagonal (where only x < y counts) to the end.
        let mut y0 = x0;
        while y0 + 3 <= l {
            let ds = dist.of_block(xs, [row(y0), row(y0 + 1), row(y0 + 2)]);
            for (dx, r) in ds.iter().enumerate() {
                for (dy, &d) in r.iter().enumerate() {
                    if x0 + dx < y0 + dy {
                        f(x0 + dx, y0 + dy, d);
                    }
                }
            }
            y0 += 3;
        }
        for y in y0..l {
            for x in x0..(x0 + 3).min(y) {
                f(x, y, dist.of(row(x), row(y)));
            }
        }
    }
    // The last one or two new rows, each against the rows after it, three at a time.
    for x in full..new {
        let mut y = x + 1;
        while y + 3 <= l {
            let ds = dist.of_many(row(x), [row(y), row(y + 1), row(y + 2)]);
            for (dy, d) in ds.into_iter().enumerate() {
                f(x, y + dy, d);
            }
            y += 3;
        }
        for y in y..l {
            f(x, y, dist.of(row(x), row(y)));
        }
    }
}

/// Updates from all pairs in one leaf: each item's k nearest of the others.
fn leaf_updates(data: &Matrix, dist: PairDist, leaf: &[u32], k: usize, u: &mut Sink) {
    let m = leaf.len();
    let mut d = vec![0f32; m * m];
    for x in 0..m {
        for y in x + 1..m {
            let v = dist.of(data.row(leaf[x] as usize), data.row(leaf[y] as usize));
            d[x * m + y] = v;
            d[y * m + x] = v;
        }
    }
    let mut row: Vec<(f32, u32)> = Vec::with_capacity(m);
    for x in 0..m {
        row.clear();
        row.extend((0..m).filter(|&y| y != x).map(|y| (d[x * m + y], leaf[y])));
        let kk = k.min(row.len());
        if kk > 0 && kk < row.len() {
            row.select_nth_unstable_by(kk - 1, |a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
        }
        for &(dd, j) in &row[..kk] {
            u.push(leaf[x], j, dd);
        }
    }
}

/// Puts row `order[i]` at row i, in place (by following the permutation's cycles), so that the
/// working copy of the vectors exists once.
fn permute_rows(m: &mut Matrix, order: &[u32]) {
    let c = m.cols;
    let mut done = vec![false; m.rows];
    let mut held = vec![0f32; c];
    for s in 0..m.rows {
        if done[s] {
            continue;
        }
        held.copy_from_slice(m.row(s));
        let mut j = s;
        loop {
            done[j] = true;
            let from = order[j] as usize;
            if from == s {
                m.data[j * c..(j + 1) * c].copy_from_slice(&held);
                break;
            }
            m.data.copy_within(from * c..(from + 1) * c, j * c);
            j = from;
        }
    }
}

/// The approximate graph. Distances in the result are the metric's (cosine: 1 − cos; Euclidean: L2).
pub fn nn_descent(
    m: &Matrix,
    metric: Metric,
    p: &NnDescentParams,
    progress: &(dyn Fn(&str, u64, u64) + Sync),
) -> KnnGraph {
    nn_descent_with(m, metric, p, None, progress).0
}

/// What one search did, for the record of how a graph was made.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct DescentReport {
    /// Rounds run, those after a widening included.
    pub rounds: usize,
    /// Times the lists were widened after the recall check fell short.
    pub widenings: usize,
    /// Length of the lists at the end (k, or more after a widening).
    pub list_length: usize,
    /// Recall@k on the check's items after the first rounds, before any widening (none when the
    /// check did not run: tiny collections, or `min_recall` 0).
    pub first_recall: Option<f64>,
}

/// Exact neighbours that the caller already has for some items (its own item order, k each, as
/// [`exact_for`] gives them): the recall check after the rounds uses them instead of drawing and
/// solving a sample of its own.
pub struct Known<'a> {
    pub sample: &'a [usize],
    pub truth: &'a [Vec<u32>],
}

/// [`nn_descent`], with the recall check on items whose exact neighbours are known, and a report
/// of what the search did.
pub fn nn_descent_with(
    m: &Matrix,
    metric: Metric,
    p: &NnDescentParams,
    known: Option<Known>,
    progress: &(dyn Fn(&str, u64, u64) + Sync),
) -> (KnnGraph, DescentReport) {
    let n = m.rows;
    let k = p.k.min(n.saturating_sub(1)).max(1);
    let data = prepare(m, metric);
    let dist = PairDist {
        unit: metric == Metric::Cosine,
    };
    let mut lists = Lists::new(n, k);
    let trace = std::env::var_os("VITRINE_NND_TRACE").is_some();
    let clock = std::time::Instant::now();

    // Start: every pair within each leaf of a few random-projection trees. The first tree also
    // gives the working order: items that are neighbours then sit close in memory, so the rows that
    // the other trees and the local joins read are mostly in cache already.
    let tree_seed = |t: usize| p.seed ^ (0x7ee5 + t as u64 * 0x9E37_79B9);
    let first = rp_leaves(&data, (0..n as u32).collect(), p.leaf_size, tree_seed(0));
    let order: Vec<u32> = first.iter().flatten().copied().collect();
    let mut place = vec![0u32; n];
    for (new, &old) in order.iter().enumerate() {
        place[old as usize] = new as u32;
    }
    let mut data = data;
    permute_rows(&mut data, &order);
    let data = data;
    let mut forests: Vec<Vec<Vec<u32>>> = vec![first
        .into_iter()
        .map(|leaf| leaf.into_iter().map(|i| place[i as usize]).collect())
        .collect()];
    forests.par_extend(
        (1..p.trees)
            .into_par_iter()
            .map(|t| rp_leaves(&data, (0..n as u32).collect(), p.leaf_size, tree_seed(t))),
    );
    if trace {
        eprintln!("{:.2}s trees built", clock.elapsed().as_secs_f64());
    }
    for (t, leaves) in forests.iter().enumerate() {
        let blocks: Vec<Sink> = leaves
            .par_chunks(16)
            .map(|group| {
                let mut u = Sink::new(n);
                for leaf in group {
                    leaf_updates(&data, dist, leaf, k, &mut u);
                }
                u
            })
            .collect();
        apply(&mut lists, &blocks);
        progress("neighbour trees", t as u64 + 1, p.trees as u64);
    }
    // Items a tiny leaf left short of neighbours get random ones.
    let short: Vec<usize> = (0..n)
        .filter(|&i| lists.ids[i * k + k - 1] == u32::MAX)
        .collect();
    if !short.is_empty() {
        let mut u = Sink::new(n);
        for &i in &short {
            let mut rng =
                Rng::new(p.seed ^ 0xfeed ^ (i as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15));
            for _ in 0..2 * k {
                let j = rng.below(n as u64) as u32;
                if j as usize != i {
                    u.push(i as u32, j, dist.of(data.row(i), data.row(j as usize)));
                }
            }
        }
        apply(&mut lists, &[u]);
    }

    if trace {
        eprintln!("{:.2}s leaves joined", clock.elapsed().as_secs_f64());
    }
    let mut report = DescentReport {
        rounds: descend(&mut lists, &data, dist, p, 0, progress, trace, &clock),
        ..Default::default()
    };

    // On collections of high intrinsic dimension the rounds can settle well short of the true
    // neighbours (the join compares neighbours of neighbours, and there they are poor guides).
    // Measured on a few sampled items against exact search: when recall falls short, the lists
    // grow by half of k and the rounds go on with the wider lists, whose extra entries give the
    // join more paths; the result keeps each item's k nearest. Collections that reach the recall
    // pay only for the measurement.
    if p.min_recall > 0.0 && n > 4 * k {
        let (sample, truth): (Vec<usize>, Vec<Vec<u32>>) = match known {
            // Into the working order.
            Some(known) => (
                known.sample.iter().map(|&i| place[i] as usize).collect(),
                known
                    .truth
                    .iter()
                    .map(|t| t.iter().take(k).map(|&j| place[j as usize]).collect())
                    .collect(),
            ),
            None => {
                // Spread over the collection by a seeded draw (the working order puts neighbours
                // together).
                let mut rng = Rng::new(p.seed ^ 0x5a3c_91e7);
                let mut sample: Vec<usize> = (0..RECALL_SAMPLE.min(n))
                    .map(|_| rng.below(n as u64) as usize)
                    .collect();
                sample.sort_unstable();
                sample.dedup();
                let truth = exact_in(&data, dist, k, &sample);
                (sample, truth)
            }
        };
        for widening in 0.. {
            let r = list_recall(&lists, k, &truth, &sample);
            if trace {
                eprintln!(
                    "{:.2}s recall@{k} on {} items: {r:.4} (lists of {})",
                    clock.elapsed().as_secs_f64(),
                    sample.len(),
                    lists.k
                );
            }
            if widening == 0 {
                report.first_recall = Some(r);
            }
            if r >= p.min_recall || widening == p.max_widenings {
                break;
            }
            lists = lists.widened(k.div_ceil(2));
            report.widenings += 1;
            report.rounds += descend(
                &mut lists,
                &data,
                dist,
                p,
                100 * (widening + 1),
                progress,
                trace,
                &clock,
            );
        }
    }
    let kl = lists.k;
    report.list_length = kl;

    // Back to the caller's item order, each list sorted by (distance, id) in that order.
    let mut ids = vec![u32::MAX; n * k];
    let mut distances = vec![f32::INFINITY; n * k];
    ids.par_chunks_mut(k)
        .zip(distances.par_chunks_mut(k))
        .enumerate()
        .for_each(|(old, (ids, dists))| {
            // Lists are sorted nearest first: the first k of a widened list are its k nearest.
            let s = place[old] as usize * kl;
            let mut row: Vec<(f32, u32)> = lists.dist[s..s + k]
                .iter()
                .zip(&lists.ids[s..s + k])
                .filter(|&(_, &j)| j != u32::MAX)
                .map(|(&d, &j)| (d, order[j as usize]))
                .collect();
            row.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
            for (slot, (d, j)) in row.into_iter().enumerate() {
                ids[slot] = j;
                dists[slot] = match metric {
                    // Unit vectors: |a − b|² = 2 − 2 cos.
                    Metric::Cosine => (d / 2.0).max(0.0),
                    Metric::Euclidean => d.max(0.0).sqrt(),
                };
            }
        });
    (KnnGraph { k, ids, distances }, report)
}

/// Rounds of NN-descent (candidates, local join, updates) until few lists change; returns how
/// many ran.
#[allow(clippy::too_many_arguments)]
fn descend(
    lists: &mut Lists,
    data: &Matrix,
    dist: PairDist,
    p: &NnDescentParams,
    first_round: usize,
    progress: &(dyn Fn(&str, u64, u64) + Sync),
    trace: bool,
    clock: &std::time::Instant,
) -> usize {
    let (k, n) = (lists.k, lists.ids.len() / lists.k);
    let cap = 2 * ((p.sample_rate * k as f64).ceil() as usize).max(1);
    for round in first_round..first_round + p.max_rounds {
        let (new_c, old_c) = candidates(lists, cap, p.seed, round);
        if trace {
            eprintln!("  candidates at {:.2}s", clock.elapsed().as_secs_f64());
        }
        // Local join: new x new and new x old pairs, kept only if they would enter a list. The
        // items go in batches of a fixed size, each batch's updates applied before the next, so
        // that the updates held at once stay bounded (the first rounds after a widening offer
        // hundreds of millions) and later batches join against lists already improved. Batches
        // are fixed, so the graph does not depend on the number of threads.
        let (mut changed, mut n_updates) = (0, 0);
        let mut apply_s = 0.0;
        let blocks_total = n.div_ceil(BLOCK);
        // One set of update buffers for all batches: after the first they need no new memory.
        let mut sinks: Vec<Sink> = (0..JOIN_BATCH_BLOCKS.min(blocks_total))
            .map(|_| Sink::new(n))
            .collect();
        for batch in (0..blocks_total).step_by(JOIN_BATCH_BLOCKS) {
            let worst: Vec<f32> = (0..n).map(|i| lists.dist[i * k + k - 1]).collect();
            let blocks = &mut sinks[..JOIN_BATCH_BLOCKS.min(blocks_total - batch)];
            blocks.par_iter_mut().enumerate().for_each(|(bb, u)| {
                let b = batch + bb;
                u.clear();
                let mut all: Vec<u32> = Vec::with_capacity(2 * cap);
                for i in b * BLOCK..((b + 1) * BLOCK).min(n) {
                    let (nw, od) = (new_c.of(i), old_c.of(i));
                    all.clear();
                    all.extend_from_slice(nw);
                    all.extend_from_slice(od);
                    join_pairs(data, dist, &all, nw.len(), |x, y, d| {
                        let (a, b) = (all[x], all[y]);
                        if a == b {
                            return;
                        }
                        if d <= worst[a as usize] {
                            u.push(a, b, d);
                        }
                        if d <= worst[b as usize] {
                            u.push(b, a, d);
                        }
                    });
                }
            });
            n_updates += blocks.iter().map(Sink::len).sum::<usize>();
            let ta = std::time::Instant::now();
            changed += apply(lists, blocks);
            apply_s += ta.elapsed().as_secs_f64();
        }
        drop((new_c, old_c));
        let joined = clock.elapsed().as_secs_f64();
        if trace {
            eprintln!(
                "  join done at {joined:.2}s with {n_updates} updates, applied in {apply_s:.3}s"
            );
            eprintln!(
                "{:.2}s round {round}: {changed} changes",
                clock.elapsed().as_secs_f64()
            );
        }
        progress(
            "neighbour rounds",
            (round - first_round) as u64 + 1,
            p.max_rounds as u64,
        );
        if (changed as f64) < p.delta * (n * k) as f64 {
            return round - first_round + 1;
        }
    }
    p.max_rounds
}

/// Items whose recall is measured after the rounds.
const RECALL_SAMPLE: usize = 128;

/// Share of the sampled items' exact neighbours among the first k of their lists.
fn list_recall(lists: &Lists, k: usize, truth: &[Vec<u32>], sample: &[usize]) -> f64 {
    let kl = lists.k;
    found_share(truth, sample, |i| &lists.ids[i * kl..i * kl + k])
}

/// Share of the exact neighbours (`truth`, one list per sampled item) found in each item's `row`.
fn found_share<'a>(truth: &[Vec<u32>], sample: &[usize], row: impl Fn(usize) -> &'a [u32]) -> f64 {
    let (mut hit, mut total) = (0, 0);
    for (t, &i) in truth.iter().zip(sample) {
        let got = row(i);
        hit += t.iter().filter(|j| got.contains(j)).count();
        total += t.len();
    }
    hit as f64 / total.max(1) as f64
}

/// Share of the exact neighbours that the approximate graph found, on the sampled query items.
pub fn recall(approx: &KnnGraph, exact_ids: &[Vec<u32>], sample: &[usize]) -> f64 {
    let k = approx.k;
    found_share(exact_ids, sample, |i| &approx.ids[i * k..(i + 1) * k])
}

/// Exact neighbours of the sampled items only (for measuring recall on large collections).
/// Queries go in blocks that share one pass over the rows, so each row is read from memory once
/// per block rather than once per query.
pub fn exact_for(m: &Matrix, metric: Metric, k: usize, sample: &[usize]) -> Vec<Vec<u32>> {
    exact_in(&prepare(m, metric), PairDist { unit: false }, k, sample)
}

/// [`exact_for`] on rows already prepared, ranked by the working distance `dist`.
fn exact_in(data: &Matrix, dist: PairDist, k: usize, sample: &[usize]) -> Vec<Vec<u32>> {
    const QUERIES_PER_PASS: usize = 32;
    if k == 0 {
        return vec![Vec::new(); sample.len()];
    }
    sample
        .par_chunks(QUERIES_PER_PASS)
        .flat_map_iter(|queries| {
            // The k best so far per query, sorted by (distance, id): memory stays O(k).
            let mut best: Vec<Vec<(f32, u32)>> = vec![Vec::with_capacity(k + 1); queries.len()];
            // Distances of each query to the three rows of the current step.
            let mut ds = vec![[0f32; 3]; queries.len()];
            let q_row = |i: usize| data.row(i);
            for j0 in (0..data.rows).step_by(3) {
                let step = 3.min(data.rows - j0);
                if step == 3 {
                    // Three queries against three rows at a time (see `dot_block`).
                    let rows = [data.row(j0), data.row(j0 + 1), data.row(j0 + 2)];
                    let mut three = queries.chunks_exact(3);
                    for (t, q) in three.by_ref().zip(ds.chunks_exact_mut(3)) {
                        q.copy_from_slice(&dist.of_block([t[0], t[1], t[2]].map(q_row), rows));
                    }
                    let done = queries.len() - three.remainder().len();
                    for (&i, d) in three.remainder().iter().zip(&mut ds[done..]) {
                        *d = dist.of_many(q_row(i), rows);
                    }
                } else {
                    for (&i, d) in queries.iter().zip(&mut ds) {
                        for (jj, dj) in d.iter_mut().enumerate().take(step) {
                            *dj = dist.of(q_row(i), data.row(j0 + jj));
                        }
                    }
                }
                for jj in 0..step {
                    let j = j0 + jj;
                    for ((b, &i), d) in best.iter_mut().zip(queries).zip(&ds) {
                        let d = d[jj];
                        if i == j {
                            continue;
                        }
                        if b.len() == k && d >= b[k - 1].0 {
                            continue;
                        }
                        let at = b.partition_point(|&(bd, bj)| (bd, bj) < (d, j as u32));
                        b.insert(at, (d, j as u32));
                        b.truncate(k);
                    }
                }
            }
            best.into_iter()
                .map(|b| b.into_iter().map(|(_, j)| j).collect::<Vec<u32>>())
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sampled_exact_neighbours_equal_the_full_exact_graph() {
        // More queries than one pass takes, and the query itself inside every pass; rows and
        // queries leaving each remainder of three (1 and 2), rows longer than the kernels' 32
        // lanes and not a multiple of them.
        for rows in [301usize, 302] {
            let mut rng = Rng::new(9);
            let m = Matrix {
                rows,
                cols: 40,
                data: (0..rows * 40).map(|_| rng.uniform() as f32 - 0.3).collect(),
            };
            for metric in [Metric::Cosine, Metric::Euclidean] {
                let full = crate::knn::exact_knn(&m, 10, metric, &|_| {});
                // 100 and 101 queries: last passes of 4 and 5.
                for last in [300, 301] {
                    let sample: Vec<usize> = (0..last).step_by(3).collect();
                    let got = exact_for(&m, metric, 10, &sample);
                    assert_eq!(got.len(), sample.len());
                    for (q, &i) in sample.iter().enumerate() {
                        assert_eq!(got[q], full.ids[i * 10..i * 10 + 10], "{metric:?} item {i}");
                    }
                }
            }
        }
    }

    #[test]
    fn short_recall_widens_the_lists_and_the_result_keeps_k_nearest() {
        // Isotropic Gaussian points in 32 dimensions: every direction counts, the hardest case
        // for neighbours-of-neighbours search.
        let mut rng = Rng::new(3);
        let (n, d, k) = (6000, 32, 10);
        let normal = |rng: &mut Rng| {
            let (u, v) = (rng.uniform().max(1e-12), rng.uniform());
            ((-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()) as f32
        };
        let m = Matrix {
            rows: n,
            cols: d,
            data: (0..n * d).map(|_| normal(&mut rng)).collect(),
        };
        let exact = crate::knn::exact_knn(&m, k, Metric::Euclidean, &|_| {});
        let sample: Vec<usize> = (0..n).step_by(7).collect();
        let truth: Vec<Vec<u32>> = sample
            .iter()
            .map(|&i| exact.ids[i * k..(i + 1) * k].to_vec())
            .collect();
        let mut p = NnDescentParams::new(k, 1);
        p.min_recall = 0.0;
        let (plain, plain_report) = nn_descent_with(&m, Metric::Euclidean, &p, None, &|_, _, _| {});
        p.min_recall = 0.999;
        // The rounds the report counts are the rounds that ran (each reports its progress once).
        let reported = std::sync::atomic::AtomicUsize::new(0);
        let (wide, report) = nn_descent_with(&m, Metric::Euclidean, &p, None, &|stage, _, _| {
            if stage == "neighbour rounds" {
                reported.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
            }
        });
        assert_eq!(reported.into_inner(), report.rounds);
        // The reports say what happened: no check without a recall to reach; with one, the check
        // (on the search's own sampled items) fell short, the lists grew by half of k once, and
        // more rounds ran after the same first rounds.
        assert_eq!((plain_report.widenings, plain_report.list_length), (0, k));
        assert_eq!(plain_report.first_recall, None);
        assert_eq!(
            (report.widenings, report.list_length),
            (1, k + k.div_ceil(2))
        );
        let (r0, r1) = (
            recall(&plain, &truth, &sample),
            recall(&wide, &truth, &sample),
        );
        eprintln!("recall@{k}: plain rounds {r0:.4}, widened {r1:.4}; {report:?}");
        // The check's figure on 128 sampled items agrees with the measure on 858 (about ±0.03).
        let checked = report.first_recall.unwrap();
        assert!(
            (checked - r0).abs() < 0.03,
            "checked {checked}, measured {r0}"
        );
        assert!(r0 < 0.97, "the plain rounds already reach {r0}");
        assert!(r1 > r0 + 0.02, "widened {r1}, plain {r0}");
        // k entries per item, nearest first, never the item itself.
        assert_eq!(wide.ids.len(), n * k);
        for i in 0..n {
            let row: Vec<(usize, f32)> = wide.neighbours(i).collect();
            assert_eq!(row.len(), k);
            assert!(row.iter().all(|&(j, _)| j != i));
            assert!(row.windows(2).all(|w| w[0].1 <= w[1].1));
        }
    }

    #[test]
    fn the_join_gives_each_pair_once_with_its_distance() {
        // Every (x, y) with x among the new candidates and x < y, once, whatever the counts (the
        // blocks of three leave remainders on both sides), with the one-pair distance's bits.
        let mut rng = Rng::new(5);
        let m = Matrix {
            rows: 20,
            cols: 40,
            data: (0..20 * 40).map(|_| rng.uniform() as f32 - 0.5).collect(),
        };
        for unit in [false, true] {
            let dist = PairDist { unit };
            for l in 0..14usize {
                let c: Vec<u32> = (0..l as u32).map(|i| (i * 7 + 3) % 20).collect();
                for new in 0..=l {
                    let mut got = Vec::new();
                    join_pairs(&m, dist, &c, new, |x, y, d| got.push((x, y, d)));
                    got.sort_by_key(|&(x, y, _)| (x, y));
                    let want: Vec<(usize, usize)> = (0..new)
                        .flat_map(|x| (x + 1..l).map(move |y| (x, y)))
                        .collect();
                    let pairs: Vec<(usize, usize)> = got.iter().map(|&(x, y, _)| (x, y)).collect();
                    assert_eq!(pairs, want, "l {l}, new {new}");
                    for &(x, y, d) in &got {
                        let one = dist.of(m.row(c[x] as usize), m.row(c[y] as usize));
                        assert_eq!(d.to_bits(), one.to_bits(), "l {l}, new {new}, ({x}, {y})");
                    }
                }
            }
        }
    }

    #[test]
    fn rows_permuted_in_place_land_where_the_order_says() {
        let mut rng = Rng::new(3);
        for n in [1usize, 2, 7, 100] {
            let mut order: Vec<u32> = (0..n as u32).collect();
            for i in (1..n).rev() {
                order.swap(i, rng.below(i as u64 + 1) as usize);
            }
            let m = Matrix {
                rows: n,
                cols: 3,
                data: (0..n * 3).map(|x| x as f32).collect(),
            };
            let mut p = m.clone();
            permute_rows(&mut p, &order);
            for (i, &o) in order.iter().enumerate() {
                assert_eq!(p.row(i), m.row(o as usize));
            }
        }
    }
}
