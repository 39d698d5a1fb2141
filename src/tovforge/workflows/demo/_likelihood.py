"""The demo posterior: mass-radius and merger-tidal likelihoods, vectorised over walkers.

The model is anything with the query interface of an exported evaluator
(``mass_max(theta)``, ``radius(theta, mass)``, ``tidal_deformability(theta,
mass)`` with one row of masses per theta, each returning an Estimate whose
``value`` is NaN where there is no stable star):
the exported file itself, or :class:`ExactModel`, which answers the same
queries with the exact solver so that the same arithmetic can be timed and
cross-checked.

Likelihood of a mass-radius measurement (a 2-D Gaussian in M and R): the
star's mass is unknown, with a uniform prior on [M_low, M_max(theta)], so

    L = (1 / (M_max - M_low)) * integral_{M_low}^{M_max} N2((M, R(M; theta)); mean, cov) dM.

R(M) has an infinite slope at M_max (R - R_max ~ sqrt(M_max - M)), which
slows any rule uniform in M (measured on the demo box: 0.2 in log L with 65
nodes).  With ``M = M_max - (M_max - M_low) v^2`` the integral becomes
``integral_0^1 N2(M(v), R(M(v))) 2 v dv``, and ``v`` is proportional to the
sequence coordinate ``u = sqrt(1 - M / M_max)`` in which the branch is smooth
(the surrogates are splines in u), so Simpson's rule in ``v`` converges fast
(4e-4 in log L with 65 nodes).  The grid ends exactly at M_max: nothing lies
above it.

A merger constrains Lambda-tilde (Flanagan & Hinderer 2008, see
:func:`tovforge.tables.lambda_tilde`) at the component masses fixed by the
chirp mass and the mass ratio q, with q marginalised over its uniform prior
range; pairs whose heavier star would exceed M_max are impossible and add
nothing, so the q grid of each theta starts where ``m1(q) = M_max``:

    L = (1 / (q_max - q_min)) * integral_{max(q_min, q*)}^{q_max} N(Lambda_tilde(q; theta); mean, sigma) dq.

NaN answers of the model (no star there) count as zero.  Sums run in log
space (``logsumexp``), so far tails do not underflow.
"""

from __future__ import annotations

import numpy as np
from scipy.special import logsumexp

from ...errors import InputError
from ...status import Status
from ...surrogate import Estimate
from ...tables import component_masses, lambda_tilde
from ._observations import Observations

__all__ = ["ExactModel", "Posterior", "simpson_weights", "lowest_mass_ratio"]

_LOG_2PI = float(np.log(2.0 * np.pi))
#: The lightest mass ratio puts m1 a hair below M_max: rounding must not push it past the branch (NaN).
_BELOW_TOP = 1.0 - 1e-9


def simpson_weights(n: int) -> np.ndarray:
    """Composite Simpson weights of ``n`` (odd, >= 3) equidistant nodes on [0, 1]."""
    if n < 3 or n % 2 == 0:
        raise InputError(f"Simpson's rule needs an odd number of nodes, at least 3. Got {n}.")
    w = np.ones(n)
    w[1:-1:2], w[2:-1:2] = 4.0, 2.0
    return w / (3.0 * (n - 1))


def lowest_mass_ratio(chirp_mass, mass_max) -> np.ndarray:
    """The mass ratio ``q*`` at which the heavier star has ``m1 = mass_max`` (for a chirp mass).

    ``m1(q) = Mc (1 + q)^(1/5) q^(-3/5)`` falls monotonically on (0, 1], so
    pairs with ``q < q*`` need a star above ``mass_max``.  Solved by Newton's
    method on ``ln m1(q) - ln mass_max`` in ``ln q``, vectorised; the function
    is convex and decreasing, so after the first step the iterates rise
    monotonically to the root.

    Returns
    -------
    ndarray
        ``q*``, shape of ``mass_max``; values above 1 mean no stable pair.
    """
    target = np.log(np.asarray(mass_max, float) / chirp_mass)
    x = np.zeros_like(target)  # x = ln q, from q = 1
    for _ in range(60):
        q = np.exp(x)
        g = 0.2 * np.log1p(q) - 0.6 * x - target
        step = g / (0.2 * q / (1.0 + q) - 0.6)
        x = x - step
        if np.all(np.abs(step) < 1e-14):
            break
    return np.exp(x)


class Posterior:
    """Log posterior of EOS parameters given mass-radius and merger-tidal data.

    Calling the object with ``theta`` of shape (n, d) returns the log
    posterior of every row at once (``emcee`` with ``vectorize=True``).

    Parameters
    ----------
    model : module or object
        The query interface of an exported evaluator (see the module docstring).
    observations : Observations
    bounds : array_like, shape (d, 2), optional
        The box of the uniform prior (default: ``model.BOUNDS``, the trained box).
    mass_low_msun : float
        Lower end of the uniform prior on each pulsar's mass, in Msun.
    n_mass : int
        Nodes (odd) of Simpson's rule in ``v`` over each pulsar's mass range.
    n_mass_ratio : int
        Nodes (odd) of Simpson's rule over each merger's allowed mass ratios.
    """

    def __init__(self, model, observations: Observations, bounds=None, *, mass_low_msun: float = 1.0,
                 n_mass: int = 65, n_mass_ratio: int = 33):
        self.model = model
        self.observations = observations
        b = np.asarray(model.BOUNDS if bounds is None else bounds, dtype=float)
        self.lo, self.hi = b[:, 0], b[:, 1]
        # uniform prior density on the box, so the log posterior is normalised in theta
        self.log_prior = -float(np.sum(np.log(self.hi - self.lo)))
        self.mass_low_msun = float(mass_low_msun)
        v = np.linspace(0.0, 1.0, n_mass)
        # the v = 0 node (M = M_max) has weight 0 (the Jacobian 2v): it is never evaluated
        self._v = v[1:]
        self._log_w_mass = np.log(simpson_weights(n_mass)[1:] * 2.0 * v[1:])
        self._t = np.linspace(0.0, 1.0, n_mass_ratio)
        self._log_w_q = np.log(simpson_weights(n_mass_ratio))

    @property
    def names(self) -> tuple[str, ...]:
        """Names of the likelihood terms (pulsars, then mergers)."""
        return self.observations.names

    def pulsar_masses(self, mass_max) -> np.ndarray:
        """The mass nodes of each row, shape (n, n_mass - 1), in Msun: from below M_max down to M_low.

        The node at M_max itself has weight zero and is left out.
        """
        mass_max = np.asarray(mass_max, float)
        return mass_max[:, None] - (mass_max - self.mass_low_msun)[:, None] * self._v**2

    def merger_pairs(self, mass_max) -> list[tuple[np.ndarray, np.ndarray, np.ndarray]]:
        """Component masses of each merger's mass-ratio nodes, per row.

        Returns
        -------
        list of (m1, m2, log_fraction)
            Per merger: ``m1``, ``m2`` of shape (n, n_mass_ratio) in Msun, and
            the log of the allowed fraction of the q range, shape (n,) (-inf
            where no pair is stable).
        """
        mass_max = np.asarray(mass_max, float)
        out = []
        for mg in self.observations.mergers:
            q_lo = np.maximum(mg.mass_ratio_min, lowest_mass_ratio(mg.chirp_mass_msun, mass_max * _BELOW_TOP))
            width = mg.mass_ratio_max - q_lo
            with np.errstate(divide="ignore"):
                log_frac = np.where(width > 0, np.log(np.maximum(width, 0.0)), -np.inf) - np.log(
                    mg.mass_ratio_max - mg.mass_ratio_min)
            q = q_lo[:, None] + np.maximum(width, 0.0)[:, None] * self._t[None, :]
            m1, m2 = component_masses(mg.chirp_mass_msun, q)
            out.append((m1, m2, log_frac))
        return out

    def terms(self, theta) -> tuple[np.ndarray, np.ndarray]:
        """Log-likelihood of each observation, and M_max, for rows of ``theta``.

        Parameters
        ----------
        theta : array_like, shape (n, d)

        Returns
        -------
        log_like : ndarray, shape (n, n_observations)
            One column per observation (order of :attr:`names`); -inf outside
            the prior box or where M_max <= ``mass_low_msun``.
        mass_max : ndarray, shape (n,)
            In Msun; NaN outside the box.
        """
        theta = np.atleast_2d(np.asarray(theta, float))
        n = theta.shape[0]
        out = np.full((n, len(self.names)), -np.inf)
        mmax = np.full(n, np.nan)
        inside = np.all((theta >= self.lo) & (theta <= self.hi), axis=1)
        rows = np.flatnonzero(inside)
        if rows.size == 0:
            return out, mmax
        mmax[rows] = self.model.mass_max(theta[rows]).value
        rows = rows[np.isfinite(mmax[rows]) & (mmax[rows] > self.mass_low_msun)]
        if rows.size == 0:
            return out, mmax
        t = theta[rows]
        obs = self.observations
        col = 0
        if obs.pulsars:
            masses = self.pulsar_masses(mmax[rows])
            radii = np.asarray(self.model.radius(t, masses).value, float)
            for p in obs.pulsars:
                out[rows, col] = self._mass_radius(p, masses, radii)
                col += 1
        if obs.mergers:
            pairs = self.merger_pairs(mmax[rows])
            # every merger's m1 and m2 in one query (one model evaluation)
            lam = np.asarray(self.model.tidal_deformability(t, np.concatenate(
                [m for m1, m2, _ in pairs for m in (m1, m2)], axis=1)).value, float)
            k = self._t.size
            for j, (mg, (m1, m2, log_frac)) in enumerate(zip(obs.mergers, pairs)):
                lam1, lam2 = lam[:, 2 * j * k:(2 * j + 1) * k], lam[:, (2 * j + 1) * k:(2 * j + 2) * k]
                z = (lambda_tilde(m1, m2, lam1, lam2) - mg.lambda_tilde) / mg.lambda_tilde_sigma
                log_n = -0.5 * z * z - 0.5 * _LOG_2PI - np.log(mg.lambda_tilde_sigma)
                log_n = np.where(np.isfinite(log_n), log_n, -np.inf)
                out[rows, col] = logsumexp(log_n + self._log_w_q, axis=1) + log_frac
                col += 1
        return out, mmax

    def _mass_radius(self, p, masses, radii) -> np.ndarray:
        rho = p.correlation
        zm = (masses - p.mass_msun) / p.mass_sigma_msun
        zr = (radii - p.radius_km) / p.radius_sigma_km
        quad = (zm * zm - 2.0 * rho * zm * zr + zr * zr) / (1.0 - rho * rho)
        log_n = -0.5 * quad - _LOG_2PI - np.log(p.mass_sigma_msun * p.radius_sigma_km * np.sqrt(1.0 - rho * rho))
        log_n = np.where(np.isfinite(log_n), log_n, -np.inf)
        return logsumexp(log_n + self._log_w_mass, axis=1)

    def __call__(self, theta) -> np.ndarray:
        """Log posterior density of rows of ``theta`` (shape (n, d) -> (n,)); -inf outside the box."""
        log_like, _ = self.terms(theta)
        return np.sum(log_like, axis=1) + self.log_prior


class ExactModel:
    """The evaluator's query interface answered by the exact solver.

    Every call solves the rows of ``theta`` together (one batched
    :func:`tovforge.solve.solve_sequences` per call); invalid rows give NaN.

    Parameters
    ----------
    family : str
        EOS family name.
    bounds : array_like, shape (d, 2)
    n_stars : int
        Stars of the stable branch solved besides the queries (they place
        the mass queries).
    """

    def __init__(self, family: str, bounds, n_stars: int = 16):
        from ...eos import get_family

        self.family = get_family(family)
        self.BOUNDS = np.asarray(bounds, float)
        self.n_stars = n_stars

    def _solve(self, theta, masses=None):
        from ...solve import solve_sequences

        theta = np.atleast_2d(np.asarray(theta, float))
        ok = np.array([not m for m in self.family.validate_rows(theta)])
        res = None
        if ok.any():
            m = None if masses is None else np.asarray(masses, float)
            if m is not None and m.ndim == 2:
                m = m[ok]
            # the maximum solved exactly in every call, so that M_max is the same in all three queries
            res = solve_sequences(self.family.build(theta[ok]), n_stars=self.n_stars, masses=m, exact_maximum=True)
        return ok, res

    def mass_max(self, theta) -> Estimate:
        """Maximum mass in Msun, value of shape (n,); NaN where the solve failed."""
        ok, res = self._solve(theta)
        out = np.full(ok.shape, np.nan)
        if res is not None:
            out[ok] = np.where(res.status == Status.OK, res.mass_max.mass_msun, np.nan)
        return Estimate(out)

    def _at(self, field: str, theta, mass) -> Estimate:
        mass = np.asarray(mass, float)
        ok, res = self._solve(theta, mass)
        out = np.full((ok.size, mass.shape[-1]), np.nan)
        if res is not None:
            vals = getattr(res.at_mass, field)
            out[ok] = np.where((res.status == Status.OK)[:, None], vals, np.nan)
        return Estimate(out)

    def radius(self, theta, mass) -> Estimate:
        """Radius in km at masses (Msun), value of shape (n, q); NaN above M_max."""
        return self._at("radius_km", theta, mass)

    def tidal_deformability(self, theta, mass) -> Estimate:
        """Lambda at masses (Msun), value of shape (n, q); NaN above M_max."""
        return self._at("tidal_deformability", theta, mass)
