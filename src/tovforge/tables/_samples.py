"""Samples tables: observables for every row of a file of parameter samples.

A samples file (for example a posterior from a sampler run) is a CSV file
whose header names the parameters, or a ``.npy`` file holding a structured
array whose field names are the parameters.  Its columns must be exactly the
model's parameters (in any order; ``ignore`` names columns to skip, such as
weights).  Rows with NaN, non-numeric or missing values, or outside the
model's box, are left out and reported by number (data rows counted from 1,
the header not counted); the other rows are written, each with its number in
the ``sample`` column.

Besides the per-sample table, a *band* table gives, at each requested mass,
the median and the 5 % and 95 % quantiles (a 90 % band) of every per-mass
quantity over the samples that have a stable star of that mass, and the
fraction of samples that do; the band of each scalar quantity is stored in
the band table's metadata.
"""

from __future__ import annotations

import json
import re
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .._extras import pyplot, require
from .._files import check_output, publish, read_text, temp_path
from .._limits import check_memory
from .._progress import progress_bar
from ..errors import InputError
from ._box import CHUNK_ROWS, _check_masses
from ._quantities import QUANTITIES, mass_label, model_values, parameter_columns, provenance, quantity_columns
from ._write import Column, TableSummary, TableWriter, check_table_output

__all__ = ["Samples", "read_samples", "samples_table", "band_path", "skipped_text", "DEFAULT_SAMPLE_QUANTITIES",
           "DEFAULT_SAMPLE_MASSES", "QUANTILES", "PLOT_MAX_SAMPLES"]

DEFAULT_SAMPLE_QUANTITIES = ("mass_max", "radius", "lambda", "inertia")
DEFAULT_SAMPLE_MASSES = (1.0, 1.2, 1.4, 1.6, 1.8, 2.0)
#: Quantiles of the band: the median and a central 90 % interval.
QUANTILES = {"median": 0.5, "p05": 0.05, "p95": 0.95}
#: The M-R plot uses at most this many samples (every k-th row beyond it).
PLOT_MAX_SAMPLES = 50_000


@dataclass(frozen=True)
class Samples:
    """Parameter samples read from a file.

    Attributes
    ----------
    theta : ndarray, shape (n_good, n_parameters)
        Good rows, columns in the model's parameter order.
    rows : ndarray of int, shape (n_good,)
        Their data-row numbers (from 1).
    n_rows : int
        Data rows in the file.
    bad : tuple of (int, str)
        Rows left out and why (``"kind: detail"``).
    path : Path
    """

    theta: np.ndarray
    rows: np.ndarray
    n_rows: int
    bad: tuple
    path: Path


def _check_names(path, names, parameter_names, ignore):
    if "" in names:
        raise InputError(f"{path}: column {names.index('') + 1} has no name (an index column? save the file "
                         "without it, e.g. pandas' to_csv(..., index=False)).")
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise InputError(f"{path}: column {dup[0]!r} appears twice.")
    unknown_ignore = [n for n in ignore if n not in names]
    if unknown_ignore:
        raise InputError(f"ignore {unknown_ignore[0]}: {path} has no such column; its columns are {', '.join(names)}.")
    missing = [n for n in parameter_names if n not in names]
    if missing:
        raise InputError(f"{path}: missing column{'s' if len(missing) > 1 else ''} {', '.join(missing)}; the model "
                         f"needs {', '.join(parameter_names)}.")
    extra = [n for n in names if n not in parameter_names and n not in ignore]
    if extra:
        raise InputError(f"{path}: extra column{'s' if len(extra) > 1 else ''} {', '.join(extra)} "
                         f"(the model's parameters are {', '.join(parameter_names)}); remove "
                         f"{'them' if len(extra) > 1 else 'it'} or ignore {','.join(extra)}.")


def _read_csv(path: Path, parameter_names, ignore):
    text = read_text(path, "samples file")
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise InputError(f"{path}: no header line with the parameter names.")
    if len(lines) == 1:
        raise InputError(f"{path}: a header but no data rows; nothing to tabulate.")
    # "name [unit]" headers, as tovforge tables write them, are accepted
    names = [re.sub(r"\s*\[[^\]]*\]\s*$", "", h).strip() for h in lines[0].split(",")]
    _check_names(path, names, parameter_names, ignore)
    data = lines[1:]
    cols = [names.index(p) for p in parameter_names]
    n = len(data)
    bad = []
    ragged = any(ln.count(",") != len(names) - 1 for ln in data)
    try:
        if ragged:
            raise ValueError
        table = np.loadtxt(data, delimiter=",", ndmin=2, dtype=float, usecols=cols) if n else np.empty((0, len(cols)))
    except ValueError:
        # slow path, only for damaged files: find each bad line
        table = np.full((n, len(cols)), np.nan)
        for i, ln in enumerate(data):
            fields = ln.split(",")
            if len(fields) != len(names):
                bad.append((i + 1, f"wrong number of fields: {len(fields)} fields, expected {len(names)}"))
                continue
            try:
                table[i] = [float(fields[c]) for c in cols]
            except ValueError:
                c = next(c for c in cols if not _is_number(fields[c]))
                word = fields[c].strip()
                bad.append((i + 1, f"missing value: {names[c]} is empty" if not word else
                                   f"not a number: {names[c]} = {word!r}"))
    return table, bad


def _is_number(s: str) -> bool:
    try:
        float(s)
        return True
    except ValueError:
        return False


def _read_npy(path: Path, parameter_names, ignore):
    try:
        arr = np.load(path, allow_pickle=False)
    except EOFError:
        raise InputError(f"{path}: empty or truncated .npy file.") from None
    except (ValueError, OSError) as exc:
        raise InputError(f"{path}: cannot read ({exc}); save a structured array (no objects).") from None
    if not isinstance(arr, np.ndarray):
        raise InputError(f"{path}: not a .npy file (an .npz archive?); save one structured array with np.save.")
    if arr.dtype.names is None:
        raise InputError(f"{path}: a plain array has no column names; save a structured array whose fields are "
                         f"the parameters ({', '.join(parameter_names)}), e.g. with "
                         "numpy.lib.recfunctions.unstructured_to_structured.")
    if arr.ndim != 1:
        raise InputError(f"{path}: expected a 1-D structured array (one record per sample); got shape {arr.shape}.")
    _check_names(path, list(arr.dtype.names), parameter_names, ignore)
    if arr.size == 0:
        raise InputError(f"{path}: no samples (an empty array); nothing to tabulate.")
    try:
        table = np.stack([arr[p].astype(float) for p in parameter_names], axis=1) if arr.size else \
            np.empty((0, len(parameter_names)))
    except (TypeError, ValueError):
        raise InputError(f"{path}: the parameter fields must be numbers.") from None
    return table, []


def read_samples(path, parameter_names, ignore=(), bounds=None) -> Samples:
    """Read parameter samples and sort out the rows that cannot be used.

    Parameters
    ----------
    path : path-like
        ``.csv`` (header of names; ``#`` comment lines are skipped) or
        ``.npy`` (structured array, one field per parameter).
    parameter_names : sequence of str
        The columns the file must have (any order).
    ignore : sequence of str
        Further columns that may be present and are skipped.
    bounds : ndarray, shape (n_parameters, 2), optional
        Rows outside these bounds are left out too.

    Returns
    -------
    Samples

    Raises
    ------
    InputError
        Unreadable file, unknown extension, missing or extra columns.
    """
    path = Path(path)
    parameter_names = list(parameter_names)
    ignore = list(ignore)
    if not path.is_file():
        raise InputError(f"{path}: no such samples file.")
    # the rows are held in memory (text, parsed values and the outputs): about 30 times the file
    check_memory(30.0 * path.stat().st_size, f"{path} ({path.stat().st_size} bytes)",
                 "split the samples into several files")
    suffix = path.suffix.lower()
    if suffix == ".csv":
        table, bad = _read_csv(path, parameter_names, ignore)
    elif suffix == ".npy":
        table, bad = _read_npy(path, parameter_names, ignore)
    else:
        raise InputError(f"{path}: samples must be a .csv or a .npy file; got {suffix or 'no extension'!r}.")
    n = len(table)
    flagged = {r for r, _ in bad}
    nonfinite = ~np.all(np.isfinite(table), axis=1)
    for i in np.flatnonzero(nonfinite):
        if i + 1 not in flagged:
            j = int(np.flatnonzero(~np.isfinite(table[i]))[0])
            bad.append((int(i) + 1, f"NaN or infinite value: {parameter_names[j]} = {table[i, j]}"))
    if bounds is not None:
        lo, hi = np.asarray(bounds, float).T
        with np.errstate(invalid="ignore"):
            out = (table < lo) | (table > hi)
        for i in np.flatnonzero(out.any(axis=1) & ~nonfinite):
            j = int(np.flatnonzero(out[i])[0])
            bad.append((int(i) + 1, f"outside the model's box: {parameter_names[j]} = {table[i, j]:g} not in "
                                    f"[{lo[j]:g}, {hi[j]:g}]"))
    bad.sort()
    keep = np.ones(n, dtype=bool)
    keep[[r - 1 for r, _ in bad]] = False
    return Samples(table[keep], np.flatnonzero(keep) + 1, n, tuple(bad), path)


def skipped_text(skipped, n_rows: int, source, out) -> str:
    """One line saying which rows were left out, grouped by reason."""
    groups: dict[str, list] = {}
    for row, reason in skipped:
        kind, _, detail = reason.partition(": ")
        groups.setdefault(kind, []).append((row, detail))
    parts = []
    for kind, items in groups.items():
        rows = ", ".join(str(r) for r, _ in items[:8]) + (f" and {len(items) - 8} more" if len(items) > 8 else "")
        first = f"row {items[0][0]}: {items[0][1]}" if len(items) > 1 else items[0][1]
        parts.append(f"{kind} in row{'s' if len(items) > 1 else ''} {rows} ({first})")
    k = len(skipped)
    return (f"{source}: {k} of {n_rows} rows left out (data rows counted from 1): {'; '.join(parts)}; "
            f"the other {n_rows - k} rows are in {out}.")


def band_path(out) -> Path:
    """Default band table next to ``out``: ``post.csv`` -> ``post.band.csv``."""
    out = Path(out)
    return out.with_name(f"{out.stem}.band{out.suffix}")


def _quantiles(values: np.ndarray) -> dict:
    """Quantiles of the finite entries (NaN when there are none), without all-NaN warnings."""
    v = values[np.isfinite(values)]
    return {k: (float(np.quantile(v, q)) if v.size else float("nan")) for k, q in QUANTILES.items()}


def samples_table(out, model, samples, quantities=DEFAULT_SAMPLE_QUANTITIES, masses=DEFAULT_SAMPLE_MASSES, *,
                  band=None, plot=None, ignore=(), sigma: bool = True, progress: bool = True, stream=None,
                  command: str | None = None, chunk_rows: int = CHUNK_ROWS, overwrite: bool = False,
                  allow_mismatch: bool = False) -> TableSummary:
    """Write a table of observables for every row of a samples file, and its band.

    Parameters
    ----------
    out : path-like
        The per-sample table (``.csv``, ``.h5`` or ``.npz``).
    model : Surrogate or path-like
    samples : path-like
        ``.csv`` or ``.npy`` (see :func:`read_samples`).
    quantities : sequence of str
        Names from :data:`tovforge.tables.QUANTITIES`.
    masses : sequence of float
        Masses in Msun for the per-mass quantities and the band.
    band : path-like, optional
        The band table (default :func:`band_path` of ``out``).
    plot : path-like, optional
        PNG of the median and 90 % band of R(M) (matplotlib, Agg backend).
    ignore : sequence of str
        Columns of the samples file that are not parameters.
    sigma : bool
        Add ``sigma_`` columns (models with a sigma).
    progress, stream, command, chunk_rows
        As in :func:`tovforge.tables.box_table`.
    overwrite : bool
        Replace existing files (table, band and plot).
    allow_mismatch : bool
        Load a model folder whose arrays do not match their checksum (forensics).

    Returns
    -------
    TableSummary
        ``skipped`` lists the rows left out and ``error`` says so in one line;
        the table holds the other rows.
    """
    from ..surrogate import Surrogate, load

    t0 = time.monotonic()
    label = str(model)
    quantities = tuple(quantities)
    masses = _check_masses(quantities, masses)
    band = band_path(out) if band is None else Path(band)
    if Path(band).resolve() == Path(out).resolve():
        raise InputError(f"band {band}: the band table needs a file of its own, not that of the table.")
    if Path(samples).resolve() in (Path(out).resolve(), Path(band).resolve()):
        raise InputError(f"{samples}: the samples file would be overwritten; choose other output files.")
    check_table_output(out, overwrite)
    check_table_output(band, overwrite, what="band table")
    if plot is not None and Path(plot).suffix.lower() != ".png":
        raise InputError(f"plot {plot}: the plot is written as PNG; give a file name ending in .png.")
    if plot is not None:  # before the work, not after it
        check_output(plot, "plot", overwrite)
        require("matplotlib", "plots", "the samples plot")
    if not isinstance(model, Surrogate):
        model = load(model, allow_mismatch)
    names = model.parameter_names
    data = read_samples(samples, names, ignore, bounds=model.bounds)
    sigma = bool(sigma and model.has_std)
    units = model.parameter_units
    sample_col = Column("sample", "1", "data row of the samples file (from 1)", dtype="int64")
    qcols = quantity_columns(quantities, masses, sigma)
    columns = [sample_col] + parameter_columns(names, units) + qcols
    source = dict(source="model", model=label, model_kind=model.kind,
                  model_arrays_sha256=model.meta.arrays_sha256, family=model.family,
                  samples=str(samples), samples_rows=data.n_rows, samples_skipped=len(data.bad),
                  quantities_json=json.dumps(list(quantities)), masses_msun_json=json.dumps(list(masses)))
    meta = provenance(command, kind="samples", sigma=sigma, **source)
    # the band needs every value of a column at once: keep the value columns (not the sigmas), once
    kept = [c.name for c in qcols if not c.name.startswith("sigma_")]
    n = len(data.theta)
    store = {k: np.empty(n) for k in kept}
    bar = progress_bar(n, Path(out).name, unit="rows", enabled=progress, stream=stream)
    try:
        with TableWriter(out, columns, meta, overwrite=overwrite) as w:
            for start in range(0, n, chunk_rows):
                stop = min(start + chunk_rows, n)
                theta = data.theta[start:stop]
                vals = model_values(model, theta, quantities, masses, sigma)
                for k in kept:
                    store[k][start:stop] = vals[k]
                w.append({"sample": data.rows[start:stop], **dict(zip(names, theta.T)), **vals})
                bar.update(stop - start)
    finally:
        bar.close()
    _write_band(band, store, quantities, masses, n, provenance(command, kind="band", **source), overwrite)
    notes = [f"band table: {band}"]
    if plot is not None:
        _plot_band(plot, model, data.theta, masses, store.get("mass_max"), label, overwrite)
        notes.append(f"plot: {plot}")
    error = skipped_text(data.bad, data.n_rows, samples, out) if data.bad else ""
    return TableSummary(Path(out), w.n_rows, tuple(c.name for c in columns), time.monotonic() - t0, tuple(notes),
                        data.bad, error)


def _write_band(path, store, quantities, masses, n, meta, overwrite):
    per = [q for q in quantities if QUANTITIES[q].per_mass]
    scalars = [q for q in quantities if not QUANTITIES[q].per_mass]
    columns = [Column("mass", "Msun", "gravitational mass"),
               Column("fraction", "1", "fraction of the samples with a value at this mass (M_max >= mass)")]
    block = {"mass": np.asarray(masses, float), "fraction": np.empty(len(masses))}
    for q in per:
        unit = QUANTITIES[q].unit
        for k, level in QUANTILES.items():
            name = f"{q}_{k}"
            columns.append(Column(name, unit, f"{'median' if k == 'median' else f'{100 * level:g} % quantile'} of "
                                              f"{q} over the samples with a value at this mass"))
            block[name] = np.empty(len(masses))
        for j, m in enumerate(masses):
            values = store[f"{q}@{mass_label(m)}"]
            qs = _quantiles(values)
            for k in QUANTILES:
                block[f"{q}_{k}"][j] = qs[k]
            block["fraction"][j] = np.isfinite(values).sum() / n if n else float("nan")
    if not per:
        block["fraction"][:] = float("nan")
    for q in scalars:
        for k, v in _quantiles(store[q]).items():
            meta[f"{q}_{k}"] = v
    meta["samples_used"] = n
    with TableWriter(path, columns, meta, overwrite=overwrite) as w:
        w.append(block)


def _plot_band(path, model, theta, masses, mass_max, label, overwrite):
    """Median and 90 % band of R(M) over the samples (at most PLOT_MAX_SAMPLES of them)."""
    plt = pyplot("the samples plot")
    stride = max(1, -(-len(theta) // PLOT_MAX_SAMPLES))
    sub = theta[::stride]
    mm = model.mass_max(sub).value if mass_max is None else mass_max[::stride]
    fine = mm[np.isfinite(mm)]
    if fine.size == 0:
        raise InputError("no sample has a maximum mass; nothing to plot.")
    m_hi = float(np.quantile(fine, 0.95))
    m_lo = min(1.0, float(min(masses))) if masses else 1.0
    grid = np.linspace(m_lo, m_hi, 80)
    R = np.concatenate([model.radius(sub[i:i + CHUNK_ROWS], grid).value for i in range(0, len(sub), CHUNK_ROWS)])
    med, lo, hi, frac = (np.empty(grid.size) for _ in range(4))
    for j in range(grid.size):
        qs = _quantiles(R[:, j])
        med[j], lo[j], hi[j] = qs["median"], qs["p05"], qs["p95"]
        frac[j] = np.isfinite(R[:, j]).mean()
    show = frac >= 0.05  # above that the band rests on too few samples
    mq = _quantiles(mm)
    fig, ax = plt.subplots(figsize=(5.5, 5.0))
    ax.fill_betweenx(grid[show], lo[show], hi[show], color="tab:blue", alpha=0.3, lw=0, label="90 % band of R(M)")
    ax.plot(med[show], grid[show], color="tab:blue", lw=2, label="median R(M)")
    ax.axhspan(mq["p05"], mq["p95"], color="tab:red", alpha=0.12, lw=0, label="90 % band of M_max")
    ax.axhline(mq["median"], color="tab:red", lw=1, ls="--", label="median M_max")
    # the band at a mass is over the samples whose M_max exceeds it: say how many those are (issue 16)
    thin = np.flatnonzero(show & (frac < 0.5))
    if thin.size:
        ax.axhline(grid[thin[0]], color="grey", lw=0.8, ls="-.",
                   label=f"above {grid[thin[0]]:.2f} Msun: band over the < 50 % of samples reaching M")
    share = ax.twiny()
    share.plot(100.0 * frac, grid, color="0.45", lw=1, ls=":")
    share.set_xlim(0.0, 100.0)
    share.set_xlabel("samples with a star of mass M [%] (grey dotted line)", fontsize=8, color="0.35")
    share.tick_params(labelsize=7, colors="0.35")
    ax.set_xlabel("R [km]")
    ax.set_ylabel("M [Msun]")
    fig.suptitle(f"{len(theta)} samples, {model.kind} model" + (f" (every {stride}th)" if stride > 1 else ""),
                 fontsize=10)
    ax.legend(loc="lower left", fontsize=8)
    fig.text(0.01, 0.005, f"model: {label}", fontsize=6, color="0.4")
    fig.tight_layout()
    tmp = temp_path(path)
    try:
        fig.savefig(tmp, dpi=120, format="png")
        publish(tmp, path, "plot", overwrite)
    finally:
        plt.close(fig)
        tmp.unlink(missing_ok=True)
