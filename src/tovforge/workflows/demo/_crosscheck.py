"""Cross-check of the emulated posterior: posterior samples re-solved with the exact solver."""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

from ...tables import QUANTILES

__all__ = ["CrossCheck", "band", "cross_check", "MIN_FRACTION"]

#: A mass enters the band comparison only where at least this fraction of the
#: samples has a stable star of that mass in both the emulated and the exact
#: answers (near the top of the band a quantile rests on few samples).
MIN_FRACTION = 0.5


def band(values: np.ndarray) -> dict:
    """Median and 90 % band of each column over its finite entries.

    Parameters
    ----------
    values : ndarray, shape (n_samples, n_masses)
        NaN where a sample has no star of that mass.

    Returns
    -------
    dict
        ``median``, ``p05``, ``p95`` (the quantile levels of
        :data:`tovforge.tables.QUANTILES`, as the samples tables use)
        and ``fraction`` (finite entries per column), each of shape (n_masses,).
    """
    values = np.asarray(values, float)
    out = {k: np.full(values.shape[1], np.nan) for k in QUANTILES}
    finite = np.isfinite(values)
    for j in range(values.shape[1]):
        v = values[finite[:, j], j]
        if v.size:
            for k, level in QUANTILES.items():
                out[k][j] = np.quantile(v, level)
    out["fraction"] = finite.mean(axis=0)
    return out


@dataclass(frozen=True)
class CrossCheck:
    """Emulated against exact answers on the same posterior samples.

    Attributes
    ----------
    n_samples : int
    masses : ndarray, shape (q,)
        Masses of the band, in Msun.
    emulated, exact : dict
        :func:`band` of R(M) in km from the evaluator and from the solver, each
        mass over the samples that have a star of that mass in both.
    compared : ndarray of bool, shape (q,)
        Masses entering the distances (see :data:`MIN_FRACTION`).
    n_star_mismatch : int
        (sample, mass) pairs with a star in one answer only (M_max on either
        side of the mass).
    band_distance_km : dict
        Largest |emulated - exact| over the compared masses, per band line
        (``median``, ``p05``, ``p95``), in km.
    radius_abs_p95_km, radius_abs_max_km : float
        95th percentile and maximum of |R_emulated - R_exact| over every
        (sample, mass) pair that both answer.
    mass_max_abs_p95_msun, mass_max_abs_max_msun : float
        The same for M_max.
    log_like_abs_median, log_like_abs_p95 : float
        |log L_emulated - log L_exact| of the whole likelihood over the samples.
    exact_seconds, emulated_seconds : float
        Wall time of the likelihood over all samples, exact and emulated.
    exact_solve_seconds : float
        Wall time of the exact solves for the band.
    """

    n_samples: int
    masses: np.ndarray
    emulated: dict
    exact: dict
    compared: np.ndarray
    band_distance_km: dict
    n_star_mismatch: int
    radius_abs_p95_km: float
    radius_abs_max_km: float
    mass_max_abs_p95_msun: float
    mass_max_abs_max_msun: float
    log_like_abs_median: float
    log_like_abs_p95: float
    exact_seconds: float
    emulated_seconds: float
    exact_solve_seconds: float


def cross_check(posterior, exact_posterior, samples, masses) -> CrossCheck:
    """Re-evaluate posterior samples exactly and compare bands and likelihoods.

    Parameters
    ----------
    posterior : Posterior
        With the exported evaluator as its model.
    exact_posterior : Posterior
        The same observations with :class:`~tovforge.workflows.demo._likelihood.ExactModel`.
    samples : ndarray, shape (n, d)
    masses : array_like, shape (q,)
        Masses of the R(M) band, in Msun.

    Returns
    -------
    CrossCheck
    """
    samples = np.asarray(samples, float)
    masses = np.asarray(masses, float)
    t0 = time.perf_counter()
    r_exact = exact_posterior.model.radius(samples, masses).value
    t_solve = time.perf_counter() - t0
    r_emu = np.asarray(posterior.model.radius(samples, masses).value, float)

    t0 = time.perf_counter()
    ll_exact, mm_exact = exact_posterior.terms(samples)
    t_exact = time.perf_counter() - t0
    t0 = time.perf_counter()
    ll_emu, mm_emu = posterior.terms(samples)
    t_emu = time.perf_counter() - t0

    # bands over the same samples at each mass (those with a star there in both answers): then each
    # band line moves by at most the largest per-sample difference (a quantile is 1-Lipschitz)
    both = np.isfinite(r_emu) & np.isfinite(r_exact)
    b_emu, b_exact = band(np.where(both, r_emu, np.nan)), band(np.where(both, r_exact, np.nan))
    compared = b_emu["fraction"] >= MIN_FRACTION
    only_one = int(np.sum(np.isfinite(r_emu) != np.isfinite(r_exact)))
    dist = {k: float(np.max(np.abs(b_emu[k] - b_exact[k])[compared])) if compared.any() else float("nan")
            for k in QUANTILES}
    dr = np.abs(r_emu - r_exact)[both]
    mm_ok = np.isfinite(mm_emu) & np.isfinite(mm_exact)
    dm = np.abs(mm_emu - mm_exact)[mm_ok]
    tot_emu, tot_exact = ll_emu.sum(axis=1), ll_exact.sum(axis=1)
    ll_ok = np.isfinite(tot_emu) & np.isfinite(tot_exact)
    dll = np.abs(tot_emu - tot_exact)[ll_ok]

    def stat(x, q):
        return float(np.quantile(x, q)) if x.size else float("nan")

    return CrossCheck(
        n_samples=len(samples), masses=masses, emulated=b_emu, exact=b_exact, compared=compared,
        band_distance_km=dist, n_star_mismatch=only_one,
        radius_abs_p95_km=stat(dr, 0.95), radius_abs_max_km=float(dr.max()) if dr.size else float("nan"),
        mass_max_abs_p95_msun=stat(dm, 0.95), mass_max_abs_max_msun=float(dm.max()) if dm.size else float("nan"),
        log_like_abs_median=stat(dll, 0.5), log_like_abs_p95=stat(dll, 0.95),
        exact_seconds=t_exact, emulated_seconds=t_emu, exact_solve_seconds=t_solve,
    )
