"""Training data: the rows of a grid a surrogate learns, and which outputs it emulates.

The emulated outputs, their order, names and transforms come from the registry
of quantities (:func:`tovforge.quantities.emulated`); :func:`emulated_outputs`
fixes the order of the columns of a model.
"""

from __future__ import annotations

import dataclasses
import json
from dataclasses import dataclass, field

import numpy as np

from .. import quantities
from ..errors import InputError
from ..quantities import Quantity
from ..status import Status

__all__ = ["TrainingData", "emulated_outputs", "read_training_data", "training_data_from_arrays", "USED_STATUSES"]

#: Grid points used for training: solved, and solved with M_max below the floor, so
#: that the M_max margin is emulated smoothly across the floor.
USED_STATUSES = (Status.OK, Status.BELOW_FLOOR)


def emulated_outputs() -> tuple[tuple[Quantity, ...], tuple[Quantity, ...]]:
    """The quantities a new model emulates: one value per EOS, then curves at the nodes of u.

    Both in the registry's order, except that M_max comes last among the
    sequence quantities, next to the first curve (the radius), so that a GP
    can give it the kernel of the radius nodes near the maximum
    (:attr:`GPSettings.mass_max_with_radius`).  Its transform must be the
    identity: queries at a mass go through M_max itself.
    """
    mass_max = quantities.get("mass_max_msun")
    if mass_max.transform != "identity":  # pragma: no cover - a declaration error
        raise RuntimeError("the registry must emulate mass_max_msun untransformed (queries go through it)")
    sequence = tuple(q for q in quantities.emulated("sequence") if q is not mass_max) + (mass_max,)
    return sequence, quantities.emulated("star")


@dataclass(frozen=True)
class TrainingData:
    """Exact solves ready for training.

    Attributes
    ----------
    family : str
    parameter_names, parameter_units : tuple of str
    bounds : ndarray (d, 2)
        The box the design covers (the model's domain).
    theta : ndarray (n, d)
    scalars : dict of ndarray (n,)
        The sequence quantities, transformed, by model name
        (``mass_max_msun``, ``log10_central_pressure_at_mass_max``, ``max_sound_speed_sq``).
    u_nodes : ndarray (n_u,)
    curves : dict of ndarray (n, n_u)
        The curves at the nodes, transformed, by model name (``radius_km``,
        ``log_tidal_deformability``, ``log_moment_of_inertia``).
    mass_floor_msun : float
    regular_shape : tuple or None
        Points per axis when the design is a complete regular grid (rows in C order).
    provenance : dict
    trailing : tuple of str
        Names of ``scalars`` a model learns after the curves (the far side of a
        two-sided model: the transition mass); empty for grids' data.
    """

    family: str
    parameter_names: tuple
    parameter_units: tuple
    bounds: np.ndarray
    theta: np.ndarray
    scalars: dict
    u_nodes: np.ndarray
    curves: dict
    mass_floor_msun: float = 0.5
    regular_shape: tuple | None = None
    provenance: dict = field(default_factory=dict)
    trailing: tuple = ()

    def output_matrix(self) -> tuple[np.ndarray, np.ndarray]:
        """Outputs as one matrix (n, n_out) in the order of :func:`emulated_outputs` (then ``trailing``), and the
        curve slices."""
        sequence, star = emulated_outputs()
        cols = [self.scalars[q.model_name][:, None] for q in sequence]
        slices = []
        start = len(sequence)
        for q in star:
            c = self.curves[q.model_name]
            cols.append(c)
            slices.append((start, start + c.shape[1]))
            start += c.shape[1]
        cols += [self.scalars[name][:, None] for name in self.trailing]
        return np.hstack(cols), np.array(slices, dtype=np.int64)

    def rows(self, keep) -> TrainingData:
        """The data of the rows ``keep`` (a boolean mask or indices); no longer a regular grid."""
        return dataclasses.replace(self, theta=self.theta[keep],
                                   scalars={k: v[keep] for k, v in self.scalars.items()},
                                   curves={k: v[keep] for k, v in self.curves.items()}, regular_shape=None)


def _read(path, allow_mismatch: bool = False):
    from ..grid import read_grid

    return read_grid(path, allow_mismatch)  # InputError for a missing, foreign, damaged or altered file


def _known_family(path, name: str) -> None:
    from .. import eos

    if name not in eos.families():
        raise InputError(f"{path}: grid of an unknown EOS family {name!r}; known: {', '.join(eos.families())}.")


def read_training_data(path, family: str | None = None, min_points: int = 8,
                       allow_mismatch: bool = False) -> TrainingData:
    """Read a grid file and keep the rows a surrogate can learn from.

    Rows with status 0 or 2 whose curves are complete are kept.  Scalars and
    curves are transformed to the modelled quantities: ``log10`` of the central
    pressure at M_max, and the natural logs of Lambda and of I.  Fewer than
    ``min_points`` usable rows is an error (0 for grids that only add to
    others, such as the points of ``grid refine``).  A grid whose datasets
    do not match its content hash is refused unless ``allow_mismatch``.

    Raises
    ------
    InputError
        If the file is not a readable grid, lacks an output the surrogates
        need, or (with ``family``) belongs to another family.
    """
    g = _read(path, allow_mismatch)
    _known_family(path, g.family)
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
    sequence, star = emulated_outputs()
    for role, needed, got in (("scalars", sequence, scalars), ("curves", star, curves)):
        for q in needed:
            if q.name not in got:
                raise InputError(f"{path}: grid lacks {role[:-1]} {q.name!r}; add it to [outputs] {role} of the spec.")
    status = np.asarray(status)
    with np.errstate(divide="ignore", invalid="ignore"):  # the rows with bad values are dropped below
        model_curves = {q.model_name: quantities.forward(q, np.asarray(curves[q.name], float)) for q in star}
        model_scalars = {q.model_name: quantities.forward(q, np.asarray(scalars[q.name], float)) for q in sequence}
    keep = np.isin(status, [int(s) for s in USED_STATUSES])
    for v in list(model_curves.values()) + list(model_scalars.values()):
        keep &= np.all(np.isfinite(v.reshape(len(status), -1)), axis=1)
    if keep.sum() < min_points:
        raise InputError(f"{path}: only {int(keep.sum())} usable points (status "
                         f"{' or '.join(s.label for s in USED_STATUSES)}, with complete curves).")
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
