"""Plain SciPy baseline: one star at a time, in radius, surface found by an event.

This is the project's independent cross-check and the yardstick of the
benchmarks.  It shares nothing with the fast solver but the EOS evaluator:
it integrates the textbook equations in ``r`` (TOV for ``m`` and the
enthalpy ``h``, Hinderer's Riccati equation for ``y``, Hartle's second-order
frame-dragging equation for ``omega`` written as two first-order equations,
and the baryon mass) with :func:`scipy.integrate.solve_ivp` (DOP853,
adaptive steps), and stops at the event ``h = 0``.  At a jump of the energy
density (a first-order phase transition at ``h_t``) it stops at the event
``h = h_t``, applies ``y -> y - 4 pi r^3 Delta e / (m + 4 pi r^3 p)``
(Damour & Nagar 2009, PRD 80, 084035) and restarts, so that every piece it
integrates is smooth.
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
    jumps = eos.batch.jumps[0]
    jumps = np.sort(jumps[np.isfinite(jumps) & (jumps < h_c)])[::-1]  # met in this order from the centre
    phase = [h_c]  # an enthalpy inside the phase being integrated: one-sided EOS values at a jump

    def eos_at(h):
        h = max(h, 0.0)
        loc = min(h, phase[0])
        p, e, rho, dedh = lanes.eval(np.array([h]), np.array([loc]))
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
        return s[1] - h_stop[0]

    surface.terminal = True
    surface.direction = -1
    h_stop = [0.0]
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
    nfev = 0
    for h_t in [*jumps, 0.0]:
        h_stop[0] = h_t
        sol = solve_ivp(rhs, (r0, 1e4), s0, method="DOP853", rtol=rtol, atol=atol, events=surface)
        nfev += sol.nfev
        if sol.status != 1 or len(sol.t_events[0]) == 0:
            raise RuntimeError(f"baseline integration did not reach h = {h_t:g}: {sol.message}")
        r0 = float(sol.t_events[0][0])
        s0 = np.array(sol.y_events[0][0], float)
        s0[1] = h_t
        if h_t > 0.0:
            p_t, e_in = lanes.eval(np.array([h_t]), np.array([h_t * (1.0 + 1e-9)]))[:2]
            e_out = lanes.eval(np.array([h_t]), np.array([h_t * (1.0 - 1e-9)]))[1]
            s0[2] -= _FOUR_PI * r0**3 * (e_in[0] - e_out[0]) / (s0[0] + _FOUR_PI * r0**3 * p_t[0])
            phase[0] = h_t * (1.0 - 1e-9)
    R = r0
    m, _, y, om, psi, mb = s0
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
        nfev=nfev,
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
