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
separated).  Rows must be positive, the energy density (and rest-mass
density) increasing strictly and the pressure never decreasing.  Two rows of
equal pressure are a first-order phase transition (a Maxwell construction):
``e`` jumps from the first to the second (more rows of one pressure are merged
into their first and last); a row written twice (equal ``p`` and ``e``) is a
break without a jump, where the sound speed may be discontinuous.  The first row is the stellar surface (``h = 0``);
a warning says so when its pressure is far from zero.

Between rows, ``ln e`` is a monotone cubic (PCHIP) function of ``ln p``; the
sound speed is the derivative of that interpolant and the pseudo-enthalpy its
integral.  Without a rest-mass column the first law ``d ln rho = de / (e + p)``
gives the rest-mass density, normalised to ``rho = e`` at the first row; at a
transition it jumps at fixed chemical potential, ``rho ~ e + p``.
"""

from __future__ import annotations

import math
import re
import warnings
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from ..errors import InvalidEOSParameter, TableFormatError
from ..units import C_CGS, DENSITY_CGS_TO_GEOM, MEV_FM3_TO_DYN_CM2, MEV_FM3_TO_G_CM3, PRESSURE_CGS_TO_GEOM
from ._base import EOS, EOSFamily, register_family
from ._batch import HermiteTable

__all__ = ["Tabulated", "read_table", "table_batch", "table_rows", "write_table", "TableData", "TableBatch", "ATOMIC_MASS_UNIT_G",
           "KINK_CURVATURE_JUMP", "MAX_TABLE_KINKS", "SURFACE_PRESSURE_RATIO"]

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


@dataclass(frozen=True)
class TableData:
    """Validated rows of a tabulated EOS in cgs units.

    Attributes
    ----------
    pressure_dyn_cm2, energy_density_g_cm3 : ndarray
    rest_mass_density_g_cm3 : ndarray or None
    source : str
        Where the rows came from (file name).
    jump_rows : ndarray of int
        Rows ``k`` whose pressure equals that of row ``k + 1``: a first-order
        phase transition from ``e[k]`` to ``e[k + 1]`` (more than two rows of one
        pressure are merged into their first and last; ``e[k] = e[k + 1]`` is a
        break without a jump).
    line_numbers : list of int
        Line of the file of each row.
    """

    pressure_dyn_cm2: np.ndarray
    energy_density_g_cm3: np.ndarray
    rest_mass_density_g_cm3: np.ndarray | None
    source: str
    jump_rows: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.intp))
    line_numbers: list = field(default_factory=list)


@dataclass(frozen=True)
class TableBatch(HermiteTable):
    """A :class:`HermiteTable` made from a file, which keeps the file's rows.

    ``row_pressure`` and ``row_energy_density`` (geometrised, shape (n_rows,))
    let the solver tell the causality of the rows from that of the
    interpolant.
    """

    row_pressure: np.ndarray | None = None
    row_energy_density: np.ndarray | None = None

    def select(self, eos_index):
        sub = HermiteTable.select(self, eos_index)
        return TableBatch(sub.h_nodes, sub.coef, sub.kink_h, sub.e_surface_, sub.jump_h, self.row_pressure,
                          self.row_energy_density)

    def with_rows(self, p, e) -> "TableBatch":
        """The same table keeping the rows ``p``, ``e`` (geometrised, km^-2)."""
        return replace(self, row_pressure=np.asarray(p, float), row_energy_density=np.asarray(e, float))

    def row_sound_speed_sq(self, p_upper: float) -> float:
        """Largest secant ``dp/de`` between consecutive rows of one phase up to ``p_upper`` (km^-2)."""
        dp, de = np.diff(self.row_pressure), np.diff(self.row_energy_density)
        use = (self.row_pressure[1:] <= p_upper * (1.0 + 1e-12)) & (dp > 0)
        return float(np.max(dp[use] / de[use], initial=0.0))


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
    from .._files import read_text

    path = Path(path)
    text = read_text(path, "EOS table", TableFormatError)
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
    return _checked_rows(cols, linenos, path)


#: Rows of a table up to this energy density (g/cm^3, about four times nuclear saturation density) must
#: have p <= e c^2.  Models of dense matter stay far below that limit there (p/e of a few tenths at
#: most; from memory), so a row above it is a unit or column mistake.
DEC_CHECK_BELOW_G_CM3 = 1e15


def _checked_rows(cols: dict, linenos: list[int], path) -> TableData:
    """Check monotonicity, find the phase transitions, merge rows of one pressure."""
    p, e = cols["pressure"], cols["energy_density"]
    rho = cols.get("rest_mass_density")
    n = p.size

    def fail(j, message):
        raise TableFormatError(f"{path}:{linenos[j]}: {message}")

    # matter has less pressure than energy density (the dominant energy condition): p > e c^2 at the
    # densities of stellar matter is a wrong unit or column, and gave stars of thousands of solar masses;
    # far above them an extrapolated fit may pass it (a piecewise polytrope does near 8e15 g/cm^3)
    over = np.flatnonzero((p > e * C_CGS**2) & (e <= DEC_CHECK_BELOW_G_CM3))
    if over.size:
        j = int(over[0])
        fail(j, f"pressure {p[j]:.6g} dyn/cm^2 exceeds the energy density {e[j]:.6g} g/cm^3 times c^2 "
                f"({e[j] * C_CGS**2:.6g} erg/cm^3): no matter has p > e; check the units and the order of the "
                "columns.")
    for j in range(1, n):  # rows of a file: a Python loop outside any hot path
        if p[j] < p[j - 1]:
            fail(j, f"pressure must not decrease from row to row ({p[j - 1]:.6g} then {p[j]:.6g} dyn/cm^2).")
        split = p[j] == p[j - 1]  # a phase transition, or (e repeated too) a declared break without a jump
        if e[j] < e[j - 1] or (e[j] == e[j - 1] and not split):
            what = ("energy_density must not fall across a phase transition (rows of equal pressure): the jump "
                    "must be positive" if split else "energy_density must increase strictly from row to row")
            fail(j, f"{what} ({e[j - 1]:.6g} then {e[j]:.6g} g/cm^3).")
        if rho is not None and (rho[j] < rho[j - 1] or (rho[j] == rho[j - 1] and e[j] > e[j - 1])):
            fail(j, f"rest_mass_density must increase strictly from row to row ({rho[j - 1]:.6g} then "
                    f"{rho[j]:.6g} g/cm^3).")
    same = np.flatnonzero(p[1:] == p[:-1])  # row j and j + 1 share a pressure
    if same.size and same[0] == 0:
        fail(1, "a phase transition (rows of equal pressure) cannot start at the first row: the table needs "
                "rows of the phase below it.")
    # Three or more rows of one pressure (a sampled mixed phase) are one jump
    # from the first to the last of them: drop the rows in between.
    keep = np.ones(n, dtype=bool)
    keep[same[1:][np.diff(same) == 1]] = False
    idx = np.flatnonzero(keep)
    pk = p[idx]
    jump_at = np.flatnonzero(pk[1:] == pk[:-1])  # kept row k (below) and k + 1 (above)
    if jump_at.size and jump_at[-1] == idx.size - 2:
        fail(idx[-1], "a phase transition at the last row leaves no rows of the phase above it.")
    return TableData(p[idx], e[idx], None if rho is None else rho[idx], str(path), jump_at,
                     [linenos[i] for i in idx])


#: Rows where the curvature of the interpolant ``d^2 ln e / d (ln p)^2``, times the
#: row spacing in ``ln p``, jumps by more than this become nodes of every star's
#: integration grid (see :func:`table_batch`).
KINK_CURVATURE_JUMP = 1e-3
#: At most this many such rows (the largest jumps) become nodes.
MAX_TABLE_KINKS = 96


def _smooth_between(P, x, y, breaks):
    """A C2 cubic spline through the rows between kinks, C1 (PCHIP's slopes) at the kinks.

    Between the kink rows ``breaks`` each stretch of rows gets the cubic spline
    that takes PCHIP's slopes at its two ends (clamped), so the interpolant is
    twice differentiable at every other row: a Runge-Kutta step that straddles
    such a row keeps its order.  A stretch whose spline is not increasing
    (``c_s^2`` would leave (0, inf)), or that has fewer than 4 rows, keeps PCHIP.
    """
    from scipy.interpolate import CubicSpline, PPoly

    dP = P.derivative()
    coef = P.c.copy()
    edges = np.concatenate([[0], np.asarray(breaks, int), [x.size - 1]])
    for i, j in zip(edges[:-1], edges[1:]):  # one stretch per kink (a handful)
        if j - i < 3:
            continue
        S = CubicSpline(x[i:j + 1], y[i:j + 1], bc_type=((1, float(dP(x[i]))), (1, float(dP(x[j])))))
        t = np.linspace(0.0, 1.0, 5)
        probe = (x[i:j, None] + t * np.diff(x[i:j + 1])[:, None]).ravel()
        if np.all(S.derivative()(probe) > 0):
            coef[:, i:j] = S.c
    return PPoly(coef, x)


def table_batch(data: TableData, cells: int = 2048) -> HermiteTable:
    """Turn validated rows into a :class:`HermiteTable` in geometrised units.

    Between rows of one phase, ``ln e`` is a function ``F`` of ``ln p``,
    resampled on about ``cells`` intervals that never straddle a row of the
    file.  With ``w = e + p``: ``c_s^2 = (p/e) / F'``, ``dh = p / w d ln p`` and
    ``d ln c_s^2 / d ln p = 1 - F' - F''/F'``.

    ``F`` starts as the monotone cubic PCHIP (Fritsch & Carlson 1980, SIAM J.
    Numer. Anal. 17, 238), which is only once differentiable: its ``F''`` jumps
    at every row, by about the row spacing at smooth rows and by much more
    where a kink of the underlying EOS falls between two rows.  A fixed
    Runge-Kutta step that straddles such jumps loses its order (measured: 16
    steps gave Lambda 9 % off on a 2000-row table).  So rows where ``F''``
    times the row spacing jumps by more than :data:`KINK_CURVATURE_JUMP` become
    kinks (nodes of every star), and between them ``F`` is the cubic spline
    with PCHIP's slopes at the kinks (:func:`_smooth_between`): twice
    differentiable at every other row.

    A phase transition (rows ``k`` and ``k + 1`` of equal pressure) splits the
    table: each phase is interpolated on its own, ``h`` is continuous, and the
    node at the transition is written twice (below and above the jump).
    """
    from scipy.interpolate import PchipInterpolator

    from ._core_tables import cumulative_corrected_trapezoid

    lp_all = np.log(data.pressure_dyn_cm2 * PRESSURE_CGS_TO_GEOM)
    le_all = np.log(data.energy_density_g_cm3 * DENSITY_CGS_TO_GEOM)
    lr_all = (None if data.rest_mass_density_g_cm3 is None
              else np.log(data.rest_mass_density_g_cm3 * DENSITY_CGS_TO_GEOM))
    bounds = np.concatenate([[0], data.jump_rows + 1, [lp_all.size]])
    sub = max(1, math.ceil(cells / max(lp_all.size - 1 - data.jump_rows.size, 1)))
    frac = np.arange(sub) / sub
    parts = {k: [] for k in ("h", "p", "e", "rho", "cs2", "dcs2", "d1r", "d2r")}
    kink_h, kink_score, jump_h = [], [], []
    h0, rho_below = 0.0, None
    for a, b in zip(bounds[:-1], bounds[1:]):  # one pass per phase (a handful)
        lp, le = lp_all[a:b], le_all[a:b]
        P = PchipInterpolator(lp, le)
        # Rows where PCHIP's F'' jumps by much (times the row spacing: the jump of the slope F'
        # that a kink of the EOS smoothed over one row interval would have; at smooth rows it falls
        # like the spacing squared) are kinks: nodes of every star.
        dxr = np.diff(lp)
        d2P = P.derivative(2)
        jump = np.abs(d2P(lp[1:-1] + 1e-9 * dxr[1:]) - d2P(lp[1:-1] - 1e-9 * dxr[:-1])) * 0.5 * (dxr[1:] + dxr[:-1])
        big = np.flatnonzero(jump > KINK_CURVATURE_JUMP)
        F = _smooth_between(P, lp, le, big + 1)
        dF, d2F = F.derivative(), F.derivative(2)
        x = np.append((lp[:-1, None] + frac * np.diff(lp)[:, None]).ravel(), lp[-1])
        dx = np.diff(x)
        x_lo, x_hi = x[:-1] + 1e-9 * dx, x[1:] - 1e-9 * dx  # inside each cell: one-sided F''
        p, e = np.exp(x), np.exp(F(x))
        Fp = dF(x)
        w = e + p
        cs2 = (p / e) / Fp
        q = p / w
        dq = p * e * (1.0 - Fp) / (w * w)
        h = h0 + cumulative_corrected_trapezoid(q, dq, x)

        def dcs2_dh(xx, idx):
            fp = dF(xx)
            return cs2[idx] * (1.0 - fp - d2F(xx) / fp) * (w[idx] / p[idx])

        dcs2 = np.stack([dcs2_dh(x_lo, slice(0, -1)), dcs2_dh(x_hi, slice(1, None))], axis=-1)
        L1p = w / p
        if lr_all is not None:
            G = PchipInterpolator(lp, lr_all[a:b])
            dG, d2G = G.derivative(), G.derivative(2)
            rho = np.exp(G(x))
            L2p = L1p * (1.0 + 1.0 / cs2) - L1p * L1p
            d1r = dG(x) * L1p
            d2r = np.stack([d2G(x_lo) * L1p[:-1] ** 2 + dG(x[:-1]) * L2p[:-1],
                            d2G(x_hi) * L1p[1:] ** 2 + dG(x[1:]) * L2p[1:]], axis=-1)
        else:
            # First law d ln rho / d ln p = e F' / w, integrated with one-sided
            # derivatives per cell (F'' jumps at rows).  The rest-mass density
            # is rho = e at the first row and jumps at a transition with e + p
            # (the chemical potential w / rho is continuous).
            r = e * Fp / w
            dw = e * Fp + p

            def dr(xx, idx):
                return (e[idx] * Fp[idx] ** 2 + e[idx] * d2F(xx)) / w[idx] - e[idx] * Fp[idx] * dw[idx] / w[idx] ** 2

            r_cells = np.stack([r[:-1], r[1:]], axis=-1)
            dr_cells = np.stack([dr(x_lo, slice(0, -1)), dr(x_hi, slice(1, None))], axis=-1)
            rho0 = e[0] if rho_below is None else rho_below * w[0] / (parts["e"][-1][-1] + parts["p"][-1][-1])
            rho = rho0 * np.exp(cumulative_corrected_trapezoid(r_cells, dr_cells, x))
            d1r, d2r = None, None
        if parts["h"]:  # a transition: the node h0 is written again, with the values above the jump
            jump_h.append(h0)
            kink_h.append(h0)
            kink_score.append(np.inf)
            for k in ("dcs2", "d2r"):
                if parts[k][0] is not None:
                    parts[k].append(np.zeros((1, 2)))
        for k, v in (("h", h), ("p", p), ("e", e), ("rho", rho), ("cs2", cs2), ("dcs2", dcs2), ("d1r", d1r),
                     ("d2r", d2r)):
            parts[k].append(v)
        kink_h.extend(h[(big + 1) * sub])
        kink_score.extend(jump[big])
        h0, rho_below = h[-1], rho[-1]
    cat = {k: (np.concatenate(v) if v[0] is not None else None) for k, v in parts.items()}
    order = np.argsort(-np.asarray(kink_score), kind="stable")[: MAX_TABLE_KINKS + len(jump_h)]
    kinks = np.sort(np.asarray(kink_h, float)[order])
    lnrho_derivs = None if cat["d1r"] is None else (cat["d1r"][None], cat["d2r"][None])
    return TableBatch.from_samples(
        cat["h"][None], cat["p"][None], cat["e"][None], cat["rho"][None], cat["cs2"][None], cat["dcs2"][None],
        kink_h=kinks[None], e_surface=np.array([cat["e"][0]]), lnrho_derivs=lnrho_derivs,
        jump_h=np.array(jump_h, float).reshape(1, -1),
    ).with_rows(np.exp(lp_all), np.exp(le_all))


#: A table whose first row has ``p / (e c^2)`` above this starts far from zero
#: pressure: the layers below its first row would move R by more than about 1 m.
SURFACE_PRESSURE_RATIO = 1e-5


def _warn_surface(data: TableData) -> None:
    """Warn when the first row, taken as the surface, is far from zero pressure."""
    p0, e0 = data.pressure_dyn_cm2[0], data.energy_density_g_cm3[0]
    ratio = p0 / (e0 * C_CGS**2)
    if ratio > SURFACE_PRESSURE_RATIO:
        # Missing enthalpy ~ (n + 1) p0 / e0 for an envelope of polytropic index n ~ 1.5, times
        # dr/dh = R (R - 2M) / M ~ 45 km for a 1.4 Msun star of 12 km: a rough size, said so.
        short_km = 110.0 * ratio
        line = data.line_numbers[0] if data.line_numbers else 1
        warnings.warn(
            f"{data.source}:{line}: the first row (p = {p0:.4g} dyn/cm^2, e = {e0:.4g} g/cm^3, p/(e c^2) = "
            f"{ratio:.2g}) is taken as the stellar surface (zero pressure outside it), so the layers below that "
            f"pressure are missing: radii come out short, by roughly {short_km:.2g} km at 1.4 Msun. Prepend rows "
            "of a crust down to about 1e4 g/cm^3 for exact radii.",
            stacklevel=3,
        )


def table_rows(eos_obj, n_rows: int, rho_lo_g_cm3: float = 1.0, rho_hi_g_cm3: float = 1e16):
    """``n_rows`` exact points of an EOS, log-spaced in rest-mass density.

    The positions come from interpolating a fine sample in ``ln h`` (up to the
    EOS's largest enthalpy, or ``h = 3``); the values are evaluated exactly at
    those positions.  Returns an :class:`~tovforge.eos.EOSPoint` (cgs).
    """
    h_max = min(eos_obj.h_max * 0.999, 3.0)
    hf = np.geomspace(1e-12, h_max, 200001)
    rf = eos_obj.evaluate(hf).rest_mass_density_g_cm3
    target = np.geomspace(rho_lo_g_cm3, min(rho_hi_g_cm3, rf[-1]), int(n_rows))
    return eos_obj.evaluate(np.exp(np.interp(np.log(target), np.log(rf), np.log(hf))))


def write_table(path, columns, rest_mass: bool = True):
    """Write EOS rows as a table file this module reads (header with units, 17 digits).

    ``columns`` is an :class:`~tovforge.eos.EOSPoint` or a tuple ``(p, e[, rho])`` in
    dyn/cm^2 and g/cm^3.  Returns ``path``.
    """
    path = Path(path)
    if hasattr(columns, "pressure_dyn_cm2"):
        columns = (columns.pressure_dyn_cm2, columns.energy_density_g_cm3, columns.rest_mass_density_g_cm3)
    cols = list(columns[:3] if rest_mass else columns[:2])
    head = "# pressure[dyn/cm^2], energy_density[g/cm^3]" + (", rest_mass_density[g/cm^3]" if rest_mass else "")
    lines = [head] + [", ".join(f"{v:.17e}" for v in row) for row in zip(*cols)]
    path.write_text("\n".join(lines) + "\n")
    return path


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
        _warn_surface(data)
        return EOS(self, params, table_batch(data))

    def _build(self, theta):
        raise InvalidEOSParameter("table EOS are built from files, not parameter vectors.")


register_family(Tabulated())
