//! Native cost of the frame raster on a built atlas: `cargo run --release -p vitrine-bench --bin
//! frame-cost ATLAS_DIR` prints the median milliseconds of a fitted frame and of zoomed-in frames at
//! 1280 x 800 (marks only: no sheets are loaded), and of the frames of a map change (every item
//! moved a step along its glide, then every mark drawn anew).
use vitrine_build::read::Atlas;
use vitrine_view::atlas::AtlasData;
use vitrine_view::camera::Camera;
use vitrine_view::grid::Grid;
use vitrine_view::raster::{draw, Scene, SheetStore, READING_ROOM};
use vitrine_view::viewer::Viewer;

fn main() {
    let dir = std::path::PathBuf::from(std::env::args().nth(1).expect("an atlas folder"));
    let on_disk = Atlas::open(&dir).unwrap();
    let m = on_disk.manifest.clone();
    let first = AtlasData::first_files(&m);
    let files = on_disk
        .load_files(first.iter().map(|(f, _)| f.as_str()))
        .unwrap();
    let atlas = AtlasData::from_parts(m.clone(), &files).unwrap();
    let glide_atlas = AtlasData::from_parts(m.clone(), &files).unwrap();
    let sheets = SheetStore::from_manifest(&m);
    let grid = Grid::new(&atlas.positions, atlas.bounds, 16);
    let (w, h) = (1280usize, 800usize);
    let mut buf = vec![0u8; w * h * 4];
    let fit = Camera::fit(atlas.bounds, [w as f64, h as f64]);
    for (name, factor) in [("fit", 1.0), ("x8", 8.0), ("x64", 64.0)] {
        let mut cam = fit;
        cam.zoom *= factor;
        let p = atlas.positions[0];
        if factor > 1.0 {
            cam.centre = [p[0] as f64, p[1] as f64];
        }
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
        let mut times = Vec::new();
        let mut stats = None;
        for _ in 0..15 {
            let t = std::time::Instant::now();
            stats = Some(draw(&scene, &mut buf, w, h));
            times.push(t.elapsed().as_secs_f64() * 1000.0);
        }
        times.sort_by(f64::total_cmp);
        let s = stats.unwrap();
        println!(
            "{name}: {:.2} ms (visited {}, marks {}, thumbnails {})",
            times[times.len() / 2],
            s.visited,
            s.marks,
            s.thumbnails
        );
    }
    // A map change: 30 frames of the half-second glide, each the items' step and a whole frame.
    if glide_atlas.maps.len() > 1 {
        let mut v = Viewer::new(
            glide_atlas,
            [w as f64, h as f64],
            String::new(),
            READING_ROOM,
        );
        // Wall labels at the fitted view, as the page places them after each frame.
        let metrics = vitrine_view::labels::LabelMetrics {
            char_px: 7.2,
            height_px: 18.0,
            reach_px: [18.0, 40.0, 70.0],
        };
        let min_size = (v.atlas.n as u64 / 100).max(2);
        let mut times = Vec::new();
        let mut placed = 0;
        for _ in 0..15 {
            let t = std::time::Instant::now();
            placed = vitrine_view::labels::wall_labels(&v, metrics, 24, min_size).len();
            times.push(t.elapsed().as_secs_f64() * 1000.0);
        }
        times.sort_by(f64::total_cmp);
        println!(
            "wall labels at fit: {:.2} ms ({placed} placed)",
            times[times.len() / 2]
        );
        v.set_map_gliding(1, 0.0, 500.0);
        let mut times = Vec::new();
        for k in 1..30 {
            let t = std::time::Instant::now();
            v.step_map_glide(k as f64 * 500.0 / 30.0);
            v.draw(&mut buf, w, h);
            times.push(t.elapsed().as_secs_f64() * 1000.0);
        }
        times.sort_by(f64::total_cmp);
        println!(
            "map glide: {:.2} ms a frame (median of {}; the items' step and the whole frame)",
            times[times.len() / 2],
            times.len()
        );
    }
}
