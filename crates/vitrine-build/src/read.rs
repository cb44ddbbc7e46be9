//! Reading a built atlas back: `vitrine inspect` and `vitrine export`.

use std::path::Path;

use anyhow::{Context, Result};
use vitrine_format::{ArrayRef, Element, FieldKind, Manifest, TextTable, MANIFEST_FILE};

pub struct Atlas {
    pub dir: std::path::PathBuf,
    pub manifest: Manifest,
}

impl Atlas {
    pub fn open(dir: &Path) -> Result<Atlas> {
        let path = dir.join(MANIFEST_FILE);
        let text = std::fs::read_to_string(&path)
            .with_context(|| format!("reading {}", path.display()))?;
        let manifest = Manifest::from_json(&text).with_context(|| format!("{}", path.display()))?;
        Ok(Atlas {
            dir: dir.to_path_buf(),
            manifest,
        })
    }
    pub fn array<T: Element>(&self, r: &ArrayRef) -> Result<Vec<T>> {
        let bytes =
            std::fs::read(self.dir.join(&r.file)).with_context(|| format!("reading {}", r.file))?;
        Ok(r.decode::<T>(&bytes)?)
    }
    pub fn text(&self, offsets: &ArrayRef, bytes: &ArrayRef) -> Result<TextTable> {
        let t = TextTable {
            offsets: self.array(offsets)?,
            utf8: self.array(bytes)?,
        };
        t.validate(&offsets.file, t.offsets.len().saturating_sub(1) as u64)?;
        Ok(t)
    }
    pub fn ids(&self) -> Result<TextTable> {
        self.text(&self.manifest.ids, &self.manifest.ids_text)
    }
    /// Every item's neighbour list (k per item, atlas order), read from all chunks.
    pub fn neighbour_ids(&self) -> Result<Vec<u32>> {
        let mut v = Vec::new();
        for c in &self.manifest.neighbours.chunks {
            v.extend(self.array::<u32>(&c.ids)?);
        }
        Ok(v)
    }
    /// The distances matching [`Atlas::neighbour_ids`].
    pub fn neighbour_distances(&self) -> Result<Vec<f32>> {
        let mut v = Vec::new();
        for c in &self.manifest.neighbours.chunks {
            v.extend(self.array::<f32>(&c.distances)?);
        }
        Ok(v)
    }
}

fn csv_quote(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

/// Writes id and x, y per map, one row per item in atlas order.
pub fn export_positions(atlas: &Atlas, out: &Path) -> Result<()> {
    let m = &atlas.manifest;
    let ids = atlas.ids()?;
    let maps: Vec<Vec<f32>> = m
        .maps
        .iter()
        .map(|l| atlas.array::<f32>(&l.positions))
        .collect::<Result<_>>()?;
    let mut s = String::from("id");
    for l in &m.maps {
        s.push_str(&format!(",{0}_x,{0}_y", l.name));
    }
    s.push('\n');
    for i in 0..m.item_count as usize {
        s.push_str(&csv_quote(ids.get(i)));
        for p in &maps {
            // Shortest text that reads back to the same f32.
            s.push_str(&format!(",{},{}", p[2 * i], p[2 * i + 1]));
        }
        s.push('\n');
    }
    std::fs::write(out, s).with_context(|| format!("writing {}", out.display()))
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
    s.push_str(&format!(
        "neighbours k = {}, {} distance, {}, in {} chunk(s) of {} items\n",
        m.neighbours.k,
        m.neighbours.metric,
        if m.neighbours.exact {
            "exact"
        } else {
            "approximate"
        },
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
