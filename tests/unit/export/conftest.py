"""Small surrogates of every kind, and their exported files, shared by the export tests.

The GP and RBF models learn 300 rows of the demo training grid (a few seconds);
the tensor-spline model learns a smooth synthetic function on a 5^4 regular grid
(the demo grid is scattered, and tensor splines need a regular one).
"""

from __future__ import annotations

import dataclasses
import importlib.util
import itertools
import sys
from pathlib import Path

import numpy as np
import pytest

from tovforge.export import export_model
from tovforge.surrogate import GPSettings, TrainingData, read_training_data, train_on

ROOT = Path(__file__).resolve().parents[3]
TRAIN_GRID = ROOT / "grids" / "demo-train.h5"
HOLDOUT_GRID = ROOT / "grids" / "demo-holdout.h5"
KINDS = ("gp", "rbf", "tensor")


def import_file(path: Path, name: str | None = None):
    """Import a generated evaluator from its path under a fresh module name."""
    name = name or f"exported_{path.stem}_{abs(hash(str(path)))}"
    spec = importlib.util.spec_from_file_location(name, path)
    mod = importlib.util.module_from_spec(spec)
    sys.modules[name] = mod
    try:
        spec.loader.exec_module(mod)
    finally:
        sys.modules.pop(name, None)
    return mod


def _subset(data: TrainingData, n: int) -> TrainingData:
    keep = slice(0, n)
    return dataclasses.replace(data, theta=data.theta[keep],
                               scalars={k: v[keep] for k, v in data.scalars.items()},
                               curves={k: v[keep] for k, v in data.curves.items()})


def synthetic_regular_data(points_per_axis: int = 5) -> TrainingData:
    """A smooth, physically plausible stable branch on a regular grid of the demo box."""
    box = np.array([[34.0, 35.0], [2.0, 4.0], [1.5, 4.0], [1.5, 4.0]])
    axes = [np.linspace(0.0, 1.0, points_per_axis)] * 4
    x = np.array(list(itertools.product(*axes)))  # C order, as a regular design
    theta = box[:, 0] + x * (box[:, 1] - box[:, 0])
    n_u = 24
    u = 0.85 * 0.5 * (1.0 - np.cos(np.pi * np.arange(n_u) / (n_u - 1)))
    x0, x1, x2, x3 = (x[:, i : i + 1] for i in range(4))
    scalars = {
        "mass_max_msun": (2.0 + 0.4 * x0[:, 0] + 0.2 * x1[:, 0] - 0.1 * x2[:, 0] * x3[:, 0]),
        "log10_central_pressure_at_mass_max": 35.5 - 0.3 * x0[:, 0] + 0.05 * x1[:, 0] ** 2,
        "max_sound_speed_sq": 0.5 + 0.2 * x1[:, 0] + 0.1 * np.sin(2.0 * x2[:, 0]),
    }
    curves = {
        "radius_km": 10.5 + 1.5 * x0 - 0.5 * x1 + 0.3 * x2 * x3 + (1.2 + 0.2 * x0) * u**2 + 0.1 * u * x1,
        "log_tidal_deformability": 1.0 + 0.4 * x0 + (6.0 + 0.5 * x1) * u + 0.2 * u**2 * x3,
        "log_moment_of_inertia": 0.8 + 0.2 * x0 - 1.5 * u**2 + 0.05 * x2 * u,
    }
    return TrainingData(family="piecewise-polytrope", parameter_names=("log_p1", "gamma1", "gamma2", "gamma3"),
                        parameter_units=("log10(dyn/cm^2)", "1", "1", "1"), bounds=box, theta=theta,
                        scalars=scalars, u_nodes=u, curves=curves, mass_floor_msun=1.0,
                        regular_shape=(points_per_axis,) * 4,
                        provenance={"grid_path": "synthetic", "grid_content_sha256": "synthetic"})


@pytest.fixture(scope="session")
def models():
    """One small trained model per kind."""
    data = _subset(read_training_data(TRAIN_GRID), 300)
    out = {
        "gp": train_on(data, "gp", GPSettings(n_subset=100, n_restarts=0)),
        "rbf": train_on(data, "spline"),
        "tensor": train_on(synthetic_regular_data(), "spline"),
    }
    assert [m.kind for m in out.values()] == list(KINDS)
    return out


@pytest.fixture(scope="session")
def exported(models, tmp_path_factory):
    """Each model exported (NumPy self-check only) and imported: kind -> (module, path)."""
    folder = tmp_path_factory.mktemp("exported")
    out = {}
    for kind, model in models.items():
        path = folder / f"small_{kind}.py"
        export_model(model, path, namespaces=("numpy",))
        out[kind] = (import_file(path), path)
    return out


def box_points(model, n: int, seed: int, inner: float = 0.0) -> np.ndarray:
    """Uniform random points of the model's box, ``inner`` of each side left out."""
    rng = np.random.default_rng(seed)
    lo, hi = model.bounds[:, 0], model.bounds[:, 1]
    return lo + (hi - lo) * (inner + (1.0 - 2.0 * inner) * rng.random((n, len(lo))))
