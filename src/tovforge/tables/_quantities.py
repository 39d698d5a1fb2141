"""Observables a box or samples table can hold, and their values from a surrogate.

Quantities are either scalars of the stable branch (one column each) or
quantities at chosen gravitational masses (one column per mass, named
``<quantity>@<mass>``, for example ``radius@1.4``).  A GP model adds a
``sigma_<column>`` column (its predictive standard deviation, same unit)
after each value column.
"""

from __future__ import annotations

import sys
from dataclasses import dataclass

import numpy as np

from .. import _provenance
from .. import quantities as registry  # functions here take a `quantities` argument (table column names)
from ..errors import InputError
from ._write import Column

__all__ = ["Quantity", "QUANTITIES", "parse_quantities", "quantity_columns", "mass_label", "model_values",
           "provenance", "parameter_columns"]


@dataclass(frozen=True)
class Quantity:
    """One observable of box and samples tables (a view of :data:`tovforge.quantities.QUANTITIES`).

    Attributes
    ----------
    name : str
        Name on the command line and (with ``@<mass>`` for per-mass ones) in
        tables: the registry's ``column``.
    unit : str
    description : str
    per_mass : bool
        Evaluated at each requested mass (NaN above M_max).
    field : str
        The registry's canonical name: the dataset of a grid and the field
        of :class:`tovforge.surrogate.MassPrediction` (per-mass quantities).
    """

    name: str
    unit: str
    description: str
    per_mass: bool = False
    field: str = ""


#: Sequence quantities a model table computes (:func:`model_values` has a rule for each); the exact
#: tables read the same names from a grid.
_SCALARS = ("mass_max_msun", "radius_at_mass_max_km", "central_pressure_at_mass_max_dyn_cm2", "max_sound_speed_sq",
            "causality_margin", "mass_max_margin_msun")


def _table_quantities() -> dict:
    scalars = [registry.get(n) for n in _SCALARS]
    # per mass: every star quantity a model answers at given masses (its ``query``)
    per_mass = [q for q in registry.queries() if q.level == "star"]
    return {q.column: Quantity(q.column, q.unit, q.description, q.level == "star", q.name)
            for q in (*scalars, *per_mass)}


#: Every quantity, by name, in the order tables list them.
QUANTITIES = _table_quantities()


def parse_quantities(names) -> tuple[str, ...]:
    """Check quantity names (a comma-separated string or a sequence); keeps table order.

    Raises
    ------
    InputError
        For an unknown or repeated name; the message lists the known ones.
    """
    if isinstance(names, str):
        names = [n.strip() for n in names.split(",") if n.strip()]
    names = list(names)
    if not names:
        raise InputError(f"quantities needs at least one of: {', '.join(QUANTITIES)}.")
    for n in names:
        if n not in QUANTITIES:
            raise InputError(f"quantities: unknown quantity {n!r}; choose from {', '.join(QUANTITIES)}.")
        if names.count(n) > 1:
            raise InputError(f"quantities: {n!r} is listed twice.")
    return tuple(names)


def mass_label(m: float) -> str:
    """How a mass appears in a column name: ``1.4``, ``2``, ``1.35``."""
    return format(float(m), ".10g")


def quantity_columns(quantities, masses, sigma: bool) -> list[Column]:
    """The value (and sigma) columns of ``quantities`` at ``masses``."""
    cols = []
    for name in quantities:
        q = QUANTITIES[name]
        keys = [(f"{name}@{mass_label(m)}", f"{q.description} at {mass_label(m)} Msun") for m in masses] \
            if q.per_mass else [(name, q.description)]
        for key, desc in keys:
            cols.append(Column(key, q.unit, desc))
            if sigma:
                cols.append(Column(f"sigma_{key}", q.unit, f"predictive standard deviation of {key}"))
    return cols


def parameter_columns(names, units) -> list[Column]:
    """One column per EOS parameter."""
    return [Column(n, u, f"EOS parameter {n}") for n, u in zip(names, units)]


def model_values(model, theta, quantities, masses, sigma: bool) -> dict:
    """Values of the quantity columns predicted by a surrogate.

    Parameters
    ----------
    model : tovforge.surrogate.Surrogate
    theta : ndarray, shape (n, d)
        Parameter rows inside the model's box.
    quantities : sequence of str
    masses : sequence of float
        Gravitational masses in Msun for the per-mass quantities.
    sigma : bool
        Also return the ``sigma_`` columns (models with a sigma).

    Returns
    -------
    dict of str to ndarray, shape (n,)
        Keyed by the names of :func:`quantity_columns`.
    """
    theta = np.atleast_2d(np.asarray(theta, float))
    masses = np.asarray(masses, float)
    # one evaluation of the model serves every column
    at = model.predict_at_masses(theta, masses, return_std=sigma)
    pred = at.prediction
    std = pred.std or {}
    scalars = {
        "mass_max": (pred.mass_max_msun, std.get("mass_max_msun")),
        "pressure_at_mass_max": (pred.central_pressure_at_mass_max_dyn_cm2,
                                 std.get("central_pressure_at_mass_max_dyn_cm2")),
        "max_sound_speed_sq": (pred.max_sound_speed_sq, std.get("max_sound_speed_sq")),
        "causality_margin": (pred.causality_margin, std.get("max_sound_speed_sq")),
        "mass_max_margin": (pred.mass_max_margin_msun, std.get("mass_max_msun")),
    }
    out = {}
    for name in quantities:
        if name == "radius_at_mass_max":
            # the first curve node of the models is u = 0, the maximum-mass star itself
            if pred.u_nodes[0] != 0.0:
                raise InputError("this model has no curve node at M_max (u = 0); radius_at_mass_max is not available.")
            value = pred.radius_km[:, 0]
            spread = std["radius_km"][:, 0] if sigma else None
            columns = {name: (value, spread)}
        elif QUANTITIES[name].per_mass:
            field = QUANTITIES[name].field
            value = getattr(at, field)
            spread = at.std[field] if sigma else None
            columns = {f"{name}@{mass_label(m)}": (value[:, j], None if spread is None else spread[:, j])
                       for j, m in enumerate(masses)}
        else:
            columns = {name: scalars[name]}
        for key, (value, spread) in columns.items():
            out[key] = np.asarray(value, float)
            if sigma:
                out[f"sigma_{key}"] = np.asarray(spread, float)
    return out


def provenance(command: str | None, **source) -> dict:
    """Metadata every table carries: versions, time, command and source.

    Parameters
    ----------
    command : str or None
        The command line that made the table (default: ``sys.argv`` joined).
    **source
        What the table was made from (str, int, float or bool values).
    """
    return _provenance.provenance(command=command if command is not None else " ".join(sys.argv), **source)
