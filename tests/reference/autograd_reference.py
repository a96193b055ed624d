#!/usr/bin/env python3
"""An oracle for sinew's forward pass, cost and gradient that shares no code with sinew.

The network is evaluated with numpy and differentiated by reverse-mode automatic
differentiation with the HIPS `autograd` package (PyPI). Everything below is written from
the formulas of the language reference (`grammar/REFERENCE.md`) and `DEVELOPERS.md`, in
numpy's own idiom (whole-batch matrix products, `logaddexp`, masks), not from sinew's Rust
code:

    a1 = (x - mean) / std            (with `standardize`, else x)
    z(l+1) = W(l) a(l) + b(l)        W row-major: row j holds the weights into unit j
    a(l+1) = g(z(l+1))
    loss, per sample:
      cross_entropy, softmax output:  -sum_j y_j log softmax(z)_j,
                                      log softmax(z) = z - logsumexp(z)
      cross_entropy, sigmoid output:  -sum_j [y_j log s(z_j) + (1 - y_j) log(1 - s(z_j))],
                                      log s(z) = -log(1 + e^-z), log(1 - s(z)) = -log(1 + e^z)
      squared_error:                  1/2 sum_j (a_j - y_j)^2
    J = (1/m) sum loss + P,  P = lambda/(2m) sum W^2 (l2), lambda/m sum |W| (l1), 0 (none);
    biases are never penalised.

Shaped networks (REFERENCE.md, "Shapes: windows and grids") hold their maps as arrays
(samples, rows, cols, channels), a window of steps having one column; a dense layer reads the
map flattened in C order, that is row-major with the channel fastest. Each axis of `n` values
under a kernel `k` with stride `s` has

    pad valid:  floor((n - k) / s) + 1 positions, no zeros
    pad same:   ceil(n / s) positions, max((out - 1) s + k - n, 0) zeros, the smaller half before
    pool:       floor(n / k) positions, stride k, no zeros (`all`: k = n)

and the layers compute, from the zero-padded input `P` and its patches
`T[p][t][c] = P[p * s + t][c]` (tap t = (i, j) of the kernel, in row-major order):

    conv:       z[p][f] = sum_{t, c} W[f][t][c] T[p][t][c] + b[f]   (W row f: [KH][KW][C])
    depthwise:  z[p][c] = sum_t W[c][t] T[p][t][c] + b[c]          (W row c: [KH][KW])
    pool max:   max_t T[p][t][c];  pool average: sum_t T[p][t][c] / taps  (no parameters)
    standardize: one mean and std per channel, over every position.

autograd's derivative of `max` shares the gradient equally among tied maxima, where sinew sends
it to the first; the generator redraws inputs until no window of a max pooling has its two
largest values within KINK_MARGIN, so the two rules agree on every golden.

Usage:

    autograd_reference.py CASE.json       evaluate one case (keys `network`, `params`,
                                          `samples`; see README.md) and print `expected`
    autograd_reference.py --generate DIR  write every golden case into DIR
    autograd_reference.py --check DIR     regenerate into a temporary folder and compare
                                          with the goldens in DIR (exit 1 if they changed)
"""

import json
import math
import os
import sys
import tempfile

import autograd
import autograd.numpy as anp
import numpy as np
from autograd.tracer import getval

FORMAT = "sinew-reference-golden-1"

# ----------------------------------------------------------------------------------------------
# The oracle
# ----------------------------------------------------------------------------------------------


def logsumexp_rows(z):
    """log(sum_j e^z_j) per row. The shift by the row maximum is a constant for the
    derivative (logsumexp(z) = c + logsumexp(z - c) for any c), so it is taken out of the
    traced graph."""
    c = np.max(getval(z), axis=1, keepdims=True)
    return c + anp.log(anp.sum(anp.exp(z - c), axis=1, keepdims=True))


def activation(kind, alpha, z):
    """g(z) over a (samples, units) block."""
    if kind == "identity":
        return z
    if kind == "sigmoid":
        # 1 / (1 + e^-z) = exp(-log(1 + e^-z)), accurate for every z.
        return anp.exp(-anp.logaddexp(0.0, -z))
    if kind == "tanh":
        return anp.tanh(z)
    if kind == "relu":
        return anp.where(z > 0.0, z, 0.0 * z)
    if kind == "leaky_relu":
        return anp.where(z > 0.0, z, alpha * z)
    if kind == "softmax":
        return anp.exp(z - logsumexp_rows(z))
    raise ValueError(f"unknown activation {kind!r}")


def input_map(network):
    """(rows, cols, channels) of a shaped input (a window of steps has one column), or None
    for a vector input."""
    shape = network.get("shape")
    if shape is None:
        return None
    if len(shape) == 2:
        return (shape[0], 1, shape[1])
    return tuple(shape)


def axis_positions(n, k, s, pad):
    """(positions, zeros before, zeros after) of one axis, from the reference's rules."""
    if pad == "valid":
        if k > n:
            raise ValueError(f"kernel {k} longer than the axis {n}")
        return (n - k) // s + 1, 0, 0
    if pad == "same":
        out = -(-n // s)
        total = max((out - 1) * s + k - n, 0)
        return out, total // 2, total - total // 2
    raise ValueError(f"unknown padding {pad!r}")


def geometry(network):
    """Per layer: its kind, the rank of what it writes, the map it reads and the map it writes
    as [rows, cols, channels] (a vector of n values is [1, 1, n]), and for a conv, depthwise or
    pooling layer its kernel, stride and zeros before and after, as [rows, cols]. Computed from
    the reference's formulas alone."""
    shape = input_map(network)
    rank = len(network["shape"]) if shape is not None else 1
    if shape is None:
        shape = (1, 1, network["inputs"])
    out = []
    for layer in network["layers"]:
        kind = layer.get("kind", "dense")
        rows, cols, ch = shape
        window = {}
        if kind == "dense":
            rank, new = 1, (1, 1, layer["width"])
        else:
            if rank == 1:
                raise ValueError(f"{layer['name']}: {kind} reads a window or a grid")
            if kind == "pool":
                if layer["size"] == "all":
                    kernel = (rows, cols)
                else:
                    kernel = square(layer["size"], rank)
                stride, pad = kernel, "valid"
                out_r, out_c = rows // kernel[0], cols // kernel[1]
                if out_r < 1 or out_c < 1:
                    raise ValueError(f"{layer['name']}: pooling window larger than its map")
                before, after = (0, 0), (0, 0)
                filters = ch
            else:
                kernel = square(layer["kernel"], rank)
                s = layer.get("stride", 1)
                stride = (s, s) if rank == 3 else (s, 1)
                pad = layer.get("pad", "valid")
                out_r, top, bottom = axis_positions(rows, kernel[0], stride[0], pad)
                out_c, left, right = axis_positions(cols, kernel[1], stride[1], pad)
                before, after = (top, left), (bottom, right)
                filters = layer["filters"] if kind == "conv" else ch
            new = (out_r, out_c, filters)
            window = dict(kernel=list(kernel), stride=list(stride), pad_before=list(before),
                          pad_after=list(after))
        out.append(dict(kind=kind, rank=rank, input=list(shape), output=list(new), **window))
        shape = new
    return out


def square(sizes, rank):
    """A kernel or pooling window as (rows, cols): one size on a window (one column), one
    (square) or two on a grid."""
    if rank == 2:
        if len(sizes) != 1:
            raise ValueError("a window takes one size")
        return (sizes[0], 1)
    if len(sizes) == 1:
        return (sizes[0], sizes[0])
    return (sizes[0], sizes[1])


def weight_shapes(network):
    """Per layer, the (rows, columns) of its weight matrix in sinew's layout, or None for a
    pooling: dense (units, inputs), conv (filters, taps * channels), depthwise (channels, taps)."""
    out = []
    for layer, g in zip(network["layers"], geometry(network)):
        rows, cols, ch = g["input"]
        if g["kind"] == "dense":
            out.append((layer["width"], rows * cols * ch))
        elif g["kind"] == "conv":
            out.append((layer["filters"], g["kernel"][0] * g["kernel"][1] * ch))
        elif g["kind"] == "depthwise":
            out.append((ch, g["kernel"][0] * g["kernel"][1]))
        else:
            out.append(None)
    return out


def unpack(flat, network):
    """(W, b) per layer from the flat parameter vector (per layer with parameters: W row-major,
    then b); None for a pooling, which has none."""
    out = []
    k = 0
    for shape in weight_shapes(network):
        if shape is None:
            out.append(None)
            continue
        width, fan_in = shape
        w = anp.reshape(flat[k : k + width * fan_in], (width, fan_in))
        k += width * fan_in
        b = flat[k : k + width]
        k += width
        out.append((w, b))
    return out


def patches(a, g):
    """The taps every output position reads, shape (samples, out_rows, out_cols, taps, channels),
    taps in row-major kernel order: the input zero-padded by `pad_before` / `pad_after`, then
    for tap (i, j) the strided view starting at row i, column j."""
    (kr, kc), (sr, sc) = g["kernel"], g["stride"]
    out_r, out_c = g["output"][0], g["output"][1]
    (top, left), (bottom, right) = g["pad_before"], g["pad_after"]
    if top or left or bottom or right:
        a = anp.pad(a, ((0, 0), (top, bottom), (left, right), (0, 0)), "constant")
    taps = [
        a[:, i : i + sr * (out_r - 1) + 1 : sr, j : j + sc * (out_c - 1) + 1 : sc, :]
        for i in range(kr)
        for j in range(kc)
    ]
    return anp.stack(taps, axis=3)


def forward(flat, network, scaling, x):
    """Per layer (input, z, a) for a batch x of shape (samples, inputs); a pooling's z is its
    output."""
    shape = input_map(network)
    m = x.shape[0]
    a = x if shape is None else anp.reshape(x, (m,) + shape)
    if network["standardize"]:
        mean, std = scaling
        a = (a - mean) / std
    steps = []
    for wb, layer, g in zip(unpack(flat, network), network["layers"], geometry(network)):
        kind = g["kind"]
        if kind == "dense":
            w, b = wb
            z = anp.dot(anp.reshape(a, (m, -1)), anp.transpose(w)) + b
        elif kind == "conv":
            w, b = wb
            kr, kc = g["kernel"]
            w4 = anp.reshape(w, (w.shape[0], kr * kc, g["input"][2]))
            z = anp.einsum("mrqtc,ftc->mrqf", patches(a, g), w4) + b
        elif kind == "depthwise":
            w, b = wb
            z = anp.einsum("mrqtc,ct->mrqc", patches(a, g), w) + b
        elif layer["op"] == "max":
            z = anp.max(patches(a, g), axis=3)
        elif layer["op"] == "average":
            kr, kc = g["kernel"]
            z = anp.sum(patches(a, g), axis=3) / (kr * kc)
        else:
            raise ValueError(f"unknown pooling {layer['op']!r}")
        a_in = a
        a = z if kind == "pool" else activation(layer["activation"], layer.get("alpha", 0.0), z)
        steps.append((a_in, z, a))
    return steps


def sample_losses(flat, network, scaling, x, y):
    """The loss of every sample, shape (samples,)."""
    _, z, a = forward(flat, network, scaling, x)[-1]
    out = network["layers"][-1]["activation"]
    if network["loss"] == "cross_entropy":
        if out == "softmax":
            return -anp.sum(y * (z - logsumexp_rows(z)), axis=1)
        if out == "sigmoid":
            log_s = -anp.logaddexp(0.0, -z)
            log_1ms = -anp.logaddexp(0.0, z)
            return -anp.sum(y * log_s + (1.0 - y) * log_1ms, axis=1)
        raise ValueError("cross_entropy needs a sigmoid or softmax output")
    if network["loss"] == "squared_error":
        return 0.5 * anp.sum((a - y) ** 2, axis=1)
    raise ValueError(f"unknown loss {network['loss']!r}")


def penalty(flat, network, m):
    kind = network["penalty"]["kind"]
    if kind == "none":
        return 0.0
    lam = network["penalty"]["lambda"]
    weights = [wb[0] for wb in unpack(flat, network) if wb is not None]
    if kind == "l2":
        return lam / (2.0 * m) * sum(anp.sum(w**2) for w in weights)
    if kind == "l1":
        return lam / m * sum(anp.sum(anp.abs(w)) for w in weights)
    raise ValueError(f"unknown penalty {kind!r}")


def cost(flat, network, scaling, x, y):
    """J = (1/m) sum loss + P."""
    m = x.shape[0]
    return anp.mean(sample_losses(flat, network, scaling, x, y)) + penalty(flat, network, m)


def flatten(params):
    parts = []
    for layer in params["layers"]:  # layers with parameters only
        parts.append(np.asarray(layer["weights"], dtype=np.float64).ravel())
        parts.append(np.asarray(layer["bias"], dtype=np.float64))
    return np.concatenate(parts)


def evaluate(case):
    """The `expected` block of a case: outputs, per-sample losses, cost, penalty, gradients."""
    network = case["network"]
    flat = flatten(case["params"])
    scaling = None
    if network["standardize"]:
        scaling = (
            np.asarray(case["params"]["mean"], dtype=np.float64),
            np.asarray(case["params"]["std"], dtype=np.float64),
        )
    x = np.asarray(case["samples"]["inputs"], dtype=np.float64)
    y = np.asarray(case["samples"]["targets"], dtype=np.float64)
    m = x.shape[0]
    outputs = forward(flat, network, scaling, x)[-1][2]
    losses = sample_losses(flat, network, scaling, x, y)
    j = cost(flat, network, scaling, x, y)
    grad = autograd.grad(cost)(flat, network, scaling, x, y)
    layers = []
    for gwb in unpack(grad, network):
        if gwb is not None:
            layers.append({"weights": floats(gwb[0]), "bias": floats(gwb[1])})
    expected = {
        "outputs": floats(outputs),
        "losses": floats(losses),
        "penalty": float(penalty(flat, network, m)),
        "cost": float(j),
        "gradients": {"layers": layers},
    }
    if "shape" in network:
        expected["geometry"] = geometry(network)
    return expected


def floats(a):
    """Nested lists of Python floats (whose repr round-trips exactly)."""
    return np.asarray(a, dtype=np.float64).tolist()


# ----------------------------------------------------------------------------------------------
# The golden cases
# ----------------------------------------------------------------------------------------------

# Shaped networks: `shape` is [steps, channels] (a window) or [rows, cols, channels] (a grid),
# and each layer a dict written by the helpers below, keys as the spec's clauses (`stride` and
# `pad` only where the spec writes them, so the defaults are exercised too).


def conv(name, filters, kernel, activation, stride=None, pad=None, alpha=None):
    return shaped_layer(dict(name=name, kind="conv", filters=filters, kernel=kernel),
                        stride, pad, activation, alpha)


def depthwise(name, kernel, activation, stride=None, pad=None, alpha=None):
    return shaped_layer(dict(name=name, kind="depthwise", kernel=kernel), stride, pad,
                        activation, alpha)


def pool(name, op, size):
    """`size`: a list of one or two sizes, or "all"."""
    return dict(name=name, kind="pool", op=op, size=size)


def dense(name, width, activation, alpha=None):
    return shaped_layer(dict(name=name, kind="dense", width=width), None, None, activation, alpha)


def shaped_layer(layer, stride, pad, activation, alpha):
    if stride is not None:
        layer["stride"] = stride
    if pad is not None:
        layer["pad"] = pad
    layer["activation"] = activation
    if activation == "leaky_relu":
        layer["alpha"] = alpha
    return layer


SHAPED_CASES = [
    # --- mirrors of the f64 shaped fixtures (engine and generated code) ---
    dict(name="vibration_window", fixture="vibration_window", shape=[12, 2], standardize=True,
         layers=[conv("edges", 3, [3], "tanh", stride=2, pad="same"),
                 depthwise("spread", [2], "sigmoid"),
                 pool("shrink", "max", [2]),
                 pool("squeeze", "average", "all"),
                 dense("mix", 4, "tanh"),
                 dense("fault", 3, "softmax")],
         loss="cross_entropy", penalty=("l2", 0.01), m=4, targets="onehot", gain=1.5),
    dict(name="thermal_grid", fixture="thermal_grid", shape=[6, 5, 2], standardize=False,
         layers=[conv("blobs", 3, [3, 2], "sigmoid", pad="same"),
                 pool("smooth", "average", [2]),
                 depthwise("detail", [2], "tanh", stride=1),
                 pool("peak", "max", [2, 1]),
                 dense("mix", 4, "leaky_relu", alpha=0.1),
                 dense("heat", 2, "identity")],
         loss="squared_error", penalty=("l1", 0.01), m=4, targets="signed", gain=1.5),
    dict(name="pressure_steps", fixture="pressure_steps", shape=[9, 4, 1], standardize=False,
         layers=[pool("coarse", "max", [3, 2]),
                 conv("edges", 2, [2, 1], "relu", stride=2),
                 dense("valve", 1, "sigmoid")],
         loss="cross_entropy", penalty=("none", 0.0), m=5, targets="binary", gain=1.5),
    # --- further shaped networks (engine only) ---
    dict(name="window_conv_valid", fixture=None, shape=[10, 3], standardize=True,
         layers=[conv("edges", 4, [3], "relu", pad="valid"),
                 pool("halve", "average", [2]),
                 dense("flags", 2, "sigmoid")],
         loss="cross_entropy", penalty=("l1", 0.05), m=4, targets="binary", gain=1.5),
    # An even kernel under `same`: 3 zeros, 1 before and 2 after.
    dict(name="window_conv_same_even_kernel", fixture=None, shape=[9, 2], standardize=False,
         layers=[conv("edges", 3, [4], "leaky_relu", pad="same", alpha=0.2),
                 pool("peak", "max", "all"),
                 dense("kind", 3, "softmax")],
         loss="cross_entropy", penalty=("none", 0.0), m=4, targets="onehot", gain=1.5),
    # Valid with stride 2 leaves the last step unread: floor((12 - 3) / 2) + 1 = 5 positions
    # cover steps 0 to 10; then a depthwise with stride 2: floor((5 - 2) / 2) + 1 = 2.
    dict(name="window_conv_valid_stride2", fixture=None, shape=[12, 2], standardize=False,
         layers=[conv("edges", 2, [3], "tanh", stride=2),
                 depthwise("thin", [2], "sigmoid", stride=2, pad="valid"),
                 dense("level", 2, "identity")],
         loss="squared_error", penalty=("l2", 0.2), m=4, targets="signed", gain=1.5),
    # A stride longer than the kernel under `same`: ceil(10 / 3) = 4 positions, 1 zero after;
    # then a depthwise `same` with an odd kernel (1 zero each side).
    dict(name="window_strided_same_depthwise", fixture=None, shape=[10, 2], standardize=True,
         layers=[conv("edges", 3, [2], "sigmoid", stride=3, pad="same"),
                 depthwise("spread", [3], "tanh", pad="same"),
                 pool("shrink", "max", [2]),
                 dense("mix", 2, "softmax")],
         loss="squared_error", penalty=("l2", 0.05), m=4, targets="unit", gain=1.5),
    # Pooling straight on a standardized window.
    dict(name="window_pool_on_input", fixture=None, shape=[8, 3], standardize=True,
         layers=[pool("halve", "average", [2]),
                 conv("edges", 2, [2], "leaky_relu", alpha=0.1),
                 dense("alarm", 1, "sigmoid")],
         loss="cross_entropy", penalty=("l1", 0.02), m=4, targets="binary", gain=1.5),
    dict(name="grid_conv_3x3_valid", fixture=None, shape=[7, 6, 2], standardize=True,
         layers=[conv("edges", 3, [3], "sigmoid"),
                 pool("shrink", "max", [2]),
                 dense("digit", 3, "softmax")],
         loss="cross_entropy", penalty=("l2", 0.1), m=3, targets="onehot", gain=1.5),
    # Rows: ceil(6 / 2) = 3, 1 zero after; columns: ceil(7 / 2) = 4, 1 zero each side. Then a
    # 2 x 3 depthwise `same` (1 zero after the rows, 1 each side of the columns).
    dict(name="grid_conv_3x3_same_stride2", fixture=None, shape=[6, 7, 1], standardize=False,
         layers=[conv("edges", 2, [3, 3], "tanh", stride=2, pad="same"),
                 depthwise("spread", [2, 3], "sigmoid", pad="same"),
                 pool("squeeze", "average", "all"),
                 dense("level", 1, "identity")],
         loss="squared_error", penalty=("l1", 0.1), m=4, targets="signed", gain=1.5),
    # Valid 3 x 2 kernel, then a pooling that drops a short tail: 3 x 5 -> 1 x 2.
    dict(name="grid_conv_3x2_valid", fixture=None, shape=[5, 6, 3], standardize=False,
         layers=[conv("edges", 2, [3, 2], "sigmoid", pad="valid"),
                 pool("coarse", "average", [3, 2]),
                 dense("flags", 2, "sigmoid")],
         loss="cross_entropy", penalty=("l2", 0.3), m=3, targets="probability", gain=1.5),
    dict(name="grid_depthwise_stride2", fixture=None, shape=[7, 7, 2], standardize=True,
         layers=[depthwise("spread", [3], "leaky_relu", stride=2, alpha=0.1),
                 pool("peak", "max", "all"),
                 dense("kind", 3, "softmax")],
         loss="cross_entropy", penalty=("none", 0.0), m=4, targets="onehot", gain=1.5),
]


# Each case: a network, how to draw its values, and (where a generated fixture of the tests
# crate has exactly this shape, loss and penalty) the fixture's model name, so the Rust test
# compares the generated code too. The fixture shapes are copied from tests/fixtures/*.sinew and
# samples/*.sinew; the Rust test fails loudly if one no longer matches.
#
# layer: (name, width, activation[, alpha]); the last layer is the output.
# targets: "onehot" | "distribution" (softmax cross-entropy), "binary" | "probability"
#          (sigmoid cross-entropy), "unit" ([0, 1]) | "signed" ([-1, 1]) (squared error).
CASES = [
    # --- mirrors of the f64 fixtures and samples (engine and generated code) ---
    dict(name="valve_gate", fixture="valve_gate", inputs=2, standardize=False,
         layers=[("hidden", 3, "tanh"), ("open", 1, "sigmoid")],
         loss="cross_entropy", penalty=("none", 0.0), m=4, targets="binary", gain=1.5),
    dict(name="relay_pair", fixture="relay_pair", inputs=2, standardize=False,
         layers=[("hidden", 2, "sigmoid"), ("coils", 2, "sigmoid")],
         loss="squared_error", penalty=("none", 0.0), m=5, targets="unit", gain=1.5),
    dict(name="tank_level", fixture="tank_level", inputs=1, standardize=False,
         layers=[("level", 1, "identity")],
         loss="squared_error", penalty=("none", 0.0), m=6, targets="signed", gain=1.0),
    dict(name="tide_gauge", fixture="tide_gauge", inputs=2, standardize=False,
         layers=[("linear", 3, "identity"), ("level", 1, "tanh")],
         loss="squared_error", penalty=("l2", 0.02), m=5, targets="signed", gain=1.2),
    dict(name="door_sensor", fixture="door_sensor", inputs=3, standardize=False,
         layers=[("hidden", 4, "tanh"), ("state", 1, "sigmoid")],
         loss="cross_entropy", penalty=("l1", 0.05), m=6, targets="probability", gain=1.5),
    dict(name="bearing_wear", fixture="bearing_wear", inputs=4, standardize=False,
         layers=[("bottleneck", 1, "tanh"), ("flags", 3, "sigmoid")],
         loss="cross_entropy", penalty=("l2", 0.5), m=5, targets="binary", gain=1.5),
    dict(name="boiler_alarm", fixture="boiler_alarm", inputs=4, standardize=False,
         layers=[("first", 12, "leaky_relu", 0.1), ("second", 6, "tanh"), ("third", 5, "sigmoid"),
                 ("state", 4, "softmax")],
         loss="cross_entropy", penalty=("l2", 0.01), m=6, targets="onehot", gain=1.5),
    dict(name="conveyor_jam", fixture="conveyor_jam", inputs=8, standardize=False,
         layers=[("h1", 6, "sigmoid"), ("h2", 5, "tanh"), ("h3", 4, "relu"),
                 ("h4", 3, "leaky_relu", 0.05), ("blame", 3, "softmax")],
         loss="squared_error", penalty=("l1", 0.01), m=6, targets="unit", gain=1.5),
    dict(name="fan_speed", fixture="fan_speed", inputs=5, standardize=True,
         layers=[("spread", 16, "relu"), ("mix", 8, "relu"), ("duty", 2, "identity")],
         loss="squared_error", penalty=("l2", 0.1), m=6, targets="signed", gain=1.5),
    dict(name="soil_moisture", fixture="soil_moisture", inputs=3, standardize=True,
         layers=[("wide", 128, "tanh"), ("moisture", 1, "identity")],
         loss="squared_error", penalty=("none", 0.0), m=5, targets="signed", gain=1.5),
    # --- further networks (engine only) ---
    dict(name="logistic_regression_l1", fixture=None, inputs=3, standardize=False,
         layers=[("p", 1, "sigmoid")],
         loss="cross_entropy", penalty=("l1", 0.1), m=7, targets="binary", gain=2.0),
    dict(name="multinomial_standardized_l2", fixture=None, inputs=4, standardize=True,
         layers=[("scores", 3, "softmax")],
         loss="cross_entropy", penalty=("l2", 0.3), m=6, targets="onehot", gain=2.0),
    dict(name="sigmoid_softmax_distribution", fixture=None, inputs=5, standardize=False,
         layers=[("h", 6, "sigmoid"), ("y", 4, "softmax")],
         loss="cross_entropy", penalty=("none", 0.0), m=7, targets="distribution", gain=2.0),
    dict(name="three_hidden_l1", fixture=None, inputs=4, standardize=True,
         layers=[("h1", 6, "relu"), ("h2", 5, "leaky_relu", 0.2), ("h3", 4, "tanh"),
                 ("y", 2, "identity")],
         loss="squared_error", penalty=("l1", 0.05), m=6, targets="signed", gain=1.5),
    dict(name="leaky_multilabel_standardized", fixture=None, inputs=3, standardize=True,
         layers=[("h", 7, "leaky_relu", 0.3), ("y", 3, "sigmoid")],
         loss="cross_entropy", penalty=("l2", 0.05), m=6, targets="binary", gain=1.5),
    dict(name="identity_hidden_sigmoid_squared", fixture=None, inputs=2, standardize=False,
         layers=[("h", 3, "identity"), ("y", 2, "sigmoid")],
         loss="squared_error", penalty=("l2", 0.2), m=5, targets="unit", gain=1.5),
    dict(name="tanh_relu_softmax_squared", fixture=None, inputs=3, standardize=True,
         layers=[("h1", 5, "tanh"), ("h2", 4, "relu"), ("y", 3, "softmax")],
         loss="squared_error", penalty=("none", 0.0), m=6, targets="unit", gain=1.5),
    dict(name="one_sample_l2", fixture=None, inputs=2, standardize=False,
         layers=[("h", 3, "relu"), ("y", 1, "identity")],
         loss="squared_error", penalty=("l2", 1.0), m=1, targets="signed", gain=1.5),
    # Saturated logits: output weights ~30x too large, so softmax and sigmoid outputs are 0 or
    # 1 to working precision and the cross-entropies must come from the logits.
    dict(name="saturated_softmax", fixture=None, inputs=2, standardize=False,
         layers=[("h", 4, "tanh"), ("y", 3, "softmax", None, 30.0)],
         loss="cross_entropy", penalty=("l2", 0.01), m=6, targets="onehot", gain=1.5),
    dict(name="saturated_sigmoid", fixture=None, inputs=2, standardize=False,
         layers=[("h", 3, "tanh"), ("y", 2, "sigmoid", None, 100.0)],
         loss="cross_entropy", penalty=("l1", 0.01), m=6, targets="binary", gain=1.5),
] + SHAPED_CASES

KINK_MARGIN = 1e-3


def network_of(spec):
    if "shape" in spec:
        kind, lam = spec["penalty"]
        return {
            "inputs": int(np.prod(spec["shape"])),
            "shape": spec["shape"],
            "standardize": spec["standardize"],
            "layers": [dict(layer) for layer in spec["layers"]],
            "loss": spec["loss"],
            "penalty": {"kind": kind, "lambda": lam} if kind != "none" else {"kind": "none"},
        }
    layers = []
    for entry in spec["layers"]:
        layer = {"name": entry[0], "width": entry[1], "activation": entry[2]}
        if entry[2] == "leaky_relu":
            layer["alpha"] = entry[3]
        layers.append(layer)
    kind, lam = spec["penalty"]
    return {
        "inputs": spec["inputs"],
        "standardize": spec["standardize"],
        "layers": layers,
        "loss": spec["loss"],
        "penalty": {"kind": kind, "lambda": lam} if kind != "none" else {"kind": "none"},
    }


def draw_params(spec, rng):
    """Weights uniform on +-gain * sqrt(6 / (fan_in + fan_out)) (times a per-layer scale for the
    saturated cases), biases uniform on [-0.5, 0.5], and with `standardize` a mean uniform on
    [-1, 1] and a std uniform on [0.5, 2] (one per channel for a window or a grid).

    Shaped networks use each layer's fans as `init glorot` does: conv (taps * C, taps * F),
    depthwise (taps, taps), dense (inputs, units); a pooling draws nothing."""
    if "shape" in spec:
        return draw_shaped_params(spec, rng)
    layers = []
    fan_in = spec["inputs"]
    for entry in spec["layers"]:
        width = entry[1]
        scale = entry[4] if len(entry) > 4 else 1.0
        limit = spec["gain"] * scale * math.sqrt(6.0 / (fan_in + width))
        w = rng.uniform(-limit, limit, size=(width, fan_in))
        b = rng.uniform(-0.5, 0.5, size=width)
        layers.append({"weights": floats(w), "bias": floats(b)})
        fan_in = width
    params = {"layers": layers}
    if spec["standardize"]:
        params["mean"] = floats(rng.uniform(-1.0, 1.0, size=spec["inputs"]))
        params["std"] = floats(rng.uniform(0.5, 2.0, size=spec["inputs"]))
    return params


def draw_shaped_params(spec, rng):
    network = network_of(spec)
    layers = []
    for shape, g in zip(weight_shapes(network), geometry(network)):
        if shape is None:
            continue
        width, fan_in = shape
        taps = g["kernel"][0] * g["kernel"][1] if g["kind"] != "dense" else 1
        fans = {"dense": (fan_in, width), "conv": (fan_in, taps * width),
                "depthwise": (taps, taps)}[g["kind"]]
        limit = spec["gain"] * math.sqrt(6.0 / (fans[0] + fans[1]))
        w = rng.uniform(-limit, limit, size=(width, fan_in))
        b = rng.uniform(-0.5, 0.5, size=width)
        layers.append({"weights": floats(w), "bias": floats(b)})
    params = {"layers": layers}
    if spec["standardize"]:
        channels = spec["shape"][-1]
        params["mean"] = floats(rng.uniform(-1.0, 1.0, size=channels))
        params["std"] = floats(rng.uniform(0.5, 2.0, size=channels))
    return params


def draw_inputs(spec, params, rng):
    """Inputs uniform on [-2, 2] (mapped through the scaling with `standardize`, so the
    standardized values are on [-2, 2])."""
    if "shape" in spec:
        channels = spec["shape"][-1]
        u = rng.uniform(-2.0, 2.0, size=(spec["m"], int(np.prod(spec["shape"]))))
        if spec["standardize"]:
            # Channel fastest: the value at flat index i belongs to channel i mod C.
            u = np.reshape(u, (spec["m"], -1, channels))
            u = np.asarray(params["mean"]) + u * np.asarray(params["std"])
            u = np.reshape(u, (spec["m"], -1))
        return u
    u = rng.uniform(-2.0, 2.0, size=(spec["m"], spec["inputs"]))
    if spec["standardize"]:
        u = np.asarray(params["mean"]) + u * np.asarray(params["std"])
    return u


def draw_targets(spec, rng):
    m = spec["m"]
    last = spec["layers"][-1]
    width = last["width"] if isinstance(last, dict) else last[1]
    kind = spec["targets"]
    if kind == "onehot":
        return np.eye(width)[rng.integers(0, width, size=m)]
    if kind == "distribution":
        raw = rng.uniform(0.05, 1.0, size=(m, width))
        return raw / raw.sum(axis=1, keepdims=True)
    if kind == "binary":
        return rng.integers(0, 2, size=(m, width)).astype(np.float64)
    if kind in ("probability", "unit"):
        return rng.uniform(0.0, 1.0, size=(m, width))
    if kind == "signed":
        return rng.uniform(-1.0, 1.0, size=(m, width))
    raise ValueError(f"unknown target kind {kind!r}")


def min_kink_distance(network, params, x):
    """The smallest |z| met at a relu or leaky_relu unit, and the smallest gap between the two
    largest values of a max pooling's window (where sinew's first-maximum rule and autograd's
    equal sharing of ties would part)."""
    scaling = None
    if network["standardize"]:
        scaling = (np.asarray(params["mean"]), np.asarray(params["std"]))
    steps = forward(flatten(params), network, scaling, x)
    best = math.inf
    for (a_in, z, _), layer, g in zip(steps, network["layers"], geometry(network)):
        if layer.get("activation") in ("relu", "leaky_relu"):
            best = min(best, float(np.min(np.abs(z))))
        if layer.get("op") == "max":
            taps = np.sort(patches(np.asarray(a_in), g), axis=3)
            best = min(best, float(np.min(taps[:, :, :, -1, :] - taps[:, :, :, -2, :])))
    return best


def generate_case(index, spec):
    """One golden case, drawn from numpy's PCG64 generator seeded with 1000 + index. Inputs
    are redrawn (from the same stream) until every relu / leaky_relu pre-activation is at
    least KINK_MARGIN away from 0, where the derivative is not defined, and every window of a
    max pooling has a unique maximum with the same margin."""
    rng = np.random.default_rng(1000 + index)
    network = network_of(spec)
    params = draw_params(spec, rng)
    for _ in range(1000):
        x = draw_inputs(spec, params, rng)
        if min_kink_distance(network, params, x) >= KINK_MARGIN:
            break
    else:
        raise RuntimeError(f"{spec['name']}: no inputs away from the kinks and ties")
    y = draw_targets(spec, rng)
    case = {
        "format": FORMAT,
        "name": spec["name"],
        "fixture": spec["fixture"],
        "generator": (
            "tests/reference/autograd_reference.py --generate; "
            f"numpy {np.__version__}, autograd {autograd_version()}, "
            f"numpy.random.default_rng({1000 + index})"
        ),
        "network": network,
        "params": params,
        "samples": {"inputs": floats(x), "targets": floats(y)},
    }
    case["expected"] = evaluate(case)
    return case


def autograd_version():
    try:
        from importlib.metadata import version

        return version("autograd")
    except Exception:  # pragma: no cover - metadata missing
        return "unknown"


# ----------------------------------------------------------------------------------------------
# Files
# ----------------------------------------------------------------------------------------------


def dumps(value, indent=0):
    """JSON with every list of numbers on one line; floats by repr (shortest exact form)."""
    pad = "  " * indent
    inner = "  " * (indent + 1)
    if isinstance(value, dict):
        if not value:
            return "{}"
        items = [f"{inner}{json.dumps(k)}: {dumps(v, indent + 1)}" for k, v in value.items()]
        return "{\n" + ",\n".join(items) + "\n" + pad + "}"
    if isinstance(value, list):
        if all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value):
            return "[" + ", ".join(number(v) for v in value) + "]"
        items = [f"{inner}{dumps(v, indent + 1)}" for v in value]
        return "[\n" + ",\n".join(items) + "\n" + pad + "]"
    if isinstance(value, float):
        return number(value)
    return json.dumps(value)


def number(v):
    if isinstance(v, float):
        if not math.isfinite(v):
            raise ValueError("non-finite value in a golden file")
        return repr(v)
    return str(v)


def generate(out_dir):
    os.makedirs(out_dir, exist_ok=True)
    names = []
    for index, spec in enumerate(CASES):
        case = generate_case(index, spec)
        path = os.path.join(out_dir, f"{spec['name']}.json")
        with open(path, "w", encoding="utf-8", newline="\n") as f:
            f.write(dumps(case) + "\n")
        names.append(spec["name"])
    return names


# How far a regenerated expected value may move from the committed one. OpenBLAS and numpy pick
# their kernels by CPU (OpenBLAS's SkylakeX kernels on an AVX-512 machine, Haswell's on an AMD
# Zen 3), which orders the sums of a matrix product differently; a batch gradient summed over the
# samples cancels its terms, so a small element keeps its absolute rounding but not its relative
# one (seen: 3.2e-13 relative on a gradient element of 5.9e-05 between those two CPUs). No
# looser than what tests/tests/reference_autograd.rs allows the engine's outputs against these
# goldens (1e-12), and a thousand times tighter than it allows its gradients (1e-9).
REGEN_RTOL = 1e-12


def compare_values(a, b, where, worst):
    """Structural comparison; floats may differ by rounding of the machine's libm / BLAS only
    in the `expected` block. Returns a list of differences."""
    if isinstance(a, dict) and isinstance(b, dict):
        if list(a) != list(b):
            return [f"{where}: keys {list(a)} vs {list(b)}"]
        out = []
        for k in a:
            out += compare_values(a[k], b[k], f"{where}.{k}", worst)
        return out
    if isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            return [f"{where}: length {len(a)} vs {len(b)}"]
        out = []
        for i, (u, v) in enumerate(zip(a, b)):
            out += compare_values(u, v, f"{where}[{i}]", worst)
        return out
    if isinstance(a, float) and isinstance(b, float) and ".expected" in where:
        if a == b:
            return []
        rel = abs(a - b) / max(abs(a), abs(b), 1e-300)
        worst[0] = max(worst[0], rel)
        return [] if rel <= REGEN_RTOL else [f"{where}: {a!r} vs {b!r} (relative {rel:.1e})"]
    if a != b or type(a) is not type(b):
        return [f"{where}: {a!r} vs {b!r}"]
    return []


def generator_line(case):
    case = dict(case)
    case.pop("generator", None)
    return case


def check(committed_dir):
    """Regenerates into a temporary folder and compares with `committed_dir`: the set of files,
    every description, parameter and sample exactly, and every expected value exactly or (when
    this machine's libm or BLAS rounds differently) to REGEN_RTOL relative. Returns 0 when unchanged."""
    with tempfile.TemporaryDirectory(prefix="sinew-goldens-") as tmp:
        names = generate(tmp)
        fresh = sorted(f"{n}.json" for n in names)
        committed = sorted(f for f in os.listdir(committed_dir) if f.endswith(".json"))
        problems = []
        if fresh != committed:
            problems.append(f"file set differs: generated {fresh}, committed {committed}")
        identical = 0
        worst = [0.0]
        for name in sorted(set(fresh) & set(committed)):
            with open(os.path.join(tmp, name), encoding="utf-8") as f:
                new_text = f.read()
            with open(os.path.join(committed_dir, name), encoding="utf-8") as f:
                old_text = f.read()
            if new_text == old_text:
                identical += 1
                continue
            new, old = json.loads(new_text), json.loads(old_text)
            if new.get("generator") != old.get("generator"):
                problems.append(f"{name}: generator line {old.get('generator')!r} -> {new.get('generator')!r}")
            problems += [f"{name}: {p}" for p in compare_values(generator_line(old), generator_line(new), "", worst)]
        if problems:
            print("goldens CHANGED (regenerate with --generate and review the diff):")
            for p in problems[:50]:
                print("  " + p)
            if len(problems) > 50:
                print(f"  ... and {len(problems) - 50} more")
            return 1
        if identical == len(fresh):
            print(f"goldens unchanged: {identical} files byte-identical")
        else:
            print(
                f"goldens unchanged: {identical} of {len(fresh)} files byte-identical, the rest "
                f"equal up to this machine's rounding (worst relative difference {worst[0]:.1e})"
            )
        return 0


def main(argv):
    if len(argv) == 3 and argv[1] == "--generate":
        names = generate(argv[2])
        print(f"wrote {len(names)} golden files to {argv[2]}")
        return 0
    if len(argv) == 3 and argv[1] == "--check":
        return check(argv[2])
    if len(argv) == 2 and not argv[1].startswith("--"):
        with open(argv[1], encoding="utf-8") as f:
            case = json.load(f)
        print(dumps(evaluate(case)))
        return 0
    print(__doc__, file=sys.stderr)
    return 2


if __name__ == "__main__":
    sys.exit(main(sys.argv))
