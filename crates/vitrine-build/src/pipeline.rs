//! `vitrine build` from start to end: options checked → inputs read and matched → stages computed
//! (reduction, neighbour graph, similarity map, timeline map, clusters, lattice, quality, atlas
//! order) → the atlas written into a temporary sibling folder → renamed into place.

use anyhow::{Context, Result};

pub use crate::options::{BuildOptions, NeighbourSearch, Optimiser};
pub use crate::progress::{Progress, Silent};
pub use crate::report::BuildReport;
use crate::report::Laps;
use crate::stages::{self, Computed, QualityRows};

/// Builds the atlas `opts` describes. Nothing is written at `opts.out` until the whole atlas is
/// complete and has validated; an earlier atlas there stays until then.
pub fn build(opts: &BuildOptions, progress: &dyn Progress) -> Result<BuildReport> {
    opts.check()?;
    // Held to the end: no second build writes this atlas meanwhile, and what interrupted builds of
    // it left beside it can go.
    let _lock = crate::folder::lock_out(&opts.out)?;
    let (stale, stale_bytes) = crate::folder::remove_stale(&opts.out)?;
    if stale > 0 {
        progress.note(&format!(
            "removed {stale} temporary folder(s) that interrupted builds of {} left ({:.1} MB)",
            opts.out.display(),
            stale_bytes as f64 / 1e6
        ));
    }
    let mut laps = Laps::new();
    // Colour notes of an earlier build in this process are not this one's.
    vitrine_images::thumbs::take_colour_notes();
    // An IIIF source becomes a catalogue and a folder of fetched pictures, which the build then
    // reads as it reads a folder of scans.
    let with_pictures;
    let (opts, iiif) = match &opts.iiif {
        Some(i) => {
            let i = crate::iiif::IiifOptions {
                long_side: *opts.cells.last().expect("levels are checked"),
                ..i.clone()
            };
            let source = crate::iiif::read_source(&i, progress)?;
            laps.lap("IIIF source");
            with_pictures = BuildOptions {
                images: Some(source.folder.clone()),
                ..opts.clone()
            };
            (&with_pictures, Some(source))
        }
        None => (opts, None),
    };
    let (vectors, inputs) = crate::ingest::read(opts, iiif, progress, &mut laps)?;
    if let Some(path) = &opts.save_vectors {
        crate::vectors::write_npz(path, &inputs.items.ids, &vectors)
            .with_context(|| format!("--save-vectors {}", path.display()))?;
        progress.note(&format!(
            "vectors saved with their ids: {} (np.load reads it; --vectors takes it back)",
            path.display()
        ));
    }

    // The quality figures measure the maps against the vectors as given, so their sample is
    // kept before any reduction.
    let quality_rows = QualityRows::new(&vectors);
    let reduced = stages::reduce(vectors, opts, progress);
    if reduced.reduction.pca.is_some() {
        laps.lap("PCA reduction");
    }
    let browser_vectors = stages::browser_vectors(&reduced, opts, progress);
    if browser_vectors.is_some() {
        laps.lap("vectors for the browser");
    }
    let graph = stages::neighbour_graph(&reduced, opts, progress);
    laps.lap("neighbour graph");
    let mut map = stages::similarity_map(&reduced, &graph.graph, opts, progress);
    drop(reduced.vectors);
    laps.lap("similarity map");
    let timeline = match inputs.datings(opts.date_field.as_deref())? {
        Some((field, ranges)) => stages::timeline_map(&mut map, &field, &ranges, progress),
        None => None,
    };
    if timeline.is_some() {
        laps.lap("timeline map");
    }
    let clusters = stages::clusters(&map);
    laps.lap("clusters");
    let mut lattice = stages::lattice(&map);
    laps.lap("lattice");
    let quality = stages::quality_figures(quality_rows, opts.metric, &map, &mut lattice, progress);
    let order = stages::atlas_order(&map, opts.tile_items);
    laps.lap("quality figures");
    let computed = Computed {
        reduction: reduced.reduction,
        graph,
        map,
        timeline,
        clusters,
        lattice,
        quality,
        order,
        browser_vectors,
    };

    let tmp = crate::folder::tmp_sibling(&opts.out, "building");
    if tmp.exists() {
        std::fs::remove_dir_all(&tmp)?;
    }
    std::fs::create_dir_all(&tmp).with_context(|| format!("creating {}", tmp.display()))?;
    let n = inputs.items.ids.len();
    match crate::write::write_atlas(opts, &tmp, inputs, computed, &mut laps, progress) {
        Ok(report) => {
            crate::folder::replace_dir(&tmp, &opts.out)?;
            progress.note(&format!("atlas: {} ({} items)", opts.out.display(), n));
            Ok(report)
        }
        Err(e) => {
            let _ = std::fs::remove_dir_all(&tmp);
            Err(e)
        }
    }
}
