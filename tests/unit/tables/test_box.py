"""Box tables: model values, row order, checks, and exact solves through the grid machinery."""

from __future__ import annotations

import json
import warnings

import numpy as np
import pytest
from table_helpers import tiny_model
from tovforge import eos, solve
from tovforge.errors import InputError
from tovforge.tables import QUANTITIES, Axis, box_table, exact_box_table, read_table

FIXED = {"log_p1": 34.4, "gamma3": 3.0}
AXES = [Axis("gamma2", 2.0, 3.5, 4), Axis("gamma1", 2.5, 3.5, 3)]


def _theta(t, names):
    return np.stack([t[n] for n in names], axis=1)


def test_rows_follow_the_axes_as_given(tmp_path):
    model = tiny_model("spline")
    box_table(tmp_path / "b.csv", model, AXES, FIXED, ["mass_max"], progress=False)
    t = read_table(tmp_path / "b.csv")
    # first axis (gamma2) slowest, then gamma1; fixed values exactly as given
    g2, g1 = np.meshgrid(np.linspace(2.0, 3.5, 4), np.linspace(2.5, 3.5, 3), indexing="ij")
    np.testing.assert_allclose(t["gamma2"], g2.ravel(), rtol=1e-15)
    np.testing.assert_allclose(t["gamma1"], g1.ravel(), rtol=1e-15)
    assert np.all(t["log_p1"] == 34.4) and np.all(t["gamma3"] == 3.0)
    assert json.loads(t.meta["shape_json"]) == [4, 3]


def test_values_are_the_models(tmp_path):
    model = tiny_model("spline")
    masses = [1.2, 1.4, 2.5]
    box_table(tmp_path / "b.npz", model, AXES, FIXED, list(QUANTITIES), masses, progress=False, chunk_rows=5)
    t = read_table(tmp_path / "b.npz")
    theta = _theta(t, model.parameter_names)
    pred = model.predict(theta)
    np.testing.assert_allclose(t["mass_max"], model.mass_max(theta).value, rtol=1e-12)
    np.testing.assert_allclose(t["max_sound_speed_sq"], pred.max_sound_speed_sq, rtol=1e-12)
    # the margin is 1 - c_s^2: compared at the precision of c_s^2 itself (a row's last bits depend on the
    # rows evaluated with it, ~1e-13 here; relative to a margin of 0.1 that is 1e-12)
    np.testing.assert_allclose(t["causality_margin"], 1.0 - pred.max_sound_speed_sq, rtol=1e-12, atol=1e-12)
    floor = model.meta.outputs.mass_floor_msun
    np.testing.assert_allclose(t["mass_max_margin"], pred.mass_max_msun - floor, rtol=1e-12)
    np.testing.assert_allclose(t["pressure_at_mass_max"], pred.central_pressure_at_mass_max_dyn_cm2, rtol=1e-12)
    np.testing.assert_allclose(t["radius_at_mass_max"], model.radius(theta, pred.mass_max_msun[:, None]).value[:, 0],
                               rtol=1e-12)
    for name, method in (("radius", model.radius), ("lambda", model.tidal_deformability),
                         ("inertia", model.moment_of_inertia), ("k2", model.k2)):
        ref = method(theta, masses).value
        for j, m in enumerate(["1.2", "1.4", "2.5"]):
            np.testing.assert_allclose(t[f"{name}@{m}"], ref[:, j], rtol=1e-12, err_msg=f"{name}@{m}")
    assert np.isnan(t["radius@2.5"]).any()  # above M_max somewhere in this slice
    # the spline's error model gives a sigma
    np.testing.assert_allclose(t["sigma_mass_max"], model.mass_max(theta, return_std=True).std, rtol=1e-12)
    assert t.units["pressure_at_mass_max"] == "dyn/cm^2" and t.units["lambda@1.4"] == "1"


def test_gp_adds_its_standard_deviations(tmp_path):
    model = tiny_model("gp")
    box_table(tmp_path / "b.h5", model, [Axis("gamma1", 2.5, 3.5, 3)], {**FIXED, "gamma2": 3.0},
              ["mass_max", "radius", "lambda"], [1.4], progress=False)
    t = read_table(tmp_path / "b.h5")
    theta = _theta(t, model.parameter_names)
    s_m = model.mass_max(theta, return_std=True).std
    np.testing.assert_allclose(t["sigma_mass_max"], s_m, rtol=1e-12)
    np.testing.assert_allclose(t["sigma_radius@1.4"], model.radius(theta, 1.4, return_std=True).std, rtol=1e-12)
    np.testing.assert_allclose(t["sigma_lambda@1.4"], model.tidal_deformability(theta, 1.4, return_std=True).std,
                               rtol=1e-12)
    assert np.all(t["sigma_mass_max"] > 0)
    assert t.units["sigma_radius@1.4"] == "km"


@pytest.mark.parametrize("axes, fixed, match", [
    ([Axis("gamma1", 1.5, 3.0, 3)], {"log_p1": 34.4, "gamma2": 3, "gamma3": 3},
     "outside the model's box: gamma1 must be in [2, 4]"),
    ([Axis("gamma1", 2.5, 3.0, 3)], {"log_p1": 35.5, "gamma2": 3, "gamma3": 3},
     "fixed log_p1=35.5: outside the model's box"),
    ([Axis("gamma1", 2.5, 3.0, 3)], {"log_p1": 34.4, "gamma2": 3}, "gamma3: neither an axis nor fixed"),
    ([Axis("gamma9", 2.5, 3.0, 3)], {}, "has no parameter 'gamma9'"),
    ([Axis("gamma1", 3.0, 2.5, 3)], {"log_p1": 34.4, "gamma2": 3, "gamma3": 3}, "LO must be below HI"),
    ([Axis("gamma1", 2.5, 3.0, 1)], {"log_p1": 34.4, "gamma2": 3, "gamma3": 3}, "N must be at least 2"),
    ([Axis("gamma1", 2.5, 3.0, 3)], {"gamma1": 3.0, "log_p1": 34.4, "gamma2": 3, "gamma3": 3}, "also an axis"),
    ([], {"gamma1": 3.0, "log_p1": 34.4, "gamma2": 3, "gamma3": 3}, "at least one axis"),
])
def test_bad_boxes_are_refused_before_any_work(tmp_path, axes, fixed, match):
    with pytest.raises(InputError, match=match.replace("[", r"\[").replace("]", r"\]")):
        box_table(tmp_path / "b.csv", tiny_model("spline"), axes, fixed, progress=False)
    assert list(tmp_path.iterdir()) == []


def test_per_mass_quantities_need_masses(tmp_path):
    with pytest.raises(InputError, match="need masses"):
        box_table(tmp_path / "b.csv", tiny_model("spline"), AXES, FIXED, ["radius"], [], progress=False)


def test_exact_box_equals_the_solver(tmp_path):
    axes = [Axis("gamma2", 2.5, 3.5, 2), Axis("gamma1", 2.8, 3.2, 2)]
    summary = exact_box_table(tmp_path / "e.h5", "piecewise-polytrope", axes, FIXED,
                              ["mass_max", "radius_at_mass_max", "radius", "lambda", "inertia", "mass_max_margin"],
                              [1.4, 2.0], mass_floor_msun=2.0, workers=1, progress=False)
    t = read_table(tmp_path / "e.h5")
    assert summary.n_rows == 4 and not (tmp_path / "e.h5.grid.h5").exists()
    assert t.meta["source"] == "exact" and t.meta["grid_spec_sha256"]
    fam = eos.get_family("piecewise-polytrope")
    for i in range(4):
        e = fam.from_array([t[n][i] for n in fam.parameter_names])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", UserWarning)  # 2 Msun may exceed M_max: NaN in both
            seq = solve.solve_sequence(e, masses=[1.4, 2.0])
        np.testing.assert_allclose(t["mass_max"][i], seq.mass_max.mass_msun, rtol=1e-9)
        np.testing.assert_allclose(t["mass_max_margin"][i], seq.mass_max.mass_msun - 2.0, rtol=1e-9)
        np.testing.assert_allclose(t["radius_at_mass_max"][i], seq.mass_max.radius_km, rtol=1e-9)
        for col, field in (("radius", "radius_km"), ("lambda", "tidal_deformability"),
                           ("inertia", "moment_of_inertia_1e45_g_cm2")):
            np.testing.assert_allclose([t[f"{col}@1.4"][i], t[f"{col}@2"][i]], getattr(seq.at_mass, field),
                                       rtol=1e-9, err_msg=col)
        # status 2 (below the floor) still carries values
        assert t["status"][i] == (0 if seq.mass_max.mass_msun >= 2.0 else 2)
    assert {0, 2} <= set(t["status"].tolist())


def test_exact_box_checks_the_allowed_range(tmp_path):
    with pytest.raises(InputError, match=r"outside the allowed range of gamma1"):
        exact_box_table(tmp_path / "e.csv", "piecewise-polytrope", [Axis("gamma1", 0.5, 3.0, 2)],
                        {"log_p1": 34.4, "gamma2": 3, "gamma3": 3}, progress=False)



def test_rerunning_an_exact_box_reuses_its_grid(tmp_path, monkeypatch):
    """The work grid's spec depends on the box alone, so the same call finds it finished (or resumes its chunks)."""
    from tovforge.grid import _run

    axes = [Axis("gamma1", 2.8, 3.2, 2)]
    fixed = {"log_p1": 34.4, "gamma2": 3.0, "gamma3": 3.0}
    exact_box_table(tmp_path / "e.csv", "piecewise-polytrope", axes, fixed, ["mass_max"], workers=1,
                    progress=False, keep_grid=True)
    first = read_table(tmp_path / "e.csv")

    def no_solving(*args, **kwargs):
        raise AssertionError("the finished work grid was solved again")

    monkeypatch.setattr(_run, "_execute", no_solving)
    exact_box_table(tmp_path / "e.csv", "piecewise-polytrope", axes, fixed, ["mass_max"], workers=1,
                    progress=False, overwrite=True)
    second = read_table(tmp_path / "e.csv")
    assert not (tmp_path / "e.csv.grid.h5").exists()  # used as it was, then removed
    np.testing.assert_array_equal(first["mass_max"], second["mass_max"])
    assert first.meta["grid_content_sha256"] == second.meta["grid_content_sha256"]
