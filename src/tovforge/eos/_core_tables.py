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
    (Lindblom 2010), integrated on 1024 cells up to ``x_max = 10``
    (``p`` about 1.2e37 dyn/cm^2, above the centre of any maximum-mass star).  Parameter sets for which ``Gamma(x)`` leaves
    [0.6, 4.5] below ``x_max`` are rejected, a common practice in
    gravitational-wave analyses (from memory, not checked against the paper:
    the spectral EOS analyses of GW170817, Abbott et al. 2018, PRL 121,
    161101, used this range).

    References
    ----------
    Lindblom 2010, PRD 82, 103011.
    """

    name = "spectral"
    description = "Spectral adiabatic index (Lindblom 2010) above half saturation density"
    reference = "Lindblom 2010, PRD 82, 103011"
    # Demo box: our choice, narrower than the priors of gravitational-wave
    # analyses, found by a search for the largest box whose points mostly
    # satisfy the Gamma(x) range below and solve (research log of issue 13):
    # 457 of 512 Sobol points (89 %) solve with M_max above 1 Msun; the earlier
    # box (0.5, 1.2) x (-0.2, 0.4) x (-0.05, 0.03) x (-0.002, 0.002) let 18.5 %
    # of its points pass the Gamma rule.
    parameters = (
        Parameter("gamma0", "1", "constant coefficient of ln Gamma(x)", (-5.0, 5.0), (0.85, 1.3)),
        Parameter("gamma1", "1", "linear coefficient of ln Gamma(x)", (-5.0, 5.0), (0.0, 0.1)),
        Parameter("gamma2", "1", "quadratic coefficient of ln Gamma(x)", (-2.0, 2.0), (-0.016, -0.004)),
        Parameter("gamma3", "1", "cubic coefficient of ln Gamma(x)", (-0.5, 0.5), (-0.0007, 0.0004)),
    )
    x_max = 10.0
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
        # d ln c_s^2 / dh = (d ln Gamma/dx + 1) dx/dh - d ln w/dh, dx/dh = w/p
        dcs2 = cs2 * ((dgam_over_gam + 1.0) * (w / p) - 1.0 - 1.0 / cs2)
        table = HermiteTable.from_samples(h, p, e, rho, cs2, dcs2)
        return CrustAndTable(crust, table)


class SoundSpeed(EOSFamily):
    """Piecewise-linear squared sound speed in the baryon chemical potential.

    ``c_s^2`` is linear in ``ln mu`` (equivalently in the pseudo-enthalpy,
    ``mu = m_n exp(h)``) between fixed nodes at ``mu = 1000, 1100, 1300, 1600,
    2000 MeV``; it rises linearly from the crust value at half saturation
    density to the first node and stays constant above the last one, up to
    ``mu = 4000 MeV``.  With every node in (0, 1] the EOS is causal by
    construction, so values above 1 are rejected.  The first law gives
    ``d ln rho / dh = 1 / c_s^2`` (closed form on each segment), ``e + p = rho
    exp(h)`` and ``p = p_join + int (e + p) dh`` (quadrature).  Nodes in the
    chemical potential keep ``c_s^2(h)`` smooth between nodes; nodes in the
    density would make ``c_s^2`` grow like ``sqrt(h - h_join)`` above a soft
    crust, which is slow to integrate accurately.
    """

    name = "sound-speed"
    description = "Piecewise-linear c_s^2 in ln(mu_B) at mu_B = 1000, 1100, 1300, 1600, 2000 MeV"
    reference = "common practice (sound-speed parametrisations of dense matter)"
    node_mu_mev = (1000.0, 1100.0, 1300.0, 1600.0, 2000.0)
    mu_max_mev = 4000.0
    cells_per_segment = 160
    parameters = tuple(
        Parameter(
            f"cs2_{i + 1}",
            "c^2",
            f"squared sound speed at mu_B = {mu:g} MeV",
            (0.0, 1.0),
            (0.02, 0.2) if i == 0 else (0.05, 0.95),
            (True, False),
            # surrogates see ln(c_s^2): it spans a decade near 0, where a soft segment acts like a
            # transition; held-out p95 on the default box, local kind, 8,025 points: R 24.8 -> 12.7 m,
            # Lambda 2.3 -> 1.1 % (research/surrogates/LOG.md)
            log_offset=0.0,
        )
        for i, mu in enumerate((1000.0, 1100.0, 1300.0, 1600.0, 2000.0))
    )

    def _build(self, theta):
        # c_s^2 of order 1e-3 makes e grow like exp(h / c_s^2) and overflow before mu_max: the table then ends
        # below its last node (HermiteTable.h_end, at E_CEILING_G_CM3), so the overflow is expected here
        with np.errstate(over="ignore", invalid="ignore"):
            return self._build_table(theta)

    def _build_table(self, theta):
        theta = np.atleast_2d(theta)
        n = len(theta)
        crust, p_j, e_j, rho_j, h_j, cs2_j = _crust_state_at(RHO_JOIN_CGS, n)
        h_nodes = np.log(np.array((*self.node_mu_mev, self.mu_max_mev)) / NEUTRON_MASS_MEV)  # (6,)
        edges = np.concatenate([h_j[:, None], np.broadcast_to(h_nodes, (n, h_nodes.size))], axis=1)  # (n, 7)
        c_nodes = np.concatenate([cs2_j[:, None], theta, theta[:, -1:]], axis=1)  # (n, 7)
        m = self.cells_per_segment
        frac = np.linspace(0.0, 1.0, m + 1)[:-1]
        n_seg = edges.shape[1] - 1
        h = np.concatenate(
            [(edges[:, k, None] + frac * (edges[:, k + 1] - edges[:, k])[:, None]) for k in range(n_seg)]
            + [edges[:, -1:]],
            axis=1,
        )
        seg = np.minimum(np.arange(h.shape[1]) // m, n_seg - 1)  # segment of each node (last: final)
        slope = np.diff(c_nodes, axis=1) / np.diff(edges, axis=1)  # d c_s^2 / dh per segment, (n, 6)
        rows = np.arange(n)[:, None]
        h0 = edges[rows, seg]
        c0 = c_nodes[rows, seg]
        b = slope[rows, seg]
        cs2 = c0 + b * (h - h0)
        # ln rho: int dh / (c0 + b (h - h0)) on each segment, accumulated.
        with np.errstate(divide="ignore", invalid="ignore"):
            seg_int = np.where(np.abs(b) > 1e-12, np.log(cs2 / c0) / b, (h - h0) / c0)
        full = np.where(
            np.abs(slope) > 1e-12,
            np.log(c_nodes[:, 1:] / c_nodes[:, :-1]) / np.where(np.abs(slope) > 1e-12, slope, 1.0),
            np.diff(edges, axis=1) / c_nodes[:, :-1],
        )
        before = np.concatenate([np.zeros((n, 1)), np.cumsum(full, axis=1)], axis=1)[rows, seg]
        rho = rho_j[:, None] * np.exp(before + seg_int)
        w = rho * np.exp(h)
        # p' = w with w' = w (1 + 1/c_s^2): corrected trapezoid per cell.
        p = p_j[:, None] + cumulative_corrected_trapezoid(w, w * (1.0 + 1.0 / cs2), h)
        e = w - p
        kinks = h[:, np.arange(1, n_seg) * m]
        cell_slope = b[:, :-1]
        dcs2 = np.stack([cell_slope, cell_slope], axis=-1)
        table = HermiteTable.from_samples(h, p, e, rho, cs2, dcs2, kink_h=kinks)
        return CrustAndTable(crust, table)


#: Neutron mass in MeV (CODATA 2018), for mu_B = m_n exp(h).
NEUTRON_MASS_MEV = 939.56542052


register_family(Spectral())
register_family(SoundSpeed())
