"""Prototype PU-RBF evaluator cost: one theta and batches, against training size; file sizes.

Usage: python research/surrogates/latency.py demo 4096 8192 16384 32768
Times are the best of several calls, BLAS on one thread (threadpoolctl), as the export benchmark does.
"""

import argparse
import base64
import io
import sys
import time
import zlib

import numpy as np
from threadpoolctl import threadpool_limits

sys.path.insert(0, __file__.rsplit("/", 1)[0])
import experiments as E  # noqa: E402
import proto  # noqa: E402


def best(fn, repeat=5):
    t = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        t.append(time.perf_counter() - t0)
    return min(t)


def predict_one(pu, x):
    """Only the patches whose weight is nonzero at x (1, d): cell index per parameter by searchsorted."""
    d = x.shape[1]
    opts = []
    for i in range(d):
        e, h = pu.edges[i], pu.half[i]
        j = int(np.clip(np.searchsorted(e, x[0, i], side="right") - 1, 0, len(e) - 2))
        js = [j]
        if j > 0 and x[0, i] < e[j] + h[j - 1]:
            js.append(j - 1)
        if j < len(e) - 2 and x[0, i] > e[j + 1] - h[j]:
            js.append(j + 1)
        opts.append(js)
    import itertools
    W1 = [pu._weights_1d(i, x[:, i]) for i in range(d)]
    out = 0.0
    for J in itertools.product(*opts):
        w = np.prod([W1[i][0, J[i]] for i in range(d)])
        if w > 0:
            out = out + w * proto.rbf_eval(pu.models[J], x)
    return out


def npy_bytes(arrs):
    buf = io.BytesIO()
    for a in arrs:
        np.save(buf, a, allow_pickle=False)
    raw = buf.getvalue()
    return len(raw), len(base64.b64encode(zlib.compress(raw, 9)))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("box")
    ap.add_argument("sizes", type=int, nargs="+")
    a0 = ap.parse_args()
    a = argparse.Namespace(warp="libstretch", open_log=True, log_all=False, stretch_on="maxof", scale=None, cells=None,
                           per_cell=256, overlap=0.15, margin=0.25, degree=2, k_err=12, err="knn", err_target=0.005)
    for n in a0.sizes:
        data = E.load_train(a0.box, n)
        Y, index, slices = data.output_matrix()
        Z = (Y - Y.mean(0)) / Y.std(0)
        warp = E.make_warp(a, data, Z, index, slices)
        X = warp(data.theta)
        with threadpool_limits(1):
            t0 = time.perf_counter()
            pu = proto.PURBF.fit(X, Z, E.auto_cells(len(X), warp.s, 256), overlap=0.15, margin=0.25, loo=False)
            t_fit = time.perf_counter() - t0
            rng = np.random.default_rng(1)
            th = data.bounds[:, 0] + rng.random((10000, len(data.bounds))) * (data.bounds[:, 1] - data.bounds[:, 0])
            xq = warp(th)
            one = best(lambda: predict_one(pu, xq[:1]), 20)
            assert np.allclose(predict_one(pu, xq[:1]), pu.predict(xq[:1]))
            batch = best(lambda: pu.predict(xq), 3)
        stored = sum(len(m.X) for m in pu.models.values())
        w_arrays = [m.alpha for m in pu.models.values()] + [m.coef for m in pu.models.values()] + [X]
        raw_w, b64_w = npy_bytes(w_arrays)
        raw_d, b64_d = npy_bytes([X, Y.astype(np.float32)])
        print(f"{a0.box} n={len(X)}: cells {len(pu.models)}, patch median {int(np.median([len(m.X) for m in pu.models.values()]))}, "
              f"stored rows {stored} ({stored / len(X):.2f} x n); load-time solve of all patches (1 thread) {t_fit:.2f} s; "
              f"one theta {one * 1e3:.2f} ms; batch 1e4 {batch:.2f} s ({1e4 / batch:.0f} theta/s); "
              f"payload with float64 weights {raw_w / 1e6:.1f} MB raw, {b64_w / 1e6:.1f} MB base64+zlib; "
              f"X float64 + Y float32 {raw_d / 1e6:.1f} MB raw, {b64_d / 1e6:.1f} MB base64+zlib", flush=True)


if __name__ == "__main__":
    main()
