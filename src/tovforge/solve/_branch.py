"""The stars of a stable branch: where to place them and how they are collected.

Branch stars are spread uniformly in ``u = sqrt(1 - M / M_max)`` (a
coordinate in which the sequence is smooth through the maximum) from below
``low_mass_msun`` (the first branch) or from the minimum (a twin branch) to
just under the cluster around the maximum; their ``ln h_c`` come from the
scan by interpolation (:func:`place_branch`, :func:`place_twin_branch`).
Once solved (in the clusters' first pass), every exact star strictly between
the branch's ends, branch and cluster stars alike, is collected in
increasing ``h_c`` (:func:`stars_between`) and the extremal stars are added
at the ends (:func:`assemble_branch`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..units import MSUN_KM
from ._result import Stars
from ._surface import GEOMETRISED, mask_stars, surface_fields, to_stars

__all__ = ["BelowMaximum", "place_branch", "place_twin_branch", "stars_between", "stars_below_maximum",
           "assemble_branch"]


def _place_row(Ms, ls, m_est, top, m_lo, n_stars, ln_floor):
    """``ln h_c`` of ``n_stars`` stars uniform in ``u`` on one scanned rise (``Ms``, ``ls``) up to ``top``."""
    good = np.isfinite(Ms)
    Ms, ls = Ms[good], ls[good]
    u = np.sqrt(np.clip(1.0 - Ms / m_est, 0.0, None))
    u_top = float(np.interp(top, ls, u)) if top > ls[0] else u[0]
    u_lo = np.sqrt(max(0.0, 1.0 - m_lo / m_est))
    u_lo = min(u_lo, u[0])
    if len(Ms) >= 3 and u_lo > u_top:
        ut = np.linspace(u_lo, u_top, n_stars + 1)[:-1]  # the cluster supplies u_top
        return np.interp(-ut, -u, ls)
    lo = ls[0] if len(ls) else ln_floor
    return np.linspace(lo, max(top, lo + 1e-3), n_stars)


def place_branch(scan, guess, settings, n_stars: int) -> np.ndarray:
    """``ln h_c`` of ``n_stars`` stars of the first branch per EOS, uniform in ``u``.

    Parameters
    ----------
    scan : Scan
    guess : ExtremumGuess
        The first maxima (one lane per EOS).
    settings : SequenceSettings
        ``low_mass_msun`` and ``h_low`` are used.
    n_stars : int

    Returns
    -------
    ndarray, shape (n_eos, n_stars)
        NaN rows for EOS without a maximum.  The stars end below the first
        cluster (``guess.left_edge``), which supplies the top of the branch.
    """
    n_eos = scan.ln_h.shape[0]
    ln_branch = np.full((n_eos, max(n_stars, 0)), np.nan)
    if n_stars <= 0:
        return ln_branch
    top = guess.left_edge
    for r in np.flatnonzero(scan.ok):  # bookkeeping per EOS, not per star
        seg = slice(scan.start[r], scan.peak[r] + 1)
        m_lo = min(settings.low_mass_msun * MSUN_KM, 0.5 * guess.mass_km[r])
        ln_branch[r] = _place_row(scan.mass_km[r, seg], scan.ln_h[r, seg], guess.mass_km[r], top[r], m_lo,
                                  n_stars, np.log(settings.h_low))
    return ln_branch


def place_twin_branch(scan, top_guess, settings, n_stars: int) -> np.ndarray:
    """``ln h_c`` of ``n_stars`` stars of each twin branch, uniform in ``u`` from its scanned minimum.

    Parameters
    ----------
    scan : Scan
    top_guess : ExtremumGuess
        The twin maxima (one lane per EOS with a twin branch).
    settings : SequenceSettings
    n_stars : int

    Returns
    -------
    ndarray, shape (n_twin, n_stars)
        Ending below the first cluster around the twin maximum.  Stars that
        fall below the minimum (placed from the scan) are dropped later.
    """
    rows = top_guess.eos_index
    out = np.full((rows.size, max(n_stars, 0)), np.nan)
    if n_stars <= 0:
        return out
    top = top_guess.left_edge
    for lane, r in enumerate(rows):  # bookkeeping per EOS, not per star
        seg = slice(scan.twin_min[r], scan.twin_peak[r] + 1)
        ms = scan.mass_km[r, seg]
        out[lane] = _place_row(ms, scan.ln_h[r, seg], top_guess.mass_km[lane], top[lane], np.nanmin(ms), n_stars,
                               scan.ln_h[r, scan.twin_min[r]])
    return out


@dataclass(frozen=True)
class BelowMaximum:
    """Exact stars strictly between the ends of each branch, in increasing ``h_c``.

    Attributes
    ----------
    ln_h : ndarray, shape (n_eos, width)
        ``ln h_c``; a finite prefix of ``count`` stars, then NaN.
    values : dict of str to ndarray, shape (n_eos, width)
        Geometrised surface values (keys of ``GEOMETRISED``).
    count : ndarray of int, shape (n_eos,)
    """

    ln_h: np.ndarray
    values: dict
    count: np.ndarray


def stars_between(parts, ln_lo, ln_hi) -> BelowMaximum:
    """Collect the stars of ``parts`` with ``ln_lo < ln h_c < ln_hi``, sorted by ``h_c``.

    Parameters
    ----------
    parts : list of (ndarray, dict)
        ``ln h_c`` of shape (n_eos, k) and the geometrised values of those stars.
    ln_lo, ln_hi : ndarray, shape (n_eos,)
        Open bounds per EOS.

    Returns
    -------
    BelowMaximum
    """
    known_ln = np.concatenate([np.where((ln > ln_lo[:, None]) & (ln < ln_hi[:, None]), ln, np.nan)
                               for ln, _ in parts], axis=1)
    known = {k: np.concatenate([v[k] for _, v in parts], axis=1) for k in GEOMETRISED}
    drop = ~np.isfinite(known_ln) | ~np.isfinite(known["mass"])
    known_ln = np.where(drop, np.inf, known_ln)
    order = np.argsort(known_ln, axis=1)
    known_ln = np.take_along_axis(known_ln, order, 1)
    known = {k: np.take_along_axis(np.where(drop, np.nan, v), order, 1) for k, v in known.items()}
    n_known = np.isfinite(known_ln).sum(axis=1)
    known_ln = np.where(np.isfinite(known_ln), known_ln, np.nan)
    return BelowMaximum(known_ln, known, n_known)


def stars_below_maximum(cluster, ln_branch=None) -> BelowMaximum:
    """Collect the cluster stars and the branch stars below the maximum (one row per EOS).

    Parameters
    ----------
    cluster : Cluster
        One lane per EOS, with the branch stars in ``co_solved`` (if any).
    ln_branch : ndarray, shape (n_eos, n_stars), optional
        From :func:`place_branch`.

    Returns
    -------
    BelowMaximum
        Stars within 1e-6 in ``ln h_c`` of the maximum are left out: they are
        the maximum-mass star itself, appended by :func:`assemble_branch`.
    """
    parts = [(cluster.ln_h, cluster.values)]
    if cluster.co_solved is not None:
        parts.append((ln_branch, cluster.co_solved))
    return stars_between(parts, np.full(cluster.ln_h.shape[0], -np.inf), cluster.ln_h_max - 1e-6)


def assemble_branch(batch, below: BelowMaximum, ok, ln_top, top: dict, h_fill: float, bottom=None) -> Stars:
    """A branch: the stars between its ends, the extremal stars added at the ends.

    Parameters
    ----------
    batch : EOSBatch
    below : BelowMaximum
    ok : ndarray of bool, shape (n_eos,)
        Rows with a branch.
    ln_top : ndarray, shape (n_eos,)
        ``ln h_c`` of the maximum-mass star.
    top : dict of str to ndarray, shape (n_eos,)
        Geometrised surface values of the maximum-mass star.
    h_fill : float
        A valid ``h_c`` evaluated (then masked) in the padding.
    bottom : tuple of (ndarray, dict), optional
        ``ln h_c`` and values of a first star put before the others (the
        minimum of a twin branch).

    Returns
    -------
    Stars
        Fields of shape (n_eos, width), a finite prefix per row, NaN after it.
    """
    if bottom is not None:
        ln_b, val_b = bottom
        below = BelowMaximum(np.concatenate([ln_b[:, None], below.ln_h], axis=1),
                             {k: np.concatenate([val_b[k][:, None], below.values[k]], axis=1)
                              for k in GEOMETRISED}, below.count + 1)
    n_eos = below.ln_h.shape[0]
    rows_ok = np.flatnonzero(ok)
    n_known = below.count
    width_b = int(n_known.max(initial=0)) + 1
    b_ln = np.full((n_eos, width_b), np.nan)
    b_val = {k: np.full((n_eos, width_b), np.nan) for k in GEOMETRISED}
    b_ln[:, : width_b - 1] = below.ln_h[:, : width_b - 1]
    for k in GEOMETRISED:
        b_val[k][:, : width_b - 1] = below.values[k][:, : width_b - 1]
    b_ln[rows_ok, n_known[rows_ok]] = ln_top[rows_ok]
    for k in GEOMETRISED:
        b_val[k][rows_ok, n_known[rows_ok]] = top[k][rows_ok]
    has = np.isfinite(b_ln)
    h_c = np.exp(np.where(has, b_ln, np.log(h_fill))).ravel()
    stars = to_stars(batch, np.repeat(np.arange(n_eos), width_b), h_c,
                     surface_fields({k: v.ravel() for k, v in b_val.items()}), shape=(n_eos, width_b))
    return mask_stars(stars, has)
