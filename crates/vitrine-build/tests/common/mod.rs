//! Shared helpers for the integration tests: the Python venv that holds the outside references.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::Command;

/// The venv's Python, created by `./build.sh setup` (numpy, scikit-learn). Override with VITRINE_PYTHON.
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
