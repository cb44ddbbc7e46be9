//! `vitrine-bench atlas N OUT`: a tiled bench atlas of N invented items written directly, without
//! building a map, so that the viewer's speed can be measured at sizes no build on this machine
//! reaches (25,000,000 items).
//!
//! Positions come from a seeded mixture on the plane: 60 groups of very different sizes (weights
//! falling as 1/rank^0.8), spreads and shapes, 4 % scattered over the whole map and 0.2 % on one
//! point (a hard case for the pyramid: no split can part them). An invented catalogue (id, title,
//! technique, place, dating as written), 1,000 shared invented pictures in sheets of 32 and 128
//! pixels, neighbour lists (the 15 nearest on the map, exact, by a k-d tree), clusters (the
//! groups). The items are put in Hilbert order, then in the pyramid's leaf order, and the atlas is
//! tiled by the build's own code.

use std::path::{Path, PathBuf};
use std::time::Instant;

use anyhow::{bail, Context, Result};
use kiddo::{ImmutableKdTree, SquaredEuclidean};
use rayon::prelude::*;
use vitrine_format::{
    ArrayRef, ClusterInfo, Clusters, Field, FieldKind, Manifest, MapLayout, NeighbourChunk,
    Neighbours, Provenance, SheetLevel, Sheets, TextTable, FORMAT_NAME, FORMAT_VERSION,
    MANIFEST_FILE, NEIGHBOUR_CHUNK_ITEMS,
};
use vitrine_map::rng::Rng;

const TECHNIQUES: [&str; 7] = [
    "etching",
    "engraving",
    "woodcut",
    "drawing",
    "mezzotint",
    "lithograph",
    "photograph",
];
const PLACES: [&str; 8] = [
    "Varnholt",
    "Osterlee",
    "Brisca",
    "Montaubel",
    "Quellendaar",
    "Lurano",
    "Tremmel",
    "Saint-Oriel",
];
const SUBJECTS: [&str; 8] = [
    "harbour", "orchard", "bridge", "mill", "chapel", "market", "ferry", "granary",
];
const KINDS: [&str; 5] = ["Study", "View", "Sketch", "Plate", "Prospect"];
const GROUPS: usize = 60;
const PICTURES: usize = 1000;
const K: usize = 15;
const LEVELS: [u32; 2] = [32, 128];

struct Group {
    centre: [f64; 2],
    spread: [f64; 2],
    turn: f64,
}

/// The seeded mixture: groups, their cumulative weights.
fn groups(seed: u64) -> (Vec<Group>, Vec<f64>) {
    let mut r = Rng::new(seed);
    let g: Vec<Group> = (0..GROUPS)
        .map(|_| {
            let s = 0.3 * (4.0f64 / 0.3).powf(r.uniform());
            Group {
                centre: [r.uniform() * 100.0 - 50.0, r.uniform() * 100.0 - 50.0],
                spread: [s, s * (0.3 + r.uniform())],
                turn: r.uniform() * std::f64::consts::PI,
            }
        })
        .collect();
    let mut cum = Vec::with_capacity(GROUPS);
    let mut t = 0.0;
    for k in 0..GROUPS {
        t += 1.0 / ((k + 1) as f64).powf(0.8);
        cum.push(t);
    }
    (g, cum.into_iter().map(|c| c / t).collect())
}

/// What one item is before ordering: place, group (GROUPS = scattered, GROUPS + 1 = the point).
#[derive(Clone, Copy)]
struct Item {
    xy: [f32; 2],
    group: u32,
    technique: u8,
    place: u8,
    start: i16,
    span: u8,
    kind: u8,
    subject: u8,
    picture: u16,
}

fn invent(n: usize, seed: u64) -> Vec<Item> {
    let (gs, cum) = groups(seed);
    const BLOCK: usize = 1 << 16;
    (0..n.div_ceil(BLOCK))
        .into_par_iter()
        .flat_map_iter(|b| {
            let mut r = Rng::new(seed ^ (b as u64 + 1).wrapping_mul(0xA24B_AED4_963E_E407));
            let (gs, cum) = (&gs, &cum);
            (b * BLOCK..((b + 1) * BLOCK).min(n)).map(move |_| {
                let u = r.uniform();
                let (xy, group) = if u < 0.002 {
                    // Within a ten-thousandth of one point: one leaf at the deepest level.
                    let j = [r.uniform() - 0.5, r.uniform() - 0.5];
                    ([12.5 + 2e-4 * j[0], -7.25 + 2e-4 * j[1]], GROUPS as u32 + 1)
                } else if u < 0.042 {
                    (
                        [r.uniform() * 120.0 - 60.0, r.uniform() * 120.0 - 60.0],
                        GROUPS as u32,
                    )
                } else {
                    let v = r.uniform();
                    let k = cum.partition_point(|&c| c < v).min(GROUPS - 1);
                    let g = &gs[k];
                    // Box-Muller.
                    let (a, b) = (r.uniform().max(1e-300), r.uniform());
                    let m = (-2.0 * a.ln()).sqrt();
                    let (zx, zy) = (
                        m * (std::f64::consts::TAU * b).cos() * g.spread[0],
                        m * (std::f64::consts::TAU * b).sin() * g.spread[1],
                    );
                    let (s, c) = g.turn.sin_cos();
                    (
                        [g.centre[0] + c * zx - s * zy, g.centre[1] + s * zx + c * zy],
                        k as u32,
                    )
                };
                let group_tech = group as u64 % TECHNIQUES.len() as u64;
                Item {
                    xy: [xy[0] as f32, xy[1] as f32],
                    group,
                    technique: ((group_tech + r.below(2)) % TECHNIQUES.len() as u64) as u8,
                    place: r.below(PLACES.len() as u64) as u8,
                    start: (1480 + r.below(400)) as i16,
                    span: r.below(40) as u8,
                    kind: r.below(KINDS.len() as u64) as u8,
                    subject: r.below(SUBJECTS.len() as u64) as u8,
                    picture: ((group as u64 * 16 + r.below(16)) % PICTURES as u64) as u16,
                }
            })
        })
        .collect()
}

/// Picture `p` (invented: a ground, a band and a disc in seeded colours), `w` x `h` pixels.
fn picture(p: usize, w: u32, h: u32) -> image::RgbImage {
    let mut r = Rng::new(p as u64 * 7919 + 3);
    let mut colour = || {
        [
            40 + r.below(200) as u8,
            40 + r.below(200) as u8,
            40 + r.below(200) as u8,
        ]
    };
    let (ground, band, disc) = (colour(), colour(), colour());
    let mut r = Rng::new(p as u64);
    let (band_at, cx, cy, rad) = (
        r.uniform(),
        r.uniform(),
        r.uniform(),
        0.1 + 0.3 * r.uniform(),
    );
    image::RgbImage::from_fn(w, h, |x, y| {
        let (u, v) = (x as f64 / w as f64, y as f64 / h as f64);
        let c = if (u - cx).powi(2) + (v - cy).powi(2) < rad * rad {
            disc
        } else if (v - band_at).abs() < 0.08 {
            band
        } else {
            ground
        };
        image::Rgb(c)
    })
}

/// The sheets of the shared pictures (landscape when even, portrait when odd), their extents in
/// the largest cell and average colours.
/// Sheet levels, each picture's extent and its average colour.
type Pictures = (Vec<SheetLevel>, Vec<u32>, Vec<[u8; 4]>);

fn sheets(dir: &Path) -> Result<Pictures> {
    let largest = *LEVELS.last().unwrap();
    let size = |p: usize, cell: u32| {
        let (a, b) = (cell, cell * 3 / 4);
        if p.is_multiple_of(2) {
            (a, b)
        } else {
            (b, a)
        }
    };
    let mut levels = Vec::new();
    std::fs::create_dir_all(dir.join("sheets"))?;
    for &cell in &LEVELS {
        let columns = (2048 / cell).max(1);
        let rows = 16;
        let per = (columns * rows) as usize;
        let mut files = Vec::new();
        for s in 0..PICTURES.div_ceil(per) {
            let here = per.min(PICTURES - s * per) as u32;
            let mut sheet = image::RgbImage::new(columns * cell, here.div_ceil(columns) * cell);
            for k in 0..here {
                let p = s * per + k as usize;
                let (w, h) = size(p, cell);
                let pic = picture(p, w, h);
                image::imageops::replace(
                    &mut sheet,
                    &pic,
                    ((k % columns) * cell) as i64,
                    ((k / columns) * cell) as i64,
                );
            }
            let name = format!("sheets/L{cell}-{s}.jpg");
            let mut f = std::io::BufWriter::new(std::fs::File::create(dir.join(&name))?);
            image::codecs::jpeg::JpegEncoder::new_with_quality(&mut f, 85).encode_image(&sheet)?;
            files.push(name);
        }
        levels.push(SheetLevel {
            cell,
            columns,
            rows,
            files,
        });
    }
    let extents = (0..PICTURES)
        .map(|p| {
            let (w, h) = size(p, largest);
            w | h << 16
        })
        .collect();
    let colours = (0..PICTURES)
        .map(|p| {
            let (w, h) = size(p, 32);
            let pic = picture(p, w, h);
            let mut sum = [0u64; 3];
            for px in pic.pixels() {
                for c in 0..3 {
                    sum[c] += px[c] as u64;
                }
            }
            let n = (w * h) as u64;
            [
                (sum[0] / n) as u8,
                (sum[1] / n) as u8,
                (sum[2] / n) as u8,
                255,
            ]
        })
        .collect();
    Ok((levels, extents, colours))
}

struct Files(Vec<(String, Vec<u8>)>);

impl Files {
    fn add<T: vitrine_format::Element>(&mut self, name: &str, data: &[T]) -> ArrayRef {
        let (r, bytes) = ArrayRef::encode(&format!("arrays/{name}.bin"), data);
        self.0.push((r.file.clone(), bytes));
        r
    }
    fn text(&mut self, name: &str, t: &TextTable) -> [ArrayRef; 2] {
        [
            self.add(&format!("{name}.offsets"), &t.offsets),
            self.add(&format!("{name}.text"), &t.utf8),
        ]
    }
}

/// A text table from the strings `f(i)` for i in 0..n, without holding them all as Strings.
fn table(n: usize, f: impl Fn(usize, &mut String)) -> TextTable {
    let mut t = TextTable {
        offsets: Vec::with_capacity(n + 1),
        utf8: Vec::new(),
    };
    t.offsets.push(0);
    let mut s = String::new();
    for i in 0..n {
        s.clear();
        f(i, &mut s);
        t.utf8.extend_from_slice(s.as_bytes());
        t.offsets.push(t.utf8.len() as u32);
    }
    t
}

fn category(files: &mut Files, name: &str, values: &[&str], codes: Vec<u32>) -> Field {
    let mut counts = vec![0u64; values.len()];
    for &c in &codes {
        counts[c as usize] += 1;
    }
    Field {
        name: name.into(),
        kind: FieldKind::Category,
        column: files.add(&format!("field-{name}"), &codes),
        column2: None,
        values: values.iter().map(|v| v.to_string()).collect(),
        value_counts: counts,
        written: None,
        multi: None,
        multi_separator: None,
    }
}

pub fn run(args: &[String]) -> Result<()> {
    let usage = "usage: vitrine-bench atlas ITEMS OUT [--tile-items N] [--seed S] [--viewer DIR]";
    let (Some(n), Some(out)) = (args.first(), args.get(1)) else {
        bail!(usage);
    };
    let n: usize = n.parse().context(usage)?;
    let out = PathBuf::from(out);
    let mut capacity = 40_000u64;
    let mut seed = 42u64;
    let mut viewer = None;
    let mut rest = args[2..].iter();
    while let Some(a) = rest.next() {
        let v = rest.next().context(usage)?;
        match a.as_str() {
            "--tile-items" => capacity = v.parse()?,
            "--seed" => seed = v.parse()?,
            "--viewer" => viewer = Some(PathBuf::from(v)),
            _ => bail!(usage),
        }
    }
    if n == 0 || n > u32::MAX as usize / 2 {
        bail!("{n} items: from 1 to 2^31");
    }
    let t0 = Instant::now();
    let lap = |what: &str| eprintln!("[bench atlas] {what}: {:.1} s", t0.elapsed().as_secs_f64());
    let tmp = out.with_extension("part");
    let _ = std::fs::remove_dir_all(&tmp);
    std::fs::create_dir_all(tmp.join("arrays").join("neighbours"))?;

    let items = invent(n, seed);
    lap("items invented");
    // Hilbert order over the map, then the pyramid's leaf order.
    let xy: Vec<[f32; 2]> = items.iter().map(|it| it.xy).collect();
    let hilbert = vitrine_map::hilbert::hilbert_order(&xy);
    let flat: Vec<f32> = hilbert.iter().flat_map(|&i| xy[i]).collect();
    drop(xy);
    let (pyramid, leaf) = vitrine_build::tiles::leaf_order(&flat, capacity);
    drop(flat);
    let order: Vec<u32> = leaf.iter().map(|&k| hilbert[k as usize] as u32).collect();
    drop((hilbert, leaf));
    let it = |k: usize| &items[order[k] as usize];
    lap("ordered");

    let mut files = Files(Vec::new());
    let (levels, extents_of, colour_of) = sheets(&tmp)?;
    let positions: Vec<[f32; 2]> = (0..n).map(|k| it(k).xy).collect();
    let flat: Vec<f32> = positions.iter().flatten().copied().collect();
    let mut bounds = [f32::MAX, f32::MAX, f32::MIN, f32::MIN];
    for p in &positions {
        bounds = [
            bounds[0].min(p[0]),
            bounds[1].min(p[1]),
            bounds[2].max(p[0]),
            bounds[3].max(p[1]),
        ];
    }
    let sim = files.add("map-similarity", &flat);
    drop(flat);
    let ids = table(n, |k, s| {
        use std::fmt::Write;
        let _ = write!(s, "r{:08}", order[k]);
    });
    let [ids, ids_text] = files.text("ids", &ids);
    let source_rows = files.add("source-rows", &order);
    let colours: Vec<u8> = (0..n)
        .flat_map(|k| colour_of[it(k).picture as usize])
        .collect();
    let colours = files.add("colours", &colours);
    let pictures: Vec<u32> = (0..n).map(|k| it(k).picture as u32).collect();
    let extents: Vec<u32> = pictures.iter().map(|&p| extents_of[p as usize]).collect();
    let sizes: Vec<u32> = pictures
        .iter()
        .flat_map(|&p| {
            if p % 2 == 0 {
                [1920, 1440]
            } else {
                [1440, 1920]
            }
        })
        .collect();
    let sheets = Sheets {
        levels,
        extents: files.add("extents", &extents),
        image_sizes: Some(files.add("image-sizes", &sizes)),
        pictures: Some(files.add("pictures", &pictures)),
    };
    drop((extents, sizes, pictures));
    lap("pictures and colours");

    let titles = table(n, |k, s| {
        let i = it(k);
        s.push_str(KINDS[i.kind as usize]);
        s.push_str(" of the ");
        s.push_str(SUBJECTS[i.subject as usize]);
    });
    let [title, title_bytes] = files.text("field-title", &titles);
    drop(titles);
    let mut fields = vec![
        Field {
            name: "title".into(),
            kind: FieldKind::Text,
            column: title,
            column2: Some(title_bytes),
            values: vec![],
            value_counts: vec![],
            written: None,
            multi: None,
            multi_separator: None,
        },
        category(
            &mut files,
            "technique",
            &TECHNIQUES,
            (0..n).map(|k| it(k).technique as u32).collect(),
        ),
        category(
            &mut files,
            "place",
            &PLACES,
            (0..n).map(|k| it(k).place as u32).collect(),
        ),
    ];
    // Datings as a catalogue writes them, and the ranges the build's rule reads from them.
    let range = |i: &Item| {
        let s = i.start as i32;
        if i.span < 5 {
            (s - 5, s + 5)
        } else {
            (s, s + i.span as i32)
        }
    };
    let starts: Vec<i32> = (0..n).map(|k| range(it(k)).0).collect();
    let ends: Vec<i32> = (0..n).map(|k| range(it(k)).1).collect();
    let written = table(n, |k, s| {
        use std::fmt::Write;
        let i = it(k);
        let _ = if i.span < 5 {
            write!(s, "c. {}", i.start)
        } else {
            write!(s, "{}-{}", i.start, i.start as i32 + i.span as i32)
        };
    });
    fields.push(Field {
        name: "date".into(),
        kind: FieldKind::Date,
        column: files.add("field-date", &starts),
        column2: Some(files.add("field-date.end", &ends)),
        values: vec![],
        value_counts: vec![],
        written: Some(files.text("field-date.written", &written)),
        multi: None,
        multi_separator: None,
    });
    drop((starts, ends, written));
    let groups_of: Vec<u32> = (0..n).map(|k| it(k).group).collect();
    let (gs, _) = groups(seed);
    let mut sizes = vec![0u64; GROUPS + 2];
    for &g in &groups_of {
        sizes[g as usize] += 1;
    }
    let list = (0..GROUPS + 2)
        .map(|g| ClusterInfo {
            size: sizes[g],
            label: match g {
                GROUPS => "scattered".into(),
                g if g == GROUPS + 1 => "one point".into(),
                _ => format!("{} group {}", TECHNIQUES[g % TECHNIQUES.len()], g + 1),
            },
            position: match g {
                GROUPS => [0.0, 0.0],
                g if g == GROUPS + 1 => [12.5, -7.25],
                _ => [gs[g].centre[0] as f32, gs[g].centre[1] as f32],
            },
            terms: vec![],
        })
        .collect();
    let clusters = Clusters {
        method: "the invented mixture's groups (bench atlas)".into(),
        ids: files.add("clusters", &groups_of),
        list,
    };
    drop(groups_of);
    lap("catalogue");

    let neighbours = neighbour_chunks(&tmp, &positions)?;
    drop(positions);
    lap("neighbours");

    let mut manifest = Manifest {
        format: FORMAT_NAME.into(),
        format_version: FORMAT_VERSION,
        title: format!("Bench archive, {n} items (invented)"),
        item_count: n as u64,
        ids,
        ids_text,
        source_rows,
        colours,
        fields,
        maps: vec![MapLayout {
            name: "similarity".into(),
            description: "an invented mixture on the plane (bench atlas, no map was built)".into(),
            positions: sim,
            bounds,
            x_axis: None,
        }],
        neighbours,
        sheets: Some(sheets),
        clusters: Some(clusters),
        quality: Default::default(),
        vectors: None,
        copies: None,
        provenance: Provenance {
            tool: "vitrine-bench atlas".into(),
            tool_version: env!("CARGO_PKG_VERSION").into(),
            inputs: vec![],
            parameters: serde_json::json!({
                "items": n, "tile_items": capacity, "groups": GROUPS, "pictures": PICTURES,
                "k": K, "levels": LEVELS,
            })
            .as_object()
            .unwrap()
            .clone(),
            seed,
        },
        tiles: None,
    };
    let mut held = std::mem::take(&mut files.0);
    vitrine_build::tiles::tile(&mut manifest, &mut held, pyramid, |what| {
        lap(what);
    })?;
    lap("tiled");
    let mut made = std::collections::BTreeSet::new();
    for (name, bytes) in held {
        let path = tmp.join(&name);
        if let Some(p) = path.parent() {
            if made.insert(p.to_path_buf()) {
                std::fs::create_dir_all(p)?;
            }
        }
        std::fs::write(&path, bytes).with_context(|| format!("writing {name}"))?;
    }
    let json = manifest.to_json();
    Manifest::from_json(&json).context("the bench atlas's manifest does not validate")?;
    std::fs::write(tmp.join(MANIFEST_FILE), json)?;
    if let Some(v) = viewer {
        let mut report = vitrine_build::report::BuildReport::default();
        vitrine_build::folder::copy_viewer(Some(&v), &[], &tmp, &mut report)?;
    }
    let _ = std::fs::remove_dir_all(&out);
    std::fs::rename(&tmp, &out)?;
    lap("written");
    let bytes = folder_bytes(&out)?;
    println!(
        "{{\"items\":{n},\"seconds\":{:.1},\"bytes\":{bytes},\"tiles\":{},\"leaves\":{}}}",
        t0.elapsed().as_secs_f64(),
        manifest.tiles.as_ref().map_or(0, |t| t.pyramid.tiles.len()),
        manifest.tiles.as_ref().map_or(0, |t| t.runs().len()),
    );
    Ok(())
}

/// The K nearest other items of every item on the map (exact, by a k-d tree), written in chunks
/// of the build's size as they are found.
fn neighbour_chunks(dir: &Path, positions: &[[f32; 2]]) -> Result<Neighbours> {
    let tree: ImmutableKdTree<f32, 2> = ImmutableKdTree::new_from_slice(positions)
        .map_err(|e| anyhow::anyhow!("k-d tree: {e:?}"))?;
    let per = NEIGHBOUR_CHUNK_ITEMS as usize;
    let want = std::num::NonZero::new((K + 1).min(positions.len())).unwrap();
    let chunks = (0..positions.len().div_ceil(per))
        .into_par_iter()
        .map(|c| -> Result<NeighbourChunk> {
            let range = c * per..((c + 1) * per).min(positions.len());
            let mut ids = Vec::with_capacity(range.len() * K);
            let mut dist = Vec::with_capacity(range.len() * K);
            for i in range {
                let found = tree
                    .query(&positions[i])
                    .nearest_n::<SquaredEuclidean<f32>>(want)
                    .execute();
                let mut got = 0;
                for nb in found.iter().filter(|nb| nb.item as usize != i).take(K) {
                    ids.push(nb.item);
                    dist.push(nb.distance.sqrt());
                    got += 1;
                }
                for _ in got..K {
                    ids.push(u32::MAX);
                    dist.push(f32::INFINITY);
                }
            }
            let (ri, bi) = ArrayRef::encode(&format!("arrays/neighbours/ids-{c:04}.bin"), &ids);
            let (rd, bd) =
                ArrayRef::encode(&format!("arrays/neighbours/distances-{c:04}.bin"), &dist);
            std::fs::write(dir.join(&ri.file), bi)?;
            std::fs::write(dir.join(&rd.file), bd)?;
            Ok(NeighbourChunk {
                ids: ri,
                distances: rd,
            })
        })
        .collect::<Result<Vec<_>>>()?;
    Ok(Neighbours {
        k: K as u32,
        metric: "euclidean".into(),
        exact: true,
        chunk_items: NEIGHBOUR_CHUNK_ITEMS,
        chunks,
    })
}

fn folder_bytes(dir: &Path) -> Result<u64> {
    let mut total = 0;
    for e in std::fs::read_dir(dir)? {
        let e = e?;
        let m = e.metadata()?;
        total += if m.is_dir() {
            folder_bytes(&e.path())?
        } else {
            m.len()
        };
    }
    Ok(total)
}
