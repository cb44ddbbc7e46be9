//! Golden images: a small fixed scene drawn at each level of detail by the raster and shown through
//! wgpu on a software adapter (Mesa's lavapipe Vulkan or llvmpipe GL, `./build.sh setup` installs
//! them), read back and compared byte for byte with the images stored in `tests/golden/`.
//!
//! The scene (positions, colours, picture extents and the sheets' pixels) is made here, not by a
//! build, so only the renderer can change these pictures. After an intended change of the
//! pictures, `VITRINE_BLESS=1 cargo test -p vitrine-view --features native-gpu --test golden`
//! rewrites them; look at them before committing.

mod common;

use std::path::{Path, PathBuf};

use vitrine_build::pipeline::BuildOptions;
use vitrine_test_support::write_npy_f32;
use vitrine_view::atlas::AtlasData;
use vitrine_view::camera::Camera;
use vitrine_view::gpu::Offscreen;
use vitrine_view::present::Present;
use vitrine_view::raster::{draw, Scene, Sheet, SheetLevel, SheetStore, READING_ROOM};

const W: u32 = 320;
const H: u32 = 200;
const COLUMNS: usize = 6;
const ROWS: usize = 4;
const N: usize = COLUMNS * ROWS;
/// The largest cell: picture extents are given in it.
const BIG: u32 = 64;

fn colour(i: usize) -> [u8; 3] {
    const PALETTE: [[u8; 3]; 6] = [
        [182, 64, 52],
        [54, 120, 170],
        [206, 160, 48],
        [70, 140, 90],
        [120, 84, 150],
        [40, 40, 48],
    ];
    PALETTE[i % PALETTE.len()]
}

/// Landscape, portrait and square pictures in turn.
fn extent(i: usize) -> (u16, u16) {
    [(64, 48), (40, 64), (64, 64)][i % 3]
}

/// A fixed atlas: any atlas of `N` items, its geometry then replaced by a lattice with a few
/// overlapping pairs, so the scene does not depend on how a build lays items out.
fn atlas(dir: &Path) -> AtlasData {
    let data: Vec<f32> = (0..N * 4).map(|k| ((k * 37) % 17) as f32).collect();
    write_npy_f32(&dir.join("v.npy"), N, 4, &data).unwrap();
    let mut o = BuildOptions::new(dir.join("v.npy"), dir.join("atlas"));
    o.epochs = Some(10);
    let (mut atlas, _) = common::build_and_open(&o);
    atlas.positions = (0..N)
        .map(|i| {
            let (c, r) = ((i % COLUMNS) as f32, (i / COLUMNS) as f32);
            // Every fifth item sits half over its neighbour.
            let shift = if i % 5 == 4 { -0.45 } else { 0.0 };
            [c + shift, r]
        })
        .collect();
    atlas.bounds = [-0.45, 0.0, (COLUMNS - 1) as f32, (ROWS - 1) as f32];
    atlas.colours = (0..N)
        .map(|i| {
            let c = colour(i);
            [c[0], c[1], c[2], 255]
        })
        .collect();
    atlas.extents = (0..N).map(extent).collect();
    atlas.spacing = 1.0;
    atlas
}

/// Two sheet levels (16 and 64 px cells, 4 x 2 cells a sheet) with pictures that tell the levels
/// apart: a checker of 4 px squares at 16 px, diagonal stripes at 64 px, both in the item's colour.
fn sheets(with_large: bool) -> SheetStore {
    let level = |cell: u32, large: bool, loaded: bool| {
        let (columns, rows) = (4u32, 2u32);
        let per = (columns * rows) as usize;
        let count = N.div_ceil(per);
        let mut store = SheetLevel {
            cell,
            columns,
            rows,
            files: (0..count)
                .map(|s| format!("sheet-{cell}-{s}.jpg"))
                .collect(),
            loaded: (0..count).map(|_| None).collect(),
        };
        if loaded {
            for s in 0..count {
                let (sw, sh) = (columns * cell, rows * cell);
                let mut rgb = vec![128u8; (sw * sh * 3) as usize];
                for slot in 0..per {
                    let i = s * per + slot;
                    if i >= N {
                        break;
                    }
                    let (ew, eh) = extent(i);
                    let scale =
                        |e: u16| ((e as f64 / BIG as f64 * cell as f64).round() as u32).max(1);
                    let (cx, cy) = (
                        (slot as u32 % columns) * cell,
                        (slot as u32 / columns) * cell,
                    );
                    for y in 0..scale(eh) {
                        for x in 0..scale(ew) {
                            let on = if large {
                                (x + y) / 6 % 2 == 0
                            } else {
                                (x / 4 + y / 4) % 2 == 0
                            };
                            let c = colour(i);
                            let px = if on { c } else { [250, 248, 240] };
                            let at = (((cy + y) * sw + cx + x) * 3) as usize;
                            rgb[at..at + 3].copy_from_slice(&px);
                        }
                    }
                }
                store.loaded[s] = Some(Sheet {
                    width: sw,
                    height: sh,
                    rgb,
                });
            }
        }
        store
    };
    SheetStore::new(vec![level(16, false, true), level(BIG, true, with_large)])
}

/// Every software-capable adapter here, tried in order: Vulkan (lavapipe), then GL (llvmpipe);
/// each as an offscreen target that reads its frames back.
fn gpus() -> Vec<Offscreen> {
    let mut found = Vec::new();
    for backends in [wgpu::Backends::VULKAN, wgpu::Backends::GL] {
        let mut desc = wgpu::InstanceDescriptor::new_without_display_handle();
        desc.backends = backends;
        let instance = wgpu::Instance::new(desc);
        let Ok(adapter) =
            pollster::block_on(instance.request_adapter(&wgpu::RequestAdapterOptions {
                power_preference: wgpu::PowerPreference::LowPower,
                ..Default::default()
            }))
        else {
            continue;
        };
        let info = adapter.get_info();
        let (device, queue) = pollster::block_on(adapter.request_device(&wgpu::DeviceDescriptor {
            label: Some("golden"),
            required_limits:
                wgpu::Limits::downlevel_webgl2_defaults().using_resolution(adapter.limits()),
            ..Default::default()
        }))
        .expect("a wgpu device");
        let name = format!("{} ({:?}, {:?})", info.name, info.backend, info.device_type);
        found.push(Offscreen::new(device, queue, name));
    }
    assert!(
        !found.is_empty(),
        "no wgpu adapter: install Mesa's software drivers (mesa-vulkan-drivers libvulkan1 libegl1 \
         libegl-mesa0 libgl1-mesa-dri; ./build.sh setup does)"
    );
    found
}

fn golden_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/golden")
}

#[test]
fn each_level_of_detail_draws_its_stored_picture_through_wgpu() {
    let dir = tempfile::tempdir().unwrap();
    let atlas = atlas(dir.path());
    let mut gpus = gpus();
    let bless = std::env::var_os("VITRINE_BLESS").is_some();
    let fit = Camera::fit(atlas.bounds, [W as f64, H as f64]);
    let at_side = |side: f64| Camera {
        zoom: side / (atlas.spacing * 0.92),
        ..fit
    };
    let full = sheets(true);
    let coarse_only = sheets(false);
    // (name, camera, sheets, hover, open, what the frame must draw: marks, thumbnails; the
    // hovered or open item is drawn twice, the second time on top)
    type Case<'a> = (
        &'a str,
        Camera,
        &'a SheetStore,
        Option<usize>,
        Option<usize>,
        (usize, usize),
    );
    let cases: [Case; 5] = [
        ("marks", at_side(6.0), &full, Some(7), None, (N + 1, 0)),
        // Just past the marks: pictures faint over their marks' colours, then stronger.
        (
            "thumbnails-fading-in",
            at_side(10.0),
            &full,
            None,
            None,
            (0, N),
        ),
        (
            "small-thumbnails",
            at_side(14.0),
            &full,
            None,
            Some(9),
            (0, N + 1),
        ),
        (
            "large-thumbnails",
            at_side(60.0),
            &full,
            Some(8),
            None,
            (0, 0),
        ),
        // While the 64 px sheets load, the 16 px ones stand in, enlarged.
        (
            "large-from-coarse",
            at_side(60.0),
            &coarse_only,
            None,
            None,
            (0, 0),
        ),
    ];
    let mut failures = Vec::new();
    for (name, camera, store, hover, open, (marks, thumbs)) in cases {
        let scene = Scene {
            atlas: &atlas,
            grid: None,
            sheets: store,
            camera: &camera,
            hover,
            open,
            tones: None,
            theme: READING_ROOM,
        };
        let mut cpu = vec![0u8; (W * H * 4) as usize];
        let stats = draw(&scene, &mut cpu, W as usize, H as usize);
        if marks > 0 || thumbs > 0 {
            assert_eq!((stats.marks, stats.thumbnails), (marks, thumbs), "{name}");
        } else {
            // Zoomed in: some items off screen, every one on screen a thumbnail.
            assert!(
                stats.thumbnails > 2 && stats.marks == 0,
                "{name}: {stats:?}"
            );
        }
        let mut shown = Vec::new();
        for g in gpus.iter_mut() {
            g.present(&cpu, W, H);
            shown = g.pixels.clone();
            println!("{name}: shown through {}", g.name());
            assert!(
                shown == cpu,
                "{name}: wgpu on {} did not show the frame's pixels unchanged",
                g.name()
            );
        }
        let path = golden_dir().join(format!("{name}.png"));
        if bless {
            std::fs::create_dir_all(golden_dir()).unwrap();
            image::RgbaImage::from_raw(W, H, shown.clone())
                .unwrap()
                .save(&path)
                .unwrap();
        }
        let stored = image::open(&path)
            .unwrap_or_else(|e| panic!("{}: {e} (VITRINE_BLESS=1 writes it)", path.display()))
            .to_rgba8();
        if stored.as_raw() != &shown {
            let out = std::env::temp_dir().join(format!("vitrine-golden-{name}.png"));
            image::RgbaImage::from_raw(W, H, shown)
                .unwrap()
                .save(&out)
                .unwrap();
            failures.push(format!(
                "{name}: differs from {} (drawn: {})",
                path.display(),
                out.display()
            ));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}
