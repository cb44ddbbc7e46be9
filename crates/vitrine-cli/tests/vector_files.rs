//! Vectors in the files labs keep them in, written by the libraries that define them: NumPy's
//! `np.savez` and `np.savez_compressed` (.npz, with ids as unicode, byte strings or 64-bit
//! integers) and the `safetensors` package's `safetensors.numpy.save_file`; each read back equal to
//! the same vectors as a .npy, and built into an atlas whose items carry the file's own ids.

mod common;

use std::path::Path;
use vitrine_build::vectors::read_vector_file;

fn rows(p: &Path, key: Option<&str>) -> (Vec<f32>, Option<Vec<String>>) {
    let f = read_vector_file(p, key).unwrap_or_else(|e| panic!("{}: {e}", p.display()));
    (f.matrix.data, f.ids)
}

/// Builds an atlas from `vectors` and records.csv (the records in reverse order) and checks that
/// each item is the record its vector's id names (`ids`: the file's row order).
fn built_items_carry_the_files_ids(d: &Path, vectors: &str, ids: &[String]) {
    let _ = std::fs::remove_dir_all(d.join("atlas"));
    common::build_atlas(d, &["--vectors", vectors, "--catalogue", "records.csv"]);
    let atlas = vitrine_build::read::Atlas::open(&d.join("atlas")).unwrap();
    let atlas_ids = atlas.ids().unwrap();
    let rows_of: Vec<u32> = atlas.array(&atlas.manifest.source_rows).unwrap();
    assert_eq!(rows_of.len(), ids.len());
    for (k, &r) in rows_of.iter().enumerate() {
        assert_eq!(atlas_ids.get(k), ids[r as usize]);
    }
}

#[test]
fn npz_and_safetensors_read_as_the_npy_they_hold_with_their_ids() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    common::run_python(
        r#"
import sys, numpy as np
from safetensors.numpy import save_file
d = sys.argv[1]
rng = np.random.default_rng(3)
v = rng.normal(size=(50, 8)).astype(np.float32)
ids = [f"sheet-{i:03d}-é" for i in range(50)]
np.save(f"{d}/v.npy", v)
np.save(f"{d}/v16.npy", v.astype(np.float16).astype(np.float32))
np.savez(f"{d}/a.npz", vectors=v, ids=np.array(ids))
np.savez_compressed(f"{d}/b.npz", emb=v, ids=np.array([s.encode() for s in ids], dtype="S"))
np.savez(f"{d}/c.npz", first=v, second=v * 2)
np.savez(f"{d}/n.npz", vectors=v, ids=np.arange(50, dtype=np.int64) + 10**12)
save_file({"embeddings": v}, f"{d}/e.safetensors")
save_file({"embeddings": v.astype(np.float16)}, f"{d}/h.safetensors")
save_file({"a": v, "b": v[:, :4].copy()}, f"{d}/two.safetensors")
with open(f"{d}/ids.txt", "w") as f:
    f.write("\n".join(ids) + "\n")
with open(f"{d}/records.csv", "w") as f:
    f.write("id,n\n")
    for i in reversed(range(50)):
        f.write(f"{ids[i]},{i}\n")
"#,
        &[d],
    );
    let (npy, _) = rows(&d.join("v.npy"), None);
    let ids: Vec<String> = std::fs::read_to_string(d.join("ids.txt"))
        .unwrap()
        .lines()
        .map(str::to_string)
        .collect();
    let (a, a_ids) = rows(&d.join("a.npz"), None);
    assert_eq!(a, npy);
    assert_eq!(a_ids.as_deref(), Some(&ids[..]), "unicode ids");
    let (b, b_ids) = rows(&d.join("b.npz"), None);
    assert_eq!(b, npy);
    assert_eq!(
        b_ids.as_deref(),
        Some(&ids[..]),
        "byte-string ids, deflated"
    );
    let (_, n_ids) = rows(&d.join("n.npz"), None);
    assert_eq!(n_ids.unwrap()[49], "1000000000049", "64-bit ids exactly");
    let (e, _) = rows(&d.join("e.safetensors"), None);
    assert_eq!(e, npy);
    let (h, _) = rows(&d.join("h.safetensors"), None);
    assert_eq!(
        h,
        rows(&d.join("v16.npy"), None).0,
        "float16 as NumPy widens it"
    );
    // Several arrays: named, or refused naming them.
    let (second, _) = rows(&d.join("c.npz"), Some("second"));
    assert_eq!(second, npy.iter().map(|x| x * 2.0).collect::<Vec<_>>());
    for (file, says) in [("c.npz", "first, second"), ("two.safetensors", "a, b")] {
        let e = read_vector_file(&d.join(file), None)
            .err()
            .unwrap()
            .to_string();
        assert!(
            e.contains(file) && e.contains(says) && e.contains("--vectors-key"),
            "{e}"
        );
    }
    let e = read_vector_file(&d.join("a.npz"), Some("nope"))
        .err()
        .unwrap()
        .to_string();
    assert!(e.contains("\"nope\"") && e.contains("ids, vectors"), "{e}");

    // Built: the .npz's ids match the catalogue's records whatever their order.
    built_items_carry_the_files_ids(d, "a.npz", &ids);
    // Ids both in the file and given: refused.
    let o = common::quick_build()
        .current_dir(d)
        .args([
            "--vectors",
            "a.npz",
            "--vector-ids",
            "ids.txt",
            "--out",
            "both",
        ])
        .output()
        .unwrap();
    let said = common::failure_of(&o);
    assert!(
        said.contains("a.npz") && said.contains("--vector-ids"),
        "{said}"
    );
}

/// Parquet and Arrow IPC tables written by pyarrow (the Apache Arrow project's own library): a
/// column of lists (list, large list, fixed-size list; float32, float16, float64, int8) beside an
/// id column (text or integers), in each codec pyarrow writes; read equal to the .npy of the same
/// vectors, with their ids. Ragged, missing and doubled values are refused naming the row.
#[test]
fn parquet_and_arrow_tables_read_as_the_npy_they_hold_with_their_ids() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    common::run_python(
        r#"
import sys, numpy as np, pyarrow as pa, pyarrow.parquet as pq, pyarrow.feather as feather
d = sys.argv[1]
rng = np.random.default_rng(4)
v = rng.normal(size=(40, 6)).astype(np.float32)
ids = [f"pl-{i:03d}-ü" for i in range(40)]
np.save(f"{d}/v.npy", v)
np.save(f"{d}/v16.npy", v.astype(np.float16).astype(np.float32))
np.save(f"{d}/v8.npy", np.round(v * 20).astype(np.int8).astype(np.float32))
lists = pa.array(list(v), type=pa.list_(pa.float32()))
# The id column after the vectors and before; other columns beside them are not read.
t = pa.table({"embedding": lists, "id": ids, "title": [f"t{i}" for i in range(40)]})
pq.write_table(t, f"{d}/snappy.parquet")
pq.write_table(t.select(["title", "id", "embedding"]), f"{d}/zstd.parquet", compression="zstd", row_group_size=7)
fixed = pa.FixedSizeListArray.from_arrays(pa.array(v.astype(np.float16).ravel()), 6)
pq.write_table(pa.table({"ids": pa.array(range(10**12, 10**12 + 40), pa.int64()), "v": fixed}), f"{d}/f16.parquet", compression="gzip")
large = pa.array(list(v.astype(np.float64)), type=pa.large_list(pa.float64()))
pq.write_table(pa.table({"v": large}), f"{d}/noids.parquet", compression="lz4")
ints = pa.array(list(np.round(v * 20).astype(np.int8)), type=pa.list_(pa.int8()))
pq.write_table(pa.table({"id": ids, "q": ints}), f"{d}/int8.parquet")
feather.write_feather(t, f"{d}/t.feather")   # Arrow IPC file, lz4 by default
with pa.OSFile(f"{d}/t.arrows", "wb") as sink:
    with pa.ipc.new_stream(sink, t.schema) as w:
        w.write_table(t, max_chunksize=9)
# Bad tables.
ragged = pa.array([list(r) for r in v[:5]] + [list(v[5][:4])], type=pa.list_(pa.float32()))
pq.write_table(pa.table({"id": ids[:6], "v": ragged}), f"{d}/ragged.parquet")
holes = pa.array([list(r) for r in v[:3]] + [None], type=pa.list_(pa.float32()))
pq.write_table(pa.table({"id": ids[:4], "v": holes}), f"{d}/null.parquet")
pq.write_table(pa.table({"id": ids[:2], "v": pa.array([[1.0, None], [2.0, 3.0]], pa.list_(pa.float32()))}), f"{d}/nullvalue.parquet")
pq.write_table(pa.table({"id": ["a", "b", "a"], "v": pa.array([[1.0], [2.0], [3.0]], pa.list_(pa.float32()))}), f"{d}/twice.parquet")
pq.write_table(pa.table({"id": ids[:2], "a": pa.array([[1.0], [2.0]]), "b": pa.array([[1.0], [2.0]])}), f"{d}/two.parquet")
pq.write_table(pa.table({"id": ids[:2], "x": [1.0, 2.0]}), f"{d}/flat.parquet")
pq.write_table(pa.table({"id": ids[:2], "v": pa.array([[], []], pa.list_(pa.float32()))}), f"{d}/empty.parquet")
with open(f"{d}/records.csv", "w") as f:
    f.write("id,n\n")
    for i in reversed(range(40)):
        f.write(f"{ids[i]},{i}\n")
with open(f"{d}/ids.txt", "w") as f:
    f.write("\n".join(ids) + "\n")
"#,
        &[d],
    );
    let (npy, _) = rows(&d.join("v.npy"), None);
    let ids: Vec<String> = std::fs::read_to_string(d.join("ids.txt"))
        .unwrap()
        .lines()
        .map(str::to_string)
        .collect();
    for file in ["snappy.parquet", "zstd.parquet", "t.feather", "t.arrows"] {
        let (m, file_ids) = rows(&d.join(file), None);
        assert_eq!(m, npy, "{file}");
        assert_eq!(file_ids.as_deref(), Some(&ids[..]), "{file}");
    }
    let (m, file_ids) = rows(&d.join("f16.parquet"), None);
    assert_eq!(
        m,
        rows(&d.join("v16.npy"), None).0,
        "float16 as NumPy widens it"
    );
    assert_eq!(file_ids.unwrap()[39], "1000000000039", "64-bit ids exactly");
    let (m, file_ids) = rows(&d.join("noids.parquet"), None);
    assert_eq!(m, npy, "float64 large lists");
    assert!(file_ids.is_none());
    assert_eq!(
        rows(&d.join("int8.parquet"), None).0,
        rows(&d.join("v8.npy"), None).0
    );
    let (m, _) = rows(&d.join("snappy.parquet"), Some("embedding"));
    assert_eq!(m, npy);

    let fails = |file: &str, key: Option<&str>| {
        read_vector_file(&d.join(file), key)
            .err()
            .unwrap_or_else(|| panic!("{file} should be refused"))
            .to_string()
    };
    let e = fails("ragged.parquet", None);
    assert!(
        e.contains("row 6 (id pl-005-ü): its vector has 4 values, the rows before it 6"),
        "{e}"
    );
    let e = fails("null.parquet", None);
    assert!(
        e.contains("row 4 (id pl-003-ü): column \"v\" has no vector"),
        "{e}"
    );
    let e = fails("nullvalue.parquet", None);
    assert!(e.contains("row 1") && e.contains("missing"), "{e}");
    let e = fails("twice.parquet", None);
    assert!(e.contains("\"a\" appears twice (rows 1 and 3)"), "{e}");
    let e = fails("two.parquet", None);
    assert!(
        e.contains("several columns of lists (a, b)") && e.contains("--vectors-key"),
        "{e}"
    );
    let e = fails("flat.parquet", None);
    assert!(
        e.contains("no column of lists") && e.contains("x (Float64)"),
        "{e}"
    );
    let e = fails("empty.parquet", None);
    assert!(e.contains("empty lists"), "{e}");
    let e = fails("snappy.parquet", Some("title"));
    assert!(e.contains("column \"title\" is Utf8"), "{e}");
    let e = fails("snappy.parquet", Some("nope"));
    assert!(e.contains("--vectors-key \"nope\": no such column"), "{e}");
    std::fs::write(d.join("fake.parquet"), b"not parquet").unwrap();
    let e = fails("fake.parquet", None);
    assert!(e.contains("fake.parquet: not a Parquet file"), "{e}");

    // Built: the table's ids match the catalogue's records whatever their order.
    built_items_carry_the_files_ids(d, "zstd.parquet", &ids);
}
