"""The trained surrogate: queries, save and load (JSON metadata + .npz arrays, no pickles)."""

from __future__ import annotations

import hashlib
import json
import shutil
import zipfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .._files import check_output, publish_folder, remove_litter, temp_path
from .._jsonfile import read_json
from ..errors import ContentMismatch, InputError
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
        """True if the model has a predictive standard deviation (otherwise ``std`` fields are NaN).

        Gaussian processes have their own; any model trained with leave-one-out residuals has the
        error model (``loo_residual``, see :mod:`tovforge.surrogate._errors`).
        """
        return self.method_info.has_std or "loo_residual" in self.arrays

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

    @property
    def has_error_model(self) -> bool:
        """True if the model carries leave-one-out residuals and their error model."""
        return "loo_residual" in self.arrays

    def error_model_std(self, theta) -> np.ndarray:
        """The error model's sigma of every output (n, n_out), in the model's output units (NaN outside the box).

        The error model alone (for a GP without its own sigma); see
        :func:`tovforge.surrogate._runtime.error_model_std`.

        Raises
        ------
        InputError
            For a model without one (trained before it existed, or a tensor spline).
        """
        if not self.has_error_model:
            raise InputError(f"this {self.kind} ({self.method}) model has no error model (no leave-one-out "
                             "residuals); retrain it with this version of tovforge.")
        t = np.asarray(theta, dtype=float).reshape(-1, len(self.parameter_names))
        x, inside = rt.unit_inputs(np, self._model, t)
        return np.where(inside[:, None], rt.error_model_std(np, self._model, x), np.nan)

    def with_measured_errors(self, data) -> Surrogate:
        """The model whose error model also holds its measured errors at the points of ``data``.

        ``data`` (:class:`TrainingData` of exact solves the model was not trained on): the error of
        every output there (emulated minus exact, in the model's output units) joins the
        leave-one-out residuals as if it were one, at its point; the means are unchanged.  For
        choosing where to solve next (``grid refine --errors-from``); a model checked on the same
        points afterwards would no longer be checked on independent data.

        Raises
        ------
        InputError
            For a model without an error model, or data of other parameters or outputs.
        """
        if not self.has_error_model:
            raise InputError(f"this {self.kind} ({self.method}) model has no error model (no leave-one-out "
                             "residuals); retrain it with this version of tovforge.")
        if list(data.parameter_names) != list(self.parameter_names):
            raise InputError(f"{data.provenance.get('grid_path', 'data')}: parameters {list(data.parameter_names)} "
                             f"differ from the model's {list(self.parameter_names)}.")
        Y, _ = data.output_matrix()
        if Y.shape[1] != self.arrays["loo_residual"].shape[1]:
            raise InputError(f"{data.provenance.get('grid_path', 'data')}: {Y.shape[1]} outputs per point, the model "
                             f"has {self.arrays['loo_residual'].shape[1]}; measure errors on a grid of the same "
                             "outputs.")
        theta = np.asarray(data.theta, float)
        x, inside = rt.unit_inputs(np, self._model, theta)
        err = self.evaluate(theta).values - Y
        keep = inside & np.all(np.isfinite(err), axis=1)
        points = self.arrays.get("error_points", self.arrays["X"])
        return self.with_arrays(error_points=np.vstack([points, x[keep]]),
                                loo_residual=np.vstack([self.arrays["loo_residual"], err[keep]]))

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
        step = max(1, (1 << 22) // (X.shape[0] * X.shape[1]))  # rows at a time: memory bounded for large models
        d2 = np.concatenate([((x[s : s + step, None, :] - X[None, :, :]) ** 2).sum(-1).min(axis=1)
                             for s in range(0, len(x), step)] or [np.zeros(0)])
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

    def set_trust_limits(self, **limits) -> dict:
        try:
            return qc.query_set_trust_limits(self._model, limits)
        except qc.QueryError as exc:
            raise InputError(str(exc)) from None

    # -- storage --------------------------------------------------------------------
    def save(self, folder, overwrite: bool = False, extra=None) -> Path:
        """Write ``model.json`` and ``arrays.npz`` as the folder ``folder``, atomically.

        Both files are written into a new temporary folder next to
        ``folder``, flushed to disk, and the folder is then renamed to its
        name: a failed or killed save leaves the old model (or nothing), never
        half a model.

        Parameters
        ----------
        folder : path-like
            The model folder; its parent must exist.
        overwrite : bool
            Replace an existing model folder (refused otherwise; an empty
            folder is not an existing model).
        extra : callable, optional
            ``extra(tmp_folder)`` writes further files into the new folder
            before it takes its name (``grid refine``: the added exact solves).

        Raises
        ------
        OutputExists
            ``folder`` holds files and ``overwrite`` is False.
        """
        folder = check_output(folder, "model folder", overwrite, folder=True)
        remove_litter(folder)  # the temporary folders of saves that were killed
        tmp = temp_path(folder)
        tmp.mkdir()
        try:
            np.savez(tmp / "arrays.npz", **{k: np.asarray(v) for k, v in self.arrays.items()})
            meta = self.meta.replace(arrays_sha256=_sha256(tmp / "arrays.npz"))
            (tmp / "model.json").write_text(json.dumps(meta.to_json(), indent=2, sort_keys=True), encoding="utf-8")
            if extra is not None:
                extra(tmp)
            publish_folder(tmp, folder, "model folder", overwrite)
        finally:
            shutil.rmtree(tmp, ignore_errors=True)
        self.meta = meta
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


def load(folder, allow_mismatch: bool = False) -> Surrogate:
    """Load a model folder written by :meth:`Surrogate.save` (never unpickles).

    Reads format versions 1 and 2 of ``model.json``.  The arrays are checked
    against the checksum recorded in ``model.json``, for their shapes, and by
    one evaluation at the centre of the box.

    Parameters
    ----------
    folder : path-like
    allow_mismatch : bool
        Load arrays that do not match the recorded checksum (for forensics).

    Raises
    ------
    ModelFormatError
        If the folder, a file or an array is missing or damaged, or the format
        is unknown.
    tovforge.errors.ContentMismatch
        If the arrays do not match the checksum (and not ``allow_mismatch``).
    """
    folder = Path(folder)
    if not folder.is_dir():
        what = "a file, not a model folder" if folder.exists() else "no such model folder"
        raise ModelFormatError(f"{folder}: {what} (`tovforge train --out` writes one).")
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
    if want and not allow_mismatch and _sha256(arr_path) != want:
        raise ContentMismatch(f"{arr_path}: the arrays do not match the checksum in model.json (arrays_sha256): "
                              "the file was altered or damaged.")
    try:
        with np.load(arr_path, allow_pickle=False) as npz:
            arrays = {k: npz[k] for k in npz.files}
    except (ValueError, OSError, EOFError, KeyError, zipfile.BadZipFile) as exc:
        raise ModelFormatError(f"{arr_path}: cannot read arrays ({type(exc).__name__}: {exc}).") from None
    if not isinstance(arrays, dict) or any(a.dtype.kind not in "biuf" for a in arrays.values()):
        raise ModelFormatError(f"{arr_path}: model arrays must be numbers.")
    needed = COMMON_ARRAYS + method(meta.method).arrays
    missing = [k for k in needed if k not in arrays]
    if missing:
        raise ModelFormatError(f"{arr_path}: missing array {missing[0]!r} for a {meta.method} model (damaged, or "
                               f"written by a tovforge whose {meta.method} models had other arrays: train it again).")
    want_slices = [[c.start, c.stop] for c in list(meta.outputs.columns().values())[len(meta.outputs.scalars):]]
    if np.asarray(arrays["curve_slices"]).tolist() != want_slices:
        raise ModelFormatError(f"{arr_path}: curve_slices {np.asarray(arrays['curve_slices']).tolist()} do not match "
                               f"the outputs of model.json ({want_slices}).")
    d = len(meta.parameters)
    for name in ("lo", "hi"):
        if arrays[name].shape != (d,):
            raise ModelFormatError(f"{arr_path}: array {name!r} has shape {arrays[name].shape}, expected ({d},) for "
                                   f"the {d} parameters of model.json.")
    try:  # the arrays must fit together: one evaluation at the centre of the box
        model = Surrogate(meta, arrays)
        with np.errstate(all="ignore"):
            model.evaluate(0.5 * (arrays["lo"] + arrays["hi"]), grad=True, std=model.has_std)
    except Exception as exc:
        raise ModelFormatError(f"{arr_path}: the arrays do not fit together ({type(exc).__name__}: {exc}); the "
                               "model folder is damaged: train the model again.") from None
    return model

