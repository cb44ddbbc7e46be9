"""An invented test set for finding copies: textured scenes, copies of them as archives make
them, and look-alikes that are not copies.

Scenes are three octaves of smoothed colour noise under three to seven soft discs. A copy is
cropped by up to 10 % (the cut placed anywhere), re-toned (brightness 0.8-1.2, contrast 0.8-1.25),
turned by up to 3 degrees, rescaled (0.5-1.3 on each side) and re-compressed as JPEG (quality
35-90), all together. Scenes have skewed numbers of copies (most one to three, some five or ten:
a print in ten books). Look-alikes are hard negatives: the same disc layout on another texture,
and the same texture with the discs moved. Plain other scenes fill the collection.

The vectors are "tiny images" (the picture at 16 x 16, each channel's values standardised), a
published baseline descriptor ("80 Million Tiny Images", IEEE TPAMI 2008); a collection's real vectors
would come from a neural network and sit copies closer still.

Writes into DIR: images/*.jpg, catalogue.csv (id, scene, role), vectors.npy, ids.txt.
Run: python make_set.py DIR [SCENES] [SEED]   (the thresholds were chosen on seed 7; the test
runs another). bench/copies_experiment.py imports `scene` and `copy` from here.
"""
import io
import os
import random
import sys

import numpy as np
from PIL import Image, ImageEnhance



def scene(seed, w=480, h=360, layout=None):
    g = np.random.default_rng(seed)
    y, x = np.mgrid[0:h, 0:w] / max(w, h)
    img = np.zeros((h, w, 3))
    for octave in (8, 24, 64):
        n = g.normal(0, 1, (octave * h // w + 2, octave + 2, 3))
        n8 = ((n - n.min()) / np.ptp(n) * 255).astype(np.uint8)
        up = np.array(Image.fromarray(n8).resize((w, h), Image.BICUBIC)) / 255.0
        img += up * (24.0 / octave)
    lay = layout if layout is not None else g
    for _ in range(int(lay.integers(3, 8))):
        cx, cy, r = lay.uniform(0.1, 0.9), lay.uniform(0.1, 0.7), lay.uniform(0.04, 0.18)
        col = g.uniform(0, 1, 3)
        m = np.exp(-((((x - cx) ** 2 + (y - cy) ** 2) / r**2) ** 2))
        img = img * (1 - m[..., None]) + col * m[..., None]
    img = (img - img.min()) / np.ptp(img)
    return Image.fromarray((img * 255).astype(np.uint8))


def copy(img, r):
    """A copy of `img` as an archive makes one, its changes drawn from `r` (a random.Random)."""
    w, h = img.size
    c = r.uniform(0.0, 0.10)
    dx, dy = int(w * c * r.random()), int(h * c * r.random())
    out = img.crop((dx, dy, w - int(w * c) + dx, h - int(h * c) + dy))
    out = ImageEnhance.Brightness(out).enhance(r.uniform(0.8, 1.2))
    out = ImageEnhance.Contrast(out).enhance(r.uniform(0.8, 1.25))
    out = out.rotate(r.uniform(-3, 3), resample=Image.BICUBIC, fillcolor=(235, 230, 220))
    out = out.resize((int(out.width * r.uniform(0.5, 1.3)), int(out.height * r.uniform(0.5, 1.3))))
    b = io.BytesIO()
    out.save(b, "JPEG", quality=r.randint(35, 90))
    return Image.open(b).convert("RGB")


def tiny(img):
    a = np.asarray(img.convert("RGB").resize((16, 16), Image.BILINEAR), dtype=np.float32)
    a = (a - a.mean(axis=(0, 1))) / (a.std(axis=(0, 1)) + 1.0)
    return a.ravel()


def main(argv):
    out = argv[1]
    scenes = int(argv[2]) if len(argv) > 2 else 100
    seed = int(argv[3]) if len(argv) > 3 else 7
    r = random.Random(seed)
    base = 0 if seed == 7 else seed * 100_000
    rows, vecs = [], []

    def add(img, id_, scene_no, role):
        img.save(f"{out}/images/{id_}.jpg", quality=92)
        rows.append((id_, scene_no, role))
        vecs.append(tiny(img))

    os.makedirs(f"{out}/images", exist_ok=True)
    for s in range(scenes):
        a = scene(base + 1000 + s)
        add(a, f"s{s:03d}", s, "original")
        for k in range(r.choice([1, 1, 2, 2, 3, 3, 3, 5, 10])):
            add(copy(a, r), f"s{s:03d}c{k}", s, "copy")
        if s % 2 == 0:
            la = scene(base + 5000 + s, layout=np.random.default_rng(base + 1000 + s))
            add(la, f"s{s:03d}t", s, "look-alike (other texture)")
        else:
            la = scene(base + 1000 + s, layout=np.random.default_rng(base + 9000 + s))
            add(la, f"s{s:03d}m", s, "look-alike (discs moved)")
    for s in range(scenes):
        add(scene(base + 20000 + s), f"o{s:03d}", "", "other")
    with open(f"{out}/catalogue.csv", "w") as f:
        f.write("id,scene,role\n")
        for row in rows:
            f.write(f"{row[0]},{row[1]},{row[2]}\n")
    np.save(f"{out}/vectors.npy", np.stack(vecs).astype(np.float32))
    with open(f"{out}/ids.txt", "w") as f:
        f.write("\n".join(row[0] for row in rows) + "\n")
    print(len(rows), "images")


if __name__ == "__main__":
    main(sys.argv)
