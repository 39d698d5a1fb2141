"""What every fit shares: the model's common arrays, the input warp, the trend, subsets, the result type."""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
from scipy.interpolate import CubicSpline

from ..errors import InputError
from . import _runtime as rt
from ._data import TrainingData

__all__ = ["FitResult", "Prepared", "prepare", "input_warp", "trend_powers", "trend_matrix", "trend_residuals",
           "spline_cardinal_coefficients", "saddle_matrix", "space_filling_subset", "matern_kernel",
           "degenerate_kernels", "fit_gaussian_process", "LENGTH_BOUNDS", "NOISE_BOUNDS", "MIN_NEIGHBOUR_CORRELATION"]

#: Bounds of the GP length scales, in units of the (warped) parameter box.
LENGTH_BOUNDS = (1e-3, 1e3)
#: Default bounds of the GP nugget, in units of the variance of the residual after the trend.
NOISE_BOUNDS = (1e-6, 1e-4)
#: Median kernel correlation with the nearest training point below which a fit is called degenerate.
MIN_NEIGHBOUR_CORRELATION = 0.05


@dataclass(frozen=True)
class FitResult:
    """What a fit of one kind returns.

    Attributes
    ----------
    arrays : dict of ndarray
        Every array the runtime reads (the common ones and the method's).
    settings : dataclass or None
        The options the fit ran with (recorded in the model; None for a fit without options).
    details : dataclass
        What the fit found (hyperparameters, timings, warnings), recorded in the model.
    """

    arrays: dict
    settings: object
    details: object


@dataclass(frozen=True)
class Prepared:
    """What every fit starts from (see :func:`prepare`).

    Attributes
    ----------
    arrays : dict of ndarray
        The common arrays of a model (box, output standardisation, u nodes and
        their spline coefficients, curve slices; the input warp if any).
    slices : ndarray (n_curves, 2)
        The output columns of each curve.
    x : ndarray (n, d)
        Unit inputs of the training points (warped if asked).
    Z : ndarray (n, n_out)
        Standardised outputs.
    input_warp : dict
        ``{name: "ln(name - offset)"}`` of the warped parameters (empty without a warp).
    """

    arrays: dict
    slices: np.ndarray
    x: np.ndarray
    Z: np.ndarray
    input_warp: dict = field(default_factory=dict)


def spline_cardinal_coefficients(u_nodes: np.ndarray) -> np.ndarray:
    """Cubic-spline coefficients (4, n_u - 1, n_u) of the cardinal functions on the nodes.

    The not-a-knot spline through node values ``v`` is the linear combination
    of these with weights ``v`` (SciPy's CubicSpline, applied to the identity).
    """
    cs = CubicSpline(u_nodes, np.eye(len(u_nodes)), axis=0)
    return np.ascontiguousarray(cs.c)


def _common_arrays(data: TrainingData, Y: np.ndarray, slices) -> dict:
    lo, hi = data.bounds[:, 0].astype(float), data.bounds[:, 1].astype(float)
    return {
        "lo": lo,
        "hi": hi,
        "out_mean": Y.mean(axis=0),
        "out_scale": np.where(Y.std(axis=0) > 0, Y.std(axis=0), 1.0),
        "u_nodes": np.asarray(data.u_nodes, float),
        "spline_c": spline_cardinal_coefficients(np.asarray(data.u_nodes, float)),
        "curve_slices": slices,
    }


def prepare(data: TrainingData, warp_inputs: bool) -> Prepared:
    """The common arrays, unit inputs and standardised outputs of ``data`` (with the family's warp if asked)."""
    Y, slices = data.output_matrix()
    arrays = _common_arrays(data, Y, slices)
    warp = input_warp(data) if warp_inputs else None
    if warp:
        arrays.update(warp)
    x = rt.unit_inputs(np, arrays, data.theta)[0]
    Z = (Y - arrays["out_mean"]) / arrays["out_scale"]
    warped = ({n: f"ln({n} - {c:g})" for n, c, f in zip(data.parameter_names, warp["warp_shift"], warp["warp_log"])
               if f} if warp else {})
    return Prepared(arrays=arrays, slices=slices, x=x, Z=Z, input_warp=warped)


def input_warp(data: TrainingData) -> dict | None:
    """Arrays of the family's input warp (``ln(theta - log_offset)``), or None if it has none.

    Returns ``warp_log`` (d,) 0/1, ``warp_shift`` (d,), and the warped box
    ``wlo``, ``whi`` (d,) (the raw bounds where a parameter is not warped),
    computed with the same operations as :func:`_runtime.unit_inputs`.
    """
    from .. import eos

    try:
        fam = eos.get_family(data.family)
    except (InputError, KeyError):
        return None
    offsets = {p.name: p.log_offset for p in fam.parameters}
    flags = np.array([offsets.get(n) is not None for n in data.parameter_names])
    if not flags.any():
        return None
    shift = np.array([offsets[n] if f else 0.0 for n, f in zip(data.parameter_names, flags)], dtype=float)
    lo, hi = data.bounds[:, 0].astype(float), data.bounds[:, 1].astype(float)
    below = [n for n, f, a, c in zip(data.parameter_names, flags, lo, shift) if f and not a > c]
    if below:
        raise InputError(f"the box of {below[0]} must lie above its log offset {offsets[below[0]]:g} "
                         f"(the GP uses ln({below[0]} - {offsets[below[0]]:g})).")
    wlo = np.array([np.log(a - c) if f else a for a, c, f in zip(lo, shift, flags)])
    whi = np.array([np.log(b - c) if f else b for b, c, f in zip(hi, shift, flags)])
    return {"warp_log": flags.astype(np.int64), "warp_shift": shift, "wlo": wlo, "whi": whi}


def trend_powers(d: int, degree: int) -> np.ndarray:
    """Exponents of all monomials of total degree <= ``degree`` in ``d`` variables."""
    out = [np.zeros(d, dtype=np.int64)]
    for deg in range(1, degree + 1):
        def rec(prefix, left, i):
            if i == d - 1:
                yield prefix + [left]
                return
            for p in range(left, -1, -1):
                yield from rec(prefix + [p], left - p, i + 1)
        out += [np.array(p) for p in rec([], deg, 0)]
    return np.array(out, dtype=np.int64)


def saddle_matrix(x, P):
    """The interpolation matrix ``[[Phi, P], [P^T, 0]]`` of an r^5 spline plus a polynomial at points x (n, d)
    (:func:`tovforge.surrogate._runtime.saddle_matrix`, which exported files use to solve local splines' cells)."""
    return rt.saddle_matrix(np, np.asarray(x, float), P)


def trend_matrix(x, powers):
    """The monomials ``powers`` at unit inputs x (n, d): (n, n_terms), as the runtime computes them."""
    return rt.trend_terms(np, powers, rt.trend_plan(powers), x, False)[0]


def trend_residuals(x, Z, degree):
    """Least-squares polynomial trend of ``Z`` in ``x``.

    Returns the monomial powers, the coefficients, the residuals scaled to unit
    spread per column, and those scales.
    """
    powers = trend_powers(x.shape[1], degree)
    F = trend_matrix(x, powers)
    coef, *_ = np.linalg.lstsq(F, Z, rcond=None)
    resid = Z - F @ coef
    rscale = np.where(resid.std(axis=0) > 0, resid.std(axis=0), 1.0)
    return powers, coef, resid / rscale, rscale


def matern_kernel(d, noise_bounds=NOISE_BOUNDS):
    """scikit-learn kernel of every GP here: amplitude x anisotropic Matern-5/2 + a white-noise nugget."""
    from sklearn.gaussian_process.kernels import ConstantKernel, Matern, WhiteKernel

    return ConstantKernel(1.0, (1e-4, 1e7)) * Matern(length_scale=np.full(d, 0.5), length_scale_bounds=LENGTH_BOUNDS,
                                                     nu=2.5) + WhiteKernel(noise_bounds[0], noise_bounds)


def space_filling_subset(x, n, seed):
    """Greedy farthest-point subset of ``n`` rows (deterministic for a seed)."""
    if len(x) <= n:
        return np.arange(len(x))
    rng = np.random.default_rng(seed)
    chosen = [int(rng.integers(len(x)))]
    d2 = np.sum((x - x[chosen[0]]) ** 2, axis=1)
    for _ in range(n - 1):
        i = int(np.argmax(d2))
        chosen.append(i)
        d2 = np.minimum(d2, np.sum((x - x[i]) ** 2, axis=1))
    return np.array(sorted(chosen))


def degenerate_kernels(x: np.ndarray, sub: np.ndarray, length: np.ndarray) -> list[str]:
    """Messages for kernels under which neighbouring training points are nearly uncorrelated.

    Such a GP explained the outputs as white noise (length scales far below
    the spacing of the design) and predicts the trend alone between training
    points.  For each kernel, the Matern-5/2 correlation of each subset point
    with its nearest other training point is computed; a median below
    :data:`MIN_NEIGHBOUR_CORRELATION` is reported.  ``x`` (n, d) unit inputs,
    ``sub`` the subset rows, ``length`` (n_kernels, d).
    """
    out = []
    for k, row in enumerate(np.atleast_2d(length)):
        d2 = np.sum(((x[sub, None, :] - x[None, :, :]) / row) ** 2, axis=-1)
        d2[np.arange(len(sub)), sub] = np.inf  # not the point itself
        r = np.sqrt(5.0 * d2.min(axis=1))
        corr = float(np.median((1.0 + r + r * r / 3.0) * np.exp(-r)))
        if corr < MIN_NEIGHBOUR_CORRELATION:
            out.append(f"kernel {k + 1}: neighbouring training points are nearly uncorrelated (median correlation "
                       f"{corr:.2g} with the nearest one; length scales {np.array2string(row, precision=3)}): a "
                       "degenerate fit; check the held-out errors, try another subset, trend degree or seed")
    return out


def fit_gaussian_process(x, R, sub, kernel, n_restarts, seed):
    """Hyperparameters of ``kernel`` on the rows ``sub`` by scikit-learn (marginal likelihood, restarts).

    Returns the fitted scikit-learn kernel and the texts of its convergence warnings.
    """
    from sklearn.exceptions import ConvergenceWarning
    from sklearn.gaussian_process import GaussianProcessRegressor

    gpr = GaussianProcessRegressor(kernel, n_restarts_optimizer=n_restarts, random_state=seed, normalize_y=False)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ConvergenceWarning)
        gpr.fit(x[sub], R[sub])
    return gpr.kernel_, [str(w.message) for w in caught]
