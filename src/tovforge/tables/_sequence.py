"""Sequence tables: the stable branch of one EOS, star by star, and its twin branch if it has one."""

from __future__ import annotations

import time
import warnings
from dataclasses import replace

import numpy as np

from ..errors import InputError
from ._stars import BRANCH_COLUMN, STAR_COLUMNS, TWIN, joined_stars, sequence_meta, star_table
from ._write import TableSummary, check_table_output

__all__ = ["SEQUENCE_COLUMNS", "sequence_table", "central_enthalpies"]

#: Columns of a sequence table: one per star quantity of :mod:`tovforge.quantities`, then ``branch``.
SEQUENCE_COLUMNS = (*STAR_COLUMNS, BRANCH_COLUMN)


def central_enthalpies(eos, pressures_dyn_cm2, h_lo: float, h_hi: float) -> np.ndarray:
    """Central pseudo-enthalpies at which ``eos`` has the given pressures.

    Vectorised bisection in ``ln h`` on ``[h_lo, h_hi]`` (the pressure grows
    monotonically with ``h``), run to the resolution of doubles.

    Parameters
    ----------
    eos : tovforge.eos.EOS
    pressures_dyn_cm2 : ndarray, shape (n,)
        Targets between ``p(h_lo)`` and ``p(h_hi)``.
    h_lo, h_hi : float
        Bracket.

    Returns
    -------
    ndarray, shape (n,)
    """
    target = np.asarray(pressures_dyn_cm2, float)
    lo = np.full(target.shape, np.log(h_lo))
    hi = np.full(target.shape, np.log(h_hi))
    for _ in range(64):  # the bracket shrinks below one ulp of ln h well within 64 halvings
        mid = 0.5 * (lo + hi)
        below = eos.evaluate(np.exp(mid)).pressure_dyn_cm2 < target
        lo = np.where(below, mid, lo)
        hi = np.where(below, hi, mid)
    return np.exp(0.5 * (lo + hi))


def _evenly_in_log_pressure(eos, low, high, points: int, steps):
    """``points`` stars with central pressures evenly spaced in ``ln p_c`` from star ``low`` to ``high`` (both kept)."""
    from ..solve import solve_stars

    h_lo = float(low.central_pseudo_enthalpy[0])
    h_hi = float(high.central_pseudo_enthalpy[0])
    p = np.exp(np.linspace(np.log(float(low.central_pressure_dyn_cm2[0])),
                           np.log(float(high.central_pressure_dyn_cm2[0])), int(points)))
    h_c = central_enthalpies(eos, p[1:-1], h_lo, h_hi)
    return solve_stars(eos, np.concatenate([[h_lo], h_c, [h_hi]]), steps)  # the end stars exactly, not re-found


def sequence_table(out, eos, *, points: int | None = 100, masses=None, min_mass_msun: float = 0.3,
                   command: str | None = None, overwrite: bool = False) -> TableSummary:
    """Write the stable branch of one EOS, and its twin branch if it has one, as a table.

    Parameters
    ----------
    out : path-like
        ``.csv``, ``.h5`` or ``.npz``.
    eos : tovforge.eos.EOS
    points : int, optional
        Number of stars, at central pressures spaced evenly in ``ln p_c``
        from the lightest star (about ``min_mass_msun``) to the maximum-mass
        star, both included; as many again on a twin branch, from its
        minimum to its maximum.  Ignored when ``masses`` are given.
    masses : array_like, optional
        Gravitational masses in Msun: one exact star per mass on the stable
        branch (NaN rows above M_max or below the lightest star the EOS
        supports), then a row for each mass the twin branch also has; adds a
        ``target_mass`` column.
    min_mass_msun : float
        Lightest star of the ``points`` mode (the solver's branch start).
    command : str, optional
        Command line recorded in the provenance (default ``sys.argv``).
    overwrite : bool
        Replace an existing file.

    Returns
    -------
    TableSummary
        The column ``branch`` marks the stable branch (1) and the twin
        branch (2).

    Raises
    ------
    InputError
        If the EOS has no maximum mass (nothing to tabulate) or the options
        are out of range.
    """
    from ..solve import SequenceSettings, solve_sequence

    t0 = time.monotonic()
    check_table_output(out, overwrite)
    settings = SequenceSettings(low_mass_msun=float(min_mass_msun))
    notes = []
    if masses is not None:
        masses = np.asarray(masses, float).ravel()
        if masses.size == 0 or not np.all(np.isfinite(masses) & (masses > 0)):
            raise InputError("masses must be positive numbers (Msun).")
        # start the branch below the lightest request, so that light stars are found too
        settings = replace(settings, low_mass_msun=min(settings.low_mass_msun, 0.9 * float(masses.min())))
    elif points is None or not 2 <= int(points) <= 100_000:
        raise InputError(f"points must be an integer in [2, 100000]. Got {points}.")
    if not 0 < min_mass_msun < 3:
        raise InputError(f"min_mass_msun must be in (0, 3) Msun. Got {min_mass_msun:g}.")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # masses without a stable star become a note below
        seq = solve_sequence(eos, n_stars=16, masses=masses, settings=settings)
    if not seq.success:
        raise InputError(f"{eos.family.name} {_params_text(eos)}: no stable branch to tabulate ({seq.message})")
    mm = seq.mass_max
    tw = seq.twin
    if masses is None:
        parts = [_evenly_in_log_pressure(eos, seq.branch.select(slice(0, 1)), mm.star, points, settings.steps)]
        if tw is not None:
            parts.append(_evenly_in_log_pressure(eos, tw.mass_min, tw.mass_max.star, points, settings.steps))
        target = None
        mode = "points"
    else:
        parts = [seq.at_mass]
        target = [masses]
        mode = "masses"
        missing = masses[~np.isfinite(seq.at_mass.mass_msun)]
        if missing.size:
            notes.append(f"no stable star at {', '.join(f'{m:g}' for m in missing)} Msun "
                         f"(M_max = {mm.mass_msun:.4f} Msun; lightest branch star "
                         f"{float(seq.branch.mass_msun[0]):.3g} Msun): NaN rows.")
        if tw is not None:
            on_twin = np.isfinite(tw.at_mass.mass_msun)
            parts.append(tw.at_mass.select(on_twin))
            target.append(masses[on_twin])
            if on_twin.any():
                notes.append(f"twin stars at {', '.join(f'{m:g}' for m in masses[on_twin])} Msun: rows of branch "
                             f"{TWIN} (the twin branch reaches {tw.mass_min_msun:.4f}..{tw.mass_max.mass_msun:.4f} "
                             "Msun).")
    stars, branch = joined_stars(parts)
    summary = star_table(out, stars, sequence_meta(seq, settings, mode, command),
                         target_mass=None if target is None else np.concatenate(target), branch=branch,
                         overwrite=overwrite)
    return replace(summary, seconds=time.monotonic() - t0, notes=tuple(notes))


def _params_text(eos) -> str:
    return " ".join(f"{k}={v:g}" if isinstance(v, float) else f"{k}={v}" for k, v in eos.parameters.items())
