"""Small surrogates for the table tests, trained once per session on a slice of the demo grid."""

from __future__ import annotations

import dataclasses
import functools
from pathlib import Path

from tovforge import surrogate

DEMO_TRAIN = Path(__file__).resolve().parents[1] / "grids" / "demo-train.h5"

#: SLy-like parameters (Read et al. 2009 fit, see helpers.READ2009) inside the demo box.
THETA_SLY = {"log_p1": 34.384, "gamma1": 3.005, "gamma2": 2.988, "gamma3": 2.851}


def _first_rows(data, n: int):
    return dataclasses.replace(data, theta=data.theta[:n], scalars={k: v[:n] for k, v in data.scalars.items()},
                               curves={k: v[:n] for k, v in data.curves.items()})


@functools.lru_cache(maxsize=None)
def tiny_model(kind: str = "spline"):
    """A spline (RBF) model on 256 points, or a GP on 96 points (a few seconds)."""
    data = surrogate.read_training_data(DEMO_TRAIN)
    if kind == "gp":
        settings = surrogate.GPSettings(n_subset=96, n_restarts=0)
        return surrogate.train_on(_first_rows(data, 96), "gp", settings)
    return surrogate.train_on(_first_rows(data, 256), "spline")
