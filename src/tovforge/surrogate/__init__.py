"""Surrogates of the stable branch trained on grids: Gaussian processes and splines.

A surrogate predicts, for EOS parameters ``theta`` inside its box, the
quantities the registry marks as emulated (:func:`tovforge.quantities.emulated`:
the maximum mass, the central pressure and largest sound speed at the
maximum, and the radius, Lambda and I at fixed nodes of
``u = sqrt(1 - M / M_max)``); queries at a mass go through ``u`` and a cubic
spline in it.  All prediction arithmetic lives in
:mod:`tovforge.surrogate._runtime` and the query contract in
:mod:`tovforge.surrogate._contract`, which the exporter copies into
standalone files.  The kinds of surrogate are one table,
:mod:`tovforge.surrogate._kinds`.
"""

from __future__ import annotations

from ._check import CheckReport, check
from ._contract import Curve, Estimate, MassPrediction, Prediction, QueryError
from ._data import TrainingData, read_training_data, training_data_from_arrays
from ._gp import GPSettings
from ._kinds import kinds
from ._local import LocalSettings
from ._meta import LearningPoint, ModelMeta
from ._model import Evaluation, ModelFormatError, Surrogate, load
from ._prepare import FitResult
from ._rbf import SplineSettings
from ._train import train, train_on

__all__ = [
    "CheckReport",
    "Curve",
    "Estimate",
    "Evaluation",
    "FitResult",
    "GPSettings",
    "LearningPoint",
    "LocalSettings",
    "MassPrediction",
    "ModelFormatError",
    "ModelMeta",
    "Prediction",
    "QueryError",
    "SplineSettings",
    "Surrogate",
    "TrainingData",
    "check",
    "kinds",
    "load",
    "read_training_data",
    "train",
    "train_on",
    "training_data_from_arrays",
]
