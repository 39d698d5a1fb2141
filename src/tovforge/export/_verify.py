"""Checks an exported file passes before it is kept: the library's answers, other namespaces, rounding noise."""

from __future__ import annotations

import dataclasses
import importlib.util
import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np

from ._render import SELF_CHECK_POINTS, ExportError

__all__ = ["check_points", "max_rel_diff", "flatten", "query_calls", "compare", "rounding_noise", "self_check",
           "namespace_checks", "import_file", "RTOL", "RTOL_OTHER", "MASSES"]

#: Largest relative difference allowed between a new file and the library model (same code, same BLAS).
RTOL = 1e-10
#: Other namespaces round exp, division and sums differently in the last bit; next to M_max the
#: coordinate u = sqrt(1 - M/M_max) turns one ulp of M/M_max into 1e-8 of u.
RTOL_OTHER = 1e-8
#: Masses (Msun) of the queries at a mass in every check.
MASSES = (1.0, 1.4, 2.0)


def check_points(bounds: np.ndarray, n: int, seed: int = 20260501) -> np.ndarray:
    """Random points of the box with a few just outside it (fixed seed)."""
    rng = np.random.default_rng(seed)
    lo, hi = bounds[:, 0], bounds[:, 1]
    theta = lo + (hi - lo) * rng.random((n, len(lo)))
    theta[0] = lo - 0.01 * (hi - lo)
    theta[1] = hi
    return theta


def max_rel_diff(a, b) -> float:
    """Largest |a - b| relative to the largest |b| of each array (NaN must match NaN)."""
    a, b = np.asarray(a, float), np.asarray(b, float)
    if a.shape != b.shape:
        return math.inf
    if not np.array_equal(np.isnan(a), np.isnan(b)):
        return math.inf
    fin = np.isfinite(b)
    if not fin.any():
        return 0.0
    scale = np.max(np.abs(b[fin]))
    return float(np.max(np.abs(a[fin] - b[fin])) / scale) if scale > 0 else float(np.max(np.abs(a[fin])))


def flatten(result, to_numpy=np.asarray, prefix="") -> dict:
    """Every array of a query's result by path (``"value"``, ``"std.radius_km"``, ...), with its container.

    Dataclasses (Estimate, Curve, Prediction, ...) contribute their fields
    and their class name (under ``prefix + "<type>"``), dicts their items,
    None stays None; arrays go through ``to_numpy``.
    """
    if dataclasses.is_dataclass(result):
        out = {prefix + "<type>": type(result).__name__}
        for f in dataclasses.fields(result):
            out.update(flatten(getattr(result, f.name), to_numpy, f"{prefix}{f.name}."))
        return out
    if isinstance(result, dict):
        out = {prefix + "<type>": "dict"}
        for k, v in result.items():
            out.update(flatten(v, to_numpy, f"{prefix}{k}."))
        return out
    return {prefix.rstrip("."): None if result is None else to_numpy(result)}


def query_calls(star_queries, masses=MASSES):
    """``(name, args, kwargs)`` of every query, with gradients and sigma asked for (theta goes first)."""
    masses = np.asarray(masses, float)
    calls = [("in_domain", (), {}), ("mass_max", (), {"return_grad": True, "return_std": True})]
    calls += [(q, (masses,), {"return_grad": True, "return_std": True}) for q in star_queries]
    calls += [("curve", (), {"n": 50}), ("predict", (), {"return_std": True}),
              ("predict_at_masses", (masses,), {"return_std": True})]
    return calls


def compare(got: dict, want: dict) -> float:
    """Largest relative difference between two :func:`flatten` results; inf if their structure differs."""
    if got.keys() != want.keys():
        return math.inf
    worst = 0.0
    for k, w in want.items():
        g = got[k]
        if isinstance(w, str) or isinstance(g, str):  # the names of the containers
            if g != w:
                return math.inf
        elif w is None or g is None:
            if (w is None) != (g is None):
                return math.inf
        else:
            worst = max(worst, max_rel_diff(g, w))
    return worst


def import_file(path: Path, name: str):
    """Import a generated file as module ``name`` without leaving it in sys.modules."""
    spec = importlib.util.spec_from_file_location(name, path)
    mod = importlib.util.module_from_spec(spec)
    try:
        spec.loader.exec_module(mod)
    finally:
        sys.modules.pop(name, None)
    return mod


def rounding_noise(model, theta) -> float:
    """How much the model's outputs and gradients move when its weight sums run in another order.

    The rows of the arrays that hold the training points (the method's
    ``training_rows``: points and weights) are taken in reverse order, so that
    every kernel sum adds the same terms in another order.  Weights that
    cancel strongly (long GP length scales, a tiny nugget) amplify the
    rounding; the result says what another library, BLAS or machine can be
    expected to reproduce.  Zero for methods without such sums (tensor splines).
    """
    info = model.method_info
    flipped = model.with_arrays(**(info.reverse(model.arrays) if info.reverse is not None else
                                   {k: np.array(model.arrays[k][::-1]) for k in info.training_rows}))
    a, b = model.evaluate(theta, grad=True), flipped.evaluate(theta, grad=True)
    pairs = [(a.values, b.values), (a.grad, b.grad)]
    for q in model.star_queries:  # as the queries amplify it
        ea = getattr(model, q)(theta, MASSES, return_grad=True)
        eb = getattr(flipped, q)(theta, MASSES, return_grad=True)
        pairs += [(ea.value, eb.value), (ea.grad, eb.grad)]
    return max(max_rel_diff(y, x) for x, y in pairs)


def self_check(model, path: Path) -> float:
    """Import the new file and compare every query with the library model; return the worst difference.

    Raises
    ------
    ExportError
        If a result differs by more than :data:`RTOL` or in its type, fields or shapes.
    """
    mod = import_file(path, f"_tovforge_export_probe_{os.getpid()}")
    theta = check_points(model.bounds, SELF_CHECK_POINTS)
    worst = 0.0
    for name, args, kw in query_calls(model.star_queries):
        got = flatten(getattr(mod, name)(theta, *args, **kw))
        want = flatten(getattr(model, name)(theta, *args, **kw))
        d = compare(got, want)
        if not d <= RTOL:
            raise ExportError(f"the generated file differs from the library model in {name}() by {d:.2e} (relative; "
                              f"inf: another type, field or shape) on the self-check points (allowed {RTOL:g}); "
                              "the file was not written.")
        worst = max(worst, d)
    return worst


def namespace_checks(path: Path, which, bounds: np.ndarray, noise: float = 0.0) -> dict:
    """Run the file under other array namespaces, in a subprocess each; one verdict line per namespace.

    Each subprocess is ``python -m tovforge.export._probe FILE NAMESPACE THETA_JSON``.
    """
    theta = json.dumps(check_points(bounds, SELF_CHECK_POINTS).tolist())
    out = {}
    for ns in which:
        try:
            r = subprocess.run([sys.executable, "-m", "tovforge.export._probe", str(path), ns, theta],
                               capture_output=True, text=True, timeout=600)
        except (OSError, subprocess.SubprocessError) as exc:
            out[ns] = f"FAILED (did not run: {str(exc)[:100]})"
            continue
        try:
            res = json.loads(r.stdout.strip().splitlines()[-1]) if r.returncode == 0 else None
        except (ValueError, IndexError):
            res = None
        if res is None:
            tail = (r.stderr.strip().splitlines() or ["no output"])[-1]
            out[ns] = f"FAILED ({tail[:120]})"
        elif res["worst"] is None:
            out[ns] = res["label"]
        else:
            limit = max(RTOL_OTHER, 10.0 * noise)
            verdict = "" if res["worst"] <= limit else f" (ABOVE {limit:.1e}: do not rely on it)"
            out[ns] = f"{res['label']}: {res['worst']:.1e}{verdict}"
    return out
