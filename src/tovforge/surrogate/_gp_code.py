"""Generated code of Gaussian-process models (method ``gp``) in exported evaluators.

The template (see :mod:`tovforge.surrogate._codegen`) of the runtime part
``_gp_part`` and the sigma ``gp_local_std`` of :mod:`._runtime`: the runtime's
own pieces (``kernel_stack``, ``scaled_distances``, ``matern_values``,
``nearest``, ``local_sd``) on the runtime's chunks of rows, so the numbers
are the runtime's bit for bit, with what a model fixes resolved when the file
is written.  Each output block is a kernel group; a query evaluates the
kernels of the groups it reads, stacked, and multiplies each group's kernel
rows by its folded weights, a contiguous block made once at import.  With the
sigma, one pass over the training points serves the mean and the choice of
the nearest points.
"""

from __future__ import annotations

import numpy as np

from ._codegen import Template, distinct_plans, literal
from ._runtime import (PAIRS_PER_CHUNK, gp_neighbours, kernel_stack, local_sd, matern_gradients, matern_values,
                       nearest, scaled_distances)

_GP_N = 0  # training points of the model (a literal of the generated code)

__all__ = ["TEMPLATE"]

_NUMPY = np  # in an exported file: NumPy, or its stand-in under NumPy 1 (the runtime's array-API names)

# ---- the exported code starts below this line ----


def _gp_folded(m, bounds):
    """The weights of each group times its kernel amplitude, one contiguous block (N, b - a) per group.

    The runtime's ``_folded_weights`` and ``_weight_block``: the same products.
    """
    alpha, amp2 = m["alpha"], m["amp2"]
    return [np.ascontiguousarray(alpha[:, a:b] * np.full((b - a,), float(amp2[g])))
            for g, (a, b) in enumerate(bounds)]


#: The kernel rows of the latest single row of inputs, per kernel: ``kernel -> (its bytes, row (1, N))``.
#: A likelihood asks several queries at one theta (M_max, then R and Lambda at masses): each kernel
#: row is made once (the same bits: each kernel is its own product, stacked or not).
_GP_LAST = {}


def _gp_rows_of_one(x, m, kernels):
    """Kernel rows (G, 1, N) of the kernels at one row x, those of the latest row reused."""
    key = x.tobytes()
    got = [_GP_LAST.get(g) for g in kernels]  # one read each: another thread may replace them meanwhile
    rows = [e[1] if e is not None and e[0] == key else None for e in got]
    missing = tuple(g for g, r in zip(kernels, rows) if r is None)
    if missing:
        q = matern_values(_NUMPY, scaled_distances(_NUMPY, x, kernel_stack(_NUMPY, m, missing)), False)[0]
        for i, g in enumerate(missing):
            _GP_LAST[g] = (key, q[i])
            rows[kernels.index(g)] = q[i]
    return rows


def _gp_sums(x, grad, X, k, blocks, width, near=0, m=None, kernels=None):
    """Kernel sums of the blocks ``((kernel j, weights (N, o), first column), ...)`` at rows x.

    Returns z (n, width), dz (n, width, d) or None, and with ``near`` the
    indices (G, n, near) of the nearest training points of each kernel, from
    the same squared distances (the runtime's sigma selects by them too).
    One row without gradient or sigma reuses the kernel rows of the latest
    row (``m`` and ``kernels``: the model and the kernels of ``k``).
    """
    n, d = x.shape
    if n == 1 and not grad and not near and m is not None:
        q, nn, dk = _gp_rows_of_one(x, m, kernels), None, None
    else:
        q = scaled_distances(_NUMPY, x, k)
        nn = nearest(_NUMPY, q, near) if near else None
        q, c = matern_values(_NUMPY, q, grad)
        dk = matern_gradients(_NUMPY, x, X, k, c) if grad else None
    z = np.empty((n, width))
    dz = np.empty((n, width, d)) if grad else None
    for j, W, at in blocks:
        o = W.shape[1]
        z[:, at:at + o] = q[j] @ W
        if grad:
            for i in range(d):
                dz[:, at:at + o, i] = dk[i][j] @ W
    return z, dz, nn


def _gp_sigma(x, X, k, nn, groups, width):
    """The sigma (n, width) of ``groups`` ((kernel j, resid_scale, out_scale, first column), ...) from ``nn``."""
    sd = local_sd(_NUMPY, x, X, nn, k)
    out = np.empty((x.shape[0], width))
    for j, rs, os, at in groups:
        out[:, at:at + rs.shape[0]] = sd[j][:, None] * rs * os
    return out


def _gp_chunks(x):
    """Row slices of x: the runtime's chunks (``PAIRS_PER_CHUNK`` pairs), so every product has its shape and bits."""
    step = max(1, PAIRS_PER_CHUNK // _GP_N)
    return [slice(i, i + step) for i in range(0, max(x.shape[0], 1), step)]


def _gp_join(pieces, i):
    return pieces[0][i] if len(pieces) == 1 else np.concatenate([p[i] for p in pieces])


def _gp_part(x, grad, X, k, blocks, width, m, kernels):
    """``(z, dz)`` of the blocks at rows x."""
    pieces = [_gp_sums(x[c], grad, X, k, blocks, width, 0, m, kernels) for c in _gp_chunks(x)]
    return _gp_join(pieces, 0), (_gp_join(pieces, 1) if grad else None)


def _gp_std(x, X, k, groups, width, near):
    """The sigma of ``groups`` at rows x (n, width)."""
    return _gp_join([(_gp_sigma(x[c], X, k, nearest(_NUMPY, scaled_distances(_NUMPY, x[c], k), near), groups, width),)
                     for c in _gp_chunks(x)], 0)


def _gp_part_std(x, grad, X, k, blocks, groups, width, near):
    """``(z, dz, sd)``: the mean and the sigma with one pass over the training points."""
    pieces = []
    for c in _gp_chunks(x):
        z, dz, nn = _gp_sums(x[c], grad, X, k, blocks, width, near)
        pieces.append((z, dz, _gp_sigma(x[c], X, k, nn, groups, width)))
    return _gp_join(pieces, 0), (_gp_join(pieces, 1) if grad else None), _gp_join(pieces, 2)


# ---- the exported code ends above this line ----


def _bounds(arrays) -> list[tuple[int, int]]:
    gb = [int(v) for v in arrays["group_bounds"]]
    return [(gb[g], gb[g + 1]) for g in range(len(gb) - 1)]


def _kernel_of(arrays) -> list[int]:
    share = arrays.get("group_kernel")
    n = len(_bounds(arrays))
    return [int(share[g]) if share is not None else g for g in range(n)]


def emit(arrays, plans) -> list[str]:
    """The lines of ``_method_parts(m)`` for a GP model and the plans (name -> group indices)."""
    bounds = _bounds(arrays)
    kernel_of = _kernel_of(arrays)
    near = min(gp_neighbours(arrays), int(arrays["X"].shape[0]))  # the runtime's n_neighbours
    lines = [
        f"_GP_N = {int(arrays['X'].shape[0])}",
        "",
        "",
        "def _method_parts(m):",
        '    """Kernel sums and sigma of this GP model for each plan (generated: groups and kernels resolved)."""',
        f"    W = _gp_folded(m, {literal(bounds)})",
        "    X, rs, os = m['X'], m['resid_scale'], m['out_scale']",
        "    parts = {}",
    ]
    for v, (name, groups, same) in enumerate(distinct_plans(plans)):
        if same is not None:
            lines.append(f"    parts[{name!r}] = parts[{same!r}]")
            continue
        kernels = sorted({kernel_of[g] for g in groups})
        blocks, sig, at = [], [], 0
        for g in groups:
            a, b = bounds[g]
            j = kernels.index(kernel_of[g])
            blocks.append(f"({j}, W[{g}], {at})")
            sig.append(f"({j}, rs[{a}:{b}], os[{a}:{b}], {at})")
            at += b - a
        v = f"_{v}"
        lines += [
            f"    # plan {name}: groups {list(groups)} (columns "
            f"{', '.join(f'{bounds[g][0]}:{bounds[g][1]}' for g in groups)}), kernels {kernels}",
            f"    k{v} = kernel_stack(_NUMPY, m, {literal(tuple(kernels))})",
            f"    b{v} = ({', '.join(blocks)},)",
            f"    s{v} = ({', '.join(sig)},)",
            f"    g{v} = {literal(tuple(kernels))}",
            f"    parts[{name!r}] = (lambda x, grad, k=k{v}, b=b{v}, g=g{v}: _gp_part(x, grad, X, k, b, {at}, m, g),",
            f"                      lambda x, k=k{v}, s=s{v}: _gp_std(x, X, k, s, {at}, {near}),",
            f"                      lambda x, grad, k=k{v}, b=b{v}, s=s{v}: _gp_part_std(x, grad, X, k, b, s, {at}, "
            f"{near}))",
        ]
    lines.append("    return parts")
    return lines


#: The generated code of method ``gp``.
TEMPLATE = Template(source="_gp_code.py", blocks=_bounds, emit=emit)
