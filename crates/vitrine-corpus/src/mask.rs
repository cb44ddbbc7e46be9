//! A set of items as one bit per item.

/// One bit per item of an atlas; bit i set means item i is in the set.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Mask {
    words: Vec<u64>,
    n: usize,
}

impl Mask {
    pub fn none(n: usize) -> Mask {
        Mask {
            words: vec![0; n.div_ceil(64)],
            n,
        }
    }

    pub fn all(n: usize) -> Mask {
        let mut m = Mask {
            words: vec![u64::MAX; n.div_ceil(64)],
            n,
        };
        m.trim();
        m
    }

    /// The items for which `f` holds.
    pub fn from_fn(n: usize, mut f: impl FnMut(usize) -> bool) -> Mask {
        let mut m = Mask::none(n);
        for (w, word) in m.words.iter_mut().enumerate() {
            let base = w * 64;
            let mut bits = 0u64;
            for b in 0..64.min(n - base) {
                if f(base + b) {
                    bits |= 1 << b;
                }
            }
            *word = bits;
        }
        m
    }

    pub fn from_items(n: usize, items: impl IntoIterator<Item = usize>) -> Mask {
        let mut m = Mask::none(n);
        for i in items {
            m.set(i, true);
        }
        m
    }

    /// Clears the bits past the last item.
    fn trim(&mut self) {
        let extra = self.words.len() * 64 - self.n;
        if extra > 0 {
            if let Some(last) = self.words.last_mut() {
                *last &= u64::MAX >> extra;
            }
        }
    }

    pub fn len(&self) -> usize {
        self.n
    }

    pub fn is_empty(&self) -> bool {
        self.n == 0
    }

    pub fn get(&self, i: usize) -> bool {
        i < self.n && self.words[i / 64] >> (i % 64) & 1 == 1
    }

    pub fn set(&mut self, i: usize, on: bool) {
        if i < self.n {
            if on {
                self.words[i / 64] |= 1 << (i % 64);
            } else {
                self.words[i / 64] &= !(1 << (i % 64));
            }
        }
    }

    /// Sets items `a..b` on, a word at a time.
    pub fn set_range(&mut self, a: usize, b: usize) {
        let b = b.min(self.n);
        let mut i = a;
        while i < b {
            if i.is_multiple_of(64) && i + 64 <= b {
                self.words[i / 64] = u64::MAX;
                i += 64;
            } else {
                self.words[i / 64] |= 1 << (i % 64);
                i += 1;
            }
        }
    }

    pub fn count(&self) -> usize {
        self.words.iter().map(|w| w.count_ones() as usize).sum()
    }

    pub fn and(&mut self, other: &Mask) {
        for (a, b) in self.words.iter_mut().zip(&other.words) {
            *a &= b;
        }
    }

    pub fn or(&mut self, other: &Mask) {
        for (a, b) in self.words.iter_mut().zip(&other.words) {
            *a |= b;
        }
    }

    /// Removes the items of `other`.
    pub fn subtract(&mut self, other: &Mask) {
        for (a, b) in self.words.iter_mut().zip(&other.words) {
            *a &= !b;
        }
    }

    /// The items in the set, in item order.
    pub fn items(&self) -> impl Iterator<Item = usize> + '_ {
        self.words.iter().enumerate().flat_map(|(w, &word)| {
            let mut bits = word;
            std::iter::from_fn(move || {
                if bits == 0 {
                    return None;
                }
                let b = bits.trailing_zeros() as usize;
                bits &= bits - 1;
                Some(w * 64 + b)
            })
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_range_sets_the_same_items_as_one_by_one() {
        for (n, a, b) in [
            (300, 5, 250),
            (300, 64, 128),
            (300, 0, 300),
            (70, 60, 90),
            (10, 3, 3),
        ] {
            let mut m = Mask::none(n);
            m.set_range(a, b);
            let by_one = Mask::from_fn(n, |i| i >= a && i < b);
            assert_eq!(
                m.items().collect::<Vec<_>>(),
                by_one.items().collect::<Vec<_>>()
            );
            assert_eq!(m.count(), b.min(n) - a.min(b.min(n)));
        }
    }

    #[test]
    fn set_operations_match_plain_sets() {
        let n = 200;
        let a = Mask::from_fn(n, |i| i % 3 == 0);
        let b = Mask::from_items(n, [0, 1, 2, 64, 65, 130, 199]);
        let mut and = a.clone();
        and.and(&b);
        assert_eq!(and.items().collect::<Vec<_>>(), [0]);
        let mut or = a.clone();
        or.or(&b);
        // 67 multiples of 3 below 200, and the six items of b that are not.
        assert_eq!(or.count(), 67 + 6);
        let mut sub = b.clone();
        sub.subtract(&a);
        assert_eq!(sub.items().collect::<Vec<_>>(), [1, 2, 64, 65, 130, 199]);
        assert_eq!(Mask::all(n).count(), n);
        assert_eq!(Mask::all(70).items().last(), Some(69));
        assert!(!Mask::all(70).get(70));
    }
}
