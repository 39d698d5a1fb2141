"""EOS families: thermodynamic consistency, published identities, declared data."""

from __future__ import annotations

import numpy as np
import pytest

from tovforge import eos
from tovforge.eos._core_tables import NEUTRON_MASS_MEV, RHO_JOIN_CGS
from tovforge.eos._piecewise import CRUST_GAMMA, CRUST_K_CGS, crust_boundaries_cgs
from tovforge.units import C_CGS

from helpers import BOX_FAMILIES, NUMERIC_FAMILIES, READ2009, valid_box_points


def test_crust_dividing_densities_match_read2009_table2():
    """Read et al. 2009, Table II lists 2.44034e7, 3.78358e11, 2.62780e12 g/cm^3 (from memory).

    We derive them from continuity of p with the six-digit K_i; the listed
    densities agree to 2e-4 (they were recalled, and the crossing density
    amplifies the rounding of K by 1 / (Gamma_i+1 - Gamma_i)), enough to catch a
    wrong exponent or a swapped piece.
    """
    np.testing.assert_allclose(crust_boundaries_cgs(), [2.44034e7, 3.78358e11, 2.62780e12], rtol=2e-4)


@pytest.mark.parametrize("name", sorted(READ2009))
def test_piecewise_polytrope_pressure_at_dividing_density(name):
    """By definition p(10^14.7 g/cm^3) = 10^log_p1 dyn/cm^2 (Read et al. 2009, Eq. 9)."""
    E = eos.make("piecewise-polytrope", **READ2009[name])
    # find h where rho = 10^14.7 by bisection on the evaluator
    lo, hi = 0.01, 0.5
    for _ in range(100):
        mid = 0.5 * (lo + hi)
        if E.evaluate(mid).rest_mass_density_g_cm3 < 10**14.7:
            lo = mid
        else:
            hi = mid
    p = float(E.evaluate(0.5 * (lo + hi)).pressure_dyn_cm2)
    assert p == pytest.approx(10 ** READ2009[name]["log_p1"], rel=1e-9)


@pytest.mark.parametrize("family", BOX_FAMILIES + ["polytrope"])
def test_first_law_and_enthalpy_definition(family):
    """h = ln((e + p) / rho) and dp/dh = e + p at random points (first law at T = 0)."""
    theta = valid_box_points(family, 3, seed=1)
    fam = eos.get_family(family)
    for row in theta:
        E = fam.from_array(row)
        h = np.linspace(0.05, min(0.9, 0.9 * E.h_max), 40)
        pt = E.evaluate(h)
        w = pt.energy_density_g_cm3 + pt.pressure_dyn_cm2 / C_CGS**2
        np.testing.assert_allclose(np.log(w / pt.rest_mass_density_g_cm3), h, rtol=0, atol=2e-9)
        d = 1e-6
        dp = (E.evaluate(h + d).pressure_dyn_cm2 - E.evaluate(h - d).pressure_dyn_cm2) / (2 * d)
        np.testing.assert_allclose(dp / C_CGS**2, w, rtol=1e-6)


@pytest.mark.parametrize("family", BOX_FAMILIES)
def test_sound_speed_is_dp_de(family):
    theta = valid_box_points(family, 2, seed=2)
    fam = eos.get_family(family)
    for row in theta:
        E = fam.from_array(row)
        kinks = E.h_kinks
        h = np.linspace(0.03, min(0.9, 0.9 * E.h_max), 37)
        h = h[np.min(np.abs(h[:, None] - kinks[None, :]), axis=1) > 1e-4]
        d = 1e-7
        a, b = E.evaluate(h - d), E.evaluate(h + d)
        cs2 = (b.pressure_dyn_cm2 - a.pressure_dyn_cm2) / C_CGS**2 / (b.energy_density_g_cm3 - a.energy_density_g_cm3)
        np.testing.assert_allclose(E.evaluate(h).sound_speed_sq, cs2, rtol=1e-5)


def test_spectral_with_constant_index_continues_the_crust():
    """Gamma(x) = Gamma_crust makes the spectral EOS the crust's last polytrope (identity)."""
    S = eos.make("spectral", gamma0=np.log(CRUST_GAMMA[3]), gamma1=0.0, gamma2=0.0, gamma3=0.0)
    h = np.linspace(S.h_kinks[-1] + 1e-3, 0.99 * S.h_max, 25)
    pt = S.evaluate(h)
    K, G = CRUST_K_CGS[3], CRUST_GAMMA[3]
    np.testing.assert_allclose(pt.pressure_dyn_cm2 / C_CGS**2, K * pt.rest_mass_density_g_cm3**G, rtol=1e-9)


def test_sound_speed_family_reproduces_its_nodes():
    vals = dict(cs2_1=0.07, cs2_2=0.33, cs2_3=0.51, cs2_4=0.62, cs2_5=0.45)
    E = eos.make("sound-speed", **vals)
    h = np.log(np.array(eos.SoundSpeed.node_mu_mev) / NEUTRON_MASS_MEV)
    np.testing.assert_allclose(E.evaluate(h).sound_speed_sq, list(vals.values()), rtol=1e-10)
    # joins the crust continuously at half saturation density
    hj = E.h_kinks[3]
    below, above = E.evaluate(hj - 1e-9), E.evaluate(hj + 1e-9)
    assert float(above.rest_mass_density_g_cm3) == pytest.approx(RHO_JOIN_CGS, rel=1e-6)
    assert float(above.pressure_dyn_cm2) == pytest.approx(float(below.pressure_dyn_cm2), rel=1e-6)


def test_uniform_density_closed_form():
    E = eos.make("uniform-density", energy_density=1e15)
    h = np.array([0.0, 0.1, 1.0])
    pt = E.evaluate(h)
    np.testing.assert_allclose(pt.pressure_dyn_cm2 / C_CGS**2, 1e15 * np.expm1(h), rtol=1e-12)
    assert np.all(np.isinf(pt.sound_speed_sq))


@pytest.mark.parametrize("family", NUMERIC_FAMILIES)
def test_declared_box_lies_inside_allowed_range(family):
    fam = eos.get_family(family)
    for p in fam.parameters:
        assert p.contains(p.box[0]) and p.contains(p.box[1]), p.name
        assert p.box[0] < p.box[1]


def test_monotone_pressure_and_energy(sly):
    h = np.linspace(0.0, 1.5, 3001)
    pt = sly.evaluate(h)
    assert np.all(np.diff(pt.pressure_dyn_cm2) > 0)
    assert np.all(np.diff(pt.energy_density_g_cm3) > 0)
