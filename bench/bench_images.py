#!/usr/bin/env python3
"""Thumbnailing benchmark: Vitrine against Pillow (with and without draft) and vipsthumbnail.

Generates seeded invented test images once (cached): JPEGs of 3000 x 2000 and 16-bit greyscale
TIFFs of 1500 x 1000. Then every tool makes a 512 px (long side) JPEG thumbnail, quality 85, of
every file, on all cores (Vitrine: one process, one thread per core; the references: one process
per core), one tool at a time, and the table gives images per second, peak memory and the ratio.
"""

import argparse
import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

GEN_VERSION = 1
LONG_SIDE = 512
QUALITY = 85


def log(msg):
    print(f"[bench-images] {msg}", file=sys.stderr, flush=True)


# --------------------------------------------------------------------------------------------
# Invented images
# --------------------------------------------------------------------------------------------

def _scene(rng, w, h):
    """A photograph-like picture: smooth colour fields, soft discs and bars, fine grain."""
    import numpy as np

    y, x = np.mgrid[0:h, 0:w].astype(np.float32)
    img = np.zeros((h, w, 3), np.float32)
    for c in range(3):
        a, b, d = rng.uniform(-1, 1, 3)
        img[..., c] = 120 + 60 * np.sin(a * x / w * 6 + b * y / h * 6 + d * 3)
    for _ in range(12):
        cx, cy, r = rng.uniform(0, w), rng.uniform(0, h), rng.uniform(0.03, 0.25) * h
        col = rng.uniform(0, 255, 3)
        m = np.clip(1.5 - np.hypot(x - cx, y - cy) / r, 0, 1)[..., None]
        img = img * (1 - m) + col * m
    return img


def make_jpegs(out, count, seed, w=3000, h=2000):
    import numpy as np
    from PIL import Image

    rng = np.random.default_rng(seed)
    scenes = [_scene(rng, w + 400, h + 400) for _ in range(8)]
    grain = rng.normal(0, 6, (h + 400, w + 400, 3)).astype(np.float32)
    for i in range(count):
        s = scenes[i % len(scenes)]
        ox, oy = rng.integers(0, 400, 2)
        gx, gy = rng.integers(0, 400, 2)
        gain = rng.uniform(0.8, 1.2, 3).astype(np.float32)
        px = s[oy:oy + h, ox:ox + w] * gain + grain[gy:gy + h, gx:gx + w]
        Image.fromarray(np.clip(px, 0, 255).astype(np.uint8)).save(
            out / f"scan-{i:05d}.jpg", "JPEG", quality=90)


def make_tiffs(out, count, seed, w=1500, h=1000):
    import numpy as np
    from PIL import Image

    rng = np.random.default_rng(seed)
    scenes = [_scene(rng, w + 200, h + 200).mean(axis=2) for _ in range(4)]
    for i in range(count):
        s = scenes[i % len(scenes)]
        ox, oy = rng.integers(0, 200, 2)
        px = s[oy:oy + h, ox:ox + w] * 256 + rng.normal(0, 400, (h, w))
        Image.fromarray(np.clip(px, 0, 65535).astype(np.uint16)).save(
            out / f"plate-{i:05d}.tif", "TIFF")


def ensure(data_dir, name, count, maker, seed):
    d = data_dir / name
    meta = d / ".meta.json"
    want = {"count": count, "seed": seed, "gen_version": GEN_VERSION}
    if meta.exists() and json.loads(meta.read_text()) == want:
        return d
    shutil.rmtree(d, ignore_errors=True)
    d.mkdir(parents=True)
    log(f"generating {count} {name} into {d} (once)")
    t = time.perf_counter()
    # Two processes, each a half of the files (seeded per half).
    half = (count + 1) // 2
    procs = []
    for part in range(2):
        n = min(half, count - part * half)
        if n <= 0:
            continue
        sub = d / f"part{part}"
        sub.mkdir()
        procs.append((sub, subprocess.Popen([sys.executable, __file__, "--make", maker,
                                             "--into", str(sub), "--count", str(n),
                                             "--seed", str(seed * 10 + part)])))
    for sub, p in procs:
        if p.wait() != 0:
            raise SystemExit(f"generating {name} failed")
        for f in sub.iterdir():
            f.rename(d / f"{sub.name}-{f.name}")
        sub.rmdir()
    meta.write_text(json.dumps(want))
    log(f"  {time.perf_counter() - t:.0f} s")
    return d


# --------------------------------------------------------------------------------------------
# Tools
# --------------------------------------------------------------------------------------------

def pillow_one(args):
    path, out, draft = args
    from PIL import Image

    im = Image.open(path)
    if im.mode == "I;16":
        import numpy as np

        im = Image.fromarray((np.asarray(im) >> 8).astype(np.uint8))
    if draft and im.format == "JPEG":
        im.draft("RGB", (LONG_SIDE, LONG_SIDE))
    im = im.convert("RGB")
    im.thumbnail((LONG_SIDE, LONG_SIDE))
    im.save(os.path.join(out, Path(path).stem + ".jpg"), "JPEG", quality=QUALITY)


def pillow_worker(src, out, draft):
    """Runs in its own process: a pool of one process per core."""
    from multiprocessing import Pool

    files = sorted(str(p) for p in Path(src).iterdir() if p.is_file() and not p.name.startswith("."))
    with Pool(os.cpu_count()) as pool:
        pool.map(pillow_one, [(f, out, draft) for f in files[:4]])
        t = time.perf_counter()
        pool.map(pillow_one, [(f, out, draft) for f in files], chunksize=4)
        secs = time.perf_counter() - t
    print(json.dumps({"images": len(files), "seconds": secs}))


def run(cmd, env=None):
    """Runs a command; returns (stdout, wall seconds, peak MiB). The peak is the largest resident
    set of the command or any process under it (wait4's rusage covers its waited descendants)."""
    import threading

    t = time.perf_counter()
    p = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    got = {}
    readers = [threading.Thread(target=lambda k=k, f=f: got.__setitem__(k, f.read()))
               for k, f in (("out", p.stdout), ("err", p.stderr))]
    for r in readers:
        r.start()
    _, status, usage = os.wait4(p.pid, 0)
    for r in readers:
        r.join()
    p.returncode = os.waitstatus_to_exitcode(status)
    wall = time.perf_counter() - t
    if p.returncode != 0:
        log(f"  failed: {' '.join(map(str, cmd))}\n{got['err'][-2000:]}")
        return None, wall, None
    return got["out"], wall, usage.ru_maxrss / 1024.0


def bench_set(name, src, work, binary, tools):
    files = sorted(p for p in src.iterdir() if p.is_file() and not p.name.startswith("."))
    n = len(files)
    rows = []
    if "vitrine" in tools:
        out = work / "vitrine"
        shutil.rmtree(out, ignore_errors=True)
        log(f"  vitrine on {name}")
        stdout, wall, peak = run([str(binary), "images", str(src), str(out), str(LONG_SIDE)])
        if stdout:
            r = json.loads(stdout.strip().splitlines()[-1])
            rows.append(dict(tool="vitrine", images=r["images"], seconds=r["seconds"], peak=peak))
    for tool, draft in (("pillow-draft", True), ("pillow", False)):
        if tool not in tools:
            continue
        out = work / tool
        shutil.rmtree(out, ignore_errors=True)
        out.mkdir(parents=True)
        log(f"  {tool} on {name}")
        stdout, wall, peak = run([sys.executable, __file__, "--pillow", str(src), "--into", str(out)]
                                 + (["--draft"] if draft else []))
        if stdout:
            r = json.loads(stdout.strip().splitlines()[-1])
            label = "Pillow draft() + thumbnail()" if draft else "Pillow thumbnail()"
            rows.append(dict(tool=label, images=r["images"], seconds=r["seconds"], peak=peak))
    if "vips" in tools:
        if shutil.which("vipsthumbnail") is None:
            log("  vipsthumbnail is missing (Debian: apt-get install libvips-tools); skipped")
        else:
            out = work / "vips"
            shutil.rmtree(out, ignore_errors=True)
            out.mkdir(parents=True)
            log(f"  vipsthumbnail on {name}")
            listing = work / "files.txt"
            listing.write_text("\n".join(str(f) for f in files) + "\n")
            env = dict(os.environ, VIPS_CONCURRENCY="1")
            cmd = ["sh", "-c", f"xargs -a '{listing}' -P {os.cpu_count()} -n 16 vipsthumbnail "
                   f"--size {LONG_SIDE} -o '{out}/%s.jpg[Q={QUALITY}]'"]
            stdout, wall, peak = run(cmd, env=env)
            if stdout is not None:
                rows.append(dict(tool="vipsthumbnail", images=n, seconds=wall, peak=peak))
    base = next((r for r in rows if r["tool"] == "vitrine"), None)
    for r in rows:
        r["set"] = name
        r["per_second"] = r["images"] / r["seconds"]
        r["ratio"] = (base["per_second"] / r["per_second"]) if base else None
    return rows


def bench_collection(cache, count, binary):
    """A whole `vitrine build` over a collection of `count` invented 640x480 JPEGs (and a tenth of
    it), without the thumbnail cache: the thumbnail stage's time and its own peak memory (the build
    report's per-stage peaks), to show that memory does not grow with the collection."""
    import numpy as np

    # 1,000 distinct pictures, linked under `count` names (making a million distinct JPEGs would
    # take hours; each file is still read, decoded and thumbnailed on its own).
    distinct = ensure(cache / "images", "jpeg-640x480-1000", 1000, "jpeg-small", 5)
    pictures = sorted(p for p in distinct.iterdir() if p.suffix == ".jpg")
    src = cache / "images" / f"linked-640x480-{count}"
    if not (src / ".complete").exists():
        shutil.rmtree(src, ignore_errors=True)
        src.mkdir(parents=True)
        for i in range(count):
            os.link(pictures[i % len(pictures)], src / f"item-{i:07d}.jpg")
        (src / ".complete").write_text("")
    files = sorted(p for p in src.iterdir() if p.suffix == ".jpg")
    rows = []
    for n in (max(count // 10, 1), count):
        work = cache / "images-out" / f"collection-{n}"
        shutil.rmtree(work, ignore_errors=True)
        work.mkdir(parents=True)
        ids = [f.stem for f in files[:n]]
        (work / "records.csv").write_text("id,image\n" + "".join(
            f"{i},{f.name}\n" for i, f in zip(ids, files[:n])))
        np.save(work / "vectors.npy",
                np.random.default_rng(n).normal(size=(n, 16)).astype(np.float32))
        log(f"  vitrine build over {n} images")
        cmd = [str(binary), "build", "--quiet", "--no-thumb-cache", "--vectors",
               str(work / "vectors.npy"), "--catalogue", str(work / "records.csv"),
               "--images", str(src), "--out", str(work / "atlas")]
        _, wall, peak = run(cmd)
        if peak is None:
            continue
        report = json.loads((work / "atlas" / "build-report.json").read_text())
        stage = [i for i, (name, _) in enumerate(report["stages"]) if name == "thumbnails"][0]
        secs = report["stages"][stage][1]
        rows.append(dict(images=n, seconds=secs, per_second=n / secs,
                         stage_start=report["stage_start_memory_mib"][stage],
                         stage_peak=report["stage_peak_memory_mib"][stage], build_peak=peak,
                         wall=wall))
        shutil.rmtree(work / "atlas", ignore_errors=True)
    print()
    head = ["images", "thumbnail stage (s)", "images/s", "held at stage start (MiB)",
            "stage peak (MiB)", "stage's own rise (MiB)", "whole build peak (MiB)",
            "whole build (s)"]
    table = [[str(r["images"]), f"{r['seconds']:.1f}", f"{r['per_second']:.0f}",
              f"{r['stage_start']:.0f}", f"{r['stage_peak']:.0f}",
              f"{r['stage_peak'] - r['stage_start']:.0f}", f"{r['build_peak']:.0f}",
              f"{r['wall']:.0f}"] for r in rows]
    widths = [max(len(x) for x in col) for col in zip(head, *table)]
    for line in [head, ["-" * w for w in widths]] + table:
        print("  ".join(x.ljust(w) for x, w in zip(line, widths)))
    print()
    print("Default levels 32, 128, 512 px, sheets 2048 px. Stage peak: the resident memory's high-water")
    print("mark during the thumbnail stage alone (reset when it starts); its own rise: that peak less")
    print("what the earlier stages left resident when it began.")
    (cache / "collection-results.json").write_text(json.dumps(rows, indent=1))


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cache", default=os.path.expanduser("~/.cache/vitrine/bench"))
    ap.add_argument("--jpegs", type=int, default=2000)
    ap.add_argument("--tiffs", type=int, default=500)
    ap.add_argument("--skip", default="", help="comma list of: vitrine, pillow-draft, pillow, vips")
    ap.add_argument("--vitrine-bench", default=str(Path(__file__).resolve().parent.parent
                                                   / "target" / "release" / "vitrine-bench"))
    ap.add_argument("--make", help=argparse.SUPPRESS)
    ap.add_argument("--pillow", help=argparse.SUPPRESS)
    ap.add_argument("--draft", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--into", help=argparse.SUPPRESS)
    ap.add_argument("--count", type=int, help=argparse.SUPPRESS)
    ap.add_argument("--seed", type=int, help=argparse.SUPPRESS)
    ap.add_argument("--collection", type=int, metavar="N",
                    help="instead: a whole build over N invented 640x480 JPEGs and over N/10")
    ap.add_argument("--vitrine", default=str(Path(__file__).resolve().parent.parent
                                             / "target" / "release" / "vitrine"))
    a = ap.parse_args()
    if a.make:
        makers = {"jpeg": make_jpegs, "tiff": make_tiffs,
                  "jpeg-small": lambda out, n, seed: make_jpegs(out, n, seed, 640, 480)}
        makers[a.make](Path(a.into), a.count, a.seed)
        return 0
    if a.collection:
        bench_collection(Path(a.cache).expanduser(), a.collection, Path(a.vitrine))
        return 0
    if a.pillow:
        pillow_worker(a.pillow, a.into, a.draft)
        return 0

    tools = {"vitrine", "pillow-draft", "pillow", "vips"} - {s.strip() for s in a.skip.split(",")}
    cache = Path(a.cache).expanduser()
    data = cache / "images"
    work = cache / "images-out"
    jpegs = ensure(data, "jpeg-3000x2000", a.jpegs, "jpeg", 3)
    tiffs = ensure(data, "tiff16-1500x1000", a.tiffs, "tiff", 4)
    log(f"{os.cpu_count()} cores; tools: {', '.join(sorted(tools))}")
    rows = bench_set("JPEG 3000x2000", jpegs, work / "jpeg", Path(a.vitrine_bench), tools)
    rows += bench_set("TIFF 16-bit 1500x1000", tiffs, work / "tiff", Path(a.vitrine_bench), tools)

    print()
    head = ["set", "tool", "images", "seconds", "images/s", "peak (MiB)", "vitrine/ref"]
    table = [[r["set"], r["tool"], str(r["images"]), f"{r['seconds']:.2f}", f"{r['per_second']:.1f}",
              f"{r['peak']:.0f}" if r["peak"] else "-",
              f"{r['ratio']:.2f}x" if r["ratio"] else "-"] for r in rows]
    widths = [max(len(x) for x in col) for col in zip(head, *table)]
    for line in [head, ["-" * w for w in widths]] + table:
        print("  ".join(x.ljust(w) for x, w in zip(line, widths)))
    print()
    print(f"Every tool writes one {LONG_SIDE} px (long side) JPEG, quality {QUALITY}, per file, on all")
    print("cores. vitrine/ref: Vitrine's images per second over the tool's (above 1: Vitrine is")
    print("faster). Peak: the largest single process's resident memory (Pillow and vips run one")
    print("process per core, so their total is that times the cores).")
    (cache / "images-results.json").write_text(json.dumps(rows, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
