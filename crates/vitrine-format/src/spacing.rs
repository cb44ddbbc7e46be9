//! The typical spacing of items on a map: the scale at which the viewer draws them, which the
//! build of a tiled atlas writes down (the viewer then has not every position).

use kiddo::{ImmutableKdTree, SquaredEuclidean};

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
}
