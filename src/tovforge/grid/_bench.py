"""Benchmark section ``grid``: a 4-parameter grid of exact solves on all cores."""

from __future__ import annotations

import os
import tempfile
import time
from pathlib import Path

import numpy as np

__all__ = ["bench_grid"]


_TARGET = 10_000


def _baseline_seconds_per_eos(spec, theta, n_eos: int) -> float:
    """SciPy baseline time for as many exact stars per EOS as the grid stores, plus M_max.

    A lower bound for the baseline: its stars are placed at given central
    enthalpies, without the root search that puts the grid's stars at exact
    masses.
    """
    from scipy.optimize import minimize_scalar

    from .. import eos
    from ..solve import solve_sequence
    from ..solve._baseline import baseline_star

    fam = eos.get_family(spec.family)
    n_stars = len(spec.outputs.u_nodes) + len(spec.outputs.masses_msun)
    times = []
    for row in theta[:n_eos]:
        E = fam.from_array(row)
        hs = float(solve_sequence(E, n_stars=8).mass_max.star.central_pseudo_enthalpy[0])
        t0 = time.perf_counter()
        for hc in np.geomspace(0.05, hs, n_stars):
            baseline_star(E, float(hc), rtol=1e-8)
        minimize_scalar(lambda x: -baseline_star(E, x, rtol=1e-8).mass_msun, bounds=(0.97 * hs, 1.03 * hs),
                        method="bounded", options={"xatol": 1e-9})
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def bench_grid(quick: bool = False, echo=print) -> None:
    """Wall time and EOS per second per core of a Sobol grid over the demo piecewise-polytrope box."""
    from . import design_points, parse_spec, run_grid, solve_chunk

    n_points = 1024 if quick else _TARGET
    cores = os.cpu_count() or 1
    spec = parse_spec({"family": "piecewise-polytrope", "chunk_size": 64,
                       "design": {"method": "latin-hypercube", "points": n_points, "seed": 7}})
    echo(f"{n_points} points (latin hypercube) over the demo piecewise-polytrope box (4 parameters), chunks of "
         f"{spec.chunk_size}; outputs: {len(spec.outputs.scalars)} scalars, {len(spec.outputs.curves)} curves at "
         f"{len(spec.outputs.u_nodes)} u nodes, {len(spec.outputs.at_mass)} at {len(spec.outputs.masses_msun)} "
         "masses")

    theta = design_points(spec)
    solve_chunk(spec, theta[:8])  # warm imports and caches
    t0 = time.perf_counter()
    solve_chunk(spec, theta[: spec.chunk_size])
    one_core = (time.perf_counter() - t0) / spec.chunk_size

    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        summary = run_grid(spec, Path(tmp) / "bench.h5", progress=False)
        wall = time.perf_counter() - t0
    rate = n_points / wall
    echo("")
    echo(f"{'':<44}{'wall s':>10}{'EOS/s':>10}{'EOS/s/core':>12}{'ms/EOS/core':>13}")
    echo(f"{'one chunk in this process (1 core)':<44}{one_core * spec.chunk_size:>10.2f}{1 / one_core:>10.1f}"
         f"{1 / one_core:>12.1f}{one_core * 1e3:>13.2f}")
    echo(f"{f'tovforge grid run, {n_points} points, {cores} cores':<44}{wall:>10.1f}{rate:>10.1f}"
         f"{rate / cores:>12.1f}{cores / rate * 1e3:>13.2f}")
    if n_points != _TARGET:
        echo(f"{f'10^4 points, {cores} cores (EXTRAPOLATED)':<44}{_TARGET / rate:>10.1f}{rate:>10.1f}"
             f"{rate / cores:>12.1f}{cores / rate * 1e3:>13.2f}")
    base = _baseline_seconds_per_eos(spec, theta, 1 if quick else 2)
    n_stars = len(spec.outputs.u_nodes) + len(spec.outputs.masses_msun)
    echo(f"{f'SciPy baseline, {n_stars} stars + M_max (1 core)':<44}{base:>10.2f}{1 / base:>10.2f}"
         f"{1 / base:>12.2f}{base * 1e3:>13.0f}")
    echo("")
    echo(f"10^4 points on {cores} cores: {_TARGET / rate:.0f} s "
         f"({'measured' if n_points == _TARGET else 'extrapolated from ' + str(n_points) + ' points'}); "
         f"floor 900 s, goal 120 s")
    echo(f"per core, tovforge is {base / (cores / rate):.0f} x faster than the baseline (a lower bound for "
         "the baseline: it places its stars at given central enthalpies without the root search)")
    counts = ", ".join(f"{k}: {v}" for k, v in sorted(summary.status_counts.items()))
    echo(f"status counts {counts}")
