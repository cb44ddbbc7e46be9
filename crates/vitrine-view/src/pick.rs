//! Hover and click picking: the item nearest the pointer, from a k-d tree built once over the map.

use kiddo::{ImmutableKdTree, SquaredEuclidean};

pub struct Picker {
    /// One tree per run of items (the whole map, or each leaf of a tiled atlas that has arrived),
    /// with the index of the run's first item.
    trees: Vec<(usize, ImmutableKdTree<f32, 2>)>,
}

impl Picker {
    pub fn new(positions: &[[f32; 2]]) -> Picker {
        let mut p = Picker { trees: Vec::new() };
        p.add_run(0, positions);
        p
    }
    /// Adds the items `start..start + positions.len()`.
    pub fn add_run(&mut self, start: usize, positions: &[[f32; 2]]) {
        if let Ok(t) = ImmutableKdTree::new_from_slice(positions) {
            if !positions.is_empty() {
                self.trees.push((start, t));
            }
        }
    }
    /// The nearest item to a map point and its distance in map units.
    pub fn nearest(&self, p: [f64; 2]) -> Option<(usize, f64)> {
        let q = [p[0] as f32, p[1] as f32];
        self.trees
            .iter()
            .map(|(start, tree)| {
                let r = tree
                    .query(&q)
                    .nearest_one::<SquaredEuclidean<f32>>()
                    .execute();
                (start + r.item as usize, r.distance)
            })
            .min_by(|a, b| a.1.total_cmp(&b.1))
            .map(|(i, d)| (i, (d as f64).sqrt()))
    }
}

pub use vitrine_format::spacing::typical_spacing;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nearest_matches_a_plain_scan() {
        let mut s = 7u64;
        let mut next = || {
            s = s
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            ((s >> 40) as f32) / (1u64 << 24) as f32 * 100.0
        };
        let pts: Vec<[f32; 2]> = (0..5000).map(|_| [next(), next()]).collect();
        let mut with_dupes = pts.clone();
        with_dupes.extend(std::iter::repeat_n([50.0, 50.0], 200));
        let p = Picker::new(&with_dupes);
        for _ in 0..200 {
            let q = [next() as f64, next() as f64];
            let (i, d) = p.nearest(q).unwrap();
            let best = with_dupes
                .iter()
                .map(|a| ((a[0] as f64 - q[0]).powi(2) + (a[1] as f64 - q[1]).powi(2)).sqrt())
                .fold(f64::INFINITY, f64::min);
            assert!((d - best).abs() < 1e-3, "{i}: {d} vs {best}");
        }
    }
}
