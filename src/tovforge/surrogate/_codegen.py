"""How a surrogate method supplies the generated code of its exported evaluators: the template protocol.

An exported file answers NumPy queries through code generated for its model
(:mod:`tovforge.export._codegen`): the parts every method shares (inputs, the
polynomial trend, the outputs a query reads, the spline in u, the queries
themselves) come from the exporter, and the kernel sums of the method from the
method's :class:`Template`, which lives next to the method (``_gp_code.py``,
``_rbf_code.py``, ``_tensor_code.py``) and is named in the table of kinds
(``Method.template``).  A method without a template is exported with its
general runtime part (:data:`tovforge.surrogate._runtime.PARTS`) in place of
generated code: slower, the same numbers.

A template has three pieces:

``source``
    A module of this package whose code between :data:`MARKER` and
    :data:`END_MARKER` is copied verbatim into every exported file of the
    method: helper functions named ``_<method>_*`` that take arrays and plain
    values, use NumPy (``np``) and the standard library only, and run under
    NumPy 1.26 and 2.x.
``blocks(arrays)``
    The output ranges ``(a, b)`` the method evaluates as units, in column
    order, covering every output: a query evaluates the blocks that hold the
    outputs it reads, each by its own product, so that an output has the same
    bits whichever query reads it.
``emit(arrays, plans)``
    Source lines of a function ``_method_parts(m)`` that takes the runtime
    ``Model`` (its arrays in ``m[...]``), prepares what its code needs once
    (contiguous weight blocks, scaled points) and returns, for each plan name
    of ``plans`` (name -> tuple of block indices, increasing), a tuple
    ``(part, std, part_std)`` of functions of unit inputs ``x`` (n, d):

    - ``part(x, grad) -> (z, dz)``: the method's standardised outputs of the
      plan's blocks side by side, (n, width), and their x-derivatives
      (n, width, d) when ``grad`` (else None), as the runtime part computes
      them (to rounding);
    - ``std(x) -> s`` (n, width): the predictive standard deviation in output
      units, as :func:`~tovforge.surrogate._runtime.output_std` computes it
      inside the box; None for methods without one;
    - ``part_std(x, grad) -> (z, dz, s)``: both from one pass, or None (the
      generated queries then call ``part`` and ``std``).

    ``emit`` may write model constants as literals (:func:`literal`) and
    unroll what the model fixes (kernel groups, blocks).
"""

from __future__ import annotations

import importlib.resources
import numbers
from collections.abc import Callable
from dataclasses import dataclass

__all__ = ["MARKER", "END_MARKER", "Template", "literal", "template_source", "distinct_plans"]

#: The line of a template module below which its code is copied into exported files ...
MARKER = "# ---- the exported code starts below this line ----\n"
#: ... and the line above which it ends (the generator of the template follows it).
END_MARKER = "# ---- the exported code ends above this line ----\n"


@dataclass(frozen=True)
class Template:
    """The generated code of one surrogate method (see the module docstring).

    Attributes
    ----------
    source : str
        Module of ``tovforge.surrogate`` (file name) holding the verbatim helpers below :data:`MARKER`.
    blocks : callable
        ``blocks(arrays) -> list of (a, b)``: the output blocks, in column order, covering every output.
    emit : callable
        ``emit(arrays, plans) -> list of str``: the lines of ``_method_parts(m)``.
    """

    source: str
    blocks: Callable
    emit: Callable


def template_source(template: Template) -> str:
    """The helper code of a template: its module's source below :data:`MARKER`."""
    src = importlib.resources.files("tovforge.surrogate").joinpath(template.source).read_text(encoding="utf-8")
    if MARKER not in src or END_MARKER not in src:
        raise ValueError(f"internal: tovforge.surrogate.{template.source} lost a marker line.")
    return src.split(MARKER, 1)[1].split(END_MARKER, 1)[0].strip("\n") + "\n"


def literal(v) -> str:
    """A float, int, or nested tuple/list of them, as Python source that reads back bit for bit."""
    if isinstance(v, (list, tuple)):
        inner = ", ".join(literal(e) for e in v)
        return f"({inner},)" if len(v) == 1 else f"({inner})"
    if isinstance(v, bool):
        return repr(v)
    if isinstance(v, numbers.Integral):
        return repr(int(v))
    f = float(v)
    if f != f or f in (float("inf"), float("-inf")):
        return f"float({str(f)!r})"
    return repr(f)


def distinct_plans(plans: dict):
    """``(name, blocks, same)`` per plan: ``same`` names an earlier plan with the same blocks (its code serves
    both), or is None."""
    first = {}
    for name, blocks in plans.items():
        blocks = tuple(blocks)
        yield name, blocks, first.get(blocks)
        first.setdefault(blocks, name)
