//! Image decoding against Pillow (the Python imaging library, from the package registry): Pillow
//! writes every archive format and variant, and its own decode is the reference for ours.

use vitrine_images::decode::{decode_file, decode_for, DEFAULT_MAX_PIXELS};
use vitrine_test_support::{read_npy, run_python, NpyArray};

/// Writes the test images and Pillow's decode of each (RGB, alpha flattened onto the paper colour
/// with the same rounding) as `NAME.npy`, rows of width * 3 values. Prints one line per file:
/// name, then "exact" or the tolerated mean absolute error.
const WRITE: &str = r#"
import sys, numpy as np
from PIL import Image, ImageOps
from skimage import data
out = sys.argv[1]
paper = np.array([0xF3, 0xEE, 0xE4], dtype=np.uint32)
photo = Image.fromarray(data.astronaut())            # 512 x 512, shipped with scikit-image
coffee = Image.fromarray(data.coffee())              # 600 x 400
rng = np.random.default_rng(5)
noise = Image.fromarray(rng.integers(0, 256, (45, 70, 3), dtype=np.uint8))

def ref(name, img, tol):
    img = ImageOps.exif_transpose(img)
    if img.mode in ("RGBA", "LA", "PA") or (img.mode == "P" and "transparency" in img.info):
        a = np.asarray(img.convert("RGBA")).astype(np.uint32)
        rgb = (a[..., :3] * a[..., 3:4] + paper * (255 - a[..., 3:4]) + 127) // 255
        arr = rgb.astype(np.uint8)
    elif img.mode == "I;16":
        v = np.asarray(img).astype(np.uint32)
        g = ((v + 128) // 257).astype(np.uint8)  # nearest 8-bit value
        arr = np.repeat(g[..., None], 3, axis=2)
    else:
        arr = np.asarray(img.convert("RGB"))
    h, w, _ = arr.shape
    np.save(f"{out}/{name}.npy", arr.reshape(h, w * 3).astype(np.float32))
    print(name, tol)

def save(name, img, fmt, tol="exact", **kw):
    path = f"{out}/{name}"
    img.save(path, fmt, **kw)
    ref(name, Image.open(path), tol)

# PNG: exact (lossless; Pillow's decode is the reference).
save("rgb8.png", noise, "PNG")
save("grey8.png", noise.convert("L"), "PNG")
save("palette.png", noise.quantize(40), "PNG")
rgba = noise.copy(); rgba.putalpha(Image.fromarray(rng.integers(0, 256, (45, 70), dtype=np.uint8)))
save("rgba8.png", rgba, "PNG")
grey16 = Image.fromarray(rng.integers(0, 65536, (45, 70), dtype=np.uint16))
save("grey16.png", grey16, "PNG")
# JPEG: baseline, progressive, greyscale, CMYK (Pillow decodes with libjpeg-turbo, whose IDCT and
# chroma upsampling differ in rounding from ours: a mean absolute error of at most 0.5 is allowed;
# 0.17-0.24 measured).
save("photo.jpg", photo, "JPEG", "0.5", quality=90)
save("progressive.jpg", coffee, "JPEG", "0.5", quality=90, progressive=True)
save("grey.jpg", photo.convert("L"), "JPEG", "0.5", quality=90)
save("cmyk.jpg", photo.convert("CMYK"), "JPEG", "0.5", quality=90)
# TIFF: uncompressed, LZW, Deflate; greyscale, CMYK, 16-bit greyscale; the first page of two.
save("rgb.tif", noise, "TIFF")
save("lzw.tif", noise, "TIFF", compression="tiff_lzw")
save("deflate.tif", noise, "TIFF", compression="tiff_adobe_deflate")
save("grey.tif", noise.convert("L"), "TIFF", compression="tiff_lzw")
save("cmyk.tif", noise.convert("CMYK"), "TIFF")
save("grey16.tif", grey16, "TIFF")
noise.save(f"{out}/pages.tif", "TIFF", save_all=True, append_images=[photo.resize((70, 45))])
ref("pages.tif", Image.open(f"{out}/pages.tif"), "exact")
# WebP (lossless), GIF (the first of two frames), BMP.
save("lossless.webp", noise, "WEBP", lossless=True)
frames = [noise.quantize(60), photo.resize((70, 45)).quantize(60)]
frames[0].save(f"{out}/anim.gif", "GIF", save_all=True, append_images=frames[1:], duration=100)
ref("anim.gif", Image.open(f"{out}/anim.gif"), "exact")
save("rgb.bmp", noise, "BMP")
"#;

fn rows_of(m: &NpyArray) -> Vec<u8> {
    m.data.iter().map(|&v| v as u8).collect()
}

#[test]
fn every_format_decodes_as_pillow_decodes_it() {
    let dir = tempfile::tempdir().unwrap();
    let listing = run_python(WRITE, &[dir.path()]);
    let mut checked = 0;
    for line in listing.lines() {
        let (name, tol) = line.split_once(' ').unwrap();
        let (d, _) = decode_file(&dir.path().join(name), DEFAULT_MAX_PIXELS)
            .unwrap_or_else(|e| panic!("{name}: {e}"));
        let want = read_npy(&dir.path().join(format!("{name}.npy")));
        assert_eq!(
            (d.rgb.width() as usize * 3, d.rgb.height() as usize),
            (want.cols, want.rows),
            "{name}: size"
        );
        let want = rows_of(&want);
        let got = d.rgb.as_raw();
        if tol == "exact" {
            let diff = got.iter().zip(&want).filter(|(a, b)| a != b).count();
            assert_eq!(
                diff, 0,
                "{name}: {diff} samples differ from Pillow's decode"
            );
        } else {
            let tol: f64 = tol.parse().unwrap();
            let mae = got
                .iter()
                .zip(&want)
                .map(|(&a, &b)| (a as f64 - b as f64).abs())
                .sum::<f64>()
                / got.len() as f64;
            eprintln!("{name}: mean absolute error {mae:.3} against Pillow");
            assert!(
                mae <= tol,
                "{name}: mean absolute error {mae:.3} against Pillow, more than {tol}"
            );
        }
        checked += 1;
    }
    assert_eq!(checked, 19, "{listing}");
}

/// Where the stored image's top-left corner is seen once the EXIF Orientation tag is applied, by
/// the tag's definition (EXIF 2.32 / CIPA DC-008, tag 0x0112): 1 top-left, 2 top-right,
/// 3 bottom-right, 4 bottom-left, 5 top-left (transposed), 6 top-right, 7 bottom-right,
/// 8 bottom-left; 5 to 8 swap width and height.
fn corner_for(orientation: u32) -> (bool, bool, bool) {
    // (right, bottom, swapped)
    match orientation {
        1 => (false, false, false),
        2 => (true, false, false),
        3 => (true, true, false),
        4 => (false, true, false),
        5 => (false, false, true),
        6 => (true, false, true),
        7 => (true, true, true),
        8 => (false, true, true),
        _ => unreachable!(),
    }
}

#[test]
fn exif_orientations_put_the_marked_corner_where_the_standard_says() {
    // 360 x 240 grey JPEGs whose stored top-left 80 x 80 block is red, each tagged with one of the
    // eight orientations by Pillow; Pillow's exif_transpose is checked against the same table. The
    // full decode and the reduced-scale one (for 90 px thumbnails: 1/4) must both follow it.
    let dir = tempfile::tempdir().unwrap();
    let out = run_python(
        r#"
import sys
from PIL import Image, ImageOps
out = sys.argv[1]
for v in range(1, 9):
    img = Image.new("RGB", (360, 240), (128, 128, 128))
    img.paste((220, 20, 20), (0, 0, 80, 80))
    exif = Image.Exif()
    exif[0x0112] = v
    img.save(f"{out}/o{v}.jpg", "JPEG", quality=95, exif=exif.tobytes())
    t = ImageOps.exif_transpose(Image.open(f"{out}/o{v}.jpg"))
    w, h = t.size
    r = [t.getpixel(p)[0] > 180 for p in [(10, 10), (w - 11, 10), (10, h - 11), (w - 11, h - 11)]]
    print(v, w, h, "".join("1" if x else "0" for x in r))
"#,
        &[dir.path()],
    );
    for line in out.lines() {
        let f: Vec<&str> = line.split(' ').collect();
        let v: u32 = f[0].parse().unwrap();
        let path = dir.path().join(format!("o{v}.jpg"));
        let (d, bytes) = decode_file(&path, DEFAULT_MAX_PIXELS).unwrap();
        let small = decode_for(&bytes, DEFAULT_MAX_PIXELS, 90).unwrap();
        let (right, bottom, swapped) = corner_for(v);
        let (w, h) = if swapped { (240, 360) } else { (360, 240) };
        let want_at = (right as usize) + 2 * (bottom as usize);
        let mut probes = [false; 4];
        for (img, scale) in [(&d, 1), (&small, 4)] {
            assert_eq!((img.width, img.height), (w, h), "orientation {v}");
            let (sw, sh) = (w / scale, h / scale);
            assert_eq!(
                (img.rgb.width(), img.rgb.height()),
                (sw, sh),
                "orientation {v}, 1/{scale}"
            );
            let red = |x: u32, y: u32| img.rgb.get_pixel(x, y)[0] > 180;
            let m = 10 / scale;
            probes = [
                red(m, m),
                red(sw - 1 - m, m),
                red(m, sh - 1 - m),
                red(sw - 1 - m, sh - 1 - m),
            ];
            for (p, &is_red) in probes.iter().enumerate() {
                assert_eq!(
                    is_red,
                    p == want_at,
                    "orientation {v}, 1/{scale}, corner {p}"
                );
            }
        }
        // Pillow agrees with the table and with us.
        assert_eq!(
            (f[1].parse::<u32>().unwrap(), f[2].parse::<u32>().unwrap()),
            (w, h)
        );
        let pillow: Vec<bool> = f[3].chars().map(|c| c == '1').collect();
        assert_eq!(pillow, probes, "orientation {v}: Pillow's corners");
    }
    assert_eq!(out.lines().count(), 8);
}

#[test]
fn reduced_scale_jpeg_decoding_matches_pillows_draft_mode() {
    // Pillow's draft() makes libjpeg-turbo decode at a reduced DCT scale; ours must give the same
    // size and nearly the same pixels at each scale (1/2, 1/4, 1/8). The JPEG standard does not
    // define scaled decoding, and the two libraries' reduced inverse transforms and chroma
    // upsampling differ, so a mean absolute error of up to 2 (of 255) is allowed.
    let dir = tempfile::tempdir().unwrap();
    let out = run_python(
        r#"
import sys, numpy as np
from PIL import Image
from skimage import data
out = sys.argv[1]
big = Image.fromarray(data.astronaut()).resize((2048, 1536), Image.BICUBIC)
big.save(f"{out}/big.jpg", quality=90)
for s in (2, 4, 8):
    im = Image.open(f"{out}/big.jpg")
    im.draft("RGB", (2048 // s, 1536 // s))
    a = np.asarray(im.convert("RGB"))
    h, w, _ = a.shape
    np.save(f"{out}/draft{s}.npy", a.reshape(h, w * 3).astype(np.float32))
    print(s, w, h)
"#,
        &[dir.path()],
    );
    let bytes = std::fs::read(dir.path().join("big.jpg")).unwrap();
    for line in out.lines() {
        let f: Vec<u32> = line.split(' ').map(|x| x.parse().unwrap()).collect();
        let (s, w, h) = (f[0], f[1], f[2]);
        let d = decode_for(&bytes, DEFAULT_MAX_PIXELS, 2048 / s).unwrap();
        assert_eq!((d.width, d.height), (2048, 1536));
        assert_eq!((d.rgb.width(), d.rgb.height()), (w, h), "1/{s}");
        let want = rows_of(&read_npy(&dir.path().join(format!("draft{s}.npy"))));
        let mae = d
            .rgb
            .as_raw()
            .iter()
            .zip(&want)
            .map(|(&a, &b)| (a as f64 - b as f64).abs())
            .sum::<f64>()
            / want.len() as f64;
        eprintln!("1/{s}: mean absolute error {mae:.3} against Pillow's draft decode");
        assert!(mae <= 2.0, "1/{s}: mean absolute error {mae:.3}");
    }
    assert_eq!(out.lines().count(), 3);
}
