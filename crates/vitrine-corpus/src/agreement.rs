//! Agreement between coders who coded the same items against one codebook variable: percent
//! agreement, Cohen's kappa (two coders, Cohen 1960) and Krippendorff's alpha (any number of
//! coders, missing codes allowed; nominal and interval metrics; Krippendorff, "Computing
//! Krippendorff's Alpha-Reliability", 2011), for each variable of a codebook that several people
//! coded a corpus against.
//!
//! Codes are given coder by coder: `codes[c][u]` is coder c's value for item (unit) u, None where
//! that coder gave none. Values are numbers; for the nominal metric only their equality counts
//! (a choice variable's values are coded by their index).

/// How two values differ for Krippendorff's alpha.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Metric {
    /// Equal or not (choices, yes/no).
    Nominal,
    /// The squared difference (numbers on a scale with equal steps).
    Interval,
}

/// The values of each unit that at least two coders coded (the "pairable" values).
fn pairable(codes: &[Vec<Option<f64>>]) -> Vec<Vec<f64>> {
    let units = codes.iter().map(Vec::len).max().unwrap_or(0);
    (0..units)
        .map(|u| {
            codes
                .iter()
                .filter_map(|c| c.get(u).copied().flatten())
                .filter(|v| v.is_finite())
                .collect::<Vec<f64>>()
        })
        .filter(|v| v.len() >= 2)
        .collect()
}

/// Counts of each distinct value (by bits, so -0.0 and 0.0 are one value, NaN excluded earlier).
fn counts<'a>(values: impl Iterator<Item = &'a f64>) -> Vec<(f64, f64)> {
    let mut v: Vec<f64> = values.map(|x| if *x == 0.0 { 0.0 } else { *x }).collect();
    v.sort_by(f64::total_cmp);
    let mut out: Vec<(f64, f64)> = Vec::new();
    for x in v {
        match out.last_mut() {
            Some((y, n)) if *y == x => *n += 1.0,
            _ => out.push((x, 1.0)),
        }
    }
    out
}

/// Krippendorff's alpha, or None when it is not defined (fewer than two pairable values, or every
/// pairable value the same, so that no disagreement could be expected).
///
/// From the coincidence matrix: each unit with m pairable values adds 1/(m-1) for every ordered
/// pair of its values from different coders; alpha = 1 - D_o / D_e with D_o the observed and D_e
/// the expected disagreement. The sums over value pairs are computed in closed form, so the cost
/// is linear in the codes whatever the number of distinct values.
pub fn krippendorff_alpha(codes: &[Vec<Option<f64>>], metric: Metric) -> Option<f64> {
    let units = pairable(codes);
    let n: f64 = units.iter().map(|u| u.len() as f64).sum();
    if n < 2.0 {
        return None;
    }
    // sum over ordered pairs (i != j) of delta(a_i, a_j), for a multiset of values.
    let pair_sum = |cs: &[(f64, f64)]| -> f64 {
        let m: f64 = cs.iter().map(|c| c.1).sum();
        match metric {
            Metric::Nominal => m * m - cs.iter().map(|c| c.1 * c.1).sum::<f64>(),
            Metric::Interval => {
                let s1: f64 = cs.iter().map(|c| c.0 * c.1).sum();
                let s2: f64 = cs.iter().map(|c| c.0 * c.0 * c.1).sum();
                2.0 * (m * s2 - s1 * s1)
            }
        }
    };
    let observed: f64 = units
        .iter()
        .map(|u| pair_sum(&counts(u.iter())) / (u.len() as f64 - 1.0))
        .sum::<f64>()
        / n;
    let expected = pair_sum(&counts(units.iter().flatten())) / (n * (n - 1.0));
    (expected > 0.0).then(|| 1.0 - observed / expected)
}

/// Cohen's kappa of two coders over the items both coded, or None when it is not defined (no such
/// item, or chance agreement already 1: both gave one and the same value throughout).
pub fn cohen_kappa(a: &[Option<f64>], b: &[Option<f64>]) -> Option<f64> {
    let both: Vec<(f64, f64)> = a
        .iter()
        .zip(b)
        .filter_map(|(x, y)| Some(((*x)?, (*y)?)))
        .filter(|(x, y)| x.is_finite() && y.is_finite())
        .collect();
    if both.is_empty() {
        return None;
    }
    let n = both.len() as f64;
    let observed = both.iter().filter(|(x, y)| x == y).count() as f64 / n;
    let ca = counts(both.iter().map(|p| &p.0));
    let cb = counts(both.iter().map(|p| &p.1));
    let chance: f64 = ca
        .iter()
        .map(|(v, na)| {
            let nb = cb.iter().find(|(w, _)| w == v).map_or(0.0, |c| c.1);
            na * nb
        })
        .sum::<f64>()
        / (n * n);
    (chance < 1.0).then(|| (observed - chance) / (1.0 - chance))
}

/// Percent agreement: over the items at least two coders coded, the mean share of agreeing pairs
/// of coders (for two coders: the share of items they coded alike). None without such items.
pub fn percent_agreement(codes: &[Vec<Option<f64>>]) -> Option<f64> {
    let units = pairable(codes);
    if units.is_empty() {
        return None;
    }
    let total: f64 = units
        .iter()
        .map(|u| {
            let m = u.len() as f64;
            let same: f64 = counts(u.iter()).iter().map(|c| c.1 * (c.1 - 1.0)).sum();
            same / (m * (m - 1.0))
        })
        .sum();
    Some(total / units.len() as f64)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn c(v: &[Option<f64>]) -> Vec<Option<f64>> {
        v.to_vec()
    }

    #[test]
    fn the_edges_are_what_the_definitions_give() {
        let (a, b) = (Some(1.0), Some(2.0));
        // Full agreement on two values: 1 for every measure.
        let same = [c(&[a, b, a, b]), c(&[a, b, a, b])];
        assert_eq!(krippendorff_alpha(&same, Metric::Nominal), Some(1.0));
        assert_eq!(cohen_kappa(&same[0], &same[1]), Some(1.0));
        assert_eq!(percent_agreement(&same), Some(1.0));
        // One value only: no disagreement could be expected, so alpha and kappa are undefined.
        let one = [c(&[a, a, a]), c(&[a, a, a])];
        assert_eq!(krippendorff_alpha(&one, Metric::Nominal), None);
        assert_eq!(cohen_kappa(&one[0], &one[1]), None);
        assert_eq!(percent_agreement(&one), Some(1.0));
        // Nothing coded twice: nothing to measure.
        let apart = [c(&[a, None]), c(&[None, b])];
        assert_eq!(krippendorff_alpha(&apart, Metric::Nominal), None);
        assert_eq!(percent_agreement(&apart), None);
        // Complete disagreement on two values, two units: kappa -1.
        let crossed = [c(&[a, b]), c(&[b, a])];
        assert_eq!(cohen_kappa(&crossed[0], &crossed[1]), Some(-1.0));
        assert_eq!(percent_agreement(&crossed), Some(0.0));
    }
}
