//! Agreement between coders against outside references: Cohen's kappa equals scikit-learn's
//! `cohen_kappa_score`, Krippendorff's alpha equals the `krippendorff` Python package's `alpha`
//! (nominal and interval, with missing codes), on seeded random codings and on edge cases (all
//! agree, none agree, one value only).

use vitrine_corpus::agreement::{cohen_kappa, krippendorff_alpha, percent_agreement, Metric};
use vitrine_map_free_rng::Rng;

mod vitrine_map_free_rng {
    /// A small seeded generator (SplitMix64), so that the test needs no other crate.
    pub struct Rng(pub u64);
    impl Rng {
        pub fn next(&mut self) -> u64 {
            self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
            let mut z = self.0;
            z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
            z ^ (z >> 31)
        }
        pub fn below(&mut self, n: u64) -> u64 {
            self.next() % n
        }
    }
}

type Codes = Vec<Vec<Option<f64>>>;

/// Coders who mostly agree with a hidden true value, each missing some items.
fn random_codes(seed: u64, coders: usize, units: usize, values: u64, missing_pct: u64) -> Codes {
    let mut r = Rng(seed);
    let truth: Vec<u64> = (0..units).map(|_| r.below(values)).collect();
    (0..coders)
        .map(|_| {
            truth
                .iter()
                .map(|&t| {
                    if r.below(100) < missing_pct {
                        None
                    } else if r.below(100) < 70 {
                        Some(t as f64)
                    } else {
                        Some(r.below(values) as f64)
                    }
                })
                .collect()
        })
        .collect()
}

#[test]
fn kappa_and_alpha_equal_scikit_learn_and_the_krippendorff_package() {
    let mut cases: Vec<Codes> = Vec::new();
    for seed in 0..12u64 {
        let coders = 2 + (seed % 4) as usize;
        let missing = if seed % 3 == 0 { 0 } else { 5 + seed * 3 };
        cases.push(random_codes(
            seed,
            coders,
            40 + 15 * seed as usize,
            2 + seed % 5,
            missing,
        ));
    }
    let (a, b) = (Some(0.0), Some(1.0));
    cases.push(vec![vec![a, b, a, b, b], vec![a, b, a, b, b]]); // all agree
    cases.push(vec![vec![a, b, a, b], vec![b, a, b, a]]); // none agree
    cases.push(vec![vec![a, a, a], vec![a, a, None], vec![None, a, a]]); // one value only
    let json = serde_json::to_string(&cases).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("codes.json");
    std::fs::write(&path, json).unwrap();
    // The outside references: scikit-learn for kappa (first two coders, items both coded) and the
    // krippendorff package for alpha; "none" where they give no number (nan, or an error for a
    // domain of one value).
    let script = r#"
import json, sys, warnings
import numpy as np, krippendorff
from sklearn.metrics import cohen_kappa_score
warnings.simplefilter("ignore")
out = []
for codes in json.load(open(sys.argv[1])):
    data = np.array([[np.nan if v is None else v for v in c] for c in codes], dtype=float)
    both = ~np.isnan(data[0]) & ~np.isnan(data[1])
    k = cohen_kappa_score(data[0][both].astype(int), data[1][both].astype(int)) if both.any() else float("nan")
    row = {"kappa": None if np.isnan(k) else float(k)}
    for level in ["nominal", "interval"]:
        try:
            a = krippendorff.alpha(reliability_data=data, level_of_measurement=level)
            row[level] = None if np.isnan(a) else float(a)
        except Exception:
            row[level] = None
    out.append(row)
print(json.dumps(out))
"#;
    let got = vitrine_test_support::run_python(script, &[&path]);
    let want: Vec<serde_json::Value> = serde_json::from_str(&got).unwrap();
    let close = |ours: Option<f64>, theirs: &serde_json::Value, what: &str, k: usize| match (
        ours,
        theirs.as_f64(),
    ) {
        (Some(x), Some(y)) => assert!((x - y).abs() < 1e-9, "case {k} {what}: {x} against {y}"),
        (None, None) => {}
        (x, _) => panic!("case {k} {what}: {x:?} against {theirs}"),
    };
    for (k, (codes, w)) in cases.iter().zip(&want).enumerate() {
        close(cohen_kappa(&codes[0], &codes[1]), &w["kappa"], "kappa", k);
        close(
            krippendorff_alpha(codes, Metric::Nominal),
            &w["nominal"],
            "nominal alpha",
            k,
        );
        close(
            krippendorff_alpha(codes, Metric::Interval),
            &w["interval"],
            "interval alpha",
            k,
        );
    }
    // The random cases were all measured (not left undefined on both sides).
    let measured = want[..12]
        .iter()
        .filter(|w| w["kappa"].is_f64() && w["nominal"].is_f64() && w["interval"].is_f64())
        .count();
    assert_eq!(measured, 12);
    // Percent agreement of the all-agree and none-agree cases.
    assert_eq!(percent_agreement(&cases[12]), Some(1.0));
    assert_eq!(percent_agreement(&cases[13]), Some(0.0));
}
