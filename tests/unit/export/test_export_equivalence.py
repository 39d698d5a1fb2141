"""Exported evaluators against the in-library models: values, sigma, gradients, shapes and the domain guard."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import KINDS, box_points

from tovforge.export._verify import compare, flatten, max_rel_diff, query_calls

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
    for name, args, kw in query_calls(model.star_queries, MASSES):
        got, want = flatten(getattr(mod, name)(theta, *args, **kw)), flatten(getattr(model, name)(theta, *args, **kw))
        assert got.keys() == want.keys(), name
        assert compare(got, want) <= RTOL, name
    p = mod.predict(theta, return_std=True)
    if model.has_std:
        for k, v in p.std.items():
            assert np.all(v[3:] > 0), k  # a real sigma, not zeros
    else:
        assert all(np.isnan(v).all() for v in p.std.values())  # no error estimate: NaN, never a false zero
    assert set(mod.OUTPUTS) == {f for f in p.__dataclass_fields__ if f not in ("std", "trusted")}


@pytest.mark.parametrize("kind", KINDS)
def test_curve_equals_the_queries_at_its_masses(kind, models, exported):
    """curve() evaluates the node spline with one weight matrix for all rows; radius() and
    tidal_deformability() at the same masses go through u per row: the same numbers to rounding."""
    mod = exported[kind][0]
    theta = box_points(models[kind], 20, seed=13, inner=0.05)
    c = mod.curve(theta, n=33)
    m, r, lam = c.masses_msun, c.radius_km, c.tidal_deformability
    assert np.all(np.diff(m, axis=1) > 0)  # increasing masses, up to M_max
    np.testing.assert_allclose(m[:, -1], mod.mass_max(theta).value, rtol=1e-15)
    assert np.isfinite(r).all() and np.isfinite(lam).all()  # the lowest point too (u exactly u_max)
    # the same rows in one call (a lone row's M_max can differ in the last bits); from the mass back to
    # u = sqrt(1 - M / M_max) the lowest point can land a rounding error beyond u_max (NaN): leave it out
    np.testing.assert_allclose(r[:, 1:], mod.radius(theta, m[:, 1:]).value, rtol=1e-12)
    np.testing.assert_allclose(lam[:, 1:], mod.tidal_deformability(theta, m[:, 1:]).value, rtol=1e-11)


@pytest.mark.parametrize("kind", KINDS)
def test_one_theta_equals_a_row_of_many(kind, models, exported):
    model, (mod, _) = models[kind], exported[kind]
    theta = box_points(model, 5, seed=12, inner=0.1)
    for i in range(len(theta)):
        assert mod.mass_max(theta[i]).value.shape == ()
        assert float(mod.mass_max(theta[i]).value) == pytest.approx(float(mod.mass_max(theta).value[i]), rel=1e-12)
        one = mod.radius(theta[i], 1.3, return_grad=True)
        assert one.value.shape == () and one.grad.shape == (4,)
        many = mod.radius(theta, 1.3, return_grad=True)
        assert float(one.value) == pytest.approx(float(many.value[i]), rel=1e-12, nan_ok=True)
        _close(one.grad, many.grad[i], "gradient of one theta")  # BLAS sums a lone row in another order


def test_one_mass_per_theta_is_the_diagonal_of_the_outer_product(models, exported):
    mod = exported["gp"][0]
    theta = box_points(models["gp"], 6, seed=2, inner=0.1)
    masses = np.linspace(1.1, 1.6, 6)
    np.testing.assert_array_equal(mod.radius(theta, masses[:, None]).value[:, 0],
                                  np.diag(mod.radius(theta, masses).value))


@pytest.mark.parametrize("kind", KINDS)
def test_outside_the_box_and_off_the_branch_give_nan_or_raise(kind, models, exported):
    model, (mod, _) = models[kind], exported[kind]
    lo, hi = model.bounds[:, 0], model.bounds[:, 1]
    inside = box_points(model, 4, seed=3, inner=0.1)
    outside = inside.copy()
    outside[:, 1] = hi[1] + 0.01 * (hi[1] - lo[1])
    assert mod.in_domain(inside).all() and not mod.in_domain(outside).any()
    assert not bool(mod.in_domain(np.array([np.nan, *inside[0, 1:]])))
    assert np.isnan(mod.mass_max(outside).value).all()
    assert np.isnan(mod.radius(outside, 1.2).value).all()
    assert np.isnan(mod.curve(outside, n=5).radius_km).all()
    assert mod.predict(outside).out_of_box.all() and np.isnan(mod.predict(outside).radius_km).all()
    with pytest.raises(ValueError, match=rf"theta row 0: the 'gamma1' parameter must be in \[{lo[1]}, {hi[1]}\]"):
        mod.radius(outside, 1.2, strict=True)
    for fn in (mod.mass_max, mod.predict, lambda t, **kw: mod.curve(t, n=5, **kw),
               lambda t, **kw: mod.predict_at_masses(t, 1.2, **kw)):
        with pytest.raises(ValueError, match="trained box"):
            fn(outside, strict=True)
    mm = mod.mass_max(inside).value
    above = mm[:, None] * (1.0 + 1e-9)
    lowest = mm[:, None] * (1.0 - 0.85**2)
    for q in QUERIES:
        fn = getattr(mod, q)
        assert np.isnan(fn(inside, above).value).all(), q
        assert np.isnan(fn(inside, 0.99 * lowest).value).all(), q
        assert np.isfinite(fn(inside, mm[:, None] * (1.0 - 1e-9)).value).all(), q  # just below M_max is defined
        assert np.isfinite(fn(inside, 1.01 * lowest).value).all(), q
        with pytest.raises(mod.QueryError, match=r"theta row 0: mass .* outside the emulated stable branch"):
            fn(inside, above, strict=True)
    finite = mod.radius(inside, mm[:, None] * 0.8, strict=True)  # strict passes on valid queries
    assert np.isfinite(finite.value).all()


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
    mm = mod.mass_max(theta).value
    masses = mm[:, None] * np.array([0.4, 0.7, 0.95])  # on the branch; a step moves M_max by ~2e-4 only
    checks = [("mass_max", lambda t: mod.mass_max(t).value, mod.mass_max(theta, return_grad=True).grad)]
    for q in QUERIES:
        fn = getattr(mod, q)
        checks.append((q, lambda t, fn=fn: fn(t, masses).value, fn(theta, masses, return_grad=True).grad))
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
    want = flatten(mod.radius(theta, MASSES, return_grad=True, return_std=True))
    monkeypatch.setattr(mod, "_NUMPY", mod._NumPy1())
    got = flatten(mod.radius(theta, MASSES, return_grad=True, return_std=True))
    assert compare(got, want) == 0.0


@pytest.mark.parametrize("kind", ["gp", "gp-shared", "rbf"])
def test_queries_that_skip_kernel_groups_give_the_same_bits(kind, models):
    """A query evaluates only the GP kernel groups (RBF output blocks) it reads; those outputs must not
    change at all."""
    model = models[kind]
    theta = box_points(model, 40, seed=6)
    full = model.evaluate(theta, grad=True, std=True)
    cols = model.output_columns()
    for outputs in (("mass_max_msun",), ("mass_max_msun", "radius_km"), ("mass_max_msun", "log_moment_of_inertia"),
                    ("mass_max_msun", "radius_km", "log_tidal_deformability")):
        sub = model.evaluate(theta, columns=outputs, grad=True, std=True)
        used = np.zeros(full.values.shape[1], bool)
        for name in outputs:
            c = cols[name]
            used[c] = True
            np.testing.assert_array_equal(sub.values[:, c], full.values[:, c])
            np.testing.assert_array_equal(sub.grad[:, c], full.grad[:, c])
            np.testing.assert_array_equal(sub.std[:, c], full.std[:, c])
        assert np.isnan(sub.values[:, ~used]).any(axis=0).sum() > 0  # skipped groups are NaN, never stale numbers
        if model.method_info.has_std:  # the GP's own sigma skips groups (the error model answers every output)
            assert np.isnan(sub.std[:, ~used]).any(axis=0).sum() > 0
