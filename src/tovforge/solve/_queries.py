"""Phase 3 of a sequence solve: exact stars of the stable branch at given masses.

A star of requested mass is found by a bracketed, safeguarded secant search
on ``g(ln h_c) = u(M(h_c)) - u_target``, ``u = sqrt(1 - M / M_max)``,
started from a cubic through four branch stars (the Illinois-type regula
falsi of Dowell & Jarratt 1971, BIT 11, 168, as a safeguard), vectorised
over all queries, until the mass agrees to ``rtol``.  In ``u`` the branch
stays smooth through the maximum, where ``M`` itself is flat.  A star is
never relabelled: if the search cannot reach the tolerance the result is
NaN and the query is flagged.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..status import Status
from ._result import Stars
from ._structure import integrate_stars
from ._surface import SURFACE_FIELDS, surface_fields, to_stars

__all__ = ["MassQuery", "stars_at_masses"]

#: What the search carries for each query: the surface fields and h_c.
_SEARCHED = (*SURFACE_FIELDS, "central_pseudo_enthalpy")


@dataclass(frozen=True)
class MassQuery:
    """Exact stars at requested masses.

    Attributes
    ----------
    stars : Stars
        Fields of shape (n_eos, n_q).  NaN above M_max, below the lightest
        branch star, where the search failed and for EOS without a maximum.
    below_branch : ndarray of bool, shape (n_eos, n_q)
        Targets at or below M_max that lie below the lightest branch star.
    not_found : ndarray of bool, shape (n_eos, n_q)
        Targets on the branch where the search ended farther than
        ``max(rtol, 1e-8)`` from the target mass.
    nfev : int
        Right-hand-side evaluations of the search.
    """

    stars: Stars
    below_branch: np.ndarray
    not_found: np.ndarray
    nfev: int


def stars_at_masses(batch, seq, targets, steps, rtol: float = 1e-11, max_passes: int = 60,
                    eos_index=None) -> MassQuery:
    """Exact stars of the stable branch at given masses (see the module notes).

    Parameters
    ----------
    batch : EOSBatch
        The EOS of ``seq``.
    seq : SequenceBatch or TwinBatch
        From ``solve_sequences(batch, ..., exact_maximum=True)``: its branch
        stars bracket the searches and its maximum-mass star answers
        ``u = 0`` targets (anything with ``status``, ``branch`` and
        ``mass_max`` of this layout: the twin branches, ``seq.twin``, too).
    targets : array_like, shape (n_eos, n_q)
        Gravitational masses in Msun.
    steps : StepSettings
        Integrator steps of every solve.
    rtol : float
        Relative tolerance on the mass.
    max_passes : int
        Cap on the passes of the root search.
    eos_index : array_like of int, shape (n_rows,), optional
        EOS of ``batch`` of each row of ``seq`` (default: row ``i`` is EOS
        ``i``); lets one search serve the branches of several kinds at once.

    Returns
    -------
    MassQuery
        A star whose search stopped short of ``rtol`` (the bracket collapsed
        where the discrete solver's ``M(h_c)`` jumps, or the passes ran out)
        is kept, with its own mass, if within 1e-8.
    """
    targets = np.asarray(targets, float)
    n_eos, n_q = targets.shape
    eos_index = np.arange(n_eos) if eos_index is None else np.asarray(eos_index, dtype=np.intp)
    out = {k: np.full((n_eos, n_q), np.nan) for k in _SEARCHED}
    m_max = np.asarray(seq.mass_max.mass_msun, float)
    ok = (np.asarray(seq.status) == Status.OK) & np.isfinite(m_max)
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
    for k in _SEARCHED:
        src = m_max if k == "mass_msun" else getattr(mm, k)
        src = np.asarray(src, float).reshape(-1)
        out[k] = np.where(at_max, np.asarray(src, float)[:, None], out[k])
    todo = top & ~below & ~at_max
    ii, jj = np.nonzero(todo)
    not_found = np.zeros((n_eos, n_q), dtype=bool)
    nfev = 0
    if ii.size:
        best, nfev = _search(batch, eos_index[ii], u_b[ii], x_b[ii], u_t[ii, jj], targets[ii, jj], m_max[ii], steps,
                             rtol, max_passes)
        good = np.abs(best["mass_msun"] / targets[ii, jj] - 1.0) <= max(rtol, 1e-8)
        for k in _SEARCHED:
            out[k][ii, jj] = np.where(good, best[k], np.nan)
        not_found[ii, jj] = ~good
    return MassQuery(_as_stars(batch, out, eos_index), below, not_found, nfev)


def _search(batch, eos, ub, xr, ut, tgt, m_max, steps, rtol, max_passes):
    """The vectorised bracketed secant search of :func:`stars_at_masses` (one lane per query).

    ``eos``: the EOS of each lane; ``ub``, ``xr``: ``u`` and ``ln h_c`` of
    the branch stars of each lane's branch; ``ut``, ``tgt``, ``m_max``: the
    target's ``u`` and mass, and the branch's maximum.  Returns the last
    star of every lane (its fields in the units of :class:`Stars`) and the
    right-hand-side evaluations.
    """
    # bracket: the last branch star with u >= target and the next one (u < target)
    lane = np.arange(eos.size)
    ge = np.isfinite(ub) & (ub >= ut[:, None])
    k_lo = ub.shape[1] - 1 - np.argmax(ge[:, ::-1], axis=1)
    xa, xb = xr[lane, k_lo], xr[lane, k_lo + 1]
    # first guess and slope: cubic through four branch stars around the bracket, x as a function of u
    last = np.isfinite(ub).sum(axis=1) - 1
    j0 = np.clip(k_lo - 1, 0, np.maximum(last - 3, 0))
    idx = np.minimum(j0[:, None] + np.arange(4), last[:, None])
    x, dxdu = _cubic_at(ub[lane[:, None], idx], xr[lane[:, None], idx], ut)
    slope = 1.0 / dxdu  # dg/dx for the first Newton step
    x_prev, g_prev = np.full(eos.size, np.nan), np.full(eos.size, np.nan)
    live = np.ones(eos.size, dtype=bool)
    best = {k: np.full(eos.size, np.nan) for k in _SEARCHED}
    nfev = 0
    for _ in range(max_passes):
        act = np.flatnonzero(live)
        if act.size == 0:
            break
        # safeguard: a proposal outside the bracket is replaced by bisection
        inside = np.isfinite(x[act]) & (x[act] > xa[act]) & (x[act] < xb[act])
        x[act] = np.where(inside, x[act], 0.5 * (xa[act] + xb[act]))
        sv = integrate_stars(batch, eos[act], np.exp(x[act]), steps)
        nfev += sv.nfev
        vals = surface_fields(sv)
        vals["central_pseudo_enthalpy"] = np.exp(x[act])
        for k in _SEARCHED:
            best[k][act] = vals[k]
        with np.errstate(invalid="ignore"):
            g = np.sqrt(np.clip(1.0 - vals["mass_msun"] / m_max[act], 0.0, None)) - ut[act]
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
    return best, nfev


def _as_stars(batch, found: dict, eos_index) -> Stars:
    """:class:`Stars` of shape (n_rows, n_q) from the searched fields (NaN where no star)."""
    shape = found["mass_msun"].shape
    where = np.isfinite(found["mass_msun"])
    ii, _ = np.nonzero(where)
    solved = to_stars(batch, eos_index[ii], found["central_pseudo_enthalpy"][where],
                      {k: found[k][where] for k in SURFACE_FIELDS})
    fields = {}
    for k, v in solved.as_dict().items():
        full = np.full(shape, np.nan)
        full[where] = v
        fields[k] = full
    return Stars(**fields)


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
