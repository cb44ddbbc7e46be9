//! The viewer core driven as the page drives it, without a browser: pointer gestures, keys,
//! selection (pointer, keyboard, undo), the record card's walk, links, wall labels and frames
//! handed to a presenter — on a real atlas written by `vitrine build`.

mod common;

use std::path::Path;

use vitrine_build::pipeline::BuildOptions;
use vitrine_corpus::corpus::{Op, Shape, Step};
use vitrine_corpus::polygon::Polygon;
use vitrine_test_support::write_npy_f32;
use vitrine_view::input::{key_action, Action, Doing, KeyPress};
use vitrine_view::labels::{leader, wall_labels, LabelMetrics};
use vitrine_view::present::{NullPresent, Present};
use vitrine_view::raster::{NEUTRAL_GREY, READING_ROOM};
use vitrine_view::sketch::Mode;
use vitrine_view::viewer::{Pointer, Viewer};

const W: f64 = 640.0;
const H: f64 = 400.0;

/// Three well-separated groups of 60 items with a category field, built and read back whole
/// (catalogue and neighbour lists included).
fn viewer(dir: &Path) -> Viewer {
    let mut data = Vec::new();
    let mut csv = String::from("id,kind,title\n");
    for i in 0..180usize {
        let g = i / 60;
        for d in 0..6 {
            data.push(if d == g * 2 { 5.0 } else { 0.0 } + ((i * 7 + d * 13) % 11) as f32 * 0.05);
        }
        csv.push_str(&format!(
            "{i},{},Sheet {i}\n",
            ["print", "drawing", "photograph"][g]
        ));
    }
    write_npy_f32(&dir.join("v.npy"), 180, 6, &data).unwrap();
    std::fs::write(dir.join("c.csv"), csv).unwrap();
    let mut o = BuildOptions::new(dir.join("v.npy"), dir.join("atlas"));
    o.catalogue = Some(dir.join("c.csv"));
    o.epochs = Some(80);
    let (mut atlas, on_disk) = common::build_and_open(&o);
    for c in 0..atlas.manifest.neighbours.chunks.len() {
        let r = &atlas.manifest.neighbours.chunks[c].ids;
        let bytes = std::fs::read(dir.join("atlas").join(&r.file)).unwrap();
        atlas.neighbours.insert(c, &bytes).unwrap();
    }
    let mut v = Viewer::new(atlas, [W, H], on_disk.manifest_sha.clone(), READING_ROOM);
    v.make_picker();
    v
}

/// Items whose map position lies inside the lasso, by a plain even-odd test (the reference).
fn inside(v: &Viewer, lasso: &[[f64; 2]]) -> usize {
    let poly = Polygon(lasso.to_vec());
    v.atlas
        .positions
        .iter()
        .filter(|p| poly.contains([p[0] as f64, p[1] as f64]))
        .count()
}

#[test]
fn a_drag_pans_by_whole_pixels_a_pinch_zooms_and_a_still_press_is_a_click() {
    let dir = tempfile::tempdir().unwrap();
    let mut v = viewer(dir.path());
    let before = v.camera;
    assert_eq!(
        v.pointer_down(1, [100.0, 100.0], false, false),
        Pointer::Nothing
    );
    assert_eq!(v.pointer_move(1, [102.0, 101.0]), Pointer::Moved);
    // Under the slop the map stays still (it may yet be a click).
    assert_eq!(v.camera.centre, before.centre);
    // Past it, the map follows by whole pixels from there (the pixels under the slop were a
    // possible click, and are not made up).
    v.pointer_move(1, [130.4, 120.6]);
    let moved = v
        .camera
        .to_screen([before.centre[0] as f32, before.centre[1] as f32]);
    assert_eq!([moved[0] - W / 2.0, moved[1] - H / 2.0], [28.0, 20.0]);
    assert_eq!(v.pointer_up(1, [130.4, 120.6], false), Pointer::Nothing);
    // A press without a move is a click where it was.
    v.pointer_down(2, [50.0, 60.0], false, false);
    assert_eq!(
        v.pointer_up(2, [50.0, 60.0], true),
        Pointer::Click {
            at: [50.0, 60.0],
            ctrl: true
        }
    );
    // Two fingers moving apart zoom about their (new) midpoint.
    let zoom = v.camera.zoom;
    v.pointer_down(3, [200.0, 200.0], false, false);
    v.pointer_down(4, [300.0, 200.0], false, false);
    let anchor = v.camera.to_map([300.0, 200.0]);
    v.pointer_move(4, [400.0, 200.0]);
    assert!((v.camera.zoom / zoom - 2.0).abs() < 1e-9);
    let mid = v.camera.to_map([300.0, 200.0]);
    assert!((mid[0] - anchor[0]).abs() < 1e-9 && (mid[1] - anchor[1]).abs() < 1e-9);
}

#[test]
fn a_lasso_drawn_with_the_pointer_selects_what_it_encloses_and_undo_brings_the_last_back() {
    let dir = tempfile::tempdir().unwrap();
    let mut v = viewer(dir.path());
    assert_eq!(v.set_mode(Mode::Lasso), Mode::Lasso);
    let ring: Vec<[f64; 2]> = (0..40)
        .map(|k| {
            let t = k as f64 / 40.0 * std::f64::consts::TAU;
            [W / 2.0 + 150.0 * t.cos(), H / 2.0 + 120.0 * t.sin()]
        })
        .collect();
    v.pointer_down(1, ring[0], false, false);
    for &p in &ring[1..] {
        assert_eq!(v.pointer_move(1, p), Pointer::Sketch);
    }
    let Pointer::Step(step) = v.pointer_up(1, ring[0], false) else {
        panic!("a lasso gives a step")
    };
    let Shape::Lasso(poly) = &step.shape else {
        panic!("a lasso shape")
    };
    let expected = inside(&v, &poly.0);
    assert!(expected > 0 && expected < 180, "{expected}");
    v.apply_step(step).unwrap();
    let state = v.corpus_changed();
    assert_eq!(state.selected, Some(expected));
    assert_eq!(v.tray_items.len(), expected);
    // Ctrl-click toggles one item out; undo puts it back.
    let one = v.tray_items[0] as usize;
    let step = v.toggle_step(one).unwrap();
    assert_eq!(step.op, Op::Subtract);
    v.apply_step(step).unwrap();
    assert_eq!(v.corpus_changed().selected, Some(expected - 1));
    v.undo(false).unwrap();
    assert_eq!(v.corpus_changed().selected, Some(expected));
    // A drawn shape on another map than the selection's is refused with the reason.
    v.set_map(1);
    let err = v
        .apply_step(Step {
            op: Op::Add,
            shape: Shape::Rect([0.0, 0.0, 1.0, 1.0]),
        })
        .unwrap_err();
    assert!(err.contains("drawn on the similarity map"), "{err}");
}

#[test]
fn keys_drive_a_keyboard_rectangle_and_enter_opens_the_record_nearest_the_centre() {
    let dir = tempfile::tempdir().unwrap();
    let mut v = viewer(dir.path());
    let key = |k: &'static str| KeyPress {
        key: k,
        shift: false,
        ctrl: false,
        alt: false,
        on_control: false,
    };
    // Moving the map, Enter opens the item nearest the centre of the view.
    assert_eq!(
        key_action(&key("Enter"), Doing::default()),
        Some(Action::OpenNearest)
    );
    let centre = v.camera.centre;
    let nearest = (0..v.atlas.n)
        .min_by(|&a, &b| {
            let d = |i: usize| {
                let p = v.atlas.positions[i];
                (p[0] as f64 - centre[0]).powi(2) + (p[1] as f64 - centre[1]).powi(2)
            };
            d(a).total_cmp(&d(b))
        })
        .unwrap();
    assert_eq!(v.nearest_to_centre(), Some(nearest));
    // r, then Enter at two places: the rectangle between them selects.
    let Some(Action::SetMode(m)) = key_action(&key("r"), Doing::default()) else {
        panic!("r is the rectangle mode")
    };
    v.set_mode(m);
    assert_eq!(v.key_point(false, false), None);
    assert!(v.key_close().is_err(), "one corner is not a rectangle yet");
    let a = v.camera.centre;
    v.camera.pan(-120.0, -80.0);
    let step = v
        .key_point(false, false)
        .expect("the second corner completes it");
    let b = v.camera.centre;
    assert_eq!(step.shape, Shape::Rect([a[0], a[1], b[0], b[1]]));
    v.apply_step(step).unwrap();
    let (x0, x1) = (a[0].min(b[0]), a[0].max(b[0]));
    let (y0, y1) = (a[1].min(b[1]), a[1].max(b[1]));
    let expected = v
        .atlas
        .positions
        .iter()
        .filter(|p| {
            let (x, y) = (p[0] as f64, p[1] as f64);
            x >= x0 && x <= x1 && y >= y0 && y <= y1
        })
        .count();
    assert_eq!(v.corpus_changed().selected, Some(expected));
}

#[test]
fn the_record_card_walks_to_unseen_neighbours_and_back() {
    let dir = tempfile::tempdir().unwrap();
    let mut v = viewer(dir.path());
    v.open_card(Some(5));
    let nb = v.atlas.neighbours_of(5).unwrap();
    let first = v.card_step(true).unwrap();
    assert_eq!(first, nb[0]);
    v.open_card(Some(first));
    // Forward again never returns to a card already seen.
    let second = v.card_step(true).unwrap();
    assert!(second != 5 && second != first);
    v.open_card(Some(second));
    assert_eq!(v.card_step(false), Some(first));
    v.open_card(Some(first));
    assert_eq!(v.card_step(false), Some(5));
    v.open_card(None);
    assert_eq!(v.card_step(true), None);
}

#[test]
fn a_link_restores_the_selection_the_filters_and_the_view() {
    let dir = tempfile::tempdir().unwrap();
    let mut v = viewer(dir.path());
    for i in [3usize, 70, 150] {
        let step = v.toggle_step(i).unwrap();
        v.apply_step(step).unwrap();
    }
    let f: vitrine_corpus::filter::Filter =
        serde_json::from_str(r#"{"kind":"category","field":"kind","values":["drawing"]}"#).unwrap();
    let n = v.atlas.n;
    let vitrine_view::viewer::Viewer { filters, atlas, .. } = &mut v;
    filters.set(f, &atlas.fields, n).unwrap();
    v.camera.zoom *= 3.0;
    let kind = v
        .atlas
        .fields
        .iter()
        .find(|c| c.field.name == "kind")
        .unwrap();
    let drawings = [3usize, 70, 150]
        .iter()
        .filter(|&&i| kind.text(i) == "drawing")
        .count();
    let before = v.corpus_changed();
    assert_eq!((before.selected, before.corpus), (Some(3), Some(drawings)));
    let json = vitrine_view::link::link_json(&mut v);
    // Hand-picked items travel packed, not as ids.
    assert!(
        json.contains("\"items\"") && !json.contains("\"70\""),
        "{json}"
    );

    let mut fresh = viewer(dir.path());
    let shared: vitrine_view::link::Shared = serde_json::from_str(&json).unwrap();
    let steps =
        vitrine_view::link::steps_of(&fresh, shared.build.as_deref(), shared.steps).unwrap();
    fresh
        .restore(0, shared.filters, steps, shared.view)
        .unwrap();
    let after = fresh.corpus_changed();
    assert_eq!((after.selected, after.corpus), (Some(3), Some(drawings)));
    assert!((fresh.camera.zoom / fresh.base_zoom - 3.0).abs() < 1e-4);
    // Another build's packed items are refused, naming why.
    let other: vitrine_view::link::Shared = serde_json::from_str(&json).unwrap();
    let err =
        vitrine_view::link::steps_of(&fresh, Some("ffffffffffffffff"), other.steps).unwrap_err();
    assert!(err.contains("another build"), "{err}");
}

#[test]
fn wall_labels_sit_beside_their_group_on_free_ground_and_never_overlap() {
    let dir = tempfile::tempdir().unwrap();
    let v = viewer(dir.path());
    let m = LabelMetrics {
        char_px: 7.0,
        height_px: 16.0,
        reach_px: [14.0, 30.0, 60.0],
    };
    let labels = wall_labels(&v, m, 40, 2);
    assert!(!labels.is_empty());
    for (k, l) in labels.iter().enumerate() {
        // On free ground: no item of the map under the label.
        assert_eq!(l.covers, 0, "{l:?}");
        let covered = v
            .atlas
            .positions
            .iter()
            .filter(|&&p| {
                let s = v.camera.to_screen(p);
                s[0] >= l.rect[0] && s[0] <= l.rect[2] && s[1] >= l.rect[1] && s[1] <= l.rect[3]
            })
            .count();
        assert_eq!(covered, 0, "{l:?}");
        // The leader line runs from the group's centre to the label's edge.
        let (a, b) = leader(l);
        assert_eq!(a, l.anchor);
        assert!(b[0] == l.rect[0] || b[0] == l.rect[2] || b[1] == l.rect[1] || b[1] == l.rect[3]);
        for other in &labels[k + 1..] {
            let r = other.rect;
            assert!(
                !(l.rect[0] < r[2] && r[0] < l.rect[2] && l.rect[1] < r[3] && r[1] < l.rect[3])
            );
        }
    }
}

#[test]
fn frames_go_to_the_presenter_and_a_theme_change_redraws_against_its_paper() {
    let dir = tempfile::tempdir().unwrap();
    let mut v = viewer(dir.path());
    let mut shown = NullPresent::default();
    let (w, h) = (W as usize, H as usize);
    let mut pixels = vec![0u8; w * h * 4];
    v.draw(&mut pixels, w, h);
    shown.present(&pixels, W as u32, H as u32);
    assert_eq!((shown.frames, shown.size), (1, (640, 400)));
    // The corner of the map is paper: the reading room's, then the neutral grey.
    assert_eq!(&pixels[..3], &READING_ROOM.paper);
    v.set_theme(NEUTRAL_GREY);
    v.draw(&mut pixels, w, h);
    assert_eq!(&pixels[..3], &NEUTRAL_GREY.paper);
    assert_eq!(v.frames, 2);
}

#[test]
fn changing_maps_glides_every_item_from_its_old_place_to_its_new_one() {
    let dir = tempfile::tempdir().unwrap();
    let mut v = viewer(dir.path());
    let on_screen = |v: &Viewer, i: usize| v.camera.to_screen(v.atlas.positions[i]);
    let item = 17;
    let before = on_screen(&v, item);
    assert!(v.set_map_gliding(1, 1000.0, 500.0));
    assert_eq!(v.atlas.current, 1);
    // At the start every item is where it was on screen; the view is the new map's.
    let start = on_screen(&v, item);
    assert!((start[0] - before[0]).abs() < 0.01 && (start[1] - before[1]).abs() < 0.01);
    let end = v.camera.to_screen(v.atlas.maps[1].positions[item]);
    // Half way in time it is past half way (eased), on the line between.
    assert!(v.step_map_glide(1250.0));
    let mid = on_screen(&v, item);
    let along = |p: [f64; 2]| {
        let (dx, dy) = (end[0] - before[0], end[1] - before[1]);
        ((p[0] - before[0]) * dx + (p[1] - before[1]) * dy) / (dx * dx + dy * dy)
    };
    assert!((along(mid) - 0.875).abs() < 0.01, "{}", along(mid));
    // At the end, exactly the new map's places; no glide at all when asked for none.
    assert!(!v.step_map_glide(1500.0));
    assert_eq!(v.atlas.positions, v.atlas.maps[1].positions);
    assert!(!v.map_gliding());
    assert!(v.set_map_gliding(0, 2000.0, 0.0));
    assert_eq!(v.atlas.positions, v.atlas.maps[0].positions);
    assert!(!v.map_gliding());
}

#[test]
fn hover_and_clicks_wait_for_a_map_change_to_come_to_rest() {
    let dir = tempfile::tempdir().unwrap();
    let mut v = viewer(dir.path());
    let p = v.camera.to_screen(v.atlas.positions[3]);
    assert!(v.pick(p).is_some());
    v.set_map_gliding(1, 0.0, 500.0);
    assert_eq!(v.pick([W / 2.0, H / 2.0]), None);
    v.step_map_glide(600.0);
    let q = v.camera.to_screen(v.atlas.positions[3]);
    assert_eq!(v.pick(q), Some(3));
}

#[test]
fn going_back_with_nowhere_to_go_keeps_the_card_and_the_way_back() {
    let dir = tempfile::tempdir().unwrap();
    let mut v = viewer(dir.path());
    v.open_card(Some(5));
    assert_eq!(v.card_step(false), None);
    let next = v.card_step(true).unwrap();
    v.open_card(Some(next));
    assert_eq!(v.card_step(false), Some(5));
}

#[test]
fn a_map_change_follows_the_view_when_it_moves_during_the_glide() {
    let dir = tempfile::tempdir().unwrap();
    let mut v = viewer(dir.path());
    v.set_map_gliding(1, 0.0, 500.0);
    // The view moves half way through: the items go on towards their places on the map, which
    // moved with the view, and end exactly there.
    v.step_map_glide(250.0);
    v.camera.pan(40.0, -25.0);
    v.step_map_glide(400.0);
    let target = v.camera.to_screen(v.atlas.maps[1].positions[9]);
    assert!(v.step_map_glide(499.0));
    let near = v.camera.to_screen(v.atlas.positions[9]);
    assert!((near[0] - target[0]).abs() < 2.0 && (near[1] - target[1]).abs() < 2.0);
    assert!(!v.step_map_glide(500.0));
    assert_eq!(v.camera.to_screen(v.atlas.positions[9]), target);
}
