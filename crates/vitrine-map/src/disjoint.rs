//! Disjoint sets (union-find with path halving): the connected parts of a graph given edge by
//! edge. A union keeps the smaller root, so every part's root is its lowest item whatever the
//! order of the edges.

pub struct DisjointSets {
    parent: Vec<u32>,
}

impl DisjointSets {
    /// `n` items, each alone.
    pub fn new(n: usize) -> DisjointSets {
        DisjointSets {
            parent: (0..n as u32).collect(),
        }
    }

    /// The root of item `x`'s set.
    pub fn find(&mut self, mut x: u32) -> u32 {
        while self.parent[x as usize] != x {
            let up = self.parent[self.parent[x as usize] as usize];
            self.parent[x as usize] = up;
            x = up;
        }
        x
    }

    /// Joins the sets of `a` and `b` (the smaller root stays the root).
    pub fn union(&mut self, a: u32, b: u32) {
        let (ra, rb) = (self.find(a), self.find(b));
        if ra != rb {
            self.parent[ra.max(rb) as usize] = ra.min(rb);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn roots_are_each_parts_lowest_item_whatever_the_order_of_the_edges() {
        let mut s = DisjointSets::new(6);
        for (a, b) in [(4, 5), (5, 2), (1, 3)] {
            s.union(a, b);
        }
        let roots: Vec<u32> = (0..6).map(|i| s.find(i)).collect();
        assert_eq!(roots, [0, 1, 2, 1, 2, 2]);
    }
}
