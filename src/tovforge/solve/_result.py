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

__all__ = ["Stars", "MaximumMass", "TwinBranch", "StarSequence", "StarProfile", "missing_star_reasons"]


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


def missing_star_reasons(requested, found, lightest: float, heaviest: float, branch: str,
                         heaviest_name: str = "M_max") -> tuple[str, ...]:
    """Why no star of a branch was returned at each requested mass ('' where one was).

    Parameters
    ----------
    requested : array_like, shape (n,)
        Requested gravitational masses (Msun).
    found : array_like, shape (n,)
        Masses of the stars returned (NaN where none).
    lightest, heaviest : float
        Masses of the lightest and the heaviest star of the branch (Msun).
    branch : str
        Name of the branch in the text (``"stable branch"``, ``"twin branch"``).
    heaviest_name : str
        Name of the heaviest star in the text.
    """
    out = []
    for m, f in zip(np.asarray(requested, float).ravel(), np.asarray(found, float).ravel()):
        if np.isfinite(f):
            out.append("")
        elif m > heaviest:
            out.append(f"above {heaviest_name} = {heaviest:.6f} Msun of the {branch}")
        elif m < lightest:
            out.append(f"below the lightest star of the {branch} ({lightest:.6f} Msun)")
        else:
            out.append(f"no exact star of the {branch} found within the mass tolerance")
    return tuple(out)


@dataclass(frozen=True)
class TwinBranch:
    """A second stable branch of one EOS (twin stars), beyond the first maximum.

    After a first-order transition above Seidov's limit (or any turn of
    ``M(h_c)``), ``M`` falls from the first maximum to a minimum, where a
    radial mode regains stability (the mass-radius curve turns clockwise;
    Bardeen, Thorne & Meltzer 1966, ApJ 145, 505), and rises again to a
    second maximum.  Stars of one mass then exist on both branches (twins),
    the ones here being the more compact.

    Attributes
    ----------
    branch : Stars
        Stars from the minimum to the maximum, in increasing central pressure
        (both ends included).
    mass_max : MaximumMass
        The heaviest star of the branch (its second maximum), with the
        largest ``c_s^2`` of the EOS below its centre.
    mass_min : Stars
        The lightest star of the branch (the minimum of ``M`` between the
        branches; arrays of length 1).
    at_mass : Stars or None
        Exact stars of this branch at the requested masses (NaN outside
        ``[M_min, M_max]`` of the branch).
    """

    branch: Stars
    mass_max: MaximumMass
    mass_min: Stars
    at_mass: Stars | None = None

    @property
    def mass_min_msun(self) -> float:
        return float(self.mass_min.mass_msun[0])

    def at_mass_reasons(self, requested) -> tuple[str, ...]:
        """Why ``at_mass`` has no star at each of the ``requested`` masses ('' where it has one)."""
        found = np.full(np.size(requested), np.nan) if self.at_mass is None else self.at_mass.mass_msun
        return missing_star_reasons(requested, found, self.mass_min_msun, self.mass_max.mass_msun, "twin branch",
                                    "its maximum")


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
        The first maximum of ``M`` (the convention for ``M_max``): a smooth
        maximum, or the star centred on a transition above Seidov's limit.
    twin : TwinBranch or None
        A second stable branch beyond the first maximum (twin stars), None
        if there is none.
    at_mass : Stars or None
        Exact solves on the stable branch at the requested masses (NaN where
        it has no star of that mass: see :meth:`at_mass_reasons`).
    requested_mass_msun : ndarray or None
        The requested masses, one per entry of ``at_mass``.
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
    twin: TwinBranch | None = None
    at_mass: Stars | None = None
    requested_mass_msun: np.ndarray | None = None
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

    @property
    def twin_mass_max_msun(self) -> float:
        """Maximum of the twin branch in Msun (NaN if there is none)."""
        return self.twin.mass_max.mass_msun if self.twin is not None else float("nan")

    def at_mass_reasons(self) -> tuple[str, ...]:
        """Why ``at_mass`` has no star at each requested mass ('' where it has one)."""
        if self.requested_mass_msun is None:
            return ()
        if not self.success:
            return tuple(self.message for _ in np.atleast_1d(self.requested_mass_msun))
        reasons = missing_star_reasons(self.requested_mass_msun, self.at_mass.mass_msun,
                                       float(np.nanmin(self.branch.mass_msun)), self.mass_max.mass_msun,
                                       "stable branch")
        if self.twin is None or self.twin.at_mass is None:
            return reasons
        twin = np.isfinite(self.twin.at_mass.mass_msun)
        return tuple(r + ("; the twin branch has a star of this mass" if r and t else "")
                     for r, t in zip(reasons, twin))


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
