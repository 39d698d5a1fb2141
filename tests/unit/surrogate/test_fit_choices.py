"""Choices made per fit from leave-one-out scores (the local kind's stretch, the GP's fallback to raw
parameters), and the sound-speed family's ln(cs2) input warp."""

from __future__ import annotations

import dataclasses
import warnings

import numpy as np
import pytest
from helpers import import_file

from tovforge import eos
from tovforge.errors import InputError
from tovforge.export import export_model
from tovforge.surrogate import GPSettings, LocalSettings, SplineSettings, TrainingData, load, train_on
from tovforge.surrogate import _gp
from tovforge.surrogate import _runtime as rt
from tovforge.surrogate._errors import loo_score, score_columns

N_U = 6
SMALL = LocalSettings(points_per_cell=100, min_points=40)


def _data(family: str, x: np.ndarray, outputs) -> TrainingData:
    """Points x (n, d) of the unit box mapped onto the family's default box, outputs from ``outputs(theta)``:
    (M_max (n,), curve (n, N_U) used for all three curves)."""
    fam = eos.get_family(family)
    box = np.array([p.box for p in fam.parameters], float)
    theta = box[:, 0] + x * (box[:, 1] - box[:, 0])
    mass_max, curve = outputs(theta)
    scalars = {"mass_max_msun": mass_max, "log10_central_pressure_at_mass_max": 15.0 + 0.1 * mass_max,
               "max_sound_speed_sq": 0.5 + 0.01 * mass_max}
    curves = {"radius_km": 12.0 + curve, "log_tidal_deformability": 5.0 + curve, "log_moment_of_inertia": 3.0 + curve}
    return TrainingData(family=family, parameter_names=tuple(p.name for p in fam.parameters),
                        parameter_units=tuple(p.unit for p in fam.parameters), bounds=box, theta=theta,
                        scalars=scalars, u_nodes=np.linspace(0.0, 0.8, N_U), curves=curves, mass_floor_msun=1.0,
                        regular_shape=None, provenance={"grid_path": "synthetic"})


def test_loo_score_is_the_largest_p95_in_units_of_the_limits():
    slices = np.array([[3, 3 + N_U], [3 + N_U, 3 + 2 * N_U], [3 + 2 * N_U, 3 + 3 * N_U]])
    cols = score_columns(slices)
    assert cols == {"mass_max_msun": (2, 3), "radius_km": (3, 3 + N_U),
                    "tidal_deformability_rel": (3 + N_U, 3 + 2 * N_U)}
    loo = np.zeros((200, 3 + 3 * N_U))
    loo[:, 0:2] = 99.0  # columns the score does not weigh
    loo[:, 2] = -0.03  # M_max: 3 x its limit of 0.01 Msun (signs do not matter)
    loo[:, 3 : 3 + N_U] = 0.1  # R: 2 x 50 m
    loo[:, 3 + N_U : 3 + 2 * N_U] = 0.005  # ln Lambda: 0.25 of 2 %
    loo[:, 3 + 2 * N_U :] = 99.0  # ln I: not weighed
    assert loo_score(loo, cols) == pytest.approx(3.0, rel=1e-12)
    loo[:180, 2] = 0.0  # 10 % of the points still at 3 x: the p95 is 3 x
    assert loo_score(loo, cols) == pytest.approx(3.0, rel=1e-12)
    loo[:195, 2] = 0.0  # 2.5 % of the points: the p95 does not see them, R decides
    assert loo_score(loo, cols) == pytest.approx(2.0, rel=1e-12)


def _mass_max_in_x1(theta):
    """M_max wiggles along gamma1 (which the curves ignore); the curves vary gently along log_p1."""
    t = (theta - [34.0, 2.0, 1.5, 1.5]) / [1.0, 2.0, 2.5, 2.5]
    return 2.0 + 0.3 * np.sin(7.0 * t[:, 1]), 0.02 * np.sin(2.0 * t[:, 0])[:, None] * np.linspace(1, 2, N_U)


def _curves_in_x1(theta):
    """The mirror image: the curves wiggle along gamma1 (which M_max ignores); M_max varies gently along log_p1."""
    t = (theta - [34.0, 2.0, 1.5, 1.5]) / [1.0, 2.0, 2.5, 2.5]
    return 2.0 + 1e-3 * np.sin(2.0 * t[:, 0]), 0.5 * np.sin(7.0 * t[:, 1])[:, None] * np.linspace(1, 2, N_U)


@pytest.mark.parametrize("kind", ["local", "spline"])
@pytest.mark.parametrize("outputs, want", [(_mass_max_in_x1, "mass_max"), (_curves_in_x1, "curves")])
def test_auto_stretch_keeps_the_option_with_the_lower_leave_one_out_score(outputs, want, kind):
    """``stretch_on="auto"`` fits both stretches and keeps the lower score; the model then equals the
    fit with that option forced, and both scores are recorded."""
    data = _data("piecewise-polytrope", np.random.default_rng(11).random((400, 4)), outputs)
    settings = dataclasses.replace(SMALL if kind == "local" else SplineSettings(), warp_inputs=False)
    auto = train_on(data, kind, settings)
    fit = auto.meta.fit
    assert set(fit.stretch_scores) == {"curves", "mass_max"}
    assert fit.stretch_on == min(fit.stretch_scores, key=fit.stretch_scores.get) == want
    forced = {o: train_on(data, kind, dataclasses.replace(settings, stretch_on=o)) for o in ("curves", "mass_max")}
    for option, model in forced.items():  # the recorded score is the forced fit's own score
        y, slices = data.output_matrix()
        assert model.meta.fit.stretch_on == option and model.meta.fit.stretch_scores == {}
        assert loo_score(model.arrays["loo_residual"], score_columns(slices)) == pytest.approx(
            fit.stretch_scores[option], rel=1e-9)
    theta = data.theta[:40] * 1.0001
    np.testing.assert_array_equal(auto.evaluate(theta).values, forced[want].evaluate(theta).values)
    assert not np.allclose(forced["curves"].evaluate(theta).values, forced["mass_max"].evaluate(theta).values)


@pytest.mark.parametrize("kind, settings", [("local", SMALL), ("spline", SplineSettings())])
def test_unknown_stretch_option_refused(kind, settings):
    data = _data("piecewise-polytrope", np.random.default_rng(1).random((200, 4)), _mass_max_in_x1)
    with pytest.raises(InputError, match="stretch_on") as info:
        train_on(data, kind, dataclasses.replace(settings, stretch_on="radius"))
    assert "\n" not in str(info.value)


def _linear_in_ln_cs2(theta):
    """Every output linear in ln(cs2_i): reproduced exactly by a spline whose inputs are ln(cs2)."""
    lc = np.log(theta)
    return 2.0 + lc @ [0.1, -0.2, 0.15, 0.05, 0.02], (lc @ [0.3, 0.1, -0.2, 0.05, 0.1])[:, None] * np.linspace(1, 2, N_U)


@pytest.fixture(scope="module")
def sound_speed_model():
    data = _data("sound-speed", np.random.default_rng(5).random((400, 5)), _linear_in_ln_cs2)
    return data, train_on(data, "local", dataclasses.replace(SMALL, anisotropic=False))


def test_sound_speed_inputs_are_ln_cs2(sound_speed_model):
    """The family declares ln(cs2) (log_offset 0): outputs linear in ln(cs2) are reproduced to rounding
    with the warp, and not without it."""
    data, model = sound_speed_model
    assert all(p.log_offset == 0.0 for p in eos.get_family("sound-speed").parameters)
    assert model.meta.fit.input_warp == {f"cs2_{i}": f"ln(cs2_{i} - 0)" for i in range(1, 6)}
    assert np.array_equal(model.arrays["warp_log"], np.ones(5, dtype=np.int64))
    test = _data("sound-speed", np.random.default_rng(6).random((300, 5)), _linear_in_ln_cs2)
    want = test.output_matrix()[0]
    scale = np.max(np.abs(want))
    assert np.max(np.abs(model.evaluate(test.theta).values - want)) < 1e-9 * scale
    raw = train_on(data, "local", dataclasses.replace(SMALL, anisotropic=False, warp_inputs=False))
    assert raw.meta.fit.input_warp == {}
    assert np.max(np.abs(raw.evaluate(test.theta).values - want)) > 1e-5 * scale


def test_sound_speed_warp_survives_save_load_and_export(sound_speed_model, tmp_path):
    data, model = sound_speed_model
    model.save(tmp_path / "m")
    back = load(tmp_path / "m")
    assert back.meta.fit.input_warp == model.meta.fit.input_warp
    theta = data.bounds[:, 0] + np.random.default_rng(7).random((50, 5)) * (data.bounds[:, 1] - data.bounds[:, 0])
    np.testing.assert_array_equal(back.evaluate(theta).values, model.evaluate(theta).values)
    path = tmp_path / "ss_local.py"
    export_model(model, path, namespaces=("numpy",))
    mod = import_file(path)
    masses = np.array([1.1, 1.3])
    np.testing.assert_allclose(mod.mass_max(theta).value, model.mass_max(theta).value, rtol=1e-12, atol=0)
    np.testing.assert_allclose(mod.radius(theta, masses).value, model.radius(theta, masses).value, rtol=1e-12,
                               atol=0)
    assert rt.unit_inputs(np, back._model, theta)[1].all()


@pytest.mark.parametrize("fake_raw_better", [True, False])
def test_gp_with_degenerate_kernels_under_the_warp_also_fits_the_raw_parameters(monkeypatch, fake_raw_better):
    """When the warped GP reports degenerate kernels, the raw parameters are fitted too and the fit with
    the lower leave-one-out score kept (the degeneracy is reported by a stand-in for the warped fit; the
    scores are the fits' own, or shifted to make either side win)."""
    data = _data("piecewise-polytrope", np.random.default_rng(3).random((150, 4)), _mass_max_in_x1)
    settings = GPSettings(n_subset=60, n_restarts=0, n_jobs=1, curve_groups=1)
    real_degenerate, real_score = _gp.degenerate_kernels, _gp.loo_score
    calls = []

    def degenerate(x, sub, length):
        calls.append(1)
        return ["kernel 1: a stand-in"] if len(calls) == 1 else real_degenerate(x, sub, length)

    def score(loo, cols):  # the first call scores the warped fit, the second the raw one
        calls.append(2)
        shift = 1e3 if (calls.count(2) == 1) == fake_raw_better else 0.0
        return real_score(loo, cols) + shift

    monkeypatch.setattr(_gp, "degenerate_kernels", degenerate)
    monkeypatch.setattr(_gp, "loo_score", score)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        model = train_on(data, "gp", settings)
    # only the kept fit's degenerate kernels are warned about
    assert any("a stand-in" in str(w.message) for w in caught) == (not fake_raw_better)
    fb = model.meta.fit.warp_fallback
    assert fb["warped_degenerate_kernels"] == 1
    assert (fb["raw_loo_score"] < fb["warped_loo_score"]) == fake_raw_better
    assert fb["kept"] == ("raw parameters" if fake_raw_better else "the family's warp")
    monkeypatch.setattr(_gp, "degenerate_kernels", real_degenerate)
    want = train_on(data, "gp", dataclasses.replace(settings, warp_inputs=not fake_raw_better))
    assert (model.meta.fit.input_warp == {}) == fake_raw_better and want.meta.fit.warp_fallback == {}
    theta = data.theta[:30] * 1.0001
    np.testing.assert_array_equal(model.evaluate(theta).values, want.evaluate(theta).values)

