"""Designs: where in the parameter box the grid points go."""

from __future__ import annotations

import inspect
import warnings

import numpy as np

__all__ = ["design_points"]


def _qmc_engine(cls, d: int, seed: int):
    # SciPy >= 1.15 calls the seed ``rng``; both turn an int into default_rng(seed).
    key = "rng" if "rng" in inspect.signature(cls).parameters else "seed"
    return cls(d, scramble=True, **{key: seed})


def design_points(spec) -> np.ndarray:
    """Parameter rows of a grid spec's design.

    Parameters
    ----------
    spec : GridSpec

    Returns
    -------
    theta : ndarray, shape (n_points, n_parameters)
        ``regular``: the tensor product of evenly spaced values on each axis
        (both bounds included; one point on an axis sits at its centre), in
        C order: the first parameter varies slowest.  ``sobol``: the first
        ``n_points`` points of a scrambled Sobol sequence (Owen scrambling,
        seeded).  ``latin-hypercube``: a scrambled latin hypercube (seeded).
        The unit cube is mapped linearly onto the box.
    """
    from scipy.stats import qmc

    box = np.array(spec.box, float)
    lo, hi = box[:, 0], box[:, 1]
    d = spec.design
    if d.method == "regular":
        axes = [np.array([0.5]) if n == 1 else np.linspace(0.0, 1.0, n) for n in d.points_per_axis]
        unit = np.stack([g.ravel() for g in np.meshgrid(*axes, indexing="ij")], axis=1)
    elif d.method == "sobol":
        engine = _qmc_engine(qmc.Sobol, len(box), d.seed)
        with warnings.catch_warnings():
            # the spec reader already warned about a count that is not 2^m
            warnings.simplefilter("ignore", UserWarning)
            unit = engine.random(d.points)
    elif d.method == "latin-hypercube":
        unit = _qmc_engine(qmc.LatinHypercube, len(box), d.seed).random(d.points)
    else:  # pragma: no cover - the spec reader rejects other methods
        raise ValueError(f"unknown design {d.method!r}")
    # lo + u (hi - lo) rather than qmc.scale: exact at u = 0 and 1 for regular grids
    theta = lo + unit * (hi - lo)
    if d.method == "regular":
        theta = np.where(unit == 1.0, hi, theta)
    return np.ascontiguousarray(theta, dtype=np.float64)
