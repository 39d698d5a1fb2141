"""Writing a trained surrogate as one standalone, NumPy-only Python file.

The file is, in order: a header docstring a person reads before running
anything; the imports (``base64``, ``dataclasses``, ``hashlib``, ``io``,
``math``, ``zlib``, ``numpy``); the prediction runtime copied verbatim from
:mod:`tovforge.surrogate._runtime` and the query contract from
:mod:`tovforge.surrogate._contract`; the model's constants as Python
literals; the numbers as one base64 string (:mod:`._payload`); and the fixed
interface code copied verbatim from :mod:`tovforge.export._evaluator`.
Rendering lives in :mod:`._render`, the checks a new file passes before it
is kept in :mod:`._verify` (and :mod:`._probe` for other namespaces).
"""

from __future__ import annotations

import hashlib
import keyword
import sys
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .._files import check_output, publish, remove_litter, temp_path
from .._provenance import provenance
from ..surrogate import CheckReport
from ..surrogate._check import read_report
from ..surrogate._kinds import COMMON_STATIC, METHODS
from ..surrogate._runtime import shipped_arrays
from ._codegen import generate
from ._payload import pack, seal
from ._render import (SELF_CHECK_POINTS, ExportError, constants, header, identifier, is_identifier, plain, render,
                      source, text)
from ._verify import check_points, namespace_checks, rounding_noise, self_check

__all__ = ["export_model", "ExportResult", "NAMESPACES", "check_module_name"]

#: Array namespaces the exporter runs each new file under (when installed) and names in its header.
NAMESPACES = ("numpy", "torch", "jax")
#: Modules an exported file must not shadow besides the standard library: what it and its users import.
_TAKEN_NAMES = frozenset({"numpy", "tovforge", "scipy", "torch", "jax", "array_api_compat", "h5py", "sklearn",
                          "matplotlib", "emcee", "dask", "joblib", "typer", "pytest"})


def check_module_name(out: Path) -> None:
    """Refuse an output whose stem is not a module name users can import safely.

    The stem must be a Python identifier, not a keyword (``class``), and not
    the name of a standard-library module or of NumPy and the libraries
    around it: a file ``numpy.py`` would shadow NumPy for every script
    started in its folder (the exported file itself included).

    Raises
    ------
    ExportError
    """
    stem = out.stem
    if out.suffix != ".py" or not is_identifier(stem):
        raise ExportError(f"out {text(out)}: the file must end in .py and its stem must be a Python identifier "
                          "(it is the module name users import).")
    why = ("is a Python keyword" if keyword.iskeyword(stem) else
           "is a module of Python's standard library" if stem in sys.stdlib_module_names else
           "is the name of a library tovforge and its users import" if stem in _TAKEN_NAMES else "")
    if why:
        raise ExportError(f"out {text(out)}: the module name {stem!r} {why}; a file of that name would break "
                          "imports in its folder: choose another name.")


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


def _report(report, model) -> dict | None:
    """The held-out check to record (``CHECK``), as plain data; refuses a report of another model."""
    if report is None:
        return None
    if isinstance(report, CheckReport):
        rep = report
    elif isinstance(report, dict):
        try:
            rep = CheckReport.from_json(report)
        except (TypeError, KeyError, ValueError, AttributeError) as exc:
            raise ExportError(f"report: incomplete check report ({exc}).") from None
    else:
        rep = read_report(report, ExportError)
    got, tr = rep.model, model.meta.training
    want = {"kind": model.kind, "method": model.method, "n_train": tr.n_train,
            "training_grid_sha256": tr.grid_content_sha256}
    if not got.method:  # a report from before the table of kinds: its "kind" named the method
        want["kind"] = want.pop("method")
    for k, v in want.items():
        if getattr(got, k) != v:
            raise ExportError(f"the report was made for another model: its {k} is {text(getattr(got, k))!r}, "
                              f"the model's is {text(v)!r}.")
    data = rep.to_json()
    check = plain({k: data.get(k) for k in ("created_utc", "tovforge_version", "holdout", "errors", "targets",
                                             "calibration", "trust")}, "report")
    regions = data.get("regions") or {}
    if "faces" in regions:  # the faces vs the interior (the bands of distance to M_max stay in the report)
        check["regions"] = plain({k: regions[k] for k in ("faces", "interior") if k in regions}, "report")
    check["holdout"].pop("masses_msun", None)
    return check


def _validated(model):
    """The model, if everything of it that reaches the source is safe to write."""
    meta = model.meta
    if meta.method not in METHODS:
        raise ExportError(f"model method {text(meta.method)!r} cannot be exported (known: {', '.join(METHODS)}).")
    names = meta.parameters
    if not names:
        raise ExportError("the model names no parameters.")
    for n in names:
        identifier(n, "parameter name")
    if len(set(names)) != len(names):
        raise ExportError(f"parameter names repeat: {', '.join(names)}.")
    for o in meta.outputs.scalars + meta.outputs.curves:
        identifier(o.name, "output name")
    if "mass_max_msun" not in [o.quantity for o in meta.outputs.scalars]:
        raise ExportError("the model does not predict mass_max_msun.")
    return model


def export_model(model, out, report=None, *, namespaces=NAMESPACES, created_utc: str | None = None,
                 overwrite: bool = False, store_weights: bool = False) -> ExportResult:
    """Write ``model`` as one standalone Python file that needs NumPy only.

    Parameters
    ----------
    model : Surrogate or path
        A trained surrogate, or its folder (``tovforge train --out``).
    out : path
        The ``.py`` file to write; its stem must be a Python identifier (the
        module name users import).
    report : CheckReport, dict or path, optional
        The report of ``tovforge check`` for this model (or ``report.json``,
        or its folder): its error table goes into the header and into ``CHECK``.
    namespaces : sequence of str
        Array namespaces to run the new file under before it is kept (those
        not installed are reported as such in the header); NumPy always.
    created_utc : str, optional
        Creation time written into the header (default: now).
    overwrite : bool
        Replace an existing file.
    store_weights : bool
        Local splines: store every cell's weights instead of solving the cells
        again at import from the training outputs.  The solve's rounding
        depends on the LAPACK and its thread count (measured: 3e-12 relative
        with another thread count, 1e-6 relative in Lambda with another LAPACK
        routine), so a file with stored weights reproduces the library's numbers
        as closely as the files of the other methods do (the same weights; only
        the sums' order can differ), at about 4 times the size (92 against 22.9 MB
        at 32,751 points) and without the import's solves (15 s at 32k on a quiet machine).
        Other methods always store their weights.

    Returns
    -------
    ExportResult

    Raises
    ------
    ExportError
        For names that are not identifiers (or shadow a keyword, a standard
        library module or NumPy), an unknown namespace, a report of another
        model, or a file that does not reproduce the library model to 1e-10
        relative.
    OutputExists
        ``out`` exists and ``overwrite`` is False.
    """
    from ..surrogate import Surrogate, load

    out = Path(out)
    check_module_name(out)
    check_output(out, "exported file", overwrite)
    if not isinstance(model, Surrogate):
        model = load(model)
    _validated(model)
    unknown = [n for n in namespaces if n not in NAMESPACES]
    if unknown:
        raise ExportError(f"namespaces: unknown namespace {text(unknown[0])!r}; choose from {', '.join(NAMESPACES)}.")
    check = _report(report, model)
    # local splines: the cells solved again at import from the training outputs, unless asked to store them
    payload = pack(model.arrays if store_weights else shipped_arrays(model.method, model.arrays))
    code = source("tovforge.surrogate", "_runtime.py") + source("tovforge.surrogate", "_contract.py")
    prov = provenance(created_utc=created_utc)
    info = {
        "module": out.stem,
        "provenance": prov,
        "commit": prov["git_commit"],
        "created": prov["created_utc"],
        "payload_sha256": payload.sha256,
        "runtime_sha256": hashlib.sha256(code.encode("utf-8")).hexdigest(),
        "static_arrays": COMMON_STATIC + model.method_info.static_arrays,
    }
    generated = generate(model)
    info["generated"] = (f"the kernel sums from the template surrogate/{generated.template}" if generated.template
                         else f"method {model.method} has no template: its general runtime part")
    if len(payload.index) < len(model.arrays):
        info["generated"] += "; its cells solved at import from the training outputs"
    lines = constants(model, check, info, payload.index)
    b64 = payload.lines()

    def write(path: Path, ns_lines: dict) -> None:
        with open(path, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(seal(render(header(model, check, info, ns_lines), lines, b64, generated.source)))

    with tempfile.TemporaryDirectory() as tmp:
        trial = Path(tmp) / out.name
        write(trial, {"(pending)": "run at export time"})
        worst = self_check(model, trial)
        noise = rounding_noise(model, check_points(model.bounds, SELF_CHECK_POINTS))
        ns = {"numpy": f"NumPy {np.__version__}: {worst:.1e} (the reference)"}
        ns.update(namespace_checks(trial, [n for n in namespaces if n != "numpy"], model.bounds, noise))
        ns["rounding noise of this model"] = (
            f"{noise:.1e} (outputs and gradients change by this much when the sums over training points "
            "run in reverse order; differences of this size are rounding)")
    remove_litter(out)
    tmp_out = temp_path(out)
    try:
        write(tmp_out, ns)
        publish(tmp_out, out, "exported file", overwrite)
    finally:
        tmp_out.unlink(missing_ok=True)
    return ExportResult(out, out.stat().st_size, payload.sha256, worst, ns)
