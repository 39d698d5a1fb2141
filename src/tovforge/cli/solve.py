"""``tovforge families`` and ``tovforge solve``: the EOS families, and one EOS solved exactly."""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Annotated, Optional

import typer

from .._jsonfile import jsonable
from ..errors import InputError
from ._common import FamilyArg, OverwriteOpt, ParametersArg, fail, make_eos, parse_float_list, run

__all__ = ["families_cmd", "solve_cmd"]


def families_cmd():
    """List the EOS families with their parameters, units and default box."""
    from .. import eos

    for fam in eos.families().values():
        typer.echo(f"{fam.name}: {fam.description}")
        typer.echo(f"    reference: {fam.reference}")
        if not fam.numeric:
            typer.echo("    parameters: path=FILE (required), columns=NAMES, units=UNITS")
            continue
        for p in fam.parameters:
            unit = "" if p.unit == "1" else f" [{p.unit}]"
            typer.echo(
                f"    {p.name:<16}{unit:<22} allowed {p.range_text():<14} demo box [{p.box[0]:g}, {p.box[1]:g}]"
                f"  {p.description}"
            )


def _keep_stars(seq, n: int):
    """``seq`` with exactly ``n`` branch stars (``--stars``), the lightest and the maximum-mass star kept.

    The solver adds the stars that locate the maximum (crowded just below it) to the ``n`` it spreads along
    the branch; the stars of the smallest spacing in ``u = sqrt(1 - M / M_max)`` are left out until ``n``
    remain, so every star shown is still an exact solve.
    """
    import dataclasses

    import numpy as np

    m = np.asarray(seq.branch.mass_msun, dtype=float)
    if not seq.success or m.size <= n:
        return seq
    u = np.sqrt(np.clip(1.0 - m / seq.mass_max.mass_msun, 0.0, None))
    keep = list(range(m.size))
    while len(keep) > n:  # a few stars (the cluster around the maximum): no hot path
        span = [u[keep[i - 1]] - u[keep[i + 1]] for i in range(1, len(keep) - 1)]
        del keep[1 + int(np.argmin(span))]
    index = np.asarray(keep)
    err = seq.error_estimate
    if err is not None:
        err = dataclasses.replace(err, relative={k: np.asarray(v)[index] for k, v in err.relative.items()})
    return dataclasses.replace(seq, branch=seq.branch.select(index), error_estimate=err)


def solve_cmd(
    family: FamilyArg,
    parameters: ParametersArg = None,
    masses: Annotated[
        Optional[str], typer.Option("--masses", help="Comma-separated masses in Msun to solve exactly.")
    ] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print one JSON object instead of text.")] = False,
    table: Annotated[
        Optional[Path], typer.Option("--table", help="Write the stable branch, and a twin branch, to this table (.csv, "
                                                     ".h5 or .npz; the format of `tovforge table sequence`).",
                                     dir_okay=False)
    ] = None,
    profile: Annotated[
        Optional[float], typer.Option("--profile", help="Also print the interior profile of the star of this mass.")
    ] = None,
    central_pressures: Annotated[
        Optional[str], typer.Option("--central-pressures", help="Comma-separated central pressures in dyn/cm^2: "
                                    "print only these stars, without the search for M_max (the way to use "
                                    "uniform-density, which has no maximum mass).")
    ] = None,
    stars: Annotated[int, typer.Option("--stars", min=8, max=2000, help="Stars shown along the stable branch, the "
                                                                     "maximum-mass star included.")] = 100,
    overwrite: OverwriteOpt = False,
):
    """Solve the stable branch of one EOS: M_max, the M-R-Lambda-I sequence, stars at given masses.

    With --central-pressures: only the stars of those central pressures (any EOS, uniform-density included).
    """
    from .. import solve, tables

    if central_pressures is not None:
        _stars_at_pressures(family, parameters or [], central_pressures, as_json,
                            others={"--masses": masses, "--table": table, "--profile": profile})
        return

    def work():
        if table is not None:
            tables.check_table_output(table, overwrite)
        eos_obj = make_eos(family, parameters or [])
        qm = parse_float_list(masses, "--masses") if masses is not None else None
        if qm is not None and any(m <= 0 for m in qm):
            raise InputError("--masses must be positive (Msun).")
        if profile is not None and not (profile > 0 and math.isfinite(profile)):
            raise InputError(f"--profile must be a positive mass in Msun. Got {profile}.")
        seq = _keep_stars(solve.solve_sequence(eos_obj, n_stars=stars, masses=qm), stars)
        prof = None
        if profile is not None and seq.success:
            if profile > seq.mass_max.mass_msun:
                typer.echo(
                    f"warning: --profile {profile:g} Msun exceeds M_max = {seq.mass_max.mass_msun:.4f} Msun; "
                    "no profile.",
                    err=True,
                )
            else:
                prof = solve.solve_star(eos_obj, mass_msun=profile)
        return eos_obj, seq, prof

    eos_obj, seq, prof = run(work, ("--overwrite",))
    if table is not None and seq.success:
        meta = tables.sequence_meta(seq, solve.SequenceSettings(), "branch")
        both, which = tables.branch_stars(seq)
        run(lambda: tables.star_table(table, both, meta, branch=which, overwrite=overwrite), ("--overwrite",))
    if as_json:
        out = tables.sequence_json(seq)
        if prof is not None:
            out["profile"] = tables.profile_json(prof)
        typer.echo(json.dumps(jsonable(out)))
    else:
        typer.echo(tables.sequence_text(seq))
        if prof is not None:
            typer.echo("")
            typer.echo(f"interior of the {profile:g} Msun star (centre to surface):")
            typer.echo(tables.profile_text(prof))
    if not seq.success and family == "uniform-density":  # physics, not a failure: M grows up to Buchdahl's limit
        fail(f"{family} {' '.join(parameters or [])}: a star of uniform density has no maximum mass (M grows "
             "with the central pressure until 2M/R reaches 8/9), so there is no stable branch to end; ask for "
             "stars with --central-pressures P1,P2,... (dyn/cm^2), or in Python solve.solve_stars(eos, "
             "[solve.central_enthalpy(eos, pressure_dyn_cm2=p) for p in ...])"
             + (f" ({table} was not written)" if table is not None else "") + ".")
    if not seq.success:  # allowed parameters, but no stable star: nothing this EOS can be used for
        fail(f"{family} {' '.join(parameters or [])}: no stable branch found ({seq.message.rstrip('.')}); each "
             "parameter is allowed, but together they give no star the solver can compute: choose other values"
             + (f" ({table} was not written)" if table is not None else "") + ".")


def _stars_at_pressures(family, parameters, text, as_json, others):
    """``tovforge solve --central-pressures``: the stars of the given central pressures, text or JSON."""
    from .. import solve, tables

    def work():
        given = [name for name, value in others.items() if value is not None]
        if given:
            raise InputError(f"--central-pressures cannot be combined with {', '.join(given)} (those need the "
                             "stable branch and M_max); leave them out.")
        eos_obj = make_eos(family, parameters)
        pressures = parse_float_list(text, "--central-pressures")
        bad = [p for p in pressures if not (p > 0 and math.isfinite(p))]
        if bad:
            raise InputError(f"--central-pressures must be positive pressures in dyn/cm^2. Got {bad[0]}.")
        h_c = [solve.central_enthalpy(eos_obj, pressure_dyn_cm2=p) for p in pressures]  # a few: no hot path
        return eos_obj, pressures, solve.solve_stars(eos_obj, h_c)

    eos_obj, pressures, stars = run(work)
    if as_json:
        from .. import quantities

        # the keys of `solve --json`'s "sequence": the canonical names of the star quantities
        out = {"family": family, "parameters": getattr(eos_obj, "parameters", {}),
               "central_pressure_dyn_cm2": pressures,
               "stars": {q.name: stars.value(q.name) for q in quantities.star_quantities()}}
        typer.echo(json.dumps(jsonable(out)))
        return
    typer.echo(f"EOS      {family}  {'  '.join(parameters)}")
    typer.echo(f"stars at the requested central pressures ({len(pressures)}; no search for M_max):")
    typer.echo(tables.stars_text(stars))
