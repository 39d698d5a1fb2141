"""``train``: from a grid file to a saved surrogate."""

from __future__ import annotations

import logging
import time
import warnings

import numpy as np

from .._provenance import provenance
from ..errors import InputError
from ._data import TrainingData, emulated_outputs, read_training_data
from ._kinds import DENSE_LIMIT, check_kind, resolve, settings_for
from ._meta import ModelMeta, Training, new_outputs
from ._model import Surrogate
from ._sided import has_transition

__all__ = ["train", "train_on"]

logger = logging.getLogger(__name__)


def train(grid_path, kind: str = "spline", settings=None, allow_mismatch: bool = False) -> Surrogate:
    """Train a surrogate on a grid file.

    Parameters
    ----------
    grid_path : path
        A grid written by ``tovforge grid run``.
    kind : str
        One of :func:`tovforge.surrogate.kinds` (``"spline"``, the default:
        tensor-product cubic splines on a complete regular grid, one
        polyharmonic spline per side of the near/far discontinuity on the
        grids of ``<base>-transition`` families (method ``sided``, see
        :mod:`tovforge.surrogate._sided`), polyharmonic radial basis
        functions otherwise, and above
        :data:`~tovforge.surrogate._kinds.DENSE_LIMIT` (8,192) points the local
        method; ``"gp"``: Gaussian process; ``"local"``: a partition of unity of
        local polyharmonic splines, for large grids).  The default is the kind that reached the p95 every
        model must reach on the demo, sound-speed and spectral boxes (the GP
        missed two on the sound-speed box: M_max 0.011 Msun, Lambda 3.7 % at
        8,025 points; DEVELOPERS.md, Surrogates), at a fraction of the GP's
        training time, with a calibrated sigma from its error model.
    settings : GPSettings, SplineSettings or LocalSettings, optional
        Options of the kind (default: its defaults); SplineSettings and
        LocalSettings carry over to each other by field name when the spline
        kind changes method with the training size.
    allow_mismatch : bool
        Train on a grid whose datasets do not match its content hash (for
        forensics only; the model then records the hash the grid claims).
    """
    check_kind(kind)  # before the grid is read
    return train_on(read_training_data(grid_path, allow_mismatch=allow_mismatch), kind, settings)


def train_on(data: TrainingData, kind: str = "spline", settings=None) -> Surrogate:
    """Train on in-memory :class:`TrainingData` (see :func:`train`).

    Progress (kernels fitted, length scales, times) goes to the ``tovforge``
    logger at level INFO.
    """
    n, d = np.shape(data.theta)
    n_min = (d + 1) * (d + 2) // 2  # terms of the quadratic trend (GP) and of the RBF's polynomial
    if n < n_min:  # issue 16: 11 points trained "successfully" (the GP's length scales at their bounds)
        raise InputError(f"training needs at least {n_min} usable points for {d} parameters (the quadratic "
                         f"trend has {n_min} terms); the grid has {n}: run a grid with more points.")
    m = resolve(kind, data)
    if m.name != "sided" and has_transition(data.family):
        warnings.warn(f"{data.family}: the {kind} kind fits one {m.name} model over both sides of the jump of "
                      "M_max at the transition; measured on the family's default box it misses every accuracy "
                      "target (held-out M_max p95 0.21 Msun) and flags most stars untrusted. Two-sided splines "
                      f"need the spline kind and at least {(d + 1) * (d + 2)} training rows on each side "
                      "(DEVELOPERS.md, Surrogates).", UserWarning, stacklevel=2)
    if m.kind != kind:
        logger.info("%s kind, %d training points: fitted by the %s method (%s)", kind, n, m.name, m.description)
    settings = settings_for(kind, m, settings)
    t0 = time.perf_counter()
    result = m.fit(data, settings)
    seconds = time.perf_counter() - t0
    sequence, star = emulated_outputs()
    prov = data.provenance
    meta = ModelMeta(
        kind=kind,
        method=m.name,
        family=data.family,
        parameters=tuple(data.parameter_names),
        parameter_units=tuple(data.parameter_units),
        bounds=tuple((float(a), float(b)) for a, b in np.asarray(data.bounds, float)),
        outputs=new_outputs(sequence, star, data.u_nodes, data.mass_floor_msun),
        training=Training(
            n_train=int(len(data.theta)),
            seconds=seconds,
            **provenance("scipy", "scikit-learn"),
            grid_path=str(prov.get("grid_path", "")),
            grid_content_sha256=str(prov.get("grid_content_sha256", "")),
            grid_spec_sha256=str(prov.get("grid_spec_sha256", "")),
            grid_description=str(prov.get("grid_description", "")),
            grid_points=int(prov.get("grid_points", len(data.theta))),
            grid_points_used=int(prov.get("grid_points_used", len(data.theta))),
            refinement_points=int(prov.get("refinement_points", 0)),
        ),
        settings=result.settings if m.settings_recorded else None,
        fit=result.details,
    )
    return Surrogate(meta, result.arrays)
