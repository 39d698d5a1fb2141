"""Two-sided splines (method ``sided``): a jump across a known surface, the band, save/load, export, a real grid."""

from __future__ import annotations

import dataclasses

import warnings

import numpy as np
import pytest
from helpers import import_file
from scipy.stats import qmc
from surrogate_helpers import BOX, synthetic, truth

from tovforge.eos import get_family
from tovforge.export import export_model
from tovforge.grid import parse_spec, run_grid
from tovforge.solve import JumpMargins, SequenceSettings, jump_stars, solve_sequences
from tovforge.surrogate import SplineSettings, Surrogate, load, read_training_data, train_on
from tovforge.surrogate import _runtime as rt
from tovforge.surrogate._kinds import resolve
from tovforge.surrogate import _rbf
from tovforge.surrogate._sided import (FarCurves, applies_sided, base_data, far_curves, far_t_nodes, first_rows, fit_sides,
                                      solved_near)

SETTINGS = SplineSettings(anisotropic=False)  # no GP for the stretch: fast
#: The jump the near side adds to the smooth made-up outputs (surrogate_helpers.truth).
JUMP = {"mass_max_msun": -0.4, "log10_central_pressure_at_mass_max": 0.5, "radius_km": -0.8,
        "log_tidal_deformability": 0.6}


def _surface(theta):
    """The known smooth surface of the discontinuity, s = 0 (s > 0: near side), in the unit box.

    Not a polynomial of degree 2: the margin model would reproduce it exactly (no leave-one-out residual, no band).
    """
    x = (theta - BOX[:, 0]) / (BOX[:, 1] - BOX[:, 0])
    return x[:, 0] + 0.25 * np.sin(3.0 * x[:, 1]) - 0.6


def _jumped(data):
    """``data`` with the near side's outputs moved by :data:`JUMP`."""
    near = _surface(data.theta) > 0
    scalars = {k: v + JUMP.get(k, 0.0) * near for k, v in data.scalars.items()}
    curves = {k: v + JUMP.get(k, 0.0) * near[:, None] for k, v in data.curves.items()}
    return dataclasses.replace(data, scalars=scalars, curves=curves)


def _far(data, near):
    """Made-up transition masses M_t = 0.6 M_max and far-side curves at the t nodes: the smooth truth at their
    masses (NaN on near rows, as :func:`far_curves` leaves them)."""
    t_nodes = far_t_nodes(len(data.u_nodes))
    mmax = data.scalars["mass_max_msun"]
    masses = rt.t_node_masses(np, t_nodes, mmax, 0.6 * mmax)
    curves = truth(data.theta, np.sqrt(1.0 - masses / mmax[:, None]))[1]
    return FarCurves(t_nodes=t_nodes, transition_mass_msun=0.6 * mmax,
                     curves={k: np.where(near[:, None], np.nan, v) for k, v in curves.items()})


def _base_truth(theta):
    """The made-up base family: the truth with the last two parameters at the box's centre (its stars, below
    M_t, depend on the first two alone)."""
    full = np.concatenate([theta[:, :2], np.broadcast_to(BOX[2:].mean(axis=1), (len(theta), 2))], axis=1)
    return truth(full)


def _base(data):
    """Made-up base-family data on the first two parameters of ``data``."""
    scalars, curves = _base_truth(data.theta)
    return dataclasses.replace(data, theta=data.theta[:, :2], bounds=BOX[:2], parameter_names=data.parameter_names[:2],
                               parameter_units=data.parameter_units[:2], scalars=scalars, curves=curves)


def _sided_model(data, one):
    """A two-sided model of ``data`` whose margins are the known surface (s) and a far-side scanned margin."""
    s = _surface(data.theta)
    result = fit_sides(data, SETTINGS, JumpMargins(seidov=s, scanned_msun=np.full(len(s), 50.0)), s > 0,
                       _far(data, s > 0), _base(data))
    return Surrogate(one.meta.replace(method="sided", fit=result.details), result.arrays)


@pytest.fixture(scope="module")
def pair():
    data = _jumped(synthetic(512))
    one = train_on(data, "spline", SETTINGS)
    return data, _sided_model(data, one), one


def _fresh(n, seed):
    x = qmc.Sobol(4, seed=seed).random(int(2 ** np.ceil(np.log2(n))))[:n]
    return BOX[:, 0] + x * (BOX[:, 1] - BOX[:, 0])


def test_two_sides_beat_one_model_across_a_jump(pair):
    data, sided, one = pair
    theta = _fresh(1024, 9)
    scalars, curves = truth(theta)
    near = _surface(theta) > 0
    want = scalars["mass_max_msun"] + JUMP["mass_max_msun"] * near
    err_one = np.abs(one.mass_max(theta).value - want)
    err_two = np.abs(sided.mass_max(theta).value - want)
    assert one.method == "rbf" and sided.method == "sided"
    # one smooth model smears the 0.4 Msun jump over the points around it; two models keep it sharp
    assert np.percentile(err_one, 95) > 0.05
    assert np.percentile(err_two, 95) < 0.1 * np.percentile(err_one, 95)
    radius = curves["radius_km"][:, 4] + JUMP["radius_km"] * near
    u4 = float(data.u_nodes[4])
    mass = want * (1.0 - u4 ** 2)
    err_r = np.abs(sided.radius(theta, mass[:, None]).value[:, 0] - radius)
    assert np.nanpercentile(err_r, 95) < 0.05 * np.nanpercentile(
        np.abs(one.radius(theta, (one.mass_max(theta).value * (1.0 - u4 ** 2))[:, None]).value[:, 0] - radius), 95)


def test_queries_on_the_surface_are_not_trusted(pair):
    _, sided, _ = pair
    rng = np.random.default_rng(3)
    x = rng.random((40, 4))
    x[:, 0] = 0.6 - 0.25 * np.sin(3.0 * x[:, 1])  # on the surface s = 0
    on = BOX[:, 0] + x * (BOX[:, 1] - BOX[:, 0])
    est = sided.mass_max(on, return_std=True)
    assert not est.trusted.any() and np.all(est.std >= rt.BAND_SIGMA)
    assert not sided.radius(on, 1.0, return_std=True).trusted.any()
    # away from it the side is certain: the sub-models' own sigma, small on this smooth made-up data
    far = _fresh(256, 4)
    far = far[np.abs(_surface(far)) > 0.15]
    est = sided.mass_max(far, return_std=True)
    assert np.all(est.std < 0.01) and est.trusted.mean() > 0.9
    near, band = rt.sided_choice(np, sided._model, rt.unit_inputs(np, sided._model, far)[0])
    assert not band.any() and np.array_equal(near, _surface(far) > 0)


def test_save_load_and_export_equal_the_library(pair, tmp_path):
    _, sided, _ = pair
    theta = _fresh(64, 5)
    x1 = (theta[:8, 1] - BOX[1, 0]) / (BOX[1, 1] - BOX[1, 0])
    theta[:8, 0] = BOX[0, 0] + (0.6 - 0.25 * np.sin(3.0 * x1)) * (BOX[0, 1] - BOX[0, 0])  # on the surface
    back = load(sided.save(tmp_path / "m"))
    a, b = sided.evaluate(theta, grad=True, std=True), back.evaluate(theta, grad=True, std=True)
    for x, y in ((a.values, b.values), (a.grad, b.grad), (a.std, b.std)):
        np.testing.assert_array_equal(y, x)
    path = tmp_path / "sided_small.py"
    export_model(sided, path, namespaces=("numpy",))
    mod = import_file(path)
    masses = np.array([1.0, 1.3])
    for name, args in (("mass_max", ()), ("radius", (masses,)), ("tidal_deformability", (masses,))):
        want = getattr(sided, name)(theta, *args, return_grad=True, return_std=True)
        got = getattr(mod, name)(theta, *args, return_grad=True, return_std=True)
        for field in ("value", "grad", "std", "trusted"):
            np.testing.assert_array_equal(getattr(got, field), getattr(want, field), err_msg=f"{name}.{field}")
        for i in (0, 20):  # one theta: the exported file's own path
            one_want = getattr(sided, name)(theta[i], *args, return_std=True)
            one_got = getattr(mod, name)(theta[i], *args, return_std=True)
            np.testing.assert_array_equal(one_got.value, one_want.value)
            np.testing.assert_array_equal(one_got.std, one_want.std)


@pytest.fixture(scope="module")
def transition_grid(tmp_path_factory):
    path = tmp_path_factory.mktemp("sided") / "transition.h5"
    run_grid(parse_spec({"family": "piecewise-polytrope-transition",
                         "design": {"method": "sobol", "points": 256, "seed": 11}}), path, workers=1, progress=False)
    return read_training_data(path)


def test_transition_grid_trains_two_sides_by_default(transition_grid):
    """A transition family's grid gets the two-sided spline from the default kind, and its sides and margins
    reproduce every training row (each side's spline interpolates its rows, the margins pick their side)."""
    data = transition_grid
    assert resolve("spline", data).name == "sided"
    model = train_on(data)
    fit = model.meta.fit
    assert model.kind == "spline" and model.method == "sided" and model.has_std
    assert fit.label_disagreements == 0 and fit.near_rows + fit.far_rows == len(data.theta)
    assert min(fit.near_rows, fit.far_rows) > 60
    # every row a side's spline learned is reproduced (far rows whose stars at the t nodes could not all be
    # solved are left out of the far side's: a transition mass within a few per cent of the lightest star)
    off = np.abs(model.mass_max(data.theta).value - data.scalars["mass_max_msun"]) > 1e-6
    assert fit.far_rows_unsolved <= 0.03 * fit.far_rows and off.sum() <= fit.far_rows_unsolved
    # not a transition family, or too few rows on a side for a fit of its own: one model over both sides
    assert resolve("spline", synthetic(64)).name == "rbf"
    near = solved_near(data, get_family(data.family))
    keep = near & (np.cumsum(near) <= 40)  # 40 near rows (a side needs (d + 1)(d + 2) = 72) and every far row
    assert resolve("spline", data.rows(keep | ~near)).name == "rbf"
    assert applies_sided(data)
    # one model over both sides of a transition family's jump is said loudly; the two-sided one is not
    with pytest.warns(UserWarning, match=r"one rbf model over both sides of the jump"):
        train_on(data.rows(keep | ~near))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        train_on(data)


def test_sides_above_the_dense_limit_learn_their_first_rows(transition_grid, monkeypatch):
    """A side with more rows than one dense spline takes learns the first DENSE_LIMIT of them (so do the margin
    models and the base spline): still two sides, recorded, and every row it learned reproduced."""
    data = transition_grid
    near = solved_near(data, get_family(data.family))
    limit = int(min(near.sum(), (~near).sum())) - 10
    monkeypatch.setattr(_rbf, "DENSE_LIMIT", limit)
    model = train_on(data)
    fit = model.meta.fit
    assert model.method == "sided" and fit.rows_left_out == len(data.theta) - 2 * limit
    assert fit.near_rows == fit.far_rows == limit and model.arrays["base__X"].shape[0] <= limit
    assert model.arrays["seidov__X"].shape[0] <= limit
    # the base spline's rows: the first in the grid's order (not the lowest of a sorted copy)
    base = base_data(data).theta
    assert len(base) > 0.8 * limit and (base[:, None, :] == data.theta[None, :limit, :4]).all(-1).any(-1).all()
    kept = first_rows(near, limit) | first_rows(~near, limit)
    np.testing.assert_array_equal(kept.sum(), 2 * limit)
    off = np.abs(model.mass_max(data.theta[kept]).value - data.scalars["mass_max_msun"][kept]) > 1e-6
    # (the margin models learned fewer rows than the sides: a row may take the other side, M_max of the other)
    side = rt.sided_choice(np, model._model, rt.unit_inputs(np, model._model, data.theta[kept])[0])[0]
    assert (side != near[kept]).mean() < 0.05
    assert (off & (side == near[kept])).sum() <= fit.far_rows_unsolved


def test_margins_that_disagree_with_the_solved_sides_are_reported(pair):
    data = pair[0]
    s = _surface(data.theta)
    near = s > 0
    near[[3, 7]] = ~near[[3, 7]]  # two rows whose solved side the margins do not give
    with pytest.warns(UserWarning, match=r"disagree with the grid's solved first maximum on 2 training rows"):
        result = fit_sides(data, SETTINGS, JumpMargins(seidov=s, scanned_msun=np.full(len(s), 50.0)), near,
                           _far(data, near), _base(data))
    assert result.details.label_disagreements == 2 and result.details.near_rows == int(near.sum())


def _far_thetas(n, seed):
    """Parameters well on the far side of the made-up surface (s < -0.15)."""
    theta = _fresh(4 * n, seed)
    return theta[_surface(theta) < -0.15][:n]


def test_far_rows_interpolate_their_t_nodes_and_the_base_below_the_transition(pair):
    """Above its emulated M_t a far row's curve passes through its node values at the nodes' masses; at and
    below M_t it is the base family's (the made-up base truth, to the base spline's accuracy), for near rows
    too; no answer above M_max."""
    _, sided, _ = pair
    m = sided._model
    theta = np.concatenate([_far_thetas(16, 21), _fresh(64, 23)[_surface(_fresh(64, 23)) > 0.15][:8]])
    y = rt.outputs(np, m, theta)[0]
    it = rt.transition_column(m)
    m_t, m_max = y[:, it], y[:, m.i_mass_max]
    assert np.all(np.isfinite(m_t)) and np.all(m_t < m_max)
    masses = rt.t_node_masses(np, m["t_nodes"], m_max, m_t)
    far = rt._far_mask(np, m, y)
    assert far[:16].all() and not far[16:].any()
    for query in ("radius", "tidal_deformability"):
        o = rt._star_output(m, query)
        got = rt.curve_at_mass(np, m, y[:16], None, None, masses[:16, 1:], query)[0]
        np.testing.assert_allclose(got, rt.inverse(np, o[3], y[:16, o[5] + 1:o[6]]), rtol=1e-12, atol=0)
        assert np.all(np.isnan(rt.curve_at_mass(np, m, y, None, None, m_max[:, None] * 1.001, query)[0]))
    below = np.stack([0.8 * m_t, m_t], axis=1)
    want = _base_truth(theta)
    mb = want[0]["mass_max_msun"]
    radius = sided.radius(theta, below).value
    u = np.sqrt(1.0 - below / mb[:, None])
    exact = truth(np.concatenate([theta[:, :2], np.broadcast_to(BOX[2:].mean(axis=1), (len(theta), 2))], axis=1),
                  u)[1]["radius_km"]
    np.testing.assert_allclose(radius, exact, atol=2e-3)
    # no answer above the emulated M_max, even below an emulated M_t that lies above it (a cusp's M_t and
    # M_max are one star; their two emulations differ by a little)
    y_cusp = y[16:].copy()  # the near rows
    y_cusp[:, it] = m_max[16:] + 0.05
    for dm, want in ((0.01, np.isnan), (-0.01, np.isfinite)):
        assert np.all(want(rt.curve_at_mass(np, m, y_cusp, None, None, m_max[16:, None] + dm, "radius")[0]))
    # the prediction's curves at the u nodes are the curve's values at the u nodes' masses
    pred = sided.predict(theta)
    want = rt.curve_at_mass(np, m, y, None, None, m_max[:, None] * (1.0 - m["u_nodes"] ** 2)[None, :], "radius")[0]
    np.testing.assert_allclose(pred.radius_km, want, rtol=1e-12)


@pytest.mark.parametrize("fraction", [0.8, 1.1, 1.4])
def test_far_row_gradients_match_finite_differences(pair, fraction):
    """d/dtheta of far rows' R and Lambda at a mass below M_t (the base spline's; zero along the transition's
    parameters) and above it (the t spline's: the t of a fixed mass moves with M_max and M_t) against central
    differences."""
    _, sided, _ = pair
    theta = _far_thetas(6, 22)
    m = sided._model
    mass = fraction * rt.outputs(np, m, theta)[0][:, rt.transition_column(m)][:, None]
    for fn in ("radius", "tidal_deformability"):
        e = getattr(sided, fn)(theta, mass, return_grad=True)
        assert np.all(np.isfinite(e.value))
        for i in range(4):
            step = 1e-5 * (BOX[i, 1] - BOX[i, 0])
            tp, tm = theta.copy(), theta.copy()
            tp[:, i] += step
            tm[:, i] -= step
            fd = (getattr(sided, fn)(tp, mass).value - getattr(sided, fn)(tm, mass).value) / (2 * step)
            np.testing.assert_allclose(e.grad[:, 0, i], fd[:, 0], rtol=2e-4, atol=1e-6 * np.max(np.abs(e.value)))
            if fraction < 1.0 and i >= 2:
                assert np.all(e.grad[:, 0, i] == 0.0)


def test_far_curves_solve_every_node_of_light_transition_masses():
    """``far_curves`` of two sound-speed-transition EOS of the family's default box whose transition star is
    lighter than the solver's default branch start (0.3 Msun): every node is solved, at its mass (the nodes'
    masses from the solved M_t and M_max), the first node is the star at the jump and the last the heaviest."""
    fam = get_family("sound-speed-transition")
    theta = np.array([[0.026149, 0.832592, 0.572065, 0.932063, 0.739488, 34.468391, 0.025979, 0.695629],
                      [0.056019, 0.613569, 0.280116, 0.595642, 0.051627, 34.335354, 0.391983, 0.52735]])
    seq = solve_sequences(fam.build(theta), n_stars=0, masses=[1.0])
    mmax = np.asarray(seq.mass_max.mass_msun, float)
    data = dataclasses.replace(synthetic(8), family=fam.name, parameter_names=tuple(p.name for p in fam.parameters),
                               theta=theta, scalars={"mass_max_msun": mmax}, curves={}, regular_shape=None)
    far = far_curves(data, np.ones(2, bool))
    m_t = far.transition_mass_msun
    assert np.all(m_t < 0.3) and np.all(m_t > 0.05)
    for c in far.curves.values():
        assert np.all(np.isfinite(c))
    masses = rt.t_node_masses(np, far.t_nodes, mmax, m_t)
    radius = solve_sequences(fam.build(theta), n_stars=0, masses=masses[:, 1:-1],
                             settings=SequenceSettings(low_mass_msun=0.05)).at_mass.radius_km
    np.testing.assert_allclose(far.curves["radius_km"][:, 1:-1], radius, rtol=1e-9)
    np.testing.assert_allclose(far.curves["radius_km"][:, 0], jump_stars(fam.build(theta)).radius_km, rtol=1e-12)
    np.testing.assert_allclose(far.curves["radius_km"][:, -1], seq.mass_max.radius_km, rtol=1e-7)
