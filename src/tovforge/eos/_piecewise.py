"""Piecewise polytropes (Read, Lackey, Owen & Friedman 2009) and their crust."""

from __future__ import annotations

import numpy as np

from ..units import C_CGS, DENSITY_CGS_TO_GEOM
from ._base import EOSFamily, Parameter, register_family
from ._batch import PolytropePieces, polytrope_chain

__all__ = [
    "CRUST_K_CGS",
    "CRUST_GAMMA",
    "crust_boundaries_cgs",
    "PiecewisePolytrope",
    "Polytrope",
    "pieces_from_cgs",
]

#: Low-density crust of Read et al. 2009 (PRD 79, 124032, Table II): p / c^2 =
#: K rho^Gamma with p / c^2 and rho in g/cm^3.  The dividing densities follow
#: from continuity of p (their table lists 2.44034e7, 3.78358e11, 2.62780e12).
CRUST_K_CGS = np.array([6.80110e-9, 1.06186e-6, 5.32697e1, 3.99874e-8])
CRUST_GAMMA = np.array([1.58425, 1.28733, 0.62223, 1.35692])

#: Core dividing rest-mass densities of Read et al. 2009 in g/cm^3.
CORE_RHO1_CGS = 10.0**14.7
CORE_RHO2_CGS = 10.0**15.0


def crust_boundaries_cgs() -> np.ndarray:
    """Densities (g/cm^3) where consecutive crust pieces meet, from continuity of p."""
    K, g = CRUST_K_CGS, CRUST_GAMMA
    return (K[:-1] / K[1:]) ** (1.0 / (g[1:] - g[:-1]))


def pieces_from_cgs(K_cgs, gamma, rho_bounds_cgs) -> PolytropePieces:
    """Build geometrised :class:`PolytropePieces` from cgs constants.

    Parameters
    ----------
    K_cgs : ndarray, shape (n_eos, n_pieces)
        ``p / c^2 = K rho^Gamma`` with densities in g/cm^3.
    gamma : ndarray, shape (n_eos, n_pieces)
    rho_bounds_cgs : ndarray, shape (n_eos, n_pieces - 1)
        Dividing rest-mass densities in g/cm^3.
    """
    K_cgs = np.asarray(K_cgs, float)
    gamma = np.asarray(gamma, float)
    a, h_bounds = polytrope_chain(K_cgs, gamma, rho_bounds_cgs)
    # p_geom = F K rho_cgs^G = K F^(1-G) rho_geom^G with F = G/c^2 * 1e10 km^-2 per g/cm^3.
    K_geom = K_cgs * DENSITY_CGS_TO_GEOM ** (1.0 - gamma)
    return PolytropePieces(K_geom, gamma, a, h_bounds)


def crust_with_core(K_core_cgs, gamma_core, core_bounds_cgs, rho_join_cgs):
    """Crust pieces followed by core pieces; the crust-core density is given.

    ``rho_join_cgs`` has shape (n_eos,); ``core_bounds_cgs`` (n_eos, n_core - 1).
    """
    n = len(rho_join_cgs)
    K = np.concatenate([np.broadcast_to(CRUST_K_CGS, (n, 4)), K_core_cgs], axis=1)
    g = np.concatenate([np.broadcast_to(CRUST_GAMMA, (n, 4)), gamma_core], axis=1)
    rb = np.concatenate(
        [np.broadcast_to(crust_boundaries_cgs(), (n, 3)), np.asarray(rho_join_cgs)[:, None], core_bounds_cgs],
        axis=1,
    )
    return pieces_from_cgs(K, g, rb)


def crust_only(n_eos: int) -> PolytropePieces:
    """The four crust pieces, the last one extended to infinite density."""
    K = np.broadcast_to(CRUST_K_CGS, (n_eos, 4))
    g = np.broadcast_to(CRUST_GAMMA, (n_eos, 4))
    rb = np.broadcast_to(crust_boundaries_cgs(), (n_eos, 3))
    return pieces_from_cgs(K, g, rb)


class PiecewisePolytrope(EOSFamily):
    """Read et al. (2009) piecewise polytrope: crust plus three core pieces.

    Parameters are ``log_p1`` (log10 of the pressure in dyn/cm^2 at the rest-mass
    density 10^14.7 g/cm^3) and the adiabatic indices ``gamma1``, ``gamma2``,
    ``gamma3`` of the pieces below 10^14.7, between 10^14.7 and 10^15, and above
    10^15 g/cm^3.  The first core piece meets the fixed crust where their
    pressures are equal.

    References
    ----------
    Read, Lackey, Owen & Friedman 2009, PRD 79, 124032 (Eqs. 1-5, Tables II-III).
    """

    name = "piecewise-polytrope"
    description = "Crust of Read et al. (2009) plus three core polytropes"
    reference = "Read, Lackey, Owen & Friedman 2009, PRD 79, 124032"
    parameters = (
        Parameter("log_p1", "log10(dyn/cm^2)", "log10 pressure at 10^14.7 g/cm^3", (33.0, 36.0), (34.0, 35.0)),
        Parameter("gamma1", "1", "adiabatic index below 10^14.7 g/cm^3", (1.0, 10.0), (2.0, 4.0), (True, False),
                  log_offset=1.0),
        Parameter("gamma2", "1", "adiabatic index 10^14.7-10^15 g/cm^3", (1.0, 10.0), (1.5, 4.0), (True, False),
                  log_offset=1.0),
        Parameter("gamma3", "1", "adiabatic index above 10^15 g/cm^3", (1.0, 10.0), (1.5, 4.0), (True, False),
                  log_offset=1.0),
    )

    @staticmethod
    def _core_constants(theta):
        theta = np.atleast_2d(theta)
        log_p1, g1, g2, g3 = theta.T
        K1 = 10.0**log_p1 / C_CGS**2 / CORE_RHO1_CGS**g1
        K2 = K1 * CORE_RHO1_CGS ** (g1 - g2)
        K3 = K2 * CORE_RHO2_CGS ** (g2 - g3)
        # Crust-core density: where the last crust piece meets the first core piece.
        rho0 = (CRUST_K_CGS[3] / K1) ** (1.0 / (g1 - CRUST_GAMMA[3]))
        return np.stack([K1, K2, K3], 1), np.stack([g1, g2, g3], 1), rho0

    def joint_problems(self, theta):
        theta = np.atleast_2d(theta)
        _, g, rho0 = self._core_constants(theta)
        lo = crust_boundaries_cgs()[-1]
        msgs = []
        for t, r0, gg in zip(theta, rho0, g):
            if gg[0] <= CRUST_GAMMA[3]:
                msgs.append(
                    f"The 'gamma1' parameter of {self.name} must exceed the crust index "
                    f"{CRUST_GAMMA[3]} so that the core meets the crust. Got {t[1]:g} instead."
                )
            elif not r0 > lo:
                # the core pressure is too high at low density: it meets the crust inside the crust's last
                # piece; the join density falls with log_p1 and rises with gamma1 (issue 16: one message
                # served both cases and gave the wrong advice here)
                msgs.append(
                    f"log_p1={t[0]:g} with gamma1={t[1]:g} joins the crust at {r0:.3g} g/cm^3, below the "
                    f"allowed ({lo:.4g}, {CORE_RHO1_CGS:.4g}) g/cm^3 (the core is too stiff at low density); "
                    "lower log_p1 or raise gamma1."
                )
            elif not r0 < CORE_RHO1_CGS:
                msgs.append(
                    f"log_p1={t[0]:g} with gamma1={t[1]:g} joins the crust at {r0:.3g} g/cm^3, above the "
                    f"allowed ({lo:.4g}, {CORE_RHO1_CGS:.4g}) g/cm^3 (the core pressure at 10^14.7 g/cm^3 is "
                    "below the crust's); raise log_p1 or gamma1."
                )
            else:
                msgs.append("")
        return msgs

    def _build(self, theta):
        K, g, rho0 = self._core_constants(theta)
        n = len(rho0)
        core_bounds = np.broadcast_to([CORE_RHO1_CGS, CORE_RHO2_CGS], (n, 2))
        return crust_with_core(K, g, core_bounds, rho0)


class Polytrope(EOSFamily):
    """Single polytrope ``p = K rho^Gamma``, ``e = rho + p / (Gamma - 1)``.

    ``K`` is given in units with G = c = M_sun = 1 (the convention of the
    numerical-relativity literature); there is no crust.  A validation family.
    """

    name = "polytrope"
    description = "Single polytrope p = K rho^Gamma (K in G = c = Msun = 1 units); validation family"
    reference = "Tooper 1964, ApJ 140, 434 (relativistic polytropes)"
    parameters = (
        Parameter("K", "Msun^(2 Gamma - 2)", "polytropic constant, G = c = Msun = 1", (0.0, 1e6), (50.0, 200.0),
                  (True, False)),
        Parameter("gamma", "1", "adiabatic index", (1.0, 10.0), (1.8, 3.0), (True, False)),
    )

    def _build(self, theta):
        from ..units import MSUN_KM

        theta = np.atleast_2d(theta)
        K_msun, g = theta[:, 0], theta[:, 1]
        # p and rho scale as length^-2: K_km = K_msun * MSUN_KM^(2 (G - 1)).
        K_km = K_msun * MSUN_KM ** (2.0 * (g - 1.0))
        n = len(g)
        return PolytropePieces(K_km[:, None], g[:, None], np.zeros((n, 1)), np.zeros((n, 0)))


register_family(PiecewisePolytrope())
register_family(Polytrope())
