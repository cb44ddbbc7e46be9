//! Embedded colour profiles and JPEG 2000 against outside references: LittleCMS (through Pillow's
//! ImageCms) converts each test file from its profile to sRGB, OpenJPEG (through Pillow) decodes
//! JPEG 2000, and scikit-image's CIEDE2000 measures how far our decode is from them
//! (tests/colour/make_set.py writes the files, the references and the profiles).

use std::path::Path;

use vitrine_images::decode::{decode_file, decode_for, DEFAULT_MAX_PIXELS};
use vitrine_test_support::{read_npy, run_python, write_npy_f32};

fn set_script() -> String {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../tests/colour/make_set.py");
    let text = std::fs::read_to_string(&path).unwrap();
    // Run with `-c`, the script still finds the profiles beside it.
    format!("__file__ = {:?}\n{text}", path.to_str().unwrap())
}

struct Case {
    name: String,
    tol: f64,
    mode: String,
}

#[test]
fn profiles_convert_to_srgb_as_littlecms_does_and_jpeg2000_decodes_as_openjpeg_does() {
    let dir = tempfile::tempdir().unwrap();
    let script = set_script();
    let listing = run_python(&script, &[dir.path()]);
    let cases: Vec<Case> = listing
        .lines()
        .map(|l| {
            let f: Vec<&str> = l.split(' ').collect();
            Case {
                name: f[0].into(),
                tol: f[1].parse().unwrap(),
                mode: f[2].into(),
            }
        })
        .collect();
    std::fs::write(dir.path().join("list.txt"), &listing).unwrap();
    for c in &cases {
        let path = dir.path().join(&c.name);
        let want = read_npy(&dir.path().join(format!("{}.ref.npy", c.name)));
        let d = if c.name == "big.jp2" {
            // Thumbnails of 384 px on the long side need the level at a quarter of 1536 x 1024.
            let bytes = std::fs::read(&path).unwrap();
            let d = decode_for(&bytes, DEFAULT_MAX_PIXELS, 384).unwrap();
            assert_eq!((d.width, d.height), (1536, 1024), "the master's size");
            d
        } else {
            decode_file(&path, DEFAULT_MAX_PIXELS)
                .unwrap_or_else(|e| panic!("{}: {e}", c.name))
                .0
        };
        if c.mode == "refused" {
            let why = d.colour.as_deref().unwrap_or("");
            assert!(
                why.contains("is for Rgb pixels"),
                "{}: the profile should be refused, not applied ({why:?})",
                c.name
            );
        } else {
            assert_eq!(d.colour, None, "{}: the profile was applied", c.name);
        }
        assert_eq!(
            (d.rgb.width() as usize * 3, d.rgb.height() as usize),
            (want.cols, want.rows),
            "{}: size",
            c.name
        );
        let ours: Vec<f32> = d.rgb.as_raw().iter().map(|&v| v as f32).collect();
        write_npy_f32(
            &dir.path().join(format!("{}.ours.npy", c.name)),
            want.rows,
            want.cols,
            &ours,
        )
        .unwrap();
    }
    let scored = run_python(&script, &[Path::new("--score"), dir.path()]);
    let mut checked = 0;
    let mut wrong = Vec::new();
    for line in scored.lines() {
        let f: Vec<&str> = line.split(' ').collect();
        let c = cases.iter().find(|c| c.name == f[0]).unwrap();
        let [de, de_max, de_raw, mae, largest] =
            [1, 2, 3, 4, 5].map(|i| f[i].parse::<f64>().unwrap());
        println!(
            "{}: mean CIEDE2000 {de:.3} (largest {de_max:.2}) from the reference, {de_raw:.3} with the profile left aside; mean sample difference {mae:.3}",
            c.name
        );
        if c.tol == 0.0 && largest != 0.0 {
            wrong.push(format!("{}: must decode exactly as OpenJPEG does", c.name));
        }
        if de > c.tol {
            wrong.push(format!(
                "{}: mean CIEDE2000 {de:.3} from the reference, more than {}",
                c.name, c.tol
            ));
        }
        // 16-bit samples converted at 16 bits: no sample more than a level off.
        if c.mode == "deep" && largest > 1.0 {
            wrong.push(format!(
                "{}: a sample {largest} levels off: converted at 8 bits?",
                c.name
            ));
        }
        // Where the profile matters, leaving it aside must be far off, so that the check above
        // tells a converted decode from an unconverted one.
        if (c.mode == "moves" || c.mode == "deep")
            && !(de_raw >= 1.0 && de_raw >= 5.0 * de.max(c.tol / 5.0))
        {
            wrong.push(format!(
                "{}: the profile should move the colours (unconverted {de_raw:.3})",
                c.name
            ));
        }
        checked += 1;
    }
    assert!(wrong.is_empty(), "{}", wrong.join("\n"));
    // A JPEG 2000 file cut short is named truncated (the decoder alone would decode what there is).
    for name in ["lossless.jp2", "codestream.j2k", "adobe.jpx"] {
        let bytes = std::fs::read(dir.path().join(name)).unwrap();
        for keep in [bytes.len() * 7 / 10, bytes.len() - 1, 40] {
            match vitrine_images::decode::decode(&bytes[..keep], DEFAULT_MAX_PIXELS) {
                Err(vitrine_images::decode::ImageFailure::Truncated(_)) => {}
                other => panic!("{name} cut to {keep} bytes: {:?}", other.map(|d| d.width)),
            }
        }
    }
    assert_eq!(checked, cases.len(), "{scored}");
    assert!(checked >= 21, "{listing}");
}
