//! The statistics of time profiles and comparisons against outside references: Wilson intervals
//! equal statsmodels' `proportion_confint(method="wilson")`, the chi-square test equals scipy's
//! `chi2_contingency` (statistic, degrees of freedom, p-value; Yates' correction on 2 x 2 tables as
//! scipy applies it by default), on seeded random counts, weighted counts and small tables.

use vitrine_corpus::stats::{chi_square, wilson, Z95};

#[test]
fn wilson_and_chi_square_equal_statsmodels_and_scipy() {
    let mut s = 0x5eed_u64;
    let mut next = move || {
        s = s
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (s >> 33) as f64 / (1u64 << 31) as f64
    };
    // Shares: whole and weighted counts, from none to all.
    let mut shares: Vec<(f64, f64)> = vec![(0.0, 10.0), (10.0, 10.0), (1.0, 3.0), (0.5, 1.0)];
    for _ in 0..30 {
        let n = (next() * 2000.0).floor() + 1.0;
        let k = (next() * n * 4.0).floor() / 4.0;
        shares.push((k.min(n), n));
    }
    // Tables: 2 x 2 (corrected), 2 x 5, 4 x 3, with small and large counts, some weighted.
    let mut tables: Vec<Vec<Vec<f64>>> = vec![
        vec![vec![12.0, 5.0], vec![3.0, 9.0]],
        vec![vec![1.0, 2.0], vec![3.0, 0.0]],
        vec![vec![100.0, 100.0], vec![100.0, 100.0]],
    ];
    for (rows, cols, scale) in [
        (2, 2, 50.0),
        (2, 5, 8.0),
        (4, 3, 300.0),
        (3, 6, 2.5),
        (2, 2, 3.0),
    ] {
        for _ in 0..4 {
            tables.push(
                (0..rows)
                    .map(|_| {
                        (0..cols)
                            .map(|_| (next() * scale * 2.0).floor() / 2.0 + 1.0)
                            .collect()
                    })
                    .collect(),
            );
        }
    }
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("cases.json");
    std::fs::write(
        &path,
        serde_json::json!({"shares": shares, "tables": tables}).to_string(),
    )
    .unwrap();
    let script = r#"
import json, sys
from statsmodels.stats.proportion import proportion_confint
from scipy.stats import chi2_contingency
c = json.load(open(sys.argv[1]))
out = {"shares": [list(proportion_confint(k, n, alpha=0.05, method="wilson")) for k, n in c["shares"]],
       "tables": []}
for t in c["tables"]:
    r = chi2_contingency(t)
    out["tables"].append([float(r[0]), int(r[2]), float(r[1]), float(r[3].min())])
print(json.dumps(out))
"#;
    let got: serde_json::Value =
        serde_json::from_str(&vitrine_test_support::run_python(script, &[&path])).unwrap();
    for ((k, n), want) in shares.iter().zip(got["shares"].as_array().unwrap()) {
        let (lo, hi) = wilson(*k, *n, Z95).unwrap();
        let (wl, wh) = (want[0].as_f64().unwrap(), want[1].as_f64().unwrap());
        assert!(
            (lo - wl).abs() < 1e-12 && (hi - wh).abs() < 1e-12,
            "{k}/{n}: {lo}..{hi} against {wl}..{wh}"
        );
    }
    for (t, want) in tables.iter().zip(got["tables"].as_array().unwrap()) {
        let c = chi_square(t, true).unwrap();
        let w: Vec<f64> = want
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap())
            .collect();
        let rel =
            |a: f64, b: f64| (a - b).abs() <= 1e-9 * b.abs().max(1e-300) || (a - b).abs() < 1e-14;
        assert!(
            rel(c.statistic, w[0]),
            "{t:?}: statistic {} against {}",
            c.statistic,
            w[0]
        );
        assert_eq!(c.dof as f64, w[1], "{t:?}");
        assert!(
            rel(c.p_value, w[2]),
            "{t:?}: p {} against {}",
            c.p_value,
            w[2]
        );
        assert!(rel(c.min_expected, w[3]), "{t:?}");
    }
}
