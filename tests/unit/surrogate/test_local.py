"""The local (partition-of-unity) polyharmonic spline: interpolation, exactness, gradients, LOO, export, refusals."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest
from helpers import import_file

from tovforge.errors import InputError
from tovforge.export import export_model
from tovforge.surrogate import LocalSettings, TrainingData, read_training_data, train_on
from tovforge.surrogate import _runtime as rt
from tovforge.surrogate._local import join_groups, fit_patches, partition

ROOT = Path(__file__).resolve().parents[3]
TRAIN_GRID = ROOT / "grids" / "demo-train.h5"
# several cells on 300 points, two metric groups (the export tests cover the default, one group)
SMALL = LocalSettings(points_per_cell=60, min_points=40, separate_scalars=True)


def _subset(data: TrainingData, n: int) -> TrainingData:
    keep = slice(0, n)
    return dataclasses.replace(data, theta=data.theta[keep], scalars={k: v[keep] for k, v in data.scalars.items()},
                               curves={k: v[keep] for k, v in data.curves.items()})


@pytest.fixture(scope="module")
def demo():
    return _subset(read_training_data(TRAIN_GRID), 300)


@pytest.fixture(scope="module")
def model(demo):
    return train_on(demo, "local", SMALL)


def _linear_data(x: np.ndarray, A: np.ndarray, b: np.ndarray) -> TrainingData:
    """Points x (n, 4) of the unit box mapped onto the demo box, every modelled output linear in x (``x A + b``)."""
    box = np.array([[34.0, 35.0], [2.0, 4.0], [1.5, 4.0], [1.5, 4.0]])
    n_u = (A.shape[1] - 3) // 3
    Y = x @ A + b
    names = ("mass_max_msun", "log10_central_pressure_at_mass_max", "max_sound_speed_sq")
    scalars = {k: Y[:, i] for i, k in enumerate(names)}
    curves = {k: Y[:, 3 + j * n_u : 3 + (j + 1) * n_u]
              for j, k in enumerate(("radius_km", "log_tidal_deformability", "log_moment_of_inertia"))}
    return TrainingData(family="piecewise-polytrope", parameter_names=("log_p1", "gamma1", "gamma2", "gamma3"),
                        parameter_units=("log10(dyn/cm^2)", "1", "1", "1"), bounds=box,
                        theta=box[:, 0] + x * (box[:, 1] - box[:, 0]), scalars=scalars,
                        u_nodes=np.linspace(0.0, 0.8, n_u), curves=curves, mass_floor_msun=1.0, regular_shape=None,
                        provenance={"grid_path": "synthetic"})


def test_interpolates_training_data(model, demo):
    Y, _ = demo.output_matrix()
    fit = model.meta.fit
    assert model.method == "local" and fit.groups == ((0, 3), (3, Y.shape[1]))
    assert [len(c) for c in fit.cells] == [4, 4] and np.prod(fit.cells[1]) >= 4
    got = model.evaluate(demo.theta).values
    spread = Y.std(axis=0)
    assert np.max(np.abs(got - Y) / spread) < 1e-6


def test_reproduces_linear_function():
    rng = np.random.default_rng(1)
    A, b = rng.normal(size=(4, 21)), rng.normal(size=21)
    data = _linear_data(rng.random((500, 4)), A, b)
    m = train_on(data, "local", LocalSettings(warp_inputs=False, anisotropic=False, points_per_cell=80,
                                              min_points=40))
    assert len(m.meta.fit.groups) == 1 and np.prod(m.meta.fit.cells[0]) > 1
    test = _linear_data(rng.random((400, 4)), A, b)
    got, want = m.evaluate(test.theta).values, test.output_matrix()[0]
    assert np.max(np.abs(got - want)) < 1e-8 * np.max(np.abs(want))


def test_gradients_match_finite_differences(model, demo):
    rng = np.random.default_rng(3)
    lo, hi = demo.bounds[:, 0], demo.bounds[:, 1]
    theta = lo + (hi - lo) * (0.05 + 0.9 * rng.random((40, 4)))
    ev = model.evaluate(theta, grad=True)
    scale = np.abs(ev.values).max(axis=0) + 1.0
    for i in range(4):
        h = 1e-4 * (hi[i] - lo[i])
        up, down = theta.copy(), theta.copy()
        up[:, i] += h
        down[:, i] -= h
        fd = (model.evaluate(up).values - model.evaluate(down).values) / (2.0 * h)
        err = np.abs(ev.grad[:, :, i] - fd) * (hi[i] - lo[i]) / scale
        assert np.max(err) < 1e-6, (i, np.max(err))


def test_blend_zones_are_used(model, demo):
    """Queries in the demo box do blend several cells (so the gradient test covers the weights' derivatives)."""
    rng = np.random.default_rng(4)
    lo, hi = demo.bounds[:, 0], demo.bounds[:, 1]
    m = model._model
    x = rt.unit_inputs(np, m, lo + (hi - lo) * rng.random((400, 4)))[0]
    for g, group in enumerate(rt.local_tables(m)["groups"]):
        rows = rt.local_cells(np, x * m["group_scale"][g], group, False)[0]
        counts = np.bincount(rows, minlength=400)
        assert counts.min() >= 1 and (counts > 1).mean() > 0.1


def test_library_equals_exported_file(model, demo, tmp_path):
    path = tmp_path / "local_small.py"
    export_model(model, path, namespaces=("numpy",))
    mod = import_file(path)
    rng = np.random.default_rng(5)
    lo, hi = demo.bounds[:, 0], demo.bounds[:, 1]
    theta = lo + (hi - lo) * rng.random((64, 4))
    masses = np.array([1.2, 1.4, 1.8])
    a, b = model.mass_max(theta, return_grad=True), mod.mass_max(theta, return_grad=True)
    np.testing.assert_allclose(b.value, a.value, rtol=1e-12, atol=0)
    np.testing.assert_allclose(b.grad, a.grad, rtol=1e-10, atol=1e-12)
    a, b = model.radius(theta, masses, return_grad=True), mod.radius(theta, masses, return_grad=True)
    np.testing.assert_allclose(b.value, a.value, rtol=1e-12, atol=0)
    np.testing.assert_allclose(b.grad, a.grad, rtol=1e-10, atol=1e-12)
    one = mod.tidal_deformability(theta[7], 1.4)  # one theta: the generated fast path
    np.testing.assert_allclose(one.value, model.tidal_deformability(theta[7], 1.4).value, rtol=1e-12)


def test_nan_outside_the_box(model, demo):
    lo, hi = demo.bounds[:, 0], demo.bounds[:, 1]
    theta = np.array([(lo + hi) / 2, lo - 0.01 * (hi - lo), hi + [0.0, 0.0, 0.0, 0.01]])
    mmax = model.mass_max(theta).value
    assert np.isfinite(mmax[0]) and np.isnan(mmax[1:]).all()
    r = model.radius(theta, 1.2).value
    assert np.isfinite(r[0]).all() and np.isnan(r[1:]).all()


def test_too_few_points_per_cell_refused(demo):
    with pytest.raises(InputError) as info:
        train_on(demo, "local", LocalSettings(cells=(6, 6, 1, 1), min_points=40, anisotropic=False))
    msg = str(info.value)
    assert "\n" not in msg and "cell (" in msg and "min_points 40" in msg


@pytest.mark.parametrize("settings, key", [(LocalSettings(overlap=0.5), "overlap"),
                                           (LocalSettings(overlap=0.3, margin=0.2), "margin"),
                                           (LocalSettings(degree=1), "degree"),
                                           (LocalSettings(cells=(2, 2)), "cells")])
def test_bad_settings_refused(demo, settings, key):
    with pytest.raises(InputError, match=key) as info:
        train_on(demo, "local", settings)
    assert "\n" not in str(info.value)


def test_loo_residuals_equal_brute_force_refit():
    rng = np.random.default_rng(6)
    n = 160
    x = rng.random((n, 2)) * [1.0, 0.6]
    # wiggly enough that the residuals (1e-6 to 1e-3) stand far above the solves' rounding: the r^5 matrices
    # are ill conditioned, and two fits differ by up to 3.4e-9 (measured) in outputs of order 1
    Z = np.column_stack([np.sin(9 * x[:, 0]) * np.cos(7 * x[:, 1]), np.exp(2 * x[:, 0] * x[:, 1]),
                         np.abs(x[:, 0] - 0.5) ** 3])
    part = partition(x, np.array([1.0, 0.6]), (3, 2), 0.15)
    full = fit_patches(x, Z, part, 0.25, 2, 20)
    n_out = Z.shape[1]
    for i in [0, 17, 42, 99, 159]:
        keep = np.arange(n) != i
        arrays = fit_patches(x[keep], Z[keep], part, 0.25, 2, 20)
        arrays.pop("loo")
        m = rt.Model({**join_groups([part], [arrays]), "X": x[keep], "curve_slices": np.array([[1, n_out]]),
                      "group_columns": np.array([0, n_out]), "group_scale": np.ones((1, 2))}, "local")
        pred = rt.PARTS["local"](np, m, x[i : i + 1], False, None)[0][0]
        np.testing.assert_allclose(full["loo"][i], Z[i] - pred, rtol=1e-5, atol=1e-8)
    assert np.median(np.abs(full["loo"])) > 1e-5


def test_loo_residual_array_of_the_model(model, demo):
    loo = model.arrays["loo_residual"]
    Y, _ = demo.output_matrix()
    assert loo.shape == Y.shape and np.isfinite(loo).all()
    # leave-one-out errors are errors of a prediction, far above the interpolation's rounding
    assert np.all(np.median(np.abs(loo), axis=0) > 1e-6 * Y.std(axis=0))


def test_save_load_round_trip(model, demo, tmp_path):
    from tovforge.surrogate import load

    model.save(tmp_path / "m")
    back = load(tmp_path / "m")
    theta = demo.theta[:20] * 1.0001
    np.testing.assert_array_equal(back.evaluate(theta).values, model.evaluate(theta).values)


def test_metric_groups_keep_the_curves_of_one_group(model, demo):
    """Two groups change only the scalars' metric: the curves' stretch and cells are those of one group."""
    one = train_on(demo, "local", dataclasses.replace(SMALL, separate_scalars=False))
    assert len(one.meta.fit.groups) == 1 and one.meta.fit.cells[0] == model.meta.fit.cells[1]
    theta = demo.theta[:50] * 1.0001
    a, b = model.evaluate(theta).values, one.evaluate(theta).values
    np.testing.assert_allclose(a[:, 3:], b[:, 3:], rtol=1e-9, atol=1e-9)
    assert np.max(np.abs(a[:, :3] - b[:, :3])) > 1e-6  # the scalars' own metric does change them


def test_sigma_from_the_error_model_is_calibrated_on_held_out_stars():
    """The local kind's sigma is the shared error model on its leave-one-out residuals (issue 13): on the
    committed held-out grid, |error| > 3 sigma for at most 1 % of the stars and of the maximum masses
    (measured with 2,048 training points: 0 % and 0.2 %)."""
    import h5py

    data = _subset(read_training_data(TRAIN_GRID), 2048)
    model = train_on(data, "local")
    assert model.has_std and model.meta.fit.error_model["neighbours"] == rt.ERROR_NEIGHBOURS
    with h5py.File(ROOT / "grids" / "demo-holdout.h5", "r") as f:
        ok = f["status/code"][...] == 0
        theta = f["parameters/values"][...][ok]
        mmax = f["scalars/mass_max_msun"][...][ok]
        masses = f["at_mass/masses_msun"][...]
        r_exact = f["at_mass/radius_km"][...][ok]
    r = model.radius(theta, masses, return_std=True)
    sel = (masses[None] >= 1.0) & (masses[None] <= mmax[:, None] - 0.02) & np.isfinite(r_exact)
    assert np.isfinite(r.value[sel]).all() and np.all(r.std[sel] > 0)
    assert np.mean(np.abs(r.value - r_exact)[sel] > 3.0 * r.std[sel]) <= 0.01
    m = model.mass_max(theta, return_std=True)
    assert np.mean(np.abs(m.value - mmax) > 3.0 * m.std) <= 0.01


def test_spline_kind_fits_the_local_method_above_the_dense_limit(demo, monkeypatch):
    """Above DENSE_LIMIT points the default kind is the local spline (the model records both), with equal numbers."""
    from tovforge.surrogate import SplineSettings, _kinds

    dense = train_on(demo, "spline")
    assert (dense.kind, dense.method) == ("spline", "rbf")
    monkeypatch.setattr(_kinds, "DENSE_LIMIT", len(demo.theta) - 1)
    big = train_on(demo, "spline")
    assert (big.kind, big.method) == ("spline", "local")
    assert isinstance(big.meta.settings, LocalSettings)
    local = train_on(demo, "local")
    theta = demo.theta[:7] + 1e-3
    np.testing.assert_array_equal(big.evaluate(theta).values, local.evaluate(theta).values)
    # the spline options carry over by name; the local ones keep their defaults
    carried = train_on(demo, "spline", SplineSettings(n_subset=128, stretch_on="curves"))
    assert carried.meta.settings == LocalSettings(n_subset=128, stretch_on="curves")
    from tovforge.surrogate import GPSettings
    with pytest.raises(InputError, match="spline kind takes LocalSettings, not GPSettings"):
        train_on(demo, "spline", GPSettings())


def test_exported_file_rebuilds_the_weights_from_the_training_outputs(model, demo, tmp_path):
    """The file carries the outputs, not the weights; its import solves the cells again (two metric groups here)."""
    path = tmp_path / "local_rebuilt.py"
    export_model(model, path, namespaces=("numpy",))
    mod = import_file(path)
    shipped = {a[0] for a in mod._ARRAYS}
    assert "local_targets" in shipped and not shipped & set(rt.LOCAL_REBUILT)
    for name in rt.LOCAL_REBUILT:  # the same solves on this machine: the same numbers, bit for bit
        np.testing.assert_array_equal(mod._M[name], model.arrays[name], err_msg=name)
    theta = demo.theta[:16] + 1e-3 * (demo.bounds[:, 1] - demo.bounds[:, 0])
    a, b = model.radius(theta, 1.4, return_std=True), mod.radius(theta, 1.4, return_std=True)
    np.testing.assert_array_equal(b.std, a.std)
    np.testing.assert_array_equal(b.trusted, a.trusted)


def test_rebuild_equals_the_fit_and_an_independent_solve(model):
    """local_rebuild gives back the fitted arrays; one cell's weights solve its system (scipy, no shared code)."""
    import scipy.linalg

    m = model.arrays
    got = rt.local_rebuild(np, {k: v for k, v in m.items() if k not in rt.LOCAL_REBUILT})
    for name in rt.LOCAL_REBUILT:
        np.testing.assert_array_equal(got[name], m[name], err_msg=name)
    # cell 0 of group 0: [Phi P; P^T 0] [alpha; c] = [z; 0], P the monomials of (x - centre) / scale
    a, b = int(m["patch_rows"][0]), int(m["patch_rows"][1])
    idx = m["patch_index"][a:b]
    x = m["X"][idx] * m["group_scale"][0]
    cols = slice(int(m["group_columns"][0]), int(m["group_columns"][1]))
    u = (x - m["patch_centre"][0]) / m["patch_scale"][0]
    P = np.prod(u[:, None, :] ** m["local_powers"][None, :, :], axis=-1)
    r = np.linalg.norm(x[:, None, :] - x[None, :, :], axis=-1)
    n, t = P.shape
    A = np.block([[r**5, P], [P.T, np.zeros((t, t))]])
    sol = scipy.linalg.solve(A, np.vstack([m["local_targets"][idx][:, cols], np.zeros((t, cols.stop - cols.start))]))
    np.testing.assert_allclose(m["alpha"][a:b, cols], sol[:n], rtol=1e-6, atol=1e-8 * np.abs(sol[:n]).max())
    np.testing.assert_allclose(m["patch_coef"][0][:, cols], sol[n:], rtol=1e-6, atol=1e-8 * np.abs(sol[n:]).max())


def test_one_row_weights_equal_the_array_weights():
    """One row's partition weights (Python floats, no array call per edge) have the bits of the array code's."""
    rng = np.random.default_rng(0)
    edges, half = [0.0, 0.31, 0.55, 0.8, 1.0], [0.0, 0.04, 0.03, 0.05, 0.0]
    t = np.concatenate([rng.random(5000), [0.27, 0.31, 0.35, 0.55, 0.8, 0.85, 0.0, 1.0]])  # zone edges too
    many = rt.local_weights_1d(np, t, edges, half, True)
    for i, ti in enumerate(t):
        one = rt.local_weights_1d(np, np.array([ti]), edges, half, True)
        for a, b in zip(one, many):
            assert a.dtype == b.dtype and a.shape == (1,)
            np.testing.assert_array_equal(a, b[i : i + 1])


def test_one_row_agrees_with_its_row_of_a_batch(model, demo):
    """One theta gives its row of a batch to rounding (one-row products take other BLAS kernels), blends included."""
    rng = np.random.default_rng(9)
    lo, hi = demo.bounds[:, 0], demo.bounds[:, 1]
    theta = lo + (hi - lo) * rng.random((40, 4))
    batch = model.evaluate(theta, grad=True)
    # rounding of sums of cancelling r^5 terms: relative to each output's size over the batch
    size = np.abs(batch.values).max(axis=0)
    for i in range(len(theta)):
        one = model.evaluate(theta[i][None], grad=True)
        np.testing.assert_allclose(one.values[0], batch.values[i], rtol=1e-12, atol=1e-10 * size.max())
        np.testing.assert_allclose(one.grad[0], batch.grad[i], rtol=1e-9, atol=1e-9 * np.abs(batch.grad).max())
    x = rt.unit_inputs(np, model._model, theta)[0]
    G = rt.local_tables(model._model)["groups"][0]
    w = rt.local_cells(np, x * model.arrays["group_scale"][0], G, False)[0]
    assert np.bincount(w, minlength=len(theta)).max() > 1  # some rows blend two or more cells


def test_one_cell_equals_the_dense_spline(demo):
    """With one cell the partition of unity is the dense r^5 + quadratic interpolant of the spline kind (the same
    warp and stretch; the polynomial in the cell's centred, scaled inputs spans the same space)."""
    dense = train_on(demo, "spline")
    one = train_on(demo, "local", LocalSettings(cells=(1, 1, 1, 1)))
    assert (dense.method, one.method) == ("rbf", "local") and one.meta.fit.cells == ((1, 1, 1, 1),)
    np.testing.assert_array_equal(one.meta.fit.input_scale[0], dense.meta.fit.input_scale)
    rng = np.random.default_rng(4)
    lo, hi = demo.bounds[:, 0], demo.bounds[:, 1]
    theta = lo + (hi - lo) * rng.random((64, 4))
    a, b = dense.evaluate(theta).values, one.evaluate(theta).values
    np.testing.assert_allclose(b, a, rtol=1e-8, atol=1e-9 * np.abs(a).max())
