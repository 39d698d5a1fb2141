"""The local kind (``tovforge train --kind local``) against training size: time, held-out tails, export, latency.

Trains the library's local spline on Sobol prefixes of the research grids (``make_grids.sh``; data/ is not
committed) and measures on the independent held-out sets (latin hypercube + near-face points):
p50/p95/p99/max of M_max [Msun], R(M) [m] and Lambda(M) [%] for 1.0 <= M <= M_max(exact) - 0.02, masses
every 0.1 Msun (the conventions of ``harness.py``); with ``--export``, the exported file's size and its
one-theta and batched query latency.

    python research/surrogates/local_scaling.py demo 4096 8192 16384 32768 [--export 32768]
    python research/surrogates/local_scaling.py ss 8192 [--two-groups]

Results are appended to data/local_scaling.jsonl and printed as table rows.
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np

from tovforge.grid import read_grid
from tovforge.surrogate import LocalSettings, read_training_data, train_on
from tovforge.surrogate import _runtime as rt

HERE = Path(__file__).resolve().parent
DATA = HERE / "data"
BOXES = {"demo": ("demo-train-32k", "demo-holdout", "demo-faces"),
         "ss": ("ss-train-16k", "ss-holdout", "ss-faces"),
         "spectral": ("spectral-train-16k", "spectral-holdout", "spectral-faces")}
MASS_LOW, GAP = 1.0, 0.02


def prefix(data, grid_path, n):
    """The usable rows of ``data`` among the first ``n`` rows of the grid design (a Sobol prefix)."""
    import dataclasses

    first = {r.tobytes() for r in np.asarray(read_grid(grid_path).parameters[:n], float)}
    keep = np.array([r.tobytes() in first for r in np.asarray(data.theta, float)])
    return dataclasses.replace(data, theta=data.theta[keep], scalars={k: v[keep] for k, v in data.scalars.items()},
                               curves={k: v[keep] for k, v in data.curves.items()})


def pct(a):
    a = np.asarray(a, float)
    a = a[np.isfinite(a)]
    return [float(v) for v in np.percentile(a, [50, 95, 99])] + [float(a.max())]


def errors(model, holdouts):
    """Held-out errors of a library model: dict of [p50, p95, p99, max] (all, and p95 uniform vs faces)."""
    grids = [read_grid(p) for p in holdouts]
    ok = [g.status == 0 for g in grids]
    cat = lambda f: np.concatenate([f(g)[k] for g, k in zip(grids, ok)])  # noqa: E731
    theta, mmax = cat(lambda g: g.parameters), cat(lambda g: g.scalars["mass_max_msun"])
    R, L = cat(lambda g: g.at_mass["radius_km"]), cat(lambda g: g.at_mass["tidal_deformability"])
    face = np.concatenate([np.full(k.sum(), i > 0) for i, k in enumerate(ok)])
    masses = np.asarray(grids[0].masses_msun, float)
    m = model._model
    y = rt.outputs(np, m, theta)[0]
    eR = np.abs(rt.curve_at_mass(np, m, y, None, None, masses, "radius")[0] - R) * 1000.0
    eL = np.abs(rt.curve_at_mass(np, m, y, None, None, masses, "tidal_deformability")[0] / L - 1.0) * 100.0
    sel = (masses[None, :] >= MASS_LOW - 1e-9) & (masses[None, :] <= mmax[:, None] - GAP) & np.isfinite(R + L)
    eM = np.abs(y[:, m.i_mass_max] - mmax)
    fs = np.broadcast_to(face[:, None], sel.shape)
    return {"n_eos": int(len(theta)), "n_stars": int(sel.sum()), "nan_stars": int((sel & ~np.isfinite(eR)).sum()),
            "mass_max": pct(eM), "radius_m": pct(eR[sel]), "lambda_pct": pct(eL[sel]),
            "p95_uniform_faces": {"mass_max": [pct(eM[~face])[1], pct(eM[face])[1]],
                                  "radius_m": [pct(eR[sel & ~fs])[1], pct(eR[sel & fs])[1]],
                                  "lambda_pct": [pct(eL[sel & ~fs])[1], pct(eL[sel & fs])[1]]}}


def latency(model, folder, rng):
    """Exported file size, and its one-theta and batched query times (NumPy; best of repeats)."""
    import importlib.util

    from tovforge.export import export_model

    path = folder / f"local_{model.n_train}.py"
    t0 = time.perf_counter()
    export_model(model, path, namespaces=("numpy",))
    seconds = time.perf_counter() - t0
    spec = importlib.util.spec_from_file_location(path.stem, path)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    lo, hi = model.bounds[:, 0], model.bounds[:, 1]
    theta = lo + (hi - lo) * rng.random((10000, len(lo)))
    one = []
    for t in theta[:300]:
        t0 = time.perf_counter()
        mod.mass_max(t)
        mod.radius(t, 1.4)
        mod.tidal_deformability(t, 1.4)
        one.append(time.perf_counter() - t0)
    best = np.inf
    for _ in range(3):
        t0 = time.perf_counter()
        mod.radius(theta, 1.4)
        best = min(best, time.perf_counter() - t0)
    return {"export_seconds": seconds, "file_mb": path.stat().st_size / 1e6,
            "one_theta_ms_median": float(np.median(one) * 1e3), "one_theta_queries": "M_max, R(1.4), Lambda(1.4)",
            "batched_radius_theta_per_s": float(len(theta) / best)}


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("box", choices=sorted(BOXES))
    ap.add_argument("sizes", type=int, nargs="+")
    ap.add_argument("--export", type=int, nargs="*", default=[])
    ap.add_argument("--two-groups", action="store_true", help="LocalSettings(separate_scalars=True)")
    a = ap.parse_args()
    train, *holdouts = BOXES[a.box]
    grid = DATA / f"{train}.h5"
    full = read_training_data(grid)
    for n in a.sizes:
        data = prefix(full, grid, n)
        t0 = time.perf_counter()
        model = train_on(data, "local", LocalSettings(separate_scalars=a.two_groups))
        seconds = time.perf_counter() - t0
        fit = model.meta.fit
        res = {"box": a.box, "groups": len(fit.groups), "n_design": n, "n_train": int(len(data.theta)),
               "train_seconds": seconds, "cells": list(fit.cells), "patch_points": list(fit.patch_points),
               "stored_rows": fit.stored_rows,
               **errors(model, [DATA / f"{h}.h5" for h in holdouts])}
        if n in a.export:
            res.update(latency(model, DATA, np.random.default_rng(0)))
        with open(DATA / "local_scaling.jsonl", "a") as fh:
            fh.write(json.dumps(res) + "\n")
        f = lambda v, fmt: " / ".join(format(x, fmt) for x in v)  # noqa: E731
        print(f"| {a.box} | {len(fit.groups)} | {res['n_train']:,} | {seconds:.0f} | "
              f"{' + '.join('x'.join(map(str, c)) for c in fit.cells)} | "
              f"{f(res['mass_max'], '.1e')} | {f(res['radius_m'], '.3g')} | {f(res['lambda_pct'], '.3g')} |",
              flush=True)
        if n in a.export:
            print(f"  export {res['file_mb']:.1f} MB in {res['export_seconds']:.0f} s; one theta (M_max, R, Lambda) "
                  f"{res['one_theta_ms_median']:.2f} ms; batched R(1.4) {res['batched_radius_theta_per_s']:.0f} "
                  "theta/s", flush=True)


if __name__ == "__main__":
    main()
