"""Result objects of the structure solver (frozen dataclasses, astronomers' units).

They are plain data: nothing here calls the solver.  Quantities derived from
the solver's fields (declared in :mod:`tovforge.quantities`) are computed on
request by :meth:`Stars.value`.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .. import quantities
from ..status import Status

__all__ = ["Stars", "MaximumMass", "StarSequence", "StarProfile"]


@dataclass(frozen=True)
class Stars:
    """Properties of a set of stars (one entry per star).

    Attributes
    ----------
    mass_msun : ndarray
        Gravitational mass in solar masses (IAU 2015 nominal GM_sun).
    radius_km : ndarray
        Circumferential radius in km.
    compactness : ndarray
        ``GM / (R c^2)``.
    k2 : ndarray
        Quadrupolar tidal Love number.
    tidal_deformability : ndarray
        Dimensionless ``Lambda = (2/3) k2 / C^5``.
    moment_of_inertia_1e45_g_cm2 : ndarray
        Slow-rotation moment of inertia in 1e45 g cm^2.
    baryon_mass_msun : ndarray
        Baryon (rest) mass in solar masses.
    central_pseudo_enthalpy : ndarray
        ``h_c`` (dimensionless).
    central_pressure_dyn_cm2 : ndarray
    central_energy_density_g_cm3 : ndarray
        Central energy density divided by c^2.
    central_rest_mass_density_g_cm3 : ndarray
    central_sound_speed_sq : ndarray
        Squared sound speed at the centre, in units of c^2.
    """

    mass_msun: np.ndarray
    radius_km: np.ndarray
    compactness: np.ndarray
    k2: np.ndarray
    tidal_deformability: np.ndarray
    moment_of_inertia_1e45_g_cm2: np.ndarray
    baryon_mass_msun: np.ndarray
    central_pseudo_enthalpy: np.ndarray
    central_pressure_dyn_cm2: np.ndarray
    central_energy_density_g_cm3: np.ndarray
    central_rest_mass_density_g_cm3: np.ndarray
    central_sound_speed_sq: np.ndarray

    def __len__(self) -> int:
        return int(np.size(self.mass_msun))

    def value(self, name: str) -> np.ndarray:
        """A star quantity by name: a field, or a quantity derived from fields.

        Parameters
        ----------
        name : str
            Canonical name or alias of a star quantity of
            :data:`tovforge.quantities.QUANTITIES` (``"radius_km"``,
            ``"lambda"``, ``"moment_of_inertia_over_m3"``, ...).

        Returns
        -------
        ndarray
            Same shape as the fields, in the quantity's unit.

        Raises
        ------
        KeyError
            For an unknown name or a quantity of the whole sequence.
        """
        q = quantities.get(name)
        if q.level != "star":
            raise KeyError(f"{name!r} is a quantity of the whole sequence, not of each star")
        if q.derive is None:
            return getattr(self, q.name)
        return q.derive({k: self.value(k) for k in q.needs})

    def __getitem__(self, name: str) -> np.ndarray:
        """``stars[name]`` is :meth:`value`."""
        return self.value(name)

    @property
    def moment_of_inertia_over_m3(self) -> np.ndarray:
        """Dimensionless ``I / M^3`` (G = c = 1); an alias of ``value("moment_of_inertia_over_m3")``."""
        return self.value("moment_of_inertia_over_m3")

    def select(self, index) -> Stars:
        """The stars at ``index`` (any NumPy index, applied to every field)."""
        return Stars(**{k: np.asarray(v)[index] for k, v in self.as_dict().items()})

    def as_dict(self) -> dict:
        """Field name -> array (the solver's fields; derived quantities through :meth:`value`)."""
        return {k: getattr(self, k) for k in self.__dataclass_fields__}


@dataclass(frozen=True)
class MaximumMass:
    """The heaviest stable star (first maximum of M along the sequence).

    Attributes
    ----------
    star : Stars
        The maximum-mass star (arrays of length 1).
    max_sound_speed_sq : float
        Largest ``c_s^2`` of the EOS between the surface and the centre of
        the maximum-mass star.  Above 1 the EOS is acausal below M_max.
    """

    star: Stars
    max_sound_speed_sq: float

    @property
    def mass_msun(self) -> float:
        return float(self.star.mass_msun[0])

    @property
    def radius_km(self) -> float:
        return float(self.star.radius_km[0])

    @property
    def central_pressure_dyn_cm2(self) -> float:
        return float(self.star.central_pressure_dyn_cm2[0])

    @property
    def acausal(self) -> bool:
        """True if the sound speed exceeds light speed below M_max."""
        return bool(self.max_sound_speed_sq > 1.0)


@dataclass(frozen=True)
class StarSequence:
    """The stable branch of one EOS.

    Attributes
    ----------
    family : str
    parameters : dict
    status : Status
        ``Status.OK`` on success; ``NO_MAXIMUM``, ``EOS_ENDS`` or
        ``SOLVER_FAILURE`` otherwise (``status.message`` says it in words).
    branch : Stars
        Stars along the stable branch in increasing central pressure, from
        below 0.5 Msun (where the EOS allows) up to the maximum mass.
    mass_max : MaximumMass or None
    twin_mass_max_msun : float
        Maximum of a second stable branch (twin stars) beyond the first
        maximum, located at scan resolution; NaN if there is none.
    at_mass : Stars or None
        Exact solves at the requested masses (NaN above M_max).
    nfev : int
        Right-hand-side evaluations (each over all stars of a pass).
    error_estimate : BranchError or None
        Estimated relative integration error of each branch star (step
        doubling; computed for tabulated EOS, or on request).
    """

    family: str
    parameters: dict
    status: Status
    branch: Stars
    mass_max: MaximumMass | None
    twin_mass_max_msun: float = float("nan")
    at_mass: Stars | None = None
    nfev: int = 0
    eos: object = field(default=None, repr=False, compare=False)
    error_estimate: object = field(default=None, repr=False, compare=False)

    @property
    def success(self) -> bool:
        return self.status == Status.OK

    @property
    def message(self) -> str:
        """The status in words."""
        return self.status.message


@dataclass(frozen=True)
class StarProfile:
    """Interior of one star, at the integration nodes from centre to surface.

    Attributes
    ----------
    radius_km : ndarray
        Circumferential radius ``r``.
    mass_msun : ndarray
        Enclosed gravitational mass ``m(r)``.
    pressure_dyn_cm2, energy_density_g_cm3, rest_mass_density_g_cm3 : ndarray
    pseudo_enthalpy : ndarray
    alpha : ndarray
        Metric function with ``g_tt = -exp(2 alpha)``; matches the exterior
        Schwarzschild metric, ``alpha(R) = ln(1 - 2M/R) / 2``.
    y : ndarray
        Tidal variable ``y = r H'/H`` (before the surface density-jump term).
    star : Stars
        Global properties of the star.
    """

    radius_km: np.ndarray
    mass_msun: np.ndarray
    pressure_dyn_cm2: np.ndarray
    energy_density_g_cm3: np.ndarray
    rest_mass_density_g_cm3: np.ndarray
    pseudo_enthalpy: np.ndarray
    alpha: np.ndarray
    y: np.ndarray
    star: Stars
