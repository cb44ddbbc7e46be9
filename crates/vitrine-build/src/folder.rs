//! The atlas folder on disk: what may be replaced, the lock a build holds on it, the temporary sibling
//! a build writes into (and those interrupted builds left), the swap that puts it in place, and the
//! viewer files copied into it.

use std::path::{Component, Path, PathBuf};

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
    "copy-pairs.csv",
];

/// Refuses to replace a folder unless it is empty or an atlas holding only what a build writes, so that
/// a mistyped --out, or files a user put into an atlas, are never deleted.
pub fn check_out(out: &Path) -> Result<()> {
    out_parts(out)?;
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

/// The folder `out` sits in and its name; refused when `out` does not end in a name (`.`, `..`,
/// `/`), which a build could not put a finished atlas in place of.
pub fn out_parts(out: &Path) -> Result<(PathBuf, String)> {
    let name = match out.components().next_back() {
        Some(Component::Normal(n)) => n.to_string_lossy().to_string(),
        _ => bail!(
            "--out {}: name the atlas folder itself (for the folder you are in, give ../ and its name)",
            out.display()
        ),
    };
    let parent = out
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    Ok((parent.to_path_buf(), name))
}

/// A hidden folder beside `out` for a build under way (`what`: building) or an atlas moved aside (old).
pub fn tmp_sibling(out: &Path, what: &str) -> PathBuf {
    let (parent, name) = out_parts(out).unwrap_or_else(|_| (PathBuf::from("."), "atlas".into()));
    parent.join(format!(".{name}.{what}-{}", std::process::id()))
}

/// The lock a build holds on its `--out` from start to end (a hidden `.NAME.lock` beside it): a
/// second build into the same folder is refused while the first runs. The system releases it
/// when the process ends however it ends; a build that ends normally also removes the file.
pub struct OutLock {
    file: std::fs::File,
    path: PathBuf,
}

impl Drop for OutLock {
    fn drop(&mut self) {
        // Removed while still locked; a build that opened the file just before and locks it just
        // after sees, by [`lock_out`]'s check, that it locked a file no longer there, and tries again.
        let _ = std::fs::remove_file(&self.path);
        let _ = self.file.unlock();
    }
}

/// Takes the lock on `out`, or says that another build holds it.
pub fn lock_out(out: &Path) -> Result<OutLock> {
    let (parent, name) = out_parts(out)?;
    std::fs::create_dir_all(&parent).with_context(|| format!("creating {}", parent.display()))?;
    let path = parent.join(format!(".{name}.lock"));
    for _ in 0..5 {
        let file = std::fs::OpenOptions::new()
            .create(true)
            .truncate(false)
            .write(true)
            .open(&path)
            .with_context(|| format!("opening the build lock {}", path.display()))?;
        match file.try_lock() {
            Ok(()) => {}
            Err(std::fs::TryLockError::WouldBlock) => bail!(
                "--out {}: another build is writing this atlas now ({} is locked); wait for it to end",
                out.display(),
                path.display()
            ),
            Err(std::fs::TryLockError::Error(e)) => {
                return Err(e).with_context(|| format!("locking {}", path.display()))
            }
        }
        if still_there(&file, &path) {
            return Ok(OutLock { file, path });
        }
    }
    bail!(
        "--out {}: could not take the build lock {}",
        out.display(),
        path.display()
    )
}

/// Whether the open `file` is still the one at `path` (not removed or replaced meanwhile).
fn still_there(file: &std::fs::File, path: &Path) -> bool {
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt;
        match (file.metadata(), std::fs::metadata(path)) {
            (Ok(a), Ok(b)) => a.dev() == b.dev() && a.ino() == b.ino(),
            _ => false,
        }
    }
    #[cfg(not(unix))]
    {
        let _ = file;
        path.exists()
    }
}

/// Removes the temporary folders that interrupted builds of `out` left beside it (`.NAME.building-PID`,
/// `.NAME.old-PID`); call it holding the lock on `out`, so that none of them is a live build's.
/// When `out` itself is missing and an old atlas was left moved aside (a build killed between
/// moving the old atlas aside and putting the new one in place), that atlas is put back first.
/// Returns how many folders and bytes went.
pub fn remove_stale(out: &Path) -> Result<(usize, u64)> {
    if !out.exists() {
        restore_moved_aside(out)?;
    }
    let (parent, name) = out_parts(out)?;
    let Ok(entries) = std::fs::read_dir(&parent) else {
        return Ok((0, 0));
    };
    let (mut folders, mut bytes) = (0, 0);
    for e in entries.filter_map(|e| e.ok()) {
        let file = e.file_name().to_string_lossy().to_string();
        let stale = ["building", "old"].iter().any(|what| {
            file.strip_prefix(&format!(".{name}.{what}-"))
                .is_some_and(|pid| !pid.is_empty() && pid.bytes().all(|b| b.is_ascii_digit()))
        });
        if stale && e.file_type().is_ok_and(|t| t.is_dir()) {
            bytes += crate::ingest::walk(&e.path())
                .iter()
                .filter_map(|f| f.metadata().ok())
                .map(|m| m.len())
                .sum::<u64>();
            std::fs::remove_dir_all(e.path())
                .with_context(|| format!("removing {}", e.path().display()))?;
            folders += 1;
        }
    }
    Ok((folders, bytes))
}

/// Puts back an atlas left at `.NAME.old-PID` when nothing is at `out` (the newest if several).
fn restore_moved_aside(out: &Path) -> Result<()> {
    let (parent, name) = out_parts(out)?;
    let Ok(entries) = std::fs::read_dir(&parent) else {
        return Ok(());
    };
    let prefix = format!(".{name}.old-");
    let newest = entries
        .filter_map(|e| e.ok())
        .filter(|e| {
            let f = e.file_name().to_string_lossy().to_string();
            f.strip_prefix(&prefix)
                .is_some_and(|pid| !pid.is_empty() && pid.bytes().all(|b| b.is_ascii_digit()))
                && e.path().join(MANIFEST_FILE).is_file()
        })
        .max_by_key(|e| e.metadata().and_then(|m| m.modified()).ok());
    if let Some(e) = newest {
        std::fs::rename(e.path(), out).with_context(|| {
            format!(
                "putting back the atlas an interrupted build left at {}",
                e.path().display()
            )
        })?;
        eprintln!(
            "note: put back the atlas an interrupted build had moved aside to {}",
            e.path().display()
        );
    }
    Ok(())
}

/// Puts the finished folder in place. Every file and folder of it is flushed to disk first. On
/// Linux the old atlas (if any) and the new one swap places in one step (`renameat2` with
/// `RENAME_EXCHANGE`), so that `out` is never missing; elsewhere, or where the file system cannot
/// swap, the old one is moved aside, the new one in, and the old one back if that fails. The old
/// atlas is removed after.
pub fn replace_dir(tmp: &Path, out: &Path) -> Result<()> {
    sync_tree(tmp).with_context(|| format!("flushing {} to disk", tmp.display()))?;
    let (parent, _) = out_parts(out)?;
    let put = |from: &Path| {
        std::fs::rename(from, out)
            .with_context(|| format!("putting the new atlas at {}", out.display()))
    };
    if !out.exists() {
        put(tmp)?;
    } else if exchange(tmp, out).is_ok() {
        // `tmp` now holds the old atlas; should removing it fail, the next build removes it.
        sync_dir(&parent);
        let _ = std::fs::remove_dir_all(tmp);
    } else {
        let old = tmp_sibling(out, "old");
        std::fs::rename(out, &old)
            .with_context(|| format!("moving the old atlas {} aside", out.display()))?;
        if let Err(e) = put(tmp) {
            if std::fs::rename(&old, out).is_err() {
                return Err(e).with_context(|| {
                    format!(
                        "the old atlas is at {} (the next build puts it back)",
                        old.display()
                    )
                });
            }
            return Err(e);
        }
        sync_dir(&parent);
        let _ = std::fs::remove_dir_all(&old);
    }
    sync_dir(&parent);
    Ok(())
}

/// Swaps two paths in one step.
#[cfg(target_os = "linux")]
fn exchange(a: &Path, b: &Path) -> std::io::Result<()> {
    use std::os::unix::ffi::OsStrExt;
    let c = |p: &Path| std::ffi::CString::new(p.as_os_str().as_bytes());
    let (a, b) = (c(a)?, c(b)?);
    // SAFETY: two NUL-terminated paths that live across the call; renameat2 reads them only.
    let r = unsafe {
        libc::syscall(
            libc::SYS_renameat2,
            libc::AT_FDCWD,
            a.as_ptr(),
            libc::AT_FDCWD,
            b.as_ptr(),
            libc::RENAME_EXCHANGE,
        )
    };
    if r == 0 {
        Ok(())
    } else {
        Err(std::io::Error::last_os_error())
    }
}

#[cfg(not(target_os = "linux"))]
fn exchange(_: &Path, _: &Path) -> std::io::Result<()> {
    Err(std::io::ErrorKind::Unsupported.into())
}

/// Flushes every file under `dir`, and the folders themselves, to disk.
fn sync_tree(dir: &Path) -> std::io::Result<()> {
    for f in crate::ingest::walk(dir) {
        // (Windows flushes only files opened for writing.)
        std::fs::OpenOptions::new()
            .read(true)
            .write(cfg!(windows))
            .open(&f)?
            .sync_all()?;
    }
    let mut folders = vec![dir.to_path_buf()];
    while let Some(d) = folders.pop() {
        for e in std::fs::read_dir(&d)?.filter_map(|e| e.ok()) {
            if e.file_type().is_ok_and(|t| t.is_dir()) {
                folders.push(e.path());
            }
        }
        sync_dir(&d);
    }
    Ok(())
}

/// Flushes a folder's entries to disk where the system allows it (a folder opens for that on Unix).
fn sync_dir(dir: &Path) {
    #[cfg(unix)]
    if let Ok(f) = std::fs::File::open(dir) {
        let _ = f.sync_all();
    }
    #[cfg(not(unix))]
    let _ = dir;
}

/// The viewer files (index.html, the wasm module and its loader) make the atlas self-contained.
pub fn copy_viewer(
    viewer: Option<&Path>,
    embedded: &[(&str, &[u8])],
    dir: &Path,
    report: &mut BuildReport,
) -> Result<()> {
    place_viewer(viewer_dir(viewer), embedded, dir, report)
}

/// Copies the folder of viewer files `found`, else writes the `embedded` ones, else notes that
/// the atlas has no viewer.
fn place_viewer(
    found: Option<PathBuf>,
    embedded: &[(&str, &[u8])],
    dir: &Path,
    report: &mut BuildReport,
) -> Result<()> {
    if found.is_none() && !embedded.is_empty() {
        for (rel, bytes) in embedded {
            let to = dir.join(rel);
            if let Some(parent) = to.parent() {
                std::fs::create_dir_all(parent)?;
            }
            std::fs::write(&to, bytes)
                .with_context(|| format!("writing viewer file {}", to.display()))?;
        }
        return Ok(());
    }
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

/// A file's extension in lower case ("" without one): what the build tells formats by.
pub(crate) fn lower_extension(path: &Path) -> String {
    path.extension()
        .map(|e| e.to_string_lossy().to_lowercase())
        .unwrap_or_default()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// With no folder of viewer files given or found, the files the program holds are written;
    /// a folder given is copied instead of them.
    #[test]
    fn the_viewer_files_held_are_written_and_a_given_folder_wins() {
        let dir = tempfile::tempdir().unwrap();
        let held: &[(&str, &[u8])] = &[("index.html", b"<p>held"), ("viewer/app.js", b"held()")];
        let atlas = dir.path().join("atlas");
        std::fs::create_dir_all(&atlas).unwrap();
        let mut report = BuildReport::default();
        place_viewer(None, held, &atlas, &mut report).unwrap();
        assert_eq!(std::fs::read(atlas.join("index.html")).unwrap(), b"<p>held");
        assert_eq!(
            std::fs::read(atlas.join("viewer/app.js")).unwrap(),
            b"held()"
        );
        assert!(report.notes.is_empty());
        place_viewer(None, &[], &dir.path().join("bare"), &mut report).unwrap();
        assert!(
            report.notes[0].contains("no viewer files"),
            "{:?}",
            report.notes
        );
        let given = dir.path().join("given");
        std::fs::create_dir_all(&given).unwrap();
        std::fs::write(given.join("index.html"), b"<p>given").unwrap();
        copy_viewer(Some(&given), held, &atlas, &mut report).unwrap();
        assert_eq!(
            std::fs::read(atlas.join("index.html")).unwrap(),
            b"<p>given"
        );
    }
}
