"""Small ONNX image models for testing `vitrine build --model`, written with the `onnx` package's
helpers (seeded random weights; no download), and their outputs by `onnxruntime` as the reference.

Models written into DIR:
- cnn.onnx: input "pixels" [N, 3, 64, 64]; two 3 x 3 convolutions with stride 2 and ReLU; outputs
  "embedding" [N, 24] (global average, then a dense layer; the first output) and "features"
  [N, 16, 16, 16] (the last feature map).
- cnn_last.onnx: the same network taking [N, 64, 64, 3] (channels last).
- open_size.onnx: input [N, 3, H, W] with H and W left open; output [N, 16].
- flat.onnx: input [N, 64]: not an image model.

Run: python make_model.py DIR                      writes the models
     python make_model.py DIR reference MODEL OUTPUT IMAGES_DIR IDS_FILE SIZE
                                                   prints, per id, the model's vector by onnxruntime
                                                   (pictures scaled to cover SIZE, centre cut, ImageNet
                                                   mean and std), as JSON lines
"""
import json
import os
import sys

import numpy as np
import onnx
from onnx import TensorProto, helper, numpy_helper

MEAN = np.array([0.485, 0.456, 0.406], np.float32)
STD = np.array([0.229, 0.224, 0.225], np.float32)


def weights(g, name, shape, scale=None):
    fan_in = int(np.prod(shape[1:])) if len(shape) > 1 else shape[0]
    w = g.normal(0, scale or np.sqrt(2.0 / fan_in), shape).astype(np.float32)
    return numpy_helper.from_array(w, name)


def cnn(g, channels_last=False, open_size=False):
    nodes, inits = [], []
    h = w = 64
    if open_size:
        inp = helper.make_tensor_value_info("pixels", TensorProto.FLOAT, ["N", 3, "H", "W"])
    elif channels_last:
        inp = helper.make_tensor_value_info("pixels", TensorProto.FLOAT, ["N", h, w, 3])
    else:
        inp = helper.make_tensor_value_info("pixels", TensorProto.FLOAT, ["N", 3, h, w])
    x = "pixels"
    if channels_last:
        nodes.append(helper.make_node("Transpose", [x], ["nchw"], perm=[0, 3, 1, 2]))
        x = "nchw"
    inits += [weights(g, "w1", (8, 3, 3, 3)), numpy_helper.from_array(g.normal(0, 0.1, 8).astype(np.float32), "b1")]
    nodes.append(helper.make_node("Conv", [x, "w1", "b1"], ["c1"], kernel_shape=[3, 3], strides=[2, 2], pads=[1, 1, 1, 1]))
    nodes.append(helper.make_node("Relu", ["c1"], ["r1"]))
    inits += [weights(g, "w2", (16, 8, 3, 3)), numpy_helper.from_array(g.normal(0, 0.1, 16).astype(np.float32), "b2")]
    nodes.append(helper.make_node("Conv", ["r1", "w2", "b2"], ["c2"], kernel_shape=[3, 3], strides=[2, 2], pads=[1, 1, 1, 1]))
    nodes.append(helper.make_node("Relu", ["c2"], ["features"]))
    nodes.append(helper.make_node("GlobalAveragePool", ["features"], ["pooled"]))
    nodes.append(helper.make_node("Flatten", ["pooled"], ["flat"], axis=1))
    outs = 16 if open_size else 24
    inits += [weights(g, "w3", (outs, 16)), numpy_helper.from_array(g.normal(0, 0.1, outs).astype(np.float32), "b3")]
    nodes.append(helper.make_node("Gemm", ["flat", "w3", "b3"], ["embedding"], transB=1))
    outputs = [helper.make_tensor_value_info("embedding", TensorProto.FLOAT, ["N", outs])]
    if not open_size:
        outputs.append(helper.make_tensor_value_info("features", TensorProto.FLOAT, ["N", 16, h // 4, w // 4]))
    graph = helper.make_graph(nodes, "picture-features", [inp], outputs, inits)
    return helper.make_model(graph, opset_imports=[helper.make_opsetid("", 13)])


def flat(g):
    inp = helper.make_tensor_value_info("values", TensorProto.FLOAT, ["N", 64])
    out = helper.make_tensor_value_info("out", TensorProto.FLOAT, ["N", 8])
    node = helper.make_node("Gemm", ["values", "w", "b"], ["out"], transB=1)
    graph = helper.make_graph([node], "flat", [inp], [out], [weights(g, "w", (8, 64)), numpy_helper.from_array(np.zeros(8, np.float32), "b")])
    return helper.make_model(graph, opset_imports=[helper.make_opsetid("", 13)])


def write(d):
    os.makedirs(d, exist_ok=True)
    for name, make in [("cnn", lambda g: cnn(g)), ("cnn_last", lambda g: cnn(g, channels_last=True)),
                       ("open_size", lambda g: cnn(g, open_size=True)), ("flat", flat)]:
        m = make(np.random.default_rng(5))
        onnx.checker.check_model(m)
        onnx.save(m, os.path.join(d, name + ".onnx"))


def cover(img, side):
    from PIL import Image

    w, h = img.size
    s = max(side / w, side / h)
    if (w, h) != (side, side):
        sw, sh = max(side, round(w * s)), max(side, round(h * s))
        img = img.resize((sw, sh), Image.LANCZOS)
        l, t = (sw - side) // 2, (sh - side) // 2
        img = img.crop((l, t, l + side, t + side))
    return img


def reference(model, output, images, ids_file, side):
    import onnxruntime as ort
    from PIL import Image

    sess = ort.InferenceSession(model, providers=["CPUExecutionProvider"])
    inp = sess.get_inputs()[0]
    last = inp.shape[-1] == 3
    for ident in open(ids_file).read().split():
        img = cover(Image.open(os.path.join(images, ident + ".png")).convert("RGB"), side)
        x = ((np.asarray(img, np.float32) / 255.0 - MEAN) / STD)[None]
        if not last:
            x = x.transpose(0, 3, 1, 2)
        (y,) = sess.run([output], {inp.name: np.ascontiguousarray(x)})
        v = y[0]
        if v.ndim == 3:
            v = v.mean(axis=(1, 2))
        print(json.dumps({"id": ident, "vector": [float(a) for a in v]}))


if __name__ == "__main__":
    if len(sys.argv) > 2 and sys.argv[2] == "reference":
        reference(sys.argv[3], sys.argv[4], sys.argv[5], sys.argv[6], int(sys.argv[7]))
    else:
        write(sys.argv[1])
