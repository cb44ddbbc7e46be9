"""A small IIIF host on 127.0.0.1 for the tests of `vitrine build --iiif`.

Usage: serve.py   (prints the port on its first line, then serves until killed)

Invented content of a fictional archive, served as a Presentation 3 Collection that holds a
Presentation 3 Manifest, a nested Presentation 2.1 Collection with a 2.1 Manifest, a third Manifest
with awkward Canvases, and a Manifest that does not exist. Image API endpoints:

- /img3/NAME (Image API 3.0, level 2) and /img2/NAME (2.1, level 2): any `full` size request;
- /lvl0/NAME (3.0, level 0): only the sizes its info.json lists, anything else is 400;
- /lvl1/NAME (3.0, level 1): sizes by width or height (`w,`, `,h`), anything else is 501;
- /crowd/NAME (3.0): 429 with Retry-After: 1 for the first request of each address;
- /flaky/NAME (3.0): 503 with Retry-After: 0 for the first two requests of each address;
- /gone/NAME: 404 for everything;
- /static/NAME.jpg: a whole picture for a Canvas without a service.

Each master is 1200 x 800 (3 : 2); a request for `max` or `full` size, which would send the whole
master, is answered but logged, so the test can see none was made. GET /_log gives every request's
path as a JSON list.

The request syntax is that of the IIIF Image API 3.0 and 2.1 (section 4: region/size/rotation/
quality.format); the documents follow IIIF Presentation 3.0 and 2.1.
"""

import io
import json
import sys
import threading
import zlib
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

import numpy as np
from PIL import Image

W, H = 1200, 800
LOG = []
LOCK = threading.Lock()
FLAKY = {}


def master(name):
    """A picture per name: a few blocks of colour from a seed made of the name."""
    seed = zlib.crc32(name.encode())
    rng = np.random.default_rng(seed)
    small = rng.integers(0, 256, (4, 6, 3), dtype=np.uint8)
    return Image.fromarray(small).resize((W, H), Image.NEAREST)


def jpeg(img):
    b = io.BytesIO()
    img.convert("RGB").save(b, "JPEG", quality=85)
    return b.getvalue()


def sized(name, size):
    """The master at an Image API size: `max`, `full`, `w,h`, `!w,h`, `w,`, `,h`."""
    if size in ("max", "full"):
        return master(name)
    fit = size.startswith("!")
    s = size.lstrip("!^")
    w, h = s.split(",")
    if fit:
        scale = min(int(w) / W, int(h) / H)
        w, h = round(W * scale), round(H * scale)
    elif not w:
        h = int(h)
        w = round(W * h / H)
    elif not h:
        w = int(w)
        h = round(H * w / W)
    return master(name).resize((int(w), int(h)), Image.LANCZOS)


def info(base, version, level0=False):
    if version == 3:
        doc = {"@context": "http://iiif.io/api/image/3/context.json", "id": base,
               "type": "ImageService3", "protocol": "http://iiif.io/api/image",
               "profile": "level0" if level0 else "level2", "width": W, "height": H}
    else:
        doc = {"@context": "http://iiif.io/api/image/2/context.json", "@id": base,
               "protocol": "http://iiif.io/api/image", "width": W, "height": H,
               "profile": ["http://iiif.io/api/image/2/level2.json"]}
    if level0:
        doc["sizes"] = [{"width": 150, "height": 100}, {"width": 600, "height": 400},
                        {"width": 1200, "height": 800}]
    return doc


def lang(s, code="en"):
    return {code: [s]}


def canvas3(base, cid, label, service_base, *, level="level2", extra=None, service=True):
    c = {"id": f"{base}/canvas/{cid}", "type": "Canvas", "label": lang(label), "width": W,
         "height": H}
    body = {"id": f"{service_base}/full/max/0/default.jpg", "type": "Image",
            "format": "image/jpeg", "width": W, "height": H}
    if service:
        body["service"] = [{"id": service_base, "type": "ImageService3", "profile": level}]
    c["items"] = [{"id": f"{base}/canvas/{cid}/page", "type": "AnnotationPage", "items": [
        {"id": f"{base}/canvas/{cid}/page/a", "type": "Annotation", "motivation": "painting",
         "body": body, "target": f"{base}/canvas/{cid}"}]}]
    c.update(extra or {})
    return c


def documents(base):
    a = f"{base}/p3/manifest-a.json"
    makers = ["Ilse Varnholt", "Teodor Amsel", "Ilse Varnholt", "Mira Castellane",
              "Teodor Amsel", "Mira Castellane"]
    places = ["Korvenstadt", "Lindau am See", "Korvenstadt", "Port Ellery", "Lindau am See",
              "Port Ellery"]
    canv_a = []
    for i in range(6):
        extra = {
            "metadata": [
                {"label": lang("Maker"), "value": lang(makers[i])},
                {"label": lang("Place"), "value": {"none": [places[i]]}},
            ],
            "navDate": f"19{20 + i * 3}-0{i + 1}-01T00:00:00Z",
        }
        if i == 0:
            extra["summary"] = lang("<p>Glass negative, <b>retouched</b> &amp; varnished</p>")
        canv_a.append(canvas3(a.rsplit("/", 1)[0], f"a{i}", f"Harbour view {i + 1}",
                              f"{base}/img3/a{i}", extra=extra))
    manifest_a = {
        "@context": "http://iiif.io/api/presentation/3/context.json",
        "id": a, "type": "Manifest", "label": lang("Harbour negatives"),
        "summary": lang("Negatives of the harbour, invented for the tests"),
        "rights": "http://creativecommons.org/licenses/by/4.0/",
        "requiredStatement": {"label": lang("Attribution"),
                              "value": lang("Fictional Photo Archive of Korvenstadt")},
        "items": canv_a,
    }
    b = f"{base}/p2/manifest-b.json"
    canv_b = []
    for i in range(4):
        sid = f"{base}/img2/b{i}"
        canv_b.append({
            "@id": f"{base}/p2/canvas/b{i}", "@type": "sc:Canvas",
            "label": f"Workshop interior {i + 1}", "width": W, "height": H,
            "metadata": [{"label": "Maker", "value": [
                {"@value": "Werkstatt Amsel", "@language": "de"},
                {"@value": "Amsel workshop", "@language": "en"}]}],
            "images": [{"@type": "oa:Annotation", "motivation": "sc:painting",
                        "on": f"{base}/p2/canvas/b{i}",
                        "resource": {"@id": f"{sid}/full/full/0/default.jpg",
                                     "@type": "dctypes:Image", "format": "image/jpeg",
                                     "width": W, "height": H,
                                     "service": {
                                         "@context": "http://iiif.io/api/image/2/context.json",
                                         "@id": sid,
                                         "profile": "http://iiif.io/api/image/2/level2.json"}}}],
        })
    manifest_b = {
        "@context": "http://iiif.io/api/presentation/2/context.json",
        "@id": b, "@type": "sc:Manifest", "label": "Workshop prints",
        "description": "Prints of a workshop, invented for the tests",
        "attribution": "Fictional Print Room of Lindau am See",
        "license": "http://rightsstatements.org/vocab/InC/1.0/",
        "navDate": "1931-01-01T00:00:00Z",
        "sequences": [{"@type": "sc:Sequence", "canvases": canv_b}],
    }
    c = f"{base}/p3/manifest-c.json"
    cb = c.rsplit("/", 1)[0]
    canv_c = [canvas3(cb, f"c{i}", f"Level 0 view {i + 1}", f"{base}/lvl0/c{i}", level="level0")
              for i in range(3)]
    static = canvas3(cb, "c3", "Loose print", f"{base}/static/c3", service=False)
    static["items"][0]["items"][0]["body"]["id"] = f"{base}/static/c3.jpg"
    canv_c.append(static)
    canv_c.append(canvas3(cb, "c4", "Lost negative", f"{base}/gone/c4"))
    canv_c.append(canvas3(cb, "c5", "Busy server view", f"{base}/flaky/c5"))
    canv_c.append(canvas3(cb, "c6", "Level 1 view", f"{base}/lvl1/c6", level="level1"))
    canv_c.append(canvas3(cb, "c7", "Crowded server view", f"{base}/crowd/c7"))
    manifest_c = {"@context": "http://iiif.io/api/presentation/3/context.json", "id": c,
                  "type": "Manifest", "label": lang("Awkward canvases"), "items": canv_c}
    coll2 = {"@context": "http://iiif.io/api/presentation/2/context.json",
             "@id": f"{base}/p2/collection.json", "@type": "sc:Collection",
             "label": "Print room", "manifests": [{"@id": b, "@type": "sc:Manifest",
                                                   "label": "Workshop prints"}]}
    coll = {"@context": "http://iiif.io/api/presentation/3/context.json",
            "id": f"{base}/collection.json", "type": "Collection",
            "label": lang("Fictional archive"), "items": [
                {"id": a, "type": "Manifest", "label": lang("Harbour negatives")},
                {"id": f"{base}/p2/collection.json", "type": "Collection",
                 "label": lang("Print room")},
                {"id": c, "type": "Manifest", "label": lang("Awkward canvases")},
                {"id": f"{base}/missing.json", "type": "Manifest", "label": lang("Missing")},
            ]}
    # A 2.1 Collection split into pages (`first`, then `next`).
    paged = {"@context": "http://iiif.io/api/presentation/2/context.json",
             "@id": f"{base}/p2/paged.json", "@type": "sc:Collection", "label": "Paged",
             "total": 2, "first": f"{base}/p2/page1.json"}
    page1 = {"@context": "http://iiif.io/api/presentation/2/context.json",
             "@id": f"{base}/p2/page1.json", "@type": "sc:Collection", "within": paged["@id"],
             "manifests": [{"@id": b, "@type": "sc:Manifest", "label": "Workshop prints"}],
             "next": f"{base}/p2/page2.json"}
    page2 = {"@context": "http://iiif.io/api/presentation/2/context.json",
             "@id": f"{base}/p2/page2.json", "@type": "sc:Collection", "within": paged["@id"],
             "manifests": [{"@id": a, "@type": "sc:Manifest", "label": "Harbour negatives"}]}
    return {"/p2/paged.json": paged, "/p2/page1.json": page1, "/p2/page2.json": page2,
            "/collection.json": coll, "/p3/manifest-a.json": manifest_a,
            "/p2/collection.json": coll2, "/p2/manifest-b.json": manifest_b,
            "/p3/manifest-c.json": manifest_c}


def asked(path):
    """How many times `path` has been asked for, this request included."""
    with LOCK:
        FLAKY[path] = FLAKY.get(path, 0) + 1
        return FLAKY[path]


class Handler(BaseHTTPRequestHandler):
    def log_message(self, *a):
        pass

    def send(self, code, body=b"", ctype="application/json", headers=None):
        self.send_response(code)
        self.send_header("Content-Type", ctype)
        self.send_header("Content-Length", str(len(body)))
        for k, v in (headers or {}).items():
            self.send_header(k, v)
        self.end_headers()
        self.wfile.write(body)

    def do_GET(self):
        path = self.path
        with LOCK:
            LOG.append(path)
        base = f"http://127.0.0.1:{self.server.server_address[1]}"
        if path == "/_log":
            with LOCK:
                return self.send(200, json.dumps(LOG).encode())
        docs = documents(base)
        if path in docs:
            return self.send(200, json.dumps(docs[path]).encode())
        parts = path.strip("/").split("/")
        if parts[0] == "static" and len(parts) == 2:
            return self.send(200, jpeg(master(parts[1].split(".")[0])), "image/jpeg")
        if parts[0] == "gone":
            return self.send(404, b"gone", "text/plain")
        if parts[0] == "crowd" and asked(path) <= 1:
            return self.send(429, b"too many requests", "text/plain", {"Retry-After": "1"})
        if parts[0] == "flaky" and asked(path) <= 2:
            return self.send(503, b"busy", "text/plain", {"Retry-After": "0"})
        if parts[0] in ("img3", "img2", "lvl0", "lvl1", "flaky", "crowd") and len(parts) >= 3:
            name = parts[1]
            version = 2 if parts[0] == "img2" else 3
            sbase = f"{base}/{parts[0]}/{name}"
            if parts[2] == "info.json":
                doc = info(sbase, version, parts[0] == "lvl0")
                if parts[0] == "lvl1":
                    doc["profile"] = "level1"
                return self.send(200, json.dumps(doc).encode())
            if len(parts) == 6 and parts[2] == "full" and parts[5] == "default.jpg":
                size = parts[3].replace("%21", "!")
                if parts[0] == "lvl0" and size not in ("150,100", "600,400", "1200,800", "max"):
                    return self.send(400, b"level 0: only the listed sizes", "text/plain")
                if parts[0] == "lvl1" and not (size.endswith(",") or size.startswith(",")):
                    return self.send(501, b"level 1: sizes by width or height", "text/plain")
                try:
                    img = sized(name, size)
                except ValueError:
                    return self.send(400, b"bad size", "text/plain")
                return self.send(200, jpeg(img), "image/jpeg")
        self.send(404, b"not here", "text/plain")


def main():
    server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
    print(server.server_address[1], flush=True)
    server.serve_forever()


if __name__ == "__main__":
    main()
