"""The observations the demo fits: mass-radius measurements and merger tidal constraints.

The file shipped with the package, ``invented_observations.toml``, holds
INVENTED data (its first lines say so): three made-up pulsars and one made-up
binary merger.  Users swap in their own file of the same layout with
``tovforge demo --data FILE``.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from ... import _toml as toml
from ...errors import InputError

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


#: Keys of each table: name -> (lower bound, open lower bound, upper bound, open upper bound), or None for
#: the name (a non-empty string).  Masses, radii and widths are positive.
_POSITIVE = (0.0, True, None, False)
_ANY = (None, False, None, False)
_PULSAR_KEYS = {"name": None, "mass_msun": _POSITIVE, "mass_sigma_msun": _POSITIVE, "radius_km": _POSITIVE,
                "radius_sigma_km": _POSITIVE, "correlation": (-1.0, True, 1.0, True)}
_MERGER_KEYS = {"name": None, "chirp_mass_msun": _POSITIVE, "mass_ratio_min": _ANY, "mass_ratio_max": _ANY,
                "lambda_tilde": _ANY, "lambda_tilde_sigma": _POSITIVE}
_OPTIONAL = {"correlation"}


def _entries(raw: dict, key: str, keys: dict) -> list[dict]:
    """The checked ``[[key]]`` tables of the document."""
    out = []
    for i, item in enumerate(toml.array(raw.get(key, []), key)):
        where = toml.join(key, i)
        tbl = toml.table(item, where)
        toml.check_keys(tbl, keys, where)
        entry = {}
        for name, limits in keys.items():
            if name not in tbl and name in _OPTIONAL:
                continue
            value = toml.required(tbl, name, where)
            path = toml.join(where, name)
            entry[name] = (toml.string(value, path, nonempty=True).strip() if limits is None
                           else toml.number(value, path, limits[0], limits[2], limits[1], limits[3]))
        out.append(entry)
    return out


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
    raw, _ = toml.load_toml(path, "observations")
    with toml.in_file(path):
        toml.check_keys(raw, ("note", "pulsar", "merger", "generator"), "")
        pulsars = [MassRadius(**e) for e in _entries(raw, "pulsar", _PULSAR_KEYS)]
        mergers = []
        for i, e in enumerate(_entries(raw, "merger", _MERGER_KEYS)):
            if not 0.0 < e["mass_ratio_min"] < e["mass_ratio_max"] <= 1.0:
                raise InputError(f"merger[{i}]: needs 0 < mass_ratio_min < mass_ratio_max <= 1. "
                                 f"Got {e['mass_ratio_min']:g} and {e['mass_ratio_max']:g}.")
            mergers.append(MergerTides(**e))
        if not pulsars and not mergers:
            raise InputError("no [[pulsar]] or [[merger]] table; nothing to fit.")
        names = [o.name for o in pulsars + mergers]
        dup = sorted({n for n in names if names.count(n) > 1})
        if dup:
            raise InputError(f"the name {dup[0]!r} is used twice.")
        generator = toml.table(raw.get("generator", {}), "generator")
        note = toml.string(raw.get("note", ""), "note")
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
