//! Compiles the viewer files into the `vitrine` binary, so that an installed binary writes
//! complete atlases with no checkout beside it. The files are taken from `VITRINE_EMBED_VIEWER`,
//! else from the workspace's `target/viewer` (what `./build.sh atlas` makes); when neither holds
//! an `index.html`, the binary holds none and looks for the files at run time (`--viewer`,
//! `VITRINE_VIEWER`, or beside the program).

use std::path::{Path, PathBuf};

fn files(dir: &Path, out: &mut Vec<PathBuf>) {
    let Ok(rd) = std::fs::read_dir(dir) else {
        return;
    };
    let mut entries: Vec<PathBuf> = rd.filter_map(|e| e.ok().map(|e| e.path())).collect();
    entries.sort();
    for p in entries {
        if p.is_dir() {
            files(&p, out);
        } else {
            out.push(p);
        }
    }
}

fn main() {
    println!("cargo:rerun-if-env-changed=VITRINE_EMBED_VIEWER");
    let manifest = PathBuf::from(std::env::var("CARGO_MANIFEST_DIR").unwrap());
    let dir = std::env::var_os("VITRINE_EMBED_VIEWER")
        .map(PathBuf::from)
        .unwrap_or_else(|| manifest.join("../../target/viewer"));
    let index = dir.join("index.html");
    let mut list = Vec::new();
    // Only paths that exist are watched (cargo runs a script that watches a missing path on every
    // build); without viewer files, the script runs again when this file or VITRINE_EMBED_VIEWER
    // changes (./build.sh sets it once the viewer is built).
    println!("cargo:rerun-if-changed=build.rs");
    if index.is_file() {
        files(&dir, &mut list);
        // A file added to the folders changes their times.
        for d in [dir.clone(), dir.join("viewer")] {
            if d.is_dir() {
                println!("cargo:rerun-if-changed={}", d.display());
            }
        }
    }
    let mut code = String::from("/// The viewer files compiled in: (path inside the atlas, bytes).\npub static FILES: &[(&str, &[u8])] = &[\n");
    for p in &list {
        println!("cargo:rerun-if-changed={}", p.display());
        let rel = p.strip_prefix(&dir).unwrap();
        let rel: Vec<String> = rel
            .components()
            .map(|c| c.as_os_str().to_string_lossy().to_string())
            .collect();
        let abs = std::fs::canonicalize(p).unwrap();
        code.push_str(&format!(
            "    ({:?}, include_bytes!({:?})),\n",
            rel.join("/"),
            abs.display().to_string()
        ));
    }
    code.push_str("];\n");
    let out = PathBuf::from(std::env::var("OUT_DIR").unwrap()).join("viewer_files.rs");
    std::fs::write(out, code).unwrap();
}
