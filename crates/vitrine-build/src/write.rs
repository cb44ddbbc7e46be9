//! Writing the atlas into its (temporary) folder: arrays in atlas order, the manifest with its
//! provenance, thumbnails and sheets, the viewer files and the build report.

use std::path::{Path, PathBuf};

use anyhow::{Context, Result};
use serde_json::json;
use vitrine_format::palette::{INK, OKABE_ITO, UNLISTED};
use vitrine_format::{
    ArrayRef, BrowserVectors, ClusterInfo, ClusterTerm, Clusters, Field, InputFile, Manifest,
    MapLayout, NeighbourChunk, Neighbours, Provenance, SheetLevel, Sheets, TextTable, FORMAT_NAME,
    FORMAT_VERSION, MANIFEST_FILE, NEIGHBOUR_CHUNK_ITEMS, VECTOR_CHUNK_ITEMS,
};
use vitrine_images::thumbs;

use crate::catalogue::{self, FieldData};
use crate::ingest::Inputs;
use crate::options::BuildOptions;
use crate::progress::Progress;
use crate::report::{BuildReport, Laps};
use crate::stages::{Computed, NeighbourGraph, Reduction};

/// Writes the whole atlas into `dir` and returns the build report (also written there).
pub fn write_atlas(
    opts: &BuildOptions,
    dir: &Path,
    inputs: Inputs,
    c: Computed,
    laps: &mut Laps,
    progress: &dyn Progress,
) -> Result<BuildReport> {
    let n = inputs.items.ids.len();
    let described = inputs.described.clone();
    let mut report = BuildReport {
        items: n,
        notes: c.reduction.notes.clone(),
        ..Default::default()
    };
    if let Some(cat) = &inputs.catalogue {
        if cat.read_as.encoding == crate::catalogue::TextEncoding::Windows1252
            && cat.read_as.found.1
        {
            report.notes.push(format!(
                "{} is not UTF-8 text: it was read as Windows-1252 (Western European, which holds Latin-1); if its accents look wrong in the viewer, save it as UTF-8 and build again",
                file_name(Path::new(&cat.file))
            ));
        }
    }
    let order = &c.order.order;
    let mut w = ArrayWriter { files: Vec::new() };
    let ids_sorted: Vec<&str> = order
        .iter()
        .map(|&i| inputs.items.ids[i].as_str())
        .collect();
    let [ids, ids_text] = w.text("ids", &ids_sorted);
    let source_rows = w.add(
        "source-rows",
        &order.iter().map(|&i| i as u32).collect::<Vec<_>>(),
    );
    let (maps, xy) = maps(&mut w, opts, &c);
    let neighbours = neighbours(&mut w, opts, &c.graph, order, &c.order.rank);
    let fields = fields(&mut w, opts, &inputs, order, &ids_sorted, &mut report);
    let clusters = clusters(&mut w, &c.clusters, order, &xy, &fields);

    // Thumbnails and colours.
    let mut input_files = match &opts.vectors {
        Some(v) => vec![input_file("vectors", v)?],
        None => Vec::new(),
    };
    if let Some(p) = &opts.vector_ids {
        input_files.push(input_file("vector-ids", p)?);
    }
    if let Some(m) = described.as_ref().and_then(|d| d.model.clone()) {
        input_files.push(m);
    }
    if let Some(p) = &opts.catalogue {
        input_files.push(input_file("catalogue", p)?);
    }
    if let Some(f) = &inputs.iiif {
        let (address, bytes, sha256) = f.document.clone();
        input_files.push(InputFile {
            role: "IIIF source (catalogue and pictures)".into(),
            path: address,
            bytes,
            sha256,
        });
        report.notes.extend(f.notes.iter().cloned());
    }
    // Candidate copies (atlas order), so that the thumbnails keep the signatures they need.
    let candidates: Vec<(u32, u32, f32)> = match (&opts.copies, &inputs.image_paths) {
        (Some(rule), Some(_)) => crate::copies::candidates(&c.graph.graph, rule.ratio)
            .into_iter()
            .map(|(a, b, d)| {
                let (x, y) = (c.order.rank[a as usize], c.order.rank[b as usize]);
                (x.min(y), x.max(y), d)
            })
            .collect(),
        _ => Vec::new(),
    };
    let mut fields = fields;
    let mut copies = None;
    let (colours, sheets) = match &inputs.image_paths {
        Some(paths) => {
            let mut signed = vec![false; if opts.copies.is_some() { n } else { 0 }];
            for &(a, b, _) in &candidates {
                signed[a as usize] = true;
                signed[b as usize] = true;
            }
            let (colours, sheets, images, t) = pictures(
                &mut w,
                opts,
                dir,
                &inputs,
                paths,
                order,
                &signed,
                &mut report,
                progress,
            )?;
            laps.lap("thumbnails");
            input_files.push(images);
            if let Some(rule) = &opts.copies {
                copies = Some(write_copies(
                    &mut w,
                    dir,
                    rule,
                    &candidates,
                    &t,
                    &ids_sorted,
                    &mut fields,
                    &mut report,
                    progress,
                )?);
                laps.lap("copies");
            }
            (colours, Some(sheets))
        }
        None => {
            // The first category with one value per record (a record of a multi-valued field
            // has no one colour).
            let first_category = fields
                .iter()
                .filter(|f| f.all.is_none())
                .find_map(|f| f.codes.as_ref());
            let colours = (0..n)
                .map(|i| {
                    let c = match first_category {
                        Some(codes) if (codes[i] as usize) < OKABE_ITO.len() => {
                            OKABE_ITO[codes[i] as usize]
                        }
                        Some(_) => UNLISTED,
                        None => INK,
                    };
                    [c[0], c[1], c[2], 255]
                })
                .collect();
            (colours, None)
        }
    };
    let flat: Vec<u8> = colours.iter().flatten().copied().collect::<Vec<u8>>();
    let colours = w.add("colours", &flat);
    let vectors = c
        .browser_vectors
        .as_ref()
        .map(|v| browser_vectors(&mut w, v, order));

    let title = opts.title.clone().unwrap_or_else(|| {
        opts.out
            .file_name()
            .map(|s| s.to_string_lossy().to_string())
            .unwrap_or_else(|| "Atlas".into())
    });
    // Fields read with several values per record, and how (found, or as told), for the provenance.
    let multi: Vec<serde_json::Value> = fields
        .iter()
        .filter_map(|f| {
            let sep = f.field.multi_separator.as_ref()?;
            let told = opts.multi_valued.iter().any(|(g, _)| *g == f.field.name);
            Some(json!({
                "field": f.field.name,
                "separator": sep,
                "how": if told { "--multi-valued" } else { "found from the values" },
            }))
        })
        .collect();
    let mut manifest = Manifest {
        format: FORMAT_NAME.into(),
        format_version: FORMAT_VERSION,
        title,
        item_count: n as u64,
        ids,
        ids_text,
        source_rows,
        colours,
        fields: fields.into_iter().map(|f| f.field).collect(),
        maps,
        neighbours,
        sheets,
        quality: quality_figures(&c, clusters.list.len()),
        clusters: Some(clusters),
        vectors,
        copies,
        provenance: Provenance {
            tool: "vitrine".into(),
            tool_version: env!("CARGO_PKG_VERSION").into(),
            inputs: input_files,
            parameters: {
                let mut p = parameters(opts, &c, n, described.as_ref());
                if !multi.is_empty() {
                    p.insert("multi_valued_fields".into(), json!(multi));
                }
                if !opts.single_valued.is_empty() {
                    p.insert("single_valued_fields".into(), json!(opts.single_valued));
                }
                p
            },
            seed: opts.seed,
        },
        tiles: None,
    };
    if let Some(p) = &c.order.pyramid {
        let bar = progress.bar("tiles", 2);
        let mut step = 0;
        crate::tiles::tile(&mut manifest, &mut w.files, p.clone(), |what| {
            bar.rename(what);
            bar.set(step, 2);
            step += 1;
        })?;
        laps.lap("tiles");
    }
    let mut made = std::collections::BTreeSet::new();
    for (name, bytes) in &w.files {
        let path = dir.join(name);
        if let Some(parent) = path.parent() {
            if made.insert(parent.to_path_buf()) {
                std::fs::create_dir_all(parent)?;
            }
        }
        std::fs::write(&path, bytes).with_context(|| format!("writing {name}"))?;
    }
    // Validate what was written with the same reader the viewer uses.
    Manifest::from_json(&manifest.to_json())
        .context("the manifest this build wrote does not validate")?;
    std::fs::write(dir.join(MANIFEST_FILE), manifest.to_json())?;

    if !report.image_problems.is_empty() {
        report.notes.push(format!(
            "{} image(s) could not be used and are drawn as placeholders",
            report.image_problems.len()
        ));
    }
    if !report.value_warnings.is_empty() {
        report.notes.push(format!(
            "{} catalogue value(s) could not be read as their field's kind; kept as written",
            report.value_warnings.len()
        ));
    }
    crate::folder::copy_viewer(
        opts.viewer.as_deref(),
        opts.embedded_viewer,
        dir,
        &mut report,
    )?;
    laps.lap("write atlas");
    report.set_laps(laps);
    std::fs::write(
        dir.join("build-report.json"),
        serde_json::to_string_pretty(&report)?,
    )?;
    Ok(report)
}

/// The similarity map, the lattice and the timeline map (when there is one), in atlas order;
/// with the similarity map's interleaved positions.
fn maps(w: &mut ArrayWriter, opts: &BuildOptions, c: &Computed) -> (Vec<MapLayout>, Vec<f32>) {
    let order = &c.order.order;
    let (xy, bounds) = in_atlas_order(order, &c.map.positions);
    let similarity = MapLayout {
        name: "similarity".into(),
        description: format!(
            "UMAP of the {} neighbour graph{} (k = {}, min_dist = {}, seed {})",
            opts.metric.name(),
            match &c.reduction.pca {
                Some(p) => format!(
                    " on {} principal components ({:.0} % of the variance)",
                    p.components.len(),
                    100.0 * p.explained()
                ),
                None => String::new(),
            },
            c.graph.graph.k,
            opts.min_dist,
            opts.seed
        ),
        positions: w.add("map-similarity", &xy),
        bounds,
        x_axis: None,
    };
    let grid = &c.lattice.lattice;
    let cells: Vec<f32> = order.iter().flat_map(|&i| c.lattice.positions[i]).collect();
    let lattice = MapLayout {
        name: "lattice".into(),
        description: format!(
            "the similarity map snapped to a {} x {} grid, one item per cell (recursive balanced bisection)",
            grid.columns, grid.rows
        ),
        positions: w.add("map-lattice", &cells),
        bounds: [
            0.0,
            0.0,
            grid.columns.saturating_sub(1) as f32,
            grid.rows.saturating_sub(1) as f32,
        ],
        x_axis: None,
    };
    let mut maps = vec![similarity, lattice];
    if let Some(t) = &c.timeline {
        let (txy, b) = in_atlas_order(order, &t.positions);
        maps.push(MapLayout {
            name: "timeline".into(),
            description: format!(
                "x: {:?} (a random year within each item's range), y: a 1-D UMAP of the same neighbour graph; {} of {} items dated",
                t.axis.label, t.dated, order.len()
            ),
            positions: w.add("map-timeline", &txy),
            bounds: b,
            x_axis: Some(t.axis.clone()),
        });
    }
    (maps, xy)
}

/// Neighbour lists renumbered into atlas order, in chunks of consecutive items (a region of the
/// map each: a record card needs one).
fn neighbours(
    w: &mut ArrayWriter,
    opts: &BuildOptions,
    g: &NeighbourGraph,
    order: &[usize],
    rank: &[u32],
) -> Neighbours {
    let graph = &g.graph;
    let n = order.len();
    let mut nb_ids = Vec::with_capacity(n * graph.k);
    let mut nb_d = Vec::with_capacity(n * graph.k);
    for &i in order {
        let s = i * graph.k;
        for slot in s..s + graph.k {
            let j = graph.ids[slot];
            nb_ids.push(if j == u32::MAX {
                u32::MAX
            } else {
                rank[j as usize]
            });
            nb_d.push(graph.distances[slot]);
        }
    }
    let per = (NEIGHBOUR_CHUNK_ITEMS as usize * graph.k).max(1);
    let chunks = nb_ids
        .chunks(per)
        .zip(nb_d.chunks(per))
        .enumerate()
        .map(|(c, (ids, d))| NeighbourChunk {
            ids: w.add(&format!("neighbours/ids-{c:04}"), ids),
            distances: w.add(&format!("neighbours/distances-{c:04}"), d),
        })
        .collect();
    Neighbours {
        k: graph.k as u32,
        metric: opts.metric.name().into(),
        exact: g.exact,
        chunk_items: NEIGHBOUR_CHUNK_ITEMS,
        chunks,
    }
}

/// A catalogue field as written, with its category codes (atlas order) when it is a category
/// (a multi-valued field: each item's first value, and all its values, offsets into codes).
struct WrittenField {
    field: Field,
    codes: Option<Vec<u32>>,
    all: Option<(Vec<u32>, Vec<u32>)>,
}

/// Every catalogue column but the id, its kind inferred, in atlas order.
fn fields(
    w: &mut ArrayWriter,
    opts: &BuildOptions,
    inputs: &Inputs,
    order: &[usize],
    ids_sorted: &[&str],
    report: &mut BuildReport,
) -> Vec<WrittenField> {
    let mut fields = Vec::new();
    let (Some(cat), Some(rows)) = (&inputs.catalogue, &inputs.items.catalogue_rows) else {
        return fields;
    };
    let item_rows: Vec<usize> = order.iter().map(|&i| rows[i]).collect();
    for (c, name) in cat.header.iter().enumerate() {
        if c == cat.id_column {
            continue;
        }
        let values: Vec<&str> = item_rows.iter().map(|&r| cat.rows[r][c].as_str()).collect();
        // Several values per record: as the user says (--multi-valued, --single-valued), else
        // as the values show.
        let inferred = catalogue::infer_kind(name, &values);
        let separator = match opts.multi_valued.iter().find(|(f, _)| f == name) {
            Some((_, Some(sep))) => Some(sep.clone()),
            Some((_, None)) => Some(
                catalogue::multi_separator_any(&values)
                    .unwrap_or(";")
                    .to_string(),
            ),
            None if opts.single_valued.iter().any(|f| f == name) => None,
            None => catalogue::multi_separator(inferred, name, &values).map(String::from),
        };
        let data = match &separator {
            Some(sep) => catalogue::multi_field_data(&values, sep),
            None => catalogue::field_data(
                name,
                inferred,
                &values,
                ids_sorted,
                &mut report.value_warnings,
            ),
        };
        let kind = data.kind();
        let tag = format!("field-{}-{}", fields.len(), safe_name(name));
        let mut multi = None;
        let mut all = None;
        let (column, column2, values, value_counts, written, codes) = match data {
            FieldData::Category {
                codes,
                values,
                counts,
            } => (w.add(&tag, &codes), None, values, counts, None, Some(codes)),
            FieldData::Multi {
                first,
                offsets,
                codes,
                values,
                counts,
                written,
            } => {
                report.notes.push(format!(
                    "{name}: several values per record (separated by {:?}), {} values; filters and counts take each value",
                    separator.as_deref().unwrap_or(";"),
                    values.len()
                ));
                multi = Some([
                    w.add(&format!("{tag}.offsets"), &offsets),
                    w.add(&format!("{tag}.codes"), &codes),
                ]);
                all = Some((offsets, codes));
                let written = w.text(&format!("{tag}.written"), &written);
                (
                    w.add(&tag, &first),
                    None,
                    values,
                    counts,
                    Some(written),
                    Some(first),
                )
            }
            FieldData::Number { values, written } => {
                let written = w.text(&format!("{tag}.written"), &written);
                (
                    w.add(&tag, &values),
                    None,
                    vec![],
                    vec![],
                    Some(written),
                    None,
                )
            }
            FieldData::Date { ranges, written } => {
                let s: Vec<i32> = ranges
                    .iter()
                    .map(|r| r.map_or(i32::MIN, |r| r.start))
                    .collect();
                let e: Vec<i32> = ranges
                    .iter()
                    .map(|r| r.map_or(i32::MIN, |r| r.end))
                    .collect();
                let start = w.add(&format!("{tag}.start"), &s);
                let end = w.add(&format!("{tag}.end"), &e);
                let written = w.text(&format!("{tag}.written"), &written);
                (start, Some(end), vec![], vec![], Some(written), None)
            }
            FieldData::Text(t) | FieldData::Link(t) => {
                let [a, b] = w.text(&tag, &t);
                (a, Some(b), vec![], vec![], None, None)
            }
        };
        fields.push(WrittenField {
            field: Field {
                name: name.clone(),
                kind,
                column,
                column2,
                values,
                value_counts,
                written,
                multi,
                multi_separator: separator.filter(|_| all.is_some()),
            },
            codes,
            all,
        });
    }
    fields
}

/// Clusters in atlas order, labelled by the catalogue's over-represented category values, each
/// placed at the median of its members on the similarity map (`xy`, interleaved, atlas order).
fn clusters(
    w: &mut ArrayWriter,
    clusters: &[u32],
    order: &[usize],
    xy: &[f32],
    fields: &[WrittenField],
) -> Clusters {
    let cluster_of: Vec<u32> = order.iter().map(|&i| clusters[i]).collect();
    let category_columns: Vec<vitrine_map::clusters::LabelField> = fields
        .iter()
        .filter_map(|f| {
            let codes = f.codes.as_ref()?;
            Some(match &f.all {
                Some((offsets, all)) => vitrine_map::clusters::LabelField {
                    name: f.field.name.clone(),
                    values: f.field.values.clone(),
                    offsets: offsets.clone(),
                    codes: all.clone(),
                },
                None => vitrine_map::clusters::LabelField::single(
                    f.field.name.clone(),
                    codes,
                    f.field.values.clone(),
                ),
            })
        })
        .collect();
    let terms = vitrine_map::clusters::label_terms(&cluster_of, &category_columns, 3);
    let k = terms.len();
    let mut members: Vec<Vec<[f32; 2]>> = vec![Vec::new(); k];
    for (slot, &c) in cluster_of.iter().enumerate() {
        members[c as usize].push([xy[2 * slot], xy[2 * slot + 1]]);
    }
    let median = |v: &mut Vec<f32>| -> f32 {
        v.sort_by(|a, b| a.total_cmp(b));
        v[v.len() / 2]
    };
    let list: Vec<ClusterInfo> = (0..k)
        .map(|c| {
            let mut xs: Vec<f32> = members[c].iter().map(|p| p[0]).collect();
            let mut ys: Vec<f32> = members[c].iter().map(|p| p[1]).collect();
            let label = if terms[c].is_empty() {
                format!("cluster {}", c + 1)
            } else {
                terms[c]
                    .iter()
                    .map(|t| t.value.as_str())
                    .collect::<Vec<_>>()
                    .join(" · ")
            };
            ClusterInfo {
                size: members[c].len() as u64,
                label,
                position: [median(&mut xs), median(&mut ys)],
                terms: terms[c]
                    .iter()
                    .map(|t| ClusterTerm {
                        field: t.field.clone(),
                        value: t.value.clone(),
                        share: t.share,
                        lift: t.lift,
                    })
                    .collect(),
            }
        })
        .collect();
    Clusters {
        method: "Louvain modularity on the fuzzy neighbour graph (resolution 1)".into(),
        ids: w.add("clusters", &cluster_of),
        list,
    }
}

/// What the thumbnails leave for the copies: each item's signature (where asked for), its file's
/// digest, and whether its image could be used, in atlas order.
struct Signed {
    signatures: Vec<Option<vitrine_images::copies::Signature>>,
    digests: Vec<String>,
    usable: Vec<bool>,
}

/// Thumbnails and sheets of every level, the average colour of each picture, and the images'
/// provenance (`image-digests.txt`: one line per image, SHA-256, bytes and path, hashed as a whole).
#[allow(clippy::too_many_arguments)]
fn pictures(
    w: &mut ArrayWriter,
    opts: &BuildOptions,
    dir: &Path,
    inputs: &Inputs,
    paths: &[Result<PathBuf, String>],
    order: &[usize],
    signed: &[bool],
    report: &mut BuildReport,
    progress: &dyn Progress,
) -> Result<(Vec<[u8; 4]>, Sheets, InputFile, Signed)> {
    let n = order.len();
    vitrine_images::decode::set_decode_budget(opts.decode_memory);
    let plan = crate::from_images::sheet_plan(opts);
    let list: Vec<(String, Result<PathBuf, String>)> = order
        .iter()
        .map(|&i| (inputs.items.ids[i].clone(), paths[i].clone()))
        .collect();
    let cache = crate::from_images::thumb_cache(opts, &plan);
    let bar = progress.bar("thumbnails", n as u64);
    let t = thumbs::make_sheets(&list, signed, &plan, dir, cache.as_ref(), &|c| {
        bar.set(c, n as u64)
    })?;
    drop(bar);
    // Thumbnails made while computing the vectors are taken from the cache here: they were made
    // by this build all the same.
    let made_for_vectors = inputs.described.as_ref().map_or(0, |d| d.decoded);
    report.thumbnails_reused = t.reused.saturating_sub(made_for_vectors);
    report.thumbnails_made = n - report.thumbnails_reused - t.problems.len();
    if let Some(cache_dir) = &opts.thumb_cache {
        progress.note(&format!(
            "thumbnails: {} made, {} reused from the cache ({})",
            report.thumbnails_made,
            report.thumbnails_reused,
            cache_dir.display()
        ));
        if t.cache_damaged > 0 {
            report.notes.push(format!(
                "{} thumbnail(s) in the cache {} were damaged (cut short or changed on disk): made again from the images",
                t.cache_damaged,
                cache_dir.display()
            ));
        }
        if t.cache_errors > 0 {
            report.notes.push(format!(
                "{} thumbnail(s) could not be stored in the cache {}; the next build makes them again",
                t.cache_errors,
                cache_dir.display()
            ));
        }
    }
    if opts.strict && !t.problems.is_empty() {
        let listed: Vec<String> = t
            .problems
            .iter()
            .take(10)
            .map(|p| format!("  {} ({}): {}", p.id, p.path, p.reason))
            .collect();
        anyhow::bail!(
            "--strict: {} image(s) could not be used:\n{}{}",
            t.problems.len(),
            listed.join("\n"),
            if t.problems.len() > 10 {
                format!("\n  and {} more", t.problems.len() - 10)
            } else {
                String::new()
            }
        );
    }
    let mut listing = String::new();
    let mut total = 0u64;
    let images_dir = opts
        .images
        .as_ref()
        .expect("pictures are made only with --images");
    let relative = |p: &Path| {
        p.strip_prefix(images_dir)
            .unwrap_or(p)
            .display()
            .to_string()
    };
    for ((_, p), (sha, bytes)) in list.iter().zip(&t.digests) {
        // Files that could not be read have no digest; the build report lists them.
        if let (Ok(p), false) = (p, sha.is_empty()) {
            listing.push_str(&format!("{sha}  {bytes}  {}\n", relative(p)));
            total += bytes;
        }
    }
    std::fs::write(dir.join("image-digests.txt"), &listing)?;
    let images = InputFile {
        role: "images (digest of image-digests.txt)".into(),
        path: file_name(images_dir),
        bytes: total,
        sha256: vitrine_format::sha256_hex(listing.as_bytes()),
    };
    report.image_problems = t
        .problems
        .into_iter()
        .map(|mut p| {
            p.path = relative(Path::new(&p.path));
            p
        })
        .collect();
    // Profiles left aside (the pictures are used with their pixels as they are).
    let colour = thumbs::take_colour_notes();
    if !colour.is_empty() {
        let listed: Vec<String> = colour
            .iter()
            .take(10)
            .map(|(p, why)| format!("{}: {why}", relative(Path::new(p))))
            .collect();
        report.notes.push(format!(
            "{} image(s) carry a colour profile that could not be applied; their pixels are used as they are: {}{}",
            colour.len(),
            listed.join("; "),
            if colour.len() > 10 { "; ..." } else { "" }
        ));
    }
    let levels = plan
        .cells
        .iter()
        .zip(t.files)
        .map(|(&cell, files)| {
            let (columns, rows) = plan.per_sheet(cell);
            SheetLevel {
                cell,
                columns,
                rows,
                files,
            }
        })
        .collect();
    let extents = w.add("thumbnail-extents", &t.extents);
    // Pictures fetched from an IIIF service are derivatives: the image's size is the one the
    // source gives, when its shape is the fetched picture's (within 2 %).
    let same_shape = |a: [u32; 2], b: [u32; 2]| {
        let (ra, rb) = (a[0] as f64 / a[1] as f64, b[0] as f64 / b[1] as f64);
        (ra / rb - 1.0).abs() <= 0.02
    };
    let flat: Vec<u32> = t
        .sizes
        .iter()
        .zip(order)
        .flat_map(|(s, &i)| match inputs.iiif.as_ref().map(|f| f.sizes[i]) {
            Some(c) if s[0] > 0 && s[1] > 0 && c[0] > 0 && c[1] > 0 && same_shape(*s, c) => c,
            _ => *s,
        })
        .collect();
    let image_sizes = Some(w.add("image-sizes", &flat));
    Ok((
        t.colours,
        Sheets {
            levels,
            extents,
            image_sizes,
            pictures: None,
        },
        images,
        Signed {
            signatures: t.signatures,
            digests: t.digests.into_iter().map(|(d, _)| d).collect(),
            usable: t.sizes.iter().map(|s| s[0] > 0).collect(),
        },
    ))
}

/// The name of the field the build adds for items with copies, and its one value.
pub const COPIES_FIELD: &str = "copies";
pub const HAS_COPIES: &str = "has copies";

/// Judges the candidate copies, joins them into groups and writes them: the group arrays, every
/// pair checked (copy-pairs.csv, for a reader to see why), and a field "copies" with the value
/// "has copies" on every item in a group, so that filters, counts and colour-by reach them.
#[allow(clippy::too_many_arguments)]
fn write_copies(
    w: &mut ArrayWriter,
    dir: &Path,
    rule: &crate::copies::CopyRule,
    candidates: &[(u32, u32, f32)],
    signed: &Signed,
    ids: &[&str],
    fields: &mut Vec<WrittenField>,
    report: &mut BuildReport,
    progress: &dyn Progress,
) -> Result<vitrine_format::Copies> {
    let n = ids.len();
    let checked = crate::copies::check(
        candidates,
        &signed.signatures,
        &signed.digests,
        &signed.usable,
        rule,
    );
    let groups = crate::copies::groups(n, &checked);
    let mut csv =
        String::from("id_a,id_b,vector_distance,hash_bits,colour_correlation,same_file,copy\n");
    let quote = |s: &str| {
        if s.contains([',', '"', '\n', '\r']) {
            format!("\"{}\"", s.replace('"', "\"\""))
        } else {
            s.to_string()
        }
    };
    for c in &checked {
        let opt = |v: Option<String>| v.unwrap_or_default();
        csv.push_str(&format!(
            "{},{},{},{},{},{},{}\n",
            quote(ids[c.a as usize]),
            quote(ids[c.b as usize]),
            if c.distance.is_nan() {
                String::new()
            } else {
                format!("{:.6}", c.distance)
            },
            opt(c.bits.map(|b| b.to_string())),
            opt(c.colour.map(|r| format!("{r:.4}"))),
            c.same_file,
            c.copy
        ));
    }
    std::fs::write(dir.join("copy-pairs.csv"), csv)?;
    let confirmed: Vec<&crate::copies::Checked> = checked.iter().filter(|c| c.copy).collect();
    let mut members = Vec::new();
    let mut starts = vec![0u32];
    for g in &groups {
        members.extend_from_slice(g);
        starts.push(members.len() as u32);
    }
    let pairs: Vec<u32> = confirmed.iter().flat_map(|c| [c.a, c.b]).collect();
    let bits: Vec<u8> = confirmed
        .iter()
        .map(|c| c.bits.unwrap_or(0).min(255) as u8)
        .collect();
    let found = crate::report::CopiesFound {
        candidates: candidates.len(),
        confirmed: confirmed.len(),
        groups: groups.len(),
        items: members.len(),
    };
    progress.note(&format!(
        "copies: {} candidate pairs checked, {} confirmed, {} items in {} groups (copy-pairs.csv)",
        found.candidates, found.confirmed, found.items, found.groups
    ));
    report.copies = Some(found);
    // The field, named apart from any catalogue field.
    let mut name = COPIES_FIELD.to_string();
    while fields.iter().any(|f| f.field.name == name) {
        name.push_str(" (found)");
    }
    let mut codes = vec![u32::MAX; n];
    for &m in &members {
        codes[m as usize] = 0;
    }
    let column = w.add(&format!("field-{}-copies", fields.len()), &codes);
    fields.push(WrittenField {
        field: Field {
            name: name.clone(),
            kind: vitrine_format::FieldKind::Category,
            column,
            column2: None,
            values: vec![HAS_COPIES.into()],
            value_counts: vec![members.len() as u64],
            written: None,
            multi: None,
            multi_separator: None,
        },
        codes: Some(codes),
        all: None,
    });
    Ok(vitrine_format::Copies {
        method: format!(
            "candidates: neighbour pairs at most {} x the 75th percentile of the item's neighbour distances, or files of the same bytes; confirmed: a 64-bit DCT perceptual hash within {} bits (least over 5 % and 10 % crops) and a colour correlation of at least {}; groups: connected confirmed pairs",
            rule.ratio, rule.max_bits, rule.min_colour
        ),
        max_bits: rule.max_bits,
        min_colour: rule.min_colour,
        ratio: rule.ratio,
        members: w.add("copies-members", &members),
        starts: w.add("copies-starts", &starts),
        pairs: w.add("copies-pairs", &pairs),
        pair_bits: w.add("copies-pair-bits", &bits),
        field: Some(name),
    })
}

/// Every setting that shaped the atlas, for its provenance.
fn parameters(
    opts: &BuildOptions,
    c: &Computed,
    n: usize,
    described: Option<&crate::from_images::Described>,
) -> serde_json::Map<String, serde_json::Value> {
    let (umap_params, start, reduction): (_, _, &Reduction) =
        (&c.map.params, &c.map.start, &c.reduction);
    let mut p = serde_json::Map::new();
    p.insert("metric".into(), json!(opts.metric.name()));
    p.insert("k".into(), json!(c.graph.graph.k));
    p.insert(
        "neighbour_search".into(),
        json!(if c.graph.exact { "exact" } else { "nn-descent" }),
    );
    if let Some((params, report)) = &c.graph.search {
        p.insert("nn_descent_trees".into(), json!(params.trees));
        p.insert("nn_descent_leaf_size".into(), json!(params.leaf_size));
        p.insert("nn_descent_sample_rate".into(), json!(params.sample_rate));
        p.insert("nn_descent_min_recall".into(), json!(params.min_recall));
        p.insert("nn_descent_rounds".into(), json!(report.rounds));
        p.insert("nn_descent_widenings".into(), json!(report.widenings));
        p.insert("nn_descent_list_length".into(), json!(report.list_length));
    }
    p.insert("layout".into(), json!("umap"));
    p.insert("min_dist".into(), json!(opts.min_dist));
    p.insert("spread".into(), json!(1.0));
    let (a, b) = vitrine_map::umap::fit_ab(opts.min_dist, 1.0);
    p.insert("umap_a".into(), json!(a));
    p.insert("umap_b".into(), json!(b));
    p.insert(
        "epochs".into(),
        json!(vitrine_map::umap::epochs_for(n, umap_params.epochs)),
    );
    p.insert("start".into(), json!(start.method));
    p.insert("start_graph_parts".into(), json!(start.parts));
    p.insert("start_spectral_parts".into(), json!(start.spectral_parts));
    p.insert("start_residual".into(), json!(start.max_residual));
    p.insert(
        "layout_optimiser".into(),
        json!(if umap_params.parallel {
            "parallel blocks"
        } else {
            "sequential"
        }),
    );
    p.insert("pca".into(), json!(opts.pca));
    p.insert("browser_vectors".into(), json!(opts.browser_vectors));
    if let Some(v) = &c.browser_vectors {
        p.insert("browser_vectors_dimensions".into(), json!(v.dims));
        p.insert(
            "browser_vectors_explained_variance".into(),
            json!(v.explained_variance),
        );
    }
    if let Some(d) = described {
        p.insert("vectors_engine".into(), json!(d.engine));
        p.insert("vectors_dimensions".into(), json!(d.dims));
        p.insert(
            "vectors_from".into(),
            json!(format!(
                "each item's largest thumbnail ({} px on its long side)",
                opts.cells.last().copied().unwrap_or(0)
            )),
        );
    }
    p.insert("id_column".into(), json!(opts.id_column));
    if let Some(k) = &opts.vectors_key {
        p.insert("vectors_key".into(), json!(k));
    }
    if let Some(d) = opts.catalogue_format.delimiter {
        p.insert("catalogue_delimiter".into(), json!((d as char).to_string()));
    }
    if let Some(e) = opts.catalogue_format.encoding {
        p.insert("catalogue_encoding".into(), json!(e.name()));
    }
    if let Some(s) = &opts.catalogue_format.sheet {
        p.insert("catalogue_sheet".into(), json!(s));
    }
    p.insert("sheet_size".into(), json!(opts.sheet_size));
    p.insert("cells".into(), json!(opts.cells));
    p.insert("jpeg_quality".into(), json!(opts.jpeg_quality));
    p.insert("max_pixels".into(), json!(opts.max_pixels));
    p.insert("decode_memory".into(), json!(opts.decode_memory));
    p.insert("strict".into(), json!(opts.strict));
    if let Some(rule) = &opts.copies {
        p.insert("copy_ratio".into(), json!(rule.ratio));
        p.insert("copy_max_bits".into(), json!(rule.max_bits));
        p.insert("copy_min_colour".into(), json!(rule.min_colour));
    }
    p.insert(
        "vector_dimensions".into(),
        json!(reduction.input_dimensions),
    );
    if let Some(pca) = &reduction.pca {
        p.insert("pca_dimensions".into(), json!(pca.components.len()));
        p.insert("pca_explained_variance".into(), json!(pca.explained()));
        p.insert(
            "pca_explained_variance_ratios".into(),
            json!(pca.explained_variance_ratio),
        );
        p.insert("pca_fit_items".into(), json!(pca.fit_rows));
        p.insert("pca_method".into(), json!(vitrine_map::pca::method()));
    }
    p
}

/// The compressed vectors in atlas order, in chunks.
fn browser_vectors(
    w: &mut ArrayWriter,
    v: &vitrine_map::compress::Compressed,
    order: &[usize],
) -> BrowserVectors {
    let d = v.dims;
    let per = VECTOR_CHUNK_ITEMS as usize;
    let chunks = order
        .chunks(per)
        .enumerate()
        .map(|(c, part)| {
            let bytes: Vec<u8> = part
                .iter()
                .flat_map(|&i| v.codes[i * d..(i + 1) * d].iter().copied())
                .collect();
            w.add(&format!("vectors/q8-{c:04}"), &bytes)
        })
        .collect();
    BrowserVectors {
        dims: d as u32,
        offset: v.offset.clone(),
        scale: v.scale.clone(),
        chunk_items: VECTOR_CHUNK_ITEMS,
        chunks,
        explained_variance: v.explained_variance,
        method: v.method.clone(),
    }
}

/// The manifest's quality figures: cluster count, trustworthiness and continuity of the
/// similarity map and the lattice, NN-descent's recall.
fn quality_figures(c: &Computed, clusters: usize) -> serde_json::Map<String, serde_json::Value> {
    let mut q = serde_json::Map::new();
    q.insert("clusters".into(), json!(clusters));
    if let Some(mq) = &c.quality {
        q.insert(
            "similarity_trustworthiness_at_10".into(),
            json!(mq.trustworthiness),
        );
        q.insert("similarity_continuity_at_10".into(), json!(mq.continuity));
        q.insert("quality_sample_items".into(), json!(mq.sample));
    }
    if let Some(lq) = &c.lattice.quality {
        q.insert(
            "lattice_trustworthiness_at_10".into(),
            json!(lq.trustworthiness),
        );
        q.insert("lattice_continuity_at_10".into(), json!(lq.continuity));
    }
    if let Some((r, items)) = c.graph.recall {
        q.insert("neighbour_recall".into(), json!(r));
        q.insert("neighbour_recall_sample_items".into(), json!(items));
    }
    // Only when the lists were widened: otherwise it is the recall above.
    let widened = c.graph.search.as_ref().filter(|(_, r)| r.widenings > 0);
    if let Some(r) = widened.and_then(|(_, r)| r.first_recall) {
        q.insert("neighbour_recall_before_widening".into(), json!(r));
    }
    q
}

fn input_file(role: &str, path: &Path) -> Result<InputFile> {
    let bytes = std::fs::read(path).with_context(|| format!("reading {}", path.display()))?;
    // Only the file name: the atlas is meant for publishing, and a local folder layout is nobody's business.
    Ok(InputFile {
        role: role.into(),
        path: file_name(path),
        bytes: bytes.len() as u64,
        sha256: vitrine_format::sha256_hex(&bytes),
    })
}

fn file_name(path: &Path) -> String {
    path.file_name()
        .map(|s| s.to_string_lossy().to_string())
        .unwrap_or_else(|| path.display().to_string())
}

/// Collects the arrays of the atlas being written.
struct ArrayWriter {
    files: Vec<(String, Vec<u8>)>,
}

impl ArrayWriter {
    fn add<T: vitrine_format::Element>(&mut self, name: &str, data: &[T]) -> ArrayRef {
        let (r, bytes) = ArrayRef::encode(&format!("arrays/{name}.bin"), data);
        self.files.push((r.file.clone(), bytes));
        r
    }
    fn text(&mut self, name: &str, items: &[impl AsRef<str>]) -> [ArrayRef; 2] {
        let t = TextTable::from_strings(items);
        [
            self.add(&format!("{name}.offsets"), &t.offsets),
            self.add(&format!("{name}.text"), &t.utf8),
        ]
    }
}

fn safe_name(s: &str) -> String {
    s.chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' {
                c.to_ascii_lowercase()
            } else {
                '_'
            }
        })
        .collect()
}

/// Positions rearranged into atlas order, interleaved x, y, with their bounds [min_x, min_y, max_x, max_y].
fn in_atlas_order(order: &[usize], pos: &[[f32; 2]]) -> (Vec<f32>, [f32; 4]) {
    let mut xy = Vec::with_capacity(order.len() * 2);
    let mut b = [
        f32::INFINITY,
        f32::INFINITY,
        f32::NEG_INFINITY,
        f32::NEG_INFINITY,
    ];
    for &i in order {
        let [x, y] = pos[i];
        xy.push(x);
        xy.push(y);
        b = [b[0].min(x), b[1].min(y), b[2].max(x), b[3].max(y)];
    }
    (xy, b)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn browser_vectors_cross_a_chunk_boundary_in_atlas_order() {
        // One item more than a chunk holds, 3 bytes an item; atlas order reverses the input.
        let n = VECTOR_CHUNK_ITEMS as usize + 1;
        let codes: Vec<u8> = (0..n * 3).map(|k| (k % 251) as u8).collect();
        let v = vitrine_map::compress::Compressed {
            dims: 3,
            offset: vec![0.0; 3],
            scale: vec![1.0; 3],
            codes: codes.clone(),
            explained_variance: 1.0,
            method: String::new(),
        };
        let order: Vec<usize> = (0..n).rev().collect();
        let mut w = ArrayWriter { files: Vec::new() };
        let b = browser_vectors(&mut w, &v, &order);
        assert_eq!(b.chunks.len(), 2);
        assert_eq!(
            (b.chunks[0].count, b.chunks[1].count),
            ((n as u64 - 1) * 3, 3)
        );
        assert_eq!(b.chunks[1].file, "arrays/vectors/q8-0001.bin");
        // The last chunk's one item is the input's first row; the first chunk starts with the last.
        let bytes = |k: usize| &w.files[k].1;
        assert_eq!(&bytes(1)[..], &codes[..3]);
        assert_eq!(&bytes(0)[..3], &codes[(n - 1) * 3..]);
        for c in &b.chunks {
            let data = &w.files.iter().find(|f| f.0 == c.file).unwrap().1;
            c.verify(data).unwrap();
        }
    }
}
