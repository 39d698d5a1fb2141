"""From the integrator's surface values to :class:`Stars`: the one map between them.

:func:`tovforge.solve.integrate_stars` returns surface values in geometrised
units (G = c = 1, lengths in km).  The sequence phases work on those arrays
(plain dicts keyed by the :class:`SurfaceValues` attribute names, failures
set to NaN); :data:`SURFACE_FIELDS` says once which field of :class:`Stars`
each becomes and how its unit is converted, and :func:`to_stars` adds the
central values of the EOS.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping

import numpy as np

from ..units import DENSITY_CGS_TO_GEOM, MOMENT_OF_INERTIA_KM3_TO_1E45_G_CM2, MSUN_KM, PRESSURE_CGS_TO_GEOM
from ._result import Stars
from ._structure import integrate_stars

__all__ = ["SURFACE_FIELDS", "GEOMETRISED", "integrate", "surface_fields", "to_stars", "mask_stars", "row"]


def _km_to_msun(x):
    return x / MSUN_KM


def _km3_to_1e45_g_cm2(x):
    return x * MOMENT_OF_INERTIA_KM3_TO_1E45_G_CM2


def _same(x):
    return x


#: Field of :class:`Stars` <- (attribute of :class:`SurfaceValues`, conversion from geometrised units).
SURFACE_FIELDS: dict[str, tuple[str, Callable]] = {
    "mass_msun": ("mass", _km_to_msun),
    "radius_km": ("radius", _same),
    "compactness": ("compactness", _same),
    "k2": ("k2", _same),
    "tidal_deformability": ("tidal_deformability", _same),
    "moment_of_inertia_1e45_g_cm2": ("moment_of_inertia", _km3_to_1e45_g_cm2),
    "baryon_mass_msun": ("baryon_mass", _km_to_msun),
}
#: The geometrised surface values the sequence phases carry (keys of their dicts).
GEOMETRISED = tuple(attr for attr, _ in SURFACE_FIELDS.values())


def integrate(batch, eos_index, h_c, steps) -> tuple[dict, int]:
    """Integrate stars; geometrised surface values with failures set to NaN.

    Parameters
    ----------
    batch : EOSBatch
    eos_index : array_like of int, shape (n,)
    h_c : array_like, shape (n,)
        Central pseudo-enthalpies.
    steps : StepSettings

    Returns
    -------
    values : dict of str to ndarray, shape (n,)
        Keyed by :data:`GEOMETRISED`.  A star whose mass or radius is not
        finite and positive, or whose compactness reaches 1/2, is NaN in
        every value.
    nfev : int
        Right-hand-side evaluations of the pass.
    """
    eos_index = np.asarray(eos_index, dtype=np.intp)
    h_c = np.asarray(h_c, float)
    if h_c.size == 0:
        return {k: np.empty(0) for k in GEOMETRISED}, 0
    sv = integrate_stars(batch, eos_index, h_c, steps)
    out = {k: np.asarray(getattr(sv, k), float) for k in GEOMETRISED}
    bad = ~(np.isfinite(out["mass"]) & np.isfinite(out["radius"]) & (out["mass"] > 0) & (out["compactness"] < 0.5))
    if bad.any():
        for k in out:
            out[k] = np.where(bad, np.nan, out[k])
    return out, sv.nfev


def surface_fields(values) -> dict:
    """Geometrised surface values -> the surface fields of :class:`Stars`, in their units.

    ``values`` is a mapping keyed by :data:`GEOMETRISED` or a
    :class:`SurfaceValues`.
    """
    if isinstance(values, Mapping):
        return {field: convert(values[attr]) for field, (attr, convert) in SURFACE_FIELDS.items()}
    return {field: convert(getattr(values, attr)) for field, (attr, convert) in SURFACE_FIELDS.items()}


def to_stars(batch, eos_index, h_c, fields: Mapping, shape=None) -> Stars:
    """A :class:`Stars` from its surface fields and the EOS at the centres.

    Parameters
    ----------
    batch : EOSBatch
    eos_index : array_like of int, shape (n,)
    h_c : array_like, shape (n,)
        Central pseudo-enthalpies (finite, inside each EOS's range).
    fields : mapping
        The keys of :data:`SURFACE_FIELDS`, arrays of shape (n,), in the units
        of :class:`Stars` (see :func:`surface_fields`).
    shape : tuple of int, optional
        Reshape every field to this shape.
    """
    eos_index = np.asarray(eos_index, dtype=np.intp)
    h_c = np.asarray(h_c, float)
    if h_c.size:
        p, e, rho, dedh = batch.lanes(eos_index).eval(h_c, h_c * (1.0 - 1e-9))
        with np.errstate(divide="ignore", invalid="ignore"):
            cs2 = np.where(dedh > 0, (e + p) / dedh, np.inf)
    else:
        p = e = rho = cs2 = np.empty(0)
    out = {field: fields[field] for field in SURFACE_FIELDS}
    out.update(
        central_pseudo_enthalpy=h_c,
        central_pressure_dyn_cm2=p / PRESSURE_CGS_TO_GEOM,
        central_energy_density_g_cm3=e / DENSITY_CGS_TO_GEOM,
        central_rest_mass_density_g_cm3=rho / DENSITY_CGS_TO_GEOM,
        central_sound_speed_sq=cs2,
    )
    if shape is not None:
        out = {k: np.asarray(v, float).reshape(shape) for k, v in out.items()}
    return Stars(**out)


def mask_stars(stars: Stars, keep) -> Stars:
    """``stars`` with NaN wherever ``keep`` is False."""
    return Stars(**{k: np.where(keep, v, np.nan) for k, v in stars.as_dict().items()})


def row(stars: Stars, r: int, keep_nan: bool = False) -> Stars:
    """Row ``r`` of a 2-D :class:`Stars` (1-D fields become length-1 rows), without the NaN padding."""
    d = {k: np.atleast_1d(np.asarray(v)[r]) for k, v in stars.as_dict().items()}
    if not keep_nan:
        good = np.isfinite(d["mass_msun"])
        d = {k: v[good] for k, v in d.items()}
    return Stars(**d)
