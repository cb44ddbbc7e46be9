//! The timeline strip's histogram: items by year, each item's weight spread evenly over the years
//! of its dating range (a "1520-1529" item adds a tenth to each of ten years), so that a bar
//! counts items, not ranges, and the bars of a collection sum to its dated items.

/// Bins of `bin` years from year `from`: `bins` counts, plus what fell outside them.
#[derive(Debug, Clone, PartialEq)]
pub struct Histogram {
    pub from: i32,
    pub bin: i32,
    pub counts: Vec<f64>,
}

/// A bin width that gives at most `max_bins` bins over `lo..=hi`: 1, 2, 5, 10, 20, 25, 50, 100 ...
pub fn bin_years(lo: i32, hi: i32, max_bins: usize) -> i32 {
    let span = (hi as i64 - lo as i64 + 1).max(1);
    let mut step: i64 = 1;
    let nice = [1i64, 2, 5];
    let mut k = 0usize;
    let mut scale = 1i64;
    while span.div_euclid(step) + 1 > max_bins.max(1) as i64 {
        k += 1;
        if k == nice.len() {
            k = 0;
            scale *= 10;
        }
        step = nice[k] * scale;
    }
    step as i32
}

impl Histogram {
    /// Empty bins covering `lo..=hi` in steps of `bin` years, starting at a multiple of `bin`
    /// (clamped to what an i32 holds).
    pub fn covering(lo: i32, hi: i32, bin: i32) -> Histogram {
        let bin = bin.max(1) as i64;
        let from = (lo as i64).div_euclid(bin) * bin;
        let from = from.max(i32::MIN as i64);
        let bins = ((hi as i64 - from).div_euclid(bin) + 1).max(1) as usize;
        Histogram {
            from: from as i32,
            bin: bin as i32,
            counts: vec![0.0; bins],
        }
    }

    /// Adds the items (by index) with their ranges `start[i]..=end[i]`; undated items
    /// (`i32::MIN`) are left out. Years outside the bins are clamped into the first or last.
    ///
    /// Each item costs the same whatever its range, and the memory is that of the bins whatever
    /// the span of years: an item's weight per year goes straight into the (at most two) bins its
    /// range covers in part, and into a difference array over the bins it covers whole (+w·bin at
    /// the first, −w·bin after the last), whose running sum is then added.
    pub fn add(&mut self, start: &[i32], end: &[i32], items: impl Iterator<Item = usize>) {
        self.add_items(start, end, items, true)
    }

    /// As [`Histogram::add`], but the years outside the bins are left out (an item counts with
    /// the part of its weight that falls inside them).
    pub fn add_inside(&mut self, start: &[i32], end: &[i32], items: impl Iterator<Item = usize>) {
        self.add_items(start, end, items, false)
    }

    fn add_items(
        &mut self,
        start: &[i32],
        end: &[i32],
        items: impl Iterator<Item = usize>,
        clamp: bool,
    ) {
        let nb = self.counts.len();
        let (from, bin) = (self.from as i64, self.bin as i64);
        let last = from + nb as i64 * bin - 1;
        let mut whole = vec![0.0f64; nb + 1];
        let (mut under, mut over) = (0.0f64, 0.0f64);
        for i in items {
            let (s, e) = (start[i] as i64, end[i] as i64);
            if start[i] == i32::MIN || e < s {
                continue;
            }
            let w = 1.0 / (e - s + 1) as f64;
            if s < from {
                under += (e.min(from - 1) - s + 1) as f64 * w;
            }
            if e > last {
                over += (e - s.max(last + 1) + 1) as f64 * w;
            }
            let (lo, hi) = (s.max(from), e.min(last));
            if lo > hi {
                continue;
            }
            let (bl, bh) = ((lo - from) / bin, (hi - from) / bin);
            if bl == bh {
                self.counts[bl as usize] += (hi - lo + 1) as f64 * w;
                continue;
            }
            self.counts[bl as usize] += (from + (bl + 1) * bin - lo) as f64 * w;
            self.counts[bh as usize] += (hi - (from + bh * bin) + 1) as f64 * w;
            if bh > bl + 1 {
                whole[bl as usize + 1] += w * bin as f64;
                whole[bh as usize] -= w * bin as f64;
            }
        }
        let mut per_bin = 0.0;
        for (c, d) in self.counts.iter_mut().zip(&whole) {
            per_bin += d;
            *c += per_bin;
        }
        if clamp {
            self.counts[0] += under;
            self.counts[nb - 1] += over;
        }
    }

    pub fn total(&self) -> f64 {
        self.counts.iter().sum()
    }

    /// The years bin `b` covers.
    pub fn years(&self, b: usize) -> (i32, i32) {
        let a = self.from as i64 + b as i64 * self.bin as i64;
        let clamp = |y: i64| y.clamp(i32::MIN as i64, i32::MAX as i64) as i32;
        (clamp(a), clamp(a + self.bin as i64 - 1))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_items_weight_is_spread_over_its_years_and_the_bars_sum_to_the_items() {
        // Worked example: bins of 10 years from 1500. A single year adds 1 to its bin; 1515-1524
        // adds half to each of two bins; 1500-1549 adds a fifth to each of five.
        let start = [1503, 1515, 1500, i32::MIN];
        let end = [1503, 1524, 1549, i32::MIN];
        let mut h = Histogram::covering(1500, 1549, 10);
        h.add(&start, &end, 0..4);
        let want = [1.0 + 0.2, 0.5 + 0.2, 0.5 + 0.2, 0.2, 0.2];
        for (a, b) in h.counts.iter().zip(want) {
            assert!((a - b).abs() < 1e-12, "{:?}", h.counts);
        }
        assert!((h.total() - 3.0).abs() < 1e-12, "three dated items");
        assert_eq!(h.years(1), (1510, 1519));
    }

    /// `n` seeded ranges: starts in `first..first + starts`, each up to `longest` years long.
    fn random_ranges(
        seed: u64,
        n: usize,
        first: i32,
        starts: u64,
        longest: u64,
    ) -> (Vec<i32>, Vec<i32>) {
        let mut s = seed;
        let mut r = |m: u64| {
            s = s
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (s >> 33) % m
        };
        let start: Vec<i32> = (0..n).map(|_| first + r(starts) as i32).collect();
        let end: Vec<i32> = start.iter().map(|&a| a + r(longest) as i32).collect();
        (start, end)
    }

    #[test]
    fn the_running_sum_gives_what_spreading_year_by_year_gives() {
        // The plain method as the reference: every year of every range adds 1/years to its bin
        // (years outside the bins into the first or last).
        let n = 3000;
        let (start, end) = random_ranges(99, n, 1350, 500, 120);
        for bin in [1, 3, 10, 50] {
            let mut h = Histogram::covering(1400, 1750, bin);
            h.add(&start, &end, 0..n);
            let mut want = vec![0.0; h.counts.len()];
            for i in 0..n {
                let w = 1.0 / (end[i] - start[i] + 1) as f64;
                for y in start[i]..=end[i] {
                    let b = ((y - h.from).div_euclid(bin)).clamp(0, want.len() as i32 - 1);
                    want[b as usize] += w;
                }
            }
            for (b, (a, w)) in h.counts.iter().zip(&want).enumerate() {
                assert!(
                    (a - w).abs() < 1e-9,
                    "bin width {bin}, bin {b}: {a} against {w}"
                );
            }
        }
    }

    #[test]
    fn the_widest_span_of_years_costs_only_its_bins() {
        // Years from one end of an i32 to the other (a crafted atlas): the bins stay as few as
        // asked, nothing overflows, and the bars still sum to the dated items.
        let (lo, hi) = (i32::MIN + 1, i32::MAX);
        let bin = bin_years(lo, hi, 300);
        let mut h = Histogram::covering(lo, hi, bin);
        assert!(h.counts.len() <= 302, "{} bins", h.counts.len());
        let start = [lo, -5, 1500, hi - 10, i32::MIN];
        let end = [lo + 3, 7, 1599, hi, i32::MIN];
        h.add(&start, &end, 0..5);
        assert!((h.total() - 4.0).abs() < 1e-9, "{}", h.total());
        let (a, b) = h.years(h.counts.len() - 1);
        assert!(
            a <= hi && b == hi,
            "the last bin {a}..{b} holds the last year"
        );
    }

    #[test]
    fn random_ranges_sum_to_the_dated_count() {
        let n = 5000;
        let (start, end) = random_ranges(12345, n, 1400, 300, 80);
        for bin in [1, 7, 25, 100] {
            let mut h = Histogram::covering(1400, 1800, bin);
            h.add(&start, &end, 0..n);
            assert!(
                (h.total() - n as f64).abs() < 1e-6,
                "bin {bin}: {}",
                h.total()
            );
        }
        assert_eq!(bin_years(1400, 1800, 100), 5);
        assert_eq!(bin_years(1500, 1510, 100), 1);
        assert_eq!(bin_years(-3000, 2000, 60), 100);
    }
}
