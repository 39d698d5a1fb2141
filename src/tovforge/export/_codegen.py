"""Writing a trained surrogate as one standalone, NumPy-only Python file.

The file is, in order: a header docstring a person reads before running
anything; the imports (``base64``, ``hashlib``, ``io``, ``math``, ``zlib``,
``numpy``); the prediction runtime copied verbatim from
:mod:`tovforge.surrogate._runtime`; the model's constants as Python literals;
the numbers as one base64 string (a zlib stream of ``.npy`` arrays, read with
``allow_pickle=False`` after its SHA-256 is checked); and the fixed interface
code copied verbatim from :mod:`tovforge.export._evaluator`.

Every string that comes from a model or a report reaches the source either as
``repr()`` of a ``str`` (a literal, whatever it contains) or JSON-escaped
inside the raw header docstring (no quote, newline or backslash survives
unescaped), and parameter and output names must be Python identifiers; the
result is parsed again before it is written, and refused unless its docstring
is exactly the header that was meant.
"""

from __future__ import annotations

import ast
import base64
import hashlib
import importlib.resources
import importlib.util
import io
import json
import math
import os
import re
import subprocess
import sys
import tempfile
import zlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .. import __version__
from .._jsonfile import jsonable
from .._provenance import provenance
from ..errors import InputError

__all__ = ["export_model", "ExportResult", "ExportError", "NAMESPACES"]

MARKER = "# ---- the exported code starts below this line ----\n"
#: Array namespaces the exporter runs each new file under (when installed) and names in its header.
NAMESPACES = ("numpy", "torch", "jax")
_IDENTIFIER = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")
_LINE = 100  # characters of base64 per source line
_SELF_CHECK_POINTS = 48
_RTOL = 1e-10
#: Other namespaces round exp, division and sums differently in the last bit; next to
#: M_max the coordinate u = sqrt(1 - M/M_max) turns one ulp of M/M_max into 1e-8 of u.
_RTOL_OTHER = 1e-8

_KIND_TEXT = {
    "gp": "Gaussian processes (a quadratic trend plus Matern-5/2 kernels with one length scale per\n"
          "                 parameter, one kernel per group of outputs; sigma from a nearest-neighbour GP)",
    "rbf": "polyharmonic splines: r^5 radial basis functions plus a quadratic polynomial",
    "tensor": "tensor-product cubic B-splines on a regular grid",
}
_OUTPUT_UNITS = {
    "mass_max_msun": "Msun",
    "log10_central_pressure_at_mass_max": "log10(dyn/cm^2)",
    "max_sound_speed_sq": "c^2",
    "u_nodes": "1 (u = sqrt(1 - M/M_max))",
    "mass_msun": "Msun",
    "radius_km": "km",
    "tidal_deformability": "1",
    "moment_of_inertia_1e45_g_cm2": "1e45 g cm^2",
    "mass_max_margin_msun": "Msun",
    "causality_margin": "1",
    "out_of_box": "bool",
}


class ExportError(InputError):
    """A model or report cannot be exported safely (names, metadata, or a failed self-check)."""


@dataclass(frozen=True)
class ExportResult:
    """What :func:`export_model` wrote.

    Attributes
    ----------
    path : Path
    size_bytes : int
    payload_sha256 : str
    max_rel_diff : float
        Largest relative difference between the file and the library model on
        the self-check points (all queries, gradients and sigma included).
    namespaces : dict
        Per array namespace: a one-line verdict written into the header.
    """

    path: Path
    size_bytes: int
    payload_sha256: str
    max_rel_diff: float
    namespaces: dict = field(default_factory=dict)


# ---------------------------------------------------------------------------
# inert text
# ---------------------------------------------------------------------------


def _text(s) -> str:
    """Any metadata string as inert header text: JSON-escaped ASCII without the surrounding quotes."""
    return json.dumps(str(s), ensure_ascii=True)[1:-1]


def _identifier(name, what: str) -> str:
    if not isinstance(name, str) or not _IDENTIFIER.match(name):
        raise ExportError(f"{what} {_text(name)!r} is not a Python identifier (letters, digits and _); "
                          "exported files accept only such names.")
    return name


def _plain(obj, where="report"):
    """JSON-like data reduced to literals: dict (str keys), list, str, bool, int, finite float or None."""
    try:
        return jsonable(obj, where=where)  # nan becomes None: nan is not a Python literal
    except TypeError as exc:
        raise ExportError(str(exc)) from None


def _literal(obj) -> str:
    """``repr`` of plain data, checked to read back as the same literal."""
    src = repr(obj)
    if ast.literal_eval(src) != obj:
        raise ExportError(f"internal: {src[:60]} does not read back as a literal.")
    return src


# ---------------------------------------------------------------------------
# inputs
# ---------------------------------------------------------------------------


def _read_report(report) -> dict | None:
    if report is None or isinstance(report, dict):
        return report
    path = Path(report)
    if path.is_dir():
        path = path / "report.json"
    if not path.is_file():
        raise ExportError(f"{path}: no such report (a check of the model against held-out exact solves writes one "
                          "into its report folder).")
    from .._jsonfile import read_json

    rep = read_json(path, ExportError)
    if not isinstance(rep, dict) or rep.get("format") != "tovforge-check":
        raise ExportError(f"{path}: not a report of `tovforge check` (format {rep.get('format') if isinstance(rep, dict) else None!r}).")
    return rep


def _check_report_matches(rep: dict, meta: dict) -> None:
    got = rep.get("model", {})
    tr = meta.get("training", {})
    want = {"kind": meta.get("kind"), "n_train": tr.get("n_train"),
            "training_grid_sha256": tr.get("grid_content_sha256", "")}
    for k, v in want.items():
        if got.get(k) != v:
            raise ExportError(f"the report was made for another model: its {k} is {_text(got.get(k))!r}, "
                              f"the model's is {_text(v)!r}.")


def _source(package: str, name: str) -> str:
    return importlib.resources.files(package).joinpath(name).read_text(encoding="utf-8")


# ---------------------------------------------------------------------------
# payload
# ---------------------------------------------------------------------------


def _payload(arrays: dict) -> tuple[bytes, list]:
    """zlib stream of the arrays as .npy records (sorted names), and their (name, dtype, shape)."""
    buf = io.BytesIO()
    index = []
    for name in sorted(arrays):
        a = np.asarray(arrays[name])
        if a.dtype.kind not in "fiu" or a.dtype.hasobject:
            raise ExportError(f"model array {name!r} has dtype {a.dtype}; only numbers are exported.")
        # keep the memory order (C or Fortran, as .npy records it): BLAS sums in an order that
        # follows the layout, and ill-conditioned GP weights turn that into differences of 1e-7
        a = a.astype(a.dtype.newbyteorder("<"), order="K", copy=False)
        np.lib.format.write_array(buf, a, allow_pickle=False)
        index.append((_identifier(name, "model array name"), a.dtype.str, tuple(int(s) for s in a.shape)))
    return zlib.compress(buf.getvalue(), 9), index


# ---------------------------------------------------------------------------
# header
# ---------------------------------------------------------------------------


def _fmt(v, spec=".3g") -> str:
    return "nan" if v is None else format(float(v), spec)


def _error_table(check: dict | None) -> list[str]:
    if not check:
        return ["No held-out check was supplied at export time: this file's accuracy is unknown.",
                "(Export with --report REPORT.json from `tovforge check` to record it here.)"]
    h = check["holdout"]
    lines = [f"Held-out grid {_text(h.get('path'))} (content sha256 {_text(h.get('content_sha256'))}):",
             f"{h.get('n_used')} of {h.get('n_points')} exact EOS used, {h.get('n_star_comparisons')} stars "
             f"at masses {_text(h.get('mass_rule'))} Msun; checked with tovforge {_text(check.get('tovforge_version'))} "
             f"on {_text(check.get('created_utc'))}.",
             "Absolute errors in Msun (masses), km (radii), 1e45 g cm^2 (I); Lambda, k2 and c_s^2 are dimensionless.",
             "",
             f"    {'output':<34}{'abs median':>11}{'abs p95':>10}{'abs max':>10}{'rel median':>11}{'rel p95':>10}"
             f"{'rel max':>10}"]
    for name, s in check["errors"].items():
        lines.append(f"    {_text(name):<34}{_fmt(s.get('abs_median')):>11}{_fmt(s.get('abs_p95')):>10}"
                     f"{_fmt(s.get('abs_max')):>10}{_fmt(s.get('rel_median'), '.2e'):>11}"
                     f"{_fmt(s.get('rel_p95'), '.2e'):>10}{_fmt(s.get('rel_max'), '.2e'):>10}")
    if check.get("targets"):
        lines += ["", "    Targets of the project for the 95th percentile:"]
        for key, t in check["targets"].items():
            verdict = "meets the goal" if t.get("meets_goal") else (
                "meets the floor" if t.get("meets_floor") else "MISSES THE FLOOR")
            lines.append(f"    {_text(key):<24}{_fmt(t.get('value'), '.4g')} {_text(t.get('unit'))} "
                         f"(floor {_fmt(t.get('floor'), 'g')}, goal {_fmt(t.get('goal'), 'g')}): {verdict}")
    if check.get("calibration"):
        lines += ["", "    Sigma calibration (fraction of held-out errors inside 1 and 2 sigma; a Gaussian gives "
                      "0.683 and 0.954):"]
        for key, c in check["calibration"].items():
            lines.append(f"    {_text(key):<24}{_fmt(c.get('within_1_sigma'), '.3f')}   "
                         f"{_fmt(c.get('within_2_sigma'), '.3f')}")
    return lines


def _inputs_text(names, arrays) -> list[str]:
    """Header lines on what the model takes as inputs (warped parameters, stretched box), if anything."""
    lines = []
    if arrays.get("warp_log") is not None:
        warped = [f"ln({_text(n)} - {float(c):g})" for n, c, f in zip(names, arrays["warp_shift"], arrays["warp_log"])
                  if f]
        lines.append(f"inputs           the model sees {', '.join(warped)} (the rest as given)")
    if arrays.get("input_scale") is not None:
        stretch = ", ".join(f"{_text(n)} {float(c):.3g}" for n, c in zip(names, arrays["input_scale"]))
        lines.append(f"                 distances in a stretched box (each parameter spans [0, c]: {stretch})")
    return lines


def _header(meta: dict, arrays: dict, check, info: dict, namespaces: dict) -> str:
    names = meta["parameters"]
    units = meta.get("parameter_units", ["?"] * len(names))
    tr = meta.get("training", {})
    kind = meta["kind"]
    n_groups = int(np.asarray(arrays["length"]).shape[0]) if kind == "gp" else None
    shared = arrays.get("group_kernel") if kind == "gp" else None
    n_kernels = len(set(np.asarray(shared).tolist())) if shared is not None else n_groups
    mod = info["module"]
    w = max(len(n) for n in names)
    lines = [
        f"Standalone evaluator of a tovforge surrogate of the {_text(meta['family'])} EOS family ({kind}).",
        "",
        f"Generated by tovforge {_text(__version__)} (git commit {_text(info['commit'])}) on {info['created']}.",
        "Needs NumPy only (2.x, or 1.26 through a stand-in for the array-API names it lacks): this file",
        "imports numpy and the Python standard library (base64, hashlib, io, math, zlib) and nothing else.",
        "Read it before you run it: it is fixed code and numbers.  The",
        "numbers are one base64 string near the end (a zlib stream of .npy arrays, read with",
        "allow_pickle=False); importing the file checks their SHA-256 against the one below and refuses to",
        "load if they differ.",
        "",
        "Model",
        "-----",
        f"family           {_text(meta['family'])}",
        f"kind             {kind}" + (f", {n_groups} output groups, {n_kernels} kernels" if n_groups else "") + ":",
        f"                 {_KIND_TEXT.get(kind, '')}",
        *_inputs_text(names, arrays),
        f"training         {tr.get('n_train')} exact EOS ({tr.get('grid_points_used', '?')} of "
        f"{tr.get('grid_points', '?')} grid points usable), grid {_text(tr.get('grid_path', '?'))}",
        f"                 {_text(tr.get('grid_description', ''))}",
        f"                 grid content sha256 {_text(tr.get('grid_content_sha256', '?'))}",
        f"                 trained {_text(tr.get('created_utc', '?'))} with tovforge {_text(tr.get('tovforge_version', '?'))}, "
        f"NumPy {_text(tr.get('numpy_version', '?'))}",
        f"payload sha256   {info['payload_sha256']}",
        f"runtime sha256   {info['runtime_sha256']} (tovforge/surrogate/_runtime.py, copied verbatim)",
        "",
        "Parameters theta, in this order, and the box outside which every answer is NaN:",
    ]
    for n, u, lo, hi in zip(names, units, arrays["lo"], arrays["hi"]):
        lines.append(f"    {n:<{w}}  [{float(lo):g}, {float(hi):g}]  {_text(u)}")
    umax = float(arrays["u_nodes"][-1])
    lines += [
        "",
        "Outputs: M_max, the central pressure and the largest c_s^2 at M_max, and R, Lambda, I along the stable",
        "branch (the connected branch up to the first maximum of M), emulated at "
        f"{len(arrays['u_nodes'])} nodes of u = sqrt(1 - M/M_max)",
        f"in [0, {umax:g}], i.e. from {1 - umax ** 2:.4g} M_max up to M_max; a query at a mass goes through u",
        "and a cubic spline in it.  Above M_max, below the lowest emulated mass, or outside the box: NaN.",
        f"mass_max_margin_msun is M_max minus the floor {float(meta['outputs'].get('mass_floor_msun', 0.0)):g} Msun "
        "of the training grid; causality_margin is 1 - max c_s^2.",
        "",
        "Accuracy (tovforge check against held-out exact solves)",
        "-------------------------------------------------------",
        *_error_table(check),
        "",
        "Usage",
        "-----",
        f"    import {mod}",
        f"    theta = [{', '.join(format(0.5 * (float(a) + float(b)), 'g') for a, b in zip(arrays['lo'], arrays['hi']))}]"
        f"   # {', '.join(names)}",
        f"    {mod}.mass_max(theta)                          # Msun",
        f"    {mod}.radius(theta, 1.4)                       # km",
        f"    {mod}.radius(theta, [1.2, 1.4], return_grad=True)   # values (2,) and d/dtheta (2, {len(names)})",
        f"    {mod}.tidal_deformability(thetas, 1.4)         # thetas of shape (n, {len(names)}) -> (n,)",
        f"    {mod}.radius(thetas, masses[:, None])          # one mass per theta -> (n, 1)",
        f"    {mod}.curve(theta, n=100)                      # masses, radii, Lambdas along the branch",
        f"    {mod}.predict(theta)                           # everything, with sigma for GP models",
        f"    {mod}.radius(theta, 2.9, strict=True)          # ValueError instead of NaN",
        "Queries accept NumPy arrays; JAX arrays; PyTorch tensors through array-api-compat (pip install",
        "array-api-compat); results stay in the caller's namespace.  JAX needs",
        "jax.config.update('jax_enable_x64', True) for float64.",
        "",
        "Array namespaces run at export time (every query, with gradients and sigma, on "
        f"{_SELF_CHECK_POINTS} points;",
        "largest relative difference to the tovforge library model for numpy, to numpy for the others;",
        "differences up to about the rounding noise of the model, measured on the last line, are rounding",
        "in another library, not errors):",
    ]
    lines += [f"    {_text(k)}: {_text(v)}" for k, v in namespaces.items()]
    return "\n".join(lines)


# ---------------------------------------------------------------------------
# assembly
# ---------------------------------------------------------------------------


def _assemble(header: str, constants: list[str], payload_b64: str) -> str:
    runtime = _source("tovforge.surrogate", "_runtime.py")
    template = _source("tovforge.export", "_evaluator.py")
    if MARKER not in template:
        raise ExportError("internal: the evaluator template lost its marker line.")
    interface = template.split(MARKER, 1)[1]
    chunks = [payload_b64[i:i + _LINE] for i in range(0, len(payload_b64), _LINE)]
    rule = "# " + "=" * 98
    parts = [
        f'r"""{header}\n"""\n',
        "import base64\nimport hashlib\nimport io\nimport math\nimport zlib\n\nimport numpy as np\n\n",
        f"{rule}\n# Prediction runtime: a verbatim copy of tovforge/surrogate/_runtime.py\n{rule}\n\n",
        runtime.rstrip("\n") + "\n\n\n",
        f"{rule}\n# The model: constants and numbers\n{rule}\n\n",
        "\n".join(constants) + "\n",
        "_PAYLOAD = (\n" + "".join(f'    "{c}"\n' for c in chunks) + ")\n\n\n",
        f"{rule}\n# Interface: a verbatim copy of tovforge/export/_evaluator.py\n{rule}\n\n",
        interface.strip("\n") + "\n\n\n",
        "_M = _load_model()\n",
    ]
    return "".join(parts)


def _constants(meta: dict, arrays: dict, check, info: dict, index: list) -> list[str]:
    out = meta["outputs"]
    scalar_index = tuple((_identifier(k, "output name"), int(v)) for k, v in out["index"].items())
    record = _plain({
        **info["provenance"],
        "training": {k: v for k, v in meta.get("training", {}).items()
                     if isinstance(v, (str, int, float, bool)) or v is None},
        "model_arrays_sha256": meta.get("arrays_sha256", ""),
    }, "model.json")
    lines = [
        f"FAMILY = {_literal(str(meta['family']))}",
        f"KIND = {_literal(str(meta['kind']))}",
        f"PARAMETERS = {_literal(tuple(meta['parameters']))}",
        f"UNITS = {_literal(tuple(str(u) for u in meta.get('parameter_units', ['?'] * len(meta['parameters']))))}",
        f"BOUNDS = {_literal(tuple((float(a), float(b)) for a, b in zip(arrays['lo'], arrays['hi'])))}",
        f"OUTPUTS = {_literal(tuple(_OUTPUT_UNITS))}",
        f"OUTPUT_UNITS = {_literal(dict(_OUTPUT_UNITS))}",
        f"MASS_FLOOR_MSUN = {_literal(float(out.get('mass_floor_msun', 0.0)))}",
        "#: The held-out error table of the header, as data (None: no check was supplied).",
        f"CHECK = {_literal(check)}",
        f"PROVENANCE = {_literal(record)}",
        f"PAYLOAD_SHA256 = {_literal(info['payload_sha256'])}",
        f"_I_MASS_MAX = {int(out['index']['mass_max_msun'])}",
        f"_SCALAR_INDEX = {_literal(scalar_index)}",
        f"_U_MAX = {_literal(float(arrays['u_nodes'][-1]))}",
        f"_ARRAYS = {_literal(tuple(index))}",
    ]
    return lines


def _validated(model):
    meta = model.meta
    if meta.get("kind") not in _KIND_TEXT:
        raise ExportError(f"model kind {_text(meta.get('kind'))!r} cannot be exported (known: {', '.join(_KIND_TEXT)}).")
    names = meta.get("parameters")
    if not names:
        raise ExportError("the model names no parameters.")
    for n in names:
        _identifier(n, "parameter name")
    if len(set(names)) != len(names):
        raise ExportError(f"parameter names repeat: {', '.join(names)}.")
    for k in meta["outputs"]["index"]:
        _identifier(k, "output name")
    if "mass_max_msun" not in meta["outputs"]["index"]:
        raise ExportError("the model does not predict mass_max_msun.")
    return meta


def _import_file(path: Path, name: str):
    """Import a generated file as module ``name`` without leaving it in sys.modules."""
    spec = importlib.util.spec_from_file_location(name, path)
    mod = importlib.util.module_from_spec(spec)
    try:
        spec.loader.exec_module(mod)
    finally:
        sys.modules.pop(name, None)
    return mod


def export_model(model, out, report=None, *, namespaces=NAMESPACES, created_utc: str | None = None) -> ExportResult:
    """Write ``model`` as one standalone Python file that needs NumPy only.

    Parameters
    ----------
    model : Surrogate or path
        A trained surrogate, or its folder (``tovforge train --out``).
    out : path
        The ``.py`` file to write; its stem must be a Python identifier (the
        module name users import).
    report : path or dict, optional
        ``report.json`` of ``tovforge check`` for this model (or its folder):
        its error table goes into the header and into ``CHECK``.
    namespaces : sequence of str
        Array namespaces to run the new file under before it is kept (those
        not installed are reported as such in the header); NumPy always.
    created_utc : str, optional
        Creation time written into the header (default: now).

    Returns
    -------
    ExportResult

    Raises
    ------
    ExportError
        For names that are not identifiers, a report of another model, or a
        file that does not reproduce the library model to 1e-10 relative.
    """
    from ..surrogate import Surrogate, load

    if not isinstance(model, Surrogate):
        model = load(model)
    meta = _validated(model)
    out = Path(out)
    if out.suffix != ".py" or not _IDENTIFIER.match(out.stem):
        raise ExportError(f"out {_text(out)}: the file must end in .py and its stem must be a Python identifier "
                          "(it is the module name users import).")
    unknown = [n for n in namespaces if n not in NAMESPACES]
    if unknown:
        raise ExportError(f"namespaces: unknown namespace {_text(unknown[0])!r}; choose from {', '.join(NAMESPACES)}.")
    rep = _read_report(report)
    check = None
    if rep is not None:
        _check_report_matches(rep, meta)
        check = _plain({k: rep.get(k) for k in ("created_utc", "tovforge_version", "holdout", "errors", "targets",
                                                 "calibration")}, "report")
        for k in ("holdout", "errors"):
            if not isinstance(check.get(k), dict):
                raise ExportError(f"report: missing {k!r}.")
        check["holdout"].pop("masses_msun", None)
    arrays = {k: np.asarray(v) for k, v in model.arrays.items()}
    raw, index = _payload(arrays)
    runtime = _source("tovforge.surrogate", "_runtime.py")
    prov = provenance(created_utc=created_utc)
    info = {
        "module": out.stem,
        "provenance": prov,
        "commit": prov["git_commit"],
        "created": prov["created_utc"],
        "payload_sha256": hashlib.sha256(raw).hexdigest(),
        "runtime_sha256": hashlib.sha256(runtime.encode("utf-8")).hexdigest(),
    }
    b64 = base64.b64encode(raw).decode("ascii")
    constants = _constants(meta, arrays, check, info, index)

    def render(ns_lines: dict) -> str:
        header = _header(meta, arrays, check, info, ns_lines)
        src = _assemble(header, constants, b64)
        tree = ast.parse(src)
        if ast.get_docstring(tree, clean=False) != header + "\n":
            raise ExportError("internal: metadata escaped the header docstring; refusing to write the file.")
        return src

    out.parent.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory() as tmp:
        probe = Path(tmp) / out.name
        probe.write_text(render({"(pending)": "run at export time"}), encoding="utf-8")
        worst = _self_check(model, probe)
        noise = rounding_noise(model, check_points(model.bounds, _SELF_CHECK_POINTS))
        ns = {"numpy": f"NumPy {np.__version__}: {worst:.1e} (the reference)"}
        ns.update(_namespace_checks(probe, [n for n in namespaces if n != "numpy"], noise))
        ns["rounding noise of this model"] = (
            f"{noise:.1e} (outputs and gradients change by this much when the sums over training points "
            "run in reverse order; differences of this size are rounding)")
    src = render(ns)
    tmp_out = out.with_name(f".{out.name}.tmp")
    tmp_out.write_text(src, encoding="utf-8")
    os.replace(tmp_out, out)
    return ExportResult(out, out.stat().st_size, info["payload_sha256"], worst, ns)


# ---------------------------------------------------------------------------
# self-checks before a file is kept
# ---------------------------------------------------------------------------


def check_points(bounds: np.ndarray, n: int, seed: int = 20260501) -> np.ndarray:
    """Random points of the box with a few just outside it (fixed seed)."""
    rng = np.random.default_rng(seed)
    lo, hi = bounds[:, 0], bounds[:, 1]
    theta = lo + (hi - lo) * rng.random((n, len(lo)))
    theta[0] = lo - 0.01 * (hi - lo)
    theta[1] = hi
    return theta


def max_rel_diff(a, b) -> float:
    """Largest |a - b| relative to the largest |b| of each array (NaN must match NaN)."""
    a, b = np.asarray(a, float), np.asarray(b, float)
    if a.shape != b.shape:
        return math.inf
    if not np.array_equal(np.isnan(a), np.isnan(b)):
        return math.inf
    fin = np.isfinite(b)
    if not fin.any():
        return 0.0
    scale = np.max(np.abs(b[fin]))
    return float(np.max(np.abs(a[fin] - b[fin])) / scale) if scale > 0 else float(np.max(np.abs(a[fin])))


_QUERIES = ("radius", "tidal_deformability", "moment_of_inertia", "k2")
_MASSES = (1.0, 1.4, 2.0)


def rounding_noise(model, theta) -> float:
    """How much the model's outputs and gradients move when its weight sums run in another order.

    The training points and their weights are taken in reverse order, so that
    every kernel sum adds the same terms in another order.  Weights that cancel
    strongly (long GP length scales, a tiny nugget) amplify the rounding; the
    result says what another library, BLAS or machine can be expected to
    reproduce.  Zero for tensor splines (no sum over training points).
    """
    from ..surrogate import _runtime as rt

    flipped = dict(model._m)
    if "X" in flipped:
        flipped["X"] = np.array(flipped["X"][::-1])
        flipped["alpha"] = np.array(flipped["alpha"][::-1])
    worst = 0.0
    (ya, _, dya), (yb, _, dyb) = rt.outputs(np, model._m, theta, True), rt.outputs(np, flipped, theta, True)
    pairs = [(ya, yb), (dya, dyb)]
    masses = np.broadcast_to(np.asarray(_MASSES), (len(theta), len(_MASSES)))
    for q in ("radius_km", "tidal_deformability", "moment_of_inertia", "k2"):  # as the queries amplify it
        va, ga, _ = rt.curve_at_mass(np, model._m, ya, dya, None, masses, q)
        vb, gb, _ = rt.curve_at_mass(np, flipped, yb, dyb, None, masses, q)
        pairs += [(va, vb), (ga, gb)]
    for a, b in pairs:
        worst = max(worst, max_rel_diff(b, a))
    return worst


def _self_check(model, path: Path) -> float:
    """Import the new file and compare every query with the library model; return the worst difference."""
    mod = _import_file(path, f"_tovforge_export_probe_{os.getpid()}")
    theta = check_points(model.bounds, _SELF_CHECK_POINTS)
    gp = model.kind == "gp"
    pairs = [(mod.mass_max(theta, return_grad=True, return_std=gp),
              model.mass_max(theta, return_grad=True, return_std=gp))]
    for q in _QUERIES:
        pairs.append((getattr(mod, q)(theta, _MASSES, return_grad=True, return_std=gp),
                      getattr(model, q)(theta, _MASSES, return_grad=True, return_std=gp)))
    pairs.append((mod.curve(theta, n=50), model.curve(theta, n=50)))
    p, ref = mod.predict(theta), model.predict(theta, return_std=gp)
    for k in ref.__dataclass_fields__:
        if k != "std":
            pairs.append(((p[k],), (getattr(ref, k),)))
    if gp:
        pairs += [((p["std"][k],), (v,)) for k, v in ref.std.items()]
    worst = 0.0
    for got, want in pairs:
        for a, b in zip(got, want):
            worst = max(worst, max_rel_diff(a, b))
    if not worst <= _RTOL:
        raise ExportError(f"the generated file differs from the library model by {worst:.2e} (relative) on the "
                          f"self-check points (allowed {_RTOL:g}); the file was not written.")
    return worst


_NAMESPACE_PROBE = r'''
import importlib.util, json, sys
import numpy as np
path, which = sys.argv[1], sys.argv[2]
spec = importlib.util.spec_from_file_location("probe", path)
mod = importlib.util.module_from_spec(spec); spec.loader.exec_module(mod)
theta = np.asarray(json.loads(sys.argv[3]))
masses = np.asarray([1.0, 1.4, 2.0])
gp = mod.KIND == "gp"
try:
    if which == "torch":
        import torch, array_api_compat
        conv, back, Arr = torch.asarray, (lambda a: a.detach().numpy()), torch.Tensor
        label = f"PyTorch {torch.__version__} via array-api-compat {array_api_compat.__version__}"
    else:
        import jax
        jax.config.update("jax_enable_x64", True)
        import jax.numpy as jnp
        conv, back, Arr = jnp.asarray, np.asarray, jax.Array
        label = f"JAX {jax.__version__} (x64)"
except ImportError as exc:
    print(json.dumps({"label": f"not installed ({exc.name})", "worst": None})); sys.exit(0)
def rel(a, b):
    a, b = np.asarray(a, float), np.asarray(b, float)
    if a.shape != b.shape or not np.array_equal(np.isnan(a), np.isnan(b)):
        return float("inf")
    f = np.isfinite(b)
    s = np.max(np.abs(b[f])) if f.any() else 0.0
    return float(np.max(np.abs(a[f] - b[f])) / s) if s > 0 else 0.0
worst, foreign = 0.0, True
calls = [("mass_max", (), {"return_grad": True, "return_std": gp})]
calls += [(q, (masses,), {"return_grad": True, "return_std": gp}) for q in ("radius", "tidal_deformability", "moment_of_inertia", "k2")]
calls += [("curve", (), {"n": 50}), ("in_domain", (), {})]
for name, extra, kw in calls:
    ref = getattr(mod, name)(theta, *extra, **kw)
    got = getattr(mod, name)(conv(theta), *[conv(e) for e in extra], **kw)
    ref = ref if isinstance(ref, tuple) else (ref,)
    got = got if isinstance(got, tuple) else (got,)
    for a, b in zip(got, ref):
        foreign &= isinstance(a, Arr)
        worst = max(worst, rel(back(a), b))
p_ref, p = mod.predict(theta), mod.predict(conv(theta))
for k, v in p_ref.items():
    if k == "std":
        for s, sv in (v or {}).items():
            worst = max(worst, rel(back(p["std"][s]), sv))
    else:
        foreign &= isinstance(p[k], Arr)
        worst = max(worst, rel(back(p[k]), v))
extra = ""
if which == "jax":
    g_auto = jax.vmap(jax.grad(lambda t: mod.radius(t, 1.4)))(jnp.asarray(theta[2:10]))
    g_ana = mod.radius(jnp.asarray(theta[2:10]), jnp.asarray(1.4)[None, None], return_grad=True)[1][:, 0, :]
    ok = np.isfinite(np.asarray(g_ana))
    extra = f"; jax.grad agrees with return_grad to {rel(np.asarray(g_auto)[ok], np.asarray(g_ana)[ok]):.1e}"
print(json.dumps({"label": label + ("" if foreign else " (RESULTS LEFT THE NAMESPACE)") + extra, "worst": worst}))
'''


def _namespace_checks(path: Path, which, noise: float = 0.0) -> dict:
    """Run the file under other array namespaces, in a subprocess each; one verdict line per namespace."""
    theta = check_points(np.array(_bounds_of(path)), _SELF_CHECK_POINTS)
    out = {}
    for ns in which:
        try:
            r = subprocess.run([sys.executable, "-c", _NAMESPACE_PROBE, str(path), ns, json.dumps(theta.tolist())],
                               capture_output=True, text=True, timeout=600)
            res = json.loads(r.stdout.strip().splitlines()[-1]) if r.returncode == 0 else None
        except (OSError, subprocess.SubprocessError, ValueError, IndexError):
            res = None
        if res is None:
            tail = (r.stderr.strip().splitlines() or ["no output"])[-1] if "r" in locals() else "did not start"
            out[ns] = f"FAILED ({tail[:120]})"
        elif res["worst"] is None:
            out[ns] = res["label"]
        else:
            limit = max(_RTOL_OTHER, 10.0 * noise)
            verdict = "" if res["worst"] <= limit else f" (ABOVE {limit:.1e}: do not rely on it)"
            out[ns] = f"{res['label']}: {res['worst']:.1e}{verdict}"
    return out


def _bounds_of(path: Path):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    for node in tree.body:
        if isinstance(node, ast.Assign) and getattr(node.targets[0], "id", None) == "BOUNDS":
            return ast.literal_eval(node.value)
    raise ExportError(f"{path}: no BOUNDS.")
