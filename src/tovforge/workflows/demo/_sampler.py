"""Running the ensemble sampler (emcee, all walkers in one vectorised call)."""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass

import numpy as np

from ..._extras import require
from ...errors import InputError

__all__ = ["Chain", "run_chain"]

logger = logging.getLogger(__name__)


@dataclass(frozen=True)
class Chain:
    """An ensemble-sampler run.

    Attributes
    ----------
    samples : ndarray, shape (n_samples, d)
        Posterior samples: the chain after ``n_burn`` steps, every ``thin``-th
        step, all walkers.
    log_prob : ndarray, shape (n_samples,)
        Log posterior of the samples.
    chain : ndarray, shape (n_steps, n_walkers, d)
        Every step (burn-in included), for trace plots.
    acceptance_fraction : float
        Mean over walkers.
    autocorr_steps : ndarray, shape (d,)
        Integrated autocorrelation time per parameter, in steps (emcee's
        estimate after the burn-in; NaN if the chain is too short to say).
    n_burn, thin : int
    n_evaluations : int
        Posterior evaluations (walkers times steps, plus the start search).
    seconds : float
        Wall time of the run.
    """

    samples: np.ndarray
    log_prob: np.ndarray
    chain: np.ndarray
    acceptance_fraction: float
    autocorr_steps: np.ndarray
    n_burn: int
    thin: int
    n_evaluations: int
    seconds: float


def run_chain(log_prob, bounds, *, n_walkers: int = 32, n_steps: int = 1500, n_burn: int = 500,
              seed: int = 0, start_factor: int = 16) -> Chain:
    """Sample a posterior on a box with emcee's affine-invariant ensemble sampler.

    The walkers start at the ``n_walkers`` best of ``start_factor * n_walkers``
    uniform draws from the box (one vectorised call), which puts them in the
    region the data allow and leaves the burn-in to spread them out.  A
    progress line goes to the ``tovforge`` logger (INFO) every fifth of the run.

    Parameters
    ----------
    log_prob : callable
        Rows (n, d) -> log posterior (n,), -inf outside the support.
    bounds : array_like, shape (d, 2)
    n_walkers, n_steps, n_burn : int
    seed : int
        Seeds the start and the sampler's own random state (never the global one).

    Returns
    -------
    Chain
    """
    emcee = require("emcee", "demo", "the demo's sampler")

    b = np.asarray(bounds, float)
    d = b.shape[0]
    if n_walkers < 2 * d:
        raise InputError(f"n_walkers must be at least twice the number of parameters ({2 * d}). Got {n_walkers}.")
    if not 0 <= n_burn < n_steps:
        raise InputError(f"the burn-in ({n_burn} steps) must be shorter than the chain ({n_steps} steps).")
    rng = np.random.default_rng(seed)
    t0 = time.perf_counter()
    draws = b[:, 0] + (b[:, 1] - b[:, 0]) * rng.random((start_factor * n_walkers, d))
    lp = np.asarray(log_prob(draws), float)
    finite = np.isfinite(lp)
    if finite.sum() < n_walkers:
        raise InputError(f"only {int(finite.sum())} of {len(draws)} uniform draws from the box have a finite "
                         "posterior: the data exclude almost the whole box.")
    start = draws[np.argsort(np.where(finite, lp, -np.inf))[::-1][:n_walkers]]
    sampler = emcee.EnsembleSampler(n_walkers, d, log_prob, vectorize=True)
    # emcee keeps a legacy RandomState of its own: seed that one, not numpy's global state
    sampler.random_state = np.random.RandomState(int(rng.integers(2**32))).get_state()
    report = max(1, n_steps // 5)
    for i, _ in enumerate(sampler.sample(start, iterations=n_steps), start=1):
        if i % report == 0 or i == n_steps:
            logger.info(f"  step {i}/{n_steps}: mean acceptance {np.mean(sampler.acceptance_fraction):.2f}, "
                 f"{time.perf_counter() - t0:.1f} s")
    tau = np.asarray(sampler.get_autocorr_time(discard=n_burn, quiet=True, tol=0), float)
    thin = max(1, int(np.nanmax(tau) // 2)) if np.all(np.isfinite(tau)) else 1
    return Chain(
        samples=sampler.get_chain(discard=n_burn, thin=thin, flat=True),
        log_prob=sampler.get_log_prob(discard=n_burn, thin=thin, flat=True),
        chain=sampler.get_chain(),
        acceptance_fraction=float(np.mean(sampler.acceptance_fraction)),
        autocorr_steps=tau,
        n_burn=n_burn,
        thin=thin,
        n_evaluations=int(len(draws) + n_walkers * n_steps),
        seconds=time.perf_counter() - t0,
    )
