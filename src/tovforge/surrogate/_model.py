"""The trained surrogate: queries, save and load (JSON metadata + .npz arrays, no pickles)."""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .._jsonfile import read_json
from ..errors import InputError
from . import _runtime as rt

__all__ = ["Surrogate", "Prediction", "MassPrediction", "load", "ModelFormatError"]

FORMAT = "tovforge-surrogate"
FORMAT_VERSION = 1
_ARRAY_KEYS = {
    "common": ("lo", "hi", "out_mean", "out_scale", "trend_powers", "trend_coef", "u_nodes", "spline_c",
               "curve_slices"),
    "gp": ("X", "alpha", "group_bounds", "length", "amp2", "noise", "resid_scale"),
    "rbf": ("X", "alpha"),
    "tensor": ("knots", "n_knots", "coef", "coef_shape"),
}


class ModelFormatError(InputError):
    """A model folder is missing, incomplete or not a tovforge surrogate."""


@dataclass(frozen=True)
class Prediction:
    """Everything a surrogate predicts at a set of parameter points.

    Arrays have a leading axis of length ``n_theta`` (even for one point).

    Attributes
    ----------
    mass_max_msun, log10_central_pressure_at_mass_max, max_sound_speed_sq : ndarray (n,)
    u_nodes : ndarray (n_u,)
        The sequence coordinate ``u = sqrt(1 - M / M_max)`` of the curve nodes.
    mass_msun, radius_km, tidal_deformability, moment_of_inertia_1e45_g_cm2 : ndarray (n, n_u)
        The stable branch at the nodes.
    mass_max_margin_msun : ndarray (n,)
        ``M_max`` minus the model's floor (negative: below the floor).
    causality_margin : ndarray (n,)
        ``1 - max c_s^2``; negative means the EOS is acausal below M_max.
    out_of_box : ndarray of bool (n,)
        True where the parameters lie outside the trained box (values are NaN).
    std : dict or None
        Predictive standard deviations (GP models) of the same fields.
    """

    mass_max_msun: np.ndarray
    log10_central_pressure_at_mass_max: np.ndarray
    max_sound_speed_sq: np.ndarray
    u_nodes: np.ndarray
    mass_msun: np.ndarray
    radius_km: np.ndarray
    tidal_deformability: np.ndarray
    moment_of_inertia_1e45_g_cm2: np.ndarray
    mass_max_margin_msun: np.ndarray
    causality_margin: np.ndarray
    out_of_box: np.ndarray
    std: dict | None = None


@dataclass(frozen=True)
class MassPrediction:
    """A surrogate's predictions at given masses, with everything of :class:`Prediction`.

    Made by :meth:`Surrogate.predict_at_masses` from one evaluation of the model
    (the queries ``radius``, ``tidal_deformability``, ... each evaluate it anew).

    Attributes
    ----------
    prediction : Prediction
        Scalars and node curves at the same parameters.
    masses_msun : ndarray (q,)
        The gravitational masses asked for.
    radius_km, tidal_deformability, moment_of_inertia_1e45_g_cm2, k2 : ndarray (n, q)
        Radius (km), dimensionless Lambda, I (1e45 g cm^2) and the Love number k2
        at each mass; NaN above M_max, below the emulated branch or outside the box.
    std : dict or None
        Predictive standard deviations of the four per-mass arrays (GP models).
    """

    prediction: Prediction
    masses_msun: np.ndarray
    radius_km: np.ndarray
    tidal_deformability: np.ndarray
    moment_of_inertia_1e45_g_cm2: np.ndarray
    k2: np.ndarray
    std: dict | None = None


#: Per-mass fields of MassPrediction and the runtime's name of each quantity.
_AT_MASS_FIELDS = {"radius_km": "radius_km", "tidal_deformability": "tidal_deformability",
                   "moment_of_inertia_1e45_g_cm2": "moment_of_inertia", "k2": "k2"}


class Surrogate:
    """A trained emulator of an EOS family's stable branch.

    Parameters
    ----------
    meta : dict
        JSON-serialisable description (family, parameters, units, box, kind,
        outputs, training provenance, error table once checked).
    arrays : dict of ndarray
        The numbers (see :mod:`tovforge.surrogate._runtime`).
    """

    def __init__(self, meta: dict, arrays: dict):
        self.meta = meta
        self.arrays = arrays
        self._m = dict(arrays)
        self._m["kind"] = meta["kind"]
        self._m["i_mass_max"] = meta["outputs"]["index"]["mass_max_msun"]

    # -- description ------------------------------------------------------------
    @property
    def kind(self) -> str:
        return self.meta["kind"]

    @property
    def family(self) -> str:
        return self.meta["family"]

    @property
    def parameter_names(self) -> tuple[str, ...]:
        return tuple(self.meta["parameters"])

    @property
    def bounds(self) -> np.ndarray:
        return np.stack([self.arrays["lo"], self.arrays["hi"]], axis=1)

    def __repr__(self) -> str:
        return (f"<Surrogate {self.kind} of {self.family} ({', '.join(self.parameter_names)}), "
                f"{self.meta['training']['n_train']} training points>")

    # -- evaluation -------------------------------------------------------------
    def _theta(self, theta) -> np.ndarray:
        t = np.asarray(theta, dtype=float)
        d = len(self.parameter_names)
        if t.ndim == 0 or t.shape[-1] != d:
            raise InputError(f"theta must have shape ({d},) or (n, {d}) for parameters "
                             f"{', '.join(self.parameter_names)}; got shape {t.shape}.")
        return t.reshape(-1, d)

    def in_domain(self, theta) -> np.ndarray:
        """True where ``theta`` lies inside the trained box."""
        return rt.unit_inputs(np, self._m, self._theta(theta))[1]

    def predict(self, theta, return_std: bool = False) -> Prediction:
        """Predict scalars and node curves at ``theta`` (d,) or (n, d)."""
        t = self._theta(theta)
        y, inside, _ = rt.outputs(np, self._m, t)
        sd = rt.output_std(np, self._m, t) if return_std else None
        return self._prediction(y, inside, sd)

    def predict_at_masses(self, theta, masses, return_std: bool = False) -> MassPrediction:
        """Everything :meth:`predict` gives, plus R, Lambda, I and k2 at ``masses``, from one evaluation.

        Parameters
        ----------
        theta : array_like, shape (d,) or (n, d)
        masses : array_like, shape (q,)
            Gravitational masses in Msun (the same for every row).
        return_std : bool
            Also the predictive standard deviations (GP models; zeros otherwise).

        Returns
        -------
        MassPrediction
        """
        t = self._theta(theta)
        mass = np.atleast_1d(np.asarray(masses, float))
        if mass.ndim != 1:
            raise InputError(f"masses must be a list of values in Msun; got shape {mass.shape}.")
        y, inside, _ = rt.outputs(np, self._m, t)
        sd = rt.output_std(np, self._m, t) if return_std else None
        values, std = {}, ({} if return_std else None)
        for field, quantity in _AT_MASS_FIELDS.items():
            v, _, s = rt.curve_at_mass(np, self._m, y, None, sd, mass, quantity)
            values[field] = v
            if return_std:
                std[field] = s
        return MassPrediction(prediction=self._prediction(y, inside, sd), masses_msun=mass, std=std, **values)

    def _prediction(self, y, inside, sd) -> Prediction:
        index = self.meta["outputs"]["index"].items()
        fields = rt.named_outputs(np, self._m, y, index)
        std = rt.named_std(np, self._m, sd, fields, index) if sd is not None else None
        floor = self.meta["outputs"]["mass_floor_msun"]
        return Prediction(
            mass_max_margin_msun=fields["mass_max_msun"] - floor,
            causality_margin=1.0 - fields["max_sound_speed_sq"],
            out_of_box=~inside,
            std=std,
            **fields,
        )

    def mass_max(self, theta, return_grad: bool = False, return_std: bool = False):
        """Maximum mass in Msun (NaN outside the box)."""
        t = self._theta(theta)
        i = self._m["i_mass_max"]
        columns = rt.needed_columns(self._m, ())
        y, _, dy = rt.outputs(np, self._m, t, return_grad, columns)
        out = [y[:, i]]
        if return_grad:
            out.append(dy[:, i, :])
        if return_std:
            out.append(rt.output_std(np, self._m, t, columns)[:, i])
        return out[0] if len(out) == 1 else tuple(out)

    def _at(self, quantity, theta, mass, return_grad, return_std):
        t = self._theta(theta)
        mass = np.atleast_1d(np.asarray(mass, float))
        val, g, s = rt.at_mass(np, self._m, t, mass, quantity, grad=return_grad, std=return_std)
        out = [val]
        if return_grad:
            out.append(g)
        if return_std:
            out.append(s)
        return out[0] if len(out) == 1 else tuple(out)

    def radius(self, theta, mass, return_grad: bool = False, return_std: bool = False):
        """Radius in km at masses (Msun), shape (n_theta, n_mass); NaN above M_max."""
        return self._at("radius_km", theta, mass, return_grad, return_std)

    def tidal_deformability(self, theta, mass, return_grad: bool = False, return_std: bool = False):
        """Dimensionless Lambda at masses (Msun); NaN above M_max."""
        return self._at("tidal_deformability", theta, mass, return_grad, return_std)

    def moment_of_inertia(self, theta, mass, return_grad: bool = False, return_std: bool = False):
        """Moment of inertia in 1e45 g cm^2 at masses (Msun); NaN above M_max."""
        return self._at("moment_of_inertia", theta, mass, return_grad, return_std)

    def k2(self, theta, mass, return_grad: bool = False, return_std: bool = False):
        """Love number k2 = (3/2) Lambda C^5 at masses (Msun); NaN above M_max."""
        return self._at("k2", theta, mass, return_grad, return_std)

    def curve(self, theta, n: int = 100):
        """The emulated stable branch: masses, radii, Lambdas (n_theta, n), from the
        lowest emulated mass up to M_max."""
        t = self._theta(theta)
        # one evaluation serves M_max and both curves (the masses then sit exactly on the branch)
        y, _, _ = rt.outputs(np, self._m, t, False, rt.needed_columns(self._m, ("radius_km", "tidal_deformability")))
        return rt.branch_curve(np, self._m, y, np.linspace(1.0, 0.0, n))

    # -- storage --------------------------------------------------------------------
    def save(self, folder) -> Path:
        """Write ``model.json`` and ``arrays.npz`` into ``folder`` (created if needed)."""
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        arrays = {k: np.asarray(v) for k, v in self.arrays.items()}
        np.savez(folder / "arrays.npz", **arrays)
        meta = dict(self.meta)
        meta["arrays_sha256"] = _sha256(folder / "arrays.npz")
        (folder / "model.json").write_text(json.dumps(meta, indent=2, sort_keys=True))
        return folder


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def load(folder) -> Surrogate:
    """Load a model folder written by :meth:`Surrogate.save` (never unpickles).

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
    meta = read_json(meta_path, ModelFormatError)
    if meta.get("format") != FORMAT:
        raise ModelFormatError(f"{meta_path}: not a tovforge surrogate (format {meta.get('format')!r}).")
    if meta.get("format_version") != FORMAT_VERSION:
        raise ModelFormatError(f"{meta_path}: format version {meta.get('format_version')} is not supported "
                               f"(this tovforge reads version {FORMAT_VERSION}).")
    want = meta.get("arrays_sha256")
    if want and _sha256(arr_path) != want:
        raise ModelFormatError(f"{arr_path}: contents do not match the checksum in model.json (file altered?).")
    try:
        with np.load(arr_path, allow_pickle=False) as npz:
            arrays = {k: npz[k] for k in npz.files}
    except (ValueError, OSError) as exc:
        raise ModelFormatError(f"{arr_path}: cannot read arrays ({exc}).") from None
    needed = _ARRAY_KEYS["common"] + _ARRAY_KEYS.get(meta.get("kind"), ())
    missing = [k for k in needed if k not in arrays]
    if missing:
        raise ModelFormatError(f"{arr_path}: missing array {missing[0]!r} for a {meta.get('kind')} model.")
    return Surrogate(meta, arrays)
