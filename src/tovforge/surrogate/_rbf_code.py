"""Generated code of polyharmonic-spline models (method ``rbf``) in exported evaluators.

The template (see :mod:`tovforge.surrogate._codegen`) of the runtime part
``_rbf_part`` of :mod:`._runtime`: its r^5 rows (``polyharmonic_rows``) on its
chunks of rows, each output block (the scalars, then each curve) multiplied
by its own contiguous block of weights, made once at import: the runtime's
numbers bit for bit.  One row of kernel values serves every block a query
reads.
"""

from __future__ import annotations

import numpy as np

from ._codegen import Template, distinct_plans
from ._runtime import PAIRS_PER_CHUNK, _rbf_blocks, polyharmonic_rows

__all__ = ["TEMPLATE"]

_NUMPY = np  # in an exported file: NumPy, or its stand-in under NumPy 1 (the runtime's array-API names)

# ---- the exported code starts below this line ----


#: The kernel row of the latest single row of inputs: ``(its bytes, r^5 row (1, N))``.  A likelihood asks
#: several queries at one theta (M_max, then R and Lambda at masses): the kernel row is made once.
_RBF_LAST = (None, None)


def _rbf_sums(x, grad, XT, X2, blocks, width, aug):
    """r^5 kernel sums of the blocks ``((weights (N, o), first column), ...)`` at rows x: z (n, width), dz."""
    global _RBF_LAST
    n, d = x.shape
    if n == 1 and not grad:
        key, phi = _RBF_LAST  # one read: another thread may replace it meanwhile
        if key != x.tobytes():
            phi = polyharmonic_rows(_NUMPY, x, XT, X2, False, aug)[0]
            _RBF_LAST = (x.tobytes(), phi)
        dphi = None
    else:
        phi, dphi = polyharmonic_rows(_NUMPY, x, XT, X2, grad, aug)
    z = np.empty((n, width))
    dz = np.empty((n, width, d)) if grad else None
    for W, at in blocks:
        o = W.shape[1]
        z[:, at:at + o] = phi @ W
        if grad:
            for i in range(d):
                dz[:, at:at + o, i] = dphi[i] @ W
    return z, dz


def _rbf_part(x, grad, XT, X2, blocks, width, aug):
    """``(z, dz)`` of the blocks at rows x, in the runtime's chunks of rows (its products, its bits)."""
    step = max(1, PAIRS_PER_CHUNK // XT.shape[1])
    if x.shape[0] <= step:
        return _rbf_sums(x, grad, XT, X2, blocks, width, aug)
    pieces = [_rbf_sums(x[i:i + step], grad, XT, X2, blocks, width, aug) for i in range(0, x.shape[0], step)]
    return (np.concatenate([p[0] for p in pieces]),
            np.concatenate([p[1] for p in pieces]) if grad else None)


# ---- the exported code ends above this line ----


def _blocks(arrays) -> list[tuple[int, int]]:
    """The runtime's blocks (the scalars, then each curve)."""
    return _rbf_blocks(arrays, None)


def emit(arrays, plans) -> list[str]:
    """The lines of ``_method_parts(m)`` for an RBF model and the plans (name -> block indices)."""
    bounds = _blocks(arrays)
    lines = [
        "def _method_parts(m):",
        '    """r^5 kernel sums of this RBF model for each plan (generated: output blocks resolved)."""',
        "    XT, X2 = rbf_points(_NUMPY, m)",
        "    A = rbf_augmented(_NUMPY, m)",
        "    alpha = m['alpha']",
        "    W = [" + ", ".join(f"np.ascontiguousarray(alpha[:, {a}:{b}])" for a, b in bounds) + "]",
        "    parts = {}",
    ]
    for v, (name, blocks, same) in enumerate(distinct_plans(plans)):
        if same is not None:
            lines.append(f"    parts[{name!r}] = parts[{same!r}]")
            continue
        items, at = [], 0
        for g in blocks:
            a, b = bounds[g]
            items.append(f"(W[{g}], {at})")
            at += b - a
        v = f"_{v}"
        lines += [
            f"    # plan {name}: columns {', '.join(f'{bounds[g][0]}:{bounds[g][1]}' for g in blocks)}",
            f"    b{v} = ({', '.join(items)},)",
            f"    parts[{name!r}] = (lambda x, grad, b=b{v}: _rbf_part(x, grad, XT, X2, b, {at}, A), None, None)",
        ]
    lines.append("    return parts")
    return lines


#: The generated code of method ``rbf``.
TEMPLATE = Template(source="_rbf_code.py", blocks=_blocks, emit=emit)
