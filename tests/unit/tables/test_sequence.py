"""Sequence tables hold the solver's stars."""

from __future__ import annotations

import json

import numpy as np
import pytest
from tovforge import quantities, solve
from tovforge.errors import InputError
from tovforge.tables import SEQUENCE_COLUMNS, read_table, sequence_table

# column -> canonical name (every star quantity of the registry is a column)
FIELDS = {q.column: q.name for q in quantities.star_quantities()}


@pytest.fixture(scope="module")
def points_table(sly, tmp_path_factory):
    path = tmp_path_factory.mktemp("seq") / "sly.h5"
    sequence_table(path, sly, points=31, command="test")
    return read_table(path)


def test_every_column_has_its_unit(points_table):
    assert list(points_table.columns) == [c.name for c in SEQUENCE_COLUMNS] == [*FIELDS, "branch"]
    assert np.all(points_table["branch"] == 1)  # SLy has no twin branch
    assert {"mass", "radius", "lambda", "k2", "inertia", "inertia_over_m3", "baryon_mass", "central_pressure",
            "central_density", "central_pseudo_enthalpy"} <= set(FIELDS)
    assert points_table.units["radius"] == "km"
    assert points_table.units["central_pressure"] == "dyn/cm^2"
    assert points_table.units["inertia"] == "1e45 g cm^2"


@pytest.mark.parametrize("row", [0, 11, 30])
def test_rows_are_the_solver_stars_at_their_central_pressure(sly, points_table, row):
    # the solver's own single-star solve with the sequence's step settings (16 steps + 3 per kink)
    star = solve.solve_star(sly, pressure_dyn_cm2=points_table["central_pressure"][row], n_steps=16).star
    for col, name in FIELDS.items():
        np.testing.assert_allclose(points_table[col][row], star.value(name)[0], rtol=1e-12, err_msg=col)


def test_central_pressures_are_evenly_spaced_in_log(points_table):
    step = np.diff(np.log(points_table["central_pressure"]))
    np.testing.assert_allclose(step, step[0], rtol=1e-9)


def test_ends_are_the_lightest_star_and_the_maximum(sly, points_table):
    seq = solve.solve_sequence(sly)
    np.testing.assert_allclose(points_table["mass"][0], seq.branch.mass_msun[0], rtol=1e-12)
    np.testing.assert_allclose(points_table["mass"][-1], seq.mass_max.mass_msun, rtol=1e-10)
    np.testing.assert_allclose(points_table["radius"][-1], seq.mass_max.radius_km, rtol=1e-10)
    assert np.all(np.diff(points_table["mass"]) > 0)  # the stable branch only
    assert points_table.meta["mass_max_msun"] == pytest.approx(seq.mass_max.mass_msun, rel=1e-12)


def test_provenance(points_table):
    m = points_table.meta
    assert m["kind"] == "sequence" and m["command"] == "test" and m["family"] == "piecewise-polytrope"
    assert json.loads(m["parameters_json"]) == {"log_p1": 34.384, "gamma1": 3.005, "gamma2": 2.988, "gamma3": 2.851}
    assert m["tovforge_version"] and m["created_utc"].endswith("Z")


def test_masses_mode_matches_exact_mass_queries(sly, tmp_path):
    masses = [1.0, 1.4, 2.0, 2.2]
    summary = sequence_table(tmp_path / "m.csv", sly, masses=masses)
    t = read_table(tmp_path / "m.csv")
    np.testing.assert_array_equal(t["target_mass"], masses)
    with pytest.warns(UserWarning, match="above M_max"):
        ref = solve.solve_sequence(sly, masses=masses).at_mass
    for col in ("mass", "radius", "lambda", "inertia", "k2", "baryon_mass"):
        np.testing.assert_allclose(t[col][:3], ref.value(FIELDS[col])[:3], rtol=1e-9, err_msg=col)
    assert np.all(np.isnan([t[c][3] for c in FIELDS]))  # 2.2 Msun is above SLy's M_max
    assert "no stable star at 2.2 Msun" in summary.notes[0]


def test_light_masses_are_found(sly, tmp_path):
    sequence_table(tmp_path / "m.npz", sly, masses=[0.2])
    t = read_table(tmp_path / "m.npz")
    assert t["mass"][0] == pytest.approx(0.2, rel=1e-10)


@pytest.mark.parametrize("kwargs, match", [
    ({"points": 1}, "points must be an integer in"),
    ({"masses": [1.4, -1.0]}, "masses must be positive"),
    ({"points": 10, "min_mass_msun": 0.0}, "min_mass_msun must be in"),
])
def test_bad_options(sly, tmp_path, kwargs, match):
    with pytest.raises(InputError, match=match):
        sequence_table(tmp_path / "x.csv", sly, **kwargs)
    assert not (tmp_path / "x.csv").exists()


@pytest.fixture(scope="module")
def hybrid():
    """SLy with the issue's jump at 2 n_sat, above Seidov's limit: a cusp, then a twin branch."""
    from tovforge import eos

    return eos.make("piecewise-polytrope-transition", log_p1=34.384, gamma1=3.005, gamma2=2.988, gamma3=2.851,
                    log_p_transition=34.46, jump_ratio=0.639, cs2_above=1.0)


def test_twin_branch_rows_are_marked(hybrid, tmp_path):
    sequence_table(tmp_path / "t.csv", hybrid, points=7)
    t = read_table(tmp_path / "t.csv")
    seq = solve.solve_sequence(hybrid)
    assert t["branch"].tolist() == [1] * 7 + [2] * 7
    stable, twin = t["branch"] == 1, t["branch"] == 2
    assert np.all(np.diff(t["mass"][stable]) > 0) and np.all(np.diff(t["mass"][twin]) > 0)
    np.testing.assert_allclose(t["mass"][stable][-1], seq.mass_max.mass_msun, rtol=1e-12)
    np.testing.assert_allclose(t["mass"][twin][[0, -1]], [seq.twin.mass_min_msun, seq.twin.mass_max.mass_msun],
                               rtol=1e-12)
    step = np.diff(np.log(t["central_pressure"][twin]))
    np.testing.assert_allclose(step, step[0], rtol=1e-9)  # evenly in ln p_c on the twin branch too
    assert t.meta["twin_mass_min_msun"] == pytest.approx(seq.twin.mass_min_msun, rel=1e-12)


def test_masses_on_the_twin_branch_get_rows_of_their_own(hybrid, tmp_path):
    summary = sequence_table(tmp_path / "m.csv", hybrid, masses=[0.5, 0.652, 1.4, 2.5])
    t = read_table(tmp_path / "m.csv")
    assert t["target_mass"].tolist() == [0.5, 0.652, 1.4, 2.5, 0.652, 1.4]
    assert t["branch"].tolist() == [1, 1, 1, 1, 2, 2]
    np.testing.assert_allclose(t["mass"][[0, 1, 4, 5]], [0.5, 0.652, 0.652, 1.4], rtol=1e-10)
    assert np.isnan(t["mass"][[2, 3]]).all()
    assert t["radius"][4] < t["radius"][1]  # the twin of 0.652 Msun is the more compact star
    assert any("twin stars at 0.652, 1.4 Msun" in n for n in summary.notes)
