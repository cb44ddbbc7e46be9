"""10-NN label accuracy of an atlas's neighbour graph (each item's 10 nearest by the atlas's own
neighbour lists, majority label, ties to the nearest), beside the same figure for a baseline
descriptor computed here: the picture at 16 x 16 in grey, standardised ("tiny images", after
"80 Million Tiny Images", IEEE TPAMI 2008), its exact neighbours by scikit-learn's NearestNeighbors.

Run: python score.py DIR   (DIR holds catalogue.csv, images/ and atlas/)
Prints: atlas-accuracy baseline-accuracy items
"""
import collections
import csv
import json
import os
import sys

import numpy as np
from PIL import Image
from sklearn.neighbors import NearestNeighbors

K = 10


def vote(labels, nearest):
    c = collections.Counter(labels[j] for j in nearest)
    top = max(c.values())
    for j in nearest:  # ties go to the nearest
        if c[labels[j]] == top:
            return labels[j]


def atlas_accuracy(d, label_of):
    atlas = os.path.join(d, "atlas")
    m = json.load(open(os.path.join(atlas, "atlas.json")))
    arr = lambda ref, dt: np.fromfile(os.path.join(atlas, ref["file"]), dtype=dt)
    off = arr(m["ids"], "<u4")
    txt = open(os.path.join(atlas, m["ids_text"]["file"]), "rb").read()
    ids = [txt[off[i]:off[i + 1]].decode() for i in range(len(off) - 1)]
    labels = [label_of[i] for i in ids]
    nb = m["neighbours"]
    k = nb["k"]
    lists = np.concatenate([arr(c["ids"], "<u4") for c in nb["chunks"]]).reshape(-1, k)
    assert k >= K and len(lists) == len(ids)
    right = sum(vote(labels, [j for j in lists[i][:K] if j != 0xFFFFFFFF]) == labels[i] for i in range(len(ids)))
    return right / len(ids)


def baseline_accuracy(d, rows):
    x = []
    for ident, _ in rows:
        g = np.asarray(Image.open(os.path.join(d, "images", ident + ".jpg")).convert("L").resize((16, 16), Image.BOX), float).ravel()
        x.append((g - g.mean()) / (g.std() + 1e-6))
    x = np.array(x)
    _, idx = NearestNeighbors(n_neighbors=K + 1).fit(x).kneighbors(x)
    labels = [r[1] for r in rows]
    right = sum(vote(labels, [j for j in idx[i] if j != i][:K]) == labels[i] for i in range(len(rows)))
    return right / len(rows)


def main():
    d = sys.argv[1]
    rows = [(r["id"], r["label"]) for r in csv.DictReader(open(os.path.join(d, "catalogue.csv")))]
    label_of = dict(rows)
    print(f"{atlas_accuracy(d, label_of):.4f} {baseline_accuracy(d, rows):.4f} {len(rows)}")


if __name__ == "__main__":
    main()
