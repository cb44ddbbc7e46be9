//! A uniform grid over a map's positions, built once per map: the items inside a rectangle of the
//! map are found by visiting only the cells it touches, so a frame zoomed in on a million-item map
//! costs what is on screen, not what is in the collection.

pub struct Grid {
    origin: [f64; 2],
    /// Cell side in map units.
    cell: f64,
    cols: usize,
    rows: usize,
    /// Item indices, cell by cell (row-major), each cell's items in increasing order.
    items: Vec<u32>,
    /// `starts[c]..starts[c + 1]` is cell c's slice of `items`.
    starts: Vec<u32>,
}

impl Grid {
    /// About `per_cell` items per cell on average (at least one cell).
    pub fn new(positions: &[[f32; 2]], bounds: [f32; 4], per_cell: usize) -> Grid {
        let n = positions.len();
        let w = ((bounds[2] - bounds[0]) as f64).max(1e-9);
        let h = ((bounds[3] - bounds[1]) as f64).max(1e-9);
        let cells = (n / per_cell.max(1)).clamp(1, 1 << 22) as f64;
        let cell = ((w * h) / cells).sqrt().max(w.max(h) / 4096.0);
        let cols = ((w / cell).ceil() as usize).max(1);
        let rows = ((h / cell).ceil() as usize).max(1);
        let mut g = Grid {
            origin: [bounds[0] as f64, bounds[1] as f64],
            cell,
            cols,
            rows,
            items: Vec::new(),
            starts: Vec::new(),
        };
        // Counting sort by cell: two passes, items stay in increasing order within a cell.
        let cell_of: Vec<u32> = positions.iter().map(|p| g.cell_of(*p) as u32).collect();
        let mut starts = vec![0u32; cols * rows + 1];
        for &c in &cell_of {
            starts[c as usize + 1] += 1;
        }
        for c in 0..cols * rows {
            starts[c + 1] += starts[c];
        }
        let mut next = starts.clone();
        let mut items = vec![0u32; n];
        for (i, &c) in cell_of.iter().enumerate() {
            items[next[c as usize] as usize] = i as u32;
            next[c as usize] += 1;
        }
        g.items = items;
        g.starts = starts;
        g
    }

    fn col_row(&self, p: [f64; 2]) -> (usize, usize) {
        let cx = ((p[0] - self.origin[0]) / self.cell).floor();
        let cy = ((p[1] - self.origin[1]) / self.cell).floor();
        (
            (cx.max(0.0) as usize).min(self.cols - 1),
            (cy.max(0.0) as usize).min(self.rows - 1),
        )
    }

    /// Whether the map rectangle misses every cell.
    fn misses(&self, r: [f64; 4]) -> bool {
        let end = [
            self.origin[0] + self.cols as f64 * self.cell,
            self.origin[1] + self.rows as f64 * self.cell,
        ];
        r[2] < r[0]
            || r[3] < r[1]
            || r[2] < self.origin[0]
            || r[3] < self.origin[1]
            || r[0] > end[0]
            || r[1] > end[1]
    }

    fn cell_of(&self, p: [f32; 2]) -> usize {
        let (c, r) = self.col_row([p[0] as f64, p[1] as f64]);
        r * self.cols + c
    }

    /// The share of the grid's cells that the map rectangle [x0, y0, x1, y1] touches (0 to 1).
    pub fn coverage(&self, r: [f64; 4]) -> f64 {
        if self.misses(r) {
            return 0.0;
        }
        let (c0, r0) = self.col_row([r[0], r[1]]);
        let (c1, r1) = self.col_row([r[2], r[3]]);
        ((c1 - c0 + 1) * (r1 - r0 + 1)) as f64 / (self.cols * self.rows) as f64
    }

    /// Every item whose position lies in a cell touched by the map rectangle [x0, y0, x1, y1]
    /// (a superset of the items inside it), in increasing order.
    pub fn query(&self, r: [f64; 4], out: &mut Vec<u32>) {
        self.query_any_order(r, out);
        out.sort_unstable();
    }

    /// The items [`Grid::query`] gives, in no particular order (cell by cell): for those who
    /// only test membership (a lasso over most of a million items need not sort them).
    pub fn query_any_order(&self, r: [f64; 4], out: &mut Vec<u32>) {
        out.clear();
        if self.items.is_empty() || self.misses(r) {
            return;
        }
        let (c0, r0) = self.col_row([r[0], r[1]]);
        let (c1, r1) = self.col_row([r[2], r[3]]);
        for row in r0..=r1 {
            let a = self.starts[row * self.cols + c0] as usize;
            let b = self.starts[row * self.cols + c1 + 1] as usize;
            out.extend_from_slice(&self.items[a..b]);
        }
    }

    /// The first item of the most crowded cell (the densest place of the map), if any.
    pub fn crowded(&self) -> Option<u32> {
        let c = (0..self.cols * self.rows)
            .max_by_key(|&c| (self.starts[c + 1] - self.starts[c], std::cmp::Reverse(c)))?;
        (self.starts[c + 1] > self.starts[c]).then(|| self.items[self.starts[c] as usize])
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_query_finds_exactly_the_items_a_full_scan_finds_plus_only_cell_neighbours() {
        // A fixed pseudo-random cloud with a dense knot, an item on every edge of the bounds.
        let mut s = 12345u64;
        let mut rnd = || {
            s = s
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (s >> 33) as f32 / (1u64 << 31) as f32
        };
        let mut pos: Vec<[f32; 2]> = (0..5000).map(|_| [rnd() * 10.0, rnd() * 6.0]).collect();
        pos.extend((0..2000).map(|_| [4.0 + rnd() * 0.1, 3.0 + rnd() * 0.1]));
        pos.extend([[0.0, 0.0], [10.0, 6.0], [0.0, 6.0], [10.0, 0.0]]);
        let bounds = [0.0, 0.0, 10.0, 6.0];
        let g = Grid::new(&pos, bounds, 8);
        // The densest place is the knot.
        let knot = pos[g.crowded().unwrap() as usize];
        assert!(
            (4.0..=4.1).contains(&knot[0]) && (3.0..=3.1).contains(&knot[1]),
            "{knot:?}"
        );
        assert_eq!(Grid::new(&[], bounds, 8).crowded(), None);
        let mut out = Vec::new();
        for r in [
            [1.0, 1.0, 2.5, 2.0],
            [3.95, 2.95, 4.2, 3.05],
            [-5.0, -5.0, 20.0, 20.0],
            [9.9, 5.9, 10.0, 6.0],
            [7.0, 1.0, 7.0, 1.0],
            [20.0, 20.0, 30.0, 30.0],
        ] {
            g.query(r, &mut out);
            let mut any = Vec::new();
            g.query_any_order(r, &mut any);
            any.sort_unstable();
            assert_eq!(any, out, "the same items in another order");
            assert!(
                out.windows(2).all(|w| w[0] < w[1]),
                "increasing, no repeats"
            );
            let inside: Vec<u32> = (0..pos.len() as u32)
                .filter(|&i| {
                    let p = pos[i as usize];
                    (p[0] as f64) >= r[0]
                        && (p[0] as f64) <= r[2]
                        && (p[1] as f64) >= r[1]
                        && (p[1] as f64) <= r[3]
                })
                .collect();
            assert!(inside.iter().all(|i| out.binary_search(i).is_ok()), "{r:?}");
            // Nothing further than one cell from the rectangle.
            for &i in &out {
                let p = pos[i as usize];
                let c = g.cell;
                assert!(
                    (p[0] as f64) >= r[0].max(0.0) - c - 1e-6
                        && (p[0] as f64) <= r[2].min(10.0) + c + 1e-6
                        && (p[1] as f64) >= r[1].max(0.0) - c - 1e-6
                        && (p[1] as f64) <= r[3].min(6.0) + c + 1e-6,
                    "{r:?}: item {i} at {p:?}"
                );
            }
        }
        g.query([-5.0, -5.0, 20.0, 20.0], &mut out);
        assert_eq!(out.len(), pos.len());
        assert!(g.coverage([-5.0, -5.0, 20.0, 20.0]) >= 1.0);
        assert!(g.coverage([1.0, 1.0, 1.5, 1.5]) < 0.05);
        assert_eq!(g.coverage([20.0, 20.0, 30.0, 30.0]), 0.0);
    }

    #[test]
    fn empty_and_single_point_maps() {
        let g = Grid::new(&[], [0.0, 0.0, 0.0, 0.0], 8);
        let mut out = vec![7];
        g.query([0.0, 0.0, 1.0, 1.0], &mut out);
        assert!(out.is_empty());
        let g = Grid::new(&[[2.0, 2.0]], [2.0, 2.0, 2.0, 2.0], 8);
        g.query([1.0, 1.0, 3.0, 3.0], &mut out);
        assert_eq!(out, [0]);
    }
}
