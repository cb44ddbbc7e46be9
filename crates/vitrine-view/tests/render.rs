//! The frame raster on a real atlas written by `vitrine build`: marks when zoomed out, the right
//! thumbnails when zoomed in, fallbacks while sheets load, and the hover outline.

mod common;

use std::path::Path;

use vitrine_build::pipeline::BuildOptions;
use vitrine_format::Manifest;
use vitrine_test_support::write_npy_f32;
use vitrine_view::atlas::AtlasData;
use vitrine_view::camera::Camera;
use vitrine_view::raster::{draw, Scene, Sheet, SheetStore, READING_ROOM};

const COLOURS: [[u8; 3]; 3] = [[200, 40, 40], [40, 160, 60], [40, 60, 200]];

fn fixture(dir: &Path) -> AtlasData {
    let mut data = Vec::new();
    std::fs::create_dir_all(dir.join("images")).unwrap();
    for i in 0..90usize {
        let g = i / 30;
        for d in 0..6 {
            data.push(if d == g * 2 { 5.0 } else { 0.0 } + ((i * 7 + d * 13) % 11) as f32 * 0.05);
        }
        image::RgbImage::from_pixel(80, 60, image::Rgb(COLOURS[g]))
            .save(dir.join(format!("images/{i}.png")))
            .unwrap();
    }
    write_npy_f32(&dir.join("v.npy"), 90, 6, &data).unwrap();
    let mut o = BuildOptions::new(dir.join("v.npy"), dir.join("atlas"));
    o.images = Some(dir.join("images"));
    o.sheet_size = 256;
    o.cells = vec![32, 128];
    o.epochs = Some(50);
    common::build_and_open(&o).0
}

fn load_sheets(atlas: &AtlasData, dir: &Path, levels: &[usize]) -> SheetStore {
    let mut s = SheetStore::from_manifest(&atlas.manifest);
    for &l in levels {
        for i in 0..s.levels[l].files.len() {
            let img = image::open(dir.join("atlas").join(&s.levels[l].files[i]))
                .unwrap()
                .to_rgb8();
            s.levels[l].loaded[i] = Some(Sheet {
                width: img.width(),
                height: img.height(),
                rgb: img.into_raw(),
            });
        }
    }
    s
}

fn pixel(buf: &[u8], w: usize, x: f64, y: f64) -> [u8; 3] {
    let o = (y as usize * w + x as usize) * 4;
    [buf[o], buf[o + 1], buf[o + 2]]
}

fn close(a: [u8; 3], b: [u8; 3], tol: i32) -> bool {
    (0..3).all(|c| (a[c] as i32 - b[c] as i32).abs() <= tol)
}

#[test]
fn zoom_changes_what_is_drawn_and_thumbnails_are_the_right_pictures() {
    let dir = tempfile::tempdir().unwrap();
    let atlas = fixture(dir.path());
    let sheets = load_sheets(&atlas, dir.path(), &[0, 1]);
    let group = |i: usize| atlas.ids.get(i).parse::<usize>().unwrap() / 30;
    let (w, h) = (400usize, 300usize);
    let mut buf = vec![0u8; w * h * 4];

    // Zoomed out so far that items are marks: each in its image's average colour.
    let mut cam = Camera::fit(atlas.bounds, [w as f64, h as f64]);
    cam.zoom = cam.zoom.min(4.0 / atlas.spacing);
    let scene = Scene {
        atlas: &atlas,
        grid: None,
        sheets: &sheets,
        camera: &cam,
        hover: None,
        open: None,
        tones: None,
        theme: READING_ROOM,
    };
    let s = draw(&scene, &mut buf, w, h);
    assert_eq!((s.thumbnails, s.marks), (0, 90), "{s:?}");
    assert!(s.wanted.is_empty());

    // Close enough for 128 px thumbnails: each item's square shows its own picture.
    let (cx, cy) = (atlas.positions[10][0] as f64, atlas.positions[10][1] as f64);
    let cam = Camera {
        centre: [cx, cy],
        zoom: 100.0 / atlas.spacing,
        size: [w as f64, h as f64],
    };
    let scene = Scene {
        atlas: &atlas,
        grid: None,
        sheets: &sheets,
        camera: &cam,
        hover: Some(10),
        open: None,
        tones: None,
        theme: READING_ROOM,
    };
    let s = draw(&scene, &mut buf, w, h);
    assert!(s.thumbnails > 0 && s.marks == 0, "{s:?}");
    // With the map's grid the frame visits only the items near the screen, and draws the same.
    let grid = vitrine_view::grid::Grid::new(&atlas.positions, atlas.bounds, 2);
    let mut culled = vec![0u8; w * h * 4];
    let sc = draw(
        &Scene {
            grid: Some(&grid),
            ..scene
        },
        &mut culled,
        w,
        h,
    );
    assert!(sc.visited < s.visited / 2, "{sc:?} vs {s:?}");
    assert_eq!(
        (sc.marks, sc.thumbnails, &sc.wanted),
        (s.marks, s.thumbnails, &s.wanted)
    );
    assert!(culled == buf, "the grid changed the picture");
    let r = scene.item_rect(10);
    // The hovered item is on top: its centre shows its own group's colour (JPEG tolerance).
    let c = pixel(&buf, w, (r[0] + r[2]) / 2.0, (r[1] + r[3]) / 2.0);
    assert!(
        close(c, COLOURS[group(10)], 12),
        "{c:?} vs {:?}",
        COLOURS[group(10)]
    );
    // Aspect kept: an 80 x 60 picture is wider than tall.
    assert!((r[2] - r[0]) > (r[3] - r[1]) * 1.2, "{r:?}");
    // The hover outline in the accent colour just outside the square.
    assert_eq!(
        pixel(&buf, w, (r[0] + r[2]) / 2.0, r[1] - 1.0),
        READING_ROOM.accent
    );

    // While the 128 px sheets are not loaded, the 32 px level stands in, and the missing sheets are asked for.
    let partial = load_sheets(&atlas, dir.path(), &[0]);
    let scene = Scene {
        atlas: &atlas,
        grid: None,
        sheets: &partial,
        camera: &cam,
        hover: Some(10),
        open: None,
        tones: None,
        theme: READING_ROOM,
    };
    let s = draw(&scene, &mut buf, w, h);
    assert!(
        s.thumbnails > 0 && s.wanted.iter().all(|&(l, _)| l == 1) && !s.wanted.is_empty(),
        "{s:?}"
    );
    let c = pixel(&buf, w, (r[0] + r[2]) / 2.0, (r[1] + r[3]) / 2.0);
    assert!(close(c, COLOURS[group(10)], 16), "{c:?}");

    // With no sheet loaded at all, items are drawn as marks in their average colour.
    let none = load_sheets(&atlas, dir.path(), &[]);
    let scene = Scene {
        atlas: &atlas,
        grid: None,
        sheets: &none,
        camera: &cam,
        hover: None,
        open: None,
        tones: None,
        theme: READING_ROOM,
    };
    let s = draw(&scene, &mut buf, w, h);
    assert!(s.thumbnails == 0 && s.marks > 0);
    let c = pixel(&buf, w, (r[0] + r[2]) / 2.0, (r[1] + r[3]) / 2.0);
    assert!(close(c, COLOURS[group(10)], 16), "{c:?}");
}

#[test]
fn record_lines_hold_every_field_as_written() {
    let dir = tempfile::tempdir().unwrap();
    let mut atlas = fixture(dir.path());
    let lines = atlas.record(0);
    assert_eq!(lines[0].name, "id");
    let names: Vec<&str> = lines.iter().map(|l| l.name.as_str()).collect();
    assert_eq!(
        names,
        ["id", "cluster"],
        "no catalogue: the id and the item's cluster"
    );
    assert!(lines[1].value.contains("items"), "{:?}", lines[1]);
    // The neighbour lists come by chunk: none until the record card asks for one.
    assert_eq!(atlas.neighbours_of(0), None);
    let (c, file, _) = atlas.neighbours.chunk_of(0);
    let bytes = std::fs::read(dir.path().join("atlas").join(file)).unwrap();
    atlas.neighbours.insert(c, &bytes).unwrap();
    assert_eq!(atlas.neighbours_of(0).unwrap().len(), 15);
    let about = vitrine_view::atlas::about(&atlas.manifest);
    let heads: Vec<&str> = about.iter().map(|(h, _)| h.as_str()).collect();
    assert_eq!(
        heads,
        [
            "This map",
            "Quality (1 = neighbourhoods fully kept)",
            "Clusters, largest first",
            "Provenance"
        ]
    );
    // Every cluster with its size, largest first, and the sizes add up to the collection.
    let clusters = &atlas.manifest.clusters.as_ref().unwrap().list;
    assert_eq!(about[2].1[0].0, "method");
    let lines = &about[2].1[1..];
    assert_eq!(
        lines.len(),
        clusters.len().min(vitrine_view::atlas::ABOUT_CLUSTERS)
    );
    let sizes: Vec<u64> = lines
        .iter()
        .map(|(k, _)| k.split(' ').next().unwrap().parse().unwrap())
        .collect();
    assert!(sizes.windows(2).all(|w| w[0] >= w[1]), "{sizes:?}");
    assert_eq!(sizes.iter().sum::<u64>(), 90);
    let quality = &about[1].1;
    assert!(quality
        .iter()
        .any(|(k, v)| k == "trustworthiness at k = 10" && v.parse::<f64>().unwrap() > 0.5));
    assert!(about[3]
        .1
        .iter()
        .any(|(k, v)| k == "vectors" && v.starts_with("v.npy")));
}

#[test]
fn the_first_picture_needs_only_the_first_files_and_the_catalogue_follows() {
    let dir = tempfile::tempdir().unwrap();
    let full = fixture(dir.path());
    let a = dir.path().join("atlas");
    let m = Manifest::from_json(&std::fs::read_to_string(a.join("atlas.json")).unwrap()).unwrap();
    let on_disk = vitrine_build::read::Atlas::open(&a).unwrap();
    let read = |list: Vec<(String, u64)>| {
        on_disk
            .load_files(list.iter().map(|(f, _)| f.as_str()))
            .unwrap()
    };
    let (first, later) = (AtlasData::first_files(&m), AtlasData::later_files(&m));
    // The two lists split every array file of the atlas between them.
    let mut both: Vec<_> = first.iter().chain(&later).cloned().collect();
    both.sort();
    assert_eq!(both, AtlasData::files(&m));
    assert!(first.iter().all(|f| !later.contains(f)) && !later.is_empty());
    let mut atlas = AtlasData::from_parts(m.clone(), &read(first)).unwrap();
    // Enough to draw: positions, colours and extents as in the whole atlas; no catalogue yet.
    assert!(!atlas.catalogue);
    assert_eq!(atlas.positions, full.positions);
    assert_eq!(atlas.colours, full.colours);
    assert_eq!(atlas.extents, full.extents);
    assert_eq!(atlas.id(3), "");
    assert!(atlas.label(3).contains("loading"), "{}", atlas.label(3));
    atlas.complete(&read(later)).unwrap();
    assert!(atlas.catalogue);
    for i in [0, 3, 89] {
        assert_eq!(atlas.record(i), full.record(i));
        assert_eq!(atlas.label(i), full.label(i));
    }
}

#[test]
fn kept_marks_give_the_pixels_of_a_full_draw_while_drawing_only_what_came_into_view() {
    use vitrine_view::raster::{draw_with_layer, LayerKey, MarkLayer};
    let dir = tempfile::tempdir().unwrap();
    let atlas = fixture(dir.path());
    let sheets = load_sheets(&atlas, dir.path(), &[]);
    let key = |places, looks| LayerKey { places, looks };
    let grid = vitrine_view::grid::Grid::new(&atlas.positions, atlas.bounds, 2);
    let (w, h) = (160usize, 100usize);
    let fit = Camera::fit(atlas.bounds, [w as f64, h as f64]);
    let mut layer = MarkLayer::default();
    let mut cam = fit;
    // (pan dx, pan dy, hover, what the frame may visit at most: None = everything)
    let steps: [(f64, f64, Option<usize>, Option<usize>); 9] = [
        (0.0, 0.0, None, None),
        (0.0, 0.0, Some(5), Some(2)), // same camera: nothing but the hovered item again
        (7.0, 0.0, Some(5), Some(atlas.n / 2)),
        (-20.0, 0.0, None, Some(atlas.n / 2)),
        (0.0, 9.0, None, Some(atlas.n / 2)),
        (-3.0, -4.0, Some(40), Some(atlas.n / 2)),
        (0.5, 0.0, None, None),   // not a whole pixel: drawn afresh
        (400.0, 0.0, None, None), // further than the screen: drawn afresh
        (-400.0, 3.0, None, None),
    ];
    let mut partial = 0;
    for (k, (dx, dy, hover, most)) in steps.into_iter().enumerate() {
        cam.pan(dx, dy);
        let scene = Scene {
            atlas: &atlas,
            grid: Some(&grid),
            sheets: &sheets,
            camera: &cam,
            hover,
            open: None,
            tones: None,
            theme: READING_ROOM,
        };
        let mut want = vec![0u8; w * h * 4];
        let full = draw(&scene, &mut want, w, h);
        let mut got = vec![0u8; w * h * 4];
        let kept = draw_with_layer(&scene, &mut layer, key(1, 0), &mut got, w, h);
        assert!(
            got == want,
            "step {k}: the kept layer's pixels differ from a full draw"
        );
        assert_eq!(kept.marks, full.marks, "step {k}");
        if let Some(most) = most {
            assert!(
                kept.visited <= most,
                "step {k}: visited {} of {}",
                kept.visited,
                atlas.n
            );
            partial += 1;
        }
    }
    assert_eq!(partial, 5);
    // Another key (another map, changed data) draws everything again.
    let scene = Scene {
        atlas: &atlas,
        grid: Some(&grid),
        sheets: &sheets,
        camera: &cam,
        hover: None,
        open: None,
        tones: None,
        theme: READING_ROOM,
    };
    let mut got = vec![0u8; w * h * 4];
    assert!(draw_with_layer(&scene, &mut layer, key(2, 0), &mut got, w, h).visited >= atlas.n);

    // Only the looks change (a filter, a lasso) at a still view: the marks are filled in at the
    // places the last full pass noted, with the pixels of a full draw; after a pan the places
    // are noted again.
    let mut cam = fit;
    let mut draw_both = |cam: &Camera, tones: Option<&vitrine_view::raster::Tones>, looks| {
        let scene = Scene {
            atlas: &atlas,
            grid: Some(&grid),
            sheets: &sheets,
            camera: cam,
            hover: Some(3),
            open: None,
            tones,
            theme: READING_ROOM,
        };
        let mut want = vec![0u8; w * h * 4];
        let full = draw(&scene, &mut want, w, h);
        let mut got = vec![0u8; w * h * 4];
        let kept = draw_with_layer(&scene, &mut layer, key(2, looks), &mut got, w, h);
        assert!(got == want, "looks {looks}: pixels differ from a full draw");
        assert_eq!(kept.marks, full.marks, "looks {looks}");
        layer.spots_reused()
    };
    let tones = |k: usize| vitrine_view::raster::Tones {
        colours: (0..atlas.n)
            .map(|i| match (i + k) % 3 {
                0 => [0, 0, 0, 0],
                1 => [200, 40, 40, 255],
                _ => atlas.colours[i],
            })
            .collect(),
        weight: (0..atlas.n)
            .map(|i| if (i + k).is_multiple_of(3) { 0 } else { 256 })
            .collect(),
    };
    assert!(
        !draw_both(&cam, None, 10),
        "the first pass notes the places"
    );
    let (t1, t2) = (tones(1), tones(2));
    assert!(
        draw_both(&cam, Some(&t1), 11),
        "new looks, same view: places reused"
    );
    assert!(draw_both(&cam, Some(&t2), 12));
    cam.pan(5.0, 0.0);
    let _ = draw_both(&cam, Some(&t2), 12);
    assert!(
        !draw_both(&cam, Some(&t1), 13),
        "a moved view places the marks anew"
    );
    assert!(draw_both(&cam, None, 14));
    // Marks cut by the screen's edges (some clipped to nothing): the noted places give the same
    // pixels and the same count as placing them anew.
    // Item 0 is put a quarter pixel inside the band left of the screen where its mark still
    // counts but is clipped to no pixel at all.
    let side = atlas.spacing * cam.zoom * 0.92;
    let reach = (side * 0.9).clamp(3.0, 7.0) / 2.0;
    let s0 = cam.to_screen(atlas.positions[0]);
    cam.pan(-reach + 0.25 - s0[0], 0.0);
    assert!((cam.to_screen(atlas.positions[0])[0] + reach - 0.25).abs() < 1e-9);
    let _ = draw_both(&cam, Some(&t1), 15);
    assert!(draw_both(&cam, Some(&t2), 16), "edges: places reused");
}

#[test]
fn neighbour_lists_arrive_by_chunk_and_the_least_recently_used_chunk_goes_first() {
    use vitrine_format::{ArrayRef, NeighbourChunk};
    use vitrine_view::atlas::NeighbourChunks;
    let dir = tempfile::tempdir().unwrap();
    let _ = fixture(dir.path());
    let a = dir.path().join("atlas");
    let atlas = vitrine_build::read::Atlas::open(&a).unwrap();
    let all = atlas.neighbour_ids().unwrap();
    let k = atlas.manifest.neighbours.k as usize;
    // The same lists cut into chunks of 40 items: 40, 40 and 10.
    let mut m = atlas.manifest.clone();
    let mut bytes = Vec::new();
    m.neighbours.chunk_items = 40;
    m.neighbours.chunks = all
        .chunks(40 * k)
        .enumerate()
        .map(|(c, ids)| {
            let (r, b) = ArrayRef::encode(&format!("arrays/neighbours/ids-{c}.bin"), ids);
            bytes.push(b);
            let (d, _) = ArrayRef::encode(&format!("d{c}"), &vec![0f32; ids.len()]);
            NeighbourChunk {
                ids: r,
                distances: d,
            }
        })
        .collect();
    let m = Manifest::from_json(&m.to_json()).unwrap();
    let mut nb = NeighbourChunks::new(&m, 2);
    let expect = |i: usize| -> Vec<usize> {
        all[i * k..(i + 1) * k]
            .iter()
            .filter(|&&j| j != u32::MAX)
            .map(|&j| j as usize)
            .collect()
    };
    assert_eq!(nb.chunk_of(85).0, 2);
    assert_eq!(nb.of(5), None);
    nb.insert(0, &bytes[0]).unwrap();
    nb.insert(1, &bytes[1]).unwrap();
    assert_eq!(nb.of(5), Some(expect(5)));
    assert_eq!(nb.of(79), Some(expect(79)));
    assert_eq!(nb.of(40), Some(expect(40)));
    // Chunk 0 was used less recently than chunk 1: the third chunk displaces it.
    nb.of(45);
    nb.insert(2, &bytes[2]).unwrap();
    assert_eq!(nb.held(), 2);
    assert!(!nb.is_loaded(0) && nb.is_loaded(1) && nb.is_loaded(2));
    assert_eq!(nb.of(89), Some(expect(89)));
    assert_eq!(nb.of(0), None);
    // A damaged chunk is refused with its file named, and what was held stays.
    let mut bad = bytes[0].clone();
    bad[3] ^= 1;
    let e = nb.insert(0, &bad).unwrap_err().to_string();
    assert!(e.contains("arrays/neighbours/ids-0.bin"), "{e}");
    assert_eq!(nb.held(), 2);
}

#[test]
fn kept_thumbnails_give_the_pixels_of_a_full_draw_and_a_new_sheet_redraws_them() {
    use vitrine_view::raster::{draw_with_layer, LayerKey, MarkLayer};
    let dir = tempfile::tempdir().unwrap();
    let atlas = fixture(dir.path());
    // The small level loaded, the large one not: 40 px items want the large level and show the
    // small one meanwhile.
    let mut sheets = load_sheets(&atlas, dir.path(), &[0]);
    let grid = vitrine_view::grid::Grid::new(&atlas.positions, atlas.bounds, 2);
    let (w, h) = (240usize, 160usize);
    let c = atlas.positions[10];
    let mut cam = Camera {
        centre: [c[0] as f64, c[1] as f64],
        zoom: 40.0 / 0.92 / atlas.spacing,
        size: [w as f64, h as f64],
    };
    let mut layer = MarkLayer::default();
    let mut partial = 0;
    // (pan dx, pan dy, hover, insert a large sheet before the frame)
    let steps: [(f64, f64, Option<usize>, bool); 8] = [
        (0.0, 0.0, None, false),
        (6.0, 0.0, Some(10), false),
        (0.0, -11.0, Some(10), false),
        (0.0, 0.0, None, true), // a sheet arrived: drawn afresh
        (-25.0, 4.0, None, false),
        (0.5, 0.0, None, false), // not a whole pixel: drawn afresh
        (3.0, 3.0, None, true),
        (-9.0, 0.0, Some(11), false),
    ];
    for (k, (dx, dy, hover, arrive)) in steps.into_iter().enumerate() {
        cam.pan(dx, dy);
        if arrive {
            let want = draw(
                &Scene {
                    atlas: &atlas,
                    grid: Some(&grid),
                    sheets: &sheets,
                    camera: &cam,
                    hover,
                    open: None,
                    tones: None,
                    theme: READING_ROOM,
                },
                &mut vec![0u8; w * h * 4],
                w,
                h,
            )
            .wanted;
            let &(l, s) = want
                .iter()
                .find(|(l, _)| *l == 1)
                .expect("a large sheet wanted");
            let img = image::open(dir.path().join("atlas").join(&sheets.levels[l].files[s]))
                .unwrap()
                .to_rgb8();
            let sheet = Sheet {
                width: img.width(),
                height: img.height(),
                rgb: img.into_raw(),
            };
            sheets.insert(l, s, sheet, k as u64);
        }
        let scene = Scene {
            atlas: &atlas,
            grid: Some(&grid),
            sheets: &sheets,
            camera: &cam,
            hover,
            open: Some(12),
            tones: None,
            theme: READING_ROOM,
        };
        let mut want = vec![0u8; w * h * 4];
        let full = draw(&scene, &mut want, w, h);
        assert!(full.thumbnails > 4, "step {k}: {full:?}");
        let mut got = vec![0u8; w * h * 4];
        let kept = draw_with_layer(
            &scene,
            &mut layer,
            LayerKey {
                places: 1,
                looks: 0,
            },
            &mut got,
            w,
            h,
        );
        assert!(
            got == want,
            "step {k}: the kept layer's pixels differ from a full draw"
        );
        assert_eq!(
            (kept.thumbnails, kept.marks, &kept.wanted, &kept.used),
            (full.thumbnails, full.marks, &full.wanted, &full.used),
            "step {k}"
        );
        // Whole-pixel pans with nothing new draw only strips, never the whole screen.
        let fresh = layer.last_full();
        if k > 0 && !arrive && dx.fract() == 0.0 {
            assert!(!fresh, "step {k} was drawn afresh");
            partial += 1;
        } else {
            assert!(fresh, "step {k} should be drawn afresh");
        }
    }
    assert_eq!(partial, 4);
}

#[test]
fn a_selection_dims_the_rest_and_hidden_items_leave_paper() {
    use vitrine_corpus::mask::Mask;
    use vitrine_view::selection::{tones, UNSELECTED_WEIGHT};
    let dir = tempfile::tempdir().unwrap();
    let atlas = fixture(dir.path());
    let group = |i: usize| atlas.ids.get(i).parse::<usize>().unwrap() / 30;
    let (w, h) = (400usize, 300usize);
    let sheets = load_sheets(&atlas, dir.path(), &[0, 1]);
    let selected = Mask::from_fn(atlas.n, |i| group(i) == 0);
    let passing = Mask::from_fn(atlas.n, |i| group(i) != 2);
    let paper = READING_ROOM.paper;
    let t = tones(&atlas.colours, paper, Some(&selected), Some(&passing), true).unwrap();
    let mix = |c: u8, p: u8, wt: u32| ((c as u32 * wt + p as u32 * (256 - wt) + 128) >> 8) as u8;
    for zoom in [4.0, 100.0] {
        // Zoomed out (marks) and in (thumbnails), one item of each group in the middle.
        for (g, own) in COLOURS.iter().copied().enumerate() {
            let i = (0..atlas.n).find(|&i| group(i) == g).unwrap();
            let p = atlas.positions[i];
            let cam = Camera {
                centre: [p[0] as f64, p[1] as f64],
                zoom: zoom / atlas.spacing,
                size: [w as f64, h as f64],
            };
            let scene = Scene {
                atlas: &atlas,
                tones: Some(&t),
                grid: None,
                sheets: &sheets,
                camera: &cam,
                hover: None,
                open: None,
                theme: READING_ROOM,
            };
            let mut buf = vec![0u8; w * h * 4];
            draw(&scene, &mut buf, w, h);
            let c = pixel(&buf, w, w as f64 / 2.0, h as f64 / 2.0);
            let want = match g {
                0 => own,
                1 => [0, 1, 2].map(|k| mix(own[k], paper[k], UNSELECTED_WEIGHT as u32)),
                _ => paper,
            };
            // The items sit on top of one another near the group's middle: only groups' colours
            // (and JPEG noise in thumbnails) are involved, so a small tolerance suffices.
            assert!(
                close(c, want, 18),
                "zoom {zoom}, group {g}: {c:?} vs {want:?}"
            );
        }
    }
}

#[test]
fn a_picture_with_copies_has_its_top_right_corner_turned_down() {
    let dir = tempfile::tempdir().unwrap();
    let mut atlas = fixture(dir.path());
    // Each group of thirty is one picture saved thirty times, the same bytes: three copy groups.
    assert_eq!(atlas.copies.groups(), 3);
    let sheets = load_sheets(&atlas, dir.path(), &[0, 1]);
    let group = |atlas: &AtlasData, i: usize| atlas.ids.get(i).parse::<usize>().unwrap() / 30;
    let (w, h) = (400usize, 300usize);
    let (cx, cy) = (atlas.positions[10][0] as f64, atlas.positions[10][1] as f64);
    let cam = Camera {
        centre: [cx, cy],
        zoom: 100.0 / atlas.spacing,
        size: [w as f64, h as f64],
    };
    let frame = |atlas: &AtlasData| {
        let scene = Scene {
            atlas,
            grid: None,
            sheets: &sheets,
            camera: &cam,
            hover: None,
            open: None,
            tones: None,
            theme: READING_ROOM,
        };
        let mut buf = vec![0u8; w * h * 4];
        let s = draw(&scene, &mut buf, w, h);
        assert!(s.thumbnails > 0, "{s:?}");
        let rects: Vec<[f64; 4]> = (0..atlas.n).map(|i| scene.item_rect(i)).collect();
        (buf, rects)
    };
    let (buf, rects) = frame(&atlas);
    // An item wholly on screen whose top right corner no other picture covers.
    let inside = |r: &[f64; 4], x: f64, y: f64| x >= r[0] && x < r[2] && y >= r[1] && y < r[3];
    let i = (0..atlas.n)
        .find(|&i| {
            let r = rects[i];
            r[0] > 2.0
                && r[1] > 2.0
                && r[2] < w as f64 - 2.0
                && r[3] < h as f64 - 2.0
                && (0..atlas.n)
                    .filter(|&j| j != i)
                    .all(|j| !inside(&rects[j], r[2] - 1.5, r[1] + 1.5))
        })
        .expect("an item with its corner in view");
    let (r, own) = (rects[i], COLOURS[group(&atlas, i)]);
    // The corner is the accent; the rest of the picture (its other corners, its middle) its own.
    assert_eq!(pixel(&buf, w, r[2] - 1.5, r[1] + 1.5), READING_ROOM.accent);
    // (Points another picture covers are not the item's to show.)
    let mut seen = 0;
    for (x, y) in [
        (r[0] + 1.5, r[1] + 1.5),
        (r[0] + 1.5, r[3] - 1.5),
        (r[2] - 1.5, r[3] - 1.5),
        ((r[0] + r[2]) / 2.0, (r[1] + r[3]) / 2.0),
    ] {
        if (0..atlas.n).any(|j| j != i && inside(&rects[j], x, y)) {
            continue;
        }
        assert!(close(pixel(&buf, w, x, y), own, 16), "{x}, {y}");
        seen += 1;
    }
    assert!(seen > 0);
    // Without copies, the corner is the picture's.
    atlas.copies = Default::default();
    let (buf, _) = frame(&atlas);
    assert!(close(pixel(&buf, w, r[2] - 1.5, r[1] + 1.5), own, 16));
}
