"""Margins of the side of a first-order transition (solve.jump_margins): Seidov's and the scanned one.

The EOS: SLy (Read et al. 2009, PRD 79, 124032, Table III) with a Maxwell jump and c_s^2 = 1 above it (the
constant-sound-speed construction of Alford, Han & Prakash 2013, PRD 88, 083013), at two transition pressures.
The sides are checked against the solver's own first maximum (solve_sequence), which test_twins.py checks against
fine scans.
"""

from __future__ import annotations

import numpy as np
import pytest

from helpers import READ2009
from tovforge import eos, solve
from tovforge.eos import seidov_limit
from tovforge.solve._surface import integrate
from tovforge.units import MSUN_KM


def _hybrid(ratios, log_p_t):
    """The family's batch of SLy with jumps ``ratios`` at ``log_p_t`` (c_s^2 = 1 above)."""
    fam = eos.get_family("piecewise-polytrope-transition")
    sly = READ2009["SLy"]
    base = [sly[p.name] for p in fam.base.parameters]
    return fam.build(np.array([base + [log_p_t, r, 1.0] for r in ratios]))


def _limit(log_p_t):
    """Seidov's limit (Seidov 1971, Sov. Astron. 15, 347) of the jump at ``log_p_t``."""
    b = _hybrid([0.0], log_p_t)
    return float(seidov_limit(b.p_t[0], b.w_plus[0] - b.p_t[0]))


@pytest.mark.parametrize("log_p_t", [34.46, 34.8])
def test_seidov_margin_changes_sign_at_seidovs_limit(log_p_t):
    """Seidov 1971 (Sov. Astron. 15, 347): a jump Delta e / e_t above 1/2 + 3 p_t / (2 e_t) turns the branch
    down at the transition.  The margin is the jump minus that limit: its sign flips across it, and above it the
    scanned margin is negative too (M falls right above the jump: a cusp)."""
    limit = _limit(log_p_t)
    assert 0.5 < limit < 0.7  # p_t / e_t of SLy at these pressures is 0.02-0.1
    m = solve.jump_margins(_hybrid([limit - 0.02, limit + 0.02], log_p_t))
    assert m.seidov[0] == pytest.approx(-0.02, abs=1e-12) and m.seidov[1] == pytest.approx(0.02, abs=1e-12)
    assert m.scanned_msun[1] < 0.0 and m.near[1]


@pytest.mark.parametrize("ratio, near", [(0.2, False), (-1e-3, True)])
def test_scanned_margin_gives_the_solved_side_below_seidovs_limit(ratio, near):
    """Below the limit (s < 0) the scanned margin decides: a small jump gives a connected hybrid branch rising far
    above the transition (g > 0), a jump a hair below the limit a hump just above it before a twin branch
    (test_twins.py: its first maximum within 1e-5 h_t of the jump; g < 0).  The solver's first maximum agrees."""
    log_p_t = 34.46
    r = ratio if ratio > 0 else _limit(log_p_t) + ratio
    b = _hybrid([r], log_p_t)
    m = solve.jump_margins(b)
    assert m.seidov[0] < 0.0
    assert (m.scanned_msun[0] < 0.0) == near and bool(m.near[0]) == near
    seq = solve.solve_sequence(eos.make("piecewise-polytrope-transition", **READ2009["SLy"], log_p_transition=log_p_t,
                                        jump_ratio=r, cs2_above=1.0))
    decades = np.log10(seq.mass_max.central_pressure_dyn_cm2) - log_p_t
    assert (decades < solve.NEAR_DECADES) == near


@pytest.mark.parametrize("log_p_t", [34.46, 34.8])
def test_the_star_at_the_jump_is_the_base_star_at_the_transition_pressure(log_p_t):
    """``jump_stars``: the star centred just below the jump holds none of the dense phase, so it is the base EOS's
    (SLy's) star at central pressure p_t, solved here on its own through the single-star path; and M(p_c) is
    continuous across the jump (the dense core's volume vanishes), so the star just above it has the same mass
    while R(M) changes slope there (common practice: the kink the far side's t nodes sit on)."""
    ratio = 0.2
    b = _hybrid([ratio], log_p_t)
    star = solve.jump_stars(b)
    assert star.central_pressure_dyn_cm2[0] == pytest.approx(10.0**log_p_t, rel=1e-8)
    base = solve.solve_star(eos.make("piecewise-polytrope", **{k: READ2009["SLy"][k] for k in
                                                               ("log_p1", "gamma1", "gamma2", "gamma3")}),
                            pressure_dyn_cm2=10.0**log_p_t).star
    for field in ("mass_msun", "radius_km", "tidal_deformability"):
        assert getattr(star, field)[0] == pytest.approx(float(np.ravel(getattr(base, field))[0]), rel=1e-7), field
    above, _ = integrate(b, np.zeros(1, int), b.h_t * (1.0 + 1e-7), solve.StepSettings())
    assert above["mass"][0] / MSUN_KM == pytest.approx(star.mass_msun[0], rel=1e-6)
