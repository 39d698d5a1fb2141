"""Turning a grid file into training (or held-out) data."""

from __future__ import annotations

import json

import numpy as np

from ..errors import InputError
from ._fit import SCALARS, TrainingData

__all__ = ["read_training_data", "training_data_from_arrays", "USED_STATUSES"]

#: Grid points used for training: solved (0) and solved-below-the-floor (2), so
#: that the M_max margin is emulated smoothly across the floor.
USED_STATUSES = (0, 2)


def _read(path):
    from ..grid import read_grid

    return read_grid(path)  # raises InputError for a missing, foreign or damaged file


def read_training_data(path, family: str | None = None, min_points: int = 8) -> TrainingData:
    """Read a grid file and keep the rows a surrogate can learn from.

    Rows with status 0 or 2 whose curves are complete are kept.  Scalars and
    curves are transformed to the modelled quantities: ``log10`` of the central
    pressure at M_max, and the natural logs of Lambda and of I.  Fewer than
    ``min_points`` usable rows is an error (0 for grids that only add to
    others, such as the points of ``grid refine``).

    Raises
    ------
    InputError
        If the file is not a readable grid, lacks an output the surrogates
        need, or (with ``family``) belongs to another family.
    """
    g = _read(path)
    if family is not None and g.family != family:
        raise InputError(f"{path}: grid of family {g.family!r}, but the model is of family {family!r}.")
    if getattr(g, "curves", None) is None or "radius_km" not in (g.curves or {}):
        raise InputError(f"{path}: grid lacks curve 'radius_km'; add it to [outputs] curves of the spec.")
    return training_data_from_arrays(
        path=path, family_name=g.family, parameter_names=g.parameter_names, parameter_units=g.parameter_units,
        box=g.box, theta=g.parameters, status=g.status, scalars=g.scalars, curves=g.curves, u_nodes=g.u_nodes,
        attrs=dict(g.attrs), min_points=min_points)


def training_data_from_arrays(*, path, family_name, parameter_names, parameter_units, box, theta, status,
                              scalars, curves, u_nodes, attrs, min_points: int = 8) -> TrainingData:
    """The rows of grid-like arrays that a surrogate can learn from (see :func:`read_training_data`)."""
    need_s = ("mass_max_msun", "central_pressure_at_mass_max_dyn_cm2", "max_sound_speed_sq")
    need_c = ("radius_km", "tidal_deformability", "moment_of_inertia_1e45_g_cm2")
    for k in need_s:
        if k not in scalars:
            raise InputError(f"{path}: grid lacks scalar {k!r}; add it to [outputs] scalars of the spec.")
    for k in need_c:
        if k not in curves:
            raise InputError(f"{path}: grid lacks curve {k!r}; add it to [outputs] curves of the spec.")
    status = np.asarray(status)
    with np.errstate(divide="ignore", invalid="ignore"):
        model_curves = {
            "radius_km": np.asarray(curves["radius_km"], float),
            "log_tidal_deformability": np.log(curves["tidal_deformability"]),
            "log_moment_of_inertia": np.log(curves["moment_of_inertia_1e45_g_cm2"]),
        }
        model_scalars = {
            "mass_max_msun": np.asarray(scalars["mass_max_msun"], float),
            "log10_central_pressure_at_mass_max": np.log10(scalars["central_pressure_at_mass_max_dyn_cm2"]),
            "max_sound_speed_sq": np.asarray(scalars["max_sound_speed_sq"], float),
        }
    keep = np.isin(status, USED_STATUSES)
    for v in list(model_curves.values()) + list(model_scalars.values()):
        keep &= np.all(np.isfinite(v.reshape(len(status), -1)), axis=1)
    if keep.sum() < min_points:
        raise InputError(f"{path}: only {int(keep.sum())} usable points (status 0 or 2 with complete curves).")
    spec = json.loads(attrs.get("spec_json", "{}")) if isinstance(attrs.get("spec_json"), str) else {}
    regular = None
    design = spec.get("design", {}) if isinstance(spec, dict) else {}
    if design.get("method") == "regular" and keep.all():
        ppa = design.get("points_per_axis")
        if isinstance(ppa, dict):
            regular = tuple(int(ppa[n]) for n in parameter_names)
        elif ppa is not None:
            regular = tuple([int(ppa)] * len(parameter_names))
    provenance = {
        "grid_path": str(path),
        "grid_content_sha256": str(attrs.get("content_sha256", "")),
        "grid_spec_sha256": str(attrs.get("spec_sha256", "")),
        "grid_description": str(attrs.get("description", "")),
        "grid_points": int(len(status)),
        "grid_points_used": int(keep.sum()),
    }
    return TrainingData(
        family=family_name,
        parameter_names=tuple(parameter_names),
        parameter_units=tuple(parameter_units),
        bounds=np.asarray(box, float),
        theta=np.asarray(theta, float)[keep],
        scalars={k: v[keep] for k, v in model_scalars.items()},
        u_nodes=np.asarray(u_nodes, float),
        curves={k: v[keep] for k, v in model_curves.items()},
        mass_floor_msun=float(attrs.get("mass_max_floor_msun", 0.5)),
        regular_shape=regular,
        provenance=provenance,
    )


assert set(SCALARS) == {"mass_max_msun", "log10_central_pressure_at_mass_max", "max_sound_speed_sq"}
