//! Reading the feature vectors: a NumPy `.npy` file (see `vitrine_format::npy`), items x dimensions.

use std::path::Path;

use vitrine_format::npy::{self, NpyError};
use vitrine_map::matrix::Matrix;

use crate::error::InputError;

/// Reads a `.npy` of float, integer or bool vectors into the f32 matrix the map engine uses,
/// converting as the data stream in (never a second copy beside it, whatever the element type).
pub fn read_vectors(path: &Path) -> Result<Matrix, InputError> {
    let io = |e| InputError::io(path, e);
    let file = std::fs::File::open(path).map_err(io)?;
    let len = file.metadata().map_err(io)?.len() as usize;
    npy::read(&mut std::io::BufReader::new(file), len)
        .map(Matrix::from)
        .map_err(|e| match e {
            NpyError::Io(e) => InputError::io(path, e),
            NpyError::Format(reason) => InputError::Vectors {
                file: path.display().to_string(),
                reason,
            },
        })
}
