"""Polyharmonic splines on scattered designs: the r^5 kernel plus a polynomial, in a stretched metric."""

from __future__ import annotations

import dataclasses
import logging
import time
import warnings
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg

from ..errors import InputError
from . import _runtime as rt
from ._data import TrainingData
from ._errors import calibrate_error_model, choose_by_loo, rbf_loo_residuals, score_columns
from ._prepare import (FitResult, degenerate_kernels, fit_gaussian_process, matern_kernel, prepare,
                       saddle_matrix, space_filling_subset, trend_matrix, trend_powers, trend_residuals)
from ._record import Record

__all__ = ["SplineSettings", "RBFFit", "fit_rbf", "DENSE_LIMIT", "MIN_STRETCH", "STRETCH_OPTIONS", "stretch_candidates"]

logger = logging.getLogger(__name__)

#: Most training points of a dense (global) RBF fit (the spline kind; each spline of a two-sided model).  Above it the spline kind
#: fits the local method (a partition of unity of the same r^5 splines), whose training is a set of
#: small solves and whose cost per query does not grow with n.  Measured on this 2-core machine
#: (`tovforge bench --only scaling`, quiet): the dense fit trains 4,093 points in 18.5 s and 8,188 in
#: 102 s (two stretches fitted and compared), and would need 8.6 GB for one matrix at 32k; the local
#: method trains 32,751 points in 27.8 s.  8,192 is the largest design the
#: sound-speed and spectral targets of issue 13 allow, where the dense fit reaches them.
DENSE_LIMIT = 8192
#: Smallest stretch of a parameter's unit interval in the anisotropic RBF.
MIN_STRETCH = 0.05
#: Values of ``stretch_on`` (:class:`SplineSettings`, :class:`~tovforge.surrogate._local.LocalSettings`).
STRETCH_OPTIONS = ("auto", "curves", "mass_max")


@dataclass(frozen=True)
class SplineSettings(Record):
    """Options of the radial-basis-function spline (scattered designs).

    Attributes
    ----------
    warp_inputs : bool
        As :attr:`GPSettings.warp_inputs` (``ln(Gamma - 1)`` for the adiabatic
        indices of the piecewise polytrope).
    anisotropic : bool
        Stretch each parameter's unit interval by ``l_min / l_i``, with ``l``
        the length scales a Gaussian process (one Matern-5/2 kernel for all
        curve outputs, fitted by marginal likelihood on ``n_subset`` points)
        finds: the r^5 kernel then measures distance in the metric the data
        vary in.  Stretches are kept >= ``MIN_STRETCH`` (0.05); if that GP comes
        out degenerate the box stays unstretched, with a warning.
    n_subset : int
        Points of that Gaussian process (space-filling subset).
    degree : int
        Degree of the polynomial (>= 2 for the r^5 kernel).
    stretch_on : str
        The outputs of that GP: ``"curves"`` (R, ln Lambda, ln I at the u nodes),
        ``"mass_max"``, or ``"auto"`` (default): both stretches are fitted and the one
        with the lower leave-one-out score kept
        (:func:`~tovforge.surrogate._errors.loo_score`: the p95 of the closed-form
        leave-one-out residuals of M_max, R and ln Lambda in units of the limits every
        model must reach, the largest of the three); the choice and both scores are
        recorded (:attr:`RBFFit.stretch_on`).  Training costs about twice one fit.
        On the sound-speed box the curves' stretch squeezes cs2_4 and cs2_5, which
        hardly move the radii but move M_max (research/surrogates/LOG.md).
    seed : int

    On the demo box (4,093 points, 500 held-out EOS) the held-out p95 errors
    were R(M) 25.3 m, Lambda 1.06 %, M_max 1.05e-3 Msun with neither option,
    21.1 m, 1.04 %, 1.41e-3 with the warp alone, and about 10 m, 0.4 % and
    5.5e-4 with both.
    """

    warp_inputs: bool = True
    anisotropic: bool = True
    n_subset: int = 256
    degree: int = 2
    stretch_on: str = "auto"
    seed: int = 0


@dataclass(frozen=True)
class RBFFit(Record):
    """What an RBF fit found (recorded in the model).

    Attributes
    ----------
    kernel : str
    input_warp : dict
        ``{name: "ln(name - offset)"}`` of the warped parameters.
    input_scale : tuple of float
        The stretch of each parameter's unit interval (empty: isotropic).
    anisotropy_length_scales : tuple of float
        The GP length scales the stretch came from (empty: isotropic).
    anisotropy_subset : int
        Points of that GP (0: isotropic).
    stretch_on : str
        The outputs that GP was fitted on (``"curves"``, ``"mass_max"``; ``"none"``: isotropic).
    stretch_scores : dict
        The leave-one-out score of each candidate of ``stretch_on="auto"`` (empty: one candidate).
    error_model : dict
        The error model made from the leave-one-out residuals
        (:func:`tovforge.surrogate._errors.calibrate_error_model`; empty for models
        trained before it existed).
    """

    kernel: str = "r^5"
    input_warp: dict = field(default_factory=dict)
    input_scale: tuple = ()
    anisotropy_length_scales: tuple = ()
    anisotropy_subset: int = 0
    stretch_on: str = "curves"
    stretch_scores: dict = field(default_factory=dict)
    error_model: dict = field(default_factory=dict)


def _anisotropy(x, Z, columns: tuple, settings: SplineSettings):
    """Per-parameter stretch ``l_min / l_i`` from one GP kernel over the output columns ``columns`` (a, b)
    (the RBF: the curve outputs; see SplineSettings)."""
    R = trend_residuals(x, Z, 2)[2][:, columns[0]:columns[1]]
    sub = space_filling_subset(x, settings.n_subset, settings.seed)
    # bounds hits of the nugget are expected: the warnings are dropped
    kernel, _ = fit_gaussian_process(x, R, sub, matern_kernel(x.shape[1]), 0, settings.seed)
    length = np.atleast_1d(kernel.k1.k2.length_scale).astype(float)
    if degenerate_kernels(x, sub, length[None, :]):
        warnings.warn("the GP that sets the spline's input stretch came out degenerate (length scales "
                      f"{np.array2string(length, precision=3)}); the spline uses the unstretched box.",
                      UserWarning, stacklevel=3)
        return np.ones_like(length), length
    # an irrelevant parameter (huge length scale) is squeezed, but not to nothing: points that
    # differ only in it must stay apart, or the interpolation matrix becomes singular
    return np.maximum(length.min() / length, MIN_STRETCH), length


def fit_rbf(data: TrainingData, settings: SplineSettings | None = None) -> FitResult:
    """Interpolate with the polyharmonic kernel r^5 plus a polynomial of ``settings.degree``.

    Solves the symmetric saddle-point system ``[[Phi, P], [P^T, 0]] [a; c] =
    [Z; 0]`` (conditionally positive definite of order 3, hence degree >= 2;
    as in SciPy's RBFInterpolator with kernel='quintic'), in the warped and
    stretched inputs of :class:`SplineSettings`.

    Returns
    -------
    FitResult
        The arrays, the settings, and an :class:`RBFFit`.
    """
    settings = settings or SplineSettings()
    degree = settings.degree
    if degree < 2:
        raise InputError(f"the r^5 kernel needs a polynomial of degree >= 2; got degree {degree}.")
    p = prepare(data, settings.warp_inputs)
    scored, stretch_cols, options = stretch_candidates(settings, p.slices)
    option, (arrays, details), scores = choose_by_loo(
        options or ["none"], lambda o: _fit_stretched(data, p, settings, stretch_cols.get(o)),
        lambda r: r[0]["loo_residual"], scored, lambda line: logger.info(f"  RBF, stretch on the {line.strip()}"))
    t0 = time.perf_counter()
    em_arrays, summary = calibrate_error_model(arrays, arrays.pop("loo_residual"))
    arrays.update(em_arrays)
    details = dataclasses.replace(details, stretch_on=option, stretch_scores=scores, error_model=summary)
    logger.info(f"  error model: {time.perf_counter() - t0:.1f} s")
    return FitResult(arrays=arrays, settings=settings, details=details)


def stretch_candidates(settings, slices):
    """The stretches a fit of the RBF or local kind tries, from its ``anisotropic`` and ``stretch_on``.

    Returns the scored columns (:func:`._errors.score_columns`), the output
    columns ``(a, b)`` of the GP behind each stretch (``"curves"``: every
    curve node; ``"mass_max"``), and the options to fit: both for ``"auto"``,
    the one asked for otherwise, none without anisotropy.  An unknown
    ``stretch_on`` is refused.
    """
    if settings.stretch_on not in STRETCH_OPTIONS:
        raise InputError(f"stretch_on must be one of {', '.join(STRETCH_OPTIONS)}; got {settings.stretch_on!r}.")
    scored = score_columns(slices)
    cols = {"curves": (int(slices[0][0]), int(slices[-1][1])), "mass_max": scored["mass_max_msun"]}
    if not settings.anisotropic:
        return scored, cols, []
    return scored, cols, list(cols) if settings.stretch_on == "auto" else [settings.stretch_on]


def _fit_stretched(data: TrainingData, p, settings: SplineSettings, stretch_cols):
    """The RBF in the stretch from one GP on the output columns ``stretch_cols`` (None: unstretched).

    Returns the arrays (with ``loo_residual`` in output units, before the error model) and the
    :class:`RBFFit` so far.
    """
    degree = settings.degree
    arrays, x, Z = dict(p.arrays), p.x, p.Z
    details = RBFFit(input_warp=p.input_warp, stretch_on="none")
    if stretch_cols is not None:
        t0 = time.perf_counter()
        scale, length = _anisotropy(x, Z, stretch_cols, settings)
        arrays["input_scale"] = scale
        x = rt.unit_inputs(np, arrays, data.theta)[0]
        details = RBFFit(input_warp=p.input_warp, input_scale=tuple(scale.tolist()),
                         anisotropy_length_scales=tuple(length.tolist()),
                         anisotropy_subset=min(settings.n_subset, len(x)))
        logger.info(f"  input stretch {np.array2string(scale, precision=3)} (GP length scales "
                    f"{np.array2string(length, precision=3)} on {min(settings.n_subset, len(x))} points, "
                    f"{time.perf_counter() - t0:.1f} s)")
    powers = trend_powers(x.shape[1], degree)
    A = saddle_matrix(x, trend_matrix(x, powers))
    n = x.shape[0]
    rhs = np.vstack([Z, np.zeros((A.shape[0] - n, Z.shape[1]))])
    t0 = time.perf_counter()
    sol = scipy.linalg.solve(A, rhs, assume_a="sym", check_finite=False)
    logger.info(f"  RBF r^5 + degree-{degree} polynomial on {n} points: {time.perf_counter() - t0:.1f} s")
    arrays.update(trend_powers=powers, trend_coef=sol[n:], X=x, alpha=sol[:n])
    t0 = time.perf_counter()
    arrays["loo_residual"] = rbf_loo_residuals(A, sol[:n], n) * arrays["out_scale"]  # standardised -> output units
    logger.info(f"  leave-one-out residuals: {time.perf_counter() - t0:.1f} s")
    return arrays, details
