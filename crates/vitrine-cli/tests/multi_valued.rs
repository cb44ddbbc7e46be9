//! Catalogue fields with several values per record (keywords separated by "; ", classification
//! codes by "|"): found from their values, counted and filtered value by value, exported as
//! written. The reference is pandas (from the package registry): `str.split`, `explode` and
//! `value_counts` on the same catalogue.

mod common;

use std::collections::HashMap;
use std::path::Path;

/// Writes `records.csv` (300 records: `subjects` with 0-4 of 30 invented keywords separated by
/// "; ", spacing and repeats as hand-made catalogues have them, `n/a` for unknown; `codes` with
/// classification codes separated by "|"; a single-valued `technique`) and `vectors.npy`; prints
/// pandas' counts per value as JSON.
const WRITE: &str = r#"
import json, sys
import numpy as np, pandas as pd
out = sys.argv[1]
rng = np.random.default_rng(11)
words = [f"kw{k:02d}" for k in range(30)]
codes = ["A1", "A2", "B1", "B7", "C3"]
rows = []
for i in range(300):
    n = rng.integers(0, 5)
    picked = list(rng.choice(words, size=n, replace=True, p=np.linspace(2, 1, 30) / np.linspace(2, 1, 30).sum()))
    seps = ["; ", ";", " ; "]
    s = ""
    for j, w in enumerate(picked):
        s += (seps[rng.integers(0, 3)] if j else "") + w
    if rng.random() < 0.05:
        s = "n/a"
    c = "|".join(rng.choice(codes, size=rng.integers(1, 3), replace=False))
    rows.append({"id": f"r{i:03d}", "subjects": s, "codes": c,
                 "technique": ["etching", "drawing", "woodcut"][i % 3]})
df = pd.DataFrame(rows)
df.to_csv(f"{out}/records.csv", index=False)
np.save(f"{out}/vectors.npy", rng.normal(size=(300, 8)).astype(np.float32))

def per_value(col, sep):
    parts = df[col].str.split(sep).explode().str.strip()
    parts = parts[(parts != "") & (parts != "n/a")].dropna()
    # Records holding each value (a value twice in one record counts once).
    return parts.reset_index().drop_duplicates().groupby(col).size().to_dict()

def holding(col, sep, values):
    sets = df[col].fillna("").str.split(sep).apply(lambda p: {x.strip() for x in p})
    return int(sets.apply(lambda s: bool(s & set(values))).sum())

print(json.dumps({
    "subjects": per_value("subjects", ";"),
    "codes": per_value("codes", "|"),
    "any": holding("subjects", ";", ["kw00", "kw05"]),
    "and": int((df["codes"].str.split("|").apply(lambda p: "B1" in p)
                & df["subjects"].fillna("").str.split(";").apply(lambda p: "kw00" in [x.strip() for x in p])).sum()),
    # A record with several values, written with uneven spacing: exports keep it as written.
    "listed": next((r["id"], r["subjects"]) for _, r in df.iterrows()
                   if isinstance(r["subjects"], str) and " ; " in r["subjects"]),
}))
"#;

fn count(d: &Path, args: &[&str]) -> u64 {
    let json = d.join("c.json");
    let o = common::vitrine()
        .args([
            "corpus",
            d.join("atlas").to_str().unwrap(),
            "--force",
            "--json",
        ])
        .arg(&json)
        .args(args)
        .output()
        .unwrap();
    common::notes_of(&o);
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    v["count"].as_u64().unwrap()
}

#[test]
fn keyword_fields_are_counted_and_filtered_value_by_value_as_pandas_counts_them() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let out = common::run_python(WRITE, &[d]);
    let want: serde_json::Value = serde_json::from_str(out.trim()).unwrap();
    let o = common::catalogue_build(d, "records.csv", "atlas")
        .output()
        .unwrap();
    let notes = common::notes_of(&o);
    assert!(
        notes.contains("subjects: several values per record (separated by \";\")"),
        "{notes}"
    );
    assert!(
        notes.contains("codes: several values per record (separated by \"|\")"),
        "{notes}"
    );

    let atlas = vitrine_build::read::Atlas::open(&d.join("atlas")).unwrap();
    let field = |name: &str| {
        atlas
            .manifest
            .fields
            .iter()
            .find(|f| f.name == name)
            .unwrap()
    };
    assert!(field("technique").multi.is_none(), "one value per record");
    for name in ["subjects", "codes"] {
        let f = field(name);
        assert!(f.multi.is_some(), "{name}");
        let got: HashMap<&str, u64> = f
            .values
            .iter()
            .map(String::as_str)
            .zip(f.value_counts.iter().copied())
            .collect();
        let expected: HashMap<&str, u64> = want[name]
            .as_object()
            .unwrap()
            .iter()
            .map(|(k, v)| (k.as_str(), v.as_u64().unwrap()))
            .collect();
        assert_eq!(got, expected, "{name}: records per value");
    }
    // Filters take each value: a record passes when it holds the value.
    for v in ["kw00", "kw07", "kw29"] {
        let expected = want["subjects"][v].as_u64().unwrap_or(0);
        assert_eq!(
            count(d, &["--filter", &format!("subjects={v}")]),
            expected,
            "{v}"
        );
    }
    // Two values of one field: either; two fields: both.
    assert_eq!(
        count(
            d,
            &["--filter", "subjects=kw00", "--filter", "subjects=kw05"]
        ),
        want["any"].as_u64().unwrap()
    );
    assert_eq!(
        count(d, &["--filter", "subjects=kw00", "--filter", "codes=B1"]),
        want["and"].as_u64().unwrap()
    );
    // Exports keep each record's values as catalogued.
    let (header, rows) = common::every_row(&d.join("atlas"), &d.join("all.csv"));
    let k = header.iter().position(|h| h == "subjects").unwrap();
    let (id, written) = (
        want["listed"][0].as_str().unwrap(),
        want["listed"][1].as_str().unwrap(),
    );
    let row = rows.iter().find(|x| x[0] == id).unwrap();
    assert_eq!(row[k], written);
    // The provenance says which fields were read so, and how.
    let p = &atlas.manifest.provenance.parameters["multi_valued_fields"];
    assert_eq!(p[0]["field"], "subjects", "{p}");
    assert_eq!(p[0]["separator"], ";");
    assert_eq!(p[0]["how"], "found from the values");
    // A whole list is not a value: the message says the field holds several.
    let o = common::vitrine()
        .args(["corpus", d.join("atlas").to_str().unwrap()])
        .args(["--filter", &format!("subjects={written}")])
        .output()
        .unwrap();
    let err = common::failure_of(&o);
    assert!(err.contains("holds several values per record"), "{err}");
}

#[test]
fn the_user_says_which_fields_hold_several_values() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    common::run_python(WRITE, &[d]);
    let o = common::catalogue_build(d, "records.csv", "atlas")
        .args([
            "--single-valued",
            "subjects",
            "--multi-valued",
            "technique=/",
        ])
        .output()
        .unwrap();
    let notes = common::notes_of(&o);
    assert!(!notes.contains("subjects: several values"), "{notes}");
    assert!(
        notes.contains("technique: several values per record (separated by \"/\")"),
        "{notes}"
    );
    let atlas = vitrine_build::read::Atlas::open(&d.join("atlas")).unwrap();
    let field = |name: &str| {
        atlas
            .manifest
            .fields
            .iter()
            .find(|f| f.name == name)
            .unwrap()
    };
    assert!(field("subjects").multi.is_none());
    assert!(field("technique").multi.is_some());
    // A misspelt field is refused before any work, naming the columns there are.
    let o = common::catalogue_build(d, "records.csv", "atlas2")
        .args(["--multi-valued", "subject"])
        .output()
        .unwrap();
    let err = common::failure_of(&o);
    assert!(
        err.contains("--multi-valued \"subject\": the catalogue has no such column")
            && err.contains("subjects"),
        "{err}"
    );
}
