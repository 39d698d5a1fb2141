"""Tensor-product cubic interpolating splines on complete regular grids."""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ._data import TrainingData
from ._prepare import FitResult, prepare
from ._record import Record

__all__ = ["TensorFit", "fit_tensor", "is_regular"]

logger = logging.getLogger(__name__)


@dataclass(frozen=True)
class TensorFit(Record):
    """What a tensor-spline fit used (recorded in the model).

    Attributes
    ----------
    shape : tuple of int
        Points per parameter axis of the regular grid.
    """

    shape: tuple = ()


def is_regular(data: TrainingData) -> bool:
    """True when the training points are a complete regular grid (what tensor splines need)."""
    return data.regular_shape is not None


def fit_tensor(data: TrainingData, settings=None) -> FitResult:
    """Tensor-product cubic interpolating splines on a complete regular grid.

    The coefficients come from interpolating along one axis after another
    with SciPy's ``make_interp_spline`` (not-a-knot cubic B-splines).  The
    fit has no options: ``settings`` (those of the spline kind) are not used.

    Returns
    -------
    FitResult
        The arrays, no settings, and a :class:`TensorFit`.
    """
    from scipy.interpolate import make_interp_spline

    if data.regular_shape is None:
        raise InputError("tensor-product splines need a regular design; this grid is scattered (use kind rbf).")
    shape = tuple(int(s) for s in data.regular_shape)
    if min(shape) < 4:
        raise InputError(f"cubic tensor splines need at least 4 points per axis; the grid has {shape}.")
    p = prepare(data, warp_inputs=False)
    arrays, x, Z = dict(p.arrays), p.x, p.Z
    coef = Z.reshape(*shape, Z.shape[1])
    knots = []
    for i in range(len(shape)):
        # the coordinates along axis i: the first point of every other axis
        sl = tuple(slice(None) if j == i else 0 for j in range(len(shape)))
        xi = x.reshape(*shape, x.shape[1])[sl + (i,)]
        spl = make_interp_spline(xi, np.moveaxis(coef, i, 0), k=3, axis=0)
        coef = np.moveaxis(spl.c, 0, i)
        knots.append(spl.t)
    kmax = max(len(k) for k in knots)
    knot_arr = np.full((len(shape), kmax), np.nan)
    for i, k in enumerate(knots):
        knot_arr[i, : len(k)] = k
    arrays.update(trend_powers=np.zeros((1, x.shape[1]), dtype=np.int64), trend_coef=np.zeros((1, Z.shape[1])),
                  knots=knot_arr, n_knots=np.array([len(k) for k in knots]), coef=coef.reshape(-1, Z.shape[1]),
                  coef_shape=np.array(shape))
    logger.info(f"  tensor-product cubic splines on a {' x '.join(map(str, shape))} grid")
    return FitResult(arrays=arrays, settings=None, details=TensorFit(shape=shape))
