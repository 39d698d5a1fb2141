"""Binary tidal deformability: identities, a hand-computed case, and its sources of Lambda(M)."""

from __future__ import annotations

import numpy as np
import pytest
from helpers import READ2009
from table_helpers import THETA_SLY, tiny_model
from tovforge import eos, solve
from tovforge.errors import InputError
from tovforge.tables import (
    binary_deformability,
    chirp_mass,
    component_masses,
    lambda_from_eos,
    lambda_from_model,
    lambda_from_table,
    lambda_tilde,
    read_table,
    sequence_table,
)


@pytest.mark.parametrize("m", [1.0, 1.35, 2.1])
@pytest.mark.parametrize("lam", [0.0, 3.7, 400.0, 1e5])
def test_equal_stars_give_their_own_lambda(m, lam):
    # (16/13) [13 m * m^4 L + 13 m * m^4 L] / (2m)^5 = (16/13) 26 m^5 L / (32 m^5) = L
    assert lambda_tilde(m, m, lam, lam) == pytest.approx(lam, rel=4e-16, abs=0.0)


def test_unequal_case_computed_by_hand():
    # m1 = 1.6, m2 = 1.2 Msun, Lambda1 = 200, Lambda2 = 800 (invented numbers):
    #   (m1 + 12 m2) m1^4 L1 = (1.6 + 14.4) * 6.5536 * 200   = 16.0 * 1310.72  = 20971.52
    #   (m2 + 12 m1) m2^4 L2 = (1.2 + 19.2) * 2.0736 * 800   = 20.4 * 1658.88  = 33841.152
    #   sum = 54812.672;  (m1 + m2)^5 = 2.8^5 = 7.84 * 7.84 * 2.8 = 172.10368
    #   Lambda_tilde = (16/13) * 54812.672 / 172.10368 = 1.2307692... * 318.4863450... = 391.98319381576...
    assert lambda_tilde(1.6, 1.2, 200.0, 800.0) == pytest.approx(391.98319381576, rel=1e-13)


def test_swapping_the_stars_changes_nothing():
    rng = np.random.default_rng(5)
    m1, m2 = rng.uniform(1, 2, 20), rng.uniform(1, 2, 20)
    l1, l2 = rng.uniform(10, 2000, 20), rng.uniform(10, 2000, 20)
    np.testing.assert_allclose(lambda_tilde(m1, m2, l1, l2), lambda_tilde(m2, m1, l2, l1), rtol=1e-15)


def test_chirp_mass_and_mass_ratio_invert():
    mc, q = np.meshgrid([1.0, 1.186, 1.4], [0.5, 0.8, 1.0], indexing="ij")
    m1, m2 = component_masses(mc, q)
    np.testing.assert_allclose(chirp_mass(m1, m2), mc, rtol=1e-15)
    np.testing.assert_allclose(m2 / m1, q, rtol=1e-15)
    assert np.all(m1 >= m2)
    # equal masses: Mc = m^(6/5) / (2m)^(1/5) = m 2^(-1/5)
    np.testing.assert_allclose(m1[:, -1], mc[:, -1] * 2**0.2, rtol=1e-15)


def test_model_source_uses_the_model_lambdas():
    model = tiny_model("spline")
    theta = np.array([THETA_SLY[n] for n in model.parameter_names])
    res = binary_deformability(lambda_from_model(model, theta), [1.4, 1.5, 3.0], [1.3, 1.2, 1.0])
    lam = model.tidal_deformability(theta, [1.4, 1.5, 3.0, 1.3, 1.2, 1.0]).value
    np.testing.assert_array_equal(res.lambda1, lam[:3])
    np.testing.assert_array_equal(res.lambda2, lam[3:])
    np.testing.assert_allclose(res.lambda_tilde[:2], lambda_tilde(res.m1_msun, res.m2_msun, lam[:3], lam[3:])[:2],
                               rtol=1e-15)
    assert np.isnan(res.lambda_tilde[2])  # 3 Msun is above M_max: no star, no Lambda-tilde


def test_exact_source_matches_the_solver(sly):
    res = binary_deformability(lambda_from_eos(sly), [1.45], [1.25])
    ref = solve.solve_sequence(sly, masses=[1.25, 1.45]).at_mass.tidal_deformability
    np.testing.assert_allclose([res.lambda2[0], res.lambda1[0]], ref, rtol=1e-9)


def test_table_source_reproduces_the_table_at_its_rows(tmp_path):
    e = eos.make("piecewise-polytrope", **READ2009["APR4"])
    sequence_table(tmp_path / "s.npz", e, points=60)
    t = read_table(tmp_path / "s.npz")
    lam = lambda_from_table(t)
    np.testing.assert_allclose(lam(t["mass"][5:50]), t["lambda"][5:50], rtol=1e-13)
    assert np.isnan(lam(np.array([t["mass"].max() * 1.01])))[0]


def test_table_source_needs_mass_and_lambda(tmp_path):
    from tovforge.tables import Column, TableWriter

    with TableWriter(tmp_path / "x.csv", [Column("mass", "Msun")], {}) as w:
        w.append({"mass": np.array([1.0, 2.0])})
    with pytest.raises(InputError, match="needs columns 'mass' and 'lambda'"):
        lambda_from_table(read_table(tmp_path / "x.csv"))


def test_masses_must_be_positive():
    with pytest.raises(InputError, match="positive"):
        binary_deformability(lambda m: m, [1.4, -1.0], [1.2, 1.2])
