"""What a model says about itself: typed metadata, written as ``model.json``.

Format version 2.  Version 1 files (written before the table of kinds) are
read too: their ``kind`` was the method, ``requested_kind`` the kind, and the
settings and fit record sat in ``training[<method>]``.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

from .. import quantities
from ..quantities import Quantity
from ._kinds import method
from ._record import Record, nested

__all__ = ["ModelMeta", "Output", "Outputs", "Training", "LearningPoint", "new_outputs", "FORMAT",
           "FORMAT_VERSION"]

FORMAT = "tovforge-surrogate"
FORMAT_VERSION = 2


@dataclass(frozen=True)
class Output(Record):
    """One emulated output of a model.

    Attributes
    ----------
    name : str
        Its name in the model (``log_tidal_deformability``).
    quantity : str
        The quantity it is (``tidal_deformability``; see :mod:`tovforge.quantities`).
    unit : str
        The quantity's unit (predictions are in it; the model transform undone).
    transform : str
        How the model transformed the quantity (``identity``, ``ln``, ``log10``).
    query : str or None
        The query that answers it (for curves: at a mass).
    """

    name: str
    quantity: str
    unit: str
    transform: str
    query: str | None = None

    @classmethod
    def of(cls, q: Quantity) -> Output:
        return cls(name=q.model_name, quantity=q.name, unit=q.unit, transform=q.transform, query=q.query)


@dataclass(frozen=True)
class Outputs(Record):
    """The outputs of a model, in column order: sequence quantities, then curves at the nodes of u.

    Attributes
    ----------
    scalars : tuple of Output
        One column each.
    curves : tuple of Output
        ``len(u_nodes)`` columns each.
    u_nodes : tuple of float
        The nodes of ``u = sqrt(1 - M / M_max)``.
    mass_floor_msun : float
        The floor of M_max of the training grid.
    """

    scalars: tuple = nested(Output, many=True, default=())
    curves: tuple = nested(Output, many=True, default=())
    u_nodes: tuple = ()
    mass_floor_msun: float = 0.5
    sequence_coordinate: str = "u = sqrt(1 - M / M_max)"

    def columns(self) -> dict[str, slice]:
        """The output columns of each output, by name."""
        out, n_u = {}, len(self.u_nodes)
        for i, o in enumerate(self.scalars):
            out[o.name] = slice(i, i + 1)
        start = len(self.scalars)
        for o in self.curves:
            out[o.name] = slice(start, start + n_u)
            start += n_u
        return out

    def runtime(self) -> tuple[tuple, ...]:
        """The outputs as :class:`tovforge.surrogate._runtime.Model` reads them."""
        cols = self.columns()
        return tuple((o.name, o.quantity, level, o.transform, o.query, cols[o.name].start, cols[o.name].stop)
                     for level, group in (("sequence", self.scalars), ("star", self.curves)) for o in group)


@dataclass(frozen=True)
class Training(Record):
    """Where a model's training data came from, when, with which versions and how long it trained.

    The versions, ``git_commit`` and ``created_utc`` are those of
    :func:`tovforge._provenance.provenance`.
    """

    n_train: int = 0
    seconds: float = 0.0
    created_utc: str = ""
    tovforge_version: str = ""
    python_version: str = ""
    numpy_version: str = ""
    scipy_version: str = ""
    scikit_learn_version: str = ""
    git_commit: str = ""
    grid_path: str = ""
    grid_content_sha256: str = ""
    grid_spec_sha256: str = ""
    grid_description: str = ""
    grid_points: int = 0
    grid_points_used: int = 0
    refinement_points: int = 0
    refinement_grids: tuple = ()


@dataclass(frozen=True)
class LearningPoint(Record):
    """Held-out p95 errors of a model trained on ``n_train`` points (a row of a learning curve)."""

    n_train: int
    mass_max_p95: float
    radius_p95_km: float
    lambda_rel_p95: float


@dataclass(frozen=True)
class ModelMeta(Record):
    """Everything a model says about itself besides its arrays.

    Attributes
    ----------
    kind : str
        What users asked for (``gp``, ``spline``).
    method : str
        The implementation (``gp``, ``rbf``, ``tensor``; see :mod:`tovforge.surrogate._kinds`).
    family : str
    parameters, parameter_units : tuple of str
    bounds : tuple of (float, float)
        The trained box.
    outputs : Outputs
    training : Training
    settings : Record or None
        The options the fit ran with (the method's settings class).
    fit : Record
        What the fit found (the method's record class).
    learning_curve : tuple of LearningPoint
        Held-out errors against training size (``grid refine``).
    learning_curve_holdout : str or None
    arrays_sha256 : str
        Checksum of ``arrays.npz`` (set when saved).
    """

    kind: str
    method: str
    family: str
    parameters: tuple
    parameter_units: tuple
    bounds: tuple
    outputs: Outputs = nested(Outputs, default_factory=Outputs)
    training: Training = nested(Training, default_factory=Training)
    settings: object = None
    fit: object = None
    learning_curve: tuple = nested(LearningPoint, many=True, default=())
    learning_curve_holdout: str | None = None
    arrays_sha256: str = ""
    format: str = FORMAT
    format_version: int = FORMAT_VERSION

    @classmethod
    def from_json(cls, data: dict) -> ModelMeta:
        if data.get("format_version") == 1:
            data = _from_version_1(data)
        meta = super().from_json(data)
        m = method(meta.method)
        settings = m.settings.from_json(meta.settings) if m.settings_recorded and meta.settings is not None else None
        return dataclasses.replace(meta, settings=settings, fit=m.details.from_json(meta.fit or {}),
                                   format_version=FORMAT_VERSION)

    def replace(self, **changes) -> ModelMeta:
        """A copy with some fields changed (``training`` as a dict of its own changes)."""
        if isinstance(changes.get("training"), dict):
            changes["training"] = dataclasses.replace(self.training, **changes["training"])
        return dataclasses.replace(self, **changes)


def _from_version_1(data: dict) -> dict:
    """A version-1 ``model.json`` in the layout of version 2."""
    name = data.get("kind")
    training = {k: v for k, v in data.get("training", {}).items() if not isinstance(v, dict)}
    recorded = data.get("training", {}).get(name, {})
    out = data.get("outputs", {})
    return {
        **data,
        "kind": data.get("requested_kind") or method(name).kind,
        "method": name,
        "outputs": {"scalars": [Output.of(quantities.get(n)).to_json() for n in out.get("scalars", [])],
                    "curves": [Output.of(quantities.get(n)).to_json() for n in out.get("curves", [])],
                    "u_nodes": out.get("u_nodes", []), "mass_floor_msun": out.get("mass_floor_msun", 0.5)},
        "training": training,
        "settings": recorded,
        "fit": recorded,
    }


def new_outputs(sequence, star, u_nodes, mass_floor_msun) -> Outputs:
    """:class:`Outputs` of a new model emulating the registry quantities ``sequence`` and ``star``."""
    return Outputs(scalars=tuple(Output.of(q) for q in sequence), curves=tuple(Output.of(q) for q in star),
                   u_nodes=tuple(float(u) for u in u_nodes), mass_floor_msun=float(mass_floor_msun))

