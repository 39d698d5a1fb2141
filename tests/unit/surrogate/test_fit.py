"""Surrogate fits: interpolation, an analytic function, save/load."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import qmc

from surrogate_helpers import BOX, synthetic, truth
from tovforge import surrogate
from tovforge.errors import InputError
from tovforge.surrogate import GPSettings, train_on
from tovforge.surrogate import _runtime as rt
from tovforge.surrogate._data import emulated_outputs

SCALARS = tuple(q.model_name for q in emulated_outputs()[0])
CURVES = tuple(q.model_name for q in emulated_outputs()[1])


def _all_outputs(model, theta):
    return model.evaluate(theta).values


def _truth_matrix(theta):
    s, c = truth(theta)
    return np.hstack([s[k][:, None] for k in SCALARS] + [c[k] for k in CURVES])


def test_output_order_is_the_registry_order_with_mass_max_last_among_the_scalars():
    """Today's column order: log10 p_c(M_max), max c_s^2, M_max (next to the radius nodes), then R, ln Lambda, ln I."""
    assert SCALARS == ("log10_central_pressure_at_mass_max", "max_sound_speed_sq", "mass_max_msun")
    assert CURVES == ("radius_km", "log_tidal_deformability", "log_moment_of_inertia")


@pytest.mark.parametrize("shape", [None, (5, 4, 4, 4)])
def test_spline_reproduces_its_training_points(shape):
    """RBF (scattered) and tensor-product splines (regular) interpolate their data."""
    data = synthetic(300, regular_shape=shape)
    model = train_on(data, "spline")
    assert model.kind == "spline" and model.method == ("tensor" if shape else "rbf")
    np.testing.assert_allclose(_all_outputs(model, data.theta), _truth_matrix(data.theta), rtol=1e-8, atol=1e-8)


def test_gp_reproduces_a_smooth_function_on_held_out_points():
    """A GP on 256 Sobol points reproduces the analytic outputs at 200 other points to 1e-3 relative
    (the outputs are smooth in the parameters themselves, so without the input warp)."""
    settings = GPSettings(n_subset=128, n_restarts=0, curve_groups=2, n_jobs=1, warp_inputs=False)
    model = train_on(synthetic(256), "gp", settings)
    test = qmc.scale(qmc.LatinHypercube(4, seed=7).random(200), BOX[:, 0], BOX[:, 1])
    np.testing.assert_allclose(_all_outputs(model, test), _truth_matrix(test), rtol=1e-3)


def _log_scale(theta):
    """Parameters whose gammas are replaced by ln(gamma - 1), mapped affinely back onto the box."""
    t = np.array(theta, float)
    lo, hi = BOX[1:, 0], BOX[1:, 1]
    t[:, 1:] = lo + (hi - lo) * (np.log(t[:, 1:] - 1.0) - np.log(lo - 1.0)) / (np.log(hi - 1.0) - np.log(lo - 1.0))
    return t


def test_gp_inputs_are_warped_to_ln_gamma_minus_one():
    """The piecewise polytrope's gammas enter the GP as ln(gamma - 1): outputs smooth in those are learnt
    to 5e-3 relative and at least ten times better than without the warp; the box edges map to 0 and 1.
    (5e-3, not the 1e-3 of the unwarped test: the Sobol design is uniform in gamma, so in ln(gamma - 1) it is
    up to 6 times sparser at the low end of gamma2 and gamma3; measured 2.0e-3 with, 0.11 without the warp.)"""
    import dataclasses

    from surrogate_helpers import truth

    base = synthetic(256)
    s, c = truth(_log_scale(base.theta))
    data = dataclasses.replace(base, scalars=s, curves=c)
    test = qmc.scale(qmc.LatinHypercube(4, seed=7).random(200), BOX[:, 0], BOX[:, 1])
    s, c = truth(_log_scale(test))
    want = np.hstack([s[k][:, None] for k in SCALARS] + [c[k] for k in CURVES])
    errors = {}
    for warp in (True, False):
        settings = GPSettings(n_subset=128, n_restarts=0, curve_groups=2, n_jobs=1, warp_inputs=warp)
        model = train_on(data, "gp", settings)
        errors[warp] = np.max(np.abs(_all_outputs(model, test) / want - 1.0))
        if warp:
            assert model.meta.fit.input_warp == {f"gamma{i}": f"ln(gamma{i} - 1)" for i in (1, 2, 3)}
            x, inside = rt.unit_inputs(np, model.arrays, np.vstack([BOX[:, 0], BOX[:, 1], test[:3]]))
            np.testing.assert_array_equal(x[0], 0.0)
            np.testing.assert_array_equal(x[1], 1.0)
            np.testing.assert_allclose(x[2:, 1:], (np.log(test[:3, 1:] - 1.0) - np.log(BOX[1:, 0] - 1.0))
                                       / (np.log(BOX[1:, 1] - 1.0) - np.log(BOX[1:, 0] - 1.0)), rtol=1e-14)
            assert inside.all() and not model.in_domain(BOX[:, 1] + [0, 0.01, 0, 0])
        else:
            assert "warp_log" not in model.arrays
    assert errors[True] < 5e-3 and errors[False] > 10.0 * errors[True], errors


def test_queries_go_through_u_and_the_maximum():
    """radius(theta, M) is the node curve at u = sqrt(1 - M / M_max); NaN above M_max and outside the box."""
    data = synthetic(300)
    model = train_on(data, "spline")
    theta = data.theta[:3]
    mmax = model.mass_max(theta).value
    masses = np.array([1.0, 1.2])
    r = model.radius(theta, masses).value
    u = np.sqrt(1.0 - masses[None, :] / mmax[:, None])
    expect = 11.0 + 2.0 * ((theta[:, :1] - 34.0)) + 1.5 * u**2 + 0.3 * np.sin(3.0 * u + (theta[:, 1:2] - 2.0) / 2.0)
    np.testing.assert_allclose(r, expect, rtol=1e-5)
    assert np.all(np.isnan(model.radius(theta, mmax.max() + 0.01).value))
    outside = theta[0].copy()
    outside[1] = 4.5
    assert np.isnan(model.mass_max(outside).value) and not model.in_domain(outside)
    assert model.predict(outside).out_of_box


@pytest.mark.parametrize("kind", ["gp", "spline"])
def test_save_then_load_gives_identical_predictions(tmp_path, kind):
    settings = GPSettings(n_subset=64, n_restarts=0, curve_groups=1, n_jobs=1)
    model = train_on(synthetic(128), kind, settings if kind == "gp" else None)
    model.save(tmp_path / "m")
    again = surrogate.load(tmp_path / "m")
    theta = qmc.scale(qmc.Sobol(4, seed=3).random(32), BOX[:, 0], BOX[:, 1])
    masses = np.array([1.1, 1.7])
    assert again.meta == model.meta  # typed metadata survives JSON
    for fn in ("radius", "tidal_deformability", "moment_of_inertia", "k2"):
        a, b = getattr(model, fn)(theta, masses, True, True), getattr(again, fn)(theta, masses, True, True)
        for field in ("value", "grad", "std"):
            np.testing.assert_array_equal(getattr(a, field), getattr(b, field))
    a, b = model.predict(theta, return_std=True), again.predict(theta, return_std=True)
    np.testing.assert_array_equal(a.radius_km, b.radius_km)
    for k in a.std:
        np.testing.assert_array_equal(a.std[k], b.std[k])


def test_a_save_that_fails_halfway_leaves_the_old_model_loadable(tmp_path, monkeypatch):
    """Issue 15: save wrote arrays.npz in place, then model.json; a failed second write left neither model
    loadable.  Now a new folder is written whole and renamed: an injected failure while writing model.json
    leaves the old model as it was, and no temporary folder behind."""
    import json
    from pathlib import Path

    from tovforge.errors import OutputExists

    old = train_on(synthetic(64, seed=1), "spline")
    new = train_on(synthetic(64, seed=2), "spline")
    folder = tmp_path / "m"
    old.save(folder)
    before = {p.name: p.read_bytes() for p in folder.iterdir()}
    with pytest.raises(OutputExists, match="pass overwrite=True"):
        new.save(folder)
    real = Path.write_text

    def disk_full(self, *args, **kwargs):
        if self.name == "model.json":
            raise OSError(28, "No space left on device")
        return real(self, *args, **kwargs)

    monkeypatch.setattr(Path, "write_text", disk_full)
    with pytest.raises(OSError, match="No space left"):
        new.save(folder, overwrite=True)
    monkeypatch.undo()
    assert {p.name: p.read_bytes() for p in folder.iterdir()} == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["m"]
    theta = np.mean(BOX, axis=1)
    assert surrogate.load(folder).mass_max(theta).value == old.mass_max(theta).value
    new.save(folder, overwrite=True)
    assert surrogate.load(folder).mass_max(theta).value == new.mass_max(theta).value
    assert json.loads((folder / "model.json").read_text())["arrays_sha256"] == new.meta.arrays_sha256


def test_gradients_match_finite_differences():
    """Analytic d/dtheta against central differences (step 1e-4 of the box: the GP weights are
    large, so smaller steps are dominated by rounding)."""
    model = train_on(synthetic(200), "gp", GPSettings(n_subset=64, n_restarts=0, curve_groups=1, n_jobs=1))
    theta = np.array([[34.4, 3.1, 2.2, 3.0]])
    for fn in ("radius", "tidal_deformability", "k2"):
        e = getattr(model, fn)(theta, [1.3], return_grad=True)
        val, grad = e.value, e.grad
        for i in range(4):
            step = 1e-4 * (BOX[i, 1] - BOX[i, 0])
            tp, tm = theta.copy(), theta.copy()
            tp[0, i] += step
            tm[0, i] -= step
            fd = (getattr(model, fn)(tp, [1.3]).value - getattr(model, fn)(tm, [1.3]).value) / (2 * step)
            assert grad[0, 0, i] == pytest.approx(fd[0, 0], rel=1e-4, abs=1e-7 * abs(val[0, 0]))
    g = model.mass_max(theta, return_grad=True).grad
    step = 1e-4 * (BOX[1, 1] - BOX[1, 0])
    fd = (model.mass_max(theta + [0, step, 0, 0]).value - model.mass_max(theta - [0, step, 0, 0]).value) / (2 * step)
    assert g.shape == (1, 4) and g[0, 1] == pytest.approx(fd[0], rel=1e-4)


def test_shared_curve_kernels_serve_every_curve_block_once():
    """With share_curve_kernels, block k of every curve has the hyperparameters of radius block k,
    predictions equal evaluating each group's (equal) kernel separately, and the fit stays accurate."""
    settings = GPSettings(n_subset=128, n_restarts=0, curve_groups=2, n_jobs=1, share_curve_kernels=True,
                          warp_inputs=False)  # the test function is smooth in the parameters themselves
    model = train_on(synthetic(256), "gp", settings)
    m = model.arrays
    bounds, kernel_of, slices = m["group_bounds"], m["group_kernel"], m["curve_slices"]
    assert model.meta.fit.n_kernels == len(set(kernel_of.tolist())) == 2 + 2
    for g in range(len(kernel_of)):
        np.testing.assert_array_equal(m["length"][g], m["length"][kernel_of[g]])
        if bounds[g] >= slices[0][1]:  # a Lambda or I block: shares a radius block's kernel
            assert bounds[kernel_of[g] + 1] <= slices[0][1]
    theta = qmc.scale(qmc.LatinHypercube(4, seed=8).random(100), BOX[:, 0], BOX[:, 1])
    # every group evaluates its own kernel
    separate = surrogate.Surrogate(model.meta, {k: v for k, v in m.items() if k != "group_kernel"})
    a, b = model.evaluate(theta, std=True), separate.evaluate(theta, std=True)
    np.testing.assert_allclose(a.values, b.values, rtol=1e-12)
    np.testing.assert_allclose(a.std, b.std, rtol=1e-12)
    np.testing.assert_allclose(_all_outputs(model, theta), _truth_matrix(theta), rtol=1e-3)


@pytest.mark.parametrize("kind", ["gp", "spline"])
def test_predict_at_masses_equals_the_single_queries(kind):
    """One evaluation for everything gives the same numbers as predict() and each query at masses."""
    settings = GPSettings(n_subset=64, n_restarts=0, curve_groups=2, n_jobs=1)
    model = train_on(synthetic(128), kind, settings if kind == "gp" else None)
    theta = qmc.scale(qmc.Sobol(4, seed=5).random(16), BOX[:, 0], BOX[:, 1])
    theta[0, 2] = BOX[2, 1] + 0.1  # outside: NaN everywhere
    masses = [1.0, 1.5, 2.2]
    at = model.predict_at_masses(theta, masses, return_std=True)
    ref = model.predict(theta, return_std=True)
    np.testing.assert_array_equal(at.prediction.radius_km, ref.radius_km)
    np.testing.assert_array_equal(at.prediction.mass_max_msun, ref.mass_max_msun)
    for field, query in [("radius_km", "radius"), ("tidal_deformability", "tidal_deformability"),
                         ("moment_of_inertia_1e45_g_cm2", "moment_of_inertia"), ("k2", "k2")]:
        want = getattr(model, query)(theta, masses, return_std=True)
        np.testing.assert_array_equal(getattr(at, field), want.value)
        np.testing.assert_array_equal(at.std[field], want.std)
        assert np.isnan(getattr(at, field)[0]).all()
        assert np.isfinite(getattr(at, field)[1:, 0]).any()
        # a sigma where the model has one; NaN (no error estimate, never a false zero) for splines
        assert (np.all(want.std[1:][np.isfinite(want.value[1:])] > 0) if model.has_std
                else np.isnan(want.std).all())
    with pytest.raises(InputError, match="mass must be a scalar"):
        model.predict_at_masses(theta, [[1.0, 1.2], [1.1, 1.3]])


def test_leave_one_out_sigma_at_a_training_point_equals_sigma_without_it():
    """gp_local_std(skip_nearest=1) at training points, used to calibrate sigma, is the sigma of the
    same model with that point removed."""
    model = train_on(synthetic(96), "gp", GPSettings(n_subset=64, n_restarts=0, curve_groups=1, n_jobs=1))
    m = model.arrays
    for i in (0, 17, 95):
        without = {**m, "X": np.delete(m["X"], i, axis=0)}
        x = m["X"][i:i + 1]
        np.testing.assert_allclose(rt.gp_local_std(np, m, x, skip_nearest=1), rt.gp_local_std(np, without, x),
                                   rtol=1e-12)
        assert np.all(rt.gp_local_std(np, m, x) < rt.gp_local_std(np, m, x, skip_nearest=1))  # its own point helps


def test_a_degenerate_fit_is_reported_loudly():
    """Outputs that are pure noise drive the length scales to their lower bound: training warns, the model
    records it, and a smooth function gives no such warning."""
    import dataclasses
    import warnings

    data = synthetic(64)
    rng = np.random.default_rng(0)
    noisy = dataclasses.replace(data, scalars={k: rng.normal(size=len(v)) for k, v in data.scalars.items()})
    settings = GPSettings(n_subset=64, n_restarts=0, curve_groups=1, n_jobs=1, warp_inputs=False)
    with pytest.warns(UserWarning, match=r"GP kernel \d: neighbouring training points are nearly uncorrelated"):
        model = train_on(noisy, "gp", settings)
    assert model.meta.fit.degenerate_kernels
    with warnings.catch_warnings():
        warnings.simplefilter("error", UserWarning)
        smooth = train_on(data, "gp", settings)
    assert smooth.meta.fit.degenerate_kernels == ()


def test_spline_stretch_follows_the_length_scales_and_falls_back_when_degenerate():
    """The RBF's input stretch is l_min / l_i (>= 0.05) from one GP; with noise for outputs that GP is
    degenerate and the spline keeps the unstretched box, with a warning."""
    import dataclasses

    from tovforge.surrogate import SplineSettings
    from tovforge.surrogate._rbf import MIN_STRETCH

    data = synthetic(128)
    model = train_on(data, "spline", SplineSettings(warp_inputs=False))
    info = model.meta.fit
    length = np.array(info.anisotropy_length_scales)
    np.testing.assert_allclose(model.arrays["input_scale"], np.maximum(length.min() / length, MIN_STRETCH))
    assert model.arrays["input_scale"].max() == 1.0 and model.arrays["input_scale"].min() < 1.0
    rng = np.random.default_rng(1)
    noise = dataclasses.replace(data, curves={k: rng.normal(size=v.shape) for k, v in data.curves.items()})
    with pytest.warns(UserWarning, match="input stretch came out degenerate"):
        flat = train_on(noise, "spline", SplineSettings(warp_inputs=False))
    np.testing.assert_array_equal(flat.arrays["input_scale"], 1.0)


def _posterior_sd_by_solve(x, P, length, amp2, noise):
    """The posterior sd of a Matern-5/2 GP on the points P at x, written out from the textbook formula
    (Rasmussen & Williams 2006, GPML Eq. 2.26) with a linear solve: the reference of local_sd."""
    def k(a, b):
        r = np.sqrt(np.sum(((a[:, None, :] - b[None, :, :]) / length) ** 2, axis=-1))
        return amp2 * (1.0 + np.sqrt(5.0) * r + 5.0 / 3.0 * r * r) * np.exp(-np.sqrt(5.0) * r)

    K = k(P, P) + (noise + 1e-10 * amp2) * np.eye(len(P))
    kv = k(x[None, :], P)[0]
    return np.sqrt(max(amp2 - kv @ np.linalg.solve(K, kv), 0.0))


@pytest.mark.parametrize("skip", [0, 1])
def test_local_sd_equals_the_posterior_variance_by_a_solve(skip, monkeypatch):
    """local_sd takes the variance as the last pivot of a Cholesky factorisation of the joint matrix (and
    falls back to a solve if that fails): both equal the textbook posterior variance on the same points."""
    rng = np.random.default_rng(3)
    X = rng.random((200, 3))
    length, amp2, noise = np.array([[0.3, 0.5, 0.8]]), np.array([1.7]), np.array([1e-6])
    k = {"s": np.sqrt(5.0) / length, "amp2": amp2.reshape(-1, 1, 1),
         "jitter": (noise + 1e-10 * amp2).reshape(-1, 1, 1, 1)}
    x = np.vstack([rng.random((4, 3)), X[:2]])
    K = 24
    d2 = np.sum(((x[:, None, :] - X[None, :, :]) / length[0]) ** 2, axis=-1)
    nn = np.argsort(d2, axis=-1)[:, :K + skip][None]
    got = rt.local_sd(np, x, X, nn, k, skip)[0]
    want = [_posterior_sd_by_solve(x[i], X[nn[0, i, skip:]], length[0], amp2[0], noise[0]) for i in range(len(x))]
    np.testing.assert_allclose(got, want, rtol=1e-6, atol=1e-7)

    def fail(a):
        raise np.linalg.LinAlgError("not positive definite")

    monkeypatch.setattr(np.linalg, "cholesky", fail)
    np.testing.assert_allclose(rt.local_sd(np, x, X, nn, k, skip)[0], want, rtol=1e-6, atol=1e-7)


def test_gp_records_its_sigma_neighbours_and_older_models_keep_theirs():
    """A new GP records how many neighbours its sigma conditions on (its scale was calibrated with that
    number); a model without the record (trained before) keeps the 48 it was calibrated with."""
    model = train_on(synthetic(96), "gp", GPSettings(n_subset=64, n_restarts=0, curve_groups=1, n_jobs=1))
    m = model.arrays
    assert rt.gp_neighbours(m) == rt.GP_NEIGHBOURS == int(m["gp_neighbours"])
    older = {key: v for key, v in m.items() if key != "gp_neighbours"}
    assert rt.gp_neighbours(older) == rt.GP_NEIGHBOURS_BEFORE == 48
    x = np.random.default_rng(1).random((5, m["X"].shape[1]))
    assert not np.allclose(rt.gp_local_std(np, m, x), rt.gp_local_std(np, older, x))
    np.testing.assert_array_equal(rt.gp_local_std(np, older, x), rt.gp_local_std(np, m, x, n_neighbours=48))


def test_polyharmonic_rows_by_one_product_equal_the_difference_form():
    """r^5 rows from the augmented product [-2x, 1, |x|^2] [X^T; |X|^2; 1] (NumPy's fast path) equal r^5 from
    the explicit differences, also at a query on top of a training point (r^5 = 0 there, to rounding)."""
    rng = np.random.default_rng(5)
    X = rng.random((300, 4))
    x = np.vstack([rng.random((7, 4)), X[10:11]])
    XT, X2 = np.ascontiguousarray(X.T), np.sum(X * X, axis=-1)[None, :]
    aug = np.concatenate([XT, X2, np.ones_like(X2)])
    fast = rt.polyharmonic_rows(np, x, XT, X2, False, aug)[0]
    slow = rt.polyharmonic_rows(np, x, XT, X2, False)[0]
    exact = np.sum((x[:, None, :] - X[None, :, :]) ** 2, axis=-1) ** 2.5
    np.testing.assert_allclose(fast, exact, rtol=1e-12, atol=1e-30)
    np.testing.assert_allclose(slow, exact, rtol=1e-12, atol=1e-30)
    assert abs(fast[-1, 10]) < 1e-35
