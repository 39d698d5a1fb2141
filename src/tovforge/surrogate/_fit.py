"""Training: Gaussian processes, polyharmonic RBF and tensor-product splines on grid data."""

from __future__ import annotations

import logging
import time
import warnings
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
from scipy.interpolate import CubicSpline

from ..errors import InputError
from . import _runtime as rt

__all__ = ["TrainingData", "GPSettings", "SplineSettings", "fit_gp", "fit_rbf", "fit_tensor",
           "spline_cardinal_coefficients", "trend_powers"]

logger = logging.getLogger(__name__)

#: Outputs modelled, in this order: three scalars, then the node curves.
#: M_max comes last, next to the radius curve, so that it can share a kernel with
#: the radius nodes near the maximum (see GPSettings.mass_max_with_radius).
SCALARS = ("log10_central_pressure_at_mass_max", "max_sound_speed_sq", "mass_max_msun")


@dataclass(frozen=True)
class TrainingData:
    """Exact solves ready for training.

    Attributes
    ----------
    family : str
    parameter_names, parameter_units : tuple of str
    bounds : ndarray (d, 2)
        The box the design covers (the model's domain).
    theta : ndarray (n, d)
    scalars : dict of ndarray (n,)
        ``mass_max_msun``, ``log10_central_pressure_at_mass_max``, ``max_sound_speed_sq``.
    u_nodes : ndarray (n_u,)
    curves : dict of ndarray (n, n_u)
        ``radius_km``, ``log_tidal_deformability``, ``log_moment_of_inertia`` at the nodes.
    mass_floor_msun : float
    regular_shape : tuple or None
        Points per axis when the design is a complete regular grid (rows in C order).
    provenance : dict
    """

    family: str
    parameter_names: tuple
    parameter_units: tuple
    bounds: np.ndarray
    theta: np.ndarray
    scalars: dict
    u_nodes: np.ndarray
    curves: dict
    mass_floor_msun: float = 0.5
    regular_shape: tuple | None = None
    provenance: dict = field(default_factory=dict)

    def output_matrix(self) -> tuple[np.ndarray, dict, np.ndarray]:
        """Outputs as one matrix (n, n_out), the index of each scalar and curve slices."""
        cols = [self.scalars[k][:, None] for k in SCALARS]
        index = {k: i for i, k in enumerate(SCALARS)}
        slices = []
        start = len(SCALARS)
        for name in rt.CURVES:
            c = self.curves[name]
            cols.append(c)
            slices.append((start, start + c.shape[1]))
            start += c.shape[1]
        return np.hstack(cols), index, np.array(slices, dtype=np.int64)


@dataclass(frozen=True)
class GPSettings:
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
    noise_bounds: tuple = (1e-6, 1e-4)
    seed: int = 0
    curve_groups: int = 2
    mass_max_with_radius: bool = True
    share_curve_kernels: bool = False
    warp_inputs: bool = True
    n_jobs: int = -1


@dataclass(frozen=True)
class SplineSettings:
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
    seed: int = 0


def trend_powers(d: int, degree: int) -> np.ndarray:
    """Exponents of all monomials of total degree <= ``degree`` in ``d`` variables."""
    out = [np.zeros(d, dtype=np.int64)]
    for deg in range(1, degree + 1):
        def rec(prefix, left, i):
            if i == d - 1:
                yield prefix + [left]
                return
            for p in range(left, -1, -1):
                yield from rec(prefix + [p], left - p, i + 1)
        out += [np.array(p) for p in rec([], deg, 0)]
    return np.array(out, dtype=np.int64)


def spline_cardinal_coefficients(u_nodes: np.ndarray) -> np.ndarray:
    """Cubic-spline coefficients (4, n_u - 1, n_u) of the cardinal functions on the nodes.

    The not-a-knot spline through node values ``v`` is the linear combination
    of these with weights ``v`` (SciPy's CubicSpline, applied to the identity).
    """
    cs = CubicSpline(u_nodes, np.eye(len(u_nodes)), axis=0)
    return np.ascontiguousarray(cs.c)


def _common_arrays(data: TrainingData, Y: np.ndarray, slices) -> dict:
    lo, hi = data.bounds[:, 0].astype(float), data.bounds[:, 1].astype(float)
    return {
        "lo": lo,
        "hi": hi,
        "out_mean": Y.mean(axis=0),
        "out_scale": np.where(Y.std(axis=0) > 0, Y.std(axis=0), 1.0),
        "u_nodes": np.asarray(data.u_nodes, float),
        "spline_c": spline_cardinal_coefficients(np.asarray(data.u_nodes, float)),
        "curve_slices": slices,
    }


def _prepared(data: TrainingData, warp_inputs: bool):
    """What every fit starts from.

    Returns the output index and curve slices, the model's common arrays (with
    the family's input warp when ``warp_inputs``), the unit inputs ``x`` (n, d),
    the standardised outputs ``Z`` (n, n_out), and the warp as metadata
    (``{name: "ln(name - offset)"}``, empty without one).
    """
    Y, index, slices = data.output_matrix()
    arrays = _common_arrays(data, Y, slices)
    warp = input_warp(data) if warp_inputs else None
    if warp:
        arrays.update(warp)
    x = rt.unit_inputs(np, arrays, data.theta)[0]
    Z = (Y - arrays["out_mean"]) / arrays["out_scale"]
    warped = ({n: f"ln({n} - {c:g})" for n, c, f in zip(data.parameter_names, warp["warp_shift"], warp["warp_log"])
               if f} if warp else {})
    return index, slices, arrays, x, Z, warped


def input_warp(data: TrainingData) -> dict | None:
    """Arrays of the family's input warp (``ln(theta - log_offset)``), or None if it has none.

    Returns ``warp_log`` (d,) 0/1, ``warp_shift`` (d,), and the warped box
    ``wlo``, ``whi`` (d,) (the raw bounds where a parameter is not warped),
    computed with the same operations as :func:`_runtime.unit_inputs`.
    """
    from .. import eos

    try:
        fam = eos.get_family(data.family)
    except (InputError, KeyError):
        return None
    offsets = {p.name: p.log_offset for p in fam.parameters}
    flags = np.array([offsets.get(n) is not None for n in data.parameter_names])
    if not flags.any():
        return None
    shift = np.array([offsets[n] if f else 0.0 for n, f in zip(data.parameter_names, flags)], dtype=float)
    lo, hi = data.bounds[:, 0].astype(float), data.bounds[:, 1].astype(float)
    below = [n for n, f, a, c in zip(data.parameter_names, flags, lo, shift) if f and not a > c]
    if below:
        raise InputError(f"the box of {below[0]} must lie above its log offset {offsets[below[0]]:g} "
                         f"(the GP uses ln({below[0]} - {offsets[below[0]]:g})).")
    wlo = np.array([np.log(a - c) if f else a for a, c, f in zip(lo, shift, flags)])
    whi = np.array([np.log(b - c) if f else b for b, c, f in zip(hi, shift, flags)])
    return {"warp_log": flags.astype(np.int64), "warp_shift": shift, "wlo": wlo, "whi": whi}


#: Bounds of the GP length scales, in units of the (warped) parameter box.
LENGTH_BOUNDS = (1e-3, 1e3)


#: Median kernel correlation with the nearest training point below which a fit is called degenerate.
MIN_NEIGHBOUR_CORRELATION = 0.05


def degenerate_kernels(x: np.ndarray, sub: np.ndarray, length: np.ndarray) -> list[str]:
    """Messages for kernels under which neighbouring training points are nearly uncorrelated.

    Such a GP explained the outputs as white noise (length scales far below
    the spacing of the design) and predicts the trend alone between training
    points.  For each kernel, the Matern-5/2 correlation of each subset point
    with its nearest other training point is computed; a median below
    :data:`MIN_NEIGHBOUR_CORRELATION` is reported.  ``x`` (n, d) unit inputs,
    ``sub`` the subset rows, ``length`` (n_kernels, d).
    """
    out = []
    for k, row in enumerate(np.atleast_2d(length)):
        d2 = np.sum(((x[sub, None, :] - x[None, :, :]) / row) ** 2, axis=-1)
        d2[np.arange(len(sub)), sub] = np.inf  # not the point itself
        r = np.sqrt(5.0 * d2.min(axis=1))
        corr = float(np.median((1.0 + r + r * r / 3.0) * np.exp(-r)))
        if corr < MIN_NEIGHBOUR_CORRELATION:
            out.append(f"kernel {k + 1}: neighbouring training points are nearly uncorrelated (median correlation "
                       f"{corr:.2g} with the nearest one; length scales {np.array2string(row, precision=3)}): a "
                       "degenerate fit; check the held-out errors, try another subset, trend degree or seed")
    return out


def _trend_residuals(x, Z, degree):
    """Least-squares polynomial trend of ``Z`` in ``x``.

    Returns the monomial powers, the coefficients, the residuals scaled to unit
    spread per column, and those scales.
    """
    powers = trend_powers(x.shape[1], degree)
    F = _trend_matrix(x, powers)
    coef, *_ = np.linalg.lstsq(F, Z, rcond=None)
    resid = Z - F @ coef
    rscale = np.where(resid.std(axis=0) > 0, resid.std(axis=0), 1.0)
    return powers, coef, resid / rscale, rscale


def _matern_kernel(d, noise_bounds):
    """scikit-learn kernel of every GP here: amplitude x anisotropic Matern-5/2 + a white-noise nugget."""
    from sklearn.gaussian_process.kernels import ConstantKernel, Matern, WhiteKernel

    return ConstantKernel(1.0, (1e-4, 1e7)) * Matern(length_scale=np.full(d, 0.5), length_scale_bounds=LENGTH_BOUNDS,
                                                     nu=2.5) + WhiteKernel(noise_bounds[0], noise_bounds)


def _trend_matrix(x, powers):
    F, _ = rt._trend(np, {"trend_powers": powers}, x, False)
    return F


def _groups(index, slices, n_out, curve_groups=1, mass_max_with_radius=False):
    """Kernel groups: one per scalar and ``curve_groups`` per curve (contiguous output blocks)."""
    bounds = [0]
    for i in range(len(index)):
        bounds.append(i + 1)
    if mass_max_with_radius:  # M_max (the last scalar) joins the first radius block
        assert index["mass_max_msun"] == len(index) - 1 == slices[0][0] - 1
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


def _fit_group(x, R, sub, settings, d):
    """Hyperparameters (on the subset) and weights (on all points) of one kernel group."""
    from sklearn.exceptions import ConvergenceWarning
    from sklearn.gaussian_process import GaussianProcessRegressor

    t0 = time.perf_counter()
    kernel = _matern_kernel(d, settings.noise_bounds)
    gpr = GaussianProcessRegressor(kernel, n_restarts_optimizer=settings.n_restarts,
                                   random_state=settings.seed, normalize_y=False)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ConvergenceWarning)
        gpr.fit(x[sub], R[sub])
    k = gpr.kernel_
    amp2 = float(k.k1.k1.constant_value)
    length = np.atleast_1d(k.k1.k2.length_scale).astype(float)
    noise = float(k.k2.noise_level)
    K = _matern_matrix(x, length, amp2)
    K[np.diag_indices_from(K)] += noise + 1e-10 * amp2
    try:
        cf = scipy.linalg.cho_factor(K, lower=True, check_finite=False)
    except np.linalg.LinAlgError:
        raise np.linalg.LinAlgError(
            f"GP kernel on {len(x)} points is not positive definite; "
            "remove duplicate parameter rows or raise the nugget bounds.") from None
    alpha = scipy.linalg.cho_solve(cf, R, check_finite=False)
    scale = _loo_sigma_scale(x, R, sub, cf, alpha, length, amp2, noise)
    return length, amp2, noise, alpha, time.perf_counter() - t0, [str(w.message) for w in caught], scale


def _loo_sigma_scale(x, R, sub, cf, alpha, length, amp2, noise):
    """Scale of the shipped predictive sigma, per output, from leave-one-out residuals.

    For the GP on all points, the leave-one-out residual of point i is
    ``alpha_i / [K^-1]_ii`` (Rasmussen & Williams 2006, Sec. 5.4.2); it is
    computed at the points of the subset ``sub`` from the Cholesky factor
    ``cf`` of the full kernel matrix.  The sigma users get is the
    nearest-neighbour one of :func:`_runtime.gp_local_std`; at a training point
    with that point left out it is the matching leave-one-out sigma.  The
    robust spread (MAD / 0.6745) of residual over sigma is the factor that
    makes the sigma match the errors, per output.
    """
    L = cf[0]
    E = np.zeros((len(x), len(sub)))
    E[sub, np.arange(len(sub))] = 1.0
    W = scipy.linalg.solve_triangular(L, E, lower=True, check_finite=False)
    kinv_diag = np.sum(W * W, axis=0)  # [K^-1]_ii = |L^-1 e_i|^2
    resid = alpha[sub] / kinv_diag[:, None]
    m = {"X": x, "length": length[None, :], "amp2": np.array([amp2]), "noise": np.array([noise]),
         "group_bounds": np.array([0, R.shape[1]]), "resid_scale": np.ones(R.shape[1]),
         "out_scale": np.ones(R.shape[1])}
    sd = rt.gp_local_std(np, m, x[sub], skip_nearest=1)
    return np.median(np.abs(resid / sd), axis=0) / 0.6745


def _space_filling_subset(x, n, seed):
    """Greedy farthest-point subset of ``n`` rows (deterministic for a seed)."""
    if len(x) <= n:
        return np.arange(len(x))
    rng = np.random.default_rng(seed)
    chosen = [int(rng.integers(len(x)))]
    d2 = np.sum((x - x[chosen[0]]) ** 2, axis=1)
    for _ in range(n - 1):
        i = int(np.argmax(d2))
        chosen.append(i)
        d2 = np.minimum(d2, np.sum((x - x[i]) ** 2, axis=1))
    return np.array(sorted(chosen))


def fit_gp(data: TrainingData, settings: GPSettings = GPSettings()):
    """Fit Gaussian processes: polynomial trend plus one Matern-5/2 kernel per output group.

    Each scalar output has its own kernel; the nodes of a curve are split
    into ``curve_groups`` blocks along ``u`` that share a kernel each (one
    kernel evaluation serves a whole block).  The groups are fitted in
    parallel (joblib).  Hyperparameters
    (amplitude, one length scale per parameter, a small nugget) maximise the
    marginal likelihood on a space-filling subset, with restarts
    (scikit-learn's GaussianProcessRegressor); the weights then solve the
    full system by Cholesky (Rasmussen & Williams 2006, Alg. 2.1).

    Returns
    -------
    meta_extra : dict, arrays : dict
    """
    index, slices, arrays, x, Z, warped = _prepared(data, settings.warp_inputs)
    powers, coef, R, rscale = _trend_residuals(x, Z, settings.trend_degree)
    bounds = _groups(index, slices, Z.shape[1], settings.curve_groups, settings.mass_max_with_radius)
    sub = _space_filling_subset(x, settings.n_subset, settings.seed)
    n_g = len(bounds) - 1
    d = x.shape[1]
    from joblib import Parallel, delayed

    n_scalar_groups = int(np.searchsorted(bounds[1:], slices[0, 0], side="right"))  # groups ending before the curves
    sets = _kernel_sets(bounds, slices, n_scalar_groups, settings.share_curve_kernels)
    cols = [np.concatenate([np.arange(bounds[g], bounds[g + 1]) for g in s]) for s in sets]
    fits = Parallel(n_jobs=settings.n_jobs)(delayed(_fit_group)(x, R[:, c], sub, settings, d) for c in cols)
    length, amp2, noise = np.zeros((n_g, d)), np.zeros(n_g), np.zeros(n_g)
    alpha, sigma_scale = np.zeros_like(R), np.zeros(R.shape[1])
    group_kernel = np.zeros(n_g, dtype=np.int64)
    for s, c, r in zip(sets, cols, fits):
        length[s], amp2[s], noise[s], group_kernel[s] = r[0], r[1], r[2], s[0]
        alpha[:, c], sigma_scale[c] = r[3], r[6]
    timings = [r[4] for r in fits]
    boundary_hits = [f"kernel {k} (groups {s}): {msg}" for k, (s, r) in enumerate(zip(sets, fits)) for msg in r[5]]
    degenerate = degenerate_kernels(x, sub, np.array([r[0] for r in fits]))
    for msg in degenerate:
        warnings.warn(f"GP {msg}", UserWarning, stacklevel=2)
    if logger.isEnabledFor(logging.INFO):
        for k, (s, r) in enumerate(zip(sets, fits)):
            outs = ", ".join(f"{bounds[g]}..{bounds[g + 1] - 1}" for g in s)
            logger.info(f"  GP kernel {k + 1}/{len(sets)} (outputs {outs}): length scales "
                f"{np.array2string(r[0], precision=3)}, amplitude {np.sqrt(r[1]):.3g}, nugget {r[2]:.2g}, "
                f"{r[4]:.1f} s")
    # the trend and the GP act on standardised outputs; the residual was scaled by rscale
    arrays.update(trend_powers=powers, trend_coef=coef, X=x, alpha=alpha * rscale, group_bounds=bounds,
                  group_kernel=group_kernel, length=length, amp2=amp2, noise=noise, resid_scale=rscale * sigma_scale)
    extra = {"gp": {"n_subset": int(len(sub)), "n_restarts": settings.n_restarts, "curve_groups": settings.curve_groups,
                    "mass_max_with_radius": settings.mass_max_with_radius,
                    "share_curve_kernels": settings.share_curve_kernels, "n_kernels": len(sets),
                    "warp_inputs": settings.warp_inputs,
                    "input_warp": warped,
                    "sigma_loo_scale": [float(v) for v in sigma_scale],
                    "trend_degree": settings.trend_degree, "kernel": "Matern nu=5/2, ARD",
                    "group_bounds": bounds.tolist(), "fit_seconds": timings,
                    "optimizer_warnings": boundary_hits, "degenerate_kernels": degenerate}}
    return index, extra, arrays


def _matern_matrix(x, length, amp2):
    diff = (x[:, None, :] - x[None, :, :]) / length
    r = np.sqrt(np.sum(diff * diff, axis=-1))
    return amp2 * (1.0 + rt.SQRT5 * r + (5.0 / 3.0) * r * r) * np.exp(-rt.SQRT5 * r)


#: Smallest stretch of a parameter's unit interval in the anisotropic RBF.
MIN_STRETCH = 0.05


def _anisotropy(x, Z, slices, settings: SplineSettings):
    """Per-parameter stretch ``l_min / l_i`` from one GP kernel over the curve outputs (see SplineSettings)."""
    from sklearn.gaussian_process import GaussianProcessRegressor

    R = _trend_residuals(x, Z, 2)[2][:, slices[0][0]:slices[-1][1]]
    sub = _space_filling_subset(x, settings.n_subset, settings.seed)
    kernel = _matern_kernel(x.shape[1], GPSettings().noise_bounds)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # bounds hits of the nugget are expected
        gp = GaussianProcessRegressor(kernel, random_state=settings.seed).fit(x[sub], R[sub])
    length = np.atleast_1d(gp.kernel_.k1.k2.length_scale).astype(float)
    if degenerate_kernels(x, sub, length[None, :]):
        warnings.warn("the GP that sets the spline's input stretch came out degenerate (length scales "
                      f"{np.array2string(length, precision=3)}); the spline uses the unstretched box.",
                      UserWarning, stacklevel=3)
        return np.ones_like(length), length
    # an irrelevant parameter (huge length scale) is squeezed, but not to nothing: points that
    # differ only in it must stay apart, or the interpolation matrix becomes singular
    return np.maximum(length.min() / length, MIN_STRETCH), length


def fit_rbf(data: TrainingData, settings: SplineSettings = SplineSettings()):
    """Interpolate with the polyharmonic kernel r^5 plus a polynomial of ``settings.degree``.

    Solves the symmetric saddle-point system ``[[Phi, P], [P^T, 0]] [a; c] =
    [Z; 0]`` (conditionally positive definite of order 3, hence degree >= 2;
    as in SciPy's RBFInterpolator with kernel='quintic'), in the warped and
    stretched inputs of :class:`SplineSettings`.
    """
    degree = settings.degree
    if degree < 2:
        raise InputError("the r^5 kernel needs a polynomial of degree >= 2.")
    index, slices, arrays, x, Z, warped = _prepared(data, settings.warp_inputs)
    extra = {"kernel": "r^5", "degree": degree, "warp_inputs": settings.warp_inputs,
             "anisotropic": settings.anisotropic,
             "input_warp": warped}
    if settings.anisotropic:
        t0 = time.perf_counter()
        scale, length = _anisotropy(x, Z, slices, settings)
        arrays["input_scale"] = scale
        x = rt.unit_inputs(np, arrays, data.theta)[0]
        extra.update(input_scale=scale.tolist(), anisotropy_length_scales=length.tolist(),
                     anisotropy_subset=min(settings.n_subset, len(x)))
        logger.info(f"  input stretch {np.array2string(scale, precision=3)} (GP length scales "
                f"{np.array2string(length, precision=3)} on {min(settings.n_subset, len(x))} points, "
                f"{time.perf_counter() - t0:.1f} s)")
    powers = trend_powers(x.shape[1], degree)
    P = _trend_matrix(x, powers)
    phi, _ = rt._polyharmonic(np, x, x, False)
    n, t = P.shape
    A = np.zeros((n + t, n + t))
    A[:n, :n] = phi
    A[:n, n:] = P
    A[n:, :n] = P.T
    rhs = np.vstack([Z, np.zeros((t, Z.shape[1]))])
    t0 = time.perf_counter()
    sol = scipy.linalg.solve(A, rhs, assume_a="sym", check_finite=False)
    logger.info(f"  RBF r^5 + degree-{degree} polynomial on {n} points: {time.perf_counter() - t0:.1f} s")
    arrays.update(trend_powers=powers, trend_coef=sol[n:], X=x, alpha=sol[:n])
    return index, {"rbf": extra}, arrays


def fit_tensor(data: TrainingData):
    """Tensor-product cubic interpolating splines on a complete regular grid.

    The coefficients come from interpolating along one axis after another
    with SciPy's ``make_interp_spline`` (not-a-knot cubic B-splines).
    """
    from scipy.interpolate import make_interp_spline

    if data.regular_shape is None:
        raise InputError("tensor-product splines need a regular design; this grid is scattered (use kind rbf).")
    shape = tuple(int(s) for s in data.regular_shape)
    if min(shape) < 4:
        raise InputError(f"cubic tensor splines need at least 4 points per axis; the grid has {shape}.")
    index, slices, arrays, x, Z, _ = _prepared(data, warp_inputs=False)
    coef = Z.reshape(*shape, Z.shape[1])
    axes_values = []
    knots = []
    for i, s in enumerate(shape):
        idx = [0] * len(shape)
        sl = []
        for j in range(len(shape)):
            sl.append(slice(None) if j == i else 0)
        xi = x.reshape(*shape, x.shape[1])[tuple(sl) + (i,)]
        axes_values.append(xi)
        spl = make_interp_spline(xi, np.moveaxis(coef, i, 0), k=3, axis=0)
        coef = np.moveaxis(spl.c, 0, i)
        knots.append(spl.t)
        del idx
    kmax = max(len(k) for k in knots)
    knot_arr = np.full((len(shape), kmax), np.nan)
    for i, k in enumerate(knots):
        knot_arr[i, : len(k)] = k
    arrays.update(trend_powers=np.zeros((1, x.shape[1]), dtype=np.int64), trend_coef=np.zeros((1, Z.shape[1])),
                  knots=knot_arr, n_knots=np.array([len(k) for k in knots]), coef=coef.reshape(-1, Z.shape[1]),
                  coef_shape=np.array(shape))
    logger.info(f"  tensor-product cubic splines on a {' x '.join(map(str, shape))} grid")
    return index, {"tensor": {"shape": list(shape)}}, arrays
