"""The stars of the stable branch: where to place them and how they are collected.

Branch stars are spread uniformly in ``u = sqrt(1 - M / M_max)`` (a
coordinate in which the sequence is smooth through the maximum) from below
``low_mass_msun`` to just under the cluster around the maximum; their
``ln h_c`` come from the scan by interpolation (:func:`place_branch`).  Once
solved (in the cluster's first pass), every exact star strictly below the
maximum, branch and cluster stars alike, is collected in increasing ``h_c``
(:func:`stars_below_maximum`) and the maximum-mass star is appended
(:func:`assemble_branch`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..units import MSUN_KM
from ._result import Stars
from ._surface import GEOMETRISED, mask_stars, surface_fields, to_stars

__all__ = ["BelowMaximum", "place_branch", "stars_below_maximum", "assemble_branch"]


def place_branch(scan, guess, settings, n_stars: int) -> np.ndarray:
    """``ln h_c`` of ``n_stars`` branch stars per EOS, uniform in ``u``.

    Parameters
    ----------
    scan : Scan
    guess : MaximumGuess
    settings : SequenceSettings
        ``low_mass_msun`` and ``h_low`` are used.
    n_stars : int

    Returns
    -------
    ndarray, shape (n_eos, n_stars)
        NaN rows for EOS without a maximum.  The stars end below the first
        cluster (``guess.ln_h - guess.half_width``), which supplies the top
        of the branch.
    """
    n_eos = scan.ln_h.shape[0]
    ln_branch = np.full((n_eos, max(n_stars, 0)), np.nan)
    if n_stars <= 0:
        return ln_branch
    c_est, m_est, w = guess.ln_h, guess.mass_km, guess.half_width
    for r in np.flatnonzero(scan.ok):  # bookkeeping per EOS, not per star
        seg = slice(scan.start[r], scan.peak[r] + 1)
        Ms, ls = scan.mass_km[r, seg], scan.ln_h[r, seg]
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
    return ln_branch


@dataclass(frozen=True)
class BelowMaximum:
    """Every exact star strictly below each maximum, in increasing ``h_c``.

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


def stars_below_maximum(cluster, ln_branch=None, branch_rows=None) -> BelowMaximum:
    """Collect the cluster stars and the branch stars below the maximum.

    Parameters
    ----------
    cluster : Cluster
        With the branch stars in ``co_solved`` (if any).
    ln_branch : ndarray, shape (n_eos, n_stars), optional
        From :func:`place_branch`.
    branch_rows : ndarray of int, optional
        The EOS whose branch stars were solved (rows of ``co_solved``).

    Returns
    -------
    BelowMaximum
        Stars within 1e-6 in ``ln h_c`` of the maximum are left out: they are
        the maximum-mass star itself, appended by :func:`assemble_branch`.
    """
    n_eos = cluster.ln_h.shape[0]
    below_top = cluster.ln_h_max[:, None] - 1e-6
    parts_ln = [np.where(cluster.ln_h < below_top, cluster.ln_h, np.nan)]
    parts = {k: [cluster.values[k]] for k in GEOMETRISED}
    if cluster.co_solved is not None:
        n_stars = ln_branch.shape[1]
        lb = np.full((n_eos, n_stars), np.nan)
        lb[branch_rows] = ln_branch[branch_rows]
        parts_ln.append(np.where(lb < below_top, lb, np.nan))
        for k in GEOMETRISED:
            full = np.full((n_eos, n_stars), np.nan)
            full[branch_rows] = cluster.co_solved[k]
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
    return BelowMaximum(known_ln, known, n_known)


def assemble_branch(batch, below: BelowMaximum, cluster, top: dict, h_fill: float) -> Stars:
    """The stable branch: the stars below the maximum, then the maximum-mass star.

    Parameters
    ----------
    batch : EOSBatch
    below : BelowMaximum
    cluster : Cluster
        ``ok`` and ``ln_h_max`` are used.
    top : dict of str to ndarray, shape (n_eos,)
        Geometrised surface values of the maximum-mass star.
    h_fill : float
        A valid ``h_c`` evaluated (then masked) in the padding.

    Returns
    -------
    Stars
        Fields of shape (n_eos, count.max() + 1), a finite prefix per row,
        NaN after it.
    """
    n_eos = below.ln_h.shape[0]
    rows_ok = np.flatnonzero(cluster.ok)
    n_known = below.count
    width_b = int(n_known.max(initial=0)) + 1
    b_ln = np.full((n_eos, width_b), np.nan)
    b_val = {k: np.full((n_eos, width_b), np.nan) for k in GEOMETRISED}
    b_ln[:, : width_b - 1] = below.ln_h[:, : width_b - 1]
    for k in GEOMETRISED:
        b_val[k][:, : width_b - 1] = below.values[k][:, : width_b - 1]
    b_ln[rows_ok, n_known[rows_ok]] = cluster.ln_h_max[rows_ok]
    for k in GEOMETRISED:
        b_val[k][rows_ok, n_known[rows_ok]] = top[k][rows_ok]
    has = np.isfinite(b_ln)
    h_c = np.exp(np.where(has, b_ln, np.log(h_fill))).ravel()
    stars = to_stars(batch, np.repeat(np.arange(n_eos), width_b), h_c,
                     surface_fields({k: v.ravel() for k, v in b_val.items()}), shape=(n_eos, width_b))
    return mask_stars(stars, has)
