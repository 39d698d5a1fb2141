"""The end-to-end demo: grids -> surrogates -> check -> export -> a Bayesian fit with the exported file.

Every stage calls the library (no shelling out) and prints what it does; the
figures, tables and ``summary.md`` land in one output folder.
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ... import __version__
from ..._extras import require
from ..._files import check_output
from ..._provenance import provenance
from ...errors import InputError
from ...surrogate import GPSettings
from ._compare import compare_with_exact, time_likelihoods
from ._fit import sample_posterior
from ._stages import KINDS, build_grids, check_models, export_models, read_inputs, train_models
from ._summary import draw_figures, settings_numbers, write_summary

__all__ = ["DemoSettings", "DemoResult", "run_demo", "BAND_MASSES"]

logger = logging.getLogger(__name__)

#: Masses of the posterior bands (Msun).
BAND_MASSES = tuple(float(m) for m in np.round(np.arange(1.0, 2.401, 0.05), 2))
say = logger.info  # every line of the demo's report


@dataclass(frozen=True)
class DemoSettings:
    """What the demo runs, and how long.

    Attributes
    ----------
    train_spec, holdout_spec : Path
        Grid specs (TOML).  Each grid file is the spec's path with ``.h5``; an
        existing file of the same spec is reused, otherwise it is built.
    n_train : int or None
        Train on the first ``n_train`` usable points only (None: all).
    gp : GPSettings
        Hyperparameter search of the Gaussian process.
    sampler_model : {"spline", "gp"}
        Which exported evaluator the sampler calls.
    n_walkers, n_steps, n_burn : int
        Ensemble size, steps per walker, and steps discarded as burn-in.
    n_cross_check : int
        Posterior samples re-solved with the exact solver.
    data : Path or None
        Observations file (None: the invented data shipped with the package).
    mass_low_msun, n_mass, n_mass_ratio
        Likelihood grids (see :class:`tovforge.workflows.demo.Posterior`).
    band_masses : tuple of float
        Masses of the posterior bands, in Msun.
    seed : int
    workers : int or None
        Worker processes for grid building (None: all cores).
    progress : bool
        Progress bars while building grids.
    """

    train_spec: Path = Path("grids/demo-train.toml")
    holdout_spec: Path = Path("grids/demo-holdout.toml")
    n_train: int | None = None
    gp: GPSettings = field(default_factory=lambda: GPSettings(n_subset=512, n_restarts=0))
    sampler_model: str = "spline"
    n_walkers: int = 32
    n_steps: int = 1500
    n_burn: int = 500
    n_cross_check: int = 300
    data: Path | None = None
    mass_low_msun: float = 1.0
    n_mass: int = 65
    n_mass_ratio: int = 33
    band_masses: tuple = BAND_MASSES
    seed: int = 20260301
    workers: int | None = None
    progress: bool = True

    @classmethod
    def quick(cls, **changes) -> "DemoSettings":
        """A smoke run well under a minute: 512 training points, a short chain, 100 exact re-solves."""
        base = dict(n_train=512, gp=GPSettings(n_subset=128, n_restarts=0), n_steps=400, n_burn=150,
                    n_cross_check=100)
        return cls(**{**base, **changes})

    def check(self) -> None:
        """Raise InputError for settings that cannot work."""
        if self.sampler_model not in KINDS:
            raise InputError(f"sampler_model must be one of {', '.join(KINDS)}; got {self.sampler_model!r}.")
        if self.n_train is not None and self.n_train < 16:
            raise InputError(f"n_train must be at least 16. Got {self.n_train}.")
        if not 0 <= self.n_burn < self.n_steps:
            raise InputError(f"the burn-in n_burn ({self.n_burn} steps) must be shorter than the chain n_steps "
                             f"({self.n_steps}).")
        if self.n_cross_check < 2:
            raise InputError(f"n_cross_check must be at least 2. Got {self.n_cross_check}.")
        for key in ("n_mass", "n_mass_ratio"):
            v = getattr(self, key)
            if v < 3 or v % 2 == 0:
                raise InputError(f"{key} must be odd and at least 3 (Simpson's rule). Got {v}.")


@dataclass(frozen=True)
class DemoResult:
    """What :func:`run_demo` produced.

    Attributes
    ----------
    out : Path
    files : dict of str to Path
        Every output file by role (``summary``, ``corner``, ``mass_radius``, ...).
    numbers : dict
        The measured numbers also written to ``summary.json``.
    failures : tuple of str
        Stages that failed without stopping the demo (for example an export).
    """

    out: Path
    files: dict
    numbers: dict
    failures: tuple = ()


def run_demo(out="demo-output", settings: DemoSettings | None = None, overwrite: bool = False) -> DemoResult:
    """Run the whole demo and write its outputs into ``out``.

    BLAS runs on one thread (grid workers and GP hyperparameter workers are
    processes of their own): the demo's matrix products are small, and on a
    shared machine OpenBLAS threads that wait for a busy core made the
    sampler up to 25 times slower (measured: 6.5 ms instead of 0.24 ms per
    theta).  The timings are therefore per core.

    Parameters
    ----------
    out : path-like
        Output folder (created; its parent must exist).
    settings : DemoSettings, optional
    overwrite : bool
        Run into an existing folder that holds files (the outputs of an earlier
        run are replaced); refused otherwise.

    Every stage reports what it does and measures through the ``tovforge``
    logger at level INFO: ``tovforge demo`` prints these lines; from Python,
    ``logging.basicConfig(level=logging.INFO)`` shows them.

    Returns
    -------
    DemoResult

    Raises
    ------
    tovforge.errors.InputError
        For bad settings, specs or observations (checked before the long stages).
    """
    for module in ("emcee", "matplotlib", "threadpoolctl"):  # before the work, not after it
        require(module, "demo", "the demo")
    from threadpoolctl import threadpool_limits

    check_output(out, "demo folder", overwrite, folder=True)  # before the work, not after it
    with threadpool_limits(limits=1):
        return _run_demo(out, settings)


class _Stages:
    """Prints each stage's heading and measures its wall time (seconds by stage name, in order)."""

    def __init__(self, n: int) -> None:
        self.n = n
        self.seconds: dict = {}
        self.started = self._t = time.perf_counter()

    def begin(self, k: int, name: str, what: str) -> None:
        say("")
        say(f"[{k}/{self.n}] {name}: {what}")
        self._t = time.perf_counter()

    def end(self, name: str) -> None:
        self.seconds[name] = time.perf_counter() - self._t

    def run(self, k: int, name: str, what: str, fn, *args):
        """``fn(*args)`` as stage ``k``, then a line with its wall time."""
        self.begin(k, name, what)
        result = fn(*args)
        self.end(name)
        say(f"  ({name} took {self.seconds[name]:.1f} s)")
        return result


def _say_start(out: Path, obs) -> None:
    say(f"tovforge {__version__} demo -> {out}/")
    say(f"observations: {obs.path}")
    if obs.note:
        say(f"  NOTE: {obs.note}")


def _say_end(files: dict, total_seconds: float, failures: tuple) -> None:
    for k in ("corner", "mass_radius", "trace", "summary"):
        say(f"  {files[k]}")
    say("")
    say(f"demo finished in {total_seconds:.0f} s" +
        (f" with {len(failures)} failure(s): " + "; ".join(failures) if failures else "") + f"; see {files['summary']}")


def _run_demo(out, settings) -> DemoResult:
    s = settings or DemoSettings()
    s.check()
    stages = _Stages(8)
    out = Path(out)
    inputs = read_inputs(s)  # everything the user supplied, before the long stages
    out.mkdir(exist_ok=True)
    prov = provenance("scipy", "scikit-learn", "emcee")
    _say_start(out, inputs.obs)
    grids = stages.run(1, "grids", "exact solves over the EOS box (reused when the file of the same spec exists)",
                       build_grids, s, inputs.specs)
    gp = s.gp
    training = stages.run(2, "train", f"Gaussian process (hyperparameters on {gp.n_subset} points, "
                                      f"{gp.n_restarts} restarts, {gp.curve_groups} kernels per curve) and spline "
                                      "(r^5 RBF or tensor splines)", train_models, s, grids, out)
    checks = stages.run(3, "check", f"errors against the held-out exact solves of {grids.paths['holdout']}",
                        check_models, training.models, grids.paths["holdout"], out)
    exports = stages.run(4, "export", "each model as one NumPy-only Python file (self-checked against the library "
                                      "model)", export_models, s, training.models, checks.reports, out)
    ev = exports.evaluators[s.sampler_model]
    sampling = stages.run(5, "fit", f"posterior of ({', '.join(grids.names)}) with the exported {s.sampler_model} "
                                    f"evaluator, uniform prior on the box, emcee with {s.n_walkers} walkers x "
                                    f"{s.n_steps} steps", sample_posterior, s, inputs.obs, ev,
                          training.models[s.sampler_model], grids.names, out)
    timing = stages.run(6, "timing", "one likelihood call with the exported evaluator against exact solves",
                        time_likelihoods, s, inputs.obs, sampling, exports.evaluators)
    comparison = stages.run(7, "cross-check", f"{len(timing.subset)} posterior samples re-solved exactly (batched), "
                                              "bands and likelihoods compared",
                            compare_with_exact, s, sampling, timing, checks.reports[s.sampler_model])
    stages.begin(8, "figures", "corner plot, M-R and Lambda bands with the observations, chain traces, summary.md")
    figures = draw_figures(out, inputs, s.sampler_model, grids.names, ev.BOUNDS, sampling, comparison, s.n_burn,
                           units=ev.UNITS)
    files = {**checks.files, **exports.files, **sampling.files, **figures.files}
    stages.end("figures")
    numbers = {**prov, "settings": settings_numbers(s), "stages_seconds": stages.seconds, "grids": grids.numbers,
               "training": training.numbers, "check": checks.numbers, "export": exports.numbers,
               "fit": sampling.numbers, "timing": {**timing.numbers, **comparison.timing},
               "cross_check": comparison.numbers,
               "observations": {"path": str(inputs.obs.path), "note": inputs.obs.note, "names": list(inputs.obs.names)},
               "failures": list(exports.failures), "total_seconds": time.perf_counter() - stages.started}
    summary = write_summary(out, numbers, inputs.obs, files, checks.reports)
    files.update(summary.files)
    _say_end(files, numbers["total_seconds"], exports.failures)
    return DemoResult(out, files, numbers, exports.failures)
