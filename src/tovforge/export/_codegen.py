"""Code generated for one model: the straight-line NumPy part of an exported evaluator.

:func:`generate` writes, for a trained model, what its queries need and
nothing else, resolved when the file is written:

- the map of one theta to the unit cube (box, log warps, input stretch as
  literals), the derivative of theta by it, and the polynomial trend and its
  derivatives as unrolled monomials (``_unit_one``, ``_span_one``,
  ``_trend_one``, ``_dtrend_one``);
- a *plan* per query (``_PLAN_BLOCKS``): the output blocks it reads (the
  method's blocks that hold M_max and the curve it answers), which the
  generated code evaluates side by side, and the lookup from the columns the
  query contract asks for to the plan (``_PLAN_OF_COLUMNS``);
- the kernel sums of the method from its template (``_method_parts``, see
  :mod:`tovforge.surrogate._codegen`), or for a method without one, its
  general runtime part, called for the plan's columns.

The fixed code that turns these into queries (one theta without batching
overhead, and the generated kernel sums behind the batched queries) is
:mod:`._fast`, copied verbatim.  The general runtime stays in the file for
other array namespaces, and it is the reference: the self-check at export
compares every query of the generated code with the library model.
"""

from __future__ import annotations

from dataclasses import dataclass


from ..surrogate import _runtime as rt
from ..surrogate._codegen import literal, template_source

__all__ = ["Generated", "generate", "plan_columns"]

#: The plans every file has besides one per query at a mass: M_max alone, the curve, and every output.
_CURVE_QUERIES = ("radius", "tidal_deformability")


@dataclass(frozen=True)
class Generated:
    """The generated section of an exported file.

    Attributes
    ----------
    source : str
        Python source (model constants as literals, the method's helpers, ``_method_parts``).
    template : str or None
        The template module used (None: the method has none; its runtime part is called).
    plans : dict
        Plan name -> the output ranges ``(a, b)`` its code evaluates.
    """

    source: str
    template: str | None
    plans: dict


def _runtime_model(model) -> rt.Model:
    meta = model.meta
    return rt.Model(model.arrays, meta.method, meta.outputs.runtime(), meta.parameters, meta.bounds,
                    meta.outputs.mass_floor_msun)


def plan_columns(model) -> dict:
    """Plan name -> the output ranges the query contract asks for (``needed_columns``; None: every output)."""
    m = _runtime_model(model)
    out = {"mass_max": rt.needed_columns(m, ())}
    for q in rt.star_queries(m):
        out[q] = rt.needed_columns(m, (q,))
    out["curve"] = rt.needed_columns(m, _CURVE_QUERIES)
    out["all"] = None
    return out


def _touching(blocks, columns) -> tuple[int, ...]:
    if columns is None:
        return tuple(range(len(blocks)))
    return tuple(g for g, (a, b) in enumerate(blocks) if any(c0 < b and a < c1 for c0, c1 in columns))


def _minus(v: str, c: float) -> str:
    """``v - c`` as source; ``v + |c|`` for a negative c (the same number: negation is exact)."""
    return f"{v} + {literal(-c)}" if c < 0 else f"{v} - {literal(c)}"


def _unit_lines(arrays) -> list[str]:
    """``_unit_one(t)`` and ``_span_one(t)``: the runtime's ``unit_inputs`` and ``input_span`` for one theta."""
    lo, hi = [float(v) for v in arrays["lo"]], [float(v) for v in arrays["hi"]]
    d = len(lo)
    names = ", ".join(f"t{i}" for i in range(d))
    flags = arrays.get("warp_log")
    scale = arrays.get("input_scale")
    lines = ["def _unit_one(t):",
             '    """One theta (d floats) -> its unit inputs x (d floats) and whether it lies in the box."""',
             f"    {names}{',' if d == 1 else ''} = t"]
    xs = []
    if flags is None:
        for i in range(d):
            lines.append(f"    x{i} = ({_minus(f't{i}', lo[i])}) / {literal(float(arrays['hi'][i] - arrays['lo'][i]))}")
        lines.append("    inside = " + " and ".join(f"0.0 <= x{i} <= 1.0" for i in range(d)))
    else:
        lines.append("    inside = " + " and ".join(f"{literal(lo[i])} <= t{i} <= {literal(hi[i])}" for i in range(d)))
        wlo, whi = arrays["wlo"], arrays["whi"]
        logged = [i for i in range(d) if int(flags[i])]
        if logged:
            # NumPy's log, not math.log: the bits of the runtime's inputs (kernel sums amplify one ulp)
            args = []
            for i in logged:
                s = literal(float(arrays["warp_shift"][i]))
                args.append(f"{_minus(f't{i}', float(arrays['warp_shift'][i]))} if t{i} > {s} else 1.0")
            lines.append(f"    {', '.join(f'w{i}' for i in logged)}{',' if len(logged) == 1 else ''} = "
                         f"np.log(np.array([{', '.join(args)}])).tolist()")
        for i in range(d):
            width = literal(float(whi[i] - wlo[i]))
            v = f"w{i}" if int(flags[i]) else f"t{i}"
            lines.append(f"    x{i} = ({_minus(v, float(wlo[i]))}) / {width}")
    for i in range(d):
        xs.append(f"x{i}" if scale is None else f"x{i} * {literal(float(scale[i]))}")
    lines.append(f"    return ({', '.join(xs)}{',' if d == 1 else ''}), inside")
    lines += ["", "", "def _span_one(t):",
              '    """d theta / d x per parameter at one theta (a list of d floats)."""']
    spans = []
    for i in range(d):
        if flags is None:
            c = literal(float(arrays["hi"][i] - arrays["lo"][i]))
        else:
            c = literal(float(arrays["whi"][i] - arrays["wlo"][i]))
            if int(flags[i]):
                c = f"{c} * ({_minus(f't[{i}]', float(arrays['warp_shift'][i]))})"
        spans.append(c if scale is None else f"{c} / {literal(float(scale[i]))}")
    lines.append(f"    return [{', '.join(spans)}]")
    return lines


def _trend_lines(arrays) -> list[str]:
    """``_trend_one(x)`` and ``_dtrend_one(x)``: the runtime's ``trend_terms`` for one row, monomials unrolled."""
    powers = [[int(p) for p in row] for row in arrays["trend_powers"]]
    d = len(powers[0])
    names = ", ".join(f"x{i}" for i in range(d))

    def factor(i, p):
        return f"x{i}" if p == 1 else f"x{i} * x{i}" if p == 2 else f"x{i} ** {p}"

    terms, dterms = [], []
    for row in powers:
        fs = [factor(i, p) for i, p in enumerate(row) if p]
        # factors multiplied in parameter order, as the runtime's product (unit factors are exact)
        terms.append(" * ".join(f"({f})" if " " in f and len(fs) > 1 else f for f in fs) if fs else "1.0")
        drow = []
        for i in range(d):
            p = row[i]
            if p == 0:
                drow.append("0.0")
                continue
            g = "1.0" if p == 1 else f"{p}.0 * x{i}" if p == 2 else f"{p}.0 * x{i} ** {p - 1}"
            for j in range(d):
                if j != i and row[j]:
                    f = factor(j, row[j])
                    f = f"({f})" if " " in f else f
                    g = f if g == "1.0" else f"{g} * {f}"  # 1.0 * f is f
            drow.append(g)
        dterms.append(f"[{', '.join(drow)}]")
    return ["def _trend_one(x):",
            '    """The polynomial trend terms at one row of unit inputs (a list)."""',
            f"    {names}{',' if d == 1 else ''} = x",
            f"    return [{', '.join(terms)}]",
            "", "",
            "def _dtrend_one(x):",
            '    """Their derivatives by each unit input, one list of d per term."""',
            f"    {names}{',' if d == 1 else ''} = x",
            "    return [" + (",\n            ".join(dterms)) + "]"]


def _fallback_lines(plans: dict, columns: dict) -> list[str]:
    """``_method_parts(m)`` of a method without a template: its runtime part for each plan's columns."""
    lines = ["def _method_parts(m):",
             '    """The general runtime part of this method (it has no template of generated code), per plan."""',
             "    parts = {}"]
    for name in plans:
        cols = columns[name]
        lines.append(f"    parts[{name!r}] = _runtime_parts(m, {literal(cols) if cols is not None else 'None'})")
    lines.append("    return parts")
    return lines


def generate(model) -> Generated:
    """The generated section of ``model``'s exported file (see the module docstring)."""
    arrays = model.arrays
    template = model.method_info.template
    columns = plan_columns(model)
    n_out = int(arrays["out_mean"].shape[0])
    blocks = [(int(a), int(b)) for a, b in template.blocks(arrays)] if template else [(0, n_out)]
    plans = {name: _touching(blocks, cols) for name, cols in columns.items()}
    plan_blocks = {name: tuple(blocks[g] for g in idx) for name, idx in plans.items()}
    of_columns = {tuple(tuple(int(v) for v in c) for c in cols): name
                  for name, cols in columns.items() if cols is not None}
    lines = [
        f"#: Generated for this model by tovforge (method {model.method}, "
        + (f"template surrogate/{template.source})." if template else "no template: its general runtime part)."),
        f"_D = {len(model.meta.parameters)}",
        f"_N_OUT = {n_out}",
        "#: The output blocks each plan (a query, the curve, every output) evaluates side by side.",
        f"_PLAN_BLOCKS = {plan_blocks!r}",
        "#: The plan of the columns the query contract asks for (needed_columns).",
        f"_PLAN_OF_COLUMNS = {of_columns!r}",
        "#: True when the kernel sums are generated code (batched NumPy queries use them too).",
        f"_GENERATED_PARTS = {template is not None!r}",
        "", "",
        *_unit_lines(arrays), "", "",
        *_trend_lines(arrays), "", "",
    ]
    if template is not None:
        lines += [template_source(template).rstrip("\n"), "", ""]
        lines += template.emit(arrays, plans)
    else:
        lines += _fallback_lines(plans, columns)
    return Generated(source="\n".join(lines) + "\n", template=template.source if template else None,
                     plans=plan_blocks)


