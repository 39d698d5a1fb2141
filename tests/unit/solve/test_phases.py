"""The phases of a sequence solve, each on its own: scan criteria on hand-made rows, mass queries."""

from __future__ import annotations

import ast
import inspect

import numpy as np
import pytest

from tovforge import solve
from tovforge.solve import _result, _scan
from tovforge.status import Status

nan = np.nan


@pytest.mark.parametrize("row, peak, start", [
    ([nan, 1.0, 2.0, 3.0, 2.5, 2.0], 3, 1),   # failed first star: the rise starts at the first finite one
    ([1.0, 0.5, 1.0, 2.0, 1.5, 1.0], 3, 1),   # a dip before the rise: the branch starts at its minimum
    ([1.0, 2.0, 3.0, 3.0, 2.0, 1.0], 2, 0),   # a flat top: the first of the equal masses
    ([1.0, 2.0, 3.0, 4.0, 5.0, 6.0], -1, 0),  # still rising at the end of the scan: no maximum
])
def test_first_maximum_on_hand_made_rows(row, peak, start):
    ipk, st = _scan.first_maximum(np.array([row]))
    assert ipk.tolist() == [peak]
    if peak >= 0:
        assert st.tolist() == [start]


def test_twin_branch_needs_a_clockwise_turn():
    m = np.array([[1.0, 2.0, 1.5, 1.2, 1.6, 1.9, 1.7]])
    ipk, _ = _scan.first_maximum(m)
    shrinking = np.array([[12.0, 11.0, 10.0, 9.0, 8.0, 7.0, 6.0]])  # radius still falls at the minimum
    growing = np.array([[12.0, 11.0, 10.0, 10.5, 11.0, 11.5, 12.0]])
    assert [a.tolist() for a in _scan.twin_branch(m, shrinking, ipk)] == [[3], [5]]
    assert [a.tolist() for a in _scan.twin_branch(m, growing, ipk)] == [[-1], [-1]]
    # a rise that is still rising at the end of the scan has no maximum there: no twin branch
    rising = np.array([[1.0, 2.0, 1.5, 1.2, 1.6, 1.9, 2.5]])
    assert [a.tolist() for a in _scan.twin_branch(rising, shrinking, ipk)] == [[-1], [-1]]


def test_a_turning_jump_is_a_maximum_however_shallow_the_dip_after_it():
    """Above Seidov's limit the star centred on the transition is a maximum (Seidov 1971, Sov. Astron.
    15, 347) even where the next scanned star is already heavier (a dip narrower than the spacing):
    the twin branch's minimum is then bracketed by the cusp and that star."""
    m = np.array([[1.0, 2.0, 2.1, 2.3, 2.6, 2.4]])
    r = np.array([[12.0, 11.5, 11.0, 10.5, 10.0, 9.5]])
    turn = np.zeros(m.shape, dtype=bool)
    assert _scan.first_maximum(m)[0].tolist() == [4]
    turn[0, 1] = True
    ipk, _ = _scan.first_maximum(m, turn)
    assert ipk.tolist() == [1]
    assert [a.tolist() for a in _scan.twin_branch(m, r, ipk, turn)] == [[1], [4]]
    # a turning jump reached while the mass falls is no maximum
    falling = np.array([[1.0, 2.0, 1.9, 1.8, 2.6, 2.4]])
    turn2 = np.zeros(m.shape, dtype=bool)
    turn2[0, 2] = True
    assert _scan.first_maximum(falling, turn2)[0].tolist() == [1]


def test_result_objects_do_not_call_the_solver():
    tree = ast.parse(inspect.getsource(_result))
    imports = [(node.level, node.module) for node in ast.walk(tree) if isinstance(node, ast.ImportFrom)]
    imports += [(0, a.name) for node in ast.walk(tree) if isinstance(node, ast.Import) for a in node.names]
    # plain data: NumPy, the registry and the status vocabulary (two levels up), nothing from solve/
    assert set(imports) <= {(0, "__future__"), (0, "dataclasses"), (0, "numpy"), (2, None), (2, "status")}
    assert not hasattr(solve.StarSequence, "at_masses")


@pytest.fixture(scope="module")
def sly_batch(sly):
    return sly.batch, solve.solve_sequences(sly.batch, n_stars=16, exact_maximum=True)


def test_stars_at_masses_returns_stars_and_flags(sly, sly_batch):
    batch, seq = sly_batch
    m_max = float(seq.mass_max.mass_msun[0])
    targets = np.array([[0.05, 1.4, m_max, 2.5]])
    q = solve.stars_at_masses(batch, seq, targets, solve.StepSettings(), rtol=1e-11)
    assert isinstance(q, solve.MassQuery) and isinstance(q.stars, solve.Stars)
    assert q.stars.mass_msun.shape == targets.shape and q.nfev > 0
    assert q.below_branch.tolist() == [[True, False, False, False]]  # below the lightest branch star
    assert not q.not_found.any()
    assert abs(q.stars.mass_msun[0, 1] / 1.4 - 1) <= 1e-11
    for name, v in q.stars.as_dict().items():  # u = 0 is the maximum-mass star itself, field for field
        assert v[0, 2] == getattr(seq.mass_max, name)[0], name
    assert np.isnan([q.stars.radius_km[0, 0], q.stars.radius_km[0, 3]]).all()  # off the branch: NaN
    # a full star: the central values of the EOS at the star's h_c, as solve_stars gives them
    ref = solve.solve_stars(sly, [q.stars.central_pseudo_enthalpy[0, 1]])
    for name in ("central_pressure_dyn_cm2", "central_rest_mass_density_g_cm3", "central_sound_speed_sq"):
        assert q.stars.value(name)[0, 1] == ref.value(name)[0], name


def test_queries_of_solve_sequences_match_the_grid_search(sly_batch):
    """solve_sequences(masses=...) and stars_at_masses give the same stars, without a units round trip."""
    batch, _ = sly_batch
    res = solve.solve_sequences(batch, n_stars=16, masses=[1.2, 1.8])
    q = solve.stars_at_masses(batch, res, np.array([[1.2, 1.8]]), solve.SequenceSettings().steps)
    for name, v in res.at_mass.as_dict().items():
        np.testing.assert_array_equal(v, getattr(q.stars, name), err_msg=name)
    assert res.status[0] == Status.OK
