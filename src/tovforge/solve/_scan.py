"""Phase 1 of a sequence solve: the coarse scan, the first maximum and twin branches.

A coarse sequence, log-spaced in the central pseudo-enthalpy ``h_c``, is
solved for every EOS at once (cheap steps, ``SequenceSettings.scan_steps``;
the full steps for EOS with jumps, see below).
On it:

- the *stable branch* is the connected rise of ``M(h_c)`` that ends at the
  first maximum after the last minimum before it (turning-point criterion:
  a radial mode changes stability at each extremum of ``M``);
- a first-order transition whose jump exceeds Seidov's limit
  (``Delta e / e_t > 1/2 + 3 p_t / (2 e_t)``; Seidov 1971, Sov. Astron. 15,
  347) makes ``M(h_c)`` turn down at the transition enthalpy ``h_t`` (a cusp:
  the stars with a small core of the dense phase are unstable), and ``h_t`` is
  a maximum where the branch rises into it, however shallow the dip after
  it.  At every jump the scan also solves the stars at ``h_t`` and just above
  it (:data:`JUMP_OFFSETS`), where ``M(h_c)`` may turn within a few per cent of
  ``h_t``; EOS without jumps are scanned at the regular points only;
- a *twin branch* is a later rise that follows a minimum of ``M`` passed
  with the radius still decreasing (stability regained, Bardeen, Thorne &
  Meltzer 1966, ApJ 145, 505); the scan brackets its minimum and maximum,
  which later phases locate exactly;
- the *status* of each EOS: no maximum in the scanned range (or the EOS
  ends before it), or too many failed stars.

Where to extend: a new criterion for the end of the stable branch belongs in
:func:`first_maximum`; third and later branches in :func:`twin_branch`.
Both work on the scan arrays only (no solver calls), so they can be tested
on hand-made ``M(h_c)`` rows; later phases read only the fields of
:class:`Scan`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..eos import seidov_limit
from ..status import Status
from ._surface import integrate

__all__ = ["Scan", "scan", "first_maximum", "twin_branch", "turning_jumps", "JUMP_OFFSETS"]

#: Relative offsets ``h_c = h_t (1 + offset)`` of the stars the scan adds at every
#: jump of the energy density: one just below (so that a maximum at the jump
#: means a rise into it), the star centred on the transition, and stars with a
#: growing core of the dense phase, 24 geometrically spaced offsets from 1e-3 to
#: 0.3 (28 % apart).  Just above a jump ``M(h_c)`` can turn twice within a few
#: per cent of ``h_t`` (a shallow maximum and minimum, or the dip after a cusp),
#: which the regular spacing (about 15 % in ``h_c``) would miss.  Measured on 512
#: EOS of the piecewise-polytrope-transition default box: with the 4 offsets
#: 1e-3, 3e-3, 1e-2, 3e-2 used before, 3 EOS had a maximum 0.6-6e-3 above h_t
#: followed by a dip 1.4e-6 to 2.7e-5 Msun deep that fell between the stars, and
#: the far maximum (1.6-1.7 Msun) was taken for the first (0.58-1.15 Msun); these
#: offsets find all three, and no other M_max moved by more than 4e-8 Msun.
#: Closer to ``h_t`` the masses differ by less than the integration error of stars
#: with so small a core; a dip after a cusp narrower than 1e-3 h_t falls between
#: them and is still found: Seidov's criterion, not the scan, decides the cusp.
JUMP_OFFSETS = (-1e-3, 0.0) + tuple(float(v) for v in np.geomspace(1e-3, 0.3, 24))


@dataclass(frozen=True)
class Scan:
    """The coarse scan of many EOS.

    Attributes
    ----------
    ln_h : ndarray, shape (n_eos, n_columns)
        ``ln h_c`` of the scanned stars, increasing: ``n_scan`` evenly spaced
        points per EOS, plus :data:`JUMP_OFFSETS` at each jump; rows with
        fewer points end in NaN.
    h_top : ndarray, shape (n_eos,)
        Largest ``h_c`` scanned (``SequenceSettings.h_high``, or just below
        the EOS's largest enthalpy).
    mass_km, radius_km : ndarray, shape (n_eos, n_columns)
        Gravitational mass (geometrised, km) and radius; NaN where a star
        failed (and in the padding).
    at_jump : ndarray of bool, shape (n_eos, n_columns)
        Stars centred on a jump of the energy density.
    turn : ndarray of bool, shape (n_eos, n_columns)
        Those of them whose jump exceeds Seidov's limit (``M`` turns down after them).
    peak : ndarray of int, shape (n_eos,)
        Index of the first maximum of ``M`` (-1 if none).
    start : ndarray of int, shape (n_eos,)
        First index of the rise that ends at ``peak``.
    twin_min, twin_peak : ndarray of int, shape (n_eos,)
        Scan indices bracketing a second stable branch: its minimum lies
        between ``twin_min - 1`` (or the cusp at ``peak``) and ``twin_min + 1``,
        its maximum at ``twin_peak`` (a turning jump) or next to it; -1 where
        there is none.
    status : ndarray of int, shape (n_eos,)
        :class:`~tovforge.status.Status` codes: ``OK``, ``NO_MAXIMUM``,
        ``EOS_ENDS`` or ``SOLVER_FAILURE``.
    nfev : int
        Right-hand-side evaluations.
    """

    ln_h: np.ndarray
    h_top: np.ndarray
    mass_km: np.ndarray
    radius_km: np.ndarray
    at_jump: np.ndarray
    turn: np.ndarray
    peak: np.ndarray
    start: np.ndarray
    twin_min: np.ndarray
    twin_peak: np.ndarray
    status: np.ndarray
    nfev: int

    @property
    def ok(self) -> np.ndarray:
        """Mask of the EOS with a first maximum (status ``OK``)."""
        return self.status == Status.OK

    @property
    def twin(self) -> np.ndarray:
        """Mask of the EOS with a second stable branch (and a first maximum)."""
        return self.ok & (self.twin_peak >= 0)


def turning_jumps(batch) -> np.ndarray:
    """Jumps of each EOS above Seidov's limit, where ``M(h_c)`` turns down.

    Parameters
    ----------
    batch : EOSBatch

    Returns
    -------
    ndarray, shape (n_eos, n_jumps)
        The transition enthalpy ``h_t`` of every jump with ``Delta e / e_t >
        1/2 + 3 p_t / (2 e_t)`` (Seidov 1971, Sov. Astron. 15, 347), ``inf``
        elsewhere.
    """
    jumps = np.asarray(batch.jumps, float)
    out = np.full(jumps.shape, np.inf)
    rows, cols = np.nonzero(np.isfinite(jumps) & (jumps > 0))
    if rows.size:
        h = jumps[rows, cols]
        lanes = batch.lanes(rows)
        p, e_above = lanes.eval(h, h * (1.0 + 1e-9))[:2]
        e_below = lanes.eval(h, h * (1.0 - 1e-9))[1]
        turns = (e_above - e_below) / e_below > seidov_limit(p, e_below)
        out[rows[turns], cols[turns]] = h[turns]
    return out


def _scan_points(batch, settings):
    """``ln h_c`` of the scan (n_eos, n_columns), the masks of stars centred on jumps and on turning jumps."""
    n_eos = batch.n_eos
    h_hi = np.minimum(settings.h_high, batch.h_max * 0.999)
    short = h_hi <= settings.h_low * 1.5
    h_hi = np.where(short, settings.h_low * 1.5, h_hi)
    frac = np.linspace(0.0, 1.0, settings.n_scan)
    ln_scan = np.log(settings.h_low) + frac[None, :] * (np.log(h_hi) - np.log(settings.h_low))[:, None]
    none = np.zeros(ln_scan.shape, dtype=bool)
    jumps = np.asarray(batch.jumps, float)
    jumps = np.where(np.isfinite(jumps) & (jumps > settings.h_low) & (jumps < h_hi[:, None]), jumps, np.inf)
    if not np.isfinite(jumps).any():
        return ln_scan, none, none, h_hi
    turns = np.isfinite(turning_jumps(batch)) & np.isfinite(jumps)
    offsets = np.asarray(JUMP_OFFSETS)
    extra = (jumps[:, :, None] * (1.0 + offsets)).reshape(n_eos, -1)
    extra = np.where(extra < h_hi[:, None], np.log(extra), np.inf)
    centred = np.broadcast_to(offsets == 0.0, (n_eos, jumps.shape[1], offsets.size))
    at_jump = centred.reshape(n_eos, -1) & np.isfinite(extra)
    turn = (centred & turns[:, :, None]).reshape(n_eos, -1) & np.isfinite(extra)
    ln_all = np.concatenate([ln_scan, extra], axis=1)
    order = np.argsort(ln_all, axis=1, kind="stable")
    width = int(np.isfinite(ln_all).sum(axis=1).max())
    ln_all = np.take_along_axis(ln_all, order, 1)[:, :width]

    def sort(mask):
        return np.take_along_axis(np.concatenate([none, mask], axis=1), order, 1)[:, :width]

    return np.where(np.isfinite(ln_all), ln_all, np.nan), sort(at_jump), sort(turn), h_hi


def scan(batch, settings) -> Scan:
    """Solve the coarse scan of every EOS of ``batch`` and locate the first maximum and twin branches.

    Parameters
    ----------
    batch : EOSBatch
    settings : SequenceSettings
        ``n_scan``, ``h_low``, ``h_high`` and ``scan_steps`` (``steps`` when the
        scan adds stars at jumps) are used.

    Returns
    -------
    Scan
    """
    n_eos = batch.n_eos
    ln_scan, at_jump, turn, h_hi = _scan_points(batch, settings)
    n_col = ln_scan.shape[1]
    has = np.isfinite(ln_scan)
    rows, cols = np.nonzero(has)
    # near a jump M(h_c) can turn by 1e-6 of itself: more than the cheap scan steps resolve (1e-5 there)
    steps = settings.steps if at_jump.any() else settings.scan_steps
    sv, nfev = integrate(batch, rows, np.exp(ln_scan[rows, cols]), steps)
    mass = np.full((n_eos, n_col), np.nan)
    radius = np.full((n_eos, n_col), np.nan)
    mass[rows, cols] = sv["mass"]
    radius[rows, cols] = sv["radius"]
    peak, start = first_maximum(mass, turn)
    twin_min, twin_peak = twin_branch(mass, radius, peak, turn)
    status = np.full(n_eos, int(Status.OK), dtype=np.intp)
    none = peak < 0
    status[none] = np.where(batch.h_max[none] < settings.h_high, int(Status.EOS_ENDS), int(Status.NO_MAXIMUM))
    status[np.isfinite(mass).sum(axis=1) < settings.n_scan // 2] = int(Status.SOLVER_FAILURE)
    return Scan(ln_scan, h_hi, mass, radius, at_jump, turn, peak, start, twin_min, twin_peak, status, nfev)


def first_maximum(M, turn=None):
    """Index of the first maximum of each row, and the start of the rise to it.

    Parameters
    ----------
    M : ndarray, shape (n_eos, n)
        Masses along increasing ``h_c`` (NaN where a star failed).
    turn : ndarray of bool, shape (n_eos, n), optional
        Stars centred on a jump above Seidov's limit: a maximum wherever the
        masses rise into them, whatever the next mass (the dip after such a
        cusp can be narrower than the scan's spacing).

    Returns
    -------
    peak : ndarray of int, shape (n_eos,)
        Index ``i`` with ``M[i-1] < M[i] >= M[i+1]``, or with ``M[i-1] < M[i]``
        at a turning jump (the first one), -1 if none.
    start : ndarray of int, shape (n_eos,)
        First index after the last fall before ``peak`` (and not before the
        first finite mass).
    """
    n_eos, n = M.shape
    Mf = np.where(np.isfinite(M), M, -np.inf)
    rising = Mf[:, 1:] > Mf[:, :-1]  # rising[k]: M[k+1] > M[k]
    # peak at i (1 <= i <= n-2): rising[i-1] and not rising[i]
    peak = np.zeros_like(Mf, dtype=bool)
    peak[:, 1:-1] = rising[:, :-1] & ~rising[:, 1:] & np.isfinite(M[:, 1:-1]) & np.isfinite(M[:, 2:])
    if turn is not None:
        peak[:, 1:] |= turn[:, 1:] & rising & np.isfinite(M[:, 1:])
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


def twin_branch(M, R, ipk, turn=None):
    """Scan indices of the minimum and maximum of a second stable branch after the first maximum.

    Beyond the first maximum, M(h_c) can rise again for two reasons: a second
    stable branch (twin stars) or the unstable spiral towards infinite
    density.  At an extremum of M a radial mode changes stability; it regains
    stability where the mass-radius curve turns clockwise (Bardeen, Thorne &
    Meltzer 1966, ApJ 145, 505), i.e. at a minimum of M passed with the
    radius still decreasing.  Only then is the rising part a stable branch,
    and only if it ends in a maximum inside the scan (a fall, or a turning
    jump).

    Parameters
    ----------
    M, R : ndarray, shape (n_eos, n)
        Masses and radii along increasing ``h_c`` (any consistent units).
    ipk : ndarray of int, shape (n_eos,)
        First maxima from :func:`first_maximum`.
    turn : ndarray of bool, shape (n_eos, n), optional
        Stars centred on turning jumps (see :func:`first_maximum`).

    Returns
    -------
    j_min : ndarray of int, shape (n_eos,)
        The minimum lies between ``j_min - 1`` and ``j_min + 1``; after a
        cusp whose dip the scan does not resolve (the mass already rises at
        the next star) ``j_min`` is the cusp itself.  -1 if no twin branch.
    k_peak : ndarray of int, shape (n_eos,)
        The scan's maximum of the twin branch (-1 if none).
    """
    n_eos, n = M.shape
    j_out = np.full(n_eos, -1, dtype=np.intp)
    k_out = np.full(n_eos, -1, dtype=np.intp)
    turn = np.zeros(M.shape, dtype=bool) if turn is None else turn
    for r in np.flatnonzero(ipk >= 0):  # bookkeeping per EOS
        m, rad, tr = M[r], R[r], turn[r]
        i = ipk[r]
        j_min = -1
        if tr[i] and i + 1 < n and np.isfinite(m[i + 1]) and m[i + 1] > m[i]:
            if rad[i + 1] < rad[i]:
                j_min = i  # a dip narrower than the scan's spacing after the cusp
        else:
            for j in range(i + 1, n - 1):
                if not (np.isfinite(m[j - 1]) and np.isfinite(m[j]) and np.isfinite(m[j + 1])):
                    break
                if m[j] <= m[j - 1] and m[j] < m[j + 1]:  # local minimum
                    if rad[j + 1] < rad[j - 1]:  # clockwise turn: stability regained
                        j_min = j
                    break
        if j_min < 0:
            continue
        k = j_min + 1
        while k + 1 < n and np.isfinite(m[k + 1]) and m[k + 1] > m[k] and not tr[k]:
            k += 1
        if tr[k] or (k + 1 < n and np.isfinite(m[k + 1])):  # a maximum inside the scan
            j_out[r], k_out[r] = j_min, k
    return j_out, k_out
