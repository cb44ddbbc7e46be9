//! Reading the feature vectors, items x dimensions, from the files labs keep them in: a NumPy
//! `.npy` (see `vitrine_format::npy`), a NumPy `.npz` archive (its one 2-D array, or the one
//! `--vectors-key` names, and its ids when it holds an array `ids`), or a `.safetensors` file (its
//! one 2-D tensor, or the one named); Parquet and Arrow tables are read by `columnar`.

use std::io::Read;
use std::path::Path;

use vitrine_format::npy::{self, NpyArray, NpyError};
use vitrine_map::matrix::Matrix;

use crate::error::InputError;

/// Vectors as read, with the ids the file itself holds (an `.npz` with an `ids` array).
pub struct VectorFile {
    pub matrix: Matrix,
    pub ids: Option<Vec<String>>,
    /// Which array or tensor of the file the vectors came from (None: the file is one array).
    pub array: Option<String>,
}

/// Reads a `.npy` of float, integer or bool vectors into the f32 matrix the map engine uses,
/// converting as the data stream in (never a second copy beside it, whatever the element type).
pub fn read_vectors(path: &Path) -> Result<Matrix, InputError> {
    Ok(read_vector_file(path, None)?.matrix)
}

/// Reads the vectors of any of the files this build takes, by its extension; `key` names the
/// array of an `.npz` or the tensor of a `.safetensors`.
pub fn read_vector_file(path: &Path, key: Option<&str>) -> Result<VectorFile, InputError> {
    let ext = crate::folder::lower_extension(path);
    let bad = |reason: String| InputError::Vectors {
        file: path.display().to_string(),
        reason,
    };
    let io = |e| InputError::io(path, e);
    match ext.as_str() {
        "npz" => read_npz(path, key),
        "parquet" | "pq" => crate::columnar::read_parquet(path, key),
        "arrow" | "feather" | "ipc" | "arrows" => crate::columnar::read_arrow(path, key),
        "safetensors" => {
            let bytes = std::fs::read(path).map_err(io)?;
            let (name, matrix) = read_safetensors(&bytes, key).map_err(bad)?;
            Ok(VectorFile {
                matrix,
                ids: None,
                array: Some(name),
            })
        }
        _ => {
            if let Some(k) = key {
                return Err(bad(format!(
                    "--vectors-key {k:?}: a .npy file is one array (a key names an array of an .npz or a tensor of a .safetensors)"
                )));
            }
            let file = std::fs::File::open(path).map_err(io)?;
            let len = file.metadata().map_err(io)?.len() as usize;
            let a = npy::read(&mut std::io::BufReader::new(file), len).map_err(|e| match e {
                NpyError::Io(e) => InputError::io(path, e),
                NpyError::Format(reason) => bad(reason),
            })?;
            Ok(VectorFile {
                matrix: Matrix::from(a),
                ids: None,
                array: None,
            })
        }
    }
}

/// The arrays (or table columns) the ids may be kept in, in an `.npz`, a Parquet or an Arrow file.
pub(crate) const ID_ARRAYS: [&str; 2] = ["ids", "id"];

/// Refuses blank and repeated ids (rows counted from 1).
pub(crate) fn check_ids(ids: &[String]) -> Result<(), String> {
    let mut seen = std::collections::HashMap::new();
    for (k, id) in ids.iter().enumerate() {
        if id.is_empty() {
            return Err(format!("id {} is empty", k + 1));
        }
        if let Some(j) = seen.insert(id.as_str(), k) {
            return Err(format!(
                "the id {id:?} appears twice (rows {} and {})",
                j + 1,
                k + 1
            ));
        }
    }
    Ok(())
}

fn read_npz(path: &Path, key: Option<&str>) -> Result<VectorFile, InputError> {
    let name = path.display().to_string();
    let bad = |reason: String| InputError::Vectors {
        file: name.clone(),
        reason,
    };
    let file = std::fs::File::open(path).map_err(|e| InputError::io(path, e))?;
    let mut zip = zip::ZipArchive::new(std::io::BufReader::new(file)).map_err(|e| {
        bad(format!(
            "not a NumPy .npz archive (a zip of .npy files): {e}"
        ))
    })?;
    let arrays: Vec<String> = zip
        .file_names()
        .filter_map(|n| n.strip_suffix(".npy"))
        .map(str::to_string)
        .collect();
    // An entry's first `limit` bytes at most (never more than the archive states it holds).
    type Archive = zip::ZipArchive<std::io::BufReader<std::fs::File>>;
    let entry = |zip: &mut Archive, array: &str, limit: u64| -> Result<Vec<u8>, InputError> {
        let f = zip
            .by_name(&format!("{array}.npy"))
            .map_err(|e| bad(format!("array {array:?}: {e}")))?;
        let size = f.size();
        let mut bytes = Vec::new();
        f.take(size.min(limit))
            .read_to_end(&mut bytes)
            .map_err(|e| bad(format!("array {array:?}: {e}")))?;
        Ok(bytes)
    };
    let listed = || {
        let mut a = arrays.clone();
        a.sort();
        a.join(", ")
    };
    let chosen = match key {
        Some(k) => {
            if !arrays.iter().any(|a| a == k) {
                return Err(bad(format!(
                    "--vectors-key {k:?}: no such array (it holds: {})",
                    listed()
                )));
            }
            k.to_string()
        }
        None => {
            // The 2-D numeric arrays (their headers read to tell).
            let mut matrices = Vec::new();
            for a in arrays.iter().filter(|a| !ID_ARRAYS.contains(&a.as_str())) {
                // (A header is at most a few kilobytes.)
                let head = entry(&mut zip, a, 64 << 10)?;
                if npy::parse_header(&head).is_ok_and(|h| h.cols > 1 || a == "vectors") {
                    matrices.push(a.clone());
                }
            }
            match matrices.as_slice() {
                [one] => one.clone(),
                [] => {
                    return Err(bad(format!(
                        "holds no 2-D array of numbers (it holds: {})",
                        listed()
                    )))
                }
                _ => {
                    return Err(bad(format!(
                        "holds several 2-D arrays ({}): name the vectors' one with --vectors-key",
                        matrices.join(", ")
                    )))
                }
            }
        }
    };
    // The vectors streamed from the archive into their f32 matrix (no copy of the packed bytes).
    let a: NpyArray = {
        let f = zip
            .by_name(&format!("{chosen}.npy"))
            .map_err(|e| bad(format!("array {chosen:?}: {e}")))?;
        let size = f.size();
        npy::read(&mut f.take(size), size as usize).map_err(|e| match e {
            NpyError::Io(e) => bad(format!("array {chosen:?}: {e}")),
            NpyError::Format(reason) => bad(format!("array {chosen:?}: {reason}")),
        })?
    };
    let ids = match ID_ARRAYS.iter().find(|i| arrays.iter().any(|a| a == *i)) {
        Some(i) => {
            let ids = npy::parse_strings(&entry(&mut zip, i, u64::MAX)?)
                .map_err(|e| bad(format!("array {i:?} (the ids): {e}")))?;
            let ids: Vec<String> = ids.into_iter().map(|s| s.trim().to_string()).collect();
            check_ids(&ids).map_err(|e| bad(format!("array {i:?} (the ids): {e}")))?;
            if ids.len() != a.rows {
                return Err(bad(format!(
                    "array {i:?} holds {} ids but {chosen:?} has {} rows",
                    ids.len(),
                    a.rows
                )));
            }
            Some(ids)
        }
        None => None,
    };
    Ok(VectorFile {
        matrix: Matrix::from(a),
        ids,
        array: Some(chosen),
    })
}

/// The one 2-D tensor of a `.safetensors` file (or the one named), as f32.
fn read_safetensors(bytes: &[u8], key: Option<&str>) -> Result<(String, Matrix), String> {
    use safetensors::{Dtype, SafeTensors};
    let st = SafeTensors::deserialize(bytes)
        .map_err(|e| format!("not a .safetensors file this build reads: {e}"))?;
    let mut names: Vec<String> = st.names().into_iter().cloned().collect();
    names.sort();
    let name = match key {
        Some(k) if names.iter().any(|n| n == k) => k.to_string(),
        Some(k) => {
            return Err(format!(
                "--vectors-key {k:?}: no such tensor (it holds: {})",
                names.join(", ")
            ))
        }
        None => {
            let two_d: Vec<&String> = names
                .iter()
                .filter(|n| st.tensor(n).is_ok_and(|t| t.shape().len() == 2))
                .collect();
            match two_d.as_slice() {
                [one] => (*one).clone(),
                [] => {
                    return Err(format!(
                        "holds no 2-D tensor (it holds: {})",
                        names.join(", ")
                    ))
                }
                _ => {
                    return Err(format!(
                        "holds several 2-D tensors ({}): name the vectors' one with --vectors-key",
                        two_d
                            .iter()
                            .map(|s| s.as_str())
                            .collect::<Vec<_>>()
                            .join(", ")
                    ))
                }
            }
        }
    };
    let t = st.tensor(&name).map_err(|e| e.to_string())?;
    let (rows, cols) = match t.shape() {
        [r, c] => (*r, *c),
        [r] => (*r, 1),
        s => {
            return Err(format!(
                "tensor {name:?} has shape {s:?}; vectors must be 2-D"
            ))
        }
    };
    if cols == 0 {
        return Err(format!("tensor {name:?} has zero dimensions"));
    }
    let d = t.data();
    let data: Vec<f32> = match t.dtype() {
        Dtype::F32 => d.chunks_exact(4).map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]])).collect(),
        Dtype::F64 => d
            .chunks_exact(8)
            .map(|c| f64::from_le_bytes(c.try_into().unwrap()) as f32)
            .collect(),
        Dtype::F16 => d.chunks_exact(2).map(|c| half::f16::from_le_bytes([c[0], c[1]]).to_f32()).collect(),
        Dtype::BF16 => d.chunks_exact(2).map(|c| half::bf16::from_le_bytes([c[0], c[1]]).to_f32()).collect(),
        Dtype::I8 => d.iter().map(|&b| b as i8 as f32).collect(),
        Dtype::U8 => d.iter().map(|&b| b as f32).collect(),
        other => {
            return Err(format!(
                "tensor {name:?} holds {other:?}; vectors must be float (16, 32 or 64 bits, or bfloat16) or 8-bit integers"
            ))
        }
    };
    if data.len() != rows * cols {
        return Err(format!("tensor {name:?} is cut short"));
    }
    Ok((name, Matrix { rows, cols, data }))
}

/// Writes `vectors` and their `ids` as a NumPy `.npz` archive (arrays `vectors`, float32, and
/// `ids`, text; stored uncompressed), as `np.load` reads it and as `--vectors` takes it back.
pub fn write_npz(path: &Path, ids: &[String], vectors: &Matrix) -> std::io::Result<()> {
    use std::io::Write;
    let tmp = path.with_extension("npz.part");
    let file = std::fs::File::create(&tmp)?;
    let mut zip = zip::ZipWriter::new(std::io::BufWriter::new(file));
    let options = zip::write::SimpleFileOptions::default()
        .compression_method(zip::CompressionMethod::Stored)
        .large_file(vectors.data.len() * 4 > u32::MAX as usize / 2);
    let arrays = [
        (
            "vectors.npy",
            npy::encode_f32(vectors.rows, vectors.cols, &vectors.data),
        ),
        ("ids.npy", npy::encode_text(ids)),
    ];
    for (name, bytes) in arrays {
        zip.start_file(name, options)
            .map_err(std::io::Error::other)?;
        zip.write_all(&bytes)?;
    }
    zip.finish().map_err(std::io::Error::other)?.flush()?;
    std::fs::rename(&tmp, path)
}
