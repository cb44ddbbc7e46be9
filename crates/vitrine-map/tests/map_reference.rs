//! The neighbour graph and the map against scikit-learn on its bundled digits dataset (UCI optical digits).

use std::path::Path;
use vitrine_map::knn::{exact_knn, Metric};
use vitrine_map::matrix::Matrix;
use vitrine_map::rng::Rng;
use vitrine_map::umap;
use vitrine_test_support::{run_python, write_npy_f32};

const K: usize = 15;

fn digits(dir: &Path) {
    run_python(
        r#"
import sys, numpy as np
from sklearn.datasets import load_digits
from sklearn.neighbors import NearestNeighbors
out = sys.argv[1]
X = load_digits().data  # 1797 x 64, float64
np.save(f"{out}/digits.npy", X)
for metric in ["euclidean", "cosine"]:
    # K + 2 columns: the item itself, K neighbours, and one more to see ties at the boundary.
    nn = NearestNeighbors(n_neighbors=17, algorithm="brute", metric=metric).fit(X)
    d, i = nn.kneighbors(X)
    np.save(f"{out}/{metric}_d.npy", d)
    np.save(f"{out}/{metric}_i.npy", i.astype(np.float64))
"#,
        &[dir],
    );
}

fn compare(dir: &Path, metric: Metric) {
    let x = read_npy(&dir.join("digits.npy"));
    let g = exact_knn(&x, K, metric, &|_| {});
    let rd = read_npy(&dir.join(format!("{}_d.npy", metric.name())));
    let ri = read_npy(&dir.join(format!("{}_i.npy", metric.name())));
    let tol = 1e-4;
    let mut checked_ids = 0;
    for q in 0..x.rows {
        // The reference row includes the item itself (a zero distance); drop one zero to align.
        let mut refs: Vec<(f32, usize)> = (0..rd.cols)
            .map(|c| (rd.row(q)[c], ri.row(q)[c] as usize))
            .collect();
        let self_pos = refs.iter().position(|&(_, j)| j == q).unwrap_or(0);
        refs.remove(self_pos);
        let ours: Vec<(usize, f32)> = g.neighbours(q).collect();
        assert_eq!(ours.len(), K);
        for (slot, &(j, d)) in ours.iter().enumerate() {
            let (rdist, rid) = refs[slot];
            assert!(
                (d - rdist).abs() <= tol * rdist.max(1.0),
                "{metric:?} row {q} slot {slot}: {d} vs {rdist}"
            );
            // Ids must agree wherever the distance is not tied with a neighbour in the list.
            let tied = |a: f32, b: f32| (a - b).abs() <= tol * a.max(1.0);
            let before = slot > 0 && tied(refs[slot - 1].0, rdist);
            let after = tied(refs[slot + 1].0, rdist);
            if !before && !after {
                assert_eq!(j, rid, "{metric:?} row {q} slot {slot}");
                checked_ids += 1;
            }
        }
    }
    assert!(
        checked_ids > x.rows * K / 3,
        "too few untied neighbours were compared: {checked_ids}"
    );
}

#[test]
fn exact_graph_equals_scikit_learn_brute_force_on_digits() {
    let dir = tempfile::tempdir().unwrap();
    digits(dir.path());
    compare(dir.path(), Metric::Euclidean);
    compare(dir.path(), Metric::Cosine);
}

#[test]
fn digits_map_is_trustworthy_by_scikit_learn() {
    let dir = tempfile::tempdir().unwrap();
    digits(dir.path());
    let x = read_npy(&dir.path().join("digits.npy"));
    let g = exact_knn(&x, K, Metric::Euclidean, &|_| {});
    let fuzzy = umap::fuzzy_graph(&g);
    for parallel in [false, true] {
        // The start the build uses: spectral, from the PCA start where the graph falls apart.
        let pca = umap::pca_start(&x, &mut Rng::new(42));
        let (start, _) = vitrine_map::spectral::spectral_start(&fuzzy, &pca, 42);
        let params = umap::UmapParams {
            parallel,
            ..Default::default()
        };
        let pos = umap::layout(&fuzzy, start, &params, &|_, _| {});
        assert!(pos.iter().all(|p| p[0].is_finite() && p[1].is_finite()));
        let flat: Vec<f32> = pos.iter().flatten().copied().collect();
        let emb = dir.path().join("embedding.npy");
        write_npy_f32(&emb, pos.len(), 2, &flat).unwrap();
        // sklearn.manifold.trustworthiness and a 10-NN classifier on the digits labels (both from
        // scikit-learn) are the outside measures; published UMAP figures on digits are near 0.99
        // trustworthiness (from memory); the bar is 0.97, and 0.95 for the label accuracy.
        let out = run_python(
            r#"
import sys, numpy as np
from sklearn.manifold import trustworthiness
from sklearn.datasets import load_digits
from sklearn.neighbors import KNeighborsClassifier
from sklearn.model_selection import cross_val_score
X, y = load_digits(return_X_y=True)
E = np.load(sys.argv[1])
t = trustworthiness(X, E, n_neighbors=10)
acc = cross_val_score(KNeighborsClassifier(10), E, y, cv=5).mean()
print(f"{t:.6f} {acc:.6f}")
"#,
            &[&emb],
        );
        let mut it = out.split_whitespace().map(|s| s.parse::<f64>().unwrap());
        let (t, acc) = (it.next().unwrap(), it.next().unwrap());
        eprintln!("digits (parallel: {parallel}): trustworthiness@10 = {t}, 10-NN label accuracy in 2-D = {acc}");
        assert!(t >= 0.97, "trustworthiness@10 = {t}");
        assert!(acc >= 0.95, "label accuracy = {acc}");
    }
}

#[test]
fn parallel_layout_keeps_neighbourhoods_as_the_sequential_one_on_a_hard_mixture() {
    // The bench's hard mixture (bench/bench_map.py: Zipf-like sizes, low-rank clusters whose
    // siblings share directions and overlap, noise on the sphere), small: 12,000 x 64, 4 % noise.
    // sklearn.manifold.trustworthiness (cosine, k = 10, on a fixed 4,000-item sample) is the
    // outside measure; the parallel optimiser may lose at most 0.003 against the sequential one.
    let dir = tempfile::tempdir().unwrap();
    let bench = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../bench");
    run_python(
        r#"
import sys, numpy as np
sys.path.insert(0, sys.argv[2])
import bench_map
x, labels = bench_map.make_hard(12000, 64, noise=0.04, overlap=0.8, seed=71)
np.save(f"{sys.argv[1]}/hard.npy", x)
"#,
        &[dir.path(), &bench],
    );
    let x = read_npy(&dir.path().join("hard.npy"));
    let g = vitrine_map::nndescent::nn_descent(
        &x,
        Metric::Cosine,
        &vitrine_map::nndescent::NnDescentParams::new(K, 42),
        &|_, _, _| {},
    );
    let fuzzy = umap::fuzzy_graph(&g);
    let pca = umap::pca_start(
        &vitrine_map::knn::prepare(&x, Metric::Cosine),
        &mut Rng::new(42),
    );
    let (start, _) = vitrine_map::spectral::spectral_start(&fuzzy, &pca, 42);
    let mut files = vec![];
    for parallel in [false, true] {
        let params = umap::UmapParams {
            parallel,
            ..Default::default()
        };
        let pos = umap::layout(&fuzzy, start.clone(), &params, &|_, _| {});
        let flat: Vec<f32> = pos.iter().flatten().copied().collect();
        let emb = dir.path().join(format!("map-{parallel}.npy"));
        write_npy_f32(&emb, pos.len(), 2, &flat).unwrap();
        files.push(emb);
    }
    let out = run_python(
        r#"
import sys, numpy as np
from sklearn.manifold import trustworthiness
X = np.load(sys.argv[1])
sample = np.sort(np.random.default_rng(2).choice(len(X), 4000, replace=False))
for f in sys.argv[2:]:
    print(trustworthiness(X[sample], np.load(f)[sample].astype(np.float64), n_neighbors=10, metric="cosine"))
"#,
        &[&dir.path().join("hard.npy"), &files[0], &files[1]],
    );
    let t: Vec<f64> = out.split_whitespace().map(|s| s.parse().unwrap()).collect();
    eprintln!(
        "hard mixture: trustworthiness@10 sequential {:.4}, parallel {:.4}",
        t[0], t[1]
    );
    assert!(t[0] > 0.9, "sequential trustworthiness@10 = {}", t[0]);
    assert!(
        t[1] >= t[0] - 0.003,
        "parallel {:.4} against sequential {:.4}",
        t[1],
        t[0]
    );
}

#[test]
fn same_seed_same_map_other_seed_other_map() {
    let mut rng = Rng::new(3);
    let (n, d) = (300, 8);
    let data: Vec<f32> = (0..n * d)
        .map(|i| (i / d / 100) as f32 * 3.0 + rng.uniform() as f32)
        .collect();
    let x = Matrix {
        rows: n,
        cols: d,
        data,
    };
    let run = |seed| {
        let g = exact_knn(&x, K, Metric::Euclidean, &|_| {});
        let f = umap::fuzzy_graph(&g);
        let p = umap::UmapParams {
            seed,
            epochs: Some(100),
            ..Default::default()
        };
        umap::layout(&f, umap::pca_start(&x, &mut Rng::new(seed)), &p, &|_, _| {})
    };
    assert_eq!(run(1), run(1));
    assert_ne!(run(1), run(2));
}

#[test]
fn ab_curve_fit_matches_the_reference_implementation() {
    // umap-learn's find_ab_params (scipy curve_fit on the same target curve) is the reference; for
    // min_dist = 0.1, spread = 1 it gives a = 1.577, b = 0.895.
    let cases = [
        (1.0f32, 0.1f32),
        (1.0, 0.0),
        (1.0, 0.5),
        (2.0, 0.25),
        (0.5, 0.05),
    ];
    let script = format!(
        "from umap.umap_ import find_ab_params\nfor s, m in {:?}:\n    a, b = find_ab_params(s, m)\n    print(a, b)",
        cases.iter().map(|&(s, m)| (s as f64, m as f64)).collect::<Vec<_>>()
    );
    let out = run_python(&script, &[]);
    for (line, &(spread, min_dist)) in out.lines().zip(&cases) {
        let want: Vec<f64> = line
            .split_whitespace()
            .map(|x| x.parse().unwrap())
            .collect();
        let (a, b) = umap::fit_ab(min_dist, spread);
        let rel = |x: f32, y: f64| ((x as f64 - y) / y).abs();
        assert!(
            rel(a, want[0]) < 2e-3 && rel(b, want[1]) < 2e-3,
            "spread {spread}, min_dist {min_dist}: ours a = {a}, b = {b}; reference {want:?}"
        );
    }
}

#[test]
fn tiny_and_degenerate_collections_give_finite_maps() {
    for n in [1usize, 2, 3, 16] {
        let x = Matrix {
            rows: n,
            cols: 3,
            data: vec![0.5; n * 3],
        };
        let k = K.min(n.saturating_sub(1)).max(1);
        let g = exact_knn(&x, k, Metric::Cosine, &|_| {});
        let f = umap::fuzzy_graph(&g);
        let pos = umap::layout(
            &f,
            umap::pca_start(&x, &mut Rng::new(1)),
            &Default::default(),
            &|_, _| {},
        );
        assert_eq!(pos.len(), n);
        assert!(
            pos.iter().all(|p| p[0].is_finite() && p[1].is_finite()),
            "n = {n}: {pos:?}"
        );
    }
}

#[test]
fn trustworthiness_and_continuity_equal_scikit_learn() {
    // Digits with a little seeded noise (no tied distances, so rankings are unambiguous) and a PCA
    // layout, both made by scikit-learn; sklearn.manifold.trustworthiness is the reference value.
    let dir = tempfile::tempdir().unwrap();
    let out = run_python(
        r#"
import sys, numpy as np
from sklearn.datasets import load_digits
from sklearn.decomposition import PCA
from sklearn.manifold import trustworthiness
X = load_digits().data[:600]
X = X + np.random.default_rng(1).normal(scale=1e-3, size=X.shape)
E = PCA(n_components=2, random_state=0).fit_transform(X)
np.save(f"{sys.argv[1]}/x.npy", X.astype(np.float32))
np.save(f"{sys.argv[1]}/e.npy", E.astype(np.float32))
X32, E32 = X.astype(np.float32).astype(np.float64), E.astype(np.float32).astype(np.float64)
print(trustworthiness(X32, E32, n_neighbors=10), trustworthiness(E32, X32, n_neighbors=10),
      trustworthiness(X32, E32, n_neighbors=10, metric="cosine"), trustworthiness(X32, E32, n_neighbors=5))
"#,
        &[dir.path()],
    );
    let want: Vec<f64> = out.split_whitespace().map(|s| s.parse().unwrap()).collect();
    let x = read_npy(&dir.path().join("x.npy"));
    let e = read_npy(&dir.path().join("e.npy"));
    let hx: Vec<&[f32]> = (0..x.rows).map(|i| x.row(i)).collect();
    let le: Vec<&[f32]> = (0..e.rows).map(|i| e.row(i)).collect();
    use vitrine_map::quality::trustworthiness as tw;
    let got = [
        tw(&hx, Metric::Euclidean, &le, Metric::Euclidean, 10),
        tw(&le, Metric::Euclidean, &hx, Metric::Euclidean, 10),
        tw(&hx, Metric::Cosine, &le, Metric::Euclidean, 10),
        tw(&hx, Metric::Euclidean, &le, Metric::Euclidean, 5),
    ];
    for (g, w) in got.iter().zip(&want) {
        assert!((g - w).abs() < 1e-6, "ours {got:?}, scikit-learn {want:?}");
    }
    // The build's path, which orders the vector space once for every map: the same two figures.
    let pos: Vec<[f32; 2]> = (0..e.rows).map(|i| [e.row(i)[0], e.row(i)[1]]).collect();
    let q = vitrine_map::quality::QualitySample::new(&x, (0..x.rows).collect(), Metric::Euclidean)
        .quality(&pos, 10)
        .unwrap();
    assert!((q.trustworthiness - want[0]).abs() < 1e-6, "{q:?} {want:?}");
    assert!((q.continuity - want[1]).abs() < 1e-6, "{q:?} {want:?}");
}

#[test]
fn approximate_graph_recall_against_scikit_learn_on_digits() {
    let dir = tempfile::tempdir().unwrap();
    digits(dir.path());
    let x = read_npy(&dir.path().join("digits.npy"));
    for metric in [Metric::Euclidean, Metric::Cosine] {
        let params = vitrine_map::nndescent::NnDescentParams::new(K, 42);
        let g = vitrine_map::nndescent::nn_descent(&x, metric, &params, &|_, _, _| {});
        let rd = read_npy(&dir.path().join(format!("{}_d.npy", metric.name())));
        // Digits has many tied distances, so a neighbour counts as found when its distance is no larger
        // than scikit-learn's k-th neighbour distance (column K: column 0 is the item itself).
        let mut found = 0;
        for q in 0..x.rows {
            let kth = rd.row(q)[K];
            found += g
                .neighbours(q)
                .filter(|&(j, d)| j != q && d <= kth * (1.0 + 1e-5) + 1e-6)
                .count();
        }
        let recall = found as f64 / (x.rows * K) as f64;
        eprintln!("NN-descent recall@15 on digits ({metric:?}): {recall:.4}");
        assert!(recall >= 0.99, "{metric:?}: {recall}");
        // Distances are the metric's own.
        let exact = exact_knn(&x, K, metric, &|_| {});
        assert!((g.distances[0] - exact.distances[0]).abs() < 1e-3 * exact.distances[0].max(1.0));
    }
}

#[test]
fn the_map_does_not_depend_on_the_number_of_threads() {
    let mut rng = Rng::new(9);
    let (n, d) = (2000, 10);
    let data: Vec<f32> = (0..n * d)
        .map(|i| (i / d % 7) as f32 * 2.0 + rng.uniform() as f32)
        .collect();
    let x = Matrix {
        rows: n,
        cols: d,
        data,
    };
    let run = |threads: usize| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap()
            .install(|| {
                let g = vitrine_map::nndescent::nn_descent(
                    &x,
                    Metric::Euclidean,
                    &vitrine_map::nndescent::NnDescentParams::new(K, 5),
                    &|_, _, _| {},
                );
                let f = umap::fuzzy_graph(&g);
                let p = umap::UmapParams {
                    seed: 5,
                    epochs: Some(80),
                    parallel: true,
                    ..Default::default()
                };
                umap::layout(&f, umap::pca_start(&x, &mut Rng::new(5)), &p, &|_, _| {})
            })
    };
    let one = run(1);
    assert_eq!(one, run(2));
    assert_eq!(one, run(3));
}

fn read_npy(path: &Path) -> Matrix {
    vitrine_test_support::read_npy(path).into()
}
