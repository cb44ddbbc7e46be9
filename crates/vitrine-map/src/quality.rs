//! How faithful a map is to its vectors: trustworthiness and continuity (Venna and Kaski, 2001).
//!
//! Trustworthiness at k penalises items that are among an item's k nearest on the map but not in the
//! vectors, by how far down the vector-space ranking they are; continuity is the same with the two
//! spaces swapped. Both are 1 for a perfect map. Computed on a sample, the sample is treated as the whole
//! collection (ranks are taken within the sample).

use rayon::prelude::*;

use crate::knn::Metric;
use crate::matrix::Matrix;

/// For each item, the other items ordered by distance (nearest first), ties broken by index.
fn orderings(rows: &[&[f32]], metric: Metric) -> Vec<Vec<u32>> {
    let n = rows.len();
    let raw = Matrix {
        rows: n,
        cols: rows.first().map_or(0, |r| r.len()),
        data: rows.concat(),
    };
    let data = crate::knn::prepare(&raw, metric);
    (0..n)
        .into_par_iter()
        .map(|i| {
            let mut d: Vec<(f64, u32)> = (0..n)
                .filter(|&j| j != i)
                .map(|j| {
                    (
                        crate::knn::prepared_distance(data.row(i), data.row(j), metric),
                        j as u32,
                    )
                })
                .collect();
            d.sort_by(|a, b| a.partial_cmp(b).unwrap());
            d.into_iter().map(|(_, j)| j).collect()
        })
        .collect()
}

/// Trustworthiness of `low` (the map) with respect to `high` (the vectors) at `k`. Swap the arguments for continuity.
pub fn trustworthiness(
    high: &[&[f32]],
    high_metric: Metric,
    low: &[&[f32]],
    low_metric: Metric,
    k: usize,
) -> f64 {
    let n = high.len();
    assert_eq!(n, low.len());
    assert!(
        k >= 1 && 2 * n > 3 * k + 1,
        "trustworthiness needs n > (3k + 1) / 2"
    );
    let high_order = orderings(high, high_metric);
    let low_order = orderings(low, low_metric);
    trustworthiness_of_orders(&high_order, &low_order, k)
}

/// Trustworthiness from the two spaces' orderings (see [`orderings`]).
fn trustworthiness_of_orders(high_order: &[Vec<u32>], low_order: &[Vec<u32>], k: usize) -> f64 {
    let n = high_order.len();
    let penalty: f64 = (0..n)
        .into_par_iter()
        .map(|i| {
            // rank[j] = position of j in i's vector-space ordering, from 1.
            let mut rank = vec![0u32; n];
            for (r, &j) in high_order[i].iter().enumerate() {
                rank[j as usize] = r as u32 + 1;
            }
            low_order[i][..k]
                .iter()
                .map(|&j| (rank[j as usize] as f64 - k as f64).max(0.0))
                .sum::<f64>()
        })
        .sum();
    let (nf, kf) = (n as f64, k as f64);
    1.0 - penalty * 2.0 / (nf * kf * (2.0 * nf - 3.0 * kf - 1.0))
}

/// An evenly spread sample of at most `max` item indices (deterministic).
pub fn sample(n: usize, max: usize) -> Vec<usize> {
    if n <= max {
        return (0..n).collect();
    }
    (0..max).map(|i| i * n / max).collect()
}

#[derive(Debug, Clone, serde::Serialize)]
pub struct MapQuality {
    pub k: usize,
    pub sample: usize,
    pub trustworthiness: f64,
    pub continuity: f64,
}

/// The quality sample with its vector-space orderings, computed once for every map measured on it.
pub struct QualitySample {
    idx: Vec<usize>,
    high_order: Vec<Vec<u32>>,
}

impl QualitySample {
    /// Row `r` of `sample_rows` is item `idx[r]` (so that a build that reduces its vectors still
    /// measures its maps against the originals).
    pub fn new(sample_rows: &Matrix, idx: Vec<usize>, metric: Metric) -> QualitySample {
        assert_eq!(sample_rows.rows, idx.len());
        let high: Vec<&[f32]> = (0..idx.len()).map(|r| sample_rows.row(r)).collect();
        QualitySample {
            high_order: orderings(&high, metric),
            idx,
        }
    }

    /// Trustworthiness and continuity at `k` of the layout `pos` (all items, indexed as `idx`).
    pub fn quality(&self, pos: &[[f32; 2]], k: usize) -> Option<MapQuality> {
        let n = self.idx.len();
        if 2 * n <= 3 * k + 1 {
            return None;
        }
        let low: Vec<&[f32]> = self.idx.iter().map(|&i| &pos[i][..]).collect();
        let low_order = orderings(&low, Metric::Euclidean);
        Some(MapQuality {
            k,
            sample: n,
            trustworthiness: trustworthiness_of_orders(&self.high_order, &low_order, k),
            continuity: trustworthiness_of_orders(&low_order, &self.high_order, k),
        })
    }
}
