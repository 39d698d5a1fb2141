"""``train``: from a grid file to a saved surrogate."""

from __future__ import annotations

import time

import numpy as np

from .._provenance import provenance
from ..errors import InputError
from ._dataset import read_training_data
from ._fit import GPSettings, SplineSettings, TrainingData, fit_gp, fit_rbf, fit_tensor
from ._model import FORMAT, FORMAT_VERSION, Surrogate

__all__ = ["train", "train_on"]

KINDS = ("gp", "spline")


def train(grid_path, kind: str = "gp", gp_settings: GPSettings | None = None,
          spline_settings: SplineSettings | None = None) -> Surrogate:
    """Train a surrogate on a grid file.

    Parameters
    ----------
    grid_path : path
        A grid written by ``tovforge grid run``.
    kind : {"gp", "spline"}
        Gaussian process, or splines: tensor-product cubic splines on a
        complete regular grid, polyharmonic radial basis functions otherwise.
    gp_settings : GPSettings, optional
    spline_settings : SplineSettings, optional
        Options of the radial-basis-function spline (scattered designs).
    """
    if kind not in KINDS:
        raise InputError(f"kind must be one of {', '.join(KINDS)}; got {kind!r}.")
    data = read_training_data(grid_path)
    return train_on(data, kind, gp_settings, spline_settings)


def train_on(data: TrainingData, kind: str = "gp", gp_settings: GPSettings | None = None,
             spline_settings: SplineSettings | None = None) -> Surrogate:
    """Train on in-memory :class:`TrainingData` (see :func:`train`).

    Progress (kernels fitted, length scales, times) goes to the ``tovforge``
    logger at level INFO.
    """
    t0 = time.perf_counter()
    if kind == "gp":
        index, extra, arrays = fit_gp(data, gp_settings or GPSettings())
        model_kind = "gp"
    elif data.regular_shape is not None:
        index, extra, arrays = fit_tensor(data)
        model_kind = "tensor"
    else:
        index, extra, arrays = fit_rbf(data, spline_settings or SplineSettings())
        model_kind = "rbf"
    seconds = time.perf_counter() - t0
    meta = {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "kind": model_kind,
        "requested_kind": kind,
        "family": data.family,
        "parameters": list(data.parameter_names),
        "parameter_units": list(data.parameter_units),
        "bounds": np.asarray(data.bounds).tolist(),
        "outputs": {
            "index": index,
            "scalars": list(index),
            "curves": ["radius_km", "log_tidal_deformability", "log_moment_of_inertia"],
            "curve_units": ["km", "ln(Lambda)", "ln(I / 1e45 g cm^2)"],
            "sequence_coordinate": "u = sqrt(1 - M / M_max)",
            "u_nodes": np.asarray(data.u_nodes).tolist(),
            "mass_floor_msun": data.mass_floor_msun,
        },
        "training": {
            "n_train": int(len(data.theta)),
            "seconds": seconds,
            **provenance("scipy", "scikit-learn"),
            **data.provenance,
            **extra,
        },
    }
    return Surrogate(meta, arrays)
