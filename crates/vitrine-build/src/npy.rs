//! Reader for NumPy `.npy` files holding a 2-D float array (format versions 1.0, 2.0 and 3.0).
//!
//! The layout follows the `.npy` format specification (NEP 1): a 6-byte magic string, a
//! major and minor version byte, a little-endian header length (u16 in 1.0, u32 in 2.0 and
//! 3.0), a Python dict literal with `descr`, `fortran_order` and `shape`, then the raw data.

use std::path::Path;

use crate::error::InputError;

/// Row-major f32 matrix.
#[derive(Debug, Clone, PartialEq)]
pub struct Matrix {
    pub rows: usize,
    pub cols: usize,
    pub data: Vec<f32>,
}

impl Matrix {
    pub fn row(&self, i: usize) -> &[f32] {
        &self.data[i * self.cols..(i + 1) * self.cols]
    }
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Scalar {
    F16,
    F32,
    F64,
}

pub fn read_npy(path: &Path) -> Result<Matrix, InputError> {
    let bytes = std::fs::read(path).map_err(|e| InputError::io(path, e))?;
    parse_npy(&bytes, path)
}

pub fn parse_npy(bytes: &[u8], path: &Path) -> Result<Matrix, InputError> {
    let bad = |reason: String| InputError::Vectors {
        file: path.display().to_string(),
        reason,
    };
    if bytes.len() < 10 || &bytes[..6] != b"\x93NUMPY" {
        return Err(bad(
            "not a NumPy .npy file (the magic string \\x93NUMPY is missing)".into(),
        ));
    }
    let major = bytes[6];
    let (header_len, header_start): (usize, usize) = match major {
        1 => (u16::from_le_bytes([bytes[8], bytes[9]]) as usize, 10),
        2 | 3 => {
            if bytes.len() < 12 {
                return Err(bad("the header is cut short".into()));
            }
            (
                u32::from_le_bytes([bytes[8], bytes[9], bytes[10], bytes[11]]) as usize,
                12,
            )
        }
        v => {
            return Err(bad(format!(
                ".npy format version {v}.{} is not supported (1.0 to 3.0 are)",
                bytes[7]
            )))
        }
    };
    let data_start = header_start
        .checked_add(header_len)
        .filter(|&e| e <= bytes.len())
        .ok_or_else(|| bad("the header is cut short".into()))?;
    let header = std::str::from_utf8(&bytes[header_start..data_start])
        .map_err(|_| bad("the header is not text".into()))?;

    let descr =
        dict_value(header, "descr").ok_or_else(|| bad("the header has no 'descr'".into()))?;
    let descr = descr.trim().trim_matches(|c| c == '\'' || c == '"');
    let (little, scalar) = match descr {
        "<f2" | "=f2" => (true, Scalar::F16),
        ">f2" => (false, Scalar::F16),
        "<f4" | "=f4" => (true, Scalar::F32),
        ">f4" => (false, Scalar::F32),
        "<f8" | "=f8" => (true, Scalar::F64),
        ">f8" => (false, Scalar::F64),
        other => {
            return Err(bad(format!(
                "element type {other} is not supported: vectors must be float16, float32 or float64"
            )))
        }
    };
    let fortran = match dict_value(header, "fortran_order").map(str::trim) {
        Some("True") => true,
        Some("False") => false,
        _ => return Err(bad("the header has no valid 'fortran_order'".into())),
    };
    let shape_text =
        dict_value(header, "shape").ok_or_else(|| bad("the header has no 'shape'".into()))?;
    let shape: Vec<usize> = shape_text
        .trim()
        .trim_start_matches('(')
        .trim_end_matches(')')
        .split(',')
        .map(str::trim)
        .filter(|s| !s.is_empty())
        .map(|s| s.parse::<usize>())
        .collect::<Result<_, _>>()
        .map_err(|_| bad(format!("the shape {shape_text} is not a tuple of sizes")))?;
    let (rows, cols) = match shape.as_slice() {
        [r, c] => (*r, *c),
        [r] => (*r, 1),
        _ => {
            return Err(bad(format!(
                "the array has shape {shape_text}; vectors must be a 2-D array (items x dimensions)"
            )))
        }
    };
    if cols == 0 {
        return Err(bad("the vectors have zero dimensions".into()));
    }
    let size = match scalar {
        Scalar::F16 => 2,
        Scalar::F32 => 4,
        Scalar::F64 => 8,
    };
    let want = rows
        .checked_mul(cols)
        .and_then(|n| n.checked_mul(size))
        .ok_or_else(|| bad("the shape is too large".into()))?;
    let data = &bytes[data_start..];
    if data.len() < want {
        let whole_rows = if fortran {
            0
        } else {
            data.len() / (cols * size)
        };
        return Err(bad(format!(
            "the file is truncated: the header declares {rows} x {cols} values ({want} bytes) but only {} bytes follow; {}",
            data.len(),
            if fortran {
                "in Fortran order no row is complete".to_string()
            } else {
                format!("row {whole_rows} (counting from 0) is the first incomplete one")
            }
        )));
    }
    let read = |k: usize| -> f32 {
        let b = &data[k * size..(k + 1) * size];
        match (scalar, little) {
            (Scalar::F16, true) => half::f16::from_le_bytes([b[0], b[1]]).to_f32(),
            (Scalar::F16, false) => half::f16::from_be_bytes([b[0], b[1]]).to_f32(),
            (Scalar::F32, true) => f32::from_le_bytes(b.try_into().unwrap()),
            (Scalar::F32, false) => f32::from_be_bytes(b.try_into().unwrap()),
            (Scalar::F64, true) => f64::from_le_bytes(b.try_into().unwrap()) as f32,
            (Scalar::F64, false) => f64::from_be_bytes(b.try_into().unwrap()) as f32,
        }
    };
    let mut out = vec![0f32; rows * cols];
    for r in 0..rows {
        for c in 0..cols {
            let k = if fortran { c * rows + r } else { r * cols + c };
            out[r * cols + c] = read(k);
        }
    }
    Ok(Matrix {
        rows,
        cols,
        data: out,
    })
}

/// The text of a key's value in the header's Python dict literal.
fn dict_value<'a>(header: &'a str, key: &str) -> Option<&'a str> {
    let pos = header
        .find(&format!("'{key}'"))
        .or_else(|| header.find(&format!("\"{key}\"")))?;
    let rest = &header[pos + key.len() + 2..];
    let rest = rest.trim_start().strip_prefix(':')?.trim_start();
    if rest.starts_with('(') {
        let end = rest.find(')')?;
        Some(&rest[..=end])
    } else {
        let end = rest.find([',', '}']).unwrap_or(rest.len());
        Some(&rest[..end])
    }
}

/// Writes a little-endian f32 C-order `.npy` (version 1.0), used for the positions export and tests.
pub fn write_npy_f32(path: &Path, rows: usize, cols: usize, data: &[f32]) -> std::io::Result<()> {
    assert_eq!(data.len(), rows * cols);
    let mut header =
        format!("{{'descr': '<f4', 'fortran_order': False, 'shape': ({rows}, {cols}), }}");
    // Pad so that the data starts on a 64-byte boundary, ending with a newline (NEP 1).
    while (10 + header.len() + 1) % 64 != 0 {
        header.push(' ');
    }
    header.push('\n');
    let mut out = Vec::with_capacity(10 + header.len() + data.len() * 4);
    out.extend_from_slice(b"\x93NUMPY\x01\x00");
    out.extend_from_slice(&(header.len() as u16).to_le_bytes());
    out.extend_from_slice(header.as_bytes());
    out.extend_from_slice(bytemuck::cast_slice(data));
    std::fs::write(path, out)
}
