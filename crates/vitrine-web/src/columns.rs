//! A tiled atlas's catalogue columns, fetched whole when first used: a field's arrays are stored
//! by leaf, so its column is every leaf's chunk, fetched a batch at a time with the progress
//! shown, joined and checked whole, then decoded as in an atlas fetched whole. With the first
//! field come the items' cells, from which the overview pictures are drawn again dimmed.

use super::*;

/// Requests in flight at once while a column is fetched.
const BATCH: usize = 256;

thread_local! {
    /// Fields whose columns are on their way.
    static FETCHING: RefCell<HashSet<String>> = RefCell::new(HashSet::new());
}

/// Whether field `name`'s column is on its way.
pub fn fetching(name: &str) -> bool {
    FETCHING.with(|f| f.borrow().contains(name))
}

/// Shows how far the fetch of the columns has come (in the page's count line and its state).
fn show(text: &str) {
    if let Some(c) = by_id("atlas-count") {
        c.set_text_content(Some(text));
    }
}

/// Runs `done` once the columns of fields `names` are here: at once in an atlas fetched whole,
/// after [`fetch`] in a tiled one.
pub fn ensure(names: Vec<String>, done: impl FnOnce() + 'static) {
    let tiled = app().is_some_and(|a| a.borrow().atlas.tiled.is_some());
    if tiled {
        fetch(names, done);
    } else {
        done();
    }
}

/// Fetches the columns of fields `names` that are not here (and the cells, the first time), with
/// progress; then `done` runs. A field already on its way is not fetched twice.
pub fn fetch(names: Vec<String>, done: impl FnOnce() + 'static) {
    let Some(app) = app() else { return };
    let names: Vec<String> = {
        let a = app.borrow();
        names
            .into_iter()
            .filter(|n| !a.atlas.has_field(n) && !fetching(n))
            .collect()
    };
    let cells_wanted = app
        .borrow()
        .atlas
        .tiled
        .as_ref()
        .is_some_and(|t| t.cells.is_empty())
        && !FETCHING.with(|f| f.borrow().contains(CELLS));
    if names.is_empty() && !cells_wanted {
        done();
        return;
    }
    FETCHING.with(|f| {
        let mut f = f.borrow_mut();
        f.extend(names.iter().cloned());
        if cells_wanted {
            f.insert(CELLS.to_string());
        }
    });
    set_state("columns", "fetching");
    wasm_bindgen_futures::spawn_local(async move {
        // The fields first, and the filter with them; then the cells, for the dimmed overviews.
        let mut result = Ok(());
        if !names.is_empty() {
            result = fetch_now(&names, false).await;
            forget(&names);
        }
        done();
        request_frame();
        if cells_wanted && result.is_ok() {
            result = fetch_now(&[], true).await;
        }
        if cells_wanted {
            forget(&[CELLS.to_string()]);
        }
        let count = app.borrow().atlas.n;
        show(&format!("{count} items"));
        match result {
            Ok(()) => set_state("columns", "ready"),
            Err(e) => {
                set_state("columns", "failed");
                select::note(&format!("The catalogue column could not be loaded: {e}"));
            }
        }
        request_frame();
    });
}

/// Notes that `names` are no longer on their way.
fn forget(names: &[String]) {
    FETCHING.with(|f| {
        let mut f = f.borrow_mut();
        for n in names {
            f.remove(n);
        }
    });
}

/// The key under which the cells' fetch is noted.
const CELLS: &str = "\u{0}cells";

async fn fetch_now(names: &[String], cells: bool) -> Result<(), String> {
    let Some(app) = app() else { return Ok(()) };
    // What to fetch: each array's list of checksums, then its chunks.
    let (arrays, n) = {
        let a = app.borrow();
        let m = &a.atlas.manifest;
        let mut arrays: Vec<vitrine_format::ArrayRef> = Vec::new();
        for name in names {
            let f = m
                .fields
                .iter()
                .find(|f| &f.name == name)
                .ok_or_else(|| format!("the atlas has no field {name}"))?;
            arrays.extend(
                vitrine_corpus::columns::field_arrays(f)
                    .into_iter()
                    .cloned(),
            );
        }
        if cells {
            if let Some(t) = &m.tiles {
                arrays.push(t.cells.clone());
            }
        }
        (arrays, a.atlas.n)
    };
    let mut lists = Vec::new();
    let mut chunks: Vec<(String, u64)> = Vec::new();
    {
        let a = app.borrow();
        for r in &arrays {
            let (sums, files) = a
                .atlas
                .chunk_files(r)
                .ok_or_else(|| format!("{} is not stored by leaf", r.file))?;
            lists.push((sums.file.clone(), sums.bytes));
            chunks.extend(files.into_iter().map(|f| (f, 0)));
        }
    }
    let what = if names.is_empty() {
        "the map's cells".to_string()
    } else {
        names.join(", ")
    };
    show(&format!("{n} items · fetching {what}…"));
    let mut got = fetch_many("", &lists).await?;
    let (total, mut done, mut bytes) = (chunks.len(), 0usize, 0usize);
    for batch in chunks.chunks(BATCH) {
        let mut part = fetch_many("", batch).await?;
        for (f, _) in batch {
            let b = part.take(f).unwrap_or_default();
            bytes += b.len();
            got.insert(f.clone(), b);
        }
        done += batch.len();
        show(&format!(
            "{n} items · fetching {what}: {:.0} % ({:.1} MB)",
            100.0 * done as f64 / total.max(1) as f64,
            bytes as f64 / 1e6
        ));
        set_state("columnsProgress", &format!("{done}/{total}"));
    }
    show(&format!("{n} items · reading {what}…"));
    let mut a = app.borrow_mut();
    let mut whole = vitrine_format::AtlasFiles::new();
    for r in &arrays {
        let bytes = a.atlas.join_chunks(r, &got).map_err(|e| e.to_string())?;
        whole.insert(r.file.clone(), bytes);
    }
    drop(got);
    for name in names {
        a.atlas.add_field(name, &whole).map_err(|e| e.to_string())?;
    }
    if cells {
        let r = a.atlas.manifest.tiles.as_ref().map(|t| t.cells.clone());
        if let (Some(r), Some(t)) = (r, a.atlas.tiled.as_mut()) {
            if let Some(b) = whole.take(&r.file) {
                t.cells = b;
            }
        }
    }
    Ok(())
}
