//! `vitrine build --iiif`: a Presentation 3 Collection holding 3.0 and 2.1 Manifests, served on
//! 127.0.0.1 by tests/iiif/serve.py (invented content; Image API 3.0 and 2.1 services, a level 0
//! and a level 1 service, a busy and a crowded server, a lost image, a Manifest that does not
//! exist).

mod common;

use std::io::{BufRead, BufReader};
use std::path::Path;
use std::process::{Child, Command, Stdio};

/// The fixture server, stopped when dropped.
struct Server {
    child: Child,
    base: String,
}

impl Drop for Server {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

fn serve() -> Server {
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../tests/iiif/serve.py");
    let mut child = Command::new(vitrine_test_support::python())
        .arg(script)
        .stdout(Stdio::piped())
        .spawn()
        .expect("python runs");
    let mut line = String::new();
    BufReader::new(child.stdout.take().unwrap())
        .read_line(&mut line)
        .unwrap();
    let port: u16 = line.trim().parse().expect("the server prints its port");
    Server {
        child,
        base: format!("http://127.0.0.1:{port}"),
    }
}

/// Every request the server has had, in order.
fn requests(s: &Server) -> Vec<String> {
    let body = ureq_get(&format!("{}/_log", s.base));
    serde_json::from_str(&body).unwrap()
}

fn ureq_get(url: &str) -> String {
    // The standard library has no HTTP client; the log is one small JSON answer.
    use std::io::{Read, Write};
    let rest = url.strip_prefix("http://").unwrap();
    let (host, path) = rest.split_once('/').unwrap();
    let mut c = std::net::TcpStream::connect(host).unwrap();
    write!(
        c,
        "GET /{path} HTTP/1.0\r\nHost: {host}\r\nConnection: close\r\n\r\n"
    )
    .unwrap();
    let mut all = String::new();
    c.read_to_string(&mut all).unwrap();
    all.split_once("\r\n\r\n").unwrap().1.to_string()
}

fn build(d: &Path, source: &str, out: &str) -> std::process::Output {
    common::vitrine()
        .current_dir(d)
        .args(["build", "--epochs", "30", "--levels", "32,64"])
        .args(["--iiif", source, "--iiif-cache", "iiif-cache"])
        .args(["--thumb-cache", "thumbs", "--out", out])
        .output()
        .unwrap()
}

#[test]
fn a_collection_becomes_an_atlas_with_its_records_and_pictures_fetched_politely() {
    let server = serve();
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let o = build(d, &format!("{}/collection.json", server.base), "atlas");
    let notes = common::notes_of(&o);
    // 6 Canvases (3.0) + 4 (2.1, through a nested 2.1 Collection) + 8 (awkward) = 18.
    assert!(notes.contains("IIIF: 18 Canvases"), "{notes}");
    assert!(notes.contains("missing.json: HTTP 404"), "{notes}");
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.join("atlas/build-report.json")).unwrap())
            .unwrap();
    assert_eq!(report["items"], 18);
    // The lost image is a placeholder, named with the addresses tried and the answer.
    let problems = report["image_problems"].as_array().unwrap();
    assert_eq!(problems.len(), 1, "{problems:?}");
    let p = problems[0].to_string();
    assert!(
        p.contains("/gone/c4/full/!64,64/0/default.jpg: HTTP 404"),
        "{p}"
    );
    let log = requests(&server);
    // Never the whole master (1200 x 800): every size asked for, parsed, is a small one.
    for r in log.iter().filter(|r| r.contains("/full/")) {
        let size = r.split('/').nth(4).unwrap();
        let small = size
            .trim_start_matches('!')
            .split(',')
            .all(|n| n.is_empty() || n.parse::<u32>().is_ok_and(|n| n <= 600));
        assert!(small, "{r} asks for a large picture");
    }
    // Sized requests for the thumbnails' largest level, of both API versions.
    assert!(log.contains(&"/img3/a0/full/!64,64/0/default.jpg".to_string()));
    assert!(log.contains(&"/img2/b0/full/!64,64/0/default.jpg".to_string()));
    // Level 0: straight to the sizes info.json lists, the smallest of at least 64 px.
    assert!(log.contains(&"/lvl0/c0/info.json".to_string()));
    assert!(log.contains(&"/lvl0/c0/full/150,100/0/default.jpg".to_string()));
    assert!(
        !log.iter().any(|r| r.starts_with("/lvl0/c0/full/!")),
        "{log:?}"
    );
    // Level 1: a size by width (the picture is wider than high), no fitted size.
    assert!(log.contains(&"/lvl1/c6/full/64,/0/default.jpg".to_string()));
    assert!(
        !log.iter().any(|r| r.starts_with("/lvl1/c6/full/!")),
        "{log:?}"
    );
    // Too many requests (429, Retry-After: 1): asked again after the pause.
    let crowd = log
        .iter()
        .filter(|r| r.starts_with("/crowd/c7/full/"))
        .count();
    assert_eq!(crowd, 2, "{log:?}");
    // A busy server: answered 503 twice, asked again, served the third time.
    let flaky = log
        .iter()
        .filter(|r| r.starts_with("/flaky/c5/full/"))
        .count();
    assert_eq!(flaky, 3, "{log:?}");
    // A Canvas without a service: its whole (only) picture.
    assert!(log.contains(&"/static/c3.jpg".to_string()));

    // The catalogue the Canvases give.
    let (header, rows) = common::every_row(&d.join("atlas"), &d.join("all.csv"));
    let col = |name: &str| {
        header
            .iter()
            .position(|h| h == name)
            .unwrap_or_else(|| panic!("{name} in {header:?}"))
    };
    let row = |canvas: &str| {
        rows.iter()
            .find(|r| r[0] == format!("{}{canvas}", server.base))
            .unwrap_or_else(|| panic!("{canvas}"))
    };
    let a0 = row("/p3/canvas/a0");
    assert_eq!(a0[col("title")], "Harbour view 1");
    assert_eq!(a0[col("summary")], "Glass negative, retouched & varnished");
    assert_eq!(a0[col("date")], "1920-01-01");
    assert_eq!(a0[col("Maker")], "Ilse Varnholt");
    assert_eq!(a0[col("Place")], "Korvenstadt");
    assert_eq!(
        a0[col("rights")],
        "http://creativecommons.org/licenses/by/4.0/"
    );
    assert_eq!(
        a0[col("required_statement")],
        "Attribution: Fictional Photo Archive of Korvenstadt"
    );
    assert_eq!(a0[col("manifest")], "Harbour negatives");
    assert_eq!(a0[col("iiif_service")], format!("{}/img3/a0", server.base));
    assert_eq!(a0[col("iiif_image_service")], "ImageService3 level2");
    // 2.1: plain labels, the English of tagged values, the Manifest's description, attribution,
    // licence and navDate for its Canvases.
    let b1 = row("/p2/canvas/b1");
    assert_eq!(b1[col("title")], "Workshop interior 2");
    assert_eq!(b1[col("Maker")], "Amsel workshop");
    assert_eq!(
        b1[col("summary")],
        "Prints of a workshop, invented for the tests"
    );
    assert_eq!(b1[col("date")], "1931-01-01");
    assert_eq!(
        b1[col("required_statement")],
        "Fictional Print Room of Lindau am See"
    );
    assert_eq!(
        b1[col("iiif_image_service")],
        "ImageService2 http://iiif.io/api/image/2/level2.json"
    );

    // The record card's image size is the Canvas's (the master's), not the fetched picture's.
    let atlas = vitrine_build::read::Atlas::open(&d.join("atlas")).unwrap();
    let sheets = atlas.manifest.sheets.as_ref().expect("sheets");
    let sizes: Vec<u32> = atlas
        .array(sheets.image_sizes.as_ref().expect("image sizes"))
        .unwrap();
    let known: Vec<&[u32]> = sizes.chunks(2).filter(|s| s[0] > 0).collect();
    assert_eq!(known.len(), 17, "every picture but the lost one");
    assert!(known.iter().all(|s| *s == [1200, 800]), "{known:?}");

    // The provenance names the source.
    let inputs = &atlas.manifest.provenance.inputs;
    assert!(
        inputs
            .iter()
            .any(|i| i.role.starts_with("IIIF source") && i.path.ends_with("/collection.json")),
        "{inputs:?}"
    );

    // A second build fetches no picture again: they are in the cache (resumable).
    let before = requests(&server).len();
    let o = build(d, &format!("{}/collection.json", server.base), "again");
    assert!(o.status.success(), "{}", common::notes_of(&o));
    let after = requests(&server);
    let new: Vec<&String> = after[before..]
        .iter()
        .filter(|r| !r.ends_with(".json") && *r != "/_log")
        .collect();
    // Only the lost image is asked for again (it never arrived).
    assert!(new.iter().all(|r| r.starts_with("/gone/")), "{new:?}");
}

#[test]
fn a_paged_collection_is_read_page_by_page() {
    let server = serve();
    let dir = tempfile::tempdir().unwrap();
    let o = build(
        dir.path(),
        &format!("{}/p2/paged.json", server.base),
        "atlas",
    );
    let notes = common::notes_of(&o);
    // Page 1 holds the 2.1 Manifest (4 Canvases), page 2 (its `next`) the 3.0 one (6).
    assert!(notes.contains("IIIF: 10 Canvases"), "{notes}");
}

#[test]
fn an_unreachable_or_wrong_source_is_refused_naming_it() {
    let server = serve();
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let url = format!("{}/nothing.json", server.base);
    let o = build(d, &url, "atlas");
    assert!(!o.status.success());
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains(&url) && err.contains("HTTP 404"), "{err}");
    assert!(!d.join("atlas").exists());
    // An Image API info.json is not a Manifest or Collection.
    let url = format!("{}/img3/a0/info.json", server.base);
    let o = build(d, &url, "atlas");
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("not an IIIF Manifest or Collection"), "{err}");
    // A local file works as the source too, and --iiif replaces --catalogue and --images.
    std::fs::write(d.join("m.json"), "{\"type\": \"Manifest\", \"items\": []}").unwrap();
    let o = build(d, "m.json", "atlas");
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("no Canvas with a picture"), "{err}");
    let o = common::vitrine()
        .current_dir(d)
        .args(["build", "--iiif", "m.json", "--images", ".", "--out", "x"])
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("leave out --catalogue and --images"), "{err}");
}
