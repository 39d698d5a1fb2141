"""One vocabulary of outcomes, shared by the solver, the grids and the tables.

A failed solve is a status, not an exception (as SciPy's ``solve_ivp``
reports ``status`` and ``message``): grids store the code of every point, so
one bad EOS cannot stop a run.  The codes are stored in grid files, so they
never change meaning; new outcomes get new codes.
"""

from __future__ import annotations

from enum import IntEnum

__all__ = ["Status"]


class Status(IntEnum):
    """Outcome of solving one EOS (or one grid point).

    The solver reports ``OK``, ``NO_MAXIMUM``, ``EOS_ENDS`` and
    ``SOLVER_FAILURE``; grids add ``INVALID_PARAMETERS`` (the point was never
    solved) and ``BELOW_FLOOR`` (solved, but M_max is below the spec's floor).

    Attributes
    ----------
    label : str
        Short name, stored in grid files (``status_names_json``).
    message : str
        One sentence for users.
    """

    OK = 0
    INVALID_PARAMETERS = 1
    BELOW_FLOOR = 2
    NO_MAXIMUM = 3
    SOLVER_FAILURE = 4
    EOS_ENDS = 5

    @property
    def label(self) -> str:
        return _LABELS[self]

    @property
    def message(self) -> str:
        return _MESSAGES[self]

    @property
    def success(self) -> bool:
        return self is Status.OK

    @classmethod
    def labels(cls) -> dict[int, str]:
        """Code -> label of every status, as stored in grid files."""
        return {int(s): s.label for s in cls}


_LABELS = {
    Status.OK: "ok",
    Status.INVALID_PARAMETERS: "invalid parameters",
    Status.BELOW_FLOOR: "M_max below the floor",
    Status.NO_MAXIMUM: "no maximum mass",
    Status.SOLVER_FAILURE: "solver failure",
    Status.EOS_ENDS: "EOS ends before the maximum",
}

_MESSAGES = {
    Status.OK: "Stable branch solved up to the maximum mass.",
    Status.INVALID_PARAMETERS: "The parameters are outside the family's allowed ranges or break a joint constraint.",
    Status.BELOW_FLOOR: "The maximum mass is below the floor of the grid spec.",
    Status.NO_MAXIMUM: "No maximum of M(h_c) below the largest central enthalpy tried.",
    Status.SOLVER_FAILURE: "Structure integration failed for too many stars.",
    Status.EOS_ENDS: "The EOS ends at its highest pressure (a table's last row; for the spectral family "
                     "x = ln(p/p0) = 10) before the maximum mass is reached.",
}
