//! .npy files written by NumPy itself (format per the NumPy .npy specification, NEP 1) read back equal.

use std::path::Path;
use vitrine_format::npy::{self, NpyArray};
use vitrine_test_support::{run_python, write_npy_f32};

/// Reads a file the way the build reads its vectors: streamed, not held whole.
fn read_npy(path: &Path) -> Result<NpyArray, npy::NpyError> {
    let f = std::fs::File::open(path)?;
    let len = f.metadata()?.len() as usize;
    npy::read(&mut std::io::BufReader::new(f), len)
}

/// Little-endian f32 values as NumPy's `tofile` writes them: the expected values of a test.
fn raw_f32(path: &Path) -> Vec<f32> {
    std::fs::read(path)
        .unwrap()
        .chunks(4)
        .map(|b| f32::from_le_bytes(b.try_into().unwrap()))
        .collect()
}

fn parse_npy(bytes: &[u8]) -> Result<NpyArray, npy::NpyError> {
    npy::parse(bytes)
}

#[test]
fn every_dtype_order_and_version_that_numpy_writes() {
    let dir = tempfile::tempdir().unwrap();
    // NumPy writes each combination, plus the expected values as raw little-endian f32 in C order.
    let listing = run_python(
        r#"
import sys, numpy as np
from numpy.lib import format as fmt
out = sys.argv[1]
rng = np.random.default_rng(7)
base = rng.normal(size=(7, 5)).astype(np.float16).astype(np.float64)  # exact in every dtype
names = []
for dt in ['<f2', '<f4', '<f8', '>f4', '>f8']:
    for order in ['C', 'F']:
        for version in [(1, 0), (2, 0), (3, 0)]:
            arr = np.asarray(base, dtype=dt, order=order)
            name = f"{out}/m_{dt.replace('<','le').replace('>','be')}_{order}_{version[0]}.npy"
            with open(name, 'wb') as f:
                fmt.write_array(f, arr, version=version)
            names.append(name)
base.astype('<f4').tofile(f"{out}/expected.raw")
np.save(f"{out}/vector.npy", np.arange(4, dtype=np.float32))
print("\n".join(names))
"#,
        &[dir.path()],
    );
    let expected = raw_f32(&dir.path().join("expected.raw"));
    let mut count = 0;
    for name in listing.lines() {
        let m = read_npy(Path::new(name)).unwrap_or_else(|e| panic!("{name}: {e}"));
        assert_eq!((m.rows, m.cols), (7, 5), "{name}");
        assert_eq!(m.data, expected, "{name}");
        count += 1;
    }
    assert_eq!(count, 30);
    // A 1-D array is read as one column.
    let v = read_npy(&dir.path().join("vector.npy")).unwrap();
    assert_eq!((v.rows, v.cols, v.data), (4, 1, vec![0.0, 1.0, 2.0, 3.0]));
}

#[test]
fn every_integer_dtype_and_bool_that_numpy_writes_reads_back_as_numpys_float32() {
    // Source of truth: NumPy's own `astype(np.float32)` of the same array (NEP 1 for the files).
    let dir = tempfile::tempdir().unwrap();
    let listing = run_python(
        r#"
import sys, numpy as np
out = sys.argv[1]
rng = np.random.default_rng(11)
names = []
for dt in ['|i1', '|u1', '<i2', '>i2', '<u2', '<i4', '>i4', '<u4', '<i8', '>i8', '<u8', '|b1']:
    kind = np.dtype(dt)
    if kind.kind == 'b':
        arr = rng.integers(0, 2, size=(9, 6)).astype(dt)
    else:
        info = np.iinfo(kind)
        arr = rng.integers(info.min, info.max, size=(9, 6), dtype=kind.newbyteorder('=')).astype(dt)
        arr[0, :2] = [info.min, info.max]  # the extremes round as NumPy rounds them
    for order in ['C', 'F']:
        name = f"{out}/m_{dt.replace('<','le').replace('>','be').replace('|','')}_{order}.npy"
        np.save(name, np.asarray(arr, order=order))
        arr.astype('<f4').tofile(name + ".f32")
        names.append(name)
print("\n".join(names))
"#,
        &[dir.path()],
    );
    let mut count = 0;
    for name in listing.lines() {
        let m = read_npy(Path::new(name)).unwrap_or_else(|e| panic!("{name}: {e}"));
        let expected = raw_f32(Path::new(&format!("{name}.f32")));
        assert_eq!((m.rows, m.cols), (9, 6), "{name}");
        assert_eq!(
            m.data.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
            expected.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
            "{name}"
        );
        count += 1;
    }
    assert_eq!(count, 24);
}

#[test]
fn numpy_reads_what_we_write() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("ours.npy");
    write_npy_f32(&p, 2, 3, &[1.0, 2.5, -3.0, 4.0, 5.0, 6.25]).unwrap();
    let out = run_python(
        "import sys, numpy as np; a = np.load(sys.argv[1]); print(a.dtype, a.shape, a.flags['C_CONTIGUOUS'], a.ravel().tolist())",
        &[&p],
    );
    assert_eq!(
        out.trim(),
        "float32 (2, 3) True [1.0, 2.5, -3.0, 4.0, 5.0, 6.25]"
    );
}

#[test]
fn truncated_and_foreign_files_are_refused_with_the_reason() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("full.npy");
    write_npy_f32(&p, 10, 4, &[1.0; 40]).unwrap();
    let bytes = std::fs::read(&p).unwrap();
    let cut = &bytes[..bytes.len() - 20];
    let e = parse_npy(cut).unwrap_err().to_string();
    assert!(e.contains("truncated") && e.contains("row 8"), "{e}");
    // Streamed from the file, the same answer.
    let cut_file = dir.path().join("cut.npy");
    std::fs::write(&cut_file, cut).unwrap();
    let e = read_npy(&cut_file).unwrap_err().to_string();
    assert!(e.contains("truncated") && e.contains("row 8"), "{e}");
    let e = parse_npy(b"id,title\n1,a\n").unwrap_err().to_string();
    assert!(e.contains("not a NumPy .npy file"), "{e}");
    // Complex numbers, or a one-byte order mark on a wide type, are refused by name.
    for foreign in [&b"<c8"[..], b"|f4"] {
        let mut other = bytes.clone();
        let pos = other.windows(3).position(|w| w == b"<f4").unwrap();
        other[pos..pos + 3].copy_from_slice(foreign);
        let e = parse_npy(&other).unwrap_err().to_string();
        let name = std::str::from_utf8(foreign).unwrap();
        assert!(
            e.contains(name) && e.contains("integer (8 to 64 bits"),
            "{e}"
        );
    }
    // Random garbage never panics.
    let mut state = 1u64;
    for len in 0..200 {
        let mut junk = b"\x93NUMPY\x01\x00".to_vec();
        for _ in 0..len {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            junk.push((state >> 56) as u8);
        }
        let _ = parse_npy(&junk);
    }
}
