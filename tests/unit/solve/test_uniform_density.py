"""Uniform-density stars against the Schwarzschild (1916) interior solution."""

from __future__ import annotations

import numpy as np
import pytest

from tovforge import eos, solve

E0 = 1e15  # g/cm^3


def schwarzschild_pc_over_e(C):
    """Central pressure over energy density of a uniform star of compactness C.

    Schwarzschild 1916; e.g. Weinberg 1972, Gravitation and Cosmology, Sec. 11.6.
    """
    s = np.sqrt(1.0 - 2.0 * C)
    return (1.0 - s) / (3.0 * s - 1.0)


@pytest.fixture(scope="module")
def uniform():
    return eos.make("uniform-density", energy_density=E0)


# Published check values (../shared/checks, "verified"): p_c / e at compactness C,
# as printed (strings keep the number of decimals, hence the rounding tolerance).
TABLE_TEXT = [("0.05", "0.0277981"), ("0.1", "0.0627184"), ("0.2", "0.1702712"), ("0.3", "0.4095812"),
              ("0.375", "1"), ("0.4", "1.6180340"), ("0.44", "16.660254")]
TABLE = [(float(c), float(v)) for c, v in TABLE_TEXT]


@pytest.mark.parametrize("C, text", [(float(c), v) for c, v in TABLE_TEXT])
def test_closed_form_matches_published_table(C, text):
    decimals = len(text.split(".")[1]) if "." in text else 0
    half_unit = 0.5 * 10.0**-decimals if decimals else 1e-12  # "1" is exact
    assert schwarzschild_pc_over_e(C) == pytest.approx(float(text), abs=half_unit)


@pytest.mark.parametrize("C, pc_over_e", TABLE)
def test_central_pressure_versus_compactness(uniform, C, pc_over_e):
    """p_c(C) of the solver equals the interior solution to 1e-6."""
    h_c = np.log1p(pc_over_e)  # p = e0 (exp(h) - 1)
    sv = solve.integrate_stars(uniform.batch, [0], [h_c])
    C_solver = float(sv.compactness[0])
    assert schwarzschild_pc_over_e(C_solver) == pytest.approx(np.expm1(h_c), rel=1e-6)
    assert C_solver == pytest.approx(C, rel=1e-6)


def test_mass_is_four_thirds_pi_e_r_cubed(uniform):
    h = np.geomspace(1e-3, 3.0, 12)
    sv = solve.integrate_stars(uniform.batch, np.zeros(h.size, int), h)
    e0 = uniform.batch.e0[0]
    np.testing.assert_allclose(sv.mass, 4.0 * np.pi / 3.0 * e0 * sv.radius**3, rtol=1e-12)


def test_buchdahl_bound_is_never_crossed(uniform):
    """C < 4/9 for any central pressure (Buchdahl 1959), approached as p_c -> inf."""
    h = np.array([1.0, 3.0, 6.0, 10.0, 20.0])
    sv = solve.integrate_stars(uniform.batch, np.zeros(h.size, int), h)
    assert np.all(sv.compactness < 4.0 / 9.0)
    assert np.all(np.diff(sv.compactness) > 0)
    assert sv.compactness[-1] > 4.0 / 9.0 - 1e-4


def test_newtonian_limits_of_love_number_and_inertia(uniform):
    """k2 -> 3/4 (with the surface density-jump term) and I/(M R^2) -> 2/5 as C -> 0.

    Newtonian values: checks README (uniform density); the relativistic
    corrections are O(C), so the deviations must shrink in proportion to C.
    """
    h = np.array([1e-3, 1e-4, 1e-5])
    sv = solve.integrate_stars(uniform.batch, np.zeros(3, int), h)
    dk = sv.k2 / 0.75 - 1.0
    di = sv.moment_of_inertia / (sv.mass * sv.radius**2) / 0.4 - 1.0
    for d in (dk, di):
        ratio = d / sv.compactness
        assert np.all(np.abs(ratio) < 20)
        np.testing.assert_allclose(ratio[1:], ratio[0], rtol=0.02)  # linear in C
    assert abs(dk[-1]) < 2e-4 and abs(di[-1]) < 2e-4
