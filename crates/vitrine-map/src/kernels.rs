//! Distance kernels over f32 rows for the approximate neighbour search.
//!
//! Each kernel keeps 32 running sums, each step one fused multiply-add (one rounding), and adds the
//! sums up in one fixed order. The wide path (AVX2 with FMA) and the portable path (`f32::mul_add`,
//! which is exactly rounded everywhere: a hardware instruction on ARM and recent x86, the C
//! library's exact routine elsewhere) therefore give the same bits, so a build gives the same graph
//! on every machine; the wide path is only faster.

const LANES: usize = 32;

#[inline(always)]
fn reduce(acc: &[f32; LANES]) -> f32 {
    let mut s = [0f32; 8];
    for l in 0..8 {
        s[l] = (acc[l] + acc[l + 8]) + (acc[l + 16] + acc[l + 24]);
    }
    ((s[0] + s[4]) + (s[2] + s[6])) + ((s[1] + s[5]) + (s[3] + s[7]))
}

/// The running sums `acc = step(x, y, acc)` over the rows, in 32 lanes (see the module note).
#[inline(always)]
fn sum_any(a: &[f32], b: &[f32], step: impl Fn(f32, f32, f32) -> f32) -> f32 {
    debug_assert_eq!(a.len(), b.len());
    let mut acc = [0f32; LANES];
    let (ca, cb) = (a.chunks_exact(LANES), b.chunks_exact(LANES));
    let (ta, tb) = (ca.remainder(), cb.remainder());
    for (x, y) in ca.zip(cb) {
        for l in 0..LANES {
            acc[l] = step(x[l], y[l], acc[l]);
        }
    }
    let mut tail = 0f32;
    for (&x, &y) in ta.iter().zip(tb) {
        tail = step(x, y, tail);
    }
    reduce(&acc) + tail
}

#[inline(always)]
fn sq_step(x: f32, y: f32, acc: f32) -> f32 {
    let t = x - y;
    t.mul_add(t, acc)
}

#[inline(always)]
fn dot_step(x: f32, y: f32, acc: f32) -> f32 {
    x.mul_add(y, acc)
}

fn sq_dist_any(a: &[f32], b: &[f32]) -> f32 {
    sum_any(a, b, sq_step)
}

fn dot_any(a: &[f32], b: &[f32]) -> f32 {
    sum_any(a, b, dot_step)
}

/// The running sum a kernel keeps.
#[derive(Clone, Copy)]
enum Sum {
    Dot,
    Sq,
}

impl Sum {
    /// One pair on the portable path.
    fn any(self, a: &[f32], b: &[f32]) -> f32 {
        match self {
            Sum::Dot => dot_any(a, b),
            Sum::Sq => sq_dist_any(a, b),
        }
    }
}

/// The end of one pair's sum on the wide path: the four 8-lane registers of running sums added up
/// as [`reduce`] adds the 32 lanes (lane l of v is s[l], then t = (s0 + s4, s1 + s5, s2 + s6,
/// s3 + s7) and the sum (t0 + t2) + (t1 + t3)), then the elements past the last full 32, `at` on.
#[cfg(target_arch = "x86_64")]
#[inline(always)]
unsafe fn finish(
    acc: [std::arch::x86_64::__m256; 4],
    a: &[f32],
    b: &[f32],
    at: usize,
    step: impl Fn(f32, f32, f32) -> f32,
) -> f32 {
    use std::arch::x86_64::*;
    // SAFETY: the caller has checked for AVX2; no memory is read but through the slices.
    let sum = unsafe {
        let v = _mm256_add_ps(_mm256_add_ps(acc[0], acc[1]), _mm256_add_ps(acc[2], acc[3]));
        let t = _mm_add_ps(_mm256_castps256_ps128(v), _mm256_extractf128_ps(v, 1));
        let u = _mm_add_ps(t, _mm_movehl_ps(t, t));
        _mm_cvtss_f32(_mm_add_ss(u, _mm_shuffle_ps(u, u, 1)))
    };
    let mut tail = 0f32;
    for (&x, &y) in a[at..].iter().zip(&b[at..]) {
        tail = step(x, y, tail);
    }
    sum + tail
}

/// [`sum_any`] of row `a` against `M` rows at once, with each pair's 32 sums in four 8-lane AVX2
/// registers: lane for lane the same sums (so the same bits as the portable path), and each chunk
/// of `a` loaded once for all `M` rows. With `M` = 3 the 12 running sums and the chunk of `a` fit
/// in the 16 AVX2 registers; `M` = 1 is the one-pair kernel. `wide` is `step` on eight lanes.
#[cfg(target_arch = "x86_64")]
#[inline(always)]
// The chunk index `r` runs outside the row index `m`, so that one load of `a` serves all rows.
#[allow(clippy::needless_range_loop)]
unsafe fn sum_avx2_many<const M: usize>(
    a: &[f32],
    bs: [&[f32]; M],
    wide: impl Fn(
        std::arch::x86_64::__m256,
        std::arch::x86_64::__m256,
        std::arch::x86_64::__m256,
    ) -> std::arch::x86_64::__m256,
    step: impl Fn(f32, f32, f32) -> f32,
) -> [f32; M] {
    use std::arch::x86_64::*;
    debug_assert!(bs.iter().all(|b| b.len() == a.len()));
    let n = bs.iter().fold(a.len(), |n, b| n.min(b.len()));
    let chunks = n / LANES;
    // SAFETY: the caller has checked for AVX2; every load reads 8 floats inside the first
    // `chunks * LANES` of each slice.
    unsafe {
        let pa = a.as_ptr();
        let pb = bs.map(|b| b.as_ptr());
        let mut acc = [[_mm256_setzero_ps(); 4]; M];
        for c in 0..chunks {
            for r in 0..4 {
                let o = c * LANES + 8 * r;
                let va = _mm256_loadu_ps(pa.add(o));
                for m in 0..M {
                    acc[m][r] = wide(va, _mm256_loadu_ps(pb[m].add(o)), acc[m][r]);
                }
            }
        }
        let mut out = [0f32; M];
        for m in 0..M {
            out[m] = finish(acc[m], &a[..n], &bs[m][..n], chunks * LANES, &step);
        }
        out
    }
}

/// [`sum_avx2_many`] of every row of `a` against every row of `b`: the same sums lane for lane (so
/// the same bits as one pair at a time), faster because a block of rows is read once for all its
/// pairs. The 32 lanes go in four passes of eight (lane group r of a pair only ever meets elements
/// `32 c + 8 r ..`), so a pass needs one register per pair: with 3 x 3 rows, nine running sums and
/// six loads serve nine multiply-adds, where one pair at a time loads two for each.
#[cfg(target_arch = "x86_64")]
#[inline(always)]
#[allow(clippy::needless_range_loop)]
unsafe fn sum_avx2_block<const A: usize, const B: usize>(
    a: [&[f32]; A],
    b: [&[f32]; B],
    wide: impl Fn(
        std::arch::x86_64::__m256,
        std::arch::x86_64::__m256,
        std::arch::x86_64::__m256,
    ) -> std::arch::x86_64::__m256,
    step: impl Fn(f32, f32, f32) -> f32,
) -> [[f32; B]; A] {
    use std::arch::x86_64::*;
    debug_assert!(a.iter().chain(&b).all(|r| r.len() == a[0].len()));
    let n = a.iter().chain(&b).map(|r| r.len()).min().unwrap_or(0);
    let chunks = n / LANES;
    // SAFETY: the caller has checked for AVX2; every load reads 8 floats inside the first
    // `chunks * LANES` of each slice.
    unsafe {
        let pa = a.map(|r| r.as_ptr());
        let pb = b.map(|r| r.as_ptr());
        let mut groups = [[[_mm256_setzero_ps(); 4]; B]; A];
        for r in 0..4 {
            let mut acc = [[_mm256_setzero_ps(); B]; A];
            for c in 0..chunks {
                let o = c * LANES + 8 * r;
                let vb = pb.map(|p| _mm256_loadu_ps(p.add(o)));
                for x in 0..A {
                    let va = _mm256_loadu_ps(pa[x].add(o));
                    for y in 0..B {
                        acc[x][y] = wide(va, vb[y], acc[x][y]);
                    }
                }
            }
            for x in 0..A {
                for y in 0..B {
                    groups[x][y][r] = acc[x][y];
                }
            }
        }
        let mut out = [[0f32; B]; A];
        for x in 0..A {
            for y in 0..B {
                out[x][y] = finish(groups[x][y], &a[x][..n], &b[y][..n], chunks * LANES, &step);
            }
        }
        out
    }
}

/// [`sum_avx2_many`] for one kind of sum, where AVX2 and FMA are present.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
fn many_avx2<const M: usize>(sum: Sum, a: &[f32], bs: [&[f32]; M]) -> [f32; M] {
    use std::arch::x86_64::*;
    // SAFETY: this function only runs where AVX2 and FMA are present.
    unsafe {
        match sum {
            Sum::Dot => sum_avx2_many(a, bs, |x, y, acc| _mm256_fmadd_ps(x, y, acc), dot_step),
            Sum::Sq => sum_avx2_many(a, bs, |x, y, acc| sq_wide(x, y, acc), sq_step),
        }
    }
}

/// [`sum_avx2_block`] for one kind of sum, where AVX2 and FMA are present.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
fn block_avx2<const A: usize, const B: usize>(
    sum: Sum,
    a: [&[f32]; A],
    b: [&[f32]; B],
) -> [[f32; B]; A] {
    use std::arch::x86_64::*;
    // SAFETY: this function only runs where AVX2 and FMA are present.
    unsafe {
        match sum {
            Sum::Dot => sum_avx2_block(a, b, |x, y, acc| _mm256_fmadd_ps(x, y, acc), dot_step),
            Sum::Sq => sum_avx2_block(a, b, |x, y, acc| sq_wide(x, y, acc), sq_step),
        }
    }
}

/// [`sq_step`] on eight lanes.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
#[inline]
fn sq_wide(
    x: std::arch::x86_64::__m256,
    y: std::arch::x86_64::__m256,
    acc: std::arch::x86_64::__m256,
) -> std::arch::x86_64::__m256 {
    use std::arch::x86_64::*;
    let t = _mm256_sub_ps(x, y);
    _mm256_fmadd_ps(t, t, acc)
}

/// Whether the wide path can run here.
#[cfg(target_arch = "x86_64")]
#[inline]
fn wide() -> bool {
    std::arch::is_x86_feature_detected!("avx2") && std::arch::is_x86_feature_detected!("fma")
}

/// `sum` from `a` to each of `bs`, on the wide path where the processor has it.
#[inline]
fn many<const M: usize>(sum: Sum, a: &[f32], bs: [&[f32]; M]) -> [f32; M] {
    #[cfg(target_arch = "x86_64")]
    if wide() {
        // SAFETY: the CPU has just been checked for AVX2 and FMA.
        return unsafe { many_avx2(sum, a, bs) };
    }
    bs.map(|b| sum.any(a, b))
}

/// `sum` for every row of `a` with every row of `b`, on the wide path where the processor has it.
#[inline]
fn block<const A: usize, const B: usize>(
    sum: Sum,
    a: [&[f32]; A],
    b: [&[f32]; B],
) -> [[f32; B]; A] {
    #[cfg(target_arch = "x86_64")]
    if wide() {
        // SAFETY: the CPU has just been checked for AVX2 and FMA.
        return unsafe { block_avx2(sum, a, b) };
    }
    a.map(|x| b.map(|y| sum.any(x, y)))
}

/// Squared Euclidean distance.
#[inline]
pub fn sq_dist(a: &[f32], b: &[f32]) -> f32 {
    many(Sum::Sq, a, [b])[0]
}

/// Dot product.
#[inline]
pub fn dot(a: &[f32], b: &[f32]) -> f32 {
    many(Sum::Dot, a, [b])[0]
}

/// Squared Euclidean distances from `a` to each of `bs`: the bits of [`sq_dist`] for each pair,
/// faster than one call per pair.
#[inline]
pub fn sq_dist_many<const M: usize>(a: &[f32], bs: [&[f32]; M]) -> [f32; M] {
    many(Sum::Sq, a, bs)
}

/// Dot products of `a` with each of `bs`: the bits of [`dot`] for each pair.
#[inline]
pub fn dot_many<const M: usize>(a: &[f32], bs: [&[f32]; M]) -> [f32; M] {
    many(Sum::Dot, a, bs)
}

/// Squared Euclidean distances of every row of `a` to every row of `b`: the bits of [`sq_dist`]
/// for each pair.
#[inline]
pub fn sq_dist_block<const A: usize, const B: usize>(
    a: [&[f32]; A],
    b: [&[f32]; B],
) -> [[f32; B]; A] {
    block(Sum::Sq, a, b)
}

/// Dot products of every row of `a` with every row of `b`: the bits of [`dot`] for each pair.
#[inline]
pub fn dot_block<const A: usize, const B: usize>(a: [&[f32]; A], b: [&[f32]; B]) -> [[f32; B]; A] {
    block(Sum::Dot, a, b)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rows(len: usize) -> (Vec<f32>, Vec<f32>) {
        let mut rng = crate::rng::Rng::new(len as u64);
        let a = (0..len).map(|_| rng.uniform() as f32 - 0.5).collect();
        let b = (0..len).map(|_| rng.uniform() as f32 - 0.5).collect();
        (a, b)
    }

    #[test]
    fn kernels_agree_with_double_precision_sums() {
        for len in [1, 7, 31, 32, 33, 64, 100, 256, 300] {
            let (a, b) = rows(len);
            let d2: f64 = a
                .iter()
                .zip(&b)
                .map(|(&x, &y)| (x as f64 - y as f64).powi(2))
                .sum();
            let dp: f64 = a.iter().zip(&b).map(|(&x, &y)| x as f64 * y as f64).sum();
            assert!(
                (sq_dist(&a, &b) as f64 - d2).abs() <= 1e-5 * d2.max(1.0),
                "len {len}"
            );
            assert!(
                (dot(&a, &b) as f64 - dp).abs() <= 1e-5 * dp.abs().max(1.0),
                "len {len}"
            );
        }
    }

    #[test]
    fn wide_and_baseline_paths_give_the_same_bits() {
        for len in [5, 32, 64, 128, 256, 257] {
            let (a, b) = rows(len);
            assert_eq!(sq_dist(&a, &b).to_bits(), sq_dist_any(&a, &b).to_bits());
            #[cfg(target_arch = "x86_64")]
            if wide() {
                // SAFETY: checked just above.
                let w = unsafe { many_avx2(Sum::Sq, &a, [&b]) }[0];
                assert_eq!(w.to_bits(), sq_dist_any(&a, &b).to_bits());
                let w = unsafe { many_avx2(Sum::Dot, &a, [&b]) }[0];
                assert_eq!(w.to_bits(), dot_any(&a, &b).to_bits());
            }
            assert_eq!(dot(&a, &b).to_bits(), dot_any(&a, &b).to_bits());
            // Several pairs at once: each the bits of its own pair.
            let (c, _) = rows(len + 1000);
            let c = &c[..len];
            let d: Vec<f32> = b.iter().map(|x| x * 0.5 - 0.1).collect();
            let e: Vec<f32> = a.iter().map(|x| 0.25 - x * 0.75).collect();
            let (xs, ys) = ([&a[..], &e[..], c], [&b[..], &d[..], &e[..]]);
            let check = |many: [f32; 3], sq: [f32; 3], dots: [[f32; 3]; 3], sqs: [[f32; 3]; 3]| {
                for (m, r) in ys.iter().enumerate() {
                    assert_eq!(many[m].to_bits(), dot_any(&a, r).to_bits(), "{len}");
                    assert_eq!(sq[m].to_bits(), sq_dist_any(&a, r).to_bits(), "{len}");
                }
                // Blocks of rows against blocks of rows: each pair's bits.
                for (x, rx) in xs.iter().enumerate() {
                    for (y, ry) in ys.iter().enumerate() {
                        assert_eq!(dots[x][y].to_bits(), dot_any(rx, ry).to_bits(), "{len}");
                        assert_eq!(sqs[x][y].to_bits(), sq_dist_any(rx, ry).to_bits(), "{len}");
                    }
                }
            };
            // Several pairs at once, through the public entry points and through the wide path
            // itself where the processor has it.
            check(
                dot_many(&a, ys),
                sq_dist_many(&a, ys),
                dot_block(xs, ys),
                sq_dist_block(xs, ys),
            );
            #[cfg(target_arch = "x86_64")]
            if wide() {
                // SAFETY: checked just above.
                unsafe {
                    check(
                        many_avx2(Sum::Dot, &a, ys),
                        many_avx2(Sum::Sq, &a, ys),
                        block_avx2(Sum::Dot, xs, ys),
                        block_avx2(Sum::Sq, xs, ys),
                    )
                };
            }
            // Symmetric to the bit: the graph never depends on which end of a pair came first.
            assert_eq!(sq_dist(&a, &b).to_bits(), sq_dist(&b, &a).to_bits());
        }
    }
}
