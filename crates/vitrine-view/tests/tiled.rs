//! A tiled atlas (format 3) written by `vitrine build --tile-items` in the viewer: the first
//! picture from overview pictures alone, a coarser picture standing in while finer ones load,
//! and, zoomed in with its leaves here, the same items at the same places and in the same
//! colours as the atlas fetched whole.

mod common;

use std::path::Path;

use vitrine_build::pipeline::{build, BuildOptions, Silent};
use vitrine_build::read::Atlas;
use vitrine_format::AtlasFiles;
use vitrine_test_support::write_npy_f32;
use vitrine_view::atlas::AtlasData;
use vitrine_view::raster::READING_ROOM;
use vitrine_view::tiled::{Draw, Fetch, Overview};
use vitrine_view::viewer::Viewer;

/// 600 items in three groups of very different spreads; no images (marks in their field's
/// colours).
fn inputs(dir: &Path) {
    let mut data = Vec::new();
    for i in 0..600usize {
        let g = i % 3;
        for d in 0..6 {
            let spread = [0.02, 0.3, 2.0][g];
            data.push(if d == g * 2 { 5.0 } else { 0.0 } + ((i * 7 + d * 13) % 11) as f32 * spread);
        }
    }
    write_npy_f32(&dir.join("v.npy"), 600, 6, &data).unwrap();
    let mut csv = String::from("id,group\n");
    for i in 0..600 {
        csv.push_str(&format!("r{i},{}\n", ["amber", "birch", "cobalt"][i % 3]));
    }
    std::fs::write(dir.join("c.csv"), csv).unwrap();
}

fn options(dir: &Path, out: &str, tiles: Option<u64>) -> BuildOptions {
    let mut o = BuildOptions::new(dir.join("v.npy"), dir.join(out));
    o.catalogue = Some(dir.join("c.csv"));
    o.epochs = Some(50);
    o.tile_items = tiles;
    o
}

fn viewer(atlas: AtlasData) -> Viewer {
    Viewer::new(atlas, [640.0, 400.0], String::new(), READING_ROOM)
}

fn overview(on_disk: &Atlas, t: usize) -> Overview {
    let f = on_disk.dir.join(vitrine_format::tiles::overview_file(t));
    let img = image::open(f).unwrap().to_rgba8();
    Overview {
        side: img.width() as usize,
        rgba: img.into_raw(),
    }
}

fn leaf_files(on_disk: &Atlas, v: &Viewer, leaf: usize) -> AtlasFiles {
    let mut files = AtlasFiles::new();
    for f in v.atlas.leaf_files(leaf) {
        files.insert(f.clone(), std::fs::read(on_disk.dir.join(&f)).unwrap());
    }
    files
}

fn sums(on_disk: &Atlas) -> AtlasFiles {
    let mut files = AtlasFiles::new();
    for c in &on_disk.manifest.tiles.as_ref().unwrap().chunked {
        files.insert(
            c.sums.file.clone(),
            std::fs::read(on_disk.dir.join(&c.sums.file)).unwrap(),
        );
    }
    files
}

/// The inputs built whole and tiled (leaves of at most `capacity` items): the folder they are in,
/// the tiled atlas on disk, a viewer of it with nothing fetched, and a viewer of the whole one.
fn built(capacity: u64) -> (tempfile::TempDir, Atlas, Viewer, Viewer) {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    inputs(d);
    let (whole, _) = common::build_and_open(&options(d, "whole", None));
    let o = options(d, "tiled", Some(capacity));
    build(&o, &Silent).unwrap();
    let on_disk = Atlas::open(&o.out).unwrap();
    let v = viewer(AtlasData::tiled(on_disk.manifest.clone()).unwrap());
    (dir, on_disk, v, viewer(whole))
}

#[test]
fn a_tiled_atlas_draws_its_overviews_then_the_same_items_as_the_whole_one() {
    let (_dir, on_disk, mut v, mut w) = built(40);
    let (pw, ph) = (640usize, 400usize);
    let mut buf = vec![0u8; pw * ph * 4];

    // Nothing here: paper, and the root's picture wanted first.
    v.draw(&mut buf, pw, ph);
    assert!(buf.chunks_exact(4).all(|p| p[..3] == READING_ROOM.paper));
    assert_eq!(v.plan.want_tiles.first(), Some(&0));
    // The root alone: it stands in for every tile the view wants, and marks show.
    v.insert_overview(0, overview(&on_disk, 0));
    v.draw(&mut buf, pw, ph);
    assert!(v
        .plan
        .draws
        .iter()
        .all(|d| matches!(d, Draw::Overview { from: 0, .. })));
    let inked = |b: &[u8]| {
        b.chunks_exact(4)
            .filter(|p| p[..3] != READING_ROOM.paper)
            .count()
    };
    let coarse = inked(&buf);
    assert!(coarse > 200, "{coarse} pixels");
    // Every picture the view wants: drawn from their own.
    while !v.plan.want_tiles.is_empty() {
        for t in v.plan.want_tiles.clone() {
            v.insert_overview(t, overview(&on_disk, t));
        }
        v.draw(&mut buf, pw, ph);
    }
    assert!(v
        .plan
        .draws
        .iter()
        .all(|d| matches!(d, Draw::Overview { tile, from } if tile == from)));

    // Zoomed in on one group: the leaves in view are wanted, drawn as items once here.
    let target = w.atlas.positions[0];
    for viewer in [&mut v, &mut w] {
        viewer.camera.centre = [target[0] as f64, target[1] as f64];
        viewer.camera.zoom *= 12.0;
    }
    v.draw(&mut buf, pw, ph);
    assert!(!v.plan.want_leaves.is_empty());
    for leaf in v.plan.want_leaves.clone() {
        let files = leaf_files(&on_disk, &v, leaf);
        v.insert_leaf(leaf, &sums(&on_disk), &files).unwrap();
    }
    v.make_picker();
    w.make_picker();
    let tiled_stats = v.draw(&mut buf, pw, ph).clone();
    assert!(v.plan.want_leaves.is_empty());
    let mut wbuf = vec![0u8; pw * ph * 4];
    let whole_stats = w.draw(&mut wbuf, pw, ph).clone();
    assert_eq!(tiled_stats.marks, whole_stats.marks);
    assert!(tiled_stats.marks > 0);
    // Marks stack in another order where they overlap; elsewhere the pixels agree.
    let differ = buf
        .chunks_exact(4)
        .zip(wbuf.chunks_exact(4))
        .filter(|(a, b)| a != b)
        .count();
    assert!(differ * 100 <= pw * ph, "{differ} pixels differ");
    // Hover picks the same record (by its place) in both.
    let s = v.camera.to_screen(target);
    let (a, b) = (v.pick(s).unwrap(), w.pick(s).unwrap());
    assert_eq!(v.atlas.positions[a], w.atlas.positions[b]);

    // A leaf whose chunk does not match its checksum is refused and not asked for again.
    let leaf = (0..v.atlas.tiled.as_ref().unwrap().runs.len())
        .find(|&l| v.atlas.tiled.as_ref().unwrap().leaf_state[l] == Fetch::Absent)
        .unwrap();
    let mut files = leaf_files(&on_disk, &v, leaf);
    let f = v.atlas.leaf_files(leaf)[1].clone();
    let mut bad = files
        .bytes(&vitrine_format::ArrayRef {
            file: f.clone(),
            ..on_disk.manifest.colours.clone()
        })
        .unwrap()
        .to_vec();
    bad[0] ^= 1;
    files.insert(f.clone(), bad);
    let e = v
        .insert_leaf(leaf, &sums(&on_disk), &files)
        .unwrap_err()
        .to_string();
    assert!(e.contains(&f), "{e}");
    assert_eq!(
        v.atlas.tiled.as_ref().unwrap().leaf_state[leaf],
        Fetch::Failed
    );
}

/// Every chunk of the array stored whole at `r`, with its list of checksums, read from disk.
fn chunks_of(on_disk: &Atlas, v: &Viewer, r: &vitrine_format::ArrayRef) -> AtlasFiles {
    let (sums, names) = v.atlas.chunk_files(r).unwrap();
    let mut files = AtlasFiles::new();
    for f in names.iter().chain([&sums.file]) {
        files.insert(f.clone(), std::fs::read(on_disk.dir.join(f)).unwrap());
    }
    files
}

#[test]
fn a_tiled_atlas_filters_every_item_from_its_fetched_columns_and_dims_its_overviews() {
    use vitrine_corpus::filter::Filter;
    let (_dir, on_disk, mut v, mut w) = built(40);
    let field = on_disk
        .manifest
        .fields
        .iter()
        .find(|f| f.name == "group")
        .unwrap()
        .clone();

    // The column joined from every leaf's chunk, checked whole, decoded as in the whole atlas.
    assert!(!v.atlas.has_field("group"));
    let mut whole_files = AtlasFiles::new();
    for r in vitrine_corpus::columns::field_arrays(&field) {
        let got = chunks_of(&on_disk, &v, r);
        whole_files.insert(r.file.clone(), v.atlas.join_chunks(r, &got).unwrap());
    }
    v.atlas.add_field("group", &whole_files).unwrap();
    assert!(v.atlas.has_field("group"));
    // Every item's leaf here, to compare places.
    let leaves = v.atlas.tiled.as_ref().unwrap().runs.len();
    for leaf in 0..leaves {
        let files = leaf_files(&on_disk, &v, leaf);
        v.insert_leaf(leaf, &sums(&on_disk), &files).unwrap();
    }
    let amber = || Filter::Category {
        field: "group".into(),
        values: vec!["amber".into()],
    };
    let (n, m) = (v.atlas.n, w.atlas.n);
    v.filters.set(amber(), &v.atlas.fields, n).unwrap();
    w.filters.set(amber(), &w.atlas.fields, m).unwrap();
    let places = |x: &Viewer| {
        let mut p: Vec<[u32; 2]> = x
            .filters
            .passing()
            .unwrap()
            .items()
            .map(|i| x.atlas.positions[i].map(f32::to_bits))
            .collect();
        p.sort();
        p
    };
    // Worked example: the catalogue gives every third record "amber", 200 of 600.
    assert_eq!(v.filters.passing().unwrap().count(), 200);
    assert_eq!(places(&v), places(&w));

    // The overviews dimmed: each pixel keeps its colour, its opacity falls where items are
    // filtered out; with every value chosen, the pictures are as the build drew them.
    let cells_ref = on_disk.manifest.tiles.as_ref().unwrap().cells.clone();
    let got = chunks_of(&on_disk, &v, &cells_ref);
    let cells = v.atlas.join_chunks(&cells_ref, &got).unwrap();
    v.atlas.tiled.as_mut().unwrap().cells = cells;
    v.insert_overview(0, overview(&on_disk, 0));
    let (pw, ph) = (640usize, 400usize);
    let mut buf = vec![0u8; pw * ph * 4];
    v.corpus_changed();
    v.draw(&mut buf, pw, ph);
    let own = overview(&on_disk, 0);
    let toned = v.atlas.tiled.as_ref().unwrap().toned[0].as_ref().unwrap();
    let alpha = |p: &Overview| p.rgba.chunks_exact(4).map(|q| q[3] as u64).sum::<u64>();
    assert!(
        alpha(toned) < alpha(&own) * 9 / 10,
        "{} of {}",
        alpha(toned),
        alpha(&own)
    );
    assert!(toned
        .rgba
        .chunks_exact(4)
        .zip(own.rgba.chunks_exact(4))
        .all(|(t, o)| t[..3] == o[..3] && t[3] <= o[3]));
    let all = Filter::Category {
        field: "group".into(),
        values: vec!["amber".into(), "birch".into(), "cobalt".into()],
    };
    v.filters.set(all, &v.atlas.fields, n).unwrap();
    v.corpus_changed();
    v.draw(&mut buf, pw, ph);
    let toned = v.atlas.tiled.as_ref().unwrap().toned[0].as_ref().unwrap();
    assert_eq!(toned.rgba, own.rgba);
    // No filter: the pictures as they came.
    v.filters.remove(0, &v.atlas.fields, n).unwrap();
    v.corpus_changed();
    v.draw(&mut buf, pw, ph);
    assert!(v.atlas.tiled.as_ref().unwrap().toned[0].is_none());

    // A damaged chunk: the whole is refused, naming the leaf's file.
    let r = &field.column;
    let mut got = chunks_of(&on_disk, &v, r);
    let f = vitrine_format::tiles::chunk_file(&r.file, 3);
    let mut bad = got.get(&f).unwrap().to_vec();
    bad[0] ^= 1;
    got.insert(f.clone(), bad);
    let e = v.atlas.join_chunks(r, &got).unwrap_err().to_string();
    assert!(e.contains(&f), "{e}");
}

#[test]
fn a_lasso_on_a_tiled_atlas_takes_leaves_inside_whole_and_tests_those_it_crosses() {
    use vitrine_corpus::corpus::{Op, Shape, Step};
    use vitrine_corpus::polygon::Polygon;
    let (_dir, on_disk, mut v, mut w) = built(20);
    // A wide lasso about the map's centre (an irregular outline of 40 points), and a small
    // rectangle in one corner of it.
    let b = w.atlas.bounds;
    let (cx, cy) = ((b[0] + b[2]) as f64 / 2.0, (b[1] + b[3]) as f64 / 2.0);
    let (rx, ry) = ((b[2] - b[0]) as f64 * 0.4, (b[3] - b[1]) as f64 * 0.4);
    let outline: Vec<[f64; 2]> = (0..40)
        .map(|k| {
            let a = k as f64 / 40.0 * std::f64::consts::TAU;
            let r = 1.0 + 0.2 * (5.0 * a).sin();
            [cx + rx * r * a.cos(), cy + ry * r * a.sin()]
        })
        .collect();
    let steps = [
        Step {
            op: Op::Replace,
            shape: Shape::Lasso(Polygon(outline)),
        },
        Step {
            op: Op::Subtract,
            shape: Shape::Rect([cx - rx * 0.3, cy - ry * 0.3, cx, cy]),
        },
    ];
    let mut fetched = 0;
    for step in steps {
        // The leaves the outline crosses are fetched first, as the page does.
        for leaf in v.leaves_to_test(&step) {
            let files = leaf_files(&on_disk, &v, leaf);
            v.insert_leaf(leaf, &sums(&on_disk), &files).unwrap();
            fetched += 1;
        }
        assert!(v.leaves_to_test(&step).is_empty());
        v.apply_step(step.clone()).unwrap();
        w.apply_step(step).unwrap();
    }
    let t = v.atlas.tiled.as_ref().unwrap();
    let here = t.leaf_state.iter().filter(|s| **s == Fetch::Here).count();
    assert_eq!(here, fetched);
    assert!(
        here < t.runs.len(),
        "{here} of {} leaves fetched",
        t.runs.len()
    );
    let (sv, sw) = (
        v.selection.mask().unwrap().clone(),
        w.selection.mask().unwrap().clone(),
    );
    assert!(sw.count() > 100, "{} selected", sw.count());
    assert_eq!(sv.count(), sw.count());
    // Every leaf here: the selected items are the same records, by their places.
    for leaf in 0..t.runs.len() {
        if v.atlas.tiled.as_ref().unwrap().leaf_state[leaf] != Fetch::Here {
            let files = leaf_files(&on_disk, &v, leaf);
            v.insert_leaf(leaf, &sums(&on_disk), &files).unwrap();
        }
    }
    let places = |x: &Viewer, m: &vitrine_corpus::mask::Mask| {
        let mut p: Vec<[u32; 2]> = m
            .items()
            .map(|i| x.atlas.positions[i].map(f32::to_bits))
            .collect();
        p.sort();
        p
    };
    assert_eq!(places(&v, &sv), places(&w, &sw));
}

#[test]
fn a_tiled_atlas_shows_a_record_from_its_leaf_as_the_whole_atlas_does() {
    let (_dir, on_disk, mut v, w) = built(40);
    let leaf = 2;
    let files = leaf_files(&on_disk, &v, leaf);
    v.insert_leaf(leaf, &sums(&on_disk), &files).unwrap();
    let [a, b] = v.atlas.tiled.as_ref().unwrap().runs[leaf];
    assert!(!v.atlas.has_record(a as usize));
    // The leaf's chunks of every catalogue array, with their lists of checksums.
    let mut got = AtlasFiles::new();
    for r in v.atlas.record_arrays() {
        let (list, names) = v.atlas.chunk_files(&r).unwrap();
        for f in [&names[leaf], &list.file] {
            got.insert(f.clone(), std::fs::read(on_disk.dir.join(f)).unwrap());
        }
    }
    v.atlas.insert_records(leaf, &got, &got).unwrap();
    for i in a as usize..b as usize {
        assert!(v.atlas.has_record(i));
        // The same record in the whole atlas: the item at the same place.
        let j = (0..w.atlas.n)
            .find(|&j| w.atlas.positions[j] == v.atlas.positions[i])
            .unwrap();
        assert_eq!(v.atlas.id(i), w.atlas.id(j));
        assert_eq!(v.atlas.label(i), w.atlas.label(j));
        let line = |r: &vitrine_view::atlas::RecordLine| (r.name.clone(), r.value.clone());
        let (rv, rw): (Vec<_>, Vec<_>) = (
            v.atlas.record(i).iter().map(line).collect(),
            w.atlas.record(j).iter().map(line).collect(),
        );
        assert_eq!(rv, rw);
    }
    // Another leaf's items have none yet; a damaged chunk is refused.
    assert!(!v.atlas.has_record(b as usize));
    let r = &v.atlas.record_arrays()[2];
    let f = vitrine_format::tiles::chunk_file(&r.file, leaf);
    let mut bad = got.get(&f).unwrap().to_vec();
    bad[0] ^= 1;
    got.insert(f.clone(), bad);
    let e = v
        .atlas
        .insert_records(leaf, &got, &got)
        .unwrap_err()
        .to_string();
    assert!(e.contains(&f), "{e}");
}
