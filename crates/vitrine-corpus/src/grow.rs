//! Growing a corpus from examples: items marked "like these" and "not these" train a linear
//! model (logistic regression with an L2 penalty) on every item's compressed vector, and the
//! model scores every item; the best unmarked ones are the candidates. The same code trains and
//! scores in the viewer and in `vitrine corpus`, so a corpus file's rounds replay to the same
//! scores.
//!
//! The model minimises `0.5 |w|^2 + C * sum_i log-loss(y_i, w.x_i + b)` (the intercept `b` is not
//! penalised), the usual regularised logistic regression; it is solved by Newton's method with a
//! backtracking line search, exact to the last digits that matter for a ranking.

use std::collections::HashSet;

use serde::{Deserialize, Serialize};

/// Every item's compressed vector (see the atlas's `vectors`): `dims` bytes an item, decoded as
/// `offset[j] + scale[j] * q`.
#[derive(Debug, Clone, Default)]
pub struct Q8 {
    pub dims: usize,
    pub offset: Vec<f32>,
    pub scale: Vec<f32>,
    /// `items * dims` bytes, atlas order.
    pub bytes: Vec<u8>,
}

impl Q8 {
    pub fn items(&self) -> usize {
        self.bytes.len() / self.dims.max(1)
    }

    /// Item `i`'s vector, decoded.
    pub fn row(&self, i: usize) -> Vec<f64> {
        let d = self.dims;
        self.bytes[i * d..(i + 1) * d]
            .iter()
            .zip(self.offset.iter().zip(&self.scale))
            .map(|(&q, (&o, &s))| o as f64 + s as f64 * q as f64)
            .collect()
    }
}

/// One round of growing, as the corpus file keeps it: the marks it trained on (every mark so
/// far), its settings, and what was accepted into the corpus or rejected after it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Round {
    /// Items marked "like these" (ids).
    pub like: Vec<String>,
    /// Items marked "not these" (ids).
    pub not: Vec<String>,
    /// The inverse of the penalty's strength (larger: a closer fit to the marks).
    pub c: f64,
    /// Unmarked items drawn at random (with `seed`) as "not these" besides the marked ones, so
    /// that a few examples alone can train a model (at most [`MAX_BACKGROUND`]).
    pub background: usize,
    pub seed: u64,
    /// Candidates accepted into the corpus after this round, best first.
    #[serde(default)]
    pub accepted: Vec<String>,
    /// Candidates rejected after this round (marked "not these" in the next).
    #[serde(default)]
    pub rejected: Vec<String>,
}

/// The most background items a round may draw (each is a row of the model's equations).
pub const MAX_BACKGROUND: usize = 10_000;

/// The trained model: `score = w . x + b` (above 0: more likely "like these").
#[derive(Debug, Clone, PartialEq)]
pub struct Model {
    pub w: Vec<f64>,
    pub b: f64,
    /// Newton steps taken.
    pub steps: usize,
}

/// `count` unmarked items drawn at random with `seed` (none of `marked`), in increasing order.
pub fn background(items: usize, marked: &HashSet<usize>, count: usize, seed: u64) -> Vec<usize> {
    let free = items.saturating_sub(marked.len());
    let count = count.min(free).min(MAX_BACKGROUND);
    let mut state = seed ^ 0xA076_1D64_78BD_642F;
    let mut next = || {
        state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    };
    let mut chosen = HashSet::new();
    while chosen.len() < count {
        let i = ((next() as u128 * items as u128) >> 64) as usize;
        if !marked.contains(&i) {
            chosen.insert(i);
        }
    }
    let mut v: Vec<usize> = chosen.into_iter().collect();
    v.sort_unstable();
    v
}

fn log1p_exp(z: f64) -> f64 {
    if z > 0.0 {
        z + (-z).exp().ln_1p()
    } else {
        z.exp().ln_1p()
    }
}

fn sigmoid(z: f64) -> f64 {
    if z >= 0.0 {
        1.0 / (1.0 + (-z).exp())
    } else {
        let e = z.exp();
        e / (1.0 + e)
    }
}

/// Solves `a x = g` for a symmetric positive definite `a` (n x n, row-major) by Cholesky.
fn solve(mut a: Vec<f64>, g: &[f64]) -> Option<Vec<f64>> {
    let n = g.len();
    for j in 0..n {
        let mut d = a[j * n + j];
        for k in 0..j {
            d -= a[j * n + k] * a[j * n + k];
        }
        if d <= 0.0 || !d.is_finite() {
            return None;
        }
        let d = d.sqrt();
        a[j * n + j] = d;
        for i in j + 1..n {
            let mut s = a[i * n + j];
            for k in 0..j {
                s -= a[i * n + k] * a[j * n + k];
            }
            a[i * n + j] = s / d;
        }
    }
    let mut y = g.to_vec();
    for i in 0..n {
        for k in 0..i {
            y[i] -= a[i * n + k] * y[k];
        }
        y[i] /= a[i * n + i];
    }
    for i in (0..n).rev() {
        for k in i + 1..n {
            y[i] -= a[k * n + i] * y[k];
        }
        y[i] /= a[i * n + i];
    }
    Some(y)
}

/// Trains the model on items `like` (label 1) and `not` (label 0) with penalty `c`.
pub fn train(q: &Q8, like: &[usize], not: &[usize], c: f64) -> Result<Model, String> {
    if like.is_empty() {
        return Err("mark at least one item \"like these\"".into());
    }
    if not.is_empty() {
        return Err(
            "there is nothing to tell the marked items from: mark items \"not these\" or draw background items"
                .into(),
        );
    }
    if !(c.is_finite() && c > 0.0) {
        return Err(format!("C must be a positive number, not {c}"));
    }
    if like.iter().any(|i| not.contains(i)) {
        return Err("an item is marked both \"like these\" and \"not these\"".into());
    }
    let d = q.dims;
    let rows: Vec<(Vec<f64>, f64)> = like
        .iter()
        .map(|&i| (q.row(i), 1.0))
        .chain(not.iter().map(|&i| (q.row(i), 0.0)))
        .collect();
    // Parameters: w (d), then b.
    let p = d + 1;
    let mut theta = vec![0f64; p];
    let loss = |t: &[f64]| -> f64 {
        let reg = 0.5 * t[..d].iter().map(|w| w * w).sum::<f64>();
        let data: f64 = rows
            .iter()
            .map(|(x, y)| {
                let z = x.iter().zip(&t[..d]).map(|(a, b)| a * b).sum::<f64>() + t[d];
                log1p_exp(z) - y * z
            })
            .sum();
        reg + c * data
    };
    let mut current = loss(&theta);
    let mut steps = 0;
    let mut converged = false;
    for _ in 0..100 {
        let mut g = vec![0f64; p];
        let mut h = vec![0f64; p * p];
        g[..d].copy_from_slice(&theta[..d]);
        for j in 0..d {
            h[j * p + j] = 1.0;
        }
        for (x, y) in &rows {
            let z = x.iter().zip(&theta[..d]).map(|(a, b)| a * b).sum::<f64>() + theta[d];
            let pr = sigmoid(z);
            let r = c * (pr - y);
            let wgt = c * pr * (1.0 - pr);
            for j in 0..d {
                g[j] += r * x[j];
            }
            g[d] += r;
            for j in 0..p {
                let xj = if j < d { x[j] } else { 1.0 };
                for k in 0..=j {
                    let xk = if k < d { x[k] } else { 1.0 };
                    h[j * p + k] += wgt * xj * xk;
                }
            }
        }
        for j in 0..p {
            for k in 0..j {
                h[k * p + j] = h[j * p + k];
            }
        }
        // The intercept alone is not penalised: a tiny ridge keeps the system definite when
        // every probability has saturated.
        h[d * p + d] += 1e-12;
        let gmax = g.iter().fold(0f64, |m, v| m.max(v.abs()));
        if gmax < 1e-9 * (1.0 + c * rows.len() as f64) {
            converged = true;
            break;
        }
        let step = solve(h, &g).ok_or("the model's equations could not be solved")?;
        // Backtracking: the full Newton step unless it fails to lower the loss.
        let mut t = 1.0;
        loop {
            let next: Vec<f64> = theta.iter().zip(&step).map(|(a, s)| a - t * s).collect();
            let l = loss(&next);
            if l <= current {
                // A step too small to change the parameters any more: the optimum, to the
                // precision of the arithmetic.
                let moved = step.iter().fold(0f64, |m, v| m.max((t * v).abs()));
                let size = next.iter().fold(1f64, |m, v| m.max(v.abs()));
                converged = moved <= 1e-12 * size;
                theta = next;
                current = l;
                break;
            }
            if t < 1e-8 {
                // No step lowers the loss any more: the optimum, to the precision there is.
                converged = true;
                break;
            }
            t *= 0.5;
        }
        steps += 1;
        if converged {
            break;
        }
    }
    if !converged {
        return Err(format!(
            "the model did not settle in {steps} steps (try a smaller C)"
        ));
    }
    Ok(Model {
        w: theta[..d].to_vec(),
        b: theta[d],
        steps,
    })
}

/// Every item's score under `m` (f32; the model folded onto the bytes: one multiply-add per
/// byte).
pub fn scores(q: &Q8, m: &Model) -> Vec<f32> {
    let d = q.dims;
    let w: Vec<f32> =
        m.w.iter()
            .zip(&q.scale)
            .map(|(w, &s)| (w * s as f64) as f32)
            .collect();
    let b = (m.b
        + m.w
            .iter()
            .zip(&q.offset)
            .map(|(w, &o)| w * o as f64)
            .sum::<f64>()) as f32;
    q.bytes
        .chunks_exact(d.max(1))
        .map(|row| {
            let mut s = b;
            for (x, wj) in row.iter().zip(&w) {
                s += *x as f32 * wj;
            }
            s
        })
        .collect()
}

/// The `k` best-scoring items of `scores` outside `skip`, best first (ties: lower index first).
pub fn candidates(scores: &[f32], skip: &dyn Fn(usize) -> bool, k: usize) -> Vec<usize> {
    let mut v: Vec<usize> = (0..scores.len()).filter(|&i| !skip(i)).collect();
    let by = |a: &usize, b: &usize| scores[*b].total_cmp(&scores[*a]).then(a.cmp(b));
    if v.len() > k {
        v.select_nth_unstable_by(k, by);
        v.truncate(k);
    }
    v.sort_by(by);
    v
}

/// The `k` items nearest item `i` by the compressed vectors (squared Euclidean distance of the
/// decoded rows), nearest first (ties: lower index first), `i` itself left out. A table per
/// component holds each byte's contribution, so an item costs one look-up and one add a byte.
pub fn closest(q: &Q8, i: usize, k: usize) -> Vec<(usize, f32)> {
    let d = q.dims;
    if d == 0 || i >= q.items() {
        return vec![];
    }
    let row = &q.bytes[i * d..(i + 1) * d];
    let mut table = vec![0f32; d * 256];
    for (j, &b) in row.iter().enumerate() {
        let s = q.scale[j] as f64;
        for v in 0..256usize {
            let t = s * (v as f64 - b as f64);
            table[j * 256 + v] = (t * t) as f32;
        }
    }
    // The k best so far in a heap, worst on top: no allocation the size of the collection.
    #[derive(PartialEq)]
    struct Near(f32, usize);
    impl Eq for Near {}
    impl PartialOrd for Near {
        fn partial_cmp(&self, o: &Self) -> Option<std::cmp::Ordering> {
            Some(self.cmp(o))
        }
    }
    impl Ord for Near {
        fn cmp(&self, o: &Self) -> std::cmp::Ordering {
            self.0.total_cmp(&o.0).then(self.1.cmp(&o.1))
        }
    }
    let mut heap = std::collections::BinaryHeap::with_capacity(k + 1);
    for (j, r) in q.bytes.chunks_exact(d).enumerate() {
        if j == i {
            continue;
        }
        let mut s = 0f32;
        for (t, &v) in table.chunks_exact(256).zip(r) {
            s += t[v as usize];
        }
        if heap.len() < k {
            heap.push(Near(s, j));
        } else if let Some(top) = heap.peek() {
            if Near(s, j) < *top {
                heap.pop();
                heap.push(Near(s, j));
            }
        }
    }
    heap.into_sorted_vec()
        .into_iter()
        .map(|Near(s, j)| (j, s))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Two groups in 3 dimensions, a byte per component.
    fn data() -> Q8 {
        let mut bytes = Vec::new();
        for i in 0..200u32 {
            let g = i % 2;
            let jitter = |k: u32| ((i * 37 + k * 11) % 23) as u8;
            bytes.extend([
                if g == 0 { 60 } else { 180 } + jitter(0),
                100 + jitter(1),
                if g == 0 { 90 } else { 120 } + jitter(2),
            ]);
        }
        Q8 {
            dims: 3,
            offset: vec![-1.0, 0.0, 2.0],
            scale: vec![0.01, 0.02, 0.005],
            bytes,
        }
    }

    #[test]
    fn the_model_reaches_the_optimum_and_ranks_the_marked_group_first() {
        let q = data();
        let like: Vec<usize> = (0..20).map(|k| 2 * k + 1).collect();
        let not: Vec<usize> = (0..20).map(|k| 2 * k).collect();
        let m = train(&q, &like, &not, 1.0).unwrap();
        // The gradient of the objective vanishes at the answer (checked here independently).
        let mut g: Vec<f64> = m.w.clone();
        g.push(0.0);
        for (i, y) in like
            .iter()
            .map(|&i| (i, 1.0))
            .chain(not.iter().map(|&i| (i, 0.0)))
        {
            let x = q.row(i);
            let z: f64 = x.iter().zip(&m.w).map(|(a, b)| a * b).sum::<f64>() + m.b;
            let r = sigmoid(z) - y;
            for j in 0..3 {
                g[j] += r * x[j];
            }
            g[3] += r;
        }
        assert!(g.iter().all(|v| v.abs() < 1e-7), "{g:?}");
        // Every unmarked item of the liked group scores above every unmarked one of the other.
        let s = scores(&q, &m);
        let top = candidates(&s, &|i| i < 40, 80);
        assert!(top[..80].iter().all(|&i| i % 2 == 1), "{top:?}");
        // The folded f32 scores equal the model applied to the decoded rows.
        for i in [0, 57, 199] {
            let x = q.row(i);
            let z: f64 = x.iter().zip(&m.w).map(|(a, b)| a * b).sum::<f64>() + m.b;
            assert!((s[i] as f64 - z).abs() < 1e-4 * (1.0 + z.abs()));
        }
    }

    #[test]
    fn background_draws_are_seeded_unmarked_and_few_examples_need_something_to_oppose() {
        let marked: HashSet<usize> = [1, 2, 3].into();
        let a = background(50, &marked, 10, 7);
        assert_eq!(a, background(50, &marked, 10, 7));
        assert_ne!(a, background(50, &marked, 10, 8));
        assert!(a.len() == 10 && a.iter().all(|i| !marked.contains(i) && *i < 50));
        assert_eq!(background(5, &marked, 10, 7).len(), 2);
        let q = data();
        assert!(train(&q, &[1], &[], 1.0).unwrap_err().contains("not these"));
        assert!(train(&q, &[], &[0], 1.0)
            .unwrap_err()
            .contains("like these"));
        assert!(train(&q, &[1], &[0], 0.0).is_err());
        // One example against the background still gives a model.
        let bg = background(q.items(), &[1].into(), 50, 3);
        assert!(train(&q, &[1], &bg, 1.0).is_ok());
    }

    #[test]
    fn the_closest_items_are_those_of_an_exact_search_over_the_decoded_rows() {
        let q = data();
        let got = closest(&q, 17, 25);
        let mut want: Vec<(usize, f64)> = (0..q.items())
            .filter(|&j| j != 17)
            .map(|j| {
                let (a, b) = (q.row(17), q.row(j));
                (j, a.iter().zip(&b).map(|(x, y)| (x - y) * (x - y)).sum())
            })
            .collect();
        want.sort_by(|a, b| a.1.total_cmp(&b.1).then(a.0.cmp(&b.0)));
        assert_eq!(got.len(), 25);
        for ((j, dj), (w, dw)) in got.iter().zip(&want) {
            assert!(
                (*dj as f64 - dw).abs() < 1e-5 * (1.0 + dw),
                "{j} {dj} vs {w} {dw}"
            );
        }
        // The same distances in the same order (the items may differ only among equal distances).
        let far = want[24].1;
        assert!(got
            .iter()
            .all(|(j, _)| want.iter().any(|(w, d)| w == j && *d <= far + 1e-9)));
        assert!(closest(&q, 500, 3).is_empty());
    }
}
