"""Shared test data: published EOS fits and random points of each default box."""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import numpy as np
from tovforge import eos

# Read, Lackey, Owen & Friedman 2009, PRD 79, 124032, Table III (best-fit
# piecewise polytropes; values as collected in ../shared/checks, from memory).
READ2009 = {
    "SLy": dict(log_p1=34.384, gamma1=3.005, gamma2=2.988, gamma3=2.851),
    "APR4": dict(log_p1=34.269, gamma1=2.830, gamma2=3.445, gamma3=3.348),
    "MPA1": dict(log_p1=34.495, gamma1=3.446, gamma2=3.572, gamma3=2.887),
}

NUMERIC_FAMILIES = ["piecewise-polytrope", "spectral", "sound-speed", "polytrope", "uniform-density"]
BOX_FAMILIES = ["piecewise-polytrope", "spectral", "sound-speed"]


def valid_box_points(family: str, n: int, seed: int) -> np.ndarray:
    """``n`` valid parameter rows drawn uniformly from the family's default box."""
    fam = eos.get_family(family)
    rng = np.random.default_rng(seed)
    box = fam.box
    rows = []
    while len(rows) < n:
        theta = box[:, 0] + rng.random((64, len(box))) * (box[:, 1] - box[:, 0])
        for row, msg in zip(theta, fam.validate_rows(theta)):
            if not msg:
                rows.append(row)
    return np.array(rows[:n])


# EOS rows written as table files (library helpers, re-exported for the tests)
from tovforge.eos._tabulated import table_rows as table_rows_of  # noqa: E402
from tovforge.eos._tabulated import write_table as write_eos_table  # noqa: E402


def assert_matches_baseline(E, h_c, rel: dict) -> None:
    """Stars of ``E`` at central enthalpies ``h_c``: the fixed-step solver against the SciPy
    baseline (solve_ivp in radius, rtol 1e-12), each field in ``rel`` to its relative tolerance."""
    import pytest

    from tovforge import solve
    from tovforge.solve._baseline import baseline_star

    ours = solve.solve_stars(E, np.asarray(h_c, float))
    for k, h in enumerate(np.asarray(h_c, float)):
        ref = baseline_star(E, float(h), rtol=1e-12, atol=1e-16)
        for name, tol in rel.items():
            assert getattr(ours, name)[k] == pytest.approx(getattr(ref, name), rel=tol), (name, h)


def import_file(path: Path, name: str | None = None):
    """Import a generated evaluator from its path under a fresh module name."""
    name = name or f"exported_{Path(path).stem}_{abs(hash(str(path)))}"
    spec = importlib.util.spec_from_file_location(name, path)
    mod = importlib.util.module_from_spec(spec)
    sys.modules[name] = mod
    try:
        spec.loader.exec_module(mod)
    finally:
        sys.modules.pop(name, None)
    return mod
