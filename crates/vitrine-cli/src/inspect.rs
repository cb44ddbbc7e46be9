//! `vitrine inspect`: an atlas's counts, fields, maps, quality figures and provenance, after
//! checking every array.

use std::path::PathBuf;

use anyhow::{Context, Result};
use clap::Args;
use vitrine_build::read::Atlas;
use vitrine_format::{ArrayRef, FieldKind};

/// Print an atlas's counts, fields, maps, quality figures and provenance, after checking every array.
#[derive(Args)]
pub struct InspectArgs {
    /// The atlas folder.
    atlas: PathBuf,
}

pub fn run(a: InspectArgs) -> Result<()> {
    print!("{}", inspect(&Atlas::open(&a.atlas)?)?);
    Ok(())
}

pub fn inspect(atlas: &Atlas) -> Result<String> {
    let m = &atlas.manifest;
    for r in m.arrays() {
        atlas
            .array::<u8>(&ArrayRef {
                dtype: vitrine_format::DType::U8,
                count: r.bytes,
                ..r.clone()
            })
            .with_context(|| format!("checking {}", r.file))?;
    }
    let mut s = String::new();
    s.push_str(&format!("atlas     {}\n", m.title));
    s.push_str(&format!(
        "format    {} version {}\n",
        m.format, m.format_version
    ));
    s.push_str(&format!("items     {}\n", m.item_count));
    s.push_str(&format!(
        "arrays    {} (all lengths and SHA-256 checksums verified)\n",
        m.arrays().len()
    ));
    if let Some(t) = &m.tiles {
        let sums = std::fs::read(atlas.dir.join(&t.overview_sums.file))
            .with_context(|| format!("reading {}", t.overview_sums.file))?;
        t.overview_sums.verify(&sums)?;
        for k in 0..t.pyramid.tiles.len() {
            let f = vitrine_format::tiles::overview_file(k);
            let png = std::fs::read(atlas.dir.join(&f)).with_context(|| format!("reading {f}"))?;
            vitrine_format::tiles::verify_part(&f, &sums, k, &png)?;
        }
        let leaves = t.runs().len();
        let deepest = t.pyramid.tiles.iter().map(|t| t.level).max().unwrap_or(0);
        s.push_str(&format!(
            "tiles     {} over the {} map ({leaves} leaves of at most {} items, levels 0-{deepest}; {} arrays stored by leaf, overview pictures verified)\n",
            t.pyramid.tiles.len(),
            t.map,
            t.pyramid.capacity,
            t.chunked.len()
        ));
    }
    s.push_str(&format!(
        "neighbours {}, in {} chunk(s) of {} items\n",
        m.neighbours.describe(),
        m.neighbours.chunks.len(),
        m.neighbours.chunk_items
    ));
    s.push_str("maps\n");
    for l in &m.maps {
        s.push_str(&format!(
            "  {:<12} x {:.3}..{:.3}, y {:.3}..{:.3}  {}\n",
            l.name, l.bounds[0], l.bounds[2], l.bounds[1], l.bounds[3], l.description
        ));
    }
    s.push_str("fields\n");
    for f in &m.fields {
        let kind = match f.kind {
            FieldKind::Category => format!("category, {} values", f.values.len()),
            FieldKind::Number => "number".into(),
            FieldKind::Date => "date range".into(),
            FieldKind::Text => "text".into(),
            FieldKind::Link => "link".into(),
        };
        s.push_str(&format!("  {:<20} {kind}\n", f.name));
    }
    match &m.sheets {
        Some(sh) => {
            for l in &sh.levels {
                s.push_str(&format!(
                    "sheets    {} px cells: {} sheets of {}x{}\n",
                    l.cell,
                    l.files.len(),
                    l.columns,
                    l.rows
                ));
            }
        }
        None => s.push_str("sheets    none (items drawn as coloured marks)\n"),
    }
    if let (Some(c), Some(g)) = (&m.copies, atlas.copies()?) {
        s.push_str(&format!(
            "copies    {} items in {} groups, joined by {} confirmed pairs (field \"{}\")\n          {}\n",
            g.members.len(),
            g.groups(),
            g.pairs.len(),
            c.field.as_deref().unwrap_or(""),
            c.method
        ));
    }
    if !m.quality.is_empty() {
        s.push_str("quality\n");
        for (k, v) in &m.quality {
            s.push_str(&format!("  {k:<20} {v}\n"));
        }
    }
    let p = &m.provenance;
    s.push_str(&format!(
        "built by  {} {} with seed {}\n",
        p.tool, p.tool_version, p.seed
    ));
    for i in &p.inputs {
        s.push_str(&format!(
            "  input {:<10} {} ({} bytes, sha256 {})\n",
            i.role, i.path, i.bytes, i.sha256
        ));
    }
    for (k, v) in &p.parameters {
        s.push_str(&format!("  {k} = {v}\n"));
    }
    Ok(s)
}
