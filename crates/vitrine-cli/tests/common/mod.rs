//! The real `vitrine` binary for the integration tests.
#![allow(dead_code)]

use std::path::PathBuf;
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
