//! `vitrine serve DIR`: a static file server for an atlas, bound to 127.0.0.1 unless told otherwise.
//!
//! One thread per connection (HTTP/1.1 keep-alive, as a static host does: one slow download never
//! holds up the others), within limits that keep the server up under many or hostile clients:
//! at most [`Limits::max_connections`] at once — a connection beyond them takes the place of the
//! one idle longest, or when none is idle gets a quick 503; a request's head must arrive within
//! [`Limits::head_deadline`] of its first byte and the next request within [`Limits::idle`]; a
//! client that stops reading is dropped after [`Limits::write_timeout`]; an idle connection holds
//! a small thread and an 8 KiB buffer, no more. Files are answered with `ETag` and
//! `Last-Modified` (a reload is a 304 per file), and single byte ranges (`Range`, `If-Range`).

use std::collections::HashMap;
use std::io::{BufRead, BufReader, Read, Seek, Write};
use std::net::TcpStream;
use std::path::{Component, Path, PathBuf};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant, SystemTime};

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

/// What the server allows; [`Limits::default`] is what `vitrine serve` uses.
#[derive(Debug, Clone)]
pub struct Limits {
    /// Connections held at once.
    pub max_connections: usize,
    /// From a request's first byte to the end of its head.
    pub head_deadline: Duration,
    /// How long a kept-alive connection may wait for its next request.
    pub idle: Duration,
    /// How long one write to a client may stall (a client that does not read).
    pub write_timeout: Duration,
}

impl Default for Limits {
    fn default() -> Limits {
        Limits {
            max_connections: 256,
            head_deadline: Duration::from_secs(10),
            idle: Duration::from_secs(15),
            write_timeout: Duration::from_secs(30),
        }
    }
}

/// Serves `root` on host:port until the process ends, with the default [`Limits`]; `on_ready`
/// gets the address.
pub fn serve(
    root: &Path,
    host: &str,
    port: u16,
    on_ready: impl FnOnce(&str),
) -> anyhow::Result<()> {
    serve_with(root, host, port, Limits::default(), on_ready)
}

/// The connections held: a handle on each (to close it when an idle one must make room) and
/// since when it has waited for a request (None while it is answering one).
#[derive(Default)]
struct Held {
    next: u64,
    conns: HashMap<u64, (TcpStream, Option<Instant>)>,
}

type Shared = Arc<Mutex<Held>>;

fn lock(h: &Shared) -> std::sync::MutexGuard<'_, Held> {
    h.lock().unwrap_or_else(|e| e.into_inner())
}

/// [`serve`] with other limits.
pub fn serve_with(
    root: &Path,
    host: &str,
    port: u16,
    limits: Limits,
    on_ready: impl FnOnce(&str),
) -> anyhow::Result<()> {
    let listener = std::net::TcpListener::bind((host, port))
        .map_err(|e| anyhow::anyhow!("cannot listen on {host}:{port}: {e}"))?;
    on_ready(&format!("http://{}/", listener.local_addr()?));
    let root = Arc::new(root.to_path_buf());
    let limits = Arc::new(limits);
    let held: Shared = Arc::default();
    for stream in listener.incoming() {
        let stream = match stream {
            Ok(s) => s,
            // Out of file descriptors or the like: wait a moment rather than spin.
            Err(_) => {
                std::thread::sleep(Duration::from_millis(20));
                continue;
            }
        };
        let Ok(handle) = stream.try_clone() else {
            continue;
        };
        let id = {
            let mut h = lock(&held);
            if h.conns.len() >= limits.max_connections {
                let oldest = h
                    .conns
                    .iter()
                    .filter_map(|(&id, (_, since))| since.map(|t| (t, id)))
                    .min();
                match oldest {
                    Some((_, id)) => {
                        if let Some((s, _)) = h.conns.remove(&id) {
                            let _ = s.shutdown(std::net::Shutdown::Both);
                        }
                    }
                    None => {
                        drop(h);
                        busy(stream);
                        continue;
                    }
                }
            }
            h.next += 1;
            let id = h.next;
            h.conns.insert(id, (handle, Some(Instant::now())));
            id
        };
        let (root, limits, mine) = (root.clone(), limits.clone(), held.clone());
        let started = std::thread::Builder::new()
            .name("vitrine-serve".into())
            .stack_size(256 * 1024)
            .spawn(move || {
                // The slot is given back however the connection ends (a panic included).
                struct Slot(Shared, u64);
                impl Drop for Slot {
                    fn drop(&mut self) {
                        lock(&self.0).conns.remove(&self.1);
                    }
                }
                let _slot = Slot(mine.clone(), id);
                let _ = connection(stream, &root, &limits, &mine, id);
            });
        // No thread to be had (memory or a process limit): the client hears so, the server goes on.
        if started.is_err() {
            if let Some((s, _)) = lock(&held).conns.remove(&id) {
                busy(s);
            }
        }
    }
    Ok(())
}

/// A quick 503 to a connection there is no room for, then closed.
fn busy(mut stream: TcpStream) {
    let _ = stream.set_write_timeout(Some(Duration::from_secs(1)));
    let _ = stream.write_all(
        b"HTTP/1.1 503 Service Unavailable\r\nContent-Type: text/plain\r\nContent-Length: 5\r\n\
          Retry-After: 1\r\nConnection: close\r\n\r\nbusy\n",
    );
}

/// The longest request line or header line read, and the most header lines.
const MAX_LINE: u64 = 16 * 1024;
const MAX_HEADERS: usize = 100;

/// A connection's reading side, each read bounded by a deadline.
struct Timed {
    stream: TcpStream,
    deadline: Instant,
}

impl Read for Timed {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let left = self.deadline.saturating_duration_since(Instant::now());
        if left.is_zero() {
            return Err(std::io::ErrorKind::TimedOut.into());
        }
        self.stream.set_read_timeout(Some(left))?;
        self.stream.read(buf)
    }
}

/// One line of a request's head.
enum Line {
    Text(String),
    TooLong,
    End,
}

fn read_line(r: &mut BufReader<Timed>) -> std::io::Result<Line> {
    let mut bytes = Vec::new();
    r.by_ref().take(MAX_LINE).read_until(b'\n', &mut bytes)?;
    Ok(if bytes.last() == Some(&b'\n') {
        Line::Text(String::from_utf8_lossy(&bytes).trim_end().to_string())
    } else if bytes.len() as u64 == MAX_LINE {
        Line::TooLong
    } else {
        Line::End
    })
}

/// The request headers the answer depends on.
#[derive(Default)]
struct Asked {
    close: bool,
    body: u64,
    range: Option<String>,
    if_range: Option<String>,
    if_none_match: Option<String>,
    if_modified_since: Option<String>,
}

/// Sends a refusal and closes the connection gracefully: the rest of what the client sent is
/// read (for a moment) before closing, so that the refusal is not lost to a reset.
fn refuse(out: &mut TcpStream, status: u16, body: &[u8]) -> std::io::Result<()> {
    respond(out, status, body, false, true)?;
    let _ = out.shutdown(std::net::Shutdown::Write);
    let _ = out.set_read_timeout(Some(Duration::from_millis(500)));
    let mut sink = [0u8; 16 * 1024];
    let mut left = 1 << 20;
    while left > 0 {
        match out.read(&mut sink) {
            Ok(0) | Err(_) => break,
            Ok(n) => left -= n.min(left),
        }
    }
    Ok(())
}

/// Answers the requests of one connection in turn until the client closes it or asks to, or a
/// limit ends it.
fn connection(
    stream: TcpStream,
    root: &Path,
    limits: &Limits,
    held: &Shared,
    id: u64,
) -> std::io::Result<()> {
    stream.set_write_timeout(Some(limits.write_timeout))?;
    let _ = stream.set_nodelay(true);
    let mut out = stream.try_clone()?;
    let mut reader = BufReader::with_capacity(
        8 * 1024,
        Timed {
            stream,
            deadline: Instant::now() + limits.idle,
        },
    );
    let set_idle = |idle: bool| {
        if let Some(c) = lock(held).conns.get_mut(&id) {
            c.1 = idle.then(Instant::now);
        }
    };
    loop {
        set_idle(true);
        reader.get_mut().deadline = Instant::now() + limits.idle;
        if reader.fill_buf()?.is_empty() {
            return Ok(());
        }
        set_idle(false);
        reader.get_mut().deadline = Instant::now() + limits.head_deadline;
        let request = match read_line(&mut reader)? {
            Line::Text(t) if t.is_empty() => continue,
            Line::Text(t) => t,
            Line::TooLong => return refuse(&mut out, 414, b"request line too long"),
            Line::End => return Ok(()),
        };
        let mut parts = request.split(' ');
        let (method, target, version) = (
            parts.next().unwrap_or(""),
            parts.next().unwrap_or(""),
            parts.next().unwrap_or(""),
        );
        let mut asked = Asked {
            close: version != "HTTP/1.1",
            ..Asked::default()
        };
        for n in 0.. {
            let header = match read_line(&mut reader)? {
                Line::Text(t) => t,
                Line::TooLong => return refuse(&mut out, 431, b"header line too long"),
                Line::End => return Ok(()),
            };
            if header.is_empty() {
                break;
            }
            if n == MAX_HEADERS {
                return refuse(&mut out, 431, b"too many headers");
            }
            if let Some((name, value)) = header.split_once(':') {
                let value = value.trim().to_string();
                let is = |h: &str| name.eq_ignore_ascii_case(h);
                if is("connection") {
                    asked.close = value.eq_ignore_ascii_case("close")
                        || (asked.close && !value.eq_ignore_ascii_case("keep-alive"));
                } else if is("content-length") {
                    // A length that cannot be read would leave the body to be read as the next
                    // request: refused, as is a body sent in chunks (no request here has one).
                    match value.parse() {
                        Ok(len) => asked.body = len,
                        Err(_) => return refuse(&mut out, 400, b"bad Content-Length"),
                    }
                } else if is("transfer-encoding") {
                    return refuse(&mut out, 400, b"request bodies are not accepted");
                } else if is("range") {
                    asked.range = Some(value);
                } else if is("if-range") {
                    asked.if_range = Some(value);
                } else if is("if-none-match") {
                    asked.if_none_match = Some(value);
                } else if is("if-modified-since") {
                    asked.if_modified_since = Some(value);
                }
            }
        }
        // A request body (none is expected) is read and dropped, within the head's deadline.
        std::io::copy(&mut reader.by_ref().take(asked.body), &mut std::io::sink())?;
        let head = method == "HEAD";
        if method != "GET" && !head {
            respond(&mut out, 405, b"only GET and HEAD", head, asked.close)?;
        } else {
            match resolve(root, target).and_then(|f| std::fs::File::open(&f).ok().map(|o| (f, o))) {
                Some((file, opened)) => send_file(&mut out, &file, opened, &asked, head)?,
                None => respond(&mut out, 404, b"not found", head, asked.close)?,
            }
        }
        if asked.close {
            return Ok(());
        }
    }
}

/// Answers with a file: whole (200), a byte range (206, RFC 9110 section 14), not modified
/// (304, section 13), or a range it does not hold (416).
fn send_file(
    out: &mut TcpStream,
    path: &Path,
    mut file: std::fs::File,
    asked: &Asked,
    head: bool,
) -> std::io::Result<()> {
    let meta = file.metadata()?;
    let len = meta.len();
    let modified = meta
        .modified()
        .ok()
        .and_then(|t| t.duration_since(SystemTime::UNIX_EPOCH).ok())
        .unwrap_or_default();
    let etag = format!("\"{len:x}-{:x}\"", modified.as_nanos());
    let last_modified = http_date(modified.as_secs());
    let connection = if asked.close { "close" } else { "keep-alive" };
    let common = format!(
        "ETag: {etag}\r\nLast-Modified: {last_modified}\r\nCache-Control: no-cache\r\n\
         Accept-Ranges: bytes\r\nX-Content-Type-Options: nosniff\r\nConnection: {connection}\r\n"
    );
    let not_modified = match (&asked.if_none_match, &asked.if_modified_since) {
        (Some(tags), _) => tags
            .split(',')
            .map(|t| t.trim().trim_start_matches("W/"))
            .any(|t| t == etag || t == "*"),
        (None, Some(since)) => *since == last_modified,
        _ => false,
    };
    if not_modified {
        write!(out, "HTTP/1.1 304 Not Modified\r\n{common}\r\n")?;
        return out.flush();
    }
    let range = asked
        .range
        .as_deref()
        .filter(|_| {
            asked
                .if_range
                .as_ref()
                .is_none_or(|v| *v == etag || *v == last_modified)
        })
        .and_then(|r| byte_range(r, len));
    let content_type = mime_type(path);
    let (from, count) = match range {
        Some(Ok((a, b))) => {
            write!(
                out,
                "HTTP/1.1 206 Partial Content\r\nContent-Type: {content_type}\r\n\
                 Content-Range: bytes {a}-{b}/{len}\r\nContent-Length: {}\r\n{common}\r\n",
                b - a + 1
            )?;
            (a, b - a + 1)
        }
        Some(Err(())) => {
            write!(
                out,
                "HTTP/1.1 416 Range Not Satisfiable\r\nContent-Range: bytes */{len}\r\n\
                 Content-Length: 0\r\n{common}\r\n"
            )?;
            return out.flush();
        }
        None => {
            write!(
                out,
                "HTTP/1.1 200 OK\r\nContent-Type: {content_type}\r\nContent-Length: {len}\r\n{common}\r\n"
            )?;
            (0, len)
        }
    };
    if !head {
        file.seek(std::io::SeekFrom::Start(from))?;
        send_body(&mut file.take(count), out, count)?;
    }
    out.flush()
}

/// How long a client may take to read a response before it must keep up [`MIN_RATE`].
const GRACE: Duration = Duration::from_secs(30);
/// The slowest average a client may read at after [`GRACE`], in bytes a second.
const MIN_RATE: u64 = 16 * 1024;

/// Sends `count` bytes of a file. A client that reads slower than [`MIN_RATE`] on average after
/// [`GRACE`] is cut (each write is also bounded by the write timeout), so that a trickle of reads
/// cannot hold a connection forever; a file that ends early (changed meanwhile) ends the
/// connection rather than leave the client waiting for bytes that will not come.
fn send_body(file: &mut impl Read, out: &mut TcpStream, count: u64) -> std::io::Result<()> {
    let start = Instant::now();
    let mut buf = vec![0u8; 64 * 1024];
    let mut sent = 0u64;
    while sent < count {
        let n = file.read(&mut buf)?;
        if n == 0 {
            return Err(std::io::ErrorKind::UnexpectedEof.into());
        }
        out.write_all(&buf[..n])?;
        sent += n as u64;
        let late = start.elapsed().saturating_sub(GRACE);
        if sent < count && sent < late.as_secs() * MIN_RATE {
            return Err(std::io::ErrorKind::TimedOut.into());
        }
    }
    Ok(())
}

/// One byte range of a file of `len` bytes from a `Range` header (RFC 9110 section 14.1.2):
/// Some(Ok((first, last))) to send, Some(Err(())) when it holds none of the file, None when the
/// header is not a single byte range (then the whole file is sent, as the RFC allows).
fn byte_range(header: &str, len: u64) -> Option<Result<(u64, u64), ()>> {
    let spec = header.trim().strip_prefix("bytes=")?.trim();
    if spec.contains(',') {
        return None;
    }
    let (a, b) = spec.split_once('-')?;
    let (a, b) = (a.trim(), b.trim());
    let num = |s: &str| -> Option<u64> {
        (!s.is_empty() && s.bytes().all(|c| c.is_ascii_digit()))
            .then(|| s.parse().ok())
            .flatten()
    };
    Some(if a.is_empty() {
        // The last b bytes.
        let n = num(b)?;
        if n == 0 || len == 0 {
            Err(())
        } else {
            Ok((len.saturating_sub(n), len - 1))
        }
    } else {
        let first = num(a)?;
        let last = if b.is_empty() { u64::MAX } else { num(b)? };
        if last < first {
            return None;
        }
        if first >= len {
            Err(())
        } else {
            Ok((first, last.min(len - 1)))
        }
    })
}

/// An HTTP date (IMF-fixdate, RFC 9110 section 5.6.7) of `secs` since 1970, UTC.
pub fn http_date(secs: u64) -> String {
    let days = (secs / 86_400) as i64;
    let rem = secs % 86_400;
    let (year, month, day) = crate::corpus::civil_date(days);
    const WEEKDAYS: [&str; 7] = ["Thu", "Fri", "Sat", "Sun", "Mon", "Tue", "Wed"];
    const MONTHS: [&str; 12] = [
        "Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec",
    ];
    format!(
        "{}, {day:02} {} {year} {:02}:{:02}:{:02} GMT",
        WEEKDAYS[days.rem_euclid(7) as usize],
        MONTHS[(month - 1) as usize],
        rem / 3600,
        rem / 60 % 60,
        rem % 60
    )
}

fn respond(
    out: &mut TcpStream,
    status: u16,
    body: &[u8],
    head: bool,
    close: bool,
) -> std::io::Result<()> {
    let reason = match status {
        400 => "Bad Request",
        404 => "Not Found",
        405 => "Method Not Allowed",
        414 => "URI Too Long",
        431 => "Request Header Fields Too Large",
        _ => "OK",
    };
    let mut msg = format!(
        "HTTP/1.1 {status} {reason}\r\nContent-Type: text/plain\r\nContent-Length: {}\r\n\
         X-Content-Type-Options: nosniff\r\nConnection: {}\r\n\r\n",
        body.len(),
        if close { "close" } else { "keep-alive" }
    )
    .into_bytes();
    if !head {
        msg.extend_from_slice(body);
    }
    out.write_all(&msg)?;
    out.flush()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn byte_ranges_as_the_rfc_gives_them() {
        // RFC 9110 section 14.1.2's examples, on a 10,000-byte representation.
        assert_eq!(byte_range("bytes=0-499", 10_000), Some(Ok((0, 499))));
        assert_eq!(byte_range("bytes=500-999", 10_000), Some(Ok((500, 999))));
        assert_eq!(byte_range("bytes=-500", 10_000), Some(Ok((9_500, 9_999))));
        assert_eq!(byte_range("bytes=9500-", 10_000), Some(Ok((9_500, 9_999))));
        assert_eq!(
            byte_range("bytes=0-0,-1", 10_000),
            None,
            "several ranges: whole file"
        );
        assert_eq!(byte_range("bytes=0-99999", 10_000), Some(Ok((0, 9_999))));
        assert_eq!(byte_range("bytes=10000-", 10_000), Some(Err(())));
        assert_eq!(byte_range("bytes=-0", 10_000), Some(Err(())));
        assert_eq!(byte_range("bytes=5-2", 10_000), None);
        assert_eq!(byte_range("items=0-5", 10_000), None);
        assert_eq!(byte_range("bytes=x-5", 10_000), None);
    }

    #[test]
    fn http_dates_as_the_rfc_writes_them() {
        // RFC 9110 section 5.6.7's example date; the seconds are those Python's
        // email.utils.formatdate(784111777, usegmt=True) writes as that date.
        assert_eq!(http_date(784_111_777), "Sun, 06 Nov 1994 08:49:37 GMT");
        assert_eq!(http_date(0), "Thu, 01 Jan 1970 00:00:00 GMT");
        assert_eq!(http_date(951_782_400), "Tue, 29 Feb 2000 00:00:00 GMT");
    }
}
