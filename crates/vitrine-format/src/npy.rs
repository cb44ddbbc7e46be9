//! NumPy `.npy` files holding a 2-D numeric array (format versions 1.0, 2.0 and 3.0): read from any
//! byte source and converted to float32, written as little-endian float32.
//!
//! Element types read: float16/32/64, the signed and unsigned integers of 8, 16, 32 and 64 bits
//! (quantised embeddings are often int8 or uint8) and bool (0 or 1). Integers above 2^24 in
//! magnitude round to the nearest float32, as NumPy's own `astype(np.float32)` does.
//!
//! The layout follows the `.npy` format specification (NEP 1): a 6-byte magic string, a
//! major and minor version byte, a little-endian header length (u16 in 1.0, u32 in 2.0 and
//! 3.0), a Python dict literal with `descr`, `fortran_order` and `shape`, then the raw data.
//! The build reads its vectors with it, the demo writes its own, the tests exchange arrays with
//! NumPy through it. It knows nothing of files: callers name the file in their errors.

use std::io::Read;

/// A row-major f32 array as read from a `.npy` (a 1-D array is one column).
#[derive(Debug, Clone, PartialEq)]
pub struct NpyArray {
    pub rows: usize,
    pub cols: usize,
    pub data: Vec<f32>,
}

#[derive(Debug, thiserror::Error)]
pub enum NpyError {
    /// The bytes are not a `.npy` this reader takes; the text says why.
    #[error("{0}")]
    Format(String),
    #[error(transparent)]
    Io(#[from] std::io::Error),
}

#[derive(Debug, Clone, Copy, PartialEq)]
enum Scalar {
    F16,
    F32,
    F64,
    I8,
    U8,
    I16,
    U16,
    I32,
    U32,
    I64,
    U64,
    Bool,
}

impl Scalar {
    fn size(self) -> usize {
        match self {
            Scalar::I8 | Scalar::U8 | Scalar::Bool => 1,
            Scalar::F16 | Scalar::I16 | Scalar::U16 => 2,
            Scalar::F32 | Scalar::I32 | Scalar::U32 => 4,
            Scalar::F64 | Scalar::I64 | Scalar::U64 => 8,
        }
    }
}

/// The element type and byte order of a `descr` such as `<f4`, `|u1` or `>i8` (None when foreign).
/// One-byte types carry `|` (no byte order); `=` is the writer's native order, little-endian on
/// every machine NumPy ships for today.
fn parse_descr(descr: &str) -> Option<(bool, Scalar)> {
    let mut chars = descr.chars();
    let order = chars.next()?;
    let little = match order {
        '<' | '=' | '|' => true,
        '>' => false,
        _ => return None,
    };
    let scalar = match chars.as_str() {
        "f2" => Scalar::F16,
        "f4" => Scalar::F32,
        "f8" => Scalar::F64,
        "i1" => Scalar::I8,
        "u1" => Scalar::U8,
        "b1" => Scalar::Bool,
        "i2" => Scalar::I16,
        "u2" => Scalar::U16,
        "i4" => Scalar::I32,
        "u4" => Scalar::U32,
        "i8" => Scalar::I64,
        "u8" => Scalar::U64,
        _ => return None,
    };
    // `|` only for one-byte types, whose order does not matter.
    if order == '|' && scalar.size() != 1 {
        return None;
    }
    Some((little, scalar))
}

/// What the header says.
#[derive(Debug, Clone)]
pub struct Header {
    /// Where the data begin (bytes from the start of the file).
    pub data_start: usize,
    pub rows: usize,
    pub cols: usize,
    scalar: Scalar,
    little: bool,
    fortran: bool,
}

/// Reads a whole `.npy` from `src`, whose length is `len` bytes. The data are converted to f32 as
/// they stream in, a block at a time, so that memory holds the f32 array alone (a float16 file is
/// not first read whole beside it).
pub fn read(src: &mut dyn Read, len: usize) -> Result<NpyArray, NpyError> {
    // The fixed part, then the header it announces (at most 4 GiB by the format; far less in practice).
    let mut head = vec![0u8; len.min(12)];
    src.read_exact(&mut head)?;
    let need = header_end(&head).unwrap_or(head.len()).min(len);
    if need > head.len() {
        let at = head.len();
        head.resize(need, 0);
        src.read_exact(&mut head[at..])?;
    }
    let h = parse_header(&head)?;
    // Whatever of the data the header read took is at the end of `head`.
    let mut rest = (&head[h.data_start..]).chain(src);
    decode(&h, &mut rest, len - h.data_start)
}

/// Parses a whole `.npy` held in memory.
pub fn parse(bytes: &[u8]) -> Result<NpyArray, NpyError> {
    let h = parse_header(bytes)?;
    let mut rest = &bytes[h.data_start..];
    decode(&h, &mut rest, bytes.len() - h.data_start)
}

/// A little-endian f32 C-order `.npy` (version 1.0) of `rows` x `cols` values.
pub fn encode_f32(rows: usize, cols: usize, data: &[f32]) -> Vec<u8> {
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
    for v in data {
        out.extend_from_slice(&v.to_le_bytes());
    }
    out
}

/// A 1-D `.npy` of text (`<U{n}`: each value as UTF-32 code points, padded with zeros to the longest).
pub fn encode_text(values: &[impl AsRef<str>]) -> Vec<u8> {
    let width = values
        .iter()
        .map(|v| v.as_ref().chars().count())
        .max()
        .unwrap_or(0)
        .max(1);
    let mut header = format!(
        "{{'descr': '<U{width}', 'fortran_order': False, 'shape': ({},), }}",
        values.len()
    );
    while (10 + header.len() + 1) % 64 != 0 {
        header.push(' ');
    }
    header.push('\n');
    let mut out = Vec::with_capacity(10 + header.len() + values.len() * width * 4);
    out.extend_from_slice(b"\x93NUMPY\x01\x00");
    out.extend_from_slice(&(header.len() as u16).to_le_bytes());
    out.extend_from_slice(header.as_bytes());
    for v in values {
        let mut n = 0;
        for c in v.as_ref().chars() {
            out.extend_from_slice(&(c as u32).to_le_bytes());
            n += 1;
        }
        out.resize(out.len() + (width - n) * 4, 0);
    }
    out
}

/// Where the header ends, from the fixed part (None when the fixed part is cut short or foreign).
fn header_end(b: &[u8]) -> Option<usize> {
    if b.len() < 10 || &b[..6] != b"\x93NUMPY" {
        return None;
    }
    match b[6] {
        1 => Some(10 + u16::from_le_bytes([b[8], b[9]]) as usize),
        2 | 3 if b.len() >= 12 => {
            Some(12 + u32::from_le_bytes([b[8], b[9], b[10], b[11]]) as usize)
        }
        _ => None,
    }
}

/// The header's text and where the data begin.
fn header_text(bytes: &[u8]) -> Result<(&str, usize), NpyError> {
    let bad = |reason: String| NpyError::Format(reason);
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
    Ok((header, data_start))
}

/// Reads a 1-D array of text or integers, such as ids kept beside vectors: NumPy's fixed-width
/// unicode (`<U12`, UTF-32, padded with NULs), byte strings (`|S12`, taken as UTF-8) or integers
/// (written in decimal).
pub fn parse_strings(bytes: &[u8]) -> Result<Vec<String>, NpyError> {
    let bad = |reason: String| NpyError::Format(reason);
    let (header, data_start) = header_text(bytes)?;
    let descr = dict_value(header, "descr")
        .ok_or_else(|| bad("the header has no 'descr'".into()))?
        .trim()
        .trim_matches(|c| c == '\'' || c == '"')
        .to_string();
    let shape = dict_value(header, "shape").unwrap_or("").trim().to_string();
    let count: usize = shape
        .trim_start_matches('(')
        .trim_end_matches(')')
        .trim()
        .trim_end_matches(',')
        .trim()
        .parse()
        .map_err(|_| bad(format!("the ids must be a 1-D array; its shape is {shape}")))?;
    let data = &bytes[data_start..];
    let kind = descr.get(..2).unwrap_or("");
    let width: usize = descr.get(2..).and_then(|w| w.parse().ok()).unwrap_or(0);
    let text = |raw: &[u8]| {
        String::from_utf8_lossy(raw)
            .trim_end_matches('\0')
            .to_string()
    };
    let cut = |size: usize| -> Result<Vec<&[u8]>, NpyError> {
        let need = count
            .checked_mul(size)
            .filter(|&n| n <= data.len() && size > 0)
            .ok_or_else(|| {
                bad(format!(
                    "the ids are cut short ({count} of {size} bytes each)"
                ))
            })?;
        Ok(data[..need].chunks_exact(size).collect())
    };
    match kind {
        "<U" | ">U" => {
            let little = kind == "<U";
            cut(width
                .checked_mul(4)
                .ok_or_else(|| bad(format!("ids of width {width} are too wide")))?)?
            .into_iter()
            .map(|item| {
                item.chunks_exact(4)
                    .map(|c| {
                        let b = [c[0], c[1], c[2], c[3]];
                        let v = if little {
                            u32::from_le_bytes(b)
                        } else {
                            u32::from_be_bytes(b)
                        };
                        char::from_u32(v)
                            .ok_or_else(|| bad("an id holds a character that is not one".into()))
                    })
                    .collect::<Result<String, _>>()
                    .map(|s| s.trim_end_matches('\0').to_string())
            })
            .collect()
        }
        "|S" => Ok(cut(width)?.into_iter().map(text).collect()),
        _ => {
            // Integers, exactly (not through float32).
            let (little, scalar) = parse_descr(&descr)
                .filter(|(_, s)| !matches!(s, Scalar::F16 | Scalar::F32 | Scalar::F64 | Scalar::Bool))
                .ok_or_else(|| {
                    bad(format!(
                        "ids of element type {descr} are not read: give text (NumPy 'U' or 'S') or integers"
                    ))
                })?;
            let size = scalar.size();
            Ok(cut(size)?
                .into_iter()
                .map(|c| {
                    let mut b = [0u8; 8];
                    if little {
                        b[..size].copy_from_slice(c);
                    } else {
                        for (k, &v) in c.iter().rev().enumerate() {
                            b[k] = v;
                        }
                    }
                    let u = u64::from_le_bytes(b);
                    let signed = |bits: u32| ((u << (64 - bits)) as i64 >> (64 - bits)).to_string();
                    match scalar {
                        Scalar::I8 => signed(8),
                        Scalar::I16 => signed(16),
                        Scalar::I32 => signed(32),
                        Scalar::I64 => signed(64),
                        _ => u.to_string(),
                    }
                })
                .collect())
        }
    }
}

/// Reads the header from the start of the file (`bytes` holds at least the whole header when
/// the file has one).
pub fn parse_header(bytes: &[u8]) -> Result<Header, NpyError> {
    let bad = |reason: String| NpyError::Format(reason);
    let (header, data_start) = header_text(bytes)?;
    let descr =
        dict_value(header, "descr").ok_or_else(|| bad("the header has no 'descr'".into()))?;
    let descr = descr.trim().trim_matches(|c| c == '\'' || c == '"');
    let (little, scalar) = parse_descr(descr).ok_or_else(|| {
        bad(format!(
            "element type {descr} is not supported: vectors must be float (16, 32 or 64 bits), \
             integer (8 to 64 bits, signed or unsigned) or bool"
        ))
    })?;
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
    Ok(Header {
        data_start,
        rows,
        cols,
        scalar,
        little,
        fortran,
    })
}

/// Converts the data that follow the header, `available` bytes of them, into a row-major f32 array.
fn decode(h: &Header, src: &mut dyn Read, available: usize) -> Result<NpyArray, NpyError> {
    let bad = |reason: String| NpyError::Format(reason);
    let (rows, cols, scalar, little, fortran) = (h.rows, h.cols, h.scalar, h.little, h.fortran);
    let size = scalar.size();
    let count = rows
        .checked_mul(cols)
        .filter(|n| n.checked_mul(size).is_some())
        .ok_or_else(|| bad("the shape is too large".into()))?;
    let want = count * size;
    if available < want {
        let whole_rows = if fortran {
            0
        } else {
            available / (cols * size)
        };
        return Err(bad(format!(
            "the file is truncated: the header declares {rows} x {cols} values ({want} bytes) but only {available} bytes follow; {}",
            if fortran {
                "in Fortran order no row is complete".to_string()
            } else {
                format!("row {whole_rows} (counting from 0) is the first incomplete one")
            }
        )));
    }
    // Each value's bytes, in the file's order, to f32 (`as` rounds to nearest, as NumPy does).
    let read = |b: &[u8]| -> f32 {
        let mut w = [0u8; 8];
        w[..size].copy_from_slice(b);
        if !little {
            w[..size].reverse();
        }
        match scalar {
            Scalar::F16 => half::f16::from_le_bytes([w[0], w[1]]).to_f32(),
            Scalar::F32 => f32::from_le_bytes([w[0], w[1], w[2], w[3]]),
            Scalar::F64 => f64::from_le_bytes(w) as f32,
            Scalar::I8 => w[0] as i8 as f32,
            Scalar::U8 => w[0] as f32,
            Scalar::Bool => (w[0] != 0) as u8 as f32,
            Scalar::I16 => i16::from_le_bytes([w[0], w[1]]) as f32,
            Scalar::U16 => u16::from_le_bytes([w[0], w[1]]) as f32,
            Scalar::I32 => i32::from_le_bytes([w[0], w[1], w[2], w[3]]) as f32,
            Scalar::U32 => u32::from_le_bytes([w[0], w[1], w[2], w[3]]) as f32,
            Scalar::I64 => i64::from_le_bytes(w) as f32,
            Scalar::U64 => u64::from_le_bytes(w) as f32,
        }
    };
    let mut out = vec![0f32; count];
    if cfg!(target_endian = "little") && scalar == Scalar::F32 && little && !fortran {
        // The file's bytes are the array's bytes.
        src.read_exact(bytemuck::cast_slice_mut(&mut out))?;
        return Ok(NpyArray {
            rows,
            cols,
            data: out,
        });
    }
    // Blocks of whole values; element k of the file goes to its row-major place.
    let mut block = vec![0u8; (1 << 20) / size * size];
    let mut k = 0usize;
    while k < count {
        let take = ((count - k) * size).min(block.len());
        src.read_exact(&mut block[..take])?;
        for b in block[..take].chunks_exact(size) {
            let at = if fortran {
                (k % rows) * cols + k / rows
            } else {
                k
            };
            out[at] = read(b);
            k += 1;
        }
    }
    Ok(NpyArray {
        rows,
        cols,
        data: out,
    })
}

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
