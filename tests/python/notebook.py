"""The Python package as a notebook uses it: installed from the wheel ./build.sh test builds, with
nothing else of the project at hand. Checks against NumPy, pandas and scikit-learn's digits
(outside data): an atlas from an array and a data frame, one from a folder of pictures alone, a
corpus read back as a data frame, and errors raised with the command's own message.

Run: python notebook.py WORK_DIR
"""
import json
import os
import sys
from pathlib import Path

import numpy as np
import pandas as pd
from PIL import Image
from sklearn.datasets import load_digits

import vitrine

work = Path(sys.argv[1])
work.mkdir(parents=True, exist_ok=True)
assert vitrine.__file__ and "site-packages" in vitrine.__file__, vitrine.__file__
print("vitrine", vitrine.__version__, "from", vitrine.__file__)

# 1. Vectors as an array, the catalogue as a data frame (in another order, matched by ids).
digits = load_digits()
ids = [f"d{i:04d}" for i in range(len(digits.target))]
names = ["zero", "one", "two", "three", "four", "five", "six", "seven", "eight", "nine"]
cat = pd.DataFrame({"id": ids, "digit": [names[t] for t in digits.target], "year": 1900 + digits.target * 3})
cat = cat.iloc[::-1].reset_index(drop=True)
atlas = vitrine.build(vectors=digits.data, ids=ids, catalogue=cat, out=work / "digits", epochs=30, no_copies=True)
manifest = json.load(open(atlas / "atlas.json"))
assert manifest["item_count"] == 1797, manifest["item_count"]
assert (atlas / "index.html").is_file(), "the viewer files are in the wheel"
assert any(f["name"] == "digit" for f in manifest["fields"])
print("atlas from an array and a data frame:", manifest["item_count"], "items")

# 2. A corpus as a data frame: the filter's rows are the catalogue's rows of that digit.
threes = vitrine.corpus(atlas, filter="digit=three", json=work / "threes.json")
assert len(threes) == int((digits.target == 3).sum()), len(threes)
assert set(threes["digit"]) == {"three"}
assert set(threes["id"]) == {i for i, t in zip(ids, digits.target) if t == 3}
again = vitrine.corpus(atlas, work / "threes.json")
assert again.equals(threes)
print("corpus as a data frame:", len(threes), "rows")

# 2b. A column of lists (keywords per record) is a field with several values per record: a filter
# on one value gives the records whose list holds it.
rng = np.random.default_rng(4)
words = ["curve", "loop", "stroke", "dot", "bar"]
cat["shapes"] = [sorted(set(rng.choice(words, size=rng.integers(1, 4)))) for _ in range(len(cat))]
atlas_k = vitrine.build(vectors=digits.data, ids=ids, catalogue=cat, out=work / "digits-k", epochs=30, no_copies=True)
field = next(f for f in json.load(open(atlas_k / "atlas.json"))["fields"] if f["name"] == "shapes")
assert field.get("multi_separator") == "|", field
loops = vitrine.corpus(atlas_k, filter="shapes=loop")
assert len(loops) == sum("loop" in s for s in cat["shapes"]), len(loops)
print("a column of lists:", len(loops), "records hold 'loop'")

# 3. Pictures alone: vectors by the built-in descriptor.
pics = work / "pictures"
pics.mkdir(exist_ok=True)
for i in range(16):
    Image.new("RGB", (48 + 4 * i, 40), (15 * i, 240 - 12 * i, 60 + 5 * i)).save(pics / f"p{i:02d}.png")
atlas2 = vitrine.build(images=pics, out=work / "pictures-atlas", save_vectors=work / "v.npz", no_thumb_cache=True)
saved = np.load(work / "v.npz")
assert saved["vectors"].shape == (16, 348), saved["vectors"].shape
assert sorted(map(str, saved["ids"])) == [f"p{i:02d}" for i in range(16)]
print("atlas from pictures alone:", saved["vectors"].shape)

# 4. Errors carry the command's message.
try:
    vitrine.build(vectors=digits.data[:10], out=work / "bad", k="many")
    raise AssertionError("a bad flag should raise")
except ValueError as e:
    assert "--k" in str(e), e
try:
    vitrine.build(vectors=work / "missing.npy", out=work / "bad")
    raise AssertionError("a missing file should raise")
except RuntimeError as e:
    assert "missing.npy" in str(e), e
print("errors raised with their messages")
print("notebook: ok")
