#!/usr/bin/env python3
"""numpy timings of the three benchmark networks, for the table of bench/run.sh.

The same networks as the Rust benchmarks (N1 = 6-10-8-3 sigmoid/sigmoid/softmax, N2 = 64-32-10
tanh/softmax, N3 = 784-128-64-10 relu/relu/softmax; cross-entropy, L2 1e-3, float32), written the
way a workstation user writes them in numpy: matrix products over the batch, elementwise
activations, a stable softmax and log-sum-exp. Timed: inference of one sample, inference of 256
samples at once (reported per sample), and the cost and gradient over 256 samples. BLAS runs on
one thread (threadpoolctl) so that every figure of the table is one core's.

Usage: numpy_baseline.py OUT.json [--quick]
"""
import json
import sys
import timeit

import numpy as np

try:
    from threadpoolctl import threadpool_info, threadpool_limits
except ImportError:  # the run still works; BLAS threads then follow OPENBLAS_NUM_THREADS
    threadpool_info = None
    threadpool_limits = None

NETS = {
    "n1": ([6, 10, 8, 3], ["sigmoid", "sigmoid", "softmax"]),
    "n2": ([64, 32, 10], ["tanh", "softmax"]),
    "n3": ([784, 128, 64, 10], ["relu", "relu", "softmax"]),
}
BATCH = 256
LAMBDA = np.float32(1e-3)


def act(name, z):
    if name == "sigmoid":
        return 1.0 / (1.0 + np.exp(-z))
    if name == "tanh":
        return np.tanh(z)
    if name == "relu":
        return np.maximum(z, 0.0)
    raise ValueError(name)


def act_grad(name, a):
    if name == "sigmoid":
        return a * (1.0 - a)
    if name == "tanh":
        return 1.0 - a * a
    if name == "relu":
        return (a > 0.0).astype(a.dtype)
    raise ValueError(name)


def softmax(z):
    e = np.exp(z - z.max(axis=-1, keepdims=True))
    return e / e.sum(axis=-1, keepdims=True)


def predict(ws, bs, acts, x):
    """x: (n,) or (m, n); weights row-major (out, in) as in sinew."""
    a = x
    for w, b, g in zip(ws, bs, acts):
        z = a @ w.T + b
        a = softmax(z) if g == "softmax" else act(g, z)
    return a


def gradient(ws, bs, acts, xs, ys):
    """Cost J and dJ/dW, dJ/db over the batch (rows of xs, ys)."""
    m = xs.shape[0]
    a_s = [xs]
    z = None
    for w, b, g in zip(ws, bs, acts):
        z = a_s[-1] @ w.T + b
        a_s.append(softmax(z) if g == "softmax" else act(g, z))
    zmax = z.max(axis=1, keepdims=True)
    lse = zmax + np.log(np.exp(z - zmax).sum(axis=1, keepdims=True))
    loss = (ys * (lse - z)).sum()
    cost = loss / m + LAMBDA / (2 * m) * sum((w * w).sum() for w in ws)
    d = a_s[-1] - ys
    gws, gbs = [None] * len(ws), [None] * len(ws)
    for l in range(len(ws) - 1, -1, -1):
        gws[l] = d.T @ a_s[l] / m + (LAMBDA / m) * ws[l]
        gbs[l] = d.sum(axis=0) / m
        if l > 0:
            d = (d @ ws[l]) * act_grad(acts[l - 1], a_s[l])
    return cost, gws, gbs


def best_ns(fn, quick):
    """Best of several repeats of the mean time of one call, in ns (timeit's own practice)."""
    number = 1
    while True:  # calibrate: at least 20 ms per repeat
        t = timeit.timeit(fn, number=number)
        if t >= 0.02 or number > 1_000_000:
            break
        number *= 2
    repeats = 3 if quick else 7
    return min(timeit.repeat(fn, number=number, repeat=repeats)) / number * 1e9


def main():
    out = sys.argv[1] if len(sys.argv) > 1 else "numpy_baseline.json"
    quick = "--quick" in sys.argv
    rng = np.random.default_rng(7)
    result = {"numpy": np.__version__, "nets": {}}
    info = threadpool_info() if threadpool_info else []
    blas = [f"{i.get('internal_api')} {i.get('version')} {i.get('architecture', '')}".strip()
            for i in info if i.get("user_api") == "blas"]
    result["blas"] = "; ".join(blas) + (", 1 thread" if threadpool_limits else "") or "unknown"
    limit = threadpool_limits(limits=1) if threadpool_limits else None
    for name, (widths, acts) in NETS.items():
        ws = [(rng.uniform(-1, 1, (o, i)) * np.sqrt(6 / (i + o))).astype(np.float32)
              for i, o in zip(widths, widths[1:])]
        bs = [np.zeros(o, np.float32) for o in widths[1:]]
        xs = rng.uniform(-1, 1, (BATCH, widths[0])).astype(np.float32)
        ys = np.eye(widths[-1], dtype=np.float32)[rng.integers(0, widths[-1], BATCH)]
        x1 = xs[0].copy()
        cost, gws, _ = gradient(ws, bs, acts, xs, ys)
        assert gws[0].dtype == np.float32 and np.isfinite(cost)
        result["nets"][name] = {
            "inference_single_ns": best_ns(lambda: predict(ws, bs, acts, x1), quick),
            "inference_batched_ns_per_sample":
                best_ns(lambda: predict(ws, bs, acts, xs), quick) / BATCH,
            "batch_gradient_ns": best_ns(lambda: gradient(ws, bs, acts, xs, ys), quick),
        }
        print(name, {k: round(v, 1) for k, v in result["nets"][name].items()})
    if limit is not None:
        limit.unregister() if hasattr(limit, "unregister") else None
    print("blas:", result["blas"])
    with open(out, "w") as f:
        json.dump(result, f, indent=1)


if __name__ == "__main__":
    main()
