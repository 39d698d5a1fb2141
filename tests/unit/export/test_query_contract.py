"""One query contract for the library model and its exported file (docs/reference/query-contract.md).

The same calls go to a trained Surrogate and to the file exported from it, for every kind (GP, GP with
shared kernels, RBF spline, tensor spline): the same return type whatever the flags, the same fields,
the same shapes (following the inputs, never squeezed by count), the same defaults and the same values.
"""

from __future__ import annotations

import inspect

import numpy as np
import pytest
from conftest import KINDS, box_points, import_file

from tovforge import quantities
from tovforge.errors import InputError
from tovforge.export import export_model
from tovforge.export._verify import compare, flatten
from tovforge.surrogate import Curve, Estimate, MassPrediction, Prediction, Surrogate
from tovforge.surrogate._data import emulated_outputs

RTOL = 1e-10
D = 4  # parameters of the demo family
QUERIES = ("radius", "tidal_deformability", "moment_of_inertia", "k2")

#: theta shape, mass, and the mass axes of the answer
SHAPES = [
    ((D,), 1.4, ()),
    ((D,), [1.2, 1.4], (2,)),
    ((6, D), 1.4, ()),
    ((6, D), [1.2, 1.4, 1.6], (3,)),
    ((6, D), np.full((6, 1), 1.3), (1,)),  # one mass per theta
    ((6, D), np.full((1, 2), 1.3), (2,)),  # the same row of masses for every theta
    ((2, 3, D), 1.4, ()),  # more leading axes lead the answer too
    ((2, 3, D), np.full((2, 3, 2), 1.3), (2,)),
    ((1, D), 1.4, ()),  # one theta as a row keeps its axis
]


def _theta(model, shape):
    return np.broadcast_to(box_points(model, 1, seed=1, inner=0.2)[0], shape).copy()


def _both(model, mod, name, *args, **kw):
    """The same call on the library model and on the exported file."""
    return getattr(model, name)(*args, **kw), getattr(mod, name)(*args, **kw)


def _same(a, b, what):
    fa, fb = flatten(a), flatten(b)
    assert fa.keys() == fb.keys(), what
    assert compare(fa, fb) <= RTOL, what
    return fa


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("theta_shape, mass, tail", SHAPES)
def test_queries_at_masses_have_the_contract_shapes(kind, theta_shape, mass, tail, models, exported):
    model, mod = models[kind], exported[kind][0]
    theta = _theta(model, theta_shape)
    lead = theta_shape[:-1]
    for q in QUERIES:
        for grad in (False, True):
            for std in (False, True):
                lib, exp = _both(model, mod, q, theta, mass, return_grad=grad, return_std=std)
                for r in (lib, exp):
                    assert type(r).__name__ == "Estimate"  # one type, whatever the flags
                    assert r.value.shape == lead + tail
                    assert (r.grad is None) != grad and (r.std is None) != std
                    if grad:
                        assert r.grad.shape == lead + tail + (D,)
                    if std:
                        assert r.std.shape == lead + tail
                _same(lib, exp, f"{q} grad={grad} std={std}")
    lib, exp = _both(model, mod, "predict_at_masses", theta, mass, return_std=True)
    for r in (lib, exp):
        assert type(r).__name__ == "MassPrediction"
        assert r.radius_km.shape == r.k2.shape == r.std["k2"].shape == lead + tail
        assert r.prediction.mass_max_msun.shape == lead
    _same(lib, exp, "predict_at_masses")


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("theta_shape", [(D,), (5, D), (2, 3, D)])
def test_mass_max_curve_predict_and_in_domain_have_the_contract_shapes(kind, theta_shape, models, exported):
    model, mod = models[kind], exported[kind][0]
    theta = _theta(model, theta_shape)
    lead = theta_shape[:-1]
    n_u = len(model.meta.outputs.u_nodes)
    for grad in (False, True):
        for std in (False, True):
            lib, exp = _both(model, mod, "mass_max", theta, return_grad=grad, return_std=std)
            for r in (lib, exp):
                assert type(r).__name__ == "Estimate" and r.value.shape == lead
                assert (r.grad is None) != grad and (r.std is None) != std
                assert not grad or r.grad.shape == lead + (D,)
            _same(lib, exp, "mass_max")
    lib, exp = _both(model, mod, "curve", theta, n=7)
    for r in (lib, exp):
        assert type(r).__name__ == "Curve"
        assert r.masses_msun.shape == r.radius_km.shape == r.tidal_deformability.shape == lead + (7,)
    _same(lib, exp, "curve")
    for std in (False, True):
        lib, exp = _both(model, mod, "predict", theta, return_std=std)
        for r in (lib, exp):
            assert type(r).__name__ == "Prediction" and (r.std is None) != std
            assert r.mass_max_msun.shape == r.out_of_box.shape == lead
            assert r.radius_km.shape == lead + (n_u,) and r.u_nodes.shape == (n_u,)
            if std:
                assert r.std["radius_km"].shape == lead + (n_u,)
        _same(lib, exp, f"predict std={std}")
    lib, exp = _both(model, mod, "in_domain", theta)
    assert lib.shape == exp.shape == lead and lib.dtype == exp.dtype == bool


@pytest.mark.parametrize("kind", KINDS)
def test_std_is_a_sigma_where_the_model_has_one_and_nan_otherwise(kind, models, exported):
    """return_std never changes the type; a model without a predictive sigma fills std with NaN.

    GPs, RBF splines and local splines carry one (the GP's own and the error model from leave-one-out
    residuals); tensor splines have no leave-one-out residuals and no sigma.
    """
    model, mod = models[kind], exported[kind][0]
    theta = box_points(model, 8, seed=3, inner=0.2)
    assert mod.HAS_STD == model.has_std == (model.method in ("gp", "rbf", "local"))
    for r in (model.radius(theta, 1.2, return_std=True), mod.radius(theta, 1.2, return_std=True),
              model.mass_max(theta, return_std=True), mod.mass_max(theta, return_std=True)):
        if model.has_std:
            assert np.all(r.std > 0) and np.isfinite(r.std).all()
        else:
            assert np.isnan(r.std).all() and np.isfinite(r.value).all()


def test_the_same_functions_with_the_same_defaults(models, exported):
    """Every query of the exported file is a method of Surrogate with the same parameters and defaults."""
    mod = exported["gp"][0]
    for name in ("in_domain", "mass_max", *QUERIES, "curve", "predict", "predict_at_masses"):
        lib = list(inspect.signature(getattr(Surrogate, name)).parameters.values())[1:]  # without self
        exp = list(inspect.signature(getattr(mod, name)).parameters.values())
        assert [(p.name, p.default) for p in lib] == [(p.name, p.default) for p in exp], name
        assert getattr(Surrogate, name).__doc__ == getattr(mod, name).__doc__, name
    for cls in (Estimate, Curve, Prediction, MassPrediction):
        assert list(getattr(mod, cls.__name__).__dataclass_fields__) == list(cls.__dataclass_fields__)
    assert issubclass(mod.QueryError, ValueError)


def test_prediction_fields_follow_the_registry():
    """Prediction holds every emulated quantity by its registry name, in the quantity's unit."""
    sequence, star = emulated_outputs()
    fields = set(Prediction.__dataclass_fields__)
    assert {q.name for q in sequence + star} <= fields
    extra = fields - {q.name for q in sequence + star}
    assert extra == {"u_nodes", "mass_msun", "mass_max_margin_msun", "causality_margin", "out_of_box", "std",
                     "trusted"}
    for name in extra - {"u_nodes", "out_of_box", "std", "trusted"}:
        quantities.get(name)  # the rest are registry quantities too


@pytest.mark.parametrize("kind", ["gp", "rbf"])
def test_bad_shapes_are_named_on_both_sides(kind, models, exported):
    model, mod = models[kind], exported[kind][0]
    for theta, mass, match in [
        (np.zeros(3), 1.4, r"theta must have shape \(4,\) or \(n, 4\)"),
        (np.zeros((3, 4)), np.zeros((2, 2)), r"mass must be a scalar, shape \(q,\) .* got shape \(2, 2\)"),
    ]:
        with pytest.raises(ValueError, match=match):
            mod.radius(theta, mass)
        with pytest.raises(ValueError, match=match):  # InputError, a ValueError, in the library
            model.radius(theta, mass)


def test_units_of_the_exported_outputs_come_from_the_registry(exported):
    mod = exported["rbf"][0]
    assert mod.OUTPUT_UNITS["central_pressure_at_mass_max_dyn_cm2"] == "dyn/cm^2"
    assert mod.OUTPUT_UNITS["moment_of_inertia_1e45_g_cm2"] == quantities.get("moment_of_inertia").unit
    assert mod.OUTPUTS == tuple(f for f in Prediction.__dataclass_fields__ if f not in ("std", "trusted"))
    # the header lists every emulated quantity with its registry unit and meaning, and how it was modelled
    sequence, star = emulated_outputs()
    for q in sequence + star:
        line = next(x for x in mod.__doc__.splitlines() if x.split()[:1] == [q.name])
        assert q.unit in line and q.description in line
        assert (f"(emulated as {q.transform})" in line) == (q.transform != "identity")


@pytest.mark.parametrize("kind", ["gp", "rbf"])
def test_the_trust_flag_catches_a_planted_bad_region_in_both_places(kind, models, tmp_path):
    """Leave-one-out residuals made 1000 times larger at the training points of high gamma2: the flag must turn
    False there (library, exported batch and exported one-theta path alike) and stay True where it was True
    elsewhere; set_trust_limits moves it the same way in both places."""
    model = models[kind].with_arrays()  # a copy: its trust limits are its own
    x2 = model.arrays["X"][:, 2]
    bad = x2 > np.quantile(x2, 0.85)
    loo = np.array(model.arrays["loo_residual"])
    loo[bad] *= 1e3
    planted = model.with_arrays(loo_residual=loo)
    path = tmp_path / f"planted_{kind}.py"
    export_model(planted, path, namespaces=("numpy",))
    mod = import_file(path)
    # these models learn 300 points: limits 5 times the defaults leave most of their stars trusted
    loose = {"mass_max_msun": 0.05, "radius_km": 0.25, "tidal_deformability_rel": 0.1}
    for side in (model, planted, mod):
        side.set_trust_limits(**loose)
    lo, hi = model.bounds[:, 0], model.bounds[:, 1]
    theta = box_points(model, 60, seed=31, inner=0.05)
    in_bad = theta.copy()
    in_bad[:, 2] = lo[2] + 0.97 * (hi[2] - lo[2])  # inside the planted region
    far = theta.copy()
    far[:, 2] = lo[2] + 0.3 * (hi[2] - lo[2])  # away from it (and from the soft segments at the lowest gamma2)
    for q in ("mass_max", "radius", "tidal_deformability"):
        args = () if q == "mass_max" else (1.3,)
        clean = getattr(model, q)(far, *args, return_std=True).trusted
        assert clean.any()  # the test can fail: some stars are trusted before planting
        assert not getattr(planted, q)(in_bad, *args, return_std=True).trusted.any(), q
        np.testing.assert_array_equal(getattr(planted, q)(far, *args, return_std=True).trusted, clean)
        for th in (in_bad, far):
            want = getattr(planted, q)(th, *args, return_std=True)
            np.testing.assert_array_equal(getattr(mod, q)(th, *args, return_std=True).trusted, want.trusted)
            one = [bool(getattr(mod, q)(t, *args, return_std=True).trusted) for t in th[:8]]
            assert one == want.trusted[:8].tolist(), q
    p = planted.predict_at_masses(far, [1.2, 1.4], return_std=True)
    np.testing.assert_array_equal(mod.predict_at_masses(far, [1.2, 1.4], return_std=True).trusted, p.trusted)
    assert p.trusted.shape == (60, 2) and planted.predict(far, return_std=True).trusted.shape == (60,)
    assert planted.predict(far).trusted is None and planted.radius(far, 1.3).trusted is None
    # limits a user sets: huge ones trust the planted region (but never a star next to M_max)
    huge = {"mass_max_msun": 1e9, "radius_km": 1e9, "tidal_deformability_rel": 1e9, "mass_margin_sigmas": 0.0}
    for side in (planted, mod):
        assert side.set_trust_limits(**huge)["radius_km"] == 1e9
        assert side.radius(in_bad, 1.3, return_std=True).trusted.mean() > 0.5
        mm = side.mass_max(in_bad).value
        assert not side.radius(in_bad, (mm - 0.01)[:, None], return_std=True).trusted.any()  # within 0.02 Msun
    with pytest.raises(InputError, match="unknown trust limit"):
        planted.set_trust_limits(radius=1.0)
    with pytest.raises(mod.QueryError, match="finite number"):
        mod.set_trust_limits(radius_km=-1.0)


def test_trust_limits_are_documented_alike(exported):
    mod = exported["rbf"][0]
    assert mod.set_trust_limits.__doc__ == Surrogate.set_trust_limits.__doc__
    assert mod.set_trust_limits() == mod.TRUST_LIMITS
