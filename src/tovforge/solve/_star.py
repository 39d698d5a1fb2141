"""Single-star solves with the interior profile."""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..units import DENSITY_CGS_TO_GEOM, MSUN_KM, PRESSURE_CGS_TO_GEOM
from ._result import StarProfile
from ._structure import StepSettings, integrate_stars
from ._surface import surface_fields, to_stars

__all__ = ["solve_star", "central_enthalpy"]


def central_enthalpy(eos, *, pressure_dyn_cm2=None, rest_mass_density_g_cm3=None, energy_density_g_cm3=None):
    """Pseudo-enthalpy at which the EOS has the given pressure or density.

    Exactly one of the keyword arguments must be given.
    """
    given = {
        "pressure_dyn_cm2": (pressure_dyn_cm2, 0, PRESSURE_CGS_TO_GEOM),
        "energy_density_g_cm3": (energy_density_g_cm3, 1, DENSITY_CGS_TO_GEOM),
        "rest_mass_density_g_cm3": (rest_mass_density_g_cm3, 2, DENSITY_CGS_TO_GEOM),
    }
    chosen = [(k, v) for k, v in given.items() if v[0] is not None]
    if len(chosen) != 1:
        raise InputError("give exactly one of pressure_dyn_cm2, energy_density_g_cm3, rest_mass_density_g_cm3.")
    name, (value, col, factor) = chosen[0]
    value = float(value)
    lanes = eos.batch.lanes(np.zeros(1, dtype=np.intp))
    target = value * factor

    def f(h):
        return lanes.eval(np.array([h]))[col][0] - target

    h_hi = min(eos.h_max, 10.0)
    if not np.isfinite(value) or value <= 0 or f(h_hi) < 0 or f(1e-12) > 0:
        top = lanes.eval(np.array([h_hi]))[col][0] / factor
        raise InputError(f"{name} must be in (0, {top:.4g}] for this EOS. Got {value:g} instead.")
    from scipy.optimize import brentq  # here, not at import: importing tovforge.solve stays light

    return brentq(f, 1e-12, h_hi, xtol=1e-15, rtol=1e-14)


def solve_star(eos, central_pseudo_enthalpy=None, *, mass_msun=None, pressure_dyn_cm2=None,
               rest_mass_density_g_cm3=None, energy_density_g_cm3=None, n_steps: int = 128) -> StarProfile:
    """Solve one star and return its interior profile.

    Parameters
    ----------
    eos : tovforge.eos.EOS
    central_pseudo_enthalpy : float, optional
        ``h_c``.  Alternatively give exactly one of ``mass_msun`` (a star on
        the stable branch), ``pressure_dyn_cm2``, ``rest_mass_density_g_cm3``
        or ``energy_density_g_cm3`` for the centre.
    n_steps : int
        Integration steps (the profile has ``n_steps + 2`` points, centre
        included).

    Returns
    -------
    StarProfile
    """
    if mass_msun is not None:
        from ._sequence import solve_sequence

        seq = solve_sequence(eos, n_stars=24, masses=[mass_msun])
        if not seq.success:
            raise InputError(f"cannot place a star of {mass_msun:g} Msun: {seq.message}")
        h_c = float(seq.at_mass.central_pseudo_enthalpy[0])
        if not np.isfinite(h_c):
            raise InputError(
                f"mass_msun must be in [{np.nanmin(seq.branch.mass_msun):.4g}, {seq.mass_max.mass_msun:.4g}] "
                f"for this EOS. Got {mass_msun:g} instead."
            )
    elif central_pseudo_enthalpy is not None:
        h_c = float(central_pseudo_enthalpy)
        if not (0 < h_c <= eos.h_max):
            raise InputError(f"central_pseudo_enthalpy must be in (0, {eos.h_max:g}]. Got {h_c:g} instead.")
    else:
        h_c = central_enthalpy(eos, pressure_dyn_cm2=pressure_dyn_cm2,
                               rest_mass_density_g_cm3=rest_mass_density_g_cm3,
                               energy_density_g_cm3=energy_density_g_cm3)
    steps = StepSettings(n_steps=int(n_steps))
    sv = integrate_stars(eos.batch, [0], [h_c], steps, record=True)
    H = np.concatenate([[h_c], sv.nodes[:, 0]])
    S = sv.states[:, :, 0]
    u, v, y = S[:, 0], S[:, 1], S[:, 2]
    r = np.concatenate([[0.0], np.sqrt(u)])
    m = np.concatenate([[0.0], v * u * np.sqrt(u)])
    yy = np.concatenate([[2.0], y])
    loc = np.concatenate([[h_c * (1 - 1e-9)], H[1:] + 1e-12])
    p, e, rho, _ = eos.batch.lanes(np.zeros(H.size, dtype=np.intp)).eval(np.maximum(H, 0.0), loc)
    R, M = float(sv.radius[0]), float(sv.mass[0])
    alpha = 0.5 * np.log1p(-2.0 * M / R) - H
    star = to_stars(eos.batch, [0], [h_c], surface_fields(sv))
    return StarProfile(
        radius_km=r,
        mass_msun=m / MSUN_KM,
        pressure_dyn_cm2=p / PRESSURE_CGS_TO_GEOM,
        energy_density_g_cm3=e / DENSITY_CGS_TO_GEOM,
        rest_mass_density_g_cm3=rho / DENSITY_CGS_TO_GEOM,
        pseudo_enthalpy=H,
        alpha=alpha,
        y=yy,
        star=star,
    )
