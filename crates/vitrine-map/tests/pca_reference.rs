//! The PCA pre-reduction against scikit-learn's exact PCA (`svd_solver="full"`, LAPACK's SVD) on
//! its bundled digits dataset (UCI optical digits, 1797 x 64).

use std::path::Path;
use vitrine_map::matrix::Matrix;
use vitrine_map::pca;
use vitrine_test_support::run_python;

const DIMS: usize = 10;

#[test]
fn pca_equals_scikit_learn_full_svd_on_digits() {
    let dir = tempfile::tempdir().unwrap();
    run_python(
        r#"
import sys, numpy as np
from sklearn.datasets import load_digits
from sklearn.decomposition import PCA
out = sys.argv[1]
X = load_digits().data
p = PCA(n_components=10, svd_solver="full").fit(X)
np.save(f"{out}/digits.npy", X)
np.save(f"{out}/ratio.npy", p.explained_variance_ratio_.reshape(1, -1))
np.save(f"{out}/components.npy", p.components_)
np.save(f"{out}/projected.npy", p.transform(X))
"#,
        &[dir.path()],
    );
    let x = read_npy(&dir.path().join("digits.npy"));
    let ratio = read_npy(&dir.path().join("ratio.npy"));
    let comps = read_npy(&dir.path().join("components.npy"));
    let projected = read_npy(&dir.path().join("projected.npy"));

    let fit = pca::fit(&x, DIMS, 42);
    assert_eq!(fit.components.len(), DIMS);
    assert_eq!(fit.fit_rows, x.rows);
    // Explained variance per component, and in total.
    for (j, (&ours, &theirs)) in fit
        .explained_variance_ratio
        .iter()
        .zip(&ratio.data)
        .enumerate()
    {
        assert!(
            (ours - theirs as f64).abs() <= 1e-5,
            "component {j}: explained variance ratio {ours} vs scikit-learn {theirs}"
        );
    }
    let total: f64 = ratio.data.iter().map(|&r| r as f64).sum();
    assert!((fit.explained() - total).abs() <= 1e-5);
    // The same directions (up to sign, which each side fixes its own way).
    for j in 0..DIMS {
        let dot: f64 = fit.components[j]
            .iter()
            .zip(comps.row(j))
            .map(|(a, &b)| a * b as f64)
            .sum();
        assert!(
            dot.abs() >= 1.0 - 1e-4,
            "component {j}: |cos| with scikit-learn's = {}",
            dot.abs()
        );
    }
    // The projected coordinates, column by column up to that sign.
    let z = pca::project(&x, &fit);
    for j in 0..DIMS {
        let sign = if (0..x.rows)
            .map(|i| z.row(i)[j] as f64 * projected.row(i)[j] as f64)
            .sum::<f64>()
            < 0.0
        {
            -1.0
        } else {
            1.0
        };
        let scale = (0..x.rows)
            .map(|i| projected.row(i)[j].abs() as f64)
            .fold(0f64, f64::max);
        for i in 0..x.rows {
            let d = (sign * z.row(i)[j] as f64 - projected.row(i)[j] as f64).abs();
            assert!(
                d <= 1e-3 * scale,
                "row {i} component {j}: {} vs {}",
                z.row(i)[j],
                projected.row(i)[j]
            );
        }
    }
}

fn read_npy(path: &Path) -> Matrix {
    vitrine_test_support::read_npy(path).into()
}
