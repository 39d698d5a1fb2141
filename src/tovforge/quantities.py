"""One declaration of every output quantity: name, unit, meaning, and where it appears.

Every list of outputs in the package derives from :data:`QUANTITIES`: the
fields the solver reports for each star, the datasets a grid may store
(curves at the nodes of ``u``, values at fixed masses, scalars of the
sequence), the outputs a surrogate emulates and how it transforms them, the
queries of a model and of an exported file, the columns of lookup tables and
the headings of ``tovforge solve``.  A quantity has one canonical ``name``
(with its unit in the name where it has one, e.g. ``radius_km``); the short
names of other layers (``column``, ``query``, ``model_name``) are aliases
declared here, next to it, and :func:`get` accepts any of them.

Adding an output is one entry here.  A quantity computed from others
(``derive``) needs nothing else: solver results, grids, tables and the
command line pick it up from this table.  A quantity that needs new
integration also needs the solver to compute it (a field of
:class:`tovforge.solve.Stars`).

This module imports nothing from the rest of the package (it is the bottom
layer, next to :mod:`tovforge.units`).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass

from .units import MOMENT_OF_INERTIA_KM3_TO_1E45_G_CM2, MSUN_KM

__all__ = [
    "Quantity",
    "QUANTITIES",
    "get",
    "star_quantities",
    "sequence_quantities",
    "grid_names",
    "grid_defaults",
    "emulated",
    "queries",
    "derive_value",
    "forward",
    "inverse",
]

#: Where a grid may store a quantity: at the nodes of u, at fixed masses, or once per EOS.
GRID_ROLES = ("curve", "at_mass", "scalar")
#: How a surrogate models a quantity (the inverse is applied to its predictions).
TRANSFORMS = ("identity", "ln", "log10")


@dataclass(frozen=True)
class Quantity:
    """One output quantity.

    Attributes
    ----------
    name : str
        Canonical key: field of solver results, grid dataset, JSON key.
    unit : str
        Unit of the values (``"1"``: dimensionless).
    description : str
        One line for listings, file headers and docs.
    level : {"star", "sequence"}
        ``"star"``: one value per star (a column of a sequence, a curve at the
        nodes of ``u``, a value at a fixed mass); ``"sequence"``: one value per
        EOS (e.g. the maximum mass).
    symbol : str
        Heading in text output and on plot axes (``"R"``, ``"Lambda"``).
    column : str
        Short name of the column in lookup tables (``"radius"``, ``"lambda"``).
    fmt : str
        Format of one value in text output.
    stored : tuple of str
        Grid roles (:data:`GRID_ROLES`) in which a grid spec may ask for it.
    default : tuple of str
        Grid roles in which a grid stores it unless the spec says otherwise.
    query : str or None
        Name of the model (and exported-file) query that returns it at given
        masses (star quantities) or at given parameters (sequence quantities).
    transform : str or None
        How surrogates emulate it (:data:`TRANSFORMS`); None: not emulated.
    model_name : str or None
        The emulated output's name inside a model (``"log_tidal_deformability"``).
    needs : tuple of str
        Canonical names a derived quantity is computed from.
    derive : callable or None
        ``derive(values)`` with ``values[name]`` the arrays of ``needs``;
        None for quantities the solver computes directly.
    of_maximum : str or None
        For a sequence quantity that is a property of the maximum-mass star:
        the star quantity it is (``"radius_km"`` for
        ``radius_at_mass_max_km``).  Solver results answer it from their
        maximum-mass star, so such an output needs no code either.
    of_twin : tuple of (str, str) or None
        For a sequence quantity that is a property of an end of the twin
        branch: ``("max", star quantity)`` or ``("min", star quantity)``
        (NaN for EOS without a twin branch).  Answered like ``of_maximum``.
    """

    name: str
    unit: str
    description: str
    level: str
    symbol: str
    column: str
    fmt: str = "{:.6g}"
    stored: tuple[str, ...] = ()
    default: tuple[str, ...] = ()
    query: str | None = None
    transform: str | None = None
    model_name: str | None = None
    needs: tuple[str, ...] = ()
    derive: Callable[[Mapping], object] | None = None
    of_maximum: str | None = None
    of_twin: tuple[str, str] | None = None

    @property
    def heading(self) -> str:
        """``symbol [unit]`` (just the symbol when dimensionless)."""
        return self.symbol if self.unit == "1" else f"{self.symbol} [{self.unit}]"

    @property
    def derived(self) -> bool:
        return self.derive is not None

    @property
    def aliases(self) -> tuple[str, ...]:
        """Every name this quantity goes by (canonical first)."""
        names = [self.name, self.column, self.query, self.model_name]
        return tuple(dict.fromkeys(n for n in names if n))


def _moment_of_inertia_over_m3(v):
    # I / M^3 in G = c = 1 (dimensionless): I in km^3 over (M in km)^3
    return (v["moment_of_inertia_1e45_g_cm2"] / MOMENT_OF_INERTIA_KM3_TO_1E45_G_CM2) / (v["mass_msun"] * MSUN_KM) ** 3


def _binding_energy(v):
    # gravitational binding energy (M_b - M) c^2, in Msun c^2
    return v["baryon_mass_msun"] - v["mass_msun"]


def _causality_margin(v):
    return 1.0 - v["max_sound_speed_sq"]


_STAR = "star"
_SEQ = "sequence"

#: Every quantity, by canonical name.  Order matters: it is the order of grid
#: datasets in a default spec (hashed), of table columns and of CLI columns.
QUANTITIES: dict[str, Quantity] = {q.name: q for q in (
    # ---- one value per star ---------------------------------------------------------------
    Quantity("mass_msun", "Msun", "gravitational mass", _STAR, "M", "mass", "{:.6f}",
             stored=("curve",), default=("curve",)),
    Quantity("radius_km", "km", "circumferential radius", _STAR, "R", "radius", "{:.5f}",
             stored=("curve", "at_mass"), default=("curve", "at_mass"),
             query="radius", transform="identity", model_name="radius_km"),
    Quantity("compactness", "1", "compactness G M / (R c^2)", _STAR, "C", "compactness", "{:.5f}"),
    Quantity("tidal_deformability", "1", "dimensionless tidal deformability Lambda = (2/3) k2 / C^5", _STAR,
             "Lambda", "lambda", "{:.6g}", stored=("curve", "at_mass"), default=("curve", "at_mass"),
             query="tidal_deformability", transform="ln", model_name="log_tidal_deformability"),
    Quantity("k2", "1", "quadrupolar tidal Love number", _STAR, "k2", "k2", "{:.6f}",
             stored=("curve", "at_mass"), default=("curve",), query="k2"),
    Quantity("moment_of_inertia_1e45_g_cm2", "1e45 g cm^2", "slow-rotation moment of inertia", _STAR,
             "I", "inertia", "{:.6g}", stored=("curve", "at_mass"), default=("curve", "at_mass"),
             query="moment_of_inertia", transform="ln", model_name="log_moment_of_inertia"),
    Quantity("moment_of_inertia_over_m3", "1", "I / M^3 in G = c = 1", _STAR, "I/M^3", "inertia_over_m3",
             "{:.6g}", needs=("moment_of_inertia_1e45_g_cm2", "mass_msun"), derive=_moment_of_inertia_over_m3),
    Quantity("baryon_mass_msun", "Msun", "baryon (rest) mass", _STAR, "M_b", "baryon_mass", "{:.6f}",
             stored=("curve", "at_mass"), default=("curve",)),
    Quantity("binding_energy_msun", "Msun", "gravitational binding energy (M_b - M) c^2", _STAR, "E_b",
             "binding_energy", "{:.6f}", stored=("curve", "at_mass"), needs=("baryon_mass_msun", "mass_msun"),
             derive=_binding_energy),
    Quantity("central_pressure_dyn_cm2", "dyn/cm^2", "central pressure", _STAR, "p_c", "central_pressure",
             "{:.6e}"),
    Quantity("central_energy_density_g_cm3", "g/cm^3", "central energy density divided by c^2", _STAR,
             "e_c/c^2", "central_energy_density", "{:.6e}"),
    Quantity("central_rest_mass_density_g_cm3", "g/cm^3", "central rest-mass density", _STAR, "rho_c",
             "central_density", "{:.6e}"),
    Quantity("central_sound_speed_sq", "c^2", "squared sound speed at the centre", _STAR, "c_s^2(centre)",
             "central_sound_speed_sq", "{:.5f}"),
    Quantity("central_pseudo_enthalpy", "1", "central pseudo-enthalpy h_c", _STAR, "h_c",
             "central_pseudo_enthalpy", "{:.6f}"),
    # ---- one value per EOS (the stable branch as a whole) ----------------------------------
    Quantity("mass_max_msun", "Msun", "maximum mass of the stable branch (first maximum of M(p_c))", _SEQ,
             "M_max", "mass_max", "{:.6f}", stored=("scalar",), default=("scalar",),
             query="mass_max", transform="identity", model_name="mass_max_msun", of_maximum="mass_msun"),
    Quantity("radius_at_mass_max_km", "km", "radius of the maximum-mass star", _SEQ, "R(M_max)",
             "radius_at_mass_max", "{:.5f}", stored=("scalar",), default=("scalar",), of_maximum="radius_km"),
    Quantity("central_pressure_at_mass_max_dyn_cm2", "dyn/cm^2", "central pressure of the maximum-mass star",
             _SEQ, "p_c(M_max)", "pressure_at_mass_max", "{:.6e}", stored=("scalar",), default=("scalar",),
             transform="log10", model_name="log10_central_pressure_at_mass_max",
             of_maximum="central_pressure_dyn_cm2"),
    Quantity("max_sound_speed_sq", "c^2",
             "largest c_s^2 of the EOS from the surface to the centre of the maximum-mass star", _SEQ,
             "max c_s^2", "max_sound_speed_sq", "{:.5f}", stored=("scalar",), default=("scalar",),
             transform="identity", model_name="max_sound_speed_sq"),
    Quantity("causality_margin", "1", "1 - max_sound_speed_sq (negative: acausal below M_max)", _SEQ,
             "1 - max c_s^2", "causality_margin", "{:.5f}", stored=("scalar",), default=("scalar",),
             needs=("max_sound_speed_sq",), derive=_causality_margin),
    Quantity("mass_max_margin_msun", "Msun", "M_max minus the floor mass of the grid (negative: below it)", _SEQ,
             "M_max - floor", "mass_max_margin", "{:.6f}", stored=("scalar",), default=("scalar",)),
    Quantity("twin_mass_max_msun", "Msun", "maximum mass of a second stable branch (twin stars; NaN if none)", _SEQ,
             "M_max(twin)", "twin_mass_max", "{:.6f}", stored=("scalar",), default=("scalar",),
             of_twin=("max", "mass_msun")),
    Quantity("twin_mass_min_msun", "Msun", "minimum mass between the stable and the twin branch (NaN if no twin)",
             _SEQ, "M_min(twin)", "twin_mass_min", "{:.6f}", stored=("scalar",), of_twin=("min", "mass_msun")),
    Quantity("twin_radius_at_mass_max_km", "km", "radius of the heaviest twin star (NaN if no twin)", _SEQ,
             "R(M_max twin)", "twin_radius_at_mass_max", "{:.5f}", stored=("scalar",), of_twin=("max", "radius_km")),
)}

_ALIASES: dict[str, str] = {}
for _q in QUANTITIES.values():
    for _a in _q.aliases:
        if _ALIASES.setdefault(_a, _q.name) != _q.name:  # pragma: no cover - a declaration error
            raise RuntimeError(f"quantity alias {_a!r} is declared twice")


def get(name: str) -> Quantity:
    """The quantity called ``name`` (canonical name or any alias).

    Raises
    ------
    KeyError
        With the known names, for an unknown one.
    """
    try:
        return QUANTITIES[_ALIASES[name]]
    except KeyError:
        raise KeyError(f"unknown quantity {name!r}; known: {', '.join(QUANTITIES)}") from None


def star_quantities() -> tuple[Quantity, ...]:
    """Quantities with one value per star, in declaration order."""
    return tuple(q for q in QUANTITIES.values() if q.level == _STAR)


def sequence_quantities() -> tuple[Quantity, ...]:
    """Quantities with one value per EOS, in declaration order."""
    return tuple(q for q in QUANTITIES.values() if q.level == _SEQ)


def grid_names(role: str) -> tuple[str, ...]:
    """Canonical names a grid may store in ``role`` (``"curve"``, ``"at_mass"``, ``"scalar"``)."""
    return tuple(q.name for q in QUANTITIES.values() if role in q.stored)


def grid_defaults(role: str) -> tuple[str, ...]:
    """Canonical names a grid stores in ``role`` unless its spec says otherwise."""
    return tuple(q.name for q in QUANTITIES.values() if role in q.default)


def emulated(level: str | None = None) -> tuple[Quantity, ...]:
    """Quantities surrogates emulate (with a ``transform``), optionally of one level."""
    return tuple(q for q in QUANTITIES.values() if q.transform and (level is None or q.level == level))


def queries() -> tuple[Quantity, ...]:
    """Quantities a model answers by name (``query``), in declaration order."""
    return tuple(q for q in QUANTITIES.values() if q.query)


def derive_value(name: str, values: Mapping):
    """Value of a derived quantity from ``values`` (a mapping of canonical name to array)."""
    q = get(name)
    if q.derive is None:
        return values[q.name]
    return q.derive({k: values[k] for k in q.needs})


def forward(q: Quantity, value):
    """The transform a surrogate applies to ``value`` before emulating it (NumPy arrays or floats)."""
    import numpy as np

    if q.transform == "ln":
        return np.log(value)
    if q.transform == "log10":
        return np.log10(value)
    return value


def inverse(q: Quantity, value):
    """Undo :func:`forward` (model output back to the quantity's unit)."""
    import numpy as np

    if q.transform == "ln":
        return np.exp(value)
    if q.transform == "log10":
        return 10.0 ** np.asarray(value)
    return value

