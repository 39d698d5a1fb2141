"""The end-to-end demo: grids, surrogates, check, export, and a Bayesian fit with the exported file.

:func:`run_demo` (``tovforge demo``, ``make demo``) reuses or builds the demo
grids, trains a Gaussian process and a spline surrogate, checks both against
held-out exact solves, exports both as standalone files, and fits the
piecewise-polytrope parameters to a small INVENTED data set (three made-up
pulsars with mass-radius measurements and one made-up merger with a
Lambda-tilde constraint) with emcee calling the exported evaluator.  It then
times the likelihood against exact solves, re-solves a few hundred posterior
samples exactly to show how far the emulated band is from the exact one, and
writes a corner plot, the mass-radius band and ``summary.md``.
"""

from __future__ import annotations

from ._crosscheck import CrossCheck, band, cross_check
from ._likelihood import ExactModel, Posterior, lowest_mass_ratio, simpson_weights
from ._observations import INVENTED_DATA, MassRadius, MergerTides, Observations, load_observations
from ._plots import band_plot, corner_plot, trace_plot
from ._run import BAND_MASSES, DemoResult, DemoSettings, run_demo
from ._sampler import Chain, run_chain
from ._stages import import_evaluator

__all__ = [
    "BAND_MASSES",
    "INVENTED_DATA",
    "Chain",
    "CrossCheck",
    "DemoResult",
    "DemoSettings",
    "ExactModel",
    "MassRadius",
    "MergerTides",
    "Observations",
    "Posterior",
    "band",
    "band_plot",
    "corner_plot",
    "cross_check",
    "import_evaluator",
    "load_observations",
    "lowest_mass_ratio",
    "run_chain",
    "run_demo",
    "simpson_weights",
    "trace_plot",
]
