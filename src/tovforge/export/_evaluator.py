"""The fixed interface code of every exported evaluator.

:func:`tovforge.export.export_model` copies the source of this module below
the marker line verbatim into each generated file, after the prediction
runtime (:mod:`tovforge.surrogate._runtime`, also copied verbatim) and the
model's constants.  Names used here but not defined here (``outputs``,
``curve_at_mass``, ``PARAMETERS``, ``_PAYLOAD``, ...) come from those parts of
the generated file; inside the package this module is only read as text.

Rules for this code: import nothing beyond what the generated file imports
(``base64``, ``hashlib``, ``io``, ``zlib``, ``numpy``); write array arithmetic
against the array API standard (``xp``), so the same file serves NumPy, JAX
and (through array-api-compat) PyTorch arrays; loop over parameters, kernel
groups and chunks, never over parameter points.
"""

import base64
import hashlib
import io
import zlib

import numpy as np

from ..surrogate._runtime import (branch_curve, curve_at_mass, named_outputs, named_std, needed_columns, output_std,
                                  outputs, unit_inputs)

# ---- the exported code starts below this line ----

__all__ = [
    "PARAMETERS", "UNITS", "BOUNDS", "OUTPUTS", "OUTPUT_UNITS", "FAMILY", "KIND", "CHECK",
    "in_domain", "mass_max", "radius", "tidal_deformability", "moment_of_inertia", "k2", "curve", "predict",
    "PayloadError",
]


class PayloadError(ImportError):
    """The embedded model numbers do not match the checksum recorded in the header."""


def _load_model():
    """Decode, verify and read the payload: a zlib stream of .npy arrays (no pickles)."""
    try:
        raw = base64.b64decode(_PAYLOAD, validate=True)
    except ValueError as exc:
        raise PayloadError(f"{__name__}: the embedded model numbers are damaged (not base64: {exc}); "
                           "do not use this file, export the model again with `tovforge export`.") from None
    got = hashlib.sha256(raw).hexdigest()
    if got != PAYLOAD_SHA256:
        raise PayloadError(f"{__name__}: the embedded model numbers are damaged or were altered: their sha256 is "
                           f"{got}, but the header records {PAYLOAD_SHA256}; do not use this file, export "
                           "the model again with `tovforge export`.")
    stream = io.BytesIO(zlib.decompress(raw))
    arrays = {}
    for name, dtype, shape in _ARRAYS:
        a = np.lib.format.read_array(stream, allow_pickle=False)
        if a.dtype.str != dtype or tuple(a.shape) != shape:
            raise PayloadError(f"{__name__}: payload array {name!r} is {a.dtype.str} {a.shape}, "
                               f"expected {dtype} {shape}.")
        arrays[name] = a
    if stream.read(1):
        raise PayloadError(f"{__name__}: the payload holds more data than its {len(_ARRAYS)} arrays.")
    arrays["kind"] = KIND
    arrays["i_mass_max"] = _I_MASS_MAX
    return arrays


class _NumPy1:
    """NumPy 1.x seen through the array-API names the runtime uses (NumPy >= 2 has them all)."""

    concat = staticmethod(np.concatenate)
    permute_dims = staticmethod(np.transpose)

    @staticmethod
    def astype(x, dtype):
        return x.astype(dtype)

    def __getattr__(self, name):
        return getattr(np, name)


_NUMPY = np if hasattr(np, "concat") else _NumPy1()
#: model arrays that steer loops or index (kept as NumPy in every namespace, so
#: that tracing libraries such as JAX see them as constants)
_STATIC = ("trend_powers", "group_bounds", "group_kernel", "warp_log", "warp_shift", "curve_slices", "n_knots", "coef_shape", "knots")
_MODEL_CACHE = {}


def _namespace(*args):
    """Array namespace of the arguments: NumPy, unless one is another library's array."""
    for a in args:
        if a is None or isinstance(a, (bool, int, float, list, tuple, np.ndarray, np.generic)):
            continue
        if hasattr(a, "__array_namespace__"):
            return a.__array_namespace__()
        try:  # PyTorch and others reach the standard through array-api-compat (optional)
            import array_api_compat
        except ImportError:
            raise TypeError(f"{type(a).__module__}.{type(a).__name__} inputs need the array-api-compat package "
                            "(pip install array-api-compat); or pass NumPy arrays.") from None
        return array_api_compat.array_namespace(a)
    return _NUMPY


def _on(like):
    """``device=`` of ``like`` for array creation (nothing for arrays without one, as in NumPy 1.x)."""
    device = getattr(like, "device", None)
    return {} if device is None else {"device": device}


def _model(xp, like):
    """The model arrays in namespace ``xp`` on the device of ``like`` (converted once, then cached)."""
    if xp is _NUMPY or xp is np:
        return _M
    on = _on(like)
    key = (id(xp), str(on))
    m = _MODEL_CACHE.get(key)
    if m is None:
        m = {k: (v if (k in _STATIC or not isinstance(v, np.ndarray)) else xp.asarray(v, dtype=xp.float64, **on))
             for k, v in _M.items()}
        _MODEL_CACHE[key] = m
    return m


def _inputs(theta):
    """Namespace, model, theta as (n, d) float64 rows, and whether theta was one point."""
    xp = _namespace(theta)
    t = xp.asarray(theta, dtype=xp.float64)
    d = len(PARAMETERS)
    if t.ndim not in (1, 2) or t.shape[-1] != d:
        raise ValueError(f"theta must have shape ({d},) or (n, {d}) for the parameters {', '.join(PARAMETERS)}; "
                         f"got shape {tuple(t.shape)}.")
    return xp, _model(xp, t), xp.reshape(t, (-1, d)), t.ndim == 1


def _first(xp, bad):
    """Index of the first True of a boolean (n,) array."""
    return int(xp.argmax(xp.astype(bad, xp.int32)))


def _require_inside(xp, t, inside):
    if bool(xp.all(inside)):
        return
    i = _first(xp, ~inside)
    for j, name in enumerate(PARAMETERS):
        v, (lo, hi) = float(t[i, j]), BOUNDS[j]
        if not lo <= v <= hi:  # also true for NaN
            raise ValueError(f"theta row {i}: the {name!r} parameter must be in [{lo}, {hi}] (the trained box). "
                             f"Got {v} instead.")
    raise ValueError(f"theta row {i} is outside the trained box.")


def _require_on_branch(xp, value, mass, mmax):
    ok = ~xp.isnan(value)
    if bool(xp.all(ok)):
        return
    flat = xp.reshape(ok, (ok.shape[0], -1))
    row_bad = ~xp.all(flat, axis=1)
    i = _first(xp, row_bad)
    j = _first(xp, ~flat[i])
    mm = float(mmax[i])
    raise ValueError(f"theta row {i}: mass {float(mass[i, j])} Msun is outside the emulated stable branch "
                     f"[{mm * (1.0 - _U_MAX ** 2)}, {mm}] Msun (above M_max, or below the lowest emulated mass).")


def _masses(xp, mass, n, like):
    """Masses broadcast to (n, q), and the shape of the answer per theta row."""
    mass = xp.asarray(mass, dtype=xp.float64, **_on(like))
    if mass.ndim == 0:
        return xp.broadcast_to(xp.reshape(mass, (1, 1)), (n, 1)), ()
    if mass.ndim == 1:
        return xp.broadcast_to(xp.reshape(mass, (1, -1)), (n, mass.shape[0])), (mass.shape[0],)
    if mass.ndim == 2 and mass.shape[0] in (1, n):
        return xp.broadcast_to(mass, (n, mass.shape[1])), (mass.shape[1],)
    raise ValueError(f"mass must be a scalar, shape (q,) shared by every theta, or shape (n, q) with one row per "
                     f"theta (n = {n}); got shape {tuple(mass.shape)}.")


def _shape(xp, a, single, tail):
    """Reshape a result (n, ...) to the documented shape: drop n for one theta."""
    lead = () if single else (a.shape[0],)
    return xp.reshape(a, lead + tuple(tail))


def _query(quantity, theta, mass, return_grad, return_std, strict):
    xp, m, t, single = _inputs(theta)
    columns = needed_columns(m, (quantity,))
    y, inside, dy = outputs(xp, m, t, return_grad, columns)
    if strict:
        _require_inside(xp, t, inside)
    sd = output_std(xp, m, t, columns) if return_std else None
    mb, tail = _masses(xp, mass, t.shape[0], t)
    val, g, s = curve_at_mass(xp, m, y, dy, sd, mb, quantity)
    if strict:
        _require_on_branch(xp, val, mb, y[:, _I_MASS_MAX])
    out = [_shape(xp, val, single, tail)]
    if return_grad:
        out.append(_shape(xp, g, single, tail + (t.shape[1],)))
    if return_std:
        out.append(_shape(xp, s, single, tail))
    return out[0] if len(out) == 1 else tuple(out)


def in_domain(theta):
    """True where ``theta`` lies inside the trained box.

    Parameters
    ----------
    theta : array_like, shape (d,) or (n, d)
        Parameters in the order of ``PARAMETERS``, in the units of ``UNITS``.

    Returns
    -------
    inside : array of bool, shape () or (n,)
    """
    xp, m, t, single = _inputs(theta)
    return _shape(xp, unit_inputs(xp, m, t)[1], single, ())


def mass_max(theta, return_grad=False, return_std=False, strict=False):
    """Maximum gravitational mass of the stable branch, in Msun.

    Parameters
    ----------
    theta : array_like, shape (d,) or (n, d)
        Parameters in the order of ``PARAMETERS``.
    return_grad : bool
        Also return d M_max / d theta, shape (d,) or (n, d), in Msun per unit of each parameter.
    return_std : bool
        Also return the predictive standard deviation (Gaussian processes; zeros for splines).
    strict : bool
        Raise ValueError for a theta outside the box instead of returning NaN.

    Returns
    -------
    mass_max : array, shape () or (n,)
        NaN outside the box.  With ``return_grad`` / ``return_std``: a tuple
        ``(value, grad[, std])``.
    """
    xp, m, t, single = _inputs(theta)
    columns = needed_columns(m, ())
    y, inside, dy = outputs(xp, m, t, return_grad, columns)
    if strict:
        _require_inside(xp, t, inside)
    out = [_shape(xp, y[:, _I_MASS_MAX], single, ())]
    if return_grad:
        out.append(_shape(xp, dy[:, _I_MASS_MAX, :], single, (t.shape[1],)))
    if return_std:
        out.append(_shape(xp, output_std(xp, m, t, columns)[:, _I_MASS_MAX], single, ()))
    return out[0] if len(out) == 1 else tuple(out)


_MASS_DOC = """

    Parameters
    ----------
    theta : array_like, shape (d,) or (n, d)
        Parameters in the order of ``PARAMETERS``.
    mass : float or array_like, shape (q,) or (n, q)
        Gravitational masses in Msun: a scalar or (q,) for every theta, or
        one row per theta (use ``masses[:, None]`` for one mass per theta).
    return_grad : bool
        Also return the derivative with respect to theta (analytic), shape
        ``value.shape + (d,)``.
    return_std : bool
        Also return the predictive standard deviation (Gaussian processes; zeros for splines).
    strict : bool
        Raise ValueError instead of returning NaN outside the box, above M_max
        or below the lowest emulated mass.

    Returns
    -------
    value : array, shape theta.shape[:-1] + mass.shape[-1:]
        NaN where undefined.  With ``return_grad`` / ``return_std``: a tuple
        ``(value, grad[, std])``.
    """


def radius(theta, mass, return_grad=False, return_std=False, strict=False):
    return _query("radius_km", theta, mass, return_grad, return_std, strict)


def tidal_deformability(theta, mass, return_grad=False, return_std=False, strict=False):
    return _query("tidal_deformability", theta, mass, return_grad, return_std, strict)


def moment_of_inertia(theta, mass, return_grad=False, return_std=False, strict=False):
    return _query("moment_of_inertia", theta, mass, return_grad, return_std, strict)


def k2(theta, mass, return_grad=False, return_std=False, strict=False):
    return _query("k2", theta, mass, return_grad, return_std, strict)


radius.__doc__ = "Circumferential radius in km at gravitational masses (Msun) on the stable branch." + _MASS_DOC
tidal_deformability.__doc__ = "Dimensionless tidal deformability Lambda at masses (Msun)." + _MASS_DOC
moment_of_inertia.__doc__ = "Moment of inertia in 1e45 g cm^2 at masses (Msun), slow rotation." + _MASS_DOC
k2.__doc__ = "Tidal Love number k2 = (3/2) Lambda (G M / R c^2)^5 at masses (Msun)." + _MASS_DOC


def curve(theta, n=100, strict=False):
    """The stable branch from the lowest emulated mass up to M_max.

    Parameters
    ----------
    theta : array_like, shape (d,) or (n_theta, d)
    n : int
        Points along the branch, uniform in ``u = sqrt(1 - M / M_max)``.
    strict : bool
        Raise ValueError for a theta outside the box instead of returning NaN.

    Returns
    -------
    masses, radii, lambdas : arrays, shape (n,) or (n_theta, n)
        Gravitational masses in Msun (increasing), radii in km, and the
        dimensionless tidal deformabilities.
    """
    xp, m, t, single = _inputs(theta)
    y, inside, _ = outputs(xp, m, t, False, needed_columns(m, ("radius_km", "tidal_deformability")))
    if strict:
        _require_inside(xp, t, inside)
    masses, R, L = branch_curve(xp, m, y, xp.linspace(1.0, 0.0, n, dtype=xp.float64, **_on(t)))
    return tuple(_shape(xp, a, single, (n,)) for a in (masses, R, L))


def predict(theta, return_std=True, strict=False):
    """Everything the model predicts at ``theta``, as a dict of arrays.

    Parameters
    ----------
    theta : array_like, shape (d,) or (n, d)
    return_std : bool
        Include the predictive standard deviations under ``"std"``
        (Gaussian processes only; ``None`` for splines).
    strict : bool
        Raise ValueError for a theta outside the box instead of returning NaN.

    Returns
    -------
    prediction : dict
        The keys of ``OUTPUTS`` (units in ``OUTPUT_UNITS``): scalars of shape
        () or (n,), curves at the ``u_nodes`` of shape (n_u,) or (n, n_u), the
        validity margins ``mass_max_margin_msun`` (M_max minus the model's
        floor) and ``causality_margin`` (1 - max c_s^2), ``out_of_box``, and
        ``std`` (a dict of the same fields, or None).
    """
    xp, m, t, single = _inputs(theta)
    y, inside, _ = outputs(xp, m, t)
    if strict:
        _require_inside(xp, t, inside)
    f = named_outputs(xp, m, y, _SCALAR_INDEX)
    f["mass_max_margin_msun"] = f["mass_max_msun"] - MASS_FLOOR_MSUN
    f["causality_margin"] = 1.0 - f["max_sound_speed_sq"]
    f["out_of_box"] = ~inside
    std = None
    if return_std and KIND == "gp":
        std = named_std(xp, m, output_std(xp, m, t), f, _SCALAR_INDEX)
        std = {k: _shape(xp, v, single, v.shape[1:]) for k, v in std.items()}
    out = {k: (v if k == "u_nodes" else _shape(xp, v, single, v.shape[1:])) for k, v in f.items()}
    out["std"] = std
    return out



