"""The code generated for each model: the library's numbers through every path, for every kind.

An exported file answers NumPy queries through code generated for its model
(tovforge.export._codegen, the method's template in surrogate/_<method>_code.py):
batches through the query contract with generated kernel sums, one theta through
a fast path.  Here, for every kind: batches equal the library bit for bit (the
templates call the runtime's own pieces on its chunks of rows), one theta equals
the library and the file's general runtime to rounding, one theta equals its row
of a batch to the model's rounding noise, the fast path raises and returns NaN as
the contract says, a method without a template falls back to its runtime part,
and kernel rows kept for the latest theta never leak into another theta.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from conftest import KINDS, box_points, import_file

from tovforge.export import export_model
from tovforge.export._codegen import generate, plan_columns
from tovforge.export._verify import MASSES, RTOL, compare, flatten, query_calls, rounding_noise
from tovforge.surrogate import _kinds
from tovforge.surrogate._codegen import END_MARKER, MARKER, literal, template_source

#: One theta against the library: the kernel sums are the same products; the trend and the spline in u
#: add in another order (measured: 1e-13 at most on the demo models)
ONE_RTOL = 1e-12


def _theta_rows(model, n, seed):
    theta = box_points(model, n, seed=seed, inner=0.02)
    theta[0] = model.bounds[:, 0] - 0.01 * (model.bounds[:, 1] - model.bounds[:, 0])  # outside
    return theta


#: Methods whose exported files run their general runtime part (no template of generated code yet).
WITHOUT_TEMPLATE = {"local", "sided"}


@pytest.mark.parametrize("kind", KINDS)
def test_batches_are_the_library_bit_for_bit(kind, models, exported):
    model, mod = models[kind], exported[kind][0]
    if model.method in WITHOUT_TEMPLATE:  # its general runtime part
        assert not mod._GENERATED_PARTS and mod._GM is mod._M
    else:
        assert mod._GENERATED_PARTS and mod._GM is not mod._M  # the NumPy model runs the generated sums
    theta = _theta_rows(model, 40, seed=21)
    for name, args, kw in query_calls(model.star_queries, MASSES):
        got, want = flatten(getattr(mod, name)(theta, *args, **kw)), flatten(getattr(model, name)(theta, *args, **kw))
        assert compare(got, want) == 0.0, name


@pytest.mark.parametrize("kind", KINDS)
def test_one_theta_equals_the_library_and_the_general_runtime(kind, models, exported):
    model, mod = models[kind], exported[kind][0]
    theta = _theta_rows(model, 6, seed=22)
    mm = model.mass_max(theta[1:]).value
    for t in theta:
        for shape in ((-1,), (1, -1)):  # (d,) and (1, d): both take the fast path
            tt = t.reshape(shape)
            masses = [1.3, MASSES, np.asarray(MASSES)[None, :] if tt.ndim == 2 else MASSES,
                      float(np.nanmax(mm)) * 0.999]
            calls = [("mass_max", (), {"return_grad": True, "return_std": True}), ("curve", (), {"n": 17})]
            for q in model.star_queries:
                calls += [(q, (m,), {"return_grad": g, "return_std": s}) for m in masses for g in (False, True)
                          for s in (False, True)]
            for name, args, kw in calls:
                fast = flatten(getattr(mod, name)(tt, *args, **kw))
                assert compare(fast, flatten(getattr(model, name)(tt, *args, **kw))) <= ONE_RTOL, (name, args, kw)
                mod._general_only(True)
                try:
                    general = flatten(getattr(mod, name)(tt, *args, **kw))
                finally:
                    mod._general_only(False)
                assert compare(fast, general) <= ONE_RTOL, (name, args, kw)


@pytest.mark.parametrize("kind", KINDS)
def test_one_theta_equals_its_row_of_a_batch(kind, models, exported):
    """A lone row and the same row in a batch go through BLAS products of other shapes: equal to the model's
    rounding noise (sums in another order), which the exporter measures and prints."""
    model, mod = models[kind], exported[kind][0]
    theta = box_points(model, 8, seed=23, inner=0.1)
    tol = max(RTOL, 10.0 * rounding_noise(model, theta))
    for name, args, kw in query_calls(model.star_queries, MASSES):
        if name in ("in_domain", "predict", "predict_at_masses"):  # no fast path: the contract for any shape
            continue
        many = flatten(getattr(mod, name)(theta, *args, **kw))
        for i, t in enumerate(theta):
            one = flatten(getattr(mod, name)(t, *args, **kw))
            row = {k: (v if isinstance(v, str) or v is None else v[i]) for k, v in many.items()}
            assert compare(one, row) <= tol, (name, i)


@pytest.mark.parametrize("kind", ["gp", "rbf"])
def test_one_theta_outside_the_box_or_off_the_branch(kind, models, exported):
    model, mod = models[kind], exported[kind][0]
    lo, hi = model.bounds[:, 0], model.bounds[:, 1]
    inside = box_points(model, 1, seed=24, inner=0.2)[0]
    outside = inside.copy()
    outside[1] = hi[1] + 0.01 * (hi[1] - lo[1])
    r = mod.radius(outside, 1.3, return_grad=True, return_std=True)
    assert r.value.shape == () and r.grad.shape == (4,) and r.std.shape == ()
    assert np.isnan(r.value) and np.isnan(r.grad).all() and np.isnan(r.std)
    assert np.isnan(mod.curve(outside, n=5).radius_km).all()
    with pytest.raises(mod.QueryError, match=rf"theta row 0: the 'gamma1' parameter must be in \[{lo[1]}, {hi[1]}\]"):
        mod.radius(outside, 1.3, strict=True)
    for fn in (mod.mass_max, lambda t, **kw: mod.curve(t, n=5, **kw), lambda t, **kw: mod.k2(t, 1.3, **kw)):
        with pytest.raises(mod.QueryError, match="trained box"):
            fn(outside, strict=True)
    with pytest.raises(mod.QueryError, match="theta row 0: the 'gamma1'"):
        mod.radius(list(outside), 1.3, strict=True)  # a list takes the same path
    mm = float(mod.mass_max(inside).value)
    for q in ("radius", "k2"):
        assert np.isnan(getattr(mod, q)(inside, mm * (1.0 + 1e-9)).value)
        with pytest.raises(mod.QueryError, match=r"theta row 0: mass .* outside the emulated stable branch"):
            getattr(mod, q)(inside, [1.2, mm * (1.0 + 1e-9)], strict=True)
    assert np.isfinite(mod.radius(inside, mm * 0.9, strict=True).value)
    with pytest.raises(mod.QueryError, match="mass must be"):
        mod.radius(inside, np.ones((2, 2)))  # a mass form the fast path leaves to the contract


def test_kernel_rows_kept_for_the_latest_theta_never_serve_another(models, exported):
    """The generated one-theta code keeps the kernel rows of the latest theta (M_max, then R and Lambda at
    masses, make each row once; the local spline's runtime part keeps the cells and rows of the latest theta);
    alternating theta must give each its own answers."""
    for kind in ("gp", "rbf", "local"):
        model, mod = models[kind], exported[kind][0]
        theta = box_points(model, 3, seed=25, inner=0.2)
        want = [(model.mass_max(t).value, model.radius(t, 1.3).value, model.tidal_deformability(t, 1.3).value)
                for t in theta]
        for _ in range(2):
            for t, w in zip(theta, want):
                got = (mod.mass_max(t).value, mod.radius(t, 1.3).value, mod.tidal_deformability(t, 1.3).value)
                np.testing.assert_allclose(got, w, rtol=ONE_RTOL)


def test_a_method_without_a_template_runs_its_runtime_part(models, tmp_path, monkeypatch):
    """A new kind needs no template: its exported file calls the method's general runtime part for each plan
    (one theta still on the generated inputs, trend and spline), with the library's numbers."""
    model = models["rbf"]
    monkeypatch.setitem(_kinds.METHODS, "rbf", dataclasses.replace(_kinds.METHODS["rbf"], template=None))
    gen = generate(model)
    assert gen.template is None and "_runtime_parts(m" in gen.source and "_rbf_part(" not in gen.source
    path = tmp_path / "fallback_rbf.py"
    export_model(model, path, namespaces=("numpy",))
    mod = import_file(path)
    assert not mod._GENERATED_PARTS and mod._GM is mod._M
    assert mod._PLANS is not None  # the one-theta path is there
    theta = _theta_rows(model, 12, seed=26)
    for name, args, kw in query_calls(model.star_queries, MASSES):
        assert compare(flatten(getattr(mod, name)(theta, *args, **kw)),
                       flatten(getattr(model, name)(theta, *args, **kw))) == 0.0, name
        assert compare(flatten(getattr(mod, name)(theta[3], *args, **kw)),
                       flatten(getattr(model, name)(theta[3], *args, **kw))) <= ONE_RTOL, name


@pytest.mark.parametrize("kind", KINDS)
def test_plans_cover_the_columns_each_query_reads(kind, models):
    """Each plan evaluates whole blocks of the method that together hold every column its query reads."""
    model = models[kind]
    gen = generate(model)
    for name, columns in plan_columns(model).items():
        blocks = gen.plans[name]
        covered = {c for a, b in blocks for c in range(a, b)}
        wanted = set(range(model.arrays["out_mean"].shape[0])) if columns is None else {
            c for a, b in columns for c in range(a, b)}
        assert wanted <= covered, name
        assert list(blocks) == sorted(blocks)


def test_only_the_listed_methods_lack_a_template():
    assert {n for n, m in _kinds.METHODS.items() if m.template is None} == WITHOUT_TEMPLATE


@pytest.mark.parametrize("method", [n for n in _kinds.METHODS if n not in WITHOUT_TEMPLATE])
def test_every_template_has_its_helpers_between_the_markers(method):
    template = _kinds.METHODS[method].template
    assert template is not None, f"{method} has no template (its exported files would be slow)"
    code = template_source(template)
    assert MARKER not in code and END_MARKER not in code
    compile(code, template.source, "exec")
    assert f"def _{method}_" in code  # helpers are named by their method: no clash in one file


def test_literals_read_back_bit_for_bit():
    values = [0.1, 1.0 / 3.0, -2.5e-300, 7, np.float64(np.pi), np.int64(3), (1.5, (2, 3)), [4.0]]
    for v in values:
        src = literal(v)
        back = eval(src)  # noqa: S307 - literals of our own making
        flat = np.asarray(v, dtype=object).ravel() if not isinstance(v, (list, tuple)) else None
        if flat is not None:
            assert back == v and type(back) in (int, float)
    assert eval(literal((1.5, (2, 3)))) == (1.5, (2, 3)) and eval(literal([4.0])) == (4.0,)
