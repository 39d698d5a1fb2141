"""Solving the points of a chunk: statuses and reasons, node stars, failure isolation."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from scipy.optimize import brentq

from helpers import READ2009
from tovforge import eos, solve
from tovforge.grid import parse_spec, solve_chunk
from tovforge.grid import _solve as grid_solve
from tovforge.status import Status
from tovforge.units import MSUN_KM

SLY = np.array([list(READ2009["SLy"].values())])
FAM = eos.get_family("piecewise-polytrope")


def _spec(**top):
    raw = {"family": "piecewise-polytrope", "chunk_size": 8, "design": {"method": "sobol", "points": 8, "seed": 1}}
    raw.update(top)
    return parse_spec(raw)


def _points():
    """Valid points: SLy, APR4, MPA1 and two corners of the demo box."""
    rows = [list(v.values()) for v in READ2009.values()]
    rows += [[34.8, 3.5, 3.0, 2.5], [34.3, 2.6, 2.2, 3.4]]
    return np.array(rows)


def test_invalid_points_get_status_1_and_the_rest_complete():
    theta = _points()
    bad = theta.copy()[:3]
    bad[0, 1] = 0.8  # gamma1 below 1: outside the allowed range
    bad[1, 2] = 1.0  # gamma2 = 1: the open end of the allowed range
    bad[2, 0] = 33.2  # log_p1 in range, but the core cannot meet the crust
    res = solve_chunk(_spec(), np.concatenate([theta, bad]))
    assert res.status.tolist() == [0] * 5 + [1, 1, 1]
    assert "'gamma1' parameter of piecewise-polytrope must be in (1, 10]. Got 0.8" in res.reason[5]
    assert "'gamma2'" in res.reason[6] and "Got 1 instead" in res.reason[6]
    assert "joins the crust" in res.reason[7]
    assert all(r == "" for r in res.reason[:5])
    for group in (res.scalars, res.curves):
        for name, values in group.items():
            if name == "twin_mass_max_msun":
                continue
            assert np.isfinite(values[:5]).all(), name
            assert np.isnan(values[5:]).all(), name


def test_mass_max_below_the_floor_is_status_2_with_values_kept():
    theta = _points()
    plain = solve_chunk(_spec(), theta)
    floor = 2.1  # SLy (2.05) and APR4 (2.2) straddle it
    res = solve_chunk(_spec(mass_max_floor_msun=floor), theta)
    m_max = plain.scalars["mass_max_msun"]
    expected = np.where(m_max < floor, 2, 0)
    assert 0 < expected.sum() < 2 * len(theta)
    np.testing.assert_array_equal(res.status, expected)
    for i in np.flatnonzero(expected):
        assert res.reason[i].startswith(f"M_max = {m_max[i]:.4f} Msun is below the floor")
    np.testing.assert_array_equal(res.scalars["mass_max_margin_msun"], m_max - floor)
    np.testing.assert_array_equal(res.curves["radius_km"], plain.curves["radius_km"])  # values still stored


def test_an_exception_fails_only_its_point(monkeypatch):
    """A batch that raises is retried point by point; the exception text becomes the reason."""
    theta = _points()
    real = grid_solve._solve_valid

    def flaky(family, rows, spec):
        if np.any(rows[:, 1] > 3.4):
            raise FloatingPointError("synthetic failure\nsecond line")
        return real(family, rows, spec)

    monkeypatch.setattr(grid_solve, "_solve_valid", flaky)
    res = solve_chunk(_spec(), theta)
    fail = theta[:, 1] > 3.4
    assert fail.sum() == 2
    np.testing.assert_array_equal(res.status, np.where(fail, 4, 0))
    for i in np.flatnonzero(fail):
        assert res.reason[i] == "solver raised FloatingPointError: synthetic failure"
        assert np.isnan(res.scalars["mass_max_msun"][i])
    monkeypatch.setattr(grid_solve, "_solve_valid", real)
    for i in np.flatnonzero(~fail):  # the survivors were solved one by one: same as alone
        alone = solve_chunk(_spec(), theta[i:i + 1])
        assert alone.scalars["mass_max_msun"][0] == res.scalars["mass_max_msun"][i]
        np.testing.assert_array_equal(alone.curves["radius_km"][0], res.curves["radius_km"][i])


def test_solver_statuses_are_stored_as_they_are(monkeypatch):
    """One vocabulary: the grid stores the solver's status and its message (no remapping)."""
    real = solve.solve_sequences
    failures = (Status.NO_MAXIMUM, Status.EOS_ENDS, Status.SOLVER_FAILURE)

    def fake(batch, **kw):
        res = real(batch, **kw)
        status = res.status.copy()
        status[: len(failures)] = failures
        return dataclasses.replace(res, status=status)

    monkeypatch.setattr(solve, "solve_sequences", fake)
    res = solve_chunk(_spec(), _points())
    assert res.status.tolist() == [3, 5, 4, 0, 0]
    assert [res.reason[i] for i in range(3)] == [s.message for s in failures]


def _mass_at(E, ln_h):
    return float(solve.integrate_stars(E.batch, np.zeros(1, int), np.exp([ln_h])).mass[0]) / MSUN_KM


def test_node_and_fixed_mass_stars_match_an_independent_root_search():
    """Stars found by the grid equal stars found by Brent's method on the integrator, one at a time."""
    spec = _spec()
    res = solve_chunk(spec, SLY)
    E = FAM.from_array(SLY[0])
    seq = solve.solve_sequence(E, n_stars=16)
    ln_top = np.log(seq.mass_max.star.central_pseudo_enthalpy[0])
    u = np.array(spec.outputs.u_nodes)
    m_max = res.scalars["mass_max_msun"][0]
    assert m_max == pytest.approx(seq.mass_max.mass_msun, rel=1e-12)
    # u nodes next to the maximum, in the middle and at the light end; one fixed mass
    cases = [(res.curves, j, m_max * (1 - u[j] ** 2)) for j in (2, 10, 23)]
    cases.append((res.at_mass, 2, 1.4))
    for group, j, target in cases:
        ln_h = brentq(lambda x: _mass_at(E, x) - target, np.log(0.05), ln_top, xtol=1e-14, rtol=1e-15)
        ref = solve.integrate_stars(E.batch, np.zeros(1, int), np.exp([ln_h]))
        assert abs(ref.mass[0] / MSUN_KM / target - 1) < 1e-11
        # both stars have the target mass to ~1e-11; the radius then agrees to far below the solver's 1e-6
        assert group["radius_km"][0, j] == pytest.approx(ref.radius[0], rel=1e-8)
        assert group["tidal_deformability"][0, j] == pytest.approx(ref.tidal_deformability[0], rel=1e-7)
    np.testing.assert_allclose(res.curves["mass_msun"][0], m_max * (1 - u**2), rtol=spec.solver.mass_rtol)
    assert res.curves["mass_msun"][0, 0] == m_max  # u = 0 is the maximum-mass star itself


def test_masses_above_the_maximum_are_nan_and_radii_shrink_with_mass():
    res = solve_chunk(_spec(), SLY)  # M_max of SLy is about 2.05
    masses = np.array(_spec().outputs.masses_msun)
    r = res.at_mass["radius_km"][0]
    assert np.isnan(r[masses > 2.05]).all() and np.isfinite(r[masses < 2.0]).all()
    assert np.all(np.diff(res.curves["mass_msun"][0]) < 0)  # u increases: mass falls


def test_solve_points_cuts_any_number_of_points_into_chunks_and_keeps_their_order():
    from tovforge.errors import InputError
    from tovforge.grid import ChunkResult, solve_points

    spec = _spec(chunk_size=2)
    theta = np.vstack([_points(), [[34.8, 0.8, 3.0, 2.5]]])  # 5 valid points and one invalid: 3 chunks
    got = solve_points(spec, theta, workers=2)  # two processes: chunks may finish out of order
    want = ChunkResult.concat([solve_chunk(spec, theta[i:i + 2]) for i in range(0, len(theta), 2)])
    assert list(got.status) == list(want.status) and got.reason == want.reason
    assert got.status[-1] == Status.INVALID_PARAMETERS and (got.status[:-1] == Status.OK).all()
    for field in ("scalars", "curves", "at_mass"):
        a, b = getattr(got, field), getattr(want, field)
        assert list(a) == list(b)
        for k in a:
            np.testing.assert_array_equal(a[k], b[k], err_msg=k)
    with pytest.raises(InputError, match="workers must be a whole number >= 1"):
        solve_points(spec, theta, workers=0)


def test_twin_scalars_are_exact_and_nan_without_a_twin():
    """Twin scalars of the transition family: the solver's exact twin extrema where a second stable
    branch exists (SLy with the issue's jump at 2 n_sat), NaN where it does not (a small jump)."""
    names = ["twin_mass_max_msun", "twin_mass_min_msun", "twin_radius_at_mass_max_km"]
    spec = parse_spec({"family": "piecewise-polytrope-transition", "chunk_size": 4, "mass_max_floor_msun": 0.5,
                       "design": {"method": "sobol", "points": 4, "seed": 1},
                       "outputs": {"scalars": ["mass_max_msun", *names]}})
    sly = list(READ2009["SLy"].values())
    theta = np.array([sly + [34.46, 0.639, 1.0], sly + [34.46, 0.3, 1.0]])
    res = solve_chunk(spec, theta)
    assert res.status.tolist() == [0, 0]
    seq = solve.solve_sequence(eos.make("piecewise-polytrope-transition", **READ2009["SLy"], log_p_transition=34.46,
                                        jump_ratio=0.639, cs2_above=1.0))
    expect = [seq.twin.mass_max.mass_msun, seq.twin.mass_min_msun, seq.twin.mass_max.radius_km]
    for name, value in zip(names, expect):
        assert res.scalars[name][0] == pytest.approx(value, rel=1e-10), name
        assert np.isnan(res.scalars[name][1]), name
    assert res.scalars["mass_max_msun"][0] == pytest.approx(seq.mass_max.mass_msun, rel=1e-12)
