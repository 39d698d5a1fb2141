"""Equation-of-state families evaluated as functions of the pseudo-enthalpy.

Every family declares its ordered parameters with units, allowed ranges and
default demo-box bounds, validates input in one place and builds vectorised
evaluators for the structure solver.

Examples
--------
>>> from tovforge import eos
>>> sly = eos.make("piecewise-polytrope", log_p1=34.384, gamma1=3.005, gamma2=2.988, gamma3=2.851)
>>> float(sly.evaluate(0.2).pressure_dyn_cm2) > 0
True
"""

from __future__ import annotations

from ._base import EOS, EOSFamily, EOSPoint, Parameter, families, get_family, register_family
from ._core_tables import SoundSpeed, Spectral
from ._piecewise import PiecewisePolytrope, Polytrope
from ._tabulated import Tabulated, read_table, table_rows, write_table
from ._transition import Transition, seidov_limit
from ._uniform import UniformDensity

__all__ = [
    "EOS",
    "EOSFamily",
    "EOSPoint",
    "Parameter",
    "families",
    "get_family",
    "register_family",
    "make",
    "PiecewisePolytrope",
    "Polytrope",
    "Spectral",
    "SoundSpeed",
    "Tabulated",
    "Transition",
    "UniformDensity",
    "read_table",
    "seidov_limit",
    "table_rows",
    "write_table",
]


def make(family: str, **parameters) -> EOS:
    """Create one EOS of the named family.

    Parameters
    ----------
    family : str
        A registered family name (see :func:`families`).
    **parameters
        The family's parameters by name (numbers; ``path=`` for tables).

    Raises
    ------
    tovforge.errors.InputError
        For an unknown family or bad parameters, with a one-line message.
    """
    return get_family(family)(**parameters)
