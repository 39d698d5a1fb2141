"""Cusps at first-order transitions and twin branches, against fine direct scans of the same solver.

The EOS is the example of issue 12: SLy (Read et al. 2009, PRD 79, 124032, Table III) with a Maxwell
jump at about twice nuclear saturation density (p_t = 10^34.46 dyn/cm^2) and c_s^2 = 1 above it (the
constant-sound-speed construction of Alford, Han & Prakash 2013, PRD 88, 083013).  References are
computed here, not recalled: every star of a fine scan is an exact solve, and the extrema of the scan
are polished by a bounded Brent search (SciPy's ``minimize_scalar``), independent of the solver's
Chebyshev clusters.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy.optimize import minimize_scalar

from helpers import READ2009
from tovforge import eos, solve
from tovforge.eos import seidov_limit

SLY = READ2009["SLy"]


def _hybrid(ratio, log_p_t=34.46):
    return eos.make("piecewise-polytrope-transition", **SLY, log_p_transition=log_p_t, jump_ratio=ratio,
                    cs2_above=1.0)


def _limit(E):
    """Seidov's limit (Seidov 1971, Sov. Astron. 15, 347) of the transition of ``E``."""
    b = E.batch
    p_t = float(b.p_t[0])
    return float(seidov_limit(p_t, float(b.w_plus[0] - b.delta_e[0]) - p_t))


def _mass(E, h):
    return float(solve.solve_stars(E, [h]).mass_msun[0])


def _fine_extremum(E, lo, hi, sign, n=160):
    """Largest (sign +1) or smallest (-1) mass on a fine scan of ``[lo, hi]``, polished by Brent's method."""
    h = np.geomspace(lo, hi, n)
    m = solve.solve_stars(E, h).mass_msun
    k = int(np.clip(np.argmax(sign * m), 1, n - 2))
    res = minimize_scalar(lambda x: -sign * _mass(E, x), bounds=(h[k - 1], h[k + 1]), method="bounded",
                          options={"xatol": 1e-12 * h[k]})
    return -sign * res.fun, m


@pytest.fixture(scope="module")
def dip():
    """The issue's example, Delta e / e_t = 0.639: a cusp, a dip 0.0016 Msun deep, a twin branch."""
    E = _hybrid(0.639)
    return E, solve.solve_sequence(E)


def test_the_cusp_is_the_first_maximum(dip):
    """Above Seidov's limit (Seidov 1971, Sov. Astron. 15, 347) M(h_c) turns down at the transition: the
    first maximum is the star centred on it, not the twin maximum (2.247 Msun was returned before)."""
    E, seq = dip
    h_t = float(E.batch.h_t[0])
    assert 0.639 > _limit(E)
    assert seq.mass_max.star.central_pseudo_enthalpy[0] == pytest.approx(h_t, rel=1e-14)
    assert seq.mass_max.mass_msun == pytest.approx(_mass(E, h_t), rel=1e-13)
    # a fine scan across the transition: nothing of the connected branch is heavier, and M falls after it
    h = h_t * np.concatenate([np.linspace(0.5, 1.0, 201), 1.0 + np.geomspace(1e-6, 3e-2, 40)])
    m = solve.solve_stars(E, h).mass_msun
    assert m[:201].max() <= seq.mass_max.mass_msun * (1 + 1e-13)
    assert np.all(np.diff(m[200:]) < 0)
    assert np.all(np.diff(seq.branch.mass_msun) > 0)
    assert seq.branch.central_pseudo_enthalpy.max() == pytest.approx(h_t, rel=1e-14)


def test_twin_minimum_and_maximum_against_a_fine_scan(dip):
    E, seq = dip
    tw = seq.twin
    h_t = float(E.batch.h_t[0])
    h_min = float(tw.mass_min.central_pseudo_enthalpy[0])
    h_max = float(tw.mass_max.star.central_pseudo_enthalpy[0])
    ref_min, m_low = _fine_extremum(E, h_t * (1 + 1e-6), 2.0 * h_min - h_t, -1)
    ref_max, m_high = _fine_extremum(E, 0.7 * h_max, 1.3 * h_max, +1)
    assert tw.mass_min_msun == pytest.approx(ref_min, rel=1e-11)
    assert tw.mass_max.mass_msun == pytest.approx(ref_max, rel=1e-11)
    assert m_low.min() >= tw.mass_min_msun * (1 - 1e-12) and m_high.max() <= tw.mass_max.mass_msun * (1 + 1e-12)
    # the figures: a dip of 0.0016 Msun after the cusp, then a twin branch up to about 2.25 Msun
    assert seq.mass_max.mass_msun - tw.mass_min_msun == pytest.approx(0.0016, abs=1e-4)
    assert 2.2 < tw.mass_max.mass_msun < 2.3
    # the twin branch: exact stars from its minimum to its maximum, all heavier as the centre gets denser
    b = tw.branch
    assert b.mass_msun[0] == tw.mass_min_msun and b.mass_msun[-1] == tw.mass_max.mass_msun
    assert np.all(np.diff(b.central_pseudo_enthalpy) > 0) and np.all(np.diff(b.mass_msun) >= 0)
    k = len(b) // 2
    assert b.radius_km[k] == pytest.approx(solve.solve_stars(E, [b.central_pseudo_enthalpy[k]]).radius_km[0],
                                           rel=1e-14)
    assert tw.mass_max.acausal is False and tw.mass_max.max_sound_speed_sq == pytest.approx(1.0)


@pytest.mark.parametrize("offset", [-1e-3, 1e-3])
def test_shallow_dips_on_both_sides_of_seidovs_limit(offset):
    """A hair below Seidov's limit the stars with a small core of the dense phase still rise (Seidov
    1971), to a maximum just above the transition; a hair above it the cusp is the maximum.  Either way
    M then dips by about 1e-4 Msun (0.02 % of M) before the twin branch: the scan finds the dip and the
    extrema agree with fine scans, and M_max does not jump across the limit."""
    E = _hybrid(_limit(_hybrid(0.6)) + offset)
    seq = solve.solve_sequence(E)
    h_t = float(E.batch.h_t[0])
    m_t = _mass(E, h_t)
    ref_max, _ = _fine_extremum(E, h_t * (1 - 1e-3), h_t * (1 + 1e-3), +1, n=81)
    # below the limit the maximum rises only 2e-9 of M above M(h_t), within 1e-5 h_t of the transition,
    # where stars carry about 3e-9 of integration error (measured: 16 against 128 steps)
    assert seq.mass_max.mass_msun == pytest.approx(ref_max, rel=1e-9)
    assert seq.mass_max.mass_msun == pytest.approx(m_t, rel=1e-8)  # at the transition, or a hair above it
    tw = seq.twin
    assert tw is not None and 5e-5 < seq.mass_max.mass_msun - tw.mass_min_msun < 3e-4
    h_min = float(tw.mass_min.central_pseudo_enthalpy[0])
    ref_min, _ = _fine_extremum(E, h_t * (1 + 1e-4), 2.0 * h_min - h_t, -1, n=81)
    assert tw.mass_min_msun == pytest.approx(ref_min, rel=1e-11)


def test_twin_stars_at_requested_masses():
    """A mass between the minimum and the cusp has a star on each branch (twins); a heavier one only on
    the twin branch; the entries keep the reasons."""
    E = _hybrid(0.639)
    masses = [0.1, 0.652, 1.4, 2.5]
    with pytest.warns(UserWarning, match="above M_max"):
        seq = solve.solve_sequence(E, masses=masses)
    stable, twin = seq.at_mass.mass_msun, seq.twin.at_mass.mass_msun
    np.testing.assert_allclose(stable[1], 0.652, rtol=1e-11)
    np.testing.assert_allclose(twin[1:3], [0.652, 1.4], rtol=1e-11)
    assert np.isnan(stable[[0, 2, 3]]).all() and np.isnan(twin[[0, 3]]).all()
    # twins: one mass, two stars, the twin being the more compact (a core of the dense phase)
    assert seq.twin.at_mass.radius_km[1] < seq.at_mass.radius_km[1] - 0.05
    assert seq.twin.at_mass.central_pseudo_enthalpy[1] > float(E.batch.h_t[0])
    reasons = seq.at_mass_reasons()
    assert reasons[0].startswith("below the lightest star of the stable branch") and reasons[1] == ""
    assert reasons[2].startswith("above M_max = 0.6533") and "twin branch has a star" in reasons[2]
    assert "twin branch has a star" not in reasons[3]
    assert seq.twin.at_mass_reasons(masses)[3].startswith("above its maximum = 2.264")


def test_requested_light_masses_extend_the_branch(sly):
    """The stable branch starts below the lightest requested mass where the EOS has such stars."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        seq = solve.solve_sequence(sly, masses=[0.2])
    assert seq.at_mass.mass_msun[0] == pytest.approx(0.2, rel=1e-11) and seq.at_mass_reasons() == ("",)


def test_no_twin_branch_without_a_second_rise(sly):
    seq = solve.solve_sequence(sly, n_stars=10)
    assert seq.twin is None and np.isnan(seq.twin_mass_max_msun)
    res = solve.solve_sequences(sly.batch, n_stars=10)
    for name in ("twin_mass_max_msun", "twin_mass_min_msun", "twin_radius_at_mass_max_km"):
        assert np.isnan(res.value(name)).all(), name


# Three EOS of the piecewise-polytrope-transition default box (from a Latin hypercube of our own) whose
# first maximum lies 0.4-3 % above the transition enthalpy and is followed by a dip 1.4e-6 to 2.7e-5 Msun
# deep, then a twin branch to 1.6-1.7 Msun: a scan with stars only at 0.1, 0.3, 1 and 3 % above h_t took
# the far maximum for the first.
_SHALLOW_HUMPS = [
    dict(log_p1=34.29140, gamma1=3.10420, gamma2=2.32760, gamma3=3.35370, log_p_transition=34.87230,
         jump_ratio=0.51340, cs2_above=0.83090),
    dict(log_p1=34.52520, gamma1=2.32560, gamma2=1.88360, gamma3=3.47930, log_p_transition=34.78660,
         jump_ratio=0.41230, cs2_above=0.48110),
    dict(log_p1=34.39380, gamma1=2.51410, gamma2=2.24850, gamma3=1.95360, log_p_transition=34.30450,
         jump_ratio=0.54080, cs2_above=0.34710),
]


@pytest.mark.parametrize("params", _SHALLOW_HUMPS)
def test_a_shallow_hump_just_above_the_transition_is_the_first_maximum(params):
    """The first maximum is the hump, against a fine direct scan of 400 stars from h_t to 1.3 h_t polished
    by Brent's method; the far maximum is the twin branch's."""
    E = eos.make("piecewise-polytrope-transition", **params)
    seq = solve.solve_sequence(E)
    h_t = float(E.batch.h_t[0])
    h = np.geomspace(h_t * (1 + 1e-4), 1.3 * h_t, 400)
    m = solve.solve_stars(E, h).mass_msun
    first = int(np.flatnonzero(np.diff(m) < 0)[0])  # the scan's first turn down
    ref, _ = _fine_extremum(E, h[max(first - 1, 0)], h[first + 1], +1, n=41)
    assert seq.mass_max.mass_msun == pytest.approx(ref, rel=1e-8)
    assert seq.twin is not None and seq.twin_mass_max_msun > seq.mass_max.mass_msun + 0.3
