"""The same exported file under other array namespaces: results stay in the caller's namespace.

Optional: these run only where PyTorch (with array-api-compat) or JAX is installed;
neither is a dependency of tovforge.  Tolerance 1e-8: other libraries round exp,
division and sums differently in the last bit, and next to M_max the coordinate
u = sqrt(1 - M/M_max) turns one ulp of M/M_max into about 1e-8 of u.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import KINDS, box_points

from tovforge.export._verify import compare, flatten, max_rel_diff, query_calls

RTOL = 1e-8
MASSES = np.array([1.0, 1.4, 2.0])


def _compare(mod, conv, back, array_type, model):
    theta = box_points(model, 16, seed=21)
    theta[0] = model.bounds[:, 0] - 0.1
    for name, extra, kw in query_calls(model.star_queries, MASSES):
        want = getattr(mod, name)(theta, *extra, **kw)
        got = getattr(mod, name)(conv(theta), *[conv(e) for e in extra], **kw)
        for path, g in flatten(got, to_numpy=lambda a: a).items():
            assert g is None or isinstance(g, (str, array_type)), (name, path, type(g))
        assert compare(flatten(got, back), flatten(want)) <= RTOL, name


@pytest.mark.parametrize("kind", KINDS)
def test_pytorch_tensors_in_tensors_out(kind, exported, models):
    torch = pytest.importorskip("torch")
    pytest.importorskip("array_api_compat")
    _compare(exported[kind][0], torch.asarray, lambda t: t.detach().numpy(), torch.Tensor, models[kind])


@pytest.fixture(scope="module")
def jax_x64():
    jax = pytest.importorskip("jax")
    previous = jax.config.jax_enable_x64
    jax.config.update("jax_enable_x64", True)
    yield jax
    jax.config.update("jax_enable_x64", previous)


@pytest.mark.parametrize("kind", KINDS)
def test_jax_arrays_in_jax_arrays_out_and_autodiff_agrees(kind, exported, models, jax_x64):
    jax, jnp = jax_x64, jax_x64.numpy
    mod = exported[kind][0]
    _compare(mod, jnp.asarray, np.asarray, jax.Array, models[kind])
    theta = jnp.asarray(box_points(models[kind], 6, seed=22, inner=0.1))
    auto = jax.vmap(jax.grad(lambda t: mod.tidal_deformability(t, 1.3).value))(theta)
    analytic = mod.tidal_deformability(theta, 1.3, return_grad=True).grad
    ok = np.isfinite(np.asarray(analytic)).all(axis=1)
    assert ok.sum() >= 4
    assert max_rel_diff(np.asarray(auto)[ok], np.asarray(analytic)[ok]) <= 1e-10
