"""Phase 1 of a sequence solve: the coarse scan, the first maximum and twin branches.

A coarse sequence, log-spaced in the central pseudo-enthalpy ``h_c``, is
solved for every EOS at once (cheap steps, ``SequenceSettings.scan_steps``).
On it:

- the *stable branch* is the connected rise of ``M(h_c)`` that ends at the
  first maximum after the last minimum before it (turning-point criterion:
  a radial mode changes stability at each extremum of ``M``);
- a *twin branch* is a later rise that follows a minimum of ``M`` passed
  with the radius still decreasing (stability regained, Bardeen, Thorne &
  Meltzer 1966, ApJ 145, 505); its maximum is reported at scan resolution;
- the *status* of each EOS: no maximum in the scanned range (or the EOS
  ends before it), or too many failed stars.

Where to extend: a new criterion for the end of the stable branch (e.g.
a phase transition that makes ``M(h_c)`` turn over early) belongs in
:func:`first_maximum`; a finer treatment of second branches in
:func:`twin_maximum`.  Both work on the scan arrays only (no solver calls),
so they can be tested on hand-made ``M(h_c)`` rows; later phases read only
the fields of :class:`Scan`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..status import Status
from ..units import MSUN_KM
from ._surface import integrate

__all__ = ["Scan", "scan", "first_maximum", "twin_maximum"]


@dataclass(frozen=True)
class Scan:
    """The coarse scan of many EOS.

    Attributes
    ----------
    ln_h : ndarray, shape (n_eos, n_scan)
        ``ln h_c`` of the scanned stars, evenly spaced per EOS.
    h_top : ndarray, shape (n_eos,)
        Largest ``h_c`` scanned (``SequenceSettings.h_high``, or just below
        the EOS's largest enthalpy).
    mass_km, radius_km : ndarray, shape (n_eos, n_scan)
        Gravitational mass (geometrised, km) and radius; NaN where a star
        failed.
    peak : ndarray of int, shape (n_eos,)
        Index of the first maximum of ``M`` (-1 if none).
    start : ndarray of int, shape (n_eos,)
        First index of the rise that ends at ``peak``.
    twin_mass_max_msun : ndarray, shape (n_eos,)
        Maximum of a second stable branch in Msun (NaN if none).
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
    peak: np.ndarray
    start: np.ndarray
    twin_mass_max_msun: np.ndarray
    status: np.ndarray
    nfev: int

    @property
    def ok(self) -> np.ndarray:
        """Mask of the EOS with a first maximum (status ``OK``)."""
        return self.status == Status.OK


def scan(batch, settings) -> Scan:
    """Solve the coarse scan of every EOS of ``batch`` and locate the first maximum.

    Parameters
    ----------
    batch : EOSBatch
    settings : SequenceSettings
        ``n_scan``, ``h_low``, ``h_high`` and ``scan_steps`` are used.

    Returns
    -------
    Scan
    """
    n_eos = batch.n_eos
    h_hi = np.minimum(settings.h_high, batch.h_max * 0.999)
    short = h_hi <= settings.h_low * 1.5
    h_hi = np.where(short, settings.h_low * 1.5, h_hi)
    frac = np.linspace(0.0, 1.0, settings.n_scan)
    ln_scan = np.log(settings.h_low) + frac[None, :] * (np.log(h_hi) - np.log(settings.h_low))[:, None]
    idx = np.repeat(np.arange(n_eos), settings.n_scan)
    sv, nfev = integrate(batch, idx, np.exp(ln_scan).ravel(), settings.scan_steps)
    mass = sv["mass"].reshape(n_eos, -1)
    radius = sv["radius"].reshape(n_eos, -1)
    peak, start = first_maximum(mass)
    twin = twin_maximum(mass, radius, peak) / MSUN_KM
    status = np.full(n_eos, int(Status.OK), dtype=np.intp)
    none = peak < 0
    status[none] = np.where(batch.h_max[none] < settings.h_high, int(Status.EOS_ENDS), int(Status.NO_MAXIMUM))
    status[np.isfinite(mass).sum(axis=1) < settings.n_scan // 2] = int(Status.SOLVER_FAILURE)
    return Scan(ln_scan, h_hi, mass, radius, peak, start, twin, status, nfev)


def first_maximum(M):
    """Index of the first maximum of each row, and the start of the rise to it.

    Parameters
    ----------
    M : ndarray, shape (n_eos, n)
        Masses along increasing ``h_c`` (NaN where a star failed).

    Returns
    -------
    peak : ndarray of int, shape (n_eos,)
        Index ``i`` with ``M[i-1] < M[i] >= M[i+1]`` (the first one), -1 if none.
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


def twin_maximum(M, R, ipk):
    """Maximum mass of a second stable branch after the first maximum (NaN if none).

    Beyond the first maximum, M(h_c) can rise again for two reasons: a second
    stable branch (twin stars) or the unstable spiral towards infinite
    density.  At an extremum of M a radial mode changes stability; it regains
    stability where the mass-radius curve turns clockwise (Bardeen, Thorne &
    Meltzer 1966, ApJ 145, 505), i.e. at a minimum of M passed with the
    radius still decreasing.  Only then is the rising part a stable branch.

    Parameters
    ----------
    M, R : ndarray, shape (n_eos, n)
        Masses and radii along increasing ``h_c`` (any consistent units).
    ipk : ndarray of int, shape (n_eos,)
        First maxima from :func:`first_maximum`.

    Returns
    -------
    ndarray, shape (n_eos,)
        In the unit of ``M``.
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
