"""Gaussian-process surrogates: a polynomial trend plus Matern-5/2 kernels, one per group of outputs."""

from __future__ import annotations

import dataclasses
import logging
import time
import warnings
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg

from . import _runtime as rt
from ._data import TrainingData
from ._errors import calibrate_error_model, gp_inverse_diagonal, loo_score, score_columns
from ._prepare import (NOISE_BOUNDS, FitResult, Prepared, degenerate_kernels, fit_gaussian_process, matern_kernel,
                       prepare, space_filling_subset, trend_residuals)
from ._record import Record

__all__ = ["GPSettings", "GPFit", "fit_gp", "describe_gp"]

logger = logging.getLogger(__name__)


@dataclass(frozen=True)
class GPSettings(Record):
    """Hyperparameter search of the Gaussian processes.

    Attributes
    ----------
    n_subset : int
        Points used to optimise the hyperparameters (a space-filling subset of
        the design when it is larger); the final fit uses every point.  On the
        demo box (4,093 training points, one restart) 512 points gave
        held-out R(M) p95 13.2 m and Lambda 0.67 % in 33 s of training, 1,024
        points 14.0 m and 0.78 % in 225 s (768 points without a restart:
        13.0 m and 0.68 % in 90 s): more points cost time without making the
        hyperparameters better.
    n_restarts : int
        Extra optimiser starts from random hyperparameters (scikit-learn).
    trend_degree : int
        Degree of the polynomial trend fitted by least squares before the GP.
    noise_bounds : tuple
        Bounds of the white-noise variance, in units of the variance of the
        residual after the trend: a small nugget.  The lower bound keeps the
        kernel matrix well conditioned (with 1e-8 the weights cancelled to
        1e-13 of their size and predictions moved by 5e-7 with the summation
        order; with 1e-6 the held-out errors are unchanged, measured on 2,048
        points).
    seed : int
    curve_groups : int
        Kernels per curve: the nodes of a curve are split into this many
        contiguous blocks of ``u``, each with its own hyperparameters (the
        smoothness in the parameters changes along the branch).
    mass_max_with_radius : bool
        Let M_max share the kernel of the first block of radius nodes (a
        query at a mass then reads one kernel less).
    share_curve_kernels : bool
        The same block of ``u`` nodes of every curve (radius, ln Lambda,
        ln I) shares one kernel, fitted on the outputs of all of them: a
        query of the whole M-R-Lambda curve then evaluates ``curve_groups``
        kernels instead of twice as many.
    warp_inputs : bool
        Feed the parameters the family marks with a ``log_offset`` (the
        adiabatic indices of the piecewise polytrope) to the GP as
        ``ln(Gamma - 1)``.  On the demo box this cut the held-out R(M) p95
        from 13.2 m to 9.4 m and Lambda from 0.67 % to 0.50 % (M_max 7.1e-4
        to 6.1e-4 Msun): the stars respond more evenly to ``ln(Gamma - 1)``
        than to Gamma, which stiffens the EOS fastest near Gamma = 1.
    n_jobs : int
        Parallel workers for the kernel groups (joblib; -1: all cores).
    """

    n_subset: int = 512
    n_restarts: int = 1
    trend_degree: int = 2
    noise_bounds: tuple = NOISE_BOUNDS
    seed: int = 0
    curve_groups: int = 2
    mass_max_with_radius: bool = True
    share_curve_kernels: bool = False
    warp_inputs: bool = True
    n_jobs: int = -1


@dataclass(frozen=True)
class GPFit(Record):
    """What a GP fit found (recorded in the model).

    Attributes
    ----------
    n_subset : int
        Points the hyperparameters were optimised on.
    n_kernels : int
        Kernels fitted (fewer than groups when curves share kernels).
    input_warp : dict
        ``{name: "ln(name - offset)"}`` of the warped parameters.
    sigma_loo_scale : tuple of float
        Per output, the factor that calibrates the shipped sigma to leave-one-out residuals.
    kernel : str
    group_bounds : tuple of int
        The output columns of each kernel group.
    fit_seconds : tuple of float
        Seconds per kernel.
    optimizer_warnings : tuple of str
        Convergence warnings of the hyperparameter search (bounds hit).
    degenerate_kernels : tuple of str
        Kernels under which neighbouring training points are nearly uncorrelated (see
        :func:`tovforge.surrogate._prepare.degenerate_kernels`).
    warp_fallback : dict
        Empty unless the fit with the family's input warp had degenerate kernels: then
        the GP was also fitted on the raw parameters and the fit with the lower
        leave-one-out score (:func:`tovforge.surrogate._errors.loo_score`) kept; the
        number of degenerate kernels with the warp, both scores and which was kept.
    error_model : dict
        The error model made from the leave-one-out residuals, combined in quadrature
        with the nearest-neighbour GP sigma (:func:`tovforge.surrogate._errors.calibrate_error_model`;
        empty for models trained before it existed).
    """

    n_subset: int = 0
    n_kernels: int = 0
    input_warp: dict = field(default_factory=dict)
    sigma_loo_scale: tuple = ()
    kernel: str = "Matern nu=5/2, ARD"
    group_bounds: tuple = ()
    fit_seconds: tuple = ()
    optimizer_warnings: tuple = ()
    degenerate_kernels: tuple = ()
    warp_fallback: dict = field(default_factory=dict)
    error_model: dict = field(default_factory=dict)


@dataclass(frozen=True)
class _KernelFit:
    """One kernel group fitted: hyperparameters on the subset, weights on all points."""

    length: np.ndarray  # (d,)
    amp2: float
    noise: float
    alpha: np.ndarray  # (n, n_outputs of the group)
    seconds: float
    warnings: list
    sigma_scale: np.ndarray  # (n_outputs of the group,)
    loo: np.ndarray  # (n, n_outputs of the group): leave-one-out residuals of R (Rasmussen & Williams Eq. 5.12)


def _groups(n_scalars, slices, n_out, curve_groups=1, mass_max_with_radius=False):
    """Kernel groups: one per scalar and ``curve_groups`` per curve (contiguous output blocks).

    With ``mass_max_with_radius`` the last scalar (M_max) joins the first block of the first curve (the radius).
    """
    bounds = [0]
    for i in range(n_scalars):
        bounds.append(i + 1)
    if mass_max_with_radius:
        assert n_scalars == slices[0][0]  # M_max is the column just before the radius nodes
        bounds.pop()
    for k, (a, b) in enumerate(slices):
        if bounds[-1] != a and not (k == 0 and mass_max_with_radius):
            bounds.append(int(a))
        edges = np.linspace(a, b, curve_groups + 1).round().astype(int)
        bounds.extend(int(e) for e in edges[1:])
    assert bounds[-1] == n_out
    return np.array(bounds, dtype=np.int64)


def _kernel_sets(bounds, slices, n_scalar_groups, share):
    """Groups that share one kernel: lists of group indices (each group in exactly one).

    Without ``share`` every group has its own kernel.  With it, the k-th block
    of every curve shares the kernel of the k-th radius block (the scalars keep
    their own kernels).
    """
    n_g = len(bounds) - 1
    if not share:
        return [[g] for g in range(n_g)]
    curve_of = []  # (curve, block) of each curve group
    for g in range(n_scalar_groups, n_g):
        k = int(np.searchsorted(slices[:, 1], bounds[g + 1], side="left"))
        curve_of.append(k)
    sets = [[g] for g in range(n_scalar_groups)]
    blocks = {}
    for g, k in zip(range(n_scalar_groups, n_g), curve_of):
        j = curve_of[: g - n_scalar_groups].count(k)  # block number within its curve
        blocks.setdefault(j, []).append(g)
    return sets + [blocks[j] for j in sorted(blocks)]


def _matern_matrix(x, length, amp2):
    diff = (x[:, None, :] - x[None, :, :]) / length
    r = np.sqrt(np.sum(diff * diff, axis=-1))
    return amp2 * (1.0 + rt.SQRT5 * r + (5.0 / 3.0) * r * r) * np.exp(-rt.SQRT5 * r)


def _fit_group(x, R, sub, settings: GPSettings, d) -> _KernelFit:
    """Hyperparameters (on the subset) and weights (on all points) of one kernel group."""
    t0 = time.perf_counter()
    k, caught = fit_gaussian_process(x, R, sub, matern_kernel(d, settings.noise_bounds), settings.n_restarts,
                                     settings.seed)
    amp2 = float(k.k1.k1.constant_value)
    length = np.atleast_1d(k.k1.k2.length_scale).astype(float)
    noise = float(k.k2.noise_level)
    K = _matern_matrix(x, length, amp2)
    K[np.diag_indices_from(K)] += noise + 1e-10 * amp2
    try:
        # Rasmussen & Williams (2006), Alg. 2.1, line 2: L = cholesky(K + sigma_n^2 I)
        cf = scipy.linalg.cho_factor(K, lower=True, check_finite=False)
    except np.linalg.LinAlgError as exc:
        raise np.linalg.LinAlgError(
            f"GP kernel on {len(x)} points is not positive definite; "
            "remove duplicate parameter rows or raise the nugget bounds.") from exc
    # Alg. 2.1, line 3: alpha = L^T \ (L \ y)
    alpha = scipy.linalg.cho_solve(cf, R, check_finite=False)
    # GPML Eq. 5.12: mu_-i = y_i - [K^-1 y]_i / [K^-1]_ii, so the residual is alpha_i / [K^-1]_ii
    loo = alpha / gp_inverse_diagonal(cf[0])[:, None]
    scale = _loo_sigma_scale(x, sub, loo, length, amp2, noise)
    return _KernelFit(length, amp2, noise, alpha, time.perf_counter() - t0, caught, scale, loo)


def _loo_sigma_scale(x, sub, loo, length, amp2, noise):
    """Scale of the shipped predictive sigma, per output, from leave-one-out residuals.

    For the GP on all points, the leave-one-out residual of point i is
    ``alpha_i / [K^-1]_ii`` (Rasmussen & Williams 2006, Sec. 5.4.2); it is
    taken at the points of the subset ``sub`` (``loo``: every point's).  The
    sigma users get is the nearest-neighbour one of :func:`_runtime.gp_local_std`;
    at a training point with that point left out it is the matching
    leave-one-out sigma.  The robust spread (MAD / 0.6745) of residual over
    sigma is the factor that makes the sigma match the errors, per output.
    """
    resid = loo[sub]
    m = {"X": x, "length": length[None, :], "amp2": np.array([amp2]), "noise": np.array([noise]),
         "group_bounds": np.array([0, loo.shape[1]]), "resid_scale": np.ones(loo.shape[1]),
         "gp_neighbours": np.array(rt.GP_NEIGHBOURS),
         "out_scale": np.ones(loo.shape[1])}
    sd = rt.gp_local_std(np, m, x[sub], skip_nearest=1)
    return np.median(np.abs(resid / sd), axis=0) / 0.6745


def fit_gp(data: TrainingData, settings: GPSettings | None = None) -> FitResult:
    """Fit Gaussian processes: polynomial trend plus one Matern-5/2 kernel per output group.

    Each scalar output has its own kernel; the nodes of a curve are split
    into ``curve_groups`` blocks along ``u`` that share a kernel each (one
    kernel evaluation serves a whole block).  The groups are fitted in
    parallel (joblib).  Hyperparameters (amplitude, one length scale per
    parameter, a small nugget) maximise the marginal likelihood on a
    space-filling subset, with restarts (scikit-learn's
    GaussianProcessRegressor); the weights then solve the full system by
    Cholesky (Rasmussen & Williams 2006, Alg. 2.1).  Each kernel's
    hyperparameters and time go to the logger at level INFO.

    Returns
    -------
    FitResult
        The arrays, the settings, and a :class:`GPFit`.
    """
    settings = settings or GPSettings()
    result = _fit_prepared(prepare(data, settings.warp_inputs), settings)
    if result.details.degenerate_kernels and result.details.input_warp:
        # the family's warp spread the data so that some kernel explained them as noise (measured on the
        # sound-speed box with ln(cs2): held-out Lambda p95 21 % against 3.7 % unwarped, 8,025 points):
        # the raw parameters are tried too, and the fit with the lower leave-one-out score is kept
        raw = _fit_prepared(prepare(data, False), settings)
        scored = score_columns(data.output_matrix()[1])
        warped_score = loo_score(result.arrays["loo_residual"], scored)
        raw_score = loo_score(raw.arrays["loo_residual"], scored)
        logger.info(f"  GP with the family's input warp: degenerate kernels, leave-one-out score {warped_score:.3g}; "
                    f"raw parameters: {raw_score:.3g}")
        fallback = {"warped_degenerate_kernels": len(result.details.degenerate_kernels),
                    "warped_loo_score": warped_score, "raw_loo_score": raw_score}
        if raw_score < warped_score:
            result = raw
        fallback["kept"] = "raw parameters" if result is raw else "the family's warp"
        result = dataclasses.replace(result, details=dataclasses.replace(result.details, warp_fallback=fallback))
    for msg in result.details.degenerate_kernels:
        warnings.warn(f"GP {msg}", UserWarning, stacklevel=3)
    return result


def _fit_prepared(p: Prepared, settings: GPSettings) -> FitResult:
    """:func:`fit_gp` on prepared arrays (its degenerate kernels recorded, not warned)."""
    from joblib import Parallel, delayed

    x, Z, slices = p.x, p.Z, p.slices
    powers, coef, R, rscale = trend_residuals(x, Z, settings.trend_degree)
    n_scalars = int(slices[0, 0])
    bounds = _groups(n_scalars, slices, Z.shape[1], settings.curve_groups, settings.mass_max_with_radius)
    sub = space_filling_subset(x, settings.n_subset, settings.seed)
    n_g = len(bounds) - 1
    d = x.shape[1]
    n_scalar_groups = int(np.searchsorted(bounds[1:], slices[0, 0], side="right"))  # groups ending before the curves
    sets = _kernel_sets(bounds, slices, n_scalar_groups, settings.share_curve_kernels)
    cols = [np.concatenate([np.arange(bounds[g], bounds[g + 1]) for g in s]) for s in sets]
    fits = Parallel(n_jobs=settings.n_jobs)(delayed(_fit_group)(x, R[:, c], sub, settings, d) for c in cols)
    length, amp2, noise = np.zeros((n_g, d)), np.zeros(n_g), np.zeros(n_g)
    alpha, sigma_scale, loo = np.zeros_like(R), np.zeros(R.shape[1]), np.zeros_like(R)
    group_kernel = np.zeros(n_g, dtype=np.int64)
    for s, c, f in zip(sets, cols, fits):
        length[s], amp2[s], noise[s], group_kernel[s] = f.length, f.amp2, f.noise, s[0]
        alpha[:, c], sigma_scale[c], loo[:, c] = f.alpha, f.sigma_scale, f.loo
    boundary_hits = [f"kernel {k} (groups {s}): {msg}" for k, (s, f) in enumerate(zip(sets, fits)) for msg in f.warnings]
    degenerate = degenerate_kernels(x, sub, np.array([f.length for f in fits]))
    if logger.isEnabledFor(logging.INFO):
        for k, (s, f) in enumerate(zip(sets, fits)):
            outs = ", ".join(f"{bounds[g]}..{bounds[g + 1] - 1}" for g in s)
            logger.info(f"  GP kernel {k + 1}/{len(sets)} (outputs {outs}): length scales "
                        f"{np.array2string(f.length, precision=3)}, amplitude {np.sqrt(f.amp2):.3g}, "
                        f"nugget {f.noise:.2g}, {f.seconds:.1f} s")
    arrays = dict(p.arrays)
    # the trend and the GP act on standardised outputs; the residual was scaled by rscale
    arrays.update(trend_powers=powers, trend_coef=coef, X=x, alpha=alpha * rscale, group_bounds=bounds,
                  group_kernel=group_kernel, length=length, amp2=amp2, noise=noise, resid_scale=rscale * sigma_scale,
                  gp_neighbours=np.array(rt.GP_NEIGHBOURS))
    # residuals of R (scaled by rscale) -> standardised outputs -> output units
    em_arrays, em_summary = calibrate_error_model(arrays, loo * rscale * arrays["out_scale"])
    arrays.update(em_arrays)
    details = GPFit(n_subset=int(len(sub)), n_kernels=len(sets), input_warp=p.input_warp,
                    sigma_loo_scale=tuple(float(v) for v in sigma_scale), group_bounds=tuple(bounds.tolist()),
                    fit_seconds=tuple(f.seconds for f in fits), optimizer_warnings=tuple(boundary_hits),
                    degenerate_kernels=tuple(degenerate), error_model=em_summary)
    return FitResult(arrays=arrays, settings=settings, details=details)


def describe_gp(arrays) -> str:
    """A few words on a GP model's structure for listings: its groups and kernels."""
    n_groups = int(np.asarray(arrays["length"]).shape[0])
    shared = arrays.get("group_kernel")
    n_kernels = len(set(np.asarray(shared).tolist())) if shared is not None else n_groups
    return f"{n_groups} output groups, {n_kernels} kernels"
