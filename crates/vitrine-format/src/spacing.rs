//! The typical spacing of items on a map: the scale at which the viewer draws them, which the
//! build of a tiled atlas writes down (the viewer then has not every position).

use kiddo::{ImmutableKdTree, SquaredEuclidean};

/// The median distance from an item to its third-nearest other item, over a sample of about
/// 4,000 items (picked by a hash of their positions): the scale at which thumbnails drawn that wide overlap their neighbours a little but
/// still read one by one. (The nearest neighbour alone is too small a scale on similarity maps, where
/// near-duplicates sit almost on top of each other.) None when all sampled items coincide.
pub fn typical_spacing(positions: &[[f32; 2]]) -> Option<f64> {
    if positions.len() < 2 {
        return None;
    }
    let tree = ImmutableKdTree::new_from_slice(positions).ok()?;
    // The sample is chosen by the positions themselves, not their order, so that the same map
    // gives the same spacing in any item order (an atlas fetched whole and a tiled one).
    let step = (positions.len() / 4000).max(1) as u64;
    let picked = |p: &&[f32; 2]| {
        let h = ((p[0].to_bits() as u64) << 32 | p[1].to_bits() as u64)
            .wrapping_mul(0x9E37_79B9_7F4A_7C15);
        (h >> 32).is_multiple_of(step)
    };
    let four = std::num::NonZero::new(4usize.min(positions.len())).unwrap();
    let mut d: Vec<f64> = positions
        .iter()
        .filter(picked)
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
    fn the_same_map_in_another_order_has_the_same_spacing() {
        // 30,000 items (a sample of about 4,000 of them), reversed and interleaved.
        let mut s = 5u64;
        let pts: Vec<[f32; 2]> = (0..30_000)
            .map(|_| {
                s = s
                    .wrapping_mul(6364136223846793005)
                    .wrapping_add(1442695040888963407);
                [(s >> 40) as f32 / 1e5, (s >> 20 & 0xFFFFF) as f32 / 1e4]
            })
            .collect();
        let a = typical_spacing(&pts).unwrap();
        let mut other: Vec<[f32; 2]> = pts.iter().rev().copied().collect();
        other.rotate_left(12_345);
        assert_eq!(a, typical_spacing(&other).unwrap());
    }
}
