//! The Python package's engine: the `vitrine` command's library run in the interpreter's process,
//! with the interpreter's lock released while it works. The package's Python part
//! (`python/vitrine/__init__.py`) turns arrays and data frames into the files the command reads.

use pyo3::exceptions::{PyRuntimeError, PyValueError};
use pyo3::prelude::*;

/// Runs one `vitrine` command given as its words (without the program's name), e.g.
/// `["build", "--images", "scans", "--out", "atlas"]`. Flag errors raise ValueError with the
/// command's own message; a failed command raises RuntimeError with its error.
#[pyfunction]
fn run(py: Python<'_>, words: Vec<String>) -> PyResult<()> {
    let cli = vitrine_cli::Cli::from_words(std::iter::once("vitrine".to_string()).chain(words))
        .map_err(PyValueError::new_err)?;
    py.detach(|| vitrine_cli::run(cli))
        .map_err(|e| PyRuntimeError::new_err(format!("{e:#}")))
}

#[pymodule]
fn _engine(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_function(wrap_pyfunction!(run, m)?)?;
    m.add("__version__", env!("CARGO_PKG_VERSION"))?;
    Ok(())
}
