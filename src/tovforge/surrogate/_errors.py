"""Leave-one-out residuals and the error model every surrogate method shares.

A fit that can tell each training point's leave-one-out residual (the error
of the model trained without that point, at that point) stores them as the
array ``loo_residual`` (n_train, n_out) in the model's output units (the
transformed outputs: km for R, ln Lambda, Msun for M_max).  From them
:func:`calibrate_error_model` makes the runtime's error model
(:func:`tovforge.surrogate._runtime.error_model_std`): sigma at a query from
the residuals of the nearest training points, times one factor per output
chosen on the training points themselves (each point's residual against the
sigma of its neighbours with the point left out) so that ``|e| / sigma > 3``
holds for a stated share of them.  No held-out data is needed at training
time; ``tovforge check`` then measures the calibration on held-out points.

Closed forms of the residuals (no refits):

- polyharmonic spline with a polynomial (a saddle-point system ``A``):
  ``e_i = c_i / [A^-1]_ii`` with ``c`` the kernel coefficients (Rippa 1999,
  Adv. Comput. Math. 11, 193, Eq. 2.4; with the polynomial block: Fasshauer &
  Zhang 2007, Numer. Algorithms 45, 345);
- Gaussian process: ``e_i = alpha_i / [K^-1]_ii`` (Rasmussen & Williams 2006,
  Gaussian Processes for Machine Learning, Eq. 5.12), the trend held fixed.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg
import scipy.spatial

from . import _runtime as rt

__all__ = ["ERROR_TARGET", "rbf_loo_residuals", "gp_inverse_diagonal", "calibrate_error_model", "score_columns",
           "loo_score", "choose_by_loo"]

#: Share of the training points' leave-one-out residuals allowed beyond 3 sigma when the factor is chosen.
#: Measured on the demo box (4,093 points): 0.5 % here gave 0.1 % or less on held-out points, 1 % gave
#: 0.7 % (1.3 % near the faces); see research/surrogates/LOG.md and DEVELOPERS.md.
ERROR_TARGET = 0.005


def rbf_loo_residuals(A, coef, n):
    """Rippa's leave-one-out residuals of an interpolant with kernel coefficients ``coef`` (n, n_out).

    ``A`` is the full (saddle-point) interpolation matrix whose first ``n``
    rows and columns belong to the training points.  Costs one inverse of
    ``A`` (the same order as the fit's own solve).
    """
    diag = np.diag(scipy.linalg.inv(A, check_finite=False))[:n]
    return coef / diag[:, None]


def gp_inverse_diagonal(L):
    """``[K^-1]_ii`` of every point from the lower Cholesky factor ``L`` of the kernel matrix ``K``."""
    inv, info = scipy.linalg.lapack.dpotri(L, lower=1)
    if info != 0:  # pragma: no cover - L came from a successful Cholesky
        raise np.linalg.LinAlgError(f"inverse from the Cholesky factor failed (LAPACK info {info}).")
    return np.diag(inv).copy()


def calibrate_error_model(arrays: dict, loo, target: float = ERROR_TARGET) -> tuple[dict, dict]:
    """The error model's arrays from leave-one-out residuals, and a summary for the model record.

    Parameters
    ----------
    arrays : dict
        The model's arrays (``X``, the training points in the model's input metric, is read).
    loo : ndarray (n_train, n_out)
        Leave-one-out residuals in the model's output units.
    target : float
        Share of the training points allowed beyond 3 sigma: the factor of each output
        is the ``1 - target`` quantile of ``|e_i| / sigma_raw(-i)`` divided by 3.

    Returns
    -------
    (dict, dict)
        ``{"loo_residual", "error_scale"}``, and the summary (neighbours, target, the factors,
        the median and 99th percentile of |loo| per output) as plain data.
    """
    loo = np.asarray(loo, float)
    m = {"X": arrays["X"], "loo_residual": loo, "error_scale": np.ones(loo.shape[1])}
    X = np.asarray(arrays["X"], float)
    # the runtime's sigma with skip_nearest=1 at every training point, its neighbours from a k-d tree:
    # the runtime's brute-force search costs n^2 here (96 s of a 125 s training at 32,751 points)
    k = min(rt.ERROR_NEIGHBOURS + 1, len(X))
    dist, nn = scipy.spatial.cKDTree(X).query(X, k=k)
    raw = rt.error_model_from_neighbours(np, m, nn[:, 1:], dist[:, 1:])
    tiny = np.finfo(float).tiny
    z = np.abs(loo) / np.maximum(raw, tiny)
    scale = np.quantile(z, 1.0 - target, axis=0) / 3.0
    scale = np.where(np.isfinite(scale) & (scale > 0.0), scale, 1.0)
    summary = {"neighbours": rt.ERROR_NEIGHBOURS, "target_beyond_3_sigma": float(target),
               "calibrated_on": "leave-one-out residuals of the training points",
               "scale": [float(v) for v in scale],
               "loo_abs_median": [float(v) for v in np.median(np.abs(loo), axis=0)],
               "loo_abs_p99": [float(v) for v in np.quantile(np.abs(loo), 0.99, axis=0)]}
    return {"loo_residual": loo, "error_scale": scale}, summary


#: The outputs a leave-one-out score weighs, by their key in ``_runtime.TRUST_LIMITS`` (the held-out p95
#: every model must reach, the unit of each): M_max [Msun], the radius nodes [km], the ln Lambda nodes
#: (an error in ln Lambda is a relative error of Lambda).
_SCORED = {"mass_max_msun": "mass_max_msun", "radius_km": "radius_km",
           "tidal_deformability_rel": "log_tidal_deformability"}


def score_columns(slices) -> dict:
    """The output columns ``(a, b)`` of M_max, the radius nodes and the ln Lambda nodes of a new model.

    ``slices`` (n_curves, 2) are the curve columns of ``TrainingData.output_matrix``
    (M_max is the last column before the curves, :func:`._data.emulated_outputs`).
    """
    from ._data import emulated_outputs

    sequence, star = emulated_outputs()
    names = [q.model_name for q in star]
    im = [q.model_name for q in sequence].index(_SCORED["mass_max_msun"])
    out = {"mass_max_msun": (im, im + 1)}
    for key in ("radius_km", "tidal_deformability_rel"):
        a, b = slices[names.index(_SCORED[key])]
        out[key] = (int(a), int(b))
    return out


def loo_score(loo, columns: dict) -> float:
    """One number for comparing fits of the same data: lower is better.

    The largest, over the outputs of ``columns`` (``{key of _runtime.TRUST_LIMITS:
    (a, b)}``, see :func:`score_columns`), of the 95th percentile of ``|loo|`` in those
    columns in units of the limit (the p95 every model must reach).  A p95, not the
    mean or the maximum, so that a few near-transition points do not decide; the
    largest over the outputs, so that a fit is judged by the output furthest from its
    limit (a geometric mean was tried: an output interpolated to rounding, far below its
    limit, then outweighed another far above it).  ``loo`` (n_train, n_out) in the
    model's output units.
    """
    loo = np.abs(np.asarray(loo, float))
    return float(max(np.percentile(loo[:, a:b], 95) / rt.TRUST_LIMITS[key] for key, (a, b) in columns.items()))


def choose_by_loo(options, fit, loo_of, columns: dict, log=None):
    """Fit every option and keep the one with the lowest :func:`loo_score`.

    Parameters
    ----------
    options : sequence
        The candidates (one: it is fitted and kept, no score is computed).
    fit : callable
        ``fit(option) -> result``.
    loo_of : callable
        ``loo_of(result) -> (n_train, n_out)`` leave-one-out residuals in output units.
    columns : dict
        The scored columns (:func:`score_columns`).
    log : callable, optional
        Called with one line per scored candidate.

    Returns
    -------
    (option, result, dict)
        The kept option, its result and the score of every candidate (empty for one).
    """
    best, scores = None, {}
    for option in options:
        result = fit(option)
        if len(options) > 1:
            scores[option] = loo_score(loo_of(result), columns)
            if log:
                log(f"  {option}: leave-one-out score {scores[option]:.3g}")
        if best is None or (scores and scores[option] < scores[best[0]]):
            best = (option, result)
    return best[0], best[1], scores
