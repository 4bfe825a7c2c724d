"""Inside a model's reversal cell (cell 1) on the reversing-bar protocol (docs/performance.md,
session 12): for each first-layer channel, its mean output over the central 20 x 20 positions
while the bar moves right (the 40 frames before the reversal) and left (frames 30 to 70 after
it, once the filters' 400 ms memory holds leftward motion only), their
direction-selectivity index (right - left) / (right + left) and how often it is active
anywhere; for each second-layer unit that cell 1 reads, its readout-weighted contribution to
cell 1 in the protocol's smooth-motion and reversal windows, and the sum of its kernel on each
first-layer channel (a planted reversal unit reads one direction, +8, and its delayed copy, -8;
a unit that reads both directions cancels at the reversal). Works on the planted and on fitted
models (two convolutions, a dense readout; the hidden nonlinearities are the graph's Relu or
Softplus nodes).

    sufficit stimulus reversing-bar reversal_um=1550 --model MODEL --out STIM
    python3 scripts/reversal_cell_units.py MODEL STIM    # numpy, onnx, onnxruntime
"""

import json
import sys

import numpy as np
import onnx
import onnxruntime as ort
from onnx import numpy_helper

LAGS = 40
CELL = 1


def main():
    path, stim = sys.argv[1], sys.argv[2]
    model = onnx.load(path)
    hidden = [n.output[0] for n in model.graph.node if n.op_type in ("Relu", "Softplus")][:2]
    for name in hidden:
        model.graph.output.extend([onnx.helper.make_tensor_value_info(name, onnx.TensorProto.FLOAT, None)])
    session = ort.InferenceSession(model.SerializeToString())
    weights = {i.name: numpy_helper.to_array(i) for i in model.graph.initializer}
    readout = next(v for k, v in weights.items() if k.startswith("readout") and v.ndim == 2)
    conv2 = weights["conv2.weight"]
    movie = np.load(f"{stim}/movie.npy").astype(np.float32)
    windows = {w["name"]: (w["start"], w["end"]) for w in json.load(open(f"{stim}/stimulus.json"))["windows"]}
    x = np.stack([movie[t - LAGS + 1 : t + 1] for t in range(LAGS - 1, movie.shape[0])])
    _, layer1, layer2 = session.run(None, {session.get_inputs()[0].name: x})
    frame = lambda t: t - (LAGS - 1)  # row of protocol frame t
    reversal = windows["reversal"][0]
    c = layer1.shape[2] // 2
    print(f"{path}: first layer (bar moving right, then left)")
    for k in range(layer1.shape[1]):
        a = layer1[:, k, c - 10 : c + 10, c - 10 : c + 10].mean(axis=(1, 2))
        right, left = a[frame(reversal - 40) : frame(reversal)].mean(), a[frame(reversal + 30) : frame(reversal + 70)].mean()
        dsi = (right - left) / (right + left) if right + left > 0 else 0.0
        active = (layer1[:, k].max(axis=(1, 2)) > 0).mean()
        print(f"  channel {k}: right {right:.3f}, left {left:.3f}, DSI {dsi:+.2f}, active on {100 * active:.0f} % of frames")
    per = layer2.shape[2] * layer2.shape[3]
    print(f"{path}: second-layer units read by cell {CELL} (readout-weighted contribution)")
    for u in range(layer2.shape[1]):
        w = readout[CELL, u * per : (u + 1) * per].reshape(layer2.shape[2:])
        if np.abs(w).sum() < 1e-6:
            continue
        contribution = (layer2[:, u] * w).sum(axis=(1, 2))
        mean = lambda name: contribution[frame(windows[name][0]) : frame(windows[name][1])].mean()
        active = (layer2[:, u].max(axis=(1, 2)) > 0).mean()
        print(f"  unit {u}: readout sum {w.sum():+.3f}, smooth {mean('smooth'):+.3f}, reversal {mean('reversal'):+.3f}, active on {100 * active:.0f} % of frames")
        sums = " ".join(f"{conv2[u, k].sum():+.1f}" for k in range(conv2.shape[1]))
        print(f"    kernel sum per first-layer channel: {sums}; bias {weights['conv2.bias'][u]:+.2f}")
    print(f"onnxruntime {ort.__version__}, numpy {np.__version__}")


if __name__ == "__main__":
    main()
