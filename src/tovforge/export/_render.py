"""The text of an exported file: header, constants, and the verbatim code, assembled.

Every string that comes from a model or a report reaches the source either as
``repr()`` of plain data (a literal, whatever it contains; checked by
``ast.literal_eval``) or JSON-escaped inside the raw header docstring (no
quote, newline or backslash survives unescaped); parameter and output names
must be Python identifiers.  :func:`render` parses the result and refuses it
unless its docstring is exactly the header that was meant.
"""

from __future__ import annotations

import ast
import importlib.resources
import json
import re

from .. import __version__, quantities
from .._jsonfile import jsonable
from ..errors import InputError
from ..surrogate import Prediction

__all__ = ["ExportError", "MARKER", "render", "header", "constants", "source", "text", "identifier", "plain",
           "literal", "is_identifier", "OUTPUT_UNITS", "SELF_CHECK_POINTS"]

#: The line of surrogate/_contract.py, export/_fast.py and export/_evaluator.py below which their code is copied
#: into exported files.
MARKER = "# ---- the exported code starts below this line ----\n"
_IDENTIFIER = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")
#: Points of the self-check and namespace runs (named in the header).
SELF_CHECK_POINTS = 48

#: Unit of each field of a prediction (``predict``), from the registry of quantities.
OUTPUT_UNITS = {
    name: {"u_nodes": "1 (u = sqrt(1 - M/M_max))", "out_of_box": "bool"}.get(name) or quantities.get(name).unit
    for name in Prediction.__dataclass_fields__ if name not in ("std", "trusted")
}


class ExportError(InputError):
    """A model or report cannot be exported safely (names, metadata, or a failed self-check)."""


def text(s) -> str:
    """Any metadata string as inert header text: JSON-escaped ASCII without the surrounding quotes."""
    return json.dumps(str(s), ensure_ascii=True)[1:-1]


def is_identifier(name) -> bool:
    """True for a str that is a Python identifier (letters, digits and _, not starting with a digit)."""
    return isinstance(name, str) and bool(_IDENTIFIER.match(name))


def identifier(name, what: str) -> str:
    """``name`` if it is a Python identifier; ExportError otherwise."""
    if not is_identifier(name):
        raise ExportError(f"{what} {text(name)!r} is not a Python identifier (letters, digits and _); "
                          "exported files accept only such names.")
    return name


def plain(obj, where="report"):
    """JSON-like data reduced to literals: dict (str keys), list, str, bool, int, finite float or None."""
    try:
        return jsonable(obj, where=where)  # nan becomes None: nan is not a Python literal
    except TypeError as exc:
        raise ExportError(str(exc)) from None


def literal(obj) -> str:
    """``repr`` of plain data, checked to read back as the same literal."""
    src = repr(obj)
    if ast.literal_eval(src) != obj:
        raise ExportError(f"internal: {src[:60]} does not read back as a literal.")
    return src


def source(package: str, name: str, below_marker: bool = False) -> str:
    """The source text of a module of the package (only the part below :data:`MARKER` if asked)."""
    src = importlib.resources.files(package).joinpath(name).read_text(encoding="utf-8")
    if not below_marker:
        return src
    if MARKER not in src:
        raise ExportError(f"internal: {package}.{name} lost its marker line.")
    return src.split(MARKER, 1)[1]


def _fmt(v, spec=".3g") -> str:
    return "nan" if v is None else format(float(v), spec)


def _error_table(check: dict | None) -> list[str]:
    if not check:
        return ["No held-out check was supplied at export time: this file's accuracy is unknown.",
                "(Export with --report REPORT.json from `tovforge check` to record it here.)"]
    h = check["holdout"]
    lines = [f"Held-out grid {text(h.get('path'))} (content sha256 {text(h.get('content_sha256'))}):",
             f"{h.get('n_used')} of {h.get('n_points')} exact EOS used, {h.get('n_star_comparisons')} stars "
             f"at masses {text(h.get('mass_rule'))} Msun; checked with tovforge {text(check.get('tovforge_version'))} "
             f"on {text(check.get('created_utc'))}.",
             "Absolute errors in Msun (masses), km (radii), 1e45 g cm^2 (I); Lambda, k2 and c_s^2 are dimensionless.",
             "",
             f"    {'output':<34}{'abs median':>11}{'abs p95':>10}{'abs p99':>10}{'abs max':>10}{'rel p95':>10}"
             f"{'rel p99':>10}{'rel max':>10}"]
    for name, s in check["errors"].items():
        lines.append(f"    {text(name):<34}{_fmt(s.get('abs_median')):>11}{_fmt(s.get('abs_p95')):>10}"
                     f"{_fmt(s.get('abs_p99')):>10}{_fmt(s.get('abs_max')):>10}{_fmt(s.get('rel_p95'), '.2e'):>10}"
                     f"{_fmt(s.get('rel_p99'), '.2e'):>10}{_fmt(s.get('rel_max'), '.2e'):>10}")
    regions = check.get("regions") or {}
    if "faces" in regions:
        lines += ["", "    Near the faces of the box vs the interior (p95 / p99 / max):"]
        for label in ("faces", "interior"):
            reg = regions[label]
            cells = []
            for name, key, unit in (("mass_max_msun", "abs", "Msun"), ("radius_km_at_mass", "abs", "km"),
                                    ("tidal_deformability_at_mass", "rel", "rel")):
                e = reg.get("errors", {}).get(name)
                if e:
                    cells.append(f"{name.split('_at_')[0]} " + " / ".join(_fmt(e.get(f"{key}_{p}"))
                                                                          for p in ("p95", "p99", "max")) + f" {unit}")
            lines.append(f"    {label:<9}({reg.get('n_eos')} EOS, {text(reg.get('rule'))}): " + "; ".join(cells))
    if check.get("targets"):
        lines += ["", "    Targets for the 95th percentile (must reach: every model must reach it, a model above "
                      "it is not fit for use; aim: what the project aims for):"]
        for key, t in check["targets"].items():
            must, aim = t.get("must_reach", t.get("floor")), t.get("aim", t.get("goal"))
            reached_aim = t.get("meets_aim", t.get("meets_goal"))
            reached = t.get("meets_must_reach", t.get("meets_floor"))
            verdict = ("reaches the aim" if reached_aim else
                       "reaches what it must" if reached else "MISSES WHAT IT MUST REACH")
            lines.append(f"    {text(key):<24}{_fmt(t.get('value'), '.4g')} {text(t.get('unit'))} "
                         f"(must reach {_fmt(must, 'g')}, aim {_fmt(aim, 'g')}): {verdict}")
    if check.get("calibration"):
        lines += ["", "    Sigma calibration (fraction of held-out errors inside 1 and 2 sigma, a Gaussian gives "
                      "0.683 and 0.954; beyond 3 sigma):"]
        for key, c in check["calibration"].items():
            lines.append(f"    {text(key):<24}{_fmt(c.get('within_1_sigma'), '.3f')}   "
                         f"{_fmt(c.get('within_2_sigma'), '.3f')}   {_fmt(c.get('beyond_3_sigma'), '.4f')}")
    trust = check.get("trust")
    if trust:
        caught = ", ".join(f"{text(k)} {trust['n_caught'].get(k)} of {trust['n_large'].get(k)}"
                           for k in trust.get("n_large", {}))
        lines += ["", f"    Trust flag: {_fmt(100 * trust.get('stars_flagged', 0), '.1f')} % of held-out stars not "
                      f"trusted; large errors flagged: {caught}."]
    return lines


def _inputs_text(names, arrays) -> list[str]:
    """Header lines on what the model takes as inputs (warped parameters, stretched box), if anything."""
    lines = []
    if arrays.get("warp_log") is not None:
        warped = [f"ln({text(n)} - {float(c):g})" for n, c, f in zip(names, arrays["warp_shift"], arrays["warp_log"])
                  if f]
        lines.append(f"inputs           the model sees {', '.join(warped)} (the rest as given)")
    if arrays.get("input_scale") is not None:
        stretch = ", ".join(f"{text(n)} {float(c):.3g}" for n, c in zip(names, arrays["input_scale"]))
        lines.append(f"                 distances in a stretched box (each parameter spans [0, c]: {stretch})")
    return lines


def _kind_label(model) -> str:
    return model.kind if model.method == model.kind else f"{model.kind} ({model.method})"


def header(model, check, info: dict, namespaces: dict) -> str:
    """The header docstring of an exported file (without the quotes)."""
    meta, arrays, method = model.meta, model.arrays, model.method_info
    names = list(meta.parameters)
    tr = meta.training
    mod = info["module"]
    w = max(len(n) for n in names)
    structure = f", {method.describe(arrays)}" if method.describe else ""
    lines = [
        f"Standalone evaluator of a tovforge surrogate of the {text(meta.family)} EOS family ({_kind_label(model)}).",
        "",
        f"Generated by tovforge {text(__version__)} (git commit {text(info['commit'])}) on {info['created']}.",
        "Needs NumPy only (2.x, or 1.26 through a stand-in for the array-API names it lacks): this file",
        "imports numpy and the Python standard library (base64, bisect, dataclasses, hashlib, io, math, zlib) and",
        "nothing else.  Read it before you run it: it is fixed code and numbers.  The",
        "numbers are one base64 string near the end (a zlib stream of .npy records of each array's",
        "bytes, shuffled, read with allow_pickle=False); importing the file checks their SHA-256 against",
        "the one below and refuses to load if they differ.  It also checks the SHA-256 of the whole file",
        "recorded on its last line (FILE_SHA256), so that an edit anywhere, code or constants, is refused.",
        "Both guard against accidental edits, not against someone who changes a check along with the file.",
        "NumPy queries run code generated for this model",
        f"({info['generated']});",
        *(("other array libraries are refused: this method evaluates under NumPy only (rows are grouped",
           "by index assignment).") if model.method_info.numpy_only else
          ("other array libraries run the general runtime, the reference the generated code reproduces",
           "(checked at export, below).")),
        "",
        "Model",
        "-----",
        f"family           {text(meta.family)}",
        f"kind             {model.kind}" + (f" (method {model.method})" if model.method != model.kind else "")
        + structure + ":",
        f"                 {method.description}",
        *_inputs_text(names, arrays),
        f"training         {tr.n_train} exact EOS ({tr.grid_points_used} of {tr.grid_points} grid points usable), "
        f"grid {text(tr.grid_path or '?')}",
        f"                 {text(tr.grid_description)}",
        f"                 grid content sha256 {text(tr.grid_content_sha256 or '?')}",
        f"                 trained {text(tr.created_utc or '?')} with tovforge {text(tr.tovforge_version or '?')}, "
        f"NumPy {text(tr.numpy_version or '?')}",
        f"payload sha256   {info['payload_sha256']}",
        f"runtime sha256   {info['runtime_sha256']} (tovforge/surrogate/_runtime.py and _contract.py, copied verbatim)",
        "",
        "Parameters theta, in this order, and the box outside which every answer is NaN:",
    ]
    for n, u, (lo, hi) in zip(names, meta.parameter_units, meta.bounds):
        lines.append(f"    {n:<{w}}  [{float(lo):g}, {float(hi):g}]  {text(u)}")
    u_nodes = meta.outputs.u_nodes
    umax = float(u_nodes[-1])
    lines += ["", "Outputs (tovforge's registry of quantities: name, unit, meaning; predict() returns them all):"]
    emulated = meta.outputs.scalars + meta.outputs.curves
    wq = max(len(o.quantity) for o in emulated)
    wu = max(len(o.unit) for o in emulated)
    for o in emulated:
        how = "" if o.transform == "identity" else f" (emulated as {o.transform})"
        lines.append(f"    {text(o.quantity):<{wq}}  {text(o.unit):<{wu}}  "
                     f"{text(quantities.get(o.quantity).description)}{how}")
    lines += [
        f"The first {len(meta.outputs.scalars)} are one value per EOS; the others are emulated along the stable branch (the",
        f"connected branch up to the first maximum of M) at {len(u_nodes)} nodes of u = sqrt(1 - M/M_max) in "
        f"[0, {umax:g}],",
        f"i.e. from {1 - umax ** 2:.4g} M_max up to M_max; the queries at a mass ({', '.join(model.star_queries)})",
        "go through u and a cubic spline in it.  Above M_max, below the lowest emulated mass, or outside the box: NaN.",
        f"mass_max_margin_msun is M_max minus the floor {meta.outputs.mass_floor_msun:g} Msun "
        "of the training grid; causality_margin is 1 - max c_s^2.",
        "",
        "Accuracy (tovforge check against held-out exact solves)",
        "-------------------------------------------------------",
        *_error_table(check),
        "",
        "Usage",
        "-----",
        "Every query returns one type whatever its flags, and shapes follow the inputs (the contract is",
        "docs/reference/query-contract.md of tovforge; the library's Surrogate answers the same way):",
        f"    import {mod}",
        f"    theta = [{', '.join(format(0.5 * (float(a) + float(b)), 'g') for a, b in meta.bounds)}]"
        f"   # {', '.join(names)}",
        f"    {mod}.mass_max(theta).value                    # Msun, shape ()",
        f"    {mod}.radius(theta, 1.4).value                 # km",
        f"    r = {mod}.radius(theta, [1.2, 1.4], return_grad=True)   # r.value (2,), r.grad (2, {len(names)})",
        f"    {mod}.tidal_deformability(thetas, 1.4).value   # thetas of shape (n, {len(names)}) -> (n,)",
        f"    {mod}.radius(thetas, masses[:, None]).value    # one mass per theta -> (n, 1)",
        f"    c = {mod}.curve(theta, n=100)                  # c.masses_msun, c.radius_km, c.tidal_deformability",
        f"    {mod}.predict(theta, return_std=True)          # everything (a Prediction), with sigma",
        f"    {mod}.radius(theta, 2.9, strict=True)          # QueryError (a ValueError) instead of NaN",
        "return_std=True gives the predictive sigma (the error model from leave-one-out residuals, with a",
        "Gaussian process's own sigma in quadrature; NaN where the model has none: never a false zero) and",
        "`trusted`: False where sigma exceeds the limits of set_trust_limits() or the star is within",
        "max(0.02 Msun, 3 sigma_M) of M_max.  Reject or down-weight untrusted points.",
        "Queries accept NumPy arrays; JAX arrays; PyTorch tensors through array-api-compat (pip install",
        "array-api-compat); results stay in the caller's namespace.  JAX needs",
        "jax.config.update('jax_enable_x64', True) for float64.",
        "",
        "Array namespaces run at export time (every query, with gradients and sigma, on "
        f"{SELF_CHECK_POINTS} points;",
        "largest relative difference to the tovforge library model for numpy, to numpy for the others;",
        "differences up to about the rounding noise of the model, measured on the last line, are rounding",
        "in another library, not errors):",
    ]
    lines += [f"    {text(k)}: {text(v)}" for k, v in namespaces.items()]
    return "\n".join(lines)


def constants(model, check, info: dict, index: list) -> list[str]:
    """The model's constants as Python source lines (literals only)."""
    meta, method = model.meta, model.method_info
    outputs = tuple(tuple(o) for o in meta.outputs.runtime())
    for o in outputs:
        identifier(o[0], "output name")
    record = plain({
        **info["provenance"],
        "training": {k: v for k, v in meta.training.to_json().items()
                     if isinstance(v, (str, int, float, bool)) or v is None},
        "model_arrays_sha256": meta.arrays_sha256,
    }, "model.json")
    static = tuple(dict.fromkeys(info["static_arrays"]))
    return [
        f"FAMILY = {literal(str(meta.family))}",
        f"KIND = {literal(str(meta.kind))}",
        f"METHOD = {literal(str(meta.method))}",
        "#: True if the model has a predictive sigma (return_std); otherwise std fields are NaN.",
        f"HAS_STD = {literal(bool(model.has_std))}",
        f"PARAMETERS = {literal(tuple(meta.parameters))}",
        f"UNITS = {literal(tuple(str(u) for u in meta.parameter_units))}",
        f"BOUNDS = {literal(tuple((float(a), float(b)) for a, b in meta.bounds))}",
        f"OUTPUTS = {literal(tuple(OUTPUT_UNITS))}",
        f"OUTPUT_UNITS = {literal(dict(OUTPUT_UNITS))}",
        f"MASS_FLOOR_MSUN = {literal(float(meta.outputs.mass_floor_msun))}",
        "#: The held-out error table of the header, as data (None: no check was supplied).",
        f"CHECK = {literal(check)}",
        f"PROVENANCE = {literal(record)}",
        f"PAYLOAD_SHA256 = {literal(info['payload_sha256'])}",
        "#: The emulated outputs: (name, quantity, level, transform, query, first column, end column).",
        f"_OUTPUTS = {literal(outputs)}",
        "#: Model arrays that steer loops or index: kept NumPy under every namespace (constants to tracers).",
        f"_STATIC = {literal(static)}",
        f"_ARRAYS = {literal(tuple(index))}",
    ]


def render(header_text: str, constant_lines: list[str], payload_lines: list[str], generated: str) -> str:
    """The whole file: header, imports, runtime, contract, constants, payload, generated code, interface.

    ``generated`` is the section :func:`tovforge.export._codegen.generate` wrote for the model.

    Raises
    ------
    ExportError
        If the parsed file's docstring is not exactly ``header_text`` (metadata escaped it).
    """
    runtime = source("tovforge.surrogate", "_runtime.py")
    contract = source("tovforge.surrogate", "_contract.py", below_marker=True)
    fast = source("tovforge.export", "_fast.py", below_marker=True)
    interface = source("tovforge.export", "_evaluator.py", below_marker=True)
    rule = "# " + "=" * 98
    parts = [
        f'r"""{header_text}\n"""\n',
        "import base64\nimport bisect\nimport dataclasses\nimport hashlib\nimport io\nimport math\nimport zlib\n\n"
        "import numpy as np\n\n",
        f"{rule}\n# Prediction runtime: a verbatim copy of tovforge/surrogate/_runtime.py\n{rule}\n\n",
        runtime.rstrip("\n") + "\n\n\n",
        f"{rule}\n# Query contract: a verbatim copy of tovforge/surrogate/_contract.py\n{rule}\n\n",
        contract.strip("\n") + "\n\n\n",
        f"{rule}\n# The model: constants and numbers\n{rule}\n\n",
        "\n".join(constant_lines) + "\n",
        "_PAYLOAD = (\n" + "".join(f'    "{c}"\n' for c in payload_lines) + ")\n\n\n",
        f"{rule}\n# Generated for this model: its inputs, trend, plans and kernel sums (NumPy)\n{rule}\n\n",
        generated.strip("\n") + "\n\n\n",
        f"{rule}\n# Generated queries: a verbatim copy of tovforge/export/_fast.py\n{rule}\n\n",
        fast.strip("\n") + "\n\n\n",
        f"{rule}\n# Interface: a verbatim copy of tovforge/export/_evaluator.py\n{rule}\n\n",
        interface.strip("\n") + "\n\n\n",
        "_M = _load_model()\n_setup_generated(_M)\n",
    ]
    src = "".join(parts)
    tree = ast.parse(src)
    if ast.get_docstring(tree, clean=False) != header_text + "\n":
        raise ExportError("internal: metadata escaped the header docstring; refusing to write the file.")
    return src

