//! The real `vitrine` binary for the integration tests.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::Command;

#[allow(unused_imports)]
pub use vitrine_test_support::run_python;

/// The `vitrine` binary, with its default thumbnail cache inside the build's temporary folder
/// (never the user's own cache).
pub fn vitrine() -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_vitrine"));
    c.env(
        "VITRINE_CACHE",
        PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("vitrine-cache"),
    );
    c
}

/// `vitrine build --quiet --epochs 30`: a quick build, to which a test adds its inputs and options.
pub fn quick_build() -> Command {
    let mut c = vitrine();
    c.args(["build", "--quiet", "--epochs", "30"]);
    c
}

/// Writes the inputs of a small build with pictures: `vectors.npy` (one row of three small values
/// per id) and `records.csv` with just an `id` column.
pub fn write_small_inputs(dir: &Path, ids: &[String]) {
    let data: Vec<f32> = (0..ids.len() * 3).map(|i| ((i * 5) % 7) as f32).collect();
    vitrine_test_support::write_npy_f32(&dir.join("vectors.npy"), ids.len(), 3, &data).unwrap();
    let csv: String = ids.iter().map(|i| format!("{i}\n")).collect();
    std::fs::write(dir.join("records.csv"), format!("id\n{csv}")).unwrap();
}

/// Writes `vectors.npy`: `n` rows of four small values.
pub fn write_vectors(dir: &Path, n: usize) {
    let data: Vec<f32> = (0..n * 4).map(|k| ((k * 37 % 11) as f32) * 0.1).collect();
    vitrine_test_support::write_npy_f32(&dir.join("vectors.npy"), n, 4, &data).unwrap();
}

/// `vitrine build --epochs 30` in `dir` from `vectors.npy` and `catalogue` into `out`, its notes
/// printed (not quiet); a test adds its own options.
pub fn catalogue_build(dir: &Path, catalogue: &str, out: &str) -> Command {
    let mut c = vitrine();
    c.current_dir(dir)
        .args(["build", "--epochs", "30", "--vectors", "vectors.npy"])
        .args(["--catalogue", catalogue, "--out", out]);
    c
}

/// [`quick_build`] in `dir` from `vectors.npy`, `records.csv` and `images/` into `atlas`, without a
/// thumbnail cache; a test adds its own options.
pub fn image_build(dir: &Path) -> Command {
    let mut c = quick_build();
    c.current_dir(dir).args([
        "--vectors",
        "vectors.npy",
        "--catalogue",
        "records.csv",
        "--images",
        "images",
        "--out",
        "atlas",
        "--no-thumb-cache",
    ]);
    c
}

/// `vitrine corpus atlas ARGS` run in `dir`.
pub fn corpus(dir: &Path, args: &[&str]) -> std::process::Output {
    vitrine()
        .current_dir(dir)
        .arg("corpus")
        .arg("atlas")
        .args(args)
        .output()
        .unwrap()
}

/// A run that must succeed: its standard output.
pub fn stdout_of(o: &std::process::Output) -> String {
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    String::from_utf8_lossy(&o.stdout).to_string()
}

/// A run that must succeed: its notes (standard error).
pub fn notes_of(o: &std::process::Output) -> String {
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    String::from_utf8_lossy(&o.stderr).to_string()
}

/// A run that must fail: its message.
pub fn failure_of(o: &std::process::Output) -> String {
    assert!(!o.status.success(), "should fail");
    String::from_utf8_lossy(&o.stderr).to_string()
}

/// [`corpus`] that must succeed: its notes.
pub fn corpus_notes(dir: &Path, args: &[&str]) -> String {
    notes_of(&corpus(dir, args))
}

/// [`corpus`] that must fail: its message.
pub fn corpus_fails(dir: &Path, args: &[&str]) -> String {
    let o = corpus(dir, args);
    assert!(!o.status.success(), "should fail: {args:?}");
    String::from_utf8_lossy(&o.stderr).to_string()
}

/// [`quick_build`] in `dir` with `args` (the inputs and options) into `atlas`, which must succeed.
pub fn build_atlas(dir: &Path, args: &[&str]) {
    let o = quick_build()
        .current_dir(dir)
        .args(args)
        .args(["--out", "atlas"])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
}

/// [`build_atlas`] from `vectors.npy` and `records.csv`.
pub fn small_build(dir: &Path) {
    build_atlas(
        dir,
        &["--vectors", "vectors.npy", "--catalogue", "records.csv"],
    );
}

/// `vitrine corpus ATLAS --csv OUT --csv-exact` (every item, cells as catalogued), read back:
/// the header and the rows.
pub fn every_row(atlas: &Path, out: &Path) -> (Vec<String>, Vec<Vec<String>>) {
    let o = vitrine()
        .args(["corpus", atlas.to_str().unwrap(), "--csv"])
        .arg(out)
        .arg("--csv-exact")
        .output()
        .unwrap();
    notes_of(&o);
    let mut r = csv::Reader::from_path(out).unwrap();
    let header = r.headers().unwrap().iter().map(String::from).collect();
    let rows = r
        .records()
        .map(|x| x.unwrap().iter().map(String::from).collect())
        .collect();
    (header, rows)
}
