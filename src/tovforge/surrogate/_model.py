"""The trained surrogate: queries, save and load (JSON metadata + .npz arrays, no pickles)."""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .._jsonfile import read_json
from ..errors import InputError
from . import _contract as qc
from . import _runtime as rt
from ._contract import Curve, Estimate, MassPrediction, Prediction
from ._kinds import COMMON_ARRAYS, METHODS, Method, method
from ._meta import FORMAT, FORMAT_VERSION, ModelMeta

__all__ = ["Surrogate", "Evaluation", "load", "ModelFormatError"]


class ModelFormatError(InputError):
    """A model folder is missing, incomplete or not a tovforge surrogate."""


@dataclass(frozen=True)
class Evaluation:
    """Every emulated output of a model at rows of parameters, in the model's own terms.

    Values are in the model's output units (the transformed quantities:
    ``log10`` of the central pressure, ``ln Lambda``, ...), one column per
    scalar and one per node of each curve; :meth:`Surrogate.output_columns`
    names the columns.

    Attributes
    ----------
    values : ndarray (n, n_out)
        NaN outside the box (and, for outputs not asked for, possibly elsewhere).
    inside : ndarray of bool (n,)
    grad : ndarray (n, n_out, d) or None
        d values / d theta.
    std : ndarray (n, n_out) or None
        Predictive standard deviations (NaN for methods without one).
    """

    values: np.ndarray
    inside: np.ndarray
    grad: np.ndarray | None = None
    std: np.ndarray | None = None


class Surrogate:
    """A trained emulator of an EOS family's stable branch.

    The queries (``mass_max``, ``radius``, ``tidal_deformability``,
    ``moment_of_inertia``, ``k2``, ``curve``, ``predict``,
    ``predict_at_masses``, ``in_domain``) follow the contract shared with
    the exported files (docs/reference/query-contract.md).

    Parameters
    ----------
    meta : ModelMeta
        What the model says about itself (family, parameters, box, kind and
        method, outputs, training provenance, settings and fit record).
    arrays : dict of ndarray
        The numbers (see :mod:`tovforge.surrogate._runtime`); kept read-only.
    """

    def __init__(self, meta: ModelMeta, arrays: dict):
        if not isinstance(meta, ModelMeta):
            raise TypeError(f"meta must be a ModelMeta, not {type(meta).__name__}")
        self.meta = meta
        self.arrays = {k: _read_only(v) for k, v in arrays.items()}
        self._model = rt.Model(self.arrays, meta.method, meta.outputs.runtime(), meta.parameters, meta.bounds,
                               meta.outputs.mass_floor_msun)

    # -- description ------------------------------------------------------------
    @property
    def kind(self) -> str:
        """What was asked for: ``gp`` or ``spline``."""
        return self.meta.kind

    @property
    def method(self) -> str:
        """The implementation: ``gp``, ``rbf`` or ``tensor``."""
        return self.meta.method

    @property
    def method_info(self) -> Method:
        """The method's entry in the table of kinds."""
        return METHODS[self.meta.method]

    @property
    def has_std(self) -> bool:
        """True if the model has a predictive standard deviation (otherwise ``std`` fields are NaN)."""
        return self.method_info.has_std

    @property
    def family(self) -> str:
        return self.meta.family

    @property
    def parameter_names(self) -> tuple[str, ...]:
        return tuple(self.meta.parameters)

    @property
    def parameter_units(self) -> tuple[str, ...]:
        return tuple(self.meta.parameter_units)

    @property
    def bounds(self) -> np.ndarray:
        """The trained box, shape (d, 2)."""
        return np.stack([self.arrays["lo"], self.arrays["hi"]], axis=1)

    @property
    def n_train(self) -> int:
        return self.meta.training.n_train

    @property
    def star_queries(self) -> tuple[str, ...]:
        """The queries at a mass this model answers (``radius``, ``tidal_deformability``, ..., ``k2``)."""
        return rt.star_queries(self._model)

    def output_columns(self) -> dict[str, slice]:
        """The columns of :meth:`evaluate`'s arrays that hold each output, by output name."""
        return self.meta.outputs.columns()

    def __repr__(self) -> str:
        return (f"<Surrogate {self.kind} ({self.method}) of {self.family} ({', '.join(self.parameter_names)}), "
                f"{self.n_train} training points>")

    # -- copies ---------------------------------------------------------------------
    def with_meta(self, **changes) -> Surrogate:
        """The same model with some metadata changed (see :meth:`ModelMeta.replace`)."""
        return Surrogate(self.meta.replace(**changes), self.arrays)

    def with_arrays(self, **arrays) -> Surrogate:
        """The same model with some arrays replaced (e.g. to measure its rounding noise)."""
        return Surrogate(self.meta, {**self.arrays, **arrays})

    # -- evaluation -------------------------------------------------------------
    def evaluate(self, theta, columns=None, grad: bool = False, std: bool = False) -> Evaluation:
        """Every output in the model's own terms (see :class:`Evaluation`).

        Parameters
        ----------
        theta : array_like, shape (d,) or (n, d)
            Rows of parameters (one row for a (d,) theta).
        columns : sequence of str, optional
            Names of the outputs needed (default all); the others may be NaN.
        grad, std : bool
            Also the derivatives with respect to theta, and the predictive
            standard deviations.
        """
        t = np.asarray(theta, dtype=float)
        d = len(self.parameter_names)
        if t.ndim not in (1, 2) or t.shape[-1] != d:
            raise InputError(f"theta must have shape ({d},) or (n, {d}); got shape {t.shape}.")
        t = t.reshape(-1, d)
        ranges = None
        if columns is not None:
            known = self.output_columns()
            unknown = [c for c in columns if c not in known]
            if unknown:
                raise InputError(f"unknown output {unknown[0]!r}; this model has {', '.join(known)}.")
            ranges = [(known[c].start, known[c].stop) for c in columns]
        y, inside, dy = rt.outputs(np, self._model, t, grad, ranges)
        sd = rt.output_std(np, self._model, t, ranges) if std else None
        return Evaluation(values=y, inside=inside, grad=dy, std=sd)

    def coincides_with_training(self, theta, tol: float = 1e-10) -> np.ndarray:
        """True for rows of ``theta`` (n, d) within ``tol`` (in the model's unit inputs) of a training point.

        All False for methods that do not keep their training points (tensor splines).
        """
        t = np.atleast_2d(np.asarray(theta, dtype=float))
        X = self.arrays.get("X")
        if X is None:
            return np.zeros(len(t), dtype=bool)
        x = rt.unit_inputs(np, self._model, t)[0]
        d2 = ((x[:, None, :] - X[None, :, :]) ** 2).sum(-1).min(axis=1)
        return d2 < tol * tol

    def _ask(self, fn, *args):
        """Answer a query of the contract with NumPy; its shape errors become InputError."""
        try:
            return fn(np, self._model, *args)
        except qc.QueryError as exc:
            raise InputError(str(exc)) from None

    def in_domain(self, theta) -> np.ndarray:
        return self._ask(qc.query_in_domain, theta)

    def mass_max(self, theta, return_grad: bool = False, return_std: bool = False, strict: bool = False) -> Estimate:
        return self._ask(qc.query_mass_max, theta, return_grad, return_std, strict)

    def radius(self, theta, mass, return_grad: bool = False, return_std: bool = False,
               strict: bool = False) -> Estimate:
        return self._ask(qc.query_at_mass, "radius", theta, mass, return_grad, return_std, strict)

    def tidal_deformability(self, theta, mass, return_grad: bool = False, return_std: bool = False,
                            strict: bool = False) -> Estimate:
        return self._ask(qc.query_at_mass, "tidal_deformability", theta, mass, return_grad, return_std, strict)

    def moment_of_inertia(self, theta, mass, return_grad: bool = False, return_std: bool = False,
                          strict: bool = False) -> Estimate:
        return self._ask(qc.query_at_mass, "moment_of_inertia", theta, mass, return_grad, return_std, strict)

    def k2(self, theta, mass, return_grad: bool = False, return_std: bool = False, strict: bool = False) -> Estimate:
        return self._ask(qc.query_at_mass, "k2", theta, mass, return_grad, return_std, strict)

    def curve(self, theta, n: int = 100, strict: bool = False) -> Curve:
        return self._ask(qc.query_curve, theta, n, strict)

    def predict(self, theta, return_std: bool = False, strict: bool = False) -> Prediction:
        return self._ask(qc.query_predict, theta, return_std, strict)

    def predict_at_masses(self, theta, masses, return_std: bool = False, strict: bool = False) -> MassPrediction:
        return self._ask(qc.query_predict_at_masses, theta, masses, return_std, strict)

    # -- storage --------------------------------------------------------------------
    def save(self, folder) -> Path:
        """Write ``model.json`` and ``arrays.npz`` into ``folder`` (created if needed)."""
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        np.savez(folder / "arrays.npz", **{k: np.asarray(v) for k, v in self.arrays.items()})
        self.meta = self.meta.replace(arrays_sha256=_sha256(folder / "arrays.npz"))
        (folder / "model.json").write_text(json.dumps(self.meta.to_json(), indent=2, sort_keys=True))
        return folder


# one text per query, shared with the exported files
for _name, _doc in qc.QUERY_DOCS.items():
    getattr(Surrogate, _name).__doc__ = _doc
del _name, _doc


def _read_only(a):
    a = np.asarray(a)
    if a.flags.writeable:
        a = a.view()
        a.flags.writeable = False
    return a


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def load(folder) -> Surrogate:
    """Load a model folder written by :meth:`Surrogate.save` (never unpickles).

    Reads format versions 1 and 2 of ``model.json``.

    Raises
    ------
    ModelFormatError
        If a file or array is missing, the format is unknown, or the arrays do
        not match the checksum recorded in ``model.json``.
    """
    folder = Path(folder)
    meta_path, arr_path = folder / "model.json", folder / "arrays.npz"
    for p in (meta_path, arr_path):
        if not p.is_file():
            raise ModelFormatError(f"{folder}: not a tovforge model folder (missing {p.name}).")
    raw = read_json(meta_path, ModelFormatError)
    if not isinstance(raw, dict) or raw.get("format") != FORMAT:
        raise ModelFormatError(f"{meta_path}: not a tovforge surrogate "
                               f"(format {raw.get('format') if isinstance(raw, dict) else None!r}).")
    if raw.get("format_version") not in (1, FORMAT_VERSION):
        raise ModelFormatError(f"{meta_path}: format version {raw.get('format_version')} is not supported "
                               f"(this tovforge reads versions 1 and {FORMAT_VERSION}).")
    try:
        meta = ModelMeta.from_json(raw)
    except InputError as exc:
        raise ModelFormatError(f"{meta_path}: {exc}") from None
    except (TypeError, KeyError, ValueError) as exc:
        raise ModelFormatError(f"{meta_path}: incomplete or damaged model metadata ({exc}).") from None
    want = meta.arrays_sha256
    if want and _sha256(arr_path) != want:
        raise ModelFormatError(f"{arr_path}: contents do not match the checksum in model.json (file altered?).")
    try:
        with np.load(arr_path, allow_pickle=False) as npz:
            arrays = {k: npz[k] for k in npz.files}
    except (ValueError, OSError) as exc:
        raise ModelFormatError(f"{arr_path}: cannot read arrays ({exc}).") from None
    needed = COMMON_ARRAYS + method(meta.method).arrays
    missing = [k for k in needed if k not in arrays]
    if missing:
        raise ModelFormatError(f"{arr_path}: missing array {missing[0]!r} for a {meta.method} model.")
    want_slices = [[c.start, c.stop] for c in list(meta.outputs.columns().values())[len(meta.outputs.scalars):]]
    if np.asarray(arrays["curve_slices"]).tolist() != want_slices:
        raise ModelFormatError(f"{arr_path}: curve_slices {np.asarray(arrays['curve_slices']).tolist()} do not match "
                               f"the outputs of model.json ({want_slices}).")
    return Surrogate(meta, arrays)

