"""Plain SciPy baseline: one star at a time, in radius, surface found by an event.

This is the project's independent cross-check and the yardstick of the
benchmarks.  It shares nothing with the fast solver but the EOS evaluator:
it integrates the textbook equations in ``r`` (TOV for ``m`` and the
enthalpy ``h``, Hinderer's Riccati equation for ``y``, Hartle's second-order
frame-dragging equation for ``omega`` written as two first-order equations,
and the baryon mass) with :func:`scipy.integrate.solve_ivp` (DOP853,
adaptive steps), and stops at the event ``h = 0``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import minimize_scalar

from ..units import MOMENT_OF_INERTIA_KM3_TO_1E45_G_CM2, MSUN_KM
from ._love import love_k2, tidal_deformability

__all__ = ["BaselineStar", "baseline_star", "baseline_sequence"]

_FOUR_PI = 4.0 * np.pi


@dataclass(frozen=True)
class BaselineStar:
    """Result of :func:`baseline_star` (astronomers' units; see :class:`~tovforge.solve.Stars`)."""

    mass_msun: float
    radius_km: float
    k2: float
    tidal_deformability: float
    moment_of_inertia_1e45_g_cm2: float
    baryon_mass_msun: float
    nfev: int


def baseline_star(eos, h_c: float, rtol: float = 1e-10, atol: float = 1e-14) -> BaselineStar:
    """Solve one star with :func:`scipy.integrate.solve_ivp` in radius.

    Parameters
    ----------
    eos : tovforge.eos.EOS
    h_c : float
        Central pseudo-enthalpy.
    rtol, atol : float
        Tolerances passed to ``solve_ivp`` (state: m [km], h, y, omega, psi, M_b).
    """
    lanes = eos.batch.lanes(np.zeros(1, dtype=np.intp))
    e_s = float(eos.batch.e_surface[0])

    def eos_at(h):
        p, e, rho, dedh = lanes.eval(np.array([max(h, 0.0)]))
        return p[0], e[0], rho[0], dedh[0]

    p_c, e_c, rho_c, _ = eos_at(h_c)
    w_c = e_c + p_c

    def rhs(r, s):
        m, h, y, om, psi, mb = s
        p, e, rho, dedh = eos_at(h)
        one_m = 1.0 - 2.0 * m / r
        elam = 1.0 / one_m
        nu_prime = (m + _FOUR_PI * r**3 * p) / (r * r * one_m)  # = d alpha/dr
        dm = _FOUR_PI * r * r * e
        dh = -nu_prime
        # Hinderer (2008); Postnikov, Prakash & Lattimer (2010), Eq. 11
        Q = _FOUR_PI * elam * (5.0 * e + 9.0 * p + dedh) - 6.0 * elam / (r * r) - (2.0 * nu_prime) ** 2
        dy = (-y * y - y * elam * (1.0 + _FOUR_PI * r * r * (p - e)) - r * r * Q) / r
        # Hartle (1967): (r^4 j om')' = -4 r^3 j' om,  j = exp(-alpha) sqrt(1 - 2m/r)
        j = np.exp(h - h_c) * np.sqrt(one_m)
        djdr = -_FOUR_PI * r * (e + p) * j * elam
        dom = psi / (r**4 * j)
        dpsi = -4.0 * r**3 * djdr * om
        dmb = _FOUR_PI * r * r * rho / np.sqrt(one_m)
        return [dm, dh, dy, dom, dpsi, dmb]

    def surface(r, s):
        return s[1]

    surface.terminal = True
    surface.direction = -1
    r0 = 1e-5 * np.sqrt(3.0 * h_c / (2.0 * np.pi * (e_c + 3.0 * p_c)))
    om_prime = 16.0 * np.pi * w_c * r0 / 5.0
    s0 = [
        _FOUR_PI / 3.0 * e_c * r0**3,
        h_c - 2.0 * np.pi / 3.0 * (e_c + 3.0 * p_c) * r0**2,
        2.0,
        1.0 + 8.0 * np.pi * w_c * r0**2 / 5.0,
        r0**4 * om_prime,
        _FOUR_PI / 3.0 * rho_c * r0**3,
    ]
    sol = solve_ivp(rhs, (r0, 1e4), s0, method="DOP853", rtol=rtol, atol=atol, events=surface)
    if sol.status != 1 or len(sol.t_events[0]) == 0:
        raise RuntimeError(f"baseline integration did not reach the surface: {sol.message}")
    R = float(sol.t_events[0][0])
    m, _, y, om, psi, mb = sol.y_events[0][0]
    C = m / R
    y_R = y - _FOUR_PI * R**3 * e_s / m
    k2 = float(love_k2(C, y_R))
    j_R = np.exp(-h_c) * np.sqrt(1.0 - 2.0 * C)
    om_p = psi / (R**4 * j_R)
    inertia = R**4 * om_p / (6.0 * om + 2.0 * R * om_p)
    return BaselineStar(
        mass_msun=m / MSUN_KM,
        radius_km=R,
        k2=k2,
        tidal_deformability=float(tidal_deformability(C, k2)),
        moment_of_inertia_1e45_g_cm2=inertia * MOMENT_OF_INERTIA_KM3_TO_1E45_G_CM2,
        baryon_mass_msun=mb / MSUN_KM,
        nfev=sol.nfev,
    )


def baseline_sequence(eos, h_c, rtol: float = 1e-10, h_bracket=None):
    """Stars at the given central enthalpies, then M_max by bounded Brent search.

    Returns ``(stars, (h_star, m_max))`` with ``stars`` a list of
    :class:`BaselineStar`.  This is the plain approach the fast solver is
    measured against: one ``solve_ivp`` call per star.
    """
    stars = [baseline_star(eos, float(h), rtol=rtol) for h in np.asarray(h_c, float)]
    masses = np.array([s.mass_msun for s in stars])
    k = int(np.argmax(masses))
    hs = np.asarray(h_c, float)
    lo = hs[max(k - 1, 0)]
    hi = hs[min(k + 1, len(hs) - 1)]
    if h_bracket is not None:
        lo, hi = h_bracket
    res = minimize_scalar(lambda h: -baseline_star(eos, h, rtol=rtol).mass_msun, bounds=(lo, hi),
                          method="bounded", options={"xatol": 1e-10 * hi})
    return stars, (float(res.x), float(-res.fun))
