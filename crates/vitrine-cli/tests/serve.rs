//! `vitrine serve` under load and hostile clients, driven from Python's standard library
//! (tests/serve_load.py): RFC 9110 validators and ranges, oversized heads, a client that drips its
//! request, 2,000 idle connections beside 50 fetching clients, an address-space limit.

mod common;

use std::io::BufRead;
use std::path::Path;

#[cfg(target_os = "linux")]
#[test]
fn serve_stays_up_and_answers_under_load_and_hostile_clients() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::create_dir_all(d.join("images")).unwrap();
    let n = 40;
    for i in 0..n {
        image::RgbImage::from_fn(60, 40, |x, y| {
            image::Rgb([(x * 4 + i) as u8, (y * 6) as u8, (i * 5) as u8])
        })
        .save(d.join(format!("images/p{i:02}.png")))
        .unwrap();
    }
    common::write_small_inputs(d, &(0..n).map(|i| format!("p{i:02}")).collect::<Vec<_>>());
    // Small sheets, so that the atlas has several sheet files to fetch.
    let o = common::image_build(d)
        .args(["--levels", "16,64", "--sheet-size", "64"])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let mut server = common::vitrine()
        .args(["serve", "atlas", "--port", "0"])
        .current_dir(d)
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::null())
        .spawn()
        .unwrap();
    let mut line = String::new();
    std::io::BufReader::new(server.stdout.take().unwrap())
        .read_line(&mut line)
        .unwrap();
    let url = line
        .split(" at ")
        .nth(1)
        .unwrap()
        .split_whitespace()
        .next()
        .unwrap()
        .to_string();
    let pid = server.id().to_string();
    let atlas = d.join("atlas");
    let got = common::run_python(
        include_str!("serve_load.py"),
        &[
            Path::new(&url),
            Path::new(&pid),
            &atlas,
            Path::new(env!("CARGO_BIN_EXE_vitrine")),
        ],
    );
    let alive = server.try_wait().unwrap().is_none();
    server.kill().unwrap();
    let r: serde_json::Value = serde_json::from_str(&got).unwrap();
    eprintln!("{r}");
    assert!(alive, "the server died");
    let j = |v: serde_json::Value| v;
    assert_eq!(r["whole"], j(serde_json::json!([200, true, "bytes"])));
    assert_eq!(r["last_modified_is_mtime"], true);
    assert_eq!(r["if_none_match"], serde_json::json!([304, 0]));
    assert_eq!(r["if_modified_since"], serde_json::json!([304, 0]));
    assert_eq!(r["range"], serde_json::json!([206, true, true]));
    assert_eq!(r["suffix_range"], serde_json::json!([206, true]));
    assert_eq!(r["unsatisfiable"], serde_json::json!([416, true]));
    assert_eq!(r["stale_if_range"], serde_json::json!([200, true]));
    assert_eq!(r["head_range"], serde_json::json!([206, 0]));
    assert_eq!(r["long_line"], 414);
    assert_eq!(r["long_header"], 431);
    assert_eq!(r["many_headers"], 431);
    assert_eq!(r["chunked_body"], 400);
    assert_eq!(r["bad_length"], 400);
    // Load: every fetch answered, none slower than a second, the memory and threads bounded.
    assert_eq!(r["idle_opened"], 2000);
    assert_eq!(r["fetches"], 400);
    assert_eq!(r["all_200"], true);
    assert!(r["slowest_fetch_s"].as_f64().unwrap() < 1.0, "{r}");
    assert!(r["server_rss_mib"].as_f64().unwrap() < 100.0, "{r}");
    assert!(r["server_threads_loaded"].as_u64().unwrap() <= 260, "{r}");
    assert!(r["server_threads_after"].as_u64().unwrap() <= 2, "{r}");
    // The dripping client is cut at the head's deadline (10 s from its first byte).
    let cut = r["cut_after_s"].as_f64().unwrap();
    assert!((9.0..14.0).contains(&cut), "cut after {cut} s");
    assert_eq!(r["limited_alive"], true);
}
