//! `vitrine corpus` measuring a corpus: time profiles (of the corpus within the collection, of a
//! category field, of a coded variable) and the comparison of two corpora, checked against
//! computations written independently in Python from the catalogue itself, with the outside
//! references for the statistics: statsmodels' `proportion_confint(method="wilson")`, scipy's
//! `chi2_contingency` and statsmodels' `Table.standardized_resids` (adjusted residuals).

mod common;

use common::{corpus_fails as fails, corpus_notes as run};

use std::path::Path;

use vitrine_map::rng::Rng;
use vitrine_test_support::write_npy_f32;

/// 400 items dated as single years, short and long ranges, or not at all; a technique that
/// changes over time, a place, a period named by the catalogue; and a coder's sheet.
fn fixture(d: &Path) {
    let mut rng = Rng::new(5);
    let n = 400;
    let data: Vec<f32> = (0..n * 4).map(|_| rng.uniform() as f32).collect();
    write_npy_f32(&d.join("vectors.npy"), n, 4, &data).unwrap();
    let mut csv = String::from("id,dating,technique,place,period\n");
    let mut sheet = String::from("id,framing,motifs\n");
    for i in 0..n {
        let a = 1480 + rng.below(200) as i32;
        let dating = match i % 5 {
            0 | 4 => format!("{a}"),
            1 => format!("{a}-{}", a + 9),
            2 => format!("{a}-{}", a + 1 + rng.below(60) as i32),
            _ => String::new(),
        };
        // Woodcuts fade as etchings rise; a few items without a technique.
        let t = if i % 37 == 0 {
            ""
        } else if rng.uniform() < (a - 1480) as f64 / 200.0 {
            "etching"
        } else if rng.uniform() < 0.7 {
            "woodcut"
        } else {
            "engraving"
        };
        let place = ["Vell", "Orrach", "Tamsey", "Quillon", "Brisk"][rng.below(5) as usize];
        let period = if a < 1550 {
            "early"
        } else if a < 1620 {
            "middle"
        } else {
            "late"
        };
        csv.push_str(&format!("pr-{i:03},{dating},{t},{place},{period}\n"));
        if i % 3 != 0 {
            let framing = ["full length", "half length", "head only"][rng.below(3) as usize];
            let motifs = ["tree", "tree; river", "-", "river"][rng.below(4) as usize];
            sheet.push_str(&format!("pr-{i:03},{framing},{motifs}\n"));
        }
    }
    std::fs::write(d.join("records.csv"), csv).unwrap();
    std::fs::write(d.join("sheet.csv"), sheet).unwrap();
    std::fs::write(
        d.join("book.json"),
        r#"{"variables": [
          {"name": "framing", "kind": "one", "values": [{"value": "full length"}, {"value": "half length"}, {"value": "head only"}]},
          {"name": "motifs", "kind": "several", "values": [{"value": "tree"}, {"value": "river"}]}]}"#,
    )
    .unwrap();
    common::small_build(d);
}

const REFERENCE: &str = r#"
import csv, sys, math
import numpy as np
from statsmodels.stats.proportion import proportion_confint
from statsmodels.stats.contingency_tables import Table
from scipy.stats import chi2_contingency

d = sys.argv[1]
rows = list(csv.DictReader(open(d + "/records.csv", newline="")))
ids = [r["id"] for r in rows]
def span(s):
    s = s.strip()
    if not s:
        return None
    a, _, b = s.partition("-")
    return int(a), int(b or a)
dates = [span(r["dating"]) for r in rows]

def profile(base, groups, width, years=None):
    dated = [i for i in base if dates[i]]
    if years:
        first, nb = years[0], (years[1] - years[0]) // width + 1
    else:
        lo = min(dates[i][0] for i in dated); hi = max(dates[i][1] for i in dated)
        first = (lo // width) * width; nb = (hi - first) // width + 1
    last = first + nb * width - 1
    def bins(items):
        c = np.zeros(nb)
        for i in items:
            if not dates[i]:
                continue
            s, e = dates[i]
            for y in range(s, e + 1):
                if first <= y <= last:
                    c[(y - first) // width] += 1 / (e - s + 1)
        return c
    def central(items):
        w = {}
        for i in items:
            if not dates[i]:
                continue
            s, e = dates[i]
            for y in range(max(s, first), min(e, last) + 1):
                w[y] = w.get(y, 0) + 1 / (e - s + 1)
        tot = sum(w.values())
        def q(p):
            cum = 0
            for y in sorted(w):
                cum += w[y]
                if cum >= p * tot * (1 - 1e-12) and w[y] > 0:
                    return y
        return q(0.1), q(0.9)
    b = bins(base)
    out = {}
    for name, items in groups.items():
        c = bins(items)
        overall = c.sum() / b.sum()
        span80 = central(items)
        for k in range(nb):
            row = {"count": c[k], "base": b[k], "central80_from": span80[0], "central80_to": span80[1]}
            if b[k] > 0:
                lo, hi = proportion_confint(c[k], b[k], alpha=0.05, method="wilson")
                share = c[k] / b[k]
                row.update(share=share, share_low=lo, share_high=hi, ratio=share / overall,
                           ratio_low=lo / overall, ratio_high=hi / overall)
            out[(first + k * width, name)] = row
    return out

def check(path, want):
    got = list(csv.DictReader(open(path, newline="")))
    assert len(got) == len(want), (path, len(got), len(want))
    for g in got:
        w = want[(int(g["from"]), g["group"])]
        for key, v in w.items():
            if isinstance(v, (int, np.integer)) and key.startswith("central"):
                assert int(g[key]) == v, (path, g, key, v)
            elif g[key] == "":
                raise AssertionError((path, g, key, v))
            else:
                assert abs(float(g[key]) - v) <= 1e-9 * max(1, abs(v)), (path, g["from"], g["group"], key, g[key], v)
        for key in ["share", "share_low", "ratio"]:
            if key not in w:
                assert g[key] == "", (path, g, key)
    print(path, len(got))

everyone = list(range(len(rows)))
wood = [i for i in everyone if rows[i]["technique"] == "woodcut"]
check(d + "/p_corpus.csv", profile(everyone, {"corpus": wood}, 25))
values = ["etching", "woodcut", "engraving"]
with_t = [i for i in everyone if rows[i]["technique"]]
check(d + "/p_field.csv", profile(with_t, {v: [i for i in with_t if rows[i]["technique"] == v] for v in sorted(values)}, 10, (1500, 1599)))
sheet = {r["id"]: r for r in csv.DictReader(open(d + "/sheet.csv", newline=""))}
coded = [i for i in everyone if ids[i] in sheet]
check(d + "/p_var.csv", profile(coded, {v: [i for i in coded if sheet[ids[i]]["framing"] == v] for v in ["full length", "half length", "head only"]}, 50))
check(d + "/p_motifs.csv", profile(coded, {v: [i for i in coded if v in [t.strip() for t in sheet[ids[i]]["motifs"].split(";")]] for v in ["tree", "river"]}, 25))

# The comparison: woodcuts against etchings, by place.
etch = [i for i in everyone if rows[i]["technique"] == "etching"]
got = [r for r in csv.DictReader(open(d + "/cmp.csv", newline="")) if r["field"] == "place"]
places = sorted({rows[i]["place"] for i in wood + etch})
table = np.array([[sum(rows[i]["place"] == p for i in g) for p in places] for g in (wood, etch)], dtype=float)
stat, p, dof, expected = chi2_contingency(table, correction=True)
resid = Table(table).standardized_resids
assert len(got) == len(places)
for r in got:
    j = places.index(r["value"])
    assert float(r["wood_count"]) == table[0, j] and float(r["etch_count"]) == table[1, j]
    assert abs(float(r["chi_square"]) - stat) < 1e-9 * stat, (r["chi_square"], stat)
    assert abs(float(r["p_value"]) - p) <= 1e-9 * p + 1e-300, (r["p_value"], p)
    assert int(float(r["dof"])) == dof
    assert abs(float(r["min_expected"]) - expected.min()) < 1e-9
    assert abs(float(r["adjusted_residual"]) - resid[0, j]) < 1e-9, (r, resid[0, j])
    share = table[0, j] / table[0].sum(), table[1, j] / table[1].sum()
    assert abs(float(r["ratio"]) - share[0] / share[1]) < 1e-12
print("comparison", stat, p)
"#;

#[test]
fn profiles_and_comparisons_equal_computations_written_apart_and_the_reference_packages() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    fixture(d);
    run(
        d,
        &[
            "--filter",
            "technique=woodcut",
            "--json",
            "wood.json",
            "--profile",
            "p_corpus.csv",
        ],
    );
    let notes = run(
        d,
        &[
            "--profile",
            "p_field.csv",
            "--profile-of",
            "technique",
            "--bin",
            "10",
            "--years",
            "1500..1599",
        ],
    );
    assert!(
        notes.contains("in no period (undated, or outside the years)"),
        "{notes}"
    );
    run(
        d,
        &[
            "--codebook",
            "book.json",
            "--codes",
            "sheet.csv",
            "--coder",
            "ana",
            "--json",
            "coded.json",
            "--profile",
            "p_var.csv",
            "--profile-of",
            "framing",
            "--bin",
            "50",
        ],
    );
    run(
        d,
        &[
            "--from",
            "coded.json",
            "--profile",
            "p_motifs.csv",
            "--profile-of",
            "variable:motifs",
        ],
    );
    run(d, &["--filter", "technique=etching", "--json", "etch.json"]);
    run(
        d,
        &[
            "--from",
            "wood.json",
            "--compare",
            "etch.json",
            "--comparison",
            "cmp.csv",
            "--compare-fields",
            "place",
            "--profile",
            "p_two.csv",
            "--profile-svg",
            "p_two.svg",
        ],
    );
    let out = vitrine_test_support::run_python(REFERENCE, &[d]);
    assert_eq!(out.lines().count(), 5, "{out}");

    // Both corpora are overlaid in one profile and one chart.
    let two = std::fs::read_to_string(d.join("p_two.csv")).unwrap();
    assert!(two.contains(",wood,") && two.contains(",etch,"), "{two}");
    let chart = std::fs::read_to_string(d.join("p_two.svg")).unwrap();
    assert!(
        chart.starts_with("<svg")
            && chart.contains(">wood</text>")
            && chart.contains(">etch</text>")
    );

    // The catalogue's own periods, in the time order of their items.
    run(
        d,
        &[
            "--profile",
            "p_periods.csv",
            "--periods",
            "period",
            "--profile-of",
            "technique",
        ],
    );
    let periods = std::fs::read_to_string(d.join("p_periods.csv")).unwrap();
    let order: Vec<&str> = periods
        .lines()
        .skip(1)
        .map(|l| l.split(',').next().unwrap())
        .take(3)
        .collect();
    assert_eq!(order, ["early", "middle", "late"]);

    // Bad requests are named.
    let e = fails(d, &["--profile", "x.csv", "--years", "1200..1299"]);
    assert!(
        e.contains("no dated item falls in the years 1200..1299"),
        "{e}"
    );
    let e = fails(d, &["--profile", "x.csv", "--profile-of", "colour"]);
    assert!(e.contains("\"colour\"") && e.contains("technique"), "{e}");
    let e = fails(d, &["--profile", "x.csv", "--periods", "dating"]);
    assert!(e.contains("category field"), "{e}");
    let e = fails(
        d,
        &[
            "--from",
            "wood.json",
            "--compare",
            "etch.json",
            "--comparison",
            "z.csv",
            "--compare-fields",
            "nosuch",
            "--profile",
            "z.csv.profile",
        ],
    );
    assert!(e.contains("no field \"nosuch\""), "{e}");
    assert!(
        !d.join("z.csv.profile").exists(),
        "nothing is written when an input is wrong"
    );
    let e = fails(d, &["--comparison", "x.csv"]);
    assert!(e.contains("--compare FILE"), "{e}");
    let notes = run(
        d,
        &["--profile", "y.csv", "--years", "1300..1549", "--bin", "50"],
    );
    assert!(
        notes.contains(
            "no item reaches 3 of the 5 periods (\"1300–1349\", \"1350–1399\", \"1400–1449\")"
        ),
        "{notes}"
    );
}
