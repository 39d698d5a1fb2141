"""Lookup tables: per-EOS sequences, observables over parameter boxes, posterior samples.

Every table is a set of named columns with units, written as CSV, HDF5 or NPZ
(chosen by the file extension) with its provenance, and read back by
:func:`read_table`.

- :func:`sequence_table`: the stable branch of one EOS (exact solves);
  :func:`star_table`, :func:`stars_text` and :func:`sequence_json` write any
  stars in the same columns (one per star quantity of
  :mod:`tovforge.quantities`), as ``tovforge solve`` does.
- :func:`box_table` / :func:`exact_box_table`: observables over a regular
  slice or grid of parameters, from a surrogate or from exact solves run by
  the grid machinery.
- :func:`samples_table`: observables for every row of a file of parameter
  samples, with the median and 90 % band per mass.
- :func:`lambda_tilde` and :func:`binary_deformability`: the binary tidal
  deformability of two stars (Flanagan & Hinderer 2008).

Examples
--------
>>> import numpy as np
>>> from tovforge.tables import lambda_tilde
>>> float(lambda_tilde(1.35, 1.35, 400.0, 400.0))
400.0
"""

from __future__ import annotations

from ._binary import (
    BINARY_COLUMNS,
    BinaryDeformability,
    binary_deformability,
    binary_table,
    chirp_grid,
    chirp_mass,
    component_masses,
    lambda_from_eos,
    lambda_from_model,
    lambda_from_table,
    lambda_tilde,
)
from ._box import DEFAULT_QUANTITIES, Axis, BoxPlan, box_table, exact_box_table, plan_box
from ._quantities import QUANTITIES, Quantity, parse_quantities
from ._samples import (
    DEFAULT_SAMPLE_MASSES,
    DEFAULT_SAMPLE_QUANTITIES,
    QUANTILES,
    Samples,
    read_samples,
    samples_table,
)
from ._sequence import SEQUENCE_COLUMNS, sequence_table
from ._stars import (
    BRANCH_COLUMN,
    STAR_COLUMNS,
    branch_stars,
    profile_json,
    profile_text,
    sequence_json,
    sequence_meta,
    sequence_text,
    star_block,
    star_table,
    stars_text,
)
from ._write import (FORMAT, FORMAT_VERSION, Column, Table, TableSummary, TableWriter, check_table_output, read_table,
                     table_format)

__all__ = [
    "BINARY_COLUMNS",
    "DEFAULT_QUANTITIES",
    "DEFAULT_SAMPLE_MASSES",
    "DEFAULT_SAMPLE_QUANTITIES",
    "FORMAT",
    "FORMAT_VERSION",
    "QUANTILES",
    "QUANTITIES",
    "SEQUENCE_COLUMNS",
    "STAR_COLUMNS",
    "BRANCH_COLUMN",
    "branch_stars",
    "Axis",
    "BinaryDeformability",
    "BoxPlan",
    "Column",
    "Quantity",
    "Samples",
    "Table",
    "TableSummary",
    "TableWriter",
    "binary_deformability",
    "binary_table",
    "check_table_output",
    "box_table",
    "chirp_grid",
    "chirp_mass",
    "component_masses",
    "exact_box_table",
    "lambda_from_eos",
    "lambda_from_model",
    "lambda_from_table",
    "lambda_tilde",
    "parse_quantities",
    "plan_box",
    "profile_json",
    "profile_text",
    "read_samples",
    "read_table",
    "samples_table",
    "sequence_json",
    "sequence_meta",
    "sequence_table",
    "sequence_text",
    "star_block",
    "star_table",
    "stars_text",
    "table_format",
]
