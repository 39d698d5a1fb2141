"""Generated code of tensor-product spline models (method ``tensor``) in exported evaluators.

The template (see :mod:`tovforge.surrogate._codegen`) of the runtime part
``_tensor_part`` of :mod:`._runtime`: the same de Boor triangle per axis and
the same gather of the (deg + 1)^d coefficients that cover a point, with the
knot tables made once at import and only the coefficient columns of the
blocks a query reads (a contiguous copy per plan) gathered.
"""

from __future__ import annotations

import numpy as np

from ._codegen import Template

__all__ = ["TEMPLATE"]

# ---- the exported code starts below this line ----

#: Gathered coefficients (query rows x (deg + 1)^d x outputs) per chunk of rows.
_TENSOR_CELLS = 1 << 17


def _tensor_tables(m):
    """The knot tables of the runtime's ``_bspline_local``, made once: flat knots, ends, offsets, shape."""
    knots, n_knots = m["knots"], m["n_knots"]
    shape = [int(s) for s in m["coef_shape"]]
    d, K = knots.shape
    tx = np.asarray([float(knots[a, j]) if j < int(n_knots[a]) else 0.0 for a in range(d) for j in range(K)])
    lo = np.asarray([float(knots[a, 3]) for a in range(d)])
    hi = np.asarray([float(knots[a, shape[a]]) for a in range(d)])
    return {"tx": tx, "lo": lo, "hi": hi, "K": K, "n_knots": [int(v) for v in n_knots], "shape": shape,
            "offsets": np.asarray([a * K for a in range(d)], dtype=np.int64)[None, :]}


def _tensor_basis(x, T, deg=3):
    """First index (n, d) and the values and derivatives of the deg + 1 B-splines that cover rows x, per axis."""
    tx, K, shape = T["tx"], T["K"], T["shape"]
    lo, hi = T["lo"], T["hi"]
    d = x.shape[1]
    xc = np.clip(x, lo, hi - 1e-12 * (hi - lo))
    cols = []
    for a in range(d):
        ta = tx[a * K: a * K + T["n_knots"][a]]
        cols.append(np.clip(np.searchsorted(ta, xc[:, a], side="right") - 1, deg, shape[a] - 1) + a * K)
    i = np.stack(cols, axis=-1)

    def t(offset):
        return np.reshape(np.take(tx, np.reshape(i + offset, (-1,)), axis=0), i.shape)

    left = [None] + [xc - t(1 - j) for j in range(1, deg + 1)]
    right = [None] + [t(j) - xc for j in range(1, deg + 1)]
    N = [np.ones(x.shape)]
    prev = N
    for j in range(1, deg + 1):
        saved = np.zeros(x.shape)
        new = []
        for r in range(j):
            temp = N[r] / (right[r + 1] + left[j - r])
            new.append(saved + right[r + 1] * temp)
            saved = left[j - r] * temp
        new.append(saved)
        prev, N = N, new
    dN = []
    for r in range(deg + 1):
        term = np.zeros(x.shape)
        if r >= 1:
            term = term + prev[r - 1] / (t(r) - t(r - deg))
        if r <= deg - 1:
            term = term - prev[r] / (t(r + 1) - t(r + 1 - deg))
        dN.append(deg * term)
    return i - T["offsets"] - deg, N, dN


def _tensor_sums(x, grad, T, coef):
    """The spline sums of the coefficient columns ``coef`` (P, o) at rows x: (n, o) and (n, o, d)."""
    n, d = x.shape
    shape = T["shape"]
    first, vals, ders = _tensor_basis(x, T)
    V = np.stack(vals, axis=-1)
    dV = np.stack(ders, axis=-1) if grad else None
    k = V.shape[-1]
    offsets = np.reshape(np.arange(k, dtype=first.dtype), (1, k))
    flat, w, dw = None, None, [None] * d
    stride = 1
    for a in range(d - 1, -1, -1):
        idx = (first[:, a:a + 1] + offsets) * stride
        v = V[:, a, :]
        if flat is None:
            flat, w = idx, v
            if grad:
                dw[a] = dV[:, a, :]
        else:
            flat = np.reshape(idx[:, :, None] + flat[:, None, :], (n, -1))
            if grad:
                for b in range(a + 1, d):
                    dw[b] = np.reshape(v[:, :, None] * dw[b][:, None, :], (n, -1))
                dw[a] = np.reshape(dV[:, a, :][:, :, None] * w[:, None, :], (n, -1))
            w = np.reshape(v[:, :, None] * w[:, None, :], (n, -1))
        stride *= shape[a]
    gathered = np.reshape(np.take(coef, np.reshape(flat, (-1,)), axis=0), (n, flat.shape[1], coef.shape[1]))
    weights = np.stack([w] + (dw if grad else []), axis=1)
    out = np.matmul(weights, gathered)
    return out[:, 0, :], (np.transpose(out[:, 1:, :], (0, 2, 1)) if grad else None)


def _tensor_part(x, grad, T, coef):
    """``(z, dz)`` of the coefficient columns ``coef`` at rows x, in chunks of rows."""
    step = max(1, _TENSOR_CELLS // (coef.shape[1] * 4 ** x.shape[1]))
    if x.shape[0] <= step:
        return _tensor_sums(x, grad, T, coef)
    pieces = [_tensor_sums(x[i:i + step], grad, T, coef) for i in range(0, x.shape[0], step)]
    return (np.concatenate([p[0] for p in pieces]),
            np.concatenate([p[1] for p in pieces]) if grad else None)


# ---- the exported code ends above this line ----


def _blocks(arrays) -> list[tuple[int, int]]:
    """The scalars, then each curve (a query gathers the coefficients of the blocks it reads)."""
    cs = arrays["curve_slices"]
    return [(0, int(cs[0, 0]))] + [(int(a), int(b)) for a, b in cs]


def emit(arrays, plans) -> list[str]:
    """The lines of ``_method_parts(m)`` for a tensor-spline model and the plans (name -> block indices)."""
    bounds = _blocks(arrays)
    lines = [
        "def _method_parts(m):",
        '    """Tensor-spline sums of this model for each plan (generated: coefficient columns resolved)."""',
        "    T = _tensor_tables(m)",
        "    coef = m['coef']",
        "    parts = {}",
    ]
    done = {}
    for name, blocks in plans.items():
        blocks = tuple(blocks)
        if blocks in done:
            lines.append(f"    parts[{name!r}] = parts[{done[blocks]!r}]")
            continue
        done[blocks] = name
        cols = ", ".join(f"coef[:, {bounds[g][0]}:{bounds[g][1]}]" for g in blocks)
        v = f"_{len(done)}"
        lines += [
            f"    c{v} = np.ascontiguousarray(np.concatenate([{cols}], axis=1))",
            f"    parts[{name!r}] = (lambda x, grad, c=c{v}: _tensor_part(x, grad, T, c), None, None)",
        ]
    lines.append("    return parts")
    return lines


#: The generated code of method ``tensor``.
TEMPLATE = Template(source="_tensor_code.py", blocks=_blocks, emit=emit)
