//! `vitrine serve DIR`: a static file server for an atlas, bound to 127.0.0.1 unless told otherwise.

use std::path::{Component, Path, PathBuf};

pub fn mime_type(path: &Path) -> &'static str {
    match path
        .extension()
        .and_then(|e| e.to_str())
        .map(|e| e.to_ascii_lowercase())
        .as_deref()
    {
        Some("html") | Some("htm") => "text/html; charset=utf-8",
        Some("js") | Some("mjs") => "text/javascript; charset=utf-8",
        Some("wasm") => "application/wasm",
        Some("json") => "application/json",
        Some("css") => "text/css; charset=utf-8",
        Some("jpg") | Some("jpeg") => "image/jpeg",
        Some("png") => "image/png",
        Some("webp") => "image/webp",
        Some("svg") => "image/svg+xml",
        Some("txt") | Some("csv") | Some("tsv") => "text/plain; charset=utf-8",
        Some("bin") => "application/octet-stream",
        _ => "application/octet-stream",
    }
}

/// Maps a request path to a file inside `root`, or None when it would leave `root`
/// (`..`, absolute paths, encoded separators, symbolic links pointing outside).
pub fn resolve(root: &Path, url_path: &str) -> Option<PathBuf> {
    let path = url_path.split(['?', '#']).next().unwrap_or("");
    let decoded = percent_decode(path)?;
    if decoded.contains('\0') || decoded.contains('\\') {
        return None;
    }
    let mut out = root.to_path_buf();
    for comp in Path::new(decoded.trim_start_matches('/')).components() {
        match comp {
            Component::Normal(c) => out.push(c),
            Component::CurDir => {}
            _ => return None,
        }
    }
    if out.is_dir() {
        out.push("index.html");
    }
    let real = out.canonicalize().ok()?;
    let real_root = root.canonicalize().ok()?;
    real.starts_with(&real_root).then_some(real)
}

fn percent_decode(s: &str) -> Option<String> {
    let b = s.as_bytes();
    let mut out = Vec::with_capacity(b.len());
    let mut i = 0;
    while i < b.len() {
        if b[i] == b'%' {
            let h = std::str::from_utf8(b.get(i + 1..i + 3)?).ok()?;
            out.push(u8::from_str_radix(h, 16).ok()?);
            i += 3;
        } else {
            out.push(b[i]);
            i += 1;
        }
    }
    String::from_utf8(out).ok()
}

pub fn serve(
    root: &Path,
    host: &str,
    port: u16,
    on_ready: impl FnOnce(&str),
) -> anyhow::Result<()> {
    let server = tiny_http::Server::http((host, port))
        .map_err(|e| anyhow::anyhow!("cannot listen on {host}:{port}: {e}"))?;
    let addr = server
        .server_addr()
        .to_ip()
        .map(|a| a.to_string())
        .unwrap_or_default();
    on_ready(&format!("http://{addr}/"));
    // A few workers, as a static host answers requests side by side: one slow or stalled
    // download never holds up the others.
    let server = std::sync::Arc::new(server);
    let workers: Vec<_> = (0..8)
        .map(|_| {
            let server = server.clone();
            let root = root.to_path_buf();
            std::thread::spawn(move || answer(&server, &root))
        })
        .collect();
    for w in workers {
        let _ = w.join();
    }
    Ok(())
}

fn answer(server: &tiny_http::Server, root: &Path) {
    while let Ok(request) = server.recv() {
        let method = request.method().clone();
        if method != tiny_http::Method::Get && method != tiny_http::Method::Head {
            let _ = request.respond(tiny_http::Response::empty(405));
            continue;
        }
        let Some(file) = resolve(root, request.url()) else {
            let _ = request
                .respond(tiny_http::Response::from_string("not found").with_status_code(404));
            continue;
        };
        match std::fs::File::open(&file) {
            Ok(f) => {
                let header = tiny_http::Header::from_bytes(
                    &b"Content-Type"[..],
                    mime_type(&file).as_bytes(),
                )
                .unwrap();
                let cache =
                    tiny_http::Header::from_bytes(&b"Cache-Control"[..], &b"no-cache"[..]).unwrap();
                let _ = request.respond(
                    tiny_http::Response::from_file(f)
                        .with_header(header)
                        .with_header(cache),
                );
            }
            Err(_) => {
                let _ = request
                    .respond(tiny_http::Response::from_string("not found").with_status_code(404));
            }
        }
    }
}
