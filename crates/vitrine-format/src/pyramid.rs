//! The tile pyramid of a map (a quadtree over its positions), for atlases too large to fetch whole:
//! the viewer asks for the tiles in view at the level that matches the zoom.
//!
//! The pyramid covers the map's bounds with a square of side `side` anchored at their lower
//! corner. Level `z` divides it into 2^z x 2^z tiles; tile (z, x, y) spans
//! `[x0 + x s, x0 + (x + 1) s) x [y0 + y s, y0 + (y + 1) s)` with `s = side / 2^z` (the last row
//! and column closed at the square's edge). A tile holding more than `capacity` items is split into
//! its four children, down to `max_level`; the tiles not split are the **leaves**, and every item is
//! in exactly one leaf. Items are put in leaf order (leaves in depth-first order: children
//! lower-left, lower-right, upper-left, upper-right; items within a leaf in their earlier order),
//! so that a leaf's items are one run of the new order: its `items` range.
//!
//! Invariants (checked by [`Pyramid::check`]): node 0 is the root (level 0); each internal node's
//! count is the sum of its children's; a leaf's count is its range's length; the leaves' ranges
//! partition `0..n` in order; an item's position lies in its leaf's square.

use serde::{Deserialize, Serialize};

/// One tile of the pyramid.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Tile {
    pub level: u8,
    pub x: u32,
    pub y: u32,
    /// Items in this tile and below.
    pub count: u64,
    /// Children (indices into the node list; lower-left, lower-right, upper-left, upper-right),
    /// `None` for a leaf. An empty quarter has no node: its index is `u32::MAX`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub children: Option<[u32; 4]>,
    /// A leaf's items: `start..end` in the pyramid's item order.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub items: Option<[u64; 2]>,
}

/// A map's tile pyramid.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Pyramid {
    /// The square's lower corner and side, in map coordinates.
    pub origin: [f32; 2],
    pub side: f32,
    /// Most items a leaf holds, unless it is at `max_level` (then it holds what falls there).
    pub capacity: u64,
    pub max_level: u8,
    /// Node 0 is the root.
    pub tiles: Vec<Tile>,
}

impl Pyramid {
    /// The pyramid of `positions` (x, y interleaved, finite) and the item order it puts them in
    /// (`order[k]` = the earlier index of the item at position k).
    pub fn build(positions: &[f32], capacity: u64, max_level: u8) -> (Pyramid, Vec<u32>) {
        let n = positions.len() / 2;
        let (mut lo, mut hi) = ([f32::INFINITY; 2], [f32::NEG_INFINITY; 2]);
        for p in positions.chunks_exact(2) {
            for a in 0..2 {
                lo[a] = lo[a].min(p[a]);
                hi[a] = hi[a].max(p[a]);
            }
        }
        if n == 0 {
            (lo, hi) = ([0.0; 2], [1.0; 2]);
        }
        // A hair wider than the bounds, so that the upper edge falls inside the last tile.
        let side = ((hi[0] - lo[0]).max(hi[1] - lo[1])).max(f32::MIN_POSITIVE) * 1.000_001;
        let mut p = Pyramid {
            origin: lo,
            side,
            capacity: capacity.max(1),
            max_level: max_level.min(24),
            tiles: Vec::new(),
        };
        let mut order = Vec::with_capacity(n);
        let items: Vec<u32> = (0..n as u32).collect();
        p.split(positions, items, 0, 0, 0, &mut order);
        (p, order)
    }

    /// Adds the node of tile (level, x, y) holding `items`, and below it what it needs; its index.
    fn split(
        &mut self,
        positions: &[f32],
        items: Vec<u32>,
        level: u8,
        x: u32,
        y: u32,
        order: &mut Vec<u32>,
    ) -> u32 {
        let index = self.tiles.len() as u32;
        self.tiles.push(Tile {
            level,
            x,
            y,
            count: items.len() as u64,
            children: None,
            items: None,
        });
        if items.len() as u64 <= self.capacity || level >= self.max_level {
            let start = order.len() as u64;
            order.extend_from_slice(&items);
            self.tiles[index as usize].items = Some([start, order.len() as u64]);
            return index;
        }
        let mut quarters: [Vec<u32>; 4] = Default::default();
        for i in items {
            let [cx, cy] = self.cell(
                positions[2 * i as usize],
                positions[2 * i as usize + 1],
                level + 1,
            );
            let q = (cx - 2 * x) + 2 * (cy - 2 * y);
            quarters[q as usize].push(i);
        }
        let mut children = [u32::MAX; 4];
        for (q, part) in quarters.into_iter().enumerate() {
            if !part.is_empty() {
                let (qx, qy) = (2 * x + (q as u32 & 1), 2 * y + (q as u32 >> 1));
                children[q] = self.split(positions, part, level + 1, qx, qy, order);
            }
        }
        self.tiles[index as usize].children = Some(children);
        index
    }

    /// The tile (x, y) at `level` that holds map point (px, py).
    pub fn cell(&self, px: f32, py: f32, level: u8) -> [u32; 2] {
        let per = 1u64 << level;
        let at = |v: f32, o: f32| {
            let t = ((v - o) as f64 / self.side as f64 * per as f64).floor();
            t.clamp(0.0, (per - 1) as f64) as u32
        };
        [at(px, self.origin[0]), at(py, self.origin[1])]
    }

    /// A tile's square: [x0, y0, x1, y1] in map coordinates.
    pub fn square(&self, t: &Tile) -> [f64; 4] {
        let s = self.side as f64 / (1u64 << t.level) as f64;
        let (x0, y0) = (
            self.origin[0] as f64 + t.x as f64 * s,
            self.origin[1] as f64 + t.y as f64 * s,
        );
        [x0, y0, x0 + s, y0 + s]
    }

    /// The tiles a view of `rect` ([x0, y0, x1, y1] in map coordinates) draws at `level`: those of
    /// that level that meet it, and the leaves above that level that meet it (a leaf has no finer
    /// tiles). Every item inside `rect` is in one of them, or below one.
    pub fn in_view(&self, rect: [f64; 4], level: u8) -> Vec<u32> {
        let meets = |t: &Tile| {
            let s = self.square(t);
            s[0] <= rect[2] && rect[0] <= s[2] && s[1] <= rect[3] && rect[1] <= s[3]
        };
        let mut out = Vec::new();
        let mut stack = vec![0u32];
        while let Some(i) = stack.pop() {
            let Some(t) = self.tiles.get(i as usize) else {
                continue;
            };
            if !meets(t) {
                continue;
            }
            match &t.children {
                Some(c) if t.level < level => {
                    stack.extend(c.iter().rev().filter(|&&k| k != u32::MAX));
                }
                _ => out.push(i),
            }
        }
        out
    }

    /// For each tile, the items below it per value of a category column (`codes` in pyramid item
    /// order, one per item, `u32::MAX` or any code past `values` for none): what a filter's counts
    /// over a coarse tile need without its items. Leaves count their run; a tile sums its children.
    pub fn value_counts(&self, codes: &[u32], values: usize) -> Vec<Vec<u32>> {
        let mut out = vec![Vec::new(); self.tiles.len()];
        // Children come after their parent in the node list: sum from the end.
        for i in (0..self.tiles.len()).rev() {
            let t = &self.tiles[i];
            let mut c = vec![0u32; values];
            match (&t.children, &t.items) {
                (Some(children), _) => {
                    for &k in children.iter().filter(|&&k| k != u32::MAX) {
                        for (a, b) in c.iter_mut().zip(&out[k as usize]) {
                            *a += b;
                        }
                    }
                }
                (None, Some([a, b])) => {
                    for &code in &codes[*a as usize..(*b as usize).min(codes.len())] {
                        if let Some(x) = c.get_mut(code as usize) {
                            *x += 1;
                        }
                    }
                }
                (None, None) => {}
            }
            out[i] = c;
        }
        out
    }

    /// The leaves, in item order.
    pub fn leaves(&self) -> impl Iterator<Item = &Tile> {
        self.tiles.iter().filter(|t| t.children.is_none())
    }

    /// Checks the invariants against the items' positions in pyramid order (`positions[2k..2k+2]`
    /// is the item at position k); the first broken one, said.
    pub fn check(&self, positions: &[f32]) -> Result<(), String> {
        let n = (positions.len() / 2) as u64;
        let root = self.tiles.first().ok_or("the pyramid has no root")?;
        if (root.level, root.x, root.y, root.count) != (0, 0, 0, n) {
            return Err(format!("the root is {root:?}, for {n} items"));
        }
        self.check_structure()?;
        for t in self.leaves() {
            let Some([a, b]) = t.items else { continue };
            let sq = self.square(t);
            for k in a..b {
                let (px, py) = (positions[2 * k as usize], positions[2 * k as usize + 1]);
                if self.cell(px, py, t.level) != [t.x, t.y] {
                    return Err(format!(
                        "item {k} at ({px}, {py}) lies outside the square {sq:?} of its leaf"
                    ));
                }
            }
        }
        Ok(())
    }

    /// The invariants that need no positions: every node reached once from the root, children
    /// one level down inside their parent, counts summed, leaves' runs partitioning
    /// `0..root count` in depth-first order (which is node order), levels at most `max_level`.
    pub fn check_structure(&self) -> Result<(), String> {
        let root = self.tiles.first().ok_or("the pyramid has no root")?;
        let n = root.count;
        let mut seen = vec![false; self.tiles.len()];
        let mut last_leaf = None;
        // Leaves in depth-first order cover 0..n in runs.
        let mut next = 0u64;
        let mut stack = vec![0u32];
        while let Some(i) = stack.pop() {
            let t = self.tiles.get(i as usize).ok_or(format!("no tile {i}"))?;
            if std::mem::replace(&mut seen[i as usize], true) {
                return Err(format!("tile {i} is reached twice"));
            }
            if t.level > self.max_level || t.level > 24 {
                return Err(format!(
                    "tile {i} is at level {}, below the deepest",
                    t.level
                ));
            }
            let per = 1u64 << t.level;
            if t.x as u64 >= per || t.y as u64 >= per {
                return Err(format!("tile {i} lies outside its level"));
            }
            match (&t.children, &t.items) {
                (Some(c), None) => {
                    let mut sum = 0u64;
                    for (q, &k) in c.iter().enumerate().rev().filter(|(_, &k)| k != u32::MAX) {
                        let child = self.tiles.get(k as usize).ok_or(format!("no tile {k}"))?;
                        let (qx, qy) = (2 * t.x + (q as u32 & 1), 2 * t.y + (q as u32 >> 1));
                        if child.level != t.level + 1 || (child.x, child.y) != (qx, qy) {
                            return Err(format!("tile {k} is not quarter {q} of tile {i}"));
                        }
                        sum = sum.saturating_add(child.count);
                        stack.push(k);
                    }
                    if sum != t.count {
                        return Err(format!(
                            "tile {i} counts {} items, its children {sum}",
                            t.count
                        ));
                    }
                }
                (None, Some([a, b])) => {
                    if *a != next || b < a || b - a != t.count {
                        return Err(format!(
                            "leaf {i} holds items {a}..{b} (count {}), the next run starts at {next}",
                            t.count
                        ));
                    }
                    if last_leaf.is_some_and(|l| l >= i) {
                        return Err(format!(
                            "leaf {i} comes before an earlier leaf in node order"
                        ));
                    }
                    last_leaf = Some(i);
                    next = *b;
                }
                _ => return Err(format!("tile {i} is neither a leaf nor has children")),
            }
        }
        if next != n {
            return Err(format!("the leaves hold {next} of {n} items"));
        }
        if let Some(k) = seen.iter().position(|s| !s) {
            return Err(format!("tile {k} is not below the root"));
        }
        Ok(())
    }

    /// The items below tile `i`: one run in item order (a tile's leaves are consecutive).
    pub fn run(&self, i: usize) -> [u64; 2] {
        // The first leaf down the first children, the last down the last ones.
        let down = |rev: bool| {
            let mut k = i;
            while let Some(c) = &self.tiles[k].children {
                let mut it = c.iter().copied().filter(|&k| k != u32::MAX);
                match if rev { it.next_back() } else { it.next() } {
                    Some(next) => k = next as usize,
                    None => break,
                }
            }
            self.tiles[k].items
        };
        match (down(false), down(true)) {
            (Some([a, _]), Some([_, b])) => [a, b],
            _ => [0, 0],
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A seeded mixture: dense clusters of very different sizes, a sparse background and 2,000
    /// items on one point (a hard case: no split can part them).
    fn mixture(n: usize) -> Vec<f32> {
        let mut s = 0x9E37_79B9_7F4A_7C15u64;
        let mut next = || {
            s ^= s << 13;
            s ^= s >> 7;
            s ^= s << 17;
            (s >> 11) as f64 / (1u64 << 53) as f64
        };
        let mut p = Vec::with_capacity(2 * n);
        for i in 0..n {
            let (x, y) = if i < 2000 {
                (3.25, -1.5)
            } else if i % 10 == 0 {
                (next() * 40.0 - 20.0, next() * 30.0 - 15.0)
            } else {
                let c = (i % 7) as f64;
                let spread = 0.05 * (1.0 + c * c);
                (
                    c * 4.0 - 12.0 + (next() - 0.5) * spread,
                    (c - 3.0) * 2.0 + (next() - 0.5) * spread,
                )
            };
            p.push(x as f32);
            p.push(y as f32);
        }
        p
    }

    fn reordered(positions: &[f32], order: &[u32]) -> Vec<f32> {
        order
            .iter()
            .flat_map(|&i| [positions[2 * i as usize], positions[2 * i as usize + 1]])
            .collect()
    }

    #[test]
    fn every_item_is_in_exactly_one_leaf_and_counts_add_up() {
        let pos = mixture(60_000);
        let (p, order) = Pyramid::build(&pos, 1_000, 14);
        let mut seen = vec![false; 60_000];
        for &i in &order {
            assert!(!seen[i as usize], "item {i} twice");
            seen[i as usize] = true;
        }
        assert_eq!(order.len(), 60_000);
        p.check(&reordered(&pos, &order)).unwrap();
        // Leaves keep to the capacity, but for the one point 2,000 items share (at the deepest level).
        for t in p.leaves() {
            assert!(t.count <= 1_000 || t.level == 14, "{t:?}");
        }
        assert!(p.leaves().any(|t| t.count >= 2_000 && t.level == 14));
        assert!(p.tiles.len() > 100, "{} tiles", p.tiles.len());
    }

    #[test]
    fn a_view_gets_every_item_inside_it() {
        let pos = mixture(30_000);
        let (p, order) = Pyramid::build(&pos, 500, 12);
        let ordered = reordered(&pos, &order);
        // Which tile (node) holds each item at each depth: walk the leaves' ancestors.
        let mut parent = vec![u32::MAX; p.tiles.len()];
        for (i, t) in p.tiles.iter().enumerate() {
            for &c in t.children.iter().flatten().filter(|&&c| c != u32::MAX) {
                parent[c as usize] = i as u32;
            }
        }
        for (rect, level) in [
            ([-13.0, -7.0, -11.0, -5.0], 6u8),
            ([3.0, -2.0, 3.5, -1.0], 12),
            ([-30.0, -30.0, 30.0, 30.0], 0),
            ([10.0, 10.0, 19.0, 14.0], 3),
        ] {
            let got: std::collections::HashSet<u32> = p.in_view(rect, level).into_iter().collect();
            for t in &got {
                let sq = p.square(&p.tiles[*t as usize]);
                assert!(
                    sq[0] <= rect[2] && rect[0] <= sq[2] && sq[1] <= rect[3] && rect[1] <= sq[3]
                );
            }
            for leaf in p.leaves() {
                let [a, b] = leaf.items.unwrap();
                let index = p.tiles.iter().position(|t| std::ptr::eq(t, leaf)).unwrap() as u32;
                for k in a..b {
                    let (x, y) = (
                        ordered[2 * k as usize] as f64,
                        ordered[2 * k as usize + 1] as f64,
                    );
                    if x < rect[0] || x > rect[2] || y < rect[1] || y > rect[3] {
                        continue;
                    }
                    let mut node = index;
                    while !got.contains(&node) {
                        node = parent[node as usize];
                        assert_ne!(node, u32::MAX, "item {k} in view but in no tile drawn");
                    }
                    assert!(p.tiles[node as usize].level <= level);
                }
            }
        }
    }

    #[test]
    fn tile_counts_per_value_equal_the_items_below() {
        let pos = mixture(20_000);
        let (p, order) = Pyramid::build(&pos, 300, 12);
        // A category by the item's earlier index (so it is spread unevenly over the tiles), and
        // some items with none.
        let codes: Vec<u32> = order
            .iter()
            .map(|&i| {
                if i % 11 == 0 {
                    u32::MAX
                } else {
                    (i * 7 + i / 3) % 5
                }
            })
            .collect();
        let counts = p.value_counts(&codes, 5);
        // Every tile against a count of the items inside its square at its level.
        let ordered = reordered(&pos, &order);
        for (t, c) in p.tiles.iter().zip(&counts) {
            let mut want = [0u32; 5];
            for k in 0..order.len() {
                let (x, y) = (ordered[2 * k], ordered[2 * k + 1]);
                if p.cell(x, y, t.level) == [t.x, t.y] && codes[k] < 5 {
                    want[codes[k] as usize] += 1;
                }
            }
            assert_eq!(c.as_slice(), want.as_slice(), "{t:?}");
        }
        let filled = codes.iter().filter(|&&c| c < 5).count() as u32;
        assert_eq!(counts[0].iter().sum::<u32>(), filled);
    }

    #[test]
    fn the_check_finds_a_broken_pyramid() {
        let pos = mixture(5_000);
        let (p, order) = Pyramid::build(&pos, 200, 10);
        let ordered = reordered(&pos, &order);
        p.check(&ordered).unwrap();
        let mut wrong_count = p.clone();
        wrong_count.tiles[0].count += 1;
        assert!(wrong_count.check(&ordered).is_err());
        // Items out of their leaves: the positions of two far-apart items swapped.
        let mut swapped = ordered.clone();
        let last = swapped.len() - 2;
        swapped.swap(0, last);
        swapped.swap(1, last + 1);
        let e = p.check(&swapped).unwrap_err();
        assert!(e.contains("lies outside the square"), "{e}");
        // A node listed twice, and one no path reaches: what a hand-edited manifest could hold.
        let mut twice = p.clone();
        let parent = twice
            .tiles
            .iter()
            .position(|t| t.children.is_some())
            .unwrap();
        let c = twice.tiles[parent].children.as_mut().unwrap();
        let k = *c.iter().find(|&&k| k != u32::MAX).unwrap();
        *c = [k; 4];
        assert!(twice.check_structure().is_err());
        let mut stray = p.clone();
        let mut leaf = stray.leaves().next().unwrap().clone();
        leaf.items = Some([0, 0]);
        leaf.count = 0;
        stray.tiles.push(leaf);
        let e = stray.check_structure().unwrap_err();
        assert!(e.contains("not below the root"), "{e}");
    }

    #[test]
    fn a_tiles_items_are_the_run_of_its_leaves() {
        let pos = mixture(20_000);
        let (p, _) = Pyramid::build(&pos, 300, 12);
        // Each tile's run, from its leaves found by walking down: one run, its count long.
        for (i, t) in p.tiles.iter().enumerate() {
            let mut leaves = Vec::new();
            let mut stack = vec![i];
            while let Some(k) = stack.pop() {
                match &p.tiles[k].children {
                    Some(c) => {
                        stack.extend(c.iter().filter(|&&c| c != u32::MAX).map(|&c| c as usize))
                    }
                    None => leaves.push(p.tiles[k].items.unwrap()),
                }
            }
            let lo = leaves.iter().map(|r| r[0]).min().unwrap();
            let hi = leaves.iter().map(|r| r[1]).max().unwrap();
            assert_eq!(p.run(i), [lo, hi], "tile {i}");
            assert_eq!(hi - lo, t.count, "tile {i}: its leaves are one run");
        }
    }

    #[test]
    fn small_and_degenerate_maps_are_one_tile() {
        let (p, order) = Pyramid::build(&[1.0, 2.0, 1.0, 2.0, 1.0, 2.0], 10, 8);
        assert_eq!(p.tiles.len(), 1);
        assert_eq!(order, [0, 1, 2]);
        p.check(&[1.0, 2.0, 1.0, 2.0, 1.0, 2.0]).unwrap();
        let (p, order) = Pyramid::build(&[], 10, 8);
        assert_eq!((p.tiles.len(), order.len()), (1, 0));
        p.check(&[]).unwrap();
    }
}
