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
    common::build_atlas(d, &["--vectors", "a.npz", "--catalogue", "records.csv"]);
    let atlas = vitrine_build::read::Atlas::open(&d.join("atlas")).unwrap();
    let atlas_ids = atlas.ids().unwrap();
    let rows_of: Vec<u32> = atlas.array(&atlas.manifest.source_rows).unwrap();
    for (k, &r) in rows_of.iter().enumerate() {
        assert_eq!(atlas_ids.get(k), ids[r as usize]);
    }
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
