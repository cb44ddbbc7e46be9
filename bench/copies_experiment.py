"""Copies, measured before they are built: how far apart (in bits of the 64-bit DCT perceptual hash)
are copies of one invented picture and look-alikes of it?

Invented textured scenes (three octaves of smoothed colour noise under a few soft blobs); copies are
cropped by up to 10 %, re-toned, turned by up to 3 degrees, rescaled and re-compressed as JPEG;
look-alikes keep the object layout with another texture ("other texture") or the texture with the
objects moved ("objects moved", the harder). Distances are plain, and the least over the original's
crop variants (whole, 5 % and 10 % off, centred and at each corner). Prints recall of the copies and
the share of look-alikes within each threshold.

Run: ~/.cache/vitrine/venv/bin/python bench/copies_experiment.py [other-texture|objects-moved]
"""
import os, sys
import numpy as np, imagehash, random
sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "tests", "copies"))
from make_set import scene, copy  # the test set's invented scenes and copies
rng = np.random.default_rng(7); R = random.Random(7)
HARD = len(sys.argv) > 1 and sys.argv[1] == "objects-moved"
def h(img): return int(str(imagehash.phash(img)), 16)
def ham(a, b): return bin(a ^ b).count("1")
def variants(img):
    w, hh = img.size; out = [img]
    for c in (0.05, 0.10):
        cw, ch = int(w * c), int(hh * c)
        for dx, dy in [(cw // 2, ch // 2), (0, 0), (cw, 0), (0, ch), (cw, ch)]:
            out.append(img.crop((dx, dy, w - cw + dx, hh - ch + dy)))
    return out
pos_plain, pos_min, neg_plain, neg_min = [], [], [], []
for s in range(80):
    a = scene(1000 + s)
    ha = h(a); va = [h(v) for v in variants(a)]
    for _ in range(3):
        c = copy(a, R); hc = h(c)
        pos_plain.append(ham(ha, hc)); pos_min.append(min(ham(v, hc) for v in va))
    # look-alike: same layout generator (objects in the same places), another texture and colours
    if HARD:
        la = scene(1000 + s, layout=np.random.default_rng(9000 + s))
    else:
        la = scene(5000 + s, layout=np.random.default_rng(1000 + s))
    hl = h(la)
    neg_plain.append(ham(ha, hl)); neg_min.append(min(ham(v, hl) for v in va))
for name, p, n in [("plain", pos_plain, neg_plain), ("min over crops", pos_min, neg_min)]:
    p, n = np.array(p), np.array(n)
    print(name, "copies median", np.median(p), "p90", np.percentile(p, 90), "max", p.max(), "| look-alikes min", n.min(), "p5", np.percentile(n, 5), "median", np.median(n))
    for t in (6, 8, 10, 12, 14, 16):
        print(f"  t={t}: recall {(p <= t).mean():.3f}, look-alikes within {(n <= t).mean():.3f}")
