"""Grid specs: a TOML file read strictly into a frozen :class:`GridSpec`.

Every key is checked against the declared keys of its table; a typo, a wrong
type or reversed bounds raise :class:`~tovforge.errors.InputError` with the
TOML key path (``design.points``, ``box.gamma1[0]``) and what is allowed.

The *normalised* spec (every default filled in) is what the grid is made
from; its SHA-256 (:attr:`GridSpec.sha256`) identifies the grid, so comments,
key order and spelling out a default do not change it.
"""

from __future__ import annotations

import hashlib
import json
import math
import warnings
from dataclasses import dataclass

import numpy as np

from .. import quantities
from .._toml import array as _list
from .._toml import check_keys as _check_keys
from .._toml import in_file, load_toml
from .._toml import increasing as _increasing
from .._toml import integer as _int
from .._toml import join as _join
from .._toml import names as _names
from .._toml import number as _float
from .._toml import string as _str
from .._toml import table as _table
from ..errors import InputError

__all__ = [
    "SCALARS",
    "CURVES",
    "AT_MASS",
    "DESIGNS",
    "DesignSpec",
    "OutputSpec",
    "SolverSpec",
    "GridSpec",
    "chebyshev_lobatto_nodes",
    "load_spec",
    "parse_spec",
]


def _outputs(role: str) -> dict:
    return {n: (quantities.get(n).unit, quantities.get(n).description) for n in quantities.grid_names(role)}


#: Outputs a grid may store, from :mod:`tovforge.quantities`: name -> (unit, description).
#: Scalars (one value per point):
SCALARS = _outputs("scalar")
#: curves at the nodes of u = sqrt(1 - M / M_max):
CURVES = _outputs("curve")
#: and values at fixed masses (NaN above M_max).
AT_MASS = _outputs("at_mass")
DEFAULT_SCALARS = quantities.grid_defaults("scalar")
DEFAULT_CURVES = quantities.grid_defaults("curve")
DEFAULT_AT_MASS = quantities.grid_defaults("at_mass")
DEFAULT_MASSES = (1.0, 1.2, 1.4, 1.6, 1.8, 2.0, 2.2, 2.4)
#: Most nodes of u per curve: every node is a star solved for every point (24 by default).
MAX_U_NODES = 1000
#: Most points per chunk: a chunk is solved as one batch in one worker, whose arrays grow with it.
MAX_CHUNK_SIZE = 4096
#: Design methods and the keys each takes besides ``method``.
DESIGNS = {"regular": ("points_per_axis",), "latin-hypercube": ("points", "seed"), "sobol": ("points", "seed")}


def chebyshev_lobatto_nodes(count: int, upper: float) -> np.ndarray:
    """``count`` Chebyshev-Lobatto points on ``[0, upper]``, increasing (0 first).

    They cluster at both ends: near ``u = 0`` (the maximum-mass star, where
    the curves change fastest in mass) and near the light end.
    """
    k = np.arange(count)
    return upper * 0.5 * (1.0 - np.cos(np.pi * k / (count - 1)))


@dataclass(frozen=True)
class DesignSpec:
    """Where in the box the points go.

    Attributes
    ----------
    method : {"regular", "latin-hypercube", "sobol"}
    points : int
        Number of points (for ``regular``: the product of ``points_per_axis``).
    points_per_axis : tuple of int or None
        Points along each parameter (``regular`` only), in parameter order.
    seed : int or None
        Seed of the scrambled Sobol or latin-hypercube engine.
    """

    method: str
    points: int
    points_per_axis: tuple[int, ...] | None = None
    seed: int | None = None


@dataclass(frozen=True)
class OutputSpec:
    """Which outputs are stored.

    Attributes
    ----------
    scalars : tuple of str
        Names from :data:`SCALARS` (default: those of
        :func:`tovforge.quantities.grid_defaults`, as for ``curves`` and
        ``at_mass``).
    curves : tuple of str
        Names from :data:`CURVES`, stored at ``u_nodes``.
    u_nodes : tuple of float
        Nodes of ``u = sqrt(1 - M / M_max)`` in [0, 1), increasing; ``u = 0``
        is the maximum-mass star.
    at_mass : tuple of str
        Names from :data:`AT_MASS`, stored at ``masses_msun``.
    masses_msun : tuple of float
        Fixed gravitational masses in Msun, increasing.
    """

    scalars: tuple[str, ...] = DEFAULT_SCALARS
    curves: tuple[str, ...] = DEFAULT_CURVES
    u_nodes: tuple[float, ...] = tuple(chebyshev_lobatto_nodes(24, 0.85).tolist())
    at_mass: tuple[str, ...] = DEFAULT_AT_MASS
    masses_msun: tuple[float, ...] = DEFAULT_MASSES


@dataclass(frozen=True)
class SolverSpec:
    """Numerical settings of the exact solves (see :class:`tovforge.solve.SequenceSettings`).

    Attributes
    ----------
    branch_stars : int
        Stars solved along each stable branch; they bracket the node stars.
    low_mass_msun : float
        Lightest star of the branch; nodes and masses below it give NaN.
    scan_stars, cluster_stars : int
        Stars of the coarse scan and of the cluster that locates M_max.
    steps, steps_per_kink : int
        Runge-Kutta steps per star, and extra steps per EOS kink.
    mass_rtol : float
        Relative tolerance on the mass of every node and fixed-mass star.
    """

    branch_stars: int = 16
    low_mass_msun: float = 0.15
    scan_stars: int = 32
    cluster_stars: int = 7
    steps: int = 16
    steps_per_kink: int = 3
    mass_rtol: float = 1e-11

    def sequence_settings(self):
        """The :class:`tovforge.solve.SequenceSettings` these settings stand for."""
        from dataclasses import replace

        from ..solve import SequenceSettings, StepSettings

        base = SequenceSettings()
        return replace(base, n_scan=self.scan_stars, n_cluster=self.cluster_stars, low_mass_msun=self.low_mass_msun,
                       steps=StepSettings(n_steps=self.steps, steps_per_kink=self.steps_per_kink))


@dataclass(frozen=True)
class GridSpec:
    """A normalised grid spec (every default filled in).

    Attributes
    ----------
    family : str
        EOS family (numeric parameters only).
    parameter_names, parameter_units : tuple of str
    box : tuple of (float, float)
        Lower and upper bound of each parameter, in parameter order.
    design : DesignSpec
    outputs : OutputSpec
    solver : SolverSpec
    chunk_size : int
        Points per chunk: the unit of work, of batching and of resumption.
    mass_max_floor_msun : float
        Points whose M_max is below this get status 2 (values still stored).
    description : str
    source : str
        The TOML text the spec was read from (kept for provenance; not hashed).
    """

    family: str
    parameter_names: tuple[str, ...]
    parameter_units: tuple[str, ...]
    box: tuple[tuple[float, float], ...]
    design: DesignSpec
    outputs: OutputSpec
    solver: SolverSpec
    chunk_size: int = 64
    mass_max_floor_msun: float = 1.0
    description: str = ""
    source: str = ""

    @property
    def n_points(self) -> int:
        return self.design.points

    @property
    def n_chunks(self) -> int:
        return -(-self.n_points // self.chunk_size)

    def chunk_bounds(self, k: int) -> tuple[int, int]:
        """First and one-past-last point index of chunk ``k``."""
        return k * self.chunk_size, min((k + 1) * self.chunk_size, self.n_points)

    def to_dict(self) -> dict:
        """The normalised spec as plain JSON-able data (what is hashed)."""
        d = self.design
        design = {"method": d.method}
        if d.method == "regular":
            design["points_per_axis"] = {n: c for n, c in zip(self.parameter_names, d.points_per_axis)}
        else:
            design.update(points=d.points, seed=d.seed)
        o, s = self.outputs, self.solver
        return {
            "description": self.description,
            "family": self.family,
            "chunk_size": self.chunk_size,
            "mass_max_floor_msun": self.mass_max_floor_msun,
            "design": design,
            "box": {n: list(b) for n, b in zip(self.parameter_names, self.box)},
            "outputs": {"scalars": list(o.scalars), "curves": list(o.curves), "u_nodes": list(o.u_nodes),
                        "at_mass": list(o.at_mass), "masses_msun": list(o.masses_msun)},
            "solver": {k: getattr(s, k) for k in s.__dataclass_fields__},
        }

    def to_json(self) -> str:
        """Canonical JSON of :meth:`to_dict` (sorted keys, shortest float repr)."""
        return json.dumps(self.to_dict(), sort_keys=True, separators=(",", ":"))

    @property
    def sha256(self) -> str:
        """SHA-256 of the canonical JSON: the identity of the grid."""
        return hashlib.sha256(self.to_json().encode()).hexdigest()


# ---------------------------------------------------------------------------
# strict reading
# ---------------------------------------------------------------------------

_TOP_KEYS = ("description", "family", "chunk_size", "mass_max_floor_msun", "design", "box", "outputs", "solver")
_OUTPUT_KEYS = ("scalars", "curves", "u_nodes", "u_max", "at_mass", "masses_msun")
_SOLVER_KEYS = tuple(SolverSpec.__dataclass_fields__)


def _read_family(raw: dict):
    from .. import eos

    if "family" not in raw:
        raise InputError("family: missing; name an EOS family (see `tovforge families`).")
    name = _str(raw["family"], "family")
    try:
        fam = eos.get_family(name)
    except InputError as exc:
        raise InputError(f"family: {exc}") from None
    if not fam.numeric:
        raise InputError(f"family: {name!r} has no numeric parameters; a grid needs a family with a parameter box.")
    return fam


def _read_box(raw, fam) -> tuple[tuple[float, float], ...]:
    table = _table(raw, "box")
    _check_keys(table, fam.parameter_names, "box")
    box = []
    for par in fam.parameters:
        if par.name not in table:
            box.append((float(par.box[0]), float(par.box[1])))
            continue
        path = f"box.{par.name}"
        pair = _list(table[par.name], path)
        if len(pair) != 2:
            raise InputError(f"{path}: expected [lower, upper], got {len(pair)} values.")
        lo, hi = (_float(v, _join(path, i)) for i, v in enumerate(pair))
        if not lo < hi:
            raise InputError(f"{path}: the lower bound {lo:g} must be below the upper bound {hi:g}.")
        if not (par.contains(lo) and par.contains(hi)):
            warnings.warn(f"{path} = [{lo:g}, {hi:g}] reaches outside the allowed range {par.range_text()} of "
                          f"{par.name}; points there get status 1 (invalid parameters).", stacklevel=3)
        box.append((lo, hi))
    return tuple(box)


def _read_design(raw, fam) -> DesignSpec:
    table = _table(raw, "design")
    if "method" not in table:
        raise InputError(f"design.method: missing; choose one of {', '.join(DESIGNS)}.")
    method = _str(table["method"], "design.method", DESIGNS)
    _check_keys(table, ("method", *DESIGNS[method]), "design")
    for key in DESIGNS[method]:
        if key not in table:
            raise InputError(f"design.{key}: missing (the {method} design needs it).")
    if method == "regular":
        value = table["points_per_axis"]
        if isinstance(value, dict):
            _check_keys(value, fam.parameter_names, "design.points_per_axis")
            missing = [n for n in fam.parameter_names if n not in value]
            if missing:
                raise InputError(f"design.points_per_axis.{missing[0]}: missing; give a count for every parameter "
                                 f"or one integer for all.")
            counts = tuple(_int(value[n], f"design.points_per_axis.{n}", 1) for n in fam.parameter_names)
        else:
            counts = (_int(value, "design.points_per_axis", 1),) * len(fam.parameters)
        return DesignSpec(method, math.prod(counts), points_per_axis=counts)  # exact: no int64 wrap-around
    points = _int(table["points"], "design.points", 1)
    seed = _int(table["seed"], "design.seed", 0)
    if method == "sobol" and points & (points - 1):
        warnings.warn(f"design.points = {points} is not a power of 2; a Sobol design keeps its balance "
                      "properties only for 2^m points.", stacklevel=3)
    return DesignSpec(method, points, seed=seed)


def _read_outputs(raw) -> OutputSpec:
    table = _table(raw, "outputs")
    _check_keys(table, _OUTPUT_KEYS, "outputs")
    d = OutputSpec()
    scalars = _names(table["scalars"], "outputs.scalars", SCALARS) if "scalars" in table else d.scalars
    curves = _names(table["curves"], "outputs.curves", CURVES) if "curves" in table else d.curves
    at_mass = _names(table["at_mass"], "outputs.at_mass", AT_MASS) if "at_mass" in table else d.at_mass
    nodes = table.get("u_nodes", 24)
    if isinstance(nodes, list):
        if "u_max" in table:
            raise InputError("outputs.u_max: applies only when outputs.u_nodes is a count; remove one of them.")
        u_nodes = _increasing(nodes, "outputs.u_nodes", 0.0, 1.0, False, True)
        if not u_nodes:
            raise InputError("outputs.u_nodes: give at least one node (or drop outputs.curves).")
    else:
        count = _int(nodes, "outputs.u_nodes", 2, MAX_U_NODES)
        u_max = _float(table.get("u_max", 0.85), "outputs.u_max", 0.0, 1.0, True, True)
        u_nodes = tuple(chebyshev_lobatto_nodes(count, u_max).tolist())
    masses = (_increasing(table["masses_msun"], "outputs.masses_msun", 0.0, None, True, False)
              if "masses_msun" in table else d.masses_msun)
    if at_mass and not masses:
        raise InputError("outputs.masses_msun: give at least one mass (or drop outputs.at_mass).")
    if len(u_nodes) > MAX_U_NODES:
        raise InputError(f"outputs.u_nodes: at most {MAX_U_NODES} nodes. Got {len(u_nodes)}.")
    return OutputSpec(scalars, curves, u_nodes, at_mass, masses)


def _read_solver(raw) -> SolverSpec:
    table = _table(raw, "solver")
    _check_keys(table, _SOLVER_KEYS, "solver")
    d = SolverSpec()
    ints = {"branch_stars": (4, 2000), "scan_stars": (8, 1000), "cluster_stars": (5, 15), "steps": (4, 1000),
            "steps_per_kink": (0, 100)}
    values = {}
    for key, (lo, hi) in ints.items():
        values[key] = _int(table[key], f"solver.{key}", lo, hi) if key in table else getattr(d, key)
    values["low_mass_msun"] = (_float(table["low_mass_msun"], "solver.low_mass_msun", 0.0, 1.0, True)
                               if "low_mass_msun" in table else d.low_mass_msun)
    values["mass_rtol"] = (_float(table["mass_rtol"], "solver.mass_rtol", 1e-14, 1e-4)
                           if "mass_rtol" in table else d.mass_rtol)
    return SolverSpec(**values)


def parse_spec(raw: dict, source: str = "") -> GridSpec:
    """Check a parsed TOML document and return the normalised :class:`GridSpec`.

    Parameters
    ----------
    raw : dict
        The document as returned by :func:`tomllib.loads`.
    source : str, optional
        The TOML text (kept for provenance).

    Raises
    ------
    tovforge.errors.InputError
        For unknown keys, wrong types or values out of range; the message
        starts with the key path.
    """
    _check_keys(raw, _TOP_KEYS, "")
    fam = _read_family(raw)
    if "design" not in raw:
        raise InputError(f"design: missing; add a [design] table with method = one of {', '.join(DESIGNS)}.")
    design = _read_design(raw["design"], fam)
    box = _read_box(raw.get("box", {}), fam)
    outputs = _read_outputs(raw.get("outputs", {}))
    solver = _read_solver(raw.get("solver", {}))
    return GridSpec(
        family=fam.name,
        parameter_names=fam.parameter_names,
        parameter_units=tuple(p.unit for p in fam.parameters),
        box=box,
        design=design,
        outputs=outputs,
        solver=solver,
        chunk_size=_int(raw.get("chunk_size", 64), "chunk_size", 1, MAX_CHUNK_SIZE),
        mass_max_floor_msun=_float(raw.get("mass_max_floor_msun", 1.0), "mass_max_floor_msun", 0.0),
        description=_str(raw.get("description", ""), "description"),
        source=source,
    )


def load_spec(path) -> GridSpec:
    """Read a grid spec from a TOML file (see :func:`parse_spec`).

    Errors name the file before the key path.
    """
    raw, text = load_toml(path, "spec")
    with in_file(path):
        return parse_spec(raw, source=text)
