"""Generated code of tensor-product spline models (method ``tensor``) in exported evaluators.

The template (see :mod:`tovforge.surrogate._codegen`) of the runtime part
``_tensor_part`` of :mod:`._runtime`: its ``tensor_rows`` (de Boor's triangle
per axis, the (deg + 1)^d coefficients that cover a point gathered once for
every output) on its chunks of rows, with the knot tables made once at
import: the runtime's numbers bit for bit.
"""

from __future__ import annotations

import numpy as np

from ._codegen import Template
from ._runtime import PAIRS_PER_CHUNK, tensor_cells_per_row, tensor_rows

__all__ = ["TEMPLATE"]

_NUMPY = np  # in an exported file: NumPy, or its stand-in under NumPy 1 (the runtime's array-API names)

# ---- the exported code starts below this line ----


def _tensor_part(x, grad, T, coef):
    """``(z, dz)`` of every output at rows x: the runtime's ``tensor_rows`` on its chunks of rows."""
    step = max(1, PAIRS_PER_CHUNK // max(1, tensor_cells_per_row(coef, x)))
    if x.shape[0] <= step:
        return tensor_rows(_NUMPY, x, T, coef, grad)
    pieces = [tensor_rows(_NUMPY, x[i:i + step], T, coef, grad) for i in range(0, x.shape[0], step)]
    return (np.concatenate([p[0] for p in pieces]),
            np.concatenate([p[1] for p in pieces]) if grad else None)


# ---- the exported code ends above this line ----


def _blocks(arrays) -> list[tuple[int, int]]:
    """One block, every output: the gathered coefficients serve them all (as in the runtime)."""
    return [(0, int(arrays["out_mean"].shape[0]))]


def emit(arrays, plans) -> list[str]:
    """The lines of ``_method_parts(m)`` for a tensor-spline model (every plan: the one block)."""
    return [
        "def _method_parts(m):",
        '    """Tensor-spline sums of this model: the knot tables made once, every output at each point."""',
        "    T, coef = bspline_tables(_NUMPY, m), m['coef']",
        "    part = (lambda x, grad: _tensor_part(x, grad, T, coef), None, None)",
        f"    return {{name: part for name in {tuple(plans)!r}}}",
    ]


#: The generated code of method ``tensor``.
TEMPLATE = Template(source="_tensor_code.py", blocks=_blocks, emit=emit)
