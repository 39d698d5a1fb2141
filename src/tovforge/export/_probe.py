"""Run an exported file under another array namespace and compare with its own NumPy answers.

The exporter runs this module in a subprocess for each namespace it tries
(so that a crash or a missing library cannot take the export down)::

    python -m tovforge.export._probe FILE NAMESPACE THETA_JSON

``NAMESPACE`` is ``torch`` (through array-api-compat) or ``jax`` (float64);
``THETA_JSON`` the parameter rows.  It prints one JSON line: ``label`` (the
library and its version, and whether results stayed in its arrays; under JAX
also how ``jax.grad`` agrees with ``return_grad``) and ``worst`` (the largest
relative difference to NumPy over every query, or null when the library is
not installed).
"""

from __future__ import annotations

import json
import sys

import numpy as np

from ._verify import compare, flatten, import_file, max_rel_diff, query_calls

__all__ = ["probe", "main"]


def _namespace(which: str):
    """``(to the namespace, back to NumPy, its array type, label)``; ImportError if not installed."""
    if which == "torch":
        import torch  # first: a missing torch is what users need to hear about
        import array_api_compat

        return (torch.asarray, lambda a: a.detach().numpy(), torch.Tensor,
                f"PyTorch {torch.__version__} via array-api-compat {array_api_compat.__version__}")
    if which == "jax":
        import jax

        jax.config.update("jax_enable_x64", True)
        import jax.numpy as jnp

        return jnp.asarray, np.asarray, jax.Array, f"JAX {jax.__version__} (x64)"
    raise ValueError(f"unknown namespace {which!r}; known: torch, jax")


def _arrays_of(result, array_type) -> bool:
    """True if every array of a query's result is of ``array_type``."""
    return all(v is None or isinstance(v, (str, array_type)) for v in flatten(result, to_numpy=lambda a: a).values())


def probe(path, which: str, theta) -> dict:
    """Every query of the file at ``theta`` under namespace ``which``, against its NumPy answers."""
    try:
        conv, back, array_type, label = _namespace(which)
    except ImportError as exc:
        return {"label": f"not installed ({exc.name})", "worst": None}
    mod = import_file(path, "_tovforge_namespace_probe")
    theta = np.asarray(theta, float)
    worst, foreign = 0.0, True
    for name, args, kw in query_calls(mod.star_queries(mod._M)):
        ref = getattr(mod, name)(theta, *args, **kw)
        got = getattr(mod, name)(conv(theta), *[conv(a) for a in args], **kw)
        foreign &= _arrays_of(got, array_type)
        worst = max(worst, compare(flatten(got, back), flatten(ref)))
    extra = ""
    if which == "jax":
        import jax

        t = conv(theta[2:10])
        auto = np.asarray(jax.vmap(jax.grad(lambda x: mod.radius(x, 1.4).value))(t))
        analytic = np.asarray(mod.radius(t, 1.4, return_grad=True).grad)
        ok = np.isfinite(analytic)
        extra = f"; jax.grad agrees with return_grad to {max_rel_diff(auto[ok], analytic[ok]):.1e}"
    return {"label": label + ("" if foreign else " (RESULTS LEFT THE NAMESPACE)") + extra, "worst": worst}


def main(argv=None) -> int:
    args = sys.argv[1:] if argv is None else argv
    if len(args) != 3:
        print("usage: python -m tovforge.export._probe FILE NAMESPACE THETA_JSON", file=sys.stderr)
        return 2
    print(json.dumps(probe(args[0], args[1], json.loads(args[2]))))
    return 0


if __name__ == "__main__":
    sys.exit(main())
