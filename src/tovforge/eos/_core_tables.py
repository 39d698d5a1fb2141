"""Spectral and sound-speed families: crust below a join density, table above.

Both families are defined by integrals over the core; they are computed once
per EOS on a fine grid (vectorised over EOS) and stored as a
:class:`~tovforge.eos._batch.HermiteTable` in the pseudo-enthalpy, joined to
the crust of Read et al. (2009) at the rest-mass density ``RHO_JOIN_CGS``.
"""

from __future__ import annotations

import numpy as np

from ..units import DENSITY_CGS_TO_GEOM, RHO_SATURATION_G_CM3
from ._base import EOSFamily, Parameter, register_family
from ._batch import CrustAndTable, HermiteTable
from ._piecewise import crust_only

__all__ = ["Spectral", "SoundSpeed", "RHO_JOIN_CGS", "cumulative_corrected_trapezoid"]

#: Where the core parametrisations take over from the crust: half the
#: saturation density (common practice for crust-core matching), g/cm^3.
RHO_JOIN_CGS = 0.5 * RHO_SATURATION_G_CM3


def cumulative_corrected_trapezoid(f, df, x):
    """Cumulative integral of ``f`` along the last axis, corrected trapezoid rule.

    Uses the end-point derivatives (Euler-Maclaurin: ``int = d/2 (f_a + f_b) +
    d^2/12 (f'_a - f'_b)``), fourth order for a smooth integrand.

    Parameters
    ----------
    f, df : ndarray, shape (..., n) or (..., n - 1, 2)
        Integrand and its derivative at the nodes.  If given with a trailing
        axis of length 2 and ``n - 1`` cells, the values are per cell
        ``(left, right)``, which allows a derivative that jumps at a node.
    x : ndarray, shape (..., n)
        Increasing nodes.

    Returns
    -------
    ndarray, shape (..., n)
        Integral from ``x[..., 0]`` to each node.
    """
    d = np.diff(x, axis=-1)
    if f.shape[-1] == 2 and f.ndim == x.ndim + 1:
        fa, fb = f[..., 0], f[..., 1]
        da, db = df[..., 0], df[..., 1]
    else:
        fa, fb = f[..., :-1], f[..., 1:]
        da, db = df[..., :-1], df[..., 1:]
    cell = 0.5 * d * (fa + fb) + d * d / 12.0 * (da - db)
    out = np.zeros(x.shape)
    np.cumsum(cell, axis=-1, out=out[..., 1:])
    return out


def _crust_state_at(rho_cgs, n_eos):
    """Crust values (geometrised p, e, rho, h, c_s^2) at one rest-mass density."""
    crust = crust_only(n_eos)
    rho = np.full(n_eos, rho_cgs * DENSITY_CGS_TO_GEOM)
    K, g, a = crust.K[:, -1], crust.gamma[:, -1], crust.a[:, -1]
    p = K * rho**g
    e = (1.0 + a) * rho + p / (g - 1.0)
    w = e + p
    return crust, p, e, rho, np.log(w / rho), g * p / w


class Spectral(EOSFamily):
    """Spectral adiabatic-index EOS (Lindblom 2010) above the crust.

    ``Gamma(x) = exp(gamma0 + gamma1 x + gamma2 x^2 + gamma3 x^3)`` with
    ``x = ln(p / p0)``, where ``p0`` is the crust pressure at the join density
    (half saturation density).  The energy density follows from the first law,
    ``d(e / rho)/dx = p / (Gamma rho)`` and ``d ln rho / dx = 1 / Gamma``
    (Lindblom 2010, Eqs. 4-8), integrated on 1024 cells up to
    ``x_max = 12``.  Parameter sets for which ``Gamma(x)`` leaves
    [0.6, 4.5] below ``x_max`` are rejected, a common practice in
    gravitational-wave analyses.

    References
    ----------
    Lindblom 2010, PRD 82, 103011.
    """

    name = "spectral"
    description = "Spectral adiabatic index (Lindblom 2010) above half saturation density"
    reference = "Lindblom 2010, PRD 82, 103011"
    # Box from memory of gravitational-wave analyses of the spectral EOS.
    parameters = (
        Parameter("gamma0", "1", "constant coefficient of ln Gamma(x)", (-5.0, 5.0), (0.2, 2.0)),
        Parameter("gamma1", "1", "linear coefficient of ln Gamma(x)", (-5.0, 5.0), (-1.6, 1.7)),
        Parameter("gamma2", "1", "quadratic coefficient of ln Gamma(x)", (-2.0, 2.0), (-0.6, 0.6)),
        Parameter("gamma3", "1", "cubic coefficient of ln Gamma(x)", (-0.5, 0.5), (-0.02, 0.02)),
    )
    x_max = 12.0
    n_cells = 1024
    gamma_range = (0.6, 4.5)

    def _x_grid(self):
        return np.linspace(0.0, self.x_max, self.n_cells + 1)

    @staticmethod
    def _gamma(theta, x):
        poly = theta[:, :1] + x * (theta[:, 1:2] + x * (theta[:, 2:3] + x * theta[:, 3:4]))
        dpoly = theta[:, 1:2] + x * (2.0 * theta[:, 2:3] + 3.0 * x * theta[:, 3:4])
        return poly, dpoly

    def joint_problems(self, theta):
        theta = np.atleast_2d(theta)
        x = self._x_grid()[None, :]
        poly, _ = self._gamma(theta, x)
        lo, hi = np.log(self.gamma_range[0]), np.log(self.gamma_range[1])
        msgs = []
        for row, lp in zip(theta, poly):
            bad = np.flatnonzero((lp < lo) | (lp > hi))
            if bad.size:
                j = bad[0]
                msgs.append(
                    f"spectral Gamma(x) must stay in [{self.gamma_range[0]}, {self.gamma_range[1]}] for "
                    f"x = ln(p/p0) in [0, {self.x_max:g}]; with gamma0..gamma3 = "
                    f"{', '.join(f'{v:g}' for v in row)} it is {np.exp(lp[j]):.3g} at x = {x[0, j]:.3g}."
                )
            else:
                msgs.append("")
        return msgs

    def _build(self, theta):
        theta = np.atleast_2d(theta)
        n = len(theta)
        crust, p0, e0, rho0, h0, _ = _crust_state_at(RHO_JOIN_CGS, n)
        x = np.broadcast_to(self._x_grid(), (n, self.n_cells + 1))
        poly, dpoly = self._gamma(theta, x)
        gam = np.exp(poly)
        dgam_over_gam = dpoly  # d ln Gamma / dx
        f = 1.0 / gam
        ln_rho = np.log(rho0)[:, None] + cumulative_corrected_trapezoid(f, -f * dgam_over_gam, x)
        rho = np.exp(ln_rho)
        p = p0[:, None] * np.exp(x)
        g = p / (gam * rho)
        dg = g * (1.0 - dgam_over_gam - f)
        e_over_rho = (e0 / rho0)[:, None] + cumulative_corrected_trapezoid(g, dg, x)
        e = rho * e_over_rho
        w = e + p
        h = np.log(w / rho)
        cs2 = gam * p / w
        table = HermiteTable.from_samples(h, p, e, rho, cs2)
        return CrustAndTable(crust, table)


class SoundSpeed(EOSFamily):
    """Piecewise-linear squared sound speed in log density, above the crust.

    ``c_s^2`` is linear in ``ln rho`` between fixed nodes at
    ``rho / rho_sat = 1, 2, 3, 5, 8`` (``rho_sat`` = 2.7e14 g/cm^3), rises
    linearly from the crust value at half saturation to the first node, and
    stays constant above the last node.  With every node in (0, 1] the EOS is
    causal by construction, which is why values above 1 are rejected.  The
    first law gives ``h(ln rho) = h_join + int c_s^2 d ln rho`` in closed form
    and ``p = p_join + int c_s^2 (e + p) d ln rho``.
    """

    name = "sound-speed"
    description = "Piecewise-linear c_s^2 in ln(rho) at 1, 2, 3, 5, 8 saturation densities"
    reference = "common practice (sound-speed parametrisations of dense matter)"
    node_density_over_sat = (1.0, 2.0, 3.0, 5.0, 8.0)
    rho_max_over_sat = 30.0
    cells_per_segment = 160
    parameters = tuple(
        Parameter(
            f"cs2_{i + 1}",
            "c^2",
            f"squared sound speed at {r:g} rho_sat",
            (0.0, 1.0),
            (0.02, 0.15) if i == 0 else (0.05, 0.95),
            (True, False),
        )
        for i, r in enumerate((1.0, 2.0, 3.0, 5.0, 8.0))
    )

    def _build(self, theta):
        theta = np.atleast_2d(theta)
        n = len(theta)
        crust, p_j, e_j, rho_j, h_j, cs2_j = _crust_state_at(RHO_JOIN_CGS, n)
        rho_sat = RHO_SATURATION_G_CM3 * DENSITY_CGS_TO_GEOM
        t_nodes = np.log(
            np.concatenate([[RHO_JOIN_CGS / RHO_SATURATION_G_CM3], self.node_density_over_sat, [self.rho_max_over_sat]])
            * rho_sat
        )
        c_nodes = np.concatenate([cs2_j[:, None], theta, theta[:, -1:]], axis=1)  # (n, 7)
        m = self.cells_per_segment
        # Cells never straddle a node: each segment gets its own uniform sub-grid.
        frac = np.linspace(0.0, 1.0, m + 1)[:-1]
        t = np.concatenate(
            [t_nodes[k] + frac * (t_nodes[k + 1] - t_nodes[k]) for k in range(len(t_nodes) - 1)] + [t_nodes[-1:]]
        )
        seg = np.minimum(np.searchsorted(t_nodes, t, side="right") - 1, len(t_nodes) - 2)
        slope = (c_nodes[:, 1:] - c_nodes[:, :-1]) / np.diff(t_nodes)  # (n, 6)
        cs2 = c_nodes[:, seg] + slope[:, seg] * (t - t_nodes[seg])
        cs2[:, -1] = c_nodes[:, -1]
        tt = np.broadcast_to(t, cs2.shape)
        # h is exact: trapezoid on a linear integrand.
        h = h_j[:, None] + np.concatenate(
            [np.zeros((n, 1)), np.cumsum(0.5 * np.diff(t) * (cs2[:, 1:] + cs2[:, :-1]), axis=1)], axis=1
        )
        rho = np.exp(tt)
        w = rho * np.exp(h)
        # p' = c^2 w with (c^2 w)' = slope w + c^2 (1 + c^2) w; the slope is per cell.
        cell_slope = slope[:, seg[:-1]]
        fa, fb = cs2[:, :-1] * w[:, :-1], cs2[:, 1:] * w[:, 1:]
        da = cell_slope * w[:, :-1] + cs2[:, :-1] * (1.0 + cs2[:, :-1]) * w[:, :-1]
        db = cell_slope * w[:, 1:] + cs2[:, 1:] * (1.0 + cs2[:, 1:]) * w[:, 1:]
        p = p_j[:, None] + cumulative_corrected_trapezoid(
            np.stack([fa, fb], -1), np.stack([da, db], -1), tt
        )
        e = w - p
        kinks = h[:, np.arange(1, len(t_nodes) - 1) * m]
        table = HermiteTable.from_samples(h, p, e, rho, cs2, kink_h=kinks)
        return CrustAndTable(crust, table)


register_family(Spectral())
register_family(SoundSpeed())
