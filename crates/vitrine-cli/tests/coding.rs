//! `vitrine corpus` coding a corpus: a codebook, two coders' spreadsheets read in, their corpus
//! files merged, disagreements settled. The agreement table is checked against outside
//! references computed from the long code table the command writes: scikit-learn's
//! `cohen_kappa_score` and the `krippendorff` package's `alpha` (nominal and interval).

mod common;

use common::{corpus as run, failure_of as err, notes_of as ok};

use std::path::Path;

use vitrine_map::rng::Rng;

const BOOK: &str = r#"{"variables": [
  {"name": "framing", "kind": "one", "description": "how the main figure is framed", "values": [
    {"value": "full length", "key": 1}, {"value": "half length", "key": 2},
    {"value": "head only", "key": 3}, {"value": "cannot tell", "key": 9}]},
  {"name": "motifs", "kind": "several", "values": [{"value": "tree"}, {"value": "river"}, {"value": "tower"}]},
  {"name": "signed", "kind": "yes-no"},
  {"name": "figures", "kind": "number"},
  {"name": "remarks", "kind": "note"}]}"#;

const FRAMINGS: [&str; 4] = ["full length", "half length", "head only", "cannot tell"];

/// One coder's spreadsheet of `items`: random codes, a share of them copied from `like` (the
/// other coder's cells) so that the coders mostly agree.
fn sheet(
    rng: &mut Rng,
    items: std::ops::Range<usize>,
    like: Option<&[Vec<String>]>,
) -> Vec<Vec<String>> {
    items
        .map(|i| {
            let mut row = vec![
                format!("it-{i:02}"),
                FRAMINGS[rng.below(4) as usize].to_string(),
                ["tree", "river; tower", "tree; river", "-", ""][rng.below(5) as usize].to_string(),
                ["yes", "no", ""][rng.below(3) as usize].to_string(),
                format!("{}", rng.below(5)),
                if i % 6 == 0 {
                    "=faded, re-mounted".into()
                } else {
                    String::new()
                },
            ];
            if let Some(other) = like.and_then(|l| l.iter().find(|r| r[0] == row[0])) {
                for c in 1..5 {
                    if rng.below(10) < 7 {
                        row[c] = other[c].clone();
                    }
                }
            }
            row
        })
        .collect()
}

fn write_sheet(p: &Path, rows: &[Vec<String>]) {
    let mut text = String::from("id,framing,motifs,signed,figures,remarks\n");
    for r in rows {
        let q: Vec<String> = r
            .iter()
            .map(|c| {
                if c.contains([',', '"']) {
                    format!("\"{}\"", c.replace('"', "\"\""))
                } else {
                    c.clone()
                }
            })
            .collect();
        text.push_str(&q.join(","));
        text.push('\n');
    }
    std::fs::write(p, text).unwrap();
}

#[test]
fn two_coders_code_merge_and_settle_and_the_agreement_equals_the_reference_packages() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let ids: Vec<String> = (0..40).map(|i| format!("it-{i:02}")).collect();
    common::write_small_inputs(d, &ids);
    common::small_build(d);
    std::fs::write(d.join("book.json"), BOOK).unwrap();

    // Two coders, overlapping on items 10..30.
    let mut rng = Rng::new(21);
    let ana = sheet(&mut rng, 0..30, None);
    let ben = sheet(&mut rng, 10..40, Some(&ana));
    write_sheet(&d.join("ana.csv"), &ana);
    write_sheet(&d.join("ben.csv"), &ben);
    let notes = ok(&run(
        d,
        &[
            "--codebook",
            "book.json",
            "--codes",
            "ana.csv",
            "--coder",
            "ana",
            "--json",
            "ana.corpus.json",
        ],
    ));
    assert!(notes.contains("ana.csv: "), "{notes}");
    ok(&run(
        d,
        &[
            "--codebook",
            "book.json",
            "--codes",
            "ben.csv",
            "--coder",
            "ben",
            "--json",
            "ben.corpus.json",
        ],
    ));
    let notes = ok(&run(
        d,
        &[
            "--from",
            "ana.corpus.json",
            "--merge",
            "ben.corpus.json",
            "--json",
            "both.corpus.json",
            "--agreement",
            "agreement.csv",
            "--disagreements",
            "disagreements.csv",
            "--codes-table",
            "codes.csv",
            "--csv",
            "rows.csv",
        ],
    ));
    assert!(notes.contains("merged ben.corpus.json"), "{notes}");

    // The reference packages on the long table: each variable pivoted to items x coders.
    let script = r#"
import csv, sys, json
import numpy as np
import krippendorff
from sklearn.metrics import cohen_kappa_score
codes = list(csv.DictReader(open(sys.argv[1], newline="")))
book = json.load(open(sys.argv[2]))
rows = {(r["variable"], r["value"]): r for r in csv.DictReader(open(sys.argv[3], newline=""))}
items = sorted({c["id"] for c in codes})
coders = ["ana", "ben"]
def check(name, value, read, interval):
    m = np.full((2, len(items)), np.nan)
    for c in codes:
        if c["variable"] == name and c["settled"] == "no":
            m[coders.index(c["coder"]), items.index(c["id"])] = read(c["value"])
    row = rows[(name, value)]
    both = ~np.isnan(m).any(axis=0)
    assert int(row["items_compared"]) == both.sum(), (name, row)
    k = cohen_kappa_score(m[0, both], m[1, both])
    assert abs(float(row["cohen_kappa"]) - k) < 1e-9, (name, value, row["cohen_kappa"], k)
    a = krippendorff.alpha(reliability_data=m, level_of_measurement="nominal")
    assert abs(float(row["alpha_nominal"]) - a) < 1e-9, (name, value, row["alpha_nominal"], a)
    if interval:
        a = krippendorff.alpha(reliability_data=m, level_of_measurement="interval")
        assert abs(float(row["alpha_interval"]) - a) < 1e-9, (name, row["alpha_interval"], a)
    pa = (m[0, both] == m[1, both]).mean()
    assert abs(float(row["percent_agreement"]) - pa) < 1e-12
    print(name, value, k)
for v in book["variables"]:
    vals = [x["value"] for x in v.get("values", [])]
    if v["kind"] == "one":
        check(v["name"], "", lambda s: vals.index(s), False)
    elif v["kind"] == "yes-no":
        check(v["name"], "", lambda s: 1.0 if s == "yes" else 0.0, False)
    elif v["kind"] == "number":
        check(v["name"], "", float, True)
    elif v["kind"] == "several":
        for x in vals:
            check(v["name"], x, lambda s, x=x: 1.0 if x in [t.strip() for t in s.split(";")] else 0.0, False)
assert ("remarks", "") not in rows
"#;
    let out = vitrine_test_support::run_python(
        script,
        &[
            &d.join("codes.csv"),
            &d.join("book.json"),
            &d.join("agreement.csv"),
        ],
    );
    assert_eq!(out.lines().count(), 6, "{out}");

    // The catalogue rows carry one column per variable and, as two people coded, one per coder.
    let rows = std::fs::read_to_string(d.join("rows.csv")).unwrap();
    let head = rows.lines().next().unwrap();
    assert!(
        head.starts_with("id,framing,framing [ana],framing [ben],motifs,"),
        "{head}"
    );
    // Notes beginning with '=' are defused for spreadsheets.
    assert!(rows.contains("'=faded, re-mounted"), "{rows}");

    // Settle every framing disagreement as "cannot tell": the originals stay, the value changes.
    let dis = std::fs::read_to_string(d.join("disagreements.csv")).unwrap();
    let framing: Vec<&str> = dis
        .lines()
        .skip(1)
        .filter(|l| l.split(',').nth(1) == Some("framing"))
        .map(|l| l.split(',').next().unwrap())
        .collect();
    assert!(!framing.is_empty(), "{dis}");
    let settle: String = framing
        .iter()
        .map(|i| format!("{i},cannot tell\n"))
        .collect();
    std::fs::write(d.join("settle.csv"), format!("id,framing\n{settle}")).unwrap();
    ok(&run(
        d,
        &[
            "--from",
            "both.corpus.json",
            "--settle",
            "settle.csv",
            "--coder",
            "cy",
            "--json",
            "settled.corpus.json",
            "--csv",
            "settled.csv",
            "--csv-exact",
            "--agreement",
            "agreement2.csv",
        ],
    ));
    let settled = std::fs::read_to_string(d.join("settled.csv")).unwrap();
    for line in settled
        .lines()
        .filter(|l| framing.iter().any(|i| l.starts_with(&format!("{i},"))))
    {
        let cells: Vec<&str> = line.split(',').collect();
        assert_eq!(cells[1], "cannot tell", "{line}");
        assert_ne!(cells[2], cells[3], "{line}");
    }
    // Settled values are not a coder's: the agreement stays as it was.
    assert_eq!(
        std::fs::read_to_string(d.join("agreement.csv")).unwrap(),
        std::fs::read_to_string(d.join("agreement2.csv")).unwrap()
    );
    let file: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("settled.corpus.json")).unwrap())
            .unwrap();
    assert_eq!(file["format_version"], 2);
    let codes = file["codes"].as_array().unwrap();
    assert_eq!(
        codes.iter().filter(|c| c["settled"] == true).count(),
        framing.len()
    );
}

#[test]
fn codes_that_do_not_fit_are_named_and_nothing_is_dropped() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let ids: Vec<String> = (0..12).map(|i| format!("it-{i:02}")).collect();
    common::write_small_inputs(d, &ids);
    common::small_build(d);
    std::fs::write(d.join("book.json"), BOOK).unwrap();

    // A value the codebook lacks: the file, row, column and the values it has are named.
    std::fs::write(
        d.join("bad.csv"),
        "id,framing\nit-01,full length\nit-02,kneeling\n",
    )
    .unwrap();
    let e = err(&run(
        d,
        &[
            "--codebook",
            "book.json",
            "--codes",
            "bad.csv",
            "--coder",
            "ana",
            "--json",
            "x.json",
        ],
    ));
    assert!(
        e.contains("bad.csv: row 3, column \"framing\" (item \"it-02\")"),
        "{e}"
    );
    assert!(
        e.contains("full length, half length, head only, cannot tell"),
        "{e}"
    );
    assert!(!d.join("x.json").exists());
    // Codes need a coder, and a codebook.
    let e = err(&run(
        d,
        &[
            "--codebook",
            "book.json",
            "--codes",
            "bad.csv",
            "--json",
            "x.json",
        ],
    ));
    assert!(e.contains("--coder"), "{e}");
    let e = err(&run(d, &["--codes", "bad.csv", "--coder", "ana"]));
    assert!(e.contains("no codebook"), "{e}");

    // Rows of items this atlas lacks are listed, the rest read.
    std::fs::write(
        d.join("ana.csv"),
        "id,framing,title\nit-01,full length,x\nit-02,head only,y\nzz-9,half length,z\n",
    )
    .unwrap();
    let notes = ok(&run(
        d,
        &[
            "--codebook",
            "book.json",
            "--codes",
            "ana.csv",
            "--coder",
            "ana",
            "--json",
            "ana.json",
        ],
    ));
    assert!(
        notes.contains("1 rows name items that are not in this atlas")
            && notes.contains("\"zz-9\""),
        "{notes}"
    );
    assert!(notes.contains("passed over: title"), "{notes}");

    // An export whose catalogue has a field named as a variable: its "framing" column is the
    // catalogue's and is passed over; "framing (code)" holds the codes. A defused cell reads back.
    std::fs::write(
        d.join("export.csv"),
        "id,framing,framing (code),motifs\nit-03,some catalogue text,half length,'-\n",
    )
    .unwrap();
    let notes = ok(&run(
        d,
        &[
            "--from",
            "ana.json",
            "--codes",
            "export.csv",
            "--coder",
            "cy",
            "--codes-table",
            "t.csv",
        ],
    ));
    assert!(notes.contains("passed over: framing"), "{notes}");
    let t = std::fs::read_to_string(d.join("t.csv")).unwrap();
    assert!(
        t.contains("it-03,framing,half length,cy,") && t.contains("it-03,motifs,'-,cy,"),
        "{t}"
    );

    // The codebook changes: "head only" renamed "head". The codes are not dropped: refused and
    // named until they are recoded.
    let renamed = BOOK.replace("\"head only\"", "\"head\"");
    std::fs::write(d.join("book2.json"), &renamed).unwrap();
    let e = err(&run(
        d,
        &[
            "--from",
            "ana.json",
            "--codebook",
            "book2.json",
            "--json",
            "y.json",
        ],
    ));
    assert!(
        e.contains("1 code does not fit") && e.contains("\"head only\"") && e.contains("--recode"),
        "{e}"
    );
    assert!(!d.join("y.json").exists());
    let notes = ok(&run(
        d,
        &[
            "--from",
            "ana.json",
            "--codebook",
            "book2.json",
            "--recode",
            "framing:head only=head",
            "--json",
            "y.json",
        ],
    ));
    assert!(
        notes.contains("1 codes of \"framing\" changed from \"head only\" to \"head\""),
        "{notes}"
    );
    let y = std::fs::read_to_string(d.join("y.json")).unwrap();
    assert!(y.contains("\"head\"") && !y.contains("head only"), "{y}");

    // Merging files whose codebooks differ in a shared variable's values is refused, both named.
    let e = err(&run(
        d,
        &[
            "--from", "ana.json", "--merge", "y.json", "--json", "z.json",
        ],
    ));
    assert!(
        e.contains("y.json")
            && e.contains("only the first has \"head only\"")
            && e.contains("only the second has \"head\""),
        "{e}"
    );

    // A corpus file coded on another atlas: the codes of ids this one lacks are kept and listed.
    let mut other: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("ana.json")).unwrap()).unwrap();
    other["atlas"]["manifest_sha256"] = "00ff".into();
    other["codes"][0]["item"] = "elsewhere-1".into();
    std::fs::write(d.join("other.json"), other.to_string()).unwrap();
    let notes = ok(&run(
        d,
        &[
            "--from",
            "other.json",
            "--json",
            "w.json",
            "--agreement",
            "a.csv",
        ],
    ));
    assert!(notes.contains("made on another atlas"), "{notes}");
    assert!(
        notes.contains("codes of 1 items that are not in this atlas are kept")
            && notes.contains("\"elsewhere-1\""),
        "{notes}"
    );
    let w = std::fs::read_to_string(d.join("w.json")).unwrap();
    assert!(w.contains("elsewhere-1"), "the code is kept: {w}");

    // A code its coder cleared later does not come back from her older file, whichever file is
    // merged into which; a code she set again after clearing it stays.
    let ana: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("ana.json")).unwrap()).unwrap();
    let first = ana["codes"][0].clone();
    let mut later = ana.clone();
    let codes = later["codes"].as_array_mut().unwrap();
    let n = codes.len();
    codes.remove(0);
    later["cleared"] = serde_json::json!([{
        "item": first["item"], "variable": first["variable"], "coder": first["coder"],
        "time": "2099-01-01T00:00:00Z"}]);
    std::fs::write(d.join("later.json"), later.to_string()).unwrap();
    for (from, merge) in [("later.json", "ana.json"), ("ana.json", "later.json")] {
        let notes = ok(&run(
            d,
            &[
                "--from", from, "--merge", merge, "--json", "c.json", "--force",
            ],
        ));
        assert!(
            notes.contains("1 codes left out: their coder cleared them later"),
            "{from} + {merge}: {notes}"
        );
        let c: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(d.join("c.json")).unwrap()).unwrap();
        assert_eq!(c["codes"].as_array().unwrap().len(), n - 1);
        assert!(!c["codes"].as_array().unwrap().contains(&first));
        assert_eq!(
            c["cleared"][0]["item"], first["item"],
            "the clearing is carried on"
        );
    }
    let mut again = ana.clone();
    again["codes"][0]["time"] = "2099-06-01T00:00:00Z".into();
    std::fs::write(d.join("again.json"), again.to_string()).unwrap();
    ok(&run(
        d,
        &[
            "--from",
            "later.json",
            "--merge",
            "again.json",
            "--json",
            "c.json",
            "--force",
        ],
    ));
    let c: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("c.json")).unwrap()).unwrap();
    assert_eq!(c["codes"].as_array().unwrap().len(), n);
    assert!(c.get("cleared").is_none(), "{c}");
}
