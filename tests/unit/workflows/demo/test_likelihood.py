"""The demo likelihood against quadrature on models with closed-form M-R-Lambda relations."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats
from scipy.optimize import brentq
from tovforge.workflows.demo import MassRadius, MergerTides, Observations, Posterior, lowest_mass_ratio, simpson_weights
from tovforge.tables import component_masses, lambda_tilde
from tovforge.surrogate import Estimate


class LineModel:
    """An invented two-parameter model with the evaluator's interface.

    M_max = 1.8 + 0.6 t0 (Msun); R(M) = 11 + 2 t1 - 0.8 (M - 1.4) km and
    Lambda(M) = 400 (1.4 / M)^6 (1 + t1), NaN above M_max.
    """

    BOUNDS = ((0.0, 1.0), (0.0, 1.0))

    def __init__(self):
        self.calls = 0

    def mass_max(self, theta):
        self.calls += 1
        return Estimate(1.8 + 0.6 * theta[:, 0])

    def _rows(self, theta, mass):
        mass = np.broadcast_to(np.asarray(mass, float), (len(theta), np.shape(mass)[-1]))
        return mass, (mass <= self.mass_max(theta).value[:, None])

    def radius(self, theta, mass):
        mass, ok = self._rows(theta, mass)
        return Estimate(np.where(ok, 11.0 + 2.0 * theta[:, 1:2] - 0.8 * (mass - 1.4), np.nan))

    def tidal_deformability(self, theta, mass):
        mass, ok = self._rows(theta, mass)
        return Estimate(np.where(ok, 400.0 * (1.4 / mass) ** 6 * (1.0 + theta[:, 1:2]), np.nan))


PULSAR = MassRadius("P", 1.5, 0.1, 11.8, 0.6, 0.4)
HEAVY = MassRadius("H", 2.0, 0.07, 11.0, 0.8, -0.3)
MERGER = MergerTides("G", 1.2, 0.7, 1.0, 500.0, 150.0)


def _obs(pulsars=(), mergers=()):
    return Observations(tuple(pulsars), tuple(mergers), "", {}, None)


def _pulsar_reference(model, theta, p, m_low=1.0):
    """(1 / (M_max - M_low)) * integral of the 2-D Gaussian along the branch, by adaptive quadrature."""
    t = np.asarray(theta, float)[None, :]
    mmax = float(model.mass_max(t).value[0])
    cov = [[p.mass_sigma_msun**2, p.correlation * p.mass_sigma_msun * p.radius_sigma_km],
           [p.correlation * p.mass_sigma_msun * p.radius_sigma_km, p.radius_sigma_km**2]]
    dist = stats.multivariate_normal([p.mass_msun, p.radius_km], cov)

    def f(m):
        return dist.pdf([m, float(model.radius(t, [m]).value[0, 0])])

    val, _ = integrate.quad(f, m_low, mmax, epsabs=0, epsrel=1e-12, limit=200)
    return np.log(val / (mmax - m_low))


def _merger_reference(model, theta, mg):
    """(1 / (q_max - q_min)) * integral over q of N(Lambda_tilde(q)), zero where m1 > M_max."""
    t = np.asarray(theta, float)[None, :]
    mmax = float(model.mass_max(t).value[0])

    def f(q):
        m1, m2 = component_masses(mg.chirp_mass_msun, q)
        if m1 > mmax:
            return 0.0
        lam = model.tidal_deformability(t, [m1, m2]).value[0]
        return stats.norm.pdf(lambda_tilde(m1, m2, lam[0], lam[1]), mg.lambda_tilde, mg.lambda_tilde_sigma)

    # the integrand jumps to zero where m1(q) = M_max: start there
    lo, hi = mg.mass_ratio_min, mg.mass_ratio_max
    if component_masses(mg.chirp_mass_msun, hi)[0] > mmax:
        return -np.inf
    if component_masses(mg.chirp_mass_msun, lo)[0] > mmax:
        lo = brentq(lambda q: component_masses(mg.chirp_mass_msun, q)[0] - mmax, lo, hi, xtol=1e-15, rtol=1e-15)
    q_cut = lo
    val, _ = integrate.quad(f, q_cut, mg.mass_ratio_max, epsabs=0, epsrel=1e-12, limit=200)
    return np.log(val / (mg.mass_ratio_max - mg.mass_ratio_min)) if val > 0 else -np.inf


THETAS = np.array([[0.5, 0.4], [0.0, 0.9], [1.0, 0.1], [0.25, 0.6]])


@pytest.mark.parametrize("p", [PULSAR, HEAVY], ids=["light", "heavy"])
def test_pulsar_term_equals_quadrature(p):
    model = LineModel()
    post = Posterior(model, _obs([p]), n_mass=1001)
    got, mmax = post.terms(THETAS)
    np.testing.assert_allclose(mmax, model.mass_max(THETAS).value, rtol=0)
    want = [_pulsar_reference(model, t, p) for t in THETAS]
    # Simpson's rule on a smooth integrand: error ~ h^4, about 1e-12 here
    np.testing.assert_allclose(got[:, 0], want, rtol=0, atol=1e-8)


@pytest.mark.parametrize("theta", [[0.5, 0.4], [1.0, 0.0], [0.2, 0.3], [0.05, 0.9]])
def test_merger_term_equals_quadrature(theta):
    """M_max from 1.83 to 2.4 Msun: all pairs, or only the lighter ones, are stable."""
    model = LineModel()
    mg = MergerTides("G", 1.45, 0.5, 1.0, 300.0, 100.0)  # m1 from 1.67 (q = 1) to 2.5 Msun (q = 0.5)
    got, _ = Posterior(model, _obs(mergers=[mg, MERGER]), n_mass_ratio=1001).terms(np.array([theta]))
    want = [_merger_reference(model, theta, m) for m in (mg, MERGER)]
    np.testing.assert_allclose(got[0], want, rtol=0, atol=1e-8)


def test_lowest_mass_ratio_inverts_the_heavier_mass():
    mmax = np.array([1.3, 1.6, 2.0, 2.4, 3.5])
    q = lowest_mass_ratio(1.2, mmax)
    np.testing.assert_allclose(component_masses(1.2, q)[0], mmax, rtol=1e-13)
    assert q[0] > 1.0  # M_max below the equal-mass star of this chirp mass: no stable pair


def test_no_stable_pair_gives_minus_infinity():
    model = LineModel()
    mg = MergerTides("G", 2.0, 0.9, 1.0, 300.0, 100.0)  # m1 >= 2.3 Msun, above M_max = 2.1 Msun
    got, _ = Posterior(model, _obs(mergers=[mg])).terms(np.array([[0.5, 0.5]]))
    assert got[0, 0] == -np.inf


def test_outside_the_box_and_below_the_mass_floor_is_minus_infinity_without_evaluating():
    model = LineModel()
    post = Posterior(model, _obs([PULSAR], [MERGER]), mass_low_msun=2.0)
    theta = np.array([[1.2, 0.5], [0.5, -0.1], [0.1, 0.5], [0.9, 0.5]])  # out, out, M_max 1.86 < 2.0, ok
    lp = post(theta)
    assert lp[0] == lp[1] == lp[2] == -np.inf and np.isfinite(lp[3])
    model.calls = 0
    assert np.all(post(theta[:2]) == -np.inf) and model.calls == 0


def test_rows_are_independent_of_their_batch():
    model = LineModel()
    post = Posterior(model, _obs([PULSAR, HEAVY], [MERGER]))
    rng = np.random.default_rng(3)
    theta = rng.random((17, 2))
    whole = post(theta)
    one_by_one = np.array([post(theta[i:i + 1])[0] for i in range(len(theta))])
    np.testing.assert_array_equal(whole, one_by_one)


def test_log_posterior_is_the_sum_of_terms_plus_the_uniform_prior():
    model = LineModel()
    bounds = np.array([[0.0, 1.0], [0.0, 2.0]])
    post = Posterior(model, _obs([PULSAR, HEAVY], [MERGER]), bounds=bounds)
    terms, _ = post.terms(THETAS)
    np.testing.assert_allclose(post(THETAS), terms.sum(axis=1) - np.log(2.0), rtol=1e-14)


def test_far_tails_do_not_underflow():
    model = LineModel()
    far = MassRadius("F", 1.4, 0.01, 25.0, 0.05, 0.0)  # 250 sigma from every branch: density exp(-3e4)
    got, _ = Posterior(model, _obs([far])).terms(THETAS)
    assert np.all(np.isfinite(got)) and np.all(got < -1e4)


def test_default_grids_agree_with_fine_grids_for_the_demo_data():
    """The demo's 65 mass nodes and 33 mass-ratio nodes, against 2001 of each."""
    from tovforge.workflows.demo import load_observations

    obs = load_observations()
    model = LineModel()
    rng = np.random.default_rng(8)
    theta = rng.random((40, 2))
    coarse, _ = Posterior(model, obs).terms(theta)
    fine, _ = Posterior(model, obs, n_mass=2001, n_mass_ratio=2001).terms(theta)
    ok = np.isfinite(fine)
    assert np.array_equal(ok, np.isfinite(coarse))
    # 1e-3 in log L is far below what moves a posterior (1 sigma of a parameter shifts log L by 0.5)
    assert np.max(np.abs(coarse[ok] - fine[ok])) < 1e-3


@pytest.mark.parametrize("n", [3, 5, 65])
def test_simpson_weights_integrate_cubics_exactly(n):
    x = np.linspace(0.0, 1.0, n)
    w = simpson_weights(n)
    for k in range(4):
        assert w @ x**k == pytest.approx(1.0 / (k + 1), rel=1e-14)


@pytest.mark.parametrize("n", [2, 4, 64])
def test_simpson_weights_need_an_odd_count(n):
    from tovforge.errors import InputError

    with pytest.raises(InputError, match=f"odd number of nodes, at least 3. Got {n}"):
        simpson_weights(n)
