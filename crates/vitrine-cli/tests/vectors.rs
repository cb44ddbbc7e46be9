//! The vectors an atlas keeps for the browser, read back outside the project (NumPy from the atlas
//! files as docs/atlas-format.md describes them) against scikit-learn's exact PCA
//! (`svd_solver="full"`) of the unit-length vectors of its bundled digits dataset (UCI optical
//! digits, 1797 x 64).

mod common;

#[test]
fn browser_vectors_decode_to_scikit_learn_s_pca_within_the_quantisation_error() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    common::run_python(
        r#"
import sys, numpy as np
from sklearn.datasets import load_digits
np.save(f"{sys.argv[1]}/digits.npy", load_digits().data.astype(np.float32))
"#,
        &[d],
    );
    common::build_atlas(d, &["--vectors", "digits.npy", "--browser-vectors", "16"]);
    let out = common::run_python(
        r#"
import sys, json, numpy as np
from sklearn.decomposition import PCA
d = sys.argv[1]
m = json.load(open(f"{d}/atlas/atlas.json"))
v = m["vectors"]
n, k = m["item_count"], v["dims"]
q = np.concatenate([np.fromfile(f"{d}/atlas/{c['file']}", dtype=np.uint8) for c in v["chunks"]])
decoded = np.array(v["offset"], np.float64) + np.array(v["scale"], np.float64) * q.reshape(n, k)
rows = np.fromfile(f"{d}/atlas/{m['source_rows']['file']}", dtype="<u4")
X = np.load(f"{d}/digits.npy").astype(np.float64)
X /= np.linalg.norm(X, axis=1, keepdims=True)
p = PCA(n_components=k, svd_solver="full").fit(X)
exact = p.transform(X)[rows]
# Dot products and distances do not depend on each component's sign.
i = np.random.default_rng(0).integers(0, n, (20000, 2))
a, b = decoded[i[:, 0]], decoded[i[:, 1]]
fa, fb = exact[i[:, 0]], exact[i[:, 1]]
scale = np.linalg.norm(fa, axis=1) * np.linalg.norm(fb, axis=1)
dot_err = np.abs((a * b).sum(1) - (fa * fb).sum(1)) / scale
dist_err = np.abs(np.linalg.norm(a - b, axis=1) - np.linalg.norm(fa - fb, axis=1)) / np.sqrt(scale)
print(json.dumps({
    "dims": k,
    "explained": v["explained_variance"],
    "explained_sklearn": float(p.explained_variance_ratio_.sum()),
    "provenance": m["provenance"]["parameters"]["browser_vectors_explained_variance"],
    "dot_median": float(np.median(dot_err)), "dot_p99": float(np.quantile(dot_err, 0.99)),
    "dist_median": float(np.median(dist_err)), "dist_p99": float(np.quantile(dist_err, 0.99)),
}))
"#,
        &[d],
    );
    let r: serde_json::Value = serde_json::from_str(out.trim()).unwrap();
    let f = |k: &str| r[k].as_f64().unwrap();
    assert_eq!(r["dims"], 16);
    // The same share of the variance as the exact PCA (the build's is a randomized fit).
    assert!(
        (f("explained") - f("explained_sklearn")).abs() < 1e-4,
        "{r}"
    );
    assert_eq!(f("provenance"), f("explained"));
    // One byte per component: dot products off by under 0.4 % of the vectors' lengths' product for
    // the typical pair and 1.5 % for 99 % of pairs (measured 0.19 % and 0.81 %); distances alike
    // (0.18 % and 1.7 % measured, of the geometric mean length).
    assert!(f("dot_median") < 0.004 && f("dot_p99") < 0.015, "{r}");
    assert!(f("dist_median") < 0.004 && f("dist_p99") < 0.03, "{r}");
}
