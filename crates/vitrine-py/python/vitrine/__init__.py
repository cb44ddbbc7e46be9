"""Vitrine from Python: build an atlas from arrays, data frames or a folder of pictures, and read a
corpus back as a data frame. The whole engine is inside this package (no separate program).

    import vitrine
    atlas = vitrine.build(vectors=X, catalogue=df, images="scans/", out="my-atlas")
    rows = vitrine.corpus(atlas, "corpus.json")          # a pandas DataFrame

Every other option of `vitrine build` / `vitrine corpus` is a keyword: `epochs=30`,
`model="model.onnx"`, `no_thumb_cache=True`, `filter=["maker=Anon", "place=Port"]`.
"""

import os
import tempfile
from pathlib import Path

from ._engine import __version__, run

__all__ = ["build", "corpus", "run", "__version__"]


def _flags(options):
    """Keyword options as command-line words: `no_copies=True` -> `--no-copies`; a list repeats
    the flag; False and None leave it out."""
    words = []
    for key, value in options.items():
        flag = "--" + key.replace("_", "-")
        if value is None or value is False:
            continue
        if value is True:
            words.append(flag)
        elif isinstance(value, (list, tuple)):
            for v in value:
                words += [flag, str(v)]
        else:
            words += [flag, os.fspath(value) if isinstance(value, os.PathLike) else str(value)]
    return words


def build(vectors=None, catalogue=None, images=None, out=None, *, ids=None, quiet=True, **options):
    """Builds an atlas folder at `out` and returns its path.

    vectors: a 2-D NumPy array (one row an item), a path to a vectors file (.npy, .npz,
        .safetensors, .parquet, .arrow), or None to compute them from `images`.
    catalogue: a pandas DataFrame with an id column (`id`, or `id_column=`), a path to a catalogue
        file, or None. Rows match the vectors in order, or by `ids`.
    ids: one id per vector row (for an array of vectors).
    images: a folder of pictures. out: where the atlas goes (replaced only when complete).
    """
    if out is None:
        raise ValueError("out: give the folder the atlas is written to")
    with tempfile.TemporaryDirectory(prefix="vitrine-") as tmp:
        words = ["build", "--out", os.fspath(out)]
        if vectors is not None:
            if isinstance(vectors, (str, os.PathLike)):
                words += ["--vectors", os.fspath(vectors)]
            else:
                import numpy as np

                array = np.asarray(vectors)
                if array.ndim != 2:
                    raise ValueError(f"vectors: a 2-D array, one row an item (this one has shape {array.shape})")
                path = os.path.join(tmp, "vectors.npy")
                np.save(path, np.ascontiguousarray(array))
                words += ["--vectors", path]
        if ids is not None:
            path = os.path.join(tmp, "ids.txt")
            with open(path, "w", encoding="utf-8") as f:
                for i in ids:
                    text = str(i)
                    if "\n" in text or "\r" in text:
                        raise ValueError(f"ids: {text!r} holds a line break")
                    f.write(text + "\n")
            words += ["--vector-ids", path]
        if catalogue is not None:
            if isinstance(catalogue, (str, os.PathLike)):
                words += ["--catalogue", os.fspath(catalogue)]
            else:
                path = os.path.join(tmp, "catalogue.csv")
                frame, listed = _joined_lists(catalogue)
                frame.to_csv(path, index=False, encoding="utf-8")
                words += ["--catalogue", path]
                # Columns of lists (keywords per record): several values per record.
                told = {str(v).split("=")[0] for v in _as_list(options.get("multi_valued"))}
                words += [f"--multi-valued={c}=|" for c in listed if c not in told]
        if images is not None:
            words += ["--images", os.fspath(images)]
        if quiet:
            words.append("--quiet")
        run(words + _flags(options))
    return Path(out)


def _as_list(v):
    if v is None:
        return []
    return list(v) if isinstance(v, (list, tuple)) else [v]


def _joined_lists(frame):
    """The DataFrame with cells that hold lists, tuples or sets joined by "|", and those columns."""
    listed = []
    out = frame
    for c in frame.columns:
        if frame[c].map(lambda x: isinstance(x, (list, tuple, set))).any():
            if out is frame:
                out = frame.copy()
            out[c] = frame[c].map(
                lambda x: "|".join(str(v) for v in x) if isinstance(x, (list, tuple, set)) else x
            )
            listed.append(str(c))
    return out, listed


def corpus(atlas, corpus_file=None, **options):
    """The catalogue rows of a corpus as a pandas DataFrame (every value as text, as catalogued):
    the corpus file's (saved in the viewer), narrowed or grown by `vitrine corpus`'s options
    (`filter=`, `ids=`, `date=`, `search=`, `lasso=`...). With neither, every item."""
    import pandas as pd

    with tempfile.TemporaryDirectory(prefix="vitrine-") as tmp:
        path = os.path.join(tmp, "corpus.csv")
        words = ["corpus", os.fspath(atlas), "--csv", path, "--csv-exact"]
        if corpus_file is not None:
            words += ["--from", os.fspath(corpus_file)]
        run(words + _flags(options))
        return pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8")
