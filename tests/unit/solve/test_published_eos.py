"""Piecewise-polytrope fits of Read et al. (2009) and universal relations."""

from __future__ import annotations

import numpy as np
import pytest

from helpers import READ2009
from tovforge import eos, solve


@pytest.fixture(scope="module")
def sequences():
    masses = [1.0, 1.2, 1.4, 1.6, 1.8, 2.0]
    return {k: solve.solve_sequence(eos.make("piecewise-polytrope", **v), masses=masses) for k, v in READ2009.items()}


def test_sly_maximum_mass_and_radius(sequences):
    """SLy fit: M_max about 2.05 Msun and R(1.4 Msun) about 11.7 km (common knowledge, memory)."""
    seq = sequences["SLy"]
    assert seq.mass_max.mass_msun == pytest.approx(2.05, abs=0.02)
    assert seq.at_mass.radius_km[2] == pytest.approx(11.7, abs=0.1)


@pytest.mark.parametrize("name", ["APR4", "MPA1"])
def test_acausal_fits_are_flagged(sequences, name):
    """APR4 and MPA1 fits reach c_s^2 > 1 before M_max (checks README, memory): reported, not hidden."""
    mm = sequences[name].mass_max
    assert mm.max_sound_speed_sq > 1.0 and mm.acausal


@pytest.mark.parametrize("name", sorted(READ2009))
def test_i_love_relation(sequences, name):
    """Yagi & Yunes 2013 (Science 341, 365): ln(I/M^3) = sum a_k (ln Lambda)^k holds to
    about 1 % across realistic EOS (coefficients from memory)."""
    a = (1.47, 0.0817, 0.0149, 2.87e-4, -3.64e-5)
    st = sequences[name].at_mass
    x = np.log(st.tidal_deformability)
    fit = np.exp(sum(c * x**k for k, c in enumerate(a)))
    np.testing.assert_allclose(st.moment_of_inertia_over_m3, fit, rtol=0.01)


@pytest.mark.parametrize("name", sorted(READ2009))
def test_c_love_relation(sequences, name):
    """Yagi & Yunes 2017 (Phys. Rep. 681, 1): C = 0.360 - 0.0355 ln L + 0.000705 ln^2 L, a few % (memory)."""
    st = sequences[name].at_mass
    x = np.log(st.tidal_deformability)
    np.testing.assert_allclose(st.compactness, 0.360 - 0.0355 * x + 0.000705 * x**2, rtol=0.04)


def test_twin_branch_is_recorded():
    """A stiff-soft-stiff piecewise polytrope with a second stable branch (found by a scan of
    the demo box): the first maximum defines M_max; the higher second one is recorded."""
    E = eos.make("piecewise-polytrope", log_p1=34.843, gamma1=2.46, gamma2=1.508, gamma3=3.826)
    seq = solve.solve_sequence(E, n_stars=30)
    assert np.isfinite(seq.twin_mass_max_msun)
    assert seq.twin_mass_max_msun > seq.mass_max.mass_msun
    assert np.all(np.diff(seq.branch.mass_msun) > 0)
    # the spiral beyond the maximum of an ordinary EOS is not a twin branch
    sly = solve.solve_sequence(eos.make("piecewise-polytrope", **READ2009["SLy"]), n_stars=10)
    assert np.isnan(sly.twin_mass_max_msun)
