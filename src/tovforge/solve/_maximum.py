"""Phase 2 of a sequence solve: the maximum mass from a Chebyshev cluster.

Near its maximum ``M(h_c)`` is flat, so the maximum is located on a
polynomial rather than by a root search on ``dM/dh_c``:

1. :func:`guess_maximum`: the vertex of the parabola through the scan's peak
   and its two neighbours, in ``ln h_c``;
2. :func:`refine_maximum`: ``n_cluster`` Chebyshev-Lobatto points in
   ``ln h_c`` around the guess are solved exactly; the interpolating
   polynomial (in Chebyshev form) is maximised by Newton's method on
   ``P'(z) = 0``.  If the maximum lies near the cluster's edge, the cluster
   is re-centred; if an EOS kink lies inside it (``M(h_c)`` is then only
   twice differentiable there), it is narrowed eightfold and solved again,
   up to ``max_refinements`` times;
3. :func:`maximum_star`: the maximum-mass star itself, solved exactly or
   interpolated through the cluster's polynomials (agrees to about 1e-9).

Where to extend: an EOS whose stable branch ends at a sharp feature (a
strong phase transition makes ``M(h_c)`` turn over at a kink) needs a
different local model than a smooth polynomial; the place is
:func:`refine_maximum`, whose result :class:`Cluster` is all later phases
read.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.polynomial import chebyshev as _cheb

from ._surface import GEOMETRISED, integrate

__all__ = ["MaximumGuess", "Cluster", "MaximumStar", "cluster_nodes", "guess_maximum", "refine_maximum", "maximum_star",
           "max_sound_speed_sq"]

_Z_CLUSTER_CACHE: dict[int, tuple[np.ndarray, np.ndarray]] = {}


def cluster_nodes(n):
    """Chebyshev-Lobatto nodes in [-1, 1] and the inverse Chebyshev-Vandermonde matrix."""
    if n not in _Z_CLUSTER_CACHE:
        z = -np.cos(np.pi * np.arange(n) / (n - 1))
        _Z_CLUSTER_CACHE[n] = (z, np.linalg.inv(_cheb.chebvander(z, n - 1)))
    return _Z_CLUSTER_CACHE[n]


@dataclass(frozen=True)
class MaximumGuess:
    """First estimate of the maximum of each EOS, from the scan.

    Attributes
    ----------
    ln_h : ndarray, shape (n_eos,)
        ``ln h_c`` of the parabola's vertex.
    mass_km : ndarray, shape (n_eos,)
        Its mass (geometrised, km).
    half_width : ndarray, shape (n_eos,)
        Half-width in ``ln h_c`` of the first cluster (0.6 scan spacings).
    """

    ln_h: np.ndarray
    mass_km: np.ndarray
    half_width: np.ndarray


@dataclass(frozen=True)
class Cluster:
    """The cluster of exact stars around each maximum, and the maximum it gives.

    Attributes
    ----------
    ok : ndarray of bool, shape (n_eos,)
        EOS with a maximum (the input mask minus the EOS whose cluster failed).
    failed : ndarray of bool, shape (n_eos,)
        EOS of the input mask with a failed star in the cluster.
    centre, half_width : ndarray, shape (n_eos,)
        The last cluster: ``ln h_c = centre + half_width z``, ``z`` in [-1, 1].
    z_max : ndarray, shape (n_eos,)
        Maximum of the cluster polynomial in ``z``.
    coef : ndarray, shape (n_cluster, n_eos)
        Chebyshev coefficients of ``M(z)`` (km).
    ln_h : ndarray, shape (n_eos, n_cluster)
        The cluster stars' ``ln h_c``.
    values : dict of str to ndarray, shape (n_eos, n_cluster)
        Their geometrised surface values (keys of ``GEOMETRISED``).
    ln_h_max : ndarray, shape (n_eos,)
        ``ln h_c`` of the maximum-mass star (NaN where not ``ok``).
    mass_max_km : ndarray, shape (n_eos,)
        The maximum mass (geometrised, km; NaN where not ``ok``).
    co_solved : dict of str to ndarray or None
        Surface values of the extra stars solved in the first pass, shape
        (number of input-``ok`` EOS, n_extra).
    nfev : int
    """

    ok: np.ndarray
    failed: np.ndarray
    centre: np.ndarray
    half_width: np.ndarray
    z_max: np.ndarray
    coef: np.ndarray
    ln_h: np.ndarray
    values: dict
    ln_h_max: np.ndarray
    mass_max_km: np.ndarray
    co_solved: dict | None
    nfev: int


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


def guess_maximum(scan, settings) -> MaximumGuess:
    """The vertex of the parabola through each scan peak and its neighbours.

    Parameters
    ----------
    scan : Scan
    settings : SequenceSettings

    Returns
    -------
    MaximumGuess
        Meaningful only where ``scan.ok``.
    """
    n_eos = scan.ln_h.shape[0]
    rows = np.arange(n_eos)
    i1 = np.clip(scan.peak, 1, settings.n_scan - 2)
    x3 = np.stack([scan.ln_h[rows, i1 - 1], scan.ln_h[rows, i1], scan.ln_h[rows, i1 + 1]], axis=1)
    y3 = np.stack([scan.mass_km[rows, i1 - 1], scan.mass_km[rows, i1], scan.mass_km[rows, i1 + 1]], axis=1)
    c_est, m_est = _parabola_peak(x3, np.nan_to_num(y3))
    dln = (np.log(scan.h_top) - np.log(settings.h_low)) / (settings.n_scan - 1)
    return MaximumGuess(c_est, m_est, 0.6 * dln)


def refine_maximum(batch, guess: MaximumGuess, ok, settings, co_solve=None) -> Cluster:
    """Solve the cluster around each guess (and refine it) and maximise its polynomial.

    Parameters
    ----------
    batch : EOSBatch
    guess : MaximumGuess
    ok : ndarray of bool, shape (n_eos,)
        EOS to treat (the others are left NaN).
    settings : SequenceSettings
        ``n_cluster``, ``max_refinements`` and ``steps`` are used.
    co_solve : ndarray, shape (n_eos, n_extra), optional
        ``ln h_c`` of extra stars of the ``ok`` EOS to solve in the first
        pass (the branch stars: one vectorised pass instead of two).

    Returns
    -------
    Cluster
    """
    n_eos = batch.n_eos
    ok = np.array(ok, dtype=bool)
    ok_in = ok.copy()
    z_cl, vinv = cluster_nodes(settings.n_cluster)
    centre = guess.ln_h.copy()
    width = guess.half_width.copy()
    w = guess.half_width
    zstar = np.zeros(n_eos)
    coef = np.zeros((settings.n_cluster, n_eos))
    cluster_vals = {k: np.full((n_eos, settings.n_cluster), np.nan) for k in (*GEOMETRISED, "ln_h")}
    todo = ok.copy()
    co_solved = None
    nfev = 0
    kinks_ln = np.log(np.where(np.isfinite(batch.kinks) & (batch.kinks > 0), batch.kinks, 1e300))
    for attempt in range(settings.max_refinements + 1):
        rr = np.flatnonzero(todo)
        if rr.size == 0:
            break
        ln_cl = centre[rr, None] + width[rr, None] * z_cl[None, :]
        h_list = [np.exp(ln_cl).ravel()]
        i_list = [np.repeat(rr, settings.n_cluster)]
        if attempt == 0 and co_solve is not None:
            rb = np.flatnonzero(ok)
            h_list.append(np.exp(co_solve[rb]).ravel())
            i_list.append(np.repeat(rb, co_solve.shape[1]))
        svc, nf = integrate(batch, np.concatenate(i_list), np.concatenate(h_list), settings.steps)
        nfev += nf
        ncl = rr.size * settings.n_cluster
        if attempt == 0 and co_solve is not None:
            co_solved = {k: v[ncl:].reshape(rb.size, co_solve.shape[1]) for k, v in svc.items()}
        Mc = svc["mass"][:ncl].reshape(rr.size, settings.n_cluster)
        for k in GEOMETRISED:
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
    ln_h = cluster_vals.pop("ln_h")
    return Cluster(ok, ok_in & ~ok, centre, width, zstar, coef, ln_h, cluster_vals, ln_star, m_max, co_solved, nfev)


@dataclass(frozen=True)
class MaximumStar:
    """The maximum-mass star of each EOS (geometrised surface values).

    Attributes
    ----------
    values : dict of str to ndarray, shape (n_eos,)
        Keys of ``GEOMETRISED``; NaN where the cluster has no maximum.
        ``mass`` is the cluster polynomial's maximum (the exact solve of a
        star at ``h_c`` of the maximum agrees with it to the solver's
        accuracy).
    nfev : int
    """

    values: dict
    nfev: int


def maximum_star(batch, cluster: Cluster, settings, exact: bool) -> MaximumStar:
    """The star at the maximum of each cluster polynomial.

    Parameters
    ----------
    batch : EOSBatch
    cluster : Cluster
    settings : SequenceSettings
    exact : bool
        Solve it (one more pass) or interpolate its values through the
        cluster stars (no pass; radius, k2 and I agree to about 1e-9).

    Returns
    -------
    MaximumStar
    """
    ok = cluster.ok
    n_eos = ok.size
    rows_ok = np.flatnonzero(ok)
    nfev = 0
    if exact:
        svq, nfev = integrate(batch, rows_ok, np.exp(cluster.ln_h_max)[rows_ok], settings.steps)
        star = {k: np.full(n_eos, np.nan) for k in GEOMETRISED}
        for k in GEOMETRISED:
            star[k][rows_ok] = svq[k]
    else:
        _, vinv = cluster_nodes(settings.n_cluster)
        star = {}
        for k in GEOMETRISED:
            cf = vinv @ np.nan_to_num(cluster.values[k]).T
            star[k] = np.where(ok, _cheb.chebval(cluster.z_max, cf, tensor=False), np.nan)
    star["mass"] = np.where(ok, cluster.mass_max_km, np.nan)
    return MaximumStar(star, nfev)


def max_sound_speed_sq(batch, eos_index, h_upper, n_samples: int = 256):
    """Largest ``c_s^2`` of each EOS on ``[0, h_upper]``.

    The EOS is sampled at ``n_samples`` points (denser near the top) plus the
    one-sided values at every kink below ``h_upper`` and at ``h_upper``.

    Parameters
    ----------
    batch : EOSBatch
    eos_index : array_like of int, shape (n,)
    h_upper : array_like, shape (n,)
        Upper end of each range (the central ``h_c`` of the maximum-mass star).

    Returns
    -------
    ndarray, shape (n,)
        In units of c^2.
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
