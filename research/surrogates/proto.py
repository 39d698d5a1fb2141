"""Research prototypes: learned input transforms, local (partition-of-unity) RBF, LOO error models.

Nothing here is part of the package; the winners move into ``src/tovforge/surrogate``
in phase 2.  Conventions follow the library: outputs are the node matrix of
``TrainingData.output_matrix`` (3 scalars, then R, ln Lambda, ln I at the u nodes),
standardised per column before fitting.

Pieces
------
- ``Warp``: per-parameter monotone map of the unit interval, ``w(t) = (1 - exp(-k t)) /
  (1 - exp(-k))`` (k = 0: identity; k > 0 stretches the low end, k < 0 the high end),
  then a per-parameter scale ``s``.  Learned by minimising leave-one-out errors.
- ``rbf_fit``: r^5 + quadratic interpolation on one point set with Rippa's
  leave-one-out residuals ``e_i = c_i / [A^-1]_ii`` (Rippa 1999, Adv. Comput. Math.
  11, 193; for the augmented system with a polynomial: Fasshauer & Zhang 2007,
  Numer. Algorithms 45, 345).
- ``PURBF``: partition of unity of local r^5 interpolants on a tensor grid of cells
  (quantile edges per parameter), smooth quintic blends of width ``overlap`` near
  interior cell faces; each local model trained on its cell grown by ``margin``
  (Wendland 2002, "Fast evaluation of radial basis functions: methods based on
  partition of unity"; Cavoretto & De Rossi 2015 on RBF-PU).
- ``ErrorModel``: sigma(x) from leave-one-out residuals of the nearest training
  points (kernel-weighted RMS), calibrated so |e|/sigma > 3 is rare on the LOO set.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg

from tovforge.surrogate._prepare import trend_powers

__all__ = ["Warp", "rbf_fit", "rbf_eval", "PURBF", "ErrorModel", "SmoothErrorModel", "learn_warp", "loo_objective"]


# ---------------------------------------------------------------------------------------------
# input transforms
# ---------------------------------------------------------------------------------------------

@dataclass
class Warp:
    """theta -> x: unit box, per-parameter exponential warp k, then scale s."""

    lo: np.ndarray
    hi: np.ndarray
    k: np.ndarray
    s: np.ndarray
    log_shift: np.ndarray | None = None  # optional ln(theta - shift) first (the library's warp), NaN = off

    def unit(self, theta):
        theta = np.asarray(theta, float)
        lo, hi = self.lo, self.hi
        if self.log_shift is not None:
            on = np.isfinite(self.log_shift)
            sh = np.where(on, self.log_shift, 0.0)
            theta = np.where(on, np.log(np.where(on, theta - sh, 1.0)), theta)
            lo = np.where(on, np.log(np.where(on, self.lo - sh, 1.0)), self.lo)
            hi = np.where(on, np.log(np.where(on, self.hi - sh, 1.0)), self.hi)
        return (theta - lo) / (hi - lo)

    def __call__(self, theta):
        t = self.unit(theta)
        k = self.k
        small = np.abs(k) < 1e-8
        kk = np.where(small, 1.0, k)
        w = np.where(small, t, -np.expm1(-kk * t) / -np.expm1(-kk))
        return w * self.s


def identity_warp(bounds):
    d = len(bounds)
    return Warp(bounds[:, 0].astype(float), bounds[:, 1].astype(float), np.zeros(d), np.ones(d))


# ---------------------------------------------------------------------------------------------
# one r^5 interpolant with leave-one-out residuals
# ---------------------------------------------------------------------------------------------

def _phi(x, X):
    d2 = np.sum(x * x, 1)[:, None] + np.sum(X * X, 1)[None, :] - 2.0 * x @ X.T
    r = np.sqrt(np.maximum(d2, 0.0))
    return r ** 5


def _phi_exact(x, X):
    r2 = np.zeros((len(x), len(X)))
    for i in range(x.shape[1]):
        diff = x[:, i:i + 1] - X[None, :, i]
        r2 += diff * diff
    r = np.sqrt(r2)
    return r2 * r2 * r


@dataclass
class RBFLocal:
    X: np.ndarray      # (n, d) points (already transformed)
    centre: np.ndarray  # (d,) polynomial centring
    scale: float       # polynomial coordinate scale
    powers: np.ndarray
    alpha: np.ndarray  # (n, n_out)
    coef: np.ndarray   # (n_terms, n_out)
    loo: np.ndarray | None = None  # (n, n_out) leave-one-out residuals


def _poly(x, centre, scale, powers):
    z = (x - centre) / scale
    return np.prod(z[:, None, :] ** powers[None, :, :], axis=-1)


def rbf_fit(X, Z, degree=2, loo=False) -> RBFLocal:
    """r^5 + polynomial interpolant of Z (n, n_out) at X (n, d); Rippa LOO residuals if ``loo``."""
    n, d = X.shape
    powers = trend_powers(d, degree)
    centre = X.mean(0)
    scale = float(np.max(np.abs(X - centre))) or 1.0
    P = _poly(X, centre, scale, powers)
    t = P.shape[1]
    A = np.zeros((n + t, n + t))
    A[:n, :n] = _phi_exact(X, X)
    A[:n, n:] = P
    A[n:, :n] = P.T
    rhs = np.vstack([Z, np.zeros((t, Z.shape[1]))])
    if loo:
        Ainv = scipy.linalg.inv(A, check_finite=False)
        sol = Ainv @ rhs
        res = sol[:n] / np.diag(Ainv)[:n, None]
    else:
        sol = scipy.linalg.solve(A, rhs, assume_a="sym", check_finite=False)
        res = None
    return RBFLocal(X, centre, scale, powers, sol[:n], sol[n:], res)


def rbf_eval(m: RBFLocal, x):
    return _phi_exact(x, m.X) @ m.alpha + _poly(x, m.centre, m.scale, m.powers) @ m.coef


# ---------------------------------------------------------------------------------------------
# partition of unity
# ---------------------------------------------------------------------------------------------

def _smooth(t):
    t = np.clip(t, 0.0, 1.0)
    return t * t * t * (t * (6.0 * t - 15.0) + 10.0)


@dataclass
class PURBF:
    """Partition of unity of local r^5 interpolants on a tensor grid of cells."""

    edges: list            # per parameter, cell edges (K_i + 1,) in x
    half: list             # per parameter, half-width of the blend at each interior edge (K_i - 1,)
    models: dict           # cell multi-index -> RBFLocal
    stats: dict = field(default_factory=dict)

    @staticmethod
    def fit(X, Z, cells, overlap=0.15, margin=0.25, degree=2, loo=True, min_points=None, log=None):
        """``cells``: cells per parameter (tuple); edges at the quantiles of the training points.

        ``overlap``: blend half-width as a fraction of the smaller neighbouring cell;
        ``margin``: each local model also uses the points within ``margin`` x cell width
        outside its cell (beyond the blend zone).
        """
        t0 = time.perf_counter()
        d = X.shape[1]
        edges, half = [], []
        for i in range(d):
            q = np.quantile(X[:, i], np.linspace(0, 1, cells[i] + 1))
            lo, hi = X[:, i].min(), X[:, i].max()
            q[0], q[-1] = lo, hi
            edges.append(q)
            w = np.diff(q)
            half.append(overlap * np.minimum(w[:-1], w[1:]))
        models = {}
        sizes = []
        home_loo = np.full(Z.shape, np.nan)
        import itertools
        for J in itertools.product(*[range(c) for c in cells]):
            lo = np.array([edges[i][J[i]] for i in range(d)])
            hi = np.array([edges[i][J[i] + 1] for i in range(d)])
            w = hi - lo
            inside = np.all((X >= lo - margin * w) & (X <= hi + margin * w), axis=1)
            idx = np.flatnonzero(inside)
            m = rbf_fit(X[idx], Z[idx], degree, loo)
            m.idx = idx
            models[J] = m
            sizes.append(len(idx))
            if loo:
                home = np.all((X[idx] >= lo) & (X[idx] <= hi), axis=1)
                home_loo[idx[home]] = m.loo[home]
        pu = PURBF(edges, half, models)
        pu.stats = {"fit_seconds": time.perf_counter() - t0, "patch_sizes": [min(sizes), int(np.median(sizes)),
                                                                              max(sizes)],
                    "n_patches": len(models), "stored_rows": int(np.sum(sizes))}
        pu.loo = home_loo
        if log:
            log(f"PU-RBF {cells} cells: patch sizes {pu.stats['patch_sizes']}, {pu.stats['fit_seconds']:.1f} s")
        return pu

    def _weights_1d(self, i, x):
        """(n, K_i) 1-D partition-of-unity weights along parameter i."""
        e, h = self.edges[i], self.half[i]
        K = len(e) - 1
        W = np.ones((len(x), K))
        for j in range(1, K):  # interior edge j between cells j-1 and j
            s = _smooth((x - (e[j] - h[j - 1])) / (2 * h[j - 1]))
            W[:, j] *= s
            W[:, j - 1] *= 1.0 - s
        return W

    def predict(self, x):
        d = x.shape[1]
        W1 = [self._weights_1d(i, x[:, i]) for i in range(d)]
        out = None
        for J, m in self.models.items():
            w = np.ones(len(x))
            for i in range(d):
                w = w * W1[i][:, J[i]]
            sel = np.flatnonzero(w > 0)
            if sel.size == 0:
                continue
            f = rbf_eval(m, x[sel])
            if out is None:
                out = np.zeros((len(x), f.shape[1]))
            out[sel] += w[sel, None] * f
        return out

    def patches_per_point(self, x):
        d = x.shape[1]
        W1 = [self._weights_1d(i, x[:, i]) for i in range(d)]
        return np.prod([np.sum(w > 0, axis=1) for w in W1], axis=0)


# ---------------------------------------------------------------------------------------------
# error model from leave-one-out residuals
# ---------------------------------------------------------------------------------------------

@dataclass
class ErrorModel:
    """sigma(x) per output: calibrated RMS of the LOO residuals of the k nearest training points."""

    X: np.ndarray
    E2: np.ndarray   # (n, n_out) squared LOO residuals
    k: int
    scale: np.ndarray  # (n_out,)

    @staticmethod
    def fit(X, loo, k=12, target=0.005, groups=None):
        em = ErrorModel(X, loo ** 2, k, np.ones(loo.shape[1]))
        raw = em._raw(X, skip_self=True)
        z = np.abs(loo) / raw
        # scale per output so the fraction of |e|/sigma > 3 on the (self-excluded) LOO set is ``target``
        q = np.quantile(z, 1.0 - target, axis=0)
        em.scale = q / 3.0
        return em

    def _raw(self, x, skip_self=False):
        from scipy.spatial import cKDTree

        tree = cKDTree(self.X)
        kk = self.k + (1 if skip_self else 0)
        dist, idx = tree.query(x, kk)
        if skip_self:
            dist, idx = dist[:, 1:], idx[:, 1:]
        w = 1.0 / (dist + 1e-12 + dist[:, :1]) ** 2
        w /= w.sum(1, keepdims=True)
        return np.sqrt(np.einsum("nk,nko->no", w, self.E2[idx]))

    def __call__(self, x):
        s = self._raw(x) * self.scale
        floor = getattr(self, "floor", None)
        return s if floor is None else np.sqrt(s * s + floor * floor)


@dataclass
class SmoothErrorModel:
    """sigma(x) per output: Gaussian-kernel (Nadaraya-Watson) average of squared LOO residuals, calibrated.

    Smooth in x (differentiable, no neighbour search), bandwidth ``h`` times the median
    nearest-neighbour spacing of the training points.
    """

    X: np.ndarray
    E2: np.ndarray
    bw: float
    scale: np.ndarray
    floor: np.ndarray

    @staticmethod
    def fit(X, loo, h=1.5, target=0.005):
        from scipy.spatial import cKDTree

        spacing = float(np.median(cKDTree(X).query(X, 2)[0][:, 1]))
        e2 = loo ** 2
        em = SmoothErrorModel(X, e2, h * spacing, np.ones(loo.shape[1]), 0.1 * np.sqrt(np.median(e2, axis=0)))
        raw = em._raw(X, skip_self=True)
        z = np.abs(loo) / raw
        em.scale = np.quantile(z, 1.0 - target, axis=0) / 3.0
        return em

    def _raw(self, x, skip_self=False, block=2048):
        out = np.empty((len(x), self.E2.shape[1]))
        for s in range(0, len(x), block):
            xb = x[s:s + block]
            d2 = np.sum(xb * xb, 1)[:, None] + np.sum(self.X ** 2, 1)[None, :] - 2 * xb @ self.X.T
            K = np.exp(-0.5 * np.maximum(d2, 0.0) / self.bw ** 2)
            if skip_self:
                K[np.arange(len(xb)), np.arange(s, s + len(xb))] = 0.0
            out[s:s + block] = (K @ self.E2) / np.maximum(K.sum(1), 1e-300)[:, None]
        return np.sqrt(out + self.floor ** 2)

    def __call__(self, x):
        return self._raw(x) * self.scale


# ---------------------------------------------------------------------------------------------
# learning the warp from leave-one-out errors
# ---------------------------------------------------------------------------------------------

def loo_objective(X, Z, weights, degree=2):
    """Weighted sum over output groups of log mean-square LOO residual (one global RBF)."""
    m = rbf_fit(X, Z, degree, loo=True)
    e2 = m.loo ** 2
    return float(sum(w * np.log(np.mean(e2[:, cols])) for cols, w in weights)), m


def learn_warp(theta, Z, bounds, weights, n_sub=1200, seed=0, log_shift=None, learn_k=True, learn_s=True,
               maxiter=200, log=None):
    """Warp parameters (k, s) minimising the LOO objective of a global RBF on a subset."""
    from scipy.optimize import minimize

    from tovforge.surrogate._prepare import space_filling_subset as _space_filling_subset

    d = theta.shape[1]
    base = Warp(bounds[:, 0].astype(float), bounds[:, 1].astype(float), np.zeros(d), np.ones(d), log_shift)
    sub = _space_filling_subset(base.unit(theta), min(n_sub, len(theta)), seed)
    th, Zs = theta[sub], Z[sub]

    def unpack(p):
        k = p[:d] if learn_k else np.zeros(d)
        ls = np.concatenate([[0.0], p[d if learn_k else 0:]]) if learn_s else np.zeros(d)
        return k, np.exp(ls)

    def f(p):
        k, s = unpack(p)
        w = Warp(base.lo, base.hi, k, s, log_shift)
        return loo_objective(w(th), Zs, weights)[0]

    p0 = np.zeros((d if learn_k else 0) + (d - 1 if learn_s else 0))
    t0 = time.perf_counter()
    f0 = f(p0)
    simplex = np.vstack([p0, p0 + 0.5 * np.eye(len(p0))])
    res = minimize(f, p0, method="Nelder-Mead", options={"maxiter": maxiter, "xatol": 1e-2, "fatol": 1e-3,
                                                          "initial_simplex": simplex})
    k, s = unpack(res.x)
    if log:
        log(f"learn_warp: objective {f0:.3f} -> {res.fun:.3f} in {res.nfev} evaluations, "
            f"{time.perf_counter() - t0:.0f} s; k {np.round(k, 2)}, s {np.round(s, 3)}")
    return Warp(base.lo, base.hi, k, s, log_shift), res


# ---------------------------------------------------------------------------------------------
# warp selection by Gaussian-process marginal likelihood
# ---------------------------------------------------------------------------------------------

def _gp_nlml(x, R, seed=0):
    """Negative log marginal likelihood and ARD length scales of one Matern-5/2 GP (sklearn) on R."""
    import warnings

    from sklearn.gaussian_process import GaussianProcessRegressor

    from tovforge.surrogate._gp import GPSettings
    from tovforge.surrogate._prepare import matern_kernel as _matern_kernel

    kernel = _matern_kernel(x.shape[1], GPSettings().noise_bounds)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        gp = GaussianProcessRegressor(kernel, random_state=seed, n_restarts_optimizer=0).fit(x, R)
    return -float(gp.log_marginal_likelihood_value_), np.atleast_1d(gp.kernel_.k1.k2.length_scale).astype(float)


LOG_CANDIDATES = (None, 1.0, 0.3, 0.1, 0.03)


def select_warp(theta, Z, bounds, cols, n_sub=400, seed=0, candidates=LOG_CANDIDATES, log=None):
    """Per-parameter warp ln(theta - lo + c (hi - lo)) (c None: none), chosen coordinate-wise by GP NLML.

    The GP (quadratic trend removed, one ARD Matern-5/2 kernel for the columns ``cols`` of Z)
    runs on a space-filling subset; returns the Warp with stretch l_min / l_i of the best fit.
    """
    from tovforge.surrogate._rbf import MIN_STRETCH
    from tovforge.surrogate._prepare import space_filling_subset as _space_filling_subset, trend_residuals as _trend_residuals

    d = theta.shape[1]
    lo, hi = bounds[:, 0].astype(float), bounds[:, 1].astype(float)
    sub = _space_filling_subset((theta - lo) / (hi - lo), min(n_sub, len(theta)), seed)
    th, Zs = theta[sub], Z[sub][:, cols]

    def warp_of(cs):
        shift = np.array([np.nan if c is None else l - c * (h - l) for c, l, h in zip(cs, lo, hi)])
        return Warp(lo, hi, np.zeros(d), np.ones(d), shift if np.isfinite(shift).any() else None)

    def score(cs):
        x = warp_of(cs)(th)
        R = _trend_residuals(x, Zs, 2)[2]
        return _gp_nlml(x, R, seed)

    cs = [None] * d
    best, length = score(cs)
    t0 = time.perf_counter()
    for i in range(d):
        for c in candidates:
            if c == cs[i]:
                continue
            trial = list(cs)
            trial[i] = c
            v, ls = score(trial)
            if v < best - 1.0:  # a clear gain in log evidence
                best, length, cs = v, ls, trial
    w = warp_of(cs)
    w.s = np.maximum(length.min() / length, MIN_STRETCH)
    if log:
        log(f"select_warp: c = {cs}, NLML {best:.1f}, stretch {np.round(w.s, 3)}, {time.perf_counter() - t0:.0f} s")
    return w, cs
