"""``tovforge grid info``: a readable summary of a grid file (or of a run in progress)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..status import Status
from ._spec import SCALARS
from ._store import _hash_datasets, open_grid_file

__all__ = ["describe_grid"]


def _fmt(x: float) -> str:
    return "nan" if not np.isfinite(x) else f"{x:.6g}"


def _range_rows(group, mask, units) -> list[str]:
    rows = []
    for name in group:
        ds = group[name]
        if ds.ndim == 0 or ds.shape[0] != mask.size:
            continue  # coordinates (u nodes, masses)
        vals = ds[...][mask]
        finite = np.isfinite(vals)
        lo = _fmt(np.min(vals[finite])) if finite.any() else "-"
        hi = _fmt(np.max(vals[finite])) if finite.any() else "-"
        unit = ds.attrs.get("unit", units.get(name, ("", ""))[0])
        rows.append(f"  {name:<38}{unit:<14}{lo:>13} .. {hi:<13} NaN: {int((~finite).sum())}")
    return rows


def _describe_parts(path: Path) -> str:
    from ._run import parts_folder

    parts = parts_folder(path)
    try:
        manifest = json.loads((parts / "manifest.json").read_text())
    except (OSError, ValueError):
        raise InputError(f"{path}: no such file.") from None
    n = manifest.get("n_chunks", 0)
    done = len(list(parts.glob("chunk-*.h5")))
    return (f"{path}: not assembled yet; {done} of {n} chunks finished in {parts} "
            f"(spec {manifest.get('spec_sha256', '')[:12]}..., started {manifest.get('started_utc', '?')}).\n"
            "Rerun the same `tovforge grid run` command to finish it.")


def describe_grid(path) -> str:
    """Counts by status, parameter coverage, output ranges and provenance of a grid file.

    Output ranges are over the points with status 0.  The content hash is
    recomputed and compared with the stored one.
    """
    path = Path(path)
    if not path.exists():
        return _describe_parts(path)
    with open_grid_file(path) as h5:
        try:
            return _describe(path, h5)
        except (OSError, KeyError, ValueError, TypeError, IndexError, AttributeError) as exc:
            raise InputError(f"{path}: damaged grid file ({type(exc).__name__}: {exc}).") from None


def _describe(path: Path, h5) -> str:
    """The text of :func:`describe_grid` for an open grid file."""
    a = {k: (v.decode() if isinstance(v, bytes) else v) for k, v in h5.attrs.items()}
    spec = json.loads(a["spec_json"])
    code = h5["status/code"][...]
    reason = h5["status/reason"].asstr()[...]
    ok = code == 0
    d = spec["design"]
    design = (f"regular, {' x '.join(str(v) for v in d['points_per_axis'].values())} points"
              if d["method"] == "regular" else f"{d['method']}, {d['points']} points, seed {d['seed']}")
    lines = [f"{path}: tovforge grid (format {a['format_version']}), family {a['family']}, {a['n_points']} points",
             f"design: {design}; chunks of {spec['chunk_size']}"]
    if a.get("description"):
        lines.append(f"description: {a['description']}")
    lines.append("")
    lines.append("status:")
    for c in Status:
        n = int((code == c).sum())
        example = ""
        if n and c:
            example = f"   e.g. {reason[np.flatnonzero(code == c)[0]]}"
        lines.append(f"  {int(c)} {c.label:<28}{n:>8}{example}")
    lines.append("")
    lines.append("parameters (box of the spec; values of all points):")
    names = h5["parameters/names"].asstr()[...]
    units = h5["parameters/units"].asstr()[...]
    box = h5["parameters/box"][...]
    theta = h5["parameters/values"][...]
    width = max(12, max((len(n) for n in names), default=0) + 2)  # e.g. log_p_transition
    for j, name in enumerate(names):
        unit = "" if units[j] == "1" else units[j]
        lines.append(f"  {name:<{width}}{unit:<18} box [{box[j, 0]:g}, {box[j, 1]:g}]   values "
                     f"[{theta[:, j].min():.6g}, {theta[:, j].max():.6g}]   distinct {np.unique(theta[:, j]).size}")
    lines.append("")
    lines.append(f"outputs over the {int(ok.sum())} points with status 0 (min .. max):")
    if "scalars" in h5:
        lines.append(" scalars")
        lines += _range_rows(h5["scalars"], ok, SCALARS)
    if "curves" in h5 and "u" in h5["curves"]:  # a spec may ask for no curves
        u = h5["curves/u"][...]
        lines.append(f" curves at {u.size} nodes of u = sqrt(1 - M/M_max) in [{u.min():g}, {u.max():g}]")
        lines += _range_rows(h5["curves"], ok, {})
    if "at_mass" in h5 and "masses_msun" in h5["at_mass"]:
        m = h5["at_mass/masses_msun"][...]
        lines.append(f" at masses {', '.join(f'{v:g}' for v in m)} Msun (NaN above M_max)")
        lines += _range_rows(h5["at_mass"], ok, {})
    lines.append("")
    digest = _hash_datasets(h5)
    check = "verified" if digest == a.get("content_sha256") else f"MISMATCH (recomputed {digest})"
    lines.append("provenance:")
    lines.append(f"  tovforge {a.get('tovforge_version')}, Python {a.get('python_version')}, numpy "
                 f"{a.get('numpy_version')}, scipy {a.get('scipy_version')}, h5py {a.get('h5py_version')}")
    lines.append(f"  started {a.get('started_utc')}, assembled {a.get('created_utc')}")
    lines.append(f"  solver settings {a.get('solver_settings_json')}")
    lines.append(f"  spec sha256 {a.get('spec_sha256')}")
    lines.append(f"  content sha256 {a.get('content_sha256')} ({check})")
    return "\n".join(lines)
