//! The atlas folder on disk: what may be replaced, the temporary sibling a build writes into, the
//! rename that puts it in place, and the viewer files copied into it.

use std::path::{Path, PathBuf};

use anyhow::{bail, Context, Result};
use vitrine_format::{FORMAT_NAME, MANIFEST_FILE};

use crate::report::BuildReport;

/// What a build writes at the top of an atlas folder; nothing else may be there when one is replaced.
pub const ATLAS_ENTRIES: &[&str] = &[
    MANIFEST_FILE,
    "arrays",
    "sheets",
    "viewer",
    "index.html",
    "build-report.json",
    "image-digests.txt",
];

/// Refuses to replace a folder unless it is empty or an atlas holding only what a build writes, so that
/// a mistyped --out, or files a user put into an atlas, are never deleted.
pub fn check_out(out: &Path) -> Result<()> {
    if !out.exists() {
        return Ok(());
    }
    if !out.is_dir() {
        bail!("--out {}: exists and is not a folder", out.display());
    }
    let entries: Vec<String> = std::fs::read_dir(out)?
        .filter_map(|e| e.ok())
        .map(|e| e.file_name().to_string_lossy().to_string())
        .collect();
    if entries.is_empty() {
        return Ok(());
    }
    let is_atlas = std::fs::read_to_string(out.join(MANIFEST_FILE))
        .ok()
        .and_then(|t| serde_json::from_str::<serde_json::Value>(&t).ok())
        .is_some_and(|v| v.get("format").and_then(|f| f.as_str()) == Some(FORMAT_NAME));
    if !is_atlas {
        bail!(
            "--out {}: the folder exists, is not empty and is not an atlas; choose a new folder",
            out.display()
        );
    }
    let mut foreign: Vec<&String> = entries
        .iter()
        .filter(|e| !ATLAS_ENTRIES.contains(&e.as_str()))
        .collect();
    foreign.sort();
    if !foreign.is_empty() {
        bail!(
            "--out {}: the atlas folder also holds files a build did not write ({}); a rebuild replaces the \
             whole folder, so move them elsewhere or choose a new --out",
            out.display(),
            foreign.iter().map(|s| s.as_str()).collect::<Vec<_>>().join(", ")
        );
    }
    Ok(())
}

/// A hidden folder beside `out` for a build under way (`what`: building) or an atlas moved aside (old).
pub fn tmp_sibling(out: &Path, what: &str) -> PathBuf {
    let name = out
        .file_name()
        .map(|s| s.to_string_lossy().to_string())
        .unwrap_or_else(|| "atlas".into());
    out.with_file_name(format!(".{name}.{what}-{}", std::process::id()))
}

/// Puts the finished folder in place: the old atlas (if any) is moved aside first and removed after.
pub fn replace_dir(tmp: &Path, out: &Path) -> Result<()> {
    if out.exists() {
        let old = tmp_sibling(out, "old");
        std::fs::rename(out, &old)
            .with_context(|| format!("moving the old atlas {} aside", out.display()))?;
        std::fs::rename(tmp, out)
            .with_context(|| format!("putting the new atlas at {}", out.display()))?;
        std::fs::remove_dir_all(&old)?;
    } else {
        std::fs::rename(tmp, out)
            .with_context(|| format!("putting the new atlas at {}", out.display()))?;
    }
    Ok(())
}

/// The viewer files (index.html, the wasm module and its loader) make the atlas self-contained.
pub fn copy_viewer(viewer: Option<&Path>, dir: &Path, report: &mut BuildReport) -> Result<()> {
    let found = viewer_dir(viewer);
    let Some(src) = found else {
        report.notes.push(
            "no viewer files were found (build them with ./build.sh atlas, or pass --viewer DIR): \
             the atlas holds the data only"
                .into(),
        );
        return Ok(());
    };
    for entry in crate::ingest::walk(&src) {
        let rel = entry.strip_prefix(&src).unwrap();
        let to = dir.join(rel);
        if let Some(parent) = to.parent() {
            std::fs::create_dir_all(parent)?;
        }
        std::fs::copy(&entry, &to)
            .with_context(|| format!("copying viewer file {}", entry.display()))?;
    }
    Ok(())
}

pub fn viewer_dir(explicit: Option<&Path>) -> Option<PathBuf> {
    let ok = |p: &Path| p.join("index.html").is_file();
    if let Some(p) = explicit {
        return ok(p).then(|| p.to_path_buf());
    }
    if let Ok(p) = std::env::var("VITRINE_VIEWER") {
        let p = PathBuf::from(p);
        if ok(&p) {
            return Some(p);
        }
    }
    let exe = std::env::current_exe().ok()?;
    let exe_dir = exe.parent()?;
    [exe_dir.join("viewer"), exe_dir.join("../viewer")]
        .into_iter()
        .find(|p| ok(p))
}
