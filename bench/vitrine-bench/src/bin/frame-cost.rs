//! Native cost of the frame raster on a built atlas: `cargo run --release -p vitrine-bench --bin
//! frame-cost ATLAS_DIR` prints the median milliseconds of a fitted frame and of zoomed-in frames at
//! 1280 x 800 (marks only: no sheets are loaded).
use vitrine_build::read::Atlas;
use vitrine_view::atlas::AtlasData;
use vitrine_view::camera::Camera;
use vitrine_view::grid::Grid;
use vitrine_view::raster::{draw, Scene, SheetStore, READING_ROOM};

fn main() {
    let dir = std::path::PathBuf::from(std::env::args().nth(1).expect("an atlas folder"));
    let on_disk = Atlas::open(&dir).unwrap();
    let m = on_disk.manifest.clone();
    let first = AtlasData::first_files(&m);
    let files = on_disk
        .load_files(first.iter().map(|(f, _)| f.as_str()))
        .unwrap();
    let atlas = AtlasData::from_parts(m.clone(), &files).unwrap();
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
}
