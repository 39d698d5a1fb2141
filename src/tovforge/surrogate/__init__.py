"""Surrogates of the stable branch trained on grids: Gaussian processes and splines.

A surrogate predicts, for EOS parameters ``theta`` inside its box, the maximum
mass, the central pressure and largest sound speed at the maximum, and the
radius, ln Lambda and ln I at fixed nodes of ``u = sqrt(1 - M / M_max)``;
queries at a mass go through ``u`` and a cubic spline in it.  All prediction
arithmetic lives in :mod:`tovforge.surrogate._runtime`, which the exporter
copies into standalone files.
"""

from __future__ import annotations

from ._dataset import read_training_data
from ._fit import GPSettings, SplineSettings, TrainingData
from ._model import MassPrediction, ModelFormatError, Prediction, Surrogate, load
from ._train import train, train_on

__all__ = [
    "GPSettings",
    "MassPrediction",
    "ModelFormatError",
    "Prediction",
    "SplineSettings",
    "Surrogate",
    "TrainingData",
    "load",
    "read_training_data",
    "train",
    "train_on",
]
