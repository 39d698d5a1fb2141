"""Small surrogates of every kind, and their exported files, shared by the export tests.

The GP models (one with its own kernel per output group, one whose curves share
kernels), the RBF model and the local spline (cells of ~60 points) learn 300 rows
of the demo training grid (a few seconds); the tensor-spline model learns a smooth
synthetic function on a 5^4 regular grid (the demo grid is scattered, and tensor
splines need a regular one).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest
from helpers import import_file  # noqa: F401 - the export tests import it from here

from tovforge.export import export_model
from tovforge.export._bench import synthetic_training_data
from tovforge.surrogate import GPSettings, LocalSettings, TrainingData, read_training_data, train_on

ROOT = Path(__file__).resolve().parents[3]
TRAIN_GRID = ROOT / "grids" / "demo-train.h5"
HOLDOUT_GRID = ROOT / "grids" / "demo-holdout.h5"
KINDS = ("gp", "gp-shared", "rbf", "tensor", "local")  # gp-shared: curves share kernels per block of u


def _subset(data: TrainingData, n: int) -> TrainingData:
    keep = slice(0, n)
    return dataclasses.replace(data, theta=data.theta[keep],
                               scalars={k: v[keep] for k, v in data.scalars.items()},
                               curves={k: v[keep] for k, v in data.curves.items()})


@pytest.fixture(scope="session")
def models():
    """One small trained model per kind."""
    data = _subset(read_training_data(TRAIN_GRID), 300)
    out = {
        "gp": train_on(data, "gp", GPSettings(n_subset=100, n_restarts=0)),
        "gp-shared": train_on(data, "gp", GPSettings(n_subset=100, n_restarts=0, share_curve_kernels=True)),
        "rbf": train_on(data, "spline"),
        "tensor": train_on(synthetic_training_data(5), "spline"),
        # small cells, so that queries blend several cells' interpolants
        "local": train_on(data, "local", LocalSettings(points_per_cell=60, min_points=40)),
    }
    assert [m.method for m in out.values()] == [k.split("-")[0] for k in KINDS]
    return out


@pytest.fixture(scope="session")
def exported(models, tmp_path_factory):
    """Each model exported (NumPy self-check only) and imported: kind -> (module, path)."""
    folder = tmp_path_factory.mktemp("exported")
    out = {}
    for kind, model in models.items():
        path = folder / f"small_{kind.replace('-', '_')}.py"
        export_model(model, path, namespaces=("numpy",))
        out[kind] = (import_file(path), path)
    return out


def box_points(model, n: int, seed: int, inner: float = 0.0) -> np.ndarray:
    """Uniform random points of the model's box, ``inner`` of each side left out."""
    rng = np.random.default_rng(seed)
    lo, hi = model.bounds[:, 0], model.bounds[:, 1]
    return lo + (hi - lo) * (inner + (1.0 - 2.0 * inner) * rng.random((n, len(lo))))
