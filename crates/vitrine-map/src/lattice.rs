//! The lattice: the similarity map snapped to a grid, one item per cell, for browsing thumbnails
//! without overlap.
//!
//! Recursive balanced bisection: the grid's cells are halved along the grid's longer side, the items
//! are split at the matching quantile of the same map coordinate, and each half goes on into its half
//! of the cells. Neighbours on the map stay neighbours on the grid at every scale of the recursion,
//! every cell holds at most one item, and the work is O(n log² n).

/// Grid positions: item i sits in cell (col, row), drawn at x = col, y = row (unit cells).
pub struct Lattice {
    pub columns: u32,
    pub rows: u32,
    pub cells: Vec<[u32; 2]>,
}

/// Cells for every item; the grid has about 10 % spare cells and the map's aspect ratio.
pub fn lattice(pos: &[[f32; 2]]) -> Lattice {
    let n = pos.len();
    if n == 0 {
        return Lattice {
            columns: 0,
            rows: 0,
            cells: vec![],
        };
    }
    let (mut lo, mut hi) = ([f32::INFINITY; 2], [f32::NEG_INFINITY; 2]);
    for p in pos {
        for a in 0..2 {
            lo[a] = lo[a].min(p[a]);
            hi[a] = hi[a].max(p[a]);
        }
    }
    let aspect = ((hi[0] - lo[0]).max(1e-6) / (hi[1] - lo[1]).max(1e-6)).clamp(0.25, 4.0) as f64;
    let want = (n as f64 * 1.1).max(1.0);
    let mut rows = (want / aspect).sqrt().ceil().max(1.0) as u32;
    let mut columns = (want / rows as f64).ceil().max(1.0) as u32;
    while (columns as u64) * (rows as u64) < n as u64 {
        if columns <= rows {
            columns += 1;
        } else {
            rows += 1;
        }
    }
    let mut cells = vec![[0u32; 2]; n];
    let mut items: Vec<u32> = (0..n as u32).collect();
    place(pos, &mut items, [0, 0, columns, rows], &mut cells);
    Lattice {
        columns,
        rows,
        cells,
    }
}

/// Places `items` into the block of cells [col0, row0, cols, rows] (items.len() <= cols * rows).
fn place(pos: &[[f32; 2]], items: &mut [u32], block: [u32; 4], cells: &mut [[u32; 2]]) {
    let [c0, r0, cols, rows] = block;
    if items.is_empty() {
        return;
    }
    if cols * rows == 1 || items.len() == 1 {
        // One item: the block's centre cell, so that sparse regions keep their gaps evenly.
        cells[items[0] as usize] = [c0 + (cols - 1) / 2, r0 + (rows - 1) / 2];
        return;
    }
    let split_columns = cols >= rows;
    let axis = if split_columns { 0 } else { 1 };
    let (first_cells, first_block, second_block) = if split_columns {
        let left = cols / 2;
        (
            left * rows,
            [c0, r0, left, rows],
            [c0 + left, r0, cols - left, rows],
        )
    } else {
        let top = rows / 2;
        (
            cols * top,
            [c0, r0, cols, top],
            [c0, r0 + top, cols, rows - top],
        )
    };
    let total = cols * rows;
    // Items shared in proportion to cells, within what each half can hold.
    let n = items.len() as u64;
    let mut first = ((n * first_cells as u64 + total as u64 / 2) / total as u64) as usize;
    first = first
        .min(first_cells as usize)
        .max(items.len().saturating_sub((total - first_cells) as usize));
    if first > 0 && first < items.len() {
        items.select_nth_unstable_by(first, |&a, &b| {
            pos[a as usize][axis]
                .total_cmp(&pos[b as usize][axis])
                .then(a.cmp(&b))
        });
    }
    let (a, b) = items.split_at_mut(first);
    place(pos, a, first_block, cells);
    place(pos, b, second_block, cells);
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::Rng;

    #[test]
    fn one_item_per_cell_and_neighbourhoods_kept() {
        let mut rng = Rng::new(4);
        let pos: Vec<[f32; 2]> = (0..5000)
            .map(|_| [rng.uniform() as f32 * 20.0, rng.uniform() as f32 * 10.0])
            .collect();
        let l = lattice(&pos);
        assert!((l.columns * l.rows) as usize >= pos.len());
        assert!(
            l.columns > l.rows,
            "the map's aspect ratio is kept: {} x {}",
            l.columns,
            l.rows
        );
        let mut seen = std::collections::HashSet::new();
        for c in &l.cells {
            assert!(c[0] < l.columns && c[1] < l.rows);
            assert!(seen.insert(*c), "two items in cell {c:?}");
        }
        // Order is kept along each axis for most pairs of items far enough apart on the map.
        let (mut agree, mut total) = (0, 0);
        for i in (0..pos.len()).step_by(7) {
            for j in (1..pos.len()).step_by(13) {
                if (pos[i][0] - pos[j][0]).abs() > 2.0 {
                    total += 1;
                    if (pos[i][0] < pos[j][0]) == (l.cells[i][0] < l.cells[j][0]) {
                        agree += 1;
                    }
                }
            }
        }
        assert!(agree as f64 / total as f64 > 0.97, "{agree} of {total}");
    }

    #[test]
    fn tiny_and_identical_inputs() {
        assert_eq!(lattice(&[]).cells.len(), 0);
        let l = lattice(&[[1.0, 1.0]]);
        assert_eq!(l.cells, vec![[0, 0]]);
        let same = vec![[3.0f32, 3.0]; 50];
        let l = lattice(&same);
        let distinct: std::collections::HashSet<_> = l.cells.iter().collect();
        assert_eq!(distinct.len(), 50);
    }
}
