//! The real `vitrine` binary on temporary folders: a whole build, its outputs, and bad input.

mod common;

use std::io::{Read, Write};
use std::path::Path;
use vitrine_build::read::Atlas;
use vitrine_test_support::write_npy_f32;

/// A small invented fixture: 3 groups of 20 vectors, a catalogue with the awkward cases, and images.
fn fixture(dir: &Path, with_images: bool) {
    let mut data = Vec::new();
    for i in 0..60 {
        let g = i / 20;
        for d in 0..6 {
            let base = if d == g * 2 { 5.0 } else { 0.0 };
            data.push(base + ((i * 7 + d * 13) % 11) as f32 * 0.05);
        }
    }
    write_npy_f32(&dir.join("vectors.npy"), 60, 6, &data).unwrap();
    let mut csv = String::from("\u{feff}id,title,workshop,dating,height_cm,notes,record\n");
    for i in 0..60 {
        let dating = match i % 4 {
            0 => format!("c. {}", 1500 + i),
            1 => format!("{}-{}", 1500 + i, 1510 + i),
            2 => format!("{}", 1520 + i),
            _ => "undated".to_string(),
        };
        let title = if i == 5 {
            "\"Quoted, with comma\"\nand a second line".to_string()
        } else {
            format!("Sheet {i}")
        };
        let title = if i == 5 {
            format!("\"{}\"", title.replace('"', "\"\""))
        } else {
            title
        };
        csv.push_str(&format!(
            "it-{i:03},{title},Workshop {},{dating},{},note {i},https://example.org/rec/{i}\n",
            ["Amber", "Birch", "Cobalt"][i / 20],
            10.0 + i as f32 / 2.0
        ));
    }
    std::fs::write(dir.join("records.csv"), csv).unwrap();
    if with_images {
        let img_dir = dir.join("images");
        std::fs::create_dir_all(&img_dir).unwrap();
        for i in 0..60 {
            let colour = [[200u8, 40, 40], [40, 160, 60], [40, 60, 200]][i / 20];
            let (w, h) = if i % 2 == 0 { (90, 60) } else { (50, 80) };
            let img = image::RgbImage::from_fn(w, h, |x, _| {
                image::Rgb(if x < 4 { [0, 0, 0] } else { colour })
            });
            if i == 7 {
                std::fs::write(img_dir.join("it-007.jpg"), b"not really a jpeg").unwrap();
            } else if i != 9 {
                img.save(img_dir.join(format!("it-{i:03}.png"))).unwrap();
            }
        }
    }
}

fn build(dir: &Path, out: &str, extra: &[&str]) -> std::process::Output {
    let mut cmd = common::vitrine();
    cmd.current_dir(dir).args([
        "build",
        "--vectors",
        "vectors.npy",
        "--catalogue",
        "records.csv",
        "--out",
        out,
        "--quiet",
    ]);
    cmd.args(extra);
    cmd.output().unwrap()
}

fn stderr(o: &std::process::Output) -> String {
    String::from_utf8_lossy(&o.stderr).to_string()
}

#[test]
fn build_inspect_export_end_to_end() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    fixture(d, true);
    let o = build(
        d,
        "atlas",
        &[
            "--images",
            "images",
            "--title",
            "Fixture",
            "--sheet-size",
            "256",
        ],
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let err = stderr(&o);
    assert!(err.is_empty(), "--quiet prints nothing but errors: {err}");

    let atlas = Atlas::open(&d.join("atlas")).unwrap();
    let m = &atlas.manifest;
    assert_eq!(m.item_count, 60);
    assert_eq!(m.title, "Fixture");
    let names: Vec<(&str, vitrine_format::FieldKind)> =
        m.fields.iter().map(|f| (f.name.as_str(), f.kind)).collect();
    use vitrine_format::FieldKind::*;
    assert_eq!(
        names,
        [
            ("title", Text),
            ("workshop", Category),
            ("dating", Date),
            ("height_cm", Number),
            ("notes", Text),
            ("record", Link),
            // Added by the build: the items that have copies (docs/copies.md).
            ("copies", Category)
        ]
    );
    assert_eq!(
        m.copies.as_ref().and_then(|c| c.field.as_deref()),
        Some("copies")
    );
    // Every record survives with its own id, and the awkward title keeps its comma, quotes and newline.
    let ids = atlas.ids().unwrap();
    let mut all: Vec<String> = (0..60).map(|i| ids.get(i).to_string()).collect();
    all.sort();
    assert_eq!(
        all,
        (0..60).map(|i| format!("it-{i:03}")).collect::<Vec<_>>()
    );
    let title = &m.fields[0];
    let titles = atlas
        .text(&title.column, title.column2.as_ref().unwrap())
        .unwrap();
    let at = (0..60).find(|&i| ids.get(i) == "it-005").unwrap();
    assert_eq!(titles.get(at), "\"Quoted, with comma\"\nand a second line");
    // Dates: "c. 1500" for it-000 is 1495-1505; "undated" is kept as written with no range.
    let dating = &m.fields[2];
    let start: Vec<i32> = atlas.array(&dating.column).unwrap();
    let end: Vec<i32> = atlas.array(dating.column2.as_ref().unwrap()).unwrap();
    let [wo, wt] = dating.written.as_ref().unwrap();
    let written = atlas.text(wo, wt).unwrap();
    let i0 = (0..60).find(|&i| ids.get(i) == "it-000").unwrap();
    assert_eq!(
        (start[i0], end[i0], written.get(i0)),
        (1495, 1505, "c. 1500")
    );
    let i3 = (0..60).find(|&i| ids.get(i) == "it-003").unwrap();
    assert_eq!((start[i3], written.get(i3)), (i32::MIN, "undated"));

    // Neighbours stay inside each invented group (the groups are far apart in vector space).
    let nb: Vec<u32> = atlas.neighbour_ids().unwrap();
    let group = |i: usize| ids.get(i)[3..].parse::<usize>().unwrap() / 20;
    for i in 0..60 {
        for s in 0..m.neighbours.k as usize {
            assert_eq!(
                group(nb[i * m.neighbours.k as usize + s] as usize),
                group(i)
            );
        }
    }
    // The report names the corrupt and the missing image; both got placeholders, the rest real thumbnails.
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("atlas/build-report.json")).unwrap())
            .unwrap();
    let problems: Vec<&str> = report["image_problems"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| p["id"].as_str().unwrap())
        .collect();
    assert_eq!(problems.len(), 2);
    assert!(problems.contains(&"it-007") && problems.contains(&"it-009"));
    let colours: Vec<u8> = atlas.array(&m.colours).unwrap();
    let i20 = (0..60).find(|&i| ids.get(i) == "it-020").unwrap();
    let c = &colours[i20 * 4..i20 * 4 + 3];
    assert!(
        c[1] > 120 && c[0] < 90 && c[2] < 90,
        "green group's average colour: {c:?}"
    );
    let sheets = m.sheets.as_ref().unwrap();
    // The default levels are 32, 128 and 512, less those above this build's --sheet-size 256.
    assert_eq!(
        sheets.levels.iter().map(|l| l.cell).collect::<Vec<_>>(),
        [32, 128]
    );
    for l in &sheets.levels {
        for f in &l.files {
            assert!(image::open(d.join("atlas").join(f)).is_ok(), "{f}");
        }
    }
    let extents: Vec<u32> = atlas.array(&sheets.extents).unwrap();
    assert_eq!(
        extents[i0],
        128 | (85 << 16),
        "90x60 fits the largest (128) cell as 128x85"
    );

    // Provenance: every input with its SHA-256.
    let roles: Vec<&str> = m
        .provenance
        .inputs
        .iter()
        .map(|i| i.role.as_str())
        .collect();
    assert!(roles.starts_with(&["vectors", "catalogue"]), "{roles:?}");
    let npy = std::fs::read(d.join("vectors.npy")).unwrap();
    assert_eq!(
        m.provenance.inputs[0].sha256,
        vitrine_format::sha256_hex(&npy)
    );

    // inspect verifies every array and prints the summary.
    let o = common::vitrine()
        .arg("inspect")
        .arg(d.join("atlas"))
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", stderr(&o));
    let text = String::from_utf8(o.stdout).unwrap();
    assert!(
        text.contains("items     60")
            && text.contains("workshop")
            && text.contains("checksums verified"),
        "{text}"
    );

    // export --positions: id and x, y per map; Python's csv module reads it back (an outside reader).
    let pos_csv = d.join("positions.csv");
    let o = common::vitrine()
        .arg("export")
        .arg(d.join("atlas"))
        .arg("--positions")
        .arg(&pos_csv)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", stderr(&o));
    let out = common::run_python(
        "import csv, sys; rows = list(csv.DictReader(open(sys.argv[1], newline=''))); \
         print(len(rows), sorted(rows[0].keys()), all(abs(float(r['similarity_x'])) < 1e6 for r in rows))",
        &[&pos_csv],
    );
    assert_eq!(
        out.trim(),
        "60 ['id', 'lattice_x', 'lattice_y', 'similarity_x', 'similarity_y', 'timeline_x', 'timeline_y'] True"
    );

    // Clusters: every item in one; the fixture's three far-apart groups are never mixed, and labels
    // name the group's workshop, the value over-represented in it.
    let cl = m.clusters.as_ref().expect("clusters");
    assert_eq!(cl.list.iter().map(|c| c.size).sum::<u64>(), 60);
    let of: Vec<u32> = atlas.array(&cl.ids).unwrap();
    for c in 0..cl.list.len() as u32 {
        let groups: std::collections::HashSet<usize> =
            (0..60).filter(|&i| of[i] == c).map(group).collect();
        assert_eq!(groups.len(), 1, "cluster {c} mixes groups");
    }
    assert!(
        cl.list[0].label.starts_with("Workshop "),
        "{:?}",
        cl.list[0]
    );

    // The lattice: one item per grid cell.
    let lat = m
        .maps
        .iter()
        .find(|l| l.name == "lattice")
        .expect("a lattice map");
    let cells: Vec<f32> = atlas.array(&lat.positions).unwrap();
    let distinct: std::collections::HashSet<(u32, u32)> = cells
        .chunks(2)
        .map(|c| (c[0] as u32, c[1] as u32))
        .collect();
    assert_eq!(distinct.len(), 60);
    assert!(cells.iter().all(|v| v.fract() == 0.0 && *v >= 0.0));

    // The timeline map puts each dated item at a year inside its range, undated ones left of the axis.
    let tl = m
        .maps
        .iter()
        .find(|l| l.name == "timeline")
        .expect("a timeline map");
    let axis = tl.x_axis.as_ref().unwrap();
    assert_eq!(axis.label, "dating");
    let xy: Vec<f32> = atlas.array(&tl.positions).unwrap();
    for i in 0..60 {
        let x = xy[2 * i] as f64;
        if start[i] == i32::MIN {
            assert!(
                (x - axis.missing_at.unwrap() as f64).abs() < 1.0,
                "undated at {x}"
            );
        } else {
            let year = axis.origin + x * axis.units_per_map_unit;
            assert!(
                year >= start[i] as f64 - 1e-3 && year <= end[i] as f64 + 1.0 + 1e-3,
                "{year} outside {}-{}",
                start[i],
                end[i]
            );
        }
    }

    // A corrupted array is caught by inspect.
    let f = d.join("atlas").join(&m.neighbours.chunks[0].distances.file);
    let mut bytes = std::fs::read(&f).unwrap();
    bytes[0] ^= 0xFF;
    std::fs::write(&f, bytes).unwrap();
    let o = common::vitrine()
        .arg("inspect")
        .arg(d.join("atlas"))
        .output()
        .unwrap();
    assert!(
        !o.status.success() && stderr(&o).contains("checksum"),
        "{}",
        stderr(&o)
    );
}

#[test]
fn same_inputs_and_seed_give_the_same_atlas_bytes() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    fixture(d, false);
    for out in ["a1", "a2"] {
        let o = build(d, out, &["--title", "Same", "--epochs", "60"]);
        assert!(o.status.success(), "{}", stderr(&o));
    }
    // Every file under arrays/ (the neighbour chunks sit in arrays/neighbours/), as relative paths.
    let files = |p: &Path| {
        let root = p.join("arrays");
        let mut v = Vec::new();
        let mut dirs = vec![root.clone()];
        while let Some(dir) = dirs.pop() {
            for e in std::fs::read_dir(&dir).unwrap() {
                let path = e.unwrap().path();
                if path.is_dir() {
                    dirs.push(path);
                } else {
                    v.push(path.strip_prefix(&root).unwrap().to_path_buf());
                }
            }
        }
        v.sort();
        v
    };
    assert_eq!(files(&d.join("a1")), files(&d.join("a2")));
    assert!(files(&d.join("a1"))
        .iter()
        .any(|f| f.starts_with("neighbours")));
    for f in files(&d.join("a1")) {
        assert_eq!(
            std::fs::read(d.join("a1/arrays").join(&f)).unwrap(),
            std::fs::read(d.join("a2/arrays").join(&f)).unwrap(),
            "{f:?}"
        );
    }
    assert_eq!(
        std::fs::read(d.join("a1/atlas.json")).unwrap(),
        std::fs::read(d.join("a2/atlas.json")).unwrap()
    );
    // Without images, items are coloured by their first category field.
    let m = Atlas::open(&d.join("a1")).unwrap().manifest;
    assert!(m.sheets.is_none());
}

#[test]
fn bad_input_stops_the_build_names_the_problem_and_keeps_the_old_atlas() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    fixture(d, false);
    let o = build(d, "atlas", &["--epochs", "20"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let good = std::fs::read(d.join("atlas/atlas.json")).unwrap();
    let leftovers = |d: &Path| {
        std::fs::read_dir(d)
            .unwrap()
            .filter(|e| {
                e.as_ref()
                    .unwrap()
                    .file_name()
                    .to_string_lossy()
                    .starts_with('.')
            })
            .count()
    };

    // A truncated .npy.
    let full = std::fs::read(d.join("vectors.npy")).unwrap();
    std::fs::write(d.join("vectors.npy"), &full[..full.len() - 30]).unwrap();
    let o = build(d, "atlas", &[]);
    let e = stderr(&o);
    assert!(
        !o.status.success()
            && e.contains("vectors.npy")
            && e.contains("truncated")
            && e.contains("row 58"),
        "{e}"
    );
    std::fs::write(d.join("vectors.npy"), &full).unwrap();

    // A row with NaN: named by row and id.
    let mut data = vec![0.5f32; 60 * 6];
    data[13 * 6 + 2] = f32::NAN;
    write_npy_f32(&d.join("nan.npy"), 60, 6, &data).unwrap();
    let o = common::vitrine()
        .current_dir(d)
        .args([
            "build",
            "--vectors",
            "nan.npy",
            "--catalogue",
            "records.csv",
            "--out",
            "atlas",
            "--quiet",
        ])
        .output()
        .unwrap();
    let e = stderr(&o);
    assert!(
        !o.status.success()
            && e.contains("nan.npy")
            && e.contains("row 13 (id it-013)")
            && e.contains("NaN"),
        "{e}"
    );

    // Catalogue ids with no vector, by ids file: every missing id named.
    let ids: String = (0..60)
        .filter(|i| *i != 17 && *i != 42)
        .map(|i| format!("it-{i:03}\n"))
        .collect::<String>()
        + "ghost-1\nghost-2\n";
    std::fs::write(d.join("ids.txt"), ids).unwrap();
    let o = build(d, "atlas", &["--vector-ids", "ids.txt"]);
    let e = stderr(&o);
    assert!(
        !o.status.success()
            && e.contains("have no vector: it-017, it-042")
            && e.contains("no catalogue record: ghost-1, ghost-2"),
        "{e}"
    );

    // By order: more records than vectors names the records left over.
    write_npy_f32(&d.join("short.npy"), 58, 6, &vec![0.5f32; 58 * 6]).unwrap();
    let o = common::vitrine()
        .current_dir(d)
        .args([
            "build",
            "--vectors",
            "short.npy",
            "--catalogue",
            "records.csv",
            "--out",
            "atlas",
            "--quiet",
        ])
        .output()
        .unwrap();
    let e = stderr(&o);
    assert!(
        !o.status.success() && e.contains("no vector: it-058, it-059"),
        "{e}"
    );

    // A catalogue row with a field too many: named by record and line.
    let mut csv = std::fs::read_to_string(d.join("records.csv")).unwrap();
    csv.push_str("it-060,x,y,1600,1,n,https://example.org,extra\n");
    std::fs::write(d.join("bad.csv"), csv).unwrap();
    let o = common::vitrine()
        .current_dir(d)
        .args([
            "build",
            "--vectors",
            "vectors.npy",
            "--catalogue",
            "bad.csv",
            "--out",
            "atlas",
            "--quiet",
        ])
        .output()
        .unwrap();
    let e = stderr(&o);
    assert!(
        !o.status.success()
            && e.contains("bad.csv")
            && e.contains("record 61")
            && e.contains("8 fields"),
        "{e}"
    );

    // A wrong id column is named with the columns there are.
    let o = build(d, "atlas", &["--id-column", "inventory"]);
    assert!(
        !o.status.success() && stderr(&o).contains("no id column \"inventory\""),
        "{}",
        stderr(&o)
    );

    // Through all of it the good atlas stood untouched and no temporary folder was left behind.
    assert_eq!(std::fs::read(d.join("atlas/atlas.json")).unwrap(), good);
    assert_eq!(leftovers(d), 0);

    // A folder that is not an atlas is never replaced.
    std::fs::create_dir_all(d.join("papers")).unwrap();
    std::fs::write(d.join("papers/thesis.txt"), "keep me").unwrap();
    let o = build(d, "papers", &[]);
    assert!(
        !o.status.success() && stderr(&o).contains("not an atlas"),
        "{}",
        stderr(&o)
    );
    assert_eq!(
        std::fs::read_to_string(d.join("papers/thesis.txt")).unwrap(),
        "keep me"
    );
}

#[test]
fn without_a_catalogue_rows_are_numbered() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    fixture(d, false);
    let o = common::vitrine()
        .current_dir(d)
        .args([
            "build",
            "--vectors",
            "vectors.npy",
            "--out",
            "plain",
            "--quiet",
            "--epochs",
            "20",
        ])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", stderr(&o));
    let a = Atlas::open(&d.join("plain")).unwrap();
    let ids = a.ids().unwrap();
    let mut all: Vec<usize> = (0..60).map(|i| ids.get(i).parse().unwrap()).collect();
    all.sort();
    assert_eq!(all, (0..60).collect::<Vec<_>>());
    assert!(a.manifest.fields.is_empty());
}

fn http_get(addr: &str, path: &str) -> (u16, String, Vec<u8>) {
    let hostport = addr.trim_start_matches("http://").trim_end_matches('/');
    let mut s = std::net::TcpStream::connect(hostport).unwrap();
    write!(
        s,
        "GET {path} HTTP/1.1\r\nHost: {hostport}\r\nConnection: close\r\n\r\n"
    )
    .unwrap();
    let mut buf = Vec::new();
    s.read_to_end(&mut buf).unwrap();
    let split = buf.windows(4).position(|w| w == b"\r\n\r\n").unwrap();
    let head = String::from_utf8_lossy(&buf[..split]).to_string();
    let status: u16 = head.split_whitespace().nth(1).unwrap().parse().unwrap();
    let ctype = head
        .lines()
        .find_map(|l| {
            l.strip_prefix("Content-Type: ")
                .or_else(|| l.strip_prefix("content-type: "))
        })
        .unwrap_or("")
        .to_string();
    (status, ctype, buf[split + 4..].to_vec())
}

#[test]
fn serve_gives_mime_types_and_never_leaves_the_folder() {
    let dir = tempfile::tempdir().unwrap();
    let root = dir.path().join("atlas");
    std::fs::create_dir_all(root.join("arrays")).unwrap();
    std::fs::write(root.join("index.html"), "<!doctype html>").unwrap();
    std::fs::write(root.join("viewer.wasm"), b"\0asm").unwrap();
    std::fs::write(root.join("atlas.json"), "{}").unwrap();
    std::fs::write(dir.path().join("secret.txt"), "outside").unwrap();
    #[cfg(unix)]
    std::os::unix::fs::symlink(dir.path().join("secret.txt"), root.join("link.txt")).unwrap();
    let addr = start_server(&root);
    assert!(addr.starts_with("http://127.0.0.1:"), "{addr}");
    let (s, t, body) = http_get(&addr, "/");
    assert_eq!(
        (s, t.as_str(), body.as_slice()),
        (200, "text/html; charset=utf-8", &b"<!doctype html>"[..])
    );
    assert_eq!(http_get(&addr, "/viewer.wasm").1, "application/wasm");
    assert_eq!(http_get(&addr, "/atlas.json?v=1").1, "application/json");
    for evil in [
        "/../secret.txt",
        "/%2e%2e/secret.txt",
        "/arrays/..%2f..%2fsecret.txt",
        "/link.txt",
        "//etc/passwd",
        "/..\\secret.txt",
    ] {
        let (s, _, body) = http_get(&addr, evil);
        assert_eq!(s, 404, "{evil}");
        assert!(
            !String::from_utf8_lossy(&body).contains("outside"),
            "{evil}"
        );
    }
    assert_eq!(http_get(&addr, "/missing.bin").0, 404);
}

/// Starts `vitrine serve` on `root` in a thread; returns its address.
fn start_server(root: &Path) -> String {
    let (tx, rx) = std::sync::mpsc::channel();
    let r = root.to_path_buf();
    std::thread::spawn(move || {
        vitrine_cli::http::serve(&r, "127.0.0.1", 0, |url| tx.send(url.to_string()).unwrap())
            .unwrap();
    });
    rx.recv().unwrap()
}

/// Reads one response (status line, headers, Content-Length body) from a kept-alive connection.
fn read_response(r: &mut std::io::BufReader<std::net::TcpStream>) -> (u16, Vec<u8>) {
    use std::io::BufRead;
    let mut line = String::new();
    r.read_line(&mut line).unwrap();
    let status: u16 = line.split_whitespace().nth(1).unwrap().parse().unwrap();
    let mut len = 0usize;
    loop {
        line.clear();
        r.read_line(&mut line).unwrap();
        if line.trim_end().is_empty() {
            break;
        }
        if let Some(v) = line.to_ascii_lowercase().strip_prefix("content-length:") {
            len = v.trim().parse().unwrap();
        }
    }
    let mut body = vec![0u8; len];
    r.read_exact(&mut body).unwrap();
    (status, body)
}

#[test]
fn serve_keeps_connections_alive_and_answers_them_side_by_side() {
    // As a browser loads an atlas: several large files at once, and several requests in turn on
    // one connection (HTTP/1.1 keep-alive, RFC 9112 section 9.3).
    let dir = tempfile::tempdir().unwrap();
    let root = dir.path().to_path_buf();
    let big: Vec<u8> = (0..6_000_000u32).map(|i| (i % 251) as u8).collect();
    for k in 0..6 {
        std::fs::write(root.join(format!("part-{k}.bin")), &big).unwrap();
    }
    let addr = start_server(&root);
    let hostport = addr
        .trim_start_matches("http://")
        .trim_end_matches('/')
        .to_string();
    // Six connections send their requests first and are read only afterwards, last first: no
    // answer may wait for another connection's body to be read.
    let mut conns: Vec<std::net::TcpStream> = (0..6)
        .map(|k| {
            let mut s = std::net::TcpStream::connect(&hostport).unwrap();
            write!(s, "GET /part-{k}.bin HTTP/1.1\r\nHost: x\r\n\r\n").unwrap();
            s
        })
        .collect();
    for s in conns.iter_mut().rev() {
        s.set_read_timeout(Some(std::time::Duration::from_secs(20)))
            .unwrap();
        let mut r = std::io::BufReader::new(s.try_clone().unwrap());
        let (status, body) = read_response(&mut r);
        assert_eq!(status, 200);
        assert!(body == big, "the whole file, unchanged");
        // The same connection answers again, then a HEAD without a body, then a 404.
        write!(s, "GET /part-0.bin HTTP/1.1\r\nHost: x\r\n\r\n").unwrap();
        assert_eq!(read_response(&mut r).1.len(), big.len());
        write!(s, "HEAD /part-1.bin HTTP/1.1\r\nHost: x\r\n\r\n").unwrap();
        let mut line = String::new();
        std::io::BufRead::read_line(&mut r, &mut line).unwrap();
        assert!(line.starts_with("HTTP/1.1 200"), "{line}");
        loop {
            line.clear();
            std::io::BufRead::read_line(&mut r, &mut line).unwrap();
            if line.trim_end().is_empty() {
                break;
            }
        }
        write!(
            s,
            "GET /nothing HTTP/1.1\r\nHost: x\r\nConnection: close\r\n\r\n"
        )
        .unwrap();
        assert_eq!(read_response(&mut r).0, 404);
        let mut rest = Vec::new();
        r.read_to_end(&mut rest).unwrap();
        assert!(rest.is_empty(), "closed after Connection: close");
    }
    let mut s = std::net::TcpStream::connect(&hostport).unwrap();
    write!(
        s,
        "POST /part-0.bin HTTP/1.1\r\nContent-Length: 3\r\nConnection: close\r\n\r\nabc"
    )
    .unwrap();
    let mut r = std::io::BufReader::new(s);
    assert_eq!(read_response(&mut r).0, 405);
}

/// What interrupted builds left beside an atlas (a SIGKILLed build's `.NAME.building-PID`) goes
/// at the next build; a build while another holds the atlas's lock is refused; an `--out` that
/// names no folder (`.`) is refused before any work.
#[test]
fn interrupted_and_concurrent_builds_leave_nothing_broken() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    fixture(d, false);
    for stale in [".atlas.building-4000001", ".atlas.old-4000002"] {
        std::fs::create_dir_all(d.join(stale).join("arrays")).unwrap();
        std::fs::write(d.join(stale).join("arrays/x.bin"), vec![7u8; 300_000]).unwrap();
    }
    // Not this atlas's, and not a build's: left alone.
    std::fs::create_dir_all(d.join(".atlas2.building-4000003")).unwrap();
    std::fs::create_dir_all(d.join(".atlas.building-notes")).unwrap();
    let mut cmd = common::vitrine();
    cmd.current_dir(d).args([
        "build",
        "--vectors",
        "vectors.npy",
        "--catalogue",
        "records.csv",
        "--out",
        "atlas",
        "--epochs",
        "10",
    ]);
    let o = cmd.output().unwrap();
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(
        stderr(&o).contains("removed 2 temporary folder(s)"),
        "{}",
        stderr(&o)
    );
    assert!(!d.join(".atlas.building-4000001").exists() && !d.join(".atlas.old-4000002").exists());
    assert!(
        d.join(".atlas2.building-4000003").exists() && d.join(".atlas.building-notes").exists()
    );
    let hidden: Vec<String> = std::fs::read_dir(d)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().to_string())
        .filter(|n| n.starts_with(".atlas."))
        .collect();
    assert_eq!(
        hidden,
        [".atlas.building-notes"],
        "the lock went at the end"
    );
    // Another build holding the lock: this one is refused and the atlas stays as it was.
    let manifest = std::fs::read(d.join("atlas/atlas.json")).unwrap();
    let lock = std::fs::OpenOptions::new()
        .create(true)
        .truncate(false)
        .write(true)
        .open(d.join(".atlas.lock"))
        .unwrap();
    lock.lock().unwrap();
    let o = build(d, "atlas", &["--epochs", "10"]);
    assert!(!o.status.success());
    assert!(
        stderr(&o).contains("another build is writing this atlas"),
        "{}",
        stderr(&o)
    );
    assert_eq!(std::fs::read(d.join("atlas/atlas.json")).unwrap(), manifest);
    lock.unlock().unwrap();
    let o = build(d, "atlas", &["--epochs", "10"]);
    assert!(o.status.success(), "{}", stderr(&o));
    // A build killed after moving the old atlas aside and before putting the new one in place:
    // the next build puts the old one back first, so even a failing build leaves it there.
    let manifest = std::fs::read(d.join("atlas/atlas.json")).unwrap();
    std::fs::rename(d.join("atlas"), d.join(".atlas.old-4000009")).unwrap();
    let o = build(d, "atlas", &["--id-column", "nowhere"]);
    assert!(!o.status.success());
    assert!(stderr(&o).contains("put back the atlas"), "{}", stderr(&o));
    assert_eq!(std::fs::read(d.join("atlas/atlas.json")).unwrap(), manifest);
    assert!(!d.join(".atlas.old-4000009").exists());
    // `--out .` (and `..`) name no folder to put an atlas in place of: refused at once.
    std::fs::create_dir_all(d.join("here")).unwrap();
    for out in [".", ".."] {
        let o = common::vitrine()
            .current_dir(d.join("here"))
            .args([
                "build",
                "--vectors",
                "../vectors.npy",
                "--out",
                out,
                "--quiet",
            ])
            .output()
            .unwrap();
        assert!(!o.status.success());
        assert!(
            stderr(&o).contains("name the atlas folder itself"),
            "{}",
            stderr(&o)
        );
    }
    assert_eq!(std::fs::read_dir(d.join("here")).unwrap().count(), 0);
}

#[test]
fn nothing_of_the_users_is_ever_deleted_or_overwritten() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    fixture(d, false);
    // A folder with a file that merely has the manifest's name is not an atlas.
    for manifest in ["hello", "{\"format\": \"other\"}"] {
        std::fs::create_dir_all(d.join("proj")).unwrap();
        std::fs::write(d.join("proj/atlas.json"), manifest).unwrap();
        std::fs::write(d.join("proj/thesis.docx"), "precious").unwrap();
        let o = build(d, "proj", &["--epochs", "10"]);
        assert!(
            !o.status.success() && stderr(&o).contains("not an atlas"),
            "{}",
            stderr(&o)
        );
        assert_eq!(
            std::fs::read_to_string(d.join("proj/thesis.docx")).unwrap(),
            "precious"
        );
    }
    // A real atlas that a user added notes to is not replaced either: the files are named.
    let o = build(d, "atlas", &["--epochs", "10"]);
    assert!(o.status.success(), "{}", stderr(&o));
    std::fs::write(d.join("atlas/NOTES.txt"), "mine").unwrap();
    let o = build(d, "atlas", &["--epochs", "10"]);
    assert!(
        !o.status.success() && stderr(&o).contains("NOTES.txt"),
        "{}",
        stderr(&o)
    );
    assert_eq!(
        std::fs::read_to_string(d.join("atlas/NOTES.txt")).unwrap(),
        "mine"
    );
    std::fs::remove_file(d.join("atlas/NOTES.txt")).unwrap();
    let o = build(d, "atlas", &["--epochs", "10"]);
    assert!(
        o.status.success(),
        "a clean atlas is rebuilt in place: {}",
        stderr(&o)
    );

    // Exports never write into the atlas, and replace a file only with --force.
    let export = |to: &str, force: bool| {
        let mut c = common::vitrine();
        c.current_dir(d)
            .args(["export", "atlas", "--positions", to]);
        if force {
            c.arg("--force");
        }
        c.output().unwrap()
    };
    let o = export("atlas/atlas.json", true);
    assert!(
        !o.status.success() && stderr(&o).contains("inside the atlas"),
        "{}",
        stderr(&o)
    );
    assert!(vitrine_build::read::Atlas::open(&d.join("atlas")).is_ok());
    std::fs::write(d.join("mine.csv"), "keep").unwrap();
    let o = export("mine.csv", false);
    assert!(
        !o.status.success() && stderr(&o).contains("--force"),
        "{}",
        stderr(&o)
    );
    assert_eq!(std::fs::read_to_string(d.join("mine.csv")).unwrap(), "keep");
    assert!(export("mine.csv", true).status.success());

    // A --viewer that is not a viewer folder is an error, before any work.
    let o = build(d, "atlas2", &["--viewer", "images-that-do-not-exist"]);
    assert!(
        !o.status.success() && stderr(&o).contains("--viewer"),
        "{}",
        stderr(&o)
    );
    assert!(!d.join("atlas2").exists());
}

#[test]
fn image_paths_stay_inside_the_images_folder_and_local_paths_stay_out_of_the_atlas() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    fixture(d, true);
    std::fs::write(d.join("secret.png"), b"outside").unwrap();
    let csv = std::fs::read_to_string(d.join("records.csv")).unwrap();
    let mut lines: Vec<String> = csv.lines().map(String::from).collect();
    lines[0].push_str(",image");
    // Quoted multi-line title: records span lines, so add the column by record.
    let mut out = vec![lines[0].clone()];
    let mut rec = String::new();
    for l in &lines[1..] {
        rec.push_str(l);
        if rec.matches('"').count() % 2 == 1 {
            rec.push('\n');
            continue;
        }
        let id: usize = rec[3..6].parse().unwrap();
        let path = match id {
            1 => "../secret.png".to_string(),
            2 => "/etc/hostname".to_string(),
            _ => format!("it-{id:03}.png"),
        };
        out.push(format!("{rec},{path}"));
        rec.clear();
    }
    std::fs::write(d.join("records.csv"), out.join("\n") + "\n").unwrap();
    let o = build(d, "atlas", &["--images", "images", "--epochs", "10"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("atlas/build-report.json")).unwrap())
            .unwrap();
    let problems = report["image_problems"].as_array().unwrap();
    let reason = |id: &str| {
        problems
            .iter()
            .find(|p| p["id"] == id)
            .map(|p| p["reason"].as_str().unwrap().to_string())
            .unwrap_or_default()
    };
    assert!(
        reason("it-001").contains("outside the --images folder"),
        "{problems:?}"
    );
    assert!(
        reason("it-002").contains("outside the --images folder"),
        "{problems:?}"
    );
    // Provenance and digests name files, not the machine's folders.
    let text = std::fs::read_to_string(d.join("atlas/atlas.json")).unwrap();
    let digests = std::fs::read_to_string(d.join("atlas/image-digests.txt")).unwrap();
    let here = d.display().to_string();
    assert!(!text.contains(&here) && !digests.contains(&here));
    assert!(
        digests.lines().all(|l| l.len() > 64 && !l.starts_with(' ')),
        "{digests}"
    );
    assert!(digests.contains("  it-000.png"));
}

#[test]
fn degenerate_collections_build_with_finite_maps() {
    // 1, 2, k and k + 1 items; all identical; a zero vector under cosine; two groups with no edge between them.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let mut cases: Vec<(String, usize, Vec<f32>)> = Vec::new();
    for n in [1usize, 2, 15, 16] {
        cases.push((
            format!("n{n}"),
            n,
            (0..n * 4).map(|i| (i % 7) as f32 + 0.5).collect(),
        ));
    }
    cases.push(("identical".into(), 40, vec![0.25; 40 * 4]));
    let mut zero: Vec<f32> = (0..30 * 4).map(|i| (i % 5) as f32 + 1.0).collect();
    zero[..4].fill(0.0);
    cases.push(("zero".into(), 30, zero));
    let apart: Vec<f32> = (0..60)
        .flat_map(|i| {
            let far = if i < 30 { 0.0 } else { 1000.0 };
            [far + (i % 3) as f32, far + (i % 5) as f32, far, far]
        })
        .collect();
    cases.push(("apart".into(), 60, apart));
    // Ten distinct vectors, each five times over (fewer copies than k).
    let dups: Vec<f32> = (0..50)
        .flat_map(|i| {
            let g = (i % 10) as f32;
            [g + 1.0, (g * 3.0) % 7.0 + 0.5, 1.0, g * 0.5]
        })
        .collect();
    cases.push(("duplicates".into(), 50, dups));
    // The same with NN-descent forced, whose random-projection trees must stop on equal points.
    for name in ["identical", "duplicates", "n16"] {
        let c = cases.iter().find(|c| c.0 == name).unwrap().clone();
        cases.push((format!("{name}-approximate"), c.1, c.2));
    }
    // And through a PCA pre-reduction, where identical vectors have no variance at all.
    for name in ["identical", "zero", "n2"] {
        let c = cases.iter().find(|c| c.0 == name).unwrap().clone();
        cases.push((format!("{name}-pca"), c.1, c.2));
    }
    for (name, n, data) in cases {
        let v = d.join(format!("{name}.npy"));
        write_npy_f32(&v, n, 4, &data).unwrap();
        let metric = if name == "apart" {
            "euclidean"
        } else {
            "cosine"
        };
        let out = d.join(&name);
        let search = if name.ends_with("-approximate") {
            "approximate"
        } else {
            "auto"
        };
        let o = common::quick_build()
            .args(["--metric", metric, "--neighbours", search, "--vectors"])
            .arg(&v)
            .args(if name.ends_with("-pca") {
                &["--pca", "2"][..]
            } else {
                &[]
            })
            .arg("--out")
            .arg(&out)
            .output()
            .unwrap();
        assert!(o.status.success(), "{name}: {}", stderr(&o));
        let a = Atlas::open(&out).unwrap();
        assert_eq!(a.manifest.item_count as usize, n);
        for map in &a.manifest.maps {
            let xy: Vec<f32> = a.array(&map.positions).unwrap();
            assert!(
                xy.iter().all(|x| x.is_finite()),
                "{name}/{}: {xy:?}",
                map.name
            );
            assert!(
                map.bounds.iter().all(|b| b.is_finite()),
                "{name}/{}",
                map.name
            );
        }
    }
}

/// Sorted neighbour distances per item id, read from an atlas.
fn neighbour_distances(a: &Atlas) -> std::collections::BTreeMap<String, Vec<f32>> {
    let ids = a.ids().unwrap();
    let k = a.manifest.neighbours.k as usize;
    let dist: Vec<f32> = a.neighbour_distances().unwrap();
    (0..ids.len())
        .map(|i| {
            let mut d = dist[i * k..(i + 1) * k].to_vec();
            d.sort_by(f32::total_cmp);
            (ids.get(i).to_string(), d)
        })
        .collect()
}

#[test]
fn pca_pre_reduction_keeps_distances_and_is_recorded() {
    // 80 vectors of 8 dimensions that span only 4: a PCA to 4 dimensions loses nothing, so the
    // neighbour graph's distances (cosine and Euclidean alike) must be those of the full vectors,
    // and the recorded explained variance must be all of it.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let basis: [[f32; 8]; 4] = [
        [1.0, 0.5, 0.0, 0.2, 0.0, 0.3, 0.1, 0.0],
        [0.0, 1.0, 0.4, 0.0, 0.6, 0.0, 0.0, 0.2],
        [0.3, 0.0, 1.0, 0.5, 0.0, 0.0, 0.7, 0.1],
        [0.0, 0.2, 0.0, 1.0, 0.1, 0.8, 0.0, 0.5],
    ];
    let mut data = Vec::new();
    for i in 0..80usize {
        let z: Vec<f32> = (0..4)
            .map(|j| 0.5 + ((i * 31 + j * 17 + i * j * 7) % 23) as f32 / 7.0)
            .collect();
        for c in 0..8 {
            data.push(z.iter().zip(&basis).map(|(zj, b)| zj * b[c]).sum());
        }
    }
    write_npy_f32(&d.join("vectors.npy"), 80, 8, &data).unwrap();
    for metric in ["cosine", "euclidean"] {
        let run = |name: &str, extra: &[&str]| {
            let o = common::quick_build()
                .current_dir(d)
                .args(["--metric", metric])
                .args(["--vectors", "vectors.npy", "--out", name])
                .args(extra)
                .output()
                .unwrap();
            assert!(o.status.success(), "{name}: {}", stderr(&o));
            Atlas::open(&d.join(name)).unwrap()
        };
        let full = run(&format!("full-{metric}"), &[]);
        let reduced = run(&format!("pca-{metric}"), &["--pca", "4"]);
        let (a, b) = (neighbour_distances(&full), neighbour_distances(&reduced));
        assert_eq!(a.len(), 80);
        for (id, da) in &a {
            let db = &b[id];
            for (x, y) in da.iter().zip(db) {
                assert!(
                    (x - y).abs() <= 1e-4 + 1e-3 * x.abs(),
                    "{metric} {id}: distances {da:?} with PCA {db:?}"
                );
            }
        }
        assert_eq!(reduced.manifest.neighbours.metric, metric);
        let p = &reduced.manifest.provenance.parameters;
        assert_eq!(p["vector_dimensions"], 8);
        assert_eq!(p["pca"], 4);
        assert_eq!(p["pca_dimensions"], 4);
        let explained = p["pca_explained_variance"].as_f64().unwrap();
        assert!((explained - 1.0).abs() < 1e-4, "{explained}");
        let ratios: Vec<f64> = p["pca_explained_variance_ratios"]
            .as_array()
            .unwrap()
            .iter()
            .map(|r| r.as_f64().unwrap())
            .collect();
        assert_eq!(ratios.len(), 4);
        assert!(ratios.windows(2).all(|w| w[0] >= w[1]), "{ratios:?}");
        assert_eq!(p["pca_fit_items"], 80);
        assert!(full.manifest.provenance.parameters["pca"].is_null());
        assert!(full
            .manifest
            .provenance
            .parameters
            .get("pca_dimensions")
            .is_none());
        let q = &reduced.manifest.quality;
        let t = q["similarity_trustworthiness_at_10"].as_f64().unwrap();
        assert!(t.is_finite() && t > 0.5, "{t}");
        let map = &reduced.manifest.maps[0];
        assert!(
            map.description.contains("4 principal components"),
            "{}",
            map.description
        );
        let xy: Vec<f32> = reduced.array(&map.positions).unwrap();
        assert!(xy.iter().all(|x| x.is_finite()));
    }
    // Asking for as many components as there are dimensions keeps the vectors, and says so.
    let o = common::vitrine()
        .current_dir(d)
        .args(["build", "--epochs", "30", "--pca", "8"])
        .args(["--vectors", "vectors.npy", "--out", "same"])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(
        stderr(&o).contains("--pca 8: not fewer than"),
        "{}",
        stderr(&o)
    );
    let a = Atlas::open(&d.join("same")).unwrap();
    assert!(a
        .manifest
        .provenance
        .parameters
        .get("pca_dimensions")
        .is_none());
    // Zero components is refused with a message naming the option.
    let o = common::vitrine()
        .current_dir(d)
        .args([
            "build",
            "--pca",
            "0",
            "--vectors",
            "vectors.npy",
            "--out",
            "zero",
        ])
        .output()
        .unwrap();
    assert!(!o.status.success());
    assert!(stderr(&o).contains("--pca"), "{}", stderr(&o));
    assert!(!d.join("zero").exists());
}

#[test]
fn every_image_failure_gets_a_placeholder_and_a_report_entry_unless_strict() {
    // 12 records: six good PNGs, then one of each failure class. The build goes on, every record
    // is in the atlas, and the report names each failure with its class; --strict stops instead.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let n = 12usize;
    let data: Vec<f32> = (0..n * 4).map(|i| ((i * 7) % 11) as f32 + 1.0).collect();
    write_npy_f32(&d.join("vectors.npy"), n, 4, &data).unwrap();
    let mut csv = String::from("id,title\n");
    for i in 0..n {
        csv.push_str(&format!("r{i:02},Sheet {i}\n"));
    }
    std::fs::write(d.join("records.csv"), csv).unwrap();
    let img = d.join("images");
    std::fs::create_dir_all(&img).unwrap();
    for i in 0..6 {
        image::RgbImage::from_pixel(60, 40, image::Rgb([30, 90, 160]))
            .save(img.join(format!("r{i:02}.png")))
            .unwrap();
    }
    // r06: no file at all.
    // r07: a JPEG cut in half.
    let mut jpeg = Vec::new();
    image::codecs::jpeg::JpegEncoder::new_with_quality(&mut jpeg, 90)
        .encode_image(&image::RgbImage::from_fn(64, 48, |x, y| {
            image::Rgb([(x * 4) as u8, (y * 5) as u8, 90])
        }))
        .unwrap();
    std::fs::write(img.join("r07.jpg"), &jpeg[..jpeg.len() / 2]).unwrap();
    // r08: a PNG whose compressed pixel data is overwritten.
    let mut png = Vec::new();
    image::DynamicImage::ImageRgb8(image::RgbImage::from_fn(64, 64, |x, y| {
        image::Rgb([(x * 4) as u8, (y * 4) as u8, 7])
    }))
    .write_to(&mut std::io::Cursor::new(&mut png), image::ImageFormat::Png)
    .unwrap();
    let at = png.windows(4).position(|w| w == b"IDAT").unwrap() + 8;
    png[at..at + 40].fill(0x5a);
    std::fs::write(img.join("r08.png"), &png).unwrap();
    // r09: text under an image's name.
    std::fs::write(img.join("r09.jpg"), b"this is a caption, not an image\n").unwrap();
    // r10: more pixels than --max-pixels allows (200 x 100 = 20,000 > 10,000).
    image::RgbImage::from_pixel(200, 100, image::Rgb([200, 200, 200]))
        .save(img.join("r10.png"))
        .unwrap();
    // r11: a folder under an image's name (not an image file: missing).
    std::fs::create_dir_all(img.join("r11.png")).unwrap();
    let run = |out: &str, extra: &[&str]| {
        let common = [
            "--epochs",
            "30",
            "--max-pixels",
            "10000",
            "--images",
            "images",
        ];
        build(d, out, &[&common[..], extra].concat())
    };
    let o = run("atlas", &[]);
    assert!(o.status.success(), "{}", stderr(&o));
    let a = Atlas::open(&d.join("atlas")).unwrap();
    assert_eq!(a.manifest.item_count as usize, n);
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("atlas/build-report.json")).unwrap())
            .unwrap();
    let kinds: std::collections::BTreeMap<String, (String, String)> = report["image_problems"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| {
            (
                p["id"].as_str().unwrap().to_string(),
                (
                    p["kind"].as_str().unwrap().to_string(),
                    p["reason"].as_str().unwrap().to_string(),
                ),
            )
        })
        .collect();
    let want = [
        ("r06", "missing"),
        ("r07", "truncated"),
        ("r08", "corrupt"),
        ("r09", "unsupported"),
        ("r10", "too large"),
        ("r11", "missing"),
    ];
    assert_eq!(kinds.len(), want.len(), "{kinds:?}");
    for (id, kind) in want {
        assert_eq!(kinds[id].0, kind, "{id}: {:?}", kinds[id]);
    }
    assert!(kinds["r10"].1.contains("200 x 100"), "{:?}", kinds["r10"]);
    assert!(
        kinds["r10"].1.contains("--max-pixels"),
        "{:?}",
        kinds["r10"]
    );
    // The summary line of the build report, and every level's sheets are there.
    let notes = report["notes"].as_array().unwrap();
    assert!(
        notes.iter().any(|s| s
            .as_str()
            .unwrap()
            .starts_with("6 image(s) could not be used")),
        "{notes:?}"
    );
    for level in &a.manifest.sheets.as_ref().unwrap().levels {
        for f in &level.files {
            assert!(d.join("atlas").join(f).is_file(), "{f}");
        }
    }
    // Sizes of the originals: 60 x 40 for the good ones, 0 x 0 where there was no usable image.
    let sizes: Vec<u32> = a
        .array(
            a.manifest
                .sheets
                .as_ref()
                .unwrap()
                .image_sizes
                .as_ref()
                .unwrap(),
        )
        .unwrap();
    let ids_t = a.ids().unwrap();
    for i in 0..n {
        let id = ids_t.get(i);
        let want = if kinds.contains_key(id) {
            [0, 0]
        } else {
            [60, 40]
        };
        assert_eq!([sizes[2 * i], sizes[2 * i + 1]], want, "{id}");
    }
    // The good images have real thumbnails: their average colour is the image's blue.
    let colours: Vec<u8> = a.array(&a.manifest.colours).unwrap();
    let ids = a.ids().unwrap();
    let r00 = (0..n).find(|&i| ids.get(i) == "r00").unwrap();
    let c = &colours[r00 * 4..r00 * 4 + 3];
    assert!(c[2] > 130 && c[0] < 60, "{c:?}");
    // --strict: the build stops, names the images, and leaves the atlas as it was.
    let before = std::fs::read(d.join("atlas/atlas.json")).unwrap();
    let o = run("atlas", &["--strict", "--seed", "7"]);
    assert!(!o.status.success());
    let e = stderr(&o);
    assert!(e.contains("--strict: 6 image(s) could not be used"), "{e}");
    assert!(e.contains("r07") && e.contains("truncated"), "{e}");
    assert_eq!(std::fs::read(d.join("atlas/atlas.json")).unwrap(), before);
}

#[test]
fn scikit_image_photographs_thumbnail_to_their_expected_sizes() {
    // astronaut (512 x 512) and coffee (600 x 400), as scikit-image ships them, written as PNG
    // and JPEG by Pillow: the largest level (128 px cells) holds 128 x 128 and 128 x 85.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    common::run_python(
        r#"
import sys
from PIL import Image
from skimage import data
out = sys.argv[1]
Image.fromarray(data.astronaut()).save(f"{out}/astronaut.png")
Image.fromarray(data.coffee()).save(f"{out}/coffee.jpg", quality=90)
"#,
        &[d],
    );
    let img = d.join("images");
    std::fs::create_dir_all(&img).unwrap();
    std::fs::rename(d.join("astronaut.png"), img.join("astronaut.png")).unwrap();
    std::fs::rename(d.join("coffee.jpg"), img.join("coffee.jpg")).unwrap();
    std::fs::write(d.join("records.csv"), "id,title\nastronaut,A\ncoffee,B\n").unwrap();
    write_npy_f32(
        &d.join("vectors.npy"),
        2,
        3,
        &[1.0, 0.0, 0.2, 0.1, 1.0, 0.0],
    )
    .unwrap();
    let o = build(d, "atlas", &["--images", "images"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let a = Atlas::open(&d.join("atlas")).unwrap();
    let sheets = a.manifest.sheets.as_ref().unwrap();
    let extents: Vec<u32> = a.array(&sheets.extents).unwrap();
    let sizes: Vec<u32> = a.array(sheets.image_sizes.as_ref().unwrap()).unwrap();
    let ids = a.ids().unwrap();
    for (i, &e) in extents.iter().enumerate() {
        let (w, h) = (e & 0xffff, e >> 16);
        let original = (sizes[2 * i], sizes[2 * i + 1]);
        match ids.get(i) {
            "astronaut" => assert_eq!(((w, h), original), ((512, 512), (512, 512))),
            "coffee" => assert_eq!(((w, h), original), ((512, 341), (600, 400))),
            other => panic!("{other}"),
        }
    }
    // Three levels of detail chosen on the command line.
    let o = build(d, "three", &["--images", "images", "--levels", "16,64,256"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let a = Atlas::open(&d.join("three")).unwrap();
    let sheets = a.manifest.sheets.as_ref().unwrap();
    assert_eq!(
        sheets.levels.iter().map(|l| l.cell).collect::<Vec<_>>(),
        [16, 64, 256]
    );
    for l in &sheets.levels {
        assert_eq!(l.files.len(), 1);
        let img = image::open(d.join("three").join(&l.files[0])).unwrap();
        // Two items fill the first row of cells.
        assert_eq!(
            (img.width(), img.height()),
            (2048 / l.cell * l.cell, l.cell)
        );
    }
    let extents: Vec<u32> = a.array(&sheets.extents).unwrap();
    let ids = a.ids().unwrap();
    for (i, &e) in extents.iter().enumerate() {
        let want = if ids.get(i) == "astronaut" {
            (256, 256)
        } else {
            (256, 171)
        };
        assert_eq!((e & 0xffff, e >> 16), want);
    }
    let o = build(d, "bad", &["--levels", "128,32"]);
    assert!(!o.status.success());
    assert!(stderr(&o).contains("smallest first"), "{}", stderr(&o));
}

#[test]
fn a_rebuild_reuses_the_thumbnails_of_unchanged_images_and_remakes_the_rest() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let img = d.join("images");
    std::fs::create_dir_all(&img).unwrap();
    let write = |n: usize| {
        let data: Vec<f32> = (0..n * 4).map(|i| ((i * 7) % 13) as f32 + 1.0).collect();
        write_npy_f32(&d.join("vectors.npy"), n, 4, &data).unwrap();
        let mut csv = String::from("id\n");
        for i in 0..n {
            csv.push_str(&format!("p{i:02}\n"));
        }
        std::fs::write(d.join("records.csv"), csv).unwrap();
    };
    let colour = |i: usize| image::Rgb([(i * 8) as u8, 200 - (i * 5) as u8, 60]);
    for i in 0..30 {
        image::RgbImage::from_fn(90, 60, |x, _| {
            if x < 5 {
                image::Rgb([0, 0, 0])
            } else {
                colour(i)
            }
        })
        .save(img.join(format!("p{i:02}.png")))
        .unwrap();
    }
    write(30);
    let build = |out: &str, cache: Option<&str>| {
        let mut c = common::quick_build();
        c.current_dir(d).args([
            "--vectors",
            "vectors.npy",
            "--catalogue",
            "records.csv",
            "--images",
            "images",
            "--out",
            out,
        ]);
        match cache {
            Some(dir) => c.args(["--thumb-cache", dir]),
            None => c.arg("--no-thumb-cache"),
        };
        let o = c.output().unwrap();
        assert!(o.status.success(), "{}", stderr(&o));
        let r: serde_json::Value = serde_json::from_str(
            &std::fs::read_to_string(d.join(out).join("build-report.json")).unwrap(),
        )
        .unwrap();
        (
            r["thumbnails_made"].as_u64().unwrap(),
            r["thumbnails_reused"].as_u64().unwrap(),
        )
    };
    let sheets = |out: &str| -> Vec<(String, Vec<u8>)> {
        let mut v: Vec<_> = std::fs::read_dir(d.join(out).join("sheets"))
            .unwrap()
            .map(|e| e.unwrap().path())
            .map(|p| {
                (
                    p.file_name().unwrap().to_string_lossy().to_string(),
                    std::fs::read(&p).unwrap(),
                )
            })
            .collect();
        v.sort();
        v
    };
    assert_eq!(build("first", Some("cache")), (30, 0));
    assert_eq!(build("fresh", None), (30, 0));
    // Nothing changed: every thumbnail comes from the cache, and the sheets are those of a build
    // that made every thumbnail afresh: the same files, the same sizes, pixels within a fraction
    // of a grey level on average (the cache keeps the largest level as a quality-95 JPEG).
    assert_eq!(build("again", Some("cache")), (0, 30));
    let (again, fresh) = (sheets("again"), sheets("fresh"));
    assert_eq!(
        again.iter().map(|s| &s.0).collect::<Vec<_>>(),
        fresh.iter().map(|s| &s.0).collect::<Vec<_>>()
    );
    for ((name, a), (_, f)) in again.iter().zip(&fresh) {
        let a = image::load_from_memory(a).unwrap().to_rgb8();
        let f = image::load_from_memory(f).unwrap().to_rgb8();
        assert_eq!(a.dimensions(), f.dimensions(), "{name}");
        let sum: u64 = a
            .as_raw()
            .iter()
            .zip(f.as_raw())
            .map(|(x, y)| x.abs_diff(*y) as u64)
            .sum();
        let mae = sum as f64 / a.as_raw().len() as f64;
        assert!(
            mae < 1.0,
            "{name}: mean absolute error {mae:.3} against a fresh build"
        );
    }
    let digests =
        |out: &str| std::fs::read_to_string(d.join(out).join("image-digests.txt")).unwrap();
    assert_eq!(digests("again"), digests("fresh"));
    // One image repainted (another size on disk) and one record added: those two are made.
    image::RgbImage::from_pixel(70, 70, image::Rgb([250, 20, 200]))
        .save(img.join("p03.png"))
        .unwrap();
    image::RgbImage::from_pixel(40, 80, image::Rgb([10, 10, 250]))
        .save(img.join("p30.png"))
        .unwrap();
    write(31);
    assert_eq!(build("grown", Some("cache")), (2, 29));
    let a = Atlas::open(&d.join("grown")).unwrap();
    let ids = a.ids().unwrap();
    let colours: Vec<u8> = a.array(&a.manifest.colours).unwrap();
    let at = |id: &str| {
        let i = (0..31).find(|&i| ids.get(i) == id).unwrap();
        [colours[4 * i], colours[4 * i + 1], colours[4 * i + 2]]
    };
    let p03 = at("p03");
    assert!(
        p03[0] > 230 && p03[1] < 40 && p03[2] > 180,
        "repainted p03: {p03:?}"
    );
    let p30 = at("p30");
    assert!(p30[2] > 230 && p30[0] < 30, "new p30: {p30:?}");
    // Entries cut short (a full disk, a copy broken off) are not published with grey bottoms:
    // every one is found damaged, made again from its image, and the report says so.
    let mut entries = Vec::new();
    for sub in std::fs::read_dir(d.join("cache")).unwrap() {
        for e in std::fs::read_dir(sub.unwrap().path()).unwrap() {
            entries.push(e.unwrap().path());
        }
    }
    assert!(entries.len() >= 31, "{} cache entries", entries.len());
    for e in &entries {
        let bytes = std::fs::read(e).unwrap();
        std::fs::write(e, &bytes[..bytes.len() * 2 / 3]).unwrap();
    }
    assert_eq!(build("cut", Some("cache")), (31, 0));
    let report = std::fs::read_to_string(d.join("cut").join("build-report.json")).unwrap();
    assert!(report.contains("31 thumbnail(s) in the cache"), "{report}");
    assert!(report.contains("were damaged"), "{report}");
    assert_eq!(build("mended", Some("cache")), (0, 31));
}

/// Links in a loop inside `--images` (two links to the folder itself, one to its parent's view of
/// it) used to send the walk on forever; each folder is now walked once. The build is given a
/// deadline so that the old behaviour fails the test instead of hanging it.
#[cfg(unix)]
#[test]
fn links_in_a_loop_in_the_images_folder_are_walked_once() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let img = d.join("images");
    std::fs::create_dir_all(img.join("sub")).unwrap();
    let n = 6;
    for i in 0..n {
        let at = if i % 2 == 0 {
            img.join(format!("p{i}.png"))
        } else {
            img.join(format!("sub/p{i}.png"))
        };
        image::RgbImage::from_pixel(20, 10 + i as u32, image::Rgb([40 * i as u8, 90, 200]))
            .save(at)
            .unwrap();
    }
    std::os::unix::fs::symlink(".", img.join("a")).unwrap();
    std::os::unix::fs::symlink(".", img.join("b")).unwrap();
    std::os::unix::fs::symlink("../../images", img.join("sub/up")).unwrap();
    common::write_small_inputs(d, &(0..n).map(|i| format!("p{i}")).collect::<Vec<_>>());
    let mut child = common::image_build(d)
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    let deadline = std::time::Instant::now() + std::time::Duration::from_secs(60);
    let status = loop {
        if let Some(s) = child.try_wait().unwrap() {
            break s;
        }
        if std::time::Instant::now() > deadline {
            child.kill().unwrap();
            panic!("the build was still walking the images folder after 60 s");
        }
        std::thread::sleep(std::time::Duration::from_millis(50));
    };
    let mut err = String::new();
    child
        .stderr
        .take()
        .unwrap()
        .read_to_string(&mut err)
        .unwrap();
    assert!(status.success(), "{err}");
    let r: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("atlas/build-report.json")).unwrap())
            .unwrap();
    assert_eq!(r["thumbnails_made"], n as u64, "{r}");
}

/// A crafted atlas whose sheet level has 65,536 x 65,536 cells (the product wraps to 0 in u32,
/// which a reader would divide by) is refused when opened, naming the level.
#[test]
fn a_sheet_level_larger_than_a_jpeg_can_be_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::create_dir_all(d.join("images")).unwrap();
    for i in 0..4 {
        image::RgbImage::from_pixel(16, 12, image::Rgb([60 * i as u8, 90, 200]))
            .save(d.join(format!("images/p{i}.png")))
            .unwrap();
    }
    common::write_small_inputs(d, &(0..4).map(|i| format!("p{i}")).collect::<Vec<_>>());
    let o = common::image_build(d).output().unwrap();
    assert!(o.status.success(), "{}", stderr(&o));
    let inspect = || {
        common::vitrine()
            .arg("inspect")
            .arg(d.join("atlas"))
            .output()
            .unwrap()
    };
    assert!(inspect().status.success(), "{}", stderr(&inspect()));
    let path = d.join("atlas/atlas.json");
    let mut m: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&path).unwrap()).unwrap();
    let level = &mut m["sheets"]["levels"][0];
    level["columns"] = 65_536.into();
    level["rows"] = 65_536.into();
    std::fs::write(&path, m.to_string()).unwrap();
    let o = inspect();
    assert!(!o.status.success());
    assert!(stderr(&o).contains("is not a sheet"), "{}", stderr(&o));
}

#[test]
fn approximate_graph_records_how_the_search_ran() {
    // Points of an isotropic Gaussian in 32 dimensions (Box-Muller on a fixed pseudo-random
    // sequence), where neighbours of neighbours are poor guides: NN-descent's recall check falls
    // short after the first rounds and the lists are widened. The atlas keeps the search's
    // settings, its rounds and widenings, and the recall before and after. A small collection of
    // 300 points in 8 dimensions needs no widening and records none.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let mut x = 12345u64;
    let mut uniform = move || {
        x = x
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        ((x >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    };
    let mut gaussian = move || {
        let (u, v) = (uniform(), uniform());
        ((-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()) as f32
    };
    for (name, n, dims) in [("gauss", 4000usize, 32usize), ("small", 300, 8)] {
        let data: Vec<f32> = (0..n * dims).map(|_| gaussian()).collect();
        let v = d.join(format!("{name}.npy"));
        write_npy_f32(&v, n, dims, &data).unwrap();
        let out = d.join(name);
        let o = common::quick_build()
            .args(["--metric", "euclidean"])
            .args(["--neighbours", "approximate", "--vectors"])
            .arg(&v)
            .arg("--out")
            .arg(&out)
            .output()
            .unwrap();
        assert!(o.status.success(), "{name}: {}", stderr(&o));
        let a = Atlas::open(&out).unwrap();
        let p = &a.manifest.provenance.parameters;
        let q = &a.manifest.quality;
        assert_eq!(p["neighbour_search"], "nn-descent");
        assert_eq!(p["nn_descent_trees"], 4, "{name}");
        assert_eq!(p["nn_descent_min_recall"], 0.96, "{name}");
        let k = a.manifest.neighbours.k as u64;
        let widenings = p["nn_descent_widenings"].as_u64().unwrap();
        let length = p["nn_descent_list_length"].as_u64().unwrap();
        let last = q["neighbour_recall"].as_f64().unwrap();
        if name == "gauss" {
            assert_eq!((widenings, length), (1, k + k.div_ceil(2)), "{p:?}");
            let first = q["neighbour_recall_before_widening"].as_f64().unwrap();
            assert!(first < 0.96 && last > first, "before {first}, after {last}");
        } else {
            assert_eq!((widenings, length), (0, k), "{p:?}");
            assert!(last >= 0.96, "{q:?}");
            assert!(q.get("neighbour_recall_before_widening").is_none(), "{q:?}");
        }
    }
}

/// A catalogue as an older spreadsheet exports it: semicolons, Windows-1252 text, ISO year-months.
#[test]
fn a_semicolon_separated_windows_1252_catalogue_is_read_and_said_so() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let n = 40;
    common::write_vectors(d, n);
    let mut csv: Vec<u8> = b"id;place;dating\r\n".to_vec();
    for i in 0..n {
        // "Düsseldorf" and "Köln" in Windows-1252 (0xFC, 0xF6); ISO year and month datings.
        let place: &[u8] = if i % 2 == 0 {
            b"D\xfcsseldorf"
        } else {
            b"K\xf6ln"
        };
        csv.extend(format!("r{i};").as_bytes());
        csv.extend(place);
        csv.extend(format!(";19{:02}-{:02}\r\n", 10 + i, 1 + i % 12).as_bytes());
    }
    std::fs::write(d.join("records.csv"), &csv).unwrap();
    let o = common::catalogue_build(d, "records.csv", "atlas")
        .output()
        .unwrap();
    let notes = common::notes_of(&o);
    assert!(
        notes.contains("separated by semicolons, found; Windows-1252 text, found"),
        "{notes}"
    );
    let atlas = Atlas::open(&d.join("atlas")).unwrap();
    let m = &atlas.manifest;
    let place = m.fields.iter().find(|f| f.name == "place").unwrap();
    assert_eq!(place.values, ["Düsseldorf", "Köln"]);
    let dating = m.fields.iter().find(|f| f.name == "dating").unwrap();
    assert_eq!(dating.kind, vitrine_format::FieldKind::Date);
    // 1910-01 is January 1910, not 1910-2001.
    let (start, end): (Vec<i32>, Vec<i32>) = (
        atlas.array(&dating.column).unwrap(),
        atlas.array(dating.column2.as_ref().unwrap()).unwrap(),
    );
    assert!(start
        .iter()
        .zip(&end)
        .all(|(s, e)| s == e && (1910..1950).contains(s)));
    let report = std::fs::read_to_string(d.join("atlas/build-report.json")).unwrap();
    assert!(
        report.contains("records.csv is not UTF-8 text: it was read as Windows-1252"),
        "{report}"
    );
    // Named, the delimiter and encoding are taken as given (and kept in the provenance).
    let o = common::catalogue_build(d, "records.csv", "atlas2")
        .args([
            "--delimiter",
            "semicolon",
            "--catalogue-encoding",
            "latin-1",
        ])
        .output()
        .unwrap();
    assert!(common::notes_of(&o).contains("semicolons, as given; Windows-1252 text, as given"));
    let m = Atlas::open(&d.join("atlas2")).unwrap().manifest;
    assert_eq!(m.provenance.parameters["catalogue_delimiter"], ";");
    assert_eq!(
        m.provenance.parameters["catalogue_encoding"],
        "Windows-1252"
    );
    // Asked to read UTF-8, the file is refused at its first line that is not.
    let o = common::vitrine()
        .current_dir(d)
        .args([
            "build",
            "--vectors",
            "vectors.npy",
            "--catalogue",
            "records.csv",
        ])
        .args(["--catalogue-encoding", "utf-8", "--out", "atlas3"])
        .output()
        .unwrap();
    let said = common::failure_of(&o);
    assert!(
        said.contains("records.csv") && said.contains("line 2 is not UTF-8"),
        "{said}"
    );
}

/// A catalogue kept as a spreadsheet workbook, written by openpyxl (from the package registry):
/// its first sheet by default, another by --sheet, a missing one named with the sheets there are.
#[test]
fn a_spreadsheet_workbook_is_read_sheet_by_sheet() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let n = 30;
    common::write_vectors(d, n);
    common::run_python(
        r#"
import sys, datetime, openpyxl
wb = openpyxl.Workbook()
ws = wb.active
ws.title = "Records"
ws.append(["id", "place", "dating", "height_cm"])
for i in range(30):
    ws.append([i, "Düsseldorf" if i % 2 else "Köln", datetime.datetime(1900 + i, 4, 5), 30.0 if i % 3 else 27.5])
other = wb.create_sheet("Loans")
other.append(["id", "lender"])
for i in range(30):
    other.append([i, "Kunstkammer Calvessa"])
wb.save(f"{sys.argv[1]}/records.xlsx")
"#,
        &[d],
    );
    let build = |out: &str, extra: &[&str]| {
        common::catalogue_build(d, "records.xlsx", out)
            .args(extra)
            .output()
            .unwrap()
    };
    let notes = common::notes_of(&build("atlas", &[]));
    assert!(
        notes.contains("from records.xlsx (sheet \"Records\")"),
        "{notes}"
    );
    let atlas = Atlas::open(&d.join("atlas")).unwrap();
    let m = &atlas.manifest;
    let place = m.fields.iter().find(|f| f.name == "place").unwrap();
    let mut places = place.values.clone();
    places.sort();
    assert_eq!(places, ["Düsseldorf", "Köln"]);
    let dating = m.fields.iter().find(|f| f.name == "dating").unwrap();
    assert_eq!(dating.kind, vitrine_format::FieldKind::Date);
    let written = atlas
        .text(
            &dating.written.as_ref().unwrap()[0],
            &dating.written.as_ref().unwrap()[1],
        )
        .unwrap();
    let ids = atlas.ids().unwrap();
    let k = (0..n).find(|&k| ids.get(k) == "7").unwrap();
    assert_eq!(written.get(k), "1907-04-05", "a date cell as ISO 8601");
    let height = m.fields.iter().find(|f| f.name == "height_cm").unwrap();
    let hw = atlas
        .text(
            &height.written.as_ref().unwrap()[0],
            &height.written.as_ref().unwrap()[1],
        )
        .unwrap();
    assert_eq!(hw.get(k), "30", "a whole number without a spurious .0");
    // Another sheet, named.
    common::notes_of(&build("loans", &["--sheet", "Loans"]));
    let loans = Atlas::open(&d.join("loans")).unwrap().manifest;
    assert!(loans.fields.iter().any(|f| f.name == "lender"));
    assert_eq!(loans.provenance.parameters["catalogue_sheet"], "Loans");
    // A sheet that is not there: named, with the ones that are.
    let said = common::failure_of(&build("none", &["--sheet", "Inventory"]));
    assert!(
        said.contains("records.xlsx")
            && said.contains("\"Inventory\"")
            && said.contains("Records, Loans"),
        "{said}"
    );
}

/// The same inputs built whole (format 2) and tiled (format 3, at most 8 items a tile): the tiled
/// atlas checks (every chunk against its checksum), holds the same records at the same places,
/// and answers a filter and a full export as the whole one does; a damaged chunk is named.
#[test]
fn a_tiled_atlas_holds_the_same_records_and_answers_as_one_fetched_whole() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    fixture(d, true);
    for (out, extra) in [("whole", vec![]), ("tiled", vec!["--tile-items", "8"])] {
        let mut args = vec!["--images", "images"];
        args.extend(extra);
        let o = build(d, out, &args);
        assert!(o.status.success(), "{}", stderr(&o));
    }
    let whole = Atlas::open(&d.join("whole")).unwrap();
    let tiled = Atlas::open(&d.join("tiled")).unwrap();
    assert_eq!(whole.manifest.format_version, 2);
    assert_eq!(tiled.manifest.format_version, 3);
    let t = tiled.manifest.tiles.as_ref().unwrap();
    let runs = t.runs();
    assert!(runs.len() >= 8, "{} leaves", runs.len());
    assert!(runs.iter().all(|[a, b]| b - a <= 8));
    // The ids are stored by leaf: no whole file, a chunk per leaf.
    assert!(!d.join("tiled").join(&tiled.manifest.ids.file).exists());
    let chunk = vitrine_format::tiles::chunk_file(&tiled.manifest.ids_text.file, 0);
    assert!(d.join("tiled").join(&chunk).exists());
    for t in 0..t.pyramid.tiles.len() {
        assert!(d
            .join("tiled")
            .join(vitrine_format::tiles::overview_file(t))
            .exists());
    }
    let o = common::vitrine()
        .args(["inspect", d.join("tiled").to_str().unwrap()])
        .output()
        .unwrap();
    assert!(common::stdout_of(&o).contains("version 3"));

    // Each record at the same place on the similarity map, whatever the order.
    let place = |a: &Atlas| -> std::collections::BTreeMap<String, [u32; 2]> {
        let ids = a.ids().unwrap();
        let sim = a.manifest.maps.iter().find(|m| m.name == "similarity");
        let xy: Vec<f32> = a.array(&sim.unwrap().positions).unwrap();
        (0..ids.len())
            .map(|i| {
                (
                    ids.get(i).to_string(),
                    [xy[2 * i].to_bits(), xy[2 * i + 1].to_bits()],
                )
            })
            .collect()
    };
    assert_eq!(place(&whole), place(&tiled));
    assert_ne!(
        whole.ids().unwrap().utf8,
        tiled.ids().unwrap().utf8,
        "leaf order is another order"
    );

    // Every record exported as catalogued, and a filter, give the same answers.
    let rows = |name: &str| {
        let (h, mut r) = common::every_row(&d.join(name), &d.join(format!("{name}.csv")));
        r.sort();
        (h, r)
    };
    assert_eq!(rows("whole"), rows("tiled"));
    // A filter, and a lasso over the left part of the map (a triangle: edges cross tiles), keep
    // the same records.
    let b = whole.manifest.maps[0].bounds;
    let (w, h) = (b[2] - b[0], b[3] - b[1]);
    let lasso = format!(
        "{},{} {},{} {},{}",
        b[0] - w,
        b[1] - h,
        b[0] + 0.6 * w,
        b[1] + 0.5 * h,
        b[0] - w,
        b[3] + h
    );
    let kept = |name: &str, args: &[&str]| {
        let csv = d.join(format!("{name}-kept.csv"));
        let o = common::vitrine()
            .current_dir(d)
            .args(["corpus", name])
            .args(args)
            .arg("--csv")
            .arg(&csv)
            .arg("--force")
            .output()
            .unwrap();
        common::notes_of(&o);
        let mut v: Vec<String> = csv::Reader::from_path(&csv)
            .unwrap()
            .records()
            .map(|r| r.unwrap()[0].to_string())
            .collect();
        v.sort();
        v
    };
    let birch = kept("whole", &["--filter", "workshop=Workshop Birch"]);
    assert_eq!(birch.len(), 20);
    assert_eq!(
        birch,
        kept("tiled", &["--filter", "workshop=Workshop Birch"])
    );
    let inside = kept("whole", &["--map", "similarity", "--lasso", &lasso]);
    assert!(!inside.is_empty() && inside.len() < 60, "{}", inside.len());
    assert_eq!(
        inside,
        kept("tiled", &["--map", "similarity", "--lasso", &lasso])
    );

    // A manifest edited by hand: its version, or a tile's count, no longer fits.
    let path = d.join("tiled").join("atlas.json");
    let text = std::fs::read_to_string(&path).unwrap();
    let edited = |edit: &dyn Fn(&mut serde_json::Value)| {
        let mut v: serde_json::Value = serde_json::from_str(&text).unwrap();
        edit(&mut v);
        std::fs::write(&path, v.to_string()).unwrap();
        let o = common::vitrine()
            .args(["inspect", d.join("tiled").to_str().unwrap()])
            .output()
            .unwrap();
        stderr(&o)
    };
    let e = edited(&|v| v["format_version"] = 2.into());
    assert!(e.contains("format 2 atlas with tiles"), "{e}");
    let e = edited(&|v| {
        let c = v["tiles"]["pyramid"]["tiles"][1]["count"].as_u64().unwrap();
        v["tiles"]["pyramid"]["tiles"][1]["count"] = (c + 1).into();
    });
    assert!(e.contains("tile pyramid"), "{e}");
    std::fs::write(&path, &text).unwrap();

    // One chunk damaged: named.
    let f = d.join("tiled").join(&chunk);
    let mut bytes = std::fs::read(&f).unwrap();
    bytes[0] ^= 0x20;
    std::fs::write(&f, bytes).unwrap();
    let o = common::vitrine()
        .args(["inspect", d.join("tiled").to_str().unwrap()])
        .output()
        .unwrap();
    assert!(!o.status.success());
    assert!(stderr(&o).contains(&chunk), "{}", stderr(&o));
}
