"""Stars as tables, text and JSON: one format for every place that lists stars.

The columns are the star quantities of :data:`tovforge.quantities.QUANTITIES`
in declaration order (the table column is the registry's ``column``, the
text heading its ``symbol [unit]``, the JSON key its canonical name), so
``tovforge solve --table`` and ``tovforge table sequence`` write the same
table format, and a quantity added to the registry appears in all of them.
"""

from __future__ import annotations

import json
import time
from pathlib import Path

import numpy as np

from .. import quantities
from ._quantities import provenance
from ._write import Column, TableSummary, TableWriter

__all__ = ["STAR_COLUMNS", "BRANCH_COLUMN", "STABLE", "TWIN", "star_block", "star_table", "joined_stars",
           "branch_stars", "sequence_meta", "stars_text", "sequence_text", "sequence_json", "profile_text",
           "profile_json"]

#: Columns of a star table, one per star quantity of the registry.
STAR_COLUMNS = tuple(Column(q.column, q.unit, q.description) for q in quantities.star_quantities())
#: The requested mass, first column of tables of stars at given masses.
TARGET_MASS = Column("target_mass", "Msun", "requested gravitational mass")
#: Labels of the ``branch`` column.
STABLE, TWIN = 1, 2
#: Which stable branch a star is on, last column of star tables.
BRANCH_COLUMN = Column("branch", "1", f"{STABLE}: the stable branch up to the first maximum (M_max); {TWIN}: the "
                                      "twin branch, a second stable branch beyond it", "int64")


def star_block(stars) -> dict:
    """Column name -> values of every star quantity of ``stars`` (a :class:`tovforge.solve.Stars`)."""
    return {q.column: np.asarray(stars.value(q.name), float) for q in quantities.star_quantities()}


def joined_stars(parts):
    """One :class:`~tovforge.solve.Stars` from several, and the branch label of each star.

    Parameters
    ----------
    parts : list of Stars
        The first on the stable branch, the others on the twin branch.

    Returns
    -------
    stars : Stars
    branch : ndarray of int
        :data:`STABLE` or :data:`TWIN` per star.
    """
    from ..solve import Stars

    stars = Stars(**{k: np.concatenate([np.asarray(getattr(p, k), float) for p in parts])
                     for k in Stars.__dataclass_fields__})
    branch = np.concatenate([np.full(len(p), STABLE if i == 0 else TWIN, dtype=np.int64) for i, p in enumerate(parts)])
    return stars, branch


def branch_stars(seq):
    """The stars of the stable branch of ``seq``, then those of its twin branch, and their branch labels."""
    return joined_stars([seq.branch] + ([seq.twin.branch] if seq.twin is not None else []))


def sequence_meta(seq, settings, mode: str, command: str | None = None) -> dict:
    """Metadata of a star table of one EOS: provenance, the EOS and its maximum.

    Parameters
    ----------
    seq : tovforge.solve.StarSequence
        Without a maximum (a failed solve) the ``*_at_mass_max`` entries are NaN.
    settings : tovforge.solve.SequenceSettings
        The settings the stars were solved with.
    mode : str
        How the stars were chosen (``"branch"``, ``"points"``, ``"masses"``).
    command : str, optional
        Command line recorded (default ``sys.argv``).
    """
    mm = seq.mass_max
    nan = float("nan")
    return provenance(
        command,
        kind="sequence",
        mode=mode,
        family=seq.family,
        parameters_json=json.dumps(dict(seq.parameters)),
        status=int(seq.status),
        mass_max_msun=mm.mass_msun if mm else nan,
        radius_at_mass_max_km=mm.radius_km if mm else nan,
        max_sound_speed_sq=mm.max_sound_speed_sq if mm else nan,
        twin_mass_max_msun=float(seq.twin_mass_max_msun),
        twin_mass_min_msun=seq.twin.mass_min_msun if seq.twin else nan,
        stable_branch=("branch 1: connected branch of increasing central pressure up to the first maximum of M; "
                       "branch 2: a second stable branch (twin stars) from the minimum of M beyond it to its maximum"),
        solver_settings_json=json.dumps({"n_steps": settings.steps.n_steps,
                                         "steps_per_kink": settings.steps.steps_per_kink,
                                         "mass_rtol": settings.mass_rtol}),
    )


def star_table(out, stars, meta: dict, target_mass=None, branch=None, overwrite: bool = False) -> TableSummary:
    """Write stars as a table (``.csv``, ``.h5`` or ``.npz``) with the columns :data:`STAR_COLUMNS` and ``branch``.

    Parameters
    ----------
    out : path-like
    stars : tovforge.solve.Stars
        One-dimensional fields.
    meta : dict
        Metadata (see :func:`sequence_meta`).
    target_mass : array_like, optional
        Requested masses (Msun), written as a first ``target_mass`` column.
    branch : array_like of int, optional
        :data:`STABLE` or :data:`TWIN` per star (default: all on the stable branch).
    overwrite : bool
        Replace an existing file.

    Returns
    -------
    TableSummary
    """
    t0 = time.monotonic()
    columns = [*STAR_COLUMNS, BRANCH_COLUMN]
    block = star_block(stars)
    block[BRANCH_COLUMN.name] = np.full(len(stars), STABLE, dtype=np.int64) if branch is None else \
        np.asarray(branch, dtype=np.int64)
    if target_mass is not None:
        columns.insert(0, TARGET_MASS)
        block[TARGET_MASS.name] = np.asarray(target_mass, float)
    with TableWriter(out, columns, meta, overwrite=overwrite) as w:
        w.append(block)
    return TableSummary(Path(out), w.n_rows, tuple(c.name for c in columns), time.monotonic() - t0)


def _aligned(heads, rows) -> str:
    """Right-aligned text columns under their headings."""
    widths = [max([len(h)] + [len(r[j]) for r in rows]) for j, h in enumerate(heads)]
    lines = ["  ".join(h.rjust(w) for h, w in zip(heads, widths))]
    lines += ["  ".join(c.rjust(w) for c, w in zip(r, widths)) for r in rows]
    return "\n".join(lines)


def stars_text(stars) -> str:
    """Stars as aligned text: one row per star, one column per star quantity (``symbol [unit]`` headings)."""
    qs = quantities.star_quantities()
    values = [np.asarray(stars.value(q.name), float) for q in qs]
    rows = [[q.fmt.format(float(v[i])) for q, v in zip(qs, values)] for i in range(len(stars))]
    return _aligned([q.heading for q in qs], rows)


def _at_mass_lines(requested, stars, reasons, branch: str) -> list[str]:
    """Text of the stars of one branch at the requested masses, and why the others are missing."""
    found = np.isfinite(stars.mass_msun)
    lines = []
    if found.any():
        lines += ["", f"stars at the requested masses on the {branch} ({int(found.sum())} of {found.size}):",
                  stars_text(stars.select(found))]
    lines += [f"no star on the {branch} at {m:g} Msun: {why}" for m, why in zip(requested, reasons) if why]
    return lines


def sequence_text(seq) -> str:
    """The summary ``tovforge solve`` prints: status, maximum, twins, stars at masses and the branches."""
    pars = "  ".join(f"{k}={v:g}" if isinstance(v, float) else f"{k}={v}" for k, v in seq.parameters.items())
    lines = [f"EOS      {seq.family}  {pars}", f"status   {seq.message}"]
    if not seq.success:
        return "\n".join(lines)
    mm = seq.mass_max
    causal = "acausal below M_max" if mm.acausal else "causal"
    lines.append(
        f"M_max    {mm.mass_msun:.6f} Msun   R = {mm.radius_km:.4f} km   "
        f"p_c = {mm.central_pressure_dyn_cm2:.4e} dyn/cm^2   max c_s^2 = {mm.max_sound_speed_sq:.4f} ({causal})"
    )
    tw = seq.twin
    if tw is not None:
        lines.append(
            f"twins    a second stable branch from its minimum {tw.mass_min_msun:.6f} Msun "
            f"(R = {float(tw.mass_min.radius_km[0]):.4f} km) to its maximum {tw.mass_max.mass_msun:.6f} Msun "
            f"(R = {tw.mass_max.radius_km:.4f} km, max c_s^2 = {tw.mass_max.max_sound_speed_sq:.4f})"
        )
    if seq.at_mass is not None:
        lines += _at_mass_lines(seq.requested_mass_msun, seq.at_mass, seq.at_mass_reasons(), "stable branch")
        if tw is not None and tw.at_mass is not None:
            lines += _at_mass_lines(seq.requested_mass_msun, tw.at_mass, tw.at_mass_reasons(seq.requested_mass_msun),
                                    "twin branch")
    lines += ["", f"stable branch ({len(seq.branch)} stars, increasing central pressure):", stars_text(seq.branch)]
    if tw is not None:
        lines += ["", f"twin branch ({len(tw.branch)} stars, from its minimum to its maximum):",
                  stars_text(tw.branch)]
    return "\n".join(lines)


def _maximum_json(mm) -> dict:
    return {
        "mass_msun": mm.mass_msun if mm else None,
        "radius_km": mm.radius_km if mm else None,
        "central_pressure_dyn_cm2": mm.central_pressure_dyn_cm2 if mm else None,
        "max_sound_speed_sq": mm.max_sound_speed_sq if mm else None,
    }


def _at_mass_json(requested, stars, reasons) -> list[dict]:
    """One object per requested mass: the mass asked, why there is no star (or null), the star's quantities."""
    if stars is None:
        return []
    names = [q.name for q in quantities.star_quantities()]
    return [{"requested_mass_msun": float(m), "reason": why or None,
             **{k: float(stars.value(k)[i]) for k in names}}
            for i, (m, why) in enumerate(zip(requested, reasons))]


def sequence_json(seq) -> dict:
    """The object ``tovforge solve --json`` prints (NumPy arrays and floats; NaN for missing values).

    Keys: ``family``, ``parameters``, ``status`` (code), ``message``,
    ``mass_max`` (``mass_msun``, ``radius_km``, ``central_pressure_dyn_cm2``,
    ``max_sound_speed_sq``), ``at_mass`` (one object per requested mass:
    ``requested_mass_msun``, ``reason`` (null, or why the stable branch has
    no star of that mass) and the star's quantities), ``sequence`` (one
    array per quantity) and ``twin_branch`` (null, or the same keys for the
    second stable branch plus ``mass_min``, its lightest star); stars are
    keyed by the canonical names of every star quantity of
    :mod:`tovforge.quantities`.
    """
    names = [q.name for q in quantities.star_quantities()]
    requested = seq.requested_mass_msun if seq.requested_mass_msun is not None else ()
    tw = seq.twin
    twin = None
    if tw is not None:
        twin = {
            "mass_max": _maximum_json(tw.mass_max),
            "mass_min": {k: float(tw.mass_min.value(k)[0]) for k in ("mass_msun", "radius_km",
                                                                    "central_pressure_dyn_cm2")},
            "at_mass": _at_mass_json(requested, tw.at_mass, tw.at_mass_reasons(requested)),
            "sequence": {k: tw.branch.value(k) for k in names},
        }
    return {
        "family": seq.family,
        "parameters": seq.parameters,
        "status": int(seq.status),
        "message": seq.message,
        "mass_max": _maximum_json(seq.mass_max),
        "at_mass": _at_mass_json(requested, seq.at_mass, seq.at_mass_reasons()),
        "sequence": {k: seq.branch.value(k) for k in names},
        "twin_branch": twin,
    }


_PROFILE = (  # field of tovforge.solve.StarProfile, heading, format
    ("radius_km", "r [km]", "{:.5f}"),
    ("mass_msun", "m [Msun]", "{:.6f}"),
    ("pressure_dyn_cm2", "p [dyn/cm^2]", "{:.5e}"),
    ("energy_density_g_cm3", "e/c^2 [g/cm^3]", "{:.5e}"),
    ("rest_mass_density_g_cm3", "rho [g/cm^3]", "{:.5e}"),
    ("alpha", "alpha", "{:.6f}"),
    ("y", "y", "{:.6f}"),
)


def profile_json(prof) -> dict:
    """The interior profile of one star (a :class:`tovforge.solve.StarProfile`) as arrays by field name."""
    return {field: getattr(prof, field) for field, _, _ in _PROFILE}


def profile_text(prof) -> str:
    """The interior profile of one star as aligned text, centre to surface."""
    cols = [np.asarray(getattr(prof, field), float) for field, _, _ in _PROFILE]
    rows = [[fmt.format(float(c[i])) for (_, _, fmt), c in zip(_PROFILE, cols)] for i in range(cols[0].size)]
    return _aligned([head for _, head, _ in _PROFILE], rows)
