#!/usr/bin/env python3
"""Write the reference ONNX models and the values an outside implementation computes for them.

Used by tests/reference_models.rs. Each model is written with the ONNX Python helper, run by
onnxruntime (forward reference), and re-implemented in JAX (float64) for gradient references:
d(sum over the batch of one output cell)/d(input) and /d(one hidden activation). The JAX forward
is checked against onnxruntime before anything is written, so the JAX mirror is faithful.

    pip install onnx==1.23.2 onnxruntime==1.32.0 "jax[cpu]==0.10.2" numpy
    python3 scripts/make_reference_models.py   # writes tests/fixtures/{models,reference}/

The weights are random (seeded): these are test artefacts, not models of any neuron.
"""
import json
import os

import jax
import jax.numpy as jnp
import numpy as np
import onnx
import onnxruntime as ort
from onnx import TensorProto, helper, numpy_helper

jax.config.update("jax_enable_x64", True)
ROOT = os.path.join(os.path.dirname(__file__), "..", "tests", "fixtures")
RNG = np.random.default_rng(20261201)


def w(*shape, scale=None):
    fan_in = int(np.prod(shape[1:])) if len(shape) > 1 else shape[0]
    s = scale if scale is not None else 1.0 / np.sqrt(fan_in)
    return (RNG.standard_normal(shape) * s).astype(np.float32)


def init(name, array):
    return numpy_helper.from_array(np.asarray(array), name)


def conv(x, k, b=None, stride=1, pads=None, dilation=1):
    """ONNX Conv (cross-correlation), NC+spatial layout, in JAX."""
    nsp = k.ndim - 2
    pads = pads or [0] * (2 * nsp)
    padding = [(pads[i], pads[i + nsp]) for i in range(nsp)]
    dn = jax.lax.conv_dimension_numbers(x.shape, k.shape, ("NC" + "DHW"[-nsp:], "OI" + "DHW"[-nsp:], "NC" + "DHW"[-nsp:]))
    y = jax.lax.conv_general_dilated(x, k, (stride,) * nsp, padding, rhs_dilation=(dilation,) * nsp, dimension_numbers=dn)
    if b is not None:
        y = y + b.reshape((1, -1) + (1,) * nsp)
    return y


def softplus(x):
    return jnp.logaddexp(x, 0.0)


def write(name, graph, opset, inputs_np, jax_forward, hidden, cell, note):
    model = helper.make_model(graph, opset_imports=[helper.make_opsetid("", opset)], producer_name="sufficit-fixtures")
    model.ir_version = 8
    onnx.checker.check_model(model, full_check=True)
    os.makedirs(os.path.join(ROOT, "models"), exist_ok=True)
    os.makedirs(os.path.join(ROOT, "reference"), exist_ok=True)
    path = os.path.join(ROOT, "models", name + ".onnx")
    onnx.save(model, path)

    sess = ort.InferenceSession(path, providers=["CPUExecutionProvider"])
    (ort_out,) = sess.run(None, {graph.input[0].name: inputs_np})

    x64 = jnp.asarray(inputs_np, dtype=jnp.float64)
    to_hidden, from_hidden = jax_forward
    h = to_hidden(x64)
    y = from_hidden(h)
    err = np.max(np.abs(np.asarray(y) - ort_out)) / max(1e-12, np.max(np.abs(ort_out)))
    assert err < 1e-5, f"{name}: JAX mirror differs from onnxruntime by {err}"

    target = lambda out: jnp.sum(out[:, cell])
    g_input = jax.grad(lambda x: target(from_hidden(to_hidden(x))))(x64)
    g_hidden = jax.grad(lambda hh: target(from_hidden(hh)))(h)
    ref = {
        "model": name + ".onnx",
        "note": note,
        "generated_by": "scripts/make_reference_models.py",
        "libraries": {"onnx": onnx.__version__, "onnxruntime": ort.__version__, "jax": jax.__version__, "numpy": np.__version__},
        "input_shape": list(inputs_np.shape),
        "input": inputs_np.ravel().tolist(),
        "output_shape": list(ort_out.shape),
        "output_onnxruntime": ort_out.ravel().tolist(),
        "cell": cell,
        "target": "sum over the batch of output[:, cell]",
        "grad_input_jax_f64": np.asarray(g_input).ravel().tolist(),
        "hidden": hidden,
        "hidden_shape": list(h.shape),
        "grad_hidden_jax_f64": np.asarray(g_hidden).ravel().tolist(),
    }
    with open(os.path.join(ROOT, "reference", name + ".json"), "w") as f:
        json.dump(ref, f)
    print(f"{name}: onnxruntime vs JAX max rel diff {err:.2e}")


def vi(name, dims):
    return helper.make_tensor_value_info(name, TensorProto.FLOAT, dims)


def pytorch_style():
    """Conv -> BatchNorm -> Relu -> Shape/Gather/Unsqueeze/Concat/Reshape flatten -> Gemm -> Softplus."""
    L, H, W, C1, CELLS = 8, 14, 14, 4, 5
    k1, b1 = w(C1, L, 5, 5), w(C1, scale=0.1)
    scale, bias = (1 + 0.2 * RNG.standard_normal(C1)).astype(np.float32), w(C1, scale=0.1)
    mean, var = w(C1, scale=0.1), (0.5 + RNG.random(C1)).astype(np.float32)
    flat = C1 * 10 * 10
    k2, b2 = w(CELLS, flat), w(CELLS, scale=0.1)
    nodes = [
        helper.make_node("Conv", ["x", "conv1.weight", "conv1.bias"], ["conv1_out"], name="conv1", pads=[0, 0, 0, 0]),
        helper.make_node("BatchNormalization", ["conv1_out", "bn1.weight", "bn1.bias", "bn1.running_mean", "bn1.running_var"], ["bn1_out"], name="bn1", epsilon=1e-5),
        helper.make_node("Relu", ["bn1_out"], ["relu1"], name="relu1"),
        helper.make_node("Shape", ["relu1"], ["shape_out"], name="shape"),
        helper.make_node("Gather", ["shape_out", "zero"], ["batch"], name="gather", axis=0),
        helper.make_node("Unsqueeze", ["batch", "axes0"], ["batch_1d"], name="unsqueeze"),
        helper.make_node("Concat", ["batch_1d", "minus_one"], ["flat_shape"], name="concat", axis=0),
        helper.make_node("Reshape", ["relu1", "flat_shape"], ["flat"], name="flatten"),
        helper.make_node("Gemm", ["flat", "readout.weight", "readout.bias"], ["gemm_out"], name="readout", transB=1),
        helper.make_node("Softplus", ["gemm_out"], ["rates"], name="softplus"),
    ]
    inits = [
        init("conv1.weight", k1), init("conv1.bias", b1), init("bn1.weight", scale), init("bn1.bias", bias),
        init("bn1.running_mean", mean), init("bn1.running_var", var), init("zero", np.array(0, np.int64)),
        init("axes0", np.array([0], np.int64)), init("minus_one", np.array([-1], np.int64)),
        init("readout.weight", k2), init("readout.bias", b2),
    ]
    graph = helper.make_graph(nodes, "pytorch_style", [vi("x", ["batch", L, H, W])], [vi("rates", ["batch", CELLS])], inits)

    def to_hidden(x):
        y = conv(x, jnp.asarray(k1, jnp.float64), jnp.asarray(b1, jnp.float64))
        g = (scale / np.sqrt(var + 1e-5)).reshape(1, -1, 1, 1)
        y = (y - mean.reshape(1, -1, 1, 1)) * g + bias.reshape(1, -1, 1, 1)
        return jnp.maximum(y, 0.0)

    def from_hidden(h):
        return softplus(h.reshape(h.shape[0], -1) @ k2.T.astype(np.float64) + b2)

    x = RNG.standard_normal((3, L, H, W)).astype(np.float32)
    write("pytorch_style", graph, 13, x, (to_hidden, from_hidden), "relu1", 2,
          "PyTorch-export shape: Conv+BatchNorm+Relu, Shape->Gather->Unsqueeze->Concat->Reshape flatten, Gemm(transB)+Softplus, symbolic batch")
    attribution_reference("pytorch_style", x, to_hidden, from_hidden, cell=2, steps=8)


def attribution_reference(name, x_np, to_hidden, from_hidden, cell, steps):
    """Layer conductance (Dhamdhere et al. 2019) at the hidden layer and input integrated
    gradients (Sundararajan et al. 2017) on the straight path from a zero (gray) baseline, with
    the midpoint rule: C = sum_k dF/dy(mid_k) * (y(a_k+1) - y(a_k)); IG = x * mean_k dF/dx(mid_k).
    F = sum over the windows (batch) of output[:, cell]."""
    x = jnp.asarray(x_np, dtype=jnp.float64)
    target = lambda out: jnp.sum(out[:, cell])
    f_of_y = lambda y: target(from_hidden(y))
    f_of_x = lambda xx: target(from_hidden(to_hidden(xx)))
    grad_y = jax.grad(f_of_y)
    grad_x = jax.grad(f_of_x)
    cond = jnp.zeros(to_hidden(x).shape)
    ig = jnp.zeros(x.shape)
    for k in range(steps):
        a0, a1, am = k / steps, (k + 1) / steps, (k + 0.5) / steps
        cond = cond + grad_y(to_hidden(am * x)) * (to_hidden(a1 * x) - to_hidden(a0 * x))
        ig = ig + grad_x(am * x) / steps
    ig = ig * x
    per_channel = np.asarray(jnp.sum(cond, axis=(0, 2, 3)))
    ref = {
        "model": name + ".onnx",
        "generated_by": "scripts/make_reference_models.py",
        "libraries": {"jax": jax.__version__, "numpy": np.__version__},
        "method": "midpoint rule, zero baseline, target = sum over windows of output[:, cell]",
        "cell": cell,
        "steps": steps,
        "input_shape": list(x_np.shape),
        "input": x_np.ravel().tolist(),
        "conductance_per_channel": per_channel.tolist(),
        "conductance_per_window_channel": np.asarray(jnp.sum(cond, axis=(2, 3))).tolist(),
        "input_ig": np.asarray(ig).ravel().tolist(),
        "f_input": float(f_of_x(x)),
        "f_baseline": float(f_of_x(jnp.zeros_like(x))),
    }
    with open(os.path.join(ROOT, "reference", name + "_attribution.json"), "w") as f:
        json.dump(ref, f)
    print(f"{name}: conductance reference, sum {per_channel.sum():.6f} vs dF {ref['f_input'] - ref['f_baseline']:.6f}")


def lags_last_fixed_batch():
    """Channels-last [1, H, W, L] with a Transpose at the input and a Reshape [1, -1] baked in."""
    H, W, L, C1, CELLS = 12, 12, 6, 3, 4
    k1, b1 = w(C1, L, 3, 3), w(C1, scale=0.1)
    k2, b2 = w(C1 * 12 * 12, CELLS), w(CELLS, scale=0.1)
    nodes = [
        helper.make_node("Transpose", ["x"], ["x_nchw"], name="to_channels_first", perm=[0, 3, 1, 2]),
        helper.make_node("Conv", ["x_nchw", "k1", "b1"], ["c1"], name="conv", pads=[1, 1, 1, 1]),
        helper.make_node("Elu", ["c1"], ["elu1"], name="elu", alpha=1.0),
        helper.make_node("Reshape", ["elu1", "shape"], ["flat"], name="flatten"),
        helper.make_node("MatMul", ["flat", "k2"], ["mm"], name="dense"),
        helper.make_node("Add", ["mm", "b2"], ["lin"], name="dense_bias"),
        helper.make_node("Exp", ["lin"], ["rates"], name="exp"),
    ]
    inits = [init("k1", k1), init("b1", b1), init("shape", np.array([1, -1], np.int64)), init("k2", k2), init("b2", b2)]
    graph = helper.make_graph(nodes, "lags_last", [vi("x", [1, H, W, L])], [vi("rates", [1, CELLS])], inits)

    def to_hidden(x):
        y = conv(jnp.transpose(x, (0, 3, 1, 2)), jnp.asarray(k1, jnp.float64), jnp.asarray(b1, jnp.float64), pads=[1, 1, 1, 1])
        return jnp.where(y >= 0, y, jnp.expm1(jnp.minimum(y, 0.0)))

    def from_hidden(h):
        return jnp.exp(h.reshape(h.shape[0], -1) @ k2.astype(np.float64) + b2)

    x = (0.5 * RNG.standard_normal((1, H, W, L))).astype(np.float32)
    write("lags_last_fixed_batch", graph, 13, x, (to_hidden, from_hidden), "elu1", 1,
          "channels-last input with a Transpose, fixed batch 1 and a baked Reshape [1, -1] (Keras-style export)")


def volume():
    """3-D convolution over [N, 1, L, H, W]."""
    L, H, W, CELLS = 6, 10, 10, 2
    k1, b1 = w(3, 1, 3, 3, 3), w(3, scale=0.1)
    k2, b2 = w(2, 3, 2, 3, 3), w(2, scale=0.1)
    k3, b3 = w(CELLS, 2 * 2 * 3 * 3), w(CELLS, scale=0.1)
    nodes = [
        helper.make_node("Conv", ["x", "k1", "b1"], ["c1"], name="conv3d_1"),
        helper.make_node("Tanh", ["c1"], ["t1"], name="tanh1"),
        helper.make_node("Conv", ["t1", "k2", "b2"], ["c2"], name="conv3d_2", strides=[2, 2, 2]),
        helper.make_node("Relu", ["c2"], ["r2"], name="relu2"),
        helper.make_node("Flatten", ["r2"], ["flat"], name="flatten", axis=1),
        helper.make_node("Gemm", ["flat", "k3", "b3"], ["g"], name="readout", transB=1),
        helper.make_node("Softplus", ["g"], ["rates"], name="softplus"),
    ]
    inits = [init("k1", k1), init("b1", b1), init("k2", k2), init("b2", b2), init("k3", k3), init("b3", b3)]
    graph = helper.make_graph(nodes, "volume", [vi("x", ["N", 1, L, H, W])], [vi("rates", ["N", CELLS])], inits)

    def to_hidden(x):
        return jnp.tanh(conv(x, jnp.asarray(k1, jnp.float64), jnp.asarray(b1, jnp.float64)))

    def from_hidden(h):
        r = jnp.maximum(conv(h, jnp.asarray(k2, jnp.float64), jnp.asarray(b2, jnp.float64), stride=2), 0.0)
        return softplus(r.reshape(r.shape[0], -1) @ k3.T.astype(np.float64) + b3)

    x = RNG.standard_normal((2, 1, L, H, W)).astype(np.float32)
    write("volume", graph, 13, x, (to_hidden, from_hidden), "t1", 0, "3-D convolution over [N, 1, L, H, W], strided second layer")


def line():
    """1-D model over [N, L, P]: Pad, Conv1d, LeakyRelu, MaxPool, dilated Conv1d, Sigmoid, ReduceMean."""
    L, P, CELLS = 10, 32, 3
    k1, b1 = w(4, L, 5), w(4, scale=0.1)
    k2, b2 = w(CELLS, 4, 3), w(CELLS, scale=0.1)
    nodes = [
        helper.make_node("Pad", ["x", "pads"], ["xp"], name="pad", mode="edge"),
        helper.make_node("Conv", ["xp", "k1", "b1"], ["c1"], name="conv1d_1"),
        helper.make_node("LeakyRelu", ["c1"], ["l1"], name="leaky1", alpha=0.1),
        helper.make_node("MaxPool", ["l1"], ["m1"], name="pool", kernel_shape=[2], strides=[2]),
        helper.make_node("Conv", ["m1", "k2", "b2"], ["c2"], name="conv1d_2", dilations=[2]),
        helper.make_node("Sigmoid", ["c2"], ["s2"], name="sigmoid2"),
        helper.make_node("ReduceMean", ["s2"], ["rates"], name="mean", axes=[2], keepdims=0),
    ]
    inits = [init("pads", np.array([0, 0, 2, 0, 0, 2], np.int64)), init("k1", k1), init("b1", b1), init("k2", k2), init("b2", b2)]
    graph = helper.make_graph(nodes, "line", [vi("x", ["N", L, P])], [vi("rates", ["N", CELLS])], inits)

    def to_hidden(x):
        xp = jnp.pad(x, ((0, 0), (0, 0), (2, 2)), mode="edge")
        c = conv(xp, jnp.asarray(k1, jnp.float64), jnp.asarray(b1, jnp.float64))
        return jnp.where(c >= 0, c, 0.1 * c)

    def from_hidden(h):
        m = jnp.max(h.reshape(h.shape[0], h.shape[1], -1, 2), axis=3)
        s = jax.nn.sigmoid(conv(m, jnp.asarray(k2, jnp.float64), jnp.asarray(b2, jnp.float64), dilation=2))
        return jnp.mean(s, axis=2)

    x = RNG.standard_normal((3, L, P)).astype(np.float32)
    write("line", graph, 13, x, (to_hidden, from_hidden), "l1", 1, "1-D model over [N, L, P] with edge Pad, MaxPool, dilation, ReduceMean")


if __name__ == "__main__":
    pytorch_style()
    lags_last_fixed_batch()
    volume()
    line()
