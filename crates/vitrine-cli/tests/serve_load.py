# `vitrine serve` against Python's own HTTP client (http.client) and raw sockets: validators and
# ranges as RFC 9110 gives them, oversized heads refused, a slow client cut at the head deadline,
# 2,000 idle connections beside 50 clients fetching files, and a server under an address-space
# limit that stays up. Prints one JSON object of findings; the Rust test asserts on them.
# argv: URL SERVER_PID ATLAS_DIR VITRINE_BINARY
import email.utils, http.client, json, os, resource, socket, subprocess, sys, threading, time
from urllib.parse import urlparse

url, pid, root, binary = sys.argv[1], int(sys.argv[2]), sys.argv[3], sys.argv[4]
host, port = urlparse(url).hostname, urlparse(url).port
out = {}

def get(path, headers=None, method="GET"):
    c = http.client.HTTPConnection(host, port, timeout=10)
    c.request(method, path, headers=headers or {})
    r = c.getresponse()
    body = r.read()
    c.close()
    return r.status, dict((k.lower(), v) for k, v in r.getheaders()), body

def status_of(raw):
    s = socket.create_connection((host, port), timeout=10)
    s.sendall(raw)
    data = b""
    try:
        while b"\r\n" not in data:
            chunk = s.recv(4096)
            if not chunk:
                break
            data += chunk
    except ConnectionResetError:
        pass
    s.close()
    return int(data.split(b" ")[1]) if data.startswith(b"HTTP/1.1 ") else None

def proc(field):
    with open(f"/proc/{pid}/status") as f:
        for line in f:
            if line.startswith(field + ":"):
                return int(line.split()[1])

# Validators and ranges (RFC 9110 sections 8.8, 13 and 14).
name = sorted(os.listdir(os.path.join(root, "sheets")))[0]
path = "/sheets/" + name
whole = open(os.path.join(root, "sheets", name), "rb").read()
st, h, body = get(path)
out["whole"] = [st, body == whole, h.get("accept-ranges")]
mtime = int(os.stat(os.path.join(root, "sheets", name)).st_mtime)
out["last_modified_is_mtime"] = int(email.utils.parsedate_to_datetime(h["last-modified"]).timestamp()) == mtime
etag, lm = h["etag"], h["last-modified"]
st, h2, body = get(path, {"If-None-Match": etag})
out["if_none_match"] = [st, len(body)]
st, _, body = get(path, {"If-Modified-Since": lm})
out["if_modified_since"] = [st, len(body)]
st, h2, body = get(path, {"Range": "bytes=10-99"})
out["range"] = [st, body == whole[10:100], h2.get("content-range") == f"bytes 10-99/{len(whole)}"]
st, _, body = get(path, {"Range": "bytes=-5"})
out["suffix_range"] = [st, body == whole[-5:]]
st, h2, _ = get(path, {"Range": f"bytes={len(whole)}-"})
out["unsatisfiable"] = [st, h2.get("content-range") == f"bytes */{len(whole)}"]
st, _, body = get(path, {"Range": "bytes=0-9", "If-Range": '"stale"'})
out["stale_if_range"] = [st, body == whole]
st, _, body = get(path, {"Range": "bytes=0-9"}, method="HEAD")
out["head_range"] = [st, len(body)]

# Oversized heads (a 20 KiB request line, a 20 KiB header line, 150 headers) and bodies that could
# be read as a next request (chunked, an unreadable length).
out["long_line"] = status_of(b"GET /" + b"a" * 20_000 + b" HTTP/1.1\r\nHost: x\r\n\r\n")
out["long_header"] = status_of(b"GET / HTTP/1.1\r\nX-A: " + b"b" * 20_000 + b"\r\n\r\n")
out["chunked_body"] = status_of(b"POST / HTTP/1.1\r\nTransfer-Encoding: chunked\r\n\r\n5\r\nGET /\r\n0\r\n\r\n")
out["bad_length"] = status_of(b"GET / HTTP/1.1\r\nContent-Length: 12x\r\n\r\n")
out["many_headers"] = status_of(b"GET / HTTP/1.1\r\n" + b"".join(b"X-%d: 1\r\n" % i for i in range(150)) + b"\r\n")

# A client that sends its request one byte every 2 s, beside everything below.
slow = {}
def slow_client():
    s = socket.create_connection((host, port), timeout=30)
    t0 = time.monotonic()
    try:
        for b in b"GET / HTTP/1.1\r\nHost: x\r\nX-Slow: " + b"s" * 100:
            s.send(bytes([b]))
            s.settimeout(2.0)
            try:
                if s.recv(1) == b"":
                    break
            except socket.timeout:
                pass
    except (BrokenPipeError, ConnectionResetError):
        pass
    slow["cut_after_s"] = round(time.monotonic() - t0, 1)
    s.close()
slow_thread = threading.Thread(target=slow_client)
slow_thread.start()

# 2,000 idle connections, then 50 clients fetching every sheet file while they are open.
soft, hard = resource.getrlimit(resource.RLIMIT_NOFILE)
resource.setrlimit(resource.RLIMIT_NOFILE, (min(hard, 10_000), hard))
idle = []
for _ in range(2000):
    s = socket.socket()
    s.connect((host, port))
    idle.append(s)
time.sleep(0.5)
out["idle_opened"] = len(idle)
sheets = ["/sheets/" + n for n in sorted(os.listdir(os.path.join(root, "sheets")))][:8]
times, statuses = [], []
lock = threading.Lock()
def client():
    for p in sheets:
        t = time.monotonic()
        st, _, body = get(p)
        with lock:
            times.append(time.monotonic() - t)
            statuses.append(st)
clients = [threading.Thread(target=client) for _ in range(50)]
for c in clients:
    c.start()
for c in clients:
    c.join()
out["fetches"] = len(times)
out["all_200"] = all(s == 200 for s in statuses)
out["slowest_fetch_s"] = round(max(times), 3)
out["server_rss_mib"] = round(proc("VmRSS") / 1024, 1)
out["server_threads_loaded"] = proc("Threads")
for s in idle:
    s.close()
slow_thread.join()
out.update(slow)
deadline = time.monotonic() + 5
while time.monotonic() < deadline and proc("Threads") > 2:
    time.sleep(0.1)
out["server_threads_after"] = proc("Threads")
out["server_rss_after_mib"] = round(proc("VmRSS") / 1024, 1)

# Under an address-space limit of 2.5 GB (where it used to die at connection 251) the server
# refuses what it cannot hold and stays up.
def limited():
    resource.setrlimit(resource.RLIMIT_AS, (2500 << 20, 2500 << 20))
srv = subprocess.Popen([binary, "serve", root, "--port", "0"], stdout=subprocess.PIPE,
                       stderr=subprocess.DEVNULL, preexec_fn=limited)
line = srv.stdout.readline().decode()
lport = int(line.rsplit(":", 1)[1].split("/")[0])
conns = []
for _ in range(1000):
    try:
        conns.append(socket.create_connection((host, lport), timeout=5))
    except OSError:
        break
for s in conns:
    try:
        s.sendall(b"GET " + path.encode() + b" HTTP/1.1\r\nHost: x\r\n\r\n")
    except OSError:
        pass
time.sleep(1)
for s in conns:
    s.close()
out["limited_connections"] = len(conns)
try:
    c = http.client.HTTPConnection(host, lport, timeout=10)
    c.request("GET", path)
    out["limited_alive"] = srv.poll() is None and c.getresponse().status == 200
except OSError as e:
    out["limited_alive"] = False
    out["limited_error"] = f"{e}; exit status {srv.poll()}"
srv.kill()
print(json.dumps(out))
