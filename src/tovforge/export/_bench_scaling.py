"""Benchmark section ``scaling``: the default kind against training size on the demo box.

For Sobol prefixes of 4,096 to 32,768 points of the demo training design (the
first 4,096 are ``grids/demo-train.toml``'s): training time, the held-out
errors on ``grids/demo-holdout.h5`` (its own design and seed, never trained
on), and the exported file's size, import time and latency.  The 32,768-point
grid is solved once into ``build/bench/`` (resumable; later runs reuse it).
"""

from __future__ import annotations

import dataclasses
import logging
import os
import tempfile
import time
from pathlib import Path

import numpy as np

from .._bench import timeit_median
from ._verify import import_file

__all__ = ["bench_scaling"]

_ROOT = Path(__file__).resolve().parents[3]
_SPEC = _ROOT / "grids" / "demo-train.toml"
_HOLDOUT = _ROOT / "grids" / "demo-holdout.h5"
SIZES = (4096, 8192, 16384, 32768)
QUICK_SIZES = (256, 512)


def _prefix(data, design: np.ndarray, n: int):
    """The rows of ``data`` among the first ``n`` points of its design (a Sobol prefix is a Sobol design)."""
    first = {tuple(row): i for i, row in enumerate(design)}
    keep = np.array([first[tuple(row)] < n for row in data.theta])
    return dataclasses.replace(data, theta=data.theta[keep], scalars={k: v[keep] for k, v in data.scalars.items()},
                               curves={k: v[keep] for k, v in data.curves.items()})


def bench_scaling(quick: bool = False, echo=print) -> None:
    """Training time, held-out p95/p99, exported size, import time and latency of the default kind against n."""
    from ..grid import design_points, load_spec, run_grid
    from ..surrogate import check, read_training_data, train_on
    from . import export_model

    if not _SPEC.is_file() or not _HOLDOUT.is_file():
        echo(f"skipped: {_SPEC} or {_HOLDOUT} not found (run from the project folder; `make grids`)")
        return
    sizes = QUICK_SIZES if quick else SIZES
    base = load_spec(_SPEC)
    spec = dataclasses.replace(base, design=dataclasses.replace(base.design, points=max(sizes)))
    folder = _ROOT / "build" / "bench"
    folder.mkdir(parents=True, exist_ok=True)
    grid = folder / f"demo-train-{max(sizes)}.h5"
    t0 = time.perf_counter()
    run_grid(spec, grid, progress=False)  # complete already after the first run: returns at once
    echo(f"training grid: {grid.relative_to(_ROOT)} ({max(sizes)} Sobol points of the demo box, "
         f"{time.perf_counter() - t0:.0f} s to solve or reuse); held out: {_HOLDOUT.relative_to(_ROOT)}")
    data = read_training_data(grid)
    design = design_points(spec)
    rng = np.random.default_rng(11)
    lo, hi = data.bounds[:, 0], data.bounds[:, 1]
    many = lo + (hi - lo) * rng.random((2000 if quick else 10_000, len(lo)))
    singles = lo + (hi - lo) * rng.random((200, len(lo)))
    echo("default kind (`tovforge train`), one model per prefix; errors on the held-out grid (R, Lambda at its "
         "masses from 1.0 Msun to M_max - 0.02); exported file with NumPy: import, R(1.4) at one new theta per "
         f"call (without and with sigma), R(1.4) for {len(many)} theta in one call")
    echo(f"{'points':>7}{'used':>7}{'method':>8}{'train s':>9}{'M_max p95/p99 Msun':>21}{'R p95/p99 m':>14}"
         f"{'Lambda p95/p99 %':>18}{'file MB':>9}{'import s':>10}{'1 theta us':>12}{'+sigma us':>11}{'batch /s':>10}")
    p95 = []
    quiet = logging.getLogger("tovforge")
    level = quiet.level
    quiet.setLevel(logging.WARNING)  # the fits' progress lines would break the table
    try:
        with tempfile.TemporaryDirectory() as tmp:
            for n in sizes:
                sub = _prefix(data, design, n)
                t0 = time.perf_counter()
                model = train_on(sub)
                seconds = time.perf_counter() - t0
                rep = check(model, _HOLDOUT)
                e_m, e_r, e_l = (rep.errors[k] for k in ("mass_max_msun", "radius_km_at_mass",
                                                          "tidal_deformability_at_mass"))
                path = Path(tmp) / f"scaling_{n}.py"
                export_model(model, path, namespaces=("numpy",))
                t0 = time.perf_counter()
                mod = import_file(path, f"bench_scaling_{n}")
                t_import = time.perf_counter() - t0
                it = iter(np.tile(singles, (50, 1)))
                t_one = timeit_median(lambda: mod.radius(next(it), 1.4), 200)
                t_std = timeit_median(lambda: mod.radius(next(it), 1.4, return_std=True), 200)
                t_many = timeit_median(lambda: mod.radius(many, 1.4), 1 if not quick else 2)
                p95.append((e_m.abs_p95, e_r.abs_p95, e_l.rel_p95))
                echo(f"{n:>7}{len(sub.theta):>7}{model.method:>8}{seconds:>9.1f}"
                     f"{f'{e_m.abs_p95:.1e} / {e_m.abs_p99:.1e}':>21}"
                     f"{f'{e_r.abs_p95 * 1e3:.1f} / {e_r.abs_p99 * 1e3:.0f}':>14}"
                     f"{f'{e_l.rel_p95 * 100:.2f} / {e_l.rel_p99 * 100:.1f}':>18}"
                     f"{os.path.getsize(path) / 1e6:>9.1f}{t_import:>10.1f}{t_one * 1e6:>12.0f}{t_std * 1e6:>11.0f}"
                     f"{len(many) / t_many:>10.0f}")
                del mod
    finally:
        quiet.setLevel(level)
    gain = np.array(p95[0]) / np.array(p95[-1])
    echo(f"p95 at {sizes[0]} points over p95 at {sizes[-1]}: M_max {gain[0]:.1f}x, R {gain[1]:.1f}x, Lambda "
         f"{gain[2]:.1f}x ({rep.holdout.n_used} held-out EOS)")
