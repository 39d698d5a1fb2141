"""EOS families: declared parameters, validation in one place, and EOS objects."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from ..errors import InvalidEOSParameter, UnknownFamily
from ..units import DENSITY_CGS_TO_GEOM, PRESSURE_CGS_TO_GEOM
from ._batch import EOSBatch

__all__ = [
    "Parameter",
    "EOSFamily",
    "EOS",
    "EOSPoint",
    "register_family",
    "get_family",
    "families",
]


@dataclass(frozen=True)
class Parameter:
    """One numeric EOS parameter.

    Parameters
    ----------
    name : str
        Identifier used in the library, on the command line and in files.
    unit : str
        Unit of the value (``"1"`` for dimensionless).
    description : str
        One line for listings.
    allowed : tuple of float
        Physically allowed range ``(lo, hi)``; values outside are rejected.
    box : tuple of float
        Default bounds of the demo parameter box (a sub-range of ``allowed``).
    open_ends : tuple of bool
        Whether ``lo`` and ``hi`` are excluded from the allowed range.
    log_offset : float or None
        If set, surrogates take ``ln(value - log_offset)`` as their input
        instead of the value (e.g. ``ln(Gamma - 1)`` for an adiabatic index,
        ``ln c_s^2`` for a squared sound speed, on which the stars depend more
        evenly).  Must not exceed the lower end of ``allowed``.
    """

    name: str
    unit: str
    description: str
    allowed: tuple[float, float]
    box: tuple[float, float]
    open_ends: tuple[bool, bool] = (False, False)
    log_offset: float | None = None

    def range_text(self) -> str:
        lo, hi = self.allowed
        left = "(" if self.open_ends[0] else "["
        right = ")" if self.open_ends[1] else "]"
        return f"{left}{lo:g}, {hi:g}{right}"

    def contains(self, value) -> np.ndarray:
        """Elementwise test of the allowed range (False for NaN)."""
        value = np.asarray(value, float)
        lo, hi = self.allowed
        ok_lo = value > lo if self.open_ends[0] else value >= lo
        ok_hi = value < hi if self.open_ends[1] else value <= hi
        return ok_lo & ok_hi & np.isfinite(value)


@dataclass(frozen=True)
class EOSPoint:
    """EOS values at given pseudo-enthalpies, in cgs units.

    Attributes
    ----------
    pseudo_enthalpy : ndarray
        ``h = int dp / (e + p)`` (dimensionless).
    pressure_dyn_cm2 : ndarray
        Pressure in dyn/cm^2.
    energy_density_g_cm3 : ndarray
        Total energy density divided by c^2, in g/cm^3.
    rest_mass_density_g_cm3 : ndarray
        Rest-mass density in g/cm^3.
    sound_speed_sq : ndarray
        Squared sound speed ``dp/de`` in units of c^2.
    """

    pseudo_enthalpy: np.ndarray
    pressure_dyn_cm2: np.ndarray
    energy_density_g_cm3: np.ndarray
    rest_mass_density_g_cm3: np.ndarray
    sound_speed_sq: np.ndarray


class EOSFamily:
    """Base class of EOS families.

    Subclasses declare ``name``, ``description``, ``reference`` and the
    ordered tuple ``parameters``, and implement :meth:`_build` (and
    :meth:`_joint_check` for constraints that involve several parameters).
    Validation happens here, once; :meth:`_build` trusts its input.
    """

    name: str = ""
    description: str = ""
    reference: str = ""
    parameters: tuple[Parameter, ...] = ()
    #: False for families whose parameters are not numbers (tabulated files).
    numeric: bool = True

    # -- declared data --------------------------------------------------
    @property
    def parameter_names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.parameters)

    @property
    def box(self) -> np.ndarray:
        """Default demo box, shape (n_parameters, 2)."""
        return np.array([p.box for p in self.parameters], float)

    def parameter(self, name: str) -> Parameter:
        for p in self.parameters:
            if p.name == name:
                return p
        raise InvalidEOSParameter(
            f"{self.name} has no parameter {name!r}; its parameters are {', '.join(self.parameter_names)}."
        )

    # -- validation -------------------------------------------------------
    def check(self, values: Mapping[str, float]) -> np.ndarray:
        """Validate one parameter set and return it as an ordered array.

        Raises
        ------
        InvalidEOSParameter
            For a missing, unknown, non-finite or out-of-range parameter, or a
            combination of parameters the family cannot represent.
        """
        names = self.parameter_names
        unknown = [k for k in values if k not in names]
        if unknown:
            raise InvalidEOSParameter(
                f"{self.name} has no parameter {unknown[0]!r}; its parameters are {', '.join(names)}."
            )
        missing = [k for k in names if k not in values]
        if missing:
            raise InvalidEOSParameter(
                f"{self.name} needs parameter {missing[0]!r} (parameters: {', '.join(names)})."
            )
        theta = np.empty(len(names))
        for i, par in enumerate(self.parameters):
            raw = values[par.name]
            try:
                v = float(raw)
            except (TypeError, ValueError):
                raise InvalidEOSParameter(
                    f"The {par.name!r} parameter of {self.name} must be a number in {par.range_text()}. "
                    f"Got {raw} instead."
                ) from None
            if not par.contains(v):
                raise InvalidEOSParameter(
                    f"The {par.name!r} parameter of {self.name} must be in {par.range_text()}"
                    f"{' ' + par.unit if par.unit != '1' else ''}. Got {v:g} instead."
                )
            theta[i] = v
        message = self.joint_problems(theta[None, :])[0]
        if message:
            raise InvalidEOSParameter(message)
        return theta

    def joint_problems(self, theta: np.ndarray) -> list[str]:
        """Messages for rows of ``theta`` that break a joint constraint.

        Parameters
        ----------
        theta : ndarray, shape (n, n_parameters)
            Rows already inside the per-parameter allowed ranges.

        Returns
        -------
        list of str
            One entry per row, empty where the row is fine.
        """
        return [""] * len(theta)

    def validate_rows(self, theta: np.ndarray) -> list[str]:
        """Vectorised validation of many parameter rows without raising.

        Returns one message per row (empty string where the row is valid).
        Used by the grid generator, where a bad point is a status, not a crash.
        """
        theta = np.atleast_2d(np.asarray(theta, float))
        messages = [""] * len(theta)
        for j, par in enumerate(self.parameters):
            bad = ~par.contains(theta[:, j])
            for i in np.flatnonzero(bad):
                if not messages[i]:
                    messages[i] = (
                        f"The {par.name!r} parameter of {self.name} must be in {par.range_text()}. "
                        f"Got {theta[i, j]:g} instead."
                    )
        ok = np.array([not m for m in messages])
        if ok.any():
            joint = self.joint_problems(theta[ok])
            for i, msg in zip(np.flatnonzero(ok), joint):
                messages[i] = msg
        return messages

    # -- construction -------------------------------------------------------
    def build(self, theta: np.ndarray) -> EOSBatch:
        """Build a batch from validated parameter rows, shape (n_eos, n_parameters)."""
        return self._build(np.atleast_2d(np.asarray(theta, float)))

    def _build(self, theta: np.ndarray) -> EOSBatch:  # pragma: no cover - abstract
        raise NotImplementedError

    def __call__(self, **values) -> "EOS":
        """Make one EOS of this family from keyword parameters."""
        theta = self.check(values)
        return EOS(self, dict(zip(self.parameter_names, theta.tolist())), self.build(theta[None, :]))

    def from_array(self, theta) -> "EOS":
        """Make one EOS from an ordered parameter vector."""
        theta = np.asarray(theta, float).ravel()
        if theta.size != len(self.parameters):
            raise InvalidEOSParameter(
                f"{self.name} takes {len(self.parameters)} parameters ({', '.join(self.parameter_names)}); "
                f"got {theta.size}."
            )
        return self(**dict(zip(self.parameter_names, theta)))

    def __repr__(self) -> str:
        return f"<EOS family {self.name}: {', '.join(self.parameter_names)}>"


@dataclass(frozen=True)
class EOS:
    """One equation of state: a family, its parameter values and its evaluator.

    Use :func:`tovforge.eos.make` or call a family object to create one.
    """

    family: EOSFamily
    parameters: dict
    batch: EOSBatch = field(repr=False)

    @property
    def name(self) -> str:
        return self.family.name

    @property
    def h_kinks(self) -> np.ndarray:
        """Pseudo-enthalpies where the EOS is not smooth."""
        k = self.batch.kinks[0]
        return k[np.isfinite(k)]

    @property
    def h_max(self) -> float:
        """Largest pseudo-enthalpy at which the EOS is defined."""
        return float(self.batch.h_max[0])

    def evaluate(self, h) -> EOSPoint:
        """Evaluate the EOS at pseudo-enthalpies ``h`` (array-like, >= 0).

        Returns
        -------
        EOSPoint
            Pressure, energy density, rest-mass density and squared sound
            speed in cgs units, with the shape of ``h``.
        """
        h = np.asarray(h, float)
        if np.any(~np.isfinite(h)) or np.any(h < 0) or np.any(h > self.h_max):
            raise InvalidEOSParameter(
                f"pseudo-enthalpy h must be finite and in [0, {self.h_max:g}] for this EOS."
            )
        flat = h.ravel()
        p, e, rho, dedh = self.batch.lanes(np.zeros(flat.size, dtype=np.intp)).eval(flat)
        with np.errstate(divide="ignore", invalid="ignore"):
            cs2 = np.where(dedh > 0, (e + p) / dedh, np.inf)
        shape = h.shape
        return EOSPoint(
            h,
            (p / PRESSURE_CGS_TO_GEOM).reshape(shape),
            (e / DENSITY_CGS_TO_GEOM).reshape(shape),
            (rho / DENSITY_CGS_TO_GEOM).reshape(shape),
            cs2.reshape(shape),
        )

    def __repr__(self) -> str:
        vals = ", ".join(f"{k}={v:g}" if isinstance(v, float) else f"{k}={v}" for k, v in self.parameters.items())
        return f"EOS({self.family.name}: {vals})"


_REGISTRY: dict[str, EOSFamily] = {}


def register_family(family: EOSFamily) -> EOSFamily:
    """Add a family instance to the registry (name must be new)."""
    if family.name in _REGISTRY:
        raise ValueError(f"EOS family {family.name!r} is already registered.")
    _REGISTRY[family.name] = family
    return family


def get_family(name: str) -> EOSFamily:
    """Return the registered family called ``name``."""
    try:
        return _REGISTRY[name]
    except KeyError:
        raise UnknownFamily(
            f"Unknown EOS family {name!r}; choose one of: {', '.join(_REGISTRY)}."
        ) from None


def families() -> dict[str, EOSFamily]:
    """All registered families, by name, in registration order."""
    return dict(_REGISTRY)


def _finite(x: float) -> bool:
    return math.isfinite(x)
