"""Benchmark section ``surrogate``: training time per kind, prediction latency and throughput."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .._bench import timeit_median

__all__ = ["bench_surrogate"]

_TRAIN = Path("grids/demo-train.h5")


def bench_surrogate(quick: bool = False, echo=print) -> None:
    """Training time of GP, spline and local on the demo training grid; in-library prediction speed."""
    import dataclasses
    import time

    from . import GPSettings, read_training_data, train_on

    if not _TRAIN.is_file():
        echo(f"skipped: {_TRAIN} not found (run `make grids` from the project folder)")
        return
    data = read_training_data(_TRAIN)
    n = 1024 if quick else len(data.theta)
    data = dataclasses.replace(data, theta=data.theta[:n], scalars={k: v[:n] for k, v in data.scalars.items()},
                               curves={k: v[:n] for k, v in data.curves.items()})
    settings = GPSettings(n_subset=256 if quick else 512, n_restarts=0)
    echo(f"training on {n} points of {_TRAIN} (GP: hyperparameters on {settings.n_subset} points, "
         f"{settings.curve_groups} kernels per curve, all cores)")
    models = {}
    for kind in ("spline", "gp", "local"):
        t0 = time.perf_counter()
        models[kind] = train_on(data, kind, settings if kind == "gp" else None)
        echo(f"  train {kind:<7} {time.perf_counter() - t0:8.1f} s")
    rng = np.random.default_rng(1)
    lo, hi = data.bounds[:, 0], data.bounds[:, 1]
    one = lo + rng.random((1, len(lo))) * (hi - lo)
    many = lo + rng.random((1000 if quick else 10_000, len(lo))) * (hi - lo)
    echo(f"{'kind':<8}{'1 theta: M-R-Lambda curve':>28}{'1 theta: R(1.4)':>18}{'batch, theta/s':>16}")
    for kind, m in models.items():
        t_curve = timeit_median(lambda: m.curve(one, n=50), 20)
        t_r = timeit_median(lambda: m.radius(one, 1.4), 20)
        t_b = timeit_median(lambda: m.radius(many, 1.4), 1 if not quick else 2)
        echo(f"{m.method:<8}{t_curve * 1e6:>25.0f} us{t_r * 1e6:>15.0f} us{len(many) / t_b:>16.0f}")
