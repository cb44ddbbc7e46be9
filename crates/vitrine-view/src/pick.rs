//! Hover and click picking: the item nearest the pointer, from a k-d tree built once over the map.

use kiddo::{ImmutableKdTree, SquaredEuclidean};

pub struct Picker {
    tree: Option<ImmutableKdTree<f32, 2>>,
}

impl Picker {
    pub fn new(positions: &[[f32; 2]]) -> Picker {
        let tree = if positions.is_empty() {
            None
        } else {
            ImmutableKdTree::new_from_slice(positions).ok()
        };
        Picker { tree }
    }
    /// The nearest item to a map point and its distance in map units.
    pub fn nearest(&self, p: [f64; 2]) -> Option<(usize, f64)> {
        let tree = self.tree.as_ref()?;
        let q = [p[0] as f32, p[1] as f32];
        let r = tree
            .query(&q)
            .nearest_one::<SquaredEuclidean<f32>>()
            .execute();
        Some((r.item as usize, (r.distance as f64).sqrt()))
    }
}

/// The median distance from an item to its third-nearest other item, over an evenly spread sample of at
/// most 4,000 items: the scale at which thumbnails drawn that wide overlap their neighbours a little but
/// still read one by one. (The nearest neighbour alone is too small a scale on similarity maps, where
/// near-duplicates sit almost on top of each other.) None when all sampled items coincide.
pub fn typical_spacing(positions: &[[f32; 2]]) -> Option<f64> {
    if positions.len() < 2 {
        return None;
    }
    let tree = ImmutableKdTree::new_from_slice(positions).ok()?;
    let step = (positions.len() / 4000).max(1);
    let four = std::num::NonZero::new(4usize.min(positions.len())).unwrap();
    let mut d: Vec<f64> = positions
        .iter()
        .step_by(step)
        .filter_map(|p| {
            let r = tree
                .query(p)
                .nearest_n::<SquaredEuclidean<f32>>(four)
                .execute();
            r.last()
                .map(|x| x.distance as f64)
                .filter(|&x| x > 0.0)
                .map(f64::sqrt)
        })
        .collect();
    if d.is_empty() {
        return None;
    }
    d.sort_by(|a, b| a.partial_cmp(b).unwrap());
    Some(d[d.len() / 2])
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn spacing_of_a_regular_grid_is_its_step() {
        let pts: Vec<[f32; 2]> = (0..40)
            .flat_map(|x| (0..30).map(move |y| [x as f32 * 0.5, y as f32 * 0.5]))
            .collect();
        assert!((typical_spacing(&pts).unwrap() - 0.5).abs() < 1e-6);
        assert_eq!(typical_spacing(&[[1.0, 1.0]; 5]), None);
    }

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
