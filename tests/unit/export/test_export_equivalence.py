"""Exported evaluators against the in-library models: values, sigma, gradients, shapes and the domain guard."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import KINDS, box_points

from tovforge.export._codegen import max_rel_diff

QUERIES = ("radius", "tidal_deformability", "moment_of_inertia", "k2")
MASSES = np.array([1.0, 1.25, 1.4, 1.8, 2.1])
RTOL = 1e-10  # the bound; both sides run the same runtime, so only BLAS rounding differs


def _close(got, want, what):
    d = max_rel_diff(got, want)
    assert d <= RTOL, f"{what}: relative difference {d:.2e}"


@pytest.mark.parametrize("kind", KINDS)
def test_every_query_equals_the_library(kind, models, exported):
    model, (mod, _) = models[kind], exported[kind]
    theta = box_points(model, 200, seed=11)
    theta[:3] = model.bounds[:, 0] - 0.05  # outside: NaN on both sides
    gp = model.kind == "gp"
    for got, want, what in [
        (mod.mass_max(theta, return_grad=True, return_std=True), model.mass_max(theta, True, True), "mass_max"),
        *[(getattr(mod, q)(theta, MASSES, return_grad=True, return_std=True),
           getattr(model, q)(theta, MASSES, return_grad=True, return_std=True), q) for q in QUERIES],
        (mod.curve(theta, n=64), model.curve(theta, n=64), "curve"),
    ]:
        for i, (g, w) in enumerate(zip(got, want)):
            _close(g, w, f"{what}[{i}]")
    p, ref = mod.predict(theta), model.predict(theta, return_std=gp)
    for field in ref.__dataclass_fields__:
        if field != "std":
            _close(p[field], getattr(ref, field), field)
    if gp:
        assert p["std"].keys() == ref.std.keys()
        for k, v in ref.std.items():
            assert np.all(v[3:] > 0), k  # a real sigma, not zeros
            _close(p["std"][k], v, f"std {k}")
    else:
        assert p["std"] is None
    assert set(mod.OUTPUTS) == set(p) - {"std"}


@pytest.mark.parametrize("kind", KINDS)
def test_curve_equals_the_queries_at_its_masses(kind, models, exported):
    """curve() evaluates the node spline with one weight matrix for all rows; radius() and
    tidal_deformability() at the same masses go through u per row: the same numbers to rounding."""
    mod = exported[kind][0]
    theta = box_points(models[kind], 20, seed=13, inner=0.05)
    m, r, lam = mod.curve(theta, n=33)
    assert np.all(np.diff(m, axis=1) > 0)  # increasing masses, up to M_max
    np.testing.assert_allclose(m[:, -1], mod.mass_max(theta), rtol=1e-15)
    assert np.isfinite(r).all() and np.isfinite(lam).all()  # the lowest point too (u exactly u_max)
    # the same rows in one call (a lone row's M_max can differ in the last bits); from the mass back to
    # u = sqrt(1 - M / M_max) the lowest point can land a rounding error beyond u_max (NaN): leave it out
    np.testing.assert_allclose(r[:, 1:], mod.radius(theta, m[:, 1:]), rtol=1e-12)
    np.testing.assert_allclose(lam[:, 1:], mod.tidal_deformability(theta, m[:, 1:]), rtol=1e-11)


@pytest.mark.parametrize("kind", KINDS)
def test_one_theta_equals_a_row_of_many(kind, models, exported):
    model, (mod, _) = models[kind], exported[kind]
    theta = box_points(model, 5, seed=12, inner=0.1)
    for i in range(len(theta)):
        assert mod.mass_max(theta[i]).shape == ()
        assert float(mod.mass_max(theta[i])) == pytest.approx(float(mod.mass_max(theta)[i]), rel=1e-12)
        r1, g1 = mod.radius(theta[i], 1.3, return_grad=True)
        assert r1.shape == () and g1.shape == (4,)
        rn, gn = mod.radius(theta, 1.3, return_grad=True)
        assert float(r1) == pytest.approx(float(rn[i]), rel=1e-12, nan_ok=True)
        _close(g1, gn[i], "gradient of one theta")  # BLAS sums a lone row in another order


@pytest.mark.parametrize(
    "theta_shape, mass, shape",
    [((4,), 1.4, ()), ((4,), [1.2, 1.4], (2,)), ((6, 4), 1.4, (6,)), ((6, 4), [1.2, 1.4, 1.6], (6, 3)),
     ((6, 4), np.full((6, 1), 1.3), (6, 1)), ((6, 4), np.full((1, 2), 1.3), (6, 2))],
)
def test_result_shapes(theta_shape, mass, shape, models, exported):
    mod = exported["gp"][0]
    theta = np.broadcast_to(box_points(models["gp"], 1, seed=1, inner=0.2)[0], theta_shape)
    v, g, s = mod.tidal_deformability(theta, mass, return_grad=True, return_std=True)
    assert v.shape == shape and s.shape == shape and g.shape == shape + (4,)
    m, c, L = mod.curve(theta, n=7)
    assert m.shape == c.shape == L.shape == theta_shape[:-1] + (7,)
    assert mod.in_domain(theta).shape == theta_shape[:-1]


def test_one_mass_per_theta_is_the_diagonal_of_the_outer_product(models, exported):
    mod = exported["gp"][0]
    theta = box_points(models["gp"], 6, seed=2, inner=0.1)
    masses = np.linspace(1.1, 1.6, 6)
    np.testing.assert_array_equal(mod.radius(theta, masses[:, None])[:, 0], np.diag(mod.radius(theta, masses)))


@pytest.mark.parametrize("theta, mass, match", [
    (np.zeros(3), 1.4, r"theta must have shape \(4,\) or \(n, 4\)"),
    (np.zeros((2, 2, 4)), 1.4, r"theta must have shape"),
    (np.zeros((3, 4)), np.zeros((2, 2)), r"mass must be a scalar, shape \(q,\) .* \(n = 3\); got shape \(2, 2\)"),
])
def test_bad_shapes_are_named(theta, mass, match, exported):
    with pytest.raises(ValueError, match=match):
        exported["rbf"][0].radius(theta, mass)


@pytest.mark.parametrize("kind", KINDS)
def test_outside_the_box_and_off_the_branch_give_nan_or_raise(kind, models, exported):
    model, (mod, _) = models[kind], exported[kind]
    lo, hi = model.bounds[:, 0], model.bounds[:, 1]
    inside = box_points(model, 4, seed=3, inner=0.1)
    outside = inside.copy()
    outside[:, 1] = hi[1] + 0.01 * (hi[1] - lo[1])
    assert mod.in_domain(inside).all() and not mod.in_domain(outside).any()
    assert not bool(mod.in_domain(np.array([np.nan, *inside[0, 1:]])))
    assert np.isnan(mod.mass_max(outside)).all()
    assert np.isnan(mod.radius(outside, 1.2)).all()
    assert np.isnan(mod.curve(outside, n=5)[1]).all()
    assert mod.predict(outside)["out_of_box"].all() and np.isnan(mod.predict(outside)["radius_km"]).all()
    with pytest.raises(ValueError, match=rf"theta row 0: the 'gamma1' parameter must be in \[{lo[1]}, {hi[1]}\]"):
        mod.radius(outside, 1.2, strict=True)
    for fn in (mod.mass_max, mod.predict, lambda t, **kw: mod.curve(t, n=5, **kw)):
        with pytest.raises(ValueError, match="trained box"):
            fn(outside, strict=True)
    mm = mod.mass_max(inside)
    above = mm[:, None] * (1.0 + 1e-9)
    lowest = mm[:, None] * (1.0 - 0.85**2)
    for q in QUERIES:
        fn = getattr(mod, q)
        assert np.isnan(fn(inside, above)).all(), q
        assert np.isnan(fn(inside, 0.99 * lowest)).all(), q
        assert np.isfinite(fn(inside, mm[:, None] * (1.0 - 1e-9))).all(), q  # just below M_max is defined
        assert np.isfinite(fn(inside, 1.01 * lowest)).all(), q
        with pytest.raises(ValueError, match=r"theta row 0: mass .* outside the emulated stable branch"):
            fn(inside, above, strict=True)
    finite = mod.radius(inside, mm[:, None] * 0.8, strict=True)  # strict passes on valid queries
    assert np.isfinite(finite).all()


def _central_differences(fn, theta, step):
    """Fourth-order central differences: (8 [f(x+h) - f(x-h)] - [f(x+2h) - f(x-2h)]) / 12h."""
    out = []
    for i in range(theta.shape[1]):
        e = np.zeros(theta.shape[1])
        e[i] = step[i]
        d1 = fn(theta + e) - fn(theta - e)
        d2 = fn(theta + 2.0 * e) - fn(theta - 2.0 * e)
        out.append((8.0 * d1 - d2) / (12.0 * step[i]))
    return np.stack(out, axis=-1)


@pytest.mark.parametrize("kind", KINDS)
def test_gradients_agree_with_central_differences(kind, models, exported):
    model, (mod, _) = models[kind], exported[kind]
    theta = box_points(model, 12, seed=4, inner=0.05)
    step = 1e-4 * (model.bounds[:, 1] - model.bounds[:, 0])
    # truncation ~ step^4 f^(5) (fourth-order stencil) and rounding ~ eps_model f / step, where eps_model
    # is the model's rounding noise (1e-13..1e-9 of f: the kernel weights cancel strongly); at 1e-4 of
    # the box both stay below 1e-6 of the gradient scale.  (With second-order differences no step
    # served every model: the anisotropic RBF's Lambda, gamma3 component, gave 3.9e-7 at 1e-4 but
    # 2.1e-6 at 1e-5 from rounding, while the GP's log_p1 components gave 1.1e-6 at 1e-4 from truncation.)
    mm = mod.mass_max(theta)
    masses = mm[:, None] * np.array([0.4, 0.7, 0.95])  # on the branch; a step moves M_max by ~2e-4 only
    checks = [("mass_max", lambda t: mod.mass_max(t), mod.mass_max(theta, return_grad=True)[1])]
    for q in QUERIES:
        fn = getattr(mod, q)
        checks.append((q, lambda t, fn=fn: fn(t, masses), fn(theta, masses, return_grad=True)[1]))
    for name, fn, analytic in checks:
        fd = _central_differences(fn, theta, step)
        assert np.isfinite(analytic).all(), name
        scale = np.max(np.abs(fd), axis=tuple(range(fd.ndim - 1)))  # per parameter
        err = np.max(np.abs(analytic - fd), axis=tuple(range(fd.ndim - 1))) / scale
        assert np.all(err < 1e-6), f"{name}: relative gradient errors {err}"


def test_numpy_1_shim_gives_the_same_numbers(models, exported, monkeypatch):
    """The stand-in namespace used under NumPy 1.x (no concat, permute_dims, astype) changes nothing."""
    mod = exported["gp"][0]
    theta = box_points(models["gp"], 20, seed=5)
    want = mod.radius(theta, MASSES, return_grad=True, return_std=True)
    monkeypatch.setattr(mod, "_NUMPY", mod._NumPy1())
    got = mod.radius(theta, MASSES, return_grad=True, return_std=True)
    for g, w in zip(got, want):
        np.testing.assert_array_equal(g, w)


@pytest.mark.parametrize("kind", ["gp", "gp-shared", "rbf"])
def test_queries_that_skip_kernel_groups_give_the_same_bits(kind, models):
    """A query evaluates only the GP kernel groups (RBF output blocks) it reads; those outputs must not
    change at all."""
    from tovforge.surrogate import _runtime as rt

    m = models[kind]._m
    theta = box_points(models[kind], 40, seed=6)
    full = rt.outputs(np, m, theta, True)
    full_sd = rt.output_std(np, m, theta)
    for quantities in ((), ("radius_km",), ("moment_of_inertia",), ("k2",)):
        cols = rt.needed_columns(m, quantities)
        sub = rt.outputs(np, m, theta, True, cols)
        sub_sd = rt.output_std(np, m, theta, cols)
        for a, b in cols:
            np.testing.assert_array_equal(sub[0][:, a:b], full[0][:, a:b])
            np.testing.assert_array_equal(sub[2][:, a:b], full[2][:, a:b])
            np.testing.assert_array_equal(sub_sd[:, a:b], full_sd[:, a:b])
        used = np.zeros(full[0].shape[1], bool)
        for a, b in cols:
            used[a:b] = True
        assert np.isnan(sub[0][:, ~used]).any(axis=0).sum() > 0  # skipped groups are NaN, never stale numbers
        if models[kind].kind == "gp":
            assert np.isnan(sub_sd[:, ~used]).any(axis=0).sum() > 0
