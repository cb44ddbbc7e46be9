//! Exact k-nearest-neighbour graph by brute force (parallel over query rows).

use rayon::prelude::*;

use crate::matrix::Matrix;

#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Metric {
    /// 1 − cosine similarity; a zero vector is at distance 1 from everything.
    Cosine,
    Euclidean,
}

impl Metric {
    pub fn name(self) -> &'static str {
        match self {
            Metric::Cosine => "cosine",
            Metric::Euclidean => "euclidean",
        }
    }
}

/// `k` neighbours per item, nearest first, never the item itself. Rows with fewer than `k`
/// other items are padded with `u32::MAX` and infinite distance.
#[derive(Debug, Clone, PartialEq)]
pub struct KnnGraph {
    pub k: usize,
    pub ids: Vec<u32>,
    pub distances: Vec<f32>,
}

impl KnnGraph {
    pub fn neighbours(&self, i: usize) -> impl Iterator<Item = (usize, f32)> + '_ {
        let s = i * self.k;
        self.ids[s..s + self.k]
            .iter()
            .zip(&self.distances[s..s + self.k])
            .filter(|(&j, _)| j != u32::MAX)
            .map(|(&j, &d)| (j as usize, d))
    }
}

/// Rows scaled to unit length (zero rows stay zero).
pub fn normalised(m: &Matrix) -> Matrix {
    let mut data = m.data.clone();
    data.par_chunks_mut(m.cols).for_each(|row| {
        let norm = row
            .iter()
            .map(|&x| (x as f64) * (x as f64))
            .sum::<f64>()
            .sqrt();
        if norm > 0.0 {
            for x in row.iter_mut() {
                *x = (*x as f64 / norm) as f32;
            }
        }
    });
    Matrix {
        rows: m.rows,
        cols: m.cols,
        data,
    }
}

/// The vectors as distances are computed from them: unit rows for cosine, as they are for Euclidean.
pub fn prepare(m: &Matrix, metric: Metric) -> Matrix {
    match metric {
        Metric::Cosine => normalised(m),
        Metric::Euclidean => m.clone(),
    }
}

/// Distance between two rows of [`prepare`]d vectors, accumulated in f64 so that ties and orderings
/// match a double-precision reference. A zero vector (left zero by `prepare`) is at cosine distance 1.
pub fn prepared_distance(a: &[f32], b: &[f32], metric: Metric) -> f64 {
    match metric {
        Metric::Euclidean => a
            .iter()
            .zip(b)
            .map(|(&x, &y)| {
                let t = x as f64 - y as f64;
                t * t
            })
            .sum::<f64>()
            .sqrt(),
        Metric::Cosine => {
            let dot: f64 = a.iter().zip(b).map(|(&x, &y)| x as f64 * y as f64).sum();
            (1.0 - dot).max(0.0)
        }
    }
}

pub fn exact_knn(
    m: &Matrix,
    k: usize,
    metric: Metric,
    progress: &(dyn Fn(u64) + Sync),
) -> KnnGraph {
    let n = m.rows;
    let data = prepare(m, metric);
    let done = std::sync::atomic::AtomicU64::new(0);
    let rows: Vec<(Vec<u32>, Vec<f32>)> = (0..n)
        .into_par_iter()
        .map(|i| {
            let a = data.row(i);
            let mut cand: Vec<(f64, u32)> = Vec::with_capacity(n.saturating_sub(1));
            for j in 0..n {
                if j == i {
                    continue;
                }
                let b = data.row(j);
                let d = prepared_distance(a, b, metric);
                cand.push((d, j as u32));
            }
            let kk = k.min(cand.len());
            if kk > 0 && kk < cand.len() {
                cand.select_nth_unstable_by(kk - 1, |x, y| x.partial_cmp(y).unwrap());
            }
            cand.truncate(kk);
            cand.sort_by(|x, y| x.partial_cmp(y).unwrap());
            let mut ids = vec![u32::MAX; k];
            let mut dists = vec![f32::INFINITY; k];
            for (slot, (d, j)) in cand.into_iter().enumerate() {
                ids[slot] = j;
                dists[slot] = d as f32;
            }
            let c = done.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
            if c.is_multiple_of(256) {
                progress(c);
            }
            (ids, dists)
        })
        .collect();
    let mut ids = Vec::with_capacity(n * k);
    let mut distances = Vec::with_capacity(n * k);
    for (i, d) in rows {
        ids.extend(i);
        distances.extend(d);
    }
    KnnGraph { k, ids, distances }
}
