//! Growing a corpus from examples with `vitrine corpus`: the model's scores against
//! scikit-learn's `LogisticRegression` (same C, the same compressed vectors read from the atlas by
//! NumPy) on scikit-learn's bundled digits dataset (UCI optical digits, 1797 x 64), and a corpus
//! file's rounds replayed to the same scores and items.

mod common;

use common::{corpus_fails, corpus_notes};

#[test]
fn grown_scores_rank_as_scikit_learn_s_logistic_regression_and_replay_from_the_corpus_file() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    common::run_python(
        r#"
import sys, numpy as np
from sklearn.datasets import load_digits
dg = load_digits()
np.save(f"{sys.argv[1]}/digits.npy", dg.data.astype(np.float32))
with open(f"{sys.argv[1]}/records.csv", "w") as f:
    f.write("id,digit\n")
    for i, y in enumerate(dg.target):
        f.write(f"d{i:04d},{y}\n")
"#,
        &[d],
    );
    common::build_atlas(
        d,
        &["--vectors", "digits.npy", "--catalogue", "records.csv"],
    );
    // Thirty threes "like these", sixty other digits "not these" (the first of each in the file).
    let records = std::fs::read_to_string(d.join("records.csv")).unwrap();
    let rows: Vec<(String, String)> = records
        .lines()
        .skip(1)
        .map(|l| {
            let (a, b) = l.split_once(',').unwrap();
            (a.to_string(), b.to_string())
        })
        .collect();
    let like: Vec<&str> = rows
        .iter()
        .filter(|r| r.1 == "3")
        .take(30)
        .map(|r| r.0.as_str())
        .collect();
    let not: Vec<&str> = rows
        .iter()
        .filter(|r| r.1 != "3")
        .take(60)
        .map(|r| r.0.as_str())
        .collect();
    let (like, not) = (like.join(","), not.join(","));
    let notes = corpus_notes(
        d,
        &[
            "--like",
            &like,
            "--not",
            &not,
            "--grow-background",
            "0",
            "--grow-c",
            "0.5",
            "--accept-top",
            "20",
            "--scores",
            "scores.csv",
            "--json",
            "grown.json",
        ],
    );
    assert!(
        notes.contains("accepted the 20 best candidates of round 1"),
        "{notes}"
    );
    let out = common::run_python(
        r#"
import sys, json, csv, numpy as np
from scipy.stats import spearmanr
from sklearn.linear_model import LogisticRegression
d = sys.argv[1]
m = json.load(open(f"{d}/atlas/atlas.json"))
v = m["vectors"]
n, k = m["item_count"], v["dims"]
q = np.concatenate([np.fromfile(f"{d}/atlas/{c['file']}", dtype=np.uint8) for c in v["chunks"]])
X = np.array(v["offset"], np.float64) + np.array(v["scale"], np.float64) * q.reshape(n, k)
offs = np.fromfile(f"{d}/atlas/{m['ids']['file']}", dtype="<u4")
text = open(f"{d}/atlas/{m['ids_text']['file']}", "rb").read()
ids = [text[offs[i]:offs[i + 1]].decode() for i in range(n)]
at = {x: i for i, x in enumerate(ids)}
g = json.load(open(f"{d}/grown.json"))
r = g["grow"][0]
rows = [at[x] for x in r["like"]] + [at[x] for x in r["not"]]
y = [1] * len(r["like"]) + [0] * len(r["not"])
model = LogisticRegression(C=r["c"], tol=1e-12, max_iter=100000).fit(X[rows], y)
theirs = model.decision_function(X)
ours = np.zeros(n)
for row in csv.DictReader(open(f"{d}/scores.csv")):
    ours[at[row["id"]]] = float(row["score"])
digit = {row["id"]: row["digit"] for row in csv.DictReader(open(f"{d}/records.csv"))}
marked = set(rows)
order = [i for i in np.argsort(-theirs, kind="stable") if i not in marked]
print(json.dumps({
    "spearman": float(spearmanr(ours, theirs).statistic),
    "max_abs": float(np.max(np.abs(ours - theirs))),
    "accepted": r["accepted"],
    "top20_sklearn": [ids[i] for i in order[:20]],
    "threes_in_top100": sum(digit[ids[i]] == "3" for i in order[:100]),
    "ids_in_corpus": g["ids"],
}))
"#,
        &[d],
    );
    let r: serde_json::Value = serde_json::from_str(out.trim()).unwrap();
    // The same ranking (Spearman >= 0.99 asked; 1.0 measured) and the same scores (largest
    // difference 1e-6 measured: both solve the same convex problem to its optimum).
    assert!(r["spearman"].as_f64().unwrap() >= 0.99, "{r}");
    assert!(r["max_abs"].as_f64().unwrap() < 1e-4, "{r}");
    // The accepted candidates are scikit-learn's best twenty unmarked items, and the corpus.
    let set = |v: &serde_json::Value| {
        let mut s: Vec<String> = v
            .as_array()
            .unwrap()
            .iter()
            .map(|x| x.as_str().unwrap().to_string())
            .collect();
        s.sort();
        s
    };
    assert_eq!(set(&r["accepted"]), set(&r["top20_sklearn"]), "{r}");
    assert_eq!(set(&r["ids_in_corpus"]), set(&r["accepted"]));
    assert!(r["threes_in_top100"].as_u64().unwrap() >= 90, "{r}");

    // The corpus file replays: the same scores byte for byte, the same items.
    corpus_notes(
        d,
        &[
            "--from",
            "grown.json",
            "--scores",
            "again.csv",
            "--json",
            "again.json",
        ],
    );
    assert_eq!(
        std::fs::read(d.join("scores.csv")).unwrap(),
        std::fs::read(d.join("again.csv")).unwrap()
    );
    let ids = |p: &str| {
        let v: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(d.join(p)).unwrap()).unwrap();
        v["ids"].clone()
    };
    assert_eq!(ids("grown.json"), ids("again.json"));

    // The next round keeps every mark so far and the last round's settings.
    let first = r["accepted"][0].as_str().unwrap().to_string();
    corpus_notes(
        d,
        &["--from", "grown.json", "--not", &first, "--json", "r2.json"],
    );
    let r2: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("r2.json")).unwrap()).unwrap();
    let (one, two) = (&r2["grow"][0], &r2["grow"][1]);
    assert_eq!(two["like"], one["like"]);
    assert_eq!(two["not"].as_array().unwrap().len(), 61);
    assert_eq!(two["not"][60], first.as_str());
    assert_eq!(
        (two["c"].as_f64(), two["background"].as_u64()),
        (Some(0.5), Some(0))
    );

    // A few examples against drawn background items (seeded): the same draw on replay.
    corpus_notes(
        d,
        &[
            "--like",
            "d0003,d0013",
            "--scores",
            "bg.csv",
            "--json",
            "bg.json",
        ],
    );
    corpus_notes(d, &["--from", "bg.json", "--scores", "bg2.csv"]);
    assert_eq!(
        std::fs::read(d.join("bg.csv")).unwrap(),
        std::fs::read(d.join("bg2.csv")).unwrap()
    );
    let bg = std::fs::read_to_string(d.join("bg.csv")).unwrap();
    assert_eq!(bg.matches(",background\n").count(), 200);

    // Bad input is named.
    let e = corpus_fails(d, &["--like", "d0003,nowhere", "--scores", "x.csv"]);
    assert!(
        e.contains("like these: the atlas has no item nowhere"),
        "{e}"
    );
    let e = corpus_fails(d, &["--scores", "x.csv"]);
    assert!(e.contains("there is no round of growing"), "{e}");
    let e = corpus_fails(
        d,
        &[
            "--like",
            "d0003",
            "--grow-background",
            "0",
            "--scores",
            "x.csv",
        ],
    );
    assert!(e.contains("not these"), "{e}");
    let e = corpus_fails(
        d,
        &["--like", "d0003", "--not", "d0003", "--scores", "x.csv"],
    );
    assert!(e.contains("--like and --not both name d0003"), "{e}");
    let e = corpus_fails(
        d,
        &[
            "--like",
            "d0003",
            "--grow-background",
            "20000",
            "--scores",
            "x.csv",
        ],
    );
    assert!(e.contains("at most 10000"), "{e}");
}
