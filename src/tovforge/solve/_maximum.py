"""Phase 2 of a sequence solve: extrema of ``M(h_c)`` from Chebyshev clusters.

Near a smooth extremum ``M(h_c)`` is flat, so it is located on a polynomial
rather than by a root search on ``dM/dh_c``.  Every extremum a sequence
needs (the first maximum, and the maximum and minimum of a twin branch) is
one *lane* of one vectorised refinement, so that a twin branch adds lanes
to the passes, not passes:

1. :func:`guess_maximum` and :func:`guess_twin`: the vertex of the parabola
   through the scan's extremum and its two neighbours, in ``ln h_c``
   (:class:`ExtremumGuess`);
2. :func:`refine_extrema`: ``n_cluster`` Chebyshev-Lobatto points around
   each guess are solved exactly; the interpolating polynomial (in Chebyshev
   form) is maximised (or minimised) by Newton's method on ``P'(z) = 0``.  If
   the extremum lies near the cluster's edge, the cluster is re-centred; if
   an EOS kink lies inside it (``M(h_c)`` is then only twice differentiable
   there), it is narrowed eightfold and solved again, up to
   ``max_refinements`` times;
3. :func:`maximum_star`: the star at each extremum, solved exactly or
   interpolated through the cluster's polynomials (agrees to about 1e-9).

Two kinds of lane depart from the smooth case, both at a first-order
transition (a jump of the energy density at the enthalpy ``h_t``):

- *cusp*: above Seidov's limit (Seidov 1971, Sov. Astron. 15, 347) the
  maximum is the star centred on the transition, where ``M(h_c)`` turns
  down with a kink.  The cluster ends on ``h_t`` (its last node) and the
  maximum is that node, solved exactly; the other nodes are stars of the
  branch below it;
- *after a jump* (``origin``): an extremum just above a jump (the minimum
  that follows a cusp, or a shallow maximum and minimum close above a
  smaller jump).  There the star has a core of the dense phase whose radius
  grows like ``sqrt(h_c - h_t)``, and ``M`` is a smooth function of that
  radius, not of ``h_c``.  The cluster coordinate is then ``x = sqrt(ln h_c
  - ln h_t)`` (from 0 at the transition), and the cluster is narrowed
  around the extremum until it settles (to 1e-11 of the mass).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.polynomial import chebyshev as _cheb

from ._surface import GEOMETRISED, integrate

__all__ = ["ExtremumGuess", "Cluster", "MaximumStar", "cluster_nodes", "guess_maximum", "guess_twin",
           "refine_extrema", "maximum_star", "max_sound_speed_sq"]

_Z_CLUSTER_CACHE: dict[int, tuple[np.ndarray, np.ndarray]] = {}

#: Half-width of a first cluster, in scan spacings of ``ln h_c``.
_HALF_WIDTH = 0.6
#: Passes that narrow the cluster of an extremum after a jump (each eightfold),
#: until it changes by less than this relative amount, or the cluster
#: polynomial's last two Chebyshev coefficients do.
_POLISH_PASSES = 4
_POLISH_RTOL = 1e-11


def cluster_nodes(n):
    """Chebyshev-Lobatto nodes in [-1, 1] and the inverse Chebyshev-Vandermonde matrix."""
    if n not in _Z_CLUSTER_CACHE:
        z = -np.cos(np.pi * np.arange(n) / (n - 1))
        _Z_CLUSTER_CACHE[n] = (z, np.linalg.inv(_cheb.chebvander(z, n - 1)))
    return _Z_CLUSTER_CACHE[n]


@dataclass(frozen=True)
class ExtremumGuess:
    """First estimate of extrema of ``M(h_c)``, one lane per extremum.

    Attributes
    ----------
    eos_index : ndarray of int, shape (n,)
        EOS of each lane.
    ln_h : ndarray, shape (n,)
        ``ln h_c`` of the estimate: the parabola's vertex, or the transition
        of a cusp.
    mass_km : ndarray, shape (n,)
        Its mass (geometrised, km).
    centre, half_width : ndarray, shape (n,)
        The first cluster, in the cluster coordinate (``ln h_c``, or ``x``
        after a jump).
    sign : ndarray, shape (n,)
        +1 for a maximum, -1 for a minimum.
    cusp : ndarray of bool, shape (n,)
        The maximum is the star centred on a transition (at ``ln_h``).
    origin : ndarray, shape (n,)
        ``ln h_t`` of the jump the cluster coordinate starts at (NaN: the
        coordinate is ``ln h_c``).
    """

    eos_index: np.ndarray
    ln_h: np.ndarray
    mass_km: np.ndarray
    centre: np.ndarray
    half_width: np.ndarray
    sign: np.ndarray
    cusp: np.ndarray
    origin: np.ndarray

    @property
    def left_edge(self) -> np.ndarray:
        """``ln h_c`` of the lower end of the first cluster."""
        x = self.centre - self.half_width
        return np.where(np.isfinite(self.origin), self.origin + np.maximum(x, 0.0) ** 2, x)

    @staticmethod
    def concat(*guesses: "ExtremumGuess") -> "ExtremumGuess":
        """The lanes of several guesses, in order."""
        return ExtremumGuess(*(np.concatenate([getattr(g, k) for g in guesses])
                               for k in ExtremumGuess.__dataclass_fields__))


@dataclass(frozen=True)
class Cluster:
    """The cluster of exact stars around each extremum, and the extremum it gives (one lane each).

    Attributes
    ----------
    eos_index : ndarray of int, shape (n,)
        EOS of each lane.
    ok : ndarray of bool, shape (n,)
        Lanes with an extremum (the input mask minus the lanes whose cluster failed).
    failed : ndarray of bool, shape (n,)
        Lanes of the input mask with a failed star in the cluster.
    sign, origin : ndarray, shape (n,)
        As in :class:`ExtremumGuess`.
    centre, half_width : ndarray, shape (n,)
        The last cluster: coordinate ``centre + half_width z``, ``z`` in [-1, 1].
    z_max : ndarray, shape (n,)
        Extremum of the cluster polynomial in ``z``.
    coef : ndarray, shape (n_cluster, n)
        Chebyshev coefficients of ``M(z)`` (km).
    ln_h : ndarray, shape (n, n_cluster)
        The cluster stars' ``ln h_c``.
    values : dict of str to ndarray, shape (n, n_cluster)
        Their geometrised surface values (keys of ``GEOMETRISED``).
    ln_h_max : ndarray, shape (n,)
        ``ln h_c`` of the extremal star (NaN where not ``ok``).
    mass_max_km : ndarray, shape (n,)
        The extremal mass (geometrised, km; NaN where not ``ok``): the
        maximum, or the minimum for ``sign`` -1.
    co_solved : dict of str to ndarray or None
        Surface values of the extra stars solved in the first pass, shape
        (n, n_extra), NaN where none was asked.
    nfev : int
    """

    eos_index: np.ndarray
    ok: np.ndarray
    failed: np.ndarray
    sign: np.ndarray
    origin: np.ndarray
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

    def rows(self, lane_of_row) -> "Cluster":
        """The lanes ``lane_of_row`` (one per row; -1: a row without a lane, not ``ok``, NaN)."""
        lane_of_row = np.asarray(lane_of_row, dtype=np.intp)
        has = lane_of_row >= 0
        k = np.where(has, lane_of_row, 0)

        def pick(a, fill=np.nan):  # lanes along the first axis
            a = np.take(a, k, axis=0)
            return np.where(has.reshape((-1,) + (1,) * (a.ndim - 1)), a, fill)

        co = None if self.co_solved is None else {key: pick(v) for key, v in self.co_solved.items()}
        return Cluster(np.take(self.eos_index, k), pick(self.ok, False), pick(self.failed, False),
                       pick(self.sign), pick(self.origin), pick(self.centre), pick(self.half_width),
                       pick(self.z_max), pick(self.coef.T).T, pick(self.ln_h),
                       {key: pick(v) for key, v in self.values.items()}, pick(self.ln_h_max),
                       pick(self.mass_max_km), co, self.nfev)


def _parabola_peak(x, y):
    """Vertex of the parabola through three points per row (x, y shape (n, 3)), for a maximum."""
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


def _scan_spacing(scan, settings):
    """Spacing of the regular scan points in ``ln h_c``, per EOS."""
    return (np.log(scan.h_top) - np.log(settings.h_low)) / (settings.n_scan - 1)


#: An extremum whose bracket ends within this many cluster half-widths above a
#: jump is searched in the coordinate ``x = sqrt(ln h_c - ln h_t)``.
_NEAR_JUMP = 4.0


def _vertex_guess(scan, settings, rows, index, sign) -> ExtremumGuess:
    """Guesses at the scan extrema ``index`` of the EOS ``rows``.

    The parabola's vertex; or, at a turning jump (a maximum only), the star
    centred on it (a cusp); or, for an extremum at or above a jump whose
    bracket ``(index - 1, index + 1)`` ends close above it (and for any
    minimum after a turning jump), a first cluster over ``x = sqrt(ln h_c -
    ln h_t)`` from the jump to the bracket's upper end.
    """
    n = rows.size
    if n == 0:
        empty = np.zeros(0)
        return ExtremumGuess(rows, empty, empty, empty, empty, empty, np.zeros(0, bool), empty)
    n_col = scan.ln_h.shape[1]
    i1 = np.clip(index, 1, n_col - 2)
    around = i1[:, None] + np.arange(-1, 2)
    x3 = scan.ln_h[rows[:, None], around]
    y3 = np.nan_to_num(scan.mass_km[rows[:, None], around])
    c_est, m_est = _parabola_peak(x3, sign * y3)
    m_est = sign * m_est
    w = _HALF_WIDTH * _scan_spacing(scan, settings)[rows]
    at = np.clip(index, 0, None)
    cusp = scan.turn[rows, at] & (index >= 0) & (sign > 0)
    ln_cusp = scan.ln_h[rows, at]
    ln_h = np.where(cusp, ln_cusp, c_est)
    m_est = np.where(cusp, scan.mass_km[rows, at], m_est)
    centre = np.where(cusp, ln_cusp - w, c_est)  # a cusp is the cluster's right end
    half = w
    origin = np.full(n, np.nan)
    if scan.at_jump.any():
        last = np.maximum.accumulate(np.where(scan.at_jump[rows], np.arange(n_col), -1), axis=1)
        # the last jump at or below the extremum: a maximum at a jump without a cusp follows a rise
        # into the jump (the scan has a star just below it), so it lies above it (Seidov: below his
        # limit the stars with a small core continue the rise)
        a = last[np.arange(n), at]
        ln_a = scan.ln_h[rows, np.clip(a, 0, None)]
        ln_up = scan.ln_h[rows, np.clip(index + 1, 0, n_col - 1)]
        after_turn = (sign < 0) & scan.turn[rows, np.clip(a, 0, None)]
        near = (a >= 0) & (index >= 1) & np.isfinite(ln_up) & ~cusp & ((ln_up - ln_a <= _NEAR_JUMP * w) | after_turn)
        # the first cluster spans the scan's bracket (from the jump, if the bracket reaches down to it)
        ln_down = scan.ln_h[rows, np.clip(index - 1, 0, n_col - 1)]
        x_hi = np.sqrt(np.where(near, ln_up - ln_a, 0.0))
        x_lo = np.sqrt(np.where(near & (ln_down > ln_a), ln_down - ln_a, 0.0))
        origin = np.where(near, ln_a, np.nan)
        centre = np.where(near, 0.5 * (x_hi + x_lo), centre)
        half = np.where(near, 0.5 * (x_hi - x_lo), half)
    return ExtremumGuess(rows, ln_h, m_est, centre, half, np.full(n, float(sign)), cusp, origin)


def guess_maximum(scan, settings) -> ExtremumGuess:
    """The first maximum of every EOS (one lane per EOS; meaningful only where ``scan.ok``).

    The vertex of the parabola through the scan peak and its neighbours, or,
    where the peak is a star centred on a turning jump, that star (a cusp).

    Parameters
    ----------
    scan : Scan
    settings : SequenceSettings

    Returns
    -------
    ExtremumGuess
    """
    rows = np.arange(scan.ln_h.shape[0])
    return _vertex_guess(scan, settings, rows, scan.peak, +1)


def guess_twin(scan, settings) -> tuple[ExtremumGuess, ExtremumGuess]:
    """The maximum and the minimum of the twin branch of every EOS that has one.

    Both are guessed like the first maximum; a minimum after a cusp is
    searched in ``x = sqrt(ln h_c - ln h_t)`` from the transition to the
    first scanned star beyond the scan's minimum.

    Parameters
    ----------
    scan : Scan
    settings : SequenceSettings

    Returns
    -------
    maximum, minimum : ExtremumGuess
        One lane per EOS with a twin branch (``scan.twin``), in increasing EOS order.
    """
    rows = np.flatnonzero(scan.twin)
    return (_vertex_guess(scan, settings, rows, scan.twin_peak[rows], +1),
            _vertex_guess(scan, settings, rows, scan.twin_min[rows], -1))


def _to_ln_h(x, origin):
    """``ln h_c`` from the cluster coordinate (``x`` itself, or ``origin + x^2`` after a jump)."""
    return np.where(np.isfinite(origin), origin + np.maximum(x, 0.0) ** 2, x)


def _to_x(ln_h, origin):
    """The cluster coordinate of ``ln h_c`` (NaN below the origin)."""
    with np.errstate(invalid="ignore"):
        return np.where(np.isfinite(origin), np.sqrt(ln_h - origin), ln_h)


def refine_extrema(batch, guess: ExtremumGuess, ok, settings, co_solve=None) -> Cluster:
    """Solve the cluster around each guess (and refine it) and take the extremum of its polynomial.

    Parameters
    ----------
    batch : EOSBatch
    guess : ExtremumGuess
    ok : ndarray of bool, shape (n,)
        Lanes to treat (the others are left NaN).
    settings : SequenceSettings
        ``n_cluster``, ``max_refinements`` and ``steps`` are used.
    co_solve : ndarray, shape (n, n_extra), optional
        ``ln h_c`` of extra stars of the ``ok`` lanes' EOS to solve in the
        first pass (the branch stars: one vectorised pass instead of two);
        NaN entries are skipped.

    Returns
    -------
    Cluster
    """
    n = guess.eos_index.size
    eos = guess.eos_index
    ok = np.array(ok, dtype=bool)
    ok_in = ok.copy()
    z_cl, vinv = cluster_nodes(settings.n_cluster)
    centre = guess.centre.copy()
    width = guess.half_width.copy()
    w = guess.half_width
    sign, cusp, origin = guess.sign, guess.cusp, guess.origin
    after_jump = np.isfinite(origin)
    zstar = np.zeros(n)
    m_prev = np.full(n, np.nan)
    coef = np.zeros((settings.n_cluster, n))
    cluster_vals = {k: np.full((n, settings.n_cluster), np.nan) for k in (*GEOMETRISED, "ln_h")}
    todo = ok.copy()
    co_solved = None
    nfev = 0
    kinks = batch.kinks[eos] if n else np.zeros((0, 0))
    kinks_ln = np.log(np.where(np.isfinite(kinks) & (kinks > 0), kinks, 1e300))
    # a kink at the origin is the cluster's end, not inside it
    inside = ~after_jump[:, None] | (kinks_ln > origin[:, None] + 1e-12)
    kinks_x = _to_x(np.where(inside, kinks_ln, np.inf), origin[:, None])
    kinks_x = np.where(np.isfinite(kinks_x), kinks_x, np.inf)
    passes = settings.max_refinements + 1 + (_POLISH_PASSES if after_jump.any() else 0)
    for attempt in range(passes):
        rr = np.flatnonzero(todo)
        if rr.size == 0:
            break
        x_cl = centre[rr, None] + width[rr, None] * z_cl[None, :]
        ln_cl = _to_ln_h(x_cl, origin[rr, None])
        ln_cl[:, -1] = np.where(cusp[rr], guess.ln_h[rr], ln_cl[:, -1])  # exactly the transition
        h_list = [np.exp(ln_cl).ravel()]
        i_list = [np.repeat(eos[rr], settings.n_cluster)]
        if attempt == 0 and co_solve is not None:
            co_where = ok[:, None] & np.isfinite(co_solve)
            co_r, co_c = np.nonzero(co_where)
            h_list.append(np.exp(co_solve[co_r, co_c]))
            i_list.append(eos[co_r])
        svc, nf = integrate(batch, np.concatenate(i_list), np.concatenate(h_list), settings.steps)
        nfev += nf
        ncl = rr.size * settings.n_cluster
        if attempt == 0 and co_solve is not None:
            co_solved = {k: np.full(co_solve.shape, np.nan) for k in svc}
            for k, v in svc.items():
                co_solved[k][co_r, co_c] = v[ncl:]
        Mc = svc["mass"][:ncl].reshape(rr.size, settings.n_cluster)
        for k in GEOMETRISED:
            cluster_vals[k][rr] = svc[k][:ncl].reshape(rr.size, settings.n_cluster)
        cluster_vals["ln_h"][rr] = ln_cl
        cf = vinv @ Mc.T  # Chebyshev coefficients, (n_cluster, n_rows)
        coef[:, rr] = cf
        # extremum of the polynomial: Newton on P'(z) = 0 from the best node
        sg = sign[rr]
        z = z_cl[np.argmax(np.nan_to_num(sg[:, None] * Mc, nan=-np.inf), axis=1)]
        d1 = _cheb.chebder(cf * sg)
        d2 = _cheb.chebder(cf * sg, 2)
        for _ in range(30):
            g1 = _cheb.chebval(z, d1, tensor=False)
            g2 = _cheb.chebval(z, d2, tensor=False)
            with np.errstate(divide="ignore", invalid="ignore"):
                step = np.where(g2 < 0, g1 / g2, -0.25 * np.sign(g1))
            z = np.clip(z - step, -1.5, 1.5)
            if np.all(np.abs(np.nan_to_num(step)) < 1e-13):
                break
        aj = after_jump[rr]
        z = np.where(cusp[rr], 1.0, z)
        # after a jump the coordinate ends at x = 0 (the transition)
        z = np.where(aj, np.maximum(z, -centre[rr] / np.where(width[rr] > 0, width[rr], 1.0)), z)
        zstar[rr] = z
        bad = ~np.isfinite(Mc).all(axis=1)
        ok[rr[bad]] = False
        # refine where the extremum is near the edge or a kink lies in the cluster
        lo_c = centre[rr] - width[rr]
        hi_c = centre[rr] + width[rr]
        kink_in = ((kinks_x[rr] > lo_c[:, None]) & (kinks_x[rr] < hi_c[:, None])).any(axis=1)
        edge = np.abs(z) > 0.9
        new_centre = centre[rr] + width[rr] * np.clip(z, -1.5, 1.5)
        again = (~bad) & (edge | (kink_in & (width[rr] > w[rr] / 20.0))) & ~cusp[rr] & ~aj
        # an extremum after a jump: narrow eightfold around it until it settles
        m_now = _cheb.chebval(z, cf, tensor=False)
        # settled: the extremum no longer moves, or the polynomial's last two coefficients are negligible
        settled = ((np.abs(m_now - m_prev[rr]) <= _POLISH_RTOL * np.abs(m_now))
                   | (np.abs(cf[-2:]).sum(axis=0) <= _POLISH_RTOL * np.abs(m_now)))
        m_prev[rr] = m_now
        polish = (~bad) & aj & ~settled & (attempt < passes - 1)
        todo[:] = False
        todo[rr[again | polish]] = True
        centre[rr[again]] = new_centre[again]
        width[rr[again & kink_in]] /= 8.0
        # (centred on the extremum, or starting at the jump, x = 0, if the extremum is closer to it)
        width[rr[polish]] /= 8.0
        centre[rr[polish]] = np.maximum(new_centre[polish], width[rr[polish]])
    x_star = centre + width * zstar
    ln_star = np.where(cusp, guess.ln_h, _to_ln_h(x_star, origin))
    m_ext = np.where(ok, _cheb.chebval(zstar, coef, tensor=False), np.nan)
    # a cusp is the last node itself
    m_ext = np.where(ok & cusp, cluster_vals["mass"][:, -1], m_ext)
    ln_star = np.where(ok, ln_star, np.nan)
    ln_h = cluster_vals.pop("ln_h")
    return Cluster(eos, ok, ok_in & ~ok, sign, origin, centre, width, zstar, coef, ln_h, cluster_vals, ln_star,
                   m_ext, co_solved, nfev)


@dataclass(frozen=True)
class MaximumStar:
    """The star at the extremum of each lane (geometrised surface values).

    Attributes
    ----------
    values : dict of str to ndarray, shape (n,)
        Keys of ``GEOMETRISED``; NaN where the cluster has no extremum.
        ``mass`` is the cluster polynomial's extremum (the exact solve of a
        star at ``h_c`` of the extremum agrees with it to the solver's
        accuracy).
    nfev : int
    """

    values: dict
    nfev: int


def maximum_star(batch, cluster: Cluster, settings, exact: bool) -> MaximumStar:
    """The star at the extremum of each cluster polynomial.

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
    n = ok.size
    rows_ok = np.flatnonzero(ok)
    nfev = 0
    if exact:
        svq, nfev = integrate(batch, cluster.eos_index[rows_ok], np.exp(cluster.ln_h_max)[rows_ok], settings.steps)
        star = {k: np.full(n, np.nan) for k in GEOMETRISED}
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
