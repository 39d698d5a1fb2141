"""Tabulated EOS read from a user's text file.

File format (ours)
------------------
Plain text, comma- or whitespace-separated columns.  Lines starting with
``#`` are comments, except a header line that names the columns with their
units in square brackets, for example::

    # pressure[MeV/fm^3], energy_density[MeV/fm^3], rest_mass_density[fm^-3]
    1.2e-12, 9.4e-09, 1.0e-11
    ...

Column names: ``pressure`` (or ``p``), ``energy_density`` (``e``, ``epsilon``)
and optionally ``rest_mass_density`` (``rho``, ``n``).  Without a header the
columns and units are given as options (``columns=`` and ``units=``, comma
separated).  Rows must be positive and increasing in both pressure and energy
density.  The first row is the stellar surface (``h = 0``).

Between rows, ``ln e`` is a monotone cubic (PCHIP) function of ``ln p``; the
sound speed is the derivative of that interpolant and the pseudo-enthalpy its
integral.  Without a rest-mass column the first law ``d ln rho = de / (e + p)``
gives the rest-mass density, normalised to ``rho = e`` at the first row.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np

from ..errors import InvalidEOSParameter, TableFormatError
from ..units import C_CGS, DENSITY_CGS_TO_GEOM, MEV_FM3_TO_DYN_CM2, MEV_FM3_TO_G_CM3, PRESSURE_CGS_TO_GEOM
from ._base import EOS, EOSFamily, register_family
from ._batch import HermiteTable

__all__ = ["Tabulated", "read_table", "TableData", "ATOMIC_MASS_UNIT_G"]

#: Atomic mass unit in g (CODATA 2018), used to turn a baryon number density
#: into a rest-mass density (a convention; common practice uses m_u or m_n).
ATOMIC_MASS_UNIT_G = 1.66053906660e-24

_NAMES = {
    "pressure": "pressure",
    "p": "pressure",
    "energy_density": "energy_density",
    "e": "energy_density",
    "epsilon": "energy_density",
    "rest_mass_density": "rest_mass_density",
    "rho": "rest_mass_density",
    "n": "rest_mass_density",
    "baryon_density": "rest_mass_density",
}

# unit -> factor to dyn/cm^2 (pressure) or g/cm^3 (densities)
_UNITS = {
    "pressure": {
        "dyn/cm^2": 1.0,
        "dyn/cm2": 1.0,
        "erg/cm^3": 1.0,
        "erg/cm3": 1.0,
        "pa": 10.0,
        "mev/fm^3": MEV_FM3_TO_DYN_CM2,
        "mev/fm3": MEV_FM3_TO_DYN_CM2,
        "g/cm^3": C_CGS**2,
        "g/cm3": C_CGS**2,
    },
    "energy_density": {
        "g/cm^3": 1.0,
        "g/cm3": 1.0,
        "erg/cm^3": 1.0 / C_CGS**2,
        "erg/cm3": 1.0 / C_CGS**2,
        "dyn/cm^2": 1.0 / C_CGS**2,
        "dyn/cm2": 1.0 / C_CGS**2,
        "mev/fm^3": MEV_FM3_TO_G_CM3,
        "mev/fm3": MEV_FM3_TO_G_CM3,
    },
    "rest_mass_density": {
        "g/cm^3": 1.0,
        "g/cm3": 1.0,
        "fm^-3": ATOMIC_MASS_UNIT_G * 1e39,
        "1/fm^3": ATOMIC_MASS_UNIT_G * 1e39,
        "1/fm3": ATOMIC_MASS_UNIT_G * 1e39,
        "cm^-3": ATOMIC_MASS_UNIT_G,
        "1/cm^3": ATOMIC_MASS_UNIT_G,
    },
}

_NUMBER = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eEdD][+-]?\d+)?$|^[+-]?(nan|inf|infinity)$", re.IGNORECASE)


class TableData:
    """Validated rows of a tabulated EOS in cgs units.

    Attributes
    ----------
    pressure_dyn_cm2, energy_density_g_cm3 : ndarray
    rest_mass_density_g_cm3 : ndarray or None
    source : str
        Where the rows came from (file name).
    """

    def __init__(self, p, e, rho, source):
        self.pressure_dyn_cm2 = p
        self.energy_density_g_cm3 = e
        self.rest_mass_density_g_cm3 = rho
        self.source = source


def _split(line: str) -> list[str]:
    if "," in line:
        return [f.strip() for f in line.split(",") if f.strip() != ""]
    return line.split()


def _parse_column(token: str, where: str):
    m = re.match(r"^\s*([A-Za-z_]+)\s*(?:[\[(]\s*([^\])]*)\s*[\])])?\s*$", token)
    if not m:
        raise TableFormatError(f"{where}: cannot read column header {token!r}; write e.g. pressure[dyn/cm^2].")
    name = m.group(1).lower()
    if name not in _NAMES:
        raise TableFormatError(
            f"{where}: unknown column {m.group(1)!r}; use pressure, energy_density and optionally rest_mass_density."
        )
    return _NAMES[name], (m.group(2) or "").strip()


def _unit_factor(kind: str, unit: str, where: str) -> float:
    key = unit.replace(" ", "").lower()
    if key not in _UNITS[kind]:
        allowed = ", ".join(sorted({u for u in _UNITS[kind] if "^" in u or u == "pa"}))
        raise TableFormatError(f"{where}: unknown unit {unit!r} for {kind}; allowed: {allowed}.")
    return _UNITS[kind][key]


def read_table(path, columns: str | None = None, units: str | None = None) -> TableData:
    """Read and validate an EOS table file.

    Parameters
    ----------
    path : str or Path
        The file.
    columns : str, optional
        Comma-separated column names, overriding the header.
    units : str, optional
        Comma-separated units matching ``columns`` (or the header's columns).

    Raises
    ------
    TableFormatError
        With the file name and line number of the first problem.
    """
    path = Path(path)
    try:
        text = path.read_text()
    except OSError as exc:
        raise TableFormatError(f"{path}: cannot read EOS table ({exc.strerror}).") from None
    lines = text.splitlines()
    header = None
    header_line = 0
    rows: list[tuple[int, list[str]]] = []
    for i, raw in enumerate(lines, start=1):
        line = raw.strip()
        if not line:
            continue
        body = line.lstrip("#").strip()
        fields = _split(body)
        if not fields:
            continue
        if line.startswith("#") or not _NUMBER.match(fields[0]):
            if header is None and rows == [] and any(
                re.match(r"^[A-Za-z_]+", f) and re.match(r"^[A-Za-z_]+", f).group(0).lower() in _NAMES
                for f in fields
            ):
                header = fields
                header_line = i
            elif not line.startswith("#"):
                raise TableFormatError(f"{path}:{i}: expected numbers, got {raw.strip()[:60]!r}.")
            continue
        rows.append((i, fields))

    if columns is not None:
        col_tokens = [c.strip() for c in columns.split(",") if c.strip()]
        where = f"{path}: option columns"
    elif header is not None:
        col_tokens = header
        where = f"{path}:{header_line}"
    else:
        raise TableFormatError(
            f"{path}: no header line naming the columns; add e.g. '# pressure[dyn/cm^2] energy_density[g/cm^3]' "
            "or give columns= and units=."
        )
    parsed = [_parse_column(t, where) for t in col_tokens]
    names = [n for n, _ in parsed]
    if units is not None:
        unit_list = [u.strip() for u in units.split(",")]
        if len(unit_list) != len(names):
            raise TableFormatError(f"{path}: {len(names)} columns but {len(unit_list)} units given.")
    else:
        unit_list = [u for _, u in parsed]
    for need in ("pressure", "energy_density"):
        if need not in names:
            raise TableFormatError(f"{where}: missing column {need!r} (columns found: {', '.join(names)}).")
    if len(set(names)) != len(names):
        raise TableFormatError(f"{where}: a column is named twice ({', '.join(names)}).")
    factors = []
    for name, unit in zip(names, unit_list):
        if not unit:
            raise TableFormatError(f"{where}: no unit for column {name!r}; write e.g. {name}[g/cm^3] or units=.")
        factors.append(_unit_factor(name, unit, where))

    if len(rows) < 4:
        raise TableFormatError(f"{path}: needs at least 4 data rows, found {len(rows)}.")
    data = np.empty((len(rows), len(names)))
    for r, (lineno, fields) in enumerate(rows):
        if len(fields) != len(names):
            raise TableFormatError(f"{path}:{lineno}: expected {len(names)} columns, found {len(fields)}.")
        for c, f in enumerate(fields):
            if not _NUMBER.match(f):
                raise TableFormatError(f"{path}:{lineno}: {f!r} is not a number.")
            v = float(f.replace("d", "e").replace("D", "e"))
            if not math.isfinite(v) or v <= 0:
                raise TableFormatError(f"{path}:{lineno}: {names[c]} must be a positive finite number, got {f}.")
            data[r, c] = v * factors[c]
    linenos = [ln for ln, _ in rows]
    cols = {n: data[:, k] for k, n in enumerate(names)}
    for name in names:
        bad = np.flatnonzero(np.diff(cols[name]) <= 0)
        if bad.size:
            j = bad[0] + 1
            raise TableFormatError(
                f"{path}:{linenos[j]}: {name} must increase strictly from row to row "
                f"({cols[name][j - 1]:.6g} then {cols[name][j]:.6g}, cgs)."
            )
    return TableData(cols["pressure"], cols["energy_density"], cols.get("rest_mass_density"), str(path))


def table_batch(data: TableData, cells: int = 2048) -> HermiteTable:
    """Turn validated rows into a :class:`HermiteTable` in geometrised units.

    ``ln e`` is a PCHIP function ``F`` of ``ln p`` (Fritsch & Carlson 1980,
    SIAM J. Numer. Anal. 17, 238), resampled on about ``cells`` intervals that
    never straddle a row of the file.  With ``w = e + p``:
    ``c_s^2 = (p/e) / F'``, ``dh = p / w d ln p`` and
    ``d ln c_s^2 / d ln p = 1 - F' - F''/F'``.
    """
    from scipy.interpolate import PchipInterpolator

    from ._core_tables import cumulative_corrected_trapezoid

    lp = np.log(data.pressure_dyn_cm2 * PRESSURE_CGS_TO_GEOM)
    le = np.log(data.energy_density_g_cm3 * DENSITY_CGS_TO_GEOM)
    F = PchipInterpolator(lp, le)
    dF, d2F = F.derivative(), F.derivative(2)
    n_rows = len(lp)
    sub = max(1, math.ceil(cells / (n_rows - 1)))
    frac = np.arange(sub) / sub
    x = np.append((lp[:-1, None] + frac * np.diff(lp)[:, None]).ravel(), lp[-1])
    dx = np.diff(x)
    x_lo, x_hi = x[:-1] + 1e-9 * dx, x[1:] - 1e-9 * dx  # one-sided second derivatives
    p, e = np.exp(x), np.exp(F(x))
    Fp = dF(x)
    w = e + p
    cs2 = (p / e) / Fp
    q = p / w
    dq = p * e * (1.0 - Fp) / (w * w)
    h = cumulative_corrected_trapezoid(q, dq, x)

    def dcs2_dh(xx, idx):
        fp = dF(xx)
        return cs2[idx] * (1.0 - fp - d2F(xx) / fp) * (w[idx] / p[idx])

    dcs2 = np.stack([dcs2_dh(x_lo, slice(0, -1)), dcs2_dh(x_hi, slice(1, None))], axis=-1)
    lnrho_derivs = None
    if data.rest_mass_density_g_cm3 is not None:
        G = PchipInterpolator(lp, np.log(data.rest_mass_density_g_cm3 * DENSITY_CGS_TO_GEOM))
        dG, d2G = G.derivative(), G.derivative(2)
        rho = np.exp(G(x))
        L1p = w / p
        L2p = L1p * (1.0 + 1.0 / cs2) - L1p * L1p
        d1 = dG(x) * L1p
        d2_lo = d2G(x_lo) * L1p[:-1] ** 2 + dG(x[:-1]) * L2p[:-1]
        d2_hi = d2G(x_hi) * L1p[1:] ** 2 + dG(x[1:]) * L2p[1:]
        lnrho_derivs = (d1[None], np.stack([d2_lo, d2_hi], axis=-1)[None])
    else:
        r = e * Fp / w
        dw = e * Fp + p
        dr = (e * Fp * Fp + e * d2F(x)) / w - e * Fp * dw / (w * w)
        rho = e[0] * np.exp(cumulative_corrected_trapezoid(r, dr, x))
    return HermiteTable.from_samples(
        h[None], p[None], e[None], rho[None], cs2[None], dcs2[None], e_surface=np.array([e[0]]),
        lnrho_derivs=lnrho_derivs,
    )


class Tabulated(EOSFamily):
    """EOS from a user's table file (``path=FILE [columns=...] [units=...]``)."""

    name = "table"
    description = "User EOS table: path=FILE [columns=p,e[,rho]] [units=u1,u2[,u3]]"
    reference = "user-supplied; monotone cubic (PCHIP) interpolation in log space"
    numeric = False
    parameters = ()
    options = ("path", "columns", "units")

    def __call__(self, **values) -> EOS:
        unknown = [k for k in values if k not in self.options]
        if unknown:
            raise InvalidEOSParameter(
                f"table has no parameter {unknown[0]!r}; its parameters are path, columns, units."
            )
        if "path" not in values:
            raise InvalidEOSParameter("table needs parameter 'path' (the EOS file).")
        data = read_table(values["path"], values.get("columns"), values.get("units"))
        params = {k: str(v) for k, v in values.items()}
        return EOS(self, params, table_batch(data))

    def _build(self, theta):
        raise InvalidEOSParameter("table EOS are built from files, not parameter vectors.")


register_family(Tabulated())
