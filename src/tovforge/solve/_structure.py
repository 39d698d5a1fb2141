"""Vectorised integration of stellar structure in the pseudo-enthalpy (internal).

Each star is integrated from (just off) its centre ``h = h_c`` to its surface
``h = 0`` with a fixed-step 8th-order Runge-Kutta method (DOP853 tableau) on
its own grid of nodes: graded geometrically towards the centre and towards
the surface, with a node placed exactly on every EOS kink.  All stars of all
EOS in a call advance together; the only Python loops run over steps and
stages.

State per star (geometrised units, lengths in km)::

    u   = r^2                   regular at the centre (u ~ h_c - h)
    v   = m / r^3               regular (-> 4 pi e_c / 3)
    y   = r H'/H                tidal perturbation (Hinderer 2008), y(0) = 2
    eta = r w'/w                frame dragging (Hartle 1967), eta(0) = 0
    b   = M_b(r) / r^3          baryon mass

With ``dr/dh = -r (r - 2m) / (m + 4 pi r^3 p)`` (Lindblom 1992, ApJ 398, 569)
the equations become

    du/dh   = -2 (1 - 2 v u) / (v + 4 pi p)
    dv/dh   = g (4 pi e - 3 v),            g = (du/dh) / (2 u) = (dr/dh) / r
    dy/dh   = g [ -y^2 - y e^lam (1 + 4 pi u (p - e))
                  - 4 pi u e^lam (5 e + 9 p + (e + p)/c_s^2)
                  + 6 e^lam + 4 (u e^lam (v + 4 pi p))^2 ]
    deta/dh = g [ -eta (eta + 3) + 4 pi u e^lam (e + p) (eta + 4) ]
    db/dh   = g (4 pi rho e^(lam/2) - 3 b),    e^lam = 1 / (1 - 2 v u)

The y equation is that of Hinderer (2008, ApJ 677, 1216) and Postnikov,
Prakash & Lattimer (2010, PRD 82, 024016); the eta equation is Hartle's
(1967, ApJ 150, 1005) frame-dragging equation written for eta = d ln w/d ln r,
which gives ``I = R^3 eta_R / (6 + 2 eta_R)``.

First-order phase transitions.  Where the energy density jumps by
``Delta e = e_inside - e_outside`` at an enthalpy ``h_t`` (a node of every
star that contains it), ``r``, ``m``, ``p``, ``eta`` and ``M_b`` are
continuous but ``y`` is not: ``c_s^-2`` holds a delta function there, and
``y_out = y_in - 4 pi r^3 Delta e / (m + 4 pi r^3 p)`` (Damour & Nagar 2009,
PRD 80, 084035; Postnikov, Prakash & Lattimer 2010, PRD 82, 024016), i.e.
``y -= 4 pi Delta e / (v + 4 pi p)``: the interior form of the surface term.
A star whose centre lies within ``centre_offset`` above ``h_t`` starts its
integration at ``h_t`` itself (the series about the centre assumes one phase),
with the jump applied there.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ._love import love_k2, tidal_deformability
from ._tableau import A as _A
from ._tableau import B as _B
from ._tableau import C as _C

__all__ = ["StepSettings", "SurfaceValues", "integrate_stars", "node_grid"]

_FOUR_PI = 4.0 * np.pi
# Each stage is evaluated at h0 + c dh but its EOS piece is looked up at a point
# nudged towards the middle of the step, so that a step that starts or ends on
# a kink uses the one-sided EOS of the interval it covers.
_NUDGE = 1e-7
_STAGE_ROWS = [(_A[j, :j].copy(), float(_C[j]), float(_C[j] + _NUDGE * (0.5 - _C[j]))) for j in range(len(_C))]


@dataclass(frozen=True)
class StepSettings:
    """Step placement of the fixed-step integrator.

    Attributes
    ----------
    n_steps : int
        Runge-Kutta steps per star (12 right-hand-side evaluations each),
        before the allowance for kinks.
    steps_per_kink : int
        Extra steps per EOS kink (the batch's largest kink count is used), so
        that piecewise EOS with many pieces keep their accuracy.
    centre_offset : float
        The integration starts at ``h_c (1 - centre_offset)`` from a series
        solution about the centre.
    surface_scale : float
        Enthalpy below which steps shrink geometrically towards the surface.
    centre_weight : float
        Weight of the geometric grading towards the centre relative to the
        grading towards the surface.
    """

    n_steps: int = 16
    steps_per_kink: int = 3
    centre_offset: float = 1e-3
    surface_scale: float = 4e-3
    centre_weight: float = 0.55
    min_steps_between_kinks: int = 2
    surface_weight: float = 1.0
    energy_weight: float = 0.5
    energy_floor: float = 1e-4

    def refined(self, factor: float) -> "StepSettings":
        """The same placement with ``factor`` times as many steps."""
        from dataclasses import replace

        return replace(self, n_steps=max(4, int(round(self.n_steps * factor))))


@dataclass(frozen=True)
class SurfaceValues:
    """Per-star results of :func:`integrate_stars` (geometrised, km).

    Attributes
    ----------
    radius, mass, baryon_mass : ndarray
        ``R``, ``M`` and baryon mass in km.
    compactness, k2, tidal_deformability : ndarray
        ``M / R``, Love number, ``Lambda``.
    moment_of_inertia : ndarray
        ``I`` in km^3.
    y_surface : ndarray
        ``y`` at the surface after the density-jump correction.
    nfev : int
        Right-hand-side evaluations (each over all lanes).
    nodes : ndarray or None
        Node enthalpies, shape (n_steps + 1, n_lanes), if recorded.
    states : ndarray or None
        States at the nodes, shape (n_steps + 1, 5, n_lanes), if recorded.
    """

    radius: np.ndarray
    mass: np.ndarray
    baryon_mass: np.ndarray
    compactness: np.ndarray
    k2: np.ndarray
    tidal_deformability: np.ndarray
    moment_of_inertia: np.ndarray
    y_surface: np.ndarray
    nfev: int
    nodes: np.ndarray | None = None
    states: np.ndarray | None = None


def node_grid(h_c, kinks, settings: StepSettings, batch=None, eos_index=None, n_steps_total=None, h_start=None):
    """Integration nodes from ``h_c (1 - offset)`` down to 0 for each star.

    Steps are spread uniformly in the stretched coordinate

        t(h) = s_w ln(1 + h/a) + e_w ln(1 + e(h)/e_f) + c ln(h_c / (h_c - h)),

    whose three terms grade the steps towards the surface, follow the energy
    density (fast changes of ``e`` in the crust and just above it, where the
    sound speed is small), and grade them geometrically towards the centre
    (the centre is a regular singular point: the decaying modes of the
    equations vary like powers of ``h_c - h``).  Every kink of the EOS
    strictly inside the range is a node; the steps are shared out among the
    segments between kinks in proportion to their length in ``t``, at least
    ``min_steps_between_kinks`` each.

    Parameters
    ----------
    h_c : ndarray, shape (n,)
        Central pseudo-enthalpies.
    kinks : ndarray, shape (n, k)
        Kink enthalpies of each star's EOS, increasing, ``inf``-padded.
    batch, eos_index : EOSBatch and ndarray, optional
        The EOS of each star, for the energy-density term (omitted if None).

    n_steps_total : int, optional
        Steps per star (default ``settings.n_steps``).
    h_start : ndarray, shape (n,), optional
        First node of each star (default ``h_c (1 - settings.centre_offset)``).

    Returns
    -------
    ndarray, shape (n_steps + 1, n)
        Node enthalpies in integration order (decreasing; last row is 0).
    """
    n = settings.n_steps
    if n_steps_total is not None:
        n = n_steps_total
    a = settings.surface_scale
    # For very light stars the whole star sits below the surface scale: shrink it.
    a = np.minimum(a, 0.25 * np.asarray(h_c, float))[:, None]
    c = settings.centre_weight
    h_c = np.asarray(h_c, float)
    n_lanes = h_c.size
    hc = h_c[:, None]
    if h_start is None:
        h_start = h_c * (1.0 - settings.centre_offset)
    kinks = np.asarray(kinks, float).reshape(n_lanes, -1)
    valid = (kinks > 0.0) & (kinks < h_start[:, None] * (1.0 - 1e-9))
    # Fine reference grid: a few points inside every segment between kinks
    # (clustered towards the segment ends, geometric towards the surface in
    # the outermost one), points geometric in h_c - h towards the centre, and
    # the kinks themselves.
    edges = np.sort(np.where(valid, kinks, h_start[:, None]), axis=1)
    edges = np.concatenate([np.zeros((n_lanes, 1)), edges, h_start[:, None]], axis=1)
    lo, width = edges[:, :-1], np.diff(edges, axis=1)
    inner = lo[:, :, None] + width[:, :, None] * _SEGMENT_FRACTIONS[None, None, :]
    inner[:, 0, :] = edges[:, 1:2] * _SURFACE_FRACTIONS[None, :]
    centre = np.geomspace(1.0, 1.0 / settings.centre_offset, _N_FINE_CENTRE)
    fine = np.concatenate(
        [inner.reshape(n_lanes, -1), hc - (hc - h_start[:, None]) * centre, edges], axis=1
    )
    fine = np.sort(np.clip(fine, 0.0, h_start[:, None]), axis=1)
    t = np.log1p(fine / a) * settings.surface_weight + c * np.log(hc / (hc - fine))
    if batch is not None and settings.energy_weight > 0:
        nf = fine.shape[1]
        lanes = batch.lanes(np.repeat(np.asarray(eos_index), nf))
        dedh = lanes.eval(fine.ravel())[3].reshape(n_lanes, nf)
        q = np.log(settings.energy_floor + dedh)
        tv = np.concatenate([np.zeros((n_lanes, 1)), np.cumsum(np.abs(np.diff(q, axis=1)), axis=1)], axis=1)
        t = t + settings.energy_weight * tv
    t = np.maximum.accumulate(t, axis=1)
    T = t[:, -1]
    # t at the kinks (exact: kinks are points of the fine grid).
    pos = np.clip(np.argmax(fine[:, None, :] >= np.where(valid, kinks, np.inf)[:, :, None], axis=2), 0, None)
    tk = np.where(valid, np.take_along_axis(t, pos, 1), T[:, None])
    # Steps per segment between consecutive anchors (0, kinks, h_start):
    # proportional to the segment's length in t, at least `gap` per non-empty
    # segment, rounded by largest remainders so that every star has n steps.
    gap = settings.min_steps_between_kinks
    edges = np.concatenate([np.zeros((n_lanes, 1)), tk, T[:, None]], axis=1)
    length = np.diff(edges, axis=1)
    nonempty = length > 0
    ideal = n * length / T[:, None]
    counts = np.where(nonempty, np.maximum(np.floor(ideal), gap), 0).astype(np.intp)
    rows = np.arange(n_lanes)
    for _ in range(4 * n):
        rem = n - counts.sum(axis=1)
        if not rem.any():
            break
        resid = ideal - counts
        up = np.argmax(np.where(nonempty, resid, -np.inf), axis=1)
        down = np.argmin(np.where(counts > gap, resid, np.inf), axis=1)
        counts[rows, up] += rem > 0
        counts[rows, down] -= rem < 0
    J = np.concatenate([np.zeros((n_lanes, 1), np.intp), np.cumsum(counts, axis=1)], axis=1)
    j = np.arange(n + 1)
    seg = np.clip((J[:, None, :] <= j[None, :, None]).sum(axis=2) - 1, 0, J.shape[1] - 2)
    J0 = np.take_along_axis(J, seg, 1)
    J1 = np.take_along_axis(J, seg + 1, 1)
    T0 = np.take_along_axis(edges, seg, 1)
    T1 = np.take_along_axis(edges, seg + 1, 1)
    span = J1 - J0
    t_nodes = np.where(span > 0, T0 + (j - J0) * (T1 - T0) / np.where(span > 0, span, 1), T1)
    # h(t) by linear interpolation on each star's fine grid, all stars in one
    # np.interp call (rows shifted apart so that they do not overlap).
    shift = (np.arange(n_lanes) * (float(np.max(T)) + 1.0))[:, None]
    h = np.interp((t_nodes + shift).ravel(), (t + shift).ravel(), fine.ravel()).reshape(n_lanes, n + 1)
    # Exact anchors: kinks, start and surface.
    jk = J[:, 1:-1]
    h[rows[:, None], np.where(valid, jk, 0)] = np.where(valid, kinks, h[:, :1])
    h[:, 0] = 0.0
    h[:, n] = h_start
    return h[:, ::-1].T.copy()


# Fine grid of node_grid: interior fractions of each segment between kinks
# (Chebyshev-like, so denser near the ends), of the outermost segment
# (geometric towards the surface), and points towards the centre.
_SEGMENT_FRACTIONS = 0.5 - 0.5 * np.cos(np.pi * np.arange(1, 6) / 6)
_SURFACE_FRACTIONS = np.geomspace(1e-4, 0.7, 5)
_N_FINE_CENTRE = 10


def _centre_series(h_c, s0, lanes):
    """State at ``h = h_c - s0`` from the expansion about the centre.

    With ``s = h_c - h``: ``u = a1 s + a2 s^2``, ``v = v0 + v1 s``,
    ``y = 2 + y2 u``, ``eta = eta2 u``, ``b = b0 + b1 s``, where
    ``v0 = 4 pi e_c / 3``, ``a1 = 2 / D0`` with ``D0 = v0 + 4 pi p_c``,
    ``v1 = -4 pi (de/dh)_c / 5``,
    ``a2 = [-2 v0 a1 - (v1 - 4 pi (e_c + p_c)) / D0] / D0``,
    ``y2 = -(4 pi / 7) [e_c / 3 + 11 p_c + (de/dh)_c]``,
    ``eta2 = 16 pi (e_c + p_c) / 5`` (derived by substituting the series into
    the equations of this module; the leading terms agree with Lindblom 1992).
    """
    p, e, rho, dedh = lanes.eval(h_c, h_c - 0.5 * s0)
    w = e + p
    v0 = _FOUR_PI * e / 3.0
    D0 = v0 + _FOUR_PI * p
    a1 = 2.0 / D0
    v1 = -_FOUR_PI * dedh / 5.0
    a2 = (-2.0 * v0 * a1 - (v1 - _FOUR_PI * w) / D0) / D0
    u = s0 * (a1 + a2 * s0)
    v = v0 + v1 * s0
    y = 2.0 - _FOUR_PI / 7.0 * (e / 3.0 + 11.0 * p + dedh) * u
    eta = 16.0 * np.pi * w / 5.0 * u
    rho1 = -rho * dedh / w  # d rho / ds
    b = _FOUR_PI / 3.0 * rho + _FOUR_PI * (rho1 + rho * v0 * a1) / 5.0 * s0
    return np.stack([u, v, y, eta, b])


def _rhs(h, Y, lanes, out, h_loc=None):
    """Right-hand side d(u, v, y, eta, b)/dh written into ``out`` (5, n)."""
    u, v, y, eta, b = Y
    p, e, rho, dedh = lanes.eval(h, h_loc)
    fp = _FOUR_PI * p
    fe = _FOUR_PI * e
    one_m = 1.0 - 2.0 * v * u
    D = v + fp
    elam = 1.0 / one_m
    uel = u * elam
    gp = one_m / (D * u)  # -(dr/dh)/r
    out[0] = -2.0 * one_m / D
    out[1] = 3.0 * v - fe
    q = uel * D
    out[2] = y * (y + elam + uel * (fp - fe)) + uel * (5.0 * fe + 9.0 * fp + _FOUR_PI * dedh) - 6.0 * elam - 4.0 * q * q
    out[3] = eta * (eta + 3.0) - uel * (fe + fp) * (eta + 4.0)
    out[4] = 3.0 * b - _FOUR_PI * rho * np.sqrt(elam)
    out[1:] *= gp


def _rhs_sigma(sigma, Y, lanes, out, sigma_loc):
    """d/d sigma = 2 sigma d/dh, with sigma = sqrt(h) kept away from 0."""
    sigma = np.maximum(sigma, _SIGMA_TINY)
    _rhs(sigma * sigma, Y, lanes, out, sigma_loc * sigma_loc)
    out *= 2.0 * sigma


_SIGMA_TINY = 1e-15


class _Jumps:
    """Jumps of the energy density met by the stars of one call.

    ``h_c`` and ``h_start`` are the centre and first node of each star: a
    star whose centre lies less than ``centre_offset`` above a jump starts at
    the jump (less than 1e-8 above it: its dense core is below every
    tolerance, and the star is solved as if its centre were at the jump).
    """

    # Relative distance below which a centre counts as sitting on the jump.
    _ON_JUMP = 1e-8

    def __init__(self, lanes, jumps, h_c, settings):
        jumps = np.where(np.isfinite(jumps) & (jumps > 0), jumps, np.inf)
        self.h = jumps
        hj = np.where(np.isfinite(jumps), jumps, 1.0)
        n_lanes, n_j = jumps.shape
        self.delta_e = np.zeros((n_lanes, n_j))
        self.p = np.zeros((n_lanes, n_j))
        for j in range(n_j):  # a handful of transitions, not stars
            p_in, e_in = lanes.eval(hj[:, j], hj[:, j] * (1.0 + 1e-9))[:2]
            e_out = lanes.eval(hj[:, j], hj[:, j] * (1.0 - 1e-9))[1]
            self.delta_e[:, j] = np.where(np.isfinite(jumps[:, j]), e_in - e_out, 0.0)
            self.p[:, j] = p_in
        h_start = h_c * (1.0 - settings.centre_offset)
        inside = (jumps >= h_start[:, None]) & (jumps < h_c[:, None])
        top = np.max(np.where(inside, jumps, -np.inf), axis=1)
        on_jump = np.isfinite(top) & (h_c - top < self._ON_JUMP * h_c)
        self.h_c = np.where(on_jump, top, h_c)
        self.h_start = np.where(np.isfinite(top) & ~on_jump, top, self.h_c * (1.0 - settings.centre_offset))

    def apply(self, h_node, Y):
        """Apply ``y -= 4 pi Delta e / (v + 4 pi p)`` where the node ``h_node`` is a jump."""
        at = self.h == h_node[:, None]
        if at.any():
            de = np.sum(np.where(at, self.delta_e, 0.0), axis=1)
            p = np.sum(np.where(at, self.p, 0.0), axis=1)
            Y[2] -= _FOUR_PI * de / (Y[1] + _FOUR_PI * p)


def integrate_stars(batch, eos_index, h_c, settings: StepSettings = StepSettings(), record: bool = False):
    """Integrate one star per lane and return surface values.

    Parameters
    ----------
    batch : EOSBatch
        The EOS (one or many).
    eos_index : ndarray of int, shape (n,)
        EOS of each star (index into ``batch``).
    h_c : ndarray, shape (n,)
        Central pseudo-enthalpies (> 0, below the EOS's ``h_max``).
    settings : StepSettings
        Step placement.
    record : bool
        Keep the state at every node (for interior profiles).
    """
    eos_index = np.asarray(eos_index, dtype=np.intp)
    h_c = np.asarray(h_c, float)
    lanes = batch.lanes(eos_index)
    kinks = batch.kinks[eos_index]
    n_kinks = int((np.isfinite(kinks) & (kinks > 0)).sum(axis=1).max(initial=0))
    n_steps = settings.n_steps + settings.steps_per_kink * n_kinks
    jumps = batch.jumps[eos_index]
    jump = _Jumps(lanes, jumps, h_c, settings) if np.isfinite(jumps).any() else None
    h_c_series = h_c if jump is None else jump.h_c
    H = node_grid(h_c_series, kinks, settings, batch, eos_index, n_steps, None if jump is None else jump.h_start)
    Y = _centre_series(h_c_series, h_c_series - H[0], lanes)
    if jump is not None:
        jump.apply(H[0], Y)
    nfev = 1
    n_lanes = h_c.size
    n_stages = len(_STAGE_ROWS)
    K = np.empty((n_stages, 5, n_lanes))
    K_flat = K.reshape(n_stages, 5 * n_lanes)
    record_states = np.empty((n_steps + 1, 5, n_lanes)) if record else None
    if record:
        record_states[0] = Y
    # Integrate in sigma = sqrt(h): near the surface the EOS behaves like a
    # power of h (rho ~ h^(1/(Gamma-1)); de/dh ~ h^(-1/2) for Gamma = 3), which
    # is smoother, or no longer singular, in sqrt(h).
    S = np.sqrt(H)
    dS = np.diff(S, axis=0)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        for i in range(n_steps):
            s0 = S[i]
            ds = dS[i]
            _rhs_sigma(s0, Y, lanes, K[0], s0 + _STAGE_ROWS[0][2] * ds)
            for jstage in range(1, n_stages):
                arow, cj, cloc = _STAGE_ROWS[jstage]
                Ys = Y + np.dot(arow, K_flat[:jstage]).reshape(5, n_lanes) * ds
                _rhs_sigma(s0 + cj * ds, Ys, lanes, K[jstage], s0 + cloc * ds)
            Y = Y + np.dot(_B, K_flat).reshape(5, n_lanes) * ds
            nfev += n_stages
            if jump is not None:
                jump.apply(H[i + 1], Y)
            if record:
                record_states[i + 1] = Y
    # a star whose integration failed (an EOS too soft or too stiff for its steps) has non-finite values:
    # it gives NaN, which the sequence counts as a failure, without floating-point warnings
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        u, v, y, eta, b = Y
        R = np.sqrt(u)
        M = v * u * R
        C = v * u
        e_s = batch.e_surface[eos_index]
        y_R = y - _FOUR_PI * e_s / v  # density jump at the surface: y -> y - 4 pi R^3 e_s / M
        k2 = love_k2(C, y_R)
        return SurfaceValues(
            radius=R,
            mass=M,
            baryon_mass=b * u * R,
            compactness=C,
            k2=k2,
            tidal_deformability=tidal_deformability(C, k2),
            moment_of_inertia=u * R * eta / (6.0 + 2.0 * eta),
            y_surface=y_R,
            nfev=nfev,
            nodes=H if record else None,
            states=record_states,
        )
