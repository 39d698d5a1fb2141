"""The demo's fit: emcee on the posterior with the exported evaluator, the samples and their band."""

from __future__ import annotations

import logging
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

__all__ = ["Sampling", "sample_posterior"]

logger = logging.getLogger(__name__)
say = logger.info


@dataclass(frozen=True)
class Sampling:
    """The posterior and its samples.

    Attributes
    ----------
    post : Posterior
        The log-posterior with the exported evaluator.
    chain : Chain
    band : dict of str to ndarray
        Columns of ``posterior_band.csv`` (``mass`` in Msun, radius quantiles in km, Lambda quantiles).
    files : dict of str to Path
        ``samples``, ``table`` and ``band``.
    numbers : dict
        What ``summary.json`` says of the fit.
    """

    post: object
    chain: object
    band: dict
    files: dict
    numbers: dict


def _interval(x) -> tuple[float, float, float]:
    lo, med, hi = np.quantile(np.asarray(x, float), [0.05, 0.5, 0.95])
    return float(med), float(lo), float(hi)


def _say_observations(obs) -> None:
    for p in obs.pulsars:
        say(f"  pulsar {p.name:<20} M = {p.mass_msun:.3f} +- {p.mass_sigma_msun:.3f} Msun, "
            f"R = {p.radius_km:.2f} +- {p.radius_sigma_km:.2f} km, correlation {p.correlation:+.2f}")
    for m in obs.mergers:
        say(f"  merger {m.name:<20} chirp mass {m.chirp_mass_msun:.4f} Msun, q in [{m.mass_ratio_min:g}, "
            f"{m.mass_ratio_max:g}], Lambda-tilde = {m.lambda_tilde:g} +- {m.lambda_tilde_sigma:g}")


def _error_budget(ev, obs) -> tuple:
    """The evaluator's held-out error beside each measurement's sigma; a warning where it is too large."""
    from ._observations import WARN_RATIO, error_budget

    budget = error_budget(ev.CHECK, obs) if ev.CHECK else ()
    for b in budget:
        unit = " km" if b.quantity == "radius" else ""
        say(f"  {b.name:<27} emulator error (held-out p95) {b.emulator_p95:.3g}{unit} = {b.ratio:.2f} of the "
            f"{b.quantity} sigma")
        if b.too_large:
            warnings.warn(f"{b.name}: the emulator's error is {b.ratio:.2f} of the {b.quantity} sigma, above "
                          f"{WARN_RATIO:g}: it may bias this fit; train on more points or use the exact solver",
                          UserWarning, stacklevel=2)
    if any(b.too_large for b in budget):
        warnings.warn(f"{sum(b.too_large for b in budget)} measurement(s) are as sharp as the emulator's error; "
                      "read the posterior with care.", UserWarning, stacklevel=2)
    return budget


def _say_chain(settings, chain) -> None:
    tau = chain.autocorr_steps
    kept = settings.n_steps - settings.n_burn
    say(f"  {chain.n_evaluations} posterior evaluations in {chain.seconds:.1f} s; acceptance "
        f"{chain.acceptance_fraction:.2f}; autocorrelation time {np.nanmax(tau):.0f} steps "
        f"({kept / np.nanmax(tau):.0f} times shorter than the kept chain); "
        f"{len(chain.samples)} samples kept (one step in {chain.thin} after the first {settings.n_burn})")
    if not np.nanmax(tau) * 10 < kept:
        warnings.warn("the kept chain is shorter than 10 autocorrelation times: take the intervals as rough",
                      UserWarning, stacklevel=2)


def _parameter_intervals(chain, names) -> dict:
    intervals = {}
    for i, name in enumerate(names):
        med, lo, hi = _interval(chain.samples[:, i])
        intervals[name] = {"median": med, "p05": lo, "p95": hi}
        say(f"  {name:<10} {med:.4g}  (90 %: {lo:.4g} .. {hi:.4g})")
    return intervals


def _write_samples(out: Path, settings, model, chain, names) -> dict:
    """``posterior_samples.csv``, and through the samples tables (same model as the evaluator) the per-sample
    observables and their band."""
    from ...tables import samples_table

    samples_csv = out / "posterior_samples.csv"
    header = ",".join(names) + ",log_posterior"
    np.savetxt(samples_csv, np.column_stack([chain.samples, chain.log_prob]), delimiter=",", header=header,
               comments="", fmt="%.17g")
    tsum = samples_table(out / "posterior_table.csv", model, samples_csv,
                         quantities=("mass_max", "radius", "lambda"), masses=settings.band_masses,
                         band=out / "posterior_band.csv", ignore=("log_posterior",), sigma=False, progress=False,
                         command="tovforge demo", overwrite=True)
    return {"samples": samples_csv, "table": tsum.path, "band": out / "posterior_band.csv"}


def _read_band(path: Path) -> tuple[dict, dict]:
    """The band's columns and the derived quantities (M_max, R and Lambda at 1.4 Msun) with their intervals."""
    from ...tables import read_table

    band_t = read_table(path)
    band = {k: np.asarray(v, float) for k, v in band_t.columns.items()}
    i14 = int(np.argmin(np.abs(band["mass"] - 1.4)))
    derived = {"mass_max_msun": {k: float(band_t.meta[f"mass_max_{k}"]) for k in ("median", "p05", "p95")},
               "radius_1.4_km": {k: float(band[f"radius_{k}"][i14]) for k in ("median", "p05", "p95")},
               "lambda_1.4": {k: float(band[f"lambda_{k}"][i14]) for k in ("median", "p05", "p95")}}
    for k, v in derived.items():
        say(f"  {k:<14} {v['median']:.4g}  (90 %: {v['p05']:.4g} .. {v['p95']:.4g})")
    return band, derived


def sample_posterior(settings, obs, ev, model, names, out: Path) -> Sampling:
    """Sample the posterior of the EOS parameters with the exported evaluator ``ev`` (emcee).

    ``model`` is the library model ``ev`` was exported from; it computes the
    per-sample tables and the band.
    """
    from ._likelihood import Posterior
    from ._observations import WARN_RATIO
    from ._sampler import run_chain

    s = settings
    _say_observations(obs)
    budget = _error_budget(ev, obs)
    post = Posterior(ev, obs, mass_low_msun=s.mass_low_msun, n_mass=s.n_mass, n_mass_ratio=s.n_mass_ratio)
    chain = run_chain(post, ev.BOUNDS, n_walkers=s.n_walkers, n_steps=s.n_steps, n_burn=s.n_burn, seed=s.seed)
    _say_chain(s, chain)
    parameters = _parameter_intervals(chain, names)
    files = _write_samples(out, s, model, chain, names)
    band, derived = _read_band(files["band"])
    numbers = {"sampler_model": s.sampler_model, "n_walkers": s.n_walkers, "n_steps": s.n_steps,
               "n_burn": s.n_burn, "thin": chain.thin, "n_samples": int(len(chain.samples)),
               "acceptance": chain.acceptance_fraction, "autocorr_steps": chain.autocorr_steps.tolist(),
               "seconds": chain.seconds, "n_evaluations": chain.n_evaluations,
               "parameters": parameters, "derived": derived,
               "error_budget": [{"name": b.name, "quantity": b.quantity, "emulator_p95": b.emulator_p95,
                                 "measurement_sigma": b.measurement_sigma, "ratio": b.ratio,
                                 "too_large": b.too_large} for b in budget],
               "error_budget_warn_ratio": WARN_RATIO}
    return Sampling(post, chain, band, files, numbers)
