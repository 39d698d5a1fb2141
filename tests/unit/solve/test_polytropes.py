"""Polytropes: Lane-Emden limits, Hinderer's Love numbers, the numerical-relativity test star."""

from __future__ import annotations

import numpy as np
import pytest

from tovforge import eos, solve
from tovforge.units import MSUN_KM


@pytest.fixture(scope="module")
def gamma2():
    return eos.make("polytrope", K=100.0, gamma=2.0)


def test_newtonian_limit_gamma2(gamma2):
    """n = 1 Lane-Emden star (Chandrasekhar 1939): R = sqrt(pi K / (2 G)) for any mass,
    k2 = (15 - pi^2) / (2 pi^2) (Hinderer 2008, erratum Table 1), I/(M R^2) = (2/3)(1 - 6/pi^2).
    Deviations are relativistic corrections, O(C)."""
    h = np.array([1e-3, 1e-4, 1e-5])
    sv = solve.integrate_stars(gamma2.batch, np.zeros(3, int), h)
    r_newton = np.sqrt(50.0 * np.pi) * MSUN_KM  # K = 100 in G = c = Msun = 1
    targets = {
        "radius": (sv.radius, r_newton),
        "k2": (sv.k2, (15.0 - np.pi**2) / (2.0 * np.pi**2)),
        "inertia": (sv.moment_of_inertia / (sv.mass * sv.radius**2), 2.0 / 3.0 * (1.0 - 6.0 / np.pi**2)),
    }
    for name, (value, limit) in targets.items():
        ratio = (value / limit - 1.0) / sv.compactness
        assert np.all(np.abs(ratio) < 20), name
        np.testing.assert_allclose(ratio[1:], ratio[0], rtol=0.03, err_msg=name)


@pytest.mark.parametrize("n_poly, k2_newton", [(0.5, 0.4491), (0.7, 0.3626), (1.0, 0.2599)])
def test_hinderer_love_numbers_low_compactness(n_poly, k2_newton):
    """Hinderer 2008 (ApJ 677, 1216), erratum Table 1, Newtonian column (4 digits).

    Bare polytropes with Gamma != 2 have a non-analytic surface, so this test
    uses 64 + steps; at C ~ 1e-5 the relativistic shift is ~1e-4 of k2.
    """
    E = eos.make("polytrope", K=100.0, gamma=1.0 + 1.0 / n_poly)
    sv = solve.integrate_stars(E.batch, [0], [1e-5], solve.StepSettings(n_steps=64))
    assert float(sv.k2[0]) == pytest.approx(k2_newton, abs=1e-4)


def test_numerical_relativity_benchmark_star(gamma2):
    """K = 100, Gamma = 2, rho_c = 1.28e-3 (G = c = Msun = 1): M = 1.400, M_b = 1.506,
    R = 9.586 (widely used test star; values from memory, 4 digits)."""
    h_c = np.log1p(2.0 * 100.0 * 1.28e-3)  # h = ln(1 + K Gamma / (Gamma - 1) rho^(Gamma - 1))
    sv = solve.integrate_stars(gamma2.batch, [0], [h_c])
    assert sv.mass[0] / MSUN_KM == pytest.approx(1.400, abs=6e-4)
    assert sv.baryon_mass[0] / MSUN_KM == pytest.approx(1.506, abs=6e-4)
    assert sv.radius[0] / MSUN_KM == pytest.approx(9.586, abs=6e-4)


def test_numerical_relativity_benchmark_maximum_mass(gamma2):
    """The maximum mass of the K = 100, Gamma = 2 polytrope is about 1.637 (memory)."""
    seq = solve.solve_sequence(gamma2, n_stars=16)
    assert seq.mass_max.mass_msun == pytest.approx(1.637, abs=1.5e-3)
