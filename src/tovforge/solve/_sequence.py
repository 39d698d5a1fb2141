"""Star sequences: the stable branch, the maximum mass and exact mass queries.

Algorithm (vectorised over all stars of all EOS in each pass)

1. *Scan*: a coarse sequence, log-spaced in the central pseudo-enthalpy.  The
   first maximum of ``M(h_c)`` after the last minimum is the end of the stable
   branch (turning-point criterion); a later, higher maximum is recorded as a
   twin branch.
2. *Branch and cluster*: ``n_stars`` stars spread uniformly in
   ``u = sqrt(1 - M / M_max)`` (a coordinate in which the sequence is smooth
   through the maximum) from below 0.5 Msun to just under the maximum, and a
   cluster of Chebyshev-Lobatto points in ``ln h_c`` around it.  The
   interpolating polynomial through the cluster gives ``M_max`` and ``h_c`` at
   the maximum.  If an EOS kink lies inside the cluster (``M(h_c)`` is then
   only twice differentiable there) or the maximum is near the cluster's
   edge, a narrower or shifted cluster is solved again.
3. *Queries*: the maximum-mass star is solved exactly; a star of requested
   mass is found by a bracketed, safeguarded secant search on
   ``g(ln h_c) = u(M(h_c)) - u_target`` started from a cubic through four
   branch stars (the Illinois-type regula falsi of Dowell & Jarratt 1971,
   BIT 11, 168, as a safeguard), vectorised over all queries, until the mass
   agrees to ``mass_rtol``.  In ``u`` the branch stays smooth through the
   maximum, where ``M`` itself is flat.  A star is never relabelled: if the
   search cannot reach the tolerance the result is NaN.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
from numpy.polynomial import chebyshev as _cheb

from ..units import (
    DENSITY_CGS_TO_GEOM,
    MOMENT_OF_INERTIA_KM3_TO_1E45_G_CM2,
    MSUN_KM,
    PRESSURE_CGS_TO_GEOM,
)
from ._result import STATUS_MESSAGES, MaximumMass, Stars, StarSequence
from ._structure import StepSettings, integrate_stars

__all__ = [
    "SequenceSettings",
    "SequenceBatch",
    "solve_sequences",
    "solve_sequence",
    "solve_at_masses",
    "max_sound_speed_sq",
    "solve_stars",
    "stars_at_masses",
]


@dataclass(frozen=True)
class SequenceSettings:
    """Numerical settings of sequence solves.

    Attributes
    ----------
    n_scan : int
        Stars in the coarse scan.
    h_low, h_high : float
        Range of central pseudo-enthalpy scanned (``h_high`` is clipped to the
        EOS's largest enthalpy).
    low_mass_msun : float
        The branch starts at this mass (or at ``M_max / 2`` if smaller), or at
        the lightest scanned star if that is heavier.
    n_cluster : int
        Points of the cluster around the maximum.
    scan_steps, steps : StepSettings
        Integrator steps of the scan and of every other pass.
    max_refinements : int
        Passes allowed to re-centre or narrow the cluster.
    mass_rtol : float
        Stars at requested masses have their mass to this relative tolerance.
    """

    n_scan: int = 32
    h_low: float = 0.035
    h_high: float = 3.0
    low_mass_msun: float = 0.3
    n_cluster: int = 7
    scan_steps: StepSettings = field(default_factory=lambda: StepSettings(n_steps=10, steps_per_kink=2))
    steps: StepSettings = field(default_factory=StepSettings)
    max_refinements: int = 3
    mass_rtol: float = 1e-11


_Z_CLUSTER_CACHE: dict[int, tuple[np.ndarray, np.ndarray]] = {}
#: Branch stars solved at least, when masses are requested (they bracket the searches).
_MIN_BRANCH_FOR_QUERIES = 16


def _cluster_nodes(n):
    """Chebyshev-Lobatto nodes in [-1, 1] and the inverse Chebyshev-Vandermonde matrix."""
    if n not in _Z_CLUSTER_CACHE:
        z = -np.cos(np.pi * np.arange(n) / (n - 1))
        _Z_CLUSTER_CACHE[n] = (z, np.linalg.inv(_cheb.chebvander(z, n - 1)))
    return _Z_CLUSTER_CACHE[n]


@dataclass(frozen=True)
class SequenceBatch:
    """Sequences of many EOS (arrays with one row per EOS).

    Attributes
    ----------
    status : ndarray of int, shape (n_eos,)
        0 on success; see :data:`tovforge.solve.STATUS_MESSAGES`.
    branch : Stars
        Fields of shape (n_eos, n_stars), NaN where a row has fewer stars.
    mass_max : Stars
        Fields of shape (n_eos,): the maximum-mass star.
    max_sound_speed_sq : ndarray, shape (n_eos,)
    twin_mass_max_msun : ndarray, shape (n_eos,)
    at_mass : Stars or None
        Fields of shape (n_eos, n_masses), NaN above M_max.
    nfev : int
    at_u : Stars or None
        Fields of shape (n_eos, n_u): exact stars at the ``u_nodes``.
    """

    status: np.ndarray
    branch: Stars
    mass_max: Stars
    max_sound_speed_sq: np.ndarray
    twin_mass_max_msun: np.ndarray
    at_mass: Stars | None
    nfev: int
    at_u: Stars | None = None


# ---------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------


def _stars(batch, eos_index, h_c, sv, shape=None) -> Stars:
    """Convert surface values and central EOS values to a :class:`Stars`."""
    eos_index = np.asarray(eos_index, dtype=np.intp)
    h_c = np.asarray(h_c, float)
    if h_c.size:
        p, e, rho, dedh = batch.lanes(eos_index).eval(h_c, h_c * (1.0 - 1e-9))
        with np.errstate(divide="ignore", invalid="ignore"):
            cs2 = np.where(dedh > 0, (e + p) / dedh, np.inf)
    else:
        p = e = rho = cs2 = np.empty(0)
    fields = dict(
        mass_msun=sv["mass"] / MSUN_KM,
        radius_km=sv["radius"],
        compactness=sv["compactness"],
        k2=sv["k2"],
        tidal_deformability=sv["tidal_deformability"],
        moment_of_inertia_1e45_g_cm2=sv["moment_of_inertia"] * MOMENT_OF_INERTIA_KM3_TO_1E45_G_CM2,
        baryon_mass_msun=sv["baryon_mass"] / MSUN_KM,
        central_pseudo_enthalpy=h_c,
        central_pressure_dyn_cm2=p / PRESSURE_CGS_TO_GEOM,
        central_energy_density_g_cm3=e / DENSITY_CGS_TO_GEOM,
        central_rest_mass_density_g_cm3=rho / DENSITY_CGS_TO_GEOM,
        central_sound_speed_sq=cs2,
    )
    if shape is not None:
        fields = {k: np.asarray(v, float).reshape(shape) for k, v in fields.items()}
    return Stars(**fields)


_SV_KEYS = ("radius", "mass", "baryon_mass", "compactness", "k2", "tidal_deformability", "moment_of_inertia")


def _solve(batch, eos_index, h_c, steps):
    """Integrate stars and return a dict of surface arrays (NaN for failures)."""
    eos_index = np.asarray(eos_index, dtype=np.intp)
    h_c = np.asarray(h_c, float)
    if h_c.size == 0:
        return {k: np.empty(0) for k in _SV_KEYS}, 0
    sv = integrate_stars(batch, eos_index, h_c, steps)
    out = {k: np.asarray(getattr(sv, k), float) for k in _SV_KEYS}
    bad = ~(np.isfinite(out["mass"]) & np.isfinite(out["radius"]) & (out["mass"] > 0) & (out["compactness"] < 0.5))
    if bad.any():
        for k in out:
            out[k] = np.where(bad, np.nan, out[k])
    return out, sv.nfev


def max_sound_speed_sq(batch, eos_index, h_upper, n_samples: int = 256):
    """Largest ``c_s^2`` of each EOS on ``[0, h_upper]``.

    The EOS is sampled at ``n_samples`` points (denser near the top) plus the
    one-sided values at every kink below ``h_upper`` and at ``h_upper``.
    """
    eos_index = np.asarray(eos_index, dtype=np.intp)
    h_upper = np.asarray(h_upper, float)
    n = eos_index.size
    frac = 1.0 - np.geomspace(1.0, 1e-4, n_samples)  # from 0 to ~1
    frac = np.append(frac, 1.0)
    hs = h_upper[:, None] * frac[None, :]
    kinks = batch.kinks[eos_index]
    kink_below = np.where(kinks < h_upper[:, None], kinks, h_upper[:, None])
    hs = np.concatenate([hs, kink_below], axis=1)
    loc = hs * (1.0 - 1e-9)
    m = hs.shape[1]
    lanes = batch.lanes(np.repeat(eos_index, m))
    p, e, rho, dedh = lanes.eval(hs.ravel(), loc.ravel())
    with np.errstate(divide="ignore", invalid="ignore"):
        cs2 = np.where(dedh > 0, (e + p) / dedh, np.inf).reshape(n, m)
    return np.nanmax(cs2, axis=1)


def _first_maximum(M):
    """Index of the first maximum after the last minimum before it (-1 if none)."""
    n_eos, n = M.shape
    Mf = np.where(np.isfinite(M), M, -np.inf)
    rising = Mf[:, 1:] > Mf[:, :-1]  # rising[k]: M[k+1] > M[k]
    # peak at i (1 <= i <= n-2): rising[i-1] and not rising[i]
    peak = np.zeros_like(Mf, dtype=bool)
    peak[:, 1:-1] = rising[:, :-1] & ~rising[:, 1:] & np.isfinite(M[:, 1:-1]) & np.isfinite(M[:, 2:])
    has = peak.any(axis=1)
    ipk = np.where(has, np.argmax(peak, axis=1), -1)
    # branch start: last index j <= ipk with M[j] <= M[j-1] ... i.e. the minimum before the peak
    start = np.zeros(n_eos, dtype=np.intp)
    for r in np.flatnonzero(has):  # bookkeeping per EOS, not per star
        fall = np.flatnonzero(~rising[r, : ipk[r]])
        start[r] = fall[-1] + 1 if fall.size else 0
        first_ok = np.flatnonzero(np.isfinite(M[r, : ipk[r] + 1]))
        if first_ok.size:
            start[r] = max(start[r], first_ok[0])
    return ipk, start


def _twin_maximum(M, R, ipk):
    """Maximum mass of a second stable branch after the first maximum (NaN if none).

    Beyond the first maximum, M(h_c) can rise again for two reasons: a second
    stable branch (twin stars) or the unstable spiral towards infinite
    density.  At an extremum of M a radial mode changes stability; it regains
    stability where the mass-radius curve turns clockwise (Bardeen, Thorne &
    Meltzer 1966, ApJ 145, 505), i.e. at a minimum of M passed with the
    radius still decreasing.  Only then is the rising part a stable branch.
    """
    out = np.full(M.shape[0], np.nan)
    for r in np.flatnonzero(ipk >= 0):  # bookkeeping per EOS
        m, rad = M[r], R[r]
        n = m.size
        for j in range(ipk[r] + 1, n - 1):
            if not (np.isfinite(m[j - 1]) and np.isfinite(m[j]) and np.isfinite(m[j + 1])):
                break
            if m[j] <= m[j - 1] and m[j] < m[j + 1]:  # local minimum
                if rad[j + 1] < rad[j - 1]:  # clockwise turn: stability regained
                    k = j + 1
                    while k + 1 < n and np.isfinite(m[k + 1]) and m[k + 1] > m[k]:
                        k += 1
                    out[r] = m[k]
                break
    return out


def _parabola_peak(x, y):
    """Vertex of the parabola through three points per row (x, y shape (n, 3))."""
    x0, x1, x2 = x.T
    y0, y1, y2 = y.T
    d0 = (y1 - y0) / (x1 - x0)
    d1 = (y2 - y1) / (x2 - x1)
    a = (d1 - d0) / (x2 - x0)
    with np.errstate(divide="ignore", invalid="ignore"):
        xv = 0.5 * (x0 + x1) - d0 / (2.0 * a)
    xv = np.where(np.isfinite(xv) & (a < 0), np.clip(xv, x0, x2), x1)
    yv = y0 + d0 * (xv - x0) + a * (xv - x0) * (xv - x1)
    return xv, yv


# ---------------------------------------------------------------------------
# the batch solver
# ---------------------------------------------------------------------------


def solve_sequences(batch, n_stars: int = 100, masses=None, settings: SequenceSettings | None = None,
                    exact_maximum: bool | None = None, u_nodes=None) -> SequenceBatch:
    """Stable branches, maximum masses and mass queries of many EOS at once.

    Parameters
    ----------
    batch : EOSBatch
        The EOS (see :meth:`tovforge.eos.EOSFamily.build`).
    n_stars : int
        Stars on each stable branch (0 for none; with ``masses`` or
        ``u_nodes`` at least 16 are solved, because they bracket the search for
        each requested star).
    masses : array_like, shape (n_masses,) or (n_eos, n_masses), optional
        Gravitational masses in Msun at which to solve exactly.
    settings : SequenceSettings, optional
    u_nodes : array_like, shape (n_u,), optional
        Values of the sequence coordinate ``u = sqrt(1 - M / M_max)`` in
        [0, 1) at which to solve exactly (masses ``M_max (1 - u^2)``); the
        results are in ``SequenceBatch.at_u``.
    exact_maximum : bool, optional
        Solve the maximum-mass star exactly (otherwise its radius, Love number
        and moment of inertia are interpolated through the cluster around the
        maximum, which agrees to about 1e-9).  Default: only when ``masses``
        are requested (they share that pass).

    Returns
    -------
    SequenceBatch
    """
    settings = settings or SequenceSettings()
    n_eos = batch.n_eos
    if masses is not None or u_nodes is not None:
        # the exact search for a star of given mass starts from a bracket of branch stars
        n_stars = max(n_stars, _MIN_BRANCH_FOR_QUERIES)
    nfev = 0
    status = np.zeros(n_eos, dtype=np.intp)

    # -- 1. scan ---------------------------------------------------------------
    h_hi = np.minimum(settings.h_high, batch.h_max * 0.999)
    short = h_hi <= settings.h_low * 1.5
    h_hi = np.where(short, settings.h_low * 1.5, h_hi)
    frac = np.linspace(0.0, 1.0, settings.n_scan)
    ln_scan = np.log(settings.h_low) + frac[None, :] * (np.log(h_hi) - np.log(settings.h_low))[:, None]
    idx = np.repeat(np.arange(n_eos), settings.n_scan)
    sv, nf = _solve(batch, idx, np.exp(ln_scan).ravel(), settings.scan_steps)
    nfev += nf
    M_scan = sv["mass"].reshape(n_eos, -1)
    ipk, start = _first_maximum(M_scan)
    twin = _twin_maximum(M_scan, sv["radius"].reshape(n_eos, -1), ipk) / MSUN_KM
    n_finite = np.isfinite(M_scan).sum(axis=1)
    status[ipk < 0] = np.where(batch.h_max[ipk < 0] < settings.h_high, 2, 1)
    status[n_finite < settings.n_scan // 2] = 3
    ok = status == 0

    # -- 2. branch and cluster -------------------------------------------------
    rows = np.arange(n_eos)
    i1 = np.clip(ipk, 1, settings.n_scan - 2)
    x3 = np.stack([ln_scan[rows, i1 - 1], ln_scan[rows, i1], ln_scan[rows, i1 + 1]], axis=1)
    y3 = np.stack([M_scan[rows, i1 - 1], M_scan[rows, i1], M_scan[rows, i1 + 1]], axis=1)
    c_est, m_est = _parabola_peak(x3, np.nan_to_num(y3))
    dln = (np.log(h_hi) - np.log(settings.h_low)) / (settings.n_scan - 1)
    w = 0.6 * dln
    z_cl, vinv = _cluster_nodes(settings.n_cluster)

    # branch nodes, uniform in u = sqrt(1 - M/M_max)
    ln_branch = np.full((n_eos, max(n_stars, 0)), np.nan)
    if n_stars > 0:
        for r in np.flatnonzero(ok):  # bookkeeping per EOS, not per star
            seg = slice(start[r], ipk[r] + 1)
            Ms, ls = M_scan[r, seg], ln_scan[r, seg]
            good = np.isfinite(Ms)
            Ms, ls = Ms[good], ls[good]
            top = c_est[r] - w[r]
            m_lo = min(settings.low_mass_msun * MSUN_KM, 0.5 * m_est[r])
            u = np.sqrt(np.clip(1.0 - Ms / m_est[r], 0.0, None))
            u_top = float(np.interp(top, ls, u)) if top > ls[0] else u[0]
            u_lo = np.sqrt(max(0.0, 1.0 - m_lo / m_est[r]))
            u_lo = min(u_lo, u[0])
            if len(Ms) >= 3 and u_lo > u_top:
                ut = np.linspace(u_lo, u_top, n_stars + 1)[:-1]  # the cluster supplies u_top
                ln_branch[r] = np.interp(-ut, -u, ls)
            else:
                lo = ls[0] if len(ls) else np.log(settings.h_low)
                ln_branch[r] = np.linspace(lo, max(top, lo + 1e-3), n_stars)

    # cluster (and refinements)
    centre = c_est.copy()
    width = w.copy()
    zstar = np.zeros(n_eos)
    coef = np.zeros((settings.n_cluster, n_eos))
    cluster_vals = {k: np.full((n_eos, settings.n_cluster), np.nan) for k in (*_SV_KEYS, "ln_h")}
    todo = ok.copy()
    branch_sv = None
    kinks_ln = np.log(np.where(np.isfinite(batch.kinks) & (batch.kinks > 0), batch.kinks, 1e300))
    for attempt in range(settings.max_refinements + 1):
        rr = np.flatnonzero(todo)
        if rr.size == 0:
            break
        ln_cl = centre[rr, None] + width[rr, None] * z_cl[None, :]
        h_list = [np.exp(ln_cl).ravel()]
        i_list = [np.repeat(rr, settings.n_cluster)]
        if attempt == 0 and n_stars > 0:
            rb = np.flatnonzero(ok)
            h_list.append(np.exp(ln_branch[rb]).ravel())
            i_list.append(np.repeat(rb, n_stars))
        h_all = np.concatenate(h_list)
        i_all = np.concatenate(i_list)
        svc, nf = _solve(batch, i_all, h_all, settings.steps)
        nfev += nf
        ncl = rr.size * settings.n_cluster
        if attempt == 0 and n_stars > 0:
            branch_sv = ({k: v[ncl:].reshape(rb.size, n_stars) for k, v in svc.items()}, rb)
        Mc = svc["mass"][:ncl].reshape(rr.size, settings.n_cluster)
        for k in _SV_KEYS:
            cluster_vals[k][rr] = svc[k][:ncl].reshape(rr.size, settings.n_cluster)
        cluster_vals["ln_h"][rr] = ln_cl
        cf = vinv @ Mc.T  # Chebyshev coefficients, (n_cluster, n_rows)
        coef[:, rr] = cf
        # maximise the polynomial: Newton on P'(z) = 0 from the best node
        z = z_cl[np.argmax(np.nan_to_num(Mc, nan=-np.inf), axis=1)]
        d1 = _cheb.chebder(cf)
        d2 = _cheb.chebder(cf, 2)
        for _ in range(30):
            g1 = _cheb.chebval(z, d1, tensor=False)
            g2 = _cheb.chebval(z, d2, tensor=False)
            with np.errstate(divide="ignore", invalid="ignore"):
                step = np.where(g2 < 0, g1 / g2, -0.25 * np.sign(g1))
            z = np.clip(z - step, -1.5, 1.5)
            if np.all(np.abs(np.nan_to_num(step)) < 1e-13):
                break
        zstar[rr] = z
        bad = ~np.isfinite(Mc).all(axis=1)
        status[rr[bad]] = 3
        ok[rr[bad]] = False
        # refine where the maximum is near the edge or a kink lies in the cluster
        lo_c = centre[rr] - width[rr]
        hi_c = centre[rr] + width[rr]
        kink_in = ((kinks_ln[rr] > lo_c[:, None]) & (kinks_ln[rr] < hi_c[:, None])).any(axis=1)
        edge = np.abs(z) > 0.9
        new_centre = centre[rr] + width[rr] * np.clip(z, -1.5, 1.5)
        again = (~bad) & (edge | (kink_in & (width[rr] > w[rr] / 20.0)))
        todo[:] = False
        todo[rr[again]] = True
        centre[rr[again]] = new_centre[again]
        width[rr[again & kink_in]] /= 8.0
    ln_star = centre + width * zstar
    m_max = np.where(ok, _cheb.chebval(zstar, coef, tensor=False), np.nan)

    ln_star = np.where(ok, ln_star, np.nan)
    h_star = np.exp(ln_star)

    # Known exact stars below the maximum: branch stars and cluster stars.
    # Stars strictly below the maximum (those within 1e-6 in ln h_c of it are the maximum itself,
    # which is appended below).
    below_top = ln_star[:, None] - 1e-6
    parts_ln = [np.where(cluster_vals["ln_h"] < below_top, cluster_vals["ln_h"], np.nan)]
    parts = {k: [cluster_vals[k]] for k in _SV_KEYS}
    if branch_sv is not None:
        bsv, rb = branch_sv
        lb = np.full((n_eos, n_stars), np.nan)
        lb[rb] = ln_branch[rb]
        parts_ln.append(np.where(lb < below_top, lb, np.nan))
        for k in _SV_KEYS:
            full = np.full((n_eos, n_stars), np.nan)
            full[rb] = bsv[k]
            parts[k].append(full)
    known_ln = np.concatenate(parts_ln, axis=1)
    known = {k: np.concatenate(v, axis=1) for k, v in parts.items()}
    drop = ~np.isfinite(known_ln) | ~np.isfinite(known["mass"])
    known_ln = np.where(drop, np.inf, known_ln)
    order = np.argsort(known_ln, axis=1)
    known_ln = np.take_along_axis(known_ln, order, 1)
    known = {k: np.take_along_axis(np.where(drop, np.nan, v), order, 1) for k, v in known.items()}
    n_known = np.isfinite(known_ln).sum(axis=1)
    known_ln = np.where(np.isfinite(known_ln), known_ln, np.nan)

    # -- 3. maximum-mass star -------------------------------------------------------
    want_queries = masses is not None or u_nodes is not None
    rows_ok = np.flatnonzero(ok)
    if exact_maximum is None:
        exact_maximum = want_queries
    if exact_maximum or want_queries:
        svq, nf = _solve(batch, rows_ok, h_star[rows_ok], settings.steps)
        nfev += nf
        star_at_max = {k: np.full(n_eos, np.nan) for k in _SV_KEYS}
        for k in _SV_KEYS:
            star_at_max[k][rows_ok] = svq[k]
    else:
        # Maximum-mass star interpolated through the cluster polynomials.
        _, vinv = _cluster_nodes(settings.n_cluster)
        star_at_max = {}
        for k in _SV_KEYS:
            cf = vinv @ np.nan_to_num(cluster_vals[k]).T
            star_at_max[k] = np.where(ok, _cheb.chebval(zstar, cf, tensor=False), np.nan)
    star_at_max["mass"] = np.where(ok, m_max, np.nan)

    # -- assemble ------------------------------------------------------------------
    safe_h = np.where(ok, h_star, settings.h_low)
    mass_max = _mask_stars(_stars(batch, np.arange(n_eos), safe_h, star_at_max), ok)
    cs2max = np.full(n_eos, np.nan)
    if rows_ok.size:
        cs2max[rows_ok] = max_sound_speed_sq(batch, rows_ok, h_star[rows_ok])

    # branch = known stars plus the maximum-mass star, in increasing h_c
    width_b = int(n_known.max(initial=0)) + 1
    b_ln = np.full((n_eos, width_b), np.nan)
    b_val = {k: np.full((n_eos, width_b), np.nan) for k in _SV_KEYS}
    b_ln[:, : width_b - 1] = known_ln[:, : width_b - 1]
    for k in _SV_KEYS:
        b_val[k][:, : width_b - 1] = known[k][:, : width_b - 1]
    b_ln[rows_ok, n_known[rows_ok]] = ln_star[rows_ok]
    for k in _SV_KEYS:
        b_val[k][rows_ok, n_known[rows_ok]] = star_at_max[k][rows_ok]
    has = np.isfinite(b_ln)
    branch = _mask_stars(
        _stars(batch, np.repeat(np.arange(n_eos), width_b), np.exp(np.where(has, b_ln, np.log(settings.h_low))).ravel(),
               {k: v.ravel() for k, v in b_val.items()}, shape=(n_eos, width_b)),
        has,
    )
    seq = SequenceBatch(status, branch, mass_max, cs2max, np.where(ok, twin, np.nan), None, nfev, None)
    if not want_queries:
        return seq
    parts = []
    n_fixed = 0
    if masses is not None:
        qm = np.asarray(masses, float)
        qm = np.broadcast_to(qm if qm.ndim == 2 else qm.reshape(1, -1), (n_eos, qm.shape[-1] if qm.ndim else 1))
        parts.append(qm)
        n_fixed = qm.shape[1]
    if u_nodes is not None:
        u_arr = np.asarray(u_nodes, float).ravel()
        parts.append(mass_max.mass_msun[:, None] * (1.0 - u_arr[None, :] ** 2))
    targets = np.concatenate(parts, axis=1)
    vals, below, not_found, nf = _stars_at_masses(batch, seq, targets, settings.steps, settings.mass_rtol)
    found = np.isfinite(vals["mass_msun"])
    sv = {"mass": vals["mass_msun"] * MSUN_KM, "radius": vals["radius_km"], "compactness":
          vals["mass_msun"] * MSUN_KM / vals["radius_km"], "k2": vals["k2"],
          "tidal_deformability": vals["tidal_deformability"],
          "moment_of_inertia": vals["moment_of_inertia_1e45_g_cm2"] / MOMENT_OF_INERTIA_KM3_TO_1E45_G_CM2,
          "baryon_mass": vals["baryon_mass_msun"] * MSUN_KM}
    n_q = targets.shape[1]
    hq = np.where(found, vals["central_pseudo_enthalpy"], settings.h_low)
    stars = _mask_stars(_stars(batch, np.repeat(np.arange(n_eos), n_q), hq.ravel(),
                               {k: v.ravel() for k, v in sv.items()}, shape=(n_eos, n_q)), found)

    def cols(a, b):
        return Stars(**{k: v[:, a:b] for k, v in stars.as_dict().items()})

    return SequenceBatch(status, branch, mass_max, cs2max, seq.twin_mass_max_msun,
                         cols(0, n_fixed) if n_fixed else None, nfev + nf,
                         cols(n_fixed, n_q) if u_nodes is not None else None)


# ---------------------------------------------------------------------------
# exact stars at given masses (a bracketed secant search in u)
# ---------------------------------------------------------------------------


def _field_values(sv) -> dict:
    """Surface values (geometrised) to the stored units."""
    return {
        "mass_msun": sv.mass / MSUN_KM,
        "radius_km": sv.radius,
        "tidal_deformability": sv.tidal_deformability,
        "k2": sv.k2,
        "moment_of_inertia_1e45_g_cm2": sv.moment_of_inertia * MOMENT_OF_INERTIA_KM3_TO_1E45_G_CM2,
        "baryon_mass_msun": sv.baryon_mass / MSUN_KM,
    }


_STAR_FIELDS = ("mass_msun", "radius_km", "tidal_deformability", "k2", "moment_of_inertia_1e45_g_cm2",
                "baryon_mass_msun", "central_pseudo_enthalpy")


def stars_at_masses(batch, seq, targets, steps, rtol: float = 1e-11,
                    max_passes: int = 60) -> tuple[dict, np.ndarray, np.ndarray]:
    values, below, not_found, _ = _stars_at_masses(batch, seq, targets, steps, rtol, max_passes)
    return values, below, not_found


def _stars_at_masses(batch, seq, targets, steps, rtol: float = 1e-11, max_passes: int = 60):
    """Exact stars of the stable branch at given masses (see the module notes).

    Parameters
    ----------
    batch : EOSBatch
    seq : SequenceBatch
        From ``solve_sequences(batch, ..., exact_maximum=True)``.
    targets : ndarray, shape (n_eos, n_q)
        Gravitational masses in Msun.
    steps : StepSettings
    rtol : float
        Relative tolerance on the mass.
    max_passes : int
        Cap on the passes of the root search.

    Returns
    -------
    values : dict of str to ndarray, shape (n_eos, n_q)
        ``mass_msun``, ``radius_km``, ``tidal_deformability``, ``k2``,
        ``moment_of_inertia_1e45_g_cm2``, ``baryon_mass_msun`` and
        ``central_pseudo_enthalpy``.  NaN above M_max, below the lightest
        branch star, and for rows that failed.
    below_branch : ndarray of bool, shape (n_eos, n_q)
        Targets at or below M_max that lie below the lightest branch star.
    not_found : ndarray of bool, shape (n_eos, n_q)
        Targets on the branch where the search ended farther than
        ``max(rtol, 1e-8)`` from the target mass.
    """
    targets = np.asarray(targets, float)
    n_eos, n_q = targets.shape
    out = {k: np.full((n_eos, n_q), np.nan) for k in _STAR_FIELDS}
    m_max = np.asarray(seq.mass_max.mass_msun, float)
    ok = (np.asarray(seq.status) == 0) & np.isfinite(m_max)
    x_b = np.log(seq.branch.central_pseudo_enthalpy)  # (n_eos, w), a finite prefix then NaN
    with np.errstate(invalid="ignore", divide="ignore"):
        u_b = np.sqrt(np.clip(1.0 - seq.branch.mass_msun / m_max[:, None], 0.0, None))
        u_t = np.sqrt(1.0 - targets / m_max[:, None])  # NaN above M_max
    u_b = np.where(np.isfinite(x_b), u_b, np.nan)
    top = ok[:, None] & np.isfinite(u_t)
    below = top & (u_t > np.nanmax(np.where(np.isfinite(u_b), u_b, -np.inf), axis=1)[:, None])
    # u = 0 is the maximum-mass star itself (solved exactly by the sequence solver)
    at_max = top & ~below & (u_t == 0.0)
    mm = seq.mass_max
    for k in _STAR_FIELDS:
        src = m_max if k == "mass_msun" else getattr(mm, k)
        src = np.asarray(src, float).reshape(-1)
        out[k] = np.where(at_max, np.asarray(src, float)[:, None], out[k])
    todo = top & ~below & ~at_max
    ii, jj = np.nonzero(todo)
    not_found = np.zeros((n_eos, n_q), dtype=bool)
    nfev = 0
    if ii.size == 0:
        return out, below, not_found, nfev
    # bracket: the last branch star with u >= target and the next one (u < target)
    ub, xr = u_b[ii], x_b[ii]
    lane = np.arange(ii.size)
    ut, tgt = u_t[ii, jj], targets[ii, jj]
    ge = np.isfinite(ub) & (ub >= ut[:, None])
    k_lo = ub.shape[1] - 1 - np.argmax(ge[:, ::-1], axis=1)
    xa, xb = xr[lane, k_lo], xr[lane, k_lo + 1]
    # first guess and slope: cubic through four branch stars around the bracket, x as a function of u
    last = np.isfinite(ub).sum(axis=1) - 1
    j0 = np.clip(k_lo - 1, 0, np.maximum(last - 3, 0))
    idx = np.minimum(j0[:, None] + np.arange(4), last[:, None])
    x, dxdu = _cubic_at(ub[lane[:, None], idx], xr[lane[:, None], idx], ut)
    slope = 1.0 / dxdu  # dg/dx for the first Newton step
    x_prev, g_prev = np.full(ii.size, np.nan), np.full(ii.size, np.nan)
    live = np.ones(ii.size, dtype=bool)
    best = {k: np.full(ii.size, np.nan) for k in _STAR_FIELDS}
    for _ in range(max_passes):
        act = np.flatnonzero(live)
        if act.size == 0:
            break
        # safeguard: a proposal outside the bracket is replaced by bisection
        inside = np.isfinite(x[act]) & (x[act] > xa[act]) & (x[act] < xb[act])
        x[act] = np.where(inside, x[act], 0.5 * (xa[act] + xb[act]))
        sv = integrate_stars(batch, ii[act], np.exp(x[act]), steps)
        nfev += sv.nfev
        vals = _field_values(sv)
        vals["central_pseudo_enthalpy"] = np.exp(x[act])
        for k in _STAR_FIELDS:
            best[k][act] = vals[k]
        with np.errstate(invalid="ignore"):
            g = np.sqrt(np.clip(1.0 - vals["mass_msun"] / m_max[ii[act]], 0.0, None)) - ut[act]
        done = np.abs(vals["mass_msun"] / tgt[act] - 1.0) <= rtol
        failed = ~np.isfinite(g)
        light = g > 0  # lighter than the target: x is the new lower end of the bracket
        xa[act[light]] = x[act][light]
        xb[act[~light & ~failed]] = x[act][~light & ~failed]
        # next proposal: secant through the last two stars (Newton with the cubic's slope after the first)
        with np.errstate(divide="ignore", invalid="ignore"):
            sec = (g - g_prev[act]) / (x[act] - x_prev[act])
            s_act = np.where(np.isfinite(sec) & (sec != 0), sec, slope[act])
            x_next = x[act] - g / s_act
        x_prev[act], g_prev[act] = x[act], g
        x[act] = x_next
        tight = (xb[act] - xa[act]) <= 4e-16 * np.maximum(np.abs(xa[act]), 1.0)
        live[act[done | failed | tight]] = False
    # The search stops short of rtol only if the bracket collapses (M(h_c) of the discrete solver jumps
    # there) or the passes run out; such a star is kept if within 1e-8, with its own mass stored.
    good = np.abs(best["mass_msun"] / tgt - 1.0) <= max(rtol, 1e-8)
    for k in _STAR_FIELDS:
        out[k][ii, jj] = np.where(good, best[k], np.nan)
    not_found[ii, jj] = ~good
    return out, below, not_found, nfev


def _cubic_at(u, x, ut):
    """Value and derivative at ``ut`` of the cubic through four points ``(u, x)`` per row."""
    val = np.zeros(ut.size)
    der = np.zeros(ut.size)
    with np.errstate(divide="ignore", invalid="ignore"):
        for a in range(4):
            num, dnum, den = np.ones(ut.size), np.zeros(ut.size), np.ones(ut.size)
            for b in range(4):
                if b != a:
                    f = ut - u[:, b]
                    dnum = dnum * f + num
                    num = num * f
                    den = den * (u[:, a] - u[:, b])
            val += x[:, a] * num / den
            der += x[:, a] * dnum / den
    return val, der


def _mask_stars(stars: Stars, keep) -> Stars:
    return Stars(**{k: np.where(keep, v, np.nan) for k, v in stars.as_dict().items()})


def _row(stars: Stars, r: int, keep_nan: bool = False) -> Stars:
    """Row ``r`` of a 2-D :class:`Stars`, without the NaN padding."""
    d = {k: np.asarray(v)[r] for k, v in stars.as_dict().items()}
    if not keep_nan:
        good = np.isfinite(d["mass_msun"])
        d = {k: v[good] for k, v in d.items()}
    return Stars(**d)


def solve_sequence(eos, n_stars: int = 100, masses=None, settings: SequenceSettings | None = None,
                   error_estimate: bool | None = None) -> StarSequence:
    """Solve the stable branch of one EOS.

    Parameters
    ----------
    eos : tovforge.eos.EOS
        The equation of state.
    n_stars : int
        Stars along the stable branch, spread uniformly in
        ``u = sqrt(1 - M / M_max)`` from below 0.5 Msun to the maximum (the
        branch returned also holds the few cluster stars below the maximum and
        the maximum-mass star itself).
    masses : array_like, optional
        Gravitational masses (Msun) at which to solve exactly.  Masses above
        the maximum give NaN and a warning.
    settings : SequenceSettings, optional
    error_estimate : bool, optional
        Estimate the integration error of every branch star by step doubling
        (``StarSequence.error_estimate``; a warning when it exceeds the stated
        tolerance).  Default: for tabulated EOS only.

    Returns
    -------
    StarSequence

    Examples
    --------
    >>> from tovforge import eos, solve
    >>> sly = eos.make("piecewise-polytrope", log_p1=34.384, gamma1=3.005, gamma2=2.988, gamma3=2.851)
    >>> seq = solve.solve_sequence(sly, masses=[1.4])
    >>> round(seq.mass_max.mass_msun, 2)
    2.05
    """
    from ._accuracy import checked_sequence

    settings = settings or SequenceSettings()
    res = solve_sequences(eos.batch, n_stars=n_stars, masses=masses, settings=settings)
    return checked_sequence(_sequence_from_batch(eos, res, 0, masses), settings.steps, error_estimate)


def _sequence_from_batch(eos, res: SequenceBatch, r: int, masses) -> StarSequence:
    status = int(res.status[r])
    mm = None
    if status == 0:
        mm = MaximumMass(_row(_expand(res.mass_max), r, keep_nan=True), float(res.max_sound_speed_sq[r]))
    at = None
    if res.at_mass is not None:
        at = _row(res.at_mass, r, keep_nan=True)
        if masses is not None and status == 0:
            above = np.asarray(masses, float).ravel() > mm.mass_msun
            if above.any():
                warnings.warn(
                    f"masses {', '.join(f'{m:g}' for m in np.asarray(masses, float).ravel()[above])} Msun exceed "
                    f"M_max = {mm.mass_msun:.4f} Msun of this EOS; their values are NaN.",
                    stacklevel=3,
                )
    return StarSequence(
        family=eos.family.name,
        parameters=dict(eos.parameters),
        status=status,
        message=STATUS_MESSAGES[status],
        branch=_row(res.branch, r),
        mass_max=mm,
        twin_mass_max_msun=float(res.twin_mass_max_msun[r]),
        at_mass=at,
        nfev=res.nfev,
        eos=eos,
    )


def _expand(stars: Stars) -> Stars:
    """Give 1-D fields a trailing axis so that rows are length-1 arrays."""
    return Stars(**{k: np.asarray(v)[:, None] for k, v in stars.as_dict().items()})


def solve_stars(eos, central_pseudo_enthalpy, steps: StepSettings | None = None) -> Stars:
    """Stars of one EOS at given central pseudo-enthalpies (any order, one call).

    Parameters
    ----------
    eos : tovforge.eos.EOS
    central_pseudo_enthalpy : array_like, shape (n,)
        ``h_c`` of each star, in (0, h_max of the EOS].
    steps : StepSettings, optional

    Returns
    -------
    Stars
        NaN rows where the integration failed.
    """
    h_c = np.atleast_1d(np.asarray(central_pseudo_enthalpy, float))
    if np.any(~np.isfinite(h_c)) or np.any(h_c <= 0) or np.any(h_c > eos.h_max):
        from ..errors import InputError

        raise InputError(f"central_pseudo_enthalpy must be in (0, {eos.h_max:g}] for this EOS.")
    idx = np.zeros(h_c.size, dtype=np.intp)
    sv, _ = _solve(eos.batch, idx, h_c, steps or StepSettings())
    return _stars(eos.batch, idx, h_c, sv)


def solve_at_masses(sequence: StarSequence, masses, settings: SequenceSettings | None = None) -> Stars:
    """Exact solves at the given masses for the EOS of ``sequence``."""
    res = solve_sequences(sequence.eos.batch, n_stars=max(len(sequence.branch) - 1, 24), masses=masses,
                          settings=settings)
    return _row(res.at_mass, 0, keep_nan=True)
