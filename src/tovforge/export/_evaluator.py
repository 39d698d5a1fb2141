"""The fixed interface code of every exported evaluator.

:func:`tovforge.export.export_model` copies the source of this module below
the marker line verbatim into each generated file, after the prediction
runtime (:mod:`tovforge.surrogate._runtime`), the query contract
(:mod:`tovforge.surrogate._contract`, both also copied verbatim) and the
model's constants.  Names used here but not defined here (``Model``,
``query_at_mass``, ``PARAMETERS``, ``_PAYLOAD``, ...) come from those parts
of the generated file; inside the package this module is only read as text.

The queries are the contract's ``query_*`` functions bound to the model in
the caller's array namespace: the library's ``Surrogate`` answers through
the same functions, so both give the same types, shapes and values.  Under
NumPy they run on the code generated for the model: one theta through the
fast path of :mod:`._fast` (``_fast_*``, None when it leaves a call to the
contract), batches through the contract with the generated kernel sums
(the runtime model ``_GM``).

Rules for this code: import nothing beyond what the generated file imports
(``base64``, ``dataclasses``, ``hashlib``, ``io``, ``math``, ``zlib``,
``numpy``); write array arithmetic against the array API standard
(``xp``), so the same file serves NumPy, JAX and (through
array-api-compat) PyTorch arrays; loop over parameters, kernel groups and
chunks, never over parameter points.
"""

import base64
import hashlib
import io
import math
import zlib

import numpy as np

from ..surrogate._contract import (QUERY_DOCS, device_of, query_at_mass, query_curve, query_in_domain,
                                   query_mass_max, query_predict, query_predict_at_masses, query_set_trust_limits)
from ..surrogate._runtime import Model, rebuilt_arrays
from ._fast import _fast_at_mass, _fast_curve, _fast_mass_max, _one_theta

_M = _GM = _PLANS = None  # set at the end of every exported file

# ---- the exported code starts below this line ----

__all__ = [
    "PARAMETERS", "UNITS", "BOUNDS", "OUTPUTS", "OUTPUT_UNITS", "FAMILY", "KIND", "METHOD", "HAS_STD", "CHECK",
    "in_domain", "mass_max", "radius", "tidal_deformability", "moment_of_inertia", "k2", "curve", "predict",
    "predict_at_masses", "set_trust_limits", "TRUST_LIMITS", "Estimate", "Curve", "Prediction", "MassPrediction",
    "QueryError", "PayloadError",
]


class PayloadError(ImportError):
    """The file was edited after export, or its embedded numbers do not match the recorded checksum."""


def _check_file():
    """Refuse a file edited after export: its bytes without the last line must hash to FILE_SHA256 there.

    Guards against accidental edits (a constant changed, a line lost), not against someone who edits the
    check as well.  A module run from a string (no file) has nothing to check.
    """
    path = globals().get("__file__")
    if not path:
        return
    with open(path, "rb") as fh:
        lines = fh.read().replace(b"\r\n", b"\n").splitlines(keepends=True)
    marked = [i for i, line in enumerate(lines) if line.startswith(b"FILE_SHA256 = ")]
    recorded = lines[marked[0]].split(b'"')[1].decode("ascii", "replace") if len(marked) == 1 else None
    got = hashlib.sha256(b"".join(line for i, line in enumerate(lines) if i not in marked)).hexdigest()
    if got != recorded:
        raise PayloadError(f"{__name__}: {path} was edited after export: its sha256 without the FILE_SHA256 line is "
                           f"{got}, but that line records {recorded}; do not use this file, export the model "
                           "again with `tovforge export`.")


def _load_model():
    """Decode and verify the payload, check the whole file, then read the payload (a zlib stream of .npy records
    of shuffled bytes, no pickles) into a runtime Model."""
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
    _check_file()  # the numbers are intact: now the code and constants
    stream = io.BytesIO(zlib.decompress(raw))
    arrays = {}
    for name, dtype, shape, order in _ARRAYS:
        # each array's bytes shuffled (all first bytes, then all second bytes, ...): (itemsize, count) uint8
        size, count = np.dtype(dtype).itemsize, math.prod(shape)
        r = np.lib.format.read_array(stream, allow_pickle=False)
        if r.dtype != np.uint8 or tuple(r.shape) != (size, count):
            raise PayloadError(f"{__name__}: payload array {name!r} is {r.dtype.str} {r.shape}, "
                               f"expected the bytes of {dtype} {shape}.")
        arrays[name] = np.ascontiguousarray(r.T).view(dtype).reshape(shape, order=order)
    if stream.read(1):
        raise PayloadError(f"{__name__}: the payload holds more data than its {len(_ARRAYS)} arrays.")
    arrays = rebuilt_arrays(_NUMPY, METHOD, arrays)  # local splines: each cell solved again from its outputs
    return Model(arrays, METHOD, _OUTPUTS, PARAMETERS, BOUNDS, MASS_FLOOR_MSUN)


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


def _bind(theta):
    """The namespace of ``theta`` and the model in it, on its device (converted once, then cached)."""
    xp = _namespace(theta)
    if xp is _NUMPY or xp is np:
        return _NUMPY, _GM
    on = device_of(theta)
    key = (id(xp), str(on))
    m = _MODEL_CACHE.get(key)
    if m is None:
        m = _M.replace(**{k: xp.asarray(v, dtype=xp.float64, **on) for k, v in _M.arrays.items() if k not in _STATIC})
        _MODEL_CACHE[key] = m
    return xp, m


def in_domain(theta):
    xp, m = _bind(theta)
    return query_in_domain(xp, m, theta)


def mass_max(theta, return_grad=False, return_std=False, strict=False):
    if _PLANS is not None:
        one = _one_theta(theta)
        if one is not None:
            return _fast_mass_max(one[0], one[1], return_grad, return_std, strict)
    xp, m = _bind(theta)
    return query_mass_max(xp, m, theta, return_grad, return_std, strict)


def _at_mass(query, theta, mass, return_grad, return_std, strict):
    if _PLANS is not None:
        one = _one_theta(theta)
        if one is not None:
            r = _fast_at_mass(query, one[0], one[1], mass, return_grad, return_std, strict)
            if r is not None:
                return r
    xp, m = _bind(theta)
    return query_at_mass(xp, m, query, theta, mass, return_grad, return_std, strict)


def radius(theta, mass, return_grad=False, return_std=False, strict=False):
    return _at_mass("radius", theta, mass, return_grad, return_std, strict)


def tidal_deformability(theta, mass, return_grad=False, return_std=False, strict=False):
    return _at_mass("tidal_deformability", theta, mass, return_grad, return_std, strict)


def moment_of_inertia(theta, mass, return_grad=False, return_std=False, strict=False):
    return _at_mass("moment_of_inertia", theta, mass, return_grad, return_std, strict)


def k2(theta, mass, return_grad=False, return_std=False, strict=False):
    return _at_mass("k2", theta, mass, return_grad, return_std, strict)


def curve(theta, n=100, strict=False):
    if _PLANS is not None:
        one = _one_theta(theta)
        if one is not None:
            r = _fast_curve(one[0], one[1], n, strict)
            if r is not None:
                return r
    xp, m = _bind(theta)
    return query_curve(xp, m, theta, n, strict)


def predict(theta, return_std=False, strict=False):
    xp, m = _bind(theta)
    return query_predict(xp, m, theta, return_std, strict)


def predict_at_masses(theta, masses, return_std=False, strict=False):
    xp, m = _bind(theta)
    return query_predict_at_masses(xp, m, theta, masses, return_std, strict)


def set_trust_limits(**limits):
    return query_set_trust_limits(_M, limits)  # every model of this file shares _M's limits


for _query in (in_domain, mass_max, radius, tidal_deformability, moment_of_inertia, k2, curve, predict,
               predict_at_masses, set_trust_limits):
    _query.__doc__ = QUERY_DOCS[_query.__name__]
del _query
