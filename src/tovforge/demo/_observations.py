"""The observations the demo fits: mass-radius measurements and merger tidal constraints.

The file shipped with the package, ``invented_observations.toml``, holds
INVENTED data (its first lines say so): three made-up pulsars and one made-up
binary merger.  Users swap in their own file of the same layout with
``tovforge demo --data FILE``.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass
from pathlib import Path

from ..errors import InputError

__all__ = ["INVENTED_DATA", "MassRadius", "MergerTides", "Observations", "ErrorRatio", "error_budget",
           "load_observations"]

#: The invented data set shipped with the package.
INVENTED_DATA = Path(__file__).with_name("invented_observations.toml")


@dataclass(frozen=True)
class MassRadius:
    """A mass-radius measurement: a two-dimensional Gaussian in (M, R).

    Attributes
    ----------
    name : str
    mass_msun, mass_sigma_msun : float
        Mean and standard deviation of the gravitational mass, in Msun.
    radius_km, radius_sigma_km : float
        Mean and standard deviation of the circumferential radius, in km.
    correlation : float
        Correlation coefficient of M and R, in (-1, 1).
    """

    name: str
    mass_msun: float
    mass_sigma_msun: float
    radius_km: float
    radius_sigma_km: float
    correlation: float = 0.0


@dataclass(frozen=True)
class MergerTides:
    """A binary-merger constraint on the binary tidal deformability.

    Attributes
    ----------
    name : str
    chirp_mass_msun : float
        Chirp mass in Msun (taken as exact: it is measured far better than the rest).
    mass_ratio_min, mass_ratio_max : float
        Range of the uniform prior on ``q = m2 / m1``, within (0, 1].
    lambda_tilde, lambda_tilde_sigma : float
        Mean and standard deviation of the Gaussian on Lambda-tilde (dimensionless).
    """

    name: str
    chirp_mass_msun: float
    mass_ratio_min: float
    mass_ratio_max: float
    lambda_tilde: float
    lambda_tilde_sigma: float


@dataclass(frozen=True)
class Observations:
    """Everything the demo likelihood uses.

    Attributes
    ----------
    pulsars : tuple of MassRadius
    mergers : tuple of MergerTides
    note : str
        The file's ``note`` (for the shipped file: that the data are invented).
    generator : dict
        Optional ``[generator]`` table: ``family`` and the parameters the numbers
        were made around (drawn as a marker); empty when absent.
    path : Path
    """

    pulsars: tuple
    mergers: tuple
    note: str
    generator: dict
    path: Path

    @property
    def names(self) -> tuple[str, ...]:
        """Names of all objects, pulsars first."""
        return tuple(o.name for o in self.pulsars + self.mergers)


_PULSAR_KEYS = {"name": str, "mass_msun": float, "mass_sigma_msun": float, "radius_km": float,
                "radius_sigma_km": float, "correlation": float}
_MERGER_KEYS = {"name": str, "chirp_mass_msun": float, "mass_ratio_min": float, "mass_ratio_max": float,
                "lambda_tilde": float, "lambda_tilde_sigma": float}
_OPTIONAL = {"correlation"}


def _entry(path, where: str, raw, keys: dict) -> dict:
    if not isinstance(raw, dict):
        raise InputError(f"{path}: {where} must be a table.")
    unknown = sorted(set(raw) - set(keys))
    if unknown:
        raise InputError(f"{path}: {where}.{unknown[0]} is not a known key (known: {', '.join(keys)}).")
    out = {}
    for key, kind in keys.items():
        if key not in raw:
            if key in _OPTIONAL:
                continue
            raise InputError(f"{path}: {where}.{key} is missing.")
        v = raw[key]
        if kind is str:
            if not isinstance(v, str) or not v.strip():
                raise InputError(f"{path}: {where}.{key} must be a non-empty string. Got {v!r}.")
            out[key] = v.strip()
            continue
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise InputError(f"{path}: {where}.{key} must be a finite number. Got {v!r}.")
        out[key] = float(v)
    return out


def _positive(path, where, entry, keys):
    for k in keys:
        if not entry[k] > 0:
            raise InputError(f"{path}: {where}.{k} must be > 0. Got {entry[k]:g}.")


def load_observations(path=None) -> Observations:
    """Read an observations file (TOML); by default the invented demo data.

    Parameters
    ----------
    path : path-like, optional
        A file with ``[[pulsar]]`` tables (``name``, ``mass_msun``,
        ``mass_sigma_msun``, ``radius_km``, ``radius_sigma_km``, optional
        ``correlation``), ``[[merger]]`` tables (``name``, ``chirp_mass_msun``,
        ``mass_ratio_min``, ``mass_ratio_max``, ``lambda_tilde``,
        ``lambda_tilde_sigma``), an optional ``note`` and an optional
        ``[generator]`` table.  At least one pulsar or merger is needed.

    Returns
    -------
    Observations

    Raises
    ------
    tovforge.errors.InputError
        With the file and the key path of the first problem.
    """
    path = Path(INVENTED_DATA if path is None else path)
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise InputError(f"{path}: cannot read the observations ({exc.strerror}).") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{path}: not valid TOML: {exc}.") from None
    unknown = sorted(set(raw) - {"note", "pulsar", "merger", "generator"})
    if unknown:
        raise InputError(f"{path}: {unknown[0]} is not a known key (known: note, pulsar, merger, generator).")
    pulsars, mergers = [], []
    for i, item in enumerate(raw.get("pulsar", [])):
        where = f"pulsar[{i}]"
        e = _entry(path, where, item, _PULSAR_KEYS)
        _positive(path, where, e, ("mass_msun", "mass_sigma_msun", "radius_km", "radius_sigma_km"))
        if not -1.0 < e.get("correlation", 0.0) < 1.0:
            raise InputError(f"{path}: {where}.correlation must be in (-1, 1). Got {e['correlation']:g}.")
        pulsars.append(MassRadius(**e))
    for i, item in enumerate(raw.get("merger", [])):
        where = f"merger[{i}]"
        e = _entry(path, where, item, _MERGER_KEYS)
        _positive(path, where, e, ("chirp_mass_msun", "lambda_tilde_sigma"))
        if not 0.0 < e["mass_ratio_min"] < e["mass_ratio_max"] <= 1.0:
            raise InputError(f"{path}: {where} needs 0 < mass_ratio_min < mass_ratio_max <= 1. "
                             f"Got {e['mass_ratio_min']:g} and {e['mass_ratio_max']:g}.")
        mergers.append(MergerTides(**e))
    if not pulsars and not mergers:
        raise InputError(f"{path}: no [[pulsar]] or [[merger]] table; nothing to fit.")
    names = [o.name for o in pulsars + mergers]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise InputError(f"{path}: the name {dup[0]!r} is used twice.")
    generator = raw.get("generator", {})
    if not isinstance(generator, dict):
        raise InputError(f"{path}: generator must be a table.")
    note = raw.get("note", "")
    if not isinstance(note, str):
        raise InputError(f"{path}: note must be a string.")
    return Observations(tuple(pulsars), tuple(mergers), note, dict(generator), path)


#: Emulator error over measurement sigma above which the fit is flagged.  Added in
#: quadrature, an error of 0.2 sigma widens the likelihood by 2 %; beyond that the
#: emulator's own (correlated) error can shift a posterior noticeably.
WARN_RATIO = 0.2


@dataclass(frozen=True)
class ErrorRatio:
    """The emulator's held-out error beside one measurement's uncertainty.

    Attributes
    ----------
    name : str
        The object.
    quantity : str
        ``radius`` (km) or ``lambda_tilde`` (dimensionless).
    emulator_p95 : float
        The emulator's held-out 95th-percentile error of that quantity (for
        Lambda-tilde: the relative p95 of Lambda(M) times the measured value).
    measurement_sigma : float
        The measurement's standard deviation, in the same units.
    """

    name: str
    quantity: str
    emulator_p95: float
    measurement_sigma: float

    @property
    def ratio(self) -> float:
        """Emulator error in units of the measurement's sigma."""
        return self.emulator_p95 / self.measurement_sigma

    @property
    def too_large(self) -> bool:
        """True when the emulator error may bias the fit (``ratio > WARN_RATIO``)."""
        return self.ratio > WARN_RATIO


def error_budget(check: dict, observations: Observations) -> tuple[ErrorRatio, ...]:
    """Compare a model's held-out errors with each measurement's uncertainty.

    Parameters
    ----------
    check : dict
        The held-out error table of ``tovforge check`` (``report.json``, or an
        exported file's ``CHECK``).
    observations : Observations

    Returns
    -------
    tuple of ErrorRatio
        One per pulsar (radius) and per merger (Lambda-tilde).
    """
    errors = check["errors"]
    r95 = float(errors["radius_km_at_mass"]["abs_p95"])
    l95 = float(errors["tidal_deformability_at_mass"]["rel_p95"])
    out = [ErrorRatio(p.name, "radius", r95, p.radius_sigma_km) for p in observations.pulsars]
    out += [ErrorRatio(m.name, "lambda_tilde", l95 * m.lambda_tilde, m.lambda_tilde_sigma)
            for m in observations.mergers]
    return tuple(out)
