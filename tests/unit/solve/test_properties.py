"""Property-based tests over the default boxes (hypothesis)."""

from __future__ import annotations

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tovforge import eos, solve

# derandomize: CI sees the same examples on every run (a failure is reproducible, never flaky)
_SETTINGS = settings(max_examples=12, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])


def _theta_strategy(family):
    fam = eos.get_family(family)
    return st.tuples(*[st.floats(p.box[0], p.box[1], allow_nan=False) for p in fam.parameters])


def _check_branch(family, theta):
    fam = eos.get_family(family)
    row = np.array(theta)
    if fam.validate_rows(row[None, :])[0]:
        return  # outside the family's joint constraints: validation's job, tested elsewhere
    seq = solve.solve_sequence(fam.from_array(row), n_stars=24)  # must not raise
    if seq.status != 0:
        return
    m = seq.branch.mass_msun
    lam = seq.branch.tidal_deformability
    assert np.all(np.isfinite(m)) and np.all(np.isfinite(seq.branch.radius_km))
    assert np.all(np.diff(m) > 0), "M must rise along the stable branch"
    assert np.all(np.diff(lam) < 0), "Lambda must fall with M"
    assert seq.branch.mass_msun[0] < 0.5 or seq.branch.mass_msun[0] <= 0.5 * seq.mass_max.mass_msun + 1e-9
    assert np.all(seq.branch.compactness < 4.0 / 9.0)


@_SETTINGS
@given(_theta_strategy("piecewise-polytrope"))
def test_piecewise_polytrope_branch_properties(theta):
    _check_branch("piecewise-polytrope", theta)


@_SETTINGS
@given(_theta_strategy("sound-speed"))
def test_sound_speed_branch_properties(theta):
    _check_branch("sound-speed", theta)


@_SETTINGS
@given(_theta_strategy("spectral"))
def test_spectral_branch_properties(theta):
    _check_branch("spectral", theta)
