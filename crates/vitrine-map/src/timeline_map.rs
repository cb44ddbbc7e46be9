//! The timeline map: x is the catalogue's dating, y a one-dimensional similarity order (a 1-D layout of
//! the same fuzzy neighbour graph), so that visual families read as bands across time.
//!
//! An item dated by a range is placed at a seeded random year inside it (so "c. 1540" spreads over
//! 1535-1545 instead of piling on one line); undated items stand in a band left of the earliest year.

use crate::rng::Rng;
use crate::umap::{self, FuzzyGraph, UmapParams};
use vitrine_format::YearRange;

/// Width of the map's x extent (map units); the y extent is two thirds of it.
const WIDTH: f64 = 30.0;

pub struct TimelineMap {
    pub positions: Vec<[f32; 2]>,
    pub axis: vitrine_format::MapAxis,
    pub dated: usize,
}

/// `order_start` is the 1-D start (e.g. the first principal component); `ranges` are per item.
pub fn timeline_map(
    graph: &FuzzyGraph,
    order_start: Vec<[f32; 1]>,
    ranges: &[Option<YearRange>],
    field: &str,
    params: &UmapParams,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Option<TimelineMap> {
    let dated = ranges.iter().filter(|r| r.is_some()).count();
    if dated == 0 {
        return None;
    }
    let first = ranges.iter().flatten().map(|r| r.start).min()? as f64;
    let last = ranges.iter().flatten().map(|r| r.end).max()? as f64 + 1.0;
    let span = (last - first).max(1.0);
    let order = umap::layout(graph, order_start, params, progress);
    let (lo, hi) = order
        .iter()
        .fold((f32::INFINITY, f32::NEG_INFINITY), |(l, h), p| {
            (l.min(p[0]), h.max(p[0]))
        });
    let height = WIDTH * 2.0 / 3.0;
    let y_of = |v: f32| -> f32 {
        if hi > lo {
            ((v - lo) / (hi - lo) - 0.5) * height as f32
        } else {
            0.0
        }
    };
    let scale = WIDTH / span; // map units per year
    let origin = first + span / 2.0;
    let missing_at = (-(WIDTH / 2.0) - WIDTH * 0.08) as f32;
    let mut rng = Rng::new(params.seed ^ 0x7173_e11e);
    let positions = ranges
        .iter()
        .zip(&order)
        .map(|(r, o)| {
            let u = rng.uniform();
            let x = match r {
                Some(r) => {
                    let year = r.start as f64 + u * (r.end - r.start + 1) as f64;
                    ((year - origin) * scale) as f32
                }
                None => missing_at + ((u - 0.5) * WIDTH * 0.04) as f32,
            };
            [x, y_of(o[0])]
        })
        .collect();
    Some(TimelineMap {
        positions,
        axis: vitrine_format::MapAxis {
            label: field.to_string(),
            origin,
            units_per_map_unit: 1.0 / scale,
            missing_at: (dated < ranges.len()).then_some(missing_at),
        },
        dated,
    })
}
