//! `vitrine export`: data out of an atlas (each item's id and its place on every map).

use std::path::{Path, PathBuf};

use anyhow::{Context, Result};
use clap::Args;
use vitrine_build::read::Atlas;
use vitrine_corpus::export::{cell, csv_row, CsvStyle};

/// Write data out of an atlas.
#[derive(Args)]
pub struct ExportArgs {
    /// The atlas folder.
    atlas: PathBuf,
    /// CSV with each item's id and its x, y on every map, one row per item in atlas order.
    #[arg(long)]
    positions: PathBuf,
    /// Write the ids exactly as catalogued, for scripts. Without it, an id a spreadsheet would run
    /// as a formula (it begins with = + - @, a tab or a CR) gets a leading apostrophe.
    #[arg(long = "csv-exact")]
    csv_exact: bool,
    /// Replace the file if it exists.
    #[arg(long)]
    force: bool,
}

pub fn run(a: ExportArgs) -> Result<()> {
    let atlas = Atlas::open(&a.atlas)?;
    crate::corpus::check_output(&a.positions, "--positions", &a.atlas, a.force)?;
    let style = if a.csv_exact {
        CsvStyle::Exact
    } else {
        CsvStyle::Spreadsheet
    };
    export_positions(&atlas, &a.positions, style)?;
    eprintln!(
        "wrote {} ({} items)",
        a.positions.display(),
        atlas.manifest.item_count
    );
    Ok(())
}

/// Writes id and x, y per map, one row per item in atlas order, the ids written for `style`.
pub fn export_positions(atlas: &Atlas, out: &Path, style: CsvStyle) -> Result<()> {
    let m = &atlas.manifest;
    let files = atlas.load(
        [&m.ids, &m.ids_text]
            .into_iter()
            .chain(m.maps.iter().map(|l| &l.positions)),
    )?;
    let ids = files.ids(m)?;
    let maps: Vec<Vec<[f32; 2]>> = m
        .maps
        .iter()
        .map(|l| files.positions(l))
        .collect::<Result<_, _>>()?;
    let mut s = String::new();
    let head: Vec<String> = std::iter::once("id".to_string())
        .chain(
            m.maps
                .iter()
                .flat_map(|l| [format!("{}_x", l.name), format!("{}_y", l.name)]),
        )
        .collect();
    let head: Vec<_> = head.iter().map(|h| cell(h, false, style)).collect();
    csv_row(&mut s, head.iter().map(|h| h.as_ref()));
    for i in 0..m.item_count as usize {
        // Shortest text that reads back to the same f32.
        let xy: Vec<String> = maps
            .iter()
            .flat_map(|p| [p[i][0].to_string(), p[i][1].to_string()])
            .collect();
        let id = cell(ids.get(i), false, style);
        csv_row(
            &mut s,
            std::iter::once(id.as_ref()).chain(xy.iter().map(String::as_str)),
        );
    }
    std::fs::write(out, s).with_context(|| format!("writing {}", out.display()))
}
