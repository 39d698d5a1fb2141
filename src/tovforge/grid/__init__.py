"""Grids of exact solves over EOS parameter boxes.

A grid spec (TOML, read strictly by :func:`load_spec`) names an EOS family, a
box, a design and the outputs; :func:`run_grid` solves every point in
parallel chunks that are saved atomically (so a killed run resumes) and
writes one self-describing HDF5 file, read back by :func:`read_grid`.

Examples
--------
>>> from tovforge import grid
>>> spec = grid.parse_spec({"family": "piecewise-polytrope",
...                         "design": {"method": "sobol", "points": 8, "seed": 1}})
>>> grid.design_points(spec).shape
(8, 4)
"""

from __future__ import annotations

from ._design import design_points
from ._info import describe_grid
from ._run import RunSummary, WorkersLost, parts_folder, run_grid, solve_points
from ._solve import ChunkResult, solve_chunk
from ._spec import (
    AT_MASS,
    CURVES,
    DESIGNS,
    SCALARS,
    DesignSpec,
    GridSpec,
    OutputSpec,
    SolverSpec,
    chebyshev_lobatto_nodes,
    load_spec,
    parse_spec,
)
from ._store import FORMAT, FORMAT_VERSION, GridData, content_sha256, read_grid, verify_grid, write_grid

__all__ = [
    "AT_MASS",
    "CURVES",
    "DESIGNS",
    "FORMAT",
    "FORMAT_VERSION",
    "SCALARS",
    "ChunkResult",
    "DesignSpec",
    "GridData",
    "GridSpec",
    "OutputSpec",
    "RunSummary",
    "SolverSpec",
    "WorkersLost",
    "chebyshev_lobatto_nodes",
    "content_sha256",
    "describe_grid",
    "design_points",
    "load_spec",
    "parse_spec",
    "parts_folder",
    "read_grid",
    "run_grid",
    "solve_chunk",
    "solve_points",
    "verify_grid",
    "write_grid",
]
