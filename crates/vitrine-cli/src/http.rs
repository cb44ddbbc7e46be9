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

/// Serves `root` on host:port until the process ends; `on_ready` gets the address. Every connection
/// has its own thread and keeps alive (HTTP/1.1), as a static host does: one slow or stalled
/// download never holds up the others.
pub fn serve(
    root: &Path,
    host: &str,
    port: u16,
    on_ready: impl FnOnce(&str),
) -> anyhow::Result<()> {
    let listener = std::net::TcpListener::bind((host, port))
        .map_err(|e| anyhow::anyhow!("cannot listen on {host}:{port}: {e}"))?;
    on_ready(&format!("http://{}/", listener.local_addr()?));
    let root = std::sync::Arc::new(root.to_path_buf());
    for stream in listener.incoming() {
        let Ok(stream) = stream else { continue };
        let root = root.clone();
        std::thread::spawn(move || {
            let _ = connection(stream, &root);
        });
    }
    Ok(())
}

/// The longest request line or header line read, and the most header lines.
const MAX_LINE: u64 = 16 * 1024;
const MAX_HEADERS: usize = 100;

/// Answers the requests of one connection in turn until the client closes it or asks to.
fn connection(stream: std::net::TcpStream, root: &Path) -> std::io::Result<()> {
    use std::io::{BufRead, BufReader, BufWriter, Read, Write};
    stream.set_read_timeout(Some(std::time::Duration::from_secs(120)))?;
    let _ = stream.set_nodelay(true);
    let mut reader = BufReader::new(stream.try_clone()?);
    let mut out = BufWriter::with_capacity(256 * 1024, stream);
    let mut line = String::new();
    loop {
        line.clear();
        if (&mut reader).take(MAX_LINE).read_line(&mut line)? == 0 {
            return Ok(());
        }
        let request = line.trim_end().to_string();
        if request.is_empty() {
            continue;
        }
        let mut parts = request.split(' ');
        let (method, target, version) = (
            parts.next().unwrap_or(""),
            parts.next().unwrap_or(""),
            parts.next().unwrap_or(""),
        );
        let mut close = version != "HTTP/1.1";
        let mut body = 0u64;
        for n in 0.. {
            line.clear();
            if (&mut reader).take(MAX_LINE).read_line(&mut line)? == 0 {
                return Ok(());
            }
            let header = line.trim_end();
            if header.is_empty() {
                break;
            }
            if n == MAX_HEADERS {
                return respond(
                    &mut out,
                    431,
                    "text/plain",
                    b"too many headers",
                    false,
                    true,
                );
            }
            if let Some((name, value)) = header.split_once(':') {
                let value = value.trim();
                if name.eq_ignore_ascii_case("connection") {
                    close = value.eq_ignore_ascii_case("close")
                        || (close && !value.eq_ignore_ascii_case("keep-alive"));
                } else if name.eq_ignore_ascii_case("content-length") {
                    body = value.parse().unwrap_or(0);
                }
            }
        }
        // A request body (none is expected) is read and dropped.
        std::io::copy(&mut (&mut reader).take(body), &mut std::io::sink())?;
        let head = method == "HEAD";
        if method != "GET" && !head {
            respond(
                &mut out,
                405,
                "text/plain",
                b"only GET and HEAD",
                head,
                close,
            )?;
        } else {
            match resolve(root, target).and_then(|f| std::fs::File::open(&f).ok().map(|o| (f, o))) {
                Some((file, mut opened)) => {
                    let len = opened.metadata()?.len();
                    write!(
                        out,
                        "HTTP/1.1 200 OK\r\nContent-Type: {}\r\nContent-Length: {len}\r\n\
                         Cache-Control: no-cache\r\nConnection: {}\r\n\r\n",
                        mime_type(&file),
                        if close { "close" } else { "keep-alive" }
                    )?;
                    if !head {
                        std::io::copy(&mut opened, &mut out)?;
                    }
                    out.flush()?;
                }
                None => respond(&mut out, 404, "text/plain", b"not found", head, close)?,
            }
        }
        if close {
            return Ok(());
        }
    }
}

fn respond(
    out: &mut impl std::io::Write,
    status: u16,
    content_type: &str,
    body: &[u8],
    head: bool,
    close: bool,
) -> std::io::Result<()> {
    let reason = match status {
        404 => "Not Found",
        405 => "Method Not Allowed",
        431 => "Request Header Fields Too Large",
        _ => "OK",
    };
    write!(
        out,
        "HTTP/1.1 {status} {reason}\r\nContent-Type: {content_type}\r\nContent-Length: {}\r\n\
         Connection: {}\r\n\r\n",
        body.len(),
        if close { "close" } else { "keep-alive" }
    )?;
    if !head {
        out.write_all(body)?;
    }
    out.flush()
}
