"""``tovforge bench``: speed and accuracy measured on this machine.

Every section prints absolute times and ratios measured side by side in the
same run (machines are shared and noisy: ratios travel better than seconds).
Sections register themselves in :data:`SECTIONS`; later stages add theirs.
"""

from __future__ import annotations

import os
import platform
import time
from collections.abc import Callable

import numpy as np

__all__ = ["SECTIONS", "register", "run_benchmarks", "timeit_median", "demo_box_points"]

SECTIONS: dict[str, Callable] = {}


def register(name: str):
    """Decorator adding a benchmark section ``fn(quick, echo)``."""

    def deco(fn):
        SECTIONS[name] = fn
        return fn

    return deco


def timeit_median(fn, repeat: int) -> float:
    """Median wall time of ``fn()`` over ``repeat`` runs, in seconds."""
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def demo_box_points(family: str, n: int, seed: int = 2026) -> np.ndarray:
    """``n`` valid Sobol points of a family's demo box (deterministic)."""
    from scipy.stats import qmc

    from . import eos

    fam = eos.get_family(family)
    box = fam.box
    sampler = qmc.Sobol(len(box), seed=seed)
    rows = []
    while len(rows) < n:
        theta = qmc.scale(sampler.random(64), box[:, 0], box[:, 1])
        rows += [t for t, m in zip(theta, fam.validate_rows(theta)) if not m]
    return np.array(rows[:n])


def _machine() -> str:
    return f"{platform.processor() or platform.machine()}, {os.cpu_count()} cores, Python {platform.python_version()}"


def run_benchmarks(quick: bool = False, only=None, echo=print) -> None:
    """Run the registered sections (all, or those named in ``only``)."""
    import importlib

    # Stages register their sections on import.
    for mod in ("tovforge.solve._bench", "tovforge.grid._bench", "tovforge.surrogate._bench",
                "tovforge.export._bench"):
        try:
            importlib.import_module(mod)
        except ModuleNotFoundError:
            pass
    names = list(SECTIONS) if not only else only
    unknown = [n for n in names if n not in SECTIONS]
    if unknown:
        from .errors import InputError

        raise InputError(f"unknown benchmark section {unknown[0]!r}; choose from {', '.join(SECTIONS)}.")
    echo(f"tovforge bench on {_machine()}{' (quick)' if quick else ''}")
    for name in names:
        echo("")
        echo(f"== {name} ==")
        SECTIONS[name](quick=quick, echo=echo)
