"""``tovforge bench``: speed and accuracy measured on this machine.

Every section prints absolute times and ratios measured side by side in the
same run (machines are shared and noisy: ratios travel better than seconds).
The sections are listed in :data:`SECTIONS`; a stage adds one by writing a
function ``fn(quick, echo)`` in its ``_bench.py`` and adding a line there.
"""

from __future__ import annotations

import importlib
import os
import platform
import time

__all__ = ["SECTIONS", "demo_box_points", "run_benchmarks", "section", "timeit_median"]

#: Every benchmark section, in the order they run: name -> "module:function".  The module is
#: imported only when its section runs, and an import that fails is an error, not a skipped section.
SECTIONS: dict[str, str] = {
    "solver": "tovforge.solve._bench:bench_solver",
    "grid": "tovforge.grid._bench:bench_grid",
    "surrogate": "tovforge.surrogate._bench:bench_surrogate",
    "export": "tovforge.export._bench:bench_export",
    "scaling": "tovforge.export._bench_scaling:bench_scaling",
    "likelihood": "tovforge.workflows.demo._bench:bench_likelihood",
}


def section(name: str):
    """The function of benchmark section ``name``."""
    module, function = SECTIONS[name].split(":")
    return getattr(importlib.import_module(module), function)


def timeit_median(fn, repeat: int) -> float:
    """Median wall time of ``fn()`` over ``repeat`` runs, in seconds."""
    import numpy as np

    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def demo_box_points(family: str, n: int, seed: int = 2026) -> np.ndarray:
    """``n`` valid Sobol points of a family's demo box (deterministic)."""
    import numpy as np
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
    """Run the sections of :data:`SECTIONS` (all, or those named in ``only``, in that order).

    Raises
    ------
    tovforge.errors.InputError
        For a name that is not a section.
    """
    names = list(SECTIONS) if not only else list(only)
    unknown = [n for n in names if n not in SECTIONS]
    if unknown:
        from .errors import InputError

        raise InputError(f"unknown benchmark section {unknown[0]!r}; choose from {', '.join(SECTIONS)}.")
    echo(f"tovforge bench on {_machine()}{' (quick)' if quick else ''}")
    for name in names:
        echo("")
        echo(f"== {name} ==")
        section(name)(quick=quick, echo=echo)
