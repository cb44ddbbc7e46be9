//! Helpers shared by the crates' tests: the Python venv that holds the outside references
//! (numpy, scikit-learn, shapely, Pillow; `./build.sh setup` makes it), and `.npy` files for
//! handing arrays to NumPy and back.

use std::path::{Path, PathBuf};
use std::process::Command;

pub use vitrine_format::npy::NpyArray;

/// The venv's Python, created by `./build.sh setup`. Override with VITRINE_PYTHON.
pub fn python() -> PathBuf {
    if let Ok(p) = std::env::var("VITRINE_PYTHON") {
        return PathBuf::from(p);
    }
    let home = std::env::var("HOME").unwrap_or_else(|_| "/root".into());
    let cache = std::env::var("VITRINE_CACHE").unwrap_or_else(|_| format!("{home}/.cache/vitrine"));
    PathBuf::from(cache).join("venv/bin/python")
}

/// Runs a Python script (with `args`) and returns its standard output; panics with its errors.
pub fn run_python(script: &str, args: &[&Path]) -> String {
    let py = python();
    assert!(
        py.exists(),
        "the outside-reference tests need {} (run ./build.sh setup)",
        py.display()
    );
    let out = Command::new(&py)
        .arg("-c")
        .arg(script)
        .args(args)
        .output()
        .expect("python runs");
    assert!(
        out.status.success(),
        "python failed:\n{}\n{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).unwrap()
}

/// Reads a `.npy` file (float16/32/64, either byte order, C or Fortran order); panics naming the
/// file when it cannot.
pub fn read_npy(path: &Path) -> NpyArray {
    let bytes = std::fs::read(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    vitrine_format::npy::parse(&bytes).unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

/// Writes a little-endian float32 `.npy` of `rows` x `cols` values.
pub fn write_npy_f32(path: &Path, rows: usize, cols: usize, data: &[f32]) -> std::io::Result<()> {
    std::fs::write(path, vitrine_format::npy::encode_f32(rows, cols, data))
}
