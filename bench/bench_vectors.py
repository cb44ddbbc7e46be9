#!/usr/bin/env python3
"""Vectors from the pictures: speed of each engine in a build, and the ONNX engine against
onnxruntime on the same model.

Sets (made once, cached): the "details" set of tests/from_images/make_sets.py (800 crops of
scikit-image's photographs, 100-500 px JPEGs) and the "digits" set (1,797 small JPEGs, the tidy
case). Model: a network of ResNet-18's shape (a 7 x 7 stem, four stages of two residual blocks with
64-512 channels, global average; 1.8 GFLOPs a picture at 224 px) with seeded random weights,
written with the `onnx` package — the speed of a real ResNet-18, not its accuracy.

For each set: `vitrine build` with the built-in descriptor and with `--model` (its "vectors from
images" lap: decode, thumbnail and engine together; no thumbnail cache, no copies), and
onnxruntime running the same model with as many threads as cores, in batches of 1 and of 8 (the
faster counts; model time only, inputs made beforehand). Prints images per second and the
ratio onnxruntime / vitrine.

Then what each engine is for, measured: 10-NN label accuracy on digits held out from training
(the second half of scikit-learn's digits, drawn with other inks and papers) for the built-in
descriptor and for a small network trained here on the first half (scikit-learn's MLPClassifier,
exported to ONNX, its hidden layer as the vector) run through `--model`.

Run: ./build.sh bench-vectors [--sets details,digits]
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent


def log(msg):
    print(f"[bench-vectors] {msg}", file=sys.stderr, flush=True)


def resnet18_shape(path, seed=3):
    import onnx
    from onnx import TensorProto, helper, numpy_helper

    g = np.random.default_rng(seed)
    nodes, inits = [], []
    count = [0]

    def conv(x, cin, cout, k, s, relu=True, gain=1.0):
        count[0] += 1
        n = f"c{count[0]}"
        w = (g.normal(0, np.sqrt(2.0 / (cin * k * k)), (cout, cin, k, k)) * gain).astype(np.float32)
        inits.append(numpy_helper.from_array(w, n + "w"))
        inits.append(numpy_helper.from_array(np.zeros(cout, np.float32), n + "b"))
        p = k // 2
        nodes.append(helper.make_node("Conv", [x, n + "w", n + "b"], [n], kernel_shape=[k, k], strides=[s, s], pads=[p, p, p, p]))
        if relu:
            nodes.append(helper.make_node("Relu", [n], [n + "r"]))
            return n + "r"
        return n

    x = conv("pixels", 3, 64, 7, 2)
    nodes.append(helper.make_node("MaxPool", [x], ["pool"], kernel_shape=[3, 3], strides=[2, 2], pads=[1, 1, 1, 1]))
    x, cin = "pool", 64
    for cout, stride in [(64, 1), (128, 2), (256, 2), (512, 2)]:
        for b in range(2):
            s = stride if b == 0 else 1
            y = conv(x, cin, cout, 3, s)
            y = conv(y, cout, cout, 3, 1, relu=False, gain=0.5)
            short = x if (s == 1 and cin == cout) else conv(x, cin, cout, 1, s, relu=False)
            count[0] += 1
            a = f"add{count[0]}"
            nodes.append(helper.make_node("Add", [y, short], [a]))
            nodes.append(helper.make_node("Relu", [a], [a + "r"]))
            x, cin = a + "r", cout
    nodes.append(helper.make_node("GlobalAveragePool", [x], ["gap"]))
    nodes.append(helper.make_node("Flatten", ["gap"], ["embedding"], axis=1))
    inp = helper.make_tensor_value_info("pixels", TensorProto.FLOAT, ["N", 3, 224, 224])
    out = helper.make_tensor_value_info("embedding", TensorProto.FLOAT, ["N", 512])
    m = helper.make_model(helper.make_graph(nodes, "resnet18-shape", [inp], [out], inits), opset_imports=[helper.make_opsetid("", 13)])
    onnx.checker.check_model(m)
    onnx.save(m, path)


def vitrine_rate(vitrine, viewer, d, extra):
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / "atlas"
        cmd = [vitrine, "build", "--quiet", "--images", str(d / "images"), "--catalogue", str(d / "catalogue.csv"),
               "--out", str(out), "--no-thumb-cache", "--no-copies", "--epochs", "30"] + extra
        if viewer:
            cmd += ["--viewer", viewer]
        subprocess.run(cmd, check=True)
        report = json.load(open(out / "build-report.json"))
        secs = dict(report["stages"])["vectors from images"]
        return report["items"] / secs


def onnxruntime_rate(model, n, threads):
    """onnxruntime's best rate over batches of 1 and 8, all cores on one run."""
    import onnxruntime as ort

    opts = ort.SessionOptions()
    opts.intra_op_num_threads = threads
    sess = ort.InferenceSession(model, opts, providers=["CPUExecutionProvider"])
    best = 0.0
    for b in (1, 8):
        batch = np.random.default_rng(0).normal(0, 1, (b, 3, 224, 224)).astype(np.float32)
        sess.run(None, {"pixels": batch})
        t = time.perf_counter()
        done = 0
        while done < n:
            sess.run(None, {"pixels": batch})
            done += b
        best = max(best, done / (time.perf_counter() - t))
    return best


def trained_digit_model(path, train_dir, n_train):
    """A small network trained here (scikit-learn's MLPClassifier, 1024-128-64-10) on the first
    `n_train` pictures of a digits set, written as an ONNX model whose output is its 64-value
    hidden layer: [N, 3, 32, 32] in 0..1 -> channel mean -> two dense layers with ReLU."""
    import csv

    import onnx
    from onnx import TensorProto, helper, numpy_helper
    from PIL import Image
    from sklearn.neural_network import MLPClassifier

    rows = list(csv.DictReader(open(train_dir / "catalogue.csv")))[:n_train]
    x = np.array([
        np.asarray(Image.open(train_dir / "images" / (r["id"] + ".jpg")).convert("RGB").resize((32, 32), Image.LANCZOS), np.float32).mean(axis=2).ravel() / 255.0
        for r in rows
    ])
    y = [r["label"] for r in rows]
    mlp = MLPClassifier(hidden_layer_sizes=(128, 64), max_iter=400, random_state=0).fit(x, y)
    w1, w2 = mlp.coefs_[0].astype(np.float32), mlp.coefs_[1].astype(np.float32)
    b1, b2 = mlp.intercepts_[0].astype(np.float32), mlp.intercepts_[1].astype(np.float32)
    nodes = [
        helper.make_node("ReduceMean", ["pixels"], ["grey"], axes=[1], keepdims=0),
        helper.make_node("Flatten", ["grey"], ["flat"], axis=1),
        helper.make_node("Gemm", ["flat", "w1", "b1"], ["h1"]),
        helper.make_node("Relu", ["h1"], ["r1"]),
        helper.make_node("Gemm", ["r1", "w2", "b2"], ["h2"]),
        helper.make_node("Relu", ["h2"], ["embedding"]),
    ]
    inits = [numpy_helper.from_array(a, n) for a, n in [(w1, "w1"), (b1, "b1"), (w2, "w2"), (b2, "b2")]]
    graph = helper.make_graph(
        nodes, "digits-mlp",
        [helper.make_tensor_value_info("pixels", TensorProto.FLOAT, ["N", 3, 32, 32])],
        [helper.make_tensor_value_info("embedding", TensorProto.FLOAT, ["N", 64])], inits)
    m = helper.make_model(graph, opset_imports=[helper.make_opsetid("", 13)])
    onnx.checker.check_model(m)
    onnx.save(m, path)


def held_out(src, dst, start):
    """The pictures of `src` from row `start` on, as a set of their own."""
    import csv
    import shutil

    (dst / "images").mkdir(parents=True, exist_ok=True)
    rows = list(csv.DictReader(open(src / "catalogue.csv")))[start:]
    with open(dst / "catalogue.csv", "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["id", "label"])
        for r in rows:
            shutil.copy(src / "images" / (r["id"] + ".jpg"), dst / "images" / (r["id"] + ".jpg"))
            w.writerow([r["id"], r["label"]])


def accuracy(vitrine, viewer, cache):
    """10-NN label accuracy on digits held out from training (the second half, drawn with other
    inks, papers and shifts): the built-in descriptor against a model trained on the first half."""
    train, test = cache / "digits", cache / "digits-held-out"
    other = cache / "digits-seed2"
    if not (other / "catalogue.csv").exists():
        subprocess.run([sys.executable, str(ROOT / "tests/from_images/make_sets.py"), str(other), "digits", "2"], check=True)
    if not (test / "catalogue.csv").exists():
        held_out(other, test, 900)
    model = cache / "digits-mlp.onnx"
    if not model.exists():
        log("training the digits network on the first 900 pictures (seed 1)")
        trained_digit_model(str(model), train, 900)
    out = {}
    for name, extra in [("built-in descriptor", []),
                        ("trained network (--model)", ["--model", str(model), "--model-mean", "0,0,0", "--model-std", "1,1,1"])]:
        cmd = [vitrine, "build", "--quiet", "--images", str(test / "images"), "--catalogue", str(test / "catalogue.csv"),
               "--out", str(test / "atlas"), "--no-thumb-cache", "--no-copies", "--epochs", "30"] + extra
        if viewer:
            cmd += ["--viewer", viewer]
        subprocess.run(cmd, check=True)
        said = subprocess.run([sys.executable, str(ROOT / "tests/from_images/score.py"), str(test)], check=True,
                              capture_output=True, text=True).stdout.split()
        out[name] = (float(said[0]), float(said[1]), int(said[2]))
    return out


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--vitrine", required=True)
    ap.add_argument("--viewer", default=None)
    ap.add_argument("--sets", default="details,digits")
    ap.add_argument("--cache", default=os.path.expanduser("~/.cache/vitrine/bench-vectors"))
    a = ap.parse_args()
    cache = Path(a.cache)
    cache.mkdir(parents=True, exist_ok=True)
    model = cache / "resnet18-shape.onnx"
    if not model.exists():
        log("writing the ResNet-18-shaped model")
        resnet18_shape(str(model))
    threads = os.cpu_count() or 1
    rows = []
    for name in a.sets.split(","):
        d = cache / name
        if not (d / "catalogue.csv").exists():
            log(f"making the {name} set")
            subprocess.run([sys.executable, str(ROOT / "tests/from_images/make_sets.py"), str(d), name, "1"], check=True)
        n = sum(1 for _ in open(d / "catalogue.csv")) - 1
        log(f"{name}: built-in descriptor")
        builtin = vitrine_rate(a.vitrine, a.viewer, d, [])
        log(f"{name}: --model (ResNet-18 shape, 224 px)")
        onnx_rate = vitrine_rate(a.vitrine, a.viewer, d, ["--model", str(model)])
        rows.append((name, n, builtin, onnx_rate))
    log("accuracy on held-out digits")
    acc = accuracy(a.vitrine, a.viewer, cache)
    log("onnxruntime on the same model")
    ort_rate = onnxruntime_rate(str(model), 96, threads)
    print(f"\nvectors from the pictures, images per second on {threads} cores (decode, thumbnail and engine):")
    print(f"{'set':10} {'items':>6} {'built-in':>10} {'--model':>9} {'onnxruntime (model only)':>26} {'ratio':>6}")
    for name, n, b, o in rows:
        print(f"{name:10} {n:>6} {b:>10.0f} {o:>9.1f} {ort_rate:>26.1f} {ort_rate / o:>6.2f}")
    print("\n10-NN label accuracy on 897 digits held out from training (seed-2 drawings of digits 900-1796):")
    for name, (ours, baseline, n) in acc.items():
        print(f"  {name:28} {ours:.4f}   (tiny-image baseline {baseline:.4f}, {n} items)")


if __name__ == "__main__":
    main()
