"""Box tables: observables over a regular slice or full grid of EOS parameters.

Each parameter is either an axis (``n`` evenly spaced values from ``lo`` to
``hi``, both included) or fixed at one value.  Rows run over the tensor
product of the axes in C order: the first axis varies slowest, so a column
reshaped to ``shape`` (the axis lengths, in the order given) is the grid.

Values come from a trained surrogate (fast; models with a sigma add ``sigma_`` columns)
or from exact solves, which run through the grid machinery
(:func:`tovforge.grid.run_grid`: chunks in parallel on all cores or on a Dask
cluster, a progress bar, resumption after a crash); the exact table then has a
``status`` column with the grid's status codes.
"""

from __future__ import annotations

import json
import math
import time
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .._progress import progress_bar
from ..errors import InputError
from ._quantities import QUANTITIES, mass_label, model_values, parameter_columns, provenance, quantity_columns
from ._write import Column, TableSummary, TableWriter, check_table_output

__all__ = ["Axis", "BoxPlan", "box_table", "exact_box_table", "plan_box", "DEFAULT_QUANTITIES"]

DEFAULT_QUANTITIES = ("mass_max", "radius", "lambda", "causality_margin")
#: Rows predicted per model call: bounds the (rows x training points x d) work arrays of GP and RBF models.
CHUNK_ROWS = 1024


@dataclass(frozen=True)
class Axis:
    """One varied parameter of a box table.

    Attributes
    ----------
    name : str
    lo, hi : float
        First and last value (``lo < hi``), in the parameter's unit.
    n : int
        Number of values (at least 2).
    """

    name: str
    lo: float
    hi: float
    n: int

    @property
    def values(self) -> np.ndarray:
        """The ``n`` values, computed as the grid's regular design does (``hi`` exact)."""
        v = self.lo + np.linspace(0.0, 1.0, self.n) * (self.hi - self.lo)
        v[-1] = self.hi
        return v


@dataclass(frozen=True)
class BoxPlan:
    """The parameter rows of a box table.

    Attributes
    ----------
    names, units : tuple of str
        All parameters, in the family's (or model's) order.
    axes : tuple of Axis
        The varied parameters, in the order given (first varies slowest).
    fixed : dict of str to float
    """

    names: tuple
    units: tuple
    axes: tuple
    fixed: dict

    @property
    def shape(self) -> tuple:
        return tuple(a.n for a in self.axes)

    @property
    def n_rows(self) -> int:
        return math.prod(self.shape)  # exact: NumPy's int64 product would wrap for huge axes

    def rows(self, start: int, stop: int) -> np.ndarray:
        """Parameter rows ``start:stop``, shape (stop - start, n_parameters)."""
        idx = np.unravel_index(np.arange(start, stop), self.shape)
        theta = np.empty((stop - start, len(self.names)))
        for a, i in zip(self.axes, idx):
            theta[:, self.names.index(a.name)] = a.values[i]
        for name, v in self.fixed.items():
            theta[:, self.names.index(name)] = v
        return theta

    def meta(self) -> dict:
        return {
            "axes_json": json.dumps([{"name": a.name, "lo": a.lo, "hi": a.hi, "n": a.n} for a in self.axes]),
            "fixed_json": json.dumps(self.fixed),
            "shape_json": json.dumps(list(self.shape)),
            "row_order": "C order over the axes as listed in axes_json: the first axis varies slowest",
        }


def plan_box(names, units, axes, fixed, allowed=None, where: str = "") -> BoxPlan:
    """Check axes and fixed values against the parameters and their ranges.

    Parameters
    ----------
    names, units : sequence of str
        Parameters of the family or model, in order.
    axes : sequence of Axis
    fixed : mapping of str to float
    allowed : callable, optional
        ``allowed(name, lo, hi)`` returns an error message ('' if fine).
    where : str
        Words naming the source in errors.

    Raises
    ------
    InputError
        Unknown or repeated parameters, a parameter neither varied nor fixed,
        reversed or empty axes, values outside the allowed range.
    """
    names = tuple(names)
    seen = set()
    for a in axes:
        if a.name not in names:
            raise InputError(f"axis {a.name}: {where} has no parameter {a.name!r}; its parameters are "
                             f"{', '.join(names)}.")
        if a.name in seen:
            raise InputError(f"axis {a.name}: the parameter is given twice.")
        seen.add(a.name)
        if not (math.isfinite(a.lo) and math.isfinite(a.hi) and a.lo < a.hi):
            raise InputError(f"axis {a.name}={a.lo:g}:{a.hi:g}:{a.n}: LO must be below HI (both finite).")
        if a.n < 2:
            raise InputError(f"axis {a.name}={a.lo:g}:{a.hi:g}:{a.n}: N must be at least 2 "
                             f"(fix {a.name} instead for one value).")
    for name, v in fixed.items():
        if name not in names:
            raise InputError(f"fixed {name}: {where} has no parameter {name!r}; its parameters are "
                             f"{', '.join(names)}.")
        if name in seen:
            raise InputError(f"fixed {name}: the parameter is also an axis; give it once.")
        seen.add(name)
        if not math.isfinite(v):
            raise InputError(f"fixed {name}={v}: the value must be a finite number.")
    missing = [n for n in names if n not in seen]
    if missing:
        raise InputError(f"{', '.join(missing)}: neither an axis nor fixed; every parameter of {where} "
                         f"is either varied along an axis or fixed to a value.")
    if not axes:
        raise InputError("give at least one axis (a parameter varied from LO to HI in N points).")
    if allowed is not None:
        for a in axes:
            msg = allowed(a.name, a.lo, a.hi)
            if msg:
                raise InputError(f"axis {a.name}={a.lo:g}:{a.hi:g}:{a.n}: {msg}")
        for name, v in fixed.items():
            msg = allowed(name, v, v)
            if msg:
                raise InputError(f"fixed {name}={v:g}: {msg}")
    return BoxPlan(names, tuple(units), tuple(axes), {k: float(v) for k, v in fixed.items()})


def _check_masses(quantities, masses) -> tuple:
    masses = tuple(float(m) for m in (masses or ()))
    if any(QUANTITIES[q].per_mass for q in quantities):
        if not masses:
            per = [q for q in quantities if QUANTITIES[q].per_mass]
            raise InputError(f"quantities {', '.join(per)} need masses (Msun).")
        if not all(math.isfinite(m) and m > 0 for m in masses):
            raise InputError("masses must be positive numbers (Msun).")
        if len({mass_label(m) for m in masses}) != len(masses):
            raise InputError("masses lists a mass twice.")
    return masses


def box_table(out, model, axes, fixed=None, quantities=DEFAULT_QUANTITIES, masses=(1.4,), *, sigma: bool = True,
              progress: bool = True, stream=None, command: str | None = None,
              chunk_rows: int = CHUNK_ROWS, overwrite: bool = False, allow_mismatch: bool = False) -> TableSummary:
    """Write observables predicted by a surrogate over a parameter box.

    Parameters
    ----------
    out : path-like
        ``.csv``, ``.h5`` or ``.npz``.
    model : Surrogate or path-like
        A trained model, or its folder.
    axes : sequence of Axis
        Varied parameters (inside the model's box).
    fixed : mapping of str to float, optional
        The other parameters (inside the model's box).
    quantities : sequence of str
        Names from :data:`tovforge.tables.QUANTITIES`.
    masses : sequence of float
        Masses in Msun for the per-mass quantities.
    sigma : bool
        Add ``sigma_`` columns (models with a sigma: GPs and splines with an error model).
    progress : bool
        Progress bar on ``stream`` (default stderr).
    command : str, optional
        Command line for the provenance (default ``sys.argv``).
    chunk_rows : int
        Rows predicted and written at a time (the memory of the run does not
        grow with the table: rows are streamed to the file).
    overwrite : bool
        Replace an existing file.
    allow_mismatch : bool
        Load a model folder whose arrays do not match their checksum (forensics).

    Returns
    -------
    TableSummary

    Raises
    ------
    InputError
        For unknown quantities or parameters, values outside the model's box,
        or a table larger than the free disk space.
    """
    from ..surrogate import Surrogate, load

    t0 = time.monotonic()
    check_table_output(out, overwrite)
    label = str(model)
    if not isinstance(model, Surrogate):
        model = load(model, allow_mismatch)
    quantities = tuple(quantities)
    masses = _check_masses(quantities, masses)
    bounds = model.bounds

    def allowed(name, lo, hi):
        blo, bhi = bounds[model.parameter_names.index(name)]
        if lo < blo or hi > bhi:
            return f"outside the model's box: {name} must be in [{blo:g}, {bhi:g}] (the box it was trained on)."
        return ""

    plan = plan_box(model.parameter_names, model.parameter_units, axes,
                    fixed or {}, allowed, where=f"the model ({model.family})")
    sigma = bool(sigma and model.has_std)
    qcols = quantity_columns(quantities, masses, sigma)
    columns = parameter_columns(plan.names, plan.units) + qcols
    check_table_output(out, overwrite, plan.n_rows, len(columns))
    meta = provenance(command, kind="box", source="model", model=label, model_kind=model.kind,
                      model_arrays_sha256=model.meta.arrays_sha256, family=model.family,
                      quantities_json=json.dumps(list(quantities)), masses_msun_json=json.dumps(list(masses)),
                      mass_floor_msun=model.meta.outputs.mass_floor_msun, sigma=sigma, **plan.meta())
    n = plan.n_rows
    bar = progress_bar(n, Path(out).name, unit="rows", enabled=progress, stream=stream)
    try:
        with TableWriter(out, columns, meta, overwrite=overwrite) as w:
            for start in range(0, n, chunk_rows):
                stop = min(start + chunk_rows, n)
                theta = plan.rows(start, stop)
                block = dict(zip(plan.names, theta.T))
                block.update(model_values(model, theta, quantities, masses, sigma))
                w.append(block)
                bar.update(stop - start)
    finally:
        bar.close()
    return TableSummary(Path(out), w.n_rows, tuple(c.name for c in columns), time.monotonic() - t0)


# ---------------------------------------------------------------------------
# exact solves through the grid machinery
# ---------------------------------------------------------------------------

def _one_point_box(v: float) -> tuple[float, float]:
    """Bounds whose centre, as the regular design computes it, is exactly ``v``."""
    for scale in (2.0**-30, 2.0**-31, 2.0**-29, 3 * 2.0**-32, 2.0**-28):
        h = max(abs(v), 1.0) * scale
        lo, hi = v - h, v + h
        if lo < hi and lo + 0.5 * (hi - lo) == v:
            return lo, hi
    raise RuntimeError(f"no one-point box centred exactly on {v!r}")  # pragma: no cover


def grid_spec_for(plan: BoxPlan, family: str, quantities, masses, mass_floor_msun: float):
    """The grid spec whose regular design holds the points of ``plan`` (fixed values as one-point axes)."""
    from ..grid import parse_spec

    counts = {a.name: a.n for a in plan.axes}
    box = {a.name: [a.lo, a.hi] for a in plan.axes}
    for name, v in plan.fixed.items():
        counts[name] = 1
        box[name] = list(_one_point_box(v))
    at_mass = [QUANTITIES[q].field for q in quantities if QUANTITIES[q].per_mass]
    n = plan.n_rows
    raw = {
        "description": f"exact box table of {family} ({n} points)",
        "family": family,
        # a few chunks per core keep both cores busy; depends on n only, so reruns resume
        "chunk_size": int(min(64, max(4, math.ceil(n / 8)))),
        "mass_max_floor_msun": float(mass_floor_msun),
        "design": {"method": "regular", "points_per_axis": counts},
        "box": box,
        "outputs": {"curves": [], "u_nodes": [0.5], "at_mass": at_mass,
                    "masses_msun": sorted(masses) if masses else [1.4]},
    }
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # a one-point box may brush past an allowed bound
        return parse_spec(raw)


def exact_box_table(out, family, axes, fixed=None, quantities=DEFAULT_QUANTITIES, masses=(1.4,), *,
                    mass_floor_msun: float = 1.0, workers: int | None = None, scheduler: str | None = None,
                    progress: bool = True, stream=None, command: str | None = None,
                    keep_grid: bool = False, overwrite: bool = False, oversubscribe: bool = False) -> TableSummary:
    """Write observables from exact solves over a parameter box.

    The points are solved by :func:`tovforge.grid.run_grid` into the work
    file ``out`` + ``.grid.h5`` (chunks in parallel, a progress bar; after a
    crash the same call resumes from ``out.grid.h5.parts``), then copied into
    the table in the table's row order; the work file is removed unless
    ``keep_grid``.

    Parameters
    ----------
    out : path-like
    family : str
        EOS family with numeric parameters.
    axes, fixed, quantities, masses
        As in :func:`box_table`; values must lie in the family's allowed ranges.
    mass_floor_msun : float
        Floor of ``mass_max_margin`` (and of the grid's status 2).
    workers : int, optional
        Worker processes (default: all cores).
    scheduler : str, optional
        Address of a dask.distributed scheduler.
    progress, stream, command
        As in :func:`box_table`.
    keep_grid : bool
        Keep the work grid file.
    overwrite : bool
        Replace an existing table file.
    oversubscribe : bool
        Allow more local workers than cores.

    Returns
    -------
    TableSummary
        ``notes`` count the points that did not solve (their values are NaN;
        see the ``status`` column).
    """
    import h5py

    from .. import eos
    from ..grid import run_grid
    from ..status import Status

    t0 = time.monotonic()
    check_table_output(out, overwrite)
    fam = eos.get_family(family)
    if not fam.numeric:
        raise InputError(f"family {family}: the family has no numeric parameters to span a box.")
    quantities = tuple(quantities)
    masses = _check_masses(quantities, masses)
    if not (math.isfinite(mass_floor_msun) and mass_floor_msun >= 0):
        raise InputError(f"mass_floor_msun must be a number >= 0 (Msun). Got {mass_floor_msun}.")

    def allowed(name, lo, hi):
        par = fam.parameter(name)
        if not (par.contains(lo) and par.contains(hi)):
            return f"outside the allowed range of {name}: {par.range_text()}."
        return ""

    plan = plan_box(fam.parameter_names, [p.unit for p in fam.parameters], axes, fixed or {}, allowed,
                    where=f"family {fam.name}")
    qcols = quantity_columns(quantities, masses, sigma=False)
    status_col = Column("status", "1", "grid status code (see status_names_json); values are NaN unless 0 or 2",
                        dtype="int64")
    columns = parameter_columns(plan.names, plan.units) + [status_col] + qcols
    check_table_output(out, overwrite, plan.n_rows, len(columns))
    spec = grid_spec_for(plan, fam.name, quantities, masses, mass_floor_msun)
    out = Path(out)
    work = out.with_name(out.name + ".grid.h5")
    summary = run_grid(spec, work, workers=workers, scheduler=scheduler, overwrite=True, progress=progress,
                       stream=stream, oversubscribe=oversubscribe)
    meta = provenance(command, kind="box", source="exact", family=fam.name,
                      quantities_json=json.dumps(list(quantities)), masses_msun_json=json.dumps(list(masses)),
                      mass_floor_msun=float(mass_floor_msun), sigma=False,
                      status_names_json=json.dumps(Status.labels()), grid_spec_sha256=spec.sha256,
                      grid_content_sha256=summary.content_sha256, **plan.meta())
    family_counts = [next((a.n for a in plan.axes if a.name == n), 1) for n in plan.names]
    order = [plan.names.index(a.name) for a in plan.axes] + [plan.names.index(n) for n in plan.fixed]
    # grid rows follow the family's parameter order; the table follows the axes as given
    perm = np.arange(plan.n_rows).reshape(family_counts).transpose(order).ravel()
    with h5py.File(work, "r") as h5:
        theta = h5["parameters/values"][...][perm]
        expected = plan.rows(0, plan.n_rows)
        if not np.array_equal(theta, expected):  # pragma: no cover - a broken invariant, not user input
            raise RuntimeError("grid points differ from the box table's points")
        values = {"status": h5["status/code"][...][perm].astype(np.int64)}
        grid_masses = [float(m) for m in h5["at_mass/masses_msun"][...]] if "at_mass/masses_msun" in h5 else []
        for q in quantities:
            if QUANTITIES[q].per_mass:
                data = h5["at_mass"][QUANTITIES[q].field][...][perm]
                for m in masses:
                    values[f"{q}@{mass_label(m)}"] = data[:, grid_masses.index(m)]
            else:
                values[q] = h5["scalars"][QUANTITIES[q].field][...][perm]
    block = dict(zip(plan.names, expected.T))
    block.update(values)
    with TableWriter(out, columns, meta, overwrite=overwrite) as w:
        w.append(block)
    if not keep_grid:
        work.unlink()
    codes, n_codes = np.unique(values["status"], return_counts=True)
    bad = {int(c): int(k) for c, k in zip(codes, n_codes) if c not in (0, 2)}
    notes = []
    if bad:
        parts = ", ".join(f"{k} {Status(c).label}" for c, k in sorted(bad.items()))
        notes.append(f"{sum(bad.values())} of {plan.n_rows} points have no values ({parts}); see the status column.")
    return TableSummary(out, w.n_rows, tuple(c.name for c in columns), time.monotonic() - t0, tuple(notes))
